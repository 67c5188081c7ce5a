//! Stage 5: a failing trace → a small trace that fails the same way.
//!
//! The shrinker sees only a predicate over messages ("does this still fail with the same
//! signature?"), never a target, so it sits below the harness and works for any failure check.
//! Passes, each keeping only candidates for which the predicate holds:
//!
//! 1. ddmin over whole messages ([`ddmin`]);
//! 2. per message, ddmin over its tokens (the model's tokenizer splits it into literals, slot
//!    values and derived fields; derived fields are recomputed when written back, and a message
//!    whose derived fields were damaged is first tried with them repaired; parts whose loss
//!    would leave a peer waiting for the rest of a message are kept, see [`parts`]);
//! 3. per message, each slot value replaced by the most common value of its pool;
//! 4. ddmin over messages again, so the result is 1-minimal with respect to removing one
//!    message (removing any single message makes the failure go away).
//!
//! Passes 2 and 3 need a model; without one only messages are removed. A cache keyed by a hash
//! of the candidate guarantees that no candidate is ever run twice; the number of predicate
//! calls (target runs) is reported and bounded.

pub mod ddmin;
pub mod parts;

use std::sync::Arc;
use std::sync::atomic::{AtomicBool, Ordering};

use rustc_hash::FxHashMap;

use crate::model::Compiled;
use crate::score::Scorer;
use crate::trace::{Trace, TraceMessage};

pub use ddmin::ddmin;

/// Limits of one shrink.
#[derive(Debug, Clone)]
pub struct ShrinkOptions {
    /// Most predicate calls; when reached, the smallest failing trace so far is returned.
    pub max_calls: usize,
    /// Raised from outside (Ctrl-C) to stop early with the smallest failing trace so far.
    pub stop: Option<Arc<AtomicBool>>,
}

impl Default for ShrinkOptions {
    fn default() -> Self {
        ShrinkOptions { max_calls: 2000, stop: None }
    }
}

/// One message of a shrunk trace.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct ShrunkMessage {
    pub bytes: Vec<u8>,
    /// Index of the input message it comes from.
    pub origin: usize,
    /// Whether tokens or values were changed (else it equals the input message).
    pub edited: bool,
}

/// The result of shrinking.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Shrunk {
    pub messages: Vec<ShrunkMessage>,
    /// Predicate calls made (each one target run).
    pub calls: usize,
    /// Candidates answered from the cache instead.
    pub cache_hits: usize,
    /// False when the call budget ran out or a stop was requested: the result still fails but
    /// may not be 1-minimal.
    pub complete: bool,
}

impl Shrunk {
    pub fn bytes(&self) -> Vec<Vec<u8>> {
        self.messages.iter().map(|m| m.bytes.clone()).collect()
    }

    /// The shrunk trace: `original`'s header, the kept messages with their original marks
    /// (edited ones marked `edited` instead), and, with a model, each message's surprise
    /// recomputed for the shorter session.
    pub fn to_trace(&self, original: &Trace, model: Option<&Compiled>) -> Trace {
        let mut scorer = model.map(Scorer::new);
        let messages = self
            .messages
            .iter()
            .map(|m| {
                let marks = match (m.edited, original.messages.get(m.origin)) {
                    (false, Some(source)) => source.marks.clone(),
                    (false, None) => Vec::new(),
                    (true, _) => vec!["edited".to_string()],
                };
                let surprise = scorer.as_mut().map(|s| s.next(&m.bytes).0);
                TraceMessage { bytes: m.bytes.clone(), surprise, marks }
            })
            .collect();
        Trace { header: original.header.clone(), messages }
    }
}

/// Calls the predicate through a cache and a budget.
struct Tester<P> {
    predicate: P,
    cache: FxHashMap<[u8; 32], bool>,
    calls: usize,
    hits: usize,
    max_calls: usize,
    stop: Option<Arc<AtomicBool>>,
    starved: bool,
}

impl<P: FnMut(&[Vec<u8>]) -> bool> Tester<P> {
    fn key(messages: &[Vec<u8>]) -> [u8; 32] {
        let mut h = blake3::Hasher::new();
        for m in messages {
            h.update(&(m.len() as u64).to_le_bytes());
            h.update(m);
        }
        *h.finalize().as_bytes()
    }

    fn test(&mut self, messages: &[Vec<u8>]) -> bool {
        let key = Self::key(messages);
        if let Some(&r) = self.cache.get(&key) {
            self.hits += 1;
            return r;
        }
        let stopped = self.stop.as_ref().is_some_and(|s| s.load(Ordering::Relaxed));
        if self.calls >= self.max_calls || stopped {
            // Not cached: an unanswered candidate is not a passing one.
            self.starved = true;
            return false;
        }
        self.calls += 1;
        let r = (self.predicate)(messages);
        self.cache.insert(key, r);
        r
    }
}

fn bytes_of(messages: &[ShrunkMessage]) -> Vec<Vec<u8>> {
    messages.iter().map(|m| m.bytes.clone()).collect()
}

/// Shrinks `messages`, for which `predicate` must hold, to a smaller list for which it holds.
/// With `model`, tokens and slot values inside messages are shrunk too.
pub fn shrink(
    messages: &[Vec<u8>],
    model: Option<&Compiled>,
    options: &ShrinkOptions,
    predicate: impl FnMut(&[Vec<u8>]) -> bool,
) -> Shrunk {
    let mut tester = Tester {
        predicate,
        cache: FxHashMap::default(),
        calls: 0,
        hits: 0,
        max_calls: options.max_calls,
        stop: options.stop.clone(),
        starved: false,
    };
    tester.cache.insert(Tester::<fn(&[Vec<u8>]) -> bool>::key(messages), true);
    let start: Vec<ShrunkMessage> = messages
        .iter()
        .enumerate()
        .map(|(i, m)| ShrunkMessage { bytes: m.clone(), origin: i, edited: false })
        .collect();
    let mut current = ddmin(start, &mut |c: &[ShrunkMessage]| tester.test(&bytes_of(c)));
    if let Some(model) = model {
        for i in 0..current.len() {
            shrink_tokens(model, &mut current, i, &mut tester);
            simplify_values(model, &mut current, i, &mut tester);
        }
        current = ddmin(current, &mut |c: &[ShrunkMessage]| tester.test(&bytes_of(c)));
    }
    Shrunk { messages: current, calls: tester.calls, cache_hits: tester.hits, complete: !tester.starved }
}

fn shrink_tokens<P: FnMut(&[Vec<u8>]) -> bool>(
    model: &Compiled,
    current: &mut [ShrunkMessage],
    i: usize,
    tester: &mut Tester<P>,
) {
    if parts::split(model, &current[i].bytes).is_none() {
        // Derived fields disagree with the message (or its pieces do not write it back): try
        // it with them recomputed, which is simpler when the failure does not need the damage.
        let mut candidate = bytes_of(current);
        candidate[i] = parts::write(&parts::split_any(model, &current[i].bytes));
        if candidate[i] == current[i].bytes || !tester.test(&candidate) {
            return;
        }
        current[i].bytes = candidate[i].clone();
        current[i].edited = true;
    }
    let Some(groups) = parts::groups(model, &current[i].bytes) else { return };
    let removable: Vec<usize> = groups.iter().enumerate().filter(|(_, g)| !g.fixed).map(|(k, _)| k).collect();
    let mut candidate = bytes_of(current);
    let kept = ddmin(removable, &mut |kept: &[usize]| {
        candidate[i] = parts::write_kept(&groups, kept);
        tester.test(&candidate)
    });
    let bytes = parts::write_kept(&groups, &kept);
    if bytes != current[i].bytes {
        current[i].bytes = bytes;
        current[i].edited = true;
    }
}

fn simplify_values<P: FnMut(&[Vec<u8>]) -> bool>(
    model: &Compiled,
    current: &mut [ShrunkMessage],
    i: usize,
    tester: &mut Tester<P>,
) {
    let mut slot = 0;
    loop {
        let bytes = current[i].bytes.clone();
        let Some(mut all) = parts::split(model, &bytes) else { return };
        let slots = parts::slot_pools(model, &bytes);
        let Some(&(position, pool)) = slots.get(slot) else { return };
        slot += 1;
        let Some(pool) = pool else { continue };
        let common = model.common_value(pool);
        match all.get(position) {
            Some(parts::OwnedPart::Value(v)) if v.as_slice() != common => {}
            _ => continue,
        }
        all[position] = parts::OwnedPart::Value(common.to_vec());
        let simpler = parts::write(&all);
        let mut candidate = bytes_of(current);
        candidate[i] = simpler.clone();
        if tester.test(&candidate) {
            current[i].bytes = simpler;
            current[i].edited = true;
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn messages_only_without_a_model_and_no_candidate_twice() {
        let input: Vec<Vec<u8>> =
            ["a", "b", "c", "d", "e", "f", "g", "h"].iter().map(|s| s.as_bytes().to_vec()).collect();
        let mut seen = std::collections::HashSet::new();
        let mut repeated = 0;
        let result = shrink(&input, None, &ShrinkOptions::default(), |c| {
            if !seen.insert(c.to_vec()) {
                repeated += 1;
            }
            c.contains(&b"c".to_vec()) && c.contains(&b"f".to_vec())
        });
        assert_eq!(result.bytes(), vec![b"c".to_vec(), b"f".to_vec()]);
        assert_eq!(repeated, 0);
        assert!(result.complete);
        assert_eq!(result.calls, seen.len());
        assert_eq!(result.messages[1].origin, 5);
    }

    #[test]
    fn budget_bounds_calls_and_keeps_a_failing_result() {
        let input: Vec<Vec<u8>> = (0..64u8).map(|i| vec![i]).collect();
        let options = ShrinkOptions { max_calls: 5, stop: None };
        let fails = |c: &[Vec<u8>]| c.iter().any(|m| m[0] == 40);
        let result = shrink(&input, None, &options, fails);
        assert!(result.calls <= 5);
        assert!(!result.complete);
        assert!(fails(&result.bytes()));
    }
}
