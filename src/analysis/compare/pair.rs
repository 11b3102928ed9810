//! Frame pairing for `compare` ([`pair_frames`]): row by row, or by (utterance, frame index
//! within the utterance), checking that paired frames agree on utterance, speaker and every
//! label task present in both captures.

use std::collections::HashMap;

use crate::capture::{Capture, FrameTable, LabelTask, UNLABELLED};

use super::{CompareError, MatchBy, Pairing};

/// Where two captures' frames first differ.
#[derive(Debug)]
pub struct FrameMismatch {
    /// Capture A's folder.
    pub path_a: String,
    /// Capture B's folder.
    pub path_b: String,
    /// Frame (row) index, counting from 0.
    pub row: usize,
    /// The differing field.
    pub field: String,
    /// A's value.
    pub expected: String,
    /// B's value.
    pub found: String,
}

fn label_name(task: &LabelTask, r: usize) -> String {
    match task.codes[r] {
        UNLABELLED => "(unlabelled)".to_string(),
        c => task.classes[c as usize].clone(),
    }
}

fn utt_name(t: &FrameTable, r: usize) -> String {
    t.utterances[t.frame_utt[r] as usize].clone()
}

fn speaker_name(t: &FrameTable, r: usize) -> String {
    t.speakers[t.utt_speaker[t.frame_utt[r] as usize] as usize].clone()
}

/// The error for B's frame `row` differing from A's in `field`.
fn mismatch(
    a: &Capture,
    b: &Capture,
    row: usize,
    field: &str,
    expected: String,
    found: String,
) -> CompareError {
    CompareError::FrameMismatch(Box::new(FrameMismatch {
        path_a: a.dir.display().to_string(),
        path_b: b.dir.display().to_string(),
        row,
        field: field.to_string(),
        expected,
        found,
    }))
}

/// The label tasks both captures carry, as (index in A, index in B).
fn shared_tasks(fa: &FrameTable, fb: &FrameTable) -> Vec<(usize, usize)> {
    fa.tasks
        .iter()
        .enumerate()
        .filter_map(|(i, t)| {
            fb.tasks
                .iter()
                .position(|u| u.name == t.name)
                .map(|j| (i, j))
        })
        .collect()
}

/// Check that A's row `ra` and B's row `rb` carry the same label in every shared task.
fn check_labels(
    a: &Capture,
    b: &Capture,
    shared: &[(usize, usize)],
    ra: usize,
    rb: usize,
) -> Result<(), CompareError> {
    let (fa, fb) = (&a.frames, &b.frames);
    for &(i, j) in shared {
        let (x, y) = (label_name(&fa.tasks[i], ra), label_name(&fb.tasks[j], rb));
        if x != y {
            return Err(mismatch(
                a,
                b,
                rb,
                &format!("label '{}'", fa.tasks[i].name),
                x,
                y,
            ));
        }
    }
    Ok(())
}

/// Pair row r of A with row r of B; the frame tables must agree row by row and in length.
fn pair_by_row(
    a: &Capture,
    b: &Capture,
    shared: &[(usize, usize)],
) -> Result<(Vec<usize>, Vec<usize>), CompareError> {
    let (fa, fb) = (&a.frames, &b.frames);
    let n = fa.n_frames().min(fb.n_frames());
    for r in 0..n {
        if utt_name(fa, r) != utt_name(fb, r) {
            return Err(mismatch(
                a,
                b,
                r,
                "utterance",
                utt_name(fa, r),
                utt_name(fb, r),
            ));
        }
        if speaker_name(fa, r) != speaker_name(fb, r) {
            let (x, y) = (speaker_name(fa, r), speaker_name(fb, r));
            return Err(mismatch(a, b, r, "speaker", x, y));
        }
        check_labels(a, b, shared, r, r)?;
    }
    if fa.n_frames() != fb.n_frames() {
        return Err(mismatch(
            a,
            b,
            n,
            "frame count",
            format!("{} frames", fa.n_frames()),
            format!(
                "{} frames (use --match-by utterance to pair by utterance)",
                fb.n_frames()
            ),
        ));
    }
    Ok(((0..n).collect(), (0..n).collect()))
}

/// Check that every utterance present in both captures has the same speaker in both.
fn check_utterance_speakers(
    a: &Capture,
    b: &Capture,
    b_utt: &HashMap<&str, usize>,
) -> Result<(), CompareError> {
    let (fa, fb) = (&a.frames, &b.frames);
    for (ia, u) in fa.utterances.iter().enumerate() {
        if let Some(&ib) = b_utt.get(u.as_str()) {
            let sa = &fa.speakers[fa.utt_speaker[ia] as usize];
            let sb = &fb.speakers[fb.utt_speaker[ib] as usize];
            if sa != sb {
                let row = fb
                    .frame_utt
                    .iter()
                    .position(|&x| x as usize == ib)
                    .unwrap_or(0);
                return Err(mismatch(
                    a,
                    b,
                    row,
                    &format!("speaker of utterance '{u}'"),
                    sa.clone(),
                    sb.clone(),
                ));
            }
        }
    }
    Ok(())
}

/// Pair frames with the same utterance name and frame index within the utterance; frames
/// without a partner are left out.
fn pair_by_utterance(
    a: &Capture,
    b: &Capture,
    shared: &[(usize, usize)],
) -> Result<(Vec<usize>, Vec<usize>), CompareError> {
    let (fa, fb) = (&a.frames, &b.frames);
    let b_utt: HashMap<&str, usize> = fb
        .utterances
        .iter()
        .enumerate()
        .map(|(i, u)| (u.as_str(), i))
        .collect();
    check_utterance_speakers(a, b, &b_utt)?;
    let key_b: HashMap<(u32, u32), usize> = (0..fb.n_frames())
        .map(|r| ((fb.frame_utt[r], fb.frame_pos[r]), r))
        .collect();
    let mut ra = Vec::new();
    let mut rb = Vec::new();
    for r in 0..fa.n_frames() {
        let Some(&ub) = b_utt.get(fa.utterances[fa.frame_utt[r] as usize].as_str()) else {
            continue;
        };
        if let Some(&s) = key_b.get(&(ub as u32, fa.frame_pos[r])) {
            check_labels(a, b, shared, r, s)?;
            ra.push(r);
            rb.push(s);
        }
    }
    Ok((ra, rb))
}

/// Leave out pairs where either frame was zeroed for NaN/Inf (opened with allow_nonfinite):
/// they carry no activations to compare.
fn drop_nonfinite(
    a: &Capture,
    b: &Capture,
    rows_a: Vec<usize>,
    rows_b: Vec<usize>,
) -> (Vec<usize>, Vec<usize>) {
    if a.nonfinite_frames.is_empty() && b.nonfinite_frames.is_empty() {
        return (rows_a, rows_b);
    }
    rows_a
        .into_iter()
        .zip(rows_b)
        .filter(|(x, y)| {
            a.nonfinite_frames.binary_search(x).is_err()
                && b.nonfinite_frames.binary_search(y).is_err()
        })
        .unzip()
}

/// Pair the frames of A and B (see [`MatchBy`]), checking that paired frames agree on
/// utterance, speaker and every label task present in both.
pub fn pair_frames(a: &Capture, b: &Capture, how: MatchBy) -> Result<Pairing, CompareError> {
    let (fa, fb) = (&a.frames, &b.frames);
    let shared = shared_tasks(fa, fb);
    let (rows_a, rows_b) = match how {
        MatchBy::Row => pair_by_row(a, b, &shared)?,
        MatchBy::Utterance => pair_by_utterance(a, b, &shared)?,
    };
    let (rows_a, rows_b) = drop_nonfinite(a, b, rows_a, rows_b);
    let paired = rows_a.len();
    if paired == 0 {
        return Err(CompareError::Input(format!(
            "{} and {}: no frames could be paired (no utterance appears in both)",
            a.dir.display(),
            b.dir.display()
        )));
    }
    Ok(Pairing {
        match_by: how,
        frames_a: fa.n_frames(),
        frames_b: fb.n_frames(),
        paired,
        dropped_a: fa.n_frames() - paired,
        dropped_b: fb.n_frames() - paired,
        used: paired,
        rows_a,
        rows_b,
    })
}
