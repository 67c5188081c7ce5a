//! Walker's alias method (Vose's construction): O(n) build, O(1) draw.

/// An alias table over `n` outcomes.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct AliasTable {
    pub prob: Vec<f32>,
    pub alias: Vec<u32>,
}

impl AliasTable {
    /// Builds a table for non-negative `weights`. All-zero weights give a uniform table.
    pub fn new(weights: &[f64]) -> AliasTable {
        let n = weights.len();
        let mut prob = vec![1.0f32; n];
        let mut alias: Vec<u32> = (0..n as u32).collect();
        build_into(weights, &mut prob, &mut alias);
        AliasTable { prob, alias }
    }

    /// Draws an outcome from one 64-bit random number.
    #[inline]
    pub fn draw(&self, r: u64) -> usize {
        draw(&self.prob, &self.alias, r)
    }
}

/// Fills `prob` and `alias` (both of length `weights.len()`) for `weights`.
pub(crate) fn build_into(weights: &[f64], prob: &mut [f32], alias: &mut [u32]) {
    build_with(weights, prob, alias, &mut Scratch::default());
}

/// Work lists of [`build_with`], reused across tables to avoid three allocations per table.
#[derive(Debug, Default)]
pub(crate) struct Scratch {
    scaled: Vec<f64>,
    small: Vec<usize>,
    large: Vec<usize>,
}

/// [`build_into`] with reusable work lists.
pub(crate) fn build_with(weights: &[f64], prob: &mut [f32], alias: &mut [u32], scratch: &mut Scratch) {
    let n = weights.len();
    let total: f64 = weights.iter().sum();
    if n == 0 {
        return;
    }
    if n == 1 || total <= 0.0 || !total.is_finite() {
        // One outcome (the commonest table), or no usable weights: every column keeps itself.
        prob.fill(1.0);
        for (i, a) in alias.iter_mut().enumerate() {
            *a = i as u32;
        }
        return;
    }
    let Scratch { scaled, small, large } = scratch;
    scaled.clear();
    scaled.extend(weights.iter().map(|w| w * n as f64 / total));
    small.clear();
    large.clear();
    for (i, &s) in scaled.iter().enumerate() {
        if s < 1.0 { small.push(i) } else { large.push(i) }
    }
    while let (Some(&s), Some(&l)) = (small.last(), large.last()) {
        small.pop();
        prob[s] = scaled[s] as f32;
        alias[s] = l as u32;
        scaled[l] -= 1.0 - scaled[s];
        if scaled[l] < 1.0 {
            large.pop();
            small.push(l);
        }
    }
    for &i in large.iter().chain(small.iter()) {
        prob[i] = 1.0;
        alias[i] = i as u32;
    }
}

/// O(1) draw: the high 32 bits pick a column, the low 24 bits flip its biased coin.
#[inline]
pub(crate) fn draw(prob: &[f32], alias: &[u32], r: u64) -> usize {
    let n = prob.len() as u64;
    let column = (((r >> 32) * n) >> 32) as usize;
    let coin = (r & 0xFF_FFFF) as f32 / (1u32 << 24) as f32;
    if coin < prob[column] { column } else { alias[column] as usize }
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::{Rng, SeedableRng};

    #[test]
    fn frequencies_follow_weights() {
        let table = AliasTable::new(&[1.0, 0.0, 3.0, 6.0]);
        let mut rng = rand_xoshiro::Xoshiro256PlusPlus::seed_from_u64(1);
        let mut seen = [0u32; 4];
        for _ in 0..100_000 {
            seen[table.draw(rng.next_u64())] += 1;
        }
        assert_eq!(seen[1], 0, "zero weight is never drawn");
        for (i, w) in [(0, 0.1), (2, 0.3), (3, 0.6)] {
            let f = seen[i] as f64 / 100_000.0;
            assert!((f - w).abs() < 0.01, "outcome {i}: {f} vs {w}");
        }
    }
}
