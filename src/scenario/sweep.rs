//! `[sweep]`: resolves each listed path to its line of the bounds table, checks the lists, and puts
//! one listed value in place in the raw scenario, so that it is validated as if written there.

use super::ScenarioError;
use super::bounds::{self, Setter};
use super::limits;
use super::raw::{Origin, RawAxis, RawDist, RawProbability, RawScenario, W, line_of};
use super::validate::Checker;
use std::collections::HashMap;

type Result<T> = std::result::Result<T, ScenarioError>;

/// The fields that set the run's size or its random draws; they are the same for every arm.
const UNSWEPT: [&str; 6] = [
    "replications",
    "cycles",
    "warmup_cycles",
    "portfolio.borrowers",
    "portfolio.villages",
    "seed",
];

/// One resolved `[sweep]` list.
pub struct Axis {
    /// The path as labels and columns name it: a `[policy]` field by its bare name
    /// (`group_size`), anything else by its full path (`shock.illness.village_correlation`).
    pub path: String,
    /// The values, each with its origin set to `sweep.PATH[i]`.
    pub values: Vec<W<toml::Value>>,
    /// Each value as labels show it.
    pub labels: Vec<String>,
    /// Each value as written.
    pub written: Vec<String>,
    /// The key as written in `[sweep]`, for messages.
    key: String,
    /// The shock the path names (0 when it names no shock).
    shock: usize,
    setter: Setter,
}

impl Axis {
    /// Puts value `i` in place in `raw`; a value of the wrong type is refused here, naming it.
    pub fn put(&self, ck: &Checker, raw: &mut RawScenario, i: usize) -> Result<()> {
        let v = &self.values[i];
        (self.setter)(raw, self.shock, v.clone()).map_err(|message| {
            let Origin::Swept { name, .. } = &v.origin else {
                unreachable!("swept values carry their sweep name")
            };
            ck.syntax(name, ck.line(Some(&v.origin)), message)
        })
    }
}

/// The value as an arm label shows it: numbers in plain `Display` (`1.0` is `1`), words unquoted.
fn label(v: &toml::Value) -> String {
    match v {
        toml::Value::String(s) => s.clone(),
        toml::Value::Integer(i) => i.to_string(),
        toml::Value::Float(x) => (x + 0.0).to_string(),
        toml::Value::Boolean(b) => b.to_string(),
        other => other.to_string(),
    }
}

/// The line of an empty list `KEY = []` (an empty list has no element to take a span from).
fn empty_list_line(text: &str, path: &str) -> Option<usize> {
    let last = path.rsplit('.').next().unwrap_or(path);
    text.lines()
        .position(|l| {
            let compact: String = l.chars().filter(|c| !c.is_whitespace()).collect();
            compact.contains(&format!("{last}=[]")) || compact.contains(&format!("{last}\"=[]"))
        })
        .map(|i| i + 1)
}

fn is_name(s: &str) -> bool {
    !s.is_empty() && s.bytes().all(|b| b.is_ascii_alphanumeric() || b == b'_' || b == b'-')
}

/// What a sweep may list, for the message about a key it may not.
fn sweepable() -> String {
    let mut direct = Vec::new();
    let mut shock = Vec::new();
    for f in bounds::FIELDS.iter().filter(|f| f.sweep.is_some()) {
        if let Some(field) = f.path.strip_prefix("shock.*.") {
            shock.push(field);
        } else {
            direct.push(f.path.strip_prefix("policy.").unwrap_or(f.path));
        }
    }
    format!(
        "a sweep may list {}, or shock.NAME.FIELD with FIELD one of {}",
        direct.join(", "),
        shock.join(", ")
    )
}

/// Resolves the `[sweep]` lists in the order of their lines; refuses unknown and unsweepable keys,
/// empty lists, repeated values and sweeps of more than `MAX_ARMS` arms (before building any arm).
pub fn resolve(ck: &Checker, raw: &RawScenario) -> Result<Vec<Axis>> {
    let mut axes: Vec<Axis> = Vec::with_capacity(raw.sweep.axes.len());
    let mut keys: HashMap<String, String> = HashMap::new();
    for RawAxis { path, values, span } in &raw.sweep.axes {
        let field_name = format!("sweep.{path}");
        let line = match span {
            Some(s) => Some(line_of(ck.text, s.start)),
            None => empty_list_line(ck.text, path),
        };
        let refuse = |message: String| ck.syntax(&field_name, line, message);
        let segments: Vec<&str> = path.split('.').collect();
        let (pattern, shown, shock) = match segments.as_slice() {
            [name] if bounds::field(&format!("policy.{name}")).is_some() => {
                (format!("policy.{name}"), (*name).to_owned(), 0)
            }
            ["policy", name] => (format!("policy.{name}"), (*name).to_owned(), 0),
            ["shock", name, field] => {
                if !is_name(name) {
                    return Err(refuse(format!(
                        "`{name}` cannot name a shock in a path: a shock name used in [sweep] is made of letters, digits, _ and -"
                    )));
                }
                let named: Vec<usize> = raw
                    .shock
                    .iter()
                    .enumerate()
                    .filter(|(_, s)| s.name.as_ref().is_some_and(|n| n.value == *name))
                    .map(|(i, _)| i)
                    .collect();
                let i = match named.as_slice() {
                    [i] => *i,
                    [] => {
                        let names: Vec<String> = raw
                            .shock
                            .iter()
                            .filter_map(|s| s.name.as_ref().map(|n| n.value.clone()))
                            .collect();
                        return Err(refuse(format!(
                            "no shock is named `{name}` (the shocks are: {})",
                            if names.is_empty() {
                                "none".to_owned()
                            } else {
                                names.join(", ")
                            }
                        )));
                    }
                    [first, second, ..] => {
                        return Err(refuse(format!(
                            "shock[{first}] and shock[{second}] are both named `{name}`; a shock named in a path must be unique"
                        )));
                    }
                };
                (format!("shock.*.{field}"), path.clone(), i)
            }
            _ => (path.clone(), path.clone(), 0),
        };
        if UNSWEPT.contains(&pattern.as_str()) {
            return Err(refuse(format!(
                "`{path}` cannot be swept: {} set the run's size and random draws, the same for every arm",
                UNSWEPT.join(", ")
            )));
        }
        let Some(field) = bounds::field(&pattern) else {
            return Err(refuse(format!(
                "`{path}` is not a field a sweep can vary; {}",
                sweepable()
            )));
        };
        let Some(setter) = field.sweep else {
            return Err(refuse(format!("`{path}` cannot be swept; {}", sweepable())));
        };
        if field.plain_only {
            let table = match pattern.as_str() {
                "shock.*.probability" => raw.shock[shock]
                    .probability
                    .as_ref()
                    .is_some_and(|w| matches!(w.value, RawProbability::Curve(_))),
                "shock.*.severity" => raw.shock[shock]
                    .severity
                    .as_ref()
                    .is_some_and(|w| matches!(w.value, RawDist::Table(_))),
                "borrowers.income" => raw
                    .borrowers
                    .income
                    .as_ref()
                    .is_some_and(|w| matches!(w.value, RawDist::Table(_))),
                "borrowers.risk" => raw
                    .borrowers
                    .risk
                    .as_ref()
                    .is_some_and(|w| matches!(w.value, RawDist::Table(_))),
                _ => false,
            };
            if table {
                return Err(refuse(format!(
                    "`{path}` is written as a table (a curve or a distribution); a swept value replaces only a plain number"
                )));
            }
        }
        if let Some(earlier) = keys.insert(shown.clone(), path.clone()) {
            return Err(refuse(format!(
                "`{path}` sweeps the same field as `{earlier}`, listed earlier"
            )));
        }
        if values.is_empty() {
            return Err(ScenarioError::Invalid {
                file: ck.file.to_owned(),
                line,
                field: field_name,
                value: "[]".into(),
                allowed: "a non-empty list of alternative values".into(),
            });
        }
        // Messages name a value by the key as written (`sweep.policy.group_size[1]` if so written).
        let swept_name = |j: usize| format!("sweep.{path}[{j}]");
        let mut labelled = Vec::with_capacity(values.len());
        let mut written = Vec::with_capacity(values.len());
        let mut out = Vec::with_capacity(values.len());
        for (j, v) in values.iter().enumerate() {
            let span = match &v.origin {
                Origin::File(s) => s.clone(),
                _ => 0..0,
            };
            let v = W {
                value: v.value.clone(),
                origin: Origin::Swept {
                    name: swept_name(j),
                    span,
                },
            };
            let text = ck.written(&v, || label(&v.value));
            if matches!(v.value, toml::Value::Array(_) | toml::Value::Table(_)) {
                return Err(ck.invalid(
                    "",
                    Some(&v.origin),
                    text,
                    "a single value: a sweep replaces one scalar field",
                ));
            }
            labelled.push(label(&v.value));
            written.push(text);
            out.push(v);
        }
        axes.push(Axis {
            path: shown,
            values: out,
            labels: labelled,
            written,
            key: path.clone(),
            shock,
            setter,
        });
    }

    let arms = axes.iter().fold(1u128, |n, a| n.saturating_mul(a.values.len() as u128));
    if arms > limits::MAX_ARMS as u128 {
        let lengths: Vec<String> = axes.iter().map(|a| a.values.len().to_string()).collect();
        let first = raw.sweep.axes.iter().find_map(|a| a.span.clone().map(Origin::File));
        return Err(ck.invalid(
            "sweep",
            first.as_ref(),
            format!("{arms} arms ({})", lengths.join(" x ")),
            format!(
                "at most {} arms (the product of the sweep list lengths)",
                limits::MAX_ARMS
            ),
        ));
    }

    // Each value has the field's type, and no value is listed twice (labels identify values exactly:
    // f64 `Display` round-trips).
    for axis in &axes {
        let mut scratch = raw.clone();
        let mut seen: HashMap<&str, usize> = HashMap::with_capacity(axis.values.len());
        for j in 0..axis.values.len() {
            axis.put(ck, &mut scratch, j)?;
            if let Some(first) = seen.insert(&axis.labels[j], j) {
                return Err(ck.invalid(
                    "",
                    Some(&axis.values[j].origin),
                    axis.written[j].clone(),
                    format!("a value not already listed (it repeats sweep.{}[{first}])", axis.key),
                ));
            }
        }
    }
    Ok(axes)
}
