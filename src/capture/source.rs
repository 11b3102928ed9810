//! Where one layer's frames live: one memory-mapped file (a 2-D layer file or one slot of a 3-D
//! stack), or one array per utterance (a slot of each `acts/<utterance>.npy` stack, or every
//! file of a `layer_XX/` folder), concatenated in the order of `utterances.tsv`.
//!
//! Per-utterance files are mapped only while a layer is read, a few at a time, and unmapped
//! at once: a capture of 10 000 utterances and 24 layers would otherwise hold more mappings
//! than the system allows, and only one layer is ever resident.

use std::path::{Path, PathBuf};
use std::sync::Arc;

use ndarray::Array2;
use rayon::prelude::*;

use super::npy::{parse_header, Dtype, NpyFile, NpyHeader};
use super::CaptureError;

/// One utterance's array: its file, the header read when the capture was opened, and where
/// its frames start in the concatenated layer.
#[derive(Debug)]
pub struct Part {
    /// The file.
    pub path: PathBuf,
    /// Its header as read on opening (checked again when the data is read).
    pub header: NpyHeader,
    /// Size of the file on disk.
    pub file_len: u64,
    /// First frame of this utterance in the layer.
    pub start: usize,
    /// Frames of this utterance.
    pub frames: usize,
}

/// The per-utterance arrays behind one or more layers (all of them for stacks).
#[derive(Debug)]
pub struct Parts {
    /// The folder holding them (`acts/` or `layer_XX/`).
    pub dir: PathBuf,
    /// One per utterance, in the order of `utterances.tsv`.
    pub parts: Vec<Part>,
    /// Feature dimension (the same in every file).
    pub dim: usize,
}

impl Parts {
    /// Frames in all parts together.
    pub fn frames(&self) -> usize {
        self.parts.last().map(|p| p.start + p.frames).unwrap_or(0)
    }
}

/// Where a layer's data lives.
#[derive(Debug)]
pub(crate) enum Data {
    /// One file; `slot` is the layer within a 3-D stack (0 for a 2-D file).
    File { file: Arc<NpyFile>, slot: usize },
    /// One array per utterance; `slot` is the layer within each 3-D stack (0 for 2-D files).
    Parts { parts: Arc<Parts>, slot: usize },
}

/// Where one layer's data lives.
#[derive(Debug)]
pub struct LayerSource {
    /// The layer number (from the file or folder name, or the index in a stack).
    pub id: usize,
    pub(crate) data: Data,
}

/// Read the header of a `.npy` file without mapping it.
pub fn read_header(path: &Path) -> Result<(NpyHeader, u64), CaptureError> {
    use std::io::Read;
    let mut f = std::fs::File::open(path).map_err(|e| CaptureError::io(path, e))?;
    let len = f.metadata().map_err(|e| CaptureError::io(path, e))?.len();
    let mut buf = Vec::with_capacity(4096);
    (&mut f)
        .take(4096)
        .read_to_end(&mut buf)
        .map_err(|e| CaptureError::io(path, e))?;
    // A longer header (format 2 or 3): read as much as the preamble says, within the file.
    if buf.len() >= 12 && buf[6] >= 2 {
        let want = 12 + u32::from_le_bytes([buf[8], buf[9], buf[10], buf[11]]) as u64;
        let want = want.min(len).min(12 + (1 << 20));
        if want > buf.len() as u64 {
            (&mut f)
                .take(want - buf.len() as u64)
                .read_to_end(&mut buf)
                .map_err(|e| CaptureError::io(path, e))?;
        }
    }
    if len == 0 {
        return Err(CaptureError::Npy {
            path: path.to_path_buf(),
            field: "file".into(),
            expected: "a .npy file".into(),
            found: "an empty file".into(),
        });
    }
    Ok((parse_header(path, &buf, len)?, len))
}

/// Map a part for reading, refusing a file whose header changed since the capture was opened.
fn open_part(p: &Part) -> Result<NpyFile, CaptureError> {
    let f = NpyFile::open(&p.path)?;
    if f.header() != &p.header {
        return Err(CaptureError::Invalid {
            path: p.path.clone(),
            what: "header".into(),
            expected: format!(
                "the shape {:?} read when the capture was opened",
                p.header.shape
            ),
            found: format!("{:?} (the file changed)", f.header().shape),
        });
    }
    Ok(f)
}

impl LayerSource {
    /// A layer held in one file (slot `slot` of a stack, 0 for a 2-D file).
    pub(crate) fn file(id: usize, file: Arc<NpyFile>, slot: usize) -> Self {
        LayerSource {
            id,
            data: Data::File { file, slot },
        }
    }

    /// A layer held in per-utterance arrays.
    pub(crate) fn parts(id: usize, parts: Arc<Parts>, slot: usize) -> Self {
        LayerSource {
            id,
            data: Data::Parts { parts, slot },
        }
    }

    /// The file holding this layer, or the folder of its per-utterance files.
    pub fn path(&self) -> &Path {
        match &self.data {
            Data::File { file, .. } => file.path(),
            Data::Parts { parts, .. } => &parts.dir,
        }
    }

    /// Number of files holding this layer.
    pub fn n_files(&self) -> usize {
        match &self.data {
            Data::File { .. } => 1,
            Data::Parts { parts, .. } => parts.parts.len(),
        }
    }

    fn first_header(&self) -> &NpyHeader {
        match &self.data {
            Data::File { file, .. } => file.header(),
            Data::Parts { parts, .. } => &parts.parts[0].header,
        }
    }

    /// Feature dimension.
    pub fn dim(&self) -> usize {
        match &self.data {
            Data::File { file, .. } => file.layer_shape().2,
            Data::Parts { parts, .. } => parts.dim,
        }
    }

    /// Frames in this layer.
    pub fn frames(&self) -> usize {
        match &self.data {
            Data::File { file, .. } => file.layer_shape().1,
            Data::Parts { parts, .. } => parts.frames(),
        }
    }

    /// Stored element type (of the first file, for per-utterance arrays).
    pub fn dtype(&self) -> Dtype {
        self.first_header().dtype
    }

    /// Byte order and memory order as text (`little-endian, C order`), of the first file
    /// for per-utterance arrays.
    pub fn layout(&self) -> String {
        let h = self.first_header();
        format!(
            "{}-endian, {} order",
            if h.big_endian { "big" } else { "little" },
            if h.fortran_order { "Fortran" } else { "C" }
        )
    }

    /// Bytes this layer takes on disk.
    pub fn bytes(&self) -> u64 {
        (self.frames() as u64) * (self.dim() as u64) * (self.dtype().size() as u64)
    }

    /// Every file behind this layer with its size on disk.
    pub(crate) fn files(&self) -> Vec<(&Path, u64)> {
        match &self.data {
            Data::File { file, .. } => vec![(file.path(), file.file_len())],
            Data::Parts { parts, .. } => parts
                .parts
                .iter()
                .map(|p| (p.path.as_path(), p.file_len))
                .collect(),
        }
    }

    /// All frames as f32 (frames, dim); nothing of it stays resident afterwards.
    pub(crate) fn read_all(&self) -> Result<Array2<f32>, CaptureError> {
        match &self.data {
            Data::File { file, slot } => {
                let m = file.read_layer(*slot);
                file.release();
                Ok(m)
            }
            Data::Parts { parts, slot } => {
                let d = parts.dim;
                let mut out = Array2::<f32>::zeros((parts.frames(), d));
                let mut chunks = Vec::with_capacity(parts.parts.len());
                let mut rest = out.as_slice_mut().expect("standard layout");
                for p in &parts.parts {
                    let (a, b) = rest.split_at_mut(p.frames * d);
                    chunks.push(a);
                    rest = b;
                }
                parts
                    .parts
                    .par_iter()
                    .zip(chunks.into_par_iter())
                    .try_for_each(|(p, c)| {
                        open_part(p)?.decode_layer_into(*slot, c);
                        Ok::<(), CaptureError>(())
                    })?;
                Ok(out)
            }
        }
    }

    /// Rows `rows` (each < frames) as f32 (rows.len(), dim).
    pub(crate) fn read_rows(&self, rows: &[usize]) -> Result<Array2<f32>, CaptureError> {
        match &self.data {
            Data::File { file, slot } => {
                let m = file.read_rows(*slot, rows);
                file.release();
                Ok(m)
            }
            Data::Parts { parts, slot } => read_part_rows(parts, *slot, rows),
        }
    }

    /// Evenly spaced sample of up to `max_rows` frames: their indices and values.
    pub(crate) fn sample_rows(
        &self,
        max_rows: usize,
    ) -> Result<(Vec<usize>, Array2<f32>), CaptureError> {
        let f = self.frames();
        let rows: Vec<usize> = if f <= max_rows {
            (0..f).collect()
        } else {
            (0..max_rows).map(|i| i * f / max_rows).collect()
        };
        let m = self.read_rows(&rows)?;
        Ok((rows, m))
    }
}

/// Rows of per-utterance arrays: grouped by file, each file mapped once.
fn read_part_rows(parts: &Parts, slot: usize, rows: &[usize]) -> Result<Array2<f32>, CaptureError> {
    let d = parts.dim;
    // (part, row within it, position in the output), grouped by part.
    let mut want: Vec<(usize, usize, usize)> = rows
        .iter()
        .enumerate()
        .map(|(k, &r)| {
            let p = parts.parts.partition_point(|p| p.start <= r) - 1;
            (p, r - parts.parts[p].start, k)
        })
        .collect();
    want.sort_unstable();
    let groups: Vec<&[(usize, usize, usize)]> = want.chunk_by(|a, b| a.0 == b.0).collect();
    let decoded: Vec<Vec<f32>> = groups
        .par_iter()
        .map(|g| {
            let f = open_part(&parts.parts[g[0].0])?;
            let local: Vec<usize> = g.iter().map(|x| x.1).collect();
            let mut buf = vec![0f32; local.len() * d];
            f.decode_rows_into(slot, &local, &mut buf);
            Ok(buf)
        })
        .collect::<Result<_, CaptureError>>()?;
    let mut out = Array2::<f32>::zeros((rows.len(), d));
    for (g, buf) in groups.iter().zip(&decoded) {
        for (j, x) in g.iter().enumerate() {
            out.row_mut(x.2)
                .as_slice_mut()
                .expect("standard layout")
                .copy_from_slice(&buf[j * d..(j + 1) * d]);
        }
    }
    Ok(out)
}
