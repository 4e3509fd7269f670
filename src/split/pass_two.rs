//! Pass two: every batch read once, its rows routed to the partition
//! writers in input order, digested, and the test partition's digests
//! sealed. Decoding, digesting and each file's encoding run on threads of
//! their own; every stream keeps its order, so the outputs do not depend on
//! the threads.

use std::collections::BTreeMap;
use std::path::Path;
use std::sync::Arc;

use arrow_array::{ArrayRef, Int64Array, RecordBatch, StringArray, UInt32Array};
use arrow_schema::{DataType, Field, Schema, SchemaRef};

use super::assign::Assignment;
use super::config::{Opened, SplitConfig};
use super::pass_one::RowFacts;
use super::DROPPED;
use crate::digest::{self, DigestBuckets, RowDigests};
use crate::error::{Error, Result};
use crate::io::{self, FileSummary, Format, PartitionWriter, ReadAhead};
use crate::seal::handoff::{RowIds, ROW_ID};
use crate::seal::manifest::{HandoffRecord, SealFile};
use crate::seal::{self, write_seal};

/// What pass two wrote into the staging folder.
pub(super) struct Written {
    /// Per partition: its file's name and summary.
    pub(super) files: Vec<(String, FileSummary)>,
    /// Per partition: its rows' digests, sorted.
    pub(super) digests: Vec<DigestBuckets>,
    /// Test rows equal to a row of another partition.
    pub(super) shared_with_test: u64,
    /// Per partition: rows per fold.
    pub(super) fold_counts: Vec<BTreeMap<u32, u64>>,
    /// Per partition: its first and last time, with `--order-by`.
    pub(super) time_ranges: Vec<Option<(i64, i64)>>,
    /// The label-free test file, with `--label`.
    pub(super) handoff: Option<HandoffRecord>,
    /// The seal's digest files.
    pub(super) seal_files: Vec<SealFile>,
}

/// Pass two: writes every partition (and the hand-off file) into `dir`,
/// digests every row and writes the seal files.
///
/// # Errors
/// Malformed input, an input that changed since pass one, and disk failures.
pub(super) fn write(
    cfg: &SplitConfig,
    opened: &Opened,
    facts: &RowFacts,
    plan: &Assignment,
    mut batches: ReadAhead,
    dir: &Path,
) -> Result<Written> {
    let (table, schema, label) = (&opened.table, &opened.schema, &opened.label);
    let (format, output_format, spec) = (opened.format, opened.output_format, &opened.spec);
    let (partitions, partition, folds, totals) = (&plan.partitions, &plan.partition, &plan.folds, &plan.totals);
    let (rows, k, test_index) = (facts.rows, partitions.len(), plan.test_index());
    let raw_csv = opened.raw_csv();
    // The development partitions' extra columns: the fold column (but for
    // windows), then one membership column per split.
    let single = folds.as_ref().is_some_and(|(_, kind, _)| {
        !matches!(
            kind,
            crate::seal::manifest::FoldKind::SlidingWindow | crate::seal::manifest::FoldKind::ExpandingWindow
        )
    });
    let membership = plan.membership.as_ref();
    // The fold columns: the fold column, then one per further repeat.
    let fold_columns: Vec<&[u32]> = match folds {
        Some((f, _, _)) if single => {
            std::iter::once(f.as_slice()).chain(plan.repeats.iter().map(Vec::as_slice)).collect()
        }
        _ => Vec::new(),
    };
    let mut extra_names: Vec<String> = Vec::new();
    if single {
        extra_names.push(cfg.fold_column.clone());
        extra_names.extend((1..fold_columns.len()).map(|r| super::folds::repeat_column(&cfg.fold_column, r)));
    }
    if let Some(m) = membership {
        extra_names.extend((0..m.status.len()).map(|i| super::folds::membership_column(&cfg.fold_column, i)));
    }
    let fold_schema = with_fold_columns(schema, &extra_names, fold_columns.len());
    // Read once for every writer: the CSV header, the input's Parquet codec.
    let csv_header = if raw_csv { Some(table.csv_header()?) } else { None };
    let compression = match &cfg.compression {
        Some((codec, _)) => Some(*codec),
        None if output_format == Format::Parquet && format == Format::Parquet => io::parquet_compression(&cfg.input),
        None => None,
    };
    let mut writers = Vec::new();
    for (i, p) in partitions.iter().enumerate() {
        let file = format!("{}.{}", p.name(), output_format.extension());
        let has_folds = folds.is_some() && i < test_index;
        let header = csv_header.as_ref().map(|h| {
            if has_folds {
                let names: Vec<&str> = extra_names.iter().map(String::as_str).collect();
                let mut out = Vec::new();
                append_csv_fields(h, &names, &mut out);
                out
            } else {
                h.clone()
            }
        });
        let target_schema = if has_folds { &fold_schema } else { schema };
        let w =
            PartitionWriter::create(&dir.join(&file), output_format, target_schema, header.as_deref(), compression)?;
        writers.push((file, w.spawn()));
    }
    // The evaluator hand-off: test rows without labels, with a row_id.
    let mut handoff = None;
    if !label.is_empty() {
        let keep: Vec<usize> =
            (0..schema.fields().len()).filter(|&i| !label.contains(schema.field(i).name())).collect();
        let mut fields = vec![Field::new(ROW_ID, DataType::Utf8, false)];
        fields.extend(keep.iter().map(|&i| schema.field(i).clone()));
        let hschema: SchemaRef = Arc::new(Schema::new_with_metadata(fields, schema.metadata().clone()));
        let file = format!("test.features.{}", output_format.extension());
        let w = PartitionWriter::create(&dir.join(&file), output_format, &hschema, None, compression)?;
        handoff = Some((file, w.spawn(), keep, hschema, 0u64));
    }

    let mut digests: Vec<DigestBuckets> = totals.iter().map(|&t| DigestBuckets::new(t as usize)).collect();
    let mut test_seal: Vec<(RowDigests, u64)> = Vec::with_capacity(totals[test_index] as usize);
    let mut test_groups: digest::DigestMap<u64> = digest::DigestMap::default();
    let mut fold_counts: Vec<BTreeMap<u32, u64>> = vec![BTreeMap::new(); k];
    let mut time_ranges: Vec<Option<(i64, i64)>> = vec![None; k];
    // Decoding, digesting and each file's encoding run on threads of their
    // own; every stream keeps its order, so the outputs do not depend on them.
    let mut batch_digests = Vec::new();
    let mut test_digests = Vec::new();
    let row_ids = RowIds::new(cfg.seed);
    while let Some(batch) = batches.next_batch()? {
        crate::interrupt::check()?;
        let n = batch.data.num_rows();
        let start = (batch.first_row - 1) as usize;
        if start + n > partition.len() {
            return Err(Error::malformed(&cfg.input, "changed while being read (more rows than in the first pass)"));
        }
        let assigned = &partition[start..start + n];
        let bound = spec.bind(&cfg.input, &batch.data.schema())?;
        let mut indices: Vec<Vec<u32>> = vec![Vec::new(); k];
        for (i, &p) in assigned.iter().enumerate() {
            if p == DROPPED {
                continue;
            }
            indices[p as usize].push(i as u32);
            if let Some((times, _)) = &facts.times {
                let t = times[start + i];
                let r = time_ranges[p as usize].get_or_insert((t, t));
                r.0 = r.0.min(t);
                r.1 = r.1.max(t);
            }
        }
        // Each row is encoded once: test rows yield all their digests, the
        // others their row digest, the two side by side so that neither
        // waits on the other's last chunk.
        let test_rows: Vec<usize> = indices[test_index].iter().map(|&i| i as usize).collect();
        let other_rows: Vec<usize> =
            (0..n).filter(|&i| assigned[i] != DROPPED && assigned[i] as usize != test_index).collect();
        test_digests.clear();
        batch_digests.clear();
        let (tested, others) = rayon::join(
            || bound.all_digests(&batch.data, &test_rows, &mut test_digests),
            || bound.row_digests_of(&batch.data, &other_rows, &mut batch_digests),
        );
        tested?;
        others?;
        for d in &test_digests {
            digests[test_index].push(d.row);
        }
        for (&i, d) in other_rows.iter().zip(&batch_digests) {
            digests[assigned[i] as usize].push(*d);
        }
        for (j, d) in test_digests.drain(..).enumerate() {
            let row = test_seal.len() as u64 + 1;
            test_seal.push((d, row));
            if let Some(groups) = &facts.groups {
                let g = groups.row_group[start + test_rows[j]];
                test_groups.entry(groups.digests[g as usize]).or_insert(row);
            }
        }
        // Rows are taken out of the batch on each file's own thread.
        let take_rows = |batch: &RecordBatch, rows: Vec<u32>| {
            let (batch, input) = (batch.clone(), cfg.input.clone());
            move || {
                arrow_select::take::take_record_batch(&batch, &UInt32Array::from(rows))
                    .map_err(|e| Error::malformed(&input, e.to_string()))
            }
        };
        if let Some((_, w, keep, hschema, written)) = handoff.as_mut() {
            if !test_rows.is_empty() {
                let take = take_rows(&batch.data, indices[test_index].clone());
                let (keep, hschema, ids, input) = (keep.clone(), hschema.clone(), row_ids.clone(), cfg.input.clone());
                let first = *written;
                w.write_with(move || {
                    let part = take()?;
                    let n = part.num_rows();
                    let mut column = arrow_array::builder::StringBuilder::with_capacity(n, n * 16);
                    ids.each_id(first + 1..first + 1 + n as u64, |id| column.append_value(id));
                    let mut columns: Vec<ArrayRef> = vec![Arc::new(column.finish())];
                    columns.extend(keep.iter().map(|&i| part.column(i).clone()));
                    RecordBatch::try_new(hschema, columns).map_err(|e| Error::malformed(&input, e.to_string()))
                })?;
                *written += test_rows.len() as u64;
            }
        }
        for (p, (_, w)) in writers.iter_mut().enumerate() {
            if indices[p].is_empty() {
                continue;
            }
            let fold_of =
                |i: u32| folds.as_ref().filter(|_| p < test_index && single).map(|(f, _, _)| f[start + i as usize]);
            for &i in &indices[p] {
                if let Some(f) = fold_of(i) {
                    *fold_counts[p].entry(f).or_insert(0) += 1;
                }
            }
            let dev = folds.is_some() && p < test_index;
            if let Some(raw) = &batch.raw {
                let mut bytes = Vec::with_capacity(raw.bytes.len() * indices[p].len() / n.max(1) + 64);
                let mut texts: Vec<String> = Vec::new();
                for &i in &indices[p] {
                    if dev {
                        // A development row's fold in every repeat, then its part in every split.
                        texts.clear();
                        texts.extend(fold_columns.iter().map(|f| f[start + i as usize].to_string()));
                        let mut values: Vec<&str> = texts.iter().map(String::as_str).collect();
                        if let Some(m) = membership {
                            values.extend(m.status.iter().map(|st| status_name(st[start + i as usize])));
                        }
                        append_csv_fields(raw.record(i as usize), &values, &mut bytes);
                    } else {
                        bytes.extend_from_slice(raw.record(i as usize));
                    }
                }
                w.write_raw(bytes)?;
            } else {
                let fold_values: Vec<Vec<i64>> = if dev {
                    fold_columns
                        .iter()
                        .map(|f| indices[p].iter().map(|&i| f[start + i as usize] as i64).collect())
                        .collect()
                } else {
                    Vec::new()
                };
                let status_values: Vec<Vec<&'static str>> = match membership.filter(|_| dev) {
                    Some(m) => m
                        .status
                        .iter()
                        .map(|st| indices[p].iter().map(|&i| status_name(st[start + i as usize])).collect())
                        .collect(),
                    None => Vec::new(),
                };
                let take = take_rows(&batch.data, std::mem::take(&mut indices[p]));
                let (fold_schema, input) = (fold_schema.clone(), cfg.input.clone());
                w.write_with(move || {
                    let part = take()?;
                    if !dev {
                        return Ok(part);
                    }
                    let mut columns = part.columns().to_vec();
                    for values in fold_values {
                        columns.push(Arc::new(Int64Array::from(values)));
                    }
                    for values in status_values {
                        columns.push(Arc::new(StringArray::from(values)));
                    }
                    RecordBatch::try_new(fold_schema, columns).map_err(|e| Error::malformed(&input, e.to_string()))
                })?;
            }
        }
    }
    if batches.rows() != rows {
        return Err(Error::malformed(
            &cfg.input,
            format!("changed while being read ({rows} rows in the first pass, {} in the second)", batches.rows()),
        ));
    }

    // Every file is finished and synced on its own thread while the
    // partitions' digests are sorted; the seal files are sorted, written
    // and synced on a thread of their own meanwhile (on an early return it
    // is waited for, as it is dropped before the staging folder is removed).
    for (_, w) in writers.iter_mut() {
        w.close();
    }
    if let Some((_, w, ..)) = handoff.as_mut() {
        w.close();
    }
    let seal_thread = {
        let dir = dir.to_path_buf();
        let groups = facts.groups.as_ref().map(|_| test_groups.into_iter().collect::<Vec<seal::SealRecord>>());
        io::Background::spawn(move || write_seal(&dir, &test_seal, groups.as_deref()))
    };
    // Identical rows in two partitions: a later check of the train file
    // would flag them, and they are a leak from the start.
    digests.iter_mut().for_each(DigestBuckets::sort);
    let shared_with_test = rows_shared_with_test(&digests);
    let mut files = Vec::with_capacity(k);
    for (file, w) in writers {
        let summary = w.finish()?;
        files.push((file, summary));
    }
    let handoff = match handoff {
        Some((file, w, _, _, rows)) => {
            let summary = w.finish()?;
            Some(HandoffRecord { file, rows, bytes: summary.bytes, blake3: summary.blake3, row_id: ROW_ID.into() })
        }
        None => None,
    };
    let seal_files = seal_thread.join()?;
    Ok(Written { files, digests, shared_with_test, fold_counts, time_ranges, handoff, seal_files })
}

/// The input's schema with the development partitions' extra columns: the
/// `ints` fold columns first, then the membership columns (text).
fn with_fold_columns(schema: &SchemaRef, names: &[String], ints: usize) -> SchemaRef {
    let mut fields: Vec<Field> = schema.fields().iter().map(|f| f.as_ref().clone()).collect();
    for (i, name) in names.iter().enumerate() {
        let t = if i < ints { DataType::Int64 } else { DataType::Utf8 };
        fields.push(Field::new(name, t, true));
    }
    Arc::new(Schema::new_with_metadata(fields, schema.metadata().clone()))
}

/// A row's part in a split, as its membership column writes it.
fn status_name(status: u8) -> &'static str {
    match status {
        super::folds::TRAIN => "train",
        super::folds::VALIDATE => "validate",
        _ => "out",
    }
}

/// Appends `,value` for each value to a raw CSV record, before its line break.
fn append_csv_fields(record: &[u8], values: &[&str], out: &mut Vec<u8>) {
    let body = record.strip_suffix(b"\n").unwrap_or(record);
    let (body, end): (&[u8], &[u8]) = match body.strip_suffix(b"\r") {
        Some(b) => (b, b"\r\n"),
        None => (body, b"\n"),
    };
    out.extend_from_slice(body);
    for v in values {
        out.push(b',');
        crate::io::csv::write_field(out, v);
    }
    out.extend_from_slice(end);
}

/// Test rows whose row digest also occurs in another partition (each
/// partition's digests sorted).
fn rows_shared_with_test(digests: &[DigestBuckets]) -> u64 {
    // Equal digests share a first byte, so lists are compared list by list;
    // every list is sorted: one merge walk per other partition.
    let (test, others) = digests.split_last().expect("at least two partitions");
    let mut count = 0;
    for (b, test) in test.lists().iter().enumerate() {
        let mut shared = vec![false; test.len()];
        for other in others.iter().map(|o| &o.lists()[b]) {
            let mut j = 0;
            for (i, d) in test.iter().enumerate() {
                while j < other.len() && other[j] < *d {
                    j += 1;
                }
                if j < other.len() && other[j] == *d {
                    shared[i] = true;
                }
            }
        }
        count += shared.iter().filter(|&&s| s).count() as u64;
    }
    count
}
