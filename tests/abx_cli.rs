//! `voxstrata abx` driven as a user would: on the shipped demo and on bad input.

mod common;

use common::{demo_dir, read_json, run_text, s, write_capture, Frames};
use ndarray::Array2;

/// A capture where each utterance holds `phones` runs of 3 frames; phone p is a direction in
/// 4-d space, speaker s adds its own offset on another axis.
fn capture(dir: &std::path::Path, speakers: usize, phones: &[&str]) {
    let mut f = Frames::new(&["utterance", "speaker", "phone"]);
    let mut rows = Vec::new();
    for sp in 0..speakers {
        for u in 0..3 {
            for (k, p) in phones.iter().enumerate() {
                for _ in 0..3 {
                    f.push([format!("s{sp}u{u}"), format!("s{sp}"), p.to_string()]);
                    rows.push((k, sp, u));
                }
            }
        }
    }
    let x = Array2::from_shape_fn((rows.len(), 4), |(i, j)| {
        let (k, sp, u) = rows[i];
        let base = if j == k % 3 { 1.0 } else { 0.0 };

        let talker = if j == 3 { 0.3 * sp as f32 } else { 0.0 };
        base + talker + 0.01 * ((i * 7 + j * 3 + u) % 5) as f32
    });
    write_capture(dir, &f, &[x.clone(), x]);
}

#[test]
fn abx_on_the_demo_writes_records_for_every_layer_and_both_conditions() {
    let t = tempfile::tempdir().unwrap();
    let out = t.path().join("abx");
    let cap = demo_dir().join("final");
    let r = run_text(["--quiet", "abx", s(&cap), "--out", s(&out)]);
    assert_eq!(r.code, 0, "{}", r.stderr);
    let j = read_json(&out.join("abx.json"));
    let recs = j["records"].as_array().unwrap();
    // 6 layers × (within, across)
    assert_eq!(recs.len(), 12);
    for r in recs {
        let e = r["error_rate"].as_f64().unwrap();
        assert!((0.0..=1.0).contains(&e), "{r}");
        assert!(r["n_triplets"].as_u64().unwrap() > 0);
    }
    // The demo's claim (README): the cost of a change of talker shrinks with depth on `final`.
    let err = |layer: u64, cond: &str| {
        recs.iter()
            .find(|r| r["layer"] == layer && r["condition"] == cond)
            .unwrap()["error_rate"]
            .as_f64()
            .unwrap()
    };
    assert!(err(5, "across") < err(0, "across"));
    assert!(err(5, "across") - err(5, "within") < err(0, "across") - err(0, "within"));
    for f in ["abx.csv", "abx.png", "abx.svg"] {
        assert!(out.join(f).is_file(), "{f} missing");
    }
}

#[test]
fn a_label_that_is_not_a_column_is_refused_with_the_columns_listed() {
    let t = tempfile::tempdir().unwrap();
    let cap = t.path().join("cap");
    capture(&cap, 3, &["x", "a", "x", "b", "x"]);
    let out = t.path().join("out");
    let r = run_text(["abx", s(&cap), "--label", "word", "--out", s(&out)]);
    assert_eq!(r.code, 2, "{}", r.stderr);
    assert!(
        r.stderr.contains("word") && r.stderr.contains("phone"),
        "{}",
        r.stderr
    );
    assert!(!out.exists(), "nothing is written on bad input");
}

#[test]
fn one_speaker_gives_within_records_only_with_a_note() {
    let t = tempfile::tempdir().unwrap();
    let cap = t.path().join("cap");
    // a and b recur in the same context (x, x), so one talker gives within triplets.
    capture(&cap, 1, &["x", "a", "x", "b", "x", "a", "x", "b", "x"]);
    let out = t.path().join("out");
    let r = run_text(["abx", s(&cap), "--out", s(&out)]);
    assert_eq!(r.code, 0, "{}", r.stderr);
    let j = read_json(&out.join("abx.json"));
    let conds: Vec<&str> = j["records"]
        .as_array()
        .unwrap()
        .iter()
        .map(|r| r["condition"].as_str().unwrap())
        .collect();
    assert!(!conds.is_empty() && conds.iter().all(|c| *c == "within"));
    let notes = j["notes"].to_string();
    assert!(notes.contains("speaker"), "{notes}");
}

#[test]
fn no_triplet_anywhere_is_refused() {
    // Each utterance holds one label, so no item has a partner of another label in its
    // context: no triplet can be formed.
    let t = tempfile::tempdir().unwrap();
    let cap = t.path().join("cap");
    capture(&cap, 2, &["a"]);
    let out = t.path().join("out");
    let r = run_text(["abx", s(&cap), "--out", s(&out)]);
    assert_eq!(r.code, 2, "{}", r.stderr);
    assert!(r.stderr.contains("triplet"), "{}", r.stderr);
}
