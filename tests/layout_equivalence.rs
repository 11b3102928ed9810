//! The small demo capture (`voxstrata demo --size small`) rewritten in the per-utterance
//! layouts, with its labels given as TextGrid files and as a CTM file made from its frame
//! table, gives byte-identical `probe.json` records to the original (the capture's path, the
//! one thing that differs, is blanked before the comparison).

mod common;

use std::fmt::Write as _;
use std::path::{Path, PathBuf};

use common::{npy_bytes, run_text, s};
use voxstrata::capture::npy::parse_header;

/// One demo layer file: its raw little-endian f16 rows (C order) and dim.
struct RawLayer {
    data: Vec<u8>,
    dim: usize,
}

fn read_raw(p: &Path) -> RawLayer {
    let bytes = std::fs::read(p).unwrap();
    let h = parse_header(p, &bytes, bytes.len() as u64).unwrap();
    assert_eq!(h.dtype.name(), "float16", "{}", p.display());
    assert!(!h.big_endian && !h.fortran_order && h.shape.len() == 2);
    RawLayer {
        data: bytes[h.data_offset..].to_vec(),
        dim: h.shape[1],
    }
}

/// The frame table: per utterance (name, speaker, group, phone of each frame).
struct Utt {
    name: String,
    speaker: String,
    group: String,
    phones: Vec<String>,
}

fn read_frames(p: &Path) -> Vec<Utt> {
    let text = std::fs::read_to_string(p).unwrap();
    let mut lines = text.lines();
    // The demo's continuous columns (f0_hz, energy_db) follow; they are no probe task by
    // default, so the rewritten captures leave them out.
    let head = lines.next().unwrap();
    assert!(
        head.starts_with("utterance\tspeaker\tphone\tgroup"),
        "{head}"
    );
    let mut out: Vec<Utt> = Vec::new();
    for l in lines {
        let f: Vec<&str> = l.split('\t').collect();
        if out.last().map(|u| u.name != f[0]).unwrap_or(true) {
            out.push(Utt {
                name: f[0].into(),
                speaker: f[1].into(),
                group: f[3].into(),
                phones: vec![],
            });
        }
        let u = out.last_mut().unwrap();
        assert_eq!(u.group, f[3], "group is constant over an utterance");
        u.phones.push(f[2].into());
    }
    out
}

fn write_utterances(dir: &Path, utts: &[Utt]) {
    let mut t = String::from("utterance\tspeaker\tgroup\n");
    for u in utts {
        writeln!(t, "{}\t{}\t{}", u.name, u.speaker, u.group).unwrap();
    }
    std::fs::write(dir.join("utterances.tsv"), t).unwrap();
}

/// Runs of one phone as intervals whose bounds lie halfway between frame centres
/// (centre of frame i: i * hop + win / 2), the first starting at 0.
fn runs(phones: &[String], hop: f64, win: f64) -> Vec<(f64, f64, String)> {
    let edge = |i: usize| {
        if i == 0 {
            0.0
        } else {
            i as f64 * hop + win / 2.0 - hop / 2.0
        }
    };
    let mut out = Vec::new();
    let mut a = 0;
    for i in 1..=phones.len() {
        if i == phones.len() || phones[i] != phones[a] {
            out.push((edge(a), edge(i), phones[a].clone()));
            a = i;
        }
    }
    out
}

/// A TextGrid with one `phones` interval tier, long or short text format.
fn textgrid(ivs: &[(f64, f64, String)], long: bool) -> String {
    let end = ivs.last().unwrap().1;
    let mut t = String::from("File type = \"ooTextFile\"\nObject class = \"TextGrid\"\n\n");
    if long {
        writeln!(
            t,
            "xmin = 0\nxmax = {end:.6}\ntiers? <exists>\nsize = 1\nitem []:"
        )
        .unwrap();
        writeln!(
            t,
            "    item [1]:\n        class = \"IntervalTier\"\n        name = \"phones\""
        )
        .unwrap();
        writeln!(
            t,
            "        xmin = 0\n        xmax = {end:.6}\n        intervals: size = {}",
            ivs.len()
        )
        .unwrap();
        for (k, (a, b, l)) in ivs.iter().enumerate() {
            writeln!(t, "        intervals [{}]:\n            xmin = {a:.6}\n            xmax = {b:.6}\n            text = \"{l}\"", k + 1).unwrap();
        }
    } else {
        writeln!(
            t,
            "0\n{end:.6}\n<exists>\n1\n\"IntervalTier\"\n\"phones\"\n0\n{end:.6}\n{}",
            ivs.len()
        )
        .unwrap();
        for (a, b, l) in ivs {
            writeln!(t, "{a:.6}\n{b:.6}\n\"{l}\"").unwrap();
        }
    }
    t
}

/// TextGrid files under `align/`: long format, short format and UTF-16 long format in turn.
fn write_textgrids(dir: &Path, utts: &[Utt], hop: f64, win: f64) {
    let align = dir.join("align");
    std::fs::create_dir_all(&align).unwrap();
    for (k, u) in utts.iter().enumerate() {
        let text = textgrid(&runs(&u.phones, hop, win), k % 3 != 1);
        let bytes: Vec<u8> = if k % 3 == 2 {
            let mut b = vec![0xFF, 0xFE];
            b.extend(text.encode_utf16().flat_map(|c| c.to_le_bytes()));
            b
        } else {
            text.into_bytes()
        };
        std::fs::write(align.join(format!("{}.TextGrid", u.name)), bytes).unwrap();
    }
}

fn write_ctm(dir: &Path, utts: &[Utt], hop: f64, win: f64) {
    let mut t = String::from(";; utterance channel start duration phone\n");
    for u in utts {
        for (a, b, l) in runs(&u.phones, hop, win) {
            writeln!(t, "{} 1 {a:.6} {:.6} {l}", u.name, b - a).unwrap();
        }
    }
    std::fs::write(dir.join("alignments.ctm"), t).unwrap();
}

/// Rows [start, start + n) of a raw layer.
fn rows(l: &RawLayer, start: usize, n: usize) -> &[u8] {
    &l.data[start * l.dim * 2..(start + n) * l.dim * 2]
}

/// `layer_XX/<utterance>.npy` for the layers given (numbered 0, 1, ... in that order).
fn write_folders(dir: &Path, utts: &[Utt], layers: &[RawLayer]) {
    for (id, l) in layers.iter().enumerate() {
        let folder = dir.join(format!("layer_{id:02}"));
        std::fs::create_dir_all(&folder).unwrap();
        let mut start = 0;
        for u in utts {
            let n = u.phones.len();
            let shape = format!("({n}, {})", l.dim);
            let b = npy_bytes("<f2", &shape, 1, rows(l, start, n));
            std::fs::write(folder.join(format!("{}.npy", u.name)), b).unwrap();
            start += n;
        }
    }
}

/// `acts/<utterance>.npy` stacks of the layers given (all of one dim).
fn write_stacks(dir: &Path, utts: &[Utt], layers: &[RawLayer]) {
    let acts = dir.join("acts");
    std::fs::create_dir_all(&acts).unwrap();
    let mut start = 0;
    for u in utts {
        let n = u.phones.len();
        let mut data = Vec::new();
        for l in layers {
            data.extend_from_slice(rows(l, start, n));
        }
        let shape = format!("({}, {n}, {})", layers.len(), layers[0].dim);
        std::fs::write(
            acts.join(format!("{}.npy", u.name)),
            npy_bytes("<f2", &shape, 1, &data),
        )
        .unwrap();
        start += n;
    }
}

/// `probe.json` of a run on `cap`, with the capture path blanked.
fn probe_json(cap: &Path, out: &Path) -> String {
    let r = run_text([
        "probe",
        s(cap),
        "--task",
        "phone",
        "--task",
        "group",
        "--bootstrap",
        "20",
        "--max-train-frames",
        "3000",
        "--quiet",
        "--out",
        s(out),
    ]);
    assert_eq!(r.code, 0, "{}: {}", cap.display(), r.stderr);
    let text = std::fs::read_to_string(out.join("probe.json")).unwrap();
    let quoted = serde_json::to_string(s(cap)).unwrap();
    assert!(text.contains(&quoted));
    text.replace(&quoted, "\"<capture>\"")
}

fn capture_dir(root: &Path, name: &str, toml: &Path) -> PathBuf {
    let d = root.join(name);
    std::fs::create_dir_all(&d).unwrap();
    std::fs::copy(toml, d.join("capture.toml")).unwrap();
    d
}

#[test]
fn every_layout_and_label_source_gives_the_same_probe_records() {
    let tmp = tempfile::tempdir().unwrap();
    let root = tmp.path();
    let r = run_text(["demo", "--size", "small", "--out", s(&root.join("demo"))]);
    assert_eq!(r.code, 0, "{}", r.stderr);
    let orig = root.join("demo/early");
    let toml = orig.join("capture.toml");
    // Frame timing of the demo (capture.toml): 10 ms hop, 25 ms window.
    let (hop, win) = (0.01, 0.025);
    let utts = read_frames(&orig.join("frames.tsv"));
    let layers: Vec<RawLayer> = (0..6)
        .map(|l| read_raw(&orig.join(format!("layer_{l:02}.npy"))))
        .collect();
    assert_eq!(layers.iter().map(|l| l.data.len()).sum::<usize>() % 2, 0);
    let want = probe_json(&orig, &root.join("out_orig"));

    // Per-layer folders of all six layers, labelled by TextGrid, then by CTM.
    let d = capture_dir(root, "folders_tg", &toml);
    write_utterances(&d, &utts);
    write_folders(&d, &utts, &layers);
    write_textgrids(&d, &utts, hop, win);
    assert_eq!(
        probe_json(&d, &root.join("out1")),
        want,
        "folders + TextGrid"
    );
    let d = capture_dir(root, "folders_ctm", &toml);
    write_utterances(&d, &utts);
    write_folders(&d, &utts, &layers);
    write_ctm(&d, &utts, hop, win);
    assert_eq!(probe_json(&d, &root.join("out2")), want, "folders + CTM");

    // Stacks need one dim in every layer: the demo's layers 1-5 (48 wide; layer 0 is the
    // 40-wide input). Their reference is the one-file-per-layer capture of those five layers.
    let hidden = &layers[1..];
    let d = capture_dir(root, "hidden", &toml);
    std::fs::copy(orig.join("frames.tsv"), d.join("frames.tsv")).unwrap();
    for (id, l) in hidden.iter().enumerate() {
        let shape = format!("({}, {})", l.data.len() / 2 / l.dim, l.dim);
        std::fs::write(
            d.join(format!("layer_{id:02}.npy")),
            npy_bytes("<f2", &shape, 1, &l.data),
        )
        .unwrap();
    }
    let want = probe_json(&d, &root.join("out3"));
    let d = capture_dir(root, "stacks_tg", &toml);
    write_utterances(&d, &utts);
    write_stacks(&d, &utts, hidden);
    write_textgrids(&d, &utts, hop, win);
    assert_eq!(
        probe_json(&d, &root.join("out4")),
        want,
        "stacks + TextGrid"
    );
    let d = capture_dir(root, "stacks_ctm", &toml);
    write_utterances(&d, &utts);
    write_stacks(&d, &utts, hidden);
    write_ctm(&d, &utts, hop, win);
    assert_eq!(probe_json(&d, &root.join("out5")), want, "stacks + CTM");
}
