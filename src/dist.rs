//! Parametrised distributions of borrower attributes, shock severities and temptations.
//!
//! Scenario files describe incomes, risk multipliers and severities by their mean and spread, the way
//! practitioners quote them, rather than by the textbook parameters; this module converts once, at
//! validation, into immutable samplers so the engine never re-derives parameters in its inner loop.

use rand::Rng;
use rand_distr::{Beta, Distribution as _, Gamma, LogNormal};
use serde::Serialize;

/// A validated distribution of a non-negative quantity.
#[derive(Debug, Clone, Serialize)]
#[serde(tag = "kind", rename_all = "snake_case")]
pub enum Distribution {
    /// Always `value`.
    Fixed { value: f64 },
    /// Uniform on [low, high].
    Uniform { low: f64, high: f64 },
    /// Log-normal with the given mean and coefficient of variation.
    Lognormal {
        mean: f64,
        cv: f64,
        #[serde(skip)]
        sampler: LogNormal<f64>,
    },
    /// Beta on [0, 1] with the given mean and standard deviation.
    Beta {
        mean: f64,
        sd: f64,
        #[serde(skip)]
        sampler: Beta<f64>,
    },
    /// Gamma with the given mean and coefficient of variation.
    Gamma {
        mean: f64,
        cv: f64,
        #[serde(skip)]
        sampler: Gamma<f64>,
    },
}

/// Why a distribution's parameters were refused; the message says what is allowed.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[error("{parameter} = {value} is not allowed: {allowed}")]
pub struct DistributionError {
    /// The offending parameter's name as written in scenario files.
    pub parameter: &'static str,
    /// The offending value, as text.
    pub value: String,
    /// What the parameter may be.
    pub allowed: String,
}

/// Largest coefficient of variation accepted: beyond it the laws are numerically degenerate.
pub const MAX_CV: f64 = 100.0;
/// Smallest gamma coefficient of variation: below it the shape 1 / cv^2 overflows the sampler
/// (use a fixed value instead).
pub const MIN_GAMMA_CV: f64 = 1e-6;

fn bad(parameter: &'static str, value: f64, allowed: impl Into<String>) -> DistributionError {
    DistributionError {
        parameter,
        value: value.to_string(),
        allowed: allowed.into(),
    }
}

fn finite_non_negative(parameter: &'static str, value: f64) -> Result<(), DistributionError> {
    if value.is_finite() && value >= 0.0 {
        Ok(())
    } else {
        Err(bad(parameter, value, "a finite number >= 0"))
    }
}

impl Distribution {
    /// A point mass at `value` (finite, >= 0).
    pub fn fixed(value: f64) -> Result<Self, DistributionError> {
        finite_non_negative("value", value)?;
        Ok(Distribution::Fixed { value })
    }

    /// Uniform on [low, high] with 0 <= low <= high, both finite.
    pub fn uniform(low: f64, high: f64) -> Result<Self, DistributionError> {
        finite_non_negative("low", low)?;
        finite_non_negative("high", high)?;
        if high < low {
            return Err(bad("high", high, format!("a number >= low ({low})")));
        }
        Ok(Distribution::Uniform { low, high })
    }

    /// Log-normal with mean > 0 and cv >= 0: sigma^2 = ln(1 + cv^2), mu = ln(mean) - sigma^2 / 2.
    pub fn lognormal(mean: f64, cv: f64) -> Result<Self, DistributionError> {
        if !(mean.is_finite() && mean > 0.0) {
            return Err(bad("mean", mean, "a finite number > 0"));
        }
        if !(cv.is_finite() && (0.0..=MAX_CV).contains(&cv)) {
            return Err(bad("cv", cv, format!("a number in [0, {MAX_CV}]")));
        }
        let sigma2 = (1.0 + cv * cv).ln();
        let sampler = LogNormal::new(mean.ln() - sigma2 / 2.0, sigma2.sqrt())
            .map_err(|_| bad("cv", cv, "a finite number >= 0"))?;
        Ok(Distribution::Lognormal { mean, cv, sampler })
    }

    /// Beta with mean in (0, 1) and 0 < sd^2 < mean (1 - mean), by the method of moments.
    pub fn beta(mean: f64, sd: f64) -> Result<Self, DistributionError> {
        if !(mean > 0.0 && mean < 1.0) {
            return Err(bad("mean", mean, "a number strictly between 0 and 1"));
        }
        let max_sd = (mean * (1.0 - mean)).sqrt();
        if !(sd > 0.0 && sd < max_sd) {
            return Err(bad(
                "sd",
                sd,
                format!("a number > 0 and < sqrt(mean (1 - mean)) = {max_sd:.6}"),
            ));
        }
        let common = mean * (1.0 - mean) / (sd * sd) - 1.0;
        let sampler = Beta::new(mean * common, (1.0 - mean) * common)
            .map_err(|_| bad("sd", sd, "a standard deviation giving positive shape parameters"))?;
        Ok(Distribution::Beta { mean, sd, sampler })
    }

    /// Gamma with mean > 0 and cv > 0: shape = 1 / cv^2, scale = mean * cv^2.
    pub fn gamma(mean: f64, cv: f64) -> Result<Self, DistributionError> {
        if !(mean.is_finite() && mean > 0.0) {
            return Err(bad("mean", mean, "a finite number > 0"));
        }
        if !(cv.is_finite() && (MIN_GAMMA_CV..=MAX_CV).contains(&cv)) {
            return Err(bad("cv", cv, format!("a number in [{MIN_GAMMA_CV}, {MAX_CV}]")));
        }
        let sampler = Gamma::new(1.0 / (cv * cv), mean * cv * cv).map_err(|_| bad("cv", cv, "a finite number > 0"))?;
        Ok(Distribution::Gamma { mean, cv, sampler })
    }

    /// The value of a point mass, or `None` for a random distribution.
    pub fn fixed_value(&self) -> Option<f64> {
        match *self {
            Distribution::Fixed { value } => Some(value),
            Distribution::Uniform { low, high } if low == high => Some(low),
            _ => None,
        }
    }

    /// The distribution's mean.
    pub fn mean(&self) -> f64 {
        match *self {
            Distribution::Fixed { value } => value,
            Distribution::Uniform { low, high } => 0.5 * (low + high),
            Distribution::Lognormal { mean, .. }
            | Distribution::Beta { mean, .. }
            | Distribution::Gamma { mean, .. } => mean,
        }
    }

    /// The smallest and largest values the distribution can take.
    pub fn support(&self) -> (f64, f64) {
        match *self {
            Distribution::Fixed { value } => (value, value),
            Distribution::Uniform { low, high } => (low, high),
            Distribution::Beta { .. } => (0.0, 1.0),
            Distribution::Lognormal { .. } | Distribution::Gamma { .. } => (0.0, f64::INFINITY),
        }
    }

    /// The name of the distribution's kind as written in scenario files.
    pub fn kind_name(&self) -> &'static str {
        match self {
            Distribution::Fixed { .. } => "fixed",
            Distribution::Uniform { .. } => "uniform",
            Distribution::Lognormal { .. } => "lognormal",
            Distribution::Beta { .. } => "beta",
            Distribution::Gamma { .. } => "gamma",
        }
    }

    /// P(X > x), the survival function. The engine decides "T > threshold" by comparing a uniform
    /// with it (the inverse-transform method), which needs one uniform whatever the law, instead of
    /// drawing T itself by a rejection sampler.
    pub fn survival(&self, x: f64) -> f64 {
        match *self {
            Distribution::Fixed { value } => f64::from(u8::from(value > x)),
            Distribution::Uniform { low, high } if high > low => ((high - x) / (high - low)).clamp(0.0, 1.0),
            Distribution::Uniform { low, .. } => f64::from(u8::from(low > x)),
            Distribution::Lognormal { mean, cv, .. } => {
                let sigma2 = (1.0 + cv * cv).ln();
                if x <= 0.0 {
                    1.0
                } else if sigma2 == 0.0 {
                    f64::from(u8::from(mean > x))
                } else {
                    let mu = mean.ln() - sigma2 / 2.0;
                    crate::maths::normal_cdf(-(x.ln() - mu) / sigma2.sqrt())
                }
            }
            Distribution::Gamma { mean, cv, .. } => {
                if x <= 0.0 {
                    1.0
                } else {
                    let (shape, scale) = (1.0 / (cv * cv), mean * cv * cv);
                    statrs::function::gamma::gamma_ur(shape, x / scale)
                }
            }
            Distribution::Beta { mean, sd, .. } => {
                if x <= 0.0 {
                    1.0
                } else if x >= 1.0 {
                    0.0
                } else {
                    let common = mean * (1.0 - mean) / (sd * sd) - 1.0;
                    1.0 - statrs::function::beta::beta_reg(mean * common, (1.0 - mean) * common, x)
                }
            }
        }
    }

    /// Draws one value. Rejection samplers (beta, gamma) use a variable number of generator outputs,
    /// so callers give each entity its own generator (see `engine::streams`).
    pub fn sample<R: Rng + ?Sized>(&self, rng: &mut R) -> f64 {
        match *self {
            Distribution::Fixed { value } => value,
            Distribution::Uniform { low, high } => {
                low + (high - low) * crate::engine::streams::unit_f64(rng.next_u64())
            }
            Distribution::Lognormal { sampler, .. } => sampler.sample(rng),
            Distribution::Beta { sampler, .. } => sampler.sample(rng),
            Distribution::Gamma { sampler, .. } => sampler.sample(rng),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::SeedableRng;
    use rand_chacha::ChaCha8Rng;

    fn moments(d: &Distribution, n: usize) -> (f64, f64) {
        let mut rng = ChaCha8Rng::seed_from_u64(7);
        let xs: Vec<f64> = (0..n).map(|_| d.sample(&mut rng)).collect();
        let m = xs.iter().sum::<f64>() / n as f64;
        let v = xs.iter().map(|x| (x - m).powi(2)).sum::<f64>() / (n as f64 - 1.0);
        (m, v.sqrt())
    }

    // Mean and sd of the parametrised laws (textbook moments of the lognormal, beta and gamma laws),
    // with a tolerance of 4 standard errors of the sample mean.
    #[test]
    fn parametrisations_reproduce_mean_and_spread() {
        let n = 200_000;
        for (d, mean, sd) in [
            (Distribution::lognormal(1.2, 0.4).unwrap(), 1.2, 0.48),
            (Distribution::beta(0.3, 0.1).unwrap(), 0.3, 0.1),
            (Distribution::gamma(2.0, 0.5).unwrap(), 2.0, 1.0),
            (Distribution::uniform(0.5, 1.5).unwrap(), 1.0, 1.0 / 12f64.sqrt()),
        ] {
            let (m, s) = moments(&d, n);
            let se = sd / (n as f64).sqrt();
            assert!((m - mean).abs() < 4.0 * se, "{} mean {m} vs {mean}", d.kind_name());
            assert!((s - sd).abs() < 0.02 * sd, "{} sd {s} vs {sd}", d.kind_name());
        }
    }

    /// The survival function against the share of 200,000 draws above three points per law (each
    /// draw is an independent Bernoulli trial, so 4 standard errors of a share is the tolerance), and
    /// against closed forms: exp(-x / mean) for the gamma law of cv 1 (the exponential law) and
    /// (high - x) / (high - low) for the uniform.
    #[test]
    fn survival_matches_the_draws() {
        let n = 200_000;
        let mut rng = ChaCha8Rng::seed_from_u64(11);
        for d in [
            Distribution::lognormal(0.1, 1.2).unwrap(),
            Distribution::beta(0.3, 0.15).unwrap(),
            Distribution::gamma(0.05, 1.5).unwrap(),
            Distribution::gamma(2.0, 0.5).unwrap(),
            Distribution::uniform(0.0, 0.4).unwrap(),
        ] {
            let xs: Vec<f64> = (0..n).map(|_| d.sample(&mut rng)).collect();
            for q in [0.5, 1.0, 2.0] {
                let x = q * d.mean();
                let share = xs.iter().filter(|&&v| v > x).count() as f64 / n as f64;
                let p = d.survival(x);
                let se = (p * (1.0 - p) / n as f64).sqrt().max(1e-4);
                assert!((share - p).abs() < 4.0 * se, "{} at {x}: {share} vs {p}", d.kind_name());
            }
        }
        let e = Distribution::gamma(0.5, 1.0).unwrap();
        assert!((e.survival(0.7) - (-0.7f64 / 0.5).exp()).abs() < 1e-12);
        assert!((Distribution::uniform(0.0, 0.4).unwrap().survival(0.1) - 0.75).abs() < 1e-15);
        assert_eq!(Distribution::fixed(0.3).unwrap().survival(0.3), 0.0);
        assert_eq!(Distribution::fixed(0.3).unwrap().survival(0.2), 1.0);
    }

    #[test]
    fn constructors_refuse_bad_parameters() {
        assert!(Distribution::fixed(-1.0).is_err());
        assert!(Distribution::uniform(2.0, 1.0).is_err());
        assert!(Distribution::lognormal(0.0, 0.3).is_err());
        assert!(Distribution::beta(0.5, 0.5).is_err());
        assert!(Distribution::beta(1.0, 0.1).is_err());
        assert!(Distribution::gamma(1.0, 0.0).is_err());
        assert!(Distribution::fixed(f64::NAN).is_err());
    }
}
