//! The model: what learning produces, files store, `merge` adds and generation compiles.
//!
//! A [`Model`] holds counts, never probabilities: the token vocabulary, the templates (token
//! sequences with slots), the n-gram tables of the session chain (over templates) and the message
//! chain (over tokens), and the slot value pools. Every list is in a canonical order defined by
//! content alone, so the same data gives the same model whatever the input order or sharding:
//! `merge(learn(A), learn(B)) == learn(A ∪ B)`, byte for byte. [`Compiled`] turns a model into
//! smoothed chains and samplers.

mod compiled;
mod file;
mod learn;
mod pool;

use rustc_hash::FxHashMap;
use serde::{Deserialize, Serialize};
use thiserror::Error;

use crate::chain::{Grams, Smoothing};
use crate::read::ReadOptions;
use crate::symbol::{FIRST_TEMPLATE, FIRST_TOKEN};
use crate::token::{RuleSet, Token, TokenError};

pub use compiled::{Compiled, SlotRef};
pub use file::{
    Encoding, MODEL_FORMAT_VERSION, content_hash, from_bytes, from_bytes_with_hash, load, load_with_hash,
    save, to_bytes,
};
pub use learn::{LearnOptions, LearnReport, OrderChoice, learn};
pub use pool::{MAX_VALUE_BYTES, Pool, PoolBuilder, PoolValue, value_hash};

/// Errors of the model stage.
#[derive(Debug, Error)]
pub enum ModelError {
    /// A model file could not be read, parsed, verified or written.
    #[error("{path}: {problem}")]
    File { path: String, problem: String },
    /// Two models cannot be merged.
    #[error("cannot merge: {0}")]
    Incompatible(String),
    #[error(transparent)]
    Token(#[from] TokenError),
    #[error("{0}")]
    Invalid(String),
}

/// How a model was learned; models merge only when their settings are equal.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Settings {
    pub read: ReadOptions,
    pub smoothing: Smoothing,
    /// Fixed Kneser–Ney discount; estimated per level when absent.
    #[serde(default)]
    pub discount: Option<f64>,
    /// Most distinct values kept per slot pool.
    pub pool_cap: u32,
    /// Templates seen fewer times than this are one symbol, "novel message", in the session
    /// chain (the usual unknown-word treatment of language models, applied to templates).
    /// Applied when chains are built, so counts stay exactly mergeable.
    #[serde(default = "default_min_template_count")]
    pub min_template_count: u64,
    pub rules: RuleSet,
}

fn default_min_template_count() -> u64 {
    2
}

/// Sizes of what was learned (additive under merge).
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Totals {
    pub sessions: u64,
    /// Request messages (what the chains learn).
    pub messages: u64,
    /// Reply messages seen beside them.
    pub replies: u64,
    /// Tokens in request messages.
    pub tokens: u64,
}

impl Totals {
    fn add(&mut self, o: &Totals) {
        self.sessions += o.sessions;
        self.messages += o.messages;
        self.replies += o.replies;
        self.tokens += o.tokens;
    }
}

/// A list of symbols, stored as one line `"5 7 9"` in text formats.
#[derive(Debug, Clone, PartialEq, Eq, PartialOrd, Ord, Hash, Default)]
pub struct IdList(pub Vec<u32>);

impl Serialize for IdList {
    fn serialize<S: serde::Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        if s.is_human_readable() {
            let text: Vec<String> = self.0.iter().map(u32::to_string).collect();
            s.serialize_str(&text.join(" "))
        } else {
            self.0.serialize(s)
        }
    }
}

impl<'de> Deserialize<'de> for IdList {
    fn deserialize<D: serde::Deserializer<'de>>(d: D) -> Result<IdList, D::Error> {
        if d.is_human_readable() {
            let text = std::borrow::Cow::<'de, str>::deserialize(d)?;
            text.split_ascii_whitespace()
                .map(|f| f.parse::<u32>().map_err(|_| serde::de::Error::custom(format!("bad symbol `{f}`"))))
                .collect::<Result<Vec<u32>, _>>()
                .map(IdList)
        } else {
            Vec::<u32>::deserialize(d).map(IdList)
        }
    }
}

/// A learned model. See the module documentation.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Model {
    pub settings: Settings,
    pub totals: Totals,
    /// Token `i` has symbol `FIRST_TOKEN + i`; sorted.
    pub tokens: Vec<Token>,
    /// Template `i` (token symbols) has session symbol `FIRST_TEMPLATE + i`; sorted.
    pub templates: Vec<IdList>,
    /// Counts of the chain over templates within sessions.
    pub session_chain: Grams,
    /// Counts of the chain over tokens within messages.
    pub message_chain: Grams,
    /// Slot value pools, sorted by (class, anchor).
    pub pools: Vec<Pool>,
}

impl Model {
    /// Alphabet size of the message chain.
    pub fn token_symbols(&self) -> u32 {
        FIRST_TOKEN + self.tokens.len() as u32
    }

    /// Alphabet size of the session chain.
    pub fn session_symbols(&self) -> u32 {
        FIRST_TEMPLATE + self.templates.len() as u32
    }

    /// Token symbols of the template with this session symbol.
    pub fn template(&self, symbol: u32) -> Option<&[u32]> {
        symbol
            .checked_sub(FIRST_TEMPLATE)
            .and_then(|i| self.templates.get(i as usize))
            .map(|t| t.0.as_slice())
    }

    /// The token of a symbol.
    pub fn token(&self, symbol: u32) -> Option<&Token> {
        symbol.checked_sub(FIRST_TOKEN).and_then(|i| self.tokens.get(i as usize))
    }

    /// Printable form of a template: tokens concatenated, slots as `{class}`.
    pub fn template_text(&self, symbol: u32) -> String {
        match self.template(symbol) {
            Some(t) => t.iter().filter_map(|&s| self.token(s)).map(Token::display).collect(),
            None => match symbol {
                crate::symbol::BEGIN => "<begin>".into(),
                crate::symbol::END => "<end>".into(),
                crate::symbol::NOVEL => "<novel message>".into(),
                _ => format!("<symbol {symbol}>"),
            },
        }
    }

    /// How often each template occurs (index `i` is template `FIRST_TEMPLATE + i`).
    pub fn template_counts(&self) -> Vec<u64> {
        let mut counts = vec![0u64; self.templates.len()];
        let order = self.session_chain.order;
        for (g, c) in self.session_chain.rows() {
            if let Some(i) = g[order].checked_sub(FIRST_TEMPLATE) {
                counts[i as usize] += c[0] + c[1];
            }
        }
        counts
    }

    /// Whether each template is frequent enough to be its own symbol in the session chain.
    pub fn frequent_templates(&self) -> Vec<bool> {
        self.template_counts().into_iter().map(|c| c >= self.settings.min_template_count).collect()
    }

    /// The session table chains are built from: rare templates folded into
    /// [`crate::symbol::NOVEL`].
    pub fn session_chain_grams(&self) -> Grams {
        let frequent = self.frequent_templates();
        if frequent.iter().all(|&f| f) {
            return self.session_chain.clone();
        }
        self.session_chain.remap(|s| match s.checked_sub(FIRST_TEMPLATE) {
            Some(i) if !frequent[i as usize] => crate::symbol::NOVEL,
            _ => s,
        })
    }

    /// The sum of two models learned with equal settings and orders. Equal to learning on both
    /// inputs at once.
    pub fn merge(&self, other: &Model) -> Result<Model, ModelError> {
        if self.settings != other.settings {
            return Err(ModelError::Incompatible(describe_settings_difference(
                &self.settings,
                &other.settings,
            )));
        }
        for (what, a, b) in [
            ("session chain", self.session_chain.order, other.session_chain.order),
            ("message chain", self.message_chain.order, other.message_chain.order),
        ] {
            if a != b {
                return Err(ModelError::Incompatible(format!(
                    "{what} orders differ ({a} and {b}); learn both with the same --order"
                )));
            }
        }
        let (model, _) =
            canonicalize(self.settings.clone(), vec![Draft::from(self.clone()), Draft::from(other.clone())]);
        Ok(model)
    }

    /// Checks internal consistency (for models read from untrusted files).
    pub fn validate(&self) -> Result<(), String> {
        self.settings.rules.validate("model rules").map_err(|e| e.to_string())?;
        if self.settings.read.format.is_none() {
            return Err("settings do not name the format".into());
        }
        if let Some(d) = self.settings.discount
            && !(d > 0.0 && d <= 1.0)
        {
            return Err(format!("discount {d} is outside (0, 1]"));
        }
        if self.settings.min_template_count == 0 {
            return Err("min template count must be at least 1".into());
        }
        if self.settings.pool_cap == 0 || self.settings.pool_cap > 1 << 20 {
            return Err(format!("pool cap {} is outside 1..=1048576", self.settings.pool_cap));
        }
        if self.tokens.len() > (u32::MAX / 2) as usize || self.templates.len() > (u32::MAX / 2) as usize {
            return Err("too many tokens or templates".into());
        }
        if self.tokens.windows(2).any(|w| w[0] >= w[1]) {
            return Err("tokens are not in canonical order".into());
        }
        let classes = self.settings.rules.class_names();
        for t in &self.tokens {
            if let Token::Slot(c) = t
                && !classes.contains(c)
            {
                return Err(format!("token names unknown slot class `{c}`"));
            }
        }
        let token_symbols = self.token_symbols();
        for (i, t) in self.templates.iter().enumerate() {
            if t.0.iter().any(|&s| !(FIRST_TOKEN..token_symbols).contains(&s)) {
                return Err(format!("template {i} uses an unknown token"));
            }
            if i > 0 && self.templates[i - 1] >= *t {
                return Err("templates are not in canonical order".into());
            }
        }
        self.session_chain.validate(self.session_symbols()).map_err(|e| format!("session chain: {e}"))?;
        self.message_chain.validate(token_symbols).map_err(|e| format!("message chain: {e}"))?;
        for (i, p) in self.pools.iter().enumerate() {
            if !classes.contains(&p.class) {
                return Err(format!("pool {i} names unknown slot class `{}`", p.class));
            }
            if p.anchor.is_some_and(|a| !(FIRST_TOKEN..token_symbols).contains(&a)) {
                return Err(format!("pool {i} has an unknown anchor"));
            }
            if p.values.len() > self.settings.pool_cap as usize {
                return Err(format!("pool {i} holds more values than the pool cap"));
            }
            if i > 0 && (&self.pools[i - 1].class, self.pools[i - 1].anchor) >= (&p.class, p.anchor) {
                return Err("pools are not in canonical order".into());
            }
        }
        Ok(())
    }
}

fn describe_settings_difference(a: &Settings, b: &Settings) -> String {
    let what = if a.read != b.read {
        "read options (format, session key, reply pattern)"
    } else if a.rules != b.rules {
        "slot rules"
    } else if a.smoothing != b.smoothing || a.discount != b.discount {
        "smoothing"
    } else if a.min_template_count != b.min_template_count {
        "minimum template count"
    } else {
        "pool cap"
    };
    format!("the models were learned with different {what}")
}

/// A model under construction, with symbols in any order and possibly repeated entries.
#[derive(Debug, Clone, Default)]
pub(crate) struct Draft {
    pub tokens: Vec<Token>,
    pub templates: Vec<Vec<u32>>,
    pub session_chain: Option<Grams>,
    pub message_chain: Grams,
    pub pools: Vec<Pool>,
    pub totals: Totals,
}

impl From<Model> for Draft {
    fn from(m: Model) -> Draft {
        Draft {
            tokens: m.tokens,
            templates: m.templates.into_iter().map(|t| t.0).collect(),
            session_chain: Some(m.session_chain),
            message_chain: m.message_chain,
            pools: m.pools,
            totals: m.totals,
        }
    }
}

/// Puts drafts together in canonical order. Returns the model and, per draft, the session symbol
/// of each of its templates.
pub(crate) fn canonicalize(settings: Settings, drafts: Vec<Draft>) -> (Model, Vec<Vec<u32>>) {
    use crate::symbol::{BEGIN, END, NOVEL};
    let fixed = |s: u32, first: u32| s < first;
    // Tokens.
    let mut tokens: Vec<Token> = drafts.iter().flat_map(|d| d.tokens.iter().cloned()).collect();
    tokens.sort_unstable();
    tokens.dedup();
    let token_index: FxHashMap<&Token, u32> =
        tokens.iter().enumerate().map(|(i, t)| (t, FIRST_TOKEN + i as u32)).collect();
    let token_maps: Vec<Vec<u32>> =
        drafts.iter().map(|d| d.tokens.iter().map(|t| token_index[t]).collect()).collect();
    let map_token =
        |d: usize, s: u32| if fixed(s, FIRST_TOKEN) { s } else { token_maps[d][(s - FIRST_TOKEN) as usize] };
    // Templates.
    let remapped: Vec<Vec<Vec<u32>>> = drafts
        .iter()
        .enumerate()
        .map(|(d, dr)| dr.templates.iter().map(|t| t.iter().map(|&s| map_token(d, s)).collect()).collect())
        .collect();
    let mut templates: Vec<Vec<u32>> = remapped.iter().flatten().cloned().collect();
    templates.sort_unstable();
    templates.dedup();
    let template_index: FxHashMap<&[u32], u32> =
        templates.iter().enumerate().map(|(i, t)| (t.as_slice(), FIRST_TEMPLATE + i as u32)).collect();
    let template_maps: Vec<Vec<u32>> =
        remapped.iter().map(|ts| ts.iter().map(|t| template_index[t.as_slice()]).collect()).collect();
    // Chains.
    let mut message_chain: Option<Grams> = None;
    let mut session_chain: Option<Grams> = None;
    for (d, draft) in drafts.iter().enumerate() {
        let m = draft.message_chain.remap(|s| map_token(d, s));
        message_chain = Some(match message_chain {
            Some(acc) => acc.merge(&m),
            None => m,
        });
        if let Some(sc) = &draft.session_chain {
            let s = sc.remap(|s| match s {
                BEGIN | END | NOVEL => s,
                _ => template_maps[d][(s - FIRST_TEMPLATE) as usize],
            });
            session_chain = Some(match session_chain {
                Some(acc) => acc.merge(&s),
                None => s,
            });
        }
    }
    // Pools.
    let cap = settings.pool_cap as usize;
    let mut pools: std::collections::BTreeMap<(String, Option<u32>), Pool> = Default::default();
    for (d, draft) in drafts.iter().enumerate() {
        for p in &draft.pools {
            let anchor = p.anchor.map(|a| map_token(d, a));
            let key = (p.class.clone(), anchor);
            let mut incoming = p.clone();
            incoming.anchor = anchor;
            match pools.get_mut(&key) {
                Some(existing) => existing.absorb(&incoming, cap),
                None => {
                    let mut fresh = Pool { values: Vec::new(), seen: 0, ..incoming.clone() };
                    fresh.absorb(&incoming, cap);
                    pools.insert(key, fresh);
                }
            }
        }
    }
    let mut totals = Totals::default();
    for d in &drafts {
        totals.add(&d.totals);
    }
    let message_order = drafts.first().map_or(1, |d| d.message_chain.order);
    let model = Model {
        settings,
        totals,
        tokens,
        templates: templates.into_iter().map(IdList).collect(),
        session_chain: session_chain.unwrap_or_else(|| Grams::empty(1)),
        message_chain: message_chain.unwrap_or_else(|| Grams::empty(message_order)),
        pools: pools.into_values().collect(),
    };
    (model, template_maps)
}
