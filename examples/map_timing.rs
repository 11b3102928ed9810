//! Time the map stage's two heavy parts on synthetic data: t-SNE of 10 000 points × 50 dims
//! (1 000 iterations, FFT gradient) with its trustworthiness (k = 10), and randomized PCA
//! top-50 of 50 000 × 768. Run: `cargo run --release --example map_timing`.
//!
//! `map_timing X.npy [Y.npy]` runs only the t-SNE, on the points in `X.npy` (f32, n × dim),
//! and writes the map to `Y.npy`, so it can be compared with another implementation on the
//! same data (trustworthiness by scikit-learn on both maps).

use std::time::Instant;

use ndarray::Array2;
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use voxstrata::analysis::map::{pca, tsne};
use voxstrata::analysis::purity;

/// Gaussian mixture: `k` centres in `d` dims plus unit noise (a low-rank signal for PCA).
fn mixture(n: usize, d: usize, k: usize, spread: f32, seed: u64) -> Array2<f32> {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let mut g = move || {
        let u1: f64 = rng.random::<f64>().max(1e-300);
        let u2: f64 = rng.random::<f64>();
        ((-2.0 * u1.ln()).sqrt() * (std::f64::consts::TAU * u2).cos()) as f32
    };
    let centres = Array2::from_shape_fn((k, d), |_| g() * spread);
    Array2::from_shape_fn((n, d), |(i, j)| centres[[i % k, j]] + g())
}

fn main() {
    let args: Vec<String> = std::env::args().skip(1).collect();
    let x = match args.first() {
        Some(path) => ndarray_npy::read_npy::<_, Array2<f32>>(path).expect("an f32 2-D .npy"),
        None => mixture(10_000, 50, 30, 1.5, 1),
    };
    let p = pca::fit(&x.view(), 2, pca::PcaSolver::Exact, 0);
    let init = tsne::rescale(&p.transform(&x.view()).view(), 1e-4);
    let t = Instant::now();
    let r = tsne::run(
        &x.view(),
        &init.view(),
        &tsne::TsneOptions::default(),
        || {},
    );
    let secs = t.elapsed().as_secs_f64();
    let trust = purity::trustworthiness(&x.view(), &r.embedding.view(), 10).unwrap_or(f64::NAN);
    println!(
        "t-SNE {} x {}, 250 + 750 iterations ({}): {secs:.1} s, KL {:.3}, trustworthiness(k=10) {trust:.4}",
        x.nrows(),
        x.ncols(),
        r.gradient,
        r.kl_divergence
    );
    if let Some(path) = args.get(1) {
        ndarray_npy::write_npy(path, &r.embedding).expect("writable output path");
    }
    if !args.is_empty() {
        return;
    }
    let big = mixture(50_000, 768, 200, 0.5, 2);
    let t = Instant::now();
    let p = pca::fit(&big.view(), 50, pca::PcaSolver::Randomized, 0);
    println!(
        "randomized PCA top-50 of 50000 x 768: {:.2} s, explained variance (50) {:.4}",
        t.elapsed().as_secs_f64(),
        p.explained_variance_ratio.iter().sum::<f64>()
    );
}
