//! Member and pool state, and model step 1 (entry).
//!
//! Members are stored village by village (structure of arrays) so that everything one village
//! touches in a cycle is contiguous; groups are stored as member lists with offsets, so a group's
//! size is whatever formation made it.

use super::ArmReplication;
use super::streams;

/// Per-member state, stored village by village (structure of arrays).
pub(super) struct Pool {
    /// Whether the slot holds a member.
    pub occupied: Vec<bool>,
    /// Entrants so far; the current member is entrant number `entrants - 1`.
    pub entrants: Vec<u32>,
    /// Income ratio w (income / amount due).
    pub income: Vec<f64>,
    /// Risk multiplier u.
    pub risk: Vec<f64>,
    /// Last cycle of exclusion; eligible in cycle t iff `excluded_through < t`.
    pub excluded_through: Vec<u32>,
    /// Hit probability min(1, u p) per member-scope shock row: `hit_probability[row * N + index]`.
    pub hit_probability: Vec<f64>,
    /// Its normal quantile Phi^-1(min(1, u p)), the threshold of the factor model.
    pub threshold: Vec<f64>,
    /// Whether the member is in a group this cycle.
    pub assigned: Vec<bool>,
    /// Capacity multiplier prod (1 - s) this cycle of each member of the village at work, by slot
    /// within the village: only the first village-size entries are used (the shock step sets them
    /// and the settlement reads them before the next village), so they stay in cache.
    pub multiplier: Vec<f64>,
    /// Whether the member fell short of the amount due this cycle (S > 0).
    pub short: Vec<bool>,
    /// Whether the slot is empty because its occupant was removed for good, until it is refilled.
    pub removed: Vec<bool>,
    /// Whether the current member has borrowed in a counted cycle (clients reached).
    pub reached: Vec<bool>,
    /// Whether the member, able to pay, walked away this cycle (strategic default).
    pub walked: Vec<bool>,
    /// Her current principal P_i (the scenario's principal unless loans grow).
    pub principal: Vec<f64>,
    /// The cycle she entered in (her income ratio grows from it).
    pub entry_cycle: Vec<u32>,
    /// Empty slots per village, so that entry skips villages with none without scanning them.
    pub vacancies: Vec<u32>,
}

impl Pool {
    /// An empty pool of the slots of `layout` with `member_shocks` member-scope shocks.
    pub fn new(layout: &Layout, member_shocks: usize) -> Self {
        let n = layout.n;
        Pool {
            occupied: vec![false; n],
            entrants: vec![0; n],
            income: vec![0.0; n],
            risk: vec![0.0; n],
            excluded_through: vec![0; n],
            hit_probability: vec![0.0; member_shocks * n],
            threshold: vec![f64::NEG_INFINITY; member_shocks * n],
            assigned: vec![false; n],
            multiplier: vec![1.0; (0..layout.villages).map(|v| layout.range(v).len()).max().unwrap_or(0)],
            short: vec![false; n],
            removed: vec![false; n],
            reached: vec![false; n],
            walked: vec![false; n],
            principal: vec![0.0; n],
            entry_cycle: vec![0; n],
            vacancies: (0..layout.villages).map(|v| layout.range(v).len() as u32).collect(),
        }
    }

    /// Whether slot `i` holds a member who may borrow in `cycle`.
    #[inline]
    pub fn eligible(&self, i: usize, cycle: u32) -> bool {
        self.occupied[i] && self.excluded_through[i] < cycle
    }
}

/// Where each village's members sit in the pool arrays.
pub(super) struct Layout {
    /// Slots (= villages' total size).
    pub n: usize,
    /// Villages V.
    pub villages: usize,
    /// First internal index of each village, and one past the last (length V + 1).
    pub village_start: Vec<usize>,
}

impl Layout {
    /// Slot j lives in village j % V; village v's members are stored at `village_start[v]..`.
    pub fn new(borrowers: u32, villages: u32, village_size: impl Fn(u32) -> u32) -> Self {
        let mut village_start = Vec::with_capacity(villages as usize + 1);
        let mut at = 0usize;
        for v in 0..villages {
            village_start.push(at);
            at += village_size(v) as usize;
        }
        village_start.push(at);
        Layout {
            n: borrowers as usize,
            villages: villages as usize,
            village_start,
        }
    }

    /// Internal indices of village `v`.
    #[inline]
    pub fn range(&self, v: usize) -> std::ops::Range<usize> {
        self.village_start[v]..self.village_start[v + 1]
    }

    /// The scenario's slot number of internal index `i` in village `v` (used to key streams).
    #[inline]
    pub fn slot_of(&self, v: usize, i: usize) -> u32 {
        (v + self.villages * (i - self.village_start[v])) as u32
    }
}

/// One cycle's groups: group g's members are `members[offsets[g] .. offsets[g + 1]]`, and the
/// groups of village v are `village_first[v] .. village_first[v + 1]`.
#[derive(Debug, Clone)]
pub(super) struct Groups {
    /// Internal indices of grouped members, group after group.
    pub members: Vec<u32>,
    /// Start of each group in `members`, then one past the last (length groups + 1).
    pub offsets: Vec<u32>,
    /// First group of each village, then one past the last (length V + 1).
    pub village_first: Vec<usize>,
}

impl Groups {
    /// No groups, for a pool of `villages` villages.
    pub fn new(villages: usize, capacity: usize) -> Self {
        Groups {
            members: Vec::with_capacity(capacity),
            offsets: vec![0],
            village_first: vec![0; villages + 1],
        }
    }

    /// Removes every group.
    pub fn clear(&mut self) {
        self.members.clear();
        self.offsets.clear();
        self.offsets.push(0);
    }

    /// Number of groups.
    #[inline]
    pub fn len(&self) -> usize {
        self.offsets.len() - 1
    }

    /// Whether there is no group.
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }

    /// Members of each group from `first` on, in order.
    #[inline]
    pub fn iter_from(&self, first: usize) -> impl Iterator<Item = &[u32]> {
        let members = &self.members;
        self.offsets[first..]
            .windows(2)
            .map(move |w| &members[w[0] as usize..w[1] as usize])
    }

    /// Member positions (in `members`) of groups `first..last`.
    #[inline]
    pub fn member_range(&self, first: usize, last: usize) -> std::ops::Range<usize> {
        self.offsets[first] as usize..self.offsets[last] as usize
    }

    /// Appends a whole group.
    pub fn push_group(&mut self, members: &[u32]) {
        self.members.extend_from_slice(members);
        self.offsets.push(self.members.len() as u32);
    }

    /// Appends members cut into `groups` consecutive groups as even as possible, the larger ones
    /// first (sizes differ by at most one).
    #[inline]
    pub fn push_even_groups(&mut self, groups: usize, members: impl ExactSizeIterator<Item = u32>) {
        let base = self.members.len() as u32;
        let m = members.len();
        self.members.extend(members);
        if groups == 0 {
            return;
        }
        let (q, larger) = (m / groups, m % groups);
        let mut at = base;
        for j in 0..groups {
            at += (q + usize::from(j < larger)) as u32;
            self.offsets.push(at);
        }
    }

    /// Appends members cut into consecutive groups of `size`; their number is a multiple of `size`.
    #[inline]
    pub fn push_equal_groups(&mut self, size: usize, members: impl ExactSizeIterator<Item = u32>) {
        let base = self.members.len() as u32;
        let groups = (members.len() / size) as u32;
        self.members.extend(members);
        self.offsets.extend((1..=groups).map(|j| base + j * size as u32));
    }
}

impl ArmReplication<'_> {
    /// Step 1: empty slots get new entrants (always in the first cycle, later only when departures
    /// are replaced). Each entrant's attributes come from its own (slot, entrant) stream, so a
    /// rejection sampler's retries can never shift another entrant's draws.
    pub(super) fn entry(&mut self, v: usize, cycle: u32) {
        if (cycle > 1 && !self.arm.replace_departures()) || self.pool.vacancies[v] == 0 {
            return;
        }
        self.pool.vacancies[v] = 0;
        for i in self.layout.range(v) {
            if self.pool.occupied[i] {
                continue;
            }
            let entrant = self.pool.entrants[i];
            self.pool.entrants[i] += 1;
            let slot = self.layout.slot_of(v, i);
            let mut rng = streams::open(&self.key, streams::entry_stream_id(slot, entrant));
            let income = self.arm.income().sample(&mut rng);
            let risk = self.arm.risk().sample(&mut rng);
            self.pool.occupied[i] = true;
            self.pool.income[i] = income;
            self.pool.risk[i] = risk;
            self.pool.excluded_through[i] = 0;
            self.pool.removed[i] = false;
            self.pool.reached[i] = false;
            if cycle > self.scenario.warmup_cycles && cycle > 1 {
                self.tally.entrants += 1;
            }
            self.pool.principal[i] = self.arm.principal;
            self.pool.entry_cycle[i] = cycle;
            for row in 0..self.shocks.member_shocks.len() {
                let p = self.shocks.cached_probability[row];
                self.set_threshold(row, i, p);
            }
        }
    }
}
