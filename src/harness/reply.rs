//! Reading one reply: where it ends depends on the protocol.

use std::time::{Duration, Instant};

use regex::bytes::Regex;

use super::Timing;
use super::oracle::{Reply, ReplyEnd};
use crate::read::{Format, Role, Skips, frame_http};

/// How to tell that a reply is complete.
#[derive(Debug, Clone)]
pub enum ReplyFraming {
    /// One complete HTTP/1.1 response (RFC 9112 framing); every request must get one.
    Http,
    /// Lines: complete when the last line matches `end`, else when output pauses for the settle
    /// time. A message may get no reply.
    Lines { end: Option<Regex> },
}

impl ReplyFraming {
    /// The framing for traffic of `format` (HTTP for HTTP models, lines otherwise).
    pub fn for_format(format: Format, end: Option<Regex>) -> ReplyFraming {
        match format {
            Format::Http => ReplyFraming::Http,
            Format::Lines | Format::Jsonl => ReplyFraming::Lines { end },
        }
    }

    /// Whether every message must get a reply.
    pub fn required(&self) -> bool {
        matches!(self, ReplyFraming::Http)
    }

    fn complete(&self, buf: &[u8]) -> bool {
        match self {
            ReplyFraming::Http => {
                frame_http(buf, &mut Skips::default()).iter().any(|f| f.role == Role::Reply)
            }
            ReplyFraming::Lines { end: Some(re) } => {
                let Some(body) = buf.strip_suffix(b"\n") else { return false };
                let last = body.rsplit(|&b| b == b'\n').next().unwrap_or(body);
                re.is_match(last.strip_suffix(b"\r").unwrap_or(last))
            }
            ReplyFraming::Lines { end: None } => false,
        }
    }
}

/// One step of reading.
pub(crate) enum Chunk {
    Data(Vec<u8>),
    Timeout,
    Closed,
}

/// A stream of reply bytes that can be waited on.
pub(crate) trait ChunkSource {
    fn next_chunk(&mut self, wait: Duration) -> Chunk;
}

impl ChunkSource for std::sync::mpsc::Receiver<Vec<u8>> {
    fn next_chunk(&mut self, wait: Duration) -> Chunk {
        match self.recv_timeout(wait) {
            Ok(d) => Chunk::Data(d),
            Err(std::sync::mpsc::RecvTimeoutError::Timeout) => Chunk::Timeout,
            Err(std::sync::mpsc::RecvTimeoutError::Disconnected) => Chunk::Closed,
        }
    }
}

impl ChunkSource for std::net::TcpStream {
    fn next_chunk(&mut self, wait: Duration) -> Chunk {
        use std::io::Read;
        if self.set_read_timeout(Some(wait.max(Duration::from_millis(1)))).is_err() {
            return Chunk::Closed;
        }
        let mut buf = vec![0u8; 16 * 1024];
        loop {
            return match self.read(&mut buf) {
                Ok(0) => Chunk::Closed,
                Ok(n) => {
                    buf.truncate(n);
                    Chunk::Data(buf)
                }
                Err(e) if e.kind() == std::io::ErrorKind::Interrupted => continue,
                Err(e)
                    if matches!(e.kind(), std::io::ErrorKind::WouldBlock | std::io::ErrorKind::TimedOut) =>
                {
                    Chunk::Timeout
                }
                Err(_) => Chunk::Closed,
            };
        }
    }
}

/// Reads one reply from `source`, keeping at most `limit` bytes (the rest is drained and
/// dropped), never waiting past `deadline`.
pub(crate) fn read_reply(
    source: &mut impl ChunkSource,
    framing: &ReplyFraming,
    timing: &Timing,
    deadline: Instant,
    limit: usize,
) -> Reply {
    let mut bytes = Vec::new();
    let mut seen = 0usize;
    let mut last_data = Instant::now();
    loop {
        let now = Instant::now();
        let patience = match (seen, framing) {
            (0, _) | (_, ReplyFraming::Http) => timing.reply_timeout,
            (_, ReplyFraming::Lines { .. }) => timing.reply_settle,
        };
        let wait = (last_data + patience).min(deadline).saturating_duration_since(now);
        let chunk = if wait.is_zero() { Chunk::Timeout } else { source.next_chunk(wait) };
        match chunk {
            Chunk::Data(d) => {
                seen += d.len();
                let room = limit.saturating_sub(bytes.len());
                bytes.extend_from_slice(&d[..room.min(d.len())]);
                last_data = Instant::now();
                if framing.complete(&bytes) {
                    return Reply { bytes, end: ReplyEnd::Complete };
                }
            }
            Chunk::Timeout => {
                if Instant::now() < (last_data + patience).min(deadline) {
                    continue;
                }
                let end = match (seen, framing) {
                    (0, _) => ReplyEnd::Silent,
                    (_, ReplyFraming::Http) => ReplyEnd::Stalled,
                    (_, ReplyFraming::Lines { .. }) => ReplyEnd::Quiet,
                };
                return Reply { bytes, end };
            }
            Chunk::Closed => return Reply { bytes, end: ReplyEnd::Closed },
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    struct Script(Vec<Chunk>);
    impl ChunkSource for Script {
        fn next_chunk(&mut self, _wait: Duration) -> Chunk {
            if self.0.is_empty() { Chunk::Closed } else { self.0.remove(0) }
        }
    }

    fn timing() -> Timing {
        Timing {
            run_timeout: Duration::from_secs(5),
            reply_timeout: Duration::from_millis(30),
            reply_settle: Duration::from_millis(5),
        }
    }

    #[test]
    fn http_reply_completes_when_framed() {
        let mut s = Script(vec![
            Chunk::Data(b"HTTP/1.1 200 OK\r\nContent-Length: 4\r\n\r\nab".to_vec()),
            Chunk::Data(b"cd".to_vec()),
            Chunk::Data(b"extra".to_vec()),
        ]);
        let far = Instant::now() + Duration::from_secs(5);
        let r = read_reply(&mut s, &ReplyFraming::Http, &timing(), far, 1 << 16);
        assert_eq!(r.end, ReplyEnd::Complete);
        assert_eq!(r.bytes, b"HTTP/1.1 200 OK\r\nContent-Length: 4\r\n\r\nabcd");
    }

    #[test]
    fn line_reply_ends_on_pattern_or_close() {
        let framing = ReplyFraming::Lines { end: Some(Regex::new("^OK").unwrap()) };
        let far = Instant::now() + Duration::from_secs(5);
        let mut s = Script(vec![Chunk::Data(b"VAL 1\n".to_vec()), Chunk::Data(b"OK done\n".to_vec())]);
        assert_eq!(read_reply(&mut s, &framing, &timing(), far, 1 << 16).end, ReplyEnd::Complete);
        let mut s = Script(vec![Chunk::Data(b"VAL 1\n".to_vec())]);
        let r = read_reply(&mut s, &framing, &timing(), far, 3);
        assert_eq!((r.end, r.bytes.as_slice()), (ReplyEnd::Closed, &b"VAL"[..]));
    }

    #[test]
    fn silence_ends_by_timeout() {
        let mut rx_only = {
            let (tx, rx) = std::sync::mpsc::channel::<Vec<u8>>();
            std::mem::forget(tx);
            rx
        };
        let far = Instant::now() + Duration::from_secs(5);
        let start = Instant::now();
        let r = read_reply(&mut rx_only, &ReplyFraming::Http, &timing(), far, 16);
        assert_eq!(r.end, ReplyEnd::Silent);
        assert!(start.elapsed() >= Duration::from_millis(30));
    }
}
