//! The `analyze` report: every closed form that applies to a scenario, gathered in one place.
//!
//! A planner looking at a scenario wants to know what can be said without simulating: exact group
//! repayment per arm when the scenario is in the one-factor class (or why it is not), the exact law of
//! the whole portfolio's default share per cycle beside its large-portfolio limit (or the input that
//! puts an arm outside that law's class), how bad a bad cycle gets by the hit-share law, how far a village of the scenario's size is from the large-pool
//! formula, and how the assumed correlation compares with the Basel II retail yardstick. The report
//! never fails as a whole: each section carries its own reason when it does not apply.

use super::one_factor::{self, OneFactorModel, OneFactorResult};
use super::portfolio_law::{self, AnnualDefaultLaw, PortfolioDefaultLaw};
use super::{basel, vasicek};
use crate::scenario::{Liability, Scenario, ShockProbability, ShockScope};
use rayon::prelude::*;
use serde::Serialize;
use std::collections::BTreeMap;

/// Quantile levels of the per-cycle hit share shown for every hit probability.
pub const HIT_SHARE_LEVELS: [f64; 4] = [0.5, 0.9, 0.99, 0.999];

/// The one-line caution that ends the terminal table.
pub const CAUTION: &str = crate::CAUTION;

/// Exact results (or the reason there are none) for one arm.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ArmExact {
    /// Position of the arm in the scenario.
    pub index: usize,
    /// The arm's label.
    pub label: String,
    /// Group size k.
    pub group_size: u32,
    /// Liability rule.
    pub liability: Liability,
    /// Peer cover lambda.
    pub peer_cover: f64,
    /// The exact per-cycle results, when computed.
    pub exact: Option<OneFactorResult>,
    /// Why this arm has no exact result although the scenario is in the class.
    pub reason: Option<String>,
    /// The exact law of the portfolio's default share in cycles outside stress windows.
    pub portfolio_default_law: Option<PortfolioDefaultLaw>,
    /// The same law in each stress state of the counted cycles.
    pub stress_laws: Vec<PortfolioDefaultLaw>,
    /// The input that puts this arm outside the class of the portfolio law.
    pub out_of_class: Option<String>,
    /// The law of a year of normal cycles (`[finance] cycles_per_year`): the per-cycle law
    /// convolved over the year's independent cycles.
    pub annual_default_law: Option<AnnualDefaultLaw>,
}

/// Which population the hit-share law describes.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum HitShareScope {
    /// The whole portfolio shares one factor (one village, or no village correlation).
    Portfolio,
    /// Villages have their own factors, so only the share within one village is one-factor.
    PerVillage,
}

/// The Basel II other-retail yardstick at PD = the hit probability.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct BaselComparison {
    /// PD used: the per-cycle hit probability.
    pub pd: f64,
    /// LGD used: 1 - recovery rate.
    pub lgd: f64,
    /// The formula's correlation R(PD).
    pub basel_correlation: f64,
    /// The scenario's own factor correlation.
    pub scenario_correlation: f64,
    /// 99.9 % conditional hit probability at R(PD).
    pub conditional_hit_probability: f64,
    /// The same at the scenario's correlation.
    pub conditional_hit_probability_at_scenario_rho: f64,
    /// Capital requirement K at R(PD), per unit of exposure.
    pub capital_requirement: f64,
    /// Risk weight 12.5 K at R(PD), per unit of exposure.
    pub risk_weight: f64,
    /// K with the scenario's correlation in place of R(PD).
    pub capital_requirement_at_scenario_rho: f64,
    /// 12.5 times that.
    pub risk_weight_at_scenario_rho: f64,
}

/// One quantile of the hit share.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct HitShareQuantile {
    /// The level q.
    pub level: f64,
    /// The share of members hit that is exceeded with probability 1 - q.
    pub share: f64,
}

/// The hit-share law at one hit probability.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct HitShareEntry {
    /// The per-cycle hit probability p.
    pub p: f64,
    /// The factor loading these arms' members share (village + portfolio correlation).
    pub rho: f64,
    /// Labels of the arms whose group size gives this p.
    pub arms: Vec<String>,
    /// The large-pool quantile of the hit share at each of [`HIT_SHARE_LEVELS`].
    pub quantiles: Vec<HitShareQuantile>,
    /// Members in the finite pool compared: the largest village.
    pub finite_members: u32,
    /// 99.9 % quantile of the hit share among `finite_members` members sharing the factor.
    pub finite_quantile_999: Option<f64>,
    /// The large-pool 99.9 % quantile.
    pub large_pool_quantile_999: f64,
    /// finite - large-pool, in hit-share units.
    pub finite_minus_large: Option<f64>,
    /// Why the finite quantile is missing.
    pub finite_note: Option<String>,
    /// The Basel comparison, when the inputs allow it.
    pub basel: Option<BaselComparison>,
}

/// The hit-share section: the law of the share of members hit per cycle by one member-scope shock.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct HitShareSection {
    /// The shock described.
    pub shock_name: String,
    /// Which population the law describes.
    pub scope: HitShareScope,
    /// The first arm's factor loading, village + portfolio correlation (each entry has its own).
    pub rho: f64,
    /// Members of that population (all borrowers, or the largest village).
    pub population: u32,
    /// One entry per distinct hit probability, loading and loss given default across the arms.
    pub entries: Vec<HitShareEntry>,
    /// Conditions under which the law holds.
    pub notes: Vec<String>,
}

/// Everything [`analyze`] could say about a scenario.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct AnalyzeReport {
    /// The scenario's name.
    pub scenario: String,
    /// Why the scenario is outside the one-factor class of exact group repayment, if it is.
    pub one_factor_out_of_class: Option<String>,
    /// The one-factor model, if in class.
    pub model: Option<OneFactorModel>,
    /// Per-arm exact results.
    pub arms: Vec<ArmExact>,
    /// The hit-share section, when it applies.
    pub hit_share: Option<HitShareSection>,
    /// Why the hit-share section does not apply.
    pub hit_share_reason: Option<String>,
    /// The first arm's exact portfolio default law in normal cycles (`None`: out of class).
    pub portfolio_default_law: Option<PortfolioDefaultLaw>,
    /// The first arm's laws in each stress state.
    pub stress_laws: Vec<PortfolioDefaultLaw>,
    /// The first arm's law of a year of normal cycles.
    pub annual_default_law: Option<AnnualDefaultLaw>,
    /// Loan cycles per year (`[finance]`; 1 without it).
    pub cycles_per_year: u32,
    /// The input that puts the first arm outside the portfolio law's class (beside
    /// `portfolio_default_law`, which is then null).
    pub out_of_class: Option<String>,
    /// The Basel II comparison at the first arm's hit probability, where it applies.
    pub basel: Option<BaselComparison>,
    /// The caution printed under the table.
    pub caution: String,
}

/// Builds the report. Nothing here fails as a whole: each part records its own reason.
pub fn analyze(scenario: &Scenario) -> AnalyzeReport {
    let class = one_factor::class_check(&scenario.arms()[0]);
    let (model, one_factor_out_of_class) = match class {
        Ok(m) => (Some(m), None),
        Err(e) => (None, Some(e.reason)),
    };
    // Each arm's law is independent of the others', so the arms are computed in parallel.
    let mut laws = (0..scenario.arms().len())
        .into_par_iter()
        .map(|a| portfolio_law::arm_laws(scenario, a))
        .collect::<Vec<_>>()
        .into_iter();
    let mut arms: Vec<ArmExact> = scenario
        .arms()
        .iter()
        .enumerate()
        .map(|(index, arm)| {
            let policy = &arm.policy();
            // Each arm is checked against the class on its own model: a sweep may vary any input.
            let computed = one_factor::class_check(arm).map_err(|e| e.reason).and_then(|m| {
                one_factor::group_repayment(&m, policy.group_size(), policy.liability(), policy.peer_cover())
                    .map_err(|e| e.to_string())
            });
            let (exact, reason) = match computed {
                Ok(r) => (Some(r), None),
                // The first arm's reason is the report's; an arm repeating it says nothing new.
                Err(e) if one_factor_out_of_class.as_deref() == Some(e.as_str()) => (None, None),
                Err(e) => (None, Some(e)),
            };
            ArmExact {
                index,
                label: arm.label().to_owned(),
                group_size: policy.group_size(),
                liability: policy.liability(),
                peer_cover: policy.peer_cover(),
                exact,
                reason,
                portfolio_default_law: None,
                stress_laws: Vec::new(),
                out_of_class: None,
                annual_default_law: None,
            }
        })
        .collect();
    for arm in &mut arms {
        if let Some(l) = laws.next() {
            arm.portfolio_default_law = l.portfolio_default_law;
            arm.stress_laws = l.stress_laws;
            arm.out_of_class = l.out_of_class;
            arm.annual_default_law = arm
                .portfolio_default_law
                .as_ref()
                .map(|law| law.over_cycles(scenario.finance().cycles_per_year()));
        }
    }
    let (hit_share, hit_share_reason) = match hit_share_section(scenario) {
        Ok(section) => (Some(section), None),
        Err(reason) => (None, Some(reason)),
    };
    let first = arms.first();
    let basel = hit_share.as_ref().and_then(|h| {
        let label = first.map(|a| a.label.as_str())?;
        h.entries
            .iter()
            .find(|e| e.arms.iter().any(|l| l == label))
            .and_then(|e| e.basel.clone())
    });
    AnalyzeReport {
        scenario: scenario.name().to_owned(),
        one_factor_out_of_class,
        model,
        portfolio_default_law: first.and_then(|a| a.portfolio_default_law.clone()),
        stress_laws: first.map(|a| a.stress_laws.clone()).unwrap_or_default(),
        annual_default_law: first.and_then(|a| a.annual_default_law.clone()),
        cycles_per_year: scenario.finance().cycles_per_year(),
        out_of_class: first.and_then(|a| a.out_of_class.clone()),
        basel,
        arms,
        hit_share,
        hit_share_reason,
        caution: CAUTION.to_string(),
    }
}

fn hit_share_section(scenario: &Scenario) -> Result<HitShareSection, String> {
    let first = &scenario.arms()[0];
    let (index, shock) = first
        .shocks()
        .iter()
        .enumerate()
        .find(|(_, s)| s.scope() == ShockScope::Member)
        .ok_or_else(|| "the scenario has no member-scope shock, and only those follow a one-factor law".to_string())?;
    // A sweep may vary the shock's correlations or probability, the risk multiplier or the recovery
    // rate: every arm is read from its own model (the same shock, by index, in every arm).
    let mut per_arm = Vec::with_capacity(scenario.arms().len());
    for arm in scenario.arms() {
        let own = &arm.shocks()[index];
        let risk = arm.risk().fixed_value().ok_or_else(|| {
            format!(
                "borrowers.risk is a {} distribution, not fixed, so members' hit probabilities differ and the hit share is a mixture of one-factor laws",
                arm.risk().kind_name()
            )
        })?;
        per_arm.push((arm, own, risk));
    }
    if scenario.villages() == 0 || scenario.borrowers() == 0 {
        return Err(format!(
            "portfolio has {} borrowers in {} villages; the hit share needs at least one of each",
            scenario.borrowers(),
            scenario.villages()
        ));
    }
    let (v, pc) = (shock.village_correlation(), shock.portfolio_correlation());
    let rho = v + pc;
    // Within one village members share loading v + pc whatever v is; the whole portfolio is one
    // one-factor population only when no arm has a village factor.
    let scope = if scenario.villages() > 1 && per_arm.iter().any(|(_, s, _)| s.village_correlation() > 0.0) {
        HitShareScope::PerVillage
    } else {
        HitShareScope::Portfolio
    };
    let village_members = scenario.village_size(0);
    let population = match scope {
        HitShareScope::Portfolio => scenario.borrowers(),
        HitShareScope::PerVillage => village_members,
    };
    let mut notes = Vec::new();
    match scope {
        HitShareScope::Portfolio if scenario.villages() > 1 => notes.push(format!(
            "villages share no factor of their own (village correlation 0), so all {} members share one factor of loading {}",
            scenario.borrowers(),
            short(rho)
        )),
        HitShareScope::Portfolio => {
            notes.push(format!("one village: all {} members share one factor of loading {}", scenario.borrowers(), short(rho)))
        }
        HitShareScope::PerVillage => notes.push(format!(
            "with {} villages and village correlation {}, the portfolio-wide hit share mixes independent village factors and is not a one-factor law; shown: the hit share within one village (members share loading {} + {} = {})",
            scenario.villages(),
            short(v),
            short(v),
            short(pc),
            short(rho)
        )),
    }
    if scenario.arms()[0].shocks().len() > 1 {
        notes.push(format!(
            "shock[{index}] '{}' alone; the scenario's other shocks add further hits",
            shock.name()
        ));
    }
    if !shock.stress().is_empty() {
        notes.push("holds outside the shock's stress windows, which change p".to_string());
    }
    // Behaviour and growth change who defaults, not who is hit: the law stands, its reading as a
    // default share does not.
    if let Some(reason) = scenario.arms().iter().find_map(|a| a.dynamic_reason()) {
        notes.push(format!("counts hits only: {reason}, so defaults need not follow hits"));
    }
    notes.push(format!(
        "finite pool: the largest village, {village_members} members, at the same loading"
    ));

    // One entry per distinct (hit probability, loading, loss given default); a curve gives one per
    // distinct group size, a swept correlation one per value.
    type Key = (u64, u64, u64);
    let mut by_model: BTreeMap<Key, (f64, f64, f64, Vec<String>)> = BTreeMap::new();
    for (arm, own, risk) in &per_arm {
        let k = arm.policy().group_size();
        let base = match own.probability() {
            ShockProbability::Fixed(p) => *p,
            ShockProbability::Curve(c) => c
                .at(k)
                .ok_or_else(|| format!("group size {k} is outside the curve's domain ({})", c.domain_text()))?,
        };
        let p = (risk * base).min(1.0);
        let rho = own.village_correlation() + own.portfolio_correlation();
        let lgd = 1.0 - arm.recovery_rate();
        by_model
            .entry((p.to_bits(), rho.to_bits(), lgd.to_bits()))
            .or_insert_with(|| (p, rho, lgd, Vec::new()))
            .3
            .push(arm.label().to_owned());
    }
    let mut entries = Vec::new();
    for (_, (p, rho, lgd, arms)) in by_model {
        let quantiles = HIT_SHARE_LEVELS
            .iter()
            .map(|&level| vasicek::quantile(level, p, rho).map(|share| HitShareQuantile { level, share }))
            .collect::<Result<Vec<_>, _>>()
            .map_err(|e| e.to_string())?;
        let large = vasicek::quantile(0.999, p, rho).map_err(|e| e.to_string())?;
        let (finite, finite_note) = match vasicek::finite_quantile(0.999, p, rho, village_members) {
            Ok(x) => (Some(x), None),
            Err(e) => (None, Some(e.to_string())),
        };
        entries.push(HitShareEntry {
            p,
            rho,
            arms,
            quantiles,
            finite_members: village_members,
            finite_quantile_999: finite,
            large_pool_quantile_999: large,
            finite_minus_large: finite.map(|f| f - large),
            finite_note,
            basel: basel_comparison(p, lgd, rho),
        });
    }
    Ok(HitShareSection {
        shock_name: shock.name().to_owned(),
        scope,
        rho,
        population,
        entries,
        notes,
    })
}

fn basel_comparison(pd: f64, lgd: f64, rho: f64) -> Option<BaselComparison> {
    let r = basel::retail_correlation(pd).ok()?;
    let cond = basel::conditional_hit_probability(pd).ok()?;
    let cond_rho = basel::conditional_hit_probability_at(pd, rho).ok()?;
    let k = basel::capital_requirement(pd, lgd).ok()?;
    let k_rho = lgd * (cond_rho - pd);
    Some(BaselComparison {
        pd,
        lgd,
        basel_correlation: r,
        scenario_correlation: rho,
        conditional_hit_probability: cond,
        conditional_hit_probability_at_scenario_rho: cond_rho,
        capital_requirement: k,
        risk_weight: basel::RISK_WEIGHT_MULTIPLIER * k,
        capital_requirement_at_scenario_rho: k_rho,
        risk_weight_at_scenario_rho: basel::RISK_WEIGHT_MULTIPLIER * k_rho,
    })
}

/// A number with at most six decimals and no trailing zeros, so sums such as 0.1 + 0.05 print as 0.15.
pub(crate) fn short(x: f64) -> String {
    let text = format!("{x:.6}");
    let text = text.trim_end_matches('0').trim_end_matches('.');
    if text == "-0" {
        "0".to_string()
    } else {
        text.to_string()
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::curve::GroupSizeCurve;
    use crate::dist::Distribution;
    use crate::scenario::{Policy, Shock};

    fn scenario(villages: u32, village_corr: f64) -> Scenario {
        let mut joint = Policy::default_policy();
        joint.peer_cover = 0.5;
        let mut individual = Policy::default_policy();
        individual.liability = Liability::Individual;
        Scenario {
            name: "report".into(),
            seed: 7,
            replications: 1,
            cycles: 10,
            warmup_cycles: 0,
            borrowers: 400,
            villages,
            principal: 100.0,
            interest_rate: 0.2,
            recovery_rate: 0.25,
            income: Distribution::fixed(1.4).unwrap(),
            risk: Distribution::fixed(1.0).unwrap(),
            shocks: vec![Shock {
                name: "drought".into(),
                scope: ShockScope::Member,
                probability: ShockProbability::Fixed(0.05),
                village_correlation: village_corr,
                portfolio_correlation: 0.05,
                reach: 1.0,
                severity: Distribution::fixed(0.7).unwrap(),
                stress: vec![],
            }],
            dropout: 0.0,
            replace_departures: true,
            swept_fields: vec!["peer_cover".into()],
            arms: vec![],
            warnings: vec![],
            finance: crate::scenario::Finance::default(),
        }
        .with_policies(vec![("joint", joint), ("individual", individual)])
    }

    #[test]
    fn in_class_scenario_gets_every_section() {
        let report = analyze(&scenario(1, 0.1));
        assert!(report.one_factor_out_of_class.is_none());
        assert_eq!(report.arms.len(), 2);
        let joint = report.arms[0].exact.as_ref().unwrap();
        let individual = report.arms[1].exact.as_ref().unwrap();
        assert!(joint.group_repayment > individual.group_repayment);
        let section = report.hit_share.as_ref().unwrap();
        assert_eq!(section.scope, HitShareScope::Portfolio);
        assert_eq!(section.population, 400);
        assert!((section.rho - 0.15).abs() < 1e-15);
        assert_eq!(section.entries.len(), 1);
        let e = &section.entries[0];
        assert_eq!(e.arms, vec!["joint", "individual"]);
        assert_eq!(e.quantiles.len(), 4);
        assert!(e.quantiles.windows(2).all(|w| w[0].share < w[1].share));
        assert!(e.finite_minus_large.unwrap() > 0.0);
        let b = e.basel.as_ref().unwrap();
        assert!((b.lgd - 0.75).abs() < 1e-15);
        assert!(b.basel_correlation < 0.16 && b.basel_correlation > 0.03);
        let table = crate::output::analysis::table(&report);
        assert!(table.trim_end().ends_with(CAUTION), "{table}");
        assert!(table.contains("in class") && table.contains("99.9% quantile, 400 members"));
        let json: serde_json::Value = serde_json::from_str(&crate::output::analysis::json(&report)).unwrap();
        assert_eq!(json["hit_share"]["scope"], "portfolio");
        assert!(json["hit_share_reason"].is_null());
    }

    #[test]
    fn several_correlated_villages_show_the_per_village_law() {
        let report = analyze(&scenario(4, 0.1));
        let section = report.hit_share.as_ref().unwrap();
        assert_eq!(section.scope, HitShareScope::PerVillage);
        assert_eq!(section.population, 100);
        assert!(section.notes[0].contains("not a one-factor law"));
        let flat = analyze(&scenario(4, 0.0));
        let section = flat.hit_share.as_ref().unwrap();
        assert_eq!(section.scope, HitShareScope::Portfolio);
        assert_eq!(section.population, 400);
        assert_eq!(section.entries[0].finite_members, 100);
    }

    #[test]
    fn out_of_class_scenario_says_why_and_still_shows_the_law() {
        let mut s = scenario(1, 0.1);
        for arm in &mut s.arms {
            arm.income = Distribution::lognormal(1.4, 0.3).unwrap();
        }
        let report = analyze(&s);
        assert_eq!(
            report.one_factor_out_of_class.as_deref(),
            Some("borrowers.income is a lognormal distribution, not fixed")
        );
        assert!(report.arms.iter().all(|a| a.exact.is_none()));
        assert!(report.hit_share.is_some());
        assert!(crate::output::analysis::table(&report).contains("out of class: borrowers.income"));
        for arm in &mut s.arms {
            arm.risk = Distribution::gamma(1.0, 0.4).unwrap();
        }
        let report = analyze(&s);
        assert!(report.hit_share_reason.as_deref().unwrap().contains("borrowers.risk"));
        assert!(crate::output::analysis::table(&report).trim_end().ends_with(CAUTION));
    }

    #[test]
    fn a_hand_built_scenario_without_villages_is_refused_not_panicked_on() {
        let mut s = scenario(1, 0.1);
        s.villages = 0;
        let report = analyze(&s);
        assert!(report.hit_share_reason.as_deref().unwrap().contains("0 villages"));
        s.arms[0].policy.group_size = 0;
        for arm in &mut s.arms {
            arm.shocks[0].village_correlation = 2.0;
        }
        let report = analyze(&s);
        assert!(report.arms[0].reason.as_deref().unwrap().contains("group size = 0"));
        assert!(
            report.arms[1]
                .reason
                .as_deref()
                .unwrap()
                .contains("village correlation = 2")
        );
    }

    #[test]
    fn curve_probability_gives_one_entry_per_group_size() {
        let mut s = scenario(1, 0.1);
        for arm in &mut s.arms {
            arm.shocks[0].probability = ShockProbability::Curve(GroupSizeCurve::power_plus_log(0.5).unwrap());
        }
        s.arms[1].policy.group_size = 8;
        let report = analyze(&s);
        let section = report.hit_share.as_ref().unwrap();
        assert_eq!(section.entries.len(), 2);
        let x = report.arms[0].exact.as_ref().unwrap().class_optimum.unwrap();
        assert!((x - 5.135).abs() < 1e-3);
    }

    /// A swept correlation gives each arm its own exact value and its own hit-share law: the values
    /// equal those of the scenario written once per correlation, with no sweep.
    #[test]
    fn a_correlation_sweep_is_analysed_arm_by_arm() {
        let base = "replications = 1\ncycles = 10\n[portfolio]\nborrowers = 400\nvillages = 4\n[loan]\nprincipal = 100\n\
            [borrowers]\nincome = 1.4\n[[shock]]\nname = \"drought\"\nscope = \"member\"\nprobability = 0.05\n\
            village_correlation = RHO\nseverity = 0.7\n";
        let swept = format!(
            "{}[sweep]\n\"shock.drought.village_correlation\" = [0.05, 0.2]\n",
            base.replace("RHO", "0.1")
        );
        let report = analyze(&Scenario::from_toml_str(&swept, "inline").unwrap());
        assert!(report.out_of_class.is_none());
        let section = report.hit_share.as_ref().unwrap();
        assert_eq!(section.entries.len(), 2);
        for (i, rho) in [0.05, 0.2].into_iter().enumerate() {
            let alone = analyze(&Scenario::from_toml_str(&base.replace("RHO", &rho.to_string()), "inline").unwrap());
            let expected = alone.arms[0].exact.as_ref().unwrap().group_repayment;
            assert_eq!(report.arms[i].exact.as_ref().unwrap().group_repayment, expected);
            let entry = section.entries.iter().find(|e| e.rho == rho).unwrap();
            assert_eq!(entry.quantiles, alone.hit_share.as_ref().unwrap().entries[0].quantiles);
        }
    }
}
