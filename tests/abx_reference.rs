//! The ABX analysis and the within-phone variance share against a brute-force numpy
//! computation (fixtures written by `tests/reference/make_abx.py`, numpy 2.4.6).
//!
//! The task is the phone ABX discriminability of Schatz et al. (2013); its details (items,
//! contexts, frame and DTW distances, tie rules, the order of the averages) are voxstrata's
//! own definition, written out in `src/analysis/abx/mod.rs`, which the script follows
//! independently (a DTW with a back-trace and explicit triplet loops).

use std::path::PathBuf;

use voxstrata::analysis::abx::{self, AbxOptions};
use voxstrata::analysis::variance::within_phone_share;
use voxstrata::capture::{Capture, OpenOptions};

fn dir() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("tests/reference/abx")
}

fn expected() -> serde_json::Value {
    serde_json::from_str(&std::fs::read_to_string(dir().join("expected.json")).unwrap()).unwrap()
}

#[test]
fn abx_matches_the_brute_force_reference() {
    let cap = Capture::open(&dir(), &OpenOptions::default()).unwrap();
    let want = expected();
    let opts = AbxOptions {
        label: "phone".into(),
        max_items: 0, // every item: the per-cell sample is ours, not the reference's
    };
    let layers: Vec<usize> = (0..cap.layers.len()).collect();
    let got = abx::run(&cap, &opts, 0, &layers).unwrap();
    assert_eq!(got.n_items, want["n_items"].as_u64().unwrap() as usize);
    assert_eq!(got.n_items_used, got.n_items);
    let wl = want["layers"].as_array().unwrap();
    assert_eq!(got.records.len(), 2 * wl.len());
    for w in wl {
        let layer = w["layer"].as_u64().unwrap() as usize;
        for cond in ["within", "across"] {
            let r = got
                .records
                .iter()
                .find(|r| r.layer == layer && r.condition == cond)
                .unwrap_or_else(|| panic!("no {cond} record for layer {layer}"));
            let e = &w[cond];
            let want_err = e["error_rate"].as_f64().unwrap();
            assert!(
                (r.error_rate - want_err).abs() < 1e-6,
                "layer {layer} {cond}: {} vs numpy {want_err}",
                r.error_rate
            );
            assert_eq!(r.n_triplets, e["n_triplets"].as_u64().unwrap(), "{cond}");
            assert_eq!(r.n_pairs as u64, e["n_pairs"].as_u64().unwrap(), "{cond}");
            assert_eq!(r.label, "phone");
        }
    }
    // the fixture holds zero frames: each layer says so
    for w in wl {
        let layer = w["layer"].as_u64().unwrap();
        assert!(
            got.notes
                .iter()
                .any(|n| n.starts_with(&format!("layer {layer}: 3 frames are zero vectors"))),
            "{:?}",
            got.notes
        );
    }
}

#[test]
fn sampling_is_the_same_for_every_layer_and_seeded() {
    let cap = Capture::open(&dir(), &OpenOptions::default()).unwrap();
    let opts = AbxOptions {
        label: "phone".into(),
        max_items: 2,
    };
    let a = abx::run(&cap, &opts, 11, &[0, 1]).unwrap();
    let b = abx::run(&cap, &opts, 11, &[1]).unwrap();
    // layer 1 alone gives the records it gives among both layers
    let a1: Vec<_> = a.records.iter().filter(|r| r.layer == 1).cloned().collect();
    assert_eq!(a1, b.records);
    assert!(a.n_items_used < a.n_items);
    let w: Vec<u64> = a.records.iter().map(|r| r.n_triplets).collect();
    assert_eq!(w[0], w[2], "same items, same triplets in both layers");
}

#[test]
fn within_phone_share_matches_numpy() {
    let cap = Capture::open(&dir(), &OpenOptions::default()).unwrap();
    let want = expected();
    let phone = &cap.frames.task("phone").unwrap().codes;
    let speaker = cap.frames.frame_speaker();
    for w in want["layers"].as_array().unwrap() {
        let layer = w["layer"].as_u64().unwrap() as usize;
        let x = cap.read_layer(cap.layer_index(layer).unwrap()).unwrap();
        let got = within_phone_share(x.view(), phone, &speaker).unwrap();
        let e = w["within_phone_share"].as_f64().unwrap();
        assert!((got - e).abs() < 1e-9, "layer {layer}: {got} vs numpy {e}");
    }
}

#[test]
fn unknown_label_lists_the_columns() {
    let cap = Capture::open(&dir(), &OpenOptions::default()).unwrap();
    let opts = AbxOptions {
        label: "word".into(),
        max_items: 5,
    };
    let e = abx::run(&cap, &opts, 0, &[0]).unwrap_err();
    assert!(e.is_input());
    assert!(e.to_string().contains("phone, speaker"), "{e}");
}
