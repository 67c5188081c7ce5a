//! Rare mode: forced steps into the tail of the session chain, and hostile slot values.
//!
//! Before each session step (including the one that might end the session) a coin with the
//! rare rate decides whether the step is forced; unforced steps are plausible ones. A forced step draws from the *tail*: every
//! symbol the chain gives an explicit term after this history (successors seen in training
//! after the full context, plus the unseen ones offered by the shorter backoff contexts), the
//! session end excluded, each weighted by 1/p. So the least expected of the messages the model
//! knows are the likeliest picks, and every pick is still a whole learned template. The step is
//! marked `rare`; its message's surprise is −log2 p of the forced choice.
//!
//! A trace is drawn from this per-step process conditioned on holding at least `rare_min`
//! forced steps (rejection: at most [`MAX_DRAWS`] draws, the last kept), because a rare trace
//! without any rare step is plausible traffic under another name: at rate 0.05 and ten steps,
//! 60% of unconditioned traces would have none.
//!
//! Independently, each slot gets a hostile value with the hostile rate, and each message that
//! writes a Content-Length gets a skewed one with the same rate (see [`super::hostile`]).

use rand::{Rng, RngExt};

use super::hostile::HostileLibrary;
use super::walk::{make_step, sample_plausible};
use super::{GenOptions, Step, Walk};
use crate::chain::Chain;
use crate::model::Compiled;
use crate::symbol::{BEGIN, END};
use crate::token::{Derived, Framing, Token};

/// Most walks drawn for one rare trace while looking for `rare_min` forced steps.
pub const MAX_DRAWS: usize = 64;

/// Draws a tail step after `history`; returns the symbol and its probability under the chain,
/// or `None` when the tail is empty (only the session end has an explicit term).
pub fn tail_step<R: Rng + ?Sized>(
    chain: &Chain,
    history: &[u32],
    rng: &mut R,
    scratch: &mut Vec<(u32, f64)>,
) -> Option<(u32, f64)> {
    chain.distribution(history, scratch);
    scratch.retain(|&(s, p)| s != END && s != BEGIN && p > 0.0);
    let total: f64 = scratch.iter().map(|e| 1.0 / e.1).sum();
    if scratch.is_empty() || !total.is_finite() {
        return None;
    }
    let mut target = rng.random::<f64>() * total;
    for &(s, p) in scratch.iter() {
        target -= 1.0 / p;
        if target < 0.0 {
            return Some((s, p));
        }
    }
    scratch.last().copied()
}

/// A rare walk (see the module documentation).
pub fn rare<R: Rng + ?Sized>(model: &Compiled, options: &GenOptions, rng: &mut R) -> Walk {
    let mut walk = Walk::default();
    for _ in 0..MAX_DRAWS {
        walk = rare_once(model, options, rng);
        if walk.rare_steps() >= options.rare_min as usize {
            break;
        }
    }
    walk
}

fn rare_once<R: Rng + ?Sized>(model: &Compiled, options: &GenOptions, rng: &mut R) -> Walk {
    let mut walk = Walk::default();
    let mut history: Vec<u32> = Vec::new();
    let mut scratch = Vec::new();
    let hostile_rate = options.hostile_rate.unwrap_or(options.rare_rate);
    while walk.steps.len() < options.max_messages {
        let forced = rng.random::<f64>() < options.rare_rate;
        let tail = if forced { tail_step(&model.session, &history, rng, &mut scratch) } else { None };
        let (s, p) = match tail {
            Some(pick) => pick,
            None => {
                let s = sample_plausible(&model.session, &history, options.temperature, rng, &mut scratch);
                (s, model.session.prob(&history, s))
            }
        };
        if s == END {
            walk.ended = true;
            break;
        }
        let mut step = make_step(model, options, &history, s, -p.log2(), rng, &mut scratch);
        if tail.is_some() {
            step.marks.push("rare".into());
        }
        if let Some(lib) = &options.hostile {
            apply_hostile(model, &mut step, lib, hostile_rate, rng);
        }
        walk.steps.push(step);
        history.push(s);
    }
    walk
}

/// With probability `rate` per slot, replaces the slot's value by a hostile one of its class;
/// with the same probability skews the Content-Length of a message that writes one. Marks the
/// step with `hostile:N:NAME` (N counts slots from 1) or `hostile:length:NAME`.
pub fn apply_hostile<R: Rng + ?Sized>(
    model: &Compiled,
    step: &mut Step,
    lib: &HostileLibrary,
    rate: f64,
    rng: &mut R,
) {
    if step.is_opaque() {
        return;
    }
    let slots = model.slots_of(&step.tokens);
    for (i, slot) in slots.iter().enumerate() {
        if rng.random::<f64>() >= rate {
            continue;
        }
        let Some(Token::Slot(class)) = model.vocab.token(slot.symbol) else { continue };
        if let Some(v) = lib.pick(class, rng)
            && let Some(value) = step.values.get_mut(i)
        {
            *value = v.bytes.clone();
            step.marks.push(format!("hostile:{}:{}", i + 1, v.name));
            step.verbatim = None;
        }
    }
    if writes_content_length(model, step)
        && rng.random::<f64>() < rate
        && let Some(skew) = lib.pick_skew(rng)
    {
        step.skew.content_length = skew.delta;
        step.marks.push(format!("hostile:length:{}", skew.name));
        step.verbatim = None;
    }
}

/// Whether rendering the step writes a Content-Length field: explicitly, or added for a
/// non-empty body after a head without framing.
pub fn writes_content_length(model: &Compiled, step: &Step) -> bool {
    let token = |s: u32| model.vocab.token(s);
    let Some(body) = step.tokens.iter().position(|&s| matches!(token(s), Some(Token::Body(_)))) else {
        return step.tokens.iter().any(|&s| matches!(token(s), Some(Token::Derived(Derived::ContentLength))));
    };
    match token(step.tokens[body]) {
        Some(Token::Body(Framing::None)) => {
            let slots_before =
                step.tokens[..body].iter().filter(|&&s| matches!(token(s), Some(Token::Slot(_)))).count();
            let mut slot = slots_before;
            step.tokens[body + 1..].iter().any(|&s| match token(s) {
                Some(Token::Lit(b)) => !b.is_empty(),
                Some(Token::Slot(_)) => {
                    slot += 1;
                    step.values.get(slot - 1).is_some_and(|v| !v.is_empty())
                }
                _ => false,
            })
        }
        _ => step.tokens[..body]
            .iter()
            .any(|&s| matches!(token(s), Some(Token::Derived(Derived::ContentLength)))),
    }
}
