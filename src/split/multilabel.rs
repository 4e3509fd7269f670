//! Multilabel stratification: rows that carry several 0/1 labels at once
//! (`--stratify-labels`), shared out so that every label keeps its share in
//! every partition or fold.
//!
//! The deal is iterative stratification (Sechidis, Tsoumakas and Vlahavas
//! 2011, "On the stratification of multi-label data", ECML PKDD): the label
//! with the fewest rows still to place goes first, and each of its rows (in
//! a seeded order) goes to the subset that most wants that label, then the
//! subset that most wants rows, then the earlier one; rows without any label
//! go last, each to the subset that most wants rows. The desired counts are
//! exact rationals in units of 1/W.
//!
//! The deal alone can leave a common label a few rows off its share, so a
//! repair follows: rows are moved between two subsets, or exchanged, while
//! that lowers the sum of squared deviations from the exact shares (labels
//! and sizes together). Rows with the same labels are interchangeable, so
//! candidates are taken per label set, the lowest row first. Every step
//! strictly lowers the sum, so the repair ends; it stops at the first
//! state where no move or exchange helps.

use crate::rng::SplitRng;

/// The subset (partition or fold) of every row, for rows whose labels are
/// the bits of `masks` (`labels` columns), subsets wanted in the shares
/// `weights`, over the rows where `included` holds (others get `u8::MAX`).
pub fn assign(masks: &[u64], labels: usize, included: &[bool], weights: &[u128], seed: u64, context: &str) -> Vec<u8> {
    let k = weights.len();
    let w: i128 = weights.iter().sum::<u128>() as i128;
    let rows: Vec<u32> = (0..masks.len() as u32).filter(|&r| included[r as usize]).collect();
    let n = rows.len() as i128;
    let mut positives = vec![0i128; labels];
    for &r in &rows {
        for (l, p) in positives.iter_mut().enumerate() {
            *p += (masks[r as usize] >> l & 1) as i128;
        }
    }
    // Still wanted, in units of 1/W: rows per subset and rows of each label per subset.
    let mut want_rows: Vec<i128> = weights.iter().map(|&x| n * x as i128).collect();
    let mut want: Vec<Vec<i128>> =
        (0..labels).map(|l| weights.iter().map(|&x| positives[l] * x as i128).collect()).collect();
    let mut subset = vec![u8::MAX; masks.len()];
    let mut order = rows.clone();
    let mut rng = SplitRng::with_context(context, seed);
    rng.shuffle(&mut order);
    let mut left = vec![0i128; labels];
    left.copy_from_slice(&positives);
    let mut placed = 0usize;
    let place =
        |r: u32, j: usize, subset: &mut [u8], want_rows: &mut [i128], want: &mut [Vec<i128>], left: &mut [i128]| {
            subset[r as usize] = j as u8;
            want_rows[j] -= w;
            for l in 0..labels {
                if masks[r as usize] >> l & 1 == 1 {
                    want[l][j] -= w;
                    left[l] -= 1;
                }
            }
        };
    while placed < rows.len() {
        // The label with the fewest rows still to place (the lowest on a tie).
        let Some(l) = (0..labels).filter(|&l| left[l] > 0).min_by_key(|&l| (left[l], l)) else { break };
        for &r in &order {
            if subset[r as usize] != u8::MAX || masks[r as usize] >> l & 1 == 0 {
                continue;
            }
            let j = (0..k).max_by_key(|&j| (want[l][j], want_rows[j], std::cmp::Reverse(j))).expect("k > 0");
            place(r, j, &mut subset, &mut want_rows, &mut want, &mut left);
            placed += 1;
        }
    }
    for &r in &order {
        if subset[r as usize] == u8::MAX {
            let j = (0..k).max_by_key(|&j| (want_rows[j], std::cmp::Reverse(j))).expect("k > 0");
            place(r, j, &mut subset, &mut want_rows, &mut want, &mut left);
        }
    }
    repair(masks, labels, &rows, &mut subset, weights, &positives);
    subset
}

/// Moves and exchanges rows while they lower the squared deviations (see
/// the module's notes).
fn repair(masks: &[u64], labels: usize, rows: &[u32], subset: &mut [u8], weights: &[u128], positives: &[i128]) {
    let k = weights.len();
    let w: i128 = weights.iter().sum::<u128>() as i128;
    let n = rows.len() as i128;
    // dev[j][l]: count x W - exact share x W, for labels 0..labels and the size at `labels`.
    let mut dev = vec![vec![0i128; labels + 1]; k];
    for j in 0..k {
        for l in 0..labels {
            dev[j][l] = -positives[l] * weights[j] as i128;
        }
        dev[j][labels] = -n * weights[j] as i128;
    }
    // Rows per (subset, label set), lowest row first.
    let mut sets: Vec<std::collections::BTreeMap<u64, std::collections::BTreeSet<u32>>> = vec![Default::default(); k];
    for &r in rows {
        let j = subset[r as usize] as usize;
        let m = masks[r as usize];
        for (l, d) in dev[j].iter_mut().enumerate().take(labels) {
            *d += (m >> l & 1) as i128 * w;
        }
        dev[j][labels] += w;
        sets[j].entry(m).or_default().insert(r);
    }
    // The change of the sum of squares when label set `m` leaves a and `m2` (if any) arrives.
    let delta = |dev: &[Vec<i128>], a: usize, b: usize, out_of_a: u64, out_of_b: Option<u64>| -> i128 {
        let mut d = 0i128;
        let mut step = |dj: &[i128], l: usize, by: i128| {
            let x = dj[l];
            d += (x + by) * (x + by) - x * x;
        };
        for l in 0..labels {
            let ab = (out_of_a >> l & 1) as i128 - out_of_b.map_or(0, |m| (m >> l & 1) as i128);
            if ab != 0 {
                step(&dev[a], l, -ab * w);
                step(&dev[b], l, ab * w);
            }
        }
        if out_of_b.is_none() {
            step(&dev[a], labels, -w);
            step(&dev[b], labels, w);
        }
        d
    };
    for _ in 0..100_000 {
        // The best single move or exchange over every pair of subsets.
        let mut best: Option<(i128, usize, usize, u64, Option<u64>)> = None;
        for a in 0..k {
            for b in 0..k {
                if a == b {
                    continue;
                }
                for &ma in sets[a].keys() {
                    let d = delta(&dev, a, b, ma, None);
                    if d < 0 && best.is_none_or(|x| d < x.0) {
                        best = Some((d, a, b, ma, None));
                    }
                    if a < b {
                        for &mb in sets[b].keys().filter(|&&mb| mb != ma) {
                            let d = delta(&dev, a, b, ma, Some(mb));
                            if d < 0 && best.is_none_or(|x| d < x.0) {
                                best = Some((d, a, b, ma, Some(mb)));
                            }
                        }
                    }
                }
            }
        }
        let Some((_, a, b, ma, mb)) = best else { return };
        let mut take =
            |from: usize,
             to: usize,
             m: u64,
             dev: &mut Vec<Vec<i128>>,
             sets: &mut Vec<std::collections::BTreeMap<u64, std::collections::BTreeSet<u32>>>| {
                let list = sets[from].get_mut(&m).expect("a row of that label set");
                let r = list.pop_first().expect("non-empty");
                if list.is_empty() {
                    sets[from].remove(&m);
                }
                sets[to].entry(m).or_default().insert(r);
                subset[r as usize] = to as u8;
                // Label l's bit, and the size (index `labels`) always.
                let moved = |l: usize| if l == labels { w } else { (m >> l & 1) as i128 * w };
                for (l, d) in dev[from].iter_mut().enumerate() {
                    *d -= moved(l);
                }
                for (l, d) in dev[to].iter_mut().enumerate() {
                    *d += moved(l);
                }
            };
        take(a, b, ma, &mut dev, &mut sets);
        if let Some(mb) = mb {
            take(b, a, mb, &mut dev, &mut sets);
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn every_label_and_size_within_one_row_on_a_small_table() {
        // 200 rows, 6 labels of different frequencies, 5 equal subsets.
        let masks: Vec<u64> = (0..200u64)
            .map(|i| (0..6).filter(|&l| (i * (l + 3) + l) % (l + 2) == 0).fold(0, |m, l| m | 1 << l))
            .collect();
        let got = assign(&masks, 6, &[true; 200], &[1, 1, 1, 1, 1], 3, "test");
        for j in 0..5u8 {
            let size = got.iter().filter(|&&s| s == j).count() as f64;
            assert!((size - 40.0).abs() < 1.0, "subset {j}: {size}");
            for l in 0..6 {
                let total = masks.iter().filter(|&&m| m >> l & 1 == 1).count() as f64;
                let c = masks.iter().zip(&got).filter(|(&m, &s)| s == j && m >> l & 1 == 1).count() as f64;
                assert!((c - total / 5.0).abs() < 1.0, "label {l} subset {j}: {c} of {total}");
            }
        }
    }
}
