//! Spread of ensembles refitted on independent training sets: how much of a member's
//! variance averaging can remove, and the bias–variance–covariance split of the error.
//!
//! `members[r, m, i]` is the prediction t_{r,m,i} of member m of the ensemble fitted on
//! training set (replicate) r, at point i; R replicates of M members each.
//!
//! ```text
//! One-way random-effects ANOVA per point (e.g. Searle, Casella & McCulloch 1992,
//! "Variance Components", §3.5), replicates as groups:
//!   f_r   = (1/M) Σ_m t_{r,m}                               ensemble mean of replicate r
//!   MSW   = Σ_r Σ_m (t_{r,m} − f_r)² / (R(M − 1))           pooled within-replicate variance
//!   MSB   = M · Σ_r (f_r − f̄)² / (R − 1)                    f̄ = (1/R) Σ_r f_r
//!   within  = MSW                      E = σ²(1 − ρ)
//!   variance = MSB / M                observed variance of the M-member ensemble mean
//!   between = (MSB − MSW) / M          E = ρσ², unbiased, may be negative from noise
//!   σ² = between + within,   ρ = between⁺ / (between⁺ + within),  between⁺ = max(between, 0)
//! Hastie, Tibshirani & Friedman (2009), The Elements of Statistical Learning, 2nd ed.,
//! §15.2 eq. 15.1: Var(f_M) = ρσ² + (1 − ρ)σ²/M, estimated as between⁺ + within/M.
//! ```
//!
//! With targets y, the bias–variance–covariance split of the expected squared error of the
//! ensemble mean over training sets (Ueda & Nakano 1996, "Generalization error of ensemble
//! estimators", ICNN), with moments over the R replicates taken with ddof 0 so that the
//! terms add up exactly to the replicates' mean squared error:
//!
//! ```text
//!   bias_i   = (1/M) Σ_m (E_r[t_{r,m}] − y_i) = f̄ − y_i
//!   member_variance_i = (1/M) Σ_m Var_r(t_{r,m})
//!   covar_i  = 1/(M(M − 1)) Σ_{m ≠ m'} Cov_r(t_{r,m}, t_{r,m'})
//!            = (M² Var_r(f_r) − Σ_m Var_r(t_{r,m})) / (M(M − 1))
//!   E_r[(f_r − y_i)²] = bias_i² + member_variance_i / M + (1 − 1/M) covar_i
//! ```

use ndarray::{s, ArrayView1, ArrayView3};
use rayon::prelude::*;

use serde::{Deserialize, Serialize};

use crate::error::{Error, Result};
use crate::members::MergeableState;
use crate::numeric::{Moments, Real};
use crate::out_of_bag::Sum;
use crate::parallel::{Monitor, Pool};

/// The per-point rows of [`replicate_spread`]'s output buffer, in order: the first
/// [`Row::WITHOUT_Y`] always, all [`Row::WITH_Y`] with targets.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Row {
    /// Pooled within-replicate member variance (ddof 1), (1 − ρ)σ².
    Within,
    /// Unbiased between-replicate variance of the infinite ensemble's mean, ρσ² (may be
    /// negative).
    Between,
    /// Observed variance of the replicate ensemble means f_r, MSB / M (ddof 1).
    Variance,
    /// With targets: bias f̄ − y (signed).
    Bias,
    /// With targets: mean over members of a member's variance over replicates (ddof 0).
    MemberVariance,
    /// With targets: mean pairwise member covariance over replicates (ddof 0).
    Covariance,
    /// With targets: mean over replicates of (f_r − y)².
    ExpectedSquaredError,
}

impl Row {
    /// Rows without targets.
    pub const WITHOUT_Y: usize = 3;
    /// Rows with targets.
    pub const WITH_Y: usize = 7;

    /// Rows of the output buffer for `with_y`.
    pub const fn count(with_y: bool) -> usize {
        if with_y {
            Self::WITH_Y
        } else {
            Self::WITHOUT_Y
        }
    }

    /// Position of this row in the buffer.
    pub const fn index(self) -> usize {
        self as usize
    }
}

/// Per-point outputs, each of length points (slices of the one output buffer).
struct SpreadOutputs<'a> {
    within: &'a mut [f64],
    between: &'a mut [f64],
    variance: &'a mut [f64],
    split: Option<[&'a mut [f64]; 4]>,
}

impl<'a> SpreadOutputs<'a> {
    /// Splits a rows × points buffer (row-major, rows in [`Row`] order) into the outputs.
    fn split(out: &'a mut [f64], points: usize, with_y: bool) -> Result<Self> {
        if out.len() != Row::count(with_y) * points {
            return Err(Error::value(
                "members",
                "output buffer does not match the input shape",
            ));
        }
        let mut rows = out.chunks_mut(points.max(1));
        let mut next = || rows.next().unwrap_or_default();
        let (within, between, variance) = (next(), next(), next());
        let split = with_y.then(|| [next(), next(), next(), next()]);
        Ok(SpreadOutputs {
            within,
            between,
            variance,
            split,
        })
    }
}

/// Means over points of the per-point quantities (NaN where undefined, e.g. one member).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct SpreadSummary {
    pub mean_within: f64,
    pub mean_between: f64,
    /// Mean over points of the observed variance of the replicate ensemble means.
    pub mean_variance: f64,
    /// Points whose between-replicate estimate is below zero.
    pub n_negative_between: u64,
    /// Mean of bias_i² (NaN without targets).
    pub mean_bias_squared: f64,
    pub mean_member_variance: f64,
    pub mean_covariance: f64,
    pub mean_expected_squared_error: f64,
}

const BLOCK_POINTS: usize = 512;

/// Within- and between-replicate variances per point and averaged over points, and with
/// `y` the bias–variance–covariance split (see the module documentation).
///
/// `out` is a rows × points buffer (row-major) with [`Row::count`]`(y.is_some())` rows in
/// [`Row`] order; each row receives one per-point quantity.
///
/// # Errors
/// `members` for fewer than 2 replicates, no member or point, NaN/inf predictions or an
/// `out` of the wrong length; `y` for a wrong length or non-finite targets;
/// [`Error::Interrupted`].
pub fn replicate_spread<T: Real>(
    members: ArrayView3<'_, T>,
    y: Option<ArrayView1<'_, f64>>,
    out: &mut [f64],
    pool: &Pool,
    monitor: &dyn Monitor,
) -> Result<SpreadSummary> {
    let sums = spread_sums(members, y, out, pool, monitor)?;
    Ok(sums.summary(members.dim().2 as u64, y.is_some()))
}

/// The per-point rows of [`replicate_spread`] and the sums over the points behind its
/// means.
fn spread_sums<T: Real>(
    members: ArrayView3<'_, T>,
    y: Option<ArrayView1<'_, f64>>,
    out: &mut [f64],
    pool: &Pool,
    monitor: &dyn Monitor,
) -> Result<BlockSums> {
    let (r, m, n) = members.dim();
    if r < 2 {
        return Err(Error::value(
            "members",
            format!("needs at least 2 replicates (independent training sets), got {r}"),
        ));
    }
    if m == 0 || n == 0 {
        return Err(Error::value(
            "members",
            format!("needs at least one member and one point, got shape ({r}, {m}, {n})"),
        ));
    }
    if let Some(y) = &y {
        if y.len() != n {
            return Err(Error::value(
                "y",
                format!("has {} values but `members` has {n} points", y.len()),
            ));
        }
        if let Some(j) = y.iter().position(|v| !v.is_finite()) {
            return Err(Error::value(
                "y",
                format!("targets must be finite; point {j} is {}", y[j]),
            ));
        }
    }
    let out = SpreadOutputs::split(out, n, y.is_some())?;

    let mut split = out.split.map(|s| s.map(|row| row.chunks_mut(BLOCK_POINTS)));
    let mut jobs = Vec::with_capacity(n.div_ceil(BLOCK_POINTS));
    for (i, ((within, between), ensemble)) in out
        .within
        .chunks_mut(BLOCK_POINTS)
        .zip(out.between.chunks_mut(BLOCK_POINTS))
        .zip(out.variance.chunks_mut(BLOCK_POINTS))
        .enumerate()
    {
        let parts = split.as_mut().map(|[a, b, c, d]| {
            [
                a.next().expect("same length"),
                b.next().expect("same length"),
                c.next().expect("same length"),
                d.next().expect("same length"),
            ]
        });
        jobs.push(Block {
            start: i * BLOCK_POINTS,
            within,
            between,
            ensemble,
            split: parts,
        });
    }

    let total = jobs.len();
    let per_round = 8 * pool.threads().max(1);
    let mut done = 0;
    let mut sums = BlockSums::default();
    let mut jobs = jobs.into_iter();
    loop {
        let round: Vec<Block<'_>> = jobs.by_ref().take(per_round).collect();
        if round.is_empty() {
            break;
        }
        let k = round.len();
        let results: Vec<Result<BlockSums>> = pool.run(|| {
            round
                .into_par_iter()
                .map(|job| job.run(members, y))
                .collect()
        });
        for result in results {
            sums.merge(&result?);
        }
        done += k;
        monitor.progress(done, total)?;
    }
    Ok(sums)
}

/// Sums over a block of points of the per-point quantities, merged in point order.
#[derive(Debug, Default, Clone, Copy, PartialEq, Serialize, Deserialize)]
struct BlockSums {
    within: Sum,
    between: Sum,
    ensemble: Sum,
    negative: u64,
    bias_squared: Sum,
    variance: Sum,
    covariance: Sum,
    expected: Sum,
}

impl BlockSums {
    /// The means over `n` points (those needing targets NaN without them).
    fn summary(&self, n: u64, with_y: bool) -> SpreadSummary {
        let nf = n as f64;
        let with_y = |s: &Sum| if with_y { s.value() / nf } else { f64::NAN };
        SpreadSummary {
            mean_within: self.within.value() / nf,
            mean_between: self.between.value() / nf,
            mean_variance: self.ensemble.value() / nf,
            n_negative_between: self.negative,
            mean_bias_squared: with_y(&self.bias_squared),
            mean_member_variance: with_y(&self.variance),
            mean_covariance: with_y(&self.covariance),
            mean_expected_squared_error: with_y(&self.expected),
        }
    }

    fn merge(&mut self, other: &BlockSums) {
        self.within.merge(&other.within);
        self.between.merge(&other.between);
        self.ensemble.merge(&other.ensemble);
        self.negative += other.negative;
        self.bias_squared.merge(&other.bias_squared);
        self.variance.merge(&other.variance);
        self.covariance.merge(&other.covariance);
        self.expected.merge(&other.expected);
    }
}

/// One block of points and its slices of the outputs.
struct Block<'a> {
    start: usize,
    within: &'a mut [f64],
    between: &'a mut [f64],
    ensemble: &'a mut [f64],
    split: Option<[&'a mut [f64]; 4]>,
}

impl Block<'_> {
    fn run<T: Real>(
        self,
        members: ArrayView3<'_, T>,
        y: Option<ArrayView1<'_, f64>>,
    ) -> Result<BlockSums> {
        let rows = self.within.len();
        let (r, m, _) = members.dim();
        let block = members.slice(s![.., .., self.start..self.start + rows]);
        // replicate[r * rows + j]: moments over members; member[k * rows + j]: over replicates.
        let mut replicate = vec![Moments::default(); r * rows];
        let mut member = vec![Moments::default(); m * rows];
        for ri in 0..r {
            for mi in 0..m {
                let row = block.slice(s![ri, mi, ..]);
                let rep = &mut replicate[ri * rows..(ri + 1) * rows];
                let mem = &mut member[mi * rows..(mi + 1) * rows];
                for (j, (&t, (a, b))) in row
                    .iter()
                    .zip(rep.iter_mut().zip(mem.iter_mut()))
                    .enumerate()
                {
                    let t = t.to_f64();
                    if !t.is_finite() {
                        return Err(Error::value(
                            "members",
                            format!(
                                "contains NaN or infinite predictions (replicate {ri}, member \
                                 {mi}, point {})",
                                self.start + j
                            ),
                        ));
                    }
                    a.push(t);
                    b.push(t);
                }
            }
        }
        let mf = m as f64;
        let mut sums = BlockSums::default();
        let mut split = self.split;
        for j in 0..rows {
            let mut means = Moments::default();
            let mut pooled = Sum::default();
            for ri in 0..r {
                let a = &replicate[ri * rows + j];
                means.push(a.mean());
                pooled.add(a.variance(1));
            }
            let within = pooled.value() / r as f64;
            let msb = mf * means.variance(1);
            let between = (msb - within) / mf;
            self.within[j] = within;
            self.between[j] = between;
            self.ensemble[j] = means.variance(1);
            sums.within.add(within);
            sums.between.add(between);
            sums.ensemble.add(means.variance(1));
            sums.negative += u64::from(between < 0.0);
            if let (Some([bias_out, var_out, cov_out, err_out]), Some(y)) = (split.as_mut(), &y) {
                let target = y[self.start + j];
                let bias = means.mean() - target;
                let mut member_variance = Sum::default();
                for mi in 0..m {
                    member_variance.add(member[mi * rows + j].variance(0));
                }
                let variance = member_variance.value() / mf;
                let ensemble0 = means.variance(0);
                let covariance = if m > 1 {
                    (mf * mf * ensemble0 - member_variance.value()) / (mf * (mf - 1.0))
                } else {
                    f64::NAN
                };
                let mut error = Sum::default();
                for ri in 0..r {
                    let d = replicate[ri * rows + j].mean() - target;
                    error.add(d * d);
                }
                let expected = error.value() / r as f64;
                bias_out[j] = bias;
                var_out[j] = variance;
                cov_out[j] = covariance;
                err_out[j] = expected;
                sums.bias_squared.add(bias * bias);
                sums.variance.add(variance);
                sums.covariance.add(covariance);
                sums.expected.add(expected);
            }
        }
        Ok(sums)
    }
}

// -- replicate spread stream ---------------------------------------------------------------

/// The replicate spread fed chunk by chunk of points: every point's quantities depend on
/// that point alone, so a chunk's per-point rows are final when it is added; the state
/// keeps the shape, whether targets came, the number of points and the compensated sums
/// behind the means over points (merged in point order, Neumaier 1974). State: 16 floats
/// and three integers, whatever the number of points.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
pub struct ReplicateSpreadState {
    shape: Option<(usize, usize)>,
    with_y: Option<bool>,
    count: u64,
    sums: BlockSums,
}

impl ReplicateSpreadState {
    /// An empty state (replicates, members and targets are fixed by the first chunk).
    pub fn new() -> Self {
        ReplicateSpreadState::default()
    }

    /// (replicates, members) after the first chunk.
    pub fn shape(&self) -> Option<(usize, usize)> {
        self.shape
    }

    /// Number of points seen.
    pub fn n_points(&self) -> u64 {
        self.count
    }

    /// Whether the chunks came with targets (after the first chunk).
    pub fn with_y(&self) -> Option<bool> {
        self.with_y
    }

    fn fix(&mut self, shape: (usize, usize), with_y: bool, argument: &'static str) -> Result<()> {
        if let Some(known) = self.shape {
            if known != shape {
                return Err(Error::value(
                    argument,
                    format!(
                        "has {} replicates of {} members but earlier chunks had {} of {}",
                        shape.0, shape.1, known.0, known.1
                    ),
                ));
            }
        }
        if let Some(known) = self.with_y {
            if known != with_y {
                let (now, before) = if with_y {
                    ("with", "without")
                } else {
                    ("without", "with")
                };
                let argument = if argument == "members" { "y" } else { argument };
                return Err(Error::value(
                    argument,
                    format!("this chunk comes {now} targets but earlier chunks came {before}"),
                ));
            }
        }
        self.shape = Some(shape);
        self.with_y = Some(with_y);
        Ok(())
    }

    /// Adds a chunk of points (every replicate and member), writing its per-point rows to
    /// `out` as [`replicate_spread`] does.
    ///
    /// # Errors
    /// As [`replicate_spread`]; `members` when the replicates or members differ from earlier
    /// chunks', `y` when targets come for some chunks only.
    pub fn update<T: Real>(
        &mut self,
        members: ArrayView3<'_, T>,
        y: Option<ArrayView1<'_, f64>>,
        out: &mut [f64],
        pool: &Pool,
        monitor: &dyn Monitor,
    ) -> Result<()> {
        let (r, m, n) = members.dim();
        let mut next = self.clone();
        next.fix((r, m), y.is_some(), "members")?;
        let sums = spread_sums(members, y, out, pool, monitor)?;
        next.sums.merge(&sums);
        next.count += n as u64;
        *self = next;
        Ok(())
    }
}

impl MergeableState for ReplicateSpreadState {
    type Output = SpreadSummary;

    fn merge(&mut self, other: Self) -> Result<()> {
        if let (Some(shape), Some(with_y)) = (other.shape, other.with_y) {
            self.fix(shape, with_y, "other")?;
        }
        self.sums.merge(&other.sums);
        self.count += other.count;
        Ok(())
    }

    fn finish(&self) -> Result<SpreadSummary> {
        if self.count == 0 {
            return Err(Error::value("members", "no points were added"));
        }
        Ok(self.sums.summary(self.count, self.with_y == Some(true)))
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::parallel::{Silent, Threads};
    use approx::assert_relative_eq;
    use ndarray::{Array1, Array3};

    struct Out {
        within: Vec<f64>,
        between: Vec<f64>,
        ensemble: Vec<f64>,
        split: [Vec<f64>; 4],
        summary: SpreadSummary,
    }

    fn run(members: ArrayView3<'_, f64>, y: Option<&[f64]>, pool: &Pool) -> Result<Out> {
        let n = members.dim().2;
        let mut buffer = vec![0.0; Row::count(y.is_some()) * n];
        let summary =
            replicate_spread(members, y.map(ArrayView1::from), &mut buffer, pool, &Silent)?;
        let row = |r: Row| {
            buffer
                .get(r.index() * n..(r.index() + 1) * n)
                .unwrap_or_default()
                .to_vec()
        };
        Ok(Out {
            within: row(Row::Within),
            between: row(Row::Between),
            ensemble: row(Row::Variance),
            split: [
                row(Row::Bias),
                row(Row::MemberVariance),
                row(Row::Covariance),
                row(Row::ExpectedSquaredError),
            ],
            summary,
        })
    }

    #[test]
    fn hand_computed_anova() {
        // Point 0: replicate 0 members (1, 3), replicate 1 members (5, 7).
        // f = (2, 6); MSW = ((1+1) + (1+1)) / (2·1) = 2; MSB = 2 · Var(2, 6) = 2 · 8 = 16;
        // between = (16 − 2)/2 = 7.
        let t = Array3::from_shape_vec((2, 2, 1), vec![1.0, 3.0, 5.0, 7.0]).unwrap();
        let out = run(t.view(), Some(&[3.0]), &Pool::Global).unwrap();
        assert_relative_eq!(out.within[0], 2.0);
        assert_relative_eq!(out.between[0], 7.0);
        assert_relative_eq!(out.ensemble[0], 8.0);
        // Split: bias = 4 − 3 = 1; member variances (ddof 0) over replicates: 4, 4 → 4;
        // Var0(f) = 4 → covar = (4·4 − 8)/2 = 4; E(f − y)² = ((2−3)² + (6−3)²)/2 = 5
        //   = 1 + 4/2 + (1/2)·4.
        let [bias, var, cov, err] = &out.split;
        assert_relative_eq!(bias[0], 1.0);
        assert_relative_eq!(var[0], 4.0);
        assert_relative_eq!(cov[0], 4.0);
        assert_relative_eq!(err[0], 5.0);
        assert_relative_eq!(out.summary.mean_expected_squared_error, 5.0);
        assert_eq!(out.summary.n_negative_between, 0);
    }

    #[test]
    fn split_adds_up_and_threads_do_not_matter() {
        let (r, m, n) = (5, 4, 3000);
        let t = Array3::from_shape_fn((r, m, n), |(a, b, c)| {
            (((a * 13 + b * 7 + c * 3) % 17) as f64).sin() + c as f64 * 1e-3
        });
        let y: Array1<f64> = (0..n).map(|c| (c % 5) as f64 * 0.1).collect();
        let one = Threads::Fixed(1).pool().unwrap();
        let two = Threads::Fixed(2).pool().unwrap();
        let a = run(t.view(), y.as_slice(), &one).unwrap();
        let b = run(t.view(), y.as_slice(), &two).unwrap();
        assert_eq!(a.summary, b.summary);
        let mf = m as f64;
        for j in 0..n {
            let [bias, var, cov, err] = &a.split;
            let sum = bias[j] * bias[j] + var[j] / mf + (1.0 - 1.0 / mf) * cov[j];
            assert_relative_eq!(sum, err[j], max_relative = 1e-12, epsilon = 1e-14);
        }
        assert!(a.summary.n_negative_between > 0);
    }

    #[test]
    fn errors_and_one_member() {
        let t = Array3::<f64>::zeros((1, 3, 2));
        assert!(matches!(
            run(t.view(), None, &Pool::Global),
            Err(Error::InvalidValue {
                argument: "members",
                ..
            })
        ));
        let mut t = Array3::<f64>::zeros((2, 3, 2));
        t[[1, 2, 1]] = f64::NAN;
        assert!(matches!(
            run(t.view(), None, &Pool::Global),
            Err(Error::InvalidValue {
                argument: "members",
                ..
            })
        ));
        let t = Array3::<f64>::zeros((2, 3, 2));
        let mut short = vec![0.0; Row::WITHOUT_Y * 2 - 1];
        assert!(matches!(
            replicate_spread(t.view(), None, &mut short, &Pool::Global, &Silent),
            Err(Error::InvalidValue {
                argument: "members",
                ..
            })
        ));
        assert!(matches!(
            run(t.view(), Some(&[1.0]), &Pool::Global),
            Err(Error::InvalidValue { argument: "y", .. })
        ));
        let t = Array3::from_shape_fn((3, 1, 2), |(a, _, c)| (a + c) as f64);
        let out = run(t.view(), Some(&[0.0, 0.0]), &Pool::Global).unwrap();
        assert!(out.summary.mean_within.is_nan() && out.summary.mean_between.is_nan());
        assert!(out.summary.mean_covariance.is_nan());
    }
    #[test]
    fn targets_beyond_the_first_block_are_read_at_their_point() {
        // Every member predicts 0 and y_i = i, so bias_i = −i and E(f − y)² = i² at every
        // point, in every block of points.
        let n = 2 * BLOCK_POINTS + 7;
        let t = Array3::<f64>::zeros((3, 2, n));
        let y: Array1<f64> = (0..n).map(|i| i as f64).collect();
        let out = run(t.view(), y.as_slice(), &Pool::Global).unwrap();
        for i in [0, BLOCK_POINTS - 1, BLOCK_POINTS, n - 1] {
            assert_eq!(out.split[0][i], -(i as f64));
            assert_eq!(out.split[3][i], (i * i) as f64);
        }
    }

    #[test]
    fn stream_in_chunks_matches_one_pass() {
        let (r, m, n) = (4, 3, 1500);
        let t = Array3::from_shape_fn((r, m, n), |(a, b, c)| {
            (((a * 11 + b * 5 + c * 7) % 13) as f64).cos() + c as f64 * 1e-3
        });
        let y: Array1<f64> = (0..n).map(|c| (c % 3) as f64 * 0.2).collect();
        let whole = run(t.view(), y.as_slice(), &Pool::Global).unwrap();
        let mut rows = Vec::new();
        let mut first = ReplicateSpreadState::new();
        let mut second = ReplicateSpreadState::new();
        for (which, range) in [(0, 0..1), (0, 1..700), (1, 700..n)] {
            let state = if which == 0 { &mut first } else { &mut second };
            let mut out = vec![0.0; Row::WITH_Y * range.len()];
            state
                .update(
                    t.slice(s![.., .., range.clone()]),
                    Some(y.slice(s![range.clone()])),
                    &mut out,
                    &Pool::Global,
                    &Silent,
                )
                .unwrap();
            rows.push((range, out));
        }
        let mut first = ReplicateSpreadState::from_bytes(&first.to_bytes().unwrap()).unwrap();
        first.merge(second).unwrap();
        let summary = first.finish().unwrap();
        assert_eq!(first.n_points(), n as u64);
        assert_eq!(summary.n_negative_between, whole.summary.n_negative_between);
        assert_relative_eq!(
            summary.mean_within,
            whole.summary.mean_within,
            max_relative = 1e-14
        );
        assert_relative_eq!(
            summary.mean_between,
            whole.summary.mean_between,
            max_relative = 1e-13
        );
        assert_relative_eq!(
            summary.mean_covariance,
            whole.summary.mean_covariance,
            max_relative = 1e-13
        );
        for (range, out) in rows {
            let len = range.len();
            for (j, c) in range.enumerate() {
                assert_eq!(out[Row::Within.index() * len + j], whole.within[c]);
                assert_eq!(out[Row::Between.index() * len + j], whole.between[c]);
                assert_eq!(out[Row::Bias.index() * len + j], whole.split[0][c]);
            }
        }
    }

    #[test]
    fn stream_errors() {
        let t = Array3::from_shape_fn((2, 3, 4), |(a, b, c)| (a + b * c) as f64);
        let mut out = vec![0.0; Row::WITH_Y * 4];
        let mut state = ReplicateSpreadState::new();
        assert!(matches!(
            state.finish(),
            Err(Error::InvalidValue {
                argument: "members",
                ..
            })
        ));
        state
            .update(t.view(), None, &mut out[..12], &Pool::Global, &Silent)
            .unwrap();
        let y = Array1::zeros(4);
        assert!(matches!(
            state.update(t.view(), Some(y.view()), &mut out, &Pool::Global, &Silent),
            Err(Error::InvalidValue { argument: "y", .. })
        ));
        assert!(matches!(
            state.update(
                t.slice(s![.., ..2, ..]),
                None,
                &mut out[..12],
                &Pool::Global,
                &Silent
            ),
            Err(Error::InvalidValue {
                argument: "members",
                ..
            })
        ));
        assert_eq!(state.n_points(), 4);
        let mut other = ReplicateSpreadState::new();
        other
            .update(t.view(), Some(y.view()), &mut out, &Pool::Global, &Silent)
            .unwrap();
        assert!(matches!(
            state.merge(other),
            Err(Error::InvalidValue {
                argument: "other",
                ..
            })
        ));
    }
}
