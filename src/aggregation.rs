//! Combining member predictions into the ensemble's prediction: the weighted mean of
//! values, the soft vote of probabilities and the majority vote of labels (lowest class
//! index among ties, [`crate::members::vote`]), with checked member weights.
//!
//! Every routine runs over chunks of points through [`crate::members::for_chunks`], so
//! results do not depend on the thread count.

use serde::{Deserialize, Serialize};

use ndarray::{s, ArrayView2, ArrayView3};

use crate::error::{Error, Result};
use crate::members::{add_votes, check_probabilities, for_chunks, Chunks, Members, CHUNK_POINTS};
use crate::numeric::Real;
use crate::parallel::{Monitor, Pool};

/// Largest allowed |Σ_b w_b − 1| for member weights.
pub const WEIGHT_TOLERANCE: f64 = 1e-6;

/// Member weights, checked once: non-negative, finite, summing to one within
/// [`WEIGHT_TOLERANCE`] (or all equal when none are given).
///
/// ```text
/// raw_b   the given weight (1 for every member when none are given)
/// total   Σ_b raw_b (M without weights; 1 within tolerance with weights)
/// ```
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct MemberWeights {
    pub(crate) raw: Vec<f64>,
    pub(crate) total: f64,
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
                "member_weights",
                format!(
                    "has {} weights but there are {members} members",
                    weights.len()
                ),
            ));
        }
        if let Some(w) = weights.iter().find(|w| !w.is_finite() || **w < 0.0) {
            return Err(Error::value(
                "member_weights",
                format!("must be finite and non-negative, got {w}"),
            ));
        }
        let total: f64 = weights.iter().sum();
        if (total - 1.0).abs() > WEIGHT_TOLERANCE {
            return Err(Error::value(
                "member_weights",
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

    /// Checks that these weights fit `members` members.
    ///
    /// # Errors
    /// `member_weights` when the counts differ.
    pub fn check_members(&self, members: usize) -> Result<()> {
        if self.members() != members {
            return Err(Error::value(
                "member_weights",
                format!(
                    "has {} weights but there are {members} members",
                    self.members()
                ),
            ));
        }
        Ok(())
    }
}

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
    Members::Probabilities(members).check()?;
    weights.check_members(m)?;
    if out.len() != n * n_cells {
        return Err(Error::value(
            "out",
            "output does not match the points and classes",
        ));
    }
    let inverse_total = 1.0 / weights.total;
    let mut slots: Vec<&mut [f64]> = out.chunks_mut(CHUNK_POINTS * n_cells).collect();
    let work = |points: std::ops::Range<usize>, sums: &mut &mut [f64]| {
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
                return Err(crate::decomposition::non_finite_members());
            }
        }
        Ok(())
    };
    for_chunks(Chunks::of(n), &mut slots, pool, monitor, work, |()| Ok(()))
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
    mean_cells(
        members.insert_axis(ndarray::Axis(2)),
        false,
        weights,
        out,
        pool,
        monitor,
    )
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
    Members::<f64>::Labels(members, n_classes).check()?;
    weights.check_members(m)?;
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
    let work = |points: std::ops::Range<usize>,
                (labels, fractions): &mut (&mut [i64], &mut [f64])| {
        let mut winner = vec![0usize; points.len()];
        add_votes(
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
    };
    for_chunks(Chunks::of(n), &mut slots, pool, monitor, work, |()| Ok(()))
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::parallel::Silent;
    use ndarray::{Array2, Array3};

    const POOL: Pool = Pool::Global;

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
    }

    #[test]
    fn weighted_mean_and_soft_vote_by_hand() {
        // Weights 0.25, 0.75: means 0.25·1 + 0.75·3 = 2.5 and 0.25·2 + 0.75·6 = 5.
        let members = Array2::from_shape_vec((2, 2), vec![1.0, 2.0, 3.0, 6.0]).unwrap();
        let w = MemberWeights::new(&[0.25, 0.75], 2).unwrap();
        let mut out = vec![0.0; 2];
        mean_values(members.view(), &w, &mut out, &POOL, &Silent).unwrap();
        assert_eq!(out, vec![2.5, 5.0]);
        // Soft vote of (0.8, 0.2) and (0.4, 0.6): (0.6, 0.4).
        let p = Array3::from_shape_vec((2, 1, 2), vec![0.8, 0.2, 0.4, 0.6]).unwrap();
        let mut out = vec![0.0; 2];
        mean_cells(
            p.view(),
            true,
            &MemberWeights::uniform(2),
            &mut out,
            &POOL,
            &Silent,
        )
        .unwrap();
        assert!((out[0] - 0.6).abs() < 1e-15 && (out[1] - 0.4).abs() < 1e-15);
        assert!(MemberWeights::new(&[0.5, 0.6], 2).is_err());
        assert!(MemberWeights::new(&[1.5, -0.5], 2).is_err());
        assert!(MemberWeights::new(&[1.0], 2).is_err());
        assert!(w.check_members(3).is_err());
    }
}
