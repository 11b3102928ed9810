//! Cluster (block) bootstrap of accuracy: whole clusters (test speakers, or test utterances
//! for the speaker task) are resampled with replacement, because frames of one speaker are not
//! independent (Davison & Hinkley 1997, section 3.8). Percentile interval (Efron 1979); the
//! percentile uses linear interpolation between order statistics, as numpy.percentile does.

use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;

/// Percentile interval of accuracy from `resamples` cluster bootstrap draws.
/// `correct[i]` says whether item `i` was classified right; `cluster[i]` is its cluster.
/// Returns (low, high) for the central `level` (e.g. 0.95) interval.
pub fn cluster_interval(
    correct: &[bool],
    cluster: &[u32],
    resamples: usize,
    level: f64,
    seed: u64,
) -> (f64, f64) {
    let mut ids: Vec<u32> = cluster.to_vec();
    ids.sort_unstable();
    ids.dedup();
    let mut tally = vec![(0u64, 0u64); ids.len()];
    for (&c, &ok) in cluster.iter().zip(correct) {
        let i = ids.binary_search(&c).unwrap_or(0);
        tally[i].1 += 1;
        if ok {
            tally[i].0 += 1;
        }
    }
    let total: u64 = tally.iter().map(|t| t.1).sum();
    let point = if total == 0 {
        0.0
    } else {
        tally.iter().map(|t| t.0).sum::<u64>() as f64 / total as f64
    };
    if tally.len() < 2 || resamples == 0 {
        return (point, point);
    }
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let g = tally.len();
    let mut stats: Vec<f64> = (0..resamples)
        .map(|_| {
            let (mut c, mut n) = (0u64, 0u64);
            for _ in 0..g {
                let t = tally[rng.random_range(0..g)];
                c += t.0;
                n += t.1;
            }
            if n == 0 {
                point
            } else {
                c as f64 / n as f64
            }
        })
        .collect();
    stats.sort_by(|a, b| a.total_cmp(b));
    let a = (1.0 - level) / 2.0;
    (percentile(&stats, a), percentile(&stats, 1.0 - a))
}

/// Sums of one cluster's test items for R²: count, Σy, Σy² (y centred on the pooled mean, to
/// keep the sums small) and the squared error of each of `K` predictions.
#[derive(Clone, Copy)]
struct R2Sums<const K: usize> {
    n: f64,
    sy: f64,
    syy: f64,
    sse: [f64; K],
}

/// Per-cluster R² sums of `truth` against each prediction in `preds`, clusters in sorted id
/// order.
fn r2_sums<const K: usize>(truth: &[f64], preds: [&[f64]; K], cluster: &[u32]) -> Vec<R2Sums<K>> {
    let mut ids: Vec<u32> = cluster.to_vec();
    ids.sort_unstable();
    ids.dedup();
    let mean = truth.iter().sum::<f64>() / truth.len().max(1) as f64;
    let zero = R2Sums::<K> {
        n: 0.0,
        sy: 0.0,
        syy: 0.0,
        sse: [0.0; K],
    };
    let mut out = vec![zero; ids.len()];
    for (i, (&c, &t)) in cluster.iter().zip(truth).enumerate() {
        let s = &mut out[ids.binary_search(&c).unwrap_or(0)];
        let y = t - mean;
        s.n += 1.0;
        s.sy += y;
        s.syy += y * y;
        for (sse, pred) in s.sse.iter_mut().zip(&preds) {
            let e = t - pred[i];
            *sse += e * e;
        }
    }
    out
}

/// R² of prediction `k` over the clusters drawn `weight[g]` times each (NaN when the drawn
/// values are constant).
fn r2_of<const K: usize>(sums: &[R2Sums<K>], weight: &[f64], k: usize) -> f64 {
    let (mut n, mut sy, mut syy, mut sse) = (0.0, 0.0, 0.0, 0.0);
    for (s, &w) in sums.iter().zip(weight) {
        n += w * s.n;
        sy += w * s.sy;
        syy += w * s.syy;
        sse += w * s.sse[k];
    }
    let ss_tot = syy - sy * sy / n.max(1.0);
    if n < 2.0 || ss_tot <= 0.0 {
        f64::NAN
    } else {
        1.0 - sse / ss_tot
    }
}

/// `resamples` cluster draws over `g` clusters, as [`cluster_interval`] draws them (the same
/// generator, `g` draws with replacement per resample): how often each cluster was drawn.
fn draws(g: usize, resamples: usize, seed: u64) -> impl Iterator<Item = Vec<f64>> {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    (0..resamples).map(move |_| {
        let mut w = vec![0.0; g];
        for _ in 0..g {
            w[rng.random_range(0..g)] += 1.0;
        }
        w
    })
}

/// Percentile interval of R² from `resamples` cluster-bootstrap draws: `truth` and `pred`
/// per test item, `cluster` its cluster (test speaker). Draws whose values are constant
/// (possible with very few clusters) are left out. A point when there are fewer than 2
/// clusters.
pub fn cluster_r2_interval(
    truth: &[f64],
    pred: &[f64],
    cluster: &[u32],
    resamples: usize,
    level: f64,
    seed: u64,
) -> (f64, f64) {
    let sums = r2_sums(truth, [pred], cluster);
    let point = r2_of(&sums, &vec![1.0; sums.len()], 0);
    if sums.len() < 2 || resamples == 0 {
        return (point, point);
    }
    let mut stats: Vec<f64> = draws(sums.len(), resamples, seed)
        .map(|w| r2_of(&sums, &w, 0))
        .filter(|v| v.is_finite())
        .collect();
    interval(&mut stats, level, point)
}

/// Paired percentile interval of `R²(pred_b) − R²(pred_a)` over the same test items: each
/// draw resamples test clusters once and scores both predictions on it.
pub fn paired_r2_delta_interval(
    truth: &[f64],
    pred_a: &[f64],
    pred_b: &[f64],
    cluster: &[u32],
    resamples: usize,
    level: f64,
    seed: u64,
) -> (f64, f64) {
    let sums = r2_sums(truth, [pred_a, pred_b], cluster);
    let ones = vec![1.0; sums.len()];
    let point = r2_of(&sums, &ones, 1) - r2_of(&sums, &ones, 0);
    if sums.len() < 2 || resamples == 0 {
        return (point, point);
    }
    let mut stats: Vec<f64> = draws(sums.len(), resamples, seed)
        .map(|w| r2_of(&sums, &w, 1) - r2_of(&sums, &w, 0))
        .filter(|v| v.is_finite())
        .collect();
    interval(&mut stats, level, point)
}

/// The central `level` percentile interval of `stats` (sorted here); `point` when empty.
fn interval(stats: &mut [f64], level: f64, point: f64) -> (f64, f64) {
    if stats.is_empty() {
        return (point, point);
    }
    stats.sort_by(|a, b| a.total_cmp(b));
    let a = (1.0 - level) / 2.0;
    (percentile(stats, a), percentile(stats, 1.0 - a))
}

/// Linear-interpolation percentile of sorted data, `q` in [0, 1].
fn percentile(sorted: &[f64], q: f64) -> f64 {
    let pos = q * (sorted.len() - 1) as f64;
    let lo = pos.floor() as usize;
    let hi = pos.ceil() as usize;
    let f = pos - lo as f64;
    sorted[lo] * (1.0 - f) + sorted[hi] * f
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn interval_covers_true_accuracy_about_95_percent() {
        // Simulation with a known true accuracy: 40 speakers, each with its own accuracy drawn
        // uniformly from [0.55, 0.85] (mean 0.70) and 30 frames. The 95 % interval should cover
        // 0.70 in roughly 95 % of repetitions; the brief accepts 90-99 % of 200 (common practice
        // for checking nominal coverage with a finite number of repetitions).
        let truth = 0.70;
        let mut rng = ChaCha8Rng::seed_from_u64(7);
        let mut covered = 0;
        for rep in 0..200u64 {
            let mut correct = Vec::new();
            let mut cluster = Vec::new();
            for s in 0..40u32 {
                let p: f64 = 0.55 + 0.30 * rng.random::<f64>();
                for _ in 0..30 {
                    correct.push(rng.random::<f64>() < p);
                    cluster.push(s);
                }
            }
            let (lo, hi) = cluster_interval(&correct, &cluster, 1000, 0.95, rep);
            if lo <= truth && truth <= hi {
                covered += 1;
            }
        }
        assert!((180..=198).contains(&covered), "covered {covered} of 200");
    }

    #[test]
    fn r2_from_cluster_sums_matches_the_direct_formula() {
        // The weighted sums with every weight 1 give super::super::ridge::r2 (same formula).
        let truth = [1.0, 2.0, 3.0, 4.0, 6.0, 5.0];
        let pred = [1.5, 2.0, 2.5, 4.5, 5.0, 5.5];
        let cl = [0, 0, 1, 1, 2, 2];
        let sums = r2_sums(&truth, [&pred[..]], &cl);
        let direct = super::super::ridge::r2(&truth, &pred);
        assert!((r2_of(&sums, &[1.0; 3], 0) - direct).abs() < 1e-12);
        // Drawing cluster 0 twice and cluster 2 once is R² on those items, repeated.
        let t2 = [1.0, 2.0, 1.0, 2.0, 6.0, 5.0];
        let p2 = [1.5, 2.0, 1.5, 2.0, 5.0, 5.5];
        let want = super::super::ridge::r2(&t2, &p2);
        assert!((r2_of(&sums, &[2.0, 0.0, 1.0], 0) - want).abs() < 1e-12);
        let (lo, hi) = cluster_r2_interval(&truth, &pred, &cl, 500, 0.95, 3);
        assert!(lo <= direct && direct <= hi, "{lo} {direct} {hi}");
        let (dlo, dhi) = paired_r2_delta_interval(&truth, &pred, &pred, &cl, 200, 0.95, 3);
        assert_eq!(
            (dlo, dhi),
            (0.0, 0.0),
            "identical predictions differ by nothing"
        );
    }

    #[test]
    fn percentile_matches_numpy() {
        // numpy.percentile([1, 2, 3, 4], 25) == 1.75 (linear interpolation, numpy default).
        assert!((percentile(&[1.0, 2.0, 3.0, 4.0], 0.25) - 1.75).abs() < 1e-12);
    }
}
