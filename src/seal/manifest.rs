//! The manifest: what a split wrote, and the seal over it.
//!
//! `manifest.yaml` is YAML (described by `schemas/manifest.schema.json`). Its
//! last line is `checksum: HEX`, the BLAKE3-256 of every byte before that
//! line, exactly as stored: an edit to any field, comment or space is seen.
//! That checksum is also the seal's identity, which an evaluator pins with
//! `--expect-manifest`: a checksum catches accidents, a pin catches a
//! re-sealed or rolled-back folder.
//!
//! Reading is strict: a size cap before parsing, unknown fields refused, the
//! format version checked, and every file name a plain name inside the folder.

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

use serde::{Deserialize, Serialize};

use crate::error::{Error, Result};
use crate::io::{ColumnType, Format};

/// The manifest format this build writes and reads.
pub const FORMAT_VERSION: u32 = 1;
/// The version of the rules that decide which row goes where (docs/format.md,
/// "How a split decides"). 1: strata rounded one by one; 2: strata rounded
/// together (controlled rounding). Manifests without the field are of 1.
pub const ASSIGNMENT_VERSION: u32 = 2;

fn assignment_v1() -> u32 {
    1
}

/// The manifest's file name inside an output folder.
pub const FILE_NAME: &str = "manifest.yaml";
/// Manifests larger than this are refused before parsing.
pub const MAX_BYTES: u64 = 64 << 20;

/// The whole manifest.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Manifest {
    /// Manifest format version.
    pub format_version: u32,
    /// The assignment rules' version ([`ASSIGNMENT_VERSION`] when written).
    #[serde(default = "assignment_v1")]
    pub assignment_version: u32,
    /// The program that wrote it.
    pub tool: Tool,
    /// When it was written (RFC 3339, UTC; from `SOURCE_DATE_EPOCH` when set).
    pub created: String,
    /// The input file.
    pub source: Source,
    /// The options of the split.
    pub options: SplitOptionsRecord,
    /// How rows were digested.
    pub digest: DigestRecord,
    /// The strata, when stratified.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub strata: Option<StrataRecord>,
    /// The label columns of a multilabel split and their positives per
    /// partition (in partition order).
    #[serde(default, skip_serializing_if = "BTreeMap::is_empty")]
    pub label_positives: BTreeMap<String, Vec<u64>>,
    /// The groups, when grouped.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub groups: Option<GroupRecord>,
    /// The time order, when time-ordered.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub order: Option<OrderRecord>,
    /// The folds, when asked for.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub folds: Option<FoldRecord>,
    /// One entry per partition, in order train, validation, test.
    pub partitions: Vec<PartitionRecord>,
    /// The label-free test file for the evaluator hand-off (with `--label`).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub handoff: Option<HandoffRecord>,
    /// The seal over the test partition.
    pub seal: SealRecord,
    /// BLAKE3 of everything above it; present when read from a file.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub checksum: Option<String>,
}

/// The program that wrote a manifest.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Tool {
    /// Always `cleave`.
    pub name: String,
    /// Its version.
    pub version: String,
}

/// The input file of a split.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Source {
    /// File name (without folders: the manifest names no machine's paths).
    pub file: String,
    /// Its format.
    pub format: Format,
    /// Its size.
    pub bytes: u64,
    /// BLAKE3-256 of the file.
    pub blake3: String,
    /// Data rows read.
    pub rows: u64,
    /// Columns in file order with their types by meaning.
    pub columns: Vec<ColumnRecord>,
    /// Null values per label column, kept with `--allow-null-label` (such
    /// rows are left out of scoring).
    #[serde(default, skip_serializing_if = "BTreeMap::is_empty")]
    pub null_labels: BTreeMap<String, u64>,
}

/// A column and its type.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ColumnRecord {
    /// Column name.
    pub name: String,
    /// Type by meaning.
    #[serde(rename = "type")]
    pub column_type: ColumnType,
}

/// The options a split ran with.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SplitOptionsRecord {
    /// Shares as given, in partition order.
    pub ratios: Vec<String>,
    /// The seed.
    pub seed: u64,
    /// Stratify columns.
    pub stratify: Vec<String>,
    /// Quantile bins for numeric stratify columns.
    pub bins: u32,
    /// 0/1 label columns stratified together.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub stratify_labels: Vec<String>,
    /// Key columns (every column when not given).
    pub key: Vec<String>,
    /// Label columns.
    pub label: Vec<String>,
    /// Group columns.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub group: Vec<String>,
    /// The order column.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub order_by: Option<String>,
    /// The gap as given.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub gap: Option<String>,
    /// Stable (hash-based) assignment.
    #[serde(default, skip_serializing_if = "std::ops::Not::not")]
    pub stable: bool,
    /// `--copies`: `together`, `together-near` or `apart` (manifests
    /// without it: apart).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub copies: Option<String>,
    /// `--allow-null-label`: rows with a null label kept.
    #[serde(default, skip_serializing_if = "std::ops::Not::not")]
    pub allow_null_label: bool,
    /// `--folds` as given.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub folds: Option<String>,
    /// Format of the partition files.
    pub output_format: Format,
    /// `--compression` as given.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub compression: Option<String>,
}

/// How rows were digested.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct DigestRecord {
    /// `blake3-128`.
    pub algorithm: String,
    /// `cleave-row-v1`.
    pub encoding: String,
    /// Feature columns in encoding order.
    pub features: Vec<String>,
    /// Label columns in encoding order.
    pub labels: Vec<String>,
    /// Whether digests are keyed.
    pub keyed: bool,
    /// The key's fingerprint, when keyed.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub key_fingerprint: Option<String>,
}

/// The strata of a stratified split.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct StrataRecord {
    /// How each stratify column was used.
    pub columns: Vec<StratumColumn>,
    /// Number of strata.
    pub count: u64,
    /// Strata too small to reach every partition (the first 1,000 in label
    /// order).
    pub short: Vec<ShortStratum>,
    /// How many strata are too small to reach every partition.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub short_count: Option<u64>,
}

/// A stratum with no rows in some partition.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ShortStratum {
    /// Its label.
    pub stratum: String,
    /// Its rows.
    pub rows: u64,
    /// The partitions that got none of them.
    pub missing_from: Vec<Partition>,
}

/// One partition file.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct PartitionRecord {
    /// Which partition.
    pub name: Partition,
    /// File name inside the folder.
    pub file: String,
    /// File format.
    pub format: Format,
    /// Data rows.
    pub rows: u64,
    /// File size.
    pub bytes: u64,
    /// BLAKE3-256 of the file.
    pub blake3: String,
    /// Order-independent digest of the partition's rows.
    pub content_digest: String,
    /// Rows per stratum (stratified splits).
    #[serde(default, skip_serializing_if = "BTreeMap::is_empty")]
    pub strata: BTreeMap<String, u64>,
    /// Distinct groups (grouped splits).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub groups: Option<u64>,
    /// Earliest and latest time (time-ordered splits).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub time: Option<TimeRange>,
    /// Rows of this partition left out by the gap.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub dropped_by_gap: Option<u64>,
    /// Rows of this partition's groups left out for falling at or after a
    /// later partition's start (time-ordered grouped splits).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub dropped_by_group_rule: Option<u64>,
    /// Rows per fold (development partitions, with folds other than leave-one-out).
    #[serde(default, skip_serializing_if = "BTreeMap::is_empty")]
    pub folds: BTreeMap<u32, u64>,
}

/// Earliest and latest time of a partition, as text.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct TimeRange {
    /// Earliest.
    pub first: String,
    /// Latest.
    pub last: String,
}

/// The time order of a time-ordered split.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct OrderRecord {
    /// The order column.
    pub column: String,
    /// What it holds.
    pub kind: crate::seal::time::TimeKind,
    /// The gap in the column's units (microseconds for times and dates).
    pub gap: i64,
    /// Start time of each partition, in partition order.
    pub starts: Vec<String>,
    /// The test period's start as a number in the column's units
    /// (microseconds since the epoch for times and dates): what `check`
    /// compares against.
    pub test_start: i64,
    /// The column where each row's label interval ends (`--until`): `check`
    /// then compares a row's end, not its start.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub until: Option<String>,
}

/// The groups of a grouped split.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct GroupRecord {
    /// Group columns.
    pub columns: Vec<String>,
    /// Distinct groups in the input.
    pub count: u64,
    /// Per stratum, the largest gap between a partition's share of that
    /// stratum and the asked share, in percentage points (grouped and
    /// stratified splits).
    #[serde(default, skip_serializing_if = "BTreeMap::is_empty")]
    pub largest_deviation: BTreeMap<String, String>,
}

/// The cross-validation folds.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct FoldRecord {
    /// How they were made.
    pub kind: crate::seal::manifest::FoldKind,
    /// Number of folds (of blocks for purged and combinatorial designs, of
    /// splits for windows).
    pub k: u32,
    /// The column holding each development row's fold or block (none for
    /// windows, where a row may be validated in several splits or none).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub column: Option<String>,
    /// Time designs: the blocks, each with its rows and time range.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub blocks: Vec<BlockRecord>,
    /// The fold columns of further repeats (`--repeats`), each from its own seed.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub repeat_columns: Vec<String>,
    /// The membership columns, one per split: `train`, `validate` or `out`
    /// for every development row (none for leave-one-out).
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub membership: Vec<String>,
    /// Every split: what it validates and how many rows train, are
    /// validated and are left out.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub splits: Vec<FoldSplitRecord>,
    /// Combinatorial purged: per path, the split used for each block.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub paths: Vec<Vec<u32>>,
    /// The label intervals' end column (`--until`).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub until: Option<String>,
    /// The embargo as given.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub embargo: Option<String>,
    /// Stratified folds: rows per fold of each stratum.
    #[serde(default, skip_serializing_if = "BTreeMap::is_empty")]
    pub strata: BTreeMap<String, Vec<u64>>,
}

/// One split of a fold design.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct FoldSplitRecord {
    /// Split number (its membership column is the fold column's name, `_`, and this).
    pub split: u32,
    /// The blocks or folds it validates (empty for windows).
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub validates: Vec<u32>,
    /// Development rows that train.
    pub train: u64,
    /// Development rows validated.
    pub validate: u64,
    /// Development rows left out (gap, purging, embargo, outside the window).
    pub out: u64,
}

/// One time block.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct BlockRecord {
    /// Block number (the fold column's value).
    pub block: u32,
    /// Rows in the block.
    pub rows: u64,
    /// Earliest and latest time.
    pub time: TimeRange,
}

/// The label-free test file: what the modelling team predicts on.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct HandoffRecord {
    /// File name inside the folder.
    pub file: String,
    /// Rows (the test rows, in order).
    pub rows: u64,
    /// File size.
    pub bytes: u64,
    /// BLAKE3-256 of the file.
    pub blake3: String,
    /// The row id column.
    pub row_id: String,
}

/// The seal over the test partition.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SealRecord {
    /// The sealed partition (always test).
    pub partition: Partition,
    /// Whether the digests are keyed.
    pub keyed: bool,
    /// The seal's digest files.
    pub files: Vec<SealFile>,
}

/// Kinds of digest the seal keeps.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum SealKind {
    /// Every key column; the evaluator's part (it covers the labels).
    Rows,
    /// Key columns minus labels.
    Features,
    /// Features after normalisation.
    Loose,
    /// One digest per distinct group key of the test partition.
    Groups,
}

impl SealKind {
    /// The kind's name.
    pub fn name(self) -> &'static str {
        match self {
            SealKind::Rows => "rows",
            SealKind::Features => "features",
            SealKind::Loose => "loose",
            SealKind::Groups => "groups",
        }
    }
}

/// One digest file of the seal.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SealFile {
    /// What its digests cover.
    pub kind: SealKind,
    /// File name inside the folder.
    pub file: String,
    /// Whether it may go to the modelling team (false for row digests).
    pub shareable: bool,
    /// Number of records.
    pub records: u64,
    /// File size.
    pub bytes: u64,
    /// BLAKE3-256 of the file.
    pub blake3: String,
}

impl Manifest {
    /// The YAML text, ending with the checksum line.
    ///
    /// # Errors
    /// Never in practice; serialisation of these types cannot fail.
    pub fn to_text(&self) -> String {
        let mut body = self.clone();
        body.checksum = None;
        let mut text = String::from(
            "# cleave split manifest: edit nothing; the last line is a checksum of every byte above it.\n",
        );
        let yaml = serde_norway::to_string(&body).expect("manifest types serialise");
        // Lines of a block scalar (`|`, `|-`, `>`...) are text as they are.
        let mut block: Option<usize> = None;
        for line in yaml.lines() {
            let indent = line.len() - line.trim_start().len();
            match block {
                Some(i) if indent > i || line.trim().is_empty() => text.push_str(line),
                _ => {
                    block = None;
                    let tail = line.trim_end().rsplit(' ').next().unwrap_or("");
                    if tail.starts_with(['|', '>']) && tail.len() <= 3 {
                        block = Some(indent);
                        text.push_str(line);
                    } else {
                        text.push_str(&quote_dates(line));
                    }
                }
            }
            text.push('\n');
        }
        let sum = blake3::hash(text.as_bytes()).to_hex().to_string();
        text.push_str(&format!("checksum: {sum}\n"));
        text
    }

    /// The partition record of `p`.
    pub fn partition(&self, p: Partition) -> Option<&PartitionRecord> {
        self.partitions.iter().find(|r| r.name == p)
    }

    /// The seal file of a kind.
    pub fn seal_file(&self, kind: SealKind) -> Option<&SealFile> {
        self.seal.files.iter().find(|f| f.kind == kind)
    }
}

/// YAML 1.1 readers (PyYAML among them) resolve more plain scalars than
/// YAML 1.2 does: `yes`, `no`, `on`, `off`, `y`, `n` in their cases are
/// booleans, `~` and `null` null, `0b101`, `0x1F`, `017`, `1_000` and
/// sexagesimal `1:20` integers, `.5`-like and `1_000.5` floats, dates and
/// times timestamps, `<<` a merge key and `=` a value key. The YAML emitter
/// leaves those bare where YAML 1.2 sees text, so every such key or value
/// is quoted here, and every reader sees text. Real booleans and numbers
/// are written as `true`, `false` and plain decimals, which no rule here
/// touches.
fn quote_dates(line: &str) -> String {
    // Indentation and sequence dashes, then `key: value`, `key:` or a bare value.
    let body = line.trim_start();
    let mut at = line.len() - body.len();
    while line[at..].starts_with("- ") {
        at += 2;
    }
    let (lead, rest) = line.split_at(at);
    let mut out = String::from(lead);
    let (key, value) = match rest.find(": ") {
        Some(p) if !rest.starts_with(['\'', '"']) => (Some(&rest[..p]), Some(&rest[p + 2..])),
        _ => match rest.strip_suffix(':') {
            Some(k) if !rest.starts_with(['\'', '"']) => (Some(k), None),
            _ => (None, Some(rest)),
        },
    };
    if let Some(k) = key {
        out.push_str(&quoted_if_ambiguous(k));
        out.push(':');
        if value.is_some() {
            out.push(' ');
        }
    }
    if let Some(v) = value {
        out.push_str(&quoted_if_ambiguous(v));
    }
    out
}

/// `scalar` in single quotes when it is a plain scalar that YAML 1.1 would
/// resolve to something other than text (see [`quote_dates`]).
fn quoted_if_ambiguous(scalar: &str) -> String {
    if scalar.is_empty() || scalar.starts_with(['\'', '"', '|', '>', '[', '{', '&', '*', '!']) {
        return scalar.to_string();
    }
    if yaml11_not_text(scalar) {
        format!("'{}'", scalar.replace('\'', "''"))
    } else {
        scalar.to_string()
    }
}

/// Whether a YAML 1.1 reader resolves the plain scalar `s` to a boolean,
/// null, number, timestamp, merge or value key (the YAML 1.1 type
/// repository's regular expressions, written out; real `true`, `false` and
/// decimal numbers as the emitter writes them excepted).
fn yaml11_not_text(s: &str) -> bool {
    const WORDS: &[&str] = &[
        "y", "Y", "yes", "Yes", "YES", "n", "N", "no", "No", "NO", "on", "On", "ON", "off", "Off", "OFF", "~", "null",
        "Null", "NULL", "<<", "=", ".inf", ".Inf", ".INF", "+.inf", "+.Inf", "+.INF", "-.inf", "-.Inf", "-.INF",
        ".nan", ".NaN", ".NAN",
    ];
    if WORDS.contains(&s) {
        return true;
    }
    let b = s.as_bytes();
    let digits = |t: &str| !t.is_empty() && t.bytes().all(|c| c.is_ascii_digit() || c == b'_');
    let unsigned = s.strip_prefix(['+', '-']).unwrap_or(s);
    // Dates and times: YYYY-MM-DD at the start.
    let date =
        b.len() >= 10 && b[..4].iter().all(u8::is_ascii_digit) && b[4] == b'-' && b[5].is_ascii_digit() && b[7] == b'-'
            || (b.len() >= 8 && b[..4].iter().all(u8::is_ascii_digit) && b[4] == b'-' && b[6] == b'-');
    // Integers: binary, octal (leading 0), hex, with underscores; sexagesimal.
    let int = unsigned
        .strip_prefix("0b")
        .is_some_and(|t| !t.is_empty() && t.bytes().all(|c| matches!(c, b'0' | b'1' | b'_')))
        || unsigned
            .strip_prefix("0x")
            .is_some_and(|t| !t.is_empty() && t.bytes().all(|c| c.is_ascii_hexdigit() || c == b'_'))
        || (unsigned.starts_with('0')
            && unsigned.len() > 1
            && unsigned.bytes().all(|c| matches!(c, b'0'..=b'7' | b'_')))
        || (digits(unsigned) && unsigned.contains('_'))
        || (unsigned.contains(':')
            && unsigned.split(':').all(|part| {
                digits(part)
                    || part.split_once('.').is_some_and(|(a, f)| digits(a) && f.bytes().all(|c| c.is_ascii_digit()))
            }));
    // Floats with underscores, or `.5`-style (the emitter writes neither).
    let float = unsigned.contains('_')
        && unsigned
            .split_once('.')
            .is_some_and(|(a, f)| (a.is_empty() || digits(a)) && f.bytes().all(|c| c.is_ascii_digit() || c == b'_'));
    date || int || float
}

/// A manifest as read from disk, with what its checksum says.
pub struct LoadedManifest {
    /// The manifest file.
    pub path: PathBuf,
    /// Its folder.
    pub dir: PathBuf,
    /// The parsed manifest.
    pub manifest: Manifest,
    /// The checksum recorded on its last line.
    pub recorded: String,
    /// The BLAKE3 of the bytes above that line.
    pub computed: String,
}

impl LoadedManifest {
    /// Whether the recorded checksum matches the bytes.
    pub fn intact(&self) -> bool {
        self.recorded == self.computed
    }

    /// The path of a file the manifest names.
    pub fn file(&self, name: &str) -> PathBuf {
        self.dir.join(name)
    }
}

/// What is wrong with `path` as a file of a sealed folder, if anything: it
/// must be a regular file of its own (not a symbolic link, not a hard link
/// shared with a file elsewhere) whose parent is the folder itself, so that
/// no command reads or writes outside the folder through it. A missing file
/// is not this check's business.
pub fn irregular(path: &Path) -> Option<String> {
    let meta = std::fs::symlink_metadata(path).ok()?;
    if meta.file_type().is_symlink() {
        return Some("is a symbolic link; a sealed folder's files must be regular files inside it".into());
    }
    if !meta.is_file() {
        return Some("is not a regular file".into());
    }
    #[cfg(unix)]
    {
        use std::os::unix::fs::MetadataExt;
        if meta.nlink() > 1 {
            return Some(format!(
                "has {} hard links; a sealed folder's files must not be shared with files elsewhere",
                meta.nlink()
            ));
        }
    }
    None
}

/// Resolves `PATH` as given to verify/show: a folder means its manifest.
pub fn resolve(path: &Path) -> PathBuf {
    if path.is_dir() {
        path.join(FILE_NAME)
    } else {
        path.to_path_buf()
    }
}

fn manifest_err(path: &Path, what: impl Into<String>) -> Error {
    Error::Manifest { path: path.to_path_buf(), what: what.into() }
}

/// A plain file name: no folders, no `..`, not absolute.
pub fn is_plain_name(name: &str) -> bool {
    !name.is_empty()
        && name != "."
        && name != ".."
        && !name.contains('/')
        && !name.contains('\\')
        && !name.contains('\0')
}

/// Reads and parses a manifest. The checksum is computed but not enforced:
/// callers decide (verify reports a mismatch, check refuses).
///
/// # Errors
/// Unreadable, oversized, unparseable, of an unknown version, without a
/// checksum line, or naming a path outside its folder.
pub fn load(path: &Path) -> Result<LoadedManifest> {
    let path = resolve(path);
    if let Some(what) = irregular(&path) {
        return Err(manifest_err(&path, what));
    }
    let meta = std::fs::metadata(&path).map_err(|e| Error::io(&path, "cannot read the manifest", e))?;
    if meta.len() > MAX_BYTES {
        return Err(manifest_err(&path, format!("is {} bytes; manifests are at most {MAX_BYTES}", meta.len())));
    }
    let bytes = std::fs::read(&path).map_err(|e| Error::io(&path, "cannot read the manifest", e))?;
    let text = std::str::from_utf8(&bytes).map_err(|_| manifest_err(&path, "is not valid UTF-8"))?;
    let body_end = text
        .trim_end_matches('\n')
        .rfind('\n')
        .map(|p| p + 1)
        .ok_or_else(|| manifest_err(&path, "has no checksum line"))?;
    let last = text[body_end..].trim_end_matches('\n');
    let recorded = last
        .strip_prefix("checksum: ")
        .filter(|h| h.len() == 64 && h.bytes().all(|b| b.is_ascii_hexdigit()))
        .ok_or_else(|| manifest_err(&path, "does not end with a `checksum: HEX` line"))?
        .to_ascii_lowercase();
    let computed = blake3::hash(&text.as_bytes()[..body_end]).to_hex().to_string();
    let manifest: Manifest =
        serde_norway::from_str(text).map_err(|e| manifest_err(&path, format!("cannot be parsed: {e}")))?;
    let names: Vec<Partition> = manifest.partitions.iter().map(|p| p.name).collect();
    if !matches!(
        names.as_slice(),
        [Partition::Train, Partition::Test] | [Partition::Train, Partition::Validation, Partition::Test]
    ) {
        let listed: Vec<&str> = names.iter().map(|p| p.name()).collect();
        return Err(manifest_err(
            &path,
            format!(
                "lists the partitions [{}]; a split has train, validation (optional) and test, in that order",
                listed.join(", ")
            ),
        ));
    }
    if manifest.format_version != FORMAT_VERSION {
        return Err(manifest_err(
            &path,
            format!("has format version {}; this cleave reads version {FORMAT_VERSION}", manifest.format_version),
        ));
    }
    if manifest.digest.algorithm != crate::digest::ALGORITHM || manifest.digest.encoding != crate::digest::ENCODING {
        return Err(manifest_err(
            &path,
            format!(
                "uses digest {} with encoding {}; this cleave knows {} with {}",
                manifest.digest.algorithm,
                manifest.digest.encoding,
                crate::digest::ALGORITHM,
                crate::digest::ENCODING
            ),
        ));
    }
    let names = manifest
        .partitions
        .iter()
        .map(|p| &p.file)
        .chain(manifest.seal.files.iter().map(|f| &f.file))
        .chain(manifest.handoff.iter().map(|h| &h.file));
    for name in names {
        if !is_plain_name(name) {
            return Err(manifest_err(&path, format!("names `{name}`, which is not a file inside its folder")));
        }
    }
    let dir = path.parent().map(Path::to_path_buf).unwrap_or_default();
    let dir = if dir.as_os_str().is_empty() { PathBuf::from(".") } else { dir };
    Ok(LoadedManifest { path, dir, manifest, recorded, computed })
}

/// A pinned manifest checksum, checked for form.
///
/// # Errors
/// Anything but 64 hexadecimal digits.
pub fn parse_pin(text: &str) -> Result<String> {
    let t = text.trim();
    if t.len() == 64 && t.bytes().all(|b| b.is_ascii_hexdigit()) {
        Ok(t.to_ascii_lowercase())
    } else {
        Err(Error::Options(format!("--expect-manifest `{text}` is not a 64-digit hexadecimal BLAKE3 checksum")))
    }
}

/// A partition of the split.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash, serde::Serialize, serde::Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Partition {
    /// Training rows.
    Train,
    /// Validation rows (only with three shares).
    Validation,
    /// The sealed test rows.
    Test,
}

impl Partition {
    /// The partition's name, as in file names and the manifest.
    pub fn name(self) -> &'static str {
        match self {
            Partition::Train => "train",
            Partition::Validation => "validation",
            Partition::Test => "test",
        }
    }
}

impl std::fmt::Display for Partition {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(self.name())
    }
}

/// How one stratify column was used.
#[derive(Debug, Clone, PartialEq, Eq, serde::Serialize, serde::Deserialize)]
#[serde(deny_unknown_fields)]
pub struct StratumColumn {
    /// The column.
    pub name: String,
    /// Cut into quantile bins (numeric with more than `--bins` distinct values).
    pub binned: bool,
    /// Number of distinct strata this column contributes.
    pub levels: u32,
}

/// The kind of folds made, as the manifest records it.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize, serde::Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum FoldKind {
    /// Plain k-fold.
    KFold,
    /// Stratified k-fold.
    Stratified,
    /// Grouped k-fold (groups whole).
    Grouped,
    /// Leave-one-out (rows, or groups).
    LeaveOneOut,
    /// Rolling-origin blocks in time order.
    RollingOrigin,
    /// Purged k-fold: time blocks, each validated once, purged and embargoed.
    Purged,
    /// Combinatorial purged cross-validation.
    CombinatorialPurged,
    /// Sliding windows in time order.
    SlidingWindow,
    /// Expanding windows in time order.
    ExpandingWindow,
    /// Multilabel folds by iterative stratification.
    Multilabel,
}

impl FoldKind {
    /// The method's usual name.
    pub fn name(self) -> &'static str {
        match self {
            FoldKind::KFold => "k-fold",
            FoldKind::Stratified => "stratified k-fold",
            FoldKind::Grouped => "grouped k-fold",
            FoldKind::LeaveOneOut => "leave-one-out",
            FoldKind::RollingOrigin => "rolling origin",
            FoldKind::Purged => "purged k-fold",
            FoldKind::CombinatorialPurged => "combinatorial purged",
            FoldKind::SlidingWindow => "sliding window",
            FoldKind::ExpandingWindow => "expanding window",
            FoldKind::Multilabel => "multilabel stratified (iterative stratification)",
        }
    }
}
