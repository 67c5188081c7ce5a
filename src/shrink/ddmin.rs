//! Delta debugging's ddmin (Zeller & Hildebrandt, "Simplifying and Isolating Failure-Inducing
//! Input", IEEE TSE 28(2), 2002), the minimizing variant.
//!
//! Given a list `c` for which `test(c)` holds (the failure shows), it splits `c` into `n` parts
//! and tries each part alone, then each complement; the first that still fails becomes the new
//! `c` (with `n` reset to 2, or `n − 1` for a complement); when none fails, the parts are halved
//! (`n` doubled) until they are single elements. The result is *1-minimal*: removing any one
//! element makes the failure go away (for a deterministic test). The empty list is tried first.
//!
//! Tests: at worst O(|c|²), typically O(k log |c|) for a failure caused by k elements.

/// Shrinks `items` while `test` holds. `test(items)` is assumed to hold.
pub fn ddmin<T: Clone>(items: Vec<T>, test: &mut impl FnMut(&[T]) -> bool) -> Vec<T> {
    if items.is_empty() || test(&[]) {
        return Vec::new();
    }
    let mut c = items;
    let mut n = 2usize;
    while c.len() >= 2 {
        let bounds = split(c.len(), n);
        let mut next: Option<(Vec<T>, usize)> = None;
        for r in &bounds {
            let subset = c[r.clone()].to_vec();
            if test(&subset) {
                next = Some((subset, 2));
                break;
            }
        }
        if next.is_none() {
            for r in &bounds {
                let complement: Vec<T> = c[..r.start].iter().chain(&c[r.end..]).cloned().collect();
                if test(&complement) {
                    next = Some((complement, (n - 1).max(2)));
                    break;
                }
            }
        }
        match next {
            Some((smaller, granularity)) => {
                c = smaller;
                n = granularity.min(c.len().max(2));
            }
            None if n >= c.len() => break,
            None => n = (2 * n).min(c.len()),
        }
    }
    c
}

/// `n` nearly equal consecutive ranges covering `0..len`.
fn split(len: usize, n: usize) -> Vec<std::ops::Range<usize>> {
    let n = n.clamp(1, len.max(1));
    (0..n).map(|i| (i * len / n)..((i + 1) * len / n)).filter(|r| !r.is_empty()).collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn finds_the_failure_inducing_pair() {
        let items: Vec<u32> = (0..40).collect();
        let mut calls = 0;
        let result = ddmin(items, &mut |c: &[u32]| {
            calls += 1;
            c.contains(&7) && c.contains(&31)
        });
        assert_eq!(result, vec![7, 31]);
        assert!(calls < 100, "{calls} tests");
    }

    #[test]
    fn result_is_one_minimal_for_an_order_dependent_test() {
        // Fails when some 3 appears before a later 5 and a later 9 (an ordered pattern).
        let test = |c: &[u32]| {
            let a = c.iter().position(|&x| x == 3);
            let b = a.and_then(|a| c[a..].iter().position(|&x| x == 5).map(|p| p + a));
            b.is_some_and(|b| c[b..].contains(&9))
        };
        let items = vec![5, 3, 1, 9, 5, 3, 2, 5, 9, 9, 1];
        let result = ddmin(items, &mut |c: &[u32]| test(c));
        assert!(test(&result));
        for i in 0..result.len() {
            let mut less = result.clone();
            less.remove(i);
            assert!(!test(&less), "removing {i} from {result:?} still fails");
        }
    }

    #[test]
    fn empty_and_single() {
        assert_eq!(ddmin(vec![1, 2, 3], &mut |_: &[i32]| true), Vec::<i32>::new());
        assert_eq!(ddmin(vec![4], &mut |c: &[i32]| c == [4]), vec![4]);
        assert_eq!(split(5, 2), vec![0..2, 2..5]);
    }
}
