//! Bagged CART trees (Breiman, Friedman, Olshen & Stone 1984, "Classification and
//! Regression Trees") grown on in-bag counts used as integer row weights.
//!
//! A [`TreeParams`] is checked once into a [`TreeConfig`]; [`TreeConfig::fit`] grows one
//! tree per member on a shared, once-per-fit representation of `x` and returns a
//! [`TreeEnsemble`] of compact flat node arrays.
//!
//! ```text
//! weights     member m gives row i the weight w_i = counts[m, i] (the number of times the
//!             bootstrap drew it); a tree grown with these weights is the tree grown on the
//!             materialised resampled rows, without ever copying them
//! node stats  W = Σ w_i,  S = Σ w_i·y_i (regression),  W_k = Σ_{y_i = k} w_i (classes)
//! split score the criterion is minimised through the equivalent "proxy" that is maximised
//!             over candidate splits L | R (Breiman et al. 1984, ch. 4 and 8):
//!   squared error  S_L²/W_L + S_R²/W_R           (weighted variance reduction)
//!   gini           Σ_k W_Lk²/W_L + Σ_k W_Rk²/W_R (Gini impurity decrease)
//!   entropy        Σ_k W_Lk·ln(W_Lk/W_L) + Σ_k W_Rk·ln(W_Rk/W_R) (information gain)
//! leaf value  regression: S/W (weighted mean); classification: W_k/W (weighted class
//!             fractions, a probability vector)
//! min_leaf    a split is valid only if W_L ≥ min_leaf and W_R ≥ min_leaf, i.e. each child
//!             holds at least min_leaf in-bag draws (sum of counts); with every count 1 this
//!             is scikit-learn's min_samples_leaf
//! stopping    a node is a leaf when depth = max_depth (root depth 0), W < 2·min_leaf, it
//!             holds one distinct row, it is pure (weighted variance ≤ f64::EPSILON, or one
//!             class), or no valid split exists; otherwise the best valid split is taken
//!             even when its gain is zero (as scikit-learn's tree builder does)
//! ties        scores within a relative 1e-12 of each other are ties (so rounding of sums
//!             accumulated in another order cannot decide); among ties the lowest feature
//!             index wins, then the lowest threshold
//! ```
//!
//! Split finders ([`Splitter`]):
//!
//! ```text
//! exact       thresholds at midpoints (a + b)/2 between adjacent distinct in-node values
//!             a < b (if rounding puts the midpoint on b, the threshold is a); rows with
//!             x ≤ threshold go left. Each feature is sorted once per fit; every member
//!             keeps per-feature sorted lists of its in-bag rows, split by stable
//!             partitions, so no node ever sorts.
//! histogram   each feature is cut once per fit into at most 256 quantile bins shared by all
//!             members (every distinct value its own bin when there are at most 256); bin
//!             b holds e_{b−1} < x ≤ e_b with the upper edge e_b the midpoint between the
//!             largest value of bin b and the smallest of bin b+1. A split "bins ≤ b" has
//!             threshold e_b, b the last non-empty bin on the left. Per-node weight/target
//!             histograms; with all features tried, the smaller child's histogram is built
//!             and the larger one's is the parent's minus it (sibling subtraction). Nodes
//!             with at most 128 in-bag rows sort their bin codes instead (same result).
//! auto        histogram for nodes with more than AUTO_HISTOGRAM_ABOVE (2048) distinct
//!             in-bag rows, exact below
//! ```
//!
//! Random subspaces (`split_features = k`, Breiman 2001, "Random forests", Machine Learning
//! 45): at each node features are drawn without replacement in a random order and tried
//! until k of them offered a valid split (or all were tried). The draws of member m come
//! from stream m of [`MemberStreams`] seeded with [`feature_stream_seed`]`(seed)`, a
//! SplitMix64 finaliser of `seed + FEATURE_STREAM_SALT`, so they never coincide with the
//! resampling streams of the same seed. Results do not depend on the thread count.

use std::ops::Range;
use std::sync::atomic::{AtomicBool, AtomicUsize, Ordering};
use std::time::{Duration, Instant};

use ndarray::{s, ArrayView1, ArrayView2};
use rayon::prelude::*;
use serde::{Deserialize, Serialize};

use crate::error::{Error, Result};
use crate::numeric::Real;
use crate::parallel::{Monitor, Pool};
use crate::random::{Draws, MemberStreams};
use crate::resampling::Count;

/// At most this many histogram bins per feature.
pub const MAX_BINS: usize = 256;
/// [`Splitter::Auto`] uses histograms for nodes with more distinct in-bag rows than this.
pub const AUTO_HISTOGRAM_ABOVE: usize = 2048;
/// Added to the user's seed before mixing, to separate the feature-sampling streams from
/// the resampling streams.
pub const FEATURE_STREAM_SALT: u64 = 0x7472_6565_5F66_6561;
/// Marks a leaf in [`Tree::feature`].
const LEAF: u32 = u32::MAX;
/// Points whose rows one prediction step copies and walks through the trees together.
const POINT_CHUNK: usize = 512;
/// Binned nodes with at most this many distinct in-bag rows sort their bin codes instead
/// of filling 256-bin histograms.
const SPARSE_BINS_UP_TO: usize = 128;
/// Walks of one tree interleaved by [`Tree::walk`].
const BATCH: usize = 8;
/// Node bytes of the members one prediction task walks together (about a core's L2 share).
const TREE_GROUP_BYTES: usize = 256 * 1024;

/// The seed of the feature-sampling member streams: SplitMix64's finaliser (Steele, Lea &
/// Flood 2014, "Fast splittable pseudorandom number generators", OOPSLA) applied to
/// `seed + FEATURE_STREAM_SALT` (wrapping).
pub fn feature_stream_seed(seed: u64) -> u64 {
    let mut z = seed
        .wrapping_add(FEATURE_STREAM_SALT)
        .wrapping_add(0x9E37_79B9_7F4A_7C15);
    z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
    z ^ (z >> 31)
}

/// What the trees predict.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub enum Task {
    /// A real target; leaves hold the weighted mean.
    Regression,
    /// Class codes `0..n_classes`; leaves hold weighted class fractions.
    Classification { n_classes: usize },
}

impl Task {
    /// Values per leaf: 1 for regression, `n_classes` for classification.
    pub fn width(self) -> usize {
        match self {
            Task::Regression => 1,
            Task::Classification { n_classes } => n_classes,
        }
    }
}

/// The impurity a split reduces.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Criterion {
    /// Weighted squared error (regression).
    SquaredError,
    /// Gini impurity (classification).
    Gini,
    /// Shannon entropy (classification).
    Entropy,
}

impl Criterion {
    /// Parses the user-facing name: "squared_error", "gini" or "entropy".
    pub fn parse(name: &str) -> Result<Self> {
        match name {
            "squared_error" => Ok(Criterion::SquaredError),
            "gini" => Ok(Criterion::Gini),
            "entropy" => Ok(Criterion::Entropy),
            other => Err(Error::value(
                "criterion",
                format!("expected 'squared_error', 'gini' or 'entropy', got {other:?}"),
            )),
        }
    }
}

/// How split thresholds are searched.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Splitter {
    /// Every midpoint between adjacent distinct values.
    Exact,
    /// Quantile bins computed once per fit.
    Histogram,
    /// Histogram above [`AUTO_HISTOGRAM_ABOVE`] in-node rows, exact below.
    Auto,
}

impl Splitter {
    /// Parses the user-facing name: "exact", "histogram" or "auto".
    pub fn parse(name: &str) -> Result<Self> {
        match name {
            "exact" => Ok(Splitter::Exact),
            "histogram" => Ok(Splitter::Histogram),
            "auto" => Ok(Splitter::Auto),
            other => Err(Error::value(
                "splitter",
                format!("expected 'exact', 'histogram' or 'auto', got {other:?}"),
            )),
        }
    }
}

/// Unchecked tree parameters; [`TreeParams::check`] turns them into a [`TreeConfig`].
#[derive(Debug, Clone, PartialEq)]
pub struct TreeParams {
    pub task: Task,
    /// Deepest level a node may split at (root depth 0); `None` = unlimited.
    pub max_depth: Option<usize>,
    /// Minimum in-bag draws (sum of counts) in each leaf.
    pub min_leaf: u64,
    /// Features tried per node; `None` = all.
    pub split_features: Option<usize>,
    pub criterion: Criterion,
    pub splitter: Splitter,
    /// The user's seed (mixed by [`feature_stream_seed`]).
    pub seed: u64,
}

/// Checked tree parameters.
#[derive(Debug, Clone, PartialEq)]
pub struct TreeConfig {
    params: TreeParams,
}

impl TreeParams {
    /// Checks the parameters that do not depend on the data.
    ///
    /// # Errors
    /// `max_depth` or `min_leaf` or `split_features` below 1; `n_classes` below 1;
    /// `criterion` not matching the task.
    pub fn check(self) -> Result<TreeConfig> {
        if self.max_depth == Some(0) {
            return Err(Error::value("max_depth", "must be at least 1 (or None)"));
        }
        if self.min_leaf == 0 {
            return Err(Error::value("min_leaf", "must be at least 1"));
        }
        if self.split_features == Some(0) {
            return Err(Error::value(
                "split_features",
                "must be at least 1 (or None)",
            ));
        }
        match (self.task, self.criterion) {
            (Task::Classification { n_classes: 0 }, _) => {
                return Err(Error::value("n_classes", "must be at least 1"))
            }
            (Task::Regression, Criterion::SquaredError)
            | (Task::Classification { .. }, Criterion::Gini | Criterion::Entropy) => {}
            (Task::Regression, _) => {
                return Err(Error::value(
                    "criterion",
                    "regression trees use 'squared_error'",
                ))
            }
            (Task::Classification { .. }, _) => {
                return Err(Error::value(
                    "criterion",
                    "classification trees use 'gini' or 'entropy'",
                ))
            }
        }
        Ok(TreeConfig { params: self })
    }
}

/// Training targets.
#[derive(Debug, Clone, Copy)]
pub enum Targets<'a> {
    /// Real values, one per row.
    Regression(ArrayView1<'a, f64>),
    /// Class codes `0..n_classes`, one per row.
    Classes(ArrayView1<'a, usize>),
}

/// Which rows each member sees.
#[derive(Debug, Clone, Copy)]
pub enum InBag<'a, C: Count> {
    /// In-bag counts, members × rows (any strides); a count is the row's weight.
    Counts(ArrayView2<'a, C>),
    /// Every member sees every row once.
    AllRows { members: usize },
}

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
    const PLACEHOLDER: Node = Node {
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
    unsafe fn walk(&self, rows: &[f64], n_features: usize, mut reached: impl FnMut(usize, u32)) {
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
    fn leaf_values(&self, leaf: u32, width: usize) -> &[f64] {
        let l = leaf as usize * width;
        &self.values[l..l + width]
    }
}

/// A fitted ensemble of trees.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct TreeEnsemble {
    task: Task,
    n_features: usize,
    trees: Vec<Tree>,
}

/// Leading bytes of [`TreeEnsemble::to_bytes`].
const MAGIC: &[u8; 8] = b"bgwtree\x01";

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
    pub fn width(&self) -> usize {
        self.task.width()
    }

    /// The member trees.
    pub fn trees(&self) -> &[Tree] {
        &self.trees
    }

    /// Node count of every member.
    pub fn node_counts(&self) -> Vec<usize> {
        self.trees.iter().map(Tree::node_count).collect()
    }

    /// Serialises with postcard behind an 8-byte magic/version header.
    pub fn to_bytes(&self) -> Vec<u8> {
        let mut out = MAGIC.to_vec();
        out.extend(postcard::to_allocvec(self).expect("serialising to memory cannot fail"));
        out
    }

    /// Reads [`to_bytes`](TreeEnsemble::to_bytes) output and checks every index, so a
    /// corrupted buffer is an error and never a crash at prediction time.
    ///
    /// # Errors
    /// `data` if the header is missing, the buffer does not decode, or the trees are not
    /// well formed.
    pub fn from_bytes(data: &[u8]) -> Result<Self> {
        let body = data
            .strip_prefix(MAGIC.as_slice())
            .ok_or_else(|| Error::value("data", "not a bagwise tree ensemble (bad header)"))?;
        let (ensemble, rest): (TreeEnsemble, &[u8]) = postcard::take_from_bytes(body)
            .map_err(|e| Error::value("data", format!("corrupt tree ensemble: {e}")))?;
        if !rest.is_empty() {
            return Err(Error::value(
                "data",
                "trailing bytes after the tree ensemble",
            ));
        }
        ensemble.validate()?;
        Ok(ensemble)
    }

    fn validate(&self) -> Result<()> {
        let bad = |m: usize, what: &str| Error::value("data", format!("member {m}: {what}"));
        let width = self.width();
        if width == 0 || self.n_features == 0 || self.trees.is_empty() {
            return Err(Error::value("data", "empty tree ensemble"));
        }
        for (m, t) in self.trees.iter().enumerate() {
            let n = t.nodes.len();
            if n == 0 {
                return Err(bad(m, "no nodes"));
            }
            if t.values.len() % width != 0 || t.values.iter().any(|v| v.is_nan()) {
                return Err(bad(m, "bad leaf values"));
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

    fn check_points<T: Real>(&self, x: &ArrayView2<'_, T>) -> Result<()> {
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
    fn tree_groups(&self) -> Vec<Range<usize>> {
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
    fn fill_members<T: Real>(
        &self,
        x: ArrayView2<'_, T>,
        out: &mut [f64],
        skip: impl Fn(usize, usize) -> bool + Sync,
        pool: &Pool,
    ) {
        let width = self.width();
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
                        let block_end = (block + POINT_CHUNK).min(points);
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
    /// # Errors
    /// `x` with the wrong number of features or non-finite values; `out` of the wrong size.
    pub fn member_predictions_into<T: Real>(
        &self,
        x: ArrayView2<'_, T>,
        out: &mut [f64],
        pool: &Pool,
    ) -> Result<()> {
        self.check_points(&x)?;
        self.check_out(out, self.members() * x.nrows() * self.width())?;
        self.fill_members(x, out, |_, _| false, pool);
        Ok(())
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
        self.check_out(out, self.members() * x.nrows() * self.width())?;
        self.fill_members(x, out, |m, p| counts[(m, p)].as_u64() != 0, pool);
        Ok(())
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
    ) -> Result<()> {
        self.check_points(&x)?;
        let width = self.width();
        self.check_out(out, x.nrows() * width)?;
        let scale = 1.0 / self.members() as f64;
        let n = x.nrows();
        if n == 0 {
            return Ok(());
        }
        let groups = self.tree_groups();
        let span = n.div_ceil(2 * pool.threads()).next_multiple_of(BATCH);
        pool.run(|| {
            out.par_chunks_mut(span * width)
                .enumerate()
                .for_each(|(r, part)| {
                    part.fill(0.0);
                    let mut buffer = Vec::new();
                    let points = part.len() / width;
                    // Groups and members in member order, so every point's sum has one order.
                    for group in &groups {
                        for block in (0..points).step_by(POINT_CHUNK) {
                            let block_end = (block + POINT_CHUNK).min(points);
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
        });
        Ok(())
    }

    fn check_out(&self, out: &[f64], expected: usize) -> Result<()> {
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

/// `dst.copy_from_slice(src)` without a `memcpy` call for the one or two values of most
/// leaves.
#[inline(always)]
fn copy_values(dst: &mut [f64], src: &[f64]) {
    match (dst, src) {
        ([d], [v]) => *d = *v,
        ([d0, d1], [v0, v1]) => (*d0, *d1) = (*v0, *v1),
        (dst, src) => dst.copy_from_slice(src),
    }
}

/// Rows `range` of `x` as contiguous row-major f64 in `buffer`, whatever the strides and
/// dtype of `x`, so a tree walk reads a point's values with one index.
fn block_rows<'b, T: Real>(
    x: &ArrayView2<'_, T>,
    range: Range<usize>,
    buffer: &'b mut Vec<f64>,
) -> &'b [f64] {
    buffer.clear();
    buffer.extend(x.slice(s![range, ..]).iter().map(|v| v.to_f64()));
    buffer
}

/// The per-fit representation of `x`, shared by all members: dense ranks of every value
/// within its feature, the sorted distinct values, and (for histograms) u8 bin codes and
/// bin edges, all column-major.
struct Columns {
    n_rows: usize,
    n_features: usize,
    /// Rows sorted by value, per feature (only when exact splits are searched).
    order: Vec<u32>,
    ranks: Vec<u32>,
    distinct: Vec<Vec<f64>>,
    codes: Vec<u8>,
    edges: Vec<Vec<f64>>,
}

/// Hints the processor to bring `value`'s cache line in; a no-op off x86-64.
#[inline(always)]
fn prefetch(value: &f64) {
    #[cfg(target_arch = "x86_64")]
    {
        use std::arch::x86_64::{_mm_prefetch, _MM_HINT_T0};
        // SAFETY: a prefetch never faults, and SSE is part of the x86-64 baseline.
        unsafe { _mm_prefetch::<_MM_HINT_T0>((value as *const f64).cast::<i8>()) };
    }
    #[cfg(not(target_arch = "x86_64"))]
    let _ = value;
}

/// The threshold between adjacent distinct values `lo < hi`.
#[inline]
fn midpoint(lo: f64, hi: f64) -> f64 {
    let m = lo / 2.0 + hi / 2.0;
    if m < lo || m >= hi {
        lo
    } else {
        m
    }
}

struct FeatureColumn {
    order: Vec<u32>,
    ranks: Vec<u32>,
    distinct: Vec<f64>,
    codes: Vec<u8>,
    edges: Vec<f64>,
}

fn build_column<T: Real>(column: ArrayView1<'_, T>, bins: bool) -> FeatureColumn {
    let n = column.len();
    let mut order: Vec<(f64, u32)> = column
        .iter()
        .enumerate()
        .map(|(i, v)| (v.to_f64(), i as u32))
        .collect();
    order.sort_unstable_by(|a, b| a.0.total_cmp(&b.0).then(a.1.cmp(&b.1)));
    let mut ranks = vec![0u32; n];
    let mut distinct: Vec<f64> = Vec::new();
    let mut multiplicity: Vec<usize> = Vec::new();
    for &(v, i) in &order {
        // -0.0 and 0.0 are one value (== rather than the bit order).
        if distinct.last() != Some(&v) {
            distinct.push(v);
            multiplicity.push(0);
        }
        *multiplicity.last_mut().expect("pushed above") += 1;
        ranks[i as usize] = (distinct.len() - 1) as u32;
    }
    let (mut codes, mut edges) = (Vec::new(), Vec::new());
    if bins {
        let d = distinct.len();
        let mut bin_of_rank = vec![0u8; d];
        if d <= MAX_BINS {
            bin_of_rank
                .iter_mut()
                .enumerate()
                .for_each(|(r, b)| *b = r as u8);
            edges = (0..d.saturating_sub(1))
                .map(|r| midpoint(distinct[r], distinct[r + 1]))
                .collect();
        } else {
            // Quantile cuts: bin b closes at the first distinct value whose cumulative
            // row count reaches (b+1)·n/256; the last bin takes the rest.
            let mut bin = 0usize;
            let mut cumulative = 0usize;
            for r in 0..d {
                bin_of_rank[r] = bin as u8;
                cumulative += multiplicity[r];
                if bin + 1 < MAX_BINS && r + 1 < d && cumulative * MAX_BINS >= (bin + 1) * n {
                    edges.push(midpoint(distinct[r], distinct[r + 1]));
                    bin += 1;
                }
            }
        }
        codes = ranks.iter().map(|&r| bin_of_rank[r as usize]).collect();
    }
    FeatureColumn {
        order: order.into_iter().map(|(_, i)| i).collect(),
        ranks,
        distinct,
        codes,
        edges,
    }
}

impl Columns {
    fn build<T: Real>(x: &ArrayView2<'_, T>, bins: bool, exact: bool, pool: &Pool) -> Columns {
        let (n_rows, n_features) = x.dim();
        let columns: Vec<FeatureColumn> = pool.run(|| {
            (0..n_features)
                .into_par_iter()
                .map(|f| build_column(x.column(f), bins))
                .collect()
        });
        let mut out = Columns {
            n_rows,
            n_features,
            order: Vec::with_capacity(if exact { n_rows * n_features } else { 0 }),
            ranks: Vec::with_capacity(n_rows * n_features),
            distinct: Vec::with_capacity(n_features),
            codes: Vec::with_capacity(if bins { n_rows * n_features } else { 0 }),
            edges: Vec::with_capacity(n_features),
        };
        for c in columns {
            if exact {
                out.order.extend_from_slice(&c.order);
            }
            out.ranks.extend_from_slice(&c.ranks);
            out.codes.extend_from_slice(&c.codes);
            out.distinct.push(c.distinct);
            out.edges.push(c.edges);
        }
        out
    }

    #[inline]
    fn rank(&self, f: usize, row: u32) -> u32 {
        self.ranks[f * self.n_rows + row as usize]
    }

    #[inline]
    fn code(&self, f: usize, row: u32) -> u8 {
        self.codes[f * self.n_rows + row as usize]
    }

    fn n_bins(&self, f: usize) -> usize {
        self.edges[f].len() + 1
    }
}

/// A candidate split: rows with `rank ≤ cut` (exact) or `code ≤ cut` (histogram) go left.
#[derive(Debug, Clone, Copy)]
struct Split {
    score: f64,
    feature: usize,
    by_bins: bool,
    /// Rows with bin code (by_bins) or value rank (exact) ≤ cut go left.
    cut: u32,
    /// Exact splits: the rank of the next distinct in-node value (the threshold lies
    /// between the two).
    next: u32,
}

/// Scores within this relative distance are ties, so that the tie rule does not depend on
/// the rounding of sums accumulated in a different order (e.g. weighted vs repeated rows).
const SCORE_TIE: f64 = 1e-12;

impl Split {
    /// The deterministic order: a clearly higher score wins; scores equal to within
    /// [`SCORE_TIE`] (relative) fall back to the lower feature, then the lower threshold
    /// (within a feature and node, the lower cut).
    fn beats(&self, other: &Option<Split>) -> bool {
        match other {
            None => true,
            Some(o) => {
                let tolerance = SCORE_TIE * self.score.abs().max(o.score.abs());
                if self.score > o.score + tolerance {
                    true
                } else if self.score < o.score - tolerance {
                    false
                } else {
                    self.feature < o.feature || (self.feature == o.feature && self.cut < o.cut)
                }
            }
        }
    }

    /// The split's threshold, looked up only for the winning split of a node: the value
    /// tables are large, and each lookup is likely a cache miss.
    fn threshold(&self, columns: &Columns) -> f64 {
        let f = self.feature;
        if self.by_bins {
            columns.edges[f][self.cut as usize]
        } else {
            let d = &columns.distinct[f];
            midpoint(d[self.cut as usize], d[self.next as usize])
        }
    }
}

/// Node statistics are `S = 1 + width'` floats: `[W, S]` for regression, `[W, W_0, …]`
/// for classification.
struct Grower<'a> {
    columns: &'a Columns,
    config: &'a TreeParams,
    regression: bool,
    stat_width: usize,
    min_leaf: f64,
    // Per in-bag row ("slot"): its row in x, weight and target; never permuted.
    slot_row: Vec<u32>,
    weight: Vec<f64>,
    target: Vec<f64>,
    /// The slots of each node's range `start..end`, in no particular order.
    order: Vec<u32>,
    /// Per feature, `rank << 32 | slot` sorted by rank within each node's range (kept
    /// sorted by stable partitions, so exact scans never sort); empty for histograms only.
    sorted: Vec<u64>,
    // Scratch, reused by every node.
    keys: Vec<u64>,
    goes_left: Vec<bool>,
    buffer: Vec<u64>,
    left: Vec<f64>,
    one_feature: Vec<f64>,
    features: Vec<usize>,
    spare_histograms: Vec<Vec<f64>>,
    draws: Draws,
    // Output.
    tree: Tree,
}

struct Pending {
    node: usize,
    start: usize,
    end: usize,
    depth: usize,
    stats: Vec<f64>,
    histogram: Option<Vec<f64>>,
}

impl<'a> Grower<'a> {
    /// Adds slot `p` to `stats`.
    #[inline(always)]
    fn add(&self, stats: &mut [f64], p: usize) {
        let w = self.weight[p];
        stats[0] += w;
        if self.regression {
            stats[1] += w * self.target[p];
        } else {
            stats[1 + self.target[p] as usize] += w;
        }
    }

    /// The proxy of the side with statistics `s`, or of `total − s` when `minus` is given.
    #[inline]
    fn proxy(&self, s: &[f64], minus: Option<&[f64]>) -> f64 {
        let get = |k: usize| minus.map_or(s[k], |m| s[k] - m[k]);
        let w = get(0);
        if w <= 0.0 {
            return 0.0;
        }
        match self.config.criterion {
            Criterion::SquaredError => {
                let t = get(1);
                t * t / w
            }
            Criterion::Gini => (1..self.stat_width).map(|k| get(k) * get(k)).sum::<f64>() / w,
            Criterion::Entropy => (1..self.stat_width)
                .map(|k| {
                    let c = get(k);
                    if c > 0.0 {
                        c * (c / w).ln()
                    } else {
                        0.0
                    }
                })
                .sum(),
        }
    }

    fn stats_of(&self, start: usize, end: usize) -> Vec<f64> {
        let mut s = vec![0.0; self.stat_width];
        (start..end).for_each(|p| self.add(&mut s, self.order[p] as usize));
        s
    }

    fn is_pure(&self, start: usize, end: usize, stats: &[f64]) -> bool {
        if self.regression {
            let mean = stats[1] / stats[0];
            let ss: f64 = self.order[start..end]
                .iter()
                .map(|&p| {
                    let p = p as usize;
                    let d = self.target[p] - mean;
                    self.weight[p] * d * d
                })
                .sum();
            ss / stats[0] <= f64::EPSILON
        } else {
            stats[1..].iter().any(|&c| c == stats[0])
        }
    }

    fn use_bins(&self, rows: usize) -> bool {
        match self.config.splitter {
            Splitter::Exact => false,
            Splitter::Histogram => true,
            Splitter::Auto => rows > AUTO_HISTOGRAM_ABOVE,
        }
    }

    /// Whether a binned node is large enough for dense 256-bin histograms; smaller ones
    /// sort their bin codes instead (same candidates, same thresholds).
    fn dense_bins(&self, rows: usize) -> bool {
        self.use_bins(rows) && rows > SPARSE_BINS_UP_TO
    }

    /// Best split of feature `f` over the bin codes of positions `start..end`, found by
    /// sorting the codes: the same candidates as [`scan_histogram`](Self::scan_histogram).
    fn scan_codes(&mut self, f: usize, start: usize, end: usize, total: &[f64]) -> Option<Split> {
        let mut keys = std::mem::take(&mut self.keys);
        let mut left = std::mem::take(&mut self.left);
        keys.clear();
        keys.extend(self.order[start..end].iter().map(|&slot| {
            let code = self.columns.code(f, self.slot_row[slot as usize]);
            (u64::from(code) << 32) | u64::from(slot)
        }));
        keys.sort_unstable();
        left.iter_mut().for_each(|v| *v = 0.0);
        let mut best: Option<(f64, u32)> = None;
        for i in 0..keys.len().saturating_sub(1) {
            self.add(&mut left, (keys[i] & 0xFFFF_FFFF) as usize);
            let (code, next) = ((keys[i] >> 32) as u32, (keys[i + 1] >> 32) as u32);
            let (wl, wr) = (left[0], total[0] - left[0]);
            if code == next || wl < self.min_leaf || wr < self.min_leaf {
                continue;
            }
            let score = self.proxy(&left, None) + self.proxy(total, Some(&left));
            if best.is_none_or(|(b, _)| score > b + SCORE_TIE * score.abs().max(b.abs())) {
                best = Some((score, code));
            }
        }
        self.keys = keys;
        self.left = left;
        best.map(|(score, code)| Split {
            score,
            feature: f,
            by_bins: true,
            cut: code,
            next: code,
        })
    }

    fn histogram_buffer(&mut self) -> Vec<f64> {
        let len = self.columns.n_features * MAX_BINS * self.stat_width;
        let mut h = self.spare_histograms.pop().unwrap_or_default();
        h.clear();
        h.resize(len, 0.0);
        h
    }

    /// Accumulates feature `f`'s histogram of positions `start..end` into `h`
    /// (`MAX_BINS · stat_width` floats, zero on entry).
    fn fill_histogram(&self, f: usize, start: usize, end: usize, h: &mut [f64]) {
        let s = self.stat_width;
        let codes = &self.columns.codes[f * self.columns.n_rows..(f + 1) * self.columns.n_rows];
        for &slot in &self.order[start..end] {
            let p = slot as usize;
            let o = codes[self.slot_row[p] as usize] as usize * s;
            let w = self.weight[p];
            h[o] += w;
            if self.regression {
                h[o + 1] += w * self.target[p];
            } else {
                h[o + 1 + self.target[p] as usize] += w;
            }
        }
    }

    fn full_histogram(&mut self, start: usize, end: usize) -> Vec<f64> {
        let mut h = self.histogram_buffer();
        let block = MAX_BINS * self.stat_width;
        for (f, hf) in h.chunks_mut(block).enumerate() {
            self.fill_histogram(f, start, end, hf);
        }
        h
    }

    /// Best split of feature `f` from its histogram `h`.
    fn scan_histogram(&mut self, f: usize, h: &[f64], total: &[f64]) -> Option<Split> {
        let s = self.stat_width;
        let mut left = std::mem::take(&mut self.left);
        left.iter_mut().for_each(|v| *v = 0.0);
        let mut best: Option<Split> = None;
        let bins = self.columns.n_bins(f);
        for b in 0..bins.saturating_sub(1) {
            let bin = &h[b * s..(b + 1) * s];
            left.iter_mut().zip(bin).for_each(|(l, v)| *l += v);
            if bin[0] <= 0.0 {
                continue;
            }
            let (wl, wr) = (left[0], total[0] - left[0]);
            if wl < self.min_leaf || wr < self.min_leaf {
                continue;
            }
            let score = self.proxy(&left, None) + self.proxy(total, Some(&left));
            let candidate = Split {
                score,
                feature: f,
                by_bins: true,
                cut: b as u32,
                next: b as u32,
            };
            if candidate.beats(&best) {
                best = Some(candidate);
            }
        }
        self.left = left;
        best
    }

    /// Best exact split of feature `f` over positions `start..end`.
    fn scan_exact(&mut self, f: usize, start: usize, end: usize, total: &[f64]) -> Option<Split> {
        let n_in = self.slot_row.len();
        let keys = &self.sorted[f * n_in + start..f * n_in + end];
        // (score, rank, next rank) of the best boundary so far; the threshold is looked up
        // only for the node's winning split. Later boundaries have higher thresholds, so
        // within a feature only a clearly higher score replaces the best (the tie rule of
        // `Split::beats`).
        let mut best: Option<(f64, u32, u32)> = None;
        let clearly_better = |score: f64, best: &Option<(f64, u32, u32)>| {
            best.is_none_or(|(b, _, _)| score > b + SCORE_TIE * score.abs().max(b.abs()))
        };
        // Scores here are a/wl + c/wr with every term ≥ 0, so a boundary can beat the best b
        // only if a·wr + c·wl > b·wl·wr; the products are exact to a few ulps, so testing
        // that with a 1e-9 margin first skips both divisions for nearly every row without
        // changing which boundary wins.
        let may_beat = |a: f64, c: f64, wl: f64, wr: f64, best: &Option<(f64, u32, u32)>| {
            best.is_none_or(|(b, _, _)| {
                a < 0.0 || c < 0.0 || a * wr + c * wl > b * (wl * wr) * (1.0 - 1e-9)
            })
        };
        if self.regression {
            let (w_total, s_total) = (total[0], total[1]);
            let (mut wl, mut sl) = (0.0, 0.0);
            for i in 0..keys.len().saturating_sub(1) {
                let slot = (keys[i] & 0xFFFF_FFFF) as usize;
                let w = self.weight[slot];
                wl += w;
                sl += w * self.target[slot];
                let (rank, next) = ((keys[i] >> 32) as u32, (keys[i + 1] >> 32) as u32);
                let wr = w_total - wl;
                if rank == next || wl < self.min_leaf || wr < self.min_leaf {
                    continue;
                }
                let sr = s_total - sl;
                let (a, c) = (sl * sl, sr * sr);
                if !may_beat(a, c, wl, wr, &best) {
                    continue;
                }
                let score = a / wl + c / wr;
                if clearly_better(score, &best) {
                    best = Some((score, rank, next));
                }
            }
        } else if self.config.criterion == Criterion::Gini {
            // Σ_k W_Lk² and Σ_k W_Rk² updated in O(1) per row: adding weight w to class k
            // changes them by 2·w·W_Lk + w² and −2·w·W_Rk + w² (exact for integer weights).
            let mut left = std::mem::take(&mut self.left);
            left.iter_mut().for_each(|v| *v = 0.0);
            let w_total = total[0];
            let mut squares_left = 0.0;
            let mut squares_right: f64 = total[1..].iter().map(|c| c * c).sum();
            for i in 0..keys.len().saturating_sub(1) {
                let slot = (keys[i] & 0xFFFF_FFFF) as usize;
                let w = self.weight[slot];
                let k = 1 + self.target[slot] as usize;
                let right_k = total[k] - left[k];
                squares_left += w * (2.0 * left[k] + w);
                squares_right += w * (w - 2.0 * right_k);
                left[k] += w;
                left[0] += w;
                let (rank, next) = ((keys[i] >> 32) as u32, (keys[i + 1] >> 32) as u32);
                let (wl, wr) = (left[0], w_total - left[0]);
                if rank == next || wl < self.min_leaf || wr < self.min_leaf {
                    continue;
                }
                if !may_beat(squares_left, squares_right, wl, wr, &best) {
                    continue;
                }
                let score = squares_left / wl + squares_right / wr;
                if clearly_better(score, &best) {
                    best = Some((score, rank, next));
                }
            }
            self.left = left;
        } else {
            let mut left = std::mem::take(&mut self.left);
            left.iter_mut().for_each(|v| *v = 0.0);
            for i in 0..keys.len().saturating_sub(1) {
                self.add(&mut left, (keys[i] & 0xFFFF_FFFF) as usize);
                let (rank, next) = ((keys[i] >> 32) as u32, (keys[i + 1] >> 32) as u32);
                let (wl, wr) = (left[0], total[0] - left[0]);
                if rank == next || wl < self.min_leaf || wr < self.min_leaf {
                    continue;
                }
                let score = self.proxy(&left, None) + self.proxy(total, Some(&left));
                if clearly_better(score, &best) {
                    best = Some((score, rank, next));
                }
            }
            self.left = left;
        }
        best.map(|(score, rank, next)| {
            // The threshold of this feature's best is read if it wins the node: start
            // fetching the two values now, without waiting for them.
            let d = &self.columns.distinct[f];
            prefetch(&d[rank as usize]);
            prefetch(&d[next as usize]);
            Split {
                score,
                feature: f,
                by_bins: false,
                cut: rank,
                next,
            }
        })
    }

    /// Best split of a node; `histogram` is the node's full histogram when one is kept.
    fn best_split(
        &mut self,
        start: usize,
        end: usize,
        stats: &[f64],
        histogram: Option<&[f64]>,
    ) -> Option<Split> {
        let n_features = self.columns.n_features;
        let bins = self.use_bins(end - start);
        let dense = self.dense_bins(end - start);
        let block = MAX_BINS * self.stat_width;
        let mut best: Option<Split> = None;
        let mut try_feature = |g: &mut Self, f: usize| -> bool {
            let found = if bins && !dense {
                g.scan_codes(f, start, end, stats)
            } else if bins {
                match histogram {
                    Some(h) => g.scan_histogram(f, &h[f * block..(f + 1) * block], stats),
                    None => {
                        let mut one = std::mem::take(&mut g.one_feature);
                        one.clear();
                        one.resize(block, 0.0);
                        g.fill_histogram(f, start, end, &mut one);
                        let found = g.scan_histogram(f, &one, stats);
                        g.one_feature = one;
                        found
                    }
                }
            } else {
                g.scan_exact(f, start, end, stats)
            };
            match found {
                Some(s) => {
                    if s.beats(&best) {
                        best = Some(s);
                    }
                    true
                }
                None => false,
            }
        };
        match self.config.split_features {
            None => {
                for f in 0..n_features {
                    try_feature(self, f);
                }
            }
            Some(k) => {
                // Partial Fisher–Yates over the feature list: features in a random order
                // until k of them offered a valid split.
                let mut useful = 0;
                for i in 0..n_features {
                    let j = i + self.draws.below(n_features - i);
                    self.features.swap(i, j);
                    let f = self.features[i];
                    if try_feature(self, f) {
                        useful += 1;
                        if useful == k {
                            break;
                        }
                    }
                }
            }
        }
        best
    }

    /// Moves the positions of `start..end` that go left to the front; returns the split
    /// position.
    fn partition(&mut self, start: usize, end: usize, split: &Split) -> usize {
        let columns = self.columns;
        let n_in = self.slot_row.len();
        if !split.by_bins && !self.sorted.is_empty() {
            // The split feature's sorted list: its first entries (rank ≤ cut) go left.
            let f = split.feature;
            for &key in &self.sorted[f * n_in + start..f * n_in + end] {
                self.goes_left[(key & 0xFFFF_FFFF) as usize] = (key >> 32) as u32 <= split.cut;
            }
        } else {
            for &slot in &self.order[start..end] {
                let row = self.slot_row[slot as usize];
                self.goes_left[slot as usize] = if split.by_bins {
                    u32::from(columns.code(split.feature, row)) <= split.cut
                } else {
                    columns.rank(split.feature, row) <= split.cut
                };
            }
        }
        let (mut i, mut j) = (start, end);
        while i < j {
            if self.goes_left[self.order[i] as usize] {
                i += 1;
            } else {
                j -= 1;
                self.order.swap(i, j);
            }
        }
        // Stable, branch-free partitions keep every feature's list sorted in both children.
        if !self.sorted.is_empty() {
            let goes_left = &self.goes_left;
            let buffer = &mut self.buffer;
            buffer.resize(end - start, 0);
            for f in 0..columns.n_features {
                let list = &mut self.sorted[f * n_in + start..f * n_in + end];
                let (mut k, mut r) = (0usize, 0usize);
                for q in 0..list.len() {
                    let key = list[q];
                    let left = usize::from(goes_left[(key & 0xFFFF_FFFF) as usize]);
                    list[k] = key;
                    buffer[r] = key;
                    k += left;
                    r += 1 - left;
                }
                list[k..].copy_from_slice(&buffer[..r]);
            }
        }
        i
    }

    fn make_leaf(&mut self, node: usize, stats: &[f64]) {
        let width = self.config.task.width();
        self.tree.nodes[node] = Node {
            threshold: 0.0,
            feature: LEAF,
            child: (self.tree.values.len() / width) as u32,
        };
        if self.regression {
            self.tree.values.push(stats[1] / stats[0]);
        } else {
            let values = stats[1..].iter().map(|c| c / stats[0]);
            self.tree.values.extend(values);
        }
    }

    /// Grows the tree; `None` if `stop` was raised meanwhile (checked at every node).
    fn grow(mut self, stop: &AtomicBool) -> Option<Tree> {
        let n = self.slot_row.len();
        let root_stats = self.stats_of(0, n);
        self.tree.nodes.push(Node::PLACEHOLDER);
        let all_features = self.config.split_features.is_none();
        let root_histogram =
            (all_features && self.dense_bins(n)).then(|| self.full_histogram(0, n));
        let mut stack = vec![Pending {
            node: 0,
            start: 0,
            end: n,
            depth: 0,
            stats: root_stats,
            histogram: root_histogram,
        }];
        while let Some(job) = stack.pop() {
            if stop.load(Ordering::Relaxed) {
                return None;
            }
            let Pending {
                node,
                start,
                end,
                depth,
                stats,
                histogram,
            } = job;
            let stop = self.config.max_depth.is_some_and(|d| depth >= d)
                || stats[0] < 2.0 * self.min_leaf
                || end - start < 2
                || self.is_pure(start, end, &stats);
            let split = if stop {
                None
            } else {
                self.best_split(start, end, &stats, histogram.as_deref())
            };
            let Some(split) = split else {
                self.make_leaf(node, &stats);
                if let Some(h) = histogram {
                    self.spare_histograms.push(h);
                }
                continue;
            };
            let mid = self.partition(start, end, &split);
            let left_stats = self.stats_of(start, mid);
            let right_stats = self.stats_of(mid, end);
            let c = self.tree.nodes.len();
            self.tree.nodes[node] = Node {
                threshold: split.threshold(self.columns),
                feature: split.feature as u32,
                child: c as u32,
            };
            self.tree.nodes.extend([Node::PLACEHOLDER; 2]);
            // Sibling subtraction: the smaller child's histogram is built, the larger
            // one's is the parent's minus it.
            let (mut left_h, mut right_h) = (None, None);
            if let Some(mut parent) = histogram {
                let left_smaller = mid - start <= end - mid;
                let (small, large) = if left_smaller {
                    ((start, mid), (mid, end))
                } else {
                    ((mid, end), (start, mid))
                };
                if self.dense_bins(large.1 - large.0) {
                    let small_h = self.full_histogram(small.0, small.1);
                    parent.iter_mut().zip(&small_h).for_each(|(p, s)| *p -= s);
                    let small_h = if self.dense_bins(small.1 - small.0) {
                        Some(small_h)
                    } else {
                        self.spare_histograms.push(small_h);
                        None
                    };
                    if left_smaller {
                        (left_h, right_h) = (small_h, Some(parent));
                    } else {
                        (left_h, right_h) = (Some(parent), small_h);
                    }
                } else {
                    self.spare_histograms.push(parent);
                }
            }
            stack.push(Pending {
                node: c + 1,
                start: mid,
                end,
                depth: depth + 1,
                stats: right_stats,
                histogram: right_h,
            });
            stack.push(Pending {
                node: c,
                start,
                end: mid,
                depth: depth + 1,
                stats: left_stats,
                histogram: left_h,
            });
        }
        Some(self.tree)
    }
}

/// How often the calling thread reports progress (and so checks for Ctrl-C) during a fit.
const HEARTBEAT: Duration = Duration::from_millis(100);

impl TreeConfig {
    /// The checked parameters.
    pub fn params(&self) -> &TreeParams {
        &self.params
    }

    /// Grows one tree per member on `x` (rows × features, any strides, f32 or f64) with the
    /// in-bag counts as row weights. Members are fit in parallel; from the calling thread,
    /// `monitor` hears the number of finished members about every 100 ms (the same number
    /// may repeat while long members grow) and once more at the end; an error from it stops
    /// every grower within a few nodes.
    ///
    /// # Errors
    /// `x` empty, with non-finite values or more than 2^32 − 1 rows; `y` of the wrong length,
    /// non-finite, or with class codes ≥ `n_classes`, or not matching the task; `counts` of
    /// the wrong shape or with a member that has no in-bag row; `members` zero;
    /// `split_features` above the number of features; [`Error::Interrupted`].
    pub fn fit<T: Real, C: Count>(
        &self,
        x: ArrayView2<'_, T>,
        y: Targets<'_>,
        in_bag: InBag<'_, C>,
        pool: &Pool,
        monitor: &dyn Monitor,
    ) -> Result<TreeEnsemble> {
        let p = &self.params;
        let (n_rows, n_features) = x.dim();
        if n_rows == 0 || n_features == 0 {
            return Err(Error::value("x", format!("is empty (shape {:?})", x.dim())));
        }
        if n_rows >= u32::MAX as usize {
            return Err(Error::value("x", "has 2^32 - 1 rows or more"));
        }
        if x.iter().any(|v| !v.to_f64().is_finite()) {
            return Err(Error::value("x", "contains NaN or infinite values"));
        }
        if let Some(k) = p.split_features {
            if k > n_features {
                return Err(Error::value(
                    "split_features",
                    format!("is {k} but x has only {n_features} features"),
                ));
            }
        }
        let target: Vec<f64> = match (p.task, y) {
            (Task::Regression, Targets::Regression(v)) => {
                if v.iter().any(|t| !t.is_finite()) {
                    return Err(Error::value("y", "contains NaN or infinite values"));
                }
                v.to_vec()
            }
            (Task::Classification { n_classes }, Targets::Classes(v)) => {
                if let Some(bad) = v.iter().find(|&&c| c >= n_classes) {
                    return Err(Error::value(
                        "y",
                        format!("class code {bad} is not below n_classes = {n_classes}"),
                    ));
                }
                v.iter().map(|&c| c as f64).collect()
            }
            _ => return Err(Error::value("y", "does not match the task")),
        };
        if target.len() != n_rows {
            return Err(Error::value(
                "y",
                format!("has {} values but x has {n_rows} rows", target.len()),
            ));
        }
        let members = match in_bag {
            InBag::AllRows { members } => members,
            InBag::Counts(c) => c.nrows(),
        };
        if members == 0 {
            return Err(Error::value("members", "must be at least 1"));
        }
        if let InBag::Counts(c) = in_bag {
            if c.ncols() != n_rows {
                return Err(Error::value(
                    "counts",
                    format!("has {} columns but x has {n_rows} rows", c.ncols()),
                ));
            }
            if let Some(m) = c
                .outer_iter()
                .position(|row| row.iter().all(|v| v.as_u64() == 0))
            {
                return Err(Error::value(
                    "counts",
                    format!("member {m} has no in-bag row (all counts zero)"),
                ));
            }
        }
        let bins = p.splitter != Splitter::Exact;
        let columns = Columns::build(&x, bins, p.splitter != Splitter::Histogram, pool);
        let draws = MemberStreams::new(feature_stream_seed(p.seed)).take(members);
        // The members grow on the pool in a worker thread while the calling thread reports
        // the number finished every HEARTBEAT; an error from the monitor (Ctrl-C, a
        // raising callback) raises `stop`, which every grower checks between nodes.
        let stop = AtomicBool::new(false);
        let finished = AtomicUsize::new(0);
        let (grown, outcome) = std::thread::scope(|scope| {
            let worker = scope.spawn(|| {
                pool.run(|| {
                    draws
                        .into_par_iter()
                        .enumerate()
                        .map(|(m, d)| {
                            let tree = self.grow_member(&columns, &target, in_bag, m, d, &stop);
                            finished.fetch_add(1, Ordering::Relaxed);
                            tree
                        })
                        .collect::<Vec<Option<Tree>>>()
                })
            });
            let mut outcome = Ok(());
            let mut last = Instant::now();
            while !worker.is_finished() {
                std::thread::sleep(Duration::from_millis(5));
                if outcome.is_ok() && last.elapsed() >= HEARTBEAT {
                    last = Instant::now();
                    let done = finished.load(Ordering::Relaxed);
                    if let Err(e) = monitor.progress(done, members) {
                        stop.store(true, Ordering::Relaxed);
                        outcome = Err(e);
                    }
                }
            }
            let grown = worker
                .join()
                .unwrap_or_else(|panic| std::panic::resume_unwind(panic));
            (grown, outcome)
        });
        outcome?;
        let trees: Vec<Tree> = grown
            .into_iter()
            .collect::<Option<_>>()
            .ok_or(Error::Interrupted)?;
        monitor.progress(members, members)?;
        Ok(TreeEnsemble {
            task: p.task,
            n_features,
            trees,
        })
    }

    fn grow_member<C: Count>(
        &self,
        columns: &Columns,
        target: &[f64],
        in_bag: InBag<'_, C>,
        member: usize,
        draws: Draws,
        stop: &AtomicBool,
    ) -> Option<Tree> {
        if stop.load(Ordering::Relaxed) {
            return None;
        }
        let p = &self.params;
        let (mut rows, mut weight) = (Vec::new(), Vec::new());
        match in_bag {
            InBag::AllRows { .. } => {
                rows.extend(0..columns.n_rows as u32);
                weight.resize(columns.n_rows, 1.0);
            }
            InBag::Counts(c) => {
                for (i, v) in c.row(member).iter().enumerate() {
                    let v = v.as_u64();
                    if v > 0 {
                        rows.push(i as u32);
                        weight.push(v as f64);
                    }
                }
            }
        }
        let target_pos = rows.iter().map(|&r| target[r as usize]).collect();
        let n_in = rows.len();
        let mut sorted = Vec::new();
        if !columns.order.is_empty() {
            // Each feature's global value order restricted to the in-bag rows: sorted
            // lists in O(features · rows), no sort per member.
            let mut slot_of_row = vec![u32::MAX; columns.n_rows];
            rows.iter()
                .enumerate()
                .for_each(|(slot, &r)| slot_of_row[r as usize] = slot as u32);
            sorted.reserve_exact(n_in * columns.n_features);
            for f in 0..columns.n_features {
                let order = &columns.order[f * columns.n_rows..(f + 1) * columns.n_rows];
                sorted.extend(order.iter().filter_map(|&r| {
                    let slot = slot_of_row[r as usize];
                    (slot != u32::MAX)
                        .then(|| (u64::from(columns.rank(f, r)) << 32) | u64::from(slot))
                }));
            }
        }
        let stat_width = match p.task {
            Task::Regression => 2,
            Task::Classification { n_classes } => 1 + n_classes,
        };
        let grower = Grower {
            columns,
            config: p,
            regression: p.task == Task::Regression,
            stat_width,
            min_leaf: p.min_leaf as f64,
            order: (0..n_in as u32).collect(),
            slot_row: rows,
            weight,
            target: target_pos,
            sorted,
            keys: Vec::new(),
            goes_left: vec![false; n_in],
            buffer: Vec::new(),
            left: vec![0.0; stat_width],
            one_feature: Vec::new(),
            features: (0..columns.n_features).collect(),
            spare_histograms: Vec::new(),
            draws,
            tree: Tree {
                nodes: Vec::new(),
                values: Vec::new(),
            },
        };
        grower.grow(stop)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::parallel::{Silent, Threads};
    use ndarray::{Array1, Array2};

    fn params(task: Task, splitter: Splitter) -> TreeParams {
        TreeParams {
            task,
            max_depth: None,
            min_leaf: 1,
            split_features: None,
            criterion: match task {
                Task::Regression => Criterion::SquaredError,
                Task::Classification { .. } => Criterion::Gini,
            },
            splitter,
            seed: 1,
        }
    }

    /// Rows × features of uniforms; `levels > 0` rounds them to that many distinct values.
    fn data(n: usize, f: usize, seed: u64, levels: usize) -> Array2<f64> {
        let mut d = Draws::from_seed(seed);
        Array2::from_shape_fn((n, f), |_| {
            let u = d.open_unit();
            if levels > 0 {
                (u * levels as f64).floor()
            } else {
                u
            }
        })
    }

    fn signal(x: &Array2<f64>, seed: u64) -> Array1<f64> {
        let mut d = Draws::from_seed(seed);
        x.outer_iter()
            .map(|r| (3.0 * r[0]).sin() + r[1] * r[1] + 0.3 * d.open_unit())
            .collect()
    }

    fn pool(threads: usize) -> Pool {
        Threads::Fixed(threads).pool().unwrap()
    }

    fn fit_reg(
        p: TreeParams,
        x: &Array2<f64>,
        y: &Array1<f64>,
        counts: &Array2<u8>,
    ) -> TreeEnsemble {
        p.check()
            .unwrap()
            .fit(
                x.view(),
                Targets::Regression(y.view()),
                InBag::Counts(counts.view()),
                &pool(2),
                &Silent,
            )
            .unwrap()
    }

    fn members(e: &TreeEnsemble, x: &Array2<f64>) -> Vec<f64> {
        let mut out = vec![0.0; e.members() * x.nrows() * e.width()];
        e.member_predictions_into(x.view(), &mut out, &pool(2))
            .unwrap();
        out
    }

    /// The leaf values of one point by the plain walk from the root.
    fn reference_walk<'t>(tree: &'t Tree, point: &[f64], width: usize) -> &'t [f64] {
        let mut at = 0;
        loop {
            let node = tree.nodes[at];
            if node.feature == LEAF {
                return tree.leaf_values(node.child, width);
            }
            let right = point[node.feature as usize] > node.threshold;
            at = node.child as usize + usize::from(right);
        }
    }

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
                    e.member_predictions_into(points.view(), &mut out, &pool(threads))
                        .unwrap();
                    assert_eq!(out, expected, "{n_points} points, {threads} threads");
                    out.fill(0.0);
                    e.member_predictions_into(fortran.view(), &mut out, &pool(threads))
                        .unwrap();
                    assert_eq!(out, expected, "column-major x");
                    out.fill(0.0);
                    e.member_predictions_into(narrow.view(), &mut out, &pool(threads))
                        .unwrap();
                    assert_eq!(out, narrow_expected, "f32 x");
                    // The mean adds members in member order for every point.
                    let mut mean = vec![0.0; n_points];
                    e.predict_into(points.view(), &mut mean, &pool(threads))
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
    fn a_stump_splits_at_the_midpoint() {
        // Hand-computed: y steps from 1 to 5 between x = 2 and x = 3, so the best depth-1
        // split is at (2 + 3)/2 with leaf means 1 and 5.
        let x = Array2::from_shape_vec((4, 1), vec![1.0, 2.0, 3.0, 4.0]).unwrap();
        let y = Array1::from(vec![1.0, 1.0, 5.0, 5.0]);
        for splitter in [Splitter::Exact, Splitter::Histogram] {
            let mut p = params(Task::Regression, splitter);
            p.max_depth = Some(1);
            let e = fit_reg(p, &x, &y, &Array2::ones((1, 4)));
            assert_eq!(e.trees()[0].nodes[0].threshold, 2.5);
            assert_eq!(e.trees()[0].node_count(), 3);
            let probe = Array2::from_shape_vec((3, 1), vec![2.5, 2.6, -9.0]).unwrap();
            assert_eq!(members(&e, &probe), vec![1.0, 5.0, 1.0]);
        }
    }

    #[test]
    fn weighted_classes_give_weighted_fractions() {
        // One row drawn 3 times and one drawn once in a leaf: fractions 3/4 and 1/4.
        let x = Array2::from_shape_vec((3, 1), vec![0.0, 0.0, 1.0]).unwrap();
        let y = Array1::from(vec![0usize, 1, 1]);
        let counts = Array2::from_shape_vec((1, 3), vec![3u8, 1, 2]).unwrap();
        let mut p = params(Task::Classification { n_classes: 2 }, Splitter::Exact);
        p.min_leaf = 1;
        let e = p
            .check()
            .unwrap()
            .fit(
                x.view(),
                Targets::Classes(y.view()),
                InBag::Counts(counts.view()),
                &pool(1),
                &Silent,
            )
            .unwrap();
        let probe = Array2::from_shape_vec((2, 1), vec![0.0, 1.0]).unwrap();
        assert_eq!(members(&e, &probe), vec![0.75, 0.25, 0.0, 1.0]);
    }

    /// The tree grown with counts as weights equals the tree grown on the materialised
    /// resampled rows (every row repeated `count` times, weight 1).
    fn check_materialised(task: Task, splitter: Splitter, levels: usize) {
        let x = data(600, 4, 3, levels);
        let y = signal(&x, 4);
        let mut d = Draws::from_seed(9);
        let mut counts = Array2::<u8>::zeros((1, 600));
        d.for_each_below(600, 600, |i| counts[(0, i)] += 1);
        let picked: Vec<usize> = (0..600)
            .flat_map(|i| std::iter::repeat_n(i, counts[(0, i)] as usize))
            .collect();
        let xr = x.select(ndarray::Axis(0), &picked);
        let mut p = params(task, splitter);
        p.min_leaf = 3;
        let config = p.check().unwrap();
        let fit = |x: &Array2<f64>, y: &Array1<f64>, c: &Array2<u8>| {
            let classes: Array1<usize> = y.mapv(|v| (v * 2.0).max(0.0) as usize % 3);
            let t = match task {
                Task::Regression => Targets::Regression(y.view()),
                Task::Classification { .. } => Targets::Classes(classes.view()),
            };
            let e = config
                .fit(x.view(), t, InBag::Counts(c.view()), &pool(2), &Silent)
                .unwrap();
            members(&e, &data(500, 4, 77, levels.max(1) * 3))
        };
        let weighted = fit(&x, &y, &counts);
        let yr = y.select(ndarray::Axis(0), &picked);
        let materialised = fit(&xr, &yr, &Array2::ones((1, picked.len())));
        for (a, b) in weighted.iter().zip(&materialised) {
            assert!((a - b).abs() <= 1e-9 * (1.0 + b.abs()), "{a} vs {b}");
        }
    }

    #[test]
    fn counts_as_weights_equal_materialised_rows() {
        // Exact: continuous features. Histogram: 40 distinct values per feature, every one
        // of them drawn, so both fits cut the same bins (one per value).
        let classes = Task::Classification { n_classes: 3 };
        check_materialised(Task::Regression, Splitter::Exact, 0);
        check_materialised(classes, Splitter::Exact, 0);
        check_materialised(Task::Regression, Splitter::Histogram, 40);
        check_materialised(classes, Splitter::Histogram, 40);
    }

    #[test]
    fn results_do_not_depend_on_threads_and_members_are_prefix_stable() {
        let x = data(3000, 5, 5, 0);
        let y = signal(&x, 6);
        let mut counts = Array2::<u8>::zeros((6, 3000));
        let mut d = Draws::from_seed(2);
        for m in 0..6 {
            d.for_each_below(3000, 3000, |i| counts[(m, i)] += 1);
        }
        for splitter in [Splitter::Auto, Splitter::Exact, Splitter::Histogram] {
            let mut p = params(Task::Regression, splitter);
            p.split_features = Some(2);
            let config = p.check().unwrap();
            let fit = |c: ndarray::ArrayView2<'_, u8>, threads: usize| {
                config
                    .fit(
                        x.view(),
                        Targets::Regression(y.view()),
                        InBag::Counts(c),
                        &pool(threads),
                        &Silent,
                    )
                    .unwrap()
            };
            let one = fit(counts.view(), 1);
            let two = fit(counts.view(), 2);
            assert_eq!(one, two);
            let first = fit(counts.slice(ndarray::s![..2, ..]), 2);
            assert_eq!(first.trees(), &one.trees()[..2]);
            assert_ne!(one.trees()[0], one.trees()[1]);
        }
    }

    #[test]
    fn f32_input_fits_the_same_trees_as_f64() {
        let x = data(500, 3, 8, 0).mapv(|v| v as f32);
        let x64 = x.mapv(f64::from);
        let y = signal(&x64, 1);
        let config = params(Task::Regression, Splitter::Auto).check().unwrap();
        let ones: InBag<'_, u8> = InBag::AllRows { members: 1 };
        let a = config
            .fit(
                x.view(),
                Targets::Regression(y.view()),
                ones,
                &pool(1),
                &Silent,
            )
            .unwrap();
        let b = config
            .fit(
                x64.view(),
                Targets::Regression(y.view()),
                ones,
                &pool(1),
                &Silent,
            )
            .unwrap();
        assert_eq!(a, b);
        // Fully grown on distinct rows: the training targets are reproduced.
        let mut out = vec![0.0; 500];
        a.predict_into(x.view(), &mut out, &pool(1)).unwrap();
        assert!(out.iter().zip(&y).all(|(p, t)| (p - t).abs() < 1e-12));
    }

    #[test]
    fn quantile_bins_hold_about_equal_row_counts() {
        let x = data(25_600, 1, 4, 0);
        let c = build_column(x.column(0), true);
        assert_eq!(c.edges.len(), MAX_BINS - 1);
        let mut per_bin = [0usize; MAX_BINS];
        c.codes.iter().for_each(|&b| per_bin[b as usize] += 1);
        // 100 rows per bin when every value is distinct (common practice: quantile bins).
        assert!(per_bin.iter().all(|&k| k == 100), "{per_bin:?}");
        assert!(c.edges.windows(2).all(|w| w[0] < w[1]));
    }

    #[test]
    fn bad_input_names_the_argument() {
        let x = data(20, 2, 1, 0);
        let y = signal(&x, 1);
        let arg = |e: Error| match e {
            Error::InvalidValue { argument, .. } => argument,
            other => panic!("{other:?}"),
        };
        let base = params(Task::Regression, Splitter::Exact);
        let mut p = base.clone();
        p.min_leaf = 0;
        assert_eq!(arg(p.check().unwrap_err()), "min_leaf");
        let mut p = base.clone();
        p.max_depth = Some(0);
        assert_eq!(arg(p.check().unwrap_err()), "max_depth");
        let mut p = base.clone();
        p.criterion = Criterion::Gini;
        assert_eq!(arg(p.check().unwrap_err()), "criterion");
        let mut p = base.clone();
        p.split_features = Some(3);
        let config = p.check().unwrap();
        let all: InBag<'_, u8> = InBag::AllRows { members: 1 };
        let fit = |c: &TreeConfig, x: &Array2<f64>, y: &Array1<f64>, b: InBag<'_, u8>| {
            c.fit(
                x.view(),
                Targets::Regression(y.view()),
                b,
                &pool(1),
                &Silent,
            )
        };
        assert_eq!(
            arg(fit(&config, &x, &y, all).unwrap_err()),
            "split_features"
        );
        let config = base.check().unwrap();
        let mut xn = x.clone();
        xn[(3, 1)] = f64::NAN;
        assert_eq!(arg(fit(&config, &xn, &y, all).unwrap_err()), "x");
        let mut yn = y.clone();
        yn[2] = f64::INFINITY;
        assert_eq!(arg(fit(&config, &x, &yn, all).unwrap_err()), "y");
        let short = y.slice(ndarray::s![..5]).to_owned();
        assert_eq!(arg(fit(&config, &x, &short, all).unwrap_err()), "y");
        let mut zero = Array2::<u8>::ones((2, 20));
        zero.row_mut(1).fill(0);
        assert_eq!(
            arg(fit(&config, &x, &y, InBag::Counts(zero.view())).unwrap_err()),
            "counts"
        );
        let narrow = Array2::<u8>::ones((2, 19));
        assert_eq!(
            arg(fit(&config, &x, &y, InBag::Counts(narrow.view())).unwrap_err()),
            "counts"
        );
        assert_eq!(
            arg(fit(&config, &x, &y, InBag::AllRows { members: 0 }).unwrap_err()),
            "members"
        );
        let classes = Array1::from_iter((0..20).map(|i| i % 4));
        let c = params(Task::Classification { n_classes: 3 }, Splitter::Exact)
            .check()
            .unwrap();
        let e = c.fit(
            x.view(),
            Targets::Classes(classes.view()),
            all,
            &pool(1),
            &Silent,
        );
        assert_eq!(arg(e.unwrap_err()), "y");
        let e = fit(&config, &x, &y, all).unwrap();
        let mut out = vec![0.0; 20];
        let wide = data(10, 3, 1, 0);
        assert_eq!(
            arg(e.predict_into(wide.view(), &mut out, &pool(1)).unwrap_err()),
            "x"
        );
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
                let mut out = vec![0.0; back.members() * 10 * back.width()];
                if back.n_features() == 3 {
                    back.member_predictions_into(data(10, 3, 1, 0).view(), &mut out, &pool(1))
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
        e.out_of_bag_predictions_into(x.view(), counts.view(), &mut oob, &pool(2))
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
