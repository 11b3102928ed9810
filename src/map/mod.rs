//! 2-D maps of each layer (t-SNE or PCA) and cluster-purity metrics per layer × label, on one
//! stratified sample of frames shared by all layers.
//!
//! Per layer: read the sampled rows; PCA (two components, panels aligned to the previous
//! layer by orthogonal Procrustes) or t-SNE (PCA to 50 dims, then [`tsne`], initialised from
//! the first layer's scaled PCA and then from the previous layer's map); then the metrics of
//! [`crate::purity`] in the full space and on the map. The summary names the layer where
//! speaker k-NN purity has fallen half way from its maximum to its minimum and the layer where
//! phone k-NN purity peaks.

pub mod pca;
pub mod tsne;

use std::path::Path;

use ndarray::Array2;
use serde::Serialize;

use crate::capture::{Capture, UNLABELLED};
use crate::output::CaptureRef;
use crate::purity;
use crate::{CommonOptions, Error, Progress};

/// Errors of the map stage (bad input: exit code 2).
#[derive(Debug, thiserror::Error)]
pub enum MapError {
    /// Too few frames to map.
    #[error("{path}: frames to map: expected at least 3 labelled frames in the sample, found {found} ({why})")]
    TooFewPoints {
        /// The capture.
        path: std::path::PathBuf,
        /// How many there were.
        found: usize,
        /// Why so few.
        why: String,
    },
    /// A label named with `--color-by` is not in the capture.
    #[error("{path}: --color-by '{name}': expected one of the capture's labels ({available}), found no such label")]
    UnknownLabel {
        /// The capture.
        path: std::path::PathBuf,
        /// The name asked for.
        name: String,
        /// Names available.
        available: String,
    },
}

/// Which 2-D map to draw.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize)]
#[serde(rename_all = "lowercase")]
pub enum Method {
    /// t-SNE after PCA to 50 dims.
    Tsne,
    /// The first two principal components.
    Pca,
}

/// Options of `voxstrata map`.
#[derive(Clone, Debug, Serialize)]
pub struct MapOptions {
    /// Map method.
    pub method: Method,
    /// Frames drawn per speaker × phone cell.
    pub per_label: usize,
    /// Cap on the sample size (the per-cell quota is lowered to fit).
    pub max_points: usize,
    /// Extra labels to colour maps by (speaker and phone are always drawn).
    pub color_by: Vec<String>,
    /// Dimensions kept by PCA before t-SNE.
    pub pca_dims: usize,
    /// Neighbours for k-NN purity and trustworthiness.
    pub knn_k: usize,
    /// Clusters for k-means (capped at a tenth of the sample).
    pub kmeans_k: usize,
    /// Most Lloyd rounds of k-means.
    pub kmeans_iterations: usize,
    /// t-SNE settings.
    pub tsne: tsne::TsneOptions,
}

impl Default for MapOptions {
    fn default() -> Self {
        MapOptions {
            method: Method::Tsne,
            per_label: 10,
            max_points: 10_000,
            color_by: vec![],
            pca_dims: 50,
            knn_k: 10,
            // Hsu et al. (2021) report cluster quality at a fixed number of clusters (100 for
            // MFCC features and more for hidden layers) rather than at the number of phones.
            kmeans_k: 100,
            kmeans_iterations: 100,
            tsne: tsne::TsneOptions::default(),
        }
    }
}

/// One row of `purity.json` / `purity.csv`.
#[derive(Clone, Debug, Serialize)]
pub struct PurityRecord {
    /// Layer number.
    pub layer: usize,
    /// Label task.
    pub label: String,
    /// Sampled frames carrying this label.
    pub n_frames: usize,
    /// Mean silhouette in the full space.
    pub silhouette: Option<f64>,
    /// k-NN label purity in the full space.
    pub knn_purity: Option<f64>,
    /// k-NN label purity on the 2-D map.
    pub knn_purity_2d: Option<f64>,
    /// Trustworthiness of the map (same for every label of a layer).
    pub trustworthiness: Option<f64>,
    /// E_y[max_z p(z|y)] of the k-means clusters.
    pub cluster_purity: Option<f64>,
    /// E_z[max_y p(y|z)] of the k-means clusters.
    pub label_purity: Option<f64>,
    /// I(y; z) / H(y).
    pub pnmi: Option<f64>,
    /// Between-class share of the total sum of squares.
    pub variance_ratio: Option<f64>,
    /// KL divergence of the t-SNE map (None for PCA).
    pub kl_divergence: Option<f64>,
    /// Variance share of the PCA components used (2 for a PCA map, 50 before t-SNE).
    pub explained_variance: Option<f64>,
}

/// One layer's map.
#[derive(Clone, Debug, Serialize)]
pub struct LayerMap {
    /// Layer number.
    pub layer: usize,
    /// Explained-variance ratios of the PCA components computed for this layer.
    pub explained_variance_ratio: Vec<f64>,
    /// PCA solver used.
    pub pca_solver: pca::PcaSolver,
    /// KL divergence (t-SNE only).
    pub kl_divergence: Option<f64>,
    /// Perplexity used (t-SNE only).
    pub perplexity: Option<f64>,
    /// Gradient method (t-SNE only): `fft` or `exact`.
    pub gradient: Option<&'static str>,
    /// The map (n × 2), rows in the order of [`MapReport::frames`].
    #[serde(skip)]
    pub embedding: Array2<f32>,
}

/// Labels of the sampled frames for one task.
#[derive(Clone, Debug, Serialize)]
pub struct SampleLabels {
    /// Task name.
    pub name: String,
    /// Class names.
    pub classes: Vec<String>,
    /// Code per sampled frame (`UNLABELLED` where none).
    pub codes: Vec<u32>,
}

/// The headline of a map run.
#[derive(Clone, Debug, Default, Serialize)]
pub struct Summary {
    /// Metric the summary reads.
    pub metric: &'static str,
    /// Layer where speaker purity has fallen half way from its maximum to its minimum.
    pub speaker_half_fall_layer: Option<usize>,
    /// Highest speaker purity and its layer.
    pub speaker_max: Option<(usize, f64)>,
    /// Lowest speaker purity (after the maximum) and its layer.
    pub speaker_min: Option<(usize, f64)>,
    /// Layer where phone purity peaks, and the value.
    pub phone_peak: Option<(usize, f64)>,
}

/// Everything `map` computes.
#[derive(Clone, Debug)]
pub struct MapReport {
    /// The capture.
    pub capture: CaptureRef,
    /// Sampled frame indices (same for every layer).
    pub frames: Vec<u64>,
    /// One map per layer, in layer order.
    pub layers: Vec<LayerMap>,
    /// Labels of the sampled frames, per task (speaker last).
    pub labels: Vec<SampleLabels>,
    /// Purity records (layer × label).
    pub records: Vec<PurityRecord>,
    /// Summary.
    pub summary: Summary,
    /// Things the user should know (short cells, skipped labels).
    pub notes: Vec<String>,
    /// Options, as JSON.
    pub options: serde_json::Value,
    /// Tasks to colour maps by, in drawing order.
    pub colourings: Vec<String>,
}

fn check_color_by(cap: &Capture, opts: &MapOptions) -> Result<Vec<String>, MapError> {
    let names = cap.frames.task_names();
    let mut out: Vec<String> = vec!["speaker".into()];
    if names.iter().any(|n| n == "phone") {
        out.push("phone".into());
    }
    for c in &opts.color_by {
        if !names.contains(c) {
            return Err(MapError::UnknownLabel {
                path: cap.dir.clone(),
                name: c.clone(),
                available: names.join(", "),
            });
        }
        if !out.contains(c) {
            out.push(c.clone());
        }
    }
    Ok(out)
}

/// Compute the maps and metrics of every selected layer (nothing is written).
pub fn run(
    cap: &Capture,
    opts: &MapOptions,
    common: &CommonOptions,
    progress: &Progress,
) -> Result<MapReport, Error> {
    let colourings = check_color_by(cap, opts)?;
    let layer_idx = cap.select_layers(common.layers.as_ref())?;
    let mut notes = Vec::new();
    // strata: speaker × phone (or × the first other label when there is no phone)
    let speaker = cap.frames.frame_speaker();
    let other = cap
        .frames
        .task("phone")
        .or_else(|| cap.frames.tasks.iter().find(|t| t.name != "speaker"));
    let mut strata: Vec<&[u32]> = vec![&speaker];
    if let Some(t) = other {
        strata.push(&t.codes);
    }
    let sample = crate::select::sample::stratified(
        &strata,
        opts.per_label.max(1),
        opts.max_points.max(3),
        common.seed,
    );
    let cell_name = match other {
        Some(t) => format!("speaker × {}", t.name),
        None => "speaker".into(),
    };
    if sample.short_cells > 0 {
        notes.push(format!(
            "--per-label {}: {} of {} {} cells hold fewer frames; all their frames were taken",
            opts.per_label, sample.short_cells, sample.cells, cell_name
        ));
    }
    if sample.per_cell < opts.per_label {
        notes.push(format!(
            "sample capped at {} frames: {} frames per {} cell instead of {}",
            opts.max_points, sample.per_cell, cell_name, opts.per_label
        ));
    }
    let n = sample.frames.len();
    if n < 3 {
        return Err(MapError::TooFewPoints {
            path: cap.dir.clone(),
            found: n,
            why: format!(
                "{} frames carry both a speaker and a {} label",
                n,
                other.map(|t| t.name.as_str()).unwrap_or("speaker")
            ),
        }
        .into());
    }
    let labels: Vec<SampleLabels> = cap
        .frames
        .tasks
        .iter()
        .map(|t| SampleLabels {
            name: t.name.clone(),
            classes: t.classes.clone(),
            codes: sample.frames.iter().map(|&f| t.codes[f]).collect(),
        })
        .collect();
    let task_codes: Vec<&[u32]> = labels.iter().map(|l| l.codes.as_slice()).collect();
    let k = opts.knn_k.max(1).min(n - 1);
    let kmeans_k = opts.kmeans_k.min((n / 10).max(2)).max(1);
    let total_iters = match opts.method {
        Method::Tsne => (opts.tsne.early_iterations + opts.tsne.iterations) as u64,
        Method::Pca => 1,
    };
    let step = progress.step("map", layer_idx.len() as u64 * (total_iters + 1));
    let mut layers: Vec<LayerMap> = Vec::new();
    let mut records = Vec::new();
    let mut singleton_noted = vec![false; labels.len()];
    for &li in &layer_idx {
        let layer_id = cap.layers[li].id;
        step.message(&format!("layer {layer_id}"));
        let x = cap.read_layer_rows(li, &sample.frames)?;
        let prev = layers.last().map(|l| l.embedding.view());
        let (mut emb, ratios, solver, kl, perp, grad) = match opts.method {
            Method::Pca => {
                let p = pca::fit(&x.view(), 2, pca::PcaSolver::Auto, common.seed);
                let mut e = p.transform(&x.view());
                if e.ncols() < 2 {
                    // one-dimensional data: pad with zeros so the map is still n × 2
                    let mut z = Array2::<f32>::zeros((n, 2));
                    z.column_mut(0).assign(&e.column(0));
                    e = z;
                }
                step.inc(1);
                (
                    e,
                    p.explained_variance_ratio.clone(),
                    p.solver,
                    None,
                    None,
                    None,
                )
            }
            Method::Tsne => {
                let p = pca::fit(&x.view(), opts.pca_dims, pca::PcaSolver::Auto, common.seed);
                let reduced = p.transform(&x.view());
                // Every layer runs the full schedule (early exaggeration, then the plain phase)
                // from a start scaled to standard deviation 1e-4: the first layer's PCA, then
                // the previous layer's finished map, so the panels keep one layout. Starting a
                // later layer from the previous map at its own (expanded) scale was tried: on the
                // demo it ended at a higher KL divergence (1.14 against 0.85 on layer 1) and cost
                // more, since the FFT grid grows with the map's extent.
                let init = match &prev {
                    Some(pm) => tsne::rescale(pm, 1e-4),
                    None => {
                        let mut two = Array2::<f32>::zeros((n, 2));
                        for c in 0..reduced.ncols().min(2) {
                            two.column_mut(c).assign(&reduced.column(c));
                        }
                        tsne::rescale(&two.view(), 1e-4)
                    }
                };
                let r = tsne::run(&reduced.view(), &init.view(), &opts.tsne, || step.inc(1));
                (
                    r.embedding,
                    p.explained_variance_ratio.clone(),
                    p.solver,
                    Some(r.kl_divergence),
                    Some(r.perplexity),
                    Some(r.gradient),
                )
            }
        };
        if let Some(pm) = &prev {
            pca::procrustes_align(&mut emb, pm);
        }
        // metrics
        let full = purity::Points::new(&x.view());
        let map_pts = purity::Points::new(&emb.view());
        let low_nbrs = purity::knn_lists(&map_pts, k);
        let trust_ok = 2 * k < n;
        let (full_stats, trust) = purity::label_stats(
            &full,
            &task_codes,
            k,
            trust_ok.then_some(low_nbrs.as_slice()),
        );
        let (map_stats, _) = purity::label_stats(&map_pts, &task_codes, k, None);
        let clusters = purity::kmeans(&x.view(), kmeans_k, common.seed, opts.kmeans_iterations);
        let explained = Some(ratios.iter().sum::<f64>());
        for (t, lab) in labels.iter().enumerate() {
            let fs = &full_stats[t];
            if !fs.silhouette.singletons.is_empty() && !singleton_noted[t] {
                singleton_noted[t] = true;
                let names: Vec<&str> = fs
                    .silhouette
                    .singletons
                    .iter()
                    .map(|&c| lab.classes[c as usize].as_str())
                    .collect();
                notes.push(format!(
                    "{}: {} label(s) with one sampled frame skipped in the silhouette: {}",
                    lab.name,
                    names.len(),
                    names.join(", ")
                ));
            }
            let cs = purity::cluster_scores(&lab.codes, &clusters);
            records.push(PurityRecord {
                layer: layer_id,
                label: lab.name.clone(),
                n_frames: lab.codes.iter().filter(|&&c| c != UNLABELLED).count(),
                silhouette: fs.silhouette.score,
                knn_purity: fs.knn_purity,
                knn_purity_2d: map_stats[t].knn_purity,
                trustworthiness: trust,
                cluster_purity: cs.map(|c| c.cluster_purity),
                label_purity: cs.map(|c| c.label_purity),
                pnmi: cs.map(|c| c.pnmi),
                variance_ratio: purity::variance_ratio(&x.view(), &lab.codes),
                kl_divergence: kl,
                explained_variance: explained,
            });
        }
        step.inc(1);
        layers.push(LayerMap {
            layer: layer_id,
            explained_variance_ratio: ratios,
            pca_solver: solver,
            kl_divergence: kl,
            perplexity: perp,
            gradient: grad,
            embedding: emb,
        });
    }
    drop(step);
    let summary = summarise(&records);
    let mut options = serde_json::to_value(opts).map_err(|e| Error::Internal(e.to_string()))?;
    if let serde_json::Value::Object(m) = &mut options {
        m.insert("seed".into(), common.seed.into());
        m.insert("kmeans_k_used".into(), kmeans_k.into());
        m.insert("knn_k_used".into(), k.into());
        m.insert("per_cell_used".into(), sample.per_cell.into());
    }
    Ok(MapReport {
        capture: CaptureRef {
            name: cap.name.clone(),
            path: cap.dir.display().to_string(),
        },
        frames: sample.frames.iter().map(|&f| f as u64).collect(),
        layers,
        labels,
        records,
        summary,
        notes,
        options,
        colourings,
    })
}

/// Speaker half-fall layer and phone peak layer from k-NN purity in the full space.
pub fn summarise(records: &[PurityRecord]) -> Summary {
    let series = |name: &str| -> Vec<(usize, f64)> {
        records
            .iter()
            .filter(|r| r.label == name)
            .filter_map(|r| r.knn_purity.map(|v| (r.layer, v)))
            .collect()
    };
    let mut s = Summary {
        metric: "knn_purity",
        ..Default::default()
    };
    let spk = series("speaker");
    if let Some(&(lmax, vmax)) = spk
        .iter()
        .fold(None, |b: Option<&(usize, f64)>, x| match b {
            Some(b) if b.1 >= x.1 => Some(b),
            _ => Some(x),
        })
    {
        let after: Vec<(usize, f64)> = spk.iter().copied().filter(|&(l, _)| l >= lmax).collect();
        let (lmin, vmin) = after
            .iter()
            .copied()
            .fold((lmax, vmax), |b, x| if x.1 < b.1 { x } else { b });
        s.speaker_max = Some((lmax, vmax));
        s.speaker_min = Some((lmin, vmin));
        if vmin < vmax {
            let half = vmax - (vmax - vmin) / 2.0;
            s.speaker_half_fall_layer = after.iter().find(|&&(_, v)| v <= half).map(|&(l, _)| l);
        }
    }
    let ph = series("phone");
    s.phone_peak = ph
        .iter()
        .copied()
        .fold(None, |b: Option<(usize, f64)>, x| match b {
            Some(b) if b.1 >= x.1 => Some(b),
            _ => Some(x),
        });
    s
}

impl Summary {
    /// Two lines for the terminal.
    pub fn render(&self) -> String {
        let mut out = String::new();
        match (self.speaker_half_fall_layer, self.speaker_max, self.speaker_min) {
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
        match self.phone_peak {
            Some((l, v)) => out.push_str(&format!(
                "phone purity (10-NN) peaks at layer {l}: {v:.3}\n"
            )),
            None => out.push_str("phone purity: no phone label\n"),
        }
        out
    }
}

/// Refuse early (before any computation) an output folder that `write_outputs` would refuse.
pub fn check_out_dir(dir: &Path, force: bool) -> Result<(), Error> {
    if dir.exists() {
        let busy = !dir.is_dir()
            || std::fs::read_dir(dir)
                .map(|mut r| r.next().is_some())
                .unwrap_or(true);
        if busy && !force {
            // the same refusal prepare_out_dir gives, without creating anything
            crate::output::prepare_out_dir(dir, force)?;
        }
    }
    Ok(())
}

/// Write maps, purity records and pictures of `report` into `dir`.
pub fn write_outputs(report: &MapReport, dir: &Path, force: bool) -> Result<(), Error> {
    crate::output::prepare_out_dir(dir, force)?;
    let maps = dir.join("maps");
    for l in &report.layers {
        crate::output::write_npy_f32(
            &maps.join(format!("layer_{:02}.npy", l.layer)),
            &l.embedding.view(),
        )?;
    }
    crate::output::write_npy_u64(&maps.join("frames.npy"), &report.frames)?;
    let mut extra = serde_json::Map::new();
    let js = |v: &dyn erased::Ser| v.to_json();
    extra.insert("summary".into(), js(&report.summary));
    extra.insert("layers".into(), js(&report.layers));
    extra.insert("notes".into(), js(&report.notes));
    extra.insert("n_frames".into(), report.frames.len().into());
    crate::output::write_records(
        dir,
        "purity",
        std::slice::from_ref(&report.capture),
        report.options.clone(),
        &report.records,
        extra,
    )?;
    for name in &report.colourings {
        if let Some(lab) = report.labels.iter().find(|l| &l.name == name) {
            let fig = crate::plot::map::MapGrid::new(report, lab);
            crate::plot::save(&fig, &dir.join(format!("map_{}", file_safe(name))))?;
        }
    }
    crate::plot::save(
        &crate::plot::map::PurityCurves::new(report),
        &dir.join("purity"),
    )?;
    Ok(())
}

fn file_safe(name: &str) -> String {
    name.chars()
        .map(|c| {
            if c.is_alphanumeric() || c == '-' || c == '_' {
                c
            } else {
                '_'
            }
        })
        .collect()
}

mod erased {
    /// Serialise anything to a JSON value (Null if it cannot be).
    pub trait Ser {
        fn to_json(&self) -> serde_json::Value;
    }
    impl<T: serde::Serialize> Ser for T {
        fn to_json(&self) -> serde_json::Value {
            serde_json::to_value(self).unwrap_or(serde_json::Value::Null)
        }
    }
}
