//! Figures of `voxstrata map`: a grid of 2-D maps (one panel per layer) coloured by one
//! label, with a legend of the most frequent labels (beyond 20, the 19 most frequent and a
//! grey "other"); and the purity metrics as curves across layers.

use plotters::coord::Shift;
use plotters::prelude::*;
use rand::seq::SliceRandom;
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;

use super::palette::{value_ramp, OTHER};
use super::{category_colours, e2s, text, Figure, FONT};
use crate::capture::UNLABELLED;
use crate::records::map::{MapReport, PurityRecord, SampleLabels};

/// Most legend entries before grouping into "other".
pub const MAX_LEGEND: usize = 20;

const PANEL: u32 = 300;
const LEGEND_W: u32 = 190;

/// Grid of map panels coloured by one label.
pub struct MapGrid<'a> {
    report: &'a MapReport,
    labels: &'a SampleLabels,
    /// Legend entries: (name, colour), in legend order (empty for a continuous label).
    entries: Vec<(String, RGBColor)>,
    /// For a continuous label: the value range of the colour bar (1st to 99th percentile).
    bar: Option<(f64, f64)>,
    /// Colour of each sampled frame (None: unlabelled, drawn grey).
    colour_of: Vec<RGBColor>,
    order: Vec<usize>,
    cols: u32,
    rows: u32,
}

impl<'a> MapGrid<'a> {
    /// Prepare the figure for one label.
    pub fn new(report: &'a MapReport, labels: &'a SampleLabels) -> Self {
        let (entries, colour_of, bar) = match &labels.values {
            Some(v) => {
                let (lo, hi) = clip_range(v);
                let colour_of = v
                    .iter()
                    .map(|&x| {
                        if x.is_finite() {
                            value_ramp((x as f64 - lo) / (hi - lo).max(1e-12))
                        } else {
                            OTHER
                        }
                    })
                    .collect();
                (vec![], colour_of, Some((lo, hi)))
            }
            None => {
                let (entries, colour_of) = class_colours(labels);
                (entries, colour_of, None)
            }
        };
        // draw in a shuffled order so no class sits on top of all the others
        let mut order: Vec<usize> = (0..labels.codes.len()).collect();
        order.shuffle(&mut ChaCha8Rng::seed_from_u64(17));
        if let Some(v) = &labels.values {
            // frames without a value first, so grey never covers a coloured point
            order.sort_by_key(|&i| v[i].is_finite());
        }
        let np = report.layers.len().max(1) as u32;
        let cols = match np {
            1..=3 => np,
            4 => 2,
            5..=9 => 3,
            10..=16 => 4,
            _ => 5,
        };
        let rows = np.div_ceil(cols);
        MapGrid {
            report,
            labels,
            entries,
            bar,
            colour_of,
            order,
            cols,
            rows,
        }
    }

    /// The colour bar of a continuous label, in the legend column.
    fn draw_bar<DB: DrawingBackend>(
        &self,
        legend: &DrawingArea<DB, Shift>,
        (lo, hi): (f64, f64),
    ) -> Result<(), String> {
        let (top, height) = (40, 220);
        for i in 0..height {
            let t = 1.0 - i as f64 / (height - 1) as f64;
            legend
                .draw(&Rectangle::new(
                    [(10, top + i), (34, top + i + 1)],
                    value_ramp(t).filled(),
                ))
                .map_err(e2s)?;
        }
        for (k, v) in [(0, hi), (1, (lo + hi) / 2.0), (2, lo)] {
            let y = top + k * (height - 1) / 2;
            legend
                .draw(&PathElement::new(vec![(34, y), (40, y)], BLACK))
                .map_err(e2s)?;
            legend
                .draw(&Text::new(short(v), (44, y - 7), text(13.0)))
                .map_err(e2s)?;
        }
        let note = [
            "1st–99th percentile;",
            "beyond: end colours;",
            "grey: no value",
        ];
        for (i, line) in note.iter().enumerate() {
            legend
                .draw(&Text::new(
                    line.to_string(),
                    (8, top + height + 14 + 17 * i as i32),
                    text(12.0).color(&RGBColor(90, 90, 90)),
                ))
                .map_err(e2s)?;
        }
        Ok(())
    }
}

/// A value with three significant digits for the colour bar.
fn short(v: f64) -> String {
    let mag = if v == 0.0 {
        0
    } else {
        v.abs().log10().floor() as i32
    };
    let decimals = (2 - mag).clamp(0, 4) as usize;
    format!("{v:.decimals$}")
}

/// The 1st and 99th percentiles of the finite values (the colour range; values outside take
/// the end colours). (0, 1) when there are none.
pub fn clip_range(v: &[f32]) -> (f64, f64) {
    let mut f: Vec<f64> = v
        .iter()
        .filter(|x| x.is_finite())
        .map(|&x| x as f64)
        .collect();
    if f.is_empty() {
        return (0.0, 1.0);
    }
    f.sort_by(f64::total_cmp);
    let q = |p: f64| crate::analysis::stats::quantile_sorted(&f, p);
    let (lo, hi) = (q(0.01), q(0.99));
    if hi > lo {
        (lo, hi)
    } else {
        (lo - 0.5, lo + 0.5)
    }
}

/// Legend entries and per-frame colours of a categorical label: the most frequent classes
/// get their own colour (beyond [`MAX_LEGEND`], the rest share a grey "other").
fn class_colours(labels: &SampleLabels) -> (Vec<(String, RGBColor)>, Vec<RGBColor>) {
    {
        let mut counts = vec![0usize; labels.classes.len()];
        for &c in &labels.codes {
            if c != UNLABELLED {
                counts[c as usize] += 1;
            }
        }
        let mut present: Vec<usize> = (0..counts.len()).filter(|&c| counts[c] > 0).collect();
        present.sort_by(|&a, &b| counts[b].cmp(&counts[a]).then(a.cmp(&b)));
        let shown = if present.len() > MAX_LEGEND {
            MAX_LEGEND - 1
        } else {
            present.len()
        };
        let mut kept: Vec<usize> = present[..shown].to_vec();
        // legend in class order (first appearance), which reads better than by count
        kept.sort_unstable();
        let colours = category_colours(kept.len());
        let mut class_colour = vec![OTHER; counts.len()];
        let mut entries = Vec::new();
        for (i, &c) in kept.iter().enumerate() {
            class_colour[c] = colours[i];
            entries.push((labels.classes[c].clone(), colours[i]));
        }
        if present.len() > shown {
            entries.push((format!("other ({})", present.len() - shown), OTHER));
        }
        let colour_of = labels
            .codes
            .iter()
            .map(|&c| {
                if c == UNLABELLED {
                    OTHER
                } else {
                    class_colour[c as usize]
                }
            })
            .collect();
        (entries, colour_of)
    }
}

impl Figure for MapGrid<'_> {
    fn size(&self) -> (u32, u32) {
        // the colour bar and its three note lines need about 380 px under the title strip
        let legend_rows = if self.bar.is_some() {
            380
        } else {
            self.entries.len() as u32 * 20 + 60
        };
        (
            self.cols * PANEL + LEGEND_W + 20,
            (self.rows * PANEL + 50).max(legend_rows),
        )
    }

    fn draw<DB: DrawingBackend>(&self, area: &DrawingArea<DB, Shift>) -> Result<(), String> {
        let (w, _) = self.size();
        let method = self
            .report
            .options
            .get("method")
            .and_then(|v| v.as_str())
            .unwrap_or("map");
        let title = format!(
            "{} — {} map per layer, coloured by {}",
            self.report.capture.name, method, self.labels.name
        );
        let (top, body) = area.split_vertically(40);
        top.draw(&Text::new(title, (12, 10), text(18.0)))
            .map_err(e2s)?;
        let (grid, legend) = body.split_horizontally(w - LEGEND_W - 10);
        let cells = grid.split_evenly((self.rows as usize, self.cols as usize));
        let n = self.labels.codes.len().max(1) as f64;
        // markers shrink and fade as the sample grows
        let radius = (3.5 * (1000.0 / n).powf(0.25)).clamp(1.0, 4.0);
        let alpha = (0.9 * (1500.0 / n).powf(0.3)).clamp(0.3, 0.9);
        for (panel, l) in cells.iter().zip(&self.report.layers) {
            let e = &l.embedding;
            let (mut x0, mut x1, mut y0, mut y1) = (
                f64::INFINITY,
                f64::NEG_INFINITY,
                f64::INFINITY,
                f64::NEG_INFINITY,
            );
            for r in e.outer_iter() {
                x0 = x0.min(r[0] as f64);
                x1 = x1.max(r[0] as f64);
                y0 = y0.min(r[1] as f64);
                y1 = y1.max(r[1] as f64);
            }
            if !x0.is_finite() {
                continue;
            }
            let pad = |a: f64, b: f64| {
                let d = ((b - a) * 0.04).max(1e-6);
                (a - d, b + d)
            };
            let (x0, x1) = pad(x0, x1);
            let (y0, y1) = pad(y0, y1);
            let mut chart = ChartBuilder::on(&panel.margin(4, 4, 4, 4))
                .caption(format!("layer {}", l.layer), (FONT, 15))
                .build_cartesian_2d(x0..x1, y0..y1)
                .map_err(e2s)?;
            chart
                .configure_mesh()
                .disable_x_mesh()
                .disable_y_mesh()
                .disable_x_axis()
                .disable_y_axis()
                .draw()
                .map_err(e2s)?;
            chart
                .plotting_area()
                .draw(&Rectangle::new(
                    [(x0, y0), (x1, y1)],
                    ShapeStyle::from(&RGBColor(200, 200, 200)).stroke_width(1),
                ))
                .map_err(e2s)?;
            chart
                .draw_series(self.order.iter().map(|&i| {
                    let c = self.colour_of[i];
                    Circle::new(
                        (e[[i, 0]] as f64, e[[i, 1]] as f64),
                        radius,
                        c.mix(alpha).filled(),
                    )
                }))
                .map_err(e2s)?;
        }
        // legend
        legend
            .draw(&Text::new(self.labels.name.clone(), (6, 8), text(15.0)))
            .map_err(e2s)?;
        if let Some(range) = self.bar {
            return self.draw_bar(&legend, range);
        }
        for (i, (name, c)) in self.entries.iter().enumerate() {
            let y = 34 + i as i32 * 20;
            legend
                .draw(&Circle::new((14, y + 7), 5, c.filled()))
                .map_err(e2s)?;
            let mut label = name.clone();
            if label.chars().count() > 22 {
                label = label.chars().take(21).collect::<String>() + "…";
            }
            legend
                .draw(&Text::new(label, (26, y), text(14.0)))
                .map_err(e2s)?;
        }
        Ok(())
    }
}

/// Purity metrics across layers: one small chart per metric, one line per label.
pub struct PurityCurves<'a> {
    report: &'a MapReport,
}

impl<'a> PurityCurves<'a> {
    /// Prepare the figure.
    pub fn new(report: &'a MapReport) -> Self {
        PurityCurves { report }
    }
}

type Getter = fn(&PurityRecord) -> Option<f64>;

const METRICS: [(&str, Getter); 11] = [
    ("k-NN purity (full space)", |r| r.knn_purity),
    ("k-NN purity (2-D map)", |r| r.knn_purity_2d),
    ("silhouette", |r| r.silhouette),
    ("between-class variance share", |r| r.variance_ratio),
    ("variance share inside phones", |r| r.within_phone_share),
    ("trustworthiness of the map", |r| r.trustworthiness),
    ("label purity (k-means)", |r| r.label_purity),
    ("cluster purity (k-means)", |r| r.cluster_purity),
    ("PNMI (k-means)", |r| r.pnmi),
    ("k-NN R² of values (full space)", |r| r.knn_r2),
    ("k-NN R² of values (2-D map)", |r| r.knn_r2_2d),
];

impl PurityCurves<'_> {
    /// Panels drawn: the nine class metrics, and the two value metrics when a continuous
    /// label was mapped.
    fn panels(&self) -> usize {
        if self.report.labels.iter().any(|l| l.values.is_some()) {
            METRICS.len()
        } else {
            9
        }
    }
}

impl Figure for PurityCurves<'_> {
    fn size(&self) -> (u32, u32) {
        (1200, 300 * self.panels().div_ceil(3) as u32)
    }

    fn draw<DB: DrawingBackend>(&self, area: &DrawingArea<DB, Shift>) -> Result<(), String> {
        let labels: Vec<&str> = self.report.labels.iter().map(|l| l.name.as_str()).collect();
        let colours = category_colours(labels.len().max(2));
        let (top, body) = area.split_vertically(60);
        top.draw(&Text::new(
            format!(
                "{} — cluster purity across layers",
                self.report.capture.name
            ),
            (12, 8),
            text(18.0),
        ))
        .map_err(e2s)?;
        for (i, l) in labels.iter().enumerate() {
            let x = 14 + i as i32 * 140;
            top.draw(&PathElement::new(
                vec![(x, 44), (x + 24, 44)],
                colours[i].stroke_width(3),
            ))
            .map_err(e2s)?;
            top.draw(&Text::new(l.to_string(), (x + 30, 36), text(14.0)))
                .map_err(e2s)?;
        }
        let layers: Vec<usize> = self.report.layers.iter().map(|l| l.layer).collect();
        let (lx0, lx1) = (
            *layers.first().unwrap_or(&0) as f64,
            (*layers.last().unwrap_or(&0) as f64).max(*layers.first().unwrap_or(&0) as f64 + 1.0),
        );
        let rows = self.panels().div_ceil(3);
        let cells = body.split_evenly((rows, 3));
        for (cell, (title, get)) in cells.iter().zip(METRICS.iter().take(self.panels())) {
            let vals: Vec<f64> = self.report.records.iter().filter_map(get).collect();
            let lo = vals.iter().cloned().fold(0.0, f64::min);
            let hi = vals.iter().cloned().fold(1.0, f64::max);
            let mut chart = ChartBuilder::on(&cell.margin(6, 6, 6, 10))
                .caption(*title, (FONT, 14))
                .x_label_area_size(30)
                .y_label_area_size(40)
                .build_cartesian_2d(lx0 - 0.3..lx1 + 0.3, lo..hi)
                .map_err(e2s)?;
            chart
                .configure_mesh()
                .x_desc("layer")
                .x_labels(layers.len().min(12))
                .y_labels(5)
                .x_label_formatter(&|v| format!("{}", v.round() as i64))
                .label_style(text(11.0))
                .axis_desc_style(text(12.0))
                .light_line_style(RGBColor(238, 238, 238))
                .draw()
                .map_err(e2s)?;
            for (li, l) in labels.iter().enumerate() {
                let pts: Vec<(f64, f64)> = self
                    .report
                    .records
                    .iter()
                    .filter(|r| r.label == *l)
                    .filter_map(|r| get(r).map(|v| (r.layer as f64, v)))
                    .collect();
                if pts.is_empty() {
                    continue;
                }
                let c = colours[li];
                chart
                    .draw_series(LineSeries::new(pts.clone(), c.stroke_width(2)))
                    .map_err(e2s)?;
                chart
                    .draw_series(pts.iter().map(|&p| Circle::new(p, 3, c.filled())))
                    .map_err(e2s)?;
            }
        }
        Ok(())
    }
}
