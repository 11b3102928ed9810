//! TextGrid and CTM label sources: the TextGrid reader against praatio's read-back of files
//! praatio wrote (tests/reference/make_textgrid.py), frame labels by the centre rule, the
//! warnings, and the bad inputs (exit 2, file and line named).

mod common;

use std::path::{Path, PathBuf};

use common::{run_text, s, write_stacks, write_utterances};
use ndarray::Array3;
use voxstrata::capture::textgrid::parse_textgrid;
use voxstrata::capture::{Capture, OpenOptions, UNLABELLED};

fn fixtures() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/reference/textgrid")
}

/// Source: praatio 6.2.2 `textgrid.openTextgrid(includeEmptyIntervals=True)` on files written
/// by praatio's `Textgrid.save` (long and short format), re-encoded by the script as UTF-8
/// with a byte-order mark and as UTF-16 with one.
#[test]
fn parsed_intervals_equal_praatio_read_back() {
    let exp = common::read_json(&fixtures().join("expected.json"));
    let files = exp["files"].as_object().unwrap();
    assert_eq!(files.len(), 6, "long, short; plain, BOM, UTF-16");
    for (name, want) in files {
        let p = fixtures().join(name);
        let g = parse_textgrid(&p, &std::fs::read(&p).unwrap()).unwrap();
        assert_eq!(g.xmin, want["xmin"].as_f64().unwrap(), "{name}");
        assert_eq!(g.xmax, want["xmax"].as_f64().unwrap(), "{name}");
        let tiers = want["tiers"].as_array().unwrap();
        let (mut iv, mut pt) = (g.tiers.iter(), g.point_tiers.iter());
        for t in tiers {
            if t["kind"] == "point" {
                assert_eq!(pt.next().unwrap(), t["name"].as_str().unwrap(), "{name}");
                continue;
            }
            let ours = iv.next().unwrap();
            assert_eq!(ours.name, t["name"].as_str().unwrap(), "{name}");
            assert_eq!(ours.xmin, t["xmin"].as_f64().unwrap());
            assert_eq!(ours.xmax, t["xmax"].as_f64().unwrap());
            let entries = t["entries"].as_array().unwrap();
            assert_eq!(ours.intervals.len(), entries.len(), "{name} {}", ours.name);
            for (a, e) in ours.intervals.iter().zip(entries) {
                assert_eq!(a.start, e[0].as_f64().unwrap(), "{name}");
                assert_eq!(a.end, e[1].as_f64().unwrap(), "{name}");
                assert_eq!(a.label, e[2].as_str().unwrap(), "{name}");
            }
        }
        assert!(
            iv.next().is_none() && pt.next().is_none(),
            "{name}: extra tiers"
        );
    }
}

/// Two utterances (u1: 10 frames, u2: 6 frames), one layer of dim 2; hop 10 ms, window 25 ms,
/// so frame i has centre 10 i + 12.5 ms.
fn capture(dir: &Path, toml_extra: &str) {
    write_utterances(dir, &[("u1", "A"), ("u2", "B")], &[]);
    write_stacks(
        dir,
        &[
            ("u1", Array3::<f32>::zeros((1, 10, 2))),
            ("u2", Array3::<f32>::ones((1, 6, 2))),
        ],
    );
    std::fs::write(
        dir.join("capture.toml"),
        format!("hop_s = 0.01\nwin_s = 0.025\n{toml_extra}"),
    )
    .unwrap();
}

fn labels(cap: &Capture, task: &str) -> Vec<String> {
    let t = cap
        .frames
        .task(task)
        .unwrap_or_else(|| panic!("no task {task}"));
    t.codes
        .iter()
        .map(|&c| {
            if c == UNLABELLED {
                "-".to_string()
            } else {
                t.classes[c as usize].clone()
            }
        })
        .collect()
}

const U1_SHORT: &str =
    "File type = \"ooTextFile\"\nObject class = \"TextGrid\"\n\n0\n0.11\n<exists>\n3\n\
\"IntervalTier\"\n\"Words\"\n0\n0.11\n1\n0\n0.11\n\"hi\"\n\
\"TextTier\"\n\"beats\"\n0\n0.11\n1\n0.05\n\"x\"\n\
\"IntervalTier\"\n\"PHONES\"\n0\n0.11\n3\n0\n0.03\n\"h\"\n0.03\n0.05\n\"\"\n0.05\n0.11\n\"i\"\n";

/// Hand-worked (centre rule as `segments.tsv`): centres 12.5, 22.5, ..., 102.5 ms.
/// PHONES (any case): h [0, 30) -> frames 0-1; empty [30, 50) -> 2-3 unlabelled; i [50, 110)
/// -> 4-9. u2 has no TextGrid: its 6 frames are unlabelled, with a warning counting them.
#[test]
fn textgrid_tiers_label_frames_by_centre_time() {
    let d = tempfile::tempdir().unwrap();
    capture(d.path(), "");
    std::fs::create_dir_all(d.path().join("align")).unwrap();
    std::fs::write(d.path().join("align/u1.TextGrid"), U1_SHORT).unwrap();
    let cap = Capture::open(d.path(), &OpenOptions::default()).unwrap();
    assert_eq!(cap.frames.task_names(), vec!["phone", "Words", "speaker"]);
    let want = "h h - - i i i i i i - - - - - -";
    assert_eq!(labels(&cap, "phone").join(" "), want);
    assert_eq!(
        labels(&cap, "Words").join(" "),
        "hi hi hi hi hi hi hi hi hi hi - - - - - -"
    );
    let notes = cap.notes.join("\n");
    assert!(
        notes.contains("no TextGrid for 1 of 2 utterances; their 6 frames"),
        "{notes}"
    );
    assert!(notes.contains("point tier 'beats' skipped in 1"), "{notes}");
    assert_eq!(cap.label_source, "utterances.tsv + align/*.TextGrid");
    // phone_tier in capture.toml picks another tier as the phone column.
    capture(d.path(), "phone_tier = \"Words\"\n");
    let cap = Capture::open(d.path(), &OpenOptions::default()).unwrap();
    assert_eq!(cap.frames.task_names(), vec!["phone", "PHONES", "speaker"]);
    assert_eq!(labels(&cap, "phone")[0], "hi");
}

/// Same utterances in CTM: comments skipped, the sixth field (confidence) optional.
#[test]
fn ctm_lines_label_frames_by_centre_time() {
    let d = tempfile::tempdir().unwrap();
    capture(d.path(), "");
    std::fs::write(
        d.path().join("alignments.ctm"),
        ";; utterance channel start duration label\nu1 1 0.00 0.03 h 0.9\nu1 1 0.05 0.06 i\n\nu2 A 0.02 0.02 s\nother 1 0 1 x\n",
    )
    .unwrap();
    let cap = Capture::open(d.path(), &OpenOptions::default()).unwrap();
    // u2: s [20, 40) ms holds the centres 22.5 and 32.5 (frames 1, 2).
    assert_eq!(
        labels(&cap, "phone").join(" "),
        "h h - - i i i i i i - s s - - -"
    );
    assert!(cap
        .notes
        .join("\n")
        .contains("1 line(s) name utterances not listed"));
    let r = run_text(["inspect", s(d.path())]);
    assert_eq!(r.code, 0, "{}", r.stderr);
    assert!(
        r.stdout.contains("utterances.tsv + alignments.ctm"),
        "{}",
        r.stdout
    );
}

fn fails(dir: &Path, words: &[&str]) {
    let r = run_text(["inspect", s(dir)]);
    assert_eq!(r.code, 2, "{}", r.stderr);
    for w in words {
        assert!(r.stderr.contains(w), "'{w}' not in: {}", r.stderr);
    }
}

#[test]
fn bad_textgrids_name_file_and_line() {
    let d = tempfile::tempdir().unwrap();
    capture(d.path(), "");
    std::fs::create_dir_all(d.path().join("align")).unwrap();
    let tg = d.path().join("align/u1.TextGrid");
    // Line 14 holds the end of the first interval.
    std::fs::write(&tg, U1_SHORT.replacen("0.11\n\"hi\"", "oops\n\"hi\"", 1)).unwrap();
    fails(
        d.path(),
        &[
            "u1.TextGrid",
            "line 14",
            "end time of an interval",
            "'oops'",
        ],
    );
    // An interval that ends before it starts (line 32: 0.05 -> 0.02 after a start of 0.03).
    std::fs::write(&tg, U1_SHORT.replacen("0.03\n0.05\n", "0.03\n0.02\n", 1)).unwrap();
    fails(
        d.path(),
        &["u1.TextGrid", "line 32", "ends before it starts"],
    );
    // Overlapping intervals: the third starts at 0.04, before the second ends (0.05).
    std::fs::write(
        &tg,
        U1_SHORT.replacen("0.05\n0.11\n\"i\"", "0.04\n0.11\n\"i\"", 1),
    )
    .unwrap();
    fails(d.path(), &["u1.TextGrid", "line 34", "must not overlap"]);
    // Truncated: the file ends inside a tier.
    std::fs::write(&tg, &U1_SHORT[..U1_SHORT.len() - 10]).unwrap();
    fails(d.path(), &["u1.TextGrid", "the end of the file"]);
    std::fs::write(&tg, "not a textgrid").unwrap();
    fails(d.path(), &["u1.TextGrid", "line 1", "ooTextFile"]);
}

#[test]
fn bad_ctm_lines_name_file_and_line() {
    let d = tempfile::tempdir().unwrap();
    capture(d.path(), "");
    let ctm = d.path().join("alignments.ctm");
    std::fs::write(&ctm, ";; c\nu1 1 0 0.1 a\nu1 1 0.1 0.1\n").unwrap();
    fails(
        d.path(),
        &["alignments.ctm", "line 3", "5 or 6 fields", "4 fields"],
    );
    std::fs::write(&ctm, "u1 1 0 0.1 a\nu1 1 zero 0.1 b\n").unwrap();
    fails(
        d.path(),
        &["alignments.ctm", "line 2", "start in seconds", "'zero'"],
    );
    std::fs::write(&ctm, "u1 1 0 0.1 a\nu1 1 0.05 0.05 b\n").unwrap();
    fails(d.path(), &["alignments.ctm", "line 2", "must not overlap"]);
}
