//! Ctrl-C (SIGINT) as a request to stop: the live loop finishes its tick,
//! records its last row and writes the report instead of dying mid-way. A
//! second Ctrl-C is handled the same way (the loop stops within one tick).

use std::sync::atomic::{AtomicBool, Ordering};

static STOP: AtomicBool = AtomicBool::new(false);

#[cfg(unix)]
extern "C" fn on_interrupt(_: libc::c_int) {
    // Async-signal-safe: one atomic store.
    STOP.store(true, Ordering::Relaxed);
}

/// The stop flag, set by SIGINT from now on (on Unix; elsewhere Ctrl-C
/// ends the process, and `inputs.csv` holds every row written so far).
pub fn flag() -> &'static AtomicBool {
    #[cfg(unix)]
    {
        let handler = on_interrupt as extern "C" fn(libc::c_int);
        // SAFETY: the handler only stores to an atomic, which is
        // async-signal-safe; `signal` is given a valid function pointer.
        unsafe {
            libc::signal(libc::SIGINT, handler as libc::sighandler_t);
        }
    }
    &STOP
}
