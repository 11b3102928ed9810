//! voxstrata: layer-by-layer analysis of a speech model's per-frame activations.
//!
//! Pipeline: [`capture`] (read layers and labels) → [`select`] (filters, pooling, splits)
//! → analyses (probe, map, purity, compare) → tidy records ([`output`]) → pictures
//! ([`plot`]) and the report. See `docs/design.md`.

pub mod analysis;
pub mod capture;
pub mod compare;
pub mod demo;
pub mod error;
pub mod inspect;
pub mod linalg;
pub mod map;
pub mod output;
pub mod plot;
pub mod probe;
pub mod progress;
pub mod purity;
pub mod records;
pub mod report;
pub mod select;
pub mod stats;

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
