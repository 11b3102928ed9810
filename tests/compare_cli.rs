//! `voxstrata compare` end to end on small synthetic captures written by the test.

mod common;

use std::path::Path;

use common::{demo_dir, read_json, run_text, s, Frames, Ran};
use ndarray::Array2;

/// One synthetic frame: utterance, speaker, phone.
#[derive(Clone)]
struct Frame {
    utt: String,
    spk: String,
    phone: String,
}

/// Six utterances of 20 frames by three speakers, with a phone cycle.
fn frames() -> Vec<Frame> {
    let phones = ["a", "i", "u", "s", "t"];
    let mut v = Vec::new();
    for u in 0..6 {
        for f in 0..20 {
            v.push(Frame {
                utt: format!("utt{u}"),
                spk: format!("spk{}", u % 3),
                phone: phones[(f / 4 + u) % 5].into(),
            });
        }
    }
    v
}

/// Deterministic pseudo-random layers (dims 6, 8, 5) for the given frames.
fn layers(n: usize) -> Vec<Array2<f32>> {
    let mut state = 12345u64;
    let mut next = move || {
        state = state
            .wrapping_mul(6364136223846793005)
            .wrapping_add(1442695040888963407);
        ((state >> 33) as f64 / (1u64 << 31) as f64 - 1.0) as f32
    };
    [6, 8, 5]
        .iter()
        .map(|&d| Array2::from_shape_fn((n, d), |_| next()))
        .collect()
}

fn write_capture(dir: &Path, fr: &[Frame], ls: &[Array2<f32>]) {
    let mut frames = Frames::new(&["utterance", "speaker", "phone"]);
    for f in fr {
        frames.push([&f.utt, &f.spk, &f.phone]);
    }
    common::write_capture(dir, &frames, ls);
}

fn cka(j: &serde_json::Value, la: u64, lb: u64) -> f64 {
    j["records"]
        .as_array()
        .unwrap()
        .iter()
        .find(|r| r["layer_a"] == la && r["layer_b"] == lb)
        .unwrap()["cka"]
        .as_f64()
        .unwrap()
}

#[test]
fn same_frames_twice_give_unit_diagonal() {
    let t = tempfile::tempdir().unwrap();
    let fr = frames();
    let ls = layers(fr.len());
    let (a, b) = (t.path().join("a"), t.path().join("b"));
    write_capture(&a, &fr, &ls);
    write_capture(&b, &fr, &ls);
    for (x, y, name) in [(&a, &b, "ab"), (&a, &a, "aa")] {
        let out = t.path().join(name);
        let Ran {
            code,
            stdout,
            stderr,
        } = run_text(["compare", s(x), s(y), "--out", s(&out), "--quiet"]);
        assert_eq!(code, 0, "{stderr}");
        assert!(stdout.contains("most changed layers"), "{stdout}");
        let j = read_json(&out.join("compare.json"));
        assert_eq!(j["records"].as_array().unwrap().len(), 9);
        for l in 0..3 {
            assert!(
                (cka(&j, l, l) - 1.0).abs() < 1e-6,
                "layer {l}: {}",
                cka(&j, l, l)
            );
        }
        // Independent random layers: clearly below 1 off the diagonal, and symmetric.
        assert!(cka(&j, 0, 1) < 0.5);
        assert!((cka(&j, 0, 1) - cka(&j, 1, 0)).abs() < 1e-9);
        for f in [
            "compare.csv",
            "compare_cka.png",
            "compare_cka.svg",
            "compare_change.png",
            "compare_change.svg",
        ] {
            assert!(out.join(f).is_file(), "{f} missing");
        }
        let csv = std::fs::read_to_string(out.join("compare.csv")).unwrap();
        assert!(csv.starts_with("layer_a,layer_b,cka,kernel"), "{csv}");
    }
}

#[test]
fn different_label_reports_the_first_differing_row() {
    let t = tempfile::tempdir().unwrap();
    let fr = frames();
    let ls = layers(fr.len());
    let mut fr_b = fr.clone();
    fr_b[7].phone = "zz".into();
    fr_b[30].phone = "zz".into();
    write_capture(&t.path().join("a"), &fr, &ls);
    write_capture(&t.path().join("b"), &fr_b, &ls);
    let out = t.path().join("out");
    let Ran { code, stderr, .. } = run_text([
        "compare",
        s(&t.path().join("a")),
        s(&t.path().join("b")),
        "--out",
        s(&out),
    ]);
    assert_eq!(code, 2, "{stderr}");
    assert!(
        stderr.contains("frame 7") && stderr.contains("phone") && stderr.contains("zz"),
        "{stderr}"
    );
    assert!(!out.join("compare.json").exists());
}

#[test]
fn shuffled_utterances_pair_by_utterance() {
    let t = tempfile::tempdir().unwrap();
    let fr = frames();
    let ls = layers(fr.len());
    // B: utterances in the order 3, 0, 5, 1, 4 (utt2 missing), same activations per frame.
    let order = [3usize, 0, 5, 1, 4];
    let rows: Vec<usize> = order.iter().flat_map(|&u| u * 20..(u + 1) * 20).collect();
    let fr_b: Vec<Frame> = rows.iter().map(|&r| fr[r].clone()).collect();
    let ls_b: Vec<Array2<f32>> = ls
        .iter()
        .map(|l| l.select(ndarray::Axis(0), &rows))
        .collect();
    let (a, b) = (t.path().join("a"), t.path().join("b"));
    write_capture(&a, &fr, &ls);
    write_capture(&b, &fr_b, &ls_b);
    // Row by row the tables differ: exit 2 naming frame 0's utterance.
    let Ran { code, stderr, .. } =
        run_text(["compare", s(&a), s(&b), "--out", s(&t.path().join("o1"))]);
    assert_eq!(code, 2);
    assert!(stderr.contains("frame 0, utterance"), "{stderr}");
    let out = t.path().join("o2");
    let Ran {
        code,
        stdout,
        stderr,
    } = run_text([
        "compare",
        s(&a),
        s(&b),
        "--match-by",
        "utterance",
        "--out",
        s(&out),
        "--quiet",
    ]);
    assert_eq!(code, 0, "{stderr}");
    assert!(
        stdout.contains("100 frames paired, 20 of A and 0 of B dropped"),
        "{stdout}"
    );
    let j = read_json(&out.join("compare.json"));
    assert_eq!(j["pairing"]["paired"], 100);
    assert_eq!(j["pairing"]["dropped_a"], 20);
    for l in 0..3 {
        assert!(
            (cka(&j, l, l) - 1.0).abs() < 1e-6,
            "layer {l}: {}",
            cka(&j, l, l)
        );
    }
}

#[test]
fn mismatched_speaker_under_utterance_matching_is_refused() {
    let t = tempfile::tempdir().unwrap();
    let fr = frames();
    let ls = layers(fr.len());
    let mut fr_b = fr.clone();
    for f in fr_b.iter_mut().filter(|f| f.utt == "utt4") {
        f.spk = "other".into();
    }
    write_capture(&t.path().join("a"), &fr, &ls);
    write_capture(&t.path().join("b"), &fr_b, &ls);
    let Ran { code, stderr, .. } = run_text([
        "compare",
        s(&t.path().join("a")),
        s(&t.path().join("b")),
        "--match-by",
        "utterance",
        "--out",
        s(&t.path().join("o")),
    ]);
    assert_eq!(code, 2);
    assert!(
        stderr.contains("utt4") && stderr.contains("other"),
        "{stderr}"
    );
}

#[test]
fn layer_out_of_range_is_bad_input() {
    let t = tempfile::tempdir().unwrap();
    let fr = frames();
    let ls = layers(fr.len());
    let a = t.path().join("a");
    write_capture(&a, &fr, &ls);
    let Ran { code, stderr, .. } = run_text([
        "compare",
        s(&a),
        s(&a),
        "--layers",
        "0,7",
        "--out",
        s(&t.path().join("o")),
    ]);
    assert_eq!(code, 2);
    assert!(
        stderr.contains("--layers") && stderr.contains('7'),
        "{stderr}"
    );
}

#[test]
fn rbf_and_minibatch_options_run_and_keep_the_diagonal() {
    let t = tempfile::tempdir().unwrap();
    let fr = frames();
    let ls = layers(fr.len());
    let (a, b) = (t.path().join("a"), t.path().join("b"));
    write_capture(&a, &fr, &ls);
    write_capture(&b, &fr, &ls);
    for (extra, kernel) in [
        (vec!["--kernel", "rbf", "--max-frames", "90"], "rbf"),
        (vec!["--hsic", "minibatch", "--batch-size", "40"], "linear"),
    ] {
        let out = t.path().join(kernel);
        let mut args = vec!["compare", s(&a), s(&b), "--out", s(&out), "--quiet"];
        args.extend(extra);
        let Ran { code, stderr, .. } = run_text(args);
        assert_eq!(code, 0, "{stderr}");
        let j = read_json(&out.join("compare.json"));
        assert_eq!(j["records"][0]["kernel"], kernel);
        assert!((cka(&j, 2, 2) - 1.0).abs() < 1e-6);
    }
}

/// On the shipped demo, training moved the upper layers furthest from their early state: the
/// top hidden layer has the lowest matching-layer CKA (issue claim: "the upper layers changed
/// most"). Measured at seed 0 on all frames, 1 - CKA: layer 1 0.185, 2 0.217, 3 0.226,
/// 4 0.231, 5 0.306 (the demo trains with layer-wise step decay 0.7).
#[test]
fn demo_final_against_early_changes_the_top_layer_most() {
    let (early, fin) = (demo_dir().join("early"), demo_dir().join("final"));
    let t = tempfile::tempdir().unwrap();
    let out = t.path().join("o");
    let Ran { code, stderr, .. } = run_text([
        "compare",
        s(&fin),
        s(&early),
        "--out",
        s(&out),
        "--quiet",
        "--no-probe",
        "--max-frames",
        "8000",
    ]);
    assert_eq!(code, 0, "{stderr}");
    let j = read_json(&out.join("compare.json"));
    let layers: Vec<u64> = j["layers_a"]
        .as_array()
        .unwrap()
        .iter()
        .filter_map(|v| v.as_u64())
        .collect();
    let top = *layers.iter().max().unwrap();
    let change = |l: u64| 1.0 - cka(&j, l, l);
    // Layer 0 is the input features, identical in both checkpoints.
    assert!(change(0) < 1e-6, "input layer changed: {}", change(0));
    let changes: Vec<String> = layers
        .iter()
        .map(|&l| format!("{l}: {:.3}", change(l)))
        .collect();
    for &l in layers.iter().filter(|&&l| l != top) {
        assert!(
            change(top) > change(l),
            "top layer {top} is not the most changed: {changes:?}"
        );
    }
    // upper half against lower half of the hidden layers
    assert!(
        change(top) + change(top - 1) > change(1) + change(2),
        "upper layers changed less than lower ones: {changes:?}"
    );
}

#[test]
fn probe_deltas_find_the_checkpoint_that_encodes_phones() {
    let t = tempfile::tempdir().unwrap();
    let fr = frames();
    let ls = layers(fr.len());
    // B's layer 1 carries the phone identity (one-hot, scaled) on top of A's noise.
    let phones = ["a", "i", "u", "s", "t"];
    let mut ls_b = ls.clone();
    for (r, f) in fr.iter().enumerate() {
        let k = phones.iter().position(|p| *p == f.phone).unwrap();
        ls_b[1][[r, k]] += 4.0;
    }
    let (a, b) = (t.path().join("a"), t.path().join("b"));
    write_capture(&a, &fr, &ls);
    write_capture(&b, &fr, &ls_b);
    let out = t.path().join("o");
    let Ran {
        code,
        stdout,
        stderr,
    } = run_text([
        "compare",
        s(&a),
        s(&b),
        "--task",
        "phone",
        "--out",
        s(&out),
        "--quiet",
    ]);
    assert_eq!(code, 0, "{stderr}");
    let j = read_json(&out.join("compare.json"));
    let deltas = j["probe_delta"].as_array().unwrap();
    assert_eq!(deltas.len(), 3, "{j}");
    let d1 = deltas.iter().find(|d| d["layer"] == 1).unwrap();
    assert!(d1["accuracy_b"].as_f64().unwrap() > 0.9, "{d1}");
    assert!(d1["delta"].as_f64().unwrap() > 0.5, "{d1}");
    assert!(d1["mcnemar_p"].as_f64().unwrap() < 1e-3, "{d1}");
    // Layers 0 and 2 are identical in A and B: the same split and seed give the same answers.
    let d0 = deltas.iter().find(|d| d["layer"] == 0).unwrap();
    assert_eq!(d0["delta"].as_f64().unwrap(), 0.0);
    assert_eq!(d0["mcnemar_p"].as_f64().unwrap(), 1.0);
    assert!(stdout.contains("significant probe deltas"), "{stdout}");
    assert!(out.join("compare_probe.png").is_file());
    let csv = std::fs::read_to_string(out.join("compare_probe_delta.csv")).unwrap();
    assert!(
        csv.starts_with("layer,task,n_train,n_test,accuracy_a"),
        "{csv}"
    );
}
