//! Regression probes of continuous columns through the binary: R² on a synthetic capture whose
//! answer is known, the records and CSV columns of each kind, the frames without a value, and
//! the bad inputs of a continuous task.

mod common;

use std::path::Path;

use common::{read_json, run_text, Frames};
use ndarray::Array2;
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;

/// Standard normal draw (Box-Muller).
fn normal(rng: &mut ChaCha8Rng) -> f64 {
    let u: f64 = rng.random_range(f64::EPSILON..1.0);
    let v: f64 = rng.random();
    (-2.0 * u.ln()).sqrt() * (2.0 * std::f64::consts::PI * v).cos()
}

/// Noise variance of the target in [`linear_capture`].
const NOISE_VAR: f64 = 0.25;

/// 10 speakers × 4 utterances × 50 frames. Layer 0 is 8 independent standard normal features
/// x; the column `y` is `w·x + ε` with |w|² = 1 and ε of variance [`NOISE_VAR`], so the best
/// linear prediction of y from layer 0 has R² = 1 − σ²_ε / (|w|² + σ²_ε) = 0.8. Layer 1 is
/// noise unrelated to y (R² about 0). Every 10th frame of each utterance has no value
/// (`blank` of them empty, the others `nan`). A `phone` column (runs of 5 frames) gives the
/// control types and a categorical task.
fn linear_capture(dir: &Path, blank: bool) {
    let mut rng = ChaCha8Rng::seed_from_u64(11);
    let d = 8;
    let w: Vec<f64> = (0..d).map(|j| if j < 4 { 0.5 } else { 0.0 }).collect(); // |w|² = 4·0.25 = 1
    let mut f = Frames::new(&["utterance", "speaker", "phone", "y"]);
    let n = 10 * 4 * 50;
    let mut l0 = Array2::<f32>::zeros((n, d));
    let mut l1 = Array2::<f32>::zeros((n, d));
    let mut r = 0;
    for s in 0..10 {
        for u in 0..4 {
            for i in 0..50 {
                let x: Vec<f64> = (0..d).map(|_| normal(&mut rng)).collect();
                let y: f64 = x.iter().zip(&w).map(|(a, b)| a * b).sum::<f64>()
                    + NOISE_VAR.sqrt() * normal(&mut rng);
                for j in 0..d {
                    l0[[r, j]] = x[j] as f32;
                    l1[[r, j]] = normal(&mut rng) as f32;
                }
                let value = match (i % 10 == 9, blank) {
                    (true, true) => String::new(),
                    (true, false) => "nan".into(),
                    _ => format!("{y:.7}"),
                };
                let phone = ["a", "b", "c"][rng.random_range(0..3)];
                let phone = if i % 5 == 0 {
                    phone.to_string()
                } else {
                    String::new()
                };
                f.push([format!("s{s}u{u}"), format!("s{s}"), phone, value]);
                r += 1;
            }
        }
    }
    // Phones hold for runs of 5 frames: fill the blanks from the run's first frame.
    let mut last = String::new();
    for row in &mut f.rows {
        if row[2].is_empty() {
            row[2] = last.clone();
        } else {
            last = row[2].clone();
        }
    }
    common::write_capture(dir, &f, &[l0, l1]);
}

fn record(j: &serde_json::Value, layer: u64, task: &str) -> serde_json::Value {
    j["records"]
        .as_array()
        .unwrap()
        .iter()
        .find(|r| r["layer"] == layer && r["task"] == task)
        .unwrap_or_else(|| panic!("no record for layer {layer}, task {task}"))
        .clone()
}

#[test]
fn r2_matches_the_known_share_of_explained_variance() {
    let t = tempfile::tempdir().unwrap();
    let cap = t.path().join("cap");
    linear_capture(&cap, true);
    let out = t.path().join("out");
    let r = run_text([
        "probe",
        common::s(&cap),
        "--out",
        common::s(&out),
        "--quiet",
    ]);
    assert_eq!(r.code, 0, "{}", r.stderr);
    let j = read_json(&out.join("probe.json"));
    let r0 = record(&j, 0, "y");
    assert_eq!(r0["kind"], "continuous");
    let (r2, lo, hi) = (
        r0["r2"].as_f64().unwrap(),
        r0["ci_low"].as_f64().unwrap(),
        r0["ci_high"].as_f64().unwrap(),
    );
    // Theory (by construction above): R² = 1 − 0.25 / 1.25 = 0.8 for the best linear fit;
    // 8 features and 1 800 items leave little room for the fit's own error. The tolerance
    // 0.03 is common practice for a sample of this size (the R² of 360 test items per fold
    // has a standard error of about 0.02).
    let theory = 1.0 - NOISE_VAR / (1.0 + NOISE_VAR);
    assert!((r2 - theory).abs() < 0.03, "R² {r2} against {theory}");
    assert!(lo <= theory && theory <= hi, "[{lo}, {hi}] misses {theory}");
    assert!(lo <= r2 && r2 <= hi, "[{lo}, {hi}] misses its own R² {r2}");
    // RMSE against the noise: sqrt(0.25) = 0.5 (same construction); the training mean's
    // error is the target's spread, sqrt(1.25).
    let rmse = r0["rmse"].as_f64().unwrap();
    assert!((rmse - 0.5).abs() < 0.04, "rmse {rmse}");
    let base = r0["baseline_rmse"].as_f64().unwrap();
    assert!((base - 1.25f64.sqrt()).abs() < 0.08, "baseline rmse {base}");
    // A single linear predictor: r² = R² up to the fit's error (arithmetic).
    let pr = r0["pearson_r"].as_f64().unwrap();
    assert!((pr * pr - r2).abs() < 0.02, "r {pr}, R² {r2}");
    // Types (phone in context) carry no information about y: the control scores about 0.
    let c = r0["control_r2"].as_f64().unwrap();
    assert!(c < 0.1, "control R² {c}");
    assert!((r0["selectivity"].as_f64().unwrap() - (r2 - c)).abs() < 1e-12);
    assert!(r0["accuracy"].is_null() && r0["majority_baseline"].is_null());
    // Layer 1 holds nothing about y.
    let r1 = record(&j, 1, "y")["r2"].as_f64().unwrap();
    assert!(r1 < 0.05, "layer 1 R² {r1}");
    // Frames without a value are left out: 9 of every 10 frames, every item tested once.
    assert_eq!(r0["n_test"], 1800);
    // Each kind keeps its own columns.
    let cat = std::fs::read_to_string(out.join("probe.csv")).unwrap();
    let header = cat.lines().next().unwrap();
    assert!(
        header.contains("accuracy") && !header.contains(",r2,"),
        "{header}"
    );
    assert!(cat.lines().skip(1).all(|l| l.ends_with(",categorical")));
    let cont = std::fs::read_to_string(out.join("probe_continuous.csv")).unwrap();
    let header = cont.lines().next().unwrap();
    assert!(
        header.contains(",r2,") && !header.contains("accuracy"),
        "{header}"
    );
    assert_eq!(cont.lines().count(), 1 + 2, "one row per layer");
    let best = &j["summary"]["best_r2"][0];
    assert_eq!(
        (best["task"].as_str(), best["layer"].as_u64()),
        (Some("y"), Some(0))
    );
    assert!(
        r.stdout.contains("y          best layer  0: R² "),
        "{}",
        r.stdout
    );
}

#[test]
fn nan_and_empty_values_leave_the_same_frames_out() {
    let t = tempfile::tempdir().unwrap();
    let (a, b) = (t.path().join("a"), t.path().join("b"));
    linear_capture(&a, true);
    linear_capture(&b, false);
    let mut r2 = Vec::new();
    for cap in [&a, &b] {
        let out = cap.with_extension("out");
        let r = run_text([
            "probe",
            common::s(cap),
            "--out",
            common::s(&out),
            "--quiet",
            "--task",
            "y",
            "--layers",
            "0",
        ]);
        assert_eq!(r.code, 0, "{}", r.stderr);
        let rec = record(&read_json(&out.join("probe.json")), 0, "y");
        assert_eq!(rec["n_test"], 1800, "9 of every 10 frames have a value");
        assert!(rec["r2"].as_f64().is_some_and(f64::is_finite), "{rec}");
        r2.push(rec["r2"].clone());
    }
    assert_eq!(r2[0], r2[1]);
}

/// Write a capture whose column `lvl` (declared continuous) takes the values `values` in turn.
fn declared_capture(dir: &Path, values: &[&str]) {
    let mut f = Frames::new(&["utterance", "speaker", "lvl"]);
    let mut rng = ChaCha8Rng::seed_from_u64(3);
    let n = 6 * 2 * 20;
    for s in 0..6 {
        for u in 0..2 {
            for i in 0..20 {
                f.push([
                    format!("s{s}u{u}"),
                    format!("s{s}"),
                    values[i % values.len()].into(),
                ]);
            }
        }
    }
    let l0 = Array2::from_shape_fn((n, 4), |_| normal(&mut rng) as f32);
    common::write_capture(dir, &f, &[l0]);
    std::fs::write(
        dir.join("capture.toml"),
        "[columns]\nlvl = \"continuous\"\n",
    )
    .unwrap();
}

#[test]
fn fewer_than_three_training_values_are_refused_naming_the_task() {
    let t = tempfile::tempdir().unwrap();
    let cap = t.path().join("cap");
    declared_capture(&cap, &["1.5", "2.5", ""]);
    let r = run_text([
        "probe",
        common::s(&cap),
        "--out",
        common::s(&t.path().join("o")),
        "--task",
        "lvl",
    ]);
    assert_eq!(r.code, 2, "{}", r.stderr);
    assert!(r.stderr.contains("task 'lvl' (continuous)"), "{}", r.stderr);
    assert!(
        r.stderr.contains("expected at least 3 distinct values"),
        "{}",
        r.stderr
    );
    assert!(r.stderr.contains("found 2 (1.5, 2.5)"), "{}", r.stderr);
    // A constant column (zero variance) is refused by the same rule: one distinct value.
    let cap2 = t.path().join("cap2");
    declared_capture(&cap2, &["7"]);
    let r = run_text([
        "probe",
        common::s(&cap2),
        "--out",
        common::s(&t.path().join("o2")),
    ]);
    assert_eq!(r.code, 2, "{}", r.stderr);
    assert!(r.stderr.contains("found 1 (7)"), "{}", r.stderr);
    // Three values are enough.
    let cap3 = t.path().join("cap3");
    declared_capture(&cap3, &["1", "2", "4"]);
    let r = run_text([
        "probe",
        common::s(&cap3),
        "--out",
        common::s(&t.path().join("o3")),
        "--quiet",
    ]);
    assert_eq!(r.code, 0, "{}", r.stderr);
}

#[test]
fn a_split_by_frame_is_noted_as_overstating_r2() {
    let t = tempfile::tempdir().unwrap();
    let cap = t.path().join("cap");
    linear_capture(&cap, true);
    let out = t.path().join("out");
    let r = run_text([
        "probe",
        common::s(&cap),
        "--out",
        common::s(&out),
        "--quiet",
        "--task",
        "y",
        "--layers",
        "0",
        "--split",
        "frame",
    ]);
    assert_eq!(r.code, 0, "{}", r.stderr);
    let notes = read_json(&out.join("probe.json"))["notes"].to_string();
    assert!(notes.contains("task 'y' is split by frame"), "{notes}");
    assert!(notes.contains("its R² is overstated"), "{notes}");
}
