//! A model made ready to use: smoothed chains, vocabulary lookups, template index and pool
//! samplers. Built once per run; the count tables are dropped after the chains are built.

use rand::Rng;
use rustc_hash::FxHashMap;

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
    template_index: FxHashMap<Box<[u32]>, u32>,
    frequent: Vec<bool>,
    /// Chain over templates within a session.
    pub session: Chain,
    /// Chain over tokens within a message.
    pub message: Chain,
    pub pools: Vec<Pool>,
    pool_tables: Vec<AliasTable>,
    pool_index: FxHashMap<(u32, u32), u32>,
    class_pool: FxHashMap<u32, u32>,
    template_slots: Vec<Vec<SlotRef>>,
    /// Rare templates (those folded into the novel-message symbol) by the session symbol before
    /// them, with counts; key `u32::MAX` holds all of them.
    rare_after: FxHashMap<u32, (Vec<u32>, AliasTable)>,
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
        let Model { settings, totals, tokens, templates, pools, .. } = model;
        let vocab = Vocab::new(tokens, tokenizer.classes());
        let templates: Vec<Box<[u32]>> = templates.into_iter().map(|t| t.0.into_boxed_slice()).collect();
        // Rare templates stay listed (symbols are stable) but are not looked up: the session
        // chain knows them only as novel messages.
        let template_index =
            templates.iter().enumerate().map(|(i, t)| (t.clone(), FIRST_TEMPLATE + i as u32)).collect();
        let mut pool_index = FxHashMap::default();
        let mut class_pool: FxHashMap<u32, u32> = FxHashMap::default();
        let mut best_seen: FxHashMap<u32, u64> = FxHashMap::default();
        let mut pool_tables = Vec::with_capacity(pools.len());
        for (i, p) in pools.iter().enumerate() {
            let weights: Vec<f64> = p.values.iter().map(|v| v.count as f64).collect();
            pool_tables.push(AliasTable::new(&weights));
            let Some(slot) = vocab.tokens().iter().position(|t| matches!(t, Token::Slot(c) if *c == p.class))
            else {
                continue;
            };
            let slot = crate::symbol::FIRST_TOKEN + slot as u32;
            pool_index.insert((slot, p.anchor.unwrap_or(BEGIN)), i as u32);
            if p.values.is_empty() {
                continue;
            }
            if best_seen.get(&slot).is_none_or(|&s| p.seen > s) {
                best_seen.insert(slot, p.seen);
                class_pool.insert(slot, i as u32);
            }
        }
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
            pool_tables,
            pool_index,
            class_pool,
            template_slots: Vec::new(),
            rare_after,
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
        self.template_index.get(tokens).copied()
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
        let mut anchor = BEGIN;
        let mut out = Vec::new();
        for (i, &s) in tokens.iter().enumerate() {
            match self.vocab.token(s) {
                Some(t @ Token::Lit(_)) if t.is_anchor() => anchor = s,
                Some(Token::Slot(_)) => out.push(SlotRef {
                    position: i as u32,
                    symbol: s,
                    anchor,
                    pool: self.pool_index.get(&(s, anchor)).or_else(|| self.class_pool.get(&s)).copied(),
                }),
                _ => {}
            }
        }
        out
    }

    /// Draws a value from a pool (empty if the pool has no kept values).
    pub fn sample_value<R: Rng + ?Sized>(&self, pool: u32, rng: &mut R) -> &[u8] {
        let p = &self.pools[pool as usize];
        if p.values.is_empty() {
            return b"";
        }
        &p.values[self.pool_tables[pool as usize].draw(rng.next_u64())].value
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
        let mut next_value = values.iter();
        let parts = tokens.iter().filter_map(|&s| {
            Some(match self.vocab.token(s)? {
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

    /// Short form of the hash for display.
    pub fn short_hash(&self) -> &str {
        &self.hash[..self.hash.len().min(16)]
    }
}
