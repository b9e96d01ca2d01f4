//! Stop: a cooperative stop on SIGTERM or SIGINT (a scheduler's time limit, Ctrl-C). The
//! handler only sets a flag; long loops call [`check`] and unwind with
//! [`Error::Interrupted`], so temporary files are removed and nothing partial is published.

use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::{Arc, OnceLock};

use crate::error::{Error, Result};

fn flag() -> &'static Arc<AtomicBool> {
    static FLAG: OnceLock<Arc<AtomicBool>> = OnceLock::new();
    FLAG.get_or_init(|| Arc::new(AtomicBool::new(false)))
}

/// Route SIGTERM and SIGINT to the stop flag (the command line calls this once).
pub fn install() -> std::io::Result<()> {
    for sig in [signal_hook::consts::SIGTERM, signal_hook::consts::SIGINT] {
        signal_hook::flag::register(sig, Arc::clone(flag()))?;
    }
    Ok(())
}

/// Whether a stop was requested.
pub fn requested() -> bool {
    flag().load(Ordering::Relaxed)
}

/// `Err(Interrupted)` once a stop was requested.
pub fn check() -> Result<()> {
    if requested() {
        Err(Error::Interrupted)
    } else {
        Ok(())
    }
}
