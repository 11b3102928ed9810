//! The per-utterance layouts: `acts/<utterance>.npy` stacks and `layer_XX/<utterance>.npy`
//! folders, listed by `utterances.tsv`; frames concatenated in its order; its further columns
//! as constant label tasks; and the bad inputs each layout refuses.

mod common;

use std::path::Path;

use common::{run_text, s, write_folders, write_stacks, write_utterances};
use ndarray::{s as sl, Array2, Array3, Axis, ShapeBuilder};
use voxstrata::capture::{Capture, OpenOptions, UNLABELLED};

/// Stack of utterance `k` with `n` frames: value = 1000 k + 100 layer + 10 frame + column,
/// so every value names its place (known answer).
fn stack(k: usize, layers: usize, n: usize, d: usize) -> Array3<f32> {
    Array3::from_shape_fn((layers, n, d), |(l, f, c)| {
        (1000 * k + 100 * l + 10 * f + c) as f32
    })
}

fn utts() -> Vec<(&'static str, Array3<f32>)> {
    vec![
        ("b", stack(1, 3, 4, 5)),
        ("a", stack(2, 3, 2, 5)),
        ("c", stack(3, 3, 3, 5)),
    ]
}

/// utterances.tsv lists b, a, c (not sorted by name): frames come in that order.
fn list(dir: &Path) {
    write_utterances(
        dir,
        &[("b", "s1"), ("a", "s2"), ("c", "s1")],
        &[("dialect", vec!["north", "south", ""])],
    );
}

fn expected_layer(l: usize) -> Array2<f32> {
    let parts: Vec<Array2<f32>> = utts()
        .iter()
        .map(|(_, a)| a.index_axis(Axis(0), l).to_owned())
        .collect();
    let views: Vec<_> = parts.iter().map(|p| p.view()).collect();
    ndarray::concatenate(Axis(0), &views).unwrap()
}

fn check_capture(dir: &Path) {
    let cap = Capture::open(dir, &OpenOptions::default()).unwrap();
    assert_eq!(cap.n_frames(), 9);
    assert_eq!(cap.layers.len(), 3);
    assert_eq!(cap.frames.utterances, vec!["b", "a", "c"]);
    for l in 0..3 {
        let m = cap.read_layer(l).unwrap();
        assert_eq!(m, expected_layer(l), "layer {l}");
        let rows = [8, 0, 5, 4, 4];
        let r = cap.read_layer_rows(l, &rows).unwrap();
        for (k, &i) in rows.iter().enumerate() {
            assert_eq!(r.row(k), m.row(i));
        }
    }
    // The further column is a task constant over each utterance; an empty value is unlabelled.
    let t = cap.frames.task("dialect").unwrap();
    assert_eq!(t.classes, vec!["north", "south"]);
    let u = UNLABELLED;
    assert_eq!(t.codes, vec![0, 0, 0, 0, 1, 1, u, u, u]);
    assert_eq!(cap.frames.task_names(), vec!["dialect", "speaker"]);
    assert_eq!(cap.label_source, "utterances.tsv");
}

#[test]
fn stacks_concatenate_in_the_order_of_utterances_tsv() {
    let d = tempfile::tempdir().unwrap();
    list(d.path());
    write_stacks(d.path(), &utts());
    check_capture(d.path());
}

#[test]
fn layer_folders_read_the_same_as_stacks() {
    let d = tempfile::tempdir().unwrap();
    list(d.path());
    write_folders(d.path(), &utts());
    check_capture(d.path());
}

/// Every dtype, byte order and memory order the one-file reader takes, mixed across files.
#[test]
fn stacks_take_every_dtype_and_order() {
    let d = tempfile::tempdir().unwrap();
    list(d.path());
    let u = utts();
    let acts = d.path().join("acts");
    std::fs::create_dir_all(&acts).unwrap();
    // b: f64, Fortran order.
    let b = &u[0].1;
    let mut bf = Array3::<f64>::zeros(b.raw_dim().f());
    bf.zip_mut_with(b, |o, &v| *o = v as f64);
    ndarray_npy::write_npy(acts.join("b.npy"), &bf).unwrap();
    // a: big-endian f32 written by hand.
    let a = &u[1].1;
    let data: Vec<u8> = a.iter().flat_map(|v| v.to_be_bytes()).collect();
    std::fs::write(
        acts.join("a.npy"),
        common::npy_bytes(">f4", "(3, 2, 5)", 1, &data),
    )
    .unwrap();
    // c: f16 (values up to 3224 are exact in f16 only below 2048 for integers: use a small one).
    let c = &u[2].1;
    let data: Vec<u8> = c
        .iter()
        .flat_map(|&v| half::f16::from_f32(v).to_le_bytes())
        .collect();
    std::fs::write(
        acts.join("c.npy"),
        common::npy_bytes("<f2", "(3, 3, 5)", 1, &data),
    )
    .unwrap();
    let cap = Capture::open(d.path(), &OpenOptions::default()).unwrap();
    for l in 0..3 {
        let m = cap.read_layer(l).unwrap();
        let want = expected_layer(l);
        // b and a exactly; c as f16 rounds it.
        assert_eq!(m.slice(sl![..6, ..]), want.slice(sl![..6, ..]), "layer {l}");
        for (x, y) in m.slice(sl![6.., ..]).iter().zip(want.slice(sl![6.., ..])) {
            assert_eq!(*x, half::f16::from_f32(*y).to_f32());
        }
    }
}

#[test]
fn inspect_names_the_layout_and_file_counts() {
    let d = tempfile::tempdir().unwrap();
    list(d.path());
    write_folders(d.path(), &utts());
    let r = run_text(["inspect", s(d.path())]);
    assert_eq!(r.code, 0, "{}", r.stderr);
    assert!(r.stdout.contains("per-layer folders"), "{}", r.stdout);
    assert!(r.stdout.contains("(9 array files)"), "{}", r.stdout);
    let r = run_text(["inspect", "--json", s(d.path())]);
    let v: serde_json::Value = serde_json::from_str(&r.stdout).unwrap();
    assert_eq!(v["layer_files"], 9);
    assert_eq!(v["label_files"], 1);
}

fn inspect_fails(dir: &Path, words: &[&str]) {
    let r = run_text(["inspect", s(dir)]);
    assert_eq!(r.code, 2, "{}", r.stderr);
    for w in words {
        assert!(r.stderr.contains(w), "'{w}' not in: {}", r.stderr);
    }
}

#[test]
fn a_stack_with_another_dim_names_both_files_and_shapes() {
    let d = tempfile::tempdir().unwrap();
    list(d.path());
    let mut u = utts();
    u[2].1 = stack(3, 3, 3, 6);
    write_stacks(d.path(), &u);
    inspect_fails(d.path(), &["c.npy", "[3, 3, 6]", "b.npy", "[3, 4, 5]"]);
    u[2].1 = stack(3, 2, 3, 5);
    write_stacks(d.path(), &u);
    inspect_fails(d.path(), &["c.npy", "[2, 3, 5]", "b.npy", "[3, 4, 5]"]);
}

#[test]
fn a_listed_utterance_without_an_array_is_an_error_and_an_unlisted_array_a_warning() {
    let d = tempfile::tempdir().unwrap();
    list(d.path());
    let mut u = utts();
    u.remove(1);
    write_stacks(d.path(), &u);
    inspect_fails(d.path(), &["a.npy", "no such file", "utterance 'a'"]);
    write_stacks(d.path(), &utts());
    write_stacks(d.path(), &[("extra", stack(9, 3, 2, 5))]);
    let r = run_text(["inspect", s(d.path())]);
    assert_eq!(r.code, 0, "{}", r.stderr);
    assert!(
        r.stdout.contains("1 array file(s) not listed") && r.stdout.contains("extra.npy"),
        "{}",
        r.stdout
    );
}

#[test]
fn frame_counts_that_disagree_across_layer_folders_are_an_error() {
    let d = tempfile::tempdir().unwrap();
    list(d.path());
    write_folders(d.path(), &utts());
    let p = d.path().join("layer_02").join("a.npy");
    ndarray_npy::write_npy(&p, &Array2::<f32>::zeros((7, 5))).unwrap();
    inspect_fails(
        d.path(),
        &["layer_02", "a.npy", "[7, 5]", "layer_00", "2 frames"],
    );
}

#[test]
fn a_frames_column_must_match_the_arrays() {
    let d = tempfile::tempdir().unwrap();
    std::fs::write(
        d.path().join("utterances.tsv"),
        "utterance\tspeaker\tframes\nb\ts1\t4\na\ts2\t3\nc\ts1\t3\n",
    )
    .unwrap();
    write_stacks(d.path(), &utts());
    inspect_fails(d.path(), &["utterances.tsv", "row 3", "2 frames"]);
}

#[test]
fn per_utterance_arrays_need_utterances_tsv() {
    let d = tempfile::tempdir().unwrap();
    write_stacks(d.path(), &utts());
    inspect_fails(d.path(), &["utterances.tsv", "no such file"]);
}
