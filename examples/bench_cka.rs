//! Benchmark helper for `bench/run`: the linear CKA matrix between every layer of capture A
//! and every layer of capture B, through `compare::run` (the path `voxstrata compare` takes:
//! layers read from the capture files, centred, feature-space products), without probe
//! deltas. Prints one JSON line with the time and the matrix (A-major).
//!
//! Usage: `bench_cka CAPTURE_A CAPTURE_B`.

use std::path::PathBuf;
use std::time::Instant;

use voxstrata::analysis::compare::{self, CompareOptions};
use voxstrata::{Capture, CommonOptions, OpenOptions, Progress};

fn main() -> Result<(), Box<dyn std::error::Error>> {
    let args: Vec<String> = std::env::args().skip(1).collect();
    if args.len() < 2 {
        return Err("usage: bench_cka CAPTURE_A CAPTURE_B".into());
    }
    let open = OpenOptions::default();
    let a = Capture::open(&PathBuf::from(&args[0]), &open)?;
    let b = Capture::open(&PathBuf::from(&args[1]), &open)?;
    let opts = CompareOptions {
        probe: false,
        ..Default::default()
    };
    let t = Instant::now();
    let r = compare::run(
        &a,
        &b,
        &opts,
        &CommonOptions::default(),
        &Progress::hidden(),
        None,
    )?;
    let secs = t.elapsed().as_secs_f64();
    let rows: Vec<String> = r
        .layers_a
        .iter()
        .map(|&la| {
            let vals: Vec<String> = r
                .layers_b
                .iter()
                .map(|&lb| format!("{}", r.cka_at(la, lb).unwrap_or(f64::NAN)))
                .collect();
            format!("[{}]", vals.join(", "))
        })
        .collect();
    println!(
        "{{\"seconds\": {secs:.6}, \"frames\": {}, \"cka\": [{}]}}",
        r.pairing.used,
        rows.join(", ")
    );
    Ok(())
}
