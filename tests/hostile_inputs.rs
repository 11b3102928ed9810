//! Hostile and broken inputs against the real binary. Every case is one row of `CASES`:
//! a name, a setup that writes the capture folder, the command line (`{cap}` and `{out}` are
//! replaced by the folders), the expected exit code (0 success, 2 bad input, 1 internal
//! failure), words that must appear on stderr, and an optional check of the outputs.
//! No case may print panic text. To add a case, add a row.

mod common;

use std::path::Path;

use common::{npy_bytes, run, write_layer, Frames};
use ndarray::Array2;

/// Labels that try to break markup, CSV and text layout (quotes, commas, a script tag,
/// a right-to-left override, IPA).
const SCRIPT: &str = "<script>alert(1)</script>";
const QUOTED: &str = "a,\"b\"";
const RTL: &str = "\u{202E}lru\u{202C}";
const IPA: &str = "ʃ";
/// Name of an extra label column full of awkward characters (it ends up in CSV fields).
const ODD_COLUMN: &str = "tag,\"q\" <b>x</b> \u{200F}ע";

type Setup = fn(&Path);
type Check = fn(&Path, &Path);

struct Case {
    name: &'static str,
    setup: Setup,
    args: &'static [&'static str],
    code: i32,
    stderr_words: &'static [&'static str],
    check: Option<Check>,
}

#[rustfmt::skip]
const CASES: &[Case] = &[
    Case { name: "header claims 2^60 elements", setup: huge_shape, args: &["inspect", "{cap}"], code: 2, stderr_words: &["layer_00.npy", "data", "1152921504606846976"], check: None },
    Case { name: "truncated data", setup: truncated_data, args: &["inspect", "{cap}"], code: 2, stderr_words: &["layer_01.npy", "truncated"], check: None },
    Case { name: "3-D file where 2-D expected", setup: three_d_layer, args: &["inspect", "{cap}"], code: 2, stderr_words: &["layer_01.npy", "2-D", "3-D"], check: None },
    Case { name: "huge header length field", setup: huge_header_len, args: &["inspect", "{cap}"], code: 2, stderr_words: &["layer_00.npy", "header length"], check: None },
    Case { name: "not a .npy file", setup: not_npy, args: &["probe", "{cap}", "--out", "{out}"], code: 2, stderr_words: &["layer_00.npy", "magic"], check: None },
    Case { name: "empty stack claiming 2^60 layers", setup: empty_stack, args: &["inspect", "{cap}"], code: 2, stderr_words: &["stack.npy", "shape"], check: None },
    Case { name: "zero-length axis too large for memory", setup: zero_axis_overflow, args: &["inspect", "{cap}"], code: 2, stderr_words: &["layer_00.npy", "shape"], check: None },
    Case { name: "utterances.tsv claims 4 billion frames", setup: lying_frames_column, args: &["inspect", "{cap}"], code: 2, stderr_words: &["utterances.tsv", "frames"], check: None },
    Case { name: "tab inside a label splits the row", setup: tab_in_label, args: &["inspect", "{cap}"], code: 2, stderr_words: &["frames.tsv", "row 3", "5 fields"], check: None },
    Case { name: "newline inside a label ends the row", setup: newline_in_label, args: &["inspect", "{cap}"], code: 2, stderr_words: &["frames.tsv", "row 3", "found 3 fields"], check: None },
    Case { name: "non-UTF-8 label", setup: non_utf8_label, args: &["inspect", "{cap}"], code: 2, stderr_words: &["frames.tsv", "UTF-8"], check: None },
    Case { name: "empty capture folder", setup: |_| {}, args: &["inspect", "{cap}"], code: 2, stderr_words: &["layer files"], check: None },
    Case { name: "unknown layer selected", setup: odd_labels, args: &["--layers", "7", "probe", "{cap}", "--out", "{out}"], code: 2, stderr_words: &["--layers", "7"], check: None },
    Case { name: "output folder not empty", setup: odd_labels, args: &["map", "{cap}", "--method", "pca", "--out", "{cap}"], code: 2, stderr_words: &["--force"], check: None },
    Case { name: "awkward labels: inspect", setup: odd_labels, args: &["inspect", "{cap}", "--json"], code: 0, stderr_words: &[], check: None },
    Case { name: "awkward labels: probe", setup: odd_labels, args: &["probe", "{cap}", "--task", "phone", "--task", ODD_COLUMN, "--bootstrap", "50", "--out", "{out}"], code: 0, stderr_words: &[], check: Some(probe_outputs_quote_and_escape) },
    Case { name: "awkward labels: map", setup: odd_labels, args: &["map", "{cap}", "--method", "pca", "--per-label", "10", "--out", "{out}"], code: 0, stderr_words: &[], check: Some(map_outputs_escape) },
    Case { name: "awkward labels: report", setup: odd_labels, args: &["report", "{cap}", "--out", "{out}"], code: 0, stderr_words: &[], check: Some(report_escapes) },
    Case { name: "empty utterance in segments", setup: empty_utterance, args: &["probe", "{cap}", "--task", "phone", "--bootstrap", "50", "--out", "{out}"], code: 0, stderr_words: &[], check: None },
    Case { name: "speaker with one frame", setup: one_frame_speaker, args: &["probe", "{cap}", "--bootstrap", "50", "--out", "{out}"], code: 0, stderr_words: &[], check: None },
    Case { name: "speaker with one frame: map", setup: one_frame_speaker, args: &["map", "{cap}", "--method", "pca", "--out", "{out}"], code: 0, stderr_words: &[], check: None },
];

#[test]
fn every_hostile_input_gets_its_exit_code_and_message_without_panic() {
    let mut failures = Vec::new();
    for case in CASES {
        let tmp = tempfile::tempdir().unwrap();
        let (cap, out) = (tmp.path().join("cap"), tmp.path().join("out"));
        std::fs::create_dir_all(&cap).unwrap();
        (case.setup)(&cap);
        let args: Vec<String> = std::iter::once("--quiet")
            .chain(case.args.iter().copied())
            .map(|a| {
                a.replace("{cap}", cap.to_str().unwrap())
                    .replace("{out}", out.to_str().unwrap())
            })
            .collect();
        let o = run(args);
        let err = String::from_utf8_lossy(&o.stderr);
        let code = o.status.code().unwrap_or(-1);
        let mut why = Vec::new();
        if code != case.code {
            why.push(format!("exit code {code}, expected {}", case.code));
        }
        for w in case.stderr_words {
            if !err.contains(w) {
                why.push(format!("stderr lacks '{w}'"));
            }
        }
        if err.contains("panicked") || err.contains("RUST_BACKTRACE") {
            why.push("panic text on stderr".into());
        }
        if why.is_empty() {
            if let Some(check) = case.check {
                if let Err(e) = std::panic::catch_unwind(|| check(&cap, &out)) {
                    why.push(format!(
                        "output check failed: {}",
                        e.downcast_ref::<String>().cloned().unwrap_or_default()
                    ));
                }
            }
        }
        if !why.is_empty() {
            failures.push(format!(
                "{}: {}\n  stderr: {}",
                case.name,
                why.join("; "),
                err.trim()
            ));
        }
    }
    assert!(failures.is_empty(), "{}", failures.join("\n"));
}

// ---- writers -------------------------------------------------------------------------------

/// Deterministic pseudo-random activations where the phone code shifts the mean.
fn activations(codes: &[usize], dim: usize, layer: u64) -> Array2<f32> {
    let mut s = 0x9E37_79B9_7F4A_7C15u64 ^ layer;
    Array2::from_shape_fn((codes.len(), dim), |(i, j)| {
        s = s
            .wrapping_mul(6364136223846793005)
            .wrapping_add(1442695040888963407);
        let noise = ((s >> 33) as f32 / (1u64 << 31) as f32) - 0.5;
        noise + if codes[i] % dim == j { 2.0 } else { 0.0 }
    })
}

/// A capture with `frames.tsv` rows (utterance, speaker, phone, extra) and two layers.
fn write_rows(dir: &Path, extra: &str, rows: &[(String, String, String, String)]) {
    let mut frames = Frames::new(&["utterance", "speaker", "phone", extra]);
    let mut classes: Vec<&str> = Vec::new();
    let mut codes = Vec::new();
    for (u, s, p, e) in rows {
        frames.push([u, s, p, e]);
        let k = classes.iter().position(|c| c == p).unwrap_or_else(|| {
            classes.push(p);
            classes.len() - 1
        });
        codes.push(k);
    }
    let layers: Vec<Array2<f32>> = (0..2).map(|l| activations(&codes, 8, l)).collect();
    common::write_capture(dir, &frames, &layers);
}

fn small_rows(phones: &[&str]) -> Vec<(String, String, String, String)> {
    let mut rows = Vec::new();
    for s in 0..4 {
        for u in 0..3 {
            for i in 0..20 {
                rows.push((
                    format!("s{s}_u{u}"),
                    format!("s{s}"),
                    phones[(i / 2 + u) % phones.len()].to_string(),
                    if i % 2 == 0 { "x" } else { "y" }.to_string(),
                ));
            }
        }
    }
    rows
}

fn good_capture(dir: &Path) {
    write_rows(dir, "tag", &small_rows(&["a", "b", "c"]));
}

fn odd_labels(dir: &Path) {
    write_rows(
        dir,
        ODD_COLUMN,
        &small_rows(&[SCRIPT, QUOTED, RTL, IPA, "ə"]),
    );
}

fn huge_shape(dir: &Path) {
    good_capture(dir);
    std::fs::write(
        dir.join("layer_00.npy"),
        npy_bytes("<f4", "(1152921504606846976, 1)", 1, &[0; 8]),
    )
    .unwrap();
}

fn truncated_data(dir: &Path) {
    good_capture(dir);
    let p = dir.join("layer_01.npy");
    let b = std::fs::read(&p).unwrap();
    std::fs::write(&p, &b[..b.len() - 100]).unwrap();
}

fn three_d_layer(dir: &Path) {
    good_capture(dir);
    std::fs::write(
        dir.join("layer_01.npy"),
        npy_bytes("<f4", "(2, 240, 4)", 1, &[0; 2 * 240 * 4 * 4]),
    )
    .unwrap();
}

fn huge_header_len(dir: &Path) {
    good_capture(dir);
    let mut b = npy_bytes("<f4", "(240, 8)", 2, &[0; 240 * 8 * 4]);
    b[8..12].copy_from_slice(&0xFFFF_FFF0u32.to_le_bytes());
    std::fs::write(dir.join("layer_00.npy"), b).unwrap();
}

fn not_npy(dir: &Path) {
    good_capture(dir);
    std::fs::write(dir.join("layer_00.npy"), "utterance\tspeaker\n").unwrap();
}

fn empty_stack(dir: &Path) {
    good_capture(dir);
    for l in 0..2 {
        std::fs::remove_file(dir.join(format!("layer_{l:02}.npy"))).unwrap();
    }
    std::fs::write(
        dir.join("stack.npy"),
        npy_bytes("<f4", "(1152921504606846976, 0, 8)", 1, &[]),
    )
    .unwrap();
}

fn zero_axis_overflow(dir: &Path) {
    good_capture(dir);
    std::fs::write(
        dir.join("layer_00.npy"),
        npy_bytes("<f4", "(0, 9223372036854775809)", 1, &[]),
    )
    .unwrap();
}

fn lying_frames_column(dir: &Path) {
    write_layer(dir, 0, &activations(&[0, 1, 2, 0, 1], 4, 0));
    std::fs::write(
        dir.join("utterances.tsv"),
        "utterance\tspeaker\tframes\nu1\ts1\t4294967295\nu2\ts2\t4294967295\n",
    )
    .unwrap();
    std::fs::write(
        dir.join("segments.tsv"),
        "utterance\tstart_s\tend_s\tlabel\nu1\t0\t0.04\ta\n",
    )
    .unwrap();
}

fn tab_in_label(dir: &Path) {
    good_capture(dir);
    let t = std::fs::read_to_string(dir.join("frames.tsv")).unwrap();
    let mut lines: Vec<String> = t.lines().map(String::from).collect();
    lines[2] = "s0_u0\ts0\ta\tb\tx".into();
    std::fs::write(dir.join("frames.tsv"), lines.join("\n") + "\n").unwrap();
}

fn newline_in_label(dir: &Path) {
    good_capture(dir);
    let t = std::fs::read_to_string(dir.join("frames.tsv")).unwrap();
    let mut lines: Vec<String> = t.lines().map(String::from).collect();
    lines[2] = "s0_u0\ts0\ta\nb\tx".into();
    std::fs::write(dir.join("frames.tsv"), lines.join("\n") + "\n").unwrap();
}

fn non_utf8_label(dir: &Path) {
    good_capture(dir);
    let mut b = std::fs::read(dir.join("frames.tsv")).unwrap();
    let at = b.len() - 3;
    b[at] = 0xFF;
    std::fs::write(dir.join("frames.tsv"), b).unwrap();
}

/// Segment-format capture where one utterance has 0 frames.
fn empty_utterance(dir: &Path) {
    let mut utt = String::from("utterance\tspeaker\tframes\n");
    let mut seg = String::from("utterance\tstart_s\tend_s\tlabel\n");
    let mut codes = Vec::new();
    for s in 0..4 {
        for u in 0..3 {
            let name = format!("s{s}_u{u}");
            let n = if s == 1 && u == 1 { 0 } else { 20 };
            utt.push_str(&format!("{name}\ts{s}\t{n}\n"));
            for i in 0..n {
                if i % 4 == 0 {
                    let p = ["a", "b", "c"][(i / 4 + u) % 3];
                    seg.push_str(&format!(
                        "{name}\t{:.2}\t{:.2}\t{p}\n",
                        i as f64 * 0.02,
                        (i + 4) as f64 * 0.02
                    ));
                }
                codes.push((i / 4 + u) % 3);
            }
        }
    }
    std::fs::write(dir.join("utterances.tsv"), utt).unwrap();
    std::fs::write(dir.join("segments.tsv"), seg).unwrap();
    for l in 0..2 {
        write_layer(dir, l as usize, &activations(&codes, 8, l));
    }
}

fn one_frame_speaker(dir: &Path) {
    let mut rows = small_rows(&["a", "b", "c"]);
    rows.push(("lone_u".into(), "lone".into(), "a".into(), "x".into()));
    write_rows(dir, "tag", &rows);
}

// ---- output checks -------------------------------------------------------------------------

fn read(p: &Path) -> String {
    std::fs::read_to_string(p).unwrap_or_else(|e| panic!("{}: {e}", p.display()))
}

/// Every `.svg` under `dir` (recursively).
fn svgs(dir: &Path) -> Vec<std::path::PathBuf> {
    let mut out = Vec::new();
    for e in std::fs::read_dir(dir).unwrap().flatten() {
        let p = e.path();
        if p.is_dir() {
            out.extend(svgs(&p));
        } else if p.extension().is_some_and(|x| x == "svg") {
            out.push(p);
        }
    }
    out
}

fn no_raw_markup(text: &str, what: &str) {
    assert!(
        !text.contains(SCRIPT),
        "{what} holds the label's script tag unescaped"
    );
    assert!(
        !text.contains("<b>x</b>"),
        "{what} holds the column name's markup unescaped"
    );
}

fn probe_outputs_quote_and_escape(_cap: &Path, out: &Path) {
    // CSV per RFC 4180 read back with the csv crate gives the column name unchanged.
    let mut r = csv::Reader::from_path(out.join("probe.csv")).unwrap();
    let h = r.headers().unwrap().clone();
    let task = h.iter().position(|c| c == "task").expect("task column");
    let tasks: Vec<String> = r.records().map(|x| x.unwrap()[task].to_string()).collect();
    assert!(
        tasks.iter().any(|t| t == ODD_COLUMN),
        "tasks in CSV: {tasks:?}"
    );
    let json: serde_json::Value = serde_json::from_str(&read(&out.join("probe.json"))).unwrap();
    assert!(json.to_string().contains("ע"));
    for s in svgs(out) {
        no_raw_markup(&read(&s), &s.display().to_string());
    }
}

fn map_outputs_escape(_cap: &Path, out: &Path) {
    let all: String = svgs(out).iter().map(|p| read(p)).collect();
    assert!(!all.is_empty(), "map wrote no SVG");
    no_raw_markup(&all, "map SVG");
    // The class names reach the legend as text: escaped markup, IPA and the RTL mark as glyphs.
    assert!(
        all.contains("&lt;script&gt;"),
        "escaped script label missing from the SVG legend"
    );
    assert!(all.contains(IPA), "IPA label missing from the SVG legend");
    if out.join("purity.csv").exists() {
        let mut r = csv::Reader::from_path(out.join("purity.csv")).unwrap();
        for rec in r.records() {
            rec.unwrap();
        }
    }
}

fn report_escapes(_cap: &Path, out: &Path) {
    let html = read(&out.join("index.html"));
    no_raw_markup(&html, "index.html");
    for s in svgs(out) {
        no_raw_markup(&read(&s), &s.display().to_string());
    }
}
