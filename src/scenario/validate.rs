//! Turns the file as written into a validated `Scenario`, checking every number exactly once.
//!
//! The engine trusts the model's invariants, so all refusals happen here, before any simulation;
//! each one names the field path, quotes the value as written and says what is allowed, so a user
//! can fix the file from the message alone. The first problem found, in file order, is reported.

use super::raw::{
    Int, Num, RawAxis, RawCurve, RawDist, RawExclusion, RawProbability, RawScenario, RawShock, float_text,
};
use super::{
    Arm, Exclusion, ExclusionScope, Formation, Liability, Matching, Policy, Scenario, ScenarioError, Shock,
    ShockProbability, ShockScope, StressWindow, limits,
};
use crate::curve::{CurveError, GroupSizeCurve};
use crate::dist::{Distribution, DistributionError};
use std::collections::{BTreeMap, HashMap};

type Result<T> = std::result::Result<T, ScenarioError>;

/// Checks `raw` and builds the scenario; `origin` names the file in error messages.
pub fn validate(raw: RawScenario, origin: &str) -> Result<Scenario> {
    let scenario = Checker { file: origin }.scenario(raw)?;
    let records = scenario.cycle_records();
    if records > limits::MAX_CYCLE_RECORDS {
        return Err(ScenarioError::Invalid {
            file: origin.to_string(),
            field: "replications".into(),
            value: scenario.replications.to_string(),
            allowed: format!(
                "at most {} per-cycle records in all (replications x cycles x arms); here {} x {} x {} = {records}",
                limits::MAX_CYCLE_RECORDS,
                scenario.replications,
                scenario.cycles,
                scenario.arms.len()
            ),
        });
    }
    Ok(scenario)
}

/// Which real numbers a field accepts; every bound refuses NaN and infinities.
#[derive(Clone, Copy)]
enum Bound {
    /// Finite and > 0.
    Positive,
    /// Finite and >= 0.
    NonNegative,
    /// In [0, 1], read as a probability.
    Probability,
    /// In [0, 1], read as a share.
    Share,
    /// In [0, 1), read as a probability.
    ProbabilityBelowOne,
}

impl Bound {
    fn admits(self, x: f64) -> bool {
        match self {
            Bound::Positive => x.is_finite() && x > 0.0,
            Bound::NonNegative => x.is_finite() && x >= 0.0,
            Bound::Probability | Bound::Share => (0.0..=1.0).contains(&x),
            Bound::ProbabilityBelowOne => (0.0..1.0).contains(&x),
        }
    }

    fn text(self) -> &'static str {
        match self {
            Bound::Positive => "a finite number > 0",
            Bound::NonNegative => "a finite number >= 0",
            Bound::Probability => "a probability in [0, 1]",
            Bound::Share => "a share in [0, 1]",
            Bound::ProbabilityBelowOne => "a probability in [0, 1)",
        }
    }
}

/// One validated `[policy]` value, as given in `[policy]` or as one element of a sweep list.
#[derive(Debug, Clone, Copy, PartialEq)]
enum PolicyValue {
    GroupSize(u32),
    Liability(Liability),
    PeerCover(f64),
    Exclusion(Exclusion),
    ExclusionScope(ExclusionScope),
    Formation(Formation),
    Matching(Matching),
}

impl PolicyValue {
    fn apply(self, policy: &mut Policy) {
        match self {
            PolicyValue::GroupSize(k) => policy.group_size = k,
            PolicyValue::Liability(l) => policy.liability = l,
            PolicyValue::PeerCover(c) => policy.peer_cover = c,
            PolicyValue::Exclusion(e) => policy.exclusion_cycles = e,
            PolicyValue::ExclusionScope(s) => policy.exclusion_scope = s,
            PolicyValue::Formation(f) => policy.formation = f,
            PolicyValue::Matching(m) => policy.matching = m,
        }
    }

    /// The value as it appears in arm labels (f64 `Display` for peer cover).
    fn label(self) -> String {
        match self {
            PolicyValue::GroupSize(k) => k.to_string(),
            PolicyValue::Liability(l) => name_of(LIABILITIES, l).into(),
            PolicyValue::PeerCover(c) => c.to_string(),
            PolicyValue::Exclusion(e) => e.to_string(),
            PolicyValue::ExclusionScope(s) => name_of(EXCLUSION_SCOPES, s).into(),
            PolicyValue::Formation(f) => name_of(FORMATIONS, f).into(),
            PolicyValue::Matching(m) => name_of(MATCHINGS, m).into(),
        }
    }
}

const SCOPES: &[(&str, ShockScope)] = &[
    ("member", ShockScope::Member),
    ("group", ShockScope::Group),
    ("village", ShockScope::Village),
    ("portfolio", ShockScope::Portfolio),
];
const LIABILITIES: &[(&str, Liability)] = &[("joint", Liability::Joint), ("individual", Liability::Individual)];
const EXCLUSION_SCOPES: &[(&str, ExclusionScope)] = &[
    ("group", ExclusionScope::Group),
    ("defaulters", ExclusionScope::Defaulters),
];
const FORMATIONS: &[(&str, Formation)] = &[
    ("reshuffle", Formation::Reshuffle),
    ("persistent", Formation::Persistent),
];
const MATCHINGS: &[(&str, Matching)] = &[("random", Matching::Random), ("assortative", Matching::Assortative)];

fn name_of<T: PartialEq>(options: &[(&'static str, T)], value: T) -> &'static str {
    options.iter().find(|(_, v)| *v == value).map_or("?", |(n, _)| n)
}

/// A group size some arm uses, with the field that set it (for messages).
struct ArmGroupSize {
    field: String,
    value_text: String,
    k: u32,
}

/// Carries the file name into every error.
struct Checker<'a> {
    file: &'a str,
}

impl Checker<'_> {
    fn invalid(&self, field: impl Into<String>, value: impl Into<String>, allowed: impl Into<String>) -> ScenarioError {
        ScenarioError::Invalid {
            file: self.file.to_owned(),
            field: field.into(),
            value: value.into(),
            allowed: allowed.into(),
        }
    }

    fn missing(&self, field: &str, expected: &str) -> ScenarioError {
        ScenarioError::Syntax {
            file: self.file.to_owned(),
            location: format!("field {field}: "),
            message: format!("this required field is missing ({expected})"),
        }
    }

    /// An integer in [min, max]; the message omits an upper bound that only reflects the storage type.
    fn integer(&self, field: &str, v: Int, min: u32, max: u32) -> Result<u32> {
        match u32::try_from(v.0) {
            Ok(n) if (min..=max).contains(&n) => Ok(n),
            _ => {
                let allowed = if max == u32::MAX {
                    format!("an integer >= {min}")
                } else {
                    format!("an integer in [{min}, {max}]")
                };
                Err(self.invalid(field, v.0.to_string(), allowed))
            }
        }
    }

    fn count(&self, field: &str, v: Option<Int>, default: u32, min: u32, max: u32) -> Result<u32> {
        v.map_or(Ok(default), |v| self.integer(field, v, min, max))
    }

    fn required_count(&self, field: &str, v: Option<Int>, min: u32, max: u32) -> Result<u32> {
        let expected = if max == u32::MAX {
            format!("an integer >= {min}")
        } else {
            format!("an integer in [{min}, {max}]")
        };
        let v = v.ok_or_else(|| self.missing(field, &expected))?;
        self.integer(field, v, min, max)
    }

    /// A real number within `bound`; `-0.0` becomes `0.0` so it prints and compares like zero.
    fn real(&self, field: &str, v: Num, bound: Bound) -> Result<f64> {
        if bound.admits(v.value) {
            Ok(v.value + 0.0)
        } else {
            Err(self.invalid(field, v.text(), bound.text()))
        }
    }

    fn real_or(&self, field: &str, v: Option<Num>, default: f64, bound: Bound) -> Result<f64> {
        v.map_or(Ok(default), |v| self.real(field, v, bound))
    }

    fn choice<T: Copy>(&self, field: &str, word: &str, options: &[(&'static str, T)]) -> Result<T> {
        options
            .iter()
            .find(|(name, _)| *name == word)
            .map(|(_, v)| *v)
            .ok_or_else(|| {
                let names: Vec<&str> = options.iter().map(|(n, _)| *n).collect();
                self.invalid(field, format!("{word:?}"), format!("one of {}", names.join(", ")))
            })
    }

    fn scenario(&self, raw: RawScenario) -> Result<Scenario> {
        let seed = match raw.seed {
            None => 0,
            Some(Int(s)) => u64::try_from(s).map_err(|_| {
                self.invalid(
                    "seed",
                    s.to_string(),
                    format!("an integer in [0, {}] (a TOML integer)", i64::MAX),
                )
            })?,
        };
        let replications = self.required_count("replications", raw.replications, 1, u32::MAX)?;
        let cycles = self.required_count("cycles", raw.cycles, 1, limits::MAX_TOTAL_CYCLES)?;
        let warmup_cycles = self.count("warmup_cycles", raw.warmup_cycles, 0, 0, limits::MAX_TOTAL_CYCLES)?;
        let total_cycles = match warmup_cycles.checked_add(cycles) {
            Some(t) if t <= limits::MAX_TOTAL_CYCLES => t,
            _ => {
                return Err(self.invalid(
                    "cycles",
                    cycles.to_string(),
                    format!(
                        "warmup_cycles + cycles <= {} (here {warmup_cycles} + {cycles})",
                        limits::MAX_TOTAL_CYCLES
                    ),
                ));
            }
        };

        let portfolio = raw.portfolio.unwrap_or_default();
        let borrowers = self.required_count("portfolio.borrowers", portfolio.borrowers, 1, limits::MAX_BORROWERS)?;
        let villages = match portfolio.villages {
            None => 1,
            Some(v) => u32::try_from(v.0)
                .ok()
                .filter(|n| (1..=borrowers).contains(n))
                .ok_or_else(|| {
                    self.invalid(
                        "portfolio.villages",
                        v.0.to_string(),
                        format!("an integer in [1, {borrowers}] (at most one village per borrower)"),
                    )
                })?,
        };

        let loan = raw.loan.unwrap_or_default();
        let principal = loan
            .principal
            .ok_or_else(|| self.missing("loan.principal", Bound::Positive.text()))?;
        let principal = self.real("loan.principal", principal, Bound::Positive)?;
        let interest_rate = self.real_or("loan.interest_rate", loan.interest_rate, 0.0, Bound::NonNegative)?;
        if !(principal * (1.0 + interest_rate)).is_finite() {
            // Only a written rate can overflow: the default 0 leaves the finite principal unchanged.
            let written = loan
                .interest_rate
                .map_or_else(|| float_text(interest_rate), |r| r.text());
            return Err(self.invalid(
                "loan.interest_rate",
                written,
                "a rate that keeps the amount due, principal x (1 + interest_rate), finite",
            ));
        }
        let recovery_rate = self.real_or("loan.recovery_rate", loan.recovery_rate, 0.0, Bound::Share)?;

        let people = raw.borrowers.unwrap_or_default();
        let income = self.distribution("borrowers.income", people.income.as_ref(), false)?;
        let risk = self.distribution("borrowers.risk", people.risk.as_ref(), false)?;

        if raw.shock.len() > limits::MAX_SHOCKS {
            return Err(self.invalid(
                "shock",
                format!("{} [[shock]] tables", raw.shock.len()),
                format!("at most {} shocks", limits::MAX_SHOCKS),
            ));
        }
        let mut shocks: Vec<Shock> = Vec::with_capacity(raw.shock.len());
        for (i, s) in raw.shock.iter().enumerate() {
            let shock = self.shock(i, s, total_cycles)?;
            if let Some(j) = shocks.iter().position(|t| t.name == shock.name) {
                return Err(self.invalid(
                    format!("shock[{i}].name"),
                    format!("{:?}", shock.name),
                    format!(
                        "a name no other shock uses (shock[{j}] is already called {:?})",
                        shock.name
                    ),
                ));
            }
            shocks.push(shock);
        }

        let raw_policy = raw.policy.unwrap_or_default();
        let mut base = Policy::default_policy();
        let group_size_written = raw_policy.group_size.is_some();
        let mut given = Vec::new();
        if let Some(v) = raw_policy.group_size {
            given.push(self.group_size("policy.group_size", v)?);
        }
        if let Some(v) = &raw_policy.liability {
            given.push(self.liability("policy.liability", v)?);
        }
        if let Some(v) = raw_policy.peer_cover {
            given.push(self.peer_cover("policy.peer_cover", v)?);
        }
        if let Some(v) = &raw_policy.exclusion_cycles {
            given.push(self.exclusion("policy.exclusion_cycles", v)?);
        }
        if let Some(v) = &raw_policy.exclusion_scope {
            given.push(self.exclusion_scope("policy.exclusion_scope", v)?);
        }
        if let Some(v) = &raw_policy.formation {
            given.push(self.formation("policy.formation", v)?);
        }
        if let Some(v) = &raw_policy.matching {
            given.push(self.matching("policy.matching", v)?);
        }
        for v in given {
            v.apply(&mut base);
        }

        let pool = raw.pool.unwrap_or_default();
        let dropout = self.real_or("pool.dropout", pool.dropout, 0.0, Bound::ProbabilityBelowOne)?;
        let replace_departures = pool.replace_departures.unwrap_or(true);

        let axes = self.sweep(raw.sweep.map(|s| s.axes).unwrap_or_default())?;

        let group_sizes: Vec<ArmGroupSize> = match axes.iter().find(|(key, _)| *key == "group_size") {
            Some((_, values)) => values
                .iter()
                .enumerate()
                .filter_map(|(i, v)| match v {
                    PolicyValue::GroupSize(k) => Some(ArmGroupSize {
                        field: format!("sweep.group_size[{i}]"),
                        value_text: k.to_string(),
                        k: *k,
                    }),
                    _ => None,
                })
                .collect(),
            None => vec![ArmGroupSize {
                field: "policy.group_size".into(),
                value_text: if group_size_written {
                    base.group_size.to_string()
                } else {
                    format!("{} (the default)", base.group_size)
                },
                k: base.group_size,
            }],
        };
        let smallest_village = borrowers / villages;
        for g in &group_sizes {
            if g.k > smallest_village {
                return Err(self.invalid(
                    &g.field,
                    &g.value_text,
                    format!(
                        "a group size <= {smallest_village}, the smallest village's size ({borrowers} borrowers in {villages} villages)"
                    ),
                ));
            }
            for (i, shock) in shocks.iter().enumerate() {
                let ShockProbability::Curve(curve) = &shock.probability else {
                    continue;
                };
                match curve.at(g.k) {
                    None => {
                        return Err(self.invalid(
                            &g.field,
                            &g.value_text,
                            format!(
                                "a group size in the domain of shock[{i}].probability ({} curve: {})",
                                curve.kind_name(),
                                curve.domain_text()
                            ),
                        ));
                    }
                    Some(q) if !(0.0..=1.0).contains(&q) => {
                        return Err(self.invalid(
                            format!("shock[{i}].probability"),
                            format!(
                                "a {} curve worth {} at group size {}",
                                curve.kind_name(),
                                float_text(q),
                                g.k
                            ),
                            format!(
                                "a probability in [0, 1] at every arm's group size ({} = {})",
                                g.field, g.k
                            ),
                        ));
                    }
                    Some(_) => {}
                }
            }
        }

        let swept_fields: Vec<String> = axes.iter().map(|(key, _)| (*key).to_owned()).collect();
        let arms = build_arms(&base, &axes);

        Ok(Scenario {
            name: raw.name.unwrap_or_default(),
            seed,
            replications,
            cycles,
            warmup_cycles,
            borrowers,
            villages,
            principal,
            interest_rate,
            recovery_rate,
            income,
            risk,
            shocks,
            dropout,
            replace_departures,
            swept_fields,
            arms,
        })
    }

    fn shock(&self, i: usize, raw: &RawShock, total_cycles: u32) -> Result<Shock> {
        let at = |field: &str| format!("shock[{i}].{field}");
        let name = raw
            .name
            .clone()
            .ok_or_else(|| self.missing(&at("name"), "a non-empty name"))?;
        if name.trim().is_empty() {
            return Err(self.invalid(at("name"), format!("{name:?}"), "a non-empty name"));
        }
        let scope_word = raw
            .scope
            .as_deref()
            .ok_or_else(|| self.missing(&at("scope"), "one of member, group, village, portfolio"))?;
        let scope = self.choice(&at("scope"), scope_word, SCOPES)?;
        let member = scope == ShockScope::Member;

        let probability = match &raw.probability {
            None => return Err(self.missing(&at("probability"), "a probability in [0, 1], or a group-size curve")),
            Some(RawProbability::Number(p)) => {
                ShockProbability::Fixed(self.real(&at("probability"), *p, Bound::Probability)?)
            }
            Some(RawProbability::Curve(c)) if !member => {
                return Err(self.invalid(
                    at("probability"),
                    c.text(),
                    format!("a probability in [0, 1]; group-size curves apply to member-scope shocks only, not {scope_word} scope"),
                ));
            }
            Some(RawProbability::Curve(c)) => ShockProbability::Curve(self.curve(&at("probability"), c)?),
        };

        let (mut village_correlation, mut portfolio_correlation, mut reach) = (0.0, 0.0, 1.0);
        if member {
            village_correlation = self.real_or(
                &at("village_correlation"),
                raw.village_correlation,
                0.0,
                Bound::NonNegative,
            )?;
            portfolio_correlation = self.real_or(
                &at("portfolio_correlation"),
                raw.portfolio_correlation,
                0.0,
                Bound::NonNegative,
            )?;
            if village_correlation + portfolio_correlation >= 1.0 {
                let (field, value) = match (raw.portfolio_correlation, raw.village_correlation) {
                    (Some(p), _) => (at("portfolio_correlation"), p.text()),
                    (None, Some(v)) => (at("village_correlation"), v.text()),
                    (None, None) => (at("village_correlation"), float_text(village_correlation)),
                };
                let text = |v: Option<Num>| v.map_or_else(|| "0".to_owned(), |n| n.text());
                return Err(self.invalid(
                    field,
                    value,
                    format!(
                        "village_correlation + portfolio_correlation < 1 (here {} + {})",
                        text(raw.village_correlation),
                        text(raw.portfolio_correlation)
                    ),
                ));
            }
            if let Some(r) = raw.reach.filter(|r| r.value != 1.0) {
                return Err(self.invalid(
                    at("reach"),
                    r.text(),
                    "1 (reach applies to group, village and portfolio shocks; a member shock strikes each member on its own)",
                ));
            }
        } else {
            for (field, v) in [
                ("village_correlation", raw.village_correlation),
                ("portfolio_correlation", raw.portfolio_correlation),
            ] {
                if let Some(c) = v.filter(|c| c.value != 0.0) {
                    return Err(self.invalid(
                        at(field),
                        c.text(),
                        format!("0 (correlations apply to member-scope shocks only, not {scope_word} scope)"),
                    ));
                }
            }
            reach = self.real_or(&at("reach"), raw.reach, 1.0, Bound::Share)?;
        }

        let severity = self.distribution(&at("severity"), raw.severity.as_ref(), true)?;
        let stress = self.stress_windows(i, raw, total_cycles)?;

        Ok(Shock {
            name,
            scope,
            probability,
            village_correlation,
            portfolio_correlation,
            reach,
            severity,
            stress,
        })
    }

    fn stress_windows(&self, i: usize, raw: &RawShock, total_cycles: u32) -> Result<Vec<StressWindow>> {
        let mut windows: Vec<(usize, StressWindow)> = Vec::with_capacity(raw.stress.len());
        for (j, w) in raw.stress.iter().enumerate() {
            let at = |field: &str| format!("shock[{i}].stress[{j}].{field}");
            let bounds = format!("a cycle in [1, {total_cycles}] (cycles are counted from 1, warm-up included)");
            let from = w.from.ok_or_else(|| self.missing(&at("from"), &bounds))?;
            let from = u32::try_from(from.0)
                .ok()
                .filter(|f| (1..=total_cycles).contains(f))
                .ok_or_else(|| self.invalid(at("from"), from.0.to_string(), bounds.as_str()))?;
            let to = w.to.ok_or_else(|| self.missing(&at("to"), &bounds))?;
            let to = match u32::try_from(to.0) {
                Ok(t) if t >= from && t <= total_cycles => t,
                Ok(t) if t >= from => {
                    return Err(self.invalid(
                        at("to"),
                        t.to_string(),
                        format!("a cycle <= {total_cycles}, the last simulated cycle (warmup_cycles + cycles)"),
                    ));
                }
                _ => {
                    return Err(self.invalid(
                        at("to"),
                        to.0.to_string(),
                        format!("a cycle in [{from}, {total_cycles}] (from <= to <= warmup_cycles + cycles)"),
                    ));
                }
            };
            let p = w
                .probability
                .ok_or_else(|| self.missing(&at("probability"), Bound::Probability.text()))?;
            let probability = self.real(&at("probability"), p, Bound::Probability)?;
            windows.push((j, StressWindow { from, to, probability }));
        }
        windows.sort_by_key(|(_, w)| w.from);
        for pair in windows.windows(2) {
            let ((a, earlier), (b, later)) = (pair[0], pair[1]);
            if later.from <= earlier.to {
                return Err(self.invalid(
                    format!("shock[{i}].stress[{b}].from"),
                    later.from.to_string(),
                    format!(
                        "a cycle outside shock[{i}].stress[{a}], which covers cycles {} to {} (stress windows must not overlap)",
                        earlier.from, earlier.to
                    ),
                ));
            }
        }
        Ok(windows.into_iter().map(|(_, w)| w).collect())
    }

    fn curve(&self, field: &str, raw: &RawCurve) -> Result<GroupSizeCurve> {
        let built = match raw {
            RawCurve::Unknown { curve } => {
                return Err(self.invalid(
                    format!("{field}.curve"),
                    format!("{curve:?}"),
                    "one of constant, power, power_plus_log, table",
                ));
            }
            RawCurve::Constant { value } => {
                let q = self.real(&format!("{field}.value"), *value, Bound::Probability)?;
                GroupSizeCurve::constant(q)
            }
            RawCurve::Power { p } => GroupSizeCurve::power(self.real(&format!("{field}.p"), *p, Bound::Positive)?),
            RawCurve::PowerPlusLog { p } => {
                GroupSizeCurve::power_plus_log(self.real(&format!("{field}.p"), *p, Bound::Positive)?)
            }
            RawCurve::Table { values } => {
                if values.is_empty() {
                    return Err(self.invalid(format!("{field}.values"), "{}", "at least one group size"));
                }
                let mut table = BTreeMap::new();
                let mut written: HashMap<u32, &str> = HashMap::new();
                for (key, q) in values {
                    let k = key
                        .parse::<u32>()
                        .ok()
                        .filter(|&k| k >= 1 && key.bytes().all(|b| b.is_ascii_digit()))
                        .ok_or_else(|| {
                            self.invalid(
                                format!("{field}.values"),
                                format!("{key:?}"),
                                "keys that are whole group sizes >= 1, such as \"2\"",
                            )
                        })?;
                    if let Some(first) = written.insert(k, key) {
                        return Err(self.invalid(
                            format!("{field}.values"),
                            format!("{key:?}"),
                            format!("distinct group sizes ({key:?} repeats {first:?})"),
                        ));
                    }
                    table.insert(k, self.real(&format!("{field}.values.{key}"), *q, Bound::Probability)?);
                }
                GroupSizeCurve::table(table)
            }
        };
        built.map_err(|CurveError::BadParameter { name, value, allowed }| {
            self.invalid(format!("{field}.{name}"), value, allowed)
        })
    }

    /// A distribution; `severity` restricts it to kinds and values inside [0, 1].
    fn distribution(&self, field: &str, raw: Option<&RawDist>, severity: bool) -> Result<Distribution> {
        let Some(raw) = raw else {
            return Distribution::fixed(1.0).map_err(|e| self.invalid(field, e.value, e.allowed));
        };
        let at = |param: &str| format!("{field}.{param}");
        if severity {
            let unit = "a share in [0, 1] (a severity is the share of income lost)";
            match raw {
                RawDist::Number(v) => {
                    self.real(field, *v, Bound::Share)
                        .map_err(|_| self.invalid(field, v.text(), unit))?;
                }
                RawDist::Fixed { value } => {
                    self.real(&at("value"), *value, Bound::Share)
                        .map_err(|_| self.invalid(at("value"), value.text(), unit))?;
                }
                RawDist::Uniform { low, high } => {
                    for (name, v) in [("low", low), ("high", high)] {
                        self.real(&at(name), *v, Bound::Share)
                            .map_err(|_| self.invalid(at(name), v.text(), unit))?;
                    }
                }
                RawDist::Beta { .. } | RawDist::Unknown { .. } => {}
                RawDist::Lognormal { .. } | RawDist::Gamma { .. } => {
                    let kind = if matches!(raw, RawDist::Lognormal { .. }) {
                        "lognormal"
                    } else {
                        "gamma"
                    };
                    return Err(self.invalid(
                        at("kind"),
                        format!("{kind:?}"),
                        "one of fixed, uniform, beta (a severity lies in [0, 1])",
                    ));
                }
            }
        }
        let map = |params: &[(&str, Num)], e: DistributionError| self.distribution_error(field, raw, params, e);
        match raw {
            RawDist::Number(v) => Distribution::fixed(v.value).map_err(|e| map(&[("value", *v)], e)),
            RawDist::Fixed { value } => Distribution::fixed(value.value).map_err(|e| map(&[("value", *value)], e)),
            RawDist::Uniform { low, high } => {
                Distribution::uniform(low.value, high.value).map_err(|e| map(&[("low", *low), ("high", *high)], e))
            }
            RawDist::Lognormal { mean, cv } => {
                Distribution::lognormal(mean.value, cv.value).map_err(|e| map(&[("mean", *mean), ("cv", *cv)], e))
            }
            RawDist::Beta { mean, sd } => {
                Distribution::beta(mean.value, sd.value).map_err(|e| map(&[("mean", *mean), ("sd", *sd)], e))
            }
            RawDist::Gamma { mean, cv } => {
                Distribution::gamma(mean.value, cv.value).map_err(|e| map(&[("mean", *mean), ("cv", *cv)], e))
            }
            RawDist::Unknown { kind } => Err(self.invalid(
                at("kind"),
                format!("{kind:?}"),
                if severity {
                    "one of fixed, uniform, beta"
                } else {
                    "one of fixed, uniform, lognormal, beta, gamma"
                },
            )),
        }
    }

    /// Names the parameter by its path and quotes it as written, not as the constructor re-printed it.
    fn distribution_error(
        &self,
        field: &str,
        raw: &RawDist,
        params: &[(&str, Num)],
        e: DistributionError,
    ) -> ScenarioError {
        let written = params.iter().find(|(n, _)| *n == e.parameter).map(|(_, v)| v.text());
        let path = if matches!(raw, RawDist::Number(_)) {
            field.to_owned()
        } else {
            format!("{field}.{}", e.parameter)
        };
        self.invalid(path, written.unwrap_or(e.value), e.allowed)
    }

    fn group_size(&self, field: &str, v: Int) -> Result<PolicyValue> {
        self.integer(field, v, 1, u32::MAX).map(PolicyValue::GroupSize)
    }

    fn liability(&self, field: &str, v: &str) -> Result<PolicyValue> {
        self.choice(field, v, LIABILITIES).map(PolicyValue::Liability)
    }

    fn peer_cover(&self, field: &str, v: Num) -> Result<PolicyValue> {
        self.real(field, v, Bound::Share).map(PolicyValue::PeerCover)
    }

    fn exclusion(&self, field: &str, v: &RawExclusion) -> Result<PolicyValue> {
        let refuse = || self.invalid(field, v.text(), "an integer >= 0, or \"permanent\"");
        match v {
            RawExclusion::Cycles(n) => u32::try_from(*n)
                .map(|n| PolicyValue::Exclusion(Exclusion::Cycles(n)))
                .map_err(|_| refuse()),
            RawExclusion::Word(w) if w == "permanent" => Ok(PolicyValue::Exclusion(Exclusion::Permanent)),
            RawExclusion::Word(_) => Err(refuse()),
        }
    }

    fn exclusion_scope(&self, field: &str, v: &str) -> Result<PolicyValue> {
        self.choice(field, v, EXCLUSION_SCOPES).map(PolicyValue::ExclusionScope)
    }

    fn formation(&self, field: &str, v: &str) -> Result<PolicyValue> {
        self.choice(field, v, FORMATIONS).map(PolicyValue::Formation)
    }

    fn matching(&self, field: &str, v: &str) -> Result<PolicyValue> {
        self.choice(field, v, MATCHINGS).map(PolicyValue::Matching)
    }

    /// Validates each sweep list element like its `[policy]` field; refuses empty lists, repeated
    /// values and sweeps that would resolve to more than `MAX_ARMS` arms (before building any arm).
    fn sweep(&self, axes: Vec<RawAxis>) -> Result<Vec<(&'static str, Vec<PolicyValue>)>> {
        for axis in &axes {
            if axis.is_empty() {
                return Err(self.invalid(
                    format!("sweep.{}", axis.key()),
                    "[]",
                    "a non-empty list of alternative values",
                ));
            }
        }
        let arms = axes.iter().fold(1u128, |n, a| n.saturating_mul(a.len() as u128));
        if arms > limits::MAX_ARMS as u128 {
            let lengths: Vec<String> = axes.iter().map(|a| a.len().to_string()).collect();
            return Err(self.invalid(
                "sweep",
                format!("{arms} arms ({})", lengths.join(" x ")),
                format!(
                    "at most {} arms (the product of the sweep list lengths)",
                    limits::MAX_ARMS
                ),
            ));
        }
        let mut out = Vec::with_capacity(axes.len());
        for axis in &axes {
            let key = axis.key();
            let path = |j: usize| format!("sweep.{key}[{j}]");
            let values: Result<Vec<PolicyValue>> = match axis {
                RawAxis::GroupSize(v) => v
                    .iter()
                    .enumerate()
                    .map(|(j, x)| self.group_size(&path(j), *x))
                    .collect(),
                RawAxis::Liability(v) => v.iter().enumerate().map(|(j, x)| self.liability(&path(j), x)).collect(),
                RawAxis::PeerCover(v) => v
                    .iter()
                    .enumerate()
                    .map(|(j, x)| self.peer_cover(&path(j), *x))
                    .collect(),
                RawAxis::ExclusionCycles(v) => v.iter().enumerate().map(|(j, x)| self.exclusion(&path(j), x)).collect(),
                RawAxis::ExclusionScope(v) => v
                    .iter()
                    .enumerate()
                    .map(|(j, x)| self.exclusion_scope(&path(j), x))
                    .collect(),
                RawAxis::Formation(v) => v.iter().enumerate().map(|(j, x)| self.formation(&path(j), x)).collect(),
                RawAxis::Matching(v) => v.iter().enumerate().map(|(j, x)| self.matching(&path(j), x)).collect(),
            };
            let values = values?;
            // Labels identify values exactly (f64 `Display` round-trips), so equal labels mean a repeat.
            let mut seen: HashMap<String, usize> = HashMap::with_capacity(values.len());
            for (j, (v, written)) in values.iter().zip(axis.texts()).enumerate() {
                if let Some(first) = seen.insert(v.label(), j) {
                    return Err(self.invalid(
                        path(j),
                        written,
                        format!("a value not already listed (it repeats {})", path(first)),
                    ));
                }
            }
            out.push((key, values));
        }
        Ok(out)
    }
}

/// The Cartesian product of the sweep lists in the order written, the last list varying fastest;
/// without a sweep (or with an empty `[sweep]` table) the base policy is the single arm.
fn build_arms(base: &Policy, axes: &[(&'static str, Vec<PolicyValue>)]) -> Vec<Arm> {
    if axes.is_empty() {
        return vec![Arm {
            label: "base".into(),
            policy: base.clone(),
        }];
    }
    let total: usize = axes.iter().map(|(_, v)| v.len()).product();
    let mut arms = Vec::with_capacity(total);
    let mut index = vec![0usize; axes.len()];
    loop {
        let mut policy = base.clone();
        let mut parts = Vec::with_capacity(axes.len());
        for ((key, values), &i) in axes.iter().zip(&index) {
            let Some(v) = values.get(i) else { return arms };
            v.apply(&mut policy);
            parts.push(format!("{key}={}", v.label()));
        }
        arms.push(Arm {
            label: parts.join(","),
            policy,
        });
        let mut d = axes.len();
        loop {
            if d == 0 {
                return arms;
            }
            d -= 1;
            index[d] += 1;
            if index[d] < axes[d].1.len() {
                break;
            }
            index[d] = 0;
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    const MINIMAL: &str = "replications = 10\ncycles = 4\n[portfolio]\nborrowers = 20\n[loan]\nprincipal = 100\n";

    fn load(text: &str) -> Result<Scenario> {
        Scenario::from_toml_str(text, "case.toml")
    }

    /// The (field, value, allowed) of an `Invalid` error.
    fn invalid(text: &str) -> (String, String, String) {
        match load(text) {
            Err(ScenarioError::Invalid {
                file,
                field,
                value,
                allowed,
            }) => {
                assert_eq!(file, "case.toml");
                (field, value, allowed)
            }
            Err(other) => panic!("expected an invalid-value error, got {other}"),
            Ok(_) => panic!("expected an error for:\n{text}"),
        }
    }

    fn member_shock(extra: &str) -> String {
        format!("{MINIMAL}[[shock]]\nname = \"illness\"\nscope = \"member\"\nprobability = 0.05\n{extra}\n")
    }

    #[test]
    fn minimal_file_gets_every_default() {
        let s = load(MINIMAL).unwrap();
        assert_eq!((s.seed, s.replications, s.cycles, s.warmup_cycles), (0, 10, 4, 0));
        assert_eq!((s.borrowers, s.villages), (20, 1));
        assert_eq!((s.principal, s.interest_rate, s.recovery_rate), (100.0, 0.0, 0.0));
        assert_eq!(s.income.fixed_value(), Some(1.0));
        assert_eq!(s.risk.fixed_value(), Some(1.0));
        assert!(s.shocks.is_empty());
        assert_eq!((s.dropout, s.replace_departures), (0.0, true));
        assert!(s.swept_fields.is_empty());
        assert_eq!(
            s.arms,
            vec![Arm {
                label: "base".into(),
                policy: Policy::default_policy()
            }]
        );
        assert_eq!(s.name, "");
    }

    #[test]
    fn missing_required_field_is_named_by_its_full_path() {
        for (text, field) in [
            (MINIMAL.replace("replications = 10\n", ""), "replications"),
            (MINIMAL.replace("borrowers = 20\n", ""), "portfolio.borrowers"),
            (MINIMAL.replace("[loan]\nprincipal = 100\n", ""), "loan.principal"),
        ] {
            match load(&text) {
                Err(ScenarioError::Syntax { location, message, .. }) => {
                    assert_eq!(location, format!("field {field}: "));
                    assert!(message.contains("required field is missing"), "{message}");
                }
                other => panic!("expected a missing-field error for {field}, got {other:?}"),
            }
        }
    }

    #[test]
    fn counts_quote_negative_values() {
        let (field, value, allowed) = invalid(&MINIMAL.replace("cycles = 4", "cycles = -3"));
        assert_eq!((field.as_str(), value.as_str()), ("cycles", "-3"));
        assert!(allowed.contains("an integer in [1, "), "{allowed}");
        let (field, value, _) = invalid(&format!("seed = -1\n{MINIMAL}"));
        assert_eq!((field.as_str(), value.as_str()), ("seed", "-1"));
        let s = load(&format!("seed = {}\n{MINIMAL}", i64::MAX)).unwrap();
        assert_eq!(s.seed, i64::MAX as u64);
    }

    #[test]
    fn total_cycles_are_limited() {
        let text = MINIMAL.replace(
            "cycles = 4",
            &format!("cycles = {}\nwarmup_cycles = 2", limits::MAX_TOTAL_CYCLES),
        );
        let (field, _, allowed) = invalid(&text);
        assert_eq!(field, "cycles");
        assert!(allowed.contains("warmup_cycles + cycles <="), "{allowed}");
    }

    #[test]
    fn non_finite_numbers_are_refused() {
        let (field, value, _) = invalid(&MINIMAL.replace("principal = 100", "principal = inf"));
        assert_eq!((field.as_str(), value.as_str()), ("loan.principal", "inf"));
        let (field, value, _) = invalid(&format!("{MINIMAL}interest_rate = nan\n"));
        assert_eq!((field.as_str(), value.as_str()), ("loan.interest_rate", "nan"));
        let (field, value, _) = invalid(&member_shock("village_correlation = nan"));
        assert_eq!(
            (field.as_str(), value.as_str()),
            ("shock[0].village_correlation", "nan")
        );
        let (field, _, _) = invalid(&format!(
            "{MINIMAL}[borrowers]\nincome = {{ kind = \"gamma\", mean = 1, cv = inf }}\n"
        ));
        assert_eq!(field, "borrowers.income.cv");
    }

    #[test]
    fn amount_due_stays_finite() {
        let text = MINIMAL.replace("principal = 100", "principal = 1e308\ninterest_rate = 1e10");
        let (field, value, allowed) = invalid(&text);
        assert_eq!(
            (field.as_str(), value.as_str()),
            ("loan.interest_rate", "10000000000.0")
        );
        assert!(allowed.contains("finite"), "{allowed}");
    }

    #[test]
    fn villages_lie_between_one_and_the_borrowers() {
        let (field, value, allowed) = invalid(&MINIMAL.replace("borrowers = 20", "borrowers = 20\nvillages = 21"));
        assert_eq!((field.as_str(), value.as_str()), ("portfolio.villages", "21"));
        assert!(allowed.contains("[1, 20]"), "{allowed}");
    }

    #[test]
    fn correlations_must_sum_below_one() {
        let (field, value, allowed) = invalid(&member_shock("village_correlation = 0.6\nportfolio_correlation = 0.5"));
        assert_eq!(
            (field.as_str(), value.as_str()),
            ("shock[0].portfolio_correlation", "0.5")
        );
        assert_eq!(
            allowed,
            "village_correlation + portfolio_correlation < 1 (here 0.6 + 0.5)"
        );
        let (field, value, _) = invalid(&member_shock("village_correlation = 1"));
        assert_eq!((field.as_str(), value.as_str()), ("shock[0].village_correlation", "1"));
    }

    #[test]
    fn scope_specific_fields_are_refused_elsewhere() {
        let (field, _, allowed) = invalid(&member_shock("reach = 0.5"));
        assert_eq!(field, "shock[0].reach");
        assert!(allowed.starts_with('1'), "{allowed}");
        let text = format!(
            "{MINIMAL}[[shock]]\nname = \"flood\"\nscope = \"village\"\nprobability = 0.1\nvillage_correlation = 0.2\n"
        );
        let (field, _, allowed) = invalid(&text);
        assert_eq!(field, "shock[0].village_correlation");
        assert!(allowed.contains("member-scope shocks only"), "{allowed}");
        let text = format!(
            "{MINIMAL}[[shock]]\nname = \"flood\"\nscope = \"group\"\nprobability = {{ curve = \"power\", p = 0.5 }}\n"
        );
        let (field, value, allowed) = invalid(&text);
        assert_eq!(
            (field.as_str(), value.as_str()),
            ("shock[0].probability", "{ curve = \"power\", p = 0.5 }")
        );
        assert!(allowed.contains("member-scope shocks only"), "{allowed}");
    }

    #[test]
    fn unit_scope_shock_keeps_its_reach() {
        let text =
            format!("{MINIMAL}[[shock]]\nname = \"flood\"\nscope = \"village\"\nprobability = 0.1\nreach = 0.25\n");
        let s = load(&text).unwrap();
        assert_eq!(s.shocks[0].scope, ShockScope::Village);
        assert_eq!(s.shocks[0].reach, 0.25);
        assert_eq!(s.shocks[0].severity.fixed_value(), Some(1.0));
    }

    #[test]
    fn shock_names_are_unique_and_non_empty() {
        let text = format!(
            "{}[[shock]]\nname = \"illness\"\nscope = \"group\"\nprobability = 0.1\n",
            member_shock("")
        );
        let (field, value, allowed) = invalid(&text);
        assert_eq!((field.as_str(), value.as_str()), ("shock[1].name", "\"illness\""));
        assert!(allowed.contains("shock[0]"), "{allowed}");
        let (field, _, _) = invalid(&member_shock("").replace("\"illness\"", "\" \""));
        assert_eq!(field, "shock[0].name");
    }

    #[test]
    fn stress_windows_are_sorted_and_checked() {
        let text = member_shock(
            "stress = [ { from = 3, to = 4, probability = 0.5 }, { from = 1, to = 2, probability = 0.3 } ]",
        );
        let s = load(&text).unwrap();
        let froms: Vec<u32> = s.shocks[0].stress.iter().map(|w| w.from).collect();
        assert_eq!(froms, [1, 3]);
        assert_eq!(s.shocks[0].probability_in_cycle(2, 5), 0.3);

        let overlap = member_shock(
            "stress = [ { from = 1, to = 3, probability = 0.5 }, { from = 3, to = 4, probability = 0.3 } ]",
        );
        let (field, value, allowed) = invalid(&overlap);
        assert_eq!((field.as_str(), value.as_str()), ("shock[0].stress[1].from", "3"));
        assert!(allowed.contains("must not overlap"), "{allowed}");

        let beyond = member_shock("stress = [ { from = 2, to = 5, probability = 0.5 } ]");
        let (field, value, allowed) = invalid(&beyond);
        assert_eq!((field.as_str(), value.as_str()), ("shock[0].stress[0].to", "5"));
        assert!(allowed.contains("<= 4"), "{allowed}");

        let backwards = member_shock("stress = [ { from = 3, to = 2, probability = 0.5 } ]");
        assert_eq!(invalid(&backwards).0, "shock[0].stress[0].to");
        let zero = member_shock("stress = [ { from = 0, to = 2, probability = 0.5 } ]");
        assert_eq!(invalid(&zero).0, "shock[0].stress[0].from");
        let bad_p = member_shock("stress = [ { from = 1, to = 2, probability = 1.5 } ]");
        assert_eq!(invalid(&bad_p).0, "shock[0].stress[0].probability");
    }

    #[test]
    fn warmup_extends_the_stress_range() {
        let text = member_shock("stress = [ { from = 2, to = 6, probability = 0.5 } ]")
            .replace("cycles = 4", "cycles = 4\nwarmup_cycles = 2");
        assert!(load(&text).is_ok());
    }

    #[test]
    fn severity_is_a_share() {
        let (field, value, _) = invalid(&member_shock("severity = 1.5"));
        assert_eq!((field.as_str(), value.as_str()), ("shock[0].severity", "1.5"));
        let (field, value, allowed) = invalid(&member_shock(
            "severity = { kind = \"lognormal\", mean = 0.5, cv = 0.2 }",
        ));
        assert_eq!(
            (field.as_str(), value.as_str()),
            ("shock[0].severity.kind", "\"lognormal\"")
        );
        assert!(allowed.contains("fixed, uniform, beta"), "{allowed}");
        let (field, _, _) = invalid(&member_shock(
            "severity = { kind = \"uniform\", low = 0.5, high = 1.2 }",
        ));
        assert_eq!(field, "shock[0].severity.high");
        let (field, value, _) = invalid(&member_shock("severity = { kind = \"beta\", mean = 0.5, sd = 0.7 }"));
        assert_eq!((field.as_str(), value.as_str()), ("shock[0].severity.sd", "0.7"));
        let s = load(&member_shock("severity = { kind = \"beta\", mean = 0.4, sd = 0.1 }")).unwrap();
        assert_eq!(s.shocks[0].severity.kind_name(), "beta");
    }

    #[test]
    fn income_refuses_negative_and_unknown_kinds() {
        let (field, value, _) = invalid(&format!("{MINIMAL}[borrowers]\nincome = -0.5\n"));
        assert_eq!((field.as_str(), value.as_str()), ("borrowers.income", "-0.5"));
        let (field, value, _) = invalid(&format!("{MINIMAL}[borrowers]\nrisk = {{ kind = \"pareto\" }}\n"));
        assert_eq!((field.as_str(), value.as_str()), ("borrowers.risk.kind", "\"pareto\""));
        let (field, value, allowed) = invalid(&format!(
            "{MINIMAL}[borrowers]\nrisk = {{ kind = \"uniform\", low = 2, high = 1 }}\n"
        ));
        assert_eq!((field.as_str(), value.as_str()), ("borrowers.risk.high", "1"));
        assert!(allowed.contains(">= low"), "{allowed}");
    }

    #[test]
    fn curves_are_built_and_checked_against_each_arm() {
        let curve = |c: &str| member_shock("").replace("probability = 0.05", &format!("probability = {c}"));
        let s = load(&curve("{ curve = \"power\", p = 1 }")).unwrap();
        assert_eq!(s.shocks[0].probability.at(4), 0.25);

        let text = curve("{ curve = \"power_plus_log\", p = 0.5 }") + "[sweep]\ngroup_size = [1, 2]\n";
        let (field, value, allowed) = invalid(&text);
        assert_eq!((field.as_str(), value.as_str()), ("sweep.group_size[0]", "1"));
        assert_eq!(
            allowed,
            "a group size in the domain of shock[0].probability (power_plus_log curve: group sizes >= 2)"
        );

        let table = curve("{ curve = \"table\", values = { \"2\" = 0.08, \"3\" = 0.06 } }");
        let (field, value, allowed) = invalid(&table);
        assert_eq!(
            (field.as_str(), value.as_str()),
            ("policy.group_size", "5 (the default)")
        );
        assert!(allowed.contains("table curve"), "{allowed}");
        assert!(load(&(table.clone() + "[policy]\ngroup_size = 3\n")).is_ok());

        let (field, value, _) = invalid(&curve("{ curve = \"table\", values = { \"2\" = 1.08 } }"));
        assert_eq!(
            (field.as_str(), value.as_str()),
            ("shock[0].probability.values.2", "1.08")
        );
        let (field, value, _) = invalid(&curve("{ curve = \"table\", values = { \"two\" = 0.1 } }"));
        assert_eq!(
            (field.as_str(), value.as_str()),
            ("shock[0].probability.values", "\"two\"")
        );
        let (field, _, _) = invalid(&curve("{ curve = \"table\", values = { \"2\" = 0.1, \"02\" = 0.2 } }"));
        assert_eq!(field, "shock[0].probability.values");
        let (field, _, _) = invalid(&curve("{ curve = \"table\", values = {} }"));
        assert_eq!(field, "shock[0].probability.values");
        let (field, value, _) = invalid(&curve("{ curve = \"power\", p = 0 }"));
        assert_eq!((field.as_str(), value.as_str()), ("shock[0].probability.p", "0"));
        let (field, value, _) = invalid(&curve("{ curve = \"sigmoid\" }"));
        assert_eq!(
            (field.as_str(), value.as_str()),
            ("shock[0].probability.curve", "\"sigmoid\"")
        );
    }

    #[test]
    fn group_size_cannot_exceed_the_smallest_village() {
        // 20 borrowers in 3 villages: sizes 7, 7, 6.
        let text = MINIMAL.replace("borrowers = 20", "borrowers = 20\nvillages = 3") + "[sweep]\ngroup_size = [6, 7]\n";
        let (field, value, allowed) = invalid(&text);
        assert_eq!((field.as_str(), value.as_str()), ("sweep.group_size[1]", "7"));
        assert!(allowed.contains("a group size <= 6"), "{allowed}");
    }

    #[test]
    fn sweep_builds_the_product_with_the_last_key_fastest() {
        let text = format!(
            "{MINIMAL}[policy]\ngroup_size = 3\nliability = \"individual\"\n[sweep]\nexclusion_cycles = [0, \"permanent\"]\ngroup_size = [2, 4, 5]\n"
        );
        let s = load(&text).unwrap();
        assert_eq!(s.swept_fields, ["exclusion_cycles", "group_size"]);
        let labels: Vec<&str> = s.arms.iter().map(|a| a.label.as_str()).collect();
        assert_eq!(
            labels,
            [
                "exclusion_cycles=0,group_size=2",
                "exclusion_cycles=0,group_size=4",
                "exclusion_cycles=0,group_size=5",
                "exclusion_cycles=permanent,group_size=2",
                "exclusion_cycles=permanent,group_size=4",
                "exclusion_cycles=permanent,group_size=5",
            ]
        );
        assert!(s.arms.iter().all(|a| a.policy.liability == Liability::Individual));
        assert_eq!(s.arms[4].policy.exclusion_cycles, Exclusion::Permanent);
        assert_eq!(s.arms[4].policy.group_size, 4);
    }

    #[test]
    fn peer_cover_labels_use_plain_display() {
        let s = load(&format!("{MINIMAL}[sweep]\npeer_cover = [0, 0.25, 1.0]\n")).unwrap();
        let labels: Vec<&str> = s.arms.iter().map(|a| a.label.as_str()).collect();
        assert_eq!(labels, ["peer_cover=0", "peer_cover=0.25", "peer_cover=1"]);
    }

    #[test]
    fn sweep_lists_are_checked_element_by_element() {
        let (field, value, _) = invalid(&format!("{MINIMAL}[sweep]\npeer_cover = [0.2, 1.5]\n"));
        assert_eq!((field.as_str(), value.as_str()), ("sweep.peer_cover[1]", "1.5"));
        let (field, value, allowed) = invalid(&format!("{MINIMAL}[sweep]\ngroup_size = [2, 3, 2]\n"));
        assert_eq!((field.as_str(), value.as_str()), ("sweep.group_size[2]", "2"));
        assert!(allowed.contains("sweep.group_size[0]"), "{allowed}");
        let (field, value, _) = invalid(&format!("{MINIMAL}[sweep]\nmatching = []\n"));
        assert_eq!((field.as_str(), value.as_str()), ("sweep.matching", "[]"));
        let (field, value, _) = invalid(&format!("{MINIMAL}[sweep]\nformation = [\"reshuffle\", \"stable\"]\n"));
        assert_eq!((field.as_str(), value.as_str()), ("sweep.formation[1]", "\"stable\""));
        let (field, value, _) = invalid(&format!("{MINIMAL}[sweep]\nexclusion_cycles = [1, -2]\n"));
        assert_eq!((field.as_str(), value.as_str()), ("sweep.exclusion_cycles[1]", "-2"));
    }

    #[test]
    fn sweep_size_is_checked_before_arms_are_built() {
        let list = |n: usize| {
            (1..=n)
                .map(|i| (i as f64 / n as f64).to_string())
                .collect::<Vec<_>>()
                .join(", ")
        };
        let text = format!(
            "{MINIMAL}[sweep]\npeer_cover = [{}]\nliability = [\"joint\", \"individual\"]\n",
            list(5001)
        );
        let (field, value, allowed) = invalid(&text);
        assert_eq!(field, "sweep");
        assert!(value.starts_with("10002 arms"), "{value}");
        assert!(allowed.contains("at most 10000 arms"), "{allowed}");
    }

    #[test]
    fn policy_words_are_checked() {
        let (field, value, allowed) = invalid(&format!("{MINIMAL}[policy]\nliability = \"shared\"\n"));
        assert_eq!((field.as_str(), value.as_str()), ("policy.liability", "\"shared\""));
        assert_eq!(allowed, "one of joint, individual");
        let (field, value, _) = invalid(&format!("{MINIMAL}[policy]\nexclusion_cycles = \"forever\"\n"));
        assert_eq!(
            (field.as_str(), value.as_str()),
            ("policy.exclusion_cycles", "\"forever\"")
        );
        let (field, value, _) = invalid(&format!("{MINIMAL}[policy]\ngroup_size = 0\n"));
        assert_eq!((field.as_str(), value.as_str()), ("policy.group_size", "0"));
    }

    #[test]
    fn dropout_must_stay_below_one() {
        let (field, value, allowed) = invalid(&format!("{MINIMAL}[pool]\ndropout = 1.0\n"));
        assert_eq!(
            (field.as_str(), value.as_str(), allowed.as_str()),
            ("pool.dropout", "1.0", "a probability in [0, 1)")
        );
    }

    #[test]
    fn too_many_shocks_are_refused() {
        let mut text = MINIMAL.to_owned();
        for i in 0..=limits::MAX_SHOCKS {
            text.push_str(&format!(
                "[[shock]]\nname = \"s{i}\"\nscope = \"portfolio\"\nprobability = 0.01\n"
            ));
        }
        let (field, _, allowed) = invalid(&text);
        assert_eq!(field, "shock");
        assert!(allowed.contains("at most 255 shocks"), "{allowed}");
    }
}
