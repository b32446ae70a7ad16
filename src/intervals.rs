//! Prediction intervals and class sets for a new observation, calibrated on the members'
//! out-of-bag predictions at the training rows (no hold-out set).
//!
//! A training row `i` is out of bag for member `m` when `counts[m, i] = 0`. Rows with at
//! least one out-of-bag member are the calibration rows (`n` of them); rows that every
//! member saw are left out and counted. With `α = 1 − level`, the two ranks used below are
//!
//! ```text
//!   k⁻ = ⌊α (n + 1)⌋          (the lower rank, 1-based)
//!   k⁺ = ⌈(1 − α)(n + 1)⌉     (the upper rank, 1-based)
//! ```
//!
//! computed with a relative guard of 1e-12 against round-off in `α (n + 1)` (so that
//! `level = 0.9, n = 19` gives `k⁻ = 2`, not 1). `k⁻ ≥ 1` and `k⁺ ≤ n` hold together
//! (both say `α (n + 1) ≥ 1`); when they fail, the interval is infinite (`−∞`, `+∞`) and a
//! class set holds every class.

use ndarray::{ArrayView1, ArrayView2, ArrayView3, ArrayViewMut2};
use rayon::prelude::*;

use crate::error::{zeroed, Error, Result};
use crate::numeric::Real;
use crate::out_of_bag::CountValue;
use crate::parallel::{watched, Monitor, Pool};
use crate::random::MemberStreams;

/// Test points per task (jackknife+ works through them in sub-chunks of
/// [`LEAVE_OUT_CHUNK`]).
const POINT_CHUNK: usize = 256;

/// Relative guard on `α (n + 1)` against round-off in `α = 1 − level`.
const RANK_GUARD: f64 = 1e-12;

/// How a regression interval is formed.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum IntervalMethod {
    /// Kim, Xu & Barber (2020), jackknife+-after-bootstrap.
    JackknifePlus,
    /// Johansson, Boström, Löfström & Linusson (2014), out-of-bag residuals.
    OutOfBagResidual,
}

/// How a class set is formed.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum SetMethod {
    /// Sadinle, Lei & Wasserman (2019): score `1 − p̂[y]`.
    LeastAmbiguous,
    /// Romano, Sesia & Candès (2020), without randomisation: score = probability mass of
    /// the classes ranked above `y` plus `p̂[y]`.
    Adaptive,
}

/// What the calibration rows gave.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Calibration {
    /// Rows with at least one out-of-bag member (`n`).
    pub n_rows_used: usize,
    /// The lower rank `k⁻` (1-based); 0 when the interval is infinite.
    pub lower_rank: usize,
    /// The upper rank `k⁺` (1-based); `n + 1` when the interval is infinite.
    pub upper_rank: usize,
    /// The `k⁺`-th smallest calibration score (out-of-bag residual and class sets); `+∞`
    /// when `k⁺ > n`, NaN for jackknife+ (which has one per new point).
    pub threshold: f64,
}

impl Calibration {
    /// `true` when `k⁻ ≥ 1` (equivalently `k⁺ ≤ n`): the interval is finite.
    pub fn finite(&self) -> bool {
        self.lower_rank >= 1 && self.upper_rank <= self.n_rows_used
    }
}

/// The ranks `(k⁻, k⁺)` of the module documentation for `n` calibration rows.
///
/// # Errors
/// `level` outside (0, 1).
pub fn ranks(level: f64, n: usize) -> Result<(usize, usize)> {
    if !(level > 0.0 && level < 1.0) {
        return Err(Error::value(
            "level",
            format!("must lie strictly between 0 and 1, got {level}"),
        ));
    }
    let alpha = 1.0 - level;
    let scaled = alpha * (n as f64 + 1.0);
    // ⌊α (n + 1)⌋ ≤ n for α < 1; the guard must not push a tiny level past n.
    let lower = ((scaled * (1.0 + RANK_GUARD)).floor() as usize).min(n);
    let upper = ((n as f64 + 1.0 - scaled) * (1.0 - RANK_GUARD)).ceil() as usize;
    Ok((lower, upper.max(1)))
}

/// The smallest number of calibration rows with a finite interval at `level`:
/// the least `n` with `⌊α (n + 1)⌋ ≥ 1`.
pub fn rows_needed(level: f64) -> Result<usize> {
    let mut n = ((1.0 / (1.0 - level)).ceil() as usize).saturating_sub(2);
    while ranks(level, n)?.0 < 1 {
        n += 1;
    }
    Ok(n)
}

/// The success probability of the randomised number of members of the
/// jackknife+-after-bootstrap for `n_rows` training rows and `draws` rows per member.
///
/// ```text
/// Kim, Xu & Barber (2020), "Predictive inference is free with the
/// jackknife+-after-bootstrap", NeurIPS 33, Algorithm 1 and Theorem 1: fix B, draw
///   B̃ ~ Binomial(B, p),  p = (1 − 1/(n + 1))^m   (m draws with replacement)
///                        p = 1 − m/(n + 1)       (m rows without replacement)
/// and fit B̃ members on resamples of the n training rows. p is the chance that a
/// resample of n + 1 rows (the training rows and the new point) misses the new point, so
/// the B̃ members are distributed as the members of B that did not see it; with the
/// training rows and the new point exchangeable, the interval covers the new point with
/// probability at least 1 − 2α.
/// ```
///
/// # Errors
/// `n_rows` zero; `draws` zero, or above `n_rows` without replacement.
pub fn member_count_probability(
    n_rows: usize,
    draws: usize,
    with_replacement: bool,
) -> Result<f64> {
    if n_rows == 0 {
        return Err(Error::value("n_rows", "must be at least 1"));
    }
    if draws == 0 || (!with_replacement && draws > n_rows) {
        return Err(Error::value(
            "draws",
            format!(
                "must lie in 1..={} rows per member, got {draws}",
                if with_replacement { usize::MAX } else { n_rows }
            ),
        ));
    }
    let n1 = n_rows as f64 + 1.0;
    Ok(if with_replacement {
        // (1 − 1/(n + 1))^m = exp(m · ln(1 − 1/(n + 1))), accurate for large m
        (draws as f64 * (-1.0 / n1).ln_1p()).exp()
    } else {
        1.0 - draws as f64 / n1
    })
}

/// A draw of `B̃ ~ Binomial(n_members, probability)` (see [`member_count_probability`]): the
/// number of `n_members` independent trials with `U < probability`, `U` uniform on (0, 1)
/// from member stream `n_members` of `seed` (the stream after the last one the members
/// could use, so the count and the members' resamples are independent).
///
/// # Errors
/// `probability` outside [0, 1].
pub fn random_member_count(n_members: usize, probability: f64, seed: u64) -> Result<usize> {
    if !(0.0..=1.0).contains(&probability) {
        return Err(Error::value(
            "probability",
            format!("must lie in [0, 1], got {probability}"),
        ));
    }
    let mut streams = MemberStreams::starting_at(seed, n_members);
    let mut draws = streams.take(1).pop().expect("one stream");
    Ok((0..n_members)
        .filter(|_| draws.open_unit() < probability)
        .count())
}

/// Out-of-bag member counts `|O_i|` and out-of-bag sums `Σ_{m ∈ O_i} t_m(x_i)[c]` at the
/// training rows, `t` read as `(n_members, n_rows, width)`.
fn out_of_bag_sums<C: CountValue>(
    counts: ArrayView2<'_, C>,
    n_rows: usize,
    width: usize,
    value: impl Fn(usize, usize, usize) -> f64,
) -> Result<(Vec<usize>, Vec<f64>)> {
    let mut n_out = zeroed::<usize>(n_rows, "counts")?;
    let mut sums = zeroed::<f64>(n_rows * width, "train_members")?;
    for (m, row) in counts.outer_iter().enumerate() {
        for (i, &c) in row.iter().enumerate() {
            if c.is_negative() {
                return Err(Error::value(
                    "counts",
                    format!("in-bag counts must be non-negative (member {m}, row {i})"),
                ));
            }
            if c.is_zero() {
                n_out[i] += 1;
                for k in 0..width {
                    sums[i * width + k] += value(m, i, k);
                }
            }
        }
    }
    Ok((n_out, sums))
}

/// Checks the shared shapes: `members` and `train_members` have the same number of members
/// as `counts`, `train_members` and `y_train` as many rows.
fn check_shapes(
    n_members: usize,
    counts: (usize, usize),
    train: (usize, usize),
    y_len: usize,
) -> Result<()> {
    if n_members == 0 {
        return Err(Error::value("members", "has no members"));
    }
    if counts.0 != n_members {
        return Err(Error::value(
            "counts",
            format!("has {} members but `members` has {n_members}", counts.0),
        ));
    }
    if train.0 != n_members {
        return Err(Error::value(
            "train_members",
            format!("has {} members but `members` has {n_members}", train.0),
        ));
    }
    if counts.1 != train.1 {
        return Err(Error::value(
            "counts",
            format!("has {} rows but `train_members` has {}", counts.1, train.1),
        ));
    }
    if y_len != train.1 {
        return Err(Error::value(
            "y_train",
            format!(
                "has {y_len} values but `train_members` has {} rows",
                train.1
            ),
        ));
    }
    if train.1 == 0 {
        return Err(Error::value("train_members", "has no training rows"));
    }
    Ok(())
}

/// The `k`-th smallest (0-based) of `values`, reordering them.
fn kth_smallest(values: &mut [f64], k: usize) -> f64 {
    *values.select_nth_unstable_by(k, f64::total_cmp).1
}

/// Below this many values, [`kth_of`] selects directly.
const SAMPLED_SELECTION: usize = 2048;

/// The `k`-th smallest (0-based) of `means[i] + sign · residuals[i]` (`sign` = ±1) without
/// writing them all out.
///
/// A strided sample of about `n^(2/3)` values brackets the answer between two of its
/// order statistics `[lo, hi]`, about five binomial standard deviations of the sample rank
/// apart (Floyd & Rivest 1975, "Expected time bounds for selection", CACM 18(3)); one pass
/// counts the values below `lo` and keeps those in `[lo, hi]`, and the answer is selected
/// among the kept ones when the bracket holds it. Otherwise (an unlucky sample) it falls
/// back to selecting among all values, so the result is always the exact order statistic.
fn kth_of(
    means: &[f64],
    residuals: &[f64],
    sign: f64,
    k: usize,
    scratch: &mut Vec<f64>,
    kept: &mut Vec<f64>,
) -> f64 {
    let len = means.len().min(residuals.len());
    let (means, residuals) = (&means[..len], &residuals[..len]);
    let pairs = || means.iter().zip(residuals).map(|(&mu, &r)| mu + sign * r);
    if len >= SAMPLED_SELECTION {
        let (lo, hi) = bracket(means, residuals, sign, k, scratch);
        // branch-free pass: every value is stored, the slot advances only when it is kept
        if kept.len() < len + 1 {
            // every slot is written before it is read, so the buffer is only ever grown
            kept.resize(len + 1, 0.0);
        }
        let (mut below, mut n_kept) = (0, 0);
        for v in pairs() {
            below += usize::from(v < lo);
            kept[n_kept] = v;
            n_kept += usize::from(v >= lo && v <= hi);
        }
        if below <= k && k < below + n_kept {
            return kth_smallest(&mut kept[..n_kept], k - below);
        }
    }
    scratch.clear();
    scratch.extend(pairs());
    kth_smallest(scratch, k)
}

/// The bracket `[lo, hi]` of [`kth_of`]: two order statistics of a strided sample of about
/// `n^(2/3)` of the values `means[i] + sign · residuals[i]`, around the sample rank of `k`.
fn bracket(
    means: &[f64],
    residuals: &[f64],
    sign: f64,
    k: usize,
    scratch: &mut Vec<f64>,
) -> (f64, f64) {
    let len = means.len();
    let step = (len as f64).cbrt() as usize;
    scratch.clear();
    scratch.extend(
        (0..len)
            .step_by(step)
            .map(|i| means[i] + sign * residuals[i]),
    );
    let s = scratch.len();
    let position = k * s / len;
    let p = k as f64 / len as f64;
    let gap = (5.0 * (s as f64 * p * (1.0 - p)).sqrt()) as usize + 8;
    let lo = kth_smallest(scratch, position.saturating_sub(gap));
    let hi = kth_smallest(scratch, (position + gap).min(s - 1));
    (lo, hi)
}

/// Both jackknife+ bounds at one point: [`kth_of`] of `means − residuals` at rank
/// `k_lower` and of `means + residuals` at rank `k_upper` (0-based), with one pass over
/// the values for the two brackets. The same exact order statistics as two calls.
fn bounds_of(
    means: &[f64],
    residuals: &[f64],
    (k_lower, k_upper): (usize, usize),
    scratch: &mut Vec<f64>,
    kept: &mut [Vec<f64>; 2],
) -> (f64, f64) {
    let len = means.len().min(residuals.len());
    let (means, residuals) = (&means[..len], &residuals[..len]);
    if len < SAMPLED_SELECTION {
        return (
            kth_of(means, residuals, -1.0, k_lower, scratch, &mut kept[0]),
            kth_of(means, residuals, 1.0, k_upper, scratch, &mut kept[1]),
        );
    }
    let (lo_a, hi_a) = bracket(means, residuals, -1.0, k_lower, scratch);
    let (lo_b, hi_b) = bracket(means, residuals, 1.0, k_upper, scratch);
    for buffer in kept.iter_mut() {
        if buffer.len() < len + 1 {
            // every slot is written before it is read, so the buffer is only ever grown
            buffer.resize(len + 1, 0.0);
        }
    }
    let [kept_a, kept_b] = kept;
    let (mut below_a, mut n_a, mut below_b, mut n_b) = (0, 0, 0, 0);
    // branch-free pass: every value is stored, the slot advances only when it is kept
    for (&mu, &r) in means.iter().zip(residuals) {
        let (a, b) = (mu - r, mu + r);
        below_a += usize::from(a < lo_a);
        kept_a[n_a] = a;
        n_a += usize::from(a >= lo_a && a <= hi_a);
        below_b += usize::from(b < lo_b);
        kept_b[n_b] = b;
        n_b += usize::from(b >= lo_b && b <= hi_b);
    }
    let mut select = |sign: f64, k: usize, below: usize, n_kept: usize, kept: &mut Vec<f64>| {
        if below <= k && k < below + n_kept {
            kth_smallest(&mut kept[..n_kept], k - below)
        } else {
            scratch.clear();
            scratch.extend(means.iter().zip(residuals).map(|(&mu, &r)| mu + sign * r));
            kth_smallest(scratch, k)
        }
    };
    (
        select(-1.0, k_lower, below_a, n_a, kept_a),
        select(1.0, k_upper, below_b, n_b, kept_b),
    )
}

/// Runs `task(start, lower_chunk, upper_chunk)` over chunks of `chunk` points on the
/// pool, watched from the calling thread (progress in points; Ctrl-C stops the work within
/// one chunk); the chunking does not depend on the threads.
fn over_point_chunks<A: Send, B: Send>(
    first: &mut [A],
    second: &mut [B],
    width: usize,
    chunk: usize,
    pool: &Pool,
    monitor: &dyn Monitor,
    task: impl Fn(usize, &mut [A], &mut [B]) -> Result<()> + Sync,
) -> Result<()> {
    let n_points = first.len();
    watched(pool, monitor, n_points, |watch| {
        first
            .par_chunks_mut(chunk)
            .zip(second.par_chunks_mut(chunk * width))
            .enumerate()
            .try_for_each(|(c, (a, b))| {
                if watch.stopped() {
                    return Err(Error::Interrupted);
                }
                task(c * chunk, a, b)?;
                watch.advance(a.len());
                Ok(())
            })
    })?
}

/// Prediction interval for a new observation at each of the `n_points` new points.
///
/// `members[m, j]`: prediction of member `m` at new point `j`; `train_members[m, i]` at
/// training row `i`; `counts[m, i]` the in-bag counts; results go to `lower` and `upper`.
///
/// ```text
/// O_i = { m : counts[m, i] = 0 },  calibration rows I = { i : |O_i| ≥ 1 },  n = |I|
/// μ̂_(−i)(x) = (1/|O_i|) Σ_{m ∈ O_i} t_m(x)                leave-out mean
/// R_i = |y_i − μ̂_(−i)(x_i)|                                out-of-bag residual
///
/// jackknife+ (Kim, Xu & Barber 2020, "Predictive inference is free with the
/// jackknife+-after-bootstrap", NeurIPS 33, Algorithm 1):
///   lower(x) = the k⁻-th smallest of { μ̂_(−i)(x) − R_i : i ∈ I }
///   upper(x) = the k⁺-th smallest of { μ̂_(−i)(x) + R_i : i ∈ I }
/// out-of-bag residual (Johansson, Boström, Löfström & Linusson 2014, "Regression
/// conformal prediction with random forests", Machine Learning 97):
///   q̂ = the k⁺-th smallest of { R_i : i ∈ I },  f̄(x) = (1/M) Σ_m t_m(x)
///   [lower, upper](x) = [f̄(x) − q̂, f̄(x) + q̂]
/// ```
///
/// For jackknife+, each chunk of [`LEAVE_OUT_CHUNK`] new points computes the leave-out
/// means of every calibration row by adding, for each row, only its out-of-bag members'
/// predictions (the product of the 0/1 out-of-bag mask with the member predictions,
/// skipping the zeros), then two order statistics per point (selection, not a sort).
/// Memory is `O(LEAVE_OUT_CHUNK × n)` per thread plus the out-of-bag lists; every point is
/// computed within a fixed chunk in a fixed order, so results do not depend on the thread
/// count.
///
/// # Errors
/// `level` outside (0, 1); `members` without members; `counts`, `train_members`, `y_train`
/// of mismatched shapes or no rows; `counts` negative; `lower`/`upper` not of length
/// `n_points`; `Interrupted` from the monitor; `OutOfMemory`.
#[allow(clippy::too_many_arguments)]
pub fn prediction_interval<C: CountValue, T: Real>(
    members: ArrayView2<'_, T>,
    counts: ArrayView2<'_, C>,
    train_members: ArrayView2<'_, T>,
    y_train: ArrayView1<'_, f64>,
    level: f64,
    method: IntervalMethod,
    lower: &mut [f64],
    upper: &mut [f64],
    pool: &Pool,
    monitor: &dyn Monitor,
) -> Result<Calibration> {
    let (n_members, n_points) = members.dim();
    check_shapes(n_members, counts.dim(), train_members.dim(), y_train.len())?;
    if lower.len() != n_points || upper.len() != n_points {
        return Err(Error::value("members", "outputs do not match n_points"));
    }
    ranks(level, 0)?;
    let n_rows = counts.ncols();
    let (n_out, sums) =
        out_of_bag_sums(counts, n_rows, 1, |m, i, _| train_members[[m, i]].to_f64())?;
    let used: Vec<usize> = (0..n_rows).filter(|&i| n_out[i] > 0).collect();
    let n = used.len();
    let residuals: Vec<f64> = used
        .iter()
        .map(|&i| (y_train[i] - sums[i] / n_out[i] as f64).abs())
        .collect();
    let (lower_rank, upper_rank) = ranks(level, n)?;
    let mut calibration = Calibration {
        n_rows_used: n,
        lower_rank,
        upper_rank,
        threshold: f64::NAN,
    };
    if !calibration.finite() {
        lower.fill(f64::NEG_INFINITY);
        upper.fill(f64::INFINITY);
        if method == IntervalMethod::OutOfBagResidual {
            calibration.threshold = f64::INFINITY;
        }
        return Ok(calibration);
    }
    match method {
        IntervalMethod::OutOfBagResidual => {
            let mut scores = residuals;
            let q = kth_smallest(&mut scores, upper_rank - 1);
            calibration.threshold = q;
            over_point_chunks(
                lower,
                upper,
                1,
                POINT_CHUNK,
                pool,
                monitor,
                |start, lo, up| {
                    for (j, (l, u)) in lo.iter_mut().zip(up.iter_mut()).enumerate() {
                        let mean = members
                            .column(start + j)
                            .iter()
                            .map(|t| t.to_f64())
                            .sum::<f64>()
                            / n_members as f64;
                        *l = mean - q;
                        *u = mean + q;
                    }
                    Ok(())
                },
            )?;
        }
        IntervalMethod::JackknifePlus => {
            let lists = OutOfBagLists::new(counts, &used, &n_out)?;
            let (lists, residuals) = (&lists, &residuals);
            over_point_chunks(
                lower,
                upper,
                1,
                POINT_CHUNK,
                pool,
                monitor,
                |start, lo, up| {
                    leave_out_chunk(
                        members,
                        lists,
                        residuals,
                        start,
                        (lower_rank, upper_rank),
                        lo,
                        up,
                    )
                },
            )?;
        }
    }
    Ok(calibration)
}

/// The out-of-bag members of each calibration row, as compressed lists: the members of
/// calibration row `u` are `members[starts[u]..starts[u + 1]]`, in increasing order.
struct OutOfBagLists {
    starts: Vec<usize>,
    members: Vec<u32>,
}

impl OutOfBagLists {
    fn new<C: CountValue>(
        counts: ArrayView2<'_, C>,
        used: &[usize],
        n_out: &[usize],
    ) -> Result<Self> {
        let total: usize = used.iter().map(|&i| n_out[i]).sum();
        let mut members = zeroed::<u32>(total, "counts")?;
        let mut starts = zeroed::<usize>(used.len() + 1, "counts")?;
        for (u, &i) in used.iter().enumerate() {
            starts[u + 1] = starts[u] + n_out[i];
        }
        let mut next = starts.clone();
        for (m, row) in counts.outer_iter().enumerate() {
            for (u, &i) in used.iter().enumerate() {
                if row[i].is_zero() {
                    members[next[u]] = m as u32;
                    next[u] += 1;
                }
            }
        }
        Ok(OutOfBagLists { starts, members })
    }

    fn len(&self) -> usize {
        self.starts.len() - 1
    }
}

/// Points per jackknife+ sub-chunk: the kernel keeps one row's leave-out means at this
/// many points in registers (8 AVX2 vectors), and the sub-chunk's member predictions
/// (`n_members × LEAVE_OUT_CHUNK` f64) stay in the level-2 cache.
const LEAVE_OUT_CHUNK: usize = 32;

/// Leave-out means of every calibration row at the `P` points of a chunk:
/// `means[j · n + u] = (Σ_{m ∈ O_u} values[m][j]) · (1 / |O_u|)`, the sum in increasing `m`.
///
/// Only the out-of-bag members of each row are added (about `e⁻¹` of them for the
/// bootstrap), so the work is a third of the dense product `(P × M) · (M × n)` with the
/// 0/1 mask; the `P` sums of a row are independent chains that vectorise.
#[inline(always)]
fn leave_out_means<const P: usize>(lists: &OutOfBagLists, values: &[[f64; P]], means: &mut [f64]) {
    let n = lists.len();
    for u in 0..n {
        let (from, to) = (lists.starts[u], lists.starts[u + 1]);
        let mut acc = [0.0f64; P];
        for &m in &lists.members[from..to] {
            let row = &values[m as usize];
            for k in 0..P {
                acc[k] += row[k];
            }
        }
        let share = 1.0 / (to - from) as f64;
        for (k, a) in acc.iter().enumerate() {
            means[k * n + u] = a * share;
        }
    }
}

/// [`leave_out_means`] compiled for AVX2 when the processor has it (4 f64 lanes instead of
/// SSE2's 2). Element-wise adds in the same order, no fused multiply-add, so both versions
/// give bit-identical means.
fn leave_out_means_dispatch<const P: usize>(
    lists: &OutOfBagLists,
    values: &[[f64; P]],
    means: &mut [f64],
) {
    #[cfg(target_arch = "x86_64")]
    {
        if std::arch::is_x86_feature_detected!("avx2") {
            // SAFETY: the processor supports AVX2 (checked just above).
            return unsafe { leave_out_means_avx2(lists, values, means) };
        }
    }
    leave_out_means(lists, values, means)
}

#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2")]
unsafe fn leave_out_means_avx2<const P: usize>(
    lists: &OutOfBagLists,
    values: &[[f64; P]],
    means: &mut [f64],
) {
    leave_out_means(lists, values, means)
}

/// Jackknife+ bounds of one task's points starting at `start`, in sub-chunks of
/// [`LEAVE_OUT_CHUNK`] points that share one buffer of leave-out means
/// (`LEAVE_OUT_CHUNK × n` f64): the sub-chunk's means, then two order statistics per point
/// by selection.
fn leave_out_chunk<T: Real>(
    members: ArrayView2<'_, T>,
    lists: &OutOfBagLists,
    residuals: &[f64],
    start: usize,
    (lower_rank, upper_rank): (usize, usize),
    lower: &mut [f64],
    upper: &mut [f64],
) -> Result<()> {
    const P: usize = LEAVE_OUT_CHUNK;
    let n = lists.len();
    let mut values = vec![[0.0f64; P]; members.nrows()];
    let mut means = zeroed::<f64>(P * n, "members")?;
    let (mut scratch, mut kept) = (Vec::new(), [Vec::new(), Vec::new()]);
    for (c, (lower, upper)) in lower.chunks_mut(P).zip(upper.chunks_mut(P)).enumerate() {
        let first = start + c * P;
        let len = lower.len();
        for (row, member) in values.iter_mut().zip(members.outer_iter()) {
            for (j, v) in row.iter_mut().take(len).enumerate() {
                *v = member[first + j].to_f64();
            }
        }
        leave_out_means_dispatch::<P>(lists, &values, &mut means);
        for (j, row) in means.chunks_exact(n).take(len).enumerate() {
            (lower[j], upper[j]) = bounds_of(
                row,
                residuals,
                (lower_rank - 1, upper_rank - 1),
                &mut scratch,
                &mut kept,
            );
        }
    }
    Ok(())
}

/// Class set for a new observation at each new point: `sets[j, k]` is `true` when class
/// `k` is in the set at point `j`.
///
/// `members[m, j, k]` and `train_members[m, i, k]` are class probabilities; `y_train[i]`
/// the class code of training row `i` in `0..n_classes`.
///
/// ```text
/// p̂_oob(x_i) = (1/|O_i|) Σ_{m ∈ O_i} p_m(x_i),   p̂(x) = (1/M) Σ_m p_m(x)
/// least ambiguous (Sadinle, Lei & Wasserman 2019, JASA 114, §3):
///   s(p, k) = 1 − p[k]
/// adaptive, not randomised (Romano, Sesia & Candès 2020, NeurIPS 33, eq. 5 with u = 1):
///   s(p, k) = Σ_{j : p[j] > p[k]} p[j] + p[k]
/// q̂ = the k⁺-th smallest of { s(p̂_oob(x_i), y_i) : i ∈ I }
/// set(x) = { k : s(p̂(x), k) ≤ q̂ }
/// ```
///
/// # Errors
/// As [`prediction_interval`], plus `y_train` with a class code outside `0..n_classes`,
/// `train_members` with another number of classes than `members`, `sets` of the wrong
/// shape.
#[allow(clippy::too_many_arguments)]
pub fn prediction_set<C: CountValue, T: Real>(
    members: ArrayView3<'_, T>,
    counts: ArrayView2<'_, C>,
    train_members: ArrayView3<'_, T>,
    y_train: ArrayView1<'_, i64>,
    level: f64,
    method: SetMethod,
    mut sets: ArrayViewMut2<'_, bool>,
    pool: &Pool,
    monitor: &dyn Monitor,
) -> Result<Calibration> {
    let (n_members, n_points, n_classes) = members.dim();
    let (train_m, n_rows, train_classes) = train_members.dim();
    check_shapes(n_members, counts.dim(), (train_m, n_rows), y_train.len())?;
    if train_classes != n_classes {
        return Err(Error::value(
            "train_members",
            format!("has {train_classes} classes but `members` has {n_classes}"),
        ));
    }
    if n_classes < 2 {
        return Err(Error::value("members", "needs at least 2 classes"));
    }
    if sets.dim() != (n_points, n_classes) {
        return Err(Error::value(
            "members",
            "output does not match (n_points, n_classes)",
        ));
    }
    ranks(level, 0)?;
    if let Some(i) = y_train
        .iter()
        .position(|&y| y < 0 || y as u64 >= n_classes as u64)
    {
        return Err(Error::value(
            "y_train",
            format!(
                "class codes must lie in 0..{n_classes}, got {} at row {i}",
                y_train[i]
            ),
        ));
    }
    let (n_out, sums) = out_of_bag_sums(counts, n_rows, n_classes, |m, i, k| {
        train_members[[m, i, k]].to_f64()
    })?;
    let mut scores = Vec::new();
    let mut probabilities = vec![0.0; n_classes];
    for i in (0..n_rows).filter(|&i| n_out[i] > 0) {
        for (k, p) in probabilities.iter_mut().enumerate() {
            *p = sums[i * n_classes + k] / n_out[i] as f64;
        }
        scores.push(class_score(&probabilities, y_train[i] as usize, method));
    }
    let n = scores.len();
    let (lower_rank, upper_rank) = ranks(level, n)?;
    let mut calibration = Calibration {
        n_rows_used: n,
        lower_rank,
        upper_rank,
        threshold: f64::INFINITY,
    };
    if calibration.finite() {
        calibration.threshold = kth_smallest(&mut scores, upper_rank - 1);
    }
    let q = calibration.threshold;
    let flat = sets
        .as_slice_mut()
        .ok_or_else(|| Error::value("members", "output is not contiguous"))?;
    let mut marker = vec![(); n_points];
    over_point_chunks(
        &mut marker,
        flat,
        n_classes,
        POINT_CHUNK,
        pool,
        monitor,
        |start, _, out| {
            let mut p = vec![0.0; n_classes];
            for (j, row) in out.chunks_mut(n_classes).enumerate() {
                p.iter_mut().for_each(|v| *v = 0.0);
                for m in 0..n_members {
                    for (k, v) in p.iter_mut().enumerate() {
                        *v += members[[m, start + j, k]].to_f64();
                    }
                }
                p.iter_mut().for_each(|v| *v /= n_members as f64);
                for (k, cell) in row.iter_mut().enumerate() {
                    *cell = class_score(&p, k, method) <= q;
                }
            }
            Ok(())
        },
    )?;
    Ok(calibration)
}

/// The score `s(p, k)` of [`prediction_set`].
fn class_score(p: &[f64], k: usize, method: SetMethod) -> f64 {
    match method {
        SetMethod::LeastAmbiguous => 1.0 - p[k],
        SetMethod::Adaptive => p.iter().filter(|&&v| v > p[k]).sum::<f64>() + p[k],
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::parallel::{Silent, Threads};
    use ndarray::{array, Array1, Array2, Array3};

    fn pool(threads: usize) -> Pool {
        Threads::Fixed(threads).pool().unwrap()
    }

    /// Two members, three rows; worked by hand in the comments.
    fn small() -> (Array2<f64>, Array2<u8>, Array2<f64>, Array1<f64>) {
        // row 0 out of bag for member 1, row 1 for member 0, row 2 for member 1
        let counts = array![[1u8, 0, 2], [0, 1, 0]];
        let train = array![[10.0, 1.0, 20.0], [1.0, 30.0, 5.0]];
        let y = array![2.0, 4.0, 4.0];
        // one new point: member 0 predicts 0, member 1 predicts 10
        let members = array![[0.0], [10.0]];
        (members, counts, train, y)
    }

    fn interval(method: IntervalMethod, level: f64) -> Result<(f64, f64, Calibration)> {
        let (members, counts, train, y) = small();
        let (mut lo, mut up) = ([0.0], [0.0]);
        let c = prediction_interval(
            members.view(),
            counts.view(),
            train.view(),
            y.view(),
            level,
            method,
            &mut lo,
            &mut up,
            &pool(1),
            &Silent,
        )?;
        Ok((lo[0], up[0], c))
    }

    #[test]
    fn jackknife_plus_by_hand() {
        // leave-out means at the rows: 1, 1, 5 -> residuals R = 1, 3, 1; at the new point
        // the leave-out means are 10, 0, 10: lower values {9, -3, 9}, upper {11, 3, 11};
        // level 0.5, n = 3: k- = floor(0.5 * 4) = 2, k+ = ceil(0.5 * 4) = 2.
        let (lo, up, c) = interval(IntervalMethod::JackknifePlus, 0.5).unwrap();
        assert_eq!((lo, up), (9.0, 11.0));
        assert_eq!((c.n_rows_used, c.lower_rank, c.upper_rank), (3, 2, 2));
    }

    #[test]
    fn out_of_bag_residual_by_hand() {
        // ensemble mean 5; residuals sorted 1, 1, 3; k+ = 2 -> q = 1
        let (lo, up, c) = interval(IntervalMethod::OutOfBagResidual, 0.5).unwrap();
        assert_eq!((lo, up, c.threshold), (4.0, 6.0, 1.0));
    }

    #[test]
    fn too_few_rows_give_an_infinite_interval() {
        // level 0.9, n = 3: floor(0.1 * 4) = 0
        let (lo, up, c) = interval(IntervalMethod::JackknifePlus, 0.9).unwrap();
        assert_eq!((lo, up), (f64::NEG_INFINITY, f64::INFINITY));
        assert!(!c.finite());
    }

    #[test]
    fn a_tiny_level_keeps_the_lower_rank_within_the_rows() {
        // α (n + 1) = 19 - 1e-300 for n = 18: floor is 18 = n, never n + 1
        for n in [1, 18, 1000] {
            let (lower, upper) = ranks(1e-300, n).unwrap();
            assert_eq!((lower, upper), (n, 1));
        }
    }

    #[test]
    fn ranks_resist_round_off() {
        // 1 - 0.9 = 0.09999999999999998: without the guard floor(0.1 * 20) would be 1
        assert_eq!(ranks(0.9, 19).unwrap(), (2, 18));
        assert_eq!(ranks(0.9, 9).unwrap(), (1, 9));
        assert_eq!(ranks(0.9, 8).unwrap().0, 0);
        assert_eq!(rows_needed(0.9).unwrap(), 9);
        assert_eq!(rows_needed(0.95).unwrap(), 19);
        assert_eq!(rows_needed(0.5).unwrap(), 1);
    }

    #[test]
    fn errors_name_their_argument() {
        let argument = |e: Error| match e {
            Error::InvalidValue { argument, .. } => argument,
            other => panic!("unexpected {other:?}"),
        };
        for level in [0.0, 1.0, f64::NAN, -0.5] {
            let e = interval(IntervalMethod::JackknifePlus, level).unwrap_err();
            assert_eq!(argument(e), "level");
        }
        let (members, counts, train, y) = small();
        let (mut lo, mut up) = ([0.0], [0.0]);
        let mut call =
            |m: ArrayView2<f64>, c: ArrayView2<i8>, t: ArrayView2<f64>, y: ArrayView1<f64>| {
                prediction_interval(
                    m,
                    c,
                    t,
                    y,
                    0.5,
                    IntervalMethod::JackknifePlus,
                    &mut lo,
                    &mut up,
                    &pool(1),
                    &Silent,
                )
                .map(|_| ())
                .map_err(argument)
            };
        let signed = counts.mapv(|c| c as i8);
        assert_eq!(
            call(
                members.slice(ndarray::s![..1, ..]),
                signed.view(),
                train.view(),
                y.view()
            ),
            Err("counts")
        );
        assert_eq!(
            call(
                members.view(),
                signed.view(),
                train.slice(ndarray::s![.., ..2]),
                y.view()
            ),
            Err("counts")
        );
        assert_eq!(
            call(
                members.view(),
                signed.view(),
                train.view(),
                y.slice(ndarray::s![..2])
            ),
            Err("y_train")
        );
        let negative = array![[1i8, -1, 2], [0, 1, 0]];
        assert_eq!(
            call(members.view(), negative.view(), train.view(), y.view()),
            Err("counts")
        );
        let none = Array2::<f64>::zeros((0, 1));
        let no_counts = Array2::<i8>::zeros((0, 3));
        let no_train = Array2::<f64>::zeros((0, 3));
        assert_eq!(
            call(none.view(), no_counts.view(), no_train.view(), y.view()),
            Err("members")
        );
    }

    #[test]
    fn class_sets_by_hand() {
        // three members, four rows, two classes; y = 0, 0, 1, 1
        let counts = array![[0u8, 1, 0, 1], [1, 0, 1, 0], [1, 1, 1, 0]];
        let mut train = Array3::<f64>::zeros((3, 4, 2));
        let p1 = [[0.9, 0.3, 0.2, 0.4], [0.8, 0.7, 0.6, 0.1], [0.5; 4]];
        for m in 0..3 {
            for i in 0..4 {
                train[[m, i, 1]] = p1[m][i];
                train[[m, i, 0]] = 1.0 - p1[m][i];
            }
        }
        // out-of-bag P(class 1): row 0 -> 0.9 (m0), row 1 -> 0.7 (m1), row 2 -> 0.2 (m0),
        // row 3 -> members 1 and 2: (0.1 + 0.5) / 2 = 0.3
        // least-ambiguous scores 1 - p[y]: 0.9, 0.7, 0.8, 0.7; level 0.5, n = 4:
        // k+ = ceil(0.5 * 5) = 3 -> q = 0.8 (sorted 0.7, 0.7, 0.8, 0.9)
        let y = array![0i64, 0, 1, 1];
        // one new point with mean P(class 1) = 0.1: scores 0.1 (class 0), 0.9 (class 1)
        let mut members = Array3::<f64>::zeros((3, 1, 2));
        for (m, p) in [0.1, 0.05, 0.15].iter().enumerate() {
            members[[m, 0, 1]] = *p;
            members[[m, 0, 0]] = 1.0 - p;
        }
        let mut sets = Array2::from_elem((1, 2), false);
        let c = prediction_set(
            members.view(),
            counts.view(),
            train.view(),
            y.view(),
            0.5,
            SetMethod::LeastAmbiguous,
            sets.view_mut(),
            &pool(1),
            &Silent,
        )
        .unwrap();
        assert!((c.threshold - 0.8).abs() < 1e-15);
        assert_eq!(sets.row(0).to_vec(), vec![true, false]);
        // adaptive scores s(p, y): row 0 p=(0.1, 0.9), y=0 -> 0.9 + 0.1 = 1.0; row 1
        // (0.3, 0.7), y=0 -> 1.0; row 2 (0.8, 0.2), y=1 -> 1.0; row 3 (0.7, 0.3), y=1 ->
        // 1.0 -> q = 1.0; class 0 at the new point scores 0.9
        let c = prediction_set(
            members.view(),
            counts.view(),
            train.view(),
            y.view(),
            0.5,
            SetMethod::Adaptive,
            sets.view_mut(),
            &pool(1),
            &Silent,
        )
        .unwrap();
        assert!((c.threshold - 1.0).abs() < 1e-15);
        assert!(sets[[0, 0]]);
        let bad_y = array![0i64, 0, 2, 1];
        let e = prediction_set(
            members.view(),
            counts.view(),
            train.view(),
            bad_y.view(),
            0.5,
            SetMethod::Adaptive,
            sets.view_mut(),
            &pool(1),
            &Silent,
        )
        .unwrap_err();
        assert!(matches!(
            e,
            Error::InvalidValue {
                argument: "y_train",
                ..
            }
        ));
    }

    #[test]
    fn thread_counts_agree() {
        let (n_members, n_rows, n_points) = (7, 50, 300);
        let value = |a: usize, b: usize| ((a * 7919 + b * 104_729) % 1000) as f64 / 100.0;
        let members = Array2::from_shape_fn((n_members, n_points), |(m, j)| value(m, j + 3));
        let train = Array2::from_shape_fn((n_members, n_rows), |(m, i)| value(m + 5, i));
        let counts = Array2::from_shape_fn((n_members, n_rows), |(m, i)| ((m + 2 * i) % 3) as u16);
        let y = Array1::from_shape_fn(n_rows, |i| value(1, i * 3));
        let run = |threads| {
            let (mut lo, mut up) = (vec![0.0; n_points], vec![0.0; n_points]);
            prediction_interval(
                members.view(),
                counts.view(),
                train.view(),
                y.view(),
                0.8,
                IntervalMethod::JackknifePlus,
                &mut lo,
                &mut up,
                &pool(threads),
                &Silent,
            )
            .unwrap();
            (lo, up)
        };
        let one = run(1);
        assert_eq!(one, run(2));
        assert_eq!(one, run(3));
        assert!(one.0.iter().zip(&one.1).all(|(l, u)| l <= u));
    }

    #[test]
    fn member_count_probability_by_hand() {
        // n = 3, m = 2 with replacement: (3/4)^2 = 0.5625; without: 1 - 2/4 = 0.5
        let p = member_count_probability(3, 2, true).unwrap();
        assert!((p - 0.5625).abs() < 1e-15);
        assert_eq!(member_count_probability(3, 2, false).unwrap(), 0.5);
        assert!(member_count_probability(0, 2, true).is_err());
        assert!(member_count_probability(3, 0, true).is_err());
        assert!(member_count_probability(3, 4, false).is_err());
    }

    #[test]
    fn random_member_count_is_seeded_and_binomial() {
        assert_eq!(random_member_count(50, 0.0, 1).unwrap(), 0);
        assert_eq!(random_member_count(50, 1.0, 1).unwrap(), 50);
        assert!(random_member_count(50, 1.5, 1).is_err());
        assert_eq!(
            random_member_count(200, 0.37, 9).unwrap(),
            random_member_count(200, 0.37, 9).unwrap()
        );
        // mean over 2,000 seeds against n p = 74, standard error sqrt(n p (1 - p) / 2000)
        let draws: Vec<f64> = (0..2000)
            .map(|seed| random_member_count(200, 0.37, seed).unwrap() as f64)
            .collect();
        let mean = draws.iter().sum::<f64>() / draws.len() as f64;
        let se = (200.0 * 0.37 * 0.63 / 2000.0f64).sqrt();
        assert!((mean - 74.0).abs() < 4.0 * se, "mean {mean}");
    }

    #[test]
    fn leave_out_means_match_a_direct_sum() {
        // both compiled versions against the definition, point by point
        let (n_members, n_rows) = (11, 37);
        let counts =
            Array2::from_shape_fn((n_members, n_rows), |(m, i)| ((m * 5 + i * 3) % 4) as u8);
        let n_out: Vec<usize> = (0..n_rows)
            .map(|i| counts.column(i).iter().filter(|&&c| c == 0).count())
            .collect();
        let used: Vec<usize> = (0..n_rows).filter(|&i| n_out[i] > 0).collect();
        let lists = OutOfBagLists::new(counts.view(), &used, &n_out).unwrap();
        const P: usize = LEAVE_OUT_CHUNK;
        let values: Vec<[f64; P]> = (0..n_members)
            .map(|m| std::array::from_fn(|j| ((m * 31 + j * 17) % 23) as f64 / 7.0))
            .collect();
        let n = used.len();
        let (mut plain, mut fast) = (vec![0.0; P * n], vec![0.0; P * n]);
        leave_out_means::<P>(&lists, &values, &mut plain);
        leave_out_means_dispatch::<P>(&lists, &values, &mut fast);
        assert_eq!(plain, fast);
        for (u, &i) in used.iter().enumerate() {
            for j in 0..P {
                let sum: f64 = (0..n_members)
                    .filter(|&m| counts[[m, i]] == 0)
                    .map(|m| values[m][j])
                    .sum();
                assert_eq!(plain[j * n + u], sum * (1.0 / n_out[i] as f64));
            }
        }
    }

    #[test]
    fn sampled_selection_is_exact() {
        let (mut scratch, mut kept) = (Vec::new(), Vec::new());
        for (len, seed) in [(5000usize, 1usize), (20_011, 7), (3000, 3)] {
            // sorted, reversed and scrambled inputs, with ties
            let patterns: [Vec<f64>; 3] = [
                (0..len).map(|i| (i / 3) as f64).collect(),
                (0..len).map(|i| (len - i) as f64).collect(),
                (0..len)
                    .map(|i| ((i * 7919 + seed * 104_729) % 1013) as f64 * 0.5)
                    .collect(),
            ];
            let residuals: Vec<f64> = (0..len).map(|i| ((i * 31) % 17) as f64).collect();
            for means in &patterns {
                for sign in [-1.0, 1.0] {
                    let mut all: Vec<f64> = means
                        .iter()
                        .zip(&residuals)
                        .map(|(m, r)| m + sign * r)
                        .collect();
                    all.sort_by(f64::total_cmp);
                    for k in [0, 1, len / 10, len / 2, len - len / 10, len - 1] {
                        let got = kth_of(means, &residuals, sign, k, &mut scratch, &mut kept);
                        assert_eq!(got, all[k]);
                    }
                }
                for (k_lower, k_upper) in
                    [(0, len - 1), (len / 10, len - len / 10), (len / 2, len / 2)]
                {
                    let mut pair = [Vec::new(), Vec::new()];
                    let got = bounds_of(
                        means,
                        &residuals,
                        (k_lower, k_upper),
                        &mut scratch,
                        &mut pair,
                    );
                    let one = kth_of(means, &residuals, -1.0, k_lower, &mut scratch, &mut kept);
                    let other = kth_of(means, &residuals, 1.0, k_upper, &mut scratch, &mut kept);
                    assert_eq!(got, (one, other));
                }
            }
        }
    }
}
