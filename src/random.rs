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
