//! Loader fuzzing support, shared by the cargo-fuzz targets of `fuzz/` and the stable
//! harness that runs in `cargo test`: valid seed files of every learner and task, the
//! mutations of the stable harness, the checksum fix-up that lets a mutated file reach the
//! decoders behind the CRC, and the one check every input must pass.
//!
//! The contract checked on every input: reading a model file either fails with an
//! [`Error`] whose message names the argument (`` `data`: ... ``), or gives a model whose
//! member predictions, ensemble mean and out-of-bag predictions on a few points run without
//! a panic, an abort or an endless loop, and hold no NaN where a value is due. Nothing may
//! allocate by a size read from the file before the bytes that back it are present.

use ndarray::Array2;

use crate::error::{Error, Result};
use crate::learners::linear::LinearParams;
use crate::learners::neighbors::NeighborsParams;
use crate::learners::tree::{Criterion, InBag, Splitter, TreeParams};
use crate::learners::{bags, FittedMembers, Targets, Task};
use crate::parallel::{Pool, Silent};
use crate::persistence::{crc32, read_model, Container, Model};
use crate::random::Draws;

/// Points predicted for every decoded model: more than one interleaved tree batch (8).
const POINTS: usize = 11;

/// Models with more features than this are decoded but not predicted (a user could not
/// pass such a design either; the decoders bound every allocation by the bytes present).
const MAX_PREDICTED_FEATURES: usize = 4096;

/// The learner kinds, in the order of the first byte of a [`check_payload`] input.
pub const KINDS: [&str; 3] = ["tree", "linear", "neighbors"];

/// Valid model files: (name, bytes), one per learner, task and splitter, all of format
/// version [`crate::persistence::FORMAT_VERSION`], small enough for exhaustive mutation,
/// and two tree ensembles of the tree payload's previous format.
///
/// # Panics
/// Never for these fixed inputs (a failed fit is a bug in the learners).
pub fn seed_files() -> Vec<(String, Vec<u8>)> {
    let (rows, features, members) = (16, 3, 3);
    let mut draws = Draws::from_seed(14);
    let x = Array2::from_shape_fn((rows, features), |_| (draws.below(9) as f64) - 4.0);
    let y: Vec<f64> = (0..rows)
        .map(|i| x[[i, 0]] - 0.5 * x[[i, 1]] + (i % 3) as f64 * 0.25)
        .collect();
    let classes: Vec<usize> = (0..rows).map(|i| (i * 7 + i / 3) % 3).collect();
    let counts = Array2::from_shape_fn((members, rows), |(m, i)| ((i * (m + 2) + m) % 3) as u8);
    let pool = Pool::Global;
    let mut out = Vec::new();
    let mut push = |name: &str, model: Model| {
        let container = Container {
            kind: model.kind().to_string(),
            metadata: format!("{{\"format\": \"bagwise-ensemble\", \"seed\": \"{name}\"}}"),
            payload: model.to_bytes(),
        };
        out.push((name.to_string(), container.to_bytes().expect("valid kind")));
    };
    let tree = |task: Task, criterion, splitter, split_features| {
        let params = TreeParams {
            task,
            max_depth: Some(4),
            min_leaf: 1,
            split_features,
            criterion,
            splitter,
            seed: 3,
        };
        let targets = match task {
            Task::Regression => Targets::Regression(y.as_slice().into()),
            Task::Classification { .. } => Targets::Classes(classes.as_slice().into()),
        };
        let fitted = params
            .check()
            .and_then(|p| {
                p.fit(
                    x.view(),
                    targets,
                    InBag::Counts(counts.view()),
                    &pool,
                    &Silent,
                )
            })
            .expect("seed tree fit");
        Model::Tree(fitted)
    };
    let three = Task::Classification { n_classes: 3 };
    push(
        "tree_regression_exact",
        tree(
            Task::Regression,
            Criterion::SquaredError,
            Splitter::Exact,
            None,
        ),
    );
    push(
        "tree_regression_histogram_subspace",
        tree(
            Task::Regression,
            Criterion::SquaredError,
            Splitter::Histogram,
            Some(2),
        ),
    );
    push(
        "tree_classification_gini",
        tree(three, Criterion::Gini, Splitter::Exact, None),
    );
    push(
        "tree_classification_entropy_histogram",
        tree(three, Criterion::Entropy, Splitter::Histogram, Some(1)),
    );
    let in_bag = bags(counts.view(), rows).expect("seed counts");
    let linear = LinearParams {
        task: Task::Regression,
        penalty: 0.5,
    }
    .check()
    .and_then(|p| {
        p.fit(
            x.view(),
            Targets::Regression(y.as_slice().into()),
            &in_bag,
            &pool,
            &Silent,
        )
    })
    .expect("seed linear fit");
    push("linear_ridge", Model::Linear(linear));
    let neighbors = |task: Task| {
        let targets = match task {
            Task::Regression => Targets::Regression(y.as_slice().into()),
            Task::Classification { .. } => Targets::Classes(classes.as_slice().into()),
        };
        NeighborsParams { task, neighbors: 3 }
            .check()
            .and_then(|p| p.fit(x.view(), targets, in_bag.clone(), &Silent))
            .expect("seed neighbours fit")
    };
    push(
        "neighbors_regression",
        Model::Neighbors(neighbors(Task::Regression)),
    );
    push(
        "neighbors_classification",
        Model::Neighbors(neighbors(three)),
    );
    // Files of tree format 1, which is still read (see tests/data/make_tree_v1_files.py).
    out.push((
        "tree_v1_regression".into(),
        include_bytes!("../tests/data/tree_v1_regression.bagwise").to_vec(),
    ));
    out.push((
        "tree_v1_classification".into(),
        include_bytes!("../tests/data/tree_v1_classification.bagwise").to_vec(),
    ));
    out
}

/// Overwrites the last 4 bytes of `data` with the CRC-32 of the bytes before them, so a
/// mutated file passes the checksum and reaches the parsers behind it (files shorter than
/// the 12 bytes of magic and version are left alone).
pub fn fix_checksum(data: &mut [u8]) {
    if data.len() >= 16 {
        let end = data.len() - 4;
        let crc = crc32(&data[..end]);
        data[end..].copy_from_slice(&crc.to_le_bytes());
    }
}

/// Whether an error of [`check_file`] is one the contract allows: a refusal of the file
/// naming `data`, or a refusal of a prediction naming `x` (a model whose finite values
/// overflow f64 on the fixed points).
pub fn names_its_argument(err: &Error) -> bool {
    let message = err.to_string();
    message.starts_with("`data`: ") || message.starts_with("`x`: ")
}

/// Reads a model file and, when it decodes, predicts with it ([`exercise`]).
///
/// # Errors
/// The reader's error (always naming `data`), or the first error of a prediction.
pub fn check_file(data: &[u8]) -> Result<Model> {
    let (_, model) = read_model(data)?;
    exercise(&model)?;
    Ok(model)
}

/// A payload wrapped in a valid container of the kind chosen by its first byte, then
/// [`check_file`]: every input reaches the payload decoder (a raw mutation rarely gets past
/// the checksum and the container's length fields).
///
/// # Errors
/// As [`check_file`]; empty input is an error of `data`.
pub fn check_payload(input: &[u8]) -> Result<Model> {
    let (&first, payload) = input
        .split_first()
        .ok_or_else(|| Error::value("data", "is empty"))?;
    let container = Container {
        kind: KINDS[usize::from(first) % KINDS.len()].to_string(),
        metadata: String::from("{}"),
        payload: payload.to_vec(),
    };
    check_file(&container.to_bytes()?)
}

/// The payload-target input of a valid file: the kind byte and the payload.
pub fn payload_input(file: &[u8]) -> Option<Vec<u8>> {
    let (container, _) = read_model(file).ok()?;
    let kind = KINDS.iter().position(|k| *k == container.kind)?;
    let mut input = vec![kind as u8];
    input.extend_from_slice(&container.payload);
    Some(input)
}

/// Predicts with a decoded model on [`POINTS`] fixed points (member predictions, the
/// ensemble mean, out-of-bag predictions with a fixed count pattern), checking that the
/// member and mean predictions hold no NaN and that out-of-bag entries are NaN exactly where
/// the member saw the row.
///
/// # Errors
/// The first prediction error (none is expected for a model that decoded).
///
/// # Panics
/// When an output breaks the contract above (the fuzzer reports it as a crash).
pub fn exercise(model: &Model) -> Result<()> {
    match model {
        Model::Tree(m) => exercise_members(m),
        Model::Linear(m) => exercise_members(m),
        Model::Neighbors(m) => exercise_members(m),
    }
}

fn exercise_members<E: FittedMembers>(model: &E) -> Result<()> {
    let p = model.n_features();
    if p > MAX_PREDICTED_FEATURES {
        return Ok(());
    }
    let pool = Pool::Global;
    let x = Array2::from_shape_fn((POINTS, p), |(i, j)| {
        ((i * 5 + j * 3) % 11) as f64 - 5.0 + if i == 0 { 1e12 } else { 0.0 }
    });
    let width = model.outputs() * POINTS;
    let mut members = vec![0.0; model.n_members() * width];
    model.member_predictions_into(x.view(), &mut members, &pool, &Silent)?;
    assert!(members.iter().all(|v| !v.is_nan()), "NaN member prediction");
    let mut mean = vec![0.0; width];
    model.predict_into(x.view(), &mut mean, &pool, &Silent)?;
    assert!(mean.iter().all(|v| !v.is_nan()), "NaN ensemble prediction");
    let counts = Array2::from_shape_fn((model.n_members(), POINTS), |(m, i)| {
        u8::from((i + m) % 3 == 0)
    });
    let mut oob = vec![0.0; members.len()];
    model.out_of_bag_into(x.view(), counts.view(), &mut oob, &pool, &Silent)?;
    let outputs = model.outputs();
    for (k, v) in oob.iter().enumerate() {
        let (m, i) = (k / width, (k % width) / outputs);
        assert_eq!(
            v.is_nan(),
            counts[[m, i]] > 0,
            "out-of-bag NaN pattern at member {m}, point {i}"
        );
    }
    Ok(())
}

/// Every mutation of the stable harness applied to `file`, each passed to `visit` with its
/// name; see [`mutations_with_checksum`] for the ones that also fix the CRC.
///
/// Truncation at every length; one bit flipped at every `stride`-th bit, a byte deleted and
/// a byte (0x00, 0xFF) inserted at every `stride`-th position (`stride` 1: everywhere; an
/// odd stride still reaches every bit position within a byte), and at every bit and byte of
/// the first [`EVERY_BYTE_BELOW`] bytes.
pub fn raw_mutations(file: &[u8], stride: usize, mut visit: impl FnMut(&str, &[u8])) {
    let stride = stride.max(1);
    for cut in 0..file.len() {
        visit("truncated", &file[..cut]);
    }
    let mut buffer = file.to_vec();
    for bit in (0..file.len() * 8).filter(|&bit| visited(bit / 8, bit, stride)) {
        buffer[bit / 8] ^= 1 << (bit % 8);
        visit("bit flip", &buffer);
        buffer[bit / 8] ^= 1 << (bit % 8);
    }
    for at in (0..file.len()).filter(|&at| visited(at, at, stride)) {
        let mut deleted = file.to_vec();
        deleted.remove(at);
        visit("byte deleted", &deleted);
        for byte in [0x00, 0xFF] {
            let mut inserted = file.to_vec();
            inserted.insert(at, byte);
            visit("byte inserted", &inserted);
        }
    }
}

/// The mutations of [`raw_mutations`] with the checksum recomputed afterwards, plus: every
/// `stride`-th byte set to 0x00, 0x7F, 0x80 and 0xFF (huge postcard varints and length
/// fields), each
/// container length field set to huge values, and `random` rounds of 1 to 8 random
/// byte-level edits (seeded, so a failure reproduces).
pub fn mutations_with_checksum(
    file: &[u8],
    stride: usize,
    random: usize,
    mut visit: impl FnMut(&str, &[u8]),
) {
    let mut fixed = |name: &str, data: &[u8]| {
        let mut data = data.to_vec();
        fix_checksum(&mut data);
        visit(name, &data);
    };
    raw_mutations(file, stride, &mut fixed);
    let mut buffer = file.to_vec();
    for at in (0..file.len()).filter(|&at| visited(at, at, stride)) {
        for byte in [0x00, 0x7F, 0x80, 0xFF] {
            let old = buffer[at];
            buffer[at] = byte;
            fixed("byte set", &buffer);
            buffer[at] = old;
        }
        if at + 4 >= file.len() {
            continue;
        }
        // The payload's container length follows any size change, so the payload still
        // parses as a container and reaches its decoder.
        for varint in HUGE_VARINTS {
            let mut data = file.to_vec();
            data.splice(at..=at, varint.iter().copied());
            fix_payload_length(&mut data);
            fixed("huge varint in place", &data);
        }
    }
    // The container's length fields: kind length at 12, then the metadata and payload
    // lengths (u64 little-endian) after the kind and the metadata.
    let kind_len = usize::from(file[12]);
    let metadata_at = 13 + kind_len;
    let metadata_len = u64::from_le_bytes(file[metadata_at..metadata_at + 8].try_into().unwrap());
    let payload_at = metadata_at + 8 + metadata_len as usize;
    for at in [metadata_at, payload_at] {
        for huge in [
            u64::MAX,
            u64::MAX / 2,
            1 << 40,
            u64::from(u32::MAX) + 1,
            file.len() as u64,
        ] {
            let mut data = file.to_vec();
            data[at..at + 8].copy_from_slice(&huge.to_le_bytes());
            fixed("length field", &data);
        }
    }
    let mut draws = Draws::from_seed(file.len() as u64);
    for _ in 0..random {
        let mut data = file.to_vec();
        for _ in 0..=draws.below(8) {
            mutate_once(&mut data, &mut draws);
        }
        fixed("random edits", &data);
    }
}

/// Leading bytes mutated at every position whatever the stride: the container header and
/// the start of the payload, where the decoders read their counts and sizes.
pub const EVERY_BYTE_BELOW: usize = 160;

/// Postcard varints of huge counts (2^64 − 1, 2^40, 2^32 + 1, 2^20 + 1) that overwrite a
/// one-byte count in place.
pub const HUGE_VARINTS: [&[u8]; 4] = [
    &[0xFF, 0xFF, 0xFF, 0xFF, 0xFF, 0xFF, 0xFF, 0xFF, 0xFF, 0x01],
    &[0x80, 0x80, 0x80, 0x80, 0x80, 0x20],
    &[0x81, 0x80, 0x80, 0x80, 0x10],
    &[0x81, 0x80, 0x40],
];

/// Rewrites the payload length field of a container whose payload grew or shrank (the
/// metadata left as it was), so the container parses again; a no-op on bytes that do not
/// hold one.
pub fn fix_payload_length(data: &mut [u8]) {
    let Some(&kind_len) = data.get(12) else {
        return;
    };
    let metadata_at = 13 + usize::from(kind_len);
    let Some(field) = data.get(metadata_at..metadata_at + 8) else {
        return;
    };
    let metadata_len = u64::from_le_bytes(field.try_into().expect("8 bytes"));
    let Some(payload_at) = usize::try_from(metadata_len)
        .ok()
        .and_then(|m| (metadata_at + 8).checked_add(m))
    else {
        return;
    };
    if let Some(len) = data.len().checked_sub(payload_at + 8 + 4) {
        data[payload_at..payload_at + 8].copy_from_slice(&(len as u64).to_le_bytes());
    }
}

/// Whether a mutation at byte `at` (index `k` among bits or bytes) is made with `stride`.
fn visited(at: usize, k: usize, stride: usize) -> bool {
    at < EVERY_BYTE_BELOW || k.is_multiple_of(stride.max(1))
}

/// One random byte-level edit: flip, set to an interesting value, insert, delete, or copy
/// a run of bytes over another place.
fn mutate_once(data: &mut Vec<u8>, draws: &mut Draws) {
    if data.is_empty() {
        data.push(draws.below(256) as u8);
        return;
    }
    let at = draws.below(data.len());
    match draws.below(5) {
        0 => data[at] ^= 1 << draws.below(8),
        1 => data[at] = [0x00, 0x01, 0x7F, 0x80, 0xFF][draws.below(5)],
        2 => data.insert(at, draws.below(256) as u8),
        3 => {
            data.remove(at);
        }
        _ => {
            let len = 1 + draws.below(8.min(data.len()));
            let from = draws.below(data.len() + 1 - len);
            let to = draws.below(data.len() + 1 - len);
            let run = data[from..from + len].to_vec();
            data[to..to + len].copy_from_slice(&run);
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::panic::{catch_unwind, AssertUnwindSafe};

    /// Tallies of one harness run.
    #[derive(Default, Debug)]
    struct Tally {
        cases: usize,
        accepted: usize,
        refused: usize,
    }

    /// Runs `check` on `data`; a panic fails the test with the mutation that caused it, an
    /// error must name `data`.
    fn run(
        tally: &mut Tally,
        seed: &str,
        name: &str,
        data: &[u8],
        check: fn(&[u8]) -> Result<Model>,
    ) {
        tally.cases += 1;
        match catch_unwind(AssertUnwindSafe(|| check(data))) {
            Ok(Ok(_)) => tally.accepted += 1,
            Ok(Err(err)) => {
                assert!(names_its_argument(&err), "{seed}, {name}: {err}");
                tally.refused += 1;
            }
            Err(_) => panic!(
                "{seed}, {name}: panicked on {} bytes {:?}",
                data.len(),
                data
            ),
        }
    }

    #[test]
    fn every_seed_file_reads_back_and_predicts() {
        let seeds = seed_files();
        assert_eq!(seeds.len(), 9);
        for (name, file) in &seeds {
            let model = check_file(file).unwrap_or_else(|e| panic!("{name}: {e}"));
            let (container, _) = read_model(file).unwrap();
            if name.contains("_v1_") {
                // re-encoded in the current format
                assert_eq!(
                    Model::decode(&container.kind, &model.to_bytes()).unwrap(),
                    model
                );
            } else {
                assert_eq!(model.to_bytes(), container.payload, "{name}");
            }
            assert!(
                check_payload(&payload_input(file).unwrap()).is_ok(),
                "{name}"
            );
        }
    }

    #[test]
    fn raw_mutations_are_refused_by_the_checksum_or_the_header() {
        // Every raw edit of a checksummed file is refused (a single bit flip or a single
        // truncation always changes a CRC-32: Koopman 2002, "32-bit cyclic redundancy
        // codes for Internet applications", detects all burst errors up to 32 bits).
        for (seed, file) in seed_files().iter().take(2) {
            let mut tally = Tally::default();
            raw_mutations(file, 1, |name, data| {
                run(&mut tally, seed, name, data, check_file)
            });
            assert_eq!(tally.accepted, 0, "{seed}: {tally:?}");
        }
    }

    #[test]
    fn mutations_with_the_checksum_fixed_never_panic() {
        for (seed, file) in seed_files() {
            let mut tally = Tally::default();
            // About 150 positions per file keep the debug run short; the seeds together
            // still cover every field of every learner, and `make fuzz` goes further.
            let stride = (file.len() / 150) | 1;
            mutations_with_checksum(&file, stride, 300, |name, data| {
                run(&mut tally, &seed, name, data, check_file)
            });
            assert!(tally.refused > 0 && tally.cases == tally.accepted + tally.refused);
            eprintln!("{seed}: {tally:?}");
        }
    }

    #[test]
    fn payload_mutations_never_panic() {
        // Edits of the payload alone, wrapped in a valid container, so all of them reach
        // the learner's decoder and validation.
        for (seed, file) in seed_files() {
            let input = payload_input(&file).unwrap();
            let mut tally = Tally::default();
            let mut draws = Draws::from_seed(input.len() as u64);
            let mut visit =
                |name: &str, data: &[u8]| run(&mut tally, &seed, name, data, check_payload);
            let mut buffer = input.clone();
            for at in (1..input.len()).filter(|&at| visited(at, at, (input.len() / 150) | 1)) {
                for byte in [0x00, 0x01, 0x7F, 0x80, 0xFF] {
                    buffer[at] = byte;
                    visit("byte set", &buffer);
                }
                buffer[at] = input[at];
                let mut huge = input.clone();
                huge.splice(
                    at..at,
                    [0xFF, 0xFF, 0xFF, 0xFF, 0xFF, 0xFF, 0xFF, 0xFF, 0x7F],
                );
                visit("huge varint inserted", &huge);
                // A one-byte count or size overwritten by a huge one, the fields after it
                // left in place: the decoded model is whole but for that count.
                for varint in HUGE_VARINTS {
                    let mut huge = input.clone();
                    huge.splice(at..=at, varint.iter().copied());
                    visit("huge varint in place", &huge);
                }
            }
            for cut in 0..input.len() {
                visit("truncated", &input[..cut]);
            }
            for _ in 0..300 {
                let mut data = input.clone();
                for _ in 0..=draws.below(4) {
                    mutate_once(&mut data, &mut draws);
                }
                visit("random edits", &data);
            }
            eprintln!("{seed} payload: {tally:?}");
        }
    }

    #[test]
    fn fuzzer_findings_stay_fixed() {
        // model_payload, found by cargo-fuzz: a linear ensemble with finite coefficients
        // so large that intercept + coefficients · x overflows to ±inf and their sum to
        // NaN. Prediction now refuses with an error naming `x`.
        let crash: &[u8] = include_bytes!("../fuzz/regressions/linear_prediction_overflow");
        let err = check_payload(crash)
            .expect_err("overflowing prediction")
            .to_string();
        assert!(
            err.starts_with("`x`: ") && err.contains("float64 range"),
            "{err}"
        );
    }

    #[test]
    fn corrupt_models_that_decode_are_refused_by_their_checks() {
        // Hand-made corruptions that postcard decodes: each must be refused by the semantic
        // checks, since the tree walk reads nodes without bounds checks.
        let seeds = seed_files();
        let tree_file = &seeds[2].1;
        let (container, Model::Tree(tree)) = read_model(tree_file).unwrap() else {
            panic!("seed 2 is a tree ensemble")
        };
        let mut bytes = Vec::new();
        let mut cases = 0;
        let mut check = |tree: crate::learners::tree::TreeEnsemble, what: &str| {
            cases += 1;
            bytes = Container {
                payload: FittedMembers::to_bytes(&tree),
                ..container.clone()
            }
            .to_bytes()
            .unwrap();
            let err = read_model(&bytes).expect_err(what).to_string();
            assert!(err.starts_with("`data`: "), "{what}: {err}");
        };
        let mut t = tree.clone();
        t.trees_mut()[0].nodes[0].child = 0; // a cycle back to the root
        check(t, "cycle");
        let mut t = tree.clone();
        t.trees_mut()[1].nodes[0].feature = 3; // feature index = n_features
        check(t, "feature index");
        let mut t = tree.clone();
        let last = t.trees_mut()[0].nodes.len() - 1;
        t.trees_mut()[0].nodes[last].child = 1 << 20; // leaf number past the values
        check(t, "leaf index");
        let mut t = tree.clone();
        t.trees_mut()[0].values[0] = 2.0; // class fraction above 1
        check(t, "fraction");
        let mut t = tree.clone();
        t.trees_mut()[0].nodes[0].threshold = f64::NAN;
        check(t, "NaN threshold");
        let mut t = tree;
        t.trees_mut()[0].values[0] = f64::INFINITY;
        check(t, "infinite leaf value");
        assert_eq!(cases, 6);
    }
    /// Every byte of a stored stream state set to 0x00, 0x01, 0x7F, 0x80, 0xFF, and a huge
    /// varint inserted at every position: decoding refuses with `state`/`data`, or the
    /// state finishes and merges with itself without a panic.
    fn stored_state_edits<S: crate::members::MergeableState + Clone>(state: &S) -> (usize, usize) {
        let data = state.to_bytes().unwrap();
        let (mut cases, mut refused) = (0, 0);
        let mut edits: Vec<Vec<u8>> = (0..data.len()).map(|cut| data[..cut].to_vec()).collect();
        for at in 0..data.len() {
            for byte in [0x00, 0x01, 0x7F, 0x80, 0xFF] {
                let mut edit = data.clone();
                edit[at] = byte;
                edits.push(edit);
            }
            let mut edit = data.clone();
            edit.splice(
                at..at,
                [0xFF, 0xFF, 0xFF, 0xFF, 0xFF, 0xFF, 0xFF, 0xFF, 0x7F],
            );
            edits.push(edit);
        }
        for edit in edits {
            cases += 1;
            let outcome = catch_unwind(AssertUnwindSafe(|| match S::from_bytes(&edit) {
                Err(err) => {
                    assert!(err.to_string().starts_with("`state`"), "{err}");
                    true
                }
                Ok(restored) => {
                    let _ = restored.finish();
                    let mut merged = restored.clone();
                    let _ = merged.merge(restored);
                    false
                }
            }));
            match outcome {
                Ok(true) => refused += 1,
                Ok(false) => {}
                Err(_) => panic!("panicked on stored state {edit:?}"),
            }
        }
        (cases, refused)
    }

    #[test]
    fn corrupt_stream_states_are_refused_before_they_index_or_allocate() {
        use crate::decomposition::Loss;
        use crate::size_curve::SizeCurveState;
        use crate::uncertainty::CountGramState;
        let counts = Array2::from_shape_fn((4, 9), |(m, i)| ((i * 3 + m) % 3) as u8);
        let mut gram = CountGramState::new(true);
        gram.update(counts.view(), &Pool::Global, &Silent).unwrap();
        let (cases, refused) = stored_state_edits(&gram);
        assert!(refused > cases / 4, "count Gram: {refused} of {cases}");
        let curve = SizeCurveState::new(Loss::SquaredError, 4, vec![1, 2, 4], 3, 7).unwrap();
        let (cases, refused) = stored_state_edits(&curve);
        assert!(refused > cases / 4, "size curve: {refused} of {cases}");
    }
}
