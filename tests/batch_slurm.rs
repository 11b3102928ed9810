//! `voxstrata batch --submit` on a real one-node Slurm cluster started by the test on
//! 127.0.0.1 (tests/slurm/up.sh: munge key, slurm.conf, state and logs in a temp folder;
//! daemons stopped by their PIDs afterwards with tests/slurm/down.sh).
//!
//! 1. The job array and the dependent assembly job run to an empty queue, and every record
//!    file equals, byte for byte, what a one-machine `report` writes for the same seed.
//! 2. With one capture made unreadable after planning, its units fail, the assembly job never
//!    runs (its `afterok` dependency cannot be met), and `assemble` names the failed units and
//!    exits 2; the other capture's units still wrote their parts.
//!
//! Starting Slurm needs root and Debian's `slurmctld slurmd slurm-client munge`; without them
//! the test prints why and returns (counted as passed: cargo has no skip). With `CI` set
//! (`.ci/run` runs as root and installs the packages) a cluster that cannot start fails it.

mod common;

use std::path::{Path, PathBuf};
use std::process::Command;
use std::time::{Duration, Instant};

use common::{run_text, s, voxstrata};

/// A running cluster; dropping it stops its daemons by PID.
struct Cluster {
    dir: PathBuf,
    conf: PathBuf,
}

impl Drop for Cluster {
    fn drop(&mut self) {
        let _ = Command::new(scripts().join("down.sh"))
            .arg(&self.dir)
            .status();
    }
}

fn scripts() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/slurm")
}

fn free_port() -> u16 {
    std::net::TcpListener::bind("127.0.0.1:0")
        .and_then(|l| l.local_addr())
        .map(|a| a.port())
        .expect("a free port")
}

/// Why Slurm cannot be started here, if it cannot.
fn cannot_start() -> Option<String> {
    let uid = Command::new("id").arg("-u").output().ok()?;
    if String::from_utf8_lossy(&uid.stdout).trim() != "0" {
        return Some("not root (the daemons and munge need root)".into());
    }
    let path = std::env::var_os("PATH").unwrap_or_default();
    let mut dirs: Vec<PathBuf> = std::env::split_paths(&path).collect();
    dirs.extend(["/usr/sbin", "/sbin"].map(PathBuf::from));
    for tool in [
        "slurmctld",
        "slurmd",
        "munged",
        "mungekey",
        "sbatch",
        "squeue",
    ] {
        if !dirs.iter().any(|d| d.join(tool).is_file()) {
            return Some(format!(
                "{tool} is not installed (apt-get install slurmctld slurmd slurm-client munge)"
            ));
        }
    }
    None
}

/// Start a cluster in `work/slurm`, or say why not (panicking under CI).
fn start(work: &Path) -> Option<Cluster> {
    let skip = |why: String| {
        assert!(
            std::env::var_os("CI").is_none(),
            "CI is set but Slurm cannot be started: {why}"
        );
        eprintln!("skipped: Slurm cannot be started here: {why}");
        None
    };
    if let Some(why) = cannot_start() {
        return skip(why);
    }
    let dir = work.join("slurm");
    let out = Command::new(scripts().join("up.sh"))
        .arg(&dir)
        .env("SLURMCTLD_PORT", free_port().to_string())
        .env("SLURMD_PORT", free_port().to_string())
        .env("PATH", with_sbin())
        .output()
        .expect("run up.sh");
    let cluster = Cluster {
        conf: dir.join("slurm.conf"),
        dir,
    };
    if !out.status.success() {
        return skip(format!(
            "up.sh failed: {}{}",
            String::from_utf8_lossy(&out.stdout),
            String::from_utf8_lossy(&out.stderr)
        ));
    }
    Some(cluster)
}

fn with_sbin() -> String {
    format!(
        "{}:/usr/sbin:/sbin",
        std::env::var("PATH").unwrap_or_default()
    )
}

/// Run voxstrata in `cwd` with the cluster's configuration.
fn vx(c: &Cluster, cwd: &Path, args: &[&str]) -> common::Ran {
    voxstrata()
        .args(args)
        .current_dir(cwd)
        .env("SLURM_CONF", &c.conf)
        .env("PATH", with_sbin())
        .output()
        .expect("run voxstrata")
        .into()
}

/// Wait until Slurm's queue is empty (10 minutes at most).
fn wait_for_empty_queue(c: &Cluster) {
    let t = Instant::now();
    loop {
        let q = Command::new("squeue")
            .args(["-h", "-o", "%i %T"])
            .env("SLURM_CONF", &c.conf)
            .output()
            .expect("squeue");
        assert!(q.status.success(), "squeue failed: {q:?}");
        if String::from_utf8_lossy(&q.stdout).trim().is_empty() {
            return;
        }
        assert!(
            t.elapsed() < Duration::from_secs(600),
            "the queue did not empty in 10 minutes: {}",
            String::from_utf8_lossy(&q.stdout)
        );
        std::thread::sleep(Duration::from_millis(500));
    }
}

/// Every file under `dir` (relative paths, sorted), leaving out `batch/`.
fn files(dir: &Path) -> Vec<PathBuf> {
    let mut out = Vec::new();
    let mut stack = vec![dir.to_path_buf()];
    while let Some(d) = stack.pop() {
        for e in std::fs::read_dir(&d).unwrap() {
            let p = e.unwrap().path();
            if p.is_dir() {
                if p != dir.join("batch") {
                    stack.push(p);
                }
            } else {
                out.push(p.strip_prefix(dir).unwrap().to_path_buf());
            }
        }
    }
    out.sort();
    out
}

#[test]
fn batch_on_slurm_equals_report_and_a_failed_unit_stops_assembly() {
    let work = tempfile::tempdir().unwrap();
    // The runs start in a folder whose name holds a space, a quote and `#`, and the split run
    // writes to one that also holds `%`: the scripts must name them to sbatch (#SBATCH
    // --chdir, --output with its `%` patterns) and to the shell.
    let w = &work.path().join("work dir #1 it's");
    std::fs::create_dir_all(w).unwrap();
    let r = run_text(["demo", "--size", "small", "--out", s(&w.join("demo"))]);
    assert_eq!(r.code, 0, "{r:?}");
    let Some(cluster) = start(work.path()) else {
        return;
    };
    submitted_run_equals_report(&cluster, w);
    failed_unit_stops_assembly(&cluster, w);
}

/// The split run's report folder.
const SPLIT: &str = "split 100% \"done\"";

fn submitted_run_equals_report(c: &Cluster, w: &Path) {
    let args = ["demo/early", "demo/final", "--seed", "7", "--quiet"];
    let r = vx(
        c,
        w,
        &[&["batch", "--out", SPLIT, "--submit"], &args[..]].concat(),
    );
    assert_eq!(r.code, 0, "{r:?}");
    assert!(r.stdout.contains("submitted job array"), "{}", r.stdout);
    assert!(r.stdout.contains("submitted assembly job"), "{}", r.stdout);
    wait_for_empty_queue(c);
    assert!(
        w.join(SPLIT).join("index.html").is_file(),
        "the assembly job wrote no report; its log: {:?}",
        std::fs::read_to_string(w.join(SPLIT).join("batch/logs/assemble.log"))
    );
    // Each task logged to its own file: Slurm replaced `%a` and kept the folder's own `%`.
    for i in [0, 1] {
        let log = w.join(SPLIT).join(format!("batch/logs/unit-{i}.log"));
        assert!(log.is_file(), "no log {}", log.display());
    }
    let r = vx(c, w, &[&["report", "--out", "one"], &args[..]].concat());
    assert_eq!(r.code, 0, "{r:?}");
    let (one, split) = (files(&w.join("one")), files(&w.join(SPLIT)));
    assert_eq!(one, split, "the same files");
    assert!(one.len() > 20, "{one:?}");
    for f in &one {
        // index.html and run.json hold times and the output folder's name; the rest is
        // records, maps and figures, equal byte for byte.
        if f == Path::new("index.html") || f == Path::new("run.json") {
            continue;
        }
        let (a, b) = (
            std::fs::read(w.join("one").join(f)).unwrap(),
            std::fs::read(w.join(SPLIT).join(f)).unwrap(),
        );
        assert!(a == b, "{} differs between report and batch", f.display());
    }
    let run = common::read_json(&w.join(SPLIT).join("run.json"));
    let steps: Vec<&str> = run["timings"]
        .as_array()
        .unwrap()
        .iter()
        .map(|t| t["step"].as_str().unwrap())
        .collect();
    assert!(steps.contains(&"probe demo-final"), "{steps:?}");
}

fn failed_unit_stops_assembly(c: &Cluster, w: &Path) {
    let copy = Command::new("cp")
        .args(["-r", "demo", "broken"])
        .current_dir(w)
        .status()
        .unwrap();
    assert!(copy.success());
    let r = vx(
        c,
        w,
        &[
            "batch",
            "broken/early",
            "broken/final",
            "--out",
            "fail",
            "--quiet",
        ],
    );
    assert_eq!(r.code, 0, "{r:?}");
    // Made unreadable after planning: cut the layer file short.
    let layer = w.join("broken/final/layer_03.npy");
    let f = std::fs::OpenOptions::new()
        .write(true)
        .open(&layer)
        .unwrap();
    f.set_len(1000).unwrap();
    drop(f);
    let plan = w.join("fail/batch");
    let array = Command::new("sbatch")
        .arg("--parsable")
        .arg(plan.join("units.sh"))
        .env("SLURM_CONF", &c.conf)
        .output()
        .unwrap();
    assert!(array.status.success(), "{array:?}");
    let id = String::from_utf8_lossy(&array.stdout).trim().to_string();
    let after = Command::new("sbatch")
        .arg(format!("--dependency=afterok:{id}"))
        .arg(plan.join("assemble.sh"))
        .env("SLURM_CONF", &c.conf)
        .output()
        .unwrap();
    assert!(after.status.success(), "{after:?}");
    wait_for_empty_queue(c);
    assert!(
        !w.join("fail/batch/logs/assemble.log").exists(),
        "the assembly job ran although units failed"
    );
    assert!(!w.join("fail/index.html").exists());
    let r = vx(c, w, &["assemble", "fail"]);
    assert_eq!(r.code, 2, "{r:?}");
    assert!(
        r.stderr
            .contains("(probe of demo-final, layer 3): failed: ")
            && r.stderr.contains("layer_03.npy"),
        "{}",
        r.stderr
    );
    assert!(
        !r.stderr.contains("probe of demo-early"),
        "the readable capture's units have parts: {}",
        r.stderr
    );
}
