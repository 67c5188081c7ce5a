//! Tour mode: a deterministic, small set of sessions that together take every learned
//! transition (see [`super::transitions`]) at least once, as in transition coverage of
//! model-based testing.
//!
//! # Fewest steps: a Chinese-postman flow
//!
//! Sessions are walks from the start context to an end transition. Taking every transition
//! once leaves some contexts with more arrivals than departures and others with fewer; the
//! extra steps that balance them, with a free "start a new session" edge from the end back to
//! the start, form a minimum-cost flow problem (the directed Chinese postman problem of
//! Edmonds & Johnson 1973, with the return edge added). It is solved exactly by successive
//! shortest paths with Dijkstra on reduced costs; an Eulerian circuit of the resulting
//! multigraph (Hierholzer's algorithm), cut at the return edges, gives the sessions. Their
//! total number of steps (messages plus one end per session) is the fewest any covering set of
//! sessions can have; [`Tour::optimal_steps`] records it.
//!
//! # The message limit
//!
//! Sessions longer than the message limit are dropped from that plan, and the transitions
//! only they took are covered greedily instead, one session at a time from the start: while
//! the current context has an untaken transition that still lets the session end within the
//! limit, take it (an end transition only when no other is left); otherwise walk the shortest
//! learned path to the nearest context with one; when none is reachable in the remaining
//! budget, walk the shortest path to an end. Transitions no session within the limit can take
//! are reported as uncovered, never silently dropped.
//!
//! Each session of m messages takes m + 1 transitions, so the number of transitions is a lower
//! bound on steps; the report puts the result beside it. Time: the flow costs one Dijkstra
//! search, O(T log S) for T transitions and S contexts, per augmentation (at most the total
//! imbalance); the greedy part one search per taken transition.

use std::collections::VecDeque;

use super::transitions::Transitions;

const FAR: u32 = u32::MAX;

/// A planned tour: sessions as session-symbol sequences (the end is implied).
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Tour {
    pub sessions: Vec<Vec<u32>>,
    /// Transitions no session could take within the message limit.
    pub uncovered: usize,
    /// The fewest steps (messages plus one end per session) that sessions without a length
    /// limit need to take every transition; `None` if the transitions cannot all be taken.
    pub optimal_steps: Option<u64>,
    /// Sessions added greedily because optimal ones were over the message limit (0: the plan
    /// has exactly `optimal_steps` steps).
    pub greedy_sessions: usize,
}

impl Tour {
    /// Messages plus one end per session.
    pub fn steps(&self) -> u64 {
        self.sessions.iter().map(|s| s.len() as u64 + 1).sum()
    }
}

/// Messages needed from each state to take an end transition (FAR if none).
fn distance_to_end(t: &Transitions) -> Vec<u32> {
    let mut dist = vec![FAR; t.state_count()];
    let mut queue = VecDeque::new();
    for s in 0..t.state_count() as u32 {
        if t.edges(s).any(|e| t.target(e).is_none()) {
            dist[s as usize] = 0;
            queue.push_back(s);
        }
    }
    while let Some(s) = queue.pop_front() {
        for &e in t.edges_into(s) {
            let from = t.source(e as usize) as usize;
            if dist[from] == FAR {
                dist[from] = dist[s as usize] + 1;
                queue.push_back(from as u32);
            }
        }
    }
    dist
}

/// Plans a tour with sessions of at most `max_messages` messages.
pub fn plan(t: &Transitions, max_messages: usize) -> Tour {
    let Some(start) = t.start() else {
        return Tour { sessions: Vec::new(), uncovered: t.len(), optimal_steps: None, greedy_sessions: 0 };
    };
    let mut taken = vec![false; t.len()];
    let mut sessions = Vec::new();
    let mut optimal_steps = None;
    if let Some(times) = postman(t, start) {
        optimal_steps = Some(times.iter().map(|&x| x as u64).sum());
        for s in euler_sessions(t, start, &times) {
            if s.len() <= max_messages {
                for e in t.taken(&s, true) {
                    taken[e] = true;
                }
                sessions.push(s);
            }
        }
    }
    let (more, uncovered) = greedy(t, start, max_messages, &mut taken);
    let greedy_sessions = more.len();
    sessions.extend(more);
    Tour { sessions, uncovered, optimal_steps, greedy_sessions }
}

/// How often each transition is taken in a cheapest covering set of sessions (each at least
/// once), or `None` if some transition cannot be part of a session.
fn postman(t: &Transitions, start: u32) -> Option<Vec<u32>> {
    const INF: i64 = i64::MAX / 4;
    let n = t.state_count();
    let (end, source, sink) = (n, n + 1, n + 2);
    let mut g = Residual::new(n + 3);
    let mut balance = vec![0i64; n + 1]; // arrivals − departures with every transition once
    let mut first_edge = Vec::with_capacity(t.len());
    for state in 0..n as u32 {
        for e in t.edges(state) {
            let to = t.target(e).map_or(end, |x| x as usize);
            first_edge.push(g.add(state as usize, to, INF, 1));
            balance[state as usize] -= 1;
            balance[to] += 1;
        }
    }
    g.add(end, start as usize, INF, 0);
    let mut need = 0;
    for (v, &b) in balance.iter().enumerate() {
        if b > 0 {
            g.add(source, v, b, 0);
            need += b;
        } else if b < 0 {
            g.add(v, sink, -b, 0);
        }
    }
    if g.min_cost_flow(source, sink) != need {
        return None;
    }
    Some(first_edge.iter().map(|&id| 1 + g.cap[id ^ 1] as u32).collect())
}

/// Sessions of an Eulerian circuit of the multigraph with each transition `times[e]` times and
/// as many start-again edges as end transitions taken (Hierholzer, iterative).
fn euler_sessions(t: &Transitions, start: u32, times: &[u32]) -> Vec<Vec<u32>> {
    let n = t.state_count();
    let end = n as u32;
    let restart = u32::MAX;
    let mut left: Vec<u32> = times.to_vec();
    let mut restarts: u64 = (0..t.len()).filter(|&e| t.target(e).is_none()).map(|e| times[e] as u64).sum();
    let mut cursor: Vec<usize> = (0..n as u32).map(|s| t.edges(s).start).collect();
    let mut stack: Vec<(u32, u32)> = vec![(start, restart)];
    let mut circuit: Vec<u32> = Vec::new();
    while let Some(&(v, arrived_by)) = stack.last() {
        let next = if v == end {
            (restarts > 0).then(|| {
                restarts -= 1;
                (start, restart)
            })
        } else {
            let range = t.edges(v);
            let c = &mut cursor[v as usize];
            while *c < range.end && left[*c] == 0 {
                *c += 1;
            }
            (*c < range.end).then(|| {
                left[*c] -= 1;
                (t.target(*c).unwrap_or(end), *c as u32)
            })
        };
        match next {
            Some(step) => stack.push(step),
            None => {
                stack.pop();
                if !stack.is_empty() {
                    circuit.push(arrived_by);
                }
            }
        }
    }
    circuit.reverse();
    let mut sessions = Vec::new();
    let mut current = Vec::new();
    for e in circuit {
        if e == restart {
            continue;
        }
        match t.target(e as usize) {
            Some(_) => current.push(t.symbol(e as usize)),
            None => sessions.push(std::mem::take(&mut current)),
        }
    }
    sessions
}

/// A residual graph for minimum-cost flow (edge `i ^ 1` is the reverse of edge `i`).
struct Residual {
    adjacency: Vec<Vec<usize>>,
    to: Vec<usize>,
    cap: Vec<i64>,
    cost: Vec<i64>,
}

impl Residual {
    fn new(nodes: usize) -> Residual {
        Residual { adjacency: vec![Vec::new(); nodes], to: Vec::new(), cap: Vec::new(), cost: Vec::new() }
    }

    fn add(&mut self, from: usize, to: usize, cap: i64, cost: i64) -> usize {
        let id = self.to.len();
        for (a, b, c, k) in [(from, to, cap, cost), (to, from, 0, -cost)] {
            self.adjacency[a].push(self.to.len());
            self.to.push(b);
            self.cap.push(c);
            self.cost.push(k);
        }
        id
    }

    /// Successive shortest paths with Dijkstra on reduced costs (all costs start non-negative,
    /// so zero potentials are valid); returns the flow sent.
    fn min_cost_flow(&mut self, source: usize, sink: usize) -> i64 {
        use std::cmp::Reverse;
        use std::collections::BinaryHeap;
        const UNSEEN: i64 = i64::MAX;
        let nodes = self.adjacency.len();
        let mut potential = vec![0i64; nodes];
        let mut dist = vec![UNSEEN; nodes];
        let mut via = vec![usize::MAX; nodes];
        let mut sent = 0;
        loop {
            dist.fill(UNSEEN);
            dist[source] = 0;
            let mut heap = BinaryHeap::from([Reverse((0i64, source))]);
            while let Some(Reverse((d, v))) = heap.pop() {
                if d > dist[v] {
                    continue;
                }
                for &id in &self.adjacency[v] {
                    if self.cap[id] == 0 {
                        continue;
                    }
                    let w = self.to[id];
                    let nd = d + self.cost[id] + potential[v] - potential[w];
                    if nd < dist[w] {
                        dist[w] = nd;
                        via[w] = id;
                        heap.push(Reverse((nd, w)));
                    }
                }
            }
            if dist[sink] == UNSEEN {
                return sent;
            }
            for v in 0..nodes {
                if dist[v] != UNSEEN {
                    potential[v] += dist[v];
                }
            }
            let mut push = i64::MAX;
            let mut v = sink;
            while v != source {
                push = push.min(self.cap[via[v]]);
                v = self.to[via[v] ^ 1];
            }
            let mut v = sink;
            while v != source {
                self.cap[via[v]] -= push;
                self.cap[via[v] ^ 1] += push;
                v = self.to[via[v] ^ 1];
            }
            sent += push;
        }
    }
}

/// Covers the transitions not yet `taken` greedily (see the module documentation); returns
/// the sessions and how many transitions stay uncovered.
fn greedy(t: &Transitions, start: u32, max_messages: usize, taken: &mut [bool]) -> (Vec<Vec<u32>>, usize) {
    let mut remaining = taken.iter().filter(|&&x| !x).count();
    let to_end = distance_to_end(t);
    if remaining == 0 || to_end[start as usize] as u64 > max_messages as u64 {
        return (Vec::new(), remaining);
    }
    // Invariant: messages so far + to_end[state] <= max_messages, so every session can end.
    let mut sessions = Vec::new();
    let max = max_messages as u64;
    // Whether edge `e`, taken after `len` messages, still lets the session end in time.
    let fits = |e: usize, len: usize| match t.target(e) {
        None => len as u64 <= max,
        Some(s) => to_end[s as usize] != FAR && len as u64 + 1 + to_end[s as usize] as u64 <= max,
    };
    while remaining > 0 {
        let before = remaining;
        let mut session: Vec<u32> = Vec::new();
        let mut state = start;
        loop {
            let here = t.edges(state).filter(|&e| !taken[e] && fits(e, session.len()));
            let pick = here.clone().find(|&e| t.target(e).is_some()).or_else(|| here.clone().next());
            if let Some(e) = pick {
                taken[e] = true;
                remaining -= 1;
                match t.target(e) {
                    Some(next) => {
                        session.push(t.symbol(e));
                        state = next;
                        continue;
                    }
                    None => break,
                }
            }
            let path = match nearest_untaken(t, state, session.len(), taken, &fits) {
                Some(path) => path,
                None => path_to_end(t, state, &to_end),
            };
            if path.is_empty() {
                break;
            }
            let mut ended = false;
            for e in path {
                if !taken[e] {
                    taken[e] = true;
                    remaining -= 1;
                }
                match t.target(e) {
                    Some(next) => {
                        session.push(t.symbol(e));
                        state = next;
                    }
                    None => ended = true,
                }
            }
            if ended {
                break;
            }
        }
        if remaining == before {
            break;
        }
        sessions.push(session);
    }
    (sessions, remaining)
}

/// Edges of the shortest learned path from `from` to a state with an untaken edge that fits
/// the budget (the path stops at that state; the caller takes the edge).
fn nearest_untaken(
    t: &Transitions,
    from: u32,
    len: usize,
    taken: &[bool],
    fits: &impl Fn(usize, usize) -> bool,
) -> Option<Vec<usize>> {
    let mut via: Vec<u32> = vec![FAR; t.state_count()];
    let mut depth: Vec<u32> = vec![FAR; t.state_count()];
    depth[from as usize] = 0;
    let mut queue = VecDeque::from([from]);
    while let Some(s) = queue.pop_front() {
        let d = depth[s as usize] as usize;
        if s != from && t.edges(s).any(|e| !taken[e] && fits(e, len + d)) {
            let mut path = Vec::with_capacity(d);
            let mut at = s;
            while at != from {
                let e = via[at as usize] as usize;
                path.push(e);
                at = t.source(e);
            }
            path.reverse();
            return Some(path);
        }
        for e in t.edges(s) {
            if let Some(next) = t.target(e)
                && depth[next as usize] == FAR
            {
                depth[next as usize] = d as u32 + 1;
                via[next as usize] = e as u32;
                queue.push_back(next);
            }
        }
    }
    None
}

/// Edges of a shortest path from `from` through an end transition.
fn path_to_end(t: &Transitions, from: u32, to_end: &[u32]) -> Vec<usize> {
    let mut path = Vec::new();
    let mut state = from;
    loop {
        if let Some(e) = t.edges(state).find(|&e| t.target(e).is_none()) {
            path.push(e);
            return path;
        }
        let want = to_end[state as usize].saturating_sub(1);
        let Some(e) = t.edges(state).find(|&e| t.target(e).is_some_and(|n| to_end[n as usize] == want))
        else {
            return path;
        };
        path.push(e);
        state = t.target(e).expect("checked");
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::chain::{Chain, ChainConfig, GramCounter, Part};

    fn graph(seqs: &[&[u32]], order: usize) -> Transitions {
        let mut c = GramCounter::new(order);
        for s in seqs {
            c.add_sequence(s, Part::Fit);
        }
        Transitions::of(&Chain::build(&c.into_grams(|s| s), 12, &ChainConfig::default()))
    }

    #[test]
    fn tour_takes_every_transition_and_each_session_is_a_learned_path() {
        let seqs: &[&[u32]] =
            &[&[3, 4, 5, 6], &[3, 4, 4, 4, 6], &[3, 7], &[8, 4, 5], &[3, 4, 9, 4, 6], &[10, 11, 10, 11]];
        for order in 1..=3 {
            let t = graph(seqs, order);
            let tour = plan(&t, 50);
            assert_eq!(tour.uncovered, 0);
            let mut seen = vec![false; t.len()];
            for s in &tour.sessions {
                let taken = t.taken(s, true);
                assert_eq!(taken.len(), s.len() + 1, "every step is learned: {s:?}");
                for e in taken {
                    seen[e] = true;
                }
            }
            assert!(seen.iter().all(|&b| b), "order {order}");
            assert_eq!(
                Some(tour.steps()),
                tour.optimal_steps,
                "no session hits the limit, so the plan is the flow's"
            );
            assert!(
                tour.steps() <= 2 * t.len() as u64,
                "order {order}: {} steps for {} transitions",
                tour.steps(),
                t.len()
            );
        }
    }

    #[test]
    fn the_flow_finds_the_fewest_steps() {
        // Two branches that merge: 3→4 and 5→4 need two sessions (6 steps for 5 transitions).
        let t = graph(&[&[3, 4], &[5, 4]], 1);
        let tour = plan(&t, 50);
        assert_eq!((t.len(), tour.steps(), tour.optimal_steps), (5, 6, Some(6)));
        // A loop 4→4 and two exits: sessions [3,4,4] and [3,6] (7 steps; 6 transitions).
        let t = graph(&[&[3, 4, 4], &[3, 6]], 1);
        let tour = plan(&t, 50);
        assert_eq!((t.len(), tour.steps()), (6, 7));
        // With a limit of 2 messages the flow's 3-message session is dropped, greedy is used.
        let tour = plan(&t, 2);
        assert_eq!(tour.uncovered, 1, "4→4 needs a session of 3 messages");
    }

    /// Every start→end path of an acyclic transition graph, as edge lists.
    fn all_paths(t: &Transitions) -> Vec<Vec<usize>> {
        let mut out = Vec::new();
        let mut stack = vec![(t.start().unwrap(), Vec::new())];
        while let Some((state, path)) = stack.pop() {
            for e in t.edges(state) {
                let mut longer = path.clone();
                longer.push(e);
                match t.target(e) {
                    Some(next) => stack.push((next, longer)),
                    None => out.push(longer),
                }
            }
        }
        out
    }

    #[test]
    fn the_flow_optimum_equals_brute_force_on_small_acyclic_models() {
        use rand::{RngExt, SeedableRng};
        let mut rng = rand_xoshiro::Xoshiro256PlusPlus::seed_from_u64(5);
        let mut checked = 0;
        for case in 0..200 {
            // Strictly increasing symbols make the graph acyclic, so all sessions can be listed.
            let seqs: Vec<Vec<u32>> = (0..rng.random_range(2..6))
                .map(|_| {
                    let mut s: Vec<u32> =
                        (0..rng.random_range(1..5)).map(|_| rng.random_range(3..12)).collect();
                    s.sort_unstable();
                    s.dedup();
                    s
                })
                .collect();
            let refs: Vec<&[u32]> = seqs.iter().map(|s| s.as_slice()).collect();
            let t = graph(&refs, 1 + case % 2);
            let paths = all_paths(&t);
            if paths.len() > 16 || t.len() > 64 {
                continue;
            }
            let masks: Vec<u64> = paths.iter().map(|p| p.iter().fold(0, |m, &e| m | 1 << e)).collect();
            let all = if t.len() == 64 { u64::MAX } else { (1u64 << t.len()) - 1 };
            let brute = (1u32..1 << paths.len())
                .filter(|set| {
                    (0..paths.len()).filter(|i| set & 1 << i != 0).fold(0, |m, i| m | masks[i]) == all
                })
                .map(|set| {
                    (0..paths.len()).filter(|i| set & 1 << i != 0).map(|i| paths[i].len() as u64).sum()
                })
                .min();
            let tour = plan(&t, 50);
            assert_eq!(tour.optimal_steps, brute, "case {case}: {seqs:?}");
            assert_eq!(Some(tour.steps()), brute, "case {case}");
            checked += 1;
        }
        assert!(checked > 100, "only {checked} cases were small enough");
    }

    #[test]
    fn a_short_limit_leaves_long_paths_uncovered_and_says_so() {
        let t = graph(&[&[3, 4, 5, 6, 7, 8]], 1);
        let tour = plan(&t, 3);
        assert_eq!(tour.sessions.len(), 0);
        assert_eq!(tour.uncovered, t.len());
        let tour = plan(&t, 6);
        assert_eq!((tour.sessions.len(), tour.uncovered), (1, 0));
    }
}
