//! Helpers shared by the integration tests: running the real binary, writing captures
//! (`frames.tsv` and `layer_XX.npy`), raw `.npy` bytes for odd headers, and the shipped demo.
//! Each test file includes this with `mod common;` and uses what it needs.
#![allow(dead_code)]

use std::ffi::OsStr;
use std::path::{Path, PathBuf};
use std::process::{Child, Command, Output, Stdio};

use ndarray::Array2;
use ndarray_npy::WritableElement;

/// The binary under test.
pub const BIN: &str = env!("CARGO_BIN_EXE_voxstrata");

/// A command for the binary under test, to add arguments, environment or stdio to.
pub fn voxstrata() -> Command {
    Command::new(BIN)
}

/// Run the binary with `args` and wait for it.
pub fn run<I, S>(args: I) -> Output
where
    I: IntoIterator<Item = S>,
    S: AsRef<OsStr>,
{
    voxstrata().args(args).output().expect("run voxstrata")
}

/// Run the binary with `args` and extra environment variables, and wait for it.
pub fn run_env<I, S>(args: I, env: &[(&str, &str)]) -> Output
where
    I: IntoIterator<Item = S>,
    S: AsRef<OsStr>,
{
    let mut c = voxstrata();
    c.args(args);
    for (k, v) in env {
        c.env(k, v);
    }
    c.output().expect("run voxstrata")
}

/// Start the binary with `args` and extra environment variables without waiting: stdout is
/// discarded, stderr piped (read it with `wait_with_output`).
pub fn spawn<I, S>(args: I, env: &[(&str, &str)]) -> Child
where
    I: IntoIterator<Item = S>,
    S: AsRef<OsStr>,
{
    let mut c = voxstrata();
    c.args(args).stdout(Stdio::null()).stderr(Stdio::piped());
    for (k, v) in env {
        c.env(k, v);
    }
    c.spawn().expect("start voxstrata")
}

/// A finished run as text: exit code (-1 when killed by a signal), stdout and stderr.
#[derive(Debug)]
pub struct Ran {
    /// Exit code, -1 when the process ended on a signal.
    pub code: i32,
    /// Standard output, lossily decoded.
    pub stdout: String,
    /// Standard error, lossily decoded.
    pub stderr: String,
}

impl From<Output> for Ran {
    fn from(o: Output) -> Self {
        Ran {
            code: o.status.code().unwrap_or(-1),
            stdout: String::from_utf8_lossy(&o.stdout).into(),
            stderr: String::from_utf8_lossy(&o.stderr).into(),
        }
    }
}

/// Run the binary with `args` and return its exit code, stdout and stderr as text.
pub fn run_text<I, S>(args: I) -> Ran
where
    I: IntoIterator<Item = S>,
    S: AsRef<OsStr>,
{
    run(args).into()
}

/// A path as `&str` for argument lists (test paths are UTF-8).
pub fn s(p: &Path) -> &str {
    p.to_str().expect("UTF-8 test path")
}

/// Read and parse a JSON file.
pub fn read_json(p: &Path) -> serde_json::Value {
    let text = std::fs::read_to_string(p).unwrap_or_else(|e| panic!("{}: {e}", p.display()));
    serde_json::from_str(&text).unwrap_or_else(|e| panic!("{}: {e}", p.display()))
}

// ---- captures -------------------------------------------------------------------------------

/// The label table of a capture (`frames.tsv`): a header of column names and one row of
/// labels per frame.
#[derive(Clone, Debug)]
pub struct Frames {
    /// Column names, e.g. `utterance`, `speaker`, `phone`.
    pub columns: Vec<String>,
    /// One row of fields per frame, as many as there are columns.
    pub rows: Vec<Vec<String>>,
}

impl Frames {
    /// An empty table with these columns.
    pub fn new(columns: &[&str]) -> Self {
        Frames {
            columns: columns.iter().map(|c| c.to_string()).collect(),
            rows: Vec::new(),
        }
    }

    /// Append one frame's labels (one field per column).
    pub fn push<I, T>(&mut self, fields: I)
    where
        I: IntoIterator<Item = T>,
        T: ToString,
    {
        let row: Vec<String> = fields.into_iter().map(|f| f.to_string()).collect();
        assert_eq!(
            row.len(),
            self.columns.len(),
            "frame row {row:?} for columns {:?}",
            self.columns
        );
        self.rows.push(row);
    }

    /// Number of frames.
    pub fn len(&self) -> usize {
        self.rows.len()
    }

    /// Whether the table holds no frame.
    pub fn is_empty(&self) -> bool {
        self.rows.is_empty()
    }

    /// The table as `frames.tsv` text. A tab or newline inside a field would silently
    /// change the table, so it panics: tests that want a broken table edit the file after.
    pub fn to_tsv(&self) -> String {
        let mut t = self.columns.join("\t");
        t.push('\n');
        for r in &self.rows {
            for f in r.iter().chain(&self.columns) {
                assert!(
                    !f.contains(['\t', '\n', '\r']),
                    "field {f:?} would break the table"
                );
            }
            t.push_str(&r.join("\t"));
            t.push('\n');
        }
        t
    }
}

/// Write `layer_{index:02}.npy` in `dir` (any element type `ndarray_npy` writes: f32, f64, ...).
pub fn write_layer<A: WritableElement>(dir: &Path, index: usize, a: &Array2<A>) {
    let p = dir.join(format!("layer_{index:02}.npy"));
    ndarray_npy::write_npy(&p, a).unwrap_or_else(|e| panic!("{}: {e}", p.display()));
}

/// Write a capture folder: `frames.tsv` from `frames` and `layer_00.npy`, `layer_01.npy`, ...
/// from `layers` (each with one row per frame). Creates `dir` if needed.
pub fn write_capture<A: WritableElement>(dir: &Path, frames: &Frames, layers: &[Array2<A>]) {
    std::fs::create_dir_all(dir).unwrap();
    for (l, a) in layers.iter().enumerate() {
        assert_eq!(a.nrows(), frames.len(), "layer {l}: one row per frame");
    }
    std::fs::write(dir.join("frames.tsv"), frames.to_tsv()).unwrap();
    for (l, a) in layers.iter().enumerate() {
        write_layer(dir, l, a);
    }
}

/// The bytes of a `.npy` file (format version 1 or 2) whose header dictionary holds `descr`
/// and `shape` verbatim (C order), followed by `data`: for tests that need headers, dtypes
/// or lengths the writer would refuse. Header padded to 64 bytes as numpy does.
pub fn npy_bytes(descr: &str, shape: &str, version: u8, data: &[u8]) -> Vec<u8> {
    assert!(version == 1 || version == 2, "npy version {version}");
    let mut h = format!("{{'descr': '{descr}', 'fortran_order': False, 'shape': {shape}, }}");
    let pre = if version == 1 { 10 } else { 12 };
    while (pre + h.len() + 1) % 64 != 0 {
        h.push(' ');
    }
    h.push('\n');
    let mut v = b"\x93NUMPY".to_vec();
    v.extend_from_slice(&[version, 0]);
    if version == 1 {
        v.extend_from_slice(&(h.len() as u16).to_le_bytes());
    } else {
        v.extend_from_slice(&(h.len() as u32).to_le_bytes());
    }
    v.extend_from_slice(h.as_bytes());
    v.extend_from_slice(data);
    v
}

// ---- the shipped demo -----------------------------------------------------------------------

/// The shipped demo captures (`demo_activations/`, holding `early/` and `final/`). They are
/// committed with the repository, so a missing one is a broken checkout: this panics rather
/// than letting a test pass without checking anything.
pub fn demo_dir() -> PathBuf {
    let dir = Path::new(env!("CARGO_MANIFEST_DIR")).join("demo_activations");
    for sub in ["early", "final"] {
        let d = dir.join(sub);
        let ok = d.join("frames.tsv").is_file() && d.join("layer_00.npy").is_file();
        assert!(
            ok,
            "the shipped demo capture {} is missing or incomplete (no frames.tsv or \
             layer_00.npy); it is part of the repository, so the checkout is broken \
             (restore it with `git checkout -- demo_activations`)",
            d.display()
        );
    }
    dir
}

// ---- per-utterance captures ------------------------------------------------------------------

/// Write `utterances.tsv` in `dir` from (utterance, speaker) pairs and further columns
/// (`extra`: column name and one value per utterance).
pub fn write_utterances(dir: &Path, utts: &[(&str, &str)], extra: &[(&str, Vec<&str>)]) {
    let mut t = String::from("utterance\tspeaker");
    for (c, _) in extra {
        t.push('\t');
        t.push_str(c);
    }
    t.push('\n');
    for (i, (u, s)) in utts.iter().enumerate() {
        t.push_str(&format!("{u}\t{s}"));
        for (_, v) in extra {
            t.push('\t');
            t.push_str(v[i]);
        }
        t.push('\n');
    }
    std::fs::create_dir_all(dir).unwrap();
    std::fs::write(dir.join("utterances.tsv"), t).unwrap();
}

/// Write per-utterance stacks `acts/<utterance>.npy`, one (layers, frames, dim) array each.
pub fn write_stacks<A: WritableElement>(dir: &Path, arrays: &[(&str, ndarray::Array3<A>)]) {
    let acts = dir.join("acts");
    std::fs::create_dir_all(&acts).unwrap();
    for (u, a) in arrays {
        let p = acts.join(format!("{u}.npy"));
        ndarray_npy::write_npy(&p, a).unwrap_or_else(|e| panic!("{}: {e}", p.display()));
    }
}

/// Write per-layer folders `layer_XX/<utterance>.npy` from per-utterance stacks: slot `l` of
/// each stack goes to `layer_{l:02}/`.
pub fn write_folders<A: WritableElement + Clone>(
    dir: &Path,
    arrays: &[(&str, ndarray::Array3<A>)],
) {
    for (u, a) in arrays {
        for l in 0..a.shape()[0] {
            let folder = dir.join(format!("layer_{l:02}"));
            std::fs::create_dir_all(&folder).unwrap();
            let p = folder.join(format!("{u}.npy"));
            let m = a.index_axis(ndarray::Axis(0), l).to_owned();
            ndarray_npy::write_npy(&p, &m).unwrap_or_else(|e| panic!("{}: {e}", p.display()));
        }
    }
}

/// Whether this is a CI run (`CI` set and not `false`/`0`, as CI services set it).
pub fn under_ci() -> bool {
    std::env::var("CI").is_ok_and(|v| !v.is_empty() && v != "false" && v != "0")
}

/// Chromium for a browser test: the path in VOXSTRATA_CHROMIUM (which must exist), else
/// Debian's `chromium` (or `chromium-browser`, `google-chrome`) in /usr/bin or on PATH. None
/// only when no browser can be found; then the test says why on stderr and skips. Under CI
/// (.ci/run installs Chromium) a missing browser fails instead.
pub fn find_chromium(test: &str) -> Option<PathBuf> {
    if let Some(p) = std::env::var_os("VOXSTRATA_CHROMIUM") {
        let p = PathBuf::from(p);
        assert!(
            p.is_file(),
            "{test}: VOXSTRATA_CHROMIUM={} is not a file",
            p.display()
        );
        return Some(p);
    }
    let names = ["chromium", "chromium-browser", "google-chrome"];
    let mut dirs = vec![PathBuf::from("/usr/bin")];
    if let Some(path) = std::env::var_os("PATH") {
        dirs.extend(std::env::split_paths(&path));
    }
    let found = dirs
        .iter()
        .flat_map(|d| names.iter().map(move |n| d.join(n)))
        .find(|p| p.is_file());
    if found.is_none() {
        let why = format!("no Chromium: none of {names:?} in /usr/bin or on PATH, and VOXSTRATA_CHROMIUM is unset");
        assert!(
            !under_ci(),
            "{test}: {why}; under CI the browser tests must run"
        );
        eprintln!("{test}: SKIPPED: {why}");
    }
    found
}
