//! Bagged CART trees (Breiman, Friedman, Olshen & Stone 1984, "Classification and
//! Regression Trees") grown on in-bag counts used as integer row weights.
//!
//! A [`TreeParams`] is checked once into a [`CheckedTreeParams`]; [`CheckedTreeParams::fit`] grows one
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

mod columns;
mod ensemble;
mod format;
mod growing;
mod parameters;
mod value_counts;

pub use crate::learners::Targets;
pub use ensemble::{Node, Tree, TreeEnsemble};
pub use growing::InBag;
pub use parameters::{
    feature_stream_seed, CheckedTreeParams, Criterion, Splitter, TreeParams, AUTO_HISTOGRAM_ABOVE,
    FEATURE_STREAM_SALT, MAX_BINS,
};

/// Fixtures shared by the tests of the tree modules.
#[cfg(test)]
mod test_support {
    pub(super) use super::ensemble::LEAF;
    pub(super) use super::*;
    pub(super) use crate::learners::Task;
    pub(super) use crate::parallel::{Pool, Silent, Threads};
    pub(super) use crate::random::Draws;
    use ndarray::{Array1, Array2};

    pub(super) fn params(task: Task, splitter: Splitter) -> TreeParams {
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
    pub(super) fn data(n: usize, f: usize, seed: u64, levels: usize) -> Array2<f64> {
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

    pub(super) fn signal(x: &Array2<f64>, seed: u64) -> Array1<f64> {
        let mut d = Draws::from_seed(seed);
        x.outer_iter()
            .map(|r| (3.0 * r[0]).sin() + r[1] * r[1] + 0.3 * d.open_unit())
            .collect()
    }

    pub(super) fn pool(threads: usize) -> Pool {
        Threads::Fixed(threads).pool().unwrap()
    }

    pub(super) fn fit_reg(
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

    pub(super) fn members(e: &TreeEnsemble, x: &Array2<f64>) -> Vec<f64> {
        let mut out = vec![0.0; e.members() * x.nrows() * e.outputs()];
        e.member_predictions_into(x.view(), &mut out, &pool(2), &Silent)
            .unwrap();
        out
    }

    /// The leaf values of one point by the plain walk from the root.
    pub(super) fn reference_walk<'t>(tree: &'t Tree, point: &[f64], width: usize) -> &'t [f64] {
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
}
