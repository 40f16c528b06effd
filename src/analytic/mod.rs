//! Closed forms beside the simulation: the independent-borrower optimum, exact group repayment in the
//! one-factor class, the large-portfolio (Vasicek) loss law and the Basel II IRB retail formula.
//!
//! The simulation answers every scenario but only up to Monte Carlo error; these closed forms answer a
//! narrower class exactly (to quadrature precision), so they serve both as planning figures in their own
//! right and as fixed points the engine's tests can be held to.

pub mod basel;
pub mod normal;
pub mod one_factor;
pub mod optimum;
pub mod portfolio_law;
pub mod quadrature;
pub mod report;
pub mod vasicek;

/// Why an analytic computation refused its input or could not finish.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum AnalyticError {
    /// An argument lies outside what the computation accepts.
    #[error("{name} = {value} is not allowed: {allowed}")]
    BadInput {
        /// The argument's name as the caller knows it.
        name: String,
        /// The offending value, as text.
        value: String,
        /// What the argument may be.
        allowed: String,
    },
    /// A numerical method stopped before reaching its tolerance.
    #[error("{what} did not converge: {detail}")]
    NoConvergence {
        /// The computation that failed.
        what: String,
        /// How far it got.
        detail: String,
    },
}

/// Builds a [`AnalyticError::BadInput`]; a free function keeps the many validation sites one line each.
pub(crate) fn bad(name: &str, value: impl ToString, allowed: impl Into<String>) -> AnalyticError {
    AnalyticError::BadInput {
        name: name.to_string(),
        value: value.to_string(),
        allowed: allowed.into(),
    }
}

/// Checks that `value` is a probability in [0, 1] (NaN refused).
pub(crate) fn check_probability(name: &str, value: f64) -> Result<(), AnalyticError> {
    if (0.0..=1.0).contains(&value) {
        Ok(())
    } else {
        Err(bad(name, value, "a probability in [0, 1]"))
    }
}

/// Checks that `value` is a factor correlation in [0, 1) (NaN refused); 1 would make the idiosyncratic
/// part vanish and every formula divide by zero.
pub(crate) fn check_correlation(name: &str, value: f64) -> Result<(), AnalyticError> {
    if (0.0..1.0).contains(&value) {
        Ok(())
    } else {
        Err(bad(name, value, "a correlation in [0, 1)"))
    }
}

/// Tolerances of the analytic companion, in one place so that tests of different modules cannot drift
/// apart in what they call "exact".
pub mod tolerance {
    /// Absolute accuracy every factor quadrature aims for (hit-count law, finite-portfolio CDF).
    pub const QUADRATURE_TARGET: f64 = 1e-10;
    /// Largest change allowed when the Gauss-Hermite node count is doubled before the rule is trusted.
    pub const NODE_DOUBLING: f64 = 1e-11;
    /// Agreement required between the quadrature and an exact identity or an exact finite sum.
    pub const QUADRATURE_CHECK: f64 = 1e-10;
    /// Agreement with reference values computed by scipy (double precision on both sides).
    pub const SCIPY_MATCH: f64 = 1e-12;
    /// Agreement with published risk weights, in percentage points: the table prints two decimals, so
    /// rounding alone leaves up to 0.005, and the rest covers the framework's own rounding of inputs.
    pub const BASEL_RISK_WEIGHT_PP: f64 = 0.015;
    /// How far a brute-force grid maximiser may sit from the solved root of the derivative, in units of
    /// group size: a grid of >= 10^6 points over the bracket, plus the flatness of the objective.
    pub const GRID_VS_ROOT: f64 = 1e-3;
    /// The same for the very flat power curve near p = 1, where the objective varies by ~1e-14 over
    /// 0.001 of group size and a grid can only resolve the maximiser to a few thousandths.
    pub const GRID_VS_ROOT_FLAT: f64 = 2e-3;
}
