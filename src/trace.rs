//! Traces: sequences of messages, and their readable, replayable text form.
//!
//! The text form (our own design) is line-oriented. Header lines start with `%`; each message
//! is a block opened by an `@` line carrying its number and annotations; block lines are escaped
//! fragments of the message (see [`crate::escape`]), joined without the file's own newlines, so
//! content line breaks are always written as `\n` (and `\r`) escapes:
//!
//! ```text
//! %tracewalk-trace 1
//! %model 3f2a9b1c0d9e4f11
//! %seed 7
//! %mode plausible
//!
//! @1 | 2.31 bits
//! GET /v1/products?page=2 HTTP/1.1\r\n
//! Host: api.crumbwell.example\r\n
//! \r\n
//! @2 | 14.02 bits | rare | hostile:1:int-max
//! …
//! @end
//! ```
//!
//! A fragment that would start with `@` or `%`, or end with a space or tab, has that byte
//! hex-escaped so that editors and the parser cannot mistake it. Replay is byte-exact:
//! `parse(write(t)) == t` for every trace.

use thiserror::Error;

use crate::escape;

/// One message of a trace with its annotations.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct TraceMessage {
    pub bytes: Vec<u8>,
    /// −log2 of the message's probability under the model, if known.
    pub surprise: Option<f64>,
    /// Short labels without spaces, e.g. `rare`, `novel`, `hostile:2:int-max`, `reply`.
    pub marks: Vec<String>,
}

impl TraceMessage {
    pub fn new(bytes: Vec<u8>) -> TraceMessage {
        TraceMessage { bytes, surprise: None, marks: Vec::new() }
    }

    /// True for a message marked `reply`: what the other side answers, never sent.
    pub fn is_reply(&self) -> bool {
        self.marks.iter().any(|m| m == "reply")
    }
}

/// A trace: header fields (ordered key/value pairs) and messages.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct Trace {
    pub header: Vec<(String, String)>,
    pub messages: Vec<TraceMessage>,
}

/// Why a trace text could not be read.
#[derive(Debug, Error, PartialEq)]
pub enum TraceError {
    #[error("line {line}: {problem}")]
    Syntax { line: usize, problem: String },
    #[error("not a tracewalk trace (it must start with `%tracewalk-trace`)")]
    NotATrace,
    #[error("trace format {0} is newer than this tracewalk reads (1)")]
    Newer(u32),
}

/// Version of the trace text format.
pub const TRACE_FORMAT_VERSION: u32 = 1;

impl Trace {
    /// The value of a header field.
    pub fn get(&self, key: &str) -> Option<&str> {
        self.header.iter().find(|(k, _)| k == key).map(|(_, v)| v.as_str())
    }

    /// Sets a header field (replacing an existing one, else appending).
    pub fn set(&mut self, key: &str, value: impl Into<String>) {
        let value = value.into();
        match self.header.iter_mut().find(|(k, _)| k == key) {
            Some(e) => e.1 = value,
            None => self.header.push((key.to_string(), value)),
        }
    }

    /// The wire bytes of the whole trace: the messages sent, concatenated. Messages marked
    /// `reply` (what the other side is expected to answer) are not sent and not included.
    pub fn wire_bytes(&self) -> Vec<u8> {
        self.messages.iter().filter(|m| !m.is_reply()).flat_map(|m| m.bytes.iter().copied()).collect()
    }

    /// How many messages are sent (those not marked `reply`).
    pub fn wire_messages(&self) -> usize {
        self.messages.iter().filter(|m| !m.is_reply()).count()
    }

    /// Every message's bytes concatenated, replies included: the conversation as it would
    /// travel in both directions (readable by `learn` like a capture).
    pub fn conversation_bytes(&self) -> Vec<u8> {
        self.messages.iter().flat_map(|m| m.bytes.iter().copied()).collect()
    }

    /// The text form.
    pub fn to_text(&self) -> String {
        let mut out = String::new();
        out.push_str(&format!("%tracewalk-trace {TRACE_FORMAT_VERSION}\n"));
        for (k, v) in &self.header {
            let v: String = v.chars().map(|c| if c == '\n' || c == '\r' { ' ' } else { c }).collect();
            out.push_str(&format!("%{k} {v}\n"));
        }
        out.push('\n');
        for (i, m) in self.messages.iter().enumerate() {
            out.push_str(&format!("@{}", i + 1));
            if let Some(s) = m.surprise {
                out.push_str(&format!(" | {s:.2} bits"));
            }
            for mark in &m.marks {
                out.push_str(" | ");
                out.push_str(&mark.replace([' ', '|', '\n', '\r'], "_"));
            }
            out.push('\n');
            write_fragments(&m.bytes, &mut out);
        }
        out.push_str("@end\n");
        out
    }

    /// Parses one trace from text.
    pub fn parse(text: &str) -> Result<Trace, TraceError> {
        let mut traces = Trace::parse_all(text)?;
        match traces.len() {
            1 => Ok(traces.remove(0)),
            0 => Err(TraceError::NotATrace),
            n => {
                Err(TraceError::Syntax { line: 1, problem: format!("{n} traces in one text; expected one") })
            }
        }
    }

    /// Parses every trace in a text (as written by `gen` to standard output).
    pub fn parse_all(text: &str) -> Result<Vec<Trace>, TraceError> {
        let mut traces = Vec::new();
        let mut current: Option<Trace> = None;
        let mut in_message = false;
        let mut ended = true;
        let syntax = |line: usize, problem: &str| TraceError::Syntax { line, problem: problem.to_string() };
        for (n, raw) in text.split('\n').enumerate() {
            let line_no = n + 1;
            let line = raw.strip_suffix('\r').unwrap_or(raw);
            if let Some(rest) = line.strip_prefix("%tracewalk-trace") {
                if !ended {
                    return Err(syntax(line_no, "new trace before `@end`"));
                }
                let version: u32 =
                    rest.trim().parse().map_err(|_| syntax(line_no, "bad trace format version"))?;
                if version > TRACE_FORMAT_VERSION {
                    return Err(TraceError::Newer(version));
                }
                if let Some(t) = current.take() {
                    traces.push(t);
                }
                current = Some(Trace::default());
                in_message = false;
                ended = false;
                continue;
            }
            let Some(trace) = current.as_mut() else {
                if line.trim().is_empty() {
                    continue;
                }
                return Err(TraceError::NotATrace);
            };
            if ended {
                if line.trim().is_empty() {
                    continue;
                }
                return Err(syntax(line_no, "text after `@end`"));
            }
            if let Some(rest) = line.strip_prefix('%') {
                if in_message {
                    return Err(syntax(line_no, "header line inside a message"));
                }
                let (k, v) = rest.split_once(' ').unwrap_or((rest, ""));
                if k.is_empty() {
                    return Err(syntax(line_no, "empty header key"));
                }
                trace.header.push((k.to_string(), v.to_string()));
            } else if let Some(rest) = line.strip_prefix('@') {
                if rest == "end" {
                    ended = true;
                    in_message = false;
                    continue;
                }
                let mut fields = rest.split(" | ");
                let number: usize = fields
                    .next()
                    .unwrap_or("")
                    .trim()
                    .parse()
                    .map_err(|_| syntax(line_no, "bad message number"))?;
                if number != trace.messages.len() + 1 {
                    return Err(syntax(line_no, "messages must be numbered 1, 2, 3, …"));
                }
                let mut m = TraceMessage::default();
                for f in fields {
                    let f = f.trim();
                    if let Some(bits) = f.strip_suffix(" bits") {
                        m.surprise = Some(bits.parse().map_err(|_| syntax(line_no, "bad surprise value"))?);
                    } else if f.contains(|c: char| c.is_whitespace() || c == '|') {
                        return Err(syntax(line_no, "an annotation is one word (or `N bits`)"));
                    } else if !f.is_empty() {
                        m.marks.push(f.to_string());
                    }
                }
                trace.messages.push(m);
                in_message = true;
            } else if in_message {
                let m = trace.messages.last_mut().expect("in a message");
                escape::unescape_into(line, &mut m.bytes).map_err(|e| syntax(line_no, &e.to_string()))?;
            } else if !line.trim().is_empty() {
                return Err(syntax(line_no, "text outside a message"));
            }
        }
        if !ended {
            return Err(syntax(text.split('\n').count(), "missing `@end` (truncated trace?)"));
        }
        if let Some(t) = current {
            traces.push(t);
        }
        Ok(traces)
    }
}

/// Writes a message as escaped fragment lines, breaking after each LF.
fn write_fragments(bytes: &[u8], out: &mut String) {
    for piece in bytes.split_inclusive(|&b| b == b'\n') {
        let mut text = escape::escape(piece);
        if text.starts_with('@') || text.starts_with('%') {
            let first = text.remove(0);
            text.insert_str(0, &format!("\\x{:02x}", first as u8));
        }
        if text.ends_with(' ') || text.ends_with('\t') {
            let last = text.pop().expect("non-empty");
            text.push_str(&format!("\\x{:02x}", last as u8));
        }
        out.push_str(&text);
        out.push('\n');
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn sample() -> Trace {
        Trace {
            header: vec![("model".into(), "abc".into()), ("seed".into(), "7".into())],
            messages: vec![
                TraceMessage {
                    bytes: b"GET / HTTP/1.1\r\nHost: a.example\r\n\r\n".to_vec(),
                    surprise: Some(2.5),
                    marks: vec![],
                },
                TraceMessage {
                    bytes: b"@odd %start trailing \t".to_vec(),
                    surprise: None,
                    marks: vec!["rare".into(), "hostile:1:nul".into()],
                },
                TraceMessage { bytes: (0..=255u8).collect(), surprise: Some(40.0), marks: vec![] },
                TraceMessage { bytes: Vec::new(), surprise: None, marks: vec![] },
            ],
        }
    }

    #[test]
    fn round_trips_byte_exactly() {
        let t = sample();
        let text = t.to_text();
        assert_eq!(Trace::parse(&text).unwrap(), t);
        assert!(
            text.contains("@2 | rare | hostile:1:nul\n\\x40odd %start trailing \\t\n")
                || text.contains("\\x40odd")
        );
    }

    #[test]
    fn several_traces_in_one_text() {
        let text = sample().to_text() + &sample().to_text();
        assert_eq!(Trace::parse_all(&text).unwrap().len(), 2);
    }

    #[test]
    fn damaged_traces_are_errors_with_a_line() {
        let text = sample().to_text();
        let cut = &text[..text.len() - 6];
        assert!(matches!(Trace::parse(cut), Err(TraceError::Syntax { .. })));
        assert_eq!(Trace::parse("hello"), Err(TraceError::NotATrace));
        assert_eq!(Trace::parse("%tracewalk-trace 9\n@end\n"), Err(TraceError::Newer(9)));
        let bad = text.replace("@2", "@5");
        assert!(Trace::parse(&bad).unwrap_err().to_string().contains("numbered"));
    }
}
