//! Classification scores with scikit-learn's definitions: accuracy; macro-F1 over the labels
//! present in truth or prediction (F1 of a label with no true and no predicted item never
//! arises; a label with zero precision and recall scores 0); balanced accuracy = mean recall
//! over the labels present in the truth (Brodersen et al. 2010); the majority baseline (the
//! most frequent training class, scored on the test side); confusion matrix.

/// Fraction of items with `pred == truth` (0 for no items).
pub fn accuracy(truth: &[u32], pred: &[u32]) -> f64 {
    if truth.is_empty() {
        return 0.0;
    }
    truth.iter().zip(pred).filter(|(a, b)| a == b).count() as f64 / truth.len() as f64
}

/// Confusion counts: `m[true][pred]`, `k × k`.
pub fn confusion(truth: &[u32], pred: &[u32], k: usize) -> Vec<Vec<u64>> {
    let mut m = vec![vec![0u64; k]; k];
    for (&t, &p) in truth.iter().zip(pred) {
        if (t as usize) < k && (p as usize) < k {
            m[t as usize][p as usize] += 1;
        }
    }
    m
}

/// Macro-averaged F1 over labels that occur in truth or prediction.
pub fn macro_f1(truth: &[u32], pred: &[u32], k: usize) -> f64 {
    let m = confusion(truth, pred, k);
    let mut sum = 0.0;
    let mut count = 0usize;
    for c in 0..k {
        let tp = m[c][c] as f64;
        let support: u64 = m[c].iter().sum();
        let predicted: u64 = m.iter().map(|r| r[c]).sum();
        if support == 0 && predicted == 0 {
            continue;
        }
        count += 1;
        let denom = support as f64 + predicted as f64;
        sum += if denom > 0.0 { 2.0 * tp / denom } else { 0.0 };
    }
    if count == 0 {
        0.0
    } else {
        sum / count as f64
    }
}

/// Recall of each class (None where the class has no true item).
pub fn per_class_recall(truth: &[u32], pred: &[u32], k: usize) -> Vec<Option<f64>> {
    let m = confusion(truth, pred, k);
    (0..k)
        .map(|c| {
            let support: u64 = m[c].iter().sum();
            (support > 0).then(|| m[c][c] as f64 / support as f64)
        })
        .collect()
}

/// Mean recall over classes present in the truth.
pub fn balanced_accuracy(truth: &[u32], pred: &[u32], k: usize) -> f64 {
    let r: Vec<f64> = per_class_recall(truth, pred, k)
        .into_iter()
        .flatten()
        .collect();
    if r.is_empty() {
        0.0
    } else {
        r.iter().sum::<f64>() / r.len() as f64
    }
}

/// Most frequent class of `train` (lowest code on ties).
pub fn majority_class(train: &[u32], k: usize) -> u32 {
    let mut counts = vec![0usize; k];
    for &t in train {
        if (t as usize) < k {
            counts[t as usize] += 1;
        }
    }
    let mut best = 0usize;
    for (c, &n) in counts.iter().enumerate() {
        if n > counts[best] {
            best = c;
        }
    }
    best as u32
}

/// Accuracy on `test` of always predicting the majority class of `train`.
pub fn majority_baseline(train: &[u32], test: &[u32], k: usize) -> f64 {
    let m = majority_class(train, k);
    if test.is_empty() {
        return 0.0;
    }
    test.iter().filter(|&&t| t == m).count() as f64 / test.len() as f64
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn worked_example() {
        // scikit-learn's f1_score docstring example: y_true [0,1,2,0,1,2], y_pred [0,2,1,0,0,1]
        // gives macro F1 0.26666666666666666 (sklearn.metrics.f1_score documentation).
        let t = [0, 1, 2, 0, 1, 2];
        let p = [0, 2, 1, 0, 0, 1];
        assert!((macro_f1(&t, &p, 3) - 0.26666666666666666).abs() < 1e-12);
        // balanced_accuracy_score docstring example: [0,1,0,0,1,0] vs [0,1,0,0,0,1] -> 0.625.
        let t = [0, 1, 0, 0, 1, 0];
        let p = [0, 1, 0, 0, 0, 1];
        assert!((balanced_accuracy(&t, &p, 2) - 0.625).abs() < 1e-12);
    }
}
