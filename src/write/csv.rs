//! Records as CSV: one row per record, header from the field names (RFC 4180 quoting).

use std::path::Path;

use serde::Serialize;

use super::{atomic::write_atomic, OutputError};

/// Records as CSV, header from the field names. Floats are written with Rust's shortest
/// round-trip form so CSV and JSON agree exactly.
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

/// Write records to `path` as CSV, atomically.
pub fn write_csv<T: Serialize>(path: &Path, records: &[T]) -> Result<(), OutputError> {
    let csv = records_to_csv(records).map_err(|message| OutputError::Encode {
        path: path.to_path_buf(),
        message,
    })?;
    write_atomic(path, &csv)
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
}
