//! What the report reads from the captures themselves, beside the analyses' records: the
//! labels, utterance and time of each sampled map frame (for the explorer), the input files
//! and their SHA-256 (for the methods paragraph and `run.json`), and where the shipped demo
//! lives.

use std::path::{Path, PathBuf};

use rayon::prelude::*;
use sha2::{Digest, Sha256};

use super::ReportError;
use crate::capture::{Capture, UNLABELLED};
use crate::records::run::FileHash;
use crate::render::page::{FrameInfo, LabelColumn, ValueColumn};
use crate::Progress;

/// Labels, utterance and centre time of the given frames of a capture, for the explorer.
/// Time is `frame_pos × hop_s + win_s / 2`, the capture's frame-centre rule.
pub fn frame_info(cap: &Capture, frames: &[u64]) -> Result<FrameInfo, ReportError> {
    let n = cap.n_frames() as u64;
    if let Some(&bad) = frames.iter().find(|&&f| f >= n) {
        return Err(ReportError::Internal(format!(
            "{}: sampled frame index {bad} is outside the capture's {n} frames",
            cap.dir.display()
        )));
    }
    let ft = &cap.frames;
    let hop = cap.config.hop_s;
    let half_win = cap.config.win_s.unwrap_or(hop) / 2.0;
    let mut utt_map = std::collections::HashMap::new();
    let mut utterances = Vec::new();
    let mut utt = Vec::with_capacity(frames.len());
    let mut time_s = Vec::with_capacity(frames.len());
    for &f in frames {
        let u = ft.frame_utt[f as usize];
        let code = *utt_map.entry(u).or_insert_with(|| {
            utterances.push(ft.utterances[u as usize].clone());
            (utterances.len() - 1) as u32
        });
        utt.push(code);
        time_s.push(ft.frame_pos[f as usize] as f64 * hop + half_win);
    }
    let columns = ft
        .tasks
        .iter()
        .map(|t| {
            // Keep only the classes the sample uses, in their original order.
            let mut used = vec![false; t.classes.len()];
            for &f in frames {
                let c = t.codes[f as usize];
                if c != UNLABELLED {
                    used[c as usize] = true;
                }
            }
            let mut remap = vec![UNLABELLED; t.classes.len()];
            let mut classes = Vec::new();
            for (k, name) in t.classes.iter().enumerate() {
                if used[k] {
                    remap[k] = classes.len() as u32;
                    classes.push(name.clone());
                }
            }
            let codes = frames
                .iter()
                .map(|&f| {
                    let c = t.codes[f as usize];
                    if c == UNLABELLED {
                        UNLABELLED
                    } else {
                        remap[c as usize]
                    }
                })
                .collect();
            LabelColumn {
                name: t.name.clone(),
                classes,
                codes,
            }
        })
        .collect();
    let values = ft
        .continuous
        .iter()
        .map(|t| ValueColumn {
            name: t.name.clone(),
            values: frames.iter().map(|&f| t.values[f as usize]).collect(),
        })
        .collect();
    Ok(FrameInfo {
        utterances,
        utt,
        time_s,
        columns,
        values,
    })
}

/// The files a capture was read from: layer files, label tables and capture.toml.
pub fn input_files(cap: &Capture) -> Vec<PathBuf> {
    let mut files: Vec<PathBuf> = Vec::new();
    for l in &cap.layers {
        if !files.iter().any(|f| f == l.path()) {
            files.push(l.path().to_path_buf());
        }
    }
    for name in [
        "frames.tsv",
        "utterances.tsv",
        "segments.tsv",
        "capture.toml",
    ] {
        let p = cap.dir.join(name);
        let used = match name {
            "frames.tsv" => cap.label_source == "frames.tsv",
            "utterances.tsv" | "segments.tsv" => cap.label_source != "frames.tsv",
            _ => true,
        };
        if used && p.is_file() {
            files.push(p);
        }
    }
    files
}

/// SHA-256 of each file, files in parallel (a progress step advances by bytes).
pub fn hash_files(
    capture: &str,
    files: &[PathBuf],
    progress: &Progress,
) -> Result<Vec<FileHash>, ReportError> {
    let total: u64 = files
        .iter()
        .filter_map(|f| std::fs::metadata(f).ok())
        .map(|m| m.len())
        .sum();
    let step = progress.step(&format!("hashing {capture}"), total);
    files
        .par_iter()
        .map(|f| {
            let (bytes, digest) =
                hash_one(f, 64 << 20, &|k| step.inc(k)).map_err(|source| ReportError::Hash {
                    path: f.clone(),
                    source,
                })?;
            Ok(FileHash {
                capture: capture.to_string(),
                file: f.display().to_string(),
                bytes,
                sha256: digest.iter().map(|b| format!("{b:02x}")).collect(),
            })
        })
        .collect()
}

/// Byte count and SHA-256 of one file, read through a memory map in windows of `window`
/// bytes (64 MiB in use), each dropped from the resident set once hashed. On the virtual
/// machines measured, `read` into a buffer copied at about 0.45 GB/s from the page cache; the
/// map hashes at the digest's own rate (a 13-layer capture of 4 GB: 14 s before, about 3 s
/// after on one core).
fn hash_one(
    path: &Path,
    window: usize,
    advance: &(dyn Fn(u64) + Sync),
) -> std::io::Result<(u64, Vec<u8>)> {
    let file = std::fs::File::open(path)?;
    let len = file.metadata()?.len();
    let mut h = Sha256::new();
    if len == 0 {
        return Ok((0, h.finalize().to_vec()));
    }
    // SAFETY: a read-only map of a file we only read; a file changed under us gives a wrong
    // digest, never unsafety, as the bytes are only hashed.
    let map = unsafe { memmap2::Mmap::map(&file) }?;
    let _ = map.advise(memmap2::Advice::Sequential);
    let mut at = 0usize;
    while at < map.len() {
        let end = (at + window.max(1)).min(map.len());
        h.update(&map[at..end]);
        advance((end - at) as u64);
        // SAFETY: read-only file mapping; dropped pages are refilled from the file on access.
        unsafe {
            let _ = map.unchecked_advise_range(memmap2::UncheckedAdvice::DontNeed, at, end - at);
        }
        at = end;
    }
    Ok((map.len() as u64, h.finalize().to_vec()))
}

/// Where the shipped demo's two captures are looked for: beside the crate's sources (as
/// built) and in the current folder.
pub fn demo_candidates() -> Vec<PathBuf> {
    vec![
        Path::new(env!("CARGO_MANIFEST_DIR")).join("demo_activations"),
        PathBuf::from("demo_activations"),
    ]
}

/// The shipped demo captures (`early` and `final`), from the first place that has both.
pub fn demo_captures() -> Result<Vec<PathBuf>, ReportError> {
    let cands = demo_candidates();
    for c in &cands {
        let (a, b) = (c.join("early"), c.join("final"));
        if a.is_dir() && b.is_dir() {
            return Ok(vec![a, b]);
        }
    }
    Err(ReportError::DemoMissing {
        searched: cands
            .iter()
            .map(|p| p.display().to_string())
            .collect::<Vec<_>>()
            .join(", "),
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn sha256_of_known_text() {
        // FIPS 180-2 example: SHA-256("abc").
        let d = tempfile::tempdir().unwrap();
        let p = d.path().join("abc");
        std::fs::write(&p, b"abc").unwrap();
        let h = hash_files("x", &[p], &Progress::hidden()).unwrap();
        assert_eq!(
            h[0].sha256,
            "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
        );
        assert_eq!(h[0].bytes, 3);
    }

    #[test]
    fn digest_does_not_depend_on_the_window_and_an_empty_file_hashes() {
        let d = tempfile::tempdir().unwrap();
        let p = d.path().join("abc");
        std::fs::write(&p, b"abc").unwrap();
        let hex = |v: Vec<u8>| v.iter().map(|b| format!("{b:02x}")).collect::<String>();
        for w in [1, 2, 3, 1 << 20] {
            let (n, dg) = hash_one(&p, w, &|_| {}).unwrap();
            assert_eq!(n, 3);
            // FIPS 180-2 example, as above.
            assert_eq!(
                hex(dg),
                "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad",
                "window {w}"
            );
        }
        let e = d.path().join("empty");
        std::fs::write(&e, b"").unwrap();
        let (n, dg) = hash_one(&e, 1 << 20, &|_| {}).unwrap();
        assert_eq!(n, 0);
        // SHA-256 of the empty message (FIPS 180 test vectors, NIST CAVP short messages).
        assert_eq!(
            hex(dg),
            "e3b0c44298fc1c149afbf4c8996fb92427ae41e4649b934ca495991b7852b855"
        );
    }
}
