//! The Basel II IRB capital formula for "other retail" exposures, as a yardstick for the scenario's
//! own correlation.
//!
//! Regulators size capital with the same one-factor model the analytic companion uses, but with a
//! correlation fixed by the probability of default. Setting the scenario's hit probability and
//! correlation beside the formula's shows how the programme's assumed dependence compares with the
//! one banking supervisors assume for small retail loans. Formula: Basel Committee on Banking
//! Supervision, International Convergence of Capital Measurement and Capital Standards, June 2006,
//! paras 328-330.

use super::{AnalyticError, bad, check_probability, normal};

/// The confidence level of the IRB formula.
pub const CONFIDENCE: f64 = 0.999;
/// Risk weight per unit of capital requirement (the reciprocal of the 8 % minimum ratio).
pub const RISK_WEIGHT_MULTIPLIER: f64 = 12.5;

/// The asset correlation R(PD) of other retail exposures: 0.03 (1 - e^(-35 PD)) / (1 - e^(-35)) +
/// 0.16 (1 - (1 - e^(-35 PD)) / (1 - e^(-35))), running from 0.16 at PD = 0 to 0.03 at PD = 1.
pub fn retail_correlation(pd: f64) -> Result<f64, AnalyticError> {
    check_probability("pd", pd)?;
    let weight = (-(-35.0 * pd).exp_m1()) / (-(-35.0f64).exp_m1());
    Ok(0.03 * weight + 0.16 * (1.0 - weight))
}

/// The 99.9 % conditional hit probability Phi((1 - R)^-0.5 Phi^-1(PD) + (R / (1 - R))^0.5 Phi^-1(0.999))
/// at the formula's own R(PD).
pub fn conditional_hit_probability(pd: f64) -> Result<f64, AnalyticError> {
    let r = retail_correlation(pd)?;
    conditional_hit_probability_at(pd, r)
}

/// The same conditional probability at a correlation of the caller's choosing (the scenario's rho).
pub fn conditional_hit_probability_at(pd: f64, correlation: f64) -> Result<f64, AnalyticError> {
    check_probability("pd", pd)?;
    if !(0.0..1.0).contains(&correlation) {
        return Err(bad("correlation", correlation, "a correlation in [0, 1)"));
    }
    if pd == 0.0 || pd == 1.0 {
        return Ok(pd);
    }
    Ok(normal::cdf(
        normal::inv_cdf(pd) / (1.0 - correlation).sqrt()
            + (correlation / (1.0 - correlation)).sqrt() * normal::inv_cdf(CONFIDENCE),
    ))
}

/// The capital requirement K = LGD * (conditional hit probability - PD), per unit of exposure.
pub fn capital_requirement(pd: f64, lgd: f64) -> Result<f64, AnalyticError> {
    check_probability("lgd", lgd)?;
    Ok(lgd * (conditional_hit_probability(pd)? - pd))
}

/// The risk weight 12.5 K, per unit of exposure (multiply by 100 for per cent).
pub fn risk_weight(pd: f64, lgd: f64) -> Result<f64, AnalyticError> {
    Ok(RISK_WEIGHT_MULTIPLIER * capital_requirement(pd, lgd)?)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::analytic::vasicek;

    #[test]
    fn correlation_runs_from_sixteen_to_three_per_cent() {
        // The formula's end points (Basel II framework, June 2006, paras 328-330): R(0) = 0.16, R(1) = 0.03.
        assert!((retail_correlation(0.0).unwrap() - 0.16).abs() < 1e-15);
        assert!((retail_correlation(1.0).unwrap() - 0.03).abs() < 1e-15);
        let mut previous = 1.0;
        for i in 0..=100 {
            let r = retail_correlation(i as f64 / 100.0).unwrap();
            assert!(r <= previous);
            previous = r;
        }
    }

    #[test]
    fn conditional_probability_is_the_large_pool_quantile() {
        for &pd in &[0.001, 0.01, 0.05, 0.2] {
            let r = retail_correlation(pd).unwrap();
            let a = conditional_hit_probability(pd).unwrap();
            let b = vasicek::quantile(CONFIDENCE, pd, r).unwrap();
            assert!((a - b).abs() < 1e-14, "pd = {pd}");
            assert!(a > pd);
        }
    }

    #[test]
    fn edge_and_bad_inputs() {
        assert_eq!(capital_requirement(0.0, 0.45).unwrap(), 0.0);
        assert_eq!(capital_requirement(1.0, 0.45).unwrap(), 0.0);
        assert!(retail_correlation(-0.1).unwrap_err().to_string().contains("pd = -0.1"));
        assert!(
            capital_requirement(0.01, 1.5)
                .unwrap_err()
                .to_string()
                .contains("lgd = 1.5")
        );
        assert!(conditional_hit_probability_at(0.01, 1.0).is_err());
        assert!(risk_weight(f64::NAN, 0.45).is_err());
    }
}
