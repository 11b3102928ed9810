//! `voxstrata report`: every analysis of one or two captures, gathered into one
//! self-contained `index.html` with `run.json` beside it.
//!
//! The sequence: check every option and the output folder, open and validate every capture
//! (before any analysis), plan the work as independent units ([`units`]: the probe and ABX
//! per capture and layer, the map per capture, the comparison), run each, then assemble
//! ([`assemble`]): merge the parts, write each result with the writer its own command uses,
//! and hand everything to the page ([`crate::render::page::render`]). `voxstrata batch` runs
//! the same units as separate jobs and assembles their parts from disk.

pub mod assemble;
pub mod sample;
mod sources;
pub mod units;

use std::path::PathBuf;
use std::time::Instant;

pub use sources::{demo_candidates, demo_captures, frame_info, hash_files, input_files};

use crate::analysis::abx::AbxOptions;
use crate::analysis::{compare::CompareOptions, map::MapOptions, probe::ProbeOptions};
use crate::capture::{Capture, OpenOptions};
use crate::records::run::{RunRecord, StepTime};
use crate::write;
use crate::{CommonOptions, Progress};

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
    /// A broken invariant inside the report (exit code 1).
    #[error("report: {0}")]
    Internal(String),
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
    /// An option value that cannot work.
    #[error("{0}")]
    Option(String),
}

impl ReportError {
    /// Whether the user can fix this (exit code 2) rather than an internal failure (1).
    pub fn is_input(&self) -> bool {
        matches!(
            self,
            ReportError::TooManyCaptures { .. }
                | ReportError::DemoMissing { .. }
                | ReportError::Mismatch { .. }
                | ReportError::Option(_)
        )
    }
}

/// Options of `voxstrata report`.
#[derive(Clone, Debug)]
pub struct ReportOptions {
    /// One or two capture folders (none: the shipped demo).
    pub captures: Vec<PathBuf>,
    /// Output folder.
    pub out: PathBuf,
    /// Write into an output folder that already holds files.
    pub force: bool,
    /// How captures are opened (label cleaning, non-finite frames).
    pub open: OpenOptions,
    /// Probe settings.
    pub probe: ProbeOptions,
    /// Map and purity settings.
    pub map: MapOptions,
    /// Comparison settings (two captures).
    pub compare: CompareOptions,
    /// ABX settings (None: no ABX).
    pub abx: Option<AbxOptions>,
    /// How many frames the probes and maps use (`auto`: from the layers' width).
    pub sample: sample::SampleOptions,
    /// The sample chosen once the captures are open ([`use_sample`]); None before.
    pub chosen: Option<sample::SampleChoice>,
}

impl Default for ReportOptions {
    fn default() -> Self {
        ReportOptions {
            captures: vec![],
            out: PathBuf::new(),
            force: false,
            open: OpenOptions::default(),
            probe: ProbeOptions::default(),
            map: MapOptions::default(),
            compare: CompareOptions::default(),
            abx: Some(AbxOptions::default()),
            sample: sample::SampleOptions::default(),
            chosen: None,
        }
    }
}

impl ReportOptions {
    /// Refuse options that cannot work, before any work.
    pub fn check(&self) -> crate::Result<()> {
        self.probe.check()?;
        self.map.check()?;
        self.compare.check()?;
        if let Some(a) = &self.abx {
            a.check()?;
        }
        self.sample.check().map_err(ReportError::Option)?;
        if self.captures.len() > 2 {
            return Err(ReportError::TooManyCaptures {
                found: self.captures.len(),
                names: self
                    .captures
                    .iter()
                    .map(|p| p.display().to_string())
                    .collect::<Vec<_>>()
                    .join(", "),
            }
            .into());
        }
        Ok(())
    }
}

/// Seconds per step, kept in order.
#[derive(Default)]
pub struct Clock(pub Vec<StepTime>);

impl Clock {
    /// Record `step` as taking the time since `t`.
    pub fn done(&mut self, step: &str, t: Instant) {
        self.0.push(StepTime {
            step: step.to_string(),
            seconds: t.elapsed().as_secs_f64(),
        });
    }
}

/// A unit's part with the seconds it took.
pub struct Done {
    /// The unit.
    pub unit: units::Unit,
    /// What it computed.
    pub part: units::Part,
    /// Seconds it ran.
    pub seconds: f64,
}

/// `voxstrata report`: check, open and validate every capture, plan the work as units, run
/// each, and assemble their parts into the records, figures, `index.html` and `run.json` in
/// `opts.out` — the path a run split over a cluster takes ([`crate::commands::batch`]), in one
/// process.
pub fn run(
    opts: &ReportOptions,
    common: &CommonOptions,
    progress: &Progress,
) -> crate::Result<RunRecord> {
    let t_all = Instant::now();
    let mut clock = Clock::default();
    let opts = resolve(opts)?;
    write::check_out_dir(&opts.out, opts.force)?;

    let t = Instant::now();
    let caps = open_all(&opts, common)?;
    clock.done("open and validate", t);
    let mut opts = opts;
    let chosen = choose_sample(&opts, &caps, common);
    tell_sample(&chosen, progress);
    use_sample(&mut opts, chosen);
    write::prepare_out_dir(&opts.out, opts.force)?;
    let mut done = Vec::new();
    for unit in units::plan(&caps, &opts, common)? {
        let t = Instant::now();
        let part = units::run(&unit, &caps, &opts, common, progress)?;
        // Through the same JSON a unit run alone writes, so both paths write the same bytes.
        let part = units::Part::decode(&part.encode()?)
            .map_err(|e| ReportError::Internal(format!("part of {unit:?}: {e}")))?;
        done.push(Done {
            unit,
            part,
            seconds: t.elapsed().as_secs_f64(),
        });
    }
    assemble::write_all(&caps, done, &opts, common, progress, clock, (t_all, 0.0))
}

/// The options with the shipped demo's captures when none are given, checked.
pub fn resolve(opts: &ReportOptions) -> crate::Result<ReportOptions> {
    let mut opts = opts.clone();
    if opts.captures.is_empty() {
        opts.captures = demo_captures()?;
    }
    opts.check()?;
    Ok(opts)
}

/// The sample for `caps`, chosen from the widest layer `common.layers` selects.
pub fn choose_sample(
    opts: &ReportOptions,
    caps: &[Capture],
    common: &CommonOptions,
) -> sample::SampleChoice {
    sample::choose(&opts.sample, sample::widest(caps, common.layers.as_ref()))
}

/// Set a chosen sample into the probe and map options (every unit and the assembly of one
/// run use the one chosen with all captures open).
pub fn use_sample(opts: &mut ReportOptions, chosen: sample::SampleChoice) {
    opts.probe.max_train_frames = chosen.probe_frames;
    opts.map.max_points = chosen.map_points;
    opts.chosen = Some(chosen);
}

/// Say on the progress lines when the caps were lowered for the layers' width.
pub fn tell_sample(chosen: &sample::SampleChoice, progress: &Progress) {
    if chosen.scaled {
        progress.note(&chosen.sentence());
    }
}

/// Open every capture and check they can be analysed together, before any analysis.
pub fn open_all(opts: &ReportOptions, common: &CommonOptions) -> crate::Result<Vec<Capture>> {
    let mut caps = Vec::new();
    for p in &opts.captures {
        let cap = Capture::open(p, &opts.open)?;
        cap.select_layers(common.layers.as_ref())?;
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
        } else if common.layers.is_none() && ids(a).is_empty() != ids(b).is_empty() {
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
    Ok(caps)
}
