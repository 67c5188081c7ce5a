//! Learned session-level transitions, as a graph.
//!
//! A *transition* is a distinct top-order n-gram of the session chain seen in training: a
//! context of `order` session symbols (left-padded with the session-begin symbol) followed by
//! the next symbol, which may be the session end. For an order-2 chain, `(begin, begin) → login`,
//! `(login, list) → view` and `(view, logout) → end` are three transitions. These are exactly the
//! top-level entries of the chain (fit and check parts together), so their number is the lower
//! bound on the steps (messages plus one end per trace) any set of traces needs to take all of
//! them.
//!
//! States are the top-order contexts; an edge leads from a context to the context after its
//! symbol. Because every context seen in training was followed by something, every edge's
//! target is again a state, and from every state some path of edges reaches the end.

use rustc_hash::FxHashMap;

use crate::chain::Chain;
use crate::symbol::{BEGIN, END};

/// Marks an edge to the session end (no target state).
const NO_STATE: u32 = u32::MAX;

/// The learned transitions of a session chain. Edge ids are dense: `0..len()`.
#[derive(Debug, Clone)]
pub struct Transitions {
    order: usize,
    states: Vec<Box<[u32]>>,
    index: FxHashMap<Box<[u32]>, u32>,
    /// Edges of state `i` are `first[i]..first[i + 1]`, sorted by symbol.
    first: Vec<u32>,
    symbol: Vec<u32>,
    target: Vec<u32>,
    /// Edges into each state (non-end edges only): `pred_first[i]..pred_first[i + 1]` of `pred`.
    pred_first: Vec<u32>,
    pred: Vec<u32>,
}

/// The last `order` symbols of `history`, left-padded with the begin symbol.
pub fn window(order: usize, history: &[u32]) -> Vec<u32> {
    let have = history.len().min(order);
    let mut w = vec![BEGIN; order - have];
    w.extend_from_slice(&history[history.len() - have..]);
    w
}

impl Transitions {
    /// The transitions of `chain` (its top level).
    pub fn of(chain: &Chain) -> Transitions {
        let order = chain.order();
        let mut rows: Vec<(Box<[u32]>, Vec<u32>)> =
            chain.contexts_of_len(order).map(|(c, s)| (c.into(), s.to_vec())).collect();
        rows.sort_unstable_by(|a, b| a.0.cmp(&b.0));
        let index: FxHashMap<Box<[u32]>, u32> =
            rows.iter().enumerate().map(|(i, r)| (r.0.clone(), i as u32)).collect();
        let (mut first, mut symbol, mut target) = (vec![0u32], Vec::new(), Vec::new());
        let mut next = vec![0u32; order];
        for (ctx, succ) in &rows {
            for &s in succ {
                symbol.push(s);
                let t = if s == END || order == 0 {
                    NO_STATE
                } else {
                    next[..order - 1].copy_from_slice(&ctx[1..]);
                    next[order - 1] = s;
                    index.get(next.as_slice()).copied().unwrap_or(NO_STATE)
                };
                target.push(t);
            }
            first.push(symbol.len() as u32);
        }
        let n = rows.len();
        let mut indegree = vec![0u32; n + 1];
        for &t in &target {
            if t != NO_STATE {
                indegree[t as usize + 1] += 1;
            }
        }
        for i in 0..n {
            indegree[i + 1] += indegree[i];
        }
        let pred_first = indegree.clone();
        let mut fill = indegree;
        let mut pred = vec![0u32; pred_first[n] as usize];
        for state in 0..n {
            for e in first[state]..first[state + 1] {
                let t = target[e as usize];
                if t != NO_STATE {
                    pred[fill[t as usize] as usize] = e;
                    fill[t as usize] += 1;
                }
            }
        }
        let states = rows.into_iter().map(|r| r.0).collect();
        Transitions { order, states, index, first, symbol, target, pred_first, pred }
    }

    pub fn order(&self) -> usize {
        self.order
    }

    /// Number of transitions (edges).
    pub fn len(&self) -> usize {
        self.symbol.len()
    }

    pub fn is_empty(&self) -> bool {
        self.symbol.is_empty()
    }

    /// Number of states (top-order contexts).
    pub fn state_count(&self) -> usize {
        self.states.len()
    }

    /// The state every session starts in (the all-begin context), if any session was learned.
    pub fn start(&self) -> Option<u32> {
        self.state_of(&vec![BEGIN; self.order])
    }

    /// The state of a context of exactly `order` symbols.
    pub fn state_of(&self, context: &[u32]) -> Option<u32> {
        self.index.get(context).copied()
    }

    /// The state after `history` (padded), if that context was seen in training.
    pub fn state_after(&self, history: &[u32]) -> Option<u32> {
        self.state_of(&window(self.order, history))
    }

    /// The context of a state.
    pub fn context(&self, state: u32) -> &[u32] {
        &self.states[state as usize]
    }

    /// Edge ids leaving `state`, sorted by symbol.
    pub fn edges(&self, state: u32) -> std::ops::Range<usize> {
        self.first[state as usize] as usize..self.first[state as usize + 1] as usize
    }

    /// Edge ids entering `state` (end edges have no target and enter nothing).
    pub fn edges_into(&self, state: u32) -> &[u32] {
        &self.pred[self.pred_first[state as usize] as usize..self.pred_first[state as usize + 1] as usize]
    }

    /// The symbol an edge emits ([`END`] for an end edge).
    pub fn symbol(&self, edge: usize) -> u32 {
        self.symbol[edge]
    }

    /// The state an edge leads to; `None` for an end edge.
    pub fn target(&self, edge: usize) -> Option<u32> {
        let t = self.target[edge];
        (t != NO_STATE).then_some(t)
    }

    /// The state an edge leaves.
    pub fn source(&self, edge: usize) -> u32 {
        (self.first.partition_point(|&f| f as usize <= edge) - 1) as u32
    }

    /// The edge from `state` emitting `symbol`.
    pub fn find(&self, state: u32, symbol: u32) -> Option<usize> {
        let r = self.edges(state);
        self.symbol[r.clone()].binary_search(&symbol).ok().map(|i| r.start + i)
    }

    /// The learned transitions a session takes: one per message and, if `ended`, one for the
    /// end. Steps from a context never seen in training take no learned transition.
    pub fn taken(&self, symbols: &[u32], ended: bool) -> Vec<usize> {
        let steps = symbols.len() + usize::from(ended);
        (0..steps)
            .filter_map(|i| {
                let next = symbols.get(i).copied().unwrap_or(END);
                self.state_after(&symbols[..i]).and_then(|s| self.find(s, next))
            })
            .collect()
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::chain::{ChainConfig, GramCounter, Part};

    pub(crate) fn chain_of(seqs: &[&[u32]], order: usize, symbols: u32) -> Chain {
        let mut c = GramCounter::new(order);
        for s in seqs {
            c.add_sequence(s, Part::Fit);
        }
        Chain::build(&c.into_grams(|s| s), symbols, &ChainConfig::default())
    }

    #[test]
    fn transitions_are_the_distinct_top_order_grams() {
        // Order 2 over [3, 4, 4] and [3, 5]: grams (0,0,3) (0,3,4) (3,4,4) (4,4,1) (0,3,5) (3,5,1).
        let chain = chain_of(&[&[3, 4, 4], &[3, 5], &[3, 5]], 2, 6);
        let t = Transitions::of(&chain);
        assert_eq!(t.len(), 6);
        assert_eq!(t.state_count(), 5, "(0,0) (0,3) (3,4) (4,4) (3,5)");
        let start = t.start().unwrap();
        let e = t.find(start, 3).unwrap();
        let after = t.target(e).unwrap();
        assert_eq!(t.context(after), &[0, 3]);
        assert_eq!(t.source(e), start);
        assert_eq!(t.taken(&[3, 5], true).len(), 3);
        assert_eq!(t.taken(&[3, 4, 4], true).len(), 4);
        // 3 → 3 was never seen: that step and the ones after it take no learned transition
        // until the context is a learned one again.
        assert_eq!(t.taken(&[3, 3], true).len(), 1);
        for s in 0..t.state_count() as u32 {
            for &e in t.edges_into(s) {
                assert_eq!(t.target(e as usize), Some(s));
            }
        }
    }
}
