//! Bindings of [`crate::resampling`].

use numpy::{IntoPyArray, PyArrayMethods, PyReadonlyArray1};
use pyo3::exceptions::{PyOverflowError, PyValueError};
use pyo3::prelude::*;

use super::{positive, run_core, to_py_err, zeros};
use crate::resampling::{CountWidth, Design, ResampleParams, Scheme};

fn codes(
    array: Option<PyReadonlyArray1<'_, i64>>,
    argument: &'static str,
) -> PyResult<Option<Vec<usize>>> {
    array
        .map(|a| {
            a.as_array()
                .iter()
                .map(|&c| usize::try_from(c))
                .collect::<Result<Vec<_>, _>>()
                .map_err(|_| {
                    PyValueError::new_err(format!("`{argument}`: codes must be non-negative"))
                })
        })
        .transpose()
}

/// A checked resampling plan; draws counts, Bayesian weights and block starts.
#[pyclass(module = "bagwise._core", name = "Resampler", frozen)]
pub struct PyResampler {
    inner: crate::resampling::Resampler,
}

#[pymethods]
impl PyResampler {
    #[new]
    #[pyo3(signature = (n_rows, scheme, fraction, strata=None, groups=None, block_length=None, group_size=0))]
    fn new(
        n_rows: i64,
        scheme: &str,
        fraction: f64,
        strata: Option<PyReadonlyArray1<'_, i64>>,
        groups: Option<PyReadonlyArray1<'_, i64>>,
        block_length: Option<i64>,
        group_size: usize,
    ) -> PyResult<Self> {
        let design = match (
            codes(strata, "strata")?,
            codes(groups, "groups")?,
            block_length,
        ) {
            (None, None, None) => Design::Rows,
            (Some(s), None, None) => Design::Strata(s),
            (None, Some(g), None) => Design::Groups(g),
            (None, None, Some(length)) => Design::Blocks(positive(length, "block_length")?),
            _ => {
                return Err(PyValueError::new_err(
                    "`strata`, `groups`, `block_length`: give at most one of them",
                ))
            }
        };
        let params = ResampleParams {
            n_rows: positive(n_rows, "n_rows")?,
            scheme: Scheme::parse(scheme).map_err(to_py_err)?,
            fraction,
            design,
            group_size,
        };
        params
            .check()
            .map(|inner| PyResampler { inner })
            .map_err(to_py_err)
    }

    /// Rows drawn per member (expected rows for group designs).
    #[getter]
    fn draws_per_member(&self) -> usize {
        self.inner.draws_per_member()
    }

    /// Members per little-bags group; 0 for the other schemes.
    #[getter]
    fn group_size(&self) -> usize {
        self.inner.group_size()
    }

    /// The largest count any row can receive.
    #[getter]
    fn max_possible_count(&self) -> u64 {
        self.inner.max_possible_count()
    }

    #[pyo3(signature = (seed, n_members, n_jobs=None, progress=None))]
    fn counts(
        &self,
        py: Python<'_>,
        seed: u64,
        n_members: i64,
        n_jobs: Option<usize>,
        progress: Option<Py<PyAny>>,
    ) -> PyResult<Py<PyAny>> {
        let n_rows = self.inner.n_rows();
        let n_members = positive(n_members, "n_members")?;
        let shape = [n_members, n_rows];
        // Written straight into numpy's own zeroed buffer (no copy, numpy's huge pages).
        macro_rules! draw_as {
            ($t:ty) => {{
                let array = zeros::<$t>(py, shape)?;
                // SAFETY: the array was just created here and is not shared with Python yet.
                let out = unsafe { array.as_slice_mut() }.expect("a new array is contiguous");
                run_core(
                    py,
                    n_jobs,
                    progress.as_ref().map(|p| p.clone_ref(py)),
                    |pool, monitor| self.inner.fill_counts(seed, out, pool, monitor),
                )
                .map(|()| array.into_any().unbind())
            }};
        }
        let mut outcome = Err(PyValueError::new_err("`n_members`: nothing to draw"));
        for width in self.inner.count_widths() {
            outcome = match width {
                CountWidth::U8 => draw_as!(u8),
                CountWidth::U16 => draw_as!(u16),
                CountWidth::U32 => draw_as!(u32),
                CountWidth::U64 => draw_as!(u64),
            };
            if !matches!(&outcome, Err(e) if e.is_instance_of::<PyOverflowError>(py)) {
                break;
            }
        }
        outcome
    }

    #[pyo3(signature = (seed, n_members, n_jobs=None, progress=None))]
    fn bayesian_weights(
        &self,
        py: Python<'_>,
        seed: u64,
        n_members: i64,
        n_jobs: Option<usize>,
        progress: Option<Py<PyAny>>,
    ) -> PyResult<Py<PyAny>> {
        let n_members = positive(n_members, "n_members")?;
        let array = zeros::<f64>(py, [n_members, self.inner.n_rows()])?;
        // SAFETY: the array was just created here and is not shared with Python yet.
        let out = unsafe { array.as_slice_mut() }.expect("a new array is contiguous");
        run_core(py, n_jobs, progress, |pool, monitor| {
            self.inner.fill_bayesian_weights(seed, out, pool, monitor)
        })?;
        Ok(array.into_any().unbind())
    }

    #[pyo3(signature = (seed, n_members, n_jobs=None))]
    fn block_starts(
        &self,
        py: Python<'_>,
        seed: u64,
        n_members: i64,
        n_jobs: Option<usize>,
    ) -> PyResult<Py<PyAny>> {
        let n_members = positive(n_members, "n_members")?;
        let starts = run_core(py, n_jobs, None, |pool, _| {
            self.inner.block_starts(seed, n_members, pool)
        })?;
        Ok(starts.into_pyarray(py).into_any().unbind())
    }
}

pub(super) fn register(m: &Bound<'_, PyModule>) -> PyResult<()> {
    m.add_class::<PyResampler>()?;
    m.add_function(wrap_pyfunction!(count_row_totals, m)?)
}

/// Row totals (float64) and the smallest entry of 8- or 16-bit integer in-bag counts.
#[pyfunction]
fn count_row_totals<'py>(
    py: Python<'py>,
    counts: &Bound<'py, PyAny>,
) -> PyResult<(Bound<'py, numpy::PyArray1<f64>>, i64)> {
    macro_rules! try_as {
        ($($t:ty),*) => {$(
            if let Ok(a) = counts.extract::<numpy::PyReadonlyArray2<'py, $t>>() {
                let view = a.as_array();
                let (totals, low) = run_core(py, None, None, |pool, _| {
                    Ok(crate::resampling::count_row_totals(view, pool))
                })?;
                return Ok((totals.into_pyarray(py), low));
            }
        )*};
    }
    try_as!(u8, u16, i8, i16);
    Err(pyo3::exceptions::PyTypeError::new_err(
        "`counts`: expected a 2-D integer array of 8 or 16 bits",
    ))
}
