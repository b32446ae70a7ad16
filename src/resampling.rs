//! Resampling schemes: which training rows each ensemble member sees, and how often.
//!
//! A [`ResampleParams`] is checked once into a [`Resampler`]; the resampler then writes
//! in-bag counts (or Bayesian weights) for any number of members straight into a
//! members × rows output, one member per rayon task. Member `m` always uses stream `m` of
//! [`MemberStreams`], so results do not depend on the thread count and a member's draw does
//! not change when more members are asked for.
//!
//! Schemes and their sources:
//!
//! ```text
//! bootstrap   round(n·fraction) draws with replacement; count N_i ~ Binomial(draws, 1/n)
//!             (Efron 1979, Annals of Statistics 7(1); Efron & Tibshirani 1993, ch. 6)
//! subsample   round(n·fraction) distinct rows without replacement, count 0 or 1
//!             (subagging: Bühlmann & Yu 2002, Annals of Statistics 30(4))
//! bayesian    weights w = n·(E_1, …, E_n)/ΣE with E_i ~ Exp(1), i.e. n·Dirichlet(1, …, 1)
//!             (Rubin 1981, Annals of Statistics 9(1)); no counts exist for this scheme
//! strata      the scheme is applied within every stratum separately, so each stratum keeps
//!             round(n_s·fraction) draws (its exact size when fraction = 1)
//! groups      whole groups are the resampling units (cluster bootstrap; Davison & Hinkley
//!             1997, Bootstrap Methods and their Application, §3.8): a row's count is its
//!             group's count; Bayesian group weights E_g are scaled so all rows sum to n
//! blocks      moving-block bootstrap for ordered rows (Künsch 1989, Annals of Statistics
//!             17(3)): ceil(draws/L) blocks of L consecutive rows, starts uniform on
//!             0..=n−L, concatenated and cut to `draws` rows (the last block may be shorter)
//! little_bags the bootstrap of little bags (Sexton & Laake 2009, CSDA 53(3); Athey,
//!             Tibshirani & Wager 2019, Annals of Statistics 47(2), §4): members come in
//!             consecutive groups of ℓ = group_size; group g draws a half-sample H_g of
//!             floor(n/2) distinct rows, and each of its members draws round(n·fraction)
//!             distinct rows of H_g without replacement (fraction < 1/2, counts 0 or 1).
//!             H_g comes from the stream of the group's first member (before that member's
//!             own draw), so a group is a function of its member indices alone
//! ```

use ndarray::Array2;
use rayon::prelude::*;

use crate::error::{Error, Result};
use crate::parallel::{Monitor, Pool};
use crate::random::{Draws, MemberStreams};

/// How rows are drawn for one member.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Scheme {
    /// With replacement (Efron 1979).
    Bootstrap,
    /// Without replacement (Bühlmann & Yu 2002).
    Subsample,
    /// Continuous Dirichlet weights (Rubin 1981).
    Bayesian,
    /// Subsamples inside a half-sample shared by each group of members (Sexton & Laake
    /// 2009; Athey, Tibshirani & Wager 2019, §4).
    LittleBags,
}

impl Scheme {
    /// Parses the user-facing name.
    pub fn parse(name: &str) -> Result<Self> {
        match name {
            "bootstrap" => Ok(Scheme::Bootstrap),
            "subsample" => Ok(Scheme::Subsample),
            "bayesian" => Ok(Scheme::Bayesian),
            "little_bags" => Ok(Scheme::LittleBags),
            other => Err(Error::value(
                "scheme",
                format!(
                    "expected 'bootstrap', 'subsample', 'bayesian' or 'little_bags', got {other:?}"
                ),
            )),
        }
    }

    /// The user-facing name.
    pub fn name(self) -> &'static str {
        match self {
            Scheme::Bootstrap => "bootstrap",
            Scheme::Subsample => "subsample",
            Scheme::Bayesian => "bayesian",
            Scheme::LittleBags => "little_bags",
        }
    }
}

/// The structure the draw respects.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Design {
    /// Rows are exchangeable.
    Rows,
    /// Stratum code (0..k) of every row; the draw happens within each stratum.
    Strata(Vec<usize>),
    /// Group code (0..g) of every row; whole groups are drawn.
    Groups(Vec<usize>),
    /// Moving blocks of this many consecutive rows.
    Blocks(usize),
}

/// Unchecked resampling parameters.
#[derive(Debug, Clone, PartialEq)]
pub struct ResampleParams {
    pub n_rows: usize,
    pub scheme: Scheme,
    pub fraction: f64,
    pub design: Design,
    /// Members per group (ℓ) of [`Scheme::LittleBags`], at least 2; 0 for the other
    /// schemes, which do not group members.
    pub group_size: usize,
}

/// Rows (or groups) listed by code: `rows[offsets[c]..offsets[c + 1]]` belong to code `c`.
#[derive(Debug, Clone, PartialEq, Eq)]
struct Partition {
    offsets: Vec<usize>,
    rows: Vec<usize>,
}

impl Partition {
    fn from_codes(codes: &[usize]) -> Self {
        let n_codes = codes.iter().max().map_or(0, |&c| c + 1);
        let mut offsets = vec![0usize; n_codes + 1];
        for &c in codes {
            offsets[c + 1] += 1;
        }
        for c in 0..n_codes {
            offsets[c + 1] += offsets[c];
        }
        let mut cursor = offsets.clone();
        let mut rows = vec![0usize; codes.len()];
        for (row, &c) in codes.iter().enumerate() {
            rows[cursor[c]] = row;
            cursor[c] += 1;
        }
        // Codes that no row uses would be empty units; drop them.
        let mut kept = vec![0usize];
        for c in 0..n_codes {
            if offsets[c + 1] > offsets[c] {
                kept.push(offsets[c + 1]);
            }
        }
        Partition {
            offsets: kept,
            rows,
        }
    }

    fn len(&self) -> usize {
        self.offsets.len() - 1
    }

    fn members(&self, code: usize) -> &[usize] {
        &self.rows[self.offsets[code]..self.offsets[code + 1]]
    }
}

#[derive(Debug, Clone, PartialEq)]
enum Plan {
    Rows {
        draws: usize,
    },
    Strata {
        strata: Partition,
        draws: Vec<usize>,
    },
    Groups {
        groups: Partition,
        draws: usize,
    },
    Blocks {
        length: usize,
        draws: usize,
        blocks: usize,
    },
    LittleBags {
        /// Rows of each group's half-sample, floor(n/2).
        half: usize,
        /// Distinct rows each member draws from its group's half.
        draws: usize,
        group_size: usize,
    },
}

/// Checked parameters, ready to draw any number of members.
#[derive(Debug, Clone, PartialEq)]
pub struct Resampler {
    n_rows: usize,
    scheme: Scheme,
    fraction: f64,
    plan: Plan,
}

/// Largest number of draws per member accepted (keeps every count within u64 and the
/// work bounded).
const MAX_DRAWS: f64 = (1u64 << 48) as f64;

fn draw_size(units: usize, fraction: f64, scheme: Scheme) -> Result<usize> {
    let size = (units as f64 * fraction).round().max(1.0);
    if size > MAX_DRAWS {
        return Err(Error::value(
            "fraction",
            format!("{fraction} × {units} rows asks for more than 2^48 draws per member"),
        ));
    }
    let size = size as usize;
    Ok(
        if matches!(scheme, Scheme::Subsample | Scheme::LittleBags) {
            size.min(units)
        } else {
            size
        },
    )
}

fn check_codes(codes: &[usize], n_rows: usize, argument: &'static str) -> Result<()> {
    if codes.len() != n_rows {
        return Err(Error::value(
            argument,
            format!("has {} entries but n_rows is {n_rows}", codes.len()),
        ));
    }
    if codes.iter().any(|&c| c >= n_rows) {
        return Err(Error::value(argument, "codes must lie in 0..n_rows"));
    }
    Ok(())
}

impl ResampleParams {
    /// Validates the parameters.
    ///
    /// # Errors
    /// [`Error::InvalidValue`] naming `n_rows`, `fraction`, `strata`, `groups`,
    /// `block_length`, `group_size` or `scheme` when a value is out of range or a
    /// combination is not defined (blocks with subsampling or Bayesian weights; little bags
    /// with strata, groups or blocks, a group size below 2, fewer than 2 rows or a fraction
    /// not below 1/2).
    pub fn check(self) -> Result<Resampler> {
        let ResampleParams {
            n_rows,
            scheme,
            fraction,
            design,
            group_size,
        } = self;
        if n_rows == 0 {
            return Err(Error::value("n_rows", "must be at least 1"));
        }
        if !fraction.is_finite() || fraction <= 0.0 {
            return Err(Error::value(
                "fraction",
                format!("must be a finite number above 0, got {fraction}"),
            ));
        }
        match scheme {
            Scheme::Subsample if fraction > 1.0 => {
                return Err(Error::value(
                    "fraction",
                    format!("must lie in (0, 1] for scheme='subsample', got {fraction}"),
                ))
            }
            Scheme::Bayesian if fraction != 1.0 => {
                return Err(Error::value(
                    "fraction",
                    "has no meaning for scheme='bayesian' (weights always sum to n_rows); leave it at 1.0",
                ))
            }
            Scheme::LittleBags => return little_bags_plan(n_rows, fraction, &design, group_size),
            _ => {}
        }
        if group_size != 0 {
            return Err(Error::value(
                "group_size",
                format!(
                    "only scheme='little_bags' groups members; leave it at 0 for scheme={:?}",
                    scheme.name()
                ),
            ));
        }
        let plan = match design {
            Design::Rows => Plan::Rows {
                draws: draw_size(n_rows, fraction, scheme)?,
            },
            Design::Strata(codes) => {
                check_codes(&codes, n_rows, "strata")?;
                let strata = Partition::from_codes(&codes);
                let draws = (0..strata.len())
                    .map(|s| draw_size(strata.members(s).len(), fraction, scheme))
                    .collect::<Result<Vec<_>>>()?;
                Plan::Strata { strata, draws }
            }
            Design::Groups(codes) => {
                check_codes(&codes, n_rows, "groups")?;
                let groups = Partition::from_codes(&codes);
                let draws = draw_size(groups.len(), fraction, scheme)?;
                Plan::Groups { groups, draws }
            }
            Design::Blocks(length) => {
                if length == 0 || length > n_rows {
                    return Err(Error::value(
                        "block_length",
                        format!("must lie in 1..=n_rows ({n_rows}), got {length}"),
                    ));
                }
                if scheme != Scheme::Bootstrap {
                    return Err(Error::value(
                        "block_length",
                        format!(
                            "moving blocks are defined for scheme='bootstrap' only, not {:?}",
                            scheme.name()
                        ),
                    ));
                }
                let draws = draw_size(n_rows, fraction, scheme)?;
                Plan::Blocks {
                    length,
                    draws,
                    blocks: draws.div_ceil(length),
                }
            }
        };
        Ok(Resampler {
            n_rows,
            scheme,
            fraction,
            plan,
        })
    }
}

/// The checked plan of [`Scheme::LittleBags`]: rows only, ℓ ≥ 2, n ≥ 2, 0 < fraction < 1/2
/// (so that round(n·fraction) ≤ floor(n/2) and every member fits in its group's half).
fn little_bags_plan(
    n_rows: usize,
    fraction: f64,
    design: &Design,
    group_size: usize,
) -> Result<Resampler> {
    let refused = match design {
        Design::Rows => None,
        Design::Strata(_) => Some("strata"),
        Design::Groups(_) => Some("groups"),
        Design::Blocks(_) => Some("block_length"),
    };
    if let Some(argument) = refused {
        return Err(Error::value(
            argument,
            "scheme='little_bags' draws half-samples of exchangeable rows; strata, groups \
             and blocks are not supported with it",
        ));
    }
    if group_size < 2 {
        return Err(Error::value(
            "group_size",
            format!(
                "must be at least 2 for scheme='little_bags' (the within-group variance needs \
                 two members), got {group_size}"
            ),
        ));
    }
    if n_rows < 2 {
        return Err(Error::value(
            "n_rows",
            format!("scheme='little_bags' needs at least 2 rows to draw a half, got {n_rows}"),
        ));
    }
    if fraction >= 0.5 {
        return Err(Error::value(
            "fraction",
            format!(
                "must lie in (0, 0.5) for scheme='little_bags' (each member's share of all \
                 rows, drawn inside its group's half), got {fraction}"
            ),
        ));
    }
    let half = n_rows / 2;
    // fraction < 1/2 gives n·fraction < n/2, whose rounding is at most floor(n/2).
    let draws = draw_size(n_rows, fraction, Scheme::LittleBags)?.min(half);
    Ok(Resampler {
        n_rows,
        scheme: Scheme::LittleBags,
        fraction,
        plan: Plan::LittleBags {
            half,
            draws,
            group_size,
        },
    })
}

/// An unsigned integer type that in-bag counts can be stored in.
pub trait Count: Copy + Default + Send + Sync + 'static {
    /// Largest representable count.
    const MAX: u64;
    /// Adds one; returns `true` if that overflowed (the stored value is then unusable).
    fn increment(&mut self) -> bool;
    /// Adds one, wrapping past [`MAX`](Count::MAX): for callers that know it cannot
    /// overflow, or that check the row's total afterwards (see `wrapped`).
    fn increment_unchecked(&mut self);
    /// The value `v`, or `None` if it does not fit.
    fn try_from_u64(v: u64) -> Option<Self>;
    /// Widens to u64.
    fn as_u64(self) -> u64;
}

macro_rules! impl_count {
    ($($t:ty),*) => {$(
        impl Count for $t {
            const MAX: u64 = <$t>::MAX as u64;
            #[inline]
            fn increment(&mut self) -> bool {
                let (value, overflow) = self.overflowing_add(1);
                *self = value;
                overflow
            }
            #[inline]
            fn increment_unchecked(&mut self) {
                *self = self.wrapping_add(1);
            }
            #[inline]
            fn try_from_u64(v: u64) -> Option<Self> {
                <$t>::try_from(v).ok()
            }
            #[inline]
            fn as_u64(self) -> u64 {
                self as u64
            }
        }
    )*};
}
impl_count!(u8, u16, u32, u64);

/// The unsigned integer type of a counts array.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum CountWidth {
    U8,
    U16,
    U32,
    U64,
}

/// In-bag counts in the narrowest unsigned type that holds every count drawn.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Counts {
    U8(Array2<u8>),
    U16(Array2<u16>),
    U32(Array2<u32>),
    U64(Array2<u64>),
}

impl Counts {
    /// Shape (members, n_rows).
    pub fn dim(&self) -> (usize, usize) {
        match self {
            Counts::U8(a) => a.dim(),
            Counts::U16(a) => a.dim(),
            Counts::U32(a) => a.dim(),
            Counts::U64(a) => a.dim(),
        }
    }

    /// Count of `row` in `member`, widened.
    pub fn get(&self, member: usize, row: usize) -> u64 {
        match self {
            Counts::U8(a) => a[[member, row]].as_u64(),
            Counts::U16(a) => a[[member, row]].as_u64(),
            Counts::U32(a) => a[[member, row]].as_u64(),
            Counts::U64(a) => a[[member, row]].as_u64(),
        }
    }
}

/// Members handled between two monitor calls: about 2^22 draws per thread (at least four
/// members), so a chunk takes a few milliseconds and Ctrl-C is noticed quickly.
fn chunk_members(draws_per_member: usize, threads: usize) -> usize {
    // A multiple of four per thread: the bootstrap draws members four at a time.
    let per_thread = ((1usize << 22) / draws_per_member.max(1))
        .max(1)
        .next_multiple_of(4);
    per_thread * threads.max(1)
}

impl Resampler {
    /// Number of rows.
    pub fn n_rows(&self) -> usize {
        self.n_rows
    }

    /// The scheme.
    pub fn scheme(&self) -> Scheme {
        self.scheme
    }

    /// The fraction the draw sizes were computed from.
    pub fn fraction(&self) -> f64 {
        self.fraction
    }

    /// Rows drawn per member: the sum of one member's counts (for Bayesian weights, n_rows).
    pub fn draws_per_member(&self) -> usize {
        match &self.plan {
            _ if self.scheme == Scheme::Bayesian => self.n_rows,
            Plan::Rows { draws } | Plan::Blocks { draws, .. } | Plan::LittleBags { draws, .. } => {
                *draws
            }
            Plan::Strata { draws, .. } => draws.iter().sum(),
            Plan::Groups { groups, draws } => {
                // A drawn group contributes all its rows; the sum varies by member unless
                // groups have equal sizes. Report the expected number of rows.
                (*draws as f64 * self.n_rows as f64 / groups.len() as f64).round() as usize
            }
        }
    }

    /// The largest count any row can receive: the bound the output type must cover.
    pub fn max_possible_count(&self) -> u64 {
        if matches!(self.scheme, Scheme::Subsample | Scheme::LittleBags) {
            return 1;
        }
        match &self.plan {
            Plan::Rows { draws } | Plan::LittleBags { draws, .. } => *draws as u64,
            Plan::Strata { draws, .. } => draws.iter().copied().max().unwrap_or(0) as u64,
            Plan::Groups { draws, .. } => *draws as u64,
            Plan::Blocks { blocks, .. } => *blocks as u64,
        }
    }

    /// Members per group of [`Scheme::LittleBags`] (ℓ); 0 for the other schemes.
    pub fn group_size(&self) -> usize {
        match &self.plan {
            Plan::LittleBags { group_size, .. } => *group_size,
            _ => 0,
        }
    }

    /// Rows of each group's half-sample, floor(n/2), for [`Scheme::LittleBags`].
    pub fn half_size(&self) -> Option<usize> {
        match &self.plan {
            Plan::LittleBags { half, .. } => Some(*half),
            _ => None,
        }
    }

    /// Number of moving blocks per member, if this is a block design.
    pub fn blocks_per_member(&self) -> Option<usize> {
        match &self.plan {
            Plan::Blocks { blocks, .. } => Some(*blocks),
            _ => None,
        }
    }

    fn require_counts(&self) -> Result<()> {
        if self.scheme == Scheme::Bayesian {
            return Err(Error::value(
                "scheme",
                "scheme='bayesian' gives every row a positive continuous weight, so in-bag \
                 counts and out-of-bag rows are not defined; use the weights",
            ));
        }
        Ok(())
    }

    /// The integer widths to try for the counts, narrowest first: uint8 always, then the
    /// wider ones up to the first that holds [`max_possible_count`]. Drawing into a width
    /// that turns out too narrow fails with [`Error::CountOverflow`] (never a wrapped
    /// count), and the next width redraws the same streams.
    ///
    /// [`max_possible_count`]: Resampler::max_possible_count
    pub fn count_widths(&self) -> Vec<CountWidth> {
        let bound = self.max_possible_count();
        let mut widths = vec![CountWidth::U8];
        for (narrower_max, wider) in [
            (u8::MAX as u64, CountWidth::U16),
            (u16::MAX as u64, CountWidth::U32),
            (u32::MAX as u64, CountWidth::U64),
        ] {
            if bound > narrower_max {
                widths.push(wider);
            }
        }
        widths
    }

    /// Draws the in-bag counts of members `0..members` in the narrowest unsigned type that
    /// holds every count drawn (uint8 unless some row is drawn more than 255 times); see
    /// [`count_widths`](Resampler::count_widths).
    ///
    /// # Errors
    /// `scheme` for Bayesian weights (no counts), `members` for zero members,
    /// [`Error::Interrupted`] when the monitor stops the work.
    pub fn counts(
        &self,
        seed: u64,
        members: usize,
        pool: &Pool,
        monitor: &dyn Monitor,
    ) -> Result<Counts> {
        let mut last = Error::CountOverflow { max: 0 };
        for width in self.count_widths() {
            let attempt = match width {
                CountWidth::U8 => self.counts_as(seed, members, pool, monitor).map(Counts::U8),
                CountWidth::U16 => self
                    .counts_as(seed, members, pool, monitor)
                    .map(Counts::U16),
                CountWidth::U32 => self
                    .counts_as(seed, members, pool, monitor)
                    .map(Counts::U32),
                CountWidth::U64 => self
                    .counts_as(seed, members, pool, monitor)
                    .map(Counts::U64),
            };
            match attempt {
                Err(e @ Error::CountOverflow { .. }) => last = e,
                other => return other,
            }
        }
        Err(last)
    }

    /// Draws the counts of members `0..members` into a new array of type `T`.
    ///
    /// # Errors
    /// [`Error::CountOverflow`] if some count does not fit `T`, plus those of [`counts`].
    ///
    /// [`counts`]: Resampler::counts
    pub fn counts_as<T: Count>(
        &self,
        seed: u64,
        members: usize,
        pool: &Pool,
        monitor: &dyn Monitor,
    ) -> Result<Array2<T>> {
        if members == 0 {
            return Err(Error::value("members", "must be at least 1"));
        }
        let mut out = Array2::<T>::default((members, self.n_rows));
        let slice = out.as_slice_mut().expect("a new array is contiguous");
        self.fill_counts(seed, slice, pool, monitor)?;
        Ok(out)
    }

    /// Writes the counts of members `0..out.len() / n_rows` into `out` (row-major
    /// members × n_rows, all zeros on entry), e.g. straight into a numpy array.
    ///
    /// For little bags the members are filled a whole group at a time: the group's half is
    /// drawn from its first member's stream, then each member draws from its own stream.
    ///
    /// # Errors
    /// `scheme` for Bayesian weights; `members` if `out` is empty or not a whole number of
    /// rows; `n_members` if little bags get a member count that is not a multiple of the
    /// group size; [`Error::CountOverflow`] if a count does not fit `T`;
    /// [`Error::Interrupted`].
    pub fn fill_counts<T: Count>(
        &self,
        seed: u64,
        out: &mut [T],
        pool: &Pool,
        monitor: &dyn Monitor,
    ) -> Result<()> {
        self.require_counts()?;
        let n = self.n_rows;
        if out.is_empty() || !out.len().is_multiple_of(n) {
            return Err(Error::value(
                "members",
                format!(
                    "the output holds {} values, not a positive multiple of n_rows ({n})",
                    out.len()
                ),
            ));
        }
        let members = out.len() / n;
        let mut streams = MemberStreams::new(seed);
        let chunk = chunk_members(self.draws_per_member(), pool.threads());
        if let Plan::LittleBags {
            half,
            draws,
            group_size,
        } = self.plan
        {
            return self.fill_little_bags(
                &mut streams,
                out,
                (half, draws, group_size),
                chunk,
                pool,
                monitor,
            );
        }
        let by_four = matches!(self.plan, Plan::Rows { .. } | Plan::Strata { .. })
            && self.scheme == Scheme::Bootstrap;
        let mut done = 0;
        for block in out.chunks_mut(chunk * n) {
            let k = block.len() / n;
            let mut draws = streams.take(k);
            pool.run(|| {
                if by_four {
                    return block
                        .par_chunks_mut(4 * n)
                        .zip(draws.par_chunks_mut(4))
                        .try_for_each(|(rows, d)| self.fill_bootstrap_by_four(d, rows));
                }
                block
                    .par_chunks_mut(n)
                    .zip(draws.par_iter_mut())
                    .try_for_each(|(row, d)| self.fill_member(d, row))
            })?;
            done += k;
            monitor.progress(done, members)?;
        }
        Ok(())
    }

    /// The little-bags part of [`fill_counts`](Resampler::fill_counts): chunks of whole
    /// groups, one rayon task per group.
    fn fill_little_bags<T: Count>(
        &self,
        streams: &mut MemberStreams,
        out: &mut [T],
        (half, draws, group_size): (usize, usize, usize),
        chunk: usize,
        pool: &Pool,
        monitor: &dyn Monitor,
    ) -> Result<()> {
        let n = self.n_rows;
        let members = out.len() / n;
        if !members.is_multiple_of(group_size) {
            return Err(Error::value(
                "n_members",
                format!(
                    "must be a multiple of group_size ({group_size}) for scheme='little_bags', \
                     got {members}"
                ),
            ));
        }
        let chunk = chunk.div_ceil(group_size) * group_size;
        let mut done = 0;
        for block in out.chunks_mut(chunk * n) {
            let k = block.len() / n;
            let mut draws_of = streams.take(k);
            pool.run(|| {
                block
                    .par_chunks_mut(group_size * n)
                    .zip(draws_of.par_chunks_mut(group_size))
                    .for_each(|(rows, d)| fill_group(d, rows, n, half, draws))
            });
            done += k;
            monitor.progress(done, members)?;
        }
        Ok(())
    }

    /// Bootstrap counts of up to four members into `rows` (row-major, zeros on entry), plain
    /// or stratified: four members' draws side by side, each exactly its own stream's
    /// (fewer members one by one).
    fn fill_bootstrap_by_four<T: Count>(&self, draws: &mut [Draws], rows: &mut [T]) -> Result<()> {
        let n = self.n_rows;
        let [a, b, c, d] = draws else {
            return draws
                .iter_mut()
                .zip(rows.chunks_mut(n))
                .try_for_each(|(d, row)| self.fill_member(d, row));
        };
        let mut parts = rows.chunks_exact_mut(n);
        let mut lanes: [&mut [T]; 4] = std::array::from_fn(|_| parts.next().expect("four rows"));
        let total = match &self.plan {
            Plan::Rows { draws: count } => {
                Draws::for_each_below_by_four([a, b, c, d], n, *count, |lane, i| {
                    debug_assert!(i < n);
                    // SAFETY: the draws lie below n = every row's length (as in `fill_member`).
                    unsafe { lanes[lane].get_unchecked_mut(i) }.increment_unchecked();
                });
                *count
            }
            Plan::Strata { strata, draws } => {
                for (s, &m) in draws.iter().enumerate() {
                    let members = strata.members(s);
                    let streams = [&mut *a, &mut *b, &mut *c, &mut *d];
                    Draws::for_each_below_by_four(streams, members.len(), m, |lane, i| {
                        lanes[lane][members[i]].increment_unchecked();
                    });
                }
                draws.iter().sum()
            }
            _ => unreachable!("only the plain and stratified bootstrap are drawn by four"),
        };
        if lanes.iter().any(|row| wrapped(row, total)) {
            return Err(Error::CountOverflow { max: T::MAX });
        }
        Ok(())
    }

    /// Writes one member's counts into `row` (all zeros on entry).
    fn fill_member<T: Count>(&self, d: &mut Draws, row: &mut [T]) -> Result<()> {
        let overflow = match (&self.plan, self.scheme) {
            (Plan::LittleBags { .. }, _) => {
                return Err(Error::value(
                    "scheme",
                    "little bags are drawn a whole group at a time, not member by member",
                ))
            }
            (Plan::Rows { draws }, Scheme::Bootstrap) => {
                // Wrapping increments, then one check: a checked increment makes each draw
                // wait for its (cache-missing) count before the next flag can be merged.
                let n = row.len();
                d.for_each_below(n, *draws, |i| {
                    debug_assert!(i < n);
                    // SAFETY: `for_each_below(n, ..)` yields indices below n = row.len()
                    // only (tested in `random`); a bounds check cost a compare and a branch
                    // per draw.
                    unsafe { row.get_unchecked_mut(i) }.increment_unchecked();
                });
                wrapped(row, *draws)
            }
            (Plan::Rows { draws }, _) => {
                let n = row.len();
                let all: Vec<usize> = Vec::new();
                subsample_into(d, n, *draws, &all, row);
                false
            }
            (Plan::Strata { strata, draws }, Scheme::Bootstrap) => {
                for (s, &m) in draws.iter().enumerate() {
                    let rows = strata.members(s);
                    d.for_each_below(rows.len(), m, |i| row[rows[i]].increment_unchecked());
                }
                wrapped(row, draws.iter().sum())
            }
            (Plan::Strata { strata, draws }, _) => {
                for (s, &m) in draws.iter().enumerate() {
                    let rows = strata.members(s);
                    subsample_into(d, rows.len(), m, rows, row);
                }
                false
            }
            (Plan::Groups { groups, draws }, scheme) => {
                let g = groups.len();
                let mut group_counts = vec![0u64; g];
                if scheme == Scheme::Bootstrap {
                    d.for_each_below(g, *draws, |i| group_counts[i] += 1);
                } else {
                    let all: Vec<usize> = Vec::new();
                    subsample_into(d, g, *draws, &all, &mut group_counts);
                }
                let mut overflow = false;
                for (code, &c) in group_counts.iter().enumerate() {
                    if c == 0 {
                        continue;
                    }
                    match T::try_from_u64(c) {
                        Some(value) => groups.members(code).iter().for_each(|&r| row[r] = value),
                        None => overflow = true,
                    }
                }
                overflow
            }
            (Plan::Blocks { length, draws, .. }, _) => {
                let mut overflow = false;
                let starts = row.len() - length + 1;
                let mut left = *draws;
                while left > 0 {
                    let start = d.below(starts);
                    let take = left.min(*length);
                    for slot in &mut row[start..start + take] {
                        overflow |= slot.increment();
                    }
                    left -= take;
                }
                overflow
            }
        };
        if overflow {
            Err(Error::CountOverflow { max: T::MAX })
        } else {
            Ok(())
        }
    }

    /// The start row of every moving block, (members, blocks_per_member), drawn from the
    /// same streams as [`counts`](Resampler::counts) so the two always agree.
    ///
    /// # Errors
    /// `block_length` if this is not a block design; `members` for zero members.
    pub fn block_starts(&self, seed: u64, members: usize, pool: &Pool) -> Result<Array2<u64>> {
        let Plan::Blocks { length, blocks, .. } = &self.plan else {
            return Err(Error::value(
                "block_length",
                "block starts exist only for block designs",
            ));
        };
        if members == 0 {
            return Err(Error::value("members", "must be at least 1"));
        }
        let starts = self.n_rows - length + 1;
        let mut out = Array2::<u64>::zeros((members, *blocks));
        let mut draws = MemberStreams::new(seed).take(members);
        let slice = out.as_slice_mut().expect("contiguous");
        pool.run(|| {
            slice
                .par_chunks_mut(*blocks)
                .zip(draws.par_iter_mut())
                .for_each(|(row, d)| row.iter_mut().for_each(|s| *s = d.below(starts) as u64))
        });
        Ok(out)
    }

    /// Bayesian-bootstrap weights of members `0..members`, (members, n_rows) float64.
    ///
    /// ```text
    /// rows:    w_i = n · E_i / Σ_j E_j                      E ~ Exp(1) i.i.d.
    /// strata:  w_i = n_s · E_i / Σ_{j in s} E_j            (each stratum keeps its size)
    /// groups:  w_i = n · E_g(i) / Σ_h |h| E_h              (rows of a group share a weight)
    /// ```
    /// Normalised exponentials are Dirichlet(1, …, 1) (Rubin 1981).
    ///
    /// # Errors
    /// `scheme` unless the scheme is Bayesian; `members` for zero members;
    /// [`Error::Interrupted`] from the monitor.
    pub fn bayesian_weights(
        &self,
        seed: u64,
        members: usize,
        pool: &Pool,
        monitor: &dyn Monitor,
    ) -> Result<Array2<f64>> {
        if members == 0 {
            return Err(Error::value("members", "must be at least 1"));
        }
        let mut out = Array2::<f64>::zeros((members, self.n_rows));
        let slice = out.as_slice_mut().expect("a new array is contiguous");
        self.fill_bayesian_weights(seed, slice, pool, monitor)?;
        Ok(out)
    }

    /// Writes the Bayesian weights of members `0..out.len() / n_rows` into `out`
    /// (row-major members × n_rows).
    ///
    /// # Errors
    /// As [`bayesian_weights`](Resampler::bayesian_weights); `members` if `out` is not a
    /// positive whole number of rows.
    pub fn fill_bayesian_weights(
        &self,
        seed: u64,
        out: &mut [f64],
        pool: &Pool,
        monitor: &dyn Monitor,
    ) -> Result<()> {
        if self.scheme != Scheme::Bayesian {
            return Err(Error::value(
                "scheme",
                "continuous weights are drawn for scheme='bayesian' only; other schemes weight rows by their counts",
            ));
        }
        let n = self.n_rows;
        if out.is_empty() || !out.len().is_multiple_of(n) {
            return Err(Error::value(
                "members",
                format!(
                    "the output holds {} values, not a positive multiple of n_rows ({n})",
                    out.len()
                ),
            ));
        }
        let members = out.len() / n;
        let mut streams = MemberStreams::new(seed);
        let chunk = chunk_members(n, pool.threads());
        let mut done = 0;
        for block in out.chunks_mut(chunk * n) {
            let k = block.len() / n;
            let mut draws = streams.take(k);
            pool.run(|| {
                block
                    .par_chunks_mut(n)
                    .zip(draws.par_iter_mut())
                    .for_each(|(row, d)| self.fill_weights(d, row))
            });
            done += k;
            monitor.progress(done, members)?;
        }
        Ok(())
    }

    fn fill_weights(&self, d: &mut Draws, row: &mut [f64]) {
        let n = row.len() as f64;
        match &self.plan {
            Plan::Strata { strata, .. } => {
                for s in 0..strata.len() {
                    let rows = strata.members(s);
                    let e: Vec<f64> = rows.iter().map(|_| d.exponential()).collect();
                    let scale = rows.len() as f64 / e.iter().sum::<f64>();
                    rows.iter().zip(&e).for_each(|(&r, &x)| row[r] = x * scale);
                }
            }
            Plan::Groups { groups, .. } => {
                let e: Vec<f64> = (0..groups.len()).map(|_| d.exponential()).collect();
                let mass: f64 = (0..groups.len())
                    .map(|g| e[g] * groups.members(g).len() as f64)
                    .sum();
                for (g, &x) in e.iter().enumerate() {
                    let w = n * x / mass;
                    groups.members(g).iter().for_each(|&r| row[r] = w);
                }
            }
            _ => {
                row.iter_mut().for_each(|w| *w = d.exponential());
                let scale = n / row.iter().sum::<f64>();
                row.iter_mut().for_each(|w| *w *= scale);
            }
        }
    }
}

/// Whether some count of `row`, filled by `draws` wrapping increments from zero, wrapped:
/// every wrap takes 2^bits off the total, so the total is `draws` exactly when none did.
fn wrapped<T: Count>(row: &[T], draws: usize) -> bool {
    let total = if T::MAX <= u64::from(u16::MAX) {
        // Chunks of 2^16 counts below 2^16 sum exactly in 32 bits (and vectorise).
        row.chunks(1 << 16)
            .map(|chunk| u64::from(chunk.iter().map(|&c| c.as_u64() as u32).sum::<u32>()))
            .sum::<u64>()
    } else {
        row.iter().map(|&c| c.as_u64()).sum::<u64>()
    };
    total != draws as u64
}

/// One group of little bags: `rows` holds the group's ℓ = `streams.len()` members
/// (row-major, `n` rows each, zeros on entry). The half H (`half` distinct rows of 0..n) is
/// drawn from the first member's stream, then member k draws `draws` distinct rows of H
/// from stream k (the first member continuing after the half).
fn fill_group<T: Count>(
    streams: &mut [Draws],
    rows: &mut [T],
    n: usize,
    half: usize,
    draws: usize,
) {
    let mut in_half = vec![0u8; n];
    subsample_into(&mut streams[0], n, half, &[], &mut in_half);
    let half_rows: Vec<usize> = (0..n).filter(|&i| in_half[i] == 1).collect();
    for (d, row) in streams.iter_mut().zip(rows.chunks_mut(n)) {
        subsample_into(d, half, draws, &half_rows, row);
    }
}

/// Marks `size` distinct units of `0..units` with a count of one (Floyd's algorithm:
/// Bentley & Floyd 1987, "A sample of brilliance", CACM 30(9)); O(size) draws, no
/// extra memory, the output itself serving as the membership test. `rows` maps unit
/// indices to output positions (empty: identity).
fn subsample_into<T: Count>(
    d: &mut Draws,
    units: usize,
    size: usize,
    rows: &[usize],
    out: &mut [T],
) {
    let at = |unit: usize| if rows.is_empty() { unit } else { rows[unit] };
    let one = T::try_from_u64(1).expect("1 fits every count type");
    for j in (units - size)..units {
        let t = at(d.below(j + 1));
        if out[t].as_u64() == 0 {
            out[t] = one;
        } else {
            out[at(j)] = one;
        }
    }
}

/// Entries summed exactly in i32 before they join a row's i64 total: 4096 entries of at
/// most 2^16 in magnitude stay below 2^31, and the i32 sums vectorise.
const TOTAL_CHUNK: usize = 4096;

/// An 8- or 16-bit count type; only signed types need their minimum looked for.
pub trait SmallCount: Copy + Into<i32> + Send + Sync {
    const SIGNED: bool;
}

macro_rules! impl_small_count {
    ($($t:ty: $signed:expr),*) => {$(impl SmallCount for $t { const SIGNED: bool = $signed; })*};
}
impl_small_count!(u8: false, u16: false, i8: true, i16: true);

/// Sum and minimum (`i32::MAX` for unsigned types) of one chunk of at most [`TOTAL_CHUNK`].
#[inline(always)] // so that the AVX2 wrapper compiles its own copy
fn chunk_summary<C: SmallCount>(values: &[C]) -> (i32, i32) {
    let sum = values.iter().map(|&c| c.into()).sum::<i32>();
    let min = if C::SIGNED {
        values.iter().map(|&c| c.into()).min().unwrap_or(i32::MAX)
    } else {
        i32::MAX
    };
    (sum, min)
}

#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2")]
unsafe fn chunk_summary_avx2<C: SmallCount>(values: &[C]) -> (i32, i32) {
    chunk_summary(values)
}

fn chunk_summary_dispatch<C: SmallCount>(values: &[C]) -> (i32, i32) {
    #[cfg(target_arch = "x86_64")]
    {
        if std::arch::is_x86_feature_detected!("avx2") {
            // SAFETY: the processor supports AVX2 (checked just above).
            return unsafe { chunk_summary_avx2(values) };
        }
    }
    chunk_summary(values)
}

/// The row totals (as f64, exact below 2^53) and the smallest entry (0 at most for
/// unsigned types) of in-bag counts (members, rows) of an 8- or 16-bit integer type, any
/// strides, rows in parallel.
pub fn count_row_totals<C: SmallCount>(
    counts: ndarray::ArrayView2<'_, C>,
    pool: &Pool,
) -> (Vec<f64>, i64) {
    let row_summary = |row: ndarray::ArrayView1<'_, C>| -> (f64, i64) {
        let (mut total, mut low) = (0i64, i64::MAX);
        for chunk in row.axis_chunks_iter(ndarray::Axis(0), TOTAL_CHUNK) {
            let (sum, min) = match chunk.as_slice() {
                Some(values) => chunk_summary_dispatch(values),
                None => {
                    let min = chunk.iter().map(|&c| c.into()).min();
                    (
                        chunk.iter().map(|&c| c.into()).sum::<i32>(),
                        min.unwrap_or(i32::MAX),
                    )
                }
            };
            total += i64::from(sum);
            low = low.min(i64::from(min));
        }
        (total as f64, low)
    };
    let rows: Vec<(f64, i64)> = pool.run(|| {
        (0..counts.nrows())
            .into_par_iter()
            .map(|member| row_summary(counts.row(member)))
            .collect()
    });
    let low = rows.iter().map(|r| r.1).min().unwrap_or(0);
    let low = if C::SIGNED { low } else { low.min(0) };
    (rows.into_iter().map(|r| r.0).collect(), low)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::parallel::{Pool, Silent, Threads};
    use ndarray::Axis;
    const POOL: Pool = Pool::Global;

    fn plan(n_rows: usize, scheme: Scheme, fraction: f64, design: Design) -> Resampler {
        ResampleParams {
            n_rows,
            scheme,
            fraction,
            design,
            group_size: 0,
        }
        .check()
        .unwrap()
    }

    fn as_u64(counts: &Counts) -> Array2<u64> {
        let (m, n) = counts.dim();
        Array2::from_shape_fn((m, n), |(i, j)| counts.get(i, j))
    }

    #[test]
    fn bootstrap_counts_sum_to_the_draw_size() {
        let r = plan(1000, Scheme::Bootstrap, 0.5, Design::Rows);
        let c = as_u64(&r.counts(1, 20, &POOL, &Silent).unwrap());
        assert!(c.rows().into_iter().all(|row| row.sum() == 500));
    }

    #[test]
    fn out_of_bag_share_is_near_one_over_e() {
        // Efron & Tibshirani (1993): P(row not drawn) = (1 − 1/n)^n.
        let n = 500;
        let r = plan(n, Scheme::Bootstrap, 1.0, Design::Rows);
        let c = as_u64(&r.counts(2, 400, &POOL, &Silent).unwrap());
        let zeros = c.iter().filter(|&&v| v == 0).count() as f64 / (400 * n) as f64;
        let expected = (1.0 - 1.0 / n as f64).powi(n as i32);
        assert!((zeros - expected).abs() < 0.003, "{zeros} vs {expected}");
    }

    #[test]
    fn subsample_draws_distinct_rows() {
        let r = plan(101, Scheme::Subsample, 0.5, Design::Rows);
        let c = as_u64(&r.counts(3, 50, &POOL, &Silent).unwrap());
        for row in c.rows() {
            assert_eq!(row.sum(), 51);
            assert!(row.iter().all(|&v| v <= 1));
        }
        let full = plan(10, Scheme::Subsample, 1.0, Design::Rows);
        assert!(as_u64(&full.counts(0, 3, &POOL, &Silent).unwrap())
            .iter()
            .all(|&v| v == 1));
    }

    /// Members drawn four at a time (plain, and stratified with strata of odd sizes, so
    /// streams enter the next stratum on a spare half) get the counts each member's own
    /// stream gives it alone; 10 members leave a group of two, drawn one by one.
    #[test]
    fn members_drawn_by_four_equal_members_drawn_alone() {
        let codes: Vec<usize> = (0..301).map(|i| [0, 1, 1, 2, 2, 2, 2][i % 7]).collect();
        for design in [Design::Rows, Design::Strata(codes)] {
            let r = plan(301, Scheme::Bootstrap, 1.0, design);
            let by_four = r.counts_as::<u8>(8, 10, &POOL, &Silent).unwrap();
            let mut streams = MemberStreams::new(8).take(10);
            for (m, d) in streams.iter_mut().enumerate() {
                let mut alone = vec![0u8; 301];
                r.fill_member(d, &mut alone).unwrap();
                assert_eq!(by_four.row(m).to_vec(), alone, "member {m}");
            }
        }
    }

    #[test]
    fn strata_keep_their_sizes() {
        let codes: Vec<usize> = (0..90)
            .map(|i| {
                if i < 10 {
                    0
                } else if i < 40 {
                    2
                } else {
                    5
                }
            })
            .collect();
        for scheme in [Scheme::Bootstrap, Scheme::Subsample] {
            let fraction = if scheme == Scheme::Bootstrap {
                1.0
            } else {
                0.5
            };
            let r = plan(90, scheme, fraction, Design::Strata(codes.clone()));
            let c = as_u64(&r.counts(4, 30, &POOL, &Silent).unwrap());
            for row in c.rows() {
                let sum = |lo: usize, hi: usize| row.slice(ndarray::s![lo..hi]).sum();
                let scale = |size: f64| (size * fraction).round() as u64;
                assert_eq!(sum(0, 10), scale(10.0));
                assert_eq!(sum(10, 40), scale(30.0));
                assert_eq!(sum(40, 90), scale(50.0));
            }
        }
    }

    #[test]
    fn rows_of_a_group_share_their_count() {
        let codes: Vec<usize> = (0..60).map(|i| (i * 7) % 12).collect();
        let r = plan(60, Scheme::Bootstrap, 1.0, Design::Groups(codes.clone()));
        let c = as_u64(&r.counts(5, 40, &POOL, &Silent).unwrap());
        for row in c.rows() {
            for i in 0..60 {
                for j in 0..60 {
                    if codes[i] == codes[j] {
                        assert_eq!(row[i], row[j]);
                    }
                }
            }
            // Twelve group draws of five rows each.
            assert_eq!(row.sum(), 60);
        }
    }

    #[test]
    fn block_counts_match_their_starts() {
        let (n, length) = (103, 10);
        let r = plan(n, Scheme::Bootstrap, 1.0, Design::Blocks(length));
        let c = as_u64(&r.counts(6, 25, &POOL, &Silent).unwrap());
        let starts = r.block_starts(6, 25, &POOL).unwrap();
        assert_eq!(starts.ncols(), 11);
        for (row, st) in c.rows().into_iter().zip(starts.rows()) {
            let mut rebuilt = vec![0u64; n];
            let mut left = n;
            for &s in st {
                let take = left.min(length);
                (s as usize..s as usize + take).for_each(|i| rebuilt[i] += 1);
                left -= take;
            }
            assert_eq!(row.to_vec(), rebuilt);
        }
    }

    #[test]
    fn counts_widen_instead_of_wrapping() {
        // 3000 draws over 3 rows: about 1000 per row, more than u8 holds.
        let r = plan(3, Scheme::Bootstrap, 1000.0, Design::Rows);
        let counts = r.counts(7, 4, &POOL, &Silent).unwrap();
        assert!(matches!(counts, Counts::U16(_)));
        assert!(as_u64(&counts)
            .rows()
            .into_iter()
            .all(|row| row.sum() == 3000));
        assert_eq!(
            r.counts_as::<u8>(7, 4, &POOL, &Silent).unwrap_err(),
            Error::CountOverflow { max: 255 }
        );
    }

    #[test]
    fn a_count_that_wraps_to_zero_is_caught() {
        // One row: every draw lands on it, so 255 draws fit a u8, 256 wrap it to 0 and 512
        // wrap it twice (each wrap takes 256 off the row's total, which is how it is found).
        for (draws, fits) in [
            (255.0, true),
            (256.0, false),
            (511.0, false),
            (512.0, false),
        ] {
            for design in [Design::Rows, Design::Strata(vec![0])] {
                let r = plan(1, Scheme::Bootstrap, draws, design);
                let got = r.counts_as::<u8>(3, 2, &POOL, &Silent);
                if fits {
                    assert!(got.unwrap().iter().all(|&c| c == 255));
                } else {
                    assert_eq!(got.unwrap_err(), Error::CountOverflow { max: 255 });
                    let wide = as_u64(&r.counts(3, 2, &POOL, &Silent).unwrap());
                    assert!(wide.iter().all(|&c| c == draws as u64));
                }
            }
        }
    }

    #[test]
    fn members_do_not_depend_on_how_many_are_drawn() {
        let r = plan(300, Scheme::Bootstrap, 1.0, Design::Rows);
        let few = as_u64(&r.counts(8, 3, &POOL, &Silent).unwrap());
        let many = as_u64(&r.counts(8, 50, &POOL, &Silent).unwrap());
        assert_eq!(few, many.slice(ndarray::s![..3, ..]));
    }

    #[test]
    fn bayesian_weights_sum_to_n_and_have_no_counts() {
        let r = plan(40, Scheme::Bayesian, 1.0, Design::Rows);
        let w = r.bayesian_weights(9, 10, &POOL, &Silent).unwrap();
        for row in w.rows() {
            approx::assert_relative_eq!(row.sum(), 40.0, max_relative = 1e-12);
            assert!(row.iter().all(|&x| x > 0.0));
        }
        assert!(matches!(
            r.counts(9, 1, &POOL, &Silent),
            Err(Error::InvalidValue {
                argument: "scheme",
                ..
            })
        ));
        let codes: Vec<usize> = (0..40).map(|i| i % 3).collect();
        let g = plan(40, Scheme::Bayesian, 1.0, Design::Groups(codes.clone()));
        for row in g.bayesian_weights(9, 5, &POOL, &Silent).unwrap().rows() {
            approx::assert_relative_eq!(row.sum(), 40.0, max_relative = 1e-12);
            assert_eq!(row[0], row[3]);
        }
        let s = plan(40, Scheme::Bayesian, 1.0, Design::Strata(codes));
        for row in s.bayesian_weights(9, 5, &POOL, &Silent).unwrap().rows() {
            let stratum0: f64 = row.iter().step_by(3).sum();
            approx::assert_relative_eq!(stratum0, 14.0, max_relative = 1e-12);
        }
    }

    #[test]
    fn bad_parameters_name_their_argument() {
        let check = |n, scheme, fraction, design| match (ResampleParams {
            n_rows: n,
            scheme,
            fraction,
            design,
            group_size: 0,
        })
        .check()
        {
            Err(Error::InvalidValue { argument, .. }) => argument,
            other => panic!("expected an error, got {other:?}"),
        };
        assert_eq!(check(0, Scheme::Bootstrap, 1.0, Design::Rows), "n_rows");
        assert_eq!(check(5, Scheme::Bootstrap, 0.0, Design::Rows), "fraction");
        assert_eq!(
            check(5, Scheme::Bootstrap, f64::NAN, Design::Rows),
            "fraction"
        );
        assert_eq!(check(5, Scheme::Subsample, 1.5, Design::Rows), "fraction");
        assert_eq!(check(5, Scheme::Bayesian, 0.5, Design::Rows), "fraction");
        assert_eq!(
            check(5, Scheme::Bootstrap, 1.0, Design::Strata(vec![0; 4])),
            "strata"
        );
        assert_eq!(
            check(5, Scheme::Bootstrap, 1.0, Design::Groups(vec![9; 5])),
            "groups"
        );
        assert_eq!(
            check(5, Scheme::Bootstrap, 1.0, Design::Blocks(0)),
            "block_length"
        );
        assert_eq!(
            check(5, Scheme::Bootstrap, 1.0, Design::Blocks(6)),
            "block_length"
        );
        assert_eq!(
            check(5, Scheme::Subsample, 0.5, Design::Blocks(2)),
            "block_length"
        );
        assert_eq!(
            Scheme::parse("jackknife").unwrap_err(),
            Error::value(
                "scheme",
                "expected 'bootstrap', 'subsample', 'bayesian' or 'little_bags', got \"jackknife\""
            )
        );
        let grouped = ResampleParams {
            n_rows: 5,
            scheme: Scheme::Bootstrap,
            fraction: 1.0,
            design: Design::Rows,
            group_size: 2,
        };
        assert!(matches!(
            grouped.check(),
            Err(Error::InvalidValue {
                argument: "group_size",
                ..
            })
        ));
    }

    fn little(n_rows: usize, fraction: f64, group_size: usize) -> Resampler {
        ResampleParams {
            n_rows,
            scheme: Scheme::LittleBags,
            fraction,
            design: Design::Rows,
            group_size,
        }
        .check()
        .unwrap()
    }

    #[test]
    fn little_bags_stay_inside_their_group_half() {
        // Sexton & Laake (2009); Athey, Tibshirani & Wager (2019), §4: each group shares a
        // half-sample of floor(n/2) rows, each member draws round(n·fraction) of them.
        for (n, fraction, l) in [(101, 0.1, 2), (100, 0.3, 3), (7, 0.49, 4), (2, 0.2, 2)] {
            let r = little(n, fraction, l);
            let members = 6 * l;
            let c = as_u64(&r.counts(11, members, &POOL, &Silent).unwrap());
            let draws = ((n as f64 * fraction).round() as u64).max(1);
            assert_eq!(r.draws_per_member() as u64, draws);
            assert_eq!(r.half_size(), Some(n / 2));
            for g in 0..members / l {
                let group = c.slice(ndarray::s![g * l..(g + 1) * l, ..]);
                let union = group
                    .axis_iter(Axis(1))
                    .filter(|column| column.iter().any(|&v| v > 0))
                    .count();
                assert!(union <= n / 2, "group {g}: {union} rows outside a half");
                for row in group.rows() {
                    assert!(row.iter().all(|&v| v <= 1));
                    assert_eq!(row.sum(), draws);
                }
            }
        }
    }

    #[test]
    fn little_bags_halves_cover_all_rows_evenly() {
        // Over many groups every row is in a half with probability floor(n/2)/n, so a member
        // draws it with probability round(n·fraction)/n (exchangeability; common practice).
        let (n, l, groups) = (50, 2, 2000);
        let r = little(n, 0.2, l);
        let c = as_u64(&r.counts(12, groups * l, &POOL, &Silent).unwrap());
        let expected = (groups * l) as f64 * 10.0 / 50.0;
        let sd = (expected * (1.0 - 0.2)).sqrt() * 2f64.sqrt();
        for column in c.axis_iter(Axis(1)) {
            let hits = column.sum() as f64;
            assert!((hits - expected).abs() < 5.0 * sd, "{hits} vs {expected}");
        }
    }

    #[test]
    fn little_bags_do_not_depend_on_threads_or_later_groups() {
        let r = little(300, 0.1, 3);
        let few = as_u64(&r.counts(13, 6, &POOL, &Silent).unwrap());
        let many = as_u64(&r.counts(13, 3000, &POOL, &Silent).unwrap());
        assert_eq!(few, many.slice(ndarray::s![..6, ..]));
        let one = Threads::Fixed(1).pool().unwrap();
        let single = as_u64(&r.counts(13, 3000, &one, &Silent).unwrap());
        assert_eq!(single, many);
        let narrow = r.counts_as::<u16>(13, 3000, &POOL, &Silent).unwrap();
        assert_eq!(narrow.mapv(u64::from), many);
    }

    #[test]
    fn little_bags_refuse_what_they_do_not_support() {
        let check = |n, fraction, design, group_size| match (ResampleParams {
            n_rows: n,
            scheme: Scheme::LittleBags,
            fraction,
            design,
            group_size,
        })
        .check()
        {
            Err(Error::InvalidValue { argument, .. }) => argument,
            other => panic!("expected an error, got {other:?}"),
        };
        assert_eq!(check(10, 0.5, Design::Rows, 2), "fraction");
        assert_eq!(check(10, 0.7, Design::Rows, 2), "fraction");
        assert_eq!(check(10, 0.2, Design::Rows, 1), "group_size");
        assert_eq!(check(10, 0.2, Design::Rows, 0), "group_size");
        assert_eq!(check(1, 0.2, Design::Rows, 2), "n_rows");
        assert_eq!(check(10, 0.2, Design::Strata(vec![0; 10]), 2), "strata");
        assert_eq!(check(10, 0.2, Design::Groups(vec![0; 10]), 2), "groups");
        assert_eq!(check(10, 0.2, Design::Blocks(2), 2), "block_length");
        let r = little(10, 0.2, 2);
        assert!(matches!(
            r.counts(1, 3, &POOL, &Silent),
            Err(Error::InvalidValue {
                argument: "n_members",
                ..
            })
        ));
        assert!(matches!(
            r.bayesian_weights(1, 2, &POOL, &Silent),
            Err(Error::InvalidValue {
                argument: "scheme",
                ..
            })
        ));
        assert_eq!(r.max_possible_count(), 1);
        assert_eq!(r.group_size(), 2);
        assert_eq!(Scheme::parse("little_bags").unwrap().name(), "little_bags");
    }

    #[test]
    fn count_row_totals_are_exact_with_any_strides() {
        // Rows longer than one i32 chunk, with values at the type's extremes.
        let (m, n) = (3, 3 * TOTAL_CHUNK + 5);
        let counts = Array2::from_shape_fn((m, n), |(i, j)| match (i + j) % 4 {
            0 => i16::MIN,
            1 => i16::MAX,
            _ => (j % 7) as i16,
        });
        let naive: Vec<f64> = counts
            .outer_iter()
            .map(|r| r.iter().map(|&c| i64::from(c)).sum::<i64>() as f64)
            .collect();
        let pool = Pool::Global;
        let (totals, low) = count_row_totals(counts.view(), &pool);
        assert_eq!(totals, naive);
        assert_eq!(low, i64::from(i16::MIN));
        let transposed = counts.t().to_owned();
        let (strided, low) = count_row_totals(transposed.t(), &pool);
        assert_eq!(strided, naive);
        assert_eq!(low, i64::from(i16::MIN));
        let small = Array2::from_shape_fn((2, 9), |(i, j)| (i * 9 + j) as u8 + 1);
        assert_eq!(count_row_totals(small.view(), &pool).0, vec![45.0, 126.0]);
    }
}
