//! Time linear CKA: the throughput of `linalg::at_b` on one 20 000 × 768 pair, and a full
//! 13 × 13 layer comparison of two captures written to a temporary folder.
//!
//! cargo run --release --example cka_speed -- [frames] [dim] [layers]

use std::time::Instant;

use ndarray::Array2;
use rand::Rng;
use rand_chacha::rand_core::SeedableRng;
use rand_chacha::ChaCha8Rng;
use voxstrata::analysis::compare::{self, CompareOptions};
use voxstrata::{Capture, CommonOptions, OpenOptions, Progress};

fn random(n: usize, d: usize, seed: u64) -> Array2<f32> {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    Array2::from_shape_fn((n, d), |_| rng.random_range(-1.0f32..1.0))
}

fn write_capture(dir: &std::path::Path, n: usize, d: usize, layers: usize, seed: u64) {
    std::fs::create_dir_all(dir).unwrap();
    let mut tsv = String::from("utterance\tspeaker\tphone\n");
    for i in 0..n {
        tsv.push_str(&format!("u{}\ts{}\tp{}\n", i / 200, i / 2000, (i / 7) % 40));
    }
    std::fs::write(dir.join("frames.tsv"), tsv).unwrap();
    for l in 0..layers {
        ndarray_npy::write_npy(
            dir.join(format!("layer_{l:02}.npy")),
            &random(n, d, seed * 100 + l as u64),
        )
        .unwrap();
    }
}

fn main() {
    let args: Vec<usize> = std::env::args()
        .skip(1)
        .filter_map(|a| a.parse().ok())
        .collect();
    let n = args.first().copied().unwrap_or(20_000);
    let d = args.get(1).copied().unwrap_or(768);
    let layers = args.get(2).copied().unwrap_or(13);
    let x = random(n, d, 1);
    let y = random(n, d, 2);
    let _ = voxstrata::analysis::linalg::at_b(&x.view(), &y.view());
    let reps = 3;
    let t = Instant::now();
    for _ in 0..reps {
        std::hint::black_box(voxstrata::analysis::linalg::at_b(&x.view(), &y.view()));
    }
    let s = t.elapsed().as_secs_f64() / reps as f64;
    let flop = 2.0 * n as f64 * d as f64 * d as f64;
    println!(
        "at_b {n}x{d} by {n}x{d}: {:.3} s, {:.1} GFLOP/s",
        s,
        flop / s / 1e9
    );
    drop((x, y));

    let tmp = std::env::temp_dir().join(format!("voxstrata-cka-speed-{}", std::process::id()));
    write_capture(&tmp.join("a"), n, d, layers, 1);
    write_capture(&tmp.join("b"), n, d, layers, 2);
    let open = OpenOptions::default();
    let a = Capture::open(&tmp.join("a"), &open).unwrap();
    let b = Capture::open(&tmp.join("b"), &open).unwrap();
    // Reading and centring one layer, for comparison with one product.
    let t = Instant::now();
    let mut x = a.read_layer(0).unwrap();
    let t_read = t.elapsed().as_secs_f64();
    voxstrata::analysis::compare::cka::centre(&mut x);
    println!(
        "read one layer: {:.3} s, centre it: {:.3} s",
        t_read,
        t.elapsed().as_secs_f64() - t_read
    );
    drop(x);
    let t = Instant::now();
    let r = compare::run(
        &a,
        &b,
        // CKA only: the probe deltas are timed with the probe stage.
        &CompareOptions {
            probe: false,
            ..Default::default()
        },
        &CommonOptions::default(),
        &Progress::hidden(),
        None,
    )
    .unwrap();
    let s = t.elapsed().as_secs_f64();
    // The plain formula's work: L² cross products and 2L Gram products XᵀX (our Gram norms
    // use the symmetric upper triangle, so the actual work is a little less).
    let products = (layers * layers + 2 * layers) as f64;
    println!(
        "linear CKA {layers}x{layers} layers, {n} frames x {d} dims: {:.2} s ({} values; {:.1} GFLOP/s by the plain formula's {} products)",
        s,
        r.cka.len(),
        products * flop / s / 1e9,
        products
    );
    let _ = std::fs::remove_dir_all(&tmp);
}
