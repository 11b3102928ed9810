//! Linear probes per layer and label task: a softmax classifier with an L2 penalty
//! ([`softmax`], trained by our [`lbfgs`]) on standardised activations, its penalty chosen on an
//! inner validation split grouped like the outer one, scored on a held-out side that shares no
//! speaker (or utterance) with training, against a majority baseline and a control task
//! (Hewitt & Liang 2019, [`control`]), with a cluster-bootstrap interval ([`bootstrap`]).
//!
//! Library entry points: [`fit_predict`] (one probe on given matrices, reused by `compare`;
//! in [`fit`]) and [`run`] (every layer and task of a capture, planned by [`plan`]).

pub mod bootstrap;
pub mod control;
pub mod fit;
pub mod lbfgs;
pub mod mdl;
pub mod metrics;
mod plan;
pub mod regress;
pub mod ridge;
pub mod softmax;
mod task;

use ndarray::{Array2, ArrayView2};
use serde::Serialize;

use crate::capture::{Capture, CaptureError, FrameTable};
pub use crate::records::probe::{
    BestConfusion, BestFit, BestLayer, FitFall, FoldSides, ProbeRecord, ProbeReport, ProbeSummary,
    TaskPredictions, TaskSetup,
};
use crate::records::CaptureRef;
use crate::select::pool::{self, Items, Pooling, UttIndex};
use crate::select::split::{FoldCount, SplitKind};
use crate::{CommonOptions, Progress};

pub use fit::{fit_predict, Fit, SearchPoint};
use plan::{plan_tasks, TaskPlan};

/// Errors of the probe stage.
#[derive(Debug, thiserror::Error)]
pub enum ProbeError {
    /// Options or data that do not fit (exit code 2).
    #[error("{0}")]
    Input(String),
    /// A capture could not be read (exit code 2).
    #[error(transparent)]
    Capture(#[from] CaptureError),
    /// A broken invariant inside the probe (exit code 1).
    #[error("internal error: {0}")]
    Internal(String),
}

/// Settings of the probe analysis.
#[derive(Clone, Debug, Serialize)]
pub struct ProbeOptions {
    /// Label tasks to probe (empty: `phone` if present, and `speaker`).
    pub tasks: Vec<String>,
    /// How frames are pooled into items.
    pub pooling: Pooling,
    /// Frames stacked either side of each frame.
    pub context: usize,
    /// Split kind.
    pub split: SplitKind,
    /// Share of groups held out for testing.
    pub test_fraction: f64,
    /// Folds of grouped cross-validation: `auto` (K = 5 when one split would test on fewer
    /// than 10 groups) or a number (1: one split).
    pub folds: FoldCount,
    /// Largest number of training items per fit (stratified subsample; 0: all).
    pub max_train_frames: usize,
    /// Largest number of test items per fold (stratified subsample, class shares kept; 0: all).
    /// Bounds memory on very large captures; the interval still resamples test speakers.
    pub max_test_frames: usize,
    /// Penalty grid as α = 1/(C·n), strongest first; C = 1/(α·n) for n training items.
    pub alphas: Vec<f64>,
    /// Share of training groups held out to choose the penalty.
    pub inner_fraction: f64,
    /// L-BFGS gradient tolerance on the per-item objective (scikit-learn's `tol`).
    pub tol: f64,
    /// L-BFGS iteration cap per fit.
    pub max_iter: usize,
    /// Bootstrap resamples for the interval.
    pub bootstrap: usize,
    /// Train the control task.
    pub control: bool,
    /// Label column whose values are the control task's types (None: phone in context).
    pub control_by: Option<String>,
    /// Compute the MDL online code (Voita & Titov 2020).
    pub mdl: bool,
    /// Refuse (instead of dropping with a warning) classes or speakers a split cannot use.
    pub strict: bool,
}

impl ProbeOptions {
    /// Refuse settings that cannot work (exit code 2), before any work: never clamp.
    pub fn check(&self) -> Result<(), ProbeError> {
        let bad = |m: String| Err(ProbeError::Input(m));
        if self.folds == FoldCount::Fixed(0) {
            return bad("--folds: expected 1 or more, found 0".into());
        }
        if !(self.test_fraction > 0.0 && self.test_fraction < 1.0) {
            return bad(format!(
                "--test-fraction: expected a share between 0 and 1 (exclusive), found {}",
                self.test_fraction
            ));
        }
        if !(self.inner_fraction > 0.0 && self.inner_fraction < 1.0) {
            return bad(format!(
                "inner fraction: expected a share between 0 and 1 (exclusive), found {}",
                self.inner_fraction
            ));
        }
        if self.bootstrap == 0 {
            return bad("--bootstrap: expected at least 1 resample, found 0".into());
        }
        if self.alphas.is_empty() || self.alphas.iter().any(|a| !(*a > 0.0 && a.is_finite())) {
            return bad(format!(
                "penalty grid: expected one or more positive penalties, found {:?}",
                self.alphas
            ));
        }
        if self.max_iter == 0 || self.tol.is_nan() || self.tol <= 0.0 {
            return bad(format!(
                "solver: expected at least one iteration and a positive tolerance, found {} and {}",
                self.max_iter, self.tol
            ));
        }
        Ok(())
    }
}

impl Default for ProbeOptions {
    fn default() -> Self {
        ProbeOptions {
            tasks: vec![],
            pooling: Pooling::Frame,
            context: 0,
            split: SplitKind::Auto,
            test_fraction: 0.25,
            folds: FoldCount::Auto,
            max_train_frames: 20_000,
            max_test_frames: 50_000,
            // α = 1e-1 .. 1e-4 per item, from a strong penalty to a nearly unpenalised fit
            // (common practice for probes). As C = 1/(α·n) that is C = 0.01..10 at n = 1 000
            // training items, 0.001..1 at n = 10 000 and 0.0005..0.5 at the default cap of
            // 20 000.
            alphas: vec![1e-1, 1e-2, 1e-3, 1e-4],
            inner_fraction: 0.2,
            tol: 1e-4,
            max_iter: 100,
            bootstrap: 1000,
            control: true,
            control_by: None,
            mdl: false,
            strict: false,
        }
    }
}

/// Probe every selected layer of `cap` for every task. Validates all input before any heavy
/// work; returns records, set-ups, confusion matrices and a summary (nothing is written).
pub fn run(
    cap: &Capture,
    opts: &ProbeOptions,
    common: &CommonOptions,
    progress: &Progress,
) -> Result<ProbeReport, ProbeError> {
    opts.check()?;
    let layers = cap.select_layers(common.layers.as_ref())?;
    let mut notes = Vec::new();
    let all = plan_tasks(cap, opts, common.seed, &mut notes)?;
    let idx = UttIndex::new(&cap.frames);
    let (needed, row_of) = needed_frames(cap, &all, &idx, opts.context);
    let n_tasks = all.class.len() + all.regress.len();
    let step = progress.step("probing layers", (layers.len() * n_tasks) as u64);
    let mut records = Vec::new();
    let mut predictions = Vec::new();
    let mut confusions: Vec<Vec<Vec<Vec<u64>>>> = vec![Vec::new(); all.class.len()];
    for &li in &layers {
        let layer_id = cap.layers[li].id;
        step.message(&format!("layer {layer_id}"));
        let x = match &row_of {
            Some(_) => cap.read_layer_rows(li, &needed)?,
            None => cap.read_layer(li)?,
        };
        let rows = LayerRows {
            x: x.view(),
            row_of: row_of.as_deref(),
            idx: &idx,
            frames: &cap.frames,
            context: opts.context,
        };
        let mut layer_records: Vec<(usize, ProbeRecord, TaskPredictions)> = Vec::new();
        for (ci, (ti, p)) in all.class.iter().enumerate() {
            let scores = task::probe_task(&rows, p, *ti, opts, common.seed)?;
            let rec = scores.record(p, layer_id, *ti, opts, common.seed);
            layer_records.push((*ti, rec, scores.predictions(p, layer_id)));
            confusions[ci].push(scores.confusion(p.classes.len()));
            step.inc(1);
        }
        for (ti, p) in &all.regress {
            let scores = regress::probe_task(&rows, p, *ti, opts, common.seed)?;
            let rec = scores.record(p, layer_id, *ti, opts, common.seed);
            layer_records.push((*ti, rec, scores.predictions(p, layer_id)));
            step.inc(1);
        }
        // Records in the order the tasks were named.
        layer_records.sort_by_key(|r| r.0);
        for (_, rec, pred) in layer_records {
            records.push(rec);
            predictions.push(pred);
        }
    }
    let plans: Vec<TaskPlan> = all.class.into_iter().map(|(_, p)| p).collect();
    note_point_intervals(&plans, &all.regress, &mut notes);
    let (confusion, best) = best_layers(&plans, &records, &confusions);
    let (speaker_below_half_layer, speaker_half_level) = speaker_fall(&records);
    let class_setups: Vec<TaskSetup> = plans.into_iter().map(|p| p.setup).collect();
    let setups = task_setups(class_setups, all.regress, &records);
    let best_r2 = regress::best_fits(&records, &setups);
    let r2_half_fall = regress::r2_half_falls(&records);
    let options = options_value(cap, opts, common, &layers)?;
    Ok(ProbeReport {
        capture: CaptureRef {
            name: cap.name.clone(),
            path: cap.dir.display().to_string(),
        },
        options,
        records,
        tasks: setups,
        confusion,
        summary: ProbeSummary {
            best,
            best_r2,
            speaker_below_half_layer,
            speaker_half_level,
            r2_half_fall,
        },
        notes,
        predictions,
    })
}

/// The frames the folds use, in order, and each frame's row among them (None when every
/// frame is used and whole layers are read). A capped training set on a large capture
/// touches a small share of its rows, so only those are read from each layer.
fn needed_frames(
    cap: &Capture,
    plans: &plan::Plans,
    idx: &UttIndex,
    context: usize,
) -> (Vec<usize>, Option<Vec<u32>>) {
    let n_frames = cap.frames.n_frames();
    let mut mask = vec![false; n_frames];
    let sides = plans
        .class
        .iter()
        .map(|(_, p)| (&p.items, &p.folds))
        .chain(plans.regress.iter().map(|(_, p)| (&p.items, &p.folds)));
    for (items, folds) in sides {
        for f in folds {
            for which in [&f.train, &f.test] {
                pool::mark_frames(items, which, idx, &cap.frames, context, &mut mask);
            }
        }
    }
    let needed: Vec<usize> = (0..n_frames).filter(|&f| mask[f]).collect();
    drop(mask);
    let row_of: Option<Vec<u32>> = (needed.len() < n_frames).then(|| {
        let mut r = vec![u32::MAX; n_frames];
        for (k, &f) in needed.iter().enumerate() {
            r[f] = k as u32;
        }
        r
    });
    (needed, row_of)
}

/// One layer's activations as read, and what it takes to build item features from them.
pub(super) struct LayerRows<'a> {
    x: ArrayView2<'a, f32>,
    row_of: Option<&'a [u32]>,
    idx: &'a UttIndex,
    frames: &'a FrameTable,
    context: usize,
}

impl LayerRows<'_> {
    /// Features of the items `which` (pooled, with context frames stacked).
    pub(super) fn features(&self, items: &Items, which: &[usize]) -> Array2<f32> {
        pool::features(
            &self.x,
            self.row_of,
            items,
            which,
            self.idx,
            self.frames,
            self.context,
        )
    }
}

/// The set-ups of every task in the order of their records (the order the tasks were named).
fn task_setups(
    class: Vec<TaskSetup>,
    regress: Vec<(usize, regress::RegressPlan)>,
    records: &[ProbeRecord],
) -> Vec<TaskSetup> {
    let position = |name: &str| records.iter().position(|r| r.task == name);
    let mut all = class;
    all.extend(regress.into_iter().map(|(_, p)| p.setup));
    all.sort_by_key(|s| position(&s.task));
    all
}

/// Note tasks with fewer than two test clusters: their intervals degenerate to a point.
fn note_point_intervals(
    plans: &[TaskPlan],
    regress: &[(usize, regress::RegressPlan)],
    notes: &mut Vec<String>,
) {
    let clusters = plans
        .iter()
        .map(|p| {
            let cl: Vec<u32> = p
                .folds
                .iter()
                .flat_map(|f| f.test.iter().map(|&i| task::cluster_of(p, i)))
                .collect();
            (&p.name, p.speaker_task, cl)
        })
        .chain(regress.iter().map(|(_, p)| {
            let cl: Vec<u32> = p
                .folds
                .iter()
                .flat_map(|f| f.test.iter().map(|&i| p.items.speaker[i]))
                .collect();
            (&p.name, false, cl)
        }));
    for (name, speaker_task, mut cl) in clusters {
        cl.sort_unstable();
        cl.dedup();
        if cl.len() < 2 {
            notes.push(format!(
                "task '{}': only {} test {}: the interval cannot be estimated and is shown as a point",
                name,
                cl.len(),
                if speaker_task { "utterance" } else { "speaker" }
            ));
        }
    }
}

/// Each task's best layer (the first with the highest accuracy) and its confusion matrix.
/// `confusions[ti]` holds task `ti`'s matrices in the order of its records.
fn best_layers(
    plans: &[TaskPlan],
    records: &[ProbeRecord],
    confusions: &[Vec<Vec<Vec<u64>>>],
) -> (Vec<BestConfusion>, Vec<BestLayer>) {
    let mut confusion = Vec::new();
    let mut best = Vec::new();
    for (ti, p) in plans.iter().enumerate() {
        let rows: Vec<(usize, &ProbeRecord)> = records
            .iter()
            .filter(|r| r.task == p.name)
            .enumerate()
            .collect();
        let Some(&(bi, br)) = rows
            .iter()
            .fold(None, |acc: Option<&(usize, &ProbeRecord)>, r| match acc {
                Some(a) if a.1.accuracy >= r.1.accuracy => Some(a),
                _ => Some(r),
            })
        else {
            continue;
        };
        let m = confusions[ti][bi].clone();
        let per_class = (0..m.len())
            .map(|c| {
                let s: u64 = m[c].iter().sum();
                (s > 0).then(|| m[c][c] as f64 / s as f64)
            })
            .collect();
        confusion.push(BestConfusion {
            task: p.name.clone(),
            layer: br.layer,
            classes: p.classes.clone(),
            matrix: m,
            per_class_accuracy: per_class,
        });
        best.push(BestLayer {
            task: p.name.clone(),
            layer: br.layer,
            accuracy: br.accuracy,
            ci_low: br.ci_low,
            ci_high: br.ci_high,
        });
    }
    (confusion, best)
}

/// The options as recorded: the probe settings, the seed and the layer numbers probed.
fn options_value(
    cap: &Capture,
    opts: &ProbeOptions,
    common: &CommonOptions,
    layers: &[usize],
) -> Result<serde_json::Value, ProbeError> {
    let mut options =
        serde_json::to_value(opts).map_err(|e| ProbeError::Internal(e.to_string()))?;
    if let Some(o) = options.as_object_mut() {
        o.insert("seed".into(), common.seed.into());
        o.insert(
            "layers".into(),
            layers
                .iter()
                .map(|&i| cap.layers[i].id)
                .collect::<Vec<_>>()
                .into(),
        );
    }
    Ok(options)
}

/// Where speaker accuracy falls half way (the one rule, [`crate::analysis::stats::half_fall`]):
/// the layer and the level.
/// The speaker task's half-fall layer and level over `records` (see [`stats::half_fall`]).
///
/// [`stats::half_fall`]: crate::analysis::stats::half_fall
pub fn speaker_fall(records: &[ProbeRecord]) -> (Option<usize>, Option<f64>) {
    let pts: Vec<(usize, f64)> = records
        .iter()
        .filter(|r| r.task == "speaker")
        .map(|r| (r.layer, r.accuracy))
        .collect();
    match crate::analysis::stats::half_fall(&pts) {
        Some(h) => (h.layer, Some(h.level)),
        None => (None, None),
    }
}
