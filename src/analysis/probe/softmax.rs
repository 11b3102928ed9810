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

use super::lbfgs::{minimize_preconditioned, LbfgsOptions};
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
/// each objective evaluation is one pass over `x` ([`cross_entropy_grad_packed`]). With at
/// least [`PRECONDITION_MIN_ROWS_PER_FEATURE`] rows per feature the L-BFGS runs
/// preconditioned by [`Preconditioner`]: the same objective and stopping rule, about a third
/// of the iterations on activations (bench row 3: 94 -> 35).
pub fn fit_packed(
    x: &PackedRows,
    y: &[u32],
    k: usize,
    settings: &FitSettings,
    init: Option<&[f64]>,
) -> SoftmaxModel {
    let precondition = x.nrows() >= PRECONDITION_MIN_ROWS_PER_FEATURE * x.ncols();
    fit_packed_with(x, y, k, settings, init, precondition)
}

/// The preconditioner is used when the fit has at least this many rows per feature. Its
/// setup (a Gram matrix of up to 8 192 rows and its top eigenpairs, once per packed matrix)
/// costs about as much as a few evaluations (each 2 n d k); with fewer rows than features
/// the evaluations it saves are cheap. Common practice, not measured below n = 3 333, d = 768
/// (where it saves 15-20 % of the probe).
pub const PRECONDITION_MIN_ROWS_PER_FEATURE: usize = 1;

/// [`fit_packed`], with the preconditioner or with plain L-BFGS (`precondition` false).
pub fn fit_packed_with(
    x: &PackedRows,
    y: &[u32],
    k: usize,
    settings: &FitSettings,
    init: Option<&[f64]>,
    precondition: bool,
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
    let r = if precondition {
        let pc = Preconditioner::new(x.spectrum(), k, inv_c / nf);
        let apply = |v: &[f64]| pc.apply(v);
        minimize_preconditioned(objective, x0, &settings.lbfgs, Some(&apply))
    } else {
        minimize_preconditioned(objective, x0, &settings.lbfgs, None)
    };
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

/// The dominant directions of a training matrix's rows, for [`Preconditioner`]: the top
/// [`Spectrum::RANK`] eigenpairs of the rows' Gram matrix per row `G` (from
/// [`PackedRows::GRAM_ROWS`] rows spread through the matrix, by a few steps of subspace
/// iteration) and the mean of its other eigenvalues. Computed once per packed matrix
/// ([`PackedRows::spectrum`]); it does not depend on the penalty.
#[derive(Clone, Debug)]
pub struct Spectrum {
    /// Eigenvectors, d × r.
    vectors: Array2<f64>,
    /// Their eigenvalues, decreasing.
    values: Vec<f64>,
    /// Mean of the remaining d − r eigenvalues (trace minus the kept ones, over d − r).
    rest: f64,
}

impl Spectrum {
    /// Eigenpairs kept: on bench row 3 (768 wide, 40 classes) rank 16, 32 and 64 took 46,
    /// 41 and 35 iterations (94 without), rank 128 33 at a higher cost per fit; and the probe
    /// of phone and speaker on a 768-wide layer at 3 333 training frames was fastest with 64
    /// (2026-12-03).
    pub const RANK: usize = 64;
    /// Extra columns of the subspace iteration, and its steps.
    const OVERSAMPLE: usize = 16;
    const STEPS: usize = 4;

    /// From a Gram matrix per row (d × d, symmetric positive semi-definite).
    pub fn of_gram(gram: &Array2<f64>) -> Spectrum {
        let d = gram.nrows();
        let r = Self::RANK.min(d);
        let (values, vectors) = crate::analysis::map::pca::top_eigen_rough(
            gram,
            r,
            r + Self::OVERSAMPLE,
            Self::STEPS,
            0x5eed, // a fixed start: the spectrum steers the search only
        );
        let trace: f64 = (0..d).map(|i| gram[[i, i]]).sum();
        let kept: f64 = values.iter().sum();
        let rest = if d > values.len() {
            ((trace - kept) / (d - values.len()) as f64).max(0.0)
        } else {
            0.0
        };
        Spectrum {
            vectors,
            values,
            rest,
        }
    }
}

/// An approximate inverse Hessian of the fit's objective (L/n), for the L-BFGS recursion's
/// initial matrix. The weights' Hessian is `(1/n) Σ_i (diag(p_i) − p_i p_iᵀ) ⊗ x_i x_iᵀ + λ I`;
/// each class's block is approximated by `κ G + λ I`, with G the Gram matrix of the
/// (standardised) rows per row and κ = (1 − 1/k)/k the curvature `p(1 − p)` of a uniform
/// softmax, and the cross-class terms dropped; the intercepts' block by `κ`. G is replaced
/// by its top eigenpairs plus the mean of the other eigenvalues ([`Spectrum`]), so that
/// `M v = c v + V diag(1/(κ e + λ) − c) Vᵀ v` with `c = 1/(κ ē + λ)`: two thin products per
/// application, and no factorisation per penalty.
pub struct Preconditioner<'a> {
    spectrum: &'a Spectrum,
    /// `1/(κ e + λ) − c` per kept eigenvector.
    scale: Vec<f64>,
    /// `c`, for the directions outside the kept ones.
    c_rest: f64,
    k: usize,
    kappa: f64,
}

impl<'a> Preconditioner<'a> {
    /// From the rows' [`Spectrum`], the number of classes `k` and the penalty per row
    /// `lambda` (> 0).
    pub fn new(spectrum: &'a Spectrum, k: usize, lambda: f64) -> Self {
        let kf = k.max(2) as f64;
        let kappa = (1.0 - 1.0 / kf) / kf;
        let c_rest = 1.0 / (kappa * spectrum.rest + lambda);
        let scale = spectrum
            .values
            .iter()
            .map(|&e| 1.0 / (kappa * e.max(0.0) + lambda) - c_rest)
            .collect();
        Preconditioner {
            spectrum,
            scale,
            c_rest,
            k,
            kappa,
        }
    }

    /// `M v` for parameters laid out as the fit's (W row-major d × k, then b).
    pub fn apply(&self, v: &[f64]) -> Vec<f64> {
        let k = self.k;
        let d = self.spectrum.vectors.nrows();
        let q = ndarray::ArrayView2::from_shape((d, k), &v[..d * k]).expect("d × k weights");
        let mut p = self.spectrum.vectors.t().dot(&q);
        for (mut row, s) in p.outer_iter_mut().zip(&self.scale) {
            row.mapv_inplace(|x| x * s);
        }
        let mut w = self.spectrum.vectors.dot(&p);
        w.zip_mut_with(&q, |o, &qv| *o += self.c_rest * qv);
        let mut out: Vec<f64> = w.iter().copied().collect();
        out.extend(v[d * k..].iter().map(|x| x / self.kappa));
        out
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

    /// Rows whose features differ in scale by a factor of 30 and are correlated: the kind of
    /// ill-conditioned problem the preconditioner is for. Labels from a fixed linear rule with
    /// deterministic label noise, so the fit has a finite optimum.
    fn anisotropic(n: usize, d: usize, k: usize) -> (Array2<f32>, Vec<u32>) {
        let mut x = Array2::<f32>::zeros((n, d));
        let mut y = Vec::with_capacity(n);
        for i in 0..n {
            let u = |j: usize| ((((i * 2654435761 + j * 40503) % 10007) as f32) / 10007.0) - 0.5;
            let base = u(d);
            for j in 0..d {
                let scale = 30f32.powf(-(j as f32) / (d as f32 - 1.0));
                x[[i, j]] = scale * (u(j) + 0.8 * base);
            }
            let score: f32 = (0..d).map(|j| x[[i, j]] * ((j % 3) as f32 - 1.0)).sum();
            let mut c = ((score * 40.0).rem_euclid(k as f32)) as usize % k;
            if i % 7 == 0 {
                c = (c + 1) % k;
            }
            y.push(c as u32);
        }
        (x, y)
    }

    #[test]
    fn preconditioner_solves_its_system() {
        // With d below the kept rank the spectrum is exact, so M v must be
        // (κ G + λ I)⁻¹ v per class column, and v / κ for the intercepts.
        let (x, _) = anisotropic(300, 7, 3);
        let packed = PackedRows::pack(&x.view(), None);
        let g = packed.gram_sample(usize::MAX);
        let direct = crate::analysis::linalg::at_b(&x.view(), &x.view()).mapv(|v| v / 300.0);
        for (a, b) in g.iter().zip(direct.iter()) {
            assert!((a - b).abs() < 1e-9 * (1.0 + b.abs()), "{a} vs {b}");
        }
        let (k, lambda) = (3usize, 0.01);
        let spectrum = Spectrum::of_gram(&g);
        let pc = Preconditioner::new(&spectrum, k, lambda);
        let kappa = (1.0 - 1.0 / 3.0) / 3.0;
        let v: Vec<f64> = (0..7 * 3 + 3)
            .map(|i| ((i * 37 % 11) as f64) - 5.0)
            .collect();
        let r = pc.apply(&v);
        for c in 0..k {
            for i in 0..7 {
                let ar: f64 = (0..7)
                    .map(|j| (kappa * g[[i, j]] + if i == j { lambda } else { 0.0 }) * r[j * k + c])
                    .sum();
                let want = v[i * k + c];
                assert!(
                    (ar - want).abs() < 1e-8 * (1.0 + want.abs()),
                    "row {i} class {c}: {ar} vs {want}"
                );
            }
        }
        for c in 0..k {
            assert!((r[7 * k + c] - v[7 * k + c] / kappa).abs() < 1e-12);
        }
    }

    #[test]
    fn spectrum_keeps_the_top_eigenvalues_and_the_mean_of_the_rest() {
        // A diagonal Gram matrix with eigenvalues 0.93^i, i = 0..99: the kept 64 must be the
        // largest (to 1 % after 4 subspace steps) and `rest` the mean of the other 36.
        let d = 100;
        let e: Vec<f64> = (0..d).map(|i| 0.93f64.powi(i as i32)).collect();
        let g = Array2::from_shape_fn((d, d), |(i, j)| if i == j { e[i] } else { 0.0 });
        let sp = Spectrum::of_gram(&g);
        assert_eq!(sp.values.len(), Spectrum::RANK);
        for (i, (&got, &want)) in sp.values.iter().zip(&e).enumerate() {
            assert!(
                (got - want).abs() < 0.01 * want,
                "eigenvalue {i}: {got} vs {want}"
            );
        }
        let rest_want = e[Spectrum::RANK..].iter().sum::<f64>() / (d - Spectrum::RANK) as f64;
        assert!(
            (sp.rest - rest_want).abs() < 0.05 * rest_want,
            "{} vs {rest_want}",
            sp.rest
        );
    }

    #[test]
    fn preconditioning_reaches_the_same_minimum_in_fewer_iterations() {
        // The preconditioner changes the path only: on an ill-conditioned problem both runs
        // must stop at the same objective and predictions, the preconditioned one sooner.
        let (x, y) = anisotropic(2000, 24, 4);
        let std = Standardizer::fit(&x.view());
        let mut xs = x.clone();
        std.apply(&mut xs);
        let packed = PackedRows::pack(&xs.view(), None);
        let settings = FitSettings {
            c: 1.0 / (1e-4 * 2000.0),
            lbfgs: LbfgsOptions {
                max_iter: 2000,
                gtol: 1e-5,
                ftol: 0.0,
                ..Default::default()
            },
        };
        let plain = fit_packed_with(&packed, &y, 4, &settings, None, false);
        let pre = fit_packed_with(&packed, &y, 4, &settings, None, true);
        assert!(plain.converged && pre.converged, "{plain:?} {pre:?}");
        let rel = (pre.objective - plain.objective).abs() / plain.objective;
        assert!(
            rel < 1e-6,
            "objective {} vs {}",
            pre.objective,
            plain.objective
        );
        assert!(
            pre.iterations < plain.iterations,
            "preconditioned {} iterations, plain {}",
            pre.iterations,
            plain.iterations
        );
        let p1 = argmax_rows(&plain.predict_proba(&xs.view()).view());
        let p2 = argmax_rows(&pre.predict_proba(&xs.view()).view());
        let same = p1.iter().zip(&p2).filter(|(a, b)| a == b).count();
        assert!(
            same as f64 >= 0.999 * p1.len() as f64,
            "{same} of {}",
            p1.len()
        );
    }

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
