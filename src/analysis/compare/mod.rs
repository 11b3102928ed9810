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
/// [`delta`]). `probes` are the probe stage's reports of A and B when the caller ran it: the
/// deltas then pair their test predictions, so each (layer, task) shows the same accuracy as
/// the probe stage; without them the probe stage is run here with its default split rule and
/// seed.
///
/// The CKA matrix is computed row by row ([`cka_row`] computes one row alone) and the rows
/// merged by [`crate::analysis::layerwise::merge_cka`], so a run split into rows gives the
/// same records.
pub fn run(
    a: &Capture,
    b: &Capture,
    opts: &CompareOptions,
    common: &CommonOptions,
    progress: &Progress,
    probes: Option<[&ProbeReport; 2]>,
) -> Result<CompareReport, CompareError> {
    let prep = prepare(a, b, opts, common)?;
    let (na, nb) = (prep.sel_a.len(), prep.sel_b.len());
    let step = progress.step(cka_step(opts), (na * nb) as u64);
    let mut cache = Cache::new(nb, true);
    let rows = (0..na)
        .map(|i| cka_row_at(a, b, &prep, opts, i, &mut cache, &step))
        .collect::<Result<Vec<_>, _>>()?;
    drop(step);
    let source = match probes {
        Some(p) => DeltaSource::Probes(p),
        None => DeltaSource::Fit,
    };
    let rep = without_cka(a, b, prep, opts, common, progress, source)?;
    crate::analysis::layerwise::merge_cka(rep, rows)
}

/// Where a comparison's probe deltas come from.
#[derive(Clone, Copy)]
pub enum DeltaSource<'a> {
    /// Probes fitted by the comparison itself (the probe stage run on both captures when
    /// every frame is paired in order, else the paired rows with the same split rule).
    Fit,
    /// The probe stage's reports of both captures (their pooled test predictions).
    Probes([&'a ProbeReport; 2]),
    /// Left to the caller when every frame is paired in order: the report's `deltas_deferred`
    /// is set, and [`deltas_from_predictions`] gives the deltas from the probe stage's
    /// predictions (a report's assembly holds both captures' probe parts). Otherwise as `Fit`.
    Deferred,
}

/// The probe deltas of a comparison from both captures' pooled test predictions, paired
/// (layer, task) by (layer, task) for the delta tasks; `tasks` is the probe stage's task
/// list (the order gives each task's bootstrap seed, as in the probe stage). The test items
/// must be the same on both sides.
#[allow(clippy::too_many_arguments)]
pub fn deltas_from_predictions(
    a: &Capture,
    b: &Capture,
    tasks: &[String],
    pred_a: &[crate::records::probe::TaskPredictions],
    pred_b: &[crate::records::probe::TaskPredictions],
    opts: &CompareOptions,
    seed: u64,
    notes: &mut Vec<String>,
) -> Result<Vec<ProbeDelta>, CompareError> {
    let wanted = probe_deltas::delta_task_names(a, b, opts)?;
    probe_deltas::from_predictions(tasks, &wanted, [pred_a, pred_b], opts, seed, notes)
}

/// The comparison without its CKA matrix (`cka` empty): the pairing, notes, options and probe
/// deltas. With [`cka_row`] for each layer of A and
/// [`crate::analysis::layerwise::merge_cka`], the report [`run`] gives.
pub fn run_without_cka(
    a: &Capture,
    b: &Capture,
    opts: &CompareOptions,
    common: &CommonOptions,
    progress: &Progress,
    source: DeltaSource,
) -> Result<CompareReport, CompareError> {
    let prep = prepare(a, b, opts, common)?;
    without_cka(a, b, prep, opts, common, progress, source)
}

/// One row of the CKA matrix: layer number `layer` of A against every selected layer of B,
/// as [`run`] computes it among the other rows. Two layers are resident at a time (one of A,
/// one of B; for RBF their n × n kernels).
pub fn cka_row(
    a: &Capture,
    b: &Capture,
    opts: &CompareOptions,
    common: &CommonOptions,
    layer: usize,
    progress: &Progress,
) -> Result<CkaRow, CompareError> {
    let prep = prepare(a, b, opts, common)?;
    let i = prep
        .sel_a
        .iter()
        .position(|&li| a.layers[li].id == layer)
        .ok_or_else(|| {
            CompareError::Input(format!(
                "{}: expected a selected layer, found layer {layer}",
                a.dir.display()
            ))
        })?;
    let step = progress.step(
        &format!("{}, layer {layer} of {}", cka_step(opts), a.name),
        prep.sel_b.len() as u64,
    );
    let mut cache = Cache::new(prep.sel_b.len(), false);
    Ok(cka_row_at(a, b, &prep, opts, i, &mut cache, &step)?)
}

/// What every part of one comparison shares: the selected layers (indices), the pairing,
/// the paired rows CKA uses, and whether A is compared with itself (same capture, rows and
/// layers: the CKA matrix is symmetric and only its upper triangle is computed).
struct Prepared {
    sel_a: Vec<usize>,
    sel_b: Vec<usize>,
    pairing: Pairing,
    rows_a: Vec<usize>,
    rows_b: Vec<usize>,
    symmetric: bool,
}

fn prepare(
    a: &Capture,
    b: &Capture,
    opts: &CompareOptions,
    common: &CommonOptions,
) -> Result<Prepared, CompareError> {
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
    let mut rows_a: Vec<usize> = keep.iter().map(|&k| pairing.rows_a[k]).collect();
    let mut rows_b: Vec<usize> = keep.iter().map(|&k| pairing.rows_b[k]).collect();
    let symmetric = (opts.kernel, opts.estimator) == (Kernel::Linear, Estimator::Full)
        && same_capture(a, b)
        && rows_a == rows_b
        && sel_a == sel_b;
    if opts.estimator == Estimator::Minibatch {
        // Shuffle the pairs once (seeded) so each batch mixes utterances and speakers.
        let mut order: Vec<usize> = (0..rows_a.len()).collect();
        let mut rng = ChaCha8Rng::seed_from_u64(common.seed ^ 0xc0a1_0002);
        rand::seq::SliceRandom::shuffle(order.as_mut_slice(), &mut rng);
        rows_a = order.iter().map(|&k| rows_a[k]).collect();
        rows_b = order.iter().map(|&k| rows_b[k]).collect();
    }
    Ok(Prepared {
        sel_a,
        sel_b,
        pairing,
        rows_a,
        rows_b,
        symmetric,
    })
}

/// The report of [`run`] with `cka` left empty.
fn without_cka(
    a: &Capture,
    b: &Capture,
    prep: Prepared,
    opts: &CompareOptions,
    common: &CommonOptions,
    progress: &Progress,
    source: DeltaSource,
) -> Result<CompareReport, CompareError> {
    let ids_a: Vec<usize> = prep.sel_a.iter().map(|&i| a.layers[i].id).collect();
    let ids_b: Vec<usize> = prep.sel_b.iter().map(|&i| b.layers[i].id).collect();
    let pairing = prep.pairing;
    let mut notes = Vec::new();
    if pairing.dropped_a + pairing.dropped_b > 0 {
        notes.push(format!(
            "{} frames paired by utterance; {} frames of A and {} of B had no partner and were left out",
            pairing.paired, pairing.dropped_a, pairing.dropped_b
        ));
    }
    let (probe_delta, deltas_deferred) = if opts.probe {
        let layers = LayerPair {
            a,
            b,
            sel_a: &prep.sel_a,
            sel_b: &prep.sel_b,
        };
        let ctx = probe_deltas::Context {
            layers: &layers,
            pairing: &pairing,
            opts,
            common,
            progress,
        };
        match probe_deltas::all(&ctx, source, &mut notes)? {
            Some(d) => (d, false),
            None => (Vec::new(), true),
        }
    } else {
        (Vec::new(), false)
    };
    let options = serde_json::to_value(opts).map_err(|e| CompareError::Internal(e.to_string()))?;
    Ok(CompareReport {
        captures: vec![capture_ref(a), capture_ref(b)],
        layers_a: ids_a,
        layers_b: ids_b,
        pairing,
        cka: Vec::new(),
        probe_delta,
        notes,
        options,
        kernel: opts.kernel,
        estimator: opts.estimator,
        deltas_deferred,
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

/// One row of the CKA matrix: layer `layer_a` of A against each selected layer of B, in B's
/// order. `mirrored` are the B layers before the diagonal when A is compared with itself:
/// their values are those of the transposed cells, taken from the earlier rows when merged.
#[derive(Clone, Debug, PartialEq, Serialize, serde::Deserialize)]
pub struct CkaRow {
    /// Layer number in A.
    pub layer_a: usize,
    /// The cells computed, in B's layer order.
    pub records: Vec<CkaRecord>,
    /// Layer numbers of B whose cell is the transposed one.
    pub mirrored: Vec<usize>,
}

fn cka_step(opts: &CompareOptions) -> &'static str {
    match (opts.kernel, opts.estimator) {
        (Kernel::Linear, Estimator::Full) => "linear CKA",
        (Kernel::Linear, Estimator::Minibatch) => "minibatch CKA",
        (Kernel::Rbf, _) => "RBF CKA",
    }
}

/// What a CKA row reuses from earlier rows of the same run: per B layer its Gram norm
/// (linear), its summed HSIC(L, L) (minibatch) or, when `kernels` is kept, its unit-norm
/// centred RBF kernel (f32, n² values each). A row computed alone starts empty and keeps no
/// kernel, so it holds two layers at a time. The values are the same either way: each is a
/// deterministic function of one layer's rows.
struct Cache {
    scalars: Vec<Option<f64>>,
    kernels: Option<Vec<Option<Array2<f32>>>>,
}

impl Cache {
    fn new(nb: usize, keep_kernels: bool) -> Self {
        Cache {
            scalars: vec![None; nb],
            kernels: keep_kernels.then(|| vec![None; nb]),
        }
    }
}

/// Row `i` of the CKA matrix (index into the selected layers of A).
#[allow(clippy::too_many_arguments)]
fn cka_row_at(
    a: &Capture,
    b: &Capture,
    prep: &Prepared,
    opts: &CompareOptions,
    i: usize,
    cache: &mut Cache,
    step: &crate::progress::Step,
) -> Result<CkaRow, CaptureError> {
    let rb = RowReader::new(b, prep.rows_b.clone());
    let la = prep.sel_a[i];
    let values = match (opts.kernel, opts.estimator) {
        (Kernel::Linear, Estimator::Full) => {
            let ra = RowReader::new(a, prep.rows_a.clone());
            linear_row(ra.read(la)?, &rb, prep, i, cache, step)?
        }
        (Kernel::Linear, Estimator::Minibatch) => {
            let x = a.read_layer_rows(la, &prep.rows_a)?;
            minibatch_row(&x, &rb, prep, opts.batch_size, cache, step)?
        }
        (Kernel::Rbf, _) => {
            let x = a.read_layer_rows(la, &prep.rows_a)?;
            rbf_row(&x, &rb, prep, cache, step)?
        }
    };
    let mut row = CkaRow {
        layer_a: a.layers[la].id,
        records: Vec::with_capacity(values.len()),
        mirrored: Vec::new(),
    };
    for (&lb, v) in prep.sel_b.iter().zip(values) {
        let layer_b = b.layers[lb].id;
        match v {
            Some(cka) => row.records.push(CkaRecord {
                layer_a: row.layer_a,
                layer_b,
                cka,
                kernel: opts.kernel,
                estimator: opts.estimator,
                n_frames: prep.pairing.used,
            }),
            None => row.mirrored.push(layer_b),
        }
    }
    Ok(row)
}

/// Linear CKA of one A layer `x` against each B layer, read one at a time. When A is
/// compared with itself, cells before the diagonal are None (their transposes hold them) and
/// the diagonal is 1 without reading B.
fn linear_row(
    mut x: Array2<f32>,
    rb: &RowReader,
    prep: &Prepared,
    i: usize,
    cache: &mut Cache,
    step: &crate::progress::Step,
) -> Result<Vec<Option<f64>>, CaptureError> {
    cka::centre(&mut x);
    let norm_x = cka::gram_norm(&x.view());
    let mut out = Vec::with_capacity(prep.sel_b.len());
    for (j, &lb) in prep.sel_b.iter().enumerate() {
        let v = if prep.symmetric && j < i {
            None
        } else if prep.symmetric && j == i {
            Some(if norm_x > 0.0 { 1.0 } else { 0.0 })
        } else {
            let mut y = rb.read(lb)?;
            cka::centre(&mut y);
            let ny = *cache.scalars[j].get_or_insert_with(|| cka::gram_norm(&y.view()));
            Some(cka::linear_from_parts(
                cka::cross2(&x.view(), &y.view()),
                norm_x,
                ny,
            ))
        };
        out.push(v);
        step.inc(1);
    }
    Ok(out)
}

/// Minibatch linear CKA of one A layer `x` (rows already shuffled) against each B layer.
/// Batches are consecutive runs of `batch` rows (a last run shorter than 4 is left out); the
/// A layer's batch Gram matrices are kept (n · batch values), B layers are streamed.
fn minibatch_row(
    x: &Array2<f32>,
    rb: &RowReader,
    prep: &Prepared,
    batch: usize,
    cache: &mut Cache,
    step: &crate::progress::Step,
) -> Result<Vec<Option<f64>>, CaptureError> {
    let n = x.nrows();
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
    let ka = grams(x);
    let kk: f64 = ka.iter().map(|k| cka::hsic_unbiased(k, k)).sum();
    let mut out = Vec::with_capacity(prep.sel_b.len());
    for (j, &lb) in prep.sel_b.iter().enumerate() {
        let lbm = grams(&rb.cap.read_layer_rows(lb, &rb.rows)?);
        let ll = *cache.scalars[j]
            .get_or_insert_with(|| lbm.iter().map(|l| cka::hsic_unbiased(l, l)).sum());
        let kl: f64 = ka
            .iter()
            .zip(&lbm)
            .map(|(k, l)| cka::hsic_unbiased(k, l))
            .sum();
        out.push(Some(cka::MinibatchSums { kl, kk, ll }.cka()));
        step.inc(1);
    }
    Ok(out)
}

/// RBF CKA of one A layer `x` (the subsample) against each B layer: the inner product of the
/// two unit-norm centred kernels, B's kept in f32.
fn rbf_row(
    x: &Array2<f32>,
    rb: &RowReader,
    prep: &Prepared,
    cache: &mut Cache,
    step: &crate::progress::Step,
) -> Result<Vec<Option<f64>>, CaptureError> {
    let (k, _) = cka::rbf_unit_gram(&x.view());
    let mut out = Vec::with_capacity(prep.sel_b.len());
    for (j, &lb) in prep.sel_b.iter().enumerate() {
        let dot =
            |l: &Array2<f32>| -> f64 { k.iter().zip(l.iter()).map(|(x, &y)| x * y as f64).sum() };
        let v = match cache.kernels.as_ref().and_then(|c| c[j].as_ref()) {
            Some(l) => dot(l),
            None => {
                let (l, _) = cka::rbf_unit_gram(&rb.cap.read_layer_rows(lb, &rb.rows)?.view());
                let l = l.mapv(|v| v as f32);
                let v = dot(&l);
                if let Some(c) = cache.kernels.as_mut() {
                    c[j] = Some(l);
                }
                v
            }
        };
        out.push(Some(v));
        step.inc(1);
    }
    Ok(out)
}
