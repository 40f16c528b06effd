//! The validated scenario: every invariant the engine relies on holds once a value of these types exists.

use crate::curve::GroupSizeCurve;
use crate::dist::Distribution;
use serde::{Deserialize, Serialize};

/// Where a shock strikes.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
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
///
/// Fields are private to the crate: values exist only as validation builds them, read through the methods.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct StressWindow {
    /// First cycle of the window (>= 1).
    pub(crate) from: u32,
    /// Last cycle of the window (>= from).
    pub(crate) to: u32,
    /// The probability in force during the window, in [0, 1].
    pub(crate) probability: f64,
}

/// One validated shock.
///
/// Fields are private to the crate: values exist only as validation builds them, read through the methods.
#[derive(Debug, Clone, Serialize)]
pub struct Shock {
    /// Unique name.
    pub(crate) name: String,
    /// Where it strikes.
    pub(crate) scope: ShockScope,
    /// Per-cycle probability (of a member being hit, or of a unit being struck).
    pub(crate) probability: ShockProbability,
    /// Loading on the village factor (member scope), >= 0.
    pub(crate) village_correlation: f64,
    /// Loading on the portfolio factor (member scope), >= 0; the two sum to < 1.
    pub(crate) portfolio_correlation: f64,
    /// Share of a struck unit's served members who are hit (unit scopes), in [0, 1].
    pub(crate) reach: f64,
    /// Share of cycle income lost when hit, supported on [0, 1].
    pub(crate) severity: Distribution,
    /// Non-overlapping stress windows, sorted by `from`.
    pub(crate) stress: Vec<StressWindow>,
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
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
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
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum ExclusionScope {
    /// Every member of the defaulting group.
    Group,
    /// Only the members with a shortfall.
    Defaulters,
}

/// How groups are formed each cycle.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Formation {
    /// Every group is dissolved and re-formed each cycle.
    Reshuffle,
    /// Groups whose members are all still eligible are kept.
    Persistent,
}

/// How members are ordered before being cut into groups.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Matching {
    /// Random order.
    Random,
    /// Ascending risk multiplier, random tie-breaks.
    Assortative,
}

/// One lending policy (an arm of the experiment).
///
/// Fields are private to the crate: values exist only as validation builds them, read through the methods.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Policy {
    /// Members per group, k >= 1.
    pub(crate) group_size: u32,
    /// Joint or individual liability.
    pub(crate) liability: Liability,
    /// Share lambda of surplus peers put towards shortfalls, in [0, 1].
    pub(crate) peer_cover: f64,
    /// Exclusion after default.
    pub(crate) exclusion_cycles: Exclusion,
    /// Who a joint default excludes.
    pub(crate) exclusion_scope: ExclusionScope,
    /// Reshuffled or persistent groups.
    pub(crate) formation: Formation,
    /// Random or assortative matching.
    pub(crate) matching: Matching,
    /// Smallest group formation may make, when written (otherwise k - `size_slack`, at least 1).
    pub(crate) min_group_size: Option<u32>,
    /// Largest group formation may make, when written (otherwise k + `size_slack`).
    pub(crate) max_group_size: Option<u32>,
    /// How far group sizes may stray from k when the bounds are not written (0: every group has k).
    pub(crate) size_slack: u32,
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
            min_group_size: None,
            max_group_size: None,
            size_slack: 0,
        }
    }
}

/// How a member able to pay weighs walking away against keeping access (the `[behaviour]` table).
///
/// Why it exists: without it nobody defaults by choice, so exclusion could raise repayment only by
/// removing people. With it, the threshold a member's temptation must beat grows with the value of
/// the access she would lose, which is what makes the length of exclusion a deterrent.
#[derive(Debug, Clone, Serialize)]
pub struct Behaviour {
    /// B >= 0: net benefit of one more cycle of access, in units of her current amount due.
    loan_value: f64,
    /// delta in (0, 1): the discount factor per cycle.
    discount: f64,
    /// T >= 0 in units of her amount due, drawn per member per cycle.
    temptation: Distribution,
    /// What fellow members impose on a member who walks away (joint liability only), in units of
    /// her amount due.
    social_sanction: f64,
}

impl Behaviour {
    /// A validated behaviour table (validation checks every bound before calling this).
    pub fn new(loan_value: f64, discount: f64, temptation: Distribution, social_sanction: f64) -> Self {
        Behaviour {
            loan_value,
            discount,
            temptation,
            social_sanction,
        }
    }
    /// B: net benefit of one more cycle of access, in units of her current amount due.
    pub fn loan_value(&self) -> f64 {
        self.loan_value
    }
    /// delta: the discount factor per cycle.
    pub fn discount(&self) -> f64 {
        self.discount
    }
    /// The temptation distribution, in units of her amount due.
    pub fn temptation(&self) -> &Distribution {
        &self.temptation
    }
    /// The social sanction, in units of her amount due (applied under joint liability only).
    pub fn social_sanction(&self) -> f64 {
        self.social_sanction
    }

    /// delta + delta^2 + ... + delta^E: the discounted cycles of access an exclusion of E cycles
    /// takes away (delta / (1 - delta) when permanent, 0 when E = 0).
    pub fn discounted_cycles_lost(&self, exclusion: Exclusion) -> f64 {
        let d = self.discount;
        match exclusion {
            Exclusion::Cycles(0) => 0.0,
            Exclusion::Cycles(e) => d * (1.0 - d.powf(f64::from(e))) / (1.0 - d),
            Exclusion::Permanent => d / (1.0 - d),
        }
    }

    /// The threshold T must exceed for a member able to pay to walk away, with growth ratio `g`
    /// (next principal if she pays over current principal), exclusion `exclusion` and whether the
    /// group is jointly liable: B g (delta + ... + delta^E), plus the social sanction under joint
    /// liability. The rule treats the penalty as certain although peers may cover for her.
    pub fn threshold(&self, g: f64, exclusion: Exclusion, joint: bool) -> f64 {
        let sanction = if joint { self.social_sanction } else { 0.0 };
        self.loan_value * g * self.discounted_cycles_lost(exclusion) + sanction
    }
}

fn is_zero(x: &f64) -> bool {
    *x == 0.0
}

fn is_one(x: &f64) -> bool {
    *x == 1.0
}

/// One swept value of an arm: the path as `[sweep]` names it and the value.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
pub struct SweptValue {
    /// The swept path, such as `group_size` or `shock.illness.village_correlation`.
    pub(crate) path: String,
    /// The value as arm labels show it (numbers in plain `Display`, words unquoted).
    pub(crate) value: String,
    /// The value exactly as the file wrote it (`0.20`, `"permanent"`).
    pub(crate) written: String,
}

/// One arm: the full model it runs (everything a sweep can vary) and a short label of its swept values.
/// Serialised (in summary.json) as its label, swept values and policy: the scenario holds the rest,
/// and `swept` says what differs.
///
/// Fields are private to the crate: values exist only as validation builds them, read through the methods.
#[derive(Debug, Clone, Serialize)]
pub struct Arm {
    /// Readable label such as `group_size=5,exclusion_cycles=2` (or `base` without a sweep).
    pub(crate) label: String,
    /// The swept values of this arm, in `[sweep]` order (empty without a sweep).
    #[serde(skip_serializing_if = "Vec::is_empty")]
    pub(crate) swept: Vec<SweptValue>,
    /// The arm's full policy.
    pub(crate) policy: Policy,
    /// Principal P > 0 per member per cycle.
    #[serde(skip)]
    pub(crate) principal: f64,
    /// Flat interest per cycle, r >= 0.
    #[serde(skip)]
    pub(crate) interest_rate: f64,
    /// Share of unpaid principal recovered later, in [0, 1].
    #[serde(skip)]
    pub(crate) recovery_rate: f64,
    /// Income ratio w (income / amount due), drawn at entry.
    #[serde(skip)]
    pub(crate) income: Distribution,
    /// Risk multiplier u of member-scope probabilities, drawn at entry.
    #[serde(skip)]
    pub(crate) risk: Distribution,
    /// The shocks, in file order (the same shocks, by index, in every arm).
    #[serde(skip)]
    pub(crate) shocks: Vec<Shock>,
    /// Per-cycle probability that a member leaves, in [0, 1).
    #[serde(skip)]
    pub(crate) dropout: f64,
    /// Whether emptied slots get new entrants.
    #[serde(skip)]
    pub(crate) replace_departures: bool,
    /// Strategic default (`[behaviour]`); `None`: nobody defaults by choice.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub(crate) behaviour: Option<Behaviour>,
    /// Growth of a member's principal after a cycle she repaid herself (`[loan] growth`), >= 0.
    #[serde(skip_serializing_if = "is_zero")]
    pub(crate) loan_growth: f64,
    /// The cap on a member's principal, in multiples of the first loan (`[loan] max_multiple`), >= 1.
    #[serde(skip_serializing_if = "is_one")]
    pub(crate) max_multiple: f64,
    /// Growth of a member's income ratio per cycle since her entry (`[borrowers] income_growth`), >= 0.
    #[serde(skip_serializing_if = "is_zero")]
    pub(crate) income_growth: f64,
}

impl Arm {
    /// Readable label such as `group_size=5,exclusion_cycles=2` (or `base` without a sweep).
    pub fn label(&self) -> &str {
        &self.label
    }
    /// The swept values of this arm, in `[sweep]` order (one per `Scenario::swept_paths`).
    pub fn swept(&self) -> &[SweptValue] {
        &self.swept
    }
    /// The arm's policy.
    pub fn policy(&self) -> &Policy {
        &self.policy
    }
    /// Principal per member per cycle.
    pub fn principal(&self) -> f64 {
        self.principal
    }
    /// Flat interest per cycle.
    pub fn interest_rate(&self) -> f64 {
        self.interest_rate
    }
    /// Share of unpaid principal recovered.
    pub fn recovery_rate(&self) -> f64 {
        self.recovery_rate
    }
    /// Amount due per member per cycle, D = P (1 + r).
    pub fn amount_due(&self) -> f64 {
        self.principal * (1.0 + self.interest_rate)
    }
    /// Income ratio distribution.
    pub fn income(&self) -> &Distribution {
        &self.income
    }
    /// Risk multiplier distribution.
    pub fn risk(&self) -> &Distribution {
        &self.risk
    }
    /// The shocks, in file order.
    pub fn shocks(&self) -> &[Shock] {
        &self.shocks
    }
    /// Per-cycle dropout probability.
    pub fn dropout(&self) -> f64 {
        self.dropout
    }
    /// Whether emptied slots get new entrants.
    pub fn replace_departures(&self) -> bool {
        self.replace_departures
    }
    /// Strategic default, when the scenario has a `[behaviour]` table.
    pub fn behaviour(&self) -> Option<&Behaviour> {
        self.behaviour.as_ref()
    }
    /// Growth of a member's principal after a cycle she repaid herself.
    pub fn loan_growth(&self) -> f64 {
        self.loan_growth
    }
    /// The cap on a member's principal, in multiples of the first loan.
    pub fn max_multiple(&self) -> f64 {
        self.max_multiple
    }
    /// Growth of a member's income ratio per cycle since her entry.
    pub fn income_growth(&self) -> f64 {
        self.income_growth
    }
    /// Whether principals can differ between members (loans grow): group sums then add the
    /// members' own amounts instead of multiplying one amount by the group size.
    pub fn progressive(&self) -> bool {
        self.loan_growth > 0.0 && self.max_multiple > 1.0
    }
    /// The first input that puts this arm outside the exact one-factor class through borrower
    /// behaviour or growing loans and incomes, as a reason sentence; `None` when there is none.
    pub fn dynamic_reason(&self) -> Option<String> {
        if self.behaviour.is_some() {
            Some(
                "[behaviour] is set: members able to pay may walk away, which the exact one-factor class leaves out"
                    .into(),
            )
        } else if self.progressive() {
            Some(format!(
                "loan.growth = {} makes principals depend on each member's history, which the exact one-factor class leaves out",
                self.loan_growth
            ))
        } else if self.income_growth > 0.0 {
            Some(format!(
                "borrowers.income_growth = {} makes incomes change over time, which the exact one-factor class leaves out",
                self.income_growth
            ))
        } else {
            None
        }
    }
}

/// A validated scenario: what every arm shares (the run's size, the pool, the seed) and the arms.
///
/// The model fields here (`principal` ... `replace_departures`) are the FIRST arm's values, kept only
/// so summary.json records the resolved scenario; they have no read methods because any of them may
/// be swept: read them from the `Arm`. Fields are private to the crate and read through the methods.
#[derive(Debug, Clone, Serialize)]
pub struct Scenario {
    /// Free text.
    pub(crate) name: String,
    /// Master seed.
    pub(crate) seed: u64,
    /// Independent replications, >= 1.
    pub(crate) replications: u32,
    /// Counted cycles per replication, >= 1.
    pub(crate) cycles: u32,
    /// Cycles simulated first and not counted.
    pub(crate) warmup_cycles: u32,
    /// Borrower slots N >= 1.
    pub(crate) borrowers: u32,
    /// Villages V in [1, N]; slot j lives in village j % V.
    pub(crate) villages: u32,
    /// The first arm's principal (see `Arm::principal`).
    pub(crate) principal: f64,
    /// The first arm's interest rate (see `Arm::interest_rate`).
    pub(crate) interest_rate: f64,
    /// The first arm's recovery rate (see `Arm::recovery_rate`).
    pub(crate) recovery_rate: f64,
    /// The first arm's income distribution (see `Arm::income`).
    pub(crate) income: Distribution,
    /// The first arm's risk distribution (see `Arm::risk`).
    pub(crate) risk: Distribution,
    /// The first arm's shocks (see `Arm::shocks`).
    pub(crate) shocks: Vec<Shock>,
    /// The first arm's dropout (see `Arm::dropout`).
    pub(crate) dropout: f64,
    /// The first arm's replacement rule (see `Arm::replace_departures`).
    pub(crate) replace_departures: bool,
    /// Swept paths, in the order of their lines in `[sweep]` (policy fields by their bare name).
    pub(crate) swept_fields: Vec<String>,
    /// The arms, in sweep order (one arm without a sweep).
    pub(crate) arms: Vec<Arm>,
    /// Warnings found while validating (arms resolving to the same model); the caller prints them.
    #[serde(skip)]
    pub(crate) warnings: Vec<String>,
    /// The `[finance]` table: the year, the currency label, costs and fees (defaults without it).
    pub(crate) finance: Finance,
}

/// The lender's side of the programme: how cycles map to a year, what money is called, and what
/// lending costs and earns besides interest. Shared by every arm. Without a `[finance]` table every
/// cost and fee is zero and a year is one cycle, so the simulated figures are the same as before.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Finance {
    pub(crate) cycles_per_year: u32,
    pub(crate) currency: String,
    pub(crate) operating_cost: f64,
    pub(crate) cost_of_funds: f64,
    pub(crate) fee_rate: f64,
}

impl Default for Finance {
    fn default() -> Self {
        Finance {
            cycles_per_year: 1,
            currency: "units".to_owned(),
            operating_cost: 0.0,
            cost_of_funds: 0.0,
            fee_rate: 0.0,
        }
    }
}

impl Finance {
    /// A finance table from its values, for tests and hand-built scenarios (validation checks the
    /// file's values; this does not).
    #[doc(hidden)]
    pub fn new(cycles_per_year: u32, currency: &str, operating_cost: f64, cost_of_funds: f64, fee_rate: f64) -> Self {
        Finance {
            cycles_per_year,
            currency: currency.to_owned(),
            operating_cost,
            cost_of_funds,
            fee_rate,
        }
    }
    /// Loan cycles in one year (>= 1); the counted cycles are a whole number of years.
    pub fn cycles_per_year(&self) -> u32 {
        self.cycles_per_year
    }
    /// The label money figures are printed in (`units` by default).
    pub fn currency(&self) -> &str {
        &self.currency
    }
    /// Cost of administering one member loan for one cycle, in currency.
    pub fn operating_cost(&self) -> f64 {
        self.operating_cost
    }
    /// The lender's cost of funds, a rate per cycle on the principal outstanding.
    pub fn cost_of_funds(&self) -> f64 {
        self.cost_of_funds
    }
    /// Fee as a share of principal, charged at disbursement (deducted from what is paid out, so it
    /// is never lost and is not part of the amount due).
    pub fn fee_rate(&self) -> f64 {
        self.fee_rate
    }
}

impl Scenario {
    /// Free text.
    pub fn name(&self) -> &str {
        &self.name
    }
    /// Master seed.
    pub fn seed(&self) -> u64 {
        self.seed
    }
    /// Independent replications.
    pub fn replications(&self) -> u32 {
        self.replications
    }
    /// Counted cycles per replication.
    pub fn cycles(&self) -> u32 {
        self.cycles
    }
    /// Cycles simulated first and not counted.
    pub fn warmup_cycles(&self) -> u32 {
        self.warmup_cycles
    }
    /// Borrower slots.
    pub fn borrowers(&self) -> u32 {
        self.borrowers
    }
    /// Villages.
    pub fn villages(&self) -> u32 {
        self.villages
    }
    /// Swept paths in order, one per column writers add (`group_size`, `shock.illness.reach`, ...).
    pub fn swept_paths(&self) -> &[String] {
        &self.swept_fields
    }
    /// The arms, in sweep order.
    pub fn arms(&self) -> &[Arm] {
        &self.arms
    }
    /// Warnings found while validating, one line each, for the caller to print.
    pub fn warnings(&self) -> &[String] {
        &self.warnings
    }
    /// The `[finance]` table (defaults when the file has none).
    pub fn finance(&self) -> &Finance {
        &self.finance
    }

    /// The first arm's amount due (see `Arm::amount_due`, which any sweep of the loan may vary).
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

    /// Replaces the arms by one arm per (label, policy), each with this scenario's model fields: for
    /// tests that build a scenario by hand (scenarios are otherwise built only by validation).
    #[doc(hidden)]
    pub fn with_policies(mut self, arms: Vec<(&str, Policy)>) -> Scenario {
        self.arms = arms
            .into_iter()
            .map(|(label, policy)| Arm {
                label: label.to_owned(),
                swept: Vec::new(),
                policy,
                principal: self.principal,
                interest_rate: self.interest_rate,
                recovery_rate: self.recovery_rate,
                income: self.income.clone(),
                risk: self.risk.clone(),
                shocks: self.shocks.clone(),
                dropout: self.dropout,
                replace_departures: self.replace_departures,
                behaviour: None,
                loan_growth: 0.0,
                max_multiple: 1.0,
                income_growth: 0.0,
            })
            .collect();
        self
    }

    /// Number of slots in village `v`.
    pub fn village_size(&self, v: u32) -> u32 {
        let (n, vs) = (self.borrowers, self.villages);
        n / vs + u32::from(v < n % vs)
    }
}

impl Policy {
    /// Members per group.
    pub fn group_size(&self) -> u32 {
        self.group_size
    }
    /// Joint or individual liability.
    pub fn liability(&self) -> Liability {
        self.liability
    }
    /// Share of surplus peers put towards shortfalls.
    pub fn peer_cover(&self) -> f64 {
        self.peer_cover
    }
    /// Exclusion after default.
    pub fn exclusion_cycles(&self) -> Exclusion {
        self.exclusion_cycles
    }
    /// Who a joint default excludes.
    pub fn exclusion_scope(&self) -> ExclusionScope {
        self.exclusion_scope
    }
    /// Reshuffled or persistent groups.
    pub fn formation(&self) -> Formation {
        self.formation
    }
    /// Random or assortative matching.
    pub fn matching(&self) -> Matching {
        self.matching
    }
    /// Smallest group formation makes: as written, or max(1, k - `size_slack`).
    pub fn min_group_size(&self) -> u32 {
        self.min_group_size
            .unwrap_or_else(|| self.group_size.saturating_sub(self.size_slack).max(1))
    }
    /// Largest group formation makes: as written, or k + `size_slack`.
    pub fn max_group_size(&self) -> u32 {
        self.max_group_size
            .unwrap_or_else(|| self.group_size.saturating_add(self.size_slack))
    }
    /// How far sizes may stray from k when the bounds are not written.
    pub fn size_slack(&self) -> u32 {
        self.size_slack
    }
    /// Whether groups may differ in size (min < max): then the curve is read at each group's size
    /// and the exact one-factor values are not offered.
    pub fn sizes_vary(&self) -> bool {
        self.min_group_size() < self.max_group_size()
    }
}

impl Shock {
    /// Unique name.
    pub fn name(&self) -> &str {
        &self.name
    }
    /// Where it strikes.
    pub fn scope(&self) -> ShockScope {
        self.scope
    }
    /// Per-cycle probability, a number or a curve.
    pub fn probability(&self) -> &ShockProbability {
        &self.probability
    }
    /// Loading on the village factor.
    pub fn village_correlation(&self) -> f64 {
        self.village_correlation
    }
    /// Loading on the portfolio factor.
    pub fn portfolio_correlation(&self) -> f64 {
        self.portfolio_correlation
    }
    /// Share of a struck unit's members hit.
    pub fn reach(&self) -> f64 {
        self.reach
    }
    /// Share of income lost when hit.
    pub fn severity(&self) -> &Distribution {
        &self.severity
    }
    /// Stress windows, sorted by `from`.
    pub fn stress(&self) -> &[StressWindow] {
        &self.stress
    }
}

impl SweptValue {
    /// The swept path, such as `group_size` or `shock.illness.village_correlation`.
    pub fn path(&self) -> &str {
        &self.path
    }
    /// The value as arm labels show it.
    pub fn value(&self) -> &str {
        &self.value
    }
    /// The value exactly as the file wrote it.
    pub fn written(&self) -> &str {
        &self.written
    }
}

impl StressWindow {
    /// First cycle of the window.
    pub fn from(&self) -> u32 {
        self.from
    }
    /// Last cycle of the window.
    pub fn to(&self) -> u32 {
        self.to
    }
    /// The probability in force during the window.
    pub fn probability(&self) -> f64 {
        self.probability
    }
}
