//! Writers, one small module per format ([`json`], [`csv`], [`npy`]) over the atomic-file
//! rule ([`atomic`]), plus the one output-folder check and the one file-name rule used by
//! every command.

pub mod atomic;
pub mod csv;
pub mod json;
pub mod npy;

use std::path::{Path, PathBuf};

pub use atomic::write_atomic;
pub use json::{write_json, write_records};
pub use npy::{write_npy_f32, write_npy_u64};

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
    /// The output folder is not usable (exists and not empty without `--force`, a file, or
    /// unreadable).
    #[error("{path}: expected {expected}, found {found}")]
    Refused {
        /// The folder.
        path: PathBuf,
        /// What was expected.
        expected: String,
        /// What was found.
        found: String,
    },
}

pub(crate) fn io(path: &Path, e: std::io::Error) -> OutputError {
    OutputError::Io {
        path: path.to_path_buf(),
        source: e,
    }
}

/// The one output-folder check, run before any work: a new folder, or an empty one, is fine;
/// a folder that holds files is refused unless `force`; a file, or a folder that cannot be
/// read, is always refused. Creates nothing.
pub fn check_out_dir(dir: &Path, force: bool) -> Result<(), OutputError> {
    if !dir.exists() {
        return Ok(());
    }
    let refuse = |expected: &str, found: String| OutputError::Refused {
        path: dir.to_path_buf(),
        expected: expected.into(),
        found,
    };
    if !dir.is_dir() {
        return Err(refuse("an output folder", "a file".into()));
    }
    let mut rd = std::fs::read_dir(dir).map_err(|e| {
        refuse(
            "an output folder this user can read",
            format!("a folder that cannot be read ({e})"),
        )
    })?;
    if rd.next().is_some() && !force {
        return Err(refuse(
            "an empty or new output folder (or --force to write into it)",
            "a folder that already holds files".into(),
        ));
    }
    Ok(())
}

/// [`check_out_dir`], then create the folder and remove temporaries a killed run left there.
pub fn prepare_out_dir(dir: &Path, force: bool) -> Result<(), OutputError> {
    check_out_dir(dir, force)?;
    std::fs::create_dir_all(dir).map_err(|e| io(dir, e))?;
    atomic::remove_stale_partials(dir);
    Ok(())
}

/// The file-name form of a task or label name: letters, digits, `-` and `_` kept (any
/// script), everything else `_` (`map_<label>.svg`, `confusion_<task>.svg`).
pub fn file_stem(name: &str) -> String {
    name.chars()
        .map(|c| {
            if c.is_alphanumeric() || c == '-' || c == '_' {
                c
            } else {
                '_'
            }
        })
        .collect()
}

/// A folder name for a capture inside a report: [`file_stem`] of its name, never empty, and
/// distinct from the names already `taken`.
pub fn unique_stem(name: &str, taken: &[String]) -> String {
    let mut s = file_stem(name);
    if s.is_empty() {
        s = "capture".into();
    }
    let mut out = s.clone();
    let mut i = 2;
    while taken.contains(&out) {
        out = format!("{s}_{i}");
        i += 1;
    }
    out
}

/// `p` relative to `base`, as written in `run.json`.
pub fn relative(base: &Path, p: &Path) -> String {
    p.strip_prefix(base).unwrap_or(p).display().to_string()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_folder_with_files_is_refused_without_force() {
        let d = tempfile::tempdir().unwrap();
        std::fs::write(d.path().join("x"), b"1").unwrap();
        assert!(matches!(
            check_out_dir(d.path(), false),
            Err(OutputError::Refused { .. })
        ));
        assert!(check_out_dir(d.path(), true).is_ok());
        assert!(matches!(
            check_out_dir(&d.path().join("x"), true),
            Err(OutputError::Refused { .. })
        ));
        assert!(check_out_dir(&d.path().join("new"), false).is_ok());
        assert!(!d.path().join("new").exists(), "the check creates nothing");
    }

    #[test]
    fn file_stems_keep_letters_of_any_script() {
        assert_eq!(file_stem("word pos/ɪ"), "word_pos_ɪ");
    }

    #[test]
    fn unique_stems_are_safe_and_distinct() {
        assert_eq!(unique_stem("early", &[]), "early");
        assert_eq!(unique_stem("../x y", &[]), "___x_y");
        assert_eq!(unique_stem("a", &["a".into()]), "a_2");
        assert_eq!(unique_stem("", &[]), "capture");
    }
}
