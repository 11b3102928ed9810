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
use crate::analysis::compare::{self, CkaRecord, CkaRow, CompareReport};
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
    let r2_half_fall = crate::analysis::probe::regress::r2_half_falls(&records);
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
            r2_half_fall,
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

/// A comparison without CKA ([`compare::run_without_cka`]) and the CKA rows of its A layers
/// ([`compare::cka_row`], one per layer of A in any order) merged into the comparison of
/// [`compare::run`]: records in (A layer, B layer) order; a cell a row left to its transpose
/// (A compared with itself) is the transposed cell with its layers swapped.
pub fn merge_cka(
    mut rep: CompareReport,
    rows: Vec<CkaRow>,
) -> Result<CompareReport, compare::CompareError> {
    let missing =
        |what: String| compare::CompareError::Internal(format!("merging CKA rows: {what}"));
    let row_of = |la: usize| {
        rows.iter()
            .find(|r| r.layer_a == la)
            .ok_or_else(|| missing(format!("no row for layer {la} of A")))
    };
    let mut cka = Vec::with_capacity(rep.layers_a.len() * rep.layers_b.len());
    for &la in &rep.layers_a {
        let row = row_of(la)?;
        for &lb in &rep.layers_b {
            let cell = |r: &CkaRow, lb: usize| r.records.iter().find(|c| c.layer_b == lb).cloned();
            let rec = match cell(row, lb) {
                Some(c) => c,
                None if row.mirrored.contains(&lb) => {
                    let t = cell(row_of(lb)?, la).ok_or_else(|| {
                        missing(format!("layer {lb} of A holds no cell for layer {la} of B"))
                    })?;
                    CkaRecord {
                        layer_a: la,
                        layer_b: lb,
                        ..t
                    }
                }
                None => {
                    return Err(missing(format!(
                        "no cell for layers {la} of A and {lb} of B"
                    )))
                }
            };
            cka.push(rec);
        }
    }
    rep.cka = cka;
    Ok(rep)
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
        // The demo's continuous columns are probed too, so where their R² fades is compared.
        assert!(!whole.summary.r2_half_fall.is_empty());
        assert!(!whole.summary.best_r2.is_empty());
        assert_eq!(
            serde_json::to_string(&merged).unwrap(),
            serde_json::to_string(&whole).unwrap()
        );
    }

    #[test]
    fn cka_row_by_row_equals_one_run() {
        // A comparison split into one CKA row per layer of A plus the rest (pairing, probe
        // deltas) serialises to the same bytes as one run, for each kernel and estimator,
        // and for a capture compared with itself (rows past the diagonal mirrored).
        let (d, cap) = small_demo();
        let early = Capture::open(&d.path().join("early"), &OpenOptions::default()).unwrap();
        let p = Progress::hidden();
        let common = CommonOptions {
            seed: 4,
            threads: 0,
            layers: None,
        };
        let base = compare::CompareOptions {
            bootstrap: 20,
            ..Default::default()
        };
        let cases = [
            (&early, &cap, base.clone()),
            (
                &cap,
                &cap,
                compare::CompareOptions {
                    probe: false,
                    ..base.clone()
                },
            ),
            (
                &early,
                &cap,
                compare::CompareOptions {
                    estimator: compare::Estimator::Minibatch,
                    batch_size: 64,
                    probe: false,
                    ..base.clone()
                },
            ),
            (
                &early,
                &cap,
                compare::CompareOptions {
                    kernel: compare::Kernel::Rbf,
                    rbf_frames: 300,
                    probe: false,
                    ..base.clone()
                },
            ),
        ];
        for (a, b, opts) in cases {
            let whole = compare::run(a, b, &opts, &common, &p, None).unwrap();
            let rest =
                compare::run_without_cka(a, b, &opts, &common, &p, compare::DeltaSource::Fit)
                    .unwrap();
            assert!(rest.cka.is_empty());
            // Rows in reverse order: the merge places them by layer.
            let rows = a
                .layers
                .iter()
                .rev()
                .map(|l| compare::cka_row(a, b, &opts, &common, l.id, &p).unwrap())
                .collect();
            let merged = merge_cka(rest, rows).unwrap();
            // The one run itself: every (A layer, B layer) in order, and for the linear
            // kernel each value as CKA computed directly on the two whole layers.
            assert_eq!(whole.cka.len(), a.layers.len() * b.layers.len());
            for (k, r) in whole.cka.iter().enumerate() {
                let (i, j) = (k / b.layers.len(), k % b.layers.len());
                assert_eq!((r.layer_a, r.layer_b), (a.layers[i].id, b.layers[j].id));
                if (opts.kernel, opts.estimator)
                    == (compare::Kernel::Linear, compare::Estimator::Full)
                {
                    let direct = compare::cka::linear_cka(
                        &a.read_layer(i).unwrap().view(),
                        &b.read_layer(j).unwrap().view(),
                    );
                    assert!(
                        (r.cka - direct).abs() < 1e-9,
                        "{k}: {} against {direct}",
                        r.cka
                    );
                }
            }
            // The files `compare` writes (records, CSV, figures) from each, byte for byte.
            let written = |r: &CompareReport| {
                let dir = tempfile::tempdir().unwrap();
                let w = crate::commands::compare::write(r, dir.path()).unwrap();
                assert!(!w.files.is_empty());
                w.files
                    .iter()
                    .map(|f| {
                        (
                            f.strip_prefix(dir.path()).unwrap().to_path_buf(),
                            std::fs::read(f).unwrap(),
                        )
                    })
                    .collect::<Vec<_>>()
            };
            let (x, y) = (written(&merged), written(&whole));
            assert_eq!(x.len(), y.len());
            for ((fx, bx), (fy, by)) in x.iter().zip(&y) {
                assert_eq!(fx, fy);
                assert!(
                    bx == by,
                    "{} differs ({:?} {:?})",
                    fx.display(),
                    opts.kernel,
                    opts.estimator
                );
            }
        }
    }

    #[test]
    fn a_row_of_a_capture_against_itself_leaves_the_lower_triangle_to_the_merge() {
        let (_d, cap) = small_demo();
        let opts = compare::CompareOptions {
            probe: false,
            ..Default::default()
        };
        let common = CommonOptions {
            seed: 4,
            threads: 0,
            layers: None,
        };
        let ids: Vec<usize> = cap.layers.iter().map(|l| l.id).collect();
        let row =
            compare::cka_row(&cap, &cap, &opts, &common, ids[2], &Progress::hidden()).unwrap();
        assert_eq!(row.mirrored, ids[..2].to_vec());
        assert_eq!(row.records.len(), ids.len() - 2);
        assert_eq!(row.records[0].cka, 1.0, "the diagonal");
        // Without its rows the merge refuses rather than leaving cells out.
        let rest = compare::run_without_cka(
            &cap,
            &cap,
            &opts,
            &common,
            &Progress::hidden(),
            compare::DeltaSource::Fit,
        )
        .unwrap();
        assert!(merge_cka(rest, vec![row]).is_err());
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
