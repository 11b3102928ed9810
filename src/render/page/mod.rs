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

mod inputs;

pub use inputs::*;

use crate::capture::UNLABELLED;
use crate::records::map::PurityRecord;
use crate::records::probe::ProbeRecord;
use crate::render::{category_colours, palette::OTHER, Rgb};

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

/// Where the headline figure marks the change from speaker to phone.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum CrossKind {
    /// Phone becomes more decodable than speaker at this layer.
    PhoneOvertakes,
    /// Speaker decodability falls below half its range (after its peak) at this layer.
    SpeakerBelowHalf,
}

/// The layer where phone information overtakes speaker information.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Crossover {
    /// Layer number.
    pub layer: usize,
    /// Which rule found it.
    pub kind: CrossKind,
}

/// Find the crossover on aligned per-layer scores: the first layer where phone rises above
/// speaker after being at or below it; failing that, the first layer after speaker's peak
/// where speaker falls below the middle of its range (common practice for a readable marker).
pub fn crossover(layers: &[usize], phone: &[f64], speaker: &[f64]) -> Option<Crossover> {
    let pts: Vec<(usize, f64, f64)> = layers
        .iter()
        .zip(phone.iter().zip(speaker))
        .filter(|(_, (p, s))| p.is_finite() && s.is_finite())
        .map(|(&l, (&p, &s))| (l, p, s))
        .collect();
    for w in pts.windows(2) {
        if w[0].1 <= w[0].2 && w[1].1 > w[1].2 {
            return Some(Crossover {
                layer: w[1].0,
                kind: CrossKind::PhoneOvertakes,
            });
        }
    }
    let (mut lo, mut hi, mut peak) = (f64::INFINITY, f64::NEG_INFINITY, 0usize);
    for (i, &(_, _, s)) in pts.iter().enumerate() {
        lo = lo.min(s);
        if s > hi {
            hi = s;
            peak = i;
        }
    }
    if hi.partial_cmp(&lo) != Some(std::cmp::Ordering::Greater) {
        return None;
    }
    let half = lo + (hi - lo) / 2.0;
    pts.iter()
        .skip(peak + 1)
        .find(|&&(_, _, s)| s < half)
        .map(|&(l, _, _)| Crossover {
            layer: l,
            kind: CrossKind::SpeakerBelowHalf,
        })
}

/// Per-layer value of one measure for one task.
struct Series {
    layers: Vec<usize>,
    value: Vec<f64>,
    low: Vec<f64>,
    high: Vec<f64>,
}

fn probe_series(recs: &[ProbeRecord], task: &str, f: impl Fn(&ProbeRecord) -> f64) -> Series {
    let mut rows: Vec<&ProbeRecord> = Vec::new();
    for r in recs.iter().filter(|r| r.task == task) {
        // One value per layer: the first pooling listed for that layer.
        if !rows.iter().any(|x| x.layer == r.layer) {
            rows.push(r);
        }
    }
    rows.sort_by_key(|r| r.layer);
    let nan = |x: f64| x;
    Series {
        layers: rows.iter().map(|r| r.layer).collect(),
        value: rows.iter().map(|r| nan(f(r))).collect(),
        low: rows.iter().map(|r| nan(r.ci_low)).collect(),
        high: rows.iter().map(|r| nan(r.ci_high)).collect(),
    }
}

fn purity_value(r: &PurityRecord) -> Option<f64> {
    r.knn_purity.or(r.cluster_purity)
}

fn purity_series(recs: &[PurityRecord], task: &str) -> Series {
    let mut rows: Vec<&PurityRecord> = recs.iter().filter(|r| r.label == task).collect();
    rows.sort_by_key(|r| r.layer);
    rows.dedup_by_key(|r| r.layer);
    Series {
        layers: rows.iter().map(|r| r.layer).collect(),
        value: rows
            .iter()
            .map(|r| purity_value(r).unwrap_or(f64::NAN))
            .collect(),
        low: vec![],
        high: vec![],
    }
}

fn aligned(a: &Series, b: &Series) -> (Vec<usize>, Vec<f64>, Vec<f64>) {
    let mut l = Vec::new();
    let (mut x, mut y) = (Vec::new(), Vec::new());
    for (i, &layer) in a.layers.iter().enumerate() {
        if let Some(j) = b.layers.iter().position(|&m| m == layer) {
            l.push(layer);
            x.push(a.value[i]);
            y.push(b.value[j]);
        }
    }
    (l, x, y)
}

/// Colours of the phone and speaker tasks throughout the page.
fn task_colours() -> (Rgb, Rgb) {
    let c = category_colours(2);
    (c[0], c[1])
}

/// The headline figure for one capture: probe accuracy (with its confidence band) and k-NN
/// purity across layers for phone and speaker, majority baselines, and the crossover
/// marked. Returns the SVG and a sentence saying what the marker means.
pub fn headline_svg(sec: &CaptureSection) -> Option<(String, String)> {
    let (pc, sc) = task_colours();
    let tasks = [("phone", pc), ("speaker", sc)];
    let mut lines: Vec<(String, Rgb, Series, &str)> = Vec::new();
    let mut base: Vec<(Rgb, Series)> = Vec::new();
    for (t, c) in tasks {
        let acc = probe_series(&sec.probe, t, |r| r.accuracy);
        if !acc.layers.is_empty() {
            base.push((c, probe_series(&sec.probe, t, |r| r.majority_baseline)));
            lines.push((format!("{t}: probe accuracy"), c, acc, ""));
        }
        let pur = purity_series(&sec.purity, t);
        if !pur.layers.is_empty() {
            lines.push((format!("{t}: k-NN purity"), c, pur, "6 4"));
        }
    }
    if lines.is_empty() {
        return None;
    }
    let mut all_layers: Vec<usize> = lines
        .iter()
        .flat_map(|l| l.2.layers.iter().copied())
        .collect();
    all_layers.sort_unstable();
    all_layers.dedup();
    let (lmin, lmax) = (
        all_layers[0] as f64,
        *all_layers.last().unwrap_or(&0) as f64,
    );
    let (w, h) = (760.0, 360.0);
    let (ml, mr, mt, mb) = (52.0, 200.0, 34.0, 46.0);
    let (pw, ph) = (w - ml - mr, h - mt - mb);
    let xs = |l: f64| {
        if lmax > lmin {
            ml + (l - lmin) / (lmax - lmin) * pw
        } else {
            ml + pw / 2.0
        }
    };
    let ys = |v: f64| mt + (1.0 - v.clamp(0.0, 1.0)) * ph;
    let mut s = String::new();
    let _ = write!(
        s,
        r#"<svg xmlns="http://www.w3.org/2000/svg" class="fig" viewBox="0 0 {w} {h}" width="{w}" height="{h}" role="img" aria-label="probe accuracy and purity across layers" font-family="system-ui, 'DejaVu Sans', sans-serif" font-size="12">"#
    );
    for k in 0..=5 {
        let v = k as f64 / 5.0;
        let y = ys(v);
        let _ = write!(
            s,
            r##"<line x1="{ml}" x2="{:.1}" y1="{y:.1}" y2="{y:.1}" stroke="#e4e4e4"/><text x="{:.1}" y="{:.1}" text-anchor="end" fill="#555">{v:.1}</text>"##,
            ml + pw,
            ml - 6.0,
            y + 4.0
        );
    }
    let every = (all_layers.len() / 16).max(1);
    for (i, &l) in all_layers.iter().enumerate() {
        if i % every == 0 || i + 1 == all_layers.len() {
            let x = xs(l as f64);
            let _ = write!(
                s,
                r##"<line x1="{x:.1}" x2="{x:.1}" y1="{:.1}" y2="{:.1}" stroke="#999"/><text x="{x:.1}" y="{:.1}" text-anchor="middle" fill="#555">{l}</text>"##,
                mt + ph,
                mt + ph + 4.0,
                mt + ph + 17.0
            );
        }
    }
    let _ = write!(
        s,
        r##"<line x1="{ml}" x2="{ml}" y1="{mt}" y2="{:.1}" stroke="#999"/><line x1="{ml}" x2="{:.1}" y1="{:.1}" y2="{:.1}" stroke="#999"/><text x="{:.1}" y="{:.1}" text-anchor="middle" fill="#333">layer</text><text transform="translate(14 {:.1}) rotate(-90)" text-anchor="middle" fill="#333">accuracy / purity</text>"##,
        mt + ph,
        ml + pw,
        mt + ph,
        mt + ph,
        ml + pw / 2.0,
        h - 8.0,
        mt + ph / 2.0
    );
    // Majority baselines: thin dotted lines.
    for (c, b) in &base {
        let pts: Vec<String> = b
            .layers
            .iter()
            .zip(&b.value)
            .filter(|(_, v)| v.is_finite())
            .map(|(&l, &v)| format!("{:.1},{:.1}", xs(l as f64), ys(v)))
            .collect();
        if pts.len() > 1 {
            let _ = write!(
                s,
                r#"<polyline points="{}" fill="none" stroke="{}" stroke-width="1" stroke-dasharray="1 3" opacity="0.9"/>"#,
                pts.join(" "),
                hex(*c)
            );
        }
    }
    for (_, c, ser, dash) in &lines {
        let col = hex(*c);
        // Confidence band.
        if ser.low.len() == ser.layers.len()
            && ser.low.iter().chain(&ser.high).all(|v| v.is_finite())
            && ser.layers.len() > 1
        {
            let mut pts: Vec<String> = ser
                .layers
                .iter()
                .zip(&ser.high)
                .map(|(&l, &v)| format!("{:.1},{:.1}", xs(l as f64), ys(v)))
                .collect();
            pts.extend(
                ser.layers
                    .iter()
                    .zip(&ser.low)
                    .rev()
                    .map(|(&l, &v)| format!("{:.1},{:.1}", xs(l as f64), ys(v))),
            );
            let _ = write!(
                s,
                r#"<polygon points="{}" fill="{col}" opacity="0.18"/>"#,
                pts.join(" ")
            );
        }
        let pts: Vec<(f64, f64)> = ser
            .layers
            .iter()
            .zip(&ser.value)
            .filter(|(_, v)| v.is_finite())
            .map(|(&l, &v)| (xs(l as f64), ys(v)))
            .collect();
        let text: Vec<String> = pts.iter().map(|(x, y)| format!("{x:.1},{y:.1}")).collect();
        let _ = write!(
            s,
            r#"<polyline points="{}" fill="none" stroke="{col}" stroke-width="2.2" stroke-dasharray="{dash}" stroke-linejoin="round"/>"#,
            text.join(" ")
        );
        if dash.is_empty() {
            for (x, y) in &pts {
                let _ = write!(
                    s,
                    r#"<circle cx="{x:.1}" cy="{y:.1}" r="3.2" fill="{col}"/>"#
                );
            }
        } else {
            for (x, y) in &pts {
                let _ = write!(
                    s,
                    r##"<rect x="{:.1}" y="{:.1}" width="5" height="5" fill="#fff" stroke="{col}" stroke-width="1.5"/>"##,
                    x - 2.5,
                    y - 2.5
                );
            }
        }
    }
    // The crossover: from probe accuracy when both tasks have it, else from purity.
    let pick = |f: &dyn Fn(&str) -> Series| {
        let (a, b) = (f("phone"), f("speaker"));
        if a.layers.is_empty() || b.layers.is_empty() {
            None
        } else {
            let (l, p, q) = aligned(&a, &b);
            crossover(&l, &p, &q)
        }
    };
    let cross = pick(&|t| probe_series(&sec.probe, t, |r| r.accuracy))
        .map(|c| (c, "probe accuracy"))
        .or_else(|| pick(&|t| purity_series(&sec.purity, t)).map(|c| (c, "k-NN purity")));
    let caption = match cross {
        Some((c, what)) => {
            let x = xs(c.layer as f64);
            let label = match c.kind {
                CrossKind::PhoneOvertakes => format!("phone overtakes speaker at layer {}", c.layer),
                CrossKind::SpeakerBelowHalf => format!("speaker below half its range at layer {}", c.layer),
            };
            let anchor = if x > ml + pw * 0.6 { "end" } else { "start" };
            let tx = if anchor == "end" { x - 5.0 } else { x + 5.0 };
            let _ = write!(
                s,
                r##"<line x1="{x:.1}" x2="{x:.1}" y1="{:.1}" y2="{:.1}" stroke="#222" stroke-width="1.2" stroke-dasharray="4 3"/><text x="{tx:.1}" y="{:.1}" text-anchor="{anchor}" fill="#222" font-weight="bold">{}</text>"##,
                mt - 12.0,
                mt + ph,
                mt - 16.0,
                esc(&label)
            );
            match c.kind {
                CrossKind::PhoneOvertakes => format!(
                    "The dashed vertical line marks layer {}, the first layer where phone {what} rises above speaker {what}.",
                    c.layer
                ),
                CrossKind::SpeakerBelowHalf => format!(
                    "The phone and speaker curves do not cross here; the dashed vertical line marks layer {}, where speaker {what} first falls below the middle of its range after its peak.",
                    c.layer
                ),
            }
        }
        None => "No crossover: the phone and speaker curves do not cross and speaker never falls below half its range.".to_string(),
    };
    // Legend on the right.
    let lx = ml + pw + 18.0;
    let mut ly = mt + 6.0;
    for (name, c, _, dash) in &lines {
        let _ = write!(
            s,
            r##"<line x1="{lx:.1}" x2="{:.1}" y1="{ly:.1}" y2="{ly:.1}" stroke="{}" stroke-width="2.2" stroke-dasharray="{dash}"/><text x="{:.1}" y="{:.1}" fill="#333">{}</text>"##,
            lx + 26.0,
            hex(*c),
            lx + 32.0,
            ly + 4.0,
            esc(name)
        );
        ly += 20.0;
    }
    if !base.is_empty() {
        let _ = write!(
            s,
            r##"<line x1="{lx:.1}" x2="{:.1}" y1="{ly:.1}" y2="{ly:.1}" stroke="#666" stroke-dasharray="1 3"/><text x="{:.1}" y="{:.1}" fill="#333">majority baseline</text>"##,
            lx + 26.0,
            lx + 32.0,
            ly + 4.0
        );
        ly += 20.0;
        let _ = write!(
            s,
            r##"<rect x="{lx:.1}" y="{:.1}" width="26" height="10" fill="#888" opacity="0.25"/><text x="{:.1}" y="{:.1}" fill="#333">95% interval</text>"##,
            ly - 5.0,
            lx + 32.0,
            ly + 4.0
        );
    }
    s.push_str("</svg>");
    Some((s, caption))
}

fn quantise(a: &ndarray::Array2<f32>) -> serde_json::Value {
    let mut lo = [f32::INFINITY; 2];
    let mut hi = [f32::NEG_INFINITY; 2];
    for row in a.outer_iter() {
        for k in 0..2 {
            let v = row[k];
            if v.is_finite() {
                lo[k] = lo[k].min(v);
                hi[k] = hi[k].max(v);
            }
        }
    }
    for k in 0..2 {
        if !lo[k].is_finite() {
            lo[k] = 0.0;
            hi[k] = 1.0;
        } else if hi[k] <= lo[k] {
            hi[k] = lo[k] + 1.0;
        }
    }
    let mut bytes = Vec::with_capacity(a.nrows() * 4);
    for row in a.outer_iter() {
        for k in 0..2 {
            let v = row[k];
            let t = if v.is_finite() {
                ((v - lo[k]) / (hi[k] - lo[k])).clamp(0.0, 1.0)
            } else {
                0.0
            };
            let q = (t * 65535.0).round() as u16;
            bytes.extend_from_slice(&q.to_le_bytes());
        }
    }
    serde_json::json!({ "lo": [lo[0], lo[1]], "hi": [hi[0], hi[1]], "xy": base64(&bytes) })
}

/// The explorer's data for one capture's maps: coordinates quantised to u16 per axis and
/// layer (base64), label columns as integer codes with name and colour tables.
fn map_json(m: &MapSet) -> serde_json::Value {
    let layers: Vec<serde_json::Value> = m
        .layers
        .iter()
        .map(|(l, a)| {
            let mut q = quantise(a);
            q["layer"] = serde_json::json!(l);
            q
        })
        .collect();
    let columns: Vec<serde_json::Value> = m
        .info
        .columns
        .iter()
        .map(|c| {
            let colours: Vec<String> = category_colours(c.classes.len()).into_iter().map(hex).collect();
            let codes: Vec<i64> = c.codes.iter().map(|&k| if k == UNLABELLED { -1 } else { k as i64 }).collect();
            serde_json::json!({ "name": c.name, "classes": c.classes, "colours": colours, "codes": codes })
        })
        .collect();
    let time: Vec<f64> = m
        .info
        .time_s
        .iter()
        .map(|t| (t * 1e4).round() / 1e4)
        .collect();
    serde_json::json!({
        "capture": m.capture,
        "n": m.frames.len(),
        "frames": m.frames,
        "layers": layers,
        "utterances": m.info.utterances,
        "utt": m.info.utt,
        "time": time,
        "columns": columns,
    })
}

fn table(out: &mut String, caption: &str, head: &[&str], rows: &[Vec<String>]) {
    let _ = write!(
        out,
        "<div class=\"tablewrap\"><table><caption>{}</caption><thead><tr>",
        esc(caption)
    );
    for h in head {
        let _ = write!(out, "<th>{}</th>", esc(h));
    }
    out.push_str("</tr></thead><tbody>");
    for r in rows {
        out.push_str("<tr>");
        for c in r {
            let _ = write!(out, "<td>{}</td>", esc(c));
        }
        out.push_str("</tr>");
    }
    out.push_str("</tbody></table></div>");
}

fn summary_table(out: &mut String, secs: &[CaptureSection]) {
    let mut head = vec![""];
    let names: Vec<String> = secs.iter().map(|s| s.summary.name.clone()).collect();
    head.extend(names.iter().map(String::as_str));
    let row = |k: &str, f: &dyn Fn(&CaptureSection) -> String| {
        let mut r = vec![k.to_string()];
        r.extend(secs.iter().map(f));
        r
    };
    let mut rows = vec![
        row("folder", &|s| s.summary.path.clone()),
        row("frames", &|s| s.summary.frames.to_string()),
        row("utterances", &|s| s.summary.utterances.to_string()),
        row("speakers", &|s| s.summary.speakers.to_string()),
        row("layers", &|s| {
            let l = &s.summary.layers;
            let mut dims: Vec<usize> = l.iter().map(|x| x.dim).collect();
            dims.dedup();
            let dims: Vec<String> = dims.iter().map(|d| d.to_string()).collect();
            match (l.first(), l.last()) {
                (Some(a), Some(b)) => format!(
                    "{} (numbers {}–{}), dim {}, {}",
                    l.len(),
                    a.layer,
                    b.layer,
                    dims.join("/"),
                    a.dtype
                ),
                _ => "none".into(),
            }
        }),
        row("labels from", &|s| {
            format!(
                "{} (frame shift {} s)",
                s.summary.label_source, s.summary.hop_s
            )
        }),
        row("label tasks", &|s| {
            s.summary
                .tasks
                .iter()
                .map(|t| format!("{}: {} classes", t.task, t.classes))
                .collect::<Vec<_>>()
                .join("; ")
        }),
        row("size on disk", &|s| {
            crate::render::summary::human_bytes(s.summary.bytes_on_disk)
        }),
    ];
    let mut note_keys: Vec<String> = Vec::new();
    for s in secs {
        if let serde_json::Value::Object(m) = &s.summary.notes {
            for k in m.keys() {
                if !note_keys.contains(k) {
                    note_keys.push(k.clone());
                }
            }
        }
    }
    for k in &note_keys {
        rows.push(row(k, &|s| match s.summary.notes.get(k) {
            Some(serde_json::Value::String(v)) => v.clone(),
            Some(v) => v.to_string(),
            None => "—".into(),
        }));
    }
    rows.push(row("warnings", &|s| {
        if s.summary.warnings.is_empty() {
            "none".into()
        } else {
            s.summary.warnings.join(" · ")
        }
    }));
    table(out, "Captures", &head, &rows);
}

fn probe_rows(recs: &[ProbeRecord]) -> Vec<Vec<String>> {
    recs.iter()
        .map(|r| {
            vec![
                r.layer.to_string(),
                r.task.clone(),
                r.pooling.clone(),
                r.split.clone(),
                r.n_train.to_string(),
                r.n_test.to_string(),
                r.n_classes.to_string(),
                f3(r.accuracy),
                format!("{}–{}", f3(r.ci_low), f3(r.ci_high)),
                f3(r.macro_f1),
                f3(r.balanced_accuracy),
                f3(r.majority_baseline),
                f3(r.control_accuracy),
                f3(r.selectivity),
                f3(r.c),
            ]
        })
        .collect()
}

fn purity_rows(recs: &[PurityRecord]) -> Vec<Vec<String>> {
    recs.iter()
        .map(|r| {
            vec![
                r.layer.to_string(),
                r.label.clone(),
                f3(r.silhouette),
                f3(r.knn_purity),
                f3(r.knn_purity_2d),
                f3(r.trustworthiness),
                f3(r.cluster_purity),
                f3(r.label_purity),
                f3(r.pnmi),
                f3(r.variance_ratio),
            ]
        })
        .collect()
}

const PROBE_HEAD: [&str; 15] = [
    "layer",
    "task",
    "pooling",
    "split",
    "train",
    "test",
    "classes",
    "accuracy",
    "95% interval",
    "macro F1",
    "balanced acc.",
    "majority",
    "control",
    "selectivity",
    "C",
];
const PURITY_HEAD: [&str; 10] = [
    "layer",
    "label",
    "silhouette",
    "k-NN purity",
    "k-NN purity (map)",
    "trustworthiness",
    "cluster purity",
    "label purity",
    "PNMI",
    "variance ratio",
];

fn describe_options(v: &serde_json::Value) -> String {
    match v {
        serde_json::Value::Object(m) if !m.is_empty() => m
            .iter()
            .map(|(k, v)| {
                format!(
                    "{k} = {}",
                    if let serde_json::Value::String(s) = v {
                        s.clone()
                    } else {
                        v.to_string()
                    }
                )
            })
            .collect::<Vec<_>>()
            .join(", "),
        serde_json::Value::Null => "not recorded".into(),
        v => v.to_string(),
    }
}

fn distinct<T: PartialEq + Clone>(it: impl Iterator<Item = T>) -> Vec<T> {
    let mut v: Vec<T> = Vec::new();
    for x in it {
        if !v.contains(&x) {
            v.push(x);
        }
    }
    v
}

fn methods_html(out: &mut String, inp: &ReportInputs) {
    let m: &Methods = &inp.methods;
    let mut p = String::new();
    let caps: Vec<String> = inp
        .captures
        .iter()
        .map(|s| {
            let s = &s.summary;
            format!(
                "“{}” ({} frames in {} utterances from {} speakers, {} layers, labels from {})",
                s.name,
                s.frames,
                s.utterances,
                s.speakers,
                s.layers.len(),
                s.label_source
            )
        })
        .collect();
    let _ = write!(
        p,
        "voxstrata {} analysed {}. ",
        m.version,
        caps.join(" and ")
    );
    for sec in &inp.captures {
        let name = &sec.summary.name;
        if sec.probe.is_empty() {
            let _ = write!(p, "No probe results were available for “{name}”. ");
        } else {
            let tasks = distinct(sec.probe.iter().map(|r| r.task.clone()));
            let parts: Vec<String> = tasks
                .iter()
                .map(|t| {
                    let rs: Vec<&ProbeRecord> = sec.probe.iter().filter(|r| &r.task == t).collect();
                    let split = distinct(rs.iter().map(|r| r.split.clone())).join("/");
                    let pool = distinct(rs.iter().map(|r| r.pooling.clone())).join("/");
                    let (trn_lo, trn_hi) = (rs.iter().map(|r| r.n_train).min().unwrap_or(0), rs.iter().map(|r| r.n_train).max().unwrap_or(0));
                    let (tst_lo, tst_hi) = (rs.iter().map(|r| r.n_test).min().unwrap_or(0), rs.iter().map(|r| r.n_test).max().unwrap_or(0));
                    let range = |a: usize, b: usize| if a == b { a.to_string() } else { format!("{a}–{b}") };
                    format!(
                        "{t} ({} classes; {pool} pooling; {split}-disjoint split; {} training and {} test examples per layer)",
                        rs.iter().map(|r| r.n_classes).max().unwrap_or(0),
                        range(trn_lo, trn_hi),
                        range(tst_lo, tst_hi)
                    )
                })
                .collect();
            let _ = write!(
                p,
                "On “{name}”, a linear probe (multinomial logistic regression) was trained on every layer for {}; each accuracy is shown with its 95% interval beside the majority-class baseline and a control task (Hewitt & Liang 2019): every labelled segment (every utterance for the speaker task) was given a random label drawn from the training class frequencies, and the same probe with the same penalty was trained on it; selectivity is accuracy minus control accuracy. ",
                parts.join(", ")
            );
            let opt = inp
                .methods
                .options
                .iter()
                .find(|(k, _)| k == &format!("probe {name}") || k == "probe")
                .map(|(_, v)| v);
            if let Some(o) = opt {
                if let Some(alphas) = o.get("alphas").and_then(|a| a.as_array()) {
                    let grid: Vec<String> = alphas.iter().map(|a| a.to_string()).collect();
                    let inner = o
                        .get("inner_fraction")
                        .map(|v| v.to_string())
                        .unwrap_or_else(|| "a share".into());
                    let _ = write!(
                        p,
                        "The L2 penalty of each probe was chosen from α ∈ {{{}}} per training item (C = 1/(α·n)) by accuracy on {inner} of the training groups held out. ",
                        grid.join(", ")
                    );
                }
                if let Some(b) = o.get("bootstrap") {
                    let _ = write!(
                        p,
                        "Intervals come from {b} cluster-bootstrap resamples of the test set. "
                    );
                }
            }
        }
        match &sec.maps {
            Some(mp) => {
                let o = m
                    .options
                    .iter()
                    .find(|(k, _)| k == &format!("map {name}"))
                    .map(|(_, v)| v.clone())
                    .unwrap_or(serde_json::Value::Null);
                let num = |v: &serde_json::Value| v.as_f64().map(|x| format!("{x}"));
                let how = match o["method"].as_str() {
                    Some("tsne") => format!(
                        "t-SNE (van der Maaten & Hinton 2008) after PCA to {} dimensions, perplexity {}, {} iterations with early exaggeration {} then {} more, each layer started from the previous layer's map scaled to standard deviation 1e-4",
                        num(&o["pca_dims"]).unwrap_or("?".into()),
                        num(&o["tsne"]["perplexity"]).unwrap_or("?".into()),
                        num(&o["tsne"]["early_iterations"]).unwrap_or("?".into()),
                        num(&o["tsne"]["exaggeration"]).unwrap_or("?".into()),
                        num(&o["tsne"]["iterations"]).unwrap_or("?".into())
                    ),
                    Some("pca") => "the first two principal components, aligned layer to layer by orthogonal Procrustes".to_string(),
                    _ => "a 2-D embedding".to_string(),
                };
                let _ = write!(
                    p,
                    "Its 2-D maps place the same {} sampled frames (up to {} per speaker × phone cell) for each of {} layers, drawn by {how}; purity is measured on those frames with k = {} nearest neighbours and k-means with {} clusters (Hsu et al. 2021). ",
                    mp.frames.len(),
                    num(&o["per_cell_used"]).unwrap_or("?".into()),
                    mp.layers.len(),
                    num(&o["knn_k_used"]).unwrap_or("?".into()),
                    num(&o["kmeans_k_used"]).unwrap_or("?".into()),
                );
            }
            None => {
                let _ = write!(p, "No layer maps were available for “{name}”. ");
            }
        }
    }
    if let Some(c) = &inp.compare {
        let o = m
            .options
            .iter()
            .find(|(k, _)| k == "compare")
            .map(|(_, v)| v.clone())
            .unwrap_or(serde_json::Value::Null);
        let kernel = c.cka.first().map(|r| r.kernel.name()).unwrap_or("linear");
        let estimator = c.cka.first().map(|r| r.estimator.name()).unwrap_or("full");
        let n = c.cka.first().map(|r| r.n_frames).unwrap_or(0);
        let _ = write!(
            p,
            "The two captures were compared layer by layer with {kernel} CKA (Kornblith et al. 2019, {estimator} HSIC estimate on {n} paired frames) over {} layer pairs, and by probes trained with the same split and seed on both, tested with McNemar's test on the paired test predictions and a paired speaker bootstrap ({} resamples) of the accuracy difference ({} layer–task pairs, {} of the test groups held out). ",
            c.cka.len(),
            o["bootstrap"].as_u64().map(|b| b.to_string()).unwrap_or("?".into()),
            c.probe_delta.len(),
            o["test_fraction"].as_f64().map(|f| format!("{:.0}%", f * 100.0)).unwrap_or("?".into()),
        );
    }
    let _ = write!(p, "Every random choice was seeded with {}; the same seed and inputs give the same numbers whatever the thread count.", m.seed);
    let _ = write!(out, "<p>{}</p>", esc(&p));
    if !m.options.is_empty() {
        out.push_str("<dl class=\"options\">");
        for (k, v) in &m.options {
            let _ = write!(
                out,
                "<dt>{}</dt><dd>{}</dd>",
                esc(k),
                esc(&describe_options(v))
            );
        }
        out.push_str("</dl>");
    }
    let rows: Vec<Vec<String>> = m
        .hashes
        .iter()
        .map(|h| {
            vec![
                h.capture.clone(),
                h.file.clone(),
                h.bytes.to_string(),
                h.sha256.clone(),
            ]
        })
        .collect();
    table(
        out,
        "Input files (SHA-256)",
        &["capture", "file", "bytes", "SHA-256"],
        &rows,
    );
    if !m.timings.is_empty() {
        let rows: Vec<Vec<String>> = m
            .timings
            .iter()
            .map(|(k, t)| vec![k.clone(), format!("{t:.2}")])
            .collect();
        table(out, "Time per step", &["step", "seconds"], &rows);
    }
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
    let _ = write!(
        o,
        "<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\"><meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\
<meta http-equiv=\"Content-Security-Policy\" content=\"default-src 'none'; img-src data:; style-src 'unsafe-inline'; script-src 'unsafe-inline'\">\
<meta name=\"generator\" content=\"voxstrata {}\"><title>{}</title><style>{}</style></head><body>",
        esc(&inp.methods.version),
        esc(title),
        STYLE
    );
    let has_maps = inp
        .captures
        .iter()
        .any(|c| c.maps.as_ref().is_some_and(|m| !m.layers.is_empty()));
    let _ = write!(o, "<header><h1>{}</h1><nav><a href=\"#analysed\">Analysed</a><a href=\"#headline\">Phone and speaker</a><a href=\"#maps\">Layer maps</a>", esc(title));
    if inp.compare.is_some() {
        o.push_str("<a href=\"#compare\">Comparison</a>");
    }
    o.push_str(
        "<a href=\"#numbers\">Numbers</a><a href=\"#methods\">Methods</a></nav></header><main>",
    );

    o.push_str("<section id=\"analysed\"><h2>What was analysed</h2>");
    summary_table(&mut o, &inp.captures);
    o.push_str("</section>");

    o.push_str("<section id=\"headline\"><h2>Phone and speaker across layers</h2>");
    let mut any = false;
    for sec in &inp.captures {
        if let Some((svg, caption)) = headline_svg(sec) {
            any = true;
            let _ = write!(
                o,
                "<figure class=\"headline\">{svg}<figcaption><b>{}.</b> Probe accuracy (solid, with 95% interval) and k-NN purity (dashed) per layer for phone and speaker. {}</figcaption></figure>",
                esc(&sec.summary.name),
                esc(&caption)
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
        figure_img(&mut o, f);
    }
    o.push_str("</section>");

    o.push_str("<section id=\"maps\"><h2>Layer maps</h2>");
    if has_maps {
        o.push_str(
            "<div id=\"explorer\" class=\"explorer\"><div class=\"controls\">\
<label id=\"vx-set-label\">capture <select id=\"vx-set\"></select></label>\
<label>layer <input type=\"range\" id=\"vx-layer\" min=\"0\" max=\"0\" step=\"1\" value=\"0\"></label><output id=\"vx-layer-name\"></output>\
<label>colour by <select id=\"vx-colour\"></select></label></div>\
<div class=\"stage\"><canvas id=\"vx-canvas\" width=\"900\" height=\"600\" aria-label=\"map of the selected layer\"></canvas><div id=\"vx-tip\" class=\"tip\" hidden></div></div>\
<div id=\"vx-legend\" class=\"legend\"></div>\
<p class=\"hint\">Slider or ← → keys: move between layers. Hover a point: its utterance, time, speaker and phone. Click a legend entry: highlight that label (click again to clear).</p></div>",
        );
    } else {
        o.push_str("<p class=\"missing\">No layer maps were available in this run.</p>");
    }
    for f in inp
        .figures
        .iter()
        .filter(|f| f.section == FigureSection::Maps)
    {
        figure_img(&mut o, f);
    }
    o.push_str("</section>");

    if let Some(c) = &inp.compare {
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
            figure_img(&mut o, f);
        }
        let rows: Vec<Vec<String>> = c
            .probe_delta
            .iter()
            .map(|d| {
                vec![
                    d.layer.to_string(),
                    d.task.clone(),
                    f3(d.accuracy_a),
                    f3(d.accuracy_b),
                    f3(d.delta),
                    format!("{} to {}", f3(d.ci_low), f3(d.ci_high)),
                    pvalue(d.mcnemar_p),
                    format!("{} / {}", d.b, d.c),
                ]
            })
            .collect();
        if !rows.is_empty() {
            let a = format!("accuracy {}", c.name_a);
            let b = format!("accuracy {}", c.name_b);
            let only = format!("right on {} only / {} only", c.name_a, c.name_b);
            table(
                &mut o,
                "Probe accuracy per layer in both captures (difference with its paired speaker-bootstrap 95% interval; McNemar's test on paired predictions)",
                &["layer", "task", &a, &b, "difference", "95% interval", "McNemar p", &only],
                &rows,
            );
        }
        o.push_str("</section>");
    }

    o.push_str("<section id=\"numbers\"><h2>Numbers behind the figures</h2>");
    for sec in &inp.captures {
        let name = &sec.summary.name;
        if !sec.probe.is_empty() {
            table(
                &mut o,
                &format!("Probes: {name}"),
                &PROBE_HEAD,
                &probe_rows(&sec.probe),
            );
        }
        if !sec.purity.is_empty() {
            table(
                &mut o,
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
            table(&mut o, "CKA", &[&a, &b, "CKA"], &rows);
        }
    }
    o.push_str("</section>");

    notes_html(&mut o, inp);
    o.push_str("<section id=\"methods\"><h2>Methods</h2>");
    methods_html(&mut o, inp);
    o.push_str("</section></main>");
    let _ = write!(o, "<footer>Made by voxstrata {}. This page is one file: it needs no network and nothing beside it.</footer>", esc(&inp.methods.version));

    if has_maps {
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
    o.push_str("</body></html>\n");
    o
}

#[cfg(test)]
mod tests {
    use super::*;

    const HOSTILE: &str = "</script><script>alert(1)</script>\"'&<b>\u{2028}\u{2029}";

    #[test]
    fn html_escape_leaves_no_markup() {
        let e = esc(HOSTILE);
        assert!(!e.contains('<') && !e.contains('>') && !e.contains('"') && !e.contains('\''));
        assert_eq!(esc("a&b"), "a&amp;b");
    }

    #[test]
    fn script_json_cannot_close_the_script_and_round_trips() {
        let v = serde_json::json!({ "label": HOSTILE });
        let s = script_json(&v);
        assert!(!s.contains('<') && !s.contains('>') && !s.contains('&'));
        assert!(!s.contains('\u{2028}') && !s.contains('\u{2029}'));
        // Still the same JSON for the browser's parser.
        let back: serde_json::Value = serde_json::from_str(&s).unwrap();
        assert_eq!(back, v);
    }

    #[test]
    fn base64_matches_rfc4648_examples() {
        // RFC 4648 section 10 test vectors.
        for (i, o) in [
            ("", ""),
            ("f", "Zg=="),
            ("fo", "Zm8="),
            ("foo", "Zm9v"),
            ("foob", "Zm9vYg=="),
            ("fooba", "Zm9vYmE="),
            ("foobar", "Zm9vYmFy"),
        ] {
            assert_eq!(base64(i.as_bytes()), o);
        }
    }

    #[test]
    fn crossover_finds_phone_overtaking_speaker() {
        let l = [0, 1, 2, 3, 4];
        let phone = [0.2, 0.3, 0.5, 0.7, 0.8];
        let speaker = [0.9, 0.8, 0.6, 0.4, 0.3];
        assert_eq!(
            crossover(&l, &phone, &speaker),
            Some(Crossover {
                layer: 3,
                kind: CrossKind::PhoneOvertakes
            })
        );
    }

    #[test]
    fn crossover_falls_back_to_speaker_half_range() {
        // Phone stays below speaker; speaker peaks at layer 1 (0.9) with range 0.5..0.9, so
        // the middle is 0.7 and layer 3 (0.65) is the first below it.
        let l = [0, 1, 2, 3, 4];
        let phone = [0.1, 0.2, 0.3, 0.35, 0.4];
        let speaker = [0.8, 0.9, 0.75, 0.65, 0.5];
        assert_eq!(
            crossover(&l, &phone, &speaker),
            Some(Crossover {
                layer: 3,
                kind: CrossKind::SpeakerBelowHalf
            })
        );
        assert_eq!(crossover(&l, &phone, &[0.5; 5]), None);
    }
}

#[cfg(test)]
mod page_tests {
    use super::*;
    use crate::records::compare::{CkaRecord, ProbeDelta};

    fn section(name: &str) -> CaptureSection {
        CaptureSection {
            summary: summary(name),
            probe: vec![],
            purity: vec![],
            maps: None,
            notes: vec![format!("probe: a note about {name}")],
        }
    }

    fn summary(name: &str) -> crate::analysis::inspect::Summary {
        crate::analysis::inspect::Summary {
            name: name.into(),
            path: format!("/data/{name}"),
            label_source: "frames.tsv".into(),
            hop_s: 0.02,
            frames: 10,
            utterances: 2,
            speakers: 2,
            layers: vec![],
            tasks: vec![],
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
