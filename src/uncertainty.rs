//! Standard errors of bagged predictions from one fitted ensemble: the infinitesimal
//! jackknife and the jackknife-after-bootstrap, with their Monte-Carlo bias corrections,
//! computed through members × members Gram matrices of the in-bag counts.
//!
//! Notation: B members, n training rows, N_bi the in-bag count of row i in member b,
//! t_b(x) member b's prediction at x, t̄(x) their mean, t̃_b = t_b − t̄.
//!
//! ```text
//! Infinitesimal jackknife (Efron 2014, "Estimation and accuracy after model selection",
//! JASA 109(507)):
//!     V_IJ(x) = Σ_i Cov_b(N_bi, t_b(x))²,   Cov_b(N_bi, t_b) = (1/B) Σ_b (N_bi − N̄_i) t̃_b
//! Because Σ_b t̃_b = 0 the centring of N drops out, so with G = N Nᵀ (B × B):
//!     V_IJ(x) = t̃(x)ᵀ G t̃(x) / B²
//! Monte-Carlo bias correction (Wager, Hastie & Efron 2014, "Confidence intervals for
//! random forests: the jackknife and the infinitesimal jackknife", JMLR 15):
//!     V_IJ-U(x) = V_IJ(x) − (n / B²) Σ_b t̃_b(x)²
//!
//! Jackknife-after-bootstrap (same paper): with O_bi = 1[N_bi = 0], o_i = Σ_b O_bi,
//!     V_J(x) = ((n − 1)/n) Σ_i (t̄_(−i)(x) − t̄(x))²,  t̄_(−i) = Σ_b O_bi t_b / o_i
//! and since t̄_(−i) − t̄ = Σ_b O_bi t̃_b / o_i, with H = Σ_i O_·i O_·iᵀ / o_i²:
//!     V_J(x) = ((n − 1)/n) t̃(x)ᵀ H t̃(x)
//! Rows that no member leaves out (o_i = 0) have no t̄_(−i); they are left out of the sum
//! and counted. Bias correction: t̄_(−i) averages about B/e members, so its Monte-Carlo
//! variance exceeds that of t̄ by about (e − 1) v/B with v = Σ_b t̃_b²/B; summed over rows:
//!     V_J-U(x) = V_J(x) − (e − 1)(n / B²) Σ_b t̃_b(x)²
//!
//! Subsampling without replacement, s rows per member (Wager & Athey 2018, "Estimation and
//! inference of heterogeneous treatment effects using random forests", JASA 113(523)):
//!     V_IJ(x) = ((n − 1)/n) (n/(n − s))² Σ_i Cov_b(N_bi, t_b(x))²
//! Derivation check (the bagged sample mean t = Σ_i N_i x_i / s): Var N_i = (s/n)(1 − s/n),
//! Cov(N_i, N_j) = −Var N_i/(n − 1) give Cov(N_i, t) = (n − s) (x_i − x̄) / (n (n − 1)), so
//! the factor turns Σ_i Cov² into Σ_i (x_i − x̄)² / (n (n − 1)), the unbiased variance of the
//! mean. The Monte-Carlo bias of Σ_i Ĉov² is Σ_i Var(N_i) v/B = s (n − s)/n · v/B, which the
//! corrected estimate subtracts (times the same factor).
//! ```

use std::collections::BTreeMap;
use std::ops::Range;

use ndarray::{Array1, Array2, ArrayView2, Axis};
use rayon::prelude::*;
use serde::{Deserialize, Serialize};

use crate::error::{Error, Result};
use crate::gram_kernel::{tile_dots_u8, MAX_COLUMNS};
use crate::members::MergeableState;
use crate::numeric::Real;
use crate::parallel::{watched, Monitor, Pool, Watch};
use crate::resampling::Count;

/// How the members' rows were drawn, which fixes the IJ scale and bias correction.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub enum DrawKind {
    /// With replacement (counts 0, 1, 2, …).
    Bootstrap,
    /// Without replacement, `rows` distinct rows per member.
    Subsample { rows: usize },
}

/// The Gram matrices of one ensemble's in-bag counts, built once and reused for any number
/// of prediction points.
#[derive(Debug, Clone, PartialEq)]
pub struct CountGram {
    n_members: usize,
    n_rows: usize,
    kind: DrawKind,
    /// G = N Nᵀ, exact integers stored as f64.
    gram: Array2<f64>,
    /// H = Σ_i O_·i O_·iᵀ / o_i² (rows with o_i = 0 excluded); built on first need.
    out_of_bag_gram: Option<Array2<f64>>,
    rows_never_out_of_bag: usize,
}

/// Rows per column block in the Gram kernels: 16 members × 8 KiB stay in L1/L2 (and the
/// u8 kernel's 32-bit lanes cannot overflow).
const COLUMN_BLOCK: usize = MAX_COLUMNS;
/// Members per tile side in the Gram kernels.
const TILE: usize = 16;

/// Σ_i a_i b_i for any count type, accumulated in u128 (cannot overflow).
#[inline]
fn dot_wide<C: Count>(a: &[C], b: &[C]) -> u128 {
    a.iter()
        .zip(b)
        .map(|(&x, &y)| u128::from(x.as_u64()) * u128::from(y.as_u64()))
        .sum()
}

/// A count type the uncertainty estimators accept; the dot product is chosen by width and
/// u8 (the usual case) gets the fast kernel.
pub trait GramCount: Count {
    /// Σ_i a_i b_i as an exact integer.
    fn dot_exact(a: &[Self], b: &[Self]) -> u128;
    /// Calls `add(a, b, Σ_i x_a[i] · x_b[i])` for every `a ∈ ra`, `b ∈ rb` with `b ≥ a`,
    /// `x_m = row(m)` (equal lengths, at most [`COLUMN_BLOCK`]).
    fn tile_dots<'r>(
        ra: Range<usize>,
        rb: Range<usize>,
        row: impl Fn(usize) -> &'r [Self],
        mut add: impl FnMut(usize, usize, u128),
    ) where
        Self: 'r,
    {
        for a in ra {
            for b in rb.start.max(a)..rb.end {
                add(a, b, Self::dot_exact(row(a), row(b)));
            }
        }
    }
}

impl GramCount for u8 {
    #[inline]
    fn dot_exact(a: &[u8], b: &[u8]) -> u128 {
        u128::from(crate::gram_kernel::dot_u8(a, b))
    }

    fn tile_dots<'r>(
        ra: Range<usize>,
        rb: Range<usize>,
        row: impl Fn(usize) -> &'r [u8],
        mut add: impl FnMut(usize, usize, u128),
    ) {
        tile_dots_u8(ra, rb, row, |a, b, v| add(a, b, u128::from(v)));
    }
}

macro_rules! wide_dot {
    ($($t:ty),*) => {$(
        impl GramCount for $t {
            #[inline]
            fn dot_exact(a: &[$t], b: &[$t]) -> u128 {
                dot_wide(a, b)
            }
        }
    )*};
}
wide_dot!(u16, u32, u64);

/// The upper-triangle tiles (first member, last member) × (first, last) of a B × B matrix,
/// in a fixed order so parallel results do not depend on scheduling.
fn tiles(members: usize) -> Vec<(usize, usize)> {
    let starts: Vec<usize> = (0..members).step_by(TILE).collect();
    let mut out = Vec::new();
    for (i, &a) in starts.iter().enumerate() {
        for &b in &starts[i..] {
            out.push((a, b));
        }
    }
    out
}

/// Fills a symmetric B × B matrix tile by tile: `tile(a0..a1, b0..b1, acc, watch)` adds
/// the entries (a, b), a ≤ b, of one tile into `acc[(a − a0) · TILE + (b − b0)]`, and
/// returns early once `watch` is stopped (checked per block of rows, never inside a dot
/// product). Tiles run in parallel in batches and every entry is computed by one task, so
/// results never depend on scheduling; the calling thread watches (progress in tiles, Ctrl-C
/// within one block of rows).
fn symmetric_by_tiles<T: Copy + Default + Send + Sync>(
    members: usize,
    pool: &Pool,
    monitor: &dyn Monitor,
    tile: impl Fn(std::ops::Range<usize>, std::ops::Range<usize>, &mut [T], &Watch) + Sync,
) -> Result<Array2<T>> {
    let tile_list = tiles(members);
    let per_batch = (pool.threads() * 8).max(1);
    watched(pool, monitor, tile_list.len(), |watch| {
        let mut out = Array2::<T>::default((members, members));
        for batch in tile_list.chunks(per_batch) {
            if watch.stopped() {
                break;
            }
            let blocks: Vec<(usize, usize, Vec<T>)> = batch
                .par_iter()
                .map(|&(a0, b0)| {
                    let mut acc = vec![T::default(); TILE * TILE];
                    tile(
                        a0..(a0 + TILE).min(members),
                        b0..(b0 + TILE).min(members),
                        &mut acc,
                        watch,
                    );
                    (a0, b0, acc)
                })
                .collect();
            for (a0, b0, acc) in blocks {
                for a in a0..(a0 + TILE).min(members) {
                    for b in b0.max(a)..(b0 + TILE).min(members) {
                        let v = acc[(a - a0) * TILE + (b - b0)];
                        out[[a, b]] = v;
                        out[[b, a]] = v;
                    }
                }
            }
            watch.advance(batch.len());
        }
        out
    })
}

impl CountGram {
    /// Builds G = N Nᵀ from in-bag counts (n_members × n_rows, any strides).
    ///
    /// # Errors
    /// `counts` with fewer than two members, no rows, or a member that draws no row;
    /// [`Error::Interrupted`] from the monitor.
    pub fn new<C: GramCount>(
        counts: ArrayView2<'_, C>,
        kind: Option<DrawKind>,
        pool: &Pool,
        monitor: &dyn Monitor,
    ) -> Result<Self> {
        let (n_members, n_rows) = counts.dim();
        if n_members < 2 {
            return Err(Error::value(
                "counts",
                format!("needs at least 2 members (rows), got {n_members}"),
            ));
        }
        if n_rows < 2 {
            return Err(Error::value(
                "counts",
                format!("needs at least 2 training rows (columns), got {n_rows}"),
            ));
        }
        // Contiguous member rows in the counts' own dtype (a copy only for strided input).
        let owned;
        let rows: ArrayView2<'_, C> = if counts.is_standard_layout() {
            counts
        } else {
            owned = counts.as_standard_layout().into_owned();
            owned.view()
        };
        let sums: Vec<u64> = rows
            .axis_iter(Axis(0))
            .map(|r| r.iter().map(|c| c.as_u64()).sum())
            .collect();
        if let Some(empty) = sums.iter().position(|&s| s == 0) {
            return Err(Error::value(
                "counts",
                format!("member {empty} has no in-bag row (all counts are zero)"),
            ));
        }
        let kind = match kind {
            Some(k) => k,
            None => detect_kind(rows, &sums),
        };
        if let DrawKind::Subsample { rows: s } = kind {
            if s == 0 || s >= n_rows {
                return Err(Error::value(
                    "counts",
                    format!(
                        "a subsample must draw between 1 and n_rows − 1 rows, got {s} of {n_rows}"
                    ),
                ));
            }
        }
        let slice = rows.as_slice().expect("standard layout");
        let row = |m: usize| &slice[m * n_rows..(m + 1) * n_rows];
        let gram = symmetric_by_tiles(
            n_members,
            pool,
            monitor,
            |ra, rb, acc: &mut [f64], watch| {
                for start in (0..n_rows).step_by(COLUMN_BLOCK) {
                    if watch.stopped() {
                        return;
                    }
                    let end = (start + COLUMN_BLOCK).min(n_rows);
                    C::tile_dots(
                        ra.clone(),
                        rb.clone(),
                        |m| &row(m)[start..end],
                        |a, b, v| {
                            acc[(a - ra.start) * TILE + (b - rb.start)] += v as f64;
                        },
                    );
                }
            },
        )?;
        Ok(CountGram {
            n_members,
            n_rows,
            kind,
            gram,
            out_of_bag_gram: None,
            rows_never_out_of_bag: 0,
        })
    }

    /// Builds H = Σ_i O_·i O_·iᵀ / o_i² (needed by the jackknife) from the same counts.
    ///
    /// The weight 1/o_i² depends on the row only through o_i, so the rows are sorted by o_i
    /// and H = Σ_k (1/k²) G_k with G_k the exact integer Gram of the out-of-bag indicators
    /// over the rows with o_i = k: one pass of the fast u8 kernel over a u8 copy of the
    /// indicators (the size of u8 counts; never a float copy).
    ///
    /// # Errors
    /// `counts` if its shape differs from the one G was built from.
    pub fn add_out_of_bag_gram<C: GramCount>(
        &mut self,
        counts: ArrayView2<'_, C>,
        pool: &Pool,
        monitor: &dyn Monitor,
    ) -> Result<()> {
        if counts.dim() != (self.n_members, self.n_rows) {
            return Err(Error::value(
                "counts",
                "shape differs from the counts the Gram was built from",
            ));
        }
        let members = counts.nrows();
        let OutOfBagIndicators {
            indicators,
            width,
            segments,
            never,
        } = out_of_bag_indicators(counts, pool);
        let row = |m: usize| &indicators[m * width..(m + 1) * width];
        let h = symmetric_by_tiles(members, pool, monitor, |ra, rb, acc: &mut [f64], watch| {
            for &(start, end, o) in &segments {
                if watch.stopped() {
                    return;
                }
                let weight = out_of_bag_weight(o);
                tile_dots_u8(
                    ra.clone(),
                    rb.clone(),
                    |m| &row(m)[start..end],
                    |a, b, v| {
                        acc[(a - ra.start) * TILE + (b - rb.start)] += weight * v as f64;
                    },
                );
            }
        })?;
        self.out_of_bag_gram = Some(h);
        self.rows_never_out_of_bag = never;
        Ok(())
    }

    /// Number of members B.
    pub fn n_members(&self) -> usize {
        self.n_members
    }

    /// Number of training rows n.
    pub fn n_rows(&self) -> usize {
        self.n_rows
    }

    /// How the rows were drawn (detected from the counts unless given).
    pub fn kind(&self) -> DrawKind {
        self.kind
    }

    /// G = N Nᵀ.
    pub fn gram(&self) -> &Array2<f64> {
        &self.gram
    }

    /// Rows that no member leaves out (excluded from the jackknife), once H is built.
    pub fn rows_never_out_of_bag(&self) -> usize {
        self.rows_never_out_of_bag
    }

    /// Whether H (the jackknife's Gram) has been built.
    pub fn has_out_of_bag_gram(&self) -> bool {
        self.out_of_bag_gram.is_some()
    }

    /// Scale of the IJ sum: 1 for the bootstrap, ((n − 1)/n)(n/(n − s))² for subsamples.
    fn ij_scale(&self) -> f64 {
        match self.kind {
            DrawKind::Bootstrap => 1.0,
            DrawKind::Subsample { rows: s } => {
                let n = self.n_rows as f64;
                (n - 1.0) / n * (n / (n - s as f64)).powi(2)
            }
        }
    }

    /// Multiplier of Σ_b t̃_b² in the IJ bias correction: n/B² for the bootstrap
    /// (Wager, Hastie & Efron 2014), s(n − s)/(n B²) for subsamples (see module docs).
    fn ij_correction_factor(&self) -> f64 {
        let b2 = (self.n_members as f64).powi(2);
        match self.kind {
            DrawKind::Bootstrap => self.n_rows as f64 / b2,
            DrawKind::Subsample { rows: s } => {
                let (n, s) = (self.n_rows as f64, s as f64);
                s * (n - s) / (n * b2)
            }
        }
    }

    /// Variance estimates at every point of `predictions` (members × n_points).
    ///
    /// # Errors
    /// `members` if its first axis differs from the counts' or it holds NaN/inf;
    /// `method` if the jackknife is asked for before [`add_out_of_bag_gram`].
    ///
    /// [`add_out_of_bag_gram`]: CountGram::add_out_of_bag_gram
    pub fn variance<T: Real>(
        &self,
        predictions: ArrayView2<'_, T>,
        method: Method,
        pool: &Pool,
        monitor: &dyn Monitor,
    ) -> Result<VarianceEstimate> {
        let (b_count, n_points) = predictions.dim();
        if b_count != self.n_members {
            return Err(Error::value(
                "members",
                format!(
                    "has {b_count} members (rows) but the counts have {}",
                    self.n_members
                ),
            ));
        }
        if method == Method::Jackknife && self.kind != DrawKind::Bootstrap {
            return Err(Error::value(
                "method",
                "the jackknife-after-bootstrap and its correction are defined for bootstrap \
                 draws; use method='ij' for subsamples",
            ));
        }
        let matrix = match method {
            Method::InfinitesimalJackknife => &self.gram,
            Method::Jackknife => self.out_of_bag_gram.as_ref().ok_or_else(|| {
                Error::value(
                    "method",
                    "the jackknife needs the out-of-bag Gram; build it first",
                )
            })?,
        };
        const POINTS: usize = 256;
        let starts: Vec<usize> = (0..n_points).step_by(POINTS).collect();
        // Watched: a block of points costs B² · POINTS operations, so the stop flag is
        // checked per block (never inside the product) and Ctrl-C is seen within one block.
        let parts: Vec<Result<Vec<[f64; 3]>>> = watched(pool, monitor, n_points, |watch| {
            starts
                .par_iter()
                .map(|&start| {
                    if watch.stopped() {
                        return Err(Error::Interrupted);
                    }
                    let end = (start + POINTS).min(n_points);
                    watch.advance(end - start);
                    let block = predictions.slice(ndarray::s![.., start..end]);
                    // Centre over members in f64: t̃ (B × c).
                    let mut centred = Array2::<f64>::zeros((b_count, end - start));
                    for (j, column) in block.axis_iter(Axis(1)).enumerate() {
                        let mut sum = 0.0;
                        for (b, &v) in column.iter().enumerate() {
                            let v = v.to_f64();
                            if !v.is_finite() {
                                return Err(Error::value(
                                    "members",
                                    "contains NaN or infinite predictions",
                                ));
                            }
                            centred[[b, j]] = v;
                            sum += v;
                        }
                        let mean = sum / b_count as f64;
                        centred.column_mut(j).mapv_inplace(|v| v - mean);
                    }
                    let product = matrix.dot(&centred);
                    Ok((0..end - start)
                        .map(|j| {
                            let t = centred.column(j);
                            let mean = block.column(j).iter().map(|v| v.to_f64()).sum::<f64>()
                                / b_count as f64;
                            [t.dot(&product.column(j)), t.dot(&t), mean]
                        })
                        .collect())
                })
                .collect()
        })?;
        let mut quadratic = Array1::<f64>::zeros(n_points);
        let mut spread = Array1::<f64>::zeros(n_points);
        let mut mean = Array1::<f64>::zeros(n_points);
        let mut k = 0;
        for part in parts {
            for [q, s, m] in part? {
                quadratic[k] = q;
                spread[k] = s;
                mean[k] = m;
                k += 1;
            }
        }
        let b2 = (b_count as f64).powi(2);
        let n = self.n_rows as f64;
        let (raw, correction) = match method {
            Method::InfinitesimalJackknife => {
                let scale = self.ij_scale();
                (
                    quadratic.mapv(|q| scale * q / b2),
                    spread.mapv(|s| scale * self.ij_correction_factor() * s),
                )
            }
            Method::Jackknife => (
                quadratic.mapv(|q| (n - 1.0) / n * q),
                spread.mapv(|s| (std::f64::consts::E - 1.0) * n / b2 * s),
            ),
        };
        let within = spread.mapv(|s| s / (b_count as f64 - 1.0));
        Ok(VarianceEstimate {
            raw,
            correction,
            within,
            mean,
        })
    }
}

/// The out-of-bag indicators O_bi = 1[N_bi = 0] of the rows with o_i = Σ_b O_bi > 0, as u8
/// member rows of `width` columns, the rows sorted by (o_i, i); `segments` holds each run of
/// equal o_i as (start, end, o_i), `never` counts the rows with o_i = 0.
struct OutOfBagIndicators {
    indicators: Vec<u8>,
    width: usize,
    segments: Vec<(usize, usize, u32)>,
    never: usize,
}

/// The weight 1/o² of a row with o out-of-bag members in H.
#[inline]
fn out_of_bag_weight(o: u32) -> f64 {
    1.0 / (f64::from(o) * f64::from(o))
}

fn out_of_bag_indicators<C: GramCount>(
    counts: ArrayView2<'_, C>,
    pool: &Pool,
) -> OutOfBagIndicators {
    let (members, n) = counts.dim();
    let out_members: Vec<u32> = counts
        .axis_iter(Axis(1))
        .map(|column| column.iter().filter(|c| c.as_u64() == 0).count() as u32)
        .collect();
    let never = out_members.iter().filter(|&&o| o == 0).count();
    let mut order: Vec<usize> = (0..n).filter(|&i| out_members[i] > 0).collect();
    order.sort_by_key(|&i| (out_members[i], i));
    let width = order.len();
    let mut segments: Vec<(usize, usize, u32)> = Vec::new();
    for (position, &i) in order.iter().enumerate() {
        let o = out_members[i];
        match segments.last_mut() {
            Some(last) if last.2 == o => last.1 = position + 1,
            _ => segments.push((position, position + 1, o)),
        }
    }
    let mut indicators = vec![0u8; members * width];
    pool.run(|| {
        indicators
            .par_chunks_mut(width.max(1))
            .enumerate()
            .for_each(|(m, out)| {
                for (slot, &i) in out.iter_mut().zip(&order) {
                    *slot = u8::from(counts[[m, i]].as_u64() == 0);
                }
            })
    });
    OutOfBagIndicators {
        indicators,
        width,
        segments,
        never,
    }
}

/// Per segment `(start, end, _)` of the indicator columns (member rows of `width` u8
/// columns), the packed upper triangle of its exact integer Gram Σ_{i in segment} O_·i O_·iᵀ:
/// one tiled pass computes every segment of a tile, so the tiles are scheduled once.
fn segment_grams(
    indicators: &[u8],
    width: usize,
    members: usize,
    segments: &[(usize, usize, u32)],
    pool: &Pool,
    monitor: &dyn Monitor,
) -> Result<Vec<Vec<u64>>> {
    let row = |m: usize| &indicators[m * width..(m + 1) * width];
    let depth = segments.len();
    let mut out = vec![vec![0u64; members * (members + 1) / 2]; depth];
    let tile_list = tiles(members);
    let per_batch = (pool.threads() * 8).max(1);
    // Watched: the stop flag is checked per member row of a tile (never inside a dot).
    watched(pool, monitor, tile_list.len(), |watch| {
        for batch in tile_list.chunks(per_batch) {
            if watch.stopped() {
                break;
            }
            let blocks: Vec<(usize, usize, Vec<u64>)> = batch
                .par_iter()
                .map(|&(a0, b0)| {
                    let mut acc = vec![0u64; depth * TILE * TILE];
                    let (ra, rb) = (a0..(a0 + TILE).min(members), b0..(b0 + TILE).min(members));
                    for (k, &(start, end, _)) in segments.iter().enumerate() {
                        if watch.stopped() {
                            break;
                        }
                        tile_dots_u8(
                            ra.clone(),
                            rb.clone(),
                            |m| &row(m)[start..end],
                            |a, b, v| {
                                acc[(k * TILE + a - a0) * TILE + (b - b0)] = v;
                            },
                        );
                    }
                    (a0, b0, acc)
                })
                .collect();
            for (a0, b0, acc) in blocks {
                for (k, gram) in out.iter_mut().enumerate() {
                    for a in a0..(a0 + TILE).min(members) {
                        for b in b0.max(a)..(b0 + TILE).min(members) {
                            gram[packed(members, a, b)] =
                                acc[(k * TILE + a - a0) * TILE + (b - b0)];
                        }
                    }
                }
            }
            watch.advance(batch.len());
        }
        out
    })
}

/// The stored form of a [`CountGram`] (postcard bytes), versioned for forward checks.
/// Postcard encodes fields by position, never by name: the bytes are pinned by the test
/// `stored_bytes_are_pinned`.
#[derive(Serialize, Deserialize)]
struct StoredGram {
    version: u32,
    n_members: u64,
    n_rows: u64,
    kind: DrawKind,
    gram: Vec<f64>,
    out_of_bag_gram: Option<Vec<f64>>,
    rows_never_out_of_bag: u64,
}

const STORED_VERSION: u32 = 1;

impl CountGram {
    /// Serialises to compact bytes (for pickling).
    pub fn to_bytes(&self) -> Vec<u8> {
        let stored = StoredGram {
            version: STORED_VERSION,
            n_members: self.n_members as u64,
            n_rows: self.n_rows as u64,
            kind: self.kind,
            gram: self.gram.iter().copied().collect(),
            out_of_bag_gram: self
                .out_of_bag_gram
                .as_ref()
                .map(|h| h.iter().copied().collect()),
            rows_never_out_of_bag: self.rows_never_out_of_bag as u64,
        };
        postcard::to_allocvec(&stored).expect("serialising plain data cannot fail")
    }

    /// Restores from [`to_bytes`](CountGram::to_bytes) output.
    ///
    /// # Errors
    /// `data` if the bytes are truncated, corrupt or from another version.
    pub fn from_bytes(data: &[u8]) -> Result<Self> {
        let bad = |why: &str| Error::value("data", format!("not a stored count Gram: {why}"));
        let stored: StoredGram = postcard::from_bytes(data).map_err(|e| bad(&e.to_string()))?;
        if stored.version != STORED_VERSION {
            return Err(bad(&format!(
                "version {} is not {STORED_VERSION}",
                stored.version
            )));
        }
        let b = usize::try_from(stored.n_members).map_err(|_| bad("member count"))?;
        let square = |v: Vec<f64>| {
            Array2::from_shape_vec((b, b), v).map_err(|_| bad("matrix size does not match"))
        };
        Ok(CountGram {
            n_members: b,
            n_rows: stored.n_rows as usize,
            kind: stored.kind,
            gram: square(stored.gram)?,
            out_of_bag_gram: stored.out_of_bag_gram.map(square).transpose()?,
            rows_never_out_of_bag: stored.rows_never_out_of_bag as usize,
        })
    }
}

/// Infers the draw kind: counts of 0/1 with the same number of rows in every member and
/// fewer than n_rows rows is a subsample; anything else is a bootstrap.
fn detect_kind<C: Count>(rows: ArrayView2<'_, C>, sums: &[u64]) -> DrawKind {
    let binary = rows.iter().all(|c| c.as_u64() <= 1);
    kind_from(binary, sums, rows.ncols() as u64)
}

/// [`detect_kind`] from what a stream keeps: whether every count is 0/1, the members' row
/// totals and the number of rows.
fn kind_from(binary: bool, sums: &[u64], n: u64) -> DrawKind {
    let same = sums.windows(2).all(|w| w[0] == w[1]);
    if binary && same && sums[0] < n {
        DrawKind::Subsample {
            rows: sums[0] as usize,
        }
    } else {
        DrawKind::Bootstrap
    }
}

/// Largest Gram entry the finished [`CountGram`] holds exactly (f64 integers, 2^53).
const EXACT_F64: u64 = 1 << 53;

/// Index of entry (a, b), a ≤ b, in the packed upper triangle (row-major) of a B × B
/// symmetric matrix.
#[inline]
fn packed(members: usize, a: usize, b: usize) -> usize {
    a * (2 * members - a + 1) / 2 + (b - a)
}

/// `into[k] += from[k]`, after the caller checked that no sum overflows u64.
fn add_exact(into: &mut [u64], from: &[u64]) {
    for (slot, &v) in into.iter_mut().zip(from) {
        *slot += v;
    }
}

fn gram_overflow() -> Error {
    Error::value(
        "counts",
        "a Gram entry Σ_i N_ai N_bi exceeds 2^64 − 1 (counts too large for exact integer sums)",
    )
}

/// The packed upper triangle of a symmetric integer matrix built by [`symmetric_by_tiles`].
fn packed_upper(full: &Array2<u128>) -> Result<Vec<u64>> {
    let members = full.nrows();
    let mut out = Vec::with_capacity(members * (members + 1) / 2);
    for a in 0..members {
        for b in a..members {
            out.push(u64::try_from(full[[a, b]]).map_err(|_| gram_overflow())?);
        }
    }
    Ok(out)
}

/// The count Gram built from chunks of training rows: the partial state of one chunk of
/// columns of `counts` (all members, some rows), merged with the states of other chunks by
/// exact integer addition and finished into the same [`CountGram`] as
/// [`CountGram::new`] (and [`CountGram::add_out_of_bag_gram`]) on all rows at once.
///
/// ```text
/// G = N Nᵀ = Σ_chunks N_c N_cᵀ               (a sum over rows, so over row chunks)
/// H = Σ_i w(o_i) O_·i O_·iᵀ,  w(o) = 1/o²   (o_i = Σ_b O_bi, the row's own out-of-bag count)
///   = Σ_o w(o) G_o,  G_o = Σ_{i: o_i = o} O_·i O_·iᵀ
/// ```
/// H is a sum over rows too: a row's weight depends on nothing but its own column of the
/// counts (its out-of-bag count o_i), which every chunk holds whole, so each chunk adds
/// exact integer Grams G_o keyed by o. `finish` forms Σ_o w(o) G_o in increasing o, the
/// order [`CountGram::add_out_of_bag_gram`] adds its segments in, so H is bit-identical.
///
/// Kept: the packed upper triangle of G (u64), each member's row total and the largest count
/// (for the scheme detection), the rows seen, and with the jackknife the G_o and the rows
/// never out of bag. Size: 8·B(B + 1)/2 bytes for G, times (1 + K) with the jackknife, K the
/// number of distinct out-of-bag counts among the rows (a few times √B for bootstrap counts).
///
/// Overflow: an entry of G is at most max_count² · n_rows; sums are checked in u64 and
/// refused beyond 2^64 − 1 (u8 counts: beyond about 2.8·10^14 rows), and `finish` refuses
/// entries beyond 2^53, where the f64 Gram would stop being exact.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct CountGramState {
    jackknife: bool,
    n_members: Option<u64>,
    n_rows: u64,
    gram: Vec<u64>,
    row_totals: Vec<u64>,
    max_count: u64,
    out_of_bag: BTreeMap<u32, Vec<u64>>,
    rows_never_out_of_bag: u64,
}

impl CountGramState {
    /// An empty state; `jackknife` also keeps the out-of-bag Grams.
    pub fn new(jackknife: bool) -> Self {
        CountGramState {
            jackknife,
            n_members: None,
            n_rows: 0,
            gram: Vec::new(),
            row_totals: Vec::new(),
            max_count: 0,
            out_of_bag: BTreeMap::new(),
            rows_never_out_of_bag: 0,
        }
    }

    /// Members B (None before the first chunk).
    pub fn n_members(&self) -> Option<usize> {
        self.n_members.map(|b| b as usize)
    }

    /// Rows seen so far.
    pub fn n_rows(&self) -> u64 {
        self.n_rows
    }

    /// Each member's Σ_i N_bi over the rows seen.
    pub fn row_totals(&self) -> &[u64] {
        &self.row_totals
    }

    /// The largest count seen.
    pub fn max_count(&self) -> u64 {
        self.max_count
    }

    /// Whether the out-of-bag Grams are kept.
    pub fn jackknife(&self) -> bool {
        self.jackknife
    }

    /// Adds a chunk of rows: `counts` (n_members × rows of the chunk, any strides).
    ///
    /// # Errors
    /// `counts` with no member, another number of members than earlier chunks, or sums that
    /// overflow u64 (the state is then unchanged); [`Error::Interrupted`] from the monitor.
    pub fn update<C: GramCount>(
        &mut self,
        counts: ArrayView2<'_, C>,
        pool: &Pool,
        monitor: &dyn Monitor,
    ) -> Result<()> {
        let (members, n) = counts.dim();
        if members == 0 {
            return Err(Error::value("counts", "a chunk has no member (row)"));
        }
        if let Some(b) = self.n_members.filter(|&b| b as usize != members) {
            return Err(Error::value(
                "counts",
                format!("has {members} members (rows) but the earlier chunks have {b}"),
            ));
        }
        // The chunk's own state, then one exact merge.
        let mut part = CountGramState::new(self.jackknife);
        part.n_members = Some(members as u64);
        part.n_rows = n as u64;
        part.gram = vec![0; members * (members + 1) / 2];
        part.row_totals = vec![0; members];
        if n > 0 {
            let owned;
            let rows: ArrayView2<'_, C> = if counts.is_standard_layout() {
                counts
            } else {
                owned = counts.as_standard_layout().into_owned();
                owned.view()
            };
            let slice = rows.as_slice().expect("standard layout");
            let row = |m: usize| &slice[m * n..(m + 1) * n];
            let full =
                symmetric_by_tiles(members, pool, monitor, |ra, rb, acc: &mut [u128], watch| {
                    for start in (0..n).step_by(COLUMN_BLOCK) {
                        if watch.stopped() {
                            return;
                        }
                        let end = (start + COLUMN_BLOCK).min(n);
                        C::tile_dots(
                            ra.clone(),
                            rb.clone(),
                            |m| &row(m)[start..end],
                            |a, b, v| acc[(a - ra.start) * TILE + (b - rb.start)] += v,
                        );
                    }
                })?;
            part.gram = packed_upper(&full)?;
            for (m, total) in part.row_totals.iter_mut().enumerate() {
                *total = row(m).iter().map(|c| c.as_u64()).sum();
            }
            part.max_count = slice.iter().map(|c| c.as_u64()).max().unwrap_or(0);
            if self.jackknife {
                let OutOfBagIndicators {
                    indicators,
                    width,
                    segments,
                    never,
                } = out_of_bag_indicators(rows, pool);
                part.rows_never_out_of_bag = never as u64;
                let grams = segment_grams(&indicators, width, members, &segments, pool, monitor)?;
                part.out_of_bag = segments.iter().map(|s| s.2).zip(grams).collect();
            }
        }
        self.merge(part)
    }

    /// The [`CountGram`] of all rows seen, of draw kind `kind` (detected as by
    /// [`CountGram::new`] when None).
    ///
    /// # Errors
    /// `counts` when no chunk was added, with fewer than two members or rows, a member with
    /// no in-bag row, a subsample size outside 1..n_rows − 1, or a Gram entry beyond 2^53.
    pub fn finish_as(&self, kind: Option<DrawKind>) -> Result<CountGram> {
        let Some(b) = self.n_members else {
            return Err(Error::value("counts", "no chunk of counts was added"));
        };
        let (n_members, n_rows) = (b as usize, self.n_rows as usize);
        if n_members < 2 {
            return Err(Error::value(
                "counts",
                format!("needs at least 2 members (rows), got {n_members}"),
            ));
        }
        if n_rows < 2 {
            return Err(Error::value(
                "counts",
                format!("needs at least 2 training rows (columns), got {n_rows}"),
            ));
        }
        if let Some(empty) = self.row_totals.iter().position(|&s| s == 0) {
            return Err(Error::value(
                "counts",
                format!("member {empty} has no in-bag row (all counts are zero)"),
            ));
        }
        let kind =
            kind.unwrap_or_else(|| kind_from(self.max_count <= 1, &self.row_totals, self.n_rows));
        if let DrawKind::Subsample { rows: s } = kind {
            if s == 0 || s >= n_rows {
                return Err(Error::value(
                    "counts",
                    format!(
                        "a subsample must draw between 1 and n_rows − 1 rows, got {s} of {n_rows}"
                    ),
                ));
            }
        }
        if self.gram.iter().any(|&v| v > EXACT_F64) {
            return Err(Error::value(
                "counts",
                "a Gram entry Σ_i N_ai N_bi exceeds 2^53, beyond which float64 cannot hold it \
                 exactly",
            ));
        }
        let unpack = |at: &dyn Fn(usize) -> f64| {
            let mut out = Array2::<f64>::zeros((n_members, n_members));
            for a in 0..n_members {
                for b in a..n_members {
                    let v = at(packed(n_members, a, b));
                    out[[a, b]] = v;
                    out[[b, a]] = v;
                }
            }
            out
        };
        let gram = unpack(&|k| self.gram[k] as f64);
        let out_of_bag_gram = self.jackknife.then(|| {
            // Σ_o w(o) G_o in increasing o, from 0.0: the order and the operations of
            // `add_out_of_bag_gram`, so the same f64.
            unpack(&|k| {
                let mut acc = 0.0;
                for (&o, g) in &self.out_of_bag {
                    acc += out_of_bag_weight(o) * g[k] as f64;
                }
                acc
            })
        });
        Ok(CountGram {
            n_members,
            n_rows,
            kind,
            gram,
            out_of_bag_gram,
            rows_never_out_of_bag: if self.jackknife {
                self.rows_never_out_of_bag as usize
            } else {
                0
            },
        })
    }
}

impl MergeableState for CountGramState {
    type Output = CountGram;

    fn check_stored(&self) -> Result<()> {
        let b = self.n_members.map_or(Some(0), |b| usize::try_from(b).ok());
        let pairs = b
            .and_then(|b| b.checked_add(1)?.checked_mul(b))
            .map(|k| k / 2);
        let ok = self.n_members != Some(0)
            && b == Some(self.row_totals.len())
            && pairs == Some(self.gram.len())
            && (self.jackknife || self.out_of_bag.is_empty())
            && self
                .out_of_bag
                .iter()
                .all(|(&o, g)| o > 0 && g.len() == self.gram.len());
        if ok {
            Ok(())
        } else {
            Err(Error::value(
                "state",
                "is not a consistent count Gram state (table sizes disagree)",
            ))
        }
    }

    fn merge(&mut self, other: Self) -> Result<()> {
        if other.jackknife != self.jackknife {
            return Err(Error::value(
                "other",
                "one state keeps the jackknife's out-of-bag Grams and the other does not",
            ));
        }
        let Some(b) = other.n_members else {
            return Ok(());
        };
        match self.n_members {
            None => {
                *self = other;
                return Ok(());
            }
            Some(a) if a != b => {
                return Err(Error::value(
                    "other",
                    format!("has {b} members but this state {a}"),
                ))
            }
            Some(_) => {}
        }
        // Every sum is checked before anything changes, so a refused merge leaves the state
        // as it was.
        let fits = |into: &[u64], from: &[u64]| {
            into.iter()
                .zip(from)
                .all(|(x, y)| x.checked_add(*y).is_some())
        };
        let all_fit = fits(&self.gram, &other.gram)
            && fits(&self.row_totals, &other.row_totals)
            && other
                .out_of_bag
                .iter()
                .all(|(o, g)| self.out_of_bag.get(o).is_none_or(|into| fits(into, g)));
        if !all_fit {
            return Err(gram_overflow());
        }
        add_exact(&mut self.gram, &other.gram);
        add_exact(&mut self.row_totals, &other.row_totals);
        self.max_count = self.max_count.max(other.max_count);
        self.n_rows += other.n_rows;
        self.rows_never_out_of_bag += other.rows_never_out_of_bag;
        for (o, g) in other.out_of_bag {
            match self.out_of_bag.get_mut(&o) {
                Some(into) => add_exact(into, &g),
                None => {
                    self.out_of_bag.insert(o, g);
                }
            }
        }
        Ok(())
    }

    fn finish(&self) -> Result<CountGram> {
        self.finish_as(None)
    }
}

/// Which variance estimator.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Method {
    /// Infinitesimal jackknife (Efron 2014).
    InfinitesimalJackknife,
    /// Jackknife-after-bootstrap (Wager, Hastie & Efron 2014).
    Jackknife,
}

impl Method {
    /// Parses `"ij"` or `"jackknife"`.
    pub fn parse(name: &str) -> Result<Self> {
        match name {
            "ij" => Ok(Method::InfinitesimalJackknife),
            "jackknife" => Ok(Method::Jackknife),
            other => Err(Error::value(
                "method",
                format!("expected 'ij' or 'jackknife', got {other:?}"),
            )),
        }
    }
}

/// Per-point pieces of a variance estimate; the corrected estimate is `raw − correction`.
#[derive(Debug, Clone, PartialEq)]
pub struct VarianceEstimate {
    /// The uncorrected estimate (V_IJ or V_J).
    pub raw: Array1<f64>,
    /// The Monte-Carlo bias correction subtracted by the corrected estimate.
    pub correction: Array1<f64>,
    /// Across-member variance of the predictions (ddof 1): the part more members average away.
    pub within: Array1<f64>,
    /// Ensemble mean prediction.
    pub mean: Array1<f64>,
}

/// The per-point parts of the bootstrap-of-little-bags variance: the corrected estimate is
/// `raw − correction`.
#[derive(Debug, Clone, PartialEq)]
pub struct LittleBagsEstimate {
    /// S²_B: the variance of the group means across groups (ddof 1).
    pub raw: Array1<f64>,
    /// W/ℓ: the mean within-group variance (ddof 1) over the group size.
    pub correction: Array1<f64>,
    /// W: the mean over groups of the within-group variance (ddof 1).
    pub within: Array1<f64>,
    /// The ensemble mean prediction (the mean of the group means).
    pub mean: Array1<f64>,
}

/// The bootstrap of little bags (Sexton & Laake 2009, "Standard errors for bagged and
/// random forest estimators", CSDA 53(3); Athey, Tibshirani & Wager 2019, "Generalized
/// random forests", Annals of Statistics 47(2), §4, eq. 12): the variance of the ensemble's
/// mean prediction over training sets from one ensemble drawn by
/// [`Scheme::LittleBags`](crate::resampling::Scheme::LittleBags), with a member budget that
/// does not grow with n.
///
/// ```text
/// Members come in G groups of ℓ (consecutive rows of `predictions`); group g shares a
/// half-sample H_g of floor(n/2) rows, and its members T_g1 … T_gℓ are fit on independent
/// subsamples of s rows of H_g. At a point x, given the training data D:
///     μ(H) = E[T | H, D]        σ²_H = Var(T | H, D)        (over the subsample draw)
///     B_g  = (1/ℓ) Σ_k T_gk                                 the group mean
///     S²_B = Σ_g (B_g − B̄)² / (G − 1)                       across groups
///     W    = (1/G) Σ_g Σ_k (T_gk − B_g)² / (ℓ − 1)          within groups
///     V̂    = S²_B − W/ℓ
/// Unbiasedness. Within a group the ℓ members are i.i.d. given H_g, so
///     E[B_g | H_g] = μ(H_g),  Var(B_g | H_g) = σ²_{H_g}/ℓ,  E[ddof-1 variance | H_g] = σ²_{H_g}.
/// The groups are i.i.d. given D (independent halves), so by the law of total variance
///     Var(B_g | D) = Var_H(μ(H)) + E_H[σ²_H]/ℓ,
/// E[S²_B | D] = Var(B_g | D) (ddof 1 over i.i.d. groups) and E[W | D] = E_H[σ²_H]; hence
///     E[V̂ | D] = Var_H(μ(H) | D):
/// the Monte-Carlo part E σ²_H/ℓ, which dominates S²_B when members are noisy, is removed
/// exactly for any G ≥ 2, ℓ ≥ 2.
/// Half-sampling. μ(·) is an average over s-subsets, a U-statistic of order s; its Hájek
/// projection is μ(A) − θ ≈ (s/|A|) Σ_{i∈A} ψ(Z_i). Over half-samples of h = n/2 rows
/// drawn without replacement from D,
///     Var_H((s/h) Σ_{i∈H} ψ_i | D) = (s/h)² · h (1 − h/n) · S²_ψ = (s²/n) S²_ψ,
/// the (unbiased-in-D) variance of the full-data projection (s/n) Σ_i ψ_i over training sets,
/// Var_D = (s²/n) Var ψ. The finite-population factor 1 − h/n = 1/2 is what makes halves
/// (and no other size) match. The higher-order terms of the U-statistic are larger on h
/// rows than on n, so V̂ overstates the variance as the share s/n grows; the members'
/// mean over all groups (each member a uniform s-subset of D) estimates μ(D), whose
/// variance is the target (the `variance` of the glossary, an infinite ensemble's).
/// ```
///
/// One pass over `predictions` (members × n_points, f32 or f64, any strides), parallel over
/// blocks of points, accumulated in f64: per point, Welford's update inside each group and
/// over the group means.
///
/// # Errors
/// `group_size` below 2 or not dividing the number of members; `members` with fewer than
/// two groups or NaN/infinite predictions.
pub fn little_bags_variance<T: Real>(
    predictions: ArrayView2<'_, T>,
    group_size: usize,
    pool: &Pool,
    monitor: &dyn Monitor,
) -> Result<LittleBagsEstimate> {
    let (n_members, n_points) = predictions.dim();
    if group_size < 2 {
        return Err(Error::value(
            "group_size",
            format!(
                "must be at least 2 (the within-group variance needs two members), got {group_size}"
            ),
        ));
    }
    if n_members % group_size != 0 {
        return Err(Error::value(
            "group_size",
            format!(
                "the {n_members} members do not split into whole groups of {group_size} \
                 (little bags lay members out in consecutive groups)"
            ),
        ));
    }
    let groups = n_members / group_size;
    if groups < 2 {
        return Err(Error::value(
            "members",
            format!(
                "needs at least 2 groups of {group_size} members for a variance across groups, \
                 got {groups}"
            ),
        ));
    }
    const POINTS: usize = 256;
    let starts: Vec<usize> = (0..n_points).step_by(POINTS).collect();
    let ell = group_size as f64;
    // Watched: the stop flag is checked per block of points (never inside the sums).
    let parts: Vec<Result<Vec<[f64; 3]>>> = watched(pool, monitor, n_points, |watch| {
        starts
            .par_iter()
            .map(|&start| {
                if watch.stopped() {
                    return Err(Error::Interrupted);
                }
                let width = (start + POINTS).min(n_points) - start;
                watch.advance(width);
                // Per point: the running group mean and sum of squares (Welford), the
                // running mean and sum of squares of the group means, Σ_g within_g.
                let mut group_mean = vec![0f64; width];
                let mut group_m2 = vec![0f64; width];
                let mut between_mean = vec![0f64; width];
                let mut between_m2 = vec![0f64; width];
                let mut within_sum = vec![0f64; width];
                for g in 0..groups {
                    group_mean.fill(0.0);
                    group_m2.fill(0.0);
                    for k in 0..group_size {
                        let row = predictions.row(g * group_size + k);
                        let row = row.slice(ndarray::s![start..start + width]);
                        let count = (k + 1) as f64;
                        for (j, &v) in row.iter().enumerate() {
                            let v = v.to_f64();
                            if !v.is_finite() {
                                return Err(Error::value(
                                    "members",
                                    "contains NaN or infinite predictions",
                                ));
                            }
                            let delta = v - group_mean[j];
                            group_mean[j] += delta / count;
                            group_m2[j] += delta * (v - group_mean[j]);
                        }
                    }
                    let count = (g + 1) as f64;
                    for j in 0..width {
                        within_sum[j] += group_m2[j] / (ell - 1.0);
                        let delta = group_mean[j] - between_mean[j];
                        between_mean[j] += delta / count;
                        between_m2[j] += delta * (group_mean[j] - between_mean[j]);
                    }
                }
                Ok((0..width)
                    .map(|j| {
                        [
                            between_m2[j] / (groups as f64 - 1.0),
                            within_sum[j] / groups as f64,
                            between_mean[j],
                        ]
                    })
                    .collect())
            })
            .collect()
    })?;
    let mut raw = Array1::<f64>::zeros(n_points);
    let mut within = Array1::<f64>::zeros(n_points);
    let mut mean = Array1::<f64>::zeros(n_points);
    let mut k = 0;
    for part in parts {
        for [r, w, m] in part? {
            raw[k] = r;
            within[k] = w;
            mean[k] = m;
            k += 1;
        }
    }
    Ok(LittleBagsEstimate {
        raw,
        correction: within.mapv(|w| w / ell),
        within,
        mean,
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::parallel::Silent;
    use crate::resampling::{Design, ResampleParams, Scheme};
    use approx::assert_relative_eq;

    const POOL: Pool = Pool::Global;

    fn draw(n: usize, members: usize, scheme: Scheme, fraction: f64) -> Array2<u8> {
        ResampleParams {
            n_rows: n,
            scheme,
            fraction,
            design: Design::Rows,
            group_size: 0,
        }
        .check()
        .unwrap()
        .counts_as::<u8>(3, members, &POOL, &Silent)
        .unwrap()
    }

    /// V_IJ and V_J by their defining sums.
    fn direct(counts: &Array2<u8>, t: &Array2<f64>) -> (Vec<f64>, Vec<f64>) {
        let (b, n) = counts.dim();
        let p = t.ncols();
        let mut ij = vec![0.0; p];
        let mut jk = vec![0.0; p];
        for x in 0..p {
            let tbar = t.column(x).sum() / b as f64;
            for i in 0..n {
                let nbar = counts.column(i).iter().map(|&c| c as f64).sum::<f64>() / b as f64;
                let cov: f64 = (0..b)
                    .map(|m| (counts[[m, i]] as f64 - nbar) * (t[[m, x]] - tbar))
                    .sum::<f64>()
                    / b as f64;
                ij[x] += cov * cov;
                let out: Vec<usize> = (0..b).filter(|&m| counts[[m, i]] == 0).collect();
                if !out.is_empty() {
                    let minus_i = out.iter().map(|&m| t[[m, x]]).sum::<f64>() / out.len() as f64;
                    jk[x] += (minus_i - tbar).powi(2);
                }
            }
            jk[x] *= (n as f64 - 1.0) / n as f64;
        }
        (ij, jk)
    }

    #[test]
    fn gram_forms_equal_the_defining_sums() {
        let (n, b, p) = (37, 23, 5);
        let counts = draw(n, b, Scheme::Bootstrap, 1.0);
        let t = Array2::from_shape_fn((b, p), |(m, x)| {
            (m as f64 * 0.7 + x as f64).sin()
                + counts.row(m).iter().take(5).map(|&c| c as f64).sum::<f64>()
        });
        let (ij, jk) = direct(&counts, &t);
        let mut gram = CountGram::new(counts.view(), None, &POOL, &Silent).unwrap();
        assert_eq!(gram.kind(), DrawKind::Bootstrap);
        gram.add_out_of_bag_gram(counts.view(), &POOL, &Silent)
            .unwrap();
        let v = gram
            .variance(t.view(), Method::InfinitesimalJackknife, &POOL, &Silent)
            .unwrap();
        let j = gram
            .variance(t.view(), Method::Jackknife, &POOL, &Silent)
            .unwrap();
        for x in 0..p {
            assert_relative_eq!(v.raw[x], ij[x], max_relative = 1e-10);
            assert_relative_eq!(j.raw[x], jk[x], max_relative = 1e-10);
        }
    }

    #[test]
    fn gram_is_exact_and_symmetric() {
        // More rows than one COLUMN_BLOCK and more members than one TILE, so the block sums
        // and the tile seams are both exercised.
        let counts = draw(COLUMN_BLOCK + 1_000, TILE + 5, Scheme::Bootstrap, 1.0);
        let gram = CountGram::new(counts.view(), None, &POOL, &Silent).unwrap();
        for a in [0, 7, TILE + 4] {
            for b in [0, TILE, TILE + 1] {
                let exact: u64 = counts
                    .row(a)
                    .iter()
                    .zip(counts.row(b))
                    .map(|(&x, &y)| x as u64 * y as u64)
                    .sum();
                assert_eq!(gram.gram()[[a, b]], exact as f64);
                assert_eq!(gram.gram()[[b, a]], exact as f64);
            }
        }
        let wide = counts.mapv(|c| c as u32);
        let gram32 = CountGram::new(wide.view(), None, &POOL, &Silent).unwrap();
        assert_eq!(gram32.gram(), gram.gram());
        let strided = counts.t().to_owned();
        let gram_t = CountGram::new(strided.t(), None, &POOL, &Silent).unwrap();
        assert_eq!(gram_t.gram(), gram.gram());
    }

    /// Σ_i (x_i − x̄)².
    fn sum_of_squares(x: &[f64]) -> f64 {
        let mean = x.iter().sum::<f64>() / x.len() as f64;
        x.iter().map(|v| (v - mean).powi(2)).sum()
    }

    /// Member predictions (members × columns): the mean of each column of `x` (rows ×
    /// columns) over the member's in-bag rows, Σ_i N_bi x_ij / Σ_i N_bi.
    fn bagged_means(counts: &Array2<u8>, x: &Array2<f64>) -> Array2<f64> {
        let weights = counts.mapv(f64::from);
        let draws = weights.row(0).sum();
        weights.dot(x) / draws
    }

    #[test]
    fn enumerated_bootstraps_give_the_closed_forms_exactly() {
        // All n^n equally likely ordered draws: the across-member covariances are the exact
        // multinomial ones (Var N_i = 1 − 1/n, Cov(N_i, N_j) = −1/n; Efron & Tibshirani
        // 1993), so for the bagged mean Cov(N_i, t) = (x_i − x̄)/n and
        // V_IJ = Σ(x − x̄)²/n² exactly (Efron 2014), with no Monte-Carlo error. With every
        // resample present t̄_(−i) = x̄_(−i), so V_J = ((n − 1)/n) Σ(x̄_(−i) − x̄)² =
        // Σ(x − x̄)²/(n(n − 1)), the ordinary jackknife variance of the mean. (The
        // Monte-Carlo corrections are checked against a truth over independent training
        // sets in tests/test_uncertainty.py, where their pass rate over seeds is measured.)
        let n: usize = 4;
        let members = n.pow(n as u32);
        let counts = Array2::from_shape_fn((members, n), |(m, i)| {
            let mut code = m;
            let mut count = 0u8;
            for _ in 0..n {
                count += u8::from(code % n == i);
                code /= n;
            }
            count
        });
        let x = ndarray::array![[0.3, -1.2], [2.0, 0.4], [-0.7, 1.1], [1.5, 3.0]];
        let t = bagged_means(&counts, &x);
        let mut gram = CountGram::new(counts.view(), None, &POOL, &Silent).unwrap();
        assert_eq!(gram.kind(), DrawKind::Bootstrap);
        gram.add_out_of_bag_gram(counts.view(), &POOL, &Silent)
            .unwrap();
        assert_eq!(gram.rows_never_out_of_bag(), 0);
        let ij = gram
            .variance(t.view(), Method::InfinitesimalJackknife, &POOL, &Silent)
            .unwrap();
        let jk = gram
            .variance(t.view(), Method::Jackknife, &POOL, &Silent)
            .unwrap();
        let nf = n as f64;
        for column in 0..2 {
            let squares = sum_of_squares(&x.column(column).to_vec());
            assert_relative_eq!(ij.raw[column], squares / (nf * nf), max_relative = 1e-10);
            assert_relative_eq!(
                jk.raw[column],
                squares / (nf * (nf - 1.0)),
                max_relative = 1e-10
            );
            // the corrections subtract a positive amount
            assert!(ij.correction[column] > 0.0 && jk.correction[column] > 0.0);
        }
    }

    #[test]
    fn enumerated_subsamples_give_the_unbiased_variance_of_the_mean() {
        // All C(n, s) subsamples: Var N_i = (s/n)(1 − s/n) and Cov(N_i, N_j) = −Var N_i/(n − 1)
        // exactly, so Cov(N_i, t) = (n − s)(x_i − x̄)/(n(n − 1)) for t = Σ N_i x_i / s and the
        // scale ((n − 1)/n)(n/(n − s))² (Wager & Athey 2018) turns Σ_i Cov² into
        // Σ(x − x̄)²/(n(n − 1)), the unbiased variance of the mean (module docs).
        let (n, s) = (8usize, 3usize);
        let subsets: Vec<u32> = (0u32..1 << n)
            .filter(|m| m.count_ones() == s as u32)
            .collect();
        assert_eq!(subsets.len(), 56);
        let counts = Array2::from_shape_fn((subsets.len(), n), |(m, i)| {
            u8::from(subsets[m] >> i & 1 == 1)
        });
        let values = [0.3, -1.2, 2.0, 0.4, -0.7, 1.1, 1.5, -0.2];
        let x = Array2::from_shape_fn((n, 1), |(i, _)| values[i]);
        let t = bagged_means(&counts, &x);
        let gram = CountGram::new(counts.view(), None, &POOL, &Silent).unwrap();
        assert_eq!(gram.kind(), DrawKind::Subsample { rows: s });
        let v = gram
            .variance(t.view(), Method::InfinitesimalJackknife, &POOL, &Silent)
            .unwrap();
        let nf = n as f64;
        let unbiased = sum_of_squares(&values) / (nf * (nf - 1.0));
        assert_relative_eq!(v.raw[0], unbiased, max_relative = 1e-10);
        // without the factor the sum is (n − s)²/(n(n − 1)) of it: the factor matters
        let factor = (nf - 1.0) / nf * (nf / (nf - s as f64)).powi(2);
        assert!((v.raw[0] / factor / unbiased - 1.0).abs() > 0.5);
        assert!(v.correction[0] > 0.0);
        // the subsample scheme refuses the jackknife
        assert!(gram
            .variance(t.view(), Method::Jackknife, &POOL, &Silent)
            .is_err());
    }

    /// The stream over the column chunks `bounds` (start, end) of `counts`, merged in order.
    fn streamed<C: GramCount>(
        counts: ArrayView2<'_, C>,
        bounds: &[(usize, usize)],
        jackknife: bool,
    ) -> CountGramState {
        let mut total = CountGramState::new(jackknife);
        for &(start, end) in bounds {
            let mut part = CountGramState::new(jackknife);
            part.update(counts.slice(ndarray::s![.., start..end]), &POOL, &Silent)
                .unwrap();
            total.merge(part).unwrap();
        }
        total
    }

    #[test]
    fn row_chunks_give_the_whole_gram_exactly() {
        // Reference: `CountGram::new` and `add_out_of_bag_gram` on all rows at once (the
        // in-memory path); G and H must be bit-identical, whatever the chunking.
        for (n, b, scheme, fraction) in [
            (COLUMN_BLOCK + 700, TILE + 3, Scheme::Bootstrap, 1.0),
            (60, 7, Scheme::Bootstrap, 0.5),
            (40, 5, Scheme::Subsample, 0.5),
        ] {
            let counts = draw(n, b, scheme, fraction);
            let mut whole = CountGram::new(counts.view(), None, &POOL, &Silent).unwrap();
            for bounds in [
                vec![(0, n)],
                vec![(0, 1), (1, 2), (2, n / 3), (n / 3, n)],
                (0..n).map(|i| (i, i + 1)).collect::<Vec<_>>(),
            ] {
                let state = streamed(counts.view(), &bounds, false);
                assert_eq!(state.finish().unwrap(), whole);
            }
            if scheme == Scheme::Bootstrap {
                whole
                    .add_out_of_bag_gram(counts.view(), &POOL, &Silent)
                    .unwrap();
                let bounds = [(0, 3), (3, 4), (4, n)];
                let state = streamed(counts.view(), &bounds, true);
                let finished = state.finish().unwrap();
                assert_eq!(finished, whole);
                // merged in another order: the same exact sums
                let mut reversed = CountGramState::new(true);
                for &(start, end) in bounds.iter().rev() {
                    reversed
                        .update(counts.slice(ndarray::s![.., start..end]), &POOL, &Silent)
                        .unwrap();
                }
                assert_eq!(reversed.finish().unwrap(), whole);
                // wider count types and strided chunks give the same state
                let wide = counts.mapv(u64::from);
                assert_eq!(streamed(wide.view(), &bounds, true), state);
                let transposed = counts.t().to_owned();
                assert_eq!(streamed(transposed.t(), &bounds, true), state);
            }
        }
    }

    #[test]
    fn gram_state_hand_case_and_bytes() {
        // counts [[1, 2, 0], [0, 1, 2]]: G = [[5, 2], [2, 5]] (by hand); rows 0 and 2 are out
        // of bag for one member each, with indicators (0, 1) and (1, 0), so
        // H = G_1 = [[1, 0], [0, 1]]; row 1 is never out of bag.
        let counts = ndarray::array![[1u8, 2, 0], [0, 1, 2]];
        let state = streamed(counts.view(), &[(0, 2), (2, 3)], true);
        assert_eq!(
            (state.n_members(), state.n_rows(), state.max_count()),
            (Some(2), 3, 2)
        );
        assert_eq!(state.row_totals(), &[3, 3]);
        let gram = state.finish().unwrap();
        assert_eq!(gram.gram(), &ndarray::array![[5.0, 2.0], [2.0, 5.0]]);
        assert_eq!(
            gram.out_of_bag_gram.as_ref().unwrap(),
            &ndarray::array![[1.0, 0.0], [0.0, 1.0]]
        );
        assert_eq!(gram.rows_never_out_of_bag(), 1);
        let bytes = state.to_bytes().unwrap();
        assert_eq!(CountGramState::from_bytes(&bytes).unwrap(), state);
        assert!(CountGramState::from_bytes(&bytes[..bytes.len() - 3]).is_err());
    }

    #[test]
    fn gram_state_refuses_bad_input_by_name() {
        let argument = |r: Result<()>| match r {
            Err(Error::InvalidValue { argument, .. }) => argument,
            other => panic!("expected an error, got {other:?}"),
        };
        let mut state = CountGramState::new(false);
        assert!(state.finish().is_err());
        state
            .update(ndarray::array![[1u8, 0], [0, 1]].view(), &POOL, &Silent)
            .unwrap();
        let three = ndarray::array![[1u8], [0], [1]];
        assert_eq!(
            argument(state.update(three.view(), &POOL, &Silent)),
            "counts"
        );
        let mut other = CountGramState::new(true);
        assert_eq!(argument(state.clone().merge(other.clone())), "other");
        other = CountGramState::new(false);
        other.update(three.view(), &POOL, &Silent).unwrap();
        assert_eq!(argument(state.clone().merge(other)), "other");
        // a member with no in-bag row
        let mut empty = CountGramState::new(false);
        empty
            .update(ndarray::array![[1u8, 1], [0, 0]].view(), &POOL, &Silent)
            .unwrap();
        assert!(empty.finish().is_err());
        // sums beyond u64 are refused, and the refused chunk leaves the state unchanged
        let huge = ndarray::array![[u64::from(u32::MAX) + 1, 1], [1, 1]];
        let mut big = CountGramState::new(false);
        let before = big.clone();
        assert_eq!(argument(big.update(huge.view(), &POOL, &Silent)), "counts");
        assert_eq!(big, before);
        // a merge whose sums overflow u64 is refused and changes nothing
        let near = ndarray::array![[3_100_000_000u64, 1], [1, 1]];
        let mut left = CountGramState::new(false);
        left.update(near.view(), &POOL, &Silent).unwrap();
        let mut right = left.clone();
        let before = left.clone();
        assert!(matches!(
            left.merge(right.clone()),
            Err(Error::InvalidValue { .. })
        ));
        assert_eq!(left, before);
        assert!(right.update(near.view(), &POOL, &Silent).is_err());
        assert_eq!(right, before);
        // entries beyond 2^53 are refused at the end (f64 would round them)
        let large = ndarray::array![[1u64 << 26, 1], [1, 1]];
        let mut state = CountGramState::new(false);
        state.update(large.view(), &POOL, &Silent).unwrap();
        state.update(large.view(), &POOL, &Silent).unwrap();
        assert!(state.finish().is_err());
        state = CountGramState::new(false);
        state.update(large.view(), &POOL, &Silent).unwrap();
        // one chunk: 2^52 + 1, exact in f64 (twice that, 2^53 + 2, is refused above)
        assert_eq!(
            state.finish().unwrap().gram()[[0, 0]],
            (1u64 << 52) as f64 + 1.0
        );
    }

    #[test]
    fn bytes_round_trip_and_reject_garbage() {
        let counts = draw(50, 6, Scheme::Bootstrap, 1.0);
        let mut gram = CountGram::new(counts.view(), None, &POOL, &Silent).unwrap();
        gram.add_out_of_bag_gram(counts.view(), &POOL, &Silent)
            .unwrap();
        let bytes = gram.to_bytes();
        assert_eq!(CountGram::from_bytes(&bytes).unwrap(), gram);
        assert!(CountGram::from_bytes(&bytes[..bytes.len() / 2]).is_err());
        assert!(CountGram::from_bytes(b"not a gram").is_err());
    }

    #[test]
    fn stored_bytes_are_pinned() {
        // G = [[5, 2], [2, 5]] for the counts below; postcard: varint version, n_members,
        // n_rows, the draw-kind variant, the length-prefixed little-endian matrix, no H,
        // rows never out of bag.
        let counts = ndarray::array![[1u8, 2, 0], [0, 1, 2]];
        let gram = CountGram::new(counts.view(), None, &POOL, &Silent).unwrap();
        let mut expected = vec![1u8, 2, 3, 0, 4];
        for v in [5.0f64, 2.0, 2.0, 5.0] {
            expected.extend_from_slice(&v.to_le_bytes());
        }
        expected.extend_from_slice(&[0, 0]);
        assert_eq!(gram.to_bytes(), expected);
        assert_eq!((gram.n_members(), gram.n_rows()), (2, 3));
    }

    #[test]
    fn bad_input_names_the_argument() {
        let counts = draw(10, 1, Scheme::Bootstrap, 1.0);
        let err = CountGram::new(counts.view(), None, &POOL, &Silent).unwrap_err();
        assert!(matches!(
            err,
            Error::InvalidValue {
                argument: "counts",
                ..
            }
        ));
        let mut zero = draw(10, 3, Scheme::Bootstrap, 1.0);
        zero.row_mut(1).fill(0);
        assert!(matches!(
            CountGram::new(zero.view(), None, &POOL, &Silent),
            Err(Error::InvalidValue {
                argument: "counts",
                ..
            })
        ));
        let counts = draw(10, 3, Scheme::Bootstrap, 1.0);
        let gram = CountGram::new(counts.view(), None, &POOL, &Silent).unwrap();
        let wrong = Array2::<f64>::zeros((4, 2));
        assert!(matches!(
            gram.variance(wrong.view(), Method::InfinitesimalJackknife, &POOL, &Silent),
            Err(Error::InvalidValue {
                argument: "members",
                ..
            })
        ));
        let nan = Array2::from_elem((3, 2), f64::NAN);
        assert!(matches!(
            gram.variance(nan.view(), Method::InfinitesimalJackknife, &POOL, &Silent),
            Err(Error::InvalidValue {
                argument: "members",
                ..
            })
        ));
        assert!(matches!(
            gram.variance(
                Array2::<f64>::zeros((3, 2)).view(),
                Method::Jackknife,
                &POOL,
                &Silent
            ),
            Err(Error::InvalidValue {
                argument: "method",
                ..
            })
        ));
    }
    /// S²_B, W and the mean by their defining sums (two passes, plain loops).
    fn little_bags_direct(t: &Array2<f64>, l: usize) -> Vec<[f64; 3]> {
        let (b, p) = t.dim();
        let g = b / l;
        (0..p)
            .map(|x| {
                let means: Vec<f64> = (0..g)
                    .map(|gi| (0..l).map(|k| t[[gi * l + k, x]]).sum::<f64>() / l as f64)
                    .collect();
                let grand = means.iter().sum::<f64>() / g as f64;
                let s2 = means.iter().map(|m| (m - grand).powi(2)).sum::<f64>() / (g - 1) as f64;
                let w = (0..g)
                    .map(|gi| {
                        (0..l)
                            .map(|k| (t[[gi * l + k, x]] - means[gi]).powi(2))
                            .sum::<f64>()
                            / (l - 1) as f64
                    })
                    .sum::<f64>()
                    / g as f64;
                [s2, w, grand]
            })
            .collect()
    }

    #[test]
    fn little_bags_equal_their_defining_sums() {
        // Sexton & Laake (2009); Athey, Tibshirani & Wager (2019), eq. 12.
        for (b, l, p) in [(12, 2, 7), (30, 3, 300), (8, 4, 1)] {
            let t = Array2::from_shape_fn((b, p), |(m, x)| {
                ((m * 31 + x * 7) as f64 * 0.37).sin() * 3.0 + 1e3 + (x as f64) * 0.01
            });
            let direct = little_bags_direct(&t, l);
            let v = little_bags_variance(t.view(), l, &POOL, &Silent).unwrap();
            let single = t.mapv(|v| v as f32);
            let v32 = little_bags_variance(single.view(), l, &POOL, &Silent).unwrap();
            let strided = t.t().to_owned();
            let vt = little_bags_variance(strided.t(), l, &POOL, &Silent).unwrap();
            for (x, &[s2, w, m]) in direct.iter().enumerate() {
                assert_relative_eq!(v.raw[x], s2, max_relative = 1e-10);
                assert_relative_eq!(v.within[x], w, max_relative = 1e-10);
                assert_relative_eq!(v.correction[x], w / l as f64, max_relative = 1e-10);
                assert_relative_eq!(v.mean[x], m, max_relative = 1e-12);
                assert_relative_eq!(vt.raw[x], v.raw[x], max_relative = 1e-12);
                assert!((v32.mean[x] - m).abs() < 1e-3);
            }
        }
    }

    #[test]
    fn little_bags_hand_case() {
        // Two groups of two at one point: members 1, 3 | 2, 6. Group means 2 and 4,
        // S²_B = ((2 − 3)² + (4 − 3)²)/1 = 2; within 2 and 8, W = 5, W/ℓ = 2.5.
        let t = ndarray::array![[1.0f64], [3.0], [2.0], [6.0]];
        let v = little_bags_variance(t.view(), 2, &POOL, &Silent).unwrap();
        assert_eq!(v.raw[0], 2.0);
        assert_eq!(v.within[0], 5.0);
        assert_eq!(v.correction[0], 2.5);
        assert_eq!(v.mean[0], 3.0);
        let empty = Array2::<f64>::zeros((4, 0));
        assert_eq!(
            little_bags_variance(empty.view(), 2, &POOL, &Silent)
                .unwrap()
                .raw
                .len(),
            0
        );
    }

    #[test]
    fn little_bags_recover_the_half_sample_variance_of_a_mean() {
        // The subsampled mean of a fixed sample x: μ(H) is the half's mean, whose variance
        // over halves of h = n/2 rows is (1/h)(1 − h/n) S²_x = S²_x / n (sampling without
        // replacement; Cochran 1977, Sampling Techniques, eq. 2.8), with S²_x the ddof-1
        // variance of x.
        let (n, l, groups) = (400usize, 2usize, 3000usize);
        let x: Vec<f64> = (0..n).map(|i| ((i * 7919) % 211) as f64 / 10.0).collect();
        let counts = ResampleParams {
            n_rows: n,
            scheme: Scheme::LittleBags,
            fraction: 0.1,
            design: Design::Rows,
            group_size: l,
        }
        .check()
        .unwrap()
        .counts_as::<u8>(5, groups * l, &POOL, &Silent)
        .unwrap();
        let t = Array2::from_shape_fn((groups * l, 1), |(m, _)| {
            counts
                .row(m)
                .iter()
                .zip(&x)
                .map(|(&c, &xi)| c as f64 * xi)
                .sum::<f64>()
                / 40.0
        });
        let v = little_bags_variance(t.view(), l, &POOL, &Silent).unwrap();
        let mean = x.iter().sum::<f64>() / n as f64;
        let s2 = x.iter().map(|xi| (xi - mean).powi(2)).sum::<f64>() / (n - 1) as f64;
        let truth = s2 / n as f64;
        let corrected = v.raw[0] - v.correction[0];
        // Standard error of V̂ under normal theory (common practice): Var S²_B ≈
        // 2 (S²_B)²/(G − 1) and Var(W/ℓ) ≈ 2 (W/ℓ)²/(G(ℓ − 1)).
        let g = groups as f64;
        let se = (2.0 * v.raw[0].powi(2) / (g - 1.0)
            + 2.0 * v.correction[0].powi(2) / (g * (l as f64 - 1.0)))
            .sqrt();
        assert!(
            (corrected - truth).abs() < 4.0 * se,
            "{corrected} vs {truth} ± {se}"
        );
        // Without the correction the figure is several times too large.
        assert!(
            (v.raw[0] - truth).abs() > 10.0 * se,
            "{} vs {truth}",
            v.raw[0]
        );
    }

    #[test]
    fn little_bags_bad_input_names_the_argument() {
        let t = Array2::<f64>::zeros((6, 3));
        let argument = |r: Result<LittleBagsEstimate>| match r {
            Err(Error::InvalidValue { argument, .. }) => argument,
            other => panic!("expected an error, got {other:?}"),
        };
        assert_eq!(
            argument(little_bags_variance(t.view(), 1, &POOL, &Silent)),
            "group_size"
        );
        assert_eq!(
            argument(little_bags_variance(t.view(), 4, &POOL, &Silent)),
            "group_size"
        );
        assert_eq!(
            argument(little_bags_variance(t.view(), 6, &POOL, &Silent)),
            "members"
        );
        let mut nan = t.clone();
        nan[[3, 1]] = f64::NAN;
        assert_eq!(
            argument(little_bags_variance(nan.view(), 3, &POOL, &Silent)),
            "members"
        );
    }
}
