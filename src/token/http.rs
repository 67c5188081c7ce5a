//! HTTP/1.1 message tokenizer (RFC 9112 §3–6).
//!
//! Request line: method literal, target lexed by the text lexer (path segments, query names and
//! slot values), version and line end literal. Status line: version, status code and reason are
//! literals (a 404 is a different template from a 200). Each field line: `name:` plus spaces
//! literal, the value lexed, except Content-Length whose value is [`Derived::ContentLength`].
//! The empty line is followed by a [`PieceKind::Body`] piece; the body (de-chunked) is tokenized
//! as JSON when the Content-Type says so and it parses, else by the text lexer.
//! Input that is not a parseable HTTP head is lexed as text.

use super::{Derived, Framing, PieceKind, Tokenized, Tokenizer};
use crate::read::http::{BodyFraming, body_framing, dechunk};

pub(super) fn tokenize(t: &Tokenizer, out: &mut Tokenized) {
    let len = out.arena.len();
    let mut headers = [httparse::EMPTY_HEADER; 128];
    let head_len = if out.arena.starts_with(b"HTTP/") {
        match httparse::Response::new(&mut headers).parse(&out.arena) {
            Ok(httparse::Status::Complete(n)) => Some(n),
            _ => None,
        }
    } else {
        match httparse::Request::new(&mut headers).parse(&out.arena) {
            Ok(httparse::Status::Complete(n)) => Some(n),
            _ => None,
        }
    };
    let Some(head_len) = head_len else {
        t.lexer.lex(out, 0, len);
        return;
    };
    let framing = body_framing(&headers).unwrap_or(BodyFraming::None);
    let json_body = headers.iter().any(|h| {
        h.name.eq_ignore_ascii_case("content-type")
            && h.value.windows(4).any(|w| w.eq_ignore_ascii_case(b"json"))
    });

    head(t, out, head_len);

    let (body_start, body_end, kind) = match framing {
        BodyFraming::None => (head_len, len, Framing::None),
        BodyFraming::Length(n) => (head_len, (head_len + n).min(len), Framing::Length),
        BodyFraming::Chunked => {
            let payload = dechunk(&out.arena[head_len..]).unwrap_or_default();
            let start = out.arena.len();
            out.arena.extend_from_slice(&payload);
            (start, out.arena.len(), Framing::Chunked)
        }
    };
    out.push(PieceKind::Body(kind), head_len, head_len);
    if body_start == body_end {
        return;
    }
    let is_json = json_body
        && serde_json::from_slice::<serde::de::IgnoredAny>(&out.arena[body_start..body_end]).is_ok();
    if is_json {
        super::json::tokenize(t, out, body_start, body_end);
    } else {
        t.lexer.lex(out, body_start, body_end);
    }
}

fn head(t: &Tokenizer, out: &mut Tokenized, head_len: usize) {
    let mut line_start = 0;
    let mut first = true;
    while line_start < head_len {
        let line_end =
            memchr::memchr(b'\n', &out.arena[line_start..head_len]).map_or(head_len, |i| line_start + i + 1);
        let content_end = line_start + crate::read::trim_line_end(&out.arena[line_start..line_end]).len();
        if first {
            start_line(t, out, line_start, content_end);
            first = false;
        } else if content_end > line_start {
            field_line(t, out, line_start, content_end);
        }
        out.push(PieceKind::Lit, content_end, line_end);
        line_start = line_end;
    }
}

fn start_line(t: &Tokenizer, out: &mut Tokenized, start: usize, end: usize) {
    let line = &out.arena[start..end];
    if line.starts_with(b"HTTP/") {
        out.push(PieceKind::Lit, start, end);
        return;
    }
    let Some(sp1) = line.iter().position(|&b| b == b' ') else {
        out.push(PieceKind::Lit, start, end);
        return;
    };
    let sp2 = line.iter().rposition(|&b| b == b' ').unwrap_or(sp1);
    out.push(PieceKind::Lit, start, start + sp1 + 1);
    if sp2 > sp1 {
        t.lexer.lex(out, start + sp1 + 1, start + sp2);
        out.push(PieceKind::Lit, start + sp2, end);
    } else if start + sp1 + 1 < end {
        out.push(PieceKind::Lit, start + sp1 + 1, end);
    }
}

fn field_line(t: &Tokenizer, out: &mut Tokenized, start: usize, end: usize) {
    let line = &out.arena[start..end];
    let Some(colon) = line.iter().position(|&b| b == b':') else {
        out.push(PieceKind::Lit, start, end);
        return;
    };
    let value_start = colon + 1 + line[colon + 1..].iter().take_while(|b| matches!(b, b' ' | b'\t')).count();
    let value_end =
        line.len() - line[value_start..].iter().rev().take_while(|b| matches!(b, b' ' | b'\t')).count();
    let is_length = line[..colon].eq_ignore_ascii_case(b"content-length");
    out.push(PieceKind::Lit, start, start + value_start);
    if value_end > value_start {
        if is_length {
            out.push(PieceKind::Derived(Derived::ContentLength), start + value_start, start + value_end);
        } else {
            t.lexer.lex(out, start + value_start, start + value_end);
        }
    }
    if end > start + value_end {
        out.push(PieceKind::Lit, start + value_end, end);
    }
}
