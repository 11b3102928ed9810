//! One probe on given matrices ([`fit_predict`]): standardise with training statistics, choose
//! the penalty on an inner validation split grouped like the outer one ([`inner_split`]),
//! refit on the whole training side and predict the test rows.

use ndarray::{Array2, ArrayView2, Axis};
use rand::seq::SliceRandom;
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use serde::Serialize;

use crate::analysis::seed::mix;

use super::lbfgs::LbfgsOptions;
use super::softmax::{self, FitSettings, PackedRows, Standardizer};
use super::{metrics, ProbeError, ProbeOptions};

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

/// The rows `rows` of `x`, standardised.
fn take_rows(x: &ArrayView2<f32>, rows: &[usize], std: &Standardizer) -> Array2<f32> {
    let mut t = x.select(Axis(0), rows);
    std.apply(&mut t);
    t
}

/// Class probabilities of the rows of `x`, standardised by `std` a block of rows at a time
/// (no standardised copy of the whole test side is held).
fn predict_rows(
    model: &softmax::SoftmaxModel,
    x: &ArrayView2<f32>,
    std: &Standardizer,
) -> Array2<f32> {
    const ROWS: usize = 4096;
    let mut out = Array2::<f32>::zeros((x.nrows(), model.b.len()));
    for (xb, mut ob) in x
        .axis_chunks_iter(Axis(0), ROWS)
        .zip(out.axis_chunks_iter_mut(Axis(0), ROWS))
    {
        let mut t = xb.to_owned();
        std.apply(&mut t);
        ob.assign(&model.predict_proba(&t.view()));
    }
    out
}

/// The mean and scale of `std`, as the packing takes them.
fn stats(std: &Standardizer) -> Option<(&[f32], &[f32])> {
    Some((&std.mean, &std.scale))
}

/// Refuse inputs that do not fit together (row counts, widths, label codes, penalty grid).
fn check_inputs(
    x_train: &ArrayView2<f32>,
    y_train: &[u32],
    n_classes: usize,
    x_test: &ArrayView2<f32>,
    inner_groups: &[u32],
    opts: &ProbeOptions,
) -> Result<(), ProbeError> {
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
    Ok(())
}

/// The classes present in training (sorted codes) and the training labels renumbered to
/// `0..present.len()`.
fn present_classes(y_train: &[u32], n_classes: usize) -> (Vec<u32>, Vec<u32>) {
    let mut present: Vec<u32> = y_train.to_vec();
    present.sort_unstable();
    present.dedup();
    let mut remap = vec![u32::MAX; n_classes];
    for (i, &c) in present.iter().enumerate() {
        remap[c as usize] = i as u32;
    }
    let y: Vec<u32> = y_train.iter().map(|&c| remap[c as usize]).collect();
    (present, y)
}

/// The fit when training holds fewer than two classes: every test row gets that class.
fn single_class_fit(present: &[u32], n_test: usize, n_classes: usize) -> Fit {
    let only = present.first().copied().unwrap_or(0);
    let mut proba = Array2::<f32>::zeros((n_test, n_classes));
    if n_classes > 0 {
        proba.column_mut(only as usize).fill(1.0);
    }
    Fit {
        pred: vec![only; n_test],
        proba,
        c: f64::NAN,
        alpha: f64::NAN,
        search: vec![],
        iterations: 0,
        converged: true,
    }
}

/// The penalty chosen for the final fit, the search that chose it and the parameters of the
/// chosen inner fit (a warm start for the final fit).
struct PenaltyChoice {
    alpha: f64,
    search: Vec<SearchPoint>,
    warm: Option<Vec<f64>>,
}

/// Choose the penalty from `opts.alphas` (strongest first) on the inner split of the
/// training rows `x` (standardised by `std`); the middle of the grid when there is nothing to
/// search.
#[allow(clippy::too_many_arguments)]
fn choose_penalty(
    x: &ArrayView2<f32>,
    std: &Standardizer,
    y: &[u32],
    k: usize,
    inner_groups: &[u32],
    opts: &ProbeOptions,
    lb: &LbfgsOptions,
    seed: u64,
) -> PenaltyChoice {
    let mut alphas = opts.alphas.clone();
    alphas.sort_by(|a, b| b.total_cmp(a));
    let mut choice = PenaltyChoice {
        alpha: alphas[alphas.len() / 2],
        search: Vec::new(),
        warm: None,
    };
    if alphas.len() > 1 {
        if let Some((tr, va)) = inner_split(inner_groups, y, k, opts.inner_fraction, mix(seed, 1)) {
            choice = search_grid(x, std, y, k, (&tr, &va), &alphas, lb);
        }
    }
    choice
}

/// Fit every penalty of `alphas` (strongest first, each warm-started from the previous one)
/// on the inner training rows `tr` and score it on the validation rows `va`; the first best
/// validation accuracy wins. The inner training rows are packed (standardised) once for the
/// whole grid.
fn search_grid(
    x: &ArrayView2<f32>,
    std: &Standardizer,
    y: &[u32],
    k: usize,
    (tr, va): (&[usize], &[usize]),
    alphas: &[f64],
    lb: &LbfgsOptions,
) -> PenaltyChoice {
    let xa = PackedRows::pack_rows(x, Some(tr), stats(std));
    let ya: Vec<u32> = tr.iter().map(|&i| y[i]).collect();
    let xv = take_rows(x, va, std);
    let yv: Vec<u32> = va.iter().map(|&i| y[i]).collect();
    let mut search = Vec::new();
    let mut prev: Option<Vec<f64>> = None;
    let mut best = (-1.0f64, 0usize);
    let mut params_at = Vec::new();
    for (ai, &a) in alphas.iter().enumerate() {
        let c = 1.0 / (a * ya.len() as f64);
        let settings = FitSettings {
            c,
            lbfgs: lb.clone(),
        };
        let m = softmax::fit_packed(&xa, &ya, k, &settings, prev.as_deref());
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
    PenaltyChoice {
        alpha: alphas[best.1],
        search,
        warm: Some(std::mem::take(&mut params_at[best.1])),
    }
}

/// Spread probabilities over the present classes `p` (rows × present) to all `n_classes`
/// columns, and predict each row's class code.
fn to_all_classes(p: &Array2<f32>, present: &[u32], n_classes: usize) -> (Vec<u32>, Array2<f32>) {
    let mut proba = Array2::<f32>::zeros((p.nrows(), n_classes));
    for (j, &cls) in present.iter().enumerate() {
        proba.column_mut(cls as usize).assign(&p.column(j));
    }
    let pred = softmax::argmax_rows(&p.view())
        .into_iter()
        .map(|j| present[j as usize])
        .collect();
    (pred, proba)
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
    check_inputs(&x_train, y_train, n_classes, &x_test, inner_groups, opts)?;
    let n = x_train.nrows();
    // Train only on the classes present; others get probability 0.
    let (present, y) = present_classes(y_train, n_classes);
    let k = present.len();
    if k < 2 {
        return Ok(single_class_fit(&present, x_test.nrows(), n_classes));
    }
    let std = Standardizer::fit(&x_train);
    let lb = LbfgsOptions {
        max_iter: opts.max_iter,
        gtol: opts.tol,
        ..Default::default()
    };
    let choice = choose_penalty(&x_train, &std, &y, k, inner_groups, opts, &lb, seed);
    let c = 1.0 / (choice.alpha * n as f64);
    // packed and standardised in one copy, after the search's copies are gone
    let xs = PackedRows::pack(&x_train, stats(&std));
    let model = softmax::fit_packed(
        &xs,
        &y,
        k,
        &FitSettings { c, lbfgs: lb },
        choice.warm.as_deref(),
    );
    let (pred, proba) = to_all_classes(&predict_rows(&model, &x_test, &std), &present, n_classes);
    Ok(Fit {
        pred,
        proba,
        c,
        alpha: choice.alpha,
        search: choice.search,
        iterations: model.iterations,
        converged: model.converged,
    })
}
