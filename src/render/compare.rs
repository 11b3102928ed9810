//! Pictures of a checkpoint comparison: the CKA heatmap (A layers × B layers, with a colour
//! bar and the values in the cells when there are few layers), a bar chart of 1 − CKA on
//! matching layer numbers (most changed first), and probe accuracy curves of A and B with
//! their bootstrap bands, one panel per task.

use plotters::coord::types::RangedCoordf64;
use plotters::coord::Shift;
use plotters::prelude::*;

use crate::records::compare::{CompareReport, Kernel, ProbeDelta};
use crate::render::{category_colours, e2s, ramp, text, Rgb};

/// Most layers per axis for which the values are printed in the cells.
pub const CELL_TEXT_MAX_LAYERS: usize = 16;

/// CKA between every layer of A (rows) and every layer of B (columns).
pub struct CkaHeatmap {
    /// Names of A and B.
    pub names: (String, String),
    /// Layer numbers of A (rows, top to bottom).
    pub layers_a: Vec<usize>,
    /// Layer numbers of B (columns, left to right).
    pub layers_b: Vec<usize>,
    /// values[i][j] = CKA(A layer i, B layer j).
    pub values: Vec<Vec<f64>>,
    /// Title.
    pub title: String,
}

impl CkaHeatmap {
    /// The heatmap of a report.
    pub fn from_report(r: &CompareReport) -> Self {
        let values = r
            .layers_a
            .iter()
            .map(|&la| {
                r.layers_b
                    .iter()
                    .map(|&lb| r.cka_at(la, lb).unwrap_or(f64::NAN))
                    .collect()
            })
            .collect();
        let kernel = match r.kernel {
            Kernel::Linear => "linear CKA",
            Kernel::Rbf => "RBF CKA",
        };
        CkaHeatmap {
            names: (r.captures[0].name.clone(), r.captures[1].name.clone()),
            layers_a: r.layers_a.clone(),
            layers_b: r.layers_b.clone(),
            values,
            title: format!("{kernel} between layers ({} frames)", r.pairing.used),
        }
    }

    fn cell(&self) -> u32 {
        let n = self.layers_a.len().max(self.layers_b.len()) as u32;
        (560 / n.max(1)).clamp(6, 48)
    }
}

/// Every `step`-th label so that at most ~20 are shown on an axis.
fn label_step(n: usize) -> usize {
    n.div_ceil(20).max(1)
}

/// Tick positions at the centres of cells 0, step, 2·step, ... of an axis of `n` cells.
fn centre_ticks(n: usize, step: usize) -> Vec<f64> {
    (0..n).step_by(step).map(|k| k as f64 + 0.5).collect()
}

/// Tick marks and labels for categorical cells, drawn by hand: plotters places its own
/// ticks at "nice" values, while cells need them at their centres. `ticks` holds (position in
/// data units, label); `on_x` picks the axis. Pixel positions come from the chart's mapping.
fn draw_cell_ticks<DB: DrawingBackend>(
    area: &DrawingArea<DB, Shift>,
    chart: &ChartContext<DB, Cartesian2d<RangedCoordf64, RangedCoordf64>>,
    ticks: &[(f64, String)],
    on_x: bool,
) -> Result<(), String> {
    use plotters::style::text_anchor::{HPos, Pos, VPos};
    let (xr, yr) = (chart.x_range(), chart.y_range());
    for (v, label) in ticks {
        let (px, py) = if on_x {
            chart.backend_coord(&(*v, yr.start))
        } else {
            chart.backend_coord(&(xr.start, *v))
        };
        if on_x {
            area.draw(&PathElement::new(vec![(px, py), (px, py + 5)], BLACK))
                .map_err(e2s)?;
            let st = text(13.0).pos(Pos::new(HPos::Center, VPos::Top));
            area.draw(&Text::new(label.clone(), (px, py + 8), st))
                .map_err(e2s)?;
        } else {
            area.draw(&PathElement::new(vec![(px - 5, py), (px, py)], BLACK))
                .map_err(e2s)?;
            let st = text(13.0).pos(Pos::new(HPos::Right, VPos::Center));
            area.draw(&Text::new(label.clone(), (px - 8, py), st))
                .map_err(e2s)?;
        }
    }
    Ok(())
}

impl super::Figure for CkaHeatmap {
    fn size(&self) -> (u32, u32) {
        let c = self.cell();
        let w = 110 + c * self.layers_b.len() as u32 + 130;
        let h = 70 + c * self.layers_a.len() as u32 + 80;
        (w.max(520), h.max(420))
    }

    fn draw<DB: DrawingBackend>(&self, area: &DrawingArea<DB, Shift>) -> Result<(), String> {
        let (w, _) = self.size();
        let (main, bar) = area.split_horizontally(w - 110);
        let (na, nb) = (self.layers_a.len(), self.layers_b.len());
        let la = self.layers_a.clone();
        let lb = self.layers_b.clone();
        let mut chart = ChartBuilder::on(&main)
            .caption(&self.title, text(17.0))
            .margin(12)
            .x_label_area_size(48)
            .y_label_area_size(56)
            .build_cartesian_2d(0f64..nb as f64, 0f64..na as f64)
            .map_err(e2s)?;
        chart
            .configure_mesh()
            .disable_mesh()
            .x_labels(0)
            .y_labels(0)
            .x_desc(format!("layer of {}", self.names.1))
            .y_desc(format!("layer of {}", self.names.0))
            .label_style(text(13.0))
            .axis_desc_style(text(14.0))
            .draw()
            .map_err(e2s)?;
        self.draw_cells(&mut chart)?;
        let xt: Vec<(f64, String)> = centre_ticks(nb, label_step(nb))
            .into_iter()
            .map(|v| (v, lb[v as usize].to_string()))
            .collect();
        // Row 0 (first A layer) is drawn at the top.
        let yt: Vec<(f64, String)> = (0..na)
            .step_by(label_step(na))
            .map(|k| ((na - 1 - k) as f64 + 0.5, la[k].to_string()))
            .collect();
        draw_cell_ticks(&main, &chart, &xt, true)?;
        draw_cell_ticks(&main, &chart, &yt, false)?;
        draw_colour_bar(&bar)
    }
}

impl CkaHeatmap {
    /// One coloured cell per layer pair, with its value written in when the grid is small
    /// enough to read it. Row 0 (the first layer of A) is at the top.
    fn draw_cells<DB: DrawingBackend>(
        &self,
        chart: &mut ChartContext<DB, Cartesian2d<RangedCoordf64, RangedCoordf64>>,
    ) -> Result<(), String> {
        let (na, nb) = (self.layers_a.len(), self.layers_b.len());
        let show_text = na <= super::compare::CELL_TEXT_MAX_LAYERS && nb <= CELL_TEXT_MAX_LAYERS;
        let fs = (self.cell() as f64 * 0.32).clamp(9.0, 13.0);
        for (i, row) in self.values.iter().enumerate() {
            let y0 = (na - 1 - i) as f64;
            for (j, &v) in row.iter().enumerate() {
                let colour = if v.is_finite() {
                    ramp(v)
                } else {
                    super::palette::OTHER
                };
                chart
                    .draw_series(std::iter::once(Rectangle::new(
                        [(j as f64, y0), (j as f64 + 1.0, y0 + 1.0)],
                        colour.filled(),
                    )))
                    .map_err(e2s)?;
                if show_text && v.is_finite() {
                    let ink = if v > 0.55 { WHITE } else { BLACK };
                    let style = text(fs)
                        .color(&ink)
                        .pos(plotters::style::text_anchor::Pos::new(
                            plotters::style::text_anchor::HPos::Center,
                            plotters::style::text_anchor::VPos::Center,
                        ));
                    chart
                        .draw_series(std::iter::once(Text::new(
                            format!("{v:.2}"),
                            (j as f64 + 0.5, y0 + 0.5),
                            style,
                        )))
                        .map_err(e2s)?;
                }
            }
        }
        Ok(())
    }
}

fn draw_colour_bar<DB: DrawingBackend>(area: &DrawingArea<DB, Shift>) -> Result<(), String> {
    let mut c = ChartBuilder::on(area)
        .margin_top(46)
        .margin_bottom(60)
        .margin_right(40)
        .y_label_area_size(40)
        .right_y_label_area_size(0)
        .build_cartesian_2d(0f64..1.0, 0f64..1.0)
        .map_err(e2s)?;
    c.configure_mesh()
        .disable_mesh()
        .disable_x_axis()
        .y_labels(6)
        .y_label_formatter(&|v| format!("{v:.1}"))
        .y_desc("CKA")
        .label_style(text(12.0))
        .axis_desc_style(text(13.0))
        .draw()
        .map_err(e2s)?;
    let steps = 100;
    c.draw_series((0..steps).map(|k| {
        let t0 = k as f64 / steps as f64;
        let t1 = (k + 1) as f64 / steps as f64;
        Rectangle::new([(0.0, t0), (1.0, t1)], ramp((t0 + t1) / 2.0).filled())
    }))
    .map_err(e2s)?;
    Ok(())
}

/// 1 − CKA between the same layer number in A and B, most changed first.
pub struct ChangeBars {
    /// (layer, 1 − CKA), sorted descending.
    pub bars: Vec<(usize, f64)>,
    /// Title.
    pub title: String,
}

impl ChangeBars {
    /// The bar chart of a report (None when no layer number is in both captures).
    pub fn from_report(r: &CompareReport) -> Option<Self> {
        let m = r.matching_layers();
        if m.is_empty() {
            return None;
        }
        Some(ChangeBars {
            bars: m
                .into_iter()
                .map(|(l, c)| (l, (1.0 - c).max(0.0)))
                .collect(),
            title: format!(
                "How much each layer changed: {} vs {}",
                r.captures[0].name, r.captures[1].name
            ),
        })
    }
}

impl super::Figure for ChangeBars {
    fn size(&self) -> (u32, u32) {
        ((140 + 38 * self.bars.len() as u32).clamp(480, 1400), 420)
    }

    fn draw<DB: DrawingBackend>(&self, area: &DrawingArea<DB, Shift>) -> Result<(), String> {
        let n = self.bars.len();
        let top = self.bars.iter().map(|b| b.1).fold(0.0f64, f64::max);
        let ymax = if top > 0.0 {
            (top * 1.18).min(1.05).max(top * 1.05)
        } else {
            0.05
        };
        let layers: Vec<usize> = self.bars.iter().map(|b| b.0).collect();
        let mut chart = ChartBuilder::on(area)
            .caption(&self.title, text(17.0))
            .margin(14)
            .x_label_area_size(46)
            .y_label_area_size(62)
            .build_cartesian_2d(0f64..n as f64, 0f64..ymax)
            .map_err(e2s)?;
        chart
            .configure_mesh()
            .disable_x_mesh()
            .x_labels(0)
            .y_labels(8)
            .max_light_lines(1)
            .bold_line_style(RGBColor(222, 222, 222))
            .light_line_style(RGBColor(242, 242, 242))
            .y_label_formatter(&|v| format!("{v:.2}"))
            .x_desc("layer (most changed first)")
            .y_desc("1 − CKA (same layer number)")
            .label_style(text(13.0))
            .axis_desc_style(text(14.0))
            .draw()
            .map_err(e2s)?;
        chart
            .draw_series(self.bars.iter().enumerate().map(|(j, &(_, v))| {
                Rectangle::new(
                    [(j as f64 + 0.15, 0.0), (j as f64 + 0.85, v)],
                    ramp(0.35 + 0.6 * (v / top.max(1e-12))).filled(),
                )
            }))
            .map_err(e2s)?;
        let xt: Vec<(f64, String)> = centre_ticks(n, label_step(n))
            .into_iter()
            .map(|v| (v, layers[v as usize].to_string()))
            .collect();
        draw_cell_ticks(area, &chart, &xt, true)?;
        if n <= 24 {
            let style = text(11.0).pos(plotters::style::text_anchor::Pos::new(
                plotters::style::text_anchor::HPos::Center,
                plotters::style::text_anchor::VPos::Bottom,
            ));
            chart
                .draw_series(self.bars.iter().enumerate().map(|(j, &(_, v))| {
                    Text::new(
                        format!("{v:.3}"),
                        (j as f64 + 0.5, v + ymax * 0.01),
                        style.clone(),
                    )
                }))
                .map_err(e2s)?;
        }
        Ok(())
    }
}

/// Height of the legend strip above the probe panels.
const LEGEND_STRIP: u32 = 34;

/// Probe accuracy per layer for A and B with their bootstrap bands, one panel per task.
pub struct ProbeCurves {
    /// Names of A and B.
    pub names: (String, String),
    /// Per task: (task, rows sorted by layer).
    pub tasks: Vec<(String, Vec<ProbeDelta>)>,
}

impl ProbeCurves {
    /// The curves of a report (None without probe deltas).
    pub fn from_report(r: &CompareReport) -> Option<Self> {
        Self::from_deltas(
            (r.captures[0].name.clone(), r.captures[1].name.clone()),
            &r.probe_delta,
        )
    }

    /// Curves from a list of deltas.
    pub fn from_deltas(names: (String, String), deltas: &[ProbeDelta]) -> Option<Self> {
        if deltas.is_empty() {
            return None;
        }
        let mut tasks: Vec<(String, Vec<ProbeDelta>)> = Vec::new();
        for d in deltas {
            match tasks.iter_mut().find(|t| t.0 == d.task) {
                Some(t) => t.1.push(d.clone()),
                None => tasks.push((d.task.clone(), vec![d.clone()])),
            }
        }
        for t in &mut tasks {
            t.1.sort_by_key(|d| d.layer);
        }
        Some(ProbeCurves { names, tasks })
    }
}

impl ProbeCurves {
    /// The strip above the panels: one swatch per capture and what the bands mean.
    fn draw_legend<DB: DrawingBackend>(
        &self,
        top: &DrawingArea<DB, Shift>,
        colours: &[Rgb],
    ) -> Result<(), String> {
        let names = [&self.names.0, &self.names.1];
        let mut x = 20i32;
        for (s, name) in names.iter().enumerate() {
            let c = colours[s];
            top.draw(&Rectangle::new(
                [(x, 12), (x + 26, 24)],
                c.mix(0.22).filled(),
            ))
            .map_err(e2s)?;
            top.draw(&PathElement::new(
                vec![(x, 18), (x + 26, 18)],
                c.stroke_width(3),
            ))
            .map_err(e2s)?;
            let st = text(13.0).pos(plotters::style::text_anchor::Pos::new(
                plotters::style::text_anchor::HPos::Left,
                plotters::style::text_anchor::VPos::Center,
            ));
            top.draw(&Text::new(name.to_string(), (x + 34, 18), st))
                .map_err(e2s)?;
            x += 34 + 8 * name.chars().count() as i32 + 40;
        }
        let st =
            text(12.0)
                .color(&RGBColor(90, 90, 90))
                .pos(plotters::style::text_anchor::Pos::new(
                    plotters::style::text_anchor::HPos::Left,
                    plotters::style::text_anchor::VPos::Center,
                ));
        top.draw(&Text::new(
            "bands: 95% bootstrap over test speakers (utterances for the speaker task)",
            (x, 18),
            st,
        ))
        .map_err(e2s)?;
        Ok(())
    }

    /// One task's panel: both captures' accuracy per layer with their bands.
    fn draw_panel<DB: DrawingBackend>(
        &self,
        panel: &DrawingArea<DB, Shift>,
        task: &str,
        ds: &[ProbeDelta],
        colours: &[Rgb],
    ) -> Result<(), String> {
        let lo = ds.iter().map(|d| d.layer).min().unwrap_or(0) as f64;
        let hi = ds.iter().map(|d| d.layer).max().unwrap_or(0) as f64;
        // A margin so end points are not clipped by the frame.
        let pad = ((hi - lo) * 0.03).max(0.3);
        let (lo, hi) = (lo - pad, hi + pad);
        // A continuous task's panel shows R², from 0 (or its lowest value, not below −1).
        let continuous = ds.iter().any(|d| d.is_continuous());
        let y0 = if continuous {
            let low = ds
                .iter()
                .flat_map(|d| [d.ci_low_a, d.ci_low_b, d.scores().0, d.scores().1])
                .filter(|v| v.is_finite())
                .fold(0.0f64, f64::min);
            ((low * 10.0).floor() / 10.0).max(-1.0)
        } else {
            0.0
        };
        let (what, y_desc) = if continuous {
            ("R² (continuous column)", "test R²")
        } else {
            ("accuracy", "test accuracy")
        };
        let mut chart = ChartBuilder::on(panel)
            .caption(format!("{task} probe {what}"), text(16.0))
            .margin(12)
            .x_label_area_size(40)
            .y_label_area_size(52)
            .build_cartesian_2d(lo..hi, y0..1.02)
            .map_err(e2s)?;
        chart
            .configure_mesh()
            .x_desc("layer")
            .y_desc(y_desc)
            .x_label_formatter(&|v| {
                if (v - v.round()).abs() < 1e-9 {
                    format!("{}", v.round())
                } else {
                    String::new()
                }
            })
            .y_label_formatter(&|v| format!("{v:.1}"))
            .label_style(text(12.0))
            .axis_desc_style(text(13.0))
            .max_light_lines(1)
            .bold_line_style(RGBColor(222, 222, 222))
            .light_line_style(RGBColor(242, 242, 242))
            .draw()
            .map_err(e2s)?;
        type Getter = fn(&ProbeDelta) -> (f64, f64, f64);
        let sides: [(&str, Getter); 2] = [
            (&self.names.0, |d| (d.scores().0, d.ci_low_a, d.ci_high_a)),
            (&self.names.1, |d| (d.scores().1, d.ci_low_b, d.ci_high_b)),
        ];
        for (s, (name, get)) in sides.iter().enumerate() {
            let c = colours[s];
            let mut band: Vec<(f64, f64)> = ds.iter().map(|d| (d.layer as f64, get(d).2)).collect();
            band.extend(ds.iter().rev().map(|d| (d.layer as f64, get(d).1)));
            chart
                .draw_series(std::iter::once(Polygon::new(band, c.mix(0.22).filled())))
                .map_err(e2s)?;
            chart
                .draw_series(LineSeries::new(
                    ds.iter().map(|d| (d.layer as f64, get(d).0)),
                    c.stroke_width(2),
                ))
                .map_err(e2s)?
                .label(name.to_string())
                .legend(move |(x, y)| {
                    PathElement::new(vec![(x, y), (x + 18, y)], c.stroke_width(3))
                });
            chart
                .draw_series(
                    ds.iter()
                        .map(|d| Circle::new((d.layer as f64, get(d).0), 3, c.filled())),
                )
                .map_err(e2s)?;
        }
        Ok(())
    }
}

impl super::Figure for ProbeCurves {
    fn size(&self) -> (u32, u32) {
        let k = self.tasks.len() as u32;
        (560 * k.min(3), 400 * k.div_ceil(3) + LEGEND_STRIP)
    }

    fn draw<DB: DrawingBackend>(&self, area: &DrawingArea<DB, Shift>) -> Result<(), String> {
        let k = self.tasks.len();
        let cols = k.min(3);
        let rows = k.div_ceil(3);
        let colours = category_colours(2);
        // One legend above all panels, where it can never cover a curve.
        let (top, body) = area.split_vertically(LEGEND_STRIP);
        self.draw_legend(&top, &colours)?;
        let panels = body.split_evenly((rows, cols));
        for ((task, ds), panel) in self.tasks.iter().zip(panels.iter()) {
            self.draw_panel(panel, task, ds, &colours)?;
        }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::render::Figure;

    fn delta(layer: usize, task: &str, a: f64, b: f64) -> ProbeDelta {
        ProbeDelta {
            layer,
            task: task.into(),
            n_train: 100,
            n_test: 50,
            accuracy_a: a,
            ci_low_a: a - 0.05,
            ci_high_a: a + 0.05,
            accuracy_b: b,
            ci_low_b: b - 0.04,
            ci_high_b: b + 0.04,
            delta: b - a,
            ci_low: b - a - 0.06,
            ci_high: b - a + 0.06,
            mcnemar_p: 0.01,
            mcnemar_method: crate::records::compare::McNemarMethod::ChiSquare,
            b: 3,
            c: 20,
            kind: "categorical".into(),
            r2_a: f64::NAN,
            r2_b: f64::NAN,
        }
    }

    #[test]
    fn figures_render_to_svg_with_their_labels() {
        let heat = CkaHeatmap {
            names: ("early".into(), "final".into()),
            layers_a: (0..4).collect(),
            layers_b: (0..3).collect(),
            values: (0..4)
                .map(|i| {
                    (0..3)
                        .map(|j| 1.0 / (1.0 + (i as f64 - j as f64).abs()))
                        .collect()
                })
                .collect(),
            title: "linear CKA".into(),
        };
        let svg = crate::render::to_svg(&heat).unwrap();
        assert!(svg.contains("0.50") && svg.contains("layer of final"));
        let bars = ChangeBars {
            bars: vec![(3, 0.4), (1, 0.1)],
            title: "change".into(),
        };
        assert!(crate::render::to_svg(&bars).unwrap().contains("0.400"));
        let ds: Vec<ProbeDelta> = (0..5)
            .flat_map(|l| {
                [
                    delta(l, "phone", 0.3 + 0.1 * l as f64, 0.35 + 0.1 * l as f64),
                    delta(l, "speaker", 0.8, 0.6),
                ]
            })
            .collect();
        let curves = ProbeCurves::from_deltas(("early".into(), "final".into()), &ds).unwrap();
        assert_eq!(curves.size(), (1120, 400 + LEGEND_STRIP));
        assert!(crate::render::to_svg(&curves)
            .unwrap()
            .contains("speaker probe accuracy"));
    }
}
