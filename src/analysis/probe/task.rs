//! One task on one layer, fold by fold: the probe, the majority baseline, the control task
//! and (with `--mdl`) the online code, pooled into one record. Accuracy, macro-F1, balanced
//! accuracy, the baseline and the control accuracy are computed over every test item of every
//! fold together (each item is tested once), so they agree with the cluster-bootstrap interval
//! drawn from the same pooled items; `accuracy_sd` is the spread of the per-fold accuracies.

use crate::analysis::seed::mix;
use crate::records::probe::{ProbeRecord, TaskPredictions};
use crate::select::split::{Fold, SplitKind};

use super::lbfgs::LbfgsOptions;
use super::plan::TaskPlan;
use super::{bootstrap, fit_predict, mdl, metrics, LayerRows, ProbeError, ProbeOptions};

fn sd(v: &[f64]) -> Option<f64> {
    (v.len() > 1).then(|| {
        let m = v.iter().sum::<f64>() / v.len() as f64;
        (v.iter().map(|x| (x - m) * (x - m)).sum::<f64>() / (v.len() - 1) as f64).sqrt()
    })
}

/// One task's scores on one layer, gathered fold by fold (test items in fold order).
#[derive(Default)]
pub(super) struct TaskScores {
    accs: Vec<f64>,
    ctrl_accs: Vec<f64>,
    cs: Vec<f64>,
    truth: Vec<u32>,
    pred: Vec<u32>,
    majority_hits: usize,
    control_hits: usize,
    cluster: Vec<u32>,
    test_frames: Vec<usize>,
    n_train: usize,
    mdl: Option<Result<mdl::OnlineCode, String>>,
}

/// Probe task `p` (number `ti`) on one layer, every fold.
pub(super) fn probe_task(
    rows: &LayerRows,
    p: &TaskPlan,
    ti: usize,
    opts: &ProbeOptions,
    seed: u64,
) -> Result<TaskScores, ProbeError> {
    let mut s = TaskScores::default();
    for (fi, f) in p.folds.iter().enumerate() {
        probe_fold(rows, p, f, (ti, fi), opts, seed, &mut s)?;
        s.n_train += f.train.len();
    }
    Ok(s)
}

/// Train and score the probe (and the control, and on the first fold the online code) on one
/// fold; `tf` is (task, fold), numbering the seeds.
fn probe_fold(
    rows: &LayerRows,
    p: &TaskPlan,
    f: &Fold,
    tf: (usize, usize),
    opts: &ProbeOptions,
    seed: u64,
    s: &mut TaskScores,
) -> Result<(), ProbeError> {
    let k = p.classes.len();
    let tfn = tf.0 * 1000 + tf.1;
    let xtr = rows.features(&p.items, &f.train);
    let xte = rows.features(&p.items, &f.test);
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
    let fseed = mix(seed, 300 + tfn as u64);
    let fit = fit_predict(xtr.view(), &ytr, k, xte.view(), &groups, opts, fseed)?;
    s.accs.push(metrics::accuracy(&yte, &fit.pred));
    let m = metrics::majority_class(&ytr, k);
    s.majority_hits += yte.iter().filter(|&&c| c == m).count();
    s.cs.push(fit.c);
    s.truth.extend_from_slice(&yte);
    s.pred.extend_from_slice(&fit.pred);
    for &i in &f.test {
        s.cluster.push(cluster_of(p, i));
        s.test_frames.push(p.items.members(i)[0]);
    }
    if let Some(ctl) = &p.control {
        // The same probe on the control labels, penalty included (Hewitt & Liang 2019 compare
        // one probe configuration on both tasks), so no penalty search here.
        let copts = ProbeOptions {
            alphas: if fit.alpha.is_finite() {
                vec![fit.alpha]
            } else {
                opts.alphas.clone()
            },
            ..opts.clone()
        };
        let ctr: Vec<u32> = f.train.iter().map(|&i| ctl[i]).collect();
        let cte: Vec<u32> = f.test.iter().map(|&i| ctl[i]).collect();
        let cfit = fit_predict(
            xtr.view(),
            &ctr,
            k,
            xte.view(),
            &groups,
            &copts,
            fseed ^ 0x5a5a,
        )?;
        s.ctrl_accs.push(metrics::accuracy(&cte, &cfit.pred));
        s.control_hits += cte.iter().zip(&cfit.pred).filter(|(a, b)| a == b).count();
    }
    if opts.mdl && tf.1 == 0 {
        s.mdl = Some(online_code(
            &xtr,
            &ytr,
            k,
            fit.alpha,
            opts,
            mix(seed, 900 + tf.0 as u64),
        ));
    }
    Ok(())
}

/// The online code of the first fold's training side, items in a seeded order, with the
/// penalty the probe chose there; an error message when it cannot be computed.
fn online_code(
    x: &ndarray::Array2<f32>,
    y: &[u32],
    k: usize,
    alpha: f64,
    opts: &ProbeOptions,
    seed: u64,
) -> Result<mdl::OnlineCode, String> {
    if let Some(why) = mdl::skip_reason(y.len()) {
        return Err(why);
    }
    let alpha = if alpha.is_finite() {
        alpha
    } else {
        opts.alphas[opts.alphas.len() / 2]
    };
    let mut order: Vec<usize> = (0..y.len()).collect();
    rand::seq::SliceRandom::shuffle(
        order.as_mut_slice(),
        &mut <rand_chacha::ChaCha8Rng as rand::SeedableRng>::seed_from_u64(seed),
    );
    let lb = LbfgsOptions {
        max_iter: opts.max_iter,
        gtol: opts.tol,
        ..Default::default()
    };
    mdl::online_code(x.view(), y, k, &order, alpha, &lb)
}

/// The bootstrap cluster of item `i`: its speaker, or its utterance for the speaker task.
pub(super) fn cluster_of(p: &TaskPlan, i: usize) -> u32 {
    if p.speaker_task {
        p.items.utt[i]
    } else {
        p.items.speaker[i]
    }
}

impl TaskScores {
    /// Confusion counts over every test item (true class × predicted class).
    pub(super) fn confusion(&self, k: usize) -> Vec<Vec<u64>> {
        metrics::confusion(&self.truth, &self.pred, k)
    }

    /// The pooled test predictions, for probe deltas.
    pub(super) fn predictions(&self, p: &TaskPlan, layer: usize) -> TaskPredictions {
        TaskPredictions {
            layer,
            task: p.name.clone(),
            test_frames: self.test_frames.clone(),
            correct: self
                .truth
                .iter()
                .zip(&self.pred)
                .map(|(a, b)| a == b)
                .collect(),
            cluster: self.cluster.clone(),
            n_train: self.mean_train(p),
            truth: vec![],
            pred: vec![],
        }
    }

    fn mean_train(&self, p: &TaskPlan) -> usize {
        (self.n_train as f64 / p.folds.len().max(1) as f64).round() as usize
    }

    /// The record of task `p` (number `ti`) on layer `layer`: pooled scores, the bootstrap
    /// interval over all test items, the fold spread and the median C.
    pub(super) fn record(
        &self,
        p: &TaskPlan,
        layer: usize,
        ti: usize,
        opts: &ProbeOptions,
        seed: u64,
    ) -> ProbeRecord {
        let k = p.classes.len();
        let correct: Vec<bool> = self
            .truth
            .iter()
            .zip(&self.pred)
            .map(|(a, b)| a == b)
            .collect();
        let boot_seed = mix(seed, 500 + ti as u64);
        let (lo, hi) =
            bootstrap::cluster_interval(&correct, &self.cluster, opts.bootstrap, 0.95, boot_seed);
        let n_test = self.truth.len();
        let share = |hits: usize| hits as f64 / n_test.max(1) as f64;
        let accuracy = metrics::accuracy(&self.truth, &self.pred);
        let control_on = p.control.is_some();
        let control_accuracy = if control_on {
            share(self.control_hits)
        } else {
            f64::NAN
        };
        let mut cs_sorted = self.cs.clone();
        cs_sorted.sort_by(|a, b| a.total_cmp(b));
        let mut r = ProbeRecord {
            layer,
            task: p.name.clone(),
            kind: "categorical".into(),
            pooling: opts.pooling.name().to_string(),
            split: p.kind.name().to_string(),
            n_train: self.mean_train(p),
            n_test,
            n_classes: k,
            accuracy,
            ci_low: lo,
            ci_high: hi,
            macro_f1: metrics::macro_f1(&self.truth, &self.pred, k),
            balanced_accuracy: metrics::balanced_accuracy(&self.truth, &self.pred, k),
            majority_baseline: share(self.majority_hits),
            control_accuracy,
            selectivity: accuracy - control_accuracy,
            control_by: p.setup.control_by.clone(),
            c: cs_sorted
                .get(cs_sorted.len() / 2)
                .copied()
                .unwrap_or(f64::NAN),
            folds: p.folds.len(),
            accuracy_sd: sd(&self.accs),
            control_accuracy_sd: if control_on {
                sd(&self.ctrl_accs)
            } else {
                None
            },
            mdl_status: "off".into(),
            mdl_items: 0,
            mdl_uniform_bits: f64::NAN,
            mdl_online_bits: f64::NAN,
            mdl_compression: f64::NAN,
            r2: f64::NAN,
            rmse: f64::NAN,
            pearson_r: f64::NAN,
            baseline_rmse: f64::NAN,
            control_r2: f64::NAN,
            alpha: f64::NAN,
            r2_sd: f64::NAN,
        };
        match &self.mdl {
            Some(Ok(c)) => {
                r.mdl_status = "computed".into();
                r.mdl_items = c.items;
                r.mdl_uniform_bits = c.uniform_bits;
                r.mdl_online_bits = c.online_bits;
                r.mdl_compression = c.compression;
            }
            Some(Err(why)) => r.mdl_status = format!("skipped: {why}"),
            None => {}
        }
        r
    }
}
