//! The report: one self-contained `index.html` that gathers what every analysis found about
//! one or two captures — a capture summary, a headline figure of probe accuracy and purity
//! across layers (phone against speaker, with the layer where they cross marked), the layer
//! maps with an interactive explorer, the checkpoint comparison (CKA, Kornblith et al. 2019,
//! and probe deltas with McNemar's test), the tables behind every figure and a methods
//! paragraph written from the run itself.
//!
//! The page generator ([`render`]) is a pure function of typed inputs ([`ReportInputs`]);
//! [`run`] is the pipeline behind `voxstrata report`: validate the captures, run the
//! analyses into the output folder, read their records back and write the page and
//! `run.json`. The page reads only records and embeddings; it never recomputes.

pub mod html;

use std::io::Read;
use std::path::{Path, PathBuf};
use std::time::Instant;

use ndarray::Array2;
use serde::{Deserialize, Serialize};
use sha2::{Digest, Sha256};

use crate::capture::{Capture, UNLABELLED};
use crate::inspect::Summary;
use crate::output::{self, OutputError};
use crate::{CommonOptions, OpenOptions, Progress};

pub use html::render;

/// Errors of the report stage.
#[derive(Debug, thiserror::Error)]
pub enum ReportError {
    /// More captures than the report can compare.
    #[error("report takes one or two captures, found {found}: {names}")]
    TooManyCaptures {
        /// How many were given.
        found: usize,
        /// Their paths.
        names: String,
    },
    /// No capture was given and the shipped demo is not where it should be.
    #[error("no capture given and the shipped demo was not found (looked in {searched}); give a capture folder or build the demo with `voxstrata demo --out demo_activations`")]
    DemoMissing {
        /// Folders searched.
        searched: String,
    },
    /// Two captures that cannot be compared frame by frame.
    #[error("{a} and {b}: expected two captures of the same frames, found {found}")]
    Mismatch {
        /// First capture.
        a: String,
        /// Second capture.
        b: String,
        /// What differs.
        found: String,
    },
    /// An analysis output could not be read back (written by this run, so internal).
    #[error("{path}: cannot read analysis output: {message}")]
    Read {
        /// The file.
        path: PathBuf,
        /// What went wrong.
        message: String,
    },
    /// An input file could not be hashed.
    #[error("{path}: cannot read for hashing: {source}")]
    Hash {
        /// The file.
        path: PathBuf,
        /// The OS error.
        source: std::io::Error,
    },
    /// Page data could not be encoded.
    #[error("cannot encode report data: {0}")]
    Encode(String),
}

impl ReportError {
    /// Whether the user can fix this (exit code 2) rather than an internal failure (1).
    pub fn is_input(&self) -> bool {
        matches!(
            self,
            ReportError::TooManyCaptures { .. }
                | ReportError::DemoMissing { .. }
                | ReportError::Mismatch { .. }
        )
    }
}

/// One `probe` record, as `probe.json` holds it.
#[derive(Clone, Debug, Default, Serialize, Deserialize)]
#[serde(default)]
pub struct ProbeRecord {
    /// Layer number.
    pub layer: usize,
    /// Label task (`phone`, `speaker`, ...).
    pub task: String,
    /// Pooling (`frame`, `segment`, `utterance`).
    pub pooling: String,
    /// Split (`speaker`, `utterance`, `frame`).
    pub split: String,
    /// Training examples.
    pub n_train: usize,
    /// Test examples.
    pub n_test: usize,
    /// Classes.
    pub n_classes: usize,
    /// Test accuracy.
    pub accuracy: Option<f64>,
    /// Lower end of the accuracy's confidence interval.
    pub ci_low: Option<f64>,
    /// Upper end of the accuracy's confidence interval.
    pub ci_high: Option<f64>,
    /// Macro-averaged F1.
    pub macro_f1: Option<f64>,
    /// Balanced accuracy.
    pub balanced_accuracy: Option<f64>,
    /// Accuracy of always guessing the most frequent training class.
    pub majority_baseline: Option<f64>,
    /// Accuracy on the control task (Hewitt & Liang 2019).
    pub control_accuracy: Option<f64>,
    /// Accuracy minus control accuracy.
    pub selectivity: Option<f64>,
    /// Inverse L2 penalty chosen by the penalty search.
    pub c: Option<f64>,
}

/// One `purity` record, as `purity.json` holds it.
#[derive(Clone, Debug, Default, Serialize, Deserialize)]
#[serde(default)]
pub struct PurityRecord {
    /// Layer number.
    pub layer: usize,
    /// Label task the purity is measured against.
    pub label: String,
    /// Silhouette (Rousseeuw 1987).
    pub silhouette: Option<f64>,
    /// k-NN label purity in the layer's own space.
    pub knn_purity: Option<f64>,
    /// k-NN label purity in the 2-D map.
    pub knn_purity_2d: Option<f64>,
    /// Trustworthiness of the map (Venna & Kaski 2001).
    pub trustworthiness: Option<f64>,
    /// Cluster purity (Hsu et al. 2021).
    pub cluster_purity: Option<f64>,
    /// Label purity (Hsu et al. 2021).
    pub label_purity: Option<f64>,
    /// Phone-normalised mutual information (Hsu et al. 2021).
    pub pnmi: Option<f64>,
    /// Between-class share of the variance.
    pub variance_ratio: Option<f64>,
}

/// One CKA record of `compare.json`.
#[derive(Clone, Debug, Default, Serialize, Deserialize)]
#[serde(default)]
pub struct CkaRecord {
    /// Layer of the first capture.
    pub layer_a: usize,
    /// Layer of the second capture.
    pub layer_b: usize,
    /// Linear CKA.
    pub cka: Option<f64>,
    /// Kernel (`linear` or `rbf`).
    pub kernel: String,
    /// HSIC estimator (`full` or `minibatch`).
    pub estimator: String,
    /// Paired frames the value was computed on.
    pub n_frames: usize,
}

/// One probe delta of `compare.json`.
#[derive(Clone, Debug, Default, Serialize, Deserialize)]
#[serde(default)]
pub struct ProbeDelta {
    /// Layer number.
    pub layer: usize,
    /// Label task.
    pub task: String,
    /// Accuracy on the first capture.
    pub accuracy_a: Option<f64>,
    /// Accuracy on the second capture.
    pub accuracy_b: Option<f64>,
    /// `accuracy_b - accuracy_a`.
    pub delta: Option<f64>,
    /// Lower end of the paired speaker-bootstrap 95% interval of `delta`.
    pub ci_low: Option<f64>,
    /// Upper end of that interval.
    pub ci_high: Option<f64>,
    /// McNemar's test p-value on the paired test predictions.
    pub mcnemar_p: Option<f64>,
    /// Test rows right on the first capture only.
    pub b: Option<u64>,
    /// Test rows right on the second capture only.
    pub c: Option<u64>,
    /// `exact` (binomial) or `chi_square`.
    pub mcnemar_method: String,
    /// Test rows.
    pub n_test: usize,
}

/// Comparison of two captures.
#[derive(Clone, Debug, Default)]
pub struct CompareInputs {
    /// Name of the first capture.
    pub name_a: String,
    /// Name of the second capture.
    pub name_b: String,
    /// CKA for every layer pair.
    pub cka: Vec<CkaRecord>,
    /// Probe accuracy differences per layer and task.
    pub probe_delta: Vec<ProbeDelta>,
}

/// A label column for the sampled frames of a map: class names and one code per frame.
#[derive(Clone, Debug)]
pub struct LabelColumn {
    /// Task name.
    pub name: String,
    /// Class names.
    pub classes: Vec<String>,
    /// One code per sampled frame; [`UNLABELLED`] where the frame has none.
    pub codes: Vec<u32>,
}

/// What the explorer shows about each sampled frame.
#[derive(Clone, Debug, Default)]
pub struct FrameInfo {
    /// Utterance names used by the sample.
    pub utterances: Vec<String>,
    /// Utterance of each sampled frame (index into `utterances`).
    pub utt: Vec<u32>,
    /// Centre time of each sampled frame in its utterance, in seconds.
    pub time_s: Vec<f64>,
    /// Label tasks (phone and any other columns, speaker last).
    pub columns: Vec<LabelColumn>,
}

/// The 2-D maps of one capture: one embedding per layer over the same sampled frames.
#[derive(Clone, Debug, Default)]
pub struct MapSet {
    /// Capture name.
    pub capture: String,
    /// Sampled frame indices (rows of the capture).
    pub frames: Vec<u64>,
    /// `(layer, n × 2 coordinates)`, ordered by layer.
    pub layers: Vec<(usize, Array2<f32>)>,
    /// Labels, utterance and time of each sampled frame.
    pub info: FrameInfo,
}

/// Everything known about one capture's analyses.
#[derive(Debug)]
pub struct CaptureSection {
    /// What `inspect` found.
    pub summary: Summary,
    /// Probe records (empty when the probe did not run).
    pub probe: Vec<ProbeRecord>,
    /// Purity records (empty when the map did not run).
    pub purity: Vec<PurityRecord>,
    /// Layer maps (None when the map did not run).
    pub maps: Option<MapSet>,
}

/// A figure drawn by an analysis (an SVG string, e.g. from `plot::to_svg`).
#[derive(Clone, Debug)]
pub struct SvgFigure {
    /// Caption.
    pub title: String,
    /// Which section it belongs in.
    pub section: FigureSection,
    /// The SVG document.
    pub svg: String,
    /// The same figure as PNG, embedded instead of the SVG when the SVG is large (a map grid
    /// of thousands of points is several MB as SVG and a few hundred kB as PNG).
    pub png: Option<Vec<u8>>,
}

/// SVG figures above this size are embedded as their PNG when that is smaller, so a demo
/// report stays well under 15 MB.
pub const SVG_EMBED_LIMIT: usize = 512 * 1024;

/// Section of the page a pre-rendered figure goes into.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum FigureSection {
    /// Probe results.
    Probe,
    /// Layer maps.
    Maps,
    /// Comparison of two captures.
    Compare,
}

/// SHA-256 of one input file.
#[derive(Clone, Debug, Serialize)]
pub struct FileHash {
    /// Capture name.
    pub capture: String,
    /// File path.
    pub file: String,
    /// Size in bytes.
    pub bytes: u64,
    /// Hex SHA-256.
    pub sha256: String,
}

/// How the run was done, for the methods paragraph.
#[derive(Clone, Debug, Default)]
pub struct Methods {
    /// Crate version.
    pub version: String,
    /// Seed of every random choice.
    pub seed: u64,
    /// Options each analysis ran with (from its JSON envelope), keyed by analysis name.
    pub options: Vec<(String, serde_json::Value)>,
    /// SHA-256 of every input file.
    pub hashes: Vec<FileHash>,
    /// Seconds spent in each step.
    pub timings: Vec<(String, f64)>,
}

/// Everything the page is made from.
#[derive(Debug, Default)]
pub struct ReportInputs {
    /// Page title.
    pub title: String,
    /// One section per capture (one or two).
    pub captures: Vec<CaptureSection>,
    /// Comparison, when two captures.
    pub compare: Option<CompareInputs>,
    /// Figures drawn by the analyses.
    pub figures: Vec<SvgFigure>,
    /// How the run was done.
    pub methods: Methods,
}

/// Labels, utterance and centre time of the given frames of a capture, for the explorer.
/// Time is `frame_pos × hop_s + win_s / 2`, the capture's frame-centre rule.
pub fn frame_info(cap: &Capture, frames: &[u64]) -> Result<FrameInfo, ReportError> {
    let n = cap.n_frames() as u64;
    if let Some(&bad) = frames.iter().find(|&&f| f >= n) {
        return Err(ReportError::Read {
            path: cap.dir.clone(),
            message: format!("sampled frame index {bad} is outside the capture's {n} frames"),
        });
    }
    let ft = &cap.frames;
    let hop = cap.config.hop_s;
    let half_win = cap.config.win_s.unwrap_or(hop) / 2.0;
    let mut utt_map = std::collections::HashMap::new();
    let mut utterances = Vec::new();
    let mut utt = Vec::with_capacity(frames.len());
    let mut time_s = Vec::with_capacity(frames.len());
    for &f in frames {
        let u = ft.frame_utt[f as usize];
        let code = *utt_map.entry(u).or_insert_with(|| {
            utterances.push(ft.utterances[u as usize].clone());
            (utterances.len() - 1) as u32
        });
        utt.push(code);
        time_s.push(ft.frame_pos[f as usize] as f64 * hop + half_win);
    }
    let columns = ft
        .tasks
        .iter()
        .map(|t| {
            // Keep only the classes the sample uses, in their original order.
            let mut used = vec![false; t.classes.len()];
            for &f in frames {
                let c = t.codes[f as usize];
                if c != UNLABELLED {
                    used[c as usize] = true;
                }
            }
            let mut remap = vec![UNLABELLED; t.classes.len()];
            let mut classes = Vec::new();
            for (k, name) in t.classes.iter().enumerate() {
                if used[k] {
                    remap[k] = classes.len() as u32;
                    classes.push(name.clone());
                }
            }
            let codes = frames
                .iter()
                .map(|&f| {
                    let c = t.codes[f as usize];
                    if c == UNLABELLED {
                        UNLABELLED
                    } else {
                        remap[c as usize]
                    }
                })
                .collect();
            LabelColumn {
                name: t.name.clone(),
                classes,
                codes,
            }
        })
        .collect();
    Ok(FrameInfo {
        utterances,
        utt,
        time_s,
        columns,
    })
}

/// The files a capture was read from: layer files, label tables and capture.toml.
pub fn input_files(cap: &Capture) -> Vec<PathBuf> {
    let mut files: Vec<PathBuf> = Vec::new();
    for l in &cap.layers {
        if !files.iter().any(|f| f == l.path()) {
            files.push(l.path().to_path_buf());
        }
    }
    for name in [
        "frames.tsv",
        "utterances.tsv",
        "segments.tsv",
        "capture.toml",
    ] {
        let p = cap.dir.join(name);
        let used = match name {
            "frames.tsv" => cap.label_source == "frames.tsv",
            "utterances.tsv" | "segments.tsv" => cap.label_source != "frames.tsv",
            _ => true,
        };
        if used && p.is_file() {
            files.push(p);
        }
    }
    files
}

/// SHA-256 of each file (streamed; a progress step advances by bytes).
pub fn hash_files(
    capture: &str,
    files: &[PathBuf],
    progress: &Progress,
) -> Result<Vec<FileHash>, ReportError> {
    let total: u64 = files
        .iter()
        .filter_map(|f| std::fs::metadata(f).ok())
        .map(|m| m.len())
        .sum();
    let step = progress.step(&format!("hashing {capture}"), total);
    let mut out = Vec::new();
    let mut buf = vec![0u8; 1 << 20];
    for f in files {
        let err = |source| ReportError::Hash {
            path: f.clone(),
            source,
        };
        let mut file = std::fs::File::open(f).map_err(err)?;
        let mut h = Sha256::new();
        let mut bytes = 0u64;
        loop {
            let k = file.read(&mut buf).map_err(err)?;
            if k == 0 {
                break;
            }
            h.update(&buf[..k]);
            bytes += k as u64;
            step.inc(k as u64);
        }
        let sha256 = h.finalize().iter().map(|b| format!("{b:02x}")).collect();
        out.push(FileHash {
            capture: capture.to_string(),
            file: f.display().to_string(),
            bytes,
            sha256,
        });
    }
    Ok(out)
}

/// Records and options of an analysis output `<name>.json`, or None when the file is absent.
pub fn read_records<T: serde::de::DeserializeOwned>(
    path: &Path,
) -> Result<Option<(Vec<T>, serde_json::Value)>, ReportError> {
    if !path.exists() {
        return Ok(None);
    }
    let err = |m: String| ReportError::Read {
        path: path.to_path_buf(),
        message: m,
    };
    let text = std::fs::read_to_string(path).map_err(|e| err(e.to_string()))?;
    let v: serde_json::Value = serde_json::from_str(&text).map_err(|e| err(e.to_string()))?;
    let records = v
        .get("records")
        .cloned()
        .unwrap_or(serde_json::Value::Array(vec![]));
    let records: Vec<T> =
        serde_json::from_value(records).map_err(|e| err(format!("records: {e}")))?;
    let options = v.get("options").cloned().unwrap_or(serde_json::Value::Null);
    Ok(Some((records, options)))
}

/// The comparison in `compare.json` (CKA records and the `probe_delta` list), if present.
pub fn read_compare(
    path: &Path,
    name_a: &str,
    name_b: &str,
) -> Result<Option<(CompareInputs, serde_json::Value)>, ReportError> {
    let Some((cka, options)) = read_records::<CkaRecord>(path)? else {
        return Ok(None);
    };
    let err = |m: String| ReportError::Read {
        path: path.to_path_buf(),
        message: m,
    };
    let text = std::fs::read_to_string(path).map_err(|e| err(e.to_string()))?;
    let v: serde_json::Value = serde_json::from_str(&text).map_err(|e| err(e.to_string()))?;
    let probe_delta = match v.get("probe_delta") {
        Some(d) => {
            serde_json::from_value(d.clone()).map_err(|e| err(format!("probe_delta: {e}")))?
        }
        None => vec![],
    };
    Ok(Some((
        CompareInputs {
            name_a: name_a.into(),
            name_b: name_b.into(),
            cka,
            probe_delta,
        },
        options,
    )))
}

/// The layer maps a map run wrote under `<dir>/maps/` (`frames.npy` and `layer_XX.npy`),
/// with the sampled frames' labels from the capture; None when there are none.
pub fn read_maps(dir: &Path, cap: &Capture) -> Result<Option<MapSet>, ReportError> {
    use ndarray_npy::ReadNpyExt;
    let maps = dir.join("maps");
    let frames_path = maps.join("frames.npy");
    if !frames_path.is_file() {
        return Ok(None);
    }
    let err = |p: &Path, m: String| ReportError::Read {
        path: p.to_path_buf(),
        message: m,
    };
    let open = |p: &Path| std::fs::File::open(p).map_err(|e| err(p, e.to_string()));
    let frames: Vec<u64> = match ndarray::Array1::<u64>::read_npy(open(&frames_path)?) {
        Ok(a) => a.to_vec(),
        Err(_) => ndarray::Array1::<i64>::read_npy(open(&frames_path)?)
            .map_err(|e| err(&frames_path, e.to_string()))?
            .iter()
            .map(|&v| v.max(0) as u64)
            .collect(),
    };
    let mut layers = Vec::new();
    let entries = std::fs::read_dir(&maps).map_err(|e| err(&maps, e.to_string()))?;
    for e in entries {
        let e = e.map_err(|e| err(&maps, e.to_string()))?;
        let name = e.file_name().to_string_lossy().into_owned();
        let Some(num) = name
            .strip_prefix("layer_")
            .and_then(|s| s.strip_suffix(".npy"))
        else {
            continue;
        };
        let Ok(layer) = num.parse::<usize>() else {
            continue;
        };
        let p = e.path();
        let a = Array2::<f32>::read_npy(open(&p)?).map_err(|e| err(&p, e.to_string()))?;
        if a.ncols() != 2 || a.nrows() != frames.len() {
            return Err(err(
                &p,
                format!(
                    "expected {} × 2 coordinates (one row per sampled frame), found {} × {}",
                    frames.len(),
                    a.nrows(),
                    a.ncols()
                ),
            ));
        }
        layers.push((layer, a));
    }
    layers.sort_by_key(|(l, _)| *l);
    let info = frame_info(cap, &frames)?;
    Ok(Some(MapSet {
        capture: cap.name.clone(),
        frames,
        layers,
        info,
    }))
}

/// SVG figures an analysis wrote into `dir` (`<stem>.svg` for each listed stem).
pub fn read_figures(
    dir: &Path,
    stems: &[(&str, &str, FigureSection)],
    prefix: &str,
) -> Vec<SvgFigure> {
    stems
        .iter()
        .filter_map(|(stem, title, section)| {
            let svg = std::fs::read_to_string(dir.join(format!("{stem}.svg"))).ok()?;
            let png = if svg.len() > SVG_EMBED_LIMIT {
                std::fs::read(dir.join(format!("{stem}.png")))
                    .ok()
                    .filter(|p| p.len() < svg.len())
            } else {
                None
            };
            Some(SvgFigure {
                title: format!("{prefix}{title}"),
                section: *section,
                svg,
                png,
            })
        })
        .collect()
}

/// Options of `voxstrata report`.
#[derive(Clone, Debug, Default)]
pub struct ReportOptions {
    /// Output folder.
    pub out: PathBuf,
    /// Write into an output folder that already holds files.
    pub force: bool,
    /// Seed, threads, layers.
    pub common: CommonOptions,
    /// How captures are opened (label cleaning, non-finite frames).
    pub open: OpenOptions,
    /// Probe settings.
    pub probe: crate::probe::ProbeOptions,
    /// Map and purity settings.
    pub map: crate::map::MapOptions,
    /// Comparison settings (two captures).
    pub compare: crate::compare::CompareOptions,
}

/// What `run` did, written as `run.json`.
#[derive(Debug, Serialize)]
pub struct RunRecord {
    /// Always `voxstrata`.
    pub tool: &'static str,
    /// Crate version.
    pub version: &'static str,
    /// The captures, in order.
    pub captures: Vec<output::CaptureRef>,
    /// Options of the run.
    pub options: serde_json::Value,
    /// Seconds spent in each step.
    pub timings: Vec<StepTime>,
    /// SHA-256 of every input file.
    pub inputs: Vec<FileHash>,
    /// Files written (relative to the output folder).
    pub outputs: Vec<String>,
}

/// Time spent in one step.
#[derive(Debug, Serialize)]
pub struct StepTime {
    /// Step name.
    pub step: String,
    /// Seconds.
    pub seconds: f64,
}

/// Where the shipped demo's two captures are looked for: beside the crate's sources (as
/// built) and in the current folder.
pub fn demo_candidates() -> Vec<PathBuf> {
    vec![
        Path::new(env!("CARGO_MANIFEST_DIR")).join("demo_activations"),
        PathBuf::from("demo_activations"),
    ]
}

/// The shipped demo captures (`early` and `final`), from the first place that has both.
pub fn demo_captures() -> Result<Vec<PathBuf>, ReportError> {
    let cands = demo_candidates();
    for c in &cands {
        let (a, b) = (c.join("early"), c.join("final"));
        if a.is_dir() && b.is_dir() {
            return Ok(vec![a, b]);
        }
    }
    Err(ReportError::DemoMissing {
        searched: cands
            .iter()
            .map(|p| p.display().to_string())
            .collect::<Vec<_>>()
            .join(", "),
    })
}

/// A folder name for a capture's outputs: letters, digits, `-` and `_` only, unique.
fn slug(name: &str, taken: &[String]) -> String {
    let mut s: String = name
        .chars()
        .map(|c| {
            if c.is_ascii_alphanumeric() || c == '-' || c == '_' {
                c
            } else {
                '_'
            }
        })
        .collect();
    if s.is_empty() || s.starts_with('.') {
        s = "capture".into();
    }
    let base = s.clone();
    let mut k = 2;
    while taken.contains(&s) {
        s = format!("{base}_{k}");
        k += 1;
    }
    s
}

/// Refuse an output folder that holds files (unless forced) without creating anything yet.
fn check_out_dir(dir: &Path, force: bool) -> Result<(), OutputError> {
    if dir.exists()
        && (!dir.is_dir()
            || (!force
                && std::fs::read_dir(dir)
                    .map(|mut r| r.next().is_some())
                    .unwrap_or(false)))
    {
        // prepare_out_dir builds the precise refusal.
        return output::prepare_out_dir(dir, force);
    }
    Ok(())
}

/// `voxstrata report`: validate the captures (all of them, before any analysis), run the
/// analyses into `opts.out`, then write `index.html` and `run.json` there.
pub fn run(
    captures: &[PathBuf],
    opts: &ReportOptions,
    progress: &Progress,
) -> crate::Result<RunRecord> {
    let t_all = Instant::now();
    let mut timings: Vec<StepTime> = Vec::new();
    let time = |timings: &mut Vec<StepTime>, step: &str, t: Instant| {
        timings.push(StepTime {
            step: step.to_string(),
            seconds: t.elapsed().as_secs_f64(),
        })
    };
    let paths = if captures.is_empty() {
        demo_captures()?
    } else {
        captures.to_vec()
    };
    if paths.len() > 2 {
        return Err(ReportError::TooManyCaptures {
            found: paths.len(),
            names: paths
                .iter()
                .map(|p| p.display().to_string())
                .collect::<Vec<_>>()
                .join(", "),
        }
        .into());
    }
    check_out_dir(&opts.out, opts.force)?;

    // Validate every capture before any analysis starts.
    let t = Instant::now();
    let mut caps = Vec::new();
    for p in &paths {
        let cap = Capture::open(p, &opts.open)?;
        cap.select_layers(opts.common.layers.as_ref())?;
        caps.push(cap);
    }
    if let [a, b] = caps.as_slice() {
        let ids = |c: &Capture| c.layers.iter().map(|l| l.id).collect::<Vec<_>>();
        let found = if a.n_frames() != b.n_frames() {
            Some(format!("{} frames against {}", a.n_frames(), b.n_frames()))
        } else if a.frames.frame_utt != b.frames.frame_utt
            || a.frames.utterances != b.frames.utterances
        {
            Some("different utterances or frame order".to_string())
        } else if opts.common.layers.is_none() && ids(a).is_empty() != ids(b).is_empty() {
            Some("layers in one capture only".to_string())
        } else {
            None
        };
        if let Some(found) = found {
            return Err(ReportError::Mismatch {
                a: a.dir.display().to_string(),
                b: b.dir.display().to_string(),
                found,
            }
            .into());
        }
    }
    time(&mut timings, "open and validate", t);
    output::prepare_out_dir(&opts.out, opts.force)?;

    let mut taken = Vec::new();
    let mut dirs = Vec::new();
    for c in &caps {
        let d = if caps.len() == 1 {
            opts.out.clone()
        } else {
            let s = slug(&c.name, &taken);
            taken.push(s.clone());
            opts.out.join(s)
        };
        dirs.push(d);
    }
    let mut outputs = Vec::new();
    let mut hashes = Vec::new();
    let mut sections = Vec::new();
    let mut method_options = Vec::new();
    let mut figures = Vec::new();
    for (c, dir) in caps.iter().zip(&dirs) {
        let t = Instant::now();
        let step = progress.step(&format!("inspect {}", c.name), c.layers.len() as u64);
        let summary = crate::inspect::summarise(c);
        step.inc(c.layers.len() as u64);
        drop(step);
        let json =
            serde_json::to_vec_pretty(&summary).map_err(|e| ReportError::Encode(e.to_string()))?;
        output::write_atomic(&dir.join("inspect.json"), &json)?;
        outputs.push(rel(&opts.out, &dir.join("inspect.json")));
        time(&mut timings, &format!("inspect {}", c.name), t);
        let t = Instant::now();
        hashes.extend(hash_files(&c.name, &input_files(c), progress)?);
        time(&mut timings, &format!("hash {}", c.name), t);
        sections.push(CaptureSection {
            summary,
            probe: vec![],
            purity: vec![],
            maps: None,
        });
    }

    // The analyses, each writing its records and figures into the capture's folder.
    for (c, dir) in caps.iter().zip(&dirs) {
        let t = Instant::now();
        let rep = crate::probe::run(c, &opts.probe, &opts.common, progress)?;
        crate::probe::write_outputs(&rep, dir)?;
        for f in ["probe.json", "probe.csv", "probe.png", "probe.svg"] {
            outputs.push(rel(&opts.out, &dir.join(f)));
        }
        for cf in &rep.confusion {
            let stem = format!("confusion_{}", crate::probe::file_stem(&cf.task));
            outputs.push(rel(&opts.out, &dir.join(format!("{stem}.svg"))));
        }
        time(&mut timings, &format!("probe {}", c.name), t);

        let t = Instant::now();
        let rep = crate::map::run(c, &opts.map, &opts.common, progress)?;
        // The folder is this run's own (checked above), so writing into it is safe.
        crate::map::write_outputs(&rep, dir, true)?;
        for f in ["purity.json", "purity.csv", "purity.png", "purity.svg"] {
            outputs.push(rel(&opts.out, &dir.join(f)));
        }
        outputs.push(rel(&opts.out, &dir.join("maps").join("frames.npy")));
        for l in &rep.layers {
            let f = format!("layer_{:02}.npy", l.layer);
            outputs.push(rel(&opts.out, &dir.join("maps").join(f)));
        }
        for name in &rep.colourings {
            let stem = format!("map_{}", figure_stem(name));
            for ext in ["png", "svg"] {
                let p = dir.join(format!("{stem}.{ext}"));
                if p.is_file() {
                    outputs.push(rel(&opts.out, &p));
                }
            }
        }
        time(&mut timings, &format!("map {}", c.name), t);
    }

    // The comparison of two checkpoints, into the top folder.
    if let [a, b] = caps.as_slice() {
        let t = Instant::now();
        let rep = crate::compare::run(a, b, &opts.compare, &opts.common, progress)?;
        crate::compare::write_outputs(&rep, &opts.out)?;
        for f in [
            "compare.json",
            "compare.csv",
            "compare_probe_delta.csv",
            "compare_cka.png",
            "compare_cka.svg",
            "compare_change.png",
            "compare_change.svg",
            "compare_probe.png",
            "compare_probe.svg",
        ] {
            if opts.out.join(f).is_file() {
                outputs.push(f.to_string());
            }
        }
        time(&mut timings, "compare", t);
    }

    // Read back whatever the analyses wrote.
    let t = Instant::now();
    let prefix = |c: &Capture| {
        if caps.len() > 1 {
            format!("{}: ", c.name)
        } else {
            String::new()
        }
    };
    for ((c, dir), sec) in caps.iter().zip(&dirs).zip(sections.iter_mut()) {
        if let Some((recs, o)) = read_records::<ProbeRecord>(&dir.join("probe.json"))? {
            sec.probe = recs;
            method_options.push((format!("probe {}", c.name), o));
        }
        if let Some((recs, o)) = read_records::<PurityRecord>(&dir.join("purity.json"))? {
            sec.purity = recs;
            method_options.push((format!("map {}", c.name), o));
        }
        sec.maps = read_maps(dir, c)?;
        figures.extend(read_figures(
            dir,
            &[
                ("probe", "probe accuracy by layer", FigureSection::Probe),
                (
                    "confusion_phone",
                    "phone confusions at the best layer",
                    FigureSection::Probe,
                ),
                (
                    "confusion_speaker",
                    "speaker confusions at the best layer",
                    FigureSection::Probe,
                ),
                (
                    "map_speaker",
                    "layer maps coloured by speaker",
                    FigureSection::Maps,
                ),
                (
                    "map_phone",
                    "layer maps coloured by phone",
                    FigureSection::Maps,
                ),
                ("purity", "purity by layer", FigureSection::Maps),
            ],
            &prefix(c),
        ));
    }
    let mut compare = None;
    if let [a, b] = caps.as_slice() {
        if let Some((cmp, o)) = read_compare(&opts.out.join("compare.json"), &a.name, &b.name)? {
            compare = Some(cmp);
            method_options.push(("compare".to_string(), o));
        }
        // The page draws its own CKA heatmap (with the value of each cell on hover), so
        // compare_cka.png/svg stay in DIR but are not embedded a second time.
        figures.extend(read_figures(
            &opts.out,
            &[
                (
                    "compare_change",
                    "change at each layer (1 − CKA of the same layer)",
                    FigureSection::Compare,
                ),
                (
                    "compare_probe",
                    "probe accuracy on both checkpoints",
                    FigureSection::Compare,
                ),
            ],
            "",
        ));
    }
    time(&mut timings, "read analysis outputs", t);

    let t = Instant::now();
    let title = match caps.as_slice() {
        [a] => format!("voxstrata report: {}", a.name),
        [a, b] => format!("voxstrata report: {} and {}", a.name, b.name),
        _ => "voxstrata report".to_string(),
    };
    let mut inputs = ReportInputs {
        title,
        captures: sections,
        compare,
        figures,
        methods: Methods {
            version: env!("CARGO_PKG_VERSION").to_string(),
            seed: opts.common.seed,
            options: method_options,
            hashes: hashes.clone(),
            timings: vec![],
        },
    };
    inputs.methods.timings = timings
        .iter()
        .map(|s| (s.step.clone(), s.seconds))
        .collect();
    let step = progress.step("writing report", 1);
    let page = render(&inputs)?;
    output::write_atomic(&opts.out.join("index.html"), page.as_bytes())?;
    step.inc(1);
    drop(step);
    outputs.push("index.html".to_string());
    time(&mut timings, "write index.html", t);
    timings.push(StepTime {
        step: "total".into(),
        seconds: t_all.elapsed().as_secs_f64(),
    });
    outputs.push("run.json".to_string());
    let record = RunRecord {
        tool: "voxstrata",
        version: env!("CARGO_PKG_VERSION"),
        captures: caps
            .iter()
            .map(|c| output::CaptureRef {
                name: c.name.clone(),
                path: c.dir.display().to_string(),
            })
            .collect(),
        options: serde_json::json!({
            "out": opts.out.display().to_string(),
            "force": opts.force,
            "seed": opts.common.seed,
            "threads": opts.common.threads,
            "layers": opts.common.layers.as_ref().map(|l| l.0.clone()),
            "drop_label": opts.open.labels.drop,
            "merge_labels": opts.open.labels.merge.len(),
            "allow_nonfinite": opts.open.allow_nonfinite,
            "map_method": opts.map.method,
        }),
        timings,
        inputs: hashes,
        outputs,
    };
    let mut json =
        serde_json::to_vec_pretty(&record).map_err(|e| ReportError::Encode(e.to_string()))?;
    json.push(b'\n');
    output::write_atomic(&opts.out.join("run.json"), &json)?;
    Ok(record)
}

/// The file-name form the map stage gives a label name (`map_<name>.svg`).
fn figure_stem(name: &str) -> String {
    name.chars()
        .map(|c| {
            if c.is_alphanumeric() || c == '-' || c == '_' {
                c
            } else {
                '_'
            }
        })
        .collect()
}

fn rel(base: &Path, p: &Path) -> String {
    p.strip_prefix(base).unwrap_or(p).display().to_string()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn slug_keeps_names_safe_and_unique() {
        assert_eq!(slug("early", &[]), "early");
        assert_eq!(slug("../x y", &[]), "___x_y");
        assert_eq!(slug("a", &["a".into()]), "a_2");
        assert_eq!(slug("", &[]), "capture");
    }

    #[test]
    fn sha256_of_known_text() {
        // FIPS 180-2 example: SHA-256("abc").
        let d = tempfile::tempdir().unwrap();
        let p = d.path().join("abc");
        std::fs::write(&p, b"abc").unwrap();
        let h = hash_files("x", &[p], &Progress::hidden()).unwrap();
        assert_eq!(
            h[0].sha256,
            "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
        );
        assert_eq!(h[0].bytes, 3);
    }
}
