//! The page itself: HTML assembly, escaping, the inline SVG figures drawn here (the headline
//! phone-against-speaker figure and the CKA heatmap) and the explorer's compact data block.
//!
//! Every string that comes from a capture (labels, names, paths, notes) goes through
//! [`esc`] in HTML and SVG, and the explorer's JSON goes through [`script_json`], so no label
//! can close a tag or the script. Figures drawn by the analyses are embedded as
//! `data:image/svg+xml` images (PNG for the large map grids): an SVG shown as an image runs
//! no script and cannot break the page around it. A Content-Security-Policy forbids every request to anything outside
//! the file.

use std::fmt::Write;

mod explorer;
mod headline;
mod inputs;
mod methods;
mod tables;

pub use inputs::*;

use crate::render::{palette::OTHER, Rgb};
use explorer::map_json;
pub use headline::{crossover, headline_svg, CrossKind, Crossover};
use methods::methods_html;
use tables::{
    probe_rows, purity_rows, regress_rows, summary_table, table, PROBE_HEAD, PURITY_HEAD,
    REGRESS_HEAD,
};

const STYLE: &str = include_str!("style.css");
const SCRIPT: &str = include_str!("explorer.js");

/// Escape text for HTML or SVG text content and attribute values.
pub fn esc(s: &str) -> String {
    let mut o = String::with_capacity(s.len());
    for c in s.chars() {
        match c {
            '&' => o.push_str("&amp;"),
            '<' => o.push_str("&lt;"),
            '>' => o.push_str("&gt;"),
            '"' => o.push_str("&quot;"),
            '\'' => o.push_str("&#39;"),
            _ => o.push(c),
        }
    }
    o
}

/// JSON safe to place inside `<script>`: `<`, `>`, `&` and the JavaScript line separators
/// U+2028/U+2029 become `\u` escapes (they only occur inside JSON strings, so this is exact).
pub fn script_json(v: &serde_json::Value) -> String {
    let s = v.to_string();
    let mut o = String::with_capacity(s.len());
    for c in s.chars() {
        match c {
            '<' => o.push_str("\\u003c"),
            '>' => o.push_str("\\u003e"),
            '&' => o.push_str("\\u0026"),
            '\u{2028}' => o.push_str("\\u2028"),
            '\u{2029}' => o.push_str("\\u2029"),
            _ => o.push(c),
        }
    }
    o
}

/// Standard base64 (RFC 4648) with padding.
pub fn base64(bytes: &[u8]) -> String {
    const A: &[u8; 64] = b"ABCDEFGHIJKLMNOPQRSTUVWXYZabcdefghijklmnopqrstuvwxyz0123456789+/";
    let mut o = String::with_capacity(bytes.len().div_ceil(3) * 4);
    for ch in bytes.chunks(3) {
        let b = [ch[0], *ch.get(1).unwrap_or(&0), *ch.get(2).unwrap_or(&0)];
        let n = (b[0] as u32) << 16 | (b[1] as u32) << 8 | b[2] as u32;
        o.push(A[(n >> 18) as usize & 63] as char);
        o.push(A[(n >> 12) as usize & 63] as char);
        o.push(if ch.len() > 1 {
            A[(n >> 6) as usize & 63] as char
        } else {
            '='
        });
        o.push(if ch.len() > 2 {
            A[n as usize & 63] as char
        } else {
            '='
        });
    }
    o
}

fn hex(c: Rgb) -> String {
    format!("#{:02x}{:02x}{:02x}", c.0, c.1, c.2)
}

/// A number that may be missing: an `f64` record field (NaN when missing) or an `Option`.
trait Maybe {
    /// The value when present and finite.
    fn value(self) -> Option<f64>;
}

impl Maybe for f64 {
    fn value(self) -> Option<f64> {
        self.is_finite().then_some(self)
    }
}

impl Maybe for Option<f64> {
    fn value(self) -> Option<f64> {
        self.filter(|v| v.is_finite())
    }
}

fn f3(x: impl Maybe) -> String {
    match x.value() {
        Some(v) if v.is_finite() => format!("{v:.3}"),
        _ => "—".into(),
    }
}

fn pvalue(x: impl Maybe) -> String {
    match x.value() {
        Some(v) if v.is_finite() && v < 0.001 => format!("{v:.1e}"),
        Some(v) if v.is_finite() => format!("{v:.3}"),
        _ => "—".into(),
    }
}

/// The ABX section: the figure, what the numbers mean, and the records of each capture.
fn abx_html(out: &mut String, inp: &ReportInputs) {
    let figs: Vec<&SvgFigure> = inp
        .figures
        .iter()
        .filter(|f| f.section == FigureSection::Abx)
        .collect();
    if figs.is_empty() && inp.captures.iter().all(|c| c.abx.is_empty()) {
        return;
    }
    out.push_str("<section id=\"abx\"><h2>ABX discriminability</h2><p>The share of (A, B, X) triplets where X, a token of A's phone in the same phonetic context, is nearer to B than to A (ties count a half): lower is better, 0.5 is chance. Within speaker, all three come from one talker; across speaker, X comes from another talker. The gap across − within is what a change of talker still costs at that layer. The definition is in the methods below.</p>");
    for f in figs {
        figure_img(out, f);
    }
    for c in inp.captures.iter().filter(|c| !c.abx.is_empty()) {
        let rows: Vec<Vec<String>> = c
            .abx
            .iter()
            .map(|r| {
                vec![
                    r.layer.to_string(),
                    r.condition.clone(),
                    f3(r.error_rate),
                    r.n_pairs.to_string(),
                    r.n_triplets.to_string(),
                ]
            })
            .collect();
        table(
            out,
            &format!("ABX error rate of {} per layer", c.summary.name),
            &[
                "layer",
                "condition",
                "error rate",
                "label pairs",
                "triplets",
            ],
            &rows,
        );
    }
    out.push_str("</section>");
}

/// The notes every analysis left for the reader (dropped classes, caps, skipped tasks).
fn notes_html(out: &mut String, inp: &ReportInputs) {
    let mut groups: Vec<(String, &[String])> = inp
        .captures
        .iter()
        .map(|c| (c.summary.name.clone(), c.notes.as_slice()))
        .collect();
    if let Some(c) = &inp.compare {
        groups.push((format!("{} against {}", c.name_a, c.name_b), &c.notes));
    }
    if groups.iter().all(|(_, n)| n.is_empty()) {
        return;
    }
    out.push_str("<section id=\"notes\"><h2>Notes from the analyses</h2>");
    for (name, notes) in groups.iter().filter(|(_, n)| !n.is_empty()) {
        let _ = write!(out, "<h3>{}</h3><ul>", esc(name));
        for n in notes.iter() {
            let _ = write!(out, "<li>{}</li>", esc(n));
        }
        out.push_str("</ul>");
    }
    out.push_str("</section>");
}

fn figure_img(out: &mut String, f: &SvgFigure) {
    let (kind, bytes) = match &f.png {
        Some(p) => ("png", p.as_slice()),
        None => ("svg+xml", f.svg.as_bytes()),
    };
    let _ = write!(
        out,
        "<figure class=\"ext\"><img alt=\"{}\" src=\"data:image/{kind};base64,{}\"><figcaption>{}</figcaption></figure>",
        esc(&f.title),
        base64(bytes),
        esc(&f.title)
    );
}

/// Build the whole page: one self-contained HTML document.
pub fn render(inp: &ReportInputs) -> String {
    let mut o = String::with_capacity(1 << 20);
    let title = if inp.title.is_empty() {
        "voxstrata report"
    } else {
        inp.title.as_str()
    };
    let has_maps = inp
        .captures
        .iter()
        .any(|c| c.maps.as_ref().is_some_and(|m| !m.layers.is_empty()));
    head_html(&mut o, inp, title);
    o.push_str("<section id=\"analysed\"><h2>What was analysed</h2>");
    summary_table(&mut o, &inp.captures);
    if !inp.sample.is_empty() {
        let _ = write!(
            o,
            "<p id=\"sample\" class=\"{}\">{}</p>",
            if inp.sample_scaled {
                "caution"
            } else {
                "plain"
            },
            esc(&inp.sample)
        );
    }
    o.push_str("</section>");
    headline_html(&mut o, inp);
    maps_html(&mut o, inp, has_maps);
    abx_html(&mut o, inp);
    if let Some(c) = &inp.compare {
        compare_html(&mut o, inp, c);
    }
    numbers_html(&mut o, inp);
    notes_html(&mut o, inp);
    o.push_str("<section id=\"methods\"><h2>Methods</h2>");
    methods_html(&mut o, inp);
    o.push_str("</section></main>");
    let _ = write!(o, "<footer>Made by voxstrata {}. This page is one file: it needs no network and nothing beside it.</footer>", esc(&inp.methods.version));
    if has_maps {
        explorer_data(&mut o, inp);
    }
    o.push_str("</body></html>\n");
    o
}

/// The document head, the style sheet, and the header with its navigation.
fn head_html(o: &mut String, inp: &ReportInputs, title: &str) {
    let _ = write!(
        o,
        "<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\"><meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\
<meta http-equiv=\"Content-Security-Policy\" content=\"default-src 'none'; img-src data:; style-src 'unsafe-inline'; script-src 'unsafe-inline'\">\
<meta name=\"generator\" content=\"voxstrata {}\"><title>{}</title><style>{}</style></head><body>",
        esc(&inp.methods.version),
        esc(title),
        STYLE
    );
    let _ = write!(o, "<header><h1>{}</h1><nav><a href=\"#analysed\">Analysed</a><a href=\"#headline\">Phone and speaker</a><a href=\"#maps\">Layer maps</a>", esc(title));
    if inp.compare.is_some() {
        o.push_str("<a href=\"#compare\">Comparison</a>");
    }
    o.push_str(
        "<a href=\"#numbers\">Numbers</a><a href=\"#methods\">Methods</a></nav></header><main>",
    );
}

/// The headline section: one figure per capture, then the probe figures.
fn headline_html(o: &mut String, inp: &ReportInputs) {
    o.push_str("<section id=\"headline\"><h2>Phone and speaker across layers</h2>");
    let mut any = false;
    for sec in &inp.captures {
        let fades = fade_sentences(&sec.probe);
        if let Some((svg, caption)) = headline_svg(sec) {
            any = true;
            let _ = write!(
                o,
                "<figure class=\"headline\">{svg}<figcaption><b>{}.</b> Probe accuracy (solid, with 95% interval) and k-NN purity (dashed) per layer for phone and speaker. {}{}</figcaption></figure>",
                esc(&sec.summary.name),
                esc(&caption),
                esc(&fades)
            );
        } else if !fades.is_empty() {
            let _ = write!(
                o,
                "<p><b>{}.</b>{}</p>",
                esc(&sec.summary.name),
                esc(&fades)
            );
        }
    }
    if !any {
        o.push_str("<p class=\"missing\">No probe or purity results were available in this run, so there is no headline figure.</p>");
    }
    for f in inp
        .figures
        .iter()
        .filter(|f| f.section == FigureSection::Probe)
    {
        figure_img(o, f);
    }
    o.push_str("</section>");
}

/// Where each continuous column's R² fades (half way to its control, see the methods), one
/// sentence each, each after a space; empty without continuous records.
fn fade_sentences(probe: &[crate::records::probe::ProbeRecord]) -> String {
    crate::analysis::probe::regress::r2_half_falls(probe)
        .iter()
        .map(|f| format!(" {}.", crate::render::summary::r2_fall_sentence(f)))
        .collect()
}

/// The layer-map section: the interactive explorer when maps exist, then the map figures.
fn maps_html(o: &mut String, inp: &ReportInputs, has_maps: bool) {
    o.push_str("<section id=\"maps\"><h2>Layer maps</h2>");
    if has_maps {
        o.push_str(
            "<div id=\"explorer\" class=\"explorer\"><div class=\"controls\">\
<label id=\"vx-set-label\">capture <select id=\"vx-set\"></select></label>\
<label>layer <input type=\"range\" id=\"vx-layer\" min=\"0\" max=\"0\" step=\"1\" value=\"0\"></label><output id=\"vx-layer-name\"></output>\
<label>colour by <select id=\"vx-colour\"></select></label></div>\
<div class=\"stage\"><canvas id=\"vx-canvas\" width=\"900\" height=\"600\" aria-label=\"map of the selected layer\"></canvas><div id=\"vx-tip\" class=\"tip\" hidden></div></div>\
<div id=\"vx-legend\" class=\"legend\"></div>\
<p class=\"hint\">Slider or ← → keys: move between layers. Hover a point: its utterance, time, labels and values. Click a legend entry: highlight that label (click again to clear). Numeric columns are coloured on a value ramp over their 1st–99th percentiles; grey: no value.</p></div>",
        );
    } else {
        o.push_str("<p class=\"missing\">No layer maps were available in this run.</p>");
    }
    for f in inp
        .figures
        .iter()
        .filter(|f| f.section == FigureSection::Maps)
    {
        figure_img(o, f);
    }
    o.push_str("</section>");
}

/// The comparison section: its figures and the per-layer probe differences.
fn compare_html(o: &mut String, inp: &ReportInputs, c: &CompareInputs) {
    let _ = write!(
        o,
        "<section id=\"compare\"><h2>{} against {}</h2>",
        esc(&c.name_a),
        esc(&c.name_b)
    );
    for f in inp
        .figures
        .iter()
        .filter(|f| f.section == FigureSection::Compare)
    {
        figure_img(o, f);
    }
    let rows: Vec<Vec<String>> = c
        .probe_delta
        .iter()
        .map(|d| {
            let (sa, sb) = d.scores();
            let (p, only) = if d.is_continuous() {
                (
                    "does not apply: values are not right or wrong (ΔR², paired bootstrap)".into(),
                    "—".into(),
                )
            } else {
                (pvalue(d.mcnemar_p), format!("{} / {}", d.b, d.c))
            };
            vec![
                d.layer.to_string(),
                d.task.clone(),
                if d.is_continuous() { "R²" } else { "accuracy" }.into(),
                f3(sa),
                f3(sb),
                f3(d.delta),
                format!("{} to {}", f3(d.ci_low), f3(d.ci_high)),
                p,
                only,
            ]
        })
        .collect();
    if !rows.is_empty() {
        let a = format!("score {}", c.name_a);
        let b = format!("score {}", c.name_b);
        let only = format!("right on {} only / {} only", c.name_a, c.name_b);
        table(
                o,
                "Probe scores per layer in both captures: accuracy, or R² for a continuous column (difference with its paired speaker-bootstrap 95% interval; McNemar's test on paired predictions of categorical tasks)",
                &["layer", "task", "score", &a, &b, "difference", "95% interval", "McNemar p", &only],
                &rows,
            );
    }
    o.push_str("</section>");
}

/// The tables behind the figures: probes and purity per capture, and CKA.
fn numbers_html(o: &mut String, inp: &ReportInputs) {
    o.push_str("<section id=\"numbers\"><h2>Numbers behind the figures</h2>");
    for sec in &inp.captures {
        let name = &sec.summary.name;
        let class_rows = probe_rows(&sec.probe);
        if !class_rows.is_empty() {
            table(o, &format!("Probes: {name}"), &PROBE_HEAD, &class_rows);
        }
        let value_rows = regress_rows(&sec.probe);
        if !value_rows.is_empty() {
            table(
                o,
                &format!("Regression probes of continuous columns (ridge; R² on held-out speakers): {name}"),
                &REGRESS_HEAD,
                &value_rows,
            );
        }
        if !sec.purity.is_empty() {
            table(
                o,
                &format!("Purity: {name}"),
                &PURITY_HEAD,
                &purity_rows(&sec.purity),
            );
        }
        if sec.probe.is_empty() && sec.purity.is_empty() {
            let _ = write!(
                o,
                "<p class=\"missing\">No probe or purity records for {}.</p>",
                esc(name)
            );
        }
    }
    if let Some(c) = &inp.compare {
        let rows: Vec<Vec<String>> = c
            .cka
            .iter()
            .map(|r| vec![r.layer_a.to_string(), r.layer_b.to_string(), f3(r.cka)])
            .collect();
        if !rows.is_empty() {
            let a = format!("layer of {}", c.name_a);
            let b = format!("layer of {}", c.name_b);
            table(o, "CKA", &[&a, &b, "CKA"], &rows);
        }
    }
    o.push_str("</section>");
}

/// The explorer's data and script, embedded in the page.
fn explorer_data(o: &mut String, inp: &ReportInputs) {
    let sets: Vec<serde_json::Value> = inp
        .captures
        .iter()
        .filter_map(|c| c.maps.as_ref())
        .filter(|m| !m.layers.is_empty())
        .map(map_json)
        .collect();
    let data = serde_json::json!({ "sets": sets, "other": hex(OTHER) });
    let _ = write!(
        o,
        "<script type=\"application/json\" id=\"vx-data\">{}</script><script>{}</script>",
        script_json(&data),
        SCRIPT
    );
}

#[cfg(test)]
mod page_tests {
    use super::*;
    use crate::records::compare::{CkaRecord, ProbeDelta};
    use crate::records::map::PurityRecord;

    fn section(name: &str) -> CaptureSection {
        CaptureSection {
            summary: summary(name),
            probe: vec![],
            purity: vec![],
            maps: None,
            abx: vec![],
            notes: vec![format!("probe: a note about {name}")],
        }
    }

    fn summary(name: &str) -> crate::records::inspect::Summary {
        crate::records::inspect::Summary {
            name: name.into(),
            path: format!("/data/{name}"),
            label_source: "frames.tsv".into(),
            label_files: 1,
            layout: "one file per layer".into(),
            layer_files: 0,
            hop_s: 0.02,
            frames: 10,
            utterances: 2,
            speakers: 2,
            layers: vec![],
            tasks: vec![],
            continuous: vec![],
            bytes_on_disk: 0,
            probe_memory_estimate: 0,
            notes: serde_json::json!({ "model": "<img src=x onerror=alert(1)>" }),
            warnings: vec![],
        }
    }

    #[test]
    fn hostile_names_are_escaped_everywhere_on_the_page() {
        let bad = "</script><script>alert(1)</script>";
        let mut a = section(bad);
        a.purity = (0..4)
            .flat_map(|l| {
                ["phone", "speaker"].map(|t| PurityRecord {
                    layer: l,
                    label: t.into(),
                    knn_purity: Some(0.2 + 0.1 * l as f64),
                    ..Default::default()
                })
            })
            .collect();
        let cmp = CompareInputs {
            name_a: bad.into(),
            name_b: "b\"'".into(),
            cka: (0..4)
                .flat_map(|i| {
                    (0..4).map(move |j| CkaRecord {
                        layer_a: i,
                        layer_b: j,
                        cka: 1.0 / (1.0 + (i as f64 - j as f64).abs()),
                        ..Default::default()
                    })
                })
                .collect(),
            probe_delta: vec![ProbeDelta {
                layer: 1,
                task: bad.into(),
                accuracy_a: 0.5,
                accuracy_b: 0.6,
                delta: 0.1,
                mcnemar_p: 1e-5,
                ..Default::default()
            }],
            notes: vec![bad.into()],
        };
        let inp = ReportInputs {
            title: bad.into(),
            captures: vec![a, section("b")],
            compare: Some(cmp),
            figures: vec![SvgFigure {
                title: bad.into(),
                section: FigureSection::Compare,
                svg: format!("<svg><text>{bad}</text></svg>"),
                png: None,
            }],
            methods: Methods {
                version: "0".into(),
                options: vec![(bad.into(), serde_json::json!({ "k": bad }))],
                ..Default::default()
            },
            sample: bad.into(),
            sample_scaled: true,
        };
        let page = render(&inp);
        assert!(
            !page.contains(bad) && !page.contains("<img src=x"),
            "a raw hostile string reached the page"
        );
        assert_eq!(
            page.matches("<script").count(),
            0,
            "no explorer data without maps, and no injected script"
        );
        assert!(page.contains("&lt;/script&gt;&lt;script&gt;alert(1)&lt;/script&gt;"));
        assert!(page.contains("id=\"compare\""));
        // the notes of every analysis reach the page, escaped
        assert!(page.contains("id=\"notes\"") && page.contains("probe: a note about b"));
        if let Ok(p) = std::env::var("VOXSTRATA_DUMP_PAGE") {
            std::fs::write(p, &page).unwrap();
        }
    }
}
