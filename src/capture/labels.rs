//! Label tables: per-frame labels from `frames.tsv`, or time-aligned segments
//! (`utterances.tsv` + `segments.tsv`) turned into frame labels by the frame-centre rule:
//! frame i of an utterance has centre time `i * hop_s + win_s / 2` (with the default
//! `win_s = hop_s` this is `(i + 0.5) * hop_s`) and takes the label of the segment
//! `start_s <= t < end_s` that contains it; frames in no segment are unlabelled.

use std::collections::HashMap;
use std::path::Path;

use super::utterances::{
    build_table, listed_frames, read_utterances, Interval, Place, Tier, UttIntervals, UttList,
};
use super::CaptureError;

/// Code of a frame that has no label for a task.
pub const UNLABELLED: u32 = u32::MAX;

/// One label task (a column): class names and one code per frame.
#[derive(Clone, Debug)]
pub struct LabelTask {
    /// Column name (`phone`, `speaker`, ...).
    pub name: String,
    /// Class names, indexed by code, in order of first appearance.
    pub classes: Vec<String>,
    /// One code per frame; [`UNLABELLED`] where the frame has no label.
    pub codes: Vec<u32>,
}

impl LabelTask {
    /// Frames per class.
    pub fn class_counts(&self) -> Vec<usize> {
        let mut c = vec![0usize; self.classes.len()];
        for &k in &self.codes {
            if k != UNLABELLED {
                c[k as usize] += 1;
            }
        }
        c
    }

    /// Number of unlabelled frames.
    pub fn n_unlabelled(&self) -> usize {
        self.codes.iter().filter(|&&k| k == UNLABELLED).count()
    }
}

/// Everything known about the frames of a capture apart from the activations.
#[derive(Clone, Debug)]
pub struct FrameTable {
    /// Utterance names, in order of first appearance.
    pub utterances: Vec<String>,
    /// Speaker index of each utterance.
    pub utt_speaker: Vec<u32>,
    /// Speaker names, in order of first appearance.
    pub speakers: Vec<String>,
    /// Utterance index of each frame.
    pub frame_utt: Vec<u32>,
    /// Index of each frame within its utterance.
    pub frame_pos: Vec<u32>,
    /// Categorical label tasks; always includes `speaker` (last), plus every other
    /// categorical label column.
    pub tasks: Vec<LabelTask>,
    /// Continuous label columns (see [`super::kinds`]), filled when the capture is opened.
    pub continuous: Vec<super::kinds::NumericTask>,
}

impl FrameTable {
    /// Number of frames.
    pub fn n_frames(&self) -> usize {
        self.frame_utt.len()
    }

    /// Speaker index of each frame.
    pub fn frame_speaker(&self) -> Vec<u32> {
        self.frame_utt
            .iter()
            .map(|&u| self.utt_speaker[u as usize])
            .collect()
    }

    /// The task of that name.
    pub fn task(&self, name: &str) -> Option<&LabelTask> {
        self.tasks.iter().find(|t| t.name == name)
    }

    /// The tasks analysed when none are named: `phone` (when the capture has it), then
    /// `speaker`.
    pub fn default_tasks(&self) -> Vec<String> {
        let mut v = Vec::new();
        if self.task("phone").is_some() {
            v.push("phone".to_string());
        }
        v.push("speaker".to_string());
        v
    }

    /// Names of all tasks.
    pub fn task_names(&self) -> Vec<String> {
        self.tasks.iter().map(|t| t.name.clone()).collect()
    }

    /// Mark the frames flagged in `bad` unlabelled in every task (they stay in place).
    pub fn mask_frames(&mut self, bad: &[bool]) {
        for t in &mut self.tasks {
            for (c, &b) in t.codes.iter_mut().zip(bad) {
                if b {
                    *c = UNLABELLED;
                }
            }
        }
        for t in &mut self.continuous {
            for (v, &b) in t.values.iter_mut().zip(bad) {
                if b {
                    *v = f32::NAN;
                }
            }
        }
    }

    /// The continuous column of that name.
    pub fn numeric(&self, name: &str) -> Option<&super::kinds::NumericTask> {
        self.continuous.iter().find(|t| t.name == name)
    }
}

/// How label values are cleaned before analysis.
#[derive(Clone, Debug, Default)]
pub struct LabelOptions {
    /// Label values to treat as unlabelled (e.g. `sil`), in every task but `speaker`.
    pub drop: Vec<String>,
    /// Label merges `from -> to`, in every task but `speaker`.
    pub merge: HashMap<String, String>,
    /// Columns to keep as tasks (empty: all).
    pub columns: Vec<String>,
}

/// Column names that a frame table must or may use for the grouping columns.
pub struct Columns<'a> {
    /// Utterance column name.
    pub utterance: &'a str,
    /// Speaker column name.
    pub speaker: &'a str,
}

/// A parsed table: header fields and rows, each with its 1-based line number.
pub type Table = (Vec<String>, Vec<(usize, Vec<String>)>);

fn utf8_text<'a>(path: &Path, bytes: &'a [u8]) -> Result<&'a str, CaptureError> {
    let text = std::str::from_utf8(bytes).map_err(|e| {
        let line = bytes[..e.valid_up_to()]
            .iter()
            .filter(|&&b| b == b'\n')
            .count()
            + 1;
        CaptureError::Table {
            path: path.to_path_buf(),
            row: line,
            field: "text".into(),
            expected: "UTF-8 text".into(),
            found: format!(
                "a byte that is not UTF-8 at byte offset {}",
                e.valid_up_to()
            ),
        }
    })?;
    Ok(text.strip_prefix('\u{feff}').unwrap_or(text))
}

/// Stream a tab-separated table: calls `row(1, header)` first, then `row(line, fields)` for
/// every data row (blank lines and `#` comments skipped; line numbers are 1-based, the header
/// is line 1). Rows with the wrong number of fields are an error naming the line. Returns the
/// header.
pub fn for_each_row(
    path: &Path,
    mut row: impl FnMut(usize, &[&str]) -> Result<(), CaptureError>,
) -> Result<Vec<String>, CaptureError> {
    let bytes = std::fs::read(path).map_err(|e| CaptureError::io(path, e))?;
    let text = utf8_text(path, &bytes)?;
    let mut lines = text.split('\n').enumerate().filter_map(|(i, l)| {
        let l = l.strip_suffix('\r').unwrap_or(l);
        if l.is_empty() || l.starts_with('#') {
            None
        } else {
            Some((i + 1, l))
        }
    });
    let (_, head) = lines.next().ok_or_else(|| CaptureError::Table {
        path: path.to_path_buf(),
        row: 1,
        field: "header".into(),
        expected: "a header line of tab-separated column names".into(),
        found: "an empty file".into(),
    })?;
    let header: Vec<String> = head.split('\t').map(|s| s.trim().to_string()).collect();
    let mut fields: Vec<&str> = header.iter().map(String::as_str).collect();
    row(1, &fields)?;
    for (line, l) in lines {
        fields.clear();
        fields.extend(l.split('\t').map(str::trim));
        if fields.len() != header.len() {
            return Err(CaptureError::Table {
                path: path.to_path_buf(),
                row: line,
                field: "row".into(),
                expected: format!(
                    "{} tab-separated fields ({})",
                    header.len(),
                    header.join(", ")
                ),
                found: format!("{} fields", fields.len()),
            });
        }
        row(line, &fields)?;
    }
    Ok(header)
}

/// Read a (small) tab-separated table whole: header fields and rows with line numbers.
pub fn read_tsv(path: &Path) -> Result<Table, CaptureError> {
    let mut rows = Vec::new();
    let header = for_each_row(path, |line, f| {
        if line > 1 {
            rows.push((line, f.iter().map(|s| s.to_string()).collect()));
        }
        Ok(())
    })?;
    Ok((header, rows))
}

/// Interns the values of one task column as codes.
pub(crate) struct TaskBuilder {
    index: HashMap<String, u32>,
    classes: Vec<String>,
    codes: Vec<u32>,
}

impl TaskBuilder {
    pub(crate) fn new() -> Self {
        TaskBuilder {
            index: HashMap::new(),
            classes: Vec::new(),
            codes: Vec::new(),
        }
    }
    pub(crate) fn push(&mut self, v: Option<&str>) {
        let code = match v {
            None => UNLABELLED,
            Some(s) => match self.index.get(s) {
                Some(&k) => k,
                None => {
                    self.classes.push(s.to_string());
                    let k = (self.classes.len() - 1) as u32;
                    self.index.insert(s.to_string(), k);
                    k
                }
            },
        };
        self.codes.push(code);
    }
    pub(crate) fn finish(self, name: &str) -> LabelTask {
        LabelTask {
            name: name.to_string(),
            classes: self.classes,
            codes: self.codes,
        }
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

pub(crate) struct Builder {
    utterances: Vec<String>,
    utt_index: HashMap<String, u32>,
    utt_speaker: Vec<u32>,
    utt_len: Vec<u32>,
    speakers: Vec<String>,
    spk_index: HashMap<String, u32>,
}

impl Builder {
    pub(crate) fn new() -> Self {
        Builder {
            utterances: vec![],
            utt_index: HashMap::new(),
            utt_speaker: vec![],
            utt_len: vec![],
            speakers: vec![],
            spk_index: HashMap::new(),
        }
    }
    pub(crate) fn speaker(&mut self, s: &str) -> u32 {
        if let Some(&k) = self.spk_index.get(s) {
            return k;
        }
        self.speakers.push(s.to_string());
        let k = (self.speakers.len() - 1) as u32;
        self.spk_index.insert(s.to_string(), k);
        k
    }

    /// The utterance of one `frames.tsv` row (line `line`), added on its first row; its
    /// speaker must be the same on every row.
    fn frame_utterance(
        &mut self,
        path: &Path,
        line: usize,
        cols: &Columns,
        utt: &str,
        spk: &str,
    ) -> Result<u32, CaptureError> {
        if utt.is_empty() || spk.is_empty() {
            return Err(CaptureError::Table {
                path: path.to_path_buf(),
                row: line,
                field: if utt.is_empty() {
                    cols.utterance.into()
                } else {
                    cols.speaker.into()
                },
                expected: "a non-empty name".into(),
                found: "an empty field".into(),
            });
        }
        let s = self.speaker(spk);
        if let Some(&u) = self.utt_index.get(utt) {
            if self.utt_speaker[u as usize] != s {
                return Err(CaptureError::Table {
                    path: path.to_path_buf(),
                    row: line,
                    field: cols.speaker.into(),
                    expected: format!(
                        "speaker '{}' (as on earlier rows of utterance '{utt}')",
                        self.speakers[self.utt_speaker[u as usize] as usize]
                    ),
                    found: format!("'{spk}'"),
                });
            }
            return Ok(u);
        }
        Ok(self.add_utterance(utt, s, 0))
    }

    /// Add utterance `name` of speaker `s` with `len` frames; returns its index.
    pub(crate) fn add_utterance(&mut self, name: &str, s: u32, len: u32) -> u32 {
        self.utterances.push(name.to_string());
        self.utt_speaker.push(s);
        self.utt_len.push(len);
        let u = (self.utterances.len() - 1) as u32;
        self.utt_index.insert(name.to_string(), u);
        u
    }

    /// The finished table.
    pub(crate) fn into_table(
        self,
        frame_utt: Vec<u32>,
        frame_pos: Vec<u32>,
        tasks: Vec<LabelTask>,
    ) -> FrameTable {
        FrameTable {
            utterances: self.utterances,
            utt_speaker: self.utt_speaker,
            speakers: self.speakers,
            frame_utt,
            frame_pos,
            tasks,
            continuous: vec![],
        }
    }
}

pub(crate) fn clean<'a>(opts: &'a LabelOptions, v: &'a str) -> Option<&'a str> {
    if v.is_empty() {
        return None;
    }
    let v = opts.merge.get(v).map(String::as_str).unwrap_or(v);
    if opts.drop.iter().any(|d| d == v) {
        None
    } else {
        Some(v)
    }
}

pub(crate) fn speaker_task(b: &Builder, frame_utt: &[u32]) -> LabelTask {
    LabelTask {
        name: "speaker".into(),
        classes: b.speakers.clone(),
        codes: frame_utt
            .iter()
            .map(|&u| b.utt_speaker[u as usize])
            .collect(),
    }
}

/// Read `frames.tsv`: one row per frame with utterance, speaker and label columns.
pub fn read_frames_tsv(
    path: &Path,
    cols: &Columns,
    opts: &LabelOptions,
) -> Result<FrameTable, CaptureError> {
    let mut b = Builder::new();
    let mut frame_utt = Vec::new();
    let mut frame_pos = Vec::new();
    let (mut ucol, mut scol) = (0usize, 0usize);
    let mut task_cols: Vec<usize> = Vec::new();
    let mut builders: Vec<TaskBuilder> = Vec::new();
    let header = for_each_row(path, |line, f| {
        if line == 1 {
            let head: Vec<String> = f.iter().map(|s| s.to_string()).collect();
            (ucol, scol, task_cols) = frame_columns(path, &head, cols, opts)?;
            builders = task_cols.iter().map(|_| TaskBuilder::new()).collect();
            return Ok(());
        }
        let u = b.frame_utterance(path, line, cols, f[ucol], f[scol])?;
        frame_utt.push(u);
        frame_pos.push(b.utt_len[u as usize]);
        b.utt_len[u as usize] += 1;
        for (tb, &c) in builders.iter_mut().zip(task_cols.iter()) {
            tb.push(clean(opts, f[c]));
        }
        Ok(())
    })?;
    if frame_utt.is_empty() {
        return Err(CaptureError::Table {
            path: path.to_path_buf(),
            row: 2,
            field: "rows".into(),
            expected: "one row per frame".into(),
            found: "a header and no rows".into(),
        });
    }
    let mut tasks: Vec<LabelTask> = builders
        .into_iter()
        .zip(&task_cols)
        .map(|(tb, &c)| tb.finish(&header[c]))
        .collect();
    tasks.push(speaker_task(&b, &frame_utt));
    Ok(b.into_table(frame_utt, frame_pos, tasks))
}

/// Per-frame columns held in memory: the utterance and speaker of every frame, and label
/// columns (None: unlabelled), in frame order.
#[derive(Clone, Debug, Default)]
pub struct FrameColumns {
    /// Utterance name of each frame.
    pub utterance: Vec<String>,
    /// Speaker name of each frame.
    pub speaker: Vec<String>,
    /// Label columns: name and one value per frame.
    pub labels: Vec<(String, Vec<Option<String>>)>,
}

/// The frame table of columns held in memory, built exactly as [`read_frames_tsv`] builds it
/// from the same rows. `source` names the columns in messages, whose `row` is the 1-based
/// frame number.
pub fn frames_from_columns(
    source: &Path,
    c: &FrameColumns,
    opts: &LabelOptions,
) -> Result<FrameTable, CaptureError> {
    let n = c.utterance.len();
    let cols = Columns {
        utterance: "utterance",
        speaker: "speaker",
    };
    let mut head = vec!["utterance".to_string(), "speaker".to_string()];
    head.extend(c.labels.iter().map(|(name, _)| name.clone()));
    let lengths = std::iter::once(("speaker", c.speaker.len()))
        .chain(c.labels.iter().map(|(name, v)| (name.as_str(), v.len())));
    for (name, len) in lengths {
        if len != n {
            return Err(CaptureError::Table {
                path: source.to_path_buf(),
                row: len.min(n) + 1,
                field: name.to_string(),
                expected: format!("{n} values, one per frame"),
                found: format!("{len} values"),
            });
        }
    }
    let mut sorted = head.clone();
    sorted.sort();
    if let Some(w) = sorted.windows(2).find(|w| w[0] == w[1]) {
        return Err(CaptureError::Table {
            path: source.to_path_buf(),
            row: 1,
            field: w[0].clone(),
            expected: "each column name once (utterance and speaker are the groups)".into(),
            found: format!("'{}' twice", w[0]),
        });
    }
    let (_, _, task_cols) = frame_columns(source, &head, &cols, opts)?;
    let mut b = Builder::new();
    let (mut frame_utt, mut frame_pos) = (Vec::with_capacity(n), Vec::with_capacity(n));
    let mut builders: Vec<TaskBuilder> = task_cols.iter().map(|_| TaskBuilder::new()).collect();
    for i in 0..n {
        let u = b.frame_utterance(source, i + 1, &cols, &c.utterance[i], &c.speaker[i])?;
        frame_utt.push(u);
        frame_pos.push(b.utt_len[u as usize]);
        b.utt_len[u as usize] += 1;
        for (tb, &col) in builders.iter_mut().zip(task_cols.iter()) {
            let v = c.labels[col - 2].1[i].as_deref().unwrap_or("");
            tb.push(clean(opts, v));
        }
    }
    if n == 0 {
        return Err(CaptureError::Table {
            path: source.to_path_buf(),
            row: 1,
            field: "rows".into(),
            expected: "one row per frame".into(),
            found: "no frames".into(),
        });
    }
    let mut tasks: Vec<LabelTask> = builders
        .into_iter()
        .zip(&task_cols)
        .map(|(tb, &col)| tb.finish(&head[col]))
        .collect();
    tasks.push(speaker_task(&b, &frame_utt));
    Ok(b.into_table(frame_utt, frame_pos, tasks))
}

/// The utterance and speaker columns of a `frames.tsv` header and its task columns (all the
/// others, or those `opts.columns` names, each of which must exist).
fn frame_columns(
    path: &Path,
    head: &[String],
    cols: &Columns,
    opts: &LabelOptions,
) -> Result<(usize, usize, Vec<usize>), CaptureError> {
    let ucol = column(path, head, cols.utterance)?;
    let scol = column(path, head, cols.speaker)?;
    let mut task_cols: Vec<usize> = (0..head.len())
        .filter(|&c| c != ucol && c != scol)
        .collect();
    if !opts.columns.is_empty() {
        for want in &opts.columns {
            if want != "speaker" {
                column(path, head, want)?;
            }
        }
        task_cols.retain(|&c| opts.columns.contains(&head[c]));
    }
    Ok((ucol, scol, task_cols))
}

/// Frame timing for the segment rule.
#[derive(Clone, Copy, Debug)]
pub struct Timing {
    /// Frame shift in seconds.
    pub hop_s: f64,
    /// Analysis window in seconds; the frame centre is `i * hop_s + win_s / 2`.
    pub win_s: f64,
}

impl Timing {
    /// Centre time of frame `i`.
    pub fn centre(&self, i: usize) -> f64 {
        i as f64 * self.hop_s + self.win_s / 2.0
    }
}

/// Slack allowed past an utterance's last frame for segment ends, in frame shifts;
/// front ends drop a partial window at the end, so aligner times run a little past the frames.
pub const SEGMENT_END_SLACK_FRAMES: f64 = 3.0;

/// Read `utterances.tsv` + `segments.tsv` and convert segments to frame labels.
pub fn read_segments(
    utt_path: &Path,
    seg_path: &Path,
    cols: &Columns,
    label_name: &str,
    timing: Timing,
    opts: &LabelOptions,
) -> Result<FrameTable, CaptureError> {
    read_segments_within(
        utt_path,
        seg_path,
        cols,
        label_name,
        timing,
        opts,
        usize::MAX,
    )
}

/// [`read_segments`] that refuses, before allocating anything per frame, an `utterances.tsv`
/// whose frame counts add up to more than `max_frames` (the frames the layer files hold), so
/// a lying `frames` column cannot make the reader allocate or loop for billions of frames.
pub fn read_segments_within(
    utt_path: &Path,
    seg_path: &Path,
    cols: &Columns,
    label_name: &str,
    timing: Timing,
    opts: &LabelOptions,
    max_frames: usize,
) -> Result<FrameTable, CaptureError> {
    let ul = read_utterances(utt_path, cols)?;
    let counts = listed_frames(&ul, max_frames)?;
    segments_table(&ul, &counts, seg_path, label_name, timing, opts)
}

/// The frame table of the utterances of `ul` (with `counts` frames each) labelled from
/// `segments.tsv`.
pub fn segments_table(
    ul: &UttList,
    counts: &[u32],
    seg_path: &Path,
    label_name: &str,
    timing: Timing,
    opts: &LabelOptions,
) -> Result<FrameTable, CaptureError> {
    let cols = Columns {
        utterance: "utterance",
        speaker: "speaker",
    };
    let per_utt = read_segment_rows(ul, seg_path, &cols)?;
    let tier = Tier {
        name: label_name.to_string(),
        per_utt: per_utt
            .into_iter()
            .map(|intervals| {
                Some(UttIntervals {
                    file: seg_path.to_path_buf(),
                    intervals,
                })
            })
            .collect(),
    };
    build_table(
        ul,
        counts,
        vec![tier],
        Place::Table("start_s", "end_s"),
        timing,
        opts,
    )
}

/// Read `segments.tsv`, grouped per utterance of `ul`: every row names a listed utterance and
/// has times in seconds and an end after its start.
fn read_segment_rows(
    ul: &UttList,
    seg_path: &Path,
    cols: &Columns,
) -> Result<Vec<Vec<Interval>>, CaptureError> {
    let (sh, srows) = read_tsv(seg_path)?;
    let su = column(seg_path, &sh, cols.utterance)?;
    let ss = column(seg_path, &sh, "start_s")?;
    let se = column(seg_path, &sh, "end_s")?;
    let sl = column(seg_path, &sh, "label")?;
    let mut per_utt: Vec<Vec<Interval>> = vec![Vec::new(); ul.names.len()];
    for (line, f) in &srows {
        let u = ul.find(&f[su]).ok_or_else(|| CaptureError::Table {
            path: seg_path.to_path_buf(),
            row: *line,
            field: cols.utterance.into(),
            expected: format!("an utterance listed in {}", ul.path.display()),
            found: format!("'{}'", f[su]),
        })?;
        let num = |c: usize, name: &str| seconds(seg_path, *line, name, &f[c]);
        let (s, e) = (num(ss, "start_s")?, num(se, "end_s")?);
        if e <= s {
            return Err(CaptureError::Table {
                path: seg_path.to_path_buf(),
                row: *line,
                field: "end_s".into(),
                expected: format!("an end after the start {s}"),
                found: format!("{e}"),
            });
        }
        per_utt[u].push(Interval {
            start: s,
            end: e,
            label: f[sl].clone(),
            line: *line,
        });
    }
    Ok(per_utt)
}

/// A finite time in seconds, >= 0, from field `name` of row `line`.
fn seconds(path: &Path, line: usize, name: &str, v: &str) -> Result<f64, CaptureError> {
    let t: f64 = v.parse().map_err(|_| CaptureError::Table {
        path: path.to_path_buf(),
        row: line,
        field: name.into(),
        expected: "a time in seconds".into(),
        found: format!("'{v}'"),
    })?;
    if !t.is_finite() || t < 0.0 {
        return Err(CaptureError::Table {
            path: path.to_path_buf(),
            row: line,
            field: name.into(),
            expected: "a finite time >= 0".into(),
            found: format!("'{v}'"),
        });
    }
    Ok(t)
}

/// Read a two-column label merge map (`from<TAB>to`, optional header `from<TAB>to`).
pub fn read_merge_map(path: &Path) -> Result<HashMap<String, String>, CaptureError> {
    let text = std::fs::read(path).map_err(|e| CaptureError::io(path, e))?;
    let text = String::from_utf8(text).map_err(|_| CaptureError::Table {
        path: path.to_path_buf(),
        row: 1,
        field: "text".into(),
        expected: "UTF-8 text".into(),
        found: "bytes that are not UTF-8".into(),
    })?;
    let mut out = HashMap::new();
    for (i, line) in text.lines().enumerate() {
        let line = line.trim_end_matches('\r');
        if line.trim().is_empty() || line.starts_with('#') || (i == 0 && line == "from\tto") {
            continue;
        }
        let f: Vec<&str> = line.split('\t').collect();
        if f.len() != 2 || f[0].is_empty() {
            return Err(CaptureError::Table {
                path: path.to_path_buf(),
                row: i + 1,
                field: "row".into(),
                expected: "two tab-separated fields: from, to".into(),
                found: format!("{} fields", f.len()),
            });
        }
        out.insert(f[0].to_string(), f[1].to_string());
    }
    Ok(out)
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::io::Write;

    fn write(dir: &Path, name: &str, text: &str) -> std::path::PathBuf {
        let p = dir.join(name);
        std::fs::File::create(&p)
            .unwrap()
            .write_all(text.as_bytes())
            .unwrap();
        p
    }

    const COLS: Columns = Columns {
        utterance: "utterance",
        speaker: "speaker",
    };

    /// Hand-worked example (common practice: 25 ms window, 10 ms hop). Frame i covers
    /// [10i, 10i + 25) ms, so its centre is 10i + 12.5 ms:
    /// centres 12.5, 22.5, 32.5, 42.5, 52.5, 62.5 ms for frames 0..6.
    /// Segments: sil [0, 30) ms, a [30, 50) ms, s [50, 60) ms, gap after 60 ms.
    /// Frame 0 (12.5) sil, 1 (22.5) sil, 2 (32.5) a, 3 (42.5) a, 4 (52.5) s, 5 (62.5) none.
    #[test]
    fn segments_map_to_frames_by_centre_time() {
        let d = tempfile::tempdir().unwrap();
        let u = write(
            d.path(),
            "utterances.tsv",
            "utterance\tspeaker\tframes\nu1\tA\t6\n",
        );
        let s = write(
            d.path(),
            "segments.tsv",
            "utterance\tstart_s\tend_s\tlabel\nu1\t0.000\t0.030\tsil\nu1\t0.030\t0.050\ta\nu1\t0.050\t0.060\ts\n",
        );
        let t = read_segments(
            &u,
            &s,
            &COLS,
            "phone",
            Timing {
                hop_s: 0.010,
                win_s: 0.025,
            },
            &LabelOptions::default(),
        )
        .unwrap();
        let ph = t.task("phone").unwrap();
        let got: Vec<&str> = ph
            .codes
            .iter()
            .map(|&c| {
                if c == UNLABELLED {
                    "-"
                } else {
                    ph.classes[c as usize].as_str()
                }
            })
            .collect();
        assert_eq!(got, vec!["sil", "sil", "a", "a", "s", "-"]);
    }

    #[test]
    fn overlapping_segments_name_the_row() {
        let d = tempfile::tempdir().unwrap();
        let u = write(
            d.path(),
            "utterances.tsv",
            "utterance\tspeaker\tframes\nu1\tA\t6\n",
        );
        let s = write(
            d.path(),
            "segments.tsv",
            "utterance\tstart_s\tend_s\tlabel\nu1\t0.0\t0.03\tsil\nu1\t0.02\t0.05\ta\n",
        );
        let e = read_segments(
            &u,
            &s,
            &COLS,
            "phone",
            Timing {
                hop_s: 0.01,
                win_s: 0.01,
            },
            &LabelOptions::default(),
        )
        .unwrap_err();
        let m = e.to_string();
        assert!(m.contains("row 3") && m.contains("overlap"), "{m}");
    }

    #[test]
    fn wrong_field_count_names_the_row() {
        let d = tempfile::tempdir().unwrap();
        let p = write(
            d.path(),
            "frames.tsv",
            "utterance\tspeaker\tphone\nu\ts\ta\nu\ts\n",
        );
        let m = read_frames_tsv(&p, &COLS, &LabelOptions::default())
            .unwrap_err()
            .to_string();
        assert!(
            m.contains("row 3") && m.contains("3 tab-separated fields"),
            "{m}"
        );
    }

    #[test]
    fn drop_and_merge_apply_to_labels_not_speakers() {
        let d = tempfile::tempdir().unwrap();
        let p = write(
            d.path(),
            "frames.tsv",
            "utterance\tspeaker\tphone\nu\tsil\tsil\nu\tsil\taa\nu\tsil\tao\n",
        );
        let mut o = LabelOptions {
            drop: vec!["sil".into()],
            ..Default::default()
        };
        o.merge.insert("ao".into(), "aa".into());
        let t = read_frames_tsv(&p, &COLS, &o).unwrap();
        let ph = t.task("phone").unwrap();
        assert_eq!(ph.classes, vec!["aa".to_string()]);
        assert_eq!(ph.codes, vec![UNLABELLED, 0, 0]);
        assert_eq!(t.task("speaker").unwrap().classes, vec!["sil".to_string()]);
    }
}
