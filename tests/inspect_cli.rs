//! `voxstrata inspect` driven as a user would: a good capture in each supported layout, and a
//! table of bad inputs, each of which must exit with code 2 and a message that names the file,
//! the row or field, and what was expected and found — never a panic.

mod common;

use std::path::Path;

use common::{npy_bytes, run, write_layer, Frames};
use ndarray::Array2;

/// A small capture: 3 speakers x 2 utterances x 10 frames, 3 layers of dim 4.
fn good_capture(dir: &Path) {
    let n = 60;
    let layers: Vec<Array2<f32>> = (0..3)
        .map(|l| {
            Array2::from_shape_fn((n, 4), |(i, j)| {
                ((i * 7 + j * 3 + l) % 11) as f32 * 0.5 - 2.0
            })
        })
        .collect();
    let mut frames = Frames::new(&["utterance", "speaker", "phone", "group"]);
    for i in 0..n {
        let spk = i / 20;
        let utt = i / 10;
        let ph = ["a", "i", "s", "ʃ", "ə"][i % 5];
        let group = if spk == 0 { "child" } else { "adult" };
        frames.push([
            format!("u{utt}"),
            format!("s{spk}"),
            ph.into(),
            group.into(),
        ]);
    }
    common::write_capture(dir, &frames, &layers);
}

#[test]
fn inspect_reports_layers_tasks_and_sizes() {
    let d = tempfile::tempdir().unwrap();
    good_capture(d.path());
    let out = run(["inspect", d.path().to_str().unwrap(), "--json"]);
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    assert_eq!(v["frames"], 60);
    assert_eq!(v["utterances"], 6);
    assert_eq!(v["speakers"], 3);
    assert_eq!(v["layers"].as_array().unwrap().len(), 3);
    assert_eq!(v["layers"][1]["dim"], 4);
    assert_eq!(v["layers"][1]["dtype"], "float32");
    let tasks: Vec<&str> = v["tasks"]
        .as_array()
        .unwrap()
        .iter()
        .map(|t| t["task"].as_str().unwrap())
        .collect();
    assert_eq!(tasks, vec!["phone", "group", "speaker"]);
    assert_eq!(v["tasks"][0]["classes"], 5);
    assert_eq!(v["tasks"][0]["largest"][0]["frames"], 12);
    assert_eq!(v["bytes_on_disk"].as_u64().unwrap(), 3 * (128 + 60 * 4 * 4));
    // Text form names the IPA labels as they are.
    let text = run(["inspect", d.path().to_str().unwrap()]);
    let s = String::from_utf8(text.stdout).unwrap();
    assert!(s.contains("phone") && s.contains("ʃ"), "{s}");
}

#[test]
fn inspect_reads_segments_with_hop_from_capture_toml() {
    let d = tempfile::tempdir().unwrap();
    let a = Array2::<f32>::from_shape_fn((12, 3), |(i, j)| (i + j) as f32);
    ndarray_npy::write_npy(d.path().join("layer_0.npy"), &a).unwrap();
    ndarray_npy::write_npy(d.path().join("layer_1.npy"), &a).unwrap();
    std::fs::write(
        d.path().join("capture.toml"),
        "name = \"seg\"\nhop_s = 0.01\n",
    )
    .unwrap();
    std::fs::write(
        d.path().join("utterances.tsv"),
        "utterance\tspeaker\tframes\nu1\tA\t6\nu2\tB\t6\n",
    )
    .unwrap();
    std::fs::write(
        d.path().join("segments.tsv"),
        "utterance\tstart_s\tend_s\tlabel\nu1\t0\t0.03\tsil\nu1\t0.03\t0.06\ta\nu2\t0.0\t0.02\ts\n",
    )
    .unwrap();
    let out = run([
        "inspect",
        d.path().to_str().unwrap(),
        "--json",
        "--drop-label",
        "sil",
    ]);
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    assert_eq!(v["name"], "seg");
    // u1: 3 sil (dropped) + 3 a; u2: 2 s + 4 in no segment -> 5 labelled, 7 unlabelled.
    assert_eq!(v["tasks"][0]["labelled_frames"], 5);
    assert_eq!(v["tasks"][0]["unlabelled_frames"], 7);
}

#[test]
fn inspect_reads_a_single_3d_stack() {
    let d = tempfile::tempdir().unwrap();
    good_capture(d.path());
    for l in 0..3 {
        std::fs::remove_file(d.path().join(format!("layer_{l:02}.npy"))).unwrap();
    }
    let a = ndarray::Array3::<f32>::from_shape_fn((5, 60, 2), |(l, i, j)| (l * 100 + i + j) as f32);
    ndarray_npy::write_npy(d.path().join("activations.npy"), &a).unwrap();
    let out = run(["inspect", d.path().to_str().unwrap(), "--json"]);
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    assert_eq!(v["layers"].as_array().unwrap().len(), 5);
}

#[test]
fn inspect_warns_about_nan_and_constant_columns_and_tiny_classes() {
    let d = tempfile::tempdir().unwrap();
    good_capture(d.path());
    let mut a = Array2::from_shape_fn((60, 4), |(i, j)| (i * j) as f32);
    a[[7, 2]] = f32::NAN;
    write_layer(d.path(), 1, &a);
    let out = run(["inspect", d.path().to_str().unwrap(), "--json"]);
    assert!(out.status.success());
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    let w: Vec<String> = v["warnings"]
        .as_array()
        .unwrap()
        .iter()
        .map(|x| x.as_str().unwrap().to_string())
        .collect();
    assert!(
        w.iter().any(|x| x.contains("NaN") && x.contains("frame 7")),
        "{w:?}"
    );
    // column 0 of layer 1 is i*0 = 0 for every frame
    assert!(
        w.iter()
            .any(|x| x.contains("layer 1") && x.contains("constant")),
        "{w:?}"
    );
    assert!(v["layers"][1]["nonfinite_frames_sampled"] == 1);
}

type Setup = fn(&Path);

/// Every bad input of the capture format: (case, how to break a good capture, words the
/// message must contain). Add a case with one line.
const BAD: &[(&str, Setup, &[&str])] = &[
    (
        "layer frames differ from labels",
        |d| {
            for l in 0..3 {
                write_layer(d, l, &Array2::<f32>::zeros((59, 4)));
            }
        },
        &["layer_00.npy", "60 frames", "59"],
    ),
    (
        "layers with different frame counts",
        |d| {
            write_layer(d, 2, &Array2::<f32>::zeros((61, 4)));
        },
        &["layer_02.npy", "61 frames", "layer_00.npy"],
    ),
    (
        "truncated npy",
        |d| {
            let p = d.join("layer_01.npy");
            let b = std::fs::read(&p).unwrap();
            std::fs::write(&p, &b[..b.len() - 5]).unwrap();
        },
        &["layer_01.npy", "data", "truncated"],
    ),
    (
        "not an npy file",
        |d| {
            std::fs::write(d.join("layer_01.npy"), "utterance\tspeaker\n").unwrap();
        },
        &["layer_01.npy", "magic", "\\x93NUMPY"],
    ),
    (
        "complex dtype",
        |d| {
            std::fs::write(
                d.join("layer_01.npy"),
                npy_bytes("<c8", "(60, 4)", 1, &[0; 60 * 4 * 8]),
            )
            .unwrap();
        },
        &["layer_01.npy", "descr", "'<c8'", "complex"],
    ),
    (
        "object dtype",
        |d| {
            std::fs::write(
                d.join("layer_01.npy"),
                npy_bytes("|O", "(60, 4)", 1, &[0; 64]),
            )
            .unwrap();
        },
        &["layer_01.npy", "descr", "object"],
    ),
    (
        "integer dtype",
        |d| {
            std::fs::write(
                d.join("layer_01.npy"),
                npy_bytes("<i4", "(60, 4)", 1, &[0; 60 * 16]),
            )
            .unwrap();
        },
        &["layer_01.npy", "descr", "integers"],
    ),
    (
        "shape claims more bytes than the file",
        |d| {
            std::fs::write(
                d.join("layer_01.npy"),
                npy_bytes("<f4", "(1152921504606846976, 4)", 1, &[0; 64]),
            )
            .unwrap();
        },
        &["layer_01.npy", "data", "bytes"],
    ),
    (
        "3-D file where 2-D expected",
        |d| {
            ndarray_npy::write_npy(
                d.join("layer_01.npy"),
                &ndarray::Array3::<f32>::zeros((2, 60, 4)),
            )
            .unwrap();
        },
        &["layer_01.npy", "2-D", "3-D"],
    ),
    (
        "missing header column",
        |d| {
            std::fs::write(d.join("frames.tsv"), "utt\tspeaker\tphone\nu\ts\ta\n").unwrap();
        },
        &["frames.tsv", "row 1", "utterance", "utt, speaker, phone"],
    ),
    (
        "wrong number of fields",
        |d| {
            let t = std::fs::read_to_string(d.join("frames.tsv")).unwrap();
            let mut lines: Vec<String> = t.lines().map(String::from).collect();
            lines[5] = "u0\ts0".into();
            std::fs::write(d.join("frames.tsv"), lines.join("\n")).unwrap();
        },
        &["frames.tsv", "row 6", "4 tab-separated fields", "2 fields"],
    ),
    (
        "empty label table",
        |d| {
            std::fs::write(d.join("frames.tsv"), "").unwrap();
        },
        &["frames.tsv", "header", "empty file"],
    ),
    (
        "non-UTF-8 label table",
        |d| {
            let mut b = std::fs::read(d.join("frames.tsv")).unwrap();
            let at = b.len() - 3;
            b[at] = 0xff;
            std::fs::write(d.join("frames.tsv"), b).unwrap();
        },
        &["frames.tsv", "row 61", "UTF-8"],
    ),
    (
        "no layer files",
        |d| {
            for l in 0..3 {
                std::fs::remove_file(d.join(format!("layer_{l:02}.npy"))).unwrap();
            }
        },
        &["layer files", "layer_{}.npy", "no .npy files"],
    ),
    (
        "empty folder",
        |d| {
            for e in std::fs::read_dir(d).unwrap() {
                std::fs::remove_file(e.unwrap().path()).unwrap();
            }
        },
        &["layer files", "no .npy files"],
    ),
    (
        "no labels",
        |d| {
            std::fs::remove_file(d.join("frames.tsv")).unwrap();
        },
        &["labels", "frames.tsv", "segments.tsv"],
    ),
    (
        "overlapping segments",
        |d| {
            std::fs::remove_file(d.join("frames.tsv")).unwrap();
            std::fs::write(
                d.join("utterances.tsv"),
                "utterance\tspeaker\tframes\nu1\tA\t30\nu2\tB\t30\n",
            )
            .unwrap();
            std::fs::write(
                d.join("segments.tsv"),
                "utterance\tstart_s\tend_s\tlabel\nu1\t0\t0.2\ta\nu1\t0.1\t0.3\ti\n",
            )
            .unwrap();
        },
        &["segments.tsv", "row 3", "overlap"],
    ),
    (
        "segment past the utterance",
        |d| {
            std::fs::remove_file(d.join("frames.tsv")).unwrap();
            std::fs::write(
                d.join("utterances.tsv"),
                "utterance\tspeaker\tframes\nu1\tA\t30\nu2\tB\t30\n",
            )
            .unwrap();
            std::fs::write(
                d.join("segments.tsv"),
                "utterance\tstart_s\tend_s\tlabel\nu1\t0\t0.2\ta\nu2\t0.5\t2.5\ti\n",
            )
            .unwrap();
        },
        &["segments.tsv", "row 3", "end_s", "30 frames", "2.5"],
    ),
    (
        "segment for an unknown utterance",
        |d| {
            std::fs::remove_file(d.join("frames.tsv")).unwrap();
            std::fs::write(
                d.join("utterances.tsv"),
                "utterance\tspeaker\tframes\nu1\tA\t30\nu2\tB\t30\n",
            )
            .unwrap();
            std::fs::write(
                d.join("segments.tsv"),
                "utterance\tstart_s\tend_s\tlabel\nu9\t0\t0.2\ta\n",
            )
            .unwrap();
        },
        &["segments.tsv", "row 2", "'u9'", "utterances.tsv"],
    ),
    (
        "bad capture.toml key",
        |d| {
            std::fs::write(d.join("capture.toml"), "hop = 0.01\n").unwrap();
        },
        &["capture.toml", "hop"],
    ),
];

#[test]
fn bad_inputs_exit_2_with_a_message_naming_the_problem() {
    let mut failures = Vec::new();
    for (case, setup, words) in BAD {
        let d = tempfile::tempdir().unwrap();
        good_capture(d.path());
        setup(d.path());
        let out = run(["inspect", d.path().to_str().unwrap()]);
        let err = String::from_utf8_lossy(&out.stderr).to_string();
        if out.status.code() != Some(2) {
            failures.push(format!(
                "{case}: exit {:?}, stderr {err}",
                out.status.code()
            ));
            continue;
        }
        if err.contains("panicked") || !out.stdout.is_empty() {
            failures.push(format!("{case}: panic or output: {err}"));
        }
        for w in *words {
            if !err.contains(w) {
                failures.push(format!("{case}: message lacks '{w}': {err}"));
            }
        }
    }
    assert!(failures.is_empty(), "{}", failures.join("\n"));
}

#[test]
fn missing_capture_folder_is_bad_input() {
    let out = run(["inspect", "/nonexistent/capture"]);
    assert_eq!(out.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&out.stderr).contains("/nonexistent/capture"));
}

#[test]
fn unknown_option_is_a_usage_error() {
    let out = run(["inspect", ".", "--no-such-option"]);
    assert_eq!(out.status.code(), Some(2));
}

#[test]
fn nonfinite_values_stop_a_layer_read_or_are_dropped_when_allowed() {
    let d = tempfile::tempdir().unwrap();
    good_capture(d.path());
    let mut a = Array2::from_shape_fn((60, 4), |(i, j)| (i + j) as f32);
    a[[12, 3]] = f32::INFINITY;
    write_layer(d.path(), 2, &a);
    let cap = voxstrata::Capture::open(d.path(), &Default::default()).unwrap();
    let e = cap.read_layer(2).unwrap_err().to_string();
    assert!(
        e.contains("layer_02.npy") && e.contains("frame 12, column 3") && e.contains("inf"),
        "{e}"
    );
    let opts = voxstrata::OpenOptions {
        allow_nonfinite: true,
        ..Default::default()
    };
    let cap = voxstrata::Capture::open(d.path(), &opts).unwrap();
    assert_eq!(cap.nonfinite_frames, vec![12]);
    let m = cap.read_layer(2).unwrap();
    assert!(m.iter().all(|v| v.is_finite()));
    assert!(cap
        .frames
        .tasks
        .iter()
        .all(|t| t.codes[12] == voxstrata::capture::UNLABELLED));
}
