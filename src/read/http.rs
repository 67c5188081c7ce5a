//! HTTP/1.1 framing per RFC 9112: start line, header fields, then a body delimited by
//! Content-Length or the chunked transfer coding (§6–7). Requests and responses may alternate in
//! one stream; responses become [`Role::Reply`] frames.
//!
//! Header parsing is delegated to the `httparse` crate; this module only decides where each
//! message ends. A message that cannot be framed is counted and the reader resynchronises at the
//! next line that looks like a start line.

use super::{Frame, MAX_MESSAGE_BYTES, Role, Skips};

const MAX_HEADERS: usize = 128;

/// True when `line` looks like a request line (`METHOD SP target SP HTTP/d.d`) or a status line.
pub fn looks_like_start_line(line: &[u8]) -> bool {
    let line = super::trim_line_end(line);
    if let Some(rest) = line.strip_prefix(b"HTTP/") {
        return rest.len() >= 7
            && rest[0].is_ascii_digit()
            && rest[1] == b'.'
            && rest[2].is_ascii_digit()
            && rest[3] == b' '
            && rest[4..7].iter().all(u8::is_ascii_digit);
    }
    let mut parts = line.splitn(3, |&b| b == b' ');
    let (Some(method), Some(target), Some(version)) = (parts.next(), parts.next(), parts.next()) else {
        return false;
    };
    !method.is_empty()
        && method.iter().all(|b| b.is_ascii_alphanumeric() || b"!#$%&'*+-.^_`|~".contains(b))
        && !target.is_empty()
        && version.len() == 8
        && version.starts_with(b"HTTP/")
        && version[5].is_ascii_digit()
        && version[6] == b'.'
        && version[7].is_ascii_digit()
}

enum Outcome {
    /// A complete message of this many bytes.
    Message(usize, Role),
    /// The stream ends inside a message.
    Truncated,
    /// Not a valid message here.
    Invalid,
}

/// Frames a stream of HTTP/1.1 messages.
pub fn frame_http(bytes: &[u8], skips: &mut Skips) -> Vec<Frame> {
    let mut frames = Vec::new();
    let mut pos = 0;
    loop {
        // RFC 9112 §2.2: empty lines before a start line are ignored.
        while bytes[pos..].starts_with(b"\r\n") || bytes[pos..].starts_with(b"\n") {
            pos += if bytes[pos] == b'\r' { 2 } else { 1 };
        }
        if pos >= bytes.len() {
            break;
        }
        match message_len(&bytes[pos..]) {
            Outcome::Message(len, role) => {
                if len > MAX_MESSAGE_BYTES {
                    skips.add("HTTP messages over 1 MiB", 1);
                } else {
                    frames.push(Frame { range: pos..pos + len, role });
                }
                pos += len;
            }
            Outcome::Truncated => {
                skips.add("truncated HTTP messages", 1);
                break;
            }
            Outcome::Invalid => {
                skips.add("unparseable HTTP messages", 1);
                match next_start_line(bytes, pos) {
                    Some(next) => pos = next,
                    None => break,
                }
            }
        }
    }
    frames
}

/// Position of the next line after `from` that looks like a start line.
fn next_start_line(bytes: &[u8], from: usize) -> Option<usize> {
    let mut pos = from;
    loop {
        let nl = memchr::memchr(b'\n', &bytes[pos..])?;
        pos += nl + 1;
        let end = memchr::memchr(b'\n', &bytes[pos..]).map_or(bytes.len(), |i| pos + i + 1);
        if looks_like_start_line(&bytes[pos..end]) {
            return Some(pos);
        }
    }
}

fn message_len(buf: &[u8]) -> Outcome {
    let mut headers = [httparse::EMPTY_HEADER; MAX_HEADERS];
    let is_response = buf.starts_with(b"HTTP/");
    let (head_len, role, status) = if is_response {
        let mut resp = httparse::Response::new(&mut headers);
        match resp.parse(buf) {
            Ok(httparse::Status::Complete(n)) => (n, Role::Reply, resp.code),
            Ok(httparse::Status::Partial) => return Outcome::Truncated,
            Err(_) => return Outcome::Invalid,
        }
    } else {
        let mut req = httparse::Request::new(&mut headers);
        match req.parse(buf) {
            Ok(httparse::Status::Complete(n)) => (n, Role::Request, None),
            Ok(httparse::Status::Partial) => return Outcome::Truncated,
            Err(_) => return Outcome::Invalid,
        }
    };
    let framing = match body_framing(&headers) {
        Ok(f) => f,
        Err(InvalidFraming) => return Outcome::Invalid,
    };
    let body = &buf[head_len..];
    let body_len = match framing {
        BodyFraming::Chunked => match chunked_len(body) {
            Ok(Some(n)) => n,
            Ok(None) => return Outcome::Truncated,
            Err(InvalidFraming) => return Outcome::Invalid,
        },
        BodyFraming::Length(n) => {
            if body.len() < n {
                return Outcome::Truncated;
            }
            n
        }
        BodyFraming::None => {
            // RFC 9112 §6.3: a request without framing has no body. A response without framing
            // runs to the end of the connection; in a recorded stream we stop at the next
            // start line instead.
            let no_body = role == Role::Request
                || status.is_some_and(|s| (100..200).contains(&s) || s == 204 || s == 304);
            if no_body {
                0
            } else {
                next_start_line(buf, head_len.saturating_sub(1)).map_or(buf.len(), |p| p) - head_len
            }
        }
    };
    Outcome::Message(head_len + body_len, role)
}

/// The framing fields of a message contradict RFC 9112 (conflicting lengths, bad chunk syntax…).
#[derive(Debug, Clone, Copy, PartialEq, Eq, thiserror::Error)]
#[error("invalid HTTP message framing")]
pub struct InvalidFraming;

/// How the body of a message is delimited.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum BodyFraming {
    None,
    Length(usize),
    Chunked,
}

/// Reads the framing from header fields (RFC 9112 §6.3): chunked wins over Content-Length;
/// differing Content-Length values are invalid.
pub fn body_framing(headers: &[httparse::Header<'_>]) -> Result<BodyFraming, InvalidFraming> {
    let mut length: Option<usize> = None;
    let mut chunked = false;
    for h in headers.iter().take_while(|h| !h.name.is_empty()) {
        if h.name.eq_ignore_ascii_case("transfer-encoding") {
            let last = h.value.rsplit(|&b| b == b',').next().unwrap_or(b"");
            chunked = last.trim_ascii().eq_ignore_ascii_case(b"chunked");
            if !chunked {
                return Err(InvalidFraming);
            }
        } else if h.name.eq_ignore_ascii_case("content-length") {
            let text = std::str::from_utf8(h.value).map_err(|_| InvalidFraming)?.trim();
            if text.is_empty() || !text.bytes().all(|b| b.is_ascii_digit()) {
                return Err(InvalidFraming);
            }
            let n: usize = text.parse().map_err(|_| InvalidFraming)?;
            if length.is_some_and(|l| l != n) {
                return Err(InvalidFraming);
            }
            length = Some(n);
        }
    }
    Ok(if chunked {
        BodyFraming::Chunked
    } else if let Some(n) = length {
        BodyFraming::Length(n)
    } else {
        BodyFraming::None
    })
}

/// Length of a chunked body including the last chunk and trailer section. `Ok(None)`: truncated.
pub fn chunked_len(body: &[u8]) -> Result<Option<usize>, InvalidFraming> {
    let mut pos = 0;
    loop {
        let (consumed, size) = match httparse::parse_chunk_size(&body[pos..]) {
            Ok(httparse::Status::Complete(x)) => x,
            Ok(httparse::Status::Partial) => return Ok(None),
            Err(_) => return Err(InvalidFraming),
        };
        pos += consumed;
        if size == 0 {
            break;
        }
        let size = usize::try_from(size).map_err(|_| InvalidFraming)?;
        if size > MAX_MESSAGE_BYTES {
            return Err(InvalidFraming);
        }
        if body.len() < pos + size + 2 {
            return Ok(None);
        }
        pos += size;
        if &body[pos..pos + 2] != b"\r\n" {
            return Err(InvalidFraming);
        }
        pos += 2;
    }
    // Trailer section: field lines until an empty line.
    loop {
        let Some(nl) = memchr::memchr(b'\n', &body[pos..]) else {
            return Ok(None);
        };
        let line = &body[pos..pos + nl + 1];
        pos += nl + 1;
        if line == b"\r\n" || line == b"\n" {
            return Ok(Some(pos));
        }
    }
}

/// The payload of a chunked body (chunk data concatenated), or `None` if malformed.
pub fn dechunk(body: &[u8]) -> Option<Vec<u8>> {
    let mut out = Vec::with_capacity(body.len());
    let mut pos = 0;
    loop {
        let (consumed, size) = match httparse::parse_chunk_size(&body[pos..]) {
            Ok(httparse::Status::Complete(x)) => x,
            _ => return None,
        };
        pos += consumed;
        if size == 0 {
            return Some(out);
        }
        let size = usize::try_from(size).ok()?;
        let data = body.get(pos..pos.checked_add(size)?)?;
        out.extend_from_slice(data);
        pos += size + 2;
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn frames(bytes: &[u8]) -> (Vec<(Role, &[u8])>, Skips) {
        let mut skips = Skips::default();
        let f = frame_http(bytes, &mut skips);
        (f.into_iter().map(|f| (f.role, &bytes[f.range])).collect(), skips)
    }

    // Framing rules from RFC 9112 §6.3 (Content-Length, chunked) and §7.1 (chunk syntax).
    #[test]
    fn frames_requests_and_responses_with_both_body_framings() {
        let stream = b"POST /a HTTP/1.1\r\nHost: x.example\r\nContent-Length: 3\r\n\r\nabc\
HTTP/1.1 201 Created\r\nContent-Length: 2\r\n\r\nok\
\r\nPUT /b HTTP/1.1\r\nHost: x.example\r\nTransfer-Encoding: chunked\r\n\r\n3\r\nabc\r\n1\r\nd\r\n0\r\n\r\n\
GET /c HTTP/1.1\r\nHost: x.example\r\n\r\n";
        let (f, skips) = frames(stream);
        assert_eq!(skips.total(), 0);
        assert_eq!(f.len(), 4);
        assert_eq!(f[0].0, Role::Request);
        assert!(f[0].1.ends_with(b"\r\n\r\nabc"));
        assert_eq!(f[1].0, Role::Reply);
        assert!(f[2].1.ends_with(b"0\r\n\r\n"));
        assert!(f[3].1.starts_with(b"GET /c"));
    }

    #[test]
    fn truncated_and_garbage_are_counted_and_skipped() {
        let (f, skips) = frames(b"POST /a HTTP/1.1\r\nContent-Length: 10\r\n\r\nabc");
        assert!(f.is_empty());
        assert_eq!(skips.by_reason["truncated HTTP messages"], 1);
        let (f, skips) = frames(b"\x00\x01garbage\r\nGET /ok HTTP/1.1\r\nHost: a\r\n\r\n");
        assert_eq!(f.len(), 1);
        assert_eq!(skips.by_reason["unparseable HTTP messages"], 1);
    }

    #[test]
    fn conflicting_content_lengths_are_invalid() {
        let (f, _) = frames(b"POST /a HTTP/1.1\r\nContent-Length: 1\r\nContent-Length: 2\r\n\r\nab");
        assert!(f.is_empty());
    }

    #[test]
    fn dechunks() {
        assert_eq!(dechunk(b"3\r\nabc\r\n1;x=y\r\nd\r\n0\r\n\r\n").unwrap(), b"abcd");
    }
}
