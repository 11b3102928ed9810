//! Centred kernel alignment (CKA; Kornblith et al. 2019) between two representations of the
//! same n examples.
//!
//! - Linear CKA in feature space: with column-centred X (n × p) and Y (n × q),
//!   CKA = ||YᵀX||²_F / (||XᵀX||_F · ||YᵀY||_F), which equals the Gram-matrix form
//!   HSIC(XXᵀ, YYᵀ) / √(HSIC(XXᵀ, XXᵀ) HSIC(YYᵀ, YYᵀ)) without any n × n matrix. Products go
//!   through [`crate::analysis::linalg::at_b`] (f32 GEMM blocks summed in f64, deterministic).
//! - RBF CKA: Gaussian kernel exp(−d²/(2σ²)) with σ the median pairwise (i < j) distance, on
//!   a subsample (n × n Gram matrices, f64), centred with H = I − 11ᵀ/n.
//! - Minibatch CKA (Nguyen et al. 2021): the unbiased HSIC estimator of Song et al. (2012)
//!   with linear kernels, averaged over minibatches, for frame counts too large for one pass.

use ndarray::{Array2, ArrayView2, Axis};

use crate::analysis::linalg;

/// Subtract column means (computed in f64) in place.
pub fn centre(x: &mut Array2<f32>) {
    let means = linalg::col_means(&x.view());
    let m: Vec<f32> = means.iter().map(|&v| v as f32).collect();
    x.axis_iter_mut(Axis(0)).for_each(|mut row| {
        for (v, &mu) in row.iter_mut().zip(&m) {
            *v -= mu;
        }
    });
}

/// Squared Frobenius norm of an f64 matrix, summed in row order.
pub fn fro2(m: &Array2<f64>) -> f64 {
    m.iter().map(|v| v * v).sum()
}

/// Column blocks used by [`gram_norm`]: XᵀX is symmetric, so only the blocks on and above
/// the diagonal are computed — (k + 1) / (2k) of the full product's work.
const GRAM_COL_BLOCKS: usize = 4;

/// ||XᵀX||_F for a centred X, from the upper block triangle of XᵀX (off-diagonal blocks
/// count twice).
pub fn gram_norm(x: &ArrayView2<f32>) -> f64 {
    let p = x.ncols();
    let k = GRAM_COL_BLOCKS.min(p.div_ceil(64)).max(1);
    let w = p.div_ceil(k);
    let cols: Vec<(usize, usize)> = (0..k)
        .map(|b| (b * w, ((b + 1) * w).min(p)))
        .filter(|(lo, hi)| lo < hi)
        .collect();
    let mut total = 0.0;
    for (bi, &(a0, a1)) in cols.iter().enumerate() {
        for &(b0, b1) in &cols[bi..] {
            let blk = linalg::at_b(
                &x.slice(ndarray::s![.., a0..a1]),
                &x.slice(ndarray::s![.., b0..b1]),
            );
            total += if a0 == b0 {
                fro2(&blk)
            } else {
                2.0 * fro2(&blk)
            };
        }
    }
    total.sqrt()
}

/// ||YᵀX||²_F for centred X and Y with the same rows.
pub fn cross2(x: &ArrayView2<f32>, y: &ArrayView2<f32>) -> f64 {
    // Put the narrower matrix second: the product is p × q either way, the cost the same.
    fro2(&linalg::at_b(y, x))
}

/// Linear CKA from the cross term and the two Gram norms (0 when either side is constant).
/// CKA lies in [0, 1] (Cauchy–Schwarz); rounding can overshoot by an ulp, so it is clamped.
pub fn linear_from_parts(cross2: f64, norm_x: f64, norm_y: f64) -> f64 {
    let d = norm_x * norm_y;
    if d > 0.0 && d.is_finite() {
        (cross2 / d).clamp(0.0, 1.0)
    } else {
        0.0
    }
}

/// Linear CKA of two (uncentred) representations of the same rows.
pub fn linear_cka(x: &ArrayView2<f32>, y: &ArrayView2<f32>) -> f64 {
    let mut xc = x.to_owned();
    let mut yc = y.to_owned();
    centre(&mut xc);
    centre(&mut yc);
    linear_from_parts(
        cross2(&xc.view(), &yc.view()),
        gram_norm(&xc.view()),
        gram_norm(&yc.view()),
    )
}

/// Pairwise squared Euclidean distances in f64 (n × n).
fn sq_distances(x: &ArrayView2<f32>) -> Array2<f64> {
    let x64 = x.mapv(|v| v as f64);
    // Centre first: the norms shrink and the cancellation in |a|² + |b|² − 2a·b with them.
    let means = x64
        .mean_axis(Axis(0))
        .unwrap_or_else(|| ndarray::Array1::zeros(x64.ncols()));
    let xc = &x64 - &means;
    let g = xc.dot(&xc.t());
    let n = g.nrows();
    let diag: Vec<f64> = (0..n).map(|i| g[[i, i]]).collect();
    Array2::from_shape_fn((n, n), |(i, j)| {
        if i == j {
            0.0
        } else {
            (diag[i] + diag[j] - 2.0 * g[[i, j]]).max(0.0)
        }
    })
}

/// Median of the pairwise (i < j) Euclidean distances given squared distances.
pub fn median_distance(d2: &Array2<f64>) -> f64 {
    let n = d2.nrows();
    let mut v: Vec<f64> = Vec::with_capacity(n * n.saturating_sub(1) / 2);
    for i in 0..n {
        for j in i + 1..n {
            v.push(d2[[i, j]].sqrt());
        }
    }
    if v.is_empty() {
        return 0.0;
    }
    v.sort_by(f64::total_cmp);
    let m = v.len();
    if m % 2 == 1 {
        v[m / 2]
    } else {
        0.5 * (v[m / 2 - 1] + v[m / 2])
    }
}

/// Double-centre a symmetric matrix: H K H with H = I − 11ᵀ/n.
pub fn double_centre(k: &mut Array2<f64>) {
    let n = k.nrows();
    if n == 0 {
        return;
    }
    let row_means: Vec<f64> = k.outer_iter().map(|r| r.sum() / n as f64).collect();
    let grand = row_means.iter().sum::<f64>() / n as f64;
    for i in 0..n {
        for j in 0..n {
            k[[i, j]] += grand - row_means[i] - row_means[j];
        }
    }
}

/// Centred RBF Gram matrix scaled to unit Frobenius norm, and the bandwidth σ used.
/// With two such matrices, RBF CKA is their elementwise inner product.
pub fn rbf_unit_gram(x: &ArrayView2<f32>) -> (Array2<f64>, f64) {
    let d2 = sq_distances(x);
    let sigma = median_distance(&d2);
    let mut k = if sigma > 0.0 {
        let s2 = 2.0 * sigma * sigma;
        d2.mapv(|v| (-v / s2).exp())
    } else {
        // All points coincide: a constant kernel, which centres to zero.
        Array2::ones(d2.dim())
    };
    double_centre(&mut k);
    let norm = fro2(&k).sqrt();
    if norm > 0.0 {
        k.mapv_inplace(|v| v / norm);
    }
    (k, sigma)
}

/// Elementwise inner product of two equally shaped matrices, summed in row order.
pub fn frobenius_inner(a: &Array2<f64>, b: &Array2<f64>) -> f64 {
    a.iter().zip(b.iter()).map(|(x, y)| x * y).sum()
}

/// RBF CKA of two representations of the same rows (median-distance bandwidth each).
pub fn rbf_cka(x: &ArrayView2<f32>, y: &ArrayView2<f32>) -> f64 {
    let (k, _) = rbf_unit_gram(x);
    let (l, _) = rbf_unit_gram(y);
    frobenius_inner(&k, &l)
}

/// Linear-kernel Gram matrix X Xᵀ in f64 (for minibatches).
pub fn linear_gram(x: &ArrayView2<f32>) -> Array2<f64> {
    let x64 = x.mapv(|v| v as f64);
    x64.dot(&x64.t())
}

/// Unbiased HSIC estimator (Song et al. 2012) of two n × n kernel matrices, n ≥ 4:
/// [tr(K̃L̃) + 1ᵀK̃1 · 1ᵀL̃1 / ((n−1)(n−2)) − 2/(n−2) · 1ᵀK̃L̃1] / (n(n−3)),
/// with K̃, L̃ the kernels with zeroed diagonals.
pub fn hsic_unbiased(k: &Array2<f64>, l: &Array2<f64>) -> f64 {
    let n = k.nrows();
    if n < 4 {
        return f64::NAN;
    }
    let off = |m: &Array2<f64>, i: usize, j: usize| if i == j { 0.0 } else { m[[i, j]] };
    let mut tr = 0.0;
    let mut sum_k = 0.0;
    let mut sum_l = 0.0;
    let mut row_k = vec![0.0; n];
    let mut row_l = vec![0.0; n];
    for i in 0..n {
        for j in 0..n {
            let (a, b) = (off(k, i, j), off(l, i, j));
            tr += a * b;
            row_k[i] += a;
            row_l[i] += b;
        }
        sum_k += row_k[i];
        sum_l += row_l[i];
    }
    // 1ᵀK̃L̃1 = Σ_i (K̃1)_i (L̃1)_i for symmetric kernels.
    let kl1: f64 = row_k.iter().zip(&row_l).map(|(a, b)| a * b).sum();
    let nf = n as f64;
    (tr + sum_k * sum_l / ((nf - 1.0) * (nf - 2.0)) - 2.0 / (nf - 2.0) * kl1) / (nf * (nf - 3.0))
}

/// Running sums for minibatch CKA: Σ HSIC₁(K, L), Σ HSIC₁(K, K), Σ HSIC₁(L, L).
#[derive(Clone, Copy, Debug, Default)]
pub struct MinibatchSums {
    /// Σ over batches of HSIC₁(K, L).
    pub kl: f64,
    /// Σ over batches of HSIC₁(K, K).
    pub kk: f64,
    /// Σ over batches of HSIC₁(L, L).
    pub ll: f64,
}

impl MinibatchSums {
    /// CKA = Σ HSIC₁(K, L) / √(Σ HSIC₁(K, K) · Σ HSIC₁(L, L)) (0 when undefined).
    pub fn cka(&self) -> f64 {
        let d = (self.kk * self.ll).sqrt();
        if d > 0.0 && d.is_finite() {
            self.kl / d
        } else {
            0.0
        }
    }
}

/// Minibatch linear CKA of X and Y over the given batches of row indices.
pub fn minibatch_linear_cka(
    x: &ArrayView2<f32>,
    y: &ArrayView2<f32>,
    batches: &[Vec<usize>],
) -> f64 {
    let mut s = MinibatchSums::default();
    for b in batches {
        let k = linear_gram(&x.select(Axis(0), b).view());
        let l = linear_gram(&y.select(Axis(0), b).view());
        s.kl += hsic_unbiased(&k, &l);
        s.kk += hsic_unbiased(&k, &k);
        s.ll += hsic_unbiased(&l, &l);
    }
    s.cka()
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::Rng;
    use rand_chacha::rand_core::SeedableRng;
    use rand_chacha::ChaCha8Rng;

    fn random(n: usize, p: usize, seed: u64) -> Array2<f32> {
        let mut rng = ChaCha8Rng::seed_from_u64(seed);
        Array2::from_shape_fn((n, p), |_| rng.random_range(-1.0f32..1.0))
    }

    /// A random orthogonal matrix from Gram–Schmidt on random columns.
    fn orthogonal(p: usize, seed: u64) -> Array2<f32> {
        let a = random(p, p, seed).mapv(|v| v as f64);
        let mut q = Array2::<f64>::zeros((p, p));
        for j in 0..p {
            let mut v = a.column(j).to_owned();
            for k in 0..j {
                let qk = q.column(k).to_owned();
                let d = v.dot(&qk);
                v = v - &qk * d;
            }
            let n = v.dot(&v).sqrt();
            q.column_mut(j).assign(&(v / n));
        }
        q.mapv(|v| v as f32)
    }

    fn ref_dir() -> std::path::PathBuf {
        std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/reference/compare")
    }

    fn load(name: &str) -> Array2<f32> {
        ndarray_npy::read_npy(ref_dir().join(name)).expect("fixture")
    }

    fn expected() -> serde_json::Value {
        let text = std::fs::read_to_string(ref_dir().join("expected.json")).expect("fixture");
        serde_json::from_str(&text).expect("json")
    }

    #[test]
    fn cka_of_a_representation_with_itself_is_one() {
        // Kornblith et al. (2019): CKA(X, X) = 1.
        let x = random(300, 20, 1);
        assert!((linear_cka(&x.view(), &x.view()) - 1.0).abs() < 1e-9);
        assert!((rbf_cka(&x.view(), &x.view()) - 1.0).abs() < 1e-12);
    }

    #[test]
    fn cka_is_invariant_to_rotation_and_isotropic_scaling() {
        // Kornblith et al. (2019), section 3: invariance to orthogonal transforms and
        // isotropic scaling, for linear and RBF (median bandwidth) CKA.
        let x = random(250, 16, 2);
        let y = random(250, 10, 3) + x.slice(ndarray::s![.., 0..10]);
        let base = linear_cka(&x.view(), &y.view());
        let q = orthogonal(16, 4);
        let xr = x.dot(&q);
        assert!((linear_cka(&xr.view(), &y.view()) - base).abs() < 1e-6);
        let xs = x.mapv(|v| v * 7.5);
        assert!((linear_cka(&xs.view(), &y.view()) - base).abs() < 1e-6);
        let rb = rbf_cka(&x.view(), &y.view());
        assert!((rbf_cka(&xr.view(), &y.view()) - rb).abs() < 1e-6);
        assert!((rbf_cka(&xs.view(), &y.view()) - rb).abs() < 1e-6);
    }

    #[test]
    fn cka_is_not_invariant_to_an_arbitrary_invertible_map() {
        // Kornblith et al. (2019): invariance to all invertible linear maps would make CKA
        // meaningless when p ≥ n; CKA deliberately lacks it. Stretch one axis by 20.
        let x = random(250, 16, 5);
        let y = random(250, 10, 6) + x.slice(ndarray::s![.., 0..10]);
        let mut a = Array2::<f32>::eye(16);
        a[[3, 3]] = 20.0;
        a[[0, 1]] = 3.0;
        let xa = x.dot(&a);
        let base = linear_cka(&x.view(), &y.view());
        let changed = linear_cka(&xa.view(), &y.view());
        assert!((base - changed).abs() > 0.05, "{base} vs {changed}");
    }

    #[test]
    fn linear_cka_matches_numpy_gram_formula() {
        // tests/reference/make_compare.py: HSIC with the centring matrix H, in numpy.
        let e = expected();
        let x = load("random_x.npy");
        let y = load("random_y.npy");
        let v = linear_cka(&x.view(), &y.view());
        assert!(
            (v - e["linear_random"].as_f64().unwrap()).abs() < 1e-6,
            "{v}"
        );
        // Iris (scikit-learn's copy) against a seeded noisy copy of itself.
        let a = load("iris.npy");
        let b = load("iris_noisy.npy");
        let v = linear_cka(&a.view(), &b.view());
        assert!((v - e["linear_iris"].as_f64().unwrap()).abs() < 1e-6, "{v}");
    }

    #[test]
    fn rbf_cka_matches_numpy_with_median_bandwidth() {
        // tests/reference/make_compare.py: scipy pdist median bandwidth, Gram-matrix HSIC.
        let e = expected();
        let x = load("rbf_x.npy");
        let y = load("rbf_y.npy");
        let (_, sx) = rbf_unit_gram(&x.view());
        assert!((sx - e["rbf_sigma_x"].as_f64().unwrap()).abs() < 1e-6);
        let v = rbf_cka(&x.view(), &y.view());
        assert!((v - e["rbf"].as_f64().unwrap()).abs() < 1e-6, "{v}");
    }

    #[test]
    fn unbiased_hsic_and_minibatch_cka_match_numpy() {
        // tests/reference/make_compare.py: Song et al. (2012) estimator written out in numpy.
        let e = expected();
        let x = load("random_x.npy");
        let y = load("random_y.npy");
        let xs = x.slice(ndarray::s![0..30, ..]);
        let ys = y.slice(ndarray::s![0..30, ..]);
        let h = hsic_unbiased(&linear_gram(&xs), &linear_gram(&ys));
        let want = e["hsic_unbiased_30"].as_f64().unwrap();
        assert!((h - want).abs() / want.abs() < 1e-6, "{h} vs {want}");
        let batches: Vec<Vec<usize>> = (0..4).map(|i| (50 * i..50 * (i + 1)).collect()).collect();
        let v = minibatch_linear_cka(&x.view(), &y.view(), &batches);
        assert!(
            (v - e["minibatch_cka_50"].as_f64().unwrap()).abs() < 1e-6,
            "{v}"
        );
    }

    #[test]
    fn blocked_gram_norm_equals_the_full_product() {
        for p in [1, 7, 64, 130, 300] {
            let x = random(90, p, p as u64);
            let full = fro2(&linalg::at_b(&x.view(), &x.view())).sqrt();
            assert!(
                (gram_norm(&x.view()) - full).abs() <= 1e-9 * full,
                "p = {p}"
            );
        }
    }

    #[test]
    fn constant_representation_gives_zero_not_nan() {
        let x = Array2::<f32>::ones((50, 4));
        let y = random(50, 3, 9);
        assert_eq!(linear_cka(&x.view(), &y.view()), 0.0);
        assert!(rbf_cka(&x.view(), &y.view()).abs() < 1e-12);
    }
}
