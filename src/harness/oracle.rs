//! Oracles: what counts as a failure, and the signature that names it.
//!
//! Checked in this order, first match wins: the run timed out (the process group was killed);
//! the process hit the memory limit; it died by a signal; it exited with a code not accepted;
//! stderr matched a pattern; a reply's HTTP status is in a failing class; a reply (or stdout)
//! matched a pattern; a reply never came or was cut off.
//!
//! The location part of a signature is a Rust panic location (`file:line:col`) when the output
//! holds one, else the first line that looks like an error, normalised: numbers become `N`, long
//! hex runs `H`, so that a pointer or a counter in a message does not split one bug into many.

use std::fmt::Write as _;
use std::time::Duration;

use regex::bytes::Regex;

use super::Failure;
use super::process::Captured;
use super::sys::signal_name;

/// How a process (or the server of a TCP target) ended, as far as the run saw.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ProcessEnd {
    Exited(i32),
    Signaled(i32),
    /// Killed by tracewalk at the run deadline.
    TimedOut,
    /// Still running (a server that outlives the run), or no process was involved.
    Running,
}

impl ProcessEnd {
    pub fn from_status(status: std::process::ExitStatus) -> ProcessEnd {
        use std::os::unix::process::ExitStatusExt;
        match (status.code(), status.signal()) {
            (Some(c), _) => ProcessEnd::Exited(c),
            (None, Some(s)) => ProcessEnd::Signaled(s),
            (None, None) => ProcessEnd::Running,
        }
    }

    fn describe(self) -> String {
        match self {
            ProcessEnd::Exited(c) => format!("exit {c}"),
            ProcessEnd::Signaled(s) => format!("killed by {}", signal_name(s)),
            ProcessEnd::TimedOut => "timed out (process group killed)".into(),
            ProcessEnd::Running => "running".into(),
        }
    }
}

/// How reading one reply ended.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ReplyEnd {
    /// The framing says the reply is complete (a whole HTTP response, a line matching the end
    /// pattern).
    Complete,
    /// Line replies: output paused for the settle time.
    Quiet,
    /// Nothing arrived within the reply timeout, not even after the end of input was signalled
    /// (a hang).
    Silent,
    /// Part of a reply arrived, then nothing more within the reply timeout.
    Stalled,
    /// The stream ended (connection closed, process exited) with no reply left half-read.
    Closed,
    /// The stream ended in the middle of a reply.
    Cut,
    /// The message did not complete a request, so no reply was due (the peer waits for the
    /// rest, e.g. after a Content-Length larger than the body).
    NotDue,
}

/// One reply to one message.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Reply {
    pub bytes: Vec<u8>,
    pub end: ReplyEnd,
}

/// Everything a process run showed.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Observation {
    pub end: ProcessEnd,
    pub stdout: Captured,
    pub stderr: Captured,
    /// Replies by message (per-message and TCP targets); shorter than the trace when the
    /// stream closed early.
    pub replies: Vec<Reply>,
    /// Whether replies must arrive (HTTP: every request gets a response).
    pub replies_required: bool,
    pub elapsed: Duration,
}

impl Observation {
    pub fn new(end: ProcessEnd) -> Observation {
        Observation {
            end,
            stdout: Captured::default(),
            stderr: Captured::default(),
            replies: Vec::new(),
            replies_required: false,
            elapsed: Duration::ZERO,
        }
    }

    /// A readable record of the run, for storing beside a finding.
    pub fn transcript(&self) -> Vec<u8> {
        let mut out = Vec::new();
        out.extend_from_slice(
            format!("end: {} after {} ms\n", self.end.describe(), self.elapsed.as_millis()).as_bytes(),
        );
        for (i, r) in self.replies.iter().enumerate() {
            out.extend_from_slice(
                format!("--- reply {} ({:?}, {} bytes)\n", i + 1, r.end, r.bytes.len()).as_bytes(),
            );
            out.extend_from_slice(&r.bytes);
            if !r.bytes.ends_with(b"\n") && !r.bytes.is_empty() {
                out.push(b'\n');
            }
        }
        for (name, c) in [("stdout", &self.stdout), ("stderr", &self.stderr)] {
            if c.is_empty() {
                continue;
            }
            out.extend_from_slice(format!("--- {name} ({} bytes)\n", c.total).as_bytes());
            let bytes = c.bytes();
            out.extend_from_slice(&bytes);
            if !bytes.ends_with(b"\n") {
                out.push(b'\n');
            }
        }
        out
    }
}

/// Exit codes that count as a normal end.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum ExitCodes {
    Only(Vec<i32>),
    /// Any exit code is fine (only signals, timeouts and patterns fail).
    Any,
}

impl std::str::FromStr for ExitCodes {
    type Err = String;
    /// `0`, `0,1,3`, or `any`.
    fn from_str(s: &str) -> Result<Self, Self::Err> {
        if s.trim() == "any" {
            return Ok(ExitCodes::Any);
        }
        s.split(',')
            .map(|p| {
                p.trim()
                    .parse::<i32>()
                    .map_err(|_| format!("bad exit code `{p}` (expected numbers or `any`)"))
            })
            .collect::<Result<Vec<_>, _>>()
            .map(ExitCodes::Only)
    }
}

/// A range of HTTP status codes: `5xx`, `50x`, `503`.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct StatusClass {
    pub low: u16,
    pub high: u16,
}

impl StatusClass {
    pub fn contains(&self, code: u16) -> bool {
        (self.low..=self.high).contains(&code)
    }
}

impl std::fmt::Display for StatusClass {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        let (lo, hi) = (self.low.to_string(), self.high.to_string());
        let text: String = lo.chars().zip(hi.chars()).map(|(a, b)| if a == b { a } else { 'x' }).collect();
        f.write_str(&text)
    }
}

impl std::str::FromStr for StatusClass {
    type Err = String;
    fn from_str(s: &str) -> Result<Self, Self::Err> {
        let t = s.trim().to_ascii_lowercase();
        let ok = t.len() == 3
            && t.as_bytes()[0].is_ascii_digit()
            && t.bytes().all(|b| b.is_ascii_digit() || b == b'x')
            && !t.trim_end_matches('x').contains('x');
        if !ok {
            return Err(format!("bad status class `{s}` (expected e.g. 5xx, 50x or 503)"));
        }
        let low = t.replace('x', "0").parse().expect("digits");
        let high = t.replace('x', "9").parse().expect("digits");
        Ok(StatusClass { low, high })
    }
}

/// The failure checks of a process target.
#[derive(Debug, Clone)]
pub struct Oracles {
    pub ok_exit: ExitCodes,
    /// stderr matching this fails the run.
    pub stderr_pattern: Option<Regex>,
    /// A reply (or, for whole-trace targets, stdout) matching this fails the run.
    pub reply_pattern: Option<Regex>,
    /// A reply whose HTTP status falls in one of these classes fails the run.
    pub status_classes: Vec<StatusClass>,
    /// Set when the target runs under a memory limit: deaths that look like allocation
    /// failure are reported as `memory`.
    pub memory_limited: bool,
}

impl Default for Oracles {
    fn default() -> Self {
        Oracles {
            ok_exit: ExitCodes::Only(vec![0]),
            stderr_pattern: None,
            reply_pattern: None,
            status_classes: Vec::new(),
            memory_limited: false,
        }
    }
}

impl Oracles {
    /// The failure the observation shows, if any.
    pub fn judge(&self, o: &Observation) -> Option<Failure> {
        let stderr = o.stderr.bytes();
        let crash = |kind: String| {
            let (location, detail) = locate(&stderr);
            Failure { kind, location, detail }
        };
        match o.end {
            ProcessEnd::TimedOut => {
                return Some(Failure {
                    kind: "timeout".into(),
                    location: String::new(),
                    detail: String::new(),
                });
            }
            ProcessEnd::Signaled(s) => {
                if self.memory_limited && looks_out_of_memory(&stderr) {
                    return Some(crash("memory".into()));
                }
                return Some(crash(signal_name(s)));
            }
            ProcessEnd::Exited(c) => {
                let accepted = match &self.ok_exit {
                    ExitCodes::Any => true,
                    ExitCodes::Only(codes) => codes.contains(&c),
                };
                if !accepted {
                    if self.memory_limited && looks_out_of_memory(&stderr) {
                        return Some(crash("memory".into()));
                    }
                    return Some(crash(format!("exit {c}")));
                }
            }
            ProcessEnd::Running => {}
        }
        if let Some(re) = &self.stderr_pattern
            && let Some(line) = matching_line(re, &stderr)
        {
            return Some(Failure { kind: "stderr match".into(), location: normalise(&line), detail: line });
        }
        if !self.status_classes.is_empty() {
            for r in &o.replies {
                if let Some(code) = http_status(&r.bytes)
                    && let Some(class) = self.status_classes.iter().find(|c| c.contains(code))
                {
                    let line = first_line(&r.bytes);
                    return Some(Failure {
                        kind: format!("status {class}"),
                        location: normalise(&line),
                        detail: line,
                    });
                }
            }
        }
        if let Some(re) = &self.reply_pattern {
            let stdout = o.stdout.bytes();
            let found = o
                .replies
                .iter()
                .find_map(|r| matching_line(re, &r.bytes))
                .or_else(|| matching_line(re, &stdout));
            if let Some(line) = found {
                return Some(Failure {
                    kind: "reply match".into(),
                    location: normalise(&line),
                    detail: line,
                });
            }
        }
        if o.replies_required {
            // A peer may close a connection at any time (RFC 9112 §9.6); it fails only by
            // staying silent on an open connection or by cutting a reply short.
            for r in &o.replies {
                let kind = match r.end {
                    ReplyEnd::Silent => "no reply",
                    ReplyEnd::Stalled | ReplyEnd::Cut => "cut reply",
                    ReplyEnd::Closed | ReplyEnd::Complete | ReplyEnd::Quiet | ReplyEnd::NotDue => continue,
                };
                return Some(Failure { kind: kind.into(), location: String::new(), detail: String::new() });
            }
        }
        None
    }
}

/// A panic location, else the first error-looking line (normalised), and that line as written.
pub fn locate(output: &[u8]) -> (String, String) {
    static PANIC: std::sync::OnceLock<Regex> = std::sync::OnceLock::new();
    static ERROR: std::sync::OnceLock<Regex> = std::sync::OnceLock::new();
    let panic = PANIC.get_or_init(|| {
        // Rust ≥ 1.73: "thread 'main' (123) panicked at src/x.rs:4:5:"; earlier: "panicked at 'msg', src/x.rs:4:5".
        Regex::new(r"panicked at (?:'.*', )?([^\s:'][^\s:]*:\d+:\d+)").expect("valid")
    });
    let error = ERROR.get_or_init(|| {
        Regex::new(r"(?i)error|fatal|panic|abort|assert|fault|overflow|exception|sanitizer|failed|denied")
            .expect("valid")
    });
    let text = strip_ansi(output);
    let lines: Vec<&[u8]> = text.split(|&b| b == b'\n').collect();
    for (i, line) in lines.iter().enumerate() {
        if let Some(c) = panic.captures(line) {
            let location = String::from_utf8_lossy(&c[1]).into_owned();
            let message =
                lines.get(i + 1).map(|l| String::from_utf8_lossy(l).trim().to_string()).unwrap_or_default();
            return (format!("panicked at {location}"), message);
        }
    }
    let chosen = lines
        .iter()
        .find(|l| error.is_match(l))
        .or_else(|| lines.iter().find(|l| !l.iter().all(u8::is_ascii_whitespace)));
    match chosen {
        Some(line) => {
            let line = String::from_utf8_lossy(line).trim().to_string();
            (normalise(&line), line)
        }
        None => (String::new(), String::new()),
    }
}

/// Numbers become `N`, hex runs of 6+ characters `H`, runs of spaces one space; at most 160
/// characters.
pub fn normalise(line: &str) -> String {
    static HEX: std::sync::OnceLock<regex::Regex> = std::sync::OnceLock::new();
    static NUM: std::sync::OnceLock<regex::Regex> = std::sync::OnceLock::new();
    let hex = HEX.get_or_init(|| regex::Regex::new(r"\b(0x)?[0-9a-fA-F]{6,}\b").expect("valid"));
    let num = NUM.get_or_init(|| regex::Regex::new(r"[0-9]+").expect("valid"));
    let step = hex.replace_all(line.trim(), "H");
    let step = num.replace_all(&step, "N");
    let mut out = String::new();
    for word in step.split_whitespace() {
        if !out.is_empty() {
            out.push(' ');
        }
        out.push_str(word);
    }
    if out.chars().count() > 160 {
        out = out.chars().take(160).collect();
    }
    out
}

fn strip_ansi(bytes: &[u8]) -> Vec<u8> {
    let mut out = Vec::with_capacity(bytes.len());
    let mut i = 0;
    while i < bytes.len() {
        if bytes[i] == 0x1b && bytes.get(i + 1) == Some(&b'[') {
            i += 2;
            while i < bytes.len() && !(0x40..=0x7e).contains(&bytes[i]) {
                i += 1;
            }
            i += 1;
            continue;
        }
        out.push(bytes[i]);
        i += 1;
    }
    out
}

fn looks_out_of_memory(stderr: &[u8]) -> bool {
    static OOM: std::sync::OnceLock<Regex> = std::sync::OnceLock::new();
    OOM.get_or_init(|| {
        Regex::new(r"(?i)memory allocation of \d+ bytes failed|out of memory|bad_alloc|cannot allocate memory|capacity overflow")
            .expect("valid")
    })
    .is_match(stderr)
}

fn matching_line(re: &Regex, bytes: &[u8]) -> Option<String> {
    bytes
        .split(|&b| b == b'\n')
        .find(|l| re.is_match(l))
        .map(|l| String::from_utf8_lossy(l).trim().to_string())
}

fn first_line(bytes: &[u8]) -> String {
    let line = bytes.split(|&b| b == b'\n').next().unwrap_or(b"");
    String::from_utf8_lossy(line).trim().to_string()
}

/// The status code of an HTTP response.
pub fn http_status(reply: &[u8]) -> Option<u16> {
    let rest = reply.strip_prefix(b"HTTP/")?;
    let space = rest.iter().position(|&b| b == b' ')?;
    let code = rest.get(space + 1..space + 4)?;
    std::str::from_utf8(code).ok()?.parse().ok()
}

/// Writes a one-line description of a failure for people.
pub fn describe(f: &Failure) -> String {
    let mut s = f.signature();
    if !f.detail.is_empty() && !s.contains(&f.detail) {
        let _ = write!(s, " ({})", f.detail);
    }
    s
}

#[cfg(test)]
mod tests {
    use super::*;

    fn captured(text: &str) -> Captured {
        Captured { head: text.as_bytes().to_vec(), tail: Vec::new(), total: text.len() as u64 }
    }

    #[test]
    fn finds_panic_locations_in_both_formats() {
        let new = "thread 'main' (4719) panicked at examples/x.rs:12:9:\nindex out of bounds\nnote: …";
        assert_eq!(
            locate(new.as_bytes()),
            ("panicked at examples/x.rs:12:9".into(), "index out of bounds".into())
        );
        let old = "thread 'main' panicked at 'boom', src/lib.rs:3:5\n";
        assert_eq!(locate(old.as_bytes()).0, "panicked at src/lib.rs:3:5");
        let c = "starting\nERROR: bad pointer 0x7ffd1234abcd at step 17\n";
        assert_eq!(locate(c.as_bytes()).0, "ERROR: bad pointer H at step N");
    }

    #[test]
    fn judges_in_order() {
        let oracles = Oracles {
            stderr_pattern: Some(Regex::new("corrupt").unwrap()),
            status_classes: vec!["5xx".parse().unwrap()],
            ..Oracles::default()
        };
        let mut o = Observation::new(ProcessEnd::Exited(0));
        assert_eq!(oracles.judge(&o), None);
        o.stderr = captured("warning: corrupt block 12\n");
        assert_eq!(oracles.judge(&o).unwrap().signature(), "stderr match: warning: corrupt block N");
        o.end = ProcessEnd::Signaled(11);
        assert_eq!(oracles.judge(&o).unwrap().kind, "SIGSEGV");
        o.end = ProcessEnd::TimedOut;
        assert_eq!(oracles.judge(&o).unwrap().signature(), "timeout");
        let mut o = Observation::new(ProcessEnd::Running);
        o.replies.push(Reply { bytes: b"HTTP/1.1 503 Busy\r\n\r\n".to_vec(), end: ReplyEnd::Complete });
        assert_eq!(oracles.judge(&o).unwrap().signature(), "status 5xx: HTTP/N.N N Busy");
    }

    #[test]
    fn exit_codes_and_classes_parse() {
        assert_eq!("0,3".parse::<ExitCodes>().unwrap(), ExitCodes::Only(vec![0, 3]));
        assert_eq!("any".parse::<ExitCodes>().unwrap(), ExitCodes::Any);
        assert!("x".parse::<ExitCodes>().is_err());
        let c: StatusClass = "5xx".parse().unwrap();
        assert!(c.contains(500) && c.contains(599) && !c.contains(499));
        assert_eq!(c.to_string(), "5xx");
        assert_eq!("503".parse::<StatusClass>().unwrap().to_string(), "503");
        assert!("5x3".parse::<StatusClass>().is_err());
        assert_eq!(http_status(b"HTTP/1.1 404 Not Found\r\n"), Some(404));
    }
}
