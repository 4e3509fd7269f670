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

/// The fold design: how many folds, of which kind.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum FoldCount {
    /// k folds.
    K(u32),
    /// Leave-one-out: one fold per row or group.
    LeaveOneOut,
    /// Purged k-fold (with `--order-by`): k consecutive time blocks, each
    /// validated once, trained on every other block less the rows whose
    /// label interval overlaps the validated one, and the embargo.
    Purged(u32),
    /// Combinatorial purged cross-validation: n time blocks, every choice of
    /// k of them validated once (Lopez de Prado 2018, ch. 12).
    Cpcv {
        /// Blocks.
        n: u32,
        /// Blocks validated per split.
        k: u32,
    },
    /// Windows in time order (`--window`).
    Window(Window),
}

/// A window design over the development rows in time order, in rows.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Window {
    /// Expanding (training from the first row) rather than sliding.
    pub expanding: bool,
    /// Training rows (sliding), or the first split's (expanding).
    pub train: u64,
    /// Validated rows per split.
    pub test: u64,
    /// Rows from one split's start to the next one's.
    pub step: u64,
    /// Rows left out between training and validation.
    pub gap: u64,
}

impl FoldCount {
    /// Parses `--folds`: an integer of at least 2, `loo`, `purged:K` or
    /// `cpcv:N,K`.
    ///
    /// # Errors
    /// Anything else.
    pub fn parse(text: &str) -> Result<FoldCount> {
        let count = |t: &str, what: &str| -> Result<u32> {
            match t.trim().parse::<u32>() {
                Ok(k) if k >= 2 => Ok(k),
                Ok(k) => Err(Error::Options(format!("--folds {text}: {what} needs at least 2, got {k}"))),
                Err(_) => Err(Error::Options(format!("--folds {text}: `{t}` is not a number"))),
            }
        };
        if text.eq_ignore_ascii_case("loo") {
            return Ok(FoldCount::LeaveOneOut);
        }
        if let Some(k) = text.strip_prefix("purged:") {
            return Ok(FoldCount::Purged(count(k, "purged k-fold")?));
        }
        if let Some(nk) = text.strip_prefix("cpcv:") {
            let (n, k) = nk.split_once(',').ok_or_else(|| {
                Error::Options(format!("--folds {text}: cpcv takes N,K (blocks, blocks validated per split)"))
            })?;
            let n = count(n, "cpcv's number of blocks")?;
            let k: u32 =
                k.trim().parse().map_err(|_| Error::Options(format!("--folds {text}: `{k}` is not a number")))?;
            if k == 0 || k >= n {
                return Err(Error::Options(format!("--folds {text}: K must be at least 1 and less than N")));
            }
            if binomial(n, k) > MAX_SPLITS as u64 {
                return Err(Error::Options(format!(
                    "--folds {text}: {} splits; at most {MAX_SPLITS} are written",
                    binomial(n, k)
                )));
            }
            return Ok(FoldCount::Cpcv { n, k });
        }
        match text.parse::<u32>() {
            Ok(k) if k >= 2 => Ok(FoldCount::K(k)),
            Ok(k) => Err(Error::Options(format!("--folds {k}: cross-validation needs at least 2 folds"))),
            Err(_) => Err(Error::Options(format!(
                "--folds `{text}` is not a number of folds (2 or more), `loo`, `purged:K` or `cpcv:N,K`"
            ))),
        }
    }

    /// Whether the design needs `--order-by`.
    pub fn needs_time(self) -> bool {
        matches!(self, FoldCount::Purged(_) | FoldCount::Cpcv { .. } | FoldCount::Window(_))
    }
}

/// Splits (and so membership columns) a design may have.
pub const MAX_SPLITS: usize = 256;

/// n choose k.
pub fn binomial(n: u32, k: u32) -> u64 {
    (0..k as u64).fold(1u64, |acc, i| acc.saturating_mul(n as u64 - i) / (i + 1))
}

/// The name of repeat `r`'s fold column (`r` from 1; repeat 0's is the fold column).
pub fn repeat_column(fold_column: &str, r: usize) -> String {
    format!("{fold_column}_r{}", r + 1)
}

/// The seed of fold repeat `r` (repeat 0 uses the split's seed).
pub fn repeat_seed(seed: u64, r: u32) -> u64 {
    if r == 0 {
        return seed;
    }
    let mut material = seed.to_le_bytes().to_vec();
    material.extend_from_slice(&r.to_le_bytes());
    let key = blake3::derive_key("cleave 2026-12-04 fold repeat v1", &material);
    u64::from_le_bytes(key[..8].try_into().expect("8 bytes"))
}

/// The name of split `i`'s membership column.
pub fn membership_column(fold_column: &str, i: usize) -> String {
    format!("{fold_column}_{i}")
}

/// A row's part in one split of a fold design.
pub const OUT: u8 = 0;
/// Trains in the split.
pub const TRAIN: u8 = 1;
/// Is validated in the split.
pub const VALIDATE: u8 = 2;

/// The explicit membership of every split of a fold design: which
/// development rows train, which are validated, which are left out (by the
/// gap, purging or the embargo).
pub struct Membership {
    /// Per split, every row's part ([`OUT`] for rows outside development).
    pub status: Vec<Vec<u8>>,
    /// Per split, the blocks or folds it validates (empty for windows).
    pub validates: Vec<Vec<u32>>,
    /// CPCV: per path, for each block, the split whose validation of it
    /// the path uses.
    pub paths: Vec<Vec<u32>>,
}

/// Time intervals of the rows: start (the order column) and, with
/// `--until`, end; the gap and embargo in the column's units.
#[derive(Clone, Copy)]
pub struct Intervals<'a> {
    /// Every row's start.
    pub start: &'a [i64],
    /// Every row's end (`None`: the start).
    pub end: Option<&'a [i64]>,
    /// Rows of earlier blocks with end > a validated start - gap are out.
    pub gap: i64,
    /// Training rows starting within this after a validated block's end are out.
    pub embargo: i64,
}

impl Intervals<'_> {
    fn end(&self, row: usize) -> i64 {
        self.end.map_or(self.start[row], |e| e[row])
    }
}

/// The membership of a design whose every row validates in one block or
/// fold (`fold[row]`): k-fold and its kinds, rolling origin, purged k-fold
/// and CPCV. `None` for leave-one-out (its fold column says all).
pub fn membership(
    count: FoldCount,
    kind: FoldKind,
    fold: &[u32],
    k: u32,
    intervals: Option<Intervals<'_>>,
) -> Option<Membership> {
    let n = fold.len();
    let mut out = Membership { status: Vec::new(), validates: Vec::new(), paths: Vec::new() };
    match (count, kind) {
        (_, FoldKind::LeaveOneOut) => return None,
        (_, FoldKind::RollingOrigin) => {
            let iv = intervals.expect("rolling origin has times");
            let starts = block_starts(fold, k as usize + 1, iv.start);
            for b in 1..=k {
                let s = starts[b as usize];
                let status = (0..n)
                    .map(|r| match fold[r] {
                        NO_FOLD => OUT,
                        f if f == b => VALIDATE,
                        f if f < b && iv.end(r) < s && iv.end(r) <= s.saturating_sub(iv.gap) => TRAIN,
                        _ => OUT,
                    })
                    .collect();
                out.status.push(status);
                out.validates.push(vec![b]);
            }
        }
        (FoldCount::Purged(_), _) => {
            let iv = intervals.expect("purged folds have times");
            for b in 0..k {
                out.status.push(purged(fold, &[b], iv));
                out.validates.push(vec![b]);
            }
        }
        (FoldCount::Cpcv { n: blocks, k: chosen }, _) => {
            let iv = intervals.expect("cpcv has times");
            for set in combinations(blocks, chosen) {
                out.status.push(purged(fold, &set, iv));
                out.validates.push(set);
            }
            // Path j takes, for every block, the j-th split that validates it.
            let per_block = binomial(blocks - 1, chosen - 1) as usize;
            out.paths = (0..per_block)
                .map(|j| {
                    (0..blocks)
                        .map(|g| {
                            let s = out.validates.iter().enumerate().filter(|(_, v)| v.contains(&g)).nth(j);
                            s.expect("each block validated in C(n-1, k-1) splits").0 as u32
                        })
                        .collect()
                })
                .collect();
        }
        _ => {
            for f in 0..k {
                out.status.push(
                    fold.iter()
                        .map(|&x| {
                            if x == NO_FOLD {
                                OUT
                            } else if x == f {
                                VALIDATE
                            } else {
                                TRAIN
                            }
                        })
                        .collect(),
                );
                out.validates.push(vec![f]);
            }
        }
    }
    Some(out)
}

/// Every k-subset of 0..n in lexicographic order.
fn combinations(n: u32, k: u32) -> Vec<Vec<u32>> {
    let mut out = Vec::new();
    let mut c: Vec<u32> = (0..k).collect();
    loop {
        out.push(c.clone());
        let Some(i) = (0..k as usize).rev().find(|&i| c[i] < n - k + i as u32) else { return out };
        c[i] += 1;
        for j in i + 1..k as usize {
            c[j] = c[j - 1] + 1;
        }
    }
}

/// The earliest start of each block.
fn block_starts(fold: &[u32], blocks: usize, start: &[i64]) -> Vec<i64> {
    let mut s = vec![i64::MAX; blocks];
    for (r, &f) in fold.iter().enumerate() {
        if f != NO_FOLD {
            s[f as usize] = s[f as usize].min(start[r]);
        }
    }
    s
}

/// One split validating `blocks`: the other development rows train, less
/// those whose interval [start, end] meets a validated block's interval
/// (purging, Lopez de Prado 2018, 7.4.1) and those starting within the
/// embargo after a validated block's end (7.4.2).
fn purged(fold: &[u32], blocks: &[u32], iv: Intervals<'_>) -> Vec<u8> {
    // Each validated block's interval: its earliest start, its latest end.
    let spans: Vec<(i64, i64)> = blocks
        .iter()
        .map(|&b| {
            let rows = fold.iter().enumerate().filter(|(_, &f)| f == b).map(|(r, _)| r);
            rows.fold((i64::MAX, i64::MIN), |(lo, hi), r| (lo.min(iv.start[r]), hi.max(iv.end(r))))
        })
        .collect();
    (0..fold.len())
        .map(|r| {
            let f = fold[r];
            if f == NO_FOLD {
                return OUT;
            }
            if blocks.contains(&f) {
                return VALIDATE;
            }
            let (s, e) = (iv.start[r], iv.end(r));
            let meets = spans.iter().any(|&(lo, hi)| s <= hi && e >= lo);
            let embargoed = iv.embargo > 0 && spans.iter().any(|&(_, hi)| s > hi && s <= hi.saturating_add(iv.embargo));
            if meets || embargoed {
                OUT
            } else {
                TRAIN
            }
        })
        .collect()
}

/// The splits of a window design over the development rows in time order
/// (ties by row): split i trains on rows [a, b) and validates [b + gap,
/// b + gap + test), with a = i * step (sliding) or 0 (expanding) and
/// b = train + i * step; splits stop where validation would pass the last row.
///
/// # Errors
/// Fewer development rows than one split needs, or more splits than are written.
pub fn windows(dev: &[bool], times: &[i64], w: Window) -> Result<Membership> {
    let mut order: Vec<u32> = (0..dev.len() as u32).filter(|&r| dev[r as usize]).collect();
    order.sort_by_key(|&r| (times[r as usize], r));
    let m = order.len() as u64;
    let mut out = Membership { status: Vec::new(), validates: Vec::new(), paths: Vec::new() };
    let mut i = 0u64;
    loop {
        let b = w.train + i * w.step;
        let a = if w.expanding { 0 } else { i * w.step };
        let (v0, v1) = (b + w.gap, b + w.gap + w.test);
        if v1 > m {
            break;
        }
        if out.status.len() == MAX_SPLITS {
            return Err(Error::Options(format!("--window: more than {MAX_SPLITS} splits; take a larger --step")));
        }
        let mut status = vec![OUT; dev.len()];
        for (pos, &r) in order.iter().enumerate() {
            let pos = pos as u64;
            if (a..b).contains(&pos) {
                status[r as usize] = TRAIN;
            } else if (v0..v1).contains(&pos) {
                status[r as usize] = VALIDATE;
            }
        }
        out.status.push(status);
        out.validates.push(Vec::new());
        i += 1;
    }
    if out.status.is_empty() {
        return Err(Error::Options(format!(
            "--window: {m} development rows are fewer than one split needs ({} to train, {} gap, {} to validate)",
            w.train, w.gap, w.test
        )));
    }
    Ok(out)
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
    if count.needs_time() && times.is_none() {
        return Err(Error::Options("this fold design is laid out in time: give --order-by".into()));
    }
    let k = match count {
        FoldCount::Window(_) => return Ok((vec![NO_FOLD; n], FoldKind::SlidingWindow, 0)),
        FoldCount::Purged(k) | FoldCount::Cpcv { n: k, .. } => {
            if k as usize > units {
                return Err(Error::Options(format!(
                    "--folds: {k} time blocks but only {units} development {}",
                    if groups.is_some() { "groups" } else { "rows" }
                )));
            }
            k
        }
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
        // Time blocks: k + 1 for rolling origin, k for purged and combinatorial designs.
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
        let (blocks, kind) = match count {
            FoldCount::Purged(_) => (k as usize, FoldKind::Purged),
            FoldCount::Cpcv { .. } => (k as usize, FoldKind::CombinatorialPurged),
            _ => (k as usize + 1, FoldKind::RollingOrigin),
        };
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
        return Ok((fold, kind, k));
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

    // Combinatorial purged cross-validation with N = 6 blocks, K = 2
    // validated per split (Lopez de Prado 2018, 12.4): C(6, 2) = 15 splits,
    // every block validated in C(5, 1) = 5 of them, and 15 * 2 / 6 = 5 paths,
    // each using every block once.
    #[test]
    fn cpcv_six_two_has_fifteen_splits_and_five_paths() {
        let times: Vec<i64> = (0..60).collect();
        let dev = vec![true; 60];
        let count = FoldCount::parse("cpcv:6,2").unwrap();
        let (fold, kind, k) = assign(&dev, count, &crate::split::strata::single(60), None, Some(&times), 0).unwrap();
        assert_eq!((kind, k), (FoldKind::CombinatorialPurged, 6));
        let m = membership(count, kind, &fold, k, Some(Intervals { start: &times, end: None, gap: 0, embargo: 0 }))
            .unwrap();
        assert_eq!(m.status.len(), 15);
        for b in 0..6 {
            assert_eq!(m.validates.iter().filter(|v| v.contains(&b)).count(), 5, "block {b}");
        }
        assert_eq!(m.paths.len(), 5);
        for path in &m.paths {
            for (b, &s) in path.iter().enumerate() {
                assert!(m.validates[s as usize].contains(&(b as u32)));
            }
        }
        // Every (block, split) validation is used by exactly one path.
        let mut used: Vec<(usize, u32)> = m.paths.iter().flat_map(|p| p.iter().copied().enumerate()).collect();
        used.sort();
        used.dedup();
        assert_eq!(used.len(), 30);
    }

    // Sliding windows over rows 0..19, train 7, test 4, gap 2, step 3:
    // [0-6 | 9-12], [3-9 | 12-15], [6-12 | 15-18] (a worked example from a
    // public discussion of time-series splitters, from memory).
    #[test]
    fn sliding_windows_worked_example() {
        let times: Vec<i64> = (0..20).collect();
        let w = Window { expanding: false, train: 7, test: 4, step: 3, gap: 2 };
        let m = windows(&[true; 20], &times, w).unwrap();
        let ranges: Vec<((i64, i64), (i64, i64))> = m
            .status
            .iter()
            .map(|st| {
                let of = |want| {
                    let rows: Vec<i64> = (0..20).filter(|&r| st[r] == want).map(|r| r as i64).collect();
                    (rows[0], *rows.last().unwrap())
                };
                (of(TRAIN), of(VALIDATE))
            })
            .collect();
        assert_eq!(ranges, [((0, 6), (9, 12)), ((3, 9), (12, 15)), ((6, 12), (15, 18))]);
        let grown = windows(&[true; 20], &times, Window { expanding: true, ..w }).unwrap();
        assert_eq!(grown.status[2].iter().filter(|&&s| s == TRAIN).count(), 13, "expanding: rows 0 to 12");
    }

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

        // Purging (Lopez de Prado 2018, "Advances in Financial Machine
        // Learning", 7.4.1): no training interval meets the interval of a
        // block its split validates, and every development row is in exactly
        // one of train, validate and out in every split.
        #[test]
        fn purged_training_never_meets_a_validated_interval(
            rows in proptest::collection::vec((0i64..200, 0i64..15), 12..120),
            k in 2u32..5,
            embargo in 0i64..6,
        ) {
            let start: Vec<i64> = rows.iter().map(|r| r.0).collect();
            let end: Vec<i64> = rows.iter().map(|r| r.0 + r.1).collect();
            let dev = vec![true; rows.len()];
            let single = crate::split::strata::single(rows.len() as u64);
            let Ok((fold, kind, kk)) = assign(&dev, FoldCount::Purged(k), &single, None, Some(&start), 0) else { return Ok(()); };
            prop_assert_eq!(kind, FoldKind::Purged);
            let iv = Intervals { start: &start, end: Some(&end), gap: 0, embargo };
            let m = membership(FoldCount::Purged(k), kind, &fold, kk, Some(iv)).unwrap();
            prop_assert_eq!(m.status.len(), k as usize);
            for (s, status) in m.status.iter().enumerate() {
                let validated: Vec<usize> = (0..rows.len()).filter(|&r| status[r] == VALIDATE).collect();
                prop_assert!(validated.iter().all(|&r| fold[r] == s as u32));
                let lo = validated.iter().map(|&r| start[r]).min().unwrap();
                let hi = validated.iter().map(|&r| end[r]).max().unwrap();
                for r in (0..rows.len()).filter(|&r| status[r] == TRAIN) {
                    prop_assert!(end[r] < lo || start[r] > hi, "split {}: row [{}, {}] trains against [{}, {}]", s, start[r], end[r], lo, hi);
                    prop_assert!(!(start[r] > hi && start[r] <= hi + embargo), "split {}: row starting {} in the embargo after {}", s, start[r], hi);
                }
            }
        }

        // Rolling origin through the membership columns: no split trains on
        // a row later than a row it validates, with or without a gap.
        #[test]
        fn rolling_membership_never_trains_on_the_future(times in proptest::collection::vec(0i64..500, 20..200), k in 2u32..5, gap in 0i64..20) {
            let dev = vec![true; times.len()];
            let single = crate::split::strata::single(times.len() as u64);
            let Ok((fold, kind, kk)) = assign(&dev, FoldCount::K(k), &single, None, Some(&times), 0) else { return Ok(()); };
            let m = membership(FoldCount::K(k), kind, &fold, kk, Some(Intervals { start: &times, end: None, gap, embargo: 0 })).unwrap();
            for status in &m.status {
                let first_validated = (0..times.len()).filter(|&r| status[r] == VALIDATE).map(|r| times[r]).min().unwrap();
                for r in (0..times.len()).filter(|&r| status[r] == TRAIN) {
                    prop_assert!(times[r] < first_validated && times[r] <= first_validated - gap);
                }
            }
        }
    }
}
