//! The bounds table: one line per scalar field, with what it accepts and whether (and how) a
//! `[sweep]` list may vary it. A field written in place and a swept value go through the same line.

use super::limits::{MAX_BORROWERS, MAX_TOTAL_CYCLES};
use super::raw::{RawScenario, W};
use serde::de::DeserializeOwned;

/// Which values a field accepts; every real bound refuses NaN and infinities.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Bound {
    /// Finite and > 0.
    Positive,
    /// Finite and >= 0.
    NonNegative,
    /// > 0 and <= the given maximum, which keeps every sum the engine forms finite (see `MAX_PRINCIPAL`).
    PositiveAtMost(f64),
    /// >= 0 and <= the given maximum (see `MAX_INTEREST_RATE`, `MAX_INCOME`).
    NonNegativeAtMost(f64),
    /// In [0, 1], read as a probability.
    Probability,
    /// In [0, 1], read as a share.
    Share,
    /// In [0, 1), read as a probability.
    ProbabilityBelowOne,
    /// Strictly between 0 and 1 (a discount factor).
    OpenUnit,
    /// >= 1 and <= the given maximum (a multiple of the first loan).
    OneToAtMost(f64),
    /// An integer in [min, max] (a max of `u32::MAX` only reflects the storage type).
    Count(u32, u32),
    /// A seed: an integer in [0, i64::MAX] (a TOML integer).
    Seed,
    /// Any value of the field's type (a word from a fixed list, a flag, a distribution); the type
    /// and the cross-field rules are checked where the field is read.
    Typed(&'static str),
}

impl Bound {
    /// Whether a real number lies within the bound.
    pub fn admits(self, x: f64) -> bool {
        match self {
            Bound::Positive => x.is_finite() && x > 0.0,
            Bound::NonNegative => x.is_finite() && x >= 0.0,
            Bound::PositiveAtMost(max) => x > 0.0 && x <= max,
            Bound::NonNegativeAtMost(max) => (0.0..=max).contains(&x),
            Bound::Probability | Bound::Share => (0.0..=1.0).contains(&x),
            Bound::ProbabilityBelowOne => (0.0..1.0).contains(&x),
            Bound::OpenUnit => x > 0.0 && x < 1.0,
            Bound::OneToAtMost(max) => (1.0..=max).contains(&x),
            Bound::Count(min, max) => x.fract() == 0.0 && x >= f64::from(min) && x <= f64::from(max),
            Bound::Seed => x.fract() == 0.0 && x >= 0.0 && x <= i64::MAX as f64,
            Bound::Typed(_) => true,
        }
    }

    /// What is allowed, as error messages say it.
    pub fn text(self) -> String {
        match self {
            Bound::Positive => "a finite number > 0".into(),
            Bound::NonNegative => "a finite number >= 0".into(),
            Bound::PositiveAtMost(max) => format!("a number in (0, {max:e}]{}", why(max)),
            Bound::NonNegativeAtMost(max) => format!("a number in [0, {max:e}]{}", why(max)),
            Bound::Probability => "a probability in [0, 1]".into(),
            Bound::Share => "a share in [0, 1]".into(),
            Bound::ProbabilityBelowOne => "a probability in [0, 1)".into(),
            Bound::OpenUnit => "a number strictly between 0 and 1".into(),
            Bound::OneToAtMost(max) => format!("a number in [1, {max:e}]{}", why(max)),
            Bound::Count(min, u32::MAX) => format!("an integer >= {min}"),
            Bound::Count(min, max) => format!("an integer in [{min}, {max}]"),
            Bound::Seed => format!("an integer in [0, {}] (a TOML integer)", i64::MAX),
            Bound::Typed(allowed) => allowed.into(),
        }
    }
}

/// The largest principal: far above any real loan (a trillion in any currency), and small enough
/// that every sum of money over a run stays finite. The largest amount due is MAX_PRINCIPAL x (1 +
/// MAX_INTEREST_RATE) ~ 1e15, the largest capacity that x an income draw (mean <= MAX_INCOME = 1e6,
/// a draw at most ~1e12 x its mean at cv 100), ~1e33; summed over at most 1e7 borrowers x 2^24 cycles
/// x 2^32 replications that is ~1e57, far below f64::MAX ~ 1.8e308.
pub const MAX_PRINCIPAL: f64 = 1e12;
/// The largest interest rate per cycle: 1000, that is 100,000% a cycle.
pub const MAX_INTEREST_RATE: f64 = 1e3;
/// The largest income ratio (income over the amount due; a fixed value, a uniform's high end, or a
/// distribution's mean): a million times what the borrower owes.
pub const MAX_INCOME: f64 = 1e6;

/// The largest growth rate of a principal or an income ratio per cycle: a tenfold rise each cycle,
/// far above any lender's progressive schedule.
pub const MAX_GROWTH: f64 = 9.0;
/// The largest cap on a principal in multiples of the first loan; with `MAX_PRINCIPAL` it keeps every
/// amount due below 1e12 x 1e3 x (1 + 1e3) ~ 1e18, so every sum stays finite.
pub const MAX_MULTIPLE: f64 = 1e3;
/// The largest factor by which an income ratio may grow over a run, (1 + income_growth)^(warmup +
/// cycles): with `MAX_INCOME` it keeps every capacity, and every sum of them, finite.
pub const MAX_INCOME_GROWTH_FACTOR: f64 = 1e6;
/// The largest temptation or social sanction (units of the amount due): beyond it nobody able to
/// pay ever behaves differently, and it keeps thresholds finite.
pub const MAX_BEHAVIOUR_UNITS: f64 = 1e6;

/// Why a money bound is where it is, as messages say it.
fn why(max: f64) -> &'static str {
    if max == MAX_PRINCIPAL {
        " (far above any real loan; it keeps every sum of money finite)"
    } else if max == MAX_INCOME {
        " (an income ratio; far above any real borrower's; it keeps every sum of money finite)"
    } else if max == MAX_INTEREST_RATE {
        " (a rate per cycle; far above any real lender's; it keeps every sum of money finite)"
    } else if max == MAX_GROWTH {
        " (a growth rate per cycle; 9 is a tenfold rise each cycle)"
    } else if max == MAX_MULTIPLE {
        " (a multiple of the first loan; it keeps every sum of money finite)"
    } else {
        ""
    }
}

/// Puts a swept value (shock index, value) into the raw scenario, typed like the field; the error is
/// the type error's message.
pub type Setter = fn(&mut RawScenario, usize, W<toml::Value>) -> Result<(), String>;

/// One line of the table.
pub struct Field {
    /// Path as `[sweep]` writes it; `*` stands for a shock's name (or a stress window's index).
    pub path: &'static str,
    /// What the field accepts.
    pub bound: Bound,
    /// How a swept value replaces it; `None` for fields that cannot be swept.
    pub sweep: Option<Setter>,
    /// Whether a swept value may replace only a plain number (never a table such as a curve).
    pub plain_only: bool,
}

const fn line(path: &'static str, bound: Bound, sweep: Option<Setter>) -> Field {
    Field {
        path,
        bound,
        sweep,
        plain_only: false,
    }
}

const fn plain(path: &'static str, bound: Bound, sweep: Setter) -> Field {
    Field {
        path,
        bound,
        sweep: Some(sweep),
        plain_only: true,
    }
}

/// Types a swept value like the field and puts it in place, keeping where it was written.
fn put<T: DeserializeOwned>(slot: &mut Option<W<T>>, v: W<toml::Value>) -> Result<(), String> {
    let value = T::deserialize(v.value).map_err(|e| e.message().to_owned())?;
    *slot = Some(W {
        value,
        origin: v.origin,
    });
    Ok(())
}

/// Every scalar field of a scenario file. To add a field: one line here (and see DEVELOPERS.md).
#[rustfmt::skip]
pub const FIELDS: &[Field] = &[
    line("seed", Bound::Seed, None),
    line("replications", Bound::Count(1, u32::MAX), None),
    line("cycles", Bound::Count(1, MAX_TOTAL_CYCLES), None),
    line("warmup_cycles", Bound::Count(0, MAX_TOTAL_CYCLES), None),
    line("portfolio.borrowers", Bound::Count(1, MAX_BORROWERS), None),
    line("portfolio.villages", Bound::Count(1, MAX_BORROWERS), None),
    line("loan.principal", Bound::PositiveAtMost(MAX_PRINCIPAL), Some(|r, _, v| put(&mut r.loan.principal, v))),
    line("loan.interest_rate", Bound::NonNegativeAtMost(MAX_INTEREST_RATE), Some(|r, _, v| put(&mut r.loan.interest_rate, v))),
    line("loan.recovery_rate", Bound::Share, Some(|r, _, v| put(&mut r.loan.recovery_rate, v))),
    plain("borrowers.income", Bound::NonNegativeAtMost(MAX_INCOME), |r, _, v| put(&mut r.borrowers.income, v)),
    plain("borrowers.risk", Bound::NonNegative, |r, _, v| put(&mut r.borrowers.risk, v)),
    plain("shock.*.probability", Bound::Probability, |r, i, v| put(&mut r.shock[i].probability, v)),
    line("shock.*.village_correlation", Bound::NonNegative, Some(|r, i, v| put(&mut r.shock[i].village_correlation, v))),
    line("shock.*.portfolio_correlation", Bound::NonNegative, Some(|r, i, v| put(&mut r.shock[i].portfolio_correlation, v))),
    line("shock.*.reach", Bound::Share, Some(|r, i, v| put(&mut r.shock[i].reach, v))),
    plain("shock.*.severity", Bound::Share, |r, i, v| put(&mut r.shock[i].severity, v)),
    line("shock.*.stress.*.probability", Bound::Probability, None),
    line("policy.group_size", Bound::Count(1, u32::MAX), Some(|r, _, v| put(&mut r.policy.group_size, v))),
    line("policy.liability", Bound::Typed("joint or individual"), Some(|r, _, v| put(&mut r.policy.liability, v))),
    line("policy.peer_cover", Bound::Share, Some(|r, _, v| put(&mut r.policy.peer_cover, v))),
    line("policy.exclusion_cycles", Bound::Typed("an integer >= 0, or \"permanent\""), Some(|r, _, v| put(&mut r.policy.exclusion_cycles, v))),
    line("policy.exclusion_scope", Bound::Typed("group or defaulters"), Some(|r, _, v| put(&mut r.policy.exclusion_scope, v))),
    line("policy.formation", Bound::Typed("reshuffle or persistent"), Some(|r, _, v| put(&mut r.policy.formation, v))),
    line("policy.matching", Bound::Typed("random or assortative"), Some(|r, _, v| put(&mut r.policy.matching, v))),
    line("policy.min_group_size", Bound::Count(1, u32::MAX), Some(|r, _, v| put(&mut r.policy.min_group_size, v))),
    line("policy.max_group_size", Bound::Count(1, u32::MAX), Some(|r, _, v| put(&mut r.policy.max_group_size, v))),
    line("policy.size_slack", Bound::Count(0, u32::MAX), Some(|r, _, v| put(&mut r.policy.size_slack, v))),
    line("loan.growth", Bound::NonNegativeAtMost(MAX_GROWTH), Some(|r, _, v| put(&mut r.loan.growth, v))),
    line("loan.max_multiple", Bound::OneToAtMost(MAX_MULTIPLE), Some(|r, _, v| put(&mut r.loan.max_multiple, v))),
    line("borrowers.income_growth", Bound::NonNegativeAtMost(MAX_GROWTH), Some(|r, _, v| put(&mut r.borrowers.income_growth, v))),
    line("behaviour.loan_value", Bound::NonNegativeAtMost(MAX_BEHAVIOUR_UNITS), Some(|r, _, v| put(&mut r.behaviour.get_or_insert_with(Default::default).loan_value, v))),
    line("behaviour.discount", Bound::OpenUnit, Some(|r, _, v| put(&mut r.behaviour.get_or_insert_with(Default::default).discount, v))),
    line("behaviour.temptation", Bound::Typed("a number >= 0 or a distribution table (fixed, uniform, lognormal, gamma, beta)"), None),
    line("behaviour.social_sanction", Bound::NonNegativeAtMost(MAX_BEHAVIOUR_UNITS), Some(|r, _, v| put(&mut r.behaviour.get_or_insert_with(Default::default).social_sanction, v))),
    line("pool.dropout", Bound::ProbabilityBelowOne, Some(|r, _, v| put(&mut r.pool.dropout, v))),
    line("pool.replace_departures", Bound::Typed("true or false"), Some(|r, _, v| put(&mut r.pool.replace_departures, v))),
    line("finance.cycles_per_year", Bound::Count(1, MAX_TOTAL_CYCLES), None),
    line("finance.currency", Bound::Typed("a label of 1 to 24 characters, none of them a control character"), None),
    line("finance.operating_cost", Bound::NonNegativeAtMost(MAX_PRINCIPAL), None),
    line("finance.cost_of_funds", Bound::NonNegativeAtMost(MAX_INTEREST_RATE), None),
    line("finance.fee_rate", Bound::Share, None),
];

/// The table's line for `path` (with `*` for a shock's name).
pub fn field(path: &str) -> Option<&'static Field> {
    FIELDS.iter().find(|f| f.path == path)
}

/// The bound of a field the validator reads; every such path has a line in the table.
pub fn bound(path: &str) -> Bound {
    field(path).map_or_else(|| panic!("no line for {path} in the bounds table"), |f| f.bound)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn paths_are_unique() {
        for (i, f) in FIELDS.iter().enumerate() {
            assert!(FIELDS[..i].iter().all(|g| g.path != f.path), "{} twice", f.path);
        }
    }

    #[test]
    fn texts_say_what_is_allowed() {
        assert_eq!(Bound::Count(1, u32::MAX).text(), "an integer >= 1");
        assert_eq!(Bound::Count(0, 9).text(), "an integer in [0, 9]");
        assert!(!Bound::ProbabilityBelowOne.admits(1.0));
        assert!(!Bound::NonNegative.admits(f64::INFINITY));
    }
}
