//! The text a command prints when it finishes (and `probe.json` keeps as `summary_text`):
//! read from records only.

use crate::analysis::inspect::SCAN_ROWS;
use crate::records::compare::{CompareReport, Estimator, Kernel, MatchBy, ProbeDelta};
use crate::records::inspect::{ClassCount, Summary as InspectSummary};
use crate::records::map::Summary as MapSummary;
use crate::records::probe::{FitFall, ProbeReport};

/// The text printed after a run: best layer per task and where speaker accuracy falls.
pub fn probe(r: &ProbeReport) -> String {
    let mut s = String::new();
    let o = &r.options;
    s.push_str(&format!(
        "probe: {} ({} pooling, at most {} training items per fit, {} fold{})\n",
        r.capture.name,
        o["pooling"].as_str().unwrap_or("?"),
        o["max_train_frames"],
        o["folds"],
        if o["folds"].as_u64() == Some(1) {
            ""
        } else {
            "s"
        }
    ));
    for b in &r.summary.best {
        let rec = r
            .records
            .iter()
            .find(|x| x.task == b.task && x.layer == b.layer);
        let extra = rec
            .map(|x| {
                format!(
                    ", majority {:.3}, control {:.3}, split {}",
                    x.majority_baseline, x.control_accuracy, x.split
                )
            })
            .unwrap_or_default();
        s.push_str(&format!(
            "  {:<10} best layer {:>2}: accuracy {:.3} (95% CI {:.3}-{:.3}{extra})\n",
            b.task, b.layer, b.accuracy, b.ci_low, b.ci_high
        ));
        if rec.is_some_and(|x| x.split == "frame") {
            s.push_str(&format!(
                "  {:<10} split by frame: neighbouring frames sit on both sides, so this accuracy is overstated (see notes)\n",
                b.task
            ));
        }
    }
    for b in &r.summary.best_r2 {
        let rec = r
            .records
            .iter()
            .find(|x| x.task == b.task && x.layer == b.layer);
        let extra = rec
            .map(|x| {
                format!(
                    ", RMSE {:.4} against {:.4} for the training mean, r {:.3}, control R² {:.3}, split {}",
                    x.rmse, x.baseline_rmse, x.pearson_r, x.control_r2, x.split
                )
            })
            .unwrap_or_default();
        s.push_str(&format!(
            "  {:<10} best layer {:>2}: R² {:.3} (95% CI {:.3}-{:.3}{extra})\n",
            b.task, b.layer, b.r2, b.ci_low, b.ci_high
        ));
    }
    match (
        r.summary.speaker_below_half_layer,
        r.summary.speaker_half_level,
    ) {
        (Some(l), Some(h)) => s.push_str(&format!(
            "  speaker accuracy first falls below half its range ({h:.3}) at layer {l}\n"
        )),
        (None, Some(h)) => s.push_str(&format!(
            "  speaker accuracy never falls below half its range ({h:.3}) after its peak\n"
        )),
        _ => {}
    }
    for f in &r.summary.r2_half_fall {
        s.push_str(&format!("  {}\n", r2_fall_sentence(f)));
    }
    s
}

/// Where a continuous task's R² fades, in words: the first layer after its peak below half
/// way to its control R², or how far it stays above that level.
pub fn r2_fall_sentence(f: &FitFall) -> String {
    let base = if !f.base_is_control {
        "0 (no control ran)".to_string()
    } else {
        format!("its control R² {:.3}", f.base_r2)
    };
    let span = format!(
        "half way ({:.3}) from its peak {:.3} at layer {} to {base}",
        f.half_level, f.peak_r2, f.peak_layer
    );
    match f.below_half_layer {
        Some(l) => format!("{} R² first falls below {span} at layer {l}", f.task),
        None if f.last_layer == f.peak_layer => {
            format!(
                "{} R² peaks at the last layer probed ({})",
                f.task, f.peak_layer
            )
        }
        None => format!(
            "{} R² stays above {span} through layer {}",
            f.task, f.last_layer
        ),
    }
}

/// The text summary printed after a comparison: pairing, most changed matching layers,
/// significant probe deltas.
pub fn compare(r: &CompareReport) -> String {
    use std::fmt::Write;
    let mut s = String::new();
    let kernel = match (r.kernel, r.estimator) {
        (Kernel::Linear, Estimator::Full) => "linear CKA",
        (Kernel::Linear, Estimator::Minibatch) => "linear CKA (minibatch, unbiased HSIC)",
        (Kernel::Rbf, _) => "RBF CKA (median-distance bandwidth)",
    };
    let _ = writeln!(
        s,
        "compared {} ({} layers) with {} ({} layers): {} on {} frames",
        r.captures[0].name,
        r.layers_a.len(),
        r.captures[1].name,
        r.layers_b.len(),
        kernel,
        r.pairing.used
    );
    if r.pairing.match_by == MatchBy::Utterance {
        let _ = writeln!(
            s,
            "paired by utterance: {} frames paired, {} of A and {} of B dropped",
            r.pairing.paired, r.pairing.dropped_a, r.pairing.dropped_b
        );
    }
    let m = r.matching_layers();
    if m.is_empty() {
        let _ = writeln!(
            s,
            "no layer number is present in both captures; see the heatmap for all pairs"
        );
    } else {
        let _ = writeln!(
            s,
            "most changed layers (1 - CKA between the same layer number in A and B):"
        );
        for (l, c) in m.iter().take(5) {
            let _ = writeln!(s, "  layer {l:>3}  1 - CKA = {:.4}", 1.0 - c);
        }
    }
    let sig: Vec<&ProbeDelta> = r
        .probe_delta
        .iter()
        .filter(|d| d.mcnemar_p < 0.05)
        .collect();
    if !r.probe_delta.is_empty() {
        if sig.is_empty() {
            let _ = writeln!(s, "no probe delta is significant (McNemar p < 0.05)");
        } else {
            let _ = writeln!(s, "significant probe deltas (McNemar p < 0.05):");
            for d in sig {
                let _ = writeln!(
                    s,
                    "  layer {:>3} {:<10} {:.3} -> {:.3}  delta {:+.3} [{:+.3}, {:+.3}]  p = {:.2e}",
                    d.layer, d.task, d.accuracy_a, d.accuracy_b, d.delta, d.ci_low, d.ci_high, d.mcnemar_p
                );
            }
        }
    }
    for n in &r.notes {
        let _ = writeln!(s, "note: {n}");
    }
    s
}

/// Two lines for the terminal after a map run.
pub fn map(s: &MapSummary) -> String {
    let mut out = String::new();
    match (s.speaker_half_fall_layer, s.speaker_max, s.speaker_min) {
        (Some(l), Some(mx), Some(mn)) => out.push_str(&format!(
            "speaker purity (10-NN) falls half way from {:.3} (layer {}) to {:.3} (layer {}) at layer {}\n",
            mx.1, mx.0, mn.1, mn.0, l
        )),
        (_, Some(mx), _) => out.push_str(&format!(
            "speaker purity (10-NN) does not fall after its maximum {:.3} at layer {}\n",
            mx.1, mx.0
        )),
        _ => out.push_str("speaker purity: not available\n"),
    }
    match s.phone_peak {
        Some((l, v)) => out.push_str(&format!(
            "phone purity (10-NN) peaks at layer {l}: {v:.3}\n"
        )),
        None => out.push_str("phone purity: no phone label\n"),
    }
    out
}

/// What `abx` prints: error rates within and across speaker at the first and last layer.
pub fn abx(capture: &str, records: &[crate::records::abx::AbxRecord]) -> String {
    let mut out = format!("ABX: {capture}\n");
    for cond in ["within", "across"] {
        let rows: Vec<_> = records.iter().filter(|r| r.condition == cond).collect();
        if let (Some(first), Some(last)) = (rows.first(), rows.last()) {
            out.push_str(&format!(
                "  {cond:<6} speaker: error {:.3} at layer {} -> {:.3} at layer {} ({} triplets at the last)\n",
                first.error_rate, first.layer, last.error_rate, last.layer, last.n_triplets
            ));
        }
    }
    out
}

/// Human-readable size.
pub fn human_bytes(b: u64) -> String {
    let units = ["B", "KiB", "MiB", "GiB", "TiB"];
    let mut v = b as f64;
    let mut u = 0;
    while v >= 1024.0 && u < units.len() - 1 {
        v /= 1024.0;
        u += 1;
    }
    if u == 0 {
        format!("{b} B")
    } else {
        format!("{v:.1} {}", units[u])
    }
}

/// A value with four significant digits, for ranges of any scale.
fn sig(v: f64) -> String {
    if !v.is_finite() {
        return "-".into();
    }
    let mag = if v == 0.0 {
        0
    } else {
        v.abs().log10().floor() as i32
    };
    let decimals = (3 - mag).clamp(0, 6) as usize;
    format!("{v:.decimals$}")
}

/// The summary as text for a terminal.
pub fn inspect(s: &InspectSummary) -> String {
    use std::fmt::Write;
    let mut o = String::new();
    let _ = writeln!(o, "capture   {}  ({})", s.name, s.path);
    let _ = writeln!(
        o,
        "frames    {}  in {} utterances from {} speakers  (labels: {}, hop {} s)",
        s.frames, s.utterances, s.speakers, s.label_source, s.hop_s
    );
    let _ = writeln!(
        o,
        "files     {} ({} array files); labels from {} file(s)",
        s.layout, s.layer_files, s.label_files
    );
    let _ = writeln!(
        o,
        "size      {} on disk; a probe run needs about {}",
        human_bytes(s.bytes_on_disk),
        human_bytes(s.probe_memory_estimate)
    );
    if let serde_json::Value::Object(m) = &s.notes {
        for (k, v) in m {
            let _ = writeln!(
                o,
                "note      {k}: {}",
                v.as_str()
                    .map(str::to_string)
                    .unwrap_or_else(|| v.to_string())
            );
        }
    }
    let _ = writeln!(o, "\nlayers ({})", s.layers.len());
    let _ = writeln!(
        o,
        "  {:>5}  {:>6}  {:<8}  {:<26}  file",
        "layer", "dim", "dtype", "layout"
    );
    for l in &s.layers {
        let _ = writeln!(
            o,
            "  {:>5}  {:>6}  {:<8}  {:<26}  {}",
            l.layer, l.dim, l.dtype, l.layout, l.file
        );
    }
    let _ = writeln!(o, "\nlabel tasks ({})", s.tasks.len());
    for t in &s.tasks {
        let show = |v: &[ClassCount]| {
            v.iter()
                .map(|c| format!("{} {}", c.label, c.frames))
                .collect::<Vec<_>>()
                .join(", ")
        };
        let _ = writeln!(
            o,
            "  {:<10} {:>4} classes  {:>8} labelled  {:>7} unlabelled   smallest: {}   largest: {}",
            t.task,
            t.classes,
            t.labelled_frames,
            t.unlabelled_frames,
            show(&t.smallest),
            show(&t.largest)
        );
    }
    if !s.continuous.is_empty() {
        let _ = writeln!(o, "\ncontinuous label columns ({})", s.continuous.len());
        for c in &s.continuous {
            let _ = writeln!(
                o,
                "  {:<10} {:>8} labelled  {:>7} missing   range {} to {}   mean {}",
                c.column,
                c.labelled_frames,
                c.missing_frames,
                sig(c.min),
                sig(c.max),
                sig(c.mean)
            );
        }
    }
    if s.warnings.is_empty() {
        let _ = writeln!(
            o,
            "\nno warnings (NaN/Inf and constant columns checked on {} sampled frames per layer)",
            SCAN_ROWS.min(s.frames)
        );
    } else {
        let _ = writeln!(o, "\nwarnings ({})", s.warnings.len());
        for w in &s.warnings {
            let _ = writeln!(o, "  - {w}");
        }
    }
    o
}
