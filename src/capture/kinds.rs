//! Column kinds: a label column is *continuous* when every non-empty value is a number and it
//! has more than [`CONTINUOUS_MIN_DISTINCT`] distinct finite values, *categorical* otherwise.
//! `capture.toml` can say otherwise per column (`[columns] name = "continuous" |
//! "categorical" | "ignore"`). Continuous columns leave the categorical task list and become
//! [`NumericTask`]s; `nan` and `inf` count as unlabelled, with a note giving their count.

use std::collections::{BTreeMap, HashSet};
use std::path::Path;

use serde::{Deserialize, Serialize};

use super::labels::{FrameTable, LabelTask, UNLABELLED};
use super::CaptureError;

/// A column with more distinct numeric values than this is continuous unless declared.
pub const CONTINUOUS_MIN_DISTINCT: usize = 20;
/// A categorical override on a column with more distinct values than this gets a warning.
pub const MANY_CLASSES: usize = 1000;

/// What a label column is, as declared in `capture.toml`'s `[columns]`.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum ColumnKind {
    /// Numbers on a scale (pitch, energy, position): regression probes, value-coloured maps.
    Continuous,
    /// Class names: classification probes, class-coloured maps.
    Categorical,
    /// Not a task at all.
    Ignore,
}

/// A continuous label column: one value per frame, NaN where the frame has none.
#[derive(Clone, Debug)]
pub struct NumericTask {
    /// Column name (`f0_hz`, `energy_db`, ...).
    pub name: String,
    /// One value per frame; NaN where unlabelled (empty, `nan`, `inf`).
    pub values: Vec<f32>,
}

impl NumericTask {
    /// Frames with a value.
    pub fn n_labelled(&self) -> usize {
        self.values.iter().filter(|v| v.is_finite()).count()
    }

    /// Smallest, largest and mean of the values (NaN when there are none).
    pub fn range_mean(&self) -> (f64, f64, f64) {
        let (mut lo, mut hi, mut sum, mut n) = (f64::INFINITY, f64::NEG_INFINITY, 0.0, 0usize);
        for &v in self.values.iter().filter(|v| v.is_finite()) {
            let v = v as f64;
            lo = lo.min(v);
            hi = hi.max(v);
            sum += v;
            n += 1;
        }
        if n == 0 {
            (f64::NAN, f64::NAN, f64::NAN)
        } else {
            (lo, hi, sum / n as f64)
        }
    }
}

/// Parse one label value as a number: `Some(finite)`, `Some(NaN)` for `nan`/`inf` (any
/// case, signed), `None` when it is not a number.
fn number(s: &str) -> Option<f64> {
    let t = s.trim();
    match t.parse::<f64>() {
        Ok(v) if v.is_finite() => Some(v),
        Ok(_) => Some(f64::NAN),
        Err(_) => None,
    }
}

/// Sort the tasks of `table` into categorical and continuous by their values and the
/// declared kinds; returns notes (non-finite values, many-class overrides) to show the user.
/// `source` names the label file for error messages; `first_row` is the file row of frame 0
/// when the table is one row per frame (`frames.tsv`: 2), None otherwise.
pub fn classify(
    table: &mut FrameTable,
    declared: &BTreeMap<String, ColumnKind>,
    source: &Path,
    first_row: Option<usize>,
) -> Result<Vec<String>, CaptureError> {
    let mut notes = Vec::new();
    let tasks = std::mem::take(&mut table.tasks);
    for t in tasks {
        if t.name == "speaker" {
            table.tasks.push(t);
            continue;
        }
        let parsed: Vec<Option<f64>> = t.classes.iter().map(|c| number(c)).collect();
        let all_numbers = parsed.iter().all(Option::is_some);
        let distinct_finite = parsed
            .iter()
            .filter(|v| v.is_some_and(f64::is_finite))
            .count();
        let kind = match declared.get(&t.name) {
            Some(k) => *k,
            None if all_numbers && distinct_finite > CONTINUOUS_MIN_DISTINCT => {
                ColumnKind::Continuous
            }
            None => ColumnKind::Categorical,
        };
        match kind {
            ColumnKind::Ignore => {}
            ColumnKind::Categorical => {
                if declared.contains_key(&t.name) && t.classes.len() > MANY_CLASSES {
                    notes.push(format!(
                        "column '{}' is declared categorical with {} distinct values; probes \
                         and maps will treat each value as a class",
                        t.name,
                        t.classes.len()
                    ));
                }
                table.tasks.push(t);
            }
            ColumnKind::Continuous => {
                let task = numeric(&t, &parsed, table, source, first_row)?;
                let bad = t.codes.iter().filter(|&&c| c != UNLABELLED).count() - task.n_labelled();
                if bad > 0 {
                    notes.push(format!(
                        "column '{}': {bad} frames hold nan or inf and count as unlabelled",
                        t.name
                    ));
                }
                table.continuous.push(task);
            }
        }
    }
    for name in declared.keys() {
        let known = table.tasks.iter().any(|t| &t.name == name)
            || table.continuous.iter().any(|t| &t.name == name)
            || declared.get(name) == Some(&ColumnKind::Ignore);
        if !known {
            notes.push(format!(
                "capture.toml declares column '{name}', which is not among the label columns ({})",
                label_names(table).join(", ")
            ));
        }
    }
    Ok(notes)
}

fn label_names(table: &FrameTable) -> Vec<String> {
    table
        .tasks
        .iter()
        .map(|t| t.name.clone())
        .chain(table.continuous.iter().map(|t| t.name.clone()))
        .collect()
}

/// The values of a continuous column, or the first frame whose value is not a number.
fn numeric(
    t: &LabelTask,
    parsed: &[Option<f64>],
    table: &FrameTable,
    source: &Path,
    first_row: Option<usize>,
) -> Result<NumericTask, CaptureError> {
    let mut values = Vec::with_capacity(t.codes.len());
    for (i, &c) in t.codes.iter().enumerate() {
        if c == UNLABELLED {
            values.push(f32::NAN);
            continue;
        }
        match parsed[c as usize] {
            Some(v) => values.push(v as f32),
            None => {
                let utt = &table.utterances[table.frame_utt[i] as usize];
                let value = &t.classes[c as usize];
                let expected = "a number (the column is declared continuous in capture.toml)";
                let at = format!(
                    "'{value}' (frame {} of utterance '{utt}')",
                    table.frame_pos[i]
                );
                return Err(match first_row {
                    Some(r) => CaptureError::Table {
                        path: source.to_path_buf(),
                        row: r + i,
                        field: t.name.clone(),
                        expected: expected.into(),
                        found: at,
                    },
                    None => CaptureError::Invalid {
                        path: source.to_path_buf(),
                        what: format!("label column '{}'", t.name),
                        expected: expected.into(),
                        found: at,
                    },
                });
            }
        }
    }
    Ok(NumericTask {
        name: t.name.clone(),
        values,
    })
}

/// Distinct finite values of a slice (for checks that need at least a few).
pub fn distinct_finite(values: &[f32]) -> usize {
    values
        .iter()
        .filter(|v| v.is_finite())
        .map(|v| v.to_bits())
        .collect::<HashSet<_>>()
        .len()
}

#[cfg(test)]
mod tests {
    use super::*;

    fn table(cols: &[(&str, Vec<&str>)]) -> FrameTable {
        let n = cols[0].1.len();
        let tasks = cols
            .iter()
            .map(|(name, vals)| {
                let mut classes: Vec<String> = Vec::new();
                let codes = vals
                    .iter()
                    .map(|v| {
                        if v.is_empty() {
                            return UNLABELLED;
                        }
                        match classes.iter().position(|c| c == v) {
                            Some(k) => k as u32,
                            None => {
                                classes.push(v.to_string());
                                (classes.len() - 1) as u32
                            }
                        }
                    })
                    .collect();
                LabelTask {
                    name: name.to_string(),
                    classes,
                    codes,
                }
            })
            .collect();
        FrameTable {
            utterances: vec!["u1".into()],
            utt_speaker: vec![0],
            speakers: vec!["s1".into()],
            frame_utt: vec![0; n],
            frame_pos: (0..n as u32).collect(),
            tasks,
            continuous: vec![],
        }
    }

    fn many(n: usize) -> Vec<String> {
        (0..n).map(|i| format!("{}.5", i)).collect()
    }

    #[test]
    fn numbers_with_many_values_are_continuous_and_few_are_categorical() {
        let m = many(25);
        let few = ["1", "2", "3", "1", "2"].repeat(5);
        let mut t = table(&[
            ("pos", m.iter().map(String::as_str).collect()),
            ("stress", few.to_vec()),
        ]);
        let notes = classify(&mut t, &BTreeMap::new(), Path::new("frames.tsv"), Some(2)).unwrap();
        assert!(notes.is_empty());
        assert_eq!(t.continuous.len(), 1);
        assert_eq!(t.continuous[0].name, "pos");
        assert_eq!(t.continuous[0].values[3], 3.5);
        assert_eq!(t.tasks.len(), 1);
        assert_eq!(t.tasks[0].name, "stress");
    }

    #[test]
    fn nan_and_inf_are_unlabelled_with_a_note() {
        let mut m = many(24);
        m.push("nan".into());
        m.push("-inf".into());
        m.push(String::new());
        let mut t = table(&[("f0", m.iter().map(String::as_str).collect())]);
        let notes = classify(&mut t, &BTreeMap::new(), Path::new("frames.tsv"), Some(2)).unwrap();
        assert_eq!(t.continuous[0].n_labelled(), 24);
        assert!(notes[0].contains("2 frames hold nan or inf"), "{notes:?}");
    }

    #[test]
    fn declared_kinds_override_and_a_non_number_is_refused_with_its_row() {
        let mut m = many(3);
        let mut declared = BTreeMap::new();
        declared.insert("x".to_string(), ColumnKind::Continuous);
        let mut t = table(&[("x", m.iter().map(String::as_str).collect())]);
        classify(&mut t, &declared, Path::new("frames.tsv"), Some(2)).unwrap();
        assert_eq!(t.continuous.len(), 1, "declared continuous with 3 values");
        m.push("loud".into());
        let mut t = table(&[("x", m.iter().map(String::as_str).collect())]);
        let e = classify(&mut t, &declared, Path::new("frames.tsv"), Some(2)).unwrap_err();
        let msg = e.to_string();
        assert!(msg.contains("row 5") && msg.contains("'loud'"), "{msg}");
        declared.insert("x".to_string(), ColumnKind::Ignore);
        let mut t = table(&[("x", m.iter().map(String::as_str).collect())]);
        classify(&mut t, &declared, Path::new("frames.tsv"), Some(2)).unwrap();
        assert!(t.tasks.is_empty() && t.continuous.is_empty());
    }

    #[test]
    fn a_declared_column_that_does_not_exist_gets_a_note() {
        let mut declared = BTreeMap::new();
        declared.insert("pitch".to_string(), ColumnKind::Continuous);
        let mut t = table(&[("x", vec!["a", "b"])]);
        let notes = classify(&mut t, &declared, Path::new("frames.tsv"), Some(2)).unwrap();
        assert!(
            notes[0].contains("'pitch'") && notes[0].contains("(x)"),
            "{notes:?}"
        );
    }

    #[test]
    fn categorical_override_with_many_values_warns() {
        let m = many(1001);
        let mut declared = BTreeMap::new();
        declared.insert("t".to_string(), ColumnKind::Categorical);
        let mut t = table(&[("t", m.iter().map(String::as_str).collect())]);
        let notes = classify(&mut t, &declared, Path::new("frames.tsv"), Some(2)).unwrap();
        assert_eq!(t.tasks.len(), 1);
        assert!(notes[0].contains("1001 distinct"), "{notes:?}");
    }
}
