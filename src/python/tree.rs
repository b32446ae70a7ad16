//! Bindings of [`crate::learners::tree`].

use numpy::ndarray::Ix2;
use numpy::{PyArrayMethods, PyReadonlyArray1};
use pyo3::exceptions::{PyTypeError, PyValueError};
use pyo3::prelude::*;
use pyo3::types::PyBytes;

use super::{positive, run_core, to_py_err, zeros, CountArray, FloatArray};
use crate::learners::tree::{Criterion, InBag, Splitter, Targets, TreeEnsemble, TreeParams};
use crate::learners::Task;

/// The training targets: float64 values for regression, int64 class codes otherwise.
pub(super) fn targets(y: &Bound<'_, PyAny>, task: Task) -> PyResult<YValues> {
    match task {
        Task::Regression => y
            .extract::<PyReadonlyArray1<'_, f64>>()
            .map(|a| YValues::Real(a.as_array().to_vec()))
            .map_err(|_| PyTypeError::new_err("`y`: expected a 1-D float64 array for regression")),
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

pub(super) enum YValues {
    Real(Vec<f64>),
    Codes(Vec<usize>),
}

impl YValues {
    pub(super) fn view(&self) -> Targets<'_> {
        match self {
            YValues::Real(v) => Targets::Regression(v.as_slice().into()),
            YValues::Codes(v) => Targets::Classes(v.as_slice().into()),
        }
    }
}

/// Bagged CART trees (Breiman et al. 1984) fit natively on in-bag counts used as row
/// weights, one tree per member; see `TreeEnsemble.fit`.
#[pyclass(module = "bagwise._core", name = "TreeEnsemble", frozen)]
pub struct PyTreeEnsemble {
    inner: TreeEnsemble,
}

impl PyTreeEnsemble {
    /// Allocates members × points × width in numpy, fills it with `fill`, reshapes.
    fn member_array<'py>(
        &self,
        py: Python<'py>,
        n_points: usize,
        n_jobs: Option<usize>,
        fill: impl FnOnce(&mut [f64], &crate::parallel::Pool) -> crate::Result<()> + Send,
    ) -> PyResult<Bound<'py, PyAny>> {
        let (members, width) = (self.inner.members(), self.inner.outputs());
        let array = zeros::<f64>(py, [members, n_points * width])?;
        // SAFETY: the array was just created here and is not shared with Python yet.
        let out = unsafe { array.as_slice_mut() }.expect("a new array is contiguous");
        run_core(py, n_jobs, None, |pool, _| fill(out, pool))?;
        match self.inner.task() {
            Task::Regression => Ok(array.into_any()),
            Task::Classification { .. } => {
                array.call_method1("reshape", ((members, n_points, width),))
            }
        }
    }
}

#[pymethods]
impl PyTreeEnsemble {
    /// Grows one tree per member.
    ///
    /// `x` float32/float64 (rows, features), any strides; `y` float64 targets
    /// (task="regression") or int64 class codes 0..n_classes (task="classification");
    /// `counts` (members, rows) of any unsigned integer dtype, a row's count being its
    /// weight, or None with `members` for every row once. `min_leaf` is the least number of
    /// in-bag draws (sum of counts) per leaf; `split_features` the features tried per node
    /// (None: all); `criterion` "squared_error" / "gini" (default) / "entropy"; `splitter`
    /// "exact", "histogram" or "auto"; `seed` seeds the feature-sampling streams;
    /// `progress(done, total)` is called about every 0.1 s and may raise to stop.
    #[staticmethod]
    #[pyo3(signature = (x, y, counts, *, task, n_classes=None, max_depth=None, min_leaf=1,
        split_features=None, criterion=None, splitter="auto", seed=0, members=None,
        n_jobs=None, progress=None))]
    #[allow(clippy::too_many_arguments)]
    fn fit(
        py: Python<'_>,
        x: &Bound<'_, PyAny>,
        y: &Bound<'_, PyAny>,
        counts: &Bound<'_, PyAny>,
        task: &str,
        n_classes: Option<i64>,
        max_depth: Option<i64>,
        min_leaf: i64,
        split_features: Option<i64>,
        criterion: Option<&str>,
        splitter: &str,
        seed: u64,
        members: Option<i64>,
        n_jobs: Option<usize>,
        progress: Option<Py<PyAny>>,
    ) -> PyResult<Self> {
        let task = match (task, n_classes) {
            ("regression", None) => Task::Regression,
            ("classification", Some(k)) => Task::Classification {
                n_classes: positive(k, "n_classes")?,
            },
            ("regression", Some(_)) => {
                return Err(PyValueError::new_err(
                    "`n_classes`: only for classification",
                ))
            }
            ("classification", None) => {
                return Err(PyValueError::new_err(
                    "`n_classes`: required for classification",
                ))
            }
            (other, _) => {
                return Err(PyValueError::new_err(format!(
                    "`task`: expected 'regression' or 'classification', got {other:?}"
                )))
            }
        };
        let default = if task == Task::Regression {
            "squared_error"
        } else {
            "gini"
        };
        let config = TreeParams {
            task,
            max_depth: max_depth.map(|d| positive(d, "max_depth")).transpose()?,
            min_leaf: positive(min_leaf, "min_leaf")? as u64,
            split_features: split_features
                .map(|k| positive(k, "split_features"))
                .transpose()?,
            criterion: Criterion::parse(criterion.unwrap_or(default)).map_err(to_py_err)?,
            splitter: Splitter::parse(splitter).map_err(to_py_err)?,
            seed,
        }
        .check()
        .map_err(to_py_err)?;
        let x = FloatArray::<Ix2>::extract(x, "x")?;
        let y = targets(y, task)?;
        let inner = match (CountArray::maybe(counts)?, members) {
            (None, Some(m)) => {
                let in_bag: InBag<'_, u8> = InBag::AllRows {
                    members: positive(m, "members")?,
                };
                with_float!(x, |xv| run_core(py, n_jobs, progress, |pool, monitor| {
                    config.fit(xv, y.view(), in_bag, pool, monitor)
                }))?
            }
            (Some(counts), None) => with_counts!(counts, |c| with_float!(x, |xv| run_core(
                py,
                n_jobs,
                progress,
                |pool, monitor| config.fit(xv, y.view(), InBag::Counts(c), pool, monitor)
            )))?,
            (None, None) => {
                return Err(PyValueError::new_err(
                    "`members`: required when `counts` is None",
                ))
            }
            (Some(_), Some(_)) => {
                return Err(PyValueError::new_err(
                    "`members`: give either `counts` or `members`, not both",
                ))
            }
        };
        Ok(PyTreeEnsemble { inner })
    }

    /// Every member's predictions: (members, points) for regression, (members, points,
    /// n_classes) probabilities for classification.
    #[pyo3(signature = (x, n_jobs=None))]
    fn member_predictions<'py>(
        &self,
        py: Python<'py>,
        x: &Bound<'py, PyAny>,
        n_jobs: Option<usize>,
    ) -> PyResult<Bound<'py, PyAny>> {
        let x = FloatArray::<Ix2>::extract(x, "x")?;
        let n = with_float!(x, |xv| xv.nrows());
        with_float!(x, |xv| self.member_array(py, n, n_jobs, |out, pool| {
            self.inner.member_predictions_into(xv, out, pool)
        }))
    }

    /// Member predictions on the training rows `x` only where the member did not see the
    /// row (`counts[m, i] == 0`), NaN elsewhere; same shape as `member_predictions`.
    #[pyo3(signature = (x, counts, n_jobs=None))]
    fn out_of_bag_predictions<'py>(
        &self,
        py: Python<'py>,
        x: &Bound<'py, PyAny>,
        counts: &Bound<'py, PyAny>,
        n_jobs: Option<usize>,
    ) -> PyResult<Bound<'py, PyAny>> {
        let x = FloatArray::<Ix2>::extract(x, "x")?;
        let counts = CountArray::extract(counts)?;
        let n = with_float!(x, |xv| xv.nrows());
        with_counts!(counts, |c| with_float!(x, |xv| self.member_array(
            py,
            n,
            n_jobs,
            |out, pool| self.inner.out_of_bag_predictions_into(xv, c, out, pool)
        )))
    }

    /// The mean over members: (points,) values or (points, n_classes) probabilities.
    #[pyo3(signature = (x, n_jobs=None))]
    fn predict<'py>(
        &self,
        py: Python<'py>,
        x: &Bound<'py, PyAny>,
        n_jobs: Option<usize>,
    ) -> PyResult<Bound<'py, PyAny>> {
        let x = FloatArray::<Ix2>::extract(x, "x")?;
        let n = with_float!(x, |xv| xv.nrows());
        let width = self.inner.outputs();
        let array = zeros::<f64>(py, [n, width])?;
        // SAFETY: the array was just created here and is not shared with Python yet.
        let out = unsafe { array.as_slice_mut() }.expect("a new array is contiguous");
        with_float!(x, |xv| run_core(py, n_jobs, None, |pool, _| {
            self.inner.predict_into(xv, out, pool)
        }))?;
        match self.inner.task() {
            Task::Regression => array.call_method1("reshape", (n,)),
            Task::Classification { .. } => Ok(array.into_any()),
        }
    }

    /// Number of members.
    #[getter]
    fn members(&self) -> usize {
        self.inner.members()
    }

    /// Number of input features.
    #[getter]
    fn n_features(&self) -> usize {
        self.inner.n_features()
    }

    /// Number of classes (None for regression).
    #[getter]
    fn n_classes(&self) -> Option<usize> {
        match self.inner.task() {
            Task::Regression => None,
            Task::Classification { n_classes } => Some(n_classes),
        }
    }

    /// Node count of every member.
    #[getter]
    fn node_counts(&self) -> Vec<usize> {
        self.inner.node_counts()
    }

    /// The fitted trees as bytes (postcard behind a versioned header).
    fn to_bytes<'py>(&self, py: Python<'py>) -> Bound<'py, PyBytes> {
        PyBytes::new(py, &self.inner.to_bytes())
    }

    /// Reads `to_bytes` output; corrupt or foreign bytes raise ValueError.
    #[staticmethod]
    fn from_bytes(data: &[u8]) -> PyResult<Self> {
        TreeEnsemble::from_bytes(data)
            .map(|inner| PyTreeEnsemble { inner })
            .map_err(to_py_err)
    }

    fn __reduce__<'py>(
        &self,
        py: Python<'py>,
    ) -> PyResult<(Bound<'py, PyAny>, (Bound<'py, PyBytes>,))> {
        let from_bytes = py.get_type::<PyTreeEnsemble>().getattr("from_bytes")?;
        Ok((from_bytes, (self.to_bytes(py),)))
    }

    fn __repr__(&self) -> String {
        let kind = match self.inner.task() {
            Task::Regression => "regression".to_string(),
            Task::Classification { n_classes } => format!("classification, {n_classes} classes"),
        };
        format!(
            "TreeEnsemble({} members, {} features, {kind})",
            self.inner.members(),
            self.inner.n_features()
        )
    }
}

pub(super) fn register(m: &Bound<'_, PyModule>) -> PyResult<()> {
    m.add_class::<PyTreeEnsemble>()
}
