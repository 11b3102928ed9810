//! Times one probe fit on synthetic data (default 50 000 × 768, 40 classes) and prints the
//! arithmetic rate reached. Usage: `cargo run --release --example probe_fit_timing [n d k]`.

use std::time::Instant;

use ndarray::Array2;
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use voxstrata::analysis::probe::lbfgs::LbfgsOptions;
use voxstrata::analysis::probe::softmax::{self, FitSettings, Standardizer};

fn main() {
    let a: Vec<usize> = std::env::args()
        .skip(1)
        .filter_map(|s| s.parse().ok())
        .collect();
    let (n, d, k) = (
        a.first().copied().unwrap_or(50_000),
        a.get(1).copied().unwrap_or(768),
        a.get(2).copied().unwrap_or(40),
    );
    let mut rng = ChaCha8Rng::seed_from_u64(1);
    let centres = Array2::from_shape_fn((k, d), |_| rng.random::<f32>() - 0.5);
    let y: Vec<u32> = (0..n).map(|_| rng.random_range(0..k as u32)).collect();
    let mut x = Array2::from_shape_fn((n, d), |(i, j)| {
        centres[[y[i] as usize, j]] * 0.12 + rng.random::<f32>() - 0.5
    });
    let st = Standardizer::fit(&x.view());
    st.apply(&mut x);
    let settings = FitSettings {
        c: 1.0 / (1e-3 * n as f64),
        lbfgs: LbfgsOptions {
            max_iter: 100,
            gtol: 1e-4,
            ..Default::default()
        },
    };
    let t = Instant::now();
    let m = softmax::fit(&x.view(), &y, k, &settings, None);
    let secs = t.elapsed().as_secs_f64();
    let pred = softmax::argmax_rows(&m.predict_proba(&x.view()).view());
    let acc = pred.iter().zip(&y).filter(|(a, b)| a == b).count() as f64 / n as f64;
    // Each objective evaluation does two products of 2·n·d·k flops each.
    let flops = m.evaluations as f64 * 4.0 * (n * d * k) as f64;
    println!(
        "n {n} d {d} k {k}: {secs:.2} s, {} iterations, {} evaluations, converged {}, train accuracy {acc:.3}, {:.1} GFLOP/s",
        m.iterations,
        m.evaluations,
        m.converged,
        flops / secs / 1e9
    );
}
