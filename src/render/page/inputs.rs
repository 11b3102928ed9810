//! What the page is made from: the records of every analysis (the types of
//! [`crate::records`], held in memory by the report command), the maps with what the explorer
//! shows of each sampled frame, the figures drawn once by [`crate::render`], and how the run
//! was done.

use ndarray::Array2;

use crate::records::abx::AbxRecord;
use crate::records::compare::{CkaRecord, ProbeDelta};
use crate::records::inspect::Summary;
use crate::records::map::PurityRecord;
use crate::records::probe::ProbeRecord;
use crate::records::run::FileHash;

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
    /// What the comparison told the reader (skipped tasks, caps).
    pub notes: Vec<String>,
}

/// A label column for the sampled frames of a map: class names and one code per frame.
#[derive(Clone, Debug)]
pub struct LabelColumn {
    /// Task name.
    pub name: String,
    /// Class names.
    pub classes: Vec<String>,
    /// One code per sampled frame; [`crate::capture::UNLABELLED`] where the frame has none.
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
    /// Continuous columns (pitch, energy, ...).
    pub values: Vec<ValueColumn>,
}

/// A continuous column for the sampled frames of a map: one value per frame, NaN where the
/// frame has none.
#[derive(Clone, Debug)]
pub struct ValueColumn {
    /// Column name.
    pub name: String,
    /// One value per sampled frame.
    pub values: Vec<f32>,
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
    /// ABX records (empty when ABX did not run).
    pub abx: Vec<AbxRecord>,
    /// Notes of every analysis of this capture, each prefixed with its stage.
    pub notes: Vec<String>,
}

/// A figure drawn once by [`crate::render`], placed in a section of the page.
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
    /// ABX discriminability.
    Abx,
    /// Comparison of two captures.
    Compare,
}

/// How the run was done, for the methods paragraph.
#[derive(Clone, Debug, Default)]
pub struct Methods {
    /// Crate version.
    pub version: String,
    /// Seed of every random choice.
    pub seed: u64,
    /// Options each analysis ran with (as in its JSON envelope, with the values actually used),
    /// keyed by analysis name.
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
    /// What the probes and maps sampled (one paragraph; empty: not said).
    pub sample: String,
    /// Whether that sample was lowered for the layers' width (drawn as a caution).
    pub sample_scaled: bool,
}
