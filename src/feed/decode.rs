//! Structured decoding: an engine's input bytes, read as a stream of choices, pick a walk of
//! the model.
//!
//! Each choice reads a `u32` from the input and maps it through the inverse cumulative
//! distribution of the step's candidates, ordered likeliest first: small changes of the bytes
//! change one choice, a zero choice (what an exhausted input yields) is the likeliest step, and
//! once the input is used up a walk ends as soon as the chain allows. Candidates come from the
//! smoothed chain (including steps never seen in training, through the backoff mass), and a
//! slot value is either a pool value or, for a small band of choices, bytes taken verbatim
//! from the input, so the engine can reach values the model never saw.

use arbitrary::Unstructured;

use crate::generate::{Step, Walk};
use crate::model::Compiled;
use crate::symbol::{END, NOVEL};
use crate::token::render::Skew;
use crate::trace::Trace;

/// Bounds of a decoded walk.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct DecodeOptions {
    pub max_messages: usize,
    pub max_tokens: usize,
    /// Longest slot value taken verbatim from the input.
    pub max_raw_value: usize,
}

impl Default for DecodeOptions {
    fn default() -> Self {
        DecodeOptions { max_messages: 32, max_tokens: 128, max_raw_value: 64 }
    }
}

/// One choice in [0, 1): the next four input bytes (zeros once the input is used up).
fn choice(u: &mut Unstructured<'_>) -> f64 {
    let x: u32 = u.arbitrary().unwrap_or(0);
    x as f64 / 4_294_967_296.0
}

/// Picks a symbol from the smoothed next-step distribution of `chain` after `history`.
fn pick(
    chain: &crate::chain::Chain,
    history: &[u32],
    u: &mut Unstructured<'_>,
    dist: &mut Vec<(u32, f64)>,
) -> u32 {
    let floor = chain.distribution(history, dist);
    if u.is_empty() && dist.iter().any(|e| e.0 == END) {
        return END;
    }
    let listed: Vec<u32> = dist.iter().map(|e| e.0).collect();
    dist.sort_by(|a, b| b.1.total_cmp(&a.1).then(a.0.cmp(&b.0)));
    let mut target = choice(u);
    for &(s, p) in dist.iter() {
        target -= p;
        if target < 0.0 {
            return s;
        }
    }
    // The shared floor of all other symbols: pick one of them by a second choice.
    let others: u32 = (chain.symbols() - 1).saturating_sub(listed.len() as u32);
    if floor <= 0.0 || others == 0 {
        return dist.first().map_or(END, |e| e.0);
    }
    let k = (choice(u) * others as f64) as u32;
    // The k-th predictable symbol (from 1) not in `listed` (which is sorted).
    let (mut s, mut skipped) = (1u32, 0u32);
    loop {
        if listed.binary_search(&s).is_err() {
            if skipped == k {
                return s;
            }
            skipped += 1;
        }
        s += 1;
        if s >= chain.symbols() {
            return END;
        }
    }
}

/// Decodes a walk of `model` from the choices in `u`.
pub fn decode(model: &Compiled, u: &mut Unstructured<'_>, options: &DecodeOptions) -> Walk {
    let mut walk = Walk::default();
    let mut history = Vec::new();
    let mut dist = Vec::new();
    while walk.steps.len() < options.max_messages {
        let s = pick(&model.session, &history, u, &mut dist);
        if s == END {
            walk.ended = true;
            break;
        }
        let mut surprise = -model.session.prob(&history, s).log2();
        let (tokens, marks) = match model.template(s) {
            Some(t) => (t.to_vec(), Vec::new()),
            None => {
                let mut tokens = Vec::new();
                while tokens.len() < options.max_tokens {
                    let t = pick(&model.message, &tokens, u, &mut dist);
                    surprise -= model.message.prob(&tokens, t).log2();
                    if t == END {
                        break;
                    }
                    tokens.push(t);
                }
                (tokens, vec!["novel".to_string()])
            }
        };
        let template = if model.template(s).is_some() { s } else { NOVEL };
        let slots =
            if template == NOVEL { model.slots_of(&tokens) } else { model.template_slots(template).to_vec() };
        let values = slots
            .iter()
            .map(|slot| {
                let c = choice(u);
                let pool = slot.pool.map(|p| &model.pools[p as usize]);
                match pool {
                    Some(p) if c < 15.0 / 16.0 && !p.values.is_empty() => {
                        let total: u64 = p.values.iter().map(|v| v.count).sum();
                        let mut target = c * 16.0 / 15.0 * total as f64;
                        for v in &p.values {
                            target -= v.count as f64;
                            if target < 0.0 {
                                return v.value.clone();
                            }
                        }
                        p.values[0].value.clone()
                    }
                    _ => {
                        let len = usize::from(u.arbitrary::<u8>().unwrap_or(0)) % (options.max_raw_value + 1);
                        u.bytes(len.min(u.len())).map(|b| b.to_vec()).unwrap_or_default()
                    }
                }
            })
            .collect();
        history.push(s);
        walk.steps.push(Step {
            template,
            tokens,
            values,
            surprise,
            marks,
            skew: Skew::default(),
            verbatim: None,
            flow: Vec::new(),
            replies: Vec::new(),
        });
    }
    walk
}

/// The wire bytes of the walk `data` decodes to: exactly what a structured fuzz target hands its
/// harness, so a crash file of such a target can be turned back into the session it ran.
pub fn decode_bytes(model: &Compiled, data: &[u8], options: &DecodeOptions) -> Vec<u8> {
    let walk = decode(model, &mut Unstructured::new(data), options);
    walk.steps.iter().flat_map(|s| s.render(model)).collect()
}

/// The walk `data` decodes to as a readable trace (no header, requests only); its wire bytes are
/// [`decode_bytes`].
pub fn decode_trace(model: &Compiled, data: &[u8], options: &DecodeOptions) -> Trace {
    decode(model, &mut Unstructured::new(data), options).to_trace(model)
}
