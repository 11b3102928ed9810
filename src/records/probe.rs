//! Records of the probe analysis: one [`ProbeRecord`] per layer × task, with the set-up of
//! each task, confusion matrices at the best layer and a summary.

use serde::{Deserialize, Serialize};

use super::CaptureRef;
use crate::select::split::{LeakageCheck, SplitKind};

/// One row of `probe.csv`: one layer × task.
#[derive(Clone, Debug, Serialize, Deserialize)]
pub struct ProbeRecord {
    /// Layer number.
    pub layer: usize,
    /// Label task.
    pub task: String,
    /// Pooling.
    pub pooling: String,
    /// Split kind actually used.
    pub split: String,
    /// Training items per fit (mean over folds).
    pub n_train: usize,
    /// Test items (summed over folds: every item once under cross-validation).
    pub n_test: usize,
    /// Classes of the task after dropping unusable ones.
    pub n_classes: usize,
    /// Held-out accuracy (mean over folds).
    #[serde(deserialize_with = "super::nan::f64")]
    pub accuracy: f64,
    /// 95 % cluster-bootstrap interval, low end.
    #[serde(deserialize_with = "super::nan::f64")]
    pub ci_low: f64,
    /// 95 % cluster-bootstrap interval, high end.
    #[serde(deserialize_with = "super::nan::f64")]
    pub ci_high: f64,
    /// Macro-averaged F1 (mean over folds).
    #[serde(deserialize_with = "super::nan::f64")]
    pub macro_f1: f64,
    /// Balanced accuracy (mean over folds).
    #[serde(deserialize_with = "super::nan::f64")]
    pub balanced_accuracy: f64,
    /// Accuracy of predicting the training majority class.
    #[serde(deserialize_with = "super::nan::f64")]
    pub majority_baseline: f64,
    /// Accuracy of the same probe on the control task (NaN when the control is off).
    #[serde(deserialize_with = "super::nan::f64")]
    pub control_accuracy: f64,
    /// accuracy − control_accuracy.
    #[serde(deserialize_with = "super::nan::f64")]
    pub selectivity: f64,
    /// Chosen inverse penalty C (median over folds).
    #[serde(deserialize_with = "super::nan::f64")]
    pub c: f64,
    /// Number of folds.
    pub folds: usize,
    /// Standard deviation of accuracy over folds (None for one split).
    pub accuracy_sd: Option<f64>,
    /// Standard deviation of control accuracy over folds (None for one split).
    pub control_accuracy_sd: Option<f64>,
}

/// The groups on each side of one fold.
#[derive(Clone, Debug, Serialize, Deserialize)]
pub struct FoldSides {
    /// Speakers (speaker split) or utterances (utterance split) used for training; empty for
    /// a frame split.
    pub train: Vec<String>,
    /// The same for testing.
    pub test: Vec<String>,
    /// Training items after subsampling.
    pub n_train: usize,
    /// Test items.
    pub n_test: usize,
}

/// How one task was set up: classes, split and its leakage check.
#[derive(Clone, Debug, Serialize, Deserialize)]
pub struct TaskSetup {
    /// Task name.
    pub task: String,
    /// Classes used, by code.
    pub classes: Vec<String>,
    /// Classes left out (and why).
    pub dropped: Vec<String>,
    /// Split kind used.
    pub split: SplitKind,
    /// What the sides list: `speakers`, `utterances` or `items`.
    pub groups: String,
    /// Sides of each fold.
    pub folds: Vec<FoldSides>,
    /// Proof of the split's promise on the items used.
    pub leakage_check: LeakageCheck,
}

/// Confusion matrix of a task at its best layer.
#[derive(Clone, Debug, Serialize, Deserialize)]
pub struct BestConfusion {
    /// Task.
    pub task: String,
    /// Best layer (highest accuracy; earliest on ties).
    pub layer: usize,
    /// Class names (rows: truth, columns: prediction).
    pub classes: Vec<String>,
    /// Counts, summed over folds.
    pub matrix: Vec<Vec<u64>>,
    /// Recall of each class (None where it has no test item).
    pub per_class_accuracy: Vec<Option<f64>>,
}

/// Best layer of one task.
#[derive(Clone, Debug, Serialize, Deserialize)]
pub struct BestLayer {
    /// Task.
    pub task: String,
    /// Layer number.
    pub layer: usize,
    /// Accuracy there.
    #[serde(deserialize_with = "super::nan::f64")]
    pub accuracy: f64,
    /// Interval low end.
    #[serde(deserialize_with = "super::nan::f64")]
    pub ci_low: f64,
    /// Interval high end.
    #[serde(deserialize_with = "super::nan::f64")]
    pub ci_high: f64,
}

/// Short summary of a probe run.
#[derive(Clone, Debug, Serialize, Deserialize)]
pub struct ProbeSummary {
    /// Best layer per task.
    pub best: Vec<BestLayer>,
    /// First layer after the speaker peak whose speaker accuracy falls below midway between
    /// its maximum and minimum (None when there is no speaker task or it never falls).
    pub speaker_below_half_layer: Option<usize>,
    /// The midway value.
    pub speaker_half_level: Option<f64>,
}

/// Everything a probe run produced.
#[derive(Clone, Debug, Serialize, Deserialize)]
pub struct ProbeReport {
    /// The capture probed.
    pub capture: CaptureRef,
    /// Options as run (probe options plus seed and layers).
    pub options: serde_json::Value,
    /// One record per layer × task.
    pub records: Vec<ProbeRecord>,
    /// Set-up of each task.
    pub tasks: Vec<TaskSetup>,
    /// Confusion matrices at each task's best layer.
    pub confusion: Vec<BestConfusion>,
    /// Summary.
    pub summary: ProbeSummary,
    /// Warnings and notes for the user (dropped classes, padding, degenerate intervals).
    pub notes: Vec<String>,
}
