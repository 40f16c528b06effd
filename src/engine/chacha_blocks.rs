//! ChaCha8 keystream written straight into the engine's word buffers.
//!
//! Why: every dense fill of the engine (formation keys, member-shock uniforms, village factors and
//! strikes, dropout) went through `rand_chacha`'s buffered generator, which computes four blocks
//! into its own buffer and then copies them out, and sets up a generator per stream. Profiles put
//! the copy and the set-up at about a tenth of a run. This module computes the very same words
//! (Bernstein's ChaCha with 8 rounds; key in words 4-11, a 64-bit block counter in words 12-13 and
//! the 64-bit stream number in words 14-15, the layout of `rand_chacha` 0.9) into the caller's
//! buffer: eight blocks at a time with AVX2 where the processor has it (checked at run time), one
//! block at a time otherwise. The tests compare every word with `rand_chacha` on both paths, so the
//! reproducibility promise is unchanged: the same words on every platform.

/// "expand 32-byte k", ChaCha's constant words.
const CONSTANTS: [u32; 4] = [0x6170_7865, 0x3320_646e, 0x7962_2d32, 0x6b20_6574];

/// ChaCha8: 8 rounds, 4 double rounds.
const DOUBLE_ROUNDS: usize = 4;

/// 64-bit pairs of words per ChaCha block (16 words of 32 bits).
const PAIRS_PER_BLOCK: usize = 8;

/// Writes the first `out.len()` word pairs of the ChaCha8 stream `stream` under `key` into `out`:
/// pair j holds word 2j in its low half and word 2j + 1 in its high half, as `rand::Rng::fill` on
/// `rand_chacha::ChaCha8Rng` gives them on every platform.
pub fn fill_pairs(key: &[u8; 32], stream: u64, out: &mut [u64]) {
    let input = initial_state(key, stream);
    #[cfg(target_arch = "x86_64")]
    if std::arch::is_x86_feature_detected!("avx2") {
        // SAFETY: the processor has AVX2, checked just above.
        unsafe { avx2::fill(&input, out) };
        return;
    }
    fill_portable(&input, out);
}

/// The input block of `stream` under `key` at block counter 0.
fn initial_state(key: &[u8; 32], stream: u64) -> [u32; 16] {
    let mut state = [0u32; 16];
    state[..4].copy_from_slice(&CONSTANTS);
    for (word, bytes) in state[4..12].iter_mut().zip(key.chunks_exact(4)) {
        *word = u32::from_le_bytes([bytes[0], bytes[1], bytes[2], bytes[3]]);
    }
    state[14] = stream as u32;
    state[15] = (stream >> 32) as u32;
    state
}

/// One block at a time, on any processor.
fn fill_portable(input: &[u32; 16], out: &mut [u64]) {
    fill_blocks_from(input, 0, out);
}

/// Blocks `first_block`, `first_block + 1`, ... one at a time into `out`.
fn fill_blocks_from(input: &[u32; 16], first_block: u64, out: &mut [u64]) {
    for (counter, chunk) in (first_block..).zip(out.chunks_mut(PAIRS_PER_BLOCK)) {
        let words = block(input, counter);
        for (j, pair) in chunk.iter_mut().enumerate() {
            *pair = u64::from(words[2 * j]) | (u64::from(words[2 * j + 1]) << 32);
        }
    }
}

/// The 16 words of block `counter`.
fn block(input: &[u32; 16], counter: u64) -> [u32; 16] {
    let mut start = *input;
    start[12] = counter as u32;
    start[13] = (counter >> 32) as u32;
    block_function(start, DOUBLE_ROUNDS)
}

/// ChaCha's block function of `double_rounds` double rounds on the state `start`: the rounds, then
/// the start added word by word.
fn block_function(start: [u32; 16], double_rounds: usize) -> [u32; 16] {
    let mut x = start;
    for _ in 0..double_rounds {
        quarter_round(&mut x, 0, 4, 8, 12);
        quarter_round(&mut x, 1, 5, 9, 13);
        quarter_round(&mut x, 2, 6, 10, 14);
        quarter_round(&mut x, 3, 7, 11, 15);
        quarter_round(&mut x, 0, 5, 10, 15);
        quarter_round(&mut x, 1, 6, 11, 12);
        quarter_round(&mut x, 2, 7, 8, 13);
        quarter_round(&mut x, 3, 4, 9, 14);
    }
    for (word, s) in x.iter_mut().zip(start) {
        *word = word.wrapping_add(s);
    }
    x
}

#[inline(always)]
fn quarter_round(x: &mut [u32; 16], a: usize, b: usize, c: usize, d: usize) {
    x[a] = x[a].wrapping_add(x[b]);
    x[d] = (x[d] ^ x[a]).rotate_left(16);
    x[c] = x[c].wrapping_add(x[d]);
    x[b] = (x[b] ^ x[c]).rotate_left(12);
    x[a] = x[a].wrapping_add(x[b]);
    x[d] = (x[d] ^ x[a]).rotate_left(8);
    x[c] = x[c].wrapping_add(x[d]);
    x[b] = (x[b] ^ x[c]).rotate_left(7);
}

/// Eight blocks side by side: AVX2 lane b of register i holds word i of block b, so a quarter round
/// of eight blocks is twelve vector instructions, and a transpose turns the lanes into blocks.
#[cfg(target_arch = "x86_64")]
mod avx2 {
    use super::{DOUBLE_ROUNDS, PAIRS_PER_BLOCK};
    use std::arch::x86_64::*;

    /// Pairs written by one call of [`blocks8`].
    const PAIRS_PER_CALL: usize = 8 * PAIRS_PER_BLOCK;

    /// [`super::fill_pairs`] for processors with AVX2.
    ///
    /// # Safety
    /// The processor must have AVX2.
    #[target_feature(enable = "avx2")]
    pub(super) unsafe fn fill(input: &[u32; 16], out: &mut [u64]) {
        let whole = out.len() / PAIRS_PER_CALL;
        let mut chunks = out.chunks_exact_mut(PAIRS_PER_CALL);
        for (c, chunk) in chunks.by_ref().enumerate() {
            // SAFETY: AVX2 is present (this function's contract); the chunk holds 64 pairs.
            unsafe { blocks8(input, (c * 8) as u64, chunk.as_mut_ptr().cast()) };
        }
        let rest = chunks.into_remainder();
        let first_block = whole * 8;
        // A tail of one block is computed on its own; from two blocks on, eight side by side cost
        // less (callgrind and wall time on villages of 10 and of 200 slots).
        if rest.len() <= PAIRS_PER_BLOCK {
            super::fill_blocks_from(input, first_block as u64, rest);
        } else {
            let mut last = [0u64; PAIRS_PER_CALL];
            // SAFETY: as above, into a buffer of 64 pairs.
            unsafe { blocks8(input, first_block as u64, last.as_mut_ptr().cast()) };
            rest.copy_from_slice(&last[..rest.len()]);
        }
    }

    /// Writes blocks `first_block` to `first_block + 7` to `dst` (64 pairs, unaligned).
    #[inline]
    #[target_feature(enable = "avx2")]
    unsafe fn blocks8(input: &[u32; 16], first_block: u64, dst: *mut __m256i) {
        let counters: [u64; 8] = std::array::from_fn(|lane| first_block + lane as u64);
        let low = |lane: usize| counters[lane] as u32 as i32;
        let high = |lane: usize| (counters[lane] >> 32) as u32 as i32;
        let mut start: [__m256i; 16] = std::array::from_fn(|i| _mm256_set1_epi32(input[i] as i32));
        start[12] = _mm256_setr_epi32(low(0), low(1), low(2), low(3), low(4), low(5), low(6), low(7));
        start[13] = _mm256_setr_epi32(high(0), high(1), high(2), high(3), high(4), high(5), high(6), high(7));
        // byte shuffles that rotate every 32-bit word left by 16 and by 8 bits
        let rot16 = _mm256_setr_epi8(
            2, 3, 0, 1, 6, 7, 4, 5, 10, 11, 8, 9, 14, 15, 12, 13, 2, 3, 0, 1, 6, 7, 4, 5, 10, 11, 8, 9, 14, 15, 12, 13,
        );
        let rot8 = _mm256_setr_epi8(
            3, 0, 1, 2, 7, 4, 5, 6, 11, 8, 9, 10, 15, 12, 13, 14, 3, 0, 1, 2, 7, 4, 5, 6, 11, 8, 9, 10, 15, 12, 13, 14,
        );
        let mut x = start;
        macro_rules! quarter {
            ($a:expr, $b:expr, $c:expr, $d:expr) => {
                x[$a] = _mm256_add_epi32(x[$a], x[$b]);
                x[$d] = _mm256_shuffle_epi8(_mm256_xor_si256(x[$d], x[$a]), rot16);
                x[$c] = _mm256_add_epi32(x[$c], x[$d]);
                let t = _mm256_xor_si256(x[$b], x[$c]);
                x[$b] = _mm256_or_si256(_mm256_slli_epi32::<12>(t), _mm256_srli_epi32::<20>(t));
                x[$a] = _mm256_add_epi32(x[$a], x[$b]);
                x[$d] = _mm256_shuffle_epi8(_mm256_xor_si256(x[$d], x[$a]), rot8);
                x[$c] = _mm256_add_epi32(x[$c], x[$d]);
                let t = _mm256_xor_si256(x[$b], x[$c]);
                x[$b] = _mm256_or_si256(_mm256_slli_epi32::<7>(t), _mm256_srli_epi32::<25>(t));
            };
        }
        for _ in 0..DOUBLE_ROUNDS {
            quarter!(0, 4, 8, 12);
            quarter!(1, 5, 9, 13);
            quarter!(2, 6, 10, 14);
            quarter!(3, 7, 11, 15);
            quarter!(0, 5, 10, 15);
            quarter!(1, 6, 11, 12);
            quarter!(2, 7, 8, 13);
            quarter!(3, 4, 9, 14);
        }
        for (word, s) in x.iter_mut().zip(start) {
            *word = _mm256_add_epi32(*word, s);
        }
        let low_words = transpose(&x[..8]);
        let high_words = transpose(&x[8..]);
        for b in 0..8 {
            // SAFETY: dst holds 16 registers' worth (64 pairs); unaligned stores.
            unsafe {
                _mm256_storeu_si256(dst.add(2 * b), low_words[b]);
                _mm256_storeu_si256(dst.add(2 * b + 1), high_words[b]);
            }
        }
    }

    /// Rows r0..r7 (word i of blocks 0..7 in row i) to columns: result b holds word 0..7 of block b.
    #[inline]
    #[target_feature(enable = "avx2")]
    fn transpose(r: &[__m256i]) -> [__m256i; 8] {
        let t0 = _mm256_unpacklo_epi32(r[0], r[1]);
        let t1 = _mm256_unpackhi_epi32(r[0], r[1]);
        let t2 = _mm256_unpacklo_epi32(r[2], r[3]);
        let t3 = _mm256_unpackhi_epi32(r[2], r[3]);
        let t4 = _mm256_unpacklo_epi32(r[4], r[5]);
        let t5 = _mm256_unpackhi_epi32(r[4], r[5]);
        let t6 = _mm256_unpacklo_epi32(r[6], r[7]);
        let t7 = _mm256_unpackhi_epi32(r[6], r[7]);
        // u_j: words 0..3 of blocks j (low half) and j + 4 (high half), and likewise v_j for words 4..7
        let u0 = _mm256_unpacklo_epi64(t0, t2);
        let u1 = _mm256_unpackhi_epi64(t0, t2);
        let u2 = _mm256_unpacklo_epi64(t1, t3);
        let u3 = _mm256_unpackhi_epi64(t1, t3);
        let v0 = _mm256_unpacklo_epi64(t4, t6);
        let v1 = _mm256_unpackhi_epi64(t4, t6);
        let v2 = _mm256_unpacklo_epi64(t5, t7);
        let v3 = _mm256_unpackhi_epi64(t5, t7);
        [
            _mm256_permute2x128_si256::<0x20>(u0, v0),
            _mm256_permute2x128_si256::<0x20>(u1, v1),
            _mm256_permute2x128_si256::<0x20>(u2, v2),
            _mm256_permute2x128_si256::<0x20>(u3, v3),
            _mm256_permute2x128_si256::<0x31>(u0, v0),
            _mm256_permute2x128_si256::<0x31>(u1, v1),
            _mm256_permute2x128_si256::<0x31>(u2, v2),
            _mm256_permute2x128_si256::<0x31>(u3, v3),
        ]
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::SeedableRng;
    use rand_chacha::ChaCha8Rng;

    /// The words `rand_chacha` 0.9 gives for the same key and stream (the reference: an independent
    /// implementation of the same published cipher).
    fn reference(key: &[u8; 32], stream: u64, pairs: usize) -> Vec<u64> {
        let mut rng = ChaCha8Rng::from_seed(*key);
        rng.set_stream(stream);
        let mut out = vec![0u64; pairs];
        rand::Rng::fill(&mut rng, &mut out[..]);
        out
    }

    fn keys() -> Vec<[u8; 32]> {
        let mut patterned = [0u8; 32];
        for (i, b) in patterned.iter_mut().enumerate() {
            *b = (i as u8).wrapping_mul(37).wrapping_add(11);
        }
        vec![
            [0u8; 32],
            [0xff; 32],
            patterned,
            crate::engine::streams::replication_key(7, 3),
        ]
    }

    // every tail: none, part of one block or one block (on its own), two to eight blocks (side by side)
    const LENGTHS: [usize; 17] = [0, 1, 7, 8, 9, 16, 17, 63, 64, 65, 80, 81, 100, 127, 128, 200, 1000];
    const STREAMS: [u64; 4] = [0, 1, 0x1234_5678_9abc_def0, u64::MAX];

    #[test]
    fn the_words_are_those_of_rand_chacha() {
        for key in keys() {
            for stream in STREAMS {
                for pairs in LENGTHS {
                    let mut out = vec![1u64; pairs];
                    fill_pairs(&key, stream, &mut out);
                    assert_eq!(out, reference(&key, stream, pairs), "stream {stream:#x}, {pairs} pairs");
                }
            }
        }
    }

    #[test]
    fn the_portable_path_gives_the_same_words() {
        for key in keys() {
            for stream in STREAMS {
                let mut out = vec![0u64; 200];
                fill_portable(&initial_state(&key, stream), &mut out);
                assert_eq!(out, reference(&key, stream, 200));
            }
        }
    }

    /// RFC 7539's ChaCha20 block test vector (section 2.3.2) checks the round function itself, with
    /// 10 double rounds instead of 4 and the RFC's 32-bit counter and 96-bit nonce in words 12-15.
    #[test]
    fn the_round_function_matches_the_rfc_7539_vector() {
        let key: [u8; 32] = std::array::from_fn(|i| i as u8);
        let mut state = initial_state(&key, 0);
        state[12] = 1;
        state[13] = 0x0900_0000;
        state[14] = 0x4a00_0000;
        state[15] = 0;
        let x = block_function(state, 10);
        let expected: [u32; 16] = [
            0xe4e7f110, 0x15593bd1, 0x1fdd0f50, 0xc47120a3, 0xc7f4d1c7, 0x0368c033, 0x9aaa2204, 0x4e6cd4c3, 0x466482d2,
            0x09aa9f07, 0x05d7c214, 0xa2028bd9, 0xd19c12b5, 0xb94e16de, 0xe883d0cb, 0x4e3c50a2,
        ];
        assert_eq!(x, expected);
    }
}
