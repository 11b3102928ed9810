//! The report page's map explorer on the shipped demo, whose frame tables have two continuous
//! columns (`f0_hz`, empty on unvoiced and silent frames, and `energy_db`):
//! 1. the embedded data carries each sampled frame's value as `frames.tsv` has it (null where
//!    the frame has none), the colour range (1st to 99th percentile of the sample, as the PNG
//!    maps use) and the PNG maps' value ramp;
//! 2. in a headless Chromium, the colour-by list offers both columns, the legend shows a
//!    colour bar with the range's ends, each point takes the ramp colour of its value (grey
//!    without one), the canvas shows the ramp, and hovering a point shows its value.

mod common;

use std::path::{Path, PathBuf};

use common::{demo_dir, find_chromium, run_text, s};
use voxstrata::render::palette::{value_ramp, OTHER};

const COLUMNS: [&str; 2] = ["f0_hz", "energy_db"];

/// `report` on the shipped demo's `final` capture (PCA maps, no ABX, to keep it quick).
fn demo_page(dir: &Path) -> PathBuf {
    let out = dir.join("report");
    let r = run_text([
        "report",
        s(&demo_dir().join("final")),
        "--out",
        s(&out),
        "--map-method",
        "pca",
        "--no-abx",
        "--seed",
        "3",
        "--quiet",
    ]);
    assert_eq!(r.code, 0, "{r:?}");
    out.join("index.html")
}

/// The JSON of the page's `vx-data` block.
fn page_data(page: &Path) -> serde_json::Value {
    let html = std::fs::read_to_string(page).unwrap();
    let head = "<script type=\"application/json\" id=\"vx-data\">";
    let start = html.find(head).expect("the explorer's data block") + head.len();
    let end = start + html[start..].find("</script>").unwrap();
    serde_json::from_str(&html[start..end]).unwrap()
}

/// Column `name` of the demo's `frames.tsv`, read here as plain text: one entry per frame,
/// None where the cell is empty.
fn tsv_column(name: &str) -> Vec<Option<f64>> {
    let text = std::fs::read_to_string(demo_dir().join("final/frames.tsv")).unwrap();
    let mut lines = text.lines();
    let k = lines
        .next()
        .unwrap()
        .split('\t')
        .position(|h| h == name)
        .unwrap_or_else(|| panic!("frames.tsv has no column {name}"));
    lines
        .map(|l| {
            let cell = l.split('\t').nth(k).unwrap_or("");
            (!cell.is_empty()).then(|| cell.parse().unwrap())
        })
        .collect()
}

/// The `p`-th percentile of sorted values with linear interpolation between order statistics
/// (numpy.percentile's default method, "linear"; numpy documentation).
fn percentile(sorted: &[f64], p: f64) -> f64 {
    let pos = p / 100.0 * (sorted.len() - 1) as f64;
    let (i, f) = (pos.floor() as usize, pos - pos.floor());
    if i + 1 < sorted.len() {
        sorted[i] + f * (sorted[i + 1] - sorted[i])
    } else {
        sorted[i]
    }
}

fn hex(c: plotters::style::RGBColor) -> String {
    format!("#{:02x}{:02x}{:02x}", c.0, c.1, c.2)
}

/// The colour the explorer should give value `v` of a column with range `lo..hi`: the value
/// ramp at the nearest of its `steps` stops (ends clamped); grey without a value.
fn expected_colour(v: Option<f64>, lo: f64, hi: f64, steps: usize) -> String {
    match v {
        None => hex(OTHER),
        Some(v) => {
            let t = ((v - lo) / (hi - lo)).clamp(0.0, 1.0);
            let k = (t * (steps - 1) as f64).round();
            hex(value_ramp(k / (steps - 1) as f64))
        }
    }
}

#[test]
fn explorer_offers_continuous_columns_with_values_range_and_ramp() {
    let t = tempfile::tempdir().unwrap();
    let page = demo_page(t.path());
    let data = page_data(&page);
    let set = &data["sets"][0];
    let frames: Vec<usize> = set["frames"]
        .as_array()
        .unwrap()
        .iter()
        .map(|f| f.as_u64().unwrap() as usize)
        .collect();
    assert!(frames.len() > 500, "{} sampled frames", frames.len());
    let columns = set["columns"].as_array().unwrap();
    for c in columns
        .iter()
        .filter(|c| c["name"] == "phone" || c["name"] == "speaker")
    {
        assert_eq!(c["kind"], "categorical", "{}", c["name"]);
    }
    for name in COLUMNS {
        let col = columns
            .iter()
            .find(|c| c["name"] == name)
            .unwrap_or_else(|| panic!("no column {name} in the explorer's data"));
        assert_eq!(col["kind"], "continuous");
        let tsv = tsv_column(name);
        let got = col["values"].as_array().unwrap();
        assert_eq!(got.len(), frames.len());
        let mut sample = Vec::new();
        for (i, &f) in frames.iter().enumerate() {
            match (tsv[f], got[i].as_f64()) {
                (None, None) => {}
                (Some(v), Some(g)) => {
                    // Kept to 6 significant digits.
                    assert!(
                        (v - g).abs() <= 1e-5 * v.abs(),
                        "{name} at frame {f}: {g}, frames.tsv {v}"
                    );
                    sample.push(v);
                }
                (v, g) => panic!("{name} at frame {f}: page {g:?}, frames.tsv {v:?}"),
            }
        }
        if name == "f0_hz" {
            assert!(
                sample.len() < frames.len(),
                "f0_hz: some frames are unvoiced"
            );
        }
        assert!(
            sample.len() > frames.len() / 4,
            "{name}: {} values",
            sample.len()
        );
        sample.sort_by(f64::total_cmp);
        let (lo, hi) = (col["lo"].as_f64().unwrap(), col["hi"].as_f64().unwrap());
        // The range the PNG maps use: 1st and 99th percentiles (f32 values, hence 1e-4).
        let (p1, p99) = (percentile(&sample, 1.0), percentile(&sample, 99.0));
        assert!(
            (lo - p1).abs() <= 1e-4 * p1.abs().max(1.0),
            "{name}: lo {lo}, 1st percentile {p1}"
        );
        assert!(
            (hi - p99).abs() <= 1e-4 * p99.abs().max(1.0),
            "{name}: hi {hi}, 99th percentile {p99}"
        );
        let ramp: Vec<&str> = col["ramp"]
            .as_array()
            .unwrap()
            .iter()
            .map(|c| c.as_str().unwrap())
            .collect();
        assert!(ramp.len() >= 32);
        assert_eq!(ramp[0], hex(value_ramp(0.0)));
        assert_eq!(ramp[ramp.len() - 1], hex(value_ramp(1.0)));
        assert_eq!(
            ramp[ramp.len() / 2],
            hex(value_ramp(
                (ramp.len() / 2) as f64 / (ramp.len() - 1) as f64
            ))
        );
    }
    in_chromium(&page, set, t.path());
}

/// The explorer in a headless Chromium: colour-by list, colour bar, point colours, hover.
fn in_chromium(page: &Path, set: &serde_json::Value, tmp: &Path) {
    use headless_chrome::protocol::cdp::Page::CaptureScreenshotFormatOption;
    use headless_chrome::{browser::tab::point::Point, Browser, LaunchOptions};
    let Some(chrome) =
        find_chromium("explorer_offers_continuous_columns_with_values_range_and_ramp")
    else {
        return;
    };
    let args: Vec<&std::ffi::OsStr> = [
        "--disable-background-networking",
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
        .user_data_dir(Some(tmp.join("profile")))
        .args(args)
        .build()
        .unwrap();
    let browser = Browser::new(opts).unwrap();
    let tab = browser.new_tab().unwrap();
    tab.navigate_to(&format!("file://{}", page.display()))
        .unwrap()
        .wait_until_navigated()
        .unwrap();
    tab.wait_for_element("#vx-canvas").unwrap();
    let eval = |js: &str| -> serde_json::Value {
        match tab
            .evaluate(&format!("JSON.stringify({js})"), false)
            .unwrap()
            .value
        {
            Some(serde_json::Value::String(s)) => serde_json::from_str(&s).unwrap(),
            _ => serde_json::Value::Null,
        }
    };
    let options =
        eval("Array.from(document.querySelectorAll('#vx-colour option')).map(o => o.textContent)");
    for name in COLUMNS {
        assert!(
            options.as_array().unwrap().iter().any(|o| o == name),
            "colour-by list {options} lacks {name}"
        );
    }
    let frames: Vec<u64> = set["frames"]
        .as_array()
        .unwrap()
        .iter()
        .map(|f| f.as_u64().unwrap())
        .collect();
    let columns = set["columns"].as_array().unwrap();
    for name in COLUMNS {
        let k = columns.iter().position(|c| c["name"] == name).unwrap();
        let col = &columns[k];
        eval(&format!(
            "(() => {{ const s = document.getElementById('vx-colour'); s.value = '{k}'; s.dispatchEvent(new Event('change')); }})()"
        ));
        // The legend: a colour bar between the range's ends.
        let bar = eval("(() => { const b = document.querySelector('#vx-legend .vx-bar'); return b ? [b.querySelector('.vx-lo').textContent, b.querySelector('.vx-hi').textContent, getComputedStyle(b.children[1]).backgroundImage] : null; })()");
        assert!(bar.is_array(), "{name}: no colour bar in the legend");
        let (lo, hi) = (col["lo"].as_f64().unwrap(), col["hi"].as_f64().unwrap());
        for (shown, v) in [(&bar[0], lo), (&bar[1], hi)] {
            let shown: f64 = shown.as_str().unwrap().parse().unwrap();
            assert!(
                (shown - v).abs() <= 1e-3 * v.abs().max(1.0),
                "{name}: bar end {shown}, range end {v}"
            );
        }
        assert!(
            bar[2].as_str().unwrap().contains("linear-gradient"),
            "{bar}"
        );
        // Every point's colour is its value's ramp colour, grey without a value.
        let fills = eval("Array.from({length: window.voxstrataExplorer.state.px.length}, (_, i) => window.voxstrataExplorer.colourOf(i))");
        let fills = fills.as_array().unwrap();
        let steps = col["ramp"].as_array().unwrap().len();
        let values = col["values"].as_array().unwrap();
        assert_eq!(fills.len(), frames.len());
        let mut distinct = std::collections::BTreeSet::new();
        for (i, f) in fills.iter().enumerate() {
            let want = expected_colour(values[i].as_f64(), lo, hi, steps);
            assert_eq!(
                f.as_str().unwrap().to_lowercase(),
                want,
                "{name}: point {i}, value {}",
                values[i]
            );
            distinct.insert(want);
        }
        assert!(distinct.len() > 20, "{name}: {} colours", distinct.len());
        // Hover: the tooltip names the frame under the pointer and its value.
        let i = values.iter().position(|v| v.is_number()).unwrap() + 11;
        eval("document.getElementById('vx-canvas').scrollIntoView({block: 'center'})");
        let p = eval(&format!("window.voxstrataExplorer.pointClient({i})"));
        tab.move_mouse_to_point(Point {
            x: p["x"].as_f64().unwrap() + 0.5,
            y: p["y"].as_f64().unwrap() + 0.5,
        })
        .unwrap();
        let tip = eval(&format!(
            "(() => {{ const t = document.getElementById('vx-tip'); const row = Array.from(t.children).find(d => d.firstChild && d.firstChild.textContent === '{name}'); return [t.hidden, t.dataset.frame, row ? row.lastChild.textContent : null]; }})()"
        ));
        assert_eq!(tip[0], false, "{name}: tooltip hidden");
        let frame: u64 = tip[1].as_str().unwrap().parse().unwrap();
        let j = frames.iter().position(|&f| f == frame).unwrap();
        let shown = tip[2]
            .as_str()
            .unwrap_or_else(|| panic!("{name}: not in the tooltip {tip}"));
        match values[j].as_f64() {
            None => assert_eq!(shown, "(no value)"),
            Some(v) => {
                let got: f64 = shown
                    .parse()
                    .unwrap_or_else(|_| panic!("{name}: tooltip value {shown:?}"));
                // Four significant digits.
                let unit = 10f64.powi(v.abs().log10().floor() as i32 - 3);
                assert!(
                    (got - v).abs() <= 0.5 * unit + 1e-9,
                    "{name}: tooltip {got}, value {v}"
                );
            }
        }
        // A screenshot of each column's view, for a person to look at.
        let shot = tab
            .capture_screenshot(CaptureScreenshotFormatOption::Png, None, None, true)
            .unwrap();
        let art = Path::new(env!("CARGO_TARGET_TMPDIR")).join("explorer_values");
        std::fs::create_dir_all(&art).unwrap();
        let file = art.join(format!("{name}.png"));
        std::fs::write(&file, shot).unwrap();
        eprintln!("screenshot: {}", file.display());
    }
}
