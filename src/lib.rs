//! voxstrata: layer-by-layer analysis of a speech model's per-frame activations.
//!
//! Data flow, one folder a stage (see `docs/design.md`): [`capture`] reads layers and labels,
//! [`select`] filters, pools, samples and splits frames, [`analysis`] computes (pure functions
//! returning [`records`]), [`write`] puts records into files, [`render`] draws figures and the
//! report page from records, and [`commands`] runs one command's whole sequence.

pub mod analysis;
pub mod capture;
pub mod cli;
pub mod commands;
pub mod demo;
pub mod error;
pub mod progress;
pub mod records;
pub mod render;
pub mod select;
pub mod write;

pub use capture::{Capture, CaptureError, OpenOptions};
pub use error::{Error, Result};
pub use progress::Progress;

/// Options shared by every analysis command.
#[derive(Clone, Debug, Default)]
pub struct CommonOptions {
    /// Seed for every random choice.
    pub seed: u64,
    /// Worker threads (0: all cores). Results do not depend on it.
    pub threads: usize,
    /// Layer numbers to analyse (None: all).
    pub layers: Option<capture::LayerSelection>,
}

/// Run `f` on `threads` worker threads (0: rayon's global pool, all cores). A pool of its own
/// rather than the global one, so a process (a Python session) can call this many times.
pub fn with_threads<T: Send>(threads: usize, f: impl FnOnce() -> T + Send) -> Result<T> {
    if threads == 0 {
        return Ok(f());
    }
    let pool = rayon::ThreadPoolBuilder::new()
        .num_threads(threads)
        .build()
        .map_err(|e| Error::Internal(e.to_string()))?;
    Ok(pool.install(f))
}

/// The crate's version, as the command line's `--version` prints it.
pub const VERSION: &str = env!("CARGO_PKG_VERSION");
