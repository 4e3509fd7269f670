//! Assignment: every row's partition and fold, from what pass one learnt.
//! Time order, a stable hash, groups, or strata decide, in that order of
//! precedence; folds are then dealt over the development rows.

use super::config::{Copies, Opened, SplitConfig};
use super::folds;
use super::multilabel;
use super::pass_one::RowFacts;
use super::ratio::Ratios;
use super::rounding;
use super::strata::Strata;
use super::structure::{self, parse_gap, TimePlan};
use super::DROPPED;
use crate::digest::RowDigest;
use crate::error::{Error, Result};
use crate::rng::SplitRng;
use crate::seal::manifest::{FoldKind, Partition, ShortStratum};

/// Every row's partition and fold, and what the split reports of them.
pub(super) struct Assignment {
    /// The partitions, train first, test last.
    pub(super) partitions: Vec<Partition>,
    /// Every row's partition index, or [`DROPPED`].
    pub(super) partition: Vec<u8>,
    /// The time plan, for splits in time order.
    pub(super) time_plan: Option<TimePlan>,
    /// The gap in the order column's units (0 without `--gap`).
    pub(super) gap: i64,
    /// Rows per partition of each stratum.
    pub(super) counts: Vec<Vec<u64>>,
    /// Rows per partition.
    pub(super) totals: Vec<u64>,
    /// Every row's fold ([`super::NO_FOLD`] outside them), their kind and count.
    pub(super) folds: Option<(Vec<u32>, FoldKind, u32)>,
    /// The folds of every further repeat (`--repeats`).
    pub(super) repeats: Vec<Vec<u32>>,
    /// Every split's explicit membership (none for leave-one-out).
    pub(super) membership: Option<folds::Membership>,
    /// Strata too small to reach every partition.
    pub(super) short: Vec<ShortStratum>,
    /// Warnings for the user (one line for all short strata).
    pub(super) warnings: Vec<String>,
}

impl Assignment {
    /// Index of the test partition (the last).
    pub(super) fn test_index(&self) -> usize {
        self.partitions.len() - 1
    }
}

/// Decides every row's partition and fold.
///
/// # Errors
/// A gap that does not parse for the order column, a partition left empty,
/// and more folds than development rows or groups.
pub(super) fn decide(cfg: &SplitConfig, opened: &Opened, facts: &RowFacts) -> Result<Assignment> {
    let rows = facts.rows;
    let strata = &facts.strata;
    let partitions = cfg.ratios.partitions().to_vec();
    let k = partitions.len();
    let gap = match (&cfg.gap, &facts.times) {
        (Some(g), Some((_, kind))) => parse_gap(g, *kind)?,
        _ => 0,
    };
    let mut time_plan = None;
    // The units rows are assigned in: groups joined with copies, or groups.
    let units = facts.units.as_ref().or(facts.groups.as_ref());
    let partition: Vec<u8> = if let Some((times, _)) = &facts.times {
        let plan = structure::assign_time(times, facts.ends.as_deref(), units, &cfg.ratios, gap)?;
        let p = plan.partition.clone();
        time_plan = Some(plan);
        p
    } else if cfg.stable {
        match &facts.groups {
            Some(groups) => {
                let per_group = structure::assign_stable(&groups.digests, &cfg.ratios, cfg.seed);
                groups.row_group.iter().map(|&g| per_group[g as usize]).collect()
            }
            None => structure::assign_stable(facts.stable_keys.as_deref().expect("stable keys"), &cfg.ratios, cfg.seed),
        }
    } else if let Some(sets) = &facts.label_sets {
        let all = vec![true; sets.len()];
        let context = "cleave 2026-12-04 multilabel partitions v1";
        multilabel::assign(sets, cfg.stratify_labels.len(), &all, cfg.ratios.weights(), cfg.seed, context)
    } else if let Some(units) = units {
        structure::assign_grouped(units, strata, &cfg.ratios, cfg.seed)
    } else {
        let ranks = facts.rank_digests.as_deref().map(|d| (d, cfg.copies == Copies::Apart));
        stratified(strata, &cfg.ratios, cfg.seed, ranks).partition
    };
    let counts = tally(strata, &partition, k);
    let totals: Vec<u64> = (0..k).map(|p| counts.iter().map(|c| c[p]).sum::<u64>()).collect();
    if let Some(p) = totals.iter().position(|&t| t == 0) {
        return Err(Error::Options(format!(
            "too few rows: {rows} rows at --ratios {} leave the {} partition empty",
            cfg.ratios.text().join(","),
            partitions[p]
        )));
    }
    refuse_far_shares(cfg, facts, &totals, time_plan.as_ref())?;
    let (folds, repeats, membership) = match &cfg.folds {
        Some((count, _)) => fold_plan(cfg, facts, *count, &partition, units, gap)?,
        None => (None, Vec::new(), None),
    };

    let mut short = Vec::new();
    if !opened.stratify.is_empty() {
        for (s, c) in counts.iter().enumerate() {
            let missing: Vec<Partition> = partitions.iter().zip(c).filter(|(_, &c)| c == 0).map(|(p, _)| *p).collect();
            if !missing.is_empty() {
                short.push(ShortStratum {
                    stratum: strata.labels[s].clone(),
                    rows: strata.sizes[s],
                    missing_from: missing,
                });
            }
        }
    }
    let warnings = short_warning(&short, &partitions).into_iter().collect();
    Ok(Assignment {
        partitions,
        partition,
        time_plan,
        gap,
        counts,
        totals,
        folds,
        repeats,
        membership,
        short,
        warnings,
    })
}

/// The folds a design deals over the development rows: the first repeat's
/// folds with their kind and count, the folds of further repeats, and
/// every split's membership.
type FoldPlan = (Option<(Vec<u32>, FoldKind, u32)>, Vec<Vec<u32>>, Option<folds::Membership>);

/// Deals the folds of `count` over the development rows of `partition`
/// (see [`FoldPlan`]).
///
/// # Errors
/// More folds than development rows or units, and a design the data cannot lay out.
fn fold_plan(
    cfg: &SplitConfig,
    facts: &RowFacts,
    count: folds::FoldCount,
    partition: &[u8],
    units: Option<&super::structure::Groups>,
    gap: i64,
) -> Result<FoldPlan> {
    let test_index = cfg.ratios.partitions().len() - 1;
    let strata = &facts.strata;
    let mut membership;
    let mut repeats = Vec::new();
    let dev: Vec<bool> = partition.iter().map(|&p| p != DROPPED && (p as usize) < test_index).collect();
    let times = facts.times.as_ref().map(|(t, _)| t.as_slice());
    let deal = |seed: u64| -> Result<(Vec<u32>, FoldKind, u32)> {
        Ok(match (&facts.label_sets, &count) {
            (Some(sets), folds::FoldCount::K(k)) => {
                let dev_rows = dev.iter().filter(|&&d| d).count();
                if *k as usize > dev_rows {
                    return Err(Error::Options(format!("--folds {k}: only {dev_rows} development rows to share out")));
                }
                let context = "cleave 2026-12-04 multilabel folds v1";
                let subset =
                    multilabel::assign(sets, cfg.stratify_labels.len(), &dev, &vec![1; *k as usize], seed, context);
                let fold = subset.iter().map(|&f| if f == u8::MAX { folds::NO_FOLD } else { f as u32 }).collect();
                (fold, FoldKind::Multilabel, *k)
            }
            _ => folds::assign(&dev, count, strata, units, times, seed)?,
        })
    };
    let (fold, kind, k) = deal(cfg.seed)?;
    for r in 1..cfg.repeats {
        repeats.push(deal(folds::repeat_seed(cfg.seed, r))?.0);
    }
    let embargo = match (&cfg.embargo, &facts.times) {
        (Some(e), Some((_, kind))) => parse_gap(e, *kind)?,
        _ => 0,
    };
    let intervals = times.map(|start| folds::Intervals { start, end: facts.ends.as_deref(), gap, embargo });
    let design = match count {
        folds::FoldCount::Window(w) => {
            let m = folds::windows(&dev, times.expect("windows have times"), w)?;
            let kind = if w.expanding { FoldKind::ExpandingWindow } else { FoldKind::SlidingWindow };
            let splits = m.status.len() as u32;
            membership = Some(m);
            (fold, kind, splits)
        }
        _ => {
            membership = folds::membership(count, kind, &fold, k, intervals);
            // Each repeat's splits follow the first one's.
            for again in &repeats {
                if let (Some(m), Some(more)) =
                    (membership.as_mut(), folds::membership(count, kind, again, k, intervals))
                {
                    m.status.extend(more.status);
                    m.validates.extend(more.validates);
                }
            }
            (fold, kind, k)
        }
    };
    Ok((Some(design), repeats, membership))
}

/// Refuses an assignment in which a partition ends with less than
/// `--min-share` of its asked share, naming the cause and every
/// partition's achieved share.
fn refuse_far_shares(cfg: &SplitConfig, facts: &RowFacts, totals: &[u64], time_plan: Option<&TimePlan>) -> Result<()> {
    let rows = facts.rows;
    let partitions = cfg.ratios.partitions();
    let far = (0..totals.len()).find(|&p| (totals[p] as f64) < cfg.min_share * cfg.ratios.share(p) * rows as f64);
    let Some(p) = far else { return Ok(()) };
    let achieved: Vec<String> = partitions
        .iter()
        .zip(totals)
        .zip(cfg.ratios.text())
        .map(|((name, &t), asked)| format!("{name} {t} ({:.1}%, asked {asked})", 100.0 * t as f64 / rows as f64))
        .collect();
    let dropped_by_group: u64 = time_plan.map_or(0, |t| t.dropped_by_group.iter().sum());
    let dropped_by_gap: u64 = time_plan.map_or(0, |t| t.dropped_by_gap.iter().sum());
    let cause = if dropped_by_group > 0 {
        format!(
            "{dropped_by_group} rows are left out because their group started in an earlier partition: groups of `{}` span much of the time range",
            cfg.group.join(",")
        )
    } else if dropped_by_gap > 0 {
        format!("--gap leaves out {dropped_by_gap} rows")
    } else if let Some(g) = &facts.groups {
        let largest = g.sizes.iter().max().copied().unwrap_or(0);
        format!("the groups are too few or too large to share out (the largest holds {largest} rows)")
    } else if time_plan.is_some() {
        "too many rows share the same times".to_string()
    } else {
        "too few rows".to_string()
    };
    Err(Error::Options(format!(
        "the {} partition would end far from its asked share ({}), under --min-share {} of it: {cause}",
        partitions[p],
        achieved.join(", "),
        cfg.min_share
    )))
}

/// Short strata the manifest and the JSON report list by name (all are
/// counted).
pub(super) const LISTED_SHORT: usize = 1_000;

/// One line for the strata too small to reach every partition: the
/// stratum itself when there is one, else the counts (the list is in the
/// manifest and the JSON report).
fn short_warning(short: &[ShortStratum], partitions: &[Partition]) -> Option<String> {
    match short {
        [] => None,
        [one] => Some(format!(
            "stratum `{}` has {} row(s), too few to reach every partition: none in {}",
            one.stratum,
            one.rows,
            one.missing_from.iter().map(|p| p.name()).collect::<Vec<_>>().join(", ")
        )),
        many => {
            let rows: u64 = many.iter().map(|s| s.rows).sum();
            let per: Vec<String> = partitions
                .iter()
                .map(|p| (p, many.iter().filter(|s| s.missing_from.contains(p)).count()))
                .filter(|&(_, n)| n > 0)
                .map(|(p, n)| format!("{n} none in {}", p.name()))
                .collect();
            let listed = if many.len() > LISTED_SHORT {
                format!("the manifest counts them and lists the first {LISTED_SHORT} under strata.short")
            } else {
                "the manifest lists them under strata.short".into()
            };
            Some(format!(
                "{} strata ({rows} rows) are too small to reach every partition ({}); {listed}",
                many.len(),
                per.join(", ")
            ))
        }
    }
}

/// Rows per partition of each stratum (left-out rows not counted).
pub(super) fn tally(strata: &Strata, partition: &[u8], k: usize) -> Vec<Vec<u64>> {
    let mut counts = vec![vec![0u64; k]; strata.sizes.len()];
    for (row, &p) in partition.iter().enumerate() {
        if p != DROPPED {
            counts[strata.row_stratum[row] as usize][p as usize] += 1;
        }
    }
    counts
}

/// Every row's partition.
pub(super) struct Plan {
    /// Partition index (into the ratios' partitions) of every row.
    pub(super) partition: Vec<u8>,
}

/// Decides every row's partition. One stratum is shared out by largest
/// remainder; several by controlled rounding of the whole strata x
/// partitions table (see [`rounding`]), so that strata and partition totals
/// are both within one row of their exact shares. Each stratum's rows are
/// then put in order and dealt out train first, then validation, then test:
/// ranked by a keyed hash of their features digests (`ranks`, with whether
/// the row number is hashed too, for copies placed apart; ties, which only
/// copies make, by row), so that an engine without a sequential step can
/// reproduce the split from the counts; without digests, shuffled once.
pub(super) fn stratified(strata: &Strata, ratios: &Ratios, seed: u64, ranks: Option<(&[RowDigest], bool)>) -> Plan {
    let n_strata = strata.sizes.len();
    // Rows grouped by stratum, in input order within each (a counting sort).
    let mut offsets = vec![0usize; n_strata + 1];
    for &s in &strata.row_stratum {
        offsets[s as usize + 1] += 1;
    }
    for i in 0..n_strata {
        offsets[i + 1] += offsets[i];
    }
    let mut fill = offsets.clone();
    let mut grouped = vec![0u32; strata.row_stratum.len()];
    for (row, &s) in strata.row_stratum.iter().enumerate() {
        grouped[fill[s as usize]] = row as u32;
        fill[s as usize] += 1;
    }
    let counts = if n_strata > 1 {
        rounding::controlled(&strata.sizes, ratios.weights(), seed)
    } else {
        strata.sizes.iter().map(|&n| ratios.allocate(n, &mut vec![0; ratios.partitions().len()])).collect()
    };
    let mut rng = SplitRng::new(seed);
    let keys: Option<Vec<u64>> = ranks.map(|(digests, with_row)| rank_keys(digests, with_row, seed));
    let mut partition = vec![0u8; strata.row_stratum.len()];
    for (s, c) in counts.iter().enumerate() {
        let rows = &mut grouped[offsets[s]..offsets[s + 1]];
        match &keys {
            Some(keys) => rows.sort_unstable_by_key(|&r| (keys[r as usize], r)),
            None => rng.shuffle(rows),
        }
        let mut at = 0usize;
        for (p, &k) in c.iter().enumerate() {
            for &row in &rows[at..at + k as usize] {
                partition[row as usize] = p as u8;
            }
            at += k as usize;
        }
    }
    Plan { partition }
}

/// Every row's rank key: the first 8 bytes (little-endian) of BLAKE3 keyed
/// with `derive_key("cleave 2026-12-04 row rank v1", seed)` over its
/// features digest, followed with `with_row` by its 1-based row number as
/// 8 little-endian bytes (so that copies are ranked apart).
pub(super) fn rank_keys(digests: &[RowDigest], with_row: bool, seed: u64) -> Vec<u64> {
    use rayon::prelude::*;
    let key = blake3::derive_key("cleave 2026-12-04 row rank v1", &seed.to_le_bytes());
    digests
        .par_iter()
        .enumerate()
        .with_min_len(4096)
        .map(|(i, d)| {
            let mut message = [0u8; 24];
            message[..16].copy_from_slice(d);
            message[16..].copy_from_slice(&(i as u64 + 1).to_le_bytes());
            let bytes: &[u8] = if with_row { &message } else { &message[..16] };
            u64::from_le_bytes(blake3::keyed_hash(&key, bytes).as_bytes()[..8].try_into().expect("8 bytes"))
        })
        .collect()
}
