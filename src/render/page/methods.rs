//! The methods paragraph, written from the run itself: split, pooling, penalty search,
//! control task, sample sizes and the k actually used, seeds, version and input hashes.

use std::fmt::Write;

use super::tables::table;
use super::{esc, CaptureSection, CompareInputs, Methods, ReportInputs};
use crate::records::probe::ProbeRecord;

pub(super) fn describe_options(v: &serde_json::Value) -> String {
    match v {
        serde_json::Value::Object(m) if !m.is_empty() => m
            .iter()
            .map(|(k, v)| {
                format!(
                    "{k} = {}",
                    if let serde_json::Value::String(s) = v {
                        s.clone()
                    } else {
                        v.to_string()
                    }
                )
            })
            .collect::<Vec<_>>()
            .join(", "),
        serde_json::Value::Null => "not recorded".into(),
        v => v.to_string(),
    }
}

pub(super) fn distinct<T: PartialEq + Clone>(it: impl Iterator<Item = T>) -> Vec<T> {
    let mut v: Vec<T> = Vec::new();
    for x in it {
        if !v.contains(&x) {
            v.push(x);
        }
    }
    v
}

pub(super) fn methods_html(out: &mut String, inp: &ReportInputs) {
    let m: &Methods = &inp.methods;
    let mut p = String::new();
    let caps: Vec<String> = inp
        .captures
        .iter()
        .map(|s| {
            let s = &s.summary;
            format!(
                "“{}” ({} frames in {} utterances from {} speakers, {} layers, labels from {})",
                s.name,
                s.frames,
                s.utterances,
                s.speakers,
                s.layers.len(),
                s.label_source
            )
        })
        .collect();
    let _ = write!(
        p,
        "voxstrata {} analysed {}. ",
        m.version,
        caps.join(" and ")
    );
    for sec in &inp.captures {
        probe_methods(&mut p, inp, sec);
        map_methods(&mut p, m, sec);
    }
    if let Some(c) = &inp.compare {
        compare_methods(&mut p, m, c);
    }
    if let Some((_, o)) = m.options.iter().find(|(k, _)| k == "abx") {
        abx_methods(&mut p, o);
    }
    let _ = write!(p, "Every random choice was seeded with {}; the same seed and inputs give the same numbers whatever the thread count.", m.seed);
    let _ = write!(out, "<p>{}</p>", esc(&p));
    method_tables(out, m);
}

/// The probe sentences of one capture: tasks, split, pooling, sizes, control task, penalty
/// grid and bootstrap.
fn probe_methods(p: &mut String, inp: &ReportInputs, sec: &CaptureSection) {
    let name = &sec.summary.name;
    if sec.probe.is_empty() {
        let _ = write!(p, "No probe results were available for “{name}”. ");
    } else {
        let tasks = distinct(
            sec.probe
                .iter()
                .filter(|r| !r.is_continuous())
                .map(|r| r.task.clone()),
        );
        let parts: Vec<String> = tasks
            .iter()
            .map(|t| {
                let rs: Vec<&ProbeRecord> = sec.probe.iter().filter(|r| &r.task == t).collect();
                let split = distinct(rs.iter().map(|r| r.split.clone())).join("/");
                let pool = distinct(rs.iter().map(|r| r.pooling.clone())).join("/");
                let (trn_lo, trn_hi) = (rs.iter().map(|r| r.n_train).min().unwrap_or(0), rs.iter().map(|r| r.n_train).max().unwrap_or(0));
                let (tst_lo, tst_hi) = (rs.iter().map(|r| r.n_test).min().unwrap_or(0), rs.iter().map(|r| r.n_test).max().unwrap_or(0));
                let range = |a: usize, b: usize| if a == b { a.to_string() } else { format!("{a}–{b}") };
                format!(
                    "{t} ({} classes; {pool} pooling; {split}-disjoint split; {} training and {} test examples per layer)",
                    rs.iter().map(|r| r.n_classes).max().unwrap_or(0),
                    range(trn_lo, trn_hi),
                    range(tst_lo, tst_hi)
                )
            })
            .collect();
        if !parts.is_empty() {
            let _ = write!(
                p,
                "On “{name}”, a linear probe (multinomial logistic regression) was trained on every layer for {}; each accuracy is shown with its 95% interval beside the majority-class baseline. ",
                parts.join(", ")
            );
        }
        regress_sentence(p, name, &sec.probe);
        control_sentence(p, &sec.probe);
        folds_sentence(p, &sec.probe);
        mdl_sentence(p, &sec.probe);
        let opt = inp
            .methods
            .options
            .iter()
            .find(|(k, _)| k == &format!("probe {name}") || k == "probe")
            .map(|(_, v)| v);
        if let Some(o) = opt {
            if let Some(alphas) = o.get("alphas").and_then(|a| a.as_array()) {
                let grid: Vec<String> = alphas.iter().map(|a| a.to_string()).collect();
                let inner = o
                    .get("inner_fraction")
                    .map(|v| v.to_string())
                    .unwrap_or_else(|| "a share".into());
                let _ = write!(
                    p,
                    "The L2 penalty of each probe was chosen from α ∈ {{{}}} per training item (C = 1/(α·n)) by accuracy on {inner} of the training groups held out. ",
                    grid.join(", ")
                );
            }
            if let Some(b) = o.get("bootstrap") {
                let _ = write!(
                    p,
                    "Intervals come from {b} cluster-bootstrap resamples of the test set. "
                );
            }
        }
    }
}

/// The control task as run: its types and what selectivity means.
/// The sentence on the regression probes of continuous columns, if any.
fn regress_sentence(p: &mut String, name: &str, recs: &[ProbeRecord]) {
    let cols = distinct(
        recs.iter()
            .filter(|r| r.is_continuous())
            .map(|r| r.task.clone()),
    );
    if cols.is_empty() {
        return;
    }
    let _ = write!(
        p,
        "On “{name}”, each continuous column ({}) was probed on every layer by ridge regression on standardised features (target standardised on the training side, penalty chosen from the same grid on the same kind of inner split, same outer folds as the classifiers); frames without a value were left out. Its held-out R² is shown with a 95% cluster-bootstrap interval over test speakers, beside the error of predicting the training mean (RMSE in the table, its R² dashed in the figure); R² measures how much of the value a linear map of the layer recovers, not whether the model uses it. Where a column fades (under the headline figure) is the first layer after its peak R² whose R² is below half way between the peak and the control R² at the peak layer (0 when no control ran); the floor is the control, not the lowest R² after the peak as for speaker accuracy, so a small decline is not called a fall. ",
        cols.join(", ")
    );
}

fn control_sentence(p: &mut String, recs: &[ProbeRecord]) {
    let by = distinct(
        recs.iter()
            .filter(|r| r.control_by != "none")
            .map(|r| r.control_by.clone()),
    );
    if by.is_empty() {
        let _ = write!(p, "No control task was run. ");
        return;
    }
    let types = if by.iter().all(|b| b.ends_with(" in context")) {
        let col = by[0].trim_end_matches(" in context");
        format!("a {col} in context (the {col} label of the frame's run with the labels of the runs before and after it in the same utterance, # at its edges)")
    } else {
        format!("a value of the column {}", by.join("/"))
    };
    let _ = write!(
        p,
        "The control task (Hewitt & Liang 2019) gives each type, here {types}, one random label drawn from the task's class frequencies with the run's seed; types recur across speakers and utterances, so a probe with enough capacity can learn that mapping. The same probe, with the same penalty and split, was trained on it; selectivity is accuracy minus control accuracy. "
    );
    if recs
        .iter()
        .any(|r| r.is_continuous() && r.control_by != "none")
    {
        let _ = write!(
            p,
            "For a continuous column each type instead gets one value drawn once (the same in every fold) from the column's values, the same ridge is fitted to it, and selectivity is R² minus control R². "
        );
    }
}

/// How the test side was formed: one split or grouped folds.
fn folds_sentence(p: &mut String, recs: &[ProbeRecord]) {
    let k = recs.iter().map(|r| r.folds).max().unwrap_or(1);
    if k > 1 {
        let _ = write!(
            p,
            "Where one split would test on fewer than 10 speakers (utterances for the speaker task), the groups were dealt over {k} folds, every group tested exactly once; accuracy and its interval are pooled over all test items of all folds, and the spread of the per-fold accuracies is reported as accuracy_sd. "
        );
    }
}

/// The MDL online code, when computed.
fn mdl_sentence(p: &mut String, recs: &[ProbeRecord]) {
    if recs.iter().any(|r| r.mdl_status == "computed") {
        let _ = write!(
            p,
            "The description length of the labels (MDL, online code; Voita & Titov 2020) was computed on the first fold's training items in a seeded order, cut into blocks at 0.1, 0.2, 0.4, 0.8, 1.6, 3.2, 6.25, 12.5, 25, 50 and 100%: the first block sent with the uniform code, every later one with the probe trained on the blocks before it (its probabilities mixed with 0.1% of the uniform code so an unseen class stays finite); compression is the uniform code length over the online one. "
        );
    }
}

/// The map sentence of one capture: the embedding, its sample and the purity k.
fn map_methods(p: &mut String, m: &Methods, sec: &CaptureSection) {
    let name = &sec.summary.name;
    match &sec.maps {
        Some(mp) => {
            let o = m
                .options
                .iter()
                .find(|(k, _)| k == &format!("map {name}"))
                .map(|(_, v)| v.clone())
                .unwrap_or(serde_json::Value::Null);
            let num = |v: &serde_json::Value| v.as_f64().map(|x| format!("{x}"));
            let how = match o["method"].as_str() {
                Some("tsne") => format!(
                    "t-SNE (van der Maaten & Hinton 2008) after PCA to {} dimensions, perplexity {}, {} iterations with early exaggeration {} then {} more, each layer started from the previous layer's map scaled to standard deviation 1e-4",
                    num(&o["pca_dims"]).unwrap_or("?".into()),
                    num(&o["tsne"]["perplexity"]).unwrap_or("?".into()),
                    num(&o["tsne"]["early_iterations"]).unwrap_or("?".into()),
                    num(&o["tsne"]["exaggeration"]).unwrap_or("?".into()),
                    num(&o["tsne"]["iterations"]).unwrap_or("?".into())
                ),
                Some("pca") => "the first two principal components, aligned layer to layer by orthogonal Procrustes".to_string(),
                _ => "a 2-D embedding".to_string(),
            };
            let per_cell = match (o["cells"].as_u64(), o["cells_used"].as_u64()) {
                (Some(all), Some(used)) if used < all => {
                    format!("one from each of {used} of the {all} speaker × phone cells, the cells drawn with the seed")
                }
                _ => format!(
                    "up to {} per speaker × phone cell",
                    num(&o["per_cell_used"]).unwrap_or("?".into())
                ),
            };
            let _ = write!(
                p,
                "Its 2-D maps place the same {} sampled frames ({per_cell}) for each of {} layers, drawn by {how}; purity is measured on those frames with k = {} nearest neighbours and k-means with {} clusters (Hsu et al. 2021). ",
                mp.frames.len(),
                mp.layers.len(),
                num(&o["knn_k_used"]).unwrap_or("?".into()),
                num(&o["kmeans_k_used"]).unwrap_or("?".into()),
            );
        }
        None => {
            let _ = write!(p, "No layer maps were available for “{name}”. ");
        }
    }
}

/// The comparison sentence: CKA and the paired probe tests.
fn compare_methods(p: &mut String, m: &Methods, c: &CompareInputs) {
    let o = m
        .options
        .iter()
        .find(|(k, _)| k == "compare")
        .map(|(_, v)| v.clone())
        .unwrap_or(serde_json::Value::Null);
    let kernel = c.cka.first().map(|r| r.kernel.name()).unwrap_or("linear");
    let estimator = c.cka.first().map(|r| r.estimator.name()).unwrap_or("full");
    let n = c.cka.first().map(|r| r.n_frames).unwrap_or(0);
    let _ = write!(
        p,
        "The two captures were compared layer by layer with {kernel} CKA (Kornblith et al. 2019, {estimator} HSIC estimate on {n} paired frames) over {} layer pairs, and by probes trained with the same split and seed on both, tested with McNemar's test on the paired test predictions and a paired speaker bootstrap ({} resamples) of the accuracy difference ({} layer–task pairs, {} of the test groups held out). ",
        c.cka.len(),
        o["bootstrap"].as_u64().map(|b| b.to_string()).unwrap_or("?".into()),
        c.probe_delta.len(),
        o["test_fraction"].as_f64().map(|f| format!("{:.0}%", f * 100.0)).unwrap_or("?".into()),
    );
}

/// The ABX sentence: items, distances, triplets and the averaging order.
fn abx_methods(p: &mut String, o: &serde_json::Value) {
    let label = o["label"].as_str().unwrap_or("phone");
    let cap = match o["max_items"].as_u64() {
        Some(0) => "all items".to_string(),
        Some(n) => format!("at most {n} items per (label, context, speaker) cell, drawn with the seed and the same for every layer"),
        None => "?".to_string(),
    };
    let _ = write!(
        p,
        "ABX discriminability (the task of Schatz et al. 2013) was measured on {label} items, each a maximal run of frames with one {label} label inside an utterance, in the context of the labels of the items before and after it (# at utterance edges). Frames are compared by angular distance (arccos of the cosine similarity, over π; a zero vector is at 1/2 from everything) and items by dynamic time warping with steps (1,1), (1,0), (0,1), the path cost divided by the number of cells on the path. For each ordered label pair (a, b), context and speaker, every triplet with A and X (X ≠ A) of label a and B of label b scores 1 when X is nearer to A, 1/2 on a tie; scores are averaged over the triplets of a cell, then over contexts, speakers (ordered speaker pairs across speaker, with X from the second talker) and label pairs, and the error rate is 1 minus that score; {cap}. "
    );
}

/// The options list, the input hashes and the time per step.
fn method_tables(out: &mut String, m: &Methods) {
    if !m.options.is_empty() {
        out.push_str("<dl class=\"options\">");
        for (k, v) in &m.options {
            let _ = write!(
                out,
                "<dt>{}</dt><dd>{}</dd>",
                esc(k),
                esc(&describe_options(v))
            );
        }
        out.push_str("</dl>");
    }
    let rows: Vec<Vec<String>> = m
        .hashes
        .iter()
        .map(|h| {
            vec![
                h.capture.clone(),
                h.file.clone(),
                h.bytes.to_string(),
                h.sha256.clone(),
            ]
        })
        .collect();
    table(
        out,
        "Input files (SHA-256)",
        &["capture", "file", "bytes", "SHA-256"],
        &rows,
    );
    if !m.timings.is_empty() {
        let rows: Vec<Vec<String>> = m
            .timings
            .iter()
            .map(|(k, t)| vec![k.clone(), format!("{t:.2}")])
            .collect();
        table(out, "Time per step", &["step", "seconds"], &rows);
    }
}
