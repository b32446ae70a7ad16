//! Bindings of [`crate::decomposition`].

use std::sync::Mutex;

use numpy::ndarray::{Ix2, Ix3};
use numpy::{Element, PyArray1, PyArrayMethods, PyReadonlyArray1, PyReadonlyArray2};
use pyo3::prelude::*;
use pyo3::types::PyDict;

use super::{run_core, to_py_err, zeros, FloatArray};
use crate::decomposition::{
    self as core, DecompositionState, Loss, MemberWeights, PointLosses, SizeCurveState,
};

/// A zeroed 1-D array from `numpy.zeros` (allocation failure is a `MemoryError`).
fn zeros1<'py, T: Element>(py: Python<'py>, len: usize) -> PyResult<Bound<'py, PyArray1<T>>> {
    let array = py
        .import("numpy")?
        .call_method1("zeros", (len, T::get_dtype(py)))?;
    Ok(array.cast_into::<PyArray1<T>>()?)
}

/// Runs `$body` with `$v` bound to the f32 or f64 view of a [`FloatArray`].
macro_rules! with_view {
    ($array:expr, |$v:ident| $body:expr) => {
        match $array {
            FloatArray::F32(a) => {
                let $v = a.as_array();
                $body
            }
            FloatArray::F64(a) => {
                let $v = a.as_array();
                $body
            }
        }
    };
}

fn member_weights(
    weights: Option<PyReadonlyArray1<'_, f64>>,
    members: usize,
) -> PyResult<MemberWeights> {
    match weights {
        None => Ok(MemberWeights::uniform(members)),
        Some(w) => MemberWeights::new(&w.as_array().to_vec(), members).map_err(to_py_err),
    }
}

/// Weighted mean of `(members, n_points)` values, or soft vote of `(members, n_points,
/// n_classes)` probabilities.
#[pyfunction]
#[pyo3(signature = (members, weights=None, n_jobs=None))]
fn mean_prediction(
    py: Python<'_>,
    members: &Bound<'_, PyAny>,
    weights: Option<PyReadonlyArray1<'_, f64>>,
    n_jobs: Option<usize>,
) -> PyResult<Py<PyAny>> {
    let ndim = members.getattr("ndim")?.extract::<usize>().unwrap_or(0);
    macro_rules! run {
        ($view:expr, $probabilities:expr) => {{
            let view = $view;
            let (m, n, c) = view.dim();
            let w = member_weights(weights, m)?;
            let out = zeros::<f64>(py, [n, c])?;
            // SAFETY: the array was just created here and is not shared with Python yet.
            let slice = unsafe { out.as_slice_mut() }.expect("a new array is contiguous");
            run_core(py, n_jobs, None, |pool, monitor| {
                core::mean_cells(view, $probabilities, &w, slice, pool, monitor)
            })?;
            Ok(if $probabilities {
                out.into_any().unbind()
            } else {
                out.reshape([n])?.into_any().unbind()
            })
        }};
    }
    if ndim == 3 {
        with_view!(FloatArray::<Ix3>::extract(members, "members")?, |v| run!(
            v, true
        ))
    } else {
        with_view!(FloatArray::<Ix2>::extract(members, "members")?, |v| run!(
            v.insert_axis(numpy::ndarray::Axis(2)),
            false
        ))
    }
}

/// Majority vote (lowest class index wins ties) and vote fractions of integer labels.
#[pyfunction]
#[pyo3(signature = (members, n_classes, weights=None, n_jobs=None))]
fn majority_vote<'py>(
    py: Python<'py>,
    members: PyReadonlyArray2<'py, i64>,
    n_classes: usize,
    weights: Option<PyReadonlyArray1<'py, f64>>,
    n_jobs: Option<usize>,
) -> PyResult<(Py<PyAny>, Py<PyAny>)> {
    let view = members.as_array();
    let (m, n) = view.dim();
    let w = member_weights(weights, m)?;
    let labels = zeros1::<i64>(py, n)?;
    let fractions = zeros::<f64>(py, [n, n_classes])?;
    // SAFETY: both arrays were just created here and are not shared with Python yet.
    let (l, f) = unsafe { (labels.as_slice_mut(), fractions.as_slice_mut()) };
    let (l, f) = (l.expect("contiguous"), f.expect("contiguous"));
    run_core(py, n_jobs, None, |pool, monitor| {
        core::majority_vote(view, n_classes, &w, l, f, pool, monitor)
    })?;
    Ok((labels.into_any().unbind(), fractions.into_any().unbind()))
}

fn moments_dict<'py>(
    py: Python<'py>,
    moments: &crate::numeric::Moments,
) -> PyResult<Bound<'py, PyDict>> {
    let d = PyDict::new(py);
    d.set_item("mean", moments.mean())?;
    d.set_item("variance", moments.variance(1))?;
    Ok(d)
}

/// The decomposition of one loss fed by chunks of points.
#[pyclass(module = "bagwise._core", name = "DecompositionAccumulator", frozen)]
pub struct PyDecompositionAccumulator {
    inner: Mutex<DecompositionState>,
}

#[pymethods]
impl PyDecompositionAccumulator {
    #[new]
    #[pyo3(signature = (loss, weights=None))]
    fn new(loss: &str, weights: Option<PyReadonlyArray1<'_, f64>>) -> PyResult<Self> {
        let loss = Loss::parse(loss).map_err(to_py_err)?;
        let weights = weights.map(|w| w.as_array().to_vec());
        Ok(PyDecompositionAccumulator {
            inner: Mutex::new(DecompositionState::new(loss, weights)),
        })
    }

    /// Adds a chunk; returns its per-point (ensemble, member, gain) losses.
    #[pyo3(signature = (members, y, n_classes=None, n_jobs=None))]
    fn update<'py>(
        &self,
        py: Python<'py>,
        members: &Bound<'py, PyAny>,
        y: &Bound<'py, PyAny>,
        n_classes: Option<usize>,
        n_jobs: Option<usize>,
    ) -> PyResult<(Py<PyAny>, Py<PyAny>, Py<PyAny>)> {
        let loss = self.inner.lock().expect("state lock").loss();
        let n_points = match members.getattr("shape")?.extract::<Vec<usize>>()?.get(1) {
            Some(&n) => n,
            None => 0,
        };
        let arrays = [
            zeros1::<f64>(py, n_points)?,
            zeros1::<f64>(py, n_points)?,
            zeros1::<f64>(py, n_points)?,
        ];
        // SAFETY: the arrays were just created here and are not shared with Python yet.
        let [e, m, g] = arrays
            .each_ref()
            .map(|a| unsafe { a.as_slice_mut() }.expect("contiguous"));
        let out = PointLosses {
            ensemble: e,
            member: m,
            gain: g,
        };
        let state = &self.inner;
        match loss {
            Loss::Squared => {
                let y = y.extract::<PyReadonlyArray1<'py, f64>>()?;
                let y = y.as_array();
                with_view!(FloatArray::<Ix2>::extract(members, "members")?, |v| {
                    run_core(py, n_jobs, None, |pool, mon| {
                        state
                            .lock()
                            .expect("state lock")
                            .update_values(v, y, out, pool, mon)
                    })
                })?
            }
            Loss::Brier => {
                let y = y.extract::<PyReadonlyArray1<'py, i64>>()?;
                let y = y.as_array();
                with_view!(FloatArray::<Ix3>::extract(members, "members")?, |v| {
                    run_core(py, n_jobs, None, |pool, mon| {
                        state
                            .lock()
                            .expect("state lock")
                            .update_probabilities(v, y, out, pool, mon)
                    })
                })?
            }
            Loss::ErrorRate => {
                let y = y.extract::<PyReadonlyArray1<'py, i64>>()?;
                let members = members.extract::<PyReadonlyArray2<'py, i64>>()?;
                let (view, y) = (members.as_array(), y.as_array());
                let k = n_classes.unwrap_or_else(|| core::classes_in(view, Some(y)));
                run_core(py, n_jobs, None, |pool, mon| {
                    state
                        .lock()
                        .expect("state lock")
                        .update_labels(view, y, k, out, pool, mon)
                })?
            }
        }
        let [e, m, g] = arrays;
        Ok((
            e.into_any().unbind(),
            m.into_any().unbind(),
            g.into_any().unbind(),
        ))
    }

    /// Number of members (None before the first chunk).
    #[getter]
    fn members(&self) -> Option<usize> {
        self.inner.lock().expect("state lock").members()
    }

    /// Moments of the per-point losses over all chunks so far.
    fn moments<'py>(&self, py: Python<'py>) -> PyResult<Bound<'py, PyDict>> {
        let sums = self.inner.lock().expect("state lock").moments();
        let d = PyDict::new(py);
        d.set_item("n_points", sums.ensemble.count())?;
        d.set_item("ensemble", moments_dict(py, &sums.ensemble)?)?;
        d.set_item("member", moments_dict(py, &sums.member)?)?;
        d.set_item("gain", moments_dict(py, &sums.gain)?)?;
        Ok(d)
    }
}

/// The ensemble-size curve fed by chunks of points.
#[pyclass(module = "bagwise._core", name = "SizeCurveAccumulator", frozen)]
pub struct PySizeCurveAccumulator {
    inner: Mutex<SizeCurveState>,
}

#[pymethods]
impl PySizeCurveAccumulator {
    #[new]
    fn new(
        loss: &str,
        members: usize,
        sizes: Vec<usize>,
        orders: usize,
        seed: u64,
    ) -> PyResult<Self> {
        let loss = Loss::parse(loss).map_err(to_py_err)?;
        SizeCurveState::new(loss, members, sizes, orders, seed)
            .map(|s| PySizeCurveAccumulator {
                inner: Mutex::new(s),
            })
            .map_err(to_py_err)
    }

    /// The member orders, (orders, members) int64.
    fn orders<'py>(&self, py: Python<'py>) -> PyResult<Py<PyAny>> {
        let state = self.inner.lock().expect("state lock");
        let rows: Vec<Vec<i64>> = state
            .orders()
            .iter()
            .map(|o| o.iter().map(|&b| b as i64).collect())
            .collect();
        Ok(numpy::PyArray2::from_vec2(py, &rows)?.into_any().unbind())
    }

    /// Adds a chunk of points.
    #[pyo3(signature = (members, y, n_classes=None, n_jobs=None))]
    fn update<'py>(
        &self,
        py: Python<'py>,
        members: &Bound<'py, PyAny>,
        y: &Bound<'py, PyAny>,
        n_classes: Option<usize>,
        n_jobs: Option<usize>,
    ) -> PyResult<()> {
        let state = &self.inner;
        if let Ok(y) = y.extract::<PyReadonlyArray1<'py, f64>>() {
            let y = y.as_array();
            return with_view!(FloatArray::<Ix2>::extract(members, "members")?, |v| {
                run_core(py, n_jobs, None, |pool, mon| {
                    state
                        .lock()
                        .expect("state lock")
                        .update_values(v, y, pool, mon)
                })
            });
        }
        let y = y.extract::<PyReadonlyArray1<'py, i64>>()?;
        let y = y.as_array();
        if let Ok(labels) = members.extract::<PyReadonlyArray2<'py, i64>>() {
            let view = labels.as_array();
            let k = n_classes.unwrap_or_else(|| core::classes_in(view, Some(y)));
            return run_core(py, n_jobs, None, |pool, mon| {
                state
                    .lock()
                    .expect("state lock")
                    .update_labels(view, y, k, pool, mon)
            });
        }
        with_view!(FloatArray::<Ix3>::extract(members, "members")?, |v| {
            run_core(py, n_jobs, None, |pool, mon| {
                state
                    .lock()
                    .expect("state lock")
                    .update_probabilities(v, y, pool, mon)
            })
        })
    }

    /// The curve over all points so far, as a dict of arrays and numbers.
    fn finish<'py>(&self, py: Python<'py>) -> PyResult<Bound<'py, PyDict>> {
        let curve = self
            .inner
            .lock()
            .expect("state lock")
            .finish()
            .map_err(to_py_err)?;
        let d = PyDict::new(py);
        let orders = curve.per_order.len() / curve.sizes.len();
        let per_order =
            numpy::PyArray1::from_vec(py, curve.per_order).reshape([orders, curve.sizes.len()])?;
        d.set_item(
            "sizes",
            curve.sizes.iter().map(|&k| k as i64).collect::<Vec<_>>(),
        )?;
        d.set_item("curve", numpy::PyArray1::from_vec(py, curve.curve))?;
        d.set_item(
            "standard_error",
            numpy::PyArray1::from_vec(py, curve.standard_error),
        )?;
        d.set_item("per_order", per_order)?;
        d.set_item("full_loss", curve.full_loss)?;
        d.set_item("spread", curve.spread)?;
        d.set_item("n_points", curve.n_points)?;
        d.set_item("members", curve.members)?;
        Ok(d)
    }
}

/// Residual variances and mean pairwise covariance / correlation without the M × M matrix.
#[pyfunction]
#[pyo3(signature = (members, y, n_jobs=None))]
fn residual_correlation<'py>(
    py: Python<'py>,
    members: &Bound<'py, PyAny>,
    y: PyReadonlyArray1<'py, f64>,
    n_jobs: Option<usize>,
) -> PyResult<Bound<'py, PyDict>> {
    let y = y.as_array();
    let result = with_view!(FloatArray::<Ix2>::extract(members, "members")?, |v| {
        run_core(py, n_jobs, None, |pool, mon| {
            core::residual_correlation(v, y, pool, mon)
        })
    })?;
    let d = PyDict::new(py);
    d.set_item(
        "member_variance",
        numpy::PyArray1::from_vec(py, result.member_variance),
    )?;
    d.set_item("mean_variance", result.mean_variance)?;
    d.set_item("mean_covariance", result.mean_covariance)?;
    d.set_item("mean_correlation", result.mean_correlation)?;
    d.set_item("constant_members", result.constant_members)?;
    Ok(d)
}

/// The full (members, members) residual correlation matrix.
#[pyfunction]
#[pyo3(signature = (members, y, n_jobs=None))]
fn correlation_matrix<'py>(
    py: Python<'py>,
    members: &Bound<'py, PyAny>,
    y: PyReadonlyArray1<'py, f64>,
    n_jobs: Option<usize>,
) -> PyResult<Py<PyAny>> {
    let y = y.as_array();
    let m = members
        .getattr("shape")?
        .extract::<Vec<usize>>()?
        .first()
        .copied()
        .unwrap_or(0);
    let out = zeros::<f64>(py, [m, m])?;
    // SAFETY: the array was just created here and is not shared with Python yet.
    let slice = unsafe { out.as_slice_mut() }.expect("a new array is contiguous");
    with_view!(FloatArray::<Ix2>::extract(members, "members")?, |v| {
        run_core(py, n_jobs, None, |pool, mon| {
            core::correlation_matrix(v, y, slice, pool, mon)
        })
    })?;
    Ok(out.into_any().unbind())
}

pub(super) fn register(m: &Bound<'_, PyModule>) -> PyResult<()> {
    m.add_function(wrap_pyfunction!(mean_prediction, m)?)?;
    m.add_function(wrap_pyfunction!(majority_vote, m)?)?;
    m.add_function(wrap_pyfunction!(residual_correlation, m)?)?;
    m.add_function(wrap_pyfunction!(correlation_matrix, m)?)?;
    m.add_class::<PyDecompositionAccumulator>()?;
    m.add_class::<PySizeCurveAccumulator>()
}
