//! The ambiguity decomposition of the ensemble's loss: loss of the combined prediction
//! against the mean member loss, point by point, for values (squared error), probabilities
//! (Brier score) and labels (error rate of the majority vote, no identity).
//!
//! Every routine works in chunks of [`CHUNK_POINTS`] points (through
//! [`crate::members::for_chunks`]): a chunk reads each member's slice once and returns a
//! mergeable partial state (sums and [`Moments`], Chan, Golub & LeVeque 1983). Partial
//! states are merged in chunk order, so results never depend on the thread count, and the
//! stream state ([`DecompositionState`]) fed chunk by chunk gives the in-memory results up
//! to rounding. Extra memory is O(n_points) (the per-point outputs) plus a few chunk-sized
//! buffers per thread; no members-sized temporary is ever made.
//!
//! Sources of the formulas:
//!
//! ```text
//! ambiguity decomposition   Krogh & Vedelsby (1995), "Neural network ensembles, cross
//!                           validation, and active learning", NIPS 7, eq. (5)-(6)
//! one-pass shifted sums     Chan, Golub & LeVeque (1983), "Algorithms for computing the
//!                           sample variance", The American Statistician 37(3)
//! multi-class Brier score   Brier (1950), Monthly Weather Review 78(1), eq. (1)
//! ```

use std::ops::Range;

use ndarray::{s, ArrayView1, ArrayView2, ArrayView3, Axis};
use serde::{Deserialize, Serialize};

use crate::aggregation::MemberWeights;
use crate::error::{Error, Result};
use crate::members::{
    add_votes, check_probabilities, class_of, for_chunks, Chunks, Members, MergeableState, Targets,
    CHUNK_POINTS,
};
use crate::numeric::{Moments, Real};
use crate::parallel::{Monitor, Pool};

/// The loss a decomposition or size curve is computed for.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub enum Loss {
    /// (f − y)² on value predictions.
    SquaredError,
    /// Σ_c (p_c − 1[y = c])² on class probabilities.
    BrierScore,
    /// 1[vote ≠ y] on class labels.
    ErrorRate,
}

impl Loss {
    /// Parses the user-facing name.
    ///
    /// # Errors
    /// `loss` for any other name.
    pub fn parse(name: &str) -> Result<Self> {
        match name {
            "squared_error" => Ok(Loss::SquaredError),
            "brier_score" => Ok(Loss::BrierScore),
            "error_rate" => Ok(Loss::ErrorRate),
            other => Err(Error::value(
                "loss",
                format!("expected 'squared_error', 'brier_score' or 'error_rate', got {other:?}"),
            )),
        }
    }

    /// The user-facing name.
    pub fn name(self) -> &'static str {
        match self {
            Loss::SquaredError => "squared_error",
            Loss::BrierScore => "brier_score",
            Loss::ErrorRate => "error_rate",
        }
    }

    /// The loss that fits a kind of members.
    pub fn of<T: Real>(members: &Members<'_, T>) -> Self {
        match members {
            Members::Values(_) => Loss::SquaredError,
            Members::Probabilities(_) => Loss::BrierScore,
            Members::Labels(..) => Loss::ErrorRate,
        }
    }

    /// Checks that `members` are of the kind this loss needs.
    ///
    /// # Errors
    /// `members` when they are not.
    pub fn require<T: Real>(self, members: &Members<'_, T>) -> Result<()> {
        if Loss::of(members) != self {
            return Err(Error::value(
                "members",
                format!(
                    "these predictions do not fit loss {:?} (squared_error: float (members, \
                     points); brier_score: float (members, points, classes); error_rate: \
                     integer labels)",
                    self.name()
                ),
            ));
        }
        Ok(())
    }
}

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
#[derive(Debug, Clone, Copy, PartialEq, Default, Serialize, Deserialize)]
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

pub(crate) fn non_finite_members() -> Error {
    Error::value(
        "members",
        "contains NaN or infinite values (or values so large their squares overflow)",
    )
}

/// Fills `target` with the value target of every point of the chunk.
pub(crate) fn value_target(
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

/// Fills `target` with the one-hot encoding (n_points × n_classes cells) of the labels.
pub(crate) fn one_hot_target(
    y: ArrayView1<'_, i64>,
    points: &Range<usize>,
    n_classes: usize,
    target: &mut Vec<f64>,
) -> Result<()> {
    target.clear();
    target.resize(points.len() * n_classes, 0.0);
    for (j, &label) in y.slice(s![points.clone()]).iter().enumerate() {
        target[j * n_classes + class_of(label, n_classes, "y")?] = 1.0;
    }
    Ok(())
}

/// Writes the target of every cell of a chunk of points into the buffer.
pub(crate) type TargetFill<'a> = dyn Fn(&Range<usize>, &mut Vec<f64>) -> Result<()> + Sync + 'a;

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
pub(crate) fn residual_moments<T: Real>(
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
    weights.check_members(m)?;
    check_outputs(&out, n_points)?;
    let inverse_total = 1.0 / weights.total;
    let mut slots = point_slots(&mut out);
    let mut sums = LossMoments::default();
    let work = |points: Range<usize>,
                (ens, mem, gain): &mut (&mut [f64], &mut [f64], &mut [f64])| {
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
    };
    let merge = |part: LossMoments| {
        sums = sums.merge(&part);
        Ok(())
    };
    for_chunks(Chunks::of(n_points), &mut slots, pool, monitor, work, merge)?;
    Ok(sums)
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
    Members::Values(members).check_targets(y.len())?;
    let targets = |points: &Range<usize>, target: &mut Vec<f64>| value_target(y, points, target);
    decompose_cells(
        members.insert_axis(Axis(2)),
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
    Members::Probabilities(members).check_targets(y.len())?;
    let n_classes = members.len_of(Axis(2));
    let targets =
        |points: &Range<usize>, target: &mut Vec<f64>| one_hot_target(y, points, n_classes, target);
    decompose_cells(members, &targets, weights, true, out, pool, monitor)
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
    Members::<f64>::Labels(members, n_classes).check_targets(y.len())?;
    weights.check_members(m)?;
    check_outputs(&out, n)?;
    let inverse_total = 1.0 / weights.total;
    let mut slots = point_slots(&mut out);
    let mut sums = LossMoments::default();
    let work = |points: Range<usize>,
                (ens, mem, gain): &mut (&mut [f64], &mut [f64], &mut [f64])| {
        let labels: Vec<usize> = y
            .slice(s![points.clone()])
            .iter()
            .map(|&l| class_of(l, n_classes, "y"))
            .collect::<Result<_>>()?;
        let mut totals = crate::error::zeroed(points.len() * n_classes, "n_classes")?;
        let mut winner = vec![0usize; points.len()];
        add_votes(
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
    };
    let merge = |part: LossMoments| {
        sums = sums.merge(&part);
        Ok(())
    };
    for_chunks(Chunks::of(n), &mut slots, pool, monitor, work, merge)?;
    Ok(sums)
}

// -- aggregation of floats ---------------------------------------------------------------

/// The decomposition of any kind of members: [`decompose_values`],
/// [`decompose_probabilities`] or [`decompose_labels`] by the kind of `members`.
///
/// # Errors
/// As those; `y` when its kind does not fit the members (real targets for values, class
/// indices otherwise).
pub fn decompose<T: Real>(
    members: Members<'_, T>,
    y: Targets<'_>,
    weights: &MemberWeights,
    out: PointLosses<'_>,
    pool: &Pool,
    monitor: &dyn Monitor,
) -> Result<LossMoments> {
    match (members, y) {
        (Members::Values(v), Targets::Values(y)) => {
            decompose_values(v, y, weights, out, pool, monitor)
        }
        (Members::Probabilities(p), Targets::Labels(y)) => {
            decompose_probabilities(p, y, weights, out, pool, monitor)
        }
        (Members::Labels(l, k), Targets::Labels(y)) => {
            decompose_labels(l, y, k, weights, out, pool, monitor)
        }
        _ => Err(Error::kind(
            "y",
            "real targets go with values, integer class labels with probabilities and labels",
        )),
    }
}

// -- decomposition stream ----------------------------------------------------------------

/// A decomposition fed chunk by chunk of points: the member count (and class count for
/// probabilities) is fixed by the first chunk; each chunk's moments are merged in order.
#[derive(Debug, Clone, Serialize, Deserialize)]
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

    /// Adds a chunk of points (all members); `n_classes` of labels only sizes the vote
    /// tables, so it may differ between chunks.
    ///
    /// # Errors
    /// As [`decompose`], plus `members` when their kind does not fit the loss or the member
    /// (probabilities: class) count changes.
    pub fn update<T: Real>(
        &mut self,
        members: Members<'_, T>,
        y: Targets<'_>,
        out: PointLosses<'_>,
        pool: &Pool,
        monitor: &dyn Monitor,
    ) -> Result<()> {
        self.loss.require(&members)?;
        if let Members::Probabilities(p) = members {
            self.fix_classes(p.len_of(Axis(2)))?;
        }
        let weights = self.weights_for(members.n_members())?.clone();
        let part = decompose(members, y, &weights, out, pool, monitor)?;
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

impl MergeableState for DecompositionState {
    type Output = LossMoments;

    fn merge(&mut self, other: Self) -> Result<()> {
        if other.loss != self.loss || other.weights != self.weights {
            return Err(Error::value(
                "other",
                "was set up with another loss or other member weights",
            ));
        }
        if let Some(known) = &other.checked {
            self.weights_for(known.members())
                .map_err(|_| Error::value("other", "has another number of members"))?;
        }
        if let Some(k) = other.n_classes {
            self.fix_classes(k)
                .map_err(|_| Error::value("other", "has another number of classes"))?;
        }
        self.sums = self.sums.merge(&other.sums);
        Ok(())
    }

    fn finish(&self) -> Result<LossMoments> {
        if self.sums.ensemble.count() == 0 {
            return Err(Error::value("members", "no points were added"));
        }
        Ok(self.sums)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::parallel::{Silent, Threads};
    use approx::assert_relative_eq;
    use ndarray::{Array1, Array2, Array3};

    const POOL: Pool = Pool::Global;

    use crate::members::test_values as values;

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
    fn merged_states_equal_one_state_and_survive_bytes() {
        let (m, n) = (7, 2 * CHUNK_POINTS + 5);
        let members = Array2::from_shape_vec((m, n), values(m * n, 11)).unwrap();
        let y = Array1::from(values(n, 12));
        let feed = |state: &mut DecompositionState, part: Range<usize>| {
            let len = part.len();
            let (mut e, mut mm, mut g) = (vec![0.0; len], vec![0.0; len], vec![0.0; len]);
            let out = PointLosses {
                ensemble: &mut e,
                member: &mut mm,
                gain: &mut g,
            };
            state
                .update(
                    Members::Values(members.slice(s![.., part.clone()])),
                    Targets::Values(y.slice(s![part])),
                    out,
                    &POOL,
                    &Silent,
                )
                .unwrap();
        };
        let mut whole = DecompositionState::new(Loss::SquaredError, None);
        feed(&mut whole, 0..n);
        let (mut first, mut second) = (
            DecompositionState::new(Loss::SquaredError, None),
            DecompositionState::new(Loss::SquaredError, None),
        );
        feed(&mut first, 0..3000);
        feed(&mut second, 3000..n);
        let second = DecompositionState::from_bytes(&second.to_bytes().unwrap()).unwrap();
        first.merge(second).unwrap();
        let (a, b) = (first.finish().unwrap(), whole.finish().unwrap());
        assert_relative_eq!(a.gain.mean(), b.gain.mean(), max_relative = 1e-12);
        assert_relative_eq!(a.ensemble.mean(), b.ensemble.mean(), max_relative = 1e-12);
        assert!(DecompositionState::new(Loss::BrierScore, None)
            .finish()
            .is_err());
        let mut other = DecompositionState::new(Loss::BrierScore, None);
        assert!(other.merge(whole).is_err());
        assert!(DecompositionState::from_bytes(&[0xff, 0xff]).is_err());
    }
}
