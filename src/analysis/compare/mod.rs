//! Layer-by-layer comparison of two captures of the same frames (two checkpoints of a model,
//! or two models): centred kernel alignment (CKA; Kornblith et al. 2019) between every layer
//! of A and every layer of B, and probe deltas (the same probe on A and on B with one split,
//! McNemar's test and a paired speaker bootstrap on the difference).
//!
//! Frames are paired row by row (the label tables must agree), or by (utterance, frame index
//! within the utterance) with [`MatchBy::Utterance`]. Probe deltas use one split for the whole
//! run ([`probe_deltas`]): the probe stage's folds and test predictions (frame-level items, the
//! default split rule with `auto` folds, the probe stage's seeds), the same for A and B,
//! pooled over folds, with McNemar's test (exact binomial below 25 discordant pairs, else
//! chi-square without continuity correction) and a paired cluster bootstrap over test speakers
//! (test utterances for the speaker task).
//!
//! Linear CKA streams layers: one A layer and one B layer are resident at a time, and
//! everything is computed in feature space (p × q products), never with n × n Gram matrices.

pub mod cka;
pub mod delta;
mod pair;
mod probe_deltas;

use ndarray::Array2;
use rand_chacha::rand_core::SeedableRng;
use rand_chacha::ChaCha8Rng;
use serde::Serialize;

use crate::capture::{Capture, CaptureError};
use crate::records::probe::ProbeReport;
use crate::records::CaptureRef;
use crate::{CommonOptions, Progress};

pub use crate::records::compare::{CkaRecord, CompareReport, Estimator, Kernel, MatchBy, Pairing};
pub use delta::{FitPredict, ProbeDelta};
pub use pair::{pair_frames, FrameMismatch};

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
/// layer number present in both, with the probe trainer of [`crate::analysis::probe`] (see
/// [`delta`]). `probes` are the probe stage's reports of A and B when the caller ran it
/// (`report`): the deltas then pair their test predictions, so each (layer, task) shows the
/// same accuracy as the probe stage; without them the probe stage is run here with its
/// default split rule and seed.
pub fn run(
    a: &Capture,
    b: &Capture,
    opts: &CompareOptions,
    common: &CommonOptions,
    progress: &Progress,
    probes: Option<[&ProbeReport; 2]>,
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
        let ctx = probe_deltas::Context {
            layers: &layers,
            pairing: &pairing,
            opts,
            common,
            progress,
        };
        probe_deltas::all(&ctx, probes, &mut notes)?
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
pub(crate) struct LayerPair<'a> {
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
