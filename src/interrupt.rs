//! Stopping at a block boundary on SIGINT or SIGTERM.
//!
//! The handler only sets a flag; the passes poll it before each block and
//! return [`Error::Interrupted`], so every block either completes (and is
//! journaled) or never starts, and the run's state stays consistent.

use crate::{Error, Result};
use std::sync::atomic::{AtomicBool, Ordering};

static REQUESTED: AtomicBool = AtomicBool::new(false);

extern "C" fn on_signal(_: libc::c_int) {
    // Only an atomic store: async-signal-safe.
    REQUESTED.store(true, Ordering::SeqCst);
}

/// Installs the handler for SIGINT and SIGTERM (the binary calls this once).
pub fn install() {
    for sig in [libc::SIGINT, libc::SIGTERM] {
        // SAFETY: `on_signal` is an `extern "C"` function that performs one
        // atomic store, which is async-signal-safe; `signal` only records
        // its address.
        unsafe {
            libc::signal(
                sig,
                on_signal as extern "C" fn(libc::c_int) as libc::sighandler_t,
            );
        }
    }
}

/// True once a stop was requested.
pub fn requested() -> bool {
    REQUESTED.load(Ordering::Relaxed)
}

/// `Err(Error::Interrupted)` once a stop was requested: called at block
/// boundaries. The message is completed by the caller that knows the state.
pub fn check() -> Result<()> {
    if requested() {
        Err(Error::Interrupted {
            what: "stopped by a signal".into(),
            resume: "rerun the same command".into(),
        })
    } else {
        Ok(())
    }
}
