//! Spread and correlation of the members' residuals r_b = t_b − y: per-member residual
//! variances, their mean pairwise covariance and correlation without the M × M matrix, and
//! the full matrix from a blocked Gram computation.

use std::ops::Range;

use ndarray::{s, Array2, ArrayView1, ArrayView2};
use rayon::prelude::*;

use crate::decomposition::{non_finite_members, value_target};
use crate::error::{Error, Result};
use crate::members::{for_chunks, no_slots, Chunks, Members, MergeableState};
use crate::numeric::{Moments, Real};
use crate::parallel::{Monitor, Pool};
use serde::{Deserialize, Serialize};

/// Residual spread and correlation of the members.
#[derive(Debug, Clone, PartialEq)]
pub struct ResidualCorrelation {
    /// Variance (ddof 1) across points of every member's residual r_b = t_b − y.
    pub residual_variance: Vec<f64>,
    /// Mean of `residual_variance` over members.
    pub mean_residual_variance: f64,
    /// Mean over pairs a ≠ b of the residual covariance (ddof 1); NaN for M = 1.
    pub mean_residual_covariance: f64,
    /// Mean over pairs of non-constant members of the residual correlation; NaN when fewer
    /// than two members have non-constant residuals.
    pub mean_residual_correlation: f64,
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
    Members::Values(members).check_targets(y.len())?;
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
    let chunks = Chunks::of(n);
    let mut per_member = vec![Moments::default(); m];
    let work = |points: Range<usize>, _: &mut ()| {
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
    };
    let merge = |part: Vec<Moments>| {
        for (acc, p) in per_member.iter_mut().zip(&part) {
            *acc = acc.merge(p);
        }
        Ok(())
    };
    for_chunks(chunks, &mut no_slots(chunks), pool, monitor, work, merge)?;
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
    let (mut plain, mut standard) = (Moments::default(), Moments::default());
    let work = |points: Range<usize>, _: &mut ()| {
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
    };
    let merge = |(a, b): (Moments, Moments)| {
        plain = plain.merge(&a);
        standard = standard.merge(&b);
        Ok(())
    };
    for_chunks(chunks, &mut no_slots(chunks), pool, monitor, work, merge)?;
    let k = constant.iter().filter(|&&c| !c).count() as f64;
    // The variance of a sum is the sum of every (ordered) covariance.
    let ordered_covariance = plain.variance(1) - variance.iter().sum::<f64>();
    let ordered_correlation = standard.variance(1) - k;
    Ok(ResidualCorrelation::from_pair_sums(
        variance,
        ordered_covariance,
        ordered_correlation,
        &constant,
    ))
}

impl ResidualCorrelation {
    /// The result from each member's residual variance and the sums, over ordered pairs of
    /// different members, of their residual covariance and (non-constant members only)
    /// correlation: the one finish of the two-pass routine and of `CorrelationState`.
    fn from_pair_sums(
        variance: Vec<f64>,
        ordered_covariance: f64,
        ordered_correlation: f64,
        constant: &[bool],
    ) -> Self {
        let m = variance.len();
        let constant_members: Vec<usize> = (0..m).filter(|&b| constant[b]).collect();
        let k = (m - constant_members.len()) as f64;
        let pairs = (m as f64) * (m as f64 - 1.0);
        let mean_residual_covariance = if m > 1 {
            ordered_covariance / pairs
        } else {
            f64::NAN
        };
        let mean_residual_correlation = if k >= 2.0 {
            ordered_correlation / (k * (k - 1.0))
        } else {
            f64::NAN
        };
        ResidualCorrelation {
            mean_residual_variance: variance.iter().sum::<f64>() / m as f64,
            residual_variance: variance,
            mean_residual_covariance,
            mean_residual_correlation,
            constant_members,
        }
    }
}

/// A residual is constant when its spread is within rounding of the values it came from:
/// s ≤ 16 ε (rms(r) + rms(y)); r = t − y then varies only by the rounding of the difference.
fn is_constant(residual: &Moments, target_rms: f64) -> bool {
    constant_spread(
        residual.mean(),
        residual.variance(0),
        residual.variance(1),
        target_rms,
    )
}

/// [`is_constant`] from a residual's mean and variances with ddof 0 and 1.
fn constant_spread(mean: f64, variance0: f64, variance1: f64, target_rms: f64) -> bool {
    let rms = (variance0 + mean * mean).sqrt();
    variance1.sqrt() <= 16.0 * f64::EPSILON * (rms + target_rms)
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
    Members::Values(members).check_targets(y.len())?;
    if out.len() != m * m {
        return Err(Error::value("out", format!("must hold {m} x {m} values")));
    }
    if y.iter().any(|v| !v.is_finite()) {
        return Err(Error::value("y", "contains NaN or infinite values"));
    }
    // Means (chunked, merged in order) for centring.
    let chunks = Chunks::of(n);
    let mut merged = vec![Moments::default(); m];
    let work = |points: Range<usize>, _: &mut ()| {
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
    };
    let merge = |part: Vec<Moments>| {
        for (acc, p) in merged.iter_mut().zip(&part) {
            *acc = acc.merge(p);
        }
        Ok(())
    };
    for_chunks(chunks, &mut no_slots(chunks), pool, monitor, work, merge)?;
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

// -- correlation stream --------------------------------------------------------------------

/// The residual co-moments of a stream of points, mergeable in one pass: the member count,
/// the number of points, every member's residual mean and the co-moment matrix (upper
/// triangle, row-major, diagonal included), and the moments of the targets (for the
/// constant-residual test).
///
/// ```text
/// r_bj = t_bj − y_j over the n points seen;  μ_b = mean_j r_bj;
/// C_ab = Σ_j (r_aj − μ_a)(r_bj − μ_b)        (C_bb the member's sum of squared deviations)
/// Merging states A (n_A points) and B (n_B points), n = n_A + n_B, δ_b = μ_b^B − μ_b^A:
///   μ_b  = μ_b^A + δ_b n_B / n
///   C_ab = C_ab^A + C_ab^B + δ_a δ_b n_A n_B / n
/// (Chan, Golub & LeVeque 1979/1983, the pairwise update of sums of squares, applied to
/// the cross products). Finished:
///   residual_variance_b = C_bb / (n − 1)
///   mean_residual_covariance  = Σ_{a≠b} C_ab / ((n − 1) M (M − 1))
///   corr_ab = C_ab / √(C_aa C_bb),  mean_residual_correlation = Σ_{a≠b, both varying}
///             corr_ab / (K (K − 1))
/// the same quantities as [`residual_correlation`] (which reaches them through the
/// variance of a sum in O(M) memory) and [`correlation_matrix`]. State: M(M + 3)/2 + 5
/// floats; work O(M² n / 2).
/// ```
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
pub struct CorrelationState {
    members: Option<usize>,
    count: u64,
    means: Vec<f64>,
    comoments: Vec<f64>,
    target: Moments,
}

/// Position of (a, b), a ≤ b, in the packed upper triangle of an m × m matrix.
#[inline]
fn packed(m: usize, a: usize, b: usize) -> usize {
    a * (2 * m - a + 1) / 2 + (b - a)
}

impl CorrelationState {
    /// An empty state (the member count is fixed by the first chunk).
    pub fn new() -> Self {
        CorrelationState::default()
    }

    /// Number of members (after the first chunk).
    pub fn members(&self) -> Option<usize> {
        self.members
    }

    /// Number of points seen.
    pub fn n_points(&self) -> u64 {
        self.count
    }

    /// The state of one block of points, computed directly (two passes over the block).
    fn of_block<T: Real>(
        members: ArrayView2<'_, T>,
        y: ArrayView1<'_, f64>,
        points: Range<usize>,
    ) -> Result<CorrelationState> {
        let m = members.nrows();
        let len = points.len();
        let mut target = Vec::new();
        value_target(y, &points, &mut target)?;
        let mut centred = vec![0.0; m * len];
        let mut means = vec![0.0; m];
        for (b, mean) in means.iter_mut().enumerate() {
            let row = &mut centred[b * len..(b + 1) * len];
            for ((x, &t), &v) in row
                .iter_mut()
                .zip(members.slice(s![b, points.clone()]))
                .zip(&target)
            {
                *x = t.to_f64() - v;
            }
            *mean = row.iter().sum::<f64>() / len as f64;
            if !mean.is_finite() {
                return Err(non_finite_members());
            }
            row.iter_mut().for_each(|x| *x -= *mean);
        }
        let mut comoments = vec![0.0; m * (m + 1) / 2];
        for a in 0..m {
            let ra = &centred[a * len..(a + 1) * len];
            for b in a..m {
                comoments[packed(m, a, b)] = dot(ra, &centred[b * len..(b + 1) * len]);
            }
        }
        if (0..m).any(|b| !comoments[packed(m, b, b)].is_finite()) {
            return Err(non_finite_members());
        }
        Ok(CorrelationState {
            members: Some(m),
            count: len as u64,
            means,
            comoments,
            target: Moments::of_slice(&target),
        })
    }

    /// Adds a chunk of points (all members, in point order after the points seen).
    ///
    /// # Errors
    /// As [`residual_correlation`]; `members` when the member count differs from earlier
    /// chunks'.
    pub fn update<T: Real>(
        &mut self,
        members: ArrayView2<'_, T>,
        y: ArrayView1<'_, f64>,
        pool: &Pool,
        monitor: &dyn Monitor,
    ) -> Result<()> {
        Members::Values(members).check_targets(y.len())?;
        let m = members.nrows();
        if let Some(known) = self.members {
            if known != m {
                return Err(Error::value(
                    "members",
                    format!("this chunk has {m} members but earlier chunks had {known}"),
                ));
            }
        }
        let chunks = Chunks::of(members.ncols());
        // Into a copy, kept only on success: an update stopped by Ctrl-C (or an error in a
        // later block) leaves the state as it was.
        let mut merged = self.clone();
        let work = |points: Range<usize>, _: &mut ()| Self::of_block(members, y, points);
        let merge = |part: CorrelationState| merged.absorb(part);
        for_chunks(chunks, &mut no_slots(chunks), pool, monitor, work, merge)?;
        *self = merged;
        Ok(())
    }

    /// Chan, Golub & LeVeque's pairwise update: `other`'s points after this state's.
    fn absorb(&mut self, other: CorrelationState) -> Result<()> {
        if other.count == 0 {
            return Ok(());
        }
        if self.count == 0 {
            *self = other;
            return Ok(());
        }
        let m = self.means.len();
        if other.means.len() != m {
            return Err(Error::value(
                "other",
                format!("has {} members but this stream has {m}", other.means.len()),
            ));
        }
        let (na, nb) = (self.count as f64, other.count as f64);
        let n = na + nb;
        let delta: Vec<f64> = other
            .means
            .iter()
            .zip(&self.means)
            .map(|(b, a)| b - a)
            .collect();
        let weight = na * nb / n;
        for a in 0..m {
            for b in a..m {
                let k = packed(m, a, b);
                self.comoments[k] += other.comoments[k] + delta[a] * delta[b] * weight;
            }
        }
        for (mean, d) in self.means.iter_mut().zip(&delta) {
            *mean += d * nb / n;
        }
        self.count += other.count;
        self.target = self.target.merge(&other.target);
        Ok(())
    }

    /// Which members have constant residuals (see [`is_constant`]).
    fn constant(&self) -> Vec<bool> {
        let m = self.means.len();
        let n = self.count as f64;
        let target_rms = (self.target.variance(0) + self.target.mean() * self.target.mean()).sqrt();
        (0..m)
            .map(|b| {
                let c = self.comoments[packed(m, b, b)];
                let variance1 = if self.count > 1 {
                    c / (n - 1.0)
                } else {
                    f64::NAN
                };
                constant_spread(self.means[b], c / n, variance1, target_rms)
            })
            .collect()
    }

    /// The full M × M residual correlation matrix (row-major into `out`), as
    /// [`correlation_matrix`] gives it: NaN rows and columns for constant members.
    ///
    /// # Errors
    /// `members` when no points were added; `out` when it does not hold M × M values.
    pub fn matrix(&self, out: &mut [f64]) -> Result<()> {
        self.finish()?;
        let m = self.means.len();
        if out.len() != m * m {
            return Err(Error::value("out", format!("must hold {m} x {m} values")));
        }
        let constant = self.constant();
        for a in 0..m {
            for b in 0..m {
                let (lo, hi) = (a.min(b), a.max(b));
                out[a * m + b] = if constant[a] || constant[b] {
                    f64::NAN
                } else if a == b {
                    1.0
                } else {
                    self.comoments[packed(m, lo, hi)]
                        / (self.comoments[packed(m, a, a)] * self.comoments[packed(m, b, b)]).sqrt()
                };
            }
        }
        Ok(())
    }
}

impl MergeableState for CorrelationState {
    type Output = ResidualCorrelation;

    fn check_stored(&self) -> Result<()> {
        let m = self.members.unwrap_or(0);
        let pairs = m
            .checked_add(1)
            .and_then(|k| k.checked_mul(m))
            .map(|k| k / 2);
        let ok = self.members != Some(0)
            && (self.members.is_some() || self.count == 0)
            && self.means.len() == m
            && pairs == Some(self.comoments.len());
        if ok {
            Ok(())
        } else {
            Err(Error::value(
                "state",
                "is not a consistent correlation state (table sizes disagree)",
            ))
        }
    }

    fn merge(&mut self, other: Self) -> Result<()> {
        if let (Some(a), Some(b)) = (self.members, other.members) {
            if a != b {
                return Err(Error::value(
                    "other",
                    format!("has {b} members but this stream has {a}"),
                ));
            }
        }
        self.members = self.members.or(other.members);
        self.absorb(other)
    }

    fn finish(&self) -> Result<ResidualCorrelation> {
        if self.count == 0 {
            return Err(Error::value("members", "no points were added"));
        }
        let m = self.means.len();
        let n = self.count as f64;
        let constant = self.constant();
        let variance: Vec<f64> = (0..m)
            .map(|b| {
                if self.count > 1 {
                    self.comoments[packed(m, b, b)] / (n - 1.0)
                } else {
                    f64::NAN
                }
            })
            .collect();
        let (mut covariance, mut correlation) = (0.0, 0.0);
        for a in 0..m {
            for b in a + 1..m {
                let c = self.comoments[packed(m, a, b)];
                covariance += c;
                if !constant[a] && !constant[b] {
                    correlation += c
                        / (self.comoments[packed(m, a, a)] * self.comoments[packed(m, b, b)])
                            .sqrt();
                }
            }
        }
        // Every unordered pair counts twice among the ordered pairs a ≠ b.
        Ok(ResidualCorrelation::from_pair_sums(
            variance,
            2.0 * covariance / (n - 1.0),
            2.0 * correlation,
            &constant,
        ))
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::parallel::Silent;
    use approx::assert_relative_eq;
    use ndarray::Array1;

    const POOL: Pool = Pool::Global;

    use crate::members::test_values as values;

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
        assert_relative_eq!(
            summary.mean_residual_correlation,
            mean,
            max_relative = 1e-10
        );
        assert!(summary.mean_residual_correlation > 0.5);
        // A constant member is left out.
        let mut with_constant = members.clone();
        with_constant.row_mut(0).fill(2.0);
        let summary = residual_correlation(with_constant.view(), y.view(), &POOL, &Silent).unwrap();
        assert_eq!(summary.constant_members, vec![0]);
        assert!(summary.mean_residual_correlation.is_finite());
        let one =
            residual_correlation(members.slice(s![..1, ..]), y.view(), &POOL, &Silent).unwrap();
        assert!(one.mean_residual_correlation.is_nan() && one.mean_residual_covariance.is_nan());
    }
    #[test]
    fn stream_in_chunks_matches_the_two_pass_routines() {
        let (m, n) = (6, 9000);
        let shared = values(n, 11);
        let own = values(m * n, 12);
        let mut members =
            Array2::from_shape_fn((m, n), |(b, j)| 3.0 + shared[j] + 0.7 * own[b * n + j]);
        members.row_mut(2).fill(1.5);
        let y = Array1::from_shape_fn(n, |j| 0.1 * (j % 7) as f64);
        let whole = residual_correlation(members.view(), y.view(), &POOL, &Silent).unwrap();
        let mut matrix = vec![0.0; m * m];
        correlation_matrix(members.view(), y.view(), &mut matrix, &POOL, &Silent).unwrap();
        // Uneven chunks, and a state that travels as bytes before its merge.
        let mut first = CorrelationState::new();
        let mut second = CorrelationState::new();
        for (which, range) in [(0, 0..1), (0, 1..5000), (1, 5000..n)] {
            let state = if which == 0 { &mut first } else { &mut second };
            state
                .update(
                    members.slice(s![.., range.clone()]),
                    y.slice(s![range]),
                    &POOL,
                    &Silent,
                )
                .unwrap();
        }
        let mut first = CorrelationState::from_bytes(&first.to_bytes().unwrap()).unwrap();
        first.merge(second).unwrap();
        let streamed = first.finish().unwrap();
        assert_eq!(first.n_points(), n as u64);
        assert_eq!(streamed.constant_members, whole.constant_members);
        for (a, b) in streamed
            .residual_variance
            .iter()
            .zip(&whole.residual_variance)
        {
            assert_relative_eq!(a, b, max_relative = 1e-12);
        }
        assert_relative_eq!(
            streamed.mean_residual_covariance,
            whole.mean_residual_covariance,
            max_relative = 1e-11
        );
        assert_relative_eq!(
            streamed.mean_residual_correlation,
            whole.mean_residual_correlation,
            max_relative = 1e-11
        );
        let mut streamed_matrix = vec![0.0; m * m];
        first.matrix(&mut streamed_matrix).unwrap();
        for (a, b) in streamed_matrix.iter().zip(&matrix) {
            assert!(a.is_nan() == b.is_nan());
            if !a.is_nan() {
                assert_relative_eq!(a, b, max_relative = 1e-11);
            }
        }
    }

    #[test]
    fn stream_errors() {
        let members = Array2::from_shape_fn((3, 4), |(b, j)| (b * j) as f64);
        let y = Array1::zeros(4);
        let mut state = CorrelationState::new();
        assert!(matches!(
            state.finish(),
            Err(Error::InvalidValue {
                argument: "members",
                ..
            })
        ));
        state
            .update(members.view(), y.view(), &POOL, &Silent)
            .unwrap();
        assert!(matches!(
            state.update(members.slice(s![..2, ..]), y.view(), &POOL, &Silent),
            Err(Error::InvalidValue {
                argument: "members",
                ..
            })
        ));
        assert!(matches!(
            state.update(members.view(), y.slice(s![..3]), &POOL, &Silent),
            Err(Error::InvalidValue { argument: "y", .. })
        ));
        let mut bad = members.clone();
        bad[[1, 2]] = f64::NAN;
        assert!(matches!(
            CorrelationState::new().update(bad.view(), y.view(), &POOL, &Silent),
            Err(Error::InvalidValue {
                argument: "members",
                ..
            })
        ));
        let mut other = CorrelationState::new();
        other
            .update(members.slice(s![..2, ..]), y.view(), &POOL, &Silent)
            .unwrap();
        assert!(matches!(
            state.merge(other),
            Err(Error::InvalidValue {
                argument: "other",
                ..
            })
        ));
        assert!(matches!(
            CorrelationState::from_bytes(&[1, 2, 3]),
            Err(Error::InvalidValue {
                argument: "state",
                ..
            })
        ));
    }
}
