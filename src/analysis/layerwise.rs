//! Results of analyses run one layer at a time, merged into the result of one run over every
//! layer. A run split into units (one per capture and layer, see `voxstrata batch`) and a
//! run on one machine both go through these merges, so their records are the same.
//!
//! The probe and ABX draw every random choice from the run's seed and the task, never from the
//! layer or its position (see [`crate::analysis::seed`]), so a layer scored alone gives the
//! records it gives among the others; what reads several layers at once (each task's best
//! layer and its confusion matrix, where speaker accuracy falls half way, the notes on few
//! triplets) is computed here, from the merged records.

use crate::analysis::abx::{self, AbxRecord, AbxResult};
use crate::analysis::probe::{BestLayer, ProbeError, ProbeRecord, ProbeReport, ProbeSummary};

/// One layer's probe reports (in layer order) merged into the report of one run over all of
/// them: records in layer order, each task's best layer (the first with the highest
/// accuracy) with its confusion matrix, the speaker half-fall, the layers in the options and
/// every distinct note once, in order.
pub fn merge_probe(parts: Vec<ProbeReport>) -> Result<ProbeReport, ProbeError> {
    let first = parts
        .first()
        .ok_or_else(|| ProbeError::Internal("no probe results to merge".into()))?;
    let capture = first.capture.clone();
    let tasks = first.tasks.clone();
    let mut options = first.options.clone();
    let mut layers = Vec::new();
    let mut records: Vec<ProbeRecord> = Vec::new();
    let mut notes: Vec<String> = Vec::new();
    for p in &parts {
        if let Some(l) = p.options.get("layers").and_then(|v| v.as_array()) {
            layers.extend(l.iter().cloned());
        }
        records.extend(p.records.iter().cloned());
        for n in &p.notes {
            if !notes.contains(n) {
                notes.push(n.clone());
            }
        }
    }
    if let Some(o) = options.as_object_mut() {
        o.insert("layers".into(), layers.into());
    }
    let mut confusion = Vec::new();
    let mut best = Vec::new();
    for t in tasks.iter().filter(|t| t.kind != "continuous") {
        let Some(br) = best_record(&records, &t.task) else {
            continue;
        };
        let c = parts
            .iter()
            .flat_map(|p| &p.confusion)
            .find(|c| c.task == t.task && c.layer == br.layer)
            .ok_or_else(|| {
                ProbeError::Internal(format!(
                    "no confusion matrix for task {} at layer {}",
                    t.task, br.layer
                ))
            })?;
        confusion.push(c.clone());
        best.push(BestLayer {
            task: t.task.clone(),
            layer: br.layer,
            accuracy: br.accuracy,
            ci_low: br.ci_low,
            ci_high: br.ci_high,
        });
    }
    let (speaker_below_half_layer, speaker_half_level) =
        crate::analysis::probe::speaker_fall(&records);
    let best_r2 = crate::analysis::probe::regress::best_fits(&records, &tasks);
    Ok(ProbeReport {
        capture,
        options,
        records,
        tasks,
        confusion,
        summary: ProbeSummary {
            best_r2,
            best,
            speaker_below_half_layer,
            speaker_half_level,
        },
        notes,
        predictions: parts
            .iter()
            .flat_map(|p| p.predictions.iter().cloned())
            .collect(),
    })
}

/// The task's first record with the highest accuracy (a NaN accuracy is passed over by any
/// later record).
fn best_record<'a>(records: &'a [ProbeRecord], task: &str) -> Option<&'a ProbeRecord> {
    records
        .iter()
        .filter(|r| r.task == task)
        .fold(None, |acc: Option<&ProbeRecord>, r| match acc {
            Some(a) if a.accuracy >= r.accuracy => Some(a),
            _ => Some(r),
        })
}

/// What one layer's ABX unit computed: the notes on the items (the same for every layer),
/// the layer's records and its own note.
#[derive(Clone, Debug, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct AbxLayer {
    /// Notes on the items' structure ([`abx::prepare`]).
    pub item_notes: Vec<String>,
    /// The layer's records.
    pub records: Vec<AbxRecord>,
    /// The layer's note (zero frames), if any.
    pub note: Option<String>,
    /// Items found before sampling.
    pub n_items: usize,
    /// Items kept.
    pub n_items_used: usize,
    /// Item pairs per layer.
    pub n_item_pairs: usize,
    /// Speakers with kept items.
    pub n_speakers: usize,
}

/// Score one layer (index `li` into `cap.layers`) as [`abx::run`] scores it among others.
pub fn abx_layer(
    cap: &crate::capture::Capture,
    opts: &abx::AbxOptions,
    seed: u64,
    li: usize,
) -> Result<AbxLayer, abx::AbxError> {
    let (items, item_notes) = abx::prepare(cap, opts, seed, &[li])?;
    let (records, note) = abx::score_layer(cap, &items, li)?;
    Ok(AbxLayer {
        item_notes,
        records,
        note,
        n_items: items.n_found,
        n_items_used: items.items.len(),
        n_item_pairs: items.n_item_pairs(),
        n_speakers: items.n_speakers(),
    })
}

/// Layers' ABX results (in layer order) merged into the result of [`abx::run`] over all of
/// them; None without any layer.
pub fn merge_abx(parts: Vec<AbxLayer>) -> Option<AbxResult> {
    let first = parts.first()?;
    let mut result = AbxResult {
        records: Vec::new(),
        notes: first.item_notes.clone(),
        n_items: first.n_items,
        n_items_used: first.n_items_used,
        n_item_pairs: first.n_item_pairs,
        n_speakers: first.n_speakers,
    };
    for p in parts {
        result.records.extend(p.records);
        result.notes.extend(p.note);
    }
    abx::add_layer_notes(&mut result);
    Some(result)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::capture::{Capture, LayerSelection, OpenOptions};
    use crate::{CommonOptions, Progress};

    fn small_demo() -> (tempfile::TempDir, Capture) {
        let d = tempfile::tempdir().unwrap();
        let opts = crate::demo::DemoOptions {
            seed: 3,
            size: crate::demo::DemoSize::Small,
        };
        let s = crate::demo::build(&opts, &Progress::hidden()).unwrap();
        crate::commands::demo::write(&s, d.path()).unwrap();
        let cap = Capture::open(&d.path().join("final"), &OpenOptions::default()).unwrap();
        (d, cap)
    }

    fn one_layer(seed: u64, id: usize) -> CommonOptions {
        CommonOptions {
            seed,
            threads: 0,
            layers: Some(LayerSelection(vec![id])),
        }
    }

    #[test]
    fn probe_layer_by_layer_equals_one_run() {
        // The claim the split run rests on: merged one-layer runs serialise to the same bytes
        // as the run over every layer.
        let (_d, cap) = small_demo();
        let opts = crate::analysis::probe::ProbeOptions {
            bootstrap: 50,
            ..Default::default()
        };
        let all = CommonOptions {
            seed: 11,
            threads: 0,
            layers: None,
        };
        let p = Progress::hidden();
        let whole = crate::analysis::probe::run(&cap, &opts, &all, &p).unwrap();
        let parts = cap
            .layers
            .iter()
            .map(|l| crate::analysis::probe::run(&cap, &opts, &one_layer(11, l.id), &p).unwrap())
            .collect();
        let merged = merge_probe(parts).unwrap();
        assert!(cap.layers.len() > 2);
        assert_eq!(
            serde_json::to_string(&merged).unwrap(),
            serde_json::to_string(&whole).unwrap()
        );
    }

    #[test]
    fn abx_layer_by_layer_equals_one_run() {
        let (_d, cap) = small_demo();
        let opts = abx::AbxOptions::default();
        let all: Vec<usize> = (0..cap.layers.len()).collect();
        let whole = abx::run(&cap, &opts, 5, &all).unwrap();
        let parts = all
            .iter()
            .map(|&li| abx_layer(&cap, &opts, 5, li).unwrap())
            .collect();
        assert_eq!(merge_abx(parts).unwrap(), whole);
        assert!(!whole.records.is_empty());
    }
}
