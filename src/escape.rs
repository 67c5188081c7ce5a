//! Reversible escaping of raw bytes into printable text.
//!
//! Model files and traces must hold arbitrary bytes (invalid UTF-8, NUL, bare CR) yet stay readable
//! and diffable. The escape keeps printable UTF-8 as is and writes everything else as a backslash
//! sequence, so `unescape(escape(b)) == b` for every byte string `b`.
//!
//! | bytes                         | written as |
//! |-------------------------------|------------|
//! | `\`                           | `\\`       |
//! | CR, LF, TAB                   | `\r` `\n` `\t` |
//! | other ASCII controls, DEL     | `\xHH`     |
//! | bytes of invalid UTF-8        | `\xHH`     |
//! | printable ASCII, valid UTF-8  | themselves (C1 controls and U+2028/U+2029 escaped per byte) |

use thiserror::Error;

/// Why a piece of escaped text could not be turned back into bytes.
#[derive(Debug, Error, PartialEq, Eq)]
pub enum EscapeError {
    #[error("backslash at end of text")]
    TrailingBackslash,
    #[error("unknown escape `\\{0}`")]
    UnknownEscape(char),
    #[error("`\\x` needs two hex digits")]
    BadHex,
}

/// Appends the escaped form of `bytes` to `out`.
pub fn escape_into(bytes: &[u8], out: &mut String) {
    let mut rest = bytes;
    while !rest.is_empty() {
        match std::str::from_utf8(rest) {
            Ok(text) => {
                escape_str(text, out);
                return;
            }
            Err(err) => {
                let (valid, after) = rest.split_at(err.valid_up_to());
                // SAFETY-free: `valid` is valid UTF-8 by construction of `valid_up_to`.
                escape_str(std::str::from_utf8(valid).unwrap_or_default(), out);
                let bad = err.error_len().unwrap_or(after.len());
                for &b in &after[..bad] {
                    push_hex(b, out);
                }
                rest = &after[bad..];
            }
        }
    }
}

/// The escaped form of `bytes` as a new string.
pub fn escape(bytes: &[u8]) -> String {
    let mut out = String::with_capacity(bytes.len() + 8);
    escape_into(bytes, &mut out);
    out
}

fn escape_str(text: &str, out: &mut String) {
    for ch in text.chars() {
        match ch {
            '\\' => out.push_str("\\\\"),
            '\r' => out.push_str("\\r"),
            '\n' => out.push_str("\\n"),
            '\t' => out.push_str("\\t"),
            c if c.is_control() || c == '\u{2028}' || c == '\u{2029}' || c == '\u{feff}' => {
                let mut buf = [0u8; 4];
                for &b in c.encode_utf8(&mut buf).as_bytes() {
                    push_hex(b, out);
                }
            }
            c => out.push(c),
        }
    }
}

fn push_hex(b: u8, out: &mut String) {
    const HEX: &[u8; 16] = b"0123456789abcdef";
    out.push_str("\\x");
    out.push(HEX[(b >> 4) as usize] as char);
    out.push(HEX[(b & 15) as usize] as char);
}

/// Turns escaped text back into the bytes it stands for.
pub fn unescape(text: &str) -> Result<Vec<u8>, EscapeError> {
    let mut out = Vec::with_capacity(text.len());
    unescape_into(text, &mut out)?;
    Ok(out)
}

/// Appends the bytes that `text` stands for to `out`.
pub fn unescape_into(text: &str, out: &mut Vec<u8>) -> Result<(), EscapeError> {
    let bytes = text.as_bytes();
    let mut i = 0;
    while i < bytes.len() {
        let b = bytes[i];
        if b != b'\\' {
            out.push(b);
            i += 1;
            continue;
        }
        let Some(&code) = bytes.get(i + 1) else {
            return Err(EscapeError::TrailingBackslash);
        };
        match code {
            b'\\' => out.push(b'\\'),
            b'r' => out.push(b'\r'),
            b'n' => out.push(b'\n'),
            b't' => out.push(b'\t'),
            b'x' => {
                let hi = bytes.get(i + 2).and_then(|c| (*c as char).to_digit(16));
                let lo = bytes.get(i + 3).and_then(|c| (*c as char).to_digit(16));
                match (hi, lo) {
                    (Some(hi), Some(lo)) => out.push((hi * 16 + lo) as u8),
                    _ => return Err(EscapeError::BadHex),
                }
                i += 2;
            }
            _ => {
                let ch = text[i + 1..].chars().next().unwrap_or('?');
                return Err(EscapeError::UnknownEscape(ch));
            }
        }
        i += 2;
    }
    Ok(())
}

/// Printable form for one-line display: like [`escape`], cut to about `max` characters.
pub fn preview(bytes: &[u8], max: usize) -> String {
    let mut out = escape(bytes);
    if out.chars().count() > max {
        let cut: String = out.chars().take(max.saturating_sub(1)).collect();
        out = cut + "…";
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn round_trips_every_byte_value() {
        let all: Vec<u8> = (0..=255u8).collect();
        let text = escape(&all);
        assert!(text.is_ascii(), "bytes >= 0x80 alone are invalid UTF-8 and must be hex-escaped");
        assert_eq!(unescape(&text).unwrap(), all);
    }

    #[test]
    fn keeps_printable_utf8_and_escapes_controls() {
        assert_eq!(escape("Grüße\r\n".as_bytes()), "Grüße\\r\\n");
        assert_eq!(escape(b"a\\b\x00"), "a\\\\b\\x00");
        assert_eq!(escape("\u{85}".as_bytes()), "\\xc2\\x85");
    }

    #[test]
    fn rejects_malformed_escapes() {
        assert_eq!(unescape("abc\\"), Err(EscapeError::TrailingBackslash));
        assert_eq!(unescape("\\q"), Err(EscapeError::UnknownEscape('q')));
        assert_eq!(unescape("\\x4"), Err(EscapeError::BadHex));
    }
}

/// Serde adapter storing bytes as escaped text (readable in YAML, exact in every encoding).
pub mod serde_bytes {
    use serde::{Deserialize, Deserializer, Serializer};

    pub fn serialize<S: Serializer>(bytes: &[u8], s: S) -> Result<S::Ok, S::Error> {
        s.serialize_str(&super::escape(bytes))
    }

    pub fn deserialize<'de, D: Deserializer<'de>>(d: D) -> Result<Vec<u8>, D::Error> {
        let text = std::borrow::Cow::<'de, str>::deserialize(d)?;
        super::unescape(&text).map_err(serde::de::Error::custom)
    }
}
