//! `voxstrata report`: every analysis of one or two captures, gathered into one
//! self-contained `index.html` with `run.json` beside it.
//!
//! The sequence: check every option and the output folder, open and validate every capture
//! (before any analysis), then for each capture inspect, probe and map, and for two captures
//! compare; each result is written by the same writer its own command uses, kept in memory,
//! and handed to the page ([`crate::render::page::render`]). Nothing is read back from disk.

mod sources;

use std::path::{Path, PathBuf};
use std::time::Instant;

pub use sources::{demo_candidates, demo_captures, frame_info, hash_files, input_files};

use super::Written;
use crate::analysis::abx::{AbxError, AbxOptions};
use crate::analysis::{compare::CompareOptions, map::MapOptions, probe::ProbeOptions};
use crate::capture::{Capture, OpenOptions};
use crate::records::abx::AbxRecord;
use crate::records::map::MapReport;
use crate::records::run::{FileHash, RunRecord, StepTime};
use crate::records::CaptureRef;
use crate::render::page::{
    self, CaptureSection, CompareInputs, FigureSection, MapSet, Methods, ReportInputs, SvgFigure,
    SVG_EMBED_LIMIT,
};
use crate::render::Drawn;
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
struct Clock(Vec<StepTime>);

impl Clock {
    fn done(&mut self, step: &str, t: Instant) {
        self.0.push(StepTime {
            step: step.to_string(),
            seconds: t.elapsed().as_secs_f64(),
        });
    }
}

/// What one capture's analyses produced: the page's section, the options each ran with, the
/// figures to embed and the files written.
struct CaptureResult {
    section: CaptureSection,
    /// The probe stage's report, whose test predictions the probe deltas pair.
    probe: crate::records::probe::ProbeReport,
    options: Vec<(String, serde_json::Value)>,
    figures: Vec<SvgFigure>,
    written: Vec<PathBuf>,
}

/// `voxstrata report`: check, open and validate every capture, analyse, write the records,
/// figures, `index.html` and `run.json` into `opts.out`.
pub fn run(
    opts: &ReportOptions,
    common: &CommonOptions,
    progress: &Progress,
) -> crate::Result<RunRecord> {
    let t_all = Instant::now();
    let mut clock = Clock::default();
    let mut opts = opts.clone();
    if opts.captures.is_empty() {
        opts.captures = demo_captures()?;
    }
    opts.check()?;
    write::check_out_dir(&opts.out, opts.force)?;

    let t = Instant::now();
    let caps = open_all(&opts, common)?;
    clock.done("open and validate", t);
    write::prepare_out_dir(&opts.out, opts.force)?;
    let dirs = capture_dirs(&caps, &opts.out);

    let mut hashes = Vec::new();
    let mut results = Vec::new();
    for (c, dir) in caps.iter().zip(&dirs) {
        let t = Instant::now();
        hashes.extend(hash_files(&c.name, &input_files(c), progress)?);
        clock.done(&format!("hash {}", c.name), t);
        let prefix = if caps.len() > 1 {
            format!("{}: ", c.name)
        } else {
            String::new()
        };
        results.push(analyse_capture(
            c, dir, &prefix, &opts, common, progress, &mut clock,
        )?);
    }
    let probes: Vec<&crate::records::probe::ProbeReport> =
        results.iter().map(|r| &r.probe).collect();
    let compare = compare_step(&caps, &probes, &opts, common, progress, &mut clock)?;

    let t = Instant::now();
    let (inputs, mut outputs) = gather(&caps, results, compare, &opts, common, &hashes, &clock)?;
    let step = progress.step("writing report", 1);
    let index = opts.out.join("index.html");
    write::write_atomic(&index, page::render(&inputs).as_bytes())?;
    step.inc(1);
    drop(step);
    outputs.push(index);
    clock.done("write index.html", t);
    clock.0.push(StepTime {
        step: "total".into(),
        seconds: t_all.elapsed().as_secs_f64(),
    });
    write_run_record(&opts, common, &caps, clock.0, hashes, outputs)
}

/// What the comparison of two captures gave: the page's inputs, its options and the files
/// written.
struct CompareResult {
    inputs: CompareInputs,
    options: serde_json::Value,
    written: Written,
}

/// With two captures, compare them and write `compare.json` and its figures; the probe
/// deltas pair the probe stage's predictions (`probes`, one per capture), so the page shows one
/// accuracy per (layer, task).
fn compare_step(
    caps: &[Capture],
    probes: &[&crate::records::probe::ProbeReport],
    opts: &ReportOptions,
    common: &CommonOptions,
    progress: &Progress,
    clock: &mut Clock,
) -> crate::Result<Option<CompareResult>> {
    let ([a, b], [pa, pb]) = (caps, probes) else {
        return Ok(None);
    };
    let t = Instant::now();
    let rep =
        crate::analysis::compare::run(a, b, &opts.compare, common, progress, Some([*pa, *pb]))?;
    let written = super::compare::write(&rep, &opts.out)?;
    clock.done("compare", t);
    Ok(Some(CompareResult {
        options: rep.options.clone(),
        inputs: CompareInputs {
            name_a: a.name.clone(),
            name_b: b.name.clone(),
            cka: rep.cka,
            probe_delta: rep.probe_delta,
            notes: rep.notes,
        },
        written,
    }))
}

/// Gather every result into the page's inputs, and list the files written so far.
fn gather(
    caps: &[Capture],
    results: Vec<CaptureResult>,
    compare: Option<CompareResult>,
    opts: &ReportOptions,
    common: &CommonOptions,
    hashes: &[FileHash],
    clock: &Clock,
) -> crate::Result<(ReportInputs, Vec<PathBuf>)> {
    let mut outputs: Vec<PathBuf> = Vec::new();
    let mut figures = Vec::new();
    let mut method_options = Vec::new();
    let mut sections = Vec::new();
    for r in results {
        outputs.extend(r.written);
        figures.extend(r.figures);
        method_options.extend(r.options);
        sections.push(r.section);
    }
    if let Some(c) = &compare {
        method_options.push(("compare".to_string(), c.options.clone()));
    }
    if let Some(a) = &opts.abx {
        method_options.push(("abx".to_string(), write::json::to_value(a)?));
    }
    if let Some(both) = abx_both(&sections, opts.abx.as_ref(), &opts.out)? {
        // Two captures: one figure with both on the page, instead of one figure each.
        figures.retain(|f| f.section != FigureSection::Abx);
        outputs.extend(both.files);
        figures.extend(
            both.figures
                .into_iter()
                .map(|d| embed(d, FigureSection::Abx, "")),
        );
    }
    let compare = compare.map(|c| {
        outputs.extend(c.written.files);
        // The page shows the CKA values in its table and the heatmap as drawn for compare_cka.
        figures.extend(
            c.written
                .figures
                .into_iter()
                .map(|d| embed(d, FigureSection::Compare, "")),
        );
        c.inputs
    });
    let inputs = ReportInputs {
        title: page_title(caps),
        captures: sections,
        compare,
        figures,
        methods: Methods {
            version: env!("CARGO_PKG_VERSION").to_string(),
            seed: common.seed,
            options: method_options,
            hashes: hashes.to_vec(),
            timings: clock
                .0
                .iter()
                .map(|s| (s.step.clone(), s.seconds))
                .collect(),
        },
    };
    Ok((inputs, outputs))
}

/// Open every capture and check they can be analysed together, before any analysis.
fn open_all(opts: &ReportOptions, common: &CommonOptions) -> crate::Result<Vec<Capture>> {
    let mut caps = Vec::new();
    for p in &opts.captures {
        let cap = Capture::open(p, &opts.open)?;
        super::print_notes(&cap.notes);
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

/// The output folder of each capture: the report folder itself for one capture, a
/// sub-folder named after each for two.
fn capture_dirs(caps: &[Capture], out: &Path) -> Vec<PathBuf> {
    if caps.len() == 1 {
        return vec![out.to_path_buf()];
    }
    let mut taken = Vec::new();
    caps.iter()
        .map(|c| {
            let s = write::unique_stem(&c.name, &taken);
            taken.push(s.clone());
            out.join(s)
        })
        .collect()
}

/// A figure for the page: the SVG, or the PNG when the SVG is large and the PNG smaller (a
/// map grid of thousands of points is several MB as SVG and a few hundred kB as PNG).
fn embed(d: Drawn, section: FigureSection, prefix: &str) -> SvgFigure {
    let png = (d.svg.len() > SVG_EMBED_LIMIT && d.png.len() < d.svg.len()).then_some(d.png);
    SvgFigure {
        title: format!("{prefix}{}", d.title),
        section,
        svg: d.svg,
        png,
    }
}

/// Inspect, probe and map one capture, writing each result into `dir`.
fn analyse_capture(
    c: &Capture,
    dir: &Path,
    prefix: &str,
    opts: &ReportOptions,
    common: &CommonOptions,
    progress: &Progress,
    clock: &mut Clock,
) -> crate::Result<CaptureResult> {
    let mut written = Vec::new();
    let t = Instant::now();
    let step = progress.step(&format!("inspect {}", c.name), c.layers.len() as u64);
    let summary = crate::analysis::inspect::summarise(c);
    step.inc(c.layers.len() as u64);
    drop(step);
    let p = dir.join("inspect.json");
    write::write_json(&p, &summary)?;
    written.push(p);
    clock.done(&format!("inspect {}", c.name), t);

    let t = Instant::now();
    let probe = crate::analysis::probe::run(c, &opts.probe, common, progress)?;
    let probe_written = super::probe::write(&probe, dir)?;
    clock.done(&format!("probe {}", c.name), t);

    let t = Instant::now();
    let map = crate::analysis::map::run(c, &opts.map, common, progress)?;
    let map_written = super::map::write(&map, dir)?;
    clock.done(&format!("map {}", c.name), t);

    let (abx, abx_written, abx_notes) = abx_capture(c, dir, opts, common, progress, clock)?;
    let mut figures = Vec::new();
    for (w, section) in [
        (probe_written, FigureSection::Probe),
        (map_written, FigureSection::Maps),
        (abx_written, FigureSection::Abx),
    ] {
        written.extend(w.files);
        figures.extend(w.figures.into_iter().map(|d| embed(d, section, prefix)));
    }
    let notes = probe
        .notes
        .iter()
        .map(|n| format!("probe: {n}"))
        .chain(map.notes.iter().map(|n| format!("map: {n}")))
        .chain(abx_notes.iter().map(|n| format!("abx: {n}")))
        .collect();
    let options = vec![
        (format!("probe {}", c.name), probe.options.clone()),
        (format!("map {}", c.name), map.options.clone()),
    ];
    Ok(CaptureResult {
        section: CaptureSection {
            summary,
            probe: probe.records.clone(),
            purity: map.records.clone(),
            maps: Some(map_set(c, &map)?),
            abx,
            notes,
        },
        options,
        figures,
        written,
        probe,
    })
}

/// ABX of one capture when asked for: its records, what was written, and notes. A capture
/// where no cell holds a triplet gets a note instead of stopping the report.
fn abx_capture(
    c: &Capture,
    dir: &Path,
    opts: &ReportOptions,
    common: &CommonOptions,
    progress: &Progress,
    clock: &mut Clock,
) -> crate::Result<(Vec<AbxRecord>, Written, Vec<String>)> {
    let Some(a) = &opts.abx else {
        return Ok((vec![], Written::default(), vec![]));
    };
    let t = Instant::now();
    let result = match super::abx::analyse(c, a, common, progress) {
        Ok(r) => r,
        Err(crate::Error::Abx(
            e @ (AbxError::NoTriplet { .. } | AbxError::UnknownLabel { .. }),
        )) => {
            return Ok((
                vec![],
                Written::default(),
                vec![format!("not computed: {e}")],
            ));
        }
        Err(e) => return Err(e),
    };
    let written = super::abx::write(&super::abx::cap_ref(c), a, common.seed, &result, dir)?;
    clock.done(&format!("abx {}", c.name), t);
    Ok((result.records, written, result.notes))
}

/// With two captures that both have ABX records: one figure of both, as `abx.png`/`.svg` in
/// the report folder.
fn abx_both(
    sections: &[CaptureSection],
    abx: Option<&AbxOptions>,
    out: &Path,
) -> crate::Result<Option<Written>> {
    let (Some(a), [x, y]) = (abx, sections) else {
        return Ok(None);
    };
    if x.abx.is_empty() || y.abx.is_empty() {
        return Ok(None);
    }
    let fig = crate::render::abx::AbxCurves {
        label: a.label.clone(),
        series: sections
            .iter()
            .map(|s| crate::render::abx::AbxSeries::new(&s.summary.name, &s.abx))
            .collect(),
    };
    let title = format!(
        "{} ABX error within and across speaker, both captures",
        a.label
    );
    let mut w = Written::default();
    w.figure(out, crate::render::draw(&fig, "abx", &title)?)?;
    Ok(Some(w))
}

/// The maps of a run with what the explorer shows of each sampled frame.
fn map_set(c: &Capture, map: &MapReport) -> crate::Result<MapSet> {
    Ok(MapSet {
        capture: c.name.clone(),
        frames: map.frames.clone(),
        layers: map
            .layers
            .iter()
            .map(|l| (l.layer, l.embedding.clone()))
            .collect(),
        info: frame_info(c, &map.frames)?,
    })
}

fn page_title(caps: &[Capture]) -> String {
    match caps {
        [a] => format!("voxstrata report: {}", a.name),
        [a, b] => format!("voxstrata report: {} and {}", a.name, b.name),
        _ => "voxstrata report".to_string(),
    }
}

/// Write `run.json`: options, time per step, input hashes and every file written (itself
/// included), and return it.
fn write_run_record(
    opts: &ReportOptions,
    common: &CommonOptions,
    caps: &[Capture],
    timings: Vec<StepTime>,
    inputs: Vec<FileHash>,
    mut outputs: Vec<PathBuf>,
) -> crate::Result<RunRecord> {
    let run_json = opts.out.join("run.json");
    outputs.push(run_json.clone());
    let record = RunRecord {
        tool: "voxstrata".into(),
        version: env!("CARGO_PKG_VERSION").into(),
        captures: caps
            .iter()
            .map(|c| CaptureRef {
                name: c.name.clone(),
                path: c.dir.display().to_string(),
            })
            .collect(),
        options: serde_json::json!({
            "out": opts.out.display().to_string(),
            "force": opts.force,
            "seed": common.seed,
            "threads": common.threads,
            "layers": common.layers.as_ref().map(|l| l.0.clone()),
            "drop_label": opts.open.labels.drop,
            "merge_labels": opts.open.labels.merge.len(),
            "allow_nonfinite": opts.open.allow_nonfinite,
            "map_method": opts.map.method,
        }),
        timings,
        inputs,
        outputs: outputs
            .iter()
            .map(|p| write::relative(&opts.out, p))
            .collect(),
    };
    write::write_json(&run_json, &record)?;
    Ok(record)
}
