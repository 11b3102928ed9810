//! The probe's statistics on synthetic captures whose answer is known: the type-level control
//! task (learnable where the layer encodes the type, not where it encodes only the phone),
//! folds by default when speakers are few (every speaker tested once), the MDL record, and the
//! bad-input cases of those options.

mod common;

use std::path::Path;

use common::{read_json, run_text, Frames, Ran};
use ndarray::Array2;
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;

const PHONES: usize = 4;

/// A capture of `n_spk` speakers × 4 utterances × 12 phone runs of 3 frames (phones drawn at
/// random, never the same twice in a row), with a `word` column (one value per utterance half)
/// and a `const` column. Layer 0 is one random vector per phone-in-context type (previous,
/// current, next phone in the utterance, `#` at the edges) plus small noise; layer 1 one random
/// vector per phone plus the same noise.
fn typed_capture(dir: &Path, n_spk: usize) {
    typed_capture_with_noise(dir, n_spk, 0.1);
}

/// [`typed_capture`] with noise of scale `noise` on both layers.
fn typed_capture_with_noise(dir: &Path, n_spk: usize, noise: f32) {
    let dim = 96;
    let mut rng = ChaCha8Rng::seed_from_u64(7);
    let mut frames = Frames::new(&["utterance", "speaker", "phone", "word", "const"]);
    let mut types: Vec<(usize, usize, usize)> = Vec::new();
    let mut rows: Vec<(usize, usize)> = Vec::new(); // (type index, phone) per frame
    for s in 0..n_spk {
        for u in 0..4 {
            let mut seq = Vec::new();
            while seq.len() < 12 {
                let p = rng.random_range(0..PHONES);
                if seq.last() != Some(&p) {
                    seq.push(p);
                }
            }
            for (r, &p) in seq.iter().enumerate() {
                let prev = if r == 0 { PHONES } else { seq[r - 1] };
                let next = seq.get(r + 1).copied().unwrap_or(PHONES);
                let key = (prev, p, next);
                let ti = types.iter().position(|&t| t == key).unwrap_or_else(|| {
                    types.push(key);
                    types.len() - 1
                });
                for _ in 0..3 {
                    frames.push([
                        format!("s{s}u{u}"),
                        format!("spk{s}"),
                        format!("ph{p}"),
                        format!("w{}", (u * 2 + r / 6) % 5),
                        "x".to_string(),
                    ]);
                    rows.push((ti, p));
                }
            }
        }
    }
    let gauss = |rng: &mut ChaCha8Rng| -> f32 {
        (0..12).map(|_| rng.random_range(0.0f32..1.0)).sum::<f32>() - 6.0
    };
    let type_vec = Array2::from_shape_fn((types.len(), dim), |_| gauss(&mut rng));
    let phone_vec = Array2::from_shape_fn((PHONES, dim), |_| gauss(&mut rng));
    let mut l0 = Array2::<f32>::zeros((rows.len(), dim));
    let mut l1 = Array2::<f32>::zeros((rows.len(), dim));
    for (i, &(t, p)) in rows.iter().enumerate() {
        for j in 0..dim {
            let e = noise * gauss(&mut rng);
            l0[[i, j]] = type_vec[[t, j]] + e;
            l1[[i, j]] = phone_vec[[p, j]] + e;
        }
    }
    common::write_capture(dir, &frames, &[l0, l1]);
}

fn records(out: &Path) -> Vec<serde_json::Value> {
    read_json(&out.join("probe.json"))["records"]
        .as_array()
        .unwrap()
        .clone()
}

fn field(recs: &[serde_json::Value], task: &str, layer: u64, f: &str) -> f64 {
    recs.iter()
        .find(|r| r["task"] == task && r["layer"] == layer)
        .unwrap_or_else(|| panic!("no record {task} {layer}"))[f]
        .as_f64()
        .unwrap_or(f64::NAN)
}

#[test]
fn control_is_learnable_where_the_layer_encodes_the_type() {
    // Known answer: every phone-in-context type has one control label. Layer 0 gives each
    // type its own direction, so a linear probe can learn the type → label mapping and the
    // control accuracy is high; layer 1 only tells phones apart, so the probe can do no better
    // than the commonest control label of each phone's types.
    let tmp = tempfile::tempdir().unwrap();
    let cap = tmp.path().join("cap");
    typed_capture(&cap, 12);
    let out = tmp.path().join("out");
    let Ran { code, stderr, .. } = run_text([
        "probe",
        cap.to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
        "--quiet",
        "--task",
        "phone",
        "--bootstrap",
        "100",
    ]);
    assert_eq!(code, 0, "{stderr}");
    let recs = records(&out);
    let (c0, c1) = (
        field(&recs, "phone", 0, "control_accuracy"),
        field(&recs, "phone", 1, "control_accuracy"),
    );
    assert!(
        c0 >= c1 + 0.3,
        "control on type layer {c0}, on phone layer {c1}"
    );
    assert_eq!(recs[0]["control_by"], "phone in context");
    let j = read_json(&out.join("probe.json"));
    assert!(j["split"][0]["control_types"].as_u64().unwrap() > 20);
    // Both layers encode the phone itself.
    assert!(field(&recs, "phone", 1, "accuracy") > 0.95);
    assert!(
        (field(&recs, "phone", 0, "selectivity") - (field(&recs, "phone", 0, "accuracy") - c0))
            .abs()
            < 1e-12
    );
}

#[test]
fn auto_folds_test_every_speaker_once_and_pool_the_interval() {
    // 6 speakers: one split would test on 2 speakers (< 10) for phone and on 6 utterances
    // for speaker, so `auto` deals speakers (utterances) over 5 folds.
    let tmp = tempfile::tempdir().unwrap();
    let cap = tmp.path().join("cap");
    typed_capture(&cap, 6);
    let out = tmp.path().join("out");
    let Ran { code, stderr, .. } = run_text([
        "probe",
        cap.to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
        "--quiet",
        "--bootstrap",
        "100",
        "--layers",
        "1",
        "--control-by",
        "word",
    ]);
    assert_eq!(code, 0, "{stderr}");
    let j = read_json(&out.join("probe.json"));
    for t in j["split"].as_array().unwrap() {
        let folds = t["folds"].as_array().unwrap();
        assert_eq!(folds.len(), 5, "{}", t["task"]);
        let mut tested: Vec<&str> = folds
            .iter()
            .flat_map(|f| f["test"].as_array().unwrap().iter())
            .map(|v| v.as_str().unwrap())
            .collect();
        let n = tested.len();
        tested.sort_unstable();
        tested.dedup();
        assert_eq!(n, tested.len(), "a group tested twice in {}", t["task"]);
        let expected = if t["task"] == "speaker" { 6 * 4 } else { 6 };
        assert_eq!(n, expected, "every group tested once in {}", t["task"]);
        assert_eq!(t["control_by"], "word");
    }
    let recs = records(&out);
    for r in &recs {
        assert_eq!(r["folds"], 5);
        assert!(r["accuracy_sd"].as_f64().is_some());
        assert_eq!(r["n_test"], 6 * 4 * 12 * 3, "every item tested once");
        assert_eq!(r["control_by"], "word");
        assert_eq!(r["mdl_status"], "off");
    }
    // One split asked for: one fold.
    let out1 = tmp.path().join("out1");
    let Ran { code, .. } = run_text([
        "probe",
        cap.to_str().unwrap(),
        "--out",
        out1.to_str().unwrap(),
        "--quiet",
        "--bootstrap",
        "50",
        "--layers",
        "1",
        "--folds",
        "1",
    ]);
    assert_eq!(code, 0);
    assert!(records(&out1).iter().all(|r| r["folds"] == 1));
    // 12 speakers × 4 utterances: the speaker task's one split tests on 12 utterances (≥ 10),
    // so it keeps one split while phone (3 test speakers) gets folds.
    let cap12 = tmp.path().join("cap12");
    typed_capture(&cap12, 12);
    let out12 = tmp.path().join("out12");
    let Ran { code, .. } = run_text([
        "probe",
        cap12.to_str().unwrap(),
        "--out",
        out12.to_str().unwrap(),
        "--quiet",
        "--bootstrap",
        "50",
        "--layers",
        "1",
        "--no-control",
    ]);
    assert_eq!(code, 0);
    let recs = records(&out12);
    assert_eq!(field(&recs, "phone", 1, "folds"), 5.0);
    assert_eq!(field(&recs, "speaker", 1, "folds"), 1.0);
}

#[test]
fn mdl_is_recorded_or_skipped_with_the_reason() {
    let tmp = tempfile::tempdir().unwrap();
    let cap = tmp.path().join("cap");
    typed_capture(&cap, 12);
    let out = tmp.path().join("out");
    let Ran { code, stderr, .. } = run_text([
        "probe",
        cap.to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
        "--quiet",
        "--bootstrap",
        "50",
        "--task",
        "phone",
        "--mdl",
        "--no-control",
    ]);
    assert_eq!(code, 0, "{stderr}");
    assert!(out.join("probe_mdl.png").exists() && out.join("probe_mdl.svg").exists());
    let recs = records(&out);
    for r in &recs {
        assert_eq!(r["mdl_status"], "computed");
        let (u, o) = (
            r["mdl_uniform_bits"].as_f64().unwrap(),
            r["mdl_online_bits"].as_f64().unwrap(),
        );
        let items = r["mdl_items"].as_f64().unwrap();
        assert!((u - items * (PHONES as f64).log2()).abs() < 1e-6 * u);
        assert!((r["mdl_compression"].as_f64().unwrap() - u / o).abs() < 1e-9);
        // Both layers encode the phone: well above the uniform code.
        assert!(u / o > 2.0, "{r}");
        assert_eq!(r["control_by"], "none");
    }
    // Too few training items: the record says why.
    let small = tmp.path().join("small");
    typed_capture(&small, 2);
    let out2 = tmp.path().join("out2");
    let Ran { code, stderr, .. } = run_text([
        "probe",
        small.to_str().unwrap(),
        "--out",
        out2.to_str().unwrap(),
        "--quiet",
        "--bootstrap",
        "50",
        "--task",
        "phone",
        "--pool",
        "segment",
        "--mdl",
    ]);
    assert_eq!(code, 0, "{stderr}");
    for r in records(&out2) {
        let st = r["mdl_status"].as_str().unwrap();
        assert!(
            st.starts_with("skipped: only") && st.contains("100"),
            "{st}"
        );
        assert!(r["mdl_compression"].is_null() || r["mdl_compression"].as_f64().is_none());
    }
}

fn refused(args: &[&str], out: &Path, needles: &[&str]) {
    let Ran { code, stderr, .. } = run_text(args);
    assert_eq!(code, 2, "expected exit 2 for {args:?}: {stderr}");
    for n in needles {
        assert!(
            stderr.contains(n),
            "message for {args:?} lacks '{n}': {stderr}"
        );
    }
    assert!(!out.exists(), "output written despite the error");
}

#[test]
fn bad_control_and_fold_options_are_refused() {
    let tmp = tempfile::tempdir().unwrap();
    let cap = tmp.path().join("cap");
    typed_capture(&cap, 6);
    let c = cap.to_str().unwrap();
    let out = tmp.path().join("out");
    let o = out.to_str().unwrap();
    // A column that does not exist: the message lists the columns.
    refused(
        &["probe", c, "--out", o, "--control-by", "lemma"],
        &out,
        &["lemma", "phone", "word", "const", "speaker"],
    );
    // A column with a single value.
    refused(
        &["probe", c, "--out", o, "--control-by", "const"],
        &out,
        &["const", "at least 2", "found 1"],
    );
    // More folds than speakers: both numbers.
    refused(
        &["probe", c, "--out", o, "--task", "phone", "--folds", "9"],
        &out,
        &["--folds 9", "6 speakers"],
    );
    refused(
        &["probe", c, "--out", o, "--folds", "many"],
        &out,
        &["auto"],
    );
}

/// Accuracy of every (layer, task) record of a `probe.json`.
fn accuracies(probe_json: &Path) -> Vec<(u64, String, f64)> {
    records(probe_json.parent().unwrap())
        .iter()
        .map(|r| {
            (
                r["layer"].as_u64().unwrap(),
                r["task"].as_str().unwrap().to_string(),
                // The score: accuracy, or R² for a continuous task (whose accuracy is null).
                r["accuracy"].as_f64().or(r["r2"].as_f64()).unwrap(),
            )
        })
        .collect()
}

/// Add a continuous column `pos` (each frame's place in its utterance, 36 values) to the
/// capture in `dir`.
fn add_position_column(dir: &Path) {
    let p = dir.join("frames.tsv");
    let text = std::fs::read_to_string(&p).unwrap();
    let mut out = String::new();
    let (mut utt, mut pos) = (String::new(), 0usize);
    for (i, line) in text.lines().enumerate() {
        if i == 0 {
            out.push_str(&format!("{line}\tpos\n"));
            continue;
        }
        let u = line.split('\t').next().unwrap().to_string();
        pos = if u == utt { pos + 1 } else { 0 };
        utt = u;
        out.push_str(&format!("{line}\t{pos}\n"));
    }
    std::fs::write(&p, out).unwrap();
}

/// Check that every probe delta of `compare_json` shows, for A and for B, exactly the accuracy
/// of the same (layer, task) in the probe records `a` and `b`; returns how many were checked.
fn deltas_match(compare_json: &Path, a: &[(u64, String, f64)], b: &[(u64, String, f64)]) -> usize {
    let j = read_json(compare_json);
    let deltas = j["probe_delta"].as_array().unwrap();
    for d in deltas {
        let key = (d["layer"].as_u64().unwrap(), d["task"].as_str().unwrap());
        let find = |v: &[(u64, String, f64)]| {
            v.iter()
                .find(|(l, t, _)| (*l, t.as_str()) == key)
                .unwrap_or_else(|| panic!("no probe record for {key:?}"))
                .2
        };
        // A continuous task's delta is of R² and McNemar's test does not apply to it.
        let (sa, sb) = if d["kind"] == "continuous" {
            assert_eq!(d["mcnemar_method"], "not_applicable", "{d}");
            (d["r2_a"].as_f64(), d["r2_b"].as_f64())
        } else {
            (d["accuracy_a"].as_f64(), d["accuracy_b"].as_f64())
        };
        assert_eq!(sa.unwrap(), find(a), "{d}");
        assert_eq!(sb.unwrap(), find(b), "{d}");
    }
    deltas.len()
}

#[test]
fn one_split_for_the_whole_run() {
    // The page must show one accuracy per (layer, task): report's probe deltas pair the probe
    // stage's own predictions, and compare alone runs the probe stage's split and fits.
    let tmp = tempfile::tempdir().unwrap();
    let (a, b) = (tmp.path().join("capA"), tmp.path().join("capB"));
    typed_capture_with_noise(&a, 6, 0.1);
    typed_capture_with_noise(&b, 6, 3.0);
    // A continuous column too: its ΔR² must pair the probe stage's own predictions as well.
    add_position_column(&a);
    add_position_column(&b);
    let rep = tmp.path().join("rep");
    let Ran { code, stderr, .. } = run_text([
        "report",
        a.to_str().unwrap(),
        b.to_str().unwrap(),
        "--out",
        rep.to_str().unwrap(),
        "--quiet",
        "--map-method",
        "pca",
        "--no-abx",
    ]);
    assert_eq!(code, 0, "{stderr}");
    let (pa, pb) = (
        accuracies(&rep.join("capA/probe.json")),
        accuracies(&rep.join("capB/probe.json")),
    );
    // The captures differ, so a delta that matched by accident would show.
    assert!(pa.iter().zip(&pb).any(|(x, y)| x.2 != y.2));
    assert_eq!(deltas_match(&rep.join("compare.json"), &pa, &pb), 2 * 3);
    // compare alone and probe alone agree too.
    let (cmp, pra, prb) = (
        tmp.path().join("cmp"),
        tmp.path().join("pa"),
        tmp.path().join("pb"),
    );
    for args in [
        vec![
            "compare",
            a.to_str().unwrap(),
            b.to_str().unwrap(),
            "--out",
            cmp.to_str().unwrap(),
        ],
        vec!["probe", a.to_str().unwrap(), "--out", pra.to_str().unwrap()],
        vec!["probe", b.to_str().unwrap(), "--out", prb.to_str().unwrap()],
    ] {
        let Ran { code, stderr, .. } = run_text(args.iter().chain(&["--quiet"]));
        assert_eq!(code, 0, "{args:?}: {stderr}");
    }
    let (pa1, pb1) = (
        accuracies(&pra.join("probe.json")),
        accuracies(&prb.join("probe.json")),
    );
    assert_eq!(pa1, pa);
    assert_eq!(deltas_match(&cmp.join("compare.json"), &pa1, &pb1), 2 * 3);
}
