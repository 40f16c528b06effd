//! The law of the share of members hit in a cycle, for a large and for a finite pool.
//!
//! Members who share one factor are hit together in bad cycles. For a pool so large that
//! idiosyncratic luck averages out, the hit share has Vasicek's closed-form law; a village of a few
//! hundred members keeps some binomial noise on top, which is what a lender actually sees. Both laws
//! are here so the report can say how far apart they are at the scenario's own village size, and so
//! the engine's tests can compare simulated hit shares with either.

use super::quadrature::kronrod_adaptive_scalar;
use super::{AnalyticError, bad, check_correlation, check_probability, normal};
use crate::maths::binomial_cdf;

/// Largest pool the finite law is computed for: beyond it ln-gamma rounding (~1e-8 relative) starts
/// to matter, and the large-pool law is within a fraction of a per cent anyway.
pub const MAX_FINITE_MEMBERS: u32 = 10_000_000;

/// Factor range integrated by the finite law; the normal density is below 1e-300 beyond.
const FACTOR_RANGE: f64 = 40.0;

fn check_share(name: &str, x: f64) -> Result<(), AnalyticError> {
    if x.is_nan() {
        Err(bad(name, x, "a number (shares outside [0, 1] give 0 or 1)"))
    } else {
        Ok(())
    }
}

/// P(L <= x) for the large-pool hit share L with mean p and factor correlation rho:
/// Phi((sqrt(1 - rho) Phi^-1(x) - Phi^-1(p)) / sqrt(rho)). At rho = 0 the share is p for certain.
pub fn cdf(x: f64, p: f64, rho: f64) -> Result<f64, AnalyticError> {
    check_share("x", x)?;
    check_probability("p", p)?;
    check_correlation("rho", rho)?;
    Ok(if x < 0.0 {
        0.0
    } else if x >= 1.0 || p == 0.0 {
        1.0
    } else if p == 1.0 || x == 0.0 {
        0.0
    } else if rho == 0.0 {
        if x >= p { 1.0 } else { 0.0 }
    } else {
        normal::cdf(((1.0 - rho).sqrt() * normal::inv_cdf(x) - normal::inv_cdf(p)) / rho.sqrt())
    })
}

/// The q-quantile of the large-pool hit share: Phi((Phi^-1(p) + sqrt(rho) Phi^-1(q)) / sqrt(1 - rho)).
pub fn quantile(q: f64, p: f64, rho: f64) -> Result<f64, AnalyticError> {
    check_probability("q", q)?;
    check_probability("p", p)?;
    check_correlation("rho", rho)?;
    Ok(if p == 0.0 || p == 1.0 || rho == 0.0 {
        p
    } else if q == 0.0 {
        0.0
    } else if q == 1.0 {
        1.0
    } else {
        normal::cdf((normal::inv_cdf(p) + rho.sqrt() * normal::inv_cdf(q)) / (1.0 - rho).sqrt())
    })
}

/// P(N <= j) for the number N hit among `members` who share one factor of loading rho, each hit with
/// marginal probability p: the binomial mixture over the factor, by adaptive Gauss-Kronrod split where
/// the conditional hit probability equals (j + 1/2) / members.
pub fn finite_hit_share_cdf(j: u32, members: u32, p: f64, rho: f64) -> Result<f64, AnalyticError> {
    if members == 0 || members > MAX_FINITE_MEMBERS {
        return Err(bad(
            "members",
            members,
            format!("a pool size in 1..={MAX_FINITE_MEMBERS}"),
        ));
    }
    check_probability("p", p)?;
    check_correlation("rho", rho)?;
    if j >= members || p == 0.0 {
        return Ok(1.0);
    }
    if p == 1.0 {
        return Ok(0.0);
    }
    let threshold = normal::inv_cdf(p);
    if rho == 0.0 {
        return Ok(binomial_cdf(j, members, p, normal::cdf(-threshold)));
    }
    let (load, idio) = (rho.sqrt(), (1.0 - rho).sqrt());
    let target = ((j as f64 + 0.5) / members as f64).min(1.0);
    let centre = ((threshold - idio * normal::inv_cdf(target)) / load).clamp(-FACTOR_RANGE, FACTOR_RANGE);
    let value = kronrod_adaptive_scalar(&[-FACTOR_RANGE, centre, FACTOR_RANGE], 1e-12, |m| {
        let z = (threshold - load * m) / idio;
        binomial_cdf(j, members, normal::cdf(z), normal::cdf(-z)) * normal::pdf(m)
    })?;
    Ok(value.clamp(0.0, 1.0))
}

/// The q-quantile of the hit share in a pool of `members`: the smallest j / members with
/// P(N <= j) >= q, found by bisection over j.
pub fn finite_quantile(q: f64, p: f64, rho: f64, members: u32) -> Result<f64, AnalyticError> {
    check_probability("q", q)?;
    let (mut lo, mut hi) = (0u32, members);
    // Validates members, p and rho once before the search.
    finite_hit_share_cdf(0, members, p, rho)?;
    while lo < hi {
        let mid = lo + (hi - lo) / 2;
        if finite_hit_share_cdf(mid, members, p, rho)? >= q {
            hi = mid;
        } else {
            lo = mid + 1;
        }
    }
    Ok(lo as f64 / members as f64)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::analytic::one_factor::hit_count_law;
    use crate::analytic::tolerance::{QUADRATURE_CHECK, SCIPY_MATCH};
    use statrs::distribution::{Binomial, DiscreteCDF};

    #[test]
    fn cdf_and_quantile_invert_each_other() {
        for &(p, rho) in &[(0.01, 0.03), (0.05, 0.15), (0.2, 0.4), (0.3, 0.8)] {
            for &q in &[0.001, 0.1, 0.5, 0.9, 0.99, 0.999] {
                let x = quantile(q, p, rho).unwrap();
                assert!(
                    (cdf(x, p, rho).unwrap() - q).abs() < 1e-12,
                    "p = {p}, rho = {rho}, q = {q}"
                );
            }
        }
    }

    #[test]
    fn large_pool_mean_is_p() {
        // Textbook: E[L] = E[p(M)] = p, and E[L] = integral of (1 - F(x)) over [0, 1].
        for &(p, rho) in &[(0.02, 0.1), (0.1, 0.3), (0.4, 0.6)] {
            let mean = kronrod_adaptive_scalar(&[0.0, p, 1.0], 1e-12, |x| 1.0 - cdf(x, p, rho).unwrap()).unwrap();
            assert!((mean - p).abs() < 1e-9, "p = {p}, rho = {rho}: {mean}");
        }
    }

    #[test]
    fn degenerate_parameters_have_exact_answers() {
        assert_eq!(quantile(0.999, 0.1, 0.0).unwrap(), 0.1);
        assert_eq!(cdf(0.1, 0.1, 0.0).unwrap(), 1.0);
        assert_eq!(cdf(0.09, 0.1, 0.0).unwrap(), 0.0);
        assert_eq!(quantile(0.5, 0.0, 0.3).unwrap(), 0.0);
        assert_eq!(cdf(-0.5, 0.1, 0.3).unwrap(), 0.0);
        assert_eq!(cdf(1.5, 0.1, 0.3).unwrap(), 1.0);
        assert!(cdf(f64::NAN, 0.1, 0.3).is_err());
        assert!(quantile(1.2, 0.1, 0.3).unwrap_err().to_string().contains("q = 1.2"));
        assert!(quantile(0.5, 0.1, 1.0).unwrap_err().to_string().contains("rho = 1"));
        assert!(finite_hit_share_cdf(1, 0, 0.1, 0.2).is_err());
        assert!(finite_quantile(0.5, -0.1, 0.2, 10).is_err());
    }

    #[test]
    fn binomial_cdf_matches_statrs() {
        // Reference: statrs 0.18 `Binomial::cdf` (regularised incomplete beta), textbook binomial law.
        for &(n, p) in &[(1u32, 0.3), (10, 0.1), (50, 0.5), (200, 0.03), (1000, 0.2)] {
            let reference = Binomial::new(p, n as u64).unwrap();
            for j in (0..=n).step_by((n as usize / 20).max(1)) {
                let ours = finite_hit_share_cdf(j, n, p, 0.0).unwrap();
                assert!(
                    (ours - reference.cdf(j as u64)).abs() < 1e-11,
                    "n = {n}, p = {p}, j = {j}"
                );
            }
        }
    }

    #[test]
    fn finite_cdf_matches_scipy_quad() {
        // P(N <= j) for 100 members, p = 0.05, rho = 0.15 by scipy 1.17.1 `scipy.integrate.quad` of
        // `scipy.stats.binom.cdf` over the factor (printed by scripts/scipy_reference.py).
        let reference: [(u32, f64); 5] = [
            (0, 0.10855521552520565), // quad error estimate 1.4e-15
            (5, 0.661184645783182),   // quad error estimate 7.4e-15
            (10, 0.8813064614339837), // quad error estimate 3.8e-14
            (20, 0.9849775654638777), // quad error estimate 1.2e-14
            (33, 0.9990021533468838), // quad error estimate 1.3e-14
        ];
        for &(j, v) in &reference {
            // scipy 1.17.1 integrate.quad
            let ours = finite_hit_share_cdf(j, 100, 0.05, 0.15).unwrap();
            assert!((ours - v).abs() < SCIPY_MATCH, "j = {j}: {ours} vs {v}");
        }
    }

    #[test]
    fn finite_cdf_agrees_with_the_hit_count_law() {
        // Two routes to the same mixture: cumulative sums of the hit-count law (Gauss-Hermite or split
        // Kronrod over the pmf) and the tail-summed CDF integrated by Kronrod.
        for &(m, p, rho) in &[(30u32, 0.05, 0.3), (12, 0.2, 0.7), (60, 0.01, 0.1)] {
            let (law, _) = hit_count_law(m, p, rho).unwrap();
            let mut running = 0.0;
            for (j, q) in law.iter().enumerate() {
                running += q;
                let direct = finite_hit_share_cdf(j as u32, m, p, rho).unwrap();
                assert!(
                    (running - direct).abs() < QUADRATURE_CHECK,
                    "m = {m}, j = {j}: {running} vs {direct}"
                );
            }
        }
    }

    #[test]
    fn finite_quantile_approaches_the_large_pool_quantile() {
        let (q, p, rho) = (0.999, 0.05, 0.15);
        let limit = quantile(q, p, rho).unwrap();
        let gaps: Vec<f64> = [100u32, 1_000, 10_000, 100_000, 1_000_000]
            .iter()
            .map(|&m| (finite_quantile(q, p, rho, m).unwrap() - limit).abs())
            .collect();
        assert!(gaps[4] < 2e-3 && gaps[4] < gaps[0] / 10.0, "{gaps:?}");
        assert!(gaps[3] < gaps[1], "{gaps:?}");
        // A finite pool adds binomial noise, so its high quantile lies above the large-pool one.
        assert!(finite_quantile(q, p, rho, 100).unwrap() > limit);
    }
}
