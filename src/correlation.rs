//! Spread and correlation of the members' residuals r_b = t_b − y: per-member residual
//! variances, their mean pairwise covariance and correlation without the M × M matrix, and
//! the full matrix from a blocked Gram computation.

use std::ops::Range;

use ndarray::{s, Array2, ArrayView1, ArrayView2};
use rayon::prelude::*;

use crate::decomposition::{non_finite_members, value_target};
use crate::error::{Error, Result};
use crate::members::{for_chunks, no_slots, Chunks, Members};
use crate::numeric::{Moments, Real};
use crate::parallel::{Monitor, Pool};

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
    let constant_members: Vec<usize> = (0..m).filter(|&b| constant[b]).collect();
    let k = (m - constant_members.len()) as f64;
    let pairs = (m as f64) * (m as f64 - 1.0);
    let mean_residual_covariance = if m > 1 {
        (plain.variance(1) - variance.iter().sum::<f64>()) / pairs
    } else {
        f64::NAN
    };
    let mean_residual_correlation = if k >= 2.0 {
        (standard.variance(1) - k) / (k * (k - 1.0))
    } else {
        f64::NAN
    };
    Ok(ResidualCorrelation {
        mean_residual_variance: variance.iter().sum::<f64>() / m as f64,
        residual_variance: variance,
        mean_residual_covariance,
        mean_residual_correlation,
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
}
