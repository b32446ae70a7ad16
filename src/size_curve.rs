//! The ensemble-size curve: the loss of the ensemble of the first k members, averaged over
//! random member orders, with the exact finite-ensemble law for squared-type losses.
//!
//! The curve runs over chunks of points through [`crate::members::for_chunks`]; its state
//! ([`SizeCurveState`]) is mergeable, so streams fed chunk by chunk (or merged from parts)
//! give the in-memory curve up to rounding.
//!
//! ```text
//! sampling without          Cochran (1977), Sampling Techniques, 3rd ed., Theorem 2.2
//! replacement               (variance of the mean of a simple random sample)
//! ```

use std::ops::Range;

use ndarray::{s, ArrayView3, Axis};
use serde::{Deserialize, Serialize};

use crate::aggregation::MemberWeights;
use crate::decomposition::{
    non_finite_members, one_hot_target, residual_moments, value_target, Loss, TargetFill,
};
use crate::error::{zeroed, Error, Result};
use crate::members::{
    add_votes, class_of, for_chunks, no_slots, Chunks, Members, MergeableState, Targets,
    MAX_CLASSES,
};
use crate::numeric::{Moments, Real};
use crate::parallel::{Monitor, Pool};
use crate::random::MemberStreams;

/// Mergeable state of the ensemble-size curve over the points seen so far.
///
/// ```text
/// For a random order π_o of the members (o = 1..orders) and size k, the loss of the
/// ensemble of the first k members is
///   L_o(k) = (1/n) Σ_j loss(t̄_{o,k,j}, y_j),  t̄_{o,k,j} = (1/k) Σ_{i ≤ k} t_{π_o(i), j}
/// (squared: (t̄ − y)²; Brier: Σ_c (p̄_c − 1[y=c])²; error rate: 1[majority vote ≠ y]).
/// The curve is the mean of L_o(k) over orders, with std_error sd_o / √orders.
///
/// The finite-ensemble law (squared and Brier). Members are fit on independent resamples,
/// so given the data their predictions at a point are i.i.d. draws with mean μ and
/// variance σ². For k such draws, E t̄_k = μ and Var t̄_k = σ²/k, hence
///   E[(t̄_k − y)²] = (μ − y)² + σ²/k,
/// and averaged over points, E[loss(k)] = loss(∞) + W/k with W = mean over points of σ²
/// (Brier: summed over classes). Estimates from the M members at hand: W ("mean_within") =
/// mean over points of the across-member variance s² (ddof 1), loss(∞) = loss(M) − W/M
/// ("infinite_loss"),
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
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct SizeCurveState {
    loss: Loss,
    members: usize,
    n_classes: Option<usize>,
    sizes: Vec<usize>,
    orders: Vec<Vec<usize>>,
    sums: Vec<f64>,
    n_points: u64,
    ensemble: Moments,
    within: Moments,
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
    pub std_error: Vec<f64>,
    /// Loss of the ensemble of all M members, loss(M).
    pub ensemble_loss: f64,
    /// W: mean over points of the across-member variance, ddof 1, the within part (NaN for
    /// error rates and for M = 1).
    pub mean_within: f64,
    /// Number of points.
    pub n_points: u64,
    /// Number of members M.
    pub n_members: usize,
}

impl SizeCurve {
    /// loss(∞) = loss(M) − W/M.
    pub fn infinite_loss(&self) -> f64 {
        self.ensemble_loss - self.mean_within / self.n_members as f64
    }

    /// law(k) = loss(∞) + W/k = loss(M) + W (1/k − 1/M).
    pub fn law(&self, k: f64) -> f64 {
        self.infinite_loss() + self.mean_within / k
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
        // `orders` x `members` indices and `orders` x sizes sums: sized by arguments, so
        // an absurd count is a `MemoryError` naming `orders`, never an aborted process.
        let too_many = |bytes| Error::OutOfMemory {
            argument: "orders",
            bytes,
        };
        let cells = orders
            .checked_mul(members.max(1))
            .and_then(|n| n.checked_mul(std::mem::size_of::<usize>()))
            .ok_or(too_many(usize::MAX))?;
        let mut permutations: Vec<Vec<usize>> = Vec::new();
        permutations
            .try_reserve_exact(orders)
            .map_err(|_| too_many(cells))?;
        let sums = zeroed(
            orders
                .checked_mul(sizes.len())
                .ok_or(too_many(usize::MAX))?,
            "orders",
        )?;
        let mut streams = MemberStreams::new(seed);
        for _ in 0..orders {
            let mut draws = streams.take(1).pop().expect("take(1) gives one stream");
            let mut order = Vec::new();
            order
                .try_reserve_exact(members)
                .map_err(|_| too_many(cells))?;
            order.extend(0..members);
            for i in (1..members).rev() {
                order.swap(i, draws.below(i + 1));
            }
            permutations.push(order);
        }
        Ok(SizeCurveState {
            loss,
            members,
            n_classes: None,
            sums,
            sizes,
            orders: permutations,
            n_points: 0,
            ensemble: Moments::default(),
            within: Moments::default(),
        })
    }

    /// The member orders, one permutation of 0..members per order.
    pub fn orders(&self) -> &[Vec<usize>] {
        &self.orders
    }

    fn check_members(&self, members: usize) -> Result<()> {
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

    /// The chunks of `n` points: always [`CHUNK_POINTS`] each (so results do not depend on
    /// anything else), but one chunk per thread a round when a point costs many operations
    /// (orders × members × cells), so the monitor (progress, Ctrl-C) is called every few
    /// hundred milliseconds at most whatever the number of orders.
    fn chunks(&self, n: usize, per_order: usize, pool: &Pool) -> Chunks {
        let mut chunks = Chunks::of(n);
        if self.orders.len() * per_order >= 4096 {
            chunks.per_round = pool.threads().max(1);
        }
        chunks
    }

    fn merge_part(&mut self, part: CurvePart) {
        self.sums
            .iter_mut()
            .zip(&part.sums)
            .for_each(|(s, p)| *s += p);
        self.n_points += part.n_points;
        self.ensemble = self.ensemble.merge(&part.ensemble);
        self.within = self.within.merge(&part.within);
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
        let within_divisor = if m > 1 { (m - 1) as f64 } else { f64::NAN };
        let work = |points: Range<usize>, _: &mut ()| {
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
            let mut ensemble = Vec::with_capacity(len);
            let mut within = Vec::with_capacity(len);
            for j in 0..len {
                let cells = j * n_cells..(j + 1) * n_cells;
                let e: f64 = mean[cells.clone()].iter().map(|d| d * d).sum();
                let s: f64 = m2[cells].iter().sum();
                if !(e + s).is_finite() {
                    return Err(non_finite_members());
                }
                ensemble.push(e);
                within.push(s / within_divisor);
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
                ensemble: Moments::of_slice(&ensemble),
                within: Moments::of_slice(&within),
            })
        };
        let chunks = self.chunks(n, m * n_cells, pool);
        let mut parts = Vec::with_capacity(chunks.count());
        for_chunks(chunks, &mut no_slots(chunks), pool, monitor, work, |part| {
            parts.push(part);
            Ok(())
        })?;
        parts.into_iter().for_each(|part| self.merge_part(part));
        Ok(())
    }

    /// Adds a chunk of points (all members): values (loss `squared_error`), probabilities
    /// (`brier_score`) or labels (`error_rate`, majority vote with the lowest-index tie rule
    /// at every size).
    ///
    /// # Errors
    /// `members` (kind, member or class count, NaN/±inf, probabilities off the simplex,
    /// labels outside 0..n_classes), `y` (length, NaN/±inf, labels).
    pub fn update<T: Real>(
        &mut self,
        members: Members<'_, T>,
        y: Targets<'_>,
        pool: &Pool,
        monitor: &dyn Monitor,
    ) -> Result<()> {
        members.check_targets(y.len())?;
        self.loss.require(&members)?;
        self.check_members(members.n_members())?;
        match (members, y) {
            (Members::Values(v), Targets::Values(y)) => self.update_values(v, y, pool, monitor),
            (Members::Probabilities(p), Targets::Labels(y)) => {
                self.update_probabilities(p, y, pool, monitor)
            }
            (Members::Labels(l, k), Targets::Labels(y)) => {
                self.update_labels(l, y, k, pool, monitor)
            }
            _ => Err(Error::kind(
                "y",
                "real targets go with values, integer class labels with probabilities and labels",
            )),
        }
    }

    /// Adds a chunk of value predictions (loss `squared_error`).
    ///
    /// # Errors
    /// `members` (member count, NaN/±inf), `y` (length, NaN/±inf).
    fn update_values<T: Real>(
        &mut self,
        members: ndarray::ArrayView2<'_, T>,
        y: ndarray::ArrayView1<'_, f64>,
        pool: &Pool,
        monitor: &dyn Monitor,
    ) -> Result<()> {
        let targets =
            |points: &Range<usize>, target: &mut Vec<f64>| value_target(y, points, target);
        self.update_cells(members.insert_axis(Axis(2)), &targets, false, pool, monitor)
    }

    /// Adds a chunk of probability predictions (loss `brier_score`).
    ///
    /// # Errors
    /// `members` (member/class count, probabilities off the simplex), `y` (labels).
    fn update_probabilities<T: Real>(
        &mut self,
        members: ArrayView3<'_, T>,
        y: ndarray::ArrayView1<'_, i64>,
        pool: &Pool,
        monitor: &dyn Monitor,
    ) -> Result<()> {
        let n_classes = members.len_of(Axis(2));
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
    fn update_labels(
        &mut self,
        members: ndarray::ArrayView2<'_, i64>,
        y: ndarray::ArrayView1<'_, i64>,
        n_classes: usize,
        pool: &Pool,
        monitor: &dyn Monitor,
    ) -> Result<()> {
        let (m, n) = members.dim();
        let (sizes, orders) = (&self.sizes, &self.orders);
        let ones = vec![1.0; m];
        let work = |points: Range<usize>, _: &mut ()| {
            let len = points.len();
            let labels: Vec<usize> = y
                .slice(s![points.clone()])
                .iter()
                .map(|&l| class_of(l, n_classes, "y"))
                .collect::<Result<_>>()?;
            let errors = |winner: &[usize]| {
                winner.iter().zip(&labels).filter(|(w, l)| w != l).count() as f64
            };
            let mut totals = crate::error::zeroed(len * n_classes, "n_classes")?;
            let mut winner = vec![0usize; len];
            add_votes(
                &members,
                &mut (0..m),
                &points,
                n_classes,
                &ones,
                &mut totals,
                &mut winner,
            )?;
            let ensemble: Vec<f64> = winner
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
                    add_votes(
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
                ensemble: Moments::of_slice(&ensemble),
                within: Moments::default(),
            })
        };
        let chunks = self.chunks(n, m, pool);
        let mut parts = Vec::with_capacity(chunks.count());
        for_chunks(chunks, &mut no_slots(chunks), pool, monitor, work, |part| {
            parts.push(part);
            Ok(())
        })?;
        parts.into_iter().for_each(|part| self.merge_part(part));
        Ok(())
    }

    /// Number of points seen so far.
    pub fn n_points(&self) -> u64 {
        self.n_points
    }
}

impl MergeableState for SizeCurveState {
    type Output = SizeCurve;

    fn check_stored(&self) -> Result<()> {
        let m = self.members;
        let sizes_ok = !self.sizes.is_empty()
            && self.sizes.windows(2).all(|w| w[0] < w[1])
            && self.sizes[0] >= 1
            && self.sizes[self.sizes.len() - 1] <= m;
        // Every order has m entries before `m` sizes anything (m is bounded by the bytes).
        let orders_ok = !self.orders.is_empty()
            && self.orders.iter().all(|order| order.len() == m)
            && self.orders.iter().all(|order| {
                let mut seen = vec![false; m];
                order
                    .iter()
                    .all(|&b| b < m && !std::mem::replace(&mut seen[b], true))
            });
        let ok = m >= 1
            && sizes_ok
            && orders_ok
            && self.orders.len().checked_mul(self.sizes.len()) == Some(self.sums.len())
            && self
                .n_classes
                .is_none_or(|k| (1..=MAX_CLASSES).contains(&k));
        if ok {
            Ok(())
        } else {
            Err(Error::value(
                "state",
                "is not a consistent size-curve state (sizes, orders or sums disagree)",
            ))
        }
    }

    fn merge(&mut self, other: Self) -> Result<()> {
        if other.loss != self.loss
            || other.members != self.members
            || other.sizes != self.sizes
            || other.orders != self.orders
        {
            return Err(Error::value(
                "other",
                "was set up with another loss, members, sizes, orders or seed",
            ));
        }
        if let (Some(a), Some(b)) = (self.n_classes, other.n_classes) {
            if a != b {
                return Err(Error::value(
                    "other",
                    format!("has {b} classes but this curve has {a}"),
                ));
            }
        }
        self.n_classes = self.n_classes.or(other.n_classes);
        self.merge_part(CurvePart {
            sums: other.sums,
            n_points: other.n_points,
            ensemble: other.ensemble,
            within: other.within,
        });
        Ok(())
    }

    /// The curve over all points seen so far.
    ///
    /// # Errors
    /// `members` when no points were added.
    fn finish(&self) -> Result<SizeCurve> {
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
            std_error: by_size
                .iter()
                .map(|m| (m.variance(1) / orders).sqrt())
                .collect(),
            per_order,
            ensemble_loss: self.ensemble.mean(),
            mean_within: if self.loss == Loss::ErrorRate {
                f64::NAN
            } else {
                self.within.mean()
            },
            n_points: self.n_points,
            n_members: self.members,
        })
    }
}

struct CurvePart {
    sums: Vec<f64>,
    n_points: u64,
    ensemble: Moments,
    within: Moments,
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::decomposition::{decompose_values, PointLosses};
    use crate::parallel::Silent;
    use approx::assert_relative_eq;
    use ndarray::{Array1, Array2};

    const POOL: Pool = Pool::Global;

    #[test]
    fn an_absurd_number_of_orders_is_an_error_not_an_abort() {
        for orders in [1usize << 40, usize::MAX / 2] {
            let state = SizeCurveState::new(Loss::SquaredError, 8, vec![1, 8], orders, 0);
            assert!(matches!(
                state,
                Err(Error::OutOfMemory {
                    argument: "orders",
                    ..
                })
            ));
        }
    }

    use crate::members::test_values as values;

    fn add(state: &mut SizeCurveState, members: &Array2<f64>, y: &Array1<f64>, part: Range<usize>) {
        state
            .update(
                Members::Values(members.slice(s![.., part.clone()])),
                Targets::Values(y.slice(s![part])),
                &POOL,
                &Silent,
            )
            .unwrap();
    }

    #[test]
    fn size_curve_ends_and_law() {
        let (m, n) = (6, 300);
        let members = Array2::from_shape_vec((m, n), values(m * n, 3)).unwrap();
        let y = Array1::from(values(n, 4));
        let mut state = SizeCurveState::new(Loss::SquaredError, m, vec![1, 2, 6], 50, 9).unwrap();
        for order in state.orders() {
            let mut sorted = order.clone();
            sorted.sort_unstable();
            assert_eq!(sorted, (0..m).collect::<Vec<_>>());
        }
        add(&mut state, &members, &y, 0..n);
        let curve = state.finish().unwrap();
        let (mut e, mut mm, mut g) = (vec![0.0; n], vec![0.0; n], vec![0.0; n]);
        let out = PointLosses {
            ensemble: &mut e,
            member: &mut mm,
            gain: &mut g,
        };
        let uniform = MemberWeights::uniform(m);
        let sums =
            decompose_values(members.view(), y.view(), &uniform, out, &POOL, &Silent).unwrap();
        // k = M is the full ensemble whatever the order; the law equals it there.
        assert_relative_eq!(curve.curve[2], sums.ensemble.mean(), max_relative = 1e-12);
        assert!(curve.std_error[2] < 1e-12);
        assert_relative_eq!(
            curve.law(m as f64),
            curve.ensemble_loss,
            max_relative = 1e-12
        );
        // At k = 1 the law is the mean member loss (Cochran 1977, Theorem 2.2).
        assert_relative_eq!(curve.law(1.0), sums.member.mean(), max_relative = 1e-12);
        // W = mean over points of the ddof-1 variance = ambiguity · M/(M − 1).
        assert_relative_eq!(
            curve.mean_within,
            sums.gain.mean() * m as f64 / (m - 1) as f64,
            max_relative = 1e-12
        );
        assert!((curve.curve[1] - curve.law(2.0)).abs() < 4.0 * curve.std_error[1] + 1e-12);
        // Chunked updates give the same curve.
        let mut chunked = SizeCurveState::new(Loss::SquaredError, m, vec![1, 2, 6], 50, 9).unwrap();
        for part in [0..100, 100..101, 101..300] {
            add(&mut chunked, &members, &y, part);
        }
        let again = chunked.finish().unwrap();
        for (a, b) in again.curve.iter().zip(&curve.curve) {
            assert_relative_eq!(a, b, max_relative = 1e-12);
        }
        // Two halves merged (one through bytes) give the same curve.
        let mut first = SizeCurveState::new(Loss::SquaredError, m, vec![1, 2, 6], 50, 9).unwrap();
        let mut second = first.clone();
        add(&mut first, &members, &y, 0..120);
        add(&mut second, &members, &y, 120..n);
        let second = SizeCurveState::from_bytes(&second.to_bytes().unwrap()).unwrap();
        first.merge(second).unwrap();
        let merged = first.finish().unwrap();
        for (a, b) in merged.curve.iter().zip(&curve.curve) {
            assert_relative_eq!(a, b, max_relative = 1e-12);
        }
        let other_seed = SizeCurveState::new(Loss::SquaredError, m, vec![1, 2, 6], 50, 10).unwrap();
        assert!(first.merge(other_seed).is_err());
        assert!(SizeCurveState::new(Loss::SquaredError, 3, vec![2, 1], 1, 0).is_err());
        assert!(SizeCurveState::new(Loss::SquaredError, 3, vec![4], 1, 0).is_err());
        assert!(SizeCurveState::new(Loss::SquaredError, 3, vec![1], 0, 0).is_err());
        let empty = SizeCurveState::new(Loss::SquaredError, 3, vec![1], 1, 0).unwrap();
        assert!(empty.finish().is_err());
    }
}
