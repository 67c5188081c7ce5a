//! A message as parts (literals, slot values, derived fields) that can be removed or replaced
//! and written back, with derived fields (Content-Length, chunk sizes) recomputed.
//!
//! For removal, parts are grouped so that no candidate leaves a message a peer would wait on:
//! a line message keeps its line end; an HTTP message keeps its request line's end, the empty
//! line, the body marker and any field line with a derived value, and loses other field lines
//! only whole. A server waiting for the rest of a head costs a reply timeout per candidate; a
//! malformed but complete message is answered at once.

use crate::model::Compiled;
use crate::read::Format;
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
    let parts = split_any(model, message);
    (write(&parts) == message).then_some(parts)
}

/// The parts of `message` even when writing them back gives other bytes: a message whose
/// derived fields disagree with it (a skewed Content-Length) is written with them recomputed.
pub fn split_any(model: &Compiled, message: &[u8]) -> Vec<OwnedPart> {
    let mut t = Tokenized::default();
    model.tokenizer.tokenize(message, &mut t);
    t.pieces
        .iter()
        .map(|p| match p.kind {
            PieceKind::Lit => OwnedPart::Lit(t.bytes(p).to_vec()),
            PieceKind::Slot(_) => OwnedPart::Value(t.bytes(p).to_vec()),
            PieceKind::Derived(d) => OwnedPart::Derived(d),
            PieceKind::Body(f) => OwnedPart::Body(f),
        })
        .collect()
}

/// For each slot part of `message` (by part index), the pool that fills it in the model.
pub fn slot_pools(model: &Compiled, message: &[u8]) -> Vec<(usize, Option<u32>)> {
    let mut t = Tokenized::default();
    // Tokens the model never saw have no symbol; u32::MAX is no token, so they anchor nothing.
    let symbols: Vec<u32> =
        model.symbols_of(message, &mut t).into_iter().map(|s| s.unwrap_or(u32::MAX)).collect();
    model.slots_of(&symbols).into_iter().map(|s| (s.position as usize, s.pool)).collect()
}

/// Parts removed together, or never.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Group {
    pub parts: Vec<OwnedPart>,
    /// Never removed.
    pub fixed: bool,
}

fn is_line_end(p: &OwnedPart) -> bool {
    matches!(p, OwnedPart::Lit(b) if b.ends_with(b"\n"))
}

/// The removal groups of a message (see the module documentation), or `None` as for [`split`].
pub fn groups(model: &Compiled, message: &[u8]) -> Option<Vec<Group>> {
    let parts = split(model, message)?;
    let single = |p: OwnedPart, fixed: bool| Group { parts: vec![p], fixed };
    if model.tokenizer.format() != Format::Http {
        let n = parts.len();
        return Some(
            parts
                .into_iter()
                .enumerate()
                .map(|(i, p)| {
                    let fixed = i + 1 == n && is_line_end(&p);
                    single(p, fixed)
                })
                .collect(),
        );
    }
    let mut out = Vec::new();
    let mut line: Vec<OwnedPart> = Vec::new();
    let mut first_line = true;
    let mut in_body = false;
    for p in parts {
        if in_body {
            out.push(single(p, false));
            continue;
        }
        if let OwnedPart::Body(_) = p {
            if !line.is_empty() {
                out.push(Group { parts: std::mem::take(&mut line), fixed: true });
            }
            out.push(single(p, true));
            in_body = true;
            continue;
        }
        if first_line {
            // Request line: its words may go, its line end stays.
            let end = is_line_end(&p);
            out.push(single(p, end));
            first_line = !end;
            continue;
        }
        let end = is_line_end(&p);
        line.push(p);
        if end {
            let blank = line.len() == 1;
            let derived = line.iter().any(|q| matches!(q, OwnedPart::Derived(_)));
            out.push(Group { parts: std::mem::take(&mut line), fixed: blank || derived });
        }
    }
    if !line.is_empty() {
        out.push(Group { parts: line, fixed: true });
    }
    Some(out)
}

/// Writes the fixed groups and the removable groups whose indices are in `kept` (sorted).
pub fn write_kept(groups: &[Group], kept: &[usize]) -> Vec<u8> {
    let parts: Vec<OwnedPart> = groups
        .iter()
        .enumerate()
        .filter(|(i, g)| g.fixed || kept.binary_search(i).is_ok())
        .flat_map(|(_, g)| g.parts.iter().cloned())
        .collect();
    write(&parts)
}
