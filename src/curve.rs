//! Group-size curves: the per-member failure probability phi(k) as a function of group size k.
//!
//! Shared by the scenario format (a member-scope shock's `probability` may be a curve), the engine
//! (which evaluates the curve at each arm's group size) and the analytic companion (which optimises
//! k * ln(1 - phi(k)) in closed form), so it lives in one place.

use serde::Serialize;
use std::collections::BTreeMap;

/// A validated group-size curve.
#[derive(Debug, Clone, PartialEq, Serialize)]
#[serde(tag = "curve", rename_all = "snake_case")]
pub enum GroupSizeCurve {
    /// phi(k) = value for every k >= 1.
    Constant { value: f64 },
    /// phi(k) = k^(-p), defined for k >= 1.
    Power { p: f64 },
    /// phi(k) = 1 / (k^p + (ln k)^(1/p)), defined for k >= 2.
    PowerPlusLog { p: f64 },
    /// phi(k) read from a table of integer group sizes.
    Table { values: BTreeMap<u32, f64> },
}

/// Why a curve cannot be built or evaluated.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum CurveError {
    /// A parameter is outside what the curve allows.
    #[error("{name} = {value} is not allowed: {allowed}")]
    BadParameter {
        name: &'static str,
        value: String,
        allowed: &'static str,
    },
}

impl GroupSizeCurve {
    /// A constant curve; `value` must lie in [0, 1].
    pub fn constant(value: f64) -> Result<Self, CurveError> {
        if !(0.0..=1.0).contains(&value) {
            return Err(CurveError::BadParameter {
                name: "value",
                value: value.to_string(),
                allowed: "a probability in [0, 1]",
            });
        }
        Ok(GroupSizeCurve::Constant { value })
    }

    /// The power curve k^(-p); `p` must be finite and > 0.
    pub fn power(p: f64) -> Result<Self, CurveError> {
        check_exponent(p)?;
        Ok(GroupSizeCurve::Power { p })
    }

    /// The power-plus-log curve 1 / (k^p + (ln k)^(1/p)); `p` must be finite and > 0.
    pub fn power_plus_log(p: f64) -> Result<Self, CurveError> {
        check_exponent(p)?;
        Ok(GroupSizeCurve::PowerPlusLog { p })
    }

    /// A table curve; it must be non-empty, keyed by sizes >= 1, with probabilities in [0, 1].
    pub fn table(values: BTreeMap<u32, f64>) -> Result<Self, CurveError> {
        if values.is_empty() {
            return Err(CurveError::BadParameter {
                name: "values",
                value: "{}".into(),
                allowed: "at least one group size",
            });
        }
        for (&k, &q) in &values {
            if k == 0 {
                return Err(CurveError::BadParameter {
                    name: "values",
                    value: "\"0\"".into(),
                    allowed: "group sizes >= 1",
                });
            }
            if !(0.0..=1.0).contains(&q) {
                return Err(CurveError::BadParameter {
                    name: "values",
                    value: format!("\"{k}\" = {q}"),
                    allowed: "probabilities in [0, 1]",
                });
            }
        }
        Ok(GroupSizeCurve::Table { values })
    }

    /// The curve's name as written in scenario files.
    pub fn kind_name(&self) -> &'static str {
        match self {
            GroupSizeCurve::Constant { .. } => "constant",
            GroupSizeCurve::Power { .. } => "power",
            GroupSizeCurve::PowerPlusLog { .. } => "power_plus_log",
            GroupSizeCurve::Table { .. } => "table",
        }
    }

    /// The smallest real group size where the curve is defined.
    pub fn domain_start(&self) -> f64 {
        match self {
            GroupSizeCurve::PowerPlusLog { .. } => 2.0,
            GroupSizeCurve::Table { values } => *values.keys().next().unwrap_or(&1) as f64,
            _ => 1.0,
        }
    }

    /// A human-readable description of the integer sizes where the curve is defined.
    pub fn domain_text(&self) -> String {
        match self {
            GroupSizeCurve::PowerPlusLog { .. } => "group sizes >= 2".into(),
            GroupSizeCurve::Table { values } => {
                let keys: Vec<String> = values.keys().map(|k| k.to_string()).collect();
                format!("the table's group sizes {{{}}}", keys.join(", "))
            }
            _ => "group sizes >= 1".into(),
        }
    }

    /// phi(k) at an integer group size, or `None` outside the curve's domain.
    pub fn at(&self, k: u32) -> Option<f64> {
        match self {
            GroupSizeCurve::Table { values } => values.get(&k).copied(),
            _ => self.at_real(k as f64),
        }
    }

    /// phi(x) at a real group size, or `None` outside the domain (a table is defined at its keys only).
    pub fn at_real(&self, x: f64) -> Option<f64> {
        match *self {
            GroupSizeCurve::Constant { value } => (x >= 1.0).then_some(value),
            GroupSizeCurve::Power { p } => (x >= 1.0).then(|| x.powf(-p)),
            GroupSizeCurve::PowerPlusLog { p } => (x >= 2.0).then(|| 1.0 / (x.powf(p) + x.ln().powf(1.0 / p))),
            GroupSizeCurve::Table { ref values } => {
                if x.fract() == 0.0 && x >= 1.0 && x <= u32::MAX as f64 {
                    values.get(&(x as u32)).copied()
                } else {
                    None
                }
            }
        }
    }
}

fn check_exponent(p: f64) -> Result<(), CurveError> {
    if p.is_finite() && p > 0.0 {
        Ok(())
    } else {
        Err(CurveError::BadParameter {
            name: "p",
            value: p.to_string(),
            allowed: "a finite exponent > 0",
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn power_plus_log_is_undefined_below_two() {
        let c = GroupSizeCurve::power_plus_log(0.5).unwrap();
        assert_eq!(c.at(1), None);
        // phi(2) = 1 / (2^0.5 + (ln 2)^2)
        let expected = 1.0 / (2f64.sqrt() + 2f64.ln().powi(2));
        assert!((c.at(2).unwrap() - expected).abs() < 1e-15);
    }

    #[test]
    fn table_is_defined_only_at_its_keys() {
        let c = GroupSizeCurve::table([(2, 0.08), (3, 0.06)].into_iter().collect()).unwrap();
        assert_eq!(c.at(3), Some(0.06));
        assert_eq!(c.at(4), None);
        assert!(GroupSizeCurve::table(BTreeMap::new()).is_err());
    }

    #[test]
    fn power_rejects_non_positive_exponent() {
        assert!(GroupSizeCurve::power(0.0).is_err());
        assert!(GroupSizeCurve::power(f64::NAN).is_err());
        assert_eq!(GroupSizeCurve::power(1.0).unwrap().at(4), Some(0.25));
    }
}
