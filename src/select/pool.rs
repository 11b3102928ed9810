//! Items an analysis works on, built from the labelled frames of one task: single frames,
//! segments (runs of equal labels within an utterance, averaged) or whole utterances
//! (averaged; the usual form for speaker identity). Optional context stacking puts the K
//! frames either side of each frame (within its utterance, repeating the edge frame at the
//! ends) beside it.

use ndarray::{Array2, ArrayView2};

use crate::capture::{FrameTable, UNLABELLED};

/// How frames are pooled into items.
#[derive(Clone, Copy, Debug, PartialEq, Eq, serde::Serialize)]
#[serde(rename_all = "lowercase")]
pub enum Pooling {
    /// One item per labelled frame.
    Frame,
    /// One item per run of equal labels within an utterance (mean of its frames).
    Segment,
    /// One item per utterance (mean of its labelled frames); the label must be constant.
    Utterance,
}

impl Pooling {
    /// Name as used on the command line and in records.
    pub fn name(&self) -> &'static str {
        match self {
            Pooling::Frame => "frame",
            Pooling::Segment => "segment",
            Pooling::Utterance => "utterance",
        }
    }
}

impl std::str::FromStr for Pooling {
    type Err = String;
    fn from_str(s: &str) -> Result<Self, String> {
        match s {
            "frame" => Ok(Pooling::Frame),
            "segment" => Ok(Pooling::Segment),
            "utterance" => Ok(Pooling::Utterance),
            _ => Err(format!("expected frame, segment or utterance, found '{s}'")),
        }
    }
}

/// Frames of each utterance in time order, and each frame's place in that list.
#[derive(Clone, Debug)]
pub struct UttIndex {
    /// Frame indices of each utterance, ordered by position.
    pub frames: Vec<Vec<usize>>,
    /// Index of each frame within its utterance's list.
    pub place: Vec<usize>,
}

impl UttIndex {
    /// Build from a frame table.
    pub fn new(t: &FrameTable) -> UttIndex {
        let mut frames: Vec<Vec<usize>> = vec![Vec::new(); t.utterances.len()];
        for (f, &u) in t.frame_utt.iter().enumerate() {
            frames[u as usize].push(f);
        }
        for v in frames.iter_mut() {
            v.sort_by_key(|&f| (t.frame_pos[f], f));
        }
        let mut place = vec![0usize; t.n_frames()];
        for v in &frames {
            for (i, &f) in v.iter().enumerate() {
                place[f] = i;
            }
        }
        UttIndex { frames, place }
    }

    /// Length of the shortest utterance that has frames.
    pub fn shortest(&self) -> usize {
        self.frames
            .iter()
            .map(|v| v.len())
            .filter(|&n| n > 0)
            .min()
            .unwrap_or(0)
    }
}

/// Pooled items of one task.
#[derive(Clone, Debug, Default)]
pub struct Items {
    /// Frames of each item (concatenated; item i is `frames[offsets[i]..offsets[i+1]]`).
    pub frames: Vec<usize>,
    /// Offsets into `frames`, one more than the number of items.
    pub offsets: Vec<usize>,
    /// Class code of each item.
    pub label: Vec<u32>,
    /// Utterance of each item.
    pub utt: Vec<u32>,
    /// Speaker of each item.
    pub speaker: Vec<u32>,
    /// Segment (run of equal labels within an utterance) of each item, numbered from 0.
    pub segment: Vec<u32>,
}

impl Items {
    /// Number of items.
    pub fn len(&self) -> usize {
        self.label.len()
    }

    /// True when there are no items.
    pub fn is_empty(&self) -> bool {
        self.label.is_empty()
    }

    /// Frames of item `i`.
    pub fn members(&self, i: usize) -> &[usize] {
        &self.frames[self.offsets[i]..self.offsets[i + 1]]
    }

    /// Keep only the items for which `keep` is true.
    pub fn retain(&self, keep: &[bool]) -> Items {
        let mut out = Items {
            offsets: vec![0],
            ..Default::default()
        };
        for (i, &k) in keep.iter().enumerate().take(self.len()) {
            if k {
                out.frames.extend_from_slice(self.members(i));
                out.offsets.push(out.frames.len());
                out.label.push(self.label[i]);
                out.utt.push(self.utt[i]);
                out.speaker.push(self.speaker[i]);
                out.segment.push(self.segment[i]);
            }
        }
        out
    }
}

/// Build items of a task (`codes`, one per frame) with the given pooling. Errors (as text)
/// when utterance pooling meets a label that changes within an utterance.
pub fn pool_items(
    t: &FrameTable,
    idx: &UttIndex,
    codes: &[u32],
    pooling: Pooling,
    task: &str,
) -> Result<Items, String> {
    let mut items = Items {
        offsets: vec![0],
        ..Default::default()
    };
    let mut seg_id = 0u32;
    for (u, frames) in idx.frames.iter().enumerate() {
        let spk = t.utt_speaker[u];
        // Runs of equal labels; unlabelled frames break runs.
        let mut runs: Vec<(u32, Vec<usize>)> = Vec::new();
        let mut prev = UNLABELLED;
        for &f in frames {
            let c = codes[f];
            if c == UNLABELLED {
                prev = UNLABELLED;
                continue;
            }
            if c != prev || runs.is_empty() {
                runs.push((c, Vec::new()));
            }
            if let Some(r) = runs.last_mut() {
                r.1.push(f);
            }
            prev = c;
        }
        if runs.is_empty() {
            continue;
        }
        match pooling {
            Pooling::Frame => {
                for (c, fs) in &runs {
                    for &f in fs {
                        items.frames.push(f);
                        items.offsets.push(items.frames.len());
                        items.label.push(*c);
                        items.utt.push(u as u32);
                        items.speaker.push(spk);
                        items.segment.push(seg_id);
                    }
                    seg_id += 1;
                }
            }
            Pooling::Segment => {
                for (c, fs) in &runs {
                    items.frames.extend_from_slice(fs);
                    items.offsets.push(items.frames.len());
                    items.label.push(*c);
                    items.utt.push(u as u32);
                    items.speaker.push(spk);
                    items.segment.push(seg_id);
                    seg_id += 1;
                }
            }
            Pooling::Utterance => {
                let c = runs[0].0;
                if let Some((other, _)) = runs.iter().find(|r| r.0 != c) {
                    return Err(format!(
                        "task '{task}' changes within utterance '{}' (at least '{}' and '{}'); utterance pooling needs one label per utterance: use --pool frame or segment for it, or leave it out with --task",
                        t.utterances[u],
                        class_name(t, task, c),
                        class_name(t, task, *other)
                    ));
                }
                for (_, fs) in &runs {
                    items.frames.extend_from_slice(fs);
                }
                items.offsets.push(items.frames.len());
                items.label.push(c);
                items.utt.push(u as u32);
                items.speaker.push(spk);
                items.segment.push(seg_id);
                seg_id += 1;
            }
        }
    }
    Ok(items)
}

fn class_name(t: &FrameTable, task: &str, c: u32) -> String {
    t.task(task)
        .and_then(|x| x.classes.get(c as usize).cloned())
        .unwrap_or_else(|| c.to_string())
}

/// Mark in `mask` (one entry per frame) every frame [`features`] reads for the chosen items:
/// their member frames and the `context` neighbours of each.
pub fn mark_frames(
    items: &Items,
    which: &[usize],
    idx: &UttIndex,
    t: &FrameTable,
    context: usize,
    mask: &mut [bool],
) {
    for &i in which {
        for &f in items.members(i) {
            let list = &idx.frames[t.frame_utt[f] as usize];
            let p = idx.place[f];
            let lo = p.saturating_sub(context);
            let hi = (p + context).min(list.len() - 1);
            for &g in &list[lo..=hi] {
                mask[g] = true;
            }
        }
    }
}

/// Feature rows of the chosen items: the mean over each item's frames of the frame's vector,
/// with `context` frames either side stacked beside it (dimension `dim × (2·context + 1)`).
/// `layer` holds one row per frame, or, with `row_of`, only some frames: frame `f` is then row
/// `row_of[f]` (every frame [`mark_frames`] marks must have one).
pub fn features(
    layer: &ArrayView2<f32>,
    row_of: Option<&[u32]>,
    items: &Items,
    which: &[usize],
    idx: &UttIndex,
    t: &FrameTable,
    context: usize,
) -> Array2<f32> {
    let d = layer.ncols();
    let width = d * (2 * context + 1);
    let mut out = Array2::<f32>::zeros((which.len(), width));
    use rayon::prelude::*;
    out.outer_iter_mut()
        .into_par_iter()
        .zip(which.par_iter())
        .for_each(|(mut row, &i)| {
            let members = items.members(i);
            let row = row.as_slice_mut().expect("fresh array is contiguous");
            // Write before the first read: a fresh zeroed allocation read first maps the
            // shared zero page, and the write after it is a copy-on-write fault that flushes
            // every core's TLB (a tenth of a probe's time on 2-core virtual machines).
            row.fill(0.0);
            for &f in members {
                let u = t.frame_utt[f] as usize;
                let list = &idx.frames[u];
                let p = idx.place[f] as isize;
                for j in 0..(2 * context + 1) {
                    let q = (p + j as isize - context as isize).clamp(0, list.len() as isize - 1)
                        as usize;
                    let src = layer.row(match row_of {
                        Some(r) => r[list[q]] as usize,
                        None => list[q],
                    });
                    for (o, &v) in row[j * d..(j + 1) * d].iter_mut().zip(src.iter()) {
                        *o += v;
                    }
                }
            }
            let inv = 1.0 / members.len().max(1) as f32;
            if members.len() > 1 {
                row.iter_mut().for_each(|v| *v *= inv);
            }
        });
    out
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::capture::labels::LabelTask;

    /// Two utterances of 6 and 4 frames, stored interleaved, phones in runs.
    fn table() -> FrameTable {
        let frame_utt = vec![0, 1, 0, 1, 0, 1, 0, 1, 0, 0];
        let frame_pos = vec![0, 0, 1, 1, 2, 2, 3, 3, 4, 5];
        let codes = vec![0, 1, 0, 1, 1, 0, 1, 0, 2, 2];
        FrameTable {
            utterances: vec!["u0".into(), "u1".into()],
            utt_speaker: vec![0, 1],
            speakers: vec!["s0".into(), "s1".into()],
            frame_utt,
            frame_pos,
            tasks: vec![LabelTask {
                name: "phone".into(),
                classes: vec!["a".into(), "b".into(), "c".into()],
                codes,
            }],
            continuous: vec![],
        }
    }

    #[test]
    fn features_from_marked_rows_equal_features_from_the_whole_layer() {
        let t = table();
        let idx = UttIndex::new(&t);
        let layer = Array2::from_shape_fn((10, 3), |(f, c)| (f * 10 + c) as f32);
        for pooling in [Pooling::Frame, Pooling::Segment] {
            let items = pool_items(&t, &idx, &t.tasks[0].codes, pooling, "phone").unwrap();
            let which: Vec<usize> = (0..items.len()).filter(|i| i % 2 == 1).collect();
            for context in [0, 1, 2] {
                let mut mask = vec![false; 10];
                mark_frames(&items, &which, &idx, &t, context, &mut mask);
                let needed: Vec<usize> = (0..10).filter(|&f| mask[f]).collect();
                assert!(needed.len() < 10 || context > 0);
                let mut row_of = vec![u32::MAX; 10];
                for (k, &f) in needed.iter().enumerate() {
                    row_of[f] = k as u32;
                }
                let part = layer.select(ndarray::Axis(0), &needed);
                let full = features(&layer.view(), None, &items, &which, &idx, &t, context);
                let some = features(
                    &part.view(),
                    Some(&row_of),
                    &items,
                    &which,
                    &idx,
                    &t,
                    context,
                );
                assert_eq!(full, some, "{pooling:?}, context {context}");
            }
        }
    }
}
