//! Delta debugging's ddmin: the minimizing algorithm of A. Zeller and
//! R. Hildebrandt, "Simplifying and Isolating Failure-Inducing Input",
//! IEEE Transactions on Software Engineering 28(2), 2002, section 3
//! (figure 4 there).
//!
//! Contract: given a configuration `c` (items, in order) for which `test`
//! holds (the failure reproduces), [`ddmin`] returns a subsequence of `c`,
//! in the same order, for which `test` still holds and that is
//! 1-minimal (removing any single item makes `test` fail) unless the
//! budget ran out first. Each step follows the paper: split the current
//! configuration into `n` parts; if a part alone reproduces, continue
//! with it and `n = 2`; else if a complement reproduces, continue with it
//! and `n = max(n - 1, 2)`; else double `n` up to the size; stop when `n`
//! reaches the size with nothing removed.
//!
//! `test` answers `Some(true)` (reproduces), `Some(false)`, or `None` to
//! stop at once (the trial budget, time or an interrupt): the result is
//! then the smallest configuration found so far, which always reproduces.
//! No configuration is tested twice (a cache of outcomes, as the paper
//! suggests in section 3.3). Nothing here is random: the same `test`
//! gives the same result.

use std::collections::HashMap;

/// What [`ddmin`] found and whether it finished.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Minimized<T> {
    pub items: Vec<T>,
    /// Whether the result is 1-minimal (false: the budget ran out).
    pub complete: bool,
}

/// Minimizes `c` under `test`; see the module contract.
pub fn ddmin<T: Clone + Eq + std::hash::Hash>(c: Vec<T>, mut test: impl FnMut(&[T]) -> Option<bool>) -> Minimized<T> {
    let mut cache: HashMap<Vec<T>, bool> = HashMap::new();
    let mut tried = |cfg: &[T], test: &mut dyn FnMut(&[T]) -> Option<bool>| -> Option<bool> {
        if let Some(&r) = cache.get(cfg) {
            return Some(r);
        }
        let r = test(cfg)?;
        cache.insert(cfg.to_vec(), r);
        Some(r)
    };
    let mut c = c;
    let mut n = 2usize;
    while c.len() >= 2 {
        let parts = split(&c, n);
        let mut reduced = false;
        // Reduce to a subset.
        for p in &parts {
            match tried(p, &mut test) {
                None => return Minimized { items: c, complete: false },
                Some(true) => {
                    c = p.clone();
                    n = 2;
                    reduced = true;
                    break;
                }
                Some(false) => {}
            }
        }
        if !reduced && n > 2 {
            // Reduce to a complement (with n = 2 the complements are the
            // subsets just tested).
            for i in 0..parts.len() {
                let complement: Vec<T> =
                    parts.iter().enumerate().filter(|(j, _)| *j != i).flat_map(|(_, p)| p.iter().cloned()).collect();
                match tried(&complement, &mut test) {
                    None => return Minimized { items: c, complete: false },
                    Some(true) => {
                        c = complement;
                        n = (n - 1).max(2);
                        reduced = true;
                        break;
                    }
                    Some(false) => {}
                }
            }
        }
        if !reduced {
            if n >= c.len() {
                break;
            }
            n = (2 * n).min(c.len());
        }
    }
    Minimized { items: c, complete: true }
}

/// `c` in `n` parts of nearly equal length, in order.
fn split<T: Clone>(c: &[T], n: usize) -> Vec<Vec<T>> {
    let n = n.min(c.len()).max(1);
    let mut out = Vec::with_capacity(n);
    let mut start = 0;
    for i in 0..n {
        let end = start + (c.len() - start) / (n - i);
        out.push(c[start..end].to_vec());
        start = end;
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The paper's own example of section 3.4 (from memory): eight changes
    /// of which 1, 7 and 8 together cause the failure; ddmin finds exactly
    /// those.
    #[test]
    fn finds_the_three_failure_inducing_changes() {
        let mut trials = 0;
        let got = ddmin((1..=8).collect::<Vec<u32>>(), |c| {
            trials += 1;
            Some([1, 7, 8].iter().all(|x| c.contains(x)))
        });
        assert_eq!(got, Minimized { items: vec![1, 7, 8], complete: true });
        assert!(trials < 40, "{trials} trials");
    }

    #[test]
    fn two_distant_items_among_ten_thousand_in_few_trials() {
        let mut trials = 0;
        let got = ddmin((0..10_000u32).collect(), |c| {
            trials += 1;
            Some(c.contains(&17) && c.contains(&9_321))
        });
        assert_eq!(got.items, vec![17, 9_321]);
        assert!(trials < 300, "{trials} trials");
    }

    #[test]
    fn the_result_is_one_minimal() {
        // Any two of {3, 5, 9}: removing one of the two found breaks it.
        let f = |c: &[u32]| [3, 5, 9].iter().filter(|x| c.contains(x)).count() >= 2;
        let got = ddmin((0..20).collect(), |c| Some(f(c)));
        assert_eq!(got.items.len(), 2);
        for i in 0..got.items.len() {
            let mut less = got.items.clone();
            less.remove(i);
            assert!(!f(&less));
        }
    }

    #[test]
    fn a_budget_stops_it_with_a_configuration_that_still_reproduces() {
        let mut trials = 0;
        let got = ddmin((0..1000u32).collect(), |c| {
            trials += 1;
            if trials > 5 {
                return None;
            }
            Some(c.contains(&500))
        });
        assert!(!got.complete);
        assert!(got.items.contains(&500));
        assert!(got.items.len() < 1000);
    }

    #[test]
    fn no_configuration_is_tested_twice_and_order_is_kept() {
        let mut seen = std::collections::HashSet::new();
        let got = ddmin((0..64u32).collect(), |c| {
            assert!(seen.insert(c.to_vec()), "tested twice: {c:?}");
            Some(c.contains(&40) && c.contains(&2))
        });
        assert_eq!(got.items, vec![2, 40]);
    }

    #[test]
    fn split_covers_in_order() {
        assert_eq!(split(&[1, 2, 3, 4, 5], 2), vec![vec![1, 2], vec![3, 4, 5]]);
        assert_eq!(split(&[1, 2, 3], 5), vec![vec![1], vec![2], vec![3]]);
    }
}
