//! The validated scenario: every invariant the engine relies on holds once a value of these types exists.

use crate::curve::GroupSizeCurve;
use crate::dist::Distribution;
use serde::Serialize;

/// Where a shock strikes.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum ShockScope {
    /// Each member separately (optionally correlated through village and portfolio factors).
    Member,
    /// A whole group is struck, then each served member with probability `reach`.
    Group,
    /// A whole village is struck, then each served member with probability `reach`.
    Village,
    /// The whole portfolio is struck, then each served member with probability `reach`.
    Portfolio,
}

/// A shock's per-cycle probability: a number or a group-size curve (member scope only).
#[derive(Debug, Clone, PartialEq, Serialize)]
#[serde(untagged)]
pub enum ShockProbability {
    /// The same probability for every group size.
    Fixed(f64),
    /// phi(k), evaluated at each arm's group size.
    Curve(GroupSizeCurve),
}

impl ShockProbability {
    /// The probability at group size `k`; validation guarantees it exists for every arm's k.
    pub fn at(&self, group_size: u32) -> f64 {
        match self {
            ShockProbability::Fixed(p) => *p,
            ShockProbability::Curve(c) => c
                .at(group_size)
                .expect("validated: every arm's group size is in the curve's domain"),
        }
    }
}

/// A stress window: cycles `from..=to` (counted from 1, warm-up included) use `probability` instead.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct StressWindow {
    /// First cycle of the window (>= 1).
    pub from: u32,
    /// Last cycle of the window (>= from).
    pub to: u32,
    /// The probability in force during the window, in [0, 1].
    pub probability: f64,
}

/// One validated shock.
#[derive(Debug, Clone, Serialize)]
pub struct Shock {
    /// Unique name.
    pub name: String,
    /// Where it strikes.
    pub scope: ShockScope,
    /// Per-cycle probability (of a member being hit, or of a unit being struck).
    pub probability: ShockProbability,
    /// Loading on the village factor (member scope), >= 0.
    pub village_correlation: f64,
    /// Loading on the portfolio factor (member scope), >= 0; the two sum to < 1.
    pub portfolio_correlation: f64,
    /// Share of a struck unit's served members who are hit (unit scopes), in [0, 1].
    pub reach: f64,
    /// Share of cycle income lost when hit, supported on [0, 1].
    pub severity: Distribution,
    /// Non-overlapping stress windows, sorted by `from`.
    pub stress: Vec<StressWindow>,
}

impl Shock {
    /// The probability in force in `cycle` (1-based, warm-up included) at group size `k`.
    pub fn probability_in_cycle(&self, cycle: u32, group_size: u32) -> f64 {
        self.stress_override(cycle)
            .unwrap_or_else(|| self.probability.at(group_size))
    }

    /// The stress window's probability if `cycle` lies in one.
    pub fn stress_override(&self, cycle: u32) -> Option<f64> {
        self.stress
            .iter()
            .find(|w| w.from <= cycle && cycle <= w.to)
            .map(|w| w.probability)
    }
}

/// Who is liable for a loan.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Liability {
    /// The group repays together, peers covering shortfalls from their surplus.
    Joint,
    /// Each member repays alone.
    Individual,
}

/// How long a defaulter sits out.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(untagged)]
pub enum Exclusion {
    /// Sits out the next `n` cycles.
    Cycles(u32),
    /// Leaves the programme for good (a departure).
    #[serde(serialize_with = "serialize_permanent")]
    Permanent,
}

fn serialize_permanent<S: serde::Serializer>(s: S) -> Result<S::Ok, S::Error> {
    s.serialize_str("permanent")
}

impl std::fmt::Display for Exclusion {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            Exclusion::Cycles(n) => write!(f, "{n}"),
            Exclusion::Permanent => f.write_str("permanent"),
        }
    }
}

/// Who is excluded when a joint-liability group defaults.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum ExclusionScope {
    /// Every member of the defaulting group.
    Group,
    /// Only the members with a shortfall.
    Defaulters,
}

/// How groups are formed each cycle.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Formation {
    /// Every group is dissolved and re-formed each cycle.
    Reshuffle,
    /// Groups whose members are all still eligible are kept.
    Persistent,
}

/// How members are ordered before being cut into groups.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Matching {
    /// Random order.
    Random,
    /// Ascending risk multiplier, random tie-breaks.
    Assortative,
}

/// One lending policy (an arm of the experiment).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Policy {
    /// Members per group, k >= 1.
    pub group_size: u32,
    /// Joint or individual liability.
    pub liability: Liability,
    /// Share lambda of surplus peers put towards shortfalls, in [0, 1].
    pub peer_cover: f64,
    /// Exclusion after default.
    pub exclusion_cycles: Exclusion,
    /// Who a joint default excludes.
    pub exclusion_scope: ExclusionScope,
    /// Reshuffled or persistent groups.
    pub formation: Formation,
    /// Random or assortative matching.
    pub matching: Matching,
}

impl Policy {
    /// The policy's textbook defaults (k = 5, joint, no cover, no exclusion).
    pub fn default_policy() -> Self {
        Policy {
            group_size: 5,
            liability: Liability::Joint,
            peer_cover: 0.0,
            exclusion_cycles: Exclusion::Cycles(0),
            exclusion_scope: ExclusionScope::Group,
            formation: Formation::Reshuffle,
            matching: Matching::Random,
        }
    }
}

/// One arm: a policy and a short label of its swept values.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Arm {
    /// Readable label such as `group_size=5,exclusion_cycles=2` (or `base` without a sweep).
    pub label: String,
    /// The arm's full policy.
    pub policy: Policy,
}

/// A validated scenario.
#[derive(Debug, Clone, Serialize)]
pub struct Scenario {
    /// Free text.
    pub name: String,
    /// Master seed.
    pub seed: u64,
    /// Independent replications, >= 1.
    pub replications: u32,
    /// Counted cycles per replication, >= 1.
    pub cycles: u32,
    /// Cycles simulated first and not counted.
    pub warmup_cycles: u32,
    /// Borrower slots N >= 1.
    pub borrowers: u32,
    /// Villages V in [1, N]; slot j lives in village j % V.
    pub villages: u32,
    /// Principal P > 0 per member per cycle.
    pub principal: f64,
    /// Flat interest per cycle, r >= 0.
    pub interest_rate: f64,
    /// Share of unpaid principal recovered later, in [0, 1].
    pub recovery_rate: f64,
    /// Income ratio w (income / amount due), drawn at entry.
    pub income: Distribution,
    /// Risk multiplier u of member-scope probabilities, drawn at entry.
    pub risk: Distribution,
    /// The shocks, in file order.
    pub shocks: Vec<Shock>,
    /// Per-cycle probability that a member leaves, in [0, 1).
    pub dropout: f64,
    /// Whether emptied slots get new entrants.
    pub replace_departures: bool,
    /// Policy fields swept, in the order written.
    pub swept_fields: Vec<String>,
    /// The arms, in sweep order (one arm without a sweep).
    pub arms: Vec<Arm>,
}

impl Scenario {
    /// Amount due per member per cycle, D = P (1 + r).
    pub fn amount_due(&self) -> f64 {
        self.principal * (1.0 + self.interest_rate)
    }

    /// Total simulated cycles per replication (warm-up and counted).
    pub fn total_cycles(&self) -> u32 {
        self.warmup_cycles + self.cycles
    }

    /// Per-cycle records a run keeps: replications x counted cycles x arms (see
    /// `limits::MAX_CYCLE_RECORDS`).
    pub fn cycle_records(&self) -> u64 {
        u64::from(self.replications) * u64::from(self.cycles) * self.arms.len() as u64
    }

    /// Number of slots in village `v`.
    pub fn village_size(&self, v: u32) -> u32 {
        let (n, vs) = (self.borrowers, self.villages);
        n / vs + u32::from(v < n % vs)
    }
}
