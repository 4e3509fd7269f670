//! The scoring ledger: `DIR/ledger.jsonl`, one entry per scoring of the
//! sealed test set, each carrying the BLAKE3 of the one before it.
//!
//! An entry's own hash (`entry`) is BLAKE3 over its JSON without the `entry`
//! field, exactly as written on its line; `previous` is the entry hash of the
//! line before (64 zeros for the first). So an edited entry fails its own
//! hash, a deleted or reordered one breaks `seq` and the chain, and only a
//! deleted last entry needs the pinned head (`--expect-head`) to be seen. The
//! predictions each entry scored are stored in `DIR/scores/` under the entry's
//! sequence number, with their BLAKE3 in the entry, for the optimism estimate.

use std::path::{Path, PathBuf};
use std::time::{Duration, Instant};

use serde::{Deserialize, Serialize};

use crate::error::{Error, Result};

/// The ledger's file name inside a split folder.
pub const FILE_NAME: &str = "ledger.jsonl";
/// The folder of stored predictions.
pub const SCORES_DIR: &str = "scores";
/// The lock file of the ledger: one scoring at a time reads, checks and appends.
pub const LOCK_NAME: &str = ".ledger.lock";
/// How long a scoring waits for the scorings ahead of it.
pub const LOCK_WAIT: Duration = Duration::from_secs(300);
/// The prefix of the ledger's temporary copies (`.ledger.jsonl.cleave-PID`).
const TEMP_PREFIX: &str = ".ledger.jsonl.cleave-";

/// `previous` of the first entry.
pub const GENESIS: &str = "0000000000000000000000000000000000000000000000000000000000000000";

/// One scoring, without its own hash.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct EntryBody {
    /// 1-based position in the ledger.
    pub seq: u64,
    /// When (RFC 3339, UTC).
    pub time: String,
    /// The submission's name.
    pub name: String,
    /// BLAKE3 of the predictions file as given.
    pub predictions_blake3: String,
    /// The metric.
    pub metric: String,
    /// Its value.
    pub value: f64,
    /// The bootstrap interval.
    pub interval: [f64; 2],
    /// The interval's confidence.
    pub confidence: f64,
    /// Bootstrap resamples.
    pub resamples: u64,
    /// The seed of the resamples.
    pub seed: u64,
    /// Test rows scored.
    pub rows: u64,
    /// The positive class, for binary auc and f1.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub positive: Option<String>,
    /// The stored predictions, relative to the folder.
    pub stored: String,
    /// BLAKE3 of the stored predictions.
    pub stored_blake3: String,
    /// The manifest checksum of the seal scored against.
    pub manifest: String,
    /// Entry hash of the line before.
    pub previous: String,
}

/// An entry as written: the body and its hash.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Entry {
    /// The body's fields.
    #[serde(flatten)]
    pub body: EntryBody,
    /// BLAKE3 of the body's JSON.
    pub entry: String,
}

impl EntryBody {
    /// The hash of this body: BLAKE3 of its JSON.
    pub fn hash(&self) -> String {
        blake3::hash(serde_json::to_string(self).expect("entries serialise").as_bytes()).to_hex().to_string()
    }

    /// The entry with its hash, as one JSON line.
    pub fn seal(self) -> (Entry, String) {
        let entry = self.hash();
        let e = Entry { body: self, entry };
        let line = serde_json::to_string(&e).expect("entries serialise");
        (e, line)
    }
}

/// A problem with the ledger.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
pub struct Problem {
    /// The entry (1-based line) it concerns.
    pub entry: u64,
    /// What is wrong.
    pub what: String,
}

/// The ledger as read and checked.
#[derive(Debug, Clone, Default)]
pub struct Ledger {
    /// Entries that could be read, in file order.
    pub entries: Vec<Entry>,
    /// Every problem found; empty means intact.
    pub problems: Vec<Problem>,
}

impl Ledger {
    /// The head: the last entry's hash (the genesis value when empty).
    pub fn head(&self) -> String {
        self.entries.last().map_or_else(|| GENESIS.to_string(), |e| e.entry.clone())
    }

    /// Whether the chain holds.
    pub fn intact(&self) -> bool {
        self.problems.is_empty()
    }
}

/// Refuses a ledger file that is not a regular file of the folder.
fn refuse_irregular(path: &Path) -> Result<()> {
    match crate::seal::manifest::irregular(path) {
        Some(what) => Err(Error::Manifest { path: path.to_path_buf(), what }),
        None => Ok(()),
    }
}

/// Whether `text` is a BLAKE3 hash as the ledger writes them: 64 lowercase hexadecimal digits.
fn is_hash(text: &str) -> bool {
    text.len() == 64 && text.bytes().all(|b| b.is_ascii_digit() || (b'a'..=b'f').contains(&b))
}

/// Reads and checks `DIR/ledger.jsonl` (absent: an empty ledger).
///
/// # Errors
/// When the file exists but cannot be read, or an entry's `entry` or `previous` is not a hash
/// (a broken chain is not an error: it is reported in [`Ledger::problems`]).
pub fn read(dir: &Path, expect_head: Option<&str>) -> Result<Ledger> {
    let path = dir.join(FILE_NAME);
    refuse_irregular(&path)?;
    let scores = dir.join(SCORES_DIR);
    if std::fs::symlink_metadata(&scores).is_ok_and(|m| !m.is_dir() || m.file_type().is_symlink()) {
        return Err(Error::Manifest {
            path: scores,
            what:
                "is not a folder of the sealed folder (a symbolic link or a file); refusing to read or write through it"
                    .into(),
        });
    }
    let text = match std::fs::read_to_string(&path) {
        Ok(t) => t,
        Err(e) if e.kind() == std::io::ErrorKind::NotFound => String::new(),
        Err(e) => return Err(Error::io(&path, "cannot read the ledger", e)),
    };
    let mut ledger = Ledger::default();
    let mut previous = GENESIS.to_string();
    for (i, line) in text.lines().enumerate() {
        let n = i as u64 + 1;
        let mut problem = |what: String| ledger.problems.push(Problem { entry: n, what });
        let e: Entry = match serde_json::from_str(line) {
            Ok(e) => e,
            Err(err) => {
                problem(format!("entry {n} cannot be read: {err}"));
                previous = String::new();
                continue;
            }
        };
        for (field, value) in [("entry", &e.entry), ("previous", &e.body.previous)] {
            if !is_hash(value) {
                return Err(Error::at_line(
                    &path,
                    n,
                    format!("`{field}` `{}` is not a 64-digit BLAKE3 hash", crate::value::shorten(value)),
                ));
            }
        }
        if e.body.hash() != e.entry || serde_json::to_string(&e).ok().as_deref() != Some(line) {
            problem(format!("entry {n} (`{}`) was edited: its contents no longer hash to its entry hash", e.body.name));
        }
        if e.body.seq != n {
            if e.body.seq > n {
                problem(format!("entry {n} is missing: line {n} holds entry {}", e.body.seq));
            } else {
                problem(format!("entries are out of order: line {n} holds entry {}", e.body.seq));
            }
        } else if e.body.previous != previous && !previous.is_empty() {
            problem(format!("entry {n} does not follow entry {}: one was changed, removed or moved", n - 1));
        }
        let stored = dir.join(&e.body.stored);
        if let Some(what) = crate::seal::manifest::irregular(&stored) {
            problem(format!("the stored predictions of entry {n} (`{}`) {what}", e.body.stored));
        }
        match std::fs::read(&stored) {
            Ok(bytes) if blake3::hash(&bytes).to_hex().as_str() == e.body.stored_blake3 => {}
            Ok(_) => problem(format!("the stored predictions of entry {n} (`{}`) changed", e.body.stored)),
            Err(_) => problem(format!("the stored predictions of entry {n} (`{}`) are missing", e.body.stored)),
        }
        previous = e.entry.clone();
        ledger.entries.push(e);
    }
    if let Some(pin) = expect_head {
        if ledger.head() != pin {
            let n = ledger.entries.len() as u64;
            ledger.problems.push(Problem {
                entry: n,
                what: format!(
                    "the ledger's head is {}, not the pinned {pin}: entries were removed from its end or it was replaced",
                    ledger.head()
                ),
            });
        }
    }
    Ok(ledger)
}

/// The ledger's lock, held from reading the ledger to the end of an append,
/// so that concurrent scorings take their turns. The kernel releases it if
/// the holder dies; the lock file stays (removing it would race).
pub struct LedgerLock {
    _file: std::fs::File,
}

impl LedgerLock {
    /// Takes the lock of `dir`'s ledger, waiting up to [`LOCK_WAIT`] for the
    /// scorings ahead.
    ///
    /// # Errors
    /// The lock file cannot be created, or the wait runs out.
    pub fn take(dir: &Path) -> Result<LedgerLock> {
        let path = dir.join(LOCK_NAME);
        let mut options = std::fs::File::options();
        options.create(true).truncate(false).write(true);
        #[cfg(unix)]
        std::os::unix::fs::OpenOptionsExt::custom_flags(&mut options, libc::O_NOFOLLOW);
        let file = options.open(&path).map_err(|e| Error::io(&path, "cannot create the ledger's lock file", e))?;
        let start = Instant::now();
        let mut pause = Duration::from_millis(1);
        loop {
            match file.try_lock() {
                Ok(()) => return Ok(LedgerLock { _file: file }),
                Err(std::fs::TryLockError::WouldBlock) if start.elapsed() < LOCK_WAIT => {
                    std::thread::sleep(pause);
                    pause = (pause * 2).min(Duration::from_millis(50));
                }
                Err(std::fs::TryLockError::WouldBlock) => {
                    return Err(Error::io(
                        &path,
                        "waited for other scorings to finish",
                        std::io::Error::new(
                            std::io::ErrorKind::TimedOut,
                            format!("still locked after {} s", LOCK_WAIT.as_secs()),
                        ),
                    ))
                }
                Err(std::fs::TryLockError::Error(e)) => return Err(Error::io(&path, "cannot lock", e)),
            }
        }
    }

    /// Removes what scorings that died left behind: temporary copies of the
    /// ledger, and stored predictions that no entry of the (intact) ledger
    /// names. Only the lock's holder may, as no other writer is alive then.
    ///
    /// # Errors
    /// A leftover that cannot be removed.
    pub fn clean(&self, dir: &Path, ledger: &Ledger) -> Result<()> {
        debug_assert!(ledger.intact(), "a broken ledger is evidence: nothing is removed");
        let stale =
            |path: &Path| std::fs::remove_file(path).map_err(|e| Error::io(path, "cannot remove the leftover", e));
        for e in std::fs::read_dir(dir).map_err(|e| Error::io(dir, "cannot list", e))? {
            let e = e.map_err(|e| Error::io(dir, "cannot list", e))?;
            if e.file_name().to_string_lossy().starts_with(TEMP_PREFIX) {
                stale(&e.path())?;
            }
        }
        let scores = dir.join(SCORES_DIR);
        let named: std::collections::HashSet<PathBuf> =
            ledger.entries.iter().map(|e| dir.join(&e.body.stored)).collect();
        match std::fs::read_dir(&scores) {
            Ok(list) => {
                for e in list {
                    let e = e.map_err(|e| Error::io(&scores, "cannot list", e))?;
                    if e.file_type().is_ok_and(|t| t.is_file()) && !named.contains(&e.path()) {
                        stale(&e.path())?;
                    }
                }
            }
            Err(e) if e.kind() == std::io::ErrorKind::NotFound => {}
            Err(e) => return Err(Error::io(&scores, "cannot list", e)),
        }
        Ok(())
    }
}

/// Appends an entry, under the ledger's lock: the stored predictions first,
/// then the ledger rewritten beside itself, synced, renamed into place and
/// the folder synced, so that a crash leaves the old ledger or the new one.
/// On failure the stored predictions and the copy are removed again.
///
/// # Errors
/// Disk failures.
pub fn append(dir: &Path, ledger: &Ledger, _lock: &LedgerLock, body: EntryBody, stored_bytes: &[u8]) -> Result<Entry> {
    let scores = dir.join(SCORES_DIR);
    crate::failpoint::io_step()
        .and_then(|()| std::fs::create_dir_all(&scores))
        .map_err(|e| Error::io(&scores, "cannot create", e))?;
    let stored_path: PathBuf = dir.join(&body.stored);
    let _ = std::fs::remove_file(&stored_path);
    let tmp = dir.join(format!("{TEMP_PREFIX}{}", std::process::id()));
    let written = (|| {
        crate::io::write_small(&stored_path, stored_bytes)?;
        crate::failpoint::kill_at("score-after-stored");
        let (entry, line) = body.seal();
        let path = dir.join(FILE_NAME);
        debug_assert!(ledger.intact(), "only an intact ledger is appended to");
        let mut text = match std::fs::read_to_string(&path) {
            Ok(t) => t,
            Err(e) if e.kind() == std::io::ErrorKind::NotFound => String::new(),
            Err(e) => return Err(Error::io(&path, "cannot read the ledger", e)),
        };
        text.push_str(&line);
        text.push('\n');
        let _ = std::fs::remove_file(&tmp);
        crate::io::write_small(&tmp, text.as_bytes())?;
        crate::failpoint::kill_at("score-after-copy");
        crate::failpoint::io_step()
            .and_then(|()| std::fs::rename(&tmp, &path))
            .map_err(|e| Error::io(&path, "cannot write the ledger", e))?;
        crate::failpoint::kill_at("score-after-rename");
        Ok(entry)
    })();
    match written {
        Ok(entry) => {
            // The entry is in place once renamed; syncing the folder makes the rename durable
            // against a power loss, and its failure cannot undo the entry, so it is best effort.
            let _ = std::fs::File::open(dir).and_then(|d| d.sync_all());
            Ok(entry)
        }
        Err(e) => {
            let _ = std::fs::remove_file(&tmp);
            let _ = std::fs::remove_file(&stored_path);
            Err(e)
        }
    }
}
