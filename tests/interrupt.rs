//! No lost output: a run stopped by SIGINT or SIGKILL leaves no half-written file (outputs are
//! written to `.NAME.partial-PID` and renamed), and the next run with `--force` succeeds.

use std::path::Path;
use std::process::{Child, Command};
use std::time::Duration;

use ndarray::Array2;

/// A capture large enough that `probe` runs for a few seconds on 2 cores.
fn write_capture(dir: &Path) {
    let mut tsv = String::from("utterance\tspeaker\tphone\n");
    let mut codes = Vec::new();
    for s in 0..20 {
        for u in 0..10 {
            for i in 0..100 {
                let p = (i / 4 + u) % 30;
                tsv.push_str(&format!("s{s}u{u}\ts{s}\tp{p}\n"));
                codes.push(p);
            }
        }
    }
    std::fs::create_dir_all(dir).unwrap();
    std::fs::write(dir.join("frames.tsv"), tsv).unwrap();
    for l in 0..6u64 {
        let mut x = 0x9E37_79B9u64 + l;
        let m = Array2::from_shape_fn((codes.len(), 64), |(i, j)| {
            x = x.wrapping_mul(6364136223846793005).wrapping_add(1);
            (x >> 40) as f32 / (1u64 << 24) as f32 + if codes[i] * 2 % 64 == j { 1.0 } else { 0.0 }
        });
        ndarray_npy::write_npy(dir.join(format!("layer_{l:02}.npy")), &m).unwrap();
    }
}

fn start(cap: &Path, out: &Path, force: bool) -> Child {
    let mut c = Command::new(env!("CARGO_BIN_EXE_voxstrata"));
    c.args(["--quiet", "probe"]).arg(cap).arg("--out").arg(out);
    if force {
        // The rerun only has to succeed, not be long: one layer, a short bootstrap.
        c.args([
            "--force",
            "--layers",
            "0",
            "--bootstrap",
            "50",
            "--no-control",
        ]);
    }
    c.stdout(std::process::Stdio::null())
        .stderr(std::process::Stdio::piped())
        .spawn()
        .unwrap()
}

/// Nothing half-written: no temporary files, and every JSON present parses.
fn no_partial_files(out: &Path) {
    let Ok(rd) = std::fs::read_dir(out) else {
        return;
    };
    for e in rd.flatten() {
        let name = e.file_name().to_string_lossy().into_owned();
        assert!(
            !name.contains(".partial-"),
            "temporary file left behind: {name}"
        );
        if name.ends_with(".json") {
            let text = std::fs::read_to_string(e.path()).unwrap();
            serde_json::from_str::<serde_json::Value>(&text)
                .unwrap_or_else(|err| panic!("{name} is half-written: {err}"));
        }
    }
}

fn interrupt_then_rerun(signal: &str) {
    let tmp = tempfile::tempdir().unwrap();
    let (cap, out) = (tmp.path().join("cap"), tmp.path().join("out"));
    write_capture(&cap);
    let mut child = start(&cap, &out, false);
    std::thread::sleep(Duration::from_millis(1500));
    if signal == "KILL" {
        child.kill().unwrap();
    } else {
        let st = Command::new("kill")
            .args([&format!("-{signal}"), &child.id().to_string()])
            .status()
            .unwrap();
        assert!(st.success());
    }
    let status = child.wait().unwrap();
    assert!(
        !status.success(),
        "the run finished before the {signal}; make the capture bigger"
    );
    no_partial_files(&out);
    let o = start(&cap, &out, true).wait_with_output().unwrap();
    assert!(
        o.status.success(),
        "rerun: {}",
        String::from_utf8_lossy(&o.stderr)
    );
    no_partial_files(&out);
    assert!(out.join("probe.json").exists() && out.join("probe.csv").exists());
}

#[test]
fn sigint_leaves_no_partial_file_and_rerun_succeeds() {
    interrupt_then_rerun("INT");
}

#[test]
fn sigkill_leaves_no_partial_file_and_rerun_succeeds() {
    interrupt_then_rerun("KILL");
}
