//! Waypoints: sessions conditioned on visiting given templates in a given order.
//!
//! Exact sampling from the chain's conditional distribution
//!
//! ```text
//! P(s₁ … sₙ end | n ≤ L and W₁, …, W_m occur in s₁ … sₙ in this order)
//! ```
//!
//! by forward–backward, and its most probable member by Viterbi. Each Wᵢ is a set of session
//! symbols (one template, or all templates matching a pattern); "occur in order" means as a
//! subsequence, tracked by the usual automaton (state j = waypoints matched so far; greedy
//! leftmost matching decides containment exactly).
//!
//! # An exact, small state space
//!
//! With smoothing every symbol may follow every context, so the chain's raw state (the last
//! `order` symbols) has |V|^order values. But P(w | history) depends only on the *longest
//! suffix of the history's window that the chain stores as a context*: for interpolated
//! Kneser–Ney and Witten–Bell the stored contexts are closed under suffixes (lower levels are
//! marginals), so the levels consulted are exactly that suffix's and its suffixes'. Let S be
//! the stored contexts of all levels, closed under suffixes (add-one stores only the top level;
//! the closure adds the states that say "not a stored context"). If d = x·w is in S (w not the
//! begin symbol) then x is in S, because d was followed by something in training, so x was
//! followed by w. Hence the state after emitting w from state c is the longest x·w in S with x a
//! suffix of c: the states S with this transition function are an exact, deterministic
//! automaton for the chain. |S| is at most the number of stored contexts plus their suffixes.
//!
//! # Sparse transitions
//!
//! From state c, P(w | c) = floor(c) + base(c)·α₀(w) + upper(c, w) (see
//! [`Chain::split_distribution`]); `upper` is non-zero only for successors stored at the
//! non-empty suffixes of c, and the next state differs from the *default* (the one-symbol
//! context `w` if stored, else the empty context) only for symbols w with x·w in S for a
//! non-empty suffix x of c. Both sets are small. Every backward step therefore costs
//! O(|V| + Σ_c sparse(c)) per automaton state, not O(|S|·|V|): the dense part is shared through
//! two global sums (Σ β and Σ α₀·β over default successors) from which each state subtracts its
//! sparse symbols' default contributions.
//!
//! Memory: (L+1)·(m+1)·|S| probabilities (and as many symbols for Viterbi); [`Plan::new`]
//! refuses more than [`MAX_TABLE`] entries rather than exhaust memory.
//!
//! Viterbi's maximum over the dense part, (floor(c) + base(c)·α₀(w))·δ(w), is found without a
//! scan over |V|: two lists sorted by δ(w) and by α₀(w)·δ(w) are read in parallel with Fagin's
//! threshold algorithm (Fagin, Lotem & Naor 2003), which stops once no unread symbol can win.

use rand::{Rng, RngExt};
use rustc_hash::FxHashMap;

use super::GenError;
use crate::chain::Chain;
use crate::model::Compiled;
use crate::symbol::{BEGIN, END};
use crate::token::Token;

/// Largest forward–backward table, in entries.
pub const MAX_TABLE: usize = 1 << 24;

/// The chain as a deterministic automaton over its stored contexts (see module docs).
#[derive(Debug, Clone)]
pub struct StateSpace {
    symbols: u32,
    contexts: Vec<Box<[u32]>>,
    start: u32,
    floor: Vec<f64>,
    base: Vec<f64>,
    alpha0: Vec<f64>,
    default_next: Vec<u32>,
    sparse_first: Vec<u32>,
    sparse_symbol: Vec<u32>,
    sparse_prob: Vec<f64>,
    sparse_next: Vec<u32>,
}

impl StateSpace {
    pub fn new(chain: &Chain) -> StateSpace {
        let order = chain.order();
        let mut index: FxHashMap<Box<[u32]>, u32> = FxHashMap::default();
        let mut contexts: Vec<Box<[u32]>> = Vec::new();
        let mut add = |c: &[u32], index: &mut FxHashMap<Box<[u32]>, u32>| {
            for cut in 0..=c.len() {
                let suffix = &c[cut..];
                if index.contains_key(suffix) {
                    break; // its suffixes are there too
                }
                index.insert(suffix.into(), contexts.len() as u32);
                contexts.push(suffix.into());
            }
        };
        add(&[], &mut index);
        for len in (1..=order).rev() {
            for (c, _) in chain.contexts_of_len(len) {
                add(c, &mut index);
            }
        }
        let lookup = |c: &[u32]| index.get(c).copied();
        let empty = lookup(&[]).expect("added");
        let start_window = vec![BEGIN; order];
        let start = (0..=order).find_map(|cut| lookup(&start_window[cut..])).unwrap_or(empty);
        let symbols = chain.symbols();
        let alpha0 = chain.empty_context_alpha();
        let default_next: Vec<u32> = (0..symbols).map(|w| lookup(&[w]).unwrap_or(empty)).collect();
        // children[x] = symbols w with x·w in S (x non-empty).
        let mut children: FxHashMap<&[u32], Vec<u32>> = FxHashMap::default();
        for c in &contexts {
            if c.len() >= 2 && c[c.len() - 1] != BEGIN {
                children.entry(&c[..c.len() - 1]).or_default().push(c[c.len() - 1]);
            }
        }
        let n = contexts.len();
        let (mut floor, mut base) = (Vec::with_capacity(n), Vec::with_capacity(n));
        let mut sparse_first = vec![0u32];
        let (mut sparse_symbol, mut sparse_prob, mut sparse_next) = (Vec::new(), Vec::new(), Vec::new());
        let mut upper = Vec::new();
        let mut extra: Vec<u32> = Vec::new();
        let mut probe: Vec<u32> = Vec::with_capacity(order);
        for c in &contexts {
            let (f, b) = chain.split_distribution(c, &mut upper);
            floor.push(f);
            base.push(b);
            extra.clear();
            for cut in 0..c.len() {
                let x = &c[cut..];
                if x.len() < order
                    && let Some(ws) = children.get(x)
                {
                    extra.extend_from_slice(ws);
                }
            }
            extra.extend(upper.iter().map(|e| e.0));
            extra.sort_unstable();
            extra.dedup();
            for &w in &extra {
                if w == BEGIN || w >= symbols {
                    continue;
                }
                let explicit = upper.binary_search_by_key(&w, |e| e.0).map_or(0.0, |i| upper[i].1);
                let next = (1..=(c.len() + 1).min(order))
                    .rev()
                    .find_map(|l| {
                        probe.clear();
                        probe.extend_from_slice(&c[c.len() + 1 - l..]);
                        probe.push(w);
                        lookup(&probe)
                    })
                    .unwrap_or(empty);
                sparse_symbol.push(w);
                sparse_prob.push(f + b * alpha0[w as usize] + explicit);
                sparse_next.push(next);
            }
            sparse_first.push(sparse_symbol.len() as u32);
        }
        StateSpace {
            symbols,
            contexts,
            start,
            floor,
            base,
            alpha0,
            default_next,
            sparse_first,
            sparse_symbol,
            sparse_prob,
            sparse_next,
        }
    }

    /// Number of states.
    pub fn len(&self) -> usize {
        self.contexts.len()
    }

    pub fn is_empty(&self) -> bool {
        self.contexts.is_empty()
    }

    /// Number of sparse (state, symbol) entries.
    pub fn sparse_len(&self) -> usize {
        self.sparse_symbol.len()
    }

    /// The context a state stands for.
    pub fn context(&self, state: u32) -> &[u32] {
        &self.contexts[state as usize]
    }

    pub fn start(&self) -> u32 {
        self.start
    }

    fn sparse(&self, c: u32) -> std::ops::Range<usize> {
        self.sparse_first[c as usize] as usize..self.sparse_first[c as usize + 1] as usize
    }

    fn default_prob(&self, c: u32, w: u32) -> f64 {
        self.floor[c as usize] + self.base[c as usize] * self.alpha0[w as usize]
    }

    /// P(w | state) and the state after w.
    pub fn step(&self, c: u32, w: u32) -> (f64, u32) {
        let r = self.sparse(c);
        match self.sparse_symbol[r.clone()].binary_search(&w) {
            Ok(i) => (self.sparse_prob[r.start + i], self.sparse_next[r.start + i]),
            Err(_) => (self.default_prob(c, w), self.default_next[w as usize]),
        }
    }
}

/// Waypoint sets as membership tables over symbols.
#[derive(Debug, Clone)]
struct Automaton {
    sets: Vec<Vec<bool>>,
}

impl Automaton {
    fn new(waypoints: &[Vec<u32>], symbols: u32) -> Automaton {
        let sets = waypoints
            .iter()
            .map(|set| {
                let mut v = vec![false; symbols as usize];
                for &w in set {
                    if w != END && w != BEGIN && w < symbols {
                        v[w as usize] = true;
                    }
                }
                v
            })
            .collect();
        Automaton { sets }
    }

    fn len(&self) -> usize {
        self.sets.len()
    }

    #[inline]
    fn advance(&self, j: usize, w: u32) -> usize {
        if j < self.sets.len() && self.sets[j][w as usize] { j + 1 } else { j }
    }
}

/// Forward–backward tables for sampling, or Viterbi tables for the best session.
#[derive(Debug, Clone)]
pub struct Plan {
    space: StateSpace,
    automaton: Automaton,
    max_len: usize,
    /// β or δ at [(r·(m+1) + j)·|S| + c]: r messages may still be sent, j waypoints matched.
    table: Vec<f64>,
    /// Viterbi only: the maximising next symbol per entry.
    choice: Vec<u32>,
}

impl Plan {
    /// Tables for sessions of at most `max_len` messages through `waypoints` in order. `best`
    /// builds Viterbi tables instead of forward–backward ones.
    pub fn new(chain: &Chain, waypoints: &[Vec<u32>], max_len: usize, best: bool) -> Result<Plan, GenError> {
        let space = StateSpace::new(chain);
        let automaton = Automaton::new(waypoints, chain.symbols());
        if waypoints.iter().any(|w| w.is_empty()) {
            return Err(GenError::Options("a waypoint matches no template".into()));
        }
        if max_len < waypoints.len() {
            return Err(GenError::Options(format!(
                "{} waypoints cannot fit in sessions of at most {max_len} messages",
                waypoints.len()
            )));
        }
        let entries = (max_len + 1).saturating_mul(waypoints.len() + 1).saturating_mul(space.len());
        if entries > MAX_TABLE {
            return Err(GenError::Options(format!(
                "waypoint tables would hold {entries} entries ({} contexts × {} waypoints+1 × {} lengths), more than {MAX_TABLE}; lower --max-messages",
                space.len(),
                waypoints.len(),
                max_len + 1
            )));
        }
        let mut plan = Plan { space, automaton, max_len, table: vec![0.0; entries], choice: Vec::new() };
        if best {
            plan.choice = vec![END; entries];
            plan.viterbi();
        } else {
            plan.backward();
        }
        if plan.probability().is_nan() || plan.probability() <= 0.0 {
            return Err(GenError::Options("no session within the length bound visits the waypoints".into()));
        }
        Ok(plan)
    }

    fn at(&self, r: usize, j: usize, c: u32) -> usize {
        (r * (self.automaton.len() + 1) + j) * self.space.len() + c as usize
    }

    fn end_term(&self, c: u32, j: usize) -> f64 {
        if j == self.automaton.len() { self.space.step(c, END).0 } else { 0.0 }
    }

    fn backward(&mut self) {
        let (n, m) = (self.space.len(), self.automaton.len());
        let sp = &self.space;
        for j in 0..=m {
            for c in 0..n as u32 {
                let i = self.at(0, j, c);
                self.table[i] = self.end_term(c, j);
            }
        }
        let mut out = vec![0.0; n];
        for r in 1..=self.max_len {
            for j in 0..=m {
                let prev = |c: u32, j2: usize| self.table[self.at(r - 1, j2, c)];
                let (mut g, mut h) = (0.0, 0.0);
                for w in 1..sp.symbols {
                    if w == END {
                        continue;
                    }
                    let b = prev(sp.default_next[w as usize], self.automaton.advance(j, w));
                    g += b;
                    h += sp.alpha0[w as usize] * b;
                }
                for c in 0..n as u32 {
                    let (f, bm) = (sp.floor[c as usize], sp.base[c as usize]);
                    let mut v = self.end_term(c, j) + f * g + bm * h;
                    for k in sp.sparse(c) {
                        let w = sp.sparse_symbol[k];
                        if w == END {
                            continue;
                        }
                        let j2 = self.automaton.advance(j, w);
                        v -= sp.default_prob(c, w) * prev(sp.default_next[w as usize], j2);
                        v += sp.sparse_prob[k] * prev(sp.sparse_next[k], j2);
                    }
                    out[c as usize] = v.max(0.0);
                }
                let i = self.at(r, j, 0);
                self.table[i..i + n].copy_from_slice(&out);
            }
        }
    }

    fn viterbi(&mut self) {
        let (n, m) = (self.space.len(), self.automaton.len());
        for j in 0..=m {
            for c in 0..n as u32 {
                let i = self.at(0, j, c);
                self.table[i] = self.end_term(c, j);
            }
        }
        let symbols: Vec<u32> = (1..self.space.symbols).filter(|&w| w != END).collect();
        let mut by_y = symbols.clone();
        let mut by_xy = symbols;
        let mut y = vec![0.0; self.space.symbols as usize];
        let mut out = vec![(0.0, END); n];
        for r in 1..=self.max_len {
            for j in 0..=m {
                let sp = &self.space;
                let prev = |c: u32, j2: usize| self.table[self.at(r - 1, j2, c)];
                for &w in &by_y {
                    y[w as usize] = prev(sp.default_next[w as usize], self.automaton.advance(j, w));
                }
                let xy = |w: u32| sp.alpha0[w as usize] * y[w as usize];
                by_y.sort_unstable_by(|&a, &b| y[b as usize].total_cmp(&y[a as usize]).then(a.cmp(&b)));
                by_xy.sort_unstable_by(|&a, &b| xy(b).total_cmp(&xy(a)).then(a.cmp(&b)));
                for c in 0..n as u32 {
                    let mut best = (self.end_term(c, j), END);
                    let range = sp.sparse(c);
                    for k in range.clone() {
                        let w = sp.sparse_symbol[k];
                        if w == END {
                            continue;
                        }
                        let v = sp.sparse_prob[k] * prev(sp.sparse_next[k], self.automaton.advance(j, w));
                        if v > best.0 {
                            best = (v, w);
                        }
                    }
                    let listed = &sp.sparse_symbol[range];
                    let (f, bm) = (sp.floor[c as usize], sp.base[c as usize]);
                    for i in 0..by_y.len() {
                        for w in [by_y[i], by_xy[i]] {
                            if listed.binary_search(&w).is_err() {
                                let v = (f + bm * sp.alpha0[w as usize]) * y[w as usize];
                                if v > best.0 {
                                    best = (v, w);
                                }
                            }
                        }
                        let threshold = f * y[by_y[i] as usize] + bm * xy(by_xy[i]);
                        if best.0 >= threshold {
                            break;
                        }
                    }
                    out[c as usize] = best;
                }
                let i = self.at(r, j, 0);
                for (c, &(value, symbol)) in out.iter().enumerate() {
                    self.table[i + c] = value;
                    self.choice[i + c] = symbol;
                }
            }
        }
    }

    /// P(the constraint holds) for forward–backward tables; the best session's probability for
    /// Viterbi tables.
    pub fn probability(&self) -> f64 {
        self.table[self.at(self.max_len, 0, self.space.start())]
    }

    /// The state space the tables are over.
    pub fn space(&self) -> &StateSpace {
        &self.space
    }

    /// Draws one session (symbols, end excluded) from the conditional distribution.
    pub fn sample<R: Rng + ?Sized>(&self, rng: &mut R) -> Vec<u32> {
        let sp = &self.space;
        let (mut c, mut j) = (sp.start(), 0usize);
        let mut out = Vec::new();
        let mut weights = vec![0.0; sp.symbols as usize];
        for r in (0..=self.max_len).rev() {
            for w in 1..sp.symbols {
                weights[w as usize] = if w == END {
                    self.end_term(c, j)
                } else if r == 0 {
                    0.0
                } else {
                    let (p, next) = sp.step(c, w);
                    p * self.table[self.at(r - 1, self.automaton.advance(j, w), next)]
                };
            }
            let total: f64 = weights.iter().sum();
            let mut target = rng.random::<f64>() * total;
            let mut pick = END;
            for (w, &x) in weights.iter().enumerate() {
                if x > 0.0 {
                    pick = w as u32;
                    target -= x;
                    if target < 0.0 {
                        break;
                    }
                }
            }
            if pick == END {
                break;
            }
            j = self.automaton.advance(j, pick);
            c = sp.step(c, pick).1;
            out.push(pick);
        }
        out
    }

    /// The most probable session (Viterbi tables only; symbols, end excluded).
    pub fn best(&self) -> Vec<u32> {
        let (mut c, mut j) = (self.space.start(), 0usize);
        let mut out = Vec::new();
        for r in (1..=self.max_len).rev() {
            let w = self.choice.get(self.at(r, j, c)).copied().unwrap_or(END);
            if w == END {
                break;
            }
            out.push(w);
            j = self.automaton.advance(j, w);
            c = self.space.step(c, w).1;
        }
        out
    }

    /// Positions (0-based) where each waypoint is matched in `session` (greedy, leftmost).
    pub fn matches(&self, session: &[u32]) -> Vec<usize> {
        let mut j = 0;
        let mut at = Vec::new();
        for (i, &w) in session.iter().enumerate() {
            let next = self.automaton.advance(j, w);
            if next > j {
                at.push(i);
            }
            j = next;
        }
        at
    }
}

/// The printable text of a template: tokens in display form, slots as `{class}`.
pub fn template_text(model: &Compiled, symbol: u32) -> String {
    model
        .template(symbol)
        .unwrap_or_default()
        .iter()
        .filter_map(|&s| model.vocab.token(s))
        .map(Token::display)
        .collect()
}

/// The templates a `--through` argument names: a template's exact text (as `tracewalk show`
/// prints it), else a message (escaped like trace lines) whose template the model knows, else
/// every template whose text contains the argument.
///
/// Only templates that are symbols of the session chain count: those seen too rarely are folded
/// into its novel-message symbol and cannot be steered to one by one.
pub fn resolve(model: &Compiled, text: &str) -> Result<Vec<u32>, GenError> {
    let first = crate::symbol::FIRST_TEMPLATE;
    let in_chain = |t: &u32| model.template(*t).and_then(|tokens| model.template_symbol(tokens)) == Some(*t);
    let all: Vec<u32> = (first..first + model.templates.len() as u32).filter(in_chain).collect();
    if let Some(&t) = all.iter().find(|&&t| template_text(model, t) == text) {
        return Ok(vec![t]);
    }
    let mut folded = false;
    if let Ok(bytes) = crate::escape::unescape(text) {
        let mut scratch = crate::token::Tokenized::default();
        let known: Option<Vec<u32>> = model.symbols_of(&bytes, &mut scratch).into_iter().collect();
        if let Some(k) = known {
            if let Some(t) = model.template_symbol(&k) {
                return Ok(vec![t]);
            }
            folded = model.learned_template(&k).is_some();
        }
    }
    let matching: Vec<u32> = all.into_iter().filter(|&t| template_text(model, t).contains(text)).collect();
    if matching.is_empty() {
        let why =
            if folded { " (its template was seen too rarely to be a session-chain symbol)" } else { "" };
        return Err(GenError::Options(format!("--through `{text}` matches no learned template{why}")));
    }
    Ok(matching)
}

#[cfg(test)]
mod tests;
