//! `voxstrata demo` through the real binary: the small scenario is reproducible byte for
//! byte from its seed, refuses to overwrite a folder holding files, and writes captures that
//! `inspect` reads with the layers, frames and label tasks the design promises.

mod common;

use std::path::Path;

use common::{run, s};

fn demo(out: &Path, seed: u64) -> std::process::Output {
    run([
        "demo",
        "--size",
        "small",
        "--quiet",
        "--seed",
        &seed.to_string(),
        "--out",
        s(out),
    ])
}

/// Every file under `dir` (relative name, bytes), sorted by name.
fn files(dir: &Path) -> Vec<(String, Vec<u8>)> {
    let mut out = Vec::new();
    for sub in ["early", "final"] {
        let mut names: Vec<_> = std::fs::read_dir(dir.join(sub))
            .unwrap()
            .map(|e| e.unwrap().file_name().into_string().unwrap())
            .collect();
        names.sort();
        for n in names {
            out.push((
                format!("{sub}/{n}"),
                std::fs::read(dir.join(sub).join(&n)).unwrap(),
            ));
        }
    }
    out
}

#[test]
fn small_demo_is_byte_identical_for_a_seed_and_differs_across_seeds() {
    let d = tempfile::tempdir().unwrap();
    let (a, b, c) = (d.path().join("a"), d.path().join("b"), d.path().join("c"));
    for (dir, seed) in [(&a, 7), (&b, 7), (&c, 8)] {
        let o = demo(dir, seed);
        assert!(
            o.status.success(),
            "demo failed: {}",
            String::from_utf8_lossy(&o.stderr)
        );
    }
    let (fa, fb, fc) = (files(&a), files(&b), files(&c));
    let names: Vec<&str> = fa.iter().map(|(n, _)| n.as_str()).collect();
    let want: Vec<String> = ["early", "final"]
        .iter()
        .flat_map(|s| {
            let mut v = vec![format!("{s}/capture.toml"), format!("{s}/frames.tsv")];
            v.extend((0..=5).map(|l| format!("{s}/layer_{l:02}.npy")));
            v
        })
        .collect();
    assert_eq!(names, want);
    assert_eq!(fa, fb, "same seed, different files");
    for ((n, x), (_, y)) in fa.iter().zip(&fc) {
        if n.ends_with(".npy") {
            assert_ne!(x, y, "{n} is the same under seeds 7 and 8");
        }
    }
}

#[test]
fn demo_refuses_a_folder_that_holds_files_unless_forced() {
    let d = tempfile::tempdir().unwrap();
    std::fs::write(d.path().join("keep.txt"), "mine").unwrap();
    let o = demo(d.path(), 0);
    assert_eq!(o.status.code(), Some(2));
    let err = String::from_utf8_lossy(&o.stderr);
    assert!(err.contains("--force"), "message: {err}");
    assert!(!d.path().join("final").exists());
    let o = run([
        "demo",
        "--size",
        "small",
        "--quiet",
        "--force",
        "--out",
        s(d.path()),
    ]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    assert_eq!(
        std::fs::read_to_string(d.path().join("keep.txt")).unwrap(),
        "mine"
    );
}

#[test]
fn demo_capture_opens_with_the_promised_layers_and_tasks() {
    let d = tempfile::tempdir().unwrap();
    let o = demo(d.path(), 0);
    assert!(o.status.success());
    let stdout = String::from_utf8_lossy(&o.stdout);
    assert!(
        stdout.contains("held-out (speaker-disjoint) phone accuracy"),
        "stdout: {stdout}"
    );
    for sub in ["early", "final"] {
        let o = run(["inspect", "--json", s(&d.path().join(sub))]);
        assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
        let j: serde_json::Value = serde_json::from_slice(&o.stdout).unwrap();
        // Small size: 8 talkers (two per group), 4 utterances each, all captured.
        assert_eq!(j["speakers"], 8);
        assert_eq!(j["utterances"], 32);
        let frames = j["frames"].as_u64().unwrap();
        assert!(frames > 1000, "{frames} frames");
        let layers = j["layers"].as_array().unwrap();
        assert_eq!(layers.len(), 6);
        assert_eq!(layers[0]["dim"], 40);
        assert!(layers
            .iter()
            .all(|l| l["dtype"] == "float16" && l["nonfinite_frames_sampled"] == 0));
        let tasks: Vec<(&str, u64)> = j["tasks"]
            .as_array()
            .unwrap()
            .iter()
            .map(|t| (t["task"].as_str().unwrap(), t["classes"].as_u64().unwrap()))
            .collect();
        assert_eq!(tasks, vec![("phone", 14), ("group", 4), ("speaker", 8)]);
        let acc = j["notes"]["heldout_accuracy"].as_f64().unwrap();
        assert!(acc > 1.0 / 14.0 && acc <= 1.0, "held-out accuracy {acc}");
        assert_eq!(j["hop_s"], 0.01);
    }
}
