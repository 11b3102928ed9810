//! Entry points shared by the fuzz targets (`fuzz/fuzz_targets/*.rs`) and the replay test
//! (`tests/fuzz_replay.rs`): each takes arbitrary bytes and drives one capture reader through
//! its public API. A reader may return an error on any input; it must never panic, hang or
//! allocate beyond what the bytes justify.

use std::path::Path;

use voxstrata::capture::labels::{self, Columns, LabelOptions, Timing};
use voxstrata::capture::npy::{parse_header, NpyFile};
use voxstrata::capture::{ctm, textgrid, utterances};

/// Frames a segment table may expand to in the harness (the CLI bounds it by the layer files).
pub const SEGMENT_FRAME_LIMIT: usize = 1 << 20;

/// `.npy` header parser on the bytes, then the memory-mapped reader on the same bytes as a file.
pub fn npy(dir: &Path, data: &[u8]) {
    let path = dir.join("layer_00.npy");
    let _ = parse_header(&path, data, data.len() as u64);
    // A file length that disagrees with the bytes seen (header read from a prefix).
    let _ = parse_header(&path, data, (data.len() as u64).wrapping_mul(3) / 2);
    if std::fs::write(&path, data).is_err() {
        return;
    }
    let Ok(f) = NpyFile::open(&path) else {
        return;
    };
    let (l, n, d) = f.layer_shape();
    if f.header().shape.len() == 2 || f.header().shape.len() == 3 {
        // The header was checked against the file length, so these reads are bounded by it.
        for layer in 0..l.min(4) {
            let m = f.read_layer(layer);
            assert_eq!(m.dim(), (n, d));
            if n > 0 {
                let rows = [0, n - 1, n / 2, 0];
                let r = f.read_rows(layer, &rows);
                assert_eq!(r.dim(), (4, d));
                for (k, &i) in rows.iter().enumerate() {
                    let same = r
                        .row(k)
                        .iter()
                        .zip(m.row(i).iter())
                        .all(|(a, b)| a.to_bits() == b.to_bits() || (a.is_nan() && b.is_nan()));
                    assert!(same, "read_rows and read_layer disagree on row {i}");
                }
            }
            let (idx, s) = f.sample_rows(layer, 3);
            assert_eq!(idx.len(), s.nrows());
            f.release();
        }
    }
}

fn label_options() -> LabelOptions {
    let mut o = LabelOptions {
        drop: vec!["sil".into(), String::new()],
        ..Default::default()
    };
    o.merge.insert("a".into(), "b".into());
    o.merge.insert("b".into(), "sil".into());
    o
}

fn check_table(t: &voxstrata::capture::FrameTable) {
    let n = t.n_frames();
    assert_eq!(t.frame_pos.len(), n);
    assert_eq!(t.frame_speaker().len(), n);
    for task in &t.tasks {
        assert_eq!(task.codes.len(), n);
        let counts = task.class_counts();
        assert_eq!(
            counts.iter().sum::<usize>() + task.n_unlabelled(),
            n,
            "task {}",
            task.name
        );
    }
    assert_eq!(t.tasks.last().map(|t| t.name.as_str()), Some("speaker"));
    let mut masked = t.clone();
    let bad: Vec<bool> = (0..n).map(|i| i % 3 == 1).collect();
    masked.mask_frames(&bad);
}

/// `frames.tsv` reader (and the generic row streamer and merge-map reader) on the bytes.
pub fn frames_tsv(dir: &Path, data: &[u8]) {
    let path = dir.join("frames.tsv");
    if std::fs::write(&path, data).is_err() {
        return;
    }
    let cols = Columns {
        utterance: "utterance",
        speaker: "speaker",
    };
    if let Ok(t) = labels::read_frames_tsv(&path, &cols, &LabelOptions::default()) {
        check_table(&t);
    }
    if let Ok(t) = labels::read_frames_tsv(&path, &cols, &label_options()) {
        check_table(&t);
    }
    let only_phone = LabelOptions {
        columns: vec!["phone".into()],
        ..Default::default()
    };
    if let Ok(t) = labels::read_frames_tsv(&path, &cols, &only_phone) {
        check_table(&t);
    }
    let mut rows = 0usize;
    let _ = labels::for_each_row(&path, |_, f| {
        rows += f.len();
        Ok(())
    });
    let _ = labels::read_merge_map(&path);
}

/// Segment conversion: the bytes up to the first NUL are `utterances.tsv`, the rest
/// `segments.tsv` (with no NUL, both files get all the bytes).
pub fn segments(dir: &Path, data: &[u8]) {
    let (utt, seg) = match data.iter().position(|&b| b == 0) {
        Some(i) => (&data[..i], &data[i + 1..]),
        None => (data, data),
    };
    let (up, sp) = (dir.join("utterances.tsv"), dir.join("segments.tsv"));
    if std::fs::write(&up, utt).is_err() || std::fs::write(&sp, seg).is_err() {
        return;
    }
    let cols = Columns {
        utterance: "utterance",
        speaker: "speaker",
    };
    for timing in [
        Timing {
            hop_s: 0.01,
            win_s: 0.025,
        },
        Timing {
            hop_s: 0.02,
            win_s: 0.02,
        },
    ] {
        for opts in [LabelOptions::default(), label_options()] {
            if let Ok(t) = labels::read_segments_within(
                &up,
                &sp,
                &cols,
                "phone",
                timing,
                &opts,
                SEGMENT_FRAME_LIMIT,
            ) {
                assert!(t.n_frames() <= SEGMENT_FRAME_LIMIT);
                check_table(&t);
            }
        }
    }
}

/// An utterance list of two utterances of 60 frames each, written once into `dir`.
fn two_utterances(dir: &Path) -> Option<voxstrata::capture::utterances::UttList> {
    let p = dir.join("utterances.tsv");
    std::fs::write(&p, "utterance\tspeaker\tframes\nu1\ts1\t60\nu2\ts2\t60\n").ok()?;
    let cols = Columns {
        utterance: "utterance",
        speaker: "speaker",
    };
    voxstrata::capture::utterances::read_utterances(&p, &cols).ok()
}

/// Turn tiers into a frame table for the two utterances and check it.
fn check_tiers(ul: &voxstrata::capture::utterances::UttList, tiers: Vec<utterances::Tier>) {
    let counts = [60u32, 60];
    for opts in [LabelOptions::default(), label_options()] {
        let timing = Timing {
            hop_s: 0.01,
            win_s: 0.025,
        };
        if let Ok(t) = utterances::build_table(
            ul,
            &counts,
            tiers.clone(),
            utterances::Place::Text,
            timing,
            &opts,
        ) {
            assert_eq!(t.n_frames(), 120);
            check_table(&t);
        }
    }
}

/// TextGrid parser on the bytes (both as they are and behind a UTF-16 byte-order mark); every
/// interval tier read is then turned into frame labels.
pub fn textgrid(dir: &Path, data: &[u8]) {
    let path = dir.join("u1.TextGrid");
    let mut utf16 = vec![0xFF, 0xFE];
    utf16.extend(
        String::from_utf8_lossy(data)
            .encode_utf16()
            .flat_map(|u| u.to_le_bytes()),
    );
    let Some(ul) = two_utterances(dir) else {
        return;
    };
    for bytes in [data, &utf16[..]] {
        let Ok(g) = textgrid::parse_textgrid(&path, bytes) else {
            continue;
        };
        let mut tiers = Vec::new();
        for t in g.tiers {
            for w in t.intervals.windows(2) {
                assert!(w[1].start >= w[0].end - 1e-9, "overlap passed the parser");
            }
            assert!(t.intervals.iter().all(|i| i.end > i.start));
            let ui = utterances::UttIntervals {
                file: path.clone(),
                intervals: t.intervals,
            };
            tiers.push(utterances::Tier {
                name: format!("tier{}", tiers.len()),
                per_utt: vec![Some(ui), None],
            });
        }
        check_tiers(&ul, tiers);
    }
}

/// CTM reader on the bytes, then conversion of its lines into frame labels.
pub fn ctm(dir: &Path, data: &[u8]) {
    let path = dir.join("alignments.ctm");
    let Some(ul) = two_utterances(dir) else {
        return;
    };
    if let Ok((per_utt, _)) = ctm::parse_ctm(&path, data, &ul) {
        assert_eq!(per_utt.len(), 2);
        let tier = utterances::Tier {
            name: "phone".into(),
            per_utt: per_utt
                .into_iter()
                .map(|intervals| {
                    Some(utterances::UttIntervals {
                        file: path.clone(),
                        intervals,
                    })
                })
                .collect(),
        };
        check_tiers(&ul, vec![tier]);
    }
}
