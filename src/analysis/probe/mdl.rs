//! MDL probing with the online code (Voita & Titov 2020, "Information-Theoretic Probing with
//! Minimum Description Length"): the description length of a task's labels given the
//! representation, as a sender would transmit them block by block.
//!
//! The training items, in a seeded order, are cut into blocks ending at 0.1, 0.2, 0.4, 0.8,
//! 1.6, 3.2, 6.25, 12.5, 25, 50 and 100 % of them ([`BLOCK_PERCENTS`], their schedule, from
//! memory; an end is ⌈share · n⌉ and repeated ends are merged). The first block is sent with
//! the uniform code, log2(K) bits per item. Every later block is sent with the probe (softmax
//! regression, standardised on the earlier blocks, penalty α per item as in the probe stage)
//! trained on all earlier blocks: Σ −log2 q(y|x) over its items, each fit warm-started from the
//! previous block's. A class the earlier blocks never showed has probability 0 under that
//! probe, so q mixes it with the uniform code: q = (1 − ε)·p + ε/K, ε = [`FLOOR`] (our choice;
//! it bounds an unseen class at log2(K/ε) bits and changes a well-predicted item's cost by
//! under 0.0015 bits). Compression = uniform code length / online code length: near 1 when the
//! representation says nothing about the labels, above 1 when it does.

use ndarray::{ArrayView2, Axis};

use super::lbfgs::LbfgsOptions;
use super::softmax::{self, FitSettings, Standardizer};

/// Block ends as percentages of the items (Voita & Titov 2020, from memory).
pub const BLOCK_PERCENTS: [f64; 11] = [0.1, 0.2, 0.4, 0.8, 1.6, 3.2, 6.25, 12.5, 25.0, 50.0, 100.0];

/// Fewest items the online code is computed on: below this the first blocks hold one item
/// each and the code says little (our choice).
pub const MIN_ITEMS: usize = 100;

/// Weight of the uniform code mixed into every block's probabilities (our choice).
pub const FLOOR: f64 = 1e-3;

/// The online code of one task on one representation.
#[derive(Clone, Debug)]
pub struct OnlineCode {
    /// Items transmitted.
    pub items: usize,
    /// End of each block (items sent so far), increasing, the last equal to `items`.
    pub block_ends: Vec<usize>,
    /// Bits spent on each block (the first with the uniform code).
    pub block_bits: Vec<f64>,
    /// items × log2(K).
    pub uniform_bits: f64,
    /// Σ block_bits.
    pub online_bits: f64,
    /// uniform_bits / online_bits.
    pub compression: f64,
}

/// Block ends for `n` items: ⌈p · n / 100⌉ for each p of [`BLOCK_PERCENTS`], repeats merged.
pub fn block_ends(n: usize) -> Vec<usize> {
    let mut ends: Vec<usize> = BLOCK_PERCENTS
        .iter()
        // The 1e-9 keeps an exact product (0.1 % of 1000) from rounding up past itself.
        .map(|p| ((p * n as f64 / 100.0 - 1e-9).ceil() as usize).clamp(1, n))
        .collect();
    ends.dedup();
    ends
}

/// Why the online code cannot be computed on `n` items, if it cannot.
pub fn skip_reason(n: usize) -> Option<String> {
    (n < MIN_ITEMS)
        .then(|| format!("only {n} training items; the block schedule needs at least {MIN_ITEMS}"))
}

/// The previous block's fit, for warm starts: the classes it knew and its parameters.
struct Warm {
    present: Vec<u32>,
    params: Vec<f64>,
}

impl Warm {
    /// The parameters laid out for the classes `present` (W row-major over d features, then
    /// b): classes known before keep their values, new ones start at 0.
    fn start_for(&self, present: &[u32], d: usize) -> Vec<f64> {
        let (ko, kn) = (self.present.len(), present.len());
        let mut p = vec![0.0; d * kn + kn];
        for (j, c) in present.iter().enumerate() {
            if let Ok(jo) = self.present.binary_search(c) {
                for i in 0..d {
                    p[i * kn + j] = self.params[i * ko + jo];
                }
                p[d * kn + j] = self.params[d * ko + jo];
            }
        }
        p
    }
}

/// Class probabilities (rows × k) of `send` rows from a probe trained on `train` rows, and
/// the fit for the next warm start (None when training holds one class).
fn block_probabilities(
    x: &ArrayView2<f32>,
    y: &[u32],
    k: usize,
    (train, send): (&[usize], &[usize]),
    alpha: f64,
    lb: &LbfgsOptions,
    warm: Option<&Warm>,
) -> (Vec<Vec<f64>>, Option<Warm>) {
    let mut present: Vec<u32> = train.iter().map(|&i| y[i]).collect();
    present.sort_unstable();
    present.dedup();
    if present.len() < 2 {
        let only = present.first().copied().unwrap_or(0) as usize;
        let row: Vec<f64> = (0..k).map(|c| if c == only { 1.0 } else { 0.0 }).collect();
        return (vec![row; send.len()], None);
    }
    let mut xs = x.select(Axis(0), train);
    let std = Standardizer::fit(&xs.view());
    std.apply(&mut xs);
    let mut xt = x.select(Axis(0), send);
    std.apply(&mut xt);
    let ytr: Vec<u32> = train
        .iter()
        .map(|&i| present.binary_search(&y[i]).unwrap_or(0) as u32)
        .collect();
    let init = warm.map(|w| w.start_for(&present, x.ncols()));
    let settings = FitSettings {
        c: 1.0 / (alpha * train.len() as f64),
        lbfgs: lb.clone(),
    };
    let m = softmax::fit(&xs.view(), &ytr, present.len(), &settings, init.as_deref());
    let p = m.predict_proba(&xt.view());
    let rows = p
        .outer_iter()
        .map(|r| {
            let mut full = vec![0.0; k];
            for (j, &c) in present.iter().enumerate() {
                full[c as usize] = r[j] as f64;
            }
            full
        })
        .collect();
    (
        rows,
        Some(Warm {
            present,
            params: m.params,
        }),
    )
}

/// The online code of labels `y` (codes in `0..k`) given rows `x`, items sent in `order`
/// (indices into `x`), each block's probe fitted with penalty `alpha` per item.
pub fn online_code(
    x: ArrayView2<f32>,
    y: &[u32],
    k: usize,
    order: &[usize],
    alpha: f64,
    lb: &LbfgsOptions,
) -> Result<OnlineCode, String> {
    if y.len() != x.nrows() || order.iter().any(|&i| i >= y.len()) {
        return Err(format!(
            "online code: {} rows, {} labels, order reaching {}",
            x.nrows(),
            y.len(),
            order.iter().max().map_or(0, |m| m + 1)
        ));
    }
    if k < 2 || y.iter().any(|&c| c as usize >= k) || !(alpha > 0.0 && alpha.is_finite()) {
        return Err(format!(
            "online code: expected k ≥ 2 classes covering the labels and a positive penalty, found k = {k}, α = {alpha}"
        ));
    }
    let n = order.len();
    let ends = block_ends(n);
    let log2k = (k as f64).log2();
    let mut bits = vec![ends.first().copied().unwrap_or(0) as f64 * log2k];
    let mut warm: Option<Warm> = None;
    for w in ends.windows(2) {
        let (train, send) = (&order[..w[0]], &order[w[0]..w[1]]);
        let (probs, next) = block_probabilities(&x, y, k, (train, send), alpha, lb, warm.as_ref());
        let b: f64 = send
            .iter()
            .zip(&probs)
            .map(|(&i, p)| -((1.0 - FLOOR) * p[y[i] as usize] + FLOOR / k as f64).log2())
            .sum();
        bits.push(b);
        if next.is_some() {
            warm = next;
        }
    }
    let online: f64 = bits.iter().sum();
    let uniform = n as f64 * log2k;
    Ok(OnlineCode {
        items: n,
        block_ends: ends,
        block_bits: bits,
        uniform_bits: uniform,
        online_bits: online,
        compression: uniform / online,
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::Array2;
    use rand::{Rng, SeedableRng};
    use rand_chacha::ChaCha8Rng;

    fn data(signal: f32, n: usize, seed: u64) -> (Array2<f32>, Vec<u32>) {
        let mut rng = ChaCha8Rng::seed_from_u64(seed);
        let y: Vec<u32> = (0..n).map(|i| (i % 4) as u32).collect();
        let x = Array2::from_shape_fn((n, 6), |(i, j)| {
            let c = if j == y[i] as usize { signal } else { 0.0 };
            c + rng.random_range(-1.0f32..1.0)
        });
        (x, y)
    }

    #[test]
    fn block_ends_follow_the_schedule() {
        assert_eq!(
            block_ends(1000),
            vec![1, 2, 4, 8, 16, 32, 63, 125, 250, 500, 1000]
        );
        assert_eq!(block_ends(100), vec![1, 2, 4, 7, 13, 25, 50, 100]);
        assert!(skip_reason(99).is_some() && skip_reason(100).is_none());
    }

    #[test]
    fn noise_compresses_near_one_and_signal_well_above() {
        // Known answer: labels independent of the rows cannot be sent in fewer bits than the
        // uniform code (up to the cost of learning the class shares), so compression ≈ 1;
        // rows that carry the class give compression clearly above 1.
        let lb = LbfgsOptions::default();
        let order: Vec<usize> = (0..800).collect();
        let (xn, y) = data(0.0, 800, 1);
        let noise = online_code(xn.view(), &y, 4, &order, 1e-2, &lb).unwrap();
        assert!(
            (0.9..1.05).contains(&noise.compression),
            "{}",
            noise.compression
        );
        let (xs, y) = data(3.0, 800, 2);
        let signal = online_code(xs.view(), &y, 4, &order, 1e-2, &lb).unwrap();
        assert!(signal.compression > 2.0, "{}", signal.compression);
        for c in [&noise, &signal] {
            let sum: f64 = c.block_bits.iter().sum();
            assert!((sum - c.online_bits).abs() < 1e-9 * sum);
            assert_eq!(c.block_bits.len(), c.block_ends.len());
            assert!((c.uniform_bits - 800.0 * 2.0).abs() < 1e-9);
            // The first block goes with the uniform code.
            assert!((c.block_bits[0] - c.block_ends[0] as f64 * 2.0).abs() < 1e-12);
        }
    }

    #[test]
    fn bad_input_is_refused() {
        let lb = LbfgsOptions::default();
        let (x, y) = data(1.0, 120, 3);
        assert!(online_code(x.view(), &y, 4, &[0, 500], 1e-2, &lb).is_err());
        assert!(online_code(x.view(), &y, 1, &[0, 1], 1e-2, &lb).is_err());
        assert!(online_code(x.view(), &y, 4, &[0, 1], 0.0, &lb).is_err());
    }
}
