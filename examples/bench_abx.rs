//! Benchmark helper: phone ABX of every layer of a capture through `analysis::abx::run` (the
//! layers read from the capture files, only the frames the items use). Prints one JSON line
//! with the seconds of building the items, of each layer (each layer run alone, items
//! included), of one run over all layers, the item counts and the records.
//!
//! Usage: `bench_abx CAPTURE [--speakers K] [--max-items N] [--seed S]`; `--speakers K` keeps
//! the first K speakers (in order of first appearance) and leaves the others' frames
//! unlabelled, so that `bench/abx_ref.py` can run the same subset.

use std::path::PathBuf;
use std::time::Instant;

use voxstrata::analysis::abx::{self, AbxOptions};
use voxstrata::{Capture, OpenOptions};

fn main() -> Result<(), Box<dyn std::error::Error>> {
    let args: Vec<String> = std::env::args().skip(1).collect();
    let usage = "usage: bench_abx CAPTURE [--speakers K] [--max-items N] [--seed S]";
    let path = args.first().ok_or(usage)?;
    let mut opts = AbxOptions::default();
    let (mut speakers, mut seed) = (None::<usize>, 0u64);
    let mut it = args[1..].iter();
    while let Some(a) = it.next() {
        let v = it.next().ok_or(usage)?;
        match a.as_str() {
            "--speakers" => speakers = Some(v.parse()?),
            "--max-items" => opts.max_items = v.parse()?,
            "--seed" => seed = v.parse()?,
            _ => return Err(usage.into()),
        }
    }
    let mut cap = Capture::open(&PathBuf::from(path), &OpenOptions::default())?;
    if let Some(k) = speakers {
        let bad: Vec<bool> = cap
            .frames
            .frame_speaker()
            .iter()
            .map(|&s| s as usize >= k)
            .collect();
        cap.frames.mask_frames(&bad);
    }
    let layers: Vec<usize> = (0..cap.layers.len()).collect();
    // the item structure alone (part of every run below)
    let t = Instant::now();
    let items = abx::AbxItems::new(&cap.frames, &opts.label, opts.max_items, seed)?;
    let items_s = t.elapsed().as_secs_f64();
    drop(items);
    let mut per_layer = Vec::new();
    for &l in &layers {
        let t = Instant::now();
        abx::run(&cap, &opts, seed, &[l])?;
        per_layer.push(t.elapsed().as_secs_f64());
    }
    let t = Instant::now();
    let r = abx::run(&cap, &opts, seed, &layers)?;
    let total = t.elapsed().as_secs_f64();
    let out = serde_json::json!({
        "capture": path,
        "speakers": speakers,
        "max_items": opts.max_items,
        "threads": rayon::current_num_threads(),
        "n_items": r.n_items,
        "n_items_used": r.n_items_used,
        "n_item_pairs": r.n_item_pairs,
        "seconds_items": items_s,
        "seconds_per_layer": per_layer,
        "seconds_total": total,
        "records": r.records,
        "notes": r.notes,
    });
    println!("{out}");
    Ok(())
}
