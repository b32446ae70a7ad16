//! Bindings of [`crate::out_of_bag`].

use numpy::ndarray::{Dimension, Ix2, Ix3};
use numpy::{PyArrayMethods, PyReadonlyArray, PyReadonlyArray1};
use pyo3::exceptions::{PyTypeError, PyValueError};
use pyo3::prelude::*;
use pyo3::types::PyDict;

use super::{run_core, to_py_err, zeros_nd, FloatArray};
use crate::out_of_bag::{
    default_curve_sizes, out_of_bag, ErrorSums, InBagCounts, Labels, MemberPredictions,
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

type Metric = fn(&ErrorSums) -> f64;

/// Per-point outputs of one chunk: prediction, OOB member counts, class probabilities.
type ChunkArrays = (Py<PyAny>, Py<PyAny>, Option<Py<PyAny>>);

/// The mergeable error sums of an out-of-bag evaluation over some points.
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
    fn members(&self) -> usize {
        self.inner.members()
    }

    #[getter]
    fn points(&self) -> u64 {
        self.inner.points()
    }

    #[getter]
    fn sizes(&self) -> Vec<usize> {
        self.inner.sizes().to_vec()
    }

    #[getter]
    fn without_out_of_bag(&self) -> u64 {
        self.inner.without_out_of_bag()
    }

    /// Per curve size: `covered` points and the weighted mean of every metric of the task.
    fn curve<'py>(&self, py: Python<'py>) -> PyResult<Bound<'py, PyDict>> {
        let curve = self.inner.curve();
        let out = PyDict::new(py);
        out.set_item(
            "covered",
            curve.iter().map(|e| e.covered).collect::<Vec<_>>(),
        )?;
        let metrics: &[(&str, Metric)] = match self.inner.task() {
            Task::Regression => &[
                ("squared_error", |e| e.squared_error()),
                ("absolute_error", |e| e.absolute_error()),
            ],
            Task::Classification { .. } => &[
                ("error_rate", |e| e.error_rate()),
                ("brier_score", |e| e.brier_score()),
                ("log_loss", |e| e.log_loss()),
            ],
        };
        for (name, metric) in metrics {
            out.set_item(*name, curve.iter().map(metric).collect::<Vec<f64>>())?;
        }
        Ok(out)
    }
}

/// Out-of-bag predictions of a chunk of points and its mergeable error state.
///
/// `kind` is "regression", "labels" (needs `n_classes`) or "probabilities".
#[pyfunction]
#[pyo3(signature = (members, counts, y, weights, sizes, kind, n_classes=None, n_jobs=None))]
#[allow(clippy::too_many_arguments)]
fn out_of_bag_chunk<'py>(
    py: Python<'py>,
    members: &Bound<'py, PyAny>,
    counts: &Bound<'py, PyAny>,
    y: PyReadonlyArray1<'py, f64>,
    weights: Option<PyReadonlyArray1<'py, f64>>,
    sizes: Vec<usize>,
    kind: &str,
    n_classes: Option<usize>,
    n_jobs: Option<usize>,
) -> PyResult<(PyOutOfBagState, ChunkArrays)> {
    let counts = IntArray::<Ix2>::extract(counts, "counts")?;
    let counts: Box<dyn InBagCounts + '_> = int_array!(&counts, a => Box::new(a.as_array()));
    let (values, labels, probabilities);
    let predictions: Box<dyn MemberPredictions + '_> = match kind {
        "regression" => {
            values = FloatArray::<Ix2>::extract(members, "members")?;
            match &values {
                FloatArray::F32(a) => Box::new(Values(a.as_array())),
                FloatArray::F64(a) => Box::new(Values(a.as_array())),
            }
        }
        "probabilities" => {
            probabilities = FloatArray::<Ix3>::extract(members, "members")?;
            match &probabilities {
                FloatArray::F32(a) => Box::new(Probabilities(a.as_array())),
                FloatArray::F64(a) => Box::new(Probabilities(a.as_array())),
            }
        }
        "labels" => {
            labels = IntArray::<Ix2>::extract(members, "members")?;
            let c = n_classes.ok_or_else(|| {
                PyValueError::new_err("`members`: class labels need the number of classes")
            })?;
            int_array!(&labels, a => Box::new(Labels::new(a.as_array(), c).map_err(to_py_err)?))
        }
        other => {
            return Err(PyValueError::new_err(format!(
                "`members`: unknown kind {other:?} (regression, labels, probabilities)"
            )))
        }
    };
    let (_, n) = predictions.dim();
    let width = match predictions.task() {
        Task::Regression => None,
        task => Some(task.outputs()),
    };
    let prediction = zeros_nd::<f64>(py, vec![n])?;
    let n_oob = zeros_nd::<i64>(py, vec![n])?;
    let probs = width.map(|c| zeros_nd::<f64>(py, vec![n, c])).transpose()?;
    // SAFETY: the arrays were just created here and are not shared with Python yet.
    let (prediction_out, n_oob_out, probs_out) = unsafe {
        (
            prediction
                .as_slice_mut()
                .expect("a new array is contiguous"),
            n_oob.as_slice_mut().expect("a new array is contiguous"),
            match &probs {
                Some(p) => p.as_slice_mut().expect("a new array is contiguous"),
                None => &mut [],
            },
        )
    };
    let (y, weights) = (y.as_array(), weights.as_ref().map(|w| w.as_array()));
    let (predictions, counts) = (&*predictions, &*counts);
    let state = run_core(py, n_jobs, None, |pool, monitor| {
        let out = PointOutputs {
            prediction: prediction_out,
            n_out_of_bag: n_oob_out,
            probabilities: probs_out,
        };
        out_of_bag(predictions, counts, y, weights, &sizes, out, pool, monitor)
    })?;
    let arrays = (
        prediction.into_any().unbind(),
        n_oob.into_any().unbind(),
        probs.map(|p| p.into_any().unbind()),
    );
    Ok((PyOutOfBagState { inner: state }, arrays))
}

pub(super) fn register(m: &Bound<'_, PyModule>) -> PyResult<()> {
    m.add_class::<PyOutOfBagState>()?;
    m.add_function(wrap_pyfunction!(out_of_bag_chunk, m)?)?;
    m.add_function(wrap_pyfunction!(default_sizes, m)?)
}

/// The default ensemble sizes of the out-of-bag error curve for `members` members.
#[pyfunction]
fn default_sizes(members: usize) -> Vec<usize> {
    default_curve_sizes(members)
}
