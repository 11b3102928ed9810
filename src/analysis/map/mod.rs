//! 2-D maps of each layer (t-SNE or PCA) and cluster-purity metrics per layer × label, on one
//! stratified sample of frames shared by all layers.
//!
//! Per layer: read the sampled rows; PCA (two components, panels aligned to the previous
//! layer by orthogonal Procrustes) or t-SNE (PCA to 50 dims, then [`tsne`], initialised from
//! the first layer's scaled PCA and then from the previous layer's map); then the metrics of
//! [`crate::analysis::purity`] in the full space and on the map. The summary names the layer where
//! speaker k-NN purity has fallen half way from its maximum to its minimum and the layer where
//! phone k-NN purity peaks.

pub mod pca;
pub mod tsne;

use ndarray::{Array2, ArrayView2};
use serde::Serialize;

use crate::analysis::purity;
use crate::capture::{Capture, CaptureError, UNLABELLED};
use crate::progress::Step;
pub use crate::records::map::{LayerMap, MapReport, PurityRecord, SampleLabels, Summary};
use crate::records::CaptureRef;
use crate::select::sample::Sample;
use crate::{CommonOptions, Progress};

/// Errors of the map stage (bad input and unreadable captures: exit code 2; internal: 1).
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
    /// Settings that cannot work.
    #[error("{0}")]
    Option(String),
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
    /// A capture could not be read.
    #[error(transparent)]
    Capture(#[from] CaptureError),
    /// A broken invariant inside the map stage.
    #[error("internal error: {0}")]
    Internal(String),
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

impl MapOptions {
    /// Refuse settings that cannot work (exit code 2), before any work: never clamp.
    pub fn check(&self) -> Result<(), MapError> {
        let bad = |m: String| Err(MapError::Option(m));
        if self.per_label == 0 {
            return bad("--per-label: expected at least 1 frame per cell, found 0".into());
        }
        if self.max_points < 3 {
            return bad(format!(
                "sample cap: expected at least 3 frames, found {}",
                self.max_points
            ));
        }
        if self.knn_k == 0 || self.kmeans_k == 0 || self.pca_dims < 2 {
            return bad(format!(
                "expected k-NN k ≥ 1, k-means k ≥ 1 and at least 2 PCA dims, found {}, {} and {}",
                self.knn_k, self.kmeans_k, self.pca_dims
            ));
        }
        Ok(())
    }
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

fn check_color_by(cap: &Capture, opts: &MapOptions) -> Result<Vec<String>, MapError> {
    let mut names = cap.frames.task_names();
    names.extend(cap.frames.continuous.iter().map(|t| t.name.clone()));
    // The default tasks, speaker first (the maps' first question is who is speaking).
    let mut out: Vec<String> = cap.frames.default_tasks();
    out.sort_by_key(|n| n != "speaker");
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
) -> Result<MapReport, MapError> {
    let colourings = check_color_by(cap, opts)?;
    let layer_idx = cap.select_layers(common.layers.as_ref())?;
    let mut notes = Vec::new();
    let sample = draw_sample(cap, opts, common.seed, &mut notes)?;
    let n = sample.frames.len();
    let mut labels = sample_labels(cap, &sample.frames);
    let n_categorical = labels.len();
    labels.extend(sample_values(cap, &sample.frames, &colourings));
    let (class_labels, value_labels) = labels.split_at(n_categorical);
    // Both k shrink on tiny samples (k-NN needs k < n; k-means at most a tenth of the
    // sample); the values used are written to the options as knn_k_used and kmeans_k_used.
    let metrics = LayerMetrics {
        labels: class_labels,
        values: value_labels,
        task_codes: class_labels.iter().map(|l| l.codes.as_slice()).collect(),
        knn_k: opts.knn_k.min(n - 1),
        kmeans_k: opts.kmeans_k.min((n / 10).max(2)),
        kmeans_iterations: opts.kmeans_iterations,
        seed: common.seed,
    };
    let total_iters = match opts.method {
        Method::Tsne => (opts.tsne.early_iterations + opts.tsne.iterations) as u64,
        Method::Pca => 1,
    };
    let step = progress.step("map", layer_idx.len() as u64 * (total_iters + 1));
    let mut layers: Vec<LayerMap> = Vec::new();
    let mut records = Vec::new();
    let mut singleton_noted = vec![false; n_categorical];
    for &li in &layer_idx {
        let layer_id = cap.layers[li].id;
        step.message(&format!("layer {layer_id}"));
        let x = cap.read_layer_rows(li, &sample.frames)?;
        let prev = layers.last().map(|l| l.embedding.view());
        let map = map_layer(&x, layer_id, prev, opts, common.seed, &step);
        records.extend(metrics.records(&x, &map, &mut singleton_noted, &mut notes));
        step.inc(1);
        layers.push(map);
    }
    drop(step);
    let summary = summarise(&records);
    let used = [
        ("kmeans_k_used", metrics.kmeans_k),
        ("knn_k_used", metrics.knn_k),
        ("per_cell_used", sample.per_cell),
        ("cells", sample.cells),
        ("cells_used", sample.cells_used),
    ];
    let options = options_value(opts, common.seed, &used)?;
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

/// The stratified sample shared by all layers: speaker × phone cells (or × the first other
/// label when there is no phone). Notes short cells and a lowered quota; refuses fewer than 3
/// frames.
fn draw_sample(
    cap: &Capture,
    opts: &MapOptions,
    seed: u64,
    notes: &mut Vec<String>,
) -> Result<Sample, MapError> {
    let speaker = cap.frames.frame_speaker();
    let other = cap
        .frames
        .task("phone")
        .or_else(|| cap.frames.tasks.iter().find(|t| t.name != "speaker"));
    let mut strata: Vec<&[u32]> = vec![&speaker];
    if let Some(t) = other {
        strata.push(&t.codes);
    }
    let sample = crate::select::sample::stratified(&strata, opts.per_label, opts.max_points, seed);
    let cell_name = match other {
        Some(t) => format!("speaker × {}", t.name),
        None => "speaker".into(),
    };
    if sample.short_cells > 0 {
        notes.push(format!(
            "{} of {} {} cells hold fewer than the {} frames taken per cell (--per-label {}); all their frames were taken",
            sample.short_cells, sample.cells, cell_name, sample.per_cell, opts.per_label
        ));
    }
    if sample.cells_used < sample.cells {
        notes.push(format!(
            "sample capped at {} frames, fewer than the {} {} cells: one frame from each of {} cells drawn with the seed",
            opts.max_points, sample.cells, cell_name, sample.cells_used
        ));
    } else if sample.per_cell < opts.per_label {
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
        });
    }
    Ok(sample)
}

/// Every label task's codes on the sampled frames.
fn sample_labels(cap: &Capture, frames: &[usize]) -> Vec<SampleLabels> {
    cap.frames
        .tasks
        .iter()
        .map(|t| SampleLabels {
            name: t.name.clone(),
            classes: t.classes.clone(),
            codes: frames.iter().map(|&f| t.codes[f]).collect(),
            values: None,
        })
        .collect()
}

/// The values of the continuous columns among `colourings` on the sampled frames.
fn sample_values(cap: &Capture, frames: &[usize], colourings: &[String]) -> Vec<SampleLabels> {
    cap.frames
        .continuous
        .iter()
        .filter(|t| colourings.contains(&t.name))
        .map(|t| SampleLabels {
            name: t.name.clone(),
            classes: vec![],
            codes: vec![UNLABELLED; frames.len()],
            values: Some(frames.iter().map(|&f| t.values[f]).collect()),
        })
        .collect()
}

/// Map one layer's sampled rows `x` to 2-D with `opts.method`, aligned by Procrustes to the
/// previous layer's map `prev` (t-SNE also starts from it).
fn map_layer(
    x: &Array2<f32>,
    layer: usize,
    prev: Option<ArrayView2<f32>>,
    opts: &MapOptions,
    seed: u64,
    step: &Step,
) -> LayerMap {
    let mut map = match opts.method {
        Method::Pca => {
            let m = pca_map(x, layer, seed);
            step.inc(1);
            m
        }
        Method::Tsne => tsne_map(x, layer, prev.as_ref(), opts, seed, step),
    };
    if let Some(pm) = &prev {
        pca::procrustes_align(&mut map.embedding, pm);
    }
    map
}

/// The first two principal components (padded with zeros for one-dimensional data).
fn pca_map(x: &Array2<f32>, layer: usize, seed: u64) -> LayerMap {
    let n = x.nrows();
    let p = pca::fit(&x.view(), 2, pca::PcaSolver::Auto, seed);
    let mut e = p.transform(&x.view());
    if e.ncols() < 2 {
        // one-dimensional data: pad with zeros so the map is still n × 2
        let mut z = Array2::<f32>::zeros((n, 2));
        z.column_mut(0).assign(&e.column(0));
        e = z;
    }
    LayerMap {
        layer,
        explained_variance_ratio: p.explained_variance_ratio.clone(),
        pca_solver: p.solver,
        kl_divergence: None,
        perplexity: None,
        gradient: None,
        embedding: e,
    }
}

/// t-SNE after PCA to `opts.pca_dims` dims, started from the previous layer's map `prev` or,
/// on the first layer, from the first two components.
fn tsne_map(
    x: &Array2<f32>,
    layer: usize,
    prev: Option<&ArrayView2<f32>>,
    opts: &MapOptions,
    seed: u64,
    step: &Step,
) -> LayerMap {
    let n = x.nrows();
    let p = pca::fit(&x.view(), opts.pca_dims, pca::PcaSolver::Auto, seed);
    let reduced = p.transform(&x.view());
    // Every layer runs the full schedule (early exaggeration, then the plain phase)
    // from a start scaled to standard deviation 1e-4: the first layer's PCA, then
    // the previous layer's finished map, so the panels keep one layout. Starting a
    // later layer from the previous map at its own (expanded) scale was tried: on the
    // demo it ended at a higher KL divergence (1.14 against 0.85 on layer 1) and cost
    // more, since the FFT grid grows with the map's extent.
    let init = match prev {
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
    LayerMap {
        layer,
        explained_variance_ratio: p.explained_variance_ratio.clone(),
        pca_solver: p.solver,
        kl_divergence: Some(r.kl_divergence),
        perplexity: Some(r.perplexity),
        gradient: Some(r.gradient.to_string()),
        embedding: r.embedding,
    }
}

/// What every layer's purity metrics share: the sampled labels and the k values used.
struct LayerMetrics<'a> {
    /// Categorical labels (purity, silhouette, clusters).
    labels: &'a [SampleLabels],
    /// Continuous labels (k-NN R²).
    values: &'a [SampleLabels],
    task_codes: Vec<&'a [u32]>,
    knn_k: usize,
    kmeans_k: usize,
    kmeans_iterations: usize,
    seed: u64,
}

impl LayerMetrics<'_> {
    /// One purity record per label for a layer: metrics in the full space `x` and on its
    /// map. Labels with single-frame classes are noted once (`singleton_noted`).
    fn records(
        &self,
        x: &Array2<f32>,
        map: &LayerMap,
        singleton_noted: &mut [bool],
        notes: &mut Vec<String>,
    ) -> Vec<PurityRecord> {
        let (n, k) = (x.nrows(), self.knn_k);
        let full = purity::Points::new(&x.view());
        let map_pts = purity::Points::new(&map.embedding.view());
        let low_nbrs = purity::knn_lists(&map_pts, k);
        let trust_ok = 2 * k < n;
        let (full_stats, trust) = purity::label_stats(
            &full,
            &self.task_codes,
            k,
            trust_ok.then_some(low_nbrs.as_slice()),
        );
        let (map_stats, _) = purity::label_stats(&map_pts, &self.task_codes, k, None);
        let clusters = purity::kmeans(&x.view(), self.kmeans_k, self.seed, self.kmeans_iterations);
        let explained = Some(map.explained_variance_ratio.iter().sum::<f64>());
        let phone = self.labels.iter().find(|l| l.name == "phone");
        let mut records = Vec::with_capacity(self.labels.len());
        for (t, lab) in self.labels.iter().enumerate() {
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
                layer: map.layer,
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
                kl_divergence: map.kl_divergence,
                explained_variance: explained,
                within_phone_share: phone.filter(|p| p.name != lab.name).and_then(|p| {
                    crate::analysis::variance::within_phone_share(x.view(), &p.codes, &lab.codes)
                }),
                ..Default::default()
            });
        }
        for lab in self.values {
            let v = lab.values.as_deref().unwrap_or(&[]);
            records.push(PurityRecord {
                layer: map.layer,
                label: lab.name.clone(),
                n_frames: v.iter().filter(|x| x.is_finite()).count(),
                knn_r2: purity::knn_r2(&full, v, k),
                knn_r2_2d: purity::knn_r2(&map_pts, v, k),
                kl_divergence: map.kl_divergence,
                explained_variance: explained,
                ..Default::default()
            });
        }
        records
    }
}

/// The options as recorded: the map settings, the seed and the values `used`.
fn options_value(
    opts: &MapOptions,
    seed: u64,
    used: &[(&str, usize)],
) -> Result<serde_json::Value, MapError> {
    let mut options = serde_json::to_value(opts).map_err(|e| MapError::Internal(e.to_string()))?;
    if let serde_json::Value::Object(m) = &mut options {
        m.insert("seed".into(), seed.into());
        for &(key, v) in used {
            m.insert(key.into(), v.into());
        }
    }
    Ok(options)
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
        metric: "knn_purity".into(),
        ..Default::default()
    };
    let spk = series("speaker");
    if let Some(h) = crate::analysis::stats::half_fall(&spk) {
        s.speaker_max = Some(h.peak);
        s.speaker_min = Some(h.floor);
        s.speaker_half_fall_layer = h.layer;
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
