//! Stage 2: messages → tokens with typed slots.
//!
//! A message becomes a sequence of [`Piece`]s: literal bytes, slot values of a class (numbers,
//! ids, addresses, strings…), fields derived from the rest of the message (HTTP Content-Length)
//! and, for HTTP, the start of the body. Interning a piece gives a [`Token`]: literals keep their
//! bytes, slots keep only their class, so `GET /orders/8812` and `GET /orders/17` share one
//! template. [`render`] is the inverse: tokens plus slot values back to bytes, with derived fields
//! recomputed.
//!
//! Contract: tokenizing is total (every byte string tokenizes, nothing panics) and lossless for
//! literals and slot values: concatenating the pieces of a line or JSON message gives the message
//! back; HTTP bodies are stored de-chunked.

mod http;
mod json;
mod lexer;
pub mod render;
pub mod rules;
mod vocab;

use serde::{Deserialize, Serialize};
use thiserror::Error;

use crate::read::Format;
pub use lexer::Lexer;
pub use rules::{RuleSet, SlotRule};
pub use vocab::{Interner, Vocab};

/// Fields computed from the rest of the message when it is written, never sampled.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Derived {
    /// The value of an HTTP `Content-Length` field: the body's length in bytes.
    ContentLength,
}

/// How the body after an HTTP head is delimited when written.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Framing {
    /// No framing field: a body, if generated, gets a Content-Length field added.
    None,
    /// Content-Length.
    Length,
    /// Transfer-Encoding: chunked; the body is written as one chunk and the last chunk.
    Chunked,
}

/// A vocabulary entry of the message chain.
#[derive(Debug, Clone, PartialEq, Eq, PartialOrd, Ord, Hash, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Token {
    /// Literal bytes.
    Lit(#[serde(with = "crate::escape::serde_bytes")] Vec<u8>),
    /// A slot of the named class.
    Slot(String),
    /// A derived field.
    Derived(Derived),
    /// End of an HTTP head; a body with this framing follows.
    Body(Framing),
}

impl Token {
    /// Short printable form: literals escaped, slots as `{class}`.
    pub fn display(&self) -> String {
        match self {
            Token::Lit(b) => crate::escape::escape(b),
            Token::Slot(c) => format!("{{{c}}}"),
            Token::Derived(Derived::ContentLength) => "{=length}".into(),
            Token::Body(Framing::None) => "{body}".into(),
            Token::Body(Framing::Length) => "{body:length}".into(),
            Token::Body(Framing::Chunked) => "{body:chunked}".into(),
        }
    }

    /// True for literals that can anchor a slot's value pool (they contain a letter or digit).
    pub fn is_anchor(&self) -> bool {
        matches!(self, Token::Lit(b) if is_anchor_bytes(b))
    }
}

pub(crate) fn is_anchor_bytes(b: &[u8]) -> bool {
    b.iter().any(u8::is_ascii_alphanumeric)
}

/// What a piece of a tokenized message is.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum PieceKind {
    Lit,
    /// Slot of class index (into [`Tokenizer::classes`]).
    Slot(u16),
    Derived(Derived),
    Body(Framing),
}

/// A piece: a kind and the byte range it covers in [`Tokenized::arena`].
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Piece {
    pub kind: PieceKind,
    pub start: u32,
    pub end: u32,
}

/// A tokenized message. Reuse one value across messages (one per thread) to avoid allocation:
/// it also keeps the lexer's search state.
#[derive(Debug, Clone, Default)]
pub struct Tokenized {
    /// The message bytes, followed by any bytes the tokenizer produced (a de-chunked body).
    pub arena: Vec<u8>,
    pub pieces: Vec<Piece>,
    lex_cache: Option<lexer::LexCache>,
}

impl Tokenized {
    fn reset(&mut self, message: &[u8]) {
        self.arena.clear();
        self.arena.extend_from_slice(message);
        self.pieces.clear();
    }

    pub(crate) fn push(&mut self, kind: PieceKind, start: usize, end: usize) {
        self.pieces.push(Piece { kind, start: start as u32, end: end as u32 });
    }

    /// The bytes of a piece.
    pub fn bytes(&self, piece: &Piece) -> &[u8] {
        &self.arena[piece.start as usize..piece.end as usize]
    }
}

/// Errors of the token stage.
#[derive(Debug, Error)]
pub enum TokenError {
    #[error("{origin}: {message}")]
    Rules { origin: String, message: String },
}

/// Splits messages of one format into pieces.
#[derive(Debug, Clone)]
pub struct Tokenizer {
    format: Format,
    lexer: Lexer,
    string: u16,
    int: u16,
    decimal: u16,
}

impl Tokenizer {
    /// A tokenizer for `format` with `rules` (`origin` names the rules in errors).
    pub fn new(format: Format, rules: &RuleSet, origin: &str) -> Result<Tokenizer, TokenError> {
        let lexer = Lexer::new(rules, origin)?;
        let core = |name| lexer.class(name).expect("core classes always exist");
        let (string, int, decimal) = (core("string"), core("int"), core("decimal"));
        Ok(Tokenizer { format, lexer, string, int, decimal })
    }

    pub fn format(&self) -> Format {
        self.format
    }

    /// Slot class names; `PieceKind::Slot(i)` is `classes()[i]`.
    pub fn classes(&self) -> &[String] {
        self.lexer.classes()
    }

    pub fn lexer(&self) -> &Lexer {
        &self.lexer
    }

    /// Tokenizes one message into `out` (cleared first).
    pub fn tokenize(&self, message: &[u8], out: &mut Tokenized) {
        out.reset(message);
        match self.format {
            Format::Lines => self.lexer.lex(out, 0, message.len()),
            Format::Jsonl => {
                let body = crate::read::trim_line_end(message).len();
                json::tokenize(self, out, 0, body);
                if body < message.len() {
                    out.push(PieceKind::Lit, body, message.len());
                }
            }
            Format::Http => http::tokenize(self, out),
        }
    }
}

#[cfg(test)]
mod tests;
