//! Value flow in generated sessions: slots copy values that earlier messages of the session
//! issued, as the model learned (see [`crate::model::flow`]).
//!
//! A walk's session steps and fresh slot values come first (every mode); [`apply`] then goes
//! through the walk in order. For each request slot with learned sources it draws one outcome
//! with the learned probabilities: copy source *k* (rate of *k*) or keep the fresh value (the
//! rest). A drawn source that holds no value in the [`Memory`] of the session falls back to the
//! first of the slot's other sources that does (highest rate first), then to the latest value
//! of the drawn source's kind (its anchor key: a template that differs only in other literals),
//! else the fresh value stays.
//! After each request it draws the *expected replies*: a run of reply templates as often as it
//! answered that request template in training before the same next request (a created order
//! is followed by its payment, a refused one is not), with values from the reply pools and the
//! same copying (a reply echoes the cart id the request named). Expected replies are never sent;
//! they are where generated sessions introduce the ids later requests use, and a trace shows
//! them when asked (`gen --replies`), marked `reply`.
//!
//! Slots of templates the model knows use precise couplings (per template slot); slots of
//! novel messages use the anchor-level couplings. The memory keeps the slot values of the last
//! [`FlowTable::window`](crate::model::flow::FlowTable::window) messages, requests and
//! replies counted alike, as learning did.
//!
//! Rare mode may break a coupling: with the flow-break rate per copied slot, the slot gets a
//! fresh pool value instead (`flow-broken:S:fresh`) or another value the session used earlier
//! (`flow-broken:S:other<N.K`). Copies are marked `flow:S<N.K`: slot S copies slot K of message
//! N of the trace (`Nr` is the expected reply to message N when replies are not shown, `Nr2` its
//! second reply); [`crate::generate::live::Replay`] reads these marks back.
//!
//! Against a target that replies, [`crate::generate::live::LiveSession`] resolves the same
//! copies with the values the target actually returned.

use std::borrow::Cow;
use std::collections::VecDeque;

use rand::{Rng, RngExt};
use rustc_hash::FxHashMap;

use super::{Step, Walk};
use crate::model::flow::{Side, SlotKey, SlotKeys};
use crate::model::{Compiled, SlotRef};
use crate::symbol::NOVEL;
use crate::token::Token;

/// A message of a session: a request step, or reply `reply` of the replies to it.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct MessageRef {
    pub step: u32,
    pub reply: Option<u32>,
}

/// What value flow did to a slot.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum FlowAction {
    /// The slot holds the latest value of its source.
    Copied,
    /// Rare mode: the coupling was broken on purpose; the slot holds a fresh pool value.
    BrokenFresh,
    /// Rare mode: the slot holds another value the session used earlier.
    BrokenOther,
}

/// Where a slot's value comes from.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Source {
    /// A template slot (precise coupling), with its anchor key id for messages of unknown
    /// templates.
    Slot { key: SlotKey, anchor: u32 },
    /// Any slot with this anchor key (anchor-level coupling).
    Anchor(u32),
}

/// The value flow of one slot.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct SlotFlow {
    /// Ordinal of the slot in its message (0-based).
    pub slot: u32,
    pub action: FlowAction,
    /// What the slot copies, or would have copied when broken.
    pub source: Source,
    /// The message the value came from (none for a fresh value)…
    pub from: Option<MessageRef>,
    /// …and the slot of that message (0-based).
    pub from_slot: u32,
}

/// A reply the model expects to a generated request. Never sent to a target.
#[derive(Debug, Clone, PartialEq)]
pub struct ReplyStep {
    /// Reply template symbol.
    pub template: u32,
    pub values: Vec<Vec<u8>>,
    pub flow: Vec<SlotFlow>,
}

impl ReplyStep {
    /// The bytes of this reply.
    pub fn render(&self, model: &Compiled) -> Vec<u8> {
        let values: Vec<&[u8]> = self.values.iter().map(|v| v.as_slice()).collect();
        model.replies.render(model.replies.template(self.template).unwrap_or_default(), &values)
    }
}

#[derive(Debug, Clone)]
struct Entry {
    pos: u32,
    /// Ordinal of the slot in its message.
    slot: u32,
    class: Option<u32>,
    /// Range of the value in [`Memory::bytes`].
    start: usize,
    end: usize,
    from: MessageRef,
}

/// Slot values of the recent messages of one session, for copying. Every message is recorded
/// (slotless ones too) so that distances count messages as learning did. Values are kept in
/// one buffer for the session (sessions are bounded by the message limit).
#[derive(Debug, Clone)]
pub struct Memory {
    window: u32,
    next_pos: u32,
    bytes: Vec<u8>,
    entries: VecDeque<Entry>,
    /// Absolute index of `entries[0]`.
    first: u64,
    by_key: FxHashMap<SlotKey, u64>,
    by_anchor: FxHashMap<u32, u64>,
    /// Only entries of messages without a known template.
    by_anchor_unkeyed: FxHashMap<u32, u64>,
}

/// A value found in a [`Memory`]: the bytes, the message and the slot (0-based) that held it.
#[derive(Debug, Clone, Copy)]
pub struct Found<'a> {
    pub value: &'a [u8],
    pub from: MessageRef,
    pub slot: u32,
}

impl Memory {
    /// An empty memory looking back `window` messages.
    pub fn new(window: u32) -> Memory {
        Memory {
            window: window.max(1),
            next_pos: 0,
            bytes: Vec::new(),
            entries: VecDeque::new(),
            first: 0,
            by_key: FxHashMap::default(),
            by_anchor: FxHashMap::default(),
            by_anchor_unkeyed: FxHashMap::default(),
        }
    }

    /// Records one message: its side and template when known, and per slot its anchor key id
    /// (if the model knows it), class (any numbering; used to prefer values of the same class
    /// when breaking a coupling) and value.
    pub fn record(
        &mut self,
        from: MessageRef,
        template: Option<(Side, u32)>,
        slots: &[SlotKeys],
        values: &[Vec<u8>],
    ) {
        let pos = self.next_pos;
        self.next_pos += 1;
        for (j, (value, &(anchor, class))) in values.iter().zip(slots).enumerate() {
            let abs = self.first + self.entries.len() as u64;
            let start = self.bytes.len();
            self.bytes.extend_from_slice(value);
            self.entries.push_back(Entry { pos, slot: j as u32, class, start, end: self.bytes.len(), from });
            if let Some((side, t)) = template {
                self.by_key.insert(SlotKey { side, template: t, slot: j as u32 }, abs);
            }
            if let Some(a) = anchor {
                self.by_anchor.insert(a, abs);
                if template.is_none() {
                    self.by_anchor_unkeyed.insert(a, abs);
                }
            }
        }
        while self.entries.front().is_some_and(|e| self.next_pos - e.pos > self.window) {
            self.entries.pop_front();
            self.first += 1;
        }
    }

    /// Empties the memory for a new session looking back `window` messages, keeping its
    /// allocations.
    pub fn reset(&mut self, window: u32) {
        self.window = window.max(1);
        self.next_pos = 0;
        self.bytes.clear();
        self.first += self.entries.len() as u64;
        self.entries.clear();
        self.by_key.clear();
        self.by_anchor.clear();
        self.by_anchor_unkeyed.clear();
    }

    fn at(&self, abs: u64) -> Option<Found<'_>> {
        let e = self.entries.get(abs.checked_sub(self.first)? as usize)?;
        Some(Found { value: &self.bytes[e.start..e.end], from: e.from, slot: e.slot })
    }

    /// The latest value of a template slot within the window.
    pub fn by_key(&self, key: SlotKey) -> Option<Found<'_>> {
        self.by_key.get(&key).and_then(|&abs| self.at(abs))
    }

    /// The latest value of a slot with this anchor key within the window; with `unkeyed_only`,
    /// only from messages whose template the model does not know.
    pub fn by_anchor(&self, anchor: u32, unkeyed_only: bool) -> Option<Found<'_>> {
        let map = if unkeyed_only { &self.by_anchor_unkeyed } else { &self.by_anchor };
        map.get(&anchor).and_then(|&abs| self.at(abs))
    }

    /// Resolves a source: a template slot's latest value (or, failing that, the latest value
    /// with its anchor key from a message of unknown template), or an anchor key's.
    pub fn find(&self, source: Source) -> Option<Found<'_>> {
        match source {
            Source::Slot { key, anchor } => self
                .by_key(key)
                .or_else(|| (anchor != u32::MAX).then(|| self.by_anchor(anchor, true)).flatten()),
            Source::Anchor(a) => self.by_anchor(a, false),
        }
    }

    /// Values in the window other than `not`, preferring those of class `class`, oldest first.
    pub(crate) fn others(&self, class: Option<u32>, not: &[u8]) -> Vec<Found<'_>> {
        let mut seen: Vec<&[u8]> = Vec::new();
        let mut same = Vec::new();
        let mut any = Vec::new();
        for e in &self.entries {
            let value = &self.bytes[e.start..e.end];
            if value == not || seen.contains(&value) {
                continue;
            }
            seen.push(value);
            let f = Found { value, from: e.from, slot: e.slot };
            if class.is_some() && e.class == class {
                same.push(f);
            }
            any.push(f);
        }
        if same.is_empty() { any } else { same }
    }
}

/// How [`apply`] treats a walk.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct FlowOptions {
    /// Reproduce the learned couplings.
    pub copy: bool,
    /// Generate the expected replies (also done whenever `copy` is on and the model has
    /// replies, since replies introduce values).
    pub replies: bool,
    /// Probability per copied slot of breaking the coupling (rare mode).
    pub break_rate: f64,
}

/// Anchor key id and class id of each slot of a request or reply token sequence: precomputed
/// for templates the model knows, looked up for others.
pub(crate) fn slot_keys<'m>(
    model: &'m Compiled,
    side: Side,
    template: Option<u32>,
    slots: &[SlotRef],
) -> Cow<'m, [SlotKeys]> {
    if let Some(keys) = template.and_then(|t| model.flow.template_keys(side, t))
        && keys.len() == slots.len()
    {
        return Cow::Borrowed(keys);
    }
    let vocab = match side {
        Side::Request => &model.vocab,
        Side::Reply => &model.replies.vocab,
    };
    slots
        .iter()
        .map(|s| {
            let class = match vocab.token(s.symbol) {
                Some(Token::Slot(c)) => c.as_str(),
                _ => "",
            };
            let anchor = match vocab.token(s.anchor) {
                Some(Token::Lit(b)) => Some(b.as_slice()),
                _ => None,
            };
            model.flow.keys_of(side, class, anchor)
        })
        .collect()
}

/// The learned sources of one slot, highest rate first.
#[derive(Clone, Copy)]
enum Sources<'a> {
    Precise(&'a [crate::model::flow::Edge]),
    Anchor(&'a [crate::model::flow::AnchorEdge]),
}

impl Sources<'_> {
    fn len(&self) -> usize {
        match self {
            Sources::Precise(e) => e.len(),
            Sources::Anchor(e) => e.len(),
        }
    }

    fn get(&self, i: usize) -> (Source, f64) {
        match self {
            Sources::Precise(e) => (Source::Slot { key: e[i].source, anchor: e[i].source_anchor }, e[i].rate),
            Sources::Anchor(e) => (Source::Anchor(e[i].source_anchor), e[i].rate),
        }
    }
}

/// The template a step is known by for value flow: its symbol, or for a novel-message step
/// the rare template it is, if the model learned it.
fn known_template(model: &Compiled, step: &Step) -> Option<u32> {
    if step.template != NOVEL {
        return Some(step.template);
    }
    model.learned_template(&step.tokens)
}

struct Pass<'a, 'm, R: Rng + ?Sized> {
    model: &'m Compiled,
    options: &'a FlowOptions,
    memory: &'a mut Memory,
    rng: &'a mut R,
}

impl<R: Rng + ?Sized> Pass<'_, '_, R> {
    /// Copies values into the slots of one message (see the module documentation).
    fn fill(
        &mut self,
        side: Side,
        template: Option<u32>,
        keys: &[SlotKeys],
        values: &mut [Vec<u8>],
        fresh: &dyn Fn(usize, &mut R) -> Vec<u8>,
        flow: &mut Vec<SlotFlow>,
    ) {
        let table = &self.model.flow;
        for j in 0..values.len().min(keys.len()) {
            let precise = template.filter(|&t| table.uses_precise(side, t));
            let sources = match (precise, keys[j].0) {
                (Some(t), _) => Sources::Precise(table.edges(SlotKey { side, template: t, slot: j as u32 })),
                (None, Some(a)) => Sources::Anchor(table.anchor_edges(a)),
                (None, None) => continue,
            };
            if sources.len() == 0 {
                continue;
            }
            let u = self.rng.random::<f64>();
            let mut acc = 0.0;
            let Some(drawn) = (0..sources.len()).position(|i| {
                acc += sources.get(i).1;
                u < acc
            }) else {
                continue;
            };
            // The drawn source, else the others by rate, else the latest value of the drawn
            // source's kind (its anchor key) from any message.
            let order = std::iter::once(drawn).chain((0..sources.len()).filter(|&i| i != drawn));
            let kind = match sources.get(drawn).0 {
                Source::Slot { anchor, .. } if anchor != u32::MAX => Some(Source::Anchor(anchor)),
                _ => None,
            };
            let Some((source, found)) =
                order.map(|i| sources.get(i).0).chain(kind).find_map(|s| self.memory.find(s).map(|f| (s, f)))
            else {
                continue;
            };
            let (value, from, from_slot) = (found.value, found.from, found.slot);
            let slot = j as u32;
            if self.options.break_rate > 0.0 && self.rng.random::<f64>() < self.options.break_rate {
                let others = self.memory.others(keys[j].1, value);
                if !others.is_empty() && self.rng.random::<bool>() {
                    let pick = others[self.rng.random_range(0..others.len())];
                    values[j] = pick.value.to_vec();
                    flow.push(SlotFlow {
                        slot,
                        action: FlowAction::BrokenOther,
                        source,
                        from: Some(pick.from),
                        from_slot: pick.slot,
                    });
                } else {
                    let mut v = fresh(j, self.rng);
                    for _ in 0..8 {
                        if v != *value {
                            break;
                        }
                        v = fresh(j, self.rng);
                    }
                    values[j] = v;
                    flow.push(SlotFlow {
                        slot,
                        action: FlowAction::BrokenFresh,
                        source,
                        from: None,
                        from_slot: 0,
                    });
                }
                continue;
            }
            values[j].clear();
            values[j].extend_from_slice(value);
            flow.push(SlotFlow { slot, action: FlowAction::Copied, source, from: Some(from), from_slot });
        }
    }
}

/// Applies value flow to a walk in order (see the module documentation): copies values into
/// coupled slots and draws the expected replies. Steps kept as raw bytes are recorded as
/// messages without slots. Replaces any flow or replies the steps held.
pub fn apply<R: Rng + ?Sized>(model: &Compiled, options: &FlowOptions, walk: &mut Walk, rng: &mut R) {
    apply_with(model, options, walk, rng, &mut Memory::new(model.flow.window()));
}

/// [`apply`] with a memory to reuse (it is cleared first), sparing its allocations when many
/// walks are generated.
pub fn apply_with<R: Rng + ?Sized>(
    model: &Compiled,
    options: &FlowOptions,
    walk: &mut Walk,
    rng: &mut R,
    memory: &mut Memory,
) {
    let copy = options.copy && !model.flow.is_empty();
    let replies = (options.replies || copy) && !model.replies.is_empty();
    if !copy && !replies {
        return;
    }
    let options = FlowOptions { copy, replies, ..*options };
    memory.reset(model.flow.window());
    let mut pass = Pass { model, options: &options, memory, rng };
    // The template of the request after each step (END after the last of an ended walk): the
    // replies drawn between two requests depend on both.
    let nexts: Vec<Option<u32>> = (0..walk.steps.len())
        .map(|i| match walk.steps.get(i + 1) {
            Some(next) => known_template(model, next),
            None => walk.ended.then_some(crate::symbol::END),
        })
        .collect();
    for (i, step) in walk.steps.iter_mut().enumerate() {
        step.flow.clear();
        step.replies.clear();
        let from = MessageRef { step: i as u32, reply: None };
        let template = known_template(model, step);
        if step.is_opaque() {
            pass.memory.record(from, None, &[], &[]);
        } else {
            let owned;
            let slots = match template {
                Some(t) => model.template_slots(t),
                None => {
                    owned = model.slots_of(&step.tokens);
                    &owned
                }
            };
            let keys = slot_keys(model, Side::Request, template, slots);
            if copy {
                let fresh = |j: usize, rng: &mut R| match slots.get(j).and_then(|s| s.pool) {
                    Some(p) => model.sample_value(p, rng).to_vec(),
                    None => b"0".to_vec(),
                };
                let mut flow = Vec::new();
                pass.fill(Side::Request, template, &keys, &mut step.values, &fresh, &mut flow);
                if !flow.is_empty() {
                    step.verbatim = None;
                }
                step.flow = flow;
            }
            pass.memory.record(from, template.map(|t| (Side::Request, t)), &keys, &step.values);
        }
        let Some(t) = template.filter(|_| replies) else { continue };
        let run = model.replies.sample_run(t, nexts[i], pass.rng);
        for (k, &r) in run.iter().enumerate() {
            let slots = model.replies.template_slots(r);
            let keys = slot_keys(model, Side::Reply, Some(r), slots);
            let mut values: Vec<Vec<u8>> = slots
                .iter()
                .map(|s| match s.pool {
                    Some(p) => model.replies.sample_value(p, pass.rng).to_vec(),
                    None => b"0".to_vec(),
                })
                .collect();
            let mut flow = Vec::new();
            if copy {
                let fresh = |j: usize, rng: &mut R| match slots.get(j).and_then(|s| s.pool) {
                    Some(p) => model.replies.sample_value(p, rng).to_vec(),
                    None => b"0".to_vec(),
                };
                pass.fill(Side::Reply, Some(r), &keys, &mut values, &fresh, &mut flow);
            }
            let from = MessageRef { step: i as u32, reply: Some(k as u32) };
            pass.memory.record(from, Some((Side::Reply, r)), &keys, &values);
            step.replies.push(ReplyStep { template: r, values, flow });
        }
    }
}

/// Trace numbers (1-based) of requests and their shown replies, given how many replies each
/// request shows: per request, its number and its replies' numbers.
pub(crate) fn message_numbers(shown_replies: impl Iterator<Item = usize>) -> Vec<(usize, Vec<usize>)> {
    let mut next = 1;
    shown_replies
        .map(|replies| {
            let own = next;
            next += 1 + replies;
            (own, (own + 1..own + 1 + replies).collect())
        })
        .collect()
}

/// Trace annotations of a message's value flow. `number` gives the trace number of a message,
/// or `None` for a reply the trace does not show (then it is named after its request).
pub fn marks(flow: &[SlotFlow], number: &dyn Fn(MessageRef) -> Option<usize>) -> Vec<String> {
    let name = |m: MessageRef| match (number(m), m.reply) {
        (Some(n), _) => n.to_string(),
        (None, Some(0)) => format!("{}r", m.step + 1),
        (None, Some(k)) => format!("{}r{}", m.step + 1, k + 1),
        (None, None) => format!("{}", m.step + 1),
    };
    flow.iter()
        .map(|f| {
            let s = f.slot + 1;
            let k = f.from_slot + 1;
            match (f.action, f.from) {
                (FlowAction::Copied, Some(m)) => format!("flow:{s}<{}.{k}", name(m)),
                (FlowAction::BrokenOther, Some(m)) => format!("flow-broken:{s}:other<{}.{k}", name(m)),
                _ => format!("flow-broken:{s}:fresh"),
            }
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    fn at(step: u32) -> MessageRef {
        MessageRef { step, reply: None }
    }

    #[test]
    fn memory_keeps_latest_values_within_the_window() {
        let key = SlotKey { side: Side::Request, template: 5, slot: 0 };
        let mut m = Memory::new(2);
        m.record(at(0), Some((Side::Request, 5)), &[(Some(7), None)], &[b"a".to_vec()]);
        m.record(at(1), Some((Side::Request, 5)), &[(Some(7), None)], &[b"b".to_vec()]);
        assert_eq!(m.by_key(key).unwrap().value, b"b");
        assert_eq!(m.by_key(key).unwrap().from, at(1));
        // Two more messages without slots: `b` is three messages back, out of a window of 2.
        m.record(at(2), None, &[], &[]);
        assert!(m.by_key(key).is_some());
        m.record(at(3), None, &[], &[]);
        assert!(m.by_key(key).is_none());
        m.reset(2);
        assert!(m.by_anchor(7, false).is_none());
    }

    #[test]
    fn slot_sources_fall_back_to_unknown_shapes_of_the_same_kind() {
        let key = SlotKey { side: Side::Reply, template: 9, slot: 0 };
        let mut m = Memory::new(8);
        // A reply of a known template with anchor 3 is not an unknown shape…
        m.record(at(0), Some((Side::Reply, 4)), &[(Some(3), None)], &[b"old".to_vec()]);
        assert!(m.find(Source::Slot { key, anchor: 3 }).is_none());
        assert_eq!(m.find(Source::Anchor(3)).unwrap().value, b"old");
        // …a reply the model cannot place is.
        m.record(at(1), None, &[(Some(3), None)], &[b"new".to_vec()]);
        assert_eq!(m.find(Source::Slot { key, anchor: 3 }).unwrap().value, b"new");
    }

    #[test]
    fn marks_name_shown_messages_or_the_request_a_hidden_reply_answers() {
        let numbers = message_numbers([2, 0, 1].into_iter());
        assert_eq!(numbers, vec![(1, vec![2, 3]), (4, vec![]), (5, vec![6])]);
        let flow = [
            SlotFlow {
                slot: 0,
                action: FlowAction::Copied,
                source: Source::Anchor(0),
                from: Some(at(0)),
                from_slot: 0,
            },
            SlotFlow {
                slot: 1,
                action: FlowAction::Copied,
                source: Source::Anchor(0),
                from: Some(MessageRef { step: 2, reply: Some(1) }),
                from_slot: 3,
            },
            SlotFlow {
                slot: 2,
                action: FlowAction::BrokenFresh,
                source: Source::Anchor(0),
                from: None,
                from_slot: 0,
            },
        ];
        assert_eq!(marks(&flow, &|_| None), vec!["flow:1<1.1", "flow:2<3r2.4", "flow-broken:3:fresh"]);
        assert_eq!(marks(&flow[..1], &|m| Some(m.step as usize + 10)), vec!["flow:1<10.1"]);
    }
}
