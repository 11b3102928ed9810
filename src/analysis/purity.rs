//! Cluster and neighbourhood metrics of labelled frames, from a feature matrix (frames × dim)
//! and integer labels (`capture::UNLABELLED` frames are left out):
//!
//! - silhouette (Rousseeuw 1987), Euclidean, mean over frames; frames of a label with a
//!   single frame are skipped (scikit-learn instead counts them as 0);
//! - k-nearest-neighbour label purity: the share of each frame's k nearest labelled
//!   neighbours (itself excluded, ties broken by frame order) carrying its label;
//! - trustworthiness of a low-dimensional map (Venna & Kaski 2001), with scikit-learn's
//!   normalisation `1 − 2/(n k (2n − 3k − 1)) Σ max(0, r(i,j) − k)`;
//! - k-means (Lloyd, k-means++ seeding from a seed) and, from the label × cluster counts, the
//!   three scores of Hsu et al. (2021): label purity `E_z[max_y p(y|z)]` (their "phone
//!   purity"), cluster purity `E_y[max_z p(z|y)]` and `I(y; z) / H(y)` (their phone-normalised
//!   mutual information, PNMI, here for any label);
//! - the between-class share of the total sum of squares (`variance_ratio`).
//!
//! Pairwise distances are computed block by block (fixed blocks of rows, `‖x‖² + ‖y‖² − 2x·y`
//! in f64 on centred data) and each frame's statistic is reduced in frame order, so results do
//! not depend on the thread count.

use ndarray::{s, Array2, ArrayView2, Axis};
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rayon::prelude::*;

use crate::capture::UNLABELLED;

/// Rows of the distance matrix computed at a time.
const DIST_BLOCK: usize = 64;

/// Features centred and converted to f64, with squared row norms (for distances).
pub struct Points {
    x: Array2<f64>,
    norms: Vec<f64>,
}

impl Points {
    /// Centre `x` (frames × dim) and keep it in f64.
    pub fn new(x: &ArrayView2<f32>) -> Points {
        let mean = crate::analysis::linalg::col_means(x);
        let mut c = x.mapv(|v| v as f64);
        for mut row in c.outer_iter_mut() {
            for (v, m) in row.iter_mut().zip(&mean) {
                *v -= m;
            }
        }
        Self::from_centred(c)
    }

    /// Points from an f64 matrix (centred here).
    pub fn from_f64(x: &ArrayView2<f64>) -> Points {
        let n = x.nrows().max(1) as f64;
        let mean: Vec<f64> = x.axis_iter(Axis(1)).map(|c| c.sum() / n).collect();
        let mut c = x.to_owned();
        for mut row in c.outer_iter_mut() {
            for (v, m) in row.iter_mut().zip(&mean) {
                *v -= m;
            }
        }
        Self::from_centred(c)
    }

    fn from_centred(x: Array2<f64>) -> Points {
        let norms = x.outer_iter().map(|r| r.dot(&r)).collect();
        Points { x, norms }
    }

    /// Number of points.
    pub fn len(&self) -> usize {
        self.x.nrows()
    }

    /// True when there are no points.
    pub fn is_empty(&self) -> bool {
        self.x.nrows() == 0
    }

    /// Call `f(i, distances from i to every point)` for every point, in parallel over fixed
    /// blocks; results come back in point order.
    fn map_rows<T: Send>(&self, f: impl Fn(usize, &[f64]) -> T + Sync) -> Vec<T> {
        let n = self.len();
        let nb = n.div_ceil(DIST_BLOCK);
        let parts: Vec<Vec<T>> = (0..nb)
            .into_par_iter()
            .map(|b| {
                let lo = b * DIST_BLOCK;
                let hi = (lo + DIST_BLOCK).min(n);
                let g = self.x.slice(s![lo..hi, ..]).dot(&self.x.t());
                let mut row = vec![0f64; n];
                let mut out = Vec::with_capacity(hi - lo);
                for (r, grow) in g.outer_iter().enumerate() {
                    let i = lo + r;
                    let ni = self.norms[i];
                    for (j, (d, &gv)) in row.iter_mut().zip(grow.iter()).enumerate() {
                        *d = (ni + self.norms[j] - 2.0 * gv).max(0.0).sqrt();
                    }
                    row[i] = 0.0;
                    out.push(f(i, &row));
                }
                out
            })
            .collect();
        parts.into_iter().flatten().collect()
    }
}

/// Indices of the `k` nearest points to `i` among those with `keep(j)`, nearest first, ties
/// broken by index.
fn nearest(i: usize, dist: &[f64], k: usize, keep: impl Fn(usize) -> bool) -> Vec<u32> {
    let mut c: Vec<(f64, u32)> = dist
        .iter()
        .enumerate()
        .filter(|&(j, _)| j != i && keep(j))
        .map(|(j, &d)| (d, j as u32))
        .collect();
    let cmp = |a: &(f64, u32), b: &(f64, u32)| a.0.total_cmp(&b.0).then(a.1.cmp(&b.1));
    let k = k.min(c.len());
    if k == 0 {
        return vec![];
    }
    if k < c.len() {
        c.select_nth_unstable_by(k - 1, cmp);
        c.truncate(k);
    }
    c.sort_by(cmp);
    c.into_iter().map(|(_, j)| j).collect()
}

/// Per-frame `k` nearest neighbours with their Euclidean distances, nearest first.
pub fn knn_with_distances(p: &Points, k: usize) -> Vec<Vec<(u32, f64)>> {
    p.map_rows(|i, d| {
        nearest(i, d, k, |_| true)
            .into_iter()
            .map(|j| (j, d[j as usize]))
            .collect()
    })
}

/// Per-frame neighbour lists (k nearest, ties by index) over all points.
pub fn knn_lists(p: &Points, k: usize) -> Vec<Vec<u32>> {
    p.map_rows(|i, d| nearest(i, d, k, |_| true))
}

/// k-NN regression R² of a continuous label: each frame with a value is predicted by the mean
/// value of its `k` nearest frames that have one, and `1 − SS_res / SS_tot` is taken over
/// those frames (SS_tot about their mean). None with fewer than `k + 2` valued frames or
/// constant values.
pub fn knn_r2(p: &Points, values: &[f32], k: usize) -> Option<f64> {
    let valued: Vec<bool> = values.iter().map(|v| v.is_finite()).collect();
    let n_valued = valued.iter().filter(|&&b| b).count();
    if k == 0 || n_valued < k + 2 {
        return None;
    }
    let preds: Vec<Option<f64>> = p.map_rows(|i, d| {
        if !valued[i] {
            return None;
        }
        let nb = nearest(i, d, k, |j| valued[j]);
        Some(nb.iter().map(|&j| values[j as usize] as f64).sum::<f64>() / nb.len() as f64)
    });
    let pairs: Vec<(f64, f64)> = preds
        .iter()
        .zip(values)
        .filter_map(|(p, &v)| p.map(|p| (v as f64, p)))
        .collect();
    let mean = pairs.iter().map(|(t, _)| t).sum::<f64>() / pairs.len() as f64;
    let ss_tot: f64 = pairs.iter().map(|(t, _)| (t - mean) * (t - mean)).sum();
    let ss_res: f64 = pairs.iter().map(|(t, p)| (t - p) * (t - p)).sum();
    (ss_tot > 0.0).then(|| 1.0 - ss_res / ss_tot)
}

/// Silhouette of one labelling, with the labels skipped for having a single frame.
#[derive(Clone, Debug, PartialEq)]
pub struct Silhouette {
    /// Mean silhouette over the frames used (None when fewer than two labels have two frames).
    pub score: Option<f64>,
    /// Frames that entered the mean.
    pub n_used: usize,
    /// Label codes skipped because they hold a single frame.
    pub singletons: Vec<u32>,
}

/// Statistics of one labelling computed in one pass over the distance rows.
#[derive(Clone, Debug)]
pub struct LabelStats {
    /// Silhouette.
    pub silhouette: Silhouette,
    /// k-NN label purity among labelled frames (None with fewer than 2 labelled frames).
    pub knn_purity: Option<f64>,
}

fn class_counts(labels: &[u32]) -> Vec<usize> {
    let nc = labels
        .iter()
        .filter(|&&l| l != UNLABELLED)
        .map(|&l| l as usize + 1)
        .max()
        .unwrap_or(0);
    let mut c = vec![0usize; nc];
    for &l in labels {
        if l != UNLABELLED {
            c[l as usize] += 1;
        }
    }
    c
}

/// Silhouette and k-NN purity for several labellings of the same points, sharing one pass
/// over the pairwise distances; optionally also the trustworthiness penalty of a map whose
/// neighbour lists are given (`low_nbrs`, k per frame).
pub fn label_stats(
    p: &Points,
    tasks: &[&[u32]],
    k: usize,
    low_nbrs: Option<&[Vec<u32>]>,
) -> (Vec<LabelStats>, Option<f64>) {
    let n = p.len();
    let counts: Vec<Vec<usize>> = tasks.iter().map(|t| class_counts(t)).collect();
    let n_valid: Vec<usize> = counts
        .iter()
        .map(|c| c.iter().filter(|&&v| v >= 2).count())
        .collect();
    let rows: Vec<RowStats> = p.map_rows(|i, d| {
        let per_task = tasks
            .iter()
            .zip(&counts)
            .zip(&n_valid)
            .map(|((lab, cnt), &nv)| {
                if lab[i] == UNLABELLED {
                    return (None, None);
                }
                (
                    row_silhouette(i, d, lab, cnt, nv),
                    row_knn_share(i, d, lab, k),
                )
            })
            .collect();
        let pen = low_nbrs.map_or(0.0, |low| trust_penalty(i, d, &low[i]));
        (per_task, pen)
    });
    let out = counts
        .iter()
        .enumerate()
        .map(|(t, cnt)| task_stats(&rows, t, cnt))
        .collect();
    let trust = low_nbrs.and_then(|low| {
        let kk = low.first().map(|v| v.len()).unwrap_or(0) as f64;
        let nf = n as f64;
        let denom = nf * kk * (2.0 * nf - 3.0 * kk - 1.0);
        (denom > 0.0).then(|| 1.0 - rows.iter().map(|r| r.1).sum::<f64>() * 2.0 / denom)
    });
    (out, trust)
}

/// Per row: for each task (silhouette value if used, same-label share if labelled), and the
/// trustworthiness penalty.
type RowStats = (Vec<(Option<f64>, Option<f64>)>, f64);

/// Silhouette value of labelled row `i` (distances `d` to every row), when its class and at
/// least one other have two or more members (`nv` such classes).
fn row_silhouette(i: usize, d: &[f64], lab: &[u32], cnt: &[usize], nv: usize) -> Option<f64> {
    let li = lab[i];
    if !(cnt[li as usize] >= 2 && nv >= 2) {
        return None;
    }
    let mut sums = vec![0f64; cnt.len()];
    for (j, &dj) in d.iter().enumerate() {
        let lj = lab[j];
        if lj != UNLABELLED {
            sums[lj as usize] += dj;
        }
    }
    let a = sums[li as usize] / (cnt[li as usize] - 1) as f64;
    let b = sums
        .iter()
        .zip(cnt)
        .enumerate()
        .filter(|&(c, (_, &m))| c != li as usize && m >= 2)
        .map(|(_, (s, &m))| s / m as f64)
        .fold(f64::INFINITY, f64::min);
    let m = a.max(b);
    Some(if m > 0.0 { (b - a) / m } else { 0.0 })
}

/// Share of row `i`'s `k` nearest labelled rows that carry its label (None without any).
fn row_knn_share(i: usize, d: &[f64], lab: &[u32], k: usize) -> Option<f64> {
    let li = lab[i];
    let nb = nearest(i, d, k, |j| lab[j] != UNLABELLED);
    if nb.is_empty() {
        None
    } else {
        Some(nb.iter().filter(|&&j| lab[j as usize] == li).count() as f64 / nb.len() as f64)
    }
}

/// Trustworthiness penalty of row `i`: how far beyond `low_i.len()` each of its neighbours
/// in the low-dimensional map ranks among its neighbours in the full space (distances `d`).
fn trust_penalty(i: usize, d: &[f64], low_i: &[u32]) -> f64 {
    let mut pen = 0f64;
    let kk = low_i.len();
    for &j in low_i {
        let j = j as usize;
        let dj = d[j];
        // rank of j among i's neighbours in the full space (1 = nearest), ties by index;
        // counted without branches (d[i] = 0 is taken out afterwards) so it vectorises
        let less: usize = d.iter().map(|&dl| (dl < dj) as usize).sum();
        let ties: usize = d[..j].iter().map(|&dl| (dl == dj) as usize).sum();
        let self_counted = (0.0 < dj || (dj == 0.0 && i < j)) as usize;
        let rank = 1 + less + ties - self_counted;
        if rank > kk {
            pen += (rank - kk) as f64;
        }
    }
    pen
}

/// Task `t`'s mean silhouette and same-label share over the rows, and its single-member
/// classes (class counts `cnt`).
fn task_stats(rows: &[RowStats], t: usize, cnt: &[usize]) -> LabelStats {
    let (mut ss, mut ns, mut sk, mut nk) = (0f64, 0usize, 0f64, 0usize);
    for r in rows {
        if let Some(v) = r.0[t].0 {
            ss += v;
            ns += 1;
        }
        if let Some(v) = r.0[t].1 {
            sk += v;
            nk += 1;
        }
    }
    let singletons = cnt
        .iter()
        .enumerate()
        .filter(|&(_, &c)| c == 1)
        .map(|(c, _)| c as u32)
        .collect();
    LabelStats {
        silhouette: Silhouette {
            score: (ns > 0).then(|| ss / ns as f64),
            n_used: ns,
            singletons,
        },
        knn_purity: (nk > 0).then(|| sk / nk as f64),
    }
}

/// Mean silhouette (Rousseeuw 1987) of `labels` on `x`, Euclidean.
pub fn silhouette(x: &ArrayView2<f32>, labels: &[u32]) -> Silhouette {
    let p = Points::new(x);
    label_stats(&p, &[labels], 1, None).0.remove(0).silhouette
}

/// k-NN label purity of `labels` on `x`.
pub fn knn_purity(x: &ArrayView2<f32>, labels: &[u32], k: usize) -> Option<f64> {
    let p = Points::new(x);
    label_stats(&p, &[labels], k, None).0.remove(0).knn_purity
}

/// Trustworthiness (Venna & Kaski 2001; scikit-learn's normalisation) of the map `low` of
/// `high`, with `k` neighbours. None when `k >= n / 2` (the normalisation is undefined).
pub fn trustworthiness(high: &ArrayView2<f32>, low: &ArrayView2<f32>, k: usize) -> Option<f64> {
    let n = high.nrows();
    if k == 0 || 2 * k >= n {
        return None;
    }
    let low_nbrs = knn_lists(&Points::new(low), k);
    label_stats(&Points::new(high), &[], k, Some(&low_nbrs)).1
}

/// Between-class sum of squares over total sum of squares (labelled frames only).
pub fn variance_ratio(x: &ArrayView2<f32>, labels: &[u32]) -> Option<f64> {
    let rows: Vec<usize> = (0..x.nrows())
        .filter(|&i| labels[i] != UNLABELLED)
        .collect();
    if rows.len() < 2 {
        return None;
    }
    let d = x.ncols();
    let nc = class_counts(labels).len();
    let mut mu = vec![0f64; d];
    let mut cm = vec![vec![0f64; d]; nc];
    let mut cn = vec![0usize; nc];
    for &i in &rows {
        let c = labels[i] as usize;
        cn[c] += 1;
        for (j, &v) in x.row(i).iter().enumerate() {
            mu[j] += v as f64;
            cm[c][j] += v as f64;
        }
    }
    let n = rows.len() as f64;
    mu.iter_mut().for_each(|v| *v /= n);
    let mut total = 0f64;
    for &i in &rows {
        for (j, &v) in x.row(i).iter().enumerate() {
            total += (v as f64 - mu[j]).powi(2);
        }
    }
    let mut between = 0f64;
    for c in 0..nc {
        if cn[c] == 0 {
            continue;
        }
        let m = cn[c] as f64;
        between += m * cm[c]
            .iter()
            .zip(&mu)
            .map(|(s, u)| (s / m - u).powi(2))
            .sum::<f64>();
    }
    (total > 0.0).then(|| between / total)
}

/// Scores of a clustering against a labelling (Hsu et al. 2021), natural logarithms.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct ClusterScores {
    /// Mutual information I(y; z).
    pub mutual_info: f64,
    /// Entropy of the labels H(y).
    pub h_labels: f64,
    /// Entropy of the clusters H(z).
    pub h_clusters: f64,
    /// I(y; z) / H(y) (phone-normalised mutual information when y is the phone).
    pub pnmi: f64,
    /// I(y; z) / ((H(y) + H(z)) / 2) (scikit-learn's default normalised MI).
    pub nmi: f64,
    /// E_z[max_y p(y|z)]: how pure each cluster is in labels (Hsu et al.'s "phone purity").
    pub label_purity: f64,
    /// E_y[max_z p(z|y)]: how concentrated each label is in one cluster.
    pub cluster_purity: f64,
}

/// Scores of `clusters` against `labels` (frames with an unlabelled label are left out).
pub fn cluster_scores(labels: &[u32], clusters: &[u32]) -> Option<ClusterScores> {
    let ny = class_counts(labels).len();
    let nz = clusters.iter().map(|&c| c as usize + 1).max().unwrap_or(0);
    let mut joint = vec![0f64; ny * nz];
    let mut n = 0f64;
    for (&y, &z) in labels.iter().zip(clusters) {
        if y != UNLABELLED && z != UNLABELLED {
            joint[y as usize * nz + z as usize] += 1.0;
            n += 1.0;
        }
    }
    if n == 0.0 {
        return None;
    }
    joint.iter_mut().for_each(|v| *v /= n);
    let py: Vec<f64> = (0..ny)
        .map(|y| joint[y * nz..(y + 1) * nz].iter().sum())
        .collect();
    let pz: Vec<f64> = (0..nz)
        .map(|z| (0..ny).map(|y| joint[y * nz + z]).sum())
        .collect();
    let ent = |p: &[f64]| {
        -p.iter()
            .filter(|&&v| v > 0.0)
            .map(|&v| v * v.ln())
            .sum::<f64>()
    };
    let mut mi = 0f64;
    for y in 0..ny {
        for z in 0..nz {
            let v = joint[y * nz + z];
            if v > 0.0 {
                mi += v * (v / (py[y] * pz[z])).ln();
            }
        }
    }
    let mi = mi.max(0.0);
    let (hy, hz) = (ent(&py), ent(&pz));
    let label_purity = (0..nz)
        .map(|z| (0..ny).map(|y| joint[y * nz + z]).fold(0.0, f64::max))
        .sum();
    let cluster_purity = (0..ny)
        .map(|y| {
            joint[y * nz..(y + 1) * nz]
                .iter()
                .cloned()
                .fold(0.0, f64::max)
        })
        .sum();
    let mean_h = (hy + hz) / 2.0;
    Some(ClusterScores {
        mutual_info: mi,
        h_labels: hy,
        h_clusters: hz,
        pnmi: if hy > 0.0 { mi / hy } else { 1.0 },
        // scikit-learn returns 1 when both labelings are a single class
        nmi: if mean_h > 0.0 { mi / mean_h } else { 1.0 },
        label_purity,
        cluster_purity,
    })
}

/// k-means (Lloyd) with k-means++ seeding (Arthur & Vassilvitskii 2007) from `seed`, at most
/// `max_iter` rounds; returns the cluster of every row. Ties go to the lower cluster index.
pub fn kmeans(x: &ArrayView2<f32>, k: usize, seed: u64, max_iter: usize) -> Vec<u32> {
    let n = x.nrows();
    let d = x.ncols();
    let k = k.min(n).max(1);
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let sqd = |i: usize, c: &[f32]| -> f64 {
        x.row(i)
            .iter()
            .zip(c)
            .map(|(&a, &b)| ((a - b) as f64).powi(2))
            .sum()
    };
    // k-means++ seeding: each new centre drawn with probability proportional to the squared
    // distance to the nearest chosen centre.
    let mut centres = Array2::<f32>::zeros((k, d));
    let first = rng.random_range(0..n);
    centres.row_mut(0).assign(&x.row(first));
    let mut best: Vec<f64> = {
        let c0 = centres.row(0).to_vec();
        (0..n).into_par_iter().map(|i| sqd(i, &c0)).collect()
    };
    for c in 1..k {
        let total: f64 = best.iter().sum();
        let pick = if total > 0.0 {
            let mut r = rng.random::<f64>() * total;
            let mut pick = n - 1;
            for (i, &b) in best.iter().enumerate() {
                if r < b {
                    pick = i;
                    break;
                }
                r -= b;
            }
            pick
        } else {
            rng.random_range(0..n)
        };
        centres.row_mut(c).assign(&x.row(pick));
        let cc = centres.row(c).to_vec();
        best.par_iter_mut()
            .enumerate()
            .for_each(|(i, b)| *b = b.min(sqd(i, &cc)));
    }
    let mut assign = vec![u32::MAX; n];
    for _ in 0..max_iter.max(1) {
        // distances via ‖x‖² + ‖c‖² − 2 x·c (the ‖x‖² term does not change the argmin)
        let g = crate::analysis::linalg::matmul(x, &centres.t());
        let cn: Vec<f64> = centres
            .outer_iter()
            .map(|r| r.iter().map(|&v| (v as f64) * (v as f64)).sum())
            .collect();
        let new: Vec<u32> = g
            .outer_iter()
            .into_par_iter()
            .map(|row| {
                let mut bi = 0usize;
                let mut bv = f64::INFINITY;
                for (c, &gv) in row.iter().enumerate() {
                    let v = cn[c] - 2.0 * gv as f64;
                    if v < bv {
                        bv = v;
                        bi = c;
                    }
                }
                bi as u32
            })
            .collect();
        let changed = new != assign;
        assign = new;
        if !changed {
            break;
        }
        let mut sums = vec![0f64; k * d];
        let mut cnt = vec![0usize; k];
        for (i, &a) in assign.iter().enumerate() {
            cnt[a as usize] += 1;
            for (s, &v) in sums[a as usize * d..(a as usize + 1) * d]
                .iter_mut()
                .zip(x.row(i))
            {
                *s += v as f64;
            }
        }
        for c in 0..k {
            if cnt[c] > 0 {
                for j in 0..d {
                    centres[[c, j]] = (sums[c * d + j] / cnt[c] as f64) as f32;
                }
            }
        }
    }
    assign
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn knn_r2_is_high_on_a_smooth_line_and_near_zero_for_shuffled_values() {
        // Points on a line with value = position: neighbours share the value (R² near 1);
        // values unrelated to position: the neighbour mean predicts no better than the mean
        // (R² at or below 0). The definition of R²; values by construction.
        let n = 400;
        let x =
            ndarray::Array2::from_shape_fn((n, 2), |(i, j)| if j == 0 { i as f32 } else { 0.0 });
        let smooth: Vec<f32> = (0..n).map(|i| i as f32).collect();
        let p = Points::new(&x.view());
        let r = knn_r2(&p, &smooth, 5).unwrap();
        assert!(r > 0.99, "{r}");
        let scrambled: Vec<f32> = (0..n).map(|i| ((i * 7919) % 401) as f32).collect();
        let r = knn_r2(&p, &scrambled, 5).unwrap();
        assert!(r < 0.1, "{r}");
        let mut holes = smooth.clone();
        holes[3] = f32::NAN;
        assert!(knn_r2(&p, &holes, 5).unwrap() > 0.99);
        assert!(knn_r2(&p, &[f32::NAN; 400], 5).is_none());
    }
    use ndarray::array;

    #[test]
    fn silhouette_of_two_tight_pairs_matches_hand_computation() {
        // points 0, 1 (label 0) and 10, 11 (label 1) on a line:
        // s(0) = (10.5 - 1) / 10.5, s(1) = (9.5 - 1) / 9.5, symmetric for the other pair.
        let x = array![[0f32], [1.0], [10.0], [11.0]];
        let s = silhouette(&x.view(), &[0, 0, 1, 1]);
        let want = ((9.5 / 10.5) + (8.5 / 9.5)) / 2.0;
        assert!((s.score.unwrap() - want).abs() < 1e-12);
        assert_eq!(s.n_used, 4);
    }

    #[test]
    fn silhouette_skips_a_label_with_one_frame() {
        let x = array![[0f32], [1.0], [10.0], [11.0], [50.0]];
        let s = silhouette(&x.view(), &[0, 0, 1, 1, 2]);
        assert_eq!(s.singletons, vec![2]);
        assert_eq!(s.n_used, 4);
        let want = ((9.5 / 10.5) + (8.5 / 9.5)) / 2.0;
        assert!((s.score.unwrap() - want).abs() < 1e-12);
    }

    #[test]
    fn knn_purity_ignores_unlabelled_frames() {
        let x = array![[0f32], [1.0], [2.0], [10.0], [11.0], [1.5]];
        let p = knn_purity(&x.view(), &[0, 0, 0, 1, 1, UNLABELLED], 1).unwrap();
        assert!((p - 1.0).abs() < 1e-12);
        // with k = 2 the frames at 10 and 11 each see one frame of label 0
        let p2 = knn_purity(&x.view(), &[0, 0, 0, 1, 1, UNLABELLED], 2).unwrap();
        assert!((p2 - (3.0 + 0.5 + 0.5) / 5.0).abs() < 1e-12);
    }

    #[test]
    fn trustworthiness_of_an_isometry_is_one() {
        let x = Array2::from_shape_fn((40, 2), |(i, j)| {
            ((i * 7 + j * 13) as f32 * 0.731).sin() * (1.0 + i as f32 * 0.05)
        });
        let rot = x.dot(&array![[0.6f32, 0.8], [-0.8, 0.6]]);
        let t = trustworthiness(&x.view(), &rot.view(), 5).unwrap();
        assert!((t - 1.0).abs() < 1e-12, "{t}");
    }

    #[test]
    fn cluster_scores_of_a_perfect_clustering() {
        let s = cluster_scores(&[0, 0, 1, 1, 2], &[5, 5, 3, 3, 0]).unwrap();
        assert!((s.pnmi - 1.0).abs() < 1e-12 && (s.nmi - 1.0).abs() < 1e-12);
        assert_eq!((s.label_purity, s.cluster_purity), (1.0, 1.0));
    }

    #[test]
    fn kmeans_separates_two_blobs_and_is_seeded() {
        let x = Array2::from_shape_fn((20, 2), |(i, j)| {
            if i < 10 {
                (i + j) as f32 * 0.01
            } else {
                5.0 + (i * j) as f32 * 0.01
            }
        });
        let a = kmeans(&x.view(), 2, 3, 50);
        assert!(
            a[..10].iter().all(|&c| c == a[0])
                && a[10..].iter().all(|&c| c == a[10])
                && a[0] != a[10]
        );
        assert_eq!(a, kmeans(&x.view(), 2, 3, 50));
    }

    #[test]
    fn variance_ratio_of_separated_classes() {
        // classes {0, 2} and {10, 12}: total SS = 4 * 26 = 104... computed: mean 6,
        // deviations -6,-4,4,6 -> 104; between = 2*25 + 2*25 = 100.
        let x = array![[0f32], [2.0], [10.0], [12.0]];
        let v = variance_ratio(&x.view(), &[0, 0, 1, 1]).unwrap();
        assert!((v - 100.0 / 104.0).abs() < 1e-12);
    }
}
