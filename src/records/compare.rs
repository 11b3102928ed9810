//! Records of the comparison of two captures: CKA for every layer pair, probe deltas per
//! shared layer and task, and how the frames were paired.

use serde::{Deserialize, Serialize};

use super::CaptureRef;

/// How frames of A and B are paired.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum MatchBy {
    /// Row by row; the label tables must be identical.
    #[default]
    Row,
    /// By utterance name and frame index within the utterance.
    Utterance,
}

impl Kernel {
    /// Name as written in records (`linear`, `rbf`).
    pub fn name(&self) -> &'static str {
        match self {
            Kernel::Linear => "linear",
            Kernel::Rbf => "rbf",
        }
    }
}

impl Estimator {
    /// Name as written in records (`full`, `minibatch`).
    pub fn name(&self) -> &'static str {
        match self {
            Estimator::Full => "full",
            Estimator::Minibatch => "minibatch",
        }
    }
}

/// Kernel for CKA.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Kernel {
    /// Linear kernel, computed in feature space.
    #[default]
    Linear,
    /// Gaussian kernel with the median pairwise distance as bandwidth (on a subsample).
    Rbf,
}

/// HSIC estimator for CKA.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Estimator {
    /// The biased (plug-in) estimator on all selected frames at once.
    #[default]
    Full,
    /// The unbiased estimator averaged over minibatches (Nguyen et al. 2021).
    Minibatch,
}

/// How the frames of A and B were paired.
#[derive(Clone, Debug, Serialize, Deserialize)]
pub struct Pairing {
    /// Pairing rule.
    pub match_by: MatchBy,
    /// Frames in A.
    pub frames_a: usize,
    /// Frames in B.
    pub frames_b: usize,
    /// Frames paired.
    pub paired: usize,
    /// Frames of A without a partner.
    pub dropped_a: usize,
    /// Frames of B without a partner.
    pub dropped_b: usize,
    /// Paired frames used for CKA (after `--max-frames`).
    pub used: usize,
    /// Row of A per pair, in A's order.
    #[serde(skip)]
    pub rows_a: Vec<usize>,
    /// Row of B per pair.
    #[serde(skip)]
    pub rows_b: Vec<usize>,
}

/// One CKA value between a layer of A and a layer of B.
#[derive(Clone, Debug, Default, Serialize, Deserialize, PartialEq)]
pub struct CkaRecord {
    /// Layer number in A.
    pub layer_a: usize,
    /// Layer number in B.
    pub layer_b: usize,
    /// CKA in [0, 1].
    #[serde(deserialize_with = "super::nan::f64")]
    pub cka: f64,
    /// `linear` or `rbf`.
    pub kernel: Kernel,
    /// `full` or `minibatch`.
    pub estimator: Estimator,
    /// Frames the value was computed on.
    pub n_frames: usize,
}

/// Everything `compare` found.
#[derive(Clone, Debug)]
pub struct CompareReport {
    /// Capture A then B.
    pub captures: Vec<CaptureRef>,
    /// Layer numbers of A compared.
    pub layers_a: Vec<usize>,
    /// Layer numbers of B compared.
    pub layers_b: Vec<usize>,
    /// Frame pairing.
    pub pairing: Pairing,
    /// One record per (A layer, B layer), A-major.
    pub cka: Vec<CkaRecord>,
    /// Probe deltas per shared layer number and task (empty with `probe: false`).
    pub probe_delta: Vec<ProbeDelta>,
    /// Remarks for the reader (what was skipped and why).
    pub notes: Vec<String>,
    /// The options used, as written to `compare.json`.
    pub options: serde_json::Value,
    /// CKA kernel used.
    pub kernel: Kernel,
    /// HSIC estimator used.
    pub estimator: Estimator,
    /// The probe deltas were left to the caller, who holds both captures' probe predictions
    /// (a report's assembly; see [`crate::analysis::compare::DeltaSource::Deferred`]).
    pub deltas_deferred: bool,
}

impl CompareReport {
    /// CKA of A layer `la` against B layer `lb` (layer numbers), if computed.
    pub fn cka_at(&self, la: usize, lb: usize) -> Option<f64> {
        self.cka
            .iter()
            .find(|r| r.layer_a == la && r.layer_b == lb)
            .map(|r| r.cka)
    }

    /// (layer, CKA) for layer numbers present in both, most changed (lowest CKA) first.
    pub fn matching_layers(&self) -> Vec<(usize, f64)> {
        let mut v: Vec<(usize, f64)> = self
            .layers_a
            .iter()
            .filter_map(|&l| self.cka_at(l, l).map(|c| (l, c)))
            .collect();
        v.sort_by(|a, b| a.1.total_cmp(&b.1).then(a.0.cmp(&b.0)));
        v
    }
}

/// One layer × task probe comparison.
#[derive(Clone, Debug, Default, Serialize, Deserialize, PartialEq)]
pub struct ProbeDelta {
    /// Layer number (present in both captures).
    pub layer: usize,
    /// Label task.
    pub task: String,
    /// Training rows.
    pub n_train: usize,
    /// Test rows.
    pub n_test: usize,
    /// Test accuracy of the probe on A.
    #[serde(deserialize_with = "super::nan::f64")]
    pub accuracy_a: f64,
    /// 95% cluster-bootstrap interval of `accuracy_a`.
    #[serde(deserialize_with = "super::nan::f64")]
    pub ci_low_a: f64,
    /// Upper end of that interval.
    #[serde(deserialize_with = "super::nan::f64")]
    pub ci_high_a: f64,
    /// Test accuracy of the probe on B.
    #[serde(deserialize_with = "super::nan::f64")]
    pub accuracy_b: f64,
    /// 95% cluster-bootstrap interval of `accuracy_b`.
    #[serde(deserialize_with = "super::nan::f64")]
    pub ci_low_b: f64,
    /// Upper end of that interval.
    #[serde(deserialize_with = "super::nan::f64")]
    pub ci_high_b: f64,
    /// accuracy_b − accuracy_a.
    #[serde(deserialize_with = "super::nan::f64")]
    pub delta: f64,
    /// Paired cluster-bootstrap 95% interval of `delta` (clusters: test speakers).
    #[serde(deserialize_with = "super::nan::f64")]
    pub ci_low: f64,
    /// Upper end of that interval.
    #[serde(deserialize_with = "super::nan::f64")]
    pub ci_high: f64,
    /// McNemar p-value on the paired test predictions.
    #[serde(deserialize_with = "super::nan::f64")]
    pub mcnemar_p: f64,
    /// `exact` (binomial, b + c < 25) or `chi_square` (1 df, no continuity correction).
    pub mcnemar_method: McNemarMethod,
    /// Test rows right on A only.
    pub b: u64,
    /// Test rows right on B only.
    pub c: u64,
    /// `categorical` (accuracies, McNemar) or `continuous` (R², `accuracy_*` NaN, McNemar
    /// `not_applicable`); the intervals and `delta` are of the task's score.
    #[serde(default = "categorical")]
    pub kind: String,
    /// Continuous task: held-out R² of the ridge on A (NaN for a categorical task).
    #[serde(default = "nan", deserialize_with = "super::nan::f64")]
    pub r2_a: f64,
    /// Continuous task: held-out R² on B.
    #[serde(default = "nan", deserialize_with = "super::nan::f64")]
    pub r2_b: f64,
}

fn categorical() -> String {
    "categorical".into()
}

fn nan() -> f64 {
    f64::NAN
}

impl ProbeDelta {
    /// Whether the task is continuous (R², no McNemar).
    pub fn is_continuous(&self) -> bool {
        self.kind == "continuous"
    }

    /// The score on A and on B: accuracy, or R² for a continuous task.
    pub fn scores(&self) -> (f64, f64) {
        if self.is_continuous() {
            (self.r2_a, self.r2_b)
        } else {
            (self.accuracy_a, self.accuracy_b)
        }
    }
}

/// Which form of McNemar's test produced a p-value.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum McNemarMethod {
    /// Exact binomial test on the discordant pairs.
    #[default]
    Exact,
    /// Chi-square with 1 degree of freedom, no continuity correction.
    ChiSquare,
    /// Not computed: a continuous task's predictions are not right or wrong.
    NotApplicable,
}
