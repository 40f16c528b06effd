//! The special functions the engine and the closed forms share: the standard normal law, uniform
//! draws from random words, and the binomial law.
//!
//! Why one module: the engine's hit test and the exact one-factor results must evaluate the same
//! Phi on the same inputs, or a test holding one to the other measures two implementations instead of
//! the model. Phi comes from `libm::erfc` (a port of the FreeBSD msun routines, accurate to about
//! 1e-13 relative far into the lower tail); its inverse from statrs' erfc_inv, whose values the
//! engine's cached hit thresholds are pinned to.

use statrs::function::erf;
use statrs::function::gamma::ln_gamma;

/// Standard normal density phi(x).
pub fn normal_pdf(x: f64) -> f64 {
    (-0.5 * x * x).exp() / (2.0 * std::f64::consts::PI).sqrt()
}

/// Standard normal distribution function Phi(x) = erfc(-x / sqrt 2) / 2, accurate to about 2e-13
/// relative in both tails (0 below about -38.5, where it underflows).
pub fn normal_cdf(x: f64) -> f64 {
    0.5 * libm::erfc(-x * std::f64::consts::FRAC_1_SQRT_2)
}

/// Inverse Phi^-1(p) for p in [0, 1]; returns -inf at 0 and +inf at 1.
pub fn normal_inv_cdf(p: f64) -> f64 {
    if p <= 0.0 {
        f64::NEG_INFINITY
    } else if p >= 1.0 {
        f64::INFINITY
    } else {
        -std::f64::consts::SQRT_2 * erf::erfc_inv(2.0 * p)
    }
}

/// A uniform double in [0, 1) from the top 53 bits of a random word: exact multiples of 2^-53, so
/// the conversion is the same on every platform.
#[inline]
pub fn unit_f64(x: u64) -> f64 {
    (x >> 11) as f64 * (1.0 / (1u64 << 53) as f64)
}

/// The integer form of a comparison with a uniform from [`unit_f64`]: `unit_f64(x) < p` exactly when
/// `x >> 11 < unit_bound(p)`, for every word and every p, NaN included. A loop comparing many draws
/// with one probability converts the probability once instead of converting every draw.
#[inline]
pub fn unit_bound(p: f64) -> u64 {
    // unit_f64(x) = n 2^-53 exactly, n = x >> 11 an integer below 2^53; n 2^-53 < p iff n < p 2^53
    // (a scaling by a power of two, exact), iff n < ceil(p 2^53). NaN and p <= 0 admit no draw,
    // p >= 1 every draw.
    let scale = (1u64 << 53) as f64;
    let scaled = (p * scale).ceil();
    if scaled >= scale {
        1 << 53
    } else if scaled > 0.0 {
        scaled as u64
    } else {
        0
    }
}

/// ln C(n, i) through ln-gamma (statrs 0.18), about n * 1e-16 absolute.
fn ln_choose(n: u32, i: u32) -> f64 {
    let (n, i) = (f64::from(n), f64::from(i));
    ln_gamma(n + 1.0) - ln_gamma(i + 1.0) - ln_gamma(n - i + 1.0)
}

/// Writes the binomial(n, p) law, n = `out.len() - 1`, into `out`. The caller passes p and 1 - p
/// each computed without cancellation (for example Phi(z) and Phi(-z)), which keeps the far tails
/// accurate.
pub fn binomial_pmf_into(p: f64, q: f64, out: &mut [f64]) {
    let n = out.len() - 1;
    if p <= 0.0 || q <= 0.0 {
        let certain = if p <= 0.0 { 0 } else { n };
        out.iter_mut()
            .enumerate()
            .for_each(|(i, v)| *v = if i == certain { 1.0 } else { 0.0 });
        return;
    }
    let (lp, lq) = (p.ln(), q.ln());
    let nu = n as u32;
    for (i, v) in out.iter_mut().enumerate() {
        *v = (ln_choose(nu, i as u32) + i as f64 * lp + (n - i) as f64 * lq).exp();
    }
}

/// P(N <= j) for N ~ binomial(n, p), given p and q = 1 - p each without cancellation. Sums the pmf
/// from j away from the mean, where terms fall geometrically, and stops once they no longer matter.
pub fn binomial_cdf(j: u32, n: u32, p: f64, q: f64) -> f64 {
    if j >= n || p <= 0.0 {
        return 1.0;
    }
    if q <= 0.0 {
        return 0.0;
    }
    let (nf, lp, lq) = (f64::from(n), p.ln(), q.ln());
    let log_pmf = |i: u32| ln_choose(n, i) + f64::from(i) * lp + (nf - f64::from(i)) * lq;
    let odds = p / q;
    if f64::from(j) <= nf * p {
        let mut term = log_pmf(j).exp();
        let mut sum = term;
        let mut i = j;
        while i > 0 && term > 1e-17 * sum {
            term *= f64::from(i) / (f64::from(n - i + 1) * odds);
            sum += term;
            i -= 1;
        }
        sum.min(1.0)
    } else {
        let mut i = j + 1;
        let mut term = log_pmf(i).exp();
        let mut sum = term;
        while i < n && term > 1e-17 * sum {
            term *= f64::from(n - i) * odds / f64::from(i + 1);
            sum += term;
            i += 1;
        }
        (1.0 - sum).max(0.0)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::analytic::tolerance::SCIPY_MATCH;
    use statrs::distribution::{Binomial, Discrete, DiscreteCDF};

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
                relative(normal_pdf(x), pdf_ref) < SCIPY_MATCH,
                "x = {x}: {} vs {pdf_ref}",
                normal_pdf(x)
            );
        }
    }

    #[test]
    fn inv_cdf_matches_scipy() {
        for &(p, x_ref) in &SCIPY_PPF {
            // scipy 1.17.1 scipy.stats.norm.ppf
            assert!(
                (normal_inv_cdf(p) - x_ref).abs() < SCIPY_MATCH * x_ref.abs().max(1.0),
                "p = {p}: {} vs {x_ref}",
                normal_inv_cdf(p)
            );
        }
        assert_eq!(normal_inv_cdf(0.0), f64::NEG_INFINITY);
        assert_eq!(normal_inv_cdf(1.0), f64::INFINITY);
    }

    #[test]
    fn cdf_matches_scipy_to_double_precision() {
        for &(x, _, cdf_ref) in &SCIPY_NORM {
            // scipy 1.17.1 scipy.stats.norm.cdf
            assert!(
                relative(normal_cdf(x), cdf_ref) < SCIPY_MATCH,
                "x = {x}: {} vs {cdf_ref}",
                normal_cdf(x)
            );
        }
    }

    #[test]
    fn cdf_is_symmetric_monotone_and_total() {
        let mut previous = 0.0;
        for i in -4000..=4000 {
            let x = f64::from(i) / 100.0;
            let v = normal_cdf(x);
            assert!(v >= previous, "x = {x}");
            previous = v;
            assert!((normal_cdf(x) + normal_cdf(-x) - 1.0).abs() < 2e-16, "x = {x}");
        }
        assert_eq!(normal_cdf(f64::NEG_INFINITY), 0.0);
        assert_eq!(normal_cdf(f64::INFINITY), 1.0);
        assert!(normal_cdf(f64::NAN).is_nan());
    }

    #[test]
    fn unit_draws_span_the_half_open_interval() {
        assert_eq!(unit_f64(0), 0.0);
        assert_eq!(unit_f64(u64::MAX), 1.0 - f64::EPSILON / 2.0);
        assert_eq!(unit_f64(1 << 63), 0.5);
    }

    /// The integer bound against the floating-point comparison it replaces, at draws on both sides
    /// of each probability, at the probability's own value, and at the edges (0, 1, NaN, subnormal).
    #[test]
    fn unit_bound_decides_like_the_float_comparison() {
        let mut words = vec![0u64, 1 << 11, u64::MAX, 1 << 63, (1 << 63) - 1];
        let mut probabilities = vec![
            0.0,
            -0.0,
            -1.0,
            1.0,
            2.0,
            f64::NAN,
            f64::INFINITY,
            f64::NEG_INFINITY,
            f64::MIN_POSITIVE,
            5e-324,
            1e-300,
            1.0 - f64::EPSILON / 2.0,
        ];
        let mut state = 0x9e37_79b9_7f4a_7c15u64;
        for _ in 0..2000 {
            // SplitMix64 steps: any well-mixed words serve
            state = state.wrapping_add(0x9e37_79b9_7f4a_7c15);
            let mut z = state;
            z = (z ^ (z >> 30)).wrapping_mul(0xbf58_476d_1ce4_e5b9);
            z = (z ^ (z >> 27)).wrapping_mul(0x94d0_49bb_1331_11eb);
            z ^= z >> 31;
            words.push(z);
            // a probability exactly on a draw's value, and its neighbours
            let on = unit_f64(z);
            probabilities.extend([on, f64::from_bits(on.to_bits() + 1), on * 0.999_999_9, on.sqrt()]);
        }
        for &p in &probabilities {
            let bound = unit_bound(p);
            for &x in &words {
                assert_eq!(unit_f64(x) < p, x >> 11 < bound, "x = {x}, p = {p:e}");
            }
            // the draws just below and at the bound itself
            for n in [bound.saturating_sub(1), bound.min((1 << 53) - 1)] {
                let x = n << 11;
                assert_eq!(unit_f64(x) < p, x >> 11 < bound, "n = {n}, p = {p:e}");
            }
        }
    }

    #[test]
    fn binomial_pmf_matches_statrs() {
        // Reference: statrs 0.18 `Binomial::pmf`, textbook binomial law.
        for &(n, p) in &[(1usize, 0.3), (5, 0.1), (12, 0.35), (40, 0.02), (500, 0.5)] {
            let reference = Binomial::new(p, n as u64).unwrap();
            let mut law = vec![0.0; n + 1];
            binomial_pmf_into(p, 1.0 - p, &mut law);
            for (i, q) in law.iter().enumerate() {
                assert!((q - reference.pmf(i as u64)).abs() < 1e-12, "n = {n}, p = {p}, i = {i}");
            }
        }
        let mut law = vec![0.0; 4];
        binomial_pmf_into(1.0, 0.0, &mut law);
        assert_eq!(law, vec![0.0, 0.0, 0.0, 1.0]);
        binomial_pmf_into(0.0, 1.0, &mut law);
        assert_eq!(law, vec![1.0, 0.0, 0.0, 0.0]);
    }

    #[test]
    fn binomial_cdf_matches_statrs() {
        // Reference: statrs 0.18 `Binomial::cdf` (regularised incomplete beta), textbook binomial law.
        for &(n, p) in &[(1u32, 0.3), (10, 0.1), (50, 0.5), (200, 0.03), (1000, 0.2)] {
            let reference = Binomial::new(p, u64::from(n)).unwrap();
            for j in (0..=n).step_by((n as usize / 20).max(1)) {
                let ours = binomial_cdf(j, n, p, 1.0 - p);
                assert!(
                    (ours - reference.cdf(u64::from(j))).abs() < 1e-11,
                    "n = {n}, p = {p}, j = {j}"
                );
            }
        }
    }
}
