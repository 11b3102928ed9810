//! Continuous label columns through the binary: kinds in `inspect`, value-coloured maps with
//! k-NN R², and the bad inputs of `capture.toml`'s `[columns]`.

mod common;

use common::{read_json, run_text, write_capture, Frames};
use ndarray::Array2;

/// Four speakers × 3 utterances × 60 frames; layer 0 holds the value `pos` (position in the
/// utterance, 60 distinct values) in its first column plus small noise, layer 1 only noise.
fn capture(dir: &std::path::Path, extra: Option<(&str, &str)>) {
    let mut f = Frames::new(&["utterance", "speaker", "phone", "pos"]);
    let mut rows = Vec::new();
    for s in 0..4 {
        for u in 0..3 {
            for i in 0..60 {
                let phone = ["a", "b", "c"][(i / 7) % 3];
                let pos = format!("{i}");
                let pos = match extra {
                    Some((at, v)) if at == format!("{s}-{u}-{i}") => v.to_string(),
                    _ => pos,
                };
                f.push([format!("s{s}_u{u}"), format!("s{s}"), phone.into(), pos]);
                rows.push(i as f32);
            }
        }
    }
    let n = rows.len();
    let noise = |r: usize, c: usize| (((r * 7919 + c * 104_729) % 1000) as f32 / 1000.0) - 0.5;
    let l0 = Array2::from_shape_fn((n, 4), |(r, c)| {
        if c == 0 {
            rows[r] / 10.0 + 0.05 * noise(r, c)
        } else {
            noise(r, c)
        }
    });
    let l1 = Array2::from_shape_fn((n, 4), |(r, c)| noise(r, c + 7));
    write_capture(dir, &f, &[l0, l1]);
}

#[test]
fn inspect_shows_a_numeric_column_with_many_values_as_continuous() {
    let t = tempfile::tempdir().unwrap();
    let cap = t.path().join("cap");
    capture(&cap, None);
    let r = run_text(["inspect", cap.to_str().unwrap()]);
    assert_eq!(r.code, 0, "{}", r.stderr);
    assert!(
        r.stdout.contains("continuous label columns (1)"),
        "{}",
        r.stdout
    );
    assert!(r.stdout.contains("range 0.000 to 59.00"), "{}", r.stdout);
    let j = run_text(["inspect", cap.to_str().unwrap(), "--json"]);
    let v: serde_json::Value = serde_json::from_str(&j.stdout).unwrap();
    assert_eq!(v["continuous"][0]["column"], "pos");
    assert_eq!(v["continuous"][0]["labelled_frames"], 720);
    // Mean of 0..59 is 29.5 (arithmetic).
    assert_eq!(v["continuous"][0]["mean"], 29.5);
    let tasks: Vec<&str> = v["tasks"]
        .as_array()
        .unwrap()
        .iter()
        .map(|t| t["task"].as_str().unwrap())
        .collect();
    assert_eq!(tasks, ["phone", "speaker"], "pos is not a class task");
}

#[test]
fn map_coloured_by_a_value_reports_knn_r2_where_the_layer_holds_it() {
    let t = tempfile::tempdir().unwrap();
    let cap = t.path().join("cap");
    capture(&cap, None);
    let out = t.path().join("map");
    let r = run_text([
        "map",
        cap.to_str().unwrap(),
        "--method",
        "pca",
        "--color-by",
        "pos",
        "--out",
        out.to_str().unwrap(),
    ]);
    assert_eq!(r.code, 0, "{}", r.stderr);
    assert!(out.join("map_pos.png").is_file());
    let p = read_json(&out.join("purity.json"));
    let rec = |layer: u64, label: &str| {
        p["records"]
            .as_array()
            .unwrap()
            .iter()
            .find(|r| r["layer"] == layer && r["label"] == label)
            .unwrap()
            .clone()
    };
    // Layer 0 carries pos almost noiselessly: neighbours share it (R² near 1); layer 1 is
    // noise unrelated to pos: about 0 or below. Known by construction.
    let r0 = rec(0, "pos")["knn_r2"].as_f64().unwrap();
    let r1 = rec(1, "pos")["knn_r2"].as_f64().unwrap();
    assert!(r0 > 0.9, "layer 0 knn_r2 {r0}");
    assert!(r1 < 0.2, "layer 1 knn_r2 {r1}");
    assert!(rec(0, "phone")["knn_r2"].is_null());
}

#[test]
fn a_declared_continuous_column_holding_a_word_is_refused_with_its_row() {
    let t = tempfile::tempdir().unwrap();
    let cap = t.path().join("cap");
    capture(&cap, Some(("1-0-3", "loud")));
    std::fs::write(
        cap.join("capture.toml"),
        "[columns]\npos = \"continuous\"\n",
    )
    .unwrap();
    let r = run_text(["inspect", cap.to_str().unwrap()]);
    assert_eq!(r.code, 2, "{}", r.stderr);
    // Speaker 1, utterance 0, frame 3 is frame 1*180 + 3 = 183: row 185 of frames.tsv.
    assert!(r.stderr.contains("row 185"), "{}", r.stderr);
    assert!(r.stderr.contains("'loud'"), "{}", r.stderr);
}

#[test]
fn ignore_and_categorical_overrides_change_the_task_list() {
    let t = tempfile::tempdir().unwrap();
    let cap = t.path().join("cap");
    capture(&cap, None);
    std::fs::write(
        cap.join("capture.toml"),
        "[columns]\npos = \"categorical\"\n",
    )
    .unwrap();
    let j = run_text(["inspect", cap.to_str().unwrap(), "--json"]);
    let v: serde_json::Value = serde_json::from_str(&j.stdout).unwrap();
    assert_eq!(v["tasks"][1]["task"], "pos");
    assert_eq!(v["tasks"][1]["classes"], 60);
    std::fs::write(cap.join("capture.toml"), "[columns]\npos = \"ignore\"\n").unwrap();
    let j = run_text(["inspect", cap.to_str().unwrap(), "--json"]);
    let v: serde_json::Value = serde_json::from_str(&j.stdout).unwrap();
    assert_eq!(v["tasks"].as_array().unwrap().len(), 2);
    assert!(v["continuous"].as_array().unwrap().is_empty());
}
