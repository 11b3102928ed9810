//! t-SNE (van der Maaten & Hinton 2008) of a points × dim matrix (usually 50 PCA dims).
//!
//! - Input affinities: exact k nearest neighbours (k = 3 · perplexity, brute force in f64
//!   blocks), Gaussian bandwidths by bisection on the entropy, symmetrised
//!   `P = (P_{j|i} + P_{i|j}) / 2n` (sparse, as in van der Maaten 2014).
//! - Gradient (without the conventional factor 4, as openTSNE writes it):
//!   `∂C/∂y_i = α Σ_j p_ij w_ij (y_i − y_j) − Σ_j w_ij² (y_i − y_j) / Z`, `w = 1/(1+d²)`.
//!   The repulsive sums come from FFT-accelerated interpolation (Linderman et al. 2019,
//!   FIt-SNE): charges `[1, y₁, y₂, ‖y‖²]` spread onto a regular grid by Lagrange
//!   interpolation on 3 nodes per box, convolved with the kernel `1/(1+d²)²` by 2-D FFT
//!   (`rustfft`), interpolated back; `Z` follows from the same potentials. Below
//!   [`EXACT_BELOW`] points the sums are computed exactly.
//! - Optimisation: gradient descent with momentum (0.5 during early exaggeration α = 12 for
//!   250 iterations, then 0.8) and delta-bar-delta gains (Jacobs 1988), learning rate
//!   `max(n / α, 200)` per phase (Belkina et al. 2019), map re-centred every iteration.
//! - KL divergence of the final map: `Σ p_ij ln(p_ij Z / w_ij)` on the sparse P, with Z from
//!   the same approximation as the gradient.
//!
//! Every reduction runs in a fixed order, so the map does not depend on the thread count.

use ndarray::{Array2, ArrayView2};
use rayon::prelude::*;
use rustfft::num_complex::Complex32;
use rustfft::{Fft, FftPlanner};
use std::sync::Arc;

use crate::analysis::purity::{knn_with_distances, Points};

/// Below this many points the repulsive forces are computed exactly (O(n²) per iteration).
/// At 1 666 points (the report's sample on a 768-wide layer) the FFT sums were a third
/// faster for the whole map step (3 layers of bench row 10's capture, 2 cores: 9.7 s exact,
/// 6.6 s FFT) at the same quality (trustworthiness 0.785-0.789 exact, 0.790-0.792 FFT;
/// 2-D k-NN phone purity 0.045-0.076 both); 2 500 before that measurement.
pub const EXACT_BELOW: usize = 1000;

/// t-SNE settings.
#[derive(Clone, Debug, serde::Serialize)]
pub struct TsneOptions {
    /// Perplexity (lowered to (n − 1) / 3 for small inputs).
    pub perplexity: f64,
    /// Early exaggeration factor.
    pub exaggeration: f64,
    /// Iterations with early exaggeration.
    pub early_iterations: usize,
    /// Iterations after early exaggeration (500, openTSNE's default, from memory; the plain phase
    /// costs most, since the FFT grid grows with the map).
    pub iterations: usize,
    /// Learning rate (None: max(n / exaggeration, 200) per phase).
    pub learning_rate: Option<f64>,
    /// Interpolation nodes per box for the FFT gradient.
    pub interpolation_nodes: usize,
    /// Smallest number of boxes per axis for the FFT gradient.
    pub min_boxes: usize,
}

impl Default for TsneOptions {
    fn default() -> Self {
        TsneOptions {
            perplexity: 30.0,
            exaggeration: 12.0,
            early_iterations: 250,
            iterations: 500,
            learning_rate: None,
            interpolation_nodes: 3,
            min_boxes: 50,
        }
    }
}

/// Symmetric sparse input affinities (CSR, sums to 1).
#[derive(Clone, Debug)]
pub struct Affinities {
    /// Row starts (n + 1).
    pub indptr: Vec<usize>,
    /// Column of each entry.
    pub cols: Vec<u32>,
    /// Value of each entry.
    pub vals: Vec<f64>,
    /// The perplexity used.
    pub perplexity: f64,
}

/// The perplexity actually used for `n` points.
pub fn effective_perplexity(perplexity: f64, n: usize) -> f64 {
    let max = (n.saturating_sub(1)) as f64 / 3.0;
    perplexity.min(max).max(1.0_f64.min(max))
}

/// Conditional Gaussian affinities of one point over its neighbours (squared distances),
/// bandwidth found by bisection so the entropy is ln(perplexity).
fn conditional_row(d2: &[f64], perplexity: f64) -> Vec<f64> {
    let target = perplexity.ln();
    let dmin = d2.iter().cloned().fold(f64::INFINITY, f64::min);
    let (mut beta, mut lo, mut hi) = (1.0f64, 0.0f64, f64::INFINITY);
    let mut p = vec![0f64; d2.len()];
    for _ in 0..200 {
        let mut sum = 0.0;
        for (pj, &d) in p.iter_mut().zip(d2) {
            *pj = (-(d - dmin) * beta).exp();
            sum += *pj;
        }
        let mut h = 0.0;
        for (pj, &d) in p.iter_mut().zip(d2) {
            *pj /= sum;
            h += beta * (d - dmin) * *pj;
        }
        // entropy of the normalised row: ln(sum) + β Σ p d (shifted by dmin)
        let h = h + sum.ln();
        if (h - target).abs() < 1e-5 {
            break;
        }
        if h > target {
            lo = beta;
            beta = if hi.is_finite() {
                (beta + hi) / 2.0
            } else {
                beta * 2.0
            };
        } else {
            hi = beta;
            beta = (beta + lo) / 2.0;
        }
    }
    p
}

/// Sparse symmetric affinities of the rows of `x` at `perplexity`.
pub fn affinities(x: &ArrayView2<f32>, perplexity: f64) -> Affinities {
    let n = x.nrows();
    let perp = effective_perplexity(perplexity, n);
    let k = ((3.0 * perp).ceil() as usize)
        .min(n.saturating_sub(1))
        .max(1);
    let nn = knn_with_distances(&Points::new(x), k);
    let cond: Vec<Vec<f64>> = nn
        .par_iter()
        .map(|row| {
            let d2: Vec<f64> = row.iter().map(|&(_, d)| d * d).collect();
            conditional_row(&d2, perp)
        })
        .collect();
    // symmetrise: gather (i, j, v) and (j, i, v), sort, merge
    let mut trip: Vec<(u32, u32, f64)> = Vec::with_capacity(2 * n * k);
    for (i, (row, p)) in nn.iter().zip(&cond).enumerate() {
        for (&(j, _), &v) in row.iter().zip(p) {
            trip.push((i as u32, j, v));
            trip.push((j, i as u32, v));
        }
    }
    trip.sort_unstable_by(|a, b| (a.0, a.1).cmp(&(b.0, b.1)).then(a.2.total_cmp(&b.2)));
    let mut indptr = vec![0usize; n + 1];
    let mut cols = Vec::with_capacity(trip.len());
    let mut vals: Vec<f64> = Vec::with_capacity(trip.len());
    let mut last: Option<(u32, u32)> = None;
    for (i, j, v) in trip {
        if last == Some((i, j)) {
            *vals.last_mut().unwrap_or(&mut 0.0) += v;
        } else {
            cols.push(j);
            vals.push(v);
            indptr[i as usize + 1] += 1;
            last = Some((i, j));
        }
    }
    for i in 0..n {
        indptr[i + 1] += indptr[i];
    }
    let denom = 2.0 * n as f64;
    vals.iter_mut().for_each(|v| *v /= denom);
    Affinities {
        indptr,
        cols,
        vals,
        perplexity: perp,
    }
}

/// Result of one t-SNE run.
#[derive(Clone, Debug)]
pub struct TsneResult {
    /// The map (n × 2).
    pub embedding: Array2<f32>,
    /// KL(P ‖ Q) of the final map.
    pub kl_divergence: f64,
    /// Perplexity used.
    pub perplexity: f64,
    /// `fft` or `exact`.
    pub gradient: &'static str,
}

/// Repulsive forces (unnormalised, Σ_j w² (y_i − y_j)) and Z, exactly.
fn repulsion_exact(y: &[[f64; 2]], rep: &mut [[f64; 2]]) -> f64 {
    // coordinates as separate arrays and no branch on j == i (its term is w = 1 with zero
    // force, removed from Z afterwards) so the inner loop vectorises
    let xs: Vec<f64> = y.iter().map(|v| v[0]).collect();
    let ys: Vec<f64> = y.iter().map(|v| v[1]).collect();
    let zs: Vec<f64> = rep
        .par_iter_mut()
        .enumerate()
        .map(|(i, r)| {
            let (xi, yi) = (xs[i], ys[i]);
            // eight independent accumulator lanes (a fixed order, so still deterministic)
            const L: usize = 8;
            let (mut z, mut fx, mut fy) = ([0f64; L], [0f64; L], [0f64; L]);
            let mut cx = xs.chunks_exact(L);
            let mut cy = ys.chunks_exact(L);
            for (bx, by) in (&mut cx).zip(&mut cy) {
                for l in 0..L {
                    let dx = xi - bx[l];
                    let dy = yi - by[l];
                    let w = 1.0 / (1.0 + dx * dx + dy * dy);
                    let w2 = w * w;
                    z[l] += w;
                    fx[l] += w2 * dx;
                    fy[l] += w2 * dy;
                }
            }
            for (&xj, &yj) in cx.remainder().iter().zip(cy.remainder()) {
                let dx = xi - xj;
                let dy = yi - yj;
                let w = 1.0 / (1.0 + dx * dx + dy * dy);
                z[0] += w;
                fx[0] += w * w * dx;
                fy[0] += w * w * dy;
            }
            let (z, fx, fy): (f64, f64, f64) = (z.iter().sum(), fx.iter().sum(), fy.iter().sum());
            *r = [fx, fy];
            z - 1.0
        })
        .collect();
    zs.iter().sum()
}

type Plan = Arc<dyn Fft<f32>>;

/// Most interpolation nodes per box (fixed-size weight arrays, no allocation per point).
const MAX_NODES: usize = 8;

/// Workspace for the FFT-interpolation gradient (plans reused across iterations).
struct FftGrid {
    planner: FftPlanner<f32>,
    plans: Option<(usize, Plan, Plan)>,
    kernel: Option<((usize, u64), Vec<f32>)>,
    g1: Vec<Complex32>,
    g2: Vec<Complex32>,
    tmp: Vec<Complex32>,
    spread: Vec<[f64; 4]>,
    nodes: usize,
    min_boxes: usize,
}

/// FFT sizes with only small prime factors, for fast transforms.
fn nice_size(n: usize) -> usize {
    let mut m = n.max(2);
    loop {
        let mut r = m;
        for p in [2, 3, 5] {
            while r.is_multiple_of(p) {
                r /= p;
            }
        }
        if r == 1 {
            return m;
        }
        m += 1;
    }
}

impl FftGrid {
    fn new(nodes: usize, min_boxes: usize) -> Self {
        FftGrid {
            planner: FftPlanner::new(),
            plans: None,
            kernel: None,
            g1: Vec::new(),
            g2: Vec::new(),
            tmp: Vec::new(),
            spread: Vec::new(),
            nodes: nodes.clamp(2, MAX_NODES),
            min_boxes,
        }
    }

    fn plans(&mut self, size: usize) -> (Plan, Plan) {
        match &self.plans {
            Some((s, f, i)) if *s == size => (f.clone(), i.clone()),
            _ => {
                let f = self.planner.plan_fft_forward(size);
                let i = self.planner.plan_fft_inverse(size);
                self.plans = Some((size, f.clone(), i.clone()));
                (f, i)
            }
        }
    }

    /// Repulsive forces (unnormalised) into `rep`, returns Z.
    fn repulsion(&mut self, y: &[[f64; 2]], rep: &mut [[f64; 2]]) -> f64 {
        let n = y.len();
        let p = self.nodes;
        let grid = self.layout(y);
        let (m, big) = (grid.m, grid.big);
        let interp = grid.interpolation(y);
        // two complex grids: (1 + i·y1) and (y2 + i·‖y‖²); the kernel is real and even, so
        // real and imaginary parts convolve independently. The grids are f32 (twice the FFT
        // speed); charges are spread and potentials gathered in f64. Coordinates are centred
        // (|y| up to ~100), so the ‖y‖² cancellation in Z costs at most ~1e-3 relative, below
        // the interpolation error.
        let mut g1 = std::mem::take(&mut self.g1);
        let mut g2 = std::mem::take(&mut self.g2);
        let mut tmp = std::mem::take(&mut self.tmp);
        for g in [&mut g1, &mut g2, &mut tmp] {
            if g.len() != big * big {
                // every element the transforms read is written below, so a grid of the right
                // size is reused without clearing
                g.clear();
                g.resize(big * big, Complex32::new(0.0, 0.0));
            }
        }
        self.spread_charges(y, &interp, m, big, &mut g1, &mut g2);
        let (fwd, inv) = self.plans(big);
        let key = (big, grid.spacing.to_bits());
        let ker = match &self.kernel {
            Some((k, v)) if *k == key => v,
            _ => {
                &self
                    .kernel
                    .insert((key, kernel_hat(big, m, grid.spacing, &fwd)))
                    .1
            }
        };
        let scale = 1.0 / (big * big) as f32;
        for g in [&mut g1, &mut g2] {
            fft2(g, &mut tmp, big, m, &fwd);
            g.par_iter_mut()
                .zip(ker.par_iter())
                .for_each(|(g, k)| *g *= k * scale);
            ifft2(g, &mut tmp, big, m, &inv);
        }
        let terms = gather_potentials(y, &interp, p, big, &g1, &g2, rep);
        self.g1 = g1;
        self.g2 = g2;
        self.tmp = tmp;
        terms.iter().sum::<f64>() - n as f64
    }

    /// The grid over the map `y`: boxes of width 1 (FIt-SNE's one interval per unit) once the
    /// map is wider than `min_boxes` units, so the kernel's transform can be reused between
    /// iterations; narrower maps get `min_boxes` boxes.
    fn layout(&self, y: &[[f64; 2]]) -> GridLayout {
        let p = self.nodes;
        let (mut lo, mut hi) = (f64::INFINITY, f64::NEG_INFINITY);
        for v in y {
            lo = lo.min(v[0]).min(v[1]);
            hi = hi.max(v[0]).max(v[1]);
        }
        let range = (hi - lo).max(1e-12);
        let want = (range.ceil() as usize + 1).max(self.min_boxes);
        let mut nb = want;
        while nice_size(2 * nb * p) != 2 * nb * p {
            nb += 1;
        }
        let bw = if range + 1.0 > self.min_boxes as f64 {
            1.0
        } else {
            range / nb as f64
        };
        let lo = lo - (nb as f64 * bw - range) / 2.0;
        let m = nb * p; // nodes per axis
        GridLayout {
            lo,
            bw,
            nb,
            p,
            m,
            big: 2 * m, // circulant embedding
            spacing: bw / p as f64,
        }
    }

    /// Spread the charges (1, y1, y2, ‖y‖²) onto the nodes in f64 on the m × m block (the
    /// rest is zero padding), then round once into the grids `g1`, `g2`; rows at and beyond
    /// m are never read by the forward transform.
    fn spread_charges(
        &mut self,
        y: &[[f64; 2]],
        interp: &[Interp],
        m: usize,
        big: usize,
        g1: &mut [Complex32],
        g2: &mut [Complex32],
    ) {
        let p = self.nodes;
        let mut s = std::mem::take(&mut self.spread);
        s.clear();
        s.resize(m * m, [0f64; 4]);
        for (v, (bx, wx, by, wy)) in y.iter().zip(interp) {
            let q = [1.0, v[0], v[1], v[0] * v[0] + v[1] * v[1]];
            for (a, &lx) in wx[..p].iter().enumerate() {
                let gx = bx * p + a;
                for (b, &ly) in wy[..p].iter().enumerate() {
                    let c = &mut s[gx * m + by * p + b];
                    let w = lx * ly;
                    for (cq, qq) in c.iter_mut().zip(q) {
                        *cq += w * qq;
                    }
                }
            }
        }
        let zero = Complex32::new(0.0, 0.0);
        for (r, srow) in s.chunks_exact(m).enumerate() {
            let (r1, r2) = (
                &mut g1[r * big..(r + 1) * big],
                &mut g2[r * big..(r + 1) * big],
            );
            for ((a, b), v) in r1.iter_mut().zip(r2.iter_mut()).zip(srow) {
                *a = Complex32::new(v[0] as f32, v[1] as f32);
                *b = Complex32::new(v[2] as f32, v[3] as f32);
            }
            r1[m..].fill(zero);
            r2[m..].fill(zero);
        }
        self.spread = s;
    }
}

/// Box and Lagrange weights of a point on each axis: (box x, weights x, box y, weights y).
type Interp = (usize, [f64; MAX_NODES], usize, [f64; MAX_NODES]);

/// Where the interpolation grid lies: `nb` boxes of width `bw` from `lo` on each axis, `p`
/// nodes per box (`m` nodes per axis), FFT size `big`, node spacing `spacing`.
struct GridLayout {
    lo: f64,
    bw: f64,
    nb: usize,
    p: usize,
    m: usize,
    big: usize,
    spacing: f64,
}

impl GridLayout {
    /// Box and Lagrange interpolation weights of every point of `y`.
    fn interpolation(&self, y: &[[f64; 2]]) -> Vec<Interp> {
        let (lo, bw, nb, p) = (self.lo, self.bw, self.nb, self.p);
        // local node positions in [0, 1] and Lagrange denominators
        let tn: Vec<f64> = (0..p).map(|i| (i as f64 + 0.5) / p as f64).collect();
        let denom: Vec<f64> = (0..p)
            .map(|i| (0..p).filter(|&k| k != i).map(|k| tn[i] - tn[k]).product())
            .collect();
        let weights = |c: f64| -> (usize, [f64; MAX_NODES]) {
            let u = (c - lo) / bw;
            let b = (u.floor().max(0.0) as usize).min(nb - 1);
            let t = u - b as f64;
            let mut w = [0f64; MAX_NODES];
            for (i, wi) in w.iter_mut().enumerate().take(p) {
                let mut num = 1.0;
                for (k, &tk) in tn.iter().enumerate() {
                    if k != i {
                        num *= t - tk;
                    }
                }
                *wi = num / denom[i];
            }
            (b, w)
        };
        y.par_iter()
            .map(|v| {
                let (bx, wx) = weights(v[0]);
                let (by, wy) = weights(v[1]);
                (bx, wx, by, wy)
            })
            .collect()
    }
}

/// Gather the convolved potentials at the points: repulsive forces into `rep`, and each
/// point's term of Z.
fn gather_potentials(
    y: &[[f64; 2]],
    interp: &[Interp],
    p: usize,
    big: usize,
    g1: &[Complex32],
    g2: &[Complex32],
    rep: &mut [[f64; 2]],
) -> Vec<f64> {
    rep.par_iter_mut()
        .zip(y.par_iter().zip(interp.par_iter()))
        .map(|(r, (v, (bx, wx, by, wy)))| {
            let mut phi = [0f64; 4];
            for (a, &lx) in wx[..p].iter().enumerate() {
                let gx = bx * p + a;
                for (b, &ly) in wy[..p].iter().enumerate() {
                    let idx = gx * big + by * p + b;
                    let w = lx * ly;
                    phi[0] += w * g1[idx].re as f64;
                    phi[1] += w * g1[idx].im as f64;
                    phi[2] += w * g2[idx].re as f64;
                    phi[3] += w * g2[idx].im as f64;
                }
            }
            r[0] = v[0] * phi[0] - phi[1];
            r[1] = v[1] * phi[0] - phi[2];
            (1.0 + v[0] * v[0] + v[1] * v[1]) * phi[0] - 2.0 * (v[0] * phi[1] + v[1] * phi[2])
                + phi[3]
        })
        .collect()
}

/// Transform (real: the kernel is even) of the kernel `1/(1+d²)²` on the circulant grid.
fn kernel_hat(big: usize, m: usize, spacing: f64, fwd: &Plan) -> Vec<f32> {
    let mut ker = vec![Complex32::new(0.0, 0.0); big * big];
    ker.par_chunks_mut(big).enumerate().for_each(|(a, row)| {
        let oa = if a < m {
            a as f64
        } else if a > m {
            a as f64 - big as f64
        } else {
            return;
        };
        for (b, v) in row.iter_mut().enumerate() {
            let ob = if b < m {
                b as f64
            } else if b > m {
                b as f64 - big as f64
            } else {
                continue;
            };
            let d2 = (oa * spacing).powi(2) + (ob * spacing).powi(2);
            *v = Complex32::new((1.0 / (1.0 + d2).powi(2)) as f32, 0.0);
        }
    });
    let mut tmp = Vec::new();
    fft2(&mut ker, &mut tmp, big, big, fwd);
    ker.iter().map(|c| c.re).collect()
}

/// Rows per parallel task in transposes and row transforms (fixed, so the work split does not
/// depend on the thread count; each output element is written by exactly one task anyway).
const ROW_CHUNK: usize = 16;

/// Transpose the square `size × size` grid `a` into `t`, reading only the first `in_rows`
/// rows of `a` (the rest are taken as zero) and writing only the first `out_rows` rows of `t`
/// (the rest are left as they were). `t` must hold `size × size` elements.
fn transpose(a: &[Complex32], t: &mut [Complex32], size: usize, in_rows: usize, out_rows: usize) {
    const B: usize = 16;
    let zero = Complex32::new(0.0, 0.0);
    // each task fills ROW_CHUNK output rows (= input columns)
    t[..out_rows * size]
        .par_chunks_mut(size * ROW_CHUNK)
        .enumerate()
        .for_each(|(c, out)| {
            let j0 = c * ROW_CHUNK;
            let rows_here = out.len() / size;
            for i0 in (0..in_rows).step_by(B) {
                let i1 = (i0 + B).min(in_rows);
                for jj in 0..rows_here {
                    let j = j0 + jj;
                    let o = &mut out[jj * size + i0..jj * size + i1];
                    for (k, v) in o.iter_mut().enumerate() {
                        *v = a[(i0 + k) * size + j];
                    }
                }
            }
            for jj in 0..rows_here {
                out[jj * size + in_rows..(jj + 1) * size].fill(zero);
            }
        });
}

/// Forward 2-D FFT of a `size × size` grid whose rows at and beyond `nonzero` are zero (and
/// are not read); the result is left transposed (the same layout for kernel and charges,
/// undone by [`ifft2`]).
fn fft2(g: &mut Vec<Complex32>, tmp: &mut Vec<Complex32>, size: usize, nonzero: usize, fwd: &Plan) {
    rows_fft(&mut g[..nonzero * size], size, fwd);
    if tmp.len() != size * size {
        tmp.clear();
        tmp.resize(size * size, Complex32::new(0.0, 0.0));
    }
    transpose(g, tmp, size, nonzero, size);
    std::mem::swap(g, tmp);
    rows_fft(g, size, fwd);
}

/// Transform every row of `g` (rows of length `size`) in place, rows in parallel chunks.
fn rows_fft(g: &mut [Complex32], size: usize, plan: &Plan) {
    let scratch_len = plan.get_inplace_scratch_len();
    g.par_chunks_mut(size * ROW_CHUNK).for_each(|chunk| {
        let mut scratch = vec![Complex32::new(0.0, 0.0); scratch_len];
        plan.process_with_scratch(chunk, &mut scratch);
    });
}

/// Inverse of [`fft2`] (unnormalised); only the first `needed` rows are valid afterwards.
fn ifft2(g: &mut Vec<Complex32>, tmp: &mut Vec<Complex32>, size: usize, needed: usize, inv: &Plan) {
    rows_fft(g, size, inv);
    transpose(g, tmp, size, size, needed);
    std::mem::swap(g, tmp);
    rows_fft(&mut g[..needed * size], size, inv);
}

/// Attractive forces Σ_j p_ij w_ij (y_i − y_j), and (when `with_kl`) Σ p_ij ln(1 + d²) for
/// the KL divergence; the logarithm is skipped in the iterations, where it dominated the cost.
fn attraction(p: &Affinities, y: &[[f64; 2]], att: &mut [[f64; 2]], with_kl: bool) -> f64 {
    let parts: Vec<f64> = att
        .par_iter_mut()
        .enumerate()
        .map(|(i, a)| {
            let (mut f, mut l) = ([0.0, 0.0], 0.0);
            for e in p.indptr[i]..p.indptr[i + 1] {
                let j = p.cols[e] as usize;
                let dx = y[i][0] - y[j][0];
                let dy = y[i][1] - y[j][1];
                let d2 = dx * dx + dy * dy;
                let w = p.vals[e] / (1.0 + d2);
                f[0] += w * dx;
                f[1] += w * dy;
                if with_kl {
                    l += p.vals[e] * (1.0 + d2).ln();
                }
            }
            *a = f;
            l
        })
        .collect();
    parts.iter().sum()
}

/// Run t-SNE on `x` from the initial map `init` (n × 2).
pub fn run(
    x: &ArrayView2<f32>,
    init: &ArrayView2<f32>,
    opts: &TsneOptions,
    mut tick: impl FnMut(),
) -> TsneResult {
    let n = x.nrows();
    let p = affinities(x, opts.perplexity);
    let mut y: Vec<[f64; 2]> = init
        .outer_iter()
        .map(|r| [r[0] as f64, r[1] as f64])
        .collect();
    let exact = n < EXACT_BELOW;
    let mut grid = FftGrid::new(opts.interpolation_nodes.max(2), opts.min_boxes.max(1));
    let mut update = vec![[0f64; 2]; n];
    let mut gains = vec![[1f64; 2]; n];
    let mut att = vec![[0f64; 2]; n];
    let mut rep = vec![[0f64; 2]; n];
    let total = opts.early_iterations + opts.iterations;
    for it in 0..total {
        let early = it < opts.early_iterations;
        let alpha = if early { opts.exaggeration } else { 1.0 };
        let momentum = if early { 0.5 } else { 0.8 };
        let lr = opts
            .learning_rate
            .unwrap_or_else(|| (n as f64 / alpha).max(200.0));
        attraction(&p, &y, &mut att, false);
        let z = if exact {
            repulsion_exact(&y, &mut rep)
        } else {
            grid.repulsion(&y, &mut rep)
        };
        let z = z.max(f64::MIN_POSITIVE);
        for i in 0..n {
            for d in 0..2 {
                let g = alpha * att[i][d] - rep[i][d] / z;
                let same = (g > 0.0) == (update[i][d] > 0.0);
                gains[i][d] = if same {
                    gains[i][d] * 0.8
                } else {
                    gains[i][d] + 0.2
                };
                gains[i][d] = gains[i][d].max(0.01);
                update[i][d] = momentum * update[i][d] - lr * gains[i][d] * g;
                y[i][d] += update[i][d];
            }
        }
        let (mut m0, mut m1) = (0.0, 0.0);
        for v in &y {
            m0 += v[0];
            m1 += v[1];
        }
        let (m0, m1) = (m0 / n as f64, m1 / n as f64);
        for v in y.iter_mut() {
            v[0] -= m0;
            v[1] -= m1;
        }
        tick();
    }
    // KL of the final map: recompute the terms at the final positions
    let plog = attraction(&p, &y, &mut att, true);
    let z = if exact {
        repulsion_exact(&y, &mut rep)
    } else {
        grid.repulsion(&y, &mut rep)
    };
    let pp: f64 = p
        .vals
        .iter()
        .filter(|&&v| v > 0.0)
        .map(|&v| v * v.ln())
        .sum();
    let kl = pp + plog + z.max(f64::MIN_POSITIVE).ln();
    let embedding = Array2::from_shape_fn((n, 2), |(i, d)| y[i][d] as f32);
    TsneResult {
        embedding,
        kl_divergence: kl,
        perplexity: p.perplexity,
        gradient: if exact { "exact" } else { "fft" },
    }
}

/// Scale a map so its first axis has standard deviation `target` (openTSNE's initialisation
/// rule with 1e-4), centred.
pub fn rescale(y: &ArrayView2<f32>, target: f64) -> Array2<f32> {
    let n = y.nrows().max(1) as f64;
    let m0 = y.column(0).iter().map(|&v| v as f64).sum::<f64>() / n;
    let m1 = y.column(1).iter().map(|&v| v as f64).sum::<f64>() / n;
    let sd = (y
        .column(0)
        .iter()
        .map(|&v| (v as f64 - m0).powi(2))
        .sum::<f64>()
        / n)
        .sqrt();
    let f = if sd > 0.0 { target / sd } else { 1.0 };
    Array2::from_shape_fn(y.dim(), |(i, d)| {
        ((y[[i, d]] as f64 - if d == 0 { m0 } else { m1 }) * f) as f32
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn affinities_are_symmetric_and_sum_to_one() {
        let x = Array2::from_shape_fn((60, 3), |(i, j)| {
            ((i * 7 + j * 11) % 13) as f32 + 0.01 * i as f32
        });
        let p = affinities(&x.view(), 10.0);
        let s: f64 = p.vals.iter().sum();
        assert!((s - 1.0).abs() < 1e-12);
        for i in 0..60 {
            for e in p.indptr[i]..p.indptr[i + 1] {
                let j = p.cols[e] as usize;
                let back = (p.indptr[j]..p.indptr[j + 1])
                    .find(|&f| p.cols[f] as usize == i)
                    .unwrap();
                assert!((p.vals[back] - p.vals[e]).abs() < 1e-15);
            }
        }
    }

    #[test]
    fn conditional_row_hits_the_perplexity() {
        let d2: Vec<f64> = (0..90).map(|i| (i as f64) * 0.37).collect();
        let p = conditional_row(&d2, 30.0);
        let h: f64 = -p
            .iter()
            .filter(|&&v| v > 0.0)
            .map(|v| v * v.ln())
            .sum::<f64>();
        assert!((h.exp() - 30.0).abs() < 1e-3, "{}", h.exp());
    }

    #[test]
    fn fft_repulsion_matches_exact_sums() {
        // 300 points spread over a few units: the interpolation error of FIt-SNE's scheme with
        // 3 nodes per box is well under 1% (Linderman et al. 2019, Fig. 2; from memory)
        let y: Vec<[f64; 2]> = (0..300)
            .map(|i| {
                let t = i as f64 * 0.7;
                [
                    t.sin() * (1.0 + i as f64 * 0.03),
                    t.cos() * 3.0 + (i % 7) as f64 - 3.0,
                ]
            })
            .collect();
        let mut r1 = vec![[0f64; 2]; 300];
        let mut r2 = vec![[0f64; 2]; 300];
        let z1 = repulsion_exact(&y, &mut r1);
        let z2 = FftGrid::new(3, 50).repulsion(&y, &mut r2);
        assert!((z1 - z2).abs() / z1 < 1e-3, "{z1} {z2}");
        let scale = r1
            .iter()
            .map(|r| r[0].abs() + r[1].abs())
            .fold(0.0, f64::max);
        for (a, b) in r1.iter().zip(&r2) {
            assert!((a[0] - b[0]).abs() < 3e-3 * scale && (a[1] - b[1]).abs() < 3e-3 * scale);
        }
    }

    #[test]
    fn fft_repulsion_matches_exact_sums_on_a_wide_map() {
        // 40 clusters of 60 points spread over ~120 units, the shape of a finished map: boxes
        // of width 1 and a grid larger than the minimum. The grid is reused between calls, so
        // it is called twice with different maps to show nothing leaks from one to the next.
        // Bounds: Z within 1%, mean force error within 3% of the mean force with FIt-SNE's 3
        // nodes per unit box (measured 2.0-2.2%; an f64 grid gives the same errors here).
        let make = |shift: f64| -> Vec<[f64; 2]> {
            let mut y = Vec::new();
            for c in 0..40 {
                let cx = 55.0 * ((c as f64) * 2.1 + shift).sin();
                let cy = 55.0 * ((c as f64) * 1.3).cos();
                for i in 0..60 {
                    let t = i as f64 * 0.61 + c as f64;
                    y.push([cx + 3.0 * t.sin() * (i as f64 / 60.0), cy + 3.0 * t.cos()]);
                }
            }
            y
        };
        // with 5 nodes per box the same sums come out within 0.5%: the error is the
        // interpolation's, and shrinks as the scheme says it should
        for (nodes, bound) in [(3, 0.03), (5, 0.005)] {
            let mut grid = FftGrid::new(nodes, 50);
            for shift in [0.0, 0.5] {
                let y = make(shift);
                let mut r1 = vec![[0f64; 2]; y.len()];
                let mut r2 = vec![[0f64; 2]; y.len()];
                let z1 = repulsion_exact(&y, &mut r1);
                let z2 = grid.repulsion(&y, &mut r2);
                assert!((z1 - z2).abs() / z1 < 1e-2, "Z {z1} {z2}");
                let n = y.len() as f64;
                let mean_force = r1.iter().map(|r| r[0].hypot(r[1])).sum::<f64>() / n;
                let mean_err = r1
                    .iter()
                    .zip(&r2)
                    .map(|(a, b)| (a[0] - b[0]).hypot(a[1] - b[1]))
                    .sum::<f64>()
                    / n;
                assert!(
                    mean_err < bound * mean_force,
                    "{nodes} nodes: {mean_err} vs {mean_force}"
                );
            }
        }
    }
}
