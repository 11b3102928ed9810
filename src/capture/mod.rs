//! A capture: one model checkpoint's per-frame activations (one `.npy` per layer, or one 3-D
//! stack) and the labels of those frames (see `docs/design.md`, "Capture format").
//!
//! Opening a capture reads headers and label tables only; layer data stays memory-mapped and
//! is converted to `f32` one layer at a time when an analysis asks for it.

pub mod ctm;
pub mod kinds;
pub mod labels;
mod layout;
pub mod npy;
pub mod source;
mod sources;
pub mod textgrid;
pub mod utterances;

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

use ndarray::Array2;
use serde::{Deserialize, Serialize};

pub use kinds::{ColumnKind, NumericTask};
pub use labels::{FrameTable, LabelOptions, LabelTask, Timing, UNLABELLED};
pub use npy::{Dtype, NpyFile};
pub use source::LayerSource;

/// Errors while opening or reading a capture. Every variant is bad input (exit code 2)
/// except [`CaptureError::Io`] on a file that exists but cannot be read, which is still
/// reported as bad input because the user must fix it.
#[derive(Debug, thiserror::Error)]
pub enum CaptureError {
    /// A file could not be opened or read.
    #[error("{path}: {source}")]
    Io {
        /// The file.
        path: PathBuf,
        /// The OS error.
        source: std::io::Error,
    },
    /// A `.npy` file is malformed or unsupported.
    #[error("{path}: field '{field}': expected {expected}, found {found}")]
    Npy {
        /// The file.
        path: PathBuf,
        /// The header field or part of the file.
        field: String,
        /// What was expected.
        expected: String,
        /// What was found.
        found: String,
    },
    /// A label table is malformed.
    #[error("{path}: row {row}, field '{field}': expected {expected}, found {found}")]
    Table {
        /// The file.
        path: PathBuf,
        /// 1-based line number (the header is line 1).
        row: usize,
        /// Column or part of the row.
        field: String,
        /// What was expected.
        expected: String,
        /// What was found.
        found: String,
    },
    /// A text file (TextGrid, CTM) is malformed.
    #[error("{path}: line {line}: expected {expected}, found {found}")]
    Text {
        /// The file.
        path: PathBuf,
        /// 1-based line number.
        line: usize,
        /// What was expected.
        expected: String,
        /// What was found.
        found: String,
    },
    /// The parts of a capture do not agree with each other, or something is missing.
    #[error("{path}: {what}: expected {expected}, found {found}")]
    Invalid {
        /// The file or folder concerned.
        path: PathBuf,
        /// What was checked.
        what: String,
        /// What was expected.
        expected: String,
        /// What was found.
        found: String,
    },
}

impl CaptureError {
    /// A text label file (TextGrid, CTM) that does not parse at `line`.
    pub(crate) fn text(
        path: &Path,
        line: usize,
        expected: impl Into<String>,
        found: impl Into<String>,
    ) -> Self {
        CaptureError::Text {
            path: path.to_path_buf(),
            line,
            expected: expected.into(),
            found: found.into(),
        }
    }

    pub(crate) fn io(path: &Path, source: std::io::Error) -> Self {
        CaptureError::Io {
            path: path.to_path_buf(),
            source,
        }
    }

    fn invalid(
        path: &Path,
        what: &str,
        expected: impl Into<String>,
        found: impl Into<String>,
    ) -> Self {
        CaptureError::Invalid {
            path: path.to_path_buf(),
            what: what.into(),
            expected: expected.into(),
            found: found.into(),
        }
    }
}

/// Contents of the optional `capture.toml`. Every key has a default.
#[derive(Clone, Debug, Serialize, Deserialize)]
#[serde(deny_unknown_fields, default)]
pub struct CaptureConfig {
    /// Display name (default: the folder name).
    pub name: Option<String>,
    /// Frame shift in seconds.
    pub hop_s: f64,
    /// Analysis window in seconds (default: `hop_s`); frame centre = i * hop_s + win_s / 2.
    pub win_s: Option<f64>,
    /// Layer file pattern; `{}` stands for the layer number.
    pub layer_pattern: String,
    /// A single 3-D `(layers, frames, dim)` file used instead of per-layer files.
    pub stack_file: Option<String>,
    /// Label columns to use as tasks (default: every column but utterance and speaker).
    pub label_columns: Vec<String>,
    /// Name of the utterance column.
    pub utterance_column: String,
    /// Name of the speaker column.
    pub speaker_column: String,
    /// Task name given to the `label` column of `segments.tsv`, the phone tier of TextGrid
    /// files and the labels of `alignments.ctm`.
    pub segment_label: String,
    /// Name of the TextGrid tier that gives the phone column (default: a tier named
    /// `phones` or `phone`, in any case).
    pub phone_tier: Option<String>,
    /// Free-form notes (model, data, accuracy); shown by `inspect` and in reports.
    pub notes: BTreeMap<String, toml::Value>,
    /// Declared kinds of label columns (`continuous`, `categorical` or `ignore`); columns
    /// not named here are classified by their values.
    pub columns: BTreeMap<String, ColumnKind>,
}

impl Default for CaptureConfig {
    fn default() -> Self {
        CaptureConfig {
            name: None,
            hop_s: 0.02,
            win_s: None,
            layer_pattern: "layer_{}.npy".into(),
            stack_file: None,
            label_columns: vec![],
            utterance_column: "utterance".into(),
            speaker_column: "speaker".into(),
            segment_label: "phone".into(),
            phone_tier: None,
            notes: BTreeMap::new(),
            columns: BTreeMap::new(),
        }
    }
}

/// Options for opening a capture.
#[derive(Clone, Debug, Default)]
pub struct OpenOptions {
    /// Label cleaning (drop, merge, columns).
    pub labels: LabelOptions,
    /// Drop frames with NaN/Inf in any layer instead of failing (needs a full scan).
    pub allow_nonfinite: bool,
}

/// An opened capture.
#[derive(Debug)]
pub struct Capture {
    /// Folder of the capture.
    pub dir: PathBuf,
    /// Display name.
    pub name: String,
    /// Parsed capture.toml (defaults where absent).
    pub config: CaptureConfig,
    /// Layers in order of their number.
    pub layers: Vec<LayerSource>,
    /// Frame labels.
    pub frames: FrameTable,
    /// Frames dropped for NaN/Inf (only with `allow_nonfinite`).
    pub nonfinite_frames: Vec<usize>,
    /// Label source: `frames.tsv`, `utterances.tsv + segments.tsv`, ...
    pub label_source: String,
    /// Label files read (a TextGrid per utterance counts each).
    pub label_files: usize,
    /// Layout of the layer data in words.
    pub layout: String,
    /// Warnings found while opening (files left out, utterances without labels, non-finite
    /// values in continuous columns, ...).
    pub notes: Vec<String>,
}

/// Parse a pattern like `layer_{}.npy` against a file name, returning the layer number.
fn match_pattern(pattern: &str, name: &str) -> Option<usize> {
    let (pre, post) = pattern
        .split_once("{}")
        .or_else(|| pattern.split_once('*'))?;
    let mid = name.strip_prefix(pre)?.strip_suffix(post)?;
    if mid.is_empty() || !mid.bytes().all(|b| b.is_ascii_digit()) || mid.len() > 9 {
        return None;
    }
    mid.parse().ok()
}

impl Capture {
    /// Open a capture folder: parse capture.toml, find layer files, read label tables and
    /// check that everything agrees. Layer data is mapped, not read.
    pub fn open(dir: &Path, opts: &OpenOptions) -> Result<Capture, CaptureError> {
        let meta = std::fs::metadata(dir).map_err(|e| CaptureError::io(dir, e))?;
        if !meta.is_dir() {
            return Err(CaptureError::invalid(dir, "capture", "a folder", "a file"));
        }
        let config = read_config(dir)?;
        let name = config.name.clone().unwrap_or_else(|| {
            dir.canonicalize()
                .ok()
                .and_then(|p| p.file_name().map(|s| s.to_string_lossy().into_owned()))
                .unwrap_or_else(|| dir.display().to_string())
        });

        let found = find_all_layers(dir, &config)?;
        let mut label_opts = opts.labels.clone();
        if label_opts.columns.is_empty() {
            label_opts.columns = config.label_columns.clone();
        }
        let max_frames = found.layers.iter().map(|l| l.frames()).max().unwrap_or(0);
        let listed = found.listed.as_ref().map(|(ul, c)| (ul, c.as_slice()));
        // The layers hold `max_frames` frames; more in a table is a mismatch that the check
        // below reports, so the conversion need not go further.
        let labels = sources::read_labels(dir, &config, &label_opts, max_frames, listed)?;
        check_layers_match(&found.layers, labels.frames.n_frames(), &labels.source)?;
        let mut frames = labels.frames;
        let (source, first_row) = if labels.source == "frames.tsv" {
            (dir.join("frames.tsv"), Some(2))
        } else {
            (dir.join("capture.toml"), None)
        };
        let kind_notes = kinds::classify(&mut frames, &config.columns, &source, first_row)?;
        let mut notes = found.notes;
        notes.extend(labels.notes);
        notes.extend(kind_notes);
        let mut cap = Capture {
            dir: dir.to_path_buf(),
            name,
            config,
            layers: found.layers,
            frames,
            nonfinite_frames: vec![],
            label_source: labels.source,
            label_files: labels.files,
            layout: found.layout,
            notes,
        };
        if opts.allow_nonfinite {
            cap.mask_nonfinite_frames()?;
        }
        Ok(cap)
    }

    /// A capture of arrays held in memory: one 3-D (layers, frames, dim) array, or one 2-D
    /// (frames, dim) array per layer (numbered from 0), with their frame table. `name` stands
    /// for the folder in messages and records. Checked like a capture on disk.
    pub fn in_memory(
        name: &str,
        arrays: Vec<NpyFile>,
        frames: FrameTable,
        allow_nonfinite: bool,
    ) -> Result<Capture, CaptureError> {
        let dir = PathBuf::from(name);
        let layers = match arrays.len() {
            0 => {
                return Err(CaptureError::invalid(
                    &dir,
                    "layers",
                    "at least one array",
                    "none",
                ))
            }
            1 if arrays[0].header().shape.len() == 3 => {
                let one = arrays.into_iter().next().expect("one array");
                stack_sources(std::sync::Arc::new(one))?
            }
            _ => per_file_layers_of(arrays.into_iter().enumerate().collect())?,
        };
        check_layers_match(&layers, frames.n_frames(), "labels")?;
        let mut frames = frames;
        // Column kinds by the same rule as a folder's (no capture.toml to declare them).
        let label_notes = kinds::classify(&mut frames, &BTreeMap::new(), &dir, Some(1))?;
        let mut cap = Capture {
            dir,
            name: name.to_string(),
            config: CaptureConfig::default(),
            layers,
            frames,
            nonfinite_frames: vec![],
            label_source: "in memory".to_string(),
            label_files: 0,
            layout: "arrays in memory".to_string(),
            notes: label_notes,
        };
        if allow_nonfinite {
            cap.mask_nonfinite_frames()?;
        }
        Ok(cap)
    }

    /// Mark the frames with a non-finite value in any layer unlabelled in every task, and
    /// list them.
    fn mask_nonfinite_frames(&mut self) -> Result<(), CaptureError> {
        let bad = self.scan_nonfinite_frames()?;
        if bad.iter().any(|&b| b) {
            let mut frames = std::mem::replace(&mut self.frames, empty_table());
            frames.mask_frames(&bad);
            self.frames = frames;
            self.nonfinite_frames = bad
                .iter()
                .enumerate()
                .filter(|(_, &b)| b)
                .map(|(i, _)| i)
                .collect();
        }
        Ok(())
    }

    /// Number of frames.
    pub fn n_frames(&self) -> usize {
        self.frames.n_frames()
    }

    /// Index into `layers` of the layer numbered `id`.
    pub fn layer_index(&self, id: usize) -> Option<usize> {
        self.layers.iter().position(|l| l.id == id)
    }

    /// Read layer `i` (index into `layers`) as f32, checking every value is finite unless the
    /// capture was opened with `allow_nonfinite` (then those frames are zeroed; they carry no
    /// labels and are left out of analyses).
    pub fn read_layer(&self, i: usize) -> Result<Array2<f32>, CaptureError> {
        let mut m = self.layers[i].read_all()?;
        self.check_finite(i, &mut m, None)?;
        Ok(m)
    }

    /// Read the given frames (rows) of layer `i`.
    pub fn read_layer_rows(&self, i: usize, rows: &[usize]) -> Result<Array2<f32>, CaptureError> {
        let l = &self.layers[i];
        if let Some(&r) = rows.iter().find(|&&r| r >= l.frames()) {
            return Err(CaptureError::invalid(
                l.path(),
                "frame index",
                format!("< {}", l.frames()),
                format!("{r}"),
            ));
        }
        let mut m = l.read_rows(rows)?;
        self.check_finite(i, &mut m, Some(rows))?;
        Ok(m)
    }

    fn check_finite(
        &self,
        i: usize,
        m: &mut Array2<f32>,
        rows: Option<&[usize]>,
    ) -> Result<(), CaptureError> {
        let l = &self.layers[i];
        for (r, mut row) in m.outer_iter_mut().enumerate() {
            if let Some(c) = row.iter().position(|v| !v.is_finite()) {
                let frame = rows.map(|x| x[r]).unwrap_or(r);
                if self.nonfinite_frames.binary_search(&frame).is_ok() {
                    row.fill(0.0);
                    continue;
                }
                return Err(CaptureError::invalid(
                    l.path(),
                    &format!("frame {frame}, column {c}"),
                    "finite values (use --allow-nonfinite to drop such frames)",
                    format!("{}", row[c]),
                ));
            }
        }
        Ok(())
    }

    /// Full scan of every layer for NaN/Inf; returns a per-frame flag.
    pub fn scan_nonfinite_frames(&self) -> Result<Vec<bool>, CaptureError> {
        let mut bad = vec![false; self.n_frames()];
        for l in &self.layers {
            let m = l.read_all()?;
            for (r, row) in m.outer_iter().enumerate() {
                if row.iter().any(|v| !v.is_finite()) {
                    bad[r] = true;
                }
            }
        }
        Ok(bad)
    }

    /// Evenly spaced sample of up to `max_rows` frames of layer `i`, without the finiteness
    /// check (for scans that report problems rather than fail on them).
    pub fn sample_layer_raw(
        &self,
        i: usize,
        max_rows: usize,
    ) -> Result<(Vec<usize>, Array2<f32>), CaptureError> {
        self.layers[i].sample_rows(max_rows)
    }

    /// Number of distinct array files holding the layers.
    pub fn layer_files(&self) -> usize {
        let mut seen = std::collections::BTreeSet::new();
        self.layers
            .iter()
            .flat_map(|l| l.files())
            .filter(|(p, _)| seen.insert(p.to_path_buf()))
            .count()
    }

    /// Total size of the layer files on disk.
    pub fn bytes_on_disk(&self) -> u64 {
        let mut seen = std::collections::BTreeSet::new();
        self.layers
            .iter()
            .flat_map(|l| l.files())
            .filter(|(p, _)| seen.insert(p.to_path_buf()))
            .map(|(_, n)| n)
            .sum()
    }

    /// Resolve a layer selection (layer numbers) into indices into `layers`.
    pub fn select_layers(&self, sel: Option<&LayerSelection>) -> Result<Vec<usize>, CaptureError> {
        match sel {
            None => Ok((0..self.layers.len()).collect()),
            Some(s) => {
                let mut out = Vec::new();
                for &id in &s.0 {
                    let i = self.layer_index(id).ok_or_else(|| {
                        CaptureError::invalid(
                            &self.dir,
                            "--layers",
                            format!(
                                "layer numbers present in the capture ({})",
                                self.layers
                                    .iter()
                                    .map(|l| l.id.to_string())
                                    .collect::<Vec<_>>()
                                    .join(",")
                            ),
                            format!("{id}"),
                        )
                    })?;
                    out.push(i);
                }
                Ok(out)
            }
        }
    }
}

fn empty_table() -> FrameTable {
    FrameTable {
        utterances: vec![],
        utt_speaker: vec![],
        speakers: vec![],
        frame_utt: vec![],
        frame_pos: vec![],
        tasks: vec![],
        continuous: vec![],
    }
}

/// The folder's `capture.toml` (defaults when there is none), with a usable frame shift.
fn read_config(dir: &Path) -> Result<CaptureConfig, CaptureError> {
    let toml_path = dir.join("capture.toml");
    let config: CaptureConfig = if toml_path.exists() {
        let text =
            std::fs::read_to_string(&toml_path).map_err(|e| CaptureError::io(&toml_path, e))?;
        toml::from_str(&text).map_err(|e| {
            CaptureError::invalid(
                &toml_path,
                "capture.toml",
                "valid TOML with known keys",
                e.message().to_string(),
            )
        })?
    } else {
        CaptureConfig::default()
    };
    if !(config.hop_s.is_finite() && config.hop_s > 0.0) {
        return Err(CaptureError::invalid(
            &toml_path,
            "hop_s",
            "a frame shift > 0 seconds",
            format!("{}", config.hop_s),
        ));
    }
    Ok(config)
}

/// Agreement between layers and labels: every layer has the label table's `n` frames and
/// at least one feature.
fn check_layers_match(
    layers: &[LayerSource],
    n: usize,
    label_source: &str,
) -> Result<(), CaptureError> {
    for l in layers {
        if l.frames() != n {
            let first = &layers[0];
            let found = if first.frames() != l.frames() {
                format!(
                    "{} frames, while {} has {}",
                    l.frames(),
                    first.path().display(),
                    first.frames()
                )
            } else {
                format!("{} frames", l.frames())
            };
            return Err(CaptureError::invalid(
                l.path(),
                "frames",
                format!("{n} frames (rows of the label table {label_source})"),
                found,
            ));
        }
        if l.dim() == 0 {
            return Err(CaptureError::invalid(
                l.path(),
                "dim",
                "at least one feature",
                "0",
            ));
        }
    }
    Ok(())
}

/// The layers of a capture in any layout, with the utterance list and frame counts of a
/// per-utterance layout.
struct FoundLayers {
    layers: Vec<LayerSource>,
    listed: Option<(utterances::UttList, Vec<u32>)>,
    layout: String,
    notes: Vec<String>,
}

fn find_all_layers(dir: &Path, config: &CaptureConfig) -> Result<FoundLayers, CaptureError> {
    let Some(folders) = layout::detect(dir, config)? else {
        let layers = find_layers(dir, config)?;
        let layout = match layers.first() {
            Some(l) if l.n_files() == 1 && layers.len() > 1 && l.path() == layers[1].path() => {
                "one 3-D stack (layers, frames, dim)".to_string()
            }
            _ => format!("one file per layer ({} files)", layers.len()),
        };
        return Ok(FoundLayers {
            layers,
            listed: None,
            layout,
            notes: vec![],
        });
    };
    let utt_tsv = dir.join("utterances.tsv");
    if !utt_tsv.is_file() {
        return Err(CaptureError::invalid(
            dir,
            "utterances.tsv",
            "utterances.tsv listing the utterances of the per-utterance arrays",
            "no such file",
        ));
    }
    let cols = labels::Columns {
        utterance: &config.utterance_column,
        speaker: &config.speaker_column,
    };
    let ul = utterances::read_utterances(&utt_tsv, &cols)?;
    let pu = if folders.is_empty() {
        layout::stacks(dir, &ul)?
    } else {
        layout::folders(&ul, folders)?
    };
    if let Some(listed) = &ul.frames {
        if let Some(u) = (0..listed.len()).find(|&u| listed[u] != pu.counts[u]) {
            return Err(CaptureError::Table {
                path: utt_tsv,
                row: ul.lines[u],
                field: "frames".into(),
                expected: format!(
                    "{} frames, as the array file of utterance '{}' holds",
                    pu.counts[u], ul.names[u]
                ),
                found: format!("{}", listed[u]),
            });
        }
    }
    Ok(FoundLayers {
        layers: pu.layers,
        listed: Some((ul, pu.counts)),
        layout: pu.layout,
        notes: pu.notes,
    })
}

fn find_layers(dir: &Path, config: &CaptureConfig) -> Result<Vec<LayerSource>, CaptureError> {
    let (entries, npys) = list_layer_files(dir, config)?;
    let stack = match &config.stack_file {
        Some(s) => Some(dir.join(s)),
        None if entries.is_empty() && npys.len() == 1 => Some(npys[0].clone()),
        None => None,
    };
    if let Some(p) = stack.filter(|_| entries.is_empty() || config.stack_file.is_some()) {
        return stack_layers(&p);
    }
    if entries.is_empty() {
        return Err(CaptureError::invalid(
            dir,
            "layer files",
            format!(
                "files named like '{}' (or one 3-D .npy stack)",
                config.layer_pattern
            ),
            if npys.is_empty() {
                "no .npy files".to_string()
            } else {
                format!("{} other .npy files", npys.len())
            },
        ));
    }
    per_file_layers(entries)
}

/// Files that match the layer pattern, with their layer numbers.
type NumberedFiles = Vec<(usize, PathBuf)>;

/// The files of `dir` that match the layer pattern (with their layer numbers), and every
/// `.npy` file in it.
fn list_layer_files(
    dir: &Path,
    config: &CaptureConfig,
) -> Result<(NumberedFiles, Vec<PathBuf>), CaptureError> {
    let mut entries: NumberedFiles = Vec::new();
    let mut npys: Vec<PathBuf> = Vec::new();
    let rd = std::fs::read_dir(dir).map_err(|e| CaptureError::io(dir, e))?;
    for e in rd {
        let e = e.map_err(|e| CaptureError::io(dir, e))?;
        let name = e.file_name().to_string_lossy().into_owned();
        if name.ends_with(".npy") {
            npys.push(e.path());
        }
        if let Some(id) = match_pattern(&config.layer_pattern, &name) {
            entries.push((id, e.path()));
        }
    }
    Ok((entries, npys))
}

/// The layers of a single-file capture: one 3-D (layers, frames, dim) `.npy` stack.
fn stack_layers(p: &Path) -> Result<Vec<LayerSource>, CaptureError> {
    stack_sources(std::sync::Arc::new(NpyFile::open(p)?))
}

/// One source per layer of a 3-D (layers, frames, dim) array.
fn stack_sources(f: std::sync::Arc<NpyFile>) -> Result<Vec<LayerSource>, CaptureError> {
    let p = f.path().to_path_buf();
    let p = p.as_path();
    if f.header().shape.len() != 3 {
        return Err(CaptureError::invalid(
            p,
            "shape",
            "a 3-D (layers, frames, dim) array for a single-file capture",
            format!("{:?}", f.header().shape),
        ));
    }
    let (l, n, d) = f.layer_shape();
    // An empty stack can claim any number of layers (the data size is 0 bytes); refuse it
    // before making one source per claimed layer.
    if n == 0 || d == 0 {
        return Err(CaptureError::invalid(
            p,
            "shape",
            "at least one frame and one feature per layer",
            format!("{:?}", f.header().shape),
        ));
    }
    if l == 0 {
        return Err(CaptureError::invalid(
            p,
            "shape",
            "at least one layer",
            "0 layers",
        ));
    }
    Ok((0..l).map(|i| LayerSource::file(i, f.clone(), i)).collect())
}

/// The layers of a capture with one 2-D `.npy` file per layer, ordered by layer number (each
/// number once).
fn per_file_layers(mut entries: NumberedFiles) -> Result<Vec<LayerSource>, CaptureError> {
    entries.sort();
    for w in entries.windows(2) {
        if w[0].0 == w[1].0 {
            return Err(CaptureError::invalid(
                &w[1].1,
                "layer number",
                "one file per layer number",
                format!("layer {} also in {}", w[0].0, w[0].1.display()),
            ));
        }
    }
    let mut out = Vec::with_capacity(entries.len());
    for (id, p) in entries {
        out.push(source_2d(id, NpyFile::open(&p)?)?);
    }
    Ok(out)
}

/// One source per numbered 2-D (frames, dim) array.
fn per_file_layers_of(files: Vec<(usize, NpyFile)>) -> Result<Vec<LayerSource>, CaptureError> {
    files.into_iter().map(|(id, f)| source_2d(id, f)).collect()
}

/// The source of layer `id` held in a 2-D (frames, dim) array.
fn source_2d(id: usize, f: NpyFile) -> Result<LayerSource, CaptureError> {
    if f.header().shape.len() != 2 {
        return Err(CaptureError::invalid(
            f.path(),
            "shape",
            "a 2-D (frames, dim) array",
            format!("{}-D {:?}", f.header().shape.len(), f.header().shape),
        ));
    }
    Ok(LayerSource::file(id, std::sync::Arc::new(f), 0))
}

/// A set of layer numbers parsed from `0,4-8`.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct LayerSelection(pub Vec<usize>);

impl std::str::FromStr for LayerSelection {
    type Err = String;
    fn from_str(s: &str) -> Result<Self, String> {
        let mut out = Vec::new();
        for part in s.split(',').map(str::trim).filter(|p| !p.is_empty()) {
            let num = |x: &str| {
                x.trim()
                    .parse::<usize>()
                    .map_err(|_| format!("'{x}' is not a layer number"))
            };
            if let Some((a, b)) = part.split_once('-') {
                let (a, b) = (num(a)?, num(b)?);
                if b < a {
                    return Err(format!("range '{part}' runs backwards"));
                }
                if b - a > 100_000 {
                    return Err(format!("range '{part}' is too long"));
                }
                out.extend(a..=b);
            } else {
                out.push(num(part)?);
            }
        }
        if out.is_empty() {
            return Err("no layers given".into());
        }
        out.sort();
        out.dedup();
        Ok(LayerSelection(out))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn layer_pattern_takes_any_zero_padding() {
        assert_eq!(match_pattern("layer_{}.npy", "layer_007.npy"), Some(7));
        assert_eq!(match_pattern("layer_{}.npy", "layer_12.npy"), Some(12));
        assert_eq!(match_pattern("layer_{}.npy", "layer_x.npy"), None);
        assert_eq!(match_pattern("enc.*.npy", "enc.3.npy"), Some(3));
    }

    #[test]
    fn layer_selection_parses_ranges() {
        let s: LayerSelection = "0,4-6,2".parse().unwrap();
        assert_eq!(s.0, vec![0, 2, 4, 5, 6]);
        assert!("3-1".parse::<LayerSelection>().is_err());
        assert!("a".parse::<LayerSelection>().is_err());
    }
}
