//! Walking the chains: one trace as a sequence of steps.

use rand::{Rng, RngExt};

use super::GenOptions;
use crate::chain::Chain;
use crate::model::Compiled;
use crate::symbol::{BEGIN, END, NOVEL};
use crate::token::render::Skew;

/// One generated message before rendering.
#[derive(Debug, Clone, PartialEq)]
pub struct Step {
    /// Session symbol of the template, or [`NOVEL`] for a template the model has not seen.
    pub template: u32,
    /// Token symbols of the message.
    pub tokens: Vec<u32>,
    /// One value per slot, in order.
    pub values: Vec<Vec<u8>>,
    /// −log2 probability of the step under the model (template choice, plus tokens if novel).
    pub surprise: f64,
    /// Annotations (`novel`, `rare`, `hostile:2:int32-max`, …).
    pub marks: Vec<String>,
    /// Deliberate damage to derived fields.
    pub skew: Skew,
    /// Bytes written instead of rendering `tokens`: a message read from traffic that the model
    /// cannot reproduce (unknown tokens, or a form the renderer normalises, such as a body in
    /// several chunks). Edits that change `tokens` or `values` clear it.
    pub verbatim: Option<Vec<u8>>,
}

impl Step {
    /// A step of a known template with the given slot values.
    pub fn of_template(model: &Compiled, template: u32, values: Vec<Vec<u8>>, surprise: f64) -> Step {
        Step {
            template,
            tokens: model.template(template).unwrap_or_default().to_vec(),
            values,
            surprise,
            marks: Vec::new(),
            skew: Skew::default(),
            verbatim: None,
        }
    }

    /// The wire bytes of this step.
    pub fn render(&self, model: &Compiled) -> Vec<u8> {
        if let Some(bytes) = &self.verbatim {
            return bytes.clone();
        }
        let values: Vec<&[u8]> = self.values.iter().map(|v| v.as_slice()).collect();
        model.render(&self.tokens, &values, self.skew)
    }

    /// True when the model cannot edit this step's tokens (it is kept as raw bytes).
    pub fn is_opaque(&self) -> bool {
        self.verbatim.is_some() && self.tokens.is_empty()
    }
}

/// A generated session.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct Walk {
    pub steps: Vec<Step>,
    /// False when the walk was cut at the message limit before the chain ended it.
    pub ended: bool,
}

impl Walk {
    /// Session symbols of the steps.
    pub fn templates(&self) -> Vec<u32> {
        self.steps.iter().map(|s| s.template).collect()
    }

    /// The wire bytes of all steps, concatenated.
    pub fn wire_bytes(&self, model: &Compiled) -> Vec<u8> {
        self.steps.iter().flat_map(|s| s.render(model)).collect()
    }

    /// Number of steps marked as forced rare steps.
    pub fn rare_steps(&self) -> usize {
        self.steps.iter().filter(|s| s.marks.iter().any(|m| m == "rare")).count()
    }
}

/// Draws the next step of plausible traffic: from the maximum-likelihood distribution of the
/// longest context seen in training (see [`Chain::sample_seen`]), weights raised to 1/t.
pub fn sample_plausible<R: Rng + ?Sized>(
    chain: &Chain,
    history: &[u32],
    t: f64,
    rng: &mut R,
    scratch: &mut Vec<(u32, f64)>,
) -> u32 {
    if t == 1.0 {
        return chain.sample_seen(history, rng);
    }
    chain.seen_distribution(history, scratch);
    let inv = 1.0 / t;
    let total: f64 = scratch.iter().map(|e| e.1.powf(inv)).sum();
    let mut target = rng.random::<f64>() * total;
    for &(s, p) in scratch.iter() {
        target -= p.powf(inv);
        if target < 0.0 {
            return s;
        }
    }
    scratch.last().map_or(END, |e| e.0)
}

/// Draws the next symbol from the smoothed chain with temperature `t` (exactly p^(1/t)
/// renormalised, unseen steps included).
pub fn sample_tempered<R: Rng + ?Sized>(
    chain: &Chain,
    history: &[u32],
    t: f64,
    rng: &mut R,
    scratch: &mut Vec<(u32, f64)>,
) -> u32 {
    if t == 1.0 {
        return chain.sample(history, rng);
    }
    let floor = chain.distribution(history, scratch);
    let rest = (chain.symbols() - 1) as usize - scratch.len();
    let inv = 1.0 / t;
    let rest_weight = if floor > 0.0 { rest as f64 * floor.powf(inv) } else { 0.0 };
    let total: f64 = scratch.iter().map(|e| e.1.powf(inv)).sum::<f64>() + rest_weight;
    let mut target = rng.random::<f64>() * total;
    for &(s, p) in scratch.iter() {
        target -= p.powf(inv);
        if target < 0.0 {
            return s;
        }
    }
    if rest > 0 {
        return unlisted_symbol(chain, scratch, rng);
    }
    scratch.last().map_or(END, |e| e.0)
}

/// A uniformly drawn predictable symbol not in the sorted list `listed`.
pub fn unlisted_symbol<R: Rng + ?Sized>(chain: &Chain, listed: &[(u32, f64)], rng: &mut R) -> u32 {
    let n = chain.symbols();
    for _ in 0..64 {
        let s = rng.random_range(1..n);
        if listed.binary_search_by_key(&s, |e| e.0).is_err() {
            return s;
        }
    }
    (1..n).find(|s| listed.binary_search_by_key(s, |e| e.0).is_err()).unwrap_or(END)
}

/// Builds a new message with the message chain; returns tokens and the surprise in bits.
pub fn novel_tokens<R: Rng + ?Sized>(
    model: &Compiled,
    options: &GenOptions,
    rng: &mut R,
    scratch: &mut Vec<(u32, f64)>,
) -> (Vec<u32>, f64) {
    let mut tokens = Vec::new();
    let mut bits = 0.0;
    while tokens.len() < options.max_tokens {
        let s = sample_plausible(&model.message, &tokens, options.temperature, rng, scratch);
        bits -= model.message.prob(&tokens, s).log2();
        if s == END {
            break;
        }
        tokens.push(s);
    }
    (tokens, bits)
}

/// A message for the session chain's novel-message step: the message chain is sampled until its
/// tokens do not form a frequent template (those have their own symbol, so the step means "a
/// message of a rare or unseen shape"); after 64 tries the last sample is kept.
pub fn novel_message<R: Rng + ?Sized>(
    model: &Compiled,
    options: &GenOptions,
    rng: &mut R,
    scratch: &mut Vec<(u32, f64)>,
) -> (Vec<u32>, f64) {
    let mut attempt = novel_tokens(model, options, rng, scratch);
    for _ in 0..63 {
        if model.template_symbol(&attempt.0).is_none() {
            break;
        }
        attempt = novel_tokens(model, options, rng, scratch);
    }
    attempt
}

/// Fills the slots of `tokens` from the pools.
pub fn fill_values<R: Rng + ?Sized>(
    model: &Compiled,
    tokens: &[u32],
    template: u32,
    rng: &mut R,
) -> Vec<Vec<u8>> {
    let slots =
        if template == NOVEL { model.slots_of(tokens) } else { model.template_slots(template).to_vec() };
    slots
        .iter()
        .map(|slot| match slot.pool {
            Some(p) => model.sample_value(p, rng).to_vec(),
            None => b"0".to_vec(),
        })
        .collect()
}

/// The step for session symbol `s` after `history`, with slots filled from the pools. A
/// template symbol gives that template. The novel-message symbol stands for the rare templates
/// folded into it: one that followed the same step in training is drawn; only a model without
/// rare templates builds a new message with the message chain (marked `novel` when its template
/// was never seen; its token bits are added to the surprise).
pub fn make_step<R: Rng + ?Sized>(
    model: &Compiled,
    options: &GenOptions,
    history: &[u32],
    s: u32,
    surprise: f64,
    rng: &mut R,
    scratch: &mut Vec<(u32, f64)>,
) -> Step {
    if s != NOVEL {
        let values = fill_values(model, model.template(s).unwrap_or_default(), s, rng);
        return Step::of_template(model, s, values, surprise);
    }
    let prev = history.last().copied().unwrap_or(BEGIN);
    let (tokens, bits, marks) = match model.sample_rare_template(prev, rng) {
        Some(t) => (model.template(t).unwrap_or_default().to_vec(), 0.0, Vec::new()),
        None => {
            let (tokens, bits) = novel_message(model, options, rng, scratch);
            let marks = if model.learned_template(&tokens).is_none() {
                vec!["novel".to_string()]
            } else {
                Vec::new()
            };
            (tokens, bits, marks)
        }
    };
    let values = fill_values(model, &tokens, NOVEL, rng);
    Step {
        template: NOVEL,
        tokens,
        values,
        surprise: surprise + bits,
        marks,
        skew: Skew::default(),
        verbatim: None,
    }
}

/// A plausible walk.
pub fn plausible<R: Rng + ?Sized>(model: &Compiled, options: &GenOptions, rng: &mut R) -> Walk {
    let mut walk = Walk::default();
    let mut history: Vec<u32> = Vec::new();
    let mut scratch = Vec::new();
    while walk.steps.len() < options.max_messages {
        let s = sample_plausible(&model.session, &history, options.temperature, rng, &mut scratch);
        let surprise = -model.session.prob(&history, s).log2();
        if s == END {
            walk.ended = true;
            return walk;
        }
        walk.steps.push(make_step(model, options, &history, s, surprise, rng, &mut scratch));
        history.push(s);
    }
    walk
}

/// A walk through the given session symbols (the end implied), with slots filled from the
/// pools; each step's surprise is the chain's for that step.
pub fn of_symbols<R: Rng + ?Sized>(
    model: &Compiled,
    options: &GenOptions,
    symbols: &[u32],
    rng: &mut R,
) -> Walk {
    let mut scratch = Vec::new();
    let steps = symbols
        .iter()
        .enumerate()
        .map(|(i, &s)| {
            let surprise = -model.session.prob(&symbols[..i], s).log2();
            make_step(model, options, &symbols[..i], s, surprise, rng, &mut scratch)
        })
        .collect();
    Walk { steps, ended: true }
}
