//! Bindings of [`crate::out_of_bag`].

use numpy::ndarray::{Dimension, Ix2, Ix3};
use numpy::{PyArrayMethods, PyReadonlyArray, PyReadonlyArray1};
use pyo3::exceptions::{PyTypeError, PyValueError};
use pyo3::prelude::*;
use pyo3::types::PyBytes;

use super::members::TargetArray;
use super::{run_core, to_py_err, zeros_nd, FloatArray};
use crate::out_of_bag::{
    default_curve_sizes, out_of_bag, InBagCounts, Labels, LossCurves, MemberPredictions,
    OutOfBagPartial, PointOutputs, Probabilities, Task, Values,
};

/// An integer array (counts or class labels) of any of the eight integer dtypes, read
/// without a copy and with any strides. Dispatch with one `match` (see [`int_array!`]).
pub(crate) enum IntArray<'py, D: Dimension> {
    U8(PyReadonlyArray<'py, u8, D>),
    U16(PyReadonlyArray<'py, u16, D>),
    U32(PyReadonlyArray<'py, u32, D>),
    U64(PyReadonlyArray<'py, u64, D>),
    I8(PyReadonlyArray<'py, i8, D>),
    I16(PyReadonlyArray<'py, i16, D>),
    I32(PyReadonlyArray<'py, i32, D>),
    I64(PyReadonlyArray<'py, i64, D>),
}

impl<'py, D: Dimension> IntArray<'py, D> {
    /// Reads `object` as an integer array of dimension `D`, naming `argument` on failure.
    pub(crate) fn extract(object: &Bound<'py, PyAny>, argument: &'static str) -> PyResult<Self> {
        macro_rules! try_as {
            ($($variant:ident: $t:ty),*) => {$(
                if let Ok(a) = object.extract::<PyReadonlyArray<'py, $t, D>>() {
                    return Ok(IntArray::$variant(a));
                }
            )*};
        }
        try_as!(U8: u8, U16: u16, U32: u32, U64: u64, I8: i8, I16: i16, I32: i32, I64: i64);
        Err(PyTypeError::new_err(format!(
            "`{argument}`: expected an integer numpy array (uint8/16/32/64 or int8/16/32/64) \
             with {} dimensions",
            D::NDIM.map_or("the right number of".to_string(), |n| n.to_string())
        )))
    }
}

/// `int_array!(array, a => expr)` evaluates `expr` with `a` bound to the typed readonly
/// array of whichever dtype `array` holds.
macro_rules! int_array {
    ($array:expr, $a:ident => $body:expr) => {
        match $array {
            IntArray::U8($a) => $body,
            IntArray::U16($a) => $body,
            IntArray::U32($a) => $body,
            IntArray::U64($a) => $body,
            IntArray::I8($a) => $body,
            IntArray::I16($a) => $body,
            IntArray::I32($a) => $body,
            IntArray::I64($a) => $body,
        }
    };
}
pub(crate) use int_array;

/// Per-point outputs of one chunk: prediction, OOB member counts, class probabilities.
type ChunkArrays<'py> = (
    Bound<'py, PyAny>,
    Bound<'py, PyAny>,
    Option<Bound<'py, PyAny>>,
);

/// The mergeable loss sums of an out-of-bag evaluation over some points.
#[pyclass(module = "bagwise._core", name = "OutOfBagState", frozen)]
pub struct PyOutOfBagState {
    inner: OutOfBagPartial,
}

#[pymethods]
impl PyOutOfBagState {
    /// The state of both sets of points (`self` first, then `other`).
    fn merge(&self, other: &PyOutOfBagState) -> PyResult<PyOutOfBagState> {
        let mut inner = self.inner.clone();
        inner.merge(&other.inner).map_err(to_py_err)?;
        Ok(PyOutOfBagState { inner })
    }

    #[getter]
    fn task(&self) -> &'static str {
        match self.inner.task() {
            Task::Regression => "regression",
            Task::Classification { .. } => "classification",
        }
    }

    #[getter]
    fn n_members(&self) -> usize {
        self.inner.members()
    }

    #[getter]
    fn n_points(&self) -> u64 {
        self.inner.points()
    }

    #[getter]
    fn sizes(&self) -> Vec<usize> {
        self.inner.sizes().to_vec()
    }

    #[getter]
    fn n_without_out_of_bag(&self) -> u64 {
        self.inner.without_out_of_bag()
    }

    /// The losses of the task at every curve size.
    fn losses(&self) -> PyLossCurves {
        PyLossCurves {
            inner: self.inner.losses(),
        }
    }

    /// The state as bytes (postcard behind a version number).
    fn to_bytes<'py>(&self, py: Python<'py>) -> Bound<'py, PyBytes> {
        PyBytes::new(py, &self.inner.to_bytes())
    }

    #[staticmethod]
    fn from_bytes(data: &[u8]) -> PyResult<Self> {
        OutOfBagPartial::from_bytes(data)
            .map(|inner| PyOutOfBagState { inner })
            .map_err(to_py_err)
    }

    fn __reduce__<'py>(
        slf: &Bound<'py, Self>,
    ) -> PyResult<(Bound<'py, PyAny>, (Bound<'py, PyBytes>,))> {
        let py = slf.py();
        let from_bytes = py.get_type::<PyOutOfBagState>().getattr("from_bytes")?;
        Ok((from_bytes, (slf.get().to_bytes(py),)))
    }
}

/// The losses of an out-of-bag state at every curve size (`None` for the other task's).
#[pyclass(module = "bagwise._core", name = "LossCurves", frozen)]
pub struct PyLossCurves {
    inner: LossCurves,
}

#[pymethods]
impl PyLossCurves {
    #[getter]
    fn n_covered(&self) -> Vec<u64> {
        self.inner.n_covered.clone()
    }
    #[getter]
    fn squared_error(&self) -> Option<Vec<f64>> {
        self.inner.squared_error.clone()
    }
    #[getter]
    fn absolute_error(&self) -> Option<Vec<f64>> {
        self.inner.absolute_error.clone()
    }
    #[getter]
    fn error_rate(&self) -> Option<Vec<f64>> {
        self.inner.error_rate.clone()
    }
    #[getter]
    fn brier_score(&self) -> Option<Vec<f64>> {
        self.inner.brier_score.clone()
    }
    #[getter]
    fn log_loss(&self) -> Option<Vec<f64>> {
        self.inner.log_loss.clone()
    }
}

/// Member predictions of one of the three kinds, read without a copy.
enum Members<'py> {
    Values(FloatArray<'py, Ix2>),
    Probabilities(FloatArray<'py, Ix3>),
    Labels(IntArray<'py, Ix2>, usize),
}

impl<'py> Members<'py> {
    /// `kind` is "regression", "labels" (needs `n_classes`) or "probabilities".
    fn extract(
        members: &Bound<'py, PyAny>,
        kind: &str,
        n_classes: Option<usize>,
    ) -> PyResult<Self> {
        Ok(match (kind, n_classes) {
            ("regression", _) => Members::Values(FloatArray::extract(members, "members")?),
            ("probabilities", _) => {
                Members::Probabilities(FloatArray::extract(members, "members")?)
            }
            ("labels", Some(c)) => Members::Labels(IntArray::extract(members, "members")?, c),
            ("labels", None) => {
                return Err(PyValueError::new_err(
                    "`members`: class labels need the number of classes",
                ))
            }
            (other, _) => {
                return Err(PyValueError::new_err(format!(
                    "`members`: unknown kind {other:?} (regression, labels, probabilities)"
                )))
            }
        })
    }

    /// The core's view of the predictions.
    fn view(&self) -> PyResult<Box<dyn MemberPredictions + '_>> {
        let view: Box<dyn MemberPredictions + '_> = match self {
            Members::Values(v) => with_float!(v, |a| Box::new(Values(a))),
            Members::Probabilities(p) => with_float!(p, |a| Box::new(Probabilities(a))),
            Members::Labels(l, c) => {
                int_array!(l, a => Box::new(Labels::new(a.as_array(), *c).map_err(to_py_err)?))
            }
        };
        Ok(view)
    }
}

/// Numpy-owned per-point output arrays of one chunk, filled in place by the core.
struct Outputs<'py> {
    prediction: Bound<'py, numpy::PyArrayDyn<f64>>,
    n_out_of_bag: Bound<'py, numpy::PyArrayDyn<i64>>,
    probabilities: Option<Bound<'py, numpy::PyArrayDyn<f64>>>,
}

impl<'py> Outputs<'py> {
    fn new(py: Python<'py>, task: Task, n_points: usize) -> PyResult<Self> {
        let probabilities = match task {
            Task::Regression => None,
            task => Some(zeros_nd::<f64>(py, vec![n_points, task.outputs()])?),
        };
        Ok(Outputs {
            prediction: zeros_nd::<f64>(py, vec![n_points])?,
            n_out_of_bag: zeros_nd::<i64>(py, vec![n_points])?,
            probabilities,
        })
    }

    /// The core's view of the buffers.
    fn slices(&self) -> PointOutputs<'_> {
        // SAFETY: the arrays were created in `new` and are not shared with Python yet.
        unsafe {
            PointOutputs {
                prediction: self.prediction.as_slice_mut().expect("contiguous"),
                n_out_of_bag: self.n_out_of_bag.as_slice_mut().expect("contiguous"),
                probabilities: match &self.probabilities {
                    Some(p) => p.as_slice_mut().expect("contiguous"),
                    None => &mut [],
                },
            }
        }
    }

    fn into_arrays(self) -> ChunkArrays<'py> {
        let probabilities = self.probabilities.map(Bound::into_any);
        (
            self.prediction.into_any(),
            self.n_out_of_bag.into_any(),
            probabilities,
        )
    }
}

/// Out-of-bag predictions of a chunk of points, its mergeable loss state and the sum of its
/// counts (for the check that they are counts, made without a second pass).
///
/// `kind` is "regression", "labels" (needs `n_classes`) or "probabilities".
#[pyfunction]
#[pyo3(signature = (members, counts, y, point_weights, sizes, kind, n_classes=None, n_jobs=None, progress=None))]
#[allow(clippy::too_many_arguments)]
fn out_of_bag_chunk<'py>(
    py: Python<'py>,
    members: &Bound<'py, PyAny>,
    counts: &Bound<'py, PyAny>,
    y: &Bound<'py, PyAny>,
    point_weights: Option<PyReadonlyArray1<'py, f64>>,
    sizes: Vec<usize>,
    kind: &str,
    n_classes: Option<usize>,
    n_jobs: Option<usize>,
    progress: Option<Py<PyAny>>,
) -> PyResult<(PyOutOfBagState, ChunkArrays<'py>, f64)> {
    let counts = IntArray::<Ix2>::extract(counts, "counts")?;
    let counts: Box<dyn InBagCounts + '_> = int_array!(&counts, a => Box::new(a.as_array()));
    let members = Members::extract(members, kind, n_classes)?;
    let predictions = members.view()?;
    let outputs = Outputs::new(py, predictions.task(), predictions.dim().1)?;
    let y = TargetArray::extract(y)?;
    let (y, weights, out) = (
        y.view(),
        point_weights.as_ref().map(|w| w.as_array()),
        outputs.slices(),
    );
    let (predictions, counts) = (&*predictions, &*counts);
    let pass = run_core(py, n_jobs, progress, |pool, monitor| {
        out_of_bag(predictions, counts, y, weights, &sizes, out, pool, monitor)
    })?;
    let inner = pass.state;
    Ok((
        PyOutOfBagState { inner },
        outputs.into_arrays(),
        pass.count_total,
    ))
}

pub(super) fn register(m: &Bound<'_, PyModule>) -> PyResult<()> {
    m.add_class::<PyOutOfBagState>()?;
    m.add_class::<PyLossCurves>()?;
    m.add_function(wrap_pyfunction!(out_of_bag_chunk, m)?)?;
    m.add_function(wrap_pyfunction!(default_sizes, m)?)
}

/// The default ensemble sizes of the out-of-bag loss curve for `n_members` members.
#[pyfunction]
fn default_sizes(n_members: usize) -> Vec<usize> {
    default_curve_sizes(n_members)
}
