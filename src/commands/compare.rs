//! `voxstrata compare`: two captures of the same frames, layer by layer; writes
//! `compare.json`/`.csv`, `compare_probe_delta.csv` and the CKA, change and probe figures.

use std::path::{Path, PathBuf};

use crate::analysis::compare::{self, CompareOptions};
use crate::capture::{Capture, OpenOptions};
use crate::records::compare::CompareReport;
use crate::render::{self, compare::ChangeBars, compare::CkaHeatmap, compare::ProbeCurves};
use crate::write::{self, json::to_value};
use crate::{CommonOptions, Error, Progress};

use super::Written;

/// Everything `voxstrata compare` needs.
#[derive(Clone, Debug)]
pub struct CompareArgs {
    /// First capture.
    pub capture_a: PathBuf,
    /// Second capture.
    pub capture_b: PathBuf,
    /// How to read them.
    pub open: OpenOptions,
    /// Comparison settings.
    pub compare: CompareOptions,
    /// Output folder.
    pub out: PathBuf,
    /// Write into a folder that already holds files.
    pub force: bool,
}

/// Run the command: check, open both, compare, write, print.
pub fn run(args: &CompareArgs, common: &CommonOptions, progress: &Progress) -> Result<(), Error> {
    args.compare.check()?;
    write::check_out_dir(&args.out, args.force)?;
    let a = Capture::open(&args.capture_a, &args.open)?;
    let b = Capture::open(&args.capture_b, &args.open)?;
    super::print_notes(&a.notes);
    super::print_notes(&b.notes);
    let report = compare::run(&a, &b, &args.compare, common, progress, None)?;
    write::prepare_out_dir(&args.out, args.force)?;
    write(&report, &args.out)?;
    print!("{}", render::summary::compare(&report));
    Ok(())
}

/// Write `compare.json`/`.csv`, `compare_probe_delta.csv` and the figures into `dir` (which
/// must exist).
pub fn write(r: &CompareReport, dir: &Path) -> Result<Written, Error> {
    let mut extra = serde_json::Map::new();
    extra.insert("pairing".into(), to_value(&r.pairing)?);
    extra.insert("layers_a".into(), to_value(&r.layers_a)?);
    extra.insert("layers_b".into(), to_value(&r.layers_b)?);
    extra.insert("probe_delta".into(), to_value(&r.probe_delta)?);
    extra.insert("notes".into(), to_value(&r.notes)?);
    // Draw first (in memory) so a drawing failure leaves no records behind either.
    let heat = render::draw(
        &CkaHeatmap::from_report(r),
        "compare_cka",
        "CKA between every layer pair",
    )?;
    let bars = ChangeBars::from_report(r)
        .map(|b| {
            render::draw(
                &b,
                "compare_change",
                "change at each layer (1 − CKA of the same layer)",
            )
        })
        .transpose()?;
    let curves = ProbeCurves::from_report(r)
        .map(|c| render::draw(&c, "compare_probe", "probe accuracy on both checkpoints"))
        .transpose()?;
    let mut out = Written {
        files: write::write_records(
            dir,
            "compare",
            &r.captures,
            r.options.clone(),
            &r.cka,
            extra,
        )?,
        ..Default::default()
    };
    if !r.probe_delta.is_empty() {
        // The deltas also as their own table, for spreadsheets.
        let path = dir.join("compare_probe_delta.csv");
        write::csv::write_csv(&path, &r.probe_delta)?;
        out.files.push(path);
    }
    out.figure(dir, heat)?;
    for fig in [bars, curves].into_iter().flatten() {
        out.figure(dir, fig)?;
    }
    Ok(out)
}
