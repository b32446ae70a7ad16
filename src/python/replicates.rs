//! Bindings of [`crate::replicates`].

use numpy::ndarray::Ix3;
use numpy::{PyArrayMethods, PyReadonlyArray1, PyUntypedArrayMethods};
use pyo3::prelude::*;
use pyo3::types::PyDict;

use super::zeros_nd;
use super::{run_core, FloatArray};
use crate::replicates::{replicate_spread, SplitOutputs, SpreadOutputs};

/// Per-point arrays and means over points of the replicate spread (see the core module).
#[pyfunction]
#[pyo3(signature = (members, y=None, n_jobs=None))]
fn replicate_spread_arrays<'py>(
    py: Python<'py>,
    members: &Bound<'py, PyAny>,
    y: Option<PyReadonlyArray1<'py, f64>>,
    n_jobs: Option<usize>,
) -> PyResult<(Bound<'py, PyDict>, Bound<'py, PyDict>)> {
    let members = FloatArray::<Ix3>::extract(members, "members")?;
    let n = match &members {
        FloatArray::F32(a) => a.shape()[2],
        FloatArray::F64(a) => a.shape()[2],
    };
    let names = ["within", "between", "ensemble_variance"];
    let split_names = ["bias", "variance", "covariance", "expected_squared_error"];
    let count = names.len() + if y.is_some() { split_names.len() } else { 0 };
    let arrays = (0..count)
        .map(|_| zeros_nd::<f64>(py, vec![n]))
        .collect::<PyResult<Vec<_>>>()?;
    // SAFETY: the arrays were just created here and are not shared with Python yet.
    let mut slices: Vec<&mut [f64]> = arrays
        .iter()
        .map(|a| unsafe { a.as_slice_mut() }.expect("a new array is contiguous"))
        .collect();
    let split = (slices.len() == 7).then(|| {
        let mut rest = slices.split_off(3).into_iter();
        SplitOutputs {
            bias: rest.next().expect("7 arrays"),
            variance: rest.next().expect("7 arrays"),
            covariance: rest.next().expect("7 arrays"),
            expected_squared_error: rest.next().expect("7 arrays"),
        }
    });
    let mut first = slices.into_iter();
    let out = SpreadOutputs {
        within: first.next().expect("3 arrays"),
        between: first.next().expect("3 arrays"),
        ensemble_variance: first.next().expect("3 arrays"),
        split,
    };
    let y_view = y.as_ref().map(|y| y.as_array());
    let summary = match &members {
        FloatArray::F32(a) => {
            let view = a.as_array();
            run_core(py, n_jobs, None, |pool, monitor| {
                replicate_spread(view, y_view, out, pool, monitor)
            })
        }
        FloatArray::F64(a) => {
            let view = a.as_array();
            run_core(py, n_jobs, None, |pool, monitor| {
                replicate_spread(view, y_view, out, pool, monitor)
            })
        }
    }?;
    let per_point = PyDict::new(py);
    for (name, array) in names.iter().chain(&split_names).zip(arrays) {
        per_point.set_item(name, array)?;
    }
    let means = PyDict::new(py);
    means.set_item("within", summary.within)?;
    means.set_item("between", summary.between)?;
    means.set_item("ensemble_variance", summary.ensemble_variance)?;
    means.set_item("negative_between", summary.negative_between)?;
    means.set_item("bias_squared", summary.bias_squared)?;
    means.set_item("variance", summary.variance)?;
    means.set_item("covariance", summary.covariance)?;
    means.set_item("expected_squared_error", summary.expected_squared_error)?;
    Ok((per_point, means))
}

pub(super) fn register(m: &Bound<'_, PyModule>) -> PyResult<()> {
    m.add_function(wrap_pyfunction!(replicate_spread_arrays, m)?)
}
