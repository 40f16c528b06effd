//! Calibration from a loan book: estimate the group-size curve phi(k) and the correlation of members
//! of one village and cycle from a lender's repayment records, and recommend a group size.
//!
//! Nobody knows phi(k) in advance; a lender has records of past loans. This module turns those
//! records into fitted curves (independent and clustered forms side by side, so the cost of ignoring
//! correlation is visible), a model-free clustering check, a closed-form optimum with a cluster
//! bootstrap interval over villages, and a scenario file ready for `run`. Every fitted model
//! describes group repayment without peer cover, (1 - phi(k))^k for independent members.

pub mod betabinom;
pub mod book;
pub mod model;
mod optim;
mod output;

pub use book::{BadRecord, BookError, LoanBook, read_loan_book, read_loan_book_str};
pub use output::write_outputs;

use model::{CurveKind, Estimate, Form, Patterns};
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rayon::prelude::*;
use serde::Serialize;
use std::collections::{BTreeMap, BTreeSet};

use crate::stats::estimate;
use crate::stats::tolerance::Z_95;

/// Fewest bootstrap resamples allowed: below this the 2.5% and 97.5% quantiles rest on a dozen
/// resamples each.
pub const MIN_RESAMPLES: u32 = 500;

/// What the fit needs besides the book.
#[derive(Debug, Clone, PartialEq)]
pub struct FitOptions {
    /// Bootstrap resamples over villages (at least [`MIN_RESAMPLES`]).
    pub resamples: u32,
    /// Seed of the bootstrap; resample i uses its own ChaCha stream (seed, i).
    pub seed: u64,
    /// Worker threads for the bootstrap (default: all cores); results do not depend on it.
    pub threads: Option<usize>,
}

impl Default for FitOptions {
    fn default() -> Self {
        FitOptions {
            resamples: 1000,
            seed: 1,
            threads: None,
        }
    }
}

/// Why a fit could not be made.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum FitError {
    /// The loan book could not be read.
    #[error(transparent)]
    Book(#[from] BookError),
    /// The book is readable but cannot support a fit.
    #[error("{file}: {reason}")]
    Unusable {
        /// The file as the user named it.
        file: String,
        /// What is missing.
        reason: String,
    },
    /// An option is outside what the fit allows.
    #[error("{name} = {value} is not allowed: {allowed}")]
    BadOption {
        /// The option's name.
        name: String,
        /// Its value.
        value: String,
        /// What is allowed.
        allowed: String,
    },
    /// An output file exists and `--force` was not given: bad input, nothing is written.
    #[error("{path}: already exists (use --force to replace it)")]
    Exists {
        /// The existing file.
        path: String,
    },
    /// The output could not be written.
    #[error("{path}: cannot write: {reason}")]
    Output {
        /// The path that failed.
        path: String,
        /// Why.
        reason: String,
    },
}

/// Observed group repayment at one group size.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct SizeRow {
    /// Group size k.
    pub group_size: u32,
    /// Group-cycles of this size.
    pub groups: u64,
    /// Village-cycles with at least one group of this size (the clusters of the interval).
    pub village_cycles: u64,
    /// Groups that repaid without peer cover.
    pub repaid: u64,
    /// repaid / groups.
    pub repayment_rate: f64,
    /// 95% interval of the rate, robust to clustering by village-cycle (clamped to [0, 1]).
    pub rate_ci_low: Option<f64>,
    /// Upper end of that interval.
    pub rate_ci_high: Option<f64>,
    /// Implied per-member failure 1 - rate^(1/k), as if members were independent.
    pub phi: f64,
    /// The interval of `phi` from the rate's interval.
    pub phi_ci_low: Option<f64>,
    /// Upper end of that interval.
    pub phi_ci_high: Option<f64>,
    /// phi(k) of each clustered fit that covers this size, by curve name.
    pub fitted_phi: BTreeMap<String, f64>,
    /// Group repayment at this size predicted by the best curve's clustered fit.
    pub best_curve_repayment: Option<f64>,
}

/// One curve in one form.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct CurveFit {
    /// Curve name as in the curve syntax (scaled_power is `min(1, scale k^-p)`).
    pub curve: CurveKind,
    /// `independent` or `clustered`.
    pub form: Form,
    /// Estimates by parameter name; the clustered form includes `rho`.
    pub params: BTreeMap<String, f64>,
    /// Standard errors from the observed information; null for an estimate on its boundary.
    pub std_errors: BTreeMap<String, Option<f64>>,
    /// Maximised log-likelihood (Bernoulli terms per group, summed over village-cycles).
    pub log_likelihood: f64,
    /// Akaike information criterion 2 d - 2 ln L, d counting every estimated parameter.
    pub aic: f64,
    /// Group sizes the fit used.
    pub sizes: Vec<u32>,
    /// Groups the fit used.
    pub groups: u64,
    /// Whether the fit used every group of the book, so its AIC is comparable with the others'.
    pub uses_all_groups: bool,
    #[serde(skip)]
    estimate: Estimate,
}

impl CurveFit {
    /// phi(k) under this fit.
    pub fn phi(&self, k: u32) -> f64 {
        self.curve.phi(&self.estimate.theta, k as f64)
    }
}

/// How far the independent fit's phi(k) lies from the clustered fit's, per curve.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Bias {
    /// The curve.
    pub curve: CurveKind,
    /// phi_independent(k) / phi_clustered(k) - 1, by group size.
    pub relative_by_size: BTreeMap<u32, f64>,
    /// The average of those relative differences over the sizes seen.
    pub mean_relative: f64,
}

/// The recommendation: the best curve's closed-form optimum and its bootstrap interval.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct OptimumSummary {
    /// The curve it comes from (the best clustered fit).
    pub curve: CurveKind,
    /// Continuous maximiser of x ln(1 - phi(x)); null when the curve has no finite maximiser.
    pub x_star: Option<f64>,
    /// 2.5% bootstrap quantile of x*.
    pub ci_low: Option<f64>,
    /// 97.5% bootstrap quantile of x*; null when above every finite value (no finite maximiser).
    pub ci_high: Option<f64>,
    /// The integers inside [ci_low, ci_high].
    pub integers: Vec<u32>,
    /// The best integer size of the point estimate: the better neighbour of x*, or the largest size
    /// seen when the curve has no finite maximiser.
    pub best_integer: Option<u32>,
    /// Whether the interval narrows the choice to at most one integer.
    pub distinguishes_sizes: bool,
    /// Bootstrap resamples.
    pub resamples: u32,
    /// Bootstrap seed.
    pub seed: u64,
    /// Resamples whose refitted curve had no finite maximiser.
    pub resamples_without_finite_optimum: u32,
    /// One sentence a reader can act on.
    pub statement: String,
}

/// Everything the fit found; `fit.json` is this structure.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct FitReport {
    /// The loan book as the user named it.
    pub source: String,
    /// Data rows read.
    pub rows_read: u64,
    /// Rows refused and skipped.
    pub rows_skipped: u64,
    /// Loans (accepted rows).
    pub loans: u64,
    /// Group-cycles.
    pub groups: u64,
    /// Village-cycles.
    pub village_cycles: u64,
    /// Villages.
    pub villages: u64,
    /// Distinct cycles.
    pub cycles: u64,
    /// Groups whose outcome came from `own_paid`.
    pub groups_with_own_paid: u64,
    /// Groups short of their due after peer cover.
    pub groups_defaulted_with_cover: u64,
    /// Groups that defaulted without peer cover (the fitted outcome).
    pub groups_defaulted: u64,
    /// Observed repayment by group size.
    pub by_size: Vec<SizeRow>,
    /// Every curve in both forms.
    pub curves: Vec<CurveFit>,
    /// The clustered fit with the lowest AIC among those using every group.
    pub best_curve: CurveKind,
    /// rho of the best clustered fit: the total correlation of members of one village and cycle.
    pub village_correlation: f64,
    /// Standard error of `village_correlation` (null on the boundary rho = 0).
    pub village_correlation_std_error: Option<f64>,
    /// Always 0: the book cannot separate village from portfolio correlation.
    pub portfolio_correlation: f64,
    /// Beta-binomial and moment estimates of the correlation of group defaults over village-cycles.
    pub beta_binomial: Option<betabinom::BetaBinomialFit>,
    /// Independent-versus-clustered differences in phi.
    pub independent_bias: Vec<Bias>,
    /// The recommendation.
    pub optimum: OptimumSummary,
    /// Gauss-Hermite nodes of the clustered likelihood.
    pub quadrature_nodes: usize,
    /// |ln L(2n nodes) - ln L(n nodes)| at the best clustered fit.
    pub quadrature_check: f64,
    /// Statements about the data and the fit a modeller should read.
    pub notes: Vec<String>,
    /// Wall time of reading the book in seconds (timings are not written to the files, which stay
    /// reproducible).
    #[serde(skip)]
    pub read_seconds: f64,
    /// Wall time of the fits, the bootstrap excluded.
    #[serde(skip)]
    pub fit_seconds: f64,
    /// Wall time of the bootstrap.
    #[serde(skip)]
    pub bootstrap_seconds: f64,
    /// Mean amount due per loan (the scenario's principal).
    #[serde(skip)]
    pub mean_due: f64,
}

/// Reads a loan book and fits it.
pub fn fit_file(path: &std::path::Path, skip_bad_rows: bool, options: &FitOptions) -> Result<FitReport, FitError> {
    let started = std::time::Instant::now();
    let book = read_loan_book(path, skip_bad_rows)?;
    let read_seconds = started.elapsed().as_secs_f64();
    let mut report = fit_book(&book, options)?;
    report.read_seconds = read_seconds;
    Ok(report)
}

fn unusable(book: &LoanBook, reason: impl Into<String>) -> FitError {
    FitError::Unusable {
        file: book.file.clone(),
        reason: reason.into(),
    }
}

/// Fits a loan book already read.
pub fn fit_book(book: &LoanBook, options: &FitOptions) -> Result<FitReport, FitError> {
    if options.resamples < MIN_RESAMPLES {
        return Err(FitError::BadOption {
            name: "resamples".into(),
            value: options.resamples.to_string(),
            allowed: format!("at least {MIN_RESAMPLES}"),
        });
    }
    if book.groups.is_empty() {
        return Err(unusable(book, "no loan rows to fit (every row was empty or skipped)"));
    }
    let fit_started = std::time::Instant::now();
    let mut notes = Vec::new();
    for example in &book.skipped_examples {
        notes.push(format!("skipped: {example}"));
    }
    let by_size_counts = size_rows(book);
    let sizes: Vec<u32> = by_size_counts.iter().map(|r| r.group_size).collect();
    if sizes.len() == 1 {
        notes.push(format!(
            "every group has size {}: the data fix phi at that size only, so the curves' shapes and the optimum \
             are extrapolations",
            sizes[0]
        ));
    }
    if book.villages.len() < 10 {
        notes.push(format!(
            "only {} villages: the bootstrap over villages has few distinct resamples, so its interval is rough",
            book.villages.len()
        ));
    }
    let full = Patterns::build(book, 1);
    let from_two = Patterns::build(book, 2);
    let mut curves = Vec::new();
    let mut clustered: Vec<(CurveKind, Estimate, &Patterns)> = Vec::new();
    for kind in model::ALL_CURVES {
        let data = if kind.smallest_size() == 2 { &from_two } else { &full };
        if data.groups == 0 {
            notes.push(format!("{} is not fitted: it needs groups of size >= 2", kind.name()));
            continue;
        }
        let uses_all = data.groups == full.groups;
        let independent = model::fit_independent(kind, data, &data.weights, None, model::PRECISE);
        let joint = model::fit_clustered(kind, data, &data.weights, &independent, &independent, model::PRECISE);
        for (form, estimate) in [(Form::Independent, &independent), (Form::Clustered, &joint)] {
            curves.push(curve_fit(kind, form, estimate, data, uses_all));
        }
        clustered.push((kind, joint, data));
    }
    if full.groups != from_two.groups && from_two.groups > 0 {
        notes.push(
            "power_plus_log is fitted on sizes >= 2 only, so its likelihood and AIC are not comparable with the \
             other curves' and it is left out of the choice of best curve"
                .into(),
        );
    }
    let best = curves
        .iter()
        .filter(|c| c.form == Form::Clustered && c.uses_all_groups && c.log_likelihood.is_finite())
        .min_by(|a, b| a.aic.total_cmp(&b.aic))
        .ok_or_else(|| unusable(book, "no curve could be fitted to the book"))?
        .clone();
    let best_kind = best.curve;
    let (_, best_estimate, best_data) = clustered
        .iter()
        .find(|(k, _, _)| *k == best_kind)
        .cloned()
        .ok_or_else(|| unusable(book, "the best curve has no clustered fit"))?;
    let rho_se = best.std_errors.get("rho").copied().flatten();
    let quadrature_check = {
        let at = |n: usize| {
            model::log_likelihood(
                best_kind,
                &best_estimate.theta,
                best_estimate.rho,
                best_data,
                &best_data.weights,
                &model::FactorRule::hermite(n),
            )
        };
        (at(2 * model::HERMITE_NODES) - at(model::HERMITE_NODES)).abs()
    };
    if quadrature_check > 1e-4 {
        notes.push(format!(
            "the clustered likelihood changes by {quadrature_check:.2e} when the quadrature nodes are doubled: the \
             correlation is high enough that the estimates carry some quadrature error"
        ));
    }
    let mut by_size = by_size_counts;
    for row in &mut by_size {
        for c in curves
            .iter()
            .filter(|c| c.form == Form::Clustered && c.sizes.contains(&row.group_size))
        {
            row.fitted_phi.insert(c.curve.name().to_string(), c.phi(row.group_size));
        }
        row.best_curve_repayment = Some(model::clustered_repayment(
            best_kind,
            &best_estimate.theta,
            best_estimate.rho,
            row.group_size,
        ));
    }
    let independent_bias = bias(&curves);
    let beta_binomial = betabinom::fit(&village_cycle_counts(book));
    let started = std::time::Instant::now();
    let fit_seconds = fit_started.elapsed().as_secs_f64();
    let optimum = recommend(best_kind, &best_estimate, best_data, &sizes, options)?;
    let bootstrap_seconds = started.elapsed().as_secs_f64();
    if let Some(x) = optimum.x_star
        && (x < f64::from(sizes[0]) - 0.5 || x > f64::from(*sizes.last().unwrap_or(&0)) + 0.5)
    {
        notes.push(format!(
            "x* = {x:.2} lies outside the group sizes seen ({}-{}): it is an extrapolation of the fitted curve",
            sizes[0],
            sizes.last().unwrap_or(&0)
        ));
    }
    let cycles: BTreeSet<u64> = book.village_cycles.iter().map(|vc| vc.1).collect();
    Ok(FitReport {
        source: book.file.clone(),
        rows_read: book.rows_read,
        rows_skipped: book.rows_skipped,
        loans: book.loans,
        groups: book.groups.len() as u64,
        village_cycles: book.village_cycles.len() as u64,
        villages: book.villages.len() as u64,
        cycles: cycles.len() as u64,
        groups_with_own_paid: book.groups_with_own_paid,
        groups_defaulted_with_cover: book.defaulted_with_cover,
        groups_defaulted: book.groups.iter().filter(|g| g.defaulted).count() as u64,
        by_size,
        curves,
        best_curve: best_kind,
        village_correlation: best_estimate.rho,
        village_correlation_std_error: rho_se,
        portfolio_correlation: 0.0,
        beta_binomial,
        independent_bias,
        optimum,
        quadrature_nodes: model::HERMITE_NODES,
        quadrature_check,
        notes,
        read_seconds: 0.0,
        fit_seconds,
        bootstrap_seconds,
        mean_due: book.total_due / book.loans.max(1) as f64,
    })
}

fn curve_fit(kind: CurveKind, form: Form, estimate: &Estimate, data: &Patterns, uses_all: bool) -> CurveFit {
    let errors = model::standard_errors(kind, form, estimate, data);
    let mut names: Vec<String> = kind.param_names().iter().map(|s| s.to_string()).collect();
    let mut values = estimate.theta.clone();
    if form == Form::Clustered {
        names.push("rho".into());
        values.push(estimate.rho);
    }
    let d = values.len() as f64;
    CurveFit {
        curve: kind,
        form,
        params: names.iter().cloned().zip(values).collect(),
        std_errors: names.into_iter().zip(errors).collect(),
        log_likelihood: estimate.log_likelihood,
        aic: 2.0 * d - 2.0 * estimate.log_likelihood,
        sizes: data.sizes.clone(),
        groups: data.groups,
        uses_all_groups: uses_all,
        estimate: estimate.clone(),
    }
}

/// Observed repayment per size with intervals over village-cycles (groups of one village and cycle
/// share their factor, so they are one cluster and never counted as independent observations).
fn size_rows(book: &LoanBook) -> Vec<SizeRow> {
    // size -> village-cycle -> (repaid, groups)
    let mut cells: BTreeMap<u32, BTreeMap<u32, (f64, f64)>> = BTreeMap::new();
    for g in &book.groups {
        let e = cells
            .entry(g.size)
            .or_default()
            .entry(g.village_cycle)
            .or_insert((0.0, 0.0));
        e.1 += 1.0;
        if !g.defaulted {
            e.0 += 1.0;
        }
    }
    cells
        .into_iter()
        .map(|(k, per_vc)| {
            let groups: f64 = per_vc.values().map(|v| v.1).sum();
            let repaid: f64 = per_vc.values().map(|v| v.0).sum();
            let ratio = estimate::ratio(per_vc.values().copied());
            let rate = repaid / groups;
            let se = ratio.and_then(|r| r.standard_error);
            let lo = se.map(|s| (rate - Z_95 * s).clamp(0.0, 1.0));
            let hi = se.map(|s| (rate + Z_95 * s).clamp(0.0, 1.0));
            let implied = |r: f64| 1.0 - r.powf(1.0 / k as f64);
            SizeRow {
                group_size: k,
                groups: groups as u64,
                village_cycles: per_vc.len() as u64,
                repaid: repaid as u64,
                repayment_rate: rate,
                rate_ci_low: lo,
                rate_ci_high: hi,
                phi: implied(rate),
                phi_ci_low: hi.map(implied),
                phi_ci_high: lo.map(implied),
                fitted_phi: BTreeMap::new(),
                best_curve_repayment: None,
            }
        })
        .collect()
}

/// (groups, defaulted groups, how many village-cycles) for the beta-binomial check.
fn village_cycle_counts(book: &LoanBook) -> Vec<(u32, u32, u64)> {
    let mut per_vc = vec![(0u32, 0u32); book.village_cycles.len()];
    for g in &book.groups {
        let e = &mut per_vc[g.village_cycle as usize];
        e.0 += 1;
        if g.defaulted {
            e.1 += 1;
        }
    }
    let mut counted: BTreeMap<(u32, u32), u64> = BTreeMap::new();
    for c in per_vc {
        *counted.entry(c).or_insert(0) += 1;
    }
    counted.into_iter().map(|((n, y), c)| (n, y, c)).collect()
}

fn bias(curves: &[CurveFit]) -> Vec<Bias> {
    let mut out = Vec::new();
    for ind in curves.iter().filter(|c| c.form == Form::Independent) {
        let Some(clu) = curves
            .iter()
            .find(|c| c.form == Form::Clustered && c.curve == ind.curve)
        else {
            continue;
        };
        let relative_by_size: BTreeMap<u32, f64> = ind
            .sizes
            .iter()
            .filter_map(|&k| {
                let (a, b) = (ind.phi(k), clu.phi(k));
                (b > 0.0).then(|| (k, a / b - 1.0))
            })
            .collect();
        if relative_by_size.is_empty() {
            continue;
        }
        let mean_relative = relative_by_size.values().sum::<f64>() / relative_by_size.len() as f64;
        out.push(Bias {
            curve: ind.curve,
            relative_by_size,
            mean_relative,
        });
    }
    out
}

/// The q-quantile (type 7) of sorted values where +inf stands for "no finite maximiser".
fn quantile_with_infinity(sorted: &[f64], q: f64) -> f64 {
    let h = (sorted.len() - 1) as f64 * q;
    let (lo, hi) = (h.floor() as usize, h.ceil() as usize);
    let (a, b) = (sorted[lo], sorted[hi]);
    if a.is_infinite() || b.is_infinite() {
        return if h.fract() == 0.0 { a } else { f64::INFINITY };
    }
    a + (h - lo as f64) * (b - a)
}

/// The better of x*'s integer neighbours on the curve's own objective k ln(1 - phi(k)).
fn best_integer(kind: CurveKind, theta: &[f64], x: f64) -> Option<u32> {
    let start = kind.smallest_size();
    let candidates = [x.floor().max(start as f64) as u32, x.ceil().max(start as f64) as u32];
    candidates.into_iter().max_by(|&a, &b| {
        let f = |k: u32| k as f64 * (-kind.phi(theta, k as f64)).ln_1p();
        f(a).total_cmp(&f(b)).then(b.cmp(&a))
    })
}

/// The closed-form optimum of the best curve, with a cluster bootstrap over villages: each resample
/// draws the villages with replacement (all cycles of a drawn village come along, so correlation
/// across a village's cycles is kept), refits the clustered curve and solves its optimum again.
fn recommend(
    kind: CurveKind,
    estimate: &Estimate,
    data: &Patterns,
    sizes: &[u32],
    options: &FitOptions,
) -> Result<OptimumSummary, FitError> {
    let x_star = kind.optimum(&estimate.theta);
    let villages = data.village_patterns.len();
    // The refit's floor at rho = 0 is not refitted: a resample whose search ends at rho < 1e-6 is on
    // the boundary anyway, and only the curve's optimum is kept from each refit.
    let no_floor = Estimate {
        rho: 0.0,
        log_likelihood: f64::NEG_INFINITY,
        ..estimate.clone()
    };
    let one = |i: u32| -> Option<f64> {
        let mut rng = ChaCha8Rng::seed_from_u64(options.seed);
        rng.set_stream(u64::from(i));
        let mut draws = vec![0u32; villages];
        for _ in 0..villages {
            draws[rng.random_range(0..villages)] += 1;
        }
        let w = data.resample_weights(&draws);
        let clu = model::fit_clustered(kind, data, &w, estimate, &no_floor, model::BOOTSTRAP);
        kind.optimum(&clu.theta)
    };
    let pool = rayon::ThreadPoolBuilder::new()
        .num_threads(options.threads.unwrap_or(0))
        .build()
        .map_err(|e| FitError::BadOption {
            name: "threads".into(),
            value: format!("{:?}", options.threads),
            allowed: format!("a thread count the system can start ({e})"),
        })?;
    let found: Vec<Option<f64>> = pool.install(|| (0..options.resamples).into_par_iter().map(one).collect());
    let without = found.iter().filter(|x| x.is_none()).count() as u32;
    let mut values: Vec<f64> = found.into_iter().map(|x| x.unwrap_or(f64::INFINITY)).collect();
    values.sort_by(f64::total_cmp);
    let lo = quantile_with_infinity(&values, 0.025);
    let hi = quantile_with_infinity(&values, 0.975);
    let ci_low = lo.is_finite().then_some(lo);
    let ci_high = hi.is_finite().then_some(hi);
    let integers: Vec<u32> = match (ci_low, ci_high) {
        (Some(a), Some(b)) => (a.ceil() as u32..=b.floor() as u32).collect(),
        _ => Vec::new(),
    };
    let best = match x_star {
        Some(x) => best_integer(kind, &estimate.theta, x),
        None => sizes.last().copied(),
    };
    let distinguishes = ci_high.is_some() && integers.len() <= 1;
    let statement = match (x_star, ci_low, ci_high) {
        (None, _, _) => format!(
            "the fitted {} curve keeps improving with group size: it has no finite optimum, and the data cannot \
             pick a best size",
            kind.name()
        ),
        (Some(x), Some(a), Some(b)) if distinguishes => match integers.first() {
            Some(k) => format!("the best group size is {k} (x* = {x:.2}, 95% interval {a:.2} to {b:.2})"),
            None => format!(
                "x* = {x:.2} (95% interval {a:.2} to {b:.2}) lies between two integers; the better one is {}",
                best.map_or("undefined".into(), |k| k.to_string())
            ),
        },
        (Some(x), Some(a), Some(b)) => format!(
            "the data cannot distinguish group sizes {}: x* = {x:.2} with 95% interval {a:.2} to {b:.2}",
            join(&integers)
        ),
        (Some(x), a, _) => format!(
            "the data cannot distinguish group sizes: x* = {x:.2}, but {without} of {} resamples have no finite \
             optimum, so the interval is open above{}",
            options.resamples,
            a.map_or(String::new(), |a| format!(" (from {a:.2})"))
        ),
    };
    Ok(OptimumSummary {
        curve: kind,
        x_star,
        ci_low,
        ci_high,
        integers,
        best_integer: best,
        distinguishes_sizes: distinguishes,
        resamples: options.resamples,
        seed: options.seed,
        resamples_without_finite_optimum: without,
        statement,
    })
}

fn join(values: &[u32]) -> String {
    values.iter().map(|v| v.to_string()).collect::<Vec<_>>().join(", ")
}
