//! Value pools: the values seen in a slot, with counts, for filling slots when generating.
//!
//! A pool keeps at most `cap` distinct values: those with the smallest 64-bit XXH3 hashes (a
//! bottom-k sample). The choice is exactly mergeable: the bottom-k of a union is the bottom-k of
//! the shards' bottom-k sets, and a kept value's count is exact because it was kept from its
//! first occurrence on. So a pool learned from shards and merged equals one learned at once.

use rustc_hash::FxHashMap;
use serde::{Deserialize, Serialize};

/// Longest value kept in a pool; longer values are counted in `seen` only.
pub const MAX_VALUE_BYTES: usize = 4096;

/// The stable hash deciding which values a pool keeps.
pub fn value_hash(value: &[u8]) -> u64 {
    xxhash_rust::xxh3::xxh3_64(value)
}

/// One kept value.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct PoolValue {
    #[serde(with = "crate::escape::serde_bytes")]
    pub value: Vec<u8>,
    pub count: u64,
}

/// The pool of one slot key: a class and the literal that anchors it (the nearest preceding
/// literal with a letter or digit, e.g. a JSON key, a header name, a path segment).
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Pool {
    pub class: String,
    /// Token symbol of the anchor literal; `None` when no literal precedes the slot.
    #[serde(default)]
    pub anchor: Option<u32>,
    /// Slot occurrences seen, kept or not.
    pub seen: u64,
    /// Kept values, most frequent first (ties by bytes).
    pub values: Vec<PoolValue>,
}

impl Pool {
    /// Sorts values canonically.
    pub fn canonicalize(&mut self) {
        self.values.sort_by(|a, b| b.count.cmp(&a.count).then_with(|| a.value.cmp(&b.value)));
    }

    /// Adds another pool of the same key, keeping the bottom-`cap` values.
    pub fn absorb(&mut self, other: &Pool, cap: usize) {
        self.seen += other.seen;
        let mut by_value: FxHashMap<Vec<u8>, u64> =
            self.values.drain(..).map(|v| (v.value, v.count)).collect();
        for v in &other.values {
            *by_value.entry(v.value.clone()).or_default() += v.count;
        }
        let mut kept: Vec<(u64, PoolValue)> = by_value
            .into_iter()
            .map(|(value, count)| (value_hash(&value), PoolValue { value, count }))
            .collect();
        if kept.len() > cap {
            kept.sort_unstable_by(|a, b| a.0.cmp(&b.0).then_with(|| a.1.value.cmp(&b.1.value)));
            kept.truncate(cap);
        }
        self.values = kept.into_iter().map(|k| k.1).collect();
        self.canonicalize();
    }
}

/// Builds a pool from a stream of values in bounded memory.
#[derive(Debug, Clone)]
pub struct PoolBuilder {
    cap: usize,
    seen: u64,
    kept: FxHashMap<u64, (Box<[u8]>, u64)>,
    /// Largest kept hash once full.
    threshold: u64,
}

impl PoolBuilder {
    pub fn new(cap: usize) -> PoolBuilder {
        PoolBuilder { cap: cap.max(1), seen: 0, kept: FxHashMap::default(), threshold: u64::MAX }
    }

    pub fn add(&mut self, value: &[u8]) {
        self.seen += 1;
        if value.len() > MAX_VALUE_BYTES {
            return;
        }
        let h = value_hash(value);
        if let Some(e) = self.kept.get_mut(&h) {
            if &*e.0 == value {
                e.1 += 1;
            }
            return;
        }
        if self.kept.len() < self.cap {
            self.kept.insert(h, (value.into(), 1));
            if self.kept.len() == self.cap {
                self.threshold = self.kept.keys().copied().max().unwrap_or(u64::MAX);
            }
        } else if h < self.threshold {
            self.kept.remove(&self.threshold);
            self.kept.insert(h, (value.into(), 1));
            self.threshold = self.kept.keys().copied().max().unwrap_or(u64::MAX);
        }
    }

    /// The finished pool for a key.
    pub fn finish(self, class: String, anchor: Option<u32>) -> Pool {
        let mut pool = Pool {
            class,
            anchor,
            seen: self.seen,
            values: self
                .kept
                .into_values()
                .map(|(v, count)| PoolValue { value: v.into_vec(), count })
                .collect(),
        };
        pool.canonicalize();
        pool
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn build(values: &[&[u8]], cap: usize) -> Pool {
        let mut b = PoolBuilder::new(cap);
        for v in values {
            b.add(v);
        }
        b.finish("int".into(), None)
    }

    #[test]
    fn merged_shards_equal_one_pass() {
        let values: Vec<Vec<u8>> = (0..500u32).map(|i| (i * 7919 % 211).to_string().into_bytes()).collect();
        let refs: Vec<&[u8]> = values.iter().map(|v| v.as_slice()).collect();
        let whole = build(&refs, 32);
        let mut left = build(&refs[..123], 32);
        let right = build(&refs[123..], 32);
        left.absorb(&right, 32);
        assert_eq!(left, whole);
        assert_eq!(whole.values.len(), 32);
        assert_eq!(whole.seen, 500);
    }

    #[test]
    fn small_pools_keep_exact_counts() {
        let p = build(&[b"0", b"50", b"0", b"100", b"0"], 16);
        assert_eq!(p.values[0], PoolValue { value: b"0".to_vec(), count: 3 });
        assert_eq!(p.values.len(), 3);
    }
}
