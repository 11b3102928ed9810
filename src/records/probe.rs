//! Records of the probe analysis: one [`ProbeRecord`] per layer × task, with the set-up of
//! each task, confusion matrices at the best layer and a summary.

use serde::{Deserialize, Serialize};

use super::CaptureRef;
use crate::select::split::{LeakageCheck, SplitKind};

/// One layer × task. A categorical task (a classifier) fills the accuracy fields and leaves
/// the regression fields NaN (`null` in JSON); a continuous task (a ridge regression, see
/// [`crate::analysis::probe::regress`]) fills `r2` and the other regression fields, uses
/// `ci_low`/`ci_high` for the interval of `r2` and `selectivity` for `r2 − control_r2`, and
/// leaves the accuracy fields NaN (`n_classes` 0, `c` NaN). `probe.csv` holds the categorical
/// records with their columns, `probe_continuous.csv` the continuous ones with theirs.
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
    /// Held-out accuracy over every test item, pooled across folds (each item tested once);
    /// NaN for a continuous task.
    #[serde(deserialize_with = "super::nan::f64")]
    pub accuracy: f64,
    /// 95 % cluster-bootstrap interval of `accuracy` (of `r2` for a continuous task), low end.
    #[serde(deserialize_with = "super::nan::f64")]
    pub ci_low: f64,
    /// The same interval, high end.
    #[serde(deserialize_with = "super::nan::f64")]
    pub ci_high: f64,
    /// Macro-averaged F1 of the pooled test predictions.
    #[serde(deserialize_with = "super::nan::f64")]
    pub macro_f1: f64,
    /// Balanced accuracy of the pooled test predictions.
    #[serde(deserialize_with = "super::nan::f64")]
    pub balanced_accuracy: f64,
    /// Accuracy of predicting each fold's training majority class, pooled.
    #[serde(deserialize_with = "super::nan::f64")]
    pub majority_baseline: f64,
    /// Accuracy of the same probe on the control task, pooled (NaN when the control is off).
    #[serde(deserialize_with = "super::nan::f64")]
    pub control_accuracy: f64,
    /// accuracy − control_accuracy (r2 − control_r2 for a continuous task).
    #[serde(deserialize_with = "super::nan::f64")]
    pub selectivity: f64,
    /// What the control task's types are: `phone in context` (the default), `<task> in
    /// context` (no phone column) or the `--control-by` column; `none` when the control is off.
    pub control_by: String,
    /// Chosen inverse penalty C (median over folds).
    #[serde(deserialize_with = "super::nan::f64")]
    pub c: f64,
    /// Number of folds.
    pub folds: usize,
    /// Standard deviation of accuracy over folds (None for one split).
    pub accuracy_sd: Option<f64>,
    /// Standard deviation of control accuracy over folds (None for one split).
    pub control_accuracy_sd: Option<f64>,
    /// MDL online code (Voita & Titov 2020): `off`, `computed`, or `skipped: <why>`.
    pub mdl_status: String,
    /// Training items the code transmits (the first fold's training side; 0 when not computed).
    pub mdl_items: usize,
    /// items × log2(classes): the uniform code length in bits (NaN when not computed).
    #[serde(deserialize_with = "super::nan::f64")]
    pub mdl_uniform_bits: f64,
    /// Online code length in bits (NaN when not computed).
    #[serde(deserialize_with = "super::nan::f64")]
    pub mdl_online_bits: f64,
    /// mdl_uniform_bits / mdl_online_bits (NaN when not computed).
    #[serde(deserialize_with = "super::nan::f64")]
    pub mdl_compression: f64,
    /// `categorical` (classifier) or `continuous` (ridge regression).
    #[serde(default = "categorical")]
    pub kind: String,
    /// Continuous task: held-out R² (`1 − SS_res/SS_tot`) over every test item, pooled across
    /// folds (NaN for a categorical task).
    #[serde(default = "nan", deserialize_with = "super::nan::f64")]
    pub r2: f64,
    /// Continuous task: root mean squared error of the pooled test predictions, in the
    /// column's units.
    #[serde(default = "nan", deserialize_with = "super::nan::f64")]
    pub rmse: f64,
    /// Continuous task: Pearson's r between pooled test predictions and values.
    #[serde(default = "nan", deserialize_with = "super::nan::f64")]
    pub pearson_r: f64,
    /// Continuous task: RMSE of predicting each fold's training mean, pooled.
    #[serde(default = "nan", deserialize_with = "super::nan::f64")]
    pub baseline_rmse: f64,
    /// Continuous task: R² of the same ridge (same penalty, same split) on the control
    /// values, pooled (NaN when the control is off).
    #[serde(default = "nan", deserialize_with = "super::nan::f64")]
    pub control_r2: f64,
    /// Continuous task: chosen ridge penalty per item (median over folds; the penalty on the
    /// standardised problem is this times the training items).
    #[serde(default = "nan", deserialize_with = "super::nan::f64")]
    pub alpha: f64,
    /// Continuous task: standard deviation of R² over folds (NaN for one split).
    #[serde(default = "nan", deserialize_with = "super::nan::f64")]
    pub r2_sd: f64,
}

fn categorical() -> String {
    "categorical".into()
}

fn nan() -> f64 {
    f64::NAN
}

/// The `probe.json` fields only a continuous record fills (left out of `probe.csv`).
pub const CONTINUOUS_ONLY: [&str; 7] = [
    "r2",
    "rmse",
    "pearson_r",
    "baseline_rmse",
    "control_r2",
    "alpha",
    "r2_sd",
];

/// The columns of `probe_continuous.csv`, in the records' field order.
pub const CONTINUOUS_COLUMNS: [&str; 19] = [
    "layer",
    "task",
    "pooling",
    "split",
    "n_train",
    "n_test",
    "ci_low",
    "ci_high",
    "selectivity",
    "control_by",
    "folds",
    "kind",
    "r2",
    "rmse",
    "pearson_r",
    "baseline_rmse",
    "control_r2",
    "alpha",
    "r2_sd",
];

impl ProbeRecord {
    /// Whether this is a regression record.
    pub fn is_continuous(&self) -> bool {
        self.kind == "continuous"
    }

    /// The headline score: accuracy, or R² for a continuous task.
    pub fn score(&self) -> f64 {
        if self.is_continuous() {
            self.r2
        } else {
            self.accuracy
        }
    }
}

/// The test predictions behind one record, pooled over folds in fold order: what `compare`
/// needs to pair two captures' probes on the same items (not written to the probe's records;
/// a report's probe parts carry them to its assembly).
#[derive(Clone, Debug, Default, Serialize, Deserialize)]
pub struct TaskPredictions {
    /// Layer number.
    pub layer: usize,
    /// Task name.
    pub task: String,
    /// First frame of each test item (identifies the item across captures).
    pub test_frames: Vec<usize>,
    /// Whether each test item was predicted right.
    pub correct: Vec<bool>,
    /// Bootstrap cluster of each test item (speaker; utterance for the speaker task).
    pub cluster: Vec<u32>,
    /// Training items per fit (mean over folds).
    pub n_train: usize,
    /// Continuous task: each test item's value (empty for a categorical task, whose outcome
    /// is `correct`).
    pub truth: Vec<f64>,
    /// Continuous task: each test item's prediction.
    pub pred: Vec<f64>,
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
    /// `categorical` or `continuous`.
    #[serde(default = "categorical")]
    pub kind: String,
    /// Classes used, by code (empty for a continuous task).
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
    /// What the control task's types are (as in the records).
    pub control_by: String,
    /// Distinct control types among the task's items (0 when the control is off).
    pub control_types: usize,
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

/// Best layer of one continuous task (the first with the highest R²).
#[derive(Clone, Debug, Serialize, Deserialize)]
pub struct BestFit {
    /// Task.
    pub task: String,
    /// Layer number.
    pub layer: usize,
    /// R² there.
    #[serde(deserialize_with = "super::nan::f64")]
    pub r2: f64,
    /// Interval low end.
    #[serde(deserialize_with = "super::nan::f64")]
    pub ci_low: f64,
    /// Interval high end.
    #[serde(deserialize_with = "super::nan::f64")]
    pub ci_high: f64,
}

/// Where one continuous task's R² fades: its peak (the first layer of the highest R², as
/// [`BestFit`]), the base it is measured against (the control R² at the peak layer, or 0, the
/// R² of predicting the mean, when no control ran), the level half way between them, and the
/// first layer after the peak whose R² is below that level.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct FitFall {
    /// Task.
    pub task: String,
    /// Layer of the peak R².
    pub peak_layer: usize,
    /// Peak R².
    pub peak_r2: f64,
    /// Control R² at the peak layer (0 when no control ran).
    pub base_r2: f64,
    /// Whether `base_r2` is the control's (false: no control ran, the base is 0).
    pub base_is_control: bool,
    /// Half way between `peak_r2` and `base_r2`.
    pub half_level: f64,
    /// First layer after the peak with R² below `half_level` (None when it never falls).
    pub below_half_layer: Option<usize>,
    /// Last layer with a finite R² (how far "never falls" reaches).
    pub last_layer: usize,
}

/// Short summary of a probe run.
#[derive(Clone, Debug, Serialize, Deserialize)]
pub struct ProbeSummary {
    /// Best layer per categorical task.
    pub best: Vec<BestLayer>,
    /// Best layer per continuous task (by R²).
    #[serde(default)]
    pub best_r2: Vec<BestFit>,
    /// First layer after the speaker peak whose speaker accuracy falls below midway between
    /// its maximum and minimum (None when there is no speaker task or it never falls).
    pub speaker_below_half_layer: Option<usize>,
    /// The midway value.
    pub speaker_half_level: Option<f64>,
    /// Where each continuous task's R² falls half way to its control ([`FitFall`]).
    #[serde(default)]
    pub r2_half_fall: Vec<FitFall>,
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
    /// Test predictions per record, for probe deltas (not serialised).
    #[serde(skip)]
    pub predictions: Vec<TaskPredictions>,
}
