//! Stage 1: bytes → messages grouped into sessions.
//!
//! A reader never interprets a message beyond framing it: it finds where each message starts and
//! ends in its source, whether it is a request (something a client sends, which the chains learn)
//! or a reply, and which session it belongs to. Bytes stay in the [`Source`] buffers; frames are
//! ranges into them, so a 200 MB log costs one buffer and a few bytes per message.
//!
//! Contract: reading never panics and never silently drops data. Every part that cannot be used
//! is counted in [`Skips`] with a reason; an error is returned only when nothing usable remains
//! or a path cannot be read at all.

mod frame;
pub mod http;
mod manifest;
pub mod time;

use std::collections::BTreeMap;
use std::ops::Range;
use std::path::{Path, PathBuf};

use serde::{Deserialize, Serialize};
use thiserror::Error;

pub use frame::frame_lines;
pub use http::{BodyFraming, InvalidFraming, chunked_len, dechunk, frame_http};
pub use manifest::{CorpusManifest, MANIFEST_NAME, options_from_manifests};

/// The wire format of a corpus.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Format {
    /// One message per line (logs, text protocols); LF or CRLF; the terminator is part of the message.
    Lines,
    /// HTTP/1.1 messages framed per RFC 9112; one stream is one session.
    Http,
    /// One JSON text (RFC 8259) per line.
    Jsonl,
}

impl Format {
    pub fn name(self) -> &'static str {
        match self {
            Format::Lines => "lines",
            Format::Http => "http",
            Format::Jsonl => "jsonl",
        }
    }
}

impl std::str::FromStr for Format {
    type Err = String;
    fn from_str(s: &str) -> Result<Self, Self::Err> {
        match s {
            "lines" => Ok(Format::Lines),
            "http" => Ok(Format::Http),
            "jsonl" => Ok(Format::Jsonl),
            other => Err(format!("unknown format `{other}` (expected lines, http or jsonl)")),
        }
    }
}

/// Who sent a message.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Serialize, Deserialize)]
pub enum Role {
    /// Sent by the client side: what the chains learn and what tracewalk generates.
    Request,
    /// Sent by the system under test (HTTP responses, reply lines matching the reply pattern).
    Reply,
}

/// One message: a byte range of its source.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Frame {
    pub range: Range<usize>,
    pub role: Role,
}

/// How to frame and group input. Serialized into models so that later stages (score, shrink,
/// the fuzz mutator) read traffic exactly as learning did.
#[derive(Debug, Clone, Default, PartialEq, Eq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ReadOptions {
    /// `None` = sniff from the first source.
    #[serde(default)]
    pub format: Option<Format>,
    /// Regex whose first capture group names the session a line belongs to (lines, jsonl).
    #[serde(default)]
    pub session_key: Option<String>,
    /// Start a new session when consecutive lines of a session are further apart than this
    /// (milliseconds); needs timestamps in the lines.
    #[serde(default)]
    pub idle_gap_ms: Option<u64>,
    /// Regex marking reply lines (lines, jsonl). HTTP replies are recognised by their status line.
    #[serde(default)]
    pub reply_pattern: Option<String>,
}

/// Messages longer than this are skipped and counted, never learned.
pub const MAX_MESSAGE_BYTES: usize = 1 << 20;

/// One input file held in memory.
#[derive(Debug, Clone)]
pub struct Source {
    pub path: PathBuf,
    pub bytes: Vec<u8>,
}

/// A session: an ordered list of frames from one source.
#[derive(Debug, Clone)]
pub struct Session {
    pub source: usize,
    pub frames: Vec<Frame>,
}

/// Parts of the input that were not used, by reason. Reported to the user after learning.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct Skips {
    pub by_reason: BTreeMap<&'static str, u64>,
}

impl Skips {
    pub fn add(&mut self, reason: &'static str, n: u64) {
        if n > 0 {
            *self.by_reason.entry(reason).or_default() += n;
        }
    }
    pub fn total(&self) -> u64 {
        self.by_reason.values().sum()
    }
    pub fn merge(&mut self, other: &Skips) {
        for (reason, n) in &other.by_reason {
            self.add(reason, *n);
        }
    }
    /// One line such as `3 lines not JSON, 1 truncated HTTP message`.
    pub fn summary(&self) -> String {
        self.by_reason.iter().map(|(reason, n)| format!("{n} {reason}")).collect::<Vec<_>>().join(", ")
    }
}

/// Everything read: sources in memory, sessions as frames into them, and what was skipped.
#[derive(Debug, Clone)]
pub struct Corpus {
    pub format: Format,
    pub options: ReadOptions,
    pub sources: Vec<Source>,
    pub sessions: Vec<Session>,
    pub skips: Skips,
}

impl Corpus {
    /// The bytes of one frame.
    pub fn bytes(&self, session: &Session, frame: &Frame) -> &[u8] {
        &self.sources[session.source].bytes[frame.range.clone()]
    }

    /// Number of request messages (what the chains learn).
    pub fn request_count(&self) -> usize {
        self.sessions.iter().flat_map(|s| &s.frames).filter(|f| f.role == Role::Request).count()
    }
}

/// Errors of the read stage. Each names the path it concerns.
#[derive(Debug, Error)]
pub enum ReadError {
    #[error("{path}: cannot read: {source}")]
    Io { path: PathBuf, source: std::io::Error },
    #[error("{path}: {message}")]
    Bad { path: PathBuf, message: String },
    #[error("{what}: no usable messages{detail}")]
    NothingUsable { what: String, detail: String },
}

fn bad(path: &Path, message: impl Into<String>) -> ReadError {
    ReadError::Bad { path: path.to_path_buf(), message: message.into() }
}

/// Lists the files under `paths` (directories walked recursively, sorted by path; hidden entries
/// skipped). A directory holding a corpus manifest contributes the files the manifest includes.
pub fn list_files(paths: &[PathBuf]) -> Result<Vec<PathBuf>, ReadError> {
    let mut files = Vec::new();
    for path in paths {
        let meta = std::fs::metadata(path).map_err(|source| ReadError::Io { path: path.clone(), source })?;
        if meta.is_dir() {
            match CorpusManifest::load_in(path)? {
                Some(manifest) => files.extend(manifest.files(path)?),
                None => walk(path, &mut files)?,
            }
        } else {
            files.push(path.clone());
        }
    }
    Ok(files)
}

fn walk(dir: &Path, out: &mut Vec<PathBuf>) -> Result<(), ReadError> {
    let entries = std::fs::read_dir(dir).map_err(|source| ReadError::Io { path: dir.into(), source })?;
    let mut paths: Vec<PathBuf> = entries
        .filter_map(|e| e.ok())
        .map(|e| e.path())
        .filter(|p| !p.file_name().and_then(|n| n.to_str()).is_some_and(|n| n.starts_with('.')))
        .collect();
    paths.sort();
    for path in paths {
        let meta = std::fs::metadata(&path).map_err(|source| ReadError::Io { path: path.clone(), source })?;
        if meta.is_dir() {
            walk(&path, out)?;
        } else if meta.is_file() {
            out.push(path);
        }
    }
    Ok(())
}

/// Reads files into memory.
pub fn load_sources(files: &[PathBuf]) -> Result<Vec<Source>, ReadError> {
    files
        .iter()
        .map(|path| {
            std::fs::read(path)
                .map(|bytes| Source { path: path.clone(), bytes })
                .map_err(|source| ReadError::Io { path: path.clone(), source })
        })
        .collect()
}

/// Guesses the format from the first non-empty source.
pub fn sniff(sources: &[Source]) -> Format {
    let Some(first) = sources.iter().find(|s| !s.bytes.iter().all(u8::is_ascii_whitespace)) else {
        return Format::Lines;
    };
    let head = &first.bytes[..first.bytes.len().min(4096)];
    let start = head.iter().position(|b| !b.is_ascii_whitespace()).unwrap_or(0);
    let line_end = memchr::memchr(b'\n', &head[start..]).map_or(head.len(), |i| start + i);
    let line = &head[start..line_end];
    if http::looks_like_start_line(line) {
        return Format::Http;
    }
    if line.first() == Some(&b'{') && serde_json::from_slice::<serde::de::IgnoredAny>(line).is_ok() {
        return Format::Jsonl;
    }
    Format::Lines
}

/// Read options compiled once (regexes built), for reading many inputs the same way.
#[derive(Debug, Clone)]
pub struct Reader {
    options: ReadOptions,
    session_key: Option<regex::bytes::Regex>,
    reply: Option<regex::bytes::Regex>,
    keep_binary: bool,
}

fn compile_regex(what: &str, pattern: &str) -> Result<regex::bytes::Regex, ReadError> {
    regex::bytes::Regex::new(pattern).map_err(|e| {
        let text = e.to_string();
        let reason = text.lines().rev().find_map(|l| l.trim().strip_prefix("error: ")).unwrap_or(&text);
        bad(Path::new(what), format!("bad regex `{pattern}`: {reason}"))
    })
}

impl Reader {
    /// Compiles `options`; a bad regex is an error naming the option.
    pub fn new(options: &ReadOptions) -> Result<Reader, ReadError> {
        let session_key = match &options.session_key {
            Some(p) => {
                let re = compile_regex("--session-key", p)?;
                if re.captures_len() < 2 {
                    return Err(bad(
                        Path::new("--session-key"),
                        format!("`{p}` needs a capture group naming the session"),
                    ));
                }
                Some(re)
            }
            None => None,
        };
        let reply =
            options.reply_pattern.as_deref().map(|p| compile_regex("--reply-pattern", p)).transpose()?;
        Ok(Reader { options: options.clone(), session_key, reply, keep_binary: false })
    }

    /// A reader that reads files with NUL bytes too, for a file a user names as one session
    /// (`shrink`, `replay`: a crash file may hold any byte). Corpora skip such files as binary.
    pub fn keeping_binary(mut self) -> Reader {
        self.keep_binary = true;
        self
    }

    pub fn options(&self) -> &ReadOptions {
        &self.options
    }

    /// Reads `sources` into a corpus. `what` names the input in errors (e.g. the paths given).
    pub fn read(&self, sources: Vec<Source>, what: &str) -> Result<Corpus, ReadError> {
        let format = self.options.format.unwrap_or_else(|| sniff(&sources));
        let mut skips = Skips::default();
        let mut sessions = Vec::new();
        for (index, source) in sources.iter().enumerate() {
            if source.bytes.is_empty() {
                skips.add("empty files", 1);
                continue;
            }
            if format != Format::Http && !self.keep_binary && looks_binary(&source.bytes) {
                // Common practice (as text tools do): a NUL byte near the start marks a binary file.
                skips.add("binary files", 1);
                continue;
            }
            self.frame_source(format, index, source, &mut sessions, &mut skips);
        }
        sessions.retain(|s: &Session| s.frames.iter().any(|f| f.role == Role::Request));
        let corpus = Corpus {
            format,
            options: ReadOptions { format: Some(format), ..self.options.clone() },
            sources,
            sessions,
            skips,
        };
        if corpus.sessions.is_empty() {
            let detail = if corpus.skips.total() > 0 {
                format!(" (skipped: {})", corpus.skips.summary())
            } else {
                String::new()
            };
            return Err(ReadError::NothingUsable { what: what.to_string(), detail });
        }
        Ok(corpus)
    }

    /// Frames one byte stream as a single session (no session key, no binary check): each
    /// message with its role, in order, plus what was skipped. For inputs read back one at a time
    /// (a trace file of raw traffic, a fuzzing engine's input).
    pub fn messages(&self, bytes: &[u8]) -> (Vec<(Vec<u8>, Role)>, Skips) {
        let mut skips = Skips::default();
        let format = self.options.format.unwrap_or(Format::Lines);
        let frames = self.frames(format, bytes, &mut skips);
        (frames.into_iter().map(|f| (bytes[f.range].to_vec(), f.role)).collect(), skips)
    }

    fn frames(&self, format: Format, bytes: &[u8], skips: &mut Skips) -> Vec<Frame> {
        match format {
            Format::Http => frame_http(bytes, skips),
            Format::Lines | Format::Jsonl => {
                let mut frames = frame_lines(bytes, skips);
                if format == Format::Jsonl {
                    frames.retain(|f| {
                        let line = trim_line_end(&bytes[f.range.clone()]);
                        let ok =
                            line.is_empty() || serde_json::from_slice::<serde::de::IgnoredAny>(line).is_ok();
                        if !ok {
                            skips.add("lines not JSON", 1);
                        }
                        ok && !line.is_empty()
                    });
                }
                if let Some(reply) = &self.reply {
                    for f in &mut frames {
                        if reply.is_match(trim_line_end(&bytes[f.range.clone()])) {
                            f.role = Role::Reply;
                        }
                    }
                }
                frames
            }
        }
    }

    fn frame_source(
        &self,
        format: Format,
        index: usize,
        source: &Source,
        sessions: &mut Vec<Session>,
        skips: &mut Skips,
    ) {
        let frames = self.frames(format, &source.bytes, skips);
        if frames.is_empty() {
            return;
        }
        if format == Format::Http || (self.session_key.is_none() && self.options.idle_gap_ms.is_none()) {
            sessions.push(Session { source: index, frames });
            return;
        }
        self.group_sessions(index, &source.bytes, frames, sessions, skips);
    }

    /// Splits one source's frames into sessions by key and idle gap, in order of first
    /// appearance.
    fn group_sessions(
        &self,
        index: usize,
        bytes: &[u8],
        frames: Vec<Frame>,
        sessions: &mut Vec<Session>,
        skips: &mut Skips,
    ) {
        // key → (position in `sessions`, time of the last line)
        let mut open: BTreeMap<Vec<u8>, (usize, Option<i64>)> = BTreeMap::new();
        for frame in frames {
            let line = &bytes[frame.range.clone()];
            let key: Vec<u8> = match &self.session_key {
                Some(re) => match re.captures(line).and_then(|c| c.get(1)) {
                    Some(m) => m.as_bytes().to_vec(),
                    None => {
                        skips.add("lines without a session key", 1);
                        continue;
                    }
                },
                None => Vec::new(),
            };
            let now = self.options.idle_gap_ms.and_then(|_| time::find_timestamp_ms(line));
            let slot = open.get_mut(&key);
            let continue_session = match (&slot, self.options.idle_gap_ms) {
                (Some((_, last)), Some(gap)) => match (last, now) {
                    (Some(last), Some(now)) => now.saturating_sub(*last) <= gap as i64,
                    _ => true,
                },
                (Some(_), None) => true,
                (None, _) => false,
            };
            if continue_session {
                let (pos, last) = slot.expect("checked above");
                sessions[*pos].frames.push(frame);
                if now.is_some() {
                    *last = now;
                }
            } else {
                sessions.push(Session { source: index, frames: vec![frame] });
                open.insert(key, (sessions.len() - 1, now));
            }
        }
    }
}

/// Reads `sources` into a corpus (compiling `options` first; see [`Reader`]).
pub fn read(sources: Vec<Source>, options: &ReadOptions, what: &str) -> Result<Corpus, ReadError> {
    Reader::new(options)?.read(sources, what)
}

/// True when the first 64 KiB hold a NUL byte.
fn looks_binary(bytes: &[u8]) -> bool {
    memchr::memchr(0, &bytes[..bytes.len().min(64 << 10)]).is_some()
}

/// A line without its LF or CRLF terminator.
pub fn trim_line_end(line: &[u8]) -> &[u8] {
    let line = line.strip_suffix(b"\n").unwrap_or(line);
    line.strip_suffix(b"\r").unwrap_or(line)
}

/// Reads traffic from paths: list, load, frame. The usual entry point.
pub fn read_paths(paths: &[PathBuf], options: &ReadOptions) -> Result<Corpus, ReadError> {
    let files = list_files(paths)?;
    let what = paths.iter().map(|p| p.display().to_string()).collect::<Vec<_>>().join(", ");
    if files.is_empty() {
        return Err(ReadError::NothingUsable { what, detail: " (no files)".into() });
    }
    read(load_sources(&files)?, options, &what)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn src(name: &str, bytes: &[u8]) -> Source {
        Source { path: PathBuf::from(name), bytes: bytes.to_vec() }
    }

    #[test]
    fn sniffs_formats() {
        assert_eq!(sniff(&[src("a", b"GET / HTTP/1.1\r\nHost: a.example\r\n\r\n")]), Format::Http);
        assert_eq!(sniff(&[src("a", b"{\"a\":1}\n{\"a\":2}\n")]), Format::Jsonl);
        assert_eq!(sniff(&[src("a", b"HELLO there\n")]), Format::Lines);
        assert_eq!(sniff(&[src("a", b""), src("b", b"\n\n{\"x\":[]}\n")]), Format::Jsonl);
    }

    #[test]
    fn splits_interleaved_sessions_by_key_in_first_seen_order() {
        let log = b"c1 LOGIN\nc2 LOGIN\nc1 GET 4\nnokey here\nc2 BYE\n";
        let options = ReadOptions {
            format: Some(Format::Lines),
            session_key: Some(r"^(c\d+) ".into()),
            ..Default::default()
        };
        let corpus = read(vec![src("log", log)], &options, "log").unwrap();
        assert_eq!(corpus.sessions.len(), 2);
        let texts: Vec<Vec<&[u8]>> =
            corpus.sessions.iter().map(|s| s.frames.iter().map(|f| corpus.bytes(s, f)).collect()).collect();
        assert_eq!(texts[0], vec![&b"c1 LOGIN\n"[..], b"c1 GET 4\n"]);
        assert_eq!(texts[1], vec![&b"c2 LOGIN\n"[..], b"c2 BYE\n"]);
        assert_eq!(corpus.skips.by_reason["lines without a session key"], 1);
    }

    #[test]
    fn idle_gap_starts_new_sessions() {
        let log = b"2026-11-30T08:00:00Z a\n2026-11-30T08:00:10Z b\n2026-11-30T09:00:00Z c\n";
        let options =
            ReadOptions { format: Some(Format::Lines), idle_gap_ms: Some(60_000), ..Default::default() };
        let corpus = read(vec![src("log", log)], &options, "log").unwrap();
        let sizes: Vec<usize> = corpus.sessions.iter().map(|s| s.frames.len()).collect();
        assert_eq!(sizes, vec![2, 1]);
    }

    #[test]
    fn reply_lines_are_marked_and_sessions_of_replies_only_dropped() {
        let options = ReadOptions {
            format: Some(Format::Lines),
            reply_pattern: Some("^OK".into()),
            ..Default::default()
        };
        let corpus =
            read(vec![src("a", b"PING\nOK pong\n"), src("b", b"OK alone\n")], &options, "x").unwrap();
        assert_eq!(corpus.sessions.len(), 1);
        assert_eq!(corpus.sessions[0].frames[1].role, Role::Reply);
    }

    #[test]
    fn nothing_usable_is_an_error_naming_the_input() {
        let options = ReadOptions { format: Some(Format::Jsonl), ..Default::default() };
        let err = read(vec![src("junk.jsonl", b"not json\n")], &options, "junk.jsonl").unwrap_err();
        let text = err.to_string();
        assert!(text.starts_with("junk.jsonl: no usable messages"), "{text}");
        assert!(text.contains("1 lines not JSON"), "{text}");
    }
}
