//! The output folder: the lock that keeps two splits out of one folder, the
//! staging folder everything is written into, and the rename that commits
//! it, so that the target is either absent, the old folder, or the complete
//! new one.

use std::path::{Path, PathBuf};

use super::SplitConfig;
use crate::error::{Error, Result};
use crate::seal::manifest;

/// What a folder holds besides a split: the evaluator's ledger (named here, as
/// `split` may not use the score room).
const LEDGER: &str = "ledger.jsonl";
const SCORES: &str = "scores";
const LEDGER_LOCK: &str = ".ledger.lock";

/// The staging folder beside the target; removed unless the split got to
/// the end.
pub(super) struct Staging {
    /// Where it is.
    pub(super) path: PathBuf,
    done: bool,
}

impl Staging {
    /// Creates the staging folder of `out`.
    pub(super) fn create(out: &Path) -> Result<Staging> {
        let staging = Staging { path: sibling(out, "staging"), done: false };
        crate::failpoint::io_step()
            .and_then(|()| std::fs::create_dir(&staging.path))
            .map_err(|e| Error::io(&staging.path, "cannot create", e))?;
        Ok(staging)
    }
}

impl Drop for Staging {
    fn drop(&mut self) {
        if !self.done {
            let _ = std::fs::remove_dir_all(&self.path);
        }
    }
}

/// An advisory lock on the output folder for the length of a split, so that
/// two splits into one folder cannot interleave. The kernel releases it if
/// the process dies; the lock file is removed when the split ends.
pub(super) struct OutputLock {
    path: PathBuf,
    _file: std::fs::File,
}

impl OutputLock {
    /// Takes the lock of `out`, or says who holds it.
    pub(super) fn take(out: &Path) -> Result<OutputLock> {
        let name = out.file_name().map(|n| n.to_string_lossy().into_owned()).unwrap_or_else(|| "out".into());
        let parent = out.parent().filter(|p| !p.as_os_str().is_empty()).unwrap_or(Path::new("."));
        let path = parent.join(format!(".{name}.cleave-lock"));
        let file = std::fs::File::options()
            .create(true)
            .truncate(false)
            .write(true)
            .open(&path)
            .map_err(|e| Error::io(&path, "cannot create the lock file", e))?;
        match file.try_lock() {
            Ok(()) => Ok(OutputLock { path, _file: file }),
            Err(std::fs::TryLockError::WouldBlock) => Err(Error::Options(format!(
                "another split is writing `{}` right now (lock `{}`)",
                out.display(),
                path.display()
            ))),
            Err(std::fs::TryLockError::Error(e)) => Err(Error::io(&path, "cannot lock", e)),
        }
    }
}

impl Drop for OutputLock {
    fn drop(&mut self) {
        let _ = std::fs::remove_file(&self.path);
    }
}

fn sibling(out: &Path, tag: &str) -> PathBuf {
    let name = out.file_name().map(|n| n.to_string_lossy().into_owned()).unwrap_or_else(|| "out".into());
    let parent = out.parent().filter(|p| !p.as_os_str().is_empty()).unwrap_or(Path::new("."));
    parent.join(format!(".{name}.cleave-{tag}-{}", std::process::id()))
}

/// Puts right what a killed split left beside `out` (the caller holds the
/// output lock, so no live split owns them): a parked old folder goes back
/// into place when the target is missing and is removed otherwise; staging
/// folders are removed. Returns a line for each, to tell the user.
///
/// # Errors
/// A leftover that cannot be moved or removed.
pub(super) fn recover(out: &Path) -> Result<Vec<String>> {
    let name = out.file_name().map(|n| n.to_string_lossy().into_owned()).unwrap_or_else(|| "out".into());
    let parent = out.parent().filter(|p| !p.as_os_str().is_empty()).unwrap_or(Path::new("."));
    let mut said = Vec::new();
    let Ok(list) = std::fs::read_dir(parent) else { return Ok(said) };
    let mut parked = Vec::new();
    let mut staging = Vec::new();
    for e in list.flatten() {
        let file = e.file_name().to_string_lossy().into_owned();
        if let Some(rest) = file.strip_prefix(&format!(".{name}.cleave-")) {
            if rest.starts_with("old-") {
                parked.push(e.path());
            } else if rest.starts_with("staging-") || rest.starts_with("input-") {
                staging.push(e.path());
            }
        }
    }
    parked.sort();
    staging.sort();
    for p in parked {
        if std::fs::symlink_metadata(out).is_err() {
            std::fs::rename(&p, out).map_err(|e| Error::io(&p, "cannot move the parked folder back", e))?;
            said.push(format!(
                "`{}` was missing after a split killed while replacing it; its previous contents were moved back from `{}`",
                out.display(),
                p.display()
            ));
        } else {
            std::fs::remove_dir_all(&p).map_err(|e| Error::io(&p, "cannot remove the leftover", e))?;
            said.push(format!("removed `{}`, the replaced folder a killed split left behind", p.display()));
        }
    }
    for p in staging {
        std::fs::remove_dir_all(&p).map_err(|e| Error::io(&p, "cannot remove the leftover", e))?;
        said.push(format!("removed `{}`, the unfinished output of a killed split", p.display()));
    }
    Ok(said)
}

/// The input of a split read from standard input or a pipe, in a folder
/// `.OUT.cleave-input-PID` beside the output; removed when dropped.
pub(super) struct Spool {
    /// The folder.
    dir: PathBuf,
    /// The file both passes read.
    pub(super) file: PathBuf,
    /// The source's name for the manifest.
    pub(super) name: String,
}

impl Spool {
    /// Copies standard input (for `-`) or a pipe, FIFO or character device
    /// named as the input into a file; `None` for a regular file.
    ///
    /// # Errors
    /// No `--format` where the name does not say, an unreadable input, and
    /// disk failures.
    pub(super) fn take(cfg: &SplitConfig) -> Result<Option<Spool>> {
        let stdin = cfg.input.as_os_str() == "-";
        if !stdin {
            match std::fs::metadata(&cfg.input) {
                Ok(m) if !m.is_file() && !m.is_dir() => {}
                _ => return Ok(None),
            }
        }
        let format = match cfg.format.or_else(|| crate::format::Format::from_path(&cfg.input)) {
            Some(f) => f,
            None => {
                return Err(Error::Options(format!(
                    "`{}`: reading a stream needs --format (csv, parquet, arrow, jsonl)",
                    cfg.input.display()
                )))
            }
        };
        let out = &cfg.out;
        let name = out.file_name().map(|n| n.to_string_lossy().into_owned()).unwrap_or_else(|| "out".into());
        let parent = out.parent().filter(|p| !p.as_os_str().is_empty()).unwrap_or(Path::new("."));
        let dir = parent.join(format!(".{name}.cleave-input-{}", std::process::id()));
        std::fs::create_dir_all(&dir).map_err(|e| Error::io(&dir, "cannot create", e))?;
        let spool = Spool {
            file: dir.join(format!("input.{}", format.extension())),
            dir,
            name: if stdin {
                "-".into()
            } else {
                cfg.input.file_name().map(|n| n.to_string_lossy().into_owned()).unwrap_or_default()
            },
        };
        let mut target = std::fs::File::create(&spool.file).map_err(|e| Error::io(&spool.file, "cannot create", e))?;
        let copied = if stdin {
            std::io::copy(&mut std::io::stdin().lock(), &mut target)
        } else {
            let mut source = std::fs::File::open(&cfg.input).map_err(|e| Error::io(&cfg.input, "cannot open", e))?;
            std::io::copy(&mut source, &mut target)
        };
        copied.map_err(|e| Error::io(&cfg.input, "cannot read", e))?;
        target.sync_all().map_err(|e| Error::io(&spool.file, "cannot sync", e))?;
        Ok(Some(spool))
    }
}

impl Drop for Spool {
    fn drop(&mut self) {
        let _ = std::fs::remove_dir_all(&self.dir);
    }
}

/// Refuses an output folder that is a file, is not empty (without
/// `--force`), is not a split's folder (with `--force`), holds a ledger
/// (without `--discard-ledger`), or holds the input.
pub(super) fn check_output(cfg: &SplitConfig) -> Result<()> {
    let out = &cfg.out;
    if let Ok(meta) = std::fs::symlink_metadata(out) {
        if !meta.is_dir() {
            return Err(Error::Options(format!("`{}` exists and is not a folder", out.display())));
        }
        let empty = std::fs::read_dir(out).map(|mut d| d.next().is_none()).unwrap_or(false);
        if !empty && !cfg.force {
            return Err(Error::Options(format!("`{}` already exists; pass --force to replace it", out.display())));
        }
        let input = std::fs::canonicalize(&cfg.input).map_err(|e| Error::io(&cfg.input, "cannot open", e))?;
        let out_abs = std::fs::canonicalize(out).map_err(|e| Error::io(out, "cannot open", e))?;
        if input.starts_with(&out_abs) {
            return Err(Error::Options(format!(
                "the input `{}` is inside the output folder `{}`, which the split would replace",
                cfg.input.display(),
                out.display()
            )));
        }
        if !empty {
            if manifest::load(out).is_err() {
                return Err(Error::Options(format!(
                    "`{}` is not the folder of a split (it has no readable {}); --force replaces only a split's folder",
                    out.display(),
                    manifest::FILE_NAME
                )));
            }
            if let Some(entries) = ledger_entries(out) {
                if !cfg.discard_ledger {
                    return Err(Error::Options(format!(
                        "`{}` holds the evaluator's ledger ({entries} scoring(s)); pass --discard-ledger to archive it beside the folder and replace the split",
                        out.display()
                    )));
                }
            }
        }
    }
    Ok(())
}

/// Syncs a folder, so that the names in it are on disk.
pub(super) fn sync_dir(path: &Path) -> Result<()> {
    crate::failpoint::io_step()
        .and_then(|()| std::fs::File::open(path))
        .and_then(|f| f.sync_all())
        .map_err(|e| Error::io(path, "cannot sync", e))
}

/// The entries of `dir`'s ledger when it has a ledger or stored scorings.
fn ledger_entries(dir: &Path) -> Option<usize> {
    let ledger = dir.join(LEDGER);
    let scores = dir.join(SCORES);
    if !ledger.exists() && !scores.exists() {
        return None;
    }
    Some(std::fs::read_to_string(&ledger).map(|t| t.lines().count()).unwrap_or(0))
}

/// Moves the ledger, the stored scorings and the ledger's lock of `out` into
/// a new folder `NAME.ledger-K` beside it; returns a line saying where.
fn archive_ledger(out: &Path, entries: usize) -> Result<String> {
    let name = out.file_name().map(|n| n.to_string_lossy().into_owned()).unwrap_or_else(|| "out".into());
    let parent = out.parent().filter(|p| !p.as_os_str().is_empty()).unwrap_or(Path::new("."));
    let mut k = 1;
    let archive = loop {
        let candidate = parent.join(format!("{name}.ledger-{k}"));
        match std::fs::create_dir(&candidate) {
            Ok(()) => break candidate,
            Err(e) if e.kind() == std::io::ErrorKind::AlreadyExists => k += 1,
            Err(e) => return Err(Error::io(&candidate, "cannot create", e)),
        }
    };
    // All of it moves or none: on a failure what moved goes back and the archive is removed.
    let mut moved = Vec::new();
    for file in [LEDGER, SCORES, LEDGER_LOCK] {
        let from = out.join(file);
        if std::fs::symlink_metadata(&from).is_err() {
            continue;
        }
        let to = archive.join(file);
        if let Err(e) = crate::failpoint::io_step().and_then(|()| std::fs::rename(&from, &to)) {
            for (from, to) in moved.into_iter().rev() {
                let _ = std::fs::rename(to, from);
            }
            let _ = std::fs::remove_dir(&archive);
            return Err(Error::io(&from, "cannot archive", e));
        }
        moved.push((from, to));
    }
    sync_dir(&archive)?;
    sync_dir(out)?;
    Ok(format!(
        "the ledger of `{}` ({entries} scoring(s)) and its stored predictions were archived in `{}`",
        out.display(),
        archive.display()
    ))
}

/// Swaps two paths in one step, where the system can (Linux `renameat2`
/// with `RENAME_EXCHANGE`): both exist at every instant.
#[cfg(target_os = "linux")]
#[allow(unsafe_code)]
fn exchange(a: &Path, b: &Path) -> std::io::Result<()> {
    use std::os::unix::ffi::OsStrExt;
    let a = std::ffi::CString::new(a.as_os_str().as_bytes())?;
    let b = std::ffi::CString::new(b.as_os_str().as_bytes())?;
    // SAFETY: both arguments are NUL-terminated paths that outlive the call;
    // renameat2 reads them and touches no memory of ours besides.
    let r = unsafe { libc::renameat2(libc::AT_FDCWD, a.as_ptr(), libc::AT_FDCWD, b.as_ptr(), libc::RENAME_EXCHANGE) };
    if r == 0 {
        Ok(())
    } else {
        Err(std::io::Error::last_os_error())
    }
}

#[cfg(not(target_os = "linux"))]
fn exchange(_: &Path, _: &Path) -> std::io::Result<()> {
    Err(std::io::Error::from(std::io::ErrorKind::Unsupported))
}

/// Renames the staging folder into place, replacing an existing folder only
/// with `force` and only after the new one is complete; with
/// `discard_ledger` its ledger is archived first. Without `force` the rename
/// itself refuses a folder that another run filled in the meantime. The swap
/// exchanges the two folders in one step where the system can, so that the
/// target exists at every instant; elsewhere the old folder is parked first,
/// and a killed run's parked folder is moved back by the next run
/// ([`recover`]). Returns lines for the user.
pub(super) fn commit(mut staging: Staging, out: &Path, force: bool, discard_ledger: bool) -> Result<Vec<String>> {
    let mut said = Vec::new();
    let replaced = force && out.exists();
    if let Some(entries) = (replaced && discard_ledger).then(|| ledger_entries(out)).flatten() {
        said.push(archive_ledger(out, entries)?);
        crate::failpoint::kill_at("split-after-archive");
    }
    let swap = replaced && !crate::failpoint::armed("split-no-exchange");
    if swap {
        crate::failpoint::io_step().map_err(|e| Error::io(out, "cannot swap the new folder in", e))?;
    }
    if swap && exchange(&staging.path, out).is_ok() {
        // The staging path now holds the old folder.
        staging.done = true;
        crate::failpoint::kill_at("split-after-exchange");
        let _ = std::fs::remove_dir_all(&staging.path);
        if let Some(parent) = out.parent().filter(|p| !p.as_os_str().is_empty()) {
            let _ = sync_dir(parent);
        }
        return Ok(said);
    }
    let old = sibling(out, "old");
    if replaced {
        crate::failpoint::io_step()
            .and_then(|()| std::fs::rename(out, &old))
            .map_err(|e| Error::io(out, "cannot move the old folder aside", e))?;
        crate::failpoint::kill_at("split-after-park");
    }
    if let Err(e) = crate::failpoint::io_step().and_then(|()| std::fs::rename(&staging.path, out)) {
        if replaced {
            let _ = std::fs::rename(&old, out);
        }
        return Err(Error::io(out, "cannot rename the new folder into place", e));
    }
    staging.done = true;
    if replaced {
        let _ = std::fs::remove_dir_all(&old);
    }
    if let Some(parent) = out.parent().filter(|p| !p.as_os_str().is_empty()) {
        let _ = sync_dir(parent);
    }
    Ok(said)
}
