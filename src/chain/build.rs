//! The compiled, smoothed chain.
//!
//! Every smoothing method here has the same interpolated shape (Chen & Goodman 1998, §2):
//!
//! ```text
//! P_k(w | h) = α_k(w | h) + γ_k(h) · P_{k-1}(w | h')      h' = h without its oldest symbol
//! P_{-1}(w)  = 1 / (symbols − 1)                           uniform over everything predictable
//! ```
//!
//! with, for a context `h` seen with successors at level `k` (`c` = count used at that level,
//! `N` = Σc over successors, `T` = number of distinct successors):
//!
//! | method        | count `c` used                        | α(w\|h)            | γ(h)        |
//! |---------------|---------------------------------------|--------------------|-------------|
//! | Kneser–Ney    | raw at the top level, continuation count N1+(•hw) below | max(c−D,0)/N | D·T/N |
//! | Witten–Bell   | raw (lower levels: marginals)         | c/(N+T)            | T/(N+T)     |
//! | add-one       | raw, top level only                   | c/(N+V)            | V/(N+V)     |
//!
//! A context never seen at a level has α = 0, γ = 1. `V` = symbols − 1. Kneser–Ney's discount
//! `D` is fixed or estimated per level as n1/(n1+2·n2) (Ney, Essen & Kneser 1994), clamped to
//! [0.1, 0.9] so that every level keeps some mass for unseen steps.
//!
//! Because Σα + γ = 1 at every level, sampling needs no normalisation: at each level, with
//! probability 1−γ draw from the alias table over α, else back off. Cost per step: at most
//! order+1 hash lookups and O(1) per draw, whatever the alphabet size.

use hashbrown::HashTable;
use rand::Rng;
use rustc_hash::{FxHashMap, FxHasher};
use serde::{Deserialize, Serialize};
use std::hash::{Hash, Hasher};

use super::alias;
use super::counts::Grams;
use crate::symbol::{BEGIN, END};

/// Smoothing method.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Smoothing {
    /// Interpolated Kneser–Ney.
    KneserNey,
    /// Interpolated Witten–Bell.
    WittenBell,
    /// Add-one (Laplace) at the top order, no backoff.
    AddOne,
}

impl Smoothing {
    pub fn name(self) -> &'static str {
        match self {
            Smoothing::KneserNey => "kneser-ney",
            Smoothing::WittenBell => "witten-bell",
            Smoothing::AddOne => "add-one",
        }
    }
}

impl std::str::FromStr for Smoothing {
    type Err = String;
    fn from_str(s: &str) -> Result<Self, Self::Err> {
        match s {
            "kneser-ney" | "kn" => Ok(Smoothing::KneserNey),
            "witten-bell" | "wb" => Ok(Smoothing::WittenBell),
            "add-one" | "laplace" => Ok(Smoothing::AddOne),
            other => Err(format!("unknown smoothing `{other}` (kneser-ney, witten-bell, add-one)")),
        }
    }
}

/// Which counts a chain is built from.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Parts {
    /// Fit and check: the chain used to generate.
    All,
    /// Fit only: for held-out evaluation.
    Fit,
}

/// How to build a chain.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ChainConfig {
    pub smoothing: Smoothing,
    /// Fixed Kneser–Ney discount in (0, 1]; `None` estimates one per level.
    pub discount: Option<f64>,
    pub parts: Parts,
}

impl Default for ChainConfig {
    fn default() -> Self {
        ChainConfig { smoothing: Smoothing::KneserNey, discount: None, parts: Parts::All }
    }
}

#[derive(Debug, Clone, Copy)]
struct Node {
    start: u32,
    len: u32,
    denom: f64,
    gamma: f64,
}

#[derive(Debug, Clone)]
struct Level {
    len: usize,
    discount: f64,
    ctx: Vec<u32>,
    nodes: Vec<Node>,
    index: HashTable<u32>,
}

fn hash_ctx(ctx: &[u32]) -> u64 {
    let mut h = FxHasher::default();
    ctx.hash(&mut h);
    h.finish()
}

impl Level {
    fn find(&self, ctx: &[u32]) -> Option<&Node> {
        let k = self.len;
        let i =
            self.index.find(hash_ctx(ctx), |&i| &self.ctx[i as usize * k..(i as usize + 1) * k] == ctx)?;
        Some(&self.nodes[*i as usize])
    }
}

/// Per-level decomposition of a probability (for inspection and reference checks).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct LevelTerm {
    /// Context length of this level.
    pub context_len: usize,
    /// Whether the context was seen at this level (if not, α = 0 and γ = 1).
    pub seen: bool,
    pub alpha: f64,
    pub gamma: f64,
}

/// A smoothed variable-order Markov chain over symbols `0..symbols`.
#[derive(Debug, Clone)]
pub struct Chain {
    order: usize,
    symbols: u32,
    smoothing: Smoothing,
    levels: Vec<Level>,
    succ: Vec<u32>,
    count: Vec<u32>,
    prob: Vec<f32>,
    alias: Vec<u32>,
}

/// Entries of one level: sorted grams of length `len + 1` with raw and continuation counts.
struct Entries {
    ids: Vec<u32>,
    raw: Vec<u64>,
    cont: Vec<u64>,
}

impl Chain {
    /// Builds a chain of the table's order. `symbols` is the alphabet size (ids `0..symbols`,
    /// of which [`BEGIN`] is never predicted).
    pub fn build(grams: &Grams, symbols: u32, config: &ChainConfig) -> Chain {
        let order = grams.order;
        let symbols = symbols.max(END + 1);
        let select = |c: [u64; 2]| match config.parts {
            Parts::All => c[0] + c[1],
            Parts::Fit => c[0],
        };
        // Top level entries, then each lower level as marginals of the one above.
        let mut entries: Vec<Entries> = Vec::with_capacity(order + 1);
        let mut top = Entries { ids: Vec::new(), raw: Vec::new(), cont: Vec::new() };
        for (g, c) in grams.rows() {
            let n = select(c);
            if n > 0 {
                top.ids.extend_from_slice(g);
                top.raw.push(n);
                top.cont.push(n);
            }
        }
        entries.push(top);
        let lower_levels = if config.smoothing == Smoothing::AddOne { 0 } else { order };
        for k in (0..lower_levels).rev() {
            let above = entries.last().expect("top pushed");
            let width = k + 2;
            let mut map: FxHashMap<&[u32], (u64, u64)> = FxHashMap::default();
            for (i, g) in above.ids.chunks_exact(width).enumerate() {
                let e = map.entry(&g[1..]).or_insert((0, 0));
                e.0 += above.raw[i];
                e.1 += 1;
            }
            let mut rows: Vec<(&[u32], (u64, u64))> = map.into_iter().collect();
            rows.sort_unstable_by(|a, b| a.0.cmp(b.0));
            let mut level = Entries { ids: Vec::new(), raw: Vec::new(), cont: Vec::new() };
            for (g, (raw, cont)) in rows {
                level.ids.extend_from_slice(g);
                level.raw.push(raw);
                level.cont.push(cont);
            }
            entries.push(level);
        }
        entries.reverse(); // entries[k] = contexts of length k (for built levels)
        let first_built = order + 1 - entries.len();

        let mut chain = Chain {
            order,
            symbols,
            smoothing: config.smoothing,
            levels: Vec::with_capacity(order + 1),
            succ: Vec::new(),
            count: Vec::new(),
            prob: Vec::new(),
            alias: Vec::new(),
        };
        for k in 0..=order {
            if k < first_built {
                chain.levels.push(Level {
                    len: k,
                    discount: 0.0,
                    ctx: Vec::new(),
                    nodes: Vec::new(),
                    index: HashTable::new(),
                });
                continue;
            }
            let e = &entries[k - first_built];
            let counts: &[u64] =
                if k < order && config.smoothing == Smoothing::KneserNey { &e.cont } else { &e.raw };
            let level = chain.build_level(k, e, counts, config);
            chain.levels.push(level);
        }
        chain
    }

    fn build_level(&mut self, k: usize, e: &Entries, counts: &[u64], config: &ChainConfig) -> Level {
        let width = k + 1;
        let discount = match config.smoothing {
            Smoothing::KneserNey => config.discount.unwrap_or_else(|| estimate_discount(counts)),
            _ => 0.0,
        };
        let v = (self.symbols - 1) as f64;
        let mut level =
            Level { len: k, discount, ctx: Vec::new(), nodes: Vec::new(), index: HashTable::new() };
        let rows = counts.len();
        let mut i = 0;
        let mut weights: Vec<f64> = Vec::new();
        while i < rows {
            let ctx = &e.ids[i * width..i * width + k];
            let mut j = i;
            while j < rows && &e.ids[j * width..j * width + k] == ctx {
                j += 1;
            }
            let total: f64 = counts[i..j].iter().map(|&c| c as f64).sum();
            let types = (j - i) as f64;
            let (denom, gamma) = match config.smoothing {
                Smoothing::KneserNey => (total, (discount * types / total).min(1.0)),
                Smoothing::WittenBell => (total + types, types / (total + types)),
                Smoothing::AddOne => (total + v, v / (total + v)),
            };
            let start = self.succ.len() as u32;
            weights.clear();
            for (&gram_succ, &c) in
                e.ids[i * width..j * width].iter().skip(k).step_by(width).zip(&counts[i..j])
            {
                self.succ.push(gram_succ);
                self.count.push(c.min(u32::MAX as u64) as u32);
                weights.push((c as f64 - discount).max(0.0));
            }
            let n = weights.len();
            self.prob.resize(self.prob.len() + n, 1.0);
            self.alias.resize(self.alias.len() + n, 0);
            let s = start as usize;
            alias::build_into(&weights, &mut self.prob[s..s + n], &mut self.alias[s..s + n]);
            let node_index = level.nodes.len() as u32;
            level.nodes.push(Node { start, len: n as u32, denom, gamma });
            level.ctx.extend_from_slice(ctx);
            let lctx = &level.ctx;
            level.index.insert_unique(hash_ctx(ctx), node_index, |&x| {
                hash_ctx(&lctx[x as usize * k..(x as usize + 1) * k])
            });
            i = j;
        }
        level
    }

    pub fn order(&self) -> usize {
        self.order
    }

    /// Alphabet size.
    pub fn symbols(&self) -> u32 {
        self.symbols
    }

    pub fn smoothing(&self) -> Smoothing {
        self.smoothing
    }

    /// Kneser–Ney discount used at each level (context length 0..=order); zeros otherwise.
    pub fn discounts(&self) -> Vec<f64> {
        self.levels.iter().map(|l| l.discount).collect()
    }

    /// Number of stored transitions (context, successor) over all levels.
    pub fn transitions(&self) -> usize {
        self.succ.len()
    }

    /// Number of stored contexts over all levels.
    pub fn contexts(&self) -> usize {
        self.levels.iter().map(|l| l.nodes.len()).sum()
    }

    /// Approximate heap bytes held by the chain.
    pub fn heap_bytes(&self) -> usize {
        let per_level: usize = self
            .levels
            .iter()
            .map(|l| {
                l.ctx.capacity() * 4
                    + l.nodes.capacity() * std::mem::size_of::<Node>()
                    + l.index.capacity() * 5
            })
            .sum();
        per_level
            + self.succ.capacity() * 4
            + self.count.capacity() * 4
            + self.prob.capacity() * 4
            + self.alias.capacity() * 4
    }

    /// The last `order` symbols of `history`, left-padded with [`BEGIN`].
    #[inline]
    fn window<'a>(&self, history: &[u32], buf: &'a mut [u32; 16]) -> &'a [u32] {
        let k = self.order;
        let have = history.len().min(k);
        buf[..k - have].fill(BEGIN);
        buf[k - have..k].copy_from_slice(&history[history.len() - have..]);
        &buf[..k]
    }

    fn node(&self, window: &[u32], k: usize) -> Option<&Node> {
        self.levels[k].find(&window[self.order - k..])
    }

    /// Draws the next symbol after `history` (most recent last).
    #[inline]
    pub fn sample<R: Rng + ?Sized>(&self, history: &[u32], rng: &mut R) -> u32 {
        let mut buf = [0u32; 16];
        let window = self.window(history, &mut buf);
        for k in (0..=self.order).rev() {
            let Some(node) = self.node(window, k) else { continue };
            let coin = (rng.next_u64() >> 11) as f64 * (1.0 / (1u64 << 53) as f64);
            if coin >= node.gamma {
                let (s, n) = (node.start as usize, node.len as usize);
                let i = alias::draw(&self.prob[s..s + n], &self.alias[s..s + n], rng.next_u64());
                return self.succ[s + i];
            }
        }
        self.uniform(rng)
    }

    /// The deepest level whose context (the last symbols of `history`) was seen, with its node.
    fn longest_seen(&self, window: &[u32]) -> Option<(usize, &Node)> {
        (0..=self.order).rev().find_map(|k| self.node(window, k).map(|n| (k, n)))
    }

    /// Draws the next symbol from the maximum-likelihood distribution c(h,w)/c(h) of the
    /// longest context `h` of `history` seen in training (staying on learned transitions; the
    /// smoothing mass for unseen steps is not used). O(1): for Kneser–Ney the alias table over
    /// c−D is mixed with a uniform draw over the successors, since c/N = (c−D)/N + D/N.
    #[inline]
    pub fn sample_seen<R: Rng + ?Sized>(&self, history: &[u32], rng: &mut R) -> u32 {
        let mut buf = [0u32; 16];
        let window = self.window(history, &mut buf);
        let Some((k, node)) = self.longest_seen(window) else { return self.uniform(rng) };
        let (s, n) = (node.start as usize, node.len as usize);
        let d = self.levels[k].discount;
        if d > 0.0 {
            let coin = (rng.next_u64() >> 11) as f64 * (1.0 / (1u64 << 53) as f64);
            if coin * node.denom < d * n as f64 {
                let i = (((rng.next_u64() >> 32) * n as u64) >> 32) as usize;
                return self.succ[s + i];
            }
        }
        let i = alias::draw(&self.prob[s..s + n], &self.alias[s..s + n], rng.next_u64());
        self.succ[s + i]
    }

    /// The successors of the longest seen context of `history` with their maximum-likelihood
    /// probabilities, into `out` (sorted by symbol).
    pub fn seen_distribution(&self, history: &[u32], out: &mut Vec<(u32, f64)>) {
        out.clear();
        let mut buf = [0u32; 16];
        let window = self.window(history, &mut buf);
        let Some((_, node)) = self.longest_seen(window) else { return };
        let (s, n) = (node.start as usize, node.len as usize);
        let total: f64 = self.count[s..s + n].iter().map(|&c| c as f64).sum();
        out.extend((s..s + n).map(|i| (self.succ[i], self.count[i] as f64 / total)));
    }

    /// The same distribution as [`Chain::sample`], drawn by a cumulative linear scan over each
    /// context's successors: the baseline the alias method is measured against.
    pub fn sample_linear<R: Rng + ?Sized>(&self, history: &[u32], rng: &mut R) -> u32 {
        let mut buf = [0u32; 16];
        let window = self.window(history, &mut buf);
        for k in (0..=self.order).rev() {
            let Some(node) = self.node(window, k) else { continue };
            let coin = (rng.next_u64() >> 11) as f64 * (1.0 / (1u64 << 53) as f64);
            if coin >= node.gamma {
                let d = self.levels[k].discount;
                let (s, n) = (node.start as usize, node.len as usize);
                let total: f64 = self.count[s..s + n].iter().map(|&c| (c as f64 - d).max(0.0)).sum();
                let mut target = (rng.next_u64() >> 11) as f64 * (1.0 / (1u64 << 53) as f64) * total;
                for i in s..s + n {
                    target -= (self.count[i] as f64 - d).max(0.0);
                    if target < 0.0 {
                        return self.succ[i];
                    }
                }
                return self.succ[s + n - 1];
            }
        }
        self.uniform(rng)
    }

    fn uniform<R: Rng + ?Sized>(&self, rng: &mut R) -> u32 {
        let n = (self.symbols - 1) as u64;
        1 + (((rng.next_u64() >> 32) * n) >> 32) as u32
    }

    fn alpha(&self, node: &Node, discount: f64, w: u32) -> f64 {
        let (s, n) = (node.start as usize, node.len as usize);
        match self.succ[s..s + n].binary_search(&w) {
            Ok(i) => (self.count[s + i] as f64 - discount).max(0.0) / node.denom,
            Err(_) => 0.0,
        }
    }

    /// P(w | history).
    pub fn prob(&self, history: &[u32], w: u32) -> f64 {
        if w == BEGIN || w >= self.symbols {
            return 0.0;
        }
        let mut buf = [0u32; 16];
        let window = self.window(history, &mut buf);
        let (mut p, mut mult) = (0.0, 1.0);
        for k in (0..=self.order).rev() {
            if let Some(node) = self.node(window, k) {
                p += mult * self.alpha(node, self.levels[k].discount, w);
                mult *= node.gamma;
            }
        }
        p + mult / (self.symbols - 1) as f64
    }

    /// α and γ at every level for P(w | history), longest context first.
    pub fn terms(&self, history: &[u32], w: u32) -> Vec<LevelTerm> {
        let mut buf = [0u32; 16];
        let window = self.window(history, &mut buf);
        (0..=self.order)
            .rev()
            .map(|k| match self.node(window, k) {
                Some(node) => LevelTerm {
                    context_len: k,
                    seen: true,
                    alpha: self.alpha(node, self.levels[k].discount, w),
                    gamma: node.gamma,
                },
                None => LevelTerm { context_len: k, seen: false, alpha: 0.0, gamma: 1.0 },
            })
            .collect()
    }

    /// The full next-step distribution after `history`: every symbol with an explicit term at
    /// some level, with its probability (sorted by symbol), into `out`; returns the probability
    /// each of the remaining predictable symbols has (they all share the uniform floor).
    pub fn distribution(&self, history: &[u32], out: &mut Vec<(u32, f64)>) -> f64 {
        out.clear();
        let mut buf = [0u32; 16];
        let window = self.window(history, &mut buf);
        let mut mult = 1.0;
        for k in (0..=self.order).rev() {
            if let Some(node) = self.node(window, k) {
                let d = self.levels[k].discount;
                let (s, n) = (node.start as usize, node.len as usize);
                for i in s..s + n {
                    let a = (self.count[i] as f64 - d).max(0.0) / node.denom;
                    out.push((self.succ[i], mult * a));
                }
                mult *= node.gamma;
            }
        }
        out.sort_unstable_by_key(|e| e.0);
        out.dedup_by(|b, a| {
            if a.0 == b.0 {
                a.1 += b.1;
                true
            } else {
                false
            }
        });
        let floor = mult / (self.symbols - 1) as f64;
        for e in out.iter_mut() {
            e.1 += floor;
        }
        floor
    }

    /// The probability each symbol without an explicit term gets after `history` (the uniform
    /// floor after all backoff weights). Also the probability of a symbol the model never saw.
    pub fn floor(&self, history: &[u32]) -> f64 {
        let mut buf = [0u32; 16];
        let window = self.window(history, &mut buf);
        let mult: f64 = (0..=self.order).filter_map(|k| self.node(window, k)).map(|n| n.gamma).product();
        mult / (self.symbols - 1) as f64
    }

    /// Maximum-likelihood estimate c(h,w)/c(h) at the top order (counts as stored; for
    /// Kneser–Ney lower levels are not involved). `None` when the context was never seen.
    pub fn ml_prob(&self, history: &[u32], w: u32) -> Option<f64> {
        let mut buf = [0u32; 16];
        let window = self.window(history, &mut buf);
        let node = self.node(window, self.order)?;
        let (s, n) = (node.start as usize, node.len as usize);
        let total: f64 = self.count[s..s + n].iter().map(|&c| c as f64).sum();
        let c = self.succ[s..s + n].binary_search(&w).map_or(0.0, |i| self.count[s + i] as f64);
        Some(c / total)
    }

    /// Seen successors of exactly this context, with the counts its level uses (raw at the top
    /// level; for Kneser–Ney, continuation counts below). The level is the context's length;
    /// empty when that level does not store the context or the context is longer than the order.
    pub fn successors(&self, context: &[u32]) -> Vec<(u32, u64)> {
        let Some(node) = self.levels.get(context.len()).and_then(|l| l.find(context)) else {
            return Vec::new();
        };
        let (s, n) = (node.start as usize, node.len as usize);
        (s..s + n).map(|i| (self.succ[i], self.count[i] as u64)).collect()
    }

    /// The contexts stored at level `len` (contexts of exactly `len` symbols), each with its
    /// seen successors (sorted). Empty for a level that is not built. At the top level these
    /// pairs are the chain's learned transitions: the distinct (order+1)-grams of the training
    /// sequences, padding and end included.
    pub fn contexts_of_len(&self, len: usize) -> impl Iterator<Item = (&[u32], &[u32])> + '_ {
        let level = self.levels.get(len);
        level.into_iter().flat_map(move |l| {
            l.nodes.iter().enumerate().map(move |(i, node)| {
                let (s, n) = (node.start as usize, node.len as usize);
                (&l.ctx[i * l.len..(i + 1) * l.len], &self.succ[s..s + n])
            })
        })
    }

    /// The next-step distribution after exactly `context` (not padded: only `context` and its
    /// suffixes are looked up, longest first, as [`Chain::prob`] does with a padded window), split
    /// by where the mass comes from:
    ///
    /// ```text
    /// P(w) = floor + base · empty_context_alpha()[w] + upper(w)
    /// ```
    ///
    /// `upper` receives the terms of levels with non-empty contexts (sorted by symbol, merged);
    /// returns `(floor, base)`. The split lets algorithms that visit many contexts share the dense
    /// empty-context part and touch only the sparse rest: O(order + successors) per call.
    pub fn split_distribution(&self, context: &[u32], upper: &mut Vec<(u32, f64)>) -> (f64, f64) {
        upper.clear();
        let top = context.len().min(self.order);
        let context = &context[context.len() - top..];
        let mut mult = 1.0;
        let mut base = 0.0;
        for k in (0..=top).rev() {
            let Some(node) = self.levels[k].find(&context[top - k..]) else { continue };
            if k == 0 {
                base = mult;
            } else {
                let d = self.levels[k].discount;
                let (s, n) = (node.start as usize, node.len as usize);
                for i in s..s + n {
                    let a = (self.count[i] as f64 - d).max(0.0) / node.denom;
                    upper.push((self.succ[i], mult * a));
                }
            }
            mult *= node.gamma;
        }
        upper.sort_unstable_by_key(|e| e.0);
        upper.dedup_by(|b, a| {
            if a.0 == b.0 {
                a.1 += b.1;
                true
            } else {
                false
            }
        });
        (mult / (self.symbols - 1) as f64, base)
    }

    /// α of every symbol at the empty context (dense, indexed by symbol); all zero when the
    /// empty-context level is not built (add-one smoothing).
    pub fn empty_context_alpha(&self) -> Vec<f64> {
        let mut out = vec![0.0; self.symbols as usize];
        if let Some(node) = self.levels[0].find(&[]) {
            let d = self.levels[0].discount;
            let (s, n) = (node.start as usize, node.len as usize);
            for i in s..s + n {
                out[self.succ[i] as usize] = (self.count[i] as f64 - d).max(0.0) / node.denom;
            }
        }
        out
    }
}

fn estimate_discount(counts: &[u64]) -> f64 {
    let n1 = counts.iter().filter(|&&c| c == 1).count() as f64;
    let n2 = counts.iter().filter(|&&c| c == 2).count() as f64;
    if n1 + 2.0 * n2 == 0.0 {
        return 0.5;
    }
    (n1 / (n1 + 2.0 * n2)).clamp(0.1, 0.9)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::chain::{GramCounter, Part};

    fn chain(seqs: &[&[u32]], order: usize, smoothing: Smoothing, symbols: u32) -> Chain {
        let mut c = GramCounter::new(order);
        for s in seqs {
            c.add_sequence(s, Part::Fit);
        }
        Chain::build(&c.into_grams(|s| s), symbols, &ChainConfig { smoothing, ..Default::default() })
    }

    #[test]
    fn probabilities_sum_to_one_for_every_method() {
        let seqs: &[&[u32]] = &[&[2, 3, 4], &[2, 4, 4, 3], &[3, 2]];
        for smoothing in [Smoothing::KneserNey, Smoothing::WittenBell, Smoothing::AddOne] {
            let c = chain(seqs, 2, smoothing, 7);
            for history in [&[][..], &[2], &[2, 3], &[6, 6], &[4, 4]] {
                let total: f64 = (1..7).map(|w| c.prob(history, w)).sum();
                assert!((total - 1.0).abs() < 1e-12, "{smoothing:?} {history:?}: {total}");
                let mut dist = Vec::new();
                let floor = c.distribution(history, &mut dist);
                let listed: f64 = dist.iter().map(|e| e.1).sum();
                let rest = (6 - dist.len()) as f64 * floor;
                assert!((listed + rest - 1.0).abs() < 1e-12);
                for (w, p) in dist {
                    assert!((p - c.prob(history, w)).abs() < 1e-15);
                }
            }
        }
    }

    #[test]
    fn split_distribution_adds_up_to_prob_for_every_method() {
        let seqs: &[&[u32]] = &[&[2, 3, 4], &[2, 4, 4, 3], &[3, 2]];
        for smoothing in [Smoothing::KneserNey, Smoothing::WittenBell, Smoothing::AddOne] {
            let c = chain(seqs, 2, smoothing, 7);
            let base_alpha = c.empty_context_alpha();
            let mut upper = Vec::new();
            // Contexts of full length equal padded histories; the seen ones are exact states.
            for (context, history) in
                [(&[0, 0][..], &[][..]), (&[0, 2], &[2]), (&[2, 3], &[2, 3]), (&[6, 6], &[6, 6])]
            {
                let (floor, base) = c.split_distribution(context, &mut upper);
                for w in 1..7u32 {
                    let explicit = upper.iter().find(|e| e.0 == w).map_or(0.0, |e| e.1);
                    let p = floor + base * base_alpha[w as usize] + explicit;
                    assert!((p - c.prob(history, w)).abs() < 1e-12, "{smoothing:?} {context:?} {w}");
                }
            }
        }
        let c = chain(seqs, 2, Smoothing::KneserNey, 7);
        let top: Vec<(Vec<u32>, Vec<u32>)> =
            c.contexts_of_len(2).map(|(ctx, succ)| (ctx.to_vec(), succ.to_vec())).collect();
        assert!(top.contains(&(vec![0, 0], vec![2, 3])));
        // After 2: 3 and 4 (each preceded only by the padding) and the end (preceded by 3), so
        // every continuation count is 1 although 2→4 and 2→3 occur once each and 2→end once.
        assert_eq!(c.successors(&[2]), vec![(1, 1), (3, 1), (4, 1)], "continuation counts at level 1");
    }

    #[test]
    fn unseen_steps_keep_probability() {
        let c = chain(&[&[2, 3], &[2, 3]], 1, Smoothing::KneserNey, 5);
        assert!(c.prob(&[2], 4) > 0.0);
        assert!(c.prob(&[2], 3) > c.prob(&[2], 4));
    }

    #[test]
    fn linear_and_alias_samplers_agree_in_distribution() {
        use rand::SeedableRng;
        let c = chain(&[&[2, 3, 4, 2, 2, 3], &[4, 4, 2]], 2, Smoothing::KneserNey, 6);
        let mut rng = rand_xoshiro::Xoshiro256PlusPlus::seed_from_u64(3);
        let (mut a, mut b) = ([0u32; 6], [0u32; 6]);
        for _ in 0..200_000 {
            a[c.sample(&[2, 3], &mut rng) as usize] += 1;
            b[c.sample_linear(&[2, 3], &mut rng) as usize] += 1;
        }
        for w in 1..6u32 {
            let p = c.prob(&[2, 3], w);
            for seen in [a[w as usize], b[w as usize]] {
                assert!((seen as f64 / 200_000.0 - p).abs() < 0.005, "{w}: {seen} vs {p}");
            }
        }
        assert_eq!(a[0] + b[0], 0, "BEGIN is never drawn");
    }

    #[test]
    fn seen_sampling_follows_longest_context_counts() {
        use rand::SeedableRng;
        for smoothing in [Smoothing::KneserNey, Smoothing::WittenBell] {
            // After [2, 3]: 4 twice, 5 once, END once.
            let c = chain(&[&[2, 3, 4], &[2, 3, 4], &[2, 3, 5], &[2, 3]], 2, smoothing, 7);
            let mut rng = rand_xoshiro::Xoshiro256PlusPlus::seed_from_u64(9);
            let mut seen = [0u32; 7];
            for _ in 0..100_000 {
                seen[c.sample_seen(&[2, 3], &mut rng) as usize] += 1;
            }
            for (w, p) in [(4, 0.5), (5, 0.25), (1, 0.25)] {
                assert!((seen[w] as f64 / 100_000.0 - p).abs() < 0.01, "{smoothing:?} {w}: {}", seen[w]);
            }
            assert_eq!(seen[2] + seen[3] + seen[6], 0, "never an unseen step");
            // Unseen context [6]: falls back to the longest seen suffix (the empty context).
            assert_ne!(c.sample_seen(&[6], &mut rng), 0);
        }
    }
}
