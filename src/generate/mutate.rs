//! Mutation of traffic, driven by the model.
//!
//! Traffic (read from traces or captures) becomes a [`Walk`] with [`walk_of_messages`]: each
//! message is tokenized with the model; a message whose tokens the model all knows becomes an
//! editable step (tokens and slot values), any other message an opaque step that is written
//! back byte for byte. An untouched step is always written exactly as it was read.
//!
//! The operators ([`Operator`]) change a walk in ways the model can vouch for:
//!
//! - `replace-token`: one token becomes another token the message chain has seen after the same
//!   context (the longest stored context of the preceding tokens that offers an alternative).
//! - `replace-message`: one message becomes another template the session chain has seen after
//!   the same session context, with slot values from the pools.
//! - `splice`: the prefix of one session joined to the suffix of another (or the same) session
//!   at a point where both have the same session context (the last `order` templates), so every
//!   transition of the result is one of the inputs': learned inputs give a learned result. The
//!   sequence of templates must change.
//! - `delete`, `duplicate`, `reorder`: one message removed, repeated, or moved elsewhere.
//! - `swap-values`: two slot values of the same class exchanged (across messages too).
//! - `hostile-value`: one slot value replaced by a hostile one (or one Content-Length skewed).
//!
//! Changed steps are marked `mutated:OPERATOR`; surprises are recomputed as `tracewalk score`
//! does. [`Mutator::mutate`] applies one random operator within a byte budget (the interface a
//! fuzzer's custom mutator needs). Everything is deterministic for a given random generator.

use std::fmt;
use std::sync::Arc;

use rand::{Rng, RngExt};

use super::hostile::HostileLibrary;
use super::rare::writes_content_length;
use super::transitions::window;
use super::walk::fill_values;
use super::{Step, Walk};
use crate::chain::Chain;
use crate::model::Compiled;
use crate::score::Scorer;
use crate::symbol::{BEGIN, END, NOVEL};
use crate::token::render::Skew;
use crate::token::{PieceKind, Token, Tokenized};

/// A mutation operator (see the module documentation).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum Operator {
    ReplaceToken,
    ReplaceMessage,
    Splice,
    Delete,
    Duplicate,
    Reorder,
    SwapValues,
    HostileValue,
}

impl Operator {
    pub const ALL: [Operator; 8] = [
        Operator::ReplaceToken,
        Operator::ReplaceMessage,
        Operator::Splice,
        Operator::Delete,
        Operator::Duplicate,
        Operator::Reorder,
        Operator::SwapValues,
        Operator::HostileValue,
    ];

    pub fn name(self) -> &'static str {
        match self {
            Operator::ReplaceToken => "replace-token",
            Operator::ReplaceMessage => "replace-message",
            Operator::Splice => "splice",
            Operator::Delete => "delete",
            Operator::Duplicate => "duplicate",
            Operator::Reorder => "reorder",
            Operator::SwapValues => "swap-values",
            Operator::HostileValue => "hostile-value",
        }
    }
}

impl std::str::FromStr for Operator {
    type Err = String;
    fn from_str(s: &str) -> Result<Self, Self::Err> {
        Operator::ALL.into_iter().find(|o| o.name() == s).ok_or_else(|| {
            let names: Vec<&str> = Operator::ALL.iter().map(|o| o.name()).collect();
            format!("unknown operator `{s}` ({})", names.join(", "))
        })
    }
}

/// One applied mutation: the operator and the (0-based) message position it acted on.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Mutation {
    pub operator: Operator,
    pub position: usize,
}

impl fmt::Display for Mutation {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{}@{}", self.operator.name(), self.position + 1)
    }
}

/// Turns messages back into steps of a walk (see the module documentation). Surprises are
/// those `tracewalk score` gives.
pub fn walk_of_messages(model: &Compiled, messages: &[Vec<u8>]) -> Walk {
    let mut scratch = Tokenized::default();
    let mut scorer = Scorer::new(model);
    let steps = messages
        .iter()
        .map(|m| {
            let (surprise, _) = scorer.next(m);
            let symbols: Option<Vec<u32>> = model.symbols_of(m, &mut scratch).into_iter().collect();
            let Some(tokens) = symbols else {
                return Step {
                    template: NOVEL,
                    tokens: Vec::new(),
                    values: Vec::new(),
                    surprise,
                    marks: Vec::new(),
                    skew: Skew::default(),
                    verbatim: Some(m.clone()),
                };
            };
            let values = scratch
                .pieces
                .iter()
                .filter(|p| matches!(p.kind, PieceKind::Slot(_)))
                .map(|p| scratch.bytes(p).to_vec())
                .collect();
            let template = model.template_symbol(&tokens).unwrap_or(NOVEL);
            let mut step = Step {
                template,
                tokens,
                values,
                surprise,
                marks: Vec::new(),
                skew: Skew::default(),
                verbatim: None,
            };
            if step.render(model) != *m {
                step.verbatim = Some(m.clone());
            }
            step
        })
        .collect();
    Walk { steps, ended: true }
}

/// Recomputes every step's surprise from its bytes, as `tracewalk score` does.
pub fn rescore(model: &Compiled, walk: &mut Walk) {
    let mut scorer = Scorer::new(model);
    for s in &mut walk.steps {
        s.surprise = scorer.next(&s.render(model)).0;
    }
}

/// Applies mutation operators with a model.
#[derive(Debug, Clone)]
pub struct Mutator<'m> {
    model: &'m Compiled,
    hostile: Option<Arc<HostileLibrary>>,
    operators: Vec<Operator>,
}

/// Attempts [`Mutator::mutate`] makes before giving up.
pub const MUTATE_TRIES: usize = 16;

impl<'m> Mutator<'m> {
    /// A mutator using every operator and the built-in hostile values.
    pub fn new(model: &'m Compiled) -> Mutator<'m> {
        Mutator { model, hostile: Some(HostileLibrary::builtin()), operators: Operator::ALL.to_vec() }
    }

    /// Uses this hostile library (`None`: the hostile-value operator never applies).
    pub fn with_hostile(mut self, hostile: Option<Arc<HostileLibrary>>) -> Mutator<'m> {
        self.hostile = hostile;
        self
    }

    /// Restricts [`Mutator::mutate`] to these operators.
    pub fn with_operators(mut self, operators: Vec<Operator>) -> Mutator<'m> {
        self.operators = operators;
        self
    }

    /// Applies one random operator (among those allowed) such that the walk's wire size stays
    /// within `max_size` bytes; `partner` is the other session for splices (the walk itself
    /// when `None`). Returns `None`, leaving the walk unchanged, when no operator applies
    /// within [`MUTATE_TRIES`] attempts.
    pub fn mutate<R: Rng + ?Sized>(
        &self,
        walk: &mut Walk,
        partner: Option<&Walk>,
        max_size: usize,
        rng: &mut R,
    ) -> Option<Mutation> {
        if self.operators.is_empty() {
            return None;
        }
        for _ in 0..MUTATE_TRIES {
            let op = self.operators[rng.random_range(0..self.operators.len())];
            let mut candidate = walk.clone();
            let Some(m) = self.apply(op, &mut candidate, partner, rng) else { continue };
            if candidate.steps.iter().map(|s| s.render(self.model).len()).sum::<usize>() <= max_size {
                *walk = candidate;
                return Some(m);
            }
        }
        None
    }

    /// Applies `op` once. Returns `None` (walk unchanged) when it has nothing to act on.
    pub fn apply<R: Rng + ?Sized>(
        &self,
        op: Operator,
        walk: &mut Walk,
        partner: Option<&Walk>,
        rng: &mut R,
    ) -> Option<Mutation> {
        let position = match op {
            Operator::ReplaceToken => self.replace_token(walk, rng)?,
            Operator::ReplaceMessage => self.replace_message(walk, rng)?,
            Operator::Splice => {
                let other = partner.cloned().unwrap_or_else(|| walk.clone());
                self.splice(walk, &other, rng)?
            }
            Operator::Delete => {
                if walk.steps.len() < 2 {
                    return None;
                }
                let p = rng.random_range(0..walk.steps.len());
                walk.steps.remove(p);
                p.min(walk.steps.len() - 1)
            }
            Operator::Duplicate => {
                if walk.steps.is_empty() {
                    return None;
                }
                let p = rng.random_range(0..walk.steps.len());
                let mut copy = walk.steps[p].clone();
                mark(&mut copy, op);
                walk.steps.insert(p + 1, copy);
                p + 1
            }
            Operator::Reorder => self.reorder(walk, rng)?,
            Operator::SwapValues => self.swap_values(walk, rng)?,
            Operator::HostileValue => self.hostile_value(walk, rng)?,
        };
        if !matches!(op, Operator::Duplicate | Operator::Delete) {
            mark(&mut walk.steps[position], op);
        }
        rescore(self.model, walk);
        Some(Mutation { operator: op, position })
    }

    fn replace_token<R: Rng + ?Sized>(&self, walk: &mut Walk, rng: &mut R) -> Option<usize> {
        let editable: Vec<usize> =
            (0..walk.steps.len()).filter(|&i| !walk.steps[i].tokens.is_empty()).collect();
        if editable.is_empty() {
            return None;
        }
        let p = editable[rng.random_range(0..editable.len())];
        let model = self.model;
        let step = &mut walk.steps[p];
        let i = rng.random_range(0..step.tokens.len());
        let old = step.tokens[i];
        let new = alternative(&model.message, &step.tokens[..i], old, rng)?;
        let is_slot = |s: u32| matches!(model.vocab.token(s), Some(Token::Slot(_)));
        let k = step.tokens[..i].iter().filter(|&&s| is_slot(s)).count();
        if is_slot(old) && k < step.values.len() {
            step.values.remove(k);
        }
        step.tokens[i] = new;
        if is_slot(new) {
            let slots = model.slots_of(&step.tokens);
            let value = slots
                .iter()
                .find(|s| s.position as usize == i)
                .and_then(|s| s.pool)
                .map_or_else(Vec::new, |pool| model.sample_value(pool, rng).to_vec());
            step.values.insert(k.min(step.values.len()), value);
        }
        step.template = model.template_symbol(&step.tokens).unwrap_or(NOVEL);
        step.verbatim = None;
        Some(p)
    }

    fn replace_message<R: Rng + ?Sized>(&self, walk: &mut Walk, rng: &mut R) -> Option<usize> {
        if walk.steps.is_empty() {
            return None;
        }
        let p = rng.random_range(0..walk.steps.len());
        let history = walk.templates();
        let current = walk.steps[p].template;
        let s = alternative(&self.model.session, &history[..p], current, rng).filter(|&s| s != NOVEL)?;
        let values = fill_values(self.model, self.model.template(s).unwrap_or_default(), s, rng);
        walk.steps[p] = Step::of_template(self.model, s, values, 0.0);
        Some(p)
    }

    fn splice<R: Rng + ?Sized>(&self, walk: &mut Walk, other: &Walk, rng: &mut R) -> Option<usize> {
        let order = self.model.session.order();
        let (a, b) = (walk.templates(), other.templates());
        let mut by_window: rustc_hash::FxHashMap<Vec<u32>, Vec<usize>> = Default::default();
        for j in 0..=b.len() {
            by_window.entry(window(order, &b[..j])).or_default().push(j);
        }
        // Reservoir sampling over the valid cut pairs, so long sessions cost no extra memory.
        let (mut chosen, mut seen) = (None, 0u64);
        for i in 0..=a.len() {
            for &j in by_window.get(&window(order, &a[..i])).into_iter().flatten() {
                // A splice must change the sequence of templates; else it is a value edit.
                let result_len = i + b.len() - j;
                if result_len == 0 || (result_len == a.len() && a[i..] == b[j..]) {
                    continue;
                }
                seen += 1;
                if rng.random_range(0..seen) == 0 {
                    chosen = Some((i, j));
                }
            }
        }
        let (i, j) = chosen?;
        walk.steps.truncate(i);
        walk.steps.extend_from_slice(&other.steps[j..]);
        walk.ended = other.ended;
        Some(i.min(walk.steps.len() - 1))
    }

    fn reorder<R: Rng + ?Sized>(&self, walk: &mut Walk, rng: &mut R) -> Option<usize> {
        let n = walk.steps.len();
        if n < 2 {
            return None;
        }
        for _ in 0..8 {
            let (p, q) = (rng.random_range(0..n), rng.random_range(0..n));
            let (lo, hi) = (p.min(q), p.max(q));
            if p == q || walk.steps[lo..=hi].iter().all(|s| same_message(s, &walk.steps[p])) {
                continue;
            }
            let step = walk.steps.remove(p);
            walk.steps.insert(q, step);
            return Some(q);
        }
        None
    }

    fn swap_values<R: Rng + ?Sized>(&self, walk: &mut Walk, rng: &mut R) -> Option<usize> {
        // (step, value index, slot symbol) of every editable slot.
        let mut slots: Vec<(usize, usize, u32)> = Vec::new();
        for (i, step) in walk.steps.iter().enumerate() {
            if step.tokens.is_empty() {
                continue;
            }
            for (k, s) in self.model.slots_of(&step.tokens).iter().enumerate() {
                if k < step.values.len() {
                    slots.push((i, k, s.symbol));
                }
            }
        }
        let value = |w: &Walk, (i, k, _): (usize, usize, u32)| w.steps[i].values[k].clone();
        let mut pairs: Vec<(usize, usize)> = Vec::new();
        for a in 0..slots.len() {
            for b in a + 1..slots.len() {
                if slots[a].2 == slots[b].2 && value(walk, slots[a]) != value(walk, slots[b]) {
                    pairs.push((a, b));
                }
            }
        }
        if pairs.is_empty() {
            return None;
        }
        let (a, b) = pairs[rng.random_range(0..pairs.len())];
        let (va, vb) = (value(walk, slots[a]), value(walk, slots[b]));
        let (sa, sb) = (slots[a], slots[b]);
        walk.steps[sa.0].values[sa.1] = vb;
        walk.steps[sb.0].values[sb.1] = va;
        for i in [sa.0, sb.0] {
            walk.steps[i].verbatim = None;
        }
        if sa.0 != sb.0 {
            mark(&mut walk.steps[sb.0], Operator::SwapValues);
        }
        Some(sa.0)
    }

    fn hostile_value<R: Rng + ?Sized>(&self, walk: &mut Walk, rng: &mut R) -> Option<usize> {
        let lib = self.hostile.as_deref()?;
        // Candidates: (step, Some(slot index)) per slot, (step, None) per Content-Length.
        let mut targets: Vec<(usize, Option<usize>)> = Vec::new();
        for (i, step) in walk.steps.iter().enumerate() {
            if step.tokens.is_empty() {
                continue;
            }
            targets.extend((0..step.values.len()).map(|k| (i, Some(k))));
            if writes_content_length(self.model, step) && !lib.length_skews().is_empty() {
                targets.push((i, None));
            }
        }
        if targets.is_empty() {
            return None;
        }
        let (i, slot) = targets[rng.random_range(0..targets.len())];
        let model = self.model;
        let step = &mut walk.steps[i];
        // A few draws, so that a value equal to the current one (a zero in a zero) is no edit.
        match slot {
            Some(k) => {
                let symbol = model.slots_of(&step.tokens).get(k)?.symbol;
                let Some(Token::Slot(class)) = model.vocab.token(symbol) else { return None };
                let v = (0..8).filter_map(|_| lib.pick(class, rng)).find(|v| v.bytes != step.values[k])?;
                step.values[k] = v.bytes.clone();
                step.marks.push(format!("hostile:{}:{}", k + 1, v.name));
            }
            None => {
                let skew = (0..8)
                    .filter_map(|_| lib.pick_skew(rng))
                    .find(|s| s.delta != step.skew.content_length)?;
                step.skew.content_length = skew.delta;
                step.marks.push(format!("hostile:length:{}", skew.name));
            }
        }
        step.verbatim = None;
        Some(i)
    }
}

fn mark(step: &mut Step, op: Operator) {
    let label = format!("mutated:{}", op.name());
    if !step.marks.contains(&label) {
        step.marks.push(label);
    }
}

fn same_message(a: &Step, b: &Step) -> bool {
    a.template == b.template && a.tokens == b.tokens && a.values == b.values && a.verbatim == b.verbatim
}

/// A symbol other than `current` that `chain` has seen after the longest stored context of
/// `history` offering one (weighted by the chain's probability); `None` if no context does.
fn alternative<R: Rng + ?Sized>(chain: &Chain, history: &[u32], current: u32, rng: &mut R) -> Option<u32> {
    let order = chain.order();
    let w = window(order, history);
    for len in (0..=order).rev() {
        let options: Vec<(u32, f64)> = chain
            .successors(&w[order - len..])
            .into_iter()
            .map(|(s, _)| s)
            .filter(|&s| s != current && s != END && s != BEGIN)
            .map(|s| (s, chain.prob(history, s)))
            .collect();
        if options.is_empty() {
            continue;
        }
        let total: f64 = options.iter().map(|o| o.1).sum();
        let mut target = rng.random::<f64>() * total;
        for &(s, p) in &options {
            target -= p;
            if target < 0.0 {
                return Some(s);
            }
        }
        return options.last().map(|o| o.0);
    }
    None
}
