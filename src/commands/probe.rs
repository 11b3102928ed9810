//! `voxstrata probe`: linear probes per layer and task; writes `probe.json`, `probe.csv`
//! (categorical tasks), `probe_continuous.csv` (continuous tasks), the score figure and the
//! confusion matrices at each task's best layer.

use std::path::{Path, PathBuf};

use crate::analysis::probe::{self, ProbeOptions};
use crate::capture::{Capture, OpenOptions};
use crate::records::probe::ProbeReport;
use crate::render::{self, probe::ConfusionHeatmap, probe::LayerCurves};
use crate::write::{self, json::to_value};
use crate::{CommonOptions, Error, Progress};

use super::Written;

/// Everything `voxstrata probe` needs.
#[derive(Clone, Debug)]
pub struct ProbeArgs {
    /// Capture folder.
    pub capture: PathBuf,
    /// How to read it.
    pub open: OpenOptions,
    /// Probe settings.
    pub probe: ProbeOptions,
    /// Output folder.
    pub out: PathBuf,
    /// Write into a folder that already holds files.
    pub force: bool,
}

/// Run the command: check, open, probe, write, print.
pub fn run(args: &ProbeArgs, common: &CommonOptions, progress: &Progress) -> Result<(), Error> {
    args.probe.check()?;
    write::check_out_dir(&args.out, args.force)?;
    let cap = Capture::open(&args.capture, &args.open)?;
    super::print_notes(&cap.notes);
    let report = probe::run(&cap, &args.probe, common, progress)?;
    super::print_notes(&report.notes);
    write::prepare_out_dir(&args.out, args.force)?;
    write(&report, &args.out)?;
    print!("{}", render::summary::probe(&report));
    println!("  outputs in {}", args.out.display());
    Ok(())
}

/// Write `probe.json`, `probe.csv`, the `probe` figure, the `probe_mdl` figure (with
/// `--mdl`) and `confusion_<task>` figures into `dir` (which must exist).
pub fn write(r: &ProbeReport, dir: &Path) -> Result<Written, Error> {
    let mut extra = serde_json::Map::new();
    let mut leak = serde_json::Map::new();
    for t in &r.tasks {
        leak.insert(t.task.clone(), to_value(&t.leakage_check)?);
    }
    extra.insert("split".into(), to_value(&r.tasks)?);
    extra.insert("leakage_check".into(), serde_json::Value::Object(leak));
    extra.insert("confusion".into(), to_value(&r.confusion)?);
    extra.insert("summary".into(), to_value(&r.summary)?);
    extra.insert("summary_text".into(), render::summary::probe(r).into());
    extra.insert("notes".into(), to_value(&r.notes)?);
    let json = write::json::write_envelope(
        dir,
        "probe",
        std::slice::from_ref(&r.capture),
        r.options.clone(),
        &r.records,
        extra,
    )?;
    let mut out = Written {
        files: vec![json],
        ..Default::default()
    };
    write_csvs(r, dir, &mut out)?;
    let curves = render::draw(&LayerCurves::new(r), "probe", "probe accuracy by layer")?;
    out.figure(dir, curves)?;
    if let Some(m) = render::mdl::MdlCurves::new(r) {
        out.figure(
            dir,
            render::draw(&m, "probe_mdl", "MDL compression by layer")?,
        )?;
    }
    for c in &r.confusion {
        let stem = format!("confusion_{}", write::file_stem(&c.task));
        let title = format!("{} confusions at the best layer", c.task);
        out.figure(dir, render::draw(&ConfusionHeatmap::new(c), &stem, &title)?)?;
    }
    Ok(out)
}

/// `probe.csv` (categorical records, the accuracy columns; always written) and, when there
/// are continuous tasks, `probe_continuous.csv` (their records, the regression columns).
fn write_csvs(r: &ProbeReport, dir: &Path, out: &mut Written) -> Result<(), Error> {
    use crate::records::probe::{CONTINUOUS_COLUMNS, CONTINUOUS_ONLY};
    let mut csv = |name: &str, kind: &str, keep: &dyn Fn(&str) -> bool| -> Result<(), Error> {
        let path = dir.join(name);
        let bytes = write::csv::records_to_csv_where(&r.records, "kind", kind, keep).map_err(
            |message| write::OutputError::Encode {
                path: path.clone(),
                message,
            },
        )?;
        write::write_atomic(&path, &bytes)?;
        out.files.push(path);
        Ok(())
    };
    csv("probe.csv", "categorical", &|c| {
        !CONTINUOUS_ONLY.contains(&c)
    })?;
    if r.records.iter().any(|x| x.is_continuous()) {
        csv("probe_continuous.csv", "continuous", &|c| {
            CONTINUOUS_COLUMNS.contains(&c)
        })?;
    }
    Ok(())
}
