//! ABX error rate across layers: within speaker (solid) and across speaker (dashed) for each
//! capture, and below it the gap across − within (how much a change of talker still costs).

use plotters::coord::Shift;
use plotters::element::DashedPathElement;
use plotters::prelude::*;

use crate::records::abx::AbxRecord;
use crate::render::{category_colours, e2s, text};

/// One capture's ABX error rates.
pub struct AbxSeries {
    /// Capture name.
    pub name: String,
    /// (layer, error) within speaker, by layer.
    pub within: Vec<(usize, f64)>,
    /// (layer, error) across speaker, by layer.
    pub across: Vec<(usize, f64)>,
}

impl AbxSeries {
    /// The series of one capture's records.
    pub fn new(name: &str, records: &[AbxRecord]) -> AbxSeries {
        let pick = |cond: &str| {
            let mut v: Vec<(usize, f64)> = records
                .iter()
                .filter(|r| r.condition == cond && r.error_rate.is_finite())
                .map(|r| (r.layer, r.error_rate))
                .collect();
            v.sort_by_key(|p| p.0);
            v
        };
        AbxSeries {
            name: name.to_string(),
            within: pick("within"),
            across: pick("across"),
        }
    }

    /// (layer, across − within) where both exist.
    pub fn gap(&self) -> Vec<(usize, f64)> {
        self.across
            .iter()
            .filter_map(|&(l, a)| {
                self.within
                    .iter()
                    .find(|w| w.0 == l)
                    .map(|&(_, w)| (l, a - w))
            })
            .collect()
    }
}

/// The ABX figure: error rates (top) and the across − within gap (bottom).
pub struct AbxCurves {
    /// Label the items were made from.
    pub label: String,
    /// One series per capture.
    pub series: Vec<AbxSeries>,
}

fn layer_range(series: &[AbxSeries]) -> (f64, f64) {
    let layers: Vec<usize> = series
        .iter()
        .flat_map(|s| s.within.iter().chain(&s.across).map(|p| p.0))
        .collect();
    let lo = layers.iter().copied().min().unwrap_or(0) as f64;
    let hi = layers.iter().copied().max().unwrap_or(1) as f64;
    let pad = ((hi - lo) * 0.03).max(0.3);
    (lo - pad, hi + pad)
}

fn integer_ticks(v: &f64) -> String {
    if (v - v.round()).abs() < 1e-9 {
        format!("{}", v.round())
    } else {
        String::new()
    }
}

impl super::Figure for AbxCurves {
    fn size(&self) -> (u32, u32) {
        (1000, 720)
    }

    fn draw<DB: DrawingBackend>(&self, area: &DrawingArea<DB, Shift>) -> Result<(), String> {
        let colours = category_colours(self.series.len().max(2));
        let (x0, x1) = layer_range(&self.series);
        let (top, bottom) = area.split_vertically(440);
        let ymax = self
            .series
            .iter()
            .flat_map(|s| s.within.iter().chain(&s.across).map(|p| p.1))
            .fold(0.0f64, f64::max);
        // Head room above the curves for the legend.
        let ymax = (ymax * 1.6).clamp(0.05, 0.75);
        let mut chart = ChartBuilder::on(&top)
            .caption(
                format!(
                    "{} ABX error rate by layer (lower: more discriminable)",
                    self.label
                ),
                text(18.0),
            )
            .margin(14)
            .x_label_area_size(40)
            .y_label_area_size(58)
            .build_cartesian_2d(x0..x1, 0f64..ymax)
            .map_err(e2s)?;
        chart
            .configure_mesh()
            .x_desc("layer")
            .y_desc("ABX error rate")
            .x_label_formatter(&integer_ticks)
            .y_label_formatter(&|v| format!("{v:.2}"))
            .label_style(text(12.0))
            .axis_desc_style(text(13.0))
            .max_light_lines(1)
            .bold_line_style(RGBColor(222, 222, 222))
            .light_line_style(RGBColor(242, 242, 242))
            .draw()
            .map_err(e2s)?;
        for (s, c) in self.series.iter().zip(&colours) {
            let c = *c;
            for (pts, dashed, what) in [(&s.within, false, "within"), (&s.across, true, "across")] {
                if pts.is_empty() {
                    continue;
                }
                let line: Vec<(f64, f64)> = pts.iter().map(|&(l, v)| (l as f64, v)).collect();
                let style = c.stroke_width(if dashed { 2 } else { 3 });
                let series = if dashed {
                    chart.draw_series(DashedLineSeries::new(line.clone(), 8, 5, style))
                } else {
                    chart.draw_series(LineSeries::new(line.clone(), style))
                };
                let anno = series
                    .map_err(e2s)?
                    .label(format!("{}: {what} speaker", s.name));
                if dashed {
                    anno.legend(move |(x, y)| {
                        DashedPathElement::new(vec![(x, y), (x + 22, y)], 5, 3, c.stroke_width(2))
                    });
                } else {
                    anno.legend(move |(x, y)| {
                        PathElement::new(vec![(x, y), (x + 22, y)], c.stroke_width(3))
                    });
                }
                chart
                    .draw_series(line.iter().map(|&p| Circle::new(p, 3, c.filled())))
                    .map_err(e2s)?;
            }
        }
        chart
            .configure_series_labels()
            .position(SeriesLabelPosition::UpperRight)
            .background_style(WHITE.mix(0.9))
            .border_style(RGBColor(200, 200, 200))
            .label_font(text(12.0))
            .draw()
            .map_err(e2s)?;
        self.draw_gap(&bottom, &colours, (x0, x1))
    }
}

impl AbxCurves {
    fn draw_gap<DB: DrawingBackend>(
        &self,
        area: &DrawingArea<DB, Shift>,
        colours: &[crate::render::Rgb],
        (x0, x1): (f64, f64),
    ) -> Result<(), String> {
        let gaps: Vec<Vec<(usize, f64)>> = self.series.iter().map(|s| s.gap()).collect();
        let (lo, hi) = gaps
            .iter()
            .flatten()
            .fold((0.0f64, 0.0f64), |(a, b), p| (a.min(p.1), b.max(p.1)));
        let span = (hi - lo).max(0.02);
        let mut chart = ChartBuilder::on(area)
            .caption(
                "across − within speaker (the cost of a change of talker)",
                text(15.0),
            )
            .margin(14)
            .x_label_area_size(40)
            .y_label_area_size(58)
            .build_cartesian_2d(x0..x1, (lo - 0.1 * span)..(hi + 0.1 * span))
            .map_err(e2s)?;
        chart
            .configure_mesh()
            .x_desc("layer")
            .y_desc("error gap")
            .x_label_formatter(&integer_ticks)
            .y_label_formatter(&|v| format!("{v:.2}"))
            .label_style(text(12.0))
            .axis_desc_style(text(13.0))
            .max_light_lines(1)
            .bold_line_style(RGBColor(222, 222, 222))
            .light_line_style(RGBColor(242, 242, 242))
            .draw()
            .map_err(e2s)?;
        chart
            .draw_series(LineSeries::new(
                [(x0, 0.0), (x1, 0.0)],
                RGBColor(120, 120, 120).stroke_width(1),
            ))
            .map_err(e2s)?;
        for (g, c) in gaps.iter().zip(colours) {
            let pts: Vec<(f64, f64)> = g.iter().map(|&(l, v)| (l as f64, v)).collect();
            chart
                .draw_series(LineSeries::new(pts.clone(), c.stroke_width(2)))
                .map_err(e2s)?;
            chart
                .draw_series(pts.iter().map(|&p| Circle::new(p, 3, c.filled())))
                .map_err(e2s)?;
        }
        Ok(())
    }
}
