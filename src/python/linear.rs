//! Bindings of [`crate::learners::linear`], plus the in-bag counts reader shared by the
//! native learners.

use numpy::ndarray::Axis;
use numpy::{IntoPyArray, PyArrayMethods, PyReadonlyArray1, PyReadonlyArray2};
use pyo3::exceptions::{PyTypeError, PyValueError};
use pyo3::prelude::*;
use pyo3::types::PyBytes;

use super::{run_core, to_py_err, zeros, FloatArray};
use crate::learners::linear::LinearEnsemble;
use crate::learners::{bags, Bag};

/// Reads members × rows in-bag counts (any unsigned integer dtype) or float64 weights.
pub(super) fn read_bags(counts: &Bound<'_, PyAny>, n_rows: usize) -> PyResult<Vec<Bag>> {
    macro_rules! try_as {
        ($($t:ty),*) => {$(
            if let Ok(a) = counts.extract::<PyReadonlyArray2<'_, $t>>() {
                return bags(a.as_array(), n_rows).map_err(to_py_err);
            }
        )*};
    }
    try_as!(u8, u16, u32, u64, f64);
    Err(PyTypeError::new_err(
        "`counts`: expected a 2-D array of unsigned integer counts or float64 weights",
    ))
}

/// Number of rows of a float design.
pub(super) fn rows_of(x: &FloatArray<'_, numpy::Ix2>) -> usize {
    with_float!(x, |a| a.nrows())
}

/// Decodes a postcard payload, naming `data` on failure.
pub(super) fn decode<T: serde::de::DeserializeOwned>(data: &[u8], what: &str) -> PyResult<T> {
    postcard::from_bytes(data)
        .map_err(|e| PyValueError::new_err(format!("`data`: is not a valid {what} encoding ({e})")))
}

/// Encodes with postcard.
pub(super) fn encode<'py, T: serde::Serialize>(
    py: Python<'py>,
    value: &T,
) -> PyResult<Bound<'py, PyBytes>> {
    let bytes = postcard::to_allocvec(value)
        .map_err(|e| PyValueError::new_err(format!("cannot encode the ensemble: {e}")))?;
    Ok(PyBytes::new(py, &bytes))
}

/// Bagged least squares / ridge regression members.
#[pyclass(module = "bagwise._core", name = "LinearEnsemble", frozen)]
pub struct PyLinearEnsemble {
    inner: LinearEnsemble,
}

#[pymethods]
impl PyLinearEnsemble {
    #[staticmethod]
    #[pyo3(signature = (x, y, counts, *, task="regression", n_classes=None, penalty=0.0, n_jobs=None, progress=None))]
    #[allow(clippy::too_many_arguments)]
    fn fit(
        py: Python<'_>,
        x: &Bound<'_, PyAny>,
        y: PyReadonlyArray1<'_, f64>,
        counts: &Bound<'_, PyAny>,
        task: &str,
        n_classes: Option<usize>,
        penalty: f64,
        n_jobs: Option<usize>,
        progress: Option<Py<PyAny>>,
    ) -> PyResult<Self> {
        if task != "regression" || n_classes.is_some() {
            return Err(PyValueError::new_err(
                "`task`: the linear learner is for regression only",
            ));
        }
        let x = FloatArray::<numpy::Ix2>::extract(x, "x")?;
        let y = y.as_array();
        let inner = match &x {
            FloatArray::F32(a) => {
                let (a, b) = (a.as_array(), read_bags(counts, a.as_array().nrows())?);
                run_core(py, n_jobs, progress, |pool, monitor| {
                    LinearEnsemble::fit(a, y, &b, penalty, pool, monitor)
                })
            }
            FloatArray::F64(a) => {
                let (a, b) = (a.as_array(), read_bags(counts, a.as_array().nrows())?);
                run_core(py, n_jobs, progress, |pool, monitor| {
                    LinearEnsemble::fit(a, y, &b, penalty, pool, monitor)
                })
            }
        }?;
        Ok(PyLinearEnsemble { inner })
    }

    /// (members, n_points) float64.
    #[pyo3(signature = (x, n_jobs=None))]
    fn member_predictions(
        &self,
        py: Python<'_>,
        x: &Bound<'_, PyAny>,
        n_jobs: Option<usize>,
    ) -> PyResult<Py<PyAny>> {
        let x = FloatArray::<numpy::Ix2>::extract(x, "x")?;
        let n = rows_of(&x);
        let array = zeros::<f64>(py, [self.inner.members(), n])?;
        // SAFETY: the array was just created here and is not shared with Python yet.
        let out = unsafe { array.as_slice_mut() }.expect("a new array is contiguous");
        with_float!(x, |a| run_core(py, n_jobs, None, |pool, _| {
            self.inner.member_predictions_into(a, out, pool)
        }))?;
        Ok(array.into_any().unbind())
    }

    /// The ensemble mean, (n_points,) float64.
    #[pyo3(signature = (x, n_jobs=None))]
    fn predict(
        &self,
        py: Python<'_>,
        x: &Bound<'_, PyAny>,
        n_jobs: Option<usize>,
    ) -> PyResult<Py<PyAny>> {
        let all = self.member_predictions(py, x, n_jobs)?;
        let all = all.bind(py).extract::<PyReadonlyArray2<'_, f64>>()?;
        let mean = all
            .as_array()
            .mean_axis(Axis(0))
            .expect("at least one member");
        Ok(mean.into_pyarray(py).into_any().unbind())
    }

    /// (members, n_rows) float64, NaN where the member saw the row.
    #[pyo3(signature = (x, counts, n_jobs=None))]
    fn out_of_bag_predictions(
        &self,
        py: Python<'_>,
        x: &Bound<'_, PyAny>,
        counts: &Bound<'_, PyAny>,
        n_jobs: Option<usize>,
    ) -> PyResult<Py<PyAny>> {
        let x = FloatArray::<numpy::Ix2>::extract(x, "x")?;
        let n = rows_of(&x);
        let b = read_bags(counts, n)?;
        let array = zeros::<f64>(py, [self.inner.members(), n])?;
        // SAFETY: the array was just created here and is not shared with Python yet.
        let out = unsafe { array.as_slice_mut() }.expect("a new array is contiguous");
        with_float!(x, |a| run_core(py, n_jobs, None, |pool, _| {
            self.inner.out_of_bag_into(a, &b, out, pool)
        }))?;
        Ok(array.into_any().unbind())
    }

    #[getter]
    fn members(&self) -> usize {
        self.inner.members()
    }

    #[getter]
    fn n_features(&self) -> usize {
        self.inner.n_features()
    }

    /// 0: the linear learner does regression only.
    #[getter]
    fn n_classes(&self) -> usize {
        0
    }

    #[getter]
    fn penalty(&self) -> f64 {
        self.inner.penalty()
    }

    /// (members,) float64.
    #[getter]
    fn intercepts(&self, py: Python<'_>) -> Py<PyAny> {
        self.inner
            .intercepts()
            .to_vec()
            .into_pyarray(py)
            .into_any()
            .unbind()
    }

    /// (members, n_features) float64.
    #[getter]
    fn coefficients(&self, py: Python<'_>) -> PyResult<Py<PyAny>> {
        let flat = self.inner.coefficients().to_vec().into_pyarray(py);
        Ok(flat
            .reshape([self.inner.members(), self.inner.n_features()])?
            .into_any()
            .unbind())
    }

    fn to_bytes<'py>(&self, py: Python<'py>) -> PyResult<Bound<'py, PyBytes>> {
        encode(py, &self.inner)
    }

    #[staticmethod]
    fn from_bytes(data: &[u8]) -> PyResult<Self> {
        let inner: LinearEnsemble = decode(data, "linear ensemble")?;
        inner.validate().map_err(to_py_err)?;
        Ok(PyLinearEnsemble { inner })
    }

    fn __reduce__<'py>(
        &self,
        py: Python<'py>,
    ) -> PyResult<(Bound<'py, PyAny>, (Bound<'py, PyBytes>,))> {
        let rebuild = py.get_type::<Self>().getattr("from_bytes")?;
        Ok((rebuild, (self.to_bytes(py)?,)))
    }

    fn __repr__(&self) -> String {
        format!(
            "LinearEnsemble(members={}, n_features={}, penalty={})",
            self.inner.members(),
            self.inner.n_features(),
            self.inner.penalty()
        )
    }
}

pub(super) fn register(m: &Bound<'_, PyModule>) -> PyResult<()> {
    m.add_class::<PyLinearEnsemble>()
}
