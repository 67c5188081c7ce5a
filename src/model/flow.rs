//! Value flow: which slot values of a session are reused by later messages of the same session.
//!
//! Real sessions carry identifiers from one message to the next: the cart id a reply issues is
//! the cart id of the next requests; the zone a client subscribed to is the zone it later
//! unsubscribes. This module learns those couplings as counts, and decides which are real.
//!
//! **Slots.** A slot is identified precisely by [`SlotKey`]: the side (request or reply), the
//! template and the slot's ordinal in it. Precise keys keep couplings apart that share a field
//! name (`UNSUB zone=` reuses the zone of `SUB zone=`, not that of any `SET zone=`). Generation
//! also needs a robust key for messages the model has not seen (novel templates, reply shapes
//! a target invents): the *anchor key*, (side, class, nearest preceding literal), as pools use.
//! Anchor-level couplings are derived from the precise ones when a model is compiled.
//!
//! **Counting.** Messages of a session (requests and replies, in the order they travelled) are
//! read in order. Each slot value of a message is compared with the *latest* value of every
//! slot key seen in the previous [`Settings::flow_window`](super::Settings) messages (default
//! [`DEFAULT_FLOW_WINDOW`]); only latest values, because generation copies latest values too.
//! When several keys hold the value, the occurrence is credited twice, once under each of two
//! readings: to the *oldest* holder (the key whose latest occurrence is oldest: the one that
//! introduced the value rather than the echoes that repeated it since; a zone an `UNSUB`
//! names goes back to its `SUB`, a token to the login reply) and to the *newest* holder (the
//! message just before: a reply echoing the product id its request named). Ties within one
//! message go to the lower ordinal. A row ([`FlowRow`]) counts, per (target, source, distance
//! in messages), the occurrences credited under each reading; under each, an occurrence credits
//! at most one source. The number of occurrences of a target is its template's count, which
//! the model already holds. When a model is read, each target slot uses the reading whose
//! accepted couplings (below) cover more of its occurrences (ties: oldest): both readings credit
//! the same occurrences, but credits spread thin over many sources fall below the thresholds.
//! Oldest suits values a session introduces once and reuses (it credits the one introducer),
//! newest the echo of a value chosen just before.
//!
//! Cost: per message, one pass over the keys active in the window (at most window × slots per
//! message, in practice the few templates of a window), with value hashes, no bytes. Learning
//! counts in parallel units; a unit whose first session started in an earlier unit first reads
//! the window's messages before its start without counting them, so counts never depend on
//! where units are cut.
//!
//! **Coincidences.** Short values match by chance (`qty=1` after `page=1`). The model keeps raw
//! counts; [`couplings`] decides, when a model is read, which are real: a coupling is kept when
//! it copied at least [`MIN_COPIES`] times, in at least [`MIN_RATE`] of the target's
//! occurrences, and at least [`MIN_LIFT`] times as often as chance would. Chance is the
//! probability that two independent draws from the two slots' value pools are equal,
//! Σ p_target(v)·p_source(v), estimated from the pools' bottom-k samples (scaled up by the share
//! of the hash space both samples cover, and erring towards chance where a full pool's sample
//! misses its frequent values; see [`chance_of_equal`]).

use std::collections::BTreeMap;

use rustc_hash::FxHashMap;
use serde::{Deserialize, Serialize};

use super::{Model, Pool, value_hash};
use crate::symbol::{FIRST_TEMPLATE, FIRST_TOKEN};
use crate::token::Token;

/// Messages looked back by default when learning value flow.
pub const DEFAULT_FLOW_WINDOW: u32 = 32;
/// Largest window a model may use.
pub const MAX_FLOW_WINDOW: u32 = 1024;
/// A coupling needs at least this many copies…
pub const MIN_COPIES: u64 = 3;
/// …in at least this share of its target's occurrences…
pub const MIN_RATE: f64 = 0.05;
/// …and at least this many times the rate chance would give.
pub const MIN_LIFT: f64 = 3.0;
/// Slots of templates seen fewer times than this use the anchor-level couplings: their own
/// counts are too few to tell a coupling from chance (rare variants of a common request,
/// such as the same call with a chunked body).
pub const MIN_PRECISE_OCCURRENCES: u64 = 20;

/// Who sent a message: the client side (requests, what is generated) or the other side.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash)]
pub enum Side {
    Request,
    Reply,
}

impl Side {
    pub fn name(self) -> &'static str {
        match self {
            Side::Request => "request",
            Side::Reply => "reply",
        }
    }

    fn letter(self) -> char {
        match self {
            Side::Request => 'q',
            Side::Reply => 'r',
        }
    }

    pub(crate) fn index(self) -> usize {
        self as usize
    }
}

/// A slot of a learned template: side, template symbol (request templates in the model's
/// template list, reply templates in its reply template list; both numbered from
/// [`FIRST_TEMPLATE`]) and the slot's ordinal (0-based, in token order).
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash)]
pub struct SlotKey {
    pub side: Side,
    pub template: u32,
    pub slot: u32,
}

impl std::fmt::Display for SlotKey {
    /// `q5.1`: side letter (`q` request, `r` reply), template symbol, slot ordinal.
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(f, "{}{}.{}", self.side.letter(), self.template, self.slot)
    }
}

impl std::str::FromStr for SlotKey {
    type Err = String;
    fn from_str(s: &str) -> Result<SlotKey, String> {
        let bad = || format!("bad slot key `{s}`");
        let side = match s.as_bytes().first() {
            Some(b'q') => Side::Request,
            Some(b'r') => Side::Reply,
            _ => return Err(bad()),
        };
        let (t, o) = s[1..].split_once('.').ok_or_else(bad)?;
        Ok(SlotKey { side, template: t.parse().map_err(|_| bad())?, slot: o.parse().map_err(|_| bad())? })
    }
}

/// How often a target slot's value was the latest value of a source slot `distance` messages
/// back, with the source credited as the oldest holder of the value (`oldest`) and as the
/// newest (`newest`). Stored as one line `"q5.1 r7.0 1 13 9"` (target, source, distance,
/// oldest, newest) in text formats.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash)]
pub struct FlowRow {
    pub target: SlotKey,
    pub source: SlotKey,
    pub distance: u32,
    pub oldest: u64,
    pub newest: u64,
}

impl Serialize for FlowRow {
    fn serialize<S: serde::Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        if s.is_human_readable() {
            s.serialize_str(&format!(
                "{} {} {} {} {}",
                self.target, self.source, self.distance, self.oldest, self.newest
            ))
        } else {
            let key = |k: &SlotKey| (k.side == Side::Reply, k.template, k.slot);
            (key(&self.target), key(&self.source), self.distance, self.oldest, self.newest).serialize(s)
        }
    }
}

impl<'de> Deserialize<'de> for FlowRow {
    fn deserialize<D: serde::Deserializer<'de>>(d: D) -> Result<FlowRow, D::Error> {
        use serde::de::Error;
        if d.is_human_readable() {
            let text = std::borrow::Cow::<'de, str>::deserialize(d)?;
            let f: Vec<&str> = text.split_ascii_whitespace().collect();
            if f.len() != 5 {
                return Err(D::Error::custom(format!("bad flow row `{text}`")));
            }
            let number =
                |x: &str| x.parse::<u64>().map_err(|_| D::Error::custom(format!("bad flow row `{text}`")));
            Ok(FlowRow {
                target: f[0].parse().map_err(D::Error::custom)?,
                source: f[1].parse().map_err(D::Error::custom)?,
                distance: u32::try_from(number(f[2])?).map_err(D::Error::custom)?,
                oldest: number(f[3])?,
                newest: number(f[4])?,
            })
        } else {
            type Key = (bool, u32, u32);
            let (t, s, distance, oldest, newest): (Key, Key, u32, u64, u64) = Deserialize::deserialize(d)?;
            let key = |k: Key| SlotKey {
                side: if k.0 { Side::Reply } else { Side::Request },
                template: k.1,
                slot: k.2,
            };
            Ok(FlowRow { target: key(t), source: key(s), distance, oldest, newest })
        }
    }
}

/// Sums rows with equal (target, source, distance) and sorts them canonically.
pub(crate) fn merge_rows(rows: impl IntoIterator<Item = FlowRow>) -> Vec<FlowRow> {
    let mut sums: BTreeMap<(SlotKey, SlotKey, u32), (u64, u64)> = BTreeMap::new();
    for r in rows {
        let e = sums.entry((r.target, r.source, r.distance)).or_default();
        e.0 += r.oldest;
        e.1 += r.newest;
    }
    sums.into_iter()
        .filter(|&(_, (o, n))| o + n > 0)
        .map(|((target, source, distance), (oldest, newest))| FlowRow {
            target,
            source,
            distance,
            oldest,
            newest,
        })
        .collect()
}

/// Counts value flow over the messages of sessions given in order (see the module
/// documentation). Template symbols are whatever the caller uses; they come back in the rows.
#[derive(Debug, Clone)]
pub(crate) struct FlowCounter {
    window: u32,
    /// Dense key id → slot key.
    keys: Vec<SlotKey>,
    /// Per side, per template symbol − FIRST_TEMPLATE: first key id, or `u32::MAX`.
    base: [Vec<u32>; 2],
    latest_pos: Vec<u32>,
    latest_hash: Vec<u64>,
    /// Keys whose latest occurrence may still be in the window.
    active: Vec<u32>,
    is_active: Vec<bool>,
    rows: FxHashMap<(u32, u32, u32), (u64, u64)>,
}

impl FlowCounter {
    pub fn new(window: u32) -> FlowCounter {
        FlowCounter {
            window,
            keys: Vec::new(),
            base: [Vec::new(), Vec::new()],
            latest_pos: Vec::new(),
            latest_hash: Vec::new(),
            active: Vec::new(),
            is_active: Vec::new(),
            rows: FxHashMap::default(),
        }
    }

    /// Forgets the previous session.
    pub fn start_session(&mut self) {
        for &k in &self.active {
            self.is_active[k as usize] = false;
        }
        self.active.clear();
    }

    fn base_of(&mut self, side: Side, template: u32, slots: usize) -> u32 {
        let bases = &mut self.base[side.index()];
        let i = (template - FIRST_TEMPLATE) as usize;
        if i >= bases.len() {
            bases.resize(i + 1, u32::MAX);
        }
        if bases[i] == u32::MAX {
            bases[i] = self.keys.len() as u32;
            for slot in 0..slots as u32 {
                self.keys.push(SlotKey { side, template, slot });
            }
            self.latest_pos.resize(self.keys.len(), 0);
            self.latest_hash.resize(self.keys.len(), 0);
            self.is_active.resize(self.keys.len(), false);
        }
        bases[i]
    }

    /// One message at position `pos` of the current session (positions increase within a
    /// session), with the hashes of its slot values in order. With `count`, its slots are
    /// counted as targets; either way they become sources for the messages after it.
    pub fn message(&mut self, pos: u32, side: Side, template: u32, hashes: &[u64], count: bool) {
        if self.window == 0 || hashes.is_empty() {
            return;
        }
        let base = self.base_of(side, template, hashes.len());
        let (window, latest_pos, is_active) = (self.window, &self.latest_pos, &mut self.is_active);
        self.active.retain(|&k| {
            let keep = pos - latest_pos[k as usize] <= window;
            if !keep {
                is_active[k as usize] = false;
            }
            keep
        });
        if count {
            for (j, &h) in hashes.iter().enumerate() {
                // (position, ordinal, key) of the oldest and of the newest holder.
                let mut oldest: Option<(u32, u32, u32)> = None;
                let mut newest: Option<(u32, u32, u32)> = None;
                for &k in &self.active {
                    if self.latest_hash[k as usize] != h {
                        continue;
                    }
                    let c = (self.latest_pos[k as usize], self.keys[k as usize].slot, k);
                    if oldest.is_none_or(|b| (c.0, c.1) < (b.0, b.1)) {
                        oldest = Some(c);
                    }
                    if newest.is_none_or(|b| c.0 > b.0 || (c.0 == b.0 && c.1 < b.1)) {
                        newest = Some(c);
                    }
                }
                let target = base + j as u32;
                match (oldest, newest) {
                    // One holder (the common case): one row gets both credits.
                    (Some((p, _, k)), Some((q, _, l))) if k == l && p == q => {
                        let e = self.rows.entry((target, k, pos - p)).or_default();
                        e.0 += 1;
                        e.1 += 1;
                    }
                    _ => {
                        if let Some((p, _, k)) = oldest {
                            self.rows.entry((target, k, pos - p)).or_default().0 += 1;
                        }
                        if let Some((p, _, k)) = newest {
                            self.rows.entry((target, k, pos - p)).or_default().1 += 1;
                        }
                    }
                }
            }
        }
        for (j, &h) in hashes.iter().enumerate() {
            let key = (base + j as u32) as usize;
            self.latest_pos[key] = pos;
            self.latest_hash[key] = h;
            if !self.is_active[key] {
                self.is_active[key] = true;
                self.active.push(key as u32);
            }
        }
    }

    /// The counted rows (in no particular order).
    pub fn finish(self) -> Vec<FlowRow> {
        self.rows
            .into_iter()
            .map(|((t, s, distance), (oldest, newest))| FlowRow {
                target: self.keys[t as usize],
                source: self.keys[s as usize],
                distance,
                oldest,
                newest,
            })
            .collect()
    }
}

/// Where a template's slots take their values from: (class, anchor symbol) per slot, in order.
pub(crate) fn slot_anchors(tokens: &[Token], template: &[u32]) -> Vec<(String, Option<u32>)> {
    let mut anchor = None;
    let mut out = Vec::new();
    for &s in template {
        match s.checked_sub(FIRST_TOKEN).and_then(|i| tokens.get(i as usize)) {
            Some(t @ Token::Lit(_)) if t.is_anchor() => anchor = Some(s),
            Some(Token::Slot(c)) => out.push((c.clone(), anchor)),
            _ => {}
        }
    }
    out
}

/// The pool filling a slot of class `class` anchored at `anchor`: the pool of that key, else the
/// most used pool of the class with kept values (as generation chooses).
pub(crate) fn pool_for<'p>(pools: &'p [Pool], class: &str, anchor: Option<u32>) -> Option<&'p Pool> {
    let exact = pools
        .binary_search_by(|p| (p.class.as_str(), p.anchor).cmp(&(class, anchor)))
        .ok()
        .map(|i| &pools[i]);
    exact.or_else(|| {
        pools.iter().filter(|p| p.class == class && !p.values.is_empty()).fold(
            None,
            |best: Option<&Pool>, p| match best {
                Some(b) if b.seen >= p.seen => Some(b),
                _ => Some(p),
            },
        )
    })
}

/// Probability that independent draws from two pools are equal, Σ p_a(v)·p_b(v), estimated
/// from their bottom-k samples (see the module documentation). `cap` is the pool cap.
///
/// A bottom-k sample keeps values by hash, not by frequency, so a full pool may miss a value
/// that makes up most of its occurrences (status 200 among response sizes). The share of
/// occurrences the sample cannot account for (its `seen` minus the kept counts scaled by the
/// share of the hash space the sample covers) is therefore treated as one value common to both
/// pools: the estimate adds the product of the two missing shares, erring towards chance.
pub fn chance_of_equal(a: &Pool, b: &Pool, cap: usize) -> f64 {
    if a.seen == 0 || b.seen == 0 {
        return 0.0;
    }
    let threshold = |p: &Pool| {
        if p.values.len() >= cap {
            p.values.iter().map(|v| value_hash(&v.value)).max().unwrap_or(u64::MAX)
        } else {
            u64::MAX
        }
    };
    let scale = |t: u64| if t < u64::MAX { u64::MAX as f64 / t.max(1) as f64 } else { 1.0 };
    let missing = |p: &Pool| {
        let kept: u64 = p.values.iter().map(|v| v.count).sum();
        (1.0 - kept as f64 * scale(threshold(p)) / p.seen as f64).clamp(0.0, 1.0)
    };
    let limit = threshold(a).min(threshold(b));
    let counts: FxHashMap<&[u8], u64> = b.values.iter().map(|v| (v.value.as_slice(), v.count)).collect();
    let mut sum = 0.0;
    for v in &a.values {
        if value_hash(&v.value) > limit {
            continue;
        }
        if let Some(&c) = counts.get(v.value.as_slice()) {
            sum += (v.count as f64 / a.seen as f64) * (c as f64 / b.seen as f64);
        }
    }
    (sum * scale(limit) + missing(a) * missing(b)).min(1.0)
}

/// Which holder of a value an occurrence is credited to (see the module documentation).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Reading {
    Oldest,
    Newest,
}

impl Reading {
    pub fn name(self) -> &'static str {
        match self {
            Reading::Oldest => "oldest holder",
            Reading::Newest => "newest holder",
        }
    }
}

/// One candidate coupling with its figures and the verdict.
#[derive(Debug, Clone, PartialEq)]
pub struct Coupling {
    pub target: SlotKey,
    pub source: SlotKey,
    /// The reading its target slot uses.
    pub reading: Reading,
    /// Occurrences of the target slot credited to the source under that reading.
    pub copies: u64,
    /// Occurrences of the target slot.
    pub occurrences: u64,
    /// copies / occurrences.
    pub rate: f64,
    /// Probability that independent pool draws are equal.
    pub chance: f64,
    /// rate / chance (infinite when chance is 0).
    pub lift: f64,
    /// The commonest distance in messages (ties: the shorter).
    pub distance: u32,
    /// Passes the thresholds ([`MIN_COPIES`], [`MIN_RATE`], [`MIN_LIFT`]).
    pub accepted: bool,
}

/// Credits of one source under one reading: in total, and (credits, distance) of the distance
/// with the most.
#[derive(Debug, Clone, Copy, Default)]
struct Credits {
    total: u64,
    best: (u64, u32),
}

/// How many times each template of a side occurred (index `i` is symbol `FIRST_TEMPLATE + i`).
pub(crate) fn occurrences(model: &Model, side: Side) -> Vec<u64> {
    match side {
        Side::Request => model.template_counts(),
        Side::Reply => model.replies.templates.iter().map(|t| t.count).collect(),
    }
}

/// The candidate couplings of the model's flow rows with their figures, in canonical order
/// (target, then source): for each target slot, the sources under the reading it uses.
pub fn couplings(model: &Model) -> Vec<Coupling> {
    let counts = [occurrences(model, Side::Request), occurrences(model, Side::Reply)];
    let cap = model.settings.pool_cap as usize;
    let pool_of = |k: &SlotKey| -> Option<&Pool> {
        let (tokens, template, pools) = match k.side {
            Side::Request => (&model.tokens, model.template(k.template)?, &model.pools),
            Side::Reply => (&model.replies.tokens, model.replies.template(k.template)?, &model.replies.pools),
        };
        let anchors = slot_anchors(tokens, template);
        let (class, anchor) = anchors.get(k.slot as usize)?;
        pool_for(pools, class, *anchor)
    };
    let mut out = Vec::new();
    let rows = &model.flow;
    let mut i = 0;
    while i < rows.len() {
        let target = rows[i].target;
        let end = i + rows[i..].iter().take_while(|r| r.target == target).count();
        let group = &rows[i..end];
        i = end;
        let occurrences = counts[target.side.index()]
            .get((target.template - FIRST_TEMPLATE) as usize)
            .copied()
            .unwrap_or(0);
        // Per source, under each reading: total credits, and the distance with the most.
        let mut per_source: BTreeMap<SlotKey, [Credits; 2]> = BTreeMap::new();
        for r in group {
            let e = per_source.entry(r.source).or_default();
            for (slot, c) in [(0, r.oldest), (1, r.newest)] {
                e[slot].total += c;
                if c > e[slot].best.0 {
                    e[slot].best = (c, r.distance);
                }
            }
        }
        let occurrences = occurrences.max(1);
        let figures: Vec<(&SlotKey, &[Credits; 2], f64)> = per_source
            .iter()
            .map(|(source, e)| {
                let chance = match (pool_of(&target), pool_of(source)) {
                    (Some(a), Some(b)) => chance_of_equal(a, b, cap),
                    _ => 0.0,
                };
                (source, e, chance)
            })
            .collect();
        let judge = |copies: u64, chance: f64| {
            let occurrences = occurrences.max(copies);
            let rate = copies as f64 / occurrences as f64;
            let lift = if chance > 0.0 { rate / chance } else { f64::INFINITY };
            let accepted = copies >= MIN_COPIES && rate >= MIN_RATE && lift >= MIN_LIFT;
            (occurrences, rate, lift, accepted)
        };
        // The share of occurrences the accepted sources of a reading cover: what generation
        // will copy. Both readings credit the same occurrences; they differ in how the credits
        // spread, and credits spread thin over many sources fall below the thresholds.
        let coverage = |slot: usize| -> f64 {
            figures
                .iter()
                .map(|(_, c, chance)| judge(c[slot].total, *chance))
                .filter(|j| j.3)
                .map(|j| j.1)
                .sum()
        };
        let (reading, slot) =
            if coverage(1) > coverage(0) { (Reading::Newest, 1) } else { (Reading::Oldest, 0) };
        for (source, c, chance) in &figures {
            let (copies, distance) = (c[slot].total, c[slot].best.1);
            if copies == 0 {
                continue;
            }
            let (occurrences, rate, lift, accepted) = judge(copies, *chance);
            out.push(Coupling {
                target,
                source: **source,
                reading,
                copies,
                occurrences,
                rate,
                chance: *chance,
                lift,
                distance,
                accepted,
            });
        }
    }
    out
}

/// Hash of an anchor key (side, class, anchor literal or none).
fn anchor_hash(side: Side, class: &str, anchor: Option<&[u8]>) -> u64 {
    let mut bytes = Vec::with_capacity(class.len() + 16);
    bytes.push(side as u8);
    bytes.extend_from_slice(class.as_bytes());
    match anchor {
        Some(a) => {
            bytes.push(0xff);
            bytes.extend_from_slice(a);
        }
        None => bytes.push(0xfe),
    }
    value_hash(&bytes)
}

/// What generation needs to know of a slot: its anchor key id and class id, when the model
/// has them.
pub type SlotKeys = (Option<u32>, Option<u32>);

/// An accepted coupling as generation uses it: the source and the share of the target's
/// occurrences that copied it.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Edge {
    pub source: SlotKey,
    /// Anchor key id of the source slot.
    pub source_anchor: u32,
    pub rate: f64,
}

/// An anchor-level coupling: a slot with some anchor key copies the latest value of a slot with
/// another anchor key at this rate.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct AnchorEdge {
    pub source_anchor: u32,
    pub rate: f64,
}

/// The accepted couplings of a model, ready for generation.
///
/// Precise: per target slot of a template seen at least [`MIN_PRECISE_OCCURRENCES`] times, its
/// accepted sources by falling rate. Anchor level, for slots of other templates (rarer ones and
/// those the model does not know): per anchor key of the target, the sources' anchor keys, with
/// rate Σ copies / Σ occurrences over all template slots of those anchor keys (an average of
/// the precise rates weighted by occurrences, counting every candidate that beats chance by
/// [`MIN_LIFT`]), kept when they pass [`MIN_COPIES`] and [`MIN_RATE`].
#[derive(Debug, Clone, Default)]
pub struct FlowTable {
    window: u32,
    precise: FxHashMap<SlotKey, Box<[Edge]>>,
    anchor_ids: FxHashMap<u64, u32>,
    /// Slot classes by name (any numbering, used to tell classes apart).
    class_ids: FxHashMap<String, u32>,
    /// Per side, per template index, the keys of each slot (see [`FlowTable::slot_keys`]).
    slot_keys: [Vec<Box<[SlotKeys]>>; 2],
    /// Per side, per template index: seen often enough for precise couplings.
    precise_ok: [Vec<bool>; 2],
    by_anchor: Vec<Box<[AnchorEdge]>>,
}

impl FlowTable {
    /// The accepted couplings of `model` (see [`couplings`]).
    pub fn new(model: &Model) -> FlowTable {
        let mut table = FlowTable { window: model.settings.flow_window, ..FlowTable::default() };
        for side in [Side::Request, Side::Reply] {
            let (tokens, templates): (&[Token], Vec<&[u32]>) = match side {
                Side::Request => (&model.tokens, model.templates.iter().map(|t| t.0.as_slice()).collect()),
                Side::Reply => (
                    &model.replies.tokens,
                    model.replies.templates.iter().map(|t| t.tokens.0.as_slice()).collect(),
                ),
            };
            for t in templates {
                let keys: Box<[SlotKeys]> = slot_anchors(tokens, t)
                    .iter()
                    .map(|(class, anchor)| {
                        let bytes =
                            anchor.and_then(|a| match tokens.get(a.checked_sub(FIRST_TOKEN)? as usize) {
                                Some(Token::Lit(b)) => Some(b.as_slice()),
                                _ => None,
                            });
                        let anchor = table.intern_anchor(anchor_hash(side, class, bytes));
                        let next = table.class_ids.len() as u32;
                        let class = *table.class_ids.entry(class.clone()).or_insert(next);
                        (Some(anchor), Some(class))
                    })
                    .collect();
                table.slot_keys[side.index()].push(keys);
            }
        }
        let mut precise: BTreeMap<SlotKey, Vec<Edge>> = BTreeMap::new();
        let mut anchor_copies: BTreeMap<(u32, u32), u64> = BTreeMap::new();
        for c in couplings(model) {
            let source_anchor = table.slot_anchor(c.source).unwrap_or(u32::MAX);
            // Anchor-level couplings add up every candidate that beats chance, so that the
            // copies of rare variants count too; they pass the thresholds again below.
            if c.lift >= MIN_LIFT
                && let Some(a) = table.slot_anchor(c.target)
            {
                *anchor_copies.entry((a, source_anchor)).or_default() += c.copies;
            }
            if c.accepted && c.occurrences >= MIN_PRECISE_OCCURRENCES {
                precise.entry(c.target).or_default().push(Edge {
                    source: c.source,
                    source_anchor,
                    rate: c.rate,
                });
            }
        }
        for side in [Side::Request, Side::Reply] {
            table.precise_ok[side.index()] =
                occurrences(model, side).iter().map(|&n| n >= MIN_PRECISE_OCCURRENCES).collect();
        }
        for (target, mut edges) in precise {
            edges.sort_by(|a, b| b.rate.total_cmp(&a.rate).then(a.source.cmp(&b.source)));
            table.precise.insert(target, edges.into_boxed_slice());
        }
        let mut per_anchor = vec![0u64; table.anchor_ids.len()];
        for side in [Side::Request, Side::Reply] {
            let counts = occurrences(model, side);
            for (t, keys) in table.slot_keys[side.index()].iter().enumerate() {
                for a in keys.iter().filter_map(|k| k.0) {
                    per_anchor[a as usize] += counts.get(t).copied().unwrap_or(0);
                }
            }
        }
        let mut by_anchor: Vec<Vec<AnchorEdge>> = vec![Vec::new(); table.anchor_ids.len()];
        for ((target, source_anchor), copies) in anchor_copies {
            let rate = copies as f64 / per_anchor[target as usize].max(copies).max(1) as f64;
            if copies >= MIN_COPIES && rate >= MIN_RATE {
                by_anchor[target as usize].push(AnchorEdge { source_anchor, rate });
            }
        }
        table.by_anchor = by_anchor
            .into_iter()
            .map(|mut edges| {
                edges.sort_by(|a, b| b.rate.total_cmp(&a.rate).then(a.source_anchor.cmp(&b.source_anchor)));
                edges.into_boxed_slice()
            })
            .collect();
        table
    }

    fn intern_anchor(&mut self, hash: u64) -> u32 {
        let next = self.anchor_ids.len() as u32;
        *self.anchor_ids.entry(hash).or_insert(next)
    }

    /// Messages looked back (the model's window).
    pub fn window(&self) -> u32 {
        self.window
    }

    /// True when the model holds no accepted coupling.
    pub fn is_empty(&self) -> bool {
        self.precise.is_empty()
    }

    /// Accepted sources of a template slot, highest rate first.
    pub fn edges(&self, target: SlotKey) -> &[Edge] {
        self.precise.get(&target).map_or(&[], |e| e)
    }

    /// Whether slots of this template use precise couplings (its template was seen at least
    /// [`MIN_PRECISE_OCCURRENCES`] times); otherwise the anchor-level ones apply.
    pub fn uses_precise(&self, side: Side, template: u32) -> bool {
        template
            .checked_sub(FIRST_TEMPLATE)
            .and_then(|i| self.precise_ok[side.index()].get(i as usize))
            .copied()
            .unwrap_or(false)
    }

    /// Anchor-level sources of a slot with anchor key `anchor`, highest rate first.
    pub fn anchor_edges(&self, anchor: u32) -> &[AnchorEdge] {
        self.by_anchor.get(anchor as usize).map_or(&[], |e| e)
    }

    /// Anchor key id of a template slot.
    pub fn slot_anchor(&self, key: SlotKey) -> Option<u32> {
        self.template_keys(key.side, key.template)?.get(key.slot as usize)?.0
    }

    /// Anchor key id and class id of each slot of a template.
    pub fn template_keys(&self, side: Side, template: u32) -> Option<&[SlotKeys]> {
        self.slot_keys[side.index()].get(template.checked_sub(FIRST_TEMPLATE)? as usize).map(|k| &**k)
    }

    /// The keys of a slot of class `class` after the literal `anchor` (any message).
    pub fn keys_of(&self, side: Side, class: &str, anchor: Option<&[u8]>) -> SlotKeys {
        (self.anchor_id(side, class, anchor), self.class_ids.get(class).copied())
    }

    /// Anchor key id of a slot of class `class` after the literal `anchor`, if any template
    /// slot of the model has that key.
    pub fn anchor_id(&self, side: Side, class: &str, anchor: Option<&[u8]>) -> Option<u32> {
        self.anchor_ids.get(&anchor_hash(side, class, anchor)).copied()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn run(messages: &[(u32, &[u64])], window: u32) -> Vec<FlowRow> {
        let mut c = FlowCounter::new(window);
        c.start_session();
        for (pos, (t, hashes)) in messages.iter().enumerate() {
            c.message(pos as u32, Side::Request, *t, hashes, true);
        }
        merge_rows(c.finish())
    }

    #[test]
    fn credits_the_key_that_introduced_the_value() {
        // 3 issues 70 (slot 0); 4 echoes it twice; 5 uses it: credited to 3, three back.
        let rows = run(&[(3, &[70]), (4, &[70, 1]), (4, &[70, 1]), (5, &[70])], 32);
        let to5: Vec<&FlowRow> = rows.iter().filter(|r| r.target.template == 5).collect();
        assert_eq!(to5.len(), 2, "{to5:?}");
        let oldest: Vec<&&FlowRow> = to5.iter().filter(|r| r.oldest > 0).collect();
        assert_eq!(oldest.len(), 1);
        assert_eq!(oldest[0].source, SlotKey { side: Side::Request, template: 3, slot: 0 });
        assert_eq!(oldest[0].distance, 3);
        // The newest holder is the second echo, one message back.
        let newest: Vec<&&FlowRow> = to5.iter().filter(|r| r.newest > 0).collect();
        assert_eq!(newest.len(), 1);
        assert_eq!(newest[0].source, SlotKey { side: Side::Request, template: 4, slot: 0 });
        assert_eq!(newest[0].distance, 1);
    }

    #[test]
    fn compares_latest_values_only_and_respects_the_window() {
        // Key 3.0 held 7 then 8: a later 7 is not a copy of it.
        let rows = run(&[(3, &[7]), (3, &[8]), (5, &[7])], 32);
        assert!(rows.iter().all(|r| r.target.template != 5), "{rows:?}");
        // Window 2: a value three messages back is out of reach.
        let rows = run(&[(3, &[9]), (4, &[1]), (4, &[2]), (5, &[9])], 2);
        assert!(rows.iter().all(|r| r.target.template != 5), "{rows:?}");
        let rows = run(&[(3, &[9]), (4, &[1]), (5, &[9])], 2);
        assert_eq!(rows.iter().filter(|r| r.target.template == 5).count(), 1);
    }

    #[test]
    fn rows_round_trip_as_text_and_binary() {
        let row = FlowRow {
            target: SlotKey { side: Side::Request, template: 5, slot: 1 },
            source: SlotKey { side: Side::Reply, template: 7, slot: 0 },
            distance: 2,
            oldest: 13,
            newest: 9,
        };
        let text = serde_yaml::to_string(&row).unwrap();
        assert_eq!(text.trim(), "q5.1 r7.0 2 13 9");
        assert_eq!(serde_yaml::from_str::<FlowRow>(&text).unwrap(), row);
        let bytes = postcard::to_stdvec(&row).unwrap();
        assert_eq!(postcard::from_bytes::<FlowRow>(&bytes).unwrap(), row);
    }

    #[test]
    fn chance_of_equal_pools() {
        let pool = |values: &[(&[u8], u64)]| Pool {
            class: "int".into(),
            anchor: None,
            seen: values.iter().map(|v| v.1).sum(),
            values: values
                .iter()
                .map(|&(v, count)| super::super::PoolValue { value: v.to_vec(), count })
                .collect(),
        };
        // Two fair coins over {1, 2}: 1/2; disjoint pools: 0.
        let a = pool(&[(b"1", 5), (b"2", 5)]);
        assert!((chance_of_equal(&a, &a, 256) - 0.5).abs() < 1e-12);
        assert_eq!(chance_of_equal(&a, &pool(&[(b"3", 4)]), 256), 0.0);
        // A full pool (cap 2) whose sample holds 2 of 1000 occurrences of two rare values:
        // most occurrences are unaccounted for, so chance is high, not 0.
        let mut full = pool(&[(b"x", 1), (b"y", 1)]);
        full.seen = 1000;
        assert!(chance_of_equal(&full, &full, 2) > 0.9);
    }
}
