//! What the bindings of the native learners share: reading targets and in-bag counts, and
//! the methods every learner class exposes alike through [`FittedMembers`] (member
//! predictions, out-of-bag predictions, the mean, bytes).

use numpy::ndarray::Ix2;
use numpy::{PyArrayMethods, PyReadonlyArray1, PyReadonlyArray2};
use pyo3::exceptions::{PyTypeError, PyValueError};
use pyo3::prelude::*;
use pyo3::types::PyBytes;

use super::{run_core, to_py_err, zeros_nd, CountArray, FloatArray};
use crate::learners::{BagSource, CountBags, FittedMembers, Targets, Task};

/// The training targets: float64 values for regression, int64 class codes otherwise.
pub(super) enum YValues {
    Real(Vec<f64>),
    Codes(Vec<usize>),
}

impl YValues {
    /// Reads `y` for `task`.
    pub(super) fn read(y: &Bound<'_, PyAny>, task: Task) -> PyResult<Self> {
        match task {
            Task::Regression => y
                .extract::<PyReadonlyArray1<'_, f64>>()
                .map(|a| YValues::Real(a.as_array().to_vec()))
                .map_err(|_| {
                    PyTypeError::new_err("`y`: expected a 1-D float64 array for regression")
                }),
            Task::Classification { .. } => {
                let a = y.extract::<PyReadonlyArray1<'_, i64>>().map_err(|_| {
                    PyTypeError::new_err("`y`: expected a 1-D int64 array of class codes")
                })?;
                let codes: Result<Vec<usize>, _> =
                    a.as_array().iter().map(|&c| usize::try_from(c)).collect();
                codes
                    .map(YValues::Codes)
                    .map_err(|_| PyValueError::new_err("`y`: class codes must be non-negative"))
            }
        }
    }

    /// The core's view of the targets.
    pub(super) fn view(&self) -> Targets<'_> {
        match self {
            YValues::Real(v) => Targets::Regression(v.as_slice().into()),
            YValues::Codes(v) => Targets::Classes(v.as_slice().into()),
        }
    }
}

/// `counts` (members, rows) of unsigned integer counts or float64 weights as a
/// [`BagSource`] that reads one member at a time, given to `f`.
pub(super) fn with_bag_source<R>(
    counts: &Bound<'_, PyAny>,
    n_rows: usize,
    f: impl Fn(&dyn BagSource) -> PyResult<R>,
) -> PyResult<R> {
    macro_rules! try_as {
        ($($t:ty),*) => {$(
            if let Ok(a) = counts.extract::<PyReadonlyArray2<'_, $t>>() {
                return f(&CountBags::new(a.as_array(), n_rows).map_err(to_py_err)?);
            }
        )*};
    }
    try_as!(u8, u16, u32, u64, f64);
    Err(PyTypeError::new_err(
        "`counts`: expected a 2-D array of unsigned integer counts or float64 weights",
    ))
}

/// A Python integer option for the core: a negative value becomes 0, which the core's
/// parameter check rejects, naming the argument.
pub(super) fn count(value: i64) -> usize {
    usize::try_from(value).unwrap_or(0)
}

/// Number of rows of a float design.
pub(super) fn rows_of(x: &FloatArray<'_, Ix2>) -> usize {
    with_float!(x, |a| a.nrows())
}

/// `[members,] points[, n_classes]`.
fn shape<E: FittedMembers>(model: &E, members: bool, n_points: usize) -> Vec<usize> {
    let mut shape = if members {
        vec![model.n_members(), n_points]
    } else {
        vec![n_points]
    };
    if let Task::Classification { n_classes } = model.task() {
        shape.push(n_classes);
    }
    shape
}

/// `member_predictions`: (members, points) values or (members, points, n_classes)
/// class fractions, written by the core straight into the numpy array.
pub(super) fn member_predictions<'py, E: FittedMembers + Sync>(
    py: Python<'py>,
    model: &E,
    x: &Bound<'py, PyAny>,
    n_jobs: Option<usize>,
    progress: Option<Py<PyAny>>,
) -> PyResult<Bound<'py, PyAny>> {
    let x = FloatArray::<Ix2>::extract(x, "x")?;
    let array = zeros_nd::<f64>(py, shape(model, true, rows_of(&x)))?;
    // SAFETY: the array was just created here and is not shared with Python yet.
    let out = unsafe { array.as_slice_mut() }.expect("a new array is contiguous");
    with_float!(x, |a| run_core(py, n_jobs, progress, |pool, monitor| {
        model.member_predictions_into(a, out, pool, monitor)
    }))?;
    Ok(array.into_any())
}

/// `out_of_bag_predictions`: as `member_predictions` on the training rows, NaN where the
/// member saw the row.
pub(super) fn out_of_bag_predictions<'py, E: FittedMembers + Sync>(
    py: Python<'py>,
    model: &E,
    x: &Bound<'py, PyAny>,
    counts: &Bound<'py, PyAny>,
    n_jobs: Option<usize>,
    progress: Option<Py<PyAny>>,
) -> PyResult<Bound<'py, PyAny>> {
    let x = FloatArray::<Ix2>::extract(x, "x")?;
    let counts = CountArray::extract(counts)?;
    let array = zeros_nd::<f64>(py, shape(model, true, rows_of(&x)))?;
    // SAFETY: the array was just created here and is not shared with Python yet.
    let out = unsafe { array.as_slice_mut() }.expect("a new array is contiguous");
    with_counts!(counts, |c| with_float!(x, |a| run_core(
        py,
        n_jobs,
        progress,
        |pool, monitor| model.out_of_bag_into(a, c, out, pool, monitor)
    )))?;
    Ok(array.into_any())
}

/// `predict`: the mean over members, (points,) values or (points, n_classes).
pub(super) fn predict<'py, E: FittedMembers + Sync>(
    py: Python<'py>,
    model: &E,
    x: &Bound<'py, PyAny>,
    n_jobs: Option<usize>,
    progress: Option<Py<PyAny>>,
) -> PyResult<Bound<'py, PyAny>> {
    let x = FloatArray::<Ix2>::extract(x, "x")?;
    let array = zeros_nd::<f64>(py, shape(model, false, rows_of(&x)))?;
    // SAFETY: the array was just created here and is not shared with Python yet.
    let out = unsafe { array.as_slice_mut() }.expect("a new array is contiguous");
    with_float!(x, |a| run_core(py, n_jobs, progress, |pool, monitor| {
        model.predict_into(a, out, pool, monitor)
    }))?;
    Ok(array.into_any())
}

/// `join`: one ensemble of the parts' members, in order (see [`FittedMembers::join`]).
pub(super) fn join<E: FittedMembers>(parts: Vec<E>) -> PyResult<E> {
    E::join(parts).map_err(to_py_err)
}

/// `select`: the ensemble of those members in that order (see [`FittedMembers::select`]);
/// negative indices are refused like out-of-range ones.
pub(super) fn select<E: FittedMembers>(model: &E, members: Vec<i64>) -> PyResult<E> {
    let members = members
        .into_iter()
        .map(|m| usize::try_from(m).unwrap_or(usize::MAX))
        .collect::<Vec<_>>();
    model.select(&members).map_err(to_py_err)
}

/// `to_bytes`, encoded straight into the Python bytes.
pub(super) fn to_bytes<'py, E: FittedMembers>(
    py: Python<'py>,
    model: &E,
) -> PyResult<Bound<'py, PyBytes>> {
    PyBytes::new_with(py, model.encoded_len(), |out| {
        model.encode_into(out);
        Ok(())
    })
}

/// `from_bytes`: corrupt or foreign bytes raise ValueError.
pub(super) fn from_bytes<E: FittedMembers>(data: &[u8]) -> PyResult<E> {
    E::from_bytes(data).map_err(to_py_err)
}

/// `n_classes`: None for regression.
pub(super) fn n_classes<E: FittedMembers>(model: &E) -> Option<usize> {
    match model.task() {
        Task::Regression => None,
        Task::Classification { n_classes } => Some(n_classes),
    }
}
