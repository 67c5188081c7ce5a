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

    /// How many replies the peer owes once it has received `sent` (everything written on the
    /// stream so far). HTTP: one per complete request, and one per unparseable head that is
    /// complete (a server answers 400); a request whose body is not all there yet (a
    /// Content-Length larger than the body, say), or trailing bytes without an empty line, are
    /// owed nothing: the peer rightly waits for the rest. Lines: one per complete line (a line
    /// reply may still be empty).
    pub fn replies_due(&self, sent: &[u8]) -> usize {
        match self {
            ReplyFraming::Http => {
                let mut skips = Skips::default();
                let frames = frame_http(sent, &mut skips);
                let requests = frames.iter().filter(|f| f.role == Role::Request).count();
                let unparseable =
                    skips.by_reason.get("unparseable HTTP messages").copied().unwrap_or(0) as usize;
                let tail = &sent[frames.last().map_or(0, |f| f.range.end)..];
                let has_empty_line =
                    |b: &[u8]| b.windows(4).any(|w| w == b"\r\n\r\n") || b.windows(2).any(|w| w == b"\n\n");
                let open_tail = !tail.iter().all(u8::is_ascii_whitespace) && !has_empty_line(tail);
                requests + unparseable - usize::from(open_tail && unparseable > 0)
            }
            ReplyFraming::Lines { .. } => memchr::memchr_iter(b'\n', sent).count(),
        }
    }

    /// True when `buf` holds only whole replies (nothing half-read).
    fn whole(&self, buf: &[u8]) -> bool {
        match self {
            ReplyFraming::Http => {
                let frames = frame_http(buf, &mut Skips::default());
                frames.last().is_some_and(|f| f.range.end == buf.len())
                    || buf.iter().all(u8::is_ascii_whitespace)
            }
            ReplyFraming::Lines { .. } => true,
        }
    }

    fn complete(&self, buf: &[u8], count: usize) -> bool {
        match self {
            ReplyFraming::Http => {
                frame_http(buf, &mut Skips::default()).iter().filter(|f| f.role == Role::Reply).count()
                    >= count
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

/// Reads the reply to one message (`count` HTTP responses, or line output) from `source`,
/// keeping at most `limit` bytes (the rest is drained and dropped), never waiting past
/// `deadline`.
pub(crate) fn read_reply(
    source: &mut impl ChunkSource,
    framing: &ReplyFraming,
    timing: &Timing,
    deadline: Instant,
    limit: usize,
    count: usize,
) -> Reply {
    read_more(source, framing, timing, deadline, limit, count, Vec::new())
}

/// After the caller ended the input (half-closed a connection, closed stdin) because a reply
/// was silent or stalled: reads on from what `first` holds. A peer that now answers, or closes
/// without leaving a reply half-written, was waiting for input; one that stays silent hangs.
pub(crate) fn read_after_end_of_input(
    source: &mut impl ChunkSource,
    framing: &ReplyFraming,
    timing: &Timing,
    deadline: Instant,
    limit: usize,
    count: usize,
    first: Reply,
) -> Reply {
    let after = read_more(source, framing, timing, deadline, limit, count, first.bytes);
    match after.end {
        ReplyEnd::Closed if after.bytes.is_empty() => Reply { bytes: after.bytes, end: ReplyEnd::NotDue },
        _ => after,
    }
}

fn read_more(
    source: &mut impl ChunkSource,
    framing: &ReplyFraming,
    timing: &Timing,
    deadline: Instant,
    limit: usize,
    count: usize,
    so_far: Vec<u8>,
) -> Reply {
    let mut seen = so_far.len();
    let mut bytes = so_far;
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
                if framing.complete(&bytes, count) {
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
            Chunk::Closed => {
                let end = if seen > bytes.len() || !framing.whole(&bytes) {
                    ReplyEnd::Cut
                } else {
                    ReplyEnd::Closed
                };
                return Reply { bytes, end };
            }
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
        let r = read_reply(&mut s, &ReplyFraming::Http, &timing(), far, 1 << 16, 1);
        assert_eq!(r.end, ReplyEnd::Complete);
        assert_eq!(r.bytes, b"HTTP/1.1 200 OK\r\nContent-Length: 4\r\n\r\nabcd");
    }

    #[test]
    fn line_reply_ends_on_pattern_or_close() {
        let framing = ReplyFraming::Lines { end: Some(Regex::new("^OK").unwrap()) };
        let far = Instant::now() + Duration::from_secs(5);
        let mut s = Script(vec![Chunk::Data(b"VAL 1\n".to_vec()), Chunk::Data(b"OK done\n".to_vec())]);
        assert_eq!(read_reply(&mut s, &framing, &timing(), far, 1 << 16, 1).end, ReplyEnd::Complete);
        let mut s = Script(vec![Chunk::Data(b"VAL 1\n".to_vec())]);
        let r = read_reply(&mut s, &framing, &timing(), far, 3, 1);
        assert_eq!(
            (r.end, r.bytes.as_slice()),
            (ReplyEnd::Cut, &b"VAL"[..]),
            "bytes beyond the limit were dropped"
        );
        let mut s = Script(vec![Chunk::Data(b"HTTP/1.1 400 Bad\r\nContent-Length: 0\r\n\r\n".to_vec())]);
        let r = read_reply(&mut s, &ReplyFraming::Http, &timing(), far, 1 << 16, 2);
        assert_eq!(r.end, ReplyEnd::Closed, "answered, then closed: nothing was cut");
        let mut s = Script(vec![Chunk::Data(b"HTTP/1.1 200 OK\r\nContent-Length: 9\r\n\r\nab".to_vec())]);
        assert_eq!(read_reply(&mut s, &ReplyFraming::Http, &timing(), far, 1 << 16, 1).end, ReplyEnd::Cut);
    }

    #[test]
    fn replies_are_due_only_for_complete_requests() {
        let h = ReplyFraming::Http;
        let get = b"GET /a HTTP/1.1\r\nHost: x\r\n\r\n".to_vec();
        assert_eq!(h.replies_due(&get), 1);
        let short_body = b"POST /b HTTP/1.1\r\nContent-Length: 9\r\n\r\nabc".to_vec();
        assert_eq!(h.replies_due(&[get.clone(), short_body.clone()].concat()), 1);
        assert_eq!(h.replies_due(&[get.clone(), short_body, b"defghi".to_vec()].concat()), 2);
        assert_eq!(h.replies_due(b"BROKEN\r\n\r\n"), 1);
        assert_eq!(
            h.replies_due(&[get.clone(), b"}".to_vec()].concat()),
            1,
            "an open tail is still arriving"
        );
        let lines = ReplyFraming::Lines { end: None };
        assert_eq!(lines.replies_due(b"PING\nSET a"), 1);
    }

    #[test]
    fn after_the_end_of_input_a_waiting_peer_is_told_from_a_hanging_one() {
        let far = Instant::now() + Duration::from_secs(5);
        let one = b"HTTP/1.1 200 OK\r\nContent-Length: 0\r\n\r\n".to_vec();
        let stalled = Reply { bytes: one.clone(), end: ReplyEnd::Stalled };
        let mut s = Script(vec![Chunk::Data(b"HTTP/1.1 400 Bad\r\nContent-Length: 0\r\n\r\n".to_vec())]);
        let r =
            read_after_end_of_input(&mut s, &ReplyFraming::Http, &timing(), far, 1 << 16, 2, stalled.clone());
        assert_eq!(r.end, ReplyEnd::Complete, "the second reply came once the input ended");
        let mut s = Script(vec![]);
        let r = read_after_end_of_input(&mut s, &ReplyFraming::Http, &timing(), far, 1 << 16, 2, stalled);
        assert_eq!(r.end, ReplyEnd::Closed, "it answered what it could parse, then closed");
        let silent = Reply { bytes: Vec::new(), end: ReplyEnd::Silent };
        let r = read_after_end_of_input(
            &mut Script(vec![]),
            &ReplyFraming::Http,
            &timing(),
            far,
            1 << 16,
            1,
            silent,
        );
        assert_eq!(r.end, ReplyEnd::NotDue, "it was only waiting for input");
        let half = Reply { bytes: b"HTTP/1.1 200 OK\r\nContent-Le".to_vec(), end: ReplyEnd::Stalled };
        let r = read_after_end_of_input(
            &mut Script(vec![]),
            &ReplyFraming::Http,
            &timing(),
            far,
            1 << 16,
            1,
            half,
        );
        assert_eq!(r.end, ReplyEnd::Cut);
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
        let r = read_reply(&mut rx_only, &ReplyFraming::Http, &timing(), far, 16, 1);
        assert_eq!(r.end, ReplyEnd::Silent);
        assert!(start.elapsed() >= Duration::from_millis(30));
    }
}
