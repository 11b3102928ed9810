//! voxstrata: layer-by-layer analysis of a speech model's per-frame activations.
//!
//! Data flow, one folder a stage (see `docs/design.md`): [`capture`] reads layers and labels,
//! [`select`] filters, pools, samples and splits frames, [`analysis`] computes (pure functions
//! returning [`records`]), [`write`] puts records into files, [`render`] draws figures and the
//! report page from records, and [`commands`] runs one command's whole sequence.

pub mod analysis;
pub mod capture;
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
