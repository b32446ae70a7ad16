//! The one model of member predictions shared by every family that reads them: the three
//! kinds ([`Members`]), what an ensemble predicts ([`Task`]), the majority vote and its tie
//! rule ([`vote`], [`takes_lead`]), the tolerances and caps every family checks against,
//! the chunk driver over points ([`for_chunks`]) and the trait of mergeable stream states
//! ([`MergeableState`]).
//!
//! ```text
//! values          (n_members, n_points)            f32/f64, one value per point
//! probabilities   (n_members, n_points, n_classes) f32/f64, each member's row sums to 1
//! labels          (n_members, n_points)            i64 class indices 0..n_classes
//! ```

use std::ops::Range;

use ndarray::{ArrayView1, ArrayView2, ArrayView3, Axis};
use rayon::prelude::*;
use serde::de::DeserializeOwned;
use serde::{Deserialize, Serialize};

use crate::error::{Error, Result};
use crate::numeric::Real;
use crate::parallel::{Monitor, Pool};

/// Points per chunk of the aggregation, decomposition, size-curve and correlation loops:
/// the unit of parallel work and of merging. Fixed, so results do not depend on the
/// thread count.
pub const CHUNK_POINTS: usize = 4096;

/// Largest allowed |Σ_c p_c − 1| for one member's probabilities at one point, and the
/// slack allowed below 0 and above 1 for a single probability.
///
/// 1e-5: f32 probabilities carry about 6e-8 relative rounding per class, so a float32
/// softmax over a few hundred classes sums to 1 only within a few 1e-6; a tighter bound
/// would reject honest f32 inputs, a looser one would let through rows off by 1e-4 (which
/// callers' tests reject as mis-normalised).
pub const PROBABILITY_TOLERANCE: f64 = 1e-5;

/// Largest number of classes of any members array (labels or probabilities).
///
/// 2^20: the diversity counts need more than 2^16 classes (their label codes widen to
/// u32), and every other family sizes its class-dependent buffers through
/// [`crate::error::zeroed`], so a stray huge label (say 10^9) is an error naming the
/// argument, never an abort; a vote table of [`CHUNK_POINTS`] × 2^20 totals that does not
/// fit in memory is an [`Error::OutOfMemory`].
pub const MAX_CLASSES: usize = 1 << 20;

/// What an ensemble predicts.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub enum Task {
    /// A real target; members predict one value per point.
    Regression,
    /// Class codes `0..n_classes`; members predict a label or class probabilities per point.
    Classification { n_classes: usize },
}

impl Task {
    /// Parses the user-facing name; `n_classes` is used for classification only.
    ///
    /// # Errors
    /// `task` for an unknown name, `n_classes` below 1 for classification.
    pub fn parse(name: &str, n_classes: usize) -> Result<Self> {
        match name {
            "regression" => Ok(Task::Regression),
            "classification" if n_classes >= 1 => Ok(Task::Classification { n_classes }),
            "classification" => Err(Error::value("n_classes", "must be at least 1")),
            other => Err(Error::value(
                "task",
                format!("expected 'regression' or 'classification', got {other:?}"),
            )),
        }
    }

    /// The task of a fit's options: `task` by name, `n_classes` given for classification
    /// only.
    ///
    /// # Errors
    /// As [`Task::parse`]; `n_classes` given for regression or missing for classification.
    pub fn from_options(name: &str, n_classes: Option<usize>) -> Result<Self> {
        match (name, n_classes) {
            ("regression", Some(_)) => Err(Error::value("n_classes", "only for classification")),
            ("classification", None) => {
                Err(Error::value("n_classes", "required for classification"))
            }
            (name, n_classes) => Task::parse(name, n_classes.unwrap_or(0)),
        }
    }

    /// Values per point in a member's prediction: 1, or the number of classes.
    pub fn outputs(self) -> usize {
        match self {
            Task::Regression => 1,
            Task::Classification { n_classes } => n_classes,
        }
    }
}

/// Member predictions in one of the three kinds, as views (any strides, no copy).
#[derive(Debug, Clone, Copy)]
pub enum Members<'a, T> {
    /// `(n_members, n_points)` values.
    Values(ArrayView2<'a, T>),
    /// `(n_members, n_points, n_classes)` class probabilities.
    Probabilities(ArrayView3<'a, T>),
    /// `(n_members, n_points)` class indices among `n_classes` (the second field).
    Labels(ArrayView2<'a, i64>, usize),
}

/// Targets of the points: real values for values, class indices otherwise.
#[derive(Debug, Clone, Copy)]
pub enum Targets<'a> {
    /// Real targets of value predictions.
    Values(ArrayView1<'a, f64>),
    /// Class indices of probability and label predictions.
    Labels(ArrayView1<'a, i64>),
}

impl Targets<'_> {
    /// Number of points.
    pub fn len(&self) -> usize {
        match self {
            Targets::Values(y) => y.len(),
            Targets::Labels(y) => y.len(),
        }
    }

    /// Whether there are no points.
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }
}

impl<'a, T: Real> Members<'a, T> {
    /// (n_members, n_points).
    pub fn dim(&self) -> (usize, usize) {
        match self {
            Members::Values(a) => a.dim(),
            Members::Labels(a, _) => a.dim(),
            Members::Probabilities(a) => (a.dim().0, a.dim().1),
        }
    }

    /// Number of members.
    pub fn n_members(&self) -> usize {
        self.dim().0
    }

    /// Number of points.
    pub fn n_points(&self) -> usize {
        self.dim().1
    }

    /// Regression for values, classification with its class count otherwise.
    pub fn task(&self) -> Task {
        match self {
            Members::Values(_) => Task::Regression,
            Members::Probabilities(a) => Task::Classification {
                n_classes: a.dim().2,
            },
            Members::Labels(_, n_classes) => Task::Classification {
                n_classes: *n_classes,
            },
        }
    }

    /// The float kinds as `(n_members, n_points, cells)` cells: one cell per value, one
    /// per class for probabilities; `None` for labels.
    pub fn cells(&self) -> Option<ArrayView3<'a, T>> {
        match *self {
            Members::Values(a) => Some(a.insert_axis(Axis(2))),
            Members::Probabilities(a) => Some(a),
            Members::Labels(..) => None,
        }
    }

    /// Checks the shape every family needs: at least one member, one point and (for the
    /// classification kinds) one class, within [`MAX_CLASSES`].
    ///
    /// # Errors
    /// `members` (no members, points or classes), `n_classes` (labels: 0 or above
    /// [`MAX_CLASSES`]).
    pub fn check(&self) -> Result<()> {
        let (m, n) = self.dim();
        if m == 0 {
            return Err(Error::value(
                "members",
                "has no members (first axis is empty)",
            ));
        }
        if n == 0 {
            return Err(Error::value(
                "members",
                "has no points (second axis is empty)",
            ));
        }
        match self {
            Members::Probabilities(a) if a.dim().2 == 0 => Err(Error::value(
                "members",
                "has no classes (third axis is empty)",
            )),
            Members::Labels(_, n_classes) => check_classes(*n_classes, "n_classes"),
            _ => Ok(()),
        }
    }

    /// [`Members::check`], plus `y` having one target per point.
    ///
    /// # Errors
    /// As [`Members::check`]; `y` when its length differs from the number of points.
    pub fn check_targets(&self, targets: usize) -> Result<()> {
        self.check()?;
        let n = self.n_points();
        if targets != n {
            return Err(Error::value(
                "y",
                format!("has {targets} values but `members` has {n} points"),
            ));
        }
        Ok(())
    }
}

/// Checks a class count against 1..=[`MAX_CLASSES`].
///
/// # Errors
/// `argument` when `n_classes` is 0 or above [`MAX_CLASSES`].
pub fn check_classes(n_classes: usize, argument: &'static str) -> Result<()> {
    if n_classes == 0 {
        return Err(Error::value(argument, "must be at least 1"));
    }
    if n_classes > MAX_CLASSES {
        return Err(Error::value(
            argument,
            format!(
                "{n_classes} classes (largest label + 1) exceed the {MAX_CLASSES} supported; \
                 labels must be class indices 0..n_classes-1"
            ),
        ));
    }
    Ok(())
}

/// The class of a label, or an error naming `argument` when it is outside 0..n_classes.
///
/// # Errors
/// `argument` for a negative label or one at or above `n_classes`.
#[inline]
pub fn class_of(label: i64, n_classes: usize, argument: &'static str) -> Result<usize> {
    usize::try_from(label)
        .ok()
        .filter(|&c| c < n_classes)
        .ok_or_else(|| bad_label(label, n_classes, argument))
}

#[cold]
fn bad_label(label: i64, n_classes: usize, argument: &'static str) -> Error {
    Error::value(
        argument,
        format!("label {label} is outside 0..{n_classes} (labels are class indices)"),
    )
}

/// The number of classes implied by labels: largest label + 1 (0 without labels).
pub fn classes_in(members: ArrayView2<'_, i64>, y: Option<ArrayView1<'_, i64>>) -> usize {
    let largest = |labels: &mut dyn Iterator<Item = i64>| labels.fold(-1, i64::max);
    let top = largest(&mut members.iter().copied())
        .max(y.map_or(-1, |y| largest(&mut y.iter().copied())));
    usize::try_from(top + 1).unwrap_or(0)
}

/// Checks that every member's probabilities at every point of a chunk (rows of `cells`)
/// lie in [0, 1] and sum to 1, within [`PROBABILITY_TOLERANCE`].
///
/// # Errors
/// `members` for the first row that does not.
pub fn check_probabilities<T: Real>(cells: ArrayView2<'_, T>) -> Result<()> {
    for row in cells.rows() {
        check_probability_row(row.iter().map(|p| p.to_f64()))?;
    }
    Ok(())
}

/// [`check_probabilities`] of one member's probabilities at one point, given as values.
#[inline]
pub fn check_probability_row(row: impl Iterator<Item = f64>) -> Result<()> {
    let mut sum = 0.0;
    for p in row {
        if !(-PROBABILITY_TOLERANCE..=1.0 + PROBABILITY_TOLERANCE).contains(&p) {
            return Err(Error::value(
                "members",
                format!("probabilities must lie in [0, 1], got {p}"),
            ));
        }
        sum += p;
    }
    if (sum - 1.0).abs() > PROBABILITY_TOLERANCE {
        return Err(Error::value(
            "members",
            format!(
                "each member's probabilities must sum to 1 over the classes \
                 (within {PROBABILITY_TOLERANCE:e}), got {sum}"
            ),
        ));
    }
    Ok(())
}

// -- the vote -------------------------------------------------------------------------------

/// The majority vote: the index of the largest total, the **lowest index among ties**.
///
/// Every family that turns totals, vote fractions or probabilities into one class uses
/// this rule (a member's label from its probabilities, the out-of-bag vote, the ensemble's
/// vote). A NaN never wins against an earlier class.
#[inline]
pub fn vote(totals: impl IntoIterator<Item = f64>) -> usize {
    let mut totals = totals.into_iter().enumerate();
    let Some((_, mut best_total)) = totals.next() else {
        return 0;
    };
    let mut best = 0;
    for (c, total) in totals {
        if total > best_total {
            best = c;
            best_total = total;
        }
    }
    best
}

/// The tie rule of [`vote`] kept while votes arrive one by one: after class `class`
/// reaches `total`, it takes the lead from `leader` (whose total is `leader_total`) iff
/// its total is larger, or equal with a lower index.
///
/// ```text
/// The leader w has the largest total and the lowest index among equal totals. After a
/// vote for class c ≠ w, only c's total changed, so c leads iff total_c > total_w, or
/// total_c = total_w and c < w (every other class tied with w has an index above w):
/// O(1) per vote, and the same winner as `vote` over the final totals.
/// ```
#[inline]
pub fn takes_lead(class: usize, total: f64, leader: usize, leader_total: f64) -> bool {
    // Branch-free: votes arrive in random order, so a branch would mispredict.
    (total > leader_total) | ((total == leader_total) & (class < leader))
}

/// Adds every member's vote (members in `order`, weight `weights[b]`) for the points of
/// one chunk: `totals` (points × classes) gets the vote weight and `leader` tracks the
/// majority class with the tie rule of [`takes_lead`].
///
/// # Errors
/// `members` for a label outside 0..n_classes.
pub fn add_votes(
    members: &ArrayView2<'_, i64>,
    order: &mut dyn Iterator<Item = usize>,
    points: &Range<usize>,
    n_classes: usize,
    weights: &[f64],
    totals: &mut [f64],
    leader: &mut [usize],
) -> Result<()> {
    let len = points.len();
    let (totals, leader) = (&mut totals[..len * n_classes], &mut leader[..len]);
    for b in order {
        let w = weights[b];
        let row = members.slice(ndarray::s![b, points.clone()]);
        let mut add = |j: usize, label: i64| -> Result<()> {
            let c = class_of(label, n_classes, "members")?;
            let current = leader[j];
            let cell = &mut totals[j * n_classes..(j + 1) * n_classes];
            cell[c] += w;
            if takes_lead(c, cell[c], current, cell[current]) {
                leader[j] = c;
            }
            Ok(())
        };
        match row.as_slice() {
            Some(labels) => labels
                .iter()
                .enumerate()
                .try_for_each(|(j, &l)| add(j, l))?,
            None => row.iter().enumerate().try_for_each(|(j, &l)| add(j, l))?,
        }
    }
    Ok(())
}

// -- the chunk driver -----------------------------------------------------------------------

/// How [`for_chunks`] cuts the points: `chunk_points` per chunk, `per_round` chunks run in
/// parallel between two monitor calls (0: four per thread).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Chunks {
    /// Number of points.
    pub n_points: usize,
    /// Points per chunk (the last may be shorter).
    pub chunk_points: usize,
    /// Chunks per round (0: four per thread of the pool).
    pub per_round: usize,
}

impl Chunks {
    /// `n_points` points in chunks of [`CHUNK_POINTS`], four chunks per thread a round.
    pub fn of(n_points: usize) -> Self {
        Chunks {
            n_points,
            chunk_points: CHUNK_POINTS,
            per_round: 0,
        }
    }

    /// Number of chunks.
    pub fn count(&self) -> usize {
        self.n_points.div_ceil(self.chunk_points.max(1))
    }

    /// The points of chunk `c`.
    pub fn range(&self, c: usize) -> Range<usize> {
        let size = self.chunk_points.max(1);
        c * size..((c + 1) * size).min(self.n_points)
    }
}

/// The one chunk driver: runs `work` on every chunk of points, a round of chunks at a time
/// in parallel on `pool`, and hands the results to `merge` **in chunk order** on the
/// calling thread, with a monitor call (points done, `n_points`) after every round; so
/// results never depend on the thread count, and Ctrl-C or a progress callback is seen
/// between rounds. `slots` holds one per-chunk output (e.g. the chunk's slices of
/// per-point outputs; `&mut no_slots(..)` when there are none).
///
/// # Errors
/// The first error of `work` or `merge` (in chunk order), or the monitor's.
pub fn for_chunks<S: Send, R: Send>(
    chunks: Chunks,
    slots: &mut [S],
    pool: &Pool,
    monitor: &dyn Monitor,
    work: impl Fn(Range<usize>, &mut S) -> Result<R> + Sync + Send,
    mut merge: impl FnMut(R) -> Result<()>,
) -> Result<()> {
    let n_chunks = chunks.count();
    if slots.len() != n_chunks {
        return Err(Error::value(
            "out",
            format!("has {} chunks but the points make {n_chunks}", slots.len()),
        ));
    }
    let per_round = if chunks.per_round == 0 {
        pool.threads().max(1) * 4
    } else {
        chunks.per_round
    };
    let mut start = 0;
    while start < n_chunks {
        let end = (start + per_round).min(n_chunks);
        let part: Vec<R> = pool.run(|| {
            slots[start..end]
                .par_iter_mut()
                .enumerate()
                .map(|(i, slot)| work(chunks.range(start + i), slot))
                .collect::<Result<Vec<R>>>()
        })?;
        part.into_iter().try_for_each(&mut merge)?;
        monitor.progress(chunks.range(end - 1).end, chunks.n_points)?;
        start = end;
    }
    Ok(())
}

/// One `()` slot per chunk, for chunk loops without per-chunk outputs.
pub fn no_slots(chunks: Chunks) -> Vec<()> {
    vec![(); chunks.count()]
}

// -- mergeable states -----------------------------------------------------------------------

/// A stream's state: fed chunk by chunk of points by family-specific `update`s, merged
/// with the state of other points, finished into the result, and stored as bytes (serde +
/// postcard) so the Python streams pickle.
pub trait MergeableState: Serialize + DeserializeOwned {
    /// The finished result.
    type Output;

    /// Adds the points of `other` after the points of `self` (the order of a stream that
    /// saw `self`'s chunks, then `other`'s).
    ///
    /// # Errors
    /// `other` when the two states were set up differently (loss, members, classes, ...).
    fn merge(&mut self, other: Self) -> Result<()>;

    /// The result over all points seen so far.
    ///
    /// # Errors
    /// `members` when no points were added.
    fn finish(&self) -> Result<Self::Output>;

    /// The state as bytes.
    ///
    /// # Errors
    /// `state` if serialisation fails (it does not for the states of this crate).
    fn to_bytes(&self) -> Result<Vec<u8>> {
        postcard::to_allocvec(self)
            .map_err(|e| Error::value("state", format!("cannot be stored: {e}")))
    }

    /// The state stored by [`MergeableState::to_bytes`].
    ///
    /// # Errors
    /// `state` for bytes that are not such a state.
    fn from_bytes(bytes: &[u8]) -> Result<Self> {
        let state: Self = postcard::from_bytes(bytes)
            .map_err(|e| Error::value("state", format!("is not a stored stream state: {e}")))?;
        state.check_stored()?;
        Ok(state)
    }

    /// Checks the sizes of a decoded state against one another (table lengths against the
    /// member and size counts), so a corrupt stored state is refused by
    /// [`from_bytes`](MergeableState::from_bytes) instead of indexing out of range or
    /// allocating by a corrupt count in `finish`, `merge` or `update`.
    ///
    /// # Errors
    /// `state` when the sizes disagree.
    fn check_stored(&self) -> Result<()> {
        Ok(())
    }
}

/// Deterministic pseudo-random values in [0, 1) (a small LCG) shared by the families'
/// tests.
#[cfg(test)]
pub(crate) fn test_values(count: usize, seed: u64) -> Vec<f64> {
    let mut state = seed
        .wrapping_mul(6364136223846793005)
        .wrapping_add(1442695040888963407);
    (0..count)
        .map(|_| {
            state = state
                .wrapping_mul(6364136223846793005)
                .wrapping_add(1442695040888963407);
            (state >> 11) as f64 / (1u64 << 53) as f64
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::parallel::{Silent, Threads};
    use ndarray::array;

    #[test]
    fn vote_takes_the_lowest_index_among_ties() {
        assert_eq!(vote([1.0, 3.0, 3.0]), 1);
        assert_eq!(vote([2.0, 2.0]), 0);
        assert_eq!(vote([0.0, 0.5, 0.25]), 1);
        assert_eq!(vote(std::iter::empty()), 0);
    }

    #[test]
    fn incremental_leader_equals_the_vote_of_the_totals() {
        let labels = array![[2i64, 0, 1], [1, 1, 1], [1, 0, 2], [2, 2, 2]];
        let (mut totals, mut leader) = (vec![0.0; 9], vec![0usize; 3]);
        add_votes(
            &labels.view(),
            &mut (0..4),
            &(0..3),
            3,
            &[1.0; 4],
            &mut totals,
            &mut leader,
        )
        .unwrap();
        for j in 0..3 {
            assert_eq!(leader[j], vote(totals[j * 3..j * 3 + 3].iter().copied()));
        }
        assert_eq!(leader, vec![1, 0, 1]);
    }

    #[test]
    fn bad_labels_and_class_counts_name_the_argument() {
        let labels = array![[0i64, 3]];
        let err = add_votes(
            &labels.view(),
            &mut (0..1),
            &(0..2),
            3,
            &[1.0],
            &mut [0.0; 6],
            &mut [0; 2],
        )
        .unwrap_err();
        assert!(err.to_string().starts_with("`members`"));
        assert!(check_classes(0, "n_classes").is_err());
        assert!(check_classes(MAX_CLASSES + 1, "n_classes").is_err());
        assert!(check_classes(MAX_CLASSES, "n_classes").is_ok());
        let empty = ndarray::Array2::<f64>::zeros((0, 3));
        assert!(Members::Values(empty.view()).check().is_err());
    }

    #[test]
    fn chunks_merge_in_order_whatever_the_threads() {
        let run = |threads| {
            let pool = Threads::from_option(Some(threads))
                .and_then(Threads::pool)
                .unwrap();
            let chunks = Chunks {
                n_points: 1000,
                chunk_points: 7,
                per_round: 0,
            };
            let mut seen = Vec::new();
            for_chunks(
                chunks,
                &mut no_slots(chunks),
                &pool,
                &Silent,
                |points, ()| Ok(points.start),
                |start| {
                    seen.push(start);
                    Ok(())
                },
            )
            .unwrap();
            seen
        };
        let one = run(1);
        assert_eq!(one, (0..1000).step_by(7).collect::<Vec<_>>());
        assert_eq!(run(3), one);
    }
}
