//! Multinomial logistic regression (softmax) with an L2 penalty on the weights, not on the
//! intercepts. Objective, as in scikit-learn's LogisticRegression(multinomial, lbfgs) and
//! linfa-logistic's MultiLogisticRegression (alpha = 1/C):
//!
//!   L(W, b) = Σ_i −log softmax(x_i W + b)[y_i] + ||W||² / (2C)
//!
//! minimised by our L-BFGS ([`super::lbfgs`]) on L/n, the scaling scikit-learn uses for its
//! tolerance. The training matrix is packed once per fit ([`PackedRows`]); each evaluation is one
//! pass over it, scores and gradient of a panel of rows computed while it is in cache, in f32
//! over fixed blocks of rows in parallel; block partials are summed in f64 in block order, so
//! the result does not depend on the number of threads.

use ndarray::{s, Array2, ArrayView2, Axis};
use rayon::prelude::*;

use super::lbfgs::{minimize, LbfgsOptions};
use crate::analysis::linalg::exp_f32;

mod kernel;
pub use kernel::{cross_entropy_grad_packed, PackedRows};

/// Rows per block of the fused objective/gradient pass.
const CHUNK: usize = 1024;

/// Mean and scale per feature, from the training side only (population standard deviation;
/// constant features keep scale 1, as scikit-learn's StandardScaler does).
#[derive(Clone, Debug)]
pub struct Standardizer {
    /// Feature means.
    pub mean: Vec<f32>,
    /// Feature standard deviations (1 where constant).
    pub scale: Vec<f32>,
}

impl Standardizer {
    /// Statistics of the rows of `x` (f64 accumulation, blocked and deterministic).
    pub fn fit(x: &ArrayView2<f32>) -> Standardizer {
        let n = x.nrows().max(1) as f64;
        let mean = crate::analysis::linalg::col_means(x);
        let d = x.ncols();
        let parts: Vec<Vec<f64>> = x
            .axis_chunks_iter(Axis(0), CHUNK * 4)
            .into_par_iter()
            .map(|blk| {
                let mut s = vec![0f64; d];
                for row in blk.outer_iter() {
                    for ((acc, &v), m) in s.iter_mut().zip(row.iter()).zip(&mean) {
                        let c = v as f64 - m;
                        *acc += c * c;
                    }
                }
                s
            })
            .collect();
        let mut var = vec![0f64; d];
        for p in parts {
            for (a, b) in var.iter_mut().zip(p) {
                *a += b;
            }
        }
        let scale = var
            .iter()
            .zip(&mean)
            .map(|(v, m)| {
                let sd = (v / n).sqrt();
                if sd > 1e-7 * m.abs().max(1e-30) && sd > 0.0 {
                    sd as f32
                } else {
                    1.0
                }
            })
            .collect();
        Standardizer {
            mean: mean.iter().map(|&m| m as f32).collect(),
            scale,
        }
    }

    /// Standardise `x` in place.
    pub fn apply(&self, x: &mut Array2<f32>) {
        x.axis_chunks_iter_mut(Axis(0), CHUNK)
            .into_par_iter()
            .for_each(|mut blk| {
                for mut row in blk.outer_iter_mut() {
                    for ((v, m), s) in row.iter_mut().zip(&self.mean).zip(&self.scale) {
                        *v = (*v - m) / s;
                    }
                }
            });
    }
}

/// A fitted softmax model on standardised features.
#[derive(Clone, Debug)]
pub struct SoftmaxModel {
    /// Weights, features × classes.
    pub w: Array2<f32>,
    /// Intercepts, one per class.
    pub b: Vec<f32>,
    /// The parameters as the optimiser sees them (W row-major, then b), for warm starts.
    pub params: Vec<f64>,
    /// Value of the objective Σ CE + ||W||²/(2C) at the solution.
    pub objective: f64,
    /// L-BFGS iterations.
    pub iterations: usize,
    /// Objective evaluations (each one pass over the data).
    pub evaluations: usize,
    /// Whether a stopping rule was met before the iteration cap.
    pub converged: bool,
}

/// Settings of one fit.
#[derive(Clone, Debug)]
pub struct FitSettings {
    /// Inverse penalty strength C (scikit-learn's meaning).
    pub c: f64,
    /// Optimiser settings.
    pub lbfgs: LbfgsOptions,
}

fn split_params(p: &[f64], d: usize, k: usize) -> (Array2<f32>, Vec<f32>) {
    let w = Array2::from_shape_fn((d, k), |(i, j)| p[i * k + j] as f32);
    let b = p[d * k..].iter().map(|&v| v as f32).collect();
    (w, b)
}

/// Σ_i cross-entropy and its gradient (W part row-major, then b) at the given parameters.
/// Returns the summed cross-entropy (no penalty). Two matrix products per block of rows; the
/// fit uses the one-pass [`cross_entropy_grad_packed`], and this is its check.
pub fn cross_entropy_grad(
    x: &ArrayView2<f32>,
    y: &[u32],
    k: usize,
    params: &[f64],
    grad: &mut [f64],
) -> f64 {
    let (n, d) = x.dim();
    let (w, b) = split_params(params, d, k);
    let nb = n.div_ceil(CHUNK);
    let parts: Vec<(f64, Array2<f32>, Vec<f64>)> = (0..nb)
        .into_par_iter()
        .map(|bi| {
            let lo = bi * CHUNK;
            let hi = (lo + CHUNK).min(n);
            let xb = x.slice(s![lo..hi, ..]);
            let mut z = Array2::<f32>::zeros((hi - lo, k));
            ndarray::linalg::general_mat_mul(1.0, &xb, &w, 0.0, &mut z);
            let mut ce = 0f64;
            let mut gb = vec![0f64; k];
            // z is freshly allocated in standard layout, so its rows are contiguous
            let zs = z.as_slice_mut().expect("standard layout");
            for (row, &yi) in zs.chunks_exact_mut(k).zip(&y[lo..hi]) {
                let mut m = f32::NEG_INFINITY;
                for (v, bj) in row.iter_mut().zip(&b) {
                    *v += bj;
                    m = m.max(*v);
                }
                let zy = row[yi as usize];
                // a pure map (vectorised), then the f64 sum
                for v in row.iter_mut() {
                    *v = exp_f32(*v - m);
                }
                let sum: f64 = row.iter().map(|&v| v as f64).sum();
                ce += m as f64 + sum.ln() - zy as f64;
                let inv = (1.0 / sum) as f32;
                for (j, v) in row.iter_mut().enumerate() {
                    let gv = *v * inv - (j == yi as usize) as u8 as f32;
                    gb[j] += gv as f64;
                    *v = gv;
                }
            }
            let mut gw = Array2::<f32>::zeros((d, k));
            ndarray::linalg::general_mat_mul(1.0, &xb.t(), &z, 0.0, &mut gw);
            (ce, gw, gb)
        })
        .collect();
    grad.iter_mut().for_each(|g| *g = 0.0);
    let mut ce = 0f64;
    for (c, gw, gb) in parts {
        ce += c;
        for (g, v) in grad[..d * k].iter_mut().zip(gw.iter()) {
            *g += *v as f64;
        }
        for (g, v) in grad[d * k..].iter_mut().zip(gb) {
            *g += v;
        }
    }
    ce
}

/// Fit on standardised `x` with labels `y` in `0..k`, optionally warm-started. Packs `x`
/// once ([`PackedRows`]) and runs [`fit_packed`].
pub fn fit(
    x: &ArrayView2<f32>,
    y: &[u32],
    k: usize,
    settings: &FitSettings,
    init: Option<&[f64]>,
) -> SoftmaxModel {
    fit_packed(&PackedRows::pack(x, None), y, k, settings, init)
}

/// Fit on packed standardised rows `x` with labels `y` in `0..k`, optionally warm-started:
/// each objective evaluation is one pass over `x` ([`cross_entropy_grad_packed`]).
pub fn fit_packed(
    x: &PackedRows,
    y: &[u32],
    k: usize,
    settings: &FitSettings,
    init: Option<&[f64]>,
) -> SoftmaxModel {
    let (n, d) = (x.nrows(), x.ncols());
    let np = d * k + k;
    let x0 = match init {
        Some(p) if p.len() == np => p.to_vec(),
        _ => vec![0.0; np],
    };
    let nf = n.max(1) as f64;
    let inv_c = 1.0 / settings.c;
    let objective = |p: &[f64], g: &mut [f64]| -> f64 {
        let ce = cross_entropy_grad_packed(x, y, k, p, g);
        let mut pen = 0f64;
        for (gi, pi) in g[..d * k].iter_mut().zip(&p[..d * k]) {
            pen += pi * pi;
            *gi += inv_c * pi;
        }
        for gi in g.iter_mut() {
            *gi /= nf;
        }
        (ce + 0.5 * inv_c * pen) / nf
    };
    let r = minimize(objective, x0, &settings.lbfgs);
    let (w, b) = split_params(&r.x, d, k);
    SoftmaxModel {
        w,
        b,
        objective: r.f * nf,
        params: r.x,
        iterations: r.iterations,
        evaluations: r.evaluations,
        converged: r.converged,
    }
}

impl SoftmaxModel {
    /// Class probabilities for standardised rows `x` (rows × classes).
    pub fn predict_proba(&self, x: &ArrayView2<f32>) -> Array2<f32> {
        let mut z = crate::analysis::linalg::matmul(x, &self.w.view());
        z.axis_chunks_iter_mut(Axis(0), CHUNK)
            .into_par_iter()
            .for_each(|mut blk| {
                for mut row in blk.outer_iter_mut() {
                    let mut m = f32::NEG_INFINITY;
                    for (v, bj) in row.iter_mut().zip(&self.b) {
                        *v += bj;
                        m = m.max(*v);
                    }
                    row.mapv_inplace(|v| exp_f32(v - m));
                    let sum: f64 = row.iter().map(|&v| v as f64).sum();
                    let inv = (1.0 / sum) as f32;
                    row.mapv_inplace(|v| v * inv);
                }
            });
        z
    }
}

/// Index of the largest value in each row (first on ties).
pub fn argmax_rows(p: &ArrayView2<f32>) -> Vec<u32> {
    p.outer_iter()
        .map(|r| {
            let mut best = 0usize;
            for (j, &v) in r.iter().enumerate() {
                if v > r[best] {
                    best = j;
                }
            }
            best as u32
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn gradient_matches_finite_differences() {
        let x = Array2::from_shape_fn((37, 4), |(i, j)| {
            (((i * 7 + j * 3) % 11) as f32 - 5.0) / 3.0
        });
        let y: Vec<u32> = (0..37).map(|i| (i % 3) as u32).collect();
        let k = 3;
        let p: Vec<f64> = (0..15).map(|i| ((i * 5 % 7) as f64 - 3.0) / 10.0).collect();
        let mut g = vec![0.0; 15];
        cross_entropy_grad(&x.view(), &y, k, &p, &mut g);
        let mut tmp = vec![0.0; 15];
        for i in 0..15 {
            let h = 1e-3;
            let mut pp = p.clone();
            pp[i] += h;
            let fp = cross_entropy_grad(&x.view(), &y, k, &pp, &mut tmp);
            pp[i] -= 2.0 * h;
            let fm = cross_entropy_grad(&x.view(), &y, k, &pp, &mut tmp);
            let num = (fp - fm) / (2.0 * h);
            assert!(
                (num - g[i]).abs() < 1e-3 * (1.0 + num.abs()),
                "param {i}: {num} vs {}",
                g[i]
            );
        }
    }
}
