//! Bagged k nearest neighbours, exact, weighted by in-bag multiplicity.
//!
//! ```text
//! Member m at a point q: order the member's in-bag rows by (‖q − x_i‖², i) (squared
//! Euclidean distance, then row index: ties are broken deterministically towards the lower
//! row index); walk them in that order, each row i filling min(c_mi, slots left) of the k
//! slots, where c_mi is its in-bag count. This is exactly k nearest neighbours on the
//! materialised resample (row i repeated c_mi times; Fix & Hodges 1951; Cover & Hart 1967).
//!     regression:      prediction = (1/k) Σ_slots y_slot
//!     classification:  fraction of class c = (1/k) · #{slots with y_slot = c}
//! Brute force: the distances from each point to all n_rows training rows are computed
//! once and shared by the members, then each member selects among its in-bag rows:
//! O(n_points · n_rows · p + members · n_points · n_in_bag) time, O(n_rows) memory per
//! thread. Intended for up to about 50,000 training rows.
//! ```

use ndarray::{ArrayView1, ArrayView2};
use rayon::prelude::*;
use serde::{Deserialize, Serialize};

use super::{
    check_design, check_parts, check_selection, count_bags, Bag, FittedMembers, Targets, Task,
};
use crate::error::{Error, Result};
use crate::members::MAX_CLASSES;
use crate::numeric::Real;
use crate::parallel::{Monitor, Pool};
use crate::resampling::Count;

/// Points per parallel prediction task.
const POINT_CHUNK: usize = 64;

/// Distance terms per thread between two monitor calls when predicting.
const BLOCK_WORK: usize = 1 << 24;

/// A fitted ensemble of k-nearest-neighbour members: the training rows plus every
/// member's in-bag rows and counts.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct NeighborsEnsemble {
    task: Task,
    neighbors: usize,
    n_features: usize,
    /// n_rows × n_features, row-major.
    train: Vec<f64>,
    /// Target (regression) or class code (classification) of every training row.
    targets: Vec<f64>,
    bags: Vec<Bag>,
}

impl NeighborsEnsemble {
    /// Stores the training rows and checks every member's bag.
    ///
    /// # Errors
    /// `x` (empty, NaN/inf), `y` (length, NaN/inf, class codes outside `0..n_classes`),
    /// `neighbors` (zero, or more than a member's in-bag draws), `counts` (non-integer
    /// weights: continuous Bayesian weights have no multiplicity), [`Error::Interrupted`].
    pub fn fit<T: Real>(
        x: ArrayView2<'_, T>,
        y: ArrayView1<'_, f64>,
        bags: Vec<Bag>,
        task: Task,
        neighbors: usize,
        monitor: &dyn Monitor,
    ) -> Result<Self> {
        check_design(x, "x")?;
        let n = x.nrows();
        if y.len() != n {
            return Err(Error::value(
                "y",
                format!("has {} values but x has {n} rows", y.len()),
            ));
        }
        if y.iter().any(|v| !v.is_finite()) {
            return Err(Error::value("y", "contains NaN or infinite values"));
        }
        if let Task::Classification { n_classes } = task {
            if y.iter()
                .any(|&v| v < 0.0 || v.fract() != 0.0 || v >= n_classes as f64)
            {
                return Err(Error::value(
                    "y",
                    format!("class codes must be whole numbers in 0..{n_classes}"),
                ));
            }
        }
        if neighbors == 0 {
            return Err(Error::value("neighbors", "must be at least 1"));
        }
        if bags.is_empty() {
            return Err(Error::value("counts", "needs at least one member"));
        }
        for (m, bag) in bags.iter().enumerate() {
            if bag.rows.iter().any(|&i| i >= n) {
                return Err(Error::value("counts", "refers to rows beyond x"));
            }
            if bag.weights.iter().any(|w| w.fract() != 0.0) {
                return Err(Error::value(
                    "counts",
                    "nearest neighbours need whole in-bag counts; continuous (Bayesian) \
                     weights have no multiplicity",
                ));
            }
            let total = bag.total();
            if total < neighbors as f64 {
                return Err(Error::value(
                    "neighbors",
                    format!(
                        "member {m} has {total} in-bag draws, fewer than neighbors={neighbors}"
                    ),
                ));
            }
        }
        let p = x.ncols();
        let mut train = Vec::with_capacity(n * p);
        for row in x.outer_iter() {
            train.extend(row.iter().map(|v| v.to_f64()));
        }
        monitor.progress(bags.len(), bags.len())?;
        Ok(NeighborsEnsemble {
            task,
            neighbors,
            n_features: p,
            train,
            targets: y.to_vec(),
            bags,
        })
    }

    /// Number of members.
    pub fn members(&self) -> usize {
        self.bags.len()
    }

    /// Number of features.
    pub fn n_features(&self) -> usize {
        self.n_features
    }

    /// The task (regression or classification with its number of classes).
    pub fn task(&self) -> Task {
        self.task
    }

    /// k, the number of neighbour draws averaged.
    pub fn neighbors(&self) -> usize {
        self.neighbors
    }

    /// Number of training rows.
    pub fn n_rows(&self) -> usize {
        self.targets.len()
    }

    /// Checks the internal consistency of a deserialised ensemble.
    ///
    /// # Errors
    /// `data` when sizes disagree, a row index is out of range or a value is not finite.
    pub fn validate(&self) -> Result<()> {
        let n = self.targets.len();
        let classes_ok = match self.task {
            Task::Regression => true,
            Task::Classification { n_classes } => {
                (1..=MAX_CLASSES).contains(&n_classes)
                    && self
                        .targets
                        .iter()
                        .all(|&v| v >= 0.0 && v.fract() == 0.0 && v < n_classes as f64)
            }
        };
        let ok = self.n_features >= 1
            && n >= 1
            && self.neighbors >= 1
            && Some(self.train.len()) == n.checked_mul(self.n_features)
            && self
                .train
                .iter()
                .chain(&self.targets)
                .all(|v| v.is_finite())
            && classes_ok
            && !self.bags.is_empty()
            && self.bags.iter().all(|b| {
                b.rows.len() == b.weights.len()
                    && b.rows.windows(2).all(|w| w[0] < w[1])
                    && b.rows.iter().all(|&i| i < n)
                    && b.weights.iter().all(|&w| w >= 1.0 && w.fract() == 0.0)
                    && b.total() >= self.neighbors as f64
            });
        if ok {
            Ok(())
        } else {
            Err(Error::value(
                "data",
                "is not a consistent neighbours ensemble",
            ))
        }
    }

    /// Squared distances from `q` to every training row, into `out`.
    fn distances(&self, q: &[f64], out: &mut [f64]) {
        let p = self.n_features;
        for (d, row) in out.iter_mut().zip(self.train.chunks_exact(p)) {
            *d = row.iter().zip(q).map(|(a, b)| (a - b) * (a - b)).sum();
        }
    }

    /// Member `bag`'s prediction at a point whose squared distances to every training row
    /// are `distances`, written into `out` (task outputs values).
    fn predict_point(
        &self,
        bag: &Bag,
        distances: &[f64],
        candidates: &mut Vec<(f64, usize, f64)>,
        out: &mut [f64],
    ) {
        // Keep the k best rows by (distance, row), scanning rows in ascending order: a row
        // whose distance equals the current k-th is worse (higher index) and is skipped, and
        // an accepted row goes after the rows at its distance. Every in-bag row fills at
        // least one slot, so k distinct rows suffice.
        let k = self.neighbors;
        candidates.clear();
        for (&i, &w) in bag.rows.iter().zip(&bag.weights) {
            let d = distances[i];
            if candidates.len() == k {
                if d >= candidates[k - 1].0 {
                    continue;
                }
                candidates.pop();
            }
            let at = candidates.partition_point(|c| c.0 <= d);
            candidates.insert(at, (d, i, w));
        }
        out.fill(0.0);
        let mut left = k as f64;
        for &(_, i, w) in candidates.iter() {
            if left <= 0.0 {
                break;
            }
            let take = w.min(left);
            left -= take;
            match self.task {
                Task::Regression => out[0] += take * self.targets[i],
                Task::Classification { .. } => out[self.targets[i] as usize] += take,
            }
        }
        out.iter_mut().for_each(|v| *v /= k as f64);
    }

    /// Writes every member's prediction at every point into `out`, row-major
    /// (members, n_points) for regression, (members, n_points, n_classes) class fractions
    /// for classification.
    ///
    /// # Errors
    /// `x` (columns, NaN/inf, empty); `out` of the wrong length; [`Error::Interrupted`]
    /// from the monitor, called between blocks of points.
    pub fn member_predictions_into<T: Real>(
        &self,
        x: ArrayView2<'_, T>,
        out: &mut [f64],
        pool: &Pool,
        monitor: &dyn Monitor,
    ) -> Result<()> {
        self.check_x(x)?;
        self.predict_where(x, out, pool, monitor, BLOCK_WORK, |_, _| true)
    }

    /// Writes each member's predictions on its out-of-bag rows of the training design `x`
    /// (n_rows × p) into `out` (shaped as in
    /// [`member_predictions_into`](Self::member_predictions_into)), NaN where the member
    /// saw the row; only out-of-bag rows are computed. `bags` are the members' in-bag rows
    /// on `x` (normally those the ensemble was fit with).
    ///
    /// # Errors
    /// As `member_predictions_into`; `counts` when the number of bags differs from the
    /// number of members.
    pub fn out_of_bag_into<T: Real>(
        &self,
        x: ArrayView2<'_, T>,
        bags: &[Bag],
        out: &mut [f64],
        pool: &Pool,
        monitor: &dyn Monitor,
    ) -> Result<()> {
        self.check_x(x)?;
        if bags.len() != self.members() {
            return Err(Error::value(
                "counts",
                format!(
                    "has {} members but the ensemble has {}",
                    bags.len(),
                    self.members()
                ),
            ));
        }
        self.predict_where(x, out, pool, monitor, BLOCK_WORK, |m, i| {
            bags[m].rows.binary_search(&i).is_err()
        })
    }

    fn predict_where<T: Real>(
        &self,
        x: ArrayView2<'_, T>,
        out: &mut [f64],
        pool: &Pool,
        monitor: &dyn Monitor,
        block_work: usize,
        wanted: impl Fn(usize, usize) -> bool + Sync,
    ) -> Result<()> {
        let n = x.nrows();
        let o = self.task.outputs();
        if out.len() != self.members() * n * o {
            return Err(Error::value("out", "has the wrong length"));
        }
        // Blocks of points of about `block_work` operations per thread, so the monitor
        // (progress, Ctrl-C) is called every few milliseconds whatever the sizes.
        let in_bag: usize = self.bags.iter().map(|b| b.rows.len()).sum();
        let work_per_point = self.n_rows() * self.n_features + in_bag;
        let per_block = (block_work * pool.threads().max(1) / work_per_point.max(1))
            .max(1)
            .div_ceil(POINT_CHUNK)
            * POINT_CHUNK;
        let members = self.members();
        let mut start = 0;
        while start < n {
            let end = (start + per_block).min(n);
            // Regroup the block by chunks of points: chunk c holds one slice per member.
            let chunks = (end - start).div_ceil(POINT_CHUNK);
            let mut by_chunk: Vec<Vec<&mut [f64]>> =
                (0..chunks).map(|_| Vec::with_capacity(members)).collect();
            for member in out.chunks_mut(n * o) {
                let part = &mut member[start * o..end * o];
                for (c, slice) in part.chunks_mut(POINT_CHUNK * o).enumerate() {
                    by_chunk[c].push(slice);
                }
            }
            pool.run(|| {
                by_chunk
                    .into_par_iter()
                    .enumerate()
                    .for_each(|(c, mut slices)| {
                        let mut candidates = Vec::new();
                        let mut distances = vec![0.0; self.n_rows()];
                        let mut q = vec![0.0; self.n_features];
                        let first = start + c * POINT_CHUNK;
                        let count = slices[0].len() / o;
                        for k in 0..count {
                            let i = first + k;
                            if !(0..members).any(|m| wanted(m, i)) {
                                slices
                                    .iter_mut()
                                    .for_each(|s| s[k * o..(k + 1) * o].fill(f64::NAN));
                                continue;
                            }
                            for (j, v) in q.iter_mut().enumerate() {
                                *v = x[[i, j]].to_f64();
                            }
                            self.distances(&q, &mut distances);
                            for (m, (slice, bag)) in slices.iter_mut().zip(&self.bags).enumerate() {
                                let slot = &mut slice[k * o..(k + 1) * o];
                                if wanted(m, i) {
                                    self.predict_point(bag, &distances, &mut candidates, slot);
                                } else {
                                    slot.fill(f64::NAN);
                                }
                            }
                        }
                    })
            });
            start = end;
            monitor.progress(start, n)?;
        }
        Ok(())
    }
}

/// Unchecked parameters of the neighbours learner; [`NeighborsParams::check`] turns them
/// into [`CheckedNeighborsParams`].
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct NeighborsParams {
    pub task: Task,
    /// k: in-bag draws averaged per prediction.
    pub neighbors: usize,
}

/// Checked parameters of the neighbours learner.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct CheckedNeighborsParams {
    params: NeighborsParams,
}

impl NeighborsParams {
    /// Checks the parameters that do not depend on the data.
    ///
    /// # Errors
    /// `neighbors` below 1; `n_classes` below 1.
    pub fn check(self) -> Result<CheckedNeighborsParams> {
        if self.neighbors == 0 {
            return Err(Error::value("neighbors", "must be at least 1"));
        }
        if self.task == (Task::Classification { n_classes: 0 }) {
            return Err(Error::value("n_classes", "must be at least 1"));
        }
        Ok(CheckedNeighborsParams { params: self })
    }
}

impl CheckedNeighborsParams {
    /// Stores the training rows (see [`NeighborsEnsemble::fit`]); class codes are kept as
    /// whole numbers.
    ///
    /// # Errors
    /// As [`NeighborsEnsemble::fit`].
    pub fn fit<T: Real>(
        &self,
        x: ArrayView2<'_, T>,
        y: Targets<'_>,
        bags: Vec<Bag>,
        monitor: &dyn Monitor,
    ) -> Result<NeighborsEnsemble> {
        let NeighborsParams { task, neighbors } = self.params;
        let y = y.to_f64();
        NeighborsEnsemble::fit(x, y.as_slice().into(), bags, task, neighbors, monitor)
    }
}

impl FittedMembers for NeighborsEnsemble {
    fn n_members(&self) -> usize {
        self.members()
    }

    fn task(&self) -> Task {
        self.task
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
        NeighborsEnsemble::member_predictions_into(self, x, out, pool, monitor)
    }

    fn out_of_bag_into<T: Real, C: Count>(
        &self,
        x: ArrayView2<'_, T>,
        counts: ArrayView2<'_, C>,
        out: &mut [f64],
        pool: &Pool,
        monitor: &dyn Monitor,
    ) -> Result<()> {
        let bags = count_bags(counts, x.nrows())?;
        NeighborsEnsemble::out_of_bag_into(self, x, &bags, out, pool, monitor)
    }

    fn join(parts: Vec<Self>) -> Result<Self> {
        check_parts(&parts)?;
        let first = &parts[0];
        if let Some(k) = parts.iter().position(|part| {
            part.neighbors != first.neighbors
                || part.train != first.train
                || part.targets != first.targets
        }) {
            return Err(Error::value(
                "parts",
                format!(
                    "part {k} differs from part 0 in neighbors or in its training rows; \
                     only parts of one ensemble fitted on the same rows can be joined"
                ),
            ));
        }
        let mut parts = parts.into_iter();
        let mut joined = parts.next().expect("checked: at least one part");
        for part in parts {
            joined.bags.extend(part.bags);
        }
        Ok(joined)
    }

    fn select(&self, members: &[usize]) -> Result<Self> {
        check_selection(members, self.bags.len())?;
        Ok(NeighborsEnsemble {
            task: self.task,
            neighbors: self.neighbors,
            n_features: self.n_features,
            train: self.train.clone(),
            targets: self.targets.clone(),
            bags: members.iter().map(|&m| self.bags[m].clone()).collect(),
        })
    }

    fn encoded_len(&self) -> usize {
        crate::learners::postcard_len(self)
    }

    fn encode_into(&self, out: &mut [u8]) {
        crate::learners::postcard_into(self, out)
    }

    fn from_bytes(data: &[u8]) -> Result<Self> {
        let (ensemble, rest): (NeighborsEnsemble, &[u8]) = postcard::take_from_bytes(data)
            .map_err(|e| {
                Error::value(
                    "data",
                    format!("is not a valid neighbours ensemble encoding ({e})"),
                )
            })?;
        if !rest.is_empty() {
            return Err(Error::value(
                "data",
                "has trailing bytes after the neighbours ensemble",
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
    use ndarray::{array, Array2};

    #[test]
    fn member_ranges_joined_equal_the_whole_fit() {
        let x = Array2::from_shape_fn((30, 2), |(i, j)| ((i * 7 + j * 3) % 11) as f64);
        let y: Vec<f64> = (0..30).map(|i| (i % 3) as f64).collect();
        let counts = Array2::from_shape_fn((4, 30), |(m, i)| ((i + m) % 3) as u8);
        let task = Task::Classification { n_classes: 3 };
        let fit = |first: usize, end: usize, k: usize| {
            let b = bags(counts.slice(ndarray::s![first..end, ..]), 30).unwrap();
            NeighborsEnsemble::fit(x.view(), y.as_slice().into(), b, task, k, &Silent).unwrap()
        };
        let whole = fit(0, 4, 3);
        let joined = NeighborsEnsemble::join(vec![fit(0, 1, 3), fit(1, 4, 3)]).unwrap();
        assert_eq!(joined, whole);
        crate::learners::check_select_contract(&whole, x.view());
        let pool = Threads::Fixed(2).pool().unwrap();
        let mut a = vec![0.0; 4 * 30 * 3];
        let mut b = a.clone();
        whole
            .member_predictions_into(x.view(), &mut a, &pool, &Silent)
            .unwrap();
        joined
            .member_predictions_into(x.view(), &mut b, &pool, &Silent)
            .unwrap();
        assert_eq!(a, b);
        // Another k, or other training rows, cannot be joined.
        assert!(NeighborsEnsemble::join(vec![whole.clone(), fit(0, 1, 2)]).is_err());
        let shifted = x.mapv(|v| v + 1.0);
        let b = bags(counts.slice(ndarray::s![..1, ..]), 30).unwrap();
        let other =
            NeighborsEnsemble::fit(shifted.view(), y.as_slice().into(), b, task, 3, &Silent)
                .unwrap();
        let err = NeighborsEnsemble::join(vec![whole, other]).unwrap_err();
        assert!(err.to_string().contains("parts"), "{err}");
    }

    #[test]
    fn multiplicity_fills_slots_and_ties_go_to_the_lower_row() {
        // Rows at 0, 1, 2, 3 on a line; the query at 1.5 is equidistant from rows 1 and 2.
        let x = array![[0.0], [1.0], [2.0], [3.0]];
        let y = array![10.0, 20.0, 30.0, 40.0];
        let b = bags(array![[1u8, 1, 1, 1], [0, 0, 3, 1]].view(), 4).unwrap();
        let pool = Threads::Fixed(1).pool().unwrap();
        let fit =
            NeighborsEnsemble::fit(x.view(), y.view(), b, Task::Regression, 3, &Silent).unwrap();
        let q = array![[1.5]];
        let mut out = vec![0.0; 2];
        fit.member_predictions_into(q.view(), &mut out, &pool, &Silent)
            .unwrap();
        // Member 0: rows 1, 2 (distance 0.25), then row 0 before row 3 (2.25, lower index).
        assert_eq!(out[0], (20.0 + 30.0 + 10.0) / 3.0);
        // Member 1: row 2 drawn three times fills all three slots.
        assert_eq!(out[1], 30.0);
    }

    #[test]
    fn class_fractions_and_out_of_bag() {
        let x = array![[0.0, 0.0], [0.1, 0.0], [5.0, 5.0], [5.1, 5.0], [0.0, 0.2]];
        let y = array![0.0, 0.0, 1.0, 1.0, 1.0];
        let counts = array![[2u8, 0, 1, 1, 1], [1, 1, 1, 1, 1]];
        let b = bags(counts.view(), 5).unwrap();
        let task = Task::Classification { n_classes: 2 };
        let pool = Threads::Fixed(2).pool().unwrap();
        let fit = NeighborsEnsemble::fit(x.view(), y.view(), b.clone(), task, 2, &Silent).unwrap();
        let mut oob = vec![0.0; 2 * 5 * 2];
        fit.out_of_bag_into(x.view(), &b, &mut oob, &pool, &Silent)
            .unwrap();
        // Member 0 left row 1 out: its two nearest draws are row 0 twice -> class 0.
        assert_eq!(&oob[2..4], &[1.0, 0.0]);
        assert!(oob[0].is_nan() && oob[8].is_nan());
        assert!(oob[10..].iter().all(|v| v.is_nan()));
        let mut all = vec![0.0; 2 * 5 * 2];
        fit.member_predictions_into(x.view(), &mut all, &pool, &Silent)
            .unwrap();
        // Member 1 at row 4 (0, 0.2): nearest rows 4 (class 1) and 0 (class 0).
        assert_eq!(&all[18..20], &[0.5, 0.5]);
    }

    #[test]
    fn bad_input_is_rejected() {
        let x = array![[0.0], [1.0]];
        let y = array![0.0, 1.0];
        let pool = Threads::Fixed(1).pool().unwrap();
        let one = || bags(array![[1u8, 1]].view(), 2).unwrap();
        let reg = Task::Regression;
        assert!(NeighborsEnsemble::fit(x.view(), y.view(), one(), reg, 3, &Silent).is_err());
        assert!(NeighborsEnsemble::fit(x.view(), y.view(), one(), reg, 0, &Silent).is_err());
        let cls = Task::Classification { n_classes: 1 };
        assert!(NeighborsEnsemble::fit(x.view(), y.view(), one(), cls, 1, &Silent).is_err());
        let weights = bags(array![[0.5, 1.5]].view(), 2).unwrap();
        assert!(NeighborsEnsemble::fit(x.view(), y.view(), weights, reg, 1, &Silent).is_err());
        let fit = NeighborsEnsemble::fit(x.view(), y.view(), one(), reg, 2, &Silent).unwrap();
        let wide = Array2::<f64>::zeros((1, 2));
        assert!(fit
            .member_predictions_into(wide.view(), &mut [0.0], &pool, &Silent)
            .is_err());
        assert!(fit.validate().is_ok());
    }

    struct Counting(std::sync::atomic::AtomicUsize, usize);

    impl Monitor for Counting {
        fn progress(&self, _done: usize, _total: usize) -> Result<()> {
            let calls = self.0.fetch_add(1, std::sync::atomic::Ordering::SeqCst) + 1;
            if calls >= self.1 {
                Err(Error::Interrupted)
            } else {
                Ok(())
            }
        }
    }

    #[test]
    fn blocks_of_points_equal_single_points_and_stop_on_request() {
        // 4 members x 256 rows x 1 feature: 256 distance terms plus 4 x 171 in-bag rows per
        // point; 100,000 per block gives blocks of 128 points (two chunks of 64), then 22.
        let n = 256;
        let x = Array2::from_shape_fn((n, 1), |(i, _)| ((i * 7919) % n) as f64 / n as f64);
        let y = x.column(0).mapv(|v| (7.0 * v).sin());
        let counts = Array2::from_shape_fn((4, n), |(m, i)| ((i + m) % 3) as u8);
        let b = bags(counts.view(), n).unwrap();
        let fit =
            NeighborsEnsemble::fit(x.view(), y.view(), b, Task::Regression, 4, &Silent).unwrap();
        let pool = Threads::Fixed(1).pool().unwrap();
        let q = Array2::from_shape_fn((150, 1), |(i, _)| i as f64 / 150.0 + 1e-4);
        let mut all = vec![0.0; 4 * 150];
        let calls = Counting(0.into(), usize::MAX);
        fit.predict_where(q.view(), &mut all, &pool, &calls, 100_000, |_, _| true)
            .unwrap();
        assert_eq!(calls.0.into_inner(), 2);
        for i in [0, 63, 64, 127, 128, 149] {
            let mut one = vec![0.0; 4];
            let point = q.slice(ndarray::s![i..i + 1, ..]);
            fit.member_predictions_into(point, &mut one, &pool, &Silent)
                .unwrap();
            for m in 0..4 {
                assert_eq!(one[m], all[m * 150 + i]);
            }
        }
        let stop = Counting(0.into(), 1);
        let err = fit.predict_where(q.view(), &mut all, &pool, &stop, 100_000, |_, _| true);
        assert_eq!(err, Err(Error::Interrupted));
    }
}
