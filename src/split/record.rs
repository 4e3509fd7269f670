//! The record: the manifest of a split, from the options, what pass one
//! learnt, the assignment and what pass two wrote.

use std::collections::BTreeMap;

use super::assign::{Assignment, LISTED_SHORT};
use super::config::{Opened, SplitConfig};
use super::folds::{self, membership_column, FoldCount, NO_FOLD};
use super::pass_one::RowFacts;
use super::pass_two::Written;
use super::DROPPED;
use crate::digest;
use crate::io::{ColumnType, FileSummary};
use crate::seal::manifest::{
    self, BlockRecord, ColumnRecord, DigestRecord, FoldKind, FoldRecord, FoldSplitRecord, GroupRecord, Manifest,
    OrderRecord, Partition, PartitionRecord, SealRecord, Source, SplitOptionsRecord, StrataRecord, TimeRange, Tool,
};
use crate::seal::time::format_time;

/// Strata up to which the manifest lists rows per stratum of every partition
/// and fold.
const LISTED_STRATA: usize = 10_000;

/// The manifest and what the split tells the user besides.
pub(super) struct Recorded {
    /// The manifest, without its checksum.
    pub(super) manifest: Manifest,
    /// Warnings for the user.
    pub(super) warnings: Vec<String>,
    /// Rows left out by the gap.
    pub(super) dropped_by_gap: u64,
    /// Rows left out by the group rule.
    pub(super) dropped_by_group: u64,
}

/// Builds the manifest of a split (without its checksum, which writing adds).
pub(super) fn record(
    cfg: &SplitConfig,
    opened: &Opened,
    facts: &RowFacts,
    plan: Assignment,
    mut written: Written,
    source_summary: FileSummary,
) -> Recorded {
    let Assignment {
        partitions,
        partition,
        time_plan,
        gap,
        counts,
        short,
        mut warnings,
        folds,
        repeats,
        membership,
        ..
    } = plan;
    let (stratify, group, key, label) = (&opened.stratify, &opened.group, &opened.key, &opened.label);
    let (format, output_format, spec, table) = (opened.format, opened.output_format, &opened.spec, &opened.table);
    let (rows, strata, k) = (facts.rows, &facts.strata, partitions.len());
    let test_index = k - 1;
    let time_kind = facts.times.as_ref().map(|(_, kind)| *kind);
    let mut groups_per_partition = vec![0u64; k];
    if let Some(groups) = &facts.groups {
        let mut seen = vec![[false; 3]; groups.len()];
        for (row, &p) in partition.iter().enumerate() {
            if p != DROPPED {
                seen[groups.row_group[row] as usize][p as usize] = true;
            }
        }
        for s in &seen {
            for p in 0..k {
                groups_per_partition[p] += s[p] as u64;
            }
        }
    }
    let loo = matches!(cfg.folds, Some((FoldCount::LeaveOneOut, _)));
    let mut records = Vec::new();
    if written.shared_with_test > 0 {
        warnings.push(format!(
            "{} test row(s) equal a row of another partition (duplicate rows in the input): \
             they leak from the start, and a check of that partition will flag them; \
             deduplicate the input or --group by an identifying column",
            written.shared_with_test
        ));
    }
    // Per-stratum counts are listed up to LISTED_STRATA strata: past that a
    // stratum is nearly a row, and the lists would outgrow the manifest.
    let listed = strata.labels.len() <= LISTED_STRATA;
    for (p, ((file, summary), d)) in written.files.iter().zip(&written.digests).enumerate() {
        let strata_counts: BTreeMap<String, u64> = if stratify.is_empty() || !listed {
            BTreeMap::new()
        } else {
            counts.iter().enumerate().map(|(s, c)| (strata.labels[s].clone(), c[p])).collect()
        };
        records.push(PartitionRecord {
            name: partitions[p],
            file: file.clone(),
            format: output_format,
            rows: d.len() as u64,
            bytes: summary.bytes,
            blake3: summary.blake3.clone(),
            content_digest: d.content_digest(),
            strata: strata_counts,
            groups: facts.groups.as_ref().map(|_| groups_per_partition[p]),
            time: written.time_ranges[p].map(|(a, b)| {
                let kind = time_kind.expect("times");
                TimeRange { first: format_time(a, kind), last: format_time(b, kind) }
            }),
            dropped_by_gap: time_plan.as_ref().map(|t| t.dropped_by_gap[p]),
            dropped_by_group_rule: time_plan.as_ref().filter(|_| facts.groups.is_some()).map(|t| t.dropped_by_group[p]),
            folds: if loo { BTreeMap::new() } else { std::mem::take(&mut written.fold_counts[p]) },
        });
    }
    let dropped_by_gap: u64 = time_plan.as_ref().map_or(0, |t| t.dropped_by_gap.iter().sum());
    let dropped_by_group: u64 = time_plan.as_ref().map_or(0, |t| t.dropped_by_group.iter().sum());
    if dropped_by_group > 0 {
        warnings.push(format!(
            "{dropped_by_group} row(s) left out: their group belongs to an earlier partition but they fall at or after a later partition's start"
        ));
    }

    let largest_deviation: BTreeMap<String, String> = if facts.groups.is_some() && !stratify.is_empty() && listed {
        counts
            .iter()
            .enumerate()
            .map(|(s, c)| {
                let n = strata.sizes[s] as f64;
                let dev = (0..k).map(|p| (c[p] as f64 / n - cfg.ratios.share(p)).abs() * 100.0).fold(0.0f64, f64::max);
                (strata.labels[s].clone(), format!("{dev:.2}"))
            })
            .collect()
    } else {
        BTreeMap::new()
    };
    let fold_record = folds.as_ref().map(|(fold, kind, kk)| {
        let mut blocks = Vec::new();
        let time_blocks = match kind {
            FoldKind::RollingOrigin => *kk as usize + 1,
            FoldKind::Purged | FoldKind::CombinatorialPurged => *kk as usize,
            _ => 0,
        };
        if time_blocks > 0 {
            let (times, tk) = facts.times.as_ref().expect("time designs have times");
            let mut ranges: Vec<Option<(i64, i64, u64)>> = vec![None; time_blocks];
            for (row, &f) in fold.iter().enumerate() {
                if f != NO_FOLD {
                    let t = times[row];
                    let r = ranges[f as usize].get_or_insert((t, t, 0));
                    r.0 = r.0.min(t);
                    r.1 = r.1.max(t);
                    r.2 += 1;
                }
            }
            for (b, r) in ranges.iter().enumerate() {
                let (a, z, n) = r.expect("every block has rows");
                blocks.push(BlockRecord {
                    block: b as u32,
                    rows: n,
                    time: TimeRange { first: format_time(a, *tk), last: format_time(z, *tk) },
                });
            }
        }
        let mut per_stratum = BTreeMap::new();
        if !stratify.is_empty() && listed && *kind != FoldKind::LeaveOneOut {
            let width = if *kind == FoldKind::RollingOrigin { *kk as usize + 1 } else { *kk as usize };
            let mut c = vec![vec![0u64; width]; strata.sizes.len()];
            for (row, &f) in fold.iter().enumerate() {
                if f != NO_FOLD {
                    c[strata.row_stratum[row] as usize][f as usize] += 1;
                }
            }
            for (s, v) in c.into_iter().enumerate() {
                per_stratum.insert(strata.labels[s].clone(), v);
            }
        }
        if let Some(sets) = &facts.label_sets {
            for (l, name) in cfg.stratify_labels.iter().enumerate() {
                let mut per = vec![0u64; *kk as usize];
                for (row, &f) in fold.iter().enumerate() {
                    if f != NO_FOLD && sets[row] >> l & 1 == 1 {
                        per[f as usize] += 1;
                    }
                }
                per_stratum.insert(format!("{name}=1"), per);
            }
        }
        let windows = matches!(kind, FoldKind::SlidingWindow | FoldKind::ExpandingWindow);
        let (mut names, mut splits, mut paths) = (Vec::new(), Vec::new(), Vec::new());
        if let Some(m) = membership.as_ref() {
            for (i, status) in m.status.iter().enumerate() {
                names.push(membership_column(&cfg.fold_column, i));
                let count = |want: u8| {
                    status
                        .iter()
                        .zip(&partition)
                        .filter(|(&s, &p)| s == want && p != DROPPED && (p as usize) < k - 1)
                        .count() as u64
                };
                splits.push(FoldSplitRecord {
                    split: i as u32,
                    validates: m.validates[i].clone(),
                    train: count(folds::TRAIN),
                    validate: count(folds::VALIDATE),
                    out: count(folds::OUT),
                });
            }
            paths = m.paths.clone();
        }
        FoldRecord {
            kind: *kind,
            k: *kk,
            column: (!windows).then(|| cfg.fold_column.clone()),
            blocks,
            repeat_columns: (1..=repeats.len()).map(|r| folds::repeat_column(&cfg.fold_column, r)).collect(),
            membership: names,
            splits,
            paths,
            until: cfg.until.clone(),
            embargo: cfg.embargo.clone(),
            strata: per_stratum,
        }
    });
    let order_record = match (&cfg.order_by, &time_plan, time_kind) {
        (Some(column), Some(plan), Some(kind)) => Some(OrderRecord {
            column: column.clone(),
            kind,
            gap,
            starts: plan.starts.iter().map(|&s| format_time(s, kind)).collect(),
            test_start: plan.starts[test_index],
            until: cfg.until.clone(),
        }),
        _ => None,
    };
    // Positives of each multilabel column per partition.
    let mut label_positives = BTreeMap::new();
    if let Some(sets) = &facts.label_sets {
        for (l, name) in cfg.stratify_labels.iter().enumerate() {
            let mut per = vec![0u64; k];
            for (&m, &p) in sets.iter().zip(&partition) {
                if p != DROPPED && m >> l & 1 == 1 {
                    per[p as usize] += 1;
                }
            }
            label_positives.insert(name.clone(), per);
        }
    }
    let manifest = Manifest {
        format_version: manifest::FORMAT_VERSION,
        assignment_version: manifest::ASSIGNMENT_VERSION,
        tool: Tool { name: "cleave".into(), version: env!("CARGO_PKG_VERSION").into() },
        created: cfg.created.clone(),
        source: Source {
            file: cfg
                .source_name
                .clone()
                .unwrap_or_else(|| cfg.input.file_name().map(|n| n.to_string_lossy().into_owned()).unwrap_or_default()),
            format,
            bytes: source_summary.bytes,
            blake3: source_summary.blake3,
            rows,
            columns: table
                .column_types()
                .into_iter()
                .map(|(name, t)| ColumnRecord { name, column_type: t.unwrap_or(ColumnType::Other) })
                .collect(),
            null_labels: facts.null_labels.iter().cloned().collect(),
        },
        options: SplitOptionsRecord {
            ratios: cfg.ratios.text().to_vec(),
            seed: cfg.seed,
            stratify: stratify.clone(),
            bins: cfg.bins as u32,
            stratify_labels: cfg.stratify_labels.clone(),
            key: key.clone(),
            label: label.clone(),
            group: group.clone(),
            order_by: cfg.order_by.clone(),
            gap: cfg.gap.clone(),
            stable: cfg.stable,
            allow_null_label: cfg.allow_null_label,
            copies: Some(cfg.copies.name().to_string()),
            folds: cfg.folds.as_ref().map(|(_, text)| text.clone()),
            output_format,
            compression: cfg.compression.as_ref().map(|(_, text)| text.clone()),
        },
        digest: DigestRecord {
            algorithm: digest::ALGORITHM.into(),
            encoding: digest::ENCODING.into(),
            features: spec.features().to_vec(),
            labels: spec.labels().to_vec(),
            keyed: cfg.digest_key.is_some(),
            key_fingerprint: cfg.digest_key.as_ref().map(|k| k.fingerprint()),
        },
        strata: (!stratify.is_empty()).then(|| StrataRecord {
            columns: strata.columns.clone(),
            count: strata.labels.len() as u64,
            short_count: Some(short.len() as u64),
            short: short.into_iter().take(LISTED_SHORT).collect(),
        }),
        label_positives,
        groups: facts.groups.as_ref().map(|g| GroupRecord {
            columns: group.clone(),
            count: g.len() as u64,
            largest_deviation,
        }),
        order: order_record,
        folds: fold_record,
        partitions: records,
        handoff: written.handoff.take(),
        seal: SealRecord {
            partition: Partition::Test,
            keyed: cfg.digest_key.is_some(),
            files: std::mem::take(&mut written.seal_files),
        },
        checksum: None,
    };
    Recorded { manifest, warnings, dropped_by_gap, dropped_by_group }
}
