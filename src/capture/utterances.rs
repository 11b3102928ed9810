//! `utterances.tsv` (which utterances a capture holds, in which order, their speakers and
//! any further per-utterance columns) and the conversion of time-aligned intervals
//! (`segments.tsv`, TextGrid tiers, CTM lines) into frame labels by the frame-centre rule.

use std::collections::HashMap;
use std::path::{Path, PathBuf};

use super::labels::{
    clean, read_tsv, Builder, Columns, FrameTable, LabelOptions, LabelTask, TaskBuilder, Timing,
    SEGMENT_END_SLACK_FRAMES,
};
use super::CaptureError;

/// The rows of `utterances.tsv`.
#[derive(Clone, Debug)]
pub struct UttList {
    /// The file.
    pub path: PathBuf,
    /// Utterance names in file order.
    pub names: Vec<String>,
    /// Speaker of each utterance.
    pub speakers: Vec<String>,
    /// Line of each utterance in the file.
    pub lines: Vec<usize>,
    /// The `frames` column, when there is one.
    pub frames: Option<Vec<u32>>,
    /// Further columns (name, one value per utterance): label tasks constant over an utterance.
    pub columns: Vec<(String, Vec<String>)>,
    index: HashMap<String, usize>,
}

impl UttList {
    /// Index of the utterance named `name`.
    pub fn find(&self, name: &str) -> Option<usize> {
        self.index.get(name).copied()
    }
}

fn column(path: &Path, header: &[String], name: &str) -> Result<usize, CaptureError> {
    header
        .iter()
        .position(|h| h == name)
        .ok_or_else(|| CaptureError::Table {
            path: path.to_path_buf(),
            row: 1,
            field: name.into(),
            expected: format!("a column named '{name}'"),
            found: format!("columns {}", header.join(", ")),
        })
}

/// Read `utterances.tsv`: each utterance once with a non-empty name and speaker; a `frames`
/// column, when present, holds whole numbers.
pub fn read_utterances(path: &Path, cols: &Columns) -> Result<UttList, CaptureError> {
    let (head, rows) = read_tsv(path)?;
    let ucol = column(path, &head, cols.utterance)?;
    let scol = column(path, &head, cols.speaker)?;
    let fcol = head.iter().position(|h| h == "frames");
    if rows.is_empty() {
        return Err(CaptureError::Table {
            path: path.to_path_buf(),
            row: 2,
            field: "rows".into(),
            expected: "one row per utterance".into(),
            found: "a header and no rows".into(),
        });
    }
    let extra: Vec<usize> = (0..head.len())
        .filter(|&c| c != ucol && c != scol && Some(c) != fcol)
        .collect();
    let mut ul = UttList {
        path: path.to_path_buf(),
        names: vec![],
        speakers: vec![],
        lines: vec![],
        frames: fcol.map(|_| vec![]),
        columns: extra.iter().map(|&c| (head[c].clone(), vec![])).collect(),
        index: HashMap::new(),
    };
    for (line, f) in &rows {
        let bad = |field: &str, expected: &str, found: String| CaptureError::Table {
            path: path.to_path_buf(),
            row: *line,
            field: field.into(),
            expected: expected.into(),
            found,
        };
        for (c, name) in [(ucol, cols.utterance), (scol, cols.speaker)] {
            if f[c].is_empty() {
                return Err(bad(name, "a non-empty name", "an empty field".into()));
            }
        }
        if let (Some(c), Some(v)) = (fcol, ul.frames.as_mut()) {
            let n: u32 = f[c]
                .parse()
                .map_err(|_| bad("frames", "a whole number of frames", format!("'{}'", f[c])))?;
            v.push(n);
        }
        if ul.index.contains_key(&f[ucol]) {
            let found = format!("'{}' a second time", f[ucol]);
            return Err(bad(cols.utterance, "each utterance once", found));
        }
        ul.index.insert(f[ucol].clone(), ul.names.len());
        ul.names.push(f[ucol].clone());
        ul.speakers.push(f[scol].clone());
        ul.lines.push(*line);
        for (k, &c) in extra.iter().enumerate() {
            ul.columns[k].1.push(f[c].clone());
        }
    }
    Ok(ul)
}

/// The `frames` column of `ul`, refusing a total beyond `max_frames` (the frames the layer
/// files hold) at the row where it is passed, so a lying column cannot make the reader
/// allocate or loop for billions of frames.
pub fn listed_frames(ul: &UttList, max_frames: usize) -> Result<Vec<u32>, CaptureError> {
    let (uh, _) = (ul.path.as_path(), ());
    let counts = ul.frames.clone().ok_or_else(|| CaptureError::Table {
        path: uh.to_path_buf(),
        row: 1,
        field: "frames".into(),
        expected: "a column named 'frames' (the layer files do not give per-utterance counts)"
            .into(),
        found: "no such column".into(),
    })?;
    let mut listed = 0usize;
    for (u, &n) in counts.iter().enumerate() {
        if listed.saturating_add(n as usize) > max_frames {
            return Err(CaptureError::Table {
                path: uh.to_path_buf(),
                row: ul.lines[u],
                field: "frames".into(),
                expected: format!(
                    "at most {max_frames} frames in all (the frames of the layer files)"
                ),
                found: format!("{} frames up to this row", listed as u64 + n as u64),
            });
        }
        listed += n as usize;
    }
    Ok(counts)
}

/// One labelled interval, in seconds, with the line it came from.
#[derive(Clone, Debug, PartialEq)]
pub struct Interval {
    /// Start time.
    pub start: f64,
    /// End time (after the start).
    pub end: f64,
    /// Label; empty means unlabelled.
    pub label: String,
    /// 1-based line of the file it came from.
    pub line: usize,
}

/// One utterance's intervals of one tier and the file they came from.
#[derive(Clone, Debug)]
pub struct UttIntervals {
    /// The file.
    pub file: PathBuf,
    /// The intervals.
    pub intervals: Vec<Interval>,
}

/// A label column given as intervals: for each utterance its intervals, or none (unlabelled).
#[derive(Clone, Debug)]
pub struct Tier {
    /// Task name.
    pub name: String,
    /// Per utterance of the list.
    pub per_utt: Vec<Option<UttIntervals>>,
}

/// How interval errors name their place: by row and field of a table (`segments.tsv`), or by
/// line of a text file (TextGrid, CTM).
#[derive(Clone, Copy, Debug)]
pub enum Place {
    /// A table with these start and end column names.
    Table(&'static str, &'static str),
    /// A text file.
    Text,
}

fn interval_error(
    place: Place,
    file: &Path,
    line: usize,
    end: bool,
    expected: String,
    found: String,
) -> CaptureError {
    match place {
        Place::Table(s, e) => CaptureError::Table {
            path: file.to_path_buf(),
            row: line,
            field: if end { e } else { s }.into(),
            expected,
            found,
        },
        Place::Text => CaptureError::Text {
            path: file.to_path_buf(),
            line,
            expected,
            found,
        },
    }
}

/// One utterance's intervals, sorted by start, must end within the utterance (with the
/// slack of [`SEGMENT_END_SLACK_FRAMES`]) and must not overlap.
fn check_intervals(
    place: Place,
    ui: &UttIntervals,
    utt: &str,
    n: u32,
    timing: Timing,
) -> Result<(), CaptureError> {
    let n = n as f64;
    let limit = (n + SEGMENT_END_SLACK_FRAMES) * timing.hop_s + timing.win_s - timing.hop_s;
    for iv in &ui.intervals {
        if iv.end > limit + 1e-9 {
            let expected = format!(
                "an end within utterance '{utt}' ({n} frames, {:.3} s at hop {} s)",
                n * timing.hop_s,
                timing.hop_s
            );
            return Err(interval_error(
                place,
                &ui.file,
                iv.line,
                true,
                expected,
                format!("{}", iv.end),
            ));
        }
    }
    for w in ui.intervals.windows(2) {
        if w[1].start < w[0].end - 1e-9 {
            let (what, other) = match place {
                Place::Table(..) => ("segment", "row"),
                Place::Text => ("interval", "line"),
            };
            let expected = format!(
                "a start at or after the end {} of the {what} on {other} {} ({what}s must not overlap)",
                w[0].end, w[0].line
            );
            return Err(interval_error(
                place,
                &ui.file,
                w[1].line,
                false,
                expected,
                format!("{}", w[1].start),
            ));
        }
    }
    Ok(())
}

/// Label the `n` frames of one utterance from its sorted intervals by the frame-centre rule.
fn label_frames(
    ivs: &[Interval],
    n: usize,
    timing: Timing,
    opts: &LabelOptions,
    out: &mut TaskBuilder,
) {
    let mut k = 0usize;
    for i in 0..n {
        let t = timing.centre(i);
        while k < ivs.len() && ivs[k].end <= t {
            k += 1;
        }
        let label = if k < ivs.len() && ivs[k].start <= t && t < ivs[k].end {
            clean(opts, &ivs[k].label)
        } else {
            None
        };
        out.push(label);
    }
}

/// Build the frame table of the utterances in `ul` with `counts[u]` frames each: first the
/// interval tiers (in order), then the constant columns of `utterances.tsv`, then `speaker`;
/// `opts.columns`, when given, keeps only the columns it names (each must exist).
pub fn build_table(
    ul: &UttList,
    counts: &[u32],
    mut tiers: Vec<Tier>,
    place: Place,
    timing: Timing,
    opts: &LabelOptions,
) -> Result<FrameTable, CaptureError> {
    let mut b = Builder::new();
    for (u, name) in ul.names.iter().enumerate() {
        let s = b.speaker(&ul.speakers[u]);
        b.add_utterance(name, s, counts[u]);
    }
    let total: usize = counts.iter().map(|&n| n as usize).sum();
    let mut frame_utt = Vec::with_capacity(total);
    let mut frame_pos = Vec::with_capacity(total);
    for (u, &n) in counts.iter().enumerate() {
        frame_utt.extend(std::iter::repeat_n(u as u32, n as usize));
        frame_pos.extend(0..n);
    }
    let mut tasks = Vec::new();
    for tier in &mut tiers {
        let mut tb = TaskBuilder::new();
        for (u, ui) in tier.per_utt.iter_mut().enumerate() {
            let n = counts[u] as usize;
            match ui {
                Some(ui) => {
                    ui.intervals.sort_by(|a, b| a.start.total_cmp(&b.start));
                    check_intervals(place, ui, &ul.names[u], counts[u], timing)?;
                    label_frames(&ui.intervals, n, timing, opts, &mut tb);
                }
                None => (0..n).for_each(|_| tb.push(None)),
            }
        }
        tasks.push(tb.finish(&tier.name));
    }
    for (name, values) in &ul.columns {
        let mut tb = TaskBuilder::new();
        for (u, v) in values.iter().enumerate() {
            let label = clean(opts, v);
            (0..counts[u]).for_each(|_| tb.push(label));
        }
        tasks.push(tb.finish(name));
    }
    check_unique(&ul.path, &tasks)?;
    let mut tasks = keep_columns(&ul.path, tasks, opts)?;
    tasks.push(super::labels::speaker_task(&b, &frame_utt));
    Ok(b.into_table(frame_utt, frame_pos, tasks))
}

/// Task names must differ from each other and from `speaker`.
fn check_unique(path: &Path, tasks: &[LabelTask]) -> Result<(), CaptureError> {
    for (i, t) in tasks.iter().enumerate() {
        if t.name == "speaker" || tasks[..i].iter().any(|o| o.name == t.name) {
            return Err(CaptureError::Invalid {
                path: path.to_path_buf(),
                what: "label columns".into(),
                expected: "each label column (tier, utterance column) named once, none 'speaker'"
                    .into(),
                found: format!("'{}' twice", t.name),
            });
        }
    }
    Ok(())
}

/// The tasks `opts.columns` names (all when empty); each named one must exist.
fn keep_columns(
    path: &Path,
    mut tasks: Vec<LabelTask>,
    opts: &LabelOptions,
) -> Result<Vec<LabelTask>, CaptureError> {
    if opts.columns.is_empty() {
        return Ok(tasks);
    }
    for want in &opts.columns {
        if want != "speaker" && !tasks.iter().any(|t| &t.name == want) {
            return Err(CaptureError::Invalid {
                path: path.to_path_buf(),
                what: "label columns".into(),
                expected: format!("a label column named '{want}'"),
                found: format!(
                    "columns {}",
                    tasks
                        .iter()
                        .map(|t| t.name.as_str())
                        .chain(["speaker"])
                        .collect::<Vec<_>>()
                        .join(", ")
                ),
            });
        }
    }
    tasks.retain(|t| opts.columns.contains(&t.name));
    Ok(tasks)
}
