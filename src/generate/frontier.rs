//! Frontier mode: walks that prefer the learned transitions this run has visited least.
//!
//! The generator keeps a visit count per learned transition (see [`super::transitions`]) for
//! the whole run. While the session is in a learned context, the next step is one of that
//! context's learned transitions, chosen by, in order:
//!
//! 1. unvisited transitions first;
//! 2. otherwise the transition whose target is fewest steps away from some context that still
//!    has an unvisited transition (a breadth-first search over learned transitions, refreshed
//!    when it may be out of date);
//! 3. otherwise the least visited;
//!
//! and among equals, at random with the chain's probabilities (tempered). Outside learned
//! contexts the step is drawn as in plausible mode. A walk therefore
//! heads for uncovered parts of the model and ends when taking an end transition is the best
//! choice, or at the message limit. Output depends on the sequence of walks asked for, which
//! is deterministic for a seed.

use std::collections::VecDeque;

use rand::{Rng, RngExt};

use super::transitions::Transitions;
use super::walk::{make_step, sample_plausible};
use super::{GenOptions, Walk};
use crate::model::Compiled;
use crate::symbol::END;

const FAR: u32 = u32::MAX;

/// Run-long state of frontier mode.
#[derive(Debug, Clone)]
pub struct Frontier {
    graph: Transitions,
    visits: Vec<u32>,
    /// Per state: learned steps to the nearest state with an unvisited transition.
    distance: Vec<u32>,
    stale: bool,
}

impl Frontier {
    pub fn new(model: &Compiled) -> Frontier {
        let graph = Transitions::of(&model.session);
        let visits = vec![0; graph.len()];
        let distance = vec![FAR; graph.state_count()];
        Frontier { graph, visits, distance, stale: true }
    }

    /// The learned transitions.
    pub fn transitions(&self) -> &Transitions {
        &self.graph
    }

    /// Distinct learned transitions taken so far in this run.
    pub fn covered(&self) -> usize {
        self.visits.iter().filter(|&&v| v > 0).count()
    }

    fn refresh(&mut self) {
        self.distance.fill(FAR);
        let mut queue = VecDeque::new();
        for s in 0..self.graph.state_count() as u32 {
            if self.graph.edges(s).any(|e| self.visits[e] == 0) {
                self.distance[s as usize] = 0;
                queue.push_back(s);
            }
        }
        while let Some(s) = queue.pop_front() {
            let d = self.distance[s as usize] + 1;
            for &e in self.graph.edges_into(s) {
                let from = self.graph.source(e as usize);
                if self.distance[from as usize] == FAR {
                    self.distance[from as usize] = d;
                    queue.push_back(from);
                }
            }
        }
        self.stale = false;
    }

    fn key(&self, edge: usize) -> (u32, u32) {
        if self.visits[edge] == 0 {
            return (0, 0);
        }
        let reach = match self.graph.target(edge) {
            Some(t) => self.distance[t as usize].saturating_add(1),
            None => FAR,
        };
        (reach, self.visits[edge])
    }

    /// The next walk of the run.
    pub fn walk<R: Rng + ?Sized>(&mut self, model: &Compiled, options: &GenOptions, rng: &mut R) -> Walk {
        if self.stale {
            self.refresh();
        }
        let mut walk = Walk::default();
        let mut history: Vec<u32> = Vec::new();
        let mut scratch = Vec::new();
        let mut best: Vec<(usize, f64)> = Vec::new();
        let inv = 1.0 / options.temperature;
        while walk.steps.len() < options.max_messages {
            let s = match self.graph.state_after(&history) {
                Some(state) => {
                    let here_unvisited = self.graph.edges(state).any(|e| self.visits[e] == 0);
                    if !here_unvisited && self.stale {
                        self.refresh();
                    }
                    let min = self.graph.edges(state).map(|e| self.key(e)).min();
                    best.clear();
                    for e in self.graph.edges(state) {
                        if Some(self.key(e)) == min {
                            let p = model.session.prob(&history, self.graph.symbol(e)).powf(inv);
                            best.push((e, p));
                        }
                    }
                    let total: f64 = best.iter().map(|b| b.1).sum();
                    let mut target = rng.random::<f64>() * total;
                    let mut chosen = best.last().map(|b| b.0);
                    for &(e, p) in &best {
                        target -= p;
                        if target < 0.0 {
                            chosen = Some(e);
                            break;
                        }
                    }
                    match chosen {
                        Some(e) => {
                            if self.visits[e] == 0 {
                                self.stale = true;
                            }
                            self.visits[e] += 1;
                            self.graph.symbol(e)
                        }
                        None => {
                            sample_plausible(&model.session, &history, options.temperature, rng, &mut scratch)
                        }
                    }
                }
                None => sample_plausible(&model.session, &history, options.temperature, rng, &mut scratch),
            };
            let surprise = -model.session.prob(&history, s).log2();
            if s == END {
                walk.ended = true;
                break;
            }
            walk.steps.push(make_step(model, options, &history, s, surprise, rng, &mut scratch));
            history.push(s);
        }
        walk
    }
}
