//! BLAKE3 in keyed mode over many short messages at once.
//!
//! A row encodes to a few hundred bytes at most, and BLAKE3 hashes one short
//! message block after block, each compression waiting for the one before.
//! The `blake3` crate runs its SIMD code across the chunks of one long input
//! and keeps that code to itself; rows are many short inputs. So here the
//! compression function runs on 16 messages side by side: word `i` of the
//! state is an array holding word `i` of every message's state, which the
//! compiler turns into one vector register (AVX-512) or two (AVX2) per word.
//!
//! Only single-chunk messages (at most 1,024 bytes, the BLAKE3 chunk) are
//! hashed here; longer ones go to the `blake3` crate. Either way the result
//! is BLAKE3's own, bit for bit: the tests compare every length from 0 to
//! 1,100 bytes with the crate, and `tests/python/reference.py` compares row
//! digests with Python's `blake3` package. The algorithm follows the BLAKE3
//! specification (O'Connor, Aumasson, Neves, Wilcox-O'Hearn, 2020), sections
//! 2.1 to 2.6.

use std::ops::Range;

use crate::digest::RowDigest;

/// Messages hashed side by side.
const LANES: usize = 16;
/// BLAKE3's chunk: longer messages form a tree, left to the `blake3` crate.
const CHUNK_LEN: usize = 1024;
const BLOCK_LEN: usize = 64;

const IV: [u32; 8] =
    [0x6A09_E667, 0xBB67_AE85, 0x3C6E_F372, 0xA54F_F53A, 0x510E_527F, 0x9B05_688C, 0x1F83_D9AB, 0x5BE0_CD19];
const CHUNK_START: u32 = 1;
const CHUNK_END: u32 = 2;
const ROOT: u32 = 8;
const KEYED_HASH: u32 = 16;

/// The message word order of each of the seven rounds: the identity, then
/// the specification's permutation applied once more per round.
const SCHEDULE: [[usize; 16]; 7] = {
    const PERMUTATION: [usize; 16] = [2, 6, 3, 10, 7, 0, 4, 13, 1, 11, 12, 5, 9, 14, 15, 8];
    let mut s = [[0usize; 16]; 7];
    let mut i = 0;
    while i < 16 {
        s[0][i] = i;
        i += 1;
    }
    let mut r = 1;
    while r < 7 {
        let mut i = 0;
        while i < 16 {
            s[r][i] = s[r - 1][PERMUTATION[i]];
            i += 1;
        }
        r += 1;
    }
    s
};

type Word = [u32; LANES];

/// The first 128 bits of BLAKE3 keyed with `key` over `bytes[range]`, for
/// each range, in order.
pub fn keyed_many(key: &[u8; 32], bytes: &[u8], ranges: &[Range<usize>], out: &mut Vec<RowDigest>) {
    let start = out.len();
    out.resize(start + ranges.len(), [0; 16]);
    let out = &mut out[start..];
    #[cfg(target_arch = "x86_64")]
    {
        if std::arch::is_x86_feature_detected!("avx512f") && std::arch::is_x86_feature_detected!("avx512bw") {
            // SAFETY: the CPU has the features the function is compiled for.
            unsafe { avx512::keyed_many(key, bytes, ranges, out) };
            return;
        }
        if std::arch::is_x86_feature_detected!("avx2") {
            // SAFETY: as above.
            unsafe { keyed_many_avx2(key, bytes, ranges, out) };
            return;
        }
    }
    keyed_many_lanes(key, bytes, ranges, out);
}

#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2")]
fn keyed_many_avx2(key: &[u8; 32], bytes: &[u8], ranges: &[Range<usize>], out: &mut [RowDigest]) {
    keyed_many_lanes(key, bytes, ranges, out);
}

/// The messages that fit one chunk, by index; the others are hashed by the
/// `blake3` crate here and now.
#[inline(always)]
fn single_chunk(key: &[u8; 32], bytes: &[u8], ranges: &[Range<usize>], out: &mut [RowDigest]) -> Vec<usize> {
    let mut short: Vec<usize> = Vec::with_capacity(ranges.len());
    for (i, r) in ranges.iter().enumerate() {
        if r.len() > CHUNK_LEN {
            let h = blake3::keyed_hash(key, &bytes[r.clone()]);
            out[i].copy_from_slice(&h.as_bytes()[..16]);
        } else {
            short.push(i);
        }
    }
    short
}

fn key_words(key: &[u8; 32]) -> [u32; 8] {
    let mut words = [0u32; 8];
    for (w, c) in words.iter_mut().zip(key.chunks_exact(4)) {
        *w = u32::from_le_bytes(c.try_into().expect("four bytes"));
    }
    words
}

/// Flags of block `step` of a message of `blocks` blocks.
#[inline(always)]
fn block_flags(step: usize, blocks: usize) -> u32 {
    let mut f = KEYED_HASH;
    if step == 0 {
        f |= CHUNK_START;
    }
    if step + 1 == blocks {
        f |= CHUNK_END | ROOT;
    }
    f
}

/// The lane-parallel driver, compiled once per instruction set above.
#[inline(always)]
fn keyed_many_lanes(key: &[u8; 32], bytes: &[u8], ranges: &[Range<usize>], out: &mut [RowDigest]) {
    let key_words = key_words(key);
    for group in single_chunk(key, bytes, ranges, out).chunks(LANES) {
        hash_group(&key_words, bytes, ranges, group, out);
    }
}

/// Hashes up to [`LANES`] single-chunk messages side by side.
#[inline(always)]
fn hash_group(key: &[u32; 8], bytes: &[u8], ranges: &[Range<usize>], group: &[usize], out: &mut [RowDigest]) {
    let mut cv: [Word; 8] = [[0; LANES]; 8];
    for (word, &k) in cv.iter_mut().zip(key) {
        *word = [k; LANES];
    }
    // Every message has at least one block (the empty one compresses an
    // empty block).
    let mut blocks = [0usize; LANES];
    for (lane, &i) in group.iter().enumerate() {
        blocks[lane] = ranges[i].len().div_ceil(BLOCK_LEN).max(1);
    }
    let steps = blocks.iter().copied().max().unwrap_or(0);
    let mut m: [Word; 16] = [[0; LANES]; 16];
    let mut block_len: Word = [0; LANES];
    let mut flags: Word = [0; LANES];
    let mut active = [false; LANES];
    for step in 0..steps {
        for lane in 0..LANES {
            active[lane] = step < blocks[lane];
            if !active[lane] {
                for word in m.iter_mut() {
                    word[lane] = 0;
                }
                block_len[lane] = 0;
                flags[lane] = 0;
                continue;
            }
            let r = &ranges[group[lane]];
            let from = r.start + step * BLOCK_LEN;
            let len = (r.end - from).min(BLOCK_LEN);
            let mut block = [0u8; BLOCK_LEN];
            block[..len].copy_from_slice(&bytes[from..from + len]);
            for (w, word) in m.iter_mut().enumerate() {
                word[lane] = u32::from_le_bytes(block[4 * w..4 * w + 4].try_into().expect("four bytes"));
            }
            block_len[lane] = len as u32;
            flags[lane] = block_flags(step, blocks[lane]);
        }
        let next = compress(&cv, &m, &block_len, &flags);
        for (word, new) in cv.iter_mut().zip(next) {
            for lane in 0..LANES {
                if active[lane] {
                    word[lane] = new[lane];
                }
            }
        }
    }
    for (lane, &i) in group.iter().enumerate() {
        for w in 0..4 {
            out[i][4 * w..4 * w + 4].copy_from_slice(&cv[w][lane].to_le_bytes());
        }
    }
}

/// The BLAKE3 compression function on every lane, returning the new
/// chaining values (the first eight output words; the counter is zero, as
/// it is for the first chunk).
#[inline(always)]
fn compress(cv: &[Word; 8], m: &[Word; 16], block_len: &Word, flags: &Word) -> [Word; 8] {
    let mut v: [Word; 16] = [[0; LANES]; 16];
    v[..8].copy_from_slice(cv);
    for i in 0..4 {
        v[8 + i] = [IV[i]; LANES];
    }
    // v[12] and v[13] hold the 64-bit counter: zero.
    v[14] = *block_len;
    v[15] = *flags;
    for s in &SCHEDULE {
        g(&mut v, 0, 4, 8, 12, &m[s[0]], &m[s[1]]);
        g(&mut v, 1, 5, 9, 13, &m[s[2]], &m[s[3]]);
        g(&mut v, 2, 6, 10, 14, &m[s[4]], &m[s[5]]);
        g(&mut v, 3, 7, 11, 15, &m[s[6]], &m[s[7]]);
        g(&mut v, 0, 5, 10, 15, &m[s[8]], &m[s[9]]);
        g(&mut v, 1, 6, 11, 12, &m[s[10]], &m[s[11]]);
        g(&mut v, 2, 7, 8, 13, &m[s[12]], &m[s[13]]);
        g(&mut v, 3, 4, 9, 14, &m[s[14]], &m[s[15]]);
    }
    let mut next: [Word; 8] = [[0; LANES]; 8];
    for (i, word) in next.iter_mut().enumerate() {
        for lane in 0..LANES {
            word[lane] = v[i][lane] ^ v[i + 8][lane];
        }
    }
    next
}

/// The quarter-round G on every lane.
#[inline(always)]
fn g(v: &mut [Word; 16], a: usize, b: usize, c: usize, d: usize, x: &Word, y: &Word) {
    let (mut va, mut vb, mut vc, mut vd) = (v[a], v[b], v[c], v[d]);
    for l in 0..LANES {
        va[l] = va[l].wrapping_add(vb[l]).wrapping_add(x[l]);
        vd[l] = (vd[l] ^ va[l]).rotate_right(16);
        vc[l] = vc[l].wrapping_add(vd[l]);
        vb[l] = (vb[l] ^ vc[l]).rotate_right(12);
        va[l] = va[l].wrapping_add(vb[l]).wrapping_add(y[l]);
        vd[l] = (vd[l] ^ va[l]).rotate_right(8);
        vc[l] = vc[l].wrapping_add(vd[l]);
        vb[l] = (vb[l] ^ vc[l]).rotate_right(7);
    }
    v[a] = va;
    v[b] = vb;
    v[c] = vc;
    v[d] = vd;
}

/// The same with AVX-512 intrinsics: each message block is one vector
/// load, the sixteen blocks are transposed to message words in registers
/// (the lane-parallel code above stages them through memory, which costs
/// more than the rounds), and state and message stay in the 32 registers.
#[cfg(target_arch = "x86_64")]
mod avx512 {
    use std::arch::x86_64::*;
    use std::ops::Range;

    use super::{key_words, single_chunk, BLOCK_LEN, CHUNK_END, CHUNK_START, IV, KEYED_HASH, LANES, ROOT, SCHEDULE};
    use crate::digest::RowDigest;

    #[target_feature(enable = "avx512f,avx512bw")]
    pub(super) fn keyed_many(key: &[u8; 32], bytes: &[u8], ranges: &[Range<usize>], out: &mut [RowDigest]) {
        let key_words = key_words(key);
        for group in single_chunk(key, bytes, ranges, out).chunks(LANES) {
            hash_group(&key_words, bytes, ranges, group, out);
        }
    }

    #[inline]
    #[target_feature(enable = "avx512f,avx512bw")]
    fn hash_group(key: &[u32; 8], bytes: &[u8], ranges: &[Range<usize>], group: &[usize], out: &mut [RowDigest]) {
        let mut cv: [__m512i; 8] = std::array::from_fn(|i| _mm512_set1_epi32(key[i] as i32));
        let mut starts = [0usize; LANES];
        let mut lens = [0u32; LANES];
        let mut blocks = [0u32; LANES];
        for (lane, &i) in group.iter().enumerate() {
            let r = &ranges[i];
            starts[lane] = r.start;
            lens[lane] = r.len() as u32;
            blocks[lane] = r.len().div_ceil(BLOCK_LEN).max(1) as u32;
        }
        let steps = blocks.iter().copied().max().unwrap_or(0);
        // SAFETY: both arrays hold 16 words (unaligned loads).
        let (lens_v, blocks_v) =
            unsafe { (_mm512_loadu_si512(lens.as_ptr().cast()), _mm512_loadu_si512(blocks.as_ptr().cast())) };
        let mut rows = [_mm512_setzero_si512(); 16];
        for step in 0..steps as usize {
            let step_v = _mm512_set1_epi32(step as i32);
            // Lanes whose message has this block; the others keep their
            // chaining value (and their stale block is never used).
            let active = _mm512_cmpgt_epu32_mask(blocks_v, step_v);
            let block_len = _mm512_min_epu32(
                _mm512_sub_epi32(lens_v, _mm512_set1_epi32((step * BLOCK_LEN) as i32)),
                _mm512_set1_epi32(BLOCK_LEN as i32),
            );
            let base = _mm512_set1_epi32((KEYED_HASH | if step == 0 { CHUNK_START } else { 0 }) as i32);
            let last = _mm512_cmpeq_epu32_mask(blocks_v, _mm512_set1_epi32(step as i32 + 1));
            let flags = _mm512_mask_or_epi32(base, last, base, _mm512_set1_epi32((CHUNK_END | ROOT) as i32));
            for lane in 0..group.len() {
                if step as u32 >= blocks[lane] {
                    continue;
                }
                let from = starts[lane] + step * BLOCK_LEN;
                let len = (lens[lane] as usize - step * BLOCK_LEN).min(BLOCK_LEN);
                let block = &bytes[from..from + len];
                // A masked load reads the block's bytes only and zeroes the
                // rest of the vector (a partial block is zero-padded).
                let mask: u64 = if len == BLOCK_LEN { u64::MAX } else { (1u64 << len) - 1 };
                // SAFETY: the mask covers `block`'s `len` bytes and no more;
                // masked-off bytes are not read.
                rows[lane] = unsafe { _mm512_maskz_loadu_epi8(mask, block.as_ptr().cast()) };
            }
            let m = transpose(rows);
            let next = compress(&cv, &m, block_len, flags);
            for (word, new) in cv.iter_mut().zip(next) {
                *word = _mm512_mask_mov_epi32(*word, active, new);
            }
        }
        let mut words = [[0u32; LANES]; 4];
        for (w, word) in words.iter_mut().enumerate() {
            // SAFETY: `word` holds 16 words.
            unsafe { _mm512_storeu_si512(word.as_mut_ptr().cast(), cv[w]) };
        }
        for (lane, &i) in group.iter().enumerate() {
            for (w, word) in words.iter().enumerate() {
                out[i][4 * w..4 * w + 4].copy_from_slice(&word[lane].to_le_bytes());
            }
        }
    }

    /// Rows (one message block per lane) to columns (one message word per
    /// vector): the 2 x 2 block transpose applied at block sizes 8, 4, 2, 1.
    #[inline]
    #[target_feature(enable = "avx512f,avx512bw")]
    fn transpose(mut r: [__m512i; 16]) -> [__m512i; 16] {
        for d in [8usize, 4, 2, 1] {
            let mut lo = [0i32; 16];
            let mut hi = [0i32; 16];
            for j in 0..16 {
                let (l, h) = if j & d == 0 { (j, j + d) } else { (16 + j - d, 16 + j) };
                lo[j] = l as i32;
                hi[j] = h as i32;
            }
            // SAFETY: both arrays hold 16 indices.
            let (lo, hi) = unsafe { (_mm512_loadu_si512(lo.as_ptr().cast()), _mm512_loadu_si512(hi.as_ptr().cast())) };
            for i in 0..16 {
                if i & d == 0 {
                    let (a, b) = (r[i], r[i + d]);
                    r[i] = _mm512_permutex2var_epi32(a, lo, b);
                    r[i + d] = _mm512_permutex2var_epi32(a, hi, b);
                }
            }
        }
        r
    }

    #[inline]
    #[target_feature(enable = "avx512f,avx512bw")]
    fn compress(cv: &[__m512i; 8], m: &[__m512i; 16], block_len: __m512i, flags: __m512i) -> [__m512i; 8] {
        let zero = _mm512_setzero_si512();
        let mut v = [
            cv[0],
            cv[1],
            cv[2],
            cv[3],
            cv[4],
            cv[5],
            cv[6],
            cv[7],
            _mm512_set1_epi32(IV[0] as i32),
            _mm512_set1_epi32(IV[1] as i32),
            _mm512_set1_epi32(IV[2] as i32),
            _mm512_set1_epi32(IV[3] as i32),
            zero,
            zero,
            block_len,
            flags,
        ];
        // Seven rounds written out, so that every message index is a
        // constant and the message stays in registers.
        macro_rules! round {
            ($r:literal) => {
                let s = &SCHEDULE[$r];
                g(&mut v, 0, 4, 8, 12, m[s[0]], m[s[1]]);
                g(&mut v, 1, 5, 9, 13, m[s[2]], m[s[3]]);
                g(&mut v, 2, 6, 10, 14, m[s[4]], m[s[5]]);
                g(&mut v, 3, 7, 11, 15, m[s[6]], m[s[7]]);
                g(&mut v, 0, 5, 10, 15, m[s[8]], m[s[9]]);
                g(&mut v, 1, 6, 11, 12, m[s[10]], m[s[11]]);
                g(&mut v, 2, 7, 8, 13, m[s[12]], m[s[13]]);
                g(&mut v, 3, 4, 9, 14, m[s[14]], m[s[15]]);
            };
        }
        round!(0);
        round!(1);
        round!(2);
        round!(3);
        round!(4);
        round!(5);
        round!(6);
        std::array::from_fn(|i| _mm512_xor_si512(v[i], v[i + 8]))
    }

    #[inline]
    #[target_feature(enable = "avx512f,avx512bw")]
    fn g(v: &mut [__m512i; 16], a: usize, b: usize, c: usize, d: usize, x: __m512i, y: __m512i) {
        v[a] = _mm512_add_epi32(_mm512_add_epi32(v[a], v[b]), x);
        v[d] = _mm512_ror_epi32::<16>(_mm512_xor_si512(v[d], v[a]));
        v[c] = _mm512_add_epi32(v[c], v[d]);
        v[b] = _mm512_ror_epi32::<12>(_mm512_xor_si512(v[b], v[c]));
        v[a] = _mm512_add_epi32(_mm512_add_epi32(v[a], v[b]), y);
        v[d] = _mm512_ror_epi32::<8>(_mm512_xor_si512(v[d], v[a]));
        v[c] = _mm512_add_epi32(v[c], v[d]);
        v[b] = _mm512_ror_epi32::<7>(_mm512_xor_si512(v[b], v[c]));
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn crate_digest(key: &[u8; 32], msg: &[u8]) -> RowDigest {
        let mut d = [0u8; 16];
        d.copy_from_slice(&blake3::keyed_hash(key, msg).as_bytes()[..16]);
        d
    }

    /// The `blake3` crate is the reference: every length across the block
    /// and chunk edges, messages of mixed lengths in one group, and groups
    /// that do not fill every lane.
    #[test]
    fn agrees_with_the_blake3_crate_at_every_length() {
        let key: [u8; 32] = std::array::from_fn(|i| (i * 7 + 3) as u8);
        let bytes: Vec<u8> = (0..4096u32).map(|i| (i % 251) as u8).collect();
        let ranges: Vec<Range<usize>> = (0..=1100).map(|n| (n * 3 % 97)..(n * 3 % 97 + n)).collect();
        let mut out = Vec::new();
        keyed_many(&key, &bytes, &ranges, &mut out);
        for (r, d) in ranges.iter().zip(&out) {
            assert_eq!(*d, crate_digest(&key, &bytes[r.clone()]), "length {}", r.len());
        }
        for n in [0, 1, 5, 15, 16, 17, 33] {
            let few = &ranges[200..200 + n];
            let mut out = vec![[9u8; 16]];
            keyed_many(&key, &bytes, few, &mut out);
            assert_eq!(out.len(), n + 1);
            assert_eq!(out[0], [9u8; 16], "earlier digests are kept");
            for (r, d) in few.iter().zip(&out[1..]) {
                assert_eq!(*d, crate_digest(&key, &bytes[r.clone()]));
            }
        }
    }

    /// The portable build of the lanes (what a machine without AVX2 runs)
    /// agrees too.
    #[test]
    fn portable_lanes_agree() {
        let key = [0x5a; 32];
        let bytes: Vec<u8> = (0..3000u32).map(|i| (i * 31 % 256) as u8).collect();
        let ranges: Vec<Range<usize>> = (0..300).map(|n| n..n + (n * 13) % 1025).collect();
        let mut out = vec![[0u8; 16]; ranges.len()];
        keyed_many_lanes(&key, &bytes, &ranges, &mut out);
        for (r, d) in ranges.iter().zip(&out) {
            assert_eq!(*d, crate_digest(&key, &bytes[r.clone()]));
        }
    }
}
