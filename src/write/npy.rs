//! `.npy` outputs: the 2-D maps (f32, C order) and the sampled frame indices (u64).

use std::path::Path;

use super::{atomic::write_atomic, OutputError};

fn encode<T: ndarray_npy::WritableElement + Clone, D: ndarray::Dimension>(
    path: &Path,
    a: &ndarray::ArrayView<T, D>,
) -> Result<Vec<u8>, OutputError> {
    let mut buf = Vec::new();
    let std = a.as_standard_layout();
    ndarray_npy::WriteNpyExt::write_npy(&std, &mut buf).map_err(|e| OutputError::Encode {
        path: path.to_path_buf(),
        message: e.to_string(),
    })?;
    Ok(buf)
}

/// Write an array as `.npy` (f32, C order) atomically.
pub fn write_npy_f32(path: &Path, a: &ndarray::ArrayView2<f32>) -> Result<(), OutputError> {
    write_atomic(path, &encode(path, a)?)
}

/// Write a 1-D u64 index array as `.npy` atomically.
pub fn write_npy_u64(path: &Path, a: &[u64]) -> Result<(), OutputError> {
    let arr = ndarray::ArrayView1::from(a);
    write_atomic(path, &encode(path, &arr)?)
}
