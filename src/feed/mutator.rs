//! Model-driven mutation of engine inputs: the library side of a custom mutator.
//!
//! An input's bytes are read back into messages with the model's reader, turned into a walk
//! (messages the model cannot reproduce stay byte-exact), changed by one or more of the
//! model-driven operators of [`crate::generate::mutate`], and written back within the engine's
//! size limit. Deterministic for a given seed. An input that cannot be read as traffic of the
//! model's format is reported as [`Mutated::Unreadable`], so the caller can fall back to a
//! byte-level mutation (libFuzzer's own, or [`byte_mutate`] here); nothing panics.

use rand::{RngExt, SeedableRng};
use rand_xoshiro::Xoshiro256PlusPlus;

use crate::generate::mutate::{Mutator, walk_of_messages};
use crate::model::Compiled;
use crate::read::{ReadError, Reader, Role};

/// What [`InputMutator::mutate`] did.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Mutated {
    /// The input was rewritten; its new length.
    Modeled(usize),
    /// The input holds no message of the model's format, or no operator applied.
    Unreadable,
}

/// Mutates engine inputs with a model. Build once, call per input.
#[derive(Debug, Clone)]
pub struct InputMutator<'m> {
    model: &'m Compiled,
    reader: Reader,
    mutator: Mutator<'m>,
    /// Most operators stacked on one input.
    stack: usize,
}

impl<'m> InputMutator<'m> {
    /// A mutator reading inputs the way the model was learned.
    pub fn new(model: &'m Compiled) -> Result<InputMutator<'m>, ReadError> {
        Ok(InputMutator {
            model,
            reader: Reader::new(&model.settings.read)?,
            mutator: Mutator::new(model),
            stack: 3,
        })
    }

    /// Mutates `data[..size]` in place (`data` is at least `max_size` long) so that the result
    /// fits in `max_size` bytes.
    pub fn mutate(&self, data: &mut [u8], size: usize, max_size: usize, seed: u32) -> Mutated {
        let size = size.min(data.len());
        let (messages, _) = self.reader.messages(&data[..size]);
        let requests: Vec<Vec<u8>> =
            messages.into_iter().filter(|(_, role)| *role == Role::Request).map(|(m, _)| m).collect();
        if requests.is_empty() {
            return Mutated::Unreadable;
        }
        let mut rng = Xoshiro256PlusPlus::seed_from_u64(u64::from(seed));
        let mut walk = walk_of_messages(self.model, &requests);
        let rounds = rng.random_range(1..=self.stack);
        let mut applied = 0;
        for _ in 0..rounds {
            applied += usize::from(self.mutator.mutate(&mut walk, None, max_size, &mut rng).is_some());
        }
        if applied == 0 {
            return Mutated::Unreadable;
        }
        let bytes: Vec<u8> = walk.steps.iter().flat_map(|s| s.render(self.model)).collect();
        if bytes.len() > max_size.min(data.len()) {
            return Mutated::Unreadable;
        }
        data[..bytes.len()].copy_from_slice(&bytes);
        Mutated::Modeled(bytes.len())
    }
}

/// A simple byte-level mutation (flip, insert, delete or overwrite one byte) for callers
/// without an engine of their own; returns the new length (at most `max_size`).
pub fn byte_mutate(data: &mut [u8], size: usize, max_size: usize, seed: u32) -> usize {
    let mut rng = Xoshiro256PlusPlus::seed_from_u64(u64::from(seed) ^ 0x5eed);
    let cap = max_size.min(data.len());
    let size = size.min(cap);
    match rng.random_range(0..4u8) {
        0 if size > 0 => {
            let i = rng.random_range(0..size);
            data[i] ^= 1 << rng.random_range(0..8u8);
            size
        }
        1 if size < cap => {
            let i = rng.random_range(0..=size);
            data.copy_within(i..size, i + 1);
            data[i] = rng.random();
            size + 1
        }
        2 if size > 0 => {
            let i = rng.random_range(0..size);
            data.copy_within(i + 1..size, i);
            size - 1
        }
        _ if size > 0 => {
            let i = rng.random_range(0..size);
            data[i] = rng.random();
            size
        }
        _ if cap > 0 => {
            data[0] = rng.random();
            1
        }
        _ => 0,
    }
}
