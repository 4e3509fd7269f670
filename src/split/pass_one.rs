//! Pass one: what decides every row's partition, read column by column.

use arrow_array::cast::AsArray;
use arrow_array::types::Int32Type;
use arrow_array::ArrayRef;

use rayon::slice::ParallelSliceMut;

use super::config::{Copies, Opened, SplitConfig};
use super::memo::DictionaryMemo;
use super::strata::{self, Strata, StrataBuilder};
use super::structure::Groups;
use crate::digest::{GroupSpec, RowDigest};
use crate::error::{Error, Result};
use crate::io::{self, Format};
use crate::seal::time::{time_values, TimeKind};

/// What the first pass learns about every row.
pub(super) struct RowFacts {
    /// Data rows.
    pub(super) rows: u64,
    /// Every row's stratum (one stratum without `--stratify`).
    pub(super) strata: Strata,
    /// Every row's group, with `--group`.
    pub(super) groups: Option<Groups>,
    /// Every row's time, with `--order-by`.
    pub(super) times: Option<(Vec<i64>, TimeKind)>,
    /// Every row's label set (bit l: label column l is 1), with `--stratify-labels`.
    pub(super) label_sets: Option<Vec<u64>>,
    /// Every row's label interval end, with `--until`.
    pub(super) ends: Option<Vec<i64>>,
    /// Row digests, for `--stable` without groups.
    pub(super) stable_keys: Option<Vec<RowDigest>>,
    /// The units rows are assigned in when copies are kept together: the
    /// union of the groups and of the rows with equal features (and, for
    /// near-copies, loose) digests. `None` when every unit would be a group
    /// or a single row.
    pub(super) units: Option<Groups>,
    /// Every row's features digest, when pass one took them: stratified
    /// splits rank the rows of a stratum by a keyed hash of it.
    pub(super) rank_digests: Option<Vec<RowDigest>>,
    /// Null values per label column (with `--allow-null-label`; without it
    /// a null label is an error).
    pub(super) null_labels: Vec<(String, u64)>,
}

/// Pass one: reads only the columns that decide partitions (stratify, group
/// and order columns; the key columns for `--stable` without groups).
///
/// # Errors
/// Malformed input, no data rows, more rows than a split holds, and a
/// group column that is entirely null.
pub(super) fn first_pass(cfg: &SplitConfig, opened: &mut Opened) -> Result<RowFacts> {
    let (table, format, spec) = (&opened.table, opened.format, &opened.spec);
    let (stratify, group, label) = (opened.stratify_types.as_slice(), opened.group.as_slice(), opened.label.clone());
    let kept = opened.kept.take();
    let mut needed: Vec<String> = stratify.iter().map(|(n, _)| n.clone()).collect();
    needed.extend(group.iter().cloned());
    needed.extend(cfg.order_by.iter().cloned());
    needed.extend(cfg.until.iter().cloned());
    needed.extend(cfg.stratify_labels.iter().cloned());
    needed.extend(opened.label.iter().cloned());
    needed.sort();
    needed.dedup();
    let stable_rows = cfg.stable && group.is_empty();
    // Features digests of every row: for copies, and for the rank of rows
    // within a stratum (stratified and plain splits).
    let digest_rows = super::config::digests_in_pass_one(cfg);
    if stable_rows || digest_rows {
        needed.extend(spec.columns());
        needed.sort();
        needed.dedup();
    }
    if needed.is_empty() && format != Format::Csv {
        needed.push(table.schema().field(0).name().clone());
    }
    let mut strata_builder = (!stratify.is_empty()).then(|| StrataBuilder::new(stratify, cfg.bins));
    let group_spec = (!group.is_empty()).then(|| GroupSpec::new(group, cfg.digest_key.as_ref()));
    let mut groups = group_spec.as_ref().map(|_| Groups::new());
    let mut group_seen = vec![false; group.len()];
    let mut times: Option<(Vec<i64>, Option<TimeKind>)> = cfg.order_by.as_ref().map(|_| (Vec::new(), None));
    let mut stable_keys = stable_rows.then(Vec::new);
    // Features (and, for near-copies, loose) digests of every row, in row order.
    let mut features: Vec<RowDigest> = Vec::new();
    let mut loose: Vec<RowDigest> = Vec::new();
    let mut label_sets: Option<Vec<u64>> = (!cfg.stratify_labels.is_empty()).then(Vec::new);
    let mut ends: Option<(Vec<i64>, Option<TimeKind>)> = cfg.until.as_ref().map(|_| (Vec::new(), None));
    // The rows come from the kept CSV text or from a reading pass.
    // Text columns of strata and of a one-column group key come as
    // dictionaries where the file has them: their values are encoded and
    // digested once per dictionary, not once per row.
    let mut dictionaries: Vec<String> = Vec::new();
    if !stable_rows && !digest_rows {
        dictionaries.extend(stratify.iter().filter(|(_, t)| !t.is_numeric()).map(|(n, _)| n.clone()));
        if let [column] = group {
            dictionaries.push(column.clone());
        }
        dictionaries.retain(|n| cfg.order_by.as_ref() != Some(n));
    }
    let mut group_memo = DictionaryMemo::new();
    let mut batches = match &kept {
        Some(_) => None,
        None => Some(table.batches_keeping_dictionaries(Some(&needed), false, &dictionaries)?.read_ahead()),
    };
    let mut kept_at = 0usize;
    let mut next_batch = || -> Result<Option<io::Batch>> {
        match (&mut batches, &kept) {
            (Some(b), _) => b.next_batch(),
            (None, Some(k)) if kept_at < k.rows() => {
                let hi = (kept_at + io::BATCH_ROWS).min(k.rows());
                let batch = table.kept_batch(k, kept_at, hi)?;
                kept_at = hi;
                Ok(Some(batch))
            }
            (None, _) => Ok(None),
        }
    };
    // A batch's group digests are taken (across threads) while those of the
    // batch before are numbered and its strata collected (on one thread):
    // numbering keeps row order, and no step waits for the other's end.
    let mut pending: Vec<RowDigest> = Vec::new();
    let mut fresh: Vec<RowDigest> = Vec::new();
    let mut rows = 0u64;
    let mut null_labels: Vec<(String, u64)> = label.iter().map(|l| (l.clone(), 0)).collect();
    let mut first_null: Option<Error> = None;
    while let Some(batch) = next_batch()? {
        crate::interrupt::check()?;
        rows += batch.data.num_rows() as u64;
        for (name, count) in null_labels.iter_mut() {
            let col = batch.data.column_by_name(name).expect("projected");
            let nulls = col.null_count();
            if nulls > 0 && first_null.is_none() {
                let i = (0..col.len()).find(|&i| col.is_null(i)).expect("a null");
                first_null = Some(batch.error_at(&cfg.input, i, name, "is null"));
            }
            *count += nulls as u64;
        }
        let dictionary = match group {
            [column] if group_spec.is_some() => batch
                .data
                .column_by_name(column)
                .and_then(|c| c.as_dictionary_opt::<Int32Type>())
                .filter(|d| d.values().null_count() == 0),
            _ => None,
        };
        let in_order = || -> Result<()> {
            if let Some(b) = strata_builder.as_mut() {
                let arrays: Vec<ArrayRef> =
                    stratify.iter().map(|(s, _)| batch.data.column_by_name(s).expect("projected").clone()).collect();
                b.push(&cfg.input, &arrays)?;
            }
            if let (Some(spec), Some(groups)) = (&group_spec, groups.as_mut()) {
                groups.push(&pending);
                pending.clear();
                if let Some(d) = dictionary {
                    if !group_memo.refresh(d.values(), ([0; 16], u32::MAX)) {
                        let values = spec.dictionary_digests(d.values())?;
                        for (slot, digest) in group_memo.slots.iter_mut().zip(values) {
                            slot.0 = digest;
                        }
                    }
                    groups.push_keys(d.keys(), &mut group_memo);
                }
            }
            Ok(())
        };
        let digested = || -> Result<()> {
            if let Some(spec) = &group_spec {
                fresh.clear();
                if dictionary.is_none() {
                    spec.digests(&cfg.input, &batch.data, &mut fresh)?;
                }
                for (seen, name) in group_seen.iter_mut().zip(group) {
                    let col = batch.data.column_by_name(name).expect("projected");
                    *seen |= !io::all_null(col.as_ref());
                }
            }
            Ok(())
        };
        let (a, b) = rayon::join(in_order, digested);
        a?;
        b?;
        std::mem::swap(&mut pending, &mut fresh);
        if let (Some(column), Some((values, kind))) = (&cfg.order_by, times.as_mut()) {
            *kind = Some(time_values(&cfg.input, &batch, column, values)?);
        }
        if let (Some(column), Some((values, kind))) = (&cfg.until, ends.as_mut()) {
            let before = values.len();
            *kind = Some(time_values(&cfg.input, &batch, column, values)?);
            if let Some((starts, _)) = times.as_ref() {
                if let Some(i) = (before..values.len()).find(|&r| values[r] < starts[r]) {
                    return Err(batch.error_at(
                        &cfg.input,
                        i - before,
                        column,
                        "ends before the label interval starts (the --order-by value)",
                    ));
                }
            }
        }
        if let Some(keys) = stable_keys.as_mut().filter(|_| !digest_rows) {
            spec.bind(&cfg.input, &batch.data.schema())?.row_digests(&batch.data, keys)?;
        }
        if let Some(sets) = label_sets.as_mut() {
            label_set_values(cfg, &batch, sets)?;
        }
        if digest_rows {
            let bound = spec.bind_features(&cfg.input, &batch.data.schema())?;
            if cfg.copies == Copies::TogetherNear {
                let mut pairs = Vec::with_capacity(batch.data.num_rows());
                bound.features_and_loose_of(&batch.data, &mut pairs)?;
                for (f, l) in pairs {
                    features.push(f);
                    loose.push(l);
                }
            } else {
                bound.row_digests(&batch.data, &mut features)?;
            }
        }
    }
    if let Some(groups) = groups.as_mut() {
        groups.push(&pending);
    }
    if rows == 0 {
        return Err(Error::malformed(&cfg.input, "has a header but no data rows"));
    }
    if rows > u32::MAX as u64 {
        return Err(Error::malformed(&cfg.input, format!("has {rows} rows; cleave splits at most {} rows", u32::MAX)));
    }
    if let Some(i) = group_seen.iter().position(|s| !s) {
        if group_seen.iter().all(|s| !s) {
            return Err(Error::column(&cfg.input, &group[i], "is entirely null, so --group finds no groups in it"));
        }
    }
    if let Some(Error::Malformed { path, line, row, column, .. }) = first_null.filter(|_| !cfg.allow_null_label) {
        let (name, count) = null_labels.iter().find(|(_, c)| *c > 0).expect("a null label");
        return Err(Error::Malformed {
            path,
            line,
            row,
            column,
            what: format!(
                "the label is null here and in {} other row(s) of `{name}`: a test row without a label cannot be scored; \
                 drop or fill them, or pass --allow-null-label to keep them (counted in the manifest, left out of scoring)",
                count - 1
            ),
        });
    }
    null_labels.retain(|(_, c)| *c > 0);
    let strata = match strata_builder {
        Some(b) => b.finish(),
        None => strata::single(rows),
    };
    let times = times.map(|(v, k)| (v, k.unwrap_or(TimeKind::Integer)));
    if let (Some((_, Some(end_kind))), Some((_, kind))) = (&ends, &times) {
        if end_kind != kind {
            return Err(Error::column(
                &cfg.input,
                cfg.until.as_deref().unwrap_or_default(),
                format!("holds {end_kind:?} values but the order column {kind:?} values; --until needs the same kind"),
            ));
        }
    }
    let ends = ends.map(|(v, _)| v);
    if let Some(keys) = stable_keys.as_mut() {
        // Copies kept together: a stable split reads the partition off the
        // features (or loose) digest, equal for every copy.
        keys.extend_from_slice(if cfg.copies == Copies::TogetherNear { &loose } else { &features });
    }
    let joined = cfg.copies != Copies::Apart;
    let units = joined.then(|| copy_units(rows as usize, groups.as_ref(), &features, &loose)).flatten();
    let rank_digests = digest_rows.then_some(features);
    Ok(RowFacts { rows, strata, groups, times, ends, label_sets, stable_keys, units, rank_digests, null_labels })
}

/// The union of the groups and of the rows sharing a features (or loose)
/// digest, as groups numbered by their first row; `None` when that is no
/// more than the groups (or than single rows, without groups).
fn copy_units(rows: usize, groups: Option<&Groups>, features: &[RowDigest], loose: &[RowDigest]) -> Option<Groups> {
    let mut parent: Vec<u32> = (0..rows as u32).collect();
    fn root(parent: &mut [u32], mut x: u32) -> u32 {
        while parent[x as usize] != x {
            parent[x as usize] = parent[parent[x as usize] as usize];
            x = parent[x as usize];
        }
        x
    }
    let union = |parent: &mut [u32], a: u32, b: u32| {
        let (ra, rb) = (root(parent, a), root(parent, b));
        if ra != rb {
            // The smaller row number stays the root: numbering by first row.
            let (lo, hi) = if ra < rb { (ra, rb) } else { (rb, ra) };
            parent[hi as usize] = lo;
        }
    };
    if let Some(g) = groups {
        let mut first = vec![u32::MAX; g.len()];
        for (row, &id) in g.row_group.iter().enumerate() {
            if first[id as usize] == u32::MAX {
                first[id as usize] = row as u32;
            } else {
                union(&mut parent, first[id as usize], row as u32);
            }
        }
    }
    let groups_only: Vec<u32> = (0..rows as u32).map(|r| root(&mut parent, r)).collect();
    for digests in [features, loose] {
        let mut keys: Vec<(RowDigest, u32)> = digests.iter().copied().zip(0..).collect();
        keys.par_sort_unstable();
        for pair in keys.windows(2) {
            if pair[0].0 == pair[1].0 {
                union(&mut parent, pair[0].1, pair[1].1);
            }
        }
    }
    let mut joined = false;
    for r in 0..rows as u32 {
        let root_now = root(&mut parent, r);
        joined |= root_now != groups_only[r as usize];
    }
    if !joined {
        return None;
    }
    // A unit's digest: the features digest of its first row (its root).
    let digests: Vec<RowDigest> = (0..rows as u32).map(|r| features[root(&mut parent, r) as usize]).collect();
    let mut units = Groups::new();
    units.push(&digests);
    Some(units)
}

/// Appends every row's label set: bit l is set when `--stratify-labels`
/// column l holds 1 (or true).
///
/// # Errors
/// A null, or a value other than 0 and 1.
fn label_set_values(cfg: &SplitConfig, batch: &io::Batch, out: &mut Vec<u64>) -> Result<()> {
    let at = out.len();
    out.resize(at + batch.data.num_rows(), 0);
    for (l, name) in cfg.stratify_labels.iter().enumerate() {
        let col = batch.data.column_by_name(name).expect("projected");
        let ints = arrow_cast::cast(col, &arrow_schema::DataType::Int64)
            .map_err(|e| Error::column(&cfg.input, name, format!("cannot be read as 0/1: {e}")))?;
        let ints = ints.as_primitive::<arrow_array::types::Int64Type>();
        for i in 0..ints.len() {
            match (arrow_array::Array::is_null(ints, i), ints.value(i)) {
                (false, 0) => {}
                (false, 1) => out[at + i] |= 1 << l,
                _ => {
                    return Err(batch.error_at(
                        &cfg.input,
                        i,
                        name,
                        "is not 0 or 1; --stratify-labels takes indicator columns",
                    ))
                }
            }
        }
    }
    Ok(())
}
