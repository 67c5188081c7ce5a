//! Feeding coverage-guided fuzzing engines: seed corpora, structured decoding of engine inputs
//! into walks of the model, and (in `mutator`) model-driven mutation of inputs.
//!
//! Engines such as libFuzzer mutate bytes. Two ways to keep their inputs on learned paths:
//! - [`decode`]: treat the input as a stream of choices (arbitrary's `Unstructured`) that picks
//!   each step of a walk, so every input decodes to a walk of the model and the engine's byte
//!   mutations become changes of choices;
//! - [`write_seeds`]: start the engine from generated traces, as raw wire bytes, one file each,
//!   named by content hash;
//! - [`InputMutator`]: a custom mutator that reads an input back into messages and applies the
//!   model-driven mutation operators, falling back to byte mutation for unreadable inputs.

pub mod decode;
pub mod mutator;

use std::path::Path;

use crate::generate::Generator;

pub use decode::{DecodeOptions, decode, decode_bytes, decode_trace};
pub use mutator::{InputMutator, Mutated, byte_mutate};

/// Writes `count` generated traces (raw wire bytes) into `dir`, one file per distinct trace,
/// named by the BLAKE3 hash of its bytes. Returns the number of files written (duplicates
/// collapse). Existing files are left as they are.
pub fn write_seeds(
    generator: &mut Generator<'_>,
    seed: u64,
    count: u64,
    dir: &Path,
) -> std::io::Result<usize> {
    std::fs::create_dir_all(dir)?;
    let mut written = std::collections::BTreeSet::new();
    for i in 0..count {
        let bytes = generator.trace(seed, i).wire_bytes();
        let name = blake3::hash(&bytes).to_hex()[..32].to_string();
        let path = dir.join(&name);
        if written.insert(name) && !path.exists() {
            crate::atomic::write(&path, &bytes)?;
        }
    }
    Ok(written.len())
}
