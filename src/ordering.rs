//! Ordered aggregation and pruning: the order in which members are added so that the first
//! few already do the work of the whole ensemble ([`order_members`]), and the loss of the
//! first k members of given orders ([`order_curves`]).
//!
//! Every method reads the members on a fixed set of points (all, or those `points`
//! selects, e.g. a cross-fitting fold); in out-of-bag mode (`counts` given) member m
//! predicts at point i only where `counts[m, i] == 0`, and its entries elsewhere are never
//! read (they may be NaN).
//!
//! ```text
//! Loss of a subensemble S (order_curves; the greedy criteria use the total version below)
//!   regression      squared error of the members' mean: (y_i − Σ_{m∈S} f_mi / k_i)²
//!   classification  error rate of the aggregated vote: probabilities → the members' mean
//!                   probability, labels → vote fractions; the class is the argmax, lowest
//!                   class index among ties (members::vote), so the curve at k = all members
//!                   is `out_of_bag` / `aggregate` on the same data. Member sums in the
//!                   member order of the prefix.
//!   out of bag      k_i = members of S predicting at i; the loss at k is the mean over the
//!                   points read with k_i ≥ 1 (NaN when there is none), as `out_of_bag`'s curve.
//!   greedy total    reduce_error: a point not yet covered counts at the mean loss of the
//!                   members predicting there (the share of them wrong, or their mean
//!                   (f_mi − y_i)²; 0 where none does), so each criterion is a total over one
//!                   fixed set of points and covering a point gains only when the member
//!                   beats a typical one there; complementarity: an uncovered point is
//!                   wrong.
//!
//! Signatures (classification): c_m ∈ {+1 right, −1 wrong, 0 not predicting}^n over the
//! points read; "right" is the member's label (probabilities: argmax, lowest index among
//! ties) equal to y_i.
//!
//! reduce_error (Margineantu & Dietterich 1997, "Pruning adaptive boosting", ICML):
//!   greedy forward selection; step u adds the member whose addition gives the lowest total
//!   loss of the subensemble. Ties: lowest member index (classification totals compared at
//!   a resolution of 2⁻²⁰ errors, so that exact ties of the shares survive rounding).
//! complementarity (Martínez-Muñoz & Suárez 2004, "Aggregation ordering in bagging";
//!   Martínez-Muñoz, Hernández-Lobato & Suárez 2009, IEEE TPAMI 31(2)): greedy; add the
//!   member right on the most points where the current subensemble is wrong (empty
//!   subensemble, or no out-of-bag vote yet: wrong). Ties: lowest index.
//! margin_distance (Martínez-Muñoz, Hernández-Lobato & Suárez 2009, TPAMI 31(2)): greedy;
//!   with o = target_margin · (1, …, 1), step u adds the member minimising
//!   ‖o − (Σ_{j∈S} c_j + c_m) / u‖. Ties: lowest index.
//! orientation (Martínez-Muñoz & Suárez 2006, "Pruning in ordered bagging ensembles",
//!   ICML): c_ens = Σ_m c_m, o = 1 − (⟨1, c_ens⟩ / ‖c_ens‖²) c_ens (o = 1 when c_ens = 0);
//!   members by decreasing ⟨c_m, o⟩ / (‖c_m‖ ‖o‖) (increasing angle). When o = 0
//!   (c_ens parallel to 1), by decreasing ⟨c_m, 1⟩ / ‖c_m‖ (accuracy margin) instead. A
//!   member with ‖c_m‖ = 0 (predicts nowhere) has no angle and comes last. Scores are
//!   compared exactly (integer numerators), so equal angles tie. Ties: lowest index.
//! residual_correlation (regression; ours, in the spirit of complementarity): first the
//!   member with the lowest own mean squared error over the points it predicts; then the
//!   member whose residual e_m = f_m − y has the smallest Pearson correlation with the
//!   subensemble's mean residual over the points where both are defined. A correlation is
//!   undefined with fewer than 3 common points (on 2 it is ±1 whatever the members) or a
//!   variance ≤ 1e-12 × the mean square (constant residuals); such candidates rank after
//!   every defined one. Ties: lowest index.
//! ```
//!
//! How each runs (exact results; the incremental forms give the orders of recomputing the
//! ensemble per candidate, checked in the tests):
//!
//! ```text
//! classification reduce_error  per-point vote totals; a member moves the margin
//!                              totals[y] − max_{c≠y} totals[c] by at most 1, so only
//!                              undecided points (uncovered or |margin| ≤ 1 + 1e-4) are
//!                              scored; the list is rebuilt after each step
//! complementarity              right / predicting bitsets per member, popcount of
//!                              right_m ∧ ¬right_S
//! margin_distance              integer Gram ⟨c_j, c_m⟩ from popcounts, kept as running sums
//!                              Σ_{j∈S} ⟨c_j, c_m⟩: each step O(members · points / 64)
//! orientation                  c_ens from the bitsets, one pass and a sort
//! regression, no counts        residual Gram E Eᵀ (E = members − y) over blocks of points in
//!                              a fixed order and fixed member tiles, then O(members) a step
//! regression, counts           per-point residual sums and counts; one pass per candidate
//!                              over its out-of-bag points, candidates in parallel
//! ```
//!
//! Candidates are scored in parallel, each by one thread over its points in a fixed order,
//! and the argmin is taken over (score, index), so results do not depend on the thread
//! count. The monitor is called between steps (progress: steps done of `size`) and between
//! blocks of the set-up passes. Working memory: O(points · classes + members²) plus two
//! bits per member and point; never a members × points float copy.

use ndarray::{s, Array2, ArrayView2, ArrayViewMut2};
use rayon::prelude::*;

use crate::error::{zeroed, Error, Result};
use crate::members::{
    check_probability_row, class_of, for_chunks, no_slots, vote, Chunks, Members, Targets,
};
use crate::numeric::Real;
use crate::out_of_bag::InBagCounts;
use crate::parallel::{Monitor, Pool};

/// The ways to order members.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Method {
    /// Greedy forward selection by the subensemble's loss (both tasks).
    ReduceError,
    /// Angle to the reference vector (classification).
    Orientation,
    /// Right where the subensemble is wrong (classification).
    Complementarity,
    /// Distance of the mean signature to the target margin (classification).
    MarginDistance,
    /// Least correlated residuals (regression).
    ResidualCorrelation,
}

const REGRESSION_METHODS: &str = "'reduce_error' or 'residual_correlation'";
const CLASSIFICATION_METHODS: &str =
    "'reduce_error', 'orientation', 'complementarity' or 'margin_distance'";

impl Method {
    /// Parses the user-facing name.
    ///
    /// # Errors
    /// `method` for an unknown name, naming the allowed ones.
    pub fn parse(name: &str) -> Result<Self> {
        Ok(match name {
            "reduce_error" => Method::ReduceError,
            "orientation" => Method::Orientation,
            "complementarity" => Method::Complementarity,
            "margin_distance" => Method::MarginDistance,
            "residual_correlation" => Method::ResidualCorrelation,
            other => {
                return Err(Error::value(
                    "method",
                    format!(
                        "expected {CLASSIFICATION_METHODS} (classification) or \
                         {REGRESSION_METHODS} (regression), got {other:?}"
                    ),
                ))
            }
        })
    }

    /// The user-facing name.
    pub fn name(self) -> &'static str {
        match self {
            Method::ReduceError => "reduce_error",
            Method::Orientation => "orientation",
            Method::Complementarity => "complementarity",
            Method::MarginDistance => "margin_distance",
            Method::ResidualCorrelation => "residual_correlation",
        }
    }

    fn check_task(self, regression: bool) -> Result<()> {
        let allowed = match self {
            Method::ReduceError => true,
            Method::ResidualCorrelation => regression,
            _ => !regression,
        };
        if allowed {
            return Ok(());
        }
        let (task, names) = if regression {
            ("regression (value members)", REGRESSION_METHODS)
        } else {
            ("classification", CLASSIFICATION_METHODS)
        };
        Err(Error::value(
            "method",
            format!(
                "{:?} does not apply to {task}; expected {names}",
                self.name()
            ),
        ))
    }
}

/// Members scored per monitor call in the set-up passes.
const SETUP_MEMBERS: usize = 32;
/// Points per block of the residual Gram.
const GRAM_POINTS: usize = 1024;
/// Member rows per parallel tile of the residual Gram (fixed, so no digit depends on the
/// thread count).
const GRAM_TILE: usize = 32;
/// Slack added to the margin bound 1 of the undecided points (probabilities may exceed
/// [0, 1] by `PROBABILITY_TOLERANCE` each, sums carry rounding).
const MARGIN_SLACK: f64 = 1e-4;

/// The members on the points read, with who predicts where.
struct Problem<'a, T> {
    members: Members<'a, T>,
    /// The points read (ascending indices into the members' points).
    idx: Vec<usize>,
    /// Words of a bitset over the points read.
    words: usize,
    /// members × words: bit j set when the member predicts at point j (None: everywhere).
    predicts: Option<Vec<u64>>,
    /// Targets of the points read (regression).
    y_values: Vec<f64>,
    /// Targets of the points read (classification).
    y_classes: Vec<usize>,
    n_classes: usize,
}

impl<'a, T: Real> Problem<'a, T> {
    /// Checks the shapes and targets, reads the points and the counts.
    fn new(
        members: Members<'a, T>,
        y: Targets<'_>,
        counts: Option<&dyn InBagCounts>,
        points: Option<&[bool]>,
        pool: &Pool,
        monitor: &dyn Monitor,
        total: usize,
    ) -> Result<Self> {
        members.check_targets(y.len())?;
        let (m, n) = members.dim();
        if let Some(c) = counts {
            if c.dim() != (m, n) {
                let (cm, cn) = c.dim();
                return Err(Error::value(
                    "counts",
                    format!("has shape ({cm}, {cn}) but `members` has ({m}, {n})"),
                ));
            }
        }
        let idx: Vec<usize> = match points {
            None => (0..n).collect(),
            Some(p) if p.len() != n => {
                return Err(Error::value(
                    "points",
                    format!("has {} values but `members` has {n} points", p.len()),
                ))
            }
            Some(p) => (0..n).filter(|&i| p[i]).collect(),
        };
        if idx.is_empty() {
            return Err(Error::value("points", "selects no point"));
        }
        let regression = matches!(members, Members::Values(_));
        let n_classes = members.task().outputs();
        let (mut y_values, mut y_classes) = (Vec::new(), Vec::new());
        match (y, regression) {
            (Targets::Values(y), true) => {
                y_values = idx.iter().map(|&i| y[i]).collect();
                if let Some(j) = y_values.iter().position(|v| !v.is_finite()) {
                    return Err(Error::value(
                        "y",
                        format!("must be finite; point {} is {}", idx[j], y_values[j]),
                    ));
                }
            }
            (Targets::Labels(y), false) => {
                y_classes = idx
                    .iter()
                    .map(|&i| class_of(y[i], n_classes, "y"))
                    .collect::<Result<_>>()?;
            }
            (_, true) => return Err(Error::kind("y", "value members need float targets")),
            (_, false) => {
                return Err(Error::kind(
                    "y",
                    "classification members need integer class indices",
                ))
            }
        }
        let words = idx.len().div_ceil(64);
        let predicts = match counts {
            None => None,
            Some(c) => Some(out_of_bag_bits(c, &idx, words, pool, monitor, total)?),
        };
        Ok(Problem {
            members,
            idx,
            words,
            predicts,
            y_values,
            y_classes,
            n_classes,
        })
    }

    fn n(&self) -> usize {
        self.idx.len()
    }

    fn n_members(&self) -> usize {
        self.members.n_members()
    }

    /// Calls `f(j)` for every point read where member `m` predicts, in order.
    #[inline]
    fn each_point(&self, m: usize, mut f: impl FnMut(usize)) {
        match &self.predicts {
            None => (0..self.n()).for_each(f),
            Some(bits) => each_bit(&bits[m * self.words..(m + 1) * self.words], &mut f),
        }
    }

    /// Member m's bitset of predicting points (None: everywhere).
    fn predict_row(&self, m: usize) -> Option<&[u64]> {
        self.predicts
            .as_ref()
            .map(|bits| &bits[m * self.words..(m + 1) * self.words])
    }

    #[inline]
    fn value(&self, m: usize, j: usize) -> f64 {
        match &self.members {
            Members::Values(a) => a[[m, self.idx[j]]].to_f64(),
            _ => unreachable!("values only"),
        }
    }

    /// Member m's probabilities at point j, by index (a view per cell costs more than the
    /// cell).
    #[inline]
    fn probability_row<'s>(
        a: &'s ndarray::ArrayView3<'_, T>,
        m: usize,
        i: usize,
    ) -> impl Iterator<Item = f64> + 's {
        (0..a.dim().2).map(move |c| a[[m, i, c]].to_f64())
    }

    /// Adds member m's contribution at point j to `totals` (one row of n_classes).
    #[inline]
    fn add_class_row(&self, m: usize, j: usize, totals: &mut [f64]) {
        match &self.members {
            Members::Probabilities(a) => {
                totals
                    .iter_mut()
                    .zip(Self::probability_row(a, m, self.idx[j]))
                    .for_each(|(t, p)| *t += p);
            }
            Members::Labels(a, _) => totals[a[[m, self.idx[j]]] as usize] += 1.0,
            Members::Values(_) => unreachable!("classes only"),
        }
    }

    /// The vote of `totals` plus member m's contribution at j.
    #[inline]
    fn vote_with(&self, m: usize, j: usize, totals: &[f64]) -> usize {
        match &self.members {
            Members::Probabilities(a) => vote(
                totals
                    .iter()
                    .zip(Self::probability_row(a, m, self.idx[j]))
                    .map(|(t, p)| t + p),
            ),
            Members::Labels(a, _) => {
                let l = a[[m, self.idx[j]]] as usize;
                vote(
                    totals
                        .iter()
                        .enumerate()
                        .map(|(c, &t)| if c == l { t + 1.0 } else { t }),
                )
            }
            Members::Values(_) => unreachable!("classes only"),
        }
    }

    /// Checks every member's predictions where it predicts and, for classification,
    /// returns the members × words bitsets of the points where it is right.
    fn check_members(&self, pool: &Pool, monitor: &dyn Monitor, total: usize) -> Result<Vec<u64>> {
        let m = self.n_members();
        let regression = matches!(self.members, Members::Values(_));
        let row_words = if regression { 0 } else { self.words };
        let mut right = zeroed::<u64>(m * row_words, "members")?;
        let mut start = 0;
        while start < m {
            let end = (start + SETUP_MEMBERS).min(m);
            let block = &mut right[start * row_words..end * row_words];
            pool.run(|| {
                let work = |(k, bits): (usize, &mut [u64])| self.check_member(start + k, bits);
                if regression {
                    (start..end)
                        .into_par_iter()
                        .try_for_each(|k| self.check_member(k, &mut []))
                } else {
                    block
                        .par_chunks_mut(row_words)
                        .enumerate()
                        .try_for_each(work)
                }
            })?;
            monitor.progress(0, total)?;
            start = end;
        }
        Ok(right)
    }

    fn check_member(&self, m: usize, right: &mut [u64]) -> Result<()> {
        let mut outcome = Ok(());
        match &self.members {
            Members::Values(a) => self.each_point(m, |j| {
                let v = a[[m, self.idx[j]]].to_f64();
                if outcome.is_ok() && !v.is_finite() {
                    outcome = Err(Error::value(
                        "members",
                        format!(
                            "must be finite where read; member {m}, point {} is {v}",
                            self.idx[j]
                        ),
                    ));
                }
            }),
            Members::Probabilities(a) => self.each_point(m, |j| {
                if outcome.is_err() {
                    return;
                }
                let i = self.idx[j];
                outcome = check_probability_row(Self::probability_row(a, m, i));
                let label = vote(Self::probability_row(a, m, i));
                if label == self.y_classes[j] {
                    right[j / 64] |= 1 << (j % 64);
                }
            }),
            Members::Labels(a, c) => self.each_point(m, |j| {
                if outcome.is_err() {
                    return;
                }
                match class_of(a[[m, self.idx[j]]], *c, "members") {
                    Ok(label) if label == self.y_classes[j] => right[j / 64] |= 1 << (j % 64),
                    Ok(_) => {}
                    Err(e) => outcome = Err(e),
                }
            }),
        }
        outcome
    }

    /// Number of points member m predicts at.
    fn predicted(&self, m: usize) -> u64 {
        match self.predict_row(m) {
            None => self.n() as u64,
            Some(bits) => popcount(bits),
        }
    }
}

/// [`Members::check`], with the class count of labels named as required when it is 0.
fn check_kind<T: Real>(members: &Members<'_, T>) -> Result<()> {
    if let Members::Labels(_, 0) = members {
        return Err(Error::value(
            "n_classes",
            "is required for label members (at least 1)",
        ));
    }
    members.check()
}

/// Calls `f(j)` for every set bit j of `bits`, in order.
#[inline]
fn each_bit(bits: &[u64], f: &mut impl FnMut(usize)) {
    for (w, &word) in bits.iter().enumerate() {
        let mut word = word;
        while word != 0 {
            let b = word.trailing_zeros() as usize;
            f(w * 64 + b);
            word &= word - 1;
        }
    }
}

#[inline]
fn popcount(bits: &[u64]) -> u64 {
    bits.iter().map(|w| u64::from(w.count_ones())).sum()
}

/// The members × words bitsets of the points read where each member is out of bag.
fn out_of_bag_bits(
    counts: &dyn InBagCounts,
    idx: &[usize],
    words: usize,
    pool: &Pool,
    monitor: &dyn Monitor,
    total: usize,
) -> Result<Vec<u64>> {
    let m = counts.dim().0;
    let mut bits = zeroed::<u64>(m * words, "counts")?;
    let (first, last) = (idx[0], idx[idx.len() - 1] + 1);
    let mut start = 0;
    while start < m {
        let end = (start + SETUP_MEMBERS).min(m);
        pool.run(|| {
            bits[start * words..end * words]
                .par_chunks_mut(words)
                .enumerate()
                .try_for_each(|(k, row)| -> Result<()> {
                    let mut mask = vec![0.0; crate::members::CHUNK_POINTS];
                    let mut j = 0;
                    let mut at = first;
                    while at < last {
                        let len = crate::members::CHUNK_POINTS.min(last - at);
                        counts.out_of_bag_mask(start + k, at, &mut mask[..len])?;
                        while j < idx.len() && idx[j] < at + len {
                            if mask[idx[j] - at] != 0.0 {
                                row[j / 64] |= 1 << (j % 64);
                            }
                            j += 1;
                        }
                        at += len;
                    }
                    Ok(())
                })
        })?;
        monitor.progress(0, total)?;
        start = end;
    }
    Ok(bits)
}

/// Argmin of `score(m)` over the members not yet `chosen`, by (score, index), in parallel.
fn argmin<S: PartialOrd + Copy + Send>(
    pool: &Pool,
    chosen: &[bool],
    score: impl Fn(usize) -> S + Sync,
    cmp: impl Fn(&S, &S) -> std::cmp::Ordering + Sync,
) -> usize {
    pool.run(|| {
        (0..chosen.len())
            .into_par_iter()
            .filter(|&m| !chosen[m])
            .map(|m| (score(m), m))
            .min_by(|a, b| cmp(&a.0, &b.0).then(a.1.cmp(&b.1)))
            .map(|(_, m)| m)
            .expect("a member is left while steps remain")
    })
}

/// The order in which members are added: the first `size` members (all when None), by
/// `method` (see the module documentation for every definition and its source).
///
/// ```text
/// regression (values)              reduce_error, residual_correlation
/// classification (probabilities,   reduce_error, orientation, complementarity,
///   labels)                        margin_distance
/// ```
///
/// # Errors
/// `members` (no members or points; non-finite where read, probabilities outside [0, 1]
/// or not summing to 1, labels outside 0..n_classes), `y` (length, non-finite, class out of
/// range), `counts` (shape, negative), `points` (length, selects no point), `method` (not
/// for this task), `target_margin` (not finite or outside (0, 1]), `size` (0 or above the
/// number of members); [`Error::Interrupted`] from the monitor.
#[allow(clippy::too_many_arguments)]
pub fn order_members<T: Real>(
    members: Members<'_, T>,
    y: Targets<'_>,
    counts: Option<&dyn InBagCounts>,
    points: Option<&[bool]>,
    method: Method,
    target_margin: f64,
    size: Option<usize>,
    pool: &Pool,
    monitor: &dyn Monitor,
) -> Result<Vec<usize>> {
    check_kind(&members)?;
    let regression = matches!(members, Members::Values(_));
    method.check_task(regression)?;
    if !(target_margin.is_finite() && target_margin > 0.0 && target_margin <= 1.0) {
        return Err(Error::value(
            "target_margin",
            format!("must lie in (0, 1], got {target_margin}"),
        ));
    }
    let n_members = members.n_members();
    let size = size.unwrap_or(n_members);
    if size == 0 || size > n_members {
        return Err(Error::value(
            "size",
            format!("must lie in 1..={n_members} (the number of members), got {size}"),
        ));
    }
    let problem = Problem::new(members, y, counts, points, pool, monitor, size)?;
    let right = problem.check_members(pool, monitor, size)?;
    let order = match (method, regression, problem.predicts.is_some()) {
        (Method::ReduceError, true, false) => {
            let gram = residual_gram(&problem, pool, monitor, size)?;
            greedy_gram(&gram, false, size, pool, monitor)?
        }
        (Method::ResidualCorrelation, true, false) => {
            let gram = residual_gram(&problem, pool, monitor, size)?;
            greedy_gram(&gram, true, size, pool, monitor)?
        }
        (Method::ReduceError, true, true) => {
            regression_out_of_bag(&problem, false, size, pool, monitor)?
        }
        (Method::ResidualCorrelation, true, true) => {
            regression_out_of_bag(&problem, true, size, pool, monitor)?
        }
        (Method::ReduceError, false, _) => {
            classification_reduce_error(&problem, &right, size, pool, monitor)?
        }
        (Method::Complementarity, false, _) => {
            complementarity(&problem, &right, size, pool, monitor)?
        }
        (Method::MarginDistance, false, _) => {
            margin_distance(&problem, &right, target_margin, size, pool, monitor)?
        }
        (Method::Orientation, false, _) => {
            let order = orientation(&problem, &right, pool);
            monitor.progress(size, size)?;
            order[..size].to_vec()
        }
        _ => unreachable!("checked by check_task"),
    };
    Ok(order)
}

// -- regression ---------------------------------------------------------------------------

/// The residual Gram E Eᵀ (E = members − y on the points read) and the residual sums.
struct Gram {
    gram: Array2<f64>,
    sums: Vec<f64>,
    n: usize,
}

fn residual_gram<T: Real>(
    problem: &Problem<'_, T>,
    pool: &Pool,
    monitor: &dyn Monitor,
    total: usize,
) -> Result<Gram> {
    let (m, n) = (problem.n_members(), problem.n());
    let Members::Values(a) = problem.members else {
        unreachable!("values only")
    };
    let mut gram = zeroed::<f64>(m * m, "members")?;
    let mut sums = vec![0.0; m];
    let mut block = zeroed::<f64>(m * GRAM_POINTS.min(n), "members")?;
    let mut start = 0;
    while start < n {
        let len = GRAM_POINTS.min(n - start);
        let points = &problem.idx[start..start + len];
        let targets = &problem.y_values[start..start + len];
        let e = &mut block[..m * len];
        // The residual block (members in parallel), then its Gram in fixed member tiles.
        pool.run(|| {
            e.par_chunks_mut(len).enumerate().for_each(|(k, row)| {
                let member = a.row(k);
                for (r, (&i, &t)) in row.iter_mut().zip(points.iter().zip(targets)) {
                    *r = member[i].to_f64() - t;
                }
            });
        });
        for (k, row) in e.chunks(len).enumerate() {
            sums[k] += row.iter().sum::<f64>();
        }
        let e = ArrayView2::from_shape((m, len), &*e).expect("block shape");
        pool.run(|| {
            gram.par_chunks_mut(GRAM_TILE * m)
                .enumerate()
                .for_each(|(t, tile)| {
                    let rows = tile.len() / m;
                    let mut tile = ArrayViewMut2::from_shape((rows, m), tile).expect("tile shape");
                    let first = e.slice(s![t * GRAM_TILE..t * GRAM_TILE + rows, ..]);
                    ndarray::linalg::general_mat_mul(1.0, &first, &e.t(), 1.0, &mut tile);
                });
        });
        monitor.progress(0, total)?;
        start += len;
    }
    let gram = Array2::from_shape_vec((m, m), gram).expect("gram shape");
    Ok(Gram { gram, sums, n })
}

/// Pearson correlation from sums over `n` common points; None when undefined (fewer than
/// 3 points, where it is ±1 whatever the residuals, or a variance ≤ 1e-12 × its mean
/// square).
#[inline]
fn pearson(n: f64, se: f64, sr: f64, see: f64, srr: f64, ser: f64) -> Option<f64> {
    if n < 3.0 {
        return None;
    }
    let var_e = see - se * se / n;
    let var_r = srr - sr * sr / n;
    if var_e <= 1e-12 * see || var_r <= 1e-12 * srr || var_e <= 0.0 || var_r <= 0.0 {
        return None;
    }
    Some((ser - se * sr / n) / (var_e * var_r).sqrt())
}

/// Orders (defined first, then score, then index).
fn undefined_last(a: &Option<f64>, b: &Option<f64>) -> std::cmp::Ordering {
    match (a, b) {
        (Some(x), Some(y)) => x.total_cmp(y),
        (Some(_), None) => std::cmp::Ordering::Less,
        (None, Some(_)) => std::cmp::Ordering::Greater,
        (None, None) => std::cmp::Ordering::Equal,
    }
}

/// Greedy steps on the residual Gram (no counts): reduce_error adds the member minimising
/// ‖R + e_m‖² (= 2 Σ_{s∈S} G[s, m] + G[m, m] up to a constant); residual_correlation the
/// one least correlated with R = Σ_{s∈S} e_s.
fn greedy_gram(
    g: &Gram,
    correlation: bool,
    size: usize,
    pool: &Pool,
    monitor: &dyn Monitor,
) -> Result<Vec<usize>> {
    let m = g.gram.nrows();
    let n = g.n as f64;
    let mut chosen = vec![false; m];
    let mut cross = vec![0.0; m];
    let (mut sq, mut sum_r) = (0.0, 0.0);
    let mut order = Vec::with_capacity(size);
    for step in 0..size {
        let next = if correlation && step > 0 {
            argmin(
                pool,
                &chosen,
                |k| pearson(n, g.sums[k], sum_r, g.gram[[k, k]], sq, cross[k]),
                undefined_last,
            )
        } else {
            argmin(
                pool,
                &chosen,
                |k| 2.0 * cross[k] + g.gram[[k, k]],
                |a: &f64, b: &f64| a.total_cmp(b),
            )
        };
        sq += 2.0 * cross[next] + g.gram[[next, next]];
        sum_r += g.sums[next];
        cross
            .iter_mut()
            .zip(g.gram.row(next))
            .for_each(|(c, v)| *c += v);
        chosen[next] = true;
        order.push(next);
        monitor.progress(step + 1, size)?;
    }
    Ok(order)
}

/// Greedy steps in out-of-bag mode (regression): per-point residual sums R_i and member
/// counts k_i; each candidate is scored by one pass over its out-of-bag points.
fn regression_out_of_bag<T: Real>(
    p: &Problem<'_, T>,
    correlation: bool,
    size: usize,
    pool: &Pool,
    monitor: &dyn Monitor,
) -> Result<Vec<usize>> {
    let (m, n) = (p.n_members(), p.n());
    let y = &p.y_values;
    let mut r = zeroed::<f64>(n, "members")?;
    let mut k = zeroed::<u32>(n, "members")?;
    // Current loss per point: (R/k)² when covered, else the members' mean squared error
    // there (a member covering it gains only by beating a typical member).
    let mut loss = zeroed::<f64>(n, "members")?;
    for c in 0..m {
        p.each_point(c, |j| {
            let e = p.value(c, j) - y[j];
            loss[j] += e * e;
            k[j] += 1;
        });
    }
    for (l, kj) in loss.iter_mut().zip(k.iter_mut()) {
        if *kj > 0 {
            *l /= f64::from(*kj);
        }
        *kj = 0;
    }
    let mut chosen = vec![false; m];
    let mut order = Vec::with_capacity(size);
    for step in 0..size {
        let next = if correlation && step == 0 {
            argmin(
                pool,
                &chosen,
                |c| {
                    let (mut sq, mut count) = (0.0, 0u64);
                    p.each_point(c, |j| {
                        let e = p.value(c, j) - y[j];
                        sq += e * e;
                        count += 1;
                    });
                    (count > 0).then(|| sq / count as f64)
                },
                undefined_last,
            )
        } else if correlation {
            argmin(
                pool,
                &chosen,
                |c| {
                    let [mut cnt, mut se, mut sr, mut see, mut srr, mut ser] = [0.0; 6];
                    p.each_point(c, |j| {
                        if k[j] > 0 {
                            let e = p.value(c, j) - y[j];
                            let q = r[j] / f64::from(k[j]);
                            cnt += 1.0;
                            se += e;
                            sr += q;
                            see += e * e;
                            srr += q * q;
                            ser += e * q;
                        }
                    });
                    pearson(cnt, se, sr, see, srr, ser)
                },
                undefined_last,
            )
        } else {
            argmin(
                pool,
                &chosen,
                |c| {
                    let mut delta = 0.0;
                    p.each_point(c, |j| {
                        // the residual first, as r holds: a duplicate of a chosen member
                        // then changes no point's loss by rounding
                        let mean = (r[j] + (p.value(c, j) - y[j])) / f64::from(k[j] + 1);
                        delta += mean * mean - loss[j];
                    });
                    delta
                },
                |a: &f64, b: &f64| a.total_cmp(b),
            )
        };
        p.each_point(next, |j| {
            r[j] += p.value(next, j) - y[j];
            k[j] += 1;
            let mean = r[j] / f64::from(k[j]);
            loss[j] = mean * mean;
        });
        chosen[next] = true;
        order.push(next);
        monitor.progress(step + 1, size)?;
    }
    Ok(order)
}

// -- classification -----------------------------------------------------------------------

/// Per-point vote totals of a subensemble on the points read.
struct Votes {
    totals: Vec<f64>,
    covered: Vec<u32>,
    classes: usize,
}

impl Votes {
    fn new(n: usize, classes: usize) -> Result<Self> {
        Ok(Votes {
            totals: zeroed(n * classes, "members")?,
            covered: zeroed(n, "members")?,
            classes,
        })
    }

    fn row(&self, j: usize) -> &[f64] {
        &self.totals[j * self.classes..(j + 1) * self.classes]
    }

    /// Whether the subensemble is right at j (covered and its vote is y).
    fn right(&self, j: usize, y: usize) -> bool {
        self.covered[j] > 0 && vote(self.row(j).iter().copied()) == y
    }

    fn add<T: Real>(&mut self, p: &Problem<'_, T>, m: usize) {
        let c = self.classes;
        let (totals, covered) = (&mut self.totals, &mut self.covered);
        p.each_point(m, |j| {
            p.add_class_row(m, j, &mut totals[j * c..(j + 1) * c]);
            covered[j] += 1;
        });
    }

    /// Points whose status one more member can change: uncovered, or |margin| ≤ 1 + slack.
    fn undecided(&self, y: &[usize]) -> Vec<usize> {
        (0..self.covered.len())
            .filter(|&j| {
                if self.covered[j] == 0 {
                    return true;
                }
                let row = self.row(j);
                let best_other = row
                    .iter()
                    .enumerate()
                    .filter(|&(c, _)| c != y[j])
                    .map(|(_, &t)| t)
                    .fold(f64::NEG_INFINITY, f64::max);
                (row[y[j]] - best_other).abs() <= 1.0 + MARGIN_SLACK
            })
            .collect()
    }
}

/// Units per error in which classification reduce-error compares its totals.
const TIE_RESOLUTION: f64 = (1u64 << 20) as f64;

fn classification_reduce_error<T: Real>(
    p: &Problem<'_, T>,
    right: &[u64],
    size: usize,
    pool: &Pool,
    monitor: &dyn Monitor,
) -> Result<Vec<usize>> {
    let (m, n, w) = (p.n_members(), p.n(), p.words);
    let y = &p.y_classes;
    // An uncovered point counts at the share of its predicting members that are wrong, not
    // as an error: covering it changes the total by (share right) − [right], i.e. the integer
    // change of an uncovered-as-error total plus `uncovered_gain`, the share right.
    let mut predicting = zeroed::<u32>(n, "members")?;
    let mut right_count = zeroed::<u32>(n, "members")?;
    for c in 0..m {
        p.each_point(c, |j| {
            predicting[j] += 1;
            right_count[j] += u32::from(right[c * w + j / 64] >> (j % 64) & 1 == 1);
        });
    }
    let uncovered_gain: Vec<f64> = predicting
        .iter()
        .zip(&right_count)
        .map(|(&o, &r)| {
            if o == 0 {
                0.0
            } else {
                f64::from(r) / f64::from(o)
            }
        })
        .collect();
    let mut votes = Votes::new(n, p.n_classes)?;
    let mut chosen = vec![false; m];
    let mut order = Vec::with_capacity(size);
    let mut undecided: Vec<usize> = (0..n).collect();
    let mut words = vec![0u64; p.words];
    // Whether the subensemble is right at each point (uncovered: wrong).
    let mut is_right = vec![false; n];
    for step in 0..size {
        // Undecided points as a bitset, to intersect with each candidate's points.
        words.fill(0);
        undecided
            .iter()
            .for_each(|&j| words[j / 64] |= 1 << (j % 64));
        let (votes_ref, is_right_ref, words_ref) = (&votes, &is_right, &words);
        let gain_ref = &uncovered_gain;
        let next = argmin(
            pool,
            &chosen,
            |c| {
                // Change in the total loss over the undecided points c predicts at: whole
                // errors, and the fill of the points it covers first.
                let mut change = 0i64;
                let mut fill = 0.0f64;
                let mut score = |j: usize| {
                    let now = p.vote_with(c, j, votes_ref.row(j)) == y[j];
                    change += i64::from(is_right_ref[j]) - i64::from(now);
                    if votes_ref.covered[j] == 0 {
                        fill += gain_ref[j];
                    }
                };
                match p.predict_row(c) {
                    None => undecided.iter().for_each(|&j| score(j)),
                    Some(bits) => {
                        let both: Vec<u64> =
                            bits.iter().zip(words_ref).map(|(a, b)| a & b).collect();
                        each_bit(&both, &mut score);
                    }
                }
                // At a resolution of 2⁻²⁰ errors, so that sums of shares which tie by the
                // definition (1/3 + 2/3 − 1 = 0) tie here despite rounding; totals closer
                // than that count as a tie (lowest index).
                ((change as f64 + fill) * TIE_RESOLUTION).round() as i64
            },
            |a: &i64, b: &i64| a.cmp(b),
        );
        votes.add(p, next);
        p.each_point(next, |j| is_right[j] = votes.right(j, y[j]));
        undecided = votes.undecided(y);
        chosen[next] = true;
        order.push(next);
        monitor.progress(step + 1, size)?;
    }
    Ok(order)
}

/// Sets the bits of the points where the subensemble is right, among those `m` predicts
/// (every other point keeps its bit).
fn update_right<T: Real>(p: &Problem<'_, T>, votes: &Votes, m: usize, bits: &mut [u64]) {
    p.each_point(m, |j| {
        let bit = 1u64 << (j % 64);
        if votes.right(j, p.y_classes[j]) {
            bits[j / 64] |= bit;
        } else {
            bits[j / 64] &= !bit;
        }
    });
}

fn complementarity<T: Real>(
    p: &Problem<'_, T>,
    right: &[u64],
    size: usize,
    pool: &Pool,
    monitor: &dyn Monitor,
) -> Result<Vec<usize>> {
    let (m, w) = (p.n_members(), p.words);
    let mut votes = Votes::new(p.n(), p.n_classes)?;
    let mut ensemble = vec![0u64; w];
    let mut chosen = vec![false; m];
    let mut order = Vec::with_capacity(size);
    for step in 0..size {
        let ens = &ensemble;
        let next = argmin(
            pool,
            &chosen,
            |c| {
                let gained: u64 = right[c * w..(c + 1) * w]
                    .iter()
                    .zip(ens)
                    .map(|(r, e)| u64::from((r & !e).count_ones()))
                    .sum();
                std::cmp::Reverse(gained)
            },
            |a, b| a.cmp(b),
        );
        votes.add(p, next);
        update_right(p, &votes, next, &mut ensemble);
        chosen[next] = true;
        order.push(next);
        monitor.progress(step + 1, size)?;
    }
    Ok(order)
}

/// ⟨c_a, c_b⟩ of two signatures from their bitsets.
#[inline]
fn signature_dot(
    right: &[u64],
    predicts: Option<&[u64]>,
    a: usize,
    b: usize,
    w: usize,
    n: u64,
) -> i64 {
    let (ra, rb) = (&right[a * w..(a + 1) * w], &right[b * w..(b + 1) * w]);
    match predicts {
        None => {
            let differ: u64 = ra
                .iter()
                .zip(rb)
                .map(|(x, y)| u64::from((x ^ y).count_ones()))
                .sum();
            n as i64 - 2 * differ as i64
        }
        Some(bits) => {
            let (pa, pb) = (&bits[a * w..(a + 1) * w], &bits[b * w..(b + 1) * w]);
            let (mut both, mut differ) = (0u64, 0u64);
            for i in 0..w {
                let common = pa[i] & pb[i];
                both += u64::from(common.count_ones());
                differ += u64::from(((ra[i] ^ rb[i]) & common).count_ones());
            }
            both as i64 - 2 * differ as i64
        }
    }
}

fn margin_distance<T: Real>(
    p: &Problem<'_, T>,
    right: &[u64],
    target_margin: f64,
    size: usize,
    pool: &Pool,
    monitor: &dyn Monitor,
) -> Result<Vec<usize>> {
    let (m, w, n) = (p.n_members(), p.words, p.n() as u64);
    let predicts = p.predicts.as_deref();
    // ⟨c_m, 1⟩ and ⟨c_m, c_m⟩.
    let sum: Vec<i64> = (0..m)
        .map(|c| 2 * popcount(&right[c * w..(c + 1) * w]) as i64 - p.predicted(c) as i64)
        .collect();
    let diag: Vec<i64> = (0..m).map(|c| p.predicted(c) as i64).collect();
    let mut cross = vec![0i64; m];
    let (mut sum_s, mut sq_s) = (0i64, 0i64);
    let mut chosen = vec![false; m];
    let mut order = Vec::with_capacity(size);
    for step in 0..size {
        let u = (step + 1) as f64;
        // u² ‖o − (C_S + c_m)/u‖² = n o² u² − 2 o u ⟨1, C_S + c_m⟩ + ‖C_S + c_m‖².
        let next = argmin(
            pool,
            &chosen,
            |c| {
                (sq_s + 2 * cross[c] + diag[c]) as f64
                    - 2.0 * target_margin * u * (sum_s + sum[c]) as f64
            },
            |a: &f64, b: &f64| a.total_cmp(b),
        );
        sum_s += sum[next];
        sq_s += 2 * cross[next] + diag[next];
        pool.run(|| {
            cross.par_iter_mut().enumerate().for_each(|(c, x)| {
                *x += signature_dot(right, predicts, next, c, w, n);
            });
        });
        chosen[next] = true;
        order.push(next);
        monitor.progress(step + 1, size)?;
    }
    Ok(order)
}

/// A member's cosine to the reference vector up to a positive factor common to all
/// members: `numerator / sqrt(norm_sq)`, compared exactly.
#[derive(Clone, Copy, PartialEq, Eq)]
struct Angle {
    numerator: i128,
    norm_sq: u64,
}

impl Angle {
    fn cmp_score(&self, other: &Self) -> std::cmp::Ordering {
        use std::cmp::Ordering;
        if self == other {
            return Ordering::Equal;
        }
        let (a, b) = (self.numerator, other.numerator);
        if a.signum() != b.signum() {
            return a.signum().cmp(&b.signum());
        }
        // a / √p vs b / √q with equal signs: compare a² q with b² p (reversed when negative)
        let squares = a
            .checked_mul(a)
            .and_then(|a2| a2.checked_mul(i128::from(other.norm_sq)))
            .zip(
                b.checked_mul(b)
                    .and_then(|b2| b2.checked_mul(i128::from(self.norm_sq))),
            );
        let magnitude = match squares {
            Some((left, right)) => left.cmp(&right),
            // beyond i128 (about 1e38): in floats, where a tie would need equal inputs
            None => ((a as f64).abs() / (self.norm_sq as f64).sqrt())
                .total_cmp(&((b as f64).abs() / (other.norm_sq as f64).sqrt())),
        };
        if a < 0 {
            magnitude.reverse()
        } else {
            magnitude
        }
    }
}

/// Every member, by increasing angle to the reference vector (one pass and a sort).
fn orientation<T: Real>(p: &Problem<'_, T>, right: &[u64], pool: &Pool) -> Vec<usize> {
    let (m, w, n) = (p.n_members(), p.words, p.n());
    // c_ens per point, over blocks of 64 points (one word) in parallel: exact integers.
    let mut ens = vec![0i64; n];
    pool.run(|| {
        ens.par_chunks_mut(64).enumerate().for_each(|(word, out)| {
            for c in 0..m {
                let r = right[c * w + word];
                let pr = p.predict_row(c).map_or(u64::MAX, |bits| bits[word]);
                for (b, e) in out.iter_mut().enumerate() {
                    if pr >> b & 1 == 1 {
                        *e += if r >> b & 1 == 1 { 1 } else { -1 };
                    }
                }
            }
        });
    });
    let one_ens: i64 = ens.iter().sum();
    let sq_ens: i64 = ens.iter().map(|e| e * e).sum();
    // ⟨c, o⟩ ‖c_ens‖² = ⟨c, 1⟩ ‖c_ens‖² − ⟨1, c_ens⟩ ⟨c, c_ens⟩, an integer; o = 0 exactly when
    // n ‖c_ens‖² = ⟨1, c_ens⟩² (Cauchy–Schwarz), and then the accuracy margin ⟨c, 1⟩.
    let parallel = sq_ens == 0 || i128::from(sq_ens) * n as i128 == i128::from(one_ens).pow(2);
    let scores: Vec<Option<Angle>> = pool.run(|| {
        (0..m)
            .into_par_iter()
            .map(|c| {
                let norm_sq = p.predicted(c);
                if norm_sq == 0 {
                    return None;
                }
                let one_c = 2 * popcount(&right[c * w..(c + 1) * w]) as i64 - norm_sq as i64;
                if parallel {
                    return Some(Angle {
                        numerator: i128::from(one_c),
                        norm_sq,
                    });
                }
                let mut dot = 0i64;
                p.each_point(c, |j| {
                    let sign = if right[c * w + j / 64] >> (j % 64) & 1 == 1 {
                        1
                    } else {
                        -1
                    };
                    dot += sign * ens[j];
                });
                let numerator =
                    i128::from(one_c) * i128::from(sq_ens) - i128::from(one_ens) * i128::from(dot);
                Some(Angle { numerator, norm_sq })
            })
            .collect()
    });
    let mut order: Vec<usize> = (0..m).collect();
    // Decreasing score, undefined last, then lowest index.
    order.sort_by(|&x, &y| match (&scores[x], &scores[y]) {
        (Some(a), Some(b)) => b.cmp_score(a).then(x.cmp(&y)),
        (Some(_), None) => std::cmp::Ordering::Less,
        (None, Some(_)) => std::cmp::Ordering::Greater,
        (None, None) => x.cmp(&y),
    });
    order
}

// -- curves -------------------------------------------------------------------------------

/// Loss of the first k members (k = 1..=len) of each order, on the points read:
/// `curves[o][k − 1]` (see the module documentation for the loss; out of bag the mean over
/// the points with at least one out-of-bag member among the first k, NaN without one).
///
/// ```text
/// regression      mean over covered points of (y_i − Σ_{m∈first k} f_mi / k_i)²
/// classification  share of covered points where vote(Σ_{m∈first k} p_mi) ≠ y_i
/// ```
///
/// # Errors
/// As [`order_members`] for `members`, `y`, `counts` and `points`; `orders` empty, ragged,
/// with a repeated or out-of-range member index; [`Error::Interrupted`] from the monitor.
pub fn order_curves<T: Real>(
    members: Members<'_, T>,
    y: Targets<'_>,
    counts: Option<&dyn InBagCounts>,
    points: Option<&[bool]>,
    orders: &[Vec<usize>],
    pool: &Pool,
    monitor: &dyn Monitor,
) -> Result<Vec<Vec<f64>>> {
    check_kind(&members)?;
    let n_members = members.n_members();
    let len = orders.first().map_or(0, Vec::len);
    if len == 0 {
        return Err(Error::value(
            "orders",
            "needs at least one order of at least one member",
        ));
    }
    let mut seen = vec![usize::MAX; n_members];
    for (o, order) in orders.iter().enumerate() {
        if order.len() != len {
            return Err(Error::value(
                "orders",
                format!(
                    "order {o} has {} members but order 0 has {len}",
                    order.len()
                ),
            ));
        }
        for &m in order {
            if m >= n_members {
                return Err(Error::value(
                    "orders",
                    format!("member {m} in order {o} is out of range for {n_members} members"),
                ));
            }
            if seen[m] == o {
                return Err(Error::value(
                    "orders",
                    format!("member {m} is repeated in order {o}"),
                ));
            }
            seen[m] = o;
        }
    }
    let total = points.map_or(members.n_points(), |p| p.iter().filter(|&&b| b).count());
    let p = Problem::new(members, y, counts, points, pool, monitor, total)?;
    let regression = matches!(p.members, Members::Values(_));
    let n = p.n();
    let chunks = Chunks::of(n);
    let cells = orders.len() * len;
    let mut covered = vec![0u64; cells];
    let mut sums = vec![0.0f64; cells];
    let classes = p.n_classes;
    for_chunks(
        chunks,
        &mut no_slots(chunks),
        pool,
        monitor,
        |range, ()| -> Result<(Vec<u64>, Vec<f64>)> {
            let width = range.len();
            let mut cov = vec![0u64; cells];
            let mut sum = vec![0.0; cells];
            let mut totals = vec![0.0; width * if regression { 1 } else { classes }];
            let mut k = vec![0u32; width];
            // each member's cells are checked the first time an order reaches it
            let mut checked = vec![false; n_members];
            let reads = |m: usize, j: usize| match p.predict_row(m) {
                None => true,
                Some(bits) => bits[j / 64] >> (j % 64) & 1 == 1,
            };
            for (o, order) in orders.iter().enumerate() {
                totals.fill(0.0);
                k.fill(0);
                for (step, &m) in order.iter().enumerate() {
                    let check = !std::mem::replace(&mut checked[m], true);
                    for (t, j) in range.clone().enumerate() {
                        if !reads(m, j) {
                            continue;
                        }
                        k[t] += 1;
                        if regression {
                            let v = p.value(m, j);
                            if !v.is_finite() {
                                return Err(Error::value(
                                    "members",
                                    format!(
                                        "must be finite where read; member {m}, point {} is {v}",
                                        p.idx[j]
                                    ),
                                ));
                            }
                            totals[t] += v;
                        } else {
                            if check {
                                check_class_cell(&p, m, j)?;
                            }
                            p.add_class_row(m, j, &mut totals[t * classes..(t + 1) * classes]);
                        }
                    }
                    let cell = o * len + step;
                    for (t, j) in range.clone().enumerate() {
                        if k[t] == 0 {
                            continue;
                        }
                        cov[cell] += 1;
                        sum[cell] += if regression {
                            let d = p.y_values[j] - totals[t] / f64::from(k[t]);
                            d * d
                        } else {
                            let row = &totals[t * classes..(t + 1) * classes];
                            f64::from(u8::from(vote(row.iter().copied()) != p.y_classes[j]))
                        };
                    }
                }
            }
            Ok((cov, sum))
        },
        |(cov, sum)| {
            covered.iter_mut().zip(cov).for_each(|(a, b)| *a += b);
            sums.iter_mut().zip(sum).for_each(|(a, b)| *a += b);
            Ok(())
        },
    )?;
    Ok(orders
        .iter()
        .enumerate()
        .map(|(o, _)| {
            (0..len)
                .map(|k| {
                    let c = covered[o * len + k];
                    if c == 0 {
                        f64::NAN
                    } else {
                        sums[o * len + k] / c as f64
                    }
                })
                .collect()
        })
        .collect())
}

/// Checks member m's probabilities or label at point j.
fn check_class_cell<T: Real>(p: &Problem<'_, T>, m: usize, j: usize) -> Result<()> {
    match &p.members {
        Members::Probabilities(a) => {
            check_probability_row(Problem::probability_row(a, m, p.idx[j]))
        }
        Members::Labels(a, c) => class_of(a[[m, p.idx[j]]], *c, "members").map(drop),
        Members::Values(_) => Ok(()),
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::members::test_values;
    use crate::parallel::{Silent, Threads};
    use ndarray::{array, Array1, Array3};

    fn pool(threads: usize) -> Pool {
        Threads::Fixed(threads).pool().unwrap()
    }

    const CLASS_METHODS: [Method; 4] = [
        Method::ReduceError,
        Method::Orientation,
        Method::Complementarity,
        Method::MarginDistance,
    ];
    const VALUE_METHODS: [Method; 2] = [Method::ReduceError, Method::ResidualCorrelation];

    fn order<T: Real>(
        members: Members<'_, T>,
        y: Targets<'_>,
        counts: Option<&dyn InBagCounts>,
        method: Method,
    ) -> Vec<usize> {
        order_members(
            members,
            y,
            counts,
            None,
            method,
            0.075,
            None,
            &pool(2),
            &Silent,
        )
        .unwrap()
    }

    // -- hand-computed cases ------------------------------------------------------------

    #[test]
    fn regression_orders_by_hand() {
        // y = 0. Own squared errors: m0 2, m1 2, m2 0.5 → m2 first. With m2: adding m0
        // gives the mean 0.75 (error 1.125), adding m1 the mean −0.25 (error 0.125) → m1.
        let members = array![[1.0, 1.0], [-1.0, -1.0], [0.5, 0.5]];
        let y = array![0.0, 0.0];
        let got = order(
            Members::Values(members.view()),
            Targets::Values(y.view()),
            None,
            Method::ReduceError,
        );
        assert_eq!(got, vec![2, 1, 0]);
        // residual_correlation, y = 0: own mean squared errors m0 4.67, m1 0.0167, m2 4.67,
        // m3 0.0667 → m1. Correlations with m1's residual (0.1, 0.2, 0): m0 −0.5, m2 0.5,
        // m3 1 → m0. Mean residual of {m1, m0} is (0.55, 1.1, 1.5): m2 −0.996, m3 −0.419
        // → m2, then m3.
        let members = array![
            [1.0, 2.0, 3.0],
            [0.1, 0.2, 0.0],
            [3.0, 2.0, 1.0],
            [0.2, 0.4, 0.0]
        ];
        let y = array![0.0, 0.0, 0.0];
        let got = order(
            Members::Values(members.view()),
            Targets::Values(y.view()),
            None,
            Method::ResidualCorrelation,
        );
        assert_eq!(got, vec![1, 0, 2, 3]);
    }

    /// Labels of 4 members at 4 points, y = (0, 0, 1, 2), 3 classes. Right: m0 at 0, 2;
    /// m1 at 0, 1, 3; m2 at 1, 2; m3 at 0, 1.
    fn labels_case() -> (Array2<i64>, Array1<i64>) {
        (
            array![[0, 1, 1, 1], [0, 0, 2, 2], [1, 0, 1, 0], [0, 0, 0, 0]],
            array![0, 0, 1, 2],
        )
    }

    #[test]
    fn classification_orders_by_hand() {
        let (labels, y) = labels_case();
        let run = |method| {
            order(
                Members::<f64>::Labels(labels.view(), 3),
                Targets::Labels(y.view()),
                None,
                method,
            )
        };
        // reduce_error: m1 has 1 error. With m1, adding m0 or m2 leaves 1 error (ties of
        // the vote go to the lower class), m3 2 → m0. With {m1, m0}: m2 1 error, m3 2.
        assert_eq!(run(Method::ReduceError), vec![1, 0, 2, 3]);
        // complementarity: m1 is right on most points (3). {m1} is wrong at point 2 only,
        // where m0 and m2 are right → m0. {m1, m0} is wrong at point 3, where no one left
        // is right → m2, then m3.
        assert_eq!(run(Method::Complementarity), vec![1, 0, 2, 3]);
        // margin_distance (t = 0.075): m1 has the most +1s. Then (c1 + c0)/2 = (1,0,0,0)
        // and (c1 + c2)/2 = (0,1,0,0) tie (→ m0), (c1 + c3)/2 = (1,1,−1,0) is further.
        // Then (c1+c0+c2)/3 = (1,1,1,−1)/3 beats (3,1,−1,−1)/3.
        assert_eq!(run(Method::MarginDistance), vec![1, 0, 2, 3]);
        // orientation: c_ens = (2, 2, 0, −2), ⟨1, c_ens⟩ = 2, ‖c_ens‖² = 12, so
        // o = 1 − c_ens/6 = (2/3, 2/3, 1, 4/3); ⟨c_m, o⟩ = −1/3, 5/3, −1/3, −1 with equal
        // norms → m1, m0, m2 (tie, lower index first), m3.
        assert_eq!(run(Method::Orientation), vec![1, 0, 2, 3]);
    }

    #[test]
    fn orientation_and_margin_distance_differ_from_accuracy_by_hand() {
        // y = 0 at 4 points, 2 classes. Signatures: m0 (+,+,+,−), m1 (+,+,+,−) (a copy),
        // m2 (−,−,−,+), m3 (+,+,−,+). complementarity: m0 (3 right, lowest index); {m0} is
        // wrong at point 3, where m2 and m3 are right → m2; {m0, m2} votes (tie → class 0)
        // right everywhere → no gain anywhere → m1, then m3.
        let labels = array![[0i64, 0, 0, 1], [0, 0, 0, 1], [1, 1, 1, 0], [0, 0, 1, 0]];
        let y = array![0i64, 0, 0, 0];
        let run = |method| {
            order(
                Members::<f64>::Labels(labels.view(), 2),
                Targets::Labels(y.view()),
                None,
                method,
            )
        };
        assert_eq!(run(Method::Complementarity), vec![0, 2, 1, 3]);
        // orientation: c_ens = (2, 2, 0, 0), ⟨1, c_ens⟩ = 4, ‖c_ens‖² = 8, so
        // o = 1 − c_ens/2 = (0, 0, 1, 1); ⟨c_m, o⟩: m0 0, m1 0, m2 0, m3 0 — all orthogonal
        // except through points 2, 3: m0 1 − 1 = 0, m2 −1 + 1 = 0, m3 −1 + 1 = 0. All tie:
        // index order.
        assert_eq!(run(Method::Orientation), vec![0, 1, 2, 3]);
        // margin_distance, t = 0.075: step 1 ties m0, m1, m3 (three +1) → m0. Step 2:
        // c0 + c1 = (2,2,2,−2), c0 + c2 = 0, c0 + c3 = (2,2,0,0); halves: (1,1,1,−1) has
        // distance² 3·0.855 + 1.156 = 3.72, 0 has 4·0.0056 = 0.0225, (1,1,0,0) has
        // 2·0.855 + 2·0.0056 = 1.72 → m2. Step 3: c0 + c2 = 0, so (c_m)/3: m1 and m3 tie
        // in distance? m1: (1,1,1,−1)/3 → 3·(0.075−0.333)² + (0.075+0.333)² = 0.366;
        // m3: (1,1,−1,1)/3 → the same multiset → tie → m1, then m3.
        assert_eq!(run(Method::MarginDistance), vec![0, 2, 1, 3]);
    }

    #[test]
    fn probabilities_reduce_error_by_hand() {
        // y = (0, 1). Errors alone: m0 1, m1 1, m2 0 → m2. With m2 (totals (0.9, 0.1),
        // (0.45, 0.55)): + m0 gives (1.05, 0.95) at point 1 → wrong; + m1 (0.85, 1.15)
        // → right → m1.
        let p = Array3::from_shape_vec(
            (3, 2, 2),
            vec![0.6, 0.4, 0.6, 0.4, 0.4, 0.6, 0.4, 0.6, 0.9, 0.1, 0.45, 0.55],
        )
        .unwrap();
        let y = array![0i64, 1];
        let got = order(
            Members::Probabilities(p.view()),
            Targets::Labels(y.view()),
            None,
            Method::ReduceError,
        );
        assert_eq!(got, vec![2, 1, 0]);
    }

    #[test]
    fn out_of_bag_regression_counts_uncovered_points_at_the_members_mean_error() {
        // y = (0, 0, 3). Out of bag: m0 predicts (0, 0, ·), m1 (·, ·, 3), m2 (1, 2, 1).
        // An uncovered point costs its predicting members' mean squared error:
        // point 0 (0 + 1)/2 = 0.5, point 1 (0 + 4)/2 = 2, point 2 (0 + 4)/2 = 2 → 4.5.
        // m0 first: 0 + 0 + 2 = 2; m1: 0.5 + 2 + 0 = 2.5; m2: 1 + 4 + 4 = 9 → m0. Then m1
        // (covers point 2 exactly) before m2. Counting an uncovered point as (y − ȳ)²
        // (ȳ = 1: costs 1, 1, 4) would take m1 first (1 + 1 + 0 = 2 < 0 + 0 + 4).
        let members = array![
            [0.0, 0.0, f64::NAN],
            [f64::NAN, f64::NAN, 3.0],
            [1.0, 2.0, 1.0]
        ];
        let counts = array![[0u8, 0, 1], [2, 1, 0], [0, 0, 0]];
        let y = array![0.0, 0.0, 3.0];
        let c = counts.view();
        let got = order(
            Members::Values(members.view()),
            Targets::Values(y.view()),
            Some(&c),
            Method::ReduceError,
        );
        assert_eq!(got, vec![0, 1, 2]);
        // The curve, over the covered points: m0 alone (points 0, 1) 0; with m1 all points,
        // 0; with m2 the means (0.5, 1, 2) against (0, 0, 3): (0.25 + 1 + 1) / 3 = 0.75.
        let curves = order_curves(
            Members::Values(members.view()),
            Targets::Values(y.view()),
            Some(&c),
            None,
            &[vec![0, 1, 2]],
            &pool(1),
            &Silent,
        )
        .unwrap();
        assert_eq!(curves, vec![vec![0.0, 0.0, 0.75]]);
    }

    #[test]
    fn curves_by_hand_and_nan_without_cover() {
        let (labels, y) = labels_case();
        let curves = order_curves(
            Members::<f64>::Labels(labels.view(), 3),
            Targets::Labels(y.view()),
            None,
            None,
            &[vec![1, 0, 2, 3]],
            &pool(1),
            &Silent,
        )
        .unwrap();
        // From the reduce_error case: errors 1, 1, 1, then all four: totals p0 (3,1,0),
        // p1 (3,1,0), p2 (1,2,1) → 1 ✓, p3 (2,1,1) → 0 ✗: 1 error.
        assert_eq!(curves, vec![vec![0.25, 0.25, 0.25, 0.25]]);
        // Out of bag with no out-of-bag member at the points read: NaN.
        let counts = array![[1u8, 1, 0, 0], [1, 1, 1, 1], [0, 0, 0, 0], [0, 0, 0, 0]];
        let c = counts.view();
        let points = [true, true, false, false];
        let curves = order_curves(
            Members::<f64>::Labels(labels.view(), 3),
            Targets::Labels(y.view()),
            Some(&c),
            Some(&points),
            &[vec![0, 1, 2]],
            &pool(1),
            &Silent,
        )
        .unwrap();
        assert!(curves[0][0].is_nan() && curves[0][1].is_nan());
        // m2 predicts (1, 0) at points (0, 1), y = (0, 0): one error of two.
        assert_eq!(curves[0][2], 0.5);
    }

    // -- errors -----------------------------------------------------------------------

    fn argument(err: Error) -> String {
        err.to_string()
            .split('`')
            .nth(1)
            .unwrap_or_default()
            .to_string()
    }

    #[test]
    fn every_bad_input_names_its_argument() {
        let members = array![[1.0, 2.0], [2.0, 1.0]];
        let y = array![1.0, 1.0];
        let (labels, yl) = labels_case();
        let run = |m: Members<'_, f64>,
                   y: Targets<'_>,
                   counts: Option<&dyn InBagCounts>,
                   points: Option<&[bool]>,
                   method,
                   margin,
                   size| {
            order_members(
                m,
                y,
                counts,
                points,
                method,
                margin,
                size,
                &pool(1),
                &Silent,
            )
            .map(drop)
            .map_err(argument)
        };
        let v = || Members::Values(members.view());
        let t = || Targets::Values(y.view());
        let l = || Members::<f64>::Labels(labels.view(), 3);
        let tl = || Targets::Labels(yl.view());
        let rr = Method::ReduceError;
        assert!(Method::parse("random").is_err_and(|e| argument(e) == "method"));
        assert_eq!(
            Method::parse("margin_distance").unwrap(),
            Method::MarginDistance
        );
        assert_eq!(
            run(v(), t(), None, None, Method::Orientation, 0.075, None),
            Err("method".into())
        );
        assert_eq!(
            run(
                l(),
                tl(),
                None,
                None,
                Method::ResidualCorrelation,
                0.075,
                None
            ),
            Err("method".into())
        );
        let empty = Array2::<f64>::zeros((0, 2));
        assert_eq!(
            run(
                Members::Values(empty.view()),
                t(),
                None,
                None,
                rr,
                0.075,
                None
            ),
            Err("members".into())
        );
        let nan = array![[1.0, f64::NAN]];
        assert_eq!(
            run(
                Members::Values(nan.view()),
                t(),
                None,
                None,
                rr,
                0.075,
                None
            ),
            Err("members".into())
        );
        let bad_p = Array3::from_shape_vec((1, 1, 2), vec![0.7, 0.7]).unwrap();
        let y1 = array![0i64];
        assert_eq!(
            run(
                Members::Probabilities(bad_p.view()),
                Targets::Labels(y1.view()),
                None,
                None,
                rr,
                0.075,
                None
            ),
            Err("members".into())
        );
        let neg_p = Array3::from_shape_vec((1, 1, 2), vec![-0.5, 1.5]).unwrap();
        assert_eq!(
            run(
                Members::Probabilities(neg_p.view()),
                Targets::Labels(y1.view()),
                None,
                None,
                rr,
                0.075,
                None
            ),
            Err("members".into())
        );
        let bad_l = array![[0i64, 5, 0, 0]];
        assert_eq!(
            run(
                Members::Labels(bad_l.view(), 3),
                tl(),
                None,
                None,
                rr,
                0.075,
                None
            ),
            Err("members".into())
        );
        let short = array![1.0];
        assert_eq!(
            run(
                v(),
                Targets::Values(short.view()),
                None,
                None,
                rr,
                0.075,
                None
            ),
            Err("y".into())
        );
        let inf = array![1.0, f64::INFINITY];
        assert_eq!(
            run(
                v(),
                Targets::Values(inf.view()),
                None,
                None,
                rr,
                0.075,
                None
            ),
            Err("y".into())
        );
        let big = array![0i64, 0, 1, 3];
        assert_eq!(
            run(
                l(),
                Targets::Labels(big.view()),
                None,
                None,
                rr,
                0.075,
                None
            ),
            Err("y".into())
        );
        assert_eq!(
            run(
                l(),
                Targets::Labels(big.view()),
                None,
                None,
                rr,
                0.075,
                None
            ),
            Err("y".into())
        );
        let counts = array![[0u8, 0, 0]];
        let c = counts.view();
        assert_eq!(
            run(v(), t(), Some(&c), None, rr, 0.075, None),
            Err("counts".into())
        );
        let negative = array![[0i8, -1], [0, 0]];
        let c = negative.view();
        assert_eq!(
            run(v(), t(), Some(&c), None, rr, 0.075, None),
            Err("counts".into())
        );
        assert_eq!(
            run(v(), t(), None, Some(&[true]), rr, 0.075, None),
            Err("points".into())
        );
        let none = order_members(
            v(),
            t(),
            None,
            Some(&[false, false]),
            rr,
            0.075,
            None,
            &pool(1),
            &Silent,
        )
        .unwrap_err();
        assert_eq!(none.to_string(), "`points`: selects no point");
        for margin in [0.0, -0.1, 1.5, f64::NAN, f64::INFINITY] {
            assert_eq!(
                run(l(), tl(), None, None, Method::MarginDistance, margin, None),
                Err("target_margin".into())
            );
        }
        assert_eq!(
            run(v(), t(), None, None, rr, 0.075, Some(0)),
            Err("size".into())
        );
        assert_eq!(
            run(v(), t(), None, None, rr, 0.075, Some(3)),
            Err("size".into())
        );
        // NaN where a member is in bag is never read.
        let masked = array![[1.0, f64::NAN], [2.0, 1.0]];
        let counts = array![[0u8, 1], [0, 0]];
        let c = counts.view();
        assert!(run(
            Members::Values(masked.view()),
            t(),
            Some(&c),
            None,
            rr,
            0.075,
            None
        )
        .is_ok());
        // One member.
        let one = array![[1.0, 2.0]];
        let got = order_members(
            Members::Values(one.view()),
            t(),
            None,
            None,
            rr,
            0.075,
            None,
            &pool(1),
            &Silent,
        )
        .unwrap();
        assert_eq!(got, vec![0]);
    }

    #[test]
    fn bad_orders_name_orders() {
        let members = array![[1.0, 2.0], [2.0, 1.0]];
        let y = array![1.0, 1.0];
        let run = |orders: &[Vec<usize>]| {
            order_curves(
                Members::Values(members.view()),
                Targets::Values(y.view()),
                None,
                None,
                orders,
                &pool(1),
                &Silent,
            )
            .map(drop)
            .map_err(argument)
        };
        for bad in [
            vec![],
            vec![vec![]],
            vec![vec![0], vec![0, 1]],
            vec![vec![0, 0]],
            vec![vec![2]],
        ] {
            assert_eq!(run(&bad), Err("orders".into()), "{bad:?}");
        }
        assert!(run(&[vec![1, 0], vec![0, 1]]).is_ok());
        let nan = array![[1.0, f64::NAN], [2.0, 1.0]];
        let err = order_curves(
            Members::Values(nan.view()),
            Targets::Values(y.view()),
            None,
            None,
            &[vec![0]],
            &pool(1),
            &Silent,
        )
        .unwrap_err();
        assert_eq!(argument(err), "members");
    }

    // -- random data, brute force --------------------------------------------------------

    /// Members that look bagged: a shared signal plus member noise.
    struct Data {
        values: Array2<f64>,
        y: Array1<f64>,
        probabilities: Array3<f64>,
        labels: Array2<i64>,
        classes: Array1<i64>,
        counts: Array2<u8>,
    }

    fn data(m: usize, n: usize, c: usize, seed: u64) -> Data {
        let u = test_values(m * n * (c + 3) + 2 * n, seed);
        let y = Array1::from_shape_fn(n, |i| 4.0 * u[i] - 2.0);
        let shared = &u[n..2 * n];
        let noise = &u[2 * n..];
        let values = Array2::from_shape_fn((m, n), |(a, i)| {
            y[i] + shared[i] - 0.5 + 1.5 * (noise[a * n + i] - 0.5) + 0.2 * (a % 3) as f64
        });
        let classes = Array1::from_shape_fn(n, |i| ((u[i] * c as f64) as i64).min(c as i64 - 1));
        let offset = m * n;
        let mut probabilities = Array3::from_shape_fn((m, n, c), |(a, i, k)| {
            let base = noise[offset + (a * n + i) * c + k] + 0.3 * shared[i];
            base + if k as i64 == classes[i] { 0.35 } else { 0.0 }
        });
        for mut row in probabilities.lanes_mut(ndarray::Axis(2)) {
            let total: f64 = row.sum();
            row.mapv_inplace(|v| v / total);
        }
        let labels = Array2::from_shape_fn((m, n), |(a, i)| {
            vote(probabilities.slice(s![a, i, ..]).iter().copied()) as i64
        });
        let counts = Array2::from_shape_fn((m, n), |(a, i)| {
            let v = noise[(a * n + i + 7) % noise.len()];
            if v < 0.37 {
                0
            } else {
                1 + (v * 3.0) as u8
            }
        });
        Data {
            values,
            y,
            probabilities,
            labels,
            classes,
            counts,
        }
    }

    /// Where member m predicts at point i.
    type Predicts<'a> = dyn Fn(usize, usize) -> bool + 'a;
    /// The criterion of a subensemble (lower is better).
    type Score<'a> = dyn Fn(&[usize], &Predicts<'_>) -> f64 + 'a;

    /// The brute-force greedy: recomputes the subensemble for every candidate.
    fn brute_force(
        n_members: usize,
        n: usize,
        predicts: &dyn Fn(usize, usize) -> bool,
        score: &Score<'_>,
    ) -> Vec<usize> {
        let _ = n;
        let mut order: Vec<usize> = Vec::new();
        for _ in 0..n_members {
            let mut best: Option<(f64, usize)> = None;
            for c in (0..n_members).filter(|c| !order.contains(c)) {
                let mut s = order.clone();
                s.push(c);
                let v = score(&s, predicts);
                if best.is_none_or(|(b, _)| v < b) {
                    best = Some((v, c));
                }
            }
            order.push(best.unwrap().1);
        }
        order
    }

    fn regression_total(
        d: &Data,
        subset: &[usize],
        predicts: &dyn Fn(usize, usize) -> bool,
    ) -> f64 {
        let n = d.y.len();
        (0..n)
            .map(|i| {
                let (mut sum, mut k) = (0.0, 0);
                for &m in subset {
                    if predicts(m, i) {
                        sum += d.values[[m, i]];
                        k += 1;
                    }
                }
                if k == 0 {
                    // uncovered: the mean squared error of the members predicting there
                    let errors: Vec<f64> = (0..d.values.nrows())
                        .filter(|&m| predicts(m, i))
                        .map(|m| (d.values[[m, i]] - d.y[i]).powi(2))
                        .collect();
                    if errors.is_empty() {
                        0.0
                    } else {
                        errors.iter().sum::<f64>() / errors.len() as f64
                    }
                } else {
                    (d.y[i] - sum / k as f64).powi(2)
                }
            })
            .sum()
    }

    fn class_totals(
        d: &Data,
        probabilities: bool,
        subset: &[usize],
        predicts: &dyn Fn(usize, usize) -> bool,
        i: usize,
    ) -> Option<Vec<f64>> {
        let c = d.probabilities.dim().2;
        let mut totals = vec![0.0; c];
        let mut k = 0;
        for &m in subset {
            if predicts(m, i) {
                k += 1;
                if probabilities {
                    totals
                        .iter_mut()
                        .zip(d.probabilities.slice(s![m, i, ..]))
                        .for_each(|(t, p)| *t += p);
                } else {
                    totals[d.labels[[m, i]] as usize] += 1.0;
                }
            }
        }
        (k > 0).then_some(totals)
    }

    fn class_errors(
        d: &Data,
        probabilities: bool,
        subset: &[usize],
        predicts: &dyn Fn(usize, usize) -> bool,
    ) -> f64 {
        (0..d.y.len())
            .map(
                |i| match class_totals(d, probabilities, subset, predicts, i) {
                    // uncovered: the share of the members predicting there that are wrong
                    None => {
                        let members = d.labels.nrows();
                        let (o, wrong) = (0..members).filter(|&m| predicts(m, i)).fold(
                            (0, 0),
                            |(o, wrong), m| {
                                (
                                    o + 1,
                                    wrong + usize::from(!member_right(d, probabilities, m, i)),
                                )
                            },
                        );
                        if o == 0 {
                            0.0
                        } else {
                            wrong as f64 / o as f64
                        }
                    }
                    Some(t) => f64::from(u8::from(vote(t) as i64 != d.classes[i])),
                },
            )
            .sum()
    }

    fn member_right(d: &Data, probabilities: bool, m: usize, i: usize) -> bool {
        let label = if probabilities {
            vote(d.probabilities.slice(s![m, i, ..]).iter().copied())
        } else {
            d.labels[[m, i]] as usize
        };
        label as i64 == d.classes[i]
    }

    #[test]
    fn incremental_greedy_equals_brute_force() {
        let d = data(12, 150, 3, 5);
        let n = d.y.len();
        let everywhere = |_: usize, _: usize| true;
        let out_of_bag = |m: usize, i: usize| d.counts[[m, i]] == 0;
        let counts = d.counts.view();
        for with_counts in [false, true] {
            let predicts: &dyn Fn(usize, usize) -> bool = if with_counts {
                &out_of_bag
            } else {
                &everywhere
            };
            let c: Option<&dyn InBagCounts> = if with_counts { Some(&counts) } else { None };
            // Regression reduce_error.
            let expected = brute_force(12, n, predicts, &|s, p| regression_total(&d, s, p));
            let got = order(
                Members::Values(d.values.view()),
                Targets::Values(d.y.view()),
                c,
                Method::ReduceError,
            );
            assert_eq!(got, expected, "regression, counts {with_counts}");
            for probabilities in [true, false] {
                let members = if probabilities {
                    Members::Probabilities(d.probabilities.view())
                } else {
                    Members::Labels(d.labels.view(), 3)
                };
                let y = Targets::Labels(d.classes.view());
                let what = format!("probabilities {probabilities}, counts {with_counts}");
                // reduce_error.
                let expected = brute_force(12, n, predicts, &|s, p| {
                    class_errors(&d, probabilities, s, p)
                });
                assert_eq!(
                    order(members, y, c, Method::ReduceError),
                    expected,
                    "reduce_error, {what}"
                );
                // complementarity: minus the points where the last member is right and the
                // others' vote is wrong.
                let expected = brute_force(12, n, predicts, &|s, p| {
                    let (last, rest) = s.split_last().unwrap();
                    -((0..n)
                        .filter(|&i| {
                            p(*last, i)
                                && member_right(&d, probabilities, *last, i)
                                && class_totals(&d, probabilities, rest, p, i)
                                    .is_none_or(|t| vote(t) as i64 != d.classes[i])
                        })
                        .count() as f64)
                });
                assert_eq!(
                    order(members, y, c, Method::Complementarity),
                    expected,
                    "complementarity, {what}"
                );
                // margin_distance: the distance computed on the signature vectors.
                let expected = brute_force(12, n, predicts, &|s, p| {
                    let u = s.len() as f64;
                    (0..n)
                        .map(|i| {
                            let sum: f64 = s
                                .iter()
                                .filter(|&&m| p(m, i))
                                .map(|&m| {
                                    if member_right(&d, probabilities, m, i) {
                                        1.0
                                    } else {
                                        -1.0
                                    }
                                })
                                .sum();
                            (0.075 - sum / u).powi(2)
                        })
                        .sum::<f64>()
                        .sqrt()
                });
                assert_eq!(
                    order(members, y, c, Method::MarginDistance),
                    expected,
                    "margin_distance, {what}"
                );
            }
        }
    }

    #[test]
    fn orientation_and_residual_correlation_equal_direct_formulas() {
        let d = data(10, 120, 3, 11);
        let n = d.y.len();
        // orientation from the signature vectors, with f64 sums.
        let sig = |m: usize, i: usize| {
            if member_right(&d, true, m, i) {
                1.0
            } else {
                -1.0
            }
        };
        let ens: Vec<f64> = (0..n).map(|i| (0..10).map(|m| sig(m, i)).sum()).collect();
        let a = ens.iter().sum::<f64>() / ens.iter().map(|e| e * e).sum::<f64>();
        let o: Vec<f64> = ens.iter().map(|e| 1.0 - a * e).collect();
        let on = o.iter().map(|v| v * v).sum::<f64>().sqrt();
        let cos: Vec<f64> = (0..10)
            .map(|m| (0..n).map(|i| sig(m, i) * o[i]).sum::<f64>() / (n as f64).sqrt() / on)
            .collect();
        let mut expected: Vec<usize> = (0..10).collect();
        expected.sort_by(|&x, &y| cos[y].total_cmp(&cos[x]).then(x.cmp(&y)));
        let got = order(
            Members::Probabilities(d.probabilities.view()),
            Targets::Labels(d.classes.view()),
            None,
            Method::Orientation,
        );
        assert_eq!(got, expected);
        // residual_correlation by direct Pearson correlations.
        let e = |m: usize| -> Vec<f64> { (0..n).map(|i| d.values[[m, i]] - d.y[i]).collect() };
        let pearson_direct = |a: &[f64], b: &[f64]| {
            let (ma, mb) = (
                a.iter().sum::<f64>() / n as f64,
                b.iter().sum::<f64>() / n as f64,
            );
            let cov: f64 = a.iter().zip(b).map(|(x, y)| (x - ma) * (y - mb)).sum();
            let va: f64 = a.iter().map(|x| (x - ma).powi(2)).sum();
            let vb: f64 = b.iter().map(|y| (y - mb).powi(2)).sum();
            cov / (va * vb).sqrt()
        };
        let own: Vec<f64> = (0..10).map(|m| e(m).iter().map(|v| v * v).sum()).collect();
        let first = (0..10).min_by(|&x, &y| own[x].total_cmp(&own[y])).unwrap();
        let mut expected = vec![first];
        while expected.len() < 10 {
            let r: Vec<f64> = (0..n)
                .map(|i| expected.iter().map(|&m| e(m)[i]).sum::<f64>())
                .collect();
            let next = (0..10)
                .filter(|m| !expected.contains(m))
                .min_by(|&x, &y| pearson_direct(&e(x), &r).total_cmp(&pearson_direct(&e(y), &r)))
                .unwrap();
            expected.push(next);
        }
        let got = order(
            Members::Values(d.values.view()),
            Targets::Values(d.y.view()),
            None,
            Method::ResidualCorrelation,
        );
        assert_eq!(got, expected);
    }

    // -- invariances ----------------------------------------------------------------------

    fn all_orders(d: &Data, counts: Option<&dyn InBagCounts>, threads: usize) -> Vec<Vec<usize>> {
        let p = pool(threads);
        let mut out = Vec::new();
        let run = |m: Members<'_, f64>, y: Targets<'_>, method| {
            order_members(m, y, counts, None, method, 0.075, None, &p, &Silent).unwrap()
        };
        for method in VALUE_METHODS {
            out.push(run(
                Members::Values(d.values.view()),
                Targets::Values(d.y.view()),
                method,
            ));
        }
        for method in CLASS_METHODS {
            out.push(run(
                Members::Probabilities(d.probabilities.view()),
                Targets::Labels(d.classes.view()),
                method,
            ));
            out.push(run(
                Members::Labels(d.labels.view(), 4),
                Targets::Labels(d.classes.view()),
                method,
            ));
        }
        out
    }

    #[test]
    fn orders_do_not_depend_on_the_thread_count() {
        // Enough points for several Gram blocks and chunks.
        let d = data(40, 2500, 4, 3);
        let counts = d.counts.view();
        for c in [None, Some(&counts as &dyn InBagCounts)] {
            let one = all_orders(&d, c, 1);
            assert_eq!(all_orders(&d, c, 3), one);
            for o in &one {
                let mut sorted = o.clone();
                sorted.sort_unstable();
                assert_eq!(sorted, (0..40).collect::<Vec<_>>());
            }
        }
        let orders: Vec<Vec<usize>> = all_orders(&d, None, 1);
        let curves = |threads| {
            order_curves(
                Members::Values(d.values.view()),
                Targets::Values(d.y.view()),
                Some(&counts),
                None,
                &orders[..2],
                &pool(threads),
                &Silent,
            )
            .unwrap()
        };
        let one = curves(1);
        assert_eq!(
            curves(3)
                .iter()
                .flatten()
                .map(|v| v.to_bits())
                .collect::<Vec<_>>(),
            one.iter()
                .flatten()
                .map(|v| v.to_bits())
                .collect::<Vec<_>>()
        );
    }

    #[test]
    fn zero_counts_are_the_plain_mode() {
        let d = data(15, 300, 3, 8);
        let zeros = Array2::<u16>::zeros((15, 300));
        let z = zeros.view();
        assert_eq!(all_orders(&d, Some(&z), 2), all_orders(&d, None, 2));
        let orders = vec![(0..15).rev().collect::<Vec<_>>()];
        let plain = order_curves(
            Members::Probabilities(d.probabilities.view()),
            Targets::Labels(d.classes.view()),
            None,
            None,
            &orders,
            &pool(2),
            &Silent,
        )
        .unwrap();
        let oob = order_curves(
            Members::Probabilities(d.probabilities.view()),
            Targets::Labels(d.classes.view()),
            Some(&z),
            None,
            &orders,
            &pool(2),
            &Silent,
        )
        .unwrap();
        assert_eq!(plain, oob);
    }

    #[test]
    fn size_gives_the_first_members_of_the_order() {
        let d = data(15, 300, 3, 9);
        for method in CLASS_METHODS {
            let run = |size| {
                order_members(
                    Members::<f64>::Labels(d.labels.view(), 3),
                    Targets::Labels(d.classes.view()),
                    None,
                    None,
                    method,
                    0.075,
                    size,
                    &pool(2),
                    &Silent,
                )
                .unwrap()
            };
            let all = run(None);
            assert_eq!(run(Some(5)), all[..5].to_vec());
        }
    }

    #[test]
    fn points_select_a_fold() {
        // Ordering on the points a mask selects equals ordering the sliced arrays.
        let d = data(10, 200, 3, 4);
        let mask: Vec<bool> = (0..200).map(|i| i % 3 != 0).collect();
        let keep: Vec<usize> = (0..200).filter(|&i| mask[i]).collect();
        let values = d.values.select(ndarray::Axis(1), &keep);
        let y = d.y.select(ndarray::Axis(0), &keep);
        let counts = d.counts.select(ndarray::Axis(1), &keep);
        let (full, part) = (d.counts.view(), counts.view());
        for method in VALUE_METHODS {
            let masked = order_members(
                Members::Values(d.values.view()),
                Targets::Values(d.y.view()),
                Some(&full),
                Some(&mask),
                method,
                0.075,
                None,
                &pool(2),
                &Silent,
            )
            .unwrap();
            let sliced = order(
                Members::Values(values.view()),
                Targets::Values(y.view()),
                Some(&part),
                method,
            );
            assert_eq!(masked, sliced);
        }
    }

    #[test]
    fn curve_at_all_members_is_the_ensemble_loss() {
        let d = data(9, 400, 3, 2);
        let n = d.y.len();
        let all: Vec<usize> = (0..9).collect();
        let orders = vec![all.clone(), all.iter().rev().copied().collect()];
        // Regression: squared error of the mean (straightforward loops as the reference).
        let expected: f64 = (0..n)
            .map(|i| (d.y[i] - d.values.column(i).sum() / 9.0).powi(2))
            .sum::<f64>()
            / n as f64;
        let curves = order_curves(
            Members::Values(d.values.view()),
            Targets::Values(d.y.view()),
            None,
            None,
            &orders,
            &pool(2),
            &Silent,
        )
        .unwrap();
        for curve in &curves {
            approx::assert_relative_eq!(curve[8], expected, max_relative = 1e-12);
        }
        // Classification: error rate of the soft vote (mean probability, lowest class on ties).
        let everywhere = |_: usize, _: usize| true;
        let expected = class_errors(&d, true, &all, &everywhere) / n as f64;
        let curves = order_curves(
            Members::Probabilities(d.probabilities.view()),
            Targets::Labels(d.classes.view()),
            None,
            None,
            &orders,
            &pool(2),
            &Silent,
        )
        .unwrap();
        assert_eq!(curves[0][8], expected);
        // And every prefix of the first order.
        for k in 1..=9 {
            let e = class_errors(&d, true, &all[..k], &everywhere) / n as f64;
            assert_eq!(curves[0][k - 1], e);
        }
        // Labels, out of bag: share of covered points whose vote fractions miss.
        let out_of_bag = |m: usize, i: usize| d.counts[[m, i]] == 0;
        let counts = d.counts.view();
        let curves = order_curves(
            Members::<f64>::Labels(d.labels.view(), 3),
            Targets::Labels(d.classes.view()),
            Some(&counts),
            None,
            &orders,
            &pool(2),
            &Silent,
        )
        .unwrap();
        let covered = (0..n).filter(|&i| (0..9).any(|m| out_of_bag(m, i))).count();
        let wrong = (0..n)
            .filter(|&i| {
                class_totals(&d, false, &all, &out_of_bag, i)
                    .is_some_and(|t| vote(t) as i64 != d.classes[i])
            })
            .count();
        assert_eq!(curves[0][8], wrong as f64 / covered as f64);
    }

    #[test]
    fn reduce_error_starts_with_the_best_member_and_beats_the_natural_order() {
        // The first member is the one with the lowest own loss (each member's loss from its
        // one-member curve), and the greedy curve's best point is no worse than the full
        // ensemble (the greedy reaches it at k = M).
        let d = data(20, 500, 3, 6);
        let greedy = order(
            Members::Values(d.values.view()),
            Targets::Values(d.y.view()),
            None,
            Method::ReduceError,
        );
        let singles: Vec<Vec<usize>> = (0..20).map(|m| vec![m]).collect();
        let own = order_curves(
            Members::Values(d.values.view()),
            Targets::Values(d.y.view()),
            None,
            None,
            &singles,
            &pool(2),
            &Silent,
        )
        .unwrap();
        let best = (0..20)
            .min_by(|&a, &b| own[a][0].total_cmp(&own[b][0]))
            .unwrap();
        assert_eq!(greedy[0], best);
        let natural: Vec<usize> = (0..20).collect();
        let curves = order_curves(
            Members::Values(d.values.view()),
            Targets::Values(d.y.view()),
            None,
            None,
            &[greedy, natural],
            &pool(2),
            &Silent,
        )
        .unwrap();
        let lowest = curves[0].iter().copied().fold(f64::INFINITY, f64::min);
        assert!(lowest <= curves[1][19], "{lowest} > {}", curves[1][19]);
        approx::assert_relative_eq!(curves[0][19], curves[1][19], max_relative = 1e-12);
    }
}
