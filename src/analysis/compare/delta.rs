//! Probe deltas between two checkpoints: the same probe is trained on A's and on B's
//! activations with the identical train/test split, and the paired test predictions give
//! each accuracy, their difference with a paired cluster-bootstrap interval over test
//! speakers, and McNemar's test on the discordant pairs (see [`crate::analysis::stats`]).
//!
//! The probe itself is anything implementing [`FitPredict`], so the trainer of the probe
//! stage plugs in here without this module knowing its internals.

pub use crate::records::compare::ProbeDelta;
use ndarray::{ArrayView2, Axis};

use crate::analysis::stats;

/// "Fit a classifier on train rows, predict the test rows" — the probe a delta is built on.
pub trait FitPredict {
    /// Train on `x_train` (rows) with labels `y_train` in 0..n_classes (`inner_groups` are the
    /// training rows' speakers, for any inner validation split), predict a class per test row.
    fn fit_predict(
        &self,
        x_train: &ArrayView2<f32>,
        y_train: &[u32],
        n_classes: usize,
        x_test: &ArrayView2<f32>,
        inner_groups: &[u32],
        seed: u64,
    ) -> Result<Vec<u32>, String>;
}

/// The labelled rows, split and clusters shared by A and B for one task.
pub struct DeltaInput<'a> {
    /// Layer number.
    pub layer: usize,
    /// Task name.
    pub task: &'a str,
    /// Class per row of the layer matrices (only train and test rows are read).
    pub labels: &'a [u32],
    /// Number of classes.
    pub n_classes: usize,
    /// Speaker (cluster) per row.
    pub groups: &'a [u32],
    /// Training rows.
    pub train: &'a [usize],
    /// Test rows.
    pub test: &'a [usize],
}

/// Bootstrap settings for deltas.
#[derive(Clone, Copy, Debug)]
pub struct DeltaOptions {
    /// Bootstrap resamples.
    pub n_boot: usize,
    /// Interval level.
    pub level: f64,
}

impl Default for DeltaOptions {
    fn default() -> Self {
        DeltaOptions {
            n_boot: 1000,
            level: 0.95,
        }
    }
}

/// Train `probe` on A's and on B's rows with the same split and compare the predictions.
pub fn probe_delta<P: FitPredict + ?Sized>(
    xa: &ArrayView2<f32>,
    xb: &ArrayView2<f32>,
    input: &DeltaInput,
    probe: &P,
    opts: &DeltaOptions,
    seed: u64,
) -> Result<ProbeDelta, String> {
    let o = fold_outcomes(xa, xb, input, probe, seed)?;
    let paired = PairedCorrect {
        layer: input.layer,
        task: input.task,
        n_train: input.train.len(),
        a: &o.a,
        b: &o.b,
        clusters: &o.clusters,
    };
    Ok(delta_from_correct(&paired, opts, seed))
}

/// Outcomes of one fold on A and on B: whether each test row was predicted right, and its
/// cluster.
#[derive(Default)]
pub struct Outcomes {
    /// A's outcome per test row.
    pub a: Vec<bool>,
    /// B's outcome per test row.
    pub b: Vec<bool>,
    /// Cluster per test row.
    pub clusters: Vec<u32>,
}

/// Train `probe` on A's and on B's training rows of `input` and score their test rows.
pub fn fold_outcomes<P: FitPredict + ?Sized>(
    xa: &ArrayView2<f32>,
    xb: &ArrayView2<f32>,
    input: &DeltaInput,
    probe: &P,
    seed: u64,
) -> Result<Outcomes, String> {
    let y_train: Vec<u32> = input.train.iter().map(|&r| input.labels[r]).collect();
    let y_test: Vec<u32> = input.test.iter().map(|&r| input.labels[r]).collect();
    let g_train: Vec<u32> = input.train.iter().map(|&r| input.groups[r]).collect();
    let g_test: Vec<u32> = input.test.iter().map(|&r| input.groups[r]).collect();
    let run = |x: &ArrayView2<f32>| -> Result<Vec<bool>, String> {
        let tr = x.select(Axis(0), input.train);
        let te = x.select(Axis(0), input.test);
        // Same seed on both sides: any randomness in training is paired too.
        let pred = probe.fit_predict(
            &tr.view(),
            &y_train,
            input.n_classes,
            &te.view(),
            &g_train,
            seed,
        )?;
        if pred.len() != y_test.len() {
            return Err(format!(
                "probe returned {} predictions for {} test rows",
                pred.len(),
                y_test.len()
            ));
        }
        Ok(pred.iter().zip(&y_test).map(|(p, y)| p == y).collect())
    };
    Ok(Outcomes {
        a: run(xa)?,
        b: run(xb)?,
        clusters: g_test,
    })
}

/// Whether each test item was predicted right on A and on B (same items, same order), with
/// each item's bootstrap cluster.
pub struct PairedCorrect<'a> {
    /// Layer number.
    pub layer: usize,
    /// Task name.
    pub task: &'a str,
    /// Training items per fit.
    pub n_train: usize,
    /// A's outcome per test item.
    pub a: &'a [bool],
    /// B's outcome per test item.
    pub b: &'a [bool],
    /// Cluster per test item.
    pub clusters: &'a [u32],
}

/// The delta record of paired outcomes: both accuracies, their difference with a paired
/// cluster-bootstrap interval, and McNemar's test.
pub fn delta_from_correct(p: &PairedCorrect, opts: &DeltaOptions, seed: u64) -> ProbeDelta {
    let (ra, rb, g_test) = (p.a, p.b, p.clusters);
    let n = ra.len().max(1) as f64;
    let acc_a = ra.iter().filter(|&&v| v).count() as f64 / n;
    let acc_b = rb.iter().filter(|&&v| v).count() as f64 / n;
    let iv = stats::paired_cluster_bootstrap(
        ra,
        rb,
        g_test,
        opts.n_boot,
        opts.level,
        seed ^ 0x5eed_de17a,
    );
    let m = stats::mcnemar_paired(ra, rb);
    ProbeDelta {
        layer: p.layer,
        task: p.task.to_string(),
        n_train: p.n_train,
        n_test: ra.len(),
        accuracy_a: acc_a,
        ci_low_a: iv.a.0,
        ci_high_a: iv.a.1,
        accuracy_b: acc_b,
        ci_low_b: iv.b.0,
        ci_high_b: iv.b.1,
        delta: acc_b - acc_a,
        ci_low: iv.diff.0,
        ci_high: iv.diff.1,
        mcnemar_p: m.p,
        mcnemar_method: m.method,
        b: m.b,
        c: m.c,
        kind: "categorical".into(),
        r2_a: f64::NAN,
        r2_b: f64::NAN,
    }
}

/// The paired predictions of a continuous task on A and on B (same test items, same order).
pub struct PairedValues<'a> {
    /// Layer number.
    pub layer: usize,
    /// Task name.
    pub task: &'a str,
    /// Training items per fit.
    pub n_train: usize,
    /// Each test item's value.
    pub truth: &'a [f64],
    /// A's prediction per test item.
    pub a: &'a [f64],
    /// B's prediction per test item.
    pub b: &'a [f64],
    /// Cluster (test speaker) per test item.
    pub clusters: &'a [u32],
}

/// The delta record of a continuous task: R² on A and on B, each with its cluster-bootstrap
/// interval, and ΔR² = R²(B) − R²(A) with a paired interval (each draw resamples the test
/// speakers once and scores both sides on it). McNemar's test does not apply.
pub fn delta_from_values(p: &PairedValues, opts: &DeltaOptions, seed: u64) -> ProbeDelta {
    use crate::analysis::probe::{bootstrap, ridge};
    let s = seed ^ 0x5eed_de17a;
    let side = |pred: &[f64]| {
        bootstrap::cluster_r2_interval(p.truth, pred, p.clusters, opts.n_boot, opts.level, s)
    };
    let (ia, ib) = (side(p.a), side(p.b));
    let (r2_a, r2_b) = (ridge::r2(p.truth, p.a), ridge::r2(p.truth, p.b));
    let diff = bootstrap::paired_r2_delta_interval(
        p.truth,
        p.a,
        p.b,
        p.clusters,
        opts.n_boot,
        opts.level,
        s,
    );
    ProbeDelta {
        layer: p.layer,
        task: p.task.to_string(),
        kind: "continuous".into(),
        n_train: p.n_train,
        n_test: p.truth.len(),
        accuracy_a: f64::NAN,
        ci_low_a: ia.0,
        ci_high_a: ia.1,
        accuracy_b: f64::NAN,
        ci_low_b: ib.0,
        ci_high_b: ib.1,
        delta: r2_b - r2_a,
        ci_low: diff.0,
        ci_high: diff.1,
        mcnemar_p: f64::NAN,
        mcnemar_method: crate::records::compare::McNemarMethod::NotApplicable,
        b: 0,
        c: 0,
        r2_a,
        r2_b,
    }
}

#[cfg(test)]
pub(crate) mod tests {
    use super::*;
    use ndarray::Array2;
    use rand::Rng;
    use rand_chacha::rand_core::SeedableRng;
    use rand_chacha::ChaCha8Rng;

    /// Nearest class mean: a test-only stand-in for the probe, never shipped.
    pub(crate) struct NearestMean;

    impl FitPredict for NearestMean {
        fn fit_predict(
            &self,
            x_train: &ArrayView2<f32>,
            y_train: &[u32],
            n_classes: usize,
            x_test: &ArrayView2<f32>,
            _inner: &[u32],
            _seed: u64,
        ) -> Result<Vec<u32>, String> {
            let d = x_train.ncols();
            let mut means = Array2::<f64>::zeros((n_classes, d));
            let mut counts = vec![0usize; n_classes];
            for (row, &y) in x_train.outer_iter().zip(y_train) {
                counts[y as usize] += 1;
                for (m, &v) in means.row_mut(y as usize).iter_mut().zip(row) {
                    *m += v as f64;
                }
            }
            for (k, mut m) in means.outer_iter_mut().enumerate() {
                m.mapv_inplace(|v| v / counts[k].max(1) as f64);
            }
            Ok(x_test
                .outer_iter()
                .map(|row| {
                    (0..n_classes)
                        .filter(|&k| counts[k] > 0)
                        .min_by(|&a, &b| {
                            let da: f64 = means
                                .row(a)
                                .iter()
                                .zip(row)
                                .map(|(m, &v)| (m - v as f64).powi(2))
                                .sum();
                            let db: f64 = means
                                .row(b)
                                .iter()
                                .zip(row)
                                .map(|(m, &v)| (m - v as f64).powi(2))
                                .sum();
                            da.total_cmp(&db)
                        })
                        .unwrap_or(0) as u32
                })
                .collect())
        }
    }

    /// Class centres plus noise of scale `noise`; 3 classes, 8 speakers of 40 rows.
    pub(crate) fn blobs(noise: f32, seed: u64) -> (Array2<f32>, Vec<u32>, Vec<u32>) {
        let mut rng = ChaCha8Rng::seed_from_u64(seed);
        let n = 320;
        let labels: Vec<u32> = (0..n).map(|i| (i % 3) as u32).collect();
        let groups: Vec<u32> = (0..n).map(|i| (i / 40) as u32).collect();
        let x = Array2::from_shape_fn((n, 4), |(i, j)| {
            let centre = if j == labels[i] as usize { 2.0 } else { 0.0 };
            centre + noise * rng.random_range(-1.0f32..1.0)
        });
        (x, labels, groups)
    }

    #[test]
    fn cleaner_checkpoint_shows_a_significant_positive_delta() {
        let (xa, labels, groups) = blobs(3.0, 1);
        let (xb, _, _) = blobs(0.5, 2);
        let train: Vec<usize> = (0..160).collect();
        let test: Vec<usize> = (160..320).collect();
        let input = DeltaInput {
            layer: 3,
            task: "phone",
            labels: &labels,
            n_classes: 3,
            groups: &groups,
            train: &train,
            test: &test,
        };
        let d = probe_delta(
            &xa.view(),
            &xb.view(),
            &input,
            &NearestMean,
            &DeltaOptions::default(),
            7,
        )
        .unwrap();
        assert!(d.accuracy_b > 0.95 && d.accuracy_a < 0.85, "{d:?}");
        assert!((d.delta - (d.accuracy_b - d.accuracy_a)).abs() < 1e-12);
        assert!(
            d.ci_low > 0.0 && d.ci_low <= d.delta && d.delta <= d.ci_high,
            "{d:?}"
        );
        assert!(d.mcnemar_p < 1e-4 && d.c > d.b, "{d:?}");
        assert!(d.ci_low_a <= d.accuracy_a && d.accuracy_a <= d.ci_high_a);
    }

    #[test]
    fn identical_checkpoints_give_zero_delta_and_p_one() {
        let (xa, labels, groups) = blobs(2.0, 4);
        let train: Vec<usize> = (0..200).collect();
        let test: Vec<usize> = (200..320).collect();
        let input = DeltaInput {
            layer: 0,
            task: "phone",
            labels: &labels,
            n_classes: 3,
            groups: &groups,
            train: &train,
            test: &test,
        };
        let d = probe_delta(
            &xa.view(),
            &xa.view(),
            &input,
            &NearestMean,
            &DeltaOptions::default(),
            7,
        )
        .unwrap();
        assert_eq!((d.delta, d.b, d.c, d.mcnemar_p), (0.0, 0, 0, 1.0));
        assert_eq!((d.ci_low, d.ci_high), (0.0, 0.0));
    }
}
