//! A capture of arrays held in memory (`Capture::in_memory`, what the Python package builds)
//! against the same arrays and labels written as a capture folder: the same frame table, the
//! same layer values, the same probe records; and bad columns refused with the column named.

mod common;

use std::path::Path;
use std::sync::Arc;

use common::{write_capture, Frames};
use ndarray::Array2;
use voxstrata::analysis::probe::{self, ProbeOptions};
use voxstrata::capture::labels::{frames_from_columns, FrameColumns};
use voxstrata::capture::npy::{Dtype, NpyFile, NpyHeader};
use voxstrata::capture::LabelOptions;
use voxstrata::{Capture, CommonOptions, OpenOptions, Progress};

/// Six speakers, two utterances each, 12 frames an utterance; the layer encodes the phone.
fn data() -> (Frames, Vec<Array2<f32>>) {
    let mut f = Frames::new(&["utterance", "speaker", "phone"]);
    let mut rows = Vec::new();
    for s in 0..6 {
        for u in 0..2 {
            for i in 0..12 {
                let phone = ["a", "i", "", "s"][(i + s) % 4];
                f.push([format!("s{s}u{u}"), format!("s{s}"), phone.to_string()]);
                rows.push((i + s) % 4);
            }
        }
    }
    let layer = |scale: f32| {
        Array2::from_shape_fn((rows.len(), 3), |(r, c)| {
            let noise = ((r * 7 + c * 13) % 11) as f32 / 11.0 - 0.5;
            scale * (rows[r] == c) as u8 as f32 + noise
        })
    };
    (f, vec![layer(0.5), layer(2.0)])
}

fn columns(f: &Frames) -> FrameColumns {
    FrameColumns {
        utterance: f.rows.iter().map(|r| r[0].clone()).collect(),
        speaker: f.rows.iter().map(|r| r[1].clone()).collect(),
        labels: vec![(
            "phone".into(),
            f.rows.iter().map(|r| Some(r[2].clone())).collect(),
        )],
    }
}

fn in_memory(f: &Frames, layers: &[Array2<f32>]) -> Capture {
    let files = layers
        .iter()
        .enumerate()
        .map(|(i, a)| {
            let bytes: Vec<u8> = a.iter().flat_map(|v| v.to_le_bytes()).collect();
            let header = NpyHeader {
                dtype: Dtype::F32,
                big_endian: false,
                fortran_order: false,
                shape: vec![a.nrows(), a.ncols()],
                data_offset: 0,
            };
            NpyFile::from_memory(Path::new(&format!("X[{i}]")), header, Arc::new(bytes)).unwrap()
        })
        .collect();
    let table =
        frames_from_columns(Path::new("labels"), &columns(f), &LabelOptions::default()).unwrap();
    Capture::in_memory("in-memory", files, table, false).unwrap()
}

#[test]
fn in_memory_capture_equals_the_folder() {
    let (f, layers) = data();
    let dir = tempfile::tempdir().unwrap();
    write_capture(dir.path(), &f, &layers);
    let disk = Capture::open(dir.path(), &OpenOptions::default()).unwrap();
    let mem = in_memory(&f, &layers);
    let (a, b) = (&disk.frames, &mem.frames);
    assert_eq!(a.utterances, b.utterances);
    assert_eq!(a.speakers, b.speakers);
    assert_eq!(a.frame_utt, b.frame_utt);
    assert_eq!(a.frame_pos, b.frame_pos);
    assert_eq!(a.task_names(), b.task_names());
    for (x, y) in a.tasks.iter().zip(&b.tasks) {
        assert_eq!((&x.classes, &x.codes), (&y.classes, &y.codes), "{}", x.name);
    }
    for i in 0..2 {
        assert_eq!(disk.read_layer(i).unwrap(), mem.read_layer(i).unwrap());
    }
    let opts = ProbeOptions {
        bootstrap: 50,
        ..Default::default()
    };
    let common = CommonOptions::default();
    let run = |c: &Capture| {
        let r = probe::run(c, &opts, &common, &Progress::hidden()).unwrap();
        serde_json::to_value(&r.records).unwrap()
    };
    let want = run(&disk);
    assert_eq!(want.as_array().unwrap().len(), 4);
    assert_eq!(want, run(&mem));
}

#[test]
fn bad_columns_are_refused_with_the_column_named() {
    let (f, _) = data();
    let opts = LabelOptions::default();
    let mut c = columns(&f);
    c.labels[0].1.pop();
    let e = frames_from_columns(Path::new("labels"), &c, &opts).unwrap_err();
    assert!(
        e.to_string().contains("'phone'") && e.to_string().contains("144 values"),
        "{e}"
    );
    let mut c = columns(&f);
    c.labels.push(("phone".into(), vec![None; 144]));
    let e = frames_from_columns(Path::new("labels"), &c, &opts).unwrap_err();
    assert!(e.to_string().contains("'phone' twice"), "{e}");
    let mut c = columns(&f);
    c.speaker[13] = "s9".into();
    let e = frames_from_columns(Path::new("labels"), &c, &opts).unwrap_err();
    assert!(
        e.to_string().contains("row 14") && e.to_string().contains("'s9'"),
        "{e}"
    );
    // A layer whose frame count differs from the table's is refused like a file's.
    let header = NpyHeader {
        dtype: Dtype::F32,
        big_endian: false,
        fortran_order: false,
        shape: vec![10, 2],
        data_offset: 0,
    };
    let x = NpyFile::from_memory(Path::new("X"), header, Arc::new(vec![0u8; 80])).unwrap();
    let table = frames_from_columns(Path::new("labels"), &columns(&f), &opts).unwrap();
    let e = Capture::in_memory("m", vec![x], table, false).unwrap_err();
    assert!(e.to_string().contains("144 frames"), "{e}");
}
