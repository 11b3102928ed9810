//! `voxstrata map` end to end: a small synthetic capture whose first layer is dominated by
//! the speaker and whose last layer is dominated by the phone, the outputs it must write, the
//! bad-input cases, and (when the shipped demo is present) the demo's final capture.

mod common;

use std::path::Path;

use common::{demo_dir, read_json, write_layer, Frames};
use ndarray::{Array1, Array2};

const PHONES: [&str; 5] = ["a", "ʃ", "ə", "t", "i"];

/// 4 speakers × 2 utterances × 40 frames; three layers from speaker-coded to phone-coded.
fn synthetic_capture(dir: &Path) {
    let (n_spk, n_utt, n_frames, dim) = (4usize, 2usize, 40usize, 12usize);
    let mut frames = Frames::new(&["utterance", "speaker", "phone", "gender"]);
    let mut rows = Vec::new();
    for s in 0..n_spk {
        for u in 0..n_utt {
            for f in 0..n_frames {
                let ph = (f / 4 + u) % PHONES.len();
                let g = if s % 2 == 0 { "f" } else { "m" };
                frames.push([
                    format!("s{s}u{u}"),
                    format!("spk{s}"),
                    PHONES[ph].into(),
                    g.into(),
                ]);
                rows.push((s, ph, rows.len()));
            }
        }
    }
    let layers: Vec<Array2<f32>> = (0..3)
        .map(|layer| {
            let w = layer as f32 / 2.0; // 0: speaker only, 1: phone only
            Array2::from_shape_fn((rows.len(), dim), |(i, j)| {
                let (s, ph, k) = rows[i];
                let noise = (((k * 7919 + j * 104729) % 1000) as f32 / 1000.0 - 0.5) * 0.6;
                let spk = if j % n_spk == s { 3.0 } else { 0.0 };
                let phn = if j % PHONES.len() == ph { 3.0 } else { 0.0 };
                (1.0 - w) * spk + w * phn + noise
            })
        })
        .collect();
    common::write_capture(dir, &frames, &layers);
}

fn voxstrata(args: &[&str]) -> std::process::Output {
    common::run(args)
}

fn records(out: &Path) -> Vec<serde_json::Value> {
    read_json(&out.join("purity.json"))["records"]
        .as_array()
        .unwrap()
        .clone()
}

fn metric(recs: &[serde_json::Value], layer: u64, label: &str, key: &str) -> f64 {
    recs.iter()
        .find(|r| r["layer"] == layer && r["label"] == label)
        .and_then(|r| r[key].as_f64())
        .unwrap_or_else(|| panic!("{key} for {label} at layer {layer}"))
}

#[test]
fn pca_map_writes_maps_records_and_pictures() {
    let tmp = tempfile::tempdir().unwrap();
    let cap = tmp.path().join("cap");
    std::fs::create_dir(&cap).unwrap();
    synthetic_capture(&cap);
    let out = tmp.path().join("out");
    let o = voxstrata(&[
        "map",
        cap.to_str().unwrap(),
        "--method",
        "pca",
        "--per-label",
        "6",
        "--color-by",
        "gender",
        "--out",
        out.to_str().unwrap(),
        "--quiet",
    ]);
    let stdout = String::from_utf8_lossy(&o.stdout);
    assert!(
        o.status.success(),
        "{}\n{}",
        stdout,
        String::from_utf8_lossy(&o.stderr)
    );
    for f in [
        "purity.json",
        "purity.csv",
        "purity.png",
        "purity.svg",
        "map_speaker.png",
        "map_speaker.svg",
        "map_phone.png",
        "map_phone.svg",
        "map_gender.png",
        "maps/frames.npy",
        "maps/layer_00.npy",
        "maps/layer_02.npy",
    ] {
        assert!(out.join(f).is_file(), "{f} missing");
    }
    let frames: Array1<u64> = ndarray_npy::read_npy(out.join("maps/frames.npy")).unwrap();
    // 4 speakers × 5 phones, 6 frames per cell (every cell holds at least 6)
    assert_eq!(frames.len(), 4 * 5 * 6);
    let m: Array2<f32> = ndarray_npy::read_npy(out.join("maps/layer_01.npy")).unwrap();
    assert_eq!(m.dim(), (frames.len(), 2));
    let recs = records(&out);
    assert_eq!(recs.len(), 3 * 3, "layer × label (phone, gender, speaker)");
    // speaker-coded input, phone-coded top: purity moves the way the capture was built
    assert!(metric(&recs, 0, "speaker", "knn_purity") > 0.9);
    assert!(metric(&recs, 2, "speaker", "knn_purity") < 0.6);
    assert!(metric(&recs, 2, "phone", "knn_purity") > 0.9);
    assert!(metric(&recs, 0, "phone", "knn_purity") < 0.6);
    assert!(metric(&recs, 0, "speaker", "pnmi") > metric(&recs, 2, "speaker", "pnmi"));
    let csv = std::fs::read_to_string(out.join("purity.csv")).unwrap();
    assert!(csv.starts_with(
        "layer,label,n_frames,silhouette,knn_purity,knn_purity_2d,trustworthiness,cluster_purity,label_purity,pnmi,variance_ratio"
    ));
    assert!(
        stdout.contains("phone purity (10-NN) peaks at layer 2"),
        "{stdout}"
    );
    assert!(
        stdout.contains("speaker purity (10-NN) falls half way"),
        "{stdout}"
    );
    // IPA labels reach the legend of the SVG
    let svg = std::fs::read_to_string(out.join("map_phone.svg")).unwrap();
    assert!(svg.contains('ʃ') && svg.contains('ə'));
}

#[test]
fn tsne_map_is_deterministic_across_thread_counts() {
    let tmp = tempfile::tempdir().unwrap();
    let cap = tmp.path().join("cap");
    std::fs::create_dir(&cap).unwrap();
    synthetic_capture(&cap);
    let mut maps = Vec::new();
    for threads in ["1", "2"] {
        let out = tmp.path().join(format!("out{threads}"));
        let o = voxstrata(&[
            "map",
            cap.to_str().unwrap(),
            "--per-label",
            "4",
            "--threads",
            threads,
            "--layers",
            "0,2",
            "--out",
            out.to_str().unwrap(),
            "--quiet",
        ]);
        assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
        let m: Array2<f32> = ndarray_npy::read_npy(out.join("maps/layer_02.npy")).unwrap();
        let recs = records(&out);
        assert!(metric(&recs, 2, "phone", "kl_divergence") > 0.0);
        assert!(metric(&recs, 2, "phone", "knn_purity_2d") > 0.8);
        maps.push(m);
    }
    assert_eq!(maps[0], maps[1]);
}

#[test]
fn per_label_beyond_the_data_takes_what_exists_and_says_so() {
    let tmp = tempfile::tempdir().unwrap();
    let cap = tmp.path().join("cap");
    std::fs::create_dir(&cap).unwrap();
    synthetic_capture(&cap);
    let out = tmp.path().join("out");
    let o = voxstrata(&[
        "map",
        cap.to_str().unwrap(),
        "--method",
        "pca",
        "--per-label",
        "1000",
        "--out",
        out.to_str().unwrap(),
        "--quiet",
    ]);
    assert!(o.status.success());
    let err = String::from_utf8_lossy(&o.stderr);
    assert!(
        err.contains("--per-label 1000")
            && err.contains("cells hold fewer than the 1000 frames taken per cell"),
        "{err}"
    );
    let frames: Array1<u64> = ndarray_npy::read_npy(out.join("maps/frames.npy")).unwrap();
    assert_eq!(frames.len(), 4 * 2 * 40, "every labelled frame");
}

#[test]
fn too_few_points_and_unknown_labels_exit_2_and_write_nothing() {
    let tmp = tempfile::tempdir().unwrap();
    let cap = tmp.path().join("cap");
    std::fs::create_dir(&cap).unwrap();
    // two frames only
    std::fs::write(
        cap.join("frames.tsv"),
        "utterance\tspeaker\tphone\nu1\ts1\ta\nu1\ts1\tb\n",
    )
    .unwrap();
    write_layer(&cap, 0, &Array2::<f32>::ones((2, 3)));
    let out = tmp.path().join("out");
    let o = voxstrata(&[
        "map",
        cap.to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
        "--quiet",
    ]);
    assert_eq!(o.status.code(), Some(2));
    let err = String::from_utf8_lossy(&o.stderr);
    assert!(
        err.contains("at least 3") && err.contains("found 2"),
        "{err}"
    );
    assert!(!out.exists());

    let cap2 = tmp.path().join("cap2");
    std::fs::create_dir(&cap2).unwrap();
    synthetic_capture(&cap2);
    let o = voxstrata(&[
        "map",
        cap2.to_str().unwrap(),
        "--color-by",
        "dialect",
        "--out",
        out.to_str().unwrap(),
    ]);
    assert_eq!(o.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&o.stderr).contains("'dialect'"));
    assert!(!out.exists());
}

#[test]
fn a_label_with_one_frame_is_skipped_in_the_silhouette_and_reported() {
    let tmp = tempfile::tempdir().unwrap();
    let cap = tmp.path().join("cap");
    std::fs::create_dir(&cap).unwrap();
    synthetic_capture(&cap);
    // give one frame a phone of its own
    let tsv = std::fs::read_to_string(cap.join("frames.tsv")).unwrap();
    let mut lines: Vec<String> = tsv.lines().map(String::from).collect();
    lines[2] = lines[2].replace("\ta\t", "\tŋ\t");
    std::fs::write(cap.join("frames.tsv"), lines.join("\n") + "\n").unwrap();
    let out = tmp.path().join("out");
    let o = voxstrata(&[
        "map",
        cap.to_str().unwrap(),
        "--method",
        "pca",
        "--out",
        out.to_str().unwrap(),
        "--quiet",
    ]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let err = String::from_utf8_lossy(&o.stderr);
    assert!(
        err.contains("one sampled frame skipped in the silhouette: ŋ"),
        "{err}"
    );
}

#[test]
fn demo_speaker_purity_falls_and_phone_purity_rises_with_depth() {
    let cap = demo_dir().join("final");
    let tmp = tempfile::tempdir().unwrap();
    let out = tmp.path().join("out");
    let o = voxstrata(&[
        "map",
        cap.to_str().unwrap(),
        "--method",
        "pca",
        "--per-label",
        "5",
        "--out",
        out.to_str().unwrap(),
        "--quiet",
    ]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let recs = records(&out);
    let layers: Vec<u64> = {
        let mut l: Vec<u64> = recs.iter().map(|r| r["layer"].as_u64().unwrap()).collect();
        l.dedup();
        l
    };
    let (first, upper) = (layers[0], &layers[layers.len() * 2 / 3..]);
    let best_upper = |label: &str, f: fn(f64, f64) -> f64, init: f64| {
        upper
            .iter()
            .map(|&l| metric(&recs, l, label, "knn_purity"))
            .fold(init, f)
    };
    // speaker purity at the input beats every upper hidden layer; phone purity the reverse
    assert!(metric(&recs, first, "speaker", "knn_purity") > best_upper("speaker", f64::max, 0.0));
    assert!(metric(&recs, first, "phone", "knn_purity") < best_upper("phone", f64::min, 1.0));
}
