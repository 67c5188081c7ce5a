//! A model made ready to use: smoothed chains, vocabulary lookups, template index and pool
//! samplers. Built once per run; the count tables are dropped after the chains are built.

use std::hash::{Hash, Hasher};

use hashbrown::HashTable;
use rand::Rng;
use rustc_hash::{FxHashMap, FxHasher};

use super::flow::FlowTable;
use super::{Model, ModelError, Pool, Settings, Totals};
use crate::chain::{AliasTable, Chain, ChainConfig, Parts};
use crate::symbol::{BEGIN, FIRST_TEMPLATE};
use crate::token::render::{Part, Skew, render_skewed};
use crate::token::{Token, Tokenized, Tokenizer, Vocab};

/// A slot inside a token sequence.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct SlotRef {
    /// Index of the slot token in the sequence.
    pub position: u32,
    /// Token symbol of the slot (its class).
    pub symbol: u32,
    /// Token symbol of the anchor literal, or [`BEGIN`].
    pub anchor: u32,
    /// Pool that fills it, if any pool of its class exists.
    pub pool: Option<u32>,
}

/// A compiled model.
#[derive(Debug, Clone)]
pub struct Compiled {
    pub settings: Settings,
    pub totals: Totals,
    /// Content hash of the model file.
    pub hash: String,
    pub tokenizer: Tokenizer,
    pub vocab: Vocab,
    /// Token symbols of each template (session symbol `FIRST_TEMPLATE + i`).
    pub templates: Vec<Box<[u32]>>,
    /// Template numbers by content (hashes of `templates`, so the symbols are stored once).
    template_index: HashTable<u32>,
    frequent: Vec<bool>,
    /// Chain over templates within a session.
    pub session: Chain,
    /// Chain over tokens within a message.
    pub message: Chain,
    pub pools: Vec<Pool>,
    pool_index: PoolIndex,
    template_slots: Vec<Vec<SlotRef>>,
    /// Rare templates (those folded into the novel-message symbol) by the session symbol before
    /// them, with counts; key `u32::MAX` holds all of them.
    rare_after: FxHashMap<u32, (Vec<u32>, AliasTable)>,
    /// What the other side answers (empty when the model learned no replies).
    pub replies: ReplySide,
    /// Accepted value-flow couplings.
    pub flow: FlowTable,
}

/// Samplers and lookups for the value pools of one side.
#[derive(Debug, Clone, Default)]
struct PoolIndex {
    tables: Vec<AliasTable>,
    /// (slot symbol, anchor symbol or BEGIN) → pool.
    by_key: FxHashMap<(u32, u32), u32>,
    /// Slot symbol → the most used pool of its class with kept values.
    by_class: FxHashMap<u32, u32>,
}

impl PoolIndex {
    fn new(pools: &[Pool], vocab: &Vocab) -> PoolIndex {
        let mut index = PoolIndex::default();
        let mut best_seen: FxHashMap<u32, u64> = FxHashMap::default();
        for (i, p) in pools.iter().enumerate() {
            let weights: Vec<f64> = p.values.iter().map(|v| v.count as f64).collect();
            index.tables.push(AliasTable::new(&weights));
            let Some(slot) = vocab.tokens().iter().position(|t| matches!(t, Token::Slot(c) if *c == p.class))
            else {
                continue;
            };
            let slot = crate::symbol::FIRST_TOKEN + slot as u32;
            index.by_key.insert((slot, p.anchor.unwrap_or(BEGIN)), i as u32);
            if p.values.is_empty() {
                continue;
            }
            if best_seen.get(&slot).is_none_or(|&s| p.seen > s) {
                best_seen.insert(slot, p.seen);
                index.by_class.insert(slot, i as u32);
            }
        }
        index
    }

    fn slots_of(&self, vocab: &Vocab, tokens: &[u32]) -> Vec<SlotRef> {
        let mut anchor = BEGIN;
        let mut out = Vec::new();
        for (i, &s) in tokens.iter().enumerate() {
            match vocab.token(s) {
                Some(t @ Token::Lit(_)) if t.is_anchor() => anchor = s,
                Some(Token::Slot(_)) => out.push(SlotRef {
                    position: i as u32,
                    symbol: s,
                    anchor,
                    pool: self.by_key.get(&(s, anchor)).or_else(|| self.by_class.get(&s)).copied(),
                }),
                _ => {}
            }
        }
        out
    }

    fn sample<'p, R: Rng + ?Sized>(&self, pools: &'p [Pool], pool: u32, rng: &mut R) -> &'p [u8] {
        let p = &pools[pool as usize];
        if p.values.is_empty() {
            return b"";
        }
        &p.values[self.tables[pool as usize].draw(rng.next_u64())].value
    }
}

/// Writes a token sequence of `vocab` with slot values (one per slot, in order) to bytes.
fn render_with(vocab: &Vocab, tokens: &[u32], values: &[&[u8]], skew: Skew) -> Vec<u8> {
    let mut next_value = values.iter();
    let parts = tokens.iter().filter_map(|&s| {
        Some(match vocab.token(s)? {
            Token::Lit(b) => Part::Lit(b),
            Token::Slot(_) => Part::Value(next_value.next().copied().unwrap_or(b"")),
            Token::Derived(d) => Part::Derived(*d),
            Token::Body(f) => Part::Body(*f),
        })
    });
    let mut out = Vec::new();
    render_skewed(parts, skew, &mut out);
    out
}

fn template_table(templates: &[Box<[u32]>]) -> HashTable<u32> {
    let mut table = HashTable::with_capacity(templates.len());
    for (i, t) in templates.iter().enumerate() {
        table.insert_unique(hash_symbols(t), i as u32, |&j| hash_symbols(&templates[j as usize]));
    }
    table
}

/// Runs of reply templates and a table drawing one of them or, as the last outcome, none.
type RunTable = (Vec<Box<[u32]>>, AliasTable);

/// Runs with their counts.
type CountedRuns<'a> = Vec<(&'a [u32], u64)>;

/// The reply side of a compiled model: vocabulary, templates, pools, and which replies answer
/// each request template.
#[derive(Debug, Clone, Default)]
pub struct ReplySide {
    pub vocab: Vocab,
    /// Token symbols of each reply template (symbol `FIRST_TEMPLATE + i`).
    pub templates: Vec<Box<[u32]>>,
    template_index: HashTable<u32>,
    pub pools: Vec<Pool>,
    pool_index: PoolIndex,
    template_slots: Vec<Vec<SlotRef>>,
    /// Per request template symbol (or BEGIN): the runs that answered it and a table drawing
    /// one of them or, as the last outcome, no reply.
    runs: FxHashMap<u32, RunTable>,
    /// The same per (request, next request or END).
    runs_after: FxHashMap<(u32, u32), RunTable>,
}

impl ReplySide {
    fn new(model: &Model, classes: &[String]) -> ReplySide {
        let r = &model.replies;
        let vocab = Vocab::new(r.tokens.clone(), classes);
        let templates: Vec<Box<[u32]>> =
            r.templates.iter().map(|t| t.tokens.0.clone().into_boxed_slice()).collect();
        let pool_index = PoolIndex::new(&r.pools, &vocab);
        let template_slots = templates.iter().map(|t| pool_index.slots_of(&vocab, t)).collect();
        // Transitions (request, next) of the session chain: how often each pair occurred,
        // answered or not.
        let transitions: FxHashMap<(u32, u32), u64> = if model.session_chain.order >= 1 {
            model.session_chain.marginal(1).rows().map(|(g, c)| ((g[0], g[1]), c[0] + c[1])).collect()
        } else {
            FxHashMap::default()
        };
        let mut by_pair: std::collections::BTreeMap<(u32, u32), CountedRuns<'_>> = Default::default();
        let mut by_request: std::collections::BTreeMap<u32, std::collections::BTreeMap<&[u32], u64>> =
            Default::default();
        for run in &r.runs {
            by_pair.entry((run.request, run.next)).or_default().push((&run.replies.0, run.count));
            *by_request.entry(run.request).or_default().entry(&run.replies.0).or_default() += run.count;
        }
        let table = |list: CountedRuns<'_>, total: u64| -> RunTable {
            let answered: u64 = list.iter().map(|e| e.1).sum();
            let mut weights: Vec<f64> = list.iter().map(|e| e.1 as f64).collect();
            weights.push(total.saturating_sub(answered) as f64);
            let table = AliasTable::new(&weights);
            (list.into_iter().map(|e| e.0.into()).collect(), table)
        };
        let runs_after = by_pair
            .into_iter()
            .map(|(pair, list)| (pair, table(list, transitions.get(&pair).copied().unwrap_or(0))))
            .collect();
        let mut request_totals: FxHashMap<u32, u64> = FxHashMap::default();
        for (&(a, _), &n) in &transitions {
            *request_totals.entry(a).or_default() += n;
        }
        let runs = by_request
            .into_iter()
            .map(|(request, m)| {
                let total = request_totals.get(&request).copied().unwrap_or(0);
                (request, table(m.into_iter().collect(), total))
            })
            .collect();
        ReplySide {
            template_index: template_table(&templates),
            vocab,
            templates,
            pools: r.pools.clone(),
            pool_index,
            template_slots,
            runs,
            runs_after,
        }
    }

    /// True when the model learned no replies.
    pub fn is_empty(&self) -> bool {
        self.templates.is_empty()
    }

    /// Token symbols of a reply template.
    pub fn template(&self, symbol: u32) -> Option<&[u32]> {
        symbol.checked_sub(FIRST_TEMPLATE).and_then(|i| self.templates.get(i as usize)).map(|t| &**t)
    }

    /// Symbol of a reply template seen in training.
    pub fn learned_template(&self, tokens: &[u32]) -> Option<u32> {
        let i =
            self.template_index.find(hash_symbols(tokens), |&i| *self.templates[i as usize] == *tokens)?;
        Some(FIRST_TEMPLATE + i)
    }

    /// Slots of a reply template.
    pub fn template_slots(&self, symbol: u32) -> &[SlotRef] {
        symbol
            .checked_sub(FIRST_TEMPLATE)
            .and_then(|i| self.template_slots.get(i as usize))
            .map_or(&[], |v| v.as_slice())
    }

    /// Slots of any reply token sequence.
    pub fn slots_of(&self, tokens: &[u32]) -> Vec<SlotRef> {
        self.pool_index.slots_of(&self.vocab, tokens)
    }

    /// Draws a value from a reply pool.
    pub fn sample_value<R: Rng + ?Sized>(&self, pool: u32, rng: &mut R) -> &[u8] {
        self.pool_index.sample(&self.pools, pool, rng)
    }

    /// Draws the run of reply templates that answers a request of template `request` (or, for
    /// [`BEGIN`], what came before the first request), as often as in training between it and
    /// the next request `next` (a template symbol, or [`crate::symbol::END`]); with `next`
    /// unknown or never seen after `request`, as often as after `request` at all. Empty for no
    /// reply. Draws nothing from `rng` when the template was never answered.
    pub fn sample_run<R: Rng + ?Sized>(&self, request: u32, next: Option<u32>, rng: &mut R) -> &[u32] {
        let entry = next.and_then(|n| self.runs_after.get(&(request, n))).or_else(|| self.runs.get(&request));
        match entry {
            Some((runs, table)) => runs.get(table.draw(rng.next_u64())).map_or(&[], |r| r),
            None => &[],
        }
    }

    /// Writes a reply token sequence with slot values to bytes.
    pub fn render(&self, tokens: &[u32], values: &[&[u8]]) -> Vec<u8> {
        render_with(&self.vocab, tokens, values, Skew::default())
    }
}

/// Counts of each rare template after each (folded) predecessor, from the first-order marginal
/// of the unfolded session table.
fn rare_templates_by_predecessor(model: &Model, frequent: &[bool]) -> FxHashMap<u32, (Vec<u32>, AliasTable)> {
    let is_rare = |s: u32| s.checked_sub(FIRST_TEMPLATE).is_some_and(|i| !frequent[i as usize]);
    let mut counts: FxHashMap<u32, std::collections::BTreeMap<u32, u64>> = FxHashMap::default();
    if model.session_chain.order >= 1 {
        for (g, c) in model.session_chain.marginal(1).rows() {
            if !is_rare(g[1]) {
                continue;
            }
            let prev = if is_rare(g[0]) { crate::symbol::NOVEL } else { g[0] };
            for key in [prev, u32::MAX] {
                *counts.entry(key).or_default().entry(g[1]).or_default() += c[0] + c[1];
            }
        }
    }
    counts
        .into_iter()
        .map(|(k, m)| {
            let weights: Vec<f64> = m.values().map(|&c| c as f64).collect();
            (k, (m.into_keys().collect(), AliasTable::new(&weights)))
        })
        .collect()
}

fn hash_symbols(symbols: &[u32]) -> u64 {
    let mut h = FxHasher::default();
    symbols.hash(&mut h);
    h.finish()
}

impl Compiled {
    /// Compiles `model` (whose content hash is `hash`).
    pub fn new(model: Model, hash: String) -> Result<Compiled, ModelError> {
        let format = model.settings.read.format.unwrap_or(crate::read::Format::Lines);
        let tokenizer = Tokenizer::new(format, &model.settings.rules, "model rules")?;
        let config = ChainConfig {
            smoothing: model.settings.smoothing,
            discount: model.settings.discount,
            parts: Parts::All,
        };
        let session = Chain::build(&model.session_chain_grams(), model.session_symbols(), &config);
        let frequent = model.frequent_templates();
        let rare_after = rare_templates_by_predecessor(&model, &frequent);
        let message = Chain::build(&model.message_chain, model.token_symbols(), &config);
        let flow = FlowTable::new(&model);
        let replies = ReplySide::new(&model, tokenizer.classes());
        let Model { settings, totals, tokens, templates, pools, .. } = model;
        let vocab = Vocab::new(tokens, tokenizer.classes());
        let templates: Vec<Box<[u32]>> = templates.into_iter().map(|t| t.0.into_boxed_slice()).collect();
        // Rare templates stay listed (symbols are stable) but are not looked up: the session
        // chain knows them only as novel messages.
        let template_index = template_table(&templates);
        let pool_index = PoolIndex::new(&pools, &vocab);
        let mut compiled = Compiled {
            settings,
            totals,
            hash,
            tokenizer,
            vocab,
            templates,
            template_index,
            frequent,
            session,
            message,
            pools,
            pool_index,
            template_slots: Vec::new(),
            rare_after,
            replies,
            flow,
        };
        compiled.template_slots = compiled.templates.iter().map(|t| compiled.slots_of(t)).collect();
        Ok(compiled)
    }

    /// Session-chain symbol of a template given as token symbols: `None` for a template never
    /// learned or too rare to be its own symbol (the chain knows those as novel messages).
    pub fn template_symbol(&self, tokens: &[u32]) -> Option<u32> {
        self.learned_template(tokens).filter(|&s| self.frequent[(s - FIRST_TEMPLATE) as usize])
    }

    /// Symbol of a template seen in training, however rarely.
    pub fn learned_template(&self, tokens: &[u32]) -> Option<u32> {
        let i =
            self.template_index.find(hash_symbols(tokens), |&i| *self.templates[i as usize] == *tokens)?;
        Some(FIRST_TEMPLATE + i)
    }

    /// Token symbols of the template with this session symbol.
    pub fn template(&self, symbol: u32) -> Option<&[u32]> {
        symbol.checked_sub(FIRST_TEMPLATE).and_then(|i| self.templates.get(i as usize)).map(|t| &**t)
    }

    /// Draws one of the rare templates seen in training after a step with session symbol `prev`
    /// (rare templates are what the session chain's novel-message symbol stood for), weighted by
    /// count; falls back to all rare templates when none followed `prev`. `None` when the model
    /// has no rare templates.
    pub fn sample_rare_template<R: Rng + ?Sized>(&self, prev: u32, rng: &mut R) -> Option<u32> {
        let (symbols, table) = self.rare_after.get(&prev).or_else(|| self.rare_after.get(&u32::MAX))?;
        Some(symbols[table.draw(rng.next_u64())])
    }

    /// Slots of a known template.
    pub fn template_slots(&self, symbol: u32) -> &[SlotRef] {
        symbol
            .checked_sub(FIRST_TEMPLATE)
            .and_then(|i| self.template_slots.get(i as usize))
            .map_or(&[], |v| v.as_slice())
    }

    /// Slots of any token sequence, with their anchors and pools.
    pub fn slots_of(&self, tokens: &[u32]) -> Vec<SlotRef> {
        self.pool_index.slots_of(&self.vocab, tokens)
    }

    /// Draws a value from a pool (empty if the pool has no kept values).
    pub fn sample_value<R: Rng + ?Sized>(&self, pool: u32, rng: &mut R) -> &[u8] {
        self.pool_index.sample(&self.pools, pool, rng)
    }

    /// The most frequent value of a pool.
    pub fn common_value(&self, pool: u32) -> &[u8] {
        self.pools[pool as usize].values.first().map_or(b"", |v| v.value.as_slice())
    }

    /// Tokenizes a message and maps its pieces to symbols (`None` for tokens the model never saw).
    pub fn symbols_of(&self, message: &[u8], scratch: &mut Tokenized) -> Vec<Option<u32>> {
        self.tokenizer.tokenize(message, scratch);
        scratch.pieces.iter().map(|p| self.vocab.lookup(scratch, p)).collect()
    }

    /// Writes a token sequence with slot values (one per slot, in order) to bytes.
    pub fn render(&self, tokens: &[u32], values: &[&[u8]], skew: Skew) -> Vec<u8> {
        render_with(&self.vocab, tokens, values, skew)
    }

    /// Short form of the hash for display.
    pub fn short_hash(&self) -> &str {
        &self.hash[..self.hash.len().min(16)]
    }
}
