//! Cross-validation folds over the development (non-test) rows.
//!
//! - **k-fold**: the development rows, shuffled, dealt out in turn, so fold
//!   sizes differ by at most one (the k-fold definition of James, Witten,
//!   Hastie and Tibshirani, "An Introduction to Statistical Learning", 5.1.3).
//! - **stratified**: each stratum's rows shuffled and dealt out in turn,
//!   continuing where the previous stratum stopped: every stratum's fold
//!   sizes differ by at most one, and so do the totals.
//! - **grouped**: whole groups, largest first (ties in seeded order), each to
//!   the fold with the fewest rows; with strata, to the fold whose squared
//!   shortfall per stratum it reduces most.
//! - **leave-one-out**: one fold per row (per group with `--group`), the
//!   case k = n of k-fold (same reference, 5.1.2).
//! - **rolling origin** (with `--order-by`): the development rows in time
//!   order cut into k + 1 consecutive blocks (cuts moved to a change of time),
//!   numbered 0..k; fold i validates on block i and trains on blocks 0..i-1,
//!   less the rows with time > start of block i - gap.

use super::strata::Strata;
use crate::error::{Error, Result};
use crate::rng::SplitRng;
use crate::seal::manifest::FoldKind;
use crate::split::structure::Groups;

/// How many folds.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum FoldCount {
    /// k folds.
    K(u32),
    /// Leave-one-out: one fold per row or group.
    LeaveOneOut,
}

impl FoldCount {
    /// Parses `--folds`: an integer of at least 2, or `loo`.
    ///
    /// # Errors
    /// Anything else.
    pub fn parse(text: &str) -> Result<FoldCount> {
        if text.eq_ignore_ascii_case("loo") {
            return Ok(FoldCount::LeaveOneOut);
        }
        match text.parse::<u32>() {
            Ok(k) if k >= 2 => Ok(FoldCount::K(k)),
            Ok(k) => Err(Error::Options(format!("--folds {k}: cross-validation needs at least 2 folds"))),
            Err(_) => Err(Error::Options(format!("--folds `{text}` is not a number of folds (2 or more) or `loo`"))),
        }
    }
}

/// Fold of every row: `u32::MAX` for rows outside the development set.
pub const NO_FOLD: u32 = u32::MAX;

fn fold_rng(seed: u64) -> SplitRng {
    SplitRng::with_context("cleave 2026-12-02 fold shuffle v1", seed)
}

/// Assigns folds to the rows where `dev[row]` is true.
///
/// # Errors
/// More folds than development rows (or groups).
pub fn assign(
    dev: &[bool],
    count: FoldCount,
    strata: &Strata,
    groups: Option<&Groups>,
    times: Option<&[i64]>,
    seed: u64,
) -> Result<(Vec<u32>, FoldKind, u32)> {
    let n = dev.len();
    let dev_rows: Vec<u32> = (0..n as u32).filter(|&r| dev[r as usize]).collect();
    let mut fold = vec![NO_FOLD; n];
    let mut rng = fold_rng(seed);
    // The units folds are made of: rows, or groups.
    let units = match groups {
        Some(g) => {
            let mut seen = vec![false; g.len()];
            for &r in &dev_rows {
                seen[g.row_group[r as usize] as usize] = true;
            }
            seen.iter().filter(|&&s| s).count()
        }
        None => dev_rows.len(),
    };
    let k = match count {
        FoldCount::K(k) => {
            if k as usize > units {
                return Err(Error::Options(format!(
                    "--folds {k}: only {units} development {} to share out",
                    if groups.is_some() { "groups" } else { "rows" }
                )));
            }
            k
        }
        FoldCount::LeaveOneOut => {
            if times.is_some() {
                return Err(Error::Options(
                    "--folds loo with --order-by: leave-one-out ignores time order; give a number of rolling-origin folds".into(),
                ));
            }
            units as u32
        }
    };
    if let Some(times) = times {
        // Rolling origin over k + 1 blocks.
        let mut order = dev_rows.clone();
        match groups {
            None => order.sort_by_key(|&r| (times[r as usize], r)),
            Some(g) => {
                // Whole groups, by their first time.
                let mut first = vec![i64::MAX; g.len()];
                for &r in &dev_rows {
                    let gi = g.row_group[r as usize] as usize;
                    first[gi] = first[gi].min(times[r as usize]);
                }
                order.sort_by_key(|&r| {
                    let gi = g.row_group[r as usize] as usize;
                    (first[gi], g.digests[gi], times[r as usize], r)
                });
            }
        }
        let blocks = k as usize + 1;
        if blocks > units {
            return Err(Error::Options(format!(
                "--folds {k} with --order-by needs {blocks} time blocks, but there are only {units} development units"
            )));
        }
        let key = |i: usize| -> i64 {
            let r = order[i] as usize;
            match groups {
                None => times[r],
                // Within a group the block must not change.
                Some(g) => g.row_group[r] as i64,
            }
        };
        let m = order.len();
        let mut start = 0usize;
        for b in 0..blocks {
            let mut end = if b + 1 == blocks { m } else { ((b + 1) * m).div_ceil(blocks).max(start + 1) };
            while end < m && end > 0 && key(end - 1) == key(end) {
                end += 1;
            }
            for &r in &order[start..end.min(m)] {
                fold[r as usize] = b as u32;
            }
            start = end.min(m);
        }
        let used = fold.iter().filter(|&&f| f != NO_FOLD).map(|&f| f + 1).max().unwrap_or(0);
        if used < blocks as u32 {
            return Err(Error::Options(format!(
                "--folds {k} with --order-by: equal times leave only {used} of {blocks} time blocks"
            )));
        }
        return Ok((fold, FoldKind::RollingOrigin, k));
    }
    if let Some(g) = groups {
        // Groups in the development set, with their rows per stratum.
        let mut members: Vec<Vec<u32>> = vec![Vec::new(); g.len()];
        for &r in &dev_rows {
            members[g.row_group[r as usize] as usize].push(r);
        }
        let mut order: Vec<usize> = (0..g.len()).filter(|&gi| !members[gi].is_empty()).collect();
        rng.shuffle(&mut order);
        if count == FoldCount::LeaveOneOut {
            for (f, &gi) in order.iter().enumerate() {
                for &r in &members[gi] {
                    fold[r as usize] = f as u32;
                }
            }
            return Ok((fold, FoldKind::LeaveOneOut, k));
        }
        order.sort_by_key(|&gi| std::cmp::Reverse(members[gi].len()));
        let kk = k as usize;
        let stratified = strata.sizes.len() > 1;
        let n_strata = strata.sizes.len();
        let mut dev_per_stratum = vec![0u64; n_strata];
        for &r in &dev_rows {
            dev_per_stratum[strata.row_stratum[r as usize] as usize] += 1;
        }
        let mut rows_in = vec![0u64; kk];
        let mut per = vec![vec![0u64; n_strata]; kk];
        for &gi in &order {
            let mut counts: Vec<(usize, u64)> = Vec::new();
            for &r in &members[gi] {
                let s = strata.row_stratum[r as usize] as usize;
                match counts.iter_mut().find(|(t, _)| *t == s) {
                    Some((_, c)) => *c += 1,
                    None => counts.push((s, 1)),
                }
            }
            let size = members[gi].len() as f64;
            let f = if stratified {
                let mut best = (f64::INFINITY, 0usize);
                for f in 0..kk {
                    let mut delta = 0.0;
                    for &(s, c) in &counts {
                        let target = dev_per_stratum[s] as f64 / kk as f64;
                        let before = per[f][s] as f64 - target;
                        delta += c as f64 * (2.0 * before + c as f64) / dev_per_stratum[s] as f64;
                    }
                    let before = rows_in[f] as f64 - dev_rows.len() as f64 / kk as f64;
                    delta += size * (2.0 * before + size) / dev_rows.len() as f64;
                    if delta < best.0 {
                        best = (delta, f);
                    }
                }
                best.1
            } else {
                (0..kk).min_by_key(|&f| (rows_in[f], f)).expect("k >= 2")
            };
            rows_in[f] += members[gi].len() as u64;
            for &(s, c) in &counts {
                per[f][s] += c;
            }
            for &r in &members[gi] {
                fold[r as usize] = f as u32;
            }
        }
        return Ok((fold, if count == FoldCount::LeaveOneOut { FoldKind::LeaveOneOut } else { FoldKind::Grouped }, k));
    }
    if count == FoldCount::LeaveOneOut {
        let mut order = dev_rows.clone();
        rng.shuffle(&mut order);
        for (f, &r) in order.iter().enumerate() {
            fold[r as usize] = f as u32;
        }
        return Ok((fold, FoldKind::LeaveOneOut, k));
    }
    // k-fold, stratified when there are strata: deal each stratum's shuffled
    // rows in turn, continuing from where the last stratum stopped.
    let n_strata = strata.sizes.len();
    let mut by_stratum: Vec<Vec<u32>> = vec![Vec::new(); n_strata];
    for &r in &dev_rows {
        by_stratum[strata.row_stratum[r as usize] as usize].push(r);
    }
    let mut next = 0u32;
    for rows in by_stratum.iter_mut() {
        rng.shuffle(rows);
        for &r in rows.iter() {
            fold[r as usize] = next;
            next = (next + 1) % k;
        }
    }
    Ok((fold, if n_strata > 1 { FoldKind::Stratified } else { FoldKind::KFold }, k))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn parse_fold_counts() {
        assert_eq!(FoldCount::parse("5").unwrap(), FoldCount::K(5));
        assert_eq!(FoldCount::parse("LOO").unwrap(), FoldCount::LeaveOneOut);
        assert!(FoldCount::parse("1").unwrap_err().to_string().contains("at least 2"));
        assert!(FoldCount::parse("x").is_err());
    }

    use proptest::prelude::*;
    use std::collections::HashMap;

    use crate::digest::RowDigest;

    fn strata(classes: &[u32]) -> Strata {
        let n = classes.iter().copied().max().unwrap_or(0) as usize + 1;
        let mut sizes = vec![0u64; n];
        for &c in classes {
            sizes[c as usize] += 1;
        }
        Strata {
            row_stratum: classes.to_vec(),
            labels: (0..n).map(|i| i.to_string()).collect(),
            sizes,
            columns: vec![],
        }
    }

    fn sizes(fold: &[u32], k: u32) -> Vec<u64> {
        let mut s = vec![0u64; k as usize];
        for &f in fold.iter().filter(|&&f| f != NO_FOLD) {
            s[f as usize] += 1;
        }
        s
    }

    proptest! {
        // k-fold as defined in James et al., "An Introduction to Statistical
        // Learning", 5.1.3: the development rows fall into k folds of about
        // equal size; each row is validated exactly once, and each training
        // set (the other k - 1 folds) holds (k - 1)/k of the rows.
        #[test]
        fn k_fold_definition(dev in proptest::collection::vec(any::<bool>(), 10..300), k in 2u32..10, seed in any::<u64>()) {
            let n = dev.iter().filter(|&&d| d).count();
            prop_assume!(n >= k as usize);
            let (fold, kind, kk) = assign(&dev, FoldCount::K(k), &crate::split::strata::single(dev.len() as u64), None, None, seed).unwrap();
            prop_assert_eq!(kind, FoldKind::KFold);
            prop_assert_eq!(kk, k);
            for (d, f) in dev.iter().zip(&fold) {
                prop_assert_eq!(*d, *f != NO_FOLD, "every development row in exactly one fold, no other row in any");
            }
            let s = sizes(&fold, k);
            for &size in &s {
                let train = (n as u64 - size) as f64;
                prop_assert!((train - (k - 1) as f64 * n as f64 / k as f64).abs() < 1.0);
            }
            prop_assert!(s.iter().max().unwrap() - s.iter().min().unwrap() <= 1);
        }

        #[test]
        fn stratified_folds_balance_every_stratum(classes in proptest::collection::vec(0u32..4, 20..300), k in 2u32..6, seed in any::<u64>()) {
            let dev = vec![true; classes.len()];
            let st = strata(&classes);
            let (fold, _, _) = assign(&dev, FoldCount::K(k), &st, None, None, seed).unwrap();
            for c in 0..st.sizes.len() as u32 {
                let only: Vec<u32> = fold.iter().zip(&classes).filter(|(_, &x)| x == c).map(|(f, _)| *f).collect();
                let s = sizes(&only, k);
                prop_assert!(s.iter().max().unwrap() - s.iter().min().unwrap() <= 1, "stratum {} sizes {:?}", c, s);
            }
            let s = sizes(&fold, k);
            prop_assert!(s.iter().max().unwrap() - s.iter().min().unwrap() <= 1);
        }

        #[test]
        fn grouped_folds_keep_groups_whole(ids in proptest::collection::vec(0u8..30, 20..300), k in 2u32..5, seed in any::<u64>()) {
            let mut g = Groups::new();
            let digests: Vec<RowDigest> = ids.iter().map(|&i| [i; 16]).collect();
            g.push(&digests);
            prop_assume!(g.len() >= k as usize);
            let dev = vec![true; ids.len()];
            let (fold, kind, _) = assign(&dev, FoldCount::K(k), &crate::split::strata::single(ids.len() as u64), Some(&g), None, seed).unwrap();
            prop_assert_eq!(kind, FoldKind::Grouped);
            let mut of = HashMap::new();
            for (row, &f) in fold.iter().enumerate() {
                prop_assert_eq!(*of.entry(g.row_group[row]).or_insert(f), f);
            }
        }

        // Leave-one-out is k-fold with k = n (same reference, 5.1.2).
        #[test]
        fn leave_one_out_is_k_equals_n(dev in proptest::collection::vec(any::<bool>(), 2..100), seed in any::<u64>()) {
            let n = dev.iter().filter(|&&d| d).count();
            prop_assume!(n >= 2);
            let (fold, kind, k) = assign(&dev, FoldCount::LeaveOneOut, &crate::split::strata::single(dev.len() as u64), None, None, seed).unwrap();
            prop_assert_eq!(kind, FoldKind::LeaveOneOut);
            prop_assert_eq!(k as usize, n);
            prop_assert!(sizes(&fold, k).iter().all(|&s| s == 1));
        }

        // Rolling origin (Tashman 2000, "Out-of-sample tests of forecasting
        // accuracy", International Journal of Forecasting; cited from
        // memory): fold i validates on block i and trains on blocks before
        // it, so it never trains on a row later than those it validates on.
        #[test]
        fn rolling_origin_never_trains_on_the_future(times in proptest::collection::vec(0i64..1000, 20..300), k in 2u32..6) {
            let dev = vec![true; times.len()];
            let Ok((fold, kind, _)) = assign(&dev, FoldCount::K(k), &crate::split::strata::single(times.len() as u64), None, Some(&times), 0) else { return Ok(()); };
            prop_assert_eq!(kind, FoldKind::RollingOrigin);
            for i in 1..=k {
                let validate_min = times.iter().zip(&fold).filter(|(_, &f)| f == i).map(|(t, _)| *t).min().unwrap();
                let train_max = times.iter().zip(&fold).filter(|(_, &f)| f < i).map(|(t, _)| *t).max().unwrap();
                prop_assert!(train_max < validate_min, "fold {}: trains up to {}, validates from {}", i, train_max, validate_min);
            }
        }
    }
}
