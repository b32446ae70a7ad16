//! The file container of fitted native ensembles: versioned, checksummed, and made of data
//! only (no code is executed when it is read).
//!
//! ```text
//! offset  bytes  field
//! 0       8      magic  89 42 41 47 57 49 53 45  ("\x89BAGWISE"; the high first byte
//!                        tells binary from text, as in the PNG signature)
//! 8       4      format version, u32 little-endian (FORMAT_VERSION)
//! 12      1      length K of the learner kind tag (1..=64)
//! 13      K      kind tag, ASCII (e.g. "linear", "neighbors")
//! ..      8      length M of the metadata, u64 little-endian
//! ..      M      metadata: UTF-8 JSON written by the Python layer (parameters, classes, ...)
//! ..      8      length P of the payload, u64 little-endian
//! ..      P      payload: the learner's encoding (postcard; trees: the compact format of
//!                        src/learners/tree/format.rs, whose own header has its version)
//! ..      4      CRC-32 of every byte before it, u32 little-endian; nothing follows
//! ```
//! CRC-32 is the ISO-HDLC variant (ISO 3309, ITU-T V.42; also zlib's and PNG's): reflected
//! polynomial 0xEDB88320, initial value and final XOR 0xFFFFFFFF, check value
//! CRC("123456789") = 0xCBF43926 (Greg Cook, "Catalogue of parametrised CRC algorithms",
//! CRC-32/ISO-HDLC).

use crate::error::{Error, Result};
use crate::learners::linear::LinearEnsemble;
use crate::learners::neighbors::NeighborsEnsemble;
use crate::learners::tree::TreeEnsemble;
use crate::learners::FittedMembers;

/// The 8 magic bytes every file starts with.
pub const MAGIC: [u8; 8] = *b"\x89BAGWISE";

/// The version written, and the only one read.
pub const FORMAT_VERSION: u32 = 1;

/// Longest accepted kind tag.
const MAX_KIND: usize = 64;

const fn crc_table() -> [u32; 256] {
    let mut table = [0u32; 256];
    let mut n = 0;
    while n < 256 {
        let mut c = n as u32;
        let mut bit = 0;
        while bit < 8 {
            c = if c & 1 != 0 {
                0xEDB8_8320 ^ (c >> 1)
            } else {
                c >> 1
            };
            bit += 1;
        }
        table[n] = c;
        n += 1;
    }
    table
}

const CRC_TABLE: [u32; 256] = crc_table();

/// CRC-32/ISO-HDLC of `data` (table-driven, one byte at a time).
pub fn crc32(data: &[u8]) -> u32 {
    let mut crc = 0xFFFF_FFFFu32;
    for &byte in data {
        crc = CRC_TABLE[((crc ^ u32::from(byte)) & 0xFF) as usize] ^ (crc >> 8);
    }
    crc ^ 0xFFFF_FFFF
}

/// The parts of a container.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Container {
    pub kind: String,
    pub metadata: String,
    pub payload: Vec<u8>,
}

impl Container {
    /// Encodes the container.
    ///
    /// # Errors
    /// `kind` when empty, longer than 64 bytes or not printable ASCII.
    pub fn to_bytes(&self) -> Result<Vec<u8>> {
        let mut out = vec![0u8; encoded_len(&self.kind, &self.metadata, self.payload.len())];
        encode_into(&self.kind, &self.metadata, &self.payload, &mut out)?;
        Ok(out)
    }
}

/// The size of the container of `kind`, `metadata` and a payload of `payload_len` bytes.
pub fn encoded_len(kind: &str, metadata: &str, payload_len: usize) -> usize {
    8 + 4 + 1 + kind.len() + 8 + metadata.len() + 8 + payload_len + 4
}

/// [`Container::to_bytes`] written into `out` (exactly [`encoded_len`] bytes) from a
/// borrowed payload, so a caller can encode straight into its own buffer (a model file is
/// mostly payload: no copy of it is made here).
///
/// # Errors
/// `kind` when empty, longer than 64 bytes or not printable ASCII.
///
/// # Panics
/// When `out` is not [`encoded_len`] bytes long.
pub fn encode_into(kind: &str, metadata: &str, payload: &[u8], out: &mut [u8]) -> Result<()> {
    encode_with(
        kind,
        metadata,
        payload.len(),
        |at| at.copy_from_slice(payload),
        out,
    )
}

/// [`encode_into`] with the payload written in place by `write_payload` into its
/// `payload_len` bytes of `out`, e.g. a model encoded straight into the file's buffer.
///
/// # Errors
/// `kind` when empty, longer than 64 bytes or not printable ASCII.
///
/// # Panics
/// When `out` is not [`encoded_len`] bytes long.
pub fn encode_with(
    kind: &str,
    metadata: &str,
    payload_len: usize,
    write_payload: impl FnOnce(&mut [u8]),
    out: &mut [u8],
) -> Result<()> {
    let kind = kind.as_bytes();
    if kind.is_empty() || kind.len() > MAX_KIND || !kind.iter().all(|b| b.is_ascii_graphic()) {
        return Err(Error::value(
            "kind",
            "must be 1 to 64 printable ASCII characters",
        ));
    }
    assert_eq!(
        out.len(),
        8 + 4 + 1 + kind.len() + 8 + metadata.len() + 8 + payload_len + 4
    );
    let mut at = 0;
    let mut put = |bytes: &[u8]| {
        out[at..at + bytes.len()].copy_from_slice(bytes);
        at += bytes.len();
    };
    put(&MAGIC);
    put(&FORMAT_VERSION.to_le_bytes());
    put(&[kind.len() as u8]);
    put(kind);
    put(&(metadata.len() as u64).to_le_bytes());
    put(metadata.as_bytes());
    put(&(payload_len as u64).to_le_bytes());
    let body = out.len() - 4;
    write_payload(&mut out[at..body]);
    let crc = crc32(&out[..body]);
    out[body..].copy_from_slice(&crc.to_le_bytes());
    Ok(())
}

impl Container {
    /// Decodes and verifies a container.
    ///
    /// # Errors
    /// `data` when the magic bytes are missing (not a bagwise file), the format version is
    /// not [`FORMAT_VERSION`], the checksum does not match (corrupted or truncated), or a
    /// length field points past the end.
    pub fn from_bytes(data: &[u8]) -> Result<Self> {
        if data.len() < MAGIC.len() || data[..MAGIC.len()] != MAGIC {
            return Err(Error::value(
                "data",
                "is not a bagwise file (the magic bytes are missing)",
            ));
        }
        let mut reader = Reader {
            data,
            at: MAGIC.len(),
        };
        let version = u32::from_le_bytes(
            reader
                .take(4, "the format version")?
                .try_into()
                .expect("4 bytes"),
        );
        if version != FORMAT_VERSION {
            return Err(Error::value(
                "data",
                format!(
                    "uses format version {version}, but this bagwise reads version \
                     {FORMAT_VERSION} only"
                ),
            ));
        }
        if data.len() < reader.at + 4 {
            return Err(truncated("the checksum", 4, data.len() - reader.at));
        }
        let (body, tail) = data.split_at(data.len() - 4);
        let stored = u32::from_le_bytes(tail.try_into().expect("4 bytes"));
        if crc32(body) != stored {
            return Err(Error::value(
                "data",
                "checksum mismatch: the file is corrupted or truncated",
            ));
        }
        let mut reader = Reader {
            data: body,
            at: reader.at,
        };
        let kind_len = reader.take(1, "the kind length")?[0] as usize;
        let kind = reader.take(kind_len, "the kind tag")?;
        if kind.is_empty() || !kind.iter().all(|b| b.is_ascii_graphic()) {
            return Err(Error::value("data", "has an invalid learner kind tag"));
        }
        let kind = String::from_utf8(kind.to_vec()).expect("ASCII");
        let metadata_len = reader.length("the metadata length")?;
        let metadata = std::str::from_utf8(reader.take(metadata_len, "the metadata")?)
            .map_err(|_| Error::value("data", "metadata is not valid UTF-8"))?
            .to_string();
        let payload_len = reader.length("the payload length")?;
        let payload = reader.take(payload_len, "the payload")?.to_vec();
        if reader.at != body.len() {
            return Err(Error::value(
                "data",
                "has unexpected bytes after the payload",
            ));
        }
        Ok(Container {
            kind,
            metadata,
            payload,
        })
    }
}

/// A fitted native ensemble read from a container, whichever its learner: the payload
/// decoded by the learner that the kind tag names (the tags of `python/bagwise/_learners.py`).
#[derive(Debug, Clone, PartialEq)]
pub enum Model {
    Tree(TreeEnsemble),
    Linear(LinearEnsemble),
    Neighbors(NeighborsEnsemble),
}

impl Model {
    /// Decodes `payload` with the learner of kind tag `kind`.
    ///
    /// # Errors
    /// `data` for an unknown kind tag, or a payload that does not decode into a well-formed
    /// ensemble of that learner.
    pub fn decode(kind: &str, payload: &[u8]) -> Result<Self> {
        match kind {
            "tree" => TreeEnsemble::from_bytes(payload).map(Model::Tree),
            "linear" => <LinearEnsemble as FittedMembers>::from_bytes(payload).map(Model::Linear),
            "neighbors" => {
                <NeighborsEnsemble as FittedMembers>::from_bytes(payload).map(Model::Neighbors)
            }
            other => Err(Error::value(
                "data",
                format!("holds an unknown learner kind {other:?}"),
            )),
        }
    }

    /// The kind tag of the learner.
    pub fn kind(&self) -> &'static str {
        match self {
            Model::Tree(_) => "tree",
            Model::Linear(_) => "linear",
            Model::Neighbors(_) => "neighbors",
        }
    }

    /// The payload bytes of the learner.
    pub fn to_bytes(&self) -> Vec<u8> {
        match self {
            Model::Tree(m) => FittedMembers::to_bytes(m),
            Model::Linear(m) => FittedMembers::to_bytes(m),
            Model::Neighbors(m) => FittedMembers::to_bytes(m),
        }
    }
}

/// Reads a whole model file: the container ([`Container::from_bytes`]) and its payload
/// ([`Model::decode`]), so every byte of the file is checked before anything is predicted.
///
/// # Errors
/// `data` as the two steps.
pub fn read_model(data: &[u8]) -> Result<(Container, Model)> {
    let container = Container::from_bytes(data)?;
    let model = Model::decode(&container.kind, &container.payload)?;
    Ok((container, model))
}

fn truncated(field: &str, needed: impl std::fmt::Display, left: usize) -> Error {
    Error::value(
        "data",
        format!("is truncated: {field} needs {needed} bytes but {left} remain"),
    )
}

struct Reader<'a> {
    data: &'a [u8],
    at: usize,
}

impl<'a> Reader<'a> {
    /// The next `len` bytes, never read past the end (`field` names them in the error).
    fn take(&mut self, len: usize, field: &str) -> Result<&'a [u8]> {
        let left = self.data.len() - self.at;
        if len > left {
            return Err(truncated(field, len, left));
        }
        let slice = &self.data[self.at..self.at + len];
        self.at += len;
        Ok(slice)
    }

    /// A u64 length field, checked against the bytes left before anything is sized by it.
    fn length(&mut self, field: &str) -> Result<usize> {
        let raw = u64::from_le_bytes(self.take(8, field)?.try_into().expect("8 bytes"));
        let left = self.data.len() - self.at;
        match usize::try_from(raw) {
            Ok(len) if len <= left => Ok(len),
            _ => Err(truncated(field, raw, left)),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn sample() -> Container {
        Container {
            kind: "linear".into(),
            metadata: "{\"members\": 3}".into(),
            payload: (0..=255u8).collect(),
        }
    }

    #[test]
    fn crc_matches_the_catalogue_check_value() {
        // CRC-32/ISO-HDLC check value (Greg Cook's CRC catalogue).
        assert_eq!(crc32(b"123456789"), 0xCBF4_3926);
        assert_eq!(crc32(b""), 0);
    }

    #[test]
    fn round_trip_and_every_corruption_is_caught() {
        let bytes = sample().to_bytes().unwrap();
        assert_eq!(Container::from_bytes(&bytes).unwrap(), sample());
        for cut in [0, 5, 8, 12, 20, bytes.len() - 1] {
            assert!(Container::from_bytes(&bytes[..cut]).is_err(), "cut {cut}");
        }
        for at in 0..bytes.len() {
            let mut bad = bytes.clone();
            bad[at] ^= 0x10;
            assert!(Container::from_bytes(&bad).is_err(), "flip at {at}");
        }
        let mut newer = bytes.clone();
        newer[8] = 2;
        let err = Container::from_bytes(&newer).unwrap_err().to_string();
        assert!(err.contains("version 2"), "{err}");
        let err = Container::from_bytes(b"PK\x03\x04 a zip")
            .unwrap_err()
            .to_string();
        assert!(err.contains("not a bagwise file"), "{err}");
        let mut bad_kind = sample();
        bad_kind.kind = "a b".into();
        assert!(bad_kind.to_bytes().is_err());
    }
}
