//! Bindings of [`crate::intervals`].

use numpy::ndarray::{Ix2, Ix3};
use numpy::{PyArrayMethods, PyReadonlyArray1};
use pyo3::exceptions::{PyTypeError, PyValueError};
use pyo3::prelude::*;

use super::{run_core, to_py_err, zeros, zeros_nd, CountArray, FloatArray};
use crate::intervals::{
    member_count_probability, prediction_interval, prediction_set, random_member_count,
    IntervalMethod, SetMethod,
};

/// Calls `$body` with `$m`, `$t` bound to the views of two [`FloatArray`]s of one dtype.
macro_rules! with_float_pair {
    ($members:expr, $train:expr, |$m:ident, $t:ident| $body:expr) => {
        match (&$members, &$train) {
            (FloatArray::F32(a), FloatArray::F32(b)) => {
                let ($m, $t) = (a.as_array(), b.as_array());
                $body
            }
            (FloatArray::F64(a), FloatArray::F64(b)) => {
                let ($m, $t) = (a.as_array(), b.as_array());
                $body
            }
            _ => Err(PyTypeError::new_err(
                "`train_members`: must have the dtype of `members`",
            )),
        }
    };
}

/// `(lower, upper, n_rows_used, finite)` of a regression interval (see the core).
#[pyfunction]
#[pyo3(signature = (members, counts, train_members, y_train, level, method, n_jobs=None, progress=None))]
#[allow(clippy::too_many_arguments, clippy::type_complexity)]
fn prediction_interval_arrays<'py>(
    py: Python<'py>,
    members: &Bound<'py, PyAny>,
    counts: &Bound<'py, PyAny>,
    train_members: &Bound<'py, PyAny>,
    y_train: PyReadonlyArray1<'py, f64>,
    level: f64,
    method: &str,
    n_jobs: Option<usize>,
    progress: Option<Py<PyAny>>,
) -> PyResult<(Bound<'py, PyAny>, Bound<'py, PyAny>, usize, bool)> {
    let method = match method {
        "jackknife+" => IntervalMethod::JackknifePlus,
        "out_of_bag_residual" => IntervalMethod::OutOfBagResidual,
        _ => {
            return Err(PyValueError::new_err(format!(
                "`method`: unknown {method:?}"
            )))
        }
    };
    let members = FloatArray::<Ix2>::extract(members, "members")?;
    let train = FloatArray::<Ix2>::extract(train_members, "train_members")?;
    let counts = CountArray::extract(counts)?;
    let n_points = with_float!(members, |m| m.ncols());
    let lower = zeros_nd::<f64>(py, vec![n_points])?;
    let upper = zeros_nd::<f64>(py, vec![n_points])?;
    // SAFETY: the arrays were just created here and are not shared with Python yet.
    let (lo, up) = unsafe { (lower.as_slice_mut()?, upper.as_slice_mut()?) };
    let y = y_train.as_array();
    let calibration = with_float_pair!(members, train, |m, t| with_counts!(counts, |c| {
        run_core(py, n_jobs, progress, |pool, monitor| {
            prediction_interval(m, c, t, y, level, method, lo, up, pool, monitor)
        })
    }))?;
    let finite = calibration.finite();
    Ok((
        lower.into_any(),
        upper.into_any(),
        calibration.n_rows_used,
        finite,
    ))
}

/// `(sets, n_rows_used, finite)` of a class set (see the core).
#[pyfunction]
#[pyo3(signature = (members, counts, train_members, y_train, level, method, n_jobs=None, progress=None))]
#[allow(clippy::too_many_arguments)]
fn prediction_set_arrays<'py>(
    py: Python<'py>,
    members: &Bound<'py, PyAny>,
    counts: &Bound<'py, PyAny>,
    train_members: &Bound<'py, PyAny>,
    y_train: PyReadonlyArray1<'py, i64>,
    level: f64,
    method: &str,
    n_jobs: Option<usize>,
    progress: Option<Py<PyAny>>,
) -> PyResult<(Bound<'py, PyAny>, usize, bool)> {
    let method = match method {
        "least_ambiguous" => SetMethod::LeastAmbiguous,
        "adaptive" => SetMethod::Adaptive,
        _ => {
            return Err(PyValueError::new_err(format!(
                "`method`: unknown {method:?}"
            )))
        }
    };
    let members = FloatArray::<Ix3>::extract(members, "members")?;
    let train = FloatArray::<Ix3>::extract(train_members, "train_members")?;
    let counts = CountArray::extract(counts)?;
    let (_, n_points, n_classes) = with_float!(members, |m| m.dim());
    let sets = zeros::<bool>(py, [n_points, n_classes])?;
    let mut readwrite = sets.readwrite();
    let out = readwrite.as_array_mut();
    let y = y_train.as_array();
    let calibration = with_float_pair!(members, train, |m, t| with_counts!(counts, |c| {
        run_core(py, n_jobs, progress, |pool, monitor| {
            prediction_set(m, c, t, y, level, method, out, pool, monitor)
        })
    }))?;
    drop(readwrite);
    Ok((
        sets.into_any(),
        calibration.n_rows_used,
        calibration.finite(),
    ))
}

/// `(count, probability)`: the randomised number of members of the
/// jackknife+-after-bootstrap, `Binomial(n_members, probability)` (see the core).
#[pyfunction]
#[pyo3(name = "random_member_count")]
fn random_member_count_py(
    n_members: usize,
    n_rows: usize,
    draws: usize,
    with_replacement: bool,
    seed: u64,
) -> PyResult<(usize, f64)> {
    let probability =
        member_count_probability(n_rows, draws, with_replacement).map_err(to_py_err)?;
    let count = random_member_count(n_members, probability, seed).map_err(to_py_err)?;
    Ok((count, probability))
}

pub(super) fn register(m: &Bound<'_, PyModule>) -> PyResult<()> {
    m.add_function(wrap_pyfunction!(random_member_count_py, m)?)?;
    m.add_function(wrap_pyfunction!(prediction_interval_arrays, m)?)?;
    m.add_function(wrap_pyfunction!(prediction_set_arrays, m)?)
}
