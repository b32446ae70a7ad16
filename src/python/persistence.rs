//! Bindings of [`crate::persistence`]: the file container, parsed and verified in Rust.

use pyo3::exceptions::PyTypeError;
use pyo3::prelude::*;
use pyo3::types::PyBytes;

use super::linear::PyLinearEnsemble;
use super::neighbors::PyNeighborsEnsemble;
use super::tree::PyTreeEnsemble;
use super::{run_core, to_py_err};
use crate::learners::FittedMembers;
use crate::persistence::{crc32, encode_into, encode_with, encoded_len, Container};

/// Encodes a container: magic, version, kind tag, JSON metadata, payload, CRC-32.
#[pyfunction]
fn pack_container<'py>(
    py: Python<'py>,
    kind: String,
    metadata: String,
    payload: &[u8],
) -> PyResult<Bound<'py, PyBytes>> {
    // encoded straight into the Python bytes: no copy of the payload on the way
    let len = encoded_len(&kind, &metadata, payload.len());
    PyBytes::new_with(py, len, |out| {
        encode_into(&kind, &metadata, payload, out).map_err(to_py_err)
    })
}

/// Encodes a container around a fitted native ensemble, the model encoded straight into the
/// returned bytes: its payload is never held twice.
#[pyfunction]
fn pack_model<'py>(
    py: Python<'py>,
    kind: String,
    metadata: String,
    model: &Bound<'py, PyAny>,
) -> PyResult<Bound<'py, PyBytes>> {
    if let Ok(model) = model.cast::<PyTreeEnsemble>() {
        pack(py, &kind, &metadata, &model.get().inner)
    } else if let Ok(model) = model.cast::<PyLinearEnsemble>() {
        pack(py, &kind, &metadata, &model.get().inner)
    } else if let Ok(model) = model.cast::<PyNeighborsEnsemble>() {
        pack(py, &kind, &metadata, &model.get().inner)
    } else {
        Err(PyTypeError::new_err(format!(
            "`model`: expected a TreeEnsemble, LinearEnsemble or NeighborsEnsemble, got {}",
            model.get_type().name()?
        )))
    }
}

fn pack<'py, E: FittedMembers + Sync>(
    py: Python<'py>,
    kind: &str,
    metadata: &str,
    model: &E,
) -> PyResult<Bound<'py, PyBytes>> {
    let payload_len = run_core(py, None, None, |_, _| Ok(model.encoded_len()))?;
    PyBytes::new_with(py, encoded_len(kind, metadata, payload_len), |out| {
        run_core(py, None, None, |_, _| {
            encode_with(kind, metadata, payload_len, |at| model.encode_into(at), out)
        })
    })
}

/// Verifies and decodes a container into (kind, metadata, payload).
#[pyfunction]
fn unpack_container<'py>(
    py: Python<'py>,
    data: &[u8],
) -> PyResult<(String, String, Bound<'py, PyBytes>)> {
    let container = Container::from_bytes(data).map_err(to_py_err)?;
    Ok((
        container.kind,
        container.metadata,
        PyBytes::new(py, &container.payload),
    ))
}

/// CRC-32/ISO-HDLC of `data`.
#[pyfunction(name = "crc32")]
fn crc32_py(data: &[u8]) -> u32 {
    crc32(data)
}

pub(super) fn register(m: &Bound<'_, PyModule>) -> PyResult<()> {
    m.add_function(wrap_pyfunction!(pack_container, m)?)?;
    m.add_function(wrap_pyfunction!(pack_model, m)?)?;
    m.add_function(wrap_pyfunction!(unpack_container, m)?)?;
    m.add_function(wrap_pyfunction!(crc32_py, m)?)
}
