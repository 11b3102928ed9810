//! JSON outputs: `<name>.json` as the envelope `{"tool", "version", "captures", "options",
//! "records", ...extra}` (with the same records as `<name>.csv` beside it), and plain JSON
//! documents (`inspect.json`, `run.json`).

use std::path::{Path, PathBuf};

use serde::Serialize;

use super::{atomic::write_atomic, csv::write_csv, OutputError};
use crate::records::CaptureRef;

/// The envelope as written (borrowing the records).
#[derive(Serialize)]
struct EnvelopeOut<'a, T: Serialize> {
    tool: &'static str,
    version: &'static str,
    captures: &'a [CaptureRef],
    options: serde_json::Value,
    records: &'a [T],
    #[serde(flatten)]
    extra: serde_json::Map<String, serde_json::Value>,
}

fn encode_err(path: &Path, e: impl std::fmt::Display) -> OutputError {
    OutputError::Encode {
        path: path.to_path_buf(),
        message: e.to_string(),
    }
}

/// Any serialisable value as a JSON value (for the extra fields of an envelope).
pub fn to_value<T: Serialize + ?Sized>(v: &T) -> Result<serde_json::Value, OutputError> {
    serde_json::to_value(v).map_err(|e| encode_err(Path::new("(record)"), e))
}

/// Write `value` as pretty JSON with a final newline to `path`, atomically.
pub fn write_json<T: Serialize + ?Sized>(path: &Path, value: &T) -> Result<(), OutputError> {
    let mut json = serde_json::to_vec_pretty(value).map_err(|e| encode_err(path, e))?;
    json.push(b'\n');
    write_atomic(path, &json)
}

/// Write `<dir>/<name>.json` (envelope) and `<dir>/<name>.csv` (records only); returns both
/// paths.
pub fn write_records<T: Serialize>(
    dir: &Path,
    name: &str,
    captures: &[CaptureRef],
    options: serde_json::Value,
    records: &[T],
    extra: serde_json::Map<String, serde_json::Value>,
) -> Result<Vec<PathBuf>, OutputError> {
    let json_path = write_envelope(dir, name, captures, options, records, extra)?;
    let csv_path = dir.join(format!("{name}.csv"));
    write_csv(&csv_path, records)?;
    Ok(vec![json_path, csv_path])
}

/// Write `<dir>/<name>.json` (the envelope) alone, for a command that writes its CSV its own
/// way; returns its path.
pub fn write_envelope<T: Serialize>(
    dir: &Path,
    name: &str,
    captures: &[CaptureRef],
    options: serde_json::Value,
    records: &[T],
    extra: serde_json::Map<String, serde_json::Value>,
) -> Result<PathBuf, OutputError> {
    let env = EnvelopeOut {
        tool: "voxstrata",
        version: env!("CARGO_PKG_VERSION"),
        captures,
        options,
        records,
        extra,
    };
    let json_path = dir.join(format!("{name}.json"));
    write_json(&json_path, &env)?;
    Ok(json_path)
}
