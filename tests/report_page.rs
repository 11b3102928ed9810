//! The report end to end: the `report` command on small synthetic captures (outputs, refusals,
//! escaping of hostile labels) and the page in a real headless Chromium driven over the
//! DevTools protocol (no console errors, no request outside the file, the explorer draws,
//! the slider and arrow keys change the layer, hover shows the right frame's labels).

mod common;

use std::path::{Path, PathBuf};
use std::sync::{Arc, Mutex};

use common::{read_json, run, run_env, s, Frames};
use ndarray::Array2;
use rand::{Rng, SeedableRng};

/// A phone label that tries to break out of the page's script and markup.
const HOSTILE: &str = "</script><script>window.__pwned=1</script>";
const PHONES: [&str; 4] = ["a", "i", "s", HOSTILE];
const SPEAKERS: usize = 4;
const UTTS_PER_SPEAKER: usize = 3;
const FRAMES_PER_UTT: usize = 20;
const LAYERS: usize = 3;
const DIM: usize = 6;

fn utt_name(s: usize, u: usize) -> String {
    format!("spk{s}_utt{u}")
}

fn phone_of(pos: usize) -> usize {
    (pos / 5) % PHONES.len()
}

/// Write a capture: frames.tsv and one .npy per layer where phone separates more with depth
/// and speaker less (a cartoon of the usual picture).
fn write_capture(dir: &Path, seed: u64) {
    let mut frames = Frames::new(&["utterance", "speaker", "phone"]);
    let mut rows = Vec::new();
    for s in 0..SPEAKERS {
        for u in 0..UTTS_PER_SPEAKER {
            for pos in 0..FRAMES_PER_UTT {
                let p = phone_of(pos);
                frames.push([
                    utt_name(s, u),
                    format!("speaker {s} & co"),
                    PHONES[p].into(),
                ]);
                rows.push((s, p));
            }
        }
    }
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(seed);
    let mut layers = Vec::new();
    for l in 0..LAYERS {
        let w = l as f32 / (LAYERS - 1) as f32;
        let mut x = Array2::<f32>::zeros((rows.len(), DIM));
        for (i, &(s, p)) in rows.iter().enumerate() {
            for d in 0..DIM {
                let noise: f32 = rng.random_range(-1.0..1.0);
                let phone = if d == p { 3.0 * w } else { 0.0 };
                let spk = if d == s + 2 { 3.0 * (1.0 - w) } else { 0.0 };
                x[[i, d]] = phone + spk + noise;
            }
        }
        layers.push(x);
    }
    common::write_capture(dir, &frames, &layers);
}

#[test]
fn report_writes_page_run_json_and_probe_outputs() {
    let t = tempfile::tempdir().unwrap();
    let cap = t.path().join("cap");
    write_capture(&cap, 1);
    let out = t.path().join("out");
    let o = run([
        "report",
        "--quiet",
        "--seed",
        "3",
        s(&cap),
        "--out",
        s(&out),
    ]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    for f in [
        "index.html",
        "run.json",
        "inspect.json",
        "probe.json",
        "probe.csv",
        "probe.svg",
        "purity.json",
        "purity.csv",
        "purity.svg",
        "map_speaker.svg",
        "map_phone.svg",
        "maps/frames.npy",
        "maps/layer_00.npy",
        "maps/layer_02.npy",
    ] {
        assert!(out.join(f).is_file(), "{f} missing");
    }
    let page = std::fs::read_to_string(out.join("index.html")).unwrap();
    // Self-contained: no external references of any kind.
    for bad in [
        "http://",
        "https://",
        "<link",
        " src=\"http",
        "@import",
        "url(",
    ] {
        if bad == "http://" {
            // The SVG namespace URI is an identifier, not a request.
            assert!(
                page.replace("xmlns=\"http://www.w3.org/2000/svg\"", "")
                    .find(bad)
                    .is_none(),
                "page holds {bad}"
            );
        } else {
            assert!(!page.contains(bad), "page holds {bad}");
        }
    }
    // The hostile label never appears raw, only escaped.
    assert!(!page.contains(HOSTILE));
    assert!(
        page.contains("phone overtakes speaker") || page.contains("speaker below half"),
        "no crossover marked"
    );
    // run.json: inputs hashed, steps timed.
    let run = read_json(&out.join("run.json"));
    let inputs = run["inputs"].as_array().unwrap();
    assert_eq!(inputs.len(), LAYERS + 1, "layer files and frames.tsv");
    for i in inputs {
        assert_eq!(i["sha256"].as_str().unwrap().len(), 64);
    }
    let steps: Vec<&str> = run["timings"]
        .as_array()
        .unwrap()
        .iter()
        .map(|s| s["step"].as_str().unwrap())
        .collect();
    assert!(
        steps.iter().any(|s| s.starts_with("probe")) && steps.contains(&"total"),
        "{steps:?}"
    );
}

#[test]
fn report_on_two_captures_compares_them() {
    let t = tempfile::tempdir().unwrap();
    let (a, b) = (t.path().join("early"), t.path().join("final"));
    write_capture(&a, 1);
    write_capture(&b, 2);
    let out = t.path().join("out");
    // progress on (stderr is a pipe: plain lines), printed for every step however short
    let o = run_env(
        [
            "report",
            "--map-method",
            "pca",
            s(&a),
            s(&b),
            "--out",
            s(&out),
        ],
        &[("VOXSTRATA_PROGRESS_AFTER_S", "0")],
    );
    let err = String::from_utf8_lossy(&o.stderr);
    assert!(o.status.success(), "{err}");
    // with two captures every line of a unit's progress names its capture
    for (prefix, step) in [
        ("early", "probing layers"),
        ("final", "probing layers"),
        ("early", "map"),
        ("final", "map"),
        ("early against final", ""),
    ] {
        let want = format!("voxstrata: {prefix}: {step}");
        assert!(
            err.lines().any(|l| l.starts_with(&want)),
            "no '{want}' in {err}"
        );
    }
    assert!(
        !err.lines()
            .any(|l| l.starts_with("voxstrata: probing layers")),
        "a probe line without its capture: {err}"
    );
    for f in [
        "compare.json",
        "compare_cka.svg",
        "compare_probe.svg",
        "early/purity.json",
        "final/maps/frames.npy",
    ] {
        assert!(out.join(f).is_file(), "{f} missing");
    }
    let page = std::fs::read_to_string(out.join("index.html")).unwrap();
    let cmp = read_json(&out.join("compare.json"));
    let deltas = cmp["probe_delta"].as_array().unwrap();
    assert!(!deltas.is_empty());
    // Every probe delta row reaches the page's table (its McNemar method is in the JSON only).
    assert!(page.contains("McNemar p"));
    // one CKA heatmap on the page: the figure compare_cka draws, embedded once (drawn once)
    assert_eq!(
        page.matches("alt=\"CKA between every layer pair\"").count(),
        1
    );
    assert_eq!(
        cmp["records"].as_array().unwrap().len(),
        LAYERS * LAYERS,
        "CKA for every layer pair"
    );
    let run = read_json(&out.join("run.json"));
    let outputs: Vec<&str> = run["outputs"]
        .as_array()
        .unwrap()
        .iter()
        .map(|v| v.as_str().unwrap())
        .collect();
    for f in ["compare.json", "early/purity.json", "final/map_phone.svg"] {
        assert!(outputs.contains(&f), "run.json outputs lack {f}");
    }
    let steps = run["timings"].to_string();
    for s in ["\"map early\"", "\"map final\"", "\"compare\""] {
        assert!(steps.contains(s), "no timing for {s}: {steps}");
    }
}

#[test]
fn report_refuses_a_folder_with_files_unless_forced() {
    let t = tempfile::tempdir().unwrap();
    let cap = t.path().join("cap");
    write_capture(&cap, 2);
    let out = t.path().join("out");
    std::fs::create_dir_all(&out).unwrap();
    std::fs::write(out.join("keep.txt"), "x").unwrap();
    let o = run(["report", "--quiet", s(&cap), "--out", s(&out)]);
    assert_eq!(
        o.status.code(),
        Some(2),
        "{}",
        String::from_utf8_lossy(&o.stderr)
    );
    assert!(!out.join("index.html").exists());
    let o = run(["report", "--quiet", "--force", s(&cap), "--out", s(&out)]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    assert!(out.join("index.html").is_file() && out.join("keep.txt").is_file());
}

#[test]
fn report_stops_on_a_bad_capture_before_any_analysis() {
    let t = tempfile::tempdir().unwrap();
    let good = t.path().join("good");
    write_capture(&good, 3);
    let bad = t.path().join("bad");
    write_capture(&bad, 4);
    // One frame row too many: layers and labels disagree.
    let mut tsv = std::fs::read_to_string(bad.join("frames.tsv")).unwrap();
    tsv.push_str("spk0_utt0\tspeaker 0 & co\ta\n");
    std::fs::write(bad.join("frames.tsv"), tsv).unwrap();
    let out = t.path().join("out");
    let o = run(["report", "--quiet", s(&good), s(&bad), "--out", s(&out)]);
    assert_eq!(
        o.status.code(),
        Some(2),
        "{}",
        String::from_utf8_lossy(&o.stderr)
    );
    assert!(String::from_utf8_lossy(&o.stderr).contains("frames.tsv"));
    assert!(
        !out.exists(),
        "nothing may be written before the captures validate"
    );
    // Three captures: refused too.
    let g = s(&good);
    let o = run(["report", "--quiet", g, g, g, "--out", s(&out)]);
    assert_eq!(o.status.code(), Some(2));
}

/// Whether this is a CI run (`CI` set and not `false`/`0`, as CI services set it).
fn under_ci() -> bool {
    std::env::var("CI").is_ok_and(|v| !v.is_empty() && v != "false" && v != "0")
}

/// Chromium for the browser tests: the path in VOXSTRATA_CHROMIUM (which must exist), else
/// Debian's `chromium` (or `chromium-browser`, `google-chrome`) in /usr/bin or on PATH.
/// None only when no browser can be found; then the test says why on stderr and skips.
/// Under CI (`CI=true`) .ci/run installs Chromium, so a missing browser fails instead.
fn chromium(test: &str) -> Option<PathBuf> {
    if let Some(p) = std::env::var_os("VOXSTRATA_CHROMIUM") {
        let p = PathBuf::from(p);
        assert!(
            p.is_file(),
            "{test}: VOXSTRATA_CHROMIUM={} is not a file",
            p.display()
        );
        return Some(p);
    }
    let names = ["chromium", "chromium-browser", "google-chrome"];
    let mut dirs = vec![PathBuf::from("/usr/bin")];
    if let Some(path) = std::env::var_os("PATH") {
        dirs.extend(std::env::split_paths(&path));
    }
    let found = dirs
        .iter()
        .flat_map(|d| names.iter().map(move |n| d.join(n)))
        .find(|p| p.is_file());
    if found.is_none() {
        let why = format!(
            "no Chromium: none of {names:?} in /usr/bin or on PATH, and VOXSTRATA_CHROMIUM is \
             unset (install Debian's `chromium`)"
        );
        assert!(
            !under_ci(),
            "{test}: {why}; under CI (CI is set) the browser tests must run: .ci/run installs it"
        );
        eprintln!("{test}: SKIPPED: {why}");
    }
    found
}

/// The page the real `report` command writes for a synthetic capture (probe, t-SNE maps,
/// purity), with the sampled frame indices of its maps.
fn build_page(dir: &Path) -> (PathBuf, Vec<u64>) {
    use ndarray_npy::ReadNpyExt;
    let cap_dir = dir.join("cap");
    write_capture(&cap_dir, 5);
    let out = dir.join("out");
    let o = run([
        "report",
        "--quiet",
        "--seed",
        "2",
        s(&cap_dir),
        "--out",
        s(&out),
    ]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let f = std::fs::File::open(out.join("maps").join("frames.npy")).unwrap();
    let frames = ndarray::Array1::<u64>::read_npy(f).unwrap().to_vec();
    (out.join("index.html"), frames)
}

#[test]
fn page_works_in_headless_chromium() {
    use headless_chrome::protocol::cdp::types::Event;
    use headless_chrome::protocol::cdp::Page::CaptureScreenshotFormatOption;
    use headless_chrome::{browser::tab::point::Point, Browser, LaunchOptions};

    let Some(chrome) = chromium("page_works_in_headless_chromium") else {
        return;
    };
    let t = tempfile::tempdir().unwrap();
    let (page, frames) = build_page(t.path());
    assert!(frames.len() > 100, "map sample: {} frames", frames.len());
    let profile = t.path().join("profile");
    let args: Vec<&std::ffi::OsStr> = [
        "--disable-background-networking",
        "--disable-component-update",
        "--disable-sync",
        "--no-first-run",
        "--hide-scrollbars",
    ]
    .iter()
    .map(std::ffi::OsStr::new)
    .collect();
    let opts = LaunchOptions::default_builder()
        .path(Some(chrome))
        .headless(true)
        .sandbox(false)
        .enable_gpu(false)
        .window_size(Some((1200, 1000)))
        .user_data_dir(Some(profile))
        .args(args)
        .build()
        .unwrap();
    let browser = Browser::new(opts).unwrap();
    let tab = browser.new_tab().unwrap();
    let errors = Arc::new(Mutex::new(Vec::<String>::new()));
    let requests = Arc::new(Mutex::new(Vec::<String>::new()));
    {
        let (errors, requests) = (errors.clone(), requests.clone());
        tab.add_event_listener(Arc::new(move |e: &Event| match e {
            Event::RuntimeExceptionThrown(x) => errors
                .lock()
                .unwrap()
                .push(format!("exception: {:?}", x.params.exception_details.text)),
            Event::RuntimeConsoleAPICalled(x) => {
                let kind = format!("{:?}", x.params.Type);
                if kind.contains("Error") || kind.contains("Warning") || kind.contains("Assert") {
                    errors.lock().unwrap().push(format!(
                        "console {kind}: {:?}",
                        x.params
                            .args
                            .iter()
                            .map(|a| a.value.clone())
                            .collect::<Vec<_>>()
                    ));
                }
            }
            Event::LogEntryAdded(x) => {
                let level = format!("{:?}", x.params.entry.level);
                // Chromium's advice about repeated getImageData comes from this test's own
                // pixel reads, not from the page.
                if (level.contains("Error") || level.contains("Warning"))
                    && !x.params.entry.text.contains("willReadFrequently")
                {
                    errors
                        .lock()
                        .unwrap()
                        .push(format!("log {level}: {}", x.params.entry.text));
                }
            }
            Event::NetworkRequestWillBeSent(x) => {
                requests.lock().unwrap().push(x.params.request.url.clone())
            }
            _ => {}
        }))
        .unwrap();
    }
    tab.enable_runtime().unwrap();
    tab.enable_log().unwrap();
    tab.call_method(headless_chrome::protocol::cdp::Network::Enable {
        max_total_buffer_size: None,
        max_resource_buffer_size: None,
        max_post_data_size: None,
        report_direct_socket_traffic: None,
        enable_durable_messages: None,
    })
    .unwrap();
    let url = format!("file://{}", page.display());
    tab.navigate_to(&url)
        .unwrap()
        .wait_until_navigated()
        .unwrap();
    tab.wait_for_element("#vx-canvas").unwrap();
    // Values come back as JSON text, so objects and arrays arrive whole.
    let eval = |js: &str| -> serde_json::Value {
        let v = tab
            .evaluate(&format!("JSON.stringify({js})"), false)
            .unwrap()
            .value;
        match v {
            Some(serde_json::Value::String(s)) => serde_json::from_str(&s).unwrap(),
            _ => serde_json::Value::Null,
        }
    };

    // The hostile label stayed text: no script of its own ran, and the legend shows it.
    assert_eq!(eval("typeof window.__pwned"), "undefined");
    let legend = eval("document.getElementById('vx-legend').textContent");
    assert!(
        legend.as_str().unwrap().contains(HOSTILE),
        "legend: {legend}"
    );

    // The explorer drew points: many non-white pixels, in more than one colour.
    let pixels = "(() => { const c = document.getElementById('vx-canvas'); const d = c.getContext('2d').getImageData(0, 0, c.width, c.height).data; let n = 0, h = 0; const cols = new Set(); for (let i = 0; i < d.length; i += 4) { if (d[i] < 235 || d[i+1] < 235 || d[i+2] < 235) { n++; h = (h * 31 + i) % 1000000007; if (d[i] + d[i+1] + d[i+2] > 150) cols.add((d[i] >> 4) + ',' + (d[i+1] >> 4) + ',' + (d[i+2] >> 4)); } } return [n, h, cols.size]; })()";
    let first = eval(pixels);
    assert!(
        first[0].as_u64().unwrap() > 2000,
        "canvas nearly blank: {first}"
    );
    assert!(
        first[2].as_u64().unwrap() >= PHONES.len() as u64,
        "too few colours: {first}"
    );
    assert_eq!(
        eval("document.getElementById('explorer').dataset.layer"),
        "0"
    );

    // Hover over the point of sample i: the tooltip names the frame under the pointer (the
    // point drawn there; t-SNE may stack a few) with its utterance, time, speaker and phone.
    let check_hover = |i: usize| {
        eval("document.getElementById('vx-canvas').scrollIntoView({block: 'center'})");
        let p = eval(&format!("window.voxstrataExplorer.pointClient({i})"));
        let (x, y) = (
            p["x"].as_f64().unwrap() + 1.0,
            p["y"].as_f64().unwrap() - 1.0,
        );
        tab.move_mouse_to_point(Point { x, y }).unwrap();
        let tip = eval("(() => { const t = document.getElementById('vx-tip'); return [t.hidden, t.textContent, t.dataset.frame]; })()");
        assert_eq!(tip[0], false, "tooltip hidden at sample {i}");
        let text = tip[1].as_str().unwrap().to_string();
        let frame: usize = tip[2].as_str().unwrap().parse().unwrap();
        // The named frame is one of the sample, drawn within a few pixels of the pointer.
        let j = frames
            .iter()
            .position(|&f| f as usize == frame)
            .expect("tooltip frame is in the map sample");
        let q = eval(&format!("window.voxstrataExplorer.pointClient({j})"));
        let d = (q["x"].as_f64().unwrap() - x).hypot(q["y"].as_f64().unwrap() - y);
        assert!(
            d < 8.0,
            "tooltip frame {frame} drawn {d:.1} px from the pointer"
        );
        let (s, rest) = (
            frame / (UTTS_PER_SPEAKER * FRAMES_PER_UTT),
            frame % (UTTS_PER_SPEAKER * FRAMES_PER_UTT),
        );
        let (u, pos) = (rest / FRAMES_PER_UTT, rest % FRAMES_PER_UTT);
        // Default hop 0.02 s, window = hop: centre (pos + 0.5) × 0.02 s (capture format).
        let time = format!("{:.3} s", (pos as f64 + 0.5) * 0.02);
        for want in [
            utt_name(s, u),
            time,
            format!("speaker {s} & co"),
            PHONES[phone_of(pos)].to_string(),
        ] {
            assert!(text.contains(&want), "tooltip {text:?} lacks {want:?}");
        }
    };
    check_hover(37);

    // The slider moves to another layer and the drawing changes.
    eval("(() => { const s = document.getElementById('vx-layer'); s.value = '2'; s.dispatchEvent(new Event('input')); })()");
    assert_eq!(
        eval("document.getElementById('explorer').dataset.layer"),
        "2"
    );
    let third = eval(pixels);
    assert_ne!(
        first[1], third[1],
        "layer 2 drew the same picture as layer 0"
    );
    check_hover(frames.len() - 7);

    // Arrow keys step between layers.
    eval("document.activeElement && document.activeElement.blur()");
    tab.press_key("ArrowLeft").unwrap();
    assert_eq!(
        eval("document.getElementById('explorer').dataset.layer"),
        "1"
    );

    // Clicking a legend entry highlights it.
    eval("document.querySelector('#vx-legend button').click()");
    assert_eq!(
        eval("document.querySelector('#vx-legend button').className"),
        "on"
    );

    let shot = tab
        .capture_screenshot(CaptureScreenshotFormatOption::Png, None, None, true)
        .unwrap();
    let art = Path::new(env!("CARGO_TARGET_TMPDIR")).join("report_page");
    std::fs::create_dir_all(&art).unwrap();
    std::fs::write(art.join("explorer.png"), shot).unwrap();
    std::fs::copy(&page, art.join("index.html")).unwrap();
    eprintln!("screenshot: {}", art.join("explorer.png").display());

    let errors = errors.lock().unwrap().clone();
    assert!(errors.is_empty(), "console errors: {errors:?}");
    let requests = requests.lock().unwrap().clone();
    assert!(
        !requests.is_empty(),
        "the network log saw nothing, so it proves nothing"
    );
    for r in &requests {
        assert!(
            r.starts_with("file://") || r.starts_with("data:"),
            "request outside the file: {r}"
        );
    }
}

/// Time to first render of a given report page (`VOXSTRATA_PAGE`, e.g. the demo report):
/// the page's load event ends after its inline explorer script has drawn the first layer.
/// A measurement, not a check: `cargo test --test report_page -- --ignored --nocapture`.
#[test]
#[ignore]
fn time_first_render_of_a_page() {
    use headless_chrome::{Browser, LaunchOptions};
    let Ok(page) = std::env::var("VOXSTRATA_PAGE") else {
        eprintln!("time_first_render_of_a_page: SKIPPED: VOXSTRATA_PAGE is not set");
        return;
    };
    let Some(chrome) = chromium("time_first_render_of_a_page") else {
        return;
    };
    let t = tempfile::tempdir().unwrap();
    let opts = LaunchOptions::default_builder()
        .path(Some(chrome))
        .headless(true)
        .sandbox(false)
        .enable_gpu(false)
        .window_size(Some((1400, 1000)))
        .user_data_dir(Some(t.path().join("profile")))
        .build()
        .unwrap();
    let browser = Browser::new(opts).unwrap();
    let tab = browser.new_tab().unwrap();
    let page = std::fs::canonicalize(page).unwrap();
    let started = std::time::Instant::now();
    tab.navigate_to(&format!("file://{}", page.display()))
        .unwrap()
        .wait_until_navigated()
        .unwrap();
    tab.wait_for_element("#vx-canvas").unwrap();
    let wall = started.elapsed().as_secs_f64();
    let v = tab
        .evaluate(
            "JSON.stringify((() => { const n = performance.getEntriesByType('navigation')[0]; return [n.domContentLoadedEventEnd, n.loadEventEnd]; })())",
            false,
        )
        .unwrap()
        .value;
    eprintln!(
        "first render of {}: [DOMContentLoaded end, load end] in ms = {v:?}; wall {wall:.2} s (with DevTools round trips)",
        page.display()
    );
}
