//! The two per-utterance layouts of layer data, both listed by `utterances.tsv`:
//! - stacks: `acts/<utterance>.npy`, each (layers, frames, dim), the same layers and dim in
//!   every file;
//! - per-layer folders: `layer_XX/<utterance>.npy`, each (frames, dim), folders named by the
//!   layer pattern without its `.npy` ending, the same frames per utterance in every folder.
//!
//! Only headers are read here; see `source.rs` for reading the data.

use std::collections::HashSet;
use std::path::{Path, PathBuf};
use std::sync::Arc;

use rayon::prelude::*;

use super::source::{read_header, LayerSource, Part, Parts};
use super::utterances::UttList;
use super::{match_pattern, CaptureConfig, CaptureError};

/// Layers found in a per-utterance layout, with what was found.
pub(crate) struct PerUtterance {
    /// The layers, in order of their number.
    pub layers: Vec<LayerSource>,
    /// Frames of each utterance, in the order of `utterances.tsv`.
    pub counts: Vec<u32>,
    /// The layout in words.
    pub layout: String,
    /// Warnings (array files that `utterances.tsv` does not list).
    pub notes: Vec<String>,
}

/// Which per-utterance layout `dir` holds, if any: `acts/` or folders named like the layer
/// pattern (numbered).
pub(crate) fn detect(
    dir: &Path,
    config: &CaptureConfig,
) -> Result<Option<Vec<(usize, PathBuf)>>, CaptureError> {
    if dir.join("acts").is_dir() {
        return Ok(Some(vec![]));
    }
    let pattern = folder_pattern(&config.layer_pattern);
    let mut folders = Vec::new();
    let rd = std::fs::read_dir(dir).map_err(|e| CaptureError::io(dir, e))?;
    for e in rd {
        let e = e.map_err(|e| CaptureError::io(dir, e))?;
        if !e.path().is_dir() {
            continue;
        }
        if let Some(id) = match_pattern(&pattern, &e.file_name().to_string_lossy()) {
            folders.push((id, e.path()));
        }
    }
    folders.sort();
    Ok(if folders.is_empty() {
        None
    } else {
        Some(folders)
    })
}

/// The folder pattern for per-layer folders: the file pattern without `.npy`.
fn folder_pattern(p: &str) -> String {
    p.strip_suffix(".npy").unwrap_or(p).to_string()
}

/// An utterance name must be usable as a file name.
fn file_of(dir: &Path, ul: &UttList, u: usize) -> Result<PathBuf, CaptureError> {
    let name = &ul.names[u];
    if name.contains(['/', '\\']) || name == "." || name == ".." {
        return Err(CaptureError::Table {
            path: ul.path.clone(),
            row: ul.lines[u],
            field: "utterance".into(),
            expected: "an utterance name usable as a file name (no '/' or '\\')".into(),
            found: format!("'{name}'"),
        });
    }
    Ok(dir.join(format!("{name}.npy")))
}

/// Read the headers of `<dir>/<utterance>.npy` for every utterance (in parallel).
fn headers(dir: &Path, ul: &UttList) -> Result<Vec<Part>, CaptureError> {
    let paths: Vec<PathBuf> = (0..ul.names.len())
        .map(|u| file_of(dir, ul, u))
        .collect::<Result<_, _>>()?;
    paths
        .into_par_iter()
        .enumerate()
        .map(|(u, p)| {
            if !p.is_file() {
                return Err(CaptureError::Invalid {
                    path: p.clone(),
                    what: "array file".into(),
                    expected: format!(
                        "a file for utterance '{}' (line {} of {})",
                        ul.names[u],
                        ul.lines[u],
                        ul.path.display()
                    ),
                    found: "no such file".into(),
                });
            }
            let (header, file_len) = read_header(&p)?;
            Ok(Part {
                path: p,
                header,
                file_len,
                start: 0,
                frames: 0,
            })
        })
        .collect()
}

/// `.npy` files in `dir` that `ul` does not list: a warning naming the first.
fn unlisted(dir: &Path, ul: &UttList) -> Result<Option<String>, CaptureError> {
    let mut extra: Vec<String> = Vec::new();
    let rd = std::fs::read_dir(dir).map_err(|e| CaptureError::io(dir, e))?;
    for e in rd {
        let e = e.map_err(|e| CaptureError::io(dir, e))?;
        let name = e.file_name().to_string_lossy().into_owned();
        if let Some(stem) = name.strip_suffix(".npy") {
            if ul.find(stem).is_none() {
                extra.push(name);
            }
        }
    }
    extra.sort();
    Ok(extra.first().map(|f| {
        format!(
            "{}: {} array file(s) not listed in {} were left out (first: {f})",
            dir.display(),
            extra.len(),
            ul.path.display()
        )
    }))
}

fn shape_error(p: &Part, what: &str, expected: String) -> CaptureError {
    CaptureError::Invalid {
        path: p.path.clone(),
        what: what.into(),
        expected,
        found: format!("shape {:?}", p.header.shape),
    }
}

/// Set each part's start from the frame counts.
fn place(parts: &mut [Part], counts: &[u32]) {
    let mut start = 0usize;
    for (p, &n) in parts.iter_mut().zip(counts) {
        p.start = start;
        p.frames = n as usize;
        start += n as usize;
    }
}

/// The layers of `acts/<utterance>.npy` stacks.
pub(crate) fn stacks(dir: &Path, ul: &UttList) -> Result<PerUtterance, CaptureError> {
    let acts = dir.join("acts");
    let mut parts = headers(&acts, ul)?;
    let first = &parts[0];
    let (l, d) = match first.header.shape.as_slice() {
        [l, _, d] if *l > 0 => (*l, *d),
        _ => {
            return Err(shape_error(
                first,
                "shape",
                "a 3-D (layers, frames, dim) array with at least one layer".into(),
            ))
        }
    };
    let mut counts = Vec::with_capacity(parts.len());
    for p in &parts {
        match p.header.shape.as_slice() {
            [pl, n, pd] if *pl == l && *pd == d => counts.push(frame_count(p, *n)?),
            _ => {
                return Err(shape_error(
                    p,
                    "shape",
                    format!(
                        "({l}, frames, {d}) like {} (shape {:?}): every stack holds the same layers and dim",
                        first.path.display(),
                        first.header.shape
                    ),
                ))
            }
        }
    }
    place(&mut parts, &counts);
    let arc = Arc::new(Parts {
        dir: acts.clone(),
        parts,
        dim: d,
    });
    Ok(PerUtterance {
        layers: (0..l)
            .map(|i| LayerSource::parts(i, arc.clone(), i))
            .collect(),
        counts,
        layout: format!(
            "per-utterance stacks (acts/<utterance>.npy, {} files)",
            ul.names.len()
        ),
        notes: unlisted(&acts, ul)?.into_iter().collect(),
    })
}

fn frame_count(p: &Part, n: usize) -> Result<u32, CaptureError> {
    u32::try_from(n).map_err(|_| {
        shape_error(
            p,
            "frames",
            "at most 4294967295 frames per utterance".into(),
        )
    })
}

/// The layers of per-layer folders `layer_XX/<utterance>.npy`.
pub(crate) fn folders(
    ul: &UttList,
    found: Vec<(usize, PathBuf)>,
) -> Result<PerUtterance, CaptureError> {
    let mut seen = HashSet::new();
    let mut layers = Vec::with_capacity(found.len());
    let mut counts: Vec<u32> = Vec::new();
    let mut first_parts: Option<Arc<Parts>> = None;
    let mut notes = Vec::new();
    for (id, folder) in &found {
        if !seen.insert(*id) {
            return Err(CaptureError::Invalid {
                path: folder.clone(),
                what: "layer number".into(),
                expected: "one folder per layer number".into(),
                found: format!("layer {id} a second time"),
            });
        }
        let mut parts = headers(folder, ul)?;
        let d = match parts[0].header.shape.as_slice() {
            [_, d] => *d,
            _ => {
                return Err(shape_error(
                    &parts[0],
                    "shape",
                    "a 2-D (frames, dim) array".into(),
                ))
            }
        };
        let mut here = Vec::with_capacity(parts.len());
        for (u, p) in parts.iter().enumerate() {
            let n = match p.header.shape.as_slice() {
                [n, pd] if *pd == d => frame_count(p, *n)?,
                _ => {
                    return Err(shape_error(
                        p,
                        "shape",
                        format!("(frames, {d}) like {} (shape {:?}): every file of a layer has the same dim", parts[0].path.display(), parts[0].header.shape),
                    ))
                }
            };
            if let Some(fp) = &first_parts {
                if counts[u] != n {
                    let q = &fp.parts[u];
                    return Err(shape_error(
                        p,
                        "frames",
                        format!("{} frames, as in {} (shape {:?}): an utterance has the same frames in every layer", counts[u], q.path.display(), q.header.shape),
                    ));
                }
            }
            here.push(n);
        }
        if first_parts.is_none() {
            counts = here;
        }
        place(&mut parts, &counts);
        notes.extend(unlisted(folder, ul)?);
        let arc = Arc::new(Parts {
            dir: folder.clone(),
            parts,
            dim: d,
        });
        first_parts.get_or_insert_with(|| arc.clone());
        layers.push(LayerSource::parts(*id, arc, 0));
    }
    Ok(PerUtterance {
        layers,
        counts,
        layout: format!(
            "per-layer folders ({}/<utterance>.npy, {} folders of {} files)",
            found
                .first()
                .map(|f| f
                    .1
                    .file_name()
                    .unwrap_or_default()
                    .to_string_lossy()
                    .into_owned())
                .unwrap_or_default(),
            found.len(),
            ul.names.len()
        ),
        notes,
    })
}
