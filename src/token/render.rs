//! Tokens and slot values back to bytes.
//!
//! Derived fields are computed here, never sampled: an HTTP Content-Length always equals the
//! length of the body written after it, chunk sizes always match their chunks, and a body
//! generated for a head without any framing field gets a Content-Length field (RFC 9112 §6.3).

use super::{Derived, Framing};

/// One part of a message to write.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Part<'a> {
    /// Literal bytes.
    Lit(&'a [u8]),
    /// A slot's value.
    Value(&'a [u8]),
    /// A derived field, computed.
    Derived(Derived),
    /// End of an HTTP head; what follows is the body.
    Body(Framing),
}

/// Deliberate damage to derived fields, for rare traffic. The default writes them correctly.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
pub struct Skew {
    /// Added to every Content-Length written (may make it disagree with the body).
    pub content_length: i64,
}

/// Writes `parts` to `out` with derived fields computed.
pub fn render<'a>(parts: impl IntoIterator<Item = Part<'a>>, out: &mut Vec<u8>) {
    render_skewed(parts, Skew::default(), out)
}

/// Like [`render`], with derived fields deliberately skewed.
pub fn render_skewed<'a>(parts: impl IntoIterator<Item = Part<'a>>, skew: Skew, out: &mut Vec<u8>) {
    let base = out.len();
    let mut body: Option<(Framing, Vec<u8>)> = None;
    let mut holes: Vec<usize> = Vec::new();
    let mut last_lit_start = out.len();
    for part in parts {
        match (part, &mut body) {
            (Part::Lit(b), None) => {
                last_lit_start = out.len();
                out.extend_from_slice(b);
            }
            (Part::Lit(b) | Part::Value(b), Some((_, payload))) => payload.extend_from_slice(b),
            (Part::Value(b), None) => out.extend_from_slice(b),
            (Part::Derived(Derived::ContentLength), None) => holes.push(out.len()),
            (Part::Derived(Derived::ContentLength), Some(_)) => {}
            (Part::Body(f), None) => body = Some((f, Vec::new())),
            (Part::Body(_), Some(_)) => {}
        }
    }
    let (framing, payload) = body.unwrap_or((Framing::Length, Vec::new()));
    let length = (payload.len() as i64 + skew.content_length).max(0).to_string();
    // Fill holes from the back so earlier offsets stay valid.
    for &at in holes.iter().rev() {
        out.splice(at..at, length.bytes());
    }
    if framing == Framing::None && !payload.is_empty() && holes.is_empty() {
        let at = last_lit_start.max(base);
        let field = format!("Content-Length: {length}\r\n");
        out.splice(at..at, field.bytes());
    }
    match framing {
        Framing::Chunked => {
            if !payload.is_empty() {
                out.extend_from_slice(format!("{:x}\r\n", payload.len()).as_bytes());
                out.extend_from_slice(&payload);
                out.extend_from_slice(b"\r\n");
            }
            out.extend_from_slice(b"0\r\n\r\n");
        }
        Framing::None | Framing::Length => out.extend_from_slice(&payload),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn content_length_follows_the_body() {
        let mut out = Vec::new();
        render(
            [
                Part::Lit(b"POST /a HTTP/1.1\r\nContent-Length: "),
                Part::Derived(Derived::ContentLength),
                Part::Lit(b"\r\n"),
                Part::Lit(b"\r\n"),
                Part::Body(Framing::Length),
                Part::Lit(b"{\"q\":"),
                Part::Value(b"12345"),
                Part::Lit(b"}"),
            ],
            &mut out,
        );
        assert_eq!(out, b"POST /a HTTP/1.1\r\nContent-Length: 11\r\n\r\n{\"q\":12345}");
    }

    #[test]
    fn chunked_bodies_get_correct_chunk_sizes() {
        let mut out = Vec::new();
        render(
            [
                Part::Lit(b"PUT /b HTTP/1.1\r\nTransfer-Encoding: chunked\r\n\r\n"),
                Part::Body(Framing::Chunked),
                Part::Value(&[b'x'; 26]),
            ],
            &mut out,
        );
        let mut expected = b"PUT /b HTTP/1.1\r\nTransfer-Encoding: chunked\r\n\r\n1a\r\n".to_vec();
        expected.extend_from_slice(&[b'x'; 26]);
        expected.extend_from_slice(b"\r\n0\r\n\r\n");
        assert_eq!(out, expected);
    }

    #[test]
    fn unframed_body_gets_a_length_field_and_skew_is_applied() {
        let mut out = Vec::new();
        render_skewed(
            [
                Part::Lit(b"GET /c HTTP/1.1\r\n"),
                Part::Lit(b"\r\n"),
                Part::Body(Framing::None),
                Part::Lit(b"abc"),
            ],
            Skew { content_length: 2 },
            &mut out,
        );
        assert_eq!(out, b"GET /c HTTP/1.1\r\nContent-Length: 5\r\n\r\nabc");
    }
}
