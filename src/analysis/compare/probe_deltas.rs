//! Probe deltas between the two captures of a comparison, on one split for the whole run:
//! from the probe stage's own test predictions when the caller ran it or will hand them
//! over (a report's assembly, from its probe parts), else by
//! running the probe stage on both captures here (the paired frames are all the frames, in
//! order: `compare` alone gets the split, folds, seeds and fits `probe` would use), else, when
//! frames are paired by utterance or sampled, on the paired rows with the same split rule and
//! the same split seed. In every case A and B share the test items, predictions are pooled
//! over folds, and [`delta::delta_from_correct`] gives the accuracies, their paired
//! cluster-bootstrap interval and McNemar's test.

use crate::analysis::probe::{self, ProbeOptions};
use crate::analysis::seed::mix;
use crate::capture::{Capture, FrameTable, LabelTask, UNLABELLED};
use crate::records::probe::ProbeReport;
use crate::select::split::{self, FoldCount};
use crate::{CommonOptions, Progress};

use super::delta::{self, FitPredict, PairedCorrect, ProbeDelta};
use super::{CompareError, CompareOptions, DeltaSource, LayerPair, Pairing};
use crate::records::probe::TaskPredictions;

/// What the delta step needs of the comparison.
pub(super) struct Context<'a> {
    pub(super) layers: &'a LayerPair<'a>,
    pub(super) pairing: &'a Pairing,
    pub(super) opts: &'a CompareOptions,
    pub(super) common: &'a CommonOptions,
    pub(super) progress: &'a Progress,
}

/// Probe deltas on every layer number selected in both captures (see the module comment for
/// where the predictions come from); None when they are deferred to the caller.
pub(super) fn all(
    ctx: &Context,
    source: DeltaSource,
    notes: &mut Vec<String>,
) -> Result<Option<Vec<ProbeDelta>>, CompareError> {
    let l = ctx.layers;
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
    if shared.is_empty() {
        notes.push("probe deltas skipped: no layer number is present in both captures".into());
        return Ok(Some(Vec::new()));
    }
    if let DeltaSource::Probes([pa, pb]) = source {
        return from_probes(pa, pb, ctx.opts, ctx.common.seed, notes).map(Some);
    }
    let p = ctx.pairing;
    let n = a.n_frames();
    let identity = p.paired == n
        && b.n_frames() == n
        && ctx.opts.max_frames.is_none_or(|m| m >= n)
        && p.rows_a.iter().enumerate().all(|(i, &r)| i == r)
        && p.rows_b.iter().enumerate().all(|(i, &r)| i == r);
    if identity && matches!(source, DeltaSource::Deferred) {
        return Ok(None);
    }
    if identity {
        let popts = ProbeOptions {
            tasks: delta_task_names(a, b, ctx.opts)?,
            test_fraction: ctx.opts.test_fraction,
            bootstrap: ctx.opts.bootstrap,
            control: false,
            mdl: false,
            ..Default::default()
        };
        let run = |c: &Capture| {
            probe::run(c, &popts, ctx.common, ctx.progress).map_err(|e| match e {
                probe::ProbeError::Input(m) => CompareError::Input(m),
                probe::ProbeError::Capture(e) => CompareError::Capture(e),
                probe::ProbeError::Internal(m) => CompareError::Internal(m),
            })
        };
        let (pa, pb) = (run(a)?, run(b)?);
        notes.extend(pa.notes.iter().map(|n| format!("probe: {n}")));
        return from_probes(&pa, &pb, ctx.opts, ctx.common.seed, notes).map(Some);
    }
    let keep = crate::select::sample::uniform_sorted(
        p.paired,
        ctx.opts.max_frames.unwrap_or(usize::MAX),
        ctx.common.seed ^ 0xc0a1_0001,
    );
    let ra: Vec<usize> = keep.iter().map(|&k| p.rows_a[k]).collect();
    let rb: Vec<usize> = keep.iter().map(|&k| p.rows_b[k]).collect();
    probe_deltas(a, b, &shared, &ra, &rb, ctx, notes).map(Some)
}

/// Deltas from the two probe reports' pooled test predictions, (layer, task) by (layer, task)
/// of A found in B; the test items must be the same.
fn from_probes(
    pa: &ProbeReport,
    pb: &ProbeReport,
    opts: &CompareOptions,
    seed: u64,
    notes: &mut Vec<String>,
) -> Result<Vec<ProbeDelta>, CompareError> {
    let tasks: Vec<String> = pa.tasks.iter().map(|t| t.task.clone()).collect();
    from_predictions(
        &tasks,
        &tasks,
        [&pa.predictions, &pb.predictions],
        opts,
        seed,
        notes,
    )
}

/// Deltas from two captures' pooled test predictions, for the tasks of `tasks` (the probe
/// stage's list, whose order gives the bootstrap seeds) that `wanted` names.
pub(super) fn from_predictions(
    tasks: &[String],
    wanted: &[String],
    [pred_a, pred_b]: [&[TaskPredictions]; 2],
    opts: &CompareOptions,
    seed: u64,
    notes: &mut Vec<String>,
) -> Result<Vec<ProbeDelta>, CompareError> {
    let dopts = delta::DeltaOptions {
        n_boot: opts.bootstrap,
        level: 0.95,
    };
    for t in tasks.iter().filter(|t| wanted.contains(t)) {
        if let Some(q) = pred_a.iter().find(|q| &q.task == t) {
            note_few_clusters(q.cluster.iter().copied(), t, t == "speaker", notes);
        }
    }
    let mut out = Vec::new();
    for qa in pred_a.iter().filter(|q| wanted.contains(&q.task)) {
        let Some(qb) = pred_b
            .iter()
            .find(|q| q.layer == qa.layer && q.task == qa.task)
        else {
            continue;
        };
        if qa.test_frames != qb.test_frames {
            return Err(CompareError::Internal(format!(
                "probe deltas, layer {}, task {}: the two captures' probes tested different items",
                qa.layer, qa.task
            )));
        }
        let ti = tasks.iter().position(|t| *t == qa.task).unwrap_or(0);
        let dseed = mix(seed, 800 + (qa.layer as u64) * 1000 + ti as u64);
        if !qa.truth.is_empty() {
            // A continuous task: both sides predicted the same values of the same items.
            let paired = delta::PairedValues {
                layer: qa.layer,
                task: &qa.task,
                n_train: qa.n_train,
                truth: &qa.truth,
                a: &qa.pred,
                b: &qb.pred,
                clusters: &qa.cluster,
            };
            out.push(delta::delta_from_values(&paired, &dopts, dseed));
            continue;
        }
        let paired = PairedCorrect {
            layer: qa.layer,
            task: &qa.task,
            n_train: qa.n_train,
            a: &qa.correct,
            b: &qb.correct,
            clusters: &qa.cluster,
        };
        out.push(delta::delta_from_correct(&paired, &dopts, dseed));
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
    /// (training rows, test rows) of each fold.
    folds: Vec<(Vec<usize>, Vec<usize>)>,
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
            notes.push(format!(
                "probe deltas for '{name}' skipped: ΔR² of a continuous column is computed on \
                 the probe stage's own folds, which needs every frame of both captures paired \
                 in order (not paired by utterance, no --max-frames)"
            ));
            continue;
        };
        let rows = DeltaRows {
            frames: &a.frames,
            speaker: &spk,
            rows_a,
        };
        // The probe stage's split seed for task number `ti`.
        let split_seed = mix(seed, 100 + ti as u64);
        if let Some(p) = plan_delta(&rows, task, name, opts, split_seed, notes) {
            plans.push(p);
        }
    }
    Ok(plans)
}

/// The delta tasks (default: A's default tasks that B carries too, and `speaker`), each
/// checked to be a label column of both captures.
pub(super) fn delta_task_names(
    a: &Capture,
    b: &Capture,
    opts: &CompareOptions,
) -> Result<Vec<String>, CompareError> {
    let names: Vec<String> = if opts.tasks.is_empty() {
        // Paired captures carry the same label columns (checked by the pairing); continuous
        // columns of both follow, as the probe stage takes them.
        let mut v = a.frames.default_tasks();
        v.retain(|n| b.frames.task(n).is_some() || n == "speaker");
        v.extend(
            a.frames
                .continuous
                .iter()
                .filter(|c| b.frames.numeric(&c.name).is_some())
                .map(|c| c.name.clone()),
        );
        v
    } else {
        opts.tasks.clone()
    };
    for n in &names {
        for c in [a, b] {
            if c.frames.task(n).is_none() && c.frames.numeric(n).is_none() {
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

/// Plan one delta task: its labelled rows split by the probe stage's rule (`auto` folds,
/// seeded with `split_seed`); None, with a note, when the task cannot be split.
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
        folds: split::resolve_folds(
            FoldCount::Auto,
            SplitKind::Auto,
            speaker_task,
            &utt,
            &sp,
            opts.test_fraction,
        ),
    };
    let split = match make_split(SplitKind::Auto, speaker_task, &utt, &sp, &sopts, split_seed) {
        Ok(s) => s,
        Err(e) => {
            notes.push(format!("probe deltas for '{name}' skipped: {e}"));
            return None;
        }
    };
    if split
        .folds
        .iter()
        .any(|f| f.train.is_empty() || f.test.is_empty())
    {
        notes.push(format!(
            "probe deltas for '{name}' skipped: the split left one side empty"
        ));
        return None;
    }
    // Inner-split group and bootstrap cluster: the utterance for the speaker task.
    let cluster = |j: usize| if speaker_task { utt[j] } else { sp[j] };
    note_few_clusters(
        split
            .folds
            .iter()
            .flat_map(|f| f.test.iter().map(|&j| cluster(j))),
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
        folds: split
            .folds
            .iter()
            .map(|f| {
                (
                    f.train.iter().map(|&j| items[j]).collect(),
                    f.test.iter().map(|&j| items[j]).collect(),
                )
            })
            .collect(),
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

/// Probe deltas on the paired rows in use for every shared layer (A index, B index) and
/// planned task, fold by fold, outcomes pooled over folds: one A and one B layer resident at a
/// time.
fn probe_deltas(
    a: &Capture,
    b: &Capture,
    shared: &[(usize, usize)],
    rows_a: &[usize],
    rows_b: &[usize],
    ctx: &Context,
    notes: &mut Vec<String>,
) -> Result<Vec<ProbeDelta>, CompareError> {
    let seed0 = ctx.common.seed;
    let plans = plan_deltas(a, b, rows_a, ctx.opts, seed0, notes)?;
    if plans.is_empty() {
        return Ok(Vec::new());
    }
    let popts = ProbeOptions {
        bootstrap: ctx.opts.bootstrap,
        control: false,
        ..Default::default()
    };
    let dopts = delta::DeltaOptions {
        n_boot: ctx.opts.bootstrap,
        level: 0.95,
    };
    let probe = LinearProbe(&popts);
    let step = ctx
        .progress
        .step("probe deltas", (shared.len() * plans.len()) as u64);
    let mut out = Vec::new();
    for &(ia, ib) in shared {
        let layer = a.layers[ia].id;
        step.message(&format!("probe deltas, layer {layer}"));
        let xa = a.read_layer_rows(ia, rows_a)?;
        let xb = b.read_layer_rows(ib, rows_b)?;
        for (ti, p) in plans.iter().enumerate() {
            let mut pooled = delta::Outcomes::default();
            let mut n_train = 0;
            for (fi, (train, test)) in p.folds.iter().enumerate() {
                // Training rows capped as the probe stage caps them (stratified by class).
                let train = crate::select::sample::by_class(
                    train,
                    &p.labels,
                    popts.max_train_frames,
                    mix(seed0, 200 + (ti * 1000 + fi) as u64),
                );
                n_train += train.len();
                let input = delta::DeltaInput {
                    layer,
                    task: &p.name,
                    labels: &p.labels,
                    n_classes: p.n_classes,
                    groups: &p.groups,
                    train: &train,
                    test,
                };
                let fseed = mix(seed0, 300 + (ti * 1000 + fi) as u64);
                let o = delta::fold_outcomes(&xa.view(), &xb.view(), &input, &probe, fseed)
                    .map_err(|e| {
                        CompareError::Internal(format!(
                            "probe delta, layer {layer}, task {}: {e}",
                            p.name
                        ))
                    })?;
                pooled.a.extend(o.a);
                pooled.b.extend(o.b);
                pooled.clusters.extend(o.clusters);
            }
            let paired = PairedCorrect {
                layer,
                task: &p.name,
                n_train: (n_train as f64 / p.folds.len().max(1) as f64).round() as usize,
                a: &pooled.a,
                b: &pooled.b,
                clusters: &pooled.clusters,
            };
            let dseed = mix(seed0, 800 + (layer as u64) * 1000 + ti as u64);
            out.push(delta::delta_from_correct(&paired, &dopts, dseed));
            step.inc(1);
        }
    }
    Ok(out)
}
