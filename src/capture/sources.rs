//! Where a capture's labels come from: `frames.tsv`; or `utterances.tsv` with
//! `segments.tsv`, TextGrid files (`align/<utterance>.TextGrid`), a CTM file
//! (`alignments.ctm`), or nothing more (then only its per-utterance columns and the speaker).

use std::collections::BTreeMap;
use std::path::Path;

use rayon::prelude::*;

use super::ctm::read_ctm;
use super::labels::{self, Columns, FrameTable, LabelOptions, Timing};
use super::textgrid::{read_textgrid, TextGrid};
use super::utterances::{build_table, listed_frames, Place, Tier, UttIntervals, UttList};
use super::{CaptureConfig, CaptureError};

/// The labels read, their source in words, how many label files, and warnings.
pub(crate) struct Labels {
    pub frames: FrameTable,
    pub source: String,
    pub files: usize,
    pub notes: Vec<String>,
}

/// The utterance list of a per-utterance layout and the frames of each utterance.
pub(crate) type Listed<'a> = (&'a UttList, &'a [u32]);

/// Read the labels of the capture in `dir`. `listed` is the utterance list and frame counts
/// when the layer data is per utterance; otherwise `utterances.tsv`, if used, gives the frame
/// counts, at most `max_frames` in all.
pub(crate) fn read_labels(
    dir: &Path,
    config: &CaptureConfig,
    opts: &LabelOptions,
    max_frames: usize,
    listed: Option<Listed>,
) -> Result<Labels, CaptureError> {
    let cols = Columns {
        utterance: &config.utterance_column,
        speaker: &config.speaker_column,
    };
    let frames_tsv = dir.join("frames.tsv");
    if frames_tsv.exists() {
        let frames = labels::read_frames_tsv(&frames_tsv, &cols, opts)?;
        if let Some((ul, counts)) = listed {
            check_frames_tsv(&frames_tsv, &frames, ul, counts)?;
        }
        return Ok(Labels {
            frames,
            source: "frames.tsv".into(),
            files: 1,
            notes: vec![],
        });
    }
    let utt_tsv = dir.join("utterances.tsv");
    let owned;
    let (ul, counts): (&UttList, Vec<u32>) = match listed {
        Some((ul, c)) => (ul, c.to_vec()),
        None if utt_tsv.exists() => {
            owned = super::utterances::read_utterances(&utt_tsv, &cols)?;
            let c = listed_frames(&owned, max_frames)?;
            (&owned, c)
        }
        None => {
            return Err(CaptureError::Invalid {
                path: dir.to_path_buf(),
                what: "labels".into(),
                expected: "frames.tsv, or utterances.tsv (with segments.tsv, align/*.TextGrid or alignments.ctm)".into(),
                found: "neither".into(),
            })
        }
    };
    let timing = Timing {
        hop_s: config.hop_s,
        win_s: config.win_s.unwrap_or(config.hop_s),
    };
    let (seg, align, ctm) = (
        dir.join("segments.tsv"),
        dir.join("align"),
        dir.join("alignments.ctm"),
    );
    let present: Vec<&str> = [
        (&seg, "segments.tsv"),
        (&align, "align/"),
        (&ctm, "alignments.ctm"),
    ]
    .iter()
    .filter(|(p, _)| p.exists())
    .map(|(_, n)| *n)
    .collect();
    let mut notes = Vec::new();
    if present.len() > 1 {
        notes.push(format!(
            "labels taken from {}; {} left unread",
            present[0],
            present[1..].join(", ")
        ));
    }
    let mut out = match present.first().copied() {
        Some("segments.tsv") => Labels {
            frames: labels::segments_table(ul, &counts, &seg, &config.segment_label, timing, opts)?,
            source: "utterances.tsv + segments.tsv".into(),
            files: 2,
            notes: vec![],
        },
        Some("align/") => textgrid_labels(&align, ul, &counts, config, timing, opts)?,
        Some(_) => ctm_labels(&ctm, ul, &counts, config, timing, opts)?,
        None => Labels {
            frames: build_table(ul, &counts, vec![], Place::Text, timing, opts)?,
            source: "utterances.tsv".into(),
            files: 1,
            notes: vec![],
        },
    };
    notes.append(&mut out.notes);
    out.notes = notes;
    Ok(out)
}

/// With per-utterance arrays, `frames.tsv` must hold the utterances of `utterances.tsv` in
/// its order, each with its speaker and its array's frames.
fn check_frames_tsv(
    path: &Path,
    t: &FrameTable,
    ul: &UttList,
    counts: &[u32],
) -> Result<(), CaptureError> {
    let mut per_utt = vec![0u32; t.utterances.len()];
    for &u in &t.frame_utt {
        per_utt[u as usize] += 1;
    }
    // Utterances appear in frame order in frames.tsv; they must be contiguous and in order.
    let in_order = t
        .frame_utt
        .windows(2)
        .all(|w| w[1] == w[0] || w[1] == w[0] + 1);
    let same = in_order
        && t.utterances == ul.names
        && per_utt == counts
        && (0..ul.names.len()).all(|u| t.speakers[t.utt_speaker[u] as usize] == ul.speakers[u]);
    if same {
        return Ok(());
    }
    Err(CaptureError::Invalid {
        path: path.to_path_buf(),
        what: "utterances".into(),
        expected: format!(
            "the utterances of {} in its order, each with its speaker and its array's frame count",
            ul.path.display()
        ),
        found: "a different list, order or count".into(),
    })
}

/// The name a TextGrid tier's column takes: the phone tier (`phone_tier` in capture.toml, or
/// `phones`/`phone` in any case) gives `segment_label`; any other tier its own name.
fn column_name(config: &CaptureConfig, tier: &str) -> String {
    let is_phone = match &config.phone_tier {
        Some(p) => tier == p,
        None => tier.eq_ignore_ascii_case("phones") || tier.eq_ignore_ascii_case("phone"),
    };
    if is_phone {
        config.segment_label.clone()
    } else {
        tier.to_string()
    }
}

/// Labels from `align/<utterance>.TextGrid`: every interval tier a column, the phone tier first.
fn textgrid_labels(
    align: &Path,
    ul: &UttList,
    counts: &[u32],
    config: &CaptureConfig,
    timing: Timing,
    opts: &LabelOptions,
) -> Result<Labels, CaptureError> {
    let grids: Vec<Option<TextGrid>> = (0..ul.names.len())
        .into_par_iter()
        .map(|u| {
            let p = align.join(format!("{}.TextGrid", ul.names[u]));
            if ul.names[u].contains(['/', '\\']) || !p.is_file() {
                return Ok(None);
            }
            read_textgrid(&p).map(Some)
        })
        .collect::<Result<_, CaptureError>>()?;
    let mut tiers: Vec<Tier> = Vec::new();
    let mut points: BTreeMap<String, usize> = BTreeMap::new();
    let (mut missing, mut missing_frames) = (0usize, 0u64);
    for (u, g) in grids.into_iter().enumerate() {
        let Some(g) = g else {
            missing += 1;
            missing_frames += counts[u] as u64;
            continue;
        };
        let file = align.join(format!("{}.TextGrid", ul.names[u]));
        for p in g.point_tiers {
            *points.entry(p).or_default() += 1;
        }
        for t in g.tiers {
            let name = column_name(config, &t.name);
            let k = match tiers.iter().position(|x| x.name == name) {
                Some(k) => k,
                None => {
                    tiers.push(Tier {
                        name,
                        per_utt: vec![None; ul.names.len()],
                    });
                    tiers.len() - 1
                }
            };
            if tiers[k].per_utt[u].is_some() {
                return Err(CaptureError::Invalid {
                    path: file.clone(),
                    what: "tiers".into(),
                    expected: format!("one tier giving column '{}'", tiers[k].name),
                    found: format!("a second one, '{}'", t.name),
                });
            }
            tiers[k].per_utt[u] = Some(UttIntervals {
                file: file.clone(),
                intervals: t.intervals,
            });
        }
    }
    // The phone column first, the others in order of first appearance.
    tiers.sort_by_key(|t| t.name != config.segment_label);
    let mut notes = Vec::new();
    if missing > 0 {
        notes.push(format!(
            "{}: no TextGrid for {missing} of {} utterances; their {missing_frames} frames are unlabelled",
            align.display(),
            ul.names.len()
        ));
    }
    for (name, n) in points {
        notes.push(format!(
            "point tier '{name}' skipped in {n} TextGrid file(s) (only interval tiers are read)"
        ));
    }
    Ok(Labels {
        frames: build_table(ul, counts, tiers, Place::Text, timing, opts)?,
        source: "utterances.tsv + align/*.TextGrid".into(),
        files: 1 + ul.names.len() - missing,
        notes,
    })
}

/// Labels from `alignments.ctm`: its labels make the phone column.
fn ctm_labels(
    ctm: &Path,
    ul: &UttList,
    counts: &[u32],
    config: &CaptureConfig,
    timing: Timing,
    opts: &LabelOptions,
) -> Result<Labels, CaptureError> {
    let (per_utt, unlisted) = read_ctm(ctm, ul)?;
    let tier = Tier {
        name: config.segment_label.clone(),
        per_utt: per_utt
            .into_iter()
            .map(|intervals| {
                Some(UttIntervals {
                    file: ctm.to_path_buf(),
                    intervals,
                })
            })
            .collect(),
    };
    let mut notes = Vec::new();
    if unlisted > 0 {
        notes.push(format!(
            "{}: {unlisted} line(s) name utterances not listed in {} and were left out",
            ctm.display(),
            ul.path.display()
        ));
    }
    Ok(Labels {
        frames: build_table(ul, counts, vec![tier], Place::Text, timing, opts)?,
        source: "utterances.tsv + alignments.ctm".into(),
        files: 2,
        notes,
    })
}
