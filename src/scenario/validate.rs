//! Turns the file as written into a validated `Scenario`, checking every value exactly once.
//!
//! The engine trusts the model's invariants, so all refusals happen here, before any simulation;
//! each one names the file, the line, the field path, quotes the value as written and says what is
//! allowed. A `[sweep]` value replaces its field in the raw scenario and is validated by the very
//! code that validates the field written in place (the message then names `sweep.PATH[i]`), so each
//! arm is simply the raw scenario with its swept values put in, validated.

use super::bounds::{self, Bound};
use super::raw::{
    DistTable, Int, Num, NumTable, Origin, RawCurve, RawDist, RawExclusion, RawProbability, RawScenario, RawShock, W,
    float_text, line_of, location, one_line,
};
use super::sweep::{self, Axis};
use super::{
    Arm, Behaviour, Exclusion, ExclusionScope, Finance, Liability, Policy, Scenario, ScenarioError, Shock,
    ShockProbability, ShockScope, StressWindow, SweptValue, limits,
};
use crate::curve::{CurveError, GroupSizeCurve};
use crate::dist::{Distribution, DistributionError};
use std::collections::{BTreeMap, HashMap};

type Result<T> = std::result::Result<T, ScenarioError>;

/// A group-size curve given on the command line (as `optimum` takes it), checked by the very code
/// and bounds that check a curve in a scenario file, so both refuse the same values in the same
/// words; a refusal names the flag that gave the value (`command: option --p: ...`). `parameter` is
/// the flag and text of the curve's one number (`--value` for a constant, `--p` for the exponent),
/// `values` the text of a table, such as `2=0.08,3=0.06`.
pub fn curve_from_flags(
    command: &str,
    kind: &str,
    parameter: Option<(&'static str, &str)>,
    values: Option<&str>,
) -> Result<GroupSizeCurve> {
    let checker = Checker {
        file: command,
        text: "",
    };
    let flag_origin = |flag: &'static str, text: &str| Origin::Flag {
        flag,
        text: text.to_owned(),
    };
    let needs = |flag: &str, what: &str| ScenarioError::Syntax {
        file: command.to_owned(),
        location: format!("option {flag}: "),
        message: format!("a {kind} curve needs {what}"),
    };
    let number = |flag: &'static str, text: &str| -> Result<Num> {
        let t = text.trim();
        let integer = t.parse::<i64>().ok();
        match integer.map(|i| i as f64).or_else(|| t.parse::<f64>().ok()) {
            Some(value) => Ok(Num { value, integer }),
            None => Err(checker.invalid(flag, Some(&flag_origin(flag, t)), format!("{t:?}"), "a number")),
        }
    };
    let one = |what: &str| -> Result<(&'static str, Num)> {
        let (flag, text) = parameter.ok_or_else(|| needs(if kind == "constant" { "--value" } else { "--p" }, what))?;
        Ok((flag, number(flag, text)?))
    };
    let (flag, text, raw) = match kind {
        "constant" => {
            let (flag, value) = one("its value")?;
            (flag, value.text(), RawCurve::Constant { value })
        }
        "power" | "power_plus_log" => {
            let (flag, p) = one("its exponent p")?;
            let text = p.text();
            let raw = if kind == "power" {
                RawCurve::Power { p }
            } else {
                RawCurve::PowerPlusLog { p }
            };
            (flag, text, raw)
        }
        "table" => {
            let text = values.ok_or_else(|| needs("--values", "its values, such as 2=0.08,3=0.06"))?;
            let mut entries = Vec::new();
            for entry in text.split(',').map(str::trim).filter(|e| !e.is_empty()) {
                let (key, value) = entry.split_once('=').ok_or_else(|| {
                    checker.invalid(
                        "--values",
                        Some(&flag_origin("--values", text)),
                        format!("{entry:?}"),
                        "size=probability entries joined by commas, such as 2=0.08,3=0.06",
                    )
                })?;
                entries.push((key.trim().to_owned(), number("--values", value)?));
            }
            (
                "--values",
                text.to_owned(),
                RawCurve::Table {
                    values: NumTable(entries),
                },
            )
        }
        other => {
            return Err(checker.invalid(
                "--curve",
                Some(&flag_origin("--curve", other)),
                format!("{other:?}"),
                "one of constant, power, power_plus_log, table",
            ));
        }
    };
    checker.curve("", &flag_origin(flag, &text), &raw)
}

/// Checks `raw` and builds the scenario; `origin` names the file and `text` is the file's text (for
/// line numbers and values quoted as written).
pub fn validate(raw: RawScenario, text: &str, origin: &str) -> Result<Scenario> {
    let ck = Checker { file: origin, text };
    let common = ck.common(&raw)?;
    let finance = ck.finance(&raw, &common)?;
    let axes = sweep::resolve(&ck, &raw)?;

    // Each swept value first on its own (the other axes at their first value), in the order written,
    // so the first message names the first bad value; then every combination.
    let mut index = vec![0usize; axes.len()];
    let first = ck.arm(&raw, &axes, &index, &common)?;
    for (a, axis) in axes.iter().enumerate() {
        for j in 1..axis.values.len() {
            index[a] = j;
            ck.arm(&raw, &axes, &index, &common)?;
        }
        index[a] = 0;
    }
    let mut arms = Vec::new();
    if axes.is_empty() {
        arms.push(first);
    } else {
        loop {
            arms.push(ck.arm(&raw, &axes, &index, &common)?);
            let mut d = axes.len();
            let done = loop {
                if d == 0 {
                    break true;
                }
                d -= 1;
                index[d] += 1;
                if index[d] < axes[d].values.len() {
                    break false;
                }
                index[d] = 0;
            };
            if done {
                break;
            }
        }
    }

    let records = u64::from(common.replications) * u64::from(common.cycles) * arms.len() as u64;
    if records > limits::MAX_CYCLE_RECORDS {
        let w = raw.replications.as_ref().expect("replications was validated");
        return Err(ck.invalid(
            "replications",
            Some(&w.origin),
            ck.written(w, || common.replications.to_string()),
            format!(
                "at most {} per-cycle records in all (replications x cycles x arms); here {} x {} x {} = {records}; \
                 use fewer replications or split the run by seed",
                limits::MAX_CYCLE_RECORDS,
                common.replications,
                common.cycles,
                arms.len()
            ),
        ));
    }

    let warnings = same_model_warnings(&arms);
    let base = arms[0].clone();
    Ok(Scenario {
        name: raw.name.map(|n| n.value).unwrap_or_default(),
        seed: common.seed,
        replications: common.replications,
        cycles: common.cycles,
        warmup_cycles: common.warmup_cycles,
        borrowers: common.borrowers,
        villages: common.villages,
        principal: base.principal,
        interest_rate: base.interest_rate,
        recovery_rate: base.recovery_rate,
        income: base.income,
        risk: base.risk,
        shocks: base.shocks,
        dropout: base.dropout,
        replace_departures: base.replace_departures,
        swept_fields: axes.iter().map(|a| a.path.clone()).collect(),
        arms,
        warnings,
        finance,
    })
}

/// Arms that resolve to the same model as an earlier arm (a swept field that does not matter under
/// the arm's other values, such as `exclusion_scope` without exclusion): one warning each.
fn same_model_warnings(arms: &[Arm]) -> Vec<String> {
    let mut seen: HashMap<String, usize> = HashMap::new();
    let mut warnings = Vec::new();
    for (i, arm) in arms.iter().enumerate() {
        let mut policy = arm.policy.clone();
        let p = &mut policy;
        if p.liability == Liability::Individual {
            // Individual liability: nobody covers a peer and only defaulters are excluded.
            p.peer_cover = 0.0;
            p.exclusion_scope = ExclusionScope::Group;
        }
        if p.exclusion_cycles == Exclusion::Cycles(0) {
            p.exclusion_scope = ExclusionScope::Group;
        }
        let key = serde_json::to_string(&ModelKey {
            policy: &policy,
            principal: arm.principal,
            interest_rate: arm.interest_rate,
            recovery_rate: arm.recovery_rate,
            income: &arm.income,
            risk: &arm.risk,
            shocks: &arm.shocks,
            dropout: arm.dropout,
            replace_departures: arm.replace_departures,
            behaviour: arm.behaviour.as_ref(),
            loan_growth: arm.loan_growth,
            max_multiple: arm.max_multiple,
            income_growth: arm.income_growth,
        })
        .unwrap_or_default();
        match seen.get(&key) {
            Some(&j) => warnings.push(format!(
                "arm {} ({}) resolves to the same model as the earlier arm {} ({}); both are run",
                i + 1,
                arm.label,
                j + 1,
                arms[j].label
            )),
            None => {
                seen.insert(key, i);
            }
        }
    }
    warnings
}

/// Everything an arm runs, for comparing arms (its label and swept values aside).
#[derive(serde::Serialize)]
struct ModelKey<'a> {
    policy: &'a Policy,
    principal: f64,
    interest_rate: f64,
    recovery_rate: f64,
    income: &'a Distribution,
    risk: &'a Distribution,
    shocks: &'a [Shock],
    dropout: f64,
    replace_departures: bool,
    behaviour: Option<&'a Behaviour>,
    loan_growth: f64,
    max_multiple: f64,
    income_growth: f64,
}

/// What every arm shares.
pub(super) struct Common {
    seed: u64,
    replications: u32,
    cycles: u32,
    warmup_cycles: u32,
    total_cycles: u32,
    borrowers: u32,
    villages: u32,
}

/// Carries the file name and text into every error.
pub(super) struct Checker<'a> {
    pub(super) file: &'a str,
    pub(super) text: &'a str,
}

impl Checker<'_> {
    /// The line of a value written in the file (none for a flag or a default).
    pub(super) fn line(&self, origin: Option<&Origin>) -> Option<usize> {
        match origin? {
            Origin::File(span) | Origin::Swept { span, .. } => Some(line_of(self.text, span.start)),
            Origin::Flag { .. } => None,
        }
    }

    /// The value exactly as written (the flag's argument for a flag), or `fallback` without a span.
    pub(super) fn written<T>(&self, w: &W<T>, fallback: impl FnOnce() -> String) -> String {
        match &w.origin {
            Origin::File(span) | Origin::Swept { span, .. } => self
                .text
                .get(span.clone())
                .map(|s| s.trim().to_owned())
                .filter(|s| !s.is_empty())
                .unwrap_or_else(fallback),
            Origin::Flag { text, .. } => text.clone(),
        }
    }

    /// A value outside what is allowed; a swept value is named `sweep.PATH[i]`, a flag by the flag.
    pub(super) fn invalid(
        &self,
        field: impl Into<String>,
        origin: Option<&Origin>,
        value: impl Into<String>,
        allowed: impl Into<String>,
    ) -> ScenarioError {
        let field = match origin {
            Some(Origin::Swept { name, .. }) => name.clone(),
            Some(Origin::Flag { flag, .. }) => (*flag).to_owned(),
            _ => field.into(),
        };
        ScenarioError::Invalid {
            file: self.file.to_owned(),
            line: self.line(origin),
            field,
            value: value.into(),
            allowed: allowed.into(),
        }
    }

    /// A message about a field rather than a value (a wrong type, a key that cannot be swept).
    pub(super) fn syntax(&self, field: &str, line: Option<usize>, message: impl Into<String>) -> ScenarioError {
        ScenarioError::Syntax {
            file: self.file.to_owned(),
            location: location(line, field),
            message: one_line(&message.into()),
        }
    }

    /// A required field that is missing: named by its full path, at the line of the table that
    /// lacks it when that table is written (`[loan]`, or the shock's own `[[shock]]`).
    fn missing(&self, field: &str, expected: &str) -> ScenarioError {
        let header = match field.strip_prefix("shock[") {
            Some(rest) => {
                let i: usize = rest.split(']').next().and_then(|n| n.parse().ok()).unwrap_or(0);
                self.text
                    .lines()
                    .enumerate()
                    .filter(|(_, l)| l.trim_start().starts_with("[[shock]]"))
                    .nth(i)
            }
            None => field.split_once('.').and_then(|(table, _)| {
                let header = format!("[{table}]");
                self.text
                    .lines()
                    .enumerate()
                    .find(|(_, l)| l.trim_start().starts_with(&header))
            }),
        };
        let (line, lacks) = match header {
            Some((n, l)) => (Some(n + 1), format!(" from {}", l.trim())),
            None => (None, String::new()),
        };
        self.syntax(
            field,
            line,
            format!("this required field is missing{lacks} ({expected})"),
        )
    }

    /// An integer field checked against its line of the bounds table (with `max` tightened when the
    /// bound depends on other fields).
    fn count(&self, field: &str, path: &str, w: &W<Int>, max: Option<(u32, String)>) -> Result<u32> {
        let Bound::Count(min, table_max) = bounds::bound(path) else {
            unreachable!("{path} is a count in the bounds table")
        };
        let (max, allowed) = match max {
            Some((m, allowed)) => (m.min(table_max), allowed),
            None => (table_max, Bound::Count(min, table_max).text()),
        };
        match u32::try_from(w.value.0) {
            Ok(n) if (min..=max).contains(&n) => Ok(n),
            _ => Err(self.invalid(
                field,
                Some(&w.origin),
                self.written(w, || w.value.0.to_string()),
                allowed,
            )),
        }
    }

    fn required<'w, T>(&self, field: &str, w: Option<&'w W<T>>, path: &str) -> Result<&'w W<T>> {
        w.ok_or_else(|| self.missing(field, &bounds::bound(path).text()))
    }

    /// A real number within its bound from the bounds table; `-0.0` becomes `0.0`.
    fn real(&self, field: &str, path: &str, w: &W<Num>) -> Result<f64> {
        let bound = bounds::bound(path);
        if bound.admits(w.value.value) {
            Ok(w.value.value + 0.0)
        } else {
            Err(self.invalid(field, Some(&w.origin), self.written(w, || w.value.text()), bound.text()))
        }
    }

    fn real_or(&self, field: &str, path: &str, w: Option<&W<Num>>, default: f64) -> Result<f64> {
        w.map_or(Ok(default), |w| self.real(field, path, w))
    }

    fn common(&self, raw: &RawScenario) -> Result<Common> {
        let seed = match &raw.seed {
            None => 0,
            Some(w) => u64::try_from(w.value.0).map_err(|_| {
                self.invalid(
                    "seed",
                    Some(&w.origin),
                    self.written(w, || w.value.0.to_string()),
                    bounds::bound("seed").text(),
                )
            })?,
        };
        let replications = self.required("replications", raw.replications.as_ref(), "replications")?;
        let replications = self.count("replications", "replications", replications, None)?;
        let cycles_w = self.required("cycles", raw.cycles.as_ref(), "cycles")?;
        let cycles = self.count("cycles", "cycles", cycles_w, None)?;
        let warmup_cycles = match &raw.warmup_cycles {
            None => 0,
            Some(w) => self.count("warmup_cycles", "warmup_cycles", w, None)?,
        };
        let total_cycles = match warmup_cycles.checked_add(cycles) {
            Some(t) if t <= limits::MAX_TOTAL_CYCLES => t,
            _ => {
                // Between two fields: the later one is named.
                let w = match &raw.warmup_cycles {
                    Some(w) if w.origin.position() > cycles_w.origin.position() => w,
                    _ => cycles_w,
                };
                let field = if std::ptr::eq(w, cycles_w) {
                    "cycles"
                } else {
                    "warmup_cycles"
                };
                return Err(self.invalid(
                    field,
                    Some(&w.origin),
                    self.written(w, || w.value.0.to_string()),
                    format!(
                        "warmup_cycles + cycles <= {} (here {warmup_cycles} + {cycles})",
                        limits::MAX_TOTAL_CYCLES
                    ),
                ));
            }
        };
        let borrowers = self.required(
            "portfolio.borrowers",
            raw.portfolio.borrowers.as_ref(),
            "portfolio.borrowers",
        )?;
        let borrowers = self.count("portfolio.borrowers", "portfolio.borrowers", borrowers, None)?;
        let villages = match &raw.portfolio.villages {
            None => 1,
            Some(w) => self.count(
                "portfolio.villages",
                "portfolio.villages",
                w,
                Some((
                    borrowers,
                    format!("an integer in [1, {borrowers}] (at most one village per borrower)"),
                )),
            )?,
        };
        Ok(Common {
            seed,
            replications,
            cycles,
            warmup_cycles,
            total_cycles,
            borrowers,
            villages,
        })
    }

    /// The `[finance]` table: every field against its line of the bounds table, and the counted
    /// cycles a whole number of years (a partial year would have no annual loss of its own).
    fn finance(&self, raw: &RawScenario, common: &Common) -> Result<Finance> {
        let f = &raw.finance;
        let mut finance = Finance::default();
        if let Some(w) = &f.cycles_per_year {
            let n = self.count("finance.cycles_per_year", "finance.cycles_per_year", w, None)?;
            if !common.cycles.is_multiple_of(n) {
                return Err(self.invalid(
                    "finance.cycles_per_year",
                    Some(&w.origin),
                    self.written(w, || n.to_string()),
                    format!(
                        "a divisor of the counted cycles (cycles = {}), so that they make whole years; \
                         for example cycles = {} with {n} cycles a year",
                        common.cycles,
                        (common.cycles / n).max(1) * n
                    ),
                ));
            }
            finance.cycles_per_year = n;
        }
        if let Some(w) = &f.currency {
            let label = w.value.trim();
            if label.is_empty() || label.chars().count() > 24 || label.chars().any(char::is_control) {
                return Err(self.invalid(
                    "finance.currency",
                    Some(&w.origin),
                    format!("{:?}", w.value),
                    bounds::bound("finance.currency").text(),
                ));
            }
            finance.currency = label.to_owned();
        }
        finance.operating_cost = self.real_or(
            "finance.operating_cost",
            "finance.operating_cost",
            f.operating_cost.as_ref(),
            0.0,
        )?;
        finance.cost_of_funds = self.real_or(
            "finance.cost_of_funds",
            "finance.cost_of_funds",
            f.cost_of_funds.as_ref(),
            0.0,
        )?;
        finance.fee_rate = self.real_or("finance.fee_rate", "finance.fee_rate", f.fee_rate.as_ref(), 0.0)?;
        Ok(finance)
    }

    /// The arm whose swept values are `axes[a].values[index[a]]`: the raw scenario with those values
    /// put in place, validated.
    fn arm(&self, raw: &RawScenario, axes: &[Axis], index: &[usize], common: &Common) -> Result<Arm> {
        let mut swept = Vec::with_capacity(axes.len());
        let model = if axes.is_empty() {
            self.model(raw, common)?
        } else {
            let mut raw = raw.clone();
            for (axis, &i) in axes.iter().zip(index) {
                axis.put(self, &mut raw, i)?;
                swept.push(SweptValue {
                    path: axis.path.clone(),
                    value: axis.labels[i].clone(),
                    written: axis.written[i].clone(),
                });
            }
            self.model(&raw, common)?
        };
        let label = if swept.is_empty() {
            "base".to_owned()
        } else {
            swept
                .iter()
                .map(|s| format!("{}={}", s.path, s.value))
                .collect::<Vec<_>>()
                .join(",")
        };
        Ok(Arm { label, swept, ..model })
    }

    /// Everything one arm runs; `label` and `swept` are left empty for `arm` to fill in.
    fn model(&self, raw: &RawScenario, common: &Common) -> Result<Arm> {
        let loan = &raw.loan;
        let principal = self.required("loan.principal", loan.principal.as_ref(), "loan.principal")?;
        let principal_value = self.real("loan.principal", "loan.principal", principal)?;
        let interest_rate = self.real_or(
            "loan.interest_rate",
            "loan.interest_rate",
            loan.interest_rate.as_ref(),
            0.0,
        )?;
        // The bounds of principal and rate keep the amount due, and every sum of it, finite.
        let recovery_rate = self.real_or(
            "loan.recovery_rate",
            "loan.recovery_rate",
            loan.recovery_rate.as_ref(),
            0.0,
        )?;

        let income = self.distribution("borrowers.income", raw.borrowers.income.as_ref(), false)?;
        self.income_within_bound(raw.borrowers.income.as_ref())?;
        let risk = self.distribution("borrowers.risk", raw.borrowers.risk.as_ref(), false)?;

        if raw.shock.len() > limits::MAX_SHOCKS {
            // Named at the first shock past the limit.
            let extra = raw.shock[limits::MAX_SHOCKS].name.as_ref().map(|n| &n.origin);
            return Err(self.invalid(
                "shock",
                extra,
                format!("{} [[shock]] tables", raw.shock.len()),
                format!("at most {} shocks", limits::MAX_SHOCKS),
            ));
        }
        let mut shocks: Vec<Shock> = Vec::with_capacity(raw.shock.len());
        for (i, s) in raw.shock.iter().enumerate() {
            let shock = self.shock(i, s, common.total_cycles)?;
            if let Some(j) = shocks.iter().position(|t| t.name == shock.name) {
                let w = s.name.as_ref().expect("named above");
                return Err(self.invalid(
                    format!("shock[{i}].name"),
                    Some(&w.origin),
                    self.written(w, || format!("{:?}", shock.name)),
                    format!(
                        "a name no other shock uses (shock[{j}] is already called {:?})",
                        shock.name
                    ),
                ));
            }
            shocks.push(shock);
        }

        let p = &raw.policy;
        let mut policy = Policy::default_policy();
        if let Some(w) = &p.group_size {
            policy.group_size = self.count("policy.group_size", "policy.group_size", w, None)?;
        }
        if let Some(w) = &p.liability {
            policy.liability = w.value;
        }
        if let Some(w) = &p.peer_cover {
            policy.peer_cover = self.real("policy.peer_cover", "policy.peer_cover", w)?;
        }
        if let Some(w) = &p.exclusion_cycles {
            policy.exclusion_cycles = self.exclusion(w, common.total_cycles)?;
        }
        if let Some(w) = &p.exclusion_scope {
            policy.exclusion_scope = w.value;
        }
        if let Some(w) = &p.formation {
            policy.formation = w.value;
        }
        if let Some(w) = &p.matching {
            policy.matching = w.value;
        }
        if let Some(w) = &p.size_slack {
            policy.size_slack = self.count("policy.size_slack", "policy.size_slack", w, None)?;
        }
        if let Some(w) = &p.min_group_size {
            policy.min_group_size = Some(self.count("policy.min_group_size", "policy.min_group_size", w, None)?);
        }
        if let Some(w) = &p.max_group_size {
            policy.max_group_size = Some(self.count("policy.max_group_size", "policy.max_group_size", w, None)?);
        }

        let (loan_growth, max_multiple, income_growth) = self.growth(raw, common)?;
        let behaviour = self.behaviour(raw)?;

        let dropout = self.real_or("pool.dropout", "pool.dropout", raw.pool.dropout.as_ref(), 0.0)?;
        let replace_departures = raw.pool.replace_departures.as_ref().is_none_or(|w| w.value);

        self.group_size_fits(raw, common, policy.group_size, &shocks)?;
        self.size_range_fits(raw, common, &policy, &shocks)?;

        Ok(Arm {
            label: String::new(),
            swept: Vec::new(),
            policy,
            principal: principal_value,
            interest_rate,
            recovery_rate,
            income,
            risk,
            shocks,
            dropout,
            replace_departures,
            behaviour,
            loan_growth,
            max_multiple,
            income_growth,
        })
    }

    /// `[loan] growth` and `max_multiple`, and `[borrowers] income_growth`, whose growth over the
    /// whole run must keep capacities finite.
    fn growth(&self, raw: &RawScenario, common: &Common) -> Result<(f64, f64, f64)> {
        let loan = &raw.loan;
        let growth = self.real_or("loan.growth", "loan.growth", loan.growth.as_ref(), 0.0)?;
        let max_multiple = self.real_or(
            "loan.max_multiple",
            "loan.max_multiple",
            loan.max_multiple.as_ref(),
            1.0,
        )?;
        let w = raw.borrowers.income_growth.as_ref();
        let income_growth = self.real_or("borrowers.income_growth", "borrowers.income_growth", w, 0.0)?;
        let factor = (1.0 + income_growth).powf(f64::from(common.total_cycles));
        if let Some(w) = w.filter(|_| factor > bounds::MAX_INCOME_GROWTH_FACTOR) {
            return Err(self.invalid(
                "borrowers.income_growth",
                Some(&w.origin),
                self.written(w, || w.value.text()),
                format!(
                    "a number with (1 + income_growth)^{} <= {:e} over the run's {} cycles, warm-up included \
                     (it keeps every capacity finite)",
                    common.total_cycles,
                    bounds::MAX_INCOME_GROWTH_FACTOR,
                    common.total_cycles
                ),
            ));
        }
        Ok((growth, max_multiple, income_growth))
    }

    /// The `[behaviour]` table, when written: `loan_value`, `discount` and `temptation` are
    /// required, `social_sanction` defaults to 0.
    fn behaviour(&self, raw: &RawScenario) -> Result<Option<Behaviour>> {
        let Some(b) = &raw.behaviour else {
            return Ok(None);
        };
        let w = self.required("behaviour.loan_value", b.loan_value.as_ref(), "behaviour.loan_value")?;
        let loan_value = self.real("behaviour.loan_value", "behaviour.loan_value", w)?;
        let w = self.required("behaviour.discount", b.discount.as_ref(), "behaviour.discount")?;
        let discount = self.real("behaviour.discount", "behaviour.discount", w)?;
        let temptation_w = self.required("behaviour.temptation", b.temptation.as_ref(), "behaviour.temptation")?;
        let temptation = self.distribution("behaviour.temptation", Some(temptation_w), false)?;
        let cap = Bound::NonNegativeAtMost(bounds::MAX_BEHAVIOUR_UNITS);
        if !cap.admits(temptation.mean()) {
            return Err(self.invalid(
                "behaviour.temptation",
                Some(&temptation_w.origin),
                self.written(temptation_w, || temptation.mean().to_string()),
                format!("a temptation whose mean is {}", cap.text()),
            ));
        }
        let social_sanction = self.real_or(
            "behaviour.social_sanction",
            "behaviour.social_sanction",
            b.social_sanction.as_ref(),
            0.0,
        )?;
        Ok(Some(Behaviour::new(loan_value, discount, temptation, social_sanction)))
    }

    /// `exclusion_cycles`: a count no longer than the run (longer cannot change anything and would
    /// overflow the engine's cycle arithmetic), or "permanent".
    fn exclusion(&self, w: &W<RawExclusion>, total_cycles: u32) -> Result<Exclusion> {
        let text = self.written(w, || match &w.value {
            RawExclusion::Cycles(n) => n.to_string(),
            RawExclusion::Word(s) => format!("{s:?}"),
        });
        let refuse = || {
            self.invalid(
                "policy.exclusion_cycles",
                Some(&w.origin),
                text.clone(),
                format!(
                    "an integer in [0, {total_cycles}], or \"permanent\" (an exclusion cannot usefully exceed the run's \
                     {total_cycles} cycles, warm-up included; \"permanent\" excludes for good)"
                ),
            )
        };
        match &w.value {
            RawExclusion::Cycles(n) => u32::try_from(*n)
                .ok()
                .filter(|n| *n <= total_cycles)
                .map(Exclusion::Cycles)
                .ok_or_else(refuse),
            RawExclusion::Word(word) if word == "permanent" => Ok(Exclusion::Permanent),
            RawExclusion::Word(_) => Err(refuse()),
        }
    }

    /// The arm's group size fits the smallest village and every curve's domain, where the curve stays
    /// a probability.
    fn group_size_fits(&self, raw: &RawScenario, common: &Common, k: u32, shocks: &[Shock]) -> Result<()> {
        let written = raw.policy.group_size.as_ref();
        let origin = written.map(|w| &w.origin);
        let text = || match written {
            Some(w) => self.written(w, || k.to_string()),
            None => format!("{k} (the default)"),
        };
        let smallest_village = common.borrowers / common.villages;
        if k > smallest_village {
            return Err(self.invalid(
                "policy.group_size",
                origin,
                text(),
                format!(
                    "a group size <= {smallest_village}, the smallest village's size ({} borrowers in {} villages)",
                    common.borrowers, common.villages
                ),
            ));
        }
        for (i, shock) in shocks.iter().enumerate() {
            let ShockProbability::Curve(curve) = &shock.probability else {
                continue;
            };
            match curve.at(k) {
                None => {
                    return Err(self.invalid(
                        "policy.group_size",
                        origin,
                        text(),
                        format!(
                            "a group size in the domain of shock[{i}].probability ({} curve: {})",
                            curve.kind_name(),
                            curve.domain_text()
                        ),
                    ));
                }
                Some(q) if !(0.0..=1.0).contains(&q) => {
                    let w = raw.shock[i].probability.as_ref().expect("a curve was written");
                    return Err(self.invalid(
                        format!("shock[{i}].probability"),
                        Some(&w.origin),
                        format!(
                            "a {} curve worth {} at group size {k}",
                            curve.kind_name(),
                            float_text(q)
                        ),
                        "a probability in [0, 1] at every arm's group size",
                    ));
                }
                Some(_) => {}
            }
        }
        Ok(())
    }

    /// The arm's range of group sizes: min <= k <= max <= the smallest village, and every member-scope
    /// curve defined and a probability at every size in the range (the engine reads it at each
    /// group's own size). The field blamed is the one written that sets the offending bound.
    fn size_range_fits(&self, raw: &RawScenario, common: &Common, policy: &Policy, shocks: &[Shock]) -> Result<()> {
        let p = &raw.policy;
        let k = policy.group_size;
        let (min, max) = (policy.min_group_size(), policy.max_group_size());
        let smallest_village = common.borrowers / common.villages;
        // The written field that sets a bound: the bound itself, else the slack, else the group size.
        let blame = |lower: bool, own_path: &'static str, value: u32| {
            let own = if lower {
                p.min_group_size.as_ref()
            } else {
                p.max_group_size.as_ref()
            };
            if let Some(w) = own {
                (own_path, Some(&w.origin), self.written(w, || value.to_string()))
            } else if let Some(w) = p.size_slack.as_ref() {
                (
                    "policy.size_slack",
                    Some(&w.origin),
                    format!(
                        "{} (giving {own_path} = {value})",
                        self.written(w, || policy.size_slack.to_string())
                    ),
                )
            } else {
                let origin = p.group_size.as_ref().map(|w| &w.origin);
                (
                    "policy.group_size",
                    origin,
                    format!("{k} (giving {own_path} = {value})"),
                )
            }
        };
        if min > k {
            let (field, origin, text) = blame(true, "policy.min_group_size", min);
            return Err(self.invalid(
                field,
                origin,
                text,
                format!("a smallest group size in [1, {k}] (at most policy.group_size = {k})"),
            ));
        }
        if max < k {
            let (field, origin, text) = blame(false, "policy.max_group_size", max);
            return Err(self.invalid(
                field,
                origin,
                text,
                format!("a largest group size >= {k} (at least policy.group_size = {k})"),
            ));
        }
        if max > smallest_village {
            let (field, origin, text) = blame(false, "policy.max_group_size", max);
            return Err(self.invalid(
                field,
                origin,
                text,
                format!(
                    "a largest group size <= {smallest_village}, the smallest village's size ({} borrowers in {} villages)",
                    common.borrowers, common.villages
                ),
            ));
        }
        for (i, shock) in shocks.iter().enumerate() {
            let ShockProbability::Curve(curve) = &shock.probability else {
                continue;
            };
            for size in min..=max {
                let (field, origin, text) = if size < k {
                    blame(true, "policy.min_group_size", min)
                } else {
                    blame(false, "policy.max_group_size", max)
                };
                match curve.at(size) {
                    None => {
                        return Err(self.invalid(
                            field,
                            origin,
                            text,
                            format!(
                                "group sizes in the domain of shock[{i}].probability ({} curve: {}); size {size} is not",
                                curve.kind_name(),
                                curve.domain_text()
                            ),
                        ));
                    }
                    Some(q) if !(0.0..=1.0).contains(&q) => {
                        let w = raw.shock[i].probability.as_ref().expect("a curve was written");
                        return Err(self.invalid(
                            format!("shock[{i}].probability"),
                            Some(&w.origin),
                            format!(
                                "a {} curve worth {} at group size {size}",
                                curve.kind_name(),
                                float_text(q)
                            ),
                            "a probability in [0, 1] at every group size an arm may form",
                        ));
                    }
                    Some(_) => {}
                }
            }
        }
        Ok(())
    }

    fn shock(&self, i: usize, raw: &RawShock, total_cycles: u32) -> Result<Shock> {
        let at = |field: &str| format!("shock[{i}].{field}");
        let name_w = raw
            .name
            .as_ref()
            .ok_or_else(|| self.missing(&at("name"), "a non-empty name"))?;
        let name = name_w.value.clone();
        if name.trim().is_empty() {
            return Err(self.invalid(
                at("name"),
                Some(&name_w.origin),
                self.written(name_w, || format!("{name:?}")),
                "a non-empty name",
            ));
        }
        let scope = raw
            .scope
            .as_ref()
            .ok_or_else(|| self.missing(&at("scope"), "one of member, group, village, portfolio"))?
            .value;
        let scope_word = match scope {
            ShockScope::Member => "member",
            ShockScope::Group => "group",
            ShockScope::Village => "village",
            ShockScope::Portfolio => "portfolio",
        };
        let member = scope == ShockScope::Member;

        let probability = match &raw.probability {
            None => return Err(self.missing(&at("probability"), "a probability in [0, 1], or a group-size curve")),
            Some(w) => match &w.value {
                RawProbability::Number(p) => {
                    let num = W {
                        value: *p,
                        origin: w.origin.clone(),
                    };
                    ShockProbability::Fixed(self.real(&at("probability"), "shock.*.probability", &num)?)
                }
                RawProbability::Curve(_) if !member => {
                    return Err(self.invalid(
                        at("probability"),
                        Some(&w.origin),
                        self.written(w, String::new),
                        format!(
                            "a probability in [0, 1]; group-size curves apply to member-scope shocks only, not {scope_word} scope"
                        ),
                    ));
                }
                RawProbability::Curve(c) => ShockProbability::Curve(self.curve(&at("probability"), &w.origin, c)?),
            },
        };

        let (mut village_correlation, mut portfolio_correlation, mut reach) = (0.0, 0.0, 1.0);
        if member {
            let (v, p) = (raw.village_correlation.as_ref(), raw.portfolio_correlation.as_ref());
            village_correlation = self.real_or(&at("village_correlation"), "shock.*.village_correlation", v, 0.0)?;
            portfolio_correlation =
                self.real_or(&at("portfolio_correlation"), "shock.*.portfolio_correlation", p, 0.0)?;
            if village_correlation + portfolio_correlation >= 1.0 {
                // Between two fields: the later one is named.
                let (field, w) = match (v, p) {
                    (Some(v), Some(p)) if v.origin.position() > p.origin.position() => ("village_correlation", v),
                    (_, Some(p)) => ("portfolio_correlation", p),
                    (Some(v), None) => ("village_correlation", v),
                    (None, None) => unreachable!("two zero defaults sum below 1"),
                };
                let text =
                    |x: Option<&W<Num>>| x.map_or_else(|| "0".to_owned(), |x| self.written(x, || x.value.text()));
                return Err(self.invalid(
                    at(field),
                    Some(&w.origin),
                    self.written(w, || w.value.text()),
                    format!(
                        "village_correlation + portfolio_correlation < 1 (here {} + {})",
                        text(v),
                        text(p)
                    ),
                ));
            }
            if let Some(r) = raw.reach.as_ref().filter(|r| r.value.value != 1.0) {
                return Err(self.invalid(
                    at("reach"),
                    Some(&r.origin),
                    self.written(r, || r.value.text()),
                    "1 (reach applies to group, village and portfolio shocks; a member shock strikes each member on its own)",
                ));
            }
        } else {
            for (field, v) in [
                ("village_correlation", &raw.village_correlation),
                ("portfolio_correlation", &raw.portfolio_correlation),
            ] {
                if let Some(c) = v.as_ref().filter(|c| c.value.value != 0.0) {
                    return Err(self.invalid(
                        at(field),
                        Some(&c.origin),
                        self.written(c, || c.value.text()),
                        format!("0 (correlations apply to member-scope shocks only, not {scope_word} scope)"),
                    ));
                }
            }
            reach = self.real_or(&at("reach"), "shock.*.reach", raw.reach.as_ref(), 1.0)?;
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
        let mut windows: Vec<(usize, StressWindow, &W<Int>)> = Vec::with_capacity(raw.stress.len());
        for (j, w) in raw.stress.iter().enumerate() {
            let at = |field: &str| format!("shock[{i}].stress[{j}].{field}");
            let bounds = format!("a cycle in [1, {total_cycles}] (cycles are counted from 1, warm-up included)");
            let from_w = w.from.as_ref().ok_or_else(|| self.missing(&at("from"), &bounds))?;
            let from = u32::try_from(from_w.value.0)
                .ok()
                .filter(|f| (1..=total_cycles).contains(f))
                .ok_or_else(|| {
                    self.invalid(
                        at("from"),
                        Some(&from_w.origin),
                        self.written(from_w, || from_w.value.0.to_string()),
                        bounds.as_str(),
                    )
                })?;
            let to_w = w.to.as_ref().ok_or_else(|| self.missing(&at("to"), &bounds))?;
            let to_text = self.written(to_w, || to_w.value.0.to_string());
            let to = match u32::try_from(to_w.value.0) {
                Ok(t) if t >= from && t <= total_cycles => t,
                Ok(t) if t >= from => {
                    return Err(self.invalid(
                        at("to"),
                        Some(&to_w.origin),
                        to_text,
                        format!("a cycle <= {total_cycles}, the last simulated cycle (warmup_cycles + cycles)"),
                    ));
                }
                _ => {
                    return Err(self.invalid(
                        at("to"),
                        Some(&to_w.origin),
                        to_text,
                        format!("a cycle in [{from}, {total_cycles}] (from <= to <= warmup_cycles + cycles)"),
                    ));
                }
            };
            let p = w
                .probability
                .as_ref()
                .ok_or_else(|| self.missing(&at("probability"), &Bound::Probability.text()))?;
            let probability = self.real(&at("probability"), "shock.*.stress.*.probability", p)?;
            windows.push((j, StressWindow { from, to, probability }, from_w));
        }
        windows.sort_by_key(|(_, w, _)| w.from);
        for pair in windows.windows(2) {
            let ((a, earlier, _), (b, later, later_w)) = (&pair[0], &pair[1]);
            if later.from <= earlier.to {
                return Err(self.invalid(
                    format!("shock[{i}].stress[{b}].from"),
                    Some(&later_w.origin),
                    self.written(later_w, || later.from.to_string()),
                    format!(
                        "a cycle outside shock[{i}].stress[{a}], which covers cycles {} to {} (stress windows must not overlap)",
                        earlier.from, earlier.to
                    ),
                ));
            }
        }
        Ok(windows.into_iter().map(|(_, w, _)| w).collect())
    }

    fn curve(&self, field: &str, origin: &Origin, raw: &RawCurve) -> Result<GroupSizeCurve> {
        let o = Some(origin);
        let real = |param: &str, v: &Num, bound: Bound| -> Result<f64> {
            if bound.admits(v.value) {
                Ok(v.value + 0.0)
            } else {
                Err(self.invalid(format!("{field}.{param}"), o, v.text(), bound.text()))
            }
        };
        let built = match raw {
            RawCurve::Constant { value } => GroupSizeCurve::constant(real("value", value, Bound::Probability)?),
            RawCurve::Power { p } => GroupSizeCurve::power(real("p", p, Bound::Positive)?),
            RawCurve::PowerPlusLog { p } => GroupSizeCurve::power_plus_log(real("p", p, Bound::Positive)?),
            RawCurve::Table { values } => {
                if values.0.is_empty() {
                    return Err(self.invalid(format!("{field}.values"), o, "{}", "at least one group size"));
                }
                let mut table = BTreeMap::new();
                let mut written: HashMap<u32, &str> = HashMap::new();
                for (key, q) in &values.0 {
                    let k = key
                        .parse::<u32>()
                        .ok()
                        .filter(|&k| k >= 1 && key.bytes().all(|b| b.is_ascii_digit()))
                        .ok_or_else(|| {
                            self.invalid(
                                format!("{field}.values"),
                                o,
                                format!("{key:?}"),
                                "keys that are whole group sizes >= 1, such as \"2\"",
                            )
                        })?;
                    if let Some(first) = written.insert(k, key) {
                        return Err(self.invalid(
                            format!("{field}.values"),
                            o,
                            format!("{key:?}"),
                            format!("distinct group sizes ({key:?} repeats {first:?})"),
                        ));
                    }
                    table.insert(k, real(&format!("values.{key}"), q, Bound::Probability)?);
                }
                GroupSizeCurve::table(table)
            }
        };
        built.map_err(|CurveError::BadParameter { name, value, allowed }| {
            self.invalid(format!("{field}.{name}"), o, value, allowed)
        })
    }

    /// An income ratio's fixed value, uniform high end or mean within `bounds::MAX_INCOME`, so that
    /// capacities and surpluses stay finite.
    fn income_within_bound(&self, raw: Option<&W<RawDist>>) -> Result<()> {
        const FIELD: &str = "borrowers.income";
        let Some(w) = raw else { return Ok(()) };
        let bound = bounds::bound(FIELD);
        let (path, v) = match &w.value {
            RawDist::Number(v) => (FIELD.to_owned(), v),
            RawDist::Table(DistTable::Fixed { value }) => (format!("{FIELD}.value"), value),
            RawDist::Table(DistTable::Uniform { high, .. }) => (format!("{FIELD}.high"), high),
            RawDist::Table(DistTable::Lognormal { mean, .. } | DistTable::Gamma { mean, .. }) => {
                (format!("{FIELD}.mean"), mean)
            }
            RawDist::Table(DistTable::Beta { .. }) => return Ok(()),
        };
        if bound.admits(v.value) {
            return Ok(());
        }
        let written = match &w.value {
            RawDist::Number(_) => self.written(w, || v.text()),
            RawDist::Table(_) => v.text(),
        };
        Err(self.invalid(path, Some(&w.origin), written, bound.text()))
    }

    /// A distribution; `severity` restricts it to kinds and values inside [0, 1].
    fn distribution(&self, field: &str, raw: Option<&W<RawDist>>, severity: bool) -> Result<Distribution> {
        let Some(w) = raw else {
            return Distribution::fixed(1.0).map_err(|e| self.invalid(field, None, e.value, e.allowed));
        };
        let o = Some(&w.origin);
        let at = |param: &str| format!("{field}.{param}");
        if severity {
            let unit = "a share in [0, 1] (a severity is the share of income lost)";
            let share = |path: String, v: &Num, text: String| -> Result<()> {
                if Bound::Share.admits(v.value) {
                    Ok(())
                } else {
                    Err(self.invalid(path, o, text, unit))
                }
            };
            match &w.value {
                RawDist::Number(v) => share(field.to_owned(), v, self.written(w, || v.text()))?,
                RawDist::Table(DistTable::Fixed { value }) => share(at("value"), value, value.text())?,
                RawDist::Table(DistTable::Uniform { low, high }) => {
                    share(at("low"), low, low.text())?;
                    share(at("high"), high, high.text())?;
                }
                RawDist::Table(DistTable::Beta { .. }) => {}
                RawDist::Table(t @ (DistTable::Lognormal { .. } | DistTable::Gamma { .. })) => {
                    let kind = if matches!(t, DistTable::Lognormal { .. }) {
                        "lognormal"
                    } else {
                        "gamma"
                    };
                    return Err(self.invalid(
                        at("kind"),
                        o,
                        format!("{kind:?}"),
                        "one of fixed, uniform, beta (a severity lies in [0, 1])",
                    ));
                }
            }
        }
        let map = |params: &[(&str, Num)], e: DistributionError| {
            let written = params.iter().find(|(n, _)| *n == e.parameter).map(|(_, v)| v.text());
            match &w.value {
                RawDist::Number(v) => self.invalid(field, o, self.written(w, || v.text()), e.allowed),
                RawDist::Table(_) => self.invalid(at(e.parameter), o, written.unwrap_or(e.value), e.allowed),
            }
        };
        match &w.value {
            RawDist::Number(v) => Distribution::fixed(v.value).map_err(|e| map(&[("value", *v)], e)),
            RawDist::Table(DistTable::Fixed { value }) => {
                Distribution::fixed(value.value).map_err(|e| map(&[("value", *value)], e))
            }
            RawDist::Table(DistTable::Uniform { low, high }) => {
                Distribution::uniform(low.value, high.value).map_err(|e| map(&[("low", *low), ("high", *high)], e))
            }
            RawDist::Table(DistTable::Lognormal { mean, cv }) => {
                Distribution::lognormal(mean.value, cv.value).map_err(|e| map(&[("mean", *mean), ("cv", *cv)], e))
            }
            RawDist::Table(DistTable::Beta { mean, sd }) => {
                Distribution::beta(mean.value, sd.value).map_err(|e| map(&[("mean", *mean), ("sd", *sd)], e))
            }
            RawDist::Table(DistTable::Gamma { mean, cv }) => {
                Distribution::gamma(mean.value, cv.value).map_err(|e| map(&[("mean", *mean), ("cv", *cv)], e))
            }
        }
    }
}
