use rand::SeedableRng;
use statrs::distribution::{ChiSquared, ContinuousCDF};

use super::*;
use crate::chain::{ChainConfig, GramCounter, Part, Smoothing};

fn chain(seqs: &[&[u32]], order: usize, smoothing: Smoothing, symbols: u32) -> Chain {
    let mut c = GramCounter::new(order);
    for s in seqs {
        c.add_sequence(s, Part::Fit);
    }
    Chain::build(&c.into_grams(|s| s), symbols, &ChainConfig { smoothing, ..Default::default() })
}

fn visits_in_order(session: &[u32], waypoints: &[Vec<u32>]) -> bool {
    let mut it = session.iter();
    waypoints.iter().all(|set| it.by_ref().any(|w| set.contains(w)))
}

/// Every session of at most `max_len` messages that visits the waypoints in order, with its
/// probability computed by `Chain::prob` on the full history: a computation that shares
/// nothing with the state space under test.
fn enumerate(chain: &Chain, waypoints: &[Vec<u32>], max_len: usize) -> Vec<(Vec<u32>, f64)> {
    let letters: Vec<u32> = (2..chain.symbols()).collect();
    let mut out = Vec::new();
    let mut frontier: Vec<(Vec<u32>, f64)> = vec![(Vec::new(), 1.0)];
    for _ in 0..=max_len {
        let mut next = Vec::new();
        for (s, p) in frontier {
            if visits_in_order(&s, waypoints) {
                out.push((s.clone(), p * chain.prob(&s, END)));
            }
            if s.len() < max_len {
                for &w in &letters {
                    let mut longer = s.clone();
                    longer.push(w);
                    next.push((longer, p * chain.prob(&s, w)));
                }
            }
        }
        frontier = next;
    }
    out
}

fn cases() -> Vec<(Chain, Vec<Vec<u32>>, usize)> {
    let seqs: &[&[u32]] = &[&[2, 3, 4], &[2, 4, 4, 3], &[3, 2], &[2, 3, 5, 3], &[4, 4]];
    vec![
        (chain(seqs, 2, Smoothing::KneserNey, 6), vec![vec![4], vec![3]], 4),
        (chain(seqs, 1, Smoothing::WittenBell, 6), vec![vec![3, 5], vec![2]], 4),
        (chain(seqs, 2, Smoothing::AddOne, 6), vec![vec![5]], 4),
        (chain(seqs, 3, Smoothing::KneserNey, 6), vec![], 3),
    ]
}

#[test]
fn total_probability_matches_enumeration() {
    for (c, w, len) in cases() {
        let plan = Plan::new(&c, &w, len, false).unwrap();
        let exact: f64 = enumerate(&c, &w, len).iter().map(|e| e.1).sum();
        assert!(
            (plan.probability() - exact).abs() < 1e-12 * exact.max(1e-300),
            "{} vs {exact}",
            plan.probability()
        );
    }
}

// Pearson's chi-squared goodness-of-fit test (NIST/SEMATECH e-Handbook of Statistical Methods,
// §1.3.5.15, from memory): bins with an expected count of at least 5, the rest pooled into one
// bin; statistic Σ(O−E)²/E against the chi-squared distribution with bins−1 degrees of freedom
// (statrs). Fixed seeds make the outcome deterministic; the threshold 0.001 is what the test
// would reject at if the sampler were wrong.
#[test]
fn sampling_matches_the_exact_conditional_distribution() {
    for (case, (c, w, len)) in cases().into_iter().enumerate() {
        let plan = Plan::new(&c, &w, len, false).unwrap();
        let exact = enumerate(&c, &w, len);
        let total: f64 = exact.iter().map(|e| e.1).sum();
        let draws = 20_000usize;
        let mut rng = rand_xoshiro::Xoshiro256PlusPlus::seed_from_u64(41 + case as u64);
        let mut seen: FxHashMap<Vec<u32>, usize> = FxHashMap::default();
        for _ in 0..draws {
            let s = plan.sample(&mut rng);
            assert!(s.len() <= len && visits_in_order(&s, &w), "case {case}: {s:?}");
            *seen.entry(s).or_default() += 1;
        }
        let (mut stat, mut bins) = (0.0, 0usize);
        let (mut pooled_o, mut pooled_e) = (0.0, 0.0);
        for (s, p) in &exact {
            let e = p / total * draws as f64;
            let o = seen.get(s).copied().unwrap_or(0) as f64;
            if e >= 5.0 {
                stat += (o - e) * (o - e) / e;
                bins += 1;
            } else {
                pooled_o += o;
                pooled_e += e;
            }
        }
        if pooled_e > 0.0 {
            stat += (pooled_o - pooled_e) * (pooled_o - pooled_e) / pooled_e;
            bins += 1;
        }
        assert!(bins >= 5, "case {case}: too few bins for a meaningful test");
        let p_value = 1.0 - ChiSquared::new((bins - 1) as f64).unwrap().cdf(stat);
        assert!(p_value > 1e-3, "case {case}: chi2 {stat:.1} on {} df, p = {p_value:.2e}", bins - 1);
    }
}

#[test]
fn a_wrong_distribution_fails_the_same_test() {
    // The check above must be able to fail: the same samples against a reference in which the
    // likeliest session's mass is raised by half are rejected.
    let (c, w, len) = cases().remove(0);
    let plan = Plan::new(&c, &w, len, false).unwrap();
    let mut exact = enumerate(&c, &w, len);
    exact.sort_by(|a, b| b.1.total_cmp(&a.1));
    exact[0].1 *= 1.5;
    let total: f64 = exact.iter().map(|e| e.1).sum();
    let mut rng = rand_xoshiro::Xoshiro256PlusPlus::seed_from_u64(41);
    let mut seen: FxHashMap<Vec<u32>, usize> = FxHashMap::default();
    for _ in 0..20_000 {
        *seen.entry(plan.sample(&mut rng)).or_default() += 1;
    }
    let stat: f64 = exact
        .iter()
        .map(|(s, p)| (p / total * 20_000.0, seen.get(s).copied().unwrap_or(0) as f64))
        .filter(|(e, _)| *e >= 5.0)
        .map(|(e, o)| (o - e) * (o - e) / e)
        .sum();
    let bins = exact.iter().filter(|(_, p)| p / total * 20_000.0 >= 5.0).count();
    let p_value = 1.0 - ChiSquared::new((bins - 1) as f64).unwrap().cdf(stat);
    assert!(p_value < 1e-6, "a distorted reference must be rejected (p = {p_value})");
}

#[test]
fn viterbi_finds_the_most_probable_session() {
    for (c, w, len) in cases() {
        let plan = Plan::new(&c, &w, len, true).unwrap();
        let exact = enumerate(&c, &w, len);
        let top = exact.iter().map(|e| e.1).fold(0.0, f64::max);
        let best = plan.best();
        let p = exact.iter().find(|e| e.0 == best).expect("best is a valid session").1;
        assert!((p - top).abs() < 1e-12 * top, "{best:?}: {p} vs {top}");
        assert!((plan.probability() - top).abs() < 1e-12 * top);
    }
}

#[test]
fn impossible_and_oversized_requests_are_errors() {
    let (c, _, _) = cases().remove(0);
    let e = Plan::new(&c, &[vec![3], vec![4], vec![5]], 2, false).unwrap_err();
    assert!(e.to_string().contains("cannot fit"), "{e}");
    let e = Plan::new(&c, &[vec![]], 3, false).unwrap_err();
    assert!(e.to_string().contains("matches no template"), "{e}");
}
