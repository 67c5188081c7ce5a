//! Learning a model from a corpus, in parallel.
//!
//! The frames (requests, and replies when value flow is learned) are cut into units of a few
//! megabytes; each unit is tokenized and counted on its own (rayon), giving a draft with its own
//! symbols, value-flow counts included (see [`super::flow`] for how a unit reads the window
//! before its start). Drafts are put together by [`canonicalize`] (the same code `merge` uses),
//! then the session chain and the runs of replies after each request are counted over the
//! canonical template symbols in corpus order, so sessions that span units are counted whole.

use rayon::prelude::*;
use rustc_hash::FxHashMap;

use super::flow::{DEFAULT_FLOW_WINDOW, FlowCounter, Side};
use super::pool::PoolBuilder;
use super::reply::{MAX_REPLY_RUN, ReplyRun};
use super::{Draft, IdList, Model, ModelError, Settings, Totals, canonicalize};
use crate::chain::{ChainConfig, GramCounter, OrderScore, Part, Smoothing, pick_order};
use crate::read::{Corpus, Role, Skips};
use crate::symbol::{BEGIN, END, FIRST_TEMPLATE, FIRST_TOKEN};
use crate::token::{Interner, PieceKind, RuleSet, Tokenized, Tokenizer, is_anchor_bytes};

/// Context order of a chain: fixed, or chosen by held-out perplexity up to a maximum.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum OrderChoice {
    Fixed(usize),
    Auto { max: usize },
}

impl OrderChoice {
    fn counting_order(self) -> usize {
        match self {
            OrderChoice::Fixed(k) => k,
            OrderChoice::Auto { max } => max,
        }
    }
}

/// Options of [`learn`].
#[derive(Debug, Clone)]
pub struct LearnOptions {
    pub session_order: OrderChoice,
    pub message_order: OrderChoice,
    pub smoothing: Smoothing,
    pub discount: Option<f64>,
    pub pool_cap: usize,
    /// See [`Settings::min_template_count`].
    pub min_template_count: u64,
    /// See [`Settings::flow_window`]; 0 learns neither replies nor value flow.
    pub flow_window: u32,
    pub rules: RuleSet,
}

impl Default for LearnOptions {
    fn default() -> Self {
        LearnOptions {
            session_order: OrderChoice::Auto { max: 4 },
            message_order: OrderChoice::Auto { max: 4 },
            smoothing: Smoothing::KneserNey,
            discount: None,
            pool_cap: 256,
            min_template_count: 2,
            flow_window: DEFAULT_FLOW_WINDOW,
            rules: RuleSet::builtin(),
        }
    }
}

/// What learning measured besides the model.
#[derive(Debug, Clone, Default)]
pub struct LearnReport {
    pub skips: Skips,
    /// Held-out scores per order when the order was chosen automatically.
    pub session_scores: Vec<OrderScore>,
    pub message_scores: Vec<OrderScore>,
}

/// One unit of work: consecutive frames of consecutive sessions (request frames, and reply
/// frames when value flow is learned).
struct Unit {
    /// (session index, frame index) of each frame, in corpus order.
    frames: Vec<(u32, u32)>,
    bytes: u64,
}

/// What a unit's frames were, for the sequential pass: session, side and local template
/// (replies have [`REPLY_BIT`] set), content hash (requests only).
struct UnitResult {
    draft: Draft,
    frames: Vec<(u32, u32, u64)>,
}

const UNIT_BYTES: u64 = 4 << 20;
/// Marks a reply template in a unit's frame list.
const REPLY_BIT: u32 = 1 << 31;

fn plan_units(corpus: &Corpus, with_replies: bool) -> Vec<Unit> {
    let total: u64 = corpus.sources.iter().map(|s| s.bytes.len() as u64).sum();
    let threads = rayon::current_num_threads().max(1) as u64;
    let target = (total / (threads * 4)).clamp(64 << 10, UNIT_BYTES);
    let mut units = Vec::new();
    let mut current = Unit { frames: Vec::new(), bytes: 0 };
    for (si, session) in corpus.sessions.iter().enumerate() {
        for (fi, frame) in session.frames.iter().enumerate() {
            if frame.role != Role::Request && !with_replies {
                continue;
            }
            current.frames.push((si as u32, fi as u32));
            current.bytes += frame.range.len() as u64;
            if current.bytes >= target {
                units.push(std::mem::replace(&mut current, Unit { frames: Vec::new(), bytes: 0 }));
            }
        }
    }
    if !current.frames.is_empty() {
        units.push(current);
    }
    units
}

/// Interning, templates and pools of one side of the traffic within a unit.
struct SideState {
    interner: Interner,
    templates: FxHashMap<Box<[u32]>, u32>,
    template_list: Vec<Vec<u32>>,
    /// Fit and check counts per template.
    template_counts: Vec<[u64; 2]>,
    pools: FxHashMap<(u16, u32), PoolBuilder>,
    /// Per interned symbol: is it a literal that anchors slot pools (checked once, not per piece).
    anchors: Vec<bool>,
}

impl SideState {
    fn new(classes: &[String]) -> SideState {
        SideState {
            interner: Interner::new(classes),
            templates: FxHashMap::default(),
            template_list: Vec::new(),
            template_counts: Vec::new(),
            pools: FxHashMap::default(),
            anchors: Vec::new(),
        }
    }

    /// Interns a tokenized message; fills `symbols` and the slot value hashes, adds the values
    /// to the pools when `count`. Returns the local template index.
    fn add(
        &mut self,
        tokenized: &Tokenized,
        symbols: &mut Vec<u32>,
        hashes: &mut Vec<u64>,
        pool_cap: usize,
        count: bool,
    ) -> u32 {
        symbols.clear();
        hashes.clear();
        let mut anchor = BEGIN;
        for piece in &tokenized.pieces {
            let s = self.interner.intern(tokenized, piece);
            symbols.push(s);
            let local = (s - FIRST_TOKEN) as usize;
            if local == self.anchors.len() {
                self.anchors.push(piece.kind == PieceKind::Lit && is_anchor_bytes(tokenized.bytes(piece)));
            }
            match piece.kind {
                PieceKind::Lit if self.anchors[local] => anchor = s,
                PieceKind::Slot(class) => {
                    let value = tokenized.bytes(piece);
                    let h = super::value_hash(value);
                    hashes.push(h);
                    if count {
                        self.pools
                            .entry((class, anchor))
                            .or_insert_with(|| PoolBuilder::new(pool_cap))
                            .add_hashed(value, h);
                    }
                }
                _ => {}
            }
        }
        match self.templates.get(symbols.as_slice()) {
            Some(&t) => t,
            None => {
                let t = self.template_list.len() as u32;
                self.template_list.push(symbols.clone());
                self.template_counts.push([0, 0]);
                self.templates.insert(symbols.as_slice().into(), t);
                t
            }
        }
    }

    fn finish_pools(pools: FxHashMap<(u16, u32), PoolBuilder>, classes: &[String]) -> Vec<super::Pool> {
        pools
            .into_iter()
            .map(|((class, anchor), b)| {
                b.finish(classes[class as usize].clone(), (anchor != BEGIN).then_some(anchor))
            })
            .collect()
    }
}

fn learn_unit(
    corpus: &Corpus,
    tokenizer: &Tokenizer,
    unit: &Unit,
    order: usize,
    options: &LearnOptions,
    progress: Option<&(dyn Fn(u64) + Sync)>,
) -> UnitResult {
    let classes = tokenizer.classes();
    let window = options.flow_window;
    let mut requests = SideState::new(classes);
    let mut replies = SideState::new(classes);
    let mut counter = GramCounter::new(order);
    let mut flow = FlowCounter::new(window);
    let mut frames = Vec::with_capacity(unit.frames.len());
    let mut tokenized = Tokenized::default();
    let mut symbols: Vec<u32> = Vec::new();
    let mut hashes: Vec<u64> = Vec::new();
    let mut tokens = 0u64;
    let mut messages = 0u64;
    // A session that started in an earlier unit: read the window before this unit's first frame
    // (uncounted), so that flow counts do not depend on where units are cut.
    let warm_up: Vec<(u32, u32)> = match unit.frames.first() {
        Some(&(si, fi)) if window > 0 => (fi.saturating_sub(window)..fi).map(|f| (si, f)).collect(),
        _ => Vec::new(),
    };
    let mut current_session = u32::MAX;
    let all = warm_up.iter().map(|&f| (f, false)).chain(unit.frames.iter().map(|&f| (f, true)));
    for ((si, fi), count) in all {
        if si != current_session {
            flow.start_session();
            current_session = si;
        }
        let session = &corpus.sessions[si as usize];
        let frame = &session.frames[fi as usize];
        let bytes = corpus.bytes(session, frame);
        tokenizer.tokenize(bytes, &mut tokenized);
        let (side, state) = match frame.role {
            Role::Request => (Side::Request, &mut requests),
            Role::Reply => (Side::Reply, &mut replies),
        };
        let template = state.add(&tokenized, &mut symbols, &mut hashes, options.pool_cap, count);
        flow.message(fi, side, FIRST_TEMPLATE + template, &hashes, count);
        if !count {
            continue;
        }
        match side {
            Side::Request => {
                tokens += symbols.len() as u64;
                messages += 1;
                let hash = super::value_hash(bytes);
                state.template_counts[template as usize][Part::of_hash(hash) as usize] += 1;
                frames.push((si, template, hash));
            }
            Side::Reply => {
                state.template_counts[template as usize][0] += 1;
                frames.push((si, template | REPLY_BIT, 0));
            }
        }
    }
    for (t, &counts) in requests.template_list.iter().zip(&requests.template_counts) {
        counter.add_sequence_counts(t, counts);
    }
    if let Some(report) = progress {
        report(unit.bytes);
    }
    let draft = Draft {
        tokens: requests.interner.into_tokens(),
        templates: requests.template_list,
        session_chain: None,
        message_chain: counter.into_grams(|s| s),
        pools: SideState::finish_pools(requests.pools, classes),
        totals: Totals { tokens, messages, ..Totals::default() },
        reply_tokens: replies.interner.into_tokens(),
        reply_templates: replies
            .template_list
            .into_iter()
            .zip(replies.template_counts)
            .map(|(t, c)| (t, c[0]))
            .collect(),
        reply_pools: SideState::finish_pools(replies.pools, classes),
        reply_runs: Vec::new(),
        flow: flow.finish(),
    };
    UnitResult { draft, frames }
}

/// Counts, per session in order, which run of replies followed each request template before
/// which next request.
#[derive(Default)]
struct RunCounter {
    runs: FxHashMap<(u32, u32, Vec<u32>), u64>,
    request: u32,
    run: Vec<u32>,
}

impl RunCounter {
    fn flush(&mut self, next: u32) {
        if !self.run.is_empty() {
            *self.runs.entry((self.request, next, std::mem::take(&mut self.run))).or_default() += 1;
        }
    }

    fn start_session(&mut self) {
        self.flush(END);
        self.request = BEGIN;
    }

    fn request(&mut self, template: u32) {
        self.flush(template);
        self.request = template;
    }

    fn reply(&mut self, template: u32) {
        if self.run.len() < MAX_REPLY_RUN {
            self.run.push(template);
        }
    }

    fn finish(mut self) -> Vec<ReplyRun> {
        self.flush(END);
        let mut runs: Vec<ReplyRun> = self
            .runs
            .into_iter()
            .map(|((request, next, replies), count)| ReplyRun {
                request,
                next,
                replies: IdList(replies),
                count,
            })
            .collect();
        runs.sort_unstable();
        runs
    }
}

/// Learns a model from `corpus`. `progress`, if given, is called with byte counts as units
/// finish (from worker threads).
pub fn learn(
    corpus: &Corpus,
    options: &LearnOptions,
    progress: Option<&(dyn Fn(u64) + Sync)>,
) -> Result<(Model, LearnReport), ModelError> {
    let tokenizer = Tokenizer::new(corpus.format, &options.rules, "slot rules")?;
    let settings = Settings {
        read: corpus.options.clone(),
        smoothing: options.smoothing,
        discount: options.discount,
        pool_cap: options.pool_cap as u32,
        min_template_count: options.min_template_count,
        flow_window: options.flow_window,
        rules: options.rules.clone(),
    };
    let units = plan_units(corpus, options.flow_window > 0);
    let message_order = options.message_order.counting_order();
    let results: Vec<UnitResult> = units
        .par_iter()
        .map(|u| learn_unit(corpus, &tokenizer, u, message_order, options, progress))
        .collect();
    let mut frames_of_units = Vec::with_capacity(results.len());
    let drafts: Vec<Draft> = results
        .into_iter()
        .map(|r| {
            frames_of_units.push(r.frames);
            r.draft
        })
        .collect();
    let (mut model, maps) = canonicalize(settings, drafts);

    // Session chain over canonical template symbols, and the replies that followed each
    // request; units hold consecutive frames in corpus order, so sessions come whole.
    let mut sequences: Vec<Vec<u32>> = vec![Vec::new(); corpus.sessions.len()];
    let mut hashes: Vec<Vec<u64>> = vec![Vec::new(); corpus.sessions.len()];
    let mut runs = RunCounter::default();
    let mut current_session = u32::MAX;
    for (u, frames) in frames_of_units.iter().enumerate() {
        for &(si, t, h) in frames {
            if si != current_session {
                runs.start_session();
                current_session = si;
            }
            if t & REPLY_BIT != 0 {
                runs.reply(maps.reply_templates[u][(t & !REPLY_BIT) as usize]);
                continue;
            }
            let template = maps.templates[u][t as usize];
            runs.request(template);
            sequences[si as usize].push(template);
            hashes[si as usize].push(h);
        }
    }
    model.replies.runs = runs.finish();
    let mut sessions = GramCounter::new(options.session_order.counting_order());
    for (seq, hs) in sequences.iter().zip(&hashes) {
        if seq.is_empty() {
            continue;
        }
        let bytes: Vec<u8> = hs.iter().flat_map(|h| h.to_le_bytes()).collect();
        sessions.add_sequence(seq, Part::of_hash(super::value_hash(&bytes)));
    }
    model.session_chain = sessions.into_grams(|s| s);
    model.totals.sessions = sequences.iter().filter(|s| !s.is_empty()).count() as u64;
    model.totals.replies =
        corpus.sessions.iter().flat_map(|s| &s.frames).filter(|f| f.role == Role::Reply).count() as u64;

    let mut report = LearnReport { skips: corpus.skips.clone(), ..Default::default() };
    let config =
        ChainConfig { smoothing: options.smoothing, discount: options.discount, ..Default::default() };
    if let OrderChoice::Auto { .. } = options.session_order {
        let (scores, best) = pick_order(&model.session_chain_grams(), model.session_symbols(), &config, 2);
        model.session_chain = model.session_chain.marginal(best);
        report.session_scores = scores;
    }
    if let OrderChoice::Auto { .. } = options.message_order {
        let (scores, best) = pick_order(&model.message_chain, model.token_symbols(), &config, 2);
        model.message_chain = model.message_chain.marginal(best);
        report.message_scores = scores;
    }
    Ok((model, report))
}
