//! The explorer's data block: each layer's map quantised to 16 bits per coordinate, with the
//! labels, values of continuous columns, utterance and time of every sampled frame.

use super::{base64, hex, MapSet};
use crate::capture::UNLABELLED;
use crate::render::category_colours;
use crate::render::map::clip_range;
use crate::render::palette::value_ramp;

/// Colours of the value ramp sent to the page: [`value_ramp`] sampled at this many evenly
/// spaced points from the range's low end to its high end.
pub(super) const RAMP_STEPS: usize = 64;

/// A value kept to 6 significant digits (the hover shows 4): enough for the page, and a
/// third of the text of an f32's shortest form.
fn round6(v: f32) -> Option<f64> {
    if !v.is_finite() {
        return None;
    }
    let v = v as f64;
    if v == 0.0 {
        return Some(0.0);
    }
    let scale = 10f64.powi(5 - v.abs().log10().floor() as i32);
    Some((v * scale).round() / scale)
}

/// A continuous column for the explorer: its values (null where the frame has none), the
/// colour range (1st to 99th percentile of the sample's values, as the PNG maps use) and the
/// ramp's colours.
fn value_json(c: &super::ValueColumn) -> serde_json::Value {
    let (lo, hi) = clip_range(&c.values);
    let ramp: Vec<String> = (0..RAMP_STEPS)
        .map(|k| hex(value_ramp(k as f64 / (RAMP_STEPS - 1) as f64)))
        .collect();
    let values: Vec<Option<f64>> = c.values.iter().map(|&v| round6(v)).collect();
    serde_json::json!({ "name": c.name, "kind": "continuous", "values": values, "lo": lo, "hi": hi, "ramp": ramp })
}

pub(super) fn quantise(a: &ndarray::Array2<f32>) -> serde_json::Value {
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
/// layer (base64), label columns as integer codes with name and colour tables, then the
/// continuous columns as values with their colour range and ramp.
pub(super) fn map_json(m: &MapSet) -> serde_json::Value {
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
            serde_json::json!({ "name": c.name, "kind": "categorical", "classes": c.classes, "colours": colours, "codes": codes })
        })
        .chain(m.info.values.iter().map(value_json))
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
