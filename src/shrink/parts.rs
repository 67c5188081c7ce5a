//! A message as parts (literals, slot values, derived fields) that can be removed or replaced
//! and written back, with derived fields (Content-Length, chunk sizes) recomputed.

use crate::model::Compiled;
use crate::token::render::{Part, render};
use crate::token::{Derived, Framing, PieceKind, Tokenized};

/// An owned [`Part`].
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum OwnedPart {
    Lit(Vec<u8>),
    Value(Vec<u8>),
    Derived(Derived),
    Body(Framing),
}

impl OwnedPart {
    fn as_part(&self) -> Part<'_> {
        match self {
            OwnedPart::Lit(b) => Part::Lit(b),
            OwnedPart::Value(b) => Part::Value(b),
            OwnedPart::Derived(d) => Part::Derived(*d),
            OwnedPart::Body(f) => Part::Body(*f),
        }
    }
}

/// Writes parts to bytes.
pub fn write(parts: &[OwnedPart]) -> Vec<u8> {
    let mut out = Vec::new();
    render(parts.iter().map(OwnedPart::as_part), &mut out);
    out
}

/// The parts of `message` under the model's tokenizer, or `None` when writing them back would
/// not give the message exactly (then only whole-message shrinking applies to it).
pub fn split(model: &Compiled, message: &[u8]) -> Option<Vec<OwnedPart>> {
    let mut t = Tokenized::default();
    model.tokenizer.tokenize(message, &mut t);
    let parts: Vec<OwnedPart> = t
        .pieces
        .iter()
        .map(|p| match p.kind {
            PieceKind::Lit => OwnedPart::Lit(t.bytes(p).to_vec()),
            PieceKind::Slot(_) => OwnedPart::Value(t.bytes(p).to_vec()),
            PieceKind::Derived(d) => OwnedPart::Derived(d),
            PieceKind::Body(f) => OwnedPart::Body(f),
        })
        .collect();
    (write(&parts) == message).then_some(parts)
}

/// For each slot part of `message` (by part index), the pool that fills it in the model.
pub fn slot_pools(model: &Compiled, message: &[u8]) -> Vec<(usize, Option<u32>)> {
    let mut t = Tokenized::default();
    // Tokens the model never saw have no symbol; u32::MAX is no token, so they anchor nothing.
    let symbols: Vec<u32> =
        model.symbols_of(message, &mut t).into_iter().map(|s| s.unwrap_or(u32::MAX)).collect();
    model.slots_of(&symbols).into_iter().map(|s| (s.position as usize, s.pool)).collect()
}
