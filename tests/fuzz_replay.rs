//! Replays every committed fuzz input (`fuzz/corpus/<target>/*` and `fuzz/artifacts/<target>/*`)
//! through the same entry points the fuzz targets call (`fuzz/harness.rs`), so `cargo test`
//! checks them without cargo fuzz. Passing means: no panic, and the invariants the harness
//! asserts hold (e.g. `read_rows` agrees with `read_layer`).

use std::path::{Path, PathBuf};

#[path = "../fuzz/harness.rs"]
mod harness;

fn inputs(target: &str) -> Vec<PathBuf> {
    let root = Path::new(env!("CARGO_MANIFEST_DIR")).join("fuzz");
    let mut out = Vec::new();
    for kind in ["corpus", "artifacts"] {
        if let Ok(rd) = std::fs::read_dir(root.join(kind).join(target)) {
            out.extend(
                rd.filter_map(|e| e.ok())
                    .map(|e| e.path())
                    .filter(|p| p.is_file()),
            );
        }
    }
    out.sort();
    out
}

fn replay(target: &str, run: fn(&Path, &[u8])) {
    let files = inputs(target);
    assert!(
        !files.is_empty(),
        "no committed inputs for fuzz target {target}"
    );
    let dir = tempfile::tempdir().unwrap();
    for f in &files {
        let data = std::fs::read(f).unwrap();
        let r = std::panic::catch_unwind(|| run(dir.path(), &data));
        assert!(r.is_ok(), "fuzz input {} panicked", f.display());
    }
}

#[test]
fn npy_reader_survives_every_committed_input() {
    replay("npy", harness::npy);
}

#[test]
fn frame_table_reader_survives_every_committed_input() {
    replay("labels", harness::frames_tsv);
}

#[test]
fn segment_conversion_survives_every_committed_input() {
    replay("segments", harness::segments);
}

#[test]
fn textgrid_reader_survives_every_committed_input() {
    replay("textgrid", harness::textgrid);
}

#[test]
fn ctm_reader_survives_every_committed_input() {
    replay("ctm", harness::ctm);
}
