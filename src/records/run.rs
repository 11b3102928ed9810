//! `run.json`: how a report was made (options, time per step, input hashes, files written).

use serde::{Deserialize, Serialize};

use super::CaptureRef;

/// SHA-256 of one input file.
#[derive(Clone, Debug, Serialize, Deserialize)]
pub struct FileHash {
    /// Capture name.
    pub capture: String,
    /// File path.
    pub file: String,
    /// Size in bytes.
    pub bytes: u64,
    /// Hex SHA-256.
    pub sha256: String,
}

/// What `run` did, written as `run.json`.
#[derive(Debug, Serialize, Deserialize)]
pub struct RunRecord {
    /// Always `voxstrata`.
    pub tool: String,
    /// Crate version.
    pub version: String,
    /// The captures, in order.
    pub captures: Vec<CaptureRef>,
    /// Options of the run.
    pub options: serde_json::Value,
    /// Seconds spent in each step.
    pub timings: Vec<StepTime>,
    /// SHA-256 of every input file.
    pub inputs: Vec<FileHash>,
    /// Files written (relative to the output folder).
    pub outputs: Vec<String>,
}

/// Time spent in one step.
#[derive(Debug, Serialize, Deserialize)]
pub struct StepTime {
    /// Step name.
    pub step: String,
    /// Seconds.
    #[serde(deserialize_with = "super::nan::f64")]
    pub seconds: f64,
}
