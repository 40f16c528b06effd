//! Keyed random streams: every draw is a pure function of (seed, replication, purpose, cycle, shock,
//! village or slot), never of the arm, the thread or the order in which work is scheduled.
//!
//! Why: arms of one replication must see the same shocks for the same member (common random
//! numbers, which make paired comparisons between policies sharp), and results must be
//! bit-identical for any thread count. Seeking a fresh generator per member per cycle is too slow,
//! so each (replication, purpose, cycle, shock, village) gets one ChaCha8 stream, and slot index
//! `m` within the village owns the fixed-width block of words at word position `m * W`. A draw that
//! needs more words than its block (a rejection sampler's rare retry) continues in a fallback
//! region of the same stream reserved for that slot, so it can never shift another slot's draws.
//!
//! Reproducibility promise: for a given crate version and Cargo.lock, the same scenario and seed
//! give the same draws on every platform (ChaCha is portable; all integer-to-float conversions are
//! written out here). A value-stability test pins exact outputs.

use rand::{RngCore, SeedableRng};
use rand_chacha::{ChaCha8Rng, ChaCha20Rng};

/// What a stream is used for; part of the stream identifier.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[repr(u64)]
pub enum Purpose {
    /// Random order of formation: one sort key per (slot, cycle).
    Formation = 1,
    /// The idiosyncratic normal e_i of a member-scope shock.
    MemberShock = 2,
    /// Severity of a hit.
    Severity = 3,
    /// The village factor Mv of a member-scope shock (village field 0, one block per village).
    VillageFactor = 4,
    /// The portfolio factor Mp of a member-scope shock (village field 0).
    PortfolioFactor = 5,
    /// Whether a group is struck, keyed by the group's lowest slot.
    GroupStrike = 6,
    /// Whether a village is struck (village field 0, one block per village).
    VillageStrike = 7,
    /// Whether the portfolio is struck (village field 0).
    PortfolioStrike = 8,
    /// Whether a member of a struck unit is hit (`reach`).
    Reach = 9,
    /// Whether a member drops out at the end of the cycle.
    Dropout = 10,
    /// Attributes of a new entrant, keyed by (slot, occupant number).
    Entry = 11,
    /// Whether a member able to pay walks away: one uniform per (slot, cycle), with the occupant
    /// number folded in (see [`occupant_word`]).
    Temptation = 12,
}

/// Word offset of the per-slot fallback region (far beyond any primary block).
const FALLBACK_BASE_WORD: u128 = 1 << 66;
/// Words of fallback reserved per slot.
const FALLBACK_WORDS_PER_SLOT: u128 = 1 << 32;

/// The 256-bit key of one replication: the first 32 bytes of ChaCha20 keyed by the seed (little
/// endian, zero padded) on stream `replication`. Distinct replications get unrelated keys.
pub fn replication_key(seed: u64, replication: u32) -> [u8; 32] {
    let mut master = [0u8; 32];
    master[..8].copy_from_slice(&seed.to_le_bytes());
    let mut rng = ChaCha20Rng::from_seed(master);
    rng.set_stream(u64::from(replication));
    let mut key = [0u8; 32];
    rng.fill_bytes(&mut key);
    key
}

/// Domain tag of loan-book keys (bytes 8..16 of their master key), so that no loan-book key can
/// equal a replication key.
const LOAN_BOOK_TAG: [u8; 8] = *b"loanbook";

/// The 256-bit key of the loan book's replication of arm `arm`: the first 32 bytes of ChaCha20
/// keyed by the seed and a loan-book tag, on stream `arm`.
///
/// Why not [`replication_key`]: every arm of a replication shares its draws (common random
/// numbers), so a book built from one replication of several arms would repeat the same villages'
/// shocks under every arm. Keying by the arm makes each arm's villages independent of every other
/// arm's and of the run's replications.
pub fn loan_book_key(seed: u64, arm: u32) -> [u8; 32] {
    let mut master = [0u8; 32];
    master[..8].copy_from_slice(&seed.to_le_bytes());
    master[8..16].copy_from_slice(&LOAN_BOOK_TAG);
    let mut rng = ChaCha20Rng::from_seed(master);
    rng.set_stream(u64::from(arm));
    let mut key = [0u8; 32];
    rng.fill_bytes(&mut key);
    key
}

/// Stream identifier of a per-cycle stream: purpose (4 bits), shock (8), cycle (24), village (28).
/// Scenario validation bounds shocks, cycles and villages so the fields never overflow.
pub fn cycle_stream_id(purpose: Purpose, cycle: u32, shock: usize, village: u32) -> u64 {
    debug_assert!(shock < (1 << 8) && cycle < (1 << 24) && village < (1 << 28));
    ((purpose as u64) << 60) | ((shock as u64) << 52) | (u64::from(cycle) << 28) | u64::from(village)
}

/// Stream identifier of an entrant's attributes: purpose (4 bits), slot (28), occupant number (32).
pub fn entry_stream_id(slot: u32, occupant: u32) -> u64 {
    ((Purpose::Entry as u64) << 60) | (u64::from(slot) << 32) | u64::from(occupant)
}

/// A person's own word from her slot's word: the slot's word (from the per-(cycle, village) stream
/// of its purpose) with the occupant number folded in by the SplitMix64 finaliser (Steele, Lea and
/// Flood 2014), a bijection of 64-bit words. Within an arm a slot has one occupant per cycle, so the
/// words of different people and cycles come from disjoint stream words and are independent; across
/// arms the same person in the same cycle gets the same word, and a replacement gets another.
#[inline]
pub fn occupant_word(slot_word: u64, occupant: u32) -> u64 {
    let mut z = slot_word ^ u64::from(occupant).wrapping_mul(0x9e37_79b9_7f4a_7c15);
    z = (z ^ (z >> 30)).wrapping_mul(0xbf58_476d_1ce4_e5b9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94d0_49bb_1331_11eb);
    z ^ (z >> 31)
}

/// A uniform double in [0, 1) from the top 53 bits of a word (the shared conversion).
pub use crate::maths::unit_f64;

/// Opens a stream at word position 0.
pub fn open(key: &[u8; 32], stream_id: u64) -> ChaCha8Rng {
    let mut rng = ChaCha8Rng::from_seed(*key);
    rng.set_stream(stream_id);
    rng
}

/// A densely generated run of per-slot blocks of one stream, kept as 64-bit words (pairs of the
/// generator's 32-bit words, the first one low, as ChaCha's little-endian bytes give them on every
/// platform), reused across fills to avoid allocation.
#[derive(Debug, Default, Clone)]
pub struct DenseBlocks {
    /// Word pairs: 32-bit words `2j` (low half) and `2j + 1` (high half).
    words: Vec<u64>,
}

impl DenseBlocks {
    /// Fills the blocks of `slots` consecutive slot indices (from 0), `width` 32-bit words each.
    pub fn fill(&mut self, key: &[u8; 32], stream_id: u64, slots: usize, width: usize) {
        // A whole number of word pairs: an odd total generates one word more, never read.
        let pairs = (slots * width).div_ceil(2);
        if self.words.len() < pairs {
            // only grows: the generator overwrites every word that is read
            self.words.resize(pairs, 0);
        }
        // The block function writes the stream's words straight into the buffer (the words
        // `rand_chacha` gives, without its buffer, its copy or a generator per stream), so the hot
        // loops read plain words with no staging copy.
        super::chacha_blocks::fill_pairs(key, stream_id, &mut self.words[..pairs]);
    }

    /// 32-bit word `word` of the run (block `m` of width `W` starts at word `m * W`).
    #[inline]
    pub fn word(&self, word: usize) -> u32 {
        (self.words[word / 2] >> (32 * (word % 2))) as u32
    }

    /// The 64-bit value of 2-word block `index` (low word first).
    #[inline]
    pub fn u64_at(&self, index: u32) -> u64 {
        self.words[index as usize]
    }

    /// The 64-bit values of the first `len` 2-word blocks, for loops that read them in order.
    #[inline]
    pub fn pairs(&self, len: usize) -> &[u64] {
        &self.words[..len]
    }
}

/// The draws of one slot: its fixed block of words, then its private fallback region.
///
/// Implements `RngCore`, so any sampler can consume it; a sampler that needs more words than the
/// block holds continues in the fallback region reserved for this slot.
pub struct SlotDraws<'a, const W: usize> {
    words: [u32; W],
    used: usize,
    key: &'a [u8; 32],
    stream_id: u64,
    slot_index: u32,
    fallback: Option<Box<ChaCha8Rng>>,
}

impl<'a, const W: usize> SlotDraws<'a, W> {
    /// The block of slot index `slot_index`, taken from a densely filled buffer of `W`-word blocks.
    #[inline]
    pub fn from_dense(key: &'a [u8; 32], stream_id: u64, dense: &DenseBlocks, slot_index: u32) -> Self {
        let start = slot_index as usize * W;
        let words = std::array::from_fn(|j| dense.word(start + j));
        Self::from_words(words, key, stream_id, slot_index)
    }

    fn from_words(words: [u32; W], key: &'a [u8; 32], stream_id: u64, slot_index: u32) -> Self {
        SlotDraws {
            words,
            used: 0,
            key,
            stream_id,
            slot_index,
            fallback: None,
        }
    }

    /// The block of slot index `slot_index`, read by seeking (for sparse access).
    pub fn seek(key: &'a [u8; 32], stream_id: u64, slot_index: u32) -> Self {
        let mut rng = open(key, stream_id);
        rng.set_word_pos(u128::from(slot_index) * W as u128);
        let words = std::array::from_fn(|_| rng.next_u32());
        Self::from_words(words, key, stream_id, slot_index)
    }

    fn fallback_u32(&mut self) -> u32 {
        let (key, id, idx) = (self.key, self.stream_id, self.slot_index);
        self.fallback
            .get_or_insert_with(|| {
                let mut rng = open(key, id);
                rng.set_word_pos(FALLBACK_BASE_WORD + u128::from(idx) * FALLBACK_WORDS_PER_SLOT);
                Box::new(rng)
            })
            .next_u32()
    }
}

impl<const W: usize> RngCore for SlotDraws<'_, W> {
    #[inline]
    fn next_u32(&mut self) -> u32 {
        if self.used < W {
            let w = self.words[self.used];
            self.used += 1;
            w
        } else {
            self.fallback_u32()
        }
    }

    #[inline]
    fn next_u64(&mut self) -> u64 {
        let lo = u64::from(self.next_u32());
        let hi = u64::from(self.next_u32());
        lo | (hi << 32)
    }

    fn fill_bytes(&mut self, dest: &mut [u8]) {
        for chunk in dest.chunks_mut(4) {
            let w = self.next_u32().to_le_bytes();
            chunk.copy_from_slice(&w[..chunk.len()]);
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand_distr::{Distribution, StandardNormal};

    #[test]
    fn dense_and_seek_give_the_same_block() {
        let key = replication_key(42, 3);
        let id = cycle_stream_id(Purpose::MemberShock, 7, 1, 5);
        let mut dense = DenseBlocks::default();
        dense.fill(&key, id, 100, 4);
        for m in [0u32, 1, 17, 99] {
            let mut a = SlotDraws::<4>::from_dense(&key, id, &dense, m);
            let mut b = SlotDraws::<4>::seek(&key, id, m);
            for _ in 0..6 {
                assert_eq!(a.next_u32(), b.next_u32());
            }
        }
    }

    /// Dense words against rand_chacha's own word sequence of the same stream, read one word at a
    /// time: word pair j is words 2j (low) and 2j + 1 (high), also for an odd number of words.
    #[test]
    fn dense_words_are_the_stream_words_in_order() {
        let key = replication_key(7, 2);
        let id = cycle_stream_id(Purpose::Formation, 4, 0, 9);
        let mut dense = DenseBlocks::default();
        for (slots, width) in [(1usize, 1usize), (37, 2), (101, 3), (250, 4)] {
            dense.fill(&key, id, slots, width);
            let mut reference = open(&key, id);
            let words: Vec<u32> = (0..slots * width).map(|_| reference.next_u32()).collect();
            for (j, &w) in words.iter().enumerate() {
                assert_eq!(dense.word(j), w, "word {j} of {slots} x {width}");
            }
            for j in 0..slots * width / 2 {
                let expected = u64::from(words[2 * j]) | (u64::from(words[2 * j + 1]) << 32);
                assert_eq!(dense.u64_at(j as u32), expected);
                assert_eq!(dense.pairs(j + 1)[j], expected);
            }
        }
    }

    #[test]
    fn fallback_regions_differ_between_slots_and_from_blocks() {
        let key = replication_key(1, 0);
        let id = cycle_stream_id(Purpose::Severity, 1, 0, 0);
        let mut a = SlotDraws::<2>::seek(&key, id, 0);
        let mut b = SlotDraws::<2>::seek(&key, id, 1);
        let xa: Vec<u32> = (0..4).map(|_| a.next_u32()).collect();
        let xb: Vec<u32> = (0..4).map(|_| b.next_u32()).collect();
        assert_ne!(xa[2..], xb[2..]);
        assert_ne!(xa[..2], xb[..2]);
    }

    #[test]
    fn loan_book_keys_differ_between_arms_and_from_replication_keys() {
        let book: Vec<[u8; 32]> = (0..4).map(|a| loan_book_key(9, a)).collect();
        for (a, key) in book.iter().enumerate() {
            assert!(book[a + 1..].iter().all(|other| other != key));
            assert!((0..8).all(|r| replication_key(9, r) != *key));
        }
        assert_ne!(loan_book_key(9, 0), loan_book_key(10, 0));
    }

    #[test]
    fn replication_keys_are_distinct() {
        assert_ne!(replication_key(0, 0), replication_key(0, 1));
        assert_ne!(replication_key(0, 0), replication_key(1, 0));
    }

    /// Value stability: these exact outputs are part of the reproducibility promise. A change here
    /// changes every simulated figure for a given seed and must be announced.
    #[test]
    fn value_stability() {
        let key = replication_key(2026, 1);
        let id = cycle_stream_id(Purpose::MemberShock, 3, 0, 2);
        let mut d = SlotDraws::<2>::seek(&key, id, 4);
        let x = d.next_u64();
        let mut e = SlotDraws::<2>::seek(&key, id, 5);
        let z: f64 = StandardNormal.sample(&mut e);
        let u = unit_f64(open(&key, entry_stream_id(9, 2)).next_u64());
        assert_eq!(x, 241971101961109621);
        assert_eq!(z, -0.05579330286264155);
        assert_eq!(u, 0.640012261384164);
    }
}
