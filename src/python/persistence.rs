//! Bindings of [`crate::persistence`]: the file container, parsed and verified in Rust.

use pyo3::prelude::*;
use pyo3::types::PyBytes;

use super::to_py_err;
use crate::persistence::{crc32, encode_into, encoded_len, Container};

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
    m.add_function(wrap_pyfunction!(unpack_container, m)?)?;
    m.add_function(wrap_pyfunction!(crc32_py, m)?)
}
