//! The scenario file as written: a serde mirror of the TOML text, before any range check.
//!
//! Every scalar is kept with where it came from (`W<T>`: its byte span in the file, the `[sweep]`
//! element that replaced it, or the command-line flag that overrode it), so that every refusal,
//! range errors included, names the line and quotes the value exactly as written. Wrong types and
//! unknown fields are refused here by serde (the model's enums derive `Deserialize`; distributions
//! and curves are internally tagged enums with `deny_unknown_fields`). Required fields are optional
//! here so that a missing one is reported by its full path (`portfolio.borrowers`).

use super::{ExclusionScope, Formation, Liability, Matching, ScenarioError, ShockScope};
use serde::Deserialize;
use serde::de::{self, MapAccess, SeqAccess, Visitor};
use std::fmt;
use std::ops::Range;

/// Where a raw value came from.
#[derive(Debug, Clone, PartialEq)]
pub enum Origin {
    /// Written in place, at these bytes of the file.
    File(Range<usize>),
    /// An element of a `[sweep]` list: `sweep.PATH[i]`, at these bytes of the file.
    Swept { name: String, span: Range<usize> },
    /// A command-line flag (`--replications`) and its argument as given.
    Flag { flag: &'static str, text: String },
}

impl Origin {
    /// Byte offset used to order two values ("the later one"); flags come after the whole file.
    pub fn position(&self) -> usize {
        match self {
            Origin::File(s) | Origin::Swept { span: s, .. } => s.start,
            Origin::Flag { .. } => usize::MAX,
        }
    }
}

/// A raw value and where it came from (the serde side is `toml::Spanned<T>`).
#[derive(Debug, Clone, PartialEq)]
pub struct W<T> {
    /// The value.
    pub value: T,
    /// Where it was written.
    pub origin: Origin,
}

impl<'de, T: Deserialize<'de>> Deserialize<'de> for W<T> {
    fn deserialize<D: de::Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        let spanned = toml::Spanned::<T>::deserialize(d)?;
        let span = spanned.span();
        Ok(W {
            value: spanned.into_inner(),
            origin: Origin::File(span),
        })
    }
}

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

/// A distribution table, selected by `kind`.
#[derive(Debug, Clone, PartialEq, Deserialize)]
#[serde(tag = "kind", rename_all = "snake_case", deny_unknown_fields)]
pub enum DistTable {
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
}

/// A distribution as written: a bare number (a fixed value) or a table.
#[derive(Debug, Clone, PartialEq)]
pub enum RawDist {
    /// A bare number, meaning a fixed value.
    Number(Num),
    /// A table with a `kind`.
    Table(DistTable),
}

/// A group-size curve table, selected by `curve` (member-scope shock probabilities only).
#[derive(Debug, Clone, PartialEq, Deserialize)]
#[serde(tag = "curve", rename_all = "snake_case", deny_unknown_fields)]
pub enum RawCurve {
    /// `{ curve = "constant", value }`.
    Constant { value: Num },
    /// `{ curve = "power", p }`.
    Power { p: Num },
    /// `{ curve = "power_plus_log", p }`.
    PowerPlusLog { p: Num },
    /// `{ curve = "table", values = { "2" = 0.08, ... } }`, keys kept as written and in file order.
    Table { values: NumTable },
}

/// A table of numbers keyed by strings, kept in file order.
#[derive(Debug, Clone, PartialEq)]
pub struct NumTable(pub Vec<(String, Num)>);

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

/// A shock probability as written: a number, or a group-size curve table.
#[derive(Debug, Clone, PartialEq)]
pub enum RawProbability {
    /// A bare number.
    Number(Num),
    /// A table with a `curve` key.
    Curve(RawCurve),
}

/// Deserialises "a number or a table": numbers through `number`, tables through `T`.
macro_rules! number_or_table {
    ($ty:ident, $number:path, $table:ty, $wrap:path, $expecting:expr) => {
        impl<'de> Deserialize<'de> for $ty {
            fn deserialize<D: de::Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
                struct V;
                impl<'de> Visitor<'de> for V {
                    type Value = $ty;
                    fn expecting(&self, f: &mut fmt::Formatter) -> fmt::Result {
                        f.write_str($expecting)
                    }
                    fn visit_i64<E: de::Error>(self, v: i64) -> Result<$ty, E> {
                        Num::deserialize(de::value::I64Deserializer::new(v)).map($number)
                    }
                    fn visit_u64<E: de::Error>(self, v: u64) -> Result<$ty, E> {
                        Num::deserialize(de::value::U64Deserializer::new(v)).map($number)
                    }
                    fn visit_f64<E: de::Error>(self, v: f64) -> Result<$ty, E> {
                        Ok($number(Num {
                            value: v,
                            integer: None,
                        }))
                    }
                    fn visit_map<A: MapAccess<'de>>(self, map: A) -> Result<$ty, A::Error> {
                        <$table>::deserialize(de::value::MapAccessDeserializer::new(map)).map($wrap)
                    }
                }
                d.deserialize_any(V)
            }
        }
    };
}

number_or_table!(
    RawDist,
    RawDist::Number,
    DistTable,
    RawDist::Table,
    "a number or a distribution table such as { kind = \"uniform\", low = 0.5, high = 1.5 }"
);
number_or_table!(
    RawProbability,
    RawProbability::Number,
    RawCurve,
    RawProbability::Curve,
    "a probability or a group-size curve table such as { curve = \"power\", p = 0.5 }"
);

/// `exclusion_cycles` as written: an integer, or a word that should be `"permanent"`.
#[derive(Debug, Clone, PartialEq)]
pub enum RawExclusion {
    /// A number of cycles (not yet range-checked).
    Cycles(i64),
    /// A word (only `"permanent"` is accepted by `validate`).
    Word(String),
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
    pub name: Option<W<String>>,
    /// Required: member, group, village or portfolio.
    pub scope: Option<W<ShockScope>>,
    /// Required: a number or (member scope) a curve.
    pub probability: Option<W<RawProbability>>,
    /// Member scope only.
    pub village_correlation: Option<W<Num>>,
    /// Member scope only.
    pub portfolio_correlation: Option<W<Num>>,
    /// Unit scopes only.
    pub reach: Option<W<Num>>,
    /// Share of income lost when hit.
    pub severity: Option<W<RawDist>>,
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
    pub from: Option<W<Int>>,
    /// Last cycle of the window.
    pub to: Option<W<Int>>,
    /// Probability in force during the window.
    pub probability: Option<W<Num>>,
}

/// The `[portfolio]` table.
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields, expecting = "a [portfolio] table")]
pub struct RawPortfolio {
    /// Required: borrower slots.
    pub borrowers: Option<W<Int>>,
    /// Villages.
    pub villages: Option<W<Int>>,
}

/// The `[loan]` table.
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields, expecting = "a [loan] table")]
pub struct RawLoan {
    /// Required: principal per member per cycle.
    pub principal: Option<W<Num>>,
    /// Flat interest per cycle.
    pub interest_rate: Option<W<Num>>,
    /// Share of unpaid principal recovered.
    pub recovery_rate: Option<W<Num>>,
    /// Growth of a member's principal after a cycle she repaid herself.
    pub growth: Option<W<Num>>,
    /// The cap on a member's principal, in multiples of the first loan.
    pub max_multiple: Option<W<Num>>,
}

/// The `[borrowers]` table.
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields, expecting = "a [borrowers] table")]
pub struct RawBorrowers {
    /// Income ratio distribution.
    pub income: Option<W<RawDist>>,
    /// Risk multiplier distribution.
    pub risk: Option<W<RawDist>>,
    /// Growth of the income ratio per cycle since entry.
    pub income_growth: Option<W<Num>>,
}

/// The `[behaviour]` table (strategic default); absent means nobody defaults by choice.
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields, expecting = "a [behaviour] table")]
pub struct RawBehaviour {
    /// Required: net benefit of one more cycle of access, in units of the amount due.
    pub loan_value: Option<W<Num>>,
    /// Required: discount factor per cycle.
    pub discount: Option<W<Num>>,
    /// Required: temptation distribution, in units of the amount due.
    pub temptation: Option<W<RawDist>>,
    /// What peers impose on a member who walks away (joint liability), in units of the amount due.
    pub social_sanction: Option<W<Num>>,
}

/// The `[policy]` table.
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields, expecting = "a [policy] table")]
pub struct RawPolicy {
    /// Members per group.
    pub group_size: Option<W<Int>>,
    /// joint or individual.
    pub liability: Option<W<Liability>>,
    /// Share of surplus put towards peers' shortfalls.
    pub peer_cover: Option<W<Num>>,
    /// Cycles excluded after default, or "permanent".
    pub exclusion_cycles: Option<W<RawExclusion>>,
    /// group or defaulters.
    pub exclusion_scope: Option<W<ExclusionScope>>,
    /// reshuffle or persistent.
    pub formation: Option<W<Formation>>,
    /// random or assortative.
    pub matching: Option<W<Matching>>,
    /// Smallest group size formation may make.
    pub min_group_size: Option<W<Int>>,
    /// Largest group size formation may make.
    pub max_group_size: Option<W<Int>>,
    /// How far sizes may stray from group_size when the bounds are not written.
    pub size_slack: Option<W<Int>>,
}

/// The `[pool]` table.
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields, expecting = "a [pool] table")]
pub struct RawPool {
    /// Per-cycle departure probability.
    pub dropout: Option<W<Num>>,
    /// Whether emptied slots are refilled.
    pub replace_departures: Option<W<bool>>,
}

/// The `[finance]` table.
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields, expecting = "a [finance] table")]
pub struct RawFinance {
    /// Loan cycles per year.
    pub cycles_per_year: Option<W<Int>>,
    /// Label of money figures.
    pub currency: Option<W<String>>,
    /// Per loan per cycle, in currency.
    pub operating_cost: Option<W<Num>>,
    /// Rate per cycle on principal outstanding.
    pub cost_of_funds: Option<W<Num>>,
    /// Share of principal charged at disbursement.
    pub fee_rate: Option<W<Num>>,
}

/// One `[sweep]` entry: the path as written (dotted and quoted keys joined with `.`), its list of
/// alternative values, and where the list was written (arms follow the order of these lines).
#[derive(Debug, Clone, PartialEq)]
pub struct RawAxis {
    /// The key path, such as `group_size` or `shock.illness.village_correlation`.
    pub path: String,
    /// The listed values, each with its own span.
    pub values: Vec<W<toml::Value>>,
    /// Where the list's first value was written (none for an empty list).
    pub span: Option<Range<usize>>,
}

/// The `[sweep]` table, flattened to one axis per list and sorted by the line of each list.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct RawSweep {
    /// One entry per list, in the order of their lines in the file.
    pub axes: Vec<RawAxis>,
}

/// A node of the `[sweep]` tree: a sub-table (from a dotted key or a `[sweep.x]` header) or a list.
/// Implicit tables of dotted keys have no span in the TOML reader, so a list is placed by the span of
/// its first element (on the key's line for any list written on one line).
enum SweepNode {
    Table(Vec<(String, SweepNode)>),
    List(Vec<W<toml::Value>>),
}

impl<'de> Deserialize<'de> for SweepNode {
    fn deserialize<D: de::Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        struct V;
        impl<'de> Visitor<'de> for V {
            type Value = SweepNode;
            fn expecting(&self, f: &mut fmt::Formatter) -> fmt::Result {
                f.write_str("a list of alternative values, such as [2, 3, 4]")
            }
            fn visit_map<A: MapAccess<'de>>(self, mut map: A) -> Result<SweepNode, A::Error> {
                let mut out = Vec::new();
                while let Some(key) = map.next_key::<String>()? {
                    out.push((key, map.next_value::<SweepNode>()?));
                }
                Ok(SweepNode::Table(out))
            }
            fn visit_seq<A: SeqAccess<'de>>(self, mut seq: A) -> Result<SweepNode, A::Error> {
                let mut out = Vec::new();
                while let Some(x) = seq.next_element::<W<toml::Value>>()? {
                    out.push(x);
                }
                Ok(SweepNode::List(out))
            }
        }
        d.deserialize_any(V)
    }
}

impl<'de> Deserialize<'de> for RawSweep {
    fn deserialize<D: de::Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        fn flatten(prefix: &str, entries: Vec<(String, SweepNode)>, out: &mut Vec<RawAxis>) {
            for (key, node) in entries {
                let path = if prefix.is_empty() {
                    key
                } else {
                    format!("{prefix}.{key}")
                };
                match node {
                    SweepNode::Table(inner) => flatten(&path, inner, out),
                    SweepNode::List(values) => {
                        let span = match values.first().map(|v| &v.origin) {
                            Some(Origin::File(s)) => Some(s.clone()),
                            _ => None,
                        };
                        out.push(RawAxis { path, values, span })
                    }
                }
            }
        }
        match SweepNode::deserialize(d)? {
            SweepNode::Table(entries) => {
                let mut axes = Vec::new();
                flatten("", entries, &mut axes);
                // Stable: an empty list (no span) keeps its place after the list before it.
                let mut last = 0;
                let mut keyed: Vec<(usize, RawAxis)> = axes
                    .into_iter()
                    .map(|a| {
                        last = a.span.as_ref().map_or(last, |s| s.start);
                        (last, a)
                    })
                    .collect();
                keyed.sort_by_key(|(at, _)| *at);
                Ok(RawSweep {
                    axes: keyed.into_iter().map(|(_, a)| a).collect(),
                })
            }
            SweepNode::List(_) => Err(de::Error::custom(
                "expected a table of fields, each with a list of alternative values",
            )),
        }
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

/// The whole file as written.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields, expecting = "a scenario document")]
pub struct RawScenario {
    /// Free text.
    pub name: Option<W<String>>,
    /// Master seed (a TOML integer, so at most i64::MAX).
    pub seed: Option<W<Int>>,
    /// Required.
    pub replications: Option<W<Int>>,
    /// Required.
    pub cycles: Option<W<Int>>,
    /// Cycles simulated first and not counted.
    pub warmup_cycles: Option<W<Int>>,
    /// `[portfolio]`; required for `borrowers`.
    #[serde(default)]
    pub portfolio: RawPortfolio,
    /// `[loan]`; required for `principal`.
    #[serde(default)]
    pub loan: RawLoan,
    /// `[borrowers]`.
    #[serde(default)]
    pub borrowers: RawBorrowers,
    /// `[[shock]]` tables, in file order.
    #[serde(default, deserialize_with = "shock_list")]
    pub shock: Vec<RawShock>,
    /// `[policy]`.
    #[serde(default)]
    pub policy: RawPolicy,
    /// `[pool]`.
    #[serde(default)]
    pub pool: RawPool,
    /// `[behaviour]`: strategic default, when written.
    #[serde(default)]
    pub behaviour: Option<RawBehaviour>,
    /// `[sweep]`.
    #[serde(default)]
    pub sweep: RawSweep,
    /// `[finance]`.
    #[serde(default)]
    pub finance: RawFinance,
}

/// Parses scenario text into its raw mirror; TOML syntax errors report the line, wrong types and
/// unknown fields report the field path too.
pub fn parse(text: &str, origin: &str) -> Result<RawScenario, ScenarioError> {
    serde_path_to_error::deserialize(toml::Deserializer::new(text)).map_err(|err| {
        // `toml::Spanned` reads its value under private keys; they are no part of the field path.
        let mut path = err
            .path()
            .to_string()
            .split('.')
            .filter(|seg| !seg.starts_with("$__serde_spanned_private"))
            .collect::<Vec<_>>()
            .join(".");
        path = path.replace(".[", "[");
        if path.is_empty() {
            path = ".".into();
        }
        let inner = err.into_inner();
        let span = inner.span();
        let line = span.clone().map(|span| line_of(text, span.start));
        // A quoted key may hold control characters (`"a\nb"`): escape them in the path and in the
        // message that quotes the key, so the message stays on one line and says what was written.
        let mut raw_message = inner.message().to_owned();
        if path.chars().any(char::is_control) {
            for segment in path.split('.').filter(|s| s.chars().any(char::is_control)) {
                raw_message = raw_message.replace(segment, &escape_controls(segment));
            }
            path = escape_controls(&path);
        }
        let mut message = one_line(&raw_message);
        if message.is_empty() {
            message = unexplained_syntax_error(text, span.clone().map_or(0, |s| s.start));
        }
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
        ScenarioError::Syntax {
            file: origin.to_owned(),
            location: location(line, &path),
            message,
        }
    })
}

/// Control characters written as Rust escapes (`\n`, `\u{7f}`), everything else as it is.
pub fn escape_controls(text: &str) -> String {
    text.chars()
        .map(|c| {
            if c.is_control() {
                c.escape_debug().to_string()
            } else {
                c.to_string()
            }
        })
        .collect()
}

/// What is wrong where the TOML reader gave no message: it does so for a control character other
/// than tab (in a comment, say) and for a carriage return not followed by a line feed. Names the first
/// such character on the line of `offset`, or says the line is not valid TOML.
fn unexplained_syntax_error(text: &str, offset: usize) -> String {
    let start = text[..offset.min(text.len())].rfind('\n').map_or(0, |i| i + 1);
    let mut chars = text[start..].chars().peekable();
    while let Some(c) = chars.next() {
        match c {
            '\n' => break,
            '\r' if chars.peek() == Some(&'\n') => {}
            '\r' => return "a carriage return not followed by a line feed (TOML ends lines with LF or CRLF)".into(),
            '\t' => {}
            c if c.is_control() => {
                return format!(
                    "the control character {} is not allowed (TOML allows only tab, in comments as elsewhere)",
                    c.escape_unicode()
                );
            }
            _ => {}
        }
    }
    "this line is not valid TOML".into()
}

/// `line N, field PATH: ` with whichever parts are known.
pub fn location(line: Option<usize>, path: &str) -> String {
    match (line, path) {
        (Some(line), "." | "") => format!("line {line}: "),
        (Some(line), path) => format!("line {line}, field {path}: "),
        (None, "." | "") => String::new(),
        (None, path) => format!("field {path}: "),
    }
}

/// The key under which the TOML reader presents a date-time to serde.
const DATETIME_KEY: &str = "$__toml_private_datetime";

/// The 1-based line holding byte `offset`; offsets past the end count as the last line.
pub fn line_of(text: &str, offset: usize) -> usize {
    let end = offset.min(text.len());
    1 + text.as_bytes()[..end].iter().filter(|&&b| b == b'\n').count()
}

/// Joins a multi-line parser message into one line, so each error prints as a single line.
pub fn one_line(message: &str) -> String {
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
    fn integers_are_accepted_as_numbers_and_keep_their_span() {
        let raw = parse(MINIMAL, "case.toml").unwrap();
        let principal = raw.loan.principal.unwrap();
        assert_eq!(principal.value.value, 100.0);
        assert_eq!(principal.value.text(), "100");
        let at = MINIMAL.find("100").unwrap();
        assert_eq!(principal.origin, Origin::File(at..at + 3));
        assert_eq!(float_text(2.0), "2.0");
        assert_eq!(float_text(f64::NAN), "nan");
        assert_eq!(float_text(f64::NEG_INFINITY), "-inf");
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
    fn unknown_field_and_unknown_word_name_the_field() {
        let (location, message) = syntax(&format!("{MINIMAL}[policy]\ngroupsize = 4\n"));
        assert_eq!(location, "line 8, field policy.groupsize: ");
        assert!(message.contains("unknown field `groupsize`"), "{message}");
        let (location, message) = syntax(&format!("{MINIMAL}[policy]\nliability = \"shared\"\n"));
        assert_eq!(location, "line 8, field policy.liability: ");
        assert!(
            message.contains("unknown variant `shared`, expected `joint` or `individual`"),
            "{message}"
        );
    }

    #[test]
    fn distribution_tables_check_their_parameters() {
        let (location, message) = syntax(&format!(
            "{MINIMAL}[borrowers]\nincome = {{ kind = \"uniform\", low = 1, mean = 2 }}\n"
        ));
        assert_eq!(location, "line 8, field borrowers.income: ");
        assert!(message.contains("unknown field `mean`"), "{message}");
        let (_, message) = syntax(&format!(
            "{MINIMAL}[borrowers]\nrisk = {{ kind = \"gamma\", mean = 2 }}\n"
        ));
        assert!(message.contains("missing field `cv`"), "{message}");
        let (_, message) = syntax(&format!("{MINIMAL}[borrowers]\nrisk = {{ mean = 2 }}\n"));
        assert!(message.contains("missing field `kind`"), "{message}");
        let (_, message) = syntax(&format!("{MINIMAL}[borrowers]\nrisk = {{ kind = \"weibull\" }}\n"));
        assert!(message.contains("unknown variant `weibull`"), "{message}");
    }

    #[test]
    fn distribution_forms_parse() {
        let text =
            format!("{MINIMAL}[borrowers]\nincome = {{ kind = \"lognormal\", mean = 1.3, cv = 0.4 }}\nrisk = 2\n");
        let b = parse(&text, "case.toml").unwrap().borrowers;
        assert!(matches!(
            b.income.unwrap().value,
            RawDist::Table(DistTable::Lognormal { .. })
        ));
        assert!(matches!(
            b.risk.unwrap().value,
            RawDist::Number(Num { integer: Some(2), .. })
        ));
    }

    #[test]
    fn curve_tables_keep_key_order() {
        let shock = "[[shock]]\nname = \"a\"\nscope = \"member\"\n";
        let text = format!(
            "{MINIMAL}{shock}probability = {{ curve = \"table\", values = {{ \"3\" = 0.06, \"2\" = 0.08 }} }}\n"
        );
        let raw = parse(&text, "case.toml").unwrap();
        match &raw.shock[0].probability.as_ref().unwrap().value {
            RawProbability::Curve(RawCurve::Table { values }) => {
                let keys: Vec<&str> = values.0.iter().map(|(k, _)| k.as_str()).collect();
                assert_eq!(keys, ["3", "2"]);
            }
            other => panic!("unexpected {other:?}"),
        }
        let text = format!("{MINIMAL}{shock}probability = {{ curve = \"power\", value = 0.5 }}\n");
        let (location, message) = syntax(&text);
        assert_eq!(location, "line 10, field shock[0].probability: ");
        assert!(message.contains("unknown field `value`"), "{message}");
    }

    #[test]
    fn sweep_axes_follow_the_lines_of_their_keys() {
        let text = format!(
            "{MINIMAL}[[shock]]\nname = \"ill\"\nscope = \"member\"\nprobability = 0.1\n[sweep]\nshock.ill.reach = [1]\ngroup_size = [3, 2]\n\"shock.ill.village_correlation\" = [0.1]\nshock.ill.probability = [0.2]\n"
        );
        let sweep = parse(&text, "case.toml").unwrap().sweep;
        let keys: Vec<&str> = sweep.axes.iter().map(|a| a.path.as_str()).collect();
        assert_eq!(
            keys,
            [
                "shock.ill.reach",
                "group_size",
                "shock.ill.village_correlation",
                "shock.ill.probability"
            ]
        );
        assert_eq!(sweep.axes[1].values[1].value, toml::Value::Integer(2));

        let (location, message) = syntax(&format!("{MINIMAL}[sweep]\ngroup_size = 4\n"));
        assert_eq!(location, "line 8, field sweep.group_size: ");
        assert!(message.contains("expected a list of alternative values"), "{message}");
    }

    #[test]
    fn exclusion_accepts_integers_and_words() {
        let text = format!("{MINIMAL}[policy]\nexclusion_cycles = \"forever\"\n");
        let p = parse(&text, "case.toml").unwrap().policy;
        assert_eq!(p.exclusion_cycles.unwrap().value, RawExclusion::Word("forever".into()));
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
