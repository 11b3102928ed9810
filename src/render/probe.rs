//! Probe pictures: accuracy across layers (one curve per task, the bootstrap interval as a
//! band, majority baseline dashed and control task dotted in the task's colour), with R² of
//! continuous tasks on a panel of its own (training-mean baseline dashed), and a
//! row-normalised confusion heatmap per task at its best layer.

use plotters::coord::types::RangedCoordf64;
use plotters::coord::Shift;
use plotters::prelude::*;
use plotters::style::text_anchor::{HPos, Pos, VPos};
use plotters::style::FontTransform;

use super::{category_colours, e2s, ramp, text};
use crate::records::probe::{BestConfusion, ProbeReport};

/// One task's curves.
struct TaskCurves {
    name: String,
    layers: Vec<f64>,
    acc: Vec<f64>,
    lo: Vec<f64>,
    hi: Vec<f64>,
    majority: Vec<f64>,
    control: Vec<f64>,
}

/// Scores across layers for every task: accuracy of the categorical tasks on one panel, R²
/// of the continuous tasks on a panel of their own below it (never on the accuracy axis).
pub struct LayerCurves {
    title: String,
    tasks: Vec<TaskCurves>,
    continuous: Vec<TaskCurves>,
}

/// R² of predicting the training mean, from a record's RMSEs and R² (SS_tot/n =
/// RMSE²/(1 − R²), so the baseline's R² is 1 − baseline RMSE²·(1 − R²)/RMSE²).
fn baseline_r2(x: &crate::records::probe::ProbeRecord) -> f64 {
    if x.rmse > 0.0 && x.r2 < 1.0 {
        1.0 - x.baseline_rmse * x.baseline_rmse * (1.0 - x.r2) / (x.rmse * x.rmse)
    } else {
        f64::NAN
    }
}

impl LayerCurves {
    /// Curves from a probe report.
    pub fn new(r: &ProbeReport) -> LayerCurves {
        let mut tasks: Vec<TaskCurves> = Vec::new();
        let mut continuous: Vec<TaskCurves> = Vec::new();
        for t in &r.tasks {
            let rows: Vec<_> = r.records.iter().filter(|x| x.task == t.task).collect();
            let is_cont = t.kind == "continuous";
            let name = format!(
                "{} ({}, {}-disjoint)",
                t.task,
                rows.first().map(|x| x.pooling.as_str()).unwrap_or(""),
                t.split.name()
            );
            let c = TaskCurves {
                name,
                layers: rows.iter().map(|x| x.layer as f64).collect(),
                acc: rows.iter().map(|x| x.score()).collect(),
                lo: rows.iter().map(|x| x.ci_low).collect(),
                hi: rows.iter().map(|x| x.ci_high).collect(),
                majority: rows
                    .iter()
                    .map(|x| {
                        if is_cont {
                            baseline_r2(x)
                        } else {
                            x.majority_baseline
                        }
                    })
                    .collect(),
                control: rows
                    .iter()
                    .map(|x| {
                        if is_cont {
                            x.control_r2
                        } else {
                            x.control_accuracy
                        }
                    })
                    .collect(),
            };
            if is_cont {
                continuous.push(c);
            } else {
                tasks.push(c);
            }
        }
        LayerCurves {
            title: format!("Probe scores by layer: {}", r.capture.name),
            tasks,
            continuous,
        }
    }

    fn panels(&self) -> usize {
        usize::from(!self.tasks.is_empty()) + usize::from(!self.continuous.is_empty())
    }
}

/// The x range (with padding) and the number of layers.
fn layer_range(tasks: &[&TaskCurves]) -> (f64, f64, usize) {
    let (x0, x1) = tasks
        .iter()
        .flat_map(|t| t.layers.iter().copied())
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), v| {
            (a.min(v), b.max(v))
        });
    let (x0, x1) = if x0.is_finite() {
        (x0, x1.max(x0 + 1.0))
    } else {
        (0.0, 1.0)
    };
    let pad = 0.15 * (x1 - x0).max(1.0) / 4.0;
    (x0 - pad, x1 + pad, (x1 - x0).round() as usize + 1)
}

/// The R² axis: from 0 (or the lowest value shown, floored to a tenth, but not below −1) to 1.
fn r2_range(tasks: &[TaskCurves]) -> (f64, f64) {
    let low = tasks
        .iter()
        .flat_map(|t| {
            t.lo.iter()
                .chain(&t.acc)
                .chain(&t.control)
                .chain(&t.majority)
        })
        .copied()
        .filter(|v| v.is_finite())
        .fold(0.0f64, f64::min);
    (((low * 10.0).floor() / 10.0).max(-1.0), 1.0)
}

/// One panel: `tasks` on an axis `y0..y1` described as `y_desc`.
#[allow(clippy::too_many_arguments)]
fn draw_panel<DB: DrawingBackend>(
    area: &DrawingArea<DB, Shift>,
    caption: &str,
    y_desc: &str,
    (y0, y1): (f64, f64),
    x: (f64, f64, usize),
    tasks: &[TaskCurves],
    colours: &[RGBColor],
) -> Result<(), String> {
    let mut chart = ChartBuilder::on(area)
        .caption(caption, text(20.0))
        .margin(14)
        .x_label_area_size(46)
        .y_label_area_size(58)
        .build_cartesian_2d(x.0..x.1, y0..y1)
        .map_err(e2s)?;
    chart
        .configure_mesh()
        .x_desc("layer")
        .y_desc(y_desc)
        .x_labels(x.2.min(16) + 1)
        .y_labels(11)
        .x_label_formatter(&|x| {
            if (x - x.round()).abs() < 1e-6 {
                format!("{}", x.round() as i64)
            } else {
                String::new()
            }
        })
        .y_label_formatter(&|y| format!("{y:.1}"))
        .label_style(text(13.0))
        .axis_desc_style(text(15.0))
        .light_line_style(RGBColor(235, 235, 235))
        .bold_line_style(RGBColor(215, 215, 215))
        .draw()
        .map_err(e2s)?;
    for (t, &col) in tasks.iter().zip(colours) {
        draw_task(&mut chart, t, col, (y0, y1))?;
    }
    Ok(())
}

impl super::Figure for LayerCurves {
    fn size(&self) -> (u32, u32) {
        (1100, if self.panels() > 1 { 1000 } else { 560 })
    }

    fn draw<DB: DrawingBackend>(&self, area: &DrawingArea<DB, Shift>) -> Result<(), String> {
        let every: Vec<&TaskCurves> = self.tasks.iter().chain(&self.continuous).collect();
        let x = layer_range(&every);
        let (w, h) = self.size();
        let (plot_area, legend_area) = area.split_horizontally(w as i32 - 300);
        let colours = category_colours(every.len().max(2));
        let (top, bottom) = if self.panels() > 1 {
            let (a, b) = plot_area.split_vertically(h as i32 / 2);
            (a, Some(b))
        } else {
            (plot_area.clone(), None)
        };
        let k = self.tasks.len();
        if !self.tasks.is_empty() {
            draw_panel(
                &top,
                &self.title,
                "held-out accuracy",
                (0.0, 1.0),
                x,
                &self.tasks,
                &colours[..k],
            )?;
        }
        if !self.continuous.is_empty() {
            let caption = if self.tasks.is_empty() {
                self.title.clone()
            } else {
                "Continuous columns: held-out R² by layer".to_string()
            };
            draw_panel(
                bottom.as_ref().unwrap_or(&top),
                &caption,
                "held-out R²",
                r2_range(&self.continuous),
                x,
                &self.continuous,
                &colours[k..],
            )?;
        }
        let names: Vec<&TaskCurves> = every;
        draw_legend(&legend_area, &names, &colours, !self.continuous.is_empty())
    }
}

/// One task's interval band, majority baseline (dashed), control task (dotted) and accuracy.
fn draw_task<DB: DrawingBackend>(
    chart: &mut ChartContext<DB, Cartesian2d<RangedCoordf64, RangedCoordf64>>,
    t: &TaskCurves,
    col: RGBColor,
    (y0, y1): (f64, f64),
) -> Result<(), String> {
    // Values beyond the axis (an R² far below 0) are drawn at its edge.
    let clip = |y: f64| y.clamp(y0, y1);
    let mut band: Vec<(f64, f64)> = t
        .layers
        .iter()
        .zip(&t.hi)
        .map(|(&x, &y)| (x, clip(y)))
        .collect();
    band.extend(
        t.layers
            .iter()
            .zip(&t.lo)
            .rev()
            .map(|(&x, &y)| (x, clip(y))),
    );
    chart
        .draw_series(std::iter::once(Polygon::new(band, col.mix(0.22).filled())))
        .map_err(e2s)?;
    let pts = |v: &[f64]| -> Vec<(f64, f64)> {
        t.layers
            .iter()
            .zip(v)
            .filter(|(_, y)| y.is_finite())
            .map(|(&x, &y)| (x, clip(y)))
            .collect()
    };
    chart
        .draw_series(DashedLineSeries::new(
            pts(&t.majority),
            9,
            6,
            col.stroke_width(2),
        ))
        .map_err(e2s)?;
    chart
        .draw_series(DashedLineSeries::new(
            pts(&t.control),
            2,
            5,
            col.stroke_width(3),
        ))
        .map_err(e2s)?;
    chart
        .draw_series(LineSeries::new(pts(&t.acc), col.stroke_width(3)).point_size(4))
        .map_err(e2s)?;
    Ok(())
}

/// A legend line sample 28 px long from `x0`, dashed with `dash` px on and `gap` px off.
fn legend_line<DB: DrawingBackend>(
    ar: &DrawingArea<DB, Shift>,
    x0: i32,
    y: i32,
    style: ShapeStyle,
    dash: i32,
    gap: i32,
) -> Result<(), String> {
    let mut x = x0;
    while x < x0 + 28 {
        let e = (x + dash).min(x0 + 28);
        ar.draw(&PathElement::new(vec![(x, y), (e, y)], style))
            .map_err(e2s)?;
        x += dash + gap;
    }
    Ok(())
}

/// Legend beside the chart, so it never hides a curve.
fn draw_legend<DB: DrawingBackend>(
    legend: &DrawingArea<DB, Shift>,
    tasks: &[&TaskCurves],
    colours: &[RGBColor],
    continuous: bool,
) -> Result<(), String> {
    let grey = RGBColor(90, 90, 90);
    let x0 = 10i32;
    let mut y = 70i32;
    for (t, &col) in tasks.iter().zip(colours) {
        legend_line(legend, x0, y, col.stroke_width(3), 28, 0)?;
        legend
            .draw(&Text::new(
                t.name.clone(),
                (x0 + 36, y),
                text(13.0).pos(Pos::new(HPos::Left, VPos::Center)),
            ))
            .map_err(e2s)?;
        y += 24;
    }
    y += 8;
    let baseline = if continuous {
        "majority / mean baseline (dashed)"
    } else {
        "majority baseline (dashed)"
    };
    for (label, dash, gap, wdt) in [(baseline, 9, 6, 2), ("control task (dotted)", 2, 5, 3)] {
        legend_line(legend, x0, y, grey.stroke_width(wdt), dash, gap)?;
        legend
            .draw(&Text::new(
                label,
                (x0 + 36, y),
                text(13.0).pos(Pos::new(HPos::Left, VPos::Center)),
            ))
            .map_err(e2s)?;
        y += 24;
    }
    legend
        .draw(&Rectangle::new(
            [(x0, y - 7), (x0 + 28, y + 7)],
            grey.mix(0.25).filled(),
        ))
        .map_err(e2s)?;
    legend
        .draw(&Text::new(
            "95% bootstrap interval",
            (x0 + 36, y),
            text(13.0).pos(Pos::new(HPos::Left, VPos::Center)),
        ))
        .map_err(e2s)?;
    Ok(())
}

/// Row-normalised confusion matrix of one task at its best layer.
pub struct ConfusionHeatmap {
    title: String,
    classes: Vec<String>,
    /// Row-normalised shares (NaN for classes without test items).
    share: Vec<Vec<f64>>,
}

impl ConfusionHeatmap {
    /// Heatmap from a best-layer confusion matrix.
    pub fn new(c: &BestConfusion) -> ConfusionHeatmap {
        let share = c
            .matrix
            .iter()
            .map(|row| {
                let s: u64 = row.iter().sum();
                row.iter()
                    .map(|&v| {
                        if s == 0 {
                            f64::NAN
                        } else {
                            v as f64 / s as f64
                        }
                    })
                    .collect()
            })
            .collect();
        ConfusionHeatmap {
            title: format!(
                "Confusion of '{}' at layer {} (rows: true class, normalised)",
                c.task, c.layer
            ),
            classes: c.classes.clone(),
            share,
        }
    }

    fn cell(&self) -> u32 {
        (640 / self.classes.len().max(1) as u32).clamp(12, 48)
    }

    fn label_px(&self) -> u32 {
        let longest = self
            .classes
            .iter()
            .map(|s| s.chars().count())
            .max()
            .unwrap_or(1) as u32;
        (longest * self.font_px() as u32 * 6 / 10 + 14).min(220)
    }

    fn font_px(&self) -> f64 {
        (self.cell() as f64 * 0.8).clamp(10.0, 14.0)
    }
}

impl super::Figure for ConfusionHeatmap {
    fn size(&self) -> (u32, u32) {
        let k = self.classes.len() as u32;
        let grid = k * self.cell();
        let w = (self.label_px() + grid + 110).max(560);
        let h = 60 + grid + self.label_px() + 40;
        (w, h)
    }

    fn draw<DB: DrawingBackend>(&self, area: &DrawingArea<DB, Shift>) -> Result<(), String> {
        let k = self.classes.len();
        let cell = self.cell() as i32;
        let left = self.label_px() as i32 + 10;
        let top = 60i32;
        let font = self.font_px();
        let (w, _) = self.size();
        area.draw(&Text::new(self.title.clone(), (12, 14), text(16.0)))
            .map_err(e2s)?;
        for (r, row) in self.share.iter().enumerate() {
            for (c, &v) in row.iter().enumerate() {
                let (x, y) = (left + c as i32 * cell, top + r as i32 * cell);
                let fill = if v.is_finite() {
                    ramp(v)
                } else {
                    RGBColor(250, 250, 250)
                };
                area.draw(&Rectangle::new(
                    [(x, y), (x + cell, y + cell)],
                    fill.filled(),
                ))
                .map_err(e2s)?;
                if k <= 15 && v.is_finite() {
                    let s = format!("{:.0}", 100.0 * v);
                    let colour = if v > 0.55 { WHITE } else { BLACK };
                    let style = text(font)
                        .color(&colour)
                        .pos(Pos::new(HPos::Center, VPos::Center));
                    area.draw(&Text::new(s, (x + cell / 2, y + cell / 2), style))
                        .map_err(e2s)?;
                }
            }
        }
        let grid = k as i32 * cell;
        area.draw(&Rectangle::new(
            [(left, top), (left + grid, top + grid)],
            RGBColor(120, 120, 120).stroke_width(1),
        ))
        .map_err(e2s)?;
        for (i, name) in self.classes.iter().enumerate() {
            let yc = top + i as i32 * cell + cell / 2;
            let style = text(font).pos(Pos::new(HPos::Right, VPos::Center));
            area.draw(&Text::new(name.clone(), (left - 5, yc), style))
                .map_err(e2s)?;
            let xc = left + i as i32 * cell + cell / 2;
            let style = text(font)
                .transform(FontTransform::Rotate270)
                .pos(Pos::new(HPos::Right, VPos::Center));
            area.draw(&Text::new(name.clone(), (xc, top + grid + 5), style))
                .map_err(e2s)?;
        }
        area.draw(&Text::new(
            "predicted class",
            (left + grid / 2, top + grid + self.label_px() as i32 + 14),
            text(14.0).pos(Pos::new(HPos::Center, VPos::Top)),
        ))
        .map_err(e2s)?;
        area.draw(&Text::new(
            "true class",
            (12, top - 8),
            text(14.0).pos(Pos::new(HPos::Left, VPos::Bottom)),
        ))
        .map_err(e2s)?;
        // Colour bar.
        let bx = (left + grid + 30).min(w as i32 - 70);
        let bh = grid.clamp(120, 320);
        for i in 0..bh {
            let t = 1.0 - i as f64 / (bh - 1) as f64;
            area.draw(&Rectangle::new(
                [(bx, top + i), (bx + 16, top + i + 1)],
                ramp(t).filled(),
            ))
            .map_err(e2s)?;
        }
        area.draw(&Rectangle::new(
            [(bx, top), (bx + 16, top + bh)],
            RGBColor(120, 120, 120).stroke_width(1),
        ))
        .map_err(e2s)?;
        for (t, s) in [(1.0, "100%"), (0.5, "50%"), (0.0, "0%")] {
            let y = top + ((1.0 - t) * (bh - 1) as f64) as i32;
            area.draw(&Text::new(
                s,
                (bx + 22, y),
                text(12.0).pos(Pos::new(HPos::Left, VPos::Center)),
            ))
            .map_err(e2s)?;
        }
        Ok(())
    }
}
