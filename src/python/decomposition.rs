//! Bindings of [`crate::decomposition`]: the stream state (which `decompose` also runs
//! through) and its typed result.

use std::sync::Mutex;

use numpy::{PyArrayMethods, PyReadonlyArray1};
use pyo3::prelude::*;
use pyo3::types::PyBytes;

use super::aggregation::zeros1;
use super::members::{with_members, MembersArray, TargetArray};
use super::{run_core, to_py_err};
use crate::decomposition::{DecompositionState, Loss, PointLosses};
use crate::members::{classes_in, MergeableState};

/// Means over the points of a decomposition's per-point losses.
#[pyclass(module = "bagwise._core", frozen, get_all)]
pub struct DecompositionMeans {
    /// Number of points.
    n_points: u64,
    /// Mean loss of the combined prediction.
    ensemble_loss: f64,
    /// Mean (weighted) member loss.
    member_loss: f64,
    /// Mean ambiguity (squared error, Brier score) or vote gain (error rate).
    gain: f64,
}

/// The decomposition of one loss fed by chunks of points.
#[pyclass(module = "bagwise._core", name = "DecompositionAccumulator", frozen)]
pub struct PyDecompositionAccumulator {
    inner: Mutex<DecompositionState>,
}

impl PyDecompositionAccumulator {
    fn state(&self) -> std::sync::MutexGuard<'_, DecompositionState> {
        self.inner.lock().unwrap_or_else(|e| e.into_inner())
    }
}

#[pymethods]
impl PyDecompositionAccumulator {
    #[new]
    #[pyo3(signature = (loss, member_weights=None))]
    fn new(loss: &str, member_weights: Option<PyReadonlyArray1<'_, f64>>) -> PyResult<Self> {
        let loss = Loss::parse(loss).map_err(to_py_err)?;
        let weights = member_weights.map(|w| w.as_array().to_vec());
        Ok(PyDecompositionAccumulator {
            inner: Mutex::new(DecompositionState::new(loss, weights)),
        })
    }

    /// Adds a chunk; returns its per-point (ensemble, member, gain) losses.
    #[pyo3(signature = (members, y, n_classes=None, n_jobs=None, progress=None))]
    fn update<'py>(
        &self,
        py: Python<'py>,
        members: &Bound<'py, PyAny>,
        y: &Bound<'py, PyAny>,
        n_classes: Option<usize>,
        n_jobs: Option<usize>,
        progress: Option<Py<PyAny>>,
    ) -> PyResult<(Py<PyAny>, Py<PyAny>, Py<PyAny>)> {
        let (members, y) = (MembersArray::extract(members)?, TargetArray::extract(y)?);
        let n = members.dim().1;
        let arrays = [
            zeros1::<f64>(py, n)?,
            zeros1::<f64>(py, n)?,
            zeros1::<f64>(py, n)?,
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
            |pool, mon| { self.state().update(view, y, out, pool, mon) }
        ))?;
        let [e, m, g] = arrays.map(|a| a.into_any().unbind());
        Ok((e, m, g))
    }

    /// Adds the points of `other` after this stream's points.
    fn merge(&self, other: &Self) -> PyResult<()> {
        let other = other.state().clone();
        self.state().merge(other).map_err(to_py_err)
    }

    /// Number of members (None before the first chunk).
    #[getter]
    fn n_members(&self) -> Option<usize> {
        self.state().members()
    }

    /// The means of the per-point losses over all chunks so far.
    fn result(&self) -> PyResult<DecompositionMeans> {
        let sums = self.state().finish().map_err(to_py_err)?;
        Ok(DecompositionMeans {
            n_points: sums.ensemble.count(),
            ensemble_loss: sums.ensemble.mean(),
            member_loss: sums.member.mean(),
            gain: sums.gain.mean(),
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
        let state = DecompositionState::from_bytes(data).map_err(to_py_err)?;
        Ok(PyDecompositionAccumulator {
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
    m.add_class::<DecompositionMeans>()?;
    m.add_class::<PyDecompositionAccumulator>()
}
