//! Benchmark helper for `bench/run`: one softmax probe fit on the benchmark's train/test
//! files (`x_train.npy` f32, `y_train.npy` int64, `x_test.npy`, `y_test.npy`), standardised
//! with training statistics, penalty C = 1/(alpha·n) and L-BFGS tolerance as given, exactly
//! the settings the scikit-learn side uses. Times the fit alone, saves the weights for the
//! harness's objective check, prints one JSON line.
//!
//! Usage: `bench_probe_fit DATA_DIR OUT_DIR [alpha] [tol] [max_iter]`.

use std::path::PathBuf;
use std::time::Instant;

use ndarray::{Array1, Array2};
use voxstrata::analysis::probe::lbfgs::LbfgsOptions;
use voxstrata::analysis::probe::softmax::{self, FitSettings, Standardizer};
use voxstrata::capture::NpyFile;

fn labels(path: &std::path::Path) -> Result<Vec<u32>, Box<dyn std::error::Error>> {
    let y: Array1<i64> = ndarray_npy::read_npy(path)?;
    Ok(y.iter().map(|&v| v as u32).collect())
}

fn matrix(path: &std::path::Path) -> Result<Array2<f32>, Box<dyn std::error::Error>> {
    Ok(NpyFile::open(path)?.read_layer(0))
}

fn main() -> Result<(), Box<dyn std::error::Error>> {
    let args: Vec<String> = std::env::args().skip(1).collect();
    if args.len() < 2 {
        return Err("usage: bench_probe_fit DATA_DIR OUT_DIR [alpha] [tol] [max_iter]".into());
    }
    let dir = PathBuf::from(&args[0]);
    let out = PathBuf::from(&args[1]);
    let alpha: f64 = args.get(2).map(|s| s.parse()).transpose()?.unwrap_or(1e-3);
    let tol: f64 = args.get(3).map(|s| s.parse()).transpose()?.unwrap_or(1e-4);
    let max_iter: usize = args.get(4).map(|s| s.parse()).transpose()?.unwrap_or(1000);
    std::fs::create_dir_all(&out)?;

    let mut x = matrix(&dir.join("x_train.npy"))?;
    let y = labels(&dir.join("y_train.npy"))?;
    let mut xt = matrix(&dir.join("x_test.npy"))?;
    let yt = labels(&dir.join("y_test.npy"))?;
    let k = y
        .iter()
        .chain(&yt)
        .copied()
        .max()
        .map_or(0, |m| m as usize + 1);
    let (n, d) = x.dim();
    let st = Standardizer::fit(&x.view());
    st.apply(&mut x);
    st.apply(&mut xt);
    let settings = FitSettings {
        c: 1.0 / (alpha * n as f64),
        lbfgs: LbfgsOptions {
            max_iter,
            gtol: tol,
            ..Default::default()
        },
    };
    let t = Instant::now();
    let m = softmax::fit(&x.view(), &y, k, &settings, None);
    let secs = t.elapsed().as_secs_f64();
    let pred = softmax::argmax_rows(&m.predict_proba(&xt.view()).view());
    let acc = pred.iter().zip(&yt).filter(|(a, b)| a == b).count() as f64 / yt.len() as f64;
    // Each objective evaluation does two products of 2·n·d·k flops each (scores, gradient).
    let flops = m.evaluations as f64 * 4.0 * (n * d * k) as f64;
    voxstrata::write::write_npy_f32(&out.join("coef.npy"), &m.w.view())?;
    let b = Array2::from_shape_vec((1, k), m.b.clone())?;
    voxstrata::write::write_npy_f32(&out.join("intercept.npy"), &b.view())?;
    println!(
        "{{\"n\": {n}, \"d\": {d}, \"k\": {k}, \"c\": {}, \"seconds\": {secs:.6}, \"iterations\": {}, \"evaluations\": {}, \"converged\": {}, \"test_accuracy\": {acc:.6}, \"objective\": {}, \"gflops\": {:.3}}}",
        settings.c,
        m.iterations,
        m.evaluations,
        m.converged,
        m.objective,
        flops / secs / 1e9
    );
    Ok(())
}
