//! The exact law of the share of loans in default in one cycle, for the scenario's own portfolio.
//!
//! The one-factor companion describes one group, and the hit-share law one village at the summed
//! correlation; a lender's capital, though, is set against the whole portfolio, where village factors
//! partly diversify away and only the portfolio-wide draws move every village at once. This module
//! computes that law exactly for a class of scenarios: fixed income w >= 1, fixed risk, fixed
//! severities with w (1 - s) < 1 for every shock (one hit means short), and no exclusion or shrinking
//! pool, so that every cycle serves the same loans and cycles are independent.
//!
//! The structure it uses: given the portfolio draws (the portfolio factor and which portfolio-scope
//! shocks strike), villages are independent; given also a village's own draws (its factor and which
//! village-scope shocks strike), its loans are independent, or, with group-scope shocks under
//! individual liability, its groups are. So the law is a mixture over the portfolio draws of a
//! convolution over villages of mixtures over village draws of binomial laws (or of powers of a group's
//! law). Factors are integrated by the trapezoid rule on a uniform grid, which converges geometrically
//! for these analytic integrands once the step is below the width over which a conditional law moves
//! by one standard deviation: the village step is set from that width, and the portfolio step is
//! halved until the distribution function stops moving. Villages of equal size share one law, raised
//! to its multiplicity in Fourier space, so a portfolio of 100,000 borrowers costs seconds.

use super::one_factor::OutOfClass;
use super::{AnalyticError, normal};
use crate::scenario::{Exclusion, Liability, Scenario, ShockScope};
use rayon::prelude::*;
use serde::Serialize;
use statrs::function::gamma::ln_gamma;
use std::collections::BTreeMap;

/// Quantile levels reported for every law.
pub const QUANTILE_LEVELS: [f64; 4] = [0.95, 0.99, 0.995, 0.999];

/// Level of the reported expected shortfall.
pub const ES_LEVEL: f64 = 0.99;

/// Accepted change of the distribution function when the portfolio-factor step is halved. The
/// trapezoid rule converges geometrically, so the finer estimate is far more accurate than this.
pub const CDF_TOLERANCE: f64 = 1e-8;

/// Most shocks of one unit scope (group, village, portfolio) whose strikes are enumerated: each adds a
/// factor 2 to the mixture.
pub const MAX_STRIKE_SHOCKS: usize = 8;

/// Most joint-liability hit patterns (count vectors over distinct shortfalls) settled per group.
pub const MAX_SETTLEMENT_PATTERNS: usize = 50_000;

/// Most portfolio-factor nodes before the computation gives up.
pub const MAX_PORTFOLIO_NODES: usize = 20_000;

/// Factors are integrated over [-FACTOR_RANGE, FACTOR_RANGE]; the normal mass outside is 2e-17.
const FACTOR_RANGE: f64 = 8.5;

/// The engine's slack in the joint rule, per member and per unit of amount due.
const JOINT_SLACK_PER_MEMBER: f64 = 1e-9;

/// Binomial terms below this share of the mode's are dropped (their total is below 1e-18).
const BINOMIAL_CUTOFF: f64 = 1e-21;

/// The exact per-cycle default law of one arm in one stress state, with its summary figures.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct PortfolioDefaultLaw {
    /// "normal cycles", or the stress state's cycles such as "cycles 10-11".
    pub state: String,
    /// The counted cycles in this state, compressed ("1-9, 12-20"); empty if none is counted.
    pub cycles: String,
    /// "member loans" (individual liability) or "group loans" (joint liability).
    pub unit: String,
    /// Loans made per cycle: members or groups served (villages' remainders wait).
    pub units: u64,
    /// Mean share of loans in default.
    pub mean: f64,
    /// Quantiles of the default share at [`QUANTILE_LEVELS`], keyed "0.95" ...: the smallest share
    /// j / units with P(share <= j / units) >= q.
    pub quantiles: BTreeMap<String, f64>,
    /// Expected shortfall at 99%: the mean of the worst 1% of the law (Acerbi and Tasche's
    /// definition, which splits the atom at the quantile).
    pub es99: f64,
    /// The same quantiles in the large-portfolio limit: villages and members without bound, so only
    /// the portfolio draws remain (Vasicek's law at the portfolio correlation for a single
    /// member-scope shock; a point mass at the mean without portfolio draws).
    pub large_portfolio_quantiles: BTreeMap<String, f64>,
    /// What the large-portfolio limit is for this scenario.
    pub large_portfolio_law: String,
    /// Largest change of the distribution function at the last halving of the portfolio step (0
    /// when no factor is integrated): an upper bound on its error far above the actual one.
    pub cdf_change: f64,
    /// Portfolio draws evaluated (factor nodes times strike combinations).
    pub portfolio_nodes: usize,
    /// P(j units in default), j = 0..=units.
    #[serde(skip)]
    pub pmf: Vec<f64>,
}

impl PortfolioDefaultLaw {
    /// P(share <= j / units).
    pub fn cdf(&self, j: usize) -> f64 {
        self.pmf[..=j.min(self.pmf.len() - 1)].iter().sum::<f64>().min(1.0)
    }

    /// The smallest share x = j / units with P(share <= x) >= q.
    pub fn quantile(&self, q: f64) -> f64 {
        lattice_quantile(&self.pmf, q) as f64 / self.units as f64
    }
}

/// The law of a year's defaults: the per-cycle law convolved over the year's cycles, which are
/// independent in the class (every cycle draws its own factors and strikes, and serves the same
/// loans). Shares are of the loans outstanding in one cycle, so a year of 4 cycles has shares up to 4.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct AnnualDefaultLaw {
    /// Cycles convolved.
    pub cycles_per_year: u32,
    /// "member loans" or "group loans".
    pub unit: String,
    /// Loans outstanding in each cycle.
    pub units: u64,
    /// Mean loans defaulting in the year over loans outstanding per cycle.
    pub mean: f64,
    /// Quantiles of that share at [`QUANTILE_LEVELS`], on its lattice, keyed "0.95" ...
    pub quantiles: BTreeMap<String, f64>,
    /// Expected shortfall at 99% (Acerbi and Tasche).
    pub es99: f64,
}

impl PortfolioDefaultLaw {
    /// The law of the defaults of `cycles` independent cycles with this law: the pmf raised to the
    /// power `cycles` in Fourier space, negative rounding residue set to zero.
    pub fn over_cycles(&self, cycles: u32) -> AnnualDefaultLaw {
        let cycles = cycles.max(1);
        let pmf = convolution_power(&self.pmf, cycles);
        let units = self.units.max(1) as f64;
        let levels = QUANTILE_LEVELS
            .iter()
            .map(|&q| (format!("{q}"), lattice_quantile(&pmf, q) as f64 / units))
            .collect();
        AnnualDefaultLaw {
            cycles_per_year: cycles,
            unit: self.unit.clone(),
            units: self.units,
            mean: self.mean * f64::from(cycles),
            quantiles: levels,
            es99: expected_shortfall(&pmf, ES_LEVEL) / units,
        }
    }
}

/// The pmf of the sum of `n` independent copies of a lattice variable with pmf `pmf`.
pub fn convolution_power(pmf: &[f64], n: u32) -> Vec<f64> {
    if n <= 1 || pmf.is_empty() {
        return pmf.to_vec();
    }
    let len = (pmf.len() - 1) * n as usize + 1;
    let size = len.next_power_of_two();
    let fft = Fft::new(size);
    let mut buf: Vec<C64> = (0..size)
        .map(|j| C64::real(pmf.get(j).copied().unwrap_or(0.0)))
        .collect();
    fft.forward(&mut buf);
    buf.iter_mut().for_each(|z| *z = z.powu(u64::from(n)));
    fft.inverse(&mut buf);
    let mut out: Vec<f64> = buf[..len].iter().map(|z| z.re.max(0.0)).collect();
    let total: f64 = out.iter().sum();
    if total > 0.0 {
        out.iter_mut().for_each(|p| *p /= total);
    }
    out
}

/// The exact laws of one arm, or why there are none.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ArmPortfolioLaws {
    /// The arm's label.
    pub label: String,
    /// The law in cycles outside every stress window; `None` when out of class.
    pub portfolio_default_law: Option<PortfolioDefaultLaw>,
    /// One law per distinct stress state among the counted cycles.
    pub stress_laws: Vec<PortfolioDefaultLaw>,
    /// The input that puts the arm outside the class, or why the computation failed.
    pub out_of_class: Option<String>,
}

/// The exact laws of every arm of a scenario.
pub fn portfolio_default_laws(scenario: &Scenario) -> Vec<ArmPortfolioLaws> {
    (0..scenario.arms().len()).map(|a| arm_laws(scenario, a)).collect()
}

/// The exact laws of arm `arm` (normal cycles and each stress state); never fails as a whole.
pub fn arm_laws(scenario: &Scenario, arm: usize) -> ArmPortfolioLaws {
    let label = scenario
        .arms()
        .get(arm)
        .map(|a| a.label().to_owned())
        .unwrap_or_default();
    let empty = |reason: String| ArmPortfolioLaws {
        label: label.clone(),
        portfolio_default_law: None,
        stress_laws: Vec::new(),
        out_of_class: Some(reason),
    };
    if let Err(e) = class_check(scenario, arm) {
        return empty(e.reason);
    }
    let mut laws = Vec::new();
    for state in stress_states(scenario, arm) {
        let model = match CycleModel::new(scenario, arm, state.cycle) {
            Ok(m) => m,
            Err(e) => return empty(e.reason),
        };
        match model.law(&state) {
            Ok(law) => laws.push(law),
            Err(e) => return empty(format!("the exact law could not be computed: {e}")),
        }
    }
    let mut laws = laws.into_iter();
    ArmPortfolioLaws {
        label,
        portfolio_default_law: laws.next(),
        stress_laws: laws.collect(),
        out_of_class: None,
    }
}

/// Checks that arm `arm` of the scenario is in the class of the exact law, naming the input that is
/// not. The class: no `[behaviour]`, loan growth or income growth; fixed income w >= 1 and fixed
/// risk; fixed severities with w (1 - s) < 1; no exclusion; departures replaced; at most one member-scope shock with a village factor and one with a
/// portfolio factor; at most [`MAX_STRIKE_SHOCKS`] shocks of each unit scope.
pub fn class_check(scenario: &Scenario, arm: usize) -> Result<(), OutOfClass> {
    let out = |reason: String| Err(OutOfClass { reason });
    let Some(arm_def) = scenario.arms().get(arm) else {
        return out(format!(
            "arm index {arm} does not exist: the scenario has {} arm(s)",
            scenario.arms().len()
        ));
    };
    // Walking away and growing loans or incomes tie a loan's default to its borrower's history, so
    // loans are no longer exchangeable given the cycle's draws.
    if let Some(reason) = arm_def.dynamic_reason() {
        return out(reason);
    }
    let Some(w) = scenario.arms()[arm].income().fixed_value() else {
        return out(format!(
            "borrowers.income is a {} distribution, not fixed",
            scenario.arms()[arm].income().kind_name()
        ));
    };
    if w < 1.0 {
        return out(format!(
            "borrowers.income = {w} is below 1: members are short without any shock"
        ));
    }
    if scenario.arms()[arm].risk().fixed_value().is_none() {
        return out(format!(
            "borrowers.risk is a {} distribution, not fixed",
            scenario.arms()[arm].risk().kind_name()
        ));
    }
    let (mut village_factor, mut portfolio_factor) = (None::<usize>, None::<usize>);
    let mut per_scope: BTreeMap<&str, usize> = BTreeMap::new();
    for (i, shock) in scenario.arms()[arm].shocks().iter().enumerate() {
        let Some(s) = shock.severity().fixed_value() else {
            return out(format!(
                "shock[{i}] '{}' severity is a {} distribution, not fixed",
                shock.name(),
                shock.severity().kind_name()
            ));
        };
        if w * (1.0 - s) >= 1.0 {
            return out(format!(
                "shock[{i}] '{}' severity = {s} leaves a hit member able to repay (income x (1 - severity) = {} >= 1)",
                shock.name(),
                w * (1.0 - s)
            ));
        }
        match shock.scope() {
            ShockScope::Member => {
                if shock.village_correlation() > 0.0 {
                    if let Some(j) = village_factor {
                        return out(format!(
                            "shock[{i}] '{}' has a village correlation as shock[{j}] does; the exact law integrates one village factor",
                            shock.name()
                        ));
                    }
                    village_factor = Some(i);
                }
                if shock.portfolio_correlation() > 0.0 {
                    if let Some(j) = portfolio_factor {
                        return out(format!(
                            "shock[{i}] '{}' has a portfolio correlation as shock[{j}] does; the exact law integrates one portfolio factor",
                            shock.name()
                        ));
                    }
                    portfolio_factor = Some(i);
                }
            }
            scope => {
                let name = scope_name(scope);
                let n = per_scope.entry(name).or_insert(0);
                *n += 1;
                if *n > MAX_STRIKE_SHOCKS {
                    return out(format!(
                        "shock[{i}] '{}' is {name}-scope shock number {}; the exact law enumerates at most {MAX_STRIKE_SHOCKS} per scope",
                        shock.name(),
                        *n
                    ));
                }
            }
        }
    }
    let policy = &arm_def.policy();
    if policy.exclusion_cycles() != Exclusion::Cycles(0) {
        return out(format!(
            "policy.exclusion_cycles = {} in arm '{}': excluded members change who is served from cycle to cycle",
            policy.exclusion_cycles(),
            arm_def.label()
        ));
    }
    if scenario.arms()[arm].dropout() > 0.0 && !scenario.arms()[arm].replace_departures() {
        return out(format!(
            "pool.replace_departures = false with pool.dropout = {}: departures shrink the portfolio from cycle to cycle",
            scenario.arms()[arm].dropout()
        ));
    }
    if arm_def.policy().sizes_vary() {
        let p = arm_def.policy();
        return out(format!(
            "arm '{}' forms groups of {} to {} members (policy.min_group_size, max_group_size); the exact law \
             assumes every group has policy.group_size members",
            arm_def.label(),
            p.min_group_size(),
            p.max_group_size()
        ));
    }
    Ok(())
}

fn scope_name(scope: ShockScope) -> &'static str {
    match scope {
        ShockScope::Member => "member",
        ShockScope::Group => "group",
        ShockScope::Village => "village",
        ShockScope::Portfolio => "portfolio",
    }
}

/// One distinct stress state of an arm's counted cycles.
#[derive(Debug, Clone)]
struct StressState {
    /// "normal cycles" or "cycles 10-11".
    label: String,
    /// The counted cycles in the state, compressed.
    cycles: String,
    /// A cycle whose probabilities define the state (`None`: the shocks' own probabilities).
    cycle: Option<u32>,
}

/// The distinct stress states among the counted cycles, normal cycles first (always present, as the
/// reference law even if every counted cycle is stressed), then stressed states in order of first
/// occurrence. Cycles in a window whose probabilities equal the normal ones count as normal.
fn stress_states(scenario: &Scenario, arm: usize) -> Vec<StressState> {
    let k = scenario.arms()[arm].policy().group_size();
    let key = |cycle: Option<u32>| -> Vec<u64> {
        scenario.arms()[arm]
            .shocks()
            .iter()
            .map(|s| match cycle {
                Some(c) => s.probability_in_cycle(c, k),
                None => s.probability().at(k),
            })
            .map(f64::to_bits)
            .collect()
    };
    let normal = key(None);
    let mut states: Vec<(Vec<u64>, Option<u32>, Vec<u32>)> = vec![(normal, None, Vec::new())];
    for c in scenario.warmup_cycles() + 1..=scenario.total_cycles() {
        let kc = key(Some(c));
        match states.iter_mut().find(|s| s.0 == kc) {
            Some(s) => s.2.push(c),
            None => states.push((kc, Some(c), vec![c])),
        }
    }
    states
        .into_iter()
        .map(|(_, cycle, cycles)| {
            let text = compress_cycles(&cycles);
            StressState {
                label: match cycle {
                    None => "normal cycles".to_string(),
                    Some(_) => format!("cycles {text}"),
                },
                cycles: text,
                cycle,
            }
        })
        .collect()
}

/// "1-9, 12, 14-20" from a sorted list of cycles.
fn compress_cycles(cycles: &[u32]) -> String {
    let mut parts: Vec<String> = Vec::new();
    let mut i = 0;
    while i < cycles.len() {
        let mut j = i;
        while j + 1 < cycles.len() && cycles[j + 1] == cycles[j] + 1 {
            j += 1;
        }
        parts.push(if i == j {
            cycles[i].to_string()
        } else {
            format!("{}-{}", cycles[i], cycles[j])
        });
        i = j + 1;
    }
    parts.join(", ")
}

/// A way a member can be hit, in shock order: a member-scope shock or a unit-scope strike's reach.
#[derive(Debug, Clone)]
enum Source {
    /// Hit iff a_v Mv + a_p Mp + b e < t.
    Member { p: f64, t: f64, a_v: f64, a_p: f64, b: f64 },
    /// Hit with probability `reach` when the unit is struck (probability `p`).
    Unit { scope: ShockScope, p: f64, reach: f64 },
}

/// How a group's outcome follows from its members' hits.
#[derive(Debug, Clone)]
enum Settlement {
    /// Each member loan defaults iff the member is hit at all.
    Individual,
    /// The group defaults iff the number of members hit is in the set (every hit member's shortfall
    /// gives the same verdict).
    JointByCount { defaults: Vec<bool> },
    /// The verdict depends on which shocks hit: members fall into categories of equal shortfall, and
    /// the group's count vector over categories (unhit first) decides.
    JointByPattern {
        /// Per category, the hit subsets (bit masks over sources) it gathers.
        categories: Vec<Vec<u32>>,
        /// (multinomial coefficient, counts) of the defaulting count vectors.
        defaulting: Vec<(f64, Vec<u16>)>,
        /// The same for the repaying ones.
        repaying: Vec<(f64, Vec<u16>)>,
    },
}

/// The per-unit outcome given all draws down to the village: a default probability (as a pair p,
/// 1 - p, each without cancellation), or, for member loans in groups that share group-scope strikes,
/// the law of the number of a group's members in default.
enum UnitLaw {
    Bernoulli(f64, f64),
    GroupCount(Vec<f64>),
}

/// Draws shared by a village's members: factors and which unit-scope shocks strike (bit i set when
/// source i is struck).
#[derive(Debug, Clone, Copy)]
struct Draws {
    mp: f64,
    mv: f64,
    struck: u64,
}

/// One arm in one stress state, reduced to what the default law depends on.
#[derive(Debug, Clone)]
struct CycleModel {
    liability: Liability,
    k: u32,
    sources: Vec<Source>,
    /// Sources that can hit at all, in order.
    active: Vec<usize>,
    settlement: Settlement,
    village_factor: bool,
    portfolio_factor: bool,
    /// Loans (units) per village and how many villages have that many, ascending.
    villages: Vec<(u32, u32)>,
    total_units: u64,
    /// The portfolio correlation of the factor-carrying member shock, when there is one.
    portfolio_correlation: Option<f64>,
}

impl CycleModel {
    /// Builds the model of arm `arm` with the probabilities of `cycle` (`None`: normal cycles).
    /// Assumes [`class_check`] passed.
    fn new(scenario: &Scenario, arm: usize, cycle: Option<u32>) -> Result<Self, OutOfClass> {
        let policy = &scenario.arms()[arm].policy();
        let k = policy.group_size();
        let w = scenario.arms()[arm].income().fixed_value().unwrap_or(1.0);
        let u = scenario.arms()[arm].risk().fixed_value().unwrap_or(1.0);
        let mut sources = Vec::new();
        let mut multipliers = Vec::new();
        let mut portfolio_correlation = None;
        for shock in scenario.arms()[arm].shocks() {
            let base = match cycle {
                Some(c) => shock.probability_in_cycle(c, k),
                None => shock.probability.at(k),
            };
            let s = shock.severity.fixed_value().unwrap_or(1.0);
            multipliers.push(1.0 - s);
            sources.push(match shock.scope {
                ShockScope::Member => {
                    let p = (u * base).min(1.0);
                    let interior = p > 0.0 && p < 1.0;
                    let (rv, rp) = (shock.village_correlation, shock.portfolio_correlation);
                    if interior && rp > 0.0 {
                        portfolio_correlation = Some(rp);
                    }
                    Source::Member {
                        p,
                        t: normal::inv_cdf(p),
                        a_v: if interior { rv.sqrt() } else { 0.0 },
                        a_p: if interior { rp.sqrt() } else { 0.0 },
                        b: (1.0 - rv - rp).sqrt(),
                    }
                }
                scope => Source::Unit {
                    scope,
                    p: base,
                    reach: shock.reach,
                },
            });
        }
        let active: Vec<usize> = sources
            .iter()
            .enumerate()
            .filter(|(_, s)| match **s {
                Source::Member { p, .. } => p > 0.0,
                Source::Unit { p, reach, .. } => p > 0.0 && reach > 0.0,
            })
            .map(|(i, _)| i)
            .collect();
        let village_factor = sources
            .iter()
            .any(|s| matches!(*s, Source::Member { a_v, .. } if a_v > 0.0));
        let portfolio_factor = portfolio_correlation.is_some();
        let settlement = match policy.liability() {
            Liability::Individual => Settlement::Individual,
            Liability::Joint => {
                joint_settlement(k, w, scenario.amount_due(), policy.peer_cover(), &active, &multipliers).map_err(
                    |reason| OutOfClass {
                        reason: format!("arm '{}': {reason}", scenario.arms()[arm].label()),
                    },
                )?
            }
        };
        let mut by_units: BTreeMap<u32, u32> = BTreeMap::new();
        for v in 0..scenario.villages() {
            let groups = scenario.village_size(v) / k;
            let units = match policy.liability() {
                Liability::Individual => groups * k,
                Liability::Joint => groups,
            };
            if units > 0 {
                *by_units.entry(units).or_insert(0) += 1;
            }
        }
        let villages: Vec<(u32, u32)> = by_units.into_iter().collect();
        let total_units = villages.iter().map(|&(n, c)| u64::from(n) * u64::from(c)).sum();
        if total_units == 0 {
            return Err(OutOfClass {
                reason: format!(
                    "policy.group_size = {k} in arm '{}' exceeds every village's size: no loans are made",
                    scenario.arms()[arm].label()
                ),
            });
        }
        Ok(CycleModel {
            liability: policy.liability(),
            k,
            sources,
            active,
            settlement,
            village_factor,
            portfolio_factor,
            villages,
            total_units,
            portfolio_correlation,
        })
    }

    /// Indices of the active unit-scope sources of a scope whose strike is random or certain.
    fn strike_sources(&self, scope: ShockScope) -> Vec<usize> {
        self.active
            .iter()
            .copied()
            .filter(|&i| matches!(self.sources[i], Source::Unit { scope: s, .. } if s == scope))
            .collect()
    }

    /// Every combination of strikes of the given sources with its probability (zero-probability
    /// combinations left out), as bit masks over sources.
    fn strike_combinations(&self, scope: ShockScope) -> Vec<(u64, f64)> {
        let mut combos = vec![(0u64, 1.0)];
        for i in self.strike_sources(scope) {
            let Source::Unit { p, .. } = self.sources[i] else {
                continue;
            };
            let mut next = Vec::with_capacity(combos.len() * 2);
            for &(mask, prob) in &combos {
                if p < 1.0 {
                    next.push((mask, prob * (1.0 - p)));
                }
                next.push((mask | (1 << i), prob * p));
            }
            combos = next;
        }
        combos
    }

    /// Per active source, (P(hit), P(not hit)) for a member given the draws.
    fn hit_probabilities(&self, d: &Draws, out: &mut Vec<(f64, f64)>) {
        out.clear();
        for &i in &self.active {
            out.push(match self.sources[i] {
                Source::Member { p, t, a_v, a_p, b } => {
                    if p >= 1.0 {
                        (1.0, 0.0)
                    } else {
                        let z = (t - a_p * d.mp - a_v * d.mv) / b;
                        (normal::cdf(z), normal::cdf(-z))
                    }
                }
                Source::Unit { reach, .. } => {
                    if d.struck & (1 << i) != 0 {
                        (reach, 1.0 - reach)
                    } else {
                        (0.0, 1.0)
                    }
                }
            });
        }
    }

    /// The unit's outcome law given the draws down to the village (group strikes mixed in here).
    fn unit_law(&self, d: &Draws, scratch: &mut Vec<(f64, f64)>) -> UnitLaw {
        let groups = self.strike_combinations(ShockScope::Group);
        let k = self.k as usize;
        let individual = matches!(self.settlement, Settlement::Individual);
        if individual && groups.len() > 1 {
            let mut law = vec![0.0; k + 1];
            let mut term = vec![0.0; k + 1];
            for &(mask, prob) in &groups {
                let draws = Draws {
                    struck: d.struck | mask,
                    ..*d
                };
                self.hit_probabilities(&draws, scratch);
                let (p, q) = any_hit(scratch);
                binomial_small(k, p, q, &mut term);
                law.iter_mut().zip(&term).for_each(|(l, t)| *l += prob * t);
            }
            return UnitLaw::GroupCount(law);
        }
        let (mut p, mut q) = (0.0, 0.0);
        for &(mask, prob) in &groups {
            let draws = Draws {
                struck: d.struck | mask,
                ..*d
            };
            self.hit_probabilities(&draws, scratch);
            let (a, b) = self.settle(scratch);
            p += prob * a;
            q += prob * b;
        }
        UnitLaw::Bernoulli(p, q)
    }

    /// (P(unit defaults), P(unit repays)) given members' independent hit probabilities.
    fn settle(&self, hits: &[(f64, f64)]) -> (f64, f64) {
        match &self.settlement {
            Settlement::Individual => any_hit(hits),
            Settlement::JointByCount { defaults } => {
                let (p, q) = any_hit(hits);
                let mut law = vec![0.0; self.k as usize + 1];
                binomial_small(self.k as usize, p, q, &mut law);
                let (mut d, mut r) = (0.0, 0.0);
                for (n, v) in law.iter().enumerate() {
                    if defaults[n] {
                        d += v;
                    } else {
                        r += v;
                    }
                }
                (d, r)
            }
            Settlement::JointByPattern {
                categories,
                defaulting,
                repaying,
            } => {
                // P(exactly this subset hit) for each subset, then gathered by category.
                let mut probs = vec![0.0; categories.len() + 1];
                probs[0] = hits.iter().map(|h| h.1).product();
                for (c, subsets) in categories.iter().enumerate() {
                    probs[c + 1] = subsets
                        .iter()
                        .map(|&mask| {
                            hits.iter()
                                .enumerate()
                                .map(|(j, h)| if mask & (1 << j) != 0 { h.0 } else { h.1 })
                                .product::<f64>()
                        })
                        .sum();
                }
                let total = |list: &[(f64, Vec<u16>)]| -> f64 {
                    list.iter()
                        .map(|(coef, counts)| {
                            coef * counts
                                .iter()
                                .zip(&probs)
                                .map(|(&c, &p)| p.powi(i32::from(c)))
                                .product::<f64>()
                        })
                        .sum()
                };
                (total(defaulting), total(repaying))
            }
        }
    }

    /// Whether villages differ in their draws at all (a village factor or a random village strike).
    fn village_randomness(&self) -> bool {
        self.village_factor || self.strike_combinations(ShockScope::Village).len() > 1
    }

    /// Whether a unit's law is a power of a group's count law (member loans sharing group strikes).
    fn group_count_units(&self) -> bool {
        matches!(self.settlement, Settlement::Individual) && self.strike_combinations(ShockScope::Group).len() > 1
    }

    /// Mean default probability per unit given the draws, and the number of independent-ish trials
    /// it is spread over (members for group-count laws), for choosing the village step.
    fn unit_mean(&self, d: &Draws, scratch: &mut Vec<(f64, f64)>) -> (f64, f64) {
        match self.unit_law(d, scratch) {
            UnitLaw::Bernoulli(p, q) => (p, q),
            UnitLaw::GroupCount(law) => {
                let k = self.k as f64;
                let mean = law.iter().enumerate().map(|(n, v)| n as f64 * v).sum::<f64>() / k;
                let rest = law.iter().enumerate().map(|(n, v)| (k - n as f64) * v).sum::<f64>() / k;
                (mean, rest)
            }
        }
    }

    /// Trapezoid nodes (value, weight) over the village factor for a village of `units` loans given
    /// the portfolio draws: the step is half the narrowest width over which the conditional default
    /// probability moves by one binomial standard deviation, and at most 0.25.
    fn village_nodes(&self, mp: f64, struck: u64, units: u32, scratch: &mut Vec<(f64, f64)>) -> Vec<(f64, f64)> {
        if !self.village_factor {
            return vec![(0.0, 1.0)];
        }
        // Units are the trials: member loans (a group's law has at least the binomial spread of its
        // mean, so the width found is a lower bound) or group loans.
        let trials = f64::from(units);
        let mut narrowest = f64::INFINITY;
        let delta = 1e-4;
        for (mask, _) in self.strike_combinations(ShockScope::Village) {
            let at = |m: f64, s: &mut Vec<(f64, f64)>| {
                self.unit_mean(
                    &Draws {
                        mp,
                        mv: m,
                        struck: struck | mask,
                    },
                    s,
                )
            };
            let mut m = -7.5;
            while m <= 7.5 {
                let (p, q) = at(m, scratch);
                // The slope of whichever of p and 1 - p is smaller, which carries full relative
                // precision; where the law is degenerate to 1e-30 the width does not matter.
                let side = |x: (f64, f64)| if p <= q { x.0 } else { x.1 };
                let slope = (side(at(m + delta, scratch)) - side(at(m - delta, scratch))).abs() / (2.0 * delta);
                if slope > 0.0 && p * q > 1e-30 {
                    narrowest = narrowest.min((p * q / trials).sqrt() / slope);
                }
                m += 0.1;
            }
        }
        let h = (0.5 * narrowest).min(0.25);
        let n = (FACTOR_RANGE / h).floor() as i64;
        (-n..=n)
            .map(|j| {
                let m = j as f64 * h;
                (m, h * normal::pdf(m))
            })
            .collect()
    }

    /// The law of the number of a village's `units` loans in default given the portfolio draws.
    fn village_law(&self, mp: f64, struck: u64, units: u32, scratch: &mut Vec<(f64, f64)>) -> Vec<f64> {
        let n = units as usize;
        let mut law = vec![0.0; n + 1];
        let nodes = self.village_nodes(mp, struck, units, scratch);
        let villages = self.strike_combinations(ShockScope::Village);
        if self.group_count_units() {
            // Member loans in groups: the village law is the (units / k)-th power of a group's law,
            // mixed over the village draws in Fourier space.
            let k = self.k as usize;
            let groups = (units / self.k) as usize;
            let size = (n + 1).next_power_of_two();
            let fft = Fft::new(size);
            let mut acc = vec![C64::ZERO; size];
            for &(mask, vprob) in &villages {
                for &(mv, weight) in &nodes {
                    let d = Draws {
                        mp,
                        mv,
                        struck: struck | mask,
                    };
                    let UnitLaw::GroupCount(group) = self.unit_law(&d, scratch) else {
                        unreachable!("group-count units give group-count laws")
                    };
                    let w = vprob * weight;
                    for (j, a) in acc.iter_mut().enumerate() {
                        let z = fft.root(j, 1);
                        // Horner evaluation of the group's generating function at the root.
                        let mut g = C64::ZERO;
                        for c in (0..=k).rev() {
                            g = g.mul(z).add(C64::real(group[c]));
                        }
                        *a = a.add(g.powu(groups as u64).scale(w));
                    }
                }
            }
            fft.inverse(&mut acc);
            law.iter_mut().zip(&acc).for_each(|(l, a)| *l = a.re.max(0.0));
            return law;
        }
        for &(mask, vprob) in &villages {
            for &(mv, weight) in &nodes {
                let d = Draws {
                    mp,
                    mv,
                    struck: struck | mask,
                };
                let UnitLaw::Bernoulli(p, q) = self.unit_law(&d, scratch) else {
                    unreachable!("Bernoulli units give Bernoulli laws")
                };
                add_binomial(&mut law, units, p, q, vprob * weight);
            }
        }
        law
    }

    /// The exact law in one stress state, with its summary.
    fn law(&self, state: &StressState) -> Result<PortfolioDefaultLaw, AnalyticError> {
        let (pmf, cdf_change, nodes) = self.pmf()?;
        let u = self.total_units;
        let mean = pmf.iter().enumerate().map(|(j, p)| j as f64 * p).sum::<f64>() / u as f64;
        let key = |q: f64| format!("{q}");
        let quantiles = QUANTILE_LEVELS
            .iter()
            .map(|&q| (key(q), lattice_quantile(&pmf, q) as f64 / u as f64))
            .collect();
        let (large, large_name) = self.large_portfolio_quantiles();
        Ok(PortfolioDefaultLaw {
            state: state.label.clone(),
            cycles: state.cycles.clone(),
            unit: match self.liability {
                Liability::Individual => "member loans",
                Liability::Joint => "group loans",
            }
            .to_string(),
            units: u,
            mean,
            quantiles,
            es99: expected_shortfall(&pmf, ES_LEVEL) / u as f64,
            large_portfolio_quantiles: QUANTILE_LEVELS.iter().zip(large).map(|(&q, x)| (key(q), x)).collect(),
            large_portfolio_law: large_name,
            cdf_change,
            portfolio_nodes: nodes,
            pmf,
        })
    }

    /// The pmf of the number of units in default, the last CDF change and the nodes used.
    fn pmf(&self) -> Result<(Vec<f64>, f64, usize), AnalyticError> {
        let u = self.total_units as usize;
        let combos = self.strike_combinations(ShockScope::Portfolio);
        // Without village draws or shared group strikes every unit is independent given the portfolio
        // draws: the total is one binomial, accumulated directly.
        let direct = !self.village_randomness() && !self.group_count_units();
        let size = if direct { 0 } else { (u + 1).next_power_of_two() };
        let fft = (!direct).then(|| Fft::new(size));
        let mut spatial = vec![0.0; u + 1];
        let mut fourier = vec![C64::ZERO; size];
        let evaluate = |nodes: &[(f64, u64, f64)]| -> (Vec<f64>, Vec<C64>) {
            let chunks = nodes.len().clamp(1, 8);
            let per = nodes.len().div_ceil(chunks).max(1);
            let parts: Vec<(Vec<f64>, Vec<C64>)> = nodes
                .par_chunks(per)
                .map(|chunk| {
                    let mut s = vec![0.0; if direct { u + 1 } else { 0 }];
                    let mut f = vec![C64::ZERO; size];
                    let mut buf = vec![C64::ZERO; size];
                    let mut product = vec![C64::ZERO; size];
                    let mut scratch = Vec::new();
                    let mut smalls: BTreeMap<usize, Fft> = BTreeMap::new();
                    let mut work = Vec::new();
                    for &(mp, struck, weight) in chunk {
                        if direct {
                            let d = Draws { mp, mv: 0.0, struck };
                            let UnitLaw::Bernoulli(p, q) = self.unit_law(&d, &mut scratch) else {
                                unreachable!("direct units are Bernoulli")
                            };
                            add_binomial(&mut s, u as u32, p, q, weight);
                            continue;
                        }
                        let fft = fft.as_ref().expect("Fourier path has a transform");
                        product.iter_mut().for_each(|x| *x = C64::real(1.0));
                        for &(units, count) in &self.villages {
                            let law = self.village_law(mp, struck, units, &mut scratch);
                            let small = smalls
                                .entry(law.len())
                                .or_insert_with(|| Fft::new(law.len().next_power_of_two().min(size)));
                            work.resize(small.n, C64::ZERO);
                            fft.forward_real_padded(&law, small, &mut buf, &mut work);
                            for (p, b) in product.iter_mut().zip(&buf) {
                                *p = p.mul(b.powu(u64::from(count)));
                            }
                        }
                        for (a, p) in f.iter_mut().zip(&product) {
                            *a = a.add(p.scale(weight));
                        }
                    }
                    (s, f)
                })
                .collect();
            let mut s = vec![0.0; u + 1];
            let mut f = vec![C64::ZERO; size];
            for (ps, pf) in parts {
                s.iter_mut().zip(&ps).for_each(|(a, b)| *a += b);
                f.iter_mut().zip(&pf).for_each(|(a, b)| *a = a.add(*b));
            }
            (s, f)
        };
        let estimate = |spatial: &[f64], fourier: &[C64], scale: f64| -> Vec<f64> {
            let mut pmf: Vec<f64> = spatial.iter().map(|x| x * scale).collect();
            if let Some(fft) = fft.as_ref() {
                let mut buf = fourier.to_vec();
                fft.inverse(&mut buf);
                pmf.iter_mut().zip(&buf).for_each(|(p, b)| *p += b.re * scale);
            }
            pmf.iter_mut().for_each(|p| *p = p.max(0.0));
            pmf
        };
        if !self.portfolio_factor {
            let nodes: Vec<(f64, u64, f64)> = combos.iter().map(|&(m, p)| (0.0, m, p)).collect();
            let (s, f) = evaluate(&nodes);
            return Ok((estimate(&s, &f, 1.0), 0.0, nodes.len()));
        }
        // Trapezoid over the portfolio factor on nested grids: step 0.5, then halved, each level
        // adding the odd multiples of the new step, until the CDF moves by at most CDF_TOLERANCE.
        let mut h = 0.5;
        let mut used = 0usize;
        let mut previous: Option<Vec<f64>> = None;
        let mut level = 0;
        loop {
            let n = (FACTOR_RANGE / h).floor() as i64;
            let nodes: Vec<(f64, u64, f64)> = (-n..=n)
                .filter(|j| level == 0 || j % 2 != 0)
                .flat_map(|j| {
                    let m = j as f64 * h;
                    combos.iter().map(move |&(mask, p)| (m, mask, p * normal::pdf(m)))
                })
                .collect();
            used += nodes.len();
            let (s, f) = evaluate(&nodes);
            spatial.iter_mut().zip(&s).for_each(|(a, b)| *a += b);
            fourier.iter_mut().zip(&f).for_each(|(a, b)| *a = a.add(*b));
            let pmf = estimate(&spatial, &fourier, h);
            if let Some(prev) = previous.as_ref() {
                let change = max_cdf_change(prev, &pmf);
                if change <= CDF_TOLERANCE {
                    return Ok((pmf, change, used));
                }
                if used > MAX_PORTFOLIO_NODES {
                    return Err(AnalyticError::NoConvergence {
                        what: "the portfolio-factor trapezoid rule".into(),
                        detail: format!("CDF still moves by {change:e} after {used} nodes"),
                    });
                }
            }
            previous = Some(pmf);
            h /= 2.0;
            level += 1;
        }
    }

    /// The mean default probability per unit given the portfolio draws: the default share of a
    /// portfolio with villages and members without bound.
    fn conditional_mean(&self, mp: f64, struck: u64) -> f64 {
        let mut scratch = Vec::new();
        let villages = self.strike_combinations(ShockScope::Village);
        let b_over_a = self
            .sources
            .iter()
            .filter_map(|s| match *s {
                Source::Member { a_v, b, .. } if a_v > 0.0 => Some(b / a_v),
                _ => None,
            })
            .fold(f64::INFINITY, f64::min);
        let nodes: Vec<(f64, f64)> = if self.village_factor {
            // The integrand is a smooth function of the factor on the scale b / a, where a
            // trapezoid step of half that scale is already exact to rounding.
            let h = (0.5 * b_over_a).min(0.25);
            let n = (FACTOR_RANGE / h).floor() as i64;
            (-n..=n)
                .map(|j| (j as f64 * h, h * normal::pdf(j as f64 * h)))
                .collect()
        } else {
            vec![(0.0, 1.0)]
        };
        let mut total = 0.0;
        for &(mask, vp) in &villages {
            for &(mv, w) in &nodes {
                let d = Draws {
                    mp,
                    mv,
                    struck: struck | mask,
                };
                total += vp * w * self.unit_mean(&d, &mut scratch).0;
            }
        }
        total
    }

    /// Quantiles of the large-portfolio limit at [`QUANTILE_LEVELS`], and what the limit is.
    fn large_portfolio_quantiles(&self) -> (Vec<f64>, String) {
        let combos = self.strike_combinations(ShockScope::Portfolio);
        if !self.portfolio_factor {
            // A discrete law: one atom per combination of portfolio strikes.
            let mut atoms: Vec<(f64, f64)> = combos
                .iter()
                .map(|&(mask, p)| (self.conditional_mean(0.0, mask), p))
                .collect();
            atoms.sort_by(|a, b| a.0.total_cmp(&b.0));
            let name = if atoms.len() == 1 {
                "a point mass at the mean (no portfolio factor or strike)".to_string()
            } else {
                format!(
                    "{} atoms, one per combination of portfolio-scope strikes (no portfolio factor)",
                    atoms.len()
                )
            };
            let q = QUANTILE_LEVELS
                .iter()
                .map(|&q| {
                    let mut acc = 0.0;
                    for &(x, p) in &atoms {
                        acc += p;
                        if acc >= q - 1e-15 {
                            return x;
                        }
                    }
                    atoms.last().map_or(0.0, |a| a.0)
                })
                .collect();
            return (q, name);
        }
        let rho = self.portfolio_correlation.unwrap_or(0.0);
        let single = combos.len() == 1 && self.active.len() == 1 && matches!(self.settlement, Settlement::Individual);
        let name = if single {
            format!("Vasicek's law at portfolio correlation {rho}")
        } else {
            format!(
                "the law of the conditional default probability given the portfolio draws (portfolio factor of correlation {rho}{})",
                if combos.len() > 1 {
                    " and portfolio-scope strikes"
                } else {
                    ""
                }
            )
        };
        if combos.len() == 1 {
            // One combination: the mean falls as the factor rises, so the q-quantile is the
            // conditional mean at M = Phi^-1(1 - q).
            let q = QUANTILE_LEVELS
                .iter()
                .map(|&q| self.conditional_mean(normal::inv_cdf(1.0 - q), combos[0].0))
                .collect();
            return (q, name);
        }
        // With portfolio strikes, P(limit <= x) = sum over combinations s of P(s) P(M >= m_s(x)),
        // m_s(x) being where that combination's conditional mean equals x. Each mean is tabulated on
        // a grid of the factor and inverted by cubic Hermite interpolation (about 1e-7 in x).
        let step = 0.025;
        let grid: Vec<f64> = (-400..=400).map(|i| f64::from(i) * step).collect();
        let tables: Vec<Vec<f64>> = combos
            .iter()
            .map(|&(mask, _)| grid.par_iter().map(|&m| self.conditional_mean(m, mask)).collect())
            .collect();
        let cdf = |x: f64| -> f64 {
            combos
                .iter()
                .zip(&tables)
                .map(|(&(_, p), t)| p * normal::cdf(-invert_decreasing(&grid, t, x)))
                .sum()
        };
        let q = QUANTILE_LEVELS
            .iter()
            .map(|&q| {
                let (mut lo, mut hi) = (0.0, 1.0);
                for _ in 0..50 {
                    let mid = 0.5 * (lo + hi);
                    if cdf(mid) >= q {
                        hi = mid;
                    } else {
                        lo = mid;
                    }
                }
                hi
            })
            .collect();
        (q, name)
    }
}

/// The m where a decreasing function tabulated as `values` on the uniform `grid` equals x, by cubic
/// Hermite interpolation with central-difference slopes; -inf (+inf) when x lies above (below) the
/// whole table, so that P(M >= m) is 1 (0).
fn invert_decreasing(grid: &[f64], values: &[f64], x: f64) -> f64 {
    let n = values.len();
    if x >= values[0] {
        return f64::NEG_INFINITY;
    }
    if x < values[n - 1] {
        return f64::INFINITY;
    }
    // values[i] > x >= values[i + 1]
    let i = values.partition_point(|&v| v > x).saturating_sub(1).min(n - 2);
    let h = grid[1] - grid[0];
    let slope = |j: usize| {
        let (a, b) = (j.saturating_sub(1), (j + 1).min(n - 1));
        (values[b] - values[a]) / (grid[b] - grid[a])
    };
    let (y0, y1, d0, d1) = (values[i], values[i + 1], slope(i) * h, slope(i + 1) * h);
    let at = |t: f64| {
        let (t2, t3) = (t * t, t * t * t);
        (2.0 * t3 - 3.0 * t2 + 1.0) * y0 + (t3 - 2.0 * t2 + t) * d0 + (-2.0 * t3 + 3.0 * t2) * y1 + (t3 - t2) * d1
    };
    let (mut lo, mut hi) = (0.0, 1.0);
    for _ in 0..60 {
        let mid = 0.5 * (lo + hi);
        if at(mid) > x {
            lo = mid;
        } else {
            hi = mid;
        }
    }
    grid[i] + 0.5 * (lo + hi) * h
}

/// (P(hit by at least one source), P(hit by none)), the first by the telescoping sum
/// sum_i h_i prod_{j < i} (1 - h_j) so that small probabilities keep their relative precision.
fn any_hit(hits: &[(f64, f64)]) -> (f64, f64) {
    let (mut any, mut none) = (0.0, 1.0);
    for &(h, not) in hits {
        any += h * none;
        none *= not;
    }
    (any, none)
}

/// The binomial(k, p) law for a small k, given p and q = 1 - p.
fn binomial_small(k: usize, p: f64, q: f64, out: &mut [f64]) {
    let mut coef = 1.0;
    for (n, v) in out.iter_mut().enumerate().take(k + 1) {
        *v = coef * p.powi(n as i32) * q.powi((k - n) as i32);
        coef = coef * (k - n) as f64 / (n + 1) as f64;
    }
}

/// Adds weight x binomial(n, p) to `out[0..=n]`, computed outward from the mode by the ratio of
/// successive terms and normalised over the terms kept, so the ln-gamma rounding at the mode cancels.
fn add_binomial(out: &mut [f64], n: u32, p: f64, q: f64, weight: f64) {
    if weight == 0.0 {
        return;
    }
    if p <= 0.0 {
        out[0] += weight;
        return;
    }
    if q <= 0.0 {
        out[n as usize] += weight;
        return;
    }
    let nf = f64::from(n);
    let mode = ((nf + 1.0) * p).floor().min(nf) as u32;
    let odds = p / q;
    let mut up = Vec::new();
    let mut term = 1.0;
    let mut j = mode;
    while j < n {
        term *= f64::from(n - j) / f64::from(j + 1) * odds;
        if term < BINOMIAL_CUTOFF {
            break;
        }
        up.push(term);
        j += 1;
    }
    let mut down = Vec::new();
    let mut term = 1.0;
    let mut j = mode;
    while j > 0 {
        term *= f64::from(j) / (f64::from(n - j + 1) * odds);
        if term < BINOMIAL_CUTOFF {
            break;
        }
        down.push(term);
        j -= 1;
    }
    let total = 1.0 + up.iter().sum::<f64>() + down.iter().sum::<f64>();
    let scale = weight / total;
    let m = mode as usize;
    out[m] += scale;
    for (i, t) in up.iter().enumerate() {
        out[m + 1 + i] += scale * t;
    }
    for (i, t) in down.iter().enumerate() {
        out[m - 1 - i] += scale * t;
    }
}

/// The joint-liability rule per group, from the engine: with capacity C = D w prod(1 - s) over a
/// member's hits, shortfall S = max(0, D - C) and surplus U = max(0, C - D), the group repays iff
/// sum S <= lambda sum U + 1e-9 k D.
fn joint_settlement(
    k: u32,
    w: f64,
    due: f64,
    lambda: f64,
    active: &[usize],
    multipliers: &[f64],
) -> Result<Settlement, String> {
    let n_active = active.len();
    if n_active > 16 {
        return Err(format!(
            "{n_active} shocks can hit; joint settlement by hit pattern enumerates at most 16"
        ));
    }
    // Distinct shortfalls over hit subsets, each subset's multiplier taken in shock order as the
    // engine multiplies.
    let mut categories: Vec<(f64, Vec<u32>)> = Vec::new();
    for mask in 1u32..(1u32 << n_active) {
        let m = (0..n_active)
            .filter(|j| mask & (1 << j) != 0)
            .fold(1.0, |acc, j| acc * multipliers[active[j]]);
        let short = (due - due * w * m).max(0.0);
        match categories.iter_mut().find(|c| c.0.to_bits() == short.to_bits()) {
            Some(c) => c.1.push(mask),
            None => categories.push((short, vec![mask])),
        }
    }
    let surplus = (due * w - due).max(0.0);
    let slack = JOINT_SLACK_PER_MEMBER * f64::from(k) * due;
    let repays = |n_hit: u32, short_sum: f64| short_sum <= lambda * f64::from(k - n_hit) * surplus + slack;
    let lowest = categories.iter().map(|c| c.0).fold(f64::INFINITY, f64::min);
    let highest = categories.iter().map(|c| c.0).fold(0.0, f64::max);
    let by_count = (0..=k).all(|n| n == 0 || repays(n, f64::from(n) * lowest) == repays(n, f64::from(n) * highest));
    if by_count || categories.is_empty() {
        let defaults = (0..=k)
            .map(|n| !repays(n, f64::from(n) * if n == 0 { 0.0 } else { highest }))
            .collect();
        return Ok(Settlement::JointByCount { defaults });
    }
    let c = categories.len();
    let mut defaulting = Vec::new();
    let mut repaying = Vec::new();
    let mut counts = vec![0u16; c + 1];
    let ln_fact = |n: u32| ln_gamma(f64::from(n) + 1.0);
    let mut enumerate_error = None;
    compositions(k, c + 1, &mut counts, 0, &mut |counts: &[u16]| {
        if defaulting.len() + repaying.len() >= MAX_SETTLEMENT_PATTERNS {
            enumerate_error = Some(());
            return;
        }
        let n_hit: u32 = counts[1..].iter().map(|&x| u32::from(x)).sum();
        let short_sum: f64 = counts[1..]
            .iter()
            .zip(&categories)
            .map(|(&x, cat)| f64::from(x) * cat.0)
            .sum();
        let coef = (ln_fact(k) - counts.iter().map(|&x| ln_fact(u32::from(x))).sum::<f64>()).exp();
        if repays(n_hit, short_sum) {
            repaying.push((coef, counts.to_vec()));
        } else {
            defaulting.push((coef, counts.to_vec()));
        }
    });
    if enumerate_error.is_some() {
        return Err(format!(
            "groups of {k} with {c} distinct shortfalls under peer cover have more than {MAX_SETTLEMENT_PATTERNS} hit patterns"
        ));
    }
    Ok(Settlement::JointByPattern {
        categories: categories.into_iter().map(|c| c.1).collect(),
        defaulting,
        repaying,
    })
}

/// Calls `f` with every vector of `parts` non-negative counts summing to `total`.
fn compositions(total: u32, parts: usize, counts: &mut [u16], at: usize, f: &mut impl FnMut(&[u16])) {
    if at + 1 == parts {
        counts[at] = total as u16;
        f(counts);
        return;
    }
    for x in 0..=total {
        counts[at] = x as u16;
        compositions(total - x, parts, counts, at + 1, f);
    }
}

/// The smallest j with sum_{i <= j} pmf[i] >= q.
fn lattice_quantile(pmf: &[f64], q: f64) -> usize {
    let mut acc = 0.0;
    for (j, p) in pmf.iter().enumerate() {
        acc += p;
        if acc >= q {
            return j;
        }
    }
    pmf.len() - 1
}

/// Acerbi and Tasche's expected shortfall at level q, in units: (sum over j above the quantile of
/// j P(j) + quantile x (P(N <= quantile) - q)) / (1 - q).
fn expected_shortfall(pmf: &[f64], q: f64) -> f64 {
    let jq = lattice_quantile(pmf, q);
    let below: f64 = pmf[..=jq].iter().sum();
    let above: f64 = pmf[jq + 1..]
        .iter()
        .enumerate()
        .map(|(i, p)| (jq + 1 + i) as f64 * p)
        .sum();
    (above + jq as f64 * (below - q)) / (1.0 - q)
}

/// Largest absolute difference between the cumulative sums of two pmfs of equal length.
fn max_cdf_change(a: &[f64], b: &[f64]) -> f64 {
    let (mut ca, mut cb, mut worst) = (0.0, 0.0, 0.0f64);
    for (x, y) in a.iter().zip(b) {
        ca += x;
        cb += y;
        worst = worst.max((ca - cb).abs());
    }
    worst
}

/// A complex number, enough for the transforms here.
#[derive(Debug, Clone, Copy, PartialEq)]
struct C64 {
    re: f64,
    im: f64,
}

impl C64 {
    const ZERO: C64 = C64 { re: 0.0, im: 0.0 };

    fn real(re: f64) -> Self {
        C64 { re, im: 0.0 }
    }

    fn add(self, o: C64) -> C64 {
        C64 {
            re: self.re + o.re,
            im: self.im + o.im,
        }
    }

    fn sub(self, o: C64) -> C64 {
        C64 {
            re: self.re - o.re,
            im: self.im - o.im,
        }
    }

    fn mul(self, o: C64) -> C64 {
        C64 {
            re: self.re * o.re - self.im * o.im,
            im: self.re * o.im + self.im * o.re,
        }
    }

    fn scale(self, s: f64) -> C64 {
        C64 {
            re: self.re * s,
            im: self.im * s,
        }
    }

    fn conj(self) -> C64 {
        C64 {
            re: self.re,
            im: -self.im,
        }
    }

    /// self^n by repeated squaring.
    fn powu(self, mut n: u64) -> C64 {
        let (mut base, mut acc) = (self, C64::real(1.0));
        while n > 0 {
            if n & 1 == 1 {
                acc = acc.mul(base);
            }
            base = base.mul(base);
            n >>= 1;
        }
        acc
    }
}

/// An iterative radix-2 fast Fourier transform of one power-of-two length, with its twiddle factors
/// computed once, each directly from sin and cos so none inherits another's rounding.
struct Fft {
    n: usize,
    twiddles: Vec<C64>,
    reversed: Vec<u32>,
}

impl Fft {
    fn new(n: usize) -> Self {
        assert!(n.is_power_of_two(), "transform length {n} is a power of two");
        let twiddles = (0..n / 2)
            .map(|j| {
                let a = -2.0 * std::f64::consts::PI * j as f64 / n as f64;
                C64 {
                    re: a.cos(),
                    im: a.sin(),
                }
            })
            .collect();
        let bits = n.trailing_zeros();
        let reversed = (0..n as u32)
            .map(|i| if bits == 0 { 0 } else { i.reverse_bits() >> (32 - bits) })
            .collect();
        Fft { n, twiddles, reversed }
    }

    /// exp(-2 pi i j m / n) for the root of unity at frequency j raised to the power m.
    fn root(&self, j: usize, m: usize) -> C64 {
        let e = (j * m) % self.n;
        if e < self.n / 2 {
            self.twiddles[e]
        } else {
            self.twiddles[e - self.n / 2].scale(-1.0)
        }
    }

    /// X_j = sum_m x_m exp(-2 pi i j m / n).
    fn forward(&self, buf: &mut [C64]) {
        self.run(buf, false);
    }

    /// The forward transform of a real sequence `x` zero-padded to the length n, whose support is
    /// much shorter than n: with B the next power of two >= x.len() and L = n / B, frequency
    /// r + L s is the B-point transform of x_m exp(-2 pi i r m / n) at s. That costs n log B instead
    /// of n log n, and skips the stages that would only move zeros.
    fn forward_real_padded(&self, x: &[f64], small: &Fft, buf: &mut [C64], work: &mut [C64]) {
        let (n, b) = (self.n, small.n);
        debug_assert!(x.len() <= b && b <= n && work.len() == b);
        let l = n / b;
        for r in 0..l {
            work.iter_mut().for_each(|w| *w = C64::ZERO);
            for (m, (&v, w)) in x.iter().zip(work.iter_mut()).enumerate() {
                *w = self.root(r, m).scale(v);
            }
            small.forward(work);
            for (t, w) in work.iter().enumerate() {
                buf[r + l * t] = *w;
            }
        }
    }

    /// x_m = (1 / n) sum_j X_j exp(2 pi i j m / n).
    fn inverse(&self, buf: &mut [C64]) {
        self.run(buf, true);
        let s = 1.0 / self.n as f64;
        buf.iter_mut().for_each(|x| *x = x.scale(s));
    }

    fn run(&self, buf: &mut [C64], inverse: bool) {
        let n = self.n;
        for i in 0..n {
            let j = self.reversed[i] as usize;
            if i < j {
                buf.swap(i, j);
            }
        }
        let mut len = 2;
        while len <= n {
            let half = len / 2;
            let stride = n / len;
            for start in (0..n).step_by(len) {
                for j in 0..half {
                    let w = self.twiddles[j * stride];
                    let w = if inverse { w.conj() } else { w };
                    let a = buf[start + j];
                    let b = buf[start + j + half].mul(w);
                    buf[start + j] = a.add(b);
                    buf[start + j + half] = a.sub(b);
                }
            }
            len <<= 1;
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use statrs::distribution::{Binomial, Discrete};

    #[test]
    fn a_convolution_power_of_a_bernoulli_law_is_binomial() {
        // The sum of 4 independent Bernoulli(0.3) is Binomial(4, 0.3) (statrs 0.18).
        let law = convolution_power(&[0.7, 0.3], 4);
        let b = Binomial::new(0.3, 4).unwrap();
        assert_eq!(law.len(), 5);
        for (j, p) in law.iter().enumerate() {
            assert!((p - b.pmf(j as u64)).abs() < 1e-14, "{j}: {p}");
        }
    }

    #[test]
    fn fft_matches_the_direct_transform() {
        // The defining sum X_j = sum_m x_m exp(-2 pi i j m / n), evaluated term by term.
        let n = 64;
        let x: Vec<C64> = (0..n)
            .map(|m| C64 {
                re: (m as f64 * 0.37).sin(),
                im: (m as f64 * 0.11).cos(),
            })
            .collect();
        let mut fast = x.clone();
        let fft = Fft::new(n);
        fft.forward(&mut fast);
        for (j, f) in fast.iter().enumerate() {
            let mut direct = C64::ZERO;
            for (m, v) in x.iter().enumerate() {
                let a = -2.0 * std::f64::consts::PI * (j * m) as f64 / n as f64;
                direct = direct.add(v.mul(C64 {
                    re: a.cos(),
                    im: a.sin(),
                }));
            }
            assert!((f.re - direct.re).abs() < 1e-12 && (f.im - direct.im).abs() < 1e-12);
        }
        fft.inverse(&mut fast);
        for (a, b) in fast.iter().zip(&x) {
            assert!((a.re - b.re).abs() < 1e-14 && (a.im - b.im).abs() < 1e-14);
        }
    }

    #[test]
    fn padded_real_transform_matches_the_direct_sum() {
        // The defining sum X_j = sum_m x_m exp(-2 pi i j m / n) over the 21 nonzero inputs.
        let n = 128;
        let x: Vec<f64> = (0..21).map(|m| (m as f64 * 0.37).sin().abs()).collect();
        let (fft, small) = (Fft::new(n), Fft::new(32));
        let mut buf = vec![C64::ZERO; n];
        let mut work = vec![C64::ZERO; 32];
        fft.forward_real_padded(&x, &small, &mut buf, &mut work);
        for (j, f) in buf.iter().enumerate() {
            let mut direct = C64::ZERO;
            for (m, &v) in x.iter().enumerate() {
                let a = -2.0 * std::f64::consts::PI * (j * m) as f64 / n as f64;
                direct = direct.add(C64 {
                    re: v * a.cos(),
                    im: v * a.sin(),
                });
            }
            assert!(
                (f.re - direct.re).abs() < 1e-12 && (f.im - direct.im).abs() < 1e-12,
                "j = {j}"
            );
        }
    }

    #[test]
    fn windowed_binomial_matches_statrs() {
        // statrs 0.18 `Binomial::pmf`, an independent implementation of the binomial law.
        for &(n, p) in &[(1u32, 0.3), (10, 0.02), (1000, 0.05), (100_000, 0.37), (5000, 1e-5)] {
            let mut out = vec![0.0; n as usize + 1];
            add_binomial(&mut out, n, p, 1.0 - p, 1.0);
            let reference = Binomial::new(p, u64::from(n)).unwrap();
            for (j, v) in out.iter().enumerate().step_by((n as usize / 50).max(1)) {
                let r = reference.pmf(j as u64);
                assert!(
                    (v - r).abs() < 1e-12 * r.max(1e-3),
                    "n = {n}, p = {p}, j = {j}: {v} vs {r}"
                );
            }
            assert!((out.iter().sum::<f64>() - 1.0).abs() < 1e-13);
        }
    }

    #[test]
    fn lattice_quantile_and_expected_shortfall_on_a_small_law() {
        // P = (0.5, 0.3, 0.15, 0.05): the 0.9 quantile is 2 (CDF 0.8, 0.95); ES at 0.9 by hand is
        // (3 x 0.05 + 2 x (0.95 - 0.9)) / 0.1 = 2.5.
        let pmf = [0.5, 0.3, 0.15, 0.05];
        assert_eq!(lattice_quantile(&pmf, 0.9), 2);
        assert_eq!(lattice_quantile(&pmf, 0.8), 1);
        assert!((expected_shortfall(&pmf, 0.9) - 2.5).abs() < 1e-12);
    }

    #[test]
    fn cycles_are_compressed_into_ranges() {
        assert_eq!(compress_cycles(&[1, 2, 3, 5, 7, 8]), "1-3, 5, 7-8");
        assert_eq!(compress_cycles(&[]), "");
    }

    #[test]
    fn joint_settlement_by_count_and_by_pattern_agree_when_severities_are_equal() {
        // Two shocks of severity 0.6 with w = 1.5: one hit leaves 0.6 D, two hits 0.24 D, so the
        // verdict under cover depends on the pattern; equal severities 1.0 collapse to the count.
        let by_count = joint_settlement(5, 1.5, 1.0, 1.0, &[0, 1], &[0.0, 0.0]).unwrap();
        assert!(matches!(by_count, Settlement::JointByCount { .. }));
        let by_pattern = joint_settlement(5, 1.5, 1.0, 1.0, &[0, 1], &[0.4, 0.4]).unwrap();
        let Settlement::JointByPattern {
            defaulting, repaying, ..
        } = &by_pattern
        else {
            panic!("distinct shortfalls need patterns")
        };
        // Compositions of 5 into 3 parts: C(7, 2) = 21.
        assert_eq!(defaulting.len() + repaying.len(), 21);
        let total: f64 = defaulting.iter().chain(repaying).map(|(c, _)| c).sum();
        // The multinomial coefficients of 5 over 3 categories sum to 3^5.
        assert!((total - 243.0).abs() < 1e-9);
    }
}
