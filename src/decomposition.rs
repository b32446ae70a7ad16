//! Combining member predictions and splitting the ensemble's loss: aggregation (mean, soft
//! and majority vote), the ambiguity decomposition, the ensemble-size curve with its exact
//! finite-ensemble law, and the correlation of member residuals.
//!
//! Predictions arrive as `(members, n_points)` values (regression), `(members, n_points,
//! n_classes)` class probabilities, or `(members, n_points)` integer class labels. Every
//! routine works in chunks of [`CHUNK_POINTS`] points: a chunk is one rayon task, reads each
//! member's slice of the chunk once, and returns a mergeable partial state (sums and
//! [`Moments`], Chan, Golub & LeVeque 1983). Partial states are merged in chunk order, so
//! results never depend on the thread count, and the stream accumulators
//! ([`DecompositionState`], [`SizeCurveState`]) fed chunk by chunk give the in-memory
//! results up to rounding. Extra memory is O(n_points) (the per-point outputs) plus a few
//! chunk-sized buffers per thread; no members-sized temporary is ever made.
//!
//! Sources of the formulas:
//!
//! ```text
//! ambiguity decomposition   Krogh & Vedelsby (1995), "Neural network ensembles, cross
//!                           validation, and active learning", NIPS 7, eq. (5)-(6)
//! one-pass shifted sums     Chan, Golub & LeVeque (1983), "Algorithms for computing the
//!                           sample variance", The American Statistician 37(3)
//! multi-class Brier score   Brier (1950), Monthly Weather Review 78(1), eq. (1)
//! sampling without          Cochran (1977), Sampling Techniques, 3rd ed., Theorem 2.2
//! replacement               (variance of the mean of a simple random sample)
//! ```

use std::ops::Range;

use ndarray::{s, Array2, ArrayView1, ArrayView2, ArrayView3, Axis};
use rayon::prelude::*;

use crate::error::{Error, Result};
use crate::numeric::{Moments, Real};
use crate::parallel::{Monitor, Pool};
use crate::random::MemberStreams;

/// Points per chunk: the unit of parallel work and of merging. Fixed, so results do not
/// depend on the thread count.
pub const CHUNK_POINTS: usize = 4096;

/// Largest allowed |Σ_c p_c − 1| for one member's probabilities at one point, and the
/// slack allowed below 0 and above 1 for a single probability (f32 softmax outputs over a
/// few hundred classes stay well inside it).
pub const PROBABILITY_TOLERANCE: f64 = 1e-5;

/// Largest number of classes a vote table may have: a chunk's table holds
/// [`CHUNK_POINTS`] × n_classes totals, so a stray huge label cannot ask for gigabytes.
pub const MAX_VOTE_CLASSES: usize = 1 << 16;

/// Largest allowed |Σ_b w_b − 1| for member weights.
pub const WEIGHT_TOLERANCE: f64 = 1e-6;

/// The loss a decomposition or size curve is computed for.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Loss {
    /// (f − y)² on value predictions.
    Squared,
    /// Σ_c (p_c − 1[y = c])² on class probabilities.
    Brier,
    /// 1[vote ≠ y] on class labels.
    ErrorRate,
}

impl Loss {
    /// Parses the user-facing name.
    pub fn parse(name: &str) -> Result<Self> {
        match name {
            "squared" => Ok(Loss::Squared),
            "brier" => Ok(Loss::Brier),
            "error_rate" => Ok(Loss::ErrorRate),
            other => Err(Error::value(
                "loss",
                format!("expected 'squared', 'brier' or 'error_rate', got {other:?}"),
            )),
        }
    }

    /// The user-facing name.
    pub fn name(self) -> &'static str {
        match self {
            Loss::Squared => "squared",
            Loss::Brier => "brier",
            Loss::ErrorRate => "error_rate",
        }
    }
}

/// Member weights, checked once: non-negative, finite, summing to one within
/// [`WEIGHT_TOLERANCE`] (or all equal when none are given).
///
/// ```text
/// raw_b   the given weight (1 for every member when none are given)
/// total   Σ_b raw_b (M without weights; 1 within tolerance with weights)
/// ```
#[derive(Debug, Clone, PartialEq)]
pub struct MemberWeights {
    raw: Vec<f64>,
    total: f64,
    uniform: bool,
}

impl MemberWeights {
    /// Equal weights for `members` members.
    pub fn uniform(members: usize) -> Self {
        MemberWeights {
            raw: vec![1.0; members],
            total: members as f64,
            uniform: true,
        }
    }

    /// The given weights (`weights.len()` must equal `members`).
    ///
    /// # Errors
    /// `weights` if the length differs, a weight is negative or not finite, or the sum is
    /// not 1 within [`WEIGHT_TOLERANCE`].
    pub fn new(weights: &[f64], members: usize) -> Result<Self> {
        if weights.len() != members {
            return Err(Error::value(
                "weights",
                format!(
                    "has {} weights but there are {members} members",
                    weights.len()
                ),
            ));
        }
        if let Some(w) = weights.iter().find(|w| !w.is_finite() || **w < 0.0) {
            return Err(Error::value(
                "weights",
                format!("must be finite and non-negative, got {w}"),
            ));
        }
        let total: f64 = weights.iter().sum();
        if (total - 1.0).abs() > WEIGHT_TOLERANCE {
            return Err(Error::value(
                "weights",
                format!("must sum to 1 (within {WEIGHT_TOLERANCE:e}), got {total}"),
            ));
        }
        Ok(MemberWeights {
            raw: weights.to_vec(),
            total,
            uniform: false,
        })
    }

    /// Number of members.
    pub fn members(&self) -> usize {
        self.raw.len()
    }

    /// Whether these are the equal weights of [`MemberWeights::uniform`].
    pub fn is_uniform(&self) -> bool {
        self.uniform
    }
}

/// Per-point outputs of a decomposition, each of length n_points.
#[derive(Debug)]
pub struct PointLosses<'a> {
    /// Loss of the combined prediction at every point.
    pub ensemble: &'a mut [f64],
    /// Weighted mean member loss at every point.
    pub member: &'a mut [f64],
    /// Ambiguity (squared, Brier) or vote gain (error rate) at every point.
    pub gain: &'a mut [f64],
}

/// Mergeable sums of a decomposition over the points seen so far.
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub struct LossMoments {
    /// Moments of the per-point ensemble loss.
    pub ensemble: Moments,
    /// Moments of the per-point mean member loss.
    pub member: Moments,
    /// Moments of the per-point ambiguity (or vote gain).
    pub gain: Moments,
}

impl LossMoments {
    /// Combines two partial states (Chan, Golub & LeVeque 1983).
    pub fn merge(&self, other: &LossMoments) -> LossMoments {
        LossMoments {
            ensemble: self.ensemble.merge(&other.ensemble),
            member: self.member.merge(&other.member),
            gain: self.gain.merge(&other.gain),
        }
    }

    fn of_chunk(ensemble: &[f64], member: &[f64], gain: &[f64]) -> Self {
        LossMoments {
            ensemble: Moments::of_slice(ensemble),
            member: Moments::of_slice(member),
            gain: Moments::of_slice(gain),
        }
    }
}

// -- shared plumbing ---------------------------------------------------------------------

/// Runs `work` on every chunk of `n_points` points in parallel, in blocks of a few chunks
/// per thread with a monitor call between blocks; `slots` holds one per-chunk output (e.g.
/// the chunk's slices of the per-point outputs). Results come back in chunk order.
fn for_chunks<S: Send, R: Send>(
    n_points: usize,
    slots: &mut [S],
    pool: &Pool,
    monitor: &dyn Monitor,
    work: impl Fn(Range<usize>, &mut S) -> Result<R> + Sync + Send,
) -> Result<Vec<R>> {
    let n_chunks = n_points.div_ceil(CHUNK_POINTS);
    debug_assert_eq!(slots.len(), n_chunks);
    let block = pool.threads().max(1) * 4;
    let mut results = Vec::with_capacity(n_chunks);
    let mut start = 0;
    while start < n_chunks {
        let end = (start + block).min(n_chunks);
        let part: Vec<R> = pool.run(|| {
            slots[start..end]
                .par_iter_mut()
                .enumerate()
                .map(|(i, slot)| {
                    let c = start + i;
                    work(
                        c * CHUNK_POINTS..((c + 1) * CHUNK_POINTS).min(n_points),
                        slot,
                    )
                })
                .collect::<Result<Vec<R>>>()
        })?;
        results.extend(part);
        monitor.progress((end * CHUNK_POINTS).min(n_points), n_points)?;
        start = end;
    }
    Ok(results)
}

/// One `()` slot per chunk, for chunk loops without per-point outputs.
fn no_slots(n_points: usize) -> Vec<()> {
    vec![(); n_points.div_ceil(CHUNK_POINTS)]
}

/// Splits the per-point outputs into per-chunk slots.
fn point_slots<'s>(
    out: &'s mut PointLosses<'_>,
) -> Vec<(&'s mut [f64], &'s mut [f64], &'s mut [f64])> {
    out.ensemble
        .chunks_mut(CHUNK_POINTS)
        .zip(out.member.chunks_mut(CHUNK_POINTS))
        .zip(out.gain.chunks_mut(CHUNK_POINTS))
        .map(|((e, m), g)| (e, m, g))
        .collect()
}

fn check_shape(members: usize, n_points: usize, targets: usize) -> Result<()> {
    if members == 0 {
        return Err(Error::value(
            "members",
            "has no members (first axis is empty)",
        ));
    }
    if n_points == 0 {
        return Err(Error::value(
            "members",
            "has no points (second axis is empty)",
        ));
    }
    if targets != n_points {
        return Err(Error::value(
            "y",
            format!("has {targets} values but `members` has {n_points} points"),
        ));
    }
    Ok(())
}

fn check_outputs(out: &PointLosses<'_>, n_points: usize) -> Result<()> {
    if out.ensemble.len() != n_points || out.member.len() != n_points || out.gain.len() != n_points
    {
        return Err(Error::value(
            "out",
            format!("per-point outputs must have {n_points} values"),
        ));
    }
    Ok(())
}

fn non_finite_members() -> Error {
    Error::value(
        "members",
        "contains NaN or infinite values (or values so large their squares overflow)",
    )
}

/// Views `(members, n_points)` values as `(members, n_points, 1)` cells.
fn as_cells<T>(members: ArrayView2<'_, T>) -> ArrayView3<'_, T> {
    members.insert_axis(Axis(2))
}

/// Fills `target` with the value target of every point of the chunk.
fn value_target(
    y: ArrayView1<'_, f64>,
    points: &Range<usize>,
    target: &mut Vec<f64>,
) -> Result<()> {
    target.clear();
    target.extend(y.slice(s![points.clone()]).iter().copied());
    if target.iter().any(|v| !v.is_finite()) {
        return Err(Error::value("y", "contains NaN or infinite values"));
    }
    Ok(())
}

fn label_of(label: i64, n_classes: usize, argument: &'static str) -> Result<usize> {
    usize::try_from(label)
        .ok()
        .filter(|&l| l < n_classes)
        .ok_or_else(|| bad_label(label, n_classes, argument))
}

/// Fills `target` with the one-hot encoding (n_points × n_classes cells) of the labels.
fn one_hot_target(
    y: ArrayView1<'_, i64>,
    points: &Range<usize>,
    n_classes: usize,
    target: &mut Vec<f64>,
) -> Result<()> {
    target.clear();
    target.resize(points.len() * n_classes, 0.0);
    for (j, &label) in y.slice(s![points.clone()]).iter().enumerate() {
        target[j * n_classes + label_of(label, n_classes, "y")?] = 1.0;
    }
    Ok(())
}

/// Checks that every member's probabilities at every point of the chunk lie in [0, 1] and
/// sum to 1, within [`PROBABILITY_TOLERANCE`].
fn check_probabilities<T: Real>(cells: ArrayView2<'_, T>) -> Result<()> {
    for row in cells.rows() {
        let mut sum = 0.0;
        for &p in row {
            let p = p.to_f64();
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
    }
    Ok(())
}

/// Writes the target of every cell of a chunk of points into the buffer.
type TargetFill<'a> = dyn Fn(&Range<usize>, &mut Vec<f64>) -> Result<()> + Sync + 'a;

// -- the one-pass kernel -----------------------------------------------------------------

/// Members whose mean is the shift K of the shifted sums.
const SHIFT_MEMBERS: usize = 4;

/// Members updated together by [`shifted_block`].
const MEMBER_BLOCK: usize = 8;

/// Weighted mean of the residuals and Σ_b w_b (t_b − t̄)² of every cell of one chunk, one
/// pass over the members (the second is not yet divided by the total weight).
///
/// ```text
/// Shifted sums (the "shifted data" sums discussed by Chan, Golub & LeVeque 1983): with a
/// constant K per
/// cell and d_b = t_b − K,
///   S1 = Σ_b w_b d_b,  S2 = Σ_b w_b d_b²,  W = Σ_b w_b
///   t̄ = K + S1/W,      Σ_b w_b (t_b − t̄)² = S2 − S1²/W
/// exactly, for any K. K is the mean of the first (up to four) members, close to t̄, so S2
/// and S1²/W stay of the size of the spread itself and their difference loses no digits.
/// Per value this is a subtraction and two multiply-adds, and the target is not read at
/// all: the residual mean is t̄ − y.
/// ```
fn residual_moments<T: Real>(
    members: &ArrayView3<'_, T>,
    points: &Range<usize>,
    target: &[f64],
    weights: &MemberWeights,
    probabilities: bool,
    mean: &mut Vec<f64>,
    m2: &mut Vec<f64>,
) -> Result<()> {
    let cells = target.len();
    let m = members.len_of(Axis(0));
    let view = |b: usize| members.slice(s![b, points.clone(), ..]);
    // mean ← the shift K, m2 ← S1; S2 goes to a third buffer, then all are finished.
    let mut shift = vec![0.0; cells];
    let first = m.min(SHIFT_MEMBERS);
    for b in 0..first {
        let v = view(b);
        match v.as_slice() {
            Some(values) => shift
                .iter_mut()
                .zip(values)
                .for_each(|(k, &t)| *k += t.to_f64()),
            None => shift
                .iter_mut()
                .zip(v.iter())
                .for_each(|(k, &t)| *k += t.to_f64()),
        }
    }
    let inverse_first = 1.0 / first as f64;
    shift.iter_mut().for_each(|k| *k *= inverse_first);
    let mut s1 = vec![0.0; cells];
    let mut s2 = vec![0.0; cells];
    let uniform = weights.is_uniform();
    let mut b = 0;
    while b < m {
        // MEMBER_BLOCK contiguous members at a time: each cell's sums are loaded once per
        // block; the per-cell order of the additions (b, b+1, ...) is unchanged, so the
        // numbers are the same as one member at a time.
        if b + MEMBER_BLOCK <= m {
            let views: [_; MEMBER_BLOCK] = std::array::from_fn(|k| view(b + k));
            let slices = views.each_ref().map(|v| v.as_slice());
            if slices.iter().all(Option::is_some) {
                let rows = slices.map(|r| r.expect("checked"));
                let w: [f64; MEMBER_BLOCK] = std::array::from_fn(|k| weights.raw[b + k]);
                shifted_block(&rows, &shift, &w, uniform, &mut s1, &mut s2);
                if probabilities {
                    views
                        .iter()
                        .try_for_each(|v| check_probabilities(v.view()))?;
                }
                b += MEMBER_BLOCK;
                continue;
            }
        }
        let single = view(b);
        let w = weights.raw[b];
        let add = |((a, q), (&k, &t)): ((&mut f64, &mut f64), (&f64, &T))| {
            let d = t.to_f64() - k;
            let wd = if uniform { d } else { w * d };
            *a += wd;
            *q += wd * d;
        };
        let sums = s1.iter_mut().zip(s2.iter_mut());
        match single.as_slice() {
            Some(values) => sums.zip(shift.iter().zip(values)).for_each(add),
            None => sums.zip(shift.iter().zip(single.iter())).for_each(add),
        }
        if probabilities {
            check_probabilities(single)?;
        }
        b += 1;
    }
    let total = weights.total;
    mean.clear();
    m2.clear();
    for (((&k, &a), &q), &y) in shift.iter().zip(&s1).zip(&s2).zip(target) {
        let centre = a / total;
        mean.push(k - y + centre);
        // Clamp rounding below zero; `f64::max` would also turn a NaN into 0, so compare.
        let spread = q - a * centre;
        m2.push(if spread < 0.0 { 0.0 } else { spread });
    }
    Ok(())
}

/// Adds [`MEMBER_BLOCK`] contiguous members to the shifted sums; compiled for AVX2 when the CPU has it
/// (chosen at run time). No fused multiply-add is enabled, so every version rounds exactly
/// alike and results do not depend on the machine.
fn shifted_block<T: Real>(
    rows: &[&[T]; MEMBER_BLOCK],
    shift: &[f64],
    weight: &[f64; MEMBER_BLOCK],
    uniform: bool,
    s1: &mut [f64],
    s2: &mut [f64],
) {
    #[cfg(target_arch = "x86_64")]
    {
        if std::arch::is_x86_feature_detected!("avx2") {
            // SAFETY: the CPU supports AVX2 (checked just above).
            unsafe {
                if uniform {
                    shifted_block_avx2::<T, false>(rows, shift, weight, s1, s2);
                } else {
                    shifted_block_avx2::<T, true>(rows, shift, weight, s1, s2);
                }
            }
            return;
        }
    }
    if uniform {
        shifted_block_portable::<T, false>(rows, shift, weight, s1, s2);
    } else {
        shifted_block_portable::<T, true>(rows, shift, weight, s1, s2);
    }
}

#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2")]
fn shifted_block_avx2<T: Real, const WEIGHTED: bool>(
    rows: &[&[T]; MEMBER_BLOCK],
    shift: &[f64],
    weight: &[f64; MEMBER_BLOCK],
    s1: &mut [f64],
    s2: &mut [f64],
) {
    shifted_block_portable::<T, WEIGHTED>(rows, shift, weight, s1, s2);
}

#[inline(always)]
fn shifted_block_portable<T: Real, const WEIGHTED: bool>(
    rows: &[&[T]; MEMBER_BLOCK],
    shift: &[f64],
    weight: &[f64; MEMBER_BLOCK],
    s1: &mut [f64],
    s2: &mut [f64],
) {
    let n = shift.len();
    let (s1, s2) = (&mut s1[..n], &mut s2[..n]);
    let rows = rows.map(|r| &r[..n]);
    for j in 0..n {
        let k = shift[j];
        let (mut a, mut q) = (s1[j], s2[j]);
        for (i, row) in rows.iter().enumerate() {
            let d = row[j].to_f64() - k;
            let wd = if WEIGHTED { weight[i] * d } else { d };
            a += wd;
            q += wd * d;
        }
        s1[j] = a;
        s2[j] = q;
    }
}

/// Shared body of the squared and Brier decompositions on `(members, n_points, cells)`.
fn decompose_cells<T: Real>(
    members: ArrayView3<'_, T>,
    targets: &TargetFill<'_>,
    weights: &MemberWeights,
    probabilities: bool,
    mut out: PointLosses<'_>,
    pool: &Pool,
    monitor: &dyn Monitor,
) -> Result<LossMoments> {
    let (m, n_points, n_cells) = members.dim();
    if weights.members() != m {
        return Err(Error::value(
            "weights",
            format!(
                "has {} weights but there are {m} members",
                weights.members()
            ),
        ));
    }
    check_outputs(&out, n_points)?;
    let inverse_total = 1.0 / weights.total;
    let mut slots = point_slots(&mut out);
    let parts = for_chunks(
        n_points,
        &mut slots,
        pool,
        monitor,
        |points, (ens, mem, gain)| {
            let (mut target, mut mean, mut m2) = (Vec::new(), Vec::new(), Vec::new());
            targets(&points, &mut target)?;
            residual_moments(
                &members,
                &points,
                &target,
                weights,
                probabilities,
                &mut mean,
                &mut m2,
            )?;
            for j in 0..points.len() {
                let cells = j * n_cells..(j + 1) * n_cells;
                let e: f64 = mean[cells.clone()].iter().map(|d| d * d).sum();
                let a: f64 = m2[cells].iter().sum::<f64>() * inverse_total;
                let total = e + a;
                if !total.is_finite() {
                    return Err(non_finite_members());
                }
                ens[j] = e;
                gain[j] = a;
                mem[j] = total;
            }
            Ok(LossMoments::of_chunk(ens, mem, gain))
        },
    )?;
    Ok(parts
        .iter()
        .fold(LossMoments::default(), |acc, p| acc.merge(p)))
}

/// Ambiguity decomposition of the squared loss of value predictions.
///
/// ```text
/// Krogh & Vedelsby (1995), eq. (5)-(6). With weights w_b ≥ 0, Σ_b w_b = 1 and the
/// combined prediction f = Σ_b w_b t_b, at every point
///   (f − y)²  =  Σ_b w_b (t_b − y)²  −  Σ_b w_b (t_b − f)²
///   ensemble  =  mean member loss     −  ambiguity
/// exactly (expand (t_b − y) = (t_b − f) + (f − y); the cross term Σ_b w_b (t_b − f) is 0).
/// Computed in one pass over the members per point: shifted sums (see `residual_moments`)
/// give the weighted mean t̄ = f and M2 = Σ_b w_b (t_b − f)², and then
///   ensemble = (f − y)²,  ambiguity = M2 / Σ_b w_b,  member loss = ensemble + ambiguity,
/// so the identity holds to rounding and the ambiguity suffers no cancellation.
/// ```
///
/// Returns the moments of the three per-point losses, written into `out`.
///
/// # Errors
/// `members` (no members/points, NaN or ±inf), `y` (length, NaN or ±inf), `weights`.
pub fn decompose_values<T: Real>(
    members: ArrayView2<'_, T>,
    y: ArrayView1<'_, f64>,
    weights: &MemberWeights,
    out: PointLosses<'_>,
    pool: &Pool,
    monitor: &dyn Monitor,
) -> Result<LossMoments> {
    let (m, n) = members.dim();
    check_shape(m, n, y.len())?;
    let targets = |points: &Range<usize>, target: &mut Vec<f64>| value_target(y, points, target);
    decompose_cells(
        as_cells(members),
        &targets,
        weights,
        false,
        out,
        pool,
        monitor,
    )
}

/// Ambiguity decomposition of the multi-class Brier score of probability predictions.
///
/// ```text
/// Brier (1950): BS(p, y) = Σ_c (p_c − 1[y = c])². It is a squared loss on the one-hot
/// target, so the Krogh & Vedelsby identity holds class by class and summed:
///   Σ_c (p̄_c − 1[y=c])²  =  Σ_b w_b Σ_c (p_bc − 1[y=c])²  −  Σ_b w_b Σ_c (p_bc − p̄_c)²
/// with the soft vote p̄_c = Σ_b w_b p_bc.
/// ```
///
/// # Errors
/// As [`decompose_values`]; `members` also when probabilities leave [0, 1] or do not sum
/// to 1 over the classes (within [`PROBABILITY_TOLERANCE`]); `y` when a label is outside
/// 0..n_classes.
pub fn decompose_probabilities<T: Real>(
    members: ArrayView3<'_, T>,
    y: ArrayView1<'_, i64>,
    weights: &MemberWeights,
    out: PointLosses<'_>,
    pool: &Pool,
    monitor: &dyn Monitor,
) -> Result<LossMoments> {
    let (m, n, n_classes) = members.dim();
    check_shape(m, n, y.len())?;
    if n_classes == 0 {
        return Err(Error::value(
            "members",
            "has no classes (third axis is empty)",
        ));
    }
    let targets =
        |points: &Range<usize>, target: &mut Vec<f64>| one_hot_target(y, points, n_classes, target);
    decompose_cells(members, &targets, weights, true, out, pool, monitor)
}

// -- votes --------------------------------------------------------------------------------

/// Adds every member's vote for the points of one chunk: `totals` (points × classes) gets
/// the vote weight, `winner` tracks the majority class with the lowest-index tie rule, and
/// `wrong` (if given with the labels `y`) the weight of members that miss the label.
///
/// ```text
/// Keeping the winner while votes arrive: the winner w has the largest total and the
/// lowest index among equal totals. After a vote for class c ≠ w, c becomes the winner iff
/// total_c > total_w, or total_c = total_w and c < w (every other class tied with w has an
/// index above w), so the rule costs O(1) per vote.
/// ```
fn vote_chunk(
    members: &ArrayView2<'_, i64>,
    order: &mut dyn Iterator<Item = usize>,
    points: &Range<usize>,
    n_classes: usize,
    weights: &[f64],
    totals: &mut [f64],
    winner: &mut [usize],
) -> Result<()> {
    let len = points.len();
    let (totals, winner) = (&mut totals[..len * n_classes], &mut winner[..len]);
    for b in order {
        let w = weights[b];
        let row = members.slice(s![b, points.clone()]);
        let mut vote = |j: usize, label: i64| -> Result<()> {
            let c = usize::try_from(label)
                .ok()
                .filter(|&c| c < n_classes)
                .ok_or_else(|| bad_label(label, n_classes, "members"))?;
            let current = winner[j];
            let cell = &mut totals[j * n_classes..(j + 1) * n_classes];
            cell[c] += w;
            let (total, best) = (cell[c], cell[current]);
            // Branch-free select: votes arrive in random order, so a branch would mispredict.
            winner[j] = if (total > best) | ((total == best) & (c < current)) {
                c
            } else {
                current
            };
            Ok(())
        };
        match row.as_slice() {
            Some(labels) => labels
                .iter()
                .enumerate()
                .try_for_each(|(j, &l)| vote(j, l))?,
            None => row.iter().enumerate().try_for_each(|(j, &l)| vote(j, l))?,
        }
    }
    Ok(())
}

#[cold]
fn bad_label(label: i64, n_classes: usize, argument: &'static str) -> Error {
    Error::value(
        argument,
        format!("label {label} is outside 0..{n_classes} (labels are class indices)"),
    )
}

fn check_vote_classes(n_classes: usize) -> Result<()> {
    if n_classes == 0 {
        return Err(Error::value("n_classes", "must be at least 1"));
    }
    if n_classes > MAX_VOTE_CLASSES {
        return Err(Error::value(
            "n_classes",
            format!(
                "{n_classes} classes (largest label + 1) exceed the {MAX_VOTE_CLASSES} a vote \
                 supports; labels must be class indices 0..n_classes-1"
            ),
        ));
    }
    Ok(())
}

fn largest_label(labels: impl Iterator<Item = i64>) -> i64 {
    labels.fold(-1, i64::max)
}

/// The number of classes implied by labels: largest label + 1.
pub fn classes_in(members: ArrayView2<'_, i64>, y: Option<ArrayView1<'_, i64>>) -> usize {
    let top = largest_label(members.iter().copied())
        .max(y.map_or(-1, |y| largest_label(y.iter().copied())));
    usize::try_from(top + 1).unwrap_or(0)
}

/// Majority vote of integer labels with vote fractions.
///
/// ```text
/// vote_j       = argmax_c Σ_b w_b 1[t_bj = c]; among tied classes the lowest index wins
///                (a deterministic rule; weighted totals are compared as f64 sums, which
///                are exact for equal weights up to 2^53 members)
/// fraction_jc  = Σ_b w_b 1[t_bj = c] / Σ_b w_b   (a class-probability estimate)
/// ```
///
/// # Errors
/// `members` (empty, a label outside 0..n_classes), `n_classes` (0), `weights`, `out`.
pub fn majority_vote(
    members: ArrayView2<'_, i64>,
    n_classes: usize,
    weights: &MemberWeights,
    labels_out: &mut [i64],
    fractions_out: &mut [f64],
    pool: &Pool,
    monitor: &dyn Monitor,
) -> Result<()> {
    let (m, n) = members.dim();
    check_shape(m, n, n)?;
    check_vote_classes(n_classes)?;
    if weights.members() != m {
        return Err(Error::value(
            "weights",
            format!(
                "has {} weights but there are {m} members",
                weights.members()
            ),
        ));
    }
    if labels_out.len() != n || fractions_out.len() != n * n_classes {
        return Err(Error::value(
            "out",
            "outputs do not match the points and classes",
        ));
    }
    let mut slots: Vec<(&mut [i64], &mut [f64])> = labels_out
        .chunks_mut(CHUNK_POINTS)
        .zip(fractions_out.chunks_mut(CHUNK_POINTS * n_classes))
        .collect();
    let inverse_total = 1.0 / weights.total;
    for_chunks(
        n,
        &mut slots,
        pool,
        monitor,
        |points, (labels, fractions)| {
            let mut winner = vec![0usize; points.len()];
            vote_chunk(
                &members,
                &mut (0..m),
                &points,
                n_classes,
                &weights.raw,
                fractions,
                &mut winner,
            )?;
            fractions.iter_mut().for_each(|f| *f *= inverse_total);
            labels
                .iter_mut()
                .zip(&winner)
                .for_each(|(l, &w)| *l = w as i64);
            Ok(())
        },
    )?;
    Ok(())
}

/// Majority-vote error rate against the mean member error rate.
///
/// ```text
/// ensemble_j = 1[vote_j ≠ y_j]                 (vote as in [`majority_vote`])
/// member_j   = Σ_b w_b 1[t_bj ≠ y_j] / Σ_b w_b
/// gain_j     = member_j − ensemble_j           (the "vote gain")
/// ```
/// No identity ties the vote gain to a spread of the members, as the ambiguity does for
/// squared losses: it can be negative (a vote can be worse than its average member).
///
/// # Errors
/// `members`, `y` (lengths, labels outside 0..n_classes), `weights`.
pub fn decompose_labels(
    members: ArrayView2<'_, i64>,
    y: ArrayView1<'_, i64>,
    n_classes: usize,
    weights: &MemberWeights,
    mut out: PointLosses<'_>,
    pool: &Pool,
    monitor: &dyn Monitor,
) -> Result<LossMoments> {
    let (m, n) = members.dim();
    check_shape(m, n, y.len())?;
    check_vote_classes(n_classes)?;
    if weights.members() != m {
        return Err(Error::value(
            "weights",
            format!(
                "has {} weights but there are {m} members",
                weights.members()
            ),
        ));
    }
    check_outputs(&out, n)?;
    let inverse_total = 1.0 / weights.total;
    let mut slots = point_slots(&mut out);
    let parts = for_chunks(n, &mut slots, pool, monitor, |points, (ens, mem, gain)| {
        let labels: Vec<usize> = y
            .slice(s![points.clone()])
            .iter()
            .map(|&l| label_of(l, n_classes, "y"))
            .collect::<Result<_>>()?;
        let mut totals = vec![0.0; points.len() * n_classes];
        let mut winner = vec![0usize; points.len()];
        vote_chunk(
            &members,
            &mut (0..m),
            &points,
            n_classes,
            &weights.raw,
            &mut totals,
            &mut winner,
        )?;
        for (j, &label) in labels.iter().enumerate() {
            let right = totals[j * n_classes + label] * inverse_total;
            ens[j] = f64::from(u8::from(winner[j] != label));
            mem[j] = (1.0 - right).max(0.0);
            gain[j] = mem[j] - ens[j];
        }
        Ok(LossMoments::of_chunk(ens, mem, gain))
    })?;
    Ok(parts
        .iter()
        .fold(LossMoments::default(), |acc, p| acc.merge(p)))
}

// -- aggregation of floats ---------------------------------------------------------------

/// Weighted mean of value predictions (`out`: n_points) or soft vote of probabilities
/// (`out`: n_points × n_classes, row-major): out = Σ_b w_b t_b / Σ_b w_b per cell.
///
/// # Errors
/// `members` (empty, NaN/±inf, probabilities off the simplex when `probabilities`),
/// `weights`, `out`.
pub fn mean_cells<T: Real>(
    members: ArrayView3<'_, T>,
    probabilities: bool,
    weights: &MemberWeights,
    out: &mut [f64],
    pool: &Pool,
    monitor: &dyn Monitor,
) -> Result<()> {
    let (m, n, n_cells) = members.dim();
    check_shape(m, n, n)?;
    if n_cells == 0 {
        return Err(Error::value(
            "members",
            "has no classes (third axis is empty)",
        ));
    }
    if weights.members() != m {
        return Err(Error::value(
            "weights",
            format!(
                "has {} weights but there are {m} members",
                weights.members()
            ),
        ));
    }
    if out.len() != n * n_cells {
        return Err(Error::value(
            "out",
            "output does not match the points and classes",
        ));
    }
    let inverse_total = 1.0 / weights.total;
    let mut slots: Vec<&mut [f64]> = out.chunks_mut(CHUNK_POINTS * n_cells).collect();
    for_chunks(n, &mut slots, pool, monitor, |points, sums| {
        for b in 0..m {
            let view = members.slice(s![b, points.clone(), ..]);
            let w = weights.raw[b];
            let add = |(s, &t): (&mut f64, &T)| *s += w * t.to_f64();
            match view.as_slice() {
                Some(values) => sums.iter_mut().zip(values).for_each(add),
                None => sums.iter_mut().zip(view.iter()).for_each(add),
            }
            if probabilities {
                check_probabilities(view)?;
            }
        }
        for s in sums.iter_mut() {
            *s *= inverse_total;
            if !s.is_finite() {
                return Err(non_finite_members());
            }
        }
        Ok(())
    })?;
    Ok(())
}

/// [`mean_cells`] for `(members, n_points)` value predictions.
///
/// # Errors
/// As [`mean_cells`].
pub fn mean_values<T: Real>(
    members: ArrayView2<'_, T>,
    weights: &MemberWeights,
    out: &mut [f64],
    pool: &Pool,
    monitor: &dyn Monitor,
) -> Result<()> {
    mean_cells(as_cells(members), false, weights, out, pool, monitor)
}

// -- decomposition stream ----------------------------------------------------------------

/// A decomposition fed chunk by chunk of points: the member count (and class count for
/// probabilities) is fixed by the first chunk; each chunk's moments are merged in order.
#[derive(Debug, Clone)]
pub struct DecompositionState {
    loss: Loss,
    weights: Option<Vec<f64>>,
    checked: Option<MemberWeights>,
    n_classes: Option<usize>,
    sums: LossMoments,
}

impl DecompositionState {
    /// An empty state for `loss` with optional member `weights` (checked at the first chunk,
    /// when the member count is known).
    pub fn new(loss: Loss, weights: Option<Vec<f64>>) -> Self {
        DecompositionState {
            loss,
            weights,
            checked: None,
            n_classes: None,
            sums: LossMoments::default(),
        }
    }

    /// The loss.
    pub fn loss(&self) -> Loss {
        self.loss
    }

    /// Moments over all points seen so far.
    pub fn moments(&self) -> LossMoments {
        self.sums
    }

    /// Number of members (after the first chunk).
    pub fn members(&self) -> Option<usize> {
        self.checked.as_ref().map(MemberWeights::members)
    }

    fn weights_for(&mut self, members: usize) -> Result<&MemberWeights> {
        if let Some(known) = &self.checked {
            if known.members() != members {
                return Err(Error::value(
                    "members",
                    format!(
                        "this chunk has {members} members but earlier chunks had {}",
                        known.members()
                    ),
                ));
            }
        } else {
            self.checked = Some(match &self.weights {
                Some(w) => MemberWeights::new(w, members)?,
                None => MemberWeights::uniform(members),
            });
        }
        Ok(self.checked.as_ref().expect("set above"))
    }

    fn require(&self, wanted: Loss) -> Result<()> {
        if self.loss != wanted {
            return Err(Error::value(
                "members",
                format!(
                    "these predictions do not fit loss {:?} (squared: float (members, points); \
                     brier: float (members, points, classes); error_rate: integer labels)",
                    self.loss.name()
                ),
            ));
        }
        Ok(())
    }

    /// Adds a chunk of value predictions (loss `squared`).
    ///
    /// # Errors
    /// As [`decompose_values`], plus `members` when the member count changes.
    pub fn update_values<T: Real>(
        &mut self,
        members: ArrayView2<'_, T>,
        y: ArrayView1<'_, f64>,
        out: PointLosses<'_>,
        pool: &Pool,
        monitor: &dyn Monitor,
    ) -> Result<()> {
        self.require(Loss::Squared)?;
        let weights = self.weights_for(members.nrows())?.clone();
        let part = decompose_values(members, y, &weights, out, pool, monitor)?;
        self.sums = self.sums.merge(&part);
        Ok(())
    }

    /// Adds a chunk of probability predictions (loss `brier`).
    ///
    /// # Errors
    /// As [`decompose_probabilities`], plus `members` when the member or class count changes.
    pub fn update_probabilities<T: Real>(
        &mut self,
        members: ArrayView3<'_, T>,
        y: ArrayView1<'_, i64>,
        out: PointLosses<'_>,
        pool: &Pool,
        monitor: &dyn Monitor,
    ) -> Result<()> {
        self.require(Loss::Brier)?;
        self.fix_classes(members.len_of(Axis(2)))?;
        let weights = self.weights_for(members.len_of(Axis(0)))?.clone();
        let part = decompose_probabilities(members, y, &weights, out, pool, monitor)?;
        self.sums = self.sums.merge(&part);
        Ok(())
    }

    /// Adds a chunk of label predictions (loss `error_rate`); `n_classes` only sizes the
    /// vote tables, so it may differ between chunks.
    ///
    /// # Errors
    /// As [`decompose_labels`], plus `members` when the member count changes.
    pub fn update_labels(
        &mut self,
        members: ArrayView2<'_, i64>,
        y: ArrayView1<'_, i64>,
        n_classes: usize,
        out: PointLosses<'_>,
        pool: &Pool,
        monitor: &dyn Monitor,
    ) -> Result<()> {
        self.require(Loss::ErrorRate)?;
        let weights = self.weights_for(members.nrows())?.clone();
        let part = decompose_labels(members, y, n_classes, &weights, out, pool, monitor)?;
        self.sums = self.sums.merge(&part);
        Ok(())
    }

    fn fix_classes(&mut self, n_classes: usize) -> Result<()> {
        match self.n_classes {
            Some(k) if k != n_classes => Err(Error::value(
                "members",
                format!("this chunk has {n_classes} classes but earlier chunks had {k}"),
            )),
            _ => {
                self.n_classes = Some(n_classes);
                Ok(())
            }
        }
    }
}

// -- ensemble-size curve -----------------------------------------------------------------

/// Mergeable state of the ensemble-size curve over the points seen so far.
///
/// ```text
/// For a random order π_o of the members (o = 1..orders) and size k, the loss of the
/// ensemble of the first k members is
///   L_o(k) = (1/n) Σ_j loss(t̄_{o,k,j}, y_j),  t̄_{o,k,j} = (1/k) Σ_{i ≤ k} t_{π_o(i), j}
/// (squared: (t̄ − y)²; Brier: Σ_c (p̄_c − 1[y=c])²; error rate: 1[majority vote ≠ y]).
/// The curve is the mean of L_o(k) over orders, with standard error sd_o / √orders.
///
/// The finite-ensemble law (squared and Brier). Members are fit on independent resamples,
/// so given the data their predictions at a point are i.i.d. draws with mean μ and
/// variance σ². For k such draws, E t̄_k = μ and Var t̄_k = σ²/k, hence
///   E[(t̄_k − y)²] = (μ − y)² + σ²/k,
/// and averaged over points, E[loss(k)] = loss(∞) + W/k with W = mean over points of σ²
/// (Brier: summed over classes). Estimates from the M members at hand: W = mean over points
/// of the across-member variance s² (ddof 1), loss(∞) = loss(M) − W/M ("infinite_loss"),
/// law(k) = loss(∞) + W/k; W/k ≤ tolerance · loss(∞) first holds at k = ⌈W / (tolerance ·
/// loss(∞))⌉ ("members needed").
///
/// What the order-averaged curve estimates exactly: the first k members of a uniformly
/// random order are a simple random sample of k of the M members, drawn without
/// replacement. For such a sample (Cochran 1977, Theorem 2.2) the sample mean has mean m̄
/// (the mean of all M) and variance (s²/k)(1 − k/M), so per point
///   E_subsets[(t̄_k − y)²] = (m̄ − y)² + s² (1/k − 1/M)
/// and averaged over points
///   E_subsets[L(k)] = loss(M) + W (1/k − 1/M)  =  infinite_loss + W/k  =  law(k).
/// The plug-in law therefore equals the exact finite-population expectation of the
/// empirical curve at every k (both are loss(M) at k = M and the mean member loss at k = 1),
/// which is why it can be compared with the empirical curve within its standard errors.
/// ```
#[derive(Debug, Clone)]
pub struct SizeCurveState {
    loss: Loss,
    members: usize,
    n_classes: Option<usize>,
    sizes: Vec<usize>,
    orders: Vec<Vec<usize>>,
    sums: Vec<f64>,
    n_points: u64,
    full: Moments,
    spread: Moments,
}

/// The finished size curve.
#[derive(Debug, Clone, PartialEq)]
pub struct SizeCurve {
    /// Ensemble sizes k.
    pub sizes: Vec<usize>,
    /// Loss of every order at every size, orders × sizes (row-major).
    pub per_order: Vec<f64>,
    /// Mean loss over orders at every size.
    pub curve: Vec<f64>,
    /// Standard error of the mean over orders (NaN for a single order).
    pub standard_error: Vec<f64>,
    /// Loss of the ensemble of all M members.
    pub full_loss: f64,
    /// W: mean over points of the across-member variance, ddof 1 (NaN for error rates and
    /// for M = 1).
    pub spread: f64,
    /// Number of points.
    pub n_points: u64,
    /// Number of members M.
    pub members: usize,
}

impl SizeCurve {
    /// loss(∞) = loss(M) − W/M.
    pub fn infinite_loss(&self) -> f64 {
        self.full_loss - self.spread / self.members as f64
    }

    /// law(k) = loss(∞) + W/k = loss(M) + W (1/k − 1/M).
    pub fn law(&self, k: f64) -> f64 {
        self.infinite_loss() + self.spread / k
    }
}

impl SizeCurveState {
    /// A state for `members` members, sizes (sorted, distinct, in 1..=members) and
    /// `orders` random member orders drawn from `seed`: order o uses stream o of
    /// [`MemberStreams`] and a Fisher–Yates shuffle with [`crate::random::Draws::below`].
    ///
    /// # Errors
    /// `members` (0), `sizes` (empty, unsorted, repeated, outside 1..=members), `orders` (0).
    pub fn new(
        loss: Loss,
        members: usize,
        sizes: Vec<usize>,
        orders: usize,
        seed: u64,
    ) -> Result<Self> {
        if members == 0 {
            return Err(Error::value(
                "members",
                "has no members (first axis is empty)",
            ));
        }
        if orders == 0 {
            return Err(Error::value("orders", "must be at least 1"));
        }
        if sizes.is_empty() {
            return Err(Error::value("sizes", "must contain at least one size"));
        }
        if sizes.windows(2).any(|w| w[0] >= w[1]) {
            return Err(Error::value("sizes", "must be strictly increasing"));
        }
        if sizes[0] == 0 || sizes[sizes.len() - 1] > members {
            return Err(Error::value(
                "sizes",
                format!("every size must lie in 1..={members} (the number of members)"),
            ));
        }
        let mut streams = MemberStreams::new(seed);
        let permutations = streams
            .take(orders)
            .into_iter()
            .map(|mut draws| {
                let mut order: Vec<usize> = (0..members).collect();
                for i in (1..members).rev() {
                    order.swap(i, draws.below(i + 1));
                }
                order
            })
            .collect();
        Ok(SizeCurveState {
            loss,
            members,
            n_classes: None,
            sums: vec![0.0; orders * sizes.len()],
            sizes,
            orders: permutations,
            n_points: 0,
            full: Moments::default(),
            spread: Moments::default(),
        })
    }

    /// The member orders, one permutation of 0..members per order.
    pub fn orders(&self) -> &[Vec<usize>] {
        &self.orders
    }

    fn check_members(&self, members: usize, wanted: Loss) -> Result<()> {
        if self.loss != wanted {
            return Err(Error::value(
                "members",
                format!("these predictions do not fit loss {:?}", self.loss.name()),
            ));
        }
        if members != self.members {
            return Err(Error::value(
                "members",
                format!(
                    "has {members} members but the curve was set up for {}",
                    self.members
                ),
            ));
        }
        Ok(())
    }

    fn merge_parts(&mut self, parts: Vec<CurvePart>) {
        for part in parts {
            self.sums
                .iter_mut()
                .zip(&part.sums)
                .for_each(|(s, p)| *s += p);
            self.n_points += part.n_points;
            self.full = self.full.merge(&part.full);
            self.spread = self.spread.merge(&part.spread);
        }
    }

    fn update_cells<T: Real>(
        &mut self,
        members: ArrayView3<'_, T>,
        targets: &TargetFill<'_>,
        probabilities: bool,
        pool: &Pool,
        monitor: &dyn Monitor,
    ) -> Result<()> {
        let (m, n, n_cells) = members.dim();
        let uniform = MemberWeights::uniform(m);
        let (sizes, orders) = (&self.sizes, &self.orders);
        let spread_divisor = if m > 1 { (m - 1) as f64 } else { f64::NAN };
        let parts = for_chunks(n, &mut no_slots(n), pool, monitor, |points, ()| {
            let (mut target, mut mean, mut m2) = (Vec::new(), Vec::new(), Vec::new());
            targets(&points, &mut target)?;
            residual_moments(
                &members,
                &points,
                &target,
                &uniform,
                probabilities,
                &mut mean,
                &mut m2,
            )?;
            let len = points.len();
            let mut full = Vec::with_capacity(len);
            let mut spread = Vec::with_capacity(len);
            for j in 0..len {
                let cells = j * n_cells..(j + 1) * n_cells;
                let e: f64 = mean[cells.clone()].iter().map(|d| d * d).sum();
                let s: f64 = m2[cells].iter().sum();
                if !(e + s).is_finite() {
                    return Err(non_finite_members());
                }
                full.push(e);
                spread.push(s / spread_divisor);
            }
            let mut sums = vec![0.0; orders.len() * sizes.len()];
            let mut running = vec![0.0; target.len()];
            for (o, order) in orders.iter().enumerate() {
                running.fill(0.0);
                let mut next = 0;
                for (i, &b) in order.iter().enumerate() {
                    let view = members.slice(s![b, points.clone(), ..]);
                    match view.as_slice() {
                        Some(values) => running
                            .iter_mut()
                            .zip(values)
                            .for_each(|(s, &t)| *s += t.to_f64()),
                        None => running
                            .iter_mut()
                            .zip(view.iter())
                            .for_each(|(s, &t)| *s += t.to_f64()),
                    }
                    if i + 1 == sizes[next] {
                        let inverse = 1.0 / sizes[next] as f64;
                        sums[o * sizes.len() + next] = running
                            .iter()
                            .zip(&target)
                            .map(|(s, y)| (s * inverse - y) * (s * inverse - y))
                            .sum();
                        next += 1;
                        if next == sizes.len() {
                            break;
                        }
                    }
                }
            }
            Ok(CurvePart {
                sums,
                n_points: len as u64,
                full: Moments::of_slice(&full),
                spread: Moments::of_slice(&spread),
            })
        })?;
        self.merge_parts(parts);
        Ok(())
    }

    /// Adds a chunk of value predictions (loss `squared`).
    ///
    /// # Errors
    /// `members` (member count, NaN/±inf), `y` (length, NaN/±inf).
    pub fn update_values<T: Real>(
        &mut self,
        members: ArrayView2<'_, T>,
        y: ArrayView1<'_, f64>,
        pool: &Pool,
        monitor: &dyn Monitor,
    ) -> Result<()> {
        let (m, n) = members.dim();
        check_shape(m, n, y.len())?;
        self.check_members(m, Loss::Squared)?;
        let targets =
            |points: &Range<usize>, target: &mut Vec<f64>| value_target(y, points, target);
        self.update_cells(as_cells(members), &targets, false, pool, monitor)
    }

    /// Adds a chunk of probability predictions (loss `brier`).
    ///
    /// # Errors
    /// `members` (member/class count, probabilities off the simplex), `y` (labels).
    pub fn update_probabilities<T: Real>(
        &mut self,
        members: ArrayView3<'_, T>,
        y: ArrayView1<'_, i64>,
        pool: &Pool,
        monitor: &dyn Monitor,
    ) -> Result<()> {
        let (m, n, n_classes) = members.dim();
        check_shape(m, n, y.len())?;
        self.check_members(m, Loss::Brier)?;
        if n_classes == 0 {
            return Err(Error::value(
                "members",
                "has no classes (third axis is empty)",
            ));
        }
        match self.n_classes {
            Some(k) if k != n_classes => {
                return Err(Error::value(
                    "members",
                    format!("this chunk has {n_classes} classes but earlier chunks had {k}"),
                ))
            }
            _ => self.n_classes = Some(n_classes),
        }
        let targets = |points: &Range<usize>, target: &mut Vec<f64>| {
            one_hot_target(y, points, n_classes, target)
        };
        self.update_cells(members, &targets, true, pool, monitor)
    }

    /// Adds a chunk of label predictions (loss `error_rate`, majority vote with the
    /// lowest-index tie rule at every size).
    ///
    /// # Errors
    /// `members` (member count, labels outside 0..n_classes), `y` (labels).
    pub fn update_labels(
        &mut self,
        members: ArrayView2<'_, i64>,
        y: ArrayView1<'_, i64>,
        n_classes: usize,
        pool: &Pool,
        monitor: &dyn Monitor,
    ) -> Result<()> {
        let (m, n) = members.dim();
        check_shape(m, n, y.len())?;
        self.check_members(m, Loss::ErrorRate)?;
        check_vote_classes(n_classes)?;
        let (sizes, orders) = (&self.sizes, &self.orders);
        let ones = vec![1.0; m];
        let parts = for_chunks(n, &mut no_slots(n), pool, monitor, |points, ()| {
            let len = points.len();
            let labels: Vec<usize> = y
                .slice(s![points.clone()])
                .iter()
                .map(|&l| label_of(l, n_classes, "y"))
                .collect::<Result<_>>()?;
            let errors = |winner: &[usize]| {
                winner.iter().zip(&labels).filter(|(w, l)| w != l).count() as f64
            };
            let mut totals = vec![0.0; len * n_classes];
            let mut winner = vec![0usize; len];
            vote_chunk(
                &members,
                &mut (0..m),
                &points,
                n_classes,
                &ones,
                &mut totals,
                &mut winner,
            )?;
            let full: Vec<f64> = winner
                .iter()
                .zip(&labels)
                .map(|(w, l)| f64::from(u8::from(w != l)))
                .collect();
            let mut sums = vec![0.0; orders.len() * sizes.len()];
            for (o, order) in orders.iter().enumerate() {
                totals.fill(0.0);
                winner.fill(0);
                let mut done = 0;
                for (next, &k) in sizes.iter().enumerate() {
                    vote_chunk(
                        &members,
                        &mut order[done..k].iter().copied(),
                        &points,
                        n_classes,
                        &ones,
                        &mut totals,
                        &mut winner,
                    )?;
                    done = k;
                    sums[o * sizes.len() + next] = errors(&winner);
                }
            }
            Ok(CurvePart {
                sums,
                n_points: len as u64,
                full: Moments::of_slice(&full),
                spread: Moments::default(),
            })
        })?;
        self.merge_parts(parts);
        Ok(())
    }

    /// Number of points seen so far.
    pub fn n_points(&self) -> u64 {
        self.n_points
    }

    /// The curve over all points seen so far.
    ///
    /// # Errors
    /// `members` when no points were added.
    pub fn finish(&self) -> Result<SizeCurve> {
        if self.n_points == 0 {
            return Err(Error::value("members", "no points were added"));
        }
        let n = self.n_points as f64;
        let n_sizes = self.sizes.len();
        let per_order: Vec<f64> = self.sums.iter().map(|s| s / n).collect();
        let by_size: Vec<Moments> = (0..n_sizes)
            .map(|k| {
                let mut moments = Moments::default();
                (0..self.orders.len()).for_each(|o| moments.push(per_order[o * n_sizes + k]));
                moments
            })
            .collect();
        let orders = self.orders.len() as f64;
        Ok(SizeCurve {
            sizes: self.sizes.clone(),
            curve: by_size.iter().map(Moments::mean).collect(),
            standard_error: by_size
                .iter()
                .map(|m| (m.variance(1) / orders).sqrt())
                .collect(),
            per_order,
            full_loss: self.full.mean(),
            spread: if self.loss == Loss::ErrorRate {
                f64::NAN
            } else {
                self.spread.mean()
            },
            n_points: self.n_points,
            members: self.members,
        })
    }
}

struct CurvePart {
    sums: Vec<f64>,
    n_points: u64,
    full: Moments,
    spread: Moments,
}

// -- residual correlation ----------------------------------------------------------------

/// Residual spread and correlation of the members.
#[derive(Debug, Clone, PartialEq)]
pub struct ResidualCorrelation {
    /// Variance (ddof 1) across points of every member's residual r_b = t_b − y.
    pub member_variance: Vec<f64>,
    /// Mean of `member_variance` over members.
    pub mean_variance: f64,
    /// Mean over pairs a ≠ b of the residual covariance (ddof 1); NaN for M = 1.
    pub mean_covariance: f64,
    /// Mean over pairs of non-constant members of the residual correlation; NaN when fewer
    /// than two members have non-constant residuals.
    pub mean_correlation: f64,
    /// Members whose residuals are constant across points (correlation undefined).
    pub constant_members: Vec<usize>,
}

/// Mean pairwise covariance and correlation of member residuals without the M × M matrix.
///
/// ```text
/// r_bj = t_bj − y_j; μ_b, s_b² the mean and variance (ddof 1) of r_b across points.
/// Variance of a sum: Var(Σ_b x_b) = Σ_b Var x_b + Σ_{a≠b} Cov(x_a, x_b). Hence, with
///   v_j = Σ_b (r_bj − μ_b)                 Σ_{a≠b} Cov(r_a, r_b) = Var(v) − Σ_b s_b²
///   u_j = Σ_{b: s_b>0} (r_bj − μ_b) / s_b  Σ_{a≠b} corr(r_a, r_b) = Var(u) − K
/// (K members with s_b > 0; standardised residuals have variance 1), and the means over
/// pairs divide by M(M − 1) and K(K − 1). Two passes over the members, O(M · n) work,
/// O(n) memory. Members with constant residuals have no correlation and are left out of
/// the mean correlation (listed in `constant_members`).
/// ```
///
/// # Errors
/// `members` (empty, NaN/±inf), `y` (length, NaN/±inf).
pub fn residual_correlation<T: Real>(
    members: ArrayView2<'_, T>,
    y: ArrayView1<'_, f64>,
    pool: &Pool,
    monitor: &dyn Monitor,
) -> Result<ResidualCorrelation> {
    let (m, n) = members.dim();
    check_shape(m, n, y.len())?;
    let residuals = |b: usize, points: &Range<usize>, target: &[f64], out: &mut Vec<f64>| {
        out.clear();
        out.extend(
            members
                .slice(s![b, points.clone()])
                .iter()
                .zip(target)
                .map(|(&t, &y)| t.to_f64() - y),
        );
    };
    // Pass 1: per-member moments of the residual, merged over chunks in order.
    let parts = for_chunks(n, &mut no_slots(n), pool, monitor, |points, ()| {
        let (mut target, mut r) = (Vec::new(), Vec::new());
        value_target(y, &points, &mut target)?;
        (0..m)
            .map(|b| {
                residuals(b, &points, &target, &mut r);
                let moments = Moments::of_slice(&r);
                if moments.variance(0).is_finite() {
                    Ok(moments)
                } else {
                    Err(non_finite_members())
                }
            })
            .collect::<Result<Vec<Moments>>>()
    })?;
    let per_member: Vec<Moments> = (0..m)
        .map(|b| {
            parts
                .iter()
                .fold(Moments::default(), |acc, p| acc.merge(&p[b]))
        })
        .collect();
    let means: Vec<f64> = per_member.iter().map(Moments::mean).collect();
    let variance: Vec<f64> = per_member.iter().map(|p| p.variance(1)).collect();
    let target = Moments::of_slice(&y.iter().copied().collect::<Vec<f64>>());
    let target_rms = (target.variance(0) + target.mean() * target.mean()).sqrt();
    let constant: Vec<bool> = per_member
        .iter()
        .map(|p| is_constant(p, target_rms))
        .collect();
    let scale: Vec<f64> = variance
        .iter()
        .zip(&constant)
        .map(|(&v, &c)| if c { 0.0 } else { 1.0 / v.sqrt() })
        .collect();
    // Pass 2: moments of the plain and standardised sums across members.
    let sums = for_chunks(n, &mut no_slots(n), pool, monitor, |points, ()| {
        let (mut target, mut r) = (Vec::new(), Vec::new());
        value_target(y, &points, &mut target)?;
        let mut plain = vec![0.0; points.len()];
        let mut standard = vec![0.0; points.len()];
        for b in 0..m {
            residuals(b, &points, &target, &mut r);
            for ((p, s), &x) in plain.iter_mut().zip(standard.iter_mut()).zip(&r) {
                let d = x - means[b];
                *p += d;
                *s += d * scale[b];
            }
        }
        Ok((Moments::of_slice(&plain), Moments::of_slice(&standard)))
    })?;
    let (plain, standard) = sums.iter().fold(
        (Moments::default(), Moments::default()),
        |(p, s), (a, b)| (p.merge(a), s.merge(b)),
    );
    let constant_members: Vec<usize> = (0..m).filter(|&b| constant[b]).collect();
    let k = (m - constant_members.len()) as f64;
    let pairs = (m as f64) * (m as f64 - 1.0);
    let mean_covariance = if m > 1 {
        (plain.variance(1) - variance.iter().sum::<f64>()) / pairs
    } else {
        f64::NAN
    };
    let mean_correlation = if k >= 2.0 {
        (standard.variance(1) - k) / (k * (k - 1.0))
    } else {
        f64::NAN
    };
    Ok(ResidualCorrelation {
        mean_variance: variance.iter().sum::<f64>() / m as f64,
        member_variance: variance,
        mean_covariance,
        mean_correlation,
        constant_members,
    })
}

/// A residual is constant when its spread is within rounding of the values it came from:
/// s ≤ 16 ε (rms(r) + rms(y)); r = t − y then varies only by the rounding of the difference.
fn is_constant(residual: &Moments, target_rms: f64) -> bool {
    let rms = (residual.variance(0) + residual.mean() * residual.mean()).sqrt();
    residual.variance(1).sqrt() <= 16.0 * f64::EPSILON * (rms + target_rms)
}

/// Dot product in eight fixed lanes (vectorisable, and the same order on every run).
#[inline]
fn dot(a: &[f64], b: &[f64]) -> f64 {
    let mut lanes = [0.0; 8];
    let (ca, cb) = (a.chunks_exact(8), b.chunks_exact(8));
    let tail: f64 = ca
        .remainder()
        .iter()
        .zip(cb.remainder())
        .map(|(p, q)| p * q)
        .sum();
    for (x, y) in ca.zip(cb) {
        for k in 0..8 {
            lanes[k] += x[k] * y[k];
        }
    }
    lanes.iter().sum::<f64>() + tail
}

/// Members per tile of the blocked Gram computation.
const TILE_MEMBERS: usize = 16;
/// Points per slab of the blocked Gram computation.
const TILE_POINTS: usize = 512;

/// The full M × M correlation matrix of member residuals (written row-major into `out`),
/// from the Gram matrix of centred residuals computed in tiles of members × slabs of
/// points, one rayon task per tile pair.
///
/// ```text
/// G_ab = Σ_j (r_aj − μ_a)(r_bj − μ_b),  corr_ab = G_ab / √(G_aa G_bb)
/// (NaN in the rows and columns of members with constant residuals).
/// ```
///
/// # Errors
/// As [`residual_correlation`]; `out` when it does not hold M × M values.
pub fn correlation_matrix<T: Real>(
    members: ArrayView2<'_, T>,
    y: ArrayView1<'_, f64>,
    out: &mut [f64],
    pool: &Pool,
    monitor: &dyn Monitor,
) -> Result<()> {
    let (m, n) = members.dim();
    check_shape(m, n, y.len())?;
    if out.len() != m * m {
        return Err(Error::value("out", format!("must hold {m} x {m} values")));
    }
    if y.iter().any(|v| !v.is_finite()) {
        return Err(Error::value("y", "contains NaN or infinite values"));
    }
    // Means (chunked, merged in order) for centring.
    let parts = for_chunks(n, &mut no_slots(n), pool, monitor, |points, ()| {
        Ok((0..m)
            .map(|b| {
                let r: Vec<f64> = members
                    .slice(s![b, points.clone()])
                    .iter()
                    .zip(y.slice(s![points.clone()]))
                    .map(|(&t, &v)| t.to_f64() - v)
                    .collect();
                Moments::of_slice(&r)
            })
            .collect::<Vec<_>>())
    })?;
    let merged: Vec<Moments> = (0..m)
        .map(|b| {
            parts
                .iter()
                .fold(Moments::default(), |acc, p| acc.merge(&p[b]))
        })
        .collect();
    let means: Vec<f64> = merged.iter().map(Moments::mean).collect();
    let target = Moments::of_slice(&y.iter().copied().collect::<Vec<f64>>());
    let target_rms = (target.variance(0) + target.mean() * target.mean()).sqrt();
    let constant: Vec<bool> = merged.iter().map(|p| is_constant(p, target_rms)).collect();
    if means.iter().any(|v| !v.is_finite()) {
        return Err(non_finite_members());
    }
    let tiles = m.div_ceil(TILE_MEMBERS);
    let pairs: Vec<(usize, usize)> = (0..tiles)
        .flat_map(|a| (a..tiles).map(move |b| (a, b)))
        .collect();
    let centred = |b: usize, slab: &Range<usize>, buffer: &mut [f64]| {
        let row = members.slice(s![b, slab.clone()]);
        for ((x, &t), &v) in buffer
            .iter_mut()
            .zip(row.iter())
            .zip(y.slice(s![slab.clone()]))
        {
            *x = t.to_f64() - v - means[b];
        }
    };
    let mut gram = Array2::<f64>::zeros((m, m));
    let block = pool.threads().max(1) * 2;
    for (done, batch) in pairs.chunks(block).enumerate() {
        let results: Vec<Vec<f64>> = pool.run(|| {
            batch
                .par_iter()
                .map(|&(ta, tb)| {
                    let ra = ta * TILE_MEMBERS..((ta + 1) * TILE_MEMBERS).min(m);
                    let rb = tb * TILE_MEMBERS..((tb + 1) * TILE_MEMBERS).min(m);
                    let mut acc = vec![0.0; ra.len() * rb.len()];
                    let mut xa = vec![0.0; ra.len() * TILE_POINTS];
                    let mut xb = vec![0.0; rb.len() * TILE_POINTS];
                    let mut start = 0;
                    while start < n {
                        let slab = start..(start + TILE_POINTS).min(n);
                        let len = slab.len();
                        for (i, a) in ra.clone().enumerate() {
                            centred(a, &slab, &mut xa[i * TILE_POINTS..i * TILE_POINTS + len]);
                        }
                        for (i, b) in rb.clone().enumerate() {
                            centred(b, &slab, &mut xb[i * TILE_POINTS..i * TILE_POINTS + len]);
                        }
                        for i in 0..ra.len() {
                            let va = &xa[i * TILE_POINTS..i * TILE_POINTS + len];
                            for k in 0..rb.len() {
                                let vb = &xb[k * TILE_POINTS..k * TILE_POINTS + len];
                                acc[i * rb.len() + k] += dot(va, vb);
                            }
                        }
                        start += TILE_POINTS;
                    }
                    acc
                })
                .collect()
        });
        for (&(ta, tb), acc) in batch.iter().zip(&results) {
            let ra = ta * TILE_MEMBERS..((ta + 1) * TILE_MEMBERS).min(m);
            let rb = tb * TILE_MEMBERS..((tb + 1) * TILE_MEMBERS).min(m);
            for (i, a) in ra.clone().enumerate() {
                for (k, b) in rb.clone().enumerate() {
                    gram[[a, b]] = acc[i * rb.len() + k];
                    gram[[b, a]] = acc[i * rb.len() + k];
                }
            }
        }
        monitor.progress(((done + 1) * block).min(pairs.len()), pairs.len())?;
    }
    for a in 0..m {
        for b in 0..m {
            let denominator = (gram[[a, a]] * gram[[b, b]]).sqrt();
            out[a * m + b] = if !constant[a] && !constant[b] {
                if a == b {
                    1.0
                } else {
                    gram[[a, b]] / denominator
                }
            } else {
                f64::NAN
            };
        }
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::parallel::{Silent, Threads};
    use approx::assert_relative_eq;
    use ndarray::{Array1, Array3};

    const POOL: Pool = Pool::Global;

    /// Deterministic pseudo-random values in [0, 1) (a small LCG; tests only).
    fn values(count: usize, seed: u64) -> Vec<f64> {
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

    fn decompose(
        members: &Array2<f64>,
        y: &Array1<f64>,
        w: &MemberWeights,
    ) -> (LossMoments, [Vec<f64>; 3]) {
        let n = y.len();
        let (mut e, mut m, mut g) = (vec![0.0; n], vec![0.0; n], vec![0.0; n]);
        let out = PointLosses {
            ensemble: &mut e,
            member: &mut m,
            gain: &mut g,
        };
        let sums = decompose_values(members.view(), y.view(), w, out, &POOL, &Silent).unwrap();
        (sums, [e, m, g])
    }

    #[test]
    fn hand_computed_squared_decomposition() {
        // Three members at one point, y = 0: predictions 1, 2, 6; f = 3.
        // ensemble (3 − 0)² = 9; member loss (1 + 4 + 36)/3 = 41/3; ambiguity
        // (4 + 1 + 9)/3 = 14/3; 41/3 − 14/3 = 9 (Krogh & Vedelsby 1995).
        let members = Array2::from_shape_vec((3, 1), vec![1.0, 2.0, 6.0]).unwrap();
        let y = Array1::from(vec![0.0]);
        let (sums, _) = decompose(&members, &y, &MemberWeights::uniform(3));
        assert_relative_eq!(sums.ensemble.mean(), 9.0, max_relative = 1e-15);
        assert_relative_eq!(sums.member.mean(), 41.0 / 3.0, max_relative = 1e-15);
        assert_relative_eq!(sums.gain.mean(), 14.0 / 3.0, max_relative = 1e-15);
        // Weights 0.5, 0.5, 0: f = 1.5; ensemble 2.25; member 2.5; ambiguity 0.25.
        let w = MemberWeights::new(&[0.5, 0.5, 0.0], 3).unwrap();
        let (sums, _) = decompose(&members, &y, &w);
        assert_relative_eq!(sums.ensemble.mean(), 2.25, max_relative = 1e-15);
        assert_relative_eq!(sums.member.mean(), 2.5, max_relative = 1e-15);
        assert_relative_eq!(sums.gain.mean(), 0.25, max_relative = 1e-15);
        // A leading zero weight is skipped too.
        let w = MemberWeights::new(&[0.0, 0.5, 0.5], 3).unwrap();
        let (sums, _) = decompose(&members, &y, &w);
        assert_relative_eq!(sums.ensemble.mean(), 16.0, max_relative = 1e-15);
        assert_relative_eq!(sums.gain.mean(), 4.0, max_relative = 1e-15);
    }

    #[test]
    fn identity_and_chunking_on_many_points() {
        let (m, n) = (11, 3 * CHUNK_POINTS + 17);
        let members = Array2::from_shape_vec((m, n), values(m * n, 1)).unwrap();
        let y = Array1::from(values(n, 2));
        let (sums, [e, mm, g]) = decompose(&members, &y, &MemberWeights::uniform(m));
        for j in [0, 5000, n - 1] {
            let col = members.column(j);
            let f = col.mean().unwrap();
            let member = col.iter().map(|t| (t - y[j]).powi(2)).sum::<f64>() / m as f64;
            let amb = col.iter().map(|t| (t - f).powi(2)).sum::<f64>() / m as f64;
            assert_relative_eq!(e[j], (f - y[j]).powi(2), max_relative = 1e-12);
            assert_relative_eq!(mm[j], member, max_relative = 1e-12);
            assert_relative_eq!(g[j], amb, max_relative = 1e-12);
        }
        assert_relative_eq!(
            sums.ensemble.mean(),
            sums.member.mean() - sums.gain.mean(),
            max_relative = 1e-12
        );
        // Fortran order (transposed storage) gives the same numbers.
        let fortran = members.t().as_standard_layout().t().to_owned();
        assert!(!fortran.is_standard_layout());
        let (again, _) = decompose(&fortran, &y, &MemberWeights::uniform(m));
        assert_eq!(again, sums);
        // Two threads give identical numbers.
        let two = Threads::Fixed(2).pool().unwrap();
        let (mut a, mut b, mut c) = (vec![0.0; n], vec![0.0; n], vec![0.0; n]);
        let out = PointLosses {
            ensemble: &mut a,
            member: &mut b,
            gain: &mut c,
        };
        let w = MemberWeights::uniform(m);
        let par = decompose_values(members.view(), y.view(), &w, out, &two, &Silent).unwrap();
        assert_eq!(par, sums);
    }

    #[test]
    fn large_offsets_lose_no_digits() {
        // Predictions 1e6 + 1e-3·u: a naive Σt² − (Σt)²/M would lose about 18 digits; the
        // shifted sums keep the two-pass value (common practice: compare with two passes).
        let (m, n) = (13, 50);
        let u = values(m * n, 8);
        let members = Array2::from_shape_fn((m, n), |(b, j)| 1e6 + 1e-3 * u[b * n + j]);
        let y = Array1::from_elem(n, 1e6);
        let (_, [_, _, g]) = decompose(&members, &y, &MemberWeights::uniform(m));
        for (col, &got) in members.columns().into_iter().zip(&g) {
            let f = col.sum() / m as f64;
            let two_pass = col.iter().map(|t| (t - f) * (t - f)).sum::<f64>() / m as f64;
            assert_relative_eq!(got, two_pass, max_relative = 1e-9);
        }
    }

    #[test]
    fn brier_decomposition_by_hand() {
        // Two members, one point, y = 0: p = (0.8, 0.2) and (0.4, 0.6).
        // member Brier: (0.04 + 0.04) and (0.36 + 0.36) → mean 0.4; soft vote (0.6, 0.4)
        // → ensemble 0.16 + 0.16 = 0.32; ambiguity 0.4 − 0.32 = 0.08 (Brier 1950).
        let members = Array3::from_shape_vec((2, 1, 2), vec![0.8, 0.2, 0.4, 0.6]).unwrap();
        let y = Array1::from(vec![0i64]);
        let (mut e, mut m, mut g) = (vec![0.0], vec![0.0], vec![0.0]);
        let out = PointLosses {
            ensemble: &mut e,
            member: &mut m,
            gain: &mut g,
        };
        let s = decompose_probabilities(
            members.view(),
            y.view(),
            &MemberWeights::uniform(2),
            out,
            &POOL,
            &Silent,
        )
        .unwrap();
        assert_relative_eq!(s.ensemble.mean(), 0.32, max_relative = 1e-14);
        assert_relative_eq!(s.member.mean(), 0.4, max_relative = 1e-14);
        assert_relative_eq!(s.gain.mean(), 0.08, max_relative = 1e-12);
    }

    #[test]
    fn votes_break_ties_towards_the_lowest_class() {
        // Point 0: votes 2, 1, 1, 2 → tie between 1 and 2 → 1. Point 1: 0, 3, 3, 0 → 0.
        let members = Array2::from_shape_vec((4, 2), vec![2, 0, 1, 3, 1, 3, 2, 0]).unwrap();
        let (mut labels, mut fractions) = (vec![0i64; 2], vec![0.0; 8]);
        majority_vote(
            members.view(),
            4,
            &MemberWeights::uniform(4),
            &mut labels,
            &mut fractions,
            &POOL,
            &Silent,
        )
        .unwrap();
        assert_eq!(labels, vec![1, 0]);
        assert_eq!(fractions, vec![0.0, 0.5, 0.5, 0.0, 0.5, 0.0, 0.0, 0.5]);
        let y = Array1::from(vec![2i64, 0]);
        let (mut e, mut m, mut g) = (vec![0.0; 2], vec![0.0; 2], vec![0.0; 2]);
        let out = PointLosses {
            ensemble: &mut e,
            member: &mut m,
            gain: &mut g,
        };
        decompose_labels(
            members.view(),
            y.view(),
            4,
            &MemberWeights::uniform(4),
            out,
            &POOL,
            &Silent,
        )
        .unwrap();
        assert_eq!(e, vec![1.0, 0.0]);
        assert_eq!(m, vec![0.5, 0.5]);
        assert_eq!(g, vec![-0.5, 0.5]);
    }

    #[test]
    fn bad_input_names_the_argument() {
        let argument = |r: Result<LossMoments>| match r {
            Err(Error::InvalidValue { argument, .. }) => argument,
            other => panic!("{other:?}"),
        };
        let members = Array2::from_shape_vec((2, 2), vec![1.0, f64::NAN, 0.0, 1.0]).unwrap();
        let y = Array1::from(vec![0.0, 0.0]);
        let run = |members: &Array2<f64>, y: &Array1<f64>| {
            let n = y.len();
            let (mut e, mut m, mut g) = (vec![0.0; n], vec![0.0; n], vec![0.0; n]);
            let out = PointLosses {
                ensemble: &mut e,
                member: &mut m,
                gain: &mut g,
            };
            decompose_values(
                members.view(),
                y.view(),
                &MemberWeights::uniform(members.nrows()),
                out,
                &POOL,
                &Silent,
            )
        };
        assert_eq!(argument(run(&members, &y)), "members");
        let inf = Array2::from_shape_vec((2, 2), vec![1.0, f64::INFINITY, 0.0, 1.0]).unwrap();
        assert_eq!(argument(run(&inf, &y)), "members");
        let fine = Array2::from_shape_vec((2, 2), vec![1.0, 2.0, 0.0, 1.0]).unwrap();
        assert_eq!(
            argument(run(&fine, &Array1::from(vec![0.0, f64::NAN]))),
            "y"
        );
        assert_eq!(argument(run(&fine, &Array1::from(vec![0.0]))), "y");
        assert_eq!(argument(run(&Array2::zeros((0, 2)), &y)), "members");
        assert_eq!(
            argument(run(&Array2::zeros((2, 0)), &Array1::zeros(0))),
            "members"
        );
        assert!(MemberWeights::new(&[0.5, 0.6], 2).is_err());
        assert!(MemberWeights::new(&[1.5, -0.5], 2).is_err());
        assert!(MemberWeights::new(&[1.0], 2).is_err());
        // Probabilities off the simplex and labels out of range.
        let bad = Array3::from_shape_vec((1, 1, 2), vec![0.7, 0.7]).unwrap();
        let (mut e, mut m, mut g) = (vec![0.0], vec![0.0], vec![0.0]);
        let out = PointLosses {
            ensemble: &mut e,
            member: &mut m,
            gain: &mut g,
        };
        let r = decompose_probabilities(
            bad.view(),
            Array1::from(vec![0i64]).view(),
            &MemberWeights::uniform(1),
            out,
            &POOL,
            &Silent,
        );
        assert_eq!(argument(r), "members");
        let labels = Array2::from_shape_vec((1, 2), vec![0i64, 5]).unwrap();
        let (mut e, mut m, mut g) = (vec![0.0; 2], vec![0.0; 2], vec![0.0; 2]);
        let out = PointLosses {
            ensemble: &mut e,
            member: &mut m,
            gain: &mut g,
        };
        let r = decompose_labels(
            labels.view(),
            Array1::from(vec![0i64, -1]).view(),
            3,
            &MemberWeights::uniform(1),
            out,
            &POOL,
            &Silent,
        );
        assert_eq!(argument(r), "y");
    }

    #[test]
    fn one_member_has_no_ambiguity() {
        let members = Array2::from_shape_vec((1, 3), vec![1.0, 2.0, 3.0]).unwrap();
        let y = Array1::from(vec![0.0, 0.0, 0.0]);
        let (sums, _) = decompose(&members, &y, &MemberWeights::uniform(1));
        assert_eq!(sums.gain.mean(), 0.0);
        assert_relative_eq!(sums.ensemble.mean(), 14.0 / 3.0, max_relative = 1e-15);
    }

    #[test]
    fn size_curve_ends_and_law() {
        let (m, n) = (6, 300);
        let members = Array2::from_shape_vec((m, n), values(m * n, 3)).unwrap();
        let y = Array1::from(values(n, 4));
        let mut state = SizeCurveState::new(Loss::Squared, m, vec![1, 2, 6], 50, 9).unwrap();
        for order in state.orders() {
            let mut sorted = order.clone();
            sorted.sort_unstable();
            assert_eq!(sorted, (0..m).collect::<Vec<_>>());
        }
        state
            .update_values(members.view(), y.view(), &POOL, &Silent)
            .unwrap();
        let curve = state.finish().unwrap();
        let (sums, _) = decompose(&members, &y, &MemberWeights::uniform(m));
        // k = M is the full ensemble whatever the order; the law equals it there.
        assert_relative_eq!(curve.curve[2], sums.ensemble.mean(), max_relative = 1e-12);
        assert!(curve.standard_error[2] < 1e-12);
        assert_relative_eq!(curve.law(m as f64), curve.full_loss, max_relative = 1e-12);
        // At k = 1 the law is the mean member loss (Cochran 1977, Theorem 2.2).
        assert_relative_eq!(curve.law(1.0), sums.member.mean(), max_relative = 1e-12);
        // Spread W = mean over points of the ddof-1 variance = ambiguity · M/(M − 1).
        assert_relative_eq!(
            curve.spread,
            sums.gain.mean() * m as f64 / (m - 1) as f64,
            max_relative = 1e-12
        );
        assert!((curve.curve[1] - curve.law(2.0)).abs() < 4.0 * curve.standard_error[1] + 1e-12);
        // Chunked updates give the same curve.
        let mut chunked = SizeCurveState::new(Loss::Squared, m, vec![1, 2, 6], 50, 9).unwrap();
        for part in [0..100, 100..101, 101..300] {
            chunked
                .update_values(
                    members.slice(s![.., part.clone()]),
                    y.slice(s![part]),
                    &POOL,
                    &Silent,
                )
                .unwrap();
        }
        let again = chunked.finish().unwrap();
        for (a, b) in again.curve.iter().zip(&curve.curve) {
            assert_relative_eq!(a, b, max_relative = 1e-12);
        }
        assert!(SizeCurveState::new(Loss::Squared, 3, vec![2, 1], 1, 0).is_err());
        assert!(SizeCurveState::new(Loss::Squared, 3, vec![4], 1, 0).is_err());
        assert!(SizeCurveState::new(Loss::Squared, 3, vec![1], 0, 0).is_err());
    }

    #[test]
    fn correlation_by_identity_matches_the_matrix() {
        let (m, n) = (5, 700);
        let shared = values(n, 5);
        let own = values(m * n, 6);
        let members = Array2::from_shape_fn((m, n), |(b, j)| shared[j] + 0.5 * own[b * n + j]);
        let y = Array1::zeros(n);
        let summary = residual_correlation(members.view(), y.view(), &POOL, &Silent).unwrap();
        let mut matrix = vec![0.0; m * m];
        correlation_matrix(members.view(), y.view(), &mut matrix, &POOL, &Silent).unwrap();
        let off: Vec<f64> = (0..m * m)
            .filter(|i| i / m != i % m)
            .map(|i| matrix[i])
            .collect();
        let mean = off.iter().sum::<f64>() / off.len() as f64;
        assert_relative_eq!(summary.mean_correlation, mean, max_relative = 1e-10);
        assert!(summary.mean_correlation > 0.5);
        // A constant member is left out.
        let mut with_constant = members.clone();
        with_constant.row_mut(0).fill(2.0);
        let summary = residual_correlation(with_constant.view(), y.view(), &POOL, &Silent).unwrap();
        assert_eq!(summary.constant_members, vec![0]);
        assert!(summary.mean_correlation.is_finite());
        let one =
            residual_correlation(members.slice(s![..1, ..]), y.view(), &POOL, &Silent).unwrap();
        assert!(one.mean_correlation.is_nan() && one.mean_covariance.is_nan());
    }
}
