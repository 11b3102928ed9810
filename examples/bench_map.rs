//! Benchmark helper for `bench/run`: times voxstrata's PCA and t-SNE on a benchmark matrix
//! (`.npy`, f32), the same entry points `voxstrata map` uses. Prints one JSON line.
//!
//! Usage:
//!   `bench_map pca X.npy K SEED [SOLVER]` — PCA (auto by default), top K components;
//!   explained variances.
//!   `bench_map tsne X.npy OUT.npy EARLY ITERS SEED` — t-SNE (perplexity 30, exaggeration 12
//!   for EARLY iterations, then ITERS more) from the first two principal components scaled to
//!   standard deviation 1e-4 (openTSNE's PCA start); the time covers the PCA start, the
//!   affinities and the optimisation; the map is saved to OUT.npy.

use std::path::PathBuf;
use std::time::Instant;

use ndarray::Array2;
use voxstrata::analysis::map::pca::{self, PcaSolver};
use voxstrata::analysis::map::tsne::{self, TsneOptions};
use voxstrata::capture::NpyFile;

fn matrix(path: &std::path::Path) -> Result<Array2<f32>, Box<dyn std::error::Error>> {
    Ok(NpyFile::open(path)?.read_layer(0))
}

fn arg<T: std::str::FromStr>(a: &[String], i: usize, what: &str) -> Result<T, String> {
    a.get(i)
        .and_then(|s| s.parse().ok())
        .ok_or_else(|| format!("argument {i}: expected {what}"))
}

fn main() -> Result<(), Box<dyn std::error::Error>> {
    let a: Vec<String> = std::env::args().skip(1).collect();
    match a.first().map(String::as_str) {
        Some("pca") => {
            let x = matrix(&PathBuf::from(&a[1]))?;
            let k: usize = arg(&a, 2, "K")?;
            let seed: u64 = arg(&a, 3, "SEED")?;
            let solver = match a.get(4).map(String::as_str) {
                None | Some("auto") => PcaSolver::Auto,
                Some("randomized") => PcaSolver::Randomized,
                Some("covariance") => PcaSolver::Covariance,
                Some("exact") => PcaSolver::Exact,
                Some(o) => return Err(format!("solver: expected auto|randomized|covariance|exact, found {o}").into()),
            };
            let t = Instant::now();
            let p = pca::fit(&x.view(), k, solver, seed);
            let secs = t.elapsed().as_secs_f64();
            println!(
                "{{\"seconds\": {secs:.6}, \"solver\": \"{:?}\", \"explained_variance\": {:?}, \"explained_variance_ratio\": {:?}}}",
                p.solver, p.explained_variance, p.explained_variance_ratio
            );
        }
        Some("tsne") => {
            let x = matrix(&PathBuf::from(&a[1]))?;
            let out = PathBuf::from(&a[2]);
            let early: usize = arg(&a, 3, "EARLY")?;
            let iters: usize = arg(&a, 4, "ITERS")?;
            let seed: u64 = arg(&a, 5, "SEED")?;
            let opts = TsneOptions {
                perplexity: 30.0,
                exaggeration: 12.0,
                early_iterations: early,
                iterations: iters,
                ..Default::default()
            };
            let t = Instant::now();
            let p = pca::fit(&x.view(), 2, PcaSolver::Auto, seed);
            let init = tsne::rescale(&p.transform(&x.view()).view(), 1e-4);
            let r = tsne::run(&x.view(), &init.view(), &opts, || {});
            let secs = t.elapsed().as_secs_f64();
            voxstrata::write::write_npy_f32(&out, &r.embedding.view())?;
            println!(
                "{{\"seconds\": {secs:.6}, \"kl_divergence\": {}, \"perplexity\": {}, \"gradient\": \"{}\"}}",
                r.kl_divergence, r.perplexity, r.gradient
            );
        }
        _ => {
            return Err(
                "usage: bench_map pca X.npy K SEED [auto|randomized|covariance|exact] | tsne X.npy OUT.npy EARLY ITERS SEED".into(),
            )
        }
    }
    Ok(())
}
