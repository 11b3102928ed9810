//! The regression probe's closed-form ridge against scikit-learn 1.9.1 and scipy 1.17.1
//! (fixtures written by `tests/reference/make_ridge.py` on scikit-learn's diabetes dataset),
//! and against a synthetic case whose R² is known in theory.

use std::path::PathBuf;

use ndarray::{Array1, Array2, Axis};
use ndarray_npy::read_npy;
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use voxstrata::analysis::probe::ridge::{self, Gram};

fn dir() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("tests/reference/ridge")
}

fn expected() -> serde_json::Value {
    serde_json::from_str(&std::fs::read_to_string(dir().join("expected.json")).unwrap()).unwrap()
}

fn diabetes() -> (Array2<f32>, Vec<f64>) {
    let x: Array2<f32> = read_npy(dir().join("diabetes_x.npy")).unwrap();
    let y: Array1<f64> = read_npy(dir().join("diabetes_y.npy")).unwrap();
    (x, y.to_vec())
}

fn index(v: &serde_json::Value) -> Vec<usize> {
    v.as_array()
        .unwrap()
        .iter()
        .map(|i| i.as_u64().unwrap() as usize)
        .collect()
}

fn numbers(v: &serde_json::Value) -> Vec<f64> {
    v.as_array()
        .unwrap()
        .iter()
        .map(|i| i.as_f64().unwrap())
        .collect()
}

#[test]
fn coefficients_match_scikit_learn_ridge_on_diabetes() {
    // Source: sklearn.linear_model.Ridge(alpha, fit_intercept=True, solver="cholesky").
    let (x, y) = diabetes();
    let want = expected();
    for (alpha, w) in want["fixed"].as_object().unwrap() {
        let alpha: f64 = alpha.parse().unwrap();
        let fit = Gram::new(&x.view(), &y).solve(alpha).unwrap();
        let coef = numbers(&w["coef"]);
        let scale = coef.iter().fold(1.0f64, |m, c| m.max(c.abs()));
        for (g, e) in fit.coef.iter().zip(&coef) {
            assert!(
                (g - e).abs() <= 1e-6 * scale,
                "alpha {alpha}: coefficient {g} against scikit-learn's {e}"
            );
        }
        let b = w["intercept"].as_f64().unwrap();
        assert!(
            (fit.intercept - b).abs() <= 1e-6 * b.abs(),
            "{} vs {b}",
            fit.intercept
        );
    }
}

#[test]
fn test_r2_and_pearson_match_scikit_learn_and_scipy() {
    // Sources: sklearn.metrics.r2_score; scipy.stats.pearsonr.
    let (x, y) = diabetes();
    let want = expected();
    let tr: Array1<i64> = read_npy(dir().join("diabetes_train.npy")).unwrap();
    let te: Array1<i64> = read_npy(dir().join("diabetes_test.npy")).unwrap();
    let tr: Vec<usize> = tr.iter().map(|&i| i as usize).collect();
    let te: Vec<usize> = te.iter().map(|&i| i as usize).collect();
    let xtr = x.select(Axis(0), &tr);
    let ytr: Vec<f64> = tr.iter().map(|&i| y[i]).collect();
    let yte: Vec<f64> = te.iter().map(|&i| y[i]).collect();
    let fit = Gram::new(&xtr.view(), &ytr).solve(0.1).unwrap();
    let pred = fit.predict(&x.select(Axis(0), &te).view());
    let r2 = ridge::r2(&yte, &pred);
    let want_r2 = want["split"]["test_r2"].as_f64().unwrap();
    assert!((r2 - want_r2).abs() < 1e-6, "R² {r2} against {want_r2}");
    let want_pred = numbers(&want["split"]["pred"]);
    let r = ridge::pearson_r(&yte, &want_pred);
    let want_r = want["pearson_r"].as_f64().unwrap();
    assert!((r - want_r).abs() < 1e-12, "r {r} against scipy's {want_r}");
    let rp = ridge::pearson_r(&yte, &pred);
    assert!((rp - want_r).abs() < 1e-6, "r on our predictions {rp}");
}

#[test]
fn penalty_chosen_on_a_grouped_split_matches_a_scikit_learn_loop() {
    // Source: a loop of StandardScaler + Ridge + r2_score over the same grid and split.
    let (x, y) = diabetes();
    let want = expected();
    let sel = &want["selection"];
    let (tr, va) = (index(&sel["train"]), index(&sel["val"]));
    let ytr: Vec<f64> = tr.iter().map(|&i| y[i]).collect();
    let yva: Vec<f64> = va.iter().map(|&i| y[i]).collect();
    let grid = numbers(&sel["grid"]);
    let (best, points) = ridge::search(
        &x.select(Axis(0), &tr).view(),
        &ytr,
        &x.select(Axis(0), &va).view(),
        &yva,
        &grid,
    );
    for (p, e) in points.iter().zip(numbers(&sel["validation_r2"])) {
        assert!(
            (p.validation_r2 - e).abs() < 1e-6,
            "alpha {}: validation R² {} against {e}",
            p.alpha,
            p.validation_r2
        );
    }
    assert_eq!(best, sel["best"].as_f64().unwrap());
}

#[test]
fn r2_of_a_known_linear_layer_is_near_its_theoretical_value() {
    // y = a·x + noise with var(a·x) = 1 and var(noise) = 0.5: R² = 1 − 0.5/1.5 = 2/3
    // (the definition of R² for a correctly specified linear model).
    let mut rng = ChaCha8Rng::seed_from_u64(7);
    let (n, d) = (6000, 16);
    let mut normal = || {
        let (u, v): (f64, f64) = (rng.random::<f64>().max(1e-12), rng.random());
        (-2.0 * u.ln()).sqrt() * (2.0 * std::f64::consts::PI * v).cos()
    };
    let a: Vec<f64> = (0..d).map(|_| 1.0 / (d as f64).sqrt()).collect();
    let x = Array2::from_shape_fn((n, d), |_| normal() as f32);
    let y: Vec<f64> = x
        .outer_iter()
        .map(|r| {
            r.iter().zip(&a).map(|(v, w)| *v as f64 * w).sum::<f64>() + 0.5f64.sqrt() * normal()
        })
        .collect();
    let (tr, te) = (0..n / 2, n / 2..n);
    let pred = ridge::fit_predict(
        &x.slice(ndarray::s![tr.clone(), ..]),
        &y[tr],
        &x.slice(ndarray::s![te.clone(), ..]),
        1.0,
    )
    .unwrap();
    let r2 = ridge::r2(&y[te], &pred);
    assert!((r2 - 2.0 / 3.0).abs() < 0.03, "R² {r2}, theory 0.667");
}
