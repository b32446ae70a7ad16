//! The pyo3 layer: converts, validates, releases the GIL, calls the core, converts back.
//! Everything heavy goes through [`run_core`], so GIL handling, progress, Ctrl-C and error
//! mapping are written once.

use std::panic::{catch_unwind, AssertUnwindSafe};
use std::sync::Mutex;

use numpy::{Element, PyArray2};
use pyo3::exceptions::{
    PyKeyboardInterrupt, PyMemoryError, PyOverflowError, PyRuntimeError, PyTypeError, PyValueError,
};
use pyo3::prelude::*;

use crate::error::Error;
use crate::parallel::{Monitor, Pool, Threads};

/// Calls `$body` with `$x` bound to the f32/f64 view of a [`FloatArray`].
macro_rules! with_float {
    ($array:expr, |$x:ident| $body:expr) => {
        match &$array {
            FloatArray::F32(a) => {
                let $x = a.as_array();
                $body
            }
            FloatArray::F64(a) => {
                let $x = a.as_array();
                $body
            }
        }
    };
}

/// Calls `$body` with `$c` bound to the view of a [`CountArray`].
macro_rules! with_counts {
    ($array:expr, |$c:ident| $body:expr) => {
        match &$array {
            CountArray::U8(a) => {
                let $c = a.as_array();
                $body
            }
            CountArray::U16(a) => {
                let $c = a.as_array();
                $body
            }
            CountArray::U32(a) => {
                let $c = a.as_array();
                $body
            }
            CountArray::U64(a) => {
                let $c = a.as_array();
                $body
            }
        }
    };
}

mod aggregation;
mod correlation;
mod decomposition;
mod diversity;
mod intervals;
mod learners;
mod linear;
mod members;
mod neighbors;
mod ordering;
mod out_of_bag;
mod persistence;
mod replicates;
mod resampling;
mod size_curve;
mod tree;
mod uncertainty;

/// Maps a core error to the Python exception a user expects.
pub(crate) fn to_py_err(error: Error) -> PyErr {
    match error {
        Error::InvalidValue { .. } => PyValueError::new_err(error.to_string()),
        Error::InvalidType { .. } => PyTypeError::new_err(error.to_string()),
        Error::CountOverflow { .. } => PyOverflowError::new_err(error.to_string()),
        Error::Interrupted => PyKeyboardInterrupt::new_err("interrupted"),
        Error::OutOfMemory { .. } => PyMemoryError::new_err(error.to_string()),
    }
}

/// Reports progress to an optional Python callable `callback(done, total)` and checks for
/// Ctrl-C; either raising stops the core loop, and that exception is what Python sees.
struct PythonMonitor {
    callback: Option<Py<PyAny>>,
    raised: Mutex<Option<PyErr>>,
}

impl Monitor for PythonMonitor {
    fn progress(&self, done: usize, total: usize) -> crate::Result<()> {
        Python::attach(|py| {
            let outcome = py.check_signals().and_then(|()| match &self.callback {
                Some(callback) => callback.call1(py, (done, total)).map(drop),
                None => Ok(()),
            });
            outcome.map_err(|err| {
                *self.raised.lock().expect("monitor lock") = Some(err);
                Error::Interrupted
            })
        })
    }
}

/// Runs `work` with the GIL released on a pool of `n_jobs`, reporting progress to
/// `progress`; maps core errors and panics to Python exceptions.
pub(crate) fn run_core<T: Send>(
    py: Python<'_>,
    n_jobs: Option<usize>,
    progress: Option<Py<PyAny>>,
    work: impl FnOnce(&Pool, &dyn Monitor) -> crate::Result<T> + Send,
) -> PyResult<T> {
    let pool = Threads::from_option(n_jobs)
        .and_then(Threads::pool)
        .map_err(to_py_err)?;
    let monitor = PythonMonitor {
        callback: progress,
        raised: Mutex::new(None),
    };
    let outcome = py.detach(|| catch_unwind(AssertUnwindSafe(|| work(&pool, &monitor))));
    match outcome {
        Ok(Ok(value)) => Ok(value),
        Ok(Err(Error::Interrupted)) => Err(monitor
            .raised
            .into_inner()
            .ok()
            .flatten()
            .unwrap_or_else(|| PyKeyboardInterrupt::new_err("interrupted"))),
        Ok(Err(error)) => Err(to_py_err(error)),
        Err(panic) => {
            let detail = panic
                .downcast_ref::<&str>()
                .map(|s| s.to_string())
                .or_else(|| panic.downcast_ref::<String>().cloned())
                .unwrap_or_default();
            Err(PyRuntimeError::new_err(format!(
                "internal error in bagwise (please report it): {detail}"
            )))
        }
    }
}

/// A zeroed C-contiguous array from `numpy.zeros`, so an allocation failure is numpy's own
/// `MemoryError` (never a panic) and the buffer gets numpy's huge-page hint.
pub(crate) fn zeros<'py, T: Element>(
    py: Python<'py>,
    shape: [usize; 2],
) -> PyResult<Bound<'py, PyArray2<T>>> {
    let numpy = py.import("numpy")?;
    let array = numpy.call_method1("zeros", (shape, T::get_dtype(py)))?;
    Ok(array.cast_into::<PyArray2<T>>()?)
}

/// A 2-D or 3-D float input read as f32 or f64 without an upcasting copy, any strides.
/// Use `FloatArray::F32(a) => core(a.as_array())` etc. and keep the dispatch in one match.
pub(crate) enum FloatArray<'py, D: numpy::ndarray::Dimension> {
    F32(numpy::PyReadonlyArray<'py, f32, D>),
    F64(numpy::PyReadonlyArray<'py, f64, D>),
}

impl<'py, D: numpy::ndarray::Dimension> FloatArray<'py, D> {
    /// Reads `object` as a float array of dimension `D`, naming `argument` on failure.
    pub(crate) fn extract(object: &Bound<'py, PyAny>, argument: &'static str) -> PyResult<Self> {
        if let Ok(a) = object.extract::<numpy::PyReadonlyArray<'py, f64, D>>() {
            return Ok(FloatArray::F64(a));
        }
        if let Ok(a) = object.extract::<numpy::PyReadonlyArray<'py, f32, D>>() {
            return Ok(FloatArray::F32(a));
        }
        Err(PyTypeError::new_err(format!(
            "`{argument}`: expected a float32 or float64 numpy array with {} dimensions",
            D::NDIM.map_or("the right number of".to_string(), |n| n.to_string())
        )))
    }
}

/// In-bag counts of any unsigned integer dtype, read without a copy.
pub(crate) enum CountArray<'py> {
    U8(numpy::PyReadonlyArray2<'py, u8>),
    U16(numpy::PyReadonlyArray2<'py, u16>),
    U32(numpy::PyReadonlyArray2<'py, u32>),
    U64(numpy::PyReadonlyArray2<'py, u64>),
}

impl<'py> CountArray<'py> {
    /// `None` for a Python `None`, else the counts.
    pub(crate) fn maybe(object: &Bound<'py, PyAny>) -> PyResult<Option<Self>> {
        if object.is_none() {
            Ok(None)
        } else {
            Self::extract(object).map(Some)
        }
    }

    pub(crate) fn extract(object: &Bound<'py, PyAny>) -> PyResult<Self> {
        if let Ok(a) = object.extract() {
            return Ok(CountArray::U8(a));
        }
        if let Ok(a) = object.extract() {
            return Ok(CountArray::U16(a));
        }
        if let Ok(a) = object.extract() {
            return Ok(CountArray::U32(a));
        }
        if let Ok(a) = object.extract() {
            return Ok(CountArray::U64(a));
        }
        Err(PyTypeError::new_err(
            "`counts`: expected a 2-D numpy array of dtype uint8, uint16, uint32 or uint64",
        ))
    }
}

/// A zeroed C-contiguous array of any shape from `numpy.zeros` (allocation failure is a
/// `MemoryError`).
pub(crate) fn zeros_nd<'py, T: Element>(
    py: Python<'py>,
    shape: Vec<usize>,
) -> PyResult<Bound<'py, numpy::PyArrayDyn<T>>> {
    let numpy = py.import("numpy")?;
    let array = numpy.call_method1("zeros", (shape, T::get_dtype(py)))?;
    Ok(array.cast_into::<numpy::PyArrayDyn<T>>()?)
}

/// Converts a Python integer that must be positive into usize, naming the argument.
pub(crate) fn positive(value: i64, argument: &'static str) -> PyResult<usize> {
    usize::try_from(value)
        .ok()
        .filter(|&v| v > 0)
        .ok_or_else(|| {
            PyValueError::new_err(format!("`{argument}`: must be at least 1, got {value}"))
        })
}

#[pymodule]
fn _core(m: &Bound<'_, PyModule>) -> PyResult<()> {
    m.add("__version__", env!("CARGO_PKG_VERSION"))?;
    aggregation::register(m)?;
    decomposition::register(m)?;
    size_curve::register(m)?;
    correlation::register(m)?;
    diversity::register(m)?;
    intervals::register(m)?;
    resampling::register(m)?;
    uncertainty::register(m)?;
    linear::register(m)?;
    neighbors::register(m)?;
    persistence::register(m)?;
    out_of_bag::register(m)?;
    ordering::register(m)?;
    replicates::register(m)?;
    tree::register(m)?;
    Ok(())
}
