//! Native learners of bagged ensembles. Every learner fits all members at once from the
//! training rows and the members × rows in-bag counts (row weights), so no resampled copy
//! of the design is ever made, and predicts for all members in one parallel call.
//!
//! - [`linear`]: weighted least squares / ridge with intercept (regression);
//! - [`neighbors`]: k nearest neighbours weighted by in-bag multiplicity;
//! - [`tree`]: CART trees (exact and histogram split finders), counts as row weights.
//!
//! Every learner keeps one contract: its parameters are checked once, turning a
//! `*Params` into a `Checked*Params` whose `fit` gives the fitted ensemble (linfa's
//! "param guard"), and every fitted ensemble implements [`FittedMembers`], so the
//! bindings treat the three alike.

pub mod linear;
pub mod neighbors;
pub mod tree;

use ndarray::{ArrayView1, ArrayView2};
use serde::{Deserialize, Serialize};

use crate::error::{Error, Result};
use crate::numeric::Real;
use crate::parallel::{Monitor, Pool};
use crate::resampling::Count;

pub use crate::members::Task;

/// Training targets.
#[derive(Debug, Clone, Copy)]
pub enum Targets<'a> {
    /// Real values, one per row.
    Regression(ArrayView1<'a, f64>),
    /// Class codes `0..n_classes`, one per row.
    Classes(ArrayView1<'a, usize>),
}

impl Targets<'_> {
    /// The targets as f64: the values, or the class codes as whole numbers.
    pub fn to_f64(&self) -> Vec<f64> {
        match self {
            Targets::Regression(v) => v.to_vec(),
            Targets::Classes(v) => v.iter().map(|&c| c as f64).collect(),
        }
    }
}

/// The contract of a fitted native ensemble, whatever its learner: sizes, the check of
/// new points, member predictions and out-of-bag predictions written into a buffer the
/// caller provides (members × points × outputs, C order), the ensemble mean, and
/// serialisation.
pub trait FittedMembers: Sized {
    /// Number of members.
    fn n_members(&self) -> usize;

    /// What the members predict.
    fn task(&self) -> Task;

    /// Number of input features.
    fn n_features(&self) -> usize;

    /// Values per point in a member's prediction (1, or the number of classes).
    fn outputs(&self) -> usize {
        self.task().outputs()
    }

    /// Checks points `x` before prediction: finite values and the fitted number of
    /// features.
    ///
    /// # Errors
    /// `x` with the wrong number of features or non-finite values.
    fn check_x<T: Real>(&self, x: ArrayView2<'_, T>) -> Result<()> {
        check_design(x, "x")?;
        if x.ncols() != self.n_features() {
            return Err(Error::value(
                "x",
                format!(
                    "has {} columns but the ensemble was fit on {} features",
                    x.ncols(),
                    self.n_features()
                ),
            ));
        }
        Ok(())
    }

    /// Every member's prediction at every point of `x`, written into `out` (members ×
    /// points × outputs): regression values or class fractions.
    ///
    /// # Errors
    /// As [`check_x`](FittedMembers::check_x); `out` of the wrong length;
    /// [`Error::Interrupted`] from the monitor.
    fn member_predictions_into<T: Real>(
        &self,
        x: ArrayView2<'_, T>,
        out: &mut [f64],
        pool: &Pool,
        monitor: &dyn Monitor,
    ) -> Result<()>;

    /// Member m's prediction at training row i where `counts[m, i] = 0` (the member never
    /// saw the row), NaN elsewhere; `out` as in
    /// [`member_predictions_into`](FittedMembers::member_predictions_into).
    ///
    /// # Errors
    /// As `member_predictions_into`; `counts` whose shape is not members × rows of `x`.
    fn out_of_bag_into<T: Real, C: Count>(
        &self,
        x: ArrayView2<'_, T>,
        counts: ArrayView2<'_, C>,
        out: &mut [f64],
        pool: &Pool,
        monitor: &dyn Monitor,
    ) -> Result<()>;

    /// The ensemble prediction at every point into `out` (points × outputs): the members'
    /// values (or class fractions) summed in member order and divided by the number of
    /// members.
    ///
    /// # Errors
    /// As [`member_predictions_into`](FittedMembers::member_predictions_into).
    fn predict_into<T: Real>(
        &self,
        x: ArrayView2<'_, T>,
        out: &mut [f64],
        pool: &Pool,
        monitor: &dyn Monitor,
    ) -> Result<()> {
        self.check_x(x)?;
        let width = x.nrows() * self.outputs();
        check_out(out, width)?;
        let mut members = vec![0.0; self.n_members() * width];
        self.member_predictions_into(x, &mut members, pool, monitor)?;
        out.fill(0.0);
        for member in members.chunks_exact(width.max(1)) {
            out.iter_mut().zip(member).for_each(|(sum, v)| *sum += v);
        }
        let n_members = self.n_members() as f64;
        out.iter_mut().for_each(|sum| *sum /= n_members);
        Ok(())
    }

    /// One ensemble of the members of `parts`, in order: the parts are ensembles of the
    /// same learner and settings fitted on consecutive member ranges of one ensemble (see
    /// e.g. [`tree::CheckedTreeParams::fit_members`]), so the join of a split fit is the
    /// whole fit, member for member.
    ///
    /// # Errors
    /// `parts` empty, or parts that disagree on the task, the number of features or a
    /// setting of the learner (or, for neighbours, the training rows).
    fn join(parts: Vec<Self>) -> Result<Self>;

    /// The ensemble of the members `members`, in that order (e.g. the first members of an
    /// order of [`crate::ordering::order_members`]): member k of the result is member
    /// `members[k]` of `self`, unchanged.
    ///
    /// # Errors
    /// `members` empty, with an index out of range or repeated (see [`check_selection`]).
    fn select(&self, members: &[usize]) -> Result<Self>;

    /// Length of the fitted state's bytes ([`encode_into`](FittedMembers::encode_into)).
    fn encoded_len(&self) -> usize;

    /// Writes the fitted state's bytes into `out`, of exactly
    /// [`encoded_len`](FittedMembers::encoded_len) bytes, so a caller can place them in a
    /// buffer of its own (a model file) without an intermediate copy.
    ///
    /// # Panics
    /// When `out` has another length.
    fn encode_into(&self, out: &mut [u8]);

    /// The fitted state as bytes.
    fn to_bytes(&self) -> Vec<u8> {
        let mut out = vec![0; self.encoded_len()];
        self.encode_into(&mut out);
        out
    }

    /// Reads [`to_bytes`](FittedMembers::to_bytes) output, checking every index so that
    /// corrupt bytes are an error and never a crash at prediction time.
    ///
    /// # Errors
    /// `data` when the bytes do not decode or the decoded ensemble is not well formed.
    fn from_bytes(data: &[u8]) -> Result<Self>;
}

/// Length of the postcard encoding of `value`.
pub(crate) fn postcard_len<T: serde::Serialize>(value: &T) -> usize {
    postcard::serialize_with_flavor(value, postcard::ser_flavors::Size::default())
        .expect("sizing an encoding cannot fail")
}

/// The postcard encoding of `value` into `out`, of exactly [`postcard_len`] bytes.
pub(crate) fn postcard_into<T: serde::Serialize>(value: &T, out: &mut [u8]) {
    let len = out.len();
    let written = postcard::to_slice(value, out)
        .expect("the buffer holds the encoding")
        .len();
    assert_eq!(written, len, "buffer of the wrong length");
}

/// Checks the parts of a [`FittedMembers::join`]: at least one, all with the task and the
/// number of features of the first.
///
/// # Errors
/// `parts` empty or disagreeing.
pub fn check_parts<E: FittedMembers>(parts: &[E]) -> Result<()> {
    let first = parts
        .first()
        .ok_or_else(|| Error::value("parts", "needs at least one fitted ensemble"))?;
    for (k, part) in parts.iter().enumerate().skip(1) {
        if part.task() != first.task() || part.n_features() != first.n_features() {
            return Err(Error::value(
                "parts",
                format!(
                    "part {k} has task {:?} and {} features but part 0 has {:?} and {}",
                    part.task(),
                    part.n_features(),
                    first.task(),
                    first.n_features()
                ),
            ));
        }
    }
    Ok(())
}

/// Checks the member indices of a [`FittedMembers::select`]: at least one, each below
/// `n_members`, none repeated.
///
/// # Errors
/// `members` empty, out of range or repeated.
pub fn check_selection(members: &[usize], n_members: usize) -> Result<()> {
    if members.is_empty() {
        return Err(Error::value("members", "selects no member"));
    }
    let mut seen = vec![false; n_members];
    for &m in members {
        if m >= n_members {
            return Err(Error::value(
                "members",
                format!("member {m} is out of range for an ensemble of {n_members} members"),
            ));
        }
        if std::mem::replace(&mut seen[m], true) {
            return Err(Error::value("members", format!("member {m} is repeated")));
        }
    }
    Ok(())
}

/// Checks that an output buffer holds `expected` values.
///
/// # Errors
/// `out` of another length.
pub fn check_out(out: &[f64], expected: usize) -> Result<()> {
    if out.len() == expected {
        Ok(())
    } else {
        Err(Error::value(
            "out",
            format!("holds {} values, expected {expected}", out.len()),
        ))
    }
}

/// Reads members × rows in-bag counts into one [`Bag`] per member (see [`bags`]).
///
/// # Errors
/// As [`bags`].
pub fn count_bags<C: Count>(counts: ArrayView2<'_, C>, n_rows: usize) -> Result<Vec<Bag>> {
    CountBags::of_counts(counts, n_rows)?.read_all()
}

/// A row-weight element: in-bag counts (unsigned integers) or continuous weights (f64).
pub trait Weight: Copy + Send + Sync + 'static {
    /// The weight as f64.
    fn weight(self) -> f64;
}

macro_rules! impl_weight {
    ($($t:ty),*) => {$(
        impl Weight for $t {
            #[inline]
            fn weight(self) -> f64 {
                self as f64
            }
        }
    )*};
}
impl_weight!(u8, u16, u32, u64, f64);

/// The in-bag rows of one member: row indices (ascending) and their weights (> 0).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Bag {
    pub rows: Vec<usize>,
    pub weights: Vec<f64>,
}

impl Bag {
    /// Sum of the weights (the number of draws for counts).
    pub fn total(&self) -> f64 {
        self.weights.iter().sum()
    }
}

/// Reads members × rows weights into one [`Bag`] per member.
///
/// # Errors
/// `counts` when a weight is negative or not finite, when its shape is not
/// (members, `n_rows`), or when a member has no row with positive weight.
pub fn bags<W: Weight>(counts: ArrayView2<'_, W>, n_rows: usize) -> Result<Vec<Bag>> {
    CountBags::new(counts, n_rows)?.read_all()
}

/// Every member's bag from `source`, members in parallel; a Ctrl-C stops the reading
/// within a member. For a learner whose model keeps its bags (nearest neighbours): they
/// were read before the work started, on one thread and deaf to Ctrl-C.
///
/// # Errors
/// As [`BagSource::bag`]; [`Error::Interrupted`] from the monitor.
pub fn collect_bags(
    source: &dyn BagSource,
    pool: &Pool,
    monitor: &dyn Monitor,
) -> Result<Vec<Bag>> {
    use rayon::prelude::*;
    let members = source.n_members();
    crate::parallel::watched(pool, monitor, members, |watch| {
        (0..members)
            .into_par_iter()
            .map(|m| {
                if watch.stopped() {
                    return Err(Error::Interrupted);
                }
                let bag = source.bag(m)?.into_owned();
                watch.advance(1);
                Ok(bag)
            })
            .collect::<Result<Vec<Bag>>>()
    })?
}

/// Where a fit reads its members' bags: built beforehand, or member by member from the
/// counts, so that a fit holds the bags of the members being fitted only (all of them at
/// once took 16 bytes per in-bag row and member: 10 GB for 5,000 members on 200k rows).
pub trait BagSource: Sync {
    /// Number of members.
    fn n_members(&self) -> usize;
    /// The bag of member `member`.
    ///
    /// # Errors
    /// As [`bags`], naming the member.
    fn bag(&self, member: usize) -> Result<std::borrow::Cow<'_, Bag>>;
}

impl BagSource for [Bag] {
    fn n_members(&self) -> usize {
        self.len()
    }

    fn bag(&self, member: usize) -> Result<std::borrow::Cow<'_, Bag>> {
        Ok(std::borrow::Cow::Borrowed(&self[member]))
    }
}

impl BagSource for Vec<Bag> {
    fn n_members(&self) -> usize {
        self.len()
    }

    fn bag(&self, member: usize) -> Result<std::borrow::Cow<'_, Bag>> {
        self.as_slice().bag(member)
    }
}

/// Bags read member by member from members × rows counts or weights.
pub struct CountBags<'a, W> {
    counts: ArrayView2<'a, W>,
    weight: fn(W) -> f64,
}

impl<'a, C: Count> CountBags<'a, C> {
    /// In-bag counts of any [`Count`] type.
    ///
    /// # Errors
    /// As [`CountBags::new`].
    pub fn of_counts(counts: ArrayView2<'a, C>, n_rows: usize) -> Result<Self> {
        Self::checked(counts, n_rows, |c| c.as_u64() as f64)
    }
}

impl<'a, W: Weight> CountBags<'a, W> {
    /// # Errors
    /// `counts` when its shape is not (members ≥ 1, `n_rows`).
    pub fn new(counts: ArrayView2<'a, W>, n_rows: usize) -> Result<Self> {
        Self::checked(counts, n_rows, W::weight)
    }
}

impl<'a, W: Copy + Sync> CountBags<'a, W> {
    fn checked(counts: ArrayView2<'a, W>, n_rows: usize, weight: fn(W) -> f64) -> Result<Self> {
        let (members, rows) = counts.dim();
        if rows != n_rows {
            return Err(Error::value(
                "counts",
                format!("has {rows} columns but x has {n_rows} rows"),
            ));
        }
        if members == 0 {
            return Err(Error::value("counts", "needs at least one member (row)"));
        }
        Ok(CountBags { counts, weight })
    }

    /// Every member's bag, in order, on this thread.
    fn read_all(&self) -> Result<Vec<Bag>> {
        (0..self.counts.nrows()).map(|m| self.read(m)).collect()
    }

    /// The bag of member `m`.
    fn read(&self, m: usize) -> Result<Bag> {
        let mut bag = Bag {
            rows: Vec::new(),
            weights: Vec::new(),
        };
        for (i, &c) in self.counts.row(m).iter().enumerate() {
            let w = (self.weight)(c);
            if !w.is_finite() || w < 0.0 {
                return Err(Error::value(
                    "counts",
                    format!("member {m}, row {i}: weights must be finite and >= 0, got {w}"),
                ));
            }
            if w > 0.0 {
                bag.rows.push(i);
                bag.weights.push(w);
            }
        }
        if bag.rows.is_empty() {
            return Err(Error::value(
                "counts",
                format!("member {m} has no in-bag row (all weights are 0)"),
            ));
        }
        Ok(bag)
    }
}

impl<W: Copy + Sync> BagSource for CountBags<'_, W> {
    fn n_members(&self) -> usize {
        self.counts.nrows()
    }

    fn bag(&self, member: usize) -> Result<std::borrow::Cow<'_, Bag>> {
        self.read(member).map(std::borrow::Cow::Owned)
    }
}

/// Checks a design: at least one row and column, all values finite.
///
/// # Errors
/// `argument` when empty or when a value is NaN or infinite.
pub fn check_design<T: crate::numeric::Real>(
    x: ArrayView2<'_, T>,
    argument: &'static str,
) -> Result<()> {
    let (n, p) = x.dim();
    if n == 0 || p == 0 {
        return Err(Error::value(
            argument,
            format!("needs at least one row and one column, got shape ({n}, {p})"),
        ));
    }
    if x.iter().any(|v| !v.to_f64().is_finite()) {
        return Err(Error::value(argument, "contains NaN or infinite values"));
    }
    Ok(())
}

/// Members handled between two monitor calls when fitting: enough to keep every thread
/// busy, few enough that progress and Ctrl-C are seen often.
pub(crate) fn member_chunk(threads: usize) -> usize {
    threads.max(1) * 2
}

/// The contract of [`FittedMembers::select`], shared by the learners' tests: the member
/// predictions of a selection are the same rows of the whole ensemble's, selecting every
/// member in order gives the ensemble back, a selection survives `to_bytes`, and empty,
/// out-of-range or repeated selections are refused naming `members`.
#[cfg(test)]
pub(crate) fn check_select_contract<E: FittedMembers + PartialEq + std::fmt::Debug>(
    model: &E,
    x: ArrayView2<'_, f64>,
) {
    use crate::parallel::{Silent, Threads};
    let pool = Threads::Fixed(2).pool().unwrap();
    let m = model.n_members();
    assert!(m >= 3, "the contract needs at least 3 members");
    let width = x.nrows() * model.outputs();
    let predict = |e: &E| {
        let mut out = vec![0.0; e.n_members() * width];
        e.member_predictions_into(x, &mut out, &pool, &Silent)
            .unwrap();
        out
    };
    let whole = predict(model);
    let pick = [m - 1, 0, 1];
    let selected = model.select(&pick).unwrap();
    assert_eq!(selected.n_members(), 3);
    let rows = predict(&selected);
    for (k, &member) in pick.iter().enumerate() {
        assert_eq!(
            rows[k * width..(k + 1) * width],
            whole[member * width..(member + 1) * width]
        );
    }
    let all: Vec<usize> = (0..m).collect();
    assert_eq!(&model.select(&all).unwrap(), model);
    assert_eq!(E::from_bytes(&selected.to_bytes()).unwrap(), selected);
    for bad in [vec![], vec![m], vec![0, 1, 0]] {
        let err = model.select(&bad).unwrap_err();
        assert!(err.to_string().starts_with("`members`"), "{err}");
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::array;

    #[test]
    fn bags_keep_positive_weights_in_row_order() {
        let counts = array![[0u8, 2, 1], [3, 0, 0]];
        let b = bags(counts.view(), 3).unwrap();
        assert_eq!(b[0].rows, vec![1, 2]);
        assert_eq!(b[0].weights, vec![2.0, 1.0]);
        assert_eq!(b[1].total(), 3.0);
    }

    struct StopAtOnce;

    impl Monitor for StopAtOnce {
        fn progress(&self, _done: usize, _total: usize) -> Result<()> {
            Err(Error::Interrupted)
        }
    }

    #[test]
    fn collected_bags_are_the_bags_read_at_once_and_stop_when_asked() {
        let counts = ndarray::Array2::from_shape_fn((37, 50), |(m, i)| ((m * 7 + i * 3) % 4) as u8);
        let source = CountBags::new(counts.view(), 50).unwrap();
        let pool = crate::parallel::Threads::Fixed(2).pool().unwrap();
        let silent = crate::parallel::Silent;
        let collected = collect_bags(&source, &pool, &silent).unwrap();
        assert_eq!(collected, bags(counts.view(), 50).unwrap());
        // A member without in-bag rows is named by its index.
        let mut bad = counts.clone();
        bad.row_mut(29).fill(0);
        let bad = CountBags::new(bad.view(), 50).unwrap();
        let err = collect_bags(&bad, &pool, &silent).unwrap_err();
        assert!(err.to_string().contains("member 29 "), "{err}");
        assert!(matches!(
            collect_bags(&source, &pool, &StopAtOnce),
            Err(Error::Interrupted)
        ));
    }

    #[test]
    fn bad_bags_are_rejected() {
        assert!(bags(array![[0u8, 0]].view(), 2).is_err());
        assert!(bags(array![[1u8, 0]].view(), 3).is_err());
        assert!(bags(array![[1.0, -1.0]].view(), 2).is_err());
        assert!(bags(array![[1.0, f64::NAN]].view(), 2).is_err());
        assert!(Task::parse("classification", 0).is_err());
        assert!(Task::parse("ranking", 2).is_err());
        assert_eq!(Task::parse("classification", 3).unwrap().outputs(), 3);
    }
}
