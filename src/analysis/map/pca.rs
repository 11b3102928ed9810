//! Principal component analysis of a frames × dim matrix.
//!
//! Exact path (small dim): the covariance in f64, diagonalised by one-sided Jacobi rotations
//! (Hestenes 1958; for a symmetric positive semi-definite matrix its singular values are the
//! eigenvalues). Covariance path (mid dims, e.g. top 50 of 768): the covariance from f32
//! products summed in f64, top eigenpairs by subspace iteration to convergence, which is both
//! cheaper and more accurate there than randomized passes over the data. Randomized path (Halko, Martinsson & Tropp 2011, Algorithms 4.4 and 5.1): a
//! Gaussian test matrix with `k + 10` columns, power iterations re-orthonormalised by modified
//! Gram-Schmidt (applied twice) in f64, then the small SVD of `Qᵀ A` by one-sided Jacobi.
//! Component signs are fixed so the largest-magnitude loading is positive. Explained-variance
//! ratios divide by the exact total variance (sum of column variances, n − 1).
//!
//! Also: the orthogonal Procrustes rotation (Schönemann 1966) that aligns one 2-D map to
//! another, used so consecutive panels do not flip.

use ndarray::{Array2, ArrayView2, Axis};
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rayon::prelude::*;

pub use crate::records::map::PcaSolver;

/// `Auto` takes the covariance solver while dim ≤ this × (k + oversampling): forming the
/// covariance costs n·dim² against about 2·(power iterations + 1)·n·dim·(k + oversampling)
/// for the randomized passes, and its eigenpairs are then exact to rounding.
pub const COVARIANCE_FACTOR: usize = 16;
/// Most subspace iterations of the covariance solver.
const SUBSPACE_MAX_ITERATIONS: usize = 1000;

/// Largest dimension for which `Auto` uses the exact solver.
pub const EXACT_MAX_DIM: usize = 128;
/// Power iterations of the randomized solver.
pub const POWER_ITERATIONS: usize = 5;
/// Extra columns of the randomized test matrix.
pub const OVERSAMPLING: usize = 10;

/// A fitted PCA.
#[derive(Clone, Debug)]
pub struct Pca {
    /// Column means of the data.
    pub mean: Vec<f64>,
    /// Components (k × dim), orthonormal rows.
    pub components: Array2<f64>,
    /// Variance along each component (n − 1 normalisation).
    pub explained_variance: Vec<f64>,
    /// Share of the total variance along each component.
    pub explained_variance_ratio: Vec<f64>,
    /// The solver that ran.
    pub solver: PcaSolver,
}

/// Singular value decomposition of a tall matrix given by its columns (m × n, m ≥ n) by
/// one-sided Jacobi rotations; returns (singular values, left vectors as columns, right
/// vectors as n × n) sorted by decreasing singular value.
pub fn jacobi_svd(mut cols: Vec<Vec<f64>>) -> (Vec<f64>, Vec<Vec<f64>>, Array2<f64>) {
    let n = cols.len();
    let mut v = Array2::<f64>::eye(n);
    for _sweep in 0..60 {
        let mut off = 0f64;
        for p in 0..n {
            for q in p + 1..n {
                let (a, b) = {
                    let (lo, hi) = cols.split_at_mut(q);
                    (&mut lo[p], &mut hi[0])
                };
                let alpha: f64 = a.iter().map(|x| x * x).sum();
                let beta: f64 = b.iter().map(|x| x * x).sum();
                let gamma: f64 = a.iter().zip(b.iter()).map(|(x, y)| x * y).sum();
                if gamma == 0.0 || gamma.abs() <= 1e-15 * (alpha * beta).sqrt() {
                    continue;
                }
                off = off.max(gamma.abs() / (alpha * beta).sqrt());
                let zeta = (beta - alpha) / (2.0 * gamma);
                let t = zeta.signum() / (zeta.abs() + (1.0 + zeta * zeta).sqrt());
                let t = if zeta == 0.0 { 1.0 } else { t };
                let c = 1.0 / (1.0 + t * t).sqrt();
                let s = c * t;
                for (x, y) in a.iter_mut().zip(b.iter_mut()) {
                    let (xa, yb) = (*x, *y);
                    *x = c * xa - s * yb;
                    *y = s * xa + c * yb;
                }
                for r in 0..n {
                    let (vp, vq) = (v[[r, p]], v[[r, q]]);
                    v[[r, p]] = c * vp - s * vq;
                    v[[r, q]] = s * vp + c * vq;
                }
            }
        }
        if off < 1e-15 {
            break;
        }
    }
    let sv: Vec<f64> = cols
        .iter()
        .map(|c| c.iter().map(|x| x * x).sum::<f64>().sqrt())
        .collect();
    let mut order: Vec<usize> = (0..n).collect();
    order.sort_by(|&a, &b| sv[b].total_cmp(&sv[a]).then(a.cmp(&b)));
    let s: Vec<f64> = order.iter().map(|&i| sv[i]).collect();
    let u: Vec<Vec<f64>> = order
        .iter()
        .map(|&i| {
            let nrm = sv[i];
            cols[i]
                .iter()
                .map(|x| if nrm > 0.0 { x / nrm } else { 0.0 })
                .collect()
        })
        .collect();
    let vv = Array2::from_shape_fn((n, n), |(r, c)| v[[r, order[c]]]);
    (s, u, vv)
}

/// Modified Gram-Schmidt, applied twice, on columns (in place); zero columns stay zero.
fn orthonormalise(cols: &mut [Vec<f64>]) {
    for _ in 0..2 {
        for j in 0..cols.len() {
            let (done, rest) = cols.split_at_mut(j);
            let c = &mut rest[0];
            for q in done.iter() {
                let d: f64 = q.iter().zip(c.iter()).map(|(a, b)| a * b).sum();
                c.iter_mut().zip(q).for_each(|(x, &y)| *x -= d * y);
            }
            let nrm = c.iter().map(|x| x * x).sum::<f64>().sqrt();
            if nrm > 1e-300 {
                c.iter_mut().for_each(|x| *x /= nrm);
            } else {
                c.iter_mut().for_each(|x| *x = 0.0);
            }
        }
    }
}

fn to_cols(a: &ArrayView2<f32>) -> Vec<Vec<f64>> {
    a.axis_iter(Axis(1))
        .map(|c| c.iter().map(|&v| v as f64).collect())
        .collect()
}

fn from_cols(cols: &[Vec<f64>]) -> Array2<f32> {
    let m = cols.first().map(|c| c.len()).unwrap_or(0);
    Array2::from_shape_fn((m, cols.len()), |(i, j)| cols[j][i] as f32)
}

/// A d × l block of standard normal values (Box–Muller on a seeded ChaCha8 stream): the start
/// of a subspace iteration.
fn gaussian_block(d: usize, l: usize, seed: u64) -> Array2<f64> {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    Array2::from_shape_fn((d, l), |_| {
        let u1: f64 = rng.random::<f64>().max(1e-300);
        let u2: f64 = rng.random::<f64>();
        (-2.0 * u1.ln()).sqrt() * (std::f64::consts::TAU * u2).cos()
    })
}

/// The columns of `m`, orthonormalised ([`orthonormalise`]).
fn orth_columns(m: &Array2<f64>) -> Array2<f64> {
    let mut cols: Vec<Vec<f64>> = m.axis_iter(Axis(1)).map(|c| c.to_vec()).collect();
    orthonormalise(&mut cols);
    Array2::from_shape_fn((m.nrows(), cols.len()), |(i, j)| cols[j][i])
}

/// Top `k` eigenpairs (values decreasing, vectors as columns) of a symmetric positive
/// semi-definite matrix, by block subspace iteration on `2k + 10` columns (Golub & Van Loan,
/// Matrix Computations, §8.2.4) with a Rayleigh–Ritz step every 5 iterations; stops when the
/// top k Ritz values change by less than 1e-12 relative.
fn top_eigen_psd(c: &Array2<f64>, k: usize, seed: u64) -> (Vec<f64>, Vec<Vec<f64>>) {
    let d = c.nrows();
    let l = (2 * k + OVERSAMPLING).min(d);
    let mut q = gaussian_block(d, l, seed);
    let orth = orth_columns;
    // Rayleigh–Ritz on the current basis: eigenpairs of Qᵀ C Q (l × l, PSD, so its singular
    // values and left vectors are its eigenpairs)
    let ritz = |q: &Array2<f64>| -> (Vec<f64>, Vec<Vec<f64>>) {
        let t = q.t().dot(&c.dot(q));
        let cols: Vec<Vec<f64>> = t.axis_iter(Axis(1)).map(|c| c.to_vec()).collect();
        let (s, u, _) = jacobi_svd(cols);
        (s, u)
    };
    q = orth(&q);
    let mut prev: Option<Vec<f64>> = None;
    for it in 0..SUBSPACE_MAX_ITERATIONS {
        q = orth(&c.dot(&q));
        if it % 5 == 4 {
            let (s, _) = ritz(&q);
            let top: Vec<f64> = s.iter().take(k).cloned().collect();
            let scale = top.first().cloned().unwrap_or(0.0).max(1e-300);
            if let Some(p) = &prev {
                let change = top
                    .iter()
                    .zip(p)
                    .map(|(a, b)| (a - b).abs() / a.abs().max(1e-12 * scale))
                    .fold(0f64, f64::max);
                if change < 1e-12 {
                    break;
                }
            }
            prev = Some(top);
        }
    }
    let (s, u) = ritz(&q);
    let vecs: Vec<Vec<f64>> = u
        .iter()
        .take(k)
        .map(|ui| {
            (0..d)
                .map(|r| q.row(r).iter().zip(ui).map(|(a, b)| a * b).sum())
                .collect()
        })
        .collect();
    (s.into_iter().take(k).collect(), vecs)
}

/// Rough top `k` eigenpairs (values decreasing, vectors as the columns of a d × k matrix) of a
/// symmetric positive semi-definite matrix: `iterations` steps of block subspace iteration
/// on `l ≥ k` columns from a seeded Gaussian start, then one Rayleigh–Ritz step (Halko,
/// Martinsson & Tropp 2011, algorithm 4.4 with 5.3). For uses that need the dominant
/// directions, not converged values.
pub fn top_eigen_rough(
    c: &Array2<f64>,
    k: usize,
    l: usize,
    iterations: usize,
    seed: u64,
) -> (Vec<f64>, Array2<f64>) {
    let d = c.nrows();
    let l = l.max(k).min(d);
    let k = k.min(l);
    let mut q = gaussian_block(d, l, seed);
    let orth = orth_columns;
    q = orth(&q);
    for _ in 0..iterations {
        q = orth(&c.dot(&q));
    }
    let t = q.t().dot(&c.dot(&q));
    let cols: Vec<Vec<f64>> = t.axis_iter(Axis(1)).map(|c| c.to_vec()).collect();
    let (s, u, _) = jacobi_svd(cols);
    let ut = Array2::from_shape_fn((l, k), |(i, j)| u[j][i]);
    (s.into_iter().take(k).collect(), q.dot(&ut))
}

/// Fit the top `k` components of `x` (frames × dim).
pub fn fit(x: &ArrayView2<f32>, k: usize, solver: PcaSolver, seed: u64) -> Pca {
    let (n, d) = x.dim();
    let k = k.min(d).min(n.saturating_sub(1).max(1));
    let mean = crate::analysis::linalg::col_means(x);
    let mean32: Vec<f32> = mean.iter().map(|&m| m as f32).collect();
    let denom = (n.max(2) - 1) as f64;
    let total_var = total_variance(x, &mean) / denom;
    let solver = match solver {
        PcaSolver::Auto if d <= EXACT_MAX_DIM || k * 2 >= d => PcaSolver::Exact,
        PcaSolver::Auto if d <= COVARIANCE_FACTOR * (k + OVERSAMPLING) => PcaSolver::Covariance,
        PcaSolver::Auto => PcaSolver::Randomized,
        s => s,
    };
    let (vars, comps): (Vec<f64>, Vec<Vec<f64>>) = match solver {
        PcaSolver::Exact => exact_components(x, &mean, k, denom),
        PcaSolver::Covariance => covariance_components(x, &mean32, k, seed, denom),
        _ => randomized_components(x, &mean32, k, seed, denom),
    };
    let components = sign_fixed(&comps, k, d);
    let explained_variance_ratio = vars
        .iter()
        .map(|v| if total_var > 0.0 { v / total_var } else { 0.0 })
        .collect();
    Pca {
        mean,
        components,
        explained_variance: vars,
        explained_variance_ratio,
        solver,
    }
}

/// Sum of squared deviations from `mean`, exact from the data (f64, fixed blocks summed in
/// order).
fn total_variance(x: &ArrayView2<f32>, mean: &[f64]) -> f64 {
    x.axis_chunks_iter(Axis(0), 2048)
        .into_par_iter()
        .map(|b| {
            let mut acc = 0f64;
            for r in b.outer_iter() {
                for (v, m) in r.iter().zip(mean) {
                    acc += (*v as f64 - m).powi(2);
                }
            }
            acc
        })
        .collect::<Vec<_>>()
        .into_iter()
        .sum::<f64>()
}

/// `x` minus the column means, in f32.
fn centred(x: &ArrayView2<f32>, mean32: &[f32]) -> Array2<f32> {
    let mut c = x.to_owned();
    for mut r in c.outer_iter_mut() {
        r.iter_mut().zip(mean32).for_each(|(v, m)| *v -= m);
    }
    c
}

/// Exact solver: the f64 covariance (fixed row blocks summed in order) and its Jacobi SVD;
/// the top `k` variances and components.
fn exact_components(
    x: &ArrayView2<f32>,
    mean: &[f64],
    k: usize,
    denom: f64,
) -> (Vec<f64>, Vec<Vec<f64>>) {
    let d = x.ncols();
    let parts: Vec<Array2<f64>> = x
        .axis_chunks_iter(Axis(0), 1024)
        .into_par_iter()
        .map(|b| {
            let mut c = b.mapv(|v| v as f64);
            for mut r in c.outer_iter_mut() {
                r.iter_mut().zip(mean).for_each(|(v, m)| *v -= m);
            }
            c.t().dot(&c)
        })
        .collect();
    let mut cov = Array2::<f64>::zeros((d, d));
    for p in parts {
        cov += &p;
    }
    let cols: Vec<Vec<f64>> = cov.axis_iter(Axis(1)).map(|c| c.to_vec()).collect();
    let (s, u, _) = jacobi_svd(cols);
    (
        s.iter().take(k).map(|v| v / denom).collect(),
        u.into_iter().take(k).collect(),
    )
}

/// Covariance solver: f32 products, then subspace iteration for the top `k` eigenpairs.
fn covariance_components(
    x: &ArrayView2<f32>,
    mean32: &[f32],
    k: usize,
    seed: u64,
    denom: f64,
) -> (Vec<f64>, Vec<Vec<f64>>) {
    let c = centred(x, mean32);
    let cov = crate::analysis::linalg::at_b(&c.view(), &c.view());
    drop(c);
    let (vals, vecs) = top_eigen_psd(&cov, k, seed);
    (vals.iter().map(|v| v / denom).collect(), vecs)
}

/// Randomized SVD (Halko et al. 2011): a Gaussian sketch with `OVERSAMPLING` extra columns,
/// `POWER_ITERATIONS` power iterations, then the SVD of the small projected matrix.
fn randomized_components(
    x: &ArrayView2<f32>,
    mean32: &[f32],
    k: usize,
    seed: u64,
    denom: f64,
) -> (Vec<f64>, Vec<Vec<f64>>) {
    let (n, d) = x.dim();
    let c = centred(x, mean32);
    let l = (k + OVERSAMPLING).min(d).min(n);
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    // Gaussian test matrix by Box-Muller
    let omega = Array2::from_shape_fn((d, l), |_| {
        let u1: f64 = rng.random::<f64>().max(1e-300);
        let u2: f64 = rng.random::<f64>();
        ((-2.0 * u1.ln()).sqrt() * (std::f64::consts::TAU * u2).cos()) as f32
    });
    let cv = c.view();
    let mut y = crate::analysis::linalg::matmul(&cv, &omega.view());
    for _ in 0..POWER_ITERATIONS {
        let mut q = to_cols(&y.view());
        orthonormalise(&mut q);
        let qf = from_cols(&q);
        let z = crate::analysis::linalg::at_b(&cv, &qf.view()).mapv(|v| v as f32);
        let mut zc = to_cols(&z.view());
        orthonormalise(&mut zc);
        y = crate::analysis::linalg::matmul(&cv, &from_cols(&zc).view());
    }
    let mut q = to_cols(&y.view());
    orthonormalise(&mut q);
    // Bᵀ = Aᵀ Q (dim × l); its left singular vectors are the components
    let bt = crate::analysis::linalg::at_b(&cv, &from_cols(&q).view());
    let cols: Vec<Vec<f64>> = bt.axis_iter(Axis(1)).map(|c| c.to_vec()).collect();
    let (s, u, _) = jacobi_svd(cols);
    (
        s.iter().take(k).map(|v| v * v / denom).collect(),
        u.into_iter().take(k).collect(),
    )
}

/// The components as rows (k × d), each signed so that its largest-magnitude entry is
/// positive.
fn sign_fixed(comps: &[Vec<f64>], k: usize, d: usize) -> Array2<f64> {
    let mut components = Array2::<f64>::zeros((k, d));
    for (i, c) in comps.iter().enumerate() {
        let big = c
            .iter()
            .cloned()
            .fold(0f64, |a, v| if v.abs() > a.abs() { v } else { a });
        let sign = if big < 0.0 { -1.0 } else { 1.0 };
        for (j, &v) in c.iter().enumerate() {
            components[[i, j]] = sign * v;
        }
    }
    components
}

impl Pca {
    /// Project rows of `x` onto the components (frames × k).
    pub fn transform(&self, x: &ArrayView2<f32>) -> Array2<f32> {
        let mut c = x.to_owned();
        let m: Vec<f32> = self.mean.iter().map(|&v| v as f32).collect();
        for mut r in c.outer_iter_mut() {
            r.iter_mut().zip(&m).for_each(|(v, mm)| *v -= mm);
        }
        let w = self.components.t().mapv(|v| v as f32);
        crate::analysis::linalg::matmul(&c.view(), &w.view())
    }
}

/// Rotate (or reflect) `y` (n × 2) about its centre so it best matches `target` (orthogonal
/// Procrustes: R = U Vᵀ from the SVD of yᵀ target).
pub fn procrustes_align(y: &mut Array2<f32>, target: &ArrayView2<f32>) {
    let n = y.nrows();
    if n == 0 || target.nrows() != n {
        return;
    }
    let cm = |a: &ArrayView2<f32>| -> [f64; 2] {
        let mut m = [0f64; 2];
        for r in a.outer_iter() {
            m[0] += r[0] as f64;
            m[1] += r[1] as f64;
        }
        [m[0] / n as f64, m[1] / n as f64]
    };
    let (my, mt) = (cm(&y.view()), cm(target));
    let mut m = [[0f64; 2]; 2];
    for (a, b) in y.outer_iter().zip(target.outer_iter()) {
        for i in 0..2 {
            for j in 0..2 {
                m[i][j] += (a[i] as f64 - my[i]) * (b[j] as f64 - mt[j]);
            }
        }
    }
    // SVD of the 2 × 2 matrix M = U S Vᵀ via Jacobi on its columns: M V = U S
    let (_, u, v) = jacobi_svd(vec![vec![m[0][0], m[1][0]], vec![m[0][1], m[1][1]]]);
    // u holds columns of U (possibly zero for rank-deficient M: then keep y as is)
    if u.iter().any(|c| c.iter().all(|&x| x == 0.0)) {
        return;
    }
    let r = [
        [
            u[0][0] * v[[0, 0]] + u[1][0] * v[[0, 1]],
            u[0][0] * v[[1, 0]] + u[1][0] * v[[1, 1]],
        ],
        [
            u[0][1] * v[[0, 0]] + u[1][1] * v[[0, 1]],
            u[0][1] * v[[1, 0]] + u[1][1] * v[[1, 1]],
        ],
    ];
    for mut row in y.outer_iter_mut() {
        let (a, b) = (row[0] as f64 - my[0], row[1] as f64 - my[1]);
        row[0] = (a * r[0][0] + b * r[1][0] + my[0]) as f32;
        row[1] = (a * r[0][1] + b * r[1][1] + my[1]) as f32;
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn jacobi_svd_reconstructs_a_small_matrix() {
        let cols = vec![vec![3.0, 1.0, 0.5], vec![1.0, 2.0, -1.0]];
        let (s, u, v) = jacobi_svd(cols.clone());
        for i in 0..3 {
            for j in 0..2 {
                let rec: f64 = (0..2).map(|k| u[k][i] * s[k] * v[[j, k]]).sum();
                assert!((rec - cols[j][i]).abs() < 1e-12);
            }
        }
        assert!(s[0] >= s[1]);
    }

    #[test]
    fn procrustes_undoes_a_reflection_and_rotation() {
        let t = Array2::from_shape_fn((30, 2), |(i, j)| {
            ((i * 7 + j * 3) % 11) as f32 + 0.1 * i as f32
        });
        // reflect x, then rotate by 40 degrees
        let (c, s) = (40f32.to_radians().cos(), 40f32.to_radians().sin());
        let mut y = Array2::from_shape_fn((30, 2), |(i, j)| {
            let (a, b) = (-t[[i, 0]], t[[i, 1]]);
            if j == 0 {
                c * a - s * b
            } else {
                s * a + c * b
            }
        });
        procrustes_align(&mut y, &t.view());
        // after alignment y equals t up to a translation
        let d0 = y[[0, 0]] - t[[0, 0]];
        let d1 = y[[0, 1]] - t[[0, 1]];
        for i in 0..30 {
            assert!(
                (y[[i, 0]] - t[[i, 0]] - d0).abs() < 1e-3
                    && (y[[i, 1]] - t[[i, 1]] - d1).abs() < 1e-3
            );
        }
    }
}
