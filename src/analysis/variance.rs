//! Variance decompositions of a layer's frames by labels.

use std::collections::BTreeMap;

use ndarray::ArrayView2;

use crate::capture::UNLABELLED;

/// Share of the total variance that lies between the values of `other` (e.g. speakers)
/// inside each phone:
///
/// `Σ_p Σ_v n_{p,v} ‖mean_{p,v} − mean_p‖² / Σ_frames ‖x − mean‖²`
///
/// over the frames labelled in both `phone` and `other` ([`UNLABELLED`] marks a missing
/// label), accumulated in f64. 0 when, inside every phone, all values of `other` have the same
/// mean (differences in how often they say each phone do not count); with one phone it is the
/// between-class share of `other`. None with fewer than 2 such frames or no variance.
///
/// Panics when the label slices are not as long as `x` has rows.
pub fn within_phone_share(x: ArrayView2<f32>, phone: &[u32], other: &[u32]) -> Option<f64> {
    assert_eq!(phone.len(), x.nrows(), "one phone label per frame");
    assert_eq!(other.len(), x.nrows(), "one other label per frame");
    let d = x.ncols();
    let rows: Vec<usize> = (0..x.nrows())
        .filter(|&i| phone[i] != UNLABELLED && other[i] != UNLABELLED)
        .collect();
    if rows.len() < 2 {
        return None;
    }
    let mut mean = vec![0f64; d];
    // per phone and per (phone, value): frame count and feature sums
    let mut by_phone: BTreeMap<u32, (usize, Vec<f64>)> = BTreeMap::new();
    let mut by_cell: BTreeMap<(u32, u32), (usize, Vec<f64>)> = BTreeMap::new();
    for &i in &rows {
        let p = by_phone
            .entry(phone[i])
            .or_insert_with(|| (0, vec![0f64; d]));
        let c = by_cell
            .entry((phone[i], other[i]))
            .or_insert_with(|| (0, vec![0f64; d]));
        p.0 += 1;
        c.0 += 1;
        for (j, &v) in x.row(i).iter().enumerate() {
            let v = v as f64;
            mean[j] += v;
            p.1[j] += v;
            c.1[j] += v;
        }
    }
    let n = rows.len() as f64;
    mean.iter_mut().for_each(|m| *m /= n);
    let mut total = 0f64;
    for &i in &rows {
        for (j, &v) in x.row(i).iter().enumerate() {
            total += (v as f64 - mean[j]).powi(2);
        }
    }
    if total <= 0.0 {
        return None;
    }
    let mut between = 0f64;
    for (&(p, _), (nc, sc)) in &by_cell {
        let (np, sp) = &by_phone[&p];
        let mut sq = 0f64;
        for j in 0..d {
            sq += (sc[j] / *nc as f64 - sp[j] / *np as f64).powi(2);
        }
        between += *nc as f64 * sq;
    }
    Some(between / total)
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::Array2;

    fn noise(n: usize, d: usize, seed: u64) -> Array2<f32> {
        let mut s = seed;
        Array2::from_shape_fn((n, d), |_| {
            s = s
                .wrapping_mul(6364136223846793005)
                .wrapping_add(1442695040888963407);
            ((s >> 40) as f32 / (1u64 << 24) as f32) - 0.5
        })
    }

    #[test]
    fn zero_when_speakers_differ_only_in_phone_frequencies() {
        // x depends on the phone only; speaker 0 says phone 0 far more often than speaker 1,
        // which moves the speaker means apart but not the speaker means inside a phone.
        let centres = noise(3, 5, 1);
        let mut rows = Vec::new();
        let (mut ph, mut sp) = (Vec::new(), Vec::new());
        for (speaker, counts) in [(0u32, [9usize, 1, 2]), (1, [1, 6, 3])] {
            for (p, &c) in counts.iter().enumerate() {
                for _ in 0..c {
                    rows.push(centres.row(p).to_owned());
                    ph.push(p as u32);
                    sp.push(speaker);
                }
            }
        }
        let x = ndarray::stack(
            ndarray::Axis(0),
            &rows.iter().map(|r| r.view()).collect::<Vec<_>>(),
        )
        .unwrap();
        let share = within_phone_share(x.view(), &ph, &sp).unwrap();
        assert!(share.abs() < 1e-12, "{share}");
        // while the plain speaker share of the same frames is far from 0
        assert!(crate::analysis::purity::variance_ratio(&x.view(), &sp).unwrap() > 0.05);
    }

    #[test]
    fn one_phone_gives_the_speaker_between_class_share() {
        let x = noise(40, 4, 7);
        let sp: Vec<u32> = (0..40).map(|i| (i % 3) as u32).collect();
        let ph = vec![0u32; 40];
        let a = within_phone_share(x.view(), &ph, &sp).unwrap();
        let b = crate::analysis::purity::variance_ratio(&x.view(), &sp).unwrap();
        assert!((a - b).abs() < 1e-12, "{a} vs {b}");
    }

    #[test]
    fn unlabelled_frames_are_left_out() {
        let x = noise(10, 3, 3);
        let sp: Vec<u32> = (0..10).map(|i| (i % 2) as u32).collect();
        let ph = vec![0u32; 10];
        let full = within_phone_share(x.view(), &ph, &sp).unwrap();
        // an 11th frame far away, unlabelled in one column, changes nothing
        let mut x2 = x.clone().into_raw_vec_and_offset().0;
        x2.extend([100.0, -100.0, 50.0]);
        let x2 = Array2::from_shape_vec((11, 3), x2).unwrap();
        let (mut sp2, mut ph2) = (sp.clone(), ph.clone());
        sp2.push(0);
        ph2.push(UNLABELLED);
        assert_eq!(within_phone_share(x2.view(), &ph2, &sp2), Some(full));
        assert_eq!(
            within_phone_share(x.slice(ndarray::s![..1, ..]), &ph[..1], &sp[..1]),
            None
        );
    }
}
