//! `voxstrata demo`: build the demo scenario and write its two captures.

use std::path::{Path, PathBuf};

use crate::demo::{self, DemoOptions, DemoSize, Scenario};
use crate::write::{self, prepare_out_dir, write_atomic};
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
        seed: args.seed,
        size: args.size,
    };
    let scenario = demo::build(&opts, progress)?;
    write(&scenario, &args.out)?;
    let s = &scenario.summary;
    println!(
        "demo: {} talkers ({} held out), {} training frames, {} frames per capture",
        s.talkers, s.heldout_talkers, s.train_frames, s.capture_frames
    );
    println!(
        "held-out (speaker-disjoint) phone accuracy: early (step {}) {:.4}, final (step {}) {:.4}",
        s.steps.0, s.heldout_accuracy.0, s.steps.1, s.heldout_accuracy.1
    );
    for c in &scenario.captures {
        println!("wrote {}", args.out.join(c.name).display());
    }
    Ok(())
}

/// Write each capture of `scenario` as a folder under `out_dir` (`early/`, `final/`): its
/// layers as f16 `.npy`, the shared `frames.tsv` and its `capture.toml`. Returns the files
/// written, in order. Call [`write::check_out_dir`] before building the scenario.
pub fn write(scenario: &Scenario, out_dir: &Path) -> Result<Vec<PathBuf>, Error> {
    // The folder was checked (with the user's --force) before any work; this creates it
    // and clears temporaries a killed run left.
    prepare_out_dir(out_dir, true)?;
    let mut written = Vec::new();
    for cap in &scenario.captures {
        let dir = out_dir.join(cap.name);
        for (l, layer) in cap.layers.iter().enumerate() {
            let path = dir.join(format!("layer_{l:02}.npy"));
            write_atomic(&path, &npy_f16_bytes(layer))?;
            written.push(path);
        }
        let path = dir.join("frames.tsv");
        write_atomic(&path, scenario.frames_tsv.as_bytes())?;
        written.push(path);
        let path = dir.join("capture.toml");
        write_atomic(&path, cap.capture_toml.as_bytes())?;
        written.push(path);
    }
    Ok(written)
}

/// f16 values as a C-order `.npy` (format 1.0, descr `<f2`; NumPy's NEP 1 layout: magic,
/// version, little-endian header length, header padded to a multiple of 64 bytes).
fn npy_f16_bytes(layer: &(usize, usize, Vec<u16>)) -> Vec<u8> {
    let (rows, cols, bits) = layer;
    let mut header =
        format!("{{'descr': '<f2', 'fortran_order': False, 'shape': ({rows}, {cols}), }}");
    let pad = 64 - (10 + header.len() + 1) % 64;
    header.push_str(&" ".repeat(pad % 64));
    header.push('\n');
    let mut buf = Vec::with_capacity(10 + header.len() + bits.len() * 2);
    buf.extend_from_slice(b"\x93NUMPY\x01\x00");
    buf.extend_from_slice(&(header.len() as u16).to_le_bytes());
    buf.extend_from_slice(header.as_bytes());
    for b in bits {
        buf.extend_from_slice(&b.to_le_bytes());
    }
    buf
}
