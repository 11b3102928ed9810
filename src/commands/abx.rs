//! `voxstrata abx`: phone ABX error rate per layer, within and across speaker; writes
//! `abx.json`/`.csv` and the `abx` figure.

use std::path::{Path, PathBuf};

use crate::analysis::abx::{self, AbxOptions, AbxResult};
use crate::capture::{Capture, OpenOptions};
use crate::records::CaptureRef;
use crate::render::{self, abx::AbxCurves, abx::AbxSeries};
use crate::write::{self, json::to_value};
use crate::{CommonOptions, Error, Progress};

use super::Written;

/// Everything `voxstrata abx` needs.
#[derive(Clone, Debug)]
pub struct AbxArgs {
    /// Capture folder.
    pub capture: PathBuf,
    /// How to read it.
    pub open: OpenOptions,
    /// ABX settings.
    pub abx: AbxOptions,
    /// Output folder.
    pub out: PathBuf,
    /// Write into a folder that already holds files.
    pub force: bool,
}

/// Run the command: check, open, score, write, print.
pub fn run(args: &AbxArgs, common: &CommonOptions, progress: &Progress) -> Result<(), Error> {
    args.abx.check()?;
    write::check_out_dir(&args.out, args.force)?;
    let cap = Capture::open(&args.capture, &args.open)?;
    super::print_notes(&cap.notes);
    let result = analyse(&cap, &args.abx, common, progress)?;
    super::print_notes(&result.notes);
    write::prepare_out_dir(&args.out, args.force)?;
    write(&cap_ref(&cap), &args.abx, common.seed, &result, &args.out)?;
    print!("{}", render::summary::abx(&cap.name, &result.records));
    println!("wrote {}", args.out.display());
    Ok(())
}

/// Score every selected layer of `cap` (one progress step per capture).
pub fn analyse(
    cap: &Capture,
    opts: &AbxOptions,
    common: &CommonOptions,
    progress: &Progress,
) -> Result<AbxResult, Error> {
    let layers = cap.select_layers(common.layers.as_ref())?;
    let step = progress.step(&format!("ABX {}", cap.name), 1);
    let result = abx::run(cap, opts, common.seed, &layers)?;
    step.inc(1);
    Ok(result)
}

/// The capture as named in output headers.
pub fn cap_ref(cap: &Capture) -> CaptureRef {
    CaptureRef {
        name: cap.name.clone(),
        path: cap.dir.display().to_string(),
    }
}

/// Write `abx.json`, `abx.csv` and the `abx` figure into `dir` (which must exist).
pub fn write(
    capture: &CaptureRef,
    opts: &AbxOptions,
    seed: u64,
    r: &AbxResult,
    dir: &Path,
) -> Result<Written, Error> {
    let mut options = to_value(opts)?;
    if let serde_json::Value::Object(m) = &mut options {
        m.insert("seed".into(), seed.into());
    }
    let mut extra = serde_json::Map::new();
    extra.insert("n_items".into(), r.n_items.into());
    extra.insert("n_items_used".into(), r.n_items_used.into());
    extra.insert("n_item_pairs".into(), r.n_item_pairs.into());
    extra.insert("n_speakers".into(), r.n_speakers.into());
    extra.insert("notes".into(), to_value(&r.notes)?);
    let mut out = Written {
        files: write::write_records(
            dir,
            "abx",
            std::slice::from_ref(capture),
            options,
            &r.records,
            extra,
        )?,
        ..Default::default()
    };
    let fig = AbxCurves {
        label: opts.label.clone(),
        series: vec![AbxSeries::new(&capture.name, &r.records)],
    };
    let title = format!("{} ABX error within and across speaker", opts.label);
    out.figure(dir, render::draw(&fig, "abx", &title)?)?;
    Ok(out)
}
