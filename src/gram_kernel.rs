//! Exact integer dot products of u8 count rows, a tile of member pairs at a time.
//!
//! A tile is computed with register blocking (each 32-byte chunk of a row is loaded once
//! and used against four others) on the widest integer multiply-add the CPU has, picked at
//! run time: AVX-512BW `vpmaddwd` on 32 lanes, AVX2 on 16, or portable code. Every path sums
//! the same integers exactly, so the result is identical on every CPU.

use std::ops::Range;

/// Calls `add(a, b, Σ_i x_a[i] · x_b[i])` once for every pair `a ∈ ra`, `b ∈ rb` with
/// `b ≥ a`, where `x_m = row(m)` (all of the same length).
pub(crate) fn tile_dots_u8<'r>(
    ra: Range<usize>,
    rb: Range<usize>,
    row: impl Fn(usize) -> &'r [u8],
    mut add: impl FnMut(usize, usize, u64),
) {
    let mut a0 = ra.start;
    while a0 < ra.end {
        let mut b0 = rb.start;
        while b0 < rb.end {
            let whole = a0 + 4 <= ra.end && b0 + 4 <= rb.end && b0 + 3 >= a0;
            if whole {
                let a_rows = [row(a0), row(a0 + 1), row(a0 + 2), row(a0 + 3)];
                let b_rows = [row(b0), row(b0 + 1), row(b0 + 2), row(b0 + 3)];
                let mut sums = [[0u64; 4]; 4];
                for start in (0..a_rows[0].len()).step_by(MAX_COLUMNS) {
                    let end = (start + MAX_COLUMNS).min(a_rows[0].len());
                    let part = block_4x4(
                        a_rows.map(|r| &r[start..end]),
                        b_rows.map(|r| &r[start..end]),
                    );
                    for (line, add) in sums.iter_mut().zip(part) {
                        line.iter_mut().zip(add).for_each(|(s, v)| *s += v);
                    }
                }
                for (p, line) in sums.iter().enumerate() {
                    for (q, &v) in line.iter().enumerate() {
                        if b0 + q >= a0 + p {
                            add(a0 + p, b0 + q, v);
                        }
                    }
                }
            } else {
                for a in a0..(a0 + 4).min(ra.end) {
                    for b in b0.max(a)..(b0 + 4).min(rb.end) {
                        add(a, b, dot_u8(row(a), row(b)));
                    }
                }
            }
            b0 += 4;
        }
        a0 += 4;
    }
}

/// Longest rows the kernels take: per 32-bit lane at most 2 · 255² per step, and a lane
/// sees one step per 32 columns (AVX-512) or 16 (AVX2), so 8,192 columns stay below 2^31
/// in every lane and below 2^32 summed over the lanes.
pub(crate) const MAX_COLUMNS: usize = 8192;

/// Σ_i a_i b_i for u8 rows of any length (portable).
pub(crate) fn dot_u8(a: &[u8], b: &[u8]) -> u64 {
    a.chunks(MAX_COLUMNS)
        .zip(b.chunks(MAX_COLUMNS))
        .map(|(a, b)| dot_u8_block(a, b))
        .sum()
}

/// Σ_i a_i b_i for u8 rows of up to [`MAX_COLUMNS`]: u32 lanes cannot overflow.
#[inline]
fn dot_u8_block(a: &[u8], b: &[u8]) -> u64 {
    let mut lanes = [0u32; 32];
    let chunks_a = a.chunks_exact(32);
    let chunks_b = b.chunks_exact(32);
    let tail: u64 = chunks_a
        .remainder()
        .iter()
        .zip(chunks_b.remainder())
        .map(|(&x, &y)| u64::from(x) * u64::from(y))
        .sum();
    for (ca, cb) in chunks_a.zip(chunks_b) {
        for k in 0..32 {
            lanes[k] += u32::from(u16::from(ca[k]) * u16::from(cb[k]));
        }
    }
    lanes.iter().map(|&v| u64::from(v)).sum::<u64>() + tail
}

fn block_4x4(a: [&[u8]; 4], b: [&[u8]; 4]) -> [[u64; 4]; 4] {
    debug_assert!(a.iter().chain(&b).all(|r| r.len() == a[0].len()));
    debug_assert!(a[0].len() <= MAX_COLUMNS);
    #[cfg(target_arch = "x86_64")]
    {
        if std::arch::is_x86_feature_detected!("avx512bw") {
            // SAFETY: the CPU has AVX-512BW (checked above); rows have equal lengths.
            return unsafe { x86::block_4x4_avx512(a, b) };
        }
        if std::arch::is_x86_feature_detected!("avx2") {
            // SAFETY: the CPU has AVX2 (checked above); rows have equal lengths.
            return unsafe { x86::block_4x4_avx2(a, b) };
        }
    }
    block_4x4_portable(a, b)
}

fn block_4x4_portable(a: [&[u8]; 4], b: [&[u8]; 4]) -> [[u64; 4]; 4] {
    std::array::from_fn(|p| std::array::from_fn(|q| dot_u8_block(a[p], b[q])))
}

#[cfg(target_arch = "x86_64")]
mod x86 {
    use std::arch::x86_64::*;

    /// Σ over the columns after `body` (the part no full vector covers).
    #[inline(always)]
    fn tails(a: [&[u8]; 4], b: [&[u8]; 4], body: usize) -> [[u64; 4]; 4] {
        std::array::from_fn(|p| {
            std::array::from_fn(|q| {
                a[p][body..]
                    .iter()
                    .zip(&b[q][body..])
                    .map(|(&x, &y)| u64::from(x) * u64::from(y))
                    .sum()
            })
        })
    }

    #[target_feature(enable = "avx512f,avx512bw")]
    pub(super) unsafe fn block_4x4_avx512(a: [&[u8]; 4], b: [&[u8]; 4]) -> [[u64; 4]; 4] {
        let len = a[0].len();
        let body = len / 32 * 32;
        let mut sums = [[_mm512_setzero_si512(); 4]; 4];
        let mut i = 0;
        while i < body {
            // SAFETY: i + 32 <= body <= len for every row.
            let load = |r: &[u8]| unsafe {
                _mm512_cvtepu8_epi16(_mm256_loadu_si256(r.as_ptr().add(i).cast()))
            };
            let va = [load(a[0]), load(a[1]), load(a[2]), load(a[3])];
            let vb = [load(b[0]), load(b[1]), load(b[2]), load(b[3])];
            for p in 0..4 {
                for q in 0..4 {
                    sums[p][q] = _mm512_add_epi32(sums[p][q], _mm512_madd_epi16(va[p], vb[q]));
                }
            }
            i += 32;
        }
        let mut out = tails(a, b, body);
        for p in 0..4 {
            for q in 0..4 {
                // Each lane is below 2^31 and their total below 2^32 (MAX_COLUMNS).
                out[p][q] += u64::from(_mm512_reduce_add_epi32(sums[p][q]) as u32);
            }
        }
        out
    }

    #[target_feature(enable = "avx2")]
    pub(super) unsafe fn block_4x4_avx2(a: [&[u8]; 4], b: [&[u8]; 4]) -> [[u64; 4]; 4] {
        let len = a[0].len();
        let body = len / 16 * 16;
        let mut out = tails(a, b, body);
        // Two rows of a at a time: 8 accumulators and 6 operands fit the 16 registers.
        for half in 0..2 {
            let mut sums = [[_mm256_setzero_si256(); 4]; 2];
            let mut i = 0;
            while i < body {
                // SAFETY: i + 16 <= body <= len for every row.
                let load = |r: &[u8]| unsafe {
                    _mm256_cvtepu8_epi16(_mm_loadu_si128(r.as_ptr().add(i).cast()))
                };
                let va = [load(a[2 * half]), load(a[2 * half + 1])];
                let vb = [load(b[0]), load(b[1]), load(b[2]), load(b[3])];
                for p in 0..2 {
                    for q in 0..4 {
                        sums[p][q] = _mm256_add_epi32(sums[p][q], _mm256_madd_epi16(va[p], vb[q]));
                    }
                }
                i += 16;
            }
            for p in 0..2 {
                for q in 0..4 {
                    let s = sums[p][q];
                    let folded =
                        _mm_add_epi32(_mm256_castsi256_si128(s), _mm256_extracti128_si256::<1>(s));
                    let lanes: [u32; 4] = std::mem::transmute(folded);
                    let total: u64 = lanes.iter().map(|&v| u64::from(v)).sum();
                    out[2 * half + p][q] += total;
                }
            }
        }
        out
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn naive(a: &[u8], b: &[u8]) -> u64 {
        a.iter()
            .zip(b)
            .map(|(&x, &y)| u64::from(x) * u64::from(y))
            .sum()
    }

    fn rows(members: usize, len: usize, seed: u64, max: u8) -> Vec<Vec<u8>> {
        let mut state = seed.wrapping_mul(0x9E37_79B9_7F4A_7C15) | 1;
        (0..members)
            .map(|_| {
                (0..len)
                    .map(|_| {
                        state ^= state << 13;
                        state ^= state >> 7;
                        state ^= state << 17;
                        (state % (u64::from(max) + 1)) as u8
                    })
                    .collect()
            })
            .collect()
    }

    #[test]
    fn every_path_equals_the_plain_sum() {
        // Lengths around both vector widths, and the longest allowed at the largest count
        // (the lane-overflow edge).
        for (len, max) in [
            (0, 5),
            (1, 5),
            (15, 9),
            (16, 9),
            (33, 255),
            (1000, 7),
            (MAX_COLUMNS, 255),
        ] {
            let r = rows(8, len, len as u64 + 1, max);
            let a = [&r[0][..], &r[1], &r[2], &r[3]];
            let b = [&r[4][..], &r[5], &r[6], &r[7]];
            let expected: [[u64; 4]; 4] =
                std::array::from_fn(|p| std::array::from_fn(|q| naive(a[p], b[q])));
            assert_eq!(block_4x4(a, b), expected, "len {len}");
            assert_eq!(block_4x4_portable(a, b), expected, "len {len}");
            #[cfg(target_arch = "x86_64")]
            {
                if std::arch::is_x86_feature_detected!("avx512bw") {
                    assert_eq!(unsafe { x86::block_4x4_avx512(a, b) }, expected);
                }
                if std::arch::is_x86_feature_detected!("avx2") {
                    assert_eq!(unsafe { x86::block_4x4_avx2(a, b) }, expected);
                }
            }
        }
        let all_max = vec![255u8; MAX_COLUMNS];
        let a = [&all_max[..]; 4];
        assert_eq!(block_4x4(a, a)[3][3], 255 * 255 * MAX_COLUMNS as u64);
    }

    #[test]
    fn rows_longer_than_a_block_are_summed_exactly() {
        let r = rows(8, 3 * MAX_COLUMNS + 17, 9, 255);
        tile_dots_u8(
            0..8,
            0..8,
            |m| &r[m],
            |a, b, v| assert_eq!(v, naive(&r[a], &r[b])),
        );
        assert_eq!(dot_u8(&r[0], &r[1]), naive(&r[0], &r[1]));
    }

    #[test]
    fn a_tile_visits_each_upper_pair_once() {
        let r = rows(11, 300, 3, 4);
        for (ra, rb) in [(0..11, 0..11), (0..4, 4..11), (2..9, 5..7), (3..4, 0..11)] {
            let mut seen = std::collections::BTreeMap::new();
            tile_dots_u8(
                ra.clone(),
                rb.clone(),
                |m| &r[m],
                |a, b, v| {
                    assert!(seen.insert((a, b), v).is_none(), "({a}, {b}) twice");
                },
            );
            let expected: std::collections::BTreeMap<_, _> = ra
                .clone()
                .flat_map(|a| rb.clone().filter(move |&b| b >= a).map(move |b| (a, b)))
                .map(|(a, b)| ((a, b), naive(&r[a], &r[b])))
                .collect();
            assert_eq!(seen, expected, "{ra:?} x {rb:?}");
        }
    }
}
