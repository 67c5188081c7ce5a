//! Counting n-grams of padded sequences, and the canonical table models store.

use hashbrown::HashTable;
use serde::{Deserialize, Serialize};

use crate::symbol::{BEGIN, END};

/// Which part of the data a sequence belongs to.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Serialize, Deserialize)]
pub enum Part {
    /// Used to fit held-out evaluation models (and, with check, the final chain).
    Fit = 0,
    /// Held out: evaluated against chains fitted on `Fit`.
    Check = 1,
}

impl Part {
    /// About one sequence in ten is held out, chosen by a content hash.
    pub fn of_hash(hash: u64) -> Part {
        if hash % 10 == 7 { Part::Check } else { Part::Fit }
    }
}

/// Counts (order+1)-grams. Each sequence is padded with `order` [`BEGIN`]s and one [`END`], so
/// every position (including the end) has exactly one gram and lower orders are marginals.
///
/// Distinct grams are stored back to back in one flat array and found through a hash table of
/// row numbers: no allocation per gram, and a lookup compares a few integers in place.
/// Time: O(order) per position; memory: (order+1)·4 + 16 bytes per distinct gram plus the table.
#[derive(Debug, Clone)]
pub struct GramCounter {
    order: usize,
    /// Row `i` is `ids[i*(order+1)..(i+1)*(order+1)]`, in first-seen order.
    ids: Vec<u32>,
    counts: Vec<[u64; 2]>,
    index: HashTable<u32>,
    window: Vec<u32>,
}

/// FxHash-style mix of a gram: cheap, and good enough for symbol ids.
#[inline]
fn hash_gram(gram: &[u32]) -> u64 {
    const K: u64 = 0xf135_7aea_2e62_a9c5;
    let mut h = gram.len() as u64;
    for &s in gram {
        h = (h.rotate_left(26) ^ s as u64).wrapping_mul(K);
    }
    h ^ (h >> 29)
}

/// Slice equality without a call into `memcmp` (grams are a handful of integers).
#[inline]
fn same_gram(a: &[u32], b: &[u32]) -> bool {
    a.len() == b.len() && a.iter().zip(b).all(|(x, y)| x == y)
}

impl GramCounter {
    pub fn new(order: usize) -> GramCounter {
        GramCounter {
            order,
            ids: Vec::new(),
            counts: Vec::new(),
            index: HashTable::new(),
            window: Vec::with_capacity(order + 1),
        }
    }

    pub fn order(&self) -> usize {
        self.order
    }

    /// Counts one sequence (without padding).
    pub fn add_sequence(&mut self, seq: &[u32], part: Part) {
        let mut counts = [0, 0];
        counts[part as usize] = 1;
        self.add_sequence_counts(seq, counts);
    }

    /// Counts a sequence seen `counts[0]` times in the fit part and `counts[1]` times in the
    /// check part: the same as that many calls of [`GramCounter::add_sequence`].
    pub fn add_sequence_counts(&mut self, seq: &[u32], counts: [u64; 2]) {
        let n = self.order + 1;
        let mut window = std::mem::take(&mut self.window);
        window.clear();
        window.resize(n, BEGIN);
        for &s in seq.iter().chain(std::iter::once(&END)) {
            window.copy_within(1.., 0);
            window[n - 1] = s;
            for (part, &c) in counts.iter().enumerate() {
                if c > 0 {
                    self.add(&window, part, c);
                }
            }
        }
        self.window = window;
    }

    #[inline]
    fn add(&mut self, gram: &[u32], part: usize, count: u64) {
        let n = self.order + 1;
        let ids = &self.ids;
        let hash = hash_gram(gram);
        match self.index.find(hash, |&r| same_gram(&ids[r as usize * n..(r as usize + 1) * n], gram)) {
            Some(&r) => self.counts[r as usize][part] += count,
            None => {
                let r = self.counts.len() as u32;
                self.ids.extend_from_slice(gram);
                let mut c = [0, 0];
                c[part] = count;
                self.counts.push(c);
                let ids = &self.ids;
                self.index.insert_unique(hash, r, |&r| hash_gram(&ids[r as usize * n..(r as usize + 1) * n]));
            }
        }
    }

    /// Adds counts for one gram of length order+1.
    pub fn add_gram(&mut self, gram: &[u32], counts: [u64; 2]) {
        assert_eq!(gram.len(), self.order + 1, "gram of the wrong length");
        self.add(gram, 0, counts[0]);
        self.add(gram, 1, counts[1]);
    }

    /// Number of distinct grams.
    pub fn len(&self) -> usize {
        self.counts.len()
    }

    pub fn is_empty(&self) -> bool {
        self.counts.is_empty()
    }

    /// The sorted table, symbols renumbered by `remap`.
    pub fn into_grams(self, remap: impl Fn(u32) -> u32) -> Grams {
        let mut ids = self.ids;
        for s in &mut ids {
            *s = remap(*s);
        }
        Grams::from_unsorted(self.order, &ids, &self.counts)
    }
}

/// A sorted table of (order+1)-grams with fit and check counts: what a model stores.
/// Canonical: rows strictly increasing, no zero rows.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct Grams {
    pub order: usize,
    /// Row `i` is `ids[i*(order+1)..(i+1)*(order+1)]`.
    pub ids: Vec<u32>,
    pub counts: Vec<[u64; 2]>,
}

impl Grams {
    pub fn empty(order: usize) -> Grams {
        Grams { order, ids: Vec::new(), counts: Vec::new() }
    }

    /// The canonical table of unsorted rows (flat, `order+1` symbols each): sorted, equal rows
    /// summed, zero rows dropped. Sorts row numbers, so no row is copied more than once.
    fn from_unsorted(order: usize, ids: &[u32], counts: &[[u64; 2]]) -> Grams {
        let n = order + 1;
        debug_assert_eq!(ids.len(), counts.len() * n);
        let row = |i: u32| &ids[i as usize * n..(i as usize + 1) * n];
        let mut perm: Vec<u32> = (0..counts.len() as u32).collect();
        perm.sort_unstable_by(|&a, &b| row(a).cmp(row(b)));
        let mut g =
            Grams { order, ids: Vec::with_capacity(ids.len()), counts: Vec::with_capacity(counts.len()) };
        for &i in &perm {
            g.push_sorted(row(i), counts[i as usize]);
        }
        g
    }

    /// Appends a row not below the last one: sums it into the last if equal, drops zero rows.
    fn push_sorted(&mut self, gram: &[u32], c: [u64; 2]) {
        let n = self.counts.len();
        if n > 0 && same_gram(self.gram(n - 1), gram) {
            let last = &mut self.counts[n - 1];
            last[0] += c[0];
            last[1] += c[1];
        } else if c != [0, 0] {
            self.ids.extend_from_slice(gram);
            self.counts.push(c);
        }
    }

    /// Number of rows.
    pub fn len(&self) -> usize {
        self.counts.len()
    }

    pub fn is_empty(&self) -> bool {
        self.counts.is_empty()
    }

    /// Symbols of row `i`.
    pub fn gram(&self, i: usize) -> &[u32] {
        let n = self.order + 1;
        &self.ids[i * n..(i + 1) * n]
    }

    /// Iterates rows.
    pub fn rows(&self) -> impl Iterator<Item = (&[u32], [u64; 2])> {
        self.ids.chunks_exact(self.order + 1).zip(self.counts.iter().copied())
    }

    /// Sum of both parts of all rows.
    pub fn total(&self) -> [u64; 2] {
        self.counts.iter().fold([0, 0], |a, c| [a[0] + c[0], a[1] + c[1]])
    }

    /// Renumbers symbols and re-sorts.
    pub fn remap(&self, remap: impl Fn(u32) -> u32) -> Grams {
        let ids: Vec<u32> = self.ids.iter().map(|&s| remap(s)).collect();
        Grams::from_unsorted(self.order, &ids, &self.counts)
    }

    /// Sum of two tables of the same order (a merge-join of sorted rows).
    pub fn merge(&self, other: &Grams) -> Grams {
        assert_eq!(self.order, other.order, "merging tables of different order");
        let mut g = Grams {
            order: self.order,
            ids: Vec::with_capacity(self.ids.len() + other.ids.len()),
            counts: Vec::with_capacity(self.len() + other.len()),
        };
        let (mut i, mut j) = (0, 0);
        while i < self.len() || j < other.len() {
            let take_left = j >= other.len() || (i < self.len() && self.gram(i) <= other.gram(j));
            if take_left {
                g.push_sorted(self.gram(i), self.counts[i]);
                i += 1;
            } else {
                g.push_sorted(other.gram(j), other.counts[j]);
                j += 1;
            }
        }
        g
    }

    /// The table of a lower order: grams keep their last `order+1` symbols, counts are summed.
    pub fn marginal(&self, order: usize) -> Grams {
        assert!(order <= self.order);
        if order == self.order {
            return self.clone();
        }
        let drop = self.order - order;
        let mut counter = GramCounter::new(order);
        for (g, c) in self.rows() {
            counter.add(&g[drop..], 0, c[0]);
            counter.add(&g[drop..], 1, c[1]);
        }
        counter.into_grams(|s| s)
    }

    /// Checks the table against an alphabet of `symbols` ids: lengths, ranges, canonical order,
    /// padding only at the start, END only at the end. For tables read from untrusted files.
    pub fn validate(&self, symbols: u32) -> Result<(), String> {
        let n = self.order + 1;
        if self.order > 16 {
            return Err(format!("order {} is above the maximum of 16", self.order));
        }
        if self.ids.len() != self.counts.len() * n {
            return Err("gram table has rows of the wrong length".into());
        }
        for i in 0..self.len() {
            let g = self.gram(i);
            if let Some(&bad) = g.iter().find(|&&s| s >= symbols) {
                return Err(format!("gram row {i} uses symbol {bad}, beyond the {symbols} known"));
            }
            let begins = g.iter().take_while(|&&s| s == BEGIN).count();
            if g[begins..].contains(&BEGIN) || g[n - 1] == BEGIN || g[..n - 1].contains(&END) {
                return Err(format!("gram row {i} has begin/end markers out of place"));
            }
            if i > 0 && self.gram(i - 1) >= g {
                return Err(format!("gram rows {} and {i} are not in canonical order", i - 1));
            }
            if self.counts[i] == [0, 0] {
                return Err(format!("gram row {i} has zero counts"));
            }
        }
        Ok(())
    }
}

/// Stored as a list of rows: in text formats each row is one line `"id id … id fit check"`
/// (diffable), in binary formats a tuple of integers.
impl Serialize for Grams {
    fn serialize<S: serde::Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        use serde::ser::SerializeStruct;
        struct Rows<'a>(&'a Grams);
        impl Serialize for Rows<'_> {
            fn serialize<S: serde::Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
                use serde::ser::SerializeSeq;
                let mut seq = s.serialize_seq(Some(self.0.len()))?;
                for (g, c) in self.0.rows() {
                    seq.serialize_element(&Row(g, c))?;
                }
                seq.end()
            }
        }
        struct Row<'a>(&'a [u32], [u64; 2]);
        impl Serialize for Row<'_> {
            fn serialize<S: serde::Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
                use serde::ser::SerializeTuple;
                use std::fmt::Write;
                if s.is_human_readable() {
                    let mut text = String::with_capacity(self.0.len() * 6 + 12);
                    for id in self.0 {
                        let _ = write!(text, "{id} ");
                    }
                    let _ = write!(text, "{} {}", self.1[0], self.1[1]);
                    return s.serialize_str(&text);
                }
                let mut t = s.serialize_tuple(self.0.len() + 2)?;
                for id in self.0 {
                    t.serialize_element(&(*id as u64))?;
                }
                t.serialize_element(&self.1[0])?;
                t.serialize_element(&self.1[1])?;
                t.end()
            }
        }
        let mut st = s.serialize_struct("Grams", 2)?;
        st.serialize_field("order", &self.order)?;
        st.serialize_field("grams", &Rows(self))?;
        st.end()
    }
}

impl<'de> Deserialize<'de> for Grams {
    fn deserialize<D: serde::Deserializer<'de>>(d: D) -> Result<Grams, D::Error> {
        use serde::de::{self, DeserializeSeed, MapAccess, SeqAccess, Visitor};

        /// Reads one row (a tuple of exactly order+3 integers) into the flat table.
        struct RowSeed<'a> {
            width: usize,
            out: &'a mut Grams,
        }
        impl<'de> DeserializeSeed<'de> for RowSeed<'_> {
            type Value = ();
            fn deserialize<D: serde::Deserializer<'de>>(self, d: D) -> Result<(), D::Error> {
                if d.is_human_readable() {
                    let text = std::borrow::Cow::<'de, str>::deserialize(d)?;
                    return self.parse_line(&text).map_err(de::Error::custom);
                }
                d.deserialize_tuple(self.width, self)
            }
        }
        impl RowSeed<'_> {
            fn parse_line(self, text: &str) -> Result<(), String> {
                let mut fields = text.split_ascii_whitespace();
                let ids = self.width - 2;
                for _ in 0..ids {
                    let f = fields.next().ok_or_else(|| format!("gram row `{text}` is too short"))?;
                    self.out.ids.push(f.parse().map_err(|_| format!("bad symbol `{f}` in gram row"))?);
                }
                let mut count = || -> Result<u64, String> {
                    let f = fields.next().ok_or_else(|| format!("gram row `{text}` is too short"))?;
                    f.parse().map_err(|_| format!("bad count `{f}` in gram row"))
                };
                let (fit, check) = (count()?, count()?);
                self.out.counts.push([fit, check]);
                if fields.next().is_some() {
                    return Err(format!("gram row `{text}` is too long"));
                }
                Ok(())
            }
        }
        impl<'de> Visitor<'de> for RowSeed<'_> {
            type Value = ();
            fn expecting(&self, f: &mut std::fmt::Formatter) -> std::fmt::Result {
                write!(f, "a gram row of {} integers", self.width)
            }
            fn visit_seq<A: SeqAccess<'de>>(self, mut seq: A) -> Result<(), A::Error> {
                let ids = self.width - 2;
                for k in 0..self.width {
                    let v: u64 = seq.next_element()?.ok_or_else(|| de::Error::invalid_length(k, &self))?;
                    if k < ids {
                        let id = u32::try_from(v).map_err(|_| de::Error::custom("symbol id out of range"))?;
                        self.out.ids.push(id);
                    } else if k == ids {
                        self.out.counts.push([v, 0]);
                    } else {
                        self.out.counts.last_mut().expect("pushed")[1] = v;
                    }
                }
                if seq.next_element::<de::IgnoredAny>()?.is_some() {
                    return Err(de::Error::invalid_length(self.width + 1, &self));
                }
                Ok(())
            }
        }

        struct RowsSeed<'a>(&'a mut Grams);
        impl<'de> DeserializeSeed<'de> for RowsSeed<'_> {
            type Value = ();
            fn deserialize<D: serde::Deserializer<'de>>(self, d: D) -> Result<(), D::Error> {
                d.deserialize_seq(self)
            }
        }
        impl<'de> Visitor<'de> for RowsSeed<'_> {
            type Value = ();
            fn expecting(&self, f: &mut std::fmt::Formatter) -> std::fmt::Result {
                f.write_str("a list of gram rows")
            }
            fn visit_seq<A: SeqAccess<'de>>(self, mut seq: A) -> Result<(), A::Error> {
                let width = self.0.order + 3;
                while seq.next_element_seed(RowSeed { width, out: self.0 })?.is_some() {}
                Ok(())
            }
        }

        struct GramsVisitor;
        impl<'de> Visitor<'de> for GramsVisitor {
            type Value = Grams;
            fn expecting(&self, f: &mut std::fmt::Formatter) -> std::fmt::Result {
                f.write_str("a gram table with `order` then `grams`")
            }
            fn visit_map<A: MapAccess<'de>>(self, mut map: A) -> Result<Grams, A::Error> {
                let key: String = map.next_key()?.ok_or_else(|| de::Error::missing_field("order"))?;
                if key != "order" {
                    return Err(de::Error::custom("`order` must come first in a gram table"));
                }
                let order: usize = map.next_value()?;
                if order > 16 {
                    return Err(de::Error::custom(format!("order {order} is above the maximum of 16")));
                }
                let mut g = Grams::empty(order);
                let key: String = map.next_key()?.ok_or_else(|| de::Error::missing_field("grams"))?;
                if key != "grams" {
                    return Err(de::Error::custom("expected `grams` after `order`"));
                }
                map.next_value_seed(RowsSeed(&mut g))?;
                if map.next_key::<de::IgnoredAny>()?.is_some() {
                    return Err(de::Error::custom("unknown field in gram table"));
                }
                Ok(g)
            }
            fn visit_seq<A: SeqAccess<'de>>(self, mut seq: A) -> Result<Grams, A::Error> {
                let order: usize = seq.next_element()?.ok_or_else(|| de::Error::invalid_length(0, &self))?;
                if order > 16 {
                    return Err(de::Error::custom(format!("order {order} is above the maximum of 16")));
                }
                let mut g = Grams::empty(order);
                seq.next_element_seed(RowsSeed(&mut g))?
                    .ok_or_else(|| de::Error::invalid_length(1, &self))?;
                Ok(g)
            }
        }
        d.deserialize_struct("Grams", &["order", "grams"], GramsVisitor)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn pads_and_counts_every_position() {
        let mut c = GramCounter::new(2);
        c.add_sequence(&[5, 6], Part::Fit);
        let g = c.into_grams(|s| s);
        let rows: Vec<Vec<u32>> = g.rows().map(|(r, _)| r.to_vec()).collect();
        assert_eq!(rows, vec![vec![0, 0, 5], vec![0, 5, 6], vec![5, 6, 1]]);
        let m = g.marginal(0);
        let uni: Vec<u32> = m.rows().map(|(r, _)| r[0]).collect();
        assert_eq!(uni, vec![1, 5, 6]);
    }

    #[test]
    fn merge_equals_counting_together() {
        let (a, b) = ([3u32, 4, 3, 4, 5], [4u32, 3, 5]);
        let mut all = GramCounter::new(1);
        all.add_sequence(&a, Part::Fit);
        all.add_sequence(&b, Part::Check);
        let mut ca = GramCounter::new(1);
        ca.add_sequence(&a, Part::Fit);
        let mut cb = GramCounter::new(1);
        cb.add_sequence(&b, Part::Check);
        let merged = ca.into_grams(|s| s).merge(&cb.into_grams(|s| s));
        assert_eq!(merged, all.into_grams(|s| s));
    }

    #[test]
    fn weighted_sequences_equal_repeated_ones() {
        let mut repeated = GramCounter::new(2);
        for part in [Part::Fit, Part::Check, Part::Fit] {
            repeated.add_sequence(&[4, 5, 4], part);
        }
        repeated.add_sequence(&[5], Part::Check);
        let mut weighted = GramCounter::new(2);
        weighted.add_sequence_counts(&[5], [0, 1]);
        weighted.add_sequence_counts(&[4, 5, 4], [2, 1]);
        weighted.add_sequence_counts(&[6], [0, 0]);
        assert_eq!(weighted.len(), repeated.len());
        assert_eq!(weighted.into_grams(|s| s), repeated.into_grams(|s| s));
    }

    #[test]
    fn remap_sums_rows_that_become_equal() {
        let mut c = GramCounter::new(1);
        c.add_sequence(&[3, 4], Part::Fit);
        c.add_sequence(&[3, 5], Part::Check);
        let g = c.into_grams(|s| s).remap(|s| if s == 5 { 4 } else { s });
        let rows: Vec<(Vec<u32>, [u64; 2])> = g.rows().map(|(r, c)| (r.to_vec(), c)).collect();
        assert_eq!(rows, vec![(vec![0, 3], [1, 1]), (vec![3, 4], [1, 1]), (vec![4, 1], [1, 1])]);
    }

    #[test]
    fn serde_round_trip_in_yaml_and_binary() {
        let mut c = GramCounter::new(2);
        c.add_sequence(&[7, 8, 9], Part::Fit);
        c.add_sequence(&[7, 9], Part::Check);
        let g = c.into_grams(|s| s);
        let yaml = serde_yaml::to_string(&g).unwrap();
        assert!(yaml.contains("- 0 0 7 1 1\n"), "{yaml}");
        assert_eq!(serde_yaml::from_str::<Grams>(&yaml).unwrap(), g);
        let bin = postcard::to_stdvec(&g).unwrap();
        assert_eq!(postcard::from_bytes::<Grams>(&bin).unwrap(), g);
        assert!(g.validate(10).is_ok());
        assert!(g.validate(9).is_err());
    }
}
