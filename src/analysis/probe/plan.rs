//! Task planning for the probe stage: for each label task, the items (pooled frames), the
//! classes a split can use (others dropped with a warning, or refused with `--strict`), the
//! grouped folds with their training and test sides capped, and the set-up record that says
//! what was done. Everything is checked here, before any layer is read.

use std::collections::BTreeSet;

use crate::analysis::seed::mix;
use crate::capture::{Capture, FrameTable, LabelTask, UNLABELLED};
use crate::records::probe::{FoldSides, TaskSetup};
use crate::select::pool::{self, Items, UttIndex};
use crate::select::sample;
use crate::select::split::{self, Fold, Split, SplitKind, SplitOptions};

use super::{control, ProbeError, ProbeOptions};

/// A task ready to run: items, classes and folds (training sides already subsampled).
pub(super) struct TaskPlan {
    pub(super) name: String,
    pub(super) speaker_task: bool,
    pub(super) items: Items,
    pub(super) classes: Vec<String>,
    pub(super) kind: SplitKind,
    pub(super) folds: Vec<Fold>,
    /// Control label of each item (None when the control is off).
    pub(super) control: Option<Vec<u32>>,
    pub(super) setup: TaskSetup,
}

pub(super) fn input(msg: String) -> ProbeError {
    ProbeError::Input(msg)
}

/// The planned tasks: categorical ones (classifiers) and continuous ones (ridge), each with
/// the seeds of its position among all tasks.
pub(super) struct Plans {
    pub(super) class: Vec<(usize, TaskPlan)>,
    pub(super) regress: Vec<(usize, super::regress::RegressPlan)>,
}

/// Plan every task of `opts.tasks` (default: the frame table's default tasks, then every
/// continuous column), in order. Warnings and notes go to `notes`.
pub(super) fn plan_tasks(
    cap: &Capture,
    opts: &ProbeOptions,
    seed: u64,
    notes: &mut Vec<String>,
) -> Result<Plans, ProbeError> {
    let names = task_names(cap, opts)?;
    if let Some(col) = opts.control_by.as_deref().filter(|_| opts.control) {
        check_control_column(cap, col)?;
    }
    let idx = UttIndex::new(&cap.frames);
    if opts.context > 0 {
        let shortest = idx.shortest();
        if opts.context >= shortest {
            notes.push(format!(
                "--context {} reaches past the shortest utterance ({shortest} frames): edge frames are repeated to pad",
                opts.context
            ));
        }
    }
    let mut plans = Plans {
        class: Vec::new(),
        regress: Vec::new(),
    };
    for (ti, name) in names.iter().enumerate() {
        if let Some(numeric) = cap.frames.numeric(name) {
            let p = super::regress::plan_task(cap, &idx, opts, ti, numeric, seed, notes)?;
            plans.regress.push((ti, p));
        } else {
            plans
                .class
                .push((ti, plan_task(cap, &idx, opts, ti, name, seed, notes)?));
        }
    }
    Ok(plans)
}

/// The tasks to probe, each checked to be a label column of the capture.
fn task_names(cap: &Capture, opts: &ProbeOptions) -> Result<Vec<String>, ProbeError> {
    let t = &cap.frames;
    let names: Vec<String> = if opts.tasks.is_empty() {
        let mut v = t.default_tasks();
        v.extend(t.continuous.iter().map(|c| c.name.clone()));
        v
    } else {
        opts.tasks.clone()
    };
    for n in &names {
        if t.task(n).is_none() && t.numeric(n).is_none() {
            let mut all = t.task_names();
            all.extend(t.continuous.iter().map(|c| c.name.clone()));
            return Err(input(format!(
                "{}: --task {n}: not a label column; the capture has: {}",
                cap.dir.display(),
                all.join(", ")
            )));
        }
    }
    Ok(names)
}

/// Plan task number `ti` (its seeds are derived from `seed` and `ti`).
fn plan_task(
    cap: &Capture,
    idx: &UttIndex,
    opts: &ProbeOptions,
    ti: usize,
    name: &str,
    seed: u64,
    notes: &mut Vec<String>,
) -> Result<TaskPlan, ProbeError> {
    let t = &cap.frames;
    let task = t
        .task(name)
        .ok_or_else(|| input(format!("no task {name}")))?;
    let speaker_task = name == "speaker";
    let kind = checked_kind(cap, task, name, opts, speaker_task)?;
    let items = pool::pool_items(t, idx, &task.codes, opts.pooling, name).map_err(input)?;
    if kind == SplitKind::Speaker {
        check_two_speakers(cap, name, &items)?;
    }
    let (keep_class, dropped) = drop_unsplittable(
        t,
        task,
        name,
        &items,
        kind,
        speaker_task,
        opts.strict,
        notes,
    )?;
    let (items, classes) = keep_usable_classes(cap, task, name, items, &keep_class)?;
    let n_folds = split::resolve_folds(
        opts.folds,
        kind,
        speaker_task,
        &items.utt,
        &items.speaker,
        opts.test_fraction,
    );
    let sopts = SplitOptions {
        test_fraction: opts.test_fraction,
        folds: n_folds,
    };
    let sp = split::make_split(
        kind,
        speaker_task,
        &items.utt,
        &items.speaker,
        &sopts,
        mix(seed, 100 + ti as u64),
    )
    .map_err(|m| input(format!("{}: task '{name}': {m}", cap.dir.display())))?;
    let folds = capped_folds(&sp, &items, opts, ti, seed);
    note_frame_split(sp.kind, name, notes);
    note_test_cap(&sp, &folds, name, opts, notes);
    let check = check_no_leak(&sp, &folds, &items, name)?;
    let ctl = if opts.control {
        Some(control_plan(
            cap,
            idx,
            opts,
            name,
            &items,
            classes.len(),
            mix(seed, 400 + ti as u64),
        )?)
    } else {
        None
    };
    let setup = TaskSetup {
        task: name.to_string(),
        kind: "categorical".into(),
        classes: classes.clone(),
        dropped,
        split: sp.kind,
        groups: group_word(sp.kind).to_string(),
        folds: fold_sides(sp.kind, &folds, &items, t),
        leakage_check: check,
        control_by: ctl.as_ref().map_or("none".into(), |c| c.by.clone()),
        control_types: ctl.as_ref().map_or(0, |c| c.types),
    };
    Ok(TaskPlan {
        name: name.to_string(),
        speaker_task,
        items,
        classes,
        kind: sp.kind,
        folds,
        control: ctl.map(|c| c.labels),
        setup,
    })
}

/// `--control-by COLUMN` must name a label column with at least two values.
fn check_control_column(cap: &Capture, col: &str) -> Result<(), ProbeError> {
    let t = &cap.frames;
    let Some(column) = t.task(col) else {
        return Err(input(format!(
            "{}: --control-by {col}: not a label column; the capture has: {}",
            cap.dir.display(),
            t.task_names().join(", ")
        )));
    };
    let mut values: Vec<u32> = column
        .codes
        .iter()
        .copied()
        .filter(|&c| c != UNLABELLED)
        .collect();
    values.sort_unstable();
    values.dedup();
    if values.len() < 2 {
        return Err(input(format!(
            "{}: --control-by {col}: expected a column with at least 2 values to serve as control types, found {} ({})",
            cap.dir.display(),
            values.len(),
            values
                .first()
                .map_or("none", |&v| column.classes[v as usize].as_str())
        )));
    }
    Ok(())
}

/// A task's control labels: one random label per type, drawn from the task's class
/// frequencies, with what the types are and how many occur.
struct ControlPlan {
    labels: Vec<u32>,
    by: String,
    types: usize,
}

/// The control task of task `name`: types from `--control-by` (the column's values) or, by
/// default, the phone in context (the task's own label in context when there is no phone
/// column); each item takes the type of its middle frame.
fn control_plan(
    cap: &Capture,
    idx: &UttIndex,
    opts: &ProbeOptions,
    name: &str,
    items: &Items,
    k: usize,
    seed: u64,
) -> Result<ControlPlan, ProbeError> {
    let t = &cap.frames;
    let (col, in_context) = match opts.control_by.as_deref() {
        Some(c) => (c, false),
        None if t.task("phone").is_some() => ("phone", true),
        None => (name, true),
    };
    let column = t
        .task(col)
        .ok_or_else(|| input(format!("--control-by {col}: not a label column")))?;
    let by = if in_context {
        format!("{col} in context")
    } else {
        col.to_string()
    };
    let (frame_type, _) = control::frame_types(column, idx, in_context);
    // Renumber the types the items use, in order of first use.
    let mut code = std::collections::HashMap::new();
    let item_type: Vec<u32> = (0..items.len())
        .map(|i| {
            let m = items.members(i);
            let ty = frame_type[m[m.len() / 2]];
            let next = code.len() as u32;
            *code.entry(ty).or_insert(next)
        })
        .collect();
    if code.len() < 2 {
        return Err(input(format!(
            "{}: task '{name}': the control types ({by}) take a single value over its items; name another column with --control-by, or use --no-control",
            cap.dir.display()
        )));
    }
    let mut freq = vec![0f64; k];
    for &c in &items.label {
        freq[c as usize] += 1.0;
    }
    Ok(ControlPlan {
        labels: control::control_labels(&item_type, &freq, seed),
        by,
        types: code.len(),
    })
}

/// The split kind for the task, refusing a task with no label and a speaker-disjoint split
/// of the speaker task.
fn checked_kind(
    cap: &Capture,
    task: &LabelTask,
    name: &str,
    opts: &ProbeOptions,
    speaker_task: bool,
) -> Result<SplitKind, ProbeError> {
    if task.codes.iter().all(|&c| c == UNLABELLED) {
        return Err(input(format!(
            "{}: task '{name}': every frame is unlabelled",
            cap.dir.display()
        )));
    }
    let kind = opts.split.resolve(speaker_task);
    if speaker_task && kind == SplitKind::Speaker {
        return Err(input(
            "--split speaker cannot be used for the speaker task: no test speaker would be in training; use --split auto or utterance".into(),
        ));
    }
    Ok(kind)
}

/// A speaker-disjoint split needs labelled items from at least two speakers.
pub(super) fn check_two_speakers(
    cap: &Capture,
    name: &str,
    items: &Items,
) -> Result<(), ProbeError> {
    let mut spk: Vec<u32> = items.speaker.clone();
    spk.sort_unstable();
    spk.dedup();
    if spk.len() < 2 {
        return Err(input(format!(
            "{}: task '{name}': a speaker-disjoint split needs at least 2 speakers with labelled frames, found {}; use --split utterance to split within speakers",
            cap.dir.display(),
            spk.len()
        )));
    }
    Ok(())
}

/// The groups (speakers or utterances, per `group`) in which each of `n_classes` classes
/// occurs.
fn groups_per_class(label: &[u32], group: &[u32], n_classes: usize) -> Vec<BTreeSet<u32>> {
    let mut out: Vec<BTreeSet<u32>> = vec![Default::default(); n_classes];
    for (&c, &g) in label.iter().zip(group) {
        out[c as usize].insert(g);
    }
    out
}

/// Classes (or speakers) the split cannot place on both sides: a class found in one speaker
/// only under a speaker-disjoint split, a speaker with one utterance for the speaker task.
/// Returns a keep flag per class and the dropped classes in words; refuses with `strict`.
#[allow(clippy::too_many_arguments)]
fn drop_unsplittable(
    t: &FrameTable,
    task: &LabelTask,
    name: &str,
    items: &Items,
    kind: SplitKind,
    speaker_task: bool,
    strict: bool,
    notes: &mut Vec<String>,
) -> Result<(Vec<bool>, Vec<String>), ProbeError> {
    let n_cls = task.classes.len();
    let mut keep_class = vec![true; n_cls];
    let mut dropped = Vec::new();
    let mut drop_class = |c: usize, msg: String, why: String| -> Result<(), ProbeError> {
        if strict {
            return Err(input(format!("{msg} (--strict)")));
        }
        notes.push(format!("warning: {msg}; dropped"));
        dropped.push(format!("{} ({why})", task.classes[c]));
        keep_class[c] = false;
        Ok(())
    };
    if kind == SplitKind::Speaker {
        for (c, set) in groups_per_class(&items.label, &items.speaker, n_cls)
            .iter()
            .enumerate()
        {
            if set.len() == 1 {
                let spk = &t.speakers[*set.iter().next().unwrap_or(&0) as usize];
                let msg = format!(
                    "task '{name}': class '{}' occurs only in speaker '{spk}', so a speaker-disjoint split cannot test it",
                    task.classes[c]
                );
                drop_class(c, msg, format!("only in speaker {spk}"))?;
            }
        }
    }
    if speaker_task && kind == SplitKind::Utterance {
        for (c, set) in groups_per_class(&items.label, &items.utt, n_cls)
            .iter()
            .enumerate()
        {
            if set.len() == 1 {
                let msg = format!(
                    "task 'speaker': speaker '{}' has a single utterance, so it cannot be on both sides of the split",
                    task.classes[c]
                );
                drop_class(c, msg, "single utterance".to_string())?;
            }
        }
    }
    Ok((keep_class, dropped))
}

/// Keep the items of kept classes that have items, renumbered `0..k`; refuse fewer than 2.
fn keep_usable_classes(
    cap: &Capture,
    task: &LabelTask,
    name: &str,
    items: Items,
    keep_class: &[bool],
) -> Result<(Items, Vec<String>), ProbeError> {
    let n_cls = task.classes.len();
    let mut counts = vec![0usize; n_cls];
    for &c in &items.label {
        counts[c as usize] += 1;
    }
    let mut new_code = vec![u32::MAX; n_cls];
    let mut classes = Vec::new();
    for c in 0..n_cls {
        if keep_class[c] && counts[c] > 0 {
            new_code[c] = classes.len() as u32;
            classes.push(task.classes[c].clone());
        }
    }
    if classes.len() < 2 {
        return Err(input(format!(
            "{}: task '{name}' has {} usable class{} ({}); a probe needs at least 2",
            cap.dir.display(),
            classes.len(),
            if classes.len() == 1 { "" } else { "es" },
            if classes.is_empty() {
                "none".to_string()
            } else {
                classes.join(", ")
            }
        )));
    }
    let keep: Vec<bool> = items
        .label
        .iter()
        .map(|&c| new_code[c as usize] != u32::MAX)
        .collect();
    let mut items = items.retain(&keep);
    for c in items.label.iter_mut() {
        *c = new_code[*c as usize];
    }
    Ok((items, classes))
}

/// The folds of `sp` with each side capped (stratified by class) at `--max-train-frames` and
/// `--max-test-frames`.
pub(super) fn capped_folds(
    sp: &Split,
    items: &Items,
    opts: &ProbeOptions,
    ti: usize,
    seed: u64,
) -> Vec<Fold> {
    sp.folds
        .iter()
        .enumerate()
        .map(|(fi, f)| Fold {
            train: sample::by_class(
                &f.train,
                &items.label,
                opts.max_train_frames,
                mix(seed, 200 + (ti * 1000 + fi) as u64),
            ),
            test: sample::by_class(
                &f.test,
                &items.label,
                opts.max_test_frames,
                mix(seed, 250 + (ti * 1000 + fi) as u64),
            ),
        })
        .collect()
}

/// Warn that a split by frame overstates accuracy: neighbouring frames of one utterance, which
/// are nearly alike, and the same speakers sit on both sides.
fn note_frame_split(kind: SplitKind, name: &str, notes: &mut Vec<String>) {
    if kind == SplitKind::Frame {
        notes.push(format!(
            "task '{name}' is split by frame: neighbouring frames of one utterance land on both \
             sides, so its accuracy is overstated; use --split auto (speaker-disjoint, \
             utterance-disjoint for the speaker task) for a score that holds on unseen speech"
        ));
    }
}

/// Note when the test cap left test items out.
/// The folds' leakage check ([`split::check_leakage`]); an internal error when they put one
/// group on both sides where the split promises they do not.
pub(super) fn check_no_leak(
    sp: &Split,
    folds: &[Fold],
    items: &Items,
    name: &str,
) -> Result<split::LeakageCheck, ProbeError> {
    let check = split::check_leakage(
        sp.kind,
        sp.every_speaker_both_sides,
        folds,
        &items.utt,
        &items.speaker,
    );
    if check.passed {
        Ok(check)
    } else {
        Err(ProbeError::Internal(format!(
            "task '{name}': split leaks: {check:?}"
        )))
    }
}

pub(super) fn note_test_cap(
    sp: &Split,
    folds: &[Fold],
    name: &str,
    opts: &ProbeOptions,
    notes: &mut Vec<String>,
) {
    let full_test: usize = sp.folds.iter().map(|f| f.test.len()).sum();
    let kept_test: usize = folds.iter().map(|f| f.test.len()).sum();
    if kept_test < full_test {
        notes.push(format!(
            "{name}: test items capped by --max-test-frames {}: {kept_test} of {full_test} \
             (stratified by class)",
            opts.max_test_frames
        ));
    }
}

/// What a split of this kind keeps apart, in words.
pub(super) fn group_word(kind: SplitKind) -> &'static str {
    match kind {
        SplitKind::Speaker => "speakers",
        SplitKind::Utterance => "utterances",
        _ => "items",
    }
}

/// Each fold's sides by name (speakers or utterances; none for other kinds) and size.
pub(super) fn fold_sides(
    kind: SplitKind,
    folds: &[Fold],
    items: &Items,
    t: &FrameTable,
) -> Vec<FoldSides> {
    let names_of = |ix: &[usize]| -> Vec<String> {
        let mut ids: Vec<u32> = match kind {
            SplitKind::Speaker => ix.iter().map(|&i| items.speaker[i]).collect(),
            SplitKind::Utterance => ix.iter().map(|&i| items.utt[i]).collect(),
            _ => vec![],
        };
        ids.sort_unstable();
        ids.dedup();
        ids.iter()
            .map(|&g| match kind {
                SplitKind::Speaker => t.speakers[g as usize].clone(),
                _ => t.utterances[g as usize].clone(),
            })
            .collect()
    };
    folds
        .iter()
        .map(|f| FoldSides {
            train: names_of(&f.train),
            test: names_of(&f.test),
            n_train: f.train.len(),
            n_test: f.test.len(),
        })
        .collect()
}
