//! What a report samples on wide layers: the automatic caps (training frames per probe fit and
//! map points scaled by 128/width above 128 wide), their statement on the page, in `run.json`
//! and on stderr, the options that set them, and a run split into units (whose units open only
//! their own capture) using the sample chosen with both captures open.

mod common;

use std::path::Path;

use common::{read_json, run_text, s, write_capture, Frames};
use ndarray::Array2;

const FRAMES: usize = 3200;

/// The label table: 16 utterances of 200 frames, 8 speakers, 20 phones in runs of 5 frames
/// (160 speaker × phone cells of 20 frames each).
fn frames() -> Frames {
    let mut f = Frames::new(&["utterance", "speaker", "phone"]);
    for i in 0..FRAMES {
        let u = i / 200;
        f.push([
            format!("u{u:02}"),
            format!("s{}", u % 8),
            format!("p{}", (i / 5) % 20),
        ]);
    }
    f
}

/// A layer `dim` wide: a phone direction and a speaker direction per class plus noise, from a
/// fixed linear congruential generator (no randomness between runs).
fn layer(dim: usize, seed: u64) -> Array2<f32> {
    let mut state = seed
        .wrapping_mul(6364136223846793005)
        .wrapping_add(1442695040888963407);
    let mut next = move || {
        state = state
            .wrapping_mul(6364136223846793005)
            .wrapping_add(1442695040888963407);
        ((state >> 33) as f64 / (1u64 << 31) as f64 - 0.5) as f32
    };
    Array2::from_shape_fn((FRAMES, dim), |(i, j)| {
        let phone = (i / 5) % 20;
        let speaker = (i / 200) % 8;
        let signal =
            if j % 10 == phone { 1.5 } else { 0.0 } + if j % 8 == speaker { 0.7 } else { 0.0 };
        signal + next()
    })
}

/// Two captures of the same frames: `narrow` 64 wide, `wide` 2048 wide (one layer each).
fn captures(dir: &Path) {
    let f = frames();
    write_capture(&dir.join("narrow"), &f, &[layer(64, 1)]);
    write_capture(&dir.join("wide"), &f, &[layer(2048, 2)]);
}

fn quick(caps: &[&Path], out: &Path, extra: &[&str]) -> Vec<String> {
    let mut a: Vec<String> = caps.iter().map(|c| s(c).to_string()).collect();
    for x in [
        "--out",
        s(out),
        "--map-method",
        "pca",
        "--no-abx",
        "--seed",
        "5",
    ] {
        a.push(x.into());
    }
    a.extend(extra.iter().map(|x| x.to_string()));
    a
}

fn with(first: &str, rest: &[String]) -> Vec<String> {
    std::iter::once(first.to_string())
        .chain(rest.iter().cloned())
        .collect()
}

#[test]
fn a_wide_capture_is_sampled_and_the_page_says_so() {
    let d = tempfile::tempdir().unwrap();
    captures(d.path());
    let wide = d.path().join("wide");
    let out = d.path().join("rep");
    let r = run_text(with("report", &quick(&[&wide], &out, &[])));
    assert_eq!(r.code, 0, "{r:?}");
    // 20 000 × 128 / 2048 = 1 250, raised to the floor of 2 000; 10 000 × 128 / 2048 = 625,
    // raised to the floor of 1 000
    assert!(
        r.stderr
            .contains("Sampled for time: the layers are 2048 wide"),
        "{}",
        r.stderr
    );
    let run = read_json(&out.join("run.json"));
    let sample = &run["options"]["sample"];
    assert_eq!(sample["width"], 2048, "{run}");
    assert_eq!(sample["probe_frames"], 2000);
    assert_eq!(sample["map_points"], 1000);
    assert_eq!(sample["scaled"], true);
    assert_eq!(run["options"]["probe_frames"], "auto");
    // the caps bind: 12 of 16 utterances train (2 400 frames); the map's 160 cells of 20
    // frames each give 6 per cell under a cap of 1 000 (960 points instead of 10 per cell,
    // 1 600)
    let probe = read_json(&out.join("probe.json"));
    let phone = probe["records"]
        .as_array()
        .unwrap()
        .iter()
        .find(|r| r["task"] == "phone")
        .unwrap();
    let n_train = phone["n_train"].as_u64().unwrap();
    assert!((1990..=2010).contains(&n_train), "n_train {n_train}");
    let purity = read_json(&out.join("purity.json"));
    let n_map = purity["records"][0]["n_frames"].as_u64().unwrap();
    assert_eq!(n_map, 960, "map points");
    let page = std::fs::read_to_string(out.join("index.html")).unwrap();
    assert!(
        page.contains("<p id=\"sample\" class=\"caution\">Sampled for time: the layers are 2048 wide, so each probe trained on at most 2\u{202f}000 frames per fit"),
        "no sampling statement on the page"
    );
    assert!(page.contains("--probe-frames 20000 --map-points 10000"));
}

#[test]
fn set_caps_win_and_bad_ones_are_refused_before_any_work() {
    let d = tempfile::tempdir().unwrap();
    captures(d.path());
    let wide = d.path().join("wide");
    let out = d.path().join("full");
    let r = run_text(with(
        "report",
        &quick(
            &[&wide],
            &out,
            &[
                "--probe-frames",
                "20000",
                "--map-points",
                "10000",
                "--quiet",
            ],
        ),
    ));
    assert_eq!(r.code, 0, "{r:?}");
    let run = read_json(&out.join("run.json"));
    assert_eq!(run["options"]["sample"]["scaled"], false);
    assert_eq!(run["options"]["sample"]["probe_frames"], 20000);
    let probe = read_json(&out.join("probe.json"));
    let n_train = probe["records"][0]["n_train"].as_u64().unwrap();
    assert!(
        n_train > 2100,
        "full caps: every training frame ({n_train})"
    );
    let page = std::fs::read_to_string(out.join("index.html")).unwrap();
    assert!(page.contains("<p id=\"sample\" class=\"plain\">Sample: each probe trained on at most 20\u{202f}000 frames per fit"));

    for (opt, val, says) in [
        (
            "--map-points",
            "2",
            "--map-points: expected `auto` or at least 3 points, found 2",
        ),
        (
            "--probe-frames",
            "many",
            "expected `auto` or a whole number, found `many`",
        ),
    ] {
        let bad = d.path().join(format!("bad{opt}"));
        let r = run_text(with("report", &quick(&[&wide], &bad, &[opt, val])));
        assert_eq!(r.code, 2, "{r:?}");
        assert!(r.stderr.contains(says), "{}", r.stderr);
        assert!(!bad.join("run.json").exists());
    }
}

#[test]
fn a_split_run_uses_the_sample_chosen_with_both_captures_open() {
    let d = tempfile::tempdir().unwrap();
    captures(d.path());
    let (narrow, wide) = (d.path().join("narrow"), d.path().join("wide"));
    let one = d.path().join("one");
    let r = run_text(with(
        "report",
        &quick(&[&narrow, &wide], &one, &["--quiet"]),
    ));
    assert_eq!(r.code, 0, "{r:?}");
    // the narrow capture's probes are capped by the wide one's width
    let probe = read_json(&one.join("narrow/probe.json"));
    let n_train = probe["records"][0]["n_train"].as_u64().unwrap();
    assert!((1990..=2010).contains(&n_train), "n_train {n_train}");

    let split = d.path().join("split");
    let r = run_text(with(
        "batch",
        &quick(&[&narrow, &wide], &split, &["--quiet"]),
    ));
    assert_eq!(r.code, 0, "{r:?}");
    let plan_path = split.join("batch/plan.json");
    let plan = read_json(&plan_path);
    assert_eq!(plan["sample"]["width"], 2048, "{plan}");
    let units = plan["units"].as_array().unwrap().len();
    for i in 0..units {
        let r = run_text(["--quiet", "unit", s(&plan_path), "--index", &i.to_string()]);
        assert_eq!(r.code, 0, "unit {i}: {r:?}");
    }
    let r = run_text(["--quiet", "assemble", s(&split)]);
    assert_eq!(r.code, 0, "{r:?}");
    for f in [
        "narrow/probe.json",
        "wide/probe.json",
        "narrow/purity.json",
        "compare.json",
    ] {
        let a = std::fs::read(one.join(f)).unwrap();
        let b = std::fs::read(split.join(f)).unwrap();
        assert!(a == b, "{f} differs between report and the split run");
    }
}
