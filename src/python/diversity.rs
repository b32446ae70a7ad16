//! Bindings of [`crate::diversity`].

use std::sync::Mutex;

use numpy::ndarray::Ix3;
use numpy::{PyArray1, PyArray2, PyArrayMethods, PyReadonlyArray1, PyReadonlyArray2};
use pyo3::prelude::*;
use pyo3::types::PyBytes;

use super::{run_core, to_py_err, FloatArray};
use crate::diversity::{Diversity, DiversityState, Predictions};

/// The diversity counts of a classifier ensemble fed by chunks of points.
#[pyclass(module = "bagwise._core", name = "DiversityAccumulator", frozen)]
pub struct PyDiversityAccumulator {
    inner: Mutex<DiversityState>,
}

impl PyDiversityAccumulator {
    fn state(&self) -> std::sync::MutexGuard<'_, DiversityState> {
        self.inner.lock().expect("state lock")
    }
}

#[pymethods]
impl PyDiversityAccumulator {
    #[new]
    fn new(n_members: usize, n_classes: usize) -> PyResult<Self> {
        DiversityState::new(n_members, n_classes)
            .map(|s| PyDiversityAccumulator {
                inner: Mutex::new(s),
            })
            .map_err(to_py_err)
    }

    /// Adds int64 `(n_members, n_points)` labels or float `(n_members, n_points, n_classes)`
    /// probabilities of a chunk of points with their int64 targets.
    #[pyo3(signature = (members, y, n_jobs=None, progress=None))]
    fn update<'py>(
        &self,
        py: Python<'py>,
        members: &Bound<'py, PyAny>,
        y: PyReadonlyArray1<'py, i64>,
        n_jobs: Option<usize>,
        progress: Option<Py<PyAny>>,
    ) -> PyResult<()> {
        let (y, state) = (y.as_array(), &self.inner);
        if let Ok(labels) = members.extract::<PyReadonlyArray2<'py, i64>>() {
            let p = Predictions::<f64>::Labels(labels.as_array());
            return run_core(py, n_jobs, progress, |pool, mon| {
                state.lock().expect("state lock").update(p, y, pool, mon)
            });
        }
        with_float!(FloatArray::<Ix3>::extract(members, "members")?, |v| {
            run_core(py, n_jobs, progress, |pool, mon| {
                let p = Predictions::Probabilities(v);
                state.lock().expect("state lock").update(p, y, pool, mon)
            })
        })
    }

    /// Adds the counts of `other` (other points of the same members), checked for overflow.
    fn merge(&self, other: &PyDiversityAccumulator) -> PyResult<()> {
        let other = other.state().clone();
        self.state().merge(&other).map_err(to_py_err)
    }

    /// Number of members.
    #[getter]
    fn n_members(&self) -> usize {
        self.state().members()
    }

    /// Number of classes.
    #[getter]
    fn n_classes(&self) -> usize {
        self.state().n_classes()
    }

    /// Number of points added so far.
    #[getter]
    fn n_points(&self) -> u64 {
        self.state().n_points()
    }

    /// The measures over all points so far.
    fn result(&self) -> PyResult<PyDiversityMeasures> {
        let inner = self.state().finish().map_err(to_py_err)?;
        Ok(PyDiversityMeasures { inner })
    }

    /// The counts as bytes (postcard behind a version number).
    fn to_bytes<'py>(&self, py: Python<'py>) -> Bound<'py, PyBytes> {
        PyBytes::new(py, &self.state().to_bytes())
    }

    #[staticmethod]
    fn from_bytes(data: &[u8]) -> PyResult<Self> {
        DiversityState::from_bytes(data)
            .map(|s| PyDiversityAccumulator {
                inner: Mutex::new(s),
            })
            .map_err(to_py_err)
    }

    fn __reduce__<'py>(
        slf: &Bound<'py, Self>,
    ) -> PyResult<(Bound<'py, PyAny>, (Bound<'py, PyBytes>,))> {
        let py = slf.py();
        let from_bytes = py
            .get_type::<PyDiversityAccumulator>()
            .getattr("from_bytes")?;
        Ok((from_bytes, (slf.get().to_bytes(py),)))
    }
}

/// The diversity measures of an accumulator, named as in the glossary.
#[pyclass(module = "bagwise._core", name = "DiversityMeasures", frozen)]
pub struct PyDiversityMeasures {
    inner: Diversity,
}

/// All getters of [`PyDiversityMeasures`] in one `#[pymethods]` block: `(n_members,
/// n_members)` float64 matrices from row-major fields, then copied scalars.
macro_rules! measure_getters {
    (matrices: $($matrix:ident => $mfield:ident),*; scalars: $($name:ident => $field:ident: $t:ty),*) => {
        #[pymethods]
        impl PyDiversityMeasures {
            $(
                #[getter]
                fn $matrix<'py>(&self, py: Python<'py>) -> PyResult<Bound<'py, PyArray2<f64>>> {
                    let m = self.inner.members;
                    PyArray1::from_slice(py, &self.inner.$mfield).reshape([m, m])
                }
            )*
            $(
                #[getter]
                fn $name(&self) -> $t {
                    self.inner.$field
                }
            )*

            #[getter]
            fn accuracy<'py>(&self, py: Python<'py>) -> Bound<'py, PyArray1<f64>> {
                PyArray1::from_slice(py, &self.inner.accuracy)
            }

            #[getter]
            fn redundancy<'py>(&self, py: Python<'py>) -> Bound<'py, PyArray1<f64>> {
                PyArray1::from_slice(py, &self.inner.redundancy)
            }

            #[getter]
            fn correct_tally<'py>(&self, py: Python<'py>) -> Bound<'py, PyArray1<i64>> {
                PyArray1::from_iter(py, self.inner.correct_tally.iter().map(|&t| t as i64))
            }
        }
    };
}

measure_getters!(
    matrices:
    yule_q => yule_q,
    correct_correlation => correlation,
    disagreement => disagreement,
    double_fault => double_fault,
    kappa => kappa;
    scalars:
    n_members => members: usize,
    n_points => n_points: u64,
    mean_yule_q => mean_yule_q: f64,
    mean_correct_correlation => mean_correlation: f64,
    mean_disagreement => mean_disagreement: f64,
    mean_double_fault => mean_double_fault: f64,
    mean_kappa => mean_kappa: f64,
    undefined_yule_q => undefined_yule_q: usize,
    undefined_correct_correlation => undefined_correlation: usize,
    undefined_kappa => undefined_kappa: usize,
    entropy => entropy: f64,
    kohavi_wolpert => kohavi_wolpert: f64,
    interrater_kappa => interrater_kappa: f64,
    difficulty => difficulty: f64,
    generalized_diversity => generalized_diversity: f64,
    coincident_failure => coincident_failure: f64
);

pub(super) fn register(m: &Bound<'_, PyModule>) -> PyResult<()> {
    m.add_class::<PyDiversityAccumulator>()?;
    m.add_class::<PyDiversityMeasures>()
}
