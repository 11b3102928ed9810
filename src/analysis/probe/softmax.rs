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
/// of the iterations on activations (bench row 3: 94 -> 30).
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

/// The preconditioner is used when the fit has at least this many rows per feature. Its cost
/// (a Cholesky factor per fit, d³/6; two triangular solves per iteration, 2 d² k) against the
/// evaluations it saves (each 2 n d k) breaks even near n = 6 d on a 768-wide layer with 40
/// classes (probe of phone and speaker on layer 6 of bench row 10's capture, 2 cores: 3 333
/// training frames 4.2 s with it against 3.8 s without, 5 000 frames 4.6 s against 4.7 s,
/// 8 000 frames 5.0 s against 5.8 s; 2026-12-03).
pub const PRECONDITION_MIN_ROWS_PER_FEATURE: usize = 8;

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
        let pc = Preconditioner::new(x.gram(), k, inv_c / nf);
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

/// An approximate inverse Hessian of the fit's objective (L/n), for the L-BFGS recursion's
/// initial matrix. The weights' Hessian is `(1/n) Σ_i (diag(p_i) − p_i p_iᵀ) ⊗ x_i x_iᵀ + λ I`;
/// each class's block is approximated by `κ G + λ I`, with G the Gram matrix of the
/// (standardised) rows per row and κ = (1 − 1/k)/k the curvature `p(1 − p)` of a uniform
/// softmax, and the cross-class terms dropped; the intercepts' block by `κ`. `M v` solves with
/// the Cholesky factor of `κ G + λ I`, the classes' columns in parallel (each column's
/// arithmetic is the same whatever the split, so the result does not depend on the threads).
pub struct Preconditioner {
    /// The Cholesky factor, rounded to f32 (row-major, lower triangle).
    l: Vec<f32>,
    d: usize,
    k: usize,
    kappa: f64,
}

/// Columns per group of [`Preconditioner::apply`] are a multiple of this (one AVX2 register
/// of f32).
const PC_LANES: usize = 8;

impl Preconditioner {
    /// From the Gram matrix per row `gram` (d × d, symmetric positive semi-definite), the
    /// number of classes `k` and the penalty per row `lambda` (> 0).
    pub fn new(gram: &Array2<f64>, k: usize, lambda: f64) -> Self {
        let d = gram.nrows();
        let kf = k.max(2) as f64;
        let kappa = (1.0 - 1.0 / kf) / kf;
        let mut a: Vec<f64> = gram.iter().map(|v| v * kappa).collect();
        for i in 0..d {
            a[i * d + i] += lambda;
        }
        cholesky(&mut a, d);
        Preconditioner {
            l: a.iter().map(|&v| v as f32).collect(),
            d,
            k,
            kappa,
        }
    }

    /// `M v` for parameters laid out as the fit's (W row-major d × k, then b). The solves run
    /// in f32 (M only steers the search; the objective, gradient and stopping rule stay in
    /// f64), on groups of class columns in parallel; each column's arithmetic is the same
    /// whatever the grouping, so the result does not depend on the thread count.
    pub fn apply(&self, v: &[f64]) -> Vec<f64> {
        let (d, k) = (self.d, self.k);
        let groups = rayon::current_num_threads().clamp(1, k.div_ceil(PC_LANES).max(1));
        let width = k.div_ceil(groups).div_ceil(PC_LANES) * PC_LANES;
        let starts: Vec<usize> = (0..k).step_by(width).collect();
        let mut out = v.to_vec();
        let cols: Vec<Vec<f32>> = starts
            .par_iter()
            .map(|&c0| {
                let c1 = (c0 + width).min(k);
                let mut z = vec![0f32; d * width];
                for (zi, vi) in z.chunks_exact_mut(width).zip(v.chunks_exact(k)) {
                    for (a, &b) in zi.iter_mut().zip(&vi[c0..c1]) {
                        *a = b as f32;
                    }
                }
                solve_lower_upper(&self.l, d, &mut z, width);
                z
            })
            .collect();
        for (&c0, z) in starts.iter().zip(&cols) {
            let c1 = (c0 + width).min(k);
            for (oi, zi) in out.chunks_exact_mut(k).take(d).zip(z.chunks_exact(width)) {
                for (a, &b) in oi[c0..c1].iter_mut().zip(zi) {
                    *a = b as f64;
                }
            }
        }
        for a in out[d * k..].iter_mut() {
            *a /= self.kappa;
        }
        out
    }
}

/// Solve `L Lᵀ R = Z` in place for `z` (d × w, row-major), L (d × d, row-major, lower), with
/// the loops compiled for AVX2 where the machine has it (no fused operations, so the values
/// are the same either way).
fn solve_lower_upper(l: &[f32], d: usize, z: &mut [f32], w: usize) {
    #[cfg(target_arch = "x86_64")]
    if std::arch::is_x86_feature_detected!("avx2") {
        // SAFETY: AVX2 is present.
        return unsafe { solve_avx2(l, d, z, w) };
    }
    solve_any(l, d, z, w, false)
}

/// [`solve_any`] compiled with AVX2.
///
/// # Safety
/// AVX2 must be available.
#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2")]
unsafe fn solve_avx2(l: &[f32], d: usize, z: &mut [f32], w: usize) {
    solve_any(l, d, z, w, true)
}

#[inline(always)]
fn solve_any(l: &[f32], d: usize, z: &mut [f32], w: usize, avx: bool) {
    const L8: usize = PC_LANES;
    // `apply` makes w a multiple of 8 (padding columns are zeros and stay zeros)
    assert!(
        w.is_multiple_of(L8),
        "solve width {w} is not a multiple of {L8}"
    );
    if w == 0 {
        return;
    }
    // Forward, L Y = Z: row i less Σ_{j<i} l_ij y_j, per chunk of 8 columns in 4 partial sums
    // over j (j mod 4), so that no chain runs through one register or one memory slot.
    for i in 0..d {
        let (done, rest) = z.split_at_mut(i * w);
        let li = &l[i * d..i * d + i];
        let lii = l[i * d + i];
        for (c, zc) in rest[..w].chunks_exact_mut(L8).enumerate() {
            let mut acc = [[0f32; L8]; 4];
            let mut js = li.chunks_exact(4);
            let mut j = 0;
            for l4 in js.by_ref() {
                for (t, &lij) in l4.iter().enumerate() {
                    let at = (j + t) * w + c * L8;
                    let zj: &[f32; L8] = done[at..at + L8].try_into().expect("chunk of 8");
                    for u in 0..L8 {
                        acc[t][u] += lij * zj[u];
                    }
                }
                j += 4;
            }
            for (t, &lij) in js.remainder().iter().enumerate() {
                let zj = &done[(j + t) * w + c * L8..(j + t) * w + c * L8 + L8];
                for (a, &b) in acc[t].iter_mut().zip(zj) {
                    *a += lij * b;
                }
            }
            for (u, v) in zc.iter_mut().enumerate() {
                let sum = (acc[0][u] + acc[1][u]) + (acc[2][u] + acc[3][u]);
                *v = (*v - sum) / lii;
            }
        }
    }
    // Backward, Lᵀ R = Y: r_i = y_i / l_ii, then y_j −= l_ij r_i for j < i (rows, no chain).
    for i in (0..d).rev() {
        let lii = l[i * d + i];
        let (head, rest) = z.split_at_mut(i * w);
        let ri = &mut rest[..w];
        ri.iter_mut().for_each(|a| *a /= lii);
        let ri: &[f32] = ri;
        for (zj, &lij) in head.chunks_exact_mut(w).zip(&l[i * d..i * d + i]) {
            sub_scaled(zj, lij, ri, avx);
        }
    }
}

/// `z −= a · r` element by element (a product, then a difference: the same rounding with or
/// without AVX2). `avx` says AVX2 may be used.
#[inline(always)]
fn sub_scaled(z: &mut [f32], a: f32, r: &[f32], avx: bool) {
    #[cfg(target_arch = "x86_64")]
    if avx {
        use std::arch::x86_64::{
            _mm256_loadu_ps, _mm256_mul_ps, _mm256_set1_ps, _mm256_storeu_ps, _mm256_sub_ps,
        };
        let n = z.len().min(r.len()) / 8 * 8;
        // SAFETY: the caller found AVX2; every access is within the first `n` values of both
        // slices, read and written unaligned.
        unsafe {
            let av = _mm256_set1_ps(a);
            for o in (0..n).step_by(8) {
                let zp = z.as_mut_ptr().add(o);
                let p = _mm256_mul_ps(av, _mm256_loadu_ps(r.as_ptr().add(o)));
                _mm256_storeu_ps(zp, _mm256_sub_ps(_mm256_loadu_ps(zp), p));
            }
        }
        for (zv, &rv) in z[n..].iter_mut().zip(&r[n..]) {
            *zv -= a * rv;
        }
        return;
    }
    let _ = avx;
    for (zv, &rv) in z.iter_mut().zip(r) {
        *zv -= a * rv;
    }
}

/// Cholesky factor `A = L Lᵀ` of the symmetric matrix `a` (d × d, row-major), L written to the
/// lower triangle. Pivots that are not positive (A not positive definite to rounding) are
/// clamped to a tiny positive value, which keeps L usable as a preconditioner. Compiled for
/// AVX2 where present (same values).
fn cholesky(a: &mut [f64], d: usize) {
    #[cfg(target_arch = "x86_64")]
    if std::arch::is_x86_feature_detected!("avx2") {
        // SAFETY: AVX2 is present.
        return unsafe { cholesky_avx2(a, d) };
    }
    cholesky_any(a, d)
}

/// [`cholesky_any`] compiled with AVX2.
///
/// # Safety
/// AVX2 must be available.
#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2")]
unsafe fn cholesky_avx2(a: &mut [f64], d: usize) {
    cholesky_any(a, d)
}

#[inline(always)]
fn cholesky_any(a: &mut [f64], d: usize) {
    for j in 0..d {
        let rj: Vec<f64> = a[j * d..j * d + j].to_vec();
        let s = dot8(&rj, &rj);
        let ajj = a[j * d + j];
        let ljj = (ajj - s).max(1e-12 * ajj.abs()).max(1e-300).sqrt();
        a[j * d + j] = ljj;
        for i in j + 1..d {
            let s = dot8(&a[i * d..i * d + j], &rj);
            a[i * d + j] = (a[i * d + j] - s) / ljj;
        }
    }
}

/// `a · b` in 8 interleaved partial sums combined in a fixed order (vectorises; same value
/// on every instruction set).
#[inline(always)]
fn dot8(a: &[f64], b: &[f64]) -> f64 {
    let mut acc = [0.0f64; 8];
    let (ca, cb) = (a.chunks_exact(8), b.chunks_exact(8));
    let (ra, rb) = (ca.remainder(), cb.remainder());
    for (xa, xb) in ca.zip(cb) {
        for ((s, x), y) in acc.iter_mut().zip(xa).zip(xb) {
            *s += x * y;
        }
    }
    let mut tail = 0.0;
    for (x, y) in ra.iter().zip(rb) {
        tail += x * y;
    }
    ((acc[0] + acc[4]) + (acc[1] + acc[5])) + ((acc[2] + acc[6]) + (acc[3] + acc[7])) + tail
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
        // M v must be (κ G + λ I)⁻¹ v per class column, and v / κ for the intercepts.
        let (x, _) = anisotropic(300, 7, 3);
        let packed = PackedRows::pack(&x.view(), None);
        let g = packed.gram_sample(usize::MAX);
        let direct = crate::analysis::linalg::at_b(&x.view(), &x.view()).mapv(|v| v / 300.0);
        for (a, b) in g.iter().zip(direct.iter()) {
            assert!((a - b).abs() < 1e-9 * (1.0 + b.abs()), "{a} vs {b}");
        }
        let (k, lambda) = (3usize, 0.01);
        let pc = Preconditioner::new(&g, k, lambda);
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
                assert!(
                    (ar - v[i * k + c]).abs() < 1e-4 * (1.0 + v[i * k + c].abs()),
                    "row {i} class {c}: {ar} vs {}",
                    v[i * k + c]
                );
            }
        }
        for c in 0..k {
            assert!((r[7 * k + c] - v[7 * k + c] / kappa).abs() < 1e-12);
        }
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
