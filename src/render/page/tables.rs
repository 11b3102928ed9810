//! The tables behind the figures: capture summary, probe records and purity records.

use std::fmt::Write;

use super::{esc, f3, CaptureSection};
use crate::records::map::PurityRecord;
use crate::records::probe::ProbeRecord;

pub(super) fn table(out: &mut String, caption: &str, head: &[&str], rows: &[Vec<String>]) {
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

pub(super) fn summary_table(out: &mut String, secs: &[CaptureSection]) {
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
        row("continuous columns", &|s| {
            if s.summary.continuous.is_empty() {
                return "none".into();
            }
            s.summary
                .continuous
                .iter()
                .map(|c| {
                    format!(
                        "{}: {} frames with a value ({} without), {}–{}, mean {}",
                        c.column,
                        c.labelled_frames,
                        c.missing_frames,
                        num(c.min),
                        num(c.max),
                        num(c.mean)
                    )
                })
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

/// A value with four significant digits (column ranges and means in their own units).
fn num(v: f64) -> String {
    if !v.is_finite() {
        "—".into()
    } else if v == 0.0 {
        "0".into()
    } else if v.abs() >= 1e5 || v.abs() < 1e-3 {
        format!("{v:.3e}")
    } else {
        let digits = (3 - v.abs().log10().floor() as i32).clamp(0, 6) as usize;
        format!("{v:.digits$}")
    }
}

/// The rows of the continuous (ridge) records: R² and its interval, RMSE, r, the
/// training-mean baseline, the control and the penalty.
pub(super) fn regress_rows(recs: &[ProbeRecord]) -> Vec<Vec<String>> {
    recs.iter()
        .filter(|r| r.is_continuous())
        .map(|r| {
            vec![
                r.layer.to_string(),
                r.task.clone(),
                r.pooling.clone(),
                r.split.clone(),
                r.n_train.to_string(),
                r.n_test.to_string(),
                f3(r.r2),
                format!("{}–{}", f3(r.ci_low), f3(r.ci_high)),
                num(r.rmse),
                f3(r.pearson_r),
                num(r.baseline_rmse),
                f3(r.control_r2),
                f3(r.selectivity),
                format!("{:e}", r.alpha),
                r.folds.to_string(),
                f3(r.r2_sd),
            ]
        })
        .collect()
}

pub(super) const REGRESS_HEAD: [&str; 16] = [
    "layer",
    "task",
    "pooling",
    "split",
    "train",
    "test",
    "R²",
    "95% interval",
    "RMSE",
    "Pearson r",
    "baseline RMSE (training mean)",
    "control R²",
    "selectivity",
    "α per item",
    "folds",
    "fold sd",
];

pub(super) fn probe_rows(recs: &[ProbeRecord]) -> Vec<Vec<String>> {
    recs.iter()
        .filter(|r| !r.is_continuous())
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
                r.folds.to_string(),
                f3(r.accuracy_sd),
                if r.mdl_status == "computed" {
                    f3(r.mdl_compression)
                } else {
                    "—".into()
                },
            ]
        })
        .collect()
}

pub(super) fn purity_rows(recs: &[PurityRecord]) -> Vec<Vec<String>> {
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
                f3(r.within_phone_share),
            ]
        })
        .collect()
}

pub(super) const PROBE_HEAD: [&str; 18] = [
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
    "folds",
    "fold sd",
    "MDL compression",
];
pub(super) const PURITY_HEAD: [&str; 11] = [
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
    "share inside phones",
];

#[cfg(test)]
mod num_tests {
    #[test]
    fn values_keep_four_significant_digits() {
        assert_eq!(super::num(0.0), "0");
        assert_eq!(super::num(123.456), "123.5");
        assert_eq!(super::num(-0.5), "-0.5000");
        assert_eq!(super::num(2e-5), "2.000e-5");
        assert_eq!(super::num(f64::NAN), "—");
    }
}
