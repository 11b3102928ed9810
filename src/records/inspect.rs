//! What `inspect` reports about a capture.

use serde::{Deserialize, Serialize};

/// One layer in the summary.
#[derive(Debug, Serialize, Deserialize)]
pub struct LayerInfo {
    /// Layer number.
    pub layer: usize,
    /// File holding it.
    pub file: String,
    /// Feature dimension.
    pub dim: usize,
    /// Stored element type.
    pub dtype: String,
    /// Byte and memory order.
    pub layout: String,
    /// Columns constant over the sampled frames.
    pub constant_columns: usize,
    /// Sampled frames with NaN or Inf.
    pub nonfinite_frames_sampled: usize,
}

/// A class and its frame count.
#[derive(Debug, Serialize, Deserialize)]
pub struct ClassCount {
    /// Class name.
    pub label: String,
    /// Frames.
    pub frames: usize,
}

/// One label task in the summary.
#[derive(Debug, Serialize, Deserialize)]
pub struct TaskInfo {
    /// Task (column) name.
    pub task: String,
    /// Always `categorical` (continuous columns are in `continuous`).
    pub kind: String,
    /// Number of classes.
    pub classes: usize,
    /// Frames with a label.
    pub labelled_frames: usize,
    /// Frames without a label.
    pub unlabelled_frames: usize,
    /// Up to three smallest classes.
    pub smallest: Vec<ClassCount>,
    /// Up to three largest classes.
    pub largest: Vec<ClassCount>,
}

/// One continuous label column in the summary.
#[derive(Debug, Serialize, Deserialize)]
pub struct NumericInfo {
    /// Column name.
    pub column: String,
    /// Always `continuous`.
    pub kind: String,
    /// Frames with a finite value.
    pub labelled_frames: usize,
    /// Frames without one (empty, `nan` or `inf`).
    pub missing_frames: usize,
    /// Smallest value.
    #[serde(deserialize_with = "crate::records::nan::f64")]
    pub min: f64,
    /// Largest value.
    #[serde(deserialize_with = "crate::records::nan::f64")]
    pub max: f64,
    /// Mean value.
    #[serde(deserialize_with = "crate::records::nan::f64")]
    pub mean: f64,
}

/// What `inspect` reports.
#[derive(Debug, Serialize, Deserialize)]
pub struct Summary {
    /// Capture name.
    pub name: String,
    /// Capture folder.
    pub path: String,
    /// Where labels came from.
    pub label_source: String,
    /// Label files read (each TextGrid counts).
    #[serde(default)]
    pub label_files: usize,
    /// How the layer data is laid out (one file per layer, one stack, per utterance).
    #[serde(default)]
    pub layout: String,
    /// Array files holding the layers.
    #[serde(default)]
    pub layer_files: usize,
    /// Frame shift in seconds.
    #[serde(deserialize_with = "super::nan::f64")]
    pub hop_s: f64,
    /// Frames.
    pub frames: usize,
    /// Utterances.
    pub utterances: usize,
    /// Speakers.
    pub speakers: usize,
    /// Layers.
    pub layers: Vec<LayerInfo>,
    /// Categorical label tasks.
    pub tasks: Vec<TaskInfo>,
    /// Continuous label columns.
    #[serde(default)]
    pub continuous: Vec<NumericInfo>,
    /// Bytes of layer files on disk.
    pub bytes_on_disk: u64,
    /// Estimated peak memory of a probe run, in bytes.
    pub probe_memory_estimate: u64,
    /// Notes from capture.toml.
    pub notes: serde_json::Value,
    /// Problems found.
    pub warnings: Vec<String>,
}
