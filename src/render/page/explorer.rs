//! The explorer's data block: each layer's map quantised to 16 bits per coordinate, with the
//! labels, utterance and time of every sampled frame.

use super::{base64, hex, MapSet};
use crate::capture::UNLABELLED;
use crate::render::category_colours;

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
/// layer (base64), label columns as integer codes with name and colour tables.
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
