//! Bagged least squares and ridge regression: one weighted fit with intercept per member,
//! the in-bag counts (or Bayesian weights) as row weights.
//!
//! ```text
//! Objective of member m, on the ORIGINAL scale of the features (as
//! sklearn.linear_model.Ridge(alpha=λ) with sample_weight=w; λ = 0 is weighted least squares):
//!     minimise over b, β    Σ_i w_i (y_i − b − x_iᵀβ)² + λ ‖β‖²       (intercept unpenalised)
//! Solved on a centred, scaled design for numerical stability (Golub & Van Loan 2013,
//! Matrix Computations, §4.2 Cholesky, §5.3 normal equations):
//!     W = Σ w_i,  x̄_j = Σ w_i x_ij / W,  ȳ = Σ w_i y_i / W,
//!     s_j = sqrt(Σ w_i (x_ij − x̄_j)² / W)       (s_j := 1 and z_ij := 0 for a constant column)
//!     z_ij = (x_ij − x̄_j) / s_j,  G = Zᵀ diag(w) Z / W,  r = Zᵀ diag(w) (y − ȳ) / W
//!     (G + (λ / W) · diag(1 / s_j²)) γ = r        by Cholesky, then β_j = γ_j / s_j,
//!     b = ȳ − x̄ᵀβ.
//! ```
//! The normal equations square the condition number of the scaled design; a Cholesky pivot
//! below `RANK_TOLERANCE` × its diagonal entry is reported as rank deficiency (collinear
//! or constant features, or fewer distinct in-bag rows than features + 1) instead of
//! returning unstable coefficients.

use std::sync::atomic::{AtomicBool, Ordering};

use ndarray::{ArrayView1, ArrayView2};
use rayon::prelude::*;
use serde::{Deserialize, Serialize};

use super::{
    check_design, check_parts, check_selection, member_chunk, Bag, BagSource, CountBags,
    FittedMembers, Targets, Task,
};
use crate::error::{Error, Result};
use crate::numeric::Real;
use crate::parallel::{watched, Monitor, Pool};
use crate::resampling::Count;

/// Smallest accepted ratio of a Cholesky pivot to its diagonal entry (a reciprocal
/// condition estimate of the scaled Gram matrix).
pub const RANK_TOLERANCE: f64 = 1e-10;

/// Relative spread below which a column counts as constant within a member's rows.
const CONSTANT_TOLERANCE: f64 = 1e-12;

/// Points per parallel prediction task.
const POINT_CHUNK: usize = 4096;

/// A fitted ensemble of linear members.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct LinearEnsemble {
    n_features: usize,
    penalty: f64,
    /// One intercept per member.
    intercepts: Vec<f64>,
    /// members × n_features, row-major.
    coefficients: Vec<f64>,
}

/// Solves `a x = b` in place for a symmetric positive definite `a` (p × p, row-major) by
/// Cholesky; `None` when a pivot falls below `RANK_TOLERANCE` times its diagonal entry.
fn cholesky_solve(mut a: Vec<f64>, mut b: Vec<f64>, p: usize) -> Option<Vec<f64>> {
    for k in 0..p {
        let diagonal = a[k * p + k];
        let mut pivot = diagonal;
        for j in 0..k {
            pivot -= a[k * p + j] * a[k * p + j];
        }
        if !pivot.is_finite() || pivot <= RANK_TOLERANCE * diagonal.abs() {
            return None;
        }
        let root = pivot.sqrt();
        a[k * p + k] = root;
        for i in k + 1..p {
            let mut v = a[i * p + k];
            for j in 0..k {
                v -= a[i * p + j] * a[k * p + j];
            }
            a[i * p + k] = v / root;
        }
    }
    for i in 0..p {
        let mut v = b[i];
        for j in 0..i {
            v -= a[i * p + j] * b[j];
        }
        b[i] = v / a[i * p + i];
    }
    for i in (0..p).rev() {
        let mut v = b[i];
        for j in i + 1..p {
            v -= a[j * p + i] * b[j];
        }
        b[i] = v / a[i * p + i];
    }
    Some(b)
}

/// Fits one member; returns (intercept, coefficients).
fn fit_member<T: Real>(
    x: ArrayView2<'_, T>,
    y: ArrayView1<'_, f64>,
    bag: &Bag,
    penalty: f64,
    member: usize,
) -> Result<(f64, Vec<f64>)> {
    let p = x.ncols();
    let total = bag.total();
    // Pass 1: weighted means.
    let mut mean = vec![0.0; p];
    let mut y_mean = 0.0;
    for (&i, &w) in bag.rows.iter().zip(&bag.weights) {
        for (j, m) in mean.iter_mut().enumerate() {
            *m += w * x[[i, j]].to_f64();
        }
        y_mean += w * y[i];
    }
    mean.iter_mut().for_each(|m| *m /= total);
    y_mean /= total;
    // Pass 2: weighted scales of the centred columns.
    let mut scale = vec![0.0; p];
    for (&i, &w) in bag.rows.iter().zip(&bag.weights) {
        for (j, s) in scale.iter_mut().enumerate() {
            let d = x[[i, j]].to_f64() - mean[j];
            *s += w * d * d;
        }
    }
    let mut constant = vec![false; p];
    for j in 0..p {
        let s = (scale[j] / total).sqrt();
        constant[j] =
            !s.is_finite() || s <= CONSTANT_TOLERANCE * mean[j].abs().max(f64::MIN_POSITIVE);
        scale[j] = if constant[j] { 1.0 } else { s };
    }
    // Pass 3: Gram matrix and right-hand side of the scaled design.
    let mut gram = vec![0.0; p * p];
    let mut rhs = vec![0.0; p];
    let mut z = vec![0.0; p];
    for (&i, &w) in bag.rows.iter().zip(&bag.weights) {
        let row = x.row(i);
        for (j, zj) in z.iter_mut().enumerate() {
            *zj = if constant[j] {
                0.0
            } else {
                (row[j].to_f64() - mean[j]) / scale[j]
            };
        }
        let r = w * (y[i] - y_mean);
        for (j, (g, zj)) in gram.chunks_exact_mut(p).zip(&z).enumerate() {
            let wz = w * zj;
            rhs[j] += zj * r;
            for (gk, zk) in g[..=j].iter_mut().zip(&z[..=j]) {
                *gk += wz * zk;
            }
        }
    }
    for j in 0..p {
        rhs[j] /= total;
        for k in 0..=j {
            gram[j * p + k] /= total;
            gram[k * p + j] = gram[j * p + k];
        }
        gram[j * p + j] += penalty / total / (scale[j] * scale[j]);
    }
    let gamma = cholesky_solve(gram, rhs, p).ok_or_else(|| {
        Error::value(
            if penalty > 0.0 { "penalty" } else { "x" },
            if penalty > 0.0 {
                format!(
                    "member {member}: the penalised system is numerically singular; \
                     use a larger penalty"
                )
            } else {
                format!(
                    "member {member}: the in-bag rows are rank deficient (collinear or \
                     constant features, or fewer distinct rows than features + 1); \
                     set penalty > 0 for a ridge fit"
                )
            },
        )
    })?;
    let beta: Vec<f64> = gamma.iter().zip(&scale).map(|(g, s)| g / s).collect();
    let intercept = y_mean - beta.iter().zip(&mean).map(|(b, m)| b * m).sum::<f64>();
    Ok((intercept, beta))
}

impl LinearEnsemble {
    /// Fits one member per bag on the rows of `x` (n_rows × p) and targets `y`.
    ///
    /// # Errors
    /// `x` (empty, NaN/inf, rank deficient without a penalty), `y` (length, NaN/inf),
    /// `penalty` (negative or not finite), `counts` (no members), [`Error::Interrupted`].
    pub fn fit<T: Real>(
        x: ArrayView2<'_, T>,
        y: ArrayView1<'_, f64>,
        bags: &dyn BagSource,
        penalty: f64,
        pool: &Pool,
        monitor: &dyn Monitor,
    ) -> Result<Self> {
        check_design(x, "x")?;
        if y.len() != x.nrows() {
            return Err(Error::value(
                "y",
                format!("has {} values but x has {} rows", y.len(), x.nrows()),
            ));
        }
        if y.iter().any(|v| !v.is_finite()) {
            return Err(Error::value("y", "contains NaN or infinite values"));
        }
        check_penalty(penalty)?;
        let members = bags.n_members();
        if members == 0 {
            return Err(Error::value("counts", "needs at least one member"));
        }
        let p = x.ncols();
        let mut intercepts = Vec::with_capacity(members);
        let mut coefficients = Vec::with_capacity(members * p);
        let chunk = member_chunk(pool.threads());
        for start in (0..members).step_by(chunk) {
            // Each member's bag is read where it is fitted, and dropped after.
            let fitted = pool.run(|| {
                (start..(start + chunk).min(members))
                    .into_par_iter()
                    .map(|m| {
                        let bag = bags.bag(m)?;
                        if bag.rows.iter().any(|&i| i >= x.nrows()) {
                            return Err(Error::value("counts", "refers to rows beyond x"));
                        }
                        fit_member(x, y, &bag, penalty, m)
                    })
                    .collect::<Result<Vec<_>>>()
            })?;
            for (b, beta) in fitted {
                intercepts.push(b);
                coefficients.extend(beta);
            }
            monitor.progress(intercepts.len(), members)?;
        }
        Ok(LinearEnsemble {
            n_features: p,
            penalty,
            intercepts,
            coefficients,
        })
    }

    /// Number of members.
    pub fn members(&self) -> usize {
        self.intercepts.len()
    }

    /// Number of features.
    pub fn n_features(&self) -> usize {
        self.n_features
    }

    /// The ridge penalty λ the members were fit with.
    pub fn penalty(&self) -> f64 {
        self.penalty
    }

    /// Intercept of every member.
    pub fn intercepts(&self) -> &[f64] {
        &self.intercepts
    }

    /// Coefficients, members × n_features row-major.
    pub fn coefficients(&self) -> &[f64] {
        &self.coefficients
    }

    /// Checks the internal consistency of a deserialised ensemble.
    ///
    /// # Errors
    /// `data` when sizes disagree or a value is not finite.
    pub fn validate(&self) -> Result<()> {
        let ok = self.n_features >= 1
            && !self.intercepts.is_empty()
            && Some(self.coefficients.len()) == self.intercepts.len().checked_mul(self.n_features)
            && self.penalty.is_finite()
            && self.penalty >= 0.0
            && self
                .intercepts
                .iter()
                .chain(&self.coefficients)
                .all(|v| v.is_finite());
        if ok {
            Ok(())
        } else {
            Err(Error::value("data", "is not a consistent linear ensemble"))
        }
    }

    #[inline]
    fn predict_row<T: Real>(&self, member: usize, x: ArrayView2<'_, T>, i: usize) -> f64 {
        let p = self.n_features;
        let beta = &self.coefficients[member * p..(member + 1) * p];
        let mut v = self.intercepts[member];
        for (j, b) in beta.iter().enumerate() {
            v += b * x[[i, j]].to_f64();
        }
        v
    }

    /// Writes every member's prediction at every point into `out` (members × n_points,
    /// row-major).
    ///
    /// # Errors
    /// `x` (columns, NaN/inf, empty); `out` of the wrong length.
    pub fn member_predictions_into<T: Real>(
        &self,
        x: ArrayView2<'_, T>,
        out: &mut [f64],
        pool: &Pool,
        monitor: &dyn Monitor,
    ) -> Result<()> {
        self.check_x(x)?;
        let n = x.nrows();
        if out.len() != n * self.members() {
            return Err(Error::value("out", "has the wrong length"));
        }
        let overflowed = AtomicBool::new(false);
        watched(pool, monitor, out.len(), |watch| {
            out.par_chunks_mut(n).enumerate().for_each(|(m, row)| {
                row.par_chunks_mut(POINT_CHUNK)
                    .enumerate()
                    .for_each(|(c, part)| {
                        // Between chunks of points, never inside the dot products.
                        if watch.stopped() {
                            return;
                        }
                        watch.advance(part.len());
                        for (k, slot) in part.iter_mut().enumerate() {
                            *slot = self.checked_row(m, x, c * POINT_CHUNK + k, &overflowed);
                        }
                    })
            })
        })?;
        overflow_check(&overflowed)
    }

    /// Writes each member's prediction on its out-of-bag rows of the training design `x`
    /// into `out` (members × n_rows), NaN where the member saw the row. Only out-of-bag
    /// rows are computed.
    ///
    /// # Errors
    /// As [`member_predictions_into`](Self::member_predictions_into); `counts` when the
    /// number of bags differs from the number of members.
    pub fn out_of_bag_into<T: Real>(
        &self,
        x: ArrayView2<'_, T>,
        bags: &dyn BagSource,
        out: &mut [f64],
        pool: &Pool,
        monitor: &dyn Monitor,
    ) -> Result<()> {
        self.check_x(x)?;
        if bags.n_members() != self.members() {
            return Err(Error::value(
                "counts",
                format!(
                    "has {} members but the ensemble has {}",
                    bags.n_members(),
                    self.members()
                ),
            ));
        }
        let n = x.nrows();
        if out.len() != n * self.members() {
            return Err(Error::value("out", "has the wrong length"));
        }
        let overflowed = AtomicBool::new(false);
        watched(pool, monitor, self.members(), |watch| {
            out.par_chunks_mut(n).enumerate().try_for_each(|(m, row)| {
                // Between members (one pass over the rows each).
                if watch.stopped() {
                    return Ok(());
                }
                watch.advance(1);
                // Read here, not all members' bags up front (see `BagSource`).
                let bag = bags.bag(m)?;
                row.fill(f64::NAN);
                let mut inside = bag.rows.iter().peekable();
                for (i, slot) in row.iter_mut().enumerate() {
                    if inside.next_if(|&&r| r == i).is_none() {
                        *slot = self.checked_row(m, x, i, &overflowed);
                    }
                }
                Ok(())
            })
        })??;
        overflow_check(&overflowed)
    }

    /// [`predict_row`](Self::predict_row), raising `overflowed` when the value is not
    /// finite (finite coefficients times finite points can still exceed the f64 range).
    #[inline]
    fn checked_row<T: Real>(
        &self,
        member: usize,
        x: ArrayView2<'_, T>,
        i: usize,
        overflowed: &AtomicBool,
    ) -> f64 {
        let v = self.predict_row(member, x, i);
        if !v.is_finite() {
            overflowed.store(true, Ordering::Relaxed);
        }
        v
    }
}

/// The error of a prediction beyond the f64 range, never returned as an infinity or NaN.
fn overflow_check(overflowed: &AtomicBool) -> Result<()> {
    if overflowed.load(Ordering::Relaxed) {
        Err(Error::value(
            "x",
            "gives a member prediction beyond the float64 range (intercept plus \
             coefficients times x overflows)",
        ))
    } else {
        Ok(())
    }
}

/// Unchecked parameters of the linear learner; [`LinearParams::check`] turns them into
/// [`CheckedLinearParams`].
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct LinearParams {
    /// Only [`Task::Regression`]: least squares has no class fractions.
    pub task: Task,
    /// The ridge penalty λ ≥ 0 (0: weighted least squares).
    pub penalty: f64,
}

/// Checked parameters of the linear learner.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct CheckedLinearParams {
    params: LinearParams,
}

impl LinearParams {
    /// The parameters of a fit's options; `task` must be "regression" (and `n_classes`
    /// absent).
    ///
    /// # Errors
    /// `task` naming anything else.
    pub fn from_options(task: &str, n_classes: Option<usize>, penalty: f64) -> Result<Self> {
        if task != "regression" || n_classes.is_some() {
            return Err(Error::value(
                "task",
                "the linear learner is for regression only",
            ));
        }
        Ok(LinearParams {
            task: Task::Regression,
            penalty,
        })
    }

    /// Checks the parameters that do not depend on the data.
    ///
    /// # Errors
    /// `task` other than regression; `penalty` negative or not finite.
    pub fn check(self) -> Result<CheckedLinearParams> {
        if self.task != Task::Regression {
            return Err(Error::value(
                "task",
                "the linear learner is for regression only",
            ));
        }
        check_penalty(self.penalty)?;
        Ok(CheckedLinearParams { params: self })
    }
}

impl CheckedLinearParams {
    /// The task (regression).
    pub fn task(&self) -> Task {
        self.params.task
    }

    /// Fits one member per bag (see [`LinearEnsemble::fit`]).
    ///
    /// # Errors
    /// As [`LinearEnsemble::fit`]; `y` holding class codes.
    pub fn fit<T: Real>(
        &self,
        x: ArrayView2<'_, T>,
        y: Targets<'_>,
        bags: &dyn BagSource,
        pool: &Pool,
        monitor: &dyn Monitor,
    ) -> Result<LinearEnsemble> {
        match y {
            Targets::Regression(y) => {
                LinearEnsemble::fit(x, y, bags, self.params.penalty, pool, monitor)
            }
            Targets::Classes(_) => Err(Error::value("y", "does not match the task")),
        }
    }
}

/// The one check of the ridge penalty.
fn check_penalty(penalty: f64) -> Result<()> {
    if !penalty.is_finite() || penalty < 0.0 {
        return Err(Error::value(
            "penalty",
            format!("must be a finite number >= 0, got {penalty}"),
        ));
    }
    Ok(())
}

impl FittedMembers for LinearEnsemble {
    fn n_members(&self) -> usize {
        self.members()
    }

    fn task(&self) -> Task {
        Task::Regression
    }

    fn n_features(&self) -> usize {
        self.n_features
    }

    fn member_predictions_into<T: Real>(
        &self,
        x: ArrayView2<'_, T>,
        out: &mut [f64],
        pool: &Pool,
        monitor: &dyn Monitor,
    ) -> Result<()> {
        LinearEnsemble::member_predictions_into(self, x, out, pool, monitor)
    }

    fn out_of_bag_into<T: Real, C: Count>(
        &self,
        x: ArrayView2<'_, T>,
        counts: ArrayView2<'_, C>,
        out: &mut [f64],
        pool: &Pool,
        monitor: &dyn Monitor,
    ) -> Result<()> {
        let bags = CountBags::of_counts(counts, x.nrows())?;
        LinearEnsemble::out_of_bag_into(self, x, &bags, out, pool, monitor)
    }

    fn join(parts: Vec<Self>) -> Result<Self> {
        check_parts(&parts)?;
        let penalty = parts[0].penalty;
        if let Some(k) = parts.iter().position(|part| part.penalty != penalty) {
            return Err(Error::value(
                "parts",
                format!(
                    "part {k} was fitted with penalty {} but part 0 with {penalty}",
                    parts[k].penalty
                ),
            ));
        }
        let mut joined = LinearEnsemble {
            n_features: parts[0].n_features,
            penalty,
            intercepts: Vec::new(),
            coefficients: Vec::new(),
        };
        for part in parts {
            joined.intercepts.extend(part.intercepts);
            joined.coefficients.extend(part.coefficients);
        }
        Ok(joined)
    }

    fn select(&self, members: &[usize]) -> Result<Self> {
        check_selection(members, self.intercepts.len())?;
        let p = self.n_features;
        Ok(LinearEnsemble {
            n_features: p,
            penalty: self.penalty,
            intercepts: members.iter().map(|&m| self.intercepts[m]).collect(),
            coefficients: members
                .iter()
                .flat_map(|&m| self.coefficients[m * p..(m + 1) * p].iter().copied())
                .collect(),
        })
    }

    fn encoded_len(&self) -> usize {
        crate::learners::postcard_len(self)
    }

    fn encode_into(&self, out: &mut [u8]) {
        crate::learners::postcard_into(self, out)
    }

    fn from_bytes(data: &[u8]) -> Result<Self> {
        let (ensemble, rest): (LinearEnsemble, &[u8]) =
            postcard::take_from_bytes(data).map_err(|e| {
                Error::value(
                    "data",
                    format!("is not a valid linear ensemble encoding ({e})"),
                )
            })?;
        if !rest.is_empty() {
            return Err(Error::value(
                "data",
                "has trailing bytes after the linear ensemble",
            ));
        }
        ensemble.validate()?;
        Ok(ensemble)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::learners::bags;
    use crate::parallel::{Silent, Threads};
    use approx::assert_relative_eq;
    use ndarray::{array, Array1, Array2};

    fn design(n: usize) -> (Array2<f64>, Array1<f64>) {
        let x = Array2::from_shape_fn((n, 3), |(i, j)| {
            ((i * 7 + j * 13) % 17) as f64 + 0.1 * (i * j) as f64 + 1000.0 * u8::from(j == 2) as f64
        });
        let y = Array1::from_shape_fn(n, |i| {
            2.0 + x[[i, 0]] - 0.5 * x[[i, 1]] + 0.25 * x[[i, 2]] + ((i % 5) as f64 - 2.0) * 0.1
        });
        (x, y)
    }

    #[test]
    fn member_ranges_joined_equal_the_whole_fit() {
        let (x, y) = design(60);
        let counts = Array2::from_shape_fn((5, 60), |(m, i)| ((i * (m + 3) + m) % 4) as u8);
        let pool = Threads::Fixed(2).pool().unwrap();
        let fit = |first: usize, end: usize| {
            let b = bags(counts.slice(ndarray::s![first..end, ..]), 60).unwrap();
            LinearEnsemble::fit(x.view(), y.view(), &b, 0.5, &pool, &Silent).unwrap()
        };
        let whole = fit(0, 5);
        let joined = LinearEnsemble::join(vec![fit(0, 2), fit(2, 3), fit(3, 5)]).unwrap();
        assert_eq!(joined, whole);
        crate::learners::check_select_contract(&whole, x.view());
        // Parts fitted with another penalty, or on other features, are refused.
        let b = bags(counts.slice(ndarray::s![..1, ..]), 60).unwrap();
        let other = LinearEnsemble::fit(x.view(), y.view(), &b, 1.0, &pool, &Silent).unwrap();
        let err = LinearEnsemble::join(vec![whole.clone(), other]).unwrap_err();
        assert!(err.to_string().contains("penalty"), "{err}");
        let narrow = x.slice(ndarray::s![.., ..2]);
        let other = LinearEnsemble::fit(narrow, y.view(), &b, 0.5, &pool, &Silent).unwrap();
        assert!(LinearEnsemble::join(vec![whole, other]).is_err());
        assert!(LinearEnsemble::join(Vec::new()).is_err());
    }

    #[test]
    fn bags_read_member_by_member_fit_the_same_ensemble() {
        let (x, y) = design(60);
        let mut counts = Array2::from_shape_fn((9, 60), |(m, i)| ((i * (m + 3) + m) % 4) as u8);
        let pool = Threads::Fixed(2).pool().unwrap();
        let all = bags(counts.view(), 60).unwrap();
        let lazy = crate::learners::CountBags::new(counts.view(), 60).unwrap();
        let fit = |source: &dyn BagSource| {
            LinearEnsemble::fit(x.view(), y.view(), source, 0.5, &pool, &Silent)
        };
        let ensemble = fit(&lazy).unwrap();
        assert_eq!(ensemble, fit(&all).unwrap());
        // Out-of-bag predictions, bags read from the counts member by member or prebuilt.
        let mut lazy_out = vec![0.0; 9 * 60];
        FittedMembers::out_of_bag_into(
            &ensemble,
            x.view(),
            counts.view(),
            &mut lazy_out,
            &pool,
            &Silent,
        )
        .unwrap();
        let mut all_out = vec![0.0; 9 * 60];
        ensemble
            .out_of_bag_into(x.view(), &all, &mut all_out, &pool, &Silent)
            .unwrap();
        let bits = |v: &[f64]| v.iter().map(|x| x.to_bits()).collect::<Vec<_>>();
        assert_eq!(bits(&lazy_out), bits(&all_out));
        assert!(lazy_out.iter().any(|v| v.is_nan()) && lazy_out.iter().any(|v| !v.is_nan()));
        // A member without in-bag rows is named by its index in the whole.
        counts.row_mut(7).fill(0);
        let lazy = crate::learners::CountBags::new(counts.view(), 60).unwrap();
        let err = fit(&lazy).unwrap_err().to_string();
        assert!(err.contains("member 7 has no in-bag row"), "{err}");
    }

    #[test]
    fn exact_data_recover_coefficients() {
        let x = array![[0.0, 1.0], [1.0, 0.0], [2.0, 3.0], [3.0, 1.0], [4.0, 5.0]];
        let y = x.column(0).mapv(|v| 1.0 + 2.0 * v) + &x.column(1).mapv(|v| -3.0 * v);
        let b = bags(array![[1u8, 2, 1, 1, 3]].view(), 5).unwrap();
        let pool = Threads::Fixed(1).pool().unwrap();
        let fit = LinearEnsemble::fit(x.view(), y.view(), &b, 0.0, &pool, &Silent).unwrap();
        assert_relative_eq!(fit.intercepts()[0], 1.0, epsilon = 1e-10);
        assert_relative_eq!(fit.coefficients()[0], 2.0, epsilon = 1e-10);
        assert_relative_eq!(fit.coefficients()[1], -3.0, epsilon = 1e-10);
    }

    #[test]
    fn weights_equal_repeated_rows_and_ridge_matches_normal_equations() {
        let (x, y) = design(40);
        let counts = Array2::from_shape_fn((1, 40), |(_, i)| (i % 3) as u8);
        let b = bags(counts.view(), 40).unwrap();
        let rows: Vec<usize> = (0..40).flat_map(|i| vec![i; i % 3]).collect();
        let xr = x.select(ndarray::Axis(0), &rows);
        let yr = y.select(ndarray::Axis(0), &rows);
        let ones = bags(Array2::<u8>::ones((1, rows.len())).view(), rows.len()).unwrap();
        let pool = Threads::Fixed(2).pool().unwrap();
        for penalty in [0.0, 3.0] {
            let a = LinearEnsemble::fit(x.view(), y.view(), &b, penalty, &pool, &Silent).unwrap();
            let r =
                LinearEnsemble::fit(xr.view(), yr.view(), &ones, penalty, &pool, &Silent).unwrap();
            for j in 0..3 {
                assert_relative_eq!(
                    a.coefficients()[j],
                    r.coefficients()[j],
                    max_relative = 1e-9
                );
            }
            assert_relative_eq!(a.intercepts()[0], r.intercepts()[0], max_relative = 1e-9);
            // The ridge solution satisfies (Xcᵀ W Xc + λI) β = Xcᵀ W yc on the original
            // scale (the stated objective's gradient is zero).
            let w: Vec<f64> = rows.iter().map(|_| 1.0).collect();
            let n = rows.len() as f64;
            let xm: Vec<f64> = (0..3).map(|j| xr.column(j).sum() / n).collect();
            let ym = yr.sum() / n;
            for j in 0..3 {
                let mut lhs = penalty * a.coefficients()[j];
                let mut rhs = 0.0;
                for (k, wi) in w.iter().enumerate() {
                    let xc: Vec<f64> = (0..3).map(|l| xr[[k, l]] - xm[l]).collect();
                    let fitted: f64 = (0..3).map(|l| xc[l] * a.coefficients()[l]).sum();
                    lhs += wi * xc[j] * fitted;
                    rhs += wi * xc[j] * (yr[k] - ym);
                }
                assert_relative_eq!(lhs, rhs, max_relative = 1e-8);
            }
        }
    }

    #[test]
    fn rank_deficiency_is_an_error_unless_penalised() {
        let x = array![[1.0, 2.0], [2.0, 4.0], [3.0, 6.0], [4.0, 8.0]];
        let y = array![1.0, 2.0, 3.0, 5.0];
        let b = bags(array![[1u8, 1, 1, 1]].view(), 4).unwrap();
        let pool = Threads::Fixed(1).pool().unwrap();
        let err = LinearEnsemble::fit(x.view(), y.view(), &b, 0.0, &pool, &Silent).unwrap_err();
        assert!(err.to_string().contains("rank deficient"), "{err}");
        let ridge = LinearEnsemble::fit(x.view(), y.view(), &b, 1.0, &pool, &Silent).unwrap();
        assert!(ridge.coefficients().iter().all(|c| c.is_finite()));
        // A constant column gets a zero coefficient under a penalty.
        let xc = array![[1.0, 5.0], [2.0, 5.0], [3.0, 5.0], [4.0, 5.0]];
        let fit = LinearEnsemble::fit(xc.view(), y.view(), &b, 0.5, &pool, &Silent).unwrap();
        assert_eq!(fit.coefficients()[1], 0.0);
        assert!(LinearEnsemble::fit(xc.view(), y.view(), &b, 0.0, &pool, &Silent).is_err());
        assert!(LinearEnsemble::fit(x.view(), y.view(), &b, -1.0, &pool, &Silent).is_err());
        let bad_y = array![1.0, f64::NAN, 3.0, 5.0];
        assert!(LinearEnsemble::fit(x.view(), bad_y.view(), &b, 1.0, &pool, &Silent).is_err());
    }

    #[test]
    fn predictions_do_not_depend_on_threads_and_out_of_bag_is_nan_in_bag() {
        let (x, y) = design(60);
        let counts = Array2::from_shape_fn((5, 60), |(m, i)| ((i * (m + 3)) % 4 == 0) as u8 * 2);
        let b = bags(counts.view(), 60).unwrap();
        let mut results = Vec::new();
        for t in [1, 2] {
            let pool = Threads::Fixed(t).pool().unwrap();
            let fit = LinearEnsemble::fit(x.view(), y.view(), &b, 0.0, &pool, &Silent).unwrap();
            let mut out = vec![0.0; 5 * 60];
            fit.member_predictions_into(x.view(), &mut out, &pool, &Silent)
                .unwrap();
            let mut oob = vec![0.0; 5 * 60];
            fit.out_of_bag_into(x.view(), &b, &mut oob, &pool, &Silent)
                .unwrap();
            for m in 0..5 {
                for i in 0..60 {
                    let v = oob[m * 60 + i];
                    if counts[[m, i]] > 0 {
                        assert!(v.is_nan());
                    } else {
                        assert_eq!(v, out[m * 60 + i]);
                    }
                }
            }
            results.push(out);
        }
        assert_eq!(results[0], results[1]);
    }
}
