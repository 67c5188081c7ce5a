//! Structural JSON tokenizer (RFC 8259 §2–7): punctuation and whitespace are literals, object
//! keys are literals (quotes included), string contents and numbers are slots classified by the
//! rules, `true` / `false` / `null` are literals. Iterative, so nesting depth costs no stack.
//! Invalid input never fails: unexpected bytes become literals.

use super::{PieceKind, Tokenized, Tokenizer};

pub(super) fn tokenize(t: &Tokenizer, out: &mut Tokenized, start: usize, end: usize) {
    let mut pos = start;
    while pos < end {
        let b = out.arena[pos];
        match b {
            b' ' | b'\t' | b'\r' | b'\n' => {
                let run = out.arena[pos..end]
                    .iter()
                    .take_while(|c| matches!(c, b' ' | b'\t' | b'\r' | b'\n'))
                    .count();
                out.push(PieceKind::Lit, pos, pos + run);
                pos += run;
            }
            b'"' => pos = string(t, out, pos, end),
            b'-' | b'0'..=b'9' => {
                let run = out.arena[pos..end]
                    .iter()
                    .take_while(|c| matches!(c, b'-' | b'+' | b'.' | b'e' | b'E' | b'0'..=b'9'))
                    .count();
                let text = &out.arena[pos..pos + run];
                let digits = text.strip_prefix(b"-").unwrap_or(text);
                let class = if !digits.is_empty() && digits.iter().all(u8::is_ascii_digit) {
                    t.int
                } else if text.iter().any(u8::is_ascii_digit) {
                    t.decimal
                } else {
                    out.push(PieceKind::Lit, pos, pos + run);
                    pos += run;
                    continue;
                };
                out.push(PieceKind::Slot(class), pos, pos + run);
                pos += run;
            }
            b'a'..=b'z' => {
                let run = out.arena[pos..end].iter().take_while(|c| c.is_ascii_lowercase()).count();
                out.push(PieceKind::Lit, pos, pos + run);
                pos += run;
            }
            _ => {
                out.push(PieceKind::Lit, pos, pos + 1);
                pos += 1;
            }
        }
    }
}

/// Tokenizes the string starting at `open` (a `"`); returns the position after it.
fn string(t: &Tokenizer, out: &mut Tokenized, open: usize, end: usize) -> usize {
    let mut i = open + 1;
    let close = loop {
        match out.arena[i..end].iter().position(|&c| c == b'"' || c == b'\\') {
            None => {
                // Unterminated: the rest is literal.
                out.push(PieceKind::Lit, open, end);
                return end;
            }
            Some(k) if out.arena[i + k] == b'\\' => i = (i + k + 2).min(end),
            Some(k) => break i + k,
        }
    };
    let after = out.arena[close + 1..end].iter().position(|c| !c.is_ascii_whitespace());
    let is_key = after.is_some_and(|k| out.arena[close + 1 + k] == b':');
    if is_key {
        out.push(PieceKind::Lit, open, close + 1);
    } else {
        let class = t.lexer.classify(&out.arena[open + 1..close]).unwrap_or(t.string);
        out.push(PieceKind::Lit, open, open + 1);
        out.push(PieceKind::Slot(class), open + 1, close);
        out.push(PieceKind::Lit, close, close + 1);
    }
    close + 1
}
