//! `voxstrata demo`: build the demo scenario and write its two captures.

use std::path::PathBuf;

use crate::demo::{self, DemoOptions, DemoSize};
use crate::write;
use crate::{Error, Progress};

/// Everything `voxstrata demo` needs.
#[derive(Clone, Debug)]
pub struct DemoArgs {
    /// Output folder (gets `early/` and `final/`).
    pub out: PathBuf,
    /// Write into a folder that already holds files.
    pub force: bool,
    /// Seed of the scenario.
    pub seed: u64,
    /// Size of the scenario.
    pub size: DemoSize,
}

/// Run the command: build the scenario, write both captures, print what was made.
pub fn run(args: &DemoArgs, progress: &Progress) -> Result<(), Error> {
    write::check_out_dir(&args.out, args.force)?;
    let opts = DemoOptions {
        out: args.out.clone(),
        force: args.force,
        seed: args.seed,
        size: args.size,
    };
    let s = demo::run(&opts, progress)?;
    println!(
        "demo: {} talkers ({} held out), {} training frames, {} frames per capture",
        s.talkers, s.heldout_talkers, s.train_frames, s.capture_frames
    );
    println!(
        "held-out (speaker-disjoint) phone accuracy: early (step {}) {:.4}, final (step {}) {:.4}",
        s.steps.0, s.heldout_accuracy.0, s.steps.1, s.heldout_accuracy.1
    );
    for c in &s.captures {
        println!("wrote {}", c.display());
    }
    Ok(())
}
