//! Growing the member trees: the split search (exact, histogram, sparse bins) and the
//! parallel fit of all members.

use std::sync::atomic::{AtomicBool, Ordering};

use ndarray::ArrayView2;
use rayon::prelude::*;

use super::columns::{midpoint, prefetch, Columns};
use super::ensemble::{Node, Tree, TreeEnsemble, LEAF};
use super::parameters::{
    feature_stream_seed, CheckedTreeParams, Criterion, Splitter, TreeParams, AUTO_HISTOGRAM_ABOVE,
};
use super::value_counts::{Part, Table, ValueCounts};
use super::MAX_BINS;
use crate::error::{Error, Result};
use crate::learners::{Targets, Task};
use crate::numeric::Real;
use crate::parallel::{watched, Monitor, Pool};
use crate::random::{Draws, MemberStreams};
use crate::resampling::Count;

/// Binned nodes with at most this many distinct in-bag rows sort their bin codes instead
/// of filling 256-bin histograms.
pub(super) const SPARSE_BINS_UP_TO: usize = 128;

/// Which rows each member sees.
#[derive(Debug, Clone, Copy)]
pub enum InBag<'a, C: Count> {
    /// In-bag counts, members × rows (any strides); a count is the row's weight.
    Counts(ArrayView2<'a, C>),
    /// Every member sees every row once.
    AllRows { members: usize },
}

impl<'a, C: Count> InBag<'a, C> {
    /// The in-bag rows of a fit's options: the counts, or every row once for `n_members`
    /// members when there are none.
    ///
    /// # Errors
    /// `n_members` missing without counts, given with them, or zero.
    pub fn from_options(
        counts: Option<ArrayView2<'a, C>>,
        n_members: Option<usize>,
    ) -> Result<Self> {
        match (counts, n_members) {
            (Some(counts), None) => Ok(InBag::Counts(counts)),
            (None, Some(0)) => Err(Error::value("n_members", "must be at least 1")),
            (None, Some(members)) => Ok(InBag::AllRows { members }),
            (None, None) => Err(Error::value("n_members", "required when `counts` is None")),
            (Some(_), Some(_)) => Err(Error::value(
                "n_members",
                "give either `counts` or `n_members`, not both",
            )),
        }
    }
}

/// A candidate split: rows with `rank ≤ cut` (exact) or `code ≤ cut` (histogram) go left.
#[derive(Debug, Clone, Copy)]
pub(super) struct Split {
    pub(super) score: f64,
    pub(super) feature: usize,
    pub(super) by_bins: bool,
    /// Rows with bin code (by_bins) or value rank (exact) ≤ cut go left.
    pub(super) cut: u32,
    /// Exact splits: the rank of the next distinct in-node value (the threshold lies
    /// between the two).
    pub(super) next: u32,
}

/// Bit `i` of a bit set (0 or 1).
#[inline(always)]
fn bit(bits: &[u64], i: usize) -> u64 {
    (bits[i >> 6] >> (i & 63)) & 1
}

/// Sets bit `i` of a bit set to `value`.
#[inline(always)]
fn set_bit(bits: &mut [u64], i: usize, value: bool) {
    let word = &mut bits[i >> 6];
    *word = (*word & !(1 << (i & 63))) | (u64::from(value) << (i & 63));
}

/// Slots ahead of a pass over a node's slots at which their data is prefetched.
pub(super) const SLOTS_AHEAD: usize = 16;

/// A feature without a sorted list (none are kept, or it is split from value counts).
const NO_LIST: usize = usize::MAX;

/// Scores within this relative distance are ties, so that the tie rule does not depend on
/// the rounding of sums accumulated in a different order (e.g. weighted vs repeated rows).
pub(super) const SCORE_TIE: f64 = 1e-12;

/// The lowest score worth computing in a node whose best so far is `node_best`: boundaries
/// below `node_best · (1 − 1e-9)` can neither beat nor tie it (ties are within
/// [`SCORE_TIE`]). Scores are ≥ 0 where it is used (regression, Gini), so 0 excludes nothing.
pub(super) fn score_floor(node_best: Option<f64>) -> f64 {
    node_best
        .filter(|&b| b > 0.0)
        .map_or(0.0, |b| b * (1.0 - 1e-9))
}

/// Within a feature, whether `score` replaces the best so far. Later boundaries have higher
/// thresholds, so only a clearly higher score does (the tie rule of [`Split::beats`]).
#[inline(always)]
pub(super) fn clearly_better(score: f64, best: Option<f64>) -> bool {
    best.is_none_or(|b| score > b + SCORE_TIE * score.abs().max(b.abs()))
}

/// Whether a boundary of score `a/wl + c/wr` (every term ≥ 0) may beat the feature's best
/// so far and the floor: only if `a·wr + c·wl > b·wl·wr`. The products are exact to a few
/// ulps, so testing that with a 1e-9 margin skips both divisions for nearly every boundary
/// without changing which one wins.
#[inline(always)]
pub(super) fn may_beat(a: f64, c: f64, wl: f64, wr: f64, best: Option<f64>, floor: f64) -> bool {
    let b = best.map_or(floor, |b| b.max(floor));
    a < 0.0 || c < 0.0 || a * wr + c * wl > b * (wl * wr) * (1.0 - 1e-9)
}

impl Split {
    /// The deterministic order: a clearly higher score wins; scores equal to within
    /// [`SCORE_TIE`] (relative) fall back to the lower feature, then the lower threshold
    /// (within a feature and node, the lower cut).
    pub(super) fn beats(&self, other: &Option<Split>) -> bool {
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
    pub(super) fn threshold(&self, columns: &Columns) -> f64 {
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
pub(super) struct Grower<'a> {
    pub(super) columns: &'a Columns,
    pub(super) config: &'a TreeParams,
    pub(super) regression: bool,
    pub(super) stat_width: usize,
    pub(super) min_leaf: f64,
    // Per in-bag row ("slot"): its row in x, weight and target; never permuted.
    pub(super) slot_row: Vec<u32>,
    /// Per slot, classification: the weight (its in-bag count); regression: empty (the
    /// weight is the first of `weighted_target`).
    pub(super) weight: Vec<f64>,
    pub(super) target: Vec<f64>,
    /// Per slot, regression: (weight, weight · target) side by side, so a scan fetches one
    /// cache line per slot (the product computed once); classification: empty.
    pub(super) weighted_target: Vec<[f64; 2]>,
    /// Per slot, classification: the class code; regression: empty.
    pub(super) class: Vec<u32>,
    /// Per slot, the bin codes of all its features (slot-major; empty without bins), so a
    /// full histogram reads each slot once rather than once per feature.
    pub(super) slot_codes: Vec<u8>,
    /// The slots of each node's range `start..end`, in no particular order.
    pub(super) order: Vec<u32>,
    /// Per listed feature (see `list_of_feature`), `rank << 32 | slot` sorted by rank
    /// within each node's range (kept sorted by stable partitions, so exact scans never
    /// sort); empty for histograms only.
    pub(super) sorted: Vec<u64>,
    // Scratch, reused by every node.
    pub(super) keys: Vec<u64>,
    /// One bit per slot, set when it goes left at the split being applied (bits, not
    /// bools: 80 KB at a million rows, so the partitions' random reads stay in cache).
    pub(super) goes_left: Vec<u64>,
    pub(super) buffer: Vec<u64>,
    pub(super) left: Vec<f64>,
    pub(super) one_feature: Vec<f64>,
    pub(super) features: Vec<usize>,
    pub(super) spare_histograms: Vec<Vec<f64>>,
    pub(super) spare_stats: Vec<Vec<f64>>,
    pub(super) draws: Draws,
    /// Exact scans skip boundaries that cannot reach the node's best (see
    /// [`scan_exact`](Self::scan_exact)); off only in the test that shows it changes nothing.
    pub(super) skip_below_node_best: bool,
    /// Classification: the features split from per-value class counts, which have no
    /// sorted list (see [`value_counts`](super::value_counts)).
    pub(super) value_counts: Option<ValueCounts>,
    /// Per feature, the index of its list in `sorted`, or [`NO_LIST`].
    pub(super) list_of_feature: Vec<usize>,
    /// Scratch of [`scan_counts`](Self::scan_counts): the classes present in a node.
    pub(super) present_classes: Vec<usize>,
    /// Scratch of [`scan_counts`](Self::scan_counts): the values present in a node.
    pub(super) present_values: Vec<u32>,
    // Output.
    pub(super) tree: Tree,
}

pub(super) struct Pending {
    pub(super) node: usize,
    pub(super) start: usize,
    pub(super) end: usize,
    pub(super) depth: usize,
    pub(super) stats: Vec<f64>,
    pub(super) histogram: Option<Vec<f64>>,
    /// The node's value-count table, when it came from its parent's.
    pub(super) counts: Option<Table>,
}

impl<'a> Grower<'a> {
    /// Adds slot `p` to `stats`.
    #[inline(always)]
    pub(super) fn add(&self, stats: &mut [f64], p: usize) {
        if self.regression {
            // Both from one cache line (the weight is stored beside its product).
            let [w, wy] = self.weighted_target[p];
            stats[0] += w;
            stats[1] += wy;
        } else {
            let w = self.weight[p];
            stats[0] += w;
            stats[1 + self.class[p] as usize] += w;
        }
    }

    /// The proxy of the side with statistics `s`, or of `total − s` when `minus` is given.
    #[inline]
    pub(super) fn proxy(&self, s: &[f64], minus: Option<&[f64]>) -> f64 {
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

    /// The statistics of positions `start..end`, in a vector from `spare_stats` when there
    /// is one (a node's vector goes back there once it is done: an allocation per node was
    /// 2 to 4% of a fit).
    pub(super) fn stats_of(&mut self, start: usize, end: usize) -> Vec<f64> {
        let mut s = self.spare_stats.pop().unwrap_or_default();
        s.clear();
        s.resize(self.stat_width, 0.0);
        let order = &self.order[start..end];
        for (i, &slot) in order.iter().enumerate() {
            if let Some(&ahead) = order.get(i + SLOTS_AHEAD) {
                self.prefetch_slot(ahead as usize);
            }
            self.add(&mut s, slot as usize);
        }
        s
    }

    /// Starts fetching what [`add`](Self::add) reads of slot `p`: a node's slots are in no
    /// particular order, so past the caches each read would otherwise wait on memory.
    #[inline(always)]
    fn prefetch_slot(&self, p: usize) {
        if self.regression {
            prefetch(&self.weighted_target[p]);
        } else {
            prefetch(&self.weight[p]);
            prefetch(&self.class[p]);
        }
    }

    pub(super) fn is_pure(&self, start: usize, end: usize, stats: &[f64]) -> bool {
        if self.regression {
            let mean = stats[1] / stats[0];
            // First from the line the child's statistics were just summed from: the first
            // slot's target as (w·y)/w is within 2.1 ε of y, so when it is clearly apart
            // from the mean (≥ 1e-6 relative) its term is within 1e-8 of the exact one.
            let [w, wy] = self.weighted_target[self.order[start] as usize];
            let (y, d) = (wy / w, wy / w - mean);
            if d.abs() >= 1e-6 * y.abs() && w * d * d * (1.0 - 1e-8) / stats[0] > f64::EPSILON {
                return false;
            }
            // A rounded sum of terms ≥ 0 is at least each of its terms, so one term above
            // the bound settles it (the first slot, nearly always) without the whole sum.
            let mut ss = 0.0;
            for &p in &self.order[start..end] {
                let p = p as usize;
                let d = self.target[p] - mean;
                let term = self.weighted_target[p][0] * d * d;
                if term / stats[0] > f64::EPSILON {
                    return false;
                }
                ss += term;
            }
            ss / stats[0] <= f64::EPSILON
        } else {
            stats[1..].iter().any(|&c| c == stats[0])
        }
    }

    /// Where feature `f`'s sorted list starts in `sorted`, if it has one.
    #[inline]
    fn list_start(&self, f: usize) -> Option<usize> {
        let list = self.list_of_feature[f];
        (list != NO_LIST && !self.sorted.is_empty()).then(|| list * self.slot_row.len())
    }

    /// Whether a node becomes a leaf without a split search.
    fn stops(&self, start: usize, end: usize, depth: usize, stats: &[f64]) -> bool {
        self.config.max_depth.is_some_and(|d| depth >= d)
            || stats[0] < 2.0 * self.min_leaf
            || end - start < 2
            || self.is_pure(start, end, stats)
    }

    /// Whether a node of `rows` rows splits its counted features from value counts: every
    /// node searched exactly does, when the member has counted features.
    fn counts_values(&self, rows: usize) -> bool {
        self.value_counts.is_some() && !self.use_bins(rows)
    }

    pub(super) fn use_bins(&self, rows: usize) -> bool {
        match self.config.splitter {
            Splitter::Exact => false,
            Splitter::Histogram => true,
            Splitter::Auto => rows > AUTO_HISTOGRAM_ABOVE,
        }
    }

    /// Whether a binned node is large enough for dense 256-bin histograms; smaller ones
    /// sort their bin codes instead (same candidates, same thresholds).
    pub(super) fn dense_bins(&self, rows: usize) -> bool {
        self.use_bins(rows) && rows > SPARSE_BINS_UP_TO
    }

    /// Best split of feature `f` over the bin codes of positions `start..end`, found by
    /// sorting the codes: the same candidates as [`scan_histogram`](Self::scan_histogram).
    pub(super) fn scan_codes(
        &mut self,
        f: usize,
        start: usize,
        end: usize,
        total: &[f64],
    ) -> Option<Split> {
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

    pub(super) fn histogram_buffer(&mut self) -> Vec<f64> {
        let len = self.columns.n_features * MAX_BINS * self.stat_width;
        let mut h = self.spare_histograms.pop().unwrap_or_default();
        h.clear();
        h.resize(len, 0.0);
        h
    }

    /// Accumulates feature `f`'s histogram of positions `start..end` into `h`
    /// (`MAX_BINS · stat_width` floats, zero on entry).
    pub(super) fn fill_histogram(&self, f: usize, start: usize, end: usize, h: &mut [f64]) {
        let s = self.stat_width;
        let codes = &self.columns.codes[f * self.columns.n_rows..(f + 1) * self.columns.n_rows];
        for &slot in &self.order[start..end] {
            let p = slot as usize;
            let o = codes[self.slot_row[p] as usize] as usize * s;
            if self.regression {
                let [w, wy] = self.weighted_target[p];
                h[o] += w;
                h[o + 1] += wy;
            } else {
                let w = self.weight[p];
                h[o] += w;
                h[o + 1 + self.class[p] as usize] += w;
            }
        }
    }

    /// Every feature's histogram of positions `start..end`. Each bin receives the same
    /// additions in the same order as [`fill_histogram`](Self::fill_histogram) feature by
    /// feature would give it (so the same bits), in one pass over the slots.
    pub(super) fn full_histogram(&mut self, start: usize, end: usize) -> Vec<f64> {
        let mut h = self.histogram_buffer();
        let s = self.stat_width;
        let n_features = self.columns.n_features;
        let block = MAX_BINS * s;
        let order = &self.order[start..end];
        for (i, &slot) in order.iter().enumerate() {
            if let Some(&ahead) = order.get(i + SLOTS_AHEAD) {
                let ahead = ahead as usize;
                prefetch(&self.slot_codes[ahead * n_features]);
                self.prefetch_slot(ahead);
            }
            let p = slot as usize;
            let codes = &self.slot_codes[p * n_features..(p + 1) * n_features];
            if self.regression {
                let [w, wy] = self.weighted_target[p];
                for (f, &code) in codes.iter().enumerate() {
                    let o = f * block + code as usize * s;
                    h[o] += w;
                    h[o + 1] += wy;
                }
            } else {
                let (w, k) = (self.weight[p], 1 + self.class[p] as usize);
                for (f, &code) in codes.iter().enumerate() {
                    let o = f * block + code as usize * s;
                    h[o] += w;
                    h[o + k] += w;
                }
            }
        }
        h
    }

    /// Best split of feature `f` from its histogram `h`.
    pub(super) fn scan_histogram(&mut self, f: usize, h: &[f64], total: &[f64]) -> Option<Split> {
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

    /// Best exact split of feature `f` over positions `start..end`, and whether the feature
    /// offers any valid boundary there.
    ///
    /// `node_best` is the score of the node's best split among the features tried before:
    /// boundaries below `node_best · (1 − 1e-9)` can neither beat nor tie it (ties are within
    /// [`SCORE_TIE`]), so their scores are not computed. That changes which split is found
    /// only when the feature's best lies near the node's best; the feature's own best could
    /// then differ only if its scores climbed through that band in steps below `SCORE_TIE`.
    pub(super) fn scan_exact(
        &mut self,
        f: usize,
        start: usize,
        end: usize,
        total: &[f64],
        node_best: Option<f64>,
    ) -> (bool, Option<Split>) {
        let list = self
            .list_start(f)
            .expect("a feature scanned exactly has a sorted list");
        let keys = &self.sorted[list + start..list + end];
        // Sorted by rank: a feature constant in the node offers no boundary (the scan below
        // would skip every row); its list is also left unpartitioned (see `partition`).
        if keys.len() < 2 || keys[0] >> 32 == keys[keys.len() - 1] >> 32 {
            return (false, None);
        }
        let floor = score_floor(node_best);
        let mut valid = false;
        // (score, rank, next rank) of the best boundary so far; the threshold is looked up
        // only for the node's winning split.
        let mut best: Option<(f64, u32, u32)> = None;
        let clearly_better =
            |score: f64, best: &Option<(f64, u32, u32)>| clearly_better(score, best.map(|b| b.0));
        let may_beat = |a: f64, c: f64, wl: f64, wr: f64, best: &Option<(f64, u32, u32)>| {
            may_beat(a, c, wl, wr, best.map(|b| b.0), floor)
        };
        if self.regression {
            let (w_total, s_total) = (total[0], total[1]);
            let (mut wl, mut sl) = (0.0, 0.0);
            for i in 0..keys.len().saturating_sub(1) {
                let slot = (keys[i] & 0xFFFF_FFFF) as usize;
                let [w, wy] = self.weighted_target[slot];
                wl += w;
                sl += wy;
                let (rank, next) = ((keys[i] >> 32) as u32, (keys[i + 1] >> 32) as u32);
                let wr = w_total - wl;
                if rank == next || wl < self.min_leaf || wr < self.min_leaf {
                    continue;
                }
                valid = true;
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
            let mut w_left = 0.0;
            for i in 0..keys.len().saturating_sub(1) {
                let slot = (keys[i] & 0xFFFF_FFFF) as usize;
                let w = self.weight[slot];
                let k = 1 + self.class[slot] as usize;
                let right_k = total[k] - left[k];
                squares_left += w * (2.0 * left[k] + w);
                squares_right += w * (w - 2.0 * right_k);
                left[k] += w;
                // The left weight in a register: kept in `left[0]` it went through memory
                // every row, the longest chain of the loop (store, reload, add).
                w_left += w;
                let (rank, next) = ((keys[i] >> 32) as u32, (keys[i + 1] >> 32) as u32);
                let (wl, wr) = (w_left, w_total - w_left);
                if rank == next || wl < self.min_leaf || wr < self.min_leaf {
                    continue;
                }
                valid = true;
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
                valid = true;
                let score = self.proxy(&left, None) + self.proxy(total, Some(&left));
                if clearly_better(score, &best) {
                    best = Some((score, rank, next));
                }
            }
            self.left = left;
        }
        let best = best.map(|(score, rank, next)| Split {
            score,
            feature: f,
            by_bins: false,
            cut: rank,
            next,
        });
        (valid, best)
    }

    /// Best split of a node; `histogram` is the node's full histogram when one is kept.
    pub(super) fn best_split(
        &mut self,
        start: usize,
        end: usize,
        stats: &[f64],
        histogram: Option<&[f64]>,
        counts: Option<&Table>,
    ) -> Option<Split> {
        let n_features = self.columns.n_features;
        let bins = self.use_bins(end - start);
        let dense = self.dense_bins(end - start);
        let block = MAX_BINS * self.stat_width;
        if counts.is_some() {
            // For the value-count scans: the others' counts are zero in every value, and
            // adding exact zeros changes no sum (deep nodes hold two or three classes).
            self.present_classes.clear();
            let present = (1..self.stat_width).filter(|&k| stats[k] > 0.0);
            self.present_classes.extend(present);
        }
        let mut best: Option<Split> = None;
        let mut try_feature = |g: &mut Self, f: usize| -> bool {
            let (valid, found) = if bins && !dense {
                let found = g.scan_codes(f, start, end, stats);
                (found.is_some(), found)
            } else if bins {
                let found = match histogram {
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
                };
                (found.is_some(), found)
            } else {
                let node_best = best.filter(|_| g.skip_below_node_best).map(|b| b.score);
                match (&g.value_counts, counts) {
                    (Some(v), Some(table)) if v.counts(f) => {
                        match v.of_feature(f, g.columns.distinct[f].len(), table) {
                            Part::Narrow(counts) => g.scan_counts(f, counts, stats, node_best),
                            Part::Wide(counts) => g.scan_counts(f, counts, stats, node_best),
                        }
                    }
                    _ => g.scan_exact(f, start, end, stats, node_best),
                }
            };
            if let Some(s) = found {
                if s.beats(&best) {
                    best = Some(s);
                }
            }
            valid
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
        if let Some(s) = best.filter(|s| !s.by_bins) {
            // The winner's threshold is read once the node is partitioned: start fetching
            // its two values now (out of cache in large tables), without waiting for them.
            let d = &self.columns.distinct[s.feature];
            prefetch(&d[s.cut as usize]);
            prefetch(&d[s.next as usize]);
        }
        best
    }

    /// Moves the positions of `start..end` that go left to the front; returns the split
    /// position.
    pub(super) fn partition(&mut self, start: usize, end: usize, split: &Split) -> usize {
        let columns = self.columns;
        if let Some(list) = self.list_start(split.feature) {
            // The split feature's sorted list, read in order: its first entries (rank ≤ the
            // cut's rank) go left. Bin codes grow with ranks, so a cut between bins is a
            // cut between ranks too.
            let f = split.feature;
            let cut = if split.by_bins {
                columns.last_rank_of_bin[f][split.cut as usize]
            } else {
                split.cut
            };
            for &key in &self.sorted[list + start..list + end] {
                set_bit(
                    &mut self.goes_left,
                    (key & 0xFFFF_FFFF) as usize,
                    (key >> 32) as u32 <= cut,
                );
            }
        } else {
            for &slot in &self.order[start..end] {
                let row = self.slot_row[slot as usize];
                let left = if split.by_bins {
                    u32::from(columns.code(split.feature, row)) <= split.cut
                } else {
                    columns.rank(split.feature, row) <= split.cut
                };
                set_bit(&mut self.goes_left, slot as usize, left);
            }
        }
        let (mut i, mut j) = (start, end);
        while i < j {
            if bit(&self.goes_left, self.order[i] as usize) != 0 {
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
            let n_in = self.slot_row.len();
            for (f, &list) in self.list_of_feature.iter().enumerate() {
                // The split feature's left side is already its first entries (see above).
                if list == NO_LIST || f == split.feature {
                    continue;
                }
                let list = &mut self.sorted[list * n_in + start..list * n_in + end];
                if list[0] >> 32 == list[list.len() - 1] >> 32 {
                    // Constant here, so constant in every descendant: the exact scan reads
                    // no slot of it again (it stops at the equal first and last ranks).
                    continue;
                }
                let (mut k, mut r) = (0usize, 0usize);
                for q in 0..list.len() {
                    let key = list[q];
                    let left = bit(goes_left, (key & 0xFFFF_FFFF) as usize) as usize;
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

    pub(super) fn make_leaf(&mut self, node: usize, stats: &[f64]) {
        let width = self.config.task.outputs();
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
    pub(super) fn grow(mut self, stop: &AtomicBool) -> Option<Tree> {
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
            counts: None,
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
                mut counts,
            } = job;
            let stop = self.stops(start, end, depth, &stats);
            if !stop && counts.is_none() && self.counts_values(end - start) {
                let slots = &self.order[start..end];
                counts = self
                    .value_counts
                    .as_mut()
                    .map(|v| v.table(slots, &self.class));
            }
            let split = if stop {
                None
            } else {
                self.best_split(start, end, &stats, histogram.as_deref(), counts.as_ref())
            };
            let Some(split) = split else {
                self.make_leaf(node, &stats);
                if let Some(h) = histogram {
                    self.spare_histograms.push(h);
                }
                if let (Some(v), Some(t)) = (&mut self.value_counts, counts) {
                    v.recycle(t);
                }
                self.spare_stats.push(stats);
                continue;
            };
            let mid = self.partition(start, end, &split);
            // A split with an empty side would grow the same node again, without end.
            assert!(
                start < mid && mid < end,
                "a split leaves rows on both sides"
            );
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
            // The same for value counts, when the larger child searches a split.
            let (mut left_counts, mut right_counts) = (None, None);
            if let Some(mut parent) = counts {
                let left_smaller = mid - start <= end - mid;
                let (small, large, large_stats) = if left_smaller {
                    ((start, mid), (mid, end), &right_stats)
                } else {
                    ((mid, end), (start, mid), &left_stats)
                };
                let large_searched = !self.stops(large.0, large.1, depth + 1, large_stats);
                let v = self
                    .value_counts
                    .as_mut()
                    .expect("counts come from value_counts");
                if large_searched {
                    let small_counts = v.table(&self.order[small.0..small.1], &self.class);
                    ValueCounts::subtract(&mut parent, &small_counts);
                    let small_counts = Some(small_counts);
                    if left_smaller {
                        (left_counts, right_counts) = (small_counts, Some(parent));
                    } else {
                        (left_counts, right_counts) = (Some(parent), small_counts);
                    }
                } else {
                    v.recycle(parent);
                }
            }
            stack.push(Pending {
                node: c + 1,
                start: mid,
                end,
                depth: depth + 1,
                stats: right_stats,
                histogram: right_h,
                counts: right_counts,
            });
            stack.push(Pending {
                node: c,
                start,
                end: mid,
                depth: depth + 1,
                stats: left_stats,
                histogram: left_h,
                counts: left_counts,
            });
            self.spare_stats.push(stats);
        }
        // The node and value vectors grew by doubling; a kept tree holds only what it uses
        // (up to half its memory otherwise, for as long as the model lives).
        self.tree.nodes.shrink_to_fit();
        self.tree.values.shrink_to_fit();
        Some(self.tree)
    }
}

impl CheckedTreeParams {
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
        self.fit_members(x, y, in_bag, 0, pool, monitor)
    }

    /// Grows members `first_member .. first_member + k` of an ensemble, `k` the members of
    /// `in_bag` (whose row j holds the counts of member `first_member + j`): member m draws
    /// its features from stream m, exactly as in the fit of the whole ensemble, so fits of
    /// consecutive member ranges joined by [`TreeEnsemble::join`] equal the whole fit
    /// (the feature bins depend on `x` alone, not on the members).
    ///
    /// ```text
    /// fit(counts[0..M]) = join(fit_members(counts[a_0..a_1], a_0), ...,
    ///                          fit_members(counts[a_{g-1}..a_g], a_{g-1}))
    ///                     for 0 = a_0 < a_1 < ... < a_g = M
    /// ```
    ///
    /// # Errors
    /// As [`fit`](CheckedTreeParams::fit).
    pub fn fit_members<T: Real, C: Count>(
        &self,
        x: ArrayView2<'_, T>,
        y: Targets<'_>,
        in_bag: InBag<'_, C>,
        first_member: usize,
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
        let draws =
            MemberStreams::starting_at(feature_stream_seed(p.seed), first_member).take(members);
        // The members grow on the pool while the calling thread reports the number
        // finished; a stop from the monitor (Ctrl-C, a raising callback) is checked by every
        // grower between nodes. The call returns as soon as the last member is grown (it
        // used to poll every 5 ms, which was most of a small fit).
        let grown = watched(pool, monitor, members, |watch| {
            draws
                .into_par_iter()
                .enumerate()
                .map(|(m, d)| {
                    let tree = self.grow_member(&columns, &target, in_bag, m, d, watch.flag());
                    watch.advance(1);
                    tree
                })
                .collect::<Vec<Option<Tree>>>()
        })?;
        let trees: Vec<Tree> = grown
            .into_iter()
            .collect::<Option<_>>()
            .ok_or(Error::Interrupted)?;
        Ok(TreeEnsemble {
            task: p.task,
            n_features,
            trees,
        })
    }

    pub(super) fn grow_member<C: Count>(
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
        self.grower(columns, target, in_bag, member, draws, true)
            .grow(stop)
    }

    /// The grower of member `member`, its in-bag rows and sorted lists set up; value counts
    /// are used where they apply when `use_value_counts` (off only in the test that shows
    /// they change no tree).
    pub(super) fn grower<'c, C: Count>(
        &'c self,
        columns: &'c Columns,
        target: &[f64],
        in_bag: InBag<'_, C>,
        member: usize,
        draws: Draws,
        use_value_counts: bool,
    ) -> Grower<'c> {
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
        let target_pos: Vec<f64> = rows.iter().map(|&r| target[r as usize]).collect();
        let regression = p.task == Task::Regression;
        let weighted_target = if regression {
            target_pos
                .iter()
                .zip(&weight)
                .map(|(y, w)| [*w, w * y])
                .collect()
        } else {
            Vec::new()
        };
        let class = if regression {
            Vec::new()
        } else {
            target_pos.iter().map(|&c| c as u32).collect()
        };
        let weight = if regression { Vec::new() } else { weight };
        let n_in = rows.len();
        let stat_width = match p.task {
            Task::Regression => 2,
            Task::Classification { n_classes } => 1 + n_classes,
        };
        let value_counts = if regression
            || !use_value_counts
            || p.split_features.is_some()
            || p.splitter == Splitter::Histogram
        {
            None
        } else {
            let rank = |f: usize, row: u32| columns.rank(f, row);
            ValueCounts::new(&columns.distinct, rank, &rows, &weight, stat_width)
        };
        // Sorted lists for the features not split from value counts.
        let mut list_of_feature = vec![NO_LIST; columns.n_features];
        let mut sorted = Vec::new();
        if !columns.order.is_empty() {
            let mut n_lists = 0;
            for (f, list) in list_of_feature.iter_mut().enumerate() {
                if !value_counts.as_ref().is_some_and(|v| v.counts(f)) {
                    *list = n_lists;
                    n_lists += 1;
                }
            }
            // Each feature's global value order restricted to the in-bag rows: sorted
            // lists in O(features · rows), no sort per member.
            let mut slot_of_row = vec![u32::MAX; columns.n_rows];
            rows.iter()
                .enumerate()
                .for_each(|(slot, &r)| slot_of_row[r as usize] = slot as u32);
            // One spare entry: every row is written, and the position advances only for
            // in-bag rows (no branch on a draw's outcome).
            sorted.resize(n_in * n_lists + 1, 0);
            let mut k = 0;
            for f in (0..columns.n_features).filter(|&f| list_of_feature[f] != NO_LIST) {
                let order = &columns.order[f * columns.n_rows..(f + 1) * columns.n_rows];
                for &key in order {
                    let slot = slot_of_row[(key & 0xFFFF_FFFF) as usize];
                    sorted[k] = (key & !0xFFFF_FFFF) | u64::from(slot);
                    k += usize::from(slot != u32::MAX);
                }
            }
            sorted.truncate(n_in * n_lists);
        }
        let mut grower = Grower {
            columns,
            config: p,
            regression,
            stat_width,
            min_leaf: p.min_leaf as f64,
            order: (0..n_in as u32).collect(),
            slot_row: rows,
            weight,
            target: target_pos,
            weighted_target,
            class,
            slot_codes: Vec::new(),
            sorted,
            keys: Vec::new(),
            goes_left: vec![0; n_in.div_ceil(64)],
            buffer: Vec::new(),
            left: vec![0.0; stat_width],
            one_feature: Vec::new(),
            features: (0..columns.n_features).collect(),
            spare_histograms: Vec::new(),
            spare_stats: Vec::new(),
            draws,
            tree: Tree {
                nodes: Vec::new(),
                values: Vec::new(),
            },
            skip_below_node_best: true,
            value_counts,
            list_of_feature,
            present_classes: Vec::new(),
            present_values: Vec::new(),
        };
        // Only full histograms read them: none without a dense node (the root is the
        // largest).
        if !columns.codes.is_empty() && grower.dense_bins(n_in) {
            let mut codes = vec![0u8; n_in * columns.n_features];
            for f in 0..columns.n_features {
                let column = &columns.codes[f * columns.n_rows..(f + 1) * columns.n_rows];
                for (slot, &r) in grower.slot_row.iter().enumerate() {
                    codes[slot * columns.n_features + f] = column[r as usize];
                }
            }
            grower.slot_codes = codes;
        }
        grower
    }
}

#[cfg(test)]
mod tests {
    use super::super::test_support::*;
    use super::*;
    use crate::learners::FittedMembers;
    use crate::parallel::Silent;
    use ndarray::{Array1, Array2};

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
    fn skipping_boundaries_below_the_node_best_changes_no_tree() {
        // The exact scan's skip (see `Grower::scan_exact`) against the full scan, node by
        // node: continuous features, heavy ties (3 and 12 levels), two criteria, every
        // feature and a random pair per node, weights from bootstrap counts.
        let mut compared = 0;
        for (levels, criterion) in [(0, None), (3, None), (12, None), (0, Some(Criterion::Gini))] {
            let x = data(1500, 5, 11 + levels as u64, levels);
            let y = signal(&x, 3);
            let task = match criterion {
                None => Task::Regression,
                Some(_) => Task::Classification { n_classes: 3 },
            };
            let target: Vec<f64> = match task {
                Task::Regression => y.to_vec(),
                _ => y
                    .iter()
                    .map(|v| ((v * 2.0).max(0.0) as usize % 3) as f64)
                    .collect(),
            };
            let mut counts = Array2::<u8>::zeros((3, 1500));
            let mut d = Draws::from_seed(5);
            for m in 0..3 {
                d.for_each_below(1500, 1500, |i| counts[(m, i)] += 1);
            }
            for split_features in [None, Some(2)] {
                let mut p = params(task, Splitter::Exact);
                p.split_features = split_features;
                let config = p.check().unwrap();
                let columns = Columns::build(&x.view(), false, true, &pool(1));
                let stop = AtomicBool::new(false);
                for m in 0..3 {
                    let grow = |skip: bool| {
                        let draws = MemberStreams::starting_at(7, m).take(1).remove(0);
                        let in_bag = InBag::Counts(counts.view());
                        let mut g = config.grower(&columns, &target, in_bag, m, draws, true);
                        g.skip_below_node_best = skip;
                        g.grow(&stop).unwrap()
                    };
                    let (skipping, full) = (grow(true), grow(false));
                    assert!(full.nodes.len() > 50);
                    assert_eq!(skipping.nodes, full.nodes, "levels {levels}, member {m}");
                    assert_eq!(skipping.values, full.values);
                    compared += 1;
                }
            }
        }
        assert_eq!(compared, 24);
    }

    #[test]
    fn the_purity_shortcuts_agree_with_the_whole_sum() {
        // Nodes of near-equal targets at every scale around the bound ss/W ≤ ε, the
        // shortcuts (first slot from (w·y)/w, then the first term above the bound) against
        // the plain definition.
        let mut d = Draws::from_seed(4);
        let (mut pure, mut impure) = (0, 0);
        for case in 0..4000 {
            let rows = 2 + case % 7;
            let base: f64 = [0.0, 1.0, -3.0e5, 7.0e-12][case % 4];
            let scale = if base == 0.0 { 1.0 } else { base.abs() };
            let spread = 10f64.powi(-(((case / 4) % 20) as i32)) * scale;
            let y: Vec<f64> = (0..rows)
                .map(|_| base + spread * (d.open_unit() - 0.5) * f64::from(d.below(2) as u8))
                .collect();
            let x = Array2::from_shape_fn((rows, 1), |(i, _)| i as f64);
            let counts = Array2::from_shape_fn((1, rows), |_| 1 + d.below(4) as u8);
            let config = params(Task::Regression, Splitter::Exact).check().unwrap();
            let columns = Columns::build(&x.view(), false, true, &pool(1));
            let draws = MemberStreams::starting_at(1, 0).take(1).remove(0);
            let mut g = config.grower(
                &columns,
                &y.to_vec(),
                InBag::Counts(counts.view()),
                0,
                draws,
                true,
            );
            let stats = g.stats_of(0, rows);
            let mean = stats[1] / stats[0];
            let ss: f64 = (0..rows)
                .map(|p| g.weighted_target[p][0] * (g.target[p] - mean) * (g.target[p] - mean))
                .sum();
            let expected = ss / stats[0] <= f64::EPSILON;
            assert_eq!(g.is_pure(0, rows, &stats), expected, "{y:?}");
            if expected {
                pure += 1;
            } else {
                impure += 1;
            }
        }
        assert!(pure > 500 && impure > 500, "{pure} pure, {impure} not");
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
    fn member_ranges_joined_equal_the_whole_fit() {
        let x = data(1500, 5, 11, 0);
        let y = signal(&x, 12);
        let classes: Array1<usize> = y
            .iter()
            .map(|&v| usize::from(v > 1.0) + usize::from(v > 1.6))
            .collect();
        let mut counts = Array2::<u8>::zeros((7, 1500));
        let mut d = Draws::from_seed(13);
        for m in 0..7 {
            d.for_each_below(1500, 1500, |i| counts[(m, i)] += 1);
        }
        let tasks = [
            (Task::Regression, Targets::Regression(y.view())),
            (
                Task::Classification { n_classes: 3 },
                Targets::Classes(classes.view()),
            ),
        ];
        for (task, target) in tasks {
            for splitter in [Splitter::Auto, Splitter::Exact, Splitter::Histogram] {
                let mut p = params(task, splitter);
                p.split_features = Some(2);
                let config = p.check().unwrap();
                let fit = |first: usize, end: usize| {
                    let c = counts.slice(ndarray::s![first..end, ..]);
                    config
                        .fit_members(x.view(), target, InBag::Counts(c), first, &pool(2), &Silent)
                        .unwrap()
                };
                let whole = fit(0, 7);
                let parts = vec![fit(0, 3), fit(3, 4), fit(4, 7)];
                let joined = TreeEnsemble::join(parts).unwrap();
                assert_eq!(joined, whole);
                assert_eq!(members(&joined, &x), members(&whole, &x));
                crate::learners::check_select_contract(&whole, x.view());
                // The wrong variant: a range fitted from stream 0 grows other trees (its
                // features are drawn from member 0's stream, not member 3's).
                let c = counts.slice(ndarray::s![3..4, ..]);
                let restarted = config
                    .fit_members(x.view(), target, InBag::Counts(c), 0, &pool(2), &Silent)
                    .unwrap();
                assert_ne!(restarted.trees()[0], whole.trees()[3]);
            }
        }
    }

    #[test]
    fn joining_refuses_parts_of_other_ensembles() {
        let x = data(200, 3, 1, 0);
        let y = signal(&x, 2);
        let ones: InBag<'_, u8> = InBag::AllRows { members: 2 };
        let config = params(Task::Regression, Splitter::Exact).check().unwrap();
        let fit = |x: ndarray::ArrayView2<'_, f64>| {
            config
                .fit(x, Targets::Regression(y.view()), ones, &pool(1), &Silent)
                .unwrap()
        };
        let three = fit(x.view());
        let two = fit(x.slice(ndarray::s![.., ..2]));
        let err = TreeEnsemble::join(vec![three.clone(), two]).unwrap_err();
        assert!(err.to_string().contains("parts"), "{err}");
        assert!(TreeEnsemble::join(Vec::new()).is_err());
        assert_eq!(TreeEnsemble::join(vec![three.clone()]).unwrap(), three);
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
        a.predict_into(x.view(), &mut out, &pool(1), &Silent)
            .unwrap();
        assert!(out.iter().zip(&y).all(|(p, t)| (p - t).abs() < 1e-12));
    }

    /// Split features of every internal node, by depth (0 = root), of `members` trees grown
    /// with `split_features = Some(1)` to depth 3 on 5 continuous features, every row in bag
    /// (members differ only in their feature streams).
    fn node_features_by_depth(seed: u64, members: usize) -> Vec<Vec<usize>> {
        let (n, p) = (400, 5);
        let x = data(n, p, 11, 0);
        let y: Array1<f64> = x
            .outer_iter()
            .map(|r| r.iter().enumerate().map(|(j, v)| (j + 1) as f64 * v).sum())
            .collect();
        let mut params = params(Task::Regression, Splitter::Exact);
        params.split_features = Some(1);
        params.max_depth = Some(3);
        params.seed = seed;
        let e = fit_reg(params, &x, &y, &Array2::ones((members, n)));
        let mut counts = vec![vec![0usize; p]; 3];
        for t in e.trees() {
            let mut stack = vec![(0usize, 0usize)];
            while let Some((at, depth)) = stack.pop() {
                let node = t.nodes[at];
                if node.feature != LEAF {
                    counts[depth][node.feature as usize] += 1;
                    let c = node.child as usize;
                    stack.extend([(c, depth + 1), (c + 1, depth + 1)]);
                }
            }
        }
        counts
    }

    /// Pearson's chi-square p-value of `observed` against equal cells, for 5 cells (4 degrees
    /// of freedom): the chi-square survival function with even degrees of freedom 2m is
    /// exp(−x/2) Σ_{i<m} (x/2)^i / i! (Abramowitz & Stegun 1964, 26.4.21), here
    /// exp(−x/2)(1 + x/2).
    fn uniform_p_value(observed: &[usize]) -> f64 {
        assert_eq!(observed.len(), 5);
        let total: usize = observed.iter().sum();
        let expected = total as f64 / 5.0;
        let x: f64 = observed
            .iter()
            .map(|&o| (o as f64 - expected).powi(2) / expected)
            .sum();
        (-x / 2.0).exp() * (1.0 + x / 2.0)
    }

    #[test]
    fn the_candidate_feature_at_every_node_is_uniform() {
        // Random subspaces (Breiman 2001): with split_features = 1 each node tries one
        // feature drawn uniformly (the sampler of `best_split`, a partial Fisher–Yates over
        // the feature list that persists from node to node); every feature offers a valid
        // split here (distinct continuous values), so the split feature of every internal
        // node, at every depth, is uniform on the 5 features whatever the signal.
        // Chi-square per depth at p > 1e-3 (false failure 0.1% per depth by construction;
        // pass rate over 200 seeds 99.5%, 199 of 200: the ignored test below, run by
        // `cargo test candidate_feature_pass_rate -- --ignored`).
        let counts = node_features_by_depth(1, 600);
        assert_eq!(counts[0].iter().sum::<usize>(), 600);
        for (depth, observed) in counts.iter().enumerate() {
            // a lone candidate may cut off a single row, which is not split again
            assert!(observed.iter().sum::<usize>() > 500 << depth);
            assert!(
                uniform_p_value(observed) > 1e-3,
                "depth {depth}: {observed:?}"
            );
        }
        // The check can fail: over 1,200 nodes "always the first feature" and feature 0
        // drawn a quarter of the time (instead of a fifth) are rejected; a tenth too often
        // (264 instead of 240) is within the noise.
        assert!(uniform_p_value(&[1200, 0, 0, 0, 0]) < 1e-3);
        assert!(uniform_p_value(&[264, 234, 234, 234, 234]) > 1e-3);
        assert!(uniform_p_value(&[300, 225, 225, 225, 225]) < 1e-3);
    }

    #[test]
    #[ignore = "pass rate over 200 seeds (minutes); run with --ignored"]
    fn candidate_feature_pass_rate() {
        let passed = (1000..1200)
            .filter(|&seed| {
                node_features_by_depth(seed, 600)
                    .iter()
                    .all(|observed| uniform_p_value(observed) > 1e-3)
            })
            .count();
        println!("candidate feature at every node uniform: {passed} of 200 seeds pass");
        assert!(passed >= 198, "{passed} of 200");
    }
}
