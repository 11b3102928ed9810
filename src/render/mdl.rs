//! MDL picture: compression of the online code (uniform code length / online code length;
//! Voita & Titov 2020) across layers, one line per task, with the line at 1 where the layer
//! tells the probe nothing about the labels.

use plotters::coord::Shift;
use plotters::element::DashedPathElement;
use plotters::prelude::*;

use super::{category_colours, e2s, text};
use crate::records::probe::ProbeReport;

/// Compression by layer for every task whose online code was computed.
pub struct MdlCurves {
    title: String,
    /// (task, [(layer, compression)]).
    tasks: Vec<(String, Vec<(f64, f64)>)>,
}

impl MdlCurves {
    /// The curves of a probe report; None when no record has a computed online code.
    pub fn new(r: &ProbeReport) -> Option<MdlCurves> {
        let tasks: Vec<(String, Vec<(f64, f64)>)> = r
            .tasks
            .iter()
            .map(|t| {
                let pts = r
                    .records
                    .iter()
                    .filter(|x| x.task == t.task && x.mdl_status == "computed")
                    .map(|x| (x.layer as f64, x.mdl_compression))
                    .collect();
                (t.task.clone(), pts)
            })
            .filter(|(_, p): &(String, Vec<(f64, f64)>)| !p.is_empty())
            .collect();
        (!tasks.is_empty()).then(|| MdlCurves {
            title: format!("MDL compression by layer: {}", r.capture.name),
            tasks,
        })
    }
}

impl super::Figure for MdlCurves {
    fn size(&self) -> (u32, u32) {
        (1100, 460)
    }

    fn draw<DB: DrawingBackend>(&self, area: &DrawingArea<DB, Shift>) -> Result<(), String> {
        let pts = self.tasks.iter().flat_map(|t| t.1.iter());
        let (x0, x1, top) = pts.fold((f64::INFINITY, f64::NEG_INFINITY, 1.0f64), |a, p| {
            (a.0.min(p.0), a.1.max(p.0), a.2.max(p.1))
        });
        let x1 = x1.max(x0 + 1.0);
        let mut chart = ChartBuilder::on(area)
            .caption(&self.title, text(20.0))
            .margin(14)
            .x_label_area_size(46)
            .y_label_area_size(58)
            .build_cartesian_2d((x0 - 0.2)..(x1 + 0.2), 0.0f64..top * 1.1)
            .map_err(e2s)?;
        chart
            .configure_mesh()
            .x_desc("layer")
            .y_desc("compression (uniform / online bits)")
            .x_label_formatter(&|x| {
                if (x - x.round()).abs() < 1e-6 {
                    format!("{}", x.round() as i64)
                } else {
                    String::new()
                }
            })
            .label_style(text(13.0))
            .axis_desc_style(text(15.0))
            .light_line_style(RGBColor(242, 242, 242))
            .draw()
            .map_err(e2s)?;
        let grey = RGBColor(150, 150, 150);
        chart
            .draw_series(DashedLineSeries::new(
                vec![(x0 - 0.2, 1.0), (x1 + 0.2, 1.0)],
                6,
                4,
                grey.stroke_width(1),
            ))
            .map_err(e2s)?
            .label("1 = no information")
            .legend(move |(x, y)| {
                DashedPathElement::new(vec![(x, y), (x + 22, y)], 5, 3, grey.stroke_width(1))
            });
        let colours = category_colours(self.tasks.len().max(2));
        for ((name, line), &c) in self.tasks.iter().zip(&colours) {
            chart
                .draw_series(LineSeries::new(line.clone(), c.stroke_width(3)))
                .map_err(e2s)?
                .label(name.clone())
                .legend(move |(x, y)| {
                    PathElement::new(vec![(x, y), (x + 22, y)], c.stroke_width(3))
                });
            chart
                .draw_series(line.iter().map(|&p| Circle::new(p, 3, c.filled())))
                .map_err(e2s)?;
        }
        chart
            .configure_series_labels()
            .position(SeriesLabelPosition::UpperLeft)
            .background_style(WHITE.mix(0.9))
            .border_style(RGBColor(200, 200, 200))
            .label_font(text(12.0))
            .draw()
            .map_err(e2s)
    }
}
