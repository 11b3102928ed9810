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
    /// Cells holding fewer frames than asked for (all of their frames were taken).
    pub short_cells: usize,
    /// Frames taken per cell (after any cap on the total).
    pub per_cell: usize,
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
        // Fisher-Yates; cells are visited in key order, so the draw is reproducible
        for i in (1..frames.len()).rev() {
            let j = rng.random_range(0..=i);
            frames.swap(i, j);
        }
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
    let mut frames: Vec<usize> = cells
        .values()
        .flat_map(|c| c.iter().take(quota).copied())
        .collect();
    frames.sort_unstable();
    let short_cells = cells.values().filter(|c| c.len() < per_cell).count();
    Sample {
        frames,
        cells: cells.len(),
        short_cells,
        per_cell: quota,
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
    }
}
