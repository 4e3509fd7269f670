//! Failpoints: named places in the writing paths where a test can have the
//! process killed (SIGKILL, as by `kill -9`: no destructor runs, nothing is
//! cleaned up) or a fallback taken, to prove that every such instant leaves
//! the old state or the new one. The command line arms them from
//! `CLEAVE_FAILPOINT` (comma-separated names); the library reads no
//! environment. Unarmed, a failpoint is one atomic load.
//!
//! Names: `split-before-commit`, `split-after-archive`, `split-after-exchange`,
//! `split-after-park`, `split-no-exchange` (a fallback, not a kill),
//! `score-after-stored`, `score-after-copy`, `score-after-rename`; and
//! `io-fault-K`, which makes the K-th file-system step of the process (a
//! create, a sync, a rename, a folder made) fail with an I/O error, for the
//! fault loop that proves every failing step leaves the old state.

use std::sync::atomic::{AtomicU64, Ordering};
use std::sync::OnceLock;

static ARMED: OnceLock<Vec<String>> = OnceLock::new();
static FAULT_AT: OnceLock<Option<u64>> = OnceLock::new();
static STEPS: AtomicU64 = AtomicU64::new(0);

/// One file-system step of a writing path: fails with an injected I/O
/// error when it is the step `io-fault-K` names.
///
/// # Errors
/// The injected fault.
pub(crate) fn io_step() -> std::io::Result<()> {
    let at = *FAULT_AT.get_or_init(|| {
        ARMED.get().and_then(|names| names.iter().find_map(|n| n.strip_prefix("io-fault-")?.parse().ok()))
    });
    let Some(at) = at else { return Ok(()) };
    if STEPS.fetch_add(1, Ordering::SeqCst) + 1 == at {
        return Err(std::io::Error::other(format!("injected fault at file-system step {at}")));
    }
    Ok(())
}

/// Arms the named failpoints for the life of the process (once; later calls
/// are ignored).
pub fn arm(names: impl IntoIterator<Item = String>) {
    let _ = ARMED.set(names.into_iter().filter(|n| !n.is_empty()).collect());
}

/// Whether the failpoint `name` is armed.
pub(crate) fn armed(name: &str) -> bool {
    ARMED.get().is_some_and(|names| names.iter().any(|n| n == name))
}

/// Kills the process with SIGKILL if the failpoint `name` is armed.
#[allow(unsafe_code)]
pub(crate) fn kill_at(name: &str) {
    if armed(name) {
        // SAFETY: kill and getpid take plain integers and touch no memory.
        unsafe {
            libc::kill(libc::getpid(), libc::SIGKILL);
        }
    }
}
