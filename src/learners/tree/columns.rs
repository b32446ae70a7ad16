//! The per-fit representation of `x` shared by all members: value ranks, sorted distinct
//! values and quantile bins.

use ndarray::{ArrayView1, ArrayView2};
use rayon::prelude::*;

use super::MAX_BINS;
use crate::numeric::Real;
use crate::parallel::Pool;

/// The per-fit representation of `x`, shared by all members: dense ranks of every value
/// within its feature, the sorted distinct values, and (for histograms) u8 bin codes and
/// bin edges, all column-major.
pub(super) struct Columns {
    pub(super) n_rows: usize,
    pub(super) n_features: usize,
    /// Per feature, `rank << 32 | row` of the rows sorted by value (only when exact splits
    /// are searched): each member's sorted lists are read off it in one pass, the ranks
    /// in order rather than looked up row by row.
    pub(super) order: Vec<u64>,
    pub(super) ranks: Vec<u32>,
    pub(super) distinct: Vec<Vec<f64>>,
    pub(super) codes: Vec<u8>,
    pub(super) edges: Vec<Vec<f64>>,
    /// Per feature and bin, the highest rank in the bin: codes grow with ranks, so
    /// `code ≤ b` exactly when `rank ≤ last_rank_of_bin[f][b]`.
    pub(super) last_rank_of_bin: Vec<Vec<u32>>,
}

/// Hints the processor to bring `value`'s cache line in; a no-op off x86-64.
#[inline(always)]
pub(super) fn prefetch<T>(value: &T) {
    #[cfg(target_arch = "x86_64")]
    {
        use std::arch::x86_64::{_mm_prefetch, _MM_HINT_T0};
        // SAFETY: a prefetch never faults, and SSE is part of the x86-64 baseline.
        unsafe { _mm_prefetch::<_MM_HINT_T0>((value as *const T).cast::<i8>()) };
    }
    #[cfg(not(target_arch = "x86_64"))]
    let _ = value;
}

/// An integer whose order is `f64::total_cmp`'s order of `v`: the sign bit flipped for
/// positive values, every bit for negative ones.
#[inline]
fn total_order_key(v: f64) -> u64 {
    let bits = v.to_bits();
    if bits >> 63 == 1 {
        !bits
    } else {
        bits | 1 << 63
    }
}

/// The value of a [`total_order_key`].
#[inline]
fn value_of_total_order_key(key: u64) -> f64 {
    f64::from_bits(if key >> 63 == 1 {
        key & !(1 << 63)
    } else {
        !key
    })
}

/// The threshold between adjacent distinct values `lo < hi`.
#[inline]
pub(super) fn midpoint(lo: f64, hi: f64) -> f64 {
    let m = lo / 2.0 + hi / 2.0;
    if m < lo || m >= hi {
        lo
    } else {
        m
    }
}

pub(super) struct FeatureColumn {
    pub(super) order: Vec<u32>,
    pub(super) ranks: Vec<u32>,
    pub(super) distinct: Vec<f64>,
    pub(super) codes: Vec<u8>,
    pub(super) edges: Vec<f64>,
    pub(super) last_rank_of_bin: Vec<u32>,
}

pub(super) fn build_column<T: Real>(column: ArrayView1<'_, T>, bins: bool) -> FeatureColumn {
    let n = column.len();
    // Sorted by the value's total order, then by row: as integers, which sort faster than
    // through a comparison of floats.
    let mut keys: Vec<(u64, u32)> = column
        .iter()
        .enumerate()
        .map(|(i, v)| (total_order_key(v.to_f64()), i as u32))
        .collect();
    keys.sort_unstable();
    let mut ranks = vec![0u32; n];
    let mut distinct: Vec<f64> = Vec::new();
    let mut multiplicity: Vec<usize> = Vec::new();
    for &(key, i) in &keys {
        let v = value_of_total_order_key(key);
        // -0.0 and 0.0 are one value (== rather than the bit order).
        if distinct.last() != Some(&v) {
            distinct.push(v);
            multiplicity.push(0);
        }
        *multiplicity.last_mut().expect("pushed above") += 1;
        ranks[i as usize] = (distinct.len() - 1) as u32;
    }
    let (mut codes, mut edges, mut last_rank_of_bin) = (Vec::new(), Vec::new(), Vec::new());
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
        last_rank_of_bin = vec![0; usize::from(bin_of_rank[d - 1]) + 1];
        for (r, &b) in bin_of_rank.iter().enumerate() {
            last_rank_of_bin[usize::from(b)] = r as u32;
        }
    }
    FeatureColumn {
        order: keys.into_iter().map(|(_, i)| i).collect(),
        ranks,
        distinct,
        codes,
        edges,
        last_rank_of_bin,
    }
}

impl Columns {
    pub(super) fn build<T: Real>(
        x: &ArrayView2<'_, T>,
        bins: bool,
        exact: bool,
        pool: &Pool,
    ) -> Columns {
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
            last_rank_of_bin: Vec::with_capacity(n_features),
        };
        for c in columns {
            if exact {
                let ranked = c
                    .order
                    .iter()
                    .map(|&row| (u64::from(c.ranks[row as usize]) << 32) | u64::from(row));
                out.order.extend(ranked);
            }
            out.ranks.extend_from_slice(&c.ranks);
            out.codes.extend_from_slice(&c.codes);
            out.distinct.push(c.distinct);
            out.edges.push(c.edges);
            out.last_rank_of_bin.push(c.last_rank_of_bin);
        }
        out
    }

    #[inline]
    pub(super) fn rank(&self, f: usize, row: u32) -> u32 {
        self.ranks[f * self.n_rows + row as usize]
    }

    #[inline]
    pub(super) fn code(&self, f: usize, row: u32) -> u8 {
        self.codes[f * self.n_rows + row as usize]
    }

    pub(super) fn n_bins(&self, f: usize) -> usize {
        self.edges[f].len() + 1
    }
}

#[cfg(test)]
mod tests {
    use super::super::test_support::*;
    use super::*;

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
    fn a_cut_between_bins_is_a_cut_between_ranks() {
        // Quantile bins (many distinct values, repeated ones) and one bin per value.
        for (rows, levels) in [(30_000, 0), (30_000, 700), (500, 40)] {
            let x = data(rows, 1, 8, levels);
            let c = build_column(x.column(0), true);
            assert_eq!(c.last_rank_of_bin.len(), c.edges.len() + 1);
            for (row, &rank) in c.ranks.iter().enumerate() {
                let code = c.codes[row];
                for (b, &last) in c.last_rank_of_bin.iter().enumerate() {
                    assert_eq!(usize::from(code) <= b, rank <= last, "row {row}, bin {b}");
                }
            }
        }
    }
}
