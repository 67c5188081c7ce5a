//! Learning a model from a corpus, in parallel.
//!
//! The request frames are cut into units of a few megabytes; each unit is tokenized and counted
//! on its own (rayon), giving a draft with its own symbols. Drafts are put together by
//! [`canonicalize`] (the same code `merge` uses), then the session chain is counted over the
//! canonical template symbols in corpus order, so sessions that span units are counted whole.

use rayon::prelude::*;
use rustc_hash::FxHashMap;

use super::pool::PoolBuilder;
use super::{Draft, Model, ModelError, Settings, Totals, canonicalize};
use crate::chain::{ChainConfig, GramCounter, OrderScore, Part, Smoothing, pick_order};
use crate::read::{Corpus, Role, Skips};
use crate::symbol::BEGIN;
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

/// One unit of work: consecutive request frames of consecutive sessions.
struct Unit {
    /// (session index, frame index) of each request frame, in corpus order.
    frames: Vec<(u32, u32)>,
    bytes: u64,
}

struct UnitResult {
    draft: Draft,
    /// Per request frame: session, local template index, content hash.
    frames: Vec<(u32, u32, u64)>,
}

const UNIT_BYTES: u64 = 4 << 20;

fn plan_units(corpus: &Corpus) -> Vec<Unit> {
    let total: u64 = corpus.sources.iter().map(|s| s.bytes.len() as u64).sum();
    let threads = rayon::current_num_threads().max(1) as u64;
    let target = (total / (threads * 4)).clamp(64 << 10, UNIT_BYTES);
    let mut units = Vec::new();
    let mut current = Unit { frames: Vec::new(), bytes: 0 };
    for (si, session) in corpus.sessions.iter().enumerate() {
        for (fi, frame) in session.frames.iter().enumerate() {
            if frame.role != Role::Request {
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

fn learn_unit(
    corpus: &Corpus,
    tokenizer: &Tokenizer,
    unit: &Unit,
    order: usize,
    pool_cap: usize,
    progress: Option<&(dyn Fn(u64) + Sync)>,
) -> UnitResult {
    let classes = tokenizer.classes();
    let mut interner = Interner::new(classes);
    let mut counter = GramCounter::new(order);
    let mut templates: FxHashMap<Box<[u32]>, u32> = FxHashMap::default();
    let mut template_list: Vec<Vec<u32>> = Vec::new();
    let mut pools: FxHashMap<(u16, u32), PoolBuilder> = FxHashMap::default();
    let mut frames = Vec::with_capacity(unit.frames.len());
    let mut tokenized = Tokenized::default();
    let mut symbols: Vec<u32> = Vec::new();
    let mut tokens = 0u64;
    for &(si, fi) in &unit.frames {
        let session = &corpus.sessions[si as usize];
        let bytes = corpus.bytes(session, &session.frames[fi as usize]);
        tokenizer.tokenize(bytes, &mut tokenized);
        symbols.clear();
        let mut anchor = BEGIN;
        for piece in &tokenized.pieces {
            let s = interner.intern(&tokenized, piece);
            symbols.push(s);
            match piece.kind {
                PieceKind::Lit if is_anchor_bytes(tokenized.bytes(piece)) => anchor = s,
                PieceKind::Slot(class) => pools
                    .entry((class, anchor))
                    .or_insert_with(|| PoolBuilder::new(pool_cap))
                    .add(tokenized.bytes(piece)),
                _ => {}
            }
        }
        tokens += symbols.len() as u64;
        let hash = super::value_hash(bytes);
        counter.add_sequence(&symbols, Part::of_hash(hash));
        let template = match templates.get(symbols.as_slice()) {
            Some(&t) => t,
            None => {
                let t = template_list.len() as u32;
                template_list.push(symbols.clone());
                templates.insert(symbols.as_slice().into(), t);
                t
            }
        };
        frames.push((si, template, hash));
    }
    if let Some(report) = progress {
        report(unit.bytes);
    }
    let draft = Draft {
        tokens: interner.into_tokens(),
        templates: template_list,
        session_chain: None,
        message_chain: counter.into_grams(|s| s),
        pools: pools
            .into_iter()
            .map(|((class, anchor), b)| {
                b.finish(classes[class as usize].clone(), (anchor != BEGIN).then_some(anchor))
            })
            .collect(),
        totals: Totals { tokens, messages: unit.frames.len() as u64, ..Totals::default() },
    };
    UnitResult { draft, frames }
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
        rules: options.rules.clone(),
    };
    let units = plan_units(corpus);
    let message_order = options.message_order.counting_order();
    let results: Vec<UnitResult> = units
        .par_iter()
        .map(|u| learn_unit(corpus, &tokenizer, u, message_order, options.pool_cap, progress))
        .collect();
    let mut frames_of_units = Vec::with_capacity(results.len());
    let drafts: Vec<Draft> = results
        .into_iter()
        .map(|r| {
            frames_of_units.push(r.frames);
            r.draft
        })
        .collect();
    let (mut model, template_maps) = canonicalize(settings, drafts);

    // Session chain over canonical template symbols, sessions in corpus order.
    let mut sequences: Vec<Vec<u32>> = vec![Vec::new(); corpus.sessions.len()];
    let mut hashes: Vec<Vec<u64>> = vec![Vec::new(); corpus.sessions.len()];
    for (u, frames) in frames_of_units.iter().enumerate() {
        for &(si, t, h) in frames {
            sequences[si as usize].push(template_maps[u][t as usize]);
            hashes[si as usize].push(h);
        }
    }
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
