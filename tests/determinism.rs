//! Same seed, same input, same bytes: probe, map and compare outputs (JSON and CSV) must not
//! depend on the thread count (DESIGN.md, Conventions).

mod common;

use std::path::Path;

use common::{demo_dir, read_json, Frames};
use ndarray::Array2;

fn write_capture(dir: &Path, shift: f32) {
    let mut frames = Frames::new(&["utterance", "speaker", "phone"]);
    let mut codes = Vec::new();
    for s in 0..6 {
        for u in 0..3 {
            for i in 0..30 {
                let p = (i / 3 + u + s) % 4;
                frames.push([format!("s{s}u{u}"), format!("s{s}"), format!("p{p}")]);
                codes.push((p, s));
            }
        }
    }
    let layers: Vec<Array2<f32>> = (0..3u64)
        .map(|l| {
            let mut x = 0x2545_F491_4F6C_DD1Du64 ^ l;
            Array2::from_shape_fn((codes.len(), 12), |(i, j)| {
                x ^= x << 13;
                x ^= x >> 7;
                x ^= x << 17;
                let noise = (x >> 40) as f32 / (1u64 << 24) as f32 - 0.5;
                let (p, s) = codes[i];
                noise
                    + if p == j { 1.0 + l as f32 * shift } else { 0.0 }
                    + if s + 4 == j { 1.0 } else { 0.0 }
            })
        })
        .collect();
    common::write_capture(dir, &frames, &layers);
}

fn run(threads: &str, args: &[&str]) {
    let o = common::voxstrata()
        .args(["--quiet", "--seed", "7", "--threads", threads])
        .args(args)
        .output()
        .unwrap();
    assert!(
        o.status.success(),
        "{args:?}: {}",
        String::from_utf8_lossy(&o.stderr)
    );
}

/// Every .json and .csv under `a` equals its twin under `b`, byte for byte.
fn same_records(a: &Path, b: &Path) {
    let mut n = 0;
    for e in std::fs::read_dir(a).unwrap().flatten() {
        let p = e.path();
        if p.extension().is_some_and(|x| x == "json" || x == "csv") {
            let twin = b.join(p.file_name().unwrap());
            assert!(
                std::fs::read(&p).unwrap() == std::fs::read(&twin).unwrap(),
                "{} differs between --threads 1 and --threads 2",
                p.file_name().unwrap().to_string_lossy()
            );
            n += 1;
        }
    }
    assert!(n >= 2, "expected JSON and CSV in {}", a.display());
}

fn check(cmd: &[&str]) {
    let tmp = tempfile::tempdir().unwrap();
    let (a, b) = (tmp.path().join("a"), tmp.path().join("b"));
    write_capture(&a, 0.5);
    write_capture(&b, 1.0);
    let sub = |c: &str| {
        c.replace("{a}", a.to_str().unwrap())
            .replace("{b}", b.to_str().unwrap())
    };
    let o1 = tmp.path().join("t1");
    let o2 = tmp.path().join("t2");
    for (t, o) in [("1", &o1), ("2", &o2)] {
        let mut args: Vec<String> = cmd.iter().map(|c| sub(c)).collect();
        args.push("--out".into());
        args.push(o.to_str().unwrap().into());
        let refs: Vec<&str> = args.iter().map(String::as_str).collect();
        run(t, &refs);
    }
    same_records(&o1, &o2);
}

#[test]
fn probe_is_identical_with_one_and_two_threads() {
    check(&["probe", "{a}", "--bootstrap", "200"]);
}

#[test]
fn pca_map_is_identical_with_one_and_two_threads() {
    check(&["map", "{a}", "--method", "pca", "--per-label", "15"]);
}

#[test]
fn tsne_map_is_identical_with_one_and_two_threads() {
    check(&["map", "{a}", "--method", "tsne", "--per-label", "15"]);
}

#[test]
fn compare_is_identical_with_one_and_two_threads() {
    check(&["compare", "{a}", "{b}", "--bootstrap", "200"]);
}

/// The FFT gradient (maps of 2 500 points or more) on the shipped demo's final capture, one
/// layer, ~4 100 sampled frames: the same records with one and two threads.
#[test]
fn fft_tsne_map_is_identical_with_one_and_two_threads() {
    let demo = demo_dir().join("final");
    let tmp = tempfile::tempdir().unwrap();
    let (o1, o2) = (tmp.path().join("t1"), tmp.path().join("t2"));
    for (t, o) in [("1", &o1), ("2", &o2)] {
        run(
            t,
            &[
                "--layers",
                "3",
                "map",
                demo.to_str().unwrap(),
                "--out",
                o.to_str().unwrap(),
            ],
        );
    }
    let j = read_json(&o1.join("purity.json"));
    assert!(
        j.to_string().contains("\"fft\""),
        "the demo map did not use the FFT gradient"
    );
    same_records(&o1, &o2);
    let (e1, e2) = (o1.join("maps/layer_03.npy"), o2.join("maps/layer_03.npy"));
    assert_eq!(std::fs::read(e1).unwrap(), std::fs::read(e2).unwrap());
}
