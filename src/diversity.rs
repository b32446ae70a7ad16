//! Classifier diversity: how differently the members of an ensemble err (Kuncheva &
//! Whitaker 2003).
//!
//! Every measure is a function of a few integer counts over the points, kept in a
//! mergeable [`DiversityState`]: per member the number of correct points and of each
//! predicted class, per pair of members the number of points where both are correct and
//! where both give the same label, and the tally of points by how many members are correct.
//! A chunk of points yields such a state; states merge by checked addition (an overflow is
//! an error, never a wrap), so the result is the same for any split into chunks and any
//! thread count, exactly. [`DiversityState::finish`] turns the counts into the measures.
//!
//! Inside an update the points are read in blocks of [`BLOCK_POINTS`]: each block's labels
//! are packed into u8/u16/u32 codes (the narrowest that holds `n_classes`) with a 0/1
//! correct flag, and tiles of member pairs are then counted in parallel with tight,
//! vectorisable loops over the block.
//!
//! Sources (formulas written from memory of the papers; the Python tests check them
//! against independent implementations and the identities between them):
//!
//! ```text
//! pairwise and non-pairwise    Kuncheva, L. I. & Whitaker, C. J. (2003), "Measures of
//! diversity measures           diversity in classifier ensembles and their relationship
//!                              with the ensemble accuracy", Machine Learning 51(2)
//! Cohen's kappa                Cohen, J. (1960), "A coefficient of agreement for nominal
//!                              scales", Educ. Psychol. Meas. 20
//! ```

use ndarray::{ArrayView2, ArrayView3, Axis};
use rayon::prelude::*;
use serde::{Deserialize, Serialize};

use crate::error::{zeroed, Error, Result};
use crate::members::{for_chunks, no_slots, vote, Chunks};
use crate::numeric::Real;
use crate::parallel::{Monitor, Pool};

/// Points per block: the unit of the inner loops and of progress reports. A block's codes
/// for 100 members take 400 kB at most (u32 codes), its correct flags 400 kB at most.
pub const BLOCK_POINTS: usize = 4096;

/// Member rows per parallel tile of the pair loop (a tile counts the pairs (i, j), i in
/// the tile, j > i).
const TILE_MEMBERS: usize = 4;

/// Largest number of classes (the shared cap; the state keeps members × n_classes counts).
pub use crate::members::MAX_CLASSES;

/// An unsigned label code of a block (u8, u16 or u32, chosen by the number of classes).
trait Code: Copy + Default + Eq + Send + Sync {
    /// The code of a class (the caller checked that it fits).
    fn of(class: usize) -> Self;
    /// The class of a code.
    fn index(self) -> usize;
}

macro_rules! impl_code {
    ($($code:ty),*) => {$(
        impl Code for $code {
            #[inline]
            fn of(class: usize) -> Self {
                class as $code
            }
            #[inline]
            fn index(self) -> usize {
                self as usize
            }
        }
    )*};
}

impl_code!(u8, u16, u32);

/// Member predictions of one chunk of points.
#[derive(Debug, Clone, Copy)]
pub enum Predictions<'a, T> {
    /// `(members, n_points)` class indices.
    Labels(ArrayView2<'a, i64>),
    /// `(members, n_points, n_classes)` probabilities; each member's label is its argmax
    /// (among tied classes the lowest index, as in the majority vote).
    Probabilities(ArrayView3<'a, T>),
}

impl<T> Predictions<'_, T> {
    fn dim(&self) -> (usize, usize) {
        match self {
            Predictions::Labels(a) => a.dim(),
            Predictions::Probabilities(a) => (a.dim().0, a.dim().1),
        }
    }
}

fn overflow() -> Error {
    Error::CountOverflow { max: u64::MAX }
}

fn add(a: u64, b: u64) -> Result<u64> {
    a.checked_add(b).ok_or_else(overflow)
}

fn add_all(into: &mut [u64], from: &[u64]) -> Result<()> {
    for (a, &b) in into.iter_mut().zip(from) {
        *a = add(*a, b)?;
    }
    Ok(())
}

/// The mergeable counts of the diversity measures over the points seen so far.
///
/// ```text
/// n                 number of points
/// a_i               points where member i is correct                      (members)
/// N11_ij            points where members i and j are both correct         (i < j)
/// S_ij              points where members i and j give the same label      (i < j)
/// n_ic              points where member i predicts class c                (members × K)
/// T_l               points where exactly l members are correct            (l = 0..members)
/// merge: every count added, checked (overflow is Error::CountOverflow)
/// ```
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct DiversityState {
    members: usize,
    n_classes: usize,
    n_points: u64,
    correct: Vec<u64>,
    /// Row-major members × members; only i < j is used.
    both_correct: Vec<u64>,
    /// Row-major members × members; only i < j is used.
    same_label: Vec<u64>,
    /// Row-major members × n_classes.
    class_counts: Vec<u64>,
    tally: Vec<u64>,
}

/// The diversity measures of a [`DiversityState`]; matrices are row-major members × members.
#[derive(Debug, Clone, PartialEq)]
pub struct Diversity {
    pub members: usize,
    pub n_points: u64,
    pub accuracy: Vec<f64>,
    pub yule_q: Vec<f64>,
    pub correlation: Vec<f64>,
    pub disagreement: Vec<f64>,
    pub double_fault: Vec<f64>,
    pub kappa: Vec<f64>,
    /// Means over the pairs i < j of the five matrices above (undefined pairs left out; NaN
    /// when every pair is undefined).
    pub mean_yule_q: f64,
    pub mean_correlation: f64,
    pub mean_disagreement: f64,
    pub mean_double_fault: f64,
    pub mean_kappa: f64,
    /// Pairs i < j where Yule's Q, the correlation and Cohen's kappa are undefined (NaN).
    pub undefined_yule_q: usize,
    pub undefined_correlation: usize,
    pub undefined_kappa: usize,
    pub entropy: f64,
    pub kohavi_wolpert: f64,
    pub interrater_kappa: f64,
    pub difficulty: f64,
    pub generalized_diversity: f64,
    pub coincident_failure: f64,
    /// Per member, its mean disagreement with the other members.
    pub redundancy: Vec<f64>,
    pub correct_tally: Vec<u64>,
}

/// Packed codes and correct flags of one block of points for every member.
struct Block<C> {
    points: usize,
    codes: Vec<C>,
    correct: Vec<u8>,
}

impl DiversityState {
    /// An empty state for `members` members and `n_classes` classes.
    ///
    /// # Errors
    /// `members` (fewer than 2), `n_classes` (0 or more than [`MAX_CLASSES`]).
    pub fn new(members: usize, n_classes: usize) -> Result<Self> {
        if members < 2 {
            return Err(Error::value(
                "members",
                format!("diversity needs at least 2 members, got {members}"),
            ));
        }
        if n_classes == 0 || n_classes > MAX_CLASSES {
            return Err(Error::value(
                "n_classes",
                format!("must lie in 1..={MAX_CLASSES}, got {n_classes}"),
            ));
        }
        let square = members
            .checked_mul(members)
            .ok_or_else(|| Error::value("members", format!("{members} members are too many")))?;
        let cells = members.checked_mul(n_classes).ok_or_else(|| {
            Error::value("n_classes", format!("{n_classes} classes are too many"))
        })?;
        // The large tables first, so an impossible size fails before anything is filled.
        let both_correct = zeroed(square, "members")?;
        let same_label = zeroed(square, "members")?;
        let class_counts = zeroed(cells, "n_classes")?;
        Ok(DiversityState {
            members,
            n_classes,
            n_points: 0,
            correct: zeroed(members, "members")?,
            both_correct,
            same_label,
            class_counts,
            tally: zeroed(members + 1, "members")?,
        })
    }

    /// Number of members.
    pub fn members(&self) -> usize {
        self.members
    }

    /// Number of classes.
    pub fn n_classes(&self) -> usize {
        self.n_classes
    }

    /// Number of points added so far.
    pub fn n_points(&self) -> u64 {
        self.n_points
    }

    /// The tally T_l, l = 0..members.
    pub fn tally(&self) -> &[u64] {
        &self.tally
    }

    /// Adds `other` (the counts of other points) to this state.
    ///
    /// # Errors
    /// `other` (a different number of members or classes); [`Error::CountOverflow`] when a
    /// count would exceed u64 (this state is then left unchanged).
    pub fn merge(&mut self, other: &DiversityState) -> Result<()> {
        if other.members != self.members || other.n_classes != self.n_classes {
            return Err(Error::value(
                "other",
                format!(
                    "has {} members and {} classes but this state has {} and {}",
                    other.members, other.n_classes, self.members, self.n_classes
                ),
            ));
        }
        let mut merged = self.clone();
        merged.n_points = add(merged.n_points, other.n_points)?;
        add_all(&mut merged.correct, &other.correct)?;
        add_all(&mut merged.both_correct, &other.both_correct)?;
        add_all(&mut merged.same_label, &other.same_label)?;
        add_all(&mut merged.class_counts, &other.class_counts)?;
        add_all(&mut merged.tally, &other.tally)?;
        *self = merged;
        Ok(())
    }

    /// Adds the predictions of every member at a chunk of points with their targets `y`.
    ///
    /// # Errors
    /// `members` (wrong number of members or classes, no points, a label outside
    /// 0..n_classes, NaN in probabilities), `y` (wrong length, a label outside
    /// 0..n_classes), [`Error::CountOverflow`]. On error the state is unchanged.
    pub fn update<T: Real>(
        &mut self,
        predictions: Predictions<'_, T>,
        y: ndarray::ArrayView1<'_, i64>,
        pool: &Pool,
        monitor: &dyn Monitor,
    ) -> Result<()> {
        let (m, n) = predictions.dim();
        if m != self.members {
            return Err(Error::value(
                "members",
                format!(
                    "has {m} members but the state was made for {}",
                    self.members
                ),
            ));
        }
        if n == 0 {
            return Err(Error::value("members", "is empty (no points)"));
        }
        if y.len() != n {
            return Err(Error::value(
                "y",
                format!("has {} values but `members` has {n} points", y.len()),
            ));
        }
        if let Predictions::Probabilities(p) = predictions {
            if p.dim().2 != self.n_classes {
                return Err(Error::value(
                    "members",
                    format!(
                        "has {} classes but `n_classes` is {}",
                        p.dim().2,
                        self.n_classes
                    ),
                ));
            }
        }
        let mut chunk = DiversityState::new(self.members, self.n_classes)?;
        if self.n_classes <= 1 << 8 {
            chunk.add_blocks::<u8, T>(predictions, y, pool, monitor)?;
        } else if self.n_classes <= 1 << 16 {
            chunk.add_blocks::<u16, T>(predictions, y, pool, monitor)?;
        } else {
            chunk.add_blocks::<u32, T>(predictions, y, pool, monitor)?;
        }
        self.merge(&chunk)
    }

    fn add_blocks<C: Code, T: Real>(
        &mut self,
        predictions: Predictions<'_, T>,
        y: ndarray::ArrayView1<'_, i64>,
        pool: &Pool,
        monitor: &dyn Monitor,
    ) -> Result<()> {
        let (m, n) = predictions.dim();
        let k = self.n_classes;
        // One block in flight at a time: a block holds members × BLOCK_POINTS codes, and the
        // pair counts of each block are added (in parallel over pairs) before the next.
        let chunks = Chunks {
            n_points: n,
            chunk_points: BLOCK_POINTS,
            per_round: 1,
        };
        let work = |points: std::ops::Range<usize>, _: &mut ()| -> Result<Block<C>> {
            let (start, b) = (points.start, points.len());
            let targets = y
                .slice(ndarray::s![points])
                .iter()
                .map(|&label| class_of(label, k, "y"))
                .collect::<Result<Vec<usize>>>()?;
            let mut block = Block::<C> {
                points: b,
                codes: vec![C::default(); m * b],
                correct: vec![0; m * b],
            };
            pool.run(|| {
                block
                    .codes
                    .par_chunks_mut(b)
                    .zip(block.correct.par_chunks_mut(b))
                    .take(m)
                    .enumerate()
                    .try_for_each(|(i, (codes, correct))| {
                        encode_member(predictions, i, start, k, &targets, codes, correct)
                    })
            })?;
            Ok(block)
        };
        let merge = |block: Block<C>| self.add_block(&block, pool);
        for_chunks(chunks, &mut no_slots(chunks), pool, monitor, work, merge)
    }

    /// Adds the counts of one encoded block.
    fn add_block<C: Code>(&mut self, block: &Block<C>, pool: &Pool) -> Result<()> {
        let (m, b) = (self.members, block.points);
        let codes = |i: usize| &block.codes[i * b..(i + 1) * b];
        let correct = |i: usize| &block.correct[i * b..(i + 1) * b];
        self.n_points = add(self.n_points, b as u64)?;
        let mut per_point = vec![0u32; b];
        for i in 0..m {
            let c = correct(i);
            let mut total = 0u64;
            for (l, &flag) in per_point.iter_mut().zip(c) {
                *l += u32::from(flag);
                total += u64::from(flag);
            }
            self.correct[i] = add(self.correct[i], total)?;
            let counts = &mut self.class_counts[i * self.n_classes..(i + 1) * self.n_classes];
            for &code in codes(i) {
                let class = code.index();
                counts[class] = add(counts[class], 1)?;
            }
        }
        for &l in &per_point {
            self.tally[l as usize] = add(self.tally[l as usize], 1)?;
        }
        // Pair tiles in parallel: each tile returns (N11, S) for its pairs, in order.
        let tiles: Vec<Vec<(u64, u64)>> = pool.run(|| {
            (0..m.div_ceil(TILE_MEMBERS))
                .into_par_iter()
                .map(|tile| {
                    let rows = tile * TILE_MEMBERS..((tile + 1) * TILE_MEMBERS).min(m);
                    let mut out = Vec::new();
                    for i in rows {
                        let (ci, li) = (correct(i), codes(i));
                        for j in i + 1..m {
                            out.push(pair_counts(ci, correct(j), li, codes(j)));
                        }
                    }
                    out
                })
                .collect()
        });
        let mut tiles = tiles.into_iter().flatten();
        for i in 0..m {
            for j in i + 1..m {
                let (both, same) = tiles.next().expect("one count per pair");
                let cell = i * m + j;
                self.both_correct[cell] = add(self.both_correct[cell], both)?;
                self.same_label[cell] = add(self.same_label[cell], same)?;
            }
        }
        Ok(())
    }

    /// The measures over all points added so far.
    ///
    /// With a_i the correct count of member i, for every pair (i, j):
    ///
    /// ```text
    /// Kuncheva & Whitaker (2003), 2×2 table of member i (rows) against member j:
    ///   N11 = both correct, N10 = a_i − N11, N01 = a_j − N11, N00 = n − a_i − a_j + N11
    ///   Yule's Q         Q   = (N11 N00 − N01 N10) / (N11 N00 + N01 N10)
    ///   correlation      ρ   = (N11 N00 − N01 N10) / sqrt((N11+N10)(N01+N00)(N11+N01)(N10+N00))
    ///                          (the phi coefficient of the 0/1 correct vectors)
    ///   disagreement     dis = (N01 + N10) / n
    ///   double fault     DF  = N00 / n
    /// Cohen (1960), between the two members' labels:
    ///   κ = (θ1 − θ2) / (1 − θ2),  θ1 = S_ij / n,  θ2 = Σ_c (n_ic / n)(n_jc / n)
    ///     = (n S_ij − Σ_c n_ic n_jc) / (n² − Σ_c n_ic n_jc)     (exact in 128-bit integers)
    /// diagonals: Q = ρ = κ = 1, dis = 0, DF = 1 − a_i / n (the member's error rate)
    /// undefined (NaN): Q when N11 N00 + N01 N10 = 0; ρ when a marginal is 0; κ when θ2 = 1
    /// ```
    ///
    /// From the tally T_l (l correct members at a point), p̄ = Σ_l l T_l / (n M):
    ///
    /// ```text
    /// Kuncheva & Whitaker (2003), written from memory:
    ///   entropy          E   = (1/n) Σ_l T_l min(l, M − l) / (M − ceil(M/2))
    ///   Kohavi–Wolpert   KW  = (1/(n M²)) Σ_l T_l l (M − l)
    ///   interrater       κ   = 1 − Σ_l T_l l (M − l) / (M n (M − 1) p̄ (1 − p̄))
    ///                          (undefined when p̄ is 0 or 1)
    ///   difficulty       θ   = (1/n) Σ_l T_l (l/M − p̄)²  (population variance of l/M)
    ///                        = (n Σ T_l l² − (Σ T_l l)²) / (n² M²)   (exact integers)
    ///   with p_i = T_{M−i} / n the share of points where exactly i members fail:
    ///   generalised      GD  = 1 − p(2)/p(1),  p(1) = Σ_i (i/M) p_i,
    ///   diversity                              p(2) = Σ_i i(i−1)/(M(M−1)) p_i
    ///                          (undefined when no member ever fails, p(1) = 0)
    ///   coincident       CFD = 0 if p_0 = 1, else (1/(1 − p_0)) Σ_{i=1..M} (M−i)/(M−1) p_i
    ///   failure
    /// identities (from Σ_{i<j} dis_ij = (1/n) Σ_l T_l l (M − l)):
    ///   KW = ((M − 1)/(2M)) mean dis,   κ = 1 − mean dis / (2 p̄ (1 − p̄))
    /// redundancy_i = Σ_{j≠i} dis_ij / (M − 1)
    /// ```
    ///
    /// # Errors
    /// `members` when no points were added.
    pub fn finish(&self) -> Result<Diversity> {
        if self.n_points == 0 {
            return Err(Error::value(
                "members",
                "no points were added (the measures need at least one point)",
            ));
        }
        let m = self.members;
        let n = self.n_points;
        let nf = n as f64;
        let mut out = Diversity {
            members: m,
            n_points: n,
            accuracy: self.correct.iter().map(|&a| a as f64 / nf).collect(),
            yule_q: vec![1.0; m * m],
            correlation: vec![1.0; m * m],
            disagreement: vec![0.0; m * m],
            double_fault: vec![0.0; m * m],
            kappa: vec![1.0; m * m],
            mean_yule_q: 0.0,
            mean_correlation: 0.0,
            mean_disagreement: 0.0,
            mean_double_fault: 0.0,
            mean_kappa: 0.0,
            undefined_yule_q: 0,
            undefined_correlation: 0,
            undefined_kappa: 0,
            entropy: 0.0,
            kohavi_wolpert: 0.0,
            interrater_kappa: 0.0,
            difficulty: 0.0,
            generalized_diversity: 0.0,
            coincident_failure: 0.0,
            redundancy: vec![0.0; m],
            correct_tally: self.tally.clone(),
        };
        for i in 0..m {
            out.double_fault[i * m + i] = 1.0 - out.accuracy[i];
        }
        let mut sums = [0.0f64; 5];
        let mut defined = [0usize; 5];
        for i in 0..m {
            for j in i + 1..m {
                let pair = self.pair(i, j);
                let values = [
                    pair.yule_q,
                    pair.correlation,
                    pair.disagreement,
                    pair.double_fault,
                    pair.kappa,
                ];
                let matrices = [
                    &mut out.yule_q,
                    &mut out.correlation,
                    &mut out.disagreement,
                    &mut out.double_fault,
                    &mut out.kappa,
                ];
                for ((matrix, &value), (sum, count)) in matrices
                    .into_iter()
                    .zip(&values)
                    .zip(sums.iter_mut().zip(defined.iter_mut()))
                {
                    matrix[i * m + j] = value;
                    matrix[j * m + i] = value;
                    if !value.is_nan() {
                        *sum += value;
                        *count += 1;
                    }
                }
            }
        }
        let pairs = m * (m - 1) / 2;
        let means: Vec<f64> = sums
            .iter()
            .zip(&defined)
            .map(|(&s, &c)| if c == 0 { f64::NAN } else { s / c as f64 })
            .collect();
        out.mean_yule_q = means[0];
        out.mean_correlation = means[1];
        out.mean_disagreement = means[2];
        out.mean_double_fault = means[3];
        out.mean_kappa = means[4];
        out.undefined_yule_q = pairs - defined[0];
        out.undefined_correlation = pairs - defined[1];
        out.undefined_kappa = pairs - defined[4];
        for i in 0..m {
            let total: f64 = (0..m)
                .filter(|&j| j != i)
                .map(|j| out.disagreement[i * m + j])
                .sum();
            out.redundancy[i] = total / (m - 1) as f64;
        }
        self.non_pairwise(&mut out);
        Ok(out)
    }

    fn non_pairwise(&self, out: &mut Diversity) {
        let m = self.members as u128;
        let mf = self.members as f64;
        let n = u128::from(self.n_points);
        let nf = self.n_points as f64;
        let (mut sum_l, mut sum_l2, mut sum_spread, mut sum_min) = (0u128, 0u128, 0u128, 0u128);
        for (l, &t) in self.tally.iter().enumerate() {
            let (l, t) = (l as u128, u128::from(t));
            sum_l += t * l;
            sum_l2 += t * l * l;
            sum_spread += t * l * (m - l);
            sum_min += t * l.min(m - l);
        }
        let mean_accuracy = sum_l as f64 / (nf * mf);
        out.entropy = sum_min as f64 / nf / (mf - (mf / 2.0).ceil());
        out.kohavi_wolpert = sum_spread as f64 / (nf * mf * mf);
        let spread = mean_accuracy * (1.0 - mean_accuracy);
        out.interrater_kappa = if sum_l == 0 || sum_l == n * m {
            f64::NAN
        } else {
            1.0 - sum_spread as f64 / (mf * nf * (mf - 1.0) * spread)
        };
        out.difficulty = (n * sum_l2 - sum_l * sum_l) as f64 / (nf * nf * mf * mf);
        // p_i = T_{M−i}/n: i failing members.
        let failing = |i: usize| self.tally[self.members - i] as f64 / nf;
        let (mut p1, mut p2) = (0.0, 0.0);
        for i in 1..=self.members {
            let fi = i as f64;
            p1 += fi / mf * failing(i);
            p2 += fi * (fi - 1.0) / (mf * (mf - 1.0)) * failing(i);
        }
        out.generalized_diversity = if p1 == 0.0 { f64::NAN } else { 1.0 - p2 / p1 };
        let p0 = failing(0);
        out.coincident_failure = if self.tally[self.members] == self.n_points {
            0.0
        } else {
            let total: f64 = (1..=self.members)
                .map(|i| (mf - i as f64) / (mf - 1.0) * failing(i))
                .sum();
            total / (1.0 - p0)
        };
    }

    /// The pairwise measures of members i < j.
    fn pair(&self, i: usize, j: usize) -> PairMeasures {
        let m = self.members;
        let n = u128::from(self.n_points);
        let n11 = u128::from(self.both_correct[i * m + j]);
        let (ai, aj) = (u128::from(self.correct[i]), u128::from(self.correct[j]));
        let (n10, n01) = (ai - n11, aj - n11);
        let n00 = n + n11 - ai - aj;
        let (agree, cross) = (n11 * n00, n01 * n10);
        let diff = signed_difference(agree, cross);
        let yule_q = if agree + cross == 0 {
            f64::NAN
        } else {
            diff / (agree + cross) as f64
        };
        let marginals = [ai, n - ai, aj, n - aj];
        let correlation = if marginals.contains(&0) {
            f64::NAN
        } else {
            diff / ((ai * (n - ai)) as f64 * (aj * (n - aj)) as f64).sqrt()
        };
        let nf = n as f64;
        let k = self.n_classes;
        let chance: u128 = self.class_counts[i * k..(i + 1) * k]
            .iter()
            .zip(&self.class_counts[j * k..(j + 1) * k])
            .map(|(&a, &b)| u128::from(a) * u128::from(b))
            .sum();
        let same = u128::from(self.same_label[i * m + j]);
        let kappa = if chance == n * n {
            f64::NAN
        } else {
            signed_difference(n * same, chance) / (n * n - chance) as f64
        };
        PairMeasures {
            yule_q,
            correlation,
            disagreement: (n01 + n10) as f64 / nf,
            double_fault: n00 as f64 / nf,
            kappa,
        }
    }
}

/// a − b as f64, computed exactly in integers first.
fn signed_difference(a: u128, b: u128) -> f64 {
    if a >= b {
        (a - b) as f64
    } else {
        -((b - a) as f64)
    }
}

struct PairMeasures {
    yule_q: f64,
    correlation: f64,
    disagreement: f64,
    double_fault: f64,
    kappa: f64,
}

fn class_of(label: i64, n_classes: usize, argument: &'static str) -> Result<usize> {
    usize::try_from(label)
        .ok()
        .filter(|&c| c < n_classes)
        .ok_or_else(|| {
            Error::value(
                argument,
                format!(
                    "labels must be class indices 0..{}, got {label}",
                    n_classes - 1
                ),
            )
        })
}

/// Fills member `i`'s codes and correct flags for the block starting at `start`.
fn encode_member<C: Code, T: Real>(
    predictions: Predictions<'_, T>,
    i: usize,
    start: usize,
    n_classes: usize,
    targets: &[usize],
    codes: &mut [C],
    correct: &mut [u8],
) -> Result<()> {
    for (p, ((code, flag), &target)) in codes.iter_mut().zip(correct).zip(targets).enumerate() {
        let class = match predictions {
            Predictions::Labels(labels) => class_of(labels[[i, start + p]], n_classes, "members")?,
            Predictions::Probabilities(probabilities) => argmax(
                probabilities
                    .index_axis(Axis(0), i)
                    .index_axis(Axis(0), start + p),
            )?,
        };
        *code = C::of(class);
        *flag = u8::from(class == target);
    }
    Ok(())
}

/// The member's label from its probabilities: the shared [`vote`] (lowest class among ties).
fn argmax<T: Real>(row: ndarray::ArrayView1<'_, T>) -> Result<usize> {
    if row.iter().any(|p| p.to_f64().is_nan()) {
        return Err(Error::value("members", "probabilities contain NaN"));
    }
    Ok(vote(row.iter().map(|p| p.to_f64())))
}

/// (both correct, same label) counts of two members over a block.
#[inline]
fn pair_counts<C: Code>(ci: &[u8], cj: &[u8], li: &[C], lj: &[C]) -> (u64, u64) {
    let mut both = 0u64;
    let mut same = 0u64;
    // Sub-blocks of 255 points keep the u8 sums exact and let the loops vectorise.
    for (((ci, cj), li), lj) in ci
        .chunks(255)
        .zip(cj.chunks(255))
        .zip(li.chunks(255))
        .zip(lj.chunks(255))
    {
        let mut b = 0u8;
        let mut s = 0u8;
        for (((&x, &y), &u), &v) in ci.iter().zip(cj).zip(li).zip(lj) {
            b += x & y;
            s += u8::from(u == v);
        }
        both += u64::from(b);
        same += u64::from(s);
    }
    (both, same)
}

/// The stored form of a [`DiversityState`] (postcard bytes), versioned.
#[derive(Serialize, Deserialize)]
struct StoredState {
    version: u32,
    members: u64,
    n_classes: u64,
    n_points: u64,
    correct: Vec<u64>,
    both_correct: Vec<u64>,
    same_label: Vec<u64>,
    class_counts: Vec<u64>,
    tally: Vec<u64>,
}

const STORED_STATE_VERSION: u32 = 1;

impl DiversityState {
    /// Serialises the counts to compact bytes (for pickling).
    pub fn to_bytes(&self) -> Vec<u8> {
        let stored = StoredState {
            version: STORED_STATE_VERSION,
            members: self.members as u64,
            n_classes: self.n_classes as u64,
            n_points: self.n_points,
            correct: self.correct.clone(),
            both_correct: self.both_correct.clone(),
            same_label: self.same_label.clone(),
            class_counts: self.class_counts.clone(),
            tally: self.tally.clone(),
        };
        postcard::to_allocvec(&stored).expect("serialising plain data cannot fail")
    }

    /// Restores from [`to_bytes`](DiversityState::to_bytes) output.
    ///
    /// # Errors
    /// `data` if the bytes are truncated, corrupt, inconsistent or from another version.
    pub fn from_bytes(data: &[u8]) -> Result<Self> {
        let bad = |why: &str| Error::value("data", format!("not a stored diversity state: {why}"));
        let stored: StoredState = postcard::from_bytes(data).map_err(|e| bad(&e.to_string()))?;
        if stored.version != STORED_STATE_VERSION {
            return Err(bad(&format!(
                "version {} is not {STORED_STATE_VERSION}",
                stored.version
            )));
        }
        let size = |v: u64| usize::try_from(v).map_err(|_| bad("size out of range"));
        let (members, n_classes) = (size(stored.members)?, size(stored.n_classes)?);
        let lengths_match = members.checked_mul(members) == Some(stored.both_correct.len())
            && stored.same_label.len() == stored.both_correct.len()
            && stored.correct.len() == members
            && members.checked_mul(n_classes) == Some(stored.class_counts.len())
            && stored.tally.len() == members + 1;
        if members < 2 || n_classes == 0 || n_classes > MAX_CLASSES || !lengths_match {
            return Err(bad("table sizes do not match the members and classes"));
        }
        // The measures subtract counts from one another; corrupt counts must not underflow.
        let n = stored.n_points;
        let pairs_fit = (0..members).all(|i| {
            (i + 1..members).all(|j| {
                let (ai, aj) = (stored.correct[i], stored.correct[j]);
                let both = stored.both_correct[i * members + j];
                both <= ai.min(aj) && ai + aj - both <= n && stored.same_label[i * members + j] <= n
            })
        });
        let tally_fits = stored.tally.iter().try_fold(0u64, |t, &c| t.checked_add(c)) == Some(n);
        if stored.correct.iter().any(|&a| a > n) || !pairs_fit || !tally_fits {
            return Err(bad("counts are inconsistent"));
        }
        Ok(DiversityState {
            members,
            n_classes,
            n_points: stored.n_points,
            correct: stored.correct,
            both_correct: stored.both_correct,
            same_label: stored.same_label,
            class_counts: stored.class_counts,
            tally: stored.tally,
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::parallel::{Silent, Threads};
    use ndarray::{array, Array1, Array2, Array3};

    fn state_of(labels: &Array2<i64>, y: &Array1<i64>, k: usize, threads: usize) -> DiversityState {
        let pool = Threads::Fixed(threads).pool().unwrap();
        let mut s = DiversityState::new(labels.nrows(), k).unwrap();
        s.update::<f64>(Predictions::Labels(labels.view()), y.view(), &pool, &Silent)
            .unwrap();
        s
    }

    fn close(a: f64, b: f64) -> bool {
        (a - b).abs() < 1e-12 || (a.is_nan() && b.is_nan())
    }

    /// 3 members × 4 points, 2 classes, y = [0, 1, 0, 1].
    ///   member 0: 0 1 0 0  → correct 1 1 1 0
    ///   member 1: 0 0 0 1  → correct 1 0 1 1
    ///   member 2: 1 1 1 1  → correct 0 1 0 1
    fn example() -> (Array2<i64>, Array1<i64>) {
        (
            array![[0, 1, 0, 0], [0, 0, 0, 1], [1, 1, 1, 1]],
            array![0, 1, 0, 1],
        )
    }

    #[test]
    fn hand_computed_example() {
        let (labels, y) = example();
        let d = state_of(&labels, &y, 2, 1).finish().unwrap();
        let m = 3;
        assert_eq!(d.accuracy, vec![0.75, 0.75, 0.5]);
        // correct counts per point: 2, 2, 2, 2 → T = [0, 0, 4, 0]
        assert_eq!(d.correct_tally, vec![0, 0, 4, 0]);
        // pair (0,1): N11 = 2 (points 0, 2), N10 = 1, N01 = 1, N00 = 0
        //   Q = (0 − 1)/(0 + 1) = −1; ρ = −1 / sqrt(3·1·3·1) = −1/3
        //   dis = 2/4, DF = 0; labels agree at points 0, 2 → θ1 = 2/4;
        //   class counts m0 = (3, 1), m1 = (3, 1) → θ2 = (9 + 1)/16 = 10/16
        //   κ = (8/16 − 10/16)/(6/16) = −1/3
        assert!(close(d.yule_q[1], -1.0));
        assert!(close(d.correlation[1], -1.0 / 3.0));
        assert!(close(d.disagreement[1], 0.5));
        assert!(close(d.double_fault[1], 0.0));
        assert!(close(d.kappa[1], -1.0 / 3.0));
        // pair (0,2): N11 = 1 (point 1), N10 = 2, N01 = 1, N00 = 0
        //   Q = (0 − 2)/(0 + 2) = −1; ρ = −2 / sqrt(3·1·2·2) = −1/sqrt(3)
        //   dis = 3/4; labels agree at point 1 → θ1 = 1/4; m2 = (0, 4) → θ2 = (0 + 4)/16
        //   κ = (4/16 − 4/16)/(12/16) = 0
        assert!(close(d.yule_q[2], -1.0));
        assert!(close(d.correlation[2], -1.0 / 3f64.sqrt()));
        assert!(close(d.disagreement[2], 0.75));
        assert!(close(d.kappa[2], 0.0));
        // pair (1,2): N11 = 1 (point 3), N10 = 2, N01 = 1, N00 = 0: same as (0,2);
        //   labels agree at point 3 → θ1 = 1/4, θ2 = 4/16, κ = 0
        assert!(close(d.yule_q[m + 2], -1.0));
        assert!(close(d.disagreement[m + 2], 0.75));
        assert!(close(d.double_fault[m + 2], 0.0));
        // symmetry and diagonals
        assert!(close(d.yule_q[m], -1.0));
        assert!(close(d.double_fault[m * 2 + 2], 0.5));
        assert!(close(d.kappa[m * 2 + 2], 1.0));
        assert!(close(d.disagreement[m + 1], 0.0));
        assert!(close(d.mean_disagreement, (0.5 + 0.75 + 0.75) / 3.0));
        assert!(close(d.mean_yule_q, -1.0));
        assert!(close(d.mean_kappa, -1.0 / 9.0));
        assert!(close(d.redundancy[0], (0.5 + 0.75) / 2.0));
        // l = 2 at every point, M = 3: min(2, 1) / (3 − 2) = 1 → E = 1
        assert!(close(d.entropy, 1.0));
        // KW = 4 · 2 · 1 / (4 · 9) = 2/9
        assert!(close(d.kohavi_wolpert, 2.0 / 9.0));
        // p̄ = 8/12 = 2/3; κ = 1 − 8 / (3 · 4 · 2 · (2/9)) = 1 − 8/(16/3) = −1/2
        assert!(close(d.interrater_kappa, -0.5));
        // l/M = 2/3 everywhere → θ = 0
        assert!(close(d.difficulty, 0.0));
        // one failing member at every point: p_1 = 1 → p(1) = 1/3, p(2) = 0, GD = 1
        assert!(close(d.generalized_diversity, 1.0));
        // p_0 = 0: CFD = (3 − 1)/(3 − 1) · 1 = 1
        assert!(close(d.coincident_failure, 1.0));
        // identities
        assert!(close(d.kohavi_wolpert, 2.0 / 6.0 * d.mean_disagreement));
        assert!(close(
            d.interrater_kappa,
            1.0 - d.mean_disagreement / (2.0 * (2.0 / 3.0) * (1.0 / 3.0))
        ));
    }

    #[test]
    fn uneven_tally_example() {
        // 3 members × 4 points, y = 0: correct flags
        //   point 0: 1 1 1 (l = 3), point 1: 1 1 0 (l = 2), point 2: 1 0 0 (l = 1),
        //   point 3: 0 0 0 (l = 0)
        let labels = array![[0, 0, 0, 1], [0, 0, 1, 1], [0, 1, 1, 1]];
        let y = array![0, 0, 0, 0];
        let d = state_of(&labels, &y, 2, 1).finish().unwrap();
        assert_eq!(d.correct_tally, vec![1, 1, 1, 1]);
        // E = (0 + 1 + 1 + 0)/4 / 1 = 1/2
        assert!(close(d.entropy, 0.5));
        // KW = (0 + 2 + 2 + 0)/(4 · 9) = 1/9
        assert!(close(d.kohavi_wolpert, 1.0 / 9.0));
        // p̄ = 6/12 = 1/2; κ = 1 − 4/(3 · 4 · 2 · 1/4) = 1 − 2/3 = 1/3
        assert!(close(d.interrater_kappa, 1.0 / 3.0));
        // l/M ∈ {1, 2/3, 1/3, 0}, mean 1/2: θ = (1/4 + 1/36 + 1/36 + 1/4)/4 = 5/36
        assert!(close(d.difficulty, 5.0 / 36.0));
        // p_i (i failing) = 1/4 each: p(1) = (0 + 1/3 + 2/3 + 1)/4 = 1/2,
        // p(2) = (0 + 0 + 2/6 + 6/6)/4 = 1/3, GD = 1 − 2/3 = 1/3
        assert!(close(d.generalized_diversity, 1.0 / 3.0));
        // CFD = (1/(3/4)) (2/2 · 1/4 + 1/2 · 1/4 + 0) = (4/3)(3/8) = 1/2
        assert!(close(d.coincident_failure, 0.5));
        // pair (0,1): correct 1110 vs 1100 → N11 = 2, N10 = 1, N01 = 0, N00 = 1
        //   Q = (2 − 0)/(2 + 0) = 1; DF = 1/4
        assert!(close(d.yule_q[1], 1.0));
        assert!(close(d.double_fault[1], 0.25));
    }

    #[test]
    fn undefined_measures_are_nan() {
        // two members always right: Q: N11 N00 + N01 N10 = 0; ρ: marginal 0; κ: θ2 = 1
        let labels = array![[1, 1, 1], [1, 1, 1]];
        let y = array![1, 1, 1];
        let d = state_of(&labels, &y, 2, 1).finish().unwrap();
        assert!(d.yule_q[1].is_nan() && d.correlation[1].is_nan() && d.kappa[1].is_nan());
        assert!(d.mean_yule_q.is_nan());
        assert_eq!(
            (
                d.undefined_yule_q,
                d.undefined_correlation,
                d.undefined_kappa
            ),
            (1, 1, 1)
        );
        assert!(d.interrater_kappa.is_nan() && d.generalized_diversity.is_nan());
        assert_eq!(d.coincident_failure, 0.0);
        assert_eq!(d.mean_disagreement, 0.0);
    }

    #[test]
    fn two_members_is_the_minimum() {
        assert!(matches!(
            DiversityState::new(1, 2),
            Err(Error::InvalidValue {
                argument: "members",
                ..
            })
        ));
        let labels = array![[0, 1], [1, 1]];
        let d = state_of(&labels, &array![0, 1], 2, 1).finish().unwrap();
        assert_eq!(d.redundancy, vec![0.5, 0.5]);
        assert!(close(d.mean_disagreement, 0.5));
    }

    #[test]
    fn merge_of_chunks_equals_the_whole() {
        let (m, n, k) = (7, 10_000, 3);
        let labels = Array2::from_shape_fn((m, n), |(i, p)| ((i * 7 + p * 13 + p / 7) % k) as i64);
        let y = Array1::from_shape_fn(n, |p| ((p * 5 + p / 3) % k) as i64);
        let whole = state_of(&labels, &y, k, 1);
        let pool = Threads::Fixed(1).pool().unwrap();
        let mut parts = DiversityState::new(m, k).unwrap();
        for (a, b) in [(0, 3), (3, 5000), (5000, n)] {
            let mut s = DiversityState::new(m, k).unwrap();
            let chunk = labels.slice(ndarray::s![.., a..b]);
            s.update::<f64>(
                Predictions::Labels(chunk),
                y.slice(ndarray::s![a..b]),
                &pool,
                &Silent,
            )
            .unwrap();
            parts.merge(&s).unwrap();
        }
        assert_eq!(parts, whole);
        assert_eq!(parts.finish().unwrap(), whole.finish().unwrap());
    }

    #[test]
    fn thread_count_does_not_matter() {
        let (m, n, k) = (9, 9_000, 300);
        let labels =
            Array2::from_shape_fn((m, n), |(i, p)| ((i * 31 + p * 17 + p / 11) % k) as i64);
        let y = Array1::from_shape_fn(n, |p| ((p * 29) % k) as i64);
        let one = state_of(&labels, &y, k, 1);
        let three = state_of(&labels, &y, k, 3);
        assert_eq!(one, three);
        // u16 codes (k > 256) agree with the same labels read as u32 codes
        let wide = state_of(&labels, &y, 70_000, 2);
        assert_eq!(wide.both_correct, one.both_correct);
        assert_eq!(wide.same_label, one.same_label);
    }

    #[test]
    fn probabilities_give_their_argmax() {
        let (labels, y) = example();
        let mut probabilities = Array3::<f32>::zeros((3, 4, 2));
        for ((i, p), &l) in labels.indexed_iter() {
            probabilities[[i, p, l as usize]] = 0.75;
            probabilities[[i, p, 1 - l as usize]] = 0.25;
        }
        // a tie goes to the lowest class
        probabilities[[0, 1, 0]] = 0.5;
        probabilities[[0, 1, 1]] = 0.5;
        let mut expected_labels = labels.clone();
        expected_labels[[0, 1]] = 0;
        let pool = Threads::Fixed(1).pool().unwrap();
        let mut s = DiversityState::new(3, 2).unwrap();
        s.update(
            Predictions::Probabilities(probabilities.view()),
            y.view(),
            &pool,
            &Silent,
        )
        .unwrap();
        assert_eq!(s, state_of(&expected_labels, &y, 2, 1));
    }

    #[test]
    fn an_impossible_state_size_is_an_error_not_an_abort() {
        // 2^28 members need two 2^56-cell pair tables (2^59 bytes each): no allocator can
        // give that, and the request must come back as an error.
        match DiversityState::new(1 << 28, 2) {
            Err(Error::OutOfMemory { argument, bytes }) => {
                assert_eq!(argument, "members");
                assert_eq!(bytes, (1usize << 56) * 8);
            }
            other => panic!("expected OutOfMemory, got {:?}", other.map(|s| s.members())),
        }
    }

    #[test]
    fn every_error_names_its_argument() {
        let pool = Threads::Fixed(1).pool().unwrap();
        let (labels, y) = example();
        let argument = |r: Result<()>| match r {
            Err(Error::InvalidValue { argument, .. }) => argument,
            other => panic!("expected an InvalidValue, got {other:?}"),
        };
        let mut s = DiversityState::new(3, 2).unwrap();
        let before = s.clone();
        let bad = array![[0, 1, 0, 2], [0, 0, 0, 1], [1, 1, 1, 1]];
        let r = s.update::<f64>(Predictions::Labels(bad.view()), y.view(), &pool, &Silent);
        assert_eq!(argument(r), "members");
        let negative = array![[0, 1, 0, -1], [0, 0, 0, 1], [1, 1, 1, 1]];
        let r = s.update::<f64>(
            Predictions::Labels(negative.view()),
            y.view(),
            &pool,
            &Silent,
        );
        assert_eq!(argument(r), "members");
        let r = s.update::<f64>(
            Predictions::Labels(labels.view()),
            array![0, 1, 0, 5].view(),
            &pool,
            &Silent,
        );
        assert_eq!(argument(r), "y");
        let r = s.update::<f64>(
            Predictions::Labels(labels.view()),
            array![0, 1].view(),
            &pool,
            &Silent,
        );
        assert_eq!(argument(r), "y");
        let two = array![[0, 1, 0, 0], [0, 0, 0, 1]];
        let r = s.update::<f64>(Predictions::Labels(two.view()), y.view(), &pool, &Silent);
        assert_eq!(argument(r), "members");
        let empty = Array2::<i64>::zeros((3, 0));
        let r = s.update::<f64>(
            Predictions::Labels(empty.view()),
            Array1::<i64>::zeros(0).view(),
            &pool,
            &Silent,
        );
        assert_eq!(argument(r), "members");
        let mut nan = Array3::<f64>::from_elem((3, 4, 2), 0.5);
        nan[[2, 3, 1]] = f64::NAN;
        let r = s.update(
            Predictions::Probabilities(nan.view()),
            y.view(),
            &pool,
            &Silent,
        );
        assert_eq!(argument(r), "members");
        let three_classes = Array3::<f64>::from_elem((3, 4, 3), 0.5);
        let r = s.update(
            Predictions::Probabilities(three_classes.view()),
            y.view(),
            &pool,
            &Silent,
        );
        assert_eq!(argument(r), "members");
        assert_eq!(s, before, "a failed update leaves the state unchanged");
        assert!(matches!(
            s.finish(),
            Err(Error::InvalidValue {
                argument: "members",
                ..
            })
        ));
        assert!(matches!(
            DiversityState::new(3, 0),
            Err(Error::InvalidValue {
                argument: "n_classes",
                ..
            })
        ));
        let other = DiversityState::new(4, 2).unwrap();
        assert!(matches!(
            s.merge(&other),
            Err(Error::InvalidValue {
                argument: "other",
                ..
            })
        ));
    }

    struct StopAtOnce;

    impl Monitor for StopAtOnce {
        fn progress(&self, _done: usize, _total: usize) -> Result<()> {
            Err(Error::Interrupted)
        }
    }

    #[test]
    fn an_interrupted_update_leaves_the_state_unchanged() {
        let (m, n, k) = (3, 3 * BLOCK_POINTS, 2);
        let labels = Array2::from_shape_fn((m, n), |(i, p)| ((i + p) % k) as i64);
        let y = Array1::from_shape_fn(n, |p| (p % k) as i64);
        let pool = Threads::Fixed(1).pool().unwrap();
        let mut s = DiversityState::new(m, k).unwrap();
        let r = s.update::<f64>(
            Predictions::Labels(labels.view()),
            y.view(),
            &pool,
            &StopAtOnce,
        );
        assert_eq!(r, Err(Error::Interrupted));
        assert_eq!(s, DiversityState::new(m, k).unwrap());
    }

    #[test]
    fn merge_overflow_is_an_error() {
        let (labels, y) = example();
        let mut s = state_of(&labels, &y, 2, 1);
        let mut huge = s.clone();
        huge.n_points = u64::MAX - 1;
        let before = s.clone();
        assert_eq!(s.merge(&huge), Err(Error::CountOverflow { max: u64::MAX }));
        assert_eq!(s, before);
    }

    #[test]
    fn codes_widen_back_to_their_class() {
        assert_eq!(200u8.index(), 200);
        assert_eq!(<u16 as Code>::of(60_000).index(), 60_000);
        assert_eq!(<u32 as Code>::of(1_000_000).index(), 1_000_000);
    }
}

#[cfg(test)]
mod stored_tests {
    use super::*;
    use crate::parallel::Silent;
    use ndarray::array;

    fn state() -> DiversityState {
        let labels = array![[0i64, 1, 0, 0], [0, 0, 0, 1], [1, 1, 1, 1]];
        let y = array![0i64, 1, 0, 1];
        let mut state = DiversityState::new(3, 2).unwrap();
        let p = Predictions::<f64>::Labels(labels.view());
        state.update(p, y.view(), &Pool::Global, &Silent).unwrap();
        state
    }

    #[test]
    fn bytes_round_trip_exactly() {
        let state = state();
        assert_eq!(
            DiversityState::from_bytes(&state.to_bytes()).unwrap(),
            state
        );
    }

    #[test]
    fn corrupt_bytes_name_data() {
        let bytes = state().to_bytes();
        let mut inconsistent = state();
        inconsistent.correct[0] = 99; // more points right than points
        for bad in [
            bytes[..bytes.len() - 1].to_vec(),
            vec![9, 0, 0],
            inconsistent.to_bytes(),
        ] {
            let err = DiversityState::from_bytes(&bad).unwrap_err();
            assert!(err.to_string().starts_with("`data`"), "{err}");
        }
    }
}
