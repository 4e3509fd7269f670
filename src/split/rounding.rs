//! Controlled rounding of a strata x partitions table of exact shares.
//!
//! Stratum s of n_s rows has the exact share q[s][p] = n_s w_p / W in
//! partition p (weights w, their sum W). Rounding each stratum on its own
//! keeps every stratum within one row of its shares but lets the partition
//! totals drift: a thousand one-row strata at 70/15/15 would each put their
//! row in train. Controlled rounding rounds the whole table at once, so that
//! every cell is the floor or the ceiling of its exact share, every stratum
//! keeps its size, AND every partition total is the floor or the ceiling of
//! its exact share of all rows. Such a rounding always exists for a
//! two-way table (Cox 1987, "A constructive procedure for unbiased controlled
//! rounding", JASA 82(398); the table rounding problem in Šíma 1999).
//!
//! The procedure is Cox's. Write the table with its margins negated, so that
//! every row and every column sums to zero: cells q[s][p], then -n_s, and a
//! last row -Q_p (Q_p = N w_p / W) with N in the corner. The fractional
//! cells form a bipartite graph between rows and columns in which no vertex
//! has exactly one edge (a zero sum of numbers, one fractional, is
//! impossible), so a cycle exists while any cell is fractional. Adding +d and
//! -d alternately around a cycle keeps every sum; d is the largest step in
//! that direction before a cell reaches an integer, d' the same for the other
//! direction, and the step +d is taken with probability d' / (d + d'), -d'
//! otherwise, so that every cell's expected final value is its exact share
//! (unbiased). Each step makes at least one cell whole and no cell ever
//! crosses an integer, so at the end every cell is a floor or ceiling.
//!
//! All values are integers in units of 1/W, so the arithmetic is exact, and
//! the draws come from the seed: the same table, seed and shares give the
//! same rounding on every machine. Stratum margins are whole numbers and
//! never fractional, so the graph's column side is the k <= 3 partitions:
//! a cycle has at most 6 edges and is found from buckets of rows by which
//! of their cells are fractional, in constant time per step.

use crate::rng::SplitRng;

/// The draws of the rounding, apart from the shuffles of rows.
const ROUNDING_CONTEXT: &str = "cleave 2026-12-04 controlled rounding v1";

/// Rounds the table of exact shares of `sizes` (rows per stratum) at the
/// integer `weights`: returns per stratum its rows per partition. Every
/// cell is the floor or ceiling of `size * w / W`, every row sums to its
/// size, and every partition's total is the floor or ceiling of its exact
/// share of all rows.
pub fn controlled(sizes: &[u64], weights: &[u128], seed: u64) -> Vec<Vec<u64>> {
    let k = weights.len();
    assert!((2..=3).contains(&k), "two or three partitions");
    let total: u128 = weights.iter().sum();
    let w = total as i128;
    let n_rows = sizes.len() + 1;
    // v[row * k + p]: cell in units of 1/W; the last row is -Q_p.
    let mut v = vec![0i128; n_rows * k];
    for (s, &n) in sizes.iter().enumerate() {
        for p in 0..k {
            v[s * k + p] = (n as u128 * weights[p]) as i128;
        }
    }
    let all: u128 = sizes.iter().map(|&n| n as u128).sum();
    for p in 0..k {
        v[sizes.len() * k + p] = -((all * weights[p]) as i128);
    }
    let mask_of = |v: &[i128], row: usize| -> u8 {
        (0..k).filter(|&p| v[row * k + p].rem_euclid(w) != 0).fold(0u8, |m, p| m | 1 << p)
    };
    // Rows by the set of their fractional cells (lazy: a popped row whose
    // set has changed is skipped; a row is pushed again when it changes).
    let mut buckets: Vec<Vec<usize>> = vec![Vec::new(); 8];
    let mut mask = vec![0u8; n_rows];
    for row in 0..n_rows {
        mask[row] = mask_of(&v, row);
        if mask[row] != 0 {
            debug_assert!(mask[row].count_ones() >= 2, "no row has exactly one fractional cell");
            buckets[mask[row] as usize].push(row);
        }
    }
    let mut rng = SplitRng::with_context(ROUNDING_CONTEXT, seed);
    // The top of a bucket, stale entries popped first; with `skip`, the
    // valid entry under it (the top set aside meanwhile).
    let top = |buckets: &mut Vec<Vec<usize>>, mask: &[u8], m: usize, skip: Option<usize>| -> Option<usize> {
        let b = &mut buckets[m];
        let clean = |b: &mut Vec<usize>| {
            while b.last().is_some_and(|&r| mask[r] as usize != m) {
                b.pop();
            }
        };
        clean(b);
        match skip {
            None => b.last().copied(),
            Some(other) => {
                let held = b.pop_if(|r| *r == other);
                clean(b);
                let under = b.last().copied();
                b.extend(held);
                under
            }
        }
    };
    loop {
        // A cycle of (row, column) cells with alternating signs, first +.
        let mut cycle: Vec<(usize, usize)> = Vec::with_capacity(6);
        'find: for m1 in 1..8usize {
            let Some(a) = top(&mut buckets, &mask, m1, None) else { continue };
            for m2 in m1..8usize {
                let shared = m1 & m2;
                if shared.count_ones() < 2 {
                    continue;
                }
                let b =
                    if m2 == m1 { top(&mut buckets, &mask, m2, Some(a)) } else { top(&mut buckets, &mask, m2, None) };
                if let Some(b) = b {
                    let p = shared.trailing_zeros() as usize;
                    let q = (shared & !(1 << p)).trailing_zeros() as usize;
                    cycle.extend([(a, p), (a, q), (b, q), (b, p)]);
                    break 'find;
                }
            }
        }
        if cycle.is_empty() && k == 3 {
            // Only rows with two fractional cells, no two alike: one of each
            // of {0,1}, {1,2} and {0,2} closes a cycle of six.
            if let (Some(a), Some(b), Some(c)) = (
                top(&mut buckets, &mask, 0b011, None),
                top(&mut buckets, &mask, 0b110, None),
                top(&mut buckets, &mask, 0b101, None),
            ) {
                cycle.extend([(a, 0), (a, 1), (b, 1), (b, 2), (c, 2), (c, 0)]);
            }
        }
        if cycle.is_empty() {
            debug_assert!(mask.iter().all(|&m| m == 0), "fractional cells without a cycle");
            break;
        }
        // Largest steps up (+ cells rise, - cells fall) and down.
        let (mut up, mut down) = (i128::MAX, i128::MAX);
        for (i, &(r, p)) in cycle.iter().enumerate() {
            let x = v[r * k + p];
            let below = x.rem_euclid(w);
            let above = w - below;
            if i % 2 == 0 {
                up = up.min(above);
                down = down.min(below);
            } else {
                up = up.min(below);
                down = down.min(above);
            }
        }
        let step = if (rng.below((up + down) as u64) as i128) < down { up } else { -down };
        for (i, &(r, p)) in cycle.iter().enumerate() {
            v[r * k + p] += if i % 2 == 0 { step } else { -step };
        }
        for &(r, _) in cycle.iter().step_by(2) {
            let m = mask_of(&v, r);
            if m != mask[r] {
                mask[r] = m;
                if m != 0 {
                    buckets[m as usize].push(r);
                }
            }
        }
    }
    (0..sizes.len()).map(|s| (0..k).map(|p| (v[s * k + p] / w) as u64).collect()).collect()
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;

    /// The check written apart from the procedure: every cell and every
    /// partition total a floor or ceiling of its exact share (compared as
    /// integers times W), every stratum whole.
    fn assert_controlled(sizes: &[u64], weights: &[u128], got: &[Vec<u64>]) {
        let w: u128 = weights.iter().sum();
        let within = |count: u64, exact_times_w: u128| {
            let c = count as u128 * w;
            c + w > exact_times_w && c < exact_times_w + w
        };
        let mut totals = vec![0u64; weights.len()];
        for (s, row) in got.iter().enumerate() {
            assert_eq!(row.iter().sum::<u64>(), sizes[s], "stratum {s} keeps its rows");
            for (p, &c) in row.iter().enumerate() {
                assert!(within(c, sizes[s] as u128 * weights[p]), "stratum {s} partition {p}: {c}");
                totals[p] += c;
            }
        }
        let all: u128 = sizes.iter().map(|&n| n as u128).sum();
        for (p, &t) in totals.iter().enumerate() {
            assert!(within(t, all * weights[p]), "partition {p} total {t} of {all}");
        }
    }

    #[test]
    fn one_row_strata_meet_the_asked_totals() {
        let sizes = vec![1u64; 1000];
        let got = controlled(&sizes, &[70, 15, 15], 7);
        assert_controlled(&sizes, &[70, 15, 15], &got);
        let totals: Vec<u64> = (0..3).map(|p| got.iter().map(|r| r[p]).sum()).collect();
        assert_eq!(totals, [700, 150, 150]);
    }

    #[test]
    fn three_row_strata_meet_the_asked_totals() {
        let mut sizes = vec![3u64; 333];
        sizes.push(1);
        let got = controlled(&sizes, &[70, 15, 15], 0);
        assert_controlled(&sizes, &[70, 15, 15], &got);
        let totals: Vec<u64> = (0..3).map(|p| got.iter().map(|r| r[p]).sum()).collect();
        assert_eq!(totals, [700, 150, 150]);
    }

    /// Unbiased (Cox 1987): over many seeds, each cell's mean count is its
    /// exact share. One stratum of 1 row at 70/15/15 lands in validation
    /// with probability 0.15 among 1,000 such strata.
    #[test]
    fn cells_are_unbiased_over_seeds() {
        let sizes = vec![1u64, 2, 3, 1, 5];
        let weights = [70u128, 15, 15];
        let runs = 4000u64;
        let mut sum = vec![vec![0u64; 3]; sizes.len()];
        for seed in 0..runs {
            for (acc, row) in sum.iter_mut().zip(controlled(&sizes, &weights, seed)) {
                for (a, c) in acc.iter_mut().zip(row) {
                    *a += c;
                }
            }
        }
        for (s, row) in sum.iter().enumerate() {
            for (p, &a) in row.iter().enumerate() {
                let exact = sizes[s] as f64 * weights[p] as f64 / 100.0;
                let mean = a as f64 / runs as f64;
                // The count is a floor or ceiling: its sd is at most 0.5, so
                // the mean's is at most 0.5 / sqrt(4000) = 0.0079; allow 5 sd.
                assert!((mean - exact).abs() < 0.04, "stratum {s} partition {p}: mean {mean} vs {exact}");
            }
        }
    }

    proptest! {
        #[test]
        fn both_margins_always_within_one_row(
            sizes in proptest::collection::vec(0u64..40, 1..300),
            weights in prop_oneof![
                Just(vec![70u128, 15, 15]), Just(vec![80, 20]), Just(vec![1, 1, 98]),
                Just(vec![333, 333, 334]), Just(vec![50, 25, 25]), Just(vec![7, 3])
            ],
            seed in any::<u64>(),
        ) {
            let got = controlled(&sizes, &weights, seed);
            assert_controlled(&sizes, &weights, &got);
            prop_assert_eq!(got, controlled(&sizes, &weights, seed));
        }
    }
}
