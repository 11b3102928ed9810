//! Every subsample of the tool, seeded: [`stratified`] draws the map's frame sample (up to
//! `per_cell` frames from each speaker × phone cell, so every speaker and phone is represented
//! and big classes do not crowd out small ones; the same sample serves every layer);
//! [`by_class`] caps a probe's training or test items keeping each class's share (probe and
//! compare alike); [`uniform_sorted`] draws paired frames for CKA.

use std::collections::BTreeMap;

use rand::seq::index::sample;
use rand::seq::SliceRandom;
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;

use crate::capture::UNLABELLED;

/// A stratified sample of frames.
#[derive(Clone, Debug, PartialEq)]
pub struct Sample {
    /// Sampled frame indices, ascending.
    pub frames: Vec<usize>,
    /// Number of non-empty cells.
    pub cells: usize,
    /// Cells holding fewer frames than the quota taken per cell (all of their frames were
    /// taken).
    pub short_cells: usize,
    /// Frames taken per cell (after any cap on the total).
    pub per_cell: usize,
    /// Cells that gave frames: all non-empty ones, or, when the cap on the total is below
    /// the number of cells, that many cells drawn with the seed (one frame each).
    pub cells_used: usize,
}

/// Fisher–Yates shuffle of `v` in place, drawing from `rng` (the draws this module's samples
/// were defined with, so a seed keeps giving the same frames).
fn shuffle(v: &mut [usize], rng: &mut ChaCha8Rng) {
    for i in (1..v.len()).rev() {
        let j = rng.random_range(0..=i);
        v.swap(i, j);
    }
}

/// Draw up to `per_cell` frames from each cell defined by the codes in `strata` (a frame with
/// any unlabelled code is left out), at most `max_total` frames in all (the per-cell quota is
/// lowered to fit), shuffled with `seed`.
pub fn stratified(strata: &[&[u32]], per_cell: usize, max_total: usize, seed: u64) -> Sample {
    let n = strata.first().map(|s| s.len()).unwrap_or(0);
    let mut cells: BTreeMap<Vec<u32>, Vec<usize>> = BTreeMap::new();
    for f in 0..n {
        let key: Vec<u32> = strata.iter().map(|s| s[f]).collect();
        if key.contains(&UNLABELLED) {
            continue;
        }
        cells.entry(key).or_default().push(f);
    }
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    for frames in cells.values_mut() {
        // cells are visited in key order, so the draw is reproducible
        shuffle(frames, &mut rng);
    }
    let taken = |q: usize| cells.values().map(|c| c.len().min(q)).sum::<usize>();
    let mut quota = per_cell;
    if taken(quota) > max_total {
        // largest quota that fits (bisection: taken() is monotone in the quota)
        let (mut lo, mut hi) = (0usize, quota);
        while lo < hi {
            let mid = (lo + hi).div_ceil(2);
            if taken(mid) <= max_total {
                lo = mid;
            } else {
                hi = mid - 1;
            }
        }
        quota = lo;
    }
    let mut frames: Vec<usize> = if quota == 0 && per_cell > 0 && max_total > 0 {
        // Fewer frames allowed than there are cells: one frame from each of `max_total`
        // cells, the cells drawn with the same generator (in key order, then shuffled).
        let mut firsts: Vec<usize> = cells.values().map(|c| c[0]).collect();
        shuffle(&mut firsts, &mut rng);
        firsts.truncate(max_total);
        firsts
    } else {
        cells
            .values()
            .flat_map(|c| c.iter().take(quota).copied())
            .collect()
    };
    frames.sort_unstable();
    // cells that gave all their frames because they hold fewer than the quota
    let short_cells = cells.values().filter(|c| c.len() < quota).count();
    let cells_used = if quota == 0 {
        frames.len()
    } else {
        cells.len()
    };
    Sample {
        frames,
        cells: cells.len(),
        short_cells,
        per_cell: quota.max(usize::from(cells_used > 0)),
        cells_used,
    }
}

/// Stratified subsample of `train` down to about `max` items, same share of every class
/// (at least one item of each), seeded; returned sorted.
pub fn by_class(train: &[usize], label: &[u32], max: usize, seed: u64) -> Vec<usize> {
    if max == 0 || train.len() <= max {
        return train.to_vec();
    }
    let mut by_class: std::collections::BTreeMap<u32, Vec<usize>> = Default::default();
    for &i in train {
        by_class.entry(label[i]).or_default().push(i);
    }
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let share = max as f64 / train.len() as f64;
    let mut out = Vec::with_capacity(max + by_class.len());
    for (_, mut v) in by_class {
        let q = ((v.len() as f64 * share).round() as usize).clamp(1, v.len());
        v.shuffle(&mut rng);
        out.extend_from_slice(&v[..q]);
    }
    out.sort_unstable();
    out
}

/// Seeded uniform sample of `k` of `n` indices, sorted (all of them when k ≥ n).
pub fn uniform_sorted(n: usize, k: usize, seed: u64) -> Vec<usize> {
    if k >= n {
        return (0..n).collect();
    }
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let mut v = sample(&mut rng, n, k).into_vec();
    v.sort_unstable();
    v
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn sample_is_balanced_seeded_and_skips_unlabelled() {
        // speaker 0/1 × phone 0/1; cell (1, 1) has only 2 frames; frame 0 is unlabelled
        let spk: Vec<u32> = (0..40).map(|i| if i < 20 { 0 } else { 1 }).collect();
        let mut ph: Vec<u32> = (0..40).map(|i| (i % 2) as u32).collect();
        ph[0] = UNLABELLED;
        for (i, p) in ph.iter_mut().enumerate().skip(20) {
            if i % 2 == 1 && i > 24 {
                *p = 0;
            }
        }
        let s = stratified(&[&spk, &ph], 5, 1000, 7);
        assert_eq!(s.cells, 4);
        assert_eq!(s.short_cells, 1);
        assert_eq!(s.frames.len(), 5 + 5 + 5 + 2);
        assert!(!s.frames.contains(&0));
        assert_eq!(s, stratified(&[&spk, &ph], 5, 1000, 7));
        assert_ne!(s.frames, stratified(&[&spk, &ph], 5, 1000, 8).frames);
        let capped = stratified(&[&spk, &ph], 5, 10, 7);
        assert!(capped.frames.len() <= 10 && capped.per_cell == 2);
        assert_eq!(capped.cells_used, 4);
    }

    #[test]
    fn a_cap_below_the_number_of_cells_takes_one_frame_from_that_many_cells() {
        // 10 speakers × 8 phones, 3 frames per cell: 80 cells, cap 25
        let spk: Vec<u32> = (0..240).map(|i| (i / 24) as u32).collect();
        let ph: Vec<u32> = (0..240).map(|i| ((i / 3) % 8) as u32).collect();
        let s = stratified(&[&spk, &ph], 10, 25, 3);
        assert_eq!(
            (s.frames.len(), s.cells, s.cells_used, s.per_cell),
            (25, 80, 25, 1)
        );
        let mut keys: Vec<(u32, u32)> = s.frames.iter().map(|&f| (spk[f], ph[f])).collect();
        keys.sort_unstable();
        keys.dedup();
        assert_eq!(keys.len(), 25, "one frame per drawn cell");
        assert!(s.frames.windows(2).all(|w| w[0] < w[1]));
        assert_eq!(s, stratified(&[&spk, &ph], 10, 25, 3));
        assert_ne!(s.frames, stratified(&[&spk, &ph], 10, 25, 4).frames);
        // more than 3 speakers drawn: the cells are spread, not the first ones in key order
        let speakers: std::collections::BTreeSet<u32> = keys.iter().map(|k| k.0).collect();
        assert!(speakers.len() > 3, "{speakers:?}");
    }
}
