//! Control task of Hewitt & Liang (2019), "Designing and Interpreting Probes with Control
//! Tasks": every *type* gets one random label, drawn from the task's class frequencies with
//! the run's seed, and the same probe (same penalty, same split) is trained on it. Types recur
//! between training and test, so a probe with enough capacity can learn the type → label
//! mapping; selectivity = accuracy − control accuracy then says how much of the accuracy comes
//! from the representation rather than from the probe's capacity.
//!
//! A type is a phone in context ([`frame_types`] with `in_context`): the label of the frame's
//! run (a maximal run of one value of the column inside an utterance) together with the labels
//! of the runs before and after it in the same utterance (`#` at the utterance's edges). With
//! `--control-by COLUMN` the column's own value is the type.

use std::collections::HashMap;

use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;

use crate::capture::LabelTask;
use crate::select::pool::UttIndex;

/// Code standing for an utterance edge in a type's context.
const EDGE: u32 = u32::MAX - 1;

/// The type of every frame, numbered from 0 in order of first appearance (utterance by
/// utterance, frames in time order). With `in_context`, a type is (previous run's value,
/// this run's value, next run's value) of `column` within the utterance, `#` at the edges;
/// otherwise the value itself. Unlabelled frames form runs of their own (value "unlabelled").
/// Returns the codes and the number of types.
pub fn frame_types(column: &LabelTask, idx: &UttIndex, in_context: bool) -> (Vec<u32>, usize) {
    let mut out = vec![0u32; column.codes.len()];
    let mut ids: HashMap<(u32, u32, u32), u32> = HashMap::new();
    for frames in &idx.frames {
        let mut runs: Vec<(usize, usize)> = Vec::new();
        for (k, &f) in frames.iter().enumerate() {
            match runs.last_mut() {
                Some(r) if column.codes[frames[r.0]] == column.codes[f] => r.1 = k + 1,
                _ => runs.push((k, k + 1)),
            }
        }
        let value = |r: Option<&(usize, usize)>| r.map_or(EDGE, |r| column.codes[frames[r.0]]);
        for (ri, r) in runs.iter().enumerate() {
            let key = if in_context {
                (
                    value(ri.checked_sub(1).and_then(|p| runs.get(p))),
                    value(Some(r)),
                    value(runs.get(ri + 1)),
                )
            } else {
                (EDGE, value(Some(r)), EDGE)
            };
            let next = ids.len() as u32;
            let id = *ids.entry(key).or_insert(next);
            for &f in &frames[r.0..r.1] {
                out[f] = id;
            }
        }
    }
    let n = ids.len();
    (out, n)
}

/// One random label per control group, drawn from `class_freq` (counts or weights), returned
/// per item through `group` (the control group of each item, e.g. its segment id).
pub fn control_labels(group: &[u32], class_freq: &[f64], seed: u64) -> Vec<u32> {
    let n_groups = group.iter().map(|&g| g as usize + 1).max().unwrap_or(0);
    let total: f64 = class_freq.iter().sum();
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let labels: Vec<u32> = (0..n_groups)
        .map(|_| {
            let mut u = rng.random::<f64>() * total;
            for (c, &w) in class_freq.iter().enumerate() {
                if u < w {
                    return c as u32;
                }
                u -= w;
            }
            class_freq.iter().rposition(|&w| w > 0.0).unwrap_or(0) as u32
        })
        .collect();
    group.iter().map(|&g| labels[g as usize]).collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn types_are_phones_in_context_within_utterances() {
        // Two utterances: a a b c | b c c. Runs: (#,a,b) (a,b,c) (b,c,#) | (#,b,c) (b,c,#).
        let task = LabelTask {
            name: "phone".into(),
            classes: vec!["a".into(), "b".into(), "c".into()],
            codes: vec![0, 0, 1, 2, 1, 2, 2],
        };
        let idx = UttIndex {
            frames: vec![vec![0, 1, 2, 3], vec![4, 5, 6]],
            place: vec![0, 1, 2, 3, 0, 1, 2],
        };
        let (t, n) = frame_types(&task, &idx, true);
        assert_eq!(t, vec![0, 0, 1, 2, 3, 2, 2]);
        assert_eq!(n, 4);
        let (t, n) = frame_types(&task, &idx, false);
        assert_eq!(t, vec![0, 0, 1, 2, 1, 2, 2]);
        assert_eq!(n, 3);
    }

    #[test]
    fn control_labels_follow_frequencies_and_are_constant_per_group() {
        let group: Vec<u32> = (0..20000u32).map(|i| i / 2).collect();
        let lab = control_labels(&group, &[3.0, 1.0, 0.0], 1);
        for pair in lab.chunks(2) {
            assert_eq!(pair[0], pair[1]);
        }
        let share = lab.iter().filter(|&&c| c == 0).count() as f64 / lab.len() as f64;
        assert!((share - 0.75).abs() < 0.02, "{share}");
        assert!(lab.iter().all(|&c| c != 2));
    }
}
