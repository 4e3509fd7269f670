//! Splits that respect the data's structure: entity groups, time order with
//! an embargo gap, and stable (hash-based) assignment.
//!
//! The rules, as docs/format.md repeats them:
//! - **Groups** (`--group`): rows with equal group values (compared by their
//!   canonical encoding) share a partition. Groups are taken in a seeded
//!   random order, then largest first, and each goes to the partition it brings closest to the
//!   asked counts: without strata, the one with the most rows still missing;
//!   with strata, the one that least increases the squared shortfall of every
//!   stratum in every partition (each stratum weighted by its size).
//! - **Time** (`--order-by`): rows sorted by time; the cuts fall at the
//!   largest-remainder counts, moved to the nearest change of time so that
//!   equal times never straddle. With partition start time s, rows of the
//!   earlier partitions with time > s - gap are left out.
//! - **Time with groups**: a group belongs to the partition of the period in
//!   which it first appears, and the cuts fall at group start times chosen
//!   to leave out the fewest rows (see [`group_cuts`]). Rows of a group that
//!   fall after s - gap for a later partition's start s are left out and
//!   counted, so no train row is at or after the validation or test start,
//!   and no validation row at or after the test start.
//! - **Stable** (`--stable`): a row's (or group's) partition is read off a
//!   keyed BLAKE3 hash of its digest and the seed, so it never moves when other
//!   rows come or go; shares are then approximate.

use super::strata::Strata;
use crate::digest::{DigestMap, RowDigest};
use crate::error::{Error, Result};
use crate::rng::SplitRng;
use crate::seal::time::TimeKind;
use crate::seal::time::MICROS_PER_DAY;
use crate::split::memo::DictionaryMemo;
use crate::split::{Ratios, DROPPED};
use arrow_array::Int32Array;

/// Parses `--gap`: `7d`, `36h`, `90m`, `45s`, `2w` for times and dates
/// (returned in microseconds), a plain number for integer order columns.
///
/// # Errors
/// Malformed text, a negative gap, or a unit that does not fit the column.
pub fn parse_gap(text: &str, kind: TimeKind) -> Result<i64> {
    let t = text.trim();
    let split = t.find(|c: char| !c.is_ascii_digit()).unwrap_or(t.len());
    let (number, unit) = t.split_at(split);
    let n: i64 = number.parse().map_err(|_| {
        Error::Options(format!("--gap `{text}` is not a whole number with a unit (e.g. 7d, 36h, 90m, 45s)"))
    })?;
    let per = match (kind, unit) {
        (TimeKind::Integer, "") => return Ok(n),
        (TimeKind::Integer, _) => {
            return Err(Error::Options(format!(
                "--gap `{text}`: the order column holds integers, so the gap is a plain number"
            )))
        }
        (_, "w") => 7 * MICROS_PER_DAY,
        (_, "d") => MICROS_PER_DAY,
        (_, "h") => 3_600_000_000,
        (_, "m") => 60_000_000,
        (_, "s") => 1_000_000,
        (_, "") => {
            return Err(Error::Options(format!("--gap `{text}` needs a unit for a time column (w, d, h, m, s)")))
        }
        (_, u) => return Err(Error::Options(format!("--gap `{text}`: unknown unit `{u}` (w, d, h, m, s)"))),
    };
    n.checked_mul(per).ok_or_else(|| Error::Options(format!("--gap `{text}` is too large")))
}

/// Entity groups: one id per row, numbered by first appearance.
pub struct Groups {
    /// Group id of every row.
    pub row_group: Vec<u32>,
    /// Rows per group.
    pub sizes: Vec<u64>,
    /// Each group's digest.
    pub digests: Vec<RowDigest>,
    index: DigestMap<u32>,
}

impl Groups {
    /// No groups yet.
    pub fn new() -> Self {
        Groups { row_group: Vec::new(), sizes: Vec::new(), digests: Vec::new(), index: DigestMap::default() }
    }

    /// Adds rows by their group digests.
    pub fn push(&mut self, digests: &[RowDigest]) {
        for d in digests {
            let id = self.id_of(d);
            self.sizes[id as usize] += 1;
            self.row_group.push(id);
        }
    }

    /// Adds rows of a one-column group key given as dictionary keys: a
    /// row's group digest is `memo`'s value for its key's slot (the last
    /// slot for a null key). Groups are numbered as [`Groups::push`] numbers
    /// them for the same digests; `memo`'s group ids per slot
    /// (`u32::MAX` until met) spare the lookup for every row after a
    /// value's first.
    pub fn push_keys(&mut self, keys: &Int32Array, memo: &mut DictionaryMemo<(RowDigest, u32)>) {
        for row in 0..keys.len() {
            let slot = memo.slot(keys, row);
            let (digest, known) = &mut memo.slots[slot];
            if *known == u32::MAX {
                *known = self.id_of(digest);
            }
            let id = *known;
            self.sizes[id as usize] += 1;
            self.row_group.push(id);
        }
    }

    /// The id of the group with digest `d`, numbered on first sight.
    fn id_of(&mut self, d: &RowDigest) -> u32 {
        let next = self.digests.len() as u32;
        *self.index.entry(*d).or_insert_with(|| {
            self.digests.push(*d);
            self.sizes.push(0);
            next
        })
    }

    /// Number of groups.
    pub fn len(&self) -> usize {
        self.sizes.len()
    }
}

impl Default for Groups {
    fn default() -> Self {
        Self::new()
    }
}

/// Groups times strata up to which [`group_strata`] counts in one table.
const DENSE_GROUP_STRATA: usize = 1 << 22;

/// Rows per stratum of each group, sparse: (stratum, rows) pairs, in the
/// order the group's strata first appear among the rows.
fn group_strata(groups: &Groups, strata: &Strata) -> Vec<Vec<(u32, u64)>> {
    let n_strata = strata.sizes.len();
    if groups.len().saturating_mul(n_strata) <= DENSE_GROUP_STRATA {
        group_strata_dense(groups, strata)
    } else {
        group_strata_sparse(groups, strata)
    }
}

/// [`group_strata`] through one table of counts and first rows: no list
/// searched per row.
fn group_strata_dense(groups: &Groups, strata: &Strata) -> Vec<Vec<(u32, u64)>> {
    let n_strata = strata.sizes.len();
    let mut counts = vec![0u64; groups.len() * n_strata];
    let mut first = vec![0u32; groups.len() * n_strata];
    for (row, (&g, &s)) in groups.row_group.iter().zip(&strata.row_stratum).enumerate() {
        let i = g as usize * n_strata + s as usize;
        if counts[i] == 0 {
            first[i] = row as u32;
        }
        counts[i] += 1;
    }
    (0..groups.len())
        .map(|g| {
            let at = g * n_strata;
            let mut list: Vec<(u32, u64)> =
                (0..n_strata).filter(|&s| counts[at + s] > 0).map(|s| (s as u32, counts[at + s])).collect();
            list.sort_unstable_by_key(|&(s, _)| first[at + s as usize]);
            list
        })
        .collect()
}

/// [`group_strata`] with a list per group, for many groups and strata.
fn group_strata_sparse(groups: &Groups, strata: &Strata) -> Vec<Vec<(u32, u64)>> {
    let mut out: Vec<Vec<(u32, u64)>> = vec![Vec::new(); groups.len()];
    for (row, &g) in groups.row_group.iter().enumerate() {
        let s = strata.row_stratum[row];
        let list = &mut out[g as usize];
        match list.iter_mut().find(|(t, _)| *t == s) {
            Some((_, n)) => *n += 1,
            None => list.push((s, 1)),
        }
    }
    out
}

/// Assigns whole groups to partitions (see the module's rules).
pub fn assign_grouped(groups: &Groups, strata: &Strata, ratios: &Ratios, seed: u64) -> Vec<u8> {
    let k = ratios.partitions().len();
    let n: u64 = groups.sizes.iter().sum();
    let totals = ratios.allocate(n, &mut vec![0; k]);
    // Largest groups first (ties in seeded order): the small ones placed last
    // even out what the large ones leave.
    let mut order: Vec<u32> = (0..groups.len() as u32).collect();
    SplitRng::new(seed).shuffle(&mut order);
    order.sort_by_key(|&g| std::cmp::Reverse(groups.sizes[g as usize]));
    let mut group_partition = vec![0u8; groups.len()];
    let stratified = strata.sizes.len() > 1;
    let mut held = vec![0u64; k];
    if !stratified {
        for &g in &order {
            let size = groups.sizes[g as usize];
            // The partition missing the most rows; on a tie, the earlier one.
            let p = (0..k).max_by_key(|&p| (totals[p] as i128 - held[p] as i128, std::cmp::Reverse(p))).expect("k > 0");
            held[p] += size;
            group_partition[g as usize] = p as u8;
        }
    } else {
        let per_group = group_strata(groups, strata);
        let n_strata = strata.sizes.len();
        // Exact share targets per stratum and partition.
        let targets: Vec<Vec<f64>> =
            (0..k).map(|p| strata.sizes.iter().map(|&ns| ns as f64 * ratios.share(p)).collect()).collect();
        let mut counts = vec![vec![0u64; n_strata]; k];
        for &g in &order {
            let g = g as usize;
            let size = groups.sizes[g] as f64;
            let mut best = (f64::INFINITY, 0usize);
            for p in 0..k {
                // Increase of the squared shortfall if g joins p.
                let mut delta = 0.0;
                for &(s, c) in &per_group[g] {
                    let (s, c) = (s as usize, c as f64);
                    let before = counts[p][s] as f64 - targets[p][s];
                    delta += (c * (2.0 * before + c)) / strata.sizes[s] as f64;
                }
                let before = held[p] as f64 - totals[p] as f64;
                delta += size * (2.0 * before + size) / n as f64;
                if delta < best.0 {
                    best = (delta, p);
                }
            }
            let p = best.1;
            for &(s, c) in &per_group[g] {
                counts[p][s as usize] += c;
            }
            held[p] += groups.sizes[g];
            group_partition[g] = p as u8;
        }
    }
    groups.row_group.iter().map(|&g| group_partition[g as usize]).collect()
}

/// Assigns by a keyed hash of each unit's digest: partition p when the
/// hash's first 8 bytes (little-endian) fall in p's slice of 0..2^64.
pub fn assign_stable(unit_digests: &[RowDigest], ratios: &Ratios, seed: u64) -> Vec<u8> {
    let key = blake3::derive_key("cleave 2026-12-02 stable assignment v1", &seed.to_le_bytes());
    let k = ratios.partitions().len();
    let mut bounds = Vec::with_capacity(k);
    let mut cum = 0.0f64;
    for p in 0..k - 1 {
        cum += ratios.share(p);
        bounds.push((cum * 2f64.powi(64)) as u128);
    }
    unit_digests
        .iter()
        .map(|d| {
            let h = blake3::keyed_hash(&key, d);
            let v = u64::from_le_bytes(h.as_bytes()[..8].try_into().expect("8 bytes")) as u128;
            bounds.iter().position(|&b| v < b).unwrap_or(k - 1) as u8
        })
        .collect()
}

/// Index in `0..=n` of the cut nearest `target` at which the sorted times
/// change (or an end), so that equal times stay on one side.
fn snap(sorted: &[i64], target: usize) -> usize {
    let n = sorted.len();
    let ok = |i: usize| i == 0 || i == n || sorted[i - 1] != sorted[i];
    let mut lo = target.min(n);
    while !ok(lo) {
        lo -= 1;
    }
    let mut hi = target.min(n);
    while !ok(hi) {
        hi += 1;
    }
    if target - lo <= hi - target {
        lo
    } else {
        hi
    }
}

/// The start times of partitions 1..k of a time-ordered grouped split
/// (`firsts[row]`: the first time of the row's group), one cut at a time.
///
/// A cut at time c puts the groups that start before c in the earlier
/// partitions and leaves out their rows with time > c - gap (those at or
/// after c by the group rule, the others by the gap). The candidates are
/// the group start times at which the rows of groups starting earlier are
/// within `largest` (the largest group's rows) of the asked count, or the
/// nearest such time when none is; among them the cut leaves out the fewest
/// rows, then comes nearest the asked count, then is the earlier. Each cut
/// is placed after the one before, counting only the rows of the groups
/// between them (rows of earlier groups are out already).
fn group_cuts(times: &[i64], firsts: &[i64], totals: &[u64], largest: u64, gap: i64) -> Vec<i64> {
    let k = totals.len();
    // Group start times, with the number of rows whose group starts before each.
    let mut by_first: Vec<(i64, i64)> = firsts.iter().zip(times).map(|(&f, &t)| (f, t)).collect();
    by_first.sort_unstable();
    // Each distinct group start time with the index of its first row.
    let group_starts: Vec<(i64, usize)> = (0..by_first.len())
        .filter(|&i| i == 0 || by_first[i].0 != by_first[i - 1].0)
        .map(|i| (by_first[i].0, i))
        .collect();
    let mut cuts = Vec::with_capacity(k - 1);
    let mut from = 0usize; // the first row of the groups after the previous cut
    let mut next_start = 1usize; // the first candidate in group_starts
    let mut target = 0u64;
    for (cut, &want) in totals[..k - 1].iter().enumerate() {
        target += want;
        // Rows of groups starting at or after the previous cut, their times sorted.
        let mut later: Vec<i64> = by_first[from..].iter().map(|&(_, t)| t).collect();
        later.sort_unstable();
        // Leave a group start for every cut still to come.
        let last = group_starts.len().saturating_sub(k - 2 - cut);
        let mut best: Option<(u64, u64, i64, usize)> = None; // (left out, distance, time, position)
        let mut nearest: Option<(u64, usize)> = None;
        for (j, &(c, i)) in group_starts.iter().enumerate().take(last).skip(next_start) {
            let before = i as u64;
            let distance = before.abs_diff(target);
            if nearest.is_none_or(|(d, _)| distance < d) {
                nearest = Some((distance, j));
            }
            if distance <= largest {
                // Rows of the groups between the cuts with time > c - gap,
                // less those of the groups from c on (all later than c).
                let reach = later.len() - later.partition_point(|&t| t <= c.saturating_sub(gap));
                let left_out = (reach - (by_first.len() - i)) as u64;
                if best.is_none_or(|b| (left_out, distance, c) < (b.0, b.1, b.2)) {
                    best = Some((left_out, distance, c, j));
                }
            } else if before > target {
                break;
            }
        }
        match best.map(|b| b.3).or(nearest.map(|n| n.1)) {
            Some(j) => {
                let (c, i) = group_starts[j];
                cuts.push(c);
                from = i;
                next_start = j + 1;
            }
            None => {
                cuts.push(i64::MAX);
                next_start = group_starts.len();
            }
        }
    }
    cuts
}

/// A time-ordered assignment.
pub struct TimePlan {
    /// Partition per row (or [`DROPPED`]).
    pub partition: Vec<u8>,
    /// Start time of each partition (its earliest row).
    pub starts: Vec<i64>,
    /// Rows left out of each partition by the gap.
    pub dropped_by_gap: Vec<u64>,
    /// Rows left out of each partition because their group belongs to it but
    /// they fall at or after a later partition's start.
    pub dropped_by_group: Vec<u64>,
}

/// Assigns by time (see the module's rules).
///
/// # Errors
/// When ties or groups leave a partition empty.
pub fn assign_time(
    times: &[i64],
    ends: Option<&[i64]>,
    groups: Option<&Groups>,
    ratios: &Ratios,
    gap: i64,
) -> Result<TimePlan> {
    let k = ratios.partitions().len();
    let n = times.len();
    let totals = ratios.allocate(n as u64, &mut vec![0; k]);
    let mut partition = vec![0u8; n];
    let mut starts = vec![i64::MAX; k];
    // The periods: cut the rows in time order at the asked counts, each cut
    // moved to the nearest change of time.
    let mut order: Vec<u32> = (0..n as u32).collect();
    order.sort_by_key(|&r| (times[r as usize], r));
    let sorted: Vec<i64> = order.iter().map(|&r| times[r as usize]).collect();
    let mut cuts = vec![0usize];
    let mut acc = 0usize;
    for &t in &totals[..k - 1] {
        acc += t as usize;
        let c = snap(&sorted, acc).max(*cuts.last().expect("non-empty"));
        cuts.push(c);
    }
    cuts.push(n);
    for p in 0..k {
        for &r in &order[cuts[p]..cuts[p + 1]] {
            partition[r as usize] = p as u8;
        }
        if cuts[p] < cuts[p + 1] {
            starts[p] = sorted[cuts[p]];
        }
    }
    if let Some(groups) = groups {
        // A group belongs to the period in which it first appears; the cuts
        // are placed again, at group starts, to leave out the fewest rows.
        let mut first = vec![i64::MAX; groups.len()];
        for (row, &g) in groups.row_group.iter().enumerate() {
            first[g as usize] = first[g as usize].min(times[row]);
        }
        let firsts: Vec<i64> = groups.row_group.iter().map(|&g| first[g as usize]).collect();
        let largest = groups.sizes.iter().copied().max().unwrap_or(1);
        let cuts = group_cuts(times, &firsts, &totals, largest, gap);
        for (p, &c) in cuts.iter().enumerate() {
            starts[p + 1] = c;
        }
        starts[0] = sorted.first().copied().unwrap_or(i64::MAX);
        let period = |t: i64| (0..k).rev().find(|&q| starts[q] != i64::MAX && t >= starts[q]).unwrap_or(0) as u8;
        for (row, &f) in firsts.iter().enumerate() {
            partition[row] = period(f);
        }
    }
    for (p, s) in starts.iter().enumerate() {
        if *s == i64::MAX {
            return Err(Error::Options(if groups.is_some() {
                format!("no group starts late enough to begin the {} partition", ratios.partitions()[p])
            } else {
                format!(
                    "the order column leaves the {} partition empty: too many rows share the same times",
                    ratios.partitions()[p]
                )
            }));
        }
    }
    let mut dropped_by_gap = vec![0u64; k];
    let mut dropped_by_group = vec![0u64; k];
    for (row, &t) in times.iter().enumerate() {
        let p = partition[row] as usize;
        // With --until, a row reaches as far as its label interval's end.
        let reach = ends.map_or(t, |e| e[row]);
        // The earliest later partition whose start (less the gap) this row reaches.
        for &start in &starts[p + 1..k] {
            if t >= start {
                dropped_by_group[p] += 1;
                partition[row] = DROPPED;
                break;
            }
            if reach >= start || (gap > 0 && reach > start.saturating_sub(gap)) {
                dropped_by_gap[p] += 1;
                partition[row] = DROPPED;
                break;
            }
        }
    }
    for p in 0..k {
        if !partition.contains(&(p as u8)) {
            let name = ratios.partitions()[p];
            return Err(Error::Options(if dropped_by_group[p] > 0 {
                format!(
                    "the {name} partition's groups all reach past a later partition's start, so keeping groups whole leaves it empty (do the groups span the whole time range?)"
                )
            } else if groups.is_some() && !partition.contains(&(p as u8)) && dropped_by_gap[p] == 0 {
                format!("no group first appears in the {name} period, so keeping groups whole leaves it empty")
            } else {
                format!("--gap leaves the {name} partition empty: every one of its rows is within the gap")
            }));
        }
    }
    Ok(TimePlan { partition, starts, dropped_by_gap, dropped_by_group })
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::collections::HashMap;
    use std::sync::Arc;

    #[test]
    fn gap_units() {
        assert_eq!(parse_gap("7d", TimeKind::Timestamp).unwrap(), 7 * MICROS_PER_DAY);
        assert_eq!(parse_gap("36h", TimeKind::Date).unwrap(), 36 * 3_600_000_000);
        assert_eq!(parse_gap("5", TimeKind::Integer).unwrap(), 5);
        assert!(parse_gap("5", TimeKind::Timestamp).is_err());
        assert!(parse_gap("5d", TimeKind::Integer).is_err());
        assert!(parse_gap("-1d", TimeKind::Date).is_err());
        assert!(parse_gap("1y", TimeKind::Date).is_err());
    }

    #[test]
    fn cuts_move_to_a_change_of_time() {
        assert_eq!(snap(&[1, 2, 2, 2, 3], 2), 1);
        assert_eq!(snap(&[1, 2, 2, 2, 3], 3), 4);
        assert_eq!(snap(&[5, 5, 5], 1), 0);
    }

    use proptest::prelude::*;

    proptest! {
        /// Rows given as dictionary keys are numbered as their digests
        /// given one by one would be, nulls and values repeated in the
        /// dictionary included.
        #[test]
        fn dictionary_keys_number_groups_as_digests_do(
            dictionary in proptest::collection::vec(0u8..6, 1..8),
            keys in proptest::collection::vec(proptest::option::weighted(0.9, 0usize..8), 0..200),
        ) {
            let null = [0xEE; 16];
            let digest_of = |k: Option<usize>| k.map_or(null, |k| [dictionary[k % dictionary.len()]; 16]);
            let mut plain = Groups::new();
            plain.push(&keys.iter().map(|&k| digest_of(k)).collect::<Vec<_>>());
            let mut memo = DictionaryMemo::new();
            let values: arrow_array::ArrayRef = Arc::new(arrow_array::UInt8Array::from(dictionary.clone()));
            memo.refresh(&values, ([0; 16], u32::MAX));
            for (slot, &v) in memo.slots.iter_mut().zip(&dictionary) {
                slot.0 = [v; 16];
            }
            let last = memo.null_slot();
            memo.slots[last].0 = null;
            let keys: Int32Array = keys.iter().map(|k| k.map(|k| (k % dictionary.len()) as i32)).collect();
            let mut dict = Groups::new();
            // In two batches sharing the dictionary.
            let half = keys.len() / 2;
            dict.push_keys(&keys.slice(0, half), &mut memo);
            dict.push_keys(&keys.slice(half, keys.len() - half), &mut memo);
            prop_assert_eq!(&dict.row_group, &plain.row_group);
            prop_assert_eq!(&dict.sizes, &plain.sizes);
            prop_assert_eq!(&dict.digests, &plain.digests);
        }
    }

    proptest! {
        /// Counting in one table gives each group's strata and counts in
        /// the order the list per group gives them (first appearance).
        #[test]
        fn group_strata_table_matches_the_lists(
            rows in proptest::collection::vec((0u8..30, 0u32..5), 1..400),
        ) {
            let groups = groups_of(&rows.iter().map(|r| r.0).collect::<Vec<_>>());
            let row_stratum: Vec<u32> = rows.iter().map(|r| r.1).collect();
            let mut sizes = vec![0u64; 5];
            for &s in &row_stratum {
                sizes[s as usize] += 1;
            }
            let strata = Strata { row_stratum, labels: (0..5).map(|s| s.to_string()).collect(), sizes, columns: Vec::new() };
            prop_assert_eq!(group_strata_dense(&groups, &strata), group_strata_sparse(&groups, &strata));
        }
    }

    fn groups_of(ids: &[u8]) -> Groups {
        let mut g = Groups::new();
        let digests: Vec<RowDigest> = ids.iter().map(|&i| [i; 16]).collect();
        g.push(&digests);
        g
    }

    fn ratios() -> impl Strategy<Value = Ratios> {
        prop_oneof![Just("70,15,15"), Just("80,20"), Just("50,25,25")].prop_map(|r| Ratios::parse(r).unwrap())
    }

    proptest! {
        #[test]
        fn groups_never_straddle(ids in proptest::collection::vec(0u8..40, 3..300), classes in proptest::collection::vec(0u32..3, 300), r in ratios(), seed in any::<u64>()) {
            let groups = groups_of(&ids);
            let n_strata = 3;
            let row_stratum: Vec<u32> = (0..ids.len()).map(|i| classes[i] % n_strata).collect();
            let mut sizes = vec![0u64; n_strata as usize];
            for &s in &row_stratum { sizes[s as usize] += 1; }
            let strata = Strata { row_stratum, labels: vec!["a".into(), "b".into(), "c".into()], sizes, columns: vec![] };
            for strata in [&strata, &crate::split::strata::single(ids.len() as u64)] {
                let p = assign_grouped(&groups, strata, &r, seed);
                let mut of_group = HashMap::new();
                for (row, &g) in groups.row_group.iter().enumerate() {
                    let first = *of_group.entry(g).or_insert(p[row]);
                    prop_assert_eq!(first, p[row], "group {} straddles", g);
                }
            }
        }

        #[test]
        fn time_order_ties_and_gap(times in proptest::collection::vec(0i64..60, 20..300), gap in 0i64..8, r in ratios()) {
            let Ok(plan) = assign_time(&times, None, None, &r, gap) else { return Ok(()); };
            let k = r.partitions().len();
            // Every kept row of p is earlier than every row of p + 1.
            for p in 0..k - 1 {
                let max_p = times.iter().zip(&plan.partition).filter(|(_, &q)| q as usize == p).map(|(t, _)| *t).max();
                let min_next = times.iter().zip(&plan.partition).filter(|(_, &q)| q as usize == p + 1).map(|(t, _)| *t).min();
                if let (Some(a), Some(b)) = (max_p, min_next) {
                    prop_assert!(a < b, "partition {} ends at {} but {} starts at {}", p, a, p + 1, b);
                    // Kept rows of p are at or before the next start less the gap.
                    prop_assert!(a <= plan.starts[p + 1] - gap);
                }
            }
            // Equal times never straddle two partitions.
            let mut at = HashMap::new();
            for (t, &q) in times.iter().zip(&plan.partition) {
                if q != DROPPED {
                    let first = *at.entry(*t).or_insert(q);
                    prop_assert_eq!(first, q);
                }
            }
            // Exactly the rows inside a gap are left out, and they are counted.
            let mut dropped = 0;
            for (t, &q) in times.iter().zip(&plan.partition) {
                let in_gap = (1..k).any(|s| *t < plan.starts[s] && *t > plan.starts[s] - gap);
                prop_assert_eq!(q == DROPPED, in_gap, "time {}", t);
                dropped += (q == DROPPED) as u64;
            }
            prop_assert_eq!(dropped, plan.dropped_by_gap.iter().sum::<u64>());
        }

        #[test]
        fn grouped_time_keeps_groups_whole_and_order(rows in proptest::collection::vec((0u8..30, 0i64..100), 30..300), gap in 0i64..5, r in ratios()) {
            let ids: Vec<u8> = rows.iter().map(|x| x.0).collect();
            let times: Vec<i64> = rows.iter().map(|x| x.1).collect();
            let groups = groups_of(&ids);
            let Ok(plan) = assign_time(&times, None, Some(&groups), &r, gap) else { return Ok(()); };
            let k = r.partitions().len();
            let test_start = plan.starts[k - 1];
            let mut of_group = HashMap::new();
            for (row, &q) in plan.partition.iter().enumerate() {
                if q == DROPPED { continue; }
                let first = *of_group.entry(groups.row_group[row]).or_insert(q);
                prop_assert_eq!(first, q, "group straddles");
                if (q as usize) < k - 1 {
                    prop_assert!(times[row] < test_start, "a {} row at {} is at or after the test start {}", q, times[row], test_start);
                    prop_assert!(times[row] <= test_start - gap);
                }
            }
        }

        /// Groups that do not overlap in time (each a run of consecutive
        /// times) are cut between, never through: no row is left out, and
        /// each partition is within one group of its asked count.
        #[test]
        fn disjoint_groups_lose_no_row(sizes in proptest::collection::vec(1usize..12, 6..60), r in ratios(), seed in any::<u64>()) {
            let mut ids = Vec::new();
            let mut times = Vec::new();
            let mut t = 0i64;
            for (g, &n) in sizes.iter().enumerate() {
                for _ in 0..n {
                    ids.push(g as u8);
                    times.push(t);
                    t += 1 + (seed % 3) as i64;
                }
            }
            // Rows in a seeded order, as in a file.
            let mut order: Vec<usize> = (0..ids.len()).collect();
            SplitRng::new(seed).shuffle(&mut order);
            let ids: Vec<u8> = order.iter().map(|&i| ids[i]).collect();
            let times: Vec<i64> = order.iter().map(|&i| times[i]).collect();
            let groups = groups_of(&ids);
            let Ok(plan) = assign_time(&times, None, Some(&groups), &r, 0) else { return Ok(()); };
            prop_assert!(!plan.partition.contains(&DROPPED));
            let k = r.partitions().len();
            let n = times.len() as f64;
            let largest = *sizes.iter().max().unwrap() as f64;
            for p in 0..k {
                let got = plan.partition.iter().filter(|&&q| q as usize == p).count() as f64;
                prop_assert!((got - n * r.share(p)).abs() <= largest + 1.0, "partition {}: {} of {}", p, got, n);
            }
        }

        #[test]
        fn stable_assignment_ignores_other_rows(keys in proptest::collection::vec(any::<[u8; 16]>(), 1..200), extra in proptest::collection::vec(any::<[u8; 16]>(), 0..50), seed in any::<u64>()) {
            let r = Ratios::parse("70,15,15").unwrap();
            let before = assign_stable(&keys, &r, seed);
            let mut grown = keys.clone();
            grown.extend(extra);
            let after = assign_stable(&grown, &r, seed);
            prop_assert_eq!(&before[..], &after[..keys.len()]);
        }
    }

    #[test]
    fn stable_shares_are_close_to_asked() {
        let r = Ratios::parse("70,15,15").unwrap();
        let keys: Vec<RowDigest> =
            (0u32..30_000).map(|i| *blake3::hash(&i.to_le_bytes()).as_bytes().first_chunk::<16>().unwrap()).collect();
        let p = assign_stable(&keys, &r, 1);
        let test = p.iter().filter(|&&x| x == 2).count() as f64 / 30_000.0;
        // Binomial sd at n = 30000, p = 0.15 is 0.0021; allow 4 sd.
        assert!((test - 0.15).abs() < 0.0084, "{test}");
    }
}
