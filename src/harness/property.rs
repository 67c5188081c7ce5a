//! In-process targets and a property-test helper for `#[test]` functions.
//!
//! ```no_run
//! use tracewalk::harness::property::{PropertyCheck, check_traces};
//! # fn parse_session(_: &[Vec<u8>]) -> Result<(), String> { Ok(()) }
//! let (model, hash) = tracewalk::model::load_with_hash("shop.model".as_ref()).unwrap();
//! let model = tracewalk::model::Compiled::new(model, hash).unwrap();
//! // Panics with the shrunk, readable trace and the seed when the property fails.
//! check_traces(&model, &PropertyCheck::default(), |messages| parse_session(messages));
//! ```

use std::panic::{AssertUnwindSafe, catch_unwind};
use std::time::Instant;

use super::oracle::normalise;
use super::{Failure, HarnessError, Report, Target};
use crate::generate::{GenOptions, Generator};
use crate::model::Compiled;
use crate::shrink::{ShrinkOptions, shrink};

/// A closure as a target: `Err(message)` is a failure of kind `property`; a panic is a failure
/// of kind `panic`. The location part of the signature is the normalised first line of the
/// message, so failures with different messages count as different bugs.
pub struct FnTarget<F> {
    property: F,
}

impl<F: FnMut(&[Vec<u8>]) -> Result<(), String>> FnTarget<F> {
    pub fn new(property: F) -> FnTarget<F> {
        FnTarget { property }
    }
}

/// The text of a panic payload.
fn payload_text(payload: &(dyn std::any::Any + Send)) -> String {
    if let Some(s) = payload.downcast_ref::<&str>() {
        (*s).to_string()
    } else if let Some(s) = payload.downcast_ref::<String>() {
        s.clone()
    } else {
        "panic with a non-text payload".to_string()
    }
}

impl<F: FnMut(&[Vec<u8>]) -> Result<(), String>> Target for FnTarget<F> {
    fn run(&mut self, messages: &[Vec<u8>]) -> Result<Report, HarnessError> {
        let start = Instant::now();
        let outcome = catch_unwind(AssertUnwindSafe(|| (self.property)(messages)));
        let failure = match outcome {
            Ok(Ok(())) => None,
            Ok(Err(message)) => Some(("property", message)),
            Err(payload) => Some(("panic", payload_text(payload.as_ref()))),
        }
        .map(|(kind, message)| {
            let first = message.lines().next().unwrap_or("").to_string();
            Failure { kind: kind.to_string(), location: normalise(&first), detail: message }
        });
        let transcript = failure.as_ref().map(|f| f.detail.clone().into_bytes()).unwrap_or_default();
        Ok(Report { failure, transcript, elapsed: start.elapsed() })
    }
}

/// Settings of [`check_traces`].
#[derive(Debug, Clone)]
pub struct PropertyCheck {
    /// Traces to try.
    pub cases: u64,
    /// Seed of the batch; the environment variable `TRACEWALK_SEED` overrides it.
    pub seed: u64,
    pub generate: GenOptions,
    pub shrink: ShrinkOptions,
}

impl Default for PropertyCheck {
    fn default() -> Self {
        PropertyCheck {
            cases: 256,
            seed: 0,
            generate: GenOptions::default(),
            shrink: ShrinkOptions::default(),
        }
    }
}

/// Generates `check.cases` traces from `model` and runs `property` on each trace's messages.
/// On the first failure, shrinks the trace (keeping the same failure signature) and panics with
/// the signature, the seed and the shrunk trace in tracewalk's text format.
pub fn check_traces(
    model: &Compiled,
    check: &PropertyCheck,
    property: impl FnMut(&[Vec<u8>]) -> Result<(), String>,
) {
    let seed = std::env::var("TRACEWALK_SEED").ok().and_then(|s| s.trim().parse().ok()).unwrap_or(check.seed);
    let mut generator = match Generator::new(model, check.generate.clone()) {
        Ok(g) => g,
        Err(e) => panic!("tracewalk property check: {e}"),
    };
    let mut target = FnTarget::new(property);
    for index in 0..check.cases {
        let walk = generator.walk(seed, index);
        let mut trace = walk.to_trace(model);
        let messages: Vec<Vec<u8>> = trace.messages.iter().map(|m| m.bytes.clone()).collect();
        let Some(failure) = target.run(&messages).ok().and_then(|r| r.failure) else { continue };
        let signature = failure.signature();
        let shrunk = shrink(&messages, Some(model), &check.shrink, |candidate| {
            target.run(candidate).ok().and_then(|r| r.failure).is_some_and(|f| f.signature() == signature)
        });
        trace.header = vec![
            ("model".into(), model.short_hash().to_string()),
            ("seed".into(), seed.to_string()),
            ("index".into(), index.to_string()),
            ("mode".into(), check.generate.mode.name().to_string()),
            ("outcome".into(), "fail".into()),
            ("signature".into(), signature.clone()),
        ];
        let small = shrunk.to_trace(&trace, Some(model));
        panic!(
            "tracewalk property failed: {}\nseed {seed}, trace {} of {} (mode {}); shrunk from {} to {} messages in {} runs\nrerun with TRACEWALK_SEED={seed}\n\n{}",
            super::oracle::describe(&failure),
            index + 1,
            check.cases,
            check.generate.mode.name(),
            messages.len(),
            small.messages.len(),
            shrunk.calls,
            small.to_text()
        );
    }
}
