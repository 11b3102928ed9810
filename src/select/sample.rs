//! Stratified frame sample: frames grouped into cells by their labels (speaker × phone), up to
//! `per_cell` frames drawn from each cell by a seeded shuffle, so every speaker and phone is
//! represented and big classes do not crowd out small ones. The same sample serves every
//! layer, so panels and metrics are comparable.

use std::collections::BTreeMap;

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
