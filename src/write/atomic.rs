//! Atomic files: every output is written under a temporary name (`.NAME.partial-PID`) in the
//! same folder and renamed into place, so an interrupted run never leaves a half-written file
//! under a final name; a later run removes the temporaries a killed run left behind.

use std::io::Write;
use std::path::Path;

use super::{io, OutputError};

/// Marker in the names of temporary files.
pub const PARTIAL_MARK: &str = ".partial-";

/// Write `bytes` to `path` through a temporary file in the same folder and a rename.
/// Test hook: `VOXSTRATA_TEST_WRITE_PAUSE_MS=N` writes half, flushes, sleeps N ms, then the
/// rest, so a test can stop the process while a file is half-written.
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
    let tmp = dir.join(format!(".{name}{PARTIAL_MARK}{}", std::process::id()));
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

/// Remove temporary files (`.NAME.partial-PID`) that a killed earlier run left behind in
/// `dir` and its sub-folders; a SIGKILL between create and rename cannot be cleaned up by the
/// run itself.
pub fn remove_stale_partials(dir: &Path) {
    let Ok(rd) = std::fs::read_dir(dir) else {
        return;
    };
    for e in rd.flatten() {
        let path = e.path();
        let name = e.file_name();
        let name = name.to_string_lossy();
        if path.is_dir() {
            remove_stale_partials(&path);
        } else if name.starts_with('.') && name.contains(PARTIAL_MARK) && path.is_file() {
            let _ = std::fs::remove_file(path);
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

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

    #[test]
    fn stale_partials_are_removed_in_sub_folders_too() {
        let d = tempfile::tempdir().unwrap();
        std::fs::create_dir_all(d.path().join("maps")).unwrap();
        std::fs::write(d.path().join(".a.json.partial-12"), b"{").unwrap();
        std::fs::write(d.path().join("maps/.layer_00.npy.partial-12"), b"x").unwrap();
        std::fs::write(d.path().join("keep.json"), b"{}").unwrap();
        remove_stale_partials(d.path());
        assert!(!d.path().join(".a.json.partial-12").exists());
        assert!(!d.path().join("maps/.layer_00.npy.partial-12").exists());
        assert!(d.path().join("keep.json").exists());
    }
}
