//! `examples/save_capture.py` (the numpy-only capture writer in the README) writes captures
//! that voxstrata reads: both per-utterance layouts, the same data either way, its
//! `utterances.tsv` column and its CTM labels. Runs when a Python with numpy is found
//! (`VOXSTRATA_PYTHON`, else `python3`); otherwise it says so and checks nothing, except
//! under CI (`CI` set), where a missing numpy fails it.

mod common;

use std::path::Path;
use std::process::Command;

use voxstrata::capture::{Capture, OpenOptions};

fn python() -> Option<String> {
    let py = std::env::var("VOXSTRATA_PYTHON").unwrap_or_else(|_| "python3".into());
    let ok = Command::new(&py)
        .args(["-c", "import numpy"])
        .output()
        .map(|o| o.status.success())
        .unwrap_or(false);
    ok.then_some(py)
}

fn save(py: &str, out: &Path, layout: &str) -> Capture {
    let script = Path::new(env!("CARGO_MANIFEST_DIR")).join("examples/save_capture.py");
    let o = Command::new(py)
        .arg(&script)
        .args(["--out", common::s(out), "--layout", layout])
        .output()
        .unwrap();
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    Capture::open(out, &OpenOptions::default()).unwrap()
}

#[test]
fn the_example_writer_makes_captures_in_both_layouts() {
    let Some(py) = python() else {
        assert!(
            std::env::var_os("CI").is_none(),
            "CI is set but no Python with numpy was found to run examples/save_capture.py"
        );
        eprintln!(
            "skipped: no Python with numpy (set VOXSTRATA_PYTHON or install numpy for python3) \
             — examples/save_capture.py was not run"
        );
        return;
    };
    let d = tempfile::tempdir().unwrap();
    let a = save(&py, &d.path().join("stacks"), "stacks");
    let b = save(&py, &d.path().join("folders"), "folders");
    assert!(a.layout.starts_with("per-utterance stacks"), "{}", a.layout);
    assert!(b.layout.starts_with("per-layer folders"), "{}", b.layout);
    assert_eq!(a.layers.len(), 2);
    assert_eq!(a.layers[0].dim(), 32);
    assert_eq!(a.frames.utterances.len(), 12);
    assert_eq!(a.frames.task_names(), vec!["phone", "dialect", "speaker"]);
    // The runs of the script cover every frame, so the CTM labels every frame.
    assert_eq!(a.frames.task("phone").unwrap().n_unlabelled(), 0);
    assert_eq!(a.frames.frame_utt, b.frames.frame_utt);
    for l in 0..2 {
        assert_eq!(
            a.read_layer(l).unwrap(),
            b.read_layer(l).unwrap(),
            "layer {l}"
        );
    }
    let r = common::run_text(["inspect", common::s(&d.path().join("stacks"))]);
    assert_eq!(r.code, 0, "{}", r.stderr);
    assert!(
        r.stdout.contains("utterances.tsv + alignments.ctm"),
        "{}",
        r.stdout
    );
}
