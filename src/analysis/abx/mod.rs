//! Phone ABX discriminability of each layer (the task of Schatz et al. 2013), by our
//! definition:
//!
//! - **Items**: every maximal run of frames with one label value inside an utterance;
//!   unlabelled frames end a run and belong to no item. An item's context is the pair (label
//!   of the previous item of the utterance, label of the next item), `#` at the edges.
//! - **Frame distance**: `arccos(clamp(cos, -1, 1)) / π`; a zero frame is at 1/2 from all.
//! - **Item distance**: DTW over frame distances (see [`dtw`]), final cost over path cells.
//! - **Within speaker**: for every ordered label pair (a, b), speaker s and context c, A and X
//!   (X ≠ A) from the items (a, c, s) and B from (b, c, s); a triplet scores 1 when
//!   d(A, X) < d(B, X), 1/2 on a tie, else 0. Scores are averaged over the triplets of a cell,
//!   then over contexts, speakers and label pairs (a level without triplets is skipped).
//! - **Across speaker**: A and B from speaker s, X (label a, same context) from t ≠ s;
//!   averaged over contexts, then ordered speaker pairs (s, t), then label pairs.
//! - error rate = 1 − score. At most `max_items` items per (label, context, speaker) cell
//!   take part (a seeded draw, the same for every layer; 0 keeps all).
//!
//! Each needed item pair's DTW is computed once per layer, in parallel; every value is
//! computed independently and reduced in a fixed order, so results do not depend on the
//! number of threads. Nothing here writes files or prints.

pub mod dtw;
pub mod items;

use std::collections::BTreeMap;

use ndarray::{s, Array2, ArrayView2};
use rayon::prelude::*;

use crate::capture::{Capture, CaptureError};
pub use crate::records::abx::AbxRecord;
pub use items::{AbxItems, Item, EDGE};

/// Below this many triplets in a condition the records get a note (common practice: a
/// rate from fewer than about a hundred comparisons is too coarse to compare layers).
pub const FEW_TRIPLETS: u64 = 100;

/// Options of the ABX analysis.
#[derive(Clone, Debug, PartialEq, Eq, serde::Serialize, serde::Deserialize)]
pub struct AbxOptions {
    /// Label column whose runs are the items.
    pub label: String,
    /// Most items per (label, context, speaker) cell (0: all).
    pub max_items: usize,
}

impl Default for AbxOptions {
    fn default() -> Self {
        AbxOptions {
            label: "phone".into(),
            max_items: 5,
        }
    }
}

impl AbxOptions {
    /// Reject options no capture could satisfy.
    pub fn check(&self) -> Result<(), AbxError> {
        if self.label.trim().is_empty() {
            return Err(AbxError::Options(
                "label: expected the name of a label column, found an empty name".into(),
            ));
        }
        Ok(())
    }
}

/// Errors of the ABX analysis.
#[derive(Debug, thiserror::Error)]
pub enum AbxError {
    /// Options that cannot work.
    #[error("ABX options: {0}")]
    Options(String),
    /// The label is not a column of the capture.
    #[error("label '{label}': not a label column of the capture (columns: {columns})")]
    UnknownLabel {
        /// The label asked for.
        label: String,
        /// The capture's label columns.
        columns: String,
    },
    /// No cell holds a triplet, in either condition.
    #[error("ABX on '{label}': no cell holds a triplet: {why}")]
    NoTriplet {
        /// Label column.
        label: String,
        /// Why, in words.
        why: String,
    },
    /// A frame holds NaN or Inf.
    #[error("layer {layer}, frame {frame}: expected finite values, found NaN or Inf")]
    NonFinite {
        /// Layer number.
        layer: usize,
        /// Capture frame index.
        frame: usize,
    },
    /// The layer matrix does not match the items (a caller's mistake).
    #[error("layer {layer}: expected {expected} rows (the items' frames), found {found}")]
    Rows {
        /// Layer number.
        layer: usize,
        /// Rows the items use.
        expected: usize,
        /// Rows given.
        found: usize,
    },
    /// A layer index outside the capture (a caller's mistake).
    #[error("layer index {index}: the capture has {n_layers} layers")]
    LayerIndex {
        /// Index asked for.
        index: usize,
        /// Layers in the capture.
        n_layers: usize,
    },
    /// Reading the capture failed (bad input, including NaN/Inf values).
    #[error(transparent)]
    Capture(#[from] CaptureError),
}

impl AbxError {
    /// True for errors the user fixes by changing the input or options (exit code 2).
    pub fn is_input(&self) -> bool {
        !matches!(self, AbxError::Rows { .. } | AbxError::LayerIndex { .. })
    }
}

/// ABX results of the selected layers.
#[derive(Clone, Debug, PartialEq)]
pub struct AbxResult {
    /// One record per layer and condition (within before across, layers in the order asked).
    pub records: Vec<AbxRecord>,
    /// Things the reader should know (sampling, missing conditions, zero frames).
    pub notes: Vec<String>,
    /// Items found before sampling.
    pub n_items: usize,
    /// Items kept by the per-cell sample.
    pub n_items_used: usize,
    /// Item pairs whose DTW distance each layer computed.
    pub n_item_pairs: usize,
    /// Speakers with kept items.
    pub n_speakers: usize,
}

/// One layer's ABX records and the number of zero frames among the items' frames.
#[derive(Clone, Debug, PartialEq)]
pub struct LayerAbx {
    /// Within and across records (a condition without triplets has none).
    pub records: Vec<AbxRecord>,
    /// Frames that are zero vectors (distance 1/2 to every frame).
    pub zero_frames: usize,
}

/// ABX error rates of one layer. `x` holds the frames of [`AbxItems::rows`], in that order
/// (any feature dimension); `layer` is the number put in the records.
pub fn layer_records(
    items: &AbxItems,
    x: ArrayView2<f32>,
    layer: usize,
) -> Result<LayerAbx, AbxError> {
    layer_records_owned(items, x.to_owned(), layer)
}

/// [`layer_records`] on frames the caller gives up: they are scaled to unit length in place
/// (no second copy of the layer's rows).
pub fn layer_records_owned(
    items: &AbxItems,
    x: Array2<f32>,
    layer: usize,
) -> Result<LayerAbx, AbxError> {
    let rows = items.rows();
    if x.nrows() != rows.len() {
        return Err(AbxError::Rows {
            layer,
            expected: rows.len(),
            found: x.nrows(),
        });
    }
    if let Some(r) = x
        .outer_iter()
        .position(|row| row.iter().any(|v| !v.is_finite()))
    {
        return Err(AbxError::NonFinite {
            layer,
            frame: rows[r],
        });
    }
    let (xn, zero) = unit_rows(x);
    let zero_frames = zero.iter().filter(|&&z| z).count();
    let dist = pair_distances(items, &xn, &zero);
    let (within, across) = cell_scores(items, &dist);
    let mut records = Vec::new();
    for (condition, acc, n) in [
        ("within", within.0, within.1),
        ("across", across.0, across.1),
    ] {
        if acc.is_empty() {
            continue;
        }
        let mut sum = 0.0;
        for by_speakers in acc.values() {
            let s: f64 = by_speakers.values().map(|&(t, c)| t / c as f64).sum();
            sum += s / by_speakers.len() as f64;
        }
        let score = sum / acc.len() as f64;
        records.push(AbxRecord {
            layer,
            label: items.label.clone(),
            condition: condition.into(),
            error_rate: 1.0 - score,
            n_pairs: acc.len(),
            n_triplets: n,
        });
    }
    Ok(LayerAbx {
        records,
        zero_frames,
    })
}

/// Frames scaled to unit length, and which frames are all zero (left as they are).
fn unit_rows(mut xn: Array2<f32>) -> (Array2<f32>, Vec<bool>) {
    let mut zero = vec![false; xn.nrows()];
    for (mut row, z) in xn.outer_iter_mut().zip(zero.iter_mut()) {
        let norm = row
            .iter()
            .map(|&v| (v as f64) * (v as f64))
            .sum::<f64>()
            .sqrt();
        if norm == 0.0 {
            *z = true;
        } else {
            row.mapv_inplace(|v| (v as f64 / norm) as f32);
        }
    }
    (xn, zero)
}

/// DTW distance of every indexed item pair (i < j), both ways round: (d(i, j), d(j, i)).
fn pair_distances(items: &AbxItems, xn: &Array2<f32>, zero: &[bool]) -> Vec<(f64, f64)> {
    let off = &items.offsets;
    items
        .pairs
        .par_iter()
        .map(|&(i, j)| {
            let (a0, a1) = (off[i as usize], off[i as usize + 1]);
            let (b0, b1) = (off[j as usize], off[j as usize + 1]);
            let c = dtw::frame_costs(
                xn.slice(s![a0..a1, ..]),
                &zero[a0..a1],
                xn.slice(s![b0..b1, ..]),
                &zero[b0..b1],
            );
            let r = dtw::dtw(c.view());
            (r.distance(), r.distance_transposed())
        })
        .collect()
}

/// (a, b) -> (s, t) -> (sum of cell means, cells); t = s within speaker.
type Acc = BTreeMap<(u32, u32), BTreeMap<(u32, u32), (f64, usize)>>;

/// Triplet scores per cell, gathered within and across speaker, each with its triplet count.
fn cell_scores(items: &AbxItems, dist: &[(f64, f64)]) -> ((Acc, u64), (Acc, u64)) {
    // d(p, x): DTW with p's frames as rows and x's as columns
    let d = |p: u32, x: u32| -> f64 {
        let k = (p.min(x), p.max(x));
        let v = dist[items.pairs.binary_search(&k).expect("pair indexed")];
        if p < x {
            v.0
        } else {
            v.1
        }
    };
    let (mut within, mut across): (Acc, Acc) = (BTreeMap::new(), BTreeMap::new());
    let (mut n_within, mut n_across) = (0u64, 0u64);
    items.for_each_cell_pair(|key, cell_a, cell_b, cell_x| {
        let (cell_x, acc, count) = match cell_x {
            None => (cell_a, &mut within, &mut n_within),
            Some(cx) => (cx, &mut across, &mut n_across),
        };
        let (mut half_points, mut n) = (0u64, 0u64);
        for &a in cell_a {
            for &x in cell_x {
                if x == a {
                    continue;
                }
                let dax = d(a, x);
                for &b in cell_b {
                    let dbx = d(b, x);
                    half_points += if dax < dbx {
                        2
                    } else if dax == dbx {
                        1
                    } else {
                        0
                    };
                    n += 1;
                }
            }
        }
        if n > 0 {
            let e = acc
                .entry((key.a, key.b))
                .or_default()
                .entry((key.s, key.t))
                .or_insert((0.0, 0));
            e.0 += half_points as f64 / (2 * n) as f64;
            e.1 += 1;
            *count += n;
        }
    });
    ((within, n_within), (across, n_across))
}

/// Notes on the item structure, or the error when no cell holds a triplet.
fn structure_notes(items: &AbxItems, max_items: usize, seed: u64) -> Result<Vec<String>, AbxError> {
    let label = &items.label;
    if items.n_within == 0 && items.n_across == 0 {
        let per_utt = {
            let mut c: BTreeMap<u32, usize> = BTreeMap::new();
            items
                .items
                .iter()
                .for_each(|i| *c.entry(i.utterance).or_default() += 1);
            c.values().copied().max().unwrap_or(0)
        };
        let why = if items.items.is_empty() {
            format!("no frame carries a '{label}' label")
        } else if items.n_labels() < 2 {
            format!("every item carries the same '{label}' value")
        } else if per_utt < 2 {
            format!("each utterance holds a single '{label}' run, so items of different values never share a speaker and context")
        } else {
            format!("no speaker has two items of different '{label}' values in the same context (previous and next '{label}')")
        };
        return Err(AbxError::NoTriplet {
            label: label.clone(),
            why,
        });
    }
    let mut notes = Vec::new();
    if items.n_capped_cells > 0 {
        notes.push(format!(
            "max_items {max_items}: {} (label, context, speaker) cells held more items; {max_items} were drawn from each (seed {seed})",
            items.n_capped_cells
        ));
    }
    let n_speakers = items.n_speakers();
    if n_speakers < 2 {
        notes.push(format!(
            "across-speaker ABX needs items from at least 2 speakers; found {n_speakers}: only within-speaker error rates"
        ));
    } else if items.n_across == 0 {
        notes.push(format!(
            "no two speakers share a ('{label}', context) cell with another '{label}' value in that context: no across-speaker error rate"
        ));
    }
    if items.n_within == 0 {
        notes.push(format!(
            "no speaker has two items of one '{label}' value and one of another in the same context: no within-speaker error rate"
        ));
    }
    Ok(notes)
}

/// ABX error rates of the layers at indices `layers` (indices into `cap.layers`, as
/// [`Capture::select_layers`] returns them). Reads one layer at a time, only the frames the
/// kept items use.
///
/// The same as [`prepare`], [`score_layer`] for each layer and [`add_layer_notes`], which is
/// how a run split into one unit per layer computes it.
pub fn run(
    cap: &Capture,
    opts: &AbxOptions,
    seed: u64,
    layers: &[usize],
) -> Result<AbxResult, AbxError> {
    let (items, mut notes) = prepare(cap, opts, seed, layers)?;
    let mut records = Vec::new();
    for &li in layers {
        let (r, note) = score_layer(cap, &items, li)?;
        records.extend(r);
        notes.extend(note);
    }
    let mut result = AbxResult {
        records,
        notes,
        n_items: items.n_found,
        n_items_used: items.items.len(),
        n_item_pairs: items.n_item_pairs(),
        n_speakers: items.n_speakers(),
    };
    add_layer_notes(&mut result);
    Ok(result)
}

/// Check the options and layer indices, find and sample the items (the same for every
/// layer), and the notes on their structure.
pub fn prepare(
    cap: &Capture,
    opts: &AbxOptions,
    seed: u64,
    layers: &[usize],
) -> Result<(AbxItems, Vec<String>), AbxError> {
    opts.check()?;
    if let Some(&index) = layers.iter().find(|&&i| i >= cap.layers.len()) {
        return Err(AbxError::LayerIndex {
            index,
            n_layers: cap.layers.len(),
        });
    }
    let items = AbxItems::new(&cap.frames, &opts.label, opts.max_items, seed)?;
    let notes = structure_notes(&items, opts.max_items, seed)?;
    Ok((items, notes))
}

/// The records of the layer at index `li`, and a note when some of its frames are zero
/// vectors.
pub fn score_layer(
    cap: &Capture,
    items: &AbxItems,
    li: usize,
) -> Result<(Vec<AbxRecord>, Option<String>), AbxError> {
    let id = cap.layers[li].id;
    let x = cap.read_layer_rows(li, items.rows())?;
    let out = layer_records_owned(items, x, id)?;
    let note = (out.zero_frames > 0).then(|| {
        format!(
            "layer {id}: {} frames are zero vectors; their distance to every frame is taken as 1/2",
            out.zero_frames
        )
    });
    Ok((out.records, note))
}

/// The notes that read every layer's records at once (conditions resting on few triplets).
pub fn add_layer_notes(result: &mut AbxResult) {
    for cond in ["within", "across"] {
        let fewest = result
            .records
            .iter()
            .filter(|r| r.condition == cond)
            .map(|r| r.n_triplets)
            .min();
        if let Some(n) = fewest.filter(|&n| n < FEW_TRIPLETS) {
            result.notes.push(format!(
                "{cond}-speaker error rests on as few as {n} triplets per layer: a few triplets more or less move it by a lot (items in the same context from one talker are rare here)"
            ));
        }
    }
}

#[cfg(test)]
mod tests;
