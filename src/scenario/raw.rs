//! The scenario file as written: a serde mirror of the TOML text, before any range check.
//!
//! Keeping the file's shape apart from the validated model lets serde report wrong types and unknown
//! fields with their path and line, while `validate` owns every range check and can quote each value
//! exactly as it was written. Required fields are optional here so that a missing one is reported by
//! its full path (`portfolio.borrowers`) instead of by the table that lacks it.

use super::ScenarioError;
use serde::Deserialize;
use serde::de::{self, MapAccess, SeqAccess, Visitor};
use std::fmt;

/// A real number as written; TOML integers are accepted wherever a real number is expected.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Num {
    /// The number.
    pub value: f64,
    /// The integer as written, when the file wrote an integer (kept so errors quote it exactly).
    pub integer: Option<i64>,
}

impl Num {
    /// The number the way the file wrote it (`nan` and `inf` in TOML spelling).
    pub fn text(&self) -> String {
        match self.integer {
            Some(i) => i.to_string(),
            None => float_text(self.value),
        }
    }
}

/// Formats a float the way TOML spells it, keeping a trailing `.0` so `2.0` is not quoted as `2`.
pub fn float_text(x: f64) -> String {
    if x.is_nan() {
        "nan".into()
    } else if x.is_infinite() {
        if x > 0.0 { "inf".into() } else { "-inf".into() }
    } else {
        format!("{x:?}")
    }
}

impl<'de> Deserialize<'de> for Num {
    fn deserialize<D: de::Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        struct V;
        impl Visitor<'_> for V {
            type Value = Num;
            fn expecting(&self, f: &mut fmt::Formatter) -> fmt::Result {
                f.write_str("a number")
            }
            fn visit_i64<E: de::Error>(self, v: i64) -> Result<Num, E> {
                Ok(Num {
                    value: v as f64,
                    integer: Some(v),
                })
            }
            fn visit_u64<E: de::Error>(self, v: u64) -> Result<Num, E> {
                Ok(Num {
                    value: v as f64,
                    integer: i64::try_from(v).ok(),
                })
            }
            fn visit_f64<E: de::Error>(self, v: f64) -> Result<Num, E> {
                Ok(Num {
                    value: v,
                    integer: None,
                })
            }
        }
        d.deserialize_any(V)
    }
}

/// A TOML integer (signed 64-bit); counts are range-checked later so the message can quote the value.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Int(pub i64);

impl<'de> Deserialize<'de> for Int {
    fn deserialize<D: de::Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        struct V;
        impl Visitor<'_> for V {
            type Value = Int;
            fn expecting(&self, f: &mut fmt::Formatter) -> fmt::Result {
                f.write_str("an integer")
            }
            fn visit_i64<E: de::Error>(self, v: i64) -> Result<Int, E> {
                Ok(Int(v))
            }
            fn visit_u64<E: de::Error>(self, v: u64) -> Result<Int, E> {
                i64::try_from(v)
                    .map(Int)
                    .map_err(|_| E::custom(format!("integer {v} is too large")))
            }
        }
        d.deserialize_any(V)
    }
}

/// A distribution as written: a bare number, or a table whose `kind` selects the parameters.
#[derive(Debug, Clone, PartialEq)]
pub enum RawDist {
    /// A bare number, meaning a fixed value.
    Number(Num),
    /// `{ kind = "fixed", value }`.
    Fixed { value: Num },
    /// `{ kind = "uniform", low, high }`.
    Uniform { low: Num, high: Num },
    /// `{ kind = "lognormal", mean, cv }`.
    Lognormal { mean: Num, cv: Num },
    /// `{ kind = "beta", mean, sd }`.
    Beta { mean: Num, sd: Num },
    /// `{ kind = "gamma", mean, cv }`.
    Gamma { mean: Num, cv: Num },
    /// A `kind` this program does not know; `validate` refuses it, quoting the name.
    Unknown { kind: String },
}

/// The distribution kinds and their parameters, in the order messages list them.
const DIST_KINDS: [(&str, &[&str]); 5] = [
    ("fixed", &["value"]),
    ("uniform", &["low", "high"]),
    ("lognormal", &["mean", "cv"]),
    ("beta", &["mean", "sd"]),
    ("gamma", &["mean", "cv"]),
];

#[derive(Deserialize)]
#[serde(deny_unknown_fields, expecting = "a distribution table")]
struct DistTable {
    kind: Option<String>,
    value: Option<Num>,
    low: Option<Num>,
    high: Option<Num>,
    mean: Option<Num>,
    cv: Option<Num>,
    sd: Option<Num>,
}

impl DistTable {
    fn into_dist(self) -> Result<RawDist, String> {
        let Some(kind) = self.kind else {
            return Err("a distribution table needs `kind` (fixed, uniform, lognormal, beta or gamma)".into());
        };
        let Some(&(_, params)) = DIST_KINDS.iter().find(|(k, _)| *k == kind) else {
            return Ok(RawDist::Unknown { kind });
        };
        let given = [
            ("value", self.value),
            ("low", self.low),
            ("high", self.high),
            ("mean", self.mean),
            ("cv", self.cv),
            ("sd", self.sd),
        ];
        check_parameters(&format!("a {kind} distribution"), params, &given)?;
        let get = |name: &str| given.iter().find(|(n, _)| *n == name).and_then(|(_, v)| *v);
        let pair = |a: &str, b: &str| -> Result<(Num, Num), String> {
            match (get(a), get(b)) {
                (Some(x), Some(y)) => Ok((x, y)),
                _ => Err(format!("a {kind} distribution needs `{a}` and `{b}`")),
            }
        };
        Ok(match kind.as_str() {
            "fixed" => RawDist::Fixed {
                value: get("value").ok_or("a fixed distribution needs `value`")?,
            },
            "uniform" => pair("low", "high").map(|(low, high)| RawDist::Uniform { low, high })?,
            "lognormal" => pair("mean", "cv").map(|(mean, cv)| RawDist::Lognormal { mean, cv })?,
            "beta" => pair("mean", "sd").map(|(mean, sd)| RawDist::Beta { mean, sd })?,
            _ => pair("mean", "cv").map(|(mean, cv)| RawDist::Gamma { mean, cv })?,
        })
    }
}

/// Refuses parameters that do not belong to `what` and reports the first missing one.
fn check_parameters<T>(what: &str, params: &[&str], given: &[(&str, Option<T>)]) -> Result<(), String> {
    let list = params
        .iter()
        .map(|p| format!("`{p}`"))
        .collect::<Vec<_>>()
        .join(" and ");
    if let Some((name, _)) = given.iter().find(|(n, v)| v.is_some() && !params.contains(n)) {
        return Err(format!("`{name}` is not a parameter of {what}, which takes {list}"));
    }
    if let Some(name) = params
        .iter()
        .find(|p| given.iter().any(|(n, v)| n == *p && v.is_none()))
    {
        return Err(format!("{what} needs `{name}` (it takes {list})"));
    }
    Ok(())
}

impl<'de> Deserialize<'de> for RawDist {
    fn deserialize<D: de::Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        struct V;
        impl<'de> Visitor<'de> for V {
            type Value = RawDist;
            fn expecting(&self, f: &mut fmt::Formatter) -> fmt::Result {
                f.write_str("a number or a distribution table such as { kind = \"uniform\", low = 0.5, high = 1.5 }")
            }
            fn visit_i64<E: de::Error>(self, v: i64) -> Result<RawDist, E> {
                Num::deserialize(de::value::I64Deserializer::new(v)).map(RawDist::Number)
            }
            fn visit_u64<E: de::Error>(self, v: u64) -> Result<RawDist, E> {
                Num::deserialize(de::value::U64Deserializer::new(v)).map(RawDist::Number)
            }
            fn visit_f64<E: de::Error>(self, v: f64) -> Result<RawDist, E> {
                Ok(RawDist::Number(Num {
                    value: v,
                    integer: None,
                }))
            }
            fn visit_map<A: MapAccess<'de>>(self, map: A) -> Result<RawDist, A::Error> {
                let table = DistTable::deserialize(de::value::MapAccessDeserializer::new(map))?;
                table.into_dist().map_err(de::Error::custom)
            }
        }
        d.deserialize_any(V)
    }
}

/// A group-size curve as written (member-scope shock probabilities only).
#[derive(Debug, Clone, PartialEq)]
pub enum RawCurve {
    /// `{ curve = "constant", value }`.
    Constant { value: Num },
    /// `{ curve = "power", p }`.
    Power { p: Num },
    /// `{ curve = "power_plus_log", p }`.
    PowerPlusLog { p: Num },
    /// `{ curve = "table", values = { "2" = 0.08, ... } }`, keys kept as written and in file order.
    Table { values: Vec<(String, Num)> },
    /// A `curve` name this program does not know; `validate` refuses it, quoting the name.
    Unknown { curve: String },
}

impl RawCurve {
    /// The curve as an inline TOML table, for messages that must quote it.
    pub fn text(&self) -> String {
        match self {
            RawCurve::Constant { value } => format!("{{ curve = \"constant\", value = {} }}", value.text()),
            RawCurve::Power { p } => format!("{{ curve = \"power\", p = {} }}", p.text()),
            RawCurve::PowerPlusLog { p } => format!("{{ curve = \"power_plus_log\", p = {} }}", p.text()),
            RawCurve::Table { values } => {
                let entries: Vec<String> = values.iter().map(|(k, v)| format!("{k:?} = {}", v.text())).collect();
                format!("{{ curve = \"table\", values = {{ {} }} }}", entries.join(", "))
            }
            RawCurve::Unknown { curve } => format!("{{ curve = {curve:?} }}"),
        }
    }
}

/// The curves and their parameters, in the order messages list them.
const CURVES: [(&str, &[&str]); 4] = [
    ("constant", &["value"]),
    ("power", &["p"]),
    ("power_plus_log", &["p"]),
    ("table", &["values"]),
];

/// A table of numbers keyed by strings, kept in file order.
struct NumTable(Vec<(String, Num)>);

impl<'de> Deserialize<'de> for NumTable {
    fn deserialize<D: de::Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        struct V;
        impl<'de> Visitor<'de> for V {
            type Value = NumTable;
            fn expecting(&self, f: &mut fmt::Formatter) -> fmt::Result {
                f.write_str("a table of probabilities keyed by group size, such as { \"2\" = 0.08, \"3\" = 0.06 }")
            }
            fn visit_map<A: MapAccess<'de>>(self, mut map: A) -> Result<NumTable, A::Error> {
                let mut out = Vec::new();
                while let Some(key) = map.next_key::<String>()? {
                    out.push((key, map.next_value::<Num>()?));
                }
                Ok(NumTable(out))
            }
        }
        d.deserialize_any(V)
    }
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields, expecting = "a group-size curve table")]
struct CurveTable {
    curve: Option<String>,
    value: Option<Num>,
    p: Option<Num>,
    values: Option<NumTable>,
}

impl CurveTable {
    fn into_curve(self) -> Result<RawCurve, String> {
        let Some(curve) = self.curve else {
            return Err("a group-size curve table needs `curve` (constant, power, power_plus_log or table)".into());
        };
        let Some(&(_, params)) = CURVES.iter().find(|(c, _)| *c == curve) else {
            return Ok(RawCurve::Unknown { curve });
        };
        let given = [
            ("value", self.value.map(|_| ())),
            ("p", self.p.map(|_| ())),
            ("values", self.values.as_ref().map(|_| ())),
        ];
        check_parameters(&format!("a {curve} curve"), params, &given)?;
        let missing = || format!("a {curve} curve needs `{}`", params.first().copied().unwrap_or("?"));
        Ok(match curve.as_str() {
            "constant" => RawCurve::Constant {
                value: self.value.ok_or_else(missing)?,
            },
            "power" => RawCurve::Power {
                p: self.p.ok_or_else(missing)?,
            },
            "power_plus_log" => RawCurve::PowerPlusLog {
                p: self.p.ok_or_else(missing)?,
            },
            _ => RawCurve::Table {
                values: self.values.ok_or_else(missing)?.0,
            },
        })
    }
}

/// A shock probability as written: a number, or a group-size curve table.
#[derive(Debug, Clone, PartialEq)]
pub enum RawProbability {
    /// A bare number.
    Number(Num),
    /// A table with a `curve` key.
    Curve(RawCurve),
}

impl<'de> Deserialize<'de> for RawProbability {
    fn deserialize<D: de::Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        struct V;
        impl<'de> Visitor<'de> for V {
            type Value = RawProbability;
            fn expecting(&self, f: &mut fmt::Formatter) -> fmt::Result {
                f.write_str("a probability or a group-size curve table such as { curve = \"power\", p = 0.5 }")
            }
            fn visit_i64<E: de::Error>(self, v: i64) -> Result<RawProbability, E> {
                Num::deserialize(de::value::I64Deserializer::new(v)).map(RawProbability::Number)
            }
            fn visit_u64<E: de::Error>(self, v: u64) -> Result<RawProbability, E> {
                Num::deserialize(de::value::U64Deserializer::new(v)).map(RawProbability::Number)
            }
            fn visit_f64<E: de::Error>(self, v: f64) -> Result<RawProbability, E> {
                Ok(RawProbability::Number(Num {
                    value: v,
                    integer: None,
                }))
            }
            fn visit_map<A: MapAccess<'de>>(self, map: A) -> Result<RawProbability, A::Error> {
                let table = CurveTable::deserialize(de::value::MapAccessDeserializer::new(map))?;
                table.into_curve().map(RawProbability::Curve).map_err(de::Error::custom)
            }
        }
        d.deserialize_any(V)
    }
}

/// `exclusion_cycles` as written: an integer, or a word that should be `"permanent"`.
#[derive(Debug, Clone, PartialEq)]
pub enum RawExclusion {
    /// A number of cycles (not yet range-checked).
    Cycles(i64),
    /// A word (only `"permanent"` is accepted by `validate`).
    Word(String),
}

impl RawExclusion {
    /// The value the way the file wrote it.
    pub fn text(&self) -> String {
        match self {
            RawExclusion::Cycles(n) => n.to_string(),
            RawExclusion::Word(w) => format!("{w:?}"),
        }
    }
}

impl<'de> Deserialize<'de> for RawExclusion {
    fn deserialize<D: de::Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        struct V;
        impl Visitor<'_> for V {
            type Value = RawExclusion;
            fn expecting(&self, f: &mut fmt::Formatter) -> fmt::Result {
                f.write_str("an integer >= 0 or \"permanent\"")
            }
            fn visit_i64<E: de::Error>(self, v: i64) -> Result<RawExclusion, E> {
                Ok(RawExclusion::Cycles(v))
            }
            fn visit_u64<E: de::Error>(self, v: u64) -> Result<RawExclusion, E> {
                i64::try_from(v)
                    .map(RawExclusion::Cycles)
                    .map_err(|_| E::custom(format!("integer {v} is too large")))
            }
            fn visit_str<E: de::Error>(self, v: &str) -> Result<RawExclusion, E> {
                Ok(RawExclusion::Word(v.to_owned()))
            }
        }
        d.deserialize_any(V)
    }
}

/// One `[[shock]]` table.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields, expecting = "a [[shock]] table")]
pub struct RawShock {
    /// Required, unique, non-empty.
    pub name: Option<String>,
    /// Required: member, group, village or portfolio.
    pub scope: Option<String>,
    /// Required: a number or (member scope) a curve.
    pub probability: Option<RawProbability>,
    /// Member scope only.
    pub village_correlation: Option<Num>,
    /// Member scope only.
    pub portfolio_correlation: Option<Num>,
    /// Unit scopes only.
    pub reach: Option<Num>,
    /// Share of income lost when hit.
    pub severity: Option<RawDist>,
    /// Stress windows, in file order.
    #[serde(default, deserialize_with = "stress_list")]
    pub stress: Vec<RawStress>,
}

/// One stress window `{ from, to, probability }`.
#[derive(Debug, Clone, Deserialize)]
#[serde(
    deny_unknown_fields,
    expecting = "a stress window table such as { from = 6, to = 7, probability = 0.4 }"
)]
pub struct RawStress {
    /// First cycle of the window.
    pub from: Option<Int>,
    /// Last cycle of the window.
    pub to: Option<Int>,
    /// Probability in force during the window.
    pub probability: Option<Num>,
}

/// The `[portfolio]` table.
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields, expecting = "a [portfolio] table")]
pub struct RawPortfolio {
    /// Required: borrower slots.
    pub borrowers: Option<Int>,
    /// Villages.
    pub villages: Option<Int>,
}

/// The `[loan]` table.
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields, expecting = "a [loan] table")]
pub struct RawLoan {
    /// Required: principal per member per cycle.
    pub principal: Option<Num>,
    /// Flat interest per cycle.
    pub interest_rate: Option<Num>,
    /// Share of unpaid principal recovered.
    pub recovery_rate: Option<Num>,
}

/// The `[borrowers]` table.
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields, expecting = "a [borrowers] table")]
pub struct RawBorrowers {
    /// Income ratio distribution.
    pub income: Option<RawDist>,
    /// Risk multiplier distribution.
    pub risk: Option<RawDist>,
}

/// The `[policy]` table.
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields, expecting = "a [policy] table")]
pub struct RawPolicy {
    /// Members per group.
    pub group_size: Option<Int>,
    /// joint or individual.
    pub liability: Option<String>,
    /// Share of surplus put towards peers' shortfalls.
    pub peer_cover: Option<Num>,
    /// Cycles excluded after default, or "permanent".
    pub exclusion_cycles: Option<RawExclusion>,
    /// group or defaulters.
    pub exclusion_scope: Option<String>,
    /// reshuffle or persistent.
    pub formation: Option<String>,
    /// random or assortative.
    pub matching: Option<String>,
}

/// The `[pool]` table.
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields, expecting = "a [pool] table")]
pub struct RawPool {
    /// Per-cycle departure probability.
    pub dropout: Option<Num>,
    /// Whether emptied slots are refilled.
    pub replace_departures: Option<bool>,
}

/// The `[policy]` field names, in the order messages list them.
pub const POLICY_FIELDS: [&str; 7] = [
    "group_size",
    "liability",
    "peer_cover",
    "exclusion_cycles",
    "exclusion_scope",
    "formation",
    "matching",
];

/// One swept field and its alternative values, each element typed like the `[policy]` field.
#[derive(Debug, Clone, PartialEq)]
pub enum RawAxis {
    /// `group_size = [...]`.
    GroupSize(Vec<Int>),
    /// `liability = [...]`.
    Liability(Vec<String>),
    /// `peer_cover = [...]`.
    PeerCover(Vec<Num>),
    /// `exclusion_cycles = [...]`.
    ExclusionCycles(Vec<RawExclusion>),
    /// `exclusion_scope = [...]`.
    ExclusionScope(Vec<String>),
    /// `formation = [...]`.
    Formation(Vec<String>),
    /// `matching = [...]`.
    Matching(Vec<String>),
}

impl RawAxis {
    /// The swept field's name as written.
    pub fn key(&self) -> &'static str {
        match self {
            RawAxis::GroupSize(_) => "group_size",
            RawAxis::Liability(_) => "liability",
            RawAxis::PeerCover(_) => "peer_cover",
            RawAxis::ExclusionCycles(_) => "exclusion_cycles",
            RawAxis::ExclusionScope(_) => "exclusion_scope",
            RawAxis::Formation(_) => "formation",
            RawAxis::Matching(_) => "matching",
        }
    }

    /// Number of alternative values listed.
    pub fn len(&self) -> usize {
        match self {
            RawAxis::GroupSize(v) => v.len(),
            RawAxis::PeerCover(v) => v.len(),
            RawAxis::ExclusionCycles(v) => v.len(),
            RawAxis::Liability(v) | RawAxis::ExclusionScope(v) | RawAxis::Formation(v) | RawAxis::Matching(v) => {
                v.len()
            }
        }
    }

    /// Each listed value the way the file wrote it, for messages.
    pub fn texts(&self) -> Vec<String> {
        let words = |v: &[String]| v.iter().map(|w| format!("{w:?}")).collect();
        match self {
            RawAxis::GroupSize(v) => v.iter().map(|n| n.0.to_string()).collect(),
            RawAxis::PeerCover(v) => v.iter().map(Num::text).collect(),
            RawAxis::ExclusionCycles(v) => v.iter().map(RawExclusion::text).collect(),
            RawAxis::Liability(v) | RawAxis::ExclusionScope(v) | RawAxis::Formation(v) | RawAxis::Matching(v) => {
                words(v)
            }
        }
    }

    /// Whether the list is empty (an error `validate` reports).
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }
}

/// The `[sweep]` table: the swept fields in the order they were written.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct RawSweep {
    /// One entry per key, in file order.
    pub axes: Vec<RawAxis>,
}

/// A list of alternative values; the name makes a scalar-instead-of-list mistake readable.
struct Alternatives<T>(Vec<T>);

impl<'de, T: Deserialize<'de>> Deserialize<'de> for Alternatives<T> {
    fn deserialize<D: de::Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        list_of(d, "a list of alternative values, such as [2, 3, 4]").map(Alternatives)
    }
}

/// Reads a TOML array, saying `expecting` (rather than serde's "a sequence") when given anything else.
fn list_of<'de, D: de::Deserializer<'de>, T: Deserialize<'de>>(
    d: D,
    expecting: &'static str,
) -> Result<Vec<T>, D::Error> {
    struct V<T>(&'static str, std::marker::PhantomData<T>);
    impl<'de, T: Deserialize<'de>> Visitor<'de> for V<T> {
        type Value = Vec<T>;
        fn expecting(&self, f: &mut fmt::Formatter) -> fmt::Result {
            f.write_str(self.0)
        }
        fn visit_seq<A: SeqAccess<'de>>(self, mut seq: A) -> Result<Vec<T>, A::Error> {
            let mut out = Vec::with_capacity(seq.size_hint().unwrap_or(0).min(1024));
            while let Some(x) = seq.next_element::<T>()? {
                out.push(x);
            }
            Ok(out)
        }
    }
    d.deserialize_any(V(expecting, std::marker::PhantomData))
}

fn shock_list<'de, D: de::Deserializer<'de>>(d: D) -> Result<Vec<RawShock>, D::Error> {
    list_of(d, "a list of [[shock]] tables (write [[shock]], with double brackets)")
}

fn stress_list<'de, D: de::Deserializer<'de>>(d: D) -> Result<Vec<RawStress>, D::Error> {
    list_of(
        d,
        "a list of stress windows, such as [ { from = 6, to = 7, probability = 0.4 } ]",
    )
}

/// A `[sweep]` key; unknown keys fail while the key is read, so the error path ends with the key.
enum PolicyField {
    GroupSize,
    Liability,
    PeerCover,
    ExclusionCycles,
    ExclusionScope,
    Formation,
    Matching,
}

impl<'de> Deserialize<'de> for PolicyField {
    fn deserialize<D: de::Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        struct V;
        impl Visitor<'_> for V {
            type Value = PolicyField;
            fn expecting(&self, f: &mut fmt::Formatter) -> fmt::Result {
                f.write_str("a [policy] field name")
            }
            fn visit_str<E: de::Error>(self, v: &str) -> Result<PolicyField, E> {
                Ok(match v {
                    "group_size" => PolicyField::GroupSize,
                    "liability" => PolicyField::Liability,
                    "peer_cover" => PolicyField::PeerCover,
                    "exclusion_cycles" => PolicyField::ExclusionCycles,
                    "exclusion_scope" => PolicyField::ExclusionScope,
                    "formation" => PolicyField::Formation,
                    "matching" => PolicyField::Matching,
                    other => {
                        return Err(E::custom(format!(
                            "`{other}` is not a [policy] field; a sweep may list {}",
                            POLICY_FIELDS.join(", ")
                        )));
                    }
                })
            }
        }
        d.deserialize_identifier(V)
    }
}

impl<'de> Deserialize<'de> for RawSweep {
    fn deserialize<D: de::Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        struct V;
        impl<'de> Visitor<'de> for V {
            type Value = RawSweep;
            fn expecting(&self, f: &mut fmt::Formatter) -> fmt::Result {
                f.write_str("a table of [policy] fields, each with a list of alternative values")
            }
            fn visit_map<A: MapAccess<'de>>(self, mut map: A) -> Result<RawSweep, A::Error> {
                let mut axes = Vec::new();
                while let Some(field) = map.next_key::<PolicyField>()? {
                    axes.push(match field {
                        PolicyField::GroupSize => RawAxis::GroupSize(map.next_value::<Alternatives<_>>()?.0),
                        PolicyField::Liability => RawAxis::Liability(map.next_value::<Alternatives<_>>()?.0),
                        PolicyField::PeerCover => RawAxis::PeerCover(map.next_value::<Alternatives<_>>()?.0),
                        PolicyField::ExclusionCycles => {
                            RawAxis::ExclusionCycles(map.next_value::<Alternatives<_>>()?.0)
                        }
                        PolicyField::ExclusionScope => RawAxis::ExclusionScope(map.next_value::<Alternatives<_>>()?.0),
                        PolicyField::Formation => RawAxis::Formation(map.next_value::<Alternatives<_>>()?.0),
                        PolicyField::Matching => RawAxis::Matching(map.next_value::<Alternatives<_>>()?.0),
                    });
                }
                Ok(RawSweep { axes })
            }
        }
        d.deserialize_any(V)
    }
}

/// The whole file as written.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields, expecting = "a scenario document")]
pub struct RawScenario {
    /// Free text.
    pub name: Option<String>,
    /// Master seed (a TOML integer, so at most i64::MAX).
    pub seed: Option<Int>,
    /// Required.
    pub replications: Option<Int>,
    /// Required.
    pub cycles: Option<Int>,
    /// Cycles simulated first and not counted.
    pub warmup_cycles: Option<Int>,
    /// `[portfolio]`; required for `borrowers`.
    pub portfolio: Option<RawPortfolio>,
    /// `[loan]`; required for `principal`.
    pub loan: Option<RawLoan>,
    /// `[borrowers]`.
    pub borrowers: Option<RawBorrowers>,
    /// `[[shock]]` tables, in file order.
    #[serde(default, deserialize_with = "shock_list")]
    pub shock: Vec<RawShock>,
    /// `[policy]`.
    pub policy: Option<RawPolicy>,
    /// `[pool]`.
    pub pool: Option<RawPool>,
    /// `[sweep]`.
    pub sweep: Option<RawSweep>,
}

/// Parses scenario text into its raw mirror; TOML syntax errors report the line, wrong types and
/// unknown fields report the field path too.
pub fn parse(text: &str, origin: &str) -> Result<RawScenario, ScenarioError> {
    serde_path_to_error::deserialize(toml::Deserializer::new(text)).map_err(|err| {
        let mut path = err.path().to_string();
        let inner = err.into_inner();
        let span = inner.span();
        let line = span.clone().map(|span| line_of(text, span.start));
        let mut message = one_line(inner.message());
        // The TOML reader hands a date-time to serde as a table with a private key; say what it is.
        if span
            .and_then(|s| text.get(s))
            .is_some_and(|v| v.trim().parse::<toml::value::Datetime>().is_ok())
        {
            if let Some(stripped) = path.strip_suffix(DATETIME_KEY) {
                path = stripped.trim_end_matches('.').to_owned();
                message = "invalid type: date-time, expected a number or a table".into();
            } else if let Some(rest) = message.strip_prefix("invalid type: map") {
                message = format!("invalid type: date-time{rest}");
            }
        }
        let location = match (line, path.as_str()) {
            (Some(line), ".") => format!("line {line}: "),
            (Some(line), path) => format!("line {line}, field {path}: "),
            (None, ".") => String::new(),
            (None, path) => format!("field {path}: "),
        };
        ScenarioError::Syntax {
            file: origin.to_owned(),
            location,
            message,
        }
    })
}

/// The key under which the TOML reader presents a date-time to serde.
const DATETIME_KEY: &str = "$__toml_private_datetime";

/// The 1-based line holding byte `offset`; offsets past the end count as the last line.
fn line_of(text: &str, offset: usize) -> usize {
    let end = offset.min(text.len());
    1 + text.as_bytes()[..end].iter().filter(|&&b| b == b'\n').count()
}

/// Joins a multi-line parser message into one line, so each error prints as a single line.
fn one_line(message: &str) -> String {
    message
        .lines()
        .map(str::trim)
        .filter(|l| !l.is_empty())
        .collect::<Vec<_>>()
        .join("; ")
}

#[cfg(test)]
mod tests {
    use super::*;

    const MINIMAL: &str = "replications = 10\ncycles = 4\n[portfolio]\nborrowers = 20\n[loan]\nprincipal = 100\n";

    fn syntax(text: &str) -> (String, String) {
        match parse(text, "case.toml") {
            Err(ScenarioError::Syntax {
                file,
                location,
                message,
            }) => {
                assert_eq!(file, "case.toml");
                (location, message)
            }
            other => panic!("expected a syntax error, got {other:?}"),
        }
    }

    #[test]
    fn integers_are_accepted_as_numbers_and_quoted_as_written() {
        let raw = parse(MINIMAL, "case.toml").unwrap();
        let principal = raw.loan.unwrap().principal.unwrap();
        assert_eq!(principal.value, 100.0);
        assert_eq!(principal.text(), "100");
        assert_eq!(
            Num {
                value: 2.0,
                integer: None
            }
            .text(),
            "2.0"
        );
        assert_eq!(
            Num {
                value: f64::NAN,
                integer: None
            }
            .text(),
            "nan"
        );
        assert_eq!(
            Num {
                value: f64::NEG_INFINITY,
                integer: None
            }
            .text(),
            "-inf"
        );
    }

    #[test]
    fn toml_syntax_error_reports_the_line() {
        let (location, message) = syntax("replications = 10\ncycles = 4\n[portfolio\nborrowers = 20\n");
        assert_eq!(location, "line 3: ");
        assert!(!message.contains('\n'));
        assert!(!message.is_empty());
    }

    #[test]
    fn wrong_type_reports_path_and_line() {
        let text = format!(
            "{MINIMAL}[[shock]]\nname = \"flood\"\nscope = \"village\"\nprobability = 0.1\nseverity = \"high\"\n"
        );
        let (location, message) = syntax(&text);
        assert_eq!(location, "line 11, field shock[0].severity: ");
        assert!(message.contains("invalid type: string \"high\""), "{message}");
    }

    #[test]
    fn float_for_an_integer_is_a_type_error() {
        let (location, message) = syntax(&MINIMAL.replace("cycles = 4", "cycles = 4.5"));
        assert_eq!(location, "line 2, field cycles: ");
        assert!(message.contains("expected an integer"), "{message}");
    }

    #[test]
    fn unknown_field_names_the_field() {
        let (location, message) = syntax(&format!("{MINIMAL}[policy]\ngroupsize = 4\n"));
        assert!(location.contains("field policy.groupsize"), "{location}");
        assert!(message.contains("unknown field `groupsize`"), "{message}");
    }

    #[test]
    fn distribution_tables_check_their_parameters() {
        let (location, message) = syntax(&format!(
            "{MINIMAL}[borrowers]\nincome = {{ kind = \"uniform\", low = 1, mean = 2 }}\n"
        ));
        assert!(location.contains("field borrowers.income"), "{location}");
        assert!(
            message.contains("`mean` is not a parameter of a uniform distribution"),
            "{message}"
        );
        let (_, message) = syntax(&format!(
            "{MINIMAL}[borrowers]\nrisk = {{ kind = \"gamma\", mean = 2 }}\n"
        ));
        assert!(message.contains("a gamma distribution needs `cv`"), "{message}");
        let (_, message) = syntax(&format!("{MINIMAL}[borrowers]\nrisk = {{ mean = 2 }}\n"));
        assert!(message.contains("needs `kind`"), "{message}");
        let (location, message) = syntax(&format!(
            "{MINIMAL}[borrowers]\nrisk = {{ kind = \"beta\", mean = 0.5, sd = \"x\" }}\n"
        ));
        assert!(location.contains("field borrowers.risk.sd"), "{location}");
        assert!(message.contains("expected a number"), "{message}");
    }

    #[test]
    fn distribution_forms_parse() {
        let text =
            format!("{MINIMAL}[borrowers]\nincome = {{ kind = \"lognormal\", mean = 1.3, cv = 0.4 }}\nrisk = 2\n");
        let b = parse(&text, "case.toml").unwrap().borrowers.unwrap();
        assert!(matches!(b.income, Some(RawDist::Lognormal { .. })));
        assert!(matches!(b.risk, Some(RawDist::Number(Num { integer: Some(2), .. }))));
        let text = format!("{MINIMAL}[borrowers]\nincome = {{ kind = \"weibull\" }}\n");
        let b = parse(&text, "case.toml").unwrap().borrowers.unwrap();
        assert_eq!(b.income, Some(RawDist::Unknown { kind: "weibull".into() }));
    }

    #[test]
    fn curve_tables_keep_key_order_and_report_value_paths() {
        let shock = "[[shock]]\nname = \"a\"\nscope = \"member\"\n";
        let text = format!(
            "{MINIMAL}{shock}probability = {{ curve = \"table\", values = {{ \"3\" = 0.06, \"2\" = 0.08 }} }}\n"
        );
        let raw = parse(&text, "case.toml").unwrap();
        match &raw.shock[0].probability {
            Some(RawProbability::Curve(RawCurve::Table { values })) => {
                let keys: Vec<&str> = values.iter().map(|(k, _)| k.as_str()).collect();
                assert_eq!(keys, ["3", "2"]);
            }
            other => panic!("unexpected {other:?}"),
        }
        let text = format!("{MINIMAL}{shock}probability = {{ curve = \"table\", values = {{ \"2\" = true }} }}\n");
        let (location, _) = syntax(&text);
        assert!(location.contains("field shock[0].probability.values.2"), "{location}");
        let text = format!("{MINIMAL}{shock}probability = {{ curve = \"power\", value = 0.5 }}\n");
        let (_, message) = syntax(&text);
        assert!(
            message.contains("`value` is not a parameter of a power curve"),
            "{message}"
        );
    }

    #[test]
    fn sweep_keeps_key_order_and_types_each_element() {
        let text = format!("{MINIMAL}[sweep]\nexclusion_cycles = [0, \"permanent\"]\ngroup_size = [3, 2]\n");
        let sweep = parse(&text, "case.toml").unwrap().sweep.unwrap();
        let keys: Vec<&str> = sweep.axes.iter().map(RawAxis::key).collect();
        assert_eq!(keys, ["exclusion_cycles", "group_size"]);
        assert_eq!(sweep.axes[1], RawAxis::GroupSize(vec![Int(3), Int(2)]));

        let (location, message) = syntax(&format!("{MINIMAL}[sweep]\npeer_cover = [0.1, \"half\"]\n"));
        assert!(location.contains("field sweep.peer_cover[1]"), "{location}");
        assert!(message.contains("expected a number"), "{message}");

        let (location, message) = syntax(&format!("{MINIMAL}[sweep]\ngroup_size = 4\n"));
        assert!(location.contains("field sweep.group_size"), "{location}");
        assert!(message.contains("expected a list of alternative values"), "{message}");
    }

    #[test]
    fn unknown_sweep_key_names_the_key() {
        let (location, message) = syntax(&format!("{MINIMAL}[sweep]\nprincipal = [100, 200]\n"));
        assert!(location.contains("field sweep.principal"), "{location}");
        assert!(message.contains("`principal` is not a [policy] field"), "{message}");
    }

    #[test]
    fn exclusion_accepts_integers_and_words() {
        let text = format!("{MINIMAL}[policy]\nexclusion_cycles = \"forever\"\n");
        let p = parse(&text, "case.toml").unwrap().policy.unwrap();
        assert_eq!(p.exclusion_cycles, Some(RawExclusion::Word("forever".into())));
        let (_, message) = syntax(&format!("{MINIMAL}[policy]\nexclusion_cycles = 1.5\n"));
        assert!(
            message.contains("expected an integer >= 0 or \"permanent\""),
            "{message}"
        );
    }

    #[test]
    fn line_of_counts_from_one_and_tolerates_any_offset() {
        assert_eq!(line_of("a\nb\nc", 0), 1);
        assert_eq!(line_of("a\nb\nc", 2), 2);
        assert_eq!(line_of("a\nb\nc", 999), 3);
    }
}
