//! Small statistical functions shared by the analyses: the log-gamma function (Lanczos
//! approximation), the regularised incomplete gamma function and the chi-square survival
//! function built on it (series and continued fraction as in Press et al., Numerical Recipes,
//! ch. 6), the exact two-sided binomial test at p = 1/2, McNemar's test for paired binary
//! outcomes (McNemar 1947; Agresti, Categorical Data Analysis, sec. 10.1), and a paired
//! cluster bootstrap of an accuracy difference (resampling whole clusters, e.g. speakers, so
//! the interval respects their correlation; Efron & Tibshirani 1993, percentile interval).

use rand::Rng;
use rand_chacha::rand_core::SeedableRng;
use rand_chacha::ChaCha8Rng;

pub use crate::records::compare::McNemarMethod;

/// Natural log of the gamma function for x > 0 (Lanczos, g = 7, 9 terms; ~1e-15 relative).
pub fn ln_gamma(x: f64) -> f64 {
    const G: f64 = 7.0;
    const C: [f64; 9] = [
        0.999_999_999_999_809_9,
        676.520_368_121_885_1,
        -1_259.139_216_722_402_8,
        771.323_428_777_653_1,
        -176.615_029_162_140_6,
        12.507_343_278_686_905,
        -0.138_571_095_265_720_12,
        9.984_369_578_019_572e-6,
        1.505_632_735_149_311_6e-7,
    ];
    if x < 0.5 {
        // Reflection keeps the approximation in its accurate range.
        let pi = std::f64::consts::PI;
        return (pi / (pi * x).sin()).ln() - ln_gamma(1.0 - x);
    }
    let x = x - 1.0;
    let mut a = C[0];
    let t = x + G + 0.5;
    for (i, &c) in C.iter().enumerate().skip(1) {
        a += c / (x + i as f64);
    }
    0.5 * (2.0 * std::f64::consts::PI).ln() + (x + 0.5) * t.ln() - t + a.ln()
}

/// Regularised upper incomplete gamma function Q(a, x) = Γ(a, x) / Γ(a), for a > 0, x ≥ 0.
pub fn gamma_q(a: f64, x: f64) -> f64 {
    if a.is_nan() || a <= 0.0 || x.is_nan() {
        return f64::NAN;
    }
    if x <= 0.0 {
        return 1.0;
    }
    if x.is_infinite() {
        return 0.0;
    }
    let log_pref = a * x.ln() - x - ln_gamma(a);
    if x < a + 1.0 {
        // Series for P(a, x), then Q = 1 - P.
        let mut ap = a;
        let mut sum = 1.0 / a;
        let mut del = sum;
        for _ in 0..10_000 {
            ap += 1.0;
            del *= x / ap;
            sum += del;
            if del.abs() < sum.abs() * 1e-17 {
                break;
            }
        }
        1.0 - sum * log_pref.exp()
    } else {
        // Continued fraction for Q(a, x) (modified Lentz).
        let tiny = 1e-300;
        let mut b = x + 1.0 - a;
        let mut c = 1.0 / tiny;
        let mut d = 1.0 / b;
        let mut h = d;
        for i in 1..10_000 {
            let an = -(i as f64) * (i as f64 - a);
            b += 2.0;
            d = an * d + b;
            if d.abs() < tiny {
                d = tiny;
            }
            c = b + an / c;
            if c.abs() < tiny {
                c = tiny;
            }
            d = 1.0 / d;
            let del = d * c;
            h *= del;
            if (del - 1.0).abs() < 1e-16 {
                break;
            }
        }
        log_pref.exp() * h
    }
}

/// Survival function of the chi-square distribution with `df` degrees of freedom: P(X > x).
pub fn chi2_sf(x: f64, df: f64) -> f64 {
    if x <= 0.0 {
        return 1.0;
    }
    gamma_q(df / 2.0, x / 2.0)
}

/// Two-sided exact binomial test of k successes in n trials against p = 1/2. The null
/// distribution is symmetric, so this is min(1, 2 · P(X ≤ min(k, n − k))), which equals the
/// "sum of outcomes no more likely than the observed one" definition.
pub fn binom_test_half(k: u64, n: u64) -> f64 {
    if n == 0 {
        return 1.0;
    }
    let k = k.min(n);
    let k = k.min(n - k);
    // Terms ln C(n, i) − n ln 2 for i = 0..=k grow with i (i ≤ n/2), so sum them relative to
    // the last, largest term to avoid underflow for large n.
    let mut ln_terms = Vec::with_capacity(k as usize + 1);
    let mut ln_t = -(n as f64) * std::f64::consts::LN_2;
    ln_terms.push(ln_t);
    for i in 1..=k {
        ln_t += ((n - i + 1) as f64).ln() - (i as f64).ln();
        ln_terms.push(ln_t);
    }
    let top = ln_t;
    let s: f64 = ln_terms.iter().rev().map(|&t| (t - top).exp()).sum();
    (2.0 * (top.exp() * s)).min(1.0)
}

/// The result of McNemar's test.
#[derive(Clone, Copy, Debug, PartialEq, serde::Serialize)]
pub struct McNemar {
    /// Pairs where only the first classifier is right.
    pub b: u64,
    /// Pairs where only the second classifier is right.
    pub c: u64,
    /// (b − c)² / (b + c), the uncorrected chi-square statistic (0 when b + c = 0).
    pub statistic: f64,
    /// Two-sided p-value.
    pub p: f64,
    /// Which test gave `p`.
    pub method: McNemarMethod,
}

/// Below this many discordant pairs the exact binomial test is used (common practice: the
/// chi-square approximation is poor for small b + c; Agresti suggests the exact test there).
pub const MCNEMAR_EXACT_BELOW: u64 = 25;

/// McNemar's test from the discordant counts b and c: the exact binomial test when
/// b + c < [`MCNEMAR_EXACT_BELOW`], otherwise chi-square with 1 df without continuity
/// correction (Agresti's form).
pub fn mcnemar(b: u64, c: u64) -> McNemar {
    let n = b + c;
    let statistic = if n == 0 {
        0.0
    } else {
        (b as f64 - c as f64).powi(2) / n as f64
    };
    if n < MCNEMAR_EXACT_BELOW {
        McNemar {
            b,
            c,
            statistic,
            p: binom_test_half(b.min(c), n),
            method: McNemarMethod::Exact,
        }
    } else {
        McNemar {
            b,
            c,
            statistic,
            p: chi2_sf(statistic, 1.0),
            method: McNemarMethod::ChiSquare,
        }
    }
}

/// McNemar's test on paired correctness flags (`a[i]`, `b[i]`: was item i right?).
pub fn mcnemar_paired(a: &[bool], b: &[bool]) -> McNemar {
    let mut only_a = 0u64;
    let mut only_b = 0u64;
    for (&x, &y) in a.iter().zip(b) {
        match (x, y) {
            (true, false) => only_a += 1,
            (false, true) => only_b += 1,
            _ => {}
        }
    }
    mcnemar(only_a, only_b)
}

/// Quantile with linear interpolation between order statistics (numpy's default rule).
pub fn quantile_sorted(sorted: &[f64], q: f64) -> f64 {
    if sorted.is_empty() {
        return f64::NAN;
    }
    let pos = q.clamp(0.0, 1.0) * (sorted.len() - 1) as f64;
    let lo = pos.floor() as usize;
    let hi = pos.ceil() as usize;
    sorted[lo] + (sorted[hi] - sorted[lo]) * (pos - lo as f64)
}

/// Percentile intervals from a paired cluster bootstrap of two classifiers' correctness.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct PairedIntervals {
    /// Interval of accuracy(a).
    pub a: (f64, f64),
    /// Interval of accuracy(b).
    pub b: (f64, f64),
    /// Interval of accuracy(b) − accuracy(a).
    pub diff: (f64, f64),
}

/// Paired cluster bootstrap: whole clusters (`clusters[i]` for item i, e.g. the speaker) are
/// drawn with replacement `n_boot` times and both accuracies are recomputed on the same draw.
/// Returns percentile intervals at `level` (e.g. 0.95) for each accuracy and their difference.
pub fn paired_cluster_bootstrap(
    correct_a: &[bool],
    correct_b: &[bool],
    clusters: &[u32],
    n_boot: usize,
    level: f64,
    seed: u64,
) -> PairedIntervals {
    let nan = (f64::NAN, f64::NAN);
    let n = correct_a.len().min(correct_b.len()).min(clusters.len());
    if n == 0 || n_boot == 0 {
        return PairedIntervals {
            a: nan,
            b: nan,
            diff: nan,
        };
    }
    // Per-cluster totals: (items, right in a, right in b), clusters in first-seen order.
    let mut index = std::collections::HashMap::new();
    let mut sums: Vec<[u64; 3]> = Vec::new();
    for i in 0..n {
        let k = *index.entry(clusters[i]).or_insert_with(|| {
            sums.push([0; 3]);
            sums.len() - 1
        });
        sums[k][0] += 1;
        sums[k][1] += correct_a[i] as u64;
        sums[k][2] += correct_b[i] as u64;
    }
    let m = sums.len();
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let (mut da, mut db, mut dd) = (
        Vec::with_capacity(n_boot),
        Vec::with_capacity(n_boot),
        Vec::with_capacity(n_boot),
    );
    for _ in 0..n_boot {
        let (mut tot, mut ra, mut rb) = (0u64, 0u64, 0u64);
        for _ in 0..m {
            let s = &sums[rng.random_range(0..m)];
            tot += s[0];
            ra += s[1];
            rb += s[2];
        }
        let t = tot.max(1) as f64;
        da.push(ra as f64 / t);
        db.push(rb as f64 / t);
        dd.push((rb as f64 - ra as f64) / t);
    }
    let alpha = (1.0 - level) / 2.0;
    let iv = |mut v: Vec<f64>| {
        v.sort_by(f64::total_cmp);
        (quantile_sorted(&v, alpha), quantile_sorted(&v, 1.0 - alpha))
    };
    PairedIntervals {
        a: iv(da),
        b: iv(db),
        diff: iv(dd),
    }
}

/// Where a per-layer measure falls half way: the peak (first layer of the maximum), the floor
/// (lowest value at or after the peak), the level midway between them, and the first layer
/// after the peak whose value is below that level (None when it never falls). The one rule
/// behind "speaker falls below half its range" in probe, map and the report (common
/// practice for a readable marker, not a test).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct HalfFall {
    /// (layer, value) of the maximum.
    pub peak: (usize, f64),
    /// (layer, value) of the minimum at or after the peak.
    pub floor: (usize, f64),
    /// Midway between peak and floor.
    pub level: f64,
    /// First layer after the peak with a value below `level`.
    pub layer: Option<usize>,
}

/// [`HalfFall`] of `(layer, value)` points in layer order; non-finite values are skipped.
/// None with fewer than two finite points.
pub fn half_fall(points: &[(usize, f64)]) -> Option<HalfFall> {
    let pts: Vec<(usize, f64)> = points.iter().copied().filter(|p| p.1.is_finite()).collect();
    if pts.len() < 2 {
        return None;
    }
    let mut peak_i = 0;
    for (i, p) in pts.iter().enumerate() {
        if p.1 > pts[peak_i].1 {
            peak_i = i;
        }
    }
    let mut floor = pts[peak_i];
    for &p in &pts[peak_i..] {
        if p.1 < floor.1 {
            floor = p;
        }
    }
    let peak = pts[peak_i];
    let level = peak.1 - (peak.1 - floor.1) / 2.0;
    let layer = pts[peak_i + 1..].iter().find(|p| p.1 < level).map(|p| p.0);
    Some(HalfFall {
        peak,
        floor,
        level,
        layer,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    fn rel(a: f64, b: f64) -> f64 {
        (a - b).abs() / b.abs().max(1e-300)
    }

    #[test]
    fn ln_gamma_matches_factorials() {
        // Γ(n + 1) = n!; Γ(1/2) = √π (textbook identities).
        assert!(rel(ln_gamma(11.0), (3_628_800f64).ln()) < 1e-13);
        assert!(rel(ln_gamma(0.5), std::f64::consts::PI.sqrt().ln()) < 1e-12);
        assert!(ln_gamma(1.0).abs() < 1e-14);
    }

    #[test]
    fn chi_square_one_df_critical_value() {
        // 3.841459 is the 95% point of chi-square with 1 df (statistical tables).
        assert!((chi2_sf(3.841_458_820_694_124, 1.0) - 0.05).abs() < 1e-12);
        // Chi-square with 2 df has survival exp(-x/2) exactly.
        for x in [0.1, 1.0, 5.0, 40.0] {
            assert!(rel(chi2_sf(x, 2.0), (-x / 2.0f64).exp()) < 1e-12);
        }
    }

    #[test]
    fn mcnemar_textbook_approval_example() {
        // Agresti, Categorical Data Analysis (from memory): 1600 people rated approval twice;
        // 794 approve both times, 150 approve then disapprove, 86 disapprove then approve,
        // 570 disapprove both times. Uncorrected statistic (150 − 86)² / 236 = 17.36, p < 0.001.
        let t = mcnemar(150, 86);
        assert_eq!(t.method, McNemarMethod::ChiSquare);
        assert!((t.statistic - 17.355_932_203_389_83).abs() < 1e-9);
        assert!(t.p < 0.001 && t.p > 1e-5, "p = {}", t.p);
    }

    #[test]
    fn mcnemar_uses_exact_test_for_few_discordant_pairs() {
        let t = mcnemar(2, 10);
        assert_eq!(t.method, McNemarMethod::Exact);
        assert_eq!(mcnemar(0, 0).p, 1.0);
        // Symmetric in the roles of b and c.
        assert_eq!(mcnemar(10, 2).p, t.p);
    }

    #[test]
    fn paired_flags_count_discordant_pairs() {
        let a = [true, true, false, false, true];
        let b = [true, false, true, true, false];
        let t = mcnemar_paired(&a, &b);
        assert_eq!((t.b, t.c), (2, 2));
        assert_eq!(t.p, 1.0);
    }

    #[test]
    fn bootstrap_interval_covers_the_difference_and_is_seeded() {
        let n = 400;
        let a: Vec<bool> = (0..n).map(|i| i % 3 != 0).collect();
        let b: Vec<bool> = (0..n).map(|i| i % 5 != 0).collect();
        let cl: Vec<u32> = (0..n).map(|i| (i / 20) as u32).collect();
        let diff = b.iter().filter(|&&x| x).count() as f64 / n as f64
            - a.iter().filter(|&&x| x).count() as f64 / n as f64;
        let r = paired_cluster_bootstrap(&a, &b, &cl, 1000, 0.95, 3);
        let (lo, hi) = r.diff;
        assert!(lo <= diff && diff <= hi, "{lo} {diff} {hi}");
        assert!(hi - lo < 0.2);
        assert!(r.a.0 < 2.0 / 3.0 && 2.0 / 3.0 < r.a.1);
        // Every cluster of 20 holds exactly 16 right answers in b: a zero-width interval.
        assert_eq!(r.b, (0.8, 0.8));
        assert_eq!(r, paired_cluster_bootstrap(&a, &b, &cl, 1000, 0.95, 3));
        // Identical classifiers: a zero-width interval at 0.
        assert_eq!(
            paired_cluster_bootstrap(&a, &a, &cl, 200, 0.95, 1).diff,
            (0.0, 0.0)
        );
    }
    #[test]
    fn p_values_match_scipy_fixtures() {
        // tests/reference/make_compare.py: scipy.stats.binomtest(b, b + c, 0.5) and
        // scipy.stats.chi2.sf, to 1e-9 relative.
        let path = std::path::Path::new(env!("CARGO_MANIFEST_DIR"))
            .join("tests/reference/compare/expected.json");
        let e: serde_json::Value =
            serde_json::from_str(&std::fs::read_to_string(path).unwrap()).unwrap();
        for row in e["binomtest"].as_array().unwrap() {
            let (b, c) = (row["b"].as_u64().unwrap(), row["c"].as_u64().unwrap());
            let want = row["p"].as_f64().unwrap();
            let got = binom_test_half(b, b + c);
            assert!(rel(got, want) < 1e-9, "b={b} c={c}: {got} vs {want}");
        }
        for row in e["chi2_sf"].as_array().unwrap() {
            let (x, df) = (row["x"].as_f64().unwrap(), row["df"].as_f64().unwrap());
            let want = row["sf"].as_f64().unwrap();
            let got = chi2_sf(x, df);
            assert!(rel(got, want) < 1e-9, "x={x} df={df}: {got} vs {want}");
        }
    }

    #[test]
    fn half_fall_finds_the_first_layer_below_the_midpoint_after_the_peak() {
        // Worked by hand: peak 0.9 at layer 1, floor 0.3 at layer 4, level 0.6; layer 3
        // (0.5) is the first after the peak below it. Layer 0 (0.2) is before the peak and
        // does not set the floor.
        let pts = [(0, 0.2), (1, 0.9), (2, 0.7), (3, 0.5), (4, 0.3)];
        let h = half_fall(&pts).unwrap();
        assert_eq!(h.peak, (1, 0.9));
        assert_eq!(h.floor, (4, 0.3));
        assert!((h.level - 0.6).abs() < 1e-12);
        assert_eq!(h.layer, Some(3));
        let flat = [(0, 0.5), (1, 0.5)];
        assert_eq!(half_fall(&flat).unwrap().layer, None);
    }
}
