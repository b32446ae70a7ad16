//! Bindings of [`crate::learners::tree`].

use numpy::ndarray::Ix2;
use pyo3::prelude::*;
use pyo3::types::PyBytes;

use super::learners::{self, count, YValues};
use super::{run_core, to_py_err, CountArray, FloatArray};
use crate::learners::tree::{
    CheckedTreeParams, Criterion, InBag, Splitter, TreeEnsemble, TreeParams,
};
use crate::learners::{FittedMembers, Task};
use crate::resampling::Count;

/// Bagged CART trees (Breiman et al. 1984) fit natively on in-bag counts used as row
/// weights, one tree per member; see `TreeEnsemble.fit`.
#[pyclass(module = "bagwise._core", name = "TreeEnsemble", frozen)]
pub struct PyTreeEnsemble {
    pub(super) inner: TreeEnsemble,
}

#[pymethods]
impl PyTreeEnsemble {
    /// Grows one tree per member.
    ///
    /// `x` float32/float64 (rows, features), any strides; `y` float64 targets
    /// (task="regression") or int64 class codes 0..n_classes (task="classification");
    /// `counts` (members, rows) of any unsigned integer dtype, a row's count being its
    /// weight, or None with `n_members` for every row once. `min_leaf` is the least number
    /// of in-bag draws (sum of counts) per leaf; `split_features` the features tried per
    /// node (None: all); `criterion` "squared_error" / "gini" (default) / "entropy";
    /// `splitter` "exact", "histogram" or "auto"; `seed` seeds the feature-sampling
    /// streams; `first_member` is the index of the first member fitted (member m draws
    /// from stream m, so fits of consecutive member ranges, each with its rows of the
    /// counts, joined by `join` equal the whole fit); `progress(done, total)` is called
    /// about every 0.1 s and may raise to stop.
    #[staticmethod]
    #[pyo3(signature = (x, y, counts, *, task, n_classes=None, max_depth=None, min_leaf=1,
        split_features=None, criterion=None, splitter="auto", seed=0, n_members=None,
        first_member=0, n_jobs=None, progress=None))]
    #[allow(clippy::too_many_arguments)]
    fn fit(
        py: Python<'_>,
        x: &Bound<'_, PyAny>,
        y: &Bound<'_, PyAny>,
        counts: &Bound<'_, PyAny>,
        task: &str,
        n_classes: Option<usize>,
        max_depth: Option<i64>,
        min_leaf: i64,
        split_features: Option<i64>,
        criterion: Option<&str>,
        splitter: &str,
        seed: u64,
        n_members: Option<i64>,
        first_member: usize,
        n_jobs: Option<usize>,
        progress: Option<Py<PyAny>>,
    ) -> PyResult<Self> {
        let task = Task::from_options(task, n_classes).map_err(to_py_err)?;
        let params = TreeParams {
            task,
            max_depth: max_depth.map(count),
            min_leaf: count(min_leaf) as u64,
            split_features: split_features.map(count),
            criterion: Criterion::parse_or_default(criterion, task).map_err(to_py_err)?,
            splitter: Splitter::parse(splitter).map_err(to_py_err)?,
            seed,
        }
        .check()
        .map_err(to_py_err)?;
        let (x, y) = (FloatArray::<Ix2>::extract(x, "x")?, YValues::read(y, task)?);
        let n_members = n_members.map(count);
        let inner = match CountArray::maybe(counts)? {
            None => grow(
                py,
                &params,
                &x,
                &y,
                InBag::<u8>::from_options(None, n_members),
                first_member,
                n_jobs,
                progress,
            )?,
            Some(c) => with_counts!(c, |c| grow(
                py,
                &params,
                &x,
                &y,
                InBag::from_options(Some(c), n_members),
                first_member,
                n_jobs,
                progress
            ))?,
        };
        Ok(PyTreeEnsemble { inner })
    }

    /// Every member's predictions: (members, points) for regression, (members, points,
    /// n_classes) probabilities for classification.
    #[pyo3(signature = (x, n_jobs=None, progress=None))]
    fn member_predictions<'py>(
        &self,
        py: Python<'py>,
        x: &Bound<'py, PyAny>,
        n_jobs: Option<usize>,
        progress: Option<Py<PyAny>>,
    ) -> PyResult<Bound<'py, PyAny>> {
        learners::member_predictions(py, &self.inner, x, n_jobs, progress)
    }

    /// Member predictions on the training rows `x` only where the member did not see the
    /// row (`counts[m, i] == 0`), NaN elsewhere; same shape as `member_predictions`.
    #[pyo3(signature = (x, counts, n_jobs=None, progress=None))]
    fn out_of_bag_predictions<'py>(
        &self,
        py: Python<'py>,
        x: &Bound<'py, PyAny>,
        counts: &Bound<'py, PyAny>,
        n_jobs: Option<usize>,
        progress: Option<Py<PyAny>>,
    ) -> PyResult<Bound<'py, PyAny>> {
        learners::out_of_bag_predictions(py, &self.inner, x, counts, n_jobs, progress)
    }

    /// The mean over members: (points,) values or (points, n_classes) probabilities.
    #[pyo3(signature = (x, n_jobs=None, progress=None))]
    fn predict<'py>(
        &self,
        py: Python<'py>,
        x: &Bound<'py, PyAny>,
        n_jobs: Option<usize>,
        progress: Option<Py<PyAny>>,
    ) -> PyResult<Bound<'py, PyAny>> {
        learners::predict(py, &self.inner, x, n_jobs, progress)
    }

    /// Number of members.
    #[getter]
    fn n_members(&self) -> usize {
        self.inner.n_members()
    }

    /// Number of input features.
    #[getter]
    fn n_features(&self) -> usize {
        FittedMembers::n_features(&self.inner)
    }

    /// Number of classes (None for regression).
    #[getter]
    fn n_classes(&self) -> Option<usize> {
        learners::n_classes(&self.inner)
    }

    /// Node count of every member.
    #[getter]
    fn node_counts(&self) -> Vec<usize> {
        self.inner.node_counts()
    }

    /// The fitted trees as bytes (a compact format behind a versioned header, about 9 bytes
    /// a node; see src/learners/tree/format.rs).
    fn to_bytes<'py>(&self, py: Python<'py>) -> PyResult<Bound<'py, PyBytes>> {
        learners::to_bytes(py, &self.inner)
    }

    /// One ensemble of the members of `parts`, in order: ensembles of one learner and
    /// settings fitted on consecutive member ranges of one ensemble, e.g. on several
    /// machines. ValueError for parts that disagree.
    #[staticmethod]
    fn join(parts: Vec<PyRef<'_, Self>>) -> PyResult<Self> {
        let parts = parts.iter().map(|part| part.inner.clone()).collect();
        learners::join(parts).map(|inner| Self { inner })
    }

    /// The ensemble of the members `members` (indices), in that order. ValueError when
    /// empty, out of range or repeated.
    fn select(&self, members: Vec<i64>) -> PyResult<Self> {
        learners::select(&self.inner, members).map(|inner| Self { inner })
    }

    /// Reads `to_bytes` output; corrupt or foreign bytes raise ValueError.
    #[staticmethod]
    fn from_bytes(data: &[u8]) -> PyResult<Self> {
        learners::from_bytes(data).map(|inner| PyTreeEnsemble { inner })
    }

    fn __reduce__<'py>(
        &self,
        py: Python<'py>,
    ) -> PyResult<(Bound<'py, PyAny>, (Bound<'py, PyBytes>,))> {
        let from_bytes = py.get_type::<Self>().getattr("from_bytes")?;
        Ok((from_bytes, (self.to_bytes(py)?,)))
    }

    fn __repr__(&self) -> String {
        let kind = match FittedMembers::task(&self.inner) {
            Task::Regression => "regression".to_string(),
            Task::Classification { n_classes } => format!("classification, {n_classes} classes"),
        };
        format!(
            "TreeEnsemble({} members, {} features, {kind})",
            self.inner.n_members(),
            self.n_features()
        )
    }
}

/// Grows the trees of `in_bag` with the GIL released.
#[allow(clippy::too_many_arguments)]
fn grow<C: Count>(
    py: Python<'_>,
    params: &CheckedTreeParams,
    x: &FloatArray<'_, Ix2>,
    y: &YValues,
    in_bag: crate::Result<InBag<'_, C>>,
    first_member: usize,
    n_jobs: Option<usize>,
    progress: Option<Py<PyAny>>,
) -> PyResult<TreeEnsemble> {
    let in_bag = in_bag.map_err(to_py_err)?;
    with_float!(x, |a| run_core(py, n_jobs, progress, |pool, monitor| {
        params.fit_members(a, y.view(), in_bag, first_member, pool, monitor)
    }))
}

pub(super) fn register(m: &Bound<'_, PyModule>) -> PyResult<()> {
    m.add_class::<PyTreeEnsemble>()
}
