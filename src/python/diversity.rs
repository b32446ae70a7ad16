//! Bindings of [`crate::diversity`].

use std::sync::Mutex;

use numpy::ndarray::Ix3;
use numpy::{PyArray1, PyArrayMethods, PyReadonlyArray1, PyReadonlyArray2};
use pyo3::prelude::*;
use pyo3::types::PyDict;

use super::{run_core, to_py_err, FloatArray};
use crate::diversity::{DiversityState, Predictions};

/// The diversity counts of a classifier ensemble fed by chunks of points.
#[pyclass(module = "bagwise._core", name = "DiversityAccumulator", frozen)]
pub struct PyDiversityAccumulator {
    inner: Mutex<DiversityState>,
}

#[pymethods]
impl PyDiversityAccumulator {
    #[new]
    fn new(members: usize, n_classes: usize) -> PyResult<Self> {
        DiversityState::new(members, n_classes)
            .map(|s| PyDiversityAccumulator {
                inner: Mutex::new(s),
            })
            .map_err(to_py_err)
    }

    /// Adds int64 `(members, n_points)` labels or float `(members, n_points, n_classes)`
    /// probabilities of a chunk of points with their int64 targets.
    #[pyo3(signature = (members, y, n_jobs=None))]
    fn update<'py>(
        &self,
        py: Python<'py>,
        members: &Bound<'py, PyAny>,
        y: PyReadonlyArray1<'py, i64>,
        n_jobs: Option<usize>,
    ) -> PyResult<()> {
        let (y, state) = (y.as_array(), &self.inner);
        if let Ok(labels) = members.extract::<PyReadonlyArray2<'py, i64>>() {
            let p = Predictions::<f64>::Labels(labels.as_array());
            return run_core(py, n_jobs, None, |pool, mon| {
                state.lock().expect("state lock").update(p, y, pool, mon)
            });
        }
        with_float!(FloatArray::<Ix3>::extract(members, "members")?, |v| {
            run_core(py, n_jobs, None, |pool, mon| {
                let p = Predictions::Probabilities(v);
                state.lock().expect("state lock").update(p, y, pool, mon)
            })
        })
    }

    /// Adds the counts of `other` (other points of the same members).
    fn merge(&self, other: &PyDiversityAccumulator) -> PyResult<()> {
        let other = other.inner.lock().expect("state lock").clone();
        let mut state = self.inner.lock().expect("state lock");
        state.merge(&other).map_err(to_py_err)
    }

    /// Number of members.
    #[getter]
    fn members(&self) -> usize {
        self.inner.lock().expect("state lock").members()
    }

    /// Number of points added so far.
    #[getter]
    fn n_points(&self) -> u64 {
        self.inner.lock().expect("state lock").n_points()
    }

    /// The measures over all points so far, as a dict of numbers and arrays.
    fn finish<'py>(&self, py: Python<'py>) -> PyResult<Bound<'py, PyDict>> {
        let d = self
            .inner
            .lock()
            .expect("state lock")
            .finish()
            .map_err(to_py_err)?;
        let m = d.members;
        let out = PyDict::new(py);
        let matrices = [
            ("yule_q", d.yule_q),
            ("correlation", d.correlation),
            ("disagreement", d.disagreement),
            ("double_fault", d.double_fault),
            ("kappa", d.kappa),
        ];
        for (name, values) in matrices {
            out.set_item(name, PyArray1::from_vec(py, values).reshape([m, m])?)?;
        }
        let tally: Vec<i64> = d.correct_tally.iter().map(|&t| t as i64).collect();
        out.set_item("correct_tally", PyArray1::from_vec(py, tally))?;
        out.set_item("accuracy", PyArray1::from_vec(py, d.accuracy))?;
        out.set_item("redundancy", PyArray1::from_vec(py, d.redundancy))?;
        for (name, value) in [
            ("mean_yule_q", d.mean_yule_q),
            ("mean_correlation", d.mean_correlation),
            ("mean_disagreement", d.mean_disagreement),
            ("mean_double_fault", d.mean_double_fault),
            ("mean_kappa", d.mean_kappa),
            ("entropy", d.entropy),
            ("kohavi_wolpert", d.kohavi_wolpert),
            ("interrater_kappa", d.interrater_kappa),
            ("difficulty", d.difficulty),
            ("generalized_diversity", d.generalized_diversity),
            ("coincident_failure", d.coincident_failure),
        ] {
            out.set_item(name, value)?;
        }
        out.set_item("undefined_yule_q", d.undefined_yule_q)?;
        out.set_item("undefined_correlation", d.undefined_correlation)?;
        out.set_item("undefined_kappa", d.undefined_kappa)?;
        out.set_item("members", m)?;
        out.set_item("n_points", d.n_points)?;
        Ok(out)
    }
}

pub(super) fn register(m: &Bound<'_, PyModule>) -> PyResult<()> {
    m.add_class::<PyDiversityAccumulator>()
}
