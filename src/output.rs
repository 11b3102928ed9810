//! Output files: tidy records as `<name>.json` and `<name>.csv`, and the atomic-write rule
//! (every file is written under a temporary name in the same folder and renamed), so an
//! interrupted run never leaves a half-written file behind.

use std::io::Write;
use std::path::{Path, PathBuf};

use serde::Serialize;

/// Errors while writing outputs (internal failures: exit code 1, unless the folder is the
/// user's mistake, which [`OutputError::Refused`] marks).
#[derive(Debug, thiserror::Error)]
pub enum OutputError {
    /// A file could not be written.
    #[error("{path}: {source}")]
    Io {
        /// The file.
        path: PathBuf,
        /// The OS error.
        source: std::io::Error,
    },
    /// Records could not be serialised.
    #[error("{path}: {message}")]
    Encode {
        /// The file.
        path: PathBuf,
        /// What went wrong.
        message: String,
    },
    /// The output folder is not usable (exists and not empty without `--force`, or a file).
    #[error("{path}: {expected}, found {found}")]
    Refused {
        /// The folder.
        path: PathBuf,
        /// What was expected.
        expected: String,
        /// What was found.
        found: String,
    },
}

fn io(path: &Path, e: std::io::Error) -> OutputError {
    OutputError::Io {
        path: path.to_path_buf(),
        source: e,
    }
}

/// Write `bytes` to `path` through a temporary file in the same folder and a rename.
/// Test hook: `VOXSTRATA_TEST_WRITE_PAUSE_MS=N` writes half, flushes, sleeps N ms, then the rest.
pub fn write_atomic(path: &Path, bytes: &[u8]) -> Result<(), OutputError> {
    let dir = path
        .parent()
        .filter(|p| !p.as_os_str().is_empty())
        .unwrap_or(Path::new("."));
    std::fs::create_dir_all(dir).map_err(|e| io(dir, e))?;
    let name = path
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_default();
    let tmp = dir.join(format!(".{name}.partial-{}", std::process::id()));
    let res = (|| {
        let mut f = std::fs::File::create(&tmp)?;
        let pause_ms = std::env::var("VOXSTRATA_TEST_WRITE_PAUSE_MS")
            .ok()
            .and_then(|v| v.parse::<u64>().ok())
            .unwrap_or(0);
        let (head, tail) = bytes.split_at(if pause_ms > 0 { bytes.len() / 2 } else { 0 });
        f.write_all(head)?;
        if pause_ms > 0 {
            f.flush()?;
            std::thread::sleep(std::time::Duration::from_millis(pause_ms));
        }
        f.write_all(tail)?;
        f.sync_all()?;
        std::fs::rename(&tmp, path)
    })();
    if let Err(e) = res {
        let _ = std::fs::remove_file(&tmp);
        return Err(io(path, e));
    }
    Ok(())
}

/// Write an array as `.npy` (f32, C order) atomically.
pub fn write_npy_f32(path: &Path, a: &ndarray::ArrayView2<f32>) -> Result<(), OutputError> {
    let mut buf = Vec::new();
    let std = a.as_standard_layout();
    ndarray_npy::WriteNpyExt::write_npy(&std, &mut buf).map_err(|e| OutputError::Encode {
        path: path.to_path_buf(),
        message: e.to_string(),
    })?;
    write_atomic(path, &buf)
}

/// Write a 1-D u64 index array as `.npy` atomically.
pub fn write_npy_u64(path: &Path, a: &[u64]) -> Result<(), OutputError> {
    let arr = ndarray::Array1::from(a.to_vec());
    let mut buf = Vec::new();
    ndarray_npy::WriteNpyExt::write_npy(&arr, &mut buf).map_err(|e| OutputError::Encode {
        path: path.to_path_buf(),
        message: e.to_string(),
    })?;
    write_atomic(path, &buf)
}

/// Reference to one input capture in an output header.
#[derive(Clone, Debug, Serialize)]
pub struct CaptureRef {
    /// Display name.
    pub name: String,
    /// Folder as given.
    pub path: String,
}

/// The envelope of every `<name>.json`: tool, version, captures, options, records and any
/// extra top-level fields (summaries, splits).
#[derive(Debug, Serialize)]
pub struct Envelope<'a, T: Serialize> {
    /// Always `voxstrata`.
    pub tool: &'static str,
    /// Crate version.
    pub version: &'static str,
    /// Inputs.
    pub captures: &'a [CaptureRef],
    /// The options the analysis ran with.
    pub options: serde_json::Value,
    /// One record per row.
    pub records: &'a [T],
    /// Extra fields placed at the top level.
    #[serde(flatten)]
    pub extra: serde_json::Map<String, serde_json::Value>,
}

/// Write `<dir>/<name>.json` (envelope) and `<dir>/<name>.csv` (records only).
pub fn write_records<T: Serialize>(
    dir: &Path,
    name: &str,
    captures: &[CaptureRef],
    options: serde_json::Value,
    records: &[T],
    extra: serde_json::Map<String, serde_json::Value>,
) -> Result<(), OutputError> {
    let env = Envelope {
        tool: "voxstrata",
        version: env!("CARGO_PKG_VERSION"),
        captures,
        options,
        records,
        extra,
    };
    let json_path = dir.join(format!("{name}.json"));
    let mut json = serde_json::to_vec_pretty(&env).map_err(|e| OutputError::Encode {
        path: json_path.clone(),
        message: e.to_string(),
    })?;
    json.push(b'\n');
    let csv_path = dir.join(format!("{name}.csv"));
    let csv = records_to_csv(records).map_err(|message| OutputError::Encode {
        path: csv_path.clone(),
        message,
    })?;
    write_atomic(&json_path, &json)?;
    write_atomic(&csv_path, &csv)
}

/// Records as CSV (RFC 4180 quoting), header from the field names. Floats are written with
/// Rust's shortest round-trip form so CSV and JSON agree exactly.
pub fn records_to_csv<T: Serialize>(records: &[T]) -> Result<Vec<u8>, String> {
    let mut w = csv::WriterBuilder::new()
        .has_headers(true)
        .from_writer(Vec::new());
    for r in records {
        w.serialize(r).map_err(|e| e.to_string())?;
    }
    if records.is_empty() {
        w.write_record(std::iter::empty::<&str>())
            .map_err(|e| e.to_string())?;
    }
    w.into_inner().map_err(|e| e.to_string())
}

/// Prepare an output folder: create it, or refuse if it exists with files in it and
/// `force` is false.
pub fn prepare_out_dir(dir: &Path, force: bool) -> Result<(), OutputError> {
    if dir.exists() {
        if !dir.is_dir() {
            return Err(OutputError::Refused {
                path: dir.to_path_buf(),
                expected: "an output folder".into(),
                found: "a file".into(),
            });
        }
        let non_empty = std::fs::read_dir(dir)
            .map_err(|e| io(dir, e))?
            .next()
            .is_some();
        if non_empty && !force {
            return Err(OutputError::Refused {
                path: dir.to_path_buf(),
                expected: "an empty or new output folder (or --force to write into it)".into(),
                found: "a folder that already holds files".into(),
            });
        }
    }
    std::fs::create_dir_all(dir).map_err(|e| io(dir, e))?;
    remove_stale_partials(dir);
    Ok(())
}

/// Remove temporary files (`.NAME.partial-PID`) that a killed earlier run left behind; a
/// SIGKILL between create and rename cannot be cleaned up by the run itself.
fn remove_stale_partials(dir: &Path) {
    let Ok(rd) = std::fs::read_dir(dir) else {
        return;
    };
    for e in rd.flatten() {
        let name = e.file_name();
        let name = name.to_string_lossy();
        if name.starts_with('.') && name.contains(".partial-") && e.path().is_file() {
            let _ = std::fs::remove_file(e.path());
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[derive(Serialize)]
    struct Row {
        layer: usize,
        label: String,
        value: f64,
    }

    #[test]
    fn csv_quotes_awkward_labels() {
        let rows = vec![Row {
            layer: 1,
            label: "a,\"b\"\nc".into(),
            value: 0.5,
        }];
        let s = String::from_utf8(records_to_csv(&rows).unwrap()).unwrap();
        assert_eq!(s, "layer,label,value\n1,\"a,\"\"b\"\"\nc\",0.5\n");
    }

    #[test]
    fn atomic_write_leaves_no_temporary() {
        let d = tempfile::tempdir().unwrap();
        write_atomic(&d.path().join("x.json"), b"{}").unwrap();
        let names: Vec<_> = std::fs::read_dir(d.path())
            .unwrap()
            .map(|e| e.unwrap().file_name())
            .collect();
        assert_eq!(names, vec![std::ffi::OsString::from("x.json")]);
    }
}
