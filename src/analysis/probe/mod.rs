//! Linear probes per layer and label task: a softmax classifier with an L2 penalty
//! ([`softmax`], trained by our [`lbfgs`]) on standardised activations, its penalty chosen on an
//! inner validation split grouped like the outer one, scored on a held-out side that shares no
//! speaker (or utterance) with training, against a majority baseline and a control task
//! (Hewitt & Liang 2019, [`control`]), with a cluster-bootstrap interval ([`bootstrap`]).
//!
//! Library entry points: [`fit_predict`] (one probe on given matrices, reused by `compare`),
//! [`run`] (every layer and task of a capture), [`write_outputs`] (records and pictures) and
//! [`summary_text`].

pub mod bootstrap;
pub mod control;
pub mod lbfgs;
pub mod metrics;
pub mod softmax;

use ndarray::{Array2, ArrayView2, Axis};
use rand::seq::SliceRandom;
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use serde::Serialize;

use crate::analysis::seed::mix;
use crate::capture::{Capture, UNLABELLED};
pub use crate::records::probe::{
    BestConfusion, BestLayer, FoldSides, ProbeRecord, ProbeReport, ProbeSummary, TaskSetup,
};
use crate::records::CaptureRef;
use crate::select::pool::{self, Items, Pooling, UttIndex};
use crate::select::split::{self, Fold, SplitKind, SplitOptions};
use crate::{CommonOptions, Error, Progress};

use lbfgs::LbfgsOptions;
use softmax::{FitSettings, Standardizer};

/// Errors of the probe stage.
#[derive(Debug, thiserror::Error)]
pub enum ProbeError {
    /// Options or data that do not fit (exit code 2).
    #[error("{0}")]
    Input(String),
    /// A broken invariant inside the probe (exit code 1).
    #[error("probe: {0}")]
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
    /// Folds of grouped cross-validation (1: one split).
    pub folds: usize,
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
    /// Refuse (instead of dropping with a warning) classes or speakers a split cannot use.
    pub strict: bool,
}

impl ProbeOptions {
    /// Refuse settings that cannot work (exit code 2), before any work: never clamp.
    pub fn check(&self) -> Result<(), ProbeError> {
        let bad = |m: String| Err(ProbeError::Input(m));
        if self.folds == 0 {
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
            folds: 1,
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
            strict: false,
        }
    }
}

/// One point of the penalty search.
#[derive(Clone, Debug, Serialize)]
pub struct SearchPoint {
    /// Penalty per item.
    pub alpha: f64,
    /// Inverse penalty on the inner training side.
    pub c: f64,
    /// Accuracy on the inner validation side.
    pub validation_accuracy: f64,
}

/// Result of one probe fit.
#[derive(Clone, Debug)]
pub struct Fit {
    /// Predicted class of each test row.
    pub pred: Vec<u32>,
    /// Class probabilities of each test row (rows × n_classes; absent classes get 0).
    pub proba: Array2<f32>,
    /// Chosen inverse penalty C for the final fit on the whole training side.
    pub c: f64,
    /// Chosen penalty per item.
    pub alpha: f64,
    /// The penalty search (empty when the grid had one value or no inner split was possible).
    pub search: Vec<SearchPoint>,
    /// L-BFGS iterations of the final fit.
    pub iterations: usize,
    /// Whether the final fit met its stopping rule.
    pub converged: bool,
}

/// Hold out whole groups (about `fraction` of the items) for validation, never taking the
/// last training group of a class. None when no usable split exists.
fn inner_split(
    groups: &[u32],
    y: &[u32],
    k: usize,
    fraction: f64,
    seed: u64,
) -> Option<(Vec<usize>, Vec<usize>)> {
    let mut ids: Vec<u32> = groups.to_vec();
    ids.sort_unstable();
    ids.dedup();
    if ids.len() < 2 {
        return None;
    }
    let pos = |g: u32| ids.binary_search(&g).unwrap_or(0);
    let mut per_group = vec![vec![0usize; k]; ids.len()];
    let mut left = vec![0usize; k];
    for (&g, &c) in groups.iter().zip(y) {
        per_group[pos(g)][c as usize] += 1;
        left[c as usize] += 1;
    }
    let mut order: Vec<usize> = (0..ids.len()).collect();
    order.shuffle(&mut ChaCha8Rng::seed_from_u64(seed));
    let target = (fraction * y.len() as f64).ceil() as usize;
    let mut in_val = vec![false; ids.len()];
    let mut taken = 0usize;
    for gi in order {
        if taken >= target {
            break;
        }
        let pg = &per_group[gi];
        if pg.iter().zip(&left).all(|(&a, &l)| a == 0 || l > a) {
            for (l, &a) in left.iter_mut().zip(pg) {
                *l -= a;
            }
            taken += pg.iter().sum::<usize>();
            in_val[gi] = true;
        }
    }
    let (mut tr, mut va) = (Vec::new(), Vec::new());
    for (i, &g) in groups.iter().enumerate() {
        if in_val[pos(g)] {
            va.push(i);
        } else {
            tr.push(i);
        }
    }
    let classes = left.iter().filter(|&&l| l > 0).count();
    (!va.is_empty() && classes >= 2).then_some((tr, va))
}

fn take_rows(x: &ArrayView2<f32>, rows: &[usize]) -> Array2<f32> {
    x.select(Axis(0), rows)
}

/// Train one probe and predict the test rows. `y_train` holds codes in `0..n_classes`;
/// `inner_groups` gives each training row's group for the inner validation split (speaker,
/// utterance or row, matching the outer split). Features are standardised with training
/// statistics; the penalty is chosen from `opts.alphas` on the inner split (warm-started from
/// strong to weak), then the probe is refitted on all training rows.
pub fn fit_predict(
    x_train: ArrayView2<f32>,
    y_train: &[u32],
    n_classes: usize,
    x_test: ArrayView2<f32>,
    inner_groups: &[u32],
    opts: &ProbeOptions,
    seed: u64,
) -> Result<Fit, ProbeError> {
    let (n, d) = x_train.dim();
    if y_train.len() != n || inner_groups.len() != n {
        return Err(ProbeError::Input(format!(
            "training rows: {n} feature rows, {} labels, {} groups (expected equal counts)",
            y_train.len(),
            inner_groups.len()
        )));
    }
    if x_test.ncols() != d {
        return Err(ProbeError::Input(format!(
            "test features have {} columns, training {d}",
            x_test.ncols()
        )));
    }
    if let Some(&bad) = y_train.iter().find(|&&c| c as usize >= n_classes) {
        return Err(ProbeError::Input(format!(
            "label code {bad} is not below n_classes = {n_classes}"
        )));
    }
    if opts.alphas.is_empty() || opts.alphas.iter().any(|a| !(a.is_finite() && *a > 0.0)) {
        return Err(ProbeError::Input(
            "penalty grid: expected one or more positive values".into(),
        ));
    }
    // Train only on the classes present; others get probability 0.
    let mut present: Vec<u32> = y_train.to_vec();
    present.sort_unstable();
    present.dedup();
    let k = present.len();
    let mut remap = vec![u32::MAX; n_classes];
    for (i, &c) in present.iter().enumerate() {
        remap[c as usize] = i as u32;
    }
    let y: Vec<u32> = y_train.iter().map(|&c| remap[c as usize]).collect();
    let nt = x_test.nrows();
    if k < 2 {
        let only = present.first().copied().unwrap_or(0);
        let mut proba = Array2::<f32>::zeros((nt, n_classes));
        if n_classes > 0 {
            proba.column_mut(only as usize).fill(1.0);
        }
        return Ok(Fit {
            pred: vec![only; nt],
            proba,
            c: f64::NAN,
            alpha: f64::NAN,
            search: vec![],
            iterations: 0,
            converged: true,
        });
    }
    let std = Standardizer::fit(&x_train);
    let mut xs = x_train.to_owned();
    std.apply(&mut xs);
    let mut xt = x_test.to_owned();
    std.apply(&mut xt);
    let lb = LbfgsOptions {
        max_iter: opts.max_iter,
        gtol: opts.tol,
        ..Default::default()
    };
    let mut alphas = opts.alphas.clone();
    alphas.sort_by(|a, b| b.total_cmp(a));
    let mut search = Vec::new();
    let mut chosen = alphas[alphas.len() / 2];
    let mut warm: Option<Vec<f64>> = None;
    if alphas.len() > 1 {
        if let Some((tr, va)) = inner_split(inner_groups, &y, k, opts.inner_fraction, mix(seed, 1))
        {
            let xa = take_rows(&xs.view(), &tr);
            let ya: Vec<u32> = tr.iter().map(|&i| y[i]).collect();
            let xv = take_rows(&xs.view(), &va);
            let yv: Vec<u32> = va.iter().map(|&i| y[i]).collect();
            let mut prev: Option<Vec<f64>> = None;
            let mut best = (-1.0f64, 0usize);
            let mut params_at = Vec::new();
            for (ai, &a) in alphas.iter().enumerate() {
                let c = 1.0 / (a * ya.len() as f64);
                let m = softmax::fit(
                    &xa.view(),
                    &ya,
                    k,
                    &FitSettings {
                        c,
                        lbfgs: lb.clone(),
                    },
                    prev.as_deref(),
                );
                let pred = softmax::argmax_rows(&m.predict_proba(&xv.view()).view());
                let acc = metrics::accuracy(&yv, &pred);
                search.push(SearchPoint {
                    alpha: a,
                    c,
                    validation_accuracy: acc,
                });
                if acc > best.0 {
                    best = (acc, ai);
                }
                prev = Some(m.params.clone());
                params_at.push(m.params);
            }
            chosen = alphas[best.1];
            warm = Some(std::mem::take(&mut params_at[best.1]));
        }
    }
    let c = 1.0 / (chosen * n as f64);
    let model = softmax::fit(
        &xs.view(),
        &y,
        k,
        &FitSettings { c, lbfgs: lb },
        warm.as_deref(),
    );
    let p = model.predict_proba(&xt.view());
    let mut proba = Array2::<f32>::zeros((nt, n_classes));
    for (j, &cls) in present.iter().enumerate() {
        proba.column_mut(cls as usize).assign(&p.column(j));
    }
    let pred = softmax::argmax_rows(&p.view())
        .into_iter()
        .map(|j| present[j as usize])
        .collect();
    Ok(Fit {
        pred,
        proba,
        c,
        alpha: chosen,
        search,
        iterations: model.iterations,
        converged: model.converged,
    })
}

/// A task ready to run: items, classes and folds (training sides already subsampled).
struct TaskPlan {
    name: String,
    speaker_task: bool,
    items: Items,
    classes: Vec<String>,
    kind: SplitKind,
    folds: Vec<Fold>,
    setup: TaskSetup,
}

fn input(msg: String) -> Error {
    Error::Probe(ProbeError::Input(msg))
}

fn plan_tasks(
    cap: &Capture,
    opts: &ProbeOptions,
    seed: u64,
    notes: &mut Vec<String>,
) -> Result<Vec<TaskPlan>, Error> {
    let t = &cap.frames;
    let names: Vec<String> = if opts.tasks.is_empty() {
        t.default_tasks()
    } else {
        opts.tasks.clone()
    };
    for n in &names {
        if t.task(n).is_none() {
            return Err(input(format!(
                "{}: --task {n}: not a label column; the capture has: {}",
                cap.dir.display(),
                t.task_names().join(", ")
            )));
        }
    }
    let idx = UttIndex::new(t);
    if opts.context > 0 {
        let shortest = idx.shortest();
        if opts.context >= shortest {
            notes.push(format!(
                "--context {} reaches past the shortest utterance ({shortest} frames): edge frames are repeated to pad",
                opts.context
            ));
        }
    }
    let sopts = SplitOptions {
        test_fraction: opts.test_fraction,
        folds: opts.folds,
    };
    let mut plans = Vec::new();
    for (ti, name) in names.iter().enumerate() {
        let task = t
            .task(name)
            .ok_or_else(|| input(format!("no task {name}")))?;
        let speaker_task = name == "speaker";
        if task.codes.iter().all(|&c| c == UNLABELLED) {
            return Err(input(format!(
                "{}: task '{name}': every frame is unlabelled",
                cap.dir.display()
            )));
        }
        let kind = opts.split.resolve(speaker_task);
        if speaker_task && kind == SplitKind::Speaker {
            return Err(input(
                "--split speaker cannot be used for the speaker task: no test speaker would be in training; use --split auto or utterance".into(),
            ));
        }
        let mut items =
            pool::pool_items(t, &idx, &task.codes, opts.pooling, name).map_err(input)?;
        if kind == SplitKind::Speaker {
            let mut spk: Vec<u32> = items.speaker.clone();
            spk.sort_unstable();
            spk.dedup();
            if spk.len() < 2 {
                return Err(input(format!(
                    "{}: task '{name}': a speaker-disjoint split needs at least 2 speakers with labelled frames, found {}; use --split utterance to split within speakers",
                    cap.dir.display(),
                    spk.len()
                )));
            }
        }
        let mut dropped = Vec::new();
        // Classes (or speakers) the split cannot place on both sides.
        let n_cls = task.classes.len();
        let mut keep_class = vec![true; n_cls];
        if kind == SplitKind::Speaker {
            let mut spk_of: Vec<std::collections::BTreeSet<u32>> = vec![Default::default(); n_cls];
            for (&c, &s) in items.label.iter().zip(&items.speaker) {
                spk_of[c as usize].insert(s);
            }
            for (c, set) in spk_of.iter().enumerate() {
                if set.len() == 1 {
                    let spk = &t.speakers[*set.iter().next().unwrap_or(&0) as usize];
                    let msg = format!(
                        "task '{name}': class '{}' occurs only in speaker '{spk}', so a speaker-disjoint split cannot test it",
                        task.classes[c]
                    );
                    if opts.strict {
                        return Err(input(format!("{msg} (--strict)")));
                    }
                    notes.push(format!("warning: {msg}; dropped"));
                    dropped.push(format!("{} (only in speaker {spk})", task.classes[c]));
                    keep_class[c] = false;
                }
            }
        }
        if speaker_task && kind == SplitKind::Utterance {
            let mut utts: Vec<std::collections::BTreeSet<u32>> = vec![Default::default(); n_cls];
            for (&c, &u) in items.label.iter().zip(&items.utt) {
                utts[c as usize].insert(u);
            }
            for (c, set) in utts.iter().enumerate() {
                if set.len() == 1 {
                    let msg = format!(
                        "task 'speaker': speaker '{}' has a single utterance, so it cannot be on both sides of the split",
                        task.classes[c]
                    );
                    if opts.strict {
                        return Err(input(format!("{msg} (--strict)")));
                    }
                    notes.push(format!("warning: {msg}; dropped"));
                    dropped.push(format!("{} (single utterance)", task.classes[c]));
                    keep_class[c] = false;
                }
            }
        }
        // Remap kept classes that have items to 0..k.
        let mut counts = vec![0usize; n_cls];
        for &c in &items.label {
            counts[c as usize] += 1;
        }
        let mut new_code = vec![u32::MAX; n_cls];
        let mut classes = Vec::new();
        for c in 0..n_cls {
            if keep_class[c] && counts[c] > 0 {
                new_code[c] = classes.len() as u32;
                classes.push(task.classes[c].clone());
            }
        }
        if classes.len() < 2 {
            return Err(input(format!(
                "{}: task '{name}' has {} usable class{} ({}); a probe needs at least 2",
                cap.dir.display(),
                classes.len(),
                if classes.len() == 1 { "" } else { "es" },
                if classes.is_empty() {
                    "none".to_string()
                } else {
                    classes.join(", ")
                }
            )));
        }
        let keep: Vec<bool> = items
            .label
            .iter()
            .map(|&c| new_code[c as usize] != u32::MAX)
            .collect();
        items = items.retain(&keep);
        for c in items.label.iter_mut() {
            *c = new_code[*c as usize];
        }
        let sp = split::make_split(
            kind,
            speaker_task,
            &items.utt,
            &items.speaker,
            &sopts,
            mix(seed, 100 + ti as u64),
        )
        .map_err(|m| input(format!("{}: task '{name}': {m}", cap.dir.display())))?;
        let folds: Vec<Fold> = sp
            .folds
            .iter()
            .enumerate()
            .map(|(fi, f)| Fold {
                train: crate::select::sample::by_class(
                    &f.train,
                    &items.label,
                    opts.max_train_frames,
                    mix(seed, 200 + (ti * 1000 + fi) as u64),
                ),
                test: crate::select::sample::by_class(
                    &f.test,
                    &items.label,
                    opts.max_test_frames,
                    mix(seed, 250 + (ti * 1000 + fi) as u64),
                ),
            })
            .collect();
        let full_test: usize = sp.folds.iter().map(|f| f.test.len()).sum();
        let kept_test: usize = folds.iter().map(|f| f.test.len()).sum();
        if kept_test < full_test {
            notes.push(format!(
                "{name}: test items capped by --max-test-frames {}: {kept_test} of {full_test} \
                 (stratified by class)",
                opts.max_test_frames
            ));
        }
        let check = split::check_leakage(
            sp.kind,
            sp.every_speaker_both_sides,
            &folds,
            &items.utt,
            &items.speaker,
        );
        if !check.passed {
            return Err(Error::Internal(format!(
                "task '{name}': split leaks: {check:?}"
            )));
        }
        let groups = match sp.kind {
            SplitKind::Speaker => "speakers",
            SplitKind::Utterance => "utterances",
            _ => "items",
        };
        let sides = folds
            .iter()
            .map(|f| {
                let names_of = |ix: &[usize]| -> Vec<String> {
                    let mut ids: Vec<u32> = match sp.kind {
                        SplitKind::Speaker => ix.iter().map(|&i| items.speaker[i]).collect(),
                        SplitKind::Utterance => ix.iter().map(|&i| items.utt[i]).collect(),
                        _ => vec![],
                    };
                    ids.sort_unstable();
                    ids.dedup();
                    ids.iter()
                        .map(|&g| match sp.kind {
                            SplitKind::Speaker => t.speakers[g as usize].clone(),
                            _ => t.utterances[g as usize].clone(),
                        })
                        .collect()
                };
                FoldSides {
                    train: names_of(&f.train),
                    test: names_of(&f.test),
                    n_train: f.train.len(),
                    n_test: f.test.len(),
                }
            })
            .collect();
        let setup = TaskSetup {
            task: name.clone(),
            classes: classes.clone(),
            dropped,
            split: sp.kind,
            groups: groups.to_string(),
            folds: sides,
            leakage_check: check,
        };
        plans.push(TaskPlan {
            name: name.clone(),
            speaker_task,
            items,
            classes,
            kind: sp.kind,
            folds,
            setup,
        });
    }
    Ok(plans)
}

fn mean(v: &[f64]) -> f64 {
    v.iter().sum::<f64>() / v.len().max(1) as f64
}

fn sd(v: &[f64]) -> Option<f64> {
    (v.len() > 1).then(|| {
        let m = mean(v);
        (v.iter().map(|x| (x - m) * (x - m)).sum::<f64>() / (v.len() - 1) as f64).sqrt()
    })
}

/// Probe every selected layer of `cap` for every task. Validates all input before any heavy
/// work; returns records, set-ups, confusion matrices and a summary (nothing is written).
pub fn run(
    cap: &Capture,
    opts: &ProbeOptions,
    common: &CommonOptions,
    progress: &Progress,
) -> Result<ProbeReport, Error> {
    opts.check()?;
    let layers = cap.select_layers(common.layers.as_ref())?;
    let mut notes = Vec::new();
    let plans = plan_tasks(cap, opts, common.seed, &mut notes)?;
    let idx = UttIndex::new(&cap.frames);
    // Only the frames the folds use are read from each layer (a capped training set on a large
    // capture touches a small share of its rows).
    let n_frames = cap.frames.n_frames();
    let mut mask = vec![false; n_frames];
    for p in &plans {
        for f in &p.folds {
            for which in [&f.train, &f.test] {
                pool::mark_frames(&p.items, which, &idx, &cap.frames, opts.context, &mut mask);
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
    let step = progress.step("probing layers", (layers.len() * plans.len()) as u64);
    let mut records = Vec::new();
    let mut confusions: Vec<Vec<Vec<Vec<u64>>>> = vec![Vec::new(); plans.len()];
    for &li in &layers {
        let layer_id = cap.layers[li].id;
        step.message(&format!("layer {layer_id}"));
        let x = match &row_of {
            Some(_) => cap.read_layer_rows(li, &needed)?,
            None => cap.read_layer(li)?,
        };
        for (ti, p) in plans.iter().enumerate() {
            let k = p.classes.len();
            let (mut accs, mut f1s, mut bals, mut majs, mut ctrls, mut cs) =
                (vec![], vec![], vec![], vec![], vec![], vec![]);
            let mut correct = Vec::new();
            let mut cluster = Vec::new();
            let mut conf = vec![vec![0u64; k]; k];
            let mut n_train = 0usize;
            let mut n_test = 0usize;
            for (fi, f) in p.folds.iter().enumerate() {
                let xtr = pool::features(
                    &x.view(),
                    row_of.as_deref(),
                    &p.items,
                    &f.train,
                    &idx,
                    &cap.frames,
                    opts.context,
                );
                let xte = pool::features(
                    &x.view(),
                    row_of.as_deref(),
                    &p.items,
                    &f.test,
                    &idx,
                    &cap.frames,
                    opts.context,
                );
                let ytr: Vec<u32> = f.train.iter().map(|&i| p.items.label[i]).collect();
                let yte: Vec<u32> = f.test.iter().map(|&i| p.items.label[i]).collect();
                let groups: Vec<u32> = f
                    .train
                    .iter()
                    .map(|&i| match p.kind {
                        SplitKind::Speaker => p.items.speaker[i],
                        SplitKind::Utterance => p.items.utt[i],
                        _ => i as u32,
                    })
                    .collect();
                let fseed = mix(common.seed, 300 + (ti * 1000 + fi) as u64);
                let fit = fit_predict(xtr.view(), &ytr, k, xte.view(), &groups, opts, fseed)?;
                accs.push(metrics::accuracy(&yte, &fit.pred));
                f1s.push(metrics::macro_f1(&yte, &fit.pred, k));
                bals.push(metrics::balanced_accuracy(&yte, &fit.pred, k));
                majs.push(metrics::majority_baseline(&ytr, &yte, k));
                cs.push(fit.c);
                for (r, row) in metrics::confusion(&yte, &fit.pred, k).iter().enumerate() {
                    for (c, v) in row.iter().enumerate() {
                        conf[r][c] += v;
                    }
                }
                for (j, &i) in f.test.iter().enumerate() {
                    correct.push(yte[j] == fit.pred[j]);
                    cluster.push(if p.speaker_task {
                        p.items.utt[i]
                    } else {
                        p.items.speaker[i]
                    });
                }
                if opts.control {
                    let mut freq = vec![0f64; k];
                    for &c in &ytr {
                        freq[c as usize] += 1.0;
                    }
                    let ctl = control::control_labels(
                        &p.items.segment,
                        &freq,
                        mix(common.seed, 400 + (ti * 1000 + fi) as u64),
                    );
                    let ctr: Vec<u32> = f.train.iter().map(|&i| ctl[i]).collect();
                    let cte: Vec<u32> = f.test.iter().map(|&i| ctl[i]).collect();
                    // The control uses the same probe, penalty included (Hewitt & Liang 2019
                    // compare one probe configuration on both tasks), so no penalty search here.
                    let copts = ProbeOptions {
                        alphas: if fit.alpha.is_finite() {
                            vec![fit.alpha]
                        } else {
                            opts.alphas.clone()
                        },
                        ..opts.clone()
                    };
                    let cfit = fit_predict(
                        xtr.view(),
                        &ctr,
                        k,
                        xte.view(),
                        &groups,
                        &copts,
                        fseed ^ 0x5a5a,
                    )?;
                    ctrls.push(metrics::accuracy(&cte, &cfit.pred));
                }
                n_train += f.train.len();
                n_test += f.test.len();
            }
            let boot_seed = mix(common.seed, 500 + ti as u64);
            let (lo, hi) =
                bootstrap::cluster_interval(&correct, &cluster, opts.bootstrap, 0.95, boot_seed);
            let accuracy = mean(&accs);
            let control_accuracy = if opts.control { mean(&ctrls) } else { f64::NAN };
            let mut cs_sorted = cs.clone();
            cs_sorted.sort_by(|a, b| a.total_cmp(b));
            records.push(ProbeRecord {
                layer: layer_id,
                task: p.name.clone(),
                pooling: opts.pooling.name().to_string(),
                split: p.kind.name().to_string(),
                n_train: (n_train as f64 / p.folds.len() as f64).round() as usize,
                n_test,
                n_classes: k,
                accuracy,
                ci_low: lo,
                ci_high: hi,
                macro_f1: mean(&f1s),
                balanced_accuracy: mean(&bals),
                majority_baseline: mean(&majs),
                control_accuracy,
                selectivity: accuracy - control_accuracy,
                c: cs_sorted[cs_sorted.len() / 2],
                folds: p.folds.len(),
                accuracy_sd: sd(&accs),
                control_accuracy_sd: if opts.control { sd(&ctrls) } else { None },
            });
            confusions[ti].push(conf);
            step.inc(1);
        }
    }
    // Degenerate intervals.
    for p in &plans {
        let mut cl: Vec<u32> = p
            .folds
            .iter()
            .flat_map(|f| {
                f.test.iter().map(|&i| {
                    if p.speaker_task {
                        p.items.utt[i]
                    } else {
                        p.items.speaker[i]
                    }
                })
            })
            .collect();
        cl.sort_unstable();
        cl.dedup();
        if cl.len() < 2 {
            notes.push(format!(
                "task '{}': only {} test {}: the interval cannot be estimated and is shown as a point",
                p.name,
                cl.len(),
                if p.speaker_task { "utterance" } else { "speaker" }
            ));
        }
    }
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
    let (speaker_below_half_layer, speaker_half_level) = speaker_fall(&records);
    let mut options = serde_json::to_value(opts).map_err(|e| Error::Internal(e.to_string()))?;
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
    Ok(ProbeReport {
        capture: CaptureRef {
            name: cap.name.clone(),
            path: cap.dir.display().to_string(),
        },
        options,
        records,
        tasks: plans.into_iter().map(|p| p.setup).collect(),
        confusion,
        summary: ProbeSummary {
            best,
            speaker_below_half_layer,
            speaker_half_level,
        },
        notes,
    })
}

/// Where speaker accuracy falls half way (the one rule, [`crate::analysis::stats::half_fall`]):
/// the layer and the level.
fn speaker_fall(records: &[ProbeRecord]) -> (Option<usize>, Option<f64>) {
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
