//! The assembly of a report from its units' parts: merge the one-layer probe and ABX parts
//! of each capture ([`crate::analysis::layerwise`]), inspect each capture, write every
//! result with the writer its own command uses, then `index.html` and `run.json`.

use std::path::{Path, PathBuf};
use std::time::Instant;

use super::units::{Part, Unit};
use super::{frame_info, hash_files, input_files, Clock, Done, ReportError, ReportOptions};
use crate::analysis::abx::{AbxOptions, AbxResult};
use crate::analysis::layerwise;
use crate::capture::Capture;
use crate::commands::Written;
use crate::records::map::MapReport;
use crate::records::probe::ProbeReport;
use crate::records::run::{FileHash, RunRecord, StepTime};
use crate::records::CaptureRef;
use crate::render::page::{
    self, CaptureSection, CompareInputs, FigureSection, MapSet, Methods, ReportInputs, SvgFigure,
    SVG_EMBED_LIMIT,
};
use crate::render::Drawn;
use crate::write;
use crate::{CommonOptions, Progress};

/// Write every file of the report from the parts of all its units (`done`, in plan order).
/// `started` is when the run began and the seconds its units ran outside this process (0 when
/// they ran in it); `clock` holds the steps timed so far.
pub fn write_all(
    caps: &[Capture],
    done: Vec<Done>,
    opts: &ReportOptions,
    common: &CommonOptions,
    progress: &Progress,
    mut clock: Clock,
    started: (Instant, f64),
) -> crate::Result<RunRecord> {
    let mut parts = Parts::new(done);
    let dirs = capture_dirs(caps, &opts.out);
    let mut hashes = Vec::new();
    let mut results = Vec::new();
    for (ci, (c, dir)) in caps.iter().zip(&dirs).enumerate() {
        let t = Instant::now();
        hashes.extend(hash_files(&c.name, &input_files(c), progress)?);
        clock.done(&format!("hash {}", c.name), t);
        let prefix = if caps.len() > 1 {
            format!("{}: ", c.name)
        } else {
            String::new()
        };
        let out = CaptureOut {
            ci,
            c,
            dir,
            prefix: &prefix,
            seed: common.seed,
        };
        results.push(capture_outputs(
            &out, &mut parts, opts, progress, &mut clock,
        )?);
    }
    let compare = compare_outputs(caps, &mut parts, &mut results, opts, common, &mut clock)?;

    let t = Instant::now();
    let (inputs, mut outputs) = gather(caps, results, compare, opts, common, &hashes, &clock)?;
    let step = progress.step("writing report", 1);
    let index = opts.out.join("index.html");
    write::write_atomic(&index, page::render(&inputs).as_bytes())?;
    step.inc(1);
    drop(step);
    outputs.push(index);
    clock.done("write index.html", t);
    clock.0.push(StepTime {
        step: "total".into(),
        seconds: started.0.elapsed().as_secs_f64() + started.1,
    });
    write_run_record(opts, common, caps, clock.0, hashes, outputs)
}

/// The parts not yet taken, in plan order.
struct Parts(Vec<Done>);

impl Parts {
    fn new(done: Vec<Done>) -> Self {
        Parts(done)
    }

    /// Take the parts whose unit `pick` accepts, in order, and the seconds they ran.
    fn take(&mut self, pick: impl Fn(&Unit) -> bool) -> (Vec<Part>, f64) {
        let (taken, kept): (Vec<Done>, Vec<Done>) = std::mem::take(&mut self.0)
            .into_iter()
            .partition(|d| pick(&d.unit));
        self.0 = kept;
        let seconds = taken.iter().map(|d| d.seconds).sum();
        (taken.into_iter().map(|d| d.part).collect(), seconds)
    }
}

fn missing(what: &str) -> crate::Error {
    ReportError::Internal(format!("no part holds the {what}")).into()
}

/// The capture an assembly step writes: its index, itself, its folder and the prefix of its
/// figure titles.
struct CaptureOut<'a> {
    ci: usize,
    c: &'a Capture,
    dir: &'a Path,
    prefix: &'a str,
    seed: u64,
}

/// What one capture's analyses produced: the page's section, the options each ran with, the
/// figures to embed and the files written.
struct CaptureResult {
    section: CaptureSection,
    options: Vec<(String, serde_json::Value)>,
    figures: Vec<SvgFigure>,
    written: Vec<PathBuf>,
    /// The probe's task names and pooled test predictions (empty with one capture), for the
    /// comparison's probe deltas.
    probe_predictions: (Vec<String>, Vec<crate::records::probe::TaskPredictions>),
}

/// What the comparison of two captures gave: the page's inputs, its options and the files
/// written.
struct CompareResult {
    inputs: CompareInputs,
    options: serde_json::Value,
    written: Written,
}

/// With two captures, write `compare.json` and its figures from the comparison's parts: its
/// CKA rows merged into the rest, and its probe deltas paired from the captures' probe
/// predictions when the comparison unit left them to the assembly.
fn compare_outputs(
    caps: &[Capture],
    parts: &mut Parts,
    results: &mut [CaptureResult],
    opts: &ReportOptions,
    common: &CommonOptions,
    clock: &mut Clock,
) -> crate::Result<Option<CompareResult>> {
    let [a, b] = caps else {
        return Ok(None);
    };
    let t = Instant::now();
    let (rows, row_seconds) = parts.take(|u| matches!(u, Unit::CkaRow { .. }));
    let rows = rows
        .into_iter()
        .map(|p| match p {
            Part::CkaRow(r) => Ok(r),
            _ => Err(missing("CKA row")),
        })
        .collect::<crate::Result<Vec<_>>>()?;
    let (found, seconds) = parts.take(|u| *u == Unit::Compare);
    let Some(Part::Compare(p)) = found.into_iter().next() else {
        return Err(missing("comparison"));
    };
    let mut rep = layerwise::merge_cka(crate::records::compare::CompareReport::from(p), rows)?;
    if rep.deltas_deferred {
        let [ra, rb] = results else {
            return Err(missing("probe predictions of both captures"));
        };
        let (tasks, pred_a) = std::mem::take(&mut ra.probe_predictions);
        let pred_b = std::mem::take(&mut rb.probe_predictions.1);
        if pred_a.is_empty() || pred_b.is_empty() {
            return Err(missing("test predictions for the probe deltas"));
        }
        rep.probe_delta = crate::analysis::compare::deltas_from_predictions(
            a,
            b,
            &tasks,
            &pred_a,
            &pred_b,
            &opts.compare,
            common.seed,
            &mut rep.notes,
        )?;
        rep.deltas_deferred = false;
    }
    let seconds = seconds + row_seconds;
    let written = crate::commands::compare::write(&rep, &opts.out)?;
    clock.0.push(StepTime {
        step: "compare".into(),
        seconds: seconds + t.elapsed().as_secs_f64(),
    });
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
        sample: opts
            .chosen
            .as_ref()
            .map(|c| c.sentence())
            .unwrap_or_default(),
        sample_scaled: opts.chosen.as_ref().is_some_and(|c| c.scaled),
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

/// The output folder of each capture: the report folder itself for one capture, a
/// sub-folder named after each for two.
pub fn capture_dirs(caps: &[Capture], out: &Path) -> Vec<PathBuf> {
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

/// Inspect one capture and write its probe, map and ABX results into its folder, from its
/// units' parts.
fn capture_outputs(
    out: &CaptureOut,
    parts: &mut Parts,
    opts: &ReportOptions,
    progress: &Progress,
    clock: &mut Clock,
) -> crate::Result<CaptureResult> {
    let (c, dir, prefix, ci) = (out.c, out.dir, out.prefix, out.ci);
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
    let (probe, seconds) = probe_of(parts, ci)?;
    let probe_written = crate::commands::probe::write(&probe, dir)?;
    clock.0.push(StepTime {
        step: format!("probe {}", c.name),
        seconds: seconds + t.elapsed().as_secs_f64(),
    });

    let t = Instant::now();
    let (map, seconds) = map_of(parts, ci)?;
    let map_written = crate::commands::map::write(&map, dir)?;
    clock.0.push(StepTime {
        step: format!("map {}", c.name),
        seconds: seconds + t.elapsed().as_secs_f64(),
    });

    let (abx, abx_written, abx_notes) = abx_outputs(c, ci, dir, parts, opts, out.seed, clock)?;
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
            probe: probe.records,
            purity: map.records.clone(),
            maps: Some(map_set(c, &map)?),
            abx,
            notes,
        },
        options,
        figures,
        written,
        probe_predictions: (
            probe.tasks.iter().map(|t| t.task.clone()).collect(),
            probe.predictions,
        ),
    })
}

/// The merged probe report of capture `ci`, and the seconds its units ran.
fn probe_of(parts: &mut Parts, ci: usize) -> crate::Result<(ProbeReport, f64)> {
    let (found, seconds) =
        parts.take(|u| matches!(u, Unit::Probe { capture, .. } if *capture == ci));
    let reports = found
        .into_iter()
        .map(|p| match p {
            Part::Probe(r) => Ok(r.into_report()),
            _ => Err(missing("probe")),
        })
        .collect::<crate::Result<Vec<_>>>()?;
    Ok((layerwise::merge_probe(reports)?, seconds))
}

/// The map report of capture `ci`, and the seconds its unit ran.
fn map_of(parts: &mut Parts, ci: usize) -> crate::Result<(MapReport, f64)> {
    let (found, seconds) = parts.take(|u| *u == Unit::Map { capture: ci });
    match found.into_iter().next() {
        Some(Part::Map(m)) => Ok((m.into_report()?, seconds)),
        _ => Err(missing("map")),
    }
}

/// ABX of one capture when asked for, from its layers' parts: its records, what was written,
/// and notes. A capture where no cell holds a triplet gets a note instead of stopping the
/// report.
fn abx_outputs(
    c: &Capture,
    ci: usize,
    dir: &Path,
    parts: &mut Parts,
    opts: &ReportOptions,
    seed: u64,
    clock: &mut Clock,
) -> crate::Result<(Vec<crate::records::abx::AbxRecord>, Written, Vec<String>)> {
    let Some(a) = &opts.abx else {
        return Ok((vec![], Written::default(), vec![]));
    };
    let t = Instant::now();
    let (found, seconds) = parts.take(|u| matches!(u, Unit::Abx { capture, .. } if *capture == ci));
    let mut layers = Vec::new();
    for p in found {
        match p {
            Part::Abx(l) => layers.push(l),
            Part::AbxNotComputed { reason } => {
                return Ok((vec![], Written::default(), vec![reason]))
            }
            _ => return Err(missing("ABX")),
        }
    }
    let result: AbxResult = layerwise::merge_abx(layers).ok_or_else(|| missing("ABX"))?;
    let cap_ref = crate::commands::abx::cap_ref(c);
    let written = crate::commands::abx::write(&cap_ref, a, seed, &result, dir)?;
    clock.0.push(StepTime {
        step: format!("abx {}", c.name),
        seconds: seconds + t.elapsed().as_secs_f64(),
    });
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
            "probe_frames": opts.sample.probe_frames,
            "map_points": opts.sample.map_points,
            "sample": opts.chosen,
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
