//! Shared tolerances, kept in one place so every statistical check uses the same standard.

/// Standard errors allowed between a simulated estimate and its reference in statistical tests.
/// With fixed seeds, 4 standard errors is a two-sided false-alarm rate of about 6e-5 per check.
pub const STANDARD_ERRORS: f64 = 4.0;

/// The 97.5% standard normal quantile, for two-sided 95% intervals.
pub const Z_95: f64 = 1.959964;
