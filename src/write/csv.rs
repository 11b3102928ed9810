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

/// Records as CSV (cells as [`records_to_csv`] writes them), keeping only the rows whose
/// column `by` holds `value` and the columns `keep` accepts; the header alone when no row is
/// kept.
pub fn records_to_csv_where<T: Serialize>(
    records: &[T],
    by: &str,
    value: &str,
    keep: impl Fn(&str) -> bool,
) -> Result<Vec<u8>, String> {
    let full = records_to_csv(records)?;
    let mut r = csv::Reader::from_reader(full.as_slice());
    let header = r.headers().map_err(|e| e.to_string())?.clone();
    let cols: Vec<usize> = (0..header.len()).filter(|&i| keep(&header[i])).collect();
    let at = header.iter().position(|h| h == by);
    let mut w = csv::WriterBuilder::new().from_writer(Vec::new());
    if !cols.is_empty() {
        w.write_record(cols.iter().map(|&i| &header[i]))
            .map_err(|e| e.to_string())?;
    }
    for row in r.records() {
        let row = row.map_err(|e| e.to_string())?;
        if at.is_some_and(|a| &row[a] == value) {
            w.write_record(cols.iter().map(|&i| &row[i]))
                .map_err(|e| e.to_string())?;
        }
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

    #[test]
    fn rows_and_columns_can_be_picked() {
        let rows = vec![
            Row {
                layer: 1,
                label: "x".into(),
                value: 0.5,
            },
            Row {
                layer: 2,
                label: "y".into(),
                value: f64::NAN,
            },
        ];
        let s = records_to_csv_where(&rows, "label", "y", |c| c != "label").unwrap();
        assert_eq!(String::from_utf8(s).unwrap(), "layer,value\n2,NaN\n");
        let s = records_to_csv_where(&rows, "label", "z", |c| c != "value").unwrap();
        assert_eq!(String::from_utf8(s).unwrap(), "layer,label\n");
    }
}
