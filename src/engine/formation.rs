//! Model step 2 (formation): who borrows together this cycle, and the four slot shares.
//!
//! Within each village, persistent groups whose members are all still there and eligible are
//! kept; the remaining eligible members are ordered (a random shuffle, or ascending risk) and cut
//! into groups. With every group of size k the fewer-than-k left over wait; with sizes allowed in
//! [min, max] the cut ([`cut`]) makes groups as even as possible around k, so that whether a
//! village divides by k no longer decides how many of its members borrow.

use super::ArmReplication;
use super::streams::{Purpose, cycle_stream_id};
use crate::scenario::{Exclusion, Formation, Matching};
use crate::stats::CycleRecord;

/// Scratch buffers of formation, reused across villages and cycles.
#[derive(Default)]
pub(super) struct FormationScratch {
    candidates: Vec<u64>,
    sort_scratch: Vec<u64>,
    sort_counts: Vec<u32>,
    assortative: Vec<(f64, u64, u32)>,
}

/// How `n` members in formation order are cut into groups of sizes in [min, max] around the
/// nominal size k: `(groups, members)`, the first `members` of them forming `groups` groups as even
/// as possible (the larger first), the rest waiting.
///
/// The number of groups g is the value in [ceil(m / max), floor(m / min)] closest to m / k, a tie
/// going to the larger g, with m = n when that range is not empty and otherwise the largest m < n
/// for which it is not. Fewer than `min` members all wait. With min = max = k this is n / k groups
/// of k.
pub fn cut(n: usize, k: usize, min: usize, max: usize) -> (usize, usize) {
    if min == max {
        return (n / min, n / min * min);
    }
    let mut m = n;
    while m >= min {
        let (low, high) = (m.div_ceil(max), m / min);
        if low <= high {
            // |g - m/k| compares as |g k - m|: integers, no rounding
            let distance = |g: usize| (g * k).abs_diff(m);
            let below = (m / k).clamp(low, high);
            let above = m.div_ceil(k).clamp(low, high);
            let g = if distance(below) < distance(above) {
                below
            } else {
                above
            };
            return (g, m);
        }
        m -= 1;
    }
    (0, 0)
}

impl ArmReplication<'_> {
    /// Step 2: forms the village's groups and counts its shares of the pool.
    pub(super) fn formation(&mut self, v: usize, cycle: u32, counted: bool, record: &mut CycleRecord) {
        let range = self.layout.range(v);
        self.groups.village_first[v] = self.groups.len();
        // `assigned` marks the members of kept groups; without kept groups nobody is marked and
        // the flags are neither cleared nor read.
        let kept = self.policy.formation == Formation::Persistent && !self.previous.is_empty();
        if kept {
            self.pool.assigned[range.clone()].fill(false);
            self.keep_persistent_groups(v, cycle);
        }
        let counts = self.form_village(v, cycle, kept);
        if counted {
            // Served members are exactly the grouped ones.
            let (occupied, excluded) = match counts {
                Some(counts) => counts,
                None => occupied_and_excluded(
                    &self.pool.occupied[range.clone()],
                    &self.pool.excluded_through[range.clone()],
                    cycle,
                ),
            };
            let first = self.groups.village_first[v];
            let last = self.groups.len();
            let served = self.groups.member_range(first, last).len() as u64;
            let empty = range.len() as u64 - occupied;
            let waiting = occupied - excluded - served;
            self.tally.served_slot_cycles += served;
            self.tally.excluded_slot_cycles += excluded;
            self.tally.waiting_slot_cycles += waiting;
            self.tally.empty_slot_cycles += empty;
            // outreach: each borrower counted once over the counted cycles, and slots emptied by
            // removal (only permanent exclusion removes anybody)
            let reached = &mut self.pool.reached;
            let mut new_clients = 0u64;
            for &i in &self.groups.members[self.groups.member_range(first, last)] {
                new_clients += u64::from(!reached[i as usize]);
                reached[i as usize] = true;
            }
            self.tally.clients_reached += new_clients;
            if self.policy.exclusion_cycles == Exclusion::Permanent {
                let removed = self.pool.occupied[range.clone()]
                    .iter()
                    .zip(&self.pool.removed[range.clone()])
                    .filter(|&(&occ, &rem)| !occ & rem)
                    .count();
                self.tally.removed_slot_cycles += removed as u64;
            }
            record.excluded += excluded as u32;
            record.served += served as u32;
            record.groups += (last - first) as u32;
        }
    }

    /// Keeps last cycle's groups of village `v` whose members are all the same people and eligible.
    fn keep_persistent_groups(&mut self, v: usize, cycle: u32) {
        let previous = &self.previous;
        for g in previous.village_first[v]..previous.village_first[v + 1] {
            let positions = previous.member_range(g, g + 1);
            let members = &previous.members[positions.clone()];
            let entrants = &self.previous_entrants[positions];
            let keep = members.iter().zip(entrants).all(|(&i, &e)| {
                let i = i as usize;
                self.pool.eligible(i, cycle) && self.pool.entrants[i] == e + 1
            });
            if keep {
                for &i in members {
                    self.pool.assigned[i as usize] = true;
                }
                self.groups.push_group(members);
            }
        }
    }

    /// Orders the village's unassigned eligible members and cuts them into groups (of k, or by
    /// [`cut`] when sizes may vary). Returns the village's occupied and excluded slot counts when
    /// its pass over the slots counted them on the way.
    fn form_village(&mut self, v: usize, cycle: u32, kept: bool) -> Option<(u64, u64)> {
        let k = self.policy.group_size as usize;
        let (min, max) = (
            self.policy.min_group_size() as usize,
            self.policy.max_group_size() as usize,
        );
        let varying = min != max;
        let (start, end) = (self.layout.village_start[v], self.layout.village_start[v + 1]);
        let size = end - start;
        let needs_keys = max > 1;
        if needs_keys {
            let id = cycle_stream_id(Purpose::Formation, cycle, 0, v as u32);
            self.dense.fill(&self.key, id, size, 2);
        }
        let scratch = &mut self.formation_scratch;
        let mut counts = None;
        match self.policy.matching {
            Matching::Random => {
                // Sort keys pack the slot's random word above its index in the village, so one
                // integer comparison orders by the random word and breaks ties by position.
                // Village sizes are below 2^28 (validated), so the index fits in the low bits.
                let index_bits = usize::BITS - size.leading_zeros();
                let index_mask = (1u64 << index_bits) - 1;
                if scratch.candidates.len() < size {
                    // only grows: every entry read below is written first
                    scratch.candidates.resize(size, 0);
                }
                let pass = CandidatePass {
                    assigned: &self.pool.assigned[start..end],
                    occupied: &self.pool.occupied[start..end],
                    through: &self.pool.excluded_through[start..end],
                    random: if needs_keys { self.dense.pairs(size) } else { &[] },
                    index_mask,
                    cycle,
                };
                let candidates = &mut scratch.candidates[..size];
                let (len, n_occupied, n_excluded) = match (kept, needs_keys) {
                    (false, true) => pass.run::<false, true>(candidates),
                    (true, true) => pass.run::<true, true>(candidates),
                    (false, false) => pass.run::<false, false>(candidates),
                    (true, false) => pass.run::<true, false>(candidates),
                };
                counts = Some((n_occupied, n_excluded));
                let order: &[u64] = if needs_keys {
                    sort_uniform_keys(
                        &scratch.candidates[..len],
                        &mut scratch.sort_scratch,
                        &mut scratch.sort_counts,
                    )
                } else {
                    &scratch.candidates[..len]
                };
                // the new groups' members need no `assigned` mark: nothing reads it after this pass
                let take = |c: &u64| (start + (c & index_mask) as usize) as u32;
                if varying {
                    let (groups, full) = cut(len, k, min, max);
                    self.groups.push_even_groups(groups, order[..full].iter().map(take));
                } else {
                    let full = len / k * k;
                    self.groups.push_equal_groups(k, order[..full].iter().map(take));
                }
            }
            Matching::Assortative => {
                scratch.assortative.clear();
                for m in 0..size {
                    let i = start + m;
                    if !(kept && self.pool.assigned[i]) && self.pool.eligible(i, cycle) {
                        let random = if needs_keys { self.dense.u64_at(m as u32) } else { 0 };
                        scratch.assortative.push((self.pool.risk[i], random, i as u32));
                    }
                }
                scratch
                    .assortative
                    .sort_unstable_by(|a, b| a.0.total_cmp(&b.0).then(a.1.cmp(&b.1)).then(a.2.cmp(&b.2)));
                let take = |&(_, _, i): &(f64, u64, u32)| i;
                let len = scratch.assortative.len();
                if varying {
                    let (groups, full) = cut(len, k, min, max);
                    self.groups
                        .push_even_groups(groups, scratch.assortative[..full].iter().map(take));
                } else {
                    let full = len / k * k;
                    self.groups
                        .push_equal_groups(k, scratch.assortative[..full].iter().map(take));
                }
            }
        }
        counts
    }
}

/// The pass of random formation over one village's slots: the sort keys of the eligible members
/// not in kept groups, and the occupied and excluded counts.
struct CandidatePass<'a> {
    assigned: &'a [bool],
    occupied: &'a [bool],
    through: &'a [u32],
    /// The slots' formation words (empty when groups have one member and need no order).
    random: &'a [u64],
    index_mask: u64,
    cycle: u32,
}

impl CandidatePass<'_> {
    /// Writes the candidates' keys to the front of `candidates` (one entry per slot of room) and
    /// returns (candidates, occupied, excluded). `KEPT`: some members are in kept groups (read
    /// `assigned`); `KEYS`: the order is random (read the words).
    #[inline(always)]
    fn run<const KEPT: bool, const KEYS: bool>(&self, candidates: &mut [u64]) -> (usize, u64, u64) {
        let size = self.occupied.len();
        let (assigned, occupied, through) = (&self.assigned[..size], self.occupied, &self.through[..size]);
        let random = if KEYS { &self.random[..size] } else { &[][..] };
        let (mut len, mut n_occupied, mut n_excluded) = (0usize, 0u64, 0u64);
        for m in 0..size {
            let (o, t) = (occupied[m], through[m]);
            let free = !(KEPT && assigned[m]);
            let word = if KEYS { random[m] & !self.index_mask } else { 0 };
            // written unconditionally, kept only when eligible: avoids a hard-to-predict branch
            candidates[len] = word | m as u64;
            len += usize::from(free & o & (t < self.cycle));
            n_occupied += u64::from(o);
            n_excluded += u64::from(o & (t >= self.cycle));
        }
        (len, n_occupied, n_excluded)
    }
}

/// Occupied slots and excluded members among `occupied` slots whose exclusions end at `through`.
fn occupied_and_excluded(occupied: &[bool], through: &[u32], cycle: u32) -> (u64, u64) {
    let (mut n_occupied, mut n_excluded) = (0u64, 0u64);
    for (&o, &t) in occupied.iter().zip(through) {
        n_occupied += u64::from(o);
        n_excluded += u64::from(o & (t >= cycle));
    }
    (n_occupied, n_excluded)
}

/// Sorts keys whose high bits are uniformly random in expected linear time: a counting pass on the
/// top bits spreads them into about one key per bucket, then insertion sort fixes the few keys that
/// share a bucket. Gives exactly the order of a comparison sort, in `sorted` (a buffer reused
/// between calls), and returns it.
pub(super) fn sort_uniform_keys<'a>(keys: &[u64], sorted: &'a mut Vec<u64>, counts: &mut Vec<u32>) -> &'a [u64] {
    let n = keys.len();
    if sorted.len() < n {
        // only grows: every entry returned is written first
        sorted.resize(n, 0);
    }
    let sorted = &mut sorted[..n];
    if n < 2 {
        sorted.copy_from_slice(keys);
        return sorted;
    }
    let bits = (usize::BITS - (n - 1).leading_zeros()).clamp(1, 20);
    let shift = 64 - bits;
    counts.clear();
    counts.resize((1usize << bits) + 1, 0);
    for &key in keys {
        counts[(key >> shift) as usize + 1] += 1;
    }
    for b in 1..counts.len() {
        counts[b] += counts[b - 1];
    }
    for &key in keys {
        let bucket = (key >> shift) as usize;
        sorted[counts[bucket] as usize] = key;
        counts[bucket] += 1;
    }
    // The scatter leaves the keys ordered by bucket and, within a bucket, in arrival order. A key
    // is out of place exactly when some earlier key is larger: a branch-free pass over the running
    // maximum lists those (about one key in eight), and insertion moves only them. Insertion in
    // ascending position order sees the same prefix set as a full insertion sort would, so the
    // result is that of a full sort.
    let misplaced = counts;
    if misplaced.len() < n {
        misplaced.resize(n, 0);
    }
    let mut len = 0usize;
    let mut max = sorted[0];
    for (i, &key) in sorted.iter().enumerate().skip(1) {
        misplaced[len] = i as u32;
        len += usize::from(key < max);
        max = max.max(key);
    }
    for &i in &misplaced[..len] {
        let i = i as usize;
        let key = sorted[i];
        let mut j = i;
        while j > 0 && sorted[j - 1] > key {
            sorted[j] = sorted[j - 1];
            j -= 1;
        }
        sorted[j] = key;
    }
    sorted
}

#[cfg(test)]
mod tests {
    use super::cut;

    /// n = 30, k = 8, sizes 7 to 9: g in [ceil(30 / 9), floor(30 / 7)] = [4, 4], so 4 groups (8, 8,
    /// 7, 7); n = 13, k = 5, sizes 5 to 6: no g fits 13
    /// (ceil(13 / 6) = 3 > floor(13 / 5) = 2), 12 fits as 6 + 6, the last member waits.
    #[test]
    fn the_cut_takes_the_largest_cuttable_number() {
        assert_eq!(cut(30, 8, 7, 9), (4, 30));
        assert_eq!(cut(13, 5, 5, 6), (2, 12));
        // 10 / 4 = 2.5 ties g = 2 and g = 3 (|8 - 10| = |12 - 10| = 2): the larger, 4 + 3 + 3
        assert_eq!(cut(10, 4, 3, 5), (3, 10));
        // 18 / 4 = 4.5: g = 5, sizes 4, 4, 4, 3, 3
        assert_eq!(cut(18, 4, 3, 9), (5, 18));
    }
}
