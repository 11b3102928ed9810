//! The capture reader against numpy itself: every fixture under tests/reference/npy was written
//! by numpy (tests/reference/make_npy.py) and `expected.json` holds the values numpy reads back.
//! Source of truth: numpy's .npy format as numpy implements it.

use std::path::Path;

use voxstrata::capture::NpyFile;

fn expected() -> serde_json::Value {
    let p = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/reference/npy/expected.json");
    serde_json::from_str(&std::fs::read_to_string(p).unwrap()).unwrap()
}

fn check(name: &str) {
    let exp = &expected()["cases"][name];
    let p = Path::new(env!("CARGO_MANIFEST_DIR")).join(format!("tests/reference/npy/{name}.npy"));
    let f = NpyFile::open(&p).unwrap();
    let shape: Vec<usize> = exp["shape"]
        .as_array()
        .unwrap()
        .iter()
        .map(|v| v.as_u64().unwrap() as usize)
        .collect();
    assert_eq!(f.header().shape, shape, "{name}: shape");
    assert_eq!(
        f.header().fortran_order,
        exp["fortran_order"].as_bool().unwrap(),
        "{name}: order"
    );
    let want: Vec<f64> = exp["values"]
        .as_array()
        .unwrap()
        .iter()
        .map(|v| v.as_f64().unwrap())
        .collect();
    let (layers, frames, dim) = f.layer_shape();
    let mut got = Vec::new();
    for l in 0..layers {
        got.extend(f.read_layer(l).iter().map(|&v| v as f64));
    }
    assert_eq!(got.len(), want.len());
    for (k, (g, w)) in got.iter().zip(&want).enumerate() {
        // f64 fixtures are compared after rounding to f32, which is what the reader returns.
        let w32 = *w as f32 as f64;
        assert_eq!(*g, w32, "{name}: element {k} of {layers}x{frames}x{dim}");
    }
    // Reading selected rows agrees with the whole layer.
    let rows = [frames - 1, 0, frames / 2];
    let part = f.read_rows(layers - 1, &rows);
    let whole = f.read_layer(layers - 1);
    for (i, &r) in rows.iter().enumerate() {
        assert_eq!(part.row(i), whole.row(r), "{name}: row {r}");
    }
}

#[test]
fn reads_f16_little_endian_like_numpy() {
    check("f16_le");
}

#[test]
fn reads_f16_special_values_like_numpy() {
    check("f16_special");
}

#[test]
fn reads_f32_big_endian_like_numpy() {
    check("f32_be");
}

#[test]
fn reads_f64_fortran_order_like_numpy() {
    check("f64_fortran");
}

#[test]
fn reads_f32_big_endian_fortran_order_like_numpy() {
    check("f32_fortran_be");
}

#[test]
fn reads_3d_stack_like_numpy() {
    check("stack_f32");
}

#[test]
fn reads_3d_fortran_stack_like_numpy() {
    check("stack_f64_fortran");
}
