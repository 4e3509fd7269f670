//! The output folder: the lock that keeps two splits out of one folder, the
//! staging folder everything is written into, and the rename that commits
//! it, so that the target is either absent, the old folder, or the complete
//! new one.

use std::path::{Path, PathBuf};

use super::SplitConfig;
use crate::error::{Error, Result};

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
        std::fs::create_dir(&staging.path).map_err(|e| Error::io(&staging.path, "cannot create", e))?;
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

/// Refuses an output folder that is a file, is not empty (without
/// `--force`), or holds the input.
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
    }
    Ok(())
}

/// Syncs a folder, so that the names in it are on disk.
pub(super) fn sync_dir(path: &Path) -> Result<()> {
    std::fs::File::open(path).and_then(|f| f.sync_all()).map_err(|e| Error::io(path, "cannot sync", e))
}

/// Renames the staging folder into place, replacing an existing folder only
/// with `force` and only after the new one is complete. Without `force` the
/// rename itself refuses a folder that another run filled in the meantime.
pub(super) fn commit(mut staging: Staging, out: &Path, force: bool) -> Result<()> {
    let old = sibling(out, "old");
    let replaced = force && out.exists();
    if replaced {
        std::fs::rename(out, &old).map_err(|e| Error::io(out, "cannot move the old folder aside", e))?;
    }
    if let Err(e) = std::fs::rename(&staging.path, out) {
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
    Ok(())
}
