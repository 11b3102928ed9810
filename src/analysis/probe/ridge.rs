//! Ridge regression in closed form, for probes of continuous label columns.
//!
//! The training rows are streamed once into `XᵀX` and `Xᵀy` ([`Gram::new`]: blocks of rows
//! widened to f64, where the product of two f32 values is exact, multiplied by GEMM and added
//! in block order, so the sums do not depend on the thread count); each penalty of the grid is then one Cholesky solve of
//! `(XᵀX_c + α I) w = Xᵀy_c` on the centred sums, with the intercept from the means. This is
//! the estimator scikit-learn's `Ridge(alpha, fit_intercept=True)` computes (penalty on the
//! weights only), with no iteration.

use ndarray::{Array2, ArrayView2};

use rayon::prelude::*;

use crate::analysis::linalg::col_means;

use super::softmax::Standardizer;

/// Centred sums of one training set.
#[derive(Clone, Debug)]
pub struct Gram {
    /// `Σ (x - x̄)(x - x̄)ᵀ`.
    xtx: Array2<f64>,
    /// `Σ (x - x̄)(y - ȳ)`.
    xty: Vec<f64>,
    /// Feature means.
    x_mean: Vec<f64>,
    /// Target mean.
    y_mean: f64,
}

/// A fitted ridge model: `ŷ = x·coef + intercept`.
#[derive(Clone, Debug)]
pub struct RidgeFit {
    /// One weight per feature.
    pub coef: Vec<f64>,
    /// Intercept.
    pub intercept: f64,
}

impl RidgeFit {
    /// Predictions for the rows of `x`.
    pub fn predict(&self, x: &ArrayView2<f32>) -> Vec<f64> {
        x.outer_iter()
            .map(|r| {
                r.iter()
                    .zip(&self.coef)
                    .map(|(&v, w)| v as f64 * w)
                    .sum::<f64>()
                    + self.intercept
            })
            .collect()
    }
}

impl Gram {
    /// Stream the rows of `x` (n × d) with targets `y` (n) into the centred sums.
    pub fn new(x: &ArrayView2<f32>, y: &[f64]) -> Gram {
        assert_eq!(x.nrows(), y.len(), "one target per row");
        let n = y.len().max(1) as f64;
        let x_mean = col_means(x);
        let y_mean = y.iter().sum::<f64>() / n;
        let yc: Vec<f64> = y.iter().map(|v| v - y_mean).collect();
        let (raw, xty) = gram_f64(x, &yc);
        let d = x.ncols();
        // Σ(x - x̄)(x - x̄)ᵀ = ΣxxT - n x̄x̄ᵀ; Σ(x - x̄)(y - ȳ) = Σx(y - ȳ) since Σ(y - ȳ) = 0.
        let mut xtx = raw;
        for i in 0..d {
            for j in 0..d {
                xtx[[i, j]] -= n * x_mean[i] * x_mean[j];
            }
        }
        Gram {
            xtx,
            xty,
            x_mean,
            y_mean,
        }
    }

    /// The ridge fit for penalty `alpha` (> 0), or None when the system is not positive
    /// definite (only possible with `alpha` = 0 and collinear features).
    pub fn solve(&self, alpha: f64) -> Option<RidgeFit> {
        let mut a = self.xtx.clone();
        for i in 0..a.nrows() {
            a[[i, i]] += alpha;
        }
        let coef = cholesky_solve(a, &self.xty)?;
        let intercept = self.y_mean
            - coef
                .iter()
                .zip(&self.x_mean)
                .map(|(w, m)| w * m)
                .sum::<f64>();
        Some(RidgeFit { coef, intercept })
    }
}

/// Rows per block of the Gram accumulation, and blocks computed at once.
const BLOCK: usize = 512;
const ROUND: usize = 8;

/// `XᵀX` and `Xᵀy` in f64: each block of rows widened to f64 (exact products), one GEMM per
/// block, blocks added in order (rounds of [`ROUND`] blocks in parallel bound the memory).
fn gram_f64(x: &ArrayView2<f32>, y: &[f64]) -> (Array2<f64>, Vec<f64>) {
    let (n, d) = (x.nrows(), x.ncols());
    let blocks: Vec<(usize, usize)> = (0..n.div_ceil(BLOCK))
        .map(|b| (b * BLOCK, ((b + 1) * BLOCK).min(n)))
        .collect();
    let mut xtx = Array2::<f64>::zeros((d, d));
    let mut xty = vec![0f64; d];
    for round in blocks.chunks(ROUND) {
        let parts: Vec<(Array2<f64>, Vec<f64>)> = round
            .par_iter()
            .map(|&(lo, hi)| {
                let blk = x.slice(ndarray::s![lo..hi, ..]).mapv(|v| v as f64);
                let yb = ndarray::ArrayView1::from(&y[lo..hi]);
                (blk.t().dot(&blk), blk.t().dot(&yb).to_vec())
            })
            .collect();
        for (g, v) in parts {
            xtx += &g;
            for (a, b) in xty.iter_mut().zip(v) {
                *a += b;
            }
        }
    }
    (xtx, xty)
}

/// Solve `A w = b` for symmetric positive definite `A` by Cholesky (`A = L Lᵀ`), in place.
pub fn cholesky_solve(mut a: Array2<f64>, b: &[f64]) -> Option<Vec<f64>> {
    let d = a.nrows();
    for j in 0..d {
        let mut s = a[[j, j]];
        for k in 0..j {
            s -= a[[j, k]] * a[[j, k]];
        }
        if s <= 0.0 || !s.is_finite() {
            return None;
        }
        let ljj = s.sqrt();
        a[[j, j]] = ljj;
        for i in j + 1..d {
            let mut s = a[[i, j]];
            for k in 0..j {
                s -= a[[i, k]] * a[[j, k]];
            }
            a[[i, j]] = s / ljj;
        }
    }
    // L z = b, then Lᵀ w = z.
    let mut z = b.to_vec();
    for i in 0..d {
        for k in 0..i {
            z[i] -= a[[i, k]] * z[k];
        }
        z[i] /= a[[i, i]];
    }
    for i in (0..d).rev() {
        for k in i + 1..d {
            z[i] -= a[[k, i]] * z[k];
        }
        z[i] /= a[[i, i]];
    }
    Some(z)
}

/// Coefficient of determination `1 − SS_res / SS_tot`, with `SS_tot` about the mean of
/// `truth` (as scikit-learn's `r2_score`). NaN for fewer than two items or constant truth.
pub fn r2(truth: &[f64], pred: &[f64]) -> f64 {
    let n = truth.len();
    if n < 2 {
        return f64::NAN;
    }
    let mean = truth.iter().sum::<f64>() / n as f64;
    let ss_tot: f64 = truth.iter().map(|t| (t - mean) * (t - mean)).sum();
    let ss_res: f64 = truth.iter().zip(pred).map(|(t, p)| (t - p) * (t - p)).sum();
    if ss_tot <= 0.0 {
        return f64::NAN;
    }
    1.0 - ss_res / ss_tot
}

/// Root mean squared error.
pub fn rmse(truth: &[f64], pred: &[f64]) -> f64 {
    let n = truth.len().max(1) as f64;
    (truth
        .iter()
        .zip(pred)
        .map(|(t, p)| (t - p) * (t - p))
        .sum::<f64>()
        / n)
        .sqrt()
}

/// Pearson's correlation coefficient (NaN when either side is constant).
pub fn pearson_r(a: &[f64], b: &[f64]) -> f64 {
    let n = a.len() as f64;
    if a.len() < 2 {
        return f64::NAN;
    }
    let ma = a.iter().sum::<f64>() / n;
    let mb = b.iter().sum::<f64>() / n;
    let (mut sab, mut saa, mut sbb) = (0.0, 0.0, 0.0);
    for (x, y) in a.iter().zip(b) {
        let (dx, dy) = (x - ma, y - mb);
        sab += dx * dy;
        saa += dx * dx;
        sbb += dy * dy;
    }
    if saa <= 0.0 || sbb <= 0.0 {
        return f64::NAN;
    }
    sab / (saa.sqrt() * sbb.sqrt())
}

/// One point of a penalty search: the penalty and the validation R².
#[derive(Clone, Debug, PartialEq)]
pub struct RidgePoint {
    /// Penalty.
    pub alpha: f64,
    /// R² on the validation rows.
    pub validation_r2: f64,
}

/// Standardise with the training rows' statistics, fit every penalty of `grid` on the
/// training rows and score R² on the validation rows; the best penalty (the first of equals)
/// and every point. The target is standardised on the training side (which scales the
/// weights, not the predictions' R²).
pub fn search(
    x_train: &ArrayView2<f32>,
    y_train: &[f64],
    x_val: &ArrayView2<f32>,
    y_val: &[f64],
    grid: &[f64],
) -> (f64, Vec<RidgePoint>) {
    let std = Standardizer::fit(x_train);
    let mut xt = x_train.to_owned();
    std.apply(&mut xt);
    let mut xv = x_val.to_owned();
    std.apply(&mut xv);
    let (ym, ysd) = mean_sd(y_train);
    let yt: Vec<f64> = y_train.iter().map(|y| (y - ym) / ysd).collect();
    let gram = Gram::new(&xt.view(), &yt);
    let mut points = Vec::new();
    let mut best = (f64::NEG_INFINITY, grid.first().copied().unwrap_or(1.0));
    for &alpha in grid {
        let r = match gram.solve(alpha) {
            Some(fit) => {
                let pred: Vec<f64> = fit
                    .predict(&xv.view())
                    .iter()
                    .map(|p| p * ysd + ym)
                    .collect();
                r2(y_val, &pred)
            }
            None => f64::NAN,
        };
        if r > best.0 {
            best = (r, alpha);
        }
        points.push(RidgePoint {
            alpha,
            validation_r2: r,
        });
    }
    (best.1, points)
}

/// Mean and population standard deviation (1 when constant).
pub fn mean_sd(v: &[f64]) -> (f64, f64) {
    let n = v.len().max(1) as f64;
    let m = v.iter().sum::<f64>() / n;
    let var = v.iter().map(|x| (x - m) * (x - m)).sum::<f64>() / n;
    let sd = var.sqrt();
    (m, if sd > 0.0 { sd } else { 1.0 })
}

/// Fit on standardised training rows with a standardised target and predict `x_test` in the
/// target's own units.
pub fn fit_predict(
    x_train: &ArrayView2<f32>,
    y_train: &[f64],
    x_test: &ArrayView2<f32>,
    alpha: f64,
) -> Option<Vec<f64>> {
    let std = Standardizer::fit(x_train);
    let mut xt = x_train.to_owned();
    std.apply(&mut xt);
    let mut xs = x_test.to_owned();
    std.apply(&mut xs);
    let (ym, ysd) = mean_sd(y_train);
    let yt: Vec<f64> = y_train.iter().map(|y| (y - ym) / ysd).collect();
    let fit = Gram::new(&xt.view(), &yt).solve(alpha)?;
    Some(
        fit.predict(&xs.view())
            .iter()
            .map(|p| p * ysd + ym)
            .collect(),
    )
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::Array2;

    #[test]
    fn cholesky_solves_a_known_system() {
        // A = [[4, 2], [2, 3]], b = [2, 1]: w = [0.5, 0] (by hand).
        let a = Array2::from_shape_vec((2, 2), vec![4.0, 2.0, 2.0, 3.0]).unwrap();
        let w = cholesky_solve(a, &[2.0, 1.0]).unwrap();
        assert!((w[0] - 0.5).abs() < 1e-12 && w[1].abs() < 1e-12, "{w:?}");
        let singular = Array2::from_shape_vec((2, 2), vec![1.0, 1.0, 1.0, 1.0]).unwrap();
        assert!(cholesky_solve(singular, &[1.0, 1.0]).is_none());
    }

    #[test]
    fn a_noiseless_line_is_recovered_with_a_tiny_penalty() {
        let x = Array2::from_shape_fn((50, 2), |(i, j)| ((i * (j + 3)) % 17) as f32);
        let y: Vec<f64> = x
            .outer_iter()
            .map(|r| 2.0 * r[0] as f64 - 0.5 * r[1] as f64 + 3.0)
            .collect();
        let fit = Gram::new(&x.view(), &y).solve(1e-9).unwrap();
        assert!((fit.coef[0] - 2.0).abs() < 1e-6, "{:?}", fit.coef);
        assert!((fit.coef[1] + 0.5).abs() < 1e-6, "{:?}", fit.coef);
        assert!((fit.intercept - 3.0).abs() < 1e-5, "{}", fit.intercept);
        assert!((r2(&y, &fit.predict(&x.view())) - 1.0).abs() < 1e-9);
    }

    #[test]
    fn r2_rmse_and_pearson_on_hand_values() {
        // truth 1,2,3,4; prediction 1,2,3,5: SS_res 1, SS_tot 5, R² 0.8, RMSE 0.5 (by hand).
        let t = [1.0, 2.0, 3.0, 4.0];
        let p = [1.0, 2.0, 3.0, 5.0];
        assert!((r2(&t, &p) - 0.8).abs() < 1e-12);
        assert!((rmse(&t, &p) - 0.5).abs() < 1e-12);
        assert!((pearson_r(&t, &t) - 1.0).abs() < 1e-12);
        assert!(pearson_r(&t, &[1.0; 4]).is_nan());
    }
}
