//! Regression probes for continuous label columns (pitch, energy, position): the ridge of
//! [`super::ridge`] on standardised features, the target standardised on the training side,
//! its penalty chosen from the same grid on an inner split grouped like the outer one (the
//! classifier's rule: the first best validation score wins, the middle of the grid when there
//! is nothing to search), on the same outer splits and folds as the categorical tasks,
//! scored pooled over folds.
//!
//! An item's value is the mean of its frames' values (a frame is one item under the default
//! frame pooling); frames with no value (empty, `nan`, `inf`) are left out of the task.
//! The control follows Hewitt & Liang (2019) as the classifier's does ([`super::control`]):
//! every type (phone in context, or the `--control-by` column's value; the value itself when
//! the capture has neither) gets one value drawn once per task, with the run's seed, from the column's
//! values on the task's items (the same in every fold), and the same ridge (same penalty, same split) is fitted to it.

use rand::seq::SliceRandom;
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;

use crate::analysis::seed::mix;
use crate::capture::{Capture, NumericTask, UNLABELLED};
use crate::records::probe::{BestFit, FitFall, ProbeRecord, TaskPredictions, TaskSetup};
use crate::select::pool::{self, Items, UttIndex};
use crate::select::split::{self, Fold, SplitKind, SplitOptions};

use super::plan::{
    capped_folds, check_no_leak, check_two_speakers, fold_sides, group_word, input, note_test_cap,
};
use super::{bootstrap, control, ridge, LayerRows, ProbeError, ProbeOptions};

/// A continuous task ready to run: items with their values, and folds.
pub(super) struct RegressPlan {
    pub(super) name: String,
    pub(super) items: Items,
    /// Value of each item (mean of its frames' values).
    pub(super) value: Vec<f64>,
    pub(super) kind: SplitKind,
    pub(super) folds: Vec<Fold>,
    /// Control type of each item (None when the control is off).
    pub(super) types: Option<Vec<u32>>,
    pub(super) setup: TaskSetup,
}

/// Plan continuous task number `ti` (its seeds are derived from `seed` and `ti`, as a
/// categorical task's are).
pub(super) fn plan_task(
    cap: &Capture,
    idx: &UttIndex,
    opts: &ProbeOptions,
    ti: usize,
    task: &NumericTask,
    seed: u64,
    notes: &mut Vec<String>,
) -> Result<RegressPlan, ProbeError> {
    let t = &cap.frames;
    let name = task.name.as_str();
    let codes: Vec<u32> = task
        .values
        .iter()
        .map(|v| if v.is_finite() { 0 } else { UNLABELLED })
        .collect();
    if codes.iter().all(|&c| c == UNLABELLED) {
        return Err(input(format!(
            "{}: task '{name}' (continuous): expected frames with a value, found none",
            cap.dir.display()
        )));
    }
    let kind = opts.split.resolve(false);
    let items = pool::pool_items(t, idx, &codes, opts.pooling, name).map_err(input)?;
    if kind == SplitKind::Speaker {
        check_two_speakers(cap, name, &items)?;
    }
    let value: Vec<f64> = (0..items.len())
        .map(|i| {
            let m = items.members(i);
            m.iter().map(|&f| task.values[f] as f64).sum::<f64>() / m.len() as f64
        })
        .collect();
    let sopts = SplitOptions {
        test_fraction: opts.test_fraction,
        folds: split::resolve_folds(
            opts.folds,
            kind,
            false,
            &items.utt,
            &items.speaker,
            opts.test_fraction,
        ),
    };
    let sp = split::make_split(
        kind,
        false,
        &items.utt,
        &items.speaker,
        &sopts,
        mix(seed, 100 + ti as u64),
    )
    .map_err(|m| input(format!("{}: task '{name}': {m}", cap.dir.display())))?;
    let folds = capped_folds(&sp, &items, opts, ti, seed);
    check_training_values(cap, name, &folds, &value)?;
    if sp.kind == SplitKind::Frame {
        notes.push(format!(
            "task '{name}' is split by frame: neighbouring frames of one utterance land on both \
             sides, so its R² is overstated; use --split auto (speaker-disjoint) for a score \
             that holds on unseen speech"
        ));
    }
    note_test_cap(&sp, &folds, name, opts, notes);
    let check = check_no_leak(&sp, &folds, &items, name)?;
    let ctl = if opts.control {
        Some(control_types(cap, idx, opts, name, &items, &value)?)
    } else {
        None
    };
    let setup = TaskSetup {
        task: name.to_string(),
        kind: "continuous".into(),
        classes: vec![],
        dropped: vec![],
        split: sp.kind,
        groups: group_word(sp.kind).to_string(),
        folds: fold_sides(sp.kind, &folds, &items, t),
        leakage_check: check,
        control_by: ctl.as_ref().map_or("none".into(), |c| c.1.clone()),
        control_types: ctl.as_ref().map_or(0, |c| c.2),
    };
    Ok(RegressPlan {
        name: name.to_string(),
        items,
        value,
        kind: sp.kind,
        folds,
        types: ctl.map(|c| c.0),
        setup,
    })
}

/// Every fold's training side needs at least 3 distinct values (exit code 2). This also
/// refuses zero variance on the training side, which only a single distinct value has.
fn check_training_values(
    cap: &Capture,
    name: &str,
    folds: &[Fold],
    value: &[f64],
) -> Result<(), ProbeError> {
    for (fi, f) in folds.iter().enumerate() {
        let mut v: Vec<f64> = f.train.iter().map(|&i| value[i]).collect();
        v.sort_by(|a, b| a.total_cmp(b));
        v.dedup();
        let fold = if folds.len() > 1 {
            format!(" (fold {} of {})", fi + 1, folds.len())
        } else {
            String::new()
        };
        if v.len() < 3 {
            let shown: Vec<String> = v.iter().map(|x| format!("{x}")).collect();
            return Err(input(format!(
                "{}: task '{name}' (continuous): expected at least 3 distinct values on the \
                 training side{fold}, found {} ({}); a regression probe needs a spread of values",
                cap.dir.display(),
                v.len(),
                if shown.is_empty() {
                    "none".into()
                } else {
                    shown.join(", ")
                }
            )));
        }
    }
    Ok(())
}

/// The control type of each item (its middle frame's type), what the types are and how many
/// occur: phone in context by default, the `--control-by` column's value, or the task's own
/// value when the capture has no phone column.
fn control_types(
    cap: &Capture,
    idx: &UttIndex,
    opts: &ProbeOptions,
    name: &str,
    items: &Items,
    value: &[f64],
) -> Result<(Vec<u32>, String, usize), ProbeError> {
    let t = &cap.frames;
    let column = match opts.control_by.as_deref() {
        Some(c) => Some((c, false)),
        None if t.task("phone").is_some() => Some(("phone", true)),
        None => None,
    };
    let mut code = std::collections::HashMap::new();
    let (item_type, by): (Vec<u32>, String) = match column {
        Some((col, in_context)) => {
            let column = t
                .task(col)
                .ok_or_else(|| input(format!("--control-by {col}: not a label column")))?;
            let (frame_type, _) = control::frame_types(column, idx, in_context);
            let ty = (0..items.len())
                .map(|i| {
                    let m = items.members(i);
                    let next = code.len() as u32;
                    *code
                        .entry(frame_type[m[m.len() / 2]] as u64)
                        .or_insert(next)
                })
                .collect();
            let by = if in_context {
                format!("{col} in context")
            } else {
                col.to_string()
            };
            (ty, by)
        }
        None => {
            let ty = value
                .iter()
                .map(|v| {
                    let next = code.len() as u32;
                    *code.entry(v.to_bits()).or_insert(next)
                })
                .collect();
            (ty, format!("{name} value"))
        }
    };
    if code.len() < 2 {
        return Err(input(format!(
            "{}: task '{name}': the control types ({by}) take a single value over its items; name another column with --control-by, or use --no-control",
            cap.dir.display()
        )));
    }
    Ok((item_type, by, code.len()))
}

/// One continuous task's predictions on one layer, gathered fold by fold (test items in fold
/// order).
#[derive(Default)]
pub(super) struct RegressScores {
    truth: Vec<f64>,
    pred: Vec<f64>,
    baseline: Vec<f64>,
    control_truth: Vec<f64>,
    control_pred: Vec<f64>,
    fold_r2: Vec<f64>,
    alphas: Vec<f64>,
    cluster: Vec<u32>,
    test_frames: Vec<usize>,
    n_train: usize,
}

/// Fit and score task `p` (number `ti`) on one layer, every fold.
pub(super) fn probe_task(
    rows: &LayerRows,
    p: &RegressPlan,
    ti: usize,
    opts: &ProbeOptions,
    seed: u64,
) -> Result<RegressScores, ProbeError> {
    let mut s = RegressScores::default();
    for (fi, f) in p.folds.iter().enumerate() {
        probe_fold(rows, p, f, (ti, fi), opts, seed, &mut s)?;
        s.n_train += f.train.len();
    }
    Ok(s)
}

/// The inner validation split of the training rows: whole groups, shuffled with `seed`, held
/// out until about `fraction` of the rows are; never every group. None with one group.
fn inner_split(groups: &[u32], fraction: f64, seed: u64) -> Option<(Vec<usize>, Vec<usize>)> {
    let mut ids: Vec<u32> = groups.to_vec();
    ids.sort_unstable();
    ids.dedup();
    if ids.len() < 2 {
        return None;
    }
    let pos = |g: u32| ids.binary_search(&g).unwrap_or(0);
    let mut size = vec![0usize; ids.len()];
    for &g in groups {
        size[pos(g)] += 1;
    }
    let mut order: Vec<usize> = (0..ids.len()).collect();
    order.shuffle(&mut ChaCha8Rng::seed_from_u64(seed));
    let target = (fraction * groups.len() as f64).ceil() as usize;
    let mut in_val = vec![false; ids.len()];
    let mut taken = 0usize;
    for &gi in order.iter().take(ids.len() - 1) {
        if taken >= target {
            break;
        }
        in_val[gi] = true;
        taken += size[gi];
    }
    let (tr, va): (Vec<usize>, Vec<usize>) =
        (0..groups.len()).partition(|&i| !in_val[pos(groups[i])]);
    (!va.is_empty() && !tr.is_empty()).then_some((tr, va))
}

/// The penalty per item chosen from `opts.alphas` on the inner split (the ridge penalty is
/// this times the rows it is fitted on): the first best validation R², strongest first; the
/// middle of the grid when there is nothing to search.
fn choose_alpha(
    x: &ndarray::Array2<f32>,
    y: &[f64],
    groups: &[u32],
    opts: &ProbeOptions,
    seed: u64,
) -> f64 {
    let mut alphas = opts.alphas.clone();
    alphas.sort_by(|a, b| b.total_cmp(a));
    let middle = alphas[alphas.len() / 2];
    if alphas.len() < 2 {
        return middle;
    }
    let Some((tr, va)) = inner_split(groups, opts.inner_fraction, mix(seed, 1)) else {
        return middle;
    };
    let take = |rows: &[usize]| x.select(ndarray::Axis(0), rows);
    let (xa, xv) = (take(&tr), take(&va));
    let ya: Vec<f64> = tr.iter().map(|&i| y[i]).collect();
    let yv: Vec<f64> = va.iter().map(|&i| y[i]).collect();
    let grid: Vec<f64> = alphas.iter().map(|a| a * ya.len() as f64).collect();
    let (_, points) = ridge::search(&xa.view(), &ya, &xv.view(), &yv, &grid);
    let mut best = (f64::NEG_INFINITY, middle);
    for (p, &a) in points.iter().zip(&alphas) {
        if p.validation_r2 > best.0 {
            best = (p.validation_r2, a);
        }
    }
    best.1
}

/// Fit and score the ridge (and its control) on one fold; `tf` is (task, fold), numbering the
/// seeds as the classifier's folds do.
fn probe_fold(
    rows: &LayerRows,
    p: &RegressPlan,
    f: &Fold,
    tf: (usize, usize),
    opts: &ProbeOptions,
    seed: u64,
    s: &mut RegressScores,
) -> Result<(), ProbeError> {
    let tfn = tf.0 * 1000 + tf.1;
    let xtr = rows.features(&p.items, &f.train);
    let xte = rows.features(&p.items, &f.test);
    let ytr: Vec<f64> = f.train.iter().map(|&i| p.value[i]).collect();
    let yte: Vec<f64> = f.test.iter().map(|&i| p.value[i]).collect();
    let groups: Vec<u32> = f
        .train
        .iter()
        .map(|&i| match p.kind {
            SplitKind::Speaker => p.items.speaker[i],
            SplitKind::Utterance => p.items.utt[i],
            _ => i as u32,
        })
        .collect();
    let fseed = mix(seed, 300 + tfn as u64);
    let alpha = choose_alpha(&xtr, &ytr, &groups, opts, fseed);
    let penalty = alpha * ytr.len() as f64;
    let fit = |y: &[f64]| {
        ridge::fit_predict(&xtr.view(), y, &xte.view(), penalty).ok_or_else(|| {
            ProbeError::Internal(format!(
                "task '{}': the ridge system is not positive definite",
                p.name
            ))
        })
    };
    let pred = fit(&ytr)?;
    s.fold_r2.push(ridge::r2(&yte, &pred));
    s.alphas.push(alpha);
    let train_mean = ytr.iter().sum::<f64>() / ytr.len().max(1) as f64;
    s.baseline
        .extend(std::iter::repeat_n(train_mean, yte.len()));
    s.truth.extend_from_slice(&yte);
    s.pred.extend(pred);
    for &i in &f.test {
        s.cluster.push(p.items.speaker[i]);
        s.test_frames.push(p.items.members(i)[0]);
    }
    if let Some(types) = &p.types {
        // One value per type, drawn once per task with the seed from the column's values on
        // the task's items (as the classifier's control draws its labels once per task from
        // the class frequencies), so every fold sees the same control; the same ridge (same
        // penalty) is fitted to it (Hewitt & Liang 2019). Drawing per fold instead gives each
        // fold its own control mean, which the pooled R² would count as explained.
        let drawn = control_values(types, &p.value, mix(seed, 400 + (tf.0 * 1000) as u64));
        let ctr: Vec<f64> = f.train.iter().map(|&i| drawn[types[i] as usize]).collect();
        let cte: Vec<f64> = f.test.iter().map(|&i| drawn[types[i] as usize]).collect();
        s.control_pred.extend(fit(&ctr)?);
        s.control_truth.extend(cte);
    }
    Ok(())
}

/// One value per control type, drawn with `seed` from `value` (every item's value).
fn control_values(types: &[u32], value: &[f64], seed: u64) -> Vec<f64> {
    let n_types = types.iter().map(|&t| t as usize + 1).max().unwrap_or(0);
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    (0..n_types)
        .map(|_| value[rng.random_range(0..value.len())])
        .collect()
}

impl RegressScores {
    /// The pooled test predictions, for probe deltas.
    pub(super) fn predictions(&self, p: &RegressPlan, layer: usize) -> TaskPredictions {
        TaskPredictions {
            layer,
            task: p.name.clone(),
            test_frames: self.test_frames.clone(),
            correct: vec![],
            cluster: self.cluster.clone(),
            n_train: self.mean_train(p),
            truth: self.truth.clone(),
            pred: self.pred.clone(),
        }
    }

    fn mean_train(&self, p: &RegressPlan) -> usize {
        (self.n_train as f64 / p.folds.len().max(1) as f64).round() as usize
    }

    /// The record of task `p` (number `ti`) on layer `layer`: pooled R², RMSE and r, the
    /// cluster-bootstrap interval of R² over test speakers, the baseline and the control.
    pub(super) fn record(
        &self,
        p: &RegressPlan,
        layer: usize,
        ti: usize,
        opts: &ProbeOptions,
        seed: u64,
    ) -> ProbeRecord {
        let boot_seed = mix(seed, 500 + ti as u64);
        let (lo, hi) = bootstrap::cluster_r2_interval(
            &self.truth,
            &self.pred,
            &self.cluster,
            opts.bootstrap,
            0.95,
            boot_seed,
        );
        let r2 = ridge::r2(&self.truth, &self.pred);
        let control_r2 = if p.types.is_some() {
            ridge::r2(&self.control_truth, &self.control_pred)
        } else {
            f64::NAN
        };
        let mut alphas = self.alphas.clone();
        alphas.sort_by(|a, b| a.total_cmp(b));
        ProbeRecord {
            layer,
            task: p.name.clone(),
            kind: "continuous".into(),
            pooling: opts.pooling.name().to_string(),
            split: p.kind.name().to_string(),
            n_train: self.mean_train(p),
            n_test: self.truth.len(),
            n_classes: 0,
            accuracy: f64::NAN,
            ci_low: lo,
            ci_high: hi,
            macro_f1: f64::NAN,
            balanced_accuracy: f64::NAN,
            majority_baseline: f64::NAN,
            control_accuracy: f64::NAN,
            selectivity: r2 - control_r2,
            control_by: p.setup.control_by.clone(),
            c: f64::NAN,
            folds: p.folds.len(),
            accuracy_sd: None,
            control_accuracy_sd: None,
            mdl_status: "off".into(),
            mdl_items: 0,
            mdl_uniform_bits: f64::NAN,
            mdl_online_bits: f64::NAN,
            mdl_compression: f64::NAN,
            r2,
            rmse: ridge::rmse(&self.truth, &self.pred),
            pearson_r: ridge::pearson_r(&self.truth, &self.pred),
            baseline_rmse: ridge::rmse(&self.truth, &self.baseline),
            control_r2,
            alpha: alphas.get(alphas.len() / 2).copied().unwrap_or(f64::NAN),
            r2_sd: fold_sd(&self.fold_r2),
        }
    }
}

/// Sample standard deviation over folds (NaN for one fold).
fn fold_sd(v: &[f64]) -> f64 {
    if v.len() < 2 {
        return f64::NAN;
    }
    let m = v.iter().sum::<f64>() / v.len() as f64;
    (v.iter().map(|x| (x - m) * (x - m)).sum::<f64>() / (v.len() - 1) as f64).sqrt()
}

/// Each continuous task's best layer: the first with the highest R² (NaN passed over).
pub fn best_fits(records: &[ProbeRecord], tasks: &[TaskSetup]) -> Vec<BestFit> {
    tasks
        .iter()
        .filter(|t| t.kind == "continuous")
        .filter_map(|t| {
            let br = records
                .iter()
                .filter(|r| r.task == t.task && r.is_continuous())
                .fold(None, |acc: Option<&ProbeRecord>, r| match acc {
                    Some(a) if a.r2 >= r.r2 || r.r2.is_nan() => Some(a),
                    _ => Some(r),
                })?;
            Some(BestFit {
                task: t.task.clone(),
                layer: br.layer,
                r2: br.r2,
                ci_low: br.ci_low,
                ci_high: br.ci_high,
            })
        })
        .collect()
}

/// Where each continuous task's R² fades ([`FitFall`]), in the order the tasks first appear
/// in `records`. Reads records only, so a run over every layer and the merge of runs over one
/// layer each give the same answer.
pub fn r2_half_falls(records: &[ProbeRecord]) -> Vec<FitFall> {
    let mut tasks: Vec<&str> = Vec::new();
    for r in records.iter().filter(|r| r.is_continuous()) {
        if !tasks.contains(&r.task.as_str()) {
            tasks.push(&r.task);
        }
    }
    tasks
        .into_iter()
        .filter_map(|t| r2_half_fall(records, t))
        .collect()
}

/// [`FitFall`] of one task: the peak is the first layer of the highest finite R², the base the
/// control R² there (0 when the control did not run), the level half way between them, and
/// the fall the first later layer below that level. The control, not the lowest R² after the
/// peak as for speaker accuracy, is the floor: R² has a natural no-information level, and a
/// lowest-after-peak floor would mark any decline, however small, as a fall (common practice
/// for a readable marker, not a test). None with fewer than two finite R².
pub fn r2_half_fall(records: &[ProbeRecord], task: &str) -> Option<FitFall> {
    let mut pts: Vec<&ProbeRecord> = records
        .iter()
        .filter(|r| r.task == task && r.is_continuous() && r.r2.is_finite())
        .collect();
    pts.sort_by_key(|r| r.layer);
    if pts.len() < 2 {
        return None;
    }
    let mut peak = 0;
    for (i, r) in pts.iter().enumerate() {
        if r.r2 > pts[peak].r2 {
            peak = i;
        }
    }
    let top = pts[peak];
    let base_is_control = top.control_r2.is_finite();
    let base_r2 = if base_is_control { top.control_r2 } else { 0.0 };
    let half_level = top.r2 - (top.r2 - base_r2) / 2.0;
    Some(FitFall {
        task: task.to_string(),
        peak_layer: top.layer,
        peak_r2: top.r2,
        base_r2,
        base_is_control,
        half_level,
        below_half_layer: pts[peak + 1..]
            .iter()
            .find(|r| r.r2 < half_level)
            .map(|r| r.layer),
        last_layer: pts[pts.len() - 1].layer,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_inner_split_holds_out_whole_groups_and_never_all() {
        let groups: Vec<u32> = (0..40).map(|i| i / 10).collect();
        let (tr, va) = inner_split(&groups, 0.2, 5).unwrap();
        assert_eq!(tr.len() + va.len(), 40);
        let gv: std::collections::BTreeSet<u32> = va.iter().map(|&i| groups[i]).collect();
        assert!(tr.iter().all(|&i| !gv.contains(&groups[i])));
        assert!(!tr.is_empty() && !va.is_empty());
        let (tr, _) = inner_split(&groups, 0.99, 5).unwrap();
        assert!(!tr.is_empty(), "one group always stays for training");
        assert!(inner_split(&[3, 3, 3], 0.2, 5).is_none());
    }
}
