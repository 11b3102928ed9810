//! The headline figure: phone and speaker probe accuracy (with 95% bands) and k-NN purity
//! across layers on one plot, majority baselines dotted, and the layer where phone overtakes
//! speaker (or speaker falls half way, [`crate::analysis::stats::half_fall`]) marked.

use std::fmt::Write;

use super::{esc, hex, CaptureSection};
use crate::records::map::PurityRecord;
use crate::records::probe::ProbeRecord;
use crate::render::{category_colours, Rgb};

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
/// where speaker falls below the middle between its peak and its lowest value after the peak
/// (the one rule of [`crate::analysis::stats::half_fall`]; common practice for a readable
/// marker).
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
    let speaker: Vec<(usize, f64)> = pts.iter().map(|&(l, _, s)| (l, s)).collect();
    crate::analysis::stats::half_fall(&speaker)
        .and_then(|h| h.layer)
        .map(|layer| Crossover {
            layer,
            kind: CrossKind::SpeakerBelowHalf,
        })
}

/// Per-layer value of one measure for one task.
pub(super) struct Series {
    layers: Vec<usize>,
    value: Vec<f64>,
    low: Vec<f64>,
    high: Vec<f64>,
}

pub(super) fn probe_series(
    recs: &[ProbeRecord],
    task: &str,
    f: impl Fn(&ProbeRecord) -> f64,
) -> Series {
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

pub(super) fn purity_value(r: &PurityRecord) -> Option<f64> {
    r.knn_purity.or(r.cluster_purity)
}

pub(super) fn purity_series(recs: &[PurityRecord], task: &str) -> Series {
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

pub(super) fn aligned(a: &Series, b: &Series) -> (Vec<usize>, Vec<f64>, Vec<f64>) {
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
pub(super) fn task_colours() -> (Rgb, Rgb) {
    let c = category_colours(2);
    (c[0], c[1])
}

/// One curve of the headline figure: its legend name, colour, values and dash pattern.
type Line = (String, Rgb, Series, &'static str);

/// Plot geometry of the headline figure: size, margins and the layer range.
struct Frame {
    w: f64,
    h: f64,
    ml: f64,
    mt: f64,
    pw: f64,
    ph: f64,
    lmin: f64,
    lmax: f64,
}

impl Frame {
    fn new(lmin: f64, lmax: f64) -> Frame {
        let (w, h) = (760.0, 360.0);
        let (ml, mr, mt, mb) = (52.0, 200.0, 34.0, 46.0);
        Frame {
            w,
            h,
            ml,
            mt,
            pw: w - ml - mr,
            ph: h - mt - mb,
            lmin,
            lmax,
        }
    }

    fn xs(&self, l: f64) -> f64 {
        if self.lmax > self.lmin {
            self.ml + (l - self.lmin) / (self.lmax - self.lmin) * self.pw
        } else {
            self.ml + self.pw / 2.0
        }
    }

    fn ys(&self, v: f64) -> f64 {
        self.mt + (1.0 - v.clamp(0.0, 1.0)) * self.ph
    }

    fn point(&self, l: usize, v: f64) -> String {
        format!("{:.1},{:.1}", self.xs(l as f64), self.ys(v))
    }
}

/// The curves of one capture: accuracy and purity per task, and the majority baselines.
fn headline_lines(sec: &CaptureSection) -> (Vec<Line>, Vec<(Rgb, Series)>) {
    let (pc, sc) = task_colours();
    let mut lines: Vec<Line> = Vec::new();
    let mut base: Vec<(Rgb, Series)> = Vec::new();
    for (t, c) in [("phone", pc), ("speaker", sc)] {
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
    (lines, base)
}

/// The headline figure for one capture: probe accuracy (with its confidence band) and k-NN
/// purity across layers for phone and speaker, majority baselines, and the crossover
/// marked. Returns the SVG and a sentence saying what the marker means.
pub fn headline_svg(sec: &CaptureSection) -> Option<(String, String)> {
    let (lines, base) = headline_lines(sec);
    if lines.is_empty() {
        return None;
    }
    let mut all_layers: Vec<usize> = lines
        .iter()
        .flat_map(|l| l.2.layers.iter().copied())
        .collect();
    all_layers.sort_unstable();
    all_layers.dedup();
    let f = Frame::new(
        all_layers[0] as f64,
        *all_layers.last().unwrap_or(&0) as f64,
    );
    let mut s = String::new();
    let _ = write!(
        s,
        r#"<svg xmlns="http://www.w3.org/2000/svg" class="fig" viewBox="0 0 {w} {h}" width="{w}" height="{h}" role="img" aria-label="probe accuracy and purity across layers" font-family="system-ui, 'DejaVu Sans', sans-serif" font-size="12">"#,
        w = f.w,
        h = f.h
    );
    draw_axes(&mut s, &f, &all_layers);
    draw_baselines(&mut s, &f, &base);
    for line in &lines {
        draw_line(&mut s, &f, line);
    }
    let caption = draw_crossover(&mut s, &f, sec);
    draw_legend(&mut s, &f, &lines, !base.is_empty());
    s.push_str("</svg>");
    Some((s, caption))
}

/// Grid, ticks and axis titles.
fn draw_axes(s: &mut String, f: &Frame, all_layers: &[usize]) {
    let (ml, mt, pw, ph) = (f.ml, f.mt, f.pw, f.ph);
    for k in 0..=5 {
        let v = k as f64 / 5.0;
        let y = f.ys(v);
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
            let x = f.xs(l as f64);
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
        f.h - 8.0,
        mt + ph / 2.0
    );
}

/// Majority baselines: thin dotted lines.
fn draw_baselines(s: &mut String, f: &Frame, base: &[(Rgb, Series)]) {
    for (c, b) in base {
        let pts: Vec<String> = b
            .layers
            .iter()
            .zip(&b.value)
            .filter(|(_, v)| v.is_finite())
            .map(|(&l, &v)| f.point(l, v))
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
}

/// One curve: its confidence band when it has one, the line, and its point markers
/// (filled circles for accuracy, open squares for purity).
fn draw_line(s: &mut String, f: &Frame, (_, c, ser, dash): &Line) {
    let col = hex(*c);
    if ser.low.len() == ser.layers.len()
        && ser.low.iter().chain(&ser.high).all(|v| v.is_finite())
        && ser.layers.len() > 1
    {
        let mut pts: Vec<String> = ser
            .layers
            .iter()
            .zip(&ser.high)
            .map(|(&l, &v)| f.point(l, v))
            .collect();
        pts.extend(
            ser.layers
                .iter()
                .zip(&ser.low)
                .rev()
                .map(|(&l, &v)| f.point(l, v)),
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
        .map(|(&l, &v)| (f.xs(l as f64), f.ys(v)))
        .collect();
    let text: Vec<String> = pts.iter().map(|(x, y)| format!("{x:.1},{y:.1}")).collect();
    let _ = write!(
        s,
        r#"<polyline points="{}" fill="none" stroke="{col}" stroke-width="2.2" stroke-dasharray="{dash}" stroke-linejoin="round"/>"#,
        text.join(" ")
    );
    for (x, y) in &pts {
        if dash.is_empty() {
            let _ = write!(
                s,
                r#"<circle cx="{x:.1}" cy="{y:.1}" r="3.2" fill="{col}"/>"#
            );
        } else {
            let _ = write!(
                s,
                r##"<rect x="{:.1}" y="{:.1}" width="5" height="5" fill="#fff" stroke="{col}" stroke-width="1.5"/>"##,
                x - 2.5,
                y - 2.5
            );
        }
    }
}

/// The crossover: from probe accuracy when both tasks have it, else from purity. Draws its
/// marker and returns the caption sentence.
fn draw_crossover(s: &mut String, f: &Frame, sec: &CaptureSection) -> String {
    let pick = |get: &dyn Fn(&str) -> Series| {
        let (a, b) = (get("phone"), get("speaker"));
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
    let Some((c, what)) = cross else {
        return "No crossover: the phone and speaker curves do not cross and speaker never falls below half its range.".to_string();
    };
    let x = f.xs(c.layer as f64);
    let label = match c.kind {
        CrossKind::PhoneOvertakes => format!("phone overtakes speaker at layer {}", c.layer),
        CrossKind::SpeakerBelowHalf => format!("speaker below half its range at layer {}", c.layer),
    };
    let anchor = if x > f.ml + f.pw * 0.6 {
        "end"
    } else {
        "start"
    };
    let tx = if anchor == "end" { x - 5.0 } else { x + 5.0 };
    let _ = write!(
        s,
        r##"<line x1="{x:.1}" x2="{x:.1}" y1="{:.1}" y2="{:.1}" stroke="#222" stroke-width="1.2" stroke-dasharray="4 3"/><text x="{tx:.1}" y="{:.1}" text-anchor="{anchor}" fill="#222" font-weight="bold">{}</text>"##,
        f.mt - 12.0,
        f.mt + f.ph,
        f.mt - 16.0,
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

/// Legend on the right: one entry per curve, then the baseline and the interval band.
fn draw_legend(s: &mut String, f: &Frame, lines: &[Line], has_base: bool) {
    let lx = f.ml + f.pw + 18.0;
    let mut ly = f.mt + 6.0;
    for (name, c, _, dash) in lines {
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
    if has_base {
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
}

#[cfg(test)]
mod tests {
    use super::super::{base64, script_json};
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
