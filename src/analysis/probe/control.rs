//! Control task in the spirit of Hewitt & Liang (2019), "Designing and Interpreting Probes
//! with Control Tasks": every labelled segment (a run of equal labels within an utterance;
//! for the speaker task, every utterance) gets a random label drawn from the training class
//! frequencies, the same probe is trained on it, and selectivity = accuracy − control accuracy
//! says how much of the probe's accuracy comes from the representation rather than from the
//! probe's own capacity to memorise.

use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;

/// One random label per control group, drawn from `class_freq` (counts or weights), returned
/// per item through `group` (the control group of each item, e.g. its segment id).
pub fn control_labels(group: &[u32], class_freq: &[f64], seed: u64) -> Vec<u32> {
    let n_groups = group.iter().map(|&g| g as usize + 1).max().unwrap_or(0);
    let total: f64 = class_freq.iter().sum();
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let labels: Vec<u32> = (0..n_groups)
        .map(|_| {
            let mut u = rng.random::<f64>() * total;
            for (c, &w) in class_freq.iter().enumerate() {
                if u < w {
                    return c as u32;
                }
                u -= w;
            }
            class_freq.iter().rposition(|&w| w > 0.0).unwrap_or(0) as u32
        })
        .collect();
    group.iter().map(|&g| labels[g as usize]).collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn control_labels_follow_frequencies_and_are_constant_per_group() {
        let group: Vec<u32> = (0..20000u32).map(|i| i / 2).collect();
        let lab = control_labels(&group, &[3.0, 1.0, 0.0], 1);
        for pair in lab.chunks(2) {
            assert_eq!(pair[0], pair[1]);
        }
        let share = lab.iter().filter(|&&c| c == 0).count() as f64 / lab.len() as f64;
        assert!((share - 0.75).abs() < 0.02, "{share}");
        assert!(lab.iter().all(|&c| c != 2));
    }
}
