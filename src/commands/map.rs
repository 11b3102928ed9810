//! `voxstrata map`: 2-D maps and purity per layer; writes `purity.json`/`.csv`, the maps as
//! `maps/layer_XX.npy` with `maps/frames.npy`, one map grid per colouring and the purity
//! curves.

use std::path::{Path, PathBuf};

use crate::analysis::map::{self, MapOptions};
use crate::capture::{Capture, OpenOptions};
use crate::records::map::MapReport;
use crate::render::{self, map::MapGrid, map::PurityCurves};
use crate::write::{self, json::to_value};
use crate::{CommonOptions, Error, Progress};

use super::Written;

/// Everything `voxstrata map` needs.
#[derive(Clone, Debug)]
pub struct MapArgs {
    /// Capture folder.
    pub capture: PathBuf,
    /// How to read it.
    pub open: OpenOptions,
    /// Map settings.
    pub map: MapOptions,
    /// Output folder.
    pub out: PathBuf,
    /// Write into a folder that already holds files.
    pub force: bool,
}

/// Run the command: check, open, map, write, print.
pub fn run(args: &MapArgs, common: &CommonOptions, progress: &Progress) -> Result<(), Error> {
    args.map.check()?;
    write::check_out_dir(&args.out, args.force)?;
    let cap = Capture::open(&args.capture, &args.open)?;
    super::print_notes(&cap.notes);
    let report = map::run(&cap, &args.map, common, progress)?;
    super::print_notes(&report.notes);
    write::prepare_out_dir(&args.out, args.force)?;
    write(&report, &args.out)?;
    print!("{}", render::summary::map(&report.summary));
    println!("wrote {}", args.out.display());
    Ok(())
}

/// Write maps, purity records and figures of `report` into `dir` (which must exist).
pub fn write(report: &MapReport, dir: &Path) -> Result<Written, Error> {
    let mut out = Written::default();
    let maps = dir.join("maps");
    for l in &report.layers {
        let p = maps.join(format!("layer_{:02}.npy", l.layer));
        write::write_npy_f32(&p, &l.embedding.view())?;
        out.files.push(p);
    }
    let p = maps.join("frames.npy");
    write::write_npy_u64(&p, &report.frames)?;
    out.files.push(p);
    let mut extra = serde_json::Map::new();
    extra.insert("summary".into(), to_value(&report.summary)?);
    extra.insert("layers".into(), to_value(&report.layers)?);
    extra.insert("notes".into(), to_value(&report.notes)?);
    extra.insert("n_frames".into(), report.frames.len().into());
    out.files.extend(write::write_records(
        dir,
        "purity",
        std::slice::from_ref(&report.capture),
        report.options.clone(),
        &report.records,
        extra,
    )?);
    for name in &report.colourings {
        if let Some(lab) = report.labels.iter().find(|l| &l.name == name) {
            let stem = format!("map_{}", write::file_stem(name));
            let title = format!("layer maps coloured by {name}");
            out.figure(
                dir,
                render::draw(&MapGrid::new(report, lab), &stem, &title)?,
            )?;
        }
    }
    let curves = render::draw(&PurityCurves::new(report), "purity", "purity by layer")?;
    out.figure(dir, curves)?;
    Ok(out)
}
