//! Bindings of [`crate::ordering`].

use std::borrow::Cow;

use numpy::ndarray::Ix2;
use numpy::{PyArray1, PyArray2, PyArrayMethods, PyReadonlyArray1, PyReadonlyArray2};
use pyo3::prelude::*;

use super::members::{with_members, MembersArray, TargetArray};
use super::out_of_bag::{int_array, IntArray};
use super::{run_core, to_py_err, zeros};
use crate::ordering::{order_curves as curves_core, order_members as order_core, Method};
use crate::out_of_bag::InBagCounts;

/// The optional `counts` and `points` of a call.
type Options<'py> = (Option<IntArray<'py, Ix2>>, Option<Cow<'py, [bool]>>);

/// Reads the optional `counts` (any integer dtype) and `points` (bool) without a copy of
/// `counts` (a `points` mask with strides is copied: one byte per point).
fn read_options<'py>(
    counts: Option<&Bound<'py, PyAny>>,
    points: &'py Option<PyReadonlyArray1<'py, bool>>,
) -> PyResult<Options<'py>> {
    let counts = counts
        .filter(|c| !c.is_none())
        .map(|c| IntArray::<Ix2>::extract(c, "counts"))
        .transpose()?;
    let points = points.as_ref().map(|p| match p.as_slice() {
        Ok(slice) => Cow::Borrowed(slice),
        Err(_) => Cow::Owned(p.as_array().to_vec()),
    });
    Ok((counts, points))
}

/// The order in which members are added (int64, the first `size` members).
#[pyfunction]
#[pyo3(signature = (members, y, counts=None, points=None, *, method, n_classes=None,
    target_margin=0.075, size=None, n_jobs=None, progress=None))]
#[allow(clippy::too_many_arguments)]
fn order_members<'py>(
    py: Python<'py>,
    members: &Bound<'py, PyAny>,
    y: &Bound<'py, PyAny>,
    counts: Option<&Bound<'py, PyAny>>,
    points: Option<PyReadonlyArray1<'py, bool>>,
    method: &str,
    n_classes: Option<usize>,
    target_margin: f64,
    size: Option<usize>,
    n_jobs: Option<usize>,
    progress: Option<Py<PyAny>>,
) -> PyResult<Bound<'py, PyArray1<i64>>> {
    let (members, y) = (MembersArray::extract(members)?, TargetArray::extract(y)?);
    let method = Method::parse(method).map_err(to_py_err)?;
    let (counts, points) = read_options(counts, &points)?;
    let counts: Option<Box<dyn InBagCounts + '_>> = counts
        .as_ref()
        .map(|c| int_array!(c, a => Box::new(a.as_array()) as Box<dyn InBagCounts>));
    let (y, counts, points) = (y.view(), counts.as_deref(), points.as_deref());
    let order = with_members!(members, n_classes.unwrap_or(0), |view| run_core(
        py,
        n_jobs,
        progress,
        |pool, monitor| order_core(
            view,
            y,
            counts,
            points,
            method,
            target_margin,
            size,
            pool,
            monitor
        )
    ))?;
    Ok(PyArray1::from_vec(
        py,
        order.into_iter().map(|m| m as i64).collect(),
    ))
}

/// Loss of the first k members of each order (float64, orders × k).
#[pyfunction]
#[pyo3(signature = (members, y, orders, counts=None, points=None, *, n_classes=None,
    n_jobs=None, progress=None))]
#[allow(clippy::too_many_arguments)]
fn order_curves<'py>(
    py: Python<'py>,
    members: &Bound<'py, PyAny>,
    y: &Bound<'py, PyAny>,
    orders: PyReadonlyArray2<'py, i64>,
    counts: Option<&Bound<'py, PyAny>>,
    points: Option<PyReadonlyArray1<'py, bool>>,
    n_classes: Option<usize>,
    n_jobs: Option<usize>,
    progress: Option<Py<PyAny>>,
) -> PyResult<Bound<'py, PyArray2<f64>>> {
    let (members, y) = (MembersArray::extract(members)?, TargetArray::extract(y)?);
    let orders: Vec<Vec<usize>> = orders
        .as_array()
        .rows()
        .into_iter()
        .map(|row| {
            row.iter()
                .map(|&m| usize::try_from(m).unwrap_or(usize::MAX))
                .collect()
        })
        .collect();
    let (counts, points) = read_options(counts, &points)?;
    let counts: Option<Box<dyn InBagCounts + '_>> = counts
        .as_ref()
        .map(|c| int_array!(c, a => Box::new(a.as_array()) as Box<dyn InBagCounts>));
    let (y, counts, points) = (y.view(), counts.as_deref(), points.as_deref());
    let curves = with_members!(members, n_classes.unwrap_or(0), |view| run_core(
        py,
        n_jobs,
        progress,
        |pool, monitor| curves_core(view, y, counts, points, &orders, pool, monitor)
    ))?;
    let out = zeros::<f64>(py, [curves.len(), curves.first().map_or(0, Vec::len)])?;
    // SAFETY: created above and not shared with Python yet.
    let slice = unsafe { out.as_slice_mut() }.expect("contiguous");
    slice
        .iter_mut()
        .zip(curves.into_iter().flatten())
        .for_each(|(o, v)| *o = v);
    Ok(out)
}

pub(super) fn register(m: &Bound<'_, PyModule>) -> PyResult<()> {
    m.add_function(wrap_pyfunction!(order_members, m)?)?;
    m.add_function(wrap_pyfunction!(order_curves, m)?)
}
