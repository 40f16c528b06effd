//! The standard normal law: density, distribution function and its inverse.
//!
//! Used by the engine (hit thresholds Phi^-1(p)) and by every closed form, so the two sides agree to
//! the last bit on the same inputs. The special functions come from `statrs` (ports of well-tested
//! rational approximations); the distribution function uses `accurate_normal`, whose series and
//! continued fraction reach double precision where statrs' erfc does not.

use statrs::function::erf;

/// Standard normal density phi(x).
pub fn pdf(x: f64) -> f64 {
    (-0.5 * x * x).exp() / (2.0 * std::f64::consts::PI).sqrt()
}

/// Standard normal distribution function Phi(x), accurate to about 1e-14 relative in both tails
/// (see `accurate_normal`; statrs' erfc alone is good only to about 1e-10 for x < -0.7).
pub fn cdf(x: f64) -> f64 {
    super::accurate_normal::cdf(x)
}

/// Inverse Phi^-1(p) for p in [0, 1]; returns -inf at 0 and +inf at 1.
pub fn inv_cdf(p: f64) -> f64 {
    if p <= 0.0 {
        f64::NEG_INFINITY
    } else if p >= 1.0 {
        f64::INFINITY
    } else {
        -std::f64::consts::SQRT_2 * erf::erfc_inv(2.0 * p)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::analytic::tolerance::SCIPY_MATCH;

    /// (x, pdf(x), cdf(x)) from scipy 1.17.1 `scipy.stats.norm` (printed by scripts/scipy_reference.py).
    const SCIPY_NORM: [(f64, f64, f64); 18] = [
        (-30.0, 1.4736461348785476e-196, 4.906713927147908e-198),
        (-12.5, 4.6951953579751464e-35, 3.732564298877714e-36),
        (-8.0, 5.052271083536893e-15, 6.22096057427174e-16),
        (-5.0, 1.4867195147342979e-06, 2.866515718791933e-07),
        (-3.0, 0.0044318484119380075, 0.0013498980316300933),
        (-2.5, 0.017528300493568537, 0.006209665325776132),
        (-2.0, 0.05399096651318806, 0.022750131948179195),
        (-1.3, 0.17136859204780736, 0.09680048458561036),
        (-1.0, 0.24197072451914337, 0.15865525393145707),
        (-0.7, 0.31225393336676127, 0.24196365222307303),
        (-0.2, 0.3910426939754559, 0.42074029056089696),
        (0.0, 0.3989422804014327, 0.5),
        (0.4, 0.36827014030332333, 0.6554217416103242),
        (1.0, 0.24197072451914337, 0.8413447460685429),
        (1.7, 0.09404907737688695, 0.955434537241457),
        (2.6, 0.013582969233685615, 0.9953388119762813),
        (4.0, 0.00013383022576488537, 0.9999683287581669),
        (8.0, 5.052271083536893e-15, 0.9999999999999993),
    ];

    /// (p, ppf(p)) from scipy 1.17.1 `scipy.stats.norm.ppf` (printed by scripts/scipy_reference.py).
    const SCIPY_PPF: [(f64, f64); 13] = [
        (1e-300, -37.0470962993612),
        (1e-20, -9.262340089798409),
        (1e-08, -5.612001244174789),
        (0.0001, -3.7190164854556804),
        (0.001, -3.090232306167813),
        (0.025, -1.9599639845400545),
        (0.1, -1.2815515655446004),
        (0.3, -0.5244005127080409),
        (0.5, 0.0),
        (0.75, 0.6744897501960817),
        (0.975, 1.959963984540054),
        (0.999, 3.090232306167813),
        (0.9999999999, 6.361340889697422),
    ];

    fn relative(a: f64, b: f64) -> f64 {
        if b == 0.0 { a.abs() } else { (a / b - 1.0).abs() }
    }

    #[test]
    fn pdf_matches_scipy() {
        for &(x, pdf_ref, _) in &SCIPY_NORM {
            // scipy 1.17.1 scipy.stats.norm.pdf
            assert!(
                relative(pdf(x), pdf_ref) < SCIPY_MATCH,
                "x = {x}: {} vs {pdf_ref}",
                pdf(x)
            );
        }
    }

    #[test]
    fn inv_cdf_matches_scipy() {
        for &(p, x_ref) in &SCIPY_PPF {
            // scipy 1.17.1 scipy.stats.norm.ppf
            assert!(
                (inv_cdf(p) - x_ref).abs() < SCIPY_MATCH * x_ref.abs().max(1.0),
                "p = {p}: {} vs {x_ref}",
                inv_cdf(p)
            );
        }
        assert_eq!(inv_cdf(0.0), f64::NEG_INFINITY);
        assert_eq!(inv_cdf(1.0), f64::INFINITY);
    }

    #[test]
    fn cdf_matches_scipy_to_double_precision() {
        for &(x, _, cdf_ref) in &SCIPY_NORM {
            // scipy 1.17.1 scipy.stats.norm.cdf
            assert!(
                relative(cdf(x), cdf_ref) < SCIPY_MATCH,
                "x = {x}: {} vs {cdf_ref}",
                cdf(x)
            );
        }
    }
}
