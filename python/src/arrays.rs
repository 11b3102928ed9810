//! numpy arrays as the engine's in-memory arrays: an f16/f32/f64 array in C or Fortran order
//! (either byte order) is read in place, without a copy; anything else is refused with a
//! `TypeError` or `ValueError` naming the argument.

use std::path::Path;
use std::sync::Arc;

use numpy::{PyArrayDescrMethods, PyUntypedArray, PyUntypedArrayMethods};
use pyo3::exceptions::{PyTypeError, PyValueError};
use pyo3::prelude::*;
use voxstrata::capture::npy::{Dtype, NpyFile, NpyHeader};

/// The bytes of a numpy array, borrowed for the length of one call.
///
/// SAFETY: the caller keeps the array object alive for as long as any [`NpyFile`] built on
/// these bytes exists (every entry point holds the `Bound` arrays in its frame and drops the
/// capture before it returns), and the engine only reads them. As with any extension that
/// releases the GIL, an array changed by another Python thread meanwhile gives undefined
/// numbers; callers must not do that.
struct Borrowed {
    ptr: *const u8,
    len: usize,
}

unsafe impl Send for Borrowed {}
unsafe impl Sync for Borrowed {}

impl AsRef<[u8]> for Borrowed {
    fn as_ref(&self) -> &[u8] {
        if self.len == 0 {
            return &[];
        }
        // SAFETY: see the type's comment; `len` is the array's size in bytes.
        unsafe { std::slice::from_raw_parts(self.ptr, self.len) }
    }
}

/// Element type of a numpy dtype (kind and item size), or a `TypeError` naming `what`.
fn dtype_of(what: &str, kind: u8, size: usize, shown: &str) -> PyResult<Dtype> {
    match (kind, size) {
        (b'f', 2) => Ok(Dtype::F16),
        (b'f', 4) => Ok(Dtype::F32),
        (b'f', 8) => Ok(Dtype::F64),
        _ => Err(PyTypeError::new_err(format!(
            "{what}: expected a float16, float32 or float64 array, found dtype {shown}"
        ))),
    }
}

/// A 2-D or 3-D numpy array `a` (argument `what`) as an in-memory array the engine reads in
/// place. `dims` lists the numbers of dimensions accepted.
pub fn borrow_array(what: &str, a: &Bound<'_, PyAny>, dims: &[usize]) -> PyResult<NpyFile> {
    let arr = a.downcast::<PyUntypedArray>().map_err(|_| {
        let ty = a
            .get_type()
            .name()
            .map(|n| n.to_string())
            .unwrap_or_else(|_| "?".into());
        PyTypeError::new_err(format!("{what}: expected a numpy array, found {ty}"))
    })?;
    let dt = arr.dtype();
    let shown = dt.to_string();
    let dtype = dtype_of(what, dt.kind(), dt.itemsize(), &shown)?;
    let shape = arr.shape().to_vec();
    if !dims.contains(&shape.len()) {
        let want: Vec<String> = dims.iter().map(|d| format!("{d}-D")).collect();
        return Err(PyValueError::new_err(format!(
            "{what}: expected a {} array, found shape {shape:?}",
            want.join(" or ")
        )));
    }
    let fortran = if arr.is_c_contiguous() {
        false
    } else if arr.is_fortran_contiguous() {
        true
    } else {
        return Err(PyValueError::new_err(format!(
            "{what}: expected a C- or Fortran-ordered array, found a strided view \
             (np.ascontiguousarray makes one)"
        )));
    };
    let big_endian = match dt.byteorder() {
        b'>' => true,
        b'<' => false,
        _ => cfg!(target_endian = "big"),
    };
    let n: usize = shape.iter().product();
    // SAFETY: `as_array_ptr` is the live array object; `data` points at its first element.
    let ptr = unsafe { (*arr.as_array_ptr()).data as *const u8 };
    let header = NpyHeader {
        dtype,
        big_endian,
        fortran_order: fortran,
        shape,
        data_offset: 0,
    };
    let bytes = Arc::new(Borrowed {
        ptr,
        len: n * dtype.size(),
    });
    NpyFile::from_memory(Path::new(what), header, bytes)
        .map_err(|e| PyValueError::new_err(e.to_string()))
}
