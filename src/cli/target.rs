//! Target and oracle options shared by `hunt`, `replay` and `shrink`.

use std::path::Path;
use std::time::Duration;

use anyhow::Context;
use tracewalk::harness::{
    CommandLine, ExitCodes, Limits, Oracles, ReplyFraming, StatusClass, TargetKind, TargetSpec, Timing,
    resolve_tcp,
};
use tracewalk::model::Compiled;
use tracewalk::read::{self, Format};
use tracewalk::trace::Trace;

use super::parse_duration_ms;

/// How to run the target and what counts as a failure.
#[derive(Debug, Clone, clap::Args)]
pub struct TargetArgs {
    /// Run this program once per trace ('PROGRAM ARGS', split by tracewalk, no shell). The
    /// trace goes to its stdin, or to an owner-only temporary file whose path replaces {file}.
    #[arg(long, value_name = "COMMAND", conflicts_with = "tcp", required_unless_present = "tcp")]
    exec: Option<String>,
    /// With --exec: write the messages one at a time and read a reply after each.
    #[arg(long, requires = "exec")]
    per_message: bool,
    /// Send each trace over one TCP connection to HOST:PORT (loopback only unless
    /// --allow-remote).
    #[arg(long, value_name = "HOST:PORT")]
    tcp: Option<String>,
    /// With --tcp: start this server, wait for the port, restart it after a crash; {port} is
    /// replaced by the port (each parallel job gets the next port).
    #[arg(long, value_name = "COMMAND", requires = "tcp")]
    spawn: Option<String>,
    /// Allow a --tcp address that is not on this machine.
    #[arg(long, requires = "tcp")]
    allow_remote: bool,
    /// How replies end: http (one response per request) or lines; default from the model,
    /// else guessed from the trace.
    #[arg(long, value_name = "FRAMING")]
    framing: Option<String>,
    /// Longest run of one trace; the target's whole process group is then killed (a hang).
    #[arg(long, default_value = "5s", value_name = "DURATION", value_parser = parse_duration_ms)]
    timeout: u64,
    /// Longest wait for a reply to one message (a silent peer is then told the input ended,
    /// and gets as long again before it counts as hanging).
    #[arg(long, default_value = "250ms", value_name = "DURATION", value_parser = parse_duration_ms)]
    reply_timeout: u64,
    /// Line replies end after this long without output (unless --reply-end matched).
    #[arg(long, default_value = "20ms", value_name = "DURATION", value_parser = parse_duration_ms)]
    reply_settle: u64,
    /// Regex matching the last line of a line reply; the reply ends as soon as it matches.
    #[arg(long, value_name = "REGEX")]
    reply_end: Option<String>,
    /// How long a --spawn server may take to accept connections.
    #[arg(long, default_value = "10s", value_name = "DURATION", value_parser = parse_duration_ms)]
    start_timeout: u64,
    /// Exit codes that are not failures: a list such as 0,1, or any.
    #[arg(long, default_value = "0", value_name = "CODES")]
    ok_exit: String,
    /// A failure when the target's stderr has a line matching this regex.
    #[arg(long, value_name = "REGEX")]
    fail_stderr: Option<String>,
    /// A failure when a reply (or stdout) has a line matching this regex.
    #[arg(long, value_name = "REGEX")]
    fail_reply: Option<String>,
    /// A failure when an HTTP reply's status is in this class, e.g. 5xx, 50x, 503 (repeatable).
    #[arg(long, value_name = "CLASS")]
    fail_status: Vec<String>,
    /// Address-space limit of the target, e.g. 512M; running out is reported as `memory`.
    #[arg(long, value_name = "SIZE")]
    memory_limit: Option<String>,
    /// Set an environment variable for the target, e.g. RUST_BACKTRACE=0 (repeatable).
    #[arg(long, value_name = "NAME=VALUE")]
    env: Vec<String>,
    /// Bytes kept from the start and from the end of each output stream.
    #[arg(long, default_value = "32K", value_name = "SIZE")]
    keep_output: String,
}

/// Parses sizes like `512M`, `32K`, `2G` or a bare number of bytes.
pub fn parse_size(text: &str) -> anyhow::Result<u64> {
    let t = text.trim();
    let split = t.find(|c: char| !c.is_ascii_digit()).unwrap_or(t.len());
    let (num, unit) = t.split_at(split);
    let n: u64 = num.parse().with_context(|| format!("bad size `{text}`"))?;
    let scale = match unit.to_ascii_uppercase().as_str() {
        "" | "B" => 1,
        "K" | "KB" | "KIB" => 1 << 10,
        "M" | "MB" | "MIB" => 1 << 20,
        "G" | "GB" | "GIB" => 1 << 30,
        _ => anyhow::bail!("bad size unit in `{text}` (use K, M or G)"),
    };
    n.checked_mul(scale).with_context(|| format!("size `{text}` is too large"))
}

fn regex(option: &str, pattern: &str) -> anyhow::Result<regex::bytes::Regex> {
    regex::bytes::Regex::new(pattern)
        .map_err(|e| anyhow::anyhow!("{option}: bad regex `{pattern}`: {}", first_line(&e.to_string())))
}

fn first_line(text: &str) -> String {
    text.lines().find(|l| !l.trim().is_empty()).unwrap_or("").trim().to_string()
}

fn command(option: &str, text: &str) -> anyhow::Result<CommandLine> {
    CommandLine::parse(text).map_err(|e| anyhow::anyhow!("{option}: {e}"))
}

impl TargetArgs {
    /// Builds the target spec; `format` decides the reply framing unless --framing says.
    pub fn spec(&self, format: Format) -> anyhow::Result<TargetSpec> {
        let kind = match (&self.exec, &self.tcp) {
            (Some(text), _) => {
                TargetKind::Exec { command: command("--exec", text)?, per_message: self.per_message }
            }
            (None, Some(addr)) => TargetKind::Tcp {
                addr: resolve_tcp(addr, self.allow_remote).map_err(|e| anyhow::anyhow!("--tcp {e}"))?,
                spawn: self.spawn.as_deref().map(|t| command("--spawn", t)).transpose()?,
                start_timeout: Duration::from_millis(self.start_timeout),
            },
            (None, None) => anyhow::bail!("give a target: --exec COMMAND or --tcp HOST:PORT"),
        };
        let format = match self.framing.as_deref() {
            None => format,
            Some("http") => Format::Http,
            Some("lines") => Format::Lines,
            Some(other) => anyhow::bail!("--framing: `{other}` is not http or lines"),
        };
        let reply_end = self.reply_end.as_deref().map(|p| regex("--reply-end", p)).transpose()?;
        let memory_bytes =
            self.memory_limit.as_deref().map(parse_size).transpose().context("--memory-limit")?;
        let oracles = Oracles {
            ok_exit: self.ok_exit.parse::<ExitCodes>().map_err(|e| anyhow::anyhow!("--ok-exit: {e}"))?,
            stderr_pattern: self.fail_stderr.as_deref().map(|p| regex("--fail-stderr", p)).transpose()?,
            reply_pattern: self.fail_reply.as_deref().map(|p| regex("--fail-reply", p)).transpose()?,
            status_classes: self
                .fail_status
                .iter()
                .map(|c| c.parse::<StatusClass>().map_err(|e| anyhow::anyhow!("--fail-status: {e}")))
                .collect::<anyhow::Result<_>>()?,
            memory_limited: memory_bytes.is_some(),
        };
        let mut spec = TargetSpec::new(kind, ReplyFraming::for_format(format, reply_end));
        spec.timing = Timing {
            run_timeout: Duration::from_millis(self.timeout.max(1)),
            reply_timeout: Duration::from_millis(self.reply_timeout.max(1)),
            reply_settle: Duration::from_millis(self.reply_settle.max(1)),
        };
        spec.oracles = oracles;
        spec.limits = Limits { memory_bytes };
        spec.env = self
            .env
            .iter()
            .map(|kv| match kv.split_once('=') {
                Some((k, v)) if !k.is_empty() => Ok((k.to_string(), v.to_string())),
                _ => Err(anyhow::anyhow!("--env: `{kv}` is not NAME=VALUE")),
            })
            .collect::<anyhow::Result<_>>()?;
        spec.capture_limit = usize::try_from(parse_size(&self.keep_output).context("--keep-output")?)
            .context("--keep-output")?
            .max(64);
        Ok(spec)
    }

    /// The options as arguments, to rerun the same target with `tracewalk replay TRACE ARGS…`.
    /// `format` is written out as --framing so the replay needs no model.
    pub fn replay_args(&self, format: Format) -> Vec<String> {
        let mut a: Vec<String> = Vec::new();
        let mut push = |name: &str, value: Option<String>| {
            a.push(name.to_string());
            if let Some(v) = value {
                a.push(v);
            }
        };
        if let Some(e) = &self.exec {
            push("--exec", Some(e.clone()));
        }
        if self.per_message {
            push("--per-message", None);
        }
        if let Some(t) = &self.tcp {
            push("--tcp", Some(t.clone()));
        }
        if let Some(s) = &self.spawn {
            push("--spawn", Some(s.clone()));
        }
        if self.allow_remote {
            push("--allow-remote", None);
        }
        let framing = self
            .framing
            .clone()
            .unwrap_or_else(|| if format == Format::Http { "http" } else { "lines" }.into());
        push("--framing", Some(framing));
        let ms = |v: u64| format!("{v}ms");
        push("--timeout", Some(ms(self.timeout)));
        push("--reply-timeout", Some(ms(self.reply_timeout)));
        push("--reply-settle", Some(ms(self.reply_settle)));
        if let Some(r) = &self.reply_end {
            push("--reply-end", Some(r.clone()));
        }
        if self.spawn.is_some() {
            push("--start-timeout", Some(ms(self.start_timeout)));
        }
        push("--ok-exit", Some(self.ok_exit.clone()));
        if let Some(r) = &self.fail_stderr {
            push("--fail-stderr", Some(r.clone()));
        }
        if let Some(r) = &self.fail_reply {
            push("--fail-reply", Some(r.clone()));
        }
        for c in &self.fail_status {
            push("--fail-status", Some(c.clone()));
        }
        if let Some(m) = &self.memory_limit {
            push("--memory-limit", Some(m.clone()));
        }
        for kv in &self.env {
            push("--env", Some(kv.clone()));
        }
        push("--keep-output", Some(self.keep_output.clone()));
        a
    }
}

/// A trace file, or raw traffic (one session) read as the model reads (or as `format` says,
/// else sniffed). Returns the trace (raw traffic gets a header naming its source) and the
/// format its messages are in.
pub fn load_input(
    path: &Path,
    model: Option<&Compiled>,
    format: Option<&str>,
) -> anyhow::Result<(Trace, Format)> {
    let bytes = std::fs::read(path).with_context(|| format!("{}: cannot read", path.display()))?;
    if bytes.starts_with(b"%tracewalk-trace") {
        let text = String::from_utf8(bytes)
            .map_err(|_| anyhow::anyhow!("{}: trace is not UTF-8", path.display()))?;
        let trace = Trace::parse(&text).map_err(|e| anyhow::anyhow!("{}: {e}", path.display()))?;
        let format = match (format, model) {
            (Some(f), _) => f.parse::<Format>().map_err(anyhow::Error::msg)?,
            (None, Some(m)) => m.tokenizer.format(),
            (None, None) => match trace.messages.first() {
                Some(m)
                    if read::http::looks_like_start_line(
                        m.bytes.split(|&b| b == b'\n').next().unwrap_or(b""),
                    ) =>
                {
                    Format::Http
                }
                _ => Format::Lines,
            },
        };
        return Ok((trace, format));
    }
    let mut options = model.map(|m| m.settings.read.clone()).unwrap_or_default();
    if let Some(f) = format {
        options.format = Some(f.parse::<Format>().map_err(anyhow::Error::msg)?);
    }
    let what = path.display().to_string();
    let source = read::Source { path: path.to_path_buf(), bytes };
    let corpus = read::Reader::new(&options)?.keeping_binary().read(vec![source], &what)?;
    anyhow::ensure!(
        corpus.sessions.len() == 1,
        "{what}: holds {} sessions; give one session per file",
        corpus.sessions.len()
    );
    let session = &corpus.sessions[0];
    let messages = session
        .frames
        .iter()
        .filter(|f| f.role == read::Role::Request)
        .map(|f| tracewalk::trace::TraceMessage::new(corpus.bytes(session, f).to_vec()))
        .collect();
    let trace = Trace { header: vec![("source".into(), what)], messages };
    Ok((trace, corpus.format))
}

/// The messages of a trace as byte strings, without those marked `reply` (what the target
/// answered when the trace was stored; never sent).
pub fn messages_of(trace: &Trace) -> Vec<Vec<u8>> {
    trace.messages.iter().filter(|m| !m.is_reply()).map(|m| m.bytes.clone()).collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn sizes() {
        assert_eq!(parse_size("512M").unwrap(), 512 << 20);
        assert_eq!(parse_size("32k").unwrap(), 32 << 10);
        assert_eq!(parse_size("77").unwrap(), 77);
        assert!(parse_size("5T").is_err());
    }
}
