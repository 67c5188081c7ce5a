//! Sessions against a target that replies: the values the target returns fill the later
//! messages of the same session.
//!
//! A generated walk decides the messages and, through value flow ([`super::flow`]), which slots
//! copy an earlier value and from where (a template slot, or a kind of slot). Its own expected
//! replies are predictions; against a real target, [`LiveSession`] replaces them by what the
//! target answers. The caller alternates:
//!
//! ```text
//! let mut live = LiveSession::new(&model, generator.walk(seed, i))?;
//! while let Some(message) = live.next_message() {
//!     let reply = send_and_read(&message);   // the harness's business
//!     live.observe_reply(&reply);
//! }
//! let sent = live.trace();                    // what was sent, with the replies seen
//! ```
//!
//! `next_message` resolves each copied slot of the next step against the session so far:
//! the latest value of its source template slot, else (the target answered in another shape)
//! the latest value of the same kind of slot (anchor key) from any message; when neither exists
//! the generated value stays. `observe_reply` frames the bytes as the model's
//! corpus was framed (HTTP responses; lines), tokenizes each reply with the model's rules and
//! records its slot values. Everything is deterministic given the walk and the replies.

use super::flow::{FlowAction, Memory, MessageRef, Source};
use super::{GenError, Walk};
use crate::model::Compiled;
use crate::model::flow::Side;
use crate::read::Reader;
use crate::token::{PieceKind, Tokenized, is_anchor_bytes};
use crate::trace::{Trace, TraceMessage};

/// One session of a walk played against a target (see the module documentation).
#[derive(Debug)]
pub struct LiveSession<'m> {
    model: &'m Compiled,
    walk: Walk,
    next: usize,
    memory: Memory,
    reader: Reader,
    scratch: Tokenized,
    /// Replies observed after each sent step.
    replies: Vec<Vec<Vec<u8>>>,
}

impl<'m> LiveSession<'m> {
    /// A live session over `walk` (generated with `model`). The walk's expected replies are
    /// dropped: the target's count.
    pub fn new(model: &'m Compiled, mut walk: Walk) -> Result<LiveSession<'m>, GenError> {
        let reader = Reader::new(&model.settings.read).map_err(|e| GenError::Options(e.to_string()))?;
        for s in &mut walk.steps {
            s.replies.clear();
        }
        Ok(LiveSession {
            model,
            walk,
            next: 0,
            memory: Memory::new(model.flow.window()),
            reader,
            scratch: Tokenized::default(),
            replies: Vec::new(),
        })
    }

    /// The next message to send, its copied slots resolved against this session so far; `None`
    /// when the walk is done.
    pub fn next_message(&mut self) -> Option<Vec<u8>> {
        let model = self.model;
        let i = self.next;
        let step = self.walk.steps.get_mut(i)?;
        self.next += 1;
        self.replies.push(Vec::new());
        let template = match step.template {
            crate::symbol::NOVEL => model.learned_template(&step.tokens),
            t => Some(t),
        };
        let from = MessageRef { step: i as u32, reply: None };
        if step.is_opaque() {
            self.memory.record(from, None, &[], &[]);
            return Some(step.render(model));
        }
        let slots = match template {
            Some(t) => model.template_slots(t).to_vec(),
            None => model.slots_of(&step.tokens),
        };
        let keys = super::flow::slot_keys(model, Side::Request, template, &slots);
        let memory = &self.memory;
        let mut changed = false;
        step.flow.retain_mut(|f| {
            // The target decides the shape of its replies: a value of the same kind from any
            // message will do when the source template slot has none.
            let found = match f.source {
                Source::Slot { key, anchor } => {
                    memory.by_key(key).or_else(|| memory.by_anchor(anchor, false))
                }
                Source::Anchor(a) => memory.by_anchor(a, false),
            };
            let Some(value) = step.values.get_mut(f.slot as usize) else { return false };
            match f.action {
                FlowAction::Copied => match found {
                    Some(found) => {
                        changed |= *value != found.value;
                        *value = found.value.to_vec();
                        f.from = Some(found.from);
                        f.from_slot = found.slot;
                        true
                    }
                    // Nothing to copy in this session: the generated value stays, uncoupled.
                    None => false,
                },
                // Another value of this session than the source's, the oldest of its class.
                FlowAction::BrokenOther => {
                    let not = found.map_or(&value[..], |f| f.value);
                    let class = keys.get(f.slot as usize).and_then(|k| k.1);
                    match memory.others(class, not).first() {
                        Some(other) => {
                            changed |= *value != other.value;
                            *value = other.value.to_vec();
                            f.from = Some(other.from);
                            f.from_slot = other.slot;
                            true
                        }
                        None => false,
                    }
                }
                FlowAction::BrokenFresh => true,
            }
        });
        if changed {
            step.verbatim = None;
        }
        self.memory.record(from, template.map(|t| (Side::Request, t)), &keys, &step.values);
        Some(step.render(model))
    }

    /// Records what the target answered to the message last sent: one or more replies, framed
    /// as the model's corpus was (every frame counts as a reply, whatever its role).
    pub fn observe_reply(&mut self, bytes: &[u8]) {
        let Some(step) = self.next.checked_sub(1) else { return };
        let (frames, _) = self.reader.messages(bytes);
        let model = self.model;
        let classes = model.tokenizer.classes();
        for (frame, _) in frames {
            model.tokenizer.tokenize(&frame, &mut self.scratch);
            let mut symbols = Some(Vec::with_capacity(self.scratch.pieces.len()));
            let mut keys = Vec::new();
            let mut values = Vec::new();
            let mut anchor: Option<&[u8]> = None;
            for piece in &self.scratch.pieces {
                let symbol = model.replies.vocab.lookup(&self.scratch, piece);
                match (symbols.as_mut(), symbol) {
                    (Some(list), Some(s)) => list.push(s),
                    _ => symbols = None,
                }
                match piece.kind {
                    PieceKind::Lit if is_anchor_bytes(self.scratch.bytes(piece)) => {
                        anchor = Some(self.scratch.bytes(piece));
                    }
                    PieceKind::Slot(c) => {
                        keys.push(model.flow.keys_of(Side::Reply, classes[c as usize].as_str(), anchor));
                        values.push(self.scratch.bytes(piece).to_vec());
                    }
                    _ => {}
                }
            }
            let template = symbols.and_then(|s| model.replies.learned_template(&s));
            let k = self.replies[step].len() as u32;
            let from = MessageRef { step: step as u32, reply: Some(k) };
            self.memory.record(from, template.map(|t| (Side::Reply, t)), &keys, &values);
            self.replies[step].push(frame);
        }
    }

    /// The walk as sent so far (copied values as resolved) and, after it, the steps not sent.
    pub fn walk(&self) -> &Walk {
        &self.walk
    }

    /// The steps sent so far as a trace, each followed by the replies observed (marked
    /// `reply`; not part of the wire bytes). Copies show as `flow:S<N` marks.
    pub fn trace(&self) -> Trace {
        let numbers = super::flow::message_numbers(self.replies.iter().map(Vec::len));
        let number = |m: MessageRef| {
            let (own, rs) = numbers.get(m.step as usize)?;
            match m.reply {
                None => Some(*own),
                Some(k) => rs.get(k as usize).copied(),
            }
        };
        let mut messages = Vec::new();
        for (step, replies) in self.walk.steps.iter().zip(&self.replies) {
            let mut marks = step.marks.clone();
            marks.extend(super::flow::marks(&step.flow, &number));
            messages.push(TraceMessage {
                bytes: step.render(self.model),
                surprise: Some(step.surprise),
                marks,
            });
            for r in replies {
                messages.push(TraceMessage { bytes: r.clone(), surprise: None, marks: vec!["reply".into()] });
            }
        }
        Trace { header: Vec::new(), messages }
    }
}

/// Replays a stored trace against a target that replies, re-resolving its copies from what
/// the target answers this time. A trace stored from a [`LiveSession`] names, in its
/// `flow:S<N.K` marks, where each copied value came from (slot K of message N of the trace,
/// replies numbered with the rest, or `Nr`, `Nr2`… for replies it does not show); a target
/// that issues fresh ids on every run then gets the ids it has just issued, not those of the
/// stored run. Messages are sent as stored otherwise (a message whose tokens the model cannot
/// read is sent byte for byte, its copies ignored), and a source the replay has not seen (the
/// target answered with fewer replies or slots) leaves the stored value.
#[derive(Debug)]
pub struct Replay<'m> {
    model: &'m Compiled,
    steps: Vec<super::Step>,
    /// Per request: (slot, source message, source slot).
    copies: Vec<Vec<(usize, MessageRef, usize)>>,
    next: usize,
    /// Slot values of the requests sent, and of each reply observed after each of them.
    sent: Vec<Vec<Vec<u8>>>,
    observed: Vec<Vec<Vec<Vec<u8>>>>,
    reader: Reader,
    scratch: Tokenized,
}

/// Reads a copy mark `flow:S<N.K` into (slot, message, source slot), all 0-based; `numbers`
/// maps trace numbers (1-based) to messages.
fn parse_copy(mark: &str, numbers: &[MessageRef]) -> Option<(usize, MessageRef, usize)> {
    let rest = mark.strip_prefix("flow:")?;
    let (slot, source) = rest.split_once('<')?;
    let (message, source_slot) = source.rsplit_once('.')?;
    let (slot, source_slot): (usize, usize) = (slot.parse().ok()?, source_slot.parse().ok()?);
    let from = match message.split_once('r') {
        None => *numbers.get(message.parse::<usize>().ok()?.checked_sub(1)?)?,
        Some((step, k)) => {
            let k = if k.is_empty() { 1 } else { k.parse::<u32>().ok()? };
            MessageRef { step: step.parse::<u32>().ok()?.checked_sub(1)?, reply: Some(k.checked_sub(1)?) }
        }
    };
    Some((slot.checked_sub(1)?, from, source_slot.checked_sub(1)?))
}

impl<'m> Replay<'m> {
    /// A replay of `trace` (requests, and the replies marked `reply` that were stored with
    /// them) for `model`.
    pub fn new(model: &'m Compiled, trace: &Trace) -> Result<Replay<'m>, GenError> {
        let reader = Reader::new(&model.settings.read).map_err(|e| GenError::Options(e.to_string()))?;
        let mut numbers = Vec::with_capacity(trace.messages.len());
        let mut requests = Vec::new();
        let mut marks = Vec::new();
        for m in &trace.messages {
            if m.is_reply() {
                let step = requests.len().saturating_sub(1) as u32;
                let k = numbers.iter().filter(|r: &&MessageRef| r.step == step && r.reply.is_some()).count();
                numbers.push(MessageRef { step, reply: Some(k as u32) });
            } else {
                numbers.push(MessageRef { step: requests.len() as u32, reply: None });
                requests.push(m.bytes.clone());
                marks.push(m.marks.clone());
            }
        }
        let steps = super::mutate::walk_of_messages(model, &requests).steps;
        let copies = marks
            .iter()
            .zip(&steps)
            .map(|(marks, step)| {
                if step.is_opaque() {
                    return Vec::new();
                }
                marks.iter().filter_map(|m| parse_copy(m, &numbers)).collect()
            })
            .collect();
        Ok(Replay {
            model,
            steps,
            copies,
            next: 0,
            sent: Vec::new(),
            observed: Vec::new(),
            reader,
            scratch: Tokenized::default(),
        })
    }

    /// The next request with its copies resolved from this replay; `None` at the end.
    pub fn next_message(&mut self) -> Option<Vec<u8>> {
        let i = self.next;
        let step = self.steps.get_mut(i)?;
        self.next += 1;
        for &(slot, from, source_slot) in &self.copies[i] {
            let source = match from.reply {
                None => self.sent.get(from.step as usize),
                Some(k) => self.observed.get(from.step as usize).and_then(|r| r.get(k as usize)),
            };
            if let Some(v) = source.and_then(|values| values.get(source_slot))
                && let Some(target) = step.values.get_mut(slot)
                && target != v
            {
                *target = v.clone();
                step.verbatim = None;
            }
        }
        self.sent.push(step.values.clone());
        self.observed.push(Vec::new());
        Some(step.render(self.model))
    }

    /// Records what the target answered to the request last sent (one or more replies).
    pub fn observe_reply(&mut self, bytes: &[u8]) {
        let Some(list) = self.observed.last_mut() else { return };
        let (frames, _) = self.reader.messages(bytes);
        for (frame, _) in frames {
            self.model.tokenizer.tokenize(&frame, &mut self.scratch);
            let values = self
                .scratch
                .pieces
                .iter()
                .filter(|p| matches!(p.kind, PieceKind::Slot(_)))
                .map(|p| self.scratch.bytes(p).to_vec())
                .collect();
            list.push(values);
        }
    }
}
