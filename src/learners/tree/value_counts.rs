//! Exact splits of classification nodes over features with few distinct values, found
//! from a table of class counts per value rather than from the feature's sorted list.
//!
//! The sorted-list scan (see [`Grower::scan_exact`]) reads every row of the node for each
//! feature, and every split partitions every list. For a feature with a handful of values
//! (pixels, ratings, small counts) a node's rows fall in a handful of runs, and the scan only
//! needs the class counts of each run. A table of them is built for the smaller child
//! only (the larger one's is its parent's minus it), so a level reads about half its rows
//! once, in any order, and no list of such a feature is kept at all.
//!
//! Same trees, bit for bit: a boundary's class counts are sums of integer weights, exact
//! in any order, so every score is computed from the same numbers with the same
//! operations, and the boundaries are visited in the same order.

use super::columns::prefetch;
use super::growing::{clearly_better, may_beat, score_floor, Grower, Split, SLOTS_AHEAD};
use super::parameters::Criterion;

/// Features with at most this many distinct values are split from value counts.
pub(super) const FEW_VALUES: usize = 64;

/// The largest total weight of a member for which sums of squared class counts stay exact
/// in f64 (below 2^53), and counts fit a u32.
const MAX_COUNTED_WEIGHT: f64 = (1u64 << 26) as f64;

/// A table's count: u16 when the member's whole weight fits one (the table then half as
/// large, 20 KB rather than 40 KB for 64 features of 17 values and ten classes: it stays in
/// the first-level cache), u32 otherwise.
pub(super) trait Tally:
    Copy + Default + PartialEq + Into<f64> + std::ops::AddAssign + std::ops::SubAssign
{
    /// `w`, which the caller knows to fit.
    fn of(w: u32) -> Self;
}

impl Tally for u16 {
    #[inline(always)]
    fn of(w: u32) -> u16 {
        w as u16
    }
}

impl Tally for u32 {
    #[inline(always)]
    fn of(w: u32) -> u32 {
        w
    }
}

/// A node's value-count table (see [`ValueCounts`]).
pub(super) enum Table {
    Narrow(Vec<u16>),
    Wide(Vec<u32>),
}

/// One feature's part of a [`Table`].
pub(super) enum Part<'t> {
    Narrow(&'t [u16]),
    Wide(&'t [u32]),
}

/// Feature not counted: split from its sorted list.
const NOT_COUNTED: usize = usize::MAX;

/// The counted features of one member and its slots' values in them.
pub(super) struct ValueCounts {
    /// Per feature, the start of its counts in a node's table, or [`NOT_COUNTED`].
    start: Vec<usize>,
    /// The starts of the counted features, in feature order (the order of `slot_ranks`).
    counted_starts: Vec<usize>,
    /// Length of a node's table: per counted feature and value, `[W, W_0, …]` as in a
    /// node's statistics.
    table_len: usize,
    /// Per slot, the value rank of each counted feature (slot-major), so a table is filled
    /// reading one short line per slot.
    slot_ranks: Vec<u8>,
    /// Per slot, its weight (in-bag count).
    weight: Vec<u32>,
    /// Counts per value: `[W, W_0, …]`.
    width: usize,
    /// Whether tables hold u16 counts.
    narrow: bool,
    spare: Vec<Table>,
}

impl ValueCounts {
    /// The counted features of a member whose slots are rows `slot_row` with weights
    /// `weight`; `None` when no feature qualifies or the weights are too large to count
    /// exactly. `distinct[f]` are feature `f`'s sorted distinct values and `rank(f, row)`
    /// a row's rank among them.
    pub(super) fn new(
        distinct: &[Vec<f64>],
        rank: impl Fn(usize, u32) -> u32,
        slot_row: &[u32],
        weight: &[f64],
        stat_width: usize,
    ) -> Option<ValueCounts> {
        let total_weight = weight.iter().sum::<f64>();
        if total_weight > MAX_COUNTED_WEIGHT {
            return None;
        }
        let mut start = vec![NOT_COUNTED; distinct.len()];
        let mut counted = Vec::new();
        let mut table_len = 0;
        for (f, values) in distinct.iter().enumerate() {
            if values.len() <= FEW_VALUES {
                start[f] = table_len;
                // A feature of one value never splits: it has no part of the table.
                if values.len() > 1 {
                    counted.push(f);
                    table_len += values.len() * stat_width;
                }
            }
        }
        if counted.is_empty() {
            return None;
        }
        let mut slot_ranks = Vec::with_capacity(slot_row.len() * counted.len());
        for &row in slot_row {
            // Ranks below FEW_VALUES ≤ 255: a u8 holds them.
            slot_ranks.extend(counted.iter().map(|&f| rank(f, row) as u8));
        }
        Some(ValueCounts {
            counted_starts: counted.iter().map(|&f| start[f]).collect(),
            start,
            table_len,
            slot_ranks,
            weight: weight.iter().map(|&w| w as u32).collect(),
            width: stat_width,
            narrow: total_weight <= f64::from(u16::MAX),
            spare: Vec::new(),
        })
    }

    /// Whether feature `f` is split from value counts (it has no sorted list).
    #[inline]
    pub(super) fn counts(&self, f: usize) -> bool {
        self.start[f] != NOT_COUNTED
    }

    /// Feature `f`'s part of a node's table (`f` counted, with `n_values` distinct values).
    pub(super) fn of_feature<'t>(&self, f: usize, n_values: usize, table: &'t Table) -> Part<'t> {
        let len = if n_values > 1 {
            n_values * self.width
        } else {
            0
        };
        let range = self.start[f]..self.start[f] + len;
        match table {
            Table::Narrow(t) => Part::Narrow(&t[range]),
            Table::Wide(t) => Part::Wide(&t[range]),
        }
    }

    /// `parent −= child`, count by count (exact: the child's rows are the parent's).
    pub(super) fn subtract(parent: &mut Table, child: &Table) {
        fn minus<T: Tally>(p: &mut [T], c: &[T]) {
            p.iter_mut().zip(c).for_each(|(p, &c)| *p -= c);
        }
        match (parent, child) {
            (Table::Narrow(p), Table::Narrow(c)) => minus(p, c),
            (Table::Wide(p), Table::Wide(c)) => minus(p, c),
            _ => unreachable!("one member's tables have one width"),
        }
    }

    /// A table, zeroed.
    fn empty_table(&mut self) -> Table {
        let len = self.table_len;
        match self.spare.pop() {
            Some(Table::Narrow(mut t)) => {
                t.clear();
                t.resize(len, 0);
                Table::Narrow(t)
            }
            Some(Table::Wide(mut t)) => {
                t.clear();
                t.resize(len, 0);
                Table::Wide(t)
            }
            None if self.narrow => Table::Narrow(vec![0; len]),
            None => Table::Wide(vec![0; len]),
        }
    }

    /// Returns a table for reuse.
    pub(super) fn recycle(&mut self, table: Table) {
        self.spare.push(table);
    }

    /// The table of the slots `slots` of classes `class`.
    pub(super) fn table(&mut self, slots: &[u32], class: &[u32]) -> Table {
        let mut table = self.empty_table();
        match &mut table {
            Table::Narrow(t) => self.fill(t, slots, class),
            Table::Wide(t) => self.fill(t, slots, class),
        }
        table
    }

    fn fill<T: Tally>(&self, table: &mut [T], slots: &[u32], class: &[u32]) {
        let width = self.width;
        let n_counted = self.counted_starts.len();
        for (i, &slot) in slots.iter().enumerate() {
            if let Some(&ahead) = slots.get(i + SLOTS_AHEAD) {
                let ahead = ahead as usize;
                prefetch(&self.slot_ranks[ahead * n_counted]);
                prefetch(&self.weight[ahead]);
                prefetch(&class[ahead]);
            }
            let p = slot as usize;
            let (w, k) = (T::of(self.weight[p]), 1 + class[p] as usize);
            let ranks = &self.slot_ranks[p * n_counted..(p + 1) * n_counted];
            for (&rank, &start) in ranks.iter().zip(&self.counted_starts) {
                let o = start + usize::from(rank) * width;
                table[o] += w;
                table[o + k] += w;
            }
        }
    }
}

/// `Σ_k left_k²` and `Σ_k (total_k − left_k)²` over the classes `present`, in four
/// independent sums (the terms are exact integers, so any order gives the same bits).
#[inline(always)]
fn squares(left: &[f64], total: &[f64], present: &[usize]) -> (f64, f64) {
    let (mut a, mut c) = ([0.0; 4], [0.0; 4]);
    let mut quads = present.chunks_exact(4);
    for quad in &mut quads {
        for j in 0..4 {
            let (l, t) = (left[quad[j]], total[quad[j]]);
            a[j] += l * l;
            c[j] += (t - l) * (t - l);
        }
    }
    for (j, &k) in quads.remainder().iter().enumerate() {
        let (l, t) = (left[k], total[k]);
        a[j] += l * l;
        c[j] += (t - l) * (t - l);
    }
    ((a[0] + a[1]) + (a[2] + a[3]), (c[0] + c[1]) + (c[2] + c[3]))
}

impl Grower<'_> {
    /// [`scan_exact`](Self::scan_exact) of counted feature `f`, from its part `counts` of
    /// the node's table: the same boundaries in the same order, each scored from the same
    /// numbers, so the same split (and validity).
    pub(super) fn scan_counts<T: Tally>(
        &mut self,
        f: usize,
        counts: &[T],
        total: &[f64],
        node_best: Option<f64>,
    ) -> (bool, Option<Split>) {
        let width = self.stat_width;
        let floor = score_floor(node_best);
        let w_total = total[0];
        // Counts are integers below 2^26 (see MAX_COUNTED_WEIGHT), so in f64 they, their
        // squares and the sums of those are exact, whatever the order.
        let mut left = std::mem::take(&mut self.left);
        left.iter_mut().for_each(|v| *v = 0.0);
        // The classes present in the node (see `best_split`).
        let present = std::mem::take(&mut self.present_classes);
        // The values present in the node, gathered without a branch per value (which
        // would be mispredicted about as often as not).
        let mut values = std::mem::take(&mut self.present_values);
        values.clear();
        values.resize(counts.len() / width + 1, 0);
        let mut n_values = 0;
        for (value, bin) in counts.chunks_exact(width).enumerate() {
            values[n_values] = value as u32;
            n_values += usize::from(bin[0] != T::default());
        }
        let mut valid = false;
        let mut best: Option<(f64, u32, u32)> = None;
        for i in 0..n_values {
            let value = values[i] as usize;
            if i > 0 {
                // The boundary between the previous value present and this one.
                let (wl, wr) = (left[0], w_total - left[0]);
                if wl >= self.min_leaf && wr >= self.min_leaf {
                    valid = true;
                    let score = if self.config.criterion == Criterion::Gini {
                        let (a, c) = squares(&left, total, &present);
                        may_beat(a, c, wl, wr, best.map(|b| b.0), floor).then(|| a / wl + c / wr)
                    } else {
                        Some(self.proxy(&left, None) + self.proxy(total, Some(&left)))
                    };
                    if let Some(score) = score.filter(|&s| clearly_better(s, best.map(|b| b.0))) {
                        best = Some((score, values[i - 1], value as u32));
                    }
                }
            }
            let bin = &counts[value * width..(value + 1) * width];
            left[0] += bin[0].into();
            for &k in &present {
                left[k] += bin[k].into();
            }
        }
        self.present_values = values;
        self.left = left;
        self.present_classes = present;
        let best = best.map(|(score, cut, next)| Split {
            score,
            feature: f,
            by_bins: false,
            cut,
            next,
        });
        (valid, best)
    }
}

#[cfg(test)]
mod tests {
    use std::sync::atomic::AtomicBool;

    use ndarray::{concatenate, Array2, Axis};

    use super::super::columns::Columns;
    use super::super::growing::InBag;
    use super::super::test_support::*;
    use super::*;
    use crate::random::MemberStreams;

    /// Member trees grown with and without value counts, node for node.
    fn grown_both_ways(
        x: &Array2<f64>,
        target: &[f64],
        counts: &Array2<u8>,
        p: TreeParams,
    ) -> Vec<(Tree, Tree, Option<bool>)> {
        let bins = p.splitter != Splitter::Exact;
        let config = p.check().unwrap();
        let columns = Columns::build(&x.view(), bins, true, &pool(1));
        let stop = AtomicBool::new(false);
        (0..counts.nrows())
            .map(|m| {
                let grow = |counting: bool| {
                    let draws = MemberStreams::starting_at(7, m).take(1).remove(0);
                    let in_bag = InBag::Counts(counts.view());
                    let g = config.grower(&columns, target, in_bag, m, draws, counting);
                    // Whether it counts, and in u16.
                    let counted = g.value_counts.as_ref().map(|v| v.narrow);
                    (g.grow(&stop).unwrap(), counted)
                };
                let ((with, counted), (without, _)) = (grow(true), grow(false));
                (with, without, counted)
            })
            .collect()
    }

    #[test]
    fn value_counts_change_no_tree() {
        // Features of 2, 5, 17 and 64 values (counted) beside ones of 65 and 1,000+ values
        // (sorted lists) and, last, one of a single value (no part of the table); three classes tied to two of them with noise; both criteria, both
        // exact searches, a depth limit and a leaf minimum, bootstrap weights. Rows above
        // 2,048 so that 'auto' hands binned parents' children to the exact search.
        let rows = 3000;
        let x = concatenate(
            Axis(1),
            &[2, 5, 17, 64, 65, 0, 1]
                .map(|levels| data(rows, 1, 40 + levels as u64, levels))
                .iter()
                .map(|a| a.view())
                .collect::<Vec<_>>(),
        )
        .unwrap();
        let mut noise = Draws::from_seed(9);
        let target: Vec<f64> = x
            .outer_iter()
            .map(|r| {
                let v = r[2] / 17.0 + r[5] + 0.6 * noise.open_unit();
                ((v * 1.5) as usize % 3) as f64
            })
            .collect();
        let mut counts = Array2::<u8>::zeros((3, rows));
        let mut d = Draws::from_seed(5);
        for m in 0..3 {
            d.for_each_below(rows, rows, |i| counts[(m, i)] += 1);
        }
        let mut compared = 0;
        // Weights ×30 make a member's weight too large for u16 tables.
        for scale in [1, 30] {
            let counts = counts.mapv(|c| c * scale);
            for criterion in [Criterion::Gini, Criterion::Entropy] {
                for splitter in [Splitter::Exact, Splitter::Auto] {
                    for (max_depth, min_leaf) in [(None, 1), (Some(7), 5)] {
                        let mut p = params(Task::Classification { n_classes: 3 }, splitter);
                        (p.criterion, p.max_depth, p.min_leaf) = (criterion, max_depth, min_leaf);
                        for (m, (with, without, counted)) in
                            grown_both_ways(&x, &target, &counts, p)
                                .into_iter()
                                .enumerate()
                        {
                            assert_eq!(counted, Some(scale == 1), "counts, in u16 or u32");
                            assert!(with.nodes.len() > 40, "{}", with.nodes.len());
                            let case =
                                format!("×{scale} {criterion:?} {splitter:?} {max_depth:?} {m}");
                            assert_eq!(with.nodes, without.nodes, "{case}");
                            assert_eq!(with.values, without.values, "{case}");
                            compared += 1;
                        }
                    }
                }
            }
        }
        assert_eq!(compared, 48);
    }

    #[test]
    fn only_exact_classification_over_every_feature_counts_values() {
        let x = data(500, 3, 1, 4);
        let classes: Vec<f64> = (0..500).map(|i| (i % 2) as f64).collect();
        let counts = Array2::<u8>::ones((1, 500));
        let classification = params(Task::Classification { n_classes: 2 }, Splitter::Exact);
        let counted = |p: TreeParams| grown_both_ways(&x, &classes, &counts, p)[0].2.is_some();
        assert!(counted(classification.clone()));
        let mut some_features = classification.clone();
        some_features.split_features = Some(2);
        assert!(!counted(some_features));
        let histogram = params(Task::Classification { n_classes: 2 }, Splitter::Histogram);
        assert!(!counted(histogram));
        assert!(!counted(params(Task::Regression, Splitter::Exact)));
    }
}
