//! Bindings of [`crate::uncertainty`].

use std::sync::Mutex;

use numpy::IntoPyArray;
use pyo3::exceptions::PyValueError;
use pyo3::prelude::*;
use pyo3::types::PyBytes;

use super::{run_core, to_py_err, CountArray, FloatArray};
use crate::members::MergeableState;
use crate::uncertainty::{
    little_bags_variance as core_little_bags, CountGram, CountGramState, DrawKind, GramCount,
    Method,
};

fn parse_kind(kind: Option<&str>, subsample_rows: Option<usize>) -> PyResult<Option<DrawKind>> {
    match (kind, subsample_rows) {
        (None, _) => Ok(None),
        (Some("bootstrap"), _) => Ok(Some(DrawKind::Bootstrap)),
        (Some("subsample"), Some(rows)) => Ok(Some(DrawKind::Subsample { rows })),
        (Some("subsample"), None) => Err(PyValueError::new_err(
            "`scheme`: 'subsample' needs the number of rows per member",
        )),
        (Some(other), _) => Err(PyValueError::new_err(format!(
            "`scheme`: expected 'bootstrap', 'subsample' or None, got {other:?}"
        ))),
    }
}

fn gram_new<C: GramCount>(
    py: Python<'_>,
    counts: numpy::ndarray::ArrayView2<'_, C>,
    kind: Option<DrawKind>,
    jackknife: bool,
    n_jobs: Option<usize>,
    progress: Option<Py<PyAny>>,
) -> PyResult<CountGram> {
    run_core(py, n_jobs, progress, |pool, monitor| {
        let mut gram = CountGram::new(counts, kind, pool, monitor)?;
        if jackknife {
            gram.add_out_of_bag_gram(counts, pool, monitor)?;
        }
        Ok(gram)
    })
}

/// Gram matrices of one ensemble's in-bag counts, reused for any prediction points.
#[pyclass(module = "bagwise._core", name = "CountGram", frozen)]
pub struct PyCountGram {
    inner: CountGram,
}

#[pymethods]
impl PyCountGram {
    #[new]
    #[pyo3(signature = (counts, *, scheme=None, subsample_rows=None, jackknife=false, n_jobs=None, progress=None))]
    fn new(
        py: Python<'_>,
        counts: &Bound<'_, PyAny>,
        scheme: Option<&str>,
        subsample_rows: Option<usize>,
        jackknife: bool,
        n_jobs: Option<usize>,
        progress: Option<Py<PyAny>>,
    ) -> PyResult<Self> {
        let kind = parse_kind(scheme, subsample_rows)?;
        let counts = CountArray::extract(counts)?;
        let inner = with_counts!(counts, |view| gram_new(
            py, view, kind, jackknife, n_jobs, progress
        ))?;
        Ok(PyCountGram { inner })
    }

    /// (raw, correction, within, mean) per point for `members` (n_members, n_points).
    #[pyo3(signature = (members, method, n_jobs=None, progress=None))]
    #[allow(clippy::type_complexity)]
    fn variance(
        &self,
        py: Python<'_>,
        members: &Bound<'_, PyAny>,
        method: &str,
        n_jobs: Option<usize>,
        progress: Option<Py<PyAny>>,
    ) -> PyResult<(Py<PyAny>, Py<PyAny>, Py<PyAny>, Py<PyAny>)> {
        let method = Method::parse(method).map_err(to_py_err)?;
        let members = FloatArray::<numpy::Ix2>::extract(members, "members")?;
        let estimate = with_float!(members, |view| {
            run_core(py, n_jobs, progress, |pool, monitor| {
                self.inner.variance(view, method, pool, monitor)
            })
        })?;
        Ok(estimate_arrays(
            py,
            [
                estimate.raw,
                estimate.correction,
                estimate.within,
                estimate.mean,
            ],
        ))
    }

    /// Members B (rows of the counts).
    #[getter]
    fn n_members(&self) -> usize {
        self.inner.n_members()
    }

    /// Training rows n (columns of the counts).
    #[getter]
    fn n_rows(&self) -> usize {
        self.inner.n_rows()
    }

    /// 'bootstrap' or 'subsample'.
    #[getter]
    fn scheme(&self) -> &'static str {
        match self.inner.kind() {
            DrawKind::Bootstrap => "bootstrap",
            DrawKind::Subsample { .. } => "subsample",
        }
    }

    /// Rows per member for subsamples, else None.
    #[getter]
    fn subsample_rows(&self) -> Option<usize> {
        match self.inner.kind() {
            DrawKind::Bootstrap => None,
            DrawKind::Subsample { rows } => Some(rows),
        }
    }

    #[getter]
    fn has_jackknife(&self) -> bool {
        self.inner.has_out_of_bag_gram()
    }

    #[getter]
    fn rows_never_out_of_bag(&self) -> usize {
        self.inner.rows_never_out_of_bag()
    }

    /// G = N Nᵀ as a (n_members, n_members) float64 array (exact integers).
    #[getter]
    fn gram(&self, py: Python<'_>) -> Py<PyAny> {
        self.inner
            .gram()
            .clone()
            .into_pyarray(py)
            .into_any()
            .unbind()
    }

    fn to_bytes<'py>(&self, py: Python<'py>) -> Bound<'py, PyBytes> {
        PyBytes::new(py, &self.inner.to_bytes())
    }

    #[staticmethod]
    fn from_bytes(data: &[u8]) -> PyResult<Self> {
        CountGram::from_bytes(data)
            .map(|inner| PyCountGram { inner })
            .map_err(to_py_err)
    }

    fn __reduce__<'py>(
        slf: &Bound<'py, Self>,
    ) -> PyResult<(Bound<'py, PyAny>, (Bound<'py, PyBytes>,))> {
        let py = slf.py();
        let from_bytes = py.get_type::<PyCountGram>().getattr("from_bytes")?;
        Ok((from_bytes, (slf.get().to_bytes(py),)))
    }
}

/// (S²_B, W/ℓ, W, mean) per point for little-bags `members` (n_members, n_points) laid out
/// in consecutive groups of `group_size`.
#[pyfunction]
#[pyo3(signature = (members, group_size, n_jobs=None, progress=None))]
#[allow(clippy::type_complexity)]
fn little_bags_variance(
    py: Python<'_>,
    members: &Bound<'_, PyAny>,
    group_size: usize,
    n_jobs: Option<usize>,
    progress: Option<Py<PyAny>>,
) -> PyResult<(Py<PyAny>, Py<PyAny>, Py<PyAny>, Py<PyAny>)> {
    let members = FloatArray::<numpy::Ix2>::extract(members, "members")?;
    let estimate = with_float!(members, |view| {
        run_core(py, n_jobs, progress, |pool, monitor| {
            core_little_bags(view, group_size, pool, monitor)
        })
    })?;
    Ok(estimate_arrays(
        py,
        [
            estimate.raw,
            estimate.correction,
            estimate.within,
            estimate.mean,
        ],
    ))
}

/// The count Gram fed by chunks of training rows (columns of `counts`).
#[pyclass(module = "bagwise._core", name = "CountGramAccumulator", frozen)]
pub struct PyCountGramAccumulator {
    inner: Mutex<CountGramState>,
}

impl PyCountGramAccumulator {
    fn state(&self) -> std::sync::MutexGuard<'_, CountGramState> {
        self.inner.lock().unwrap_or_else(|e| e.into_inner())
    }
}

#[pymethods]
impl PyCountGramAccumulator {
    #[new]
    #[pyo3(signature = (jackknife=false))]
    fn new(jackknife: bool) -> Self {
        let inner = Mutex::new(CountGramState::new(jackknife));
        PyCountGramAccumulator { inner }
    }

    /// Adds the rows of `counts` (n_members, rows of the chunk).
    #[pyo3(signature = (counts, n_jobs=None, progress=None))]
    fn update(
        &self,
        py: Python<'_>,
        counts: &Bound<'_, PyAny>,
        n_jobs: Option<usize>,
        progress: Option<Py<PyAny>>,
    ) -> PyResult<()> {
        let counts = CountArray::extract(counts)?;
        with_counts!(counts, |view| run_core(
            py,
            n_jobs,
            progress,
            |pool, monitor| self.state().update(view, pool, monitor)
        ))
    }

    /// Adds the rows of `other` (exact integer sums).
    fn merge(&self, other: &Self) -> PyResult<()> {
        let other = other.state().clone();
        self.state().merge(other).map_err(to_py_err)
    }

    /// The CountGram of all rows so far (`scheme` as in `CountGram`).
    #[pyo3(signature = (scheme=None, subsample_rows=None))]
    fn finish(&self, scheme: Option<&str>, subsample_rows: Option<usize>) -> PyResult<PyCountGram> {
        let kind = parse_kind(scheme, subsample_rows)?;
        let inner = self.state().finish_as(kind).map_err(to_py_err)?;
        Ok(PyCountGram { inner })
    }

    #[getter]
    fn n_members(&self) -> Option<usize> {
        self.state().n_members()
    }

    #[getter]
    fn n_rows(&self) -> u64 {
        self.state().n_rows()
    }

    #[getter]
    fn max_count(&self) -> u64 {
        self.state().max_count()
    }

    #[getter]
    fn jackknife(&self) -> bool {
        self.state().jackknife()
    }

    /// Each member's total count over the rows so far (uint64).
    #[getter]
    fn row_totals(&self, py: Python<'_>) -> Py<PyAny> {
        let totals = self.state().row_totals().to_vec();
        totals.into_pyarray(py).into_any().unbind()
    }

    fn to_bytes<'py>(&self, py: Python<'py>) -> PyResult<Bound<'py, PyBytes>> {
        let bytes = self.state().to_bytes().map_err(to_py_err)?;
        Ok(PyBytes::new(py, &bytes))
    }

    #[staticmethod]
    fn from_bytes(data: &[u8]) -> PyResult<Self> {
        let state = CountGramState::from_bytes(data).map_err(to_py_err)?;
        Ok(PyCountGramAccumulator {
            inner: Mutex::new(state),
        })
    }

    fn __reduce__<'py>(
        slf: &Bound<'py, Self>,
    ) -> PyResult<(Bound<'py, PyAny>, (Bound<'py, PyBytes>,))> {
        let py = slf.py();
        let from_bytes = slf.get_type().getattr("from_bytes")?;
        Ok((from_bytes, (slf.get().to_bytes(py)?,)))
    }
}

pub(super) fn register(m: &Bound<'_, PyModule>) -> PyResult<()> {
    m.add_class::<PyCountGram>()?;
    m.add_class::<PyCountGramAccumulator>()?;
    m.add_function(wrap_pyfunction!(little_bags_variance, m)?)
}

/// The four per-value arrays of a variance estimate (raw, correction, within, mean) as numpy.
fn estimate_arrays(
    py: Python<'_>,
    parts: [numpy::ndarray::Array1<f64>; 4],
) -> (Py<PyAny>, Py<PyAny>, Py<PyAny>, Py<PyAny>) {
    let [raw, correction, within, mean] = parts.map(|a| a.into_pyarray(py).into_any().unbind());
    (raw, correction, within, mean)
}
