//! Benchmark helper for `bench/run`: times reading each layer of a capture as f32 through the
//! capture reader (the path every analysis takes), from the page cache, and saves every
//! `every`-th row of each layer so the harness can compare the values with numpy's.
//!
//! Usage: `bench_read CAPTURE OUT_DIR [repeats] [every]`; prints one JSON line per layer.

use std::path::PathBuf;
use std::time::Instant;

use ndarray::Axis;
use voxstrata::capture::{Capture, OpenOptions};

fn main() -> Result<(), Box<dyn std::error::Error>> {
    let args: Vec<String> = std::env::args().skip(1).collect();
    if args.len() < 2 {
        return Err("usage: bench_read CAPTURE OUT_DIR [repeats] [every]".into());
    }
    let dir = PathBuf::from(&args[0]);
    let out = PathBuf::from(&args[1]);
    let repeats: usize = args.get(2).map(|s| s.parse()).transpose()?.unwrap_or(3);
    let every: usize = args.get(3).map(|s| s.parse()).transpose()?.unwrap_or(997);
    std::fs::create_dir_all(&out)?;
    let cap = Capture::open(&dir, &OpenOptions::default())?;
    for (i, layer) in cap.layers.iter().enumerate() {
        // The first read brings the file into the page cache (or finds it there); the timed
        // reads that follow measure decoding from memory, as the benchmark intends.
        let first = cap.read_layer(i)?;
        let rows: Vec<usize> = (0..first.nrows()).step_by(every.max(1)).collect();
        let sample = first.select(Axis(0), &rows);
        drop(first);
        let mut best = f64::INFINITY;
        let mut shape = (0, 0);
        for _ in 0..repeats.max(1) {
            let t = Instant::now();
            let m = cap.read_layer(i)?;
            let secs = t.elapsed().as_secs_f64();
            shape = m.dim();
            best = best.min(secs);
            drop(m);
        }
        let path = out.join(format!("layer_{:02}_rows.npy", layer.id));
        voxstrata::write::write_npy_f32(&path, &sample.view())?;
        let out_bytes = (shape.0 * shape.1 * 4) as f64;
        println!(
            "{{\"layer\": {}, \"dtype\": \"{}\", \"frames\": {}, \"dim\": {}, \"file_bytes\": {}, \"seconds\": {:.6}, \"out_gb_per_s\": {:.4}, \"every\": {}, \"sample\": \"{}\"}}",
            layer.id,
            layer.dtype().name(),
            shape.0,
            shape.1,
            layer.bytes(),
            best,
            out_bytes / best / 1e9,
            every,
            path.display()
        );
    }
    Ok(())
}
