//! Random streams for ensemble members.
//!
//! Each member owns one xoshiro256++ stream (Blackman & Vigna 2021, "Scrambled linear
//! pseudorandom number generators", ACM TOMS 47(4)). Stream 0 is seeded from the user's
//! seed by SplitMix64; stream m is stream 0 advanced by m calls of `jump()` (2^128 steps
//! each), so streams never overlap, results do not depend on the thread count, and member m
//! draws the same rows whatever the number of members.
//!
//! The bounded-integer and exponential transforms are written here rather than borrowed
//! from a distribution crate so that a dependency upgrade can never change a seeded result.

use rand_xoshiro::rand_core::{Rng, SeedableRng};
use rand_xoshiro::Xoshiro256PlusPlus;

/// Hands out the member streams in member order.
#[derive(Debug, Clone)]
pub struct MemberStreams {
    next_member: usize,
    next_stream: Xoshiro256PlusPlus,
}

impl MemberStreams {
    /// Streams for members 0, 1, 2, ... derived from `seed`.
    pub fn new(seed: u64) -> Self {
        MemberStreams {
            next_member: 0,
            next_stream: Xoshiro256PlusPlus::seed_from_u64(seed),
        }
    }

    /// Streams starting at member `first` (costs `first` jumps, about 1 µs each).
    pub fn starting_at(seed: u64, first: usize) -> Self {
        let mut streams = Self::new(seed);
        streams.skip(first);
        streams
    }

    /// Index of the member whose stream comes next.
    pub fn next_member(&self) -> usize {
        self.next_member
    }

    /// Advances past `count` members without handing out their streams.
    pub fn skip(&mut self, count: usize) {
        for _ in 0..count {
            self.next_stream.jump();
        }
        self.next_member += count;
    }

    /// The streams of the next `count` members, in member order.
    pub fn take(&mut self, count: usize) -> Vec<Draws> {
        (0..count)
            .map(|_| {
                let stream = self.next_stream.clone();
                self.next_stream.jump();
                self.next_member += 1;
                Draws::new(stream)
            })
            .collect()
    }
}

/// The random draws of one member: bounded integers, uniforms and exponentials.
#[derive(Debug, Clone)]
pub struct Draws {
    rng: Xoshiro256PlusPlus,
    spare: u32,
    has_spare: bool,
}

impl Draws {
    fn new(rng: Xoshiro256PlusPlus) -> Self {
        Draws {
            rng,
            spare: 0,
            has_spare: false,
        }
    }

    /// A stream on its own, for tests and one-off draws.
    pub fn from_seed(seed: u64) -> Self {
        Draws::new(Xoshiro256PlusPlus::seed_from_u64(seed))
    }

    #[inline]
    fn next_u32(&mut self) -> u32 {
        // Both halves of each 64-bit output are used: the high half now, the low half next.
        if self.has_spare {
            self.has_spare = false;
            self.spare
        } else {
            let word = self.rng.next_u64();
            self.spare = word as u32;
            self.has_spare = true;
            (word >> 32) as u32
        }
    }

    /// A uniform integer in `0..bound` (`bound > 0`), exactly unbiased.
    ///
    /// ```text
    /// Lemire, D. (2019). Fast random integer generation in an interval.
    /// ACM Transactions on Modeling and Computer Simulation 29(1): multiply-shift with
    /// rejection of the low word below (2^w mod bound).
    /// ```
    #[inline]
    pub fn below(&mut self, bound: usize) -> usize {
        debug_assert!(bound > 0);
        if bound <= u32::MAX as usize {
            self.below_u32(bound as u32) as usize
        } else {
            self.below_u64(bound as u64) as usize
        }
    }

    /// Calls `visit` with `count` uniform integers in `0..bound`, exactly as `count` calls
    /// of [`below`](Draws::below) would produce them, but two per 64-bit output without
    /// per-draw branching on the spare half (the hot loop of the bootstrap).
    ///
    /// Each 32-bit half is accepted iff the low word of `half · bound` is at least
    /// `2^32 mod bound` (Lemire 2019), so a rejected half is simply skipped: the sequence of
    /// accepted halves is the same whichever way it is consumed.
    #[inline]
    pub fn for_each_below(&mut self, bound: usize, count: usize, mut visit: impl FnMut(usize)) {
        debug_assert!(bound > 0);
        if bound > u32::MAX as usize {
            (0..count).for_each(|_| visit(self.below(bound)));
            return;
        }
        let bound32 = bound as u32;
        let threshold = u64::from(bound32.wrapping_neg() % bound32);
        let bound64 = u64::from(bound32);
        let mut done = 0;
        while done < count && self.has_spare {
            visit(self.below_u32(bound32) as usize);
            done += 1;
        }
        while done + 2 <= count {
            let word = self.rng.next_u64();
            let high = (word >> 32) * bound64;
            let low = (word & 0xFFFF_FFFF) * bound64;
            if high & 0xFFFF_FFFF >= threshold {
                visit((high >> 32) as usize);
                done += 1;
            }
            if low & 0xFFFF_FFFF >= threshold {
                visit((low >> 32) as usize);
                done += 1;
            }
        }
        while done < count {
            visit(self.below_u32(bound32) as usize);
            done += 1;
        }
    }

    /// [`for_each_below`](Draws::for_each_below) on four streams at once: `visit(lane, k)`
    /// receives, for each lane, the `count` integers in `0..bound` that stream
    /// `lanes[lane]` alone would give, in its order, and every stream ends where its own
    /// call would have left it. The four generators advance side by side in vector lanes
    /// (the bootstrap is bound by the generator's arithmetic, not by its memory traffic);
    /// the integer operations are those of the single stream, so the draws are identical.
    /// The visits of different lanes interleave: only each lane's own order is kept.
    pub fn for_each_below_by_four(
        mut lanes: [&mut Draws; 4],
        bound: usize,
        count: usize,
        mut visit: impl FnMut(usize, usize),
    ) {
        if bound > u32::MAX as usize {
            for (lane, d) in lanes.into_iter().enumerate() {
                d.for_each_below(bound, count, |k| visit(lane, k));
            }
            return;
        }
        let bound32 = bound as u32;
        // A lane that starts on a spare half uses it first, as `for_each_below` does.
        let mut first = [0usize; 4];
        for (lane, d) in lanes.iter_mut().enumerate() {
            while first[lane] < count && d.has_spare {
                visit(lane, d.below_u32(bound32) as usize);
                first[lane] += 1;
            }
        }
        let mut state = StateLanes::of(&lanes, first);
        state.draw_by_four_dispatch(bound32, count, &mut visit);
        let done = state.drawn;
        assert!(
            done.iter().all(|&d| d <= count),
            "a lane drew past its count"
        );
        state.store(lanes, |lane, d| {
            d.for_each_below(bound, count - done[lane], |k| visit(lane, k));
        });
    }

    #[inline]
    fn below_u32(&mut self, bound: u32) -> u32 {
        let mut product = u64::from(self.next_u32()) * u64::from(bound);
        if (product as u32) < bound {
            let threshold = bound.wrapping_neg() % bound;
            while (product as u32) < threshold {
                product = u64::from(self.next_u32()) * u64::from(bound);
            }
        }
        (product >> 32) as u32
    }

    #[inline]
    fn below_u64(&mut self, bound: u64) -> u64 {
        let mut product = u128::from(self.rng.next_u64()) * u128::from(bound);
        if (product as u64) < bound {
            let threshold = bound.wrapping_neg() % bound;
            while (product as u64) < threshold {
                product = u128::from(self.rng.next_u64()) * u128::from(bound);
            }
        }
        (product >> 64) as u64
    }

    /// A uniform float in the open interval (0, 1) with 53 random bits.
    #[inline]
    pub fn open_unit(&mut self) -> f64 {
        ((self.rng.next_u64() >> 11) as f64 + 0.5) * (1.0 / (1u64 << 53) as f64)
    }

    /// A standard exponential variate, −ln U with U uniform on (0, 1) (inversion).
    #[inline]
    pub fn exponential(&mut self) -> f64 {
        -self.open_unit().ln()
    }
}

/// The states of four xoshiro256++ generators, word `k` of lane `l` at `words[k][l]`, so
/// that one step of all four is a handful of vector operations.
struct StateLanes {
    words: [[u64; 4]; 4],
    /// The draws each lane has made in the current call.
    drawn: [usize; 4],
}

impl StateLanes {
    /// The states of `lanes`, which have made `drawn` draws of the call already.
    fn of(lanes: &[&mut Draws; 4], drawn: [usize; 4]) -> Self {
        let mut words = [[0u64; 4]; 4];
        for (l, d) in lanes.iter().enumerate() {
            let bytes = d.rng.state();
            for (k, word) in words.iter_mut().enumerate() {
                let mut le = [0u8; 8];
                le.copy_from_slice(&bytes[8 * k..8 * k + 8]);
                word[l] = u64::from_le_bytes(le);
            }
        }
        StateLanes { words, drawn }
    }

    /// Puts each lane's state back into its stream (an exact round trip: a reachable
    /// state is never all zero), then calls `finish(lane, stream)`.
    fn store(&self, lanes: [&mut Draws; 4], mut finish: impl FnMut(usize, &mut Draws)) {
        for (l, d) in lanes.into_iter().enumerate() {
            let mut bytes = [0u8; 32];
            for k in 0..4 {
                bytes[8 * k..8 * k + 8].copy_from_slice(&self.words[k][l].to_le_bytes());
            }
            d.rng = Xoshiro256PlusPlus::from_seed(bytes);
            finish(l, d);
        }
    }

    /// The next output of every lane: xoshiro256++ (Blackman & Vigna 2021), as in
    /// `rand_xoshiro`'s `next_u64`.
    #[inline(always)]
    fn next(&mut self) -> [u64; 4] {
        let [s0, s1, s2, s3] = &mut self.words;
        let out: [u64; 4] = std::array::from_fn(|l| {
            s0[l]
                .wrapping_add(s3[l])
                .rotate_left(23)
                .wrapping_add(s0[l])
        });
        for l in 0..4 {
            let t = s1[l] << 17;
            s2[l] ^= s0[l];
            s3[l] ^= s1[l];
            s1[l] ^= s2[l];
            s0[l] ^= s3[l];
            s2[l] ^= t;
            s3[l] = s3[l].rotate_left(45);
        }
        out
    }

    /// The two-per-word loop of [`Draws::for_each_below`] on all lanes while every lane
    /// still needs two draws of `count`, counted in `drawn`. A half is accepted as there
    /// (Lemire 2019); a word with a rejected half in some lane (about 2 in 10^4 at a
    /// million rows) takes the per-half path.
    #[inline(always)]
    fn draw_by_four(&mut self, bound: u32, count: usize, visit: &mut impl FnMut(usize, usize)) {
        let threshold = u64::from(bound.wrapping_neg() % bound);
        let bound = u64::from(bound);
        // Draws per lane: twice the words without a rejection, plus `extra[l]` from the
        // others and before (one test of the most per word, not four).
        let mut extra = self.drawn;
        let (mut clean_words, mut most_extra) = (0usize, extra.into_iter().max().unwrap_or(0));
        while 2 * clean_words + most_extra + 2 <= count {
            let words = self.next();
            let high: [u64; 4] = std::array::from_fn(|l| (words[l] >> 32) * bound);
            let low: [u64; 4] = std::array::from_fn(|l| (words[l] & 0xFFFF_FFFF) * bound);
            let mut rejected = false;
            for l in 0..4 {
                rejected |= (high[l] & 0xFFFF_FFFF) < threshold;
                rejected |= (low[l] & 0xFFFF_FFFF) < threshold;
            }
            if rejected {
                for l in 0..4 {
                    for product in [high[l], low[l]] {
                        if product & 0xFFFF_FFFF >= threshold {
                            visit(l, (product >> 32) as usize);
                            extra[l] += 1;
                        }
                    }
                }
                most_extra = extra.iter().copied().max().unwrap_or(0);
            } else {
                for l in 0..4 {
                    visit(l, (high[l] >> 32) as usize);
                    visit(l, (low[l] >> 32) as usize);
                }
                clean_words += 1;
            }
        }
        self.drawn = extra.map(|e| 2 * clean_words + e);
    }

    /// [`draw_by_four`](StateLanes::draw_by_four) compiled for AVX-512 (vector rotates)
    /// or AVX2 when the processor has them: integer operations only, so the same draws.
    fn draw_by_four_dispatch(
        &mut self,
        bound: u32,
        count: usize,
        visit: &mut impl FnMut(usize, usize),
    ) {
        #[cfg(target_arch = "x86_64")]
        {
            /// `draw_by_four` compiled with `$features` (it is inlined into each copy).
            macro_rules! compiled_with {
                ($features:literal, $name:ident) => {
                    #[target_feature(enable = $features)]
                    unsafe fn $name(
                        state: &mut StateLanes,
                        bound: u32,
                        count: usize,
                        visit: &mut impl FnMut(usize, usize),
                    ) {
                        state.draw_by_four(bound, count, visit)
                    }
                };
            }
            compiled_with!("avx2,avx512f,avx512vl", avx512);
            compiled_with!("avx2", avx2);
            if std::arch::is_x86_feature_detected!("avx512f")
                && std::arch::is_x86_feature_detected!("avx512vl")
                && std::arch::is_x86_feature_detected!("avx2")
            {
                // SAFETY: the processor supports AVX-512F/VL (and so AVX2), checked here.
                return unsafe { avx512(self, bound, count, visit) };
            }
            if std::arch::is_x86_feature_detected!("avx2") {
                // SAFETY: the processor supports AVX2 (checked just above).
                return unsafe { avx2(self, bound, count, visit) };
            }
        }
        self.draw_by_four(bound, count, visit)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn streams_are_prefix_stable() {
        let mut all = MemberStreams::new(7);
        let mut first_three = all.take(3);
        let mut later = MemberStreams::starting_at(7, 2).take(1);
        assert_eq!(first_three[2].below(1000), later[0].below(1000));
        assert_ne!(first_three[0].below(1 << 30), first_three[1].below(1 << 30));
    }

    #[test]
    fn below_stays_in_range_and_covers_it() {
        let mut draws = Draws::from_seed(1);
        let mut seen = [0usize; 7];
        for _ in 0..7000 {
            let k = draws.below(7);
            seen[k] += 1;
        }
        // Each cell expects 1000; 6 standard deviations is about 185 (common practice).
        assert!(seen.iter().all(|&c| (815..=1185).contains(&c)), "{seen:?}");
        let big = (u32::MAX as usize) * 3;
        for _ in 0..1000 {
            assert!(draws.below(big) < big);
        }
        assert_eq!(draws.below(1), 0);
    }

    #[test]
    fn batched_draws_equal_single_draws() {
        for bound in [
            1usize,
            3,
            1000,
            1 << 31,
            (1usize << 32) - 5,
            3 * (1usize << 32),
        ] {
            for count in [0usize, 1, 2, 7, 64] {
                let mut single = Draws::from_seed(11);
                let mut batched = Draws::from_seed(11);
                // Start both off an odd half so the spare path is exercised too.
                assert_eq!(single.below(5), batched.below(5));
                let expected: Vec<usize> = (0..count).map(|_| single.below(bound)).collect();
                let mut got = Vec::new();
                batched.for_each_below(bound, count, |k| got.push(k));
                assert_eq!(got, expected, "bound {bound}, count {count}");
                assert_eq!(single.below(1 << 20), batched.below(1 << 20));
            }
        }
    }

    /// Four streams drawn side by side give each stream's own draws, in its order, and
    /// leave each where a call of its own would (also through the per-lane tail and with
    /// one or every stream starting on a spare half, as after a stratum of an odd count).
    #[test]
    fn draws_by_four_equal_four_single_streams() {
        // 2^31 + 1 rejects almost half the halves; 3 · 2^32 takes the 64-bit path.
        let bounds = [
            1usize,
            3,
            1000,
            1_000_003,
            (1 << 31) + 1,
            (1 << 32) - 5,
            3 << 32,
        ];
        for bound in bounds {
            for count in [0usize, 1, 2, 3, 7, 64, 5001] {
                for spare_lanes in [&[][..], &[2], &[0, 1, 2, 3]] {
                    let mut streams = MemberStreams::new(bound as u64 ^ 99);
                    let mut single = streams.take(4);
                    let mut by_four = single.clone();
                    for &l in spare_lanes {
                        assert_eq!(single[l].below(5), by_four[l].below(5));
                    }
                    let expected: Vec<Vec<usize>> = single
                        .iter_mut()
                        .map(|d| (0..count).map(|_| d.below(bound)).collect())
                        .collect();
                    let mut got = vec![Vec::new(); 4];
                    let [a, b, c, d] = &mut by_four[..] else {
                        unreachable!()
                    };
                    Draws::for_each_below_by_four([a, b, c, d], bound, count, |l, k| {
                        got[l].push(k)
                    });
                    assert_eq!(got, expected, "bound {bound}, count {count}");
                    for (s, f) in single.iter_mut().zip(&mut by_four) {
                        assert_eq!(s.below(1 << 20), f.below(1 << 20), "bound {bound}");
                    }
                }
            }
        }
    }

    /// The portable build of the four-lane loop gives the draws of the dispatched one (on
    /// this processor perhaps its AVX-512 or AVX2 copy).
    #[test]
    fn four_lane_loop_is_the_same_in_every_build() {
        for bound in [1000u32, (1 << 31) + 1] {
            let mut streams = MemberStreams::new(5);
            let lanes = streams.take(4);
            let (mut first, mut second) = (lanes.clone(), lanes);
            let refs = |v: &mut Vec<Draws>| -> StateLanes {
                let [a, b, c, d] = &mut v[..] else {
                    unreachable!()
                };
                StateLanes::of(&[a, b, c, d], [0, 1, 0, 2])
            };
            let (mut portable, mut dispatched) = (refs(&mut first), refs(&mut second));
            let (mut seen_portable, mut seen_dispatched) = (Vec::new(), Vec::new());
            portable.draw_by_four(bound, 999, &mut |l, k| seen_portable.push((l, k)));
            dispatched.draw_by_four_dispatch(bound, 999, &mut |l, k| seen_dispatched.push((l, k)));
            assert_eq!(portable.drawn, dispatched.drawn);
            assert_eq!(seen_portable, seen_dispatched);
            assert_eq!(portable.words, dispatched.words);
        }
    }

    #[test]
    fn exponential_has_unit_mean() {
        let mut draws = Draws::from_seed(3);
        let n = 200_000;
        let mean: f64 = (0..n).map(|_| draws.exponential()).sum::<f64>() / n as f64;
        // Standard error 1/sqrt(n) ≈ 0.0022.
        assert!((mean - 1.0).abs() < 0.01, "{mean}");
        let u = draws.open_unit();
        assert!(u > 0.0 && u < 1.0);
    }
}
