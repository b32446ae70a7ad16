//! Bindings of [`crate::size_curve`]: the stream state (which `size_curve` also runs
//! through) and its typed result.

use std::sync::Mutex;

use numpy::{PyArray1, PyArray2, PyArrayMethods};
use pyo3::prelude::*;
use pyo3::types::PyBytes;

use super::members::{with_members, MembersArray, TargetArray};
use super::{run_core, to_py_err};
use crate::decomposition::Loss;
use crate::members::{classes_in, MergeableState};
use crate::size_curve::SizeCurveState;

/// The finished size curve.
#[pyclass(module = "bagwise._core", frozen, get_all)]
pub struct SizeCurveTable {
    /// Ensemble sizes k, int64.
    sizes: Py<PyArray1<i64>>,
    /// Mean loss over orders at every size.
    curve: Py<PyArray1<f64>>,
    /// Standard error of `curve` across orders.
    std_error: Py<PyArray1<f64>>,
    /// Loss of every order at every size, (orders, sizes).
    per_order: Py<PyArray2<f64>>,
    /// Loss of the ensemble of all members.
    ensemble_loss: f64,
    /// W, the mean over points of the across-member variance (NaN for error rates).
    mean_within: f64,
    /// Number of points.
    n_points: u64,
    /// Number of members.
    n_members: usize,
}

/// The ensemble-size curve fed by chunks of points.
#[pyclass(module = "bagwise._core", name = "SizeCurveAccumulator", frozen)]
pub struct PySizeCurveAccumulator {
    inner: Mutex<SizeCurveState>,
}

impl PySizeCurveAccumulator {
    fn state(&self) -> std::sync::MutexGuard<'_, SizeCurveState> {
        self.inner.lock().unwrap_or_else(|e| e.into_inner())
    }
}

#[pymethods]
impl PySizeCurveAccumulator {
    #[new]
    fn new(
        loss: &str,
        n_members: usize,
        sizes: Vec<usize>,
        orders: usize,
        seed: u64,
    ) -> PyResult<Self> {
        let loss = Loss::parse(loss).map_err(to_py_err)?;
        let state = SizeCurveState::new(loss, n_members, sizes, orders, seed);
        Ok(PySizeCurveAccumulator {
            inner: Mutex::new(state.map_err(to_py_err)?),
        })
    }

    /// The member orders, (orders, members) int64.
    fn orders<'py>(&self, py: Python<'py>) -> PyResult<Bound<'py, PyArray2<i64>>> {
        let rows: Vec<Vec<i64>> = (self.state().orders().iter())
            .map(|o| o.iter().map(|&b| b as i64).collect())
            .collect();
        Ok(PyArray2::from_vec2(py, &rows)?)
    }

    /// Adds a chunk of points.
    #[pyo3(signature = (members, y, n_classes=None, n_jobs=None, progress=None))]
    fn update<'py>(
        &self,
        py: Python<'py>,
        members: &Bound<'py, PyAny>,
        y: &Bound<'py, PyAny>,
        n_classes: Option<usize>,
        n_jobs: Option<usize>,
        progress: Option<Py<PyAny>>,
    ) -> PyResult<()> {
        let (members, y) = (MembersArray::extract(members)?, TargetArray::extract(y)?);
        let k = n_classes.unwrap_or_else(|| match (&members, &y) {
            (MembersArray::Labels(l), TargetArray::Labels(y)) => {
                classes_in(l.as_array(), Some(y.as_array()))
            }
            _ => 0,
        });
        let y = y.view();
        with_members!(members, k, |view| run_core(
            py,
            n_jobs,
            progress,
            |pool, mon| { self.state().update(view, y, pool, mon) }
        ))
    }

    /// Adds the points of `other` (set up alike) after this stream's points.
    fn merge(&self, other: &Self) -> PyResult<()> {
        let other = other.state().clone();
        self.state().merge(other).map_err(to_py_err)
    }

    /// The curve over all points so far.
    fn result(&self, py: Python<'_>) -> PyResult<SizeCurveTable> {
        let curve = self.state().finish().map_err(to_py_err)?;
        let shape = [curve.per_order.len() / curve.sizes.len(), curve.sizes.len()];
        let sizes = curve.sizes.iter().map(|&k| k as i64).collect();
        Ok(SizeCurveTable {
            sizes: PyArray1::from_vec(py, sizes).unbind(),
            curve: PyArray1::from_vec(py, curve.curve).unbind(),
            std_error: PyArray1::from_vec(py, curve.std_error).unbind(),
            per_order: PyArray1::from_vec(py, curve.per_order)
                .reshape(shape)?
                .unbind(),
            ensemble_loss: curve.ensemble_loss,
            mean_within: curve.mean_within,
            n_points: curve.n_points,
            n_members: curve.n_members,
        })
    }

    /// The state as bytes (see `from_bytes`).
    fn to_bytes<'py>(&self, py: Python<'py>) -> PyResult<Bound<'py, PyBytes>> {
        let bytes = self.state().to_bytes().map_err(to_py_err)?;
        Ok(PyBytes::new(py, &bytes))
    }

    /// A state stored by `to_bytes`.
    #[staticmethod]
    fn from_bytes(data: &[u8]) -> PyResult<Self> {
        let state = SizeCurveState::from_bytes(data).map_err(to_py_err)?;
        Ok(PySizeCurveAccumulator {
            inner: Mutex::new(state),
        })
    }

    fn __reduce__<'py>(
        slf: &Bound<'py, Self>,
    ) -> PyResult<(Bound<'py, PyAny>, (Bound<'py, PyBytes>,))> {
        let py = slf.py();
        Ok((
            slf.get_type().getattr("from_bytes")?,
            (slf.get().to_bytes(py)?,),
        ))
    }
}

pub(super) fn register(m: &Bound<'_, PyModule>) -> PyResult<()> {
    m.add_class::<SizeCurveTable>()?;
    m.add_class::<PySizeCurveAccumulator>()
}
