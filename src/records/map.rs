//! Records of the map analysis: one [`PurityRecord`] per layer × label, the 2-D map of each
//! layer over one shared frame sample, the sample's labels and a summary.

use ndarray::Array2;
use serde::{Deserialize, Serialize};

use super::CaptureRef;

/// One row of `purity.json` / `purity.csv`.
#[derive(Clone, Debug, Default, Serialize, Deserialize)]
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
    /// For labels other than `phone`: the share of the layer's total sum of squares that lies
    /// between this label's values inside each phone, Σ_p Σ_v n_pv ‖mean_pv − mean_p‖² /
    /// Σ ‖x − mean‖² (None for `phone` itself, or without a phone column).
    pub within_phone_share: Option<f64>,
    /// For continuous labels only: R² of predicting each frame's value by the mean of its k
    /// nearest neighbours in the full space (null for categorical labels).
    #[serde(default)]
    pub knn_r2: Option<f64>,
    /// The same on the 2-D map.
    #[serde(default)]
    pub knn_r2_2d: Option<f64>,
}

/// One layer's map.
#[derive(Clone, Debug, Serialize, Deserialize)]
pub struct LayerMap {
    /// Layer number.
    pub layer: usize,
    /// Explained-variance ratios of the PCA components computed for this layer.
    pub explained_variance_ratio: Vec<f64>,
    /// PCA solver used.
    pub pca_solver: PcaSolver,
    /// KL divergence (t-SNE only).
    pub kl_divergence: Option<f64>,
    /// Perplexity used (t-SNE only).
    pub perplexity: Option<f64>,
    /// Gradient method (t-SNE only): `fft` or `exact`.
    pub gradient: Option<String>,
    /// The map (n × 2), rows in the order of [`MapReport::frames`].
    #[serde(skip)]
    pub embedding: Array2<f32>,
}

/// Labels of the sampled frames for one task.
#[derive(Clone, Debug, Serialize, Deserialize)]
pub struct SampleLabels {
    /// Task name.
    pub name: String,
    /// Class names.
    pub classes: Vec<String>,
    /// Code per sampled frame (`UNLABELLED` where none).
    pub codes: Vec<u32>,
    /// For a continuous label: the value per sampled frame (NaN where none); `classes` is
    /// then empty and every code `UNLABELLED`.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub values: Option<Vec<f32>>,
}

/// The headline of a map run.
#[derive(Clone, Debug, Default, Serialize, Deserialize)]
pub struct Summary {
    /// Metric the summary reads.
    pub metric: String,
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

/// How to compute the components.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum PcaSolver {
    /// Exact when dim ≤ [`EXACT_MAX_DIM`]; covariance when the covariance costs less than the
    /// randomized passes (dim ≤ [`COVARIANCE_FACTOR`] × (k + oversampling)); randomized
    /// otherwise.
    Auto,
    /// Covariance in f64, full eigendecomposition by Jacobi rotations.
    Exact,
    /// Covariance from f32 products (f64 sums), top eigenpairs by subspace iteration with
    /// Rayleigh–Ritz until the top k eigenvalues settle (to 1e-12 relative).
    Covariance,
    /// Randomized SVD.
    Randomized,
}
