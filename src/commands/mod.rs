//! One file per command: each owns its whole sequence — check options, open the captures,
//! analyse, write records, draw figures, print the summary and notes. `report` calls the same
//! writers on the results it holds in memory.

pub mod abx;
pub mod batch;
pub mod compare;
pub mod demo;
pub mod inspect;
pub mod map;
pub mod probe;
pub mod report;

use std::path::{Path, PathBuf};

use crate::render::Drawn;
use crate::write::{self, OutputError};

/// What a writer put on disk: every file, and the figures it drew (so the report page embeds
/// the very same pictures).
#[derive(Debug, Default)]
pub struct Written {
    /// Every file written, in order.
    pub files: Vec<PathBuf>,
    /// The figures drawn, in order.
    pub figures: Vec<Drawn>,
}

impl Written {
    /// Write a drawn figure as `<dir>/<stem>.png` and `<dir>/<stem>.svg` and keep it.
    pub fn figure(&mut self, dir: &Path, fig: Drawn) -> Result<(), OutputError> {
        let png = dir.join(format!("{}.png", fig.stem));
        let svg = dir.join(format!("{}.svg", fig.stem));
        write::write_atomic(&png, &fig.png)?;
        write::write_atomic(&svg, fig.svg.as_bytes())?;
        self.files.push(png);
        self.files.push(svg);
        self.figures.push(fig);
        Ok(())
    }

    /// Append what another writer wrote.
    pub fn extend(&mut self, other: Written) {
        self.files.extend(other.files);
        self.figures.extend(other.figures);
    }
}

/// Print notes of an analysis on stderr, one line each.
pub fn print_notes(notes: &[String]) {
    for n in notes {
        eprintln!("voxstrata: note: {n}");
    }
}
