//! Layer-by-layer comparison of two captures of the same frames (two checkpoints of a model,
//! or two models): centred kernel alignment (CKA; Kornblith et al. 2019) between every layer
//! of A and every layer of B, and probe deltas (the same probe on A and on B with one split,
//! McNemar's test and a paired speaker bootstrap on the difference).
//!
//! Frames are paired row by row (the label tables must agree), or by (utterance, frame index
//! within the utterance) with [`MatchBy::Utterance`]. Probe deltas use frame-level items, the
//! default split of the probe stage (speaker-disjoint; utterance-disjoint with every speaker on
//! both sides for the speaker task), the same split and seed for A and B, McNemar's test
//! (exact binomial below 25 discordant pairs, else chi-square without continuity correction)
//! and a paired cluster bootstrap over test speakers (test utterances for the speaker task).
//!
//! Linear CKA streams layers: one A layer and one B layer are resident at a time, and
//! everything is computed in feature space (p × q products), never with n × n Gram matrices.

pub mod cka;
pub mod delta;
mod pair;

use ndarray::Array2;
use rand_chacha::rand_core::SeedableRng;
use rand_chacha::ChaCha8Rng;
use serde::Serialize;

use crate::capture::{Capture, CaptureError, FrameTable, LabelTask, UNLABELLED};
use crate::records::CaptureRef;
use crate::{CommonOptions, Progress};

pub use crate::records::compare::{CkaRecord, CompareReport, Estimator, Kernel, MatchBy, Pairing};
pub use delta::{FitPredict, ProbeDelta};
pub use pair::{pair_frames, FrameMismatch};

use crate::analysis::seed::mix;

/// Errors of the compare stage.
#[derive(Debug, thiserror::Error)]
pub enum CompareError {
    /// The two captures do not hold the same frames (exit code 2).
    #[error("{}: frame {}, {}: expected {} (as in {}), found {}", .0.path_b, .0.row, .0.field, .0.expected, .0.path_a, .0.found)]
    FrameMismatch(Box<FrameMismatch>),
    /// Options that do not fit the data (exit code 2).
    #[error("{0}")]
    Input(String),
    /// A capture could not be read (exit code 2).
    #[error(transparent)]
    Capture(#[from] CaptureError),
    /// A broken invariant inside the comparison (exit code 1).
    #[error("internal error: {0}")]
    Internal(String),
}

/// Options of `voxstrata compare`.
#[derive(Clone, Debug, Serialize)]
pub struct CompareOptions {
    /// How frames are paired.
    pub match_by: MatchBy,
    /// Use at most this many paired frames (seeded uniform sample).
    pub max_frames: Option<usize>,
    /// CKA kernel.
    pub kernel: Kernel,
    /// HSIC estimator.
    pub estimator: Estimator,
    /// Minibatch size for [`Estimator::Minibatch`].
    pub batch_size: usize,
    /// Frames used by RBF CKA when `max_frames` is not given (n × n matrices).
    pub rbf_frames: usize,
    /// Compute probe deltas.
    pub probe: bool,
    /// Label tasks for probe deltas (empty: `phone` if present, and `speaker`).
    pub tasks: Vec<String>,
    /// Share of groups (speakers; utterances for the speaker task) held out for testing.
    pub test_fraction: f64,
    /// Bootstrap resamples for the probe-delta intervals.
    pub bootstrap: usize,
}

impl CompareOptions {
    /// Refuse settings that cannot work (exit code 2), before any work.
    pub fn check(&self) -> Result<(), CompareError> {
        let bad = |m: String| Err(CompareError::Input(m));
        if self.kernel == Kernel::Rbf && self.estimator == Estimator::Minibatch {
            return bad("--hsic minibatch works with the linear kernel only (RBF CKA already uses a subsample)".into());
        }
        if self.estimator == Estimator::Minibatch && self.batch_size < 4 {
            return bad(format!(
                "--batch-size: expected at least 4 frames (the unbiased HSIC needs n ≥ 4), found {}",
                self.batch_size
            ));
        }
        if self.max_frames == Some(0) {
            return bad("--max-frames: expected at least 1, found 0".into());
        }
        if !(self.test_fraction > 0.0 && self.test_fraction < 1.0) {
            return bad(format!(
                "test fraction: expected a share between 0 and 1, found {}",
                self.test_fraction
            ));
        }
        if self.probe && self.bootstrap == 0 {
            return bad("--bootstrap: expected at least 1 resample, found 0".into());
        }
        Ok(())
    }
}

impl Default for CompareOptions {
    fn default() -> Self {
        CompareOptions {
            match_by: MatchBy::Row,
            max_frames: None,
            kernel: Kernel::Linear,
            estimator: Estimator::Full,
            batch_size: 512,
            rbf_frames: 2000,
            probe: true,
            tasks: Vec::new(),
            test_fraction: 0.25,
            bootstrap: 1000,
        }
    }
}

/// Largest subsample RBF CKA accepts (its n × n matrices grow quadratically).
pub const RBF_MAX_FRAMES: usize = 10_000;

/// Reads one layer's rows for the pairs in use: the whole file when the rows are 0..n.
struct RowReader<'a> {
    cap: &'a Capture,
    rows: Vec<usize>,
    whole: bool,
}

impl<'a> RowReader<'a> {
    fn new(cap: &'a Capture, rows: Vec<usize>) -> Self {
        let whole = rows.len() == cap.n_frames() && rows.iter().enumerate().all(|(i, &r)| i == r);
        RowReader { cap, rows, whole }
    }

    fn read(&self, i: usize) -> Result<Array2<f32>, CaptureError> {
        if self.whole {
            self.cap.read_layer(i)
        } else {
            self.cap.read_layer_rows(i, &self.rows)
        }
    }
}

fn same_capture(a: &Capture, b: &Capture) -> bool {
    match (a.dir.canonicalize(), b.dir.canonicalize()) {
        (Ok(x), Ok(y)) => x == y,
        _ => false,
    }
}

/// Compare captures `a` and `b`: pair frames, compute CKA between every selected layer of A
/// and every selected layer of B, then (unless `opts.probe` is off) probe deltas on every
/// layer number present in both, with the probe trainer of [`crate::analysis::probe`] (see [`delta`]).
pub fn run(
    a: &Capture,
    b: &Capture,
    opts: &CompareOptions,
    common: &CommonOptions,
    progress: &Progress,
) -> Result<CompareReport, CompareError> {
    opts.check()?;
    let sel_a = a.select_layers(common.layers.as_ref())?;
    let sel_b = b.select_layers(common.layers.as_ref())?;
    let mut pairing = pair_frames(a, b, opts.match_by)?;
    let keep = crate::select::sample::uniform_sorted(
        pairing.paired,
        cka_limit(opts)?.unwrap_or(usize::MAX),
        common.seed ^ 0xc0a1_0001,
    );
    pairing.used = keep.len();
    if pairing.used < 4 && opts.estimator == Estimator::Minibatch || pairing.used < 2 {
        return Err(CompareError::Input(format!(
            "only {} paired frames: too few to compare",
            pairing.used
        )));
    }
    let rows_a: Vec<usize> = keep.iter().map(|&k| pairing.rows_a[k]).collect();
    let rows_b: Vec<usize> = keep.iter().map(|&k| pairing.rows_b[k]).collect();
    let layers = LayerPair {
        a,
        b,
        sel_a: &sel_a,
        sel_b: &sel_b,
    };
    let mat = cka_matrix(&layers, rows_a, rows_b, opts, common.seed, progress)?;
    let ids_a: Vec<usize> = sel_a.iter().map(|&i| a.layers[i].id).collect();
    let ids_b: Vec<usize> = sel_b.iter().map(|&i| b.layers[i].id).collect();
    let cka = cka_records(&ids_a, &ids_b, &mat, opts, pairing.used);
    let mut notes = Vec::new();
    if pairing.dropped_a + pairing.dropped_b > 0 {
        notes.push(format!(
            "{} frames paired by utterance; {} frames of A and {} of B had no partner and were left out",
            pairing.paired, pairing.dropped_a, pairing.dropped_b
        ));
    }
    let probe_delta = if opts.probe {
        all_probe_deltas(&layers, &pairing, opts, common, progress, &mut notes)?
    } else {
        Vec::new()
    };
    let options = serde_json::to_value(opts).map_err(|e| CompareError::Internal(e.to_string()))?;
    Ok(CompareReport {
        captures: vec![capture_ref(a), capture_ref(b)],
        layers_a: ids_a,
        layers_b: ids_b,
        pairing,
        cka,
        probe_delta,
        notes,
        options,
        kernel: opts.kernel,
        estimator: opts.estimator,
    })
}

fn capture_ref(c: &Capture) -> CaptureRef {
    CaptureRef {
        name: c.name.clone(),
        path: c.dir.display().to_string(),
    }
}

/// The two captures and the layers selected in each (indices).
struct LayerPair<'a> {
    a: &'a Capture,
    b: &'a Capture,
    sel_a: &'a [usize],
    sel_b: &'a [usize],
}

/// Most paired frames CKA uses: `--max-frames` (none: all) for the linear kernel; for RBF
/// `--max-frames` or the RBF default, refused above [`RBF_MAX_FRAMES`].
fn cka_limit(opts: &CompareOptions) -> Result<Option<usize>, CompareError> {
    match opts.kernel {
        Kernel::Linear => Ok(opts.max_frames),
        Kernel::Rbf => {
            let k = opts.max_frames.unwrap_or(opts.rbf_frames);
            if k > RBF_MAX_FRAMES {
                return Err(CompareError::Input(format!(
                    "--max-frames with --kernel rbf: expected at most {RBF_MAX_FRAMES} (n × n kernel matrices), found {k}"
                )));
            }
            Ok(Some(k))
        }
    }
}

/// CKA between every selected layer of A (rows) and of B (columns) on the paired rows in use,
/// with the kernel and estimator of `opts`.
fn cka_matrix(
    l: &LayerPair,
    rows_a: Vec<usize>,
    rows_b: Vec<usize>,
    opts: &CompareOptions,
    seed: u64,
    progress: &Progress,
) -> Result<Array2<f64>, CaptureError> {
    let (a, b, sel_a, sel_b) = (l.a, l.b, l.sel_a, l.sel_b);
    match (opts.kernel, opts.estimator) {
        (Kernel::Linear, Estimator::Full) => {
            let symmetric = same_capture(a, b) && rows_a == rows_b && sel_a == sel_b;
            linear_matrix(
                a,
                b,
                sel_a,
                sel_b,
                RowReader::new(a, rows_a),
                RowReader::new(b, rows_b),
                symmetric,
                progress,
            )
        }
        (Kernel::Linear, Estimator::Minibatch) => {
            // Shuffle the pairs once (seeded) so each batch mixes utterances and speakers.
            let mut order: Vec<usize> = (0..rows_a.len()).collect();
            let mut rng = ChaCha8Rng::seed_from_u64(seed ^ 0xc0a1_0002);
            rand::seq::SliceRandom::shuffle(order.as_mut_slice(), &mut rng);
            let ra: Vec<usize> = order.iter().map(|&k| rows_a[k]).collect();
            let rb: Vec<usize> = order.iter().map(|&k| rows_b[k]).collect();
            minibatch_matrix(a, b, sel_a, sel_b, &ra, &rb, opts.batch_size, progress)
        }
        (Kernel::Rbf, _) => rbf_matrix(a, b, sel_a, sel_b, &rows_a, &rows_b, progress),
    }
}

/// One record per (A layer, B layer) of the matrix, A's layers outermost.
fn cka_records(
    ids_a: &[usize],
    ids_b: &[usize],
    mat: &Array2<f64>,
    opts: &CompareOptions,
    n_frames: usize,
) -> Vec<CkaRecord> {
    let mut cka = Vec::with_capacity(ids_a.len() * ids_b.len());
    for (i, &la) in ids_a.iter().enumerate() {
        for (j, &lb) in ids_b.iter().enumerate() {
            cka.push(CkaRecord {
                layer_a: la,
                layer_b: lb,
                cka: mat[[i, j]],
                kernel: opts.kernel,
                estimator: opts.estimator,
                n_frames,
            });
        }
    }
    cka
}

/// Probe deltas on every layer number selected in both captures, on all paired frames or the
/// `--max-frames` sample (not the RBF subsample).
fn all_probe_deltas(
    l: &LayerPair,
    pairing: &Pairing,
    opts: &CompareOptions,
    common: &CommonOptions,
    progress: &Progress,
    notes: &mut Vec<String>,
) -> Result<Vec<ProbeDelta>, CompareError> {
    let (a, b) = (l.a, l.b);
    let shared: Vec<(usize, usize)> = l
        .sel_a
        .iter()
        .filter_map(|&ia| {
            b.layer_index(a.layers[ia].id)
                .filter(|ib| l.sel_b.contains(ib))
                .map(|ib| (ia, ib))
        })
        .collect();
    let keep = crate::select::sample::uniform_sorted(
        pairing.paired,
        opts.max_frames.unwrap_or(usize::MAX),
        common.seed ^ 0xc0a1_0001,
    );
    let ra: Vec<usize> = keep.iter().map(|&k| pairing.rows_a[k]).collect();
    let rb: Vec<usize> = keep.iter().map(|&k| pairing.rows_b[k]).collect();
    probe_deltas(a, b, &shared, &ra, &rb, opts, common, progress, notes)
}

/// Linear CKA matrix, streaming: for each A layer (read once), loop over B layers. B's Gram
/// norms are computed on the first pass and cached; with `symmetric` (A = B) only the upper
/// triangle is computed and each layer is read once per row of the triangle.
#[allow(clippy::too_many_arguments)]
fn linear_matrix(
    a: &Capture,
    b: &Capture,
    sel_a: &[usize],
    sel_b: &[usize],
    ra: RowReader,
    rb: RowReader,
    symmetric: bool,
    progress: &Progress,
) -> Result<Array2<f64>, CaptureError> {
    let (na, nb) = (sel_a.len(), sel_b.len());
    let mut out = Array2::<f64>::zeros((na, nb));
    let step = progress.step("linear CKA", (na * nb) as u64);
    let mut norm_b: Vec<Option<f64>> = vec![None; nb];
    let _ = (a, b);
    for (i, &la) in sel_a.iter().enumerate() {
        let mut x = ra.read(la)?;
        cka::centre(&mut x);
        let norm_x = cka::gram_norm(&x.view());
        if symmetric {
            norm_b[i] = Some(norm_x);
        }
        for (j, &lb) in sel_b.iter().enumerate() {
            if symmetric && j < i {
                out[[i, j]] = out[[j, i]];
                step.inc(1);
                continue;
            }
            let v = if symmetric && j == i {
                if norm_x > 0.0 {
                    1.0
                } else {
                    0.0
                }
            } else {
                let mut y = rb.read(lb)?;
                cka::centre(&mut y);
                let ny = match norm_b[j] {
                    Some(v) => v,
                    None => {
                        let v = cka::gram_norm(&y.view());
                        norm_b[j] = Some(v);
                        v
                    }
                };
                cka::linear_from_parts(cka::cross2(&x.view(), &y.view()), norm_x, ny)
            };
            out[[i, j]] = v;
            step.inc(1);
        }
    }
    Ok(out)
}

/// Minibatch linear CKA: rows are already shuffled; batches are consecutive runs of
/// `batch` rows (a last run shorter than 4 is left out). Per A layer the batch Gram matrices
/// are kept (n · batch values); B layers are streamed.
#[allow(clippy::too_many_arguments)]
fn minibatch_matrix(
    a: &Capture,
    b: &Capture,
    sel_a: &[usize],
    sel_b: &[usize],
    rows_a: &[usize],
    rows_b: &[usize],
    batch: usize,
    progress: &Progress,
) -> Result<Array2<f64>, CaptureError> {
    let n = rows_a.len();
    let bounds: Vec<(usize, usize)> = (0..n)
        .step_by(batch)
        .map(|lo| (lo, (lo + batch).min(n)))
        .filter(|(lo, hi)| hi - lo >= 4)
        .collect();
    let grams = |x: &Array2<f32>| -> Vec<Array2<f64>> {
        use rayon::prelude::*;
        bounds
            .par_iter()
            .map(|&(lo, hi)| cka::linear_gram(&x.slice(ndarray::s![lo..hi, ..])))
            .collect()
    };
    let (na, nb) = (sel_a.len(), sel_b.len());
    let mut out = Array2::<f64>::zeros((na, nb));
    let step = progress.step("minibatch CKA", (na * nb) as u64);
    let mut self_b: Vec<Option<f64>> = vec![None; nb];
    for (i, &la) in sel_a.iter().enumerate() {
        let ka = grams(&a.read_layer_rows(la, rows_a)?);
        let kk: f64 = ka.iter().map(|k| cka::hsic_unbiased(k, k)).sum();
        for (j, &lb) in sel_b.iter().enumerate() {
            let lbm = grams(&b.read_layer_rows(lb, rows_b)?);
            let ll = *self_b[j]
                .get_or_insert_with(|| lbm.iter().map(|l| cka::hsic_unbiased(l, l)).sum());
            let kl: f64 = ka
                .iter()
                .zip(&lbm)
                .map(|(k, l)| cka::hsic_unbiased(k, l))
                .sum();
            out[[i, j]] = cka::MinibatchSums { kl, kk, ll }.cka();
            step.inc(1);
        }
    }
    Ok(out)
}

/// RBF CKA on the subsample: B's unit-norm centred kernels are cached (f32, n² each), each A
/// layer's kernel is built once.
fn rbf_matrix(
    a: &Capture,
    b: &Capture,
    sel_a: &[usize],
    sel_b: &[usize],
    rows_a: &[usize],
    rows_b: &[usize],
    progress: &Progress,
) -> Result<Array2<f64>, CaptureError> {
    let (na, nb) = (sel_a.len(), sel_b.len());
    let step = progress.step("RBF CKA", (na + nb) as u64);
    let mut kb = Vec::with_capacity(nb);
    for &lb in sel_b {
        let (k, _) = cka::rbf_unit_gram(&b.read_layer_rows(lb, rows_b)?.view());
        kb.push(k.mapv(|v| v as f32));
        step.inc(1);
    }
    let mut out = Array2::<f64>::zeros((na, nb));
    for (i, &la) in sel_a.iter().enumerate() {
        let (k, _) = cka::rbf_unit_gram(&a.read_layer_rows(la, rows_a)?.view());
        for (j, l) in kb.iter().enumerate() {
            out[[i, j]] = k.iter().zip(l.iter()).map(|(x, &y)| x * y as f64).sum();
        }
        step.inc(1);
    }
    Ok(out)
}

/// One label task's items and split for probe deltas (rows index the paired frames in use).
struct DeltaPlan {
    name: String,
    /// Class (0..n_classes) per row; `UNLABELLED` where the row has no label.
    labels: Vec<u32>,
    n_classes: usize,
    /// Inner-split group and bootstrap cluster per row: the speaker, or the utterance for
    /// the speaker task (whose speakers are on both sides of the split).
    groups: Vec<u32>,
    train: Vec<usize>,
    test: Vec<usize>,
}

/// Plan the delta tasks on the paired frames in use (`rows_a`: A's rows; labels agree with
/// B's by construction of the pairing). Tasks that cannot be split are skipped with a note.
fn plan_deltas(
    a: &Capture,
    b: &Capture,
    rows_a: &[usize],
    opts: &CompareOptions,
    seed: u64,
    notes: &mut Vec<String>,
) -> Result<Vec<DeltaPlan>, CompareError> {
    let names = delta_task_names(a, b, opts)?;
    let spk = a.frames.frame_speaker();
    let mut plans = Vec::new();
    for (ti, name) in names.iter().enumerate() {
        let Some(task) = a.frames.task(name) else {
            continue;
        };
        let rows = DeltaRows {
            frames: &a.frames,
            speaker: &spk,
            rows_a,
        };
        let split_seed = mix(seed, 600 + ti as u64);
        if let Some(p) = plan_delta(&rows, task, name, opts, split_seed, notes) {
            plans.push(p);
        }
    }
    Ok(plans)
}

/// The delta tasks (default: A's default tasks that B carries too, and `speaker`), each
/// checked to be a label column of both captures.
fn delta_task_names(
    a: &Capture,
    b: &Capture,
    opts: &CompareOptions,
) -> Result<Vec<String>, CompareError> {
    let names: Vec<String> = if opts.tasks.is_empty() {
        // Paired captures carry the same label columns (checked by the pairing).
        let mut v = a.frames.default_tasks();
        v.retain(|n| b.frames.task(n).is_some() || n == "speaker");
        v
    } else {
        opts.tasks.clone()
    };
    for n in &names {
        for c in [a, b] {
            if c.frames.task(n).is_none() {
                return Err(CompareError::Input(format!(
                    "{}: --task {n}: not a label column; the capture has: {}",
                    c.dir.display(),
                    c.frames.task_names().join(", ")
                )));
            }
        }
    }
    Ok(names)
}

/// A's frame table, each frame's speaker, and A's rows of the pairs in use.
struct DeltaRows<'a> {
    frames: &'a FrameTable,
    speaker: &'a [u32],
    rows_a: &'a [usize],
}

/// The task's class per row in use, the classes present renumbered `0..k` in order of first
/// appearance (`UNLABELLED` kept), and `k`.
fn renumber_labels(task: &LabelTask, rows_a: &[usize]) -> (Vec<u32>, u32) {
    let mut remap = vec![UNLABELLED; task.classes.len()];
    let mut k = 0u32;
    let mut labels = Vec::with_capacity(rows_a.len());
    for &r in rows_a {
        let c = task.codes[r];
        if c == UNLABELLED {
            labels.push(UNLABELLED);
            continue;
        }
        if remap[c as usize] == UNLABELLED {
            remap[c as usize] = k;
            k += 1;
        }
        labels.push(remap[c as usize]);
    }
    (labels, k)
}

/// Plan one delta task: its labelled rows split once (seeded with `split_seed`); None, with a
/// note, when the task cannot be split.
fn plan_delta(
    rows: &DeltaRows,
    task: &LabelTask,
    name: &str,
    opts: &CompareOptions,
    split_seed: u64,
    notes: &mut Vec<String>,
) -> Option<DeltaPlan> {
    use crate::select::split::{make_split, SplitKind, SplitOptions};
    let rows_a = rows.rows_a;
    let speaker_task = name == "speaker";
    let (labels, k) = renumber_labels(task, rows_a);
    let items: Vec<usize> = (0..rows_a.len())
        .filter(|&i| labels[i] != UNLABELLED)
        .collect();
    if k < 2 || items.len() < 4 {
        notes.push(format!(
            "probe deltas for '{name}' skipped: fewer than 2 classes or 4 labelled frames"
        ));
        return None;
    }
    let utt: Vec<u32> = items
        .iter()
        .map(|&i| rows.frames.frame_utt[rows_a[i]])
        .collect();
    let sp: Vec<u32> = items.iter().map(|&i| rows.speaker[rows_a[i]]).collect();
    let sopts = SplitOptions {
        test_fraction: opts.test_fraction,
        folds: 1,
    };
    let split = match make_split(SplitKind::Auto, speaker_task, &utt, &sp, &sopts, split_seed) {
        Ok(s) => s,
        Err(e) => {
            notes.push(format!("probe deltas for '{name}' skipped: {e}"));
            return None;
        }
    };
    let fold = split.folds.first()?;
    if fold.train.is_empty() || fold.test.is_empty() {
        notes.push(format!(
            "probe deltas for '{name}' skipped: the split left one side empty"
        ));
        return None;
    }
    // Inner-split group and bootstrap cluster: the utterance for the speaker task.
    let cluster = |j: usize| if speaker_task { utt[j] } else { sp[j] };
    note_few_clusters(
        fold.test.iter().map(|&j| cluster(j)),
        name,
        speaker_task,
        notes,
    );
    let mut groups = vec![0u32; rows_a.len()];
    for (j, &i) in items.iter().enumerate() {
        groups[i] = cluster(j);
    }
    Some(DeltaPlan {
        name: name.to_string(),
        labels,
        n_classes: k as usize,
        groups,
        train: fold.train.iter().map(|&j| items[j]).collect(),
        test: fold.test.iter().map(|&j| items[j]).collect(),
    })
}

/// Note when fewer than 5 test clusters make the bootstrap intervals unreliable.
fn note_few_clusters(
    test_clusters: impl Iterator<Item = u32>,
    name: &str,
    speaker_task: bool,
    notes: &mut Vec<String>,
) {
    let mut test_clusters: Vec<u32> = test_clusters.collect();
    test_clusters.sort_unstable();
    test_clusters.dedup();
    if test_clusters.len() < 5 {
        notes.push(format!(
            "probe deltas for '{name}': only {} test {} — the bootstrap intervals resample so few clusters that they are unreliable",
            test_clusters.len(),
            if speaker_task { "utterances" } else { "speakers" }
        ));
    }
}

/// The shipped probe (softmax regression with its penalty search, from [`crate::analysis::probe`]).
struct LinearProbe<'a>(&'a crate::analysis::probe::ProbeOptions);

impl FitPredict for LinearProbe<'_> {
    fn fit_predict(
        &self,
        x_train: &ndarray::ArrayView2<f32>,
        y_train: &[u32],
        n_classes: usize,
        x_test: &ndarray::ArrayView2<f32>,
        inner_groups: &[u32],
        seed: u64,
    ) -> Result<Vec<u32>, String> {
        crate::analysis::probe::fit_predict(
            x_train.view(),
            y_train,
            n_classes,
            x_test.view(),
            inner_groups,
            self.0,
            seed,
        )
        .map(|f| f.pred)
        .map_err(|e| e.to_string())
    }
}

/// Probe deltas for every shared layer (A index, B index) and planned task: one A and one B
/// layer resident at a time.
#[allow(clippy::too_many_arguments)]
fn probe_deltas(
    a: &Capture,
    b: &Capture,
    shared: &[(usize, usize)],
    rows_a: &[usize],
    rows_b: &[usize],
    opts: &CompareOptions,
    common: &CommonOptions,
    progress: &Progress,
    notes: &mut Vec<String>,
) -> Result<Vec<ProbeDelta>, CompareError> {
    let plans = plan_deltas(a, b, rows_a, opts, common.seed, notes)?;
    if shared.is_empty() || plans.is_empty() {
        if shared.is_empty() {
            notes.push("probe deltas skipped: no layer number is present in both captures".into());
        }
        return Ok(Vec::new());
    }
    let popts = crate::analysis::probe::ProbeOptions {
        bootstrap: opts.bootstrap,
        control: false,
        ..Default::default()
    };
    let dopts = delta::DeltaOptions {
        n_boot: opts.bootstrap,
        level: 0.95,
    };
    let probe = LinearProbe(&popts);
    let step = progress.step("probe deltas", (shared.len() * plans.len()) as u64);
    let mut out = Vec::new();
    for &(ia, ib) in shared {
        let layer = a.layers[ia].id;
        step.message(&format!("probe deltas, layer {layer}"));
        let xa = a.read_layer_rows(ia, rows_a)?;
        let xb = b.read_layer_rows(ib, rows_b)?;
        for (ti, p) in plans.iter().enumerate() {
            // Training rows capped as the probe stage caps them (the same stratified
            // subsample, each class keeping its share).
            let train = crate::select::sample::by_class(
                &p.train,
                &p.labels,
                popts.max_train_frames,
                mix(common.seed, 700 + ti as u64),
            );
            let input = delta::DeltaInput {
                layer,
                task: &p.name,
                labels: &p.labels,
                n_classes: p.n_classes,
                groups: &p.groups,
                train: &train,
                test: &p.test,
            };
            let seed = mix(common.seed, 800 + (layer as u64) * 1000 + ti as u64);
            let d = delta::probe_delta(&xa.view(), &xb.view(), &input, &probe, &dopts, seed)
                .map_err(|e| {
                    CompareError::Internal(format!(
                        "probe delta, layer {layer}, task {}: {e}",
                        p.name
                    ))
                })?;
            out.push(d);
            step.inc(1);
        }
    }
    Ok(out)
}
