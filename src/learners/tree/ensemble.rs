//! Fitted trees: the flat node arrays, tiled prediction over member groups that fit in
//! cache, and serialisation.

use std::ops::Range;

use ndarray::{s, ArrayView2};
use rayon::prelude::*;
use serde::{Deserialize, Serialize};

use crate::error::{Error, Result};
use crate::learners::{check_parts, FittedMembers, Task};
use crate::members::{MAX_CLASSES, PROBABILITY_TOLERANCE};
use crate::numeric::Real;
use crate::parallel::{watched, Monitor, Pool, Watch};
use crate::resampling::Count;

/// Marks a leaf in [`Tree::feature`].
pub(super) const LEAF: u32 = u32::MAX;
/// Points whose rows one prediction step copies and walks through the trees together.
pub(super) const POINT_CHUNK: usize = 512;
/// Walks of one tree interleaved by [`Tree::walk`].
pub(super) const BATCH: usize = 8;
/// Node bytes of the members one prediction task walks together (about a core's L2 share).
pub(super) const TREE_GROUP_BYTES: usize = 256 * 1024;

/// One node of a [`Tree`], 16 bytes so a visit touches one cache line. For an internal
/// node, rows with `x[feature] ≤ threshold` go to node `child` and the others to
/// `child + 1`; for a leaf `feature = u32::MAX` and `child` is the leaf number `l`.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct Node {
    pub threshold: f64,
    pub feature: u32,
    pub child: u32,
}

impl Node {
    pub(super) const PLACEHOLDER: Node = Node {
        threshold: 0.0,
        feature: LEAF,
        child: 0,
    };
}

/// One fitted tree as a flat node array; node 0 is the root and leaf `l` holds the values
/// `values[l·width .. (l+1)·width]`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Tree {
    pub nodes: Vec<Node>,
    pub values: Vec<f64>,
}

impl Tree {
    /// Number of nodes (internal and leaves).
    pub fn node_count(&self) -> usize {
        self.nodes.len()
    }

    /// Walks the `rows.len() / n_features` points of `rows` (row-major, `n_features` values
    /// each) to their leaves and calls `reached(point, leaf)` for each, in no fixed order.
    /// [`BATCH`] walks are interleaved so their memory loads overlap, and a walk that ends
    /// is replaced by the next point at once, so no step is spent on a finished walk while
    /// a deep one goes on.
    ///
    /// # Safety
    /// Every split feature of the tree is below `n_features` (validated at fit and load).
    #[inline]
    pub(super) unsafe fn walk(
        &self,
        rows: &[f64],
        n_features: usize,
        mut reached: impl FnMut(usize, u32),
    ) {
        let count = rows.len() / n_features;
        let nodes = self.nodes.as_ptr();
        let values = rows.as_ptr();
        // SAFETY (every dereference below): node indices are validated at fit and load
        // (children after their parent and in range), a point's row `base .. base +
        // n_features` lies inside `rows`, and every split feature is below n_features.
        let leaf_of = |base: usize, mut at: u32| -> u32 {
            loop {
                let node = unsafe { &*nodes.add(at as usize) };
                if node.feature == LEAF {
                    return node.child;
                }
                let v = unsafe { *values.add(base + node.feature as usize) };
                at = node.child + u32::from(v > node.threshold);
            }
        };
        if count < BATCH {
            (0..count).for_each(|point| reached(point, leaf_of(point * n_features, 0)));
            return;
        }
        let mut points: [usize; BATCH] = std::array::from_fn(|k| k);
        let mut bases: [usize; BATCH] = std::array::from_fn(|k| k * n_features);
        let mut at = [0u32; BATCH];
        let mut next = BATCH;
        // Every slot stays busy until the last point has been handed out.
        'refill: loop {
            for k in 0..BATCH {
                let node = unsafe { &*nodes.add(at[k] as usize) };
                if node.feature != LEAF {
                    let v = unsafe { *values.add(bases[k] + node.feature as usize) };
                    at[k] = node.child + u32::from(v > node.threshold);
                } else {
                    reached(points[k], node.child);
                    if next == count {
                        points[k] = usize::MAX;
                        break 'refill;
                    }
                    (points[k], bases[k], at[k]) = (next, next * n_features, 0);
                    next += 1;
                }
            }
        }
        for k in 0..BATCH {
            if points[k] != usize::MAX {
                reached(points[k], leaf_of(bases[k], at[k]));
            }
        }
    }

    /// The values of leaf `leaf`.
    #[inline]
    pub(super) fn leaf_values(&self, leaf: u32, width: usize) -> &[f64] {
        let l = leaf as usize * width;
        &self.values[l..l + width]
    }
}

/// A fitted ensemble of trees.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct TreeEnsemble {
    pub(super) task: Task,
    pub(super) n_features: usize,
    pub(super) trees: Vec<Tree>,
}

impl TreeEnsemble {
    /// The task.
    pub fn task(&self) -> Task {
        self.task
    }

    /// Number of members.
    pub fn members(&self) -> usize {
        self.trees.len()
    }

    /// Number of input features.
    pub fn n_features(&self) -> usize {
        self.n_features
    }

    /// Values per prediction (1 or `n_classes`).
    pub fn outputs(&self) -> usize {
        self.task.outputs()
    }

    /// The member trees.
    pub fn trees(&self) -> &[Tree] {
        &self.trees
    }

    /// The member trees, mutable, for the tests that corrupt a decoded ensemble.
    #[cfg(test)]
    pub(crate) fn trees_mut(&mut self) -> &mut Vec<Tree> {
        &mut self.trees
    }

    /// Node count of every member.
    pub fn node_counts(&self) -> Vec<usize> {
        self.trees.iter().map(Tree::node_count).collect()
    }

    /// The format-2 bytes (see [`super::format`]): about 9 bytes a node.
    pub fn to_bytes(&self) -> Vec<u8> {
        let mut out = vec![0; self.encoded_len()];
        self.encode_into(&mut out);
        out
    }

    /// Reads [`to_bytes`](TreeEnsemble::to_bytes) output, or the bytes of format 1, and
    /// checks every index, so a corrupted buffer is an error and never a crash at
    /// prediction time.
    ///
    /// # Errors
    /// `data` if the header is missing, the buffer does not decode, or the trees are not
    /// well formed.
    pub fn from_bytes(data: &[u8]) -> Result<Self> {
        Self::decode(data)
    }

    pub(super) fn validate(&self) -> Result<()> {
        let bad = |m: usize, what: &str| Error::value("data", format!("member {m}: {what}"));
        let width = self.outputs();
        if width == 0 || self.n_features == 0 || self.trees.is_empty() {
            return Err(Error::value("data", "empty tree ensemble"));
        }
        if width > MAX_CLASSES {
            return Err(Error::value(
                "data",
                format!("has {width} classes, more than {MAX_CLASSES}"),
            ));
        }
        let classification = matches!(self.task, Task::Classification { .. });
        for (m, t) in self.trees.iter().enumerate() {
            let n = t.nodes.len();
            if n == 0 || n > LEAF as usize {
                return Err(bad(m, "no nodes, or more than 2^32 - 1"));
            }
            if t.values.len() % width != 0 || t.values.iter().any(|v| !v.is_finite()) {
                return Err(bad(m, "bad leaf values"));
            }
            // A class leaf holds fractions W_k / W: each in [0, 1], summing to 1.
            let fractions = |leaf: &[f64]| {
                leaf.iter()
                    .all(|p| (-PROBABILITY_TOLERANCE..=1.0 + PROBABILITY_TOLERANCE).contains(p))
                    && (leaf.iter().sum::<f64>() - 1.0).abs() <= PROBABILITY_TOLERANCE
            };
            if classification && !t.values.chunks_exact(width).all(fractions) {
                return Err(bad(
                    m,
                    "class fractions of a leaf outside [0, 1] or not summing to 1",
                ));
            }
            let leaves = t.values.len() / width;
            for (i, node) in t.nodes.iter().enumerate() {
                let c = node.child as usize;
                if node.feature == LEAF {
                    if c >= leaves {
                        return Err(bad(m, "leaf index out of range"));
                    }
                } else if node.feature as usize >= self.n_features
                    || c <= i
                    || c + 1 >= n
                    || node.threshold.is_nan()
                {
                    // Children after their parent guarantee that prediction terminates.
                    return Err(bad(m, "bad internal node"));
                }
            }
        }
        Ok(())
    }

    pub(super) fn check_points<T: Real>(&self, x: &ArrayView2<'_, T>) -> Result<()> {
        if x.ncols() != self.n_features {
            return Err(Error::value(
                "x",
                format!(
                    "has {} features but the trees were fit on {}",
                    x.ncols(),
                    self.n_features
                ),
            ));
        }
        if x.iter().any(|v| !v.to_f64().is_finite()) {
            return Err(Error::value("x", "contains NaN or infinite values"));
        }
        Ok(())
    }

    /// Consecutive members whose nodes together fit in about [`TREE_GROUP_BYTES`] (at
    /// least one member per group).
    pub(super) fn tree_groups(&self) -> Vec<Range<usize>> {
        let mut groups = Vec::new();
        let (mut start, mut bytes) = (0, 0);
        for (m, tree) in self.trees.iter().enumerate() {
            let size = std::mem::size_of_val(tree.nodes.as_slice());
            if m > start && bytes + size > TREE_GROUP_BYTES {
                groups.push(start..m);
                (start, bytes) = (m, 0);
            }
            bytes += size;
        }
        groups.push(start..self.trees.len());
        groups
    }

    /// Writes every member's predictions for every point into `out`, laid out
    /// members × points × width (C order); `skip(m, p)` marks entries to leave as NaN.
    ///
    /// The work is tiled: a task walks a range of points through a group of members whose
    /// nodes fit in a core's cache, block by block, so neither the nodes nor the points'
    /// rows are fetched from memory once per member and point.
    pub(super) fn fill_members<T: Real>(
        &self,
        x: ArrayView2<'_, T>,
        out: &mut [f64],
        skip: impl Fn(usize, usize) -> bool + Sync,
        pool: &Pool,
        watch: &Watch,
    ) {
        let width = self.outputs();
        let n = x.nrows();
        if n == 0 {
            return;
        }
        let groups = self.tree_groups();
        // Enough tasks to keep every thread busy, each covering whole batches of points.
        let ranges = (16 * pool.threads()).div_ceil(groups.len()).max(1);
        let span = n.div_ceil(ranges).next_multiple_of(BATCH);
        let mut member_rows: Vec<Vec<&mut [f64]>> = out
            .chunks_mut(n * width)
            .map(|row| row.chunks_mut(span * width).collect())
            .collect();
        let mut tiles: Vec<(usize, usize, Vec<&mut [f64]>)> = Vec::new();
        for group in &groups {
            let mut parts: Vec<_> = member_rows[group.clone()]
                .iter_mut()
                .map(|row| std::mem::take(row).into_iter())
                .collect();
            for r in 0..n.div_ceil(span) {
                let slices = parts
                    .iter_mut()
                    .map(|p| p.next().expect("one part per range"));
                tiles.push((group.start, r * span, slices.collect()));
            }
        }
        pool.run(|| {
            tiles
                .into_par_iter()
                .for_each(|(first_member, first_point, mut rows)| {
                    let points = rows[0].len() / width;
                    let n_features = self.n_features;
                    let mut buffer = Vec::new();
                    for block in (0..points).step_by(POINT_CHUNK) {
                        // Between blocks (a few ms of walks each), never inside the walks.
                        if watch.stopped() {
                            return;
                        }
                        let block_end = (block + POINT_CHUNK).min(points);
                        watch.advance((block_end - block) * rows.len());
                        let range = first_point + block..first_point + block_end;
                        let block_rows = block_rows(&x, range, &mut buffer);
                        for (j, row) in rows.iter_mut().enumerate() {
                            let m = first_member + j;
                            let tree = &self.trees[m];
                            let out = &mut row[block * width..block_end * width];
                            let reached = |point: usize, leaf: u32| {
                                let slot = &mut out[point * width..(point + 1) * width];
                                if skip(m, first_point + block + point) {
                                    slot.fill(f64::NAN);
                                } else {
                                    copy_values(slot, tree.leaf_values(leaf, width));
                                }
                            };
                            // SAFETY: every feature index is below n_features (validated at fit
                            // and load; x has n_features columns).
                            unsafe { tree.walk(block_rows, n_features, reached) };
                        }
                    }
                });
        });
    }

    /// Every member's prediction for every point, written into `out` (members × points ×
    /// width, C order): regression values or class probabilities.
    ///
    /// `monitor` hears the member × point predictions done about every
    /// [`HEARTBEAT`](crate::parallel::HEARTBEAT); an error from it stops the walks within one
    /// block of points.
    ///
    /// # Errors
    /// `x` with the wrong number of features or non-finite values; `out` of the wrong size;
    /// [`Error::Interrupted`] from the monitor.
    pub fn member_predictions_into<T: Real>(
        &self,
        x: ArrayView2<'_, T>,
        out: &mut [f64],
        pool: &Pool,
        monitor: &dyn Monitor,
    ) -> Result<()> {
        self.check_points(&x)?;
        self.check_out(out, self.members() * x.nrows() * self.outputs())?;
        watched(pool, monitor, self.members() * x.nrows(), |watch| {
            self.fill_members(x, out, |_, _| false, pool, watch)
        })
    }

    /// Out-of-bag predictions on the training rows: member m's prediction for row i when
    /// `counts[m, i] = 0` (the member never saw the row), NaN otherwise. `out` is laid out
    /// members × rows × width.
    ///
    /// # Errors
    /// As [`member_predictions_into`](TreeEnsemble::member_predictions_into); `counts` whose
    /// shape is not members × rows of `x`.
    pub fn out_of_bag_predictions_into<T: Real, C: Count>(
        &self,
        x: ArrayView2<'_, T>,
        counts: ArrayView2<'_, C>,
        out: &mut [f64],
        pool: &Pool,
        monitor: &dyn Monitor,
    ) -> Result<()> {
        self.check_points(&x)?;
        if counts.dim() != (self.members(), x.nrows()) {
            return Err(Error::value(
                "counts",
                format!(
                    "has shape {:?} but needs (members, rows of x) = ({}, {})",
                    counts.dim(),
                    self.members(),
                    x.nrows()
                ),
            ));
        }
        self.check_out(out, self.members() * x.nrows() * self.outputs())?;
        watched(pool, monitor, self.members() * x.nrows(), |watch| {
            self.fill_members(x, out, |m, p| counts[(m, p)].as_u64() != 0, pool, watch)
        })
    }

    /// The ensemble prediction for every point into `out` (points × width): the mean over
    /// members of their values (regression) or probabilities (classification), summed in
    /// member order.
    ///
    /// # Errors
    /// As [`member_predictions_into`](TreeEnsemble::member_predictions_into).
    pub fn predict_into<T: Real>(
        &self,
        x: ArrayView2<'_, T>,
        out: &mut [f64],
        pool: &Pool,
        monitor: &dyn Monitor,
    ) -> Result<()> {
        self.check_points(&x)?;
        let width = self.outputs();
        self.check_out(out, x.nrows() * width)?;
        let scale = 1.0 / self.members() as f64;
        let n = x.nrows();
        if n == 0 {
            return Ok(());
        }
        let groups = self.tree_groups();
        let span = n.div_ceil(2 * pool.threads()).next_multiple_of(BATCH);
        let members = self.members();
        watched(pool, monitor, members * n, |watch| {
            out.par_chunks_mut(span * width)
                .enumerate()
                .for_each(|(r, part)| {
                    part.fill(0.0);
                    let mut buffer = Vec::new();
                    let points = part.len() / width;
                    // Groups and members in member order, so every point's sum has one order.
                    for group in &groups {
                        for block in (0..points).step_by(POINT_CHUNK) {
                            // Between blocks, never inside the walks.
                            if watch.stopped() {
                                return;
                            }
                            let block_end = (block + POINT_CHUNK).min(points);
                            watch.advance((block_end - block) * group.len());
                            let rows =
                                block_rows(&x, r * span + block..r * span + block_end, &mut buffer);
                            let sums = &mut part[block * width..block_end * width];
                            for tree in &self.trees[group.clone()] {
                                let add = |point: usize, leaf: u32| {
                                    let slot = &mut sums[point * width..(point + 1) * width];
                                    let values = tree.leaf_values(leaf, width);
                                    slot.iter_mut().zip(values).for_each(|(s, v)| *s += v);
                                };
                                // SAFETY: as in `fill_members`.
                                unsafe { tree.walk(rows, self.n_features, add) };
                            }
                        }
                    }
                    part.iter_mut().for_each(|s| *s *= scale);
                });
        })
    }

    pub(super) fn check_out(&self, out: &[f64], expected: usize) -> Result<()> {
        if out.len() == expected {
            Ok(())
        } else {
            Err(Error::value(
                "out",
                format!("holds {} values, expected {expected}", out.len()),
            ))
        }
    }
}

impl FittedMembers for TreeEnsemble {
    fn n_members(&self) -> usize {
        self.members()
    }

    fn task(&self) -> Task {
        self.task
    }

    fn n_features(&self) -> usize {
        self.n_features
    }

    fn check_x<T: Real>(&self, x: ArrayView2<'_, T>) -> Result<()> {
        self.check_points(&x)
    }

    fn member_predictions_into<T: Real>(
        &self,
        x: ArrayView2<'_, T>,
        out: &mut [f64],
        pool: &Pool,
        monitor: &dyn Monitor,
    ) -> Result<()> {
        TreeEnsemble::member_predictions_into(self, x, out, pool, monitor)
    }

    fn out_of_bag_into<T: Real, C: Count>(
        &self,
        x: ArrayView2<'_, T>,
        counts: ArrayView2<'_, C>,
        out: &mut [f64],
        pool: &Pool,
        monitor: &dyn Monitor,
    ) -> Result<()> {
        self.out_of_bag_predictions_into(x, counts, out, pool, monitor)
    }

    /// The trees' own sum (scaled by 1 / members), walked group by group.
    fn predict_into<T: Real>(
        &self,
        x: ArrayView2<'_, T>,
        out: &mut [f64],
        pool: &Pool,
        monitor: &dyn Monitor,
    ) -> Result<()> {
        TreeEnsemble::predict_into(self, x, out, pool, monitor)
    }

    fn join(parts: Vec<Self>) -> Result<Self> {
        check_parts(&parts)?;
        let mut parts = parts.into_iter();
        let mut joined = parts.next().expect("checked: at least one part");
        for part in parts {
            joined.trees.extend(part.trees);
        }
        Ok(joined)
    }

    fn select(&self, members: &[usize]) -> Result<Self> {
        crate::learners::check_selection(members, self.trees.len())?;
        Ok(TreeEnsemble {
            task: self.task,
            n_features: self.n_features,
            trees: members.iter().map(|&m| self.trees[m].clone()).collect(),
        })
    }

    fn encoded_len(&self) -> usize {
        TreeEnsemble::encoded_len(self)
    }

    fn encode_into(&self, out: &mut [u8]) {
        TreeEnsemble::encode_into(self, out)
    }

    fn from_bytes(data: &[u8]) -> Result<Self> {
        TreeEnsemble::from_bytes(data)
    }
}

/// `dst.copy_from_slice(src)` without a `memcpy` call for the one or two values of most
/// leaves.
#[inline(always)]
pub(super) fn copy_values(dst: &mut [f64], src: &[f64]) {
    match (dst, src) {
        ([d], [v]) => *d = *v,
        ([d0, d1], [v0, v1]) => (*d0, *d1) = (*v0, *v1),
        (dst, src) => dst.copy_from_slice(src),
    }
}

/// Rows `range` of `x` as contiguous row-major f64 in `buffer`, whatever the strides and
/// dtype of `x`, so a tree walk reads a point's values with one index.
pub(super) fn block_rows<'b, T: Real>(
    x: &ArrayView2<'_, T>,
    range: Range<usize>,
    buffer: &'b mut Vec<f64>,
) -> &'b [f64] {
    buffer.clear();
    buffer.extend(x.slice(s![range, ..]).iter().map(|v| v.to_f64()));
    buffer
}

#[cfg(test)]
mod tests {
    use super::super::test_support::*;
    use super::*;
    use crate::learners::tree::Splitter;
    use ndarray::Array2;

    #[test]
    fn tiled_walks_equal_the_plain_walk_for_any_layout_and_thread_count() {
        let x = data(600, 4, 21, 0);
        let y = signal(&x, 22);
        // Depth-limited members are small, so many share one cache group; fully grown
        // ones are large. Both must give the plain walk's values for every point count
        // (below, at and above one interleaved batch) and layout.
        for max_depth in [Some(3), None] {
            let mut p = params(Task::Regression, Splitter::Exact);
            p.max_depth = max_depth;
            let mut counts = Array2::<u8>::zeros((40, 600));
            let mut d = Draws::from_seed(3);
            for m in 0..40 {
                d.for_each_below(600, 600, |i| counts[(m, i)] += 1);
            }
            let e = fit_reg(p, &x, &y, &counts);
            // One cache group of small trees; several of large ones.
            let groups = e.tree_groups().len();
            assert!(
                if max_depth.is_some() {
                    groups == 1
                } else {
                    groups >= 2
                },
                "{groups}"
            );
            for n_points in [1, 7, 8, 9, 513, 600] {
                let points = x.slice(s![..n_points, ..]).to_owned();
                let mut expected = Vec::new();
                for tree in e.trees() {
                    for row in points.outer_iter() {
                        expected.extend_from_slice(reference_walk(
                            tree,
                            row.as_slice().unwrap(),
                            1,
                        ));
                    }
                }
                let fortran = points.t().as_standard_layout().into_owned().reversed_axes();
                assert!(n_points == 1 || !fortran.is_standard_layout());
                let narrow = points.mapv(|v| v as f32);
                let narrow_expected: Vec<f64> = {
                    let wide = narrow.mapv(f64::from);
                    e.trees()
                        .iter()
                        .flat_map(|t| {
                            wide.outer_iter()
                                .map(|r| reference_walk(t, r.as_slice().unwrap(), 1)[0])
                                .collect::<Vec<_>>()
                        })
                        .collect()
                };
                for threads in [1, 3] {
                    let mut out = vec![0.0; e.members() * n_points];
                    e.member_predictions_into(points.view(), &mut out, &pool(threads), &Silent)
                        .unwrap();
                    assert_eq!(out, expected, "{n_points} points, {threads} threads");
                    out.fill(0.0);
                    e.member_predictions_into(fortran.view(), &mut out, &pool(threads), &Silent)
                        .unwrap();
                    assert_eq!(out, expected, "column-major x");
                    out.fill(0.0);
                    e.member_predictions_into(narrow.view(), &mut out, &pool(threads), &Silent)
                        .unwrap();
                    assert_eq!(out, narrow_expected, "f32 x");
                    // The mean adds members in member order for every point.
                    let mut mean = vec![0.0; n_points];
                    e.predict_into(points.view(), &mut mean, &pool(threads), &Silent)
                        .unwrap();
                    for (i, m) in mean.iter().enumerate() {
                        let sum = (0..e.members()).fold(0.0, |s, t| s + expected[t * n_points + i]);
                        assert_eq!(*m, sum * (1.0 / e.members() as f64));
                    }
                }
            }
        }
    }

    #[test]
    fn bytes_round_trip_and_corruption_is_an_error() {
        let x = data(300, 3, 2, 0);
        let y = signal(&x, 3);
        let e = fit_reg(
            params(Task::Regression, Splitter::Auto),
            &x,
            &y,
            &Array2::ones((3, 300)),
        );
        let bytes = e.to_bytes();
        assert_eq!(TreeEnsemble::from_bytes(&bytes).unwrap(), e);
        assert!(TreeEnsemble::from_bytes(&bytes[..bytes.len() - 3]).is_err());
        assert!(TreeEnsemble::from_bytes(b"not trees").is_err());
        // Flip every byte in turn: each result is an error or a well-formed ensemble.
        for i in 0..bytes.len().min(4000) {
            let mut bad = bytes.clone();
            bad[i] ^= 0x5A;
            if let Ok(back) = TreeEnsemble::from_bytes(&bad) {
                assert!(back.validate().is_ok());
                let mut out = vec![0.0; back.members() * 10 * back.outputs()];
                if back.n_features() == 3 {
                    back.member_predictions_into(
                        data(10, 3, 1, 0).view(),
                        &mut out,
                        &pool(1),
                        &Silent,
                    )
                    .unwrap();
                }
            }
        }
    }

    #[test]
    fn out_of_bag_predictions_are_nan_where_the_member_saw_the_row() {
        let x = data(200, 2, 1, 0);
        let y = signal(&x, 2);
        let mut counts = Array2::<u8>::zeros((2, 200));
        let mut d = Draws::from_seed(4);
        for m in 0..2 {
            d.for_each_below(200, 200, |i| counts[(m, i)] += 1);
        }
        let e = fit_reg(params(Task::Regression, Splitter::Exact), &x, &y, &counts);
        let mut oob = vec![0.0; 400];
        e.out_of_bag_predictions_into(x.view(), counts.view(), &mut oob, &pool(2), &Silent)
            .unwrap();
        let all = members(&e, &x);
        for (k, (&o, &a)) in oob.iter().zip(&all).enumerate() {
            if counts[(k / 200, k % 200)] == 0 {
                assert_eq!(o, a);
            } else {
                assert!(o.is_nan());
            }
        }
    }
}
