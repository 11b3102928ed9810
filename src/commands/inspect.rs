//! `voxstrata inspect`: what is in a capture, as text or JSON on stdout.

use std::path::PathBuf;

use crate::analysis::inspect;
use crate::capture::{Capture, OpenOptions};
use crate::{Error, Progress};

/// Everything `voxstrata inspect` needs.
#[derive(Clone, Debug)]
pub struct InspectArgs {
    /// Capture folder.
    pub capture: PathBuf,
    /// How to read it.
    pub open: OpenOptions,
    /// Print JSON instead of text.
    pub json: bool,
}

/// Run the command: open, summarise, print.
pub fn run(args: &InspectArgs, _progress: &Progress) -> Result<(), Error> {
    let cap = Capture::open(&args.capture, &args.open)?;
    let s = inspect::summarise(&cap);
    if args.json {
        let text = serde_json::to_string_pretty(&s).map_err(|e| Error::Internal(e.to_string()))?;
        println!("{text}");
    } else {
        print!("{}", crate::render::summary::inspect(&s));
    }
    Ok(())
}
