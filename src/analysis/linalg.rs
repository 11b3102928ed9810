//! Dense linear algebra helpers with deterministic parallelism: work is split into fixed
//! blocks of rows (independent of the thread count) and partial sums are added in block
//! order, so results are bit-identical whatever `--threads` says. Each block uses
//! `matrixmultiply`'s single-threaded GEMM through ndarray.

use ndarray::{s, Array2, ArrayView2, Axis, Zip};
use rayon::prelude::*;

/// Rows per block for parallel products.
pub const BLOCK_ROWS: usize = 512;

/// `A · B` with rows of A split across threads (output rows are independent, so the
/// result does not depend on the split).
pub fn matmul(a: &ArrayView2<f32>, b: &ArrayView2<f32>) -> Array2<f32> {
    let (n, _) = a.dim();
    let m = b.ncols();
    let mut out = Array2::<f32>::zeros((n, m));
    out.axis_chunks_iter_mut(Axis(0), BLOCK_ROWS)
        .into_par_iter()
        .enumerate()
        .for_each(|(i, mut o)| {
            let lo = i * BLOCK_ROWS;
            let hi = (lo + BLOCK_ROWS).min(n);
            ndarray::linalg::general_mat_mul(1.0, &a.slice(s![lo..hi, ..]), b, 0.0, &mut o);
        });
    out
}

/// `Aᵀ · B` for tall A (n × p) and B (n × q): per-block products summed in block order,
/// accumulated in f64 for accuracy.
pub fn at_b(a: &ArrayView2<f32>, b: &ArrayView2<f32>) -> Array2<f64> {
    assert_eq!(a.nrows(), b.nrows());
    let n = a.nrows();
    let (p, q) = (a.ncols(), b.ncols());
    let nb = n.div_ceil(BLOCK_ROWS * 4).max(1);
    let parts: Vec<Array2<f32>> = (0..nb)
        .into_par_iter()
        .map(|i| {
            let lo = i * BLOCK_ROWS * 4;
            let hi = (lo + BLOCK_ROWS * 4).min(n);
            a.slice(s![lo..hi, ..]).t().dot(&b.slice(s![lo..hi, ..]))
        })
        .collect();
    let mut out = Array2::<f64>::zeros((p, q));
    for part in parts {
        Zip::from(&mut out)
            .and(&part)
            .for_each(|o, &v| *o += v as f64);
    }
    out
}

/// Column means in f64 (blocked, deterministic).
pub fn col_means(a: &ArrayView2<f32>) -> Vec<f64> {
    let n = a.nrows();
    let p = a.ncols();
    let parts: Vec<Vec<f64>> = a
        .axis_chunks_iter(Axis(0), BLOCK_ROWS * 4)
        .into_par_iter()
        .map(|blk| {
            let mut s = vec![0f64; p];
            for row in blk.outer_iter() {
                for (acc, &v) in s.iter_mut().zip(row.iter()) {
                    *acc += v as f64;
                }
            }
            s
        })
        .collect();
    let mut s = vec![0f64; p];
    for part in parts {
        for (a, b) in s.iter_mut().zip(part) {
            *a += b;
        }
    }
    s.iter().map(|v| v / n.max(1) as f64).collect()
}

/// `e^x` in f32 without a library call, so loops over it vectorise: Cody–Waite reduction
/// `x = k·ln 2 + r` and the degree-6 polynomial of the Cephes library's `expf` (S. Moshier).
/// Relative error below 3e-7 over the range where the result is normal (checked against
/// `f32::exp` in the tests); inputs below −87.3 give the smallest normal value's neighbourhood
/// instead of a subnormal, above 88.3 the value at 88.3 (finite).
#[inline(always)]
pub fn exp_f32(x: f32) -> f32 {
    const LOG2E: f32 = std::f32::consts::LOG2_E;
    const C1: f32 = 0.693_359_4;
    const C2: f32 = -2.121_944_4e-4;
    const MAGIC: f32 = 12_582_912.0; // 1.5 · 2^23: adding it rounds to an integer
    let x = x.clamp(-87.3, 88.3);
    let t = x * LOG2E + MAGIC;
    let k = t - MAGIC;
    let ki = (t.to_bits() as i32).wrapping_sub(MAGIC.to_bits() as i32);
    let r = x - k * C1 - k * C2;
    let mut p = 1.987_569_1e-4f32;
    p = p * r + 1.398_199_9e-3;
    p = p * r + 8.333_452e-3;
    p = p * r + 4.166_579_6e-2;
    p = p * r + 0.166_666_65;
    p = p * r + 0.5;
    let e = p * r * r + r + 1.0;
    e * f32::from_bits(((ki + 127) as u32) << 23)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn exp_f32_matches_the_library_exponential() {
        // reference: the platform's correctly rounded-ish f64 exp, rounded to f32
        let mut worst = 0f64;
        let mut x = -87.0f32;
        while x < 88.0 {
            let want = (x as f64).exp();
            let got = exp_f32(x) as f64;
            worst = worst.max(((got - want) / want).abs());
            x += 0.0137;
        }
        assert!(worst < 3e-7, "worst relative error {worst}");
        assert_eq!(exp_f32(0.0), 1.0);
        assert!(exp_f32(-1000.0) > 0.0 && exp_f32(-1000.0) < 1e-37);
        assert!(exp_f32(1000.0).is_finite());
    }

    #[test]
    fn blocked_products_match_plain_dot() {
        let a = Array2::from_shape_fn((1300, 7), |(i, j)| ((i * 31 + j * 17) % 13) as f32 - 6.0);
        let b = Array2::from_shape_fn((7, 5), |(i, j)| ((i * 5 + j) % 7) as f32 * 0.5);
        assert_eq!(matmul(&a.view(), &b.view()), a.dot(&b));
        let c = Array2::from_shape_fn((1300, 3), |(i, j)| ((i + j) % 5) as f32);
        let want = a.t().dot(&c).mapv(|v| v as f64);
        assert_eq!(at_b(&a.view(), &c.view()), want);
    }
}
