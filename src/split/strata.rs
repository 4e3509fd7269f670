//! Strata: which rows must be shared out together.
//!
//! A stratum is a combination of values of the `--stratify` columns. Text,
//! booleans, dates and the like stand for themselves; a numeric column with
//! more distinct values than `--bins` is cut into quantile bins first, and one
//! with at most that many is taken value by value (a 0/1 label is a class, not
//! a measurement). Null is a stratum of its own, and so is NaN.
//!
//! Quantile bins use the inverted empirical distribution (Hyndman and Fan's
//! definition 1): with the n sorted values v, cut k of K is v[ceil(k n / K) - 1],
//! equal cuts merge, and a value goes to the bin numbered by how many cuts lie
//! strictly below it. So equal values always share a bin.

use std::collections::BTreeMap;

use foldhash::{HashMap, HashMapExt, HashSet, HashSetExt};

use arrow_array::cast::AsArray;
use arrow_array::types::{Float64Type, Int32Type};
use arrow_array::{new_null_array, Array, ArrayRef};
use arrow_schema::DataType;

use crate::digest::ValueEncoder;
use crate::error::{Error, Result};
use crate::io::ColumnType;
use crate::seal::manifest::StratumColumn;
use crate::split::memo::DictionaryMemo;

enum Column {
    Categorical {
        name: String,
        ids: HashMap<Vec<u8>, u32>,
        labels: Vec<String>,
        codes: Vec<u32>,
        /// The code of each value of the batches' dictionary (`u32::MAX`
        /// until met), when the column comes as one.
        memo: DictionaryMemo<u32>,
    },
    Numeric {
        name: String,
        values: Vec<Option<f64>>,
        distinct: HashSet<u64>,
        keys: HashMap<Vec<u8>, (u32, String)>,
        codes: Vec<u32>,
    },
}

/// Collects stratum values row by row (pass one of a split).
pub struct StrataBuilder {
    columns: Vec<Column>,
    bins: usize,
}

/// The strata of a table: one id per row, ids ordered by label.
pub struct Strata {
    /// Stratum id of every row.
    pub row_stratum: Vec<u32>,
    /// Readable label of each stratum, e.g. `bloom_class=high`.
    pub labels: Vec<String>,
    /// Rows per stratum.
    pub sizes: Vec<u64>,
    /// How each column was used.
    pub columns: Vec<StratumColumn>,
}

fn display(array: &ArrayRef, row: usize) -> String {
    if array.is_null(row) {
        return "<null>".into();
    }
    arrow_cast::display::array_value_to_string(array, row).unwrap_or_else(|_| "?".into())
}

/// The id of `key` in `map`, numbered by first appearance; a new key is
/// stored with `new(id)`.
fn intern<V>(map: &mut HashMap<Vec<u8>, V>, key: &[u8], id_of: impl Fn(&V) -> u32, new: impl FnOnce(u32) -> V) -> u32 {
    if let Some(v) = map.get(key) {
        return id_of(v);
    }
    let id = map.len() as u32;
    map.insert(key.to_vec(), new(id));
    id
}

impl StrataBuilder {
    /// A builder for the given columns and their types.
    pub fn new(columns: &[(String, ColumnType)], bins: usize) -> Self {
        let columns = columns
            .iter()
            .map(|(name, t)| {
                if t.is_numeric() {
                    Column::Numeric {
                        name: name.clone(),
                        values: Vec::new(),
                        distinct: HashSet::new(),
                        keys: HashMap::new(),
                        codes: Vec::new(),
                    }
                } else {
                    Column::Categorical {
                        name: name.clone(),
                        ids: HashMap::new(),
                        labels: Vec::new(),
                        codes: Vec::new(),
                        memo: DictionaryMemo::new(),
                    }
                }
            })
            .collect();
        StrataBuilder { columns, bins }
    }

    /// Adds a batch; `arrays` holds the stratify columns in builder order.
    ///
    /// # Errors
    /// Values that cannot be encoded.
    pub fn push(&mut self, path: &std::path::Path, arrays: &[ArrayRef]) -> Result<()> {
        let bins = self.bins;
        for (col, array) in self.columns.iter_mut().zip(arrays) {
            match col {
                Column::Categorical { name, ids, labels, codes, memo } => {
                    if let Some(dict) = array.as_dictionary_opt::<Int32Type>().filter(|d| d.values().null_count() == 0)
                    {
                        // Each distinct value is encoded and looked up once.
                        let values = dict.values();
                        memo.refresh(values, u32::MAX);
                        let encoder = ValueEncoder::new(values, name)?;
                        let keys = dict.keys();
                        let mut key = Vec::with_capacity(32);
                        for row in 0..keys.len() {
                            let slot = memo.slot(keys, row);
                            if memo.slots[slot] == u32::MAX {
                                key.clear();
                                if slot == memo.null_slot() {
                                    ValueEncoder::new(&new_null_array(values.data_type(), 1), name)?.write(0, &mut key);
                                } else {
                                    encoder.write(slot, &mut key);
                                }
                                memo.slots[slot] = intern(
                                    ids,
                                    &key,
                                    |&id| id,
                                    |id| {
                                        labels.push(display(array, row));
                                        id
                                    },
                                );
                            }
                            codes.push(memo.slots[slot]);
                        }
                        continue;
                    }
                    let encoder = ValueEncoder::new(array, name)?;
                    let mut key = Vec::with_capacity(32);
                    for row in 0..array.len() {
                        key.clear();
                        encoder.write(row, &mut key);
                        codes.push(intern(
                            ids,
                            &key,
                            |&id| id,
                            |id| {
                                labels.push(display(array, row));
                                id
                            },
                        ));
                    }
                }
                Column::Numeric { name, values, distinct, keys, codes } => {
                    let floats = arrow_cast::cast(array, &DataType::Float64).map_err(|e| {
                        Error::column(path, name.as_str(), format!("cannot be read as numbers for --stratify: {e}"))
                    })?;
                    let floats = floats.as_primitive::<Float64Type>();
                    let encoder = ValueEncoder::new(array, name)?;
                    let mut key = Vec::with_capacity(32);
                    for row in 0..array.len() {
                        if floats.is_null(row) {
                            values.push(None);
                        } else {
                            let v = floats.value(row);
                            values.push(Some(if v == 0.0 { 0.0 } else { v }));
                        }
                        // Keep exact value identities while they may still be few.
                        if distinct.len() <= bins {
                            if let Some(v) = values.last().copied().flatten() {
                                // NaN is one value however its bits read (one stratum, one encoding).
                                distinct.insert(if v.is_nan() { f64::NAN.to_bits() } else { v.to_bits() });
                            }
                            key.clear();
                            encoder.write(row, &mut key);
                            codes.push(intern(keys, &key, |v| v.0, |id| (id, display(array, row))));
                        }
                    }
                }
            }
        }
        Ok(())
    }

    /// Settles bins and numbers the strata in label order.
    pub fn finish(self) -> Strata {
        let bins = self.bins;
        // Per column: code per row, a rank per code (sort order) and a label per code.
        let mut per_column: Vec<ColumnCodes> = Vec::new();
        for col in self.columns {
            match col {
                Column::Categorical { name, labels, codes, .. } => {
                    let ranks = rank_by_label(&labels);
                    let info = StratumColumn { name: name.clone(), binned: false, levels: labels.len() as u32 };
                    let labels = labels.iter().map(|l| format!("{name}={l}")).collect();
                    per_column.push((codes, ranks, labels, info));
                }
                Column::Numeric { name, values, distinct, keys, codes } => {
                    if distinct.len() <= bins {
                        let mut labels = vec![String::new(); keys.len()];
                        let mut value_of = vec![f64::NAN; keys.len()];
                        for (id, label) in keys.values() {
                            labels[*id as usize] = label.clone();
                        }
                        for (code, v) in codes.iter().zip(&values) {
                            if let Some(v) = v {
                                value_of[*code as usize] = *v;
                            }
                        }
                        // Numbers in numeric order, then NaN, then null.
                        let mut order: Vec<u32> = (0..keys.len() as u32).collect();
                        order.sort_by(|&a, &b| {
                            let key = |c: u32| {
                                let v = value_of[c as usize];
                                (labels[c as usize] == "<null>", v.is_nan(), v)
                            };
                            let (ka, kb) = (key(a), key(b));
                            ka.0.cmp(&kb.0).then(ka.1.cmp(&kb.1)).then(ka.2.total_cmp(&kb.2))
                        });
                        let mut ranks = vec![0; keys.len()];
                        for (r, &c) in order.iter().enumerate() {
                            ranks[c as usize] = r as u32;
                        }
                        let info = StratumColumn { name: name.clone(), binned: false, levels: keys.len() as u32 };
                        let labels = labels.iter().map(|l| format!("{name}={l}")).collect();
                        per_column.push((codes, ranks, labels, info));
                    } else {
                        per_column.push(quantile_bins(&name, &values, bins));
                    }
                }
            }
        }
        combine(per_column)
    }
}

/// One stratify column's codes: a code per row, a rank per code (the sort
/// order of its labels) and a label per code, with the column's record.
type ColumnCodes = (Vec<u32>, Vec<u32>, Vec<String>, StratumColumn);

/// The distinct rank tuples in order, each row's tuple number and the rows
/// per number.
type NumberedTuples = (Vec<Vec<u32>>, Vec<u32>, Vec<u64>);

fn rank_by_label(labels: &[String]) -> Vec<u32> {
    let mut order: Vec<usize> = (0..labels.len()).collect();
    // Null last; otherwise by label text.
    order.sort_by(|&a, &b| (labels[a] == "<null>", &labels[a]).cmp(&(labels[b] == "<null>", &labels[b])));
    let mut ranks = vec![0; labels.len()];
    for (r, &i) in order.iter().enumerate() {
        ranks[i] = r as u32;
    }
    ranks
}

fn shortest(v: f64) -> String {
    let mut b = ryu::Buffer::new();
    let s = b.format(v);
    s.strip_suffix(".0").unwrap_or(s).to_string()
}

fn quantile_bins(name: &str, values: &[Option<f64>], k: usize) -> ColumnCodes {
    let mut sorted: Vec<f64> = values.iter().flatten().copied().filter(|v| !v.is_nan()).collect();
    sorted.sort_by(f64::total_cmp);
    let n = sorted.len();
    // No number at all (only NaN and null): no cut, one bin.
    let mut cuts: Vec<f64> =
        if n == 0 { Vec::new() } else { (1..k).map(|j| sorted[(j * n).div_ceil(k) - 1]).collect() };
    cuts.dedup();
    let nbins = cuts.len() + 1;
    let (nan_code, null_code) = (nbins as u32, nbins as u32 + 1);
    let mut lo = vec![f64::INFINITY; nbins];
    let mut hi = vec![f64::NEG_INFINITY; nbins];
    let mut used_nan = false;
    let mut used_null = false;
    let codes: Vec<u32> = values
        .iter()
        .map(|v| match v {
            None => {
                used_null = true;
                null_code
            }
            Some(v) if v.is_nan() => {
                used_nan = true;
                nan_code
            }
            Some(v) => {
                let b = cuts.partition_point(|c| c < v);
                lo[b] = lo[b].min(*v);
                hi[b] = hi[b].max(*v);
                b as u32
            }
        })
        .collect();
    let mut labels: Vec<String> =
        (0..nbins).map(|b| format!("{name}=[{}, {}]", shortest(lo[b]), shortest(hi[b]))).collect();
    labels.push(format!("{name}=NaN"));
    labels.push(format!("{name}=<null>"));
    let ranks = (0..nbins as u32 + 2).collect();
    let levels = nbins as u32 + used_nan as u32 + used_null as u32;
    (codes, ranks, labels, StratumColumn { name: name.to_string(), binned: true, levels })
}

fn combine(per_column: Vec<ColumnCodes>) -> Strata {
    let columns: Vec<StratumColumn> = per_column.iter().map(|c| c.3.clone()).collect();
    let rows = per_column.first().map_or(0, |c| c.0.len());
    // Distinct rank tuples, numbered in sorted (lexicographic) order.
    let (sorted_tuples, row_stratum, sizes) = number_tuples(&per_column, rows);
    // Labels: rank -> code per column, then the code's label.
    let code_of_rank: Vec<HashMap<u32, u32>> =
        per_column.iter().map(|c| c.1.iter().enumerate().map(|(code, &rank)| (rank, code as u32)).collect()).collect();
    let mut labels: Vec<String> = sorted_tuples
        .iter()
        .map(|t| {
            t.iter()
                .enumerate()
                .map(|(ci, rank)| per_column[ci].2[code_of_rank[ci][rank] as usize].clone())
                .collect::<Vec<_>>()
                .join(", ")
        })
        .collect();
    // Labels must name strata uniquely (the manifest keys counts by label).
    let mut seen: HashMap<String, u32> = HashMap::new();
    for l in labels.iter_mut() {
        let n = seen.entry(l.clone()).or_insert(0);
        *n += 1;
        if *n > 1 {
            l.push_str(&format!(" #{n}"));
        }
    }
    Strata { row_stratum, labels, sizes, columns }
}

/// Most rank tuples a dense table numbers (4 MiB of ids); more go through a
/// map.
const DENSE_TUPLES: u64 = 1 << 20;

/// Numbers the distinct rank tuples of the rows in lexicographic order:
/// the sorted tuples, each row's number and the rows per number.
///
/// A tuple read as a mixed-radix number (first column most significant,
/// each column's base one more than its largest rank) orders as the tuples
/// do, so while the product of the bases is small a table indexed by that
/// number replaces hashing one tuple per row.
fn number_tuples(per_column: &[ColumnCodes], rows: usize) -> NumberedTuples {
    let bases: Vec<u64> = per_column.iter().map(|c| c.1.iter().max().map_or(1, |&m| m as u64 + 1)).collect();
    let product = bases.iter().try_fold(1u64, |acc, &b| acc.checked_mul(b)).filter(|&p| p <= DENSE_TUPLES);
    let Some(product) = product else { return number_tuples_by_map(per_column, rows) };
    let key = |row: usize| {
        per_column.iter().zip(&bases).fold(0u64, |acc, (c, &base)| acc * base + c.1[c.0[row] as usize] as u64)
    };
    // Each row's key, replaced by its stratum number once the keys are counted.
    let mut row_stratum: Vec<u32> = (0..rows).map(|row| key(row) as u32).collect();
    let mut sizes_by_key = vec![0u64; product as usize];
    for &k in &row_stratum {
        sizes_by_key[k as usize] += 1;
    }
    let mut id_of = vec![0u32; product as usize];
    let mut sorted_tuples = Vec::new();
    let mut sizes = Vec::new();
    for (k, &n) in sizes_by_key.iter().enumerate() {
        if n > 0 {
            id_of[k] = sizes.len() as u32;
            sizes.push(n);
            let mut rest = k as u64;
            let mut tuple = vec![0u32; bases.len()];
            for (slot, &base) in tuple.iter_mut().zip(&bases).rev() {
                *slot = (rest % base) as u32;
                rest /= base;
            }
            sorted_tuples.push(tuple);
        }
    }
    for k in row_stratum.iter_mut() {
        *k = id_of[*k as usize];
    }
    (sorted_tuples, row_stratum, sizes)
}

/// [`number_tuples`] for tuples too many for a table: one map entry per
/// distinct tuple.
fn number_tuples_by_map(per_column: &[ColumnCodes], rows: usize) -> NumberedTuples {
    let mut tuple_ids: BTreeMap<Vec<u32>, u32> = BTreeMap::new();
    let mut provisional = Vec::with_capacity(rows);
    let mut index: HashMap<Vec<u32>, u32> = HashMap::new();
    let mut tuples: Vec<Vec<u32>> = Vec::new();
    for row in 0..rows {
        let t: Vec<u32> = per_column.iter().map(|c| c.1[c.0[row] as usize]).collect();
        let next = tuples.len() as u32;
        let id = *index.entry(t.clone()).or_insert_with(|| {
            tuples.push(t);
            next
        });
        provisional.push(id);
    }
    for t in &tuples {
        tuple_ids.insert(t.clone(), 0);
    }
    for (i, v) in tuple_ids.values_mut().enumerate() {
        *v = i as u32;
    }
    let remap: Vec<u32> = tuples.iter().map(|t| tuple_ids[t]).collect();
    let mut sizes = vec![0u64; tuples.len()];
    let row_stratum: Vec<u32> = provisional
        .iter()
        .map(|&p| {
            let id = remap[p as usize];
            sizes[id as usize] += 1;
            id
        })
        .collect();
    (tuple_ids.into_keys().collect(), row_stratum, sizes)
}

/// The strata of a table with no `--stratify`: one stratum of every row.
pub fn single(rows: u64) -> Strata {
    Strata { row_stratum: vec![0; rows as usize], labels: vec!["all".into()], sizes: vec![rows], columns: vec![] }
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::sync::Arc;

    use arrow_array::{Float64Array, Int64Array, StringArray};

    #[test]
    fn categorical_with_null_stratum() {
        let mut b = StrataBuilder::new(&[("class".into(), ColumnType::String)], 5);
        let a: ArrayRef = Arc::new(StringArray::from(vec![Some("b"), None, Some("a"), Some("b")]));
        b.push(std::path::Path::new("t.csv"), &[a]).unwrap();
        let s = b.finish();
        assert_eq!(s.labels, ["class=a", "class=b", "class=<null>"]);
        assert_eq!(s.row_stratum, [1, 2, 0, 1]);
        assert_eq!(s.sizes, [1, 2, 1]);
    }

    /// The rows of `values` (indices into `dictionary`, `None` for null) as
    /// batches of dictionary arrays: the first two share one values array,
    /// as a Parquet column chunk's batches do, the last has its own.
    fn dictionary_batches(dictionary: &[&str], rows: &[Option<i32>]) -> Vec<ArrayRef> {
        use arrow_array::{DictionaryArray, Int32Array};
        let shared: ArrayRef = Arc::new(StringArray::from(dictionary.to_vec()));
        let mut reversed = dictionary.to_vec();
        reversed.reverse();
        let other: ArrayRef = Arc::new(StringArray::from(reversed));
        let n = dictionary.len() as i32;
        let third = rows.len() / 3;
        let cut = [&rows[..third], &rows[third..2 * third], &rows[2 * third..]];
        cut.iter()
            .enumerate()
            .map(|(i, part)| {
                let (values, keys): (&ArrayRef, Vec<Option<i32>>) = if i < 2 {
                    (&shared, part.to_vec())
                } else {
                    (&other, part.iter().map(|k| k.map(|k| n - 1 - k)).collect())
                };
                Arc::new(DictionaryArray::new(Int32Array::from(keys), values.clone())) as ArrayRef
            })
            .collect()
    }

    #[test]
    fn dictionary_batches_give_the_strata_of_plain_ones() {
        let dictionary = ["none", "low", "moderate", "high", "unused"];
        let rows: Vec<Option<i32>> =
            (0..300).map(|i: i32| if i % 11 == 4 { None } else { Some((i * 7 + i / 13) % 4) }).collect();
        let mut plain = StrataBuilder::new(&[("bloom_class".into(), ColumnType::String)], 5);
        let mut dict = StrataBuilder::new(&[("bloom_class".into(), ColumnType::String)], 5);
        let batches = dictionary_batches(&dictionary, &rows);
        let mut at = 0;
        for b in &batches {
            let text: Vec<Option<&str>> =
                rows[at..at + b.len()].iter().map(|k| k.map(|k| dictionary[k as usize])).collect();
            at += b.len();
            plain.push(std::path::Path::new("t.csv"), &[Arc::new(StringArray::from(text)) as ArrayRef]).unwrap();
            dict.push(std::path::Path::new("t.csv"), std::slice::from_ref(b)).unwrap();
        }
        let (p, d) = (plain.finish(), dict.finish());
        assert_eq!(d.labels, p.labels);
        assert_eq!(d.row_stratum, p.row_stratum);
        assert_eq!(d.sizes, p.sizes);
        assert!(d.labels.contains(&"bloom_class=<null>".to_string()));
        assert_eq!(d.labels.len(), 5, "four classes and null; an unused dictionary value is no stratum");
    }

    proptest::proptest! {
        /// The table indexed by mixed-radix tuples numbers strata exactly as
        /// the map of tuples does (lexicographic order of rank tuples).
        #[test]
        fn dense_tuple_numbers_match_the_map(
            levels in proptest::collection::vec(1usize..7, 1..4),
            seed in proptest::prelude::any::<u64>(),
            rows in 1usize..200,
        ) {
            let mut state = seed | 1;
            let mut next = |n: usize| {
                state ^= state << 13;
                state ^= state >> 7;
                state ^= state << 17;
                (state % n as u64) as u32
            };
            let per_column: Vec<ColumnCodes> = levels
                .iter()
                .map(|&l| {
                    // Ranks: a permutation of the codes, as rank_by_label gives.
                    let mut ranks: Vec<u32> = (0..l as u32).collect();
                    for i in (1..l).rev() {
                        ranks.swap(i, next(i + 1) as usize);
                    }
                    let codes = (0..rows).map(|_| next(l)).collect();
                    let info = StratumColumn { name: "c".into(), binned: false, levels: l as u32 };
                    (codes, ranks, vec![String::new(); l], info)
                })
                .collect();
            proptest::prop_assert_eq!(number_tuples(&per_column, rows), number_tuples_by_map(&per_column, rows));
        }
    }

    #[test]
    fn few_numbers_are_classes_many_are_binned() {
        let mut b = StrataBuilder::new(&[("y".into(), ColumnType::Integer)], 5);
        let a: ArrayRef = Arc::new(Int64Array::from(vec![1, 0, 1, 1, 0]));
        b.push(std::path::Path::new("t.csv"), &[a]).unwrap();
        assert_eq!(b.finish().labels, ["y=0", "y=1"]);

        // 1..=10 in 5 bins: cuts at v[1], v[3], v[5], v[7] = 2, 4, 6, 8.
        let mut b = StrataBuilder::new(&[("x".into(), ColumnType::Float)], 5);
        let a: ArrayRef = Arc::new(Float64Array::from((1..=10).map(|v| v as f64).collect::<Vec<_>>()));
        b.push(std::path::Path::new("t.csv"), &[a]).unwrap();
        let s = b.finish();
        assert_eq!(s.labels, ["x=[1, 2]", "x=[3, 4]", "x=[5, 6]", "x=[7, 8]", "x=[9, 10]"]);
        assert_eq!(s.sizes, [2, 2, 2, 2, 2]);
    }
}
