//! `voxstrata batch`, `unit` and `assemble` without a cluster: the units run here one by one.
//! Refusals before anything is written, `--submit` without sbatch, incomplete and mismatched
//! batch folders, idempotent units, and the assembled records against `report`'s.
//! (The run on a real Slurm cluster is tests/batch_slurm.rs.)

mod common;

use std::path::Path;

use common::{run_text, s};

/// The small demo in `dir/demo`.
fn demo(dir: &Path) {
    let r = run_text(["demo", "--size", "small", "--out", s(&dir.join("demo"))]);
    assert_eq!(r.code, 0, "{r:?}");
}

/// A quick plan: one capture, two layers, PCA maps, no ABX (3 units).
fn quick(dir: &Path, out: &str, seed: &str) -> Vec<String> {
    let cap = dir.join("demo/final");
    [
        s(&cap),
        "--out",
        s(&dir.join(out)),
        "--layers",
        "1,4",
        "--map-method",
        "pca",
        "--no-abx",
        "--seed",
        seed,
        "--quiet",
    ]
    .map(String::from)
    .to_vec()
}

fn with(first: &str, rest: &[String]) -> Vec<String> {
    std::iter::once(first.to_string())
        .chain(rest.iter().cloned())
        .collect()
}

fn unit(plan: &Path, i: usize) -> common::Ran {
    run_text(["--quiet", "unit", s(plan), "--index", &i.to_string()])
}

#[test]
fn refusals_come_before_anything_is_written() {
    let d = tempfile::tempdir().unwrap();
    demo(d.path());
    let out = d.path().join("out");
    let caps = ["demo/early", "demo/final", "demo/early"].map(|c| d.path().join(c));
    // Three captures: report's refusal, word for word, and no folder.
    let args = |cmd: &str, out: &Path| {
        vec![cmd, s(&caps[0]), s(&caps[1]), s(&caps[2]), "--out", s(out)]
            .into_iter()
            .map(String::from)
            .collect::<Vec<_>>()
    };
    let b = run_text(args("batch", &out));
    let r = run_text(args("report", &d.path().join("rep")));
    assert_eq!(b.code, 2, "{b:?}");
    assert_eq!(b.stderr, r.stderr);
    assert!(
        b.stderr.contains("report takes one or two captures"),
        "{}",
        b.stderr
    );
    assert!(!out.exists());
    // A capture that is not there: the same.
    let missing = d.path().join("nothing");
    let b = run_text(["batch", s(&missing), "--out", s(&out)]);
    let r = run_text(["report", s(&missing), "--out", s(&d.path().join("rep"))]);
    assert_eq!((b.code, &b.stderr), (2, &r.stderr));
    assert!(!out.exists());
    // Slurm options sbatch would refuse.
    for bad in [["--time", "90"], ["--mem", "lots"], ["--cpus", "0"]] {
        let b = run_text(
            [
                &args("batch", &out)[..2],
                &["--out".into(), s(&out).into()],
                &bad.map(String::from),
            ]
            .concat(),
        );
        assert_eq!(b.code, 2, "{bad:?}: {b:?}");
        assert!(b.stderr.contains(bad[0]), "{}", b.stderr);
        assert!(!out.exists());
    }
}

#[test]
fn submit_without_sbatch_writes_the_scripts_and_says_how_to_submit() {
    let d = tempfile::tempdir().unwrap();
    demo(d.path());
    let empty = tempfile::tempdir().unwrap();
    let args = with("batch", &quick(d.path(), "out", "0"));
    let r: common::Ran = common::voxstrata()
        .args(&args)
        .arg("--submit")
        .env("PATH", empty.path())
        .output()
        .unwrap()
        .into();
    assert_eq!(r.code, 2, "{r:?}");
    assert!(r.stderr.contains("sbatch was not found"), "{}", r.stderr);
    assert!(
        r.stderr.contains("sbatch --dependency=afterok:"),
        "{}",
        r.stderr
    );
    let batch = d.path().join("out/batch");
    for f in ["plan.json", "units.sh", "assemble.sh"] {
        assert!(batch.join(f).is_file(), "{f}");
    }
    let script = std::fs::read_to_string(batch.join("units.sh")).unwrap();
    assert!(script.contains("#SBATCH --array=0-2\n"), "{script}");
    assert!(script.contains("unit '"), "{script}");
}

#[test]
fn assembly_names_missing_units_and_completes_after_they_run() {
    let d = tempfile::tempdir().unwrap();
    demo(d.path());
    let r = run_text(with("batch", &quick(d.path(), "split", "3")));
    assert_eq!(r.code, 0, "{r:?}");
    assert!(
        r.stdout.contains("sbatch --dependency=afterok:"),
        "{}",
        r.stdout
    );
    let split = d.path().join("split");
    let plan = split.join("batch/plan.json");
    assert_eq!(unit(&plan, 0).code, 0);
    let r = run_text(["assemble", s(&split)]);
    assert_eq!(r.code, 2, "{r:?}");
    assert!(
        r.stderr.contains("2 of 3 units have no part"),
        "{}",
        r.stderr
    );
    assert!(
        r.stderr
            .contains("unit 1 (probe of demo-final, layer 4): missing"),
        "{}",
        r.stderr
    );
    assert!(
        r.stderr.contains("unit 2 (map of demo-final): missing"),
        "{}",
        r.stderr
    );
    assert!(!split.join("index.html").exists());
    let r = unit(&plan, 3);
    assert_eq!(r.code, 2, "{r:?}");
    assert!(r.stderr.contains("--index"), "{}", r.stderr);
    for i in [1, 2, 1] {
        // Unit 1 twice: a rerun replaces its part.
        assert_eq!(unit(&plan, i).code, 0);
    }
    let r = run_text(["--quiet", "assemble", s(&split)]);
    assert_eq!(r.code, 0, "{r:?}");
    // The same records as one report with the same seed and settings.
    let r = run_text(with("report", &quick(d.path(), "one", "3")));
    assert_eq!(r.code, 0, "{r:?}");
    for f in [
        "probe.json",
        "probe.csv",
        "purity.json",
        "inspect.json",
        "maps/layer_04.npy",
    ] {
        let a = std::fs::read(d.path().join("one").join(f)).unwrap();
        let b = std::fs::read(split.join(f)).unwrap();
        assert!(a == b, "{f} differs");
    }
    assert!(split.join("index.html").is_file() && split.join("run.json").is_file());
}

#[test]
fn assembly_refuses_folders_that_do_not_fit() {
    let d = tempfile::tempdir().unwrap();
    demo(d.path());
    // Not a batch folder.
    let r = run_text(["assemble", s(&d.path().join("demo"))]);
    assert_eq!(r.code, 2, "{r:?}");
    assert!(
        r.stderr
            .contains("plan.json of a folder written by voxstrata batch"),
        "{}",
        r.stderr
    );
    // A part of a plan with another seed.
    for (out, seed) in [("a", "1"), ("b", "2")] {
        assert_eq!(run_text(with("batch", &quick(d.path(), out, seed))).code, 0);
    }
    let (a, b) = (d.path().join("a/batch"), d.path().join("b/batch"));
    assert_eq!(unit(&b.join("plan.json"), 0).code, 0);
    for i in [1, 2] {
        assert_eq!(unit(&a.join("plan.json"), i).code, 0);
    }
    std::fs::copy(
        b.join("parts/unit-0000.json"),
        a.join("parts/unit-0000.json"),
    )
    .unwrap();
    let r = run_text(["assemble", s(&d.path().join("a"))]);
    assert_eq!(r.code, 2, "{r:?}");
    assert!(
        r.stderr.contains("seed is 2, the plan's is 1"),
        "{}",
        r.stderr
    );
    // A plan of another version.
    let p = b.join("plan.json");
    let text = std::fs::read_to_string(&p).unwrap();
    let v = format!("\"version\": \"{}\"", env!("CARGO_PKG_VERSION"));
    assert!(text.contains(&v), "{text}");
    std::fs::write(&p, text.replace(&v, "\"version\": \"0.0.0-other\"")).unwrap();
    let r = run_text(["assemble", s(&d.path().join("b"))]);
    assert_eq!(r.code, 2, "{r:?}");
    assert!(
        r.stderr.contains("a plan of voxstrata 0.0.0-other"),
        "{}",
        r.stderr
    );
}
