//! SIGINT and SIGTERM for the commands that write (split, score): the
//! handler only records the signal; the writing code looks at it between
//! batches and before it commits, stops with [`crate::Error::Interrupted`],
//! and its guards remove the staging folder and the lock on the way out. The
//! command line then exits 128 + the signal (130, 143).

use std::sync::atomic::{AtomicI32, Ordering};

use crate::error::{Error, Result};

static RECEIVED: AtomicI32 = AtomicI32::new(0);

extern "C" fn record(signal: libc::c_int) {
    // Async-signal-safe: one atomic store.
    RECEIVED.store(signal, Ordering::SeqCst);
}

/// Installs the handler for SIGINT and SIGTERM.
#[allow(unsafe_code)]
pub fn install() {
    let handler = record as extern "C" fn(libc::c_int) as libc::sighandler_t;
    // SAFETY: the handler only stores to an atomic, which is async-signal-safe.
    unsafe {
        libc::signal(libc::SIGINT, handler);
        libc::signal(libc::SIGTERM, handler);
    }
}

/// Stops with [`Error::Interrupted`] if a signal arrived.
///
/// # Errors
/// A signal arrived.
pub(crate) fn check() -> Result<()> {
    match RECEIVED.load(Ordering::SeqCst) {
        0 => Ok(()),
        signal => Err(Error::Interrupted { signal }),
    }
}
