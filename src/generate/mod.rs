//! Stage 4: models → traces.
//!
//! A [`Generator`] walks the session chain (which template comes next), fills each template's
//! slots from the value pools, and, when the chain steps to the novel-message symbol, builds a
//! new message with the message chain. Each trace has its own random generator, seeded from
//! (seed, trace index), so any trace of a batch can be reproduced alone and batches can be
//! generated in parallel with identical output.

pub mod walk;

use rand::SeedableRng;
use rand_xoshiro::Xoshiro256PlusPlus;
use thiserror::Error;

use crate::model::Compiled;
use crate::trace::{Trace, TraceMessage};

pub use walk::{Step, Walk};

/// Errors of the generation stage.
#[derive(Debug, Error)]
pub enum GenError {
    #[error("{0}")]
    Options(String),
}

/// Which traffic to generate.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Mode {
    /// Traffic like the training data (weights sharpened or flattened by the temperature).
    Plausible,
}

impl Mode {
    pub fn name(self) -> &'static str {
        match self {
            Mode::Plausible => "plausible",
        }
    }
}

impl std::str::FromStr for Mode {
    type Err = String;
    fn from_str(s: &str) -> Result<Self, Self::Err> {
        match s {
            "plausible" => Ok(Mode::Plausible),
            other => Err(format!("unknown mode `{other}`")),
        }
    }
}

/// Options of a generator.
#[derive(Debug, Clone, PartialEq)]
pub struct GenOptions {
    pub mode: Mode,
    /// Next-step weights become p^(1/T), renormalised. 1 samples the chain as learned.
    pub temperature: f64,
    /// Longest trace, in messages; longer walks are cut (and marked in the header).
    pub max_messages: usize,
    /// Longest novel message, in tokens.
    pub max_tokens: usize,
}

impl Default for GenOptions {
    fn default() -> Self {
        GenOptions { mode: Mode::Plausible, temperature: 1.0, max_messages: 200, max_tokens: 256 }
    }
}

/// The random generator of trace `index` of a batch seeded with `seed`.
pub fn trace_rng(seed: u64, index: u64) -> Xoshiro256PlusPlus {
    // SplitMix64 finaliser over the pair, so nearby seeds and indices give unrelated streams.
    let mut z = seed ^ index.wrapping_mul(0x9E37_79B9_7F4A_7C15).wrapping_add(0xD1B5_4A32_D192_ED03);
    z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
    Xoshiro256PlusPlus::seed_from_u64(z ^ (z >> 31))
}

/// Generates traces from a compiled model.
#[derive(Debug)]
pub struct Generator<'m> {
    model: &'m Compiled,
    options: GenOptions,
}

impl<'m> Generator<'m> {
    pub fn new(model: &'m Compiled, options: GenOptions) -> Result<Generator<'m>, GenError> {
        if !(options.temperature > 0.0 && options.temperature.is_finite()) {
            return Err(GenError::Options(format!(
                "temperature must be positive, not {}",
                options.temperature
            )));
        }
        if options.max_messages == 0 || options.max_tokens == 0 {
            return Err(GenError::Options("message and token limits must be at least 1".into()));
        }
        Ok(Generator { model, options })
    }

    pub fn model(&self) -> &'m Compiled {
        self.model
    }

    pub fn options(&self) -> &GenOptions {
        &self.options
    }

    /// The walk of trace `index` of the batch seeded with `seed`. Takes `&mut self` because
    /// some modes remember what earlier walks of the run did; output is deterministic for a
    /// given sequence of calls.
    pub fn walk(&mut self, seed: u64, index: u64) -> Walk {
        let mut rng = trace_rng(seed, index);
        walk::plausible(self.model, &self.options, &mut rng)
    }

    /// Trace `index` of the batch seeded with `seed`, annotated.
    pub fn trace(&mut self, seed: u64, index: u64) -> Trace {
        let walk = self.walk(seed, index);
        let mut trace = walk.to_trace(self.model);
        trace.header = vec![
            ("model".into(), self.model.short_hash().to_string()),
            ("seed".into(), seed.to_string()),
            ("index".into(), index.to_string()),
            ("mode".into(), self.options.mode.name().to_string()),
        ];
        if self.options.temperature != 1.0 {
            trace.set("temperature", self.options.temperature.to_string());
        }
        if !walk.ended {
            trace.set("cut", format!("at {} messages", self.options.max_messages));
        }
        trace
    }
}

impl Walk {
    /// Renders the walk to a trace (no header).
    pub fn to_trace(&self, model: &Compiled) -> Trace {
        Trace {
            header: Vec::new(),
            messages: self
                .steps
                .iter()
                .map(|s| TraceMessage {
                    bytes: s.render(model),
                    surprise: Some(s.surprise),
                    marks: s.marks.clone(),
                })
                .collect(),
        }
    }
}
