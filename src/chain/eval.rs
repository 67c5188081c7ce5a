//! Measures of a chain: held-out cross-entropy and perplexity, entropy rate, order selection.

use super::build::{Chain, ChainConfig, Parts};
use super::counts::Grams;

/// Cross-entropy in bits per symbol of the check part of `grams` under `chain`, or `None` when
/// there is no check data. `grams` must have the chain's order.
pub fn cross_entropy(chain: &Chain, grams: &Grams) -> Option<f64> {
    let order = grams.order;
    let (mut bits, mut n) = (0.0, 0u64);
    for (g, c) in grams.rows() {
        if c[1] == 0 {
            continue;
        }
        let p = chain.prob(&g[..order], g[order]);
        bits -= c[1] as f64 * p.log2();
        n += c[1];
    }
    (n > 0).then(|| bits / n as f64)
}

/// Entropy rate estimate in bits per symbol: Σ_h π(h)·H(P(·|h)) over the top-order contexts of
/// `grams`, with π the empirical context frequencies (both parts) — the usual plug-in estimate.
pub fn entropy_rate(chain: &Chain, grams: &Grams) -> f64 {
    let order = grams.order;
    let mut total = 0u64;
    let mut sum = 0.0;
    let mut dist = Vec::new();
    let predictable = (chain.symbols() - 1) as f64;
    let mut i = 0;
    while i < grams.len() {
        let ctx = &grams.gram(i)[..order];
        let mut weight = 0;
        while i < grams.len() && &grams.gram(i)[..order] == ctx {
            weight += grams.counts[i][0] + grams.counts[i][1];
            i += 1;
        }
        let floor = chain.distribution(ctx, &mut dist);
        let mut h: f64 = dist.iter().filter(|e| e.1 > 0.0).map(|e| -e.1 * e.1.log2()).sum();
        let rest = predictable - dist.len() as f64;
        if floor > 0.0 && rest > 0.0 {
            h -= rest * floor * floor.log2();
        }
        sum += weight as f64 * h;
        total += weight;
    }
    if total == 0 { 0.0 } else { sum / total as f64 }
}

/// Held-out figures of one order.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct OrderScore {
    pub order: usize,
    /// Bits per symbol on held-out data (chain fitted without it); `None` without check data.
    pub cross_entropy: Option<f64>,
}

impl OrderScore {
    pub fn perplexity(&self) -> Option<f64> {
        self.cross_entropy.map(f64::exp2)
    }
}

/// Scores orders 1..=grams.order by held-out cross-entropy and returns the scores and the best
/// order (lowest cross-entropy; the smallest order on ties; `fallback` without check data).
pub fn pick_order(
    grams: &Grams,
    symbols: u32,
    config: &ChainConfig,
    fallback: usize,
) -> (Vec<OrderScore>, usize) {
    let fit = ChainConfig { parts: Parts::Fit, ..*config };
    let scores: Vec<OrderScore> = (1..=grams.order.max(1))
        .filter(|&k| k <= grams.order)
        .map(|k| {
            let g = grams.marginal(k);
            let chain = Chain::build(&g, symbols, &fit);
            OrderScore { order: k, cross_entropy: cross_entropy(&chain, &g) }
        })
        .collect();
    let best = scores
        .iter()
        .filter_map(|s| s.cross_entropy.map(|h| (s.order, h)))
        .fold(None::<(usize, f64)>, |best, (k, h)| match best {
            Some((_, bh)) if bh <= h + 1e-12 => best,
            _ => Some((k, h)),
        })
        .map_or(fallback.min(grams.order).max(1.min(grams.order)), |b| b.0);
    (scores, best)
}

/// Stationary distribution of a first-order chain restricted to `states`: the transition matrix
/// P(j | i) over `states` (each row renormalised over `states`) is iterated from the uniform
/// distribution until it moves less than 1e-13 (at most 100 000 steps).
pub fn stationary(chain: &Chain, states: &[u32]) -> Vec<f64> {
    let n = states.len();
    let matrix: Vec<Vec<f64>> = states
        .iter()
        .map(|&i| {
            let row: Vec<f64> = states.iter().map(|&j| chain.prob(&[i], j)).collect();
            let total: f64 = row.iter().sum();
            row.into_iter().map(|p| p / total).collect()
        })
        .collect();
    let mut pi = vec![1.0 / n as f64; n];
    for _ in 0..100_000 {
        let next: Vec<f64> = (0..n).map(|j| (0..n).map(|i| pi[i] * matrix[i][j]).sum()).collect();
        let moved: f64 = next.iter().zip(&pi).map(|(a, b)| (a - b).abs()).sum();
        pi = next;
        if moved < 1e-13 {
            break;
        }
    }
    pi
}
