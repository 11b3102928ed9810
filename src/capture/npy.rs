//! Reader for numpy's `.npy` format (format versions 1.0, 2.0 and 3.0, as documented in
//! `numpy.lib.format`): the header is parsed by hand, the data is memory-mapped and converted
//! to `f32` on demand, one layer at a time. Supported element types are IEEE f16, f32 and f64
//! in either byte order; C and Fortran order; 2-D `(frames, dim)` and 3-D `(layers, frames, dim)`.
//!
//! Every size taken from a header is checked with overflow-safe arithmetic against the real
//! file length before anything is allocated, so a lying header is an error, not an allocation.

use std::fs::File;
use std::path::{Path, PathBuf};

use half::f16;
use memmap2::Mmap;
use ndarray::Array2;
use rayon::prelude::*;

use super::CaptureError;

/// Element type of an activation array.
#[derive(Clone, Copy, Debug, PartialEq, Eq, serde::Serialize)]
pub enum Dtype {
    /// IEEE 754 half precision.
    F16,
    /// IEEE 754 single precision.
    F32,
    /// IEEE 754 double precision.
    F64,
}

impl Dtype {
    /// Bytes per element.
    pub fn size(self) -> usize {
        match self {
            Dtype::F16 => 2,
            Dtype::F32 => 4,
            Dtype::F64 => 8,
        }
    }

    /// Name as numpy spells it.
    pub fn name(self) -> &'static str {
        match self {
            Dtype::F16 => "float16",
            Dtype::F32 => "float32",
            Dtype::F64 => "float64",
        }
    }
}

/// Parsed `.npy` header.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct NpyHeader {
    /// Element type.
    pub dtype: Dtype,
    /// True when the data is big-endian.
    pub big_endian: bool,
    /// True for Fortran (column-major) order.
    pub fortran_order: bool,
    /// Array shape.
    pub shape: Vec<usize>,
    /// Byte offset of the first data element.
    pub data_offset: usize,
}

impl NpyHeader {
    /// Number of elements (checked product of the shape).
    pub fn n_elements(&self) -> Option<usize> {
        self.shape.iter().try_fold(1usize, |a, &d| a.checked_mul(d))
    }
}

fn bad(
    path: &Path,
    field: &str,
    expected: impl Into<String>,
    found: impl Into<String>,
) -> CaptureError {
    CaptureError::Npy {
        path: path.to_path_buf(),
        field: field.to_string(),
        expected: expected.into(),
        found: found.into(),
    }
}

/// Largest header we accept; numpy itself writes headers of a few hundred bytes.
const MAX_HEADER_LEN: usize = 1 << 20;

/// Parse a `.npy` header from the first bytes of a file (`bytes` may be the whole file).
/// `file_len` is the real length of the file, used to check the data size.
pub fn parse_header(path: &Path, bytes: &[u8], file_len: u64) -> Result<NpyHeader, CaptureError> {
    let (start, end) = header_span(path, bytes, file_len)?;
    let text = std::str::from_utf8(&bytes[start..end])
        .map_err(|_| bad(path, "header", "ASCII/UTF-8 text", "invalid bytes"))?;
    let header = header_fields(path, text, end)?;
    check_data_size(path, &header, file_len)?;
    Ok(header)
}

/// Where the header text lies in `bytes` (start, end): after the magic string, the format
/// version and the header length, which must fit both the limit and the bytes at hand.
fn header_span(path: &Path, bytes: &[u8], file_len: u64) -> Result<(usize, usize), CaptureError> {
    const MAGIC: &[u8] = b"\x93NUMPY";
    if bytes.len() < 10 || &bytes[..6] != MAGIC {
        let shown: String = bytes
            .iter()
            .take(6)
            .map(|b| format!("{b:02x}"))
            .collect::<Vec<_>>()
            .join(" ");
        return Err(bad(
            path,
            "magic",
            "a .npy file starting with \\x93NUMPY",
            format!("first bytes {shown}"),
        ));
    }
    let major = bytes[6];
    let (header_len, start) = match major {
        1 => (u16::from_le_bytes([bytes[8], bytes[9]]) as usize, 10usize),
        2 | 3 => {
            if bytes.len() < 12 {
                return Err(bad(
                    path,
                    "header length",
                    "12 bytes of preamble",
                    "a truncated file",
                ));
            }
            (
                u32::from_le_bytes([bytes[8], bytes[9], bytes[10], bytes[11]]) as usize,
                12usize,
            )
        }
        v => {
            return Err(bad(path, "format version", "1, 2 or 3", format!("{v}")));
        }
    };
    if header_len > MAX_HEADER_LEN {
        return Err(bad(
            path,
            "header length",
            format!("at most {MAX_HEADER_LEN} bytes"),
            format!("{header_len} bytes"),
        ));
    }
    let end = start + header_len;
    if bytes.len() < end {
        return Err(bad(
            path,
            "header",
            format!("{header_len} header bytes"),
            format!("a file of {} bytes", file_len),
        ));
    }
    Ok((start, end))
}

/// The header dict's dtype, order and shape, with the data starting at `data_offset`.
fn header_fields(path: &Path, text: &str, data_offset: usize) -> Result<NpyHeader, CaptureError> {
    let dict = parse_dict(text).ok_or_else(|| {
        bad(
            path,
            "header",
            "a Python dict with 'descr', 'fortran_order' and 'shape'",
            truncate(text.trim(), 120),
        )
    })?;
    let descr = dict
        .descr
        .ok_or_else(|| bad(path, "descr", "a dtype string", "no 'descr' key"))?;
    let (big_endian, dtype) = parse_descr(&descr).ok_or_else(|| {
        bad(
            path,
            "descr",
            "a floating-point dtype ('<f2', '<f4', '<f8' or big-endian '>' forms)",
            format!("'{descr}'{}", describe_descr(&descr)),
        )
    })?;
    let fortran_order = dict.fortran.ok_or_else(|| {
        bad(
            path,
            "fortran_order",
            "True or False",
            "no 'fortran_order' key",
        )
    })?;
    let shape = dict
        .shape
        .ok_or_else(|| bad(path, "shape", "a tuple of integers", "no 'shape' key"))?;
    Ok(NpyHeader {
        dtype,
        big_endian,
        fortran_order,
        shape,
        data_offset,
    })
}

/// The shape must be addressable and the bytes after the header exactly its data.
fn check_data_size(path: &Path, header: &NpyHeader, file_len: u64) -> Result<(), CaptureError> {
    let n = header.n_elements().ok_or_else(|| {
        bad(
            path,
            "shape",
            "a shape whose element count fits in memory addresses",
            format!("{:?}", header.shape),
        )
    })?;
    // Arrays are built with ndarray, which requires the product of the non-zero axis lengths
    // to fit in isize even when another axis is 0; a header like (0, 2**63) is refused here.
    let nonzero = header
        .shape
        .iter()
        .filter(|&&d| d != 0)
        .try_fold(1usize, |a, &d| a.checked_mul(d))
        .filter(|&p| p <= isize::MAX as usize);
    if nonzero.is_none() {
        return Err(bad(
            path,
            "shape",
            "axis lengths whose product fits in memory addresses",
            format!("{:?}", header.shape),
        ));
    }
    let dtype = header.dtype;
    let need = (n as u128) * (dtype.size() as u128);
    let have = (file_len as u128).saturating_sub(header.data_offset as u128);
    if need != have {
        return Err(bad(
            path,
            "data",
            format!(
                "{need} bytes of {} data for shape {:?}",
                dtype.name(),
                header.shape
            ),
            format!("{have} bytes after the header (file truncated or shape wrong)"),
        ));
    }
    Ok(())
}

fn truncate(s: &str, n: usize) -> String {
    if s.chars().count() <= n {
        s.to_string()
    } else {
        let t: String = s.chars().take(n).collect();
        format!("{t}...")
    }
}

fn describe_descr(d: &str) -> &'static str {
    let kind = d.trim_start_matches(['<', '>', '|', '=']).chars().next();
    match kind {
        Some('c') => " (complex numbers are not activations)",
        Some('O') => " (object arrays cannot be read without Python)",
        Some('i') | Some('u') => " (integers are not activations; save them as float32)",
        Some('b') => " (booleans are not activations)",
        Some('U') | Some('S') => " (strings are not activations)",
        _ => "",
    }
}

fn parse_descr(d: &str) -> Option<(bool, Dtype)> {
    let (big, rest) = match d.as_bytes().first()? {
        b'<' => (false, &d[1..]),
        b'>' => (true, &d[1..]),
        b'=' => (cfg!(target_endian = "big"), &d[1..]),
        b'|' => (false, &d[1..]),
        _ => (false, d),
    };
    let dt = match rest {
        "f2" | "e" => Dtype::F16,
        "f4" | "f" => Dtype::F32,
        "f8" | "d" => Dtype::F64,
        _ => return None,
    };
    Some((big, dt))
}

#[derive(Default)]
struct Dict {
    descr: Option<String>,
    fortran: Option<bool>,
    shape: Option<Vec<usize>>,
}

/// A small parser for the literal dict numpy writes; rejects anything else.
fn parse_dict(text: &str) -> Option<Dict> {
    let mut p = Parser {
        s: text.as_bytes(),
        i: 0,
    };
    let mut d = Dict::default();
    p.ws();
    p.eat(b'{')?;
    loop {
        p.ws();
        if p.peek() == Some(b'}') {
            p.i += 1;
            break;
        }
        let key = p.string()?;
        p.ws();
        p.eat(b':')?;
        p.ws();
        match key.as_str() {
            "descr" => d.descr = Some(p.string()?),
            "fortran_order" => d.fortran = Some(p.boolean()?),
            "shape" => d.shape = Some(p.tuple()?),
            _ => return None,
        }
        p.ws();
        match p.peek()? {
            b',' => p.i += 1,
            b'}' => {
                p.i += 1;
                break;
            }
            _ => return None,
        }
    }
    p.ws();
    if p.i == p.s.len() {
        Some(d)
    } else {
        None
    }
}

struct Parser<'a> {
    s: &'a [u8],
    i: usize,
}

impl Parser<'_> {
    fn peek(&self) -> Option<u8> {
        self.s.get(self.i).copied()
    }
    fn ws(&mut self) {
        while matches!(self.peek(), Some(b' ' | b'\n' | b'\t' | b'\r')) {
            self.i += 1;
        }
    }
    fn eat(&mut self, c: u8) -> Option<()> {
        if self.peek()? == c {
            self.i += 1;
            Some(())
        } else {
            None
        }
    }
    fn string(&mut self) -> Option<String> {
        let q = self.peek()?;
        if q != b'\'' && q != b'"' {
            return None;
        }
        self.i += 1;
        let start = self.i;
        while self.peek()? != q {
            self.i += 1;
            if self.i - start > 256 {
                return None;
            }
        }
        let out = std::str::from_utf8(&self.s[start..self.i])
            .ok()?
            .to_string();
        self.i += 1;
        Some(out)
    }
    fn boolean(&mut self) -> Option<bool> {
        if self.s[self.i..].starts_with(b"True") {
            self.i += 4;
            Some(true)
        } else if self.s[self.i..].starts_with(b"False") {
            self.i += 5;
            Some(false)
        } else {
            None
        }
    }
    fn tuple(&mut self) -> Option<Vec<usize>> {
        self.eat(b'(')?;
        let mut out = Vec::new();
        loop {
            self.ws();
            match self.peek()? {
                b')' => {
                    self.i += 1;
                    return Some(out);
                }
                b'0'..=b'9' => {
                    let start = self.i;
                    while matches!(self.peek(), Some(b'0'..=b'9')) {
                        self.i += 1;
                    }
                    // Python ints may carry an 'L' suffix in very old files.
                    let digits = std::str::from_utf8(&self.s[start..self.i]).ok()?;
                    out.push(digits.parse::<usize>().ok()?);
                    if self.peek() == Some(b'L') {
                        self.i += 1;
                    }
                    if out.len() > 8 {
                        return None;
                    }
                }
                _ => return None,
            }
            self.ws();
            match self.peek()? {
                b',' => self.i += 1,
                b')' => {}
                _ => return None,
            }
        }
    }
}

/// Bytes of an array that lives in memory and is owned elsewhere (a Python buffer, a `Vec`).
pub type SharedBytes = std::sync::Arc<dyn AsRef<[u8]> + Send + Sync>;

/// Where an array's bytes are: a read-only file mapping, or memory owned elsewhere.
enum Storage {
    Map(Mmap),
    Memory(SharedBytes),
}

impl std::fmt::Debug for Storage {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            Storage::Map(m) => write!(f, "Map({} bytes)", m.len()),
            Storage::Memory(b) => write!(f, "Memory({} bytes)", (**b).as_ref().len()),
        }
    }
}

/// A memory-mapped `.npy` file holding one 2-D layer or a 3-D stack of layers, or an array
/// of the same shape held in memory ([`NpyFile::from_memory`]).
#[derive(Debug)]
pub struct NpyFile {
    path: PathBuf,
    header: NpyHeader,
    map: Option<Storage>,
    file_len: u64,
}

impl NpyFile {
    /// Open and validate a file; the data is mapped but not read.
    pub fn open(path: &Path) -> Result<NpyFile, CaptureError> {
        let file = File::open(path).map_err(|e| CaptureError::io(path, e))?;
        let file_len = file
            .metadata()
            .map_err(|e| CaptureError::io(path, e))?
            .len();
        if file_len == 0 {
            return Err(bad(path, "file", "a .npy file", "an empty file"));
        }
        // SAFETY: the map is read-only; a file changed under us by another process can give
        // wrong numbers but not memory unsafety in safe code reading plain bytes.
        let map = unsafe { Mmap::map(&file) }.map_err(|e| CaptureError::io(path, e))?;
        let header = parse_header(path, &map, file_len)?;
        let data_len = file_len as usize - header.data_offset;
        Ok(NpyFile {
            path: path.to_path_buf(),
            header,
            map: if data_len == 0 {
                None
            } else {
                Some(Storage::Map(map))
            },
            file_len,
        })
    }

    /// An array held in memory, read like a file: `header` describes `bytes` (its
    /// `data_offset` must be 0), and `name` stands for the path in messages. The data size
    /// is checked against the shape as for a file.
    pub fn from_memory(
        name: &Path,
        header: NpyHeader,
        bytes: SharedBytes,
    ) -> Result<NpyFile, CaptureError> {
        let len = (*bytes).as_ref().len() as u64;
        if header.data_offset != 0 {
            return Err(bad(
                name,
                "data offset",
                "0",
                header.data_offset.to_string(),
            ));
        }
        check_data_size(name, &header, len)?;
        Ok(NpyFile {
            path: name.to_path_buf(),
            header,
            map: (len > 0).then_some(Storage::Memory(bytes)),
            file_len: len,
        })
    }

    /// The parsed header.
    pub fn header(&self) -> &NpyHeader {
        &self.header
    }

    /// The file's path.
    pub fn path(&self) -> &Path {
        &self.path
    }

    /// Size of the file on disk in bytes.
    pub fn file_len(&self) -> u64 {
        self.file_len
    }

    fn data(&self) -> &[u8] {
        match &self.map {
            Some(Storage::Map(m)) => &m[self.header.data_offset..],
            Some(Storage::Memory(b)) => (**b).as_ref(),
            None => &[],
        }
    }

    /// Read one element at linear (storage) index `k` as f32.
    #[inline]
    fn get(&self, data: &[u8], k: usize) -> f32 {
        let h = &self.header;
        match h.dtype {
            Dtype::F16 => {
                let b = [data[2 * k], data[2 * k + 1]];
                let bits = if h.big_endian {
                    u16::from_be_bytes(b)
                } else {
                    u16::from_le_bytes(b)
                };
                f16::from_bits(bits).to_f32()
            }
            Dtype::F32 => {
                let b: [u8; 4] = data[4 * k..4 * k + 4].try_into().expect("4 bytes");
                if h.big_endian {
                    f32::from_be_bytes(b)
                } else {
                    f32::from_le_bytes(b)
                }
            }
            Dtype::F64 => {
                let b: [u8; 8] = data[8 * k..8 * k + 8].try_into().expect("8 bytes");
                (if h.big_endian {
                    f64::from_be_bytes(b)
                } else {
                    f64::from_le_bytes(b)
                }) as f32
            }
        }
    }

    /// Decode a contiguous run of elements into `out` (fast path for C order).
    fn decode_run(&self, data: &[u8], start: usize, out: &mut [f32]) {
        let h = &self.header;
        let sz = h.dtype.size();
        let bytes = &data[start * sz..(start + out.len()) * sz];
        match (h.dtype, h.big_endian) {
            (Dtype::F32, false) => {
                for (o, c) in out.iter_mut().zip(bytes.chunks_exact(4)) {
                    *o = f32::from_le_bytes([c[0], c[1], c[2], c[3]]);
                }
            }
            (Dtype::F16, false) => {
                for (o, c) in out.iter_mut().zip(bytes.chunks_exact(2)) {
                    *o = f16::from_bits(u16::from_le_bytes([c[0], c[1]])).to_f32();
                }
            }
            _ => {
                for (j, o) in out.iter_mut().enumerate() {
                    *o = self.get(data, start + j);
                }
            }
        }
    }

    /// Shape of one layer as (frames, dim) and the number of layers in the file.
    pub fn layer_shape(&self) -> (usize, usize, usize) {
        match self.header.shape.as_slice() {
            [f, d] => (1, *f, *d),
            [l, f, d] => (*l, *f, *d),
            _ => (0, 0, 0),
        }
    }

    /// Storage index of element (layer, frame, col).
    #[inline]
    fn index(&self, layer: usize, frame: usize, col: usize) -> usize {
        let (l, f, d) = self.layer_shape();
        if self.header.fortran_order {
            layer + l * (frame + f * col)
        } else {
            (layer * f + frame) * d + col
        }
    }

    /// Read rows `rows` of layer `layer` (0 for a 2-D file) as an f32 matrix (rows.len(), dim).
    pub fn read_rows(&self, layer: usize, rows: &[usize]) -> Array2<f32> {
        let (_, _, d) = self.layer_shape();
        let data = self.data();
        let mut out = Array2::<f32>::zeros((rows.len(), d));
        let fortran = self.header.fortran_order;
        out.axis_chunks_iter_mut(ndarray::Axis(0), 256)
            .into_par_iter()
            .enumerate()
            .for_each(|(ci, mut chunk)| {
                // Storage span of this chunk's rows, released in one call afterwards: one
                // `madvise` per row cost a page-table walk and a TLB flush on every core per
                // row (half of an ABX run's time on a 200 000-frame layer).
                let (mut lo, mut hi) = (usize::MAX, 0usize);
                for (ri, mut row) in chunk.outer_iter_mut().enumerate() {
                    let r = rows[ci * 256 + ri];
                    let slice = row.as_slice_mut().expect("standard layout");
                    if fortran {
                        for (c, o) in slice.iter_mut().enumerate() {
                            *o = self.get(data, self.index(layer, r, c));
                        }
                    } else {
                        let start = self.index(layer, r, 0);
                        self.decode_run(data, start, slice);
                        lo = lo.min(start);
                        hi = hi.max(start + slice.len());
                    }
                }
                if fortran {
                    self.release();
                } else if lo < hi {
                    // Sparse row reads must not leave the whole file resident: a chunk
                    // touches at most 256 rows' fault-around windows, all inside its span.
                    self.release_elems(lo, hi);
                }
            });
        out
    }

    /// Read all frames of layer `layer` (0 for a 2-D file) as an f32 matrix (frames, dim).
    pub fn read_layer(&self, layer: usize) -> Array2<f32> {
        let (l, f, d) = self.layer_shape();
        let data = self.data();
        if !self.header.fortran_order {
            let mut out = Array2::<f32>::zeros((f, d));
            if let Some(slice) = out.as_slice_mut() {
                let base = layer * f * d;
                slice
                    .par_chunks_mut(1 << 16)
                    .enumerate()
                    .for_each(|(ci, chunk)| {
                        let start = base + ci * (1 << 16);
                        self.decode_run(data, start, chunk);
                        self.release_elems(start, start + chunk.len());
                    });
            }
            out
        } else {
            // Column-major: walk the storage column by column so reads are sequential.
            let mut out = Array2::<f32>::zeros((f, d));
            let cols: Vec<Vec<f32>> = (0..d)
                .into_par_iter()
                .map(|c| {
                    (0..f)
                        .map(|r| self.get(data, layer + l * (r + f * c)))
                        .collect()
                })
                .collect();
            for (c, col) in cols.into_iter().enumerate() {
                for (r, v) in col.into_iter().enumerate() {
                    out[[r, c]] = v;
                }
            }
            out
        }
    }

    /// Decode all frames of layer `layer` into `out` (frames * dim values, row-major) on the
    /// calling thread: for files of one utterance, read many at once and unmapped (dropped)
    /// right after, which also drops the pages read.
    pub fn decode_layer_into(&self, layer: usize, out: &mut [f32]) {
        let (l, f, d) = self.layer_shape();
        let data = self.data();
        if !self.header.fortran_order {
            let start = layer * f * d;
            self.decode_run(data, start, &mut out[..f * d]);
        } else {
            for c in 0..d {
                for r in 0..f {
                    out[r * d + c] = self.get(data, layer + l * (r + f * c));
                }
            }
        }
    }

    /// Decode rows `rows` of layer `layer` into `out` (rows.len() * dim values, row-major) on
    /// the calling thread (as [`NpyFile::decode_layer_into`], for files unmapped right after).
    pub fn decode_rows_into(&self, layer: usize, rows: &[usize], out: &mut [f32]) {
        let (_, _, d) = self.layer_shape();
        let data = self.data();
        for (k, &r) in rows.iter().enumerate() {
            let slice = &mut out[k * d..(k + 1) * d];
            if self.header.fortran_order {
                for (c, o) in slice.iter_mut().enumerate() {
                    *o = self.get(data, self.index(layer, r, c));
                }
            } else {
                self.decode_run(data, self.index(layer, r, 0), slice);
            }
        }
    }

    /// Drop the pages holding data elements `lo..hi` (storage order) from the resident set.
    fn release_elems(&self, lo: usize, hi: usize) {
        if let Some(Storage::Map(m)) = &self.map {
            let sz = self.header.dtype.size();
            let start = self.header.data_offset + lo * sz;
            let len = (hi - lo) * sz;
            if len > 0 && start + len <= m.len() {
                // A page fault maps the pages around the faulting one as well (Linux's
                // fault-around, 64 KiB by default), so a row of a few KiB leaves a larger
                // window resident: release the whole aligned window the row lies in.
                const WINDOW: usize = 64 * 1024;
                let base = m.as_ptr() as usize;
                let a = ((base + start) / WINDOW * WINDOW).max(base);
                let b = (base + start + len).div_ceil(WINDOW) * WINDOW;
                let b = b.min(base + m.len());
                // SAFETY: as in `release`: read-only file mapping, refilled from the file.
                unsafe {
                    let _ = m.unchecked_advise_range(
                        memmap2::UncheckedAdvice::DontNeed,
                        a - base,
                        b - a,
                    );
                }
            }
        }
    }

    /// Drop this file's pages from the process's resident set (they are re-read from the
    /// page cache on the next access), so only the layer being worked on stays resident.
    pub fn release(&self) {
        if let Some(Storage::Map(m)) = &self.map {
            // SAFETY: the mapping is a read-only file mapping; after MADV_DONTNEED the kernel
            // refills pages from the file on access, so the contents seen do not change.
            unsafe {
                let _ = m.unchecked_advise(memmap2::UncheckedAdvice::DontNeed);
            }
        }
    }

    /// Read a sample of values of layer `layer`, `rows` evenly spaced frames, for quick scans.
    pub fn sample_rows(&self, layer: usize, max_rows: usize) -> (Vec<usize>, Array2<f32>) {
        let (_, f, _) = self.layer_shape();
        let rows: Vec<usize> = if f <= max_rows {
            (0..f).collect()
        } else {
            (0..max_rows).map(|i| i * f / max_rows).collect()
        };
        let m = self.read_rows(layer, &rows);
        (rows, m)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn header_bytes(dict: &str, data_len: usize) -> Vec<u8> {
        let mut h = dict.to_string();
        while !(10 + h.len() + 1).is_multiple_of(64) {
            h.push(' ');
        }
        h.push('\n');
        let mut v = b"\x93NUMPY\x01\x00".to_vec();
        v.extend_from_slice(&(h.len() as u16).to_le_bytes());
        v.extend_from_slice(h.as_bytes());
        v.extend(std::iter::repeat_n(0u8, data_len));
        v
    }

    #[test]
    fn parses_numpy_style_header() {
        let b = header_bytes(
            "{'descr': '<f4', 'fortran_order': False, 'shape': (3, 2), }",
            24,
        );
        let h = parse_header(Path::new("x.npy"), &b, b.len() as u64).unwrap();
        assert_eq!(h.dtype, Dtype::F32);
        assert_eq!(h.shape, vec![3, 2]);
        assert!(!h.fortran_order);
        assert_eq!(h.data_offset % 64, 0);
    }

    #[test]
    fn rejects_shape_claiming_more_bytes_than_file() {
        let b = header_bytes(
            "{'descr': '<f4', 'fortran_order': False, 'shape': (1152921504606846976, 1), }",
            8,
        );
        let e = parse_header(Path::new("x.npy"), &b, b.len() as u64).unwrap_err();
        assert!(e.to_string().contains("data"), "{e}");
    }

    #[test]
    fn rejects_overflowing_shape() {
        let b = header_bytes(
            "{'descr': '<f4', 'fortran_order': False, 'shape': (18446744073709551615, 18446744073709551615), }",
            8,
        );
        assert!(parse_header(Path::new("x.npy"), &b, b.len() as u64).is_err());
    }

    #[test]
    fn rejects_integer_and_complex_dtypes_by_name() {
        for (d, word) in [("<i8", "integers"), ("<c16", "complex"), ("|O", "object")] {
            let dict = format!("{{'descr': '{d}', 'fortran_order': False, 'shape': (1, 1), }}");
            let b = header_bytes(&dict, 8);
            let e = parse_header(Path::new("x.npy"), &b, b.len() as u64).unwrap_err();
            assert!(e.to_string().contains(word), "{e}");
        }
    }

    #[test]
    fn rejects_non_npy_bytes() {
        let b = b"utterance\tspeaker\n".to_vec();
        assert!(parse_header(Path::new("x.npy"), &b, b.len() as u64).is_err());
    }
}
