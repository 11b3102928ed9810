//! `voxstrata._native`: the engine's entry points for the Python package. The Python layer
//! (`voxstrata/__init__.py`) checks and converts arguments; these functions build an
//! in-memory capture, release the GIL, run the very code the command line runs, and return
//! records as the JSON the command writes.

mod arrays;

use std::path::PathBuf;

use numpy::{IntoPyArray, PyArray2};
use pyo3::create_exception;
use pyo3::exceptions::{PyRuntimeError, PyValueError};
use pyo3::prelude::*;
use voxstrata::analysis::abx::AbxOptions;
use voxstrata::analysis::compare::cka as cka_engine;
use voxstrata::analysis::map::{self as map_engine, MapOptions, Method};
use voxstrata::analysis::probe::{self as probe_engine, ProbeOptions};
use voxstrata::capture::labels::{self, FrameColumns};
use voxstrata::capture::{Capture, LabelOptions, LayerSelection};
use voxstrata::commands::report::ReportOptions;
use voxstrata::{CommonOptions, Error, OpenOptions, Progress};

use arrays::borrow_array;

create_exception!(
    _native,
    InputError,
    PyValueError,
    "Bad input found by the engine (the command line's exit code 2); the message is the one the command line prints."
);
create_exception!(
    _native,
    InternalError,
    PyRuntimeError,
    "A failure inside the engine (the command line's exit code 1)."
);

/// The engine's error as a Python exception with the command line's message.
fn py_err(e: impl Into<Error>) -> PyErr {
    let e: Error = e.into();
    if e.exit_code() == 2 {
        InputError::new_err(e.to_string())
    } else {
        InternalError::new_err(e.to_string())
    }
}

fn json<T: serde::Serialize + ?Sized>(v: &T) -> PyResult<String> {
    serde_json::to_string(v).map_err(|e| InternalError::new_err(e.to_string()))
}

/// Options shared by every analysis, as the command line's global options.
#[derive(FromPyObject)]
#[pyo3(from_item_all)]
struct Common {
    seed: u64,
    threads: usize,
    layers: Option<String>,
    quiet: bool,
}

impl Common {
    fn options(&self) -> PyResult<CommonOptions> {
        let layers = match &self.layers {
            None => None,
            Some(s) => Some(
                s.parse::<LayerSelection>()
                    .map_err(|e| PyValueError::new_err(format!("layers: {e}")))?,
            ),
        };
        Ok(CommonOptions {
            seed: self.seed,
            threads: self.threads,
            layers,
        })
    }
}

/// How labels are cleaned: the command line's --drop-label, --merge-labels (a file, or
/// pairs given directly) and --allow-nonfinite.
#[derive(FromPyObject)]
#[pyo3(from_item_all)]
struct Cleaning {
    drop_label: Vec<String>,
    merge_file: Option<PathBuf>,
    merge_pairs: Vec<(String, String)>,
    allow_nonfinite: bool,
}

impl Cleaning {
    fn open_options(&self) -> PyResult<OpenOptions> {
        let mut labels = LabelOptions {
            drop: self.drop_label.clone(),
            ..Default::default()
        };
        if let Some(p) = &self.merge_file {
            labels.merge = labels::read_merge_map(p).map_err(py_err)?;
        }
        labels.merge.extend(self.merge_pairs.iter().cloned());
        Ok(OpenOptions {
            labels,
            allow_nonfinite: self.allow_nonfinite,
        })
    }
}

/// The frames of in-memory arrays: utterance and speaker of each, and label columns.
#[derive(FromPyObject)]
#[pyo3(from_item_all)]
struct Frames {
    utterance: Vec<String>,
    speaker: Vec<String>,
    labels: Vec<(String, Vec<Option<String>>)>,
}

/// An in-memory capture of `arrays` (one 3-D stack or 2-D layers) and `frames`.
fn capture_of(
    arrays: &[Bound<'_, PyAny>],
    frames: Frames,
    open: &OpenOptions,
) -> PyResult<Capture> {
    let mut files = Vec::with_capacity(arrays.len());
    for (i, a) in arrays.iter().enumerate() {
        let what = if arrays.len() == 1 {
            "X".to_string()
        } else {
            format!("X[{i}]")
        };
        files.push(borrow_array(&what, a, &[2, 3])?);
    }
    let cols = FrameColumns {
        utterance: frames.utterance,
        speaker: frames.speaker,
        labels: frames.labels,
    };
    let table = labels::frames_from_columns(std::path::Path::new("labels"), &cols, &open.labels)
        .map_err(py_err)?;
    Capture::in_memory("in-memory", files, table, open.allow_nonfinite).map_err(py_err)
}

/// The probe settings given from Python, by their command-line names.
#[derive(FromPyObject)]
#[pyo3(from_item_all)]
struct ProbeArgs {
    tasks: Vec<String>,
    pool: String,
    context: usize,
    split: String,
    folds: String,
    test_fraction: f64,
    max_train_frames: usize,
    max_test_frames: usize,
    bootstrap: usize,
    no_control: bool,
    control_by: Option<String>,
    mdl: bool,
    strict: bool,
    alphas: Option<Vec<f64>>,
}

impl ProbeArgs {
    fn options(&self) -> PyResult<ProbeOptions> {
        let mut o = ProbeOptions {
            tasks: self.tasks.clone(),
            pooling: self
                .pool
                .parse()
                .map_err(|e| PyValueError::new_err(format!("pool: {e}")))?,
            context: self.context,
            split: self
                .split
                .parse()
                .map_err(|e| PyValueError::new_err(format!("split: {e}")))?,
            test_fraction: self.test_fraction,
            folds: self
                .folds
                .parse()
                .map_err(|e| PyValueError::new_err(format!("folds: {e}")))?,
            max_train_frames: self.max_train_frames,
            max_test_frames: self.max_test_frames,
            bootstrap: self.bootstrap,
            control: !self.no_control,
            control_by: self.control_by.clone(),
            mdl: self.mdl,
            strict: self.strict,
            ..Default::default()
        };
        if let Some(a) = &self.alphas {
            o.alphas = a.clone();
        }
        o.check().map_err(py_err)?;
        Ok(o)
    }
}

/// Probe in-memory arrays: (records as JSON, notes).
#[pyfunction]
fn probe(
    py: Python<'_>,
    arrays: Vec<Bound<'_, PyAny>>,
    frames: Frames,
    args: ProbeArgs,
    cleaning: Cleaning,
    common: Common,
) -> PyResult<(String, Vec<String>)> {
    let opts = args.options()?;
    let open = cleaning.open_options()?;
    let common_opts = common.options()?;
    let cap = capture_of(&arrays, frames, &open)?;
    let quiet = common.quiet;
    let report = py.allow_threads(move || {
        voxstrata::with_threads(common_opts.threads, || {
            let progress = Progress::new(quiet);
            probe_engine::run(&cap, &opts, &common_opts, &progress).map_err(Error::from)
        })
        .and_then(|r| r)
    });
    let report = report.map_err(py_err)?;
    Ok((json(&report.records)?, report.notes))
}

/// What `map` returns: records as JSON, the sampled frames, each layer's map, notes and the
/// summary as JSON.
type MapOut<'py> = (
    String,
    Vec<u64>,
    Vec<(usize, Bound<'py, PyArray2<f32>>)>,
    Vec<String>,
    String,
);

/// Maps and purity records of in-memory arrays.
#[pyfunction]
#[allow(clippy::too_many_arguments)]
fn map<'py>(
    py: Python<'py>,
    arrays: Vec<Bound<'py, PyAny>>,
    frames: Frames,
    method: &str,
    per_label: usize,
    color_by: Vec<String>,
    cleaning: Cleaning,
    common: Common,
) -> PyResult<MapOut<'py>> {
    let method = match method {
        "tsne" => Method::Tsne,
        "pca" => Method::Pca,
        m => {
            return Err(PyValueError::new_err(format!(
                "method: expected 'tsne' or 'pca', found '{m}'"
            )))
        }
    };
    let opts = MapOptions {
        method,
        per_label,
        color_by,
        ..Default::default()
    };
    opts.check().map_err(py_err)?;
    let open = cleaning.open_options()?;
    let common_opts = common.options()?;
    let cap = capture_of(&arrays, frames, &open)?;
    let quiet = common.quiet;
    let report = py
        .allow_threads(move || {
            voxstrata::with_threads(common_opts.threads, || {
                let progress = Progress::new(quiet);
                map_engine::run(&cap, &opts, &common_opts, &progress).map_err(Error::from)
            })
            .and_then(|r| r)
        })
        .map_err(py_err)?;
    let maps = report
        .layers
        .into_iter()
        .map(|l| (l.layer, l.embedding.into_pyarray(py)))
        .collect();
    Ok((
        json(&report.records)?,
        report.frames,
        maps,
        report.notes,
        json(&report.summary)?,
    ))
}

/// CKA of two in-memory representations of the same rows.
#[pyfunction]
fn cka(py: Python<'_>, x: Bound<'_, PyAny>, y: Bound<'_, PyAny>, kernel: &str) -> PyResult<f64> {
    let (fx, fy) = (borrow_array("X", &x, &[2])?, borrow_array("Y", &y, &[2])?);
    let (nx, ny) = (fx.layer_shape().1, fy.layer_shape().1);
    if nx != ny {
        return Err(PyValueError::new_err(format!(
            "X and Y: expected the same number of rows, found {nx} and {ny}"
        )));
    }
    if nx < 2 {
        return Err(PyValueError::new_err(format!(
            "X and Y: expected at least 2 rows, found {nx}"
        )));
    }
    let rbf = match kernel {
        "linear" => false,
        "rbf" => true,
        k => {
            return Err(PyValueError::new_err(format!(
                "kernel: expected 'linear' or 'rbf', found '{k}'"
            )))
        }
    };
    Ok(py.allow_threads(move || {
        let (a, b) = (fx.read_layer(0), fy.read_layer(0));
        if rbf {
            cka_engine::rbf_cka(&a.view(), &b.view())
        } else {
            cka_engine::linear_cka(&a.view(), &b.view())
        }
    }))
}

/// `voxstrata report` on capture folders; returns the path of index.html.
#[pyfunction]
#[allow(clippy::too_many_arguments)]
fn report(
    py: Python<'_>,
    captures: Vec<PathBuf>,
    out: PathBuf,
    force: bool,
    map_method: &str,
    no_abx: bool,
    cleaning: Cleaning,
    common: Common,
) -> PyResult<PathBuf> {
    let method = match map_method {
        "tsne" => Method::Tsne,
        "pca" => Method::Pca,
        m => {
            return Err(PyValueError::new_err(format!(
                "map_method: expected 'tsne' or 'pca', found '{m}'"
            )))
        }
    };
    let opts = ReportOptions {
        open: cleaning.open_options()?,
        captures,
        out: out.clone(),
        force,
        map: MapOptions {
            method,
            ..Default::default()
        },
        abx: (!no_abx).then(AbxOptions::default),
        ..Default::default()
    };
    let common_opts = common.options()?;
    let quiet = common.quiet;
    py.allow_threads(move || {
        voxstrata::with_threads(common_opts.threads, || {
            let progress = Progress::new(quiet);
            voxstrata::commands::report::run(&opts, &common_opts, &progress)
        })
        .and_then(|r| r)
    })
    .map_err(py_err)?;
    Ok(out.join("index.html"))
}

/// Run the command line with `args` (without the program name); returns the exit code.
#[pyfunction]
fn cli(py: Python<'_>, args: Vec<String>) -> i32 {
    py.allow_threads(move || {
        let argv = std::iter::once("voxstrata".to_string()).chain(args);
        voxstrata::cli::main_with_args(argv)
    })
}

/// The engine's version (the crate's).
#[pyfunction]
fn engine_version() -> &'static str {
    voxstrata::VERSION
}

#[pymodule]
fn _native(m: &Bound<'_, PyModule>) -> PyResult<()> {
    m.add("InputError", m.py().get_type::<InputError>())?;
    m.add("InternalError", m.py().get_type::<InternalError>())?;
    m.add_function(wrap_pyfunction!(probe, m)?)?;
    m.add_function(wrap_pyfunction!(map, m)?)?;
    m.add_function(wrap_pyfunction!(cka, m)?)?;
    m.add_function(wrap_pyfunction!(report, m)?)?;
    m.add_function(wrap_pyfunction!(cli, m)?)?;
    m.add_function(wrap_pyfunction!(engine_version, m)?)?;
    Ok(())
}
