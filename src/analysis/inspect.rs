//! `inspect`: what is in a capture — layers, frames, utterances, speakers, label tasks with
//! class counts, size on disk, an estimate of memory for a probe run, and warnings found in a
//! sampled scan (constant columns, NaN/Inf, classes too small to probe).

use crate::capture::{Capture, LabelTask, UNLABELLED};
pub use crate::records::inspect::{ClassCount, LayerInfo, NumericInfo, Summary, TaskInfo};

/// Frames read per layer by the sampled scan.
pub const SCAN_ROWS: usize = 4096;
/// Classes with fewer frames than this are flagged.
pub const MIN_CLASS_FRAMES: usize = 5;

/// Summarise a capture (reads a sample of every layer, one layer at a time).
pub fn summarise(cap: &Capture) -> Summary {
    let mut warnings = cap.notes.clone();
    let layers = (0..cap.layers.len())
        .map(|i| layer_info(cap, i, &mut warnings))
        .collect();
    let tasks = cap
        .frames
        .tasks
        .iter()
        .map(|t| task_info(cap, t, &mut warnings))
        .collect();
    let continuous = cap
        .frames
        .continuous
        .iter()
        .map(|t| {
            let (min, max, mean) = t.range_mean();
            let labelled = t.n_labelled();
            NumericInfo {
                column: t.name.clone(),
                kind: "continuous".into(),
                labelled_frames: labelled,
                missing_frames: cap.n_frames() - labelled,
                min,
                max,
                mean,
            }
        })
        .collect();
    if cap.frames.speakers.len() < 2 {
        warnings.push(
            "only one speaker: speaker-disjoint probes are impossible (use --split utterance)"
                .into(),
        );
    }
    if !cap.nonfinite_frames.is_empty() {
        warnings.push(format!(
            "{} frames with NaN/Inf were dropped (--allow-nonfinite)",
            cap.nonfinite_frames.len()
        ));
    }
    let max_dim = cap.layers.iter().map(|l| l.dim()).max().unwrap_or(0) as u64;
    let layer_f32 = cap.n_frames() as u64 * max_dim * 4;
    let notes = serde_json::to_value(&cap.config.notes).unwrap_or(serde_json::Value::Null);
    Summary {
        name: cap.name.clone(),
        path: cap.dir.display().to_string(),
        label_source: cap.label_source.clone(),
        label_files: cap.label_files,
        layout: cap.layout.clone(),
        layer_files: cap.layer_files(),
        hop_s: cap.config.hop_s,
        frames: cap.n_frames(),
        utterances: cap.frames.utterances.len(),
        speakers: cap.frames.speakers.len(),
        layers,
        tasks,
        continuous,
        bytes_on_disk: cap.bytes_on_disk(),
        // One resident layer in f32, a standardised training copy, and working space.
        probe_memory_estimate: 2 * layer_f32 + (200 << 20),
        notes,
        warnings,
    }
}

/// Layer `i` of `cap`, with non-finite frames and constant columns counted over a sample of
/// its rows (each finding also a warning).
fn layer_info(cap: &Capture, i: usize, warnings: &mut Vec<String>) -> LayerInfo {
    let l = &cap.layers[i];
    let (rows, m) = match cap.sample_layer_raw(i, SCAN_ROWS) {
        Ok(x) => x,
        Err(e) => {
            warnings.push(format!("layer {}: not scanned: {e}", l.id));
            (vec![], ndarray::Array2::zeros((0, l.dim())))
        }
    };
    let mut nonfinite = 0usize;
    let mut first_bad: Option<(usize, usize)> = None;
    for (r, row) in m.outer_iter().enumerate() {
        if let Some(c) = row.iter().position(|v| !v.is_finite()) {
            nonfinite += 1;
            first_bad.get_or_insert((rows[r], c));
        }
    }
    let mut constant = 0usize;
    if m.nrows() > 1 {
        for col in m.columns() {
            let first = col[0];
            if col
                .iter()
                .all(|&v| v == first || (v.is_nan() && first.is_nan()))
            {
                constant += 1;
            }
        }
    }
    let file = l.path().display().to_string();
    if nonfinite > 0 {
        let (fr, c) = first_bad.unwrap_or((0, 0));
        warnings.push(format!(
            "layer {}: {nonfinite} of {} sampled frames hold NaN or Inf (first: frame {fr}, column {c} in {file}); analyses will stop unless --allow-nonfinite",
            l.id,
            rows.len()
        ));
    }
    if constant > 0 {
        warnings.push(format!(
            "layer {}: {constant} of {} columns are constant over {} sampled frames (dead units carry no information)",
            l.id,
            l.dim(),
            rows.len()
        ));
    }
    LayerInfo {
        layer: l.id,
        file,
        dim: l.dim(),
        dtype: l.dtype().name().to_string(),
        layout: l.layout(),
        constant_columns: constant,
        nonfinite_frames_sampled: nonfinite,
    }
}

/// Task `t` of `cap`: class counts, its smallest and largest classes, and warnings for small
/// classes or too few of them.
fn task_info(cap: &Capture, t: &LabelTask, warnings: &mut Vec<String>) -> TaskInfo {
    let counts = t.class_counts();
    let mut order: Vec<usize> = (0..counts.len()).collect();
    order.sort_by(|&a, &b| counts[a].cmp(&counts[b]).then(a.cmp(&b)));
    let cc = |k: usize| ClassCount {
        label: t.classes[k].clone(),
        frames: counts[k],
    };
    let small: Vec<usize> = order
        .iter()
        .copied()
        .filter(|&k| counts[k] < MIN_CLASS_FRAMES)
        .collect();
    if !small.is_empty() {
        let names: Vec<String> = small
            .iter()
            .take(8)
            .map(|&k| format!("'{}' ({})", t.classes[k], counts[k]))
            .collect();
        warnings.push(format!(
            "task {}: {} classes have fewer than {MIN_CLASS_FRAMES} frames: {}{}",
            t.name,
            small.len(),
            names.join(", "),
            if small.len() > 8 { ", ..." } else { "" }
        ));
    }
    if counts.len() < 2 {
        warnings.push(format!(
            "task {}: fewer than 2 classes; it cannot be probed",
            t.name
        ));
    }
    let unl = t.codes.iter().filter(|&&c| c == UNLABELLED).count();
    TaskInfo {
        task: t.name.clone(),
        kind: "categorical".into(),
        classes: counts.len(),
        labelled_frames: cap.n_frames() - unl,
        unlabelled_frames: unl,
        smallest: order.iter().take(3).map(|&k| cc(k)).collect(),
        largest: order.iter().rev().take(3).map(|&k| cc(k)).collect(),
    }
}
