//! Out-of-bag predictions, errors and error curves (Breiman 1996).
//!
//! A training point is *out of bag* (OOB) for a member when that member's in-bag count of
//! the point is zero. Aggregating, for every point, only the members that never saw it
//! gives a prediction that behaves like one on held-out data, and its error estimates the
//! ensemble's test error without a hold-out set:
//!
//! ```text
//! Breiman (1996), "Out-of-bag estimation", technical report, UC Berkeley.
//!   O_i(k)  = { m < k : count[m, i] = 0 }                 OOB members among the first k
//!   f̂_i(k)  = (1/|O_i(k)|) Σ_{m ∈ O_i(k)} t_{m,i}          regression: mean prediction
//!   p̂_ic(k) = (1/|O_i(k)|) Σ_{m ∈ O_i(k)} p_{m,i,c}        classes: mean probability, or
//!                                                          the vote fraction for labels
//!                                                          (p_{m,i,c} = 1[label_{m,i} = c])
//!   class_i = argmax_c p̂_ic, ties to the lowest class index
//! ```
//!
//! Errors are weighted means over the points with |O_i(k)| > 0 (weights w_i ≥ 0, default 1);
//! points without an OOB member are left out and counted:
//!
//! ```text
//!   squared error  Σ w_i (f̂_i − y_i)² / Σ w_i          absolute error  Σ w_i |f̂_i − y_i| / Σ w_i
//!   error rate     Σ w_i 1[class_i ≠ y_i] / Σ w_i
//!   Brier score    Σ w_i Σ_c (p̂_ic − 1[y_i = c])² / Σ w_i      (Brier 1950, multi-class form)
//!   log loss       Σ w_i · −ln(max(p̂_{i,y_i}, 1e-15)) / Σ w_i   (p clipped below at 1e-15)
//! ```
//!
//! The members are read once, over blocks of points (a few members per pass for
//! regression), keeping running per-point sums and OOB counts; the error curve over the
//! first k members is evaluated whenever k reaches a curve size. Blocks of points are
//! independent; within a block the error terms are added in plain lane-wise sums of 64
//! points, which are then added to compensated totals (Neumaier 1974) merged in point
//! order. So results do not depend on the thread count, and [`OutOfBagPartial`]s computed
//! chunk by chunk merge to the in-memory result up to ~1e-15 relative.

use ndarray::{s, ArrayView1, ArrayView2, ArrayView3};
use serde::{Deserialize, Serialize};

use crate::error::{Error, Result};
use crate::members::{for_chunks, vote, Chunks};
use crate::numeric::Real;
use crate::parallel::{Monitor, Pool};

/// Defines `$name`, which runs `$portable` compiled for AVX2 when the processor has it
/// and as built otherwise: the same operations in the same order (no fused multiply-add),
/// so both give the same bits. `$portable` must be `#[inline(always)]`, so that the AVX2
/// wrapper compiles its own copy.
macro_rules! with_avx2 {
    ($(#[$doc:meta])* fn $name:ident [$($generics:tt)*] ($($arg:ident: $ty:ty),* $(,)?) -> $ret:ty = $portable:ident) => {
        $(#[$doc])*
        fn $name<$($generics)*>($($arg: $ty),*) -> $ret {
            #[cfg(target_arch = "x86_64")]
            {
                #[target_feature(enable = "avx2")]
                unsafe fn avx2<$($generics)*>($($arg: $ty),*) -> $ret {
                    $portable($($arg),*)
                }
                if std::arch::is_x86_feature_detected!("avx2") {
                    // SAFETY: the processor supports AVX2 (checked just above).
                    return unsafe { avx2($($arg),*) };
                }
            }
            $portable($($arg),*)
        }
    };
}

/// Probabilities below this are raised to it before taking the logarithm.
pub const LOG_LOSS_FLOOR: f64 = 1e-15;

pub use crate::members::{Targets, Task, MAX_CLASSES, PROBABILITY_TOLERANCE};

/// A compensated running sum (Neumaier 1974, "Rundungsfehleranalyse einiger Verfahren zur
/// Summation endlicher Summen", ZAMM 54): the error of every addition is kept in `carry`,
/// so the total is nearly independent of the order and grouping of the terms.
#[derive(Debug, Clone, Copy, Default, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct Sum {
    total: f64,
    carry: f64,
}

impl Sum {
    /// Adds one term.
    #[inline]
    pub fn add(&mut self, value: f64) {
        let t = self.total + value;
        if self.total.abs() >= value.abs() {
            self.carry += (self.total - t) + value;
        } else {
            self.carry += (value - t) + self.total;
        }
        self.total = t;
    }

    /// Adds another compensated sum.
    pub fn merge(&mut self, other: &Sum) {
        self.add(other.total);
        self.add(other.carry);
    }

    /// The sum.
    pub fn value(&self) -> f64 {
        self.total + self.carry
    }
}

/// An in-bag count element: any unsigned or signed integer; zero means out of bag.
pub trait CountValue: Copy + Send + Sync + 'static {
    /// `true` when the count is zero.
    fn is_zero(self) -> bool;
    /// `true` when the count is below zero (always `false` for unsigned types).
    fn is_negative(self) -> bool;
    /// The count as a wide integer.
    fn wide(self) -> i128;
    /// The sum of a contiguous run of counts.
    #[inline(always)]
    fn run_total(values: &[Self]) -> i128 {
        values.iter().map(|&c| c.wide()).sum()
    }
}

/// Sum of a run of bytes, eight at a time in the 16-bit lanes of a u64 (the additions
/// vectorise): a lane gains at most 2 × 255 per word, so 128 words fit before the lanes are
/// added up.
#[inline(always)]
fn byte_total(values: &[u8]) -> i128 {
    const LOW: u64 = 0x00ff_00ff_00ff_00ff;
    let whole = values.len() / 8 * 8;
    let mut total: u64 = values[whole..].iter().map(|&b| u64::from(b)).sum();
    for run in values[..whole].chunks(8 * 128) {
        let mut lanes = 0u64;
        for word in run.chunks_exact(8) {
            let x = u64::from_le_bytes(word.try_into().unwrap_or([0; 8]));
            lanes += (x & LOW) + ((x >> 8) & LOW);
        }
        total +=
            (lanes & 0xffff) + ((lanes >> 16) & 0xffff) + ((lanes >> 32) & 0xffff) + (lanes >> 48);
    }
    i128::from(total)
}

macro_rules! impl_count_value {
    (unsigned: $($u:ty),*; signed: $($i:ty),*) => {
        $(impl CountValue for $u {
            #[inline]
            fn is_zero(self) -> bool { self == 0 }
            #[inline]
            fn is_negative(self) -> bool { false }
            #[inline]
            fn wide(self) -> i128 { i128::from(self) }
        })*
        $(impl CountValue for $i {
            #[inline]
            fn is_zero(self) -> bool { self == 0 }
            #[inline]
            fn is_negative(self) -> bool { self < 0 }
            #[inline]
            fn wide(self) -> i128 { i128::from(self) }
        })*
    };
}
impl_count_value!(unsigned: u16, u32, u64; signed: i8, i16, i32, i64);

impl CountValue for u8 {
    #[inline]
    fn is_zero(self) -> bool {
        self == 0
    }
    #[inline]
    fn is_negative(self) -> bool {
        false
    }
    #[inline]
    fn wide(self) -> i128 {
        i128::from(self)
    }
    #[inline(always)]
    fn run_total(values: &[Self]) -> i128 {
        byte_total(values)
    }
}

with_avx2! {
    /// [`CountValue::run_total`] compiled for AVX2 when available.
    fn run_total_dispatch[C: CountValue](values: &[C]) -> i128 = run_total_any
}

#[inline(always)] // so that the AVX2 wrapper compiles its own copy
fn run_total_any<C: CountValue>(values: &[C]) -> i128 {
    C::run_total(values)
}

/// A class label element: any integer type; valid labels are 0..n_classes.
pub trait LabelValue: Copy + Send + Sync + 'static {
    /// The label as a class index, `None` when negative or too large for usize.
    fn index(self) -> Option<usize>;
    /// The label as u64, negative labels wrapping to above any class count (a range check
    /// without a branch).
    fn wrapped(self) -> u64;
}

macro_rules! impl_label_value {
    ($($t:ty),*) => {$(
        impl LabelValue for $t {
            #[inline]
            fn index(self) -> Option<usize> { usize::try_from(self).ok() }
            #[inline]
            #[allow(clippy::cast_sign_loss)]
            fn wrapped(self) -> u64 { self as u64 }
        }
    )*};
}
impl_label_value!(u8, u16, u32, u64, i8, i16, i32, i64);

/// A few consecutive members' regression predictions over a block of points (members ×
/// points), f32 or f64.
pub enum ValueRows<'a> {
    F32(ArrayView2<'a, f32>),
    F64(ArrayView2<'a, f64>),
}

/// A regression prediction element that can be handed to the fused counts kernel.
pub trait Prediction: Real {
    /// Wraps a view of member rows.
    fn rows(view: ArrayView2<'_, Self>) -> ValueRows<'_>;
}

impl Prediction for f32 {
    fn rows(view: ArrayView2<'_, f32>) -> ValueRows<'_> {
        ValueRows::F32(view)
    }
}

impl Prediction for f64 {
    fn rows(view: ArrayView2<'_, f64>) -> ValueRows<'_> {
        ValueRows::F64(view)
    }
}

/// Members folded into the running sums per pass over a block: each pass reads and writes
/// the (sum, count) pairs once for up to this many member rows.
const GROUP: usize = 4;

/// `acc[j] += Σ_k (t_kj · z_kj, z_kj)` over the `K` member rows, z = 1 when out of bag, in
/// one pass over the counts and predictions (sum and count side by side). The members are
/// added one after the other in order, so the result does not depend on the grouping.
/// Returns `true` when a count was negative.
#[inline(always)] // so that the AVX2 wrapper compiles its own copy
fn add_group<C: CountValue, T: Real, const K: usize>(
    counts: [&[C]; K],
    values: [&[T]; K],
    acc: Acc<'_>,
) -> bool {
    let len = acc.sums.len();
    if acc.n.len() != len
        || counts.iter().any(|c| c.len() != len)
        || values.iter().any(|v| v.len() != len)
    {
        return true; // unreachable by construction; reported as bad counts, never a panic
    }
    let mut negative = false;
    for (j, (sum, n)) in acc.sums.iter_mut().zip(acc.n.iter_mut()).enumerate() {
        let (mut s, mut m) = (*sum, *n);
        for k in 0..K {
            let c = counts[k][j];
            negative |= c.is_negative();
            let z = if c.is_zero() { 1.0 } else { 0.0 };
            s += values[k][j].to_f64() * z;
            m += z;
        }
        *sum = s;
        *n = m;
    }
    negative
}

/// Running per-point OOB sums and OOB member counts of a block (counts as f64: exact).
pub struct Acc<'a> {
    pub sums: &'a mut [f64],
    pub n: &'a mut [f64],
}

/// One member row at a time with any strides.
fn add_strided<C: CountValue, T: Real>(
    counts: ArrayView2<'_, C>,
    values: ArrayView2<'_, T>,
    acc: Acc<'_>,
) -> bool {
    let mut negative = false;
    for (c, v) in counts.outer_iter().zip(values.outer_iter()) {
        for (((sum, n), &c), &v) in acc
            .sums
            .iter_mut()
            .zip(acc.n.iter_mut())
            .zip(c.iter())
            .zip(v.iter())
        {
            negative |= c.is_negative();
            let z = if c.is_zero() { 1.0 } else { 0.0 };
            *sum += v.to_f64() * z;
            *n += z;
        }
    }
    negative
}

with_avx2! {
    /// [`add_group`] compiled for AVX2 when the processor has it (4 f64 lanes instead of
    /// SSE2's 2). Element-wise multiply-adds in the same order, no fused multiply-add, so both
    /// versions give bit-identical sums.
    fn add_group_dispatch[C: CountValue, T: Real, const K: usize](counts: [&[C]; K], values: [&[T]; K], acc: Acc<'_>) -> bool = add_group
}

fn add_rows<C: CountValue, T: Real>(
    counts: ArrayView2<'_, C>,
    values: ArrayView2<'_, T>,
    acc: Acc<'_>,
) -> bool {
    let rows = |k: usize| (counts.row(k).to_slice(), values.row(k).to_slice());
    match counts.nrows() {
        4 => {
            if let [(Some(c0), Some(v0)), (Some(c1), Some(v1)), (Some(c2), Some(v2)), (Some(c3), Some(v3))] =
                [rows(0), rows(1), rows(2), rows(3)]
            {
                return add_group_dispatch([c0, c1, c2, c3], [v0, v1, v2, v3], acc);
            }
        }
        2 => {
            if let [(Some(c0), Some(v0)), (Some(c1), Some(v1))] = [rows(0), rows(1)] {
                return add_group_dispatch([c0, c1], [v0, v1], acc);
            }
        }
        1 => {
            if let (Some(c0), Some(v0)) = rows(0) {
                return add_group_dispatch([c0], [v0], acc);
            }
        }
        _ => {}
    }
    add_strided(counts, values, acc)
}

/// In-bag counts of shape (members, points), read as an out-of-bag mask one member row
/// segment at a time (so the driver is written once for every integer type).
pub trait InBagCounts: Sync {
    /// (members, points).
    fn dim(&self) -> (usize, usize);
    /// Writes 1.0 into `mask[j]` when point `start + j` is out of bag for `member`, else
    /// 0.0 (a float mask turns the masked sums into plain multiply-adds).
    ///
    /// # Errors
    /// `counts` when a count is negative.
    fn out_of_bag_mask(&self, member: usize, start: usize, mask: &mut [f64]) -> Result<()>;
    /// Writes 1 into `flags[j]` when point `start + j` is out of bag for `member`, else 0
    /// (bytes: the class kernels select with them and count them).
    ///
    /// # Errors
    /// `counts` when a count is negative.
    fn out_of_bag_flags(&self, member: usize, start: usize, flags: &mut [u8]) -> Result<()>;
    /// The sum of `member`'s counts of the points `start..start + len` (read again right
    /// after a pass over them, from the cache).
    fn total(&self, member: usize, start: usize, len: usize) -> i128;
    /// Adds `(prediction, 1)` of every point `start + j` that is out of bag for each of the
    /// members `first..first + values.nrows()`, in order, into `acc[j]` (regression's fused
    /// pass).
    ///
    /// # Errors
    /// `counts` when a count is negative.
    fn accumulate_values(
        &self,
        first: usize,
        start: usize,
        values: ValueRows<'_>,
        acc: Acc<'_>,
    ) -> Result<()>;
}

fn negative_count(member: usize, point: usize) -> Error {
    Error::value(
        "counts",
        format!("in-bag counts must be non-negative; member {member}, point {point} is negative"),
    )
}

impl<C: CountValue> InBagCounts for ArrayView2<'_, C> {
    fn dim(&self) -> (usize, usize) {
        ArrayView2::dim(self)
    }

    fn out_of_bag_mask(&self, member: usize, start: usize, mask: &mut [f64]) -> Result<()> {
        let row = self.slice(s![member, start..start + mask.len()]);
        let mut negative = false;
        let mut write = |(out, &c): (&mut f64, &C)| {
            negative |= c.is_negative();
            *out = if c.is_zero() { 1.0 } else { 0.0 };
        };
        match row.as_slice() {
            Some(values) => mask.iter_mut().zip(values).for_each(&mut write),
            None => mask.iter_mut().zip(row.iter()).for_each(&mut write),
        }
        if negative {
            let j = row.iter().position(|c| c.is_negative()).unwrap_or(0);
            return Err(negative_count(member, start + j));
        }
        Ok(())
    }

    fn out_of_bag_flags(&self, member: usize, start: usize, flags: &mut [u8]) -> Result<()> {
        let row = self.slice(s![member, start..start + flags.len()]);
        let mut negative = false;
        let mut write = |(out, &c): (&mut u8, &C)| {
            negative |= c.is_negative();
            *out = u8::from(c.is_zero());
        };
        match row.as_slice() {
            Some(values) => flags.iter_mut().zip(values).for_each(&mut write),
            None => flags.iter_mut().zip(row.iter()).for_each(&mut write),
        }
        if negative {
            let j = row.iter().position(|c| c.is_negative()).unwrap_or(0);
            return Err(negative_count(member, start + j));
        }
        Ok(())
    }

    fn total(&self, member: usize, start: usize, len: usize) -> i128 {
        let row = self.slice(s![member, start..start + len]);
        match row.as_slice() {
            Some(values) => run_total_dispatch(values),
            None => row.iter().map(|&c| c.wide()).sum(),
        }
    }

    fn accumulate_values(
        &self,
        first: usize,
        start: usize,
        values: ValueRows<'_>,
        acc: Acc<'_>,
    ) -> Result<()> {
        let k = match &values {
            ValueRows::F32(v) => v.nrows(),
            ValueRows::F64(v) => v.nrows(),
        };
        let rows = self.slice(s![first..first + k, start..start + acc.sums.len()]);
        let negative = match values {
            ValueRows::F32(v) => add_rows(rows, v, acc),
            ValueRows::F64(v) => add_rows(rows, v, acc),
        };
        if negative {
            for (i, row) in rows.outer_iter().enumerate() {
                if let Some(j) = row.iter().position(|c| c.is_negative()) {
                    return Err(negative_count(first + i, start + j));
                }
            }
            return Err(Error::value("counts", "internal shape mismatch"));
        }
        Ok(())
    }
}

/// Member predictions on the training points, added into running per-point sums.
pub trait MemberPredictions: Sync {
    /// (members, points).
    fn dim(&self) -> (usize, usize);
    /// Regression or classification with its number of classes.
    fn task(&self) -> Task;
    /// Classification: empty running totals of `points` points.
    fn class_totals(&self, points: usize) -> ClassTotals {
        ClassTotals::Probabilities(vec![0.0; points * self.task().outputs()])
    }

    /// Classification: adds member `member`'s votes or probabilities of the points
    /// `start + j` with `out_of_bag[j] == 1` into `totals` (probability sums points ×
    /// classes, row-major; or packed [`Votes`]);
    /// every point's prediction is checked, in bag or not.
    ///
    /// # Errors
    /// `members` for labels out of range, or probabilities that are not finite and
    /// non-negative or do not sum to one within [`PROBABILITY_TOLERANCE`].
    fn add_classes(
        &self,
        member: usize,
        start: usize,
        out_of_bag: &[u8],
        totals: &mut ClassTotals,
    ) -> Result<()> {
        let _ = (member, start, out_of_bag, totals);
        Err(Error::value(
            "members",
            "regression members have no classes",
        ))
    }

    /// Regression members: the predictions of members `members` for points
    /// `start..start + len`, read by the fused counts kernel instead of
    /// [`MemberPredictions::accumulate`].
    fn value_rows(
        &self,
        members: std::ops::Range<usize>,
        start: usize,
        len: usize,
    ) -> Option<ValueRows<'_>> {
        let _ = (members, start, len);
        None
    }

    /// The error for non-finite sums over points `start..start + len`: the first NaN/inf
    /// prediction, or an overflow of the sums.
    fn find_bad_value(&self, start: usize, len: usize) -> Error {
        let _ = (start, len);
        Error::value("members", "predictions are too large to average (overflow)")
    }
}

/// Regression predictions (members, points).
pub struct Values<'a, T>(pub ArrayView2<'a, T>);

impl<T: Prediction> MemberPredictions for Values<'_, T> {
    fn dim(&self) -> (usize, usize) {
        self.0.dim()
    }

    fn task(&self) -> Task {
        Task::Regression
    }

    fn value_rows(
        &self,
        members: std::ops::Range<usize>,
        start: usize,
        len: usize,
    ) -> Option<ValueRows<'_>> {
        Some(T::rows(self.0.slice(s![members, start..start + len])))
    }

    fn find_bad_value(&self, start: usize, len: usize) -> Error {
        let block = self.0.slice(s![.., start..start + len]);
        for (member, row) in block.outer_iter().enumerate() {
            if let Some(j) = row.iter().position(|v| !v.to_f64().is_finite()) {
                return Error::value(
                    "members",
                    format!(
                        "contains NaN or infinite predictions (member {member}, point {})",
                        start + j
                    ),
                );
            }
        }
        Error::value("members", "predictions are too large to average (overflow)")
    }
}

/// Class labels (members, points), each in 0..n_classes.
pub struct Labels<'a, L> {
    labels: ArrayView2<'a, L>,
    n_classes: usize,
}

impl<'a, L: LabelValue> Labels<'a, L> {
    /// # Errors
    /// `members` when `n_classes` is 0 or above [`MAX_CLASSES`].
    pub fn new(labels: ArrayView2<'a, L>, n_classes: usize) -> Result<Self> {
        check_classes(n_classes)?;
        Ok(Labels { labels, n_classes })
    }
}

fn check_classes(n_classes: usize) -> Result<usize> {
    if n_classes == 0 || n_classes > MAX_CLASSES {
        return Err(Error::value(
            "members",
            format!("the number of classes must lie in 1..={MAX_CLASSES}, got {n_classes}"),
        ));
    }
    Ok(n_classes)
}

impl<L: LabelValue> MemberPredictions for Labels<'_, L> {
    fn dim(&self) -> (usize, usize) {
        self.labels.dim()
    }

    fn task(&self) -> Task {
        Task::Classification {
            n_classes: self.n_classes,
        }
    }

    fn class_totals(&self, points: usize) -> ClassTotals {
        ClassTotals::Votes(Votes::new(points, self.n_classes, self.labels.dim().0))
    }

    fn add_classes(
        &self,
        member: usize,
        start: usize,
        out_of_bag: &[u8],
        totals: &mut ClassTotals,
    ) -> Result<()> {
        let ClassTotals::Votes(votes) = totals else {
            return Err(Error::value("members", "labels need vote totals"));
        };
        let c = self.n_classes;
        let row = self
            .labels
            .slice(s![member, start..start + out_of_bag.len()]);
        let in_range = match row.as_slice() {
            Some(labels) => add_votes_dispatch(labels, out_of_bag, votes),
            None => {
                let mut out_of_range = false;
                for (j, (&label, &flag)) in row.iter().zip(out_of_bag).enumerate() {
                    let class = label.wrapped();
                    out_of_range |= class >= c as u64;
                    votes.add_one(class.min(c as u64 - 1) as usize, j, flag);
                }
                !out_of_range
            }
        };
        if !in_range {
            let j = row
                .iter()
                .position(|l| l.wrapped() >= c as u64)
                .unwrap_or(0);
            return Err(Error::value(
                "members",
                format!(
                    "class labels must lie in 0..{c}; member {member}, point {} is out of range",
                    start + j
                ),
            ));
        }
        Ok(())
    }
}

/// Words per point up to which [`add_votes`] makes one vectorised pass per word instead of
/// scattering the votes.
const PASSED_WORDS: usize = 4;

/// Points per run of the one-word vote pass, whose label lines are prefetched together.
const VOTE_RUN: usize = 64;

/// Adds the votes of contiguous `labels` of the points with `flags[j] == 1` into `votes`;
/// whether every label (in bag or not) lies in 0..n_classes.
#[inline(always)] // so that the AVX2 wrapper compiles its own copy
fn add_votes<L: LabelValue>(labels: &[L], flags: &[u8], votes: &mut Votes) -> bool {
    let labels = &labels[..flags.len()];
    let c = votes.n_classes as u64;
    let (lane_shift, word_shift) = (votes.lane_shift, votes.word_shift);
    let lane_index = (1u64 << word_shift) - 1;
    let mut out_of_range = false;
    if votes.n_words == 1 {
        // The label picks the lane: one shift and one add per point.
        let line = (64 / std::mem::size_of::<L>()).max(1);
        let runs = votes.words[..labels.len()]
            .chunks_mut(VOTE_RUN)
            .zip(labels.chunks(VOTE_RUN).zip(flags.chunks(VOTE_RUN)));
        for (r, (words, (labels_run, flags_run))) in runs.enumerate() {
            for at in (0..VOTE_RUN).step_by(line) {
                prefetch_ahead(labels, r * VOTE_RUN + at);
            }
            for ((v, &label), &flag) in words.iter_mut().zip(labels_run).zip(flags_run) {
                let class = label.wrapped();
                out_of_range |= class >= c;
                *v += u64::from(flag) << ((class & lane_index) << lane_shift);
            }
        }
    } else if votes.n_words <= PASSED_WORDS {
        for (word, column) in votes.words.chunks_exact_mut(votes.stride).enumerate() {
            let word = word as u64;
            for ((v, &label), &flag) in column.iter_mut().zip(labels).zip(flags) {
                let class = label.wrapped();
                let hit = u64::from(flag) & u64::from(class >> word_shift == word);
                *v += hit << ((class & lane_index) << lane_shift);
            }
        }
        for &label in labels {
            out_of_range |= label.wrapped() >= c;
        }
    } else {
        // An out-of-range label votes for the last class and flags the row.
        for (j, (&label, &flag)) in labels.iter().zip(flags).enumerate() {
            let class = label.wrapped();
            out_of_range |= class >= c;
            votes.add_one(class.min(c - 1) as usize, j, flag);
        }
    }
    !out_of_range
}

with_avx2! {
    /// [`add_votes`] compiled for AVX2 when available (the same integer operations).
    fn add_votes_dispatch[L: LabelValue](labels: &[L], flags: &[u8], votes: &mut Votes) -> bool = add_votes
}

/// Bytes ahead of a pass over a member row at which it is prefetched: a block reads runs of
/// many rows in turn, and the hardware prefetcher alone left the class kernels waiting on
/// memory (probabilities over 200 × 166,666 × 3 on one thread: 0.080 s without, 0.066 s
/// with; 0.074 s at 512 bytes ahead, 0.068 s at 8 KB).
const PREFETCH_AHEAD: usize = 2048;

/// Prefetches `row` [`PREFETCH_AHEAD`] bytes past element `index`, if that lies inside.
#[inline(always)]
fn prefetch_ahead<T>(row: &[T], index: usize) {
    #[cfg(target_arch = "x86_64")]
    {
        use std::arch::x86_64::{_mm_prefetch, _MM_HINT_T0};
        let at = index * std::mem::size_of::<T>() + PREFETCH_AHEAD;
        if at < std::mem::size_of_val(row) {
            // SAFETY: the address lies inside `row`; a prefetch never faults.
            unsafe { _mm_prefetch::<_MM_HINT_T0>(row.as_ptr().cast::<i8>().add(at)) };
        }
    }
    #[cfg(not(target_arch = "x86_64"))]
    let _ = (row, index);
}

/// Class probabilities (members, points, classes); every member's row sums to one.
pub struct Probabilities<'a, T>(pub ArrayView3<'a, T>);

impl<T: Real> MemberPredictions for Probabilities<'_, T> {
    fn dim(&self) -> (usize, usize) {
        let (m, n, _) = self.0.dim();
        (m, n)
    }

    fn task(&self) -> Task {
        Task::Classification {
            n_classes: self.0.dim().2,
        }
    }

    fn add_classes(
        &self,
        member: usize,
        start: usize,
        out_of_bag: &[u8],
        totals: &mut ClassTotals,
    ) -> Result<()> {
        let ClassTotals::Probabilities(sums) = totals else {
            return Err(Error::value(
                "members",
                "probabilities need probability sums",
            ));
        };
        let block = self
            .0
            .slice(s![member, start..start + out_of_bag.len(), ..]);
        let c = block.dim().1;
        let valid = match block.as_slice() {
            Some(p) => add_probabilities_dispatch(p, c, out_of_bag, sums),
            None => {
                let mut valid = true;
                let points = block.outer_iter().zip(sums.chunks_exact_mut(c));
                for ((point, out), &flag) in points.zip(out_of_bag) {
                    valid &= add_point(point.iter().copied(), out, flag);
                }
                valid
            }
        };
        if valid {
            return Ok(());
        }
        for (j, point) in block.outer_iter().enumerate() {
            let total: f64 = point.iter().fold(0.0, |t, &p| t + p.to_f64());
            if !point_is_valid(point.iter().copied(), total) {
                return Err(Error::value(
                    "members",
                    format!(
                        "class probabilities must be finite, non-negative and sum to 1 within \
                         {PROBABILITY_TOLERANCE:e}; member {member}, point {} sums to {total}",
                        start + j
                    ),
                ));
            }
        }
        Err(Error::value("members", "class probabilities are invalid"))
    }
}

/// Running per-point class totals of a block of points.
pub enum ClassTotals {
    /// Votes of label members: integers, exact as the f64 sums they replace.
    Votes(Votes),
    /// Sums of member probabilities (points × classes, row-major).
    Probabilities(Vec<f64>),
}

impl ClassTotals {
    /// Bytes of running totals per point.
    fn bytes_per_point(&self) -> usize {
        match self {
            ClassTotals::Votes(votes) => votes.n_words * 8,
            ClassTotals::Probabilities(sums) => sums.len() * 8,
        }
    }
}

/// Running label votes of a block of points, packed: a u64 word holds the counts of
/// `1 << word_shift` classes in lanes of `1 << lane_shift` bits (16 bits below 2^16 members,
/// so four classes per word; else 32). Word `w` of point `j` lies at `w * stride + j`, so a
/// member's votes are added in one vectorised pass per word (one pass up to four classes),
/// and a point's out-of-bag count is the sum of its lanes.
pub struct Votes {
    words: Vec<u64>,
    stride: usize,
    n_words: usize,
    n_classes: usize,
    lane_shift: u32,
    word_shift: u32,
}

impl Votes {
    fn new(points: usize, n_classes: usize, members: usize) -> Self {
        let (lane_shift, word_shift) = if members < 1 << 16 { (4, 2) } else { (5, 1) };
        let n_words = n_classes.div_ceil(1 << word_shift);
        Votes {
            words: vec![0; points * n_words],
            stride: points,
            n_words,
            n_classes,
            lane_shift,
            word_shift,
        }
    }

    /// The votes for `class` at point `j`.
    #[inline(always)]
    fn get(&self, class: usize, j: usize) -> u32 {
        let word = self.words[(class >> self.word_shift) * self.stride + j];
        let shift = (class & ((1 << self.word_shift) - 1)) << self.lane_shift;
        let lane = (1u64 << (1u32 << self.lane_shift)) - 1;
        ((word >> shift) & lane) as u32
    }

    /// Adds `flag` (0 or 1) to the votes for `class` at point `j`.
    #[inline(always)]
    fn add_one(&mut self, class: usize, j: usize, flag: u8) {
        let shift = (class & ((1 << self.word_shift) - 1)) << self.lane_shift;
        self.words[(class >> self.word_shift) * self.stride + j] += u64::from(flag) << shift;
    }

    /// The out-of-bag members of point `j`: its votes over every class.
    #[inline(always)]
    fn total(&self, j: usize) -> u32 {
        (0..self.n_classes).map(|c| self.get(c, j)).sum()
    }
}

/// Whether a probability row is finite, non-negative and sums (as `total`, added in class
/// order) to one within [`PROBABILITY_TOLERANCE`].
#[inline(always)]
fn point_is_valid<T: Real>(point: impl Iterator<Item = T>, total: f64) -> bool {
    let mut valid = true;
    for p in point {
        let p = p.to_f64();
        // Fails for NaN, negative and infinite values.
        valid &= (0.0..=f64::MAX).contains(&p);
    }
    valid & ((total - 1.0).abs() <= PROBABILITY_TOLERANCE)
}

/// Adds one point's probabilities into `out` when `flag` is 1; whether the row is valid.
/// Adding 0.0 for an in-bag point leaves the (non-negative) sums' bits unchanged, as the
/// masked `p * 0.0` did.
#[inline(always)]
fn add_point<T: Real>(point: impl Iterator<Item = T>, out: &mut [f64], flag: u8) -> bool {
    let mut total = 0.0;
    let mut valid = true;
    for (o, p) in out.iter_mut().zip(point) {
        let p = p.to_f64();
        valid &= (0.0..=f64::MAX).contains(&p);
        total += p;
        *o += if flag != 0 { p } else { 0.0 };
    }
    valid & ((total - 1.0).abs() <= PROBABILITY_TOLERANCE)
}

with_avx2! {
    /// [`add_probabilities`] compiled for AVX2 when available, with the class count fixed
    /// for two to four classes (the same operations in the same order).
    fn add_probabilities_dispatch[T: Real](p: &[T], c: usize, flags: &[u8], sums: &mut [f64]) -> bool = add_probabilities_any
}

#[inline(always)] // so that the AVX2 wrapper compiles its own copies
fn add_probabilities_any<T: Real>(p: &[T], c: usize, flags: &[u8], sums: &mut [f64]) -> bool {
    match c {
        2 => add_fixed_probabilities::<T, 2>(p, flags, sums),
        3 => add_fixed_probabilities::<T, 3>(p, flags, sums),
        4 => add_fixed_probabilities::<T, 4>(p, flags, sums),
        _ => add_probabilities(p, c, flags, sums),
    }
}

/// [`add_point`] over contiguous rows of `C` classes, four points (4·C elements) at a
/// time: the sums are added element by element with each point's keep mask spread over its
/// classes, so no element is moved between lanes; only the row totals gather a point's
/// classes. A value is valid iff it is not below zero and its row total lies within the
/// tolerance of one: NaN and infinite values make the total NaN or infinite, so this agrees
/// with [`point_is_valid`].
#[inline(always)]
fn add_fixed_probabilities<T: Real, const C: usize>(
    p: &[T],
    flags: &[u8],
    sums: &mut [f64],
) -> bool {
    let quads = flags.len() / 4;
    let mut negative = false;
    let mut on_total = true;
    let elements = p.chunks_exact(4 * C).zip(sums.chunks_exact_mut(4 * C));
    for (q, ((quad, out), flags)) in elements.zip(flags.chunks_exact(4)).enumerate().take(quads) {
        prefetch_ahead(p, q * 4 * C);
        let p = quad;
        let keep: [u64; 4] = std::array::from_fn(|l| 0u64.wrapping_sub(u64::from(flags[l])));
        let v: [[f64; C]; 4] =
            std::array::from_fn(|l| std::array::from_fn(|k| p[l * C + k].to_f64()));
        for l in 0..4 {
            let mut total = 0.0;
            for k in 0..C {
                let x = v[l][k];
                negative |= x < 0.0;
                total += x;
                // All ones keeps x, zero gives +0.0: the sums' bits as in [`add_probabilities`].
                out[l * C + k] += f64::from_bits(x.to_bits() & keep[l]);
            }
            on_total &= (total - 1.0).abs() <= PROBABILITY_TOLERANCE;
        }
    }
    let done = quads * 4;
    let rest = add_probabilities(
        &p[done * C..flags.len() * C],
        C,
        &flags[done..],
        &mut sums[done * C..flags.len() * C],
    );
    !negative & on_total & rest
}

/// Elements of a member row handled per pass of [`add_probabilities`] (stack scratch).
const PROBABILITY_PASS: usize = 1024;

/// [`add_point`] over contiguous rows of `c` classes, in passes that run over elements
/// rather than points, so that they vectorise for any `c`: per-element keep masks from
/// the flags, then masked sums and the range check, then the row totals.
fn add_probabilities<T: Real>(p: &[T], c: usize, flags: &[u8], sums: &mut [f64]) -> bool {
    if c > PROBABILITY_PASS {
        let mut valid = true;
        for ((point, out), &flag) in p.chunks_exact(c).zip(sums.chunks_exact_mut(c)).zip(flags) {
            valid &= add_point(point.iter().copied(), out, flag);
        }
        return valid;
    }
    let per_pass = PROBABILITY_PASS / c;
    let mut keep = [0u64; PROBABILITY_PASS];
    let mut valid = true;
    let passes = p
        .chunks(per_pass * c)
        .zip(sums.chunks_mut(per_pass * c))
        .zip(flags.chunks(per_pass));
    for ((p, sums), flags) in passes {
        let len = flags.len() * c;
        let (p, sums, keep) = (&p[..len], &mut sums[..len], &mut keep[..len]);
        for (masks, &flag) in keep.chunks_exact_mut(c).zip(flags) {
            masks.fill(0u64.wrapping_sub(u64::from(flag)));
        }
        // All ones keeps p, zero gives +0.0: the sums' bits as with `p * keep`.
        for ((sum, &v), &mask) in sums.iter_mut().zip(p).zip(keep.iter()) {
            let v = v.to_f64();
            valid &= (0.0..=f64::MAX).contains(&v);
            *sum += f64::from_bits(v.to_bits() & mask);
        }
        for point in p.chunks_exact(c) {
            let total = point.iter().fold(0.0, |t, &v| t + v.to_f64());
            valid &= (total - 1.0).abs() <= PROBABILITY_TOLERANCE;
        }
    }
    valid
}

/// Error sums over the points covered by at least one OOB member among the first k.
#[derive(Debug, Clone, Copy, Default, PartialEq)]
pub struct ErrorSums {
    /// Points with at least one OOB member.
    pub covered: u64,
    /// Σ w_i over those points.
    pub weight: Sum,
    /// Σ w_i (f̂_i − y_i)² (regression).
    pub squared: Sum,
    /// Σ w_i |f̂_i − y_i| (regression).
    pub absolute: Sum,
    /// Σ w_i 1[class_i ≠ y_i] (classification).
    pub wrong: Sum,
    /// Σ w_i Σ_c (p̂_ic − 1[y_i = c])² (classification).
    pub brier: Sum,
    /// Σ w_i · −ln(max(p̂_{i,y_i}, 1e-15)) (classification).
    pub log_loss: Sum,
}

impl ErrorSums {
    /// Adds a sub-block's classification sums, given per lane (weight, weight if missed,
    /// weighted Brier, weighted log loss), lane by lane.
    fn add_lanes(&mut self, covered: u64, lanes: [[f64; LANES]; 4]) {
        let [weight, wrong, brier, log_loss] = lanes.map(|lane| lane.iter().sum::<f64>());
        self.covered += covered;
        self.weight.add(weight);
        self.wrong.add(wrong);
        self.brier.add(brier);
        self.log_loss.add(log_loss);
    }

    fn merge(&mut self, other: &ErrorSums) {
        self.covered += other.covered;
        self.weight.merge(&other.weight);
        self.squared.merge(&other.squared);
        self.absolute.merge(&other.absolute);
        self.wrong.merge(&other.wrong);
        self.brier.merge(&other.brier);
        self.log_loss.merge(&other.log_loss);
    }

    fn mean(&self, sum: &Sum) -> f64 {
        if self.covered == 0 {
            f64::NAN
        } else {
            sum.value() / self.weight.value()
        }
    }

    /// Mean squared error (NaN without covered points).
    pub fn squared_error(&self) -> f64 {
        self.mean(&self.squared)
    }
    /// Mean absolute error.
    pub fn absolute_error(&self) -> f64 {
        self.mean(&self.absolute)
    }
    /// Weighted share of misclassified points.
    pub fn error_rate(&self) -> f64 {
        self.mean(&self.wrong)
    }
    /// Multi-class Brier score.
    pub fn brier_score(&self) -> f64 {
        self.mean(&self.brier)
    }
    /// Log loss with p clipped below at [`LOG_LOSS_FLOOR`].
    pub fn log_loss(&self) -> f64 {
        self.mean(&self.log_loss)
    }
}

/// The mergeable state of an out-of-bag evaluation over some of the points: the error sums
/// at every curve size. Partial states of disjoint chunks of points merge (in any grouping)
/// into the state of all of them.
#[derive(Debug, Clone, PartialEq)]
pub struct OutOfBagPartial {
    task: Task,
    members: usize,
    sizes: Vec<usize>,
    points: u64,
    curve: Vec<ErrorSums>,
}

impl OutOfBagPartial {
    /// An empty state for `members` members evaluated at the ensemble sizes `sizes`.
    ///
    /// # Errors
    /// `curve_sizes` unless `sizes` is strictly increasing, within 1..=members and ends at
    /// `members`.
    pub fn new(task: Task, members: usize, sizes: &[usize]) -> Result<Self> {
        let increasing = sizes.windows(2).all(|w| w[0] < w[1]);
        if sizes.is_empty() || !increasing || sizes[0] == 0 || sizes[sizes.len() - 1] != members {
            return Err(Error::value(
                "curve_sizes",
                format!(
                    "must be strictly increasing ensemble sizes in 1..={members} ending at \
                     {members}, got {sizes:?}"
                ),
            ));
        }
        Ok(OutOfBagPartial {
            task,
            members,
            sizes: sizes.to_vec(),
            points: 0,
            curve: vec![ErrorSums::default(); sizes.len()],
        })
    }

    /// Adds the state of other points.
    ///
    /// # Errors
    /// `members` when the two states have a different task, member count or curve sizes.
    pub fn merge(&mut self, other: &OutOfBagPartial) -> Result<()> {
        let same_task = matches!(
            (self.task, other.task),
            (Task::Regression, Task::Regression)
                | (Task::Classification { .. }, Task::Classification { .. })
        );
        if !same_task || self.members != other.members || self.sizes != other.sizes {
            return Err(Error::value(
                "members",
                format!(
                    "cannot merge out-of-bag states of different ensembles ({} members, {:?} \
                     vs {} members, {:?})",
                    self.members, self.task, other.members, other.task
                ),
            ));
        }
        if let (Task::Classification { n_classes: a }, Task::Classification { n_classes: b }) =
            (self.task, other.task)
        {
            // Label chunks may see different largest labels; the sums do not depend on it.
            self.task = Task::Classification {
                n_classes: a.max(b),
            };
        }
        self.points += other.points;
        for (a, b) in self.curve.iter_mut().zip(&other.curve) {
            a.merge(b);
        }
        Ok(())
    }

    /// The task the state was computed for.
    pub fn task(&self) -> Task {
        self.task
    }
    /// Number of members.
    pub fn members(&self) -> usize {
        self.members
    }
    /// The ensemble sizes of the curve.
    pub fn sizes(&self) -> &[usize] {
        &self.sizes
    }
    /// Points seen.
    pub fn points(&self) -> u64 {
        self.points
    }
    /// Error sums at every curve size.
    pub fn curve(&self) -> &[ErrorSums] {
        &self.curve
    }
    /// Error sums of the whole ensemble (the last curve size).
    pub fn full(&self) -> &ErrorSums {
        &self.curve[self.curve.len() - 1]
    }
    /// Points with no out-of-bag member in the whole ensemble.
    pub fn without_out_of_bag(&self) -> u64 {
        self.points - self.full().covered
    }
}

/// Per-point outputs of [`out_of_bag`], written in place (e.g. into numpy buffers).
pub struct PointOutputs<'a> {
    /// OOB prediction of every point: the mean for regression, the voted class index (as a
    /// float) for classification; NaN without an OOB member.
    pub prediction: &'a mut [f64],
    /// Number of OOB members of every point.
    pub n_out_of_bag: &'a mut [i64],
    /// Classification only: points × classes mean probabilities / vote fractions, NaN rows
    /// without an OOB member. Empty for regression.
    pub probabilities: &'a mut [f64],
}

/// The ensemble sizes 1, ..., members at which the default curve is evaluated: about
/// 8 sizes per decade, geometrically spaced and rounded, always with 1 and `members`.
pub fn default_curve_sizes(members: usize) -> Vec<usize> {
    let mut sizes = Vec::new();
    if members == 0 {
        return sizes;
    }
    let steps = ((members as f64).log10() * 8.0).ceil().max(1.0) as usize;
    for s in 0..=steps {
        let k = (members as f64).powf(s as f64 / steps as f64).round() as usize;
        let k = k.clamp(1, members);
        if sizes.last() != Some(&k) {
            sizes.push(k);
        }
    }
    if sizes.last() != Some(&members) {
        sizes.push(members);
    }
    sizes
}

/// Points handled together: the running totals of a block stay in the core's cache while
/// every member row passes over it. Regression sums take 16,384 points (256 KB). Class
/// totals take up to 512 KB (`bytes_per_point` each): a member row is read in runs of a
/// block's points, and longer runs stream faster (labels: 0.127 s at 16,384 points against
/// 0.100 s at 65,536 for 200 × 500k on one thread), but a block is no longer than an eighth
/// of the points (at least 4,096), so that threads share the work. A whole number of
/// sub-blocks; depends only on the shape, never on the thread count.
fn block_points(task: Task, points: usize, bytes_per_point: usize) -> usize {
    if task == Task::Regression {
        return 16384;
    }
    let cached = (512 * 1024 / bytes_per_point.max(1)) / SUB_BLOCK * SUB_BLOCK;
    let shared = points.div_ceil(8).div_ceil(SUB_BLOCK) * SUB_BLOCK;
    cached.min(shared.max(4096)).max(SUB_BLOCK)
}

/// Writes the targets of the points `start..start + out.len()` into `out` as floats: class
/// indices are read as the int64 they are (a float copy of a million of them would be 8 MB
/// and a pass), exact below 2^53 (larger ones are out of range either way).
fn copy_targets(y: Targets<'_>, start: usize, out: &mut [f64]) {
    let rows = start..start + out.len();
    match y {
        Targets::Values(y) => out
            .iter_mut()
            .zip(y.slice(s![rows]))
            .for_each(|(t, &v)| *t = v),
        Targets::Labels(y) => out
            .iter_mut()
            .zip(y.slice(s![rows]))
            .for_each(|(t, &v)| *t = v as f64),
    }
}

/// Out-of-bag predictions of every point and the error curve over the first k members.
///
/// `members` are predictions on the training points (see the module documentation for the
/// formulas), `counts` the in-bag counts (members, points), `y` the targets (class indices
/// for classification, given as floats), `point_weights` optional point weights ≥ 0. `sizes` are
/// the ensemble sizes of the curve (strictly increasing, ending at the member count; see
/// [`default_curve_sizes`]).
///
/// # Errors
/// `members` for an empty ensemble or bad values (see [`MemberPredictions::accumulate`]);
/// `counts` for a shape different from `members` or negative counts; `y`, `point_weights` for a
/// wrong length or bad values (non-finite; class index out of range; negative weight);
/// `curve_sizes`; [`Error::Interrupted`] from the monitor.
#[allow(clippy::too_many_arguments)]
pub fn out_of_bag(
    members: &dyn MemberPredictions,
    counts: &dyn InBagCounts,
    y: Targets<'_>,
    weights: Option<ArrayView1<'_, f64>>,
    sizes: &[usize],
    out: PointOutputs<'_>,
    pool: &Pool,
    monitor: &dyn Monitor,
) -> Result<OutOfBagPass> {
    let (m, n) = members.dim();
    let task = members.task();
    let width = task.outputs();
    if m == 0 || n == 0 {
        return Err(Error::value(
            "members",
            format!("needs at least one member and one point, got shape ({m}, {n})"),
        ));
    }
    if u32::try_from(m).is_err() {
        return Err(Error::value("members", "more than 2^32 - 1 members"));
    }
    if counts.dim() != (m, n) {
        let (cm, cn) = counts.dim();
        return Err(Error::value(
            "counts",
            format!("has shape ({cm}, {cn}) but `members` has ({m}, {n})"),
        ));
    }
    if y.len() != n {
        return Err(Error::value(
            "y",
            format!("has {} values but `members` has {n} points", y.len()),
        ));
    }
    if let Some(w) = &weights {
        if w.len() != n {
            return Err(Error::value(
                "point_weights",
                format!("has {} values but `members` has {n} points", w.len()),
            ));
        }
    }
    let expected = if width == 1 && task == Task::Regression {
        0
    } else {
        n * width
    };
    if out.prediction.len() != n
        || out.n_out_of_bag.len() != n
        || out.probabilities.len() != expected
    {
        return Err(Error::value(
            "members",
            "output buffers do not match the input shape",
        ));
    }
    let mut state = OutOfBagPartial::new(task, m, sizes)?;
    state.points = n as u64;

    let terms = match (task, members.class_totals(0)) {
        (Task::Classification { .. }, ClassTotals::Votes(_)) => VoteTerms::new(m),
        _ => None,
    };
    let block = block_points(task, n, members.class_totals(1).bytes_per_point());
    let mut jobs: Vec<Option<Block<'_>>> = Vec::with_capacity(n.div_ceil(block));
    let mut probabilities = out.probabilities;
    for (i, (prediction, n_oob)) in out
        .prediction
        .chunks_mut(block)
        .zip(out.n_out_of_bag.chunks_mut(block))
        .enumerate()
    {
        let rows = prediction.len();
        let (head, tail) = std::mem::take(&mut probabilities).split_at_mut(if expected == 0 {
            0
        } else {
            rows * width
        });
        probabilities = tail;
        jobs.push(Some(Block {
            start: i * block,
            prediction,
            n_oob,
            probabilities: head,
        }));
    }
    let chunks = Chunks {
        n_points: n,
        chunk_points: block,
        per_round: 8 * pool.threads().max(1),
    };
    let work = |_: std::ops::Range<usize>, job: &mut Option<Block<'_>>| match job.take() {
        Some(job) => job.run(members, counts, y, weights, sizes, terms.as_ref()),
        None => Err(Error::value("members", "a block of points was run twice")),
    };
    let mut count_total = 0i128;
    let merge = |(sums, total): (Vec<ErrorSums>, i128)| {
        for (a, b) in state.curve.iter_mut().zip(&sums) {
            a.merge(b);
        }
        count_total += total;
        Ok(())
    };
    for_chunks(chunks, &mut jobs, pool, monitor, work, merge)?;
    Ok(OutOfBagPass {
        state,
        count_total: count_total as f64,
    })
}

/// The result of [`out_of_bag`] besides its per-point outputs.
#[derive(Debug, Clone)]
pub struct OutOfBagPass {
    /// The mergeable loss sums.
    pub state: OutOfBagPartial,
    /// The sum of all in-bag counts (exact below 2^53), so that callers can tell counts
    /// from drawn row indices without reading the counts again.
    pub count_total: f64,
}

/// One block of points and its slices of the outputs.
struct Block<'a> {
    start: usize,
    prediction: &'a mut [f64],
    n_oob: &'a mut [i64],
    probabilities: &'a mut [f64],
}

impl Block<'_> {
    fn run(
        self,
        members: &dyn MemberPredictions,
        counts: &dyn InBagCounts,
        y: Targets<'_>,
        weights: Option<ArrayView1<'_, f64>>,
        sizes: &[usize],
        terms: Option<&VoteTerms>,
    ) -> Result<(Vec<ErrorSums>, i128)> {
        let rows = self.prediction.len();
        let mut count_total = 0i128;
        let task = members.task();
        let width = task.outputs();
        let weights = weights.map(|w| w.slice_move(s![self.start..self.start + rows]));
        // Buffers padded to whole lanes; padding points have no OOB member and weight 0.
        let padded = rows.div_ceil(LANES) * LANES;
        let mut targets = vec![0.0; padded];
        copy_targets(y, self.start, &mut targets[..rows]);
        check_targets(task, &targets[..rows], self.start)?;
        if let Some(w) = &weights {
            if let Some(j) = w.iter().position(|&v| !(v.is_finite() && v >= 0.0)) {
                return Err(Error::value(
                    "point_weights",
                    format!(
                        "must be finite and non-negative; point {} is {}",
                        self.start + j,
                        w[j]
                    ),
                ));
            }
        }
        let mut point_weights = vec![0.0; padded];
        match &weights {
            Some(w) => point_weights
                .iter_mut()
                .zip(w.iter())
                .for_each(|(t, &v)| *t = v),
            None => point_weights[..rows].fill(1.0),
        }
        let mut curve = Vec::with_capacity(sizes.len());
        let mut next = 0;
        let (m, _) = members.dim();
        if task == Task::Regression {
            // (sum, count) side by side: one fused pass over counts and predictions.
            let mut sums = vec![0.0; padded];
            let mut n_oob = vec![0.0; padded];
            let mut member = 0;
            while member < m {
                // Groups of up to GROUP members that never step over a curve size.
                let stop = sizes.get(next).copied().unwrap_or(m).min(m);
                let k = match stop - member {
                    d if d >= GROUP => GROUP,
                    d if d >= 2 => 2,
                    _ => 1,
                };
                let group = member..member + k;
                let values = members
                    .value_rows(group.clone(), self.start, rows)
                    .ok_or_else(|| {
                        Error::value("members", "regression members must give value rows")
                    })?;
                let acc = Acc {
                    sums: &mut sums[..rows],
                    n: &mut n_oob[..rows],
                };
                counts.accumulate_values(member, self.start, values, acc)?;
                for i in group {
                    count_total += counts.total(i, self.start, rows);
                }
                member += k;
                if next < sizes.len() && sizes[next] == member {
                    curve.push(evaluate_regression_dispatch(
                        &sums,
                        &n_oob,
                        &targets,
                        &point_weights,
                    ));
                    next += 1;
                }
            }
            if sums.iter().any(|v| !v.is_finite()) {
                return Err(members.find_bad_value(self.start, rows));
            }
            for (j, (&sum, &n)) in sums[..rows].iter().zip(&n_oob).enumerate() {
                self.n_oob[j] = n as i64;
                self.prediction[j] = if n == 0.0 { f64::NAN } else { sum / n };
            }
            return Ok((curve, count_total));
        }
        let mut totals = members.class_totals(padded);
        let truth: Vec<u32> = targets.iter().map(|&t| t as u32).collect();
        let mut n_oob = vec![0u32; padded];
        let mut out_of_bag = vec![0u8; rows];
        for member in 0..m {
            counts.out_of_bag_flags(member, self.start, &mut out_of_bag)?;
            count_total += counts.total(member, self.start, rows);
            members.add_classes(member, self.start, &out_of_bag, &mut totals)?;
            // Votes carry their points' out-of-bag counts (the sum of the lanes).
            if let ClassTotals::Probabilities(_) = totals {
                n_oob
                    .iter_mut()
                    .zip(&out_of_bag)
                    .for_each(|(n, &flag)| *n += u32::from(flag));
            }
            if next < sizes.len() && sizes[next] == member + 1 {
                curve.push(match &totals {
                    ClassTotals::Votes(votes) => {
                        evaluate_votes(votes, &truth, &point_weights, terms)
                    }
                    ClassTotals::Probabilities(sums) => {
                        evaluate_classes(width, sums, &n_oob, &truth, &point_weights)
                    }
                });
                next += 1;
            }
        }
        if let ClassTotals::Probabilities(sums) = &totals {
            if sums.iter().any(|v| !v.is_finite()) {
                return Err(members.find_bad_value(self.start, rows));
            }
        }
        // The whole ensemble: per-point outputs.
        if let ClassTotals::Votes(votes) = &totals {
            n_oob
                .iter_mut()
                .enumerate()
                .for_each(|(j, n)| *n = votes.total(j));
        }
        for (j, &count) in n_oob[..rows].iter().enumerate() {
            self.n_oob[j] = i64::from(count);
            let out = &mut self.probabilities[j * width..(j + 1) * width];
            if count == 0 {
                self.prediction[j] = f64::NAN;
                out.fill(f64::NAN);
                continue;
            }
            let count = f64::from(count);
            let point = j * width..(j + 1) * width;
            self.prediction[j] = match &totals {
                ClassTotals::Votes(votes) => {
                    let point = (0..width).map(|c| f64::from(votes.get(c, j)));
                    out.iter_mut()
                        .zip(point.clone())
                        .for_each(|(o, s)| *o = s / count);
                    vote(point)
                }
                ClassTotals::Probabilities(sums) => {
                    let point = &sums[point];
                    out.iter_mut().zip(point).for_each(|(o, &s)| *o = s / count);
                    vote(point.iter().copied())
                }
            } as f64;
        }
        Ok((curve, count_total))
    }
}

fn check_targets(task: Task, y: &[f64], start: usize) -> Result<()> {
    let bad = match task {
        Task::Regression => y
            .iter()
            .position(|v| !v.is_finite())
            .map(|j| format!("targets must be finite; point {} is {}", start + j, y[j])),
        Task::Classification { n_classes } => y
            .iter()
            .position(|&v| !(v >= 0.0 && v < n_classes as f64 && v.fract() == 0.0))
            .map(|j| {
                format!(
                    "class labels must be integers in 0..{n_classes}; point {} is {}",
                    start + j,
                    y[j]
                )
            }),
    };
    bad.map_or(Ok(()), |message| Err(Error::value("y", message)))
}

/// Points per lane group of the error sums; per-lane partial sums are independent, so the
/// regression evaluation vectorises.
const LANES: usize = 4;

/// Points whose plain (lane-wise) partial sums are added to the compensated totals at once:
/// the error of a plain sum of 64 terms is at most 63 ulp-scale relative, so regrouping
/// points into different chunks changes the totals by ~1e-15 relative at most.
const SUB_BLOCK: usize = 64;

with_avx2! {
    /// The regression error sums of one block of points from its (sum, count) pairs (padded to
    /// whole lanes; padding has no OOB member and weight 0).
    /// [`evaluate_regression`] compiled for AVX2 when available (same operations and order).
    fn evaluate_regression_dispatch[](sums: &[f64], n_oob: &[f64], y: &[f64], w: &[f64]) -> ErrorSums = evaluate_regression
}

#[inline(always)] // so that the AVX2 wrapper compiles its own copy
fn evaluate_regression(sums: &[f64], n_oob: &[f64], y: &[f64], w: &[f64]) -> ErrorSums {
    let mut e = ErrorSums::default();
    for (((s, n), y), w) in sums
        .chunks(SUB_BLOCK)
        .zip(n_oob.chunks(SUB_BLOCK))
        .zip(y.chunks(SUB_BLOCK))
        .zip(w.chunks(SUB_BLOCK))
    {
        let mut lanes = [[0.0f64; LANES]; 4];
        for (((s, n), y), w) in s
            .chunks_exact(LANES)
            .zip(n.chunks_exact(LANES))
            .zip(y.chunks_exact(LANES))
            .zip(w.chunks_exact(LANES))
        {
            for l in 0..LANES {
                // Branch-free: `covered` is 1.0 or 0.0, and uncovered points divide by 1.
                let covered = if n[l] > 0.0 { 1.0 } else { 0.0 };
                let weight = w[l] * covered;
                let d = s[l] / (n[l] + (1.0 - covered)) - y[l];
                lanes[0][l] += covered;
                lanes[1][l] += weight;
                lanes[2][l] += weight * d * d;
                lanes[3][l] += weight * d.abs();
            }
        }
        let [covered, weight, squared, absolute] = lanes.map(|lane| lane.iter().sum::<f64>());
        e.covered += covered as u64;
        e.weight.add(weight);
        e.squared.add(squared);
        e.absolute.add(absolute);
    }
    e
}

with_avx2! {
    /// The classification error sums of one block of points from its running sums (buffers
    /// padded as in [`evaluate_regression`]; `truth` the target classes). The terms of point `j`
    /// go to lane `j % LANES` of plain sums over each sub-block, as for votes; an uncovered
    /// point's terms are 0.0. Two to four classes take [`evaluate_fixed_classes`], four points
    /// at a time with the same operations per point.
    fn evaluate_classes[](n_classes: usize, sums: &[f64], n_oob: &[u32], truth: &[u32], w: &[f64]) -> ErrorSums = evaluate_classes_any
}

#[inline(always)] // so that the AVX2 wrapper compiles its own copies
fn evaluate_classes_any(
    n_classes: usize,
    sums: &[f64],
    n_oob: &[u32],
    truth: &[u32],
    w: &[f64],
) -> ErrorSums {
    match n_classes {
        2 => evaluate_fixed_classes::<2>(sums, n_oob, truth, w),
        3 => evaluate_fixed_classes::<3>(sums, n_oob, truth, w),
        4 => evaluate_fixed_classes::<4>(sums, n_oob, truth, w),
        _ => evaluate_classes_general(n_classes, sums, n_oob, truth, w),
    }
}

/// One point's terms (weight, weight if missed, weighted Brier, weighted log loss) from its
/// probability sums over `n` > 0 out-of-bag members; 0.0 each when `n` is 0.
#[inline(always)]
fn point_class_terms(point: &[f64], n: u32, truth: usize, weight: f64) -> [f64; 4] {
    let count = f64::from(n);
    let mut brier = 0.0;
    for (c, &s) in point.iter().enumerate() {
        let d = s / count - if c == truth { 1.0 } else { 0.0 };
        brier += d * d;
    }
    // `vote(point) != truth` without a branch per class (sums are finite here, or the block
    // fails): a class above the target, or equal with a lower index.
    let target = point[truth];
    let wrong = point.iter().enumerate().fold(false, |wrong, (c, &s)| {
        wrong | (s > target) | ((s == target) & (c < truth))
    });
    if n == 0 {
        return [0.0; 4];
    }
    let p = (target / count).max(LOG_LOSS_FLOOR);
    [
        weight,
        if wrong { weight } else { 0.0 },
        weight * brier,
        -(weight * p.ln()),
    ]
}

fn evaluate_classes_general(
    n_classes: usize,
    sums: &[f64],
    n_oob: &[u32],
    truth: &[u32],
    w: &[f64],
) -> ErrorSums {
    let mut e = ErrorSums::default();
    for points in sub_blocks(n_oob.len()) {
        let mut lanes = [[0.0f64; LANES]; 4];
        let mut covered = 0;
        for j in points {
            let point = &sums[j * n_classes..(j + 1) * n_classes];
            let t = point_class_terms(point, n_oob[j], truth[j] as usize, w[j]);
            covered += u64::from(n_oob[j] > 0);
            for (lane, term) in lanes.iter_mut().zip(t) {
                lane[j % LANES] += term;
            }
        }
        e.add_lanes(covered, lanes);
    }
    e
}

/// [`evaluate_classes_general`] for `C` classes, four points at a time in lane arrays that
/// vectorise. The logarithms of a sub-block are taken in a loop of their own: a call per
/// point inside the four-point loop kept its lanes from staying in vector registers.
#[inline(always)]
fn evaluate_fixed_classes<const C: usize>(
    sums: &[f64],
    n_oob: &[u32],
    truth: &[u32],
    w: &[f64],
) -> ErrorSums {
    let mut e = ErrorSums::default();
    let mut shares = [[1.0f64; LANES]; SUB_BLOCK / LANES];
    let mut quads: [Option<QuadTerms>; SUB_BLOCK / LANES] = [const { None }; SUB_BLOCK / LANES];
    for points in sub_blocks(n_oob.len()) {
        let first = points.start;
        for (q, j) in points.clone().step_by(LANES).enumerate() {
            let counts: [u32; LANES] = std::array::from_fn(|l| n_oob[j + l]);
            let point: [[f64; C]; LANES] =
                std::array::from_fn(|l| std::array::from_fn(|c| sums[(j + l) * C + c]));
            let truth: [usize; LANES] = std::array::from_fn(|l| truth[j + l] as usize % C);
            let count: [f64; LANES] = std::array::from_fn(|l| f64::from(counts[l]));
            let target: [f64; LANES] = std::array::from_fn(|l| point[l][truth[l]]);
            let mut brier = [0.0f64; LANES];
            let mut wrong = [false; LANES];
            #[allow(clippy::needless_range_loop)] // class order across four points
            for c in 0..C {
                for l in 0..LANES {
                    let s = point[l][c];
                    let d = s / count[l] - if c == truth[l] { 1.0 } else { 0.0 };
                    brier[l] += d * d;
                    wrong[l] |= (s > target[l]) | ((s == target[l]) & (c < truth[l]));
                }
            }
            // An uncovered point's share is 1 (its log term, 0.0, is masked out anyway).
            let share = std::array::from_fn::<f64, LANES, _>(|l| target[l] / count[l]);
            shares[q] = std::array::from_fn(|l| {
                let share = share[l].max(LOG_LOSS_FLOOR);
                if counts[l] > 0 {
                    share
                } else {
                    1.0
                }
            });
            quads[q] = Some(QuadTerms {
                counts,
                wrong,
                brier,
                log_p: [0.0; LANES],
            });
        }
        let used = (points.end - first) / LANES;
        let mut lanes = [[0.0f64; LANES]; 4];
        let mut covered = [0u64; LANES];
        for (q, (quad, share)) in quads[..used].iter_mut().zip(&shares).enumerate() {
            if let Some(quad) = quad.as_mut() {
                quad.log_p = share.map(f64::ln);
                let j = first + q * LANES;
                quad.add_to(&mut lanes, &mut covered, &w[j..j + LANES]);
            }
        }
        e.add_lanes(covered.iter().sum(), lanes);
    }
    e
}

/// Members up to which [`VoteTerms`] are tabulated ((m + 1)(m + 2)/2 entries of 8 bytes:
/// 1 MB at 512).
const TABULATED_MEMBERS: usize = 512;

/// The log term ln(max(s/n, floor)) of a vote fraction s/n for every 0 ≤ s ≤ n ≤ members,
/// computed with the expression of [`evaluate_classes`] (so with the same bits): votes are
/// small integers, and a lookup replaces a logarithm per point.
struct VoteTerms {
    log: Vec<f64>,
}

impl VoteTerms {
    /// `None` above [`TABULATED_MEMBERS`] (the terms are then computed per point).
    fn new(members: usize) -> Option<Self> {
        if members > TABULATED_MEMBERS {
            return None;
        }
        let mut log = Vec::with_capacity((members + 1) * (members + 2) / 2);
        for n in 0..=members {
            for s in 0..=n {
                log.push((s as f64 / n as f64).max(LOG_LOSS_FLOOR).ln());
            }
        }
        Some(VoteTerms { log })
    }

    /// Index of (0, n); (s, n) follows at `s`.
    #[inline(always)]
    fn row(n: u32) -> usize {
        let n = n as usize;
        n * (n + 1) / 2
    }
}

/// [`evaluate_classes`] of packed label votes (integer totals) against the target classes
/// `truth`; with `terms` the logarithm is looked up. No branch on the data: an uncovered
/// point's terms are computed and replaced by 0.0. The terms of point `j` go to lane
/// `j % LANES` of plain sums over each sub-block (as in [`evaluate_regression`]), so the
/// one-word kernel adds four points with one vector add per term.
fn evaluate_votes(votes: &Votes, truth: &[u32], w: &[f64], terms: Option<&VoteTerms>) -> ErrorSums {
    if votes.n_words == 1 && votes.lane_shift == 4 {
        return evaluate_word_votes_dispatch(votes, truth, w, terms);
    }
    evaluate_votes_any(votes, truth, w, terms)
}

/// [`evaluate_votes`] for any packing: a point's votes read class by class.
fn evaluate_votes_any(
    votes: &Votes,
    truth: &[u32],
    w: &[f64],
    terms: Option<&VoteTerms>,
) -> ErrorSums {
    let mut classes = vec![0u32; votes.n_classes];
    let mut e = ErrorSums::default();
    for points in sub_blocks(votes.stride) {
        let mut lanes = [[0.0f64; LANES]; 4];
        let mut covered = 0;
        for j in points {
            classes
                .iter_mut()
                .enumerate()
                .for_each(|(c, s)| *s = votes.get(c, j));
            let count: u32 = classes.iter().sum();
            let t = point_vote_terms(&classes, count, truth[j] as usize, w[j], terms);
            covered += u64::from(count > 0);
            for (lane, term) in lanes.iter_mut().zip(t) {
                lane[j % LANES] += term;
            }
        }
        e.add_lanes(covered, lanes);
    }
    e
}

/// One point's terms (weight, weight if missed, weighted Brier, weighted log of the
/// target's share) from its votes per class, with the expressions of [`evaluate_classes`];
/// all 0.0 for a point without out-of-bag votes.
#[inline(always)]
fn point_vote_terms(
    classes: &[u32],
    count: u32,
    truth: usize,
    weight: f64,
    terms: Option<&VoteTerms>,
) -> [f64; 4] {
    let target = classes[truth];
    let n = f64::from(count);
    let mut brier = 0.0;
    // The vote misses the target iff a class has more votes, or as many and a lower index
    // (ties go to the lowest class).
    let mut wrong = false;
    for (c, &s) in classes.iter().enumerate() {
        let d = f64::from(s) / n - if c == truth { 1.0 } else { 0.0 };
        brier += d * d;
        wrong |= (s > target) | ((s == target) & (c < truth));
    }
    let log_p = match terms {
        Some(t) => t.log[VoteTerms::row(count) + target as usize],
        None => (f64::from(target) / n).max(LOG_LOSS_FLOOR).ln(),
    };
    let weight = if count > 0 { weight } else { 0.0 };
    [
        weight,
        if wrong { weight } else { 0.0 },
        if count > 0 { weight * brier } else { 0.0 },
        if count > 0 { -(weight * log_p) } else { 0.0 },
    ]
}

with_avx2! {
    /// [`evaluate_word_votes`] for the class count at hand, compiled for AVX2 when available
    /// (the same operations).
    fn evaluate_word_votes_dispatch[](votes: &Votes, truth: &[u32], w: &[f64], terms: Option<&VoteTerms>) -> ErrorSums = evaluate_word_votes_any
}

#[inline(always)] // so that the AVX2 wrapper compiles its own copies
fn evaluate_word_votes_any(
    votes: &Votes,
    truth: &[u32],
    w: &[f64],
    terms: Option<&VoteTerms>,
) -> ErrorSums {
    evaluate_word_votes(votes, truth, w, terms)
}

/// [`evaluate_votes`] of up to four classes in one word of 16-bit lanes, four points at a
/// time in lane arrays that vectorise; the terms of [`point_vote_terms`] with the same
/// operations per point. Every lane is read (a fixed loop of four vectorises where one of
/// the class count does not); lanes above the classes hold 0 votes, whose terms (0.0, never
/// a miss) change no sum.
#[inline(always)]
fn evaluate_word_votes(
    votes: &Votes,
    truth: &[u32],
    w: &[f64],
    terms: Option<&VoteTerms>,
) -> ErrorSums {
    // One copy of the loop per way of taking the logarithm, so neither branches per point.
    match terms {
        Some(t) => word_vote_sums::<true>(votes, truth, w, &t.log),
        None => word_vote_sums::<false>(votes, truth, w, &[]),
    }
}

/// [`evaluate_word_votes`] with the logarithm looked up in `log` (`LOOKUP`) or computed.
#[inline(always)]
fn word_vote_sums<const LOOKUP: bool>(
    votes: &Votes,
    truth: &[u32],
    w: &[f64],
    log: &[f64],
) -> ErrorSums {
    // Indices are clamped to the table rather than checked (they lie inside: s ≤ n ≤ m).
    let last = log.len().saturating_sub(1);
    let mut e = ErrorSums::default();
    for points in sub_blocks(votes.stride) {
        let mut lanes = [[0.0f64; LANES]; 4];
        let mut covered = [0u64; LANES];
        for j in points.step_by(LANES) {
            let words: [u64; LANES] = std::array::from_fn(|l| votes.words[j + l]);
            let truth: [u64; LANES] = std::array::from_fn(|l| u64::from(truth[j + l] & 3));
            let counts = words.map(|v| v.wrapping_mul(0x0001_0001_0001_0001) >> 48);
            let target: [u64; LANES] =
                std::array::from_fn(|l| (words[l] >> (16 * truth[l])) & 0xffff);
            let n = counts.map(|v| f64::from(v as u32));
            let mut brier = [0.0f64; LANES];
            let mut wrong = [0u64; LANES];
            for c in 0..4u64 {
                for l in 0..LANES {
                    let s = (words[l] >> (16 * c)) & 0xffff;
                    let hit = if c == truth[l] { 1.0 } else { 0.0 };
                    let d = f64::from(s as u32) / n[l] - hit;
                    brier[l] += d * d;
                    wrong[l] |=
                        u64::from(s > target[l]) | u64::from((s == target[l]) & (c < truth[l]));
                }
            }
            let log_p: [f64; LANES] = std::array::from_fn(|l| {
                if LOOKUP {
                    log[(VoteTerms::row(counts[l] as u32) + target[l] as usize).min(last)]
                } else {
                    (f64::from(target[l] as u32) / n[l])
                        .max(LOG_LOSS_FLOOR)
                        .ln()
                }
            });
            let quad = QuadTerms {
                counts: counts.map(|v| v as u32),
                wrong: wrong.map(|v| v != 0),
                brier,
                log_p,
            };
            quad.add_to(&mut lanes, &mut covered, &w[j..j + LANES]);
        }
        e.add_lanes(covered.iter().sum(), lanes);
    }
    e
}

/// The sub-blocks of `points` classification points (a whole number of lanes), whose
/// terms are added in lanes (point `j` to lane `j % LANES`) and then to the totals.
#[inline(always)]
fn sub_blocks(points: usize) -> impl Iterator<Item = std::ops::Range<usize>> {
    (0..points)
        .step_by(SUB_BLOCK)
        .map(move |start| start..(start + SUB_BLOCK).min(points))
}

/// Four points' parts of the classification terms, from the four-point kernels.
struct QuadTerms {
    counts: [u32; LANES],
    wrong: [bool; LANES],
    brier: [f64; LANES],
    log_p: [f64; LANES],
}

impl QuadTerms {
    /// Adds the terms of [`point_class_terms`] to the lanes (0.0 for an uncovered point).
    /// Masks select the terms, not branches: the result is the same (+0.0 where a branch
    /// gave 0.0), and a branch per lane kept the four points from sharing vector registers.
    #[inline(always)]
    fn add_to(&self, lanes: &mut [[f64; LANES]; 4], covered: &mut [u64; LANES], w: &[f64]) {
        let masked = |x: f64, mask: u64| f64::from_bits(x.to_bits() & mask);
        for l in 0..LANES {
            let keep = 0u64.wrapping_sub(u64::from(self.counts[l] > 0));
            let miss = keep & 0u64.wrapping_sub(u64::from(self.wrong[l]));
            covered[l] += keep & 1;
            lanes[0][l] += masked(w[l], keep);
            lanes[1][l] += masked(w[l], miss);
            lanes[2][l] += masked(w[l] * self.brier[l], keep);
            lanes[3][l] += masked(-(w[l] * self.log_p[l]), keep);
        }
    }
}

/// The losses of an [`OutOfBagPartial`] at every curve size, one array per loss of its task
/// (the other task's losses are `None`).
#[derive(Debug, Clone, PartialEq)]
pub struct LossCurves {
    /// Points with at least one OOB member among the first k members, per curve size.
    pub n_covered: Vec<u64>,
    /// Regression: weighted mean squared error per curve size.
    pub squared_error: Option<Vec<f64>>,
    /// Regression: weighted mean absolute error per curve size.
    pub absolute_error: Option<Vec<f64>>,
    /// Classification: weighted share misclassified per curve size.
    pub error_rate: Option<Vec<f64>>,
    /// Classification: multi-class Brier score per curve size.
    pub brier_score: Option<Vec<f64>>,
    /// Classification: log loss per curve size.
    pub log_loss: Option<Vec<f64>>,
}

/// The stored form of an [`OutOfBagPartial`] (postcard bytes), versioned.
#[derive(Serialize, Deserialize)]
struct StoredPartial {
    version: u32,
    /// 0 for regression, else the number of classes.
    n_classes: u64,
    members: u64,
    sizes: Vec<u64>,
    points: u64,
    /// Per curve size: covered, then (total, carry) of the six sums in field order.
    curve: Vec<(u64, [(f64, f64); 6])>,
}

const STORED_PARTIAL_VERSION: u32 = 1;

impl OutOfBagPartial {
    /// The losses of the task at every curve size.
    ///
    /// ```text
    /// loss(k) = Σ w_i e_i(k) / Σ w_i over the points covered by the first k members
    /// (NaN when no point is covered; the formulas are in the module documentation)
    /// ```
    pub fn losses(&self) -> LossCurves {
        let of = |f: fn(&ErrorSums) -> f64, of_task: bool| {
            of_task.then(|| self.curve.iter().map(f).collect())
        };
        let r = matches!(self.task, Task::Regression);
        LossCurves {
            n_covered: self.curve.iter().map(|e| e.covered).collect(),
            squared_error: of(ErrorSums::squared_error, r),
            absolute_error: of(ErrorSums::absolute_error, r),
            error_rate: of(ErrorSums::error_rate, !r),
            brier_score: of(ErrorSums::brier_score, !r),
            log_loss: of(ErrorSums::log_loss, !r),
        }
    }

    /// Serialises to compact bytes (for pickling).
    pub fn to_bytes(&self) -> Vec<u8> {
        let pair = |s: &Sum| (s.total, s.carry);
        let stored = StoredPartial {
            version: STORED_PARTIAL_VERSION,
            n_classes: match self.task {
                Task::Regression => 0,
                Task::Classification { n_classes } => n_classes as u64,
            },
            members: self.members as u64,
            sizes: self.sizes.iter().map(|&k| k as u64).collect(),
            points: self.points,
            curve: self
                .curve
                .iter()
                .map(|e| {
                    let sums = [&e.weight, &e.squared, &e.absolute, &e.wrong, &e.brier];
                    let mut out = [(0.0, 0.0); 6];
                    for (o, s) in out.iter_mut().zip(sums.into_iter().chain([&e.log_loss])) {
                        *o = pair(s);
                    }
                    (e.covered, out)
                })
                .collect(),
        };
        postcard::to_allocvec(&stored).expect("serialising plain data cannot fail")
    }

    /// Restores from [`to_bytes`](OutOfBagPartial::to_bytes) output.
    ///
    /// # Errors
    /// `data` if the bytes are truncated, corrupt, inconsistent or from another version.
    pub fn from_bytes(data: &[u8]) -> Result<Self> {
        let bad = |why: &str| Error::value("data", format!("not a stored out-of-bag state: {why}"));
        let stored: StoredPartial = postcard::from_bytes(data).map_err(|e| bad(&e.to_string()))?;
        if stored.version != STORED_PARTIAL_VERSION {
            return Err(bad(&format!(
                "version {} is not {STORED_PARTIAL_VERSION}",
                stored.version
            )));
        }
        let size = |v: u64| usize::try_from(v).map_err(|_| bad("size out of range"));
        let task = match size(stored.n_classes)? {
            0 => Task::Regression,
            n_classes => Task::Classification { n_classes },
        };
        let sizes = stored
            .sizes
            .into_iter()
            .map(size)
            .collect::<Result<Vec<_>>>()?;
        let mut state =
            OutOfBagPartial::new(task, size(stored.members)?, &sizes).map_err(|_| bad("sizes"))?;
        if stored.curve.len() != sizes.len() {
            return Err(bad("curve length does not match the sizes"));
        }
        let sum = |(total, carry): (f64, f64)| Sum { total, carry };
        for (e, (covered, s)) in state.curve.iter_mut().zip(stored.curve) {
            if covered > stored.points {
                return Err(bad("more covered points than points"));
            }
            *e = ErrorSums {
                covered,
                weight: sum(s[0]),
                squared: sum(s[1]),
                absolute: sum(s[2]),
                wrong: sum(s[3]),
                brier: sum(s[4]),
                log_loss: sum(s[5]),
            };
        }
        state.points = stored.points;
        Ok(state)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::parallel::{Silent, Threads};
    use approx::assert_relative_eq;
    use ndarray::{array, Array2, Array3};

    struct Output {
        prediction: Vec<f64>,
        n_oob: Vec<i64>,
        probabilities: Vec<f64>,
        count_total: f64,
        state: OutOfBagPartial,
    }

    fn run(
        members: &dyn MemberPredictions,
        counts: &dyn InBagCounts,
        y: &[f64],
        weights: Option<&[f64]>,
        sizes: &[usize],
        pool: &Pool,
    ) -> Result<Output> {
        let (_, n) = members.dim();
        let width = match members.task() {
            Task::Regression => 0,
            t => t.outputs(),
        };
        let mut prediction = vec![0.0; n];
        let mut n_oob = vec![0; n];
        let mut probabilities = vec![0.0; n * width];
        let pass = out_of_bag(
            members,
            counts,
            Targets::Values(ArrayView1::from(y)),
            weights.map(ArrayView1::from),
            sizes,
            PointOutputs {
                prediction: &mut prediction,
                n_out_of_bag: &mut n_oob,
                probabilities: &mut probabilities,
            },
            pool,
            &Silent,
        )?;
        Ok(Output {
            prediction,
            n_oob,
            probabilities,
            state: pass.state,
            count_total: pass.count_total,
        })
    }

    #[test]
    fn the_pass_returns_the_sum_of_the_counts_it_read() {
        // Runs of 255 fill the 16-bit lanes of the byte sum to their limit (128 words:
        // 65,280 per lane, and 261,120 over a word's four lanes); 70,001 points make
        // several blocks and a ragged end.
        let (m, n) = (3, 70_001);
        let c8 = Array2::from_shape_fn((m, n), |(i, j)| {
            if (j / 1024) % 2 == 0 {
                255u8
            } else {
                ((i * 31 + j * 7) % 256) as u8
            }
        });
        let expected: f64 = c8.iter().map(|&c| f64::from(c)).sum();
        let (c16, c64) = (c8.mapv(u16::from), c8.mapv(i64::from));
        let transposed = c8.t().to_owned();
        let strided = transposed.t();
        let values = Array2::from_shape_fn((m, n), |(i, j)| (i + j % 5) as f64);
        let labels = Array2::from_shape_fn((m, n), |(i, j)| ((i + j) % 3) as u8);
        let probabilities = Array3::from_elem((m, n, 2), 0.5);
        let y: Vec<f64> = (0..n).map(|j| (j % 2) as f64).collect();
        let labels = Labels::new(labels.view(), 3).unwrap();
        let kinds: [&dyn MemberPredictions; 3] = [
            &Values(values.view()),
            &labels,
            &Probabilities(probabilities.view()),
        ];
        let (v8, v16, v64) = (c8.view(), c16.view(), c64.view());
        let all_counts: [&dyn InBagCounts; 4] = [&v8, &v16, &v64, &strided];
        for members in kinds {
            for counts in all_counts {
                let out = run(members, counts, &y, None, &[1, 3], &Pool::Global).unwrap();
                assert_eq!(out.count_total, expected);
            }
        }
    }

    #[test]
    fn hand_computed_regression() {
        // 3 members, 3 points. Point 0: OOB for members 0 and 2 → (1 + 3) / 2 = 2.
        // Point 1: OOB for member 1 only → 5. Point 2: never OOB → NaN, excluded.
        let t = array![[1.0, 9.0, 7.0], [8.0, 5.0, 7.0], [3.0, 9.0, 7.0]];
        let c = array![[0u8, 1, 2], [1, 0, 1], [0, 2, 1]];
        let y = [1.0, 4.0, 0.0];
        let out = run(
            &Values(t.view()),
            &c.view(),
            &y,
            None,
            &[1, 2, 3],
            &Pool::Global,
        )
        .unwrap();
        assert_eq!(out.prediction[0], 2.0);
        assert_eq!(out.prediction[1], 5.0);
        assert!(out.prediction[2].is_nan());
        assert_eq!(out.n_oob, vec![2, 1, 0]);
        let full = out.state.full();
        assert_eq!(full.covered, 2);
        assert_relative_eq!(full.squared_error(), (1.0 + 1.0) / 2.0);
        assert_relative_eq!(full.absolute_error(), 1.0);
        assert_eq!(out.state.without_out_of_bag(), 1);
        // k = 1: only point 0 (member 0, prediction 1, error 0).
        assert_eq!(out.state.curve()[0].covered, 1);
        assert_eq!(out.state.curve()[0].squared_error(), 0.0);
        // k = 2: point 0 → 1, point 1 → 5: errors 0 and 1.
        assert_relative_eq!(out.state.curve()[1].squared_error(), 0.5);
    }

    #[test]
    fn hand_computed_labels_with_a_tie() {
        // Point 0: OOB votes 1, 0 → tie, lowest class (0) wins; fractions (0.5, 0.5).
        let t = array![[1i64, 2], [0, 2], [2, 1]];
        let c = array![[0i32, 0], [0, 1], [1, 0]];
        let y = [1.0, 1.0];
        let labels = Labels::new(t.view(), 3).unwrap();
        let out = run(&labels, &c.view(), &y, None, &[3], &Pool::Global).unwrap();
        assert_eq!(out.prediction, vec![0.0, 1.0]);
        assert_eq!(&out.probabilities[..3], &[0.5, 0.5, 0.0]);
        assert_eq!(&out.probabilities[3..], &[0.0, 0.5, 0.5]);
        let full = out.state.full();
        // Point 0 wrong (0 ≠ 1), point 1 right (tie 1 vs 2 → 1).
        assert_relative_eq!(full.error_rate(), 0.5);
        // Brier: point 0: 0.25 + 0.25 = 0.5; point 1: 0 + 0.25 + 0.25 = 0.5.
        assert_relative_eq!(full.brier_score(), 0.5);
        assert_relative_eq!(full.log_loss(), -(0.5f64).ln());
    }

    #[test]
    fn integer_targets_give_what_float_targets_give() {
        // The same classes as int64 and as float64, over several blocks of points: the
        // same outputs and loss sums bit for bit; a bad integer class is named.
        let (m, n) = (7, 40_000);
        let t = Array2::from_shape_fn((m, n), |(i, j)| ((i * 7 + j * 13) % 5 % 3) as i64);
        let c = Array2::from_shape_fn((m, n), |(i, j)| ((i + 3 * j) % 4 == 0) as u8);
        let classes: Vec<i64> = (0..n as i64).map(|j| j % 3).collect();
        let floats: Vec<f64> = classes.iter().map(|&v| v as f64).collect();
        let labels = Labels::new(t.view(), 3).unwrap();
        let run_with = |y: Targets<'_>| {
            let (mut prediction, mut n_oob, mut probabilities) =
                (vec![0.0; n], vec![0; n], vec![0.0; 3 * n]);
            let out = PointOutputs {
                prediction: &mut prediction,
                n_out_of_bag: &mut n_oob,
                probabilities: &mut probabilities,
            };
            let pass = out_of_bag(
                &labels,
                &c.view(),
                y,
                None,
                &[2, m],
                out,
                &Pool::Global,
                &Silent,
            );
            pass.map(|p| (p.state, prediction, n_oob, probabilities))
        };
        let from_floats = run_with(Targets::Values(ArrayView1::from(&floats))).unwrap();
        let from_integers = run_with(Targets::Labels(ArrayView1::from(&classes))).unwrap();
        assert!(from_floats.0.points() == n as u64 && from_floats.1.iter().all(|p| p.is_finite()));
        assert_eq!(from_integers.0, from_floats.0);
        assert_eq!(from_integers.1, from_floats.1);
        assert_eq!(from_integers.2, from_floats.2);
        assert_eq!(from_integers.3, from_floats.3);
        let mut bad = classes.clone();
        bad[n - 5] = 3;
        let err = run_with(Targets::Labels(ArrayView1::from(&bad))).unwrap_err();
        assert!(
            err.to_string().contains(&format!("point {} is 3", n - 5)),
            "{err}"
        );
    }

    #[test]
    fn every_vote_packing_matches_straightforward_counting() {
        // One word of 16-bit lanes (1 to 4 classes), several words (5, 9), scattered votes
        // (20), and 32-bit lanes from 65,536 members on: each against votes counted here
        // point by point (common practice: the vote fraction is the share of out-of-bag
        // members voting for the class).
        for (c, m) in [
            (1, 7),
            (3, 7),
            (4, 9),
            (5, 7),
            (9, 6),
            (20, 5),
            (3, 70_000),
            (6, 70_000),
        ] {
            let n = 13;
            // With 70,000 members nearly every member is out of bag and votes for class
            // j % c, so that class's count passes the 16-bit lane's 65,535.
            let big = m > 1 << 16;
            let labels = Array2::from_shape_fn((m, n), |(i, j)| {
                let class = if big && i % 100 != 0 {
                    j
                } else {
                    i * 7 + j * 3 + i * j
                };
                (class % c) as i32
            });
            let counts = Array2::from_shape_fn((m, n), |(i, j)| {
                let count = if big {
                    usize::from((i + j) % 1000 == 0)
                } else {
                    (i + 2 * j + i / 3) % 3
                };
                count as u8
            });
            let y: Vec<f64> = (0..n).map(|j| (j % c) as f64).collect();
            let members = Labels::new(labels.view(), c).unwrap();
            let out = run(&members, &counts.view(), &y, None, &[m], &Pool::Global).unwrap();
            let (mut wrong, mut brier, mut log_loss, mut covered) = (0.0, 0.0, 0.0, 0);
            for j in 0..n {
                let mut votes = vec![0u32; c];
                for i in (0..m).filter(|&i| counts[[i, j]] == 0) {
                    votes[labels[[i, j]] as usize] += 1;
                }
                let total: u32 = votes.iter().sum();
                assert_eq!(out.n_oob[j], i64::from(total), "{c} classes, {m} members");
                assert!(total > 0);
                let shares: Vec<f64> = votes
                    .iter()
                    .map(|&v| f64::from(v) / f64::from(total))
                    .collect();
                assert_eq!(&out.probabilities[j * c..(j + 1) * c], &shares[..]);
                let top = (0..c).fold(0, |best, k| if votes[k] > votes[best] { k } else { best });
                assert_eq!(out.prediction[j], top as f64, "{c} classes, {m} members");
                let truth = y[j] as usize;
                covered += 1;
                wrong += f64::from(u8::from(top != truth));
                brier += (0..c)
                    .map(|k| (shares[k] - f64::from(u8::from(k == truth))).powi(2))
                    .sum::<f64>();
                log_loss -= shares[truth].max(LOG_LOSS_FLOOR).ln();
            }
            let full = out.state.full();
            assert_eq!(full.covered, covered);
            assert_relative_eq!(full.error_rate(), wrong / n as f64, max_relative = 1e-12);
            assert_relative_eq!(full.brier_score(), brier / n as f64, max_relative = 1e-12);
            assert_relative_eq!(full.log_loss(), log_loss / n as f64, max_relative = 1e-12);
        }
    }

    #[test]
    fn probabilities_and_log_loss_floor() {
        let p = Array3::from_shape_vec((1, 2, 2), vec![1.0, 0.0, 0.25, 0.75]).unwrap();
        let c = array![[0u64, 0]];
        let out = run(
            &Probabilities(p.view()),
            &c.view(),
            &[1.0, 1.0],
            None,
            &[1],
            &Pool::Global,
        )
        .unwrap();
        let full = out.state.full();
        assert_relative_eq!(
            full.log_loss(),
            (-(LOG_LOSS_FLOOR).ln() - 0.75f64.ln()) / 2.0
        );
        assert_relative_eq!(full.brier_score(), (2.0 + 2.0 * 0.0625) / 2.0);
    }

    #[test]
    fn weights_enter_the_means() {
        let t = array![[1.0f32, 3.0]];
        let c = array![[0u16, 0]];
        let out = run(
            &Values(t.view()),
            &c.view(),
            &[0.0, 0.0],
            Some(&[3.0, 1.0]),
            &[1],
            &Pool::Global,
        )
        .unwrap();
        assert_relative_eq!(out.state.full().squared_error(), (3.0 + 9.0) / 4.0);
    }

    #[test]
    fn thread_count_and_chunking_do_not_change_results() {
        let (m, n) = (7, 20_000);
        let t = Array2::from_shape_fn((m, n), |(i, j)| ((i * 31 + j * 17) % 97) as f64 * 0.13);
        let c = Array2::from_shape_fn((m, n), |(i, j)| ((i * 7 + j * 3) % 3) as u8);
        let y: Vec<f64> = (0..n).map(|j| (j % 11) as f64).collect();
        let sizes = default_curve_sizes(m);
        let one = Threads::Fixed(1).pool().unwrap();
        let three = Threads::Fixed(3).pool().unwrap();
        let a = run(&Values(t.view()), &c.view(), &y, None, &sizes, &one).unwrap();
        let b = run(&Values(t.view()), &c.view(), &y, None, &sizes, &three).unwrap();
        assert_eq!(a.state, b.state);
        assert_eq!(
            a.prediction.iter().map(|v| v.to_bits()).collect::<Vec<_>>(),
            b.prediction.iter().map(|v| v.to_bits()).collect::<Vec<_>>()
        );
        // Chunks of 3001 points merged in order equal the whole.
        let mut merged = OutOfBagPartial::new(Task::Regression, m, &sizes).unwrap();
        let mut start = 0;
        while start < n {
            let end = (start + 3001).min(n);
            let part = run(
                &Values(t.slice(s![.., start..end])),
                &c.slice(s![.., start..end]),
                &y[start..end],
                None,
                &sizes,
                &one,
            )
            .unwrap();
            merged.merge(&part.state).unwrap();
            start = end;
        }
        assert_eq!(merged.points(), a.state.points());
        for (x, z) in merged.curve().iter().zip(a.state.curve()) {
            assert_eq!(x.covered, z.covered);
            assert_relative_eq!(x.squared_error(), z.squared_error(), max_relative = 1e-14);
        }
    }

    #[test]
    fn strided_inputs_match_contiguous() {
        let t = Array2::from_shape_fn((5, 300), |(i, j)| (i + 2 * j) as f64);
        let c = Array2::from_shape_fn((5, 300), |(i, j)| ((i + j) % 2) as i16);
        let tt = t.t().to_owned();
        let ct = c.t().to_owned();
        let y = vec![1.0; 300];
        let a = run(&Values(t.view()), &c.view(), &y, None, &[5], &Pool::Global).unwrap();
        let b = run(&Values(tt.t()), &ct.t(), &y, None, &[5], &Pool::Global).unwrap();
        assert_eq!(a.state, b.state);
        assert_eq!(a.n_oob, b.n_oob);
    }

    #[test]
    fn bad_input_is_named() {
        let t = array![[1.0, f64::NAN]];
        let c = array![[0u8, 0]];
        let err = |r: Result<Output>| match r {
            Err(Error::InvalidValue { argument, .. }) => argument,
            _ => panic!("expected an error"),
        };
        assert_eq!(
            err(run(
                &Values(t.view()),
                &c.view(),
                &[0.0, 0.0],
                None,
                &[1],
                &Pool::Global
            )),
            "members"
        );
        let t = array![[1.0, 2.0]];
        let neg = array![[0i8, -1]];
        assert_eq!(
            err(run(
                &Values(t.view()),
                &neg.view(),
                &[0.0, 0.0],
                None,
                &[1],
                &Pool::Global
            )),
            "counts"
        );
        let wide = array![[0u8, 0, 0]];
        assert_eq!(
            err(run(
                &Values(t.view()),
                &wide.view(),
                &[0.0, 0.0],
                None,
                &[1],
                &Pool::Global
            )),
            "counts"
        );
        assert_eq!(
            err(run(
                &Values(t.view()),
                &c.view(),
                &[0.0],
                None,
                &[1],
                &Pool::Global
            )),
            "y"
        );
        assert_eq!(
            err(run(
                &Values(t.view()),
                &c.view(),
                &[0.0, f64::INFINITY],
                None,
                &[1],
                &Pool::Global
            )),
            "y"
        );
        assert_eq!(
            err(run(
                &Values(t.view()),
                &c.view(),
                &[0.0, 0.0],
                Some(&[1.0, -1.0]),
                &[1],
                &Pool::Global
            )),
            "point_weights"
        );
        assert_eq!(
            err(run(
                &Values(t.view()),
                &c.view(),
                &[0.0, 0.0],
                None,
                &[2],
                &Pool::Global
            )),
            "curve_sizes"
        );
        let labels = array![[0u8, 3]];
        let l = Labels::new(labels.view(), 3).unwrap();
        assert_eq!(
            err(run(&l, &c.view(), &[0.0, 0.0], None, &[1], &Pool::Global)),
            "members"
        );
        let l = Labels::new(labels.view(), 4).unwrap();
        assert_eq!(
            err(run(&l, &c.view(), &[0.0, 4.0], None, &[1], &Pool::Global)),
            "y"
        );
        assert_eq!(
            err(run(&l, &c.view(), &[0.0, 0.5], None, &[1], &Pool::Global)),
            "y"
        );
        let p = Array3::from_shape_vec((1, 2, 2), vec![0.5, 0.5, 0.5, 0.6]).unwrap();
        assert_eq!(
            err(run(
                &Probabilities(p.view()),
                &c.view(),
                &[0.0, 0.0],
                None,
                &[1],
                &Pool::Global
            )),
            "members"
        );
        let empty = Array2::<f64>::zeros((0, 2));
        let ce = Array2::<u8>::zeros((0, 2));
        assert_eq!(
            err(run(
                &Values(empty.view()),
                &ce.view(),
                &[0.0, 0.0],
                None,
                &[1],
                &Pool::Global
            )),
            "members"
        );
    }

    #[test]
    fn member_grouping_does_not_change_the_sums() {
        // With every size on the curve members are folded one at a time, with only the
        // last size four at a time; the per-point sums are built in the same order.
        let (m, n) = (11, 5000);
        let t = Array2::from_shape_fn((m, n), |(i, j)| ((i * 13 + j * 7) % 31) as f64 * 0.37 - 3.0);
        let c = Array2::from_shape_fn((m, n), |(i, j)| ((i * 5 + j * 11) % 4) as u32);
        let y: Vec<f64> = (0..n).map(|j| (j % 7) as f64 * 0.5).collect();
        let every: Vec<usize> = (1..=m).collect();
        let a = run(
            &Values(t.view()),
            &c.view(),
            &y,
            None,
            &every,
            &Pool::Global,
        )
        .unwrap();
        let b = run(&Values(t.view()), &c.view(), &y, None, &[m], &Pool::Global).unwrap();
        assert_eq!(a.state.full(), b.state.full());
        let bits = |v: &[f64]| v.iter().map(|x| x.to_bits()).collect::<Vec<_>>();
        assert_eq!(bits(&a.prediction), bits(&b.prediction));
    }

    #[test]
    fn vote_evaluations_tabulated_computed_and_four_at_a_time_agree_bit_for_bit() {
        // Class-major votes of 1 to 4 classes over 70 points (two sub-blocks), every count
        // from 0 to the 9 members, weights that are not all 1; `None` computes every term.
        for c in 1..=4 {
            vote_evaluations_agree(c);
        }
        assert!(VoteTerms::new(TABULATED_MEMBERS + 1).is_none());
    }

    fn vote_evaluations_agree(c: usize) {
        let (members, n) = (9u32, 72);
        let mut votes = Votes::new(n, c, members as usize);
        for j in 0..70 {
            let mut left = (j as u32 * 7) % (members + 1);
            for k in 0..c {
                let v = if k == c - 1 {
                    left
                } else {
                    (j as u32 + k as u32) % (left + 1)
                };
                for _ in 0..v {
                    votes.add_one(k, j, 1);
                }
                left -= v;
            }
        }
        let y: Vec<u32> = (0..n).map(|j| (j % c) as u32).collect();
        let w: Vec<f64> = (0..n)
            .map(|j| if j < 70 { 0.5 + j as f64 / 7.0 } else { 0.0 })
            .collect();
        let terms = VoteTerms::new(members as usize).unwrap();
        let looked_up = evaluate_votes(&votes, &y, &w, Some(&terms));
        let computed = evaluate_votes(&votes, &y, &w, None);
        assert_eq!(looked_up, computed);
        // One word of lanes, four points at a time, against class-by-class reads.
        assert_eq!(looked_up, evaluate_votes_any(&votes, &y, &w, Some(&terms)));
        assert_eq!(looked_up, evaluate_votes_any(&votes, &y, &w, None));
        assert_eq!(looked_up, evaluate_word_votes(&votes, &y, &w, Some(&terms)));
        assert_eq!(looked_up, evaluate_word_votes(&votes, &y, &w, None));
        assert!(looked_up.covered > 0);
        assert!(looked_up.log_loss.value() > 0.0 || c == 1, "{c} classes");
    }

    #[test]
    #[cfg(target_arch = "x86_64")]
    fn avx2_kernels_match_the_portable_ones_bit_for_bit() {
        if !std::arch::is_x86_feature_detected!("avx2") {
            return;
        }
        let n = 1003;
        let values: Vec<Vec<f32>> = (0..4)
            .map(|k| {
                (0..n)
                    .map(|j| ((j * 37 + k * 11) % 101) as f32 * 0.173 - 7.0)
                    .collect()
            })
            .collect();
        let counts: Vec<Vec<u16>> = (0..4)
            .map(|k| (0..n).map(|j| ((j * 5 + k * 3) % 3) as u16).collect())
            .collect();
        let c = [
            &counts[0][..],
            &counts[1][..],
            &counts[2][..],
            &counts[3][..],
        ];
        let v = [
            &values[0][..],
            &values[1][..],
            &values[2][..],
            &values[3][..],
        ];
        let run = |avx2: bool| {
            let (mut sums, mut n_oob) = (vec![0.5; n], vec![1.0; n]);
            let acc = Acc {
                sums: &mut sums,
                n: &mut n_oob,
            };
            // The dispatch runs the AVX2 build here (support was checked at the top).
            let negative = if avx2 {
                add_group_dispatch(c, v, acc)
            } else {
                add_group(c, v, acc)
            };
            assert!(!negative);
            sums.resize(n.div_ceil(LANES) * LANES, 0.0);
            n_oob.resize(sums.len(), 0.0);
            let y: Vec<f64> = (0..sums.len()).map(|j| (j % 9) as f64).collect();
            let w = vec![1.5; sums.len()];
            let e = if avx2 {
                evaluate_regression_dispatch(&sums, &n_oob, &y, &w)
            } else {
                evaluate_regression(&sums, &n_oob, &y, &w)
            };
            (sums, n_oob, e)
        };
        let (a, b) = (run(false), run(true));
        let bits = |v: &[f64]| v.iter().map(|x| x.to_bits()).collect::<Vec<_>>();
        assert_eq!(bits(&a.0), bits(&b.0));
        assert_eq!(bits(&a.1), bits(&b.1));
        assert_eq!(a.2, b.2);
    }

    #[test]
    fn fixed_class_probability_kernels_match_the_general_one_bit_for_bit() {
        // Rows of 2 to 5 classes over 1,001 points (odd, so no whole lanes), in bag or not,
        // with one bad row (negative, NaN, or summing to 1.01) placed in bag: every kernel
        // must add the same bits and agree on validity.
        for c in 2..=5 {
            for bad in [None, Some(-0.25), Some(f64::NAN), Some(0.01)] {
                let n = 1001;
                let mut p: Vec<f64> = (0..n * c)
                    .map(|e| 0.05 + ((e * 37) % 97) as f64 / 97.0)
                    .collect();
                for point in p.chunks_exact_mut(c) {
                    let total: f64 = point.iter().sum();
                    point.iter_mut().for_each(|v| *v /= total);
                }
                let flags: Vec<u8> = (0..n).map(|j| u8::from(j % 3 == 1)).collect();
                if let Some(v) = bad {
                    let point = &mut p[500 * c..501 * c];
                    point[0] = if v == 0.01 { point[0] + v } else { v };
                }
                let run = |kernel: &dyn Fn(&mut [f64]) -> bool| {
                    let mut sums = vec![0.125; n * c];
                    let valid = kernel(&mut sums);
                    (valid, sums.iter().map(|v| v.to_bits()).collect::<Vec<_>>())
                };
                let general = run(&|sums| add_probabilities(&p, c, &flags, sums));
                assert_eq!(general.0, bad.is_none(), "{c} classes, {bad:?}");
                let any = run(&|sums| add_probabilities_any(&p, c, &flags, sums));
                assert_eq!(any, general, "{c} classes, {bad:?}");
                let dispatched = run(&|sums| add_probabilities_dispatch(&p, c, &flags, sums));
                assert_eq!(dispatched, general, "{c} classes, {bad:?}");
                let p32: Vec<f32> = p.iter().map(|&v| v as f32).collect();
                let general = run(&|sums| add_probabilities(&p32, c, &flags, sums));
                let dispatched = run(&|sums| add_probabilities_dispatch(&p32, c, &flags, sums));
                assert_eq!(dispatched, general, "{c} classes, {bad:?}, float32");
            }
        }
    }

    #[test]
    fn fixed_class_evaluation_matches_the_general_one_bit_for_bit() {
        // Probability sums of 2 to 4 classes over 136 points (three sub-blocks, the last
        // partial): uncovered points, ties between classes (target first, target second),
        // sums below the log floor, weights that are not all 1.
        for c in 2..=4 {
            let n = 136;
            let n_oob: Vec<u32> = (0..n).map(|j| (j as u32 * 5) % 7).collect();
            let mut sums = vec![0.0; n * c];
            for (j, point) in sums.chunks_exact_mut(c).enumerate() {
                let count = f64::from(n_oob[j]);
                for (k, s) in point.iter_mut().enumerate() {
                    *s = count * ((j * 3 + k * 7) % 5) as f64 / 10.0;
                }
                if j % 11 == 0 {
                    point[1] = point[0];
                }
                if j % 13 == 0 {
                    point[0] = 1e-17 * count;
                }
            }
            let truth: Vec<u32> = (0..n).map(|j| ((j * 7) % c) as u32).collect();
            let w: Vec<f64> = (0..n).map(|j| 0.25 + (j % 9) as f64 / 3.0).collect();
            let general = evaluate_classes_general(c, &sums, &n_oob, &truth, &w);
            let fixed = match c {
                2 => evaluate_fixed_classes::<2>(&sums, &n_oob, &truth, &w),
                3 => evaluate_fixed_classes::<3>(&sums, &n_oob, &truth, &w),
                _ => evaluate_fixed_classes::<4>(&sums, &n_oob, &truth, &w),
            };
            assert_eq!(fixed, general, "{c} classes");
            assert_eq!(evaluate_classes(c, &sums, &n_oob, &truth, &w), general);
            assert!(general.covered > 0 && general.wrong.value() > 0.0);
            assert!(general.log_loss.value() > 30.0, "the floor is reached");
        }
    }

    #[test]
    fn in_bag_nan_is_still_an_error() {
        let t = array![[1.0, 2.0], [f64::NAN, 4.0]];
        let c = array![[0u8, 0], [1, 0]];
        match run(
            &Values(t.view()),
            &c.view(),
            &[0.0, 0.0],
            None,
            &[2],
            &Pool::Global,
        ) {
            Err(Error::InvalidValue { argument, message }) => {
                assert_eq!(argument, "members");
                assert!(message.contains("member 1, point 0"), "{message}");
            }
            _ => panic!("expected an error"),
        }
    }

    #[test]
    fn default_sizes_are_log_spaced_and_end_at_members() {
        assert_eq!(default_curve_sizes(1), vec![1]);
        let s = default_curve_sizes(200);
        assert_eq!(s[0], 1);
        assert_eq!(*s.last().unwrap(), 200);
        assert!(s.windows(2).all(|w| w[0] < w[1]));
        assert!(s.len() >= 12 && s.len() <= 20, "{s:?}");
    }

    #[test]
    fn compensated_sum_is_order_independent() {
        let values: Vec<f64> = (0..10_000).map(|i| 1e8 + (i as f64) * 1e-3).collect();
        let mut forward = Sum::default();
        values.iter().for_each(|&v| forward.add(v));
        let mut backward = Sum::default();
        values.iter().rev().for_each(|&v| backward.add(v));
        assert_eq!(forward.value(), backward.value());
    }
}

#[cfg(test)]
mod stored_tests {
    use super::*;
    use crate::parallel::Silent;
    use ndarray::Array2;

    fn regression_state() -> OutOfBagPartial {
        let t = Array2::from_shape_fn((4, 9), |(i, j)| (i * 3 + j) as f64 * 0.5);
        let c = Array2::from_shape_fn((4, 9), |(i, j)| ((i + j) % 3) as u8);
        let y: Vec<f64> = (0..9).map(|j| j as f64).collect();
        let (mut prediction, mut n_oob) = (vec![0.0; 9], vec![0; 9]);
        let out = PointOutputs {
            prediction: &mut prediction,
            n_out_of_bag: &mut n_oob,
            probabilities: &mut [],
        };
        let (values, counts) = (Values(t.view()), c.view());
        let y = Targets::Values(ArrayView1::from(&y));
        out_of_bag(
            &values,
            &counts,
            y,
            None,
            &[1, 2, 4],
            out,
            &Pool::Global,
            &Silent,
        )
        .unwrap()
        .state
    }

    #[test]
    fn bytes_round_trip_exactly() {
        let state = regression_state();
        let back = OutOfBagPartial::from_bytes(&state.to_bytes()).unwrap();
        assert_eq!(back, state);
        let labels = OutOfBagPartial::new(Task::Classification { n_classes: 3 }, 2, &[2]).unwrap();
        assert_eq!(
            OutOfBagPartial::from_bytes(&labels.to_bytes()).unwrap(),
            labels
        );
    }

    #[test]
    fn corrupt_bytes_name_data() {
        let bytes = regression_state().to_bytes();
        for bad in [&bytes[..bytes.len() - 1], &[7u8, 0, 0][..], &[][..]] {
            let err = OutOfBagPartial::from_bytes(bad).unwrap_err();
            assert!(err.to_string().starts_with("`data`"), "{err}");
        }
    }

    #[test]
    fn losses_are_the_task_losses_at_every_size() {
        let state = regression_state();
        let losses = state.losses();
        let sums = state.curve();
        assert_eq!(
            losses.n_covered,
            sums.iter().map(|e| e.covered).collect::<Vec<_>>()
        );
        let squared: Vec<f64> = sums.iter().map(ErrorSums::squared_error).collect();
        assert_eq!(losses.squared_error, Some(squared));
        assert!(losses.error_rate.is_none() && losses.log_loss.is_none());
    }
}
