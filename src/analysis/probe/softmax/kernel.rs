//! The fused objective-and-gradient pass of the softmax fit over a training matrix packed once
//! per fit ([`PackedRows`]).
//!
//! Rows are stored in panels of [`MR`] rows, feature-major inside a panel (the [`MR`] values of
//! feature 0, then of feature 1, ...), so that one panel (d × MR values, 24 KiB for d = 768) is
//! read from memory once per evaluation and stays in the first-level cache while the kernel
//! computes its scores (`Z = X W + b`), the softmax, the cross-entropy and the gradient
//! contribution (`Xᵀ (P − Y)`). Nothing is repacked between evaluations.
//!
//! Determinism: blocks of [`BLOCK`] rows are processed in parallel, each into its own partial
//! gradient (f32 inside the block), and the partials are summed in f64 in block order, so the
//! result does not depend on the number of threads.
//!
//! On x86-64 with AVX-512F the panel products run in 512-bit registers (8 rows × up to 48
//! classes of accumulators); with AVX2 and FMA but no AVX-512, in 256-bit registers (half a
//! panel × 16 classes per tile); elsewhere a portable loop over the same layout is used.

use rayon::prelude::*;

use crate::analysis::linalg::exp_f32;

/// Rows per panel.
pub const MR: usize = 8;
/// Rows per parallel block (a multiple of [`MR`]); partial gradients are per block.
pub const BLOCK: usize = 1024;
/// Class columns are padded to a multiple of this (one 512-bit register of f32).
const LANES: usize = 16;

/// A training matrix packed once for many evaluations: panels of [`MR`] rows, feature-major
/// inside each panel; the last panel is padded with zero rows.
#[derive(Clone, Debug)]
pub struct PackedRows {
    n: usize,
    d: usize,
    data: Vec<f32>,
    spectrum: std::sync::OnceLock<super::Spectrum>,
}

impl PackedRows {
    /// Pack the rows of `x` (any layout), optionally standardising each value as
    /// `(v - mean[j]) / scale[j]` on the way.
    pub fn pack(x: &ndarray::ArrayView2<f32>, standardise: Option<(&[f32], &[f32])>) -> Self {
        Self::pack_rows(x, None, standardise)
    }

    /// Pack the rows `rows` of `x` (all rows when None), in that order, optionally
    /// standardising as [`PackedRows::pack`] does; no other copy of the rows is made.
    pub fn pack_rows(
        x: &ndarray::ArrayView2<f32>,
        rows: Option<&[usize]>,
        standardise: Option<(&[f32], &[f32])>,
    ) -> Self {
        let d = x.ncols();
        let n = rows.map_or(x.nrows(), |r| r.len());
        let panels = n.div_ceil(MR);
        let mut data = vec![0f32; panels * MR * d];
        data.par_chunks_mut(MR * d * (BLOCK / MR))
            .enumerate()
            .for_each(|(bi, chunk)| {
                for (pi, panel) in chunk.chunks_mut(MR * d).enumerate() {
                    let lo = (bi * (BLOCK / MR) + pi) * MR;
                    for r in 0..MR.min(n.saturating_sub(lo)) {
                        let row = x.row(rows.map_or(lo + r, |rs| rs[lo + r]));
                        for (j, &v) in row.iter().enumerate() {
                            panel[j * MR + r] = match standardise {
                                Some((m, s)) => (v - m[j]) / s[j],
                                None => v,
                            };
                        }
                    }
                }
            });
        PackedRows {
            n,
            d,
            data,
            spectrum: std::sync::OnceLock::new(),
        }
    }

    /// Rows the Gram matrix behind [`PackedRows::spectrum`] is taken from (spread through the
    /// matrix).
    pub const GRAM_ROWS: usize = 8192;

    /// The rows' [`super::Spectrum`] from [`PackedRows::gram_sample`] over
    /// [`PackedRows::GRAM_ROWS`] rows, computed once per packed matrix (a penalty search fits
    /// the same rows several times).
    pub fn spectrum(&self) -> &super::Spectrum {
        self.spectrum
            .get_or_init(|| super::Spectrum::of_gram(&self.gram_sample(Self::GRAM_ROWS)))
    }

    /// `Σ x xᵀ / m` over about `max_rows` rows spread evenly through the matrix (whole
    /// panels; all rows when there are fewer), accumulated in f64 in panel order.
    pub fn gram_sample(&self, max_rows: usize) -> ndarray::Array2<f64> {
        let d = self.d;
        let panels = self.n.div_ceil(MR);
        let want = max_rows.div_ceil(MR).max(1);
        let stride = panels.div_ceil(want).max(1);
        let chosen: Vec<usize> = (0..panels).step_by(stride).collect();
        let rows: usize = chosen.iter().map(|&p| MR.min(self.n - p * MR)).sum();
        let mut dense = ndarray::Array2::<f32>::zeros((chosen.len() * MR, d));
        for (ci, &p) in chosen.iter().enumerate() {
            let panel = &self.data[p * MR * d..(p + 1) * MR * d];
            for r in 0..MR {
                let mut row = dense.row_mut(ci * MR + r);
                for (j, v) in row.iter_mut().enumerate() {
                    *v = panel[j * MR + r];
                }
            }
        }
        let mut g = crate::analysis::linalg::at_b(&dense.view(), &dense.view());
        g.mapv_inplace(|v| v / rows.max(1) as f64);
        g
    }

    /// Number of rows.
    pub fn nrows(&self) -> usize {
        self.n
    }

    /// Number of features.
    pub fn ncols(&self) -> usize {
        self.d
    }
}

/// Parameters laid out for the kernel: W as d × kp (classes padded with zeros), b as kp.
struct Params {
    kp: usize,
    w: Vec<f32>,
    b: Vec<f32>,
}

impl Params {
    fn new(params: &[f64], d: usize, k: usize) -> Self {
        let kp = k.div_ceil(LANES) * LANES;
        let mut w = vec![0f32; d * kp];
        for (j, row) in w.chunks_exact_mut(kp).enumerate() {
            for (c, v) in row[..k].iter_mut().enumerate() {
                *v = params[j * k + c] as f32;
            }
        }
        let mut b = vec![0f32; kp];
        for (c, v) in b[..k].iter_mut().enumerate() {
            *v = params[d * k + c] as f32;
        }
        Params { kp, w, b }
    }
}

/// Σ_i cross-entropy and its gradient (W part row-major d × k, then b) at `params`, in one
/// pass over the packed rows. Same quantity as [`super::cross_entropy_grad`].
pub fn cross_entropy_grad_packed(
    x: &PackedRows,
    y: &[u32],
    k: usize,
    params: &[f64],
    grad: &mut [f64],
) -> f64 {
    let (n, d) = (x.n, x.d);
    let p = Params::new(params, d, k);
    let kp = p.kp;
    let nb = n.div_ceil(BLOCK);
    let parts: Vec<(f64, Vec<f32>, Vec<f64>)> = (0..nb)
        .into_par_iter()
        .map(|bi| block_pass(x, y, k, &p, bi))
        .collect();
    grad.iter_mut().for_each(|g| *g = 0.0);
    let mut ce = 0f64;
    for (c, gw, gb) in parts {
        ce += c;
        for (j, row) in gw.chunks_exact(kp).enumerate() {
            for (g, &v) in grad[j * k..(j + 1) * k].iter_mut().zip(&row[..k]) {
                *g += v as f64;
            }
        }
        for (g, v) in grad[d * k..].iter_mut().zip(gb) {
            *g += v;
        }
    }
    ce
}

/// One block of rows: scores, softmax, cross-entropy and gradient, panel by panel. The
/// softmax loops are compiled for AVX2 too, and that build is used where the machine has
/// it; they are written lane by lane without fused operations, so both builds give the same
/// values.
fn block_pass(
    x: &PackedRows,
    y: &[u32],
    k: usize,
    p: &Params,
    bi: usize,
) -> (f64, Vec<f32>, Vec<f64>) {
    #[cfg(target_arch = "x86_64")]
    if avx2::available() {
        // SAFETY: AVX2 and FMA are present.
        return unsafe { block_pass_avx2(x, y, k, p, bi) };
    }
    block_pass_any(x, y, k, p, bi)
}

/// [`block_pass_any`] compiled with AVX2 and FMA enabled.
///
/// # Safety
/// AVX2 and FMA must be available.
#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2,fma")]
unsafe fn block_pass_avx2(
    x: &PackedRows,
    y: &[u32],
    k: usize,
    p: &Params,
    bi: usize,
) -> (f64, Vec<f32>, Vec<f64>) {
    block_pass_any(x, y, k, p, bi)
}

#[inline(always)]
fn block_pass_any(
    x: &PackedRows,
    y: &[u32],
    k: usize,
    p: &Params,
    bi: usize,
) -> (f64, Vec<f32>, Vec<f64>) {
    let (n, d, kp) = (x.n, x.d, p.kp);
    let lo = bi * BLOCK;
    let hi = (lo + BLOCK).min(n);
    let mut gw = vec![0f32; d * kp];
    let mut gb = vec![0f32; kp];
    let mut z = vec![0f32; MR * kp];
    let mut ce = 0f64;
    for plo in (lo..hi).step_by(MR) {
        let panel = &x.data[plo * d..(plo + MR) * d];
        scores(panel, d, &p.w, &p.b, kp, &mut z);
        let rows = MR.min(hi - plo);
        for (r, zr) in z.chunks_exact_mut(kp).enumerate() {
            if r < rows {
                ce += softmax_grad_row(zr, k, y[plo + r] as usize, &mut gb);
            } else {
                zr.fill(0.0);
            }
        }
        accumulate(panel, d, &z, kp, &mut gw);
    }
    (ce, gw, gb[..k].iter().map(|&v| v as f64).collect())
}

/// Lanes of the row reductions in [`softmax_grad_row`] (a fixed order, so the sums do not
/// depend on the instruction set; written lane by lane so that they vectorise).
const SL: usize = 8;

/// Turn one row of scores (`row`, padded to kp, a multiple of [`SL`]; the first `k` are the
/// classes) into the gradient row `p − onehot(y)` in place; add it to `gb` (kp long, f32
/// within a block like the weight gradient) and return the row's cross-entropy
/// `logsumexp(z) − z_y`. The padded columns get a probability of about 1e-38, which only the
/// padded (discarded) gradient columns see.
#[inline(always)]
fn softmax_grad_row(row: &mut [f32], k: usize, yi: usize, gb: &mut [f32]) -> f64 {
    row[k..].fill(f32::NEG_INFINITY);
    let mut ml = [f32::NEG_INFINITY; SL];
    for c in row.chunks_exact(SL) {
        for (m, &v) in ml.iter_mut().zip(c) {
            *m = if v > *m { v } else { *m };
        }
    }
    let m = ml.iter().fold(f32::NEG_INFINITY, |a, &v| a.max(v));
    let zy = row[yi];
    for v in row.iter_mut() {
        *v = exp_f32(*v - m);
    }
    let mut sl = [0f32; SL];
    for c in row.chunks_exact(SL) {
        for (s, &v) in sl.iter_mut().zip(c) {
            *s += v;
        }
    }
    let sum: f64 = sl.iter().map(|&v| v as f64).sum();
    let inv = (1.0 / sum) as f32;
    for (v, g) in row.iter_mut().zip(gb.iter_mut()) {
        let gv = *v * inv;
        *g += gv;
        *v = gv;
    }
    row[yi] -= 1.0;
    gb[yi] -= 1.0;
    m as f64 + sum.ln() - zy as f64
}

/// `z[r, :] = panel_row_r · W + b` for the [`MR`] rows of a panel (z is MR × kp).
fn scores(panel: &[f32], d: usize, w: &[f32], b: &[f32], kp: usize, z: &mut [f32]) {
    debug_assert!(panel.len() == d * MR && w.len() == d * kp && z.len() == MR * kp);
    #[cfg(target_arch = "x86_64")]
    if std::arch::is_x86_feature_detected!("avx512f") {
        // SAFETY: the feature is present; slice lengths are checked above and by the callers.
        unsafe { avx512::scores(panel, d, w, b, kp, z) };
        return;
    }
    #[cfg(target_arch = "x86_64")]
    if avx2::available() {
        // SAFETY: AVX2 and FMA are present; slice lengths are checked above and by the callers.
        unsafe { avx2::scores(panel, d, w, b, kp, z) };
        return;
    }
    portable_scores(panel, d, w, b, kp, z);
}

/// `gw += panelᵀ · g` (gw is d × kp, g is MR × kp).
fn accumulate(panel: &[f32], d: usize, g: &[f32], kp: usize, gw: &mut [f32]) {
    debug_assert!(panel.len() == d * MR && gw.len() == d * kp && g.len() == MR * kp);
    #[cfg(target_arch = "x86_64")]
    if std::arch::is_x86_feature_detected!("avx512f") {
        // SAFETY: as in `scores`.
        unsafe { avx512::accumulate(panel, d, g, kp, gw) };
        return;
    }
    #[cfg(target_arch = "x86_64")]
    if avx2::available() {
        // SAFETY: as in `scores`.
        unsafe { avx2::accumulate(panel, d, g, kp, gw) };
        return;
    }
    portable_accumulate(panel, d, g, kp, gw);
}

fn portable_scores(panel: &[f32], d: usize, w: &[f32], b: &[f32], kp: usize, z: &mut [f32]) {
    for zr in z.chunks_exact_mut(kp) {
        zr.copy_from_slice(b);
    }
    for j in 0..d {
        let wr = &w[j * kp..(j + 1) * kp];
        for (r, zr) in z.chunks_exact_mut(kp).enumerate() {
            let xv = panel[j * MR + r];
            for (o, &wv) in zr.iter_mut().zip(wr) {
                *o += xv * wv;
            }
        }
    }
}

fn portable_accumulate(panel: &[f32], d: usize, g: &[f32], kp: usize, gw: &mut [f32]) {
    for (j, gr) in gw.chunks_exact_mut(kp).take(d).enumerate() {
        for (r, grow) in g.chunks_exact(kp).enumerate() {
            let xv = panel[j * MR + r];
            for (o, &gv) in gr.iter_mut().zip(grow) {
                *o += xv * gv;
            }
        }
    }
}

#[cfg(target_arch = "x86_64")]
mod avx512 {
    //! Register-blocked panel products: [`MR`] rows × NV registers of 16 classes.
    use super::{LANES, MR};
    use std::arch::x86_64::*;

    /// Largest number of 16-class registers per row held at once (8 × 3 = 24 accumulators).
    const NV_MAX: usize = 3;

    /// # Safety
    /// AVX-512F must be available; `panel` is d × MR, `w` d × kp, `b` kp, `z` MR × kp.
    #[target_feature(enable = "avx512f")]
    pub unsafe fn scores(panel: &[f32], d: usize, w: &[f32], b: &[f32], kp: usize, z: &mut [f32]) {
        let mut c0 = 0;
        while c0 < kp {
            let nv = ((kp - c0) / LANES).min(NV_MAX);
            let (xp, wp, bp, zp) = (
                panel.as_ptr(),
                w.as_ptr().add(c0),
                b.as_ptr().add(c0),
                z.as_mut_ptr().add(c0),
            );
            match nv {
                3 => scores_tile::<3>(xp, d, wp, bp, kp, zp),
                2 => scores_tile::<2>(xp, d, wp, bp, kp, zp),
                _ => scores_tile::<1>(xp, d, wp, bp, kp, zp),
            }
            c0 += nv * LANES;
        }
    }

    #[target_feature(enable = "avx512f")]
    unsafe fn scores_tile<const NV: usize>(
        xp: *const f32,
        d: usize,
        wp: *const f32,
        bp: *const f32,
        kp: usize,
        zp: *mut f32,
    ) {
        let mut acc = [[_mm512_setzero_ps(); NV]; MR];
        for row in acc.iter_mut() {
            for (v, a) in row.iter_mut().enumerate() {
                *a = _mm512_loadu_ps(bp.add(v * LANES));
            }
        }
        for j in 0..d {
            let wr = wp.add(j * kp);
            let mut wv = [_mm512_setzero_ps(); NV];
            for (v, x) in wv.iter_mut().enumerate() {
                *x = _mm512_loadu_ps(wr.add(v * LANES));
            }
            let xr = xp.add(j * MR);
            for (r, row) in acc.iter_mut().enumerate() {
                let xb = _mm512_set1_ps(*xr.add(r));
                for (a, &x) in row.iter_mut().zip(&wv) {
                    *a = _mm512_fmadd_ps(xb, x, *a);
                }
            }
        }
        for (r, row) in acc.iter().enumerate() {
            for (v, a) in row.iter().enumerate() {
                _mm512_storeu_ps(zp.add(r * kp + v * LANES), *a);
            }
        }
    }

    /// # Safety
    /// AVX-512F must be available; `panel` is d × MR, `g` MR × kp, `gw` d × kp.
    #[target_feature(enable = "avx512f")]
    pub unsafe fn accumulate(panel: &[f32], d: usize, g: &[f32], kp: usize, gw: &mut [f32]) {
        let mut c0 = 0;
        while c0 < kp {
            let nv = ((kp - c0) / LANES).min(NV_MAX);
            let (xp, gp, op) = (panel.as_ptr(), g.as_ptr().add(c0), gw.as_mut_ptr().add(c0));
            match nv {
                3 => accumulate_tile::<3>(xp, d, gp, kp, op),
                2 => accumulate_tile::<2>(xp, d, gp, kp, op),
                _ => accumulate_tile::<1>(xp, d, gp, kp, op),
            }
            c0 += nv * LANES;
        }
    }

    #[target_feature(enable = "avx512f")]
    unsafe fn accumulate_tile<const NV: usize>(
        xp: *const f32,
        d: usize,
        gp: *const f32,
        kp: usize,
        op: *mut f32,
    ) {
        let mut gv = [[_mm512_setzero_ps(); NV]; MR];
        for (r, row) in gv.iter_mut().enumerate() {
            for (v, a) in row.iter_mut().enumerate() {
                *a = _mm512_loadu_ps(gp.add(r * kp + v * LANES));
            }
        }
        for j in 0..d {
            let xr = xp.add(j * MR);
            let orow = op.add(j * kp);
            // v indexes the register tile across rows (gv[r][v]), so a range loop is clearest
            #[allow(clippy::needless_range_loop)]
            for v in 0..NV {
                // two chains (even and odd rows) to halve the dependency latency
                let mut a = _mm512_loadu_ps(orow.add(v * LANES));
                let mut c = _mm512_mul_ps(_mm512_set1_ps(*xr.add(1)), gv[1][v]);
                a = _mm512_fmadd_ps(_mm512_set1_ps(*xr), gv[0][v], a);
                let mut r = 2;
                while r < MR {
                    a = _mm512_fmadd_ps(_mm512_set1_ps(*xr.add(r)), gv[r][v], a);
                    c = _mm512_fmadd_ps(_mm512_set1_ps(*xr.add(r + 1)), gv[r + 1][v], c);
                    r += 2;
                }
                _mm512_storeu_ps(orow.add(v * LANES), _mm512_add_ps(a, c));
            }
        }
    }
}

#[cfg(target_arch = "x86_64")]
mod avx2 {
    //! The same panel products in 256-bit registers (AVX2 with FMA, for machines without
    //! AVX-512): half a panel (4 rows) × 2 registers of classes at a time, so that the
    //! accumulators, the weights and the broadcast values fit in the 16 registers.
    use super::MR;
    use std::arch::x86_64::*;

    /// f32 values per register.
    const L: usize = 8;
    /// Rows of a panel handled per tile.
    const RH: usize = 4;
    // `accumulate_tile` spells out the four rows, and a panel is a whole number of tiles.
    const _: () = assert!(RH == 4 && MR.is_multiple_of(RH));

    pub fn available() -> bool {
        std::arch::is_x86_feature_detected!("avx2") && std::arch::is_x86_feature_detected!("fma")
    }

    /// # Safety
    /// AVX2 and FMA must be available; `panel` is d × MR, `w` d × kp, `b` kp, `z` MR × kp, and
    /// kp is a multiple of 8.
    #[target_feature(enable = "avx2,fma")]
    pub unsafe fn scores(panel: &[f32], d: usize, w: &[f32], b: &[f32], kp: usize, z: &mut [f32]) {
        for r0 in (0..MR).step_by(RH) {
            let mut c0 = 0;
            while c0 < kp {
                // Two registers of classes per tile: 8 accumulators, 2 weights and the
                // broadcasts fit the 16 registers without spilling (three spilled one
                // accumulator to the stack, which put a store and a load in its chain).
                let nv = ((kp - c0) / L).min(2);
                let (xp, wp, bp, zp) = (
                    panel.as_ptr().add(r0),
                    w.as_ptr().add(c0),
                    b.as_ptr().add(c0),
                    z.as_mut_ptr().add(r0 * kp + c0),
                );
                match nv {
                    2 => scores_tile::<2>(xp, d, wp, bp, kp, zp),
                    _ => scores_tile::<1>(xp, d, wp, bp, kp, zp),
                }
                c0 += nv * L;
            }
        }
    }

    /// RH rows × NV registers of scores; `xp` points at the tile's first row in feature 0.
    #[target_feature(enable = "avx2,fma")]
    unsafe fn scores_tile<const NV: usize>(
        xp: *const f32,
        d: usize,
        wp: *const f32,
        bp: *const f32,
        kp: usize,
        zp: *mut f32,
    ) {
        let mut acc = [[_mm256_setzero_ps(); NV]; RH];
        for row in acc.iter_mut() {
            for (v, a) in row.iter_mut().enumerate() {
                *a = _mm256_loadu_ps(bp.add(v * L));
            }
        }
        for j in 0..d {
            let wr = wp.add(j * kp);
            let mut wv = [_mm256_setzero_ps(); NV];
            for (v, x) in wv.iter_mut().enumerate() {
                *x = _mm256_loadu_ps(wr.add(v * L));
            }
            let xr = xp.add(j * MR);
            for (r, row) in acc.iter_mut().enumerate() {
                let xb = _mm256_broadcast_ss(&*xr.add(r));
                for (a, &x) in row.iter_mut().zip(&wv) {
                    *a = _mm256_fmadd_ps(xb, x, *a);
                }
            }
        }
        for (r, row) in acc.iter().enumerate() {
            for (v, a) in row.iter().enumerate() {
                _mm256_storeu_ps(zp.add(r * kp + v * L), *a);
            }
        }
    }

    /// # Safety
    /// AVX2 and FMA must be available; `panel` is d × MR, `g` MR × kp, `gw` d × kp, and kp is
    /// a multiple of 8.
    #[target_feature(enable = "avx2,fma")]
    pub unsafe fn accumulate(panel: &[f32], d: usize, g: &[f32], kp: usize, gw: &mut [f32]) {
        for r0 in (0..MR).step_by(RH) {
            let mut c0 = 0;
            while c0 < kp {
                let nv = ((kp - c0) / L).min(2);
                let (xp, gp, op) = (
                    panel.as_ptr().add(r0),
                    g.as_ptr().add(r0 * kp + c0),
                    gw.as_mut_ptr().add(c0),
                );
                match nv {
                    2 => accumulate_tile::<2>(xp, d, gp, kp, op),
                    _ => accumulate_tile::<1>(xp, d, gp, kp, op),
                }
                c0 += nv * L;
            }
        }
    }

    /// `gw[j, tile] += Σ_r x[j, r] g[r, tile]` over RH rows and NV registers of classes.
    #[target_feature(enable = "avx2,fma")]
    unsafe fn accumulate_tile<const NV: usize>(
        xp: *const f32,
        d: usize,
        gp: *const f32,
        kp: usize,
        op: *mut f32,
    ) {
        let mut gv = [[_mm256_setzero_ps(); NV]; RH];
        for (r, row) in gv.iter_mut().enumerate() {
            for (v, a) in row.iter_mut().enumerate() {
                *a = _mm256_loadu_ps(gp.add(r * kp + v * L));
            }
        }
        for j in 0..d {
            let xr = xp.add(j * MR);
            let xb = [
                _mm256_broadcast_ss(&*xr),
                _mm256_broadcast_ss(&*xr.add(1)),
                _mm256_broadcast_ss(&*xr.add(2)),
                _mm256_broadcast_ss(&*xr.add(3)),
            ];
            let orow = op.add(j * kp);
            // v indexes the register tile across rows (gv[r][v]), so a range loop is clearest
            #[allow(clippy::needless_range_loop)]
            for v in 0..NV {
                // one chain of four FMAs: the chains of successive features are independent
                // and overlap, and no extra multiply or add is spent
                let a = _mm256_fmadd_ps(xb[0], gv[0][v], _mm256_loadu_ps(orow.add(v * L)));
                let a = _mm256_fmadd_ps(xb[1], gv[1][v], a);
                let a = _mm256_fmadd_ps(xb[2], gv[2][v], a);
                let a = _mm256_fmadd_ps(xb[3], gv[3][v], a);
                _mm256_storeu_ps(orow.add(v * L), a);
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::Array2;
    use rand::{Rng, SeedableRng};
    use rand_chacha::ChaCha8Rng;

    fn random_case(n: usize, d: usize, k: usize, seed: u64) -> (Array2<f32>, Vec<u32>, Vec<f64>) {
        let mut rng = ChaCha8Rng::seed_from_u64(seed);
        let x = Array2::from_shape_fn((n, d), |_| rng.random::<f32>() * 4.0 - 2.0);
        let y = (0..n).map(|_| rng.random_range(0..k as u32)).collect();
        let p = (0..d * k + k)
            .map(|_| rng.random::<f64>() * 0.4 - 0.2)
            .collect();
        (x, y, p)
    }

    /// The packed kernel against the two-product path it replaces ([`super::super::cross_entropy_grad`],
    /// ndarray's matrix products), on random data: shapes with a partial last panel and block,
    /// class counts below, at and above one register tile, and one that spans two tiles.
    #[test]
    fn packed_pass_matches_the_matrix_product_path() {
        for &(n, d, k) in &[
            (1, 3, 2),
            (37, 5, 3),
            (1030, 17, 16),
            (2100, 33, 40),
            (613, 20, 57),
        ] {
            let (x, y, p) = random_case(n, d, k, (n * 31 + k) as u64);
            let mut g_ref = vec![0.0; p.len()];
            let f_ref = super::super::cross_entropy_grad(&x.view(), &y, k, &p, &mut g_ref);
            let packed = PackedRows::pack(&x.view(), None);
            let mut g = vec![0.0; p.len()];
            let f = cross_entropy_grad_packed(&packed, &y, k, &p, &mut g);
            assert!(
                (f - f_ref).abs() <= 1e-5 * f_ref.abs(),
                "n {n} k {k}: {f} vs {f_ref}"
            );
            let gmax = g_ref.iter().fold(0f64, |m, v| m.max(v.abs()));
            for (i, (a, b)) in g.iter().zip(&g_ref).enumerate() {
                assert!(
                    (a - b).abs() <= 1e-5 * gmax.max(1.0),
                    "n {n} k {k} param {i}: {a} vs {b}"
                );
            }
        }
    }

    /// The portable loops and the dispatched (AVX-512 where present) ones agree on one panel.
    #[test]
    fn portable_and_dispatched_panel_products_agree() {
        let (d, k) = (29usize, 70usize);
        let kp = k.div_ceil(LANES) * LANES;
        let (x, _, p) = random_case(MR, d, k, 5);
        let packed = PackedRows::pack(&x.view(), None);
        let pr = Params::new(&p, d, k);
        let (mut z1, mut z2) = (vec![0f32; MR * kp], vec![0f32; MR * kp]);
        scores(&packed.data, d, &pr.w, &pr.b, kp, &mut z1);
        portable_scores(&packed.data, d, &pr.w, &pr.b, kp, &mut z2);
        for (a, b) in z1.iter().zip(&z2) {
            assert!((a - b).abs() < 1e-5 * (1.0 + b.abs()), "{a} vs {b}");
        }
        let (mut g1, mut g2) = (vec![0.5f32; d * kp], vec![0.5f32; d * kp]);
        accumulate(&packed.data, d, &z1, kp, &mut g1);
        portable_accumulate(&packed.data, d, &z1, kp, &mut g2);
        for (a, b) in g1.iter().zip(&g2) {
            assert!((a - b).abs() < 1e-5 * (1.0 + b.abs()), "{a} vs {b}");
        }
    }

    /// The AVX2 loops agree with the portable ones on one panel (run wherever AVX2 and FMA are
    /// present, also on machines whose dispatch picks AVX-512), for class counts that use
    /// one, two and three registers per tile.
    #[cfg(target_arch = "x86_64")]
    #[test]
    fn avx2_and_portable_panel_products_agree() {
        if !avx2::available() {
            eprintln!("skipped: this machine has no AVX2 with FMA");
            return;
        }
        for &(d, k) in &[(29usize, 70usize), (5, 3), (40, 112), (17, 20)] {
            let kp = k.div_ceil(LANES) * LANES;
            let (x, _, p) = random_case(MR, d, k, 7);
            let packed = PackedRows::pack(&x.view(), None);
            let pr = Params::new(&p, d, k);
            let (mut z1, mut z2) = (vec![0f32; MR * kp], vec![0f32; MR * kp]);
            // SAFETY: the features were checked just above; shapes as the kernel expects.
            unsafe { avx2::scores(&packed.data, d, &pr.w, &pr.b, kp, &mut z1) };
            portable_scores(&packed.data, d, &pr.w, &pr.b, kp, &mut z2);
            for (a, b) in z1.iter().zip(&z2) {
                assert!(
                    (a - b).abs() < 1e-5 * (1.0 + b.abs()),
                    "d {d} k {k}: {a} vs {b}"
                );
            }
            let (mut g1, mut g2) = (vec![0.5f32; d * kp], vec![0.5f32; d * kp]);
            // SAFETY: as above.
            unsafe { avx2::accumulate(&packed.data, d, &z1, kp, &mut g1) };
            portable_accumulate(&packed.data, d, &z1, kp, &mut g2);
            for (a, b) in g1.iter().zip(&g2) {
                assert!(
                    (a - b).abs() < 1e-5 * (1.0 + b.abs()),
                    "d {d} k {k}: {a} vs {b}"
                );
            }
        }
    }

    /// Packing with standardisation gives the rows `(x - mean) / scale`, padded with zeros.
    #[test]
    fn packing_standardises_and_pads() {
        let x = Array2::from_shape_fn((10, 3), |(i, j)| (i * 3 + j) as f32);
        let (m, s) = (vec![1.0f32, 2.0, 3.0], vec![2.0f32, 4.0, 8.0]);
        let p = PackedRows::pack(&x.view(), Some((&m, &s)));
        assert_eq!(p.data.len(), 2 * MR * 3);
        // row 9, feature 2 sits in panel 1, slot 1
        assert_eq!(p.data[MR * 3 + 2 * MR + 1], (29.0 - 3.0) / 8.0);
        assert_eq!(p.data[2 * MR + 3], (11.0 - 3.0) / 8.0);
        assert_eq!(p.data[MR * 3 + 2 * MR + 2], 0.0);
        // a row subset, in the order given
        let q = PackedRows::pack_rows(&x.view(), Some(&[9, 0]), None);
        assert_eq!((q.nrows(), q.data.len()), (2, MR * 3));
        assert_eq!((q.data[0], q.data[1], q.data[2 * MR + 1]), (27.0, 0.0, 2.0));
    }
}
