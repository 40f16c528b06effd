//! The group-size curves as fitted models, their likelihoods and maximum-likelihood fits.
//!
//! A group of k repays (without peer cover) when none of its members fails. In the independent form
//! each member fails with probability phi(k); in the clustered form members fail under the one-factor
//! model with one standard normal factor m per village and cycle, p_k(m) = Phi((Phi^-1(phi(k)) -
//! sqrt(rho) m) / sqrt(1 - rho)), and m is integrated out by Gauss-Hermite quadrature. The
//! log-likelihood is the sum over village-cycles of ln E_m[prod over groups of P(outcome | m)] with
//! Bernoulli terms (no binomial coefficients), so other tools can reproduce it exactly.
//!
//! Village-cycles with the same counts per size have the same likelihood term, so the data are kept
//! as distinct count patterns with weights: a million-row book shrinks to a few thousand patterns,
//! and a bootstrap resample is just another weight vector.

use super::book::LoanBook;
use super::optim::{hessian, inverse_positive_definite, nelder_mead};
use crate::analytic::quadrature::GaussHermite;
use crate::analytic::{normal, optimum};
use crate::curve::GroupSizeCurve;
use serde::Serialize;
use std::collections::{BTreeMap, HashMap};

/// Gauss-Hermite nodes used for the clustered likelihood. The integrand is a product over the
/// groups of a village-cycle; 64 nodes integrate it to far below the likelihood's own sampling
/// noise for correlations up to about 0.6 (checked against 128 nodes at every fit).
pub const HERMITE_NODES: usize = 64;

/// The curves fitted to a loan book.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Serialize, PartialOrd, Ord)]
#[serde(rename_all = "snake_case")]
pub enum CurveKind {
    /// phi(k) = value.
    Constant,
    /// phi(k) = k^(-p).
    Power,
    /// phi(k) = 1 / (k^p + (ln k)^(1/p)), fitted on sizes k >= 2.
    PowerPlusLog,
    /// phi(k) = min(1, scale k^(-p)): the power curve with a free level, so that phi(1) need not be 1.
    ScaledPower,
}

/// Every curve the fit tries, in the order they are reported.
pub const ALL_CURVES: [CurveKind; 4] = [
    CurveKind::Constant,
    CurveKind::Power,
    CurveKind::PowerPlusLog,
    CurveKind::ScaledPower,
];

/// The two likelihoods fitted for each curve.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Form {
    /// Every group-cycle independent.
    Independent,
    /// One shared factor per village-cycle, with correlation rho estimated jointly.
    Clustered,
}

impl Form {
    /// The form's name as written in the outputs.
    pub fn name(self) -> &'static str {
        match self {
            Form::Independent => "independent",
            Form::Clustered => "clustered",
        }
    }
}

impl CurveKind {
    /// The curve's name as written in scenario files (scaled_power is this module's own).
    pub fn name(self) -> &'static str {
        match self {
            CurveKind::Constant => "constant",
            CurveKind::Power => "power",
            CurveKind::PowerPlusLog => "power_plus_log",
            CurveKind::ScaledPower => "scaled_power",
        }
    }

    /// Parameter names, as in the curve syntax.
    pub fn param_names(self) -> &'static [&'static str] {
        match self {
            CurveKind::Constant => &["value"],
            CurveKind::Power | CurveKind::PowerPlusLog => &["p"],
            CurveKind::ScaledPower => &["scale", "p"],
        }
    }

    /// The smallest group size the curve is fitted on.
    pub fn smallest_size(self) -> u32 {
        if self == CurveKind::PowerPlusLog { 2 } else { 1 }
    }

    /// phi(k) at parameters `theta`.
    pub fn phi(self, theta: &[f64], k: f64) -> f64 {
        match self {
            CurveKind::Constant => theta[0],
            CurveKind::Power => k.powf(-theta[0]),
            CurveKind::PowerPlusLog => {
                let p = theta[0];
                1.0 / (k.powf(p) + k.ln().powf(1.0 / p))
            }
            CurveKind::ScaledPower => (theta[0] * k.powf(-theta[1])).min(1.0),
        }
    }

    /// Natural parameters from unconstrained ones (logit for a probability, log for positives).
    fn natural(self, u: &[f64]) -> Vec<f64> {
        match self {
            CurveKind::Constant => vec![1.0 / (1.0 + (-u[0]).exp())],
            CurveKind::Power | CurveKind::PowerPlusLog => vec![u[0].exp()],
            CurveKind::ScaledPower => vec![u[0].exp(), u[1].exp()],
        }
    }

    /// Unconstrained parameters from natural ones (inverse of `natural`).
    fn unconstrained(self, theta: &[f64]) -> Vec<f64> {
        match self {
            CurveKind::Constant => {
                let v = theta[0].clamp(1e-12, 1.0 - 1e-12);
                vec![(v / (1.0 - v)).ln()]
            }
            CurveKind::Power | CurveKind::PowerPlusLog => vec![theta[0].ln()],
            CurveKind::ScaledPower => vec![theta[0].ln(), theta[1].ln()],
        }
    }

    /// Whether parameter `i` sits on (or has run off to) the edge of its range, where the observed
    /// information says nothing about its uncertainty.
    fn on_boundary(self, theta: &[f64], i: usize) -> bool {
        let v = theta[i];
        match (self, i) {
            (CurveKind::Constant, _) => !(1e-9..=1.0 - 1e-9).contains(&v),
            // Exponents and levels outside these limits mean the likelihood is still climbing
            // towards a limit curve (phi constant, or phi vanishing) rather than at an interior peak.
            (CurveKind::ScaledPower, 0) => !(1e-9..=1e6).contains(&v),
            _ => !(1e-6..=1e3).contains(&v),
        }
    }

    /// Grid of unconstrained starting points for the search.
    fn start_grid(self) -> Vec<Vec<f64>> {
        let line = |from: f64, to: f64, step: f64| -> Vec<f64> {
            let n = ((to - from) / step).round() as usize;
            (0..=n).map(|i| from + step * i as f64).collect()
        };
        match self {
            CurveKind::Constant => line(-10.0, 10.0, 0.5).into_iter().map(|u| vec![u]).collect(),
            CurveKind::Power | CurveKind::PowerPlusLog => line(-5.0, 3.0, 0.25).into_iter().map(|u| vec![u]).collect(),
            CurveKind::ScaledPower => {
                let mut out = Vec::new();
                for a in line(-8.0, 2.0, 0.5) {
                    for b in line(-5.0, 2.0, 0.5) {
                        out.push(vec![a, b]);
                    }
                }
                out
            }
        }
    }

    /// The continuous optimum of x ln(1 - phi(x)) by the project's closed-form solver; `None` when
    /// there is no finite maximiser.
    pub fn optimum(self, theta: &[f64]) -> Option<f64> {
        match self {
            CurveKind::ScaledPower => {
                let base = GroupSizeCurve::power(theta[1]).ok()?;
                optimum::closed_form_optimum_scaled(&base, theta[0])
            }
            _ => optimum::closed_form_optimum(&self.scenario_curve(theta, &[])?),
        }
    }

    /// The curve in the scenario format: the curve itself where the format has it, otherwise a table
    /// over `sizes`.
    pub fn scenario_curve(self, theta: &[f64], sizes: &[u32]) -> Option<GroupSizeCurve> {
        match self {
            CurveKind::Constant => GroupSizeCurve::constant(theta[0]).ok(),
            CurveKind::Power => GroupSizeCurve::power(theta[0]).ok(),
            CurveKind::PowerPlusLog => GroupSizeCurve::power_plus_log(theta[0]).ok(),
            CurveKind::ScaledPower => {
                let values: BTreeMap<u32, f64> = sizes.iter().map(|&k| (k, self.phi(theta, k as f64))).collect();
                GroupSizeCurve::table(values).ok()
            }
        }
    }
}

/// rho from its unconstrained form t: rho = t^2 / (1 + t^2), which reaches 0 smoothly at t = 0.
fn rho_of(t: f64) -> f64 {
    let t2 = t * t;
    t2 / (1.0 + t2)
}

/// One cell of a count pattern: the groups of one size in one village-cycle.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub struct Cell {
    /// Index into [`Patterns::sizes`].
    pub size_index: u32,
    /// Groups that repaid.
    pub repaid: u32,
    /// Groups that defaulted.
    pub defaulted: u32,
}

/// Village-cycles reduced to distinct count patterns.
#[derive(Debug, Clone, PartialEq)]
pub struct Patterns {
    /// Group sizes present, increasing.
    pub sizes: Vec<u32>,
    /// Distinct patterns, each a list of cells by increasing size.
    pub patterns: Vec<Vec<Cell>>,
    /// How many village-cycles have each pattern.
    pub weights: Vec<f64>,
    /// For each village (by index), its village-cycles' patterns as (pattern, count).
    pub village_patterns: Vec<Vec<(u32, u32)>>,
    /// Groups included.
    pub groups: u64,
}

impl Patterns {
    /// The patterns of the groups of size >= `smallest_size`.
    pub fn build(book: &LoanBook, smallest_size: u32) -> Patterns {
        let mut per_vc: Vec<BTreeMap<u32, (u32, u32)>> = vec![BTreeMap::new(); book.village_cycles.len()];
        let mut groups = 0;
        for g in book.groups.iter().filter(|g| g.size >= smallest_size) {
            let e = per_vc[g.village_cycle as usize].entry(g.size).or_insert((0, 0));
            if g.defaulted {
                e.1 += 1;
            } else {
                e.0 += 1;
            }
            groups += 1;
        }
        let mut sizes: Vec<u32> = per_vc.iter().flat_map(|m| m.keys().copied()).collect();
        sizes.sort_unstable();
        sizes.dedup();
        let index: HashMap<u32, u32> = sizes.iter().enumerate().map(|(i, &k)| (k, i as u32)).collect();
        let mut ids: HashMap<Vec<Cell>, u32> = HashMap::new();
        let mut patterns = Vec::new();
        let mut weights = Vec::new();
        let mut per_village: Vec<BTreeMap<u32, u32>> = vec![BTreeMap::new(); book.villages.len()];
        for (vc, counts) in per_vc.iter().enumerate() {
            if counts.is_empty() {
                continue;
            }
            let cells: Vec<Cell> = counts
                .iter()
                .map(|(k, &(r, d))| Cell {
                    size_index: index[k],
                    repaid: r,
                    defaulted: d,
                })
                .collect();
            let id = *ids.entry(cells.clone()).or_insert_with(|| {
                patterns.push(cells);
                weights.push(0.0);
                (patterns.len() - 1) as u32
            });
            weights[id as usize] += 1.0;
            let village = book.village_cycles[vc].0 as usize;
            *per_village[village].entry(id).or_insert(0) += 1;
        }
        Patterns {
            sizes,
            patterns,
            weights,
            village_patterns: per_village.into_iter().map(|m| m.into_iter().collect()).collect(),
            groups,
        }
    }

    /// Pattern weights of a resample that draws each village `draws[v]` times.
    pub fn resample_weights(&self, draws: &[u32]) -> Vec<f64> {
        let mut w = vec![0.0; self.patterns.len()];
        for (v, &times) in draws.iter().enumerate() {
            if times == 0 {
                continue;
            }
            for &(p, count) in &self.village_patterns[v] {
                w[p as usize] += f64::from(times) * f64::from(count);
            }
        }
        w
    }
}

/// A quadrature rule over the village-cycle factor, kept as nodes and log-weights.
#[derive(Debug, Clone)]
pub struct FactorRule {
    nodes: Vec<f64>,
    log_weights: Vec<f64>,
}

impl FactorRule {
    /// The n-node Gauss-Hermite rule (probabilists'), zero-weight nodes dropped.
    pub fn hermite(n: usize) -> FactorRule {
        let rule = GaussHermite::new(n).unwrap_or_else(|_| GaussHermite {
            nodes: vec![0.0],
            weights: vec![1.0],
        });
        let (nodes, log_weights) = rule
            .nodes
            .iter()
            .zip(&rule.weights)
            .filter(|(_, w)| **w > 0.0)
            .map(|(&x, &w)| (x, w.ln()))
            .unzip();
        FactorRule { nodes, log_weights }
    }

    /// The one-point rule, for the independent form (nothing depends on the factor).
    pub fn single() -> FactorRule {
        FactorRule {
            nodes: vec![0.0],
            log_weights: vec![0.0],
        }
    }
}

/// ln(1 - e^a) for a <= 0, accurate at both ends.
fn log1m_exp(a: f64) -> f64 {
    if a > -std::f64::consts::LN_2 {
        (-a.exp_m1()).ln()
    } else {
        (-a.exp()).ln_1p()
    }
}

/// Phi(-z), from the one shared normal CDF (`maths`, through `libm::erfc`), so the fit and the
/// engine agree on the law to the last bit.
fn upper_tail(z: f64) -> f64 {
    crate::maths::normal_cdf(-z)
}

/// Per size and node: (ln P(group repays | m), ln P(group defaults | m)).
fn node_tables(kind: CurveKind, theta: &[f64], rho: f64, sizes: &[u32], rule: &FactorRule) -> Vec<Vec<(f64, f64)>> {
    let (a, b) = (rho.sqrt(), (1.0 - rho).sqrt());
    sizes
        .iter()
        .map(|&k| {
            let phi = kind.phi(theta, k as f64);
            let threshold = normal::inv_cdf(phi);
            rule.nodes
                .iter()
                .map(|&m| {
                    // ln(1 - p) = ln Phi(-z): the upper tail keeps its precision where p is tiny.
                    let z = (threshold - a * m) / b;
                    let log_member_survives = if z == f64::NEG_INFINITY {
                        0.0
                    } else {
                        upper_tail(z).ln()
                    };
                    let log_repay = k as f64 * log_member_survives;
                    (log_repay, log1m_exp(log_repay))
                })
                .collect()
        })
        .collect()
}

/// The log-likelihood of the patterns under `kind` at `theta` and `rho`, with pattern weights
/// `weights`. `rule` is [`FactorRule::single`] for the independent form (rho must then be 0).
pub fn log_likelihood(
    kind: CurveKind,
    theta: &[f64],
    rho: f64,
    data: &Patterns,
    weights: &[f64],
    rule: &FactorRule,
) -> f64 {
    if !(0.0..1.0).contains(&rho) || theta.iter().any(|v| !v.is_finite()) {
        return f64::NAN;
    }
    let tables = node_tables(kind, theta, rho, &data.sizes, rule);
    let mut terms = vec![0.0; rule.nodes.len()];
    let mut total = 0.0;
    for (cells, &w) in data.patterns.iter().zip(weights) {
        if w == 0.0 {
            continue;
        }
        terms.copy_from_slice(&rule.log_weights);
        for c in cells {
            let table = &tables[c.size_index as usize];
            for (t, &(lr, ld)) in terms.iter_mut().zip(table) {
                // 0 * -inf must stay 0: a size with no defaults says nothing about ln P(default).
                if c.repaid > 0 {
                    *t += f64::from(c.repaid) * lr;
                }
                if c.defaulted > 0 {
                    *t += f64::from(c.defaulted) * ld;
                }
            }
        }
        let top = terms.iter().copied().fold(f64::NEG_INFINITY, f64::max);
        if top == f64::NEG_INFINITY {
            return f64::NEG_INFINITY;
        }
        let sum: f64 = terms.iter().map(|t| (t - top).exp()).sum();
        total += w * (top + sum.ln());
    }
    total
}

/// Marginal group repayment E_m[(1 - p_k(m))^k] at size k under the clustered form.
pub fn clustered_repayment(kind: CurveKind, theta: &[f64], rho: f64, k: u32) -> f64 {
    let rule = FactorRule::hermite(HERMITE_NODES);
    let table = node_tables(kind, theta, rho, &[k], &rule);
    table[0]
        .iter()
        .zip(&rule.log_weights)
        .map(|(&(lr, _), &lw)| (lr + lw).exp())
        .sum()
}

/// A maximum-likelihood estimate before its standard errors: natural curve parameters, rho (0 in the
/// independent form) and the maximised log-likelihood.
#[derive(Debug, Clone, PartialEq)]
pub struct Estimate {
    /// Curve parameters, in [`CurveKind::param_names`] order.
    pub theta: Vec<f64>,
    /// Correlation of members of one village-cycle (0 in the independent form).
    pub rho: f64,
    /// The maximised log-likelihood.
    pub log_likelihood: f64,
}

/// How hard the search works: full precision for reported fits, less for bootstrap refits.
#[derive(Debug, Clone, Copy)]
pub struct Precision {
    x_tol: f64,
    f_tol: f64,
    evaluations: usize,
    restarts: usize,
    /// Initial simplex step in the unconstrained coordinates.
    step: f64,
}

/// Precision of reported fits.
pub const PRECISE: Precision = Precision {
    x_tol: 1e-9,
    f_tol: 1e-10,
    evaluations: 6000,
    restarts: 1,
    step: 0.3,
};
/// Precision of bootstrap refits, which start next to their optimum: parameters to 1e-4 relative
/// move x* by far less than its sampling spread.
pub const BOOTSTRAP: Precision = Precision {
    x_tol: 1e-4,
    f_tol: 1e-5,
    evaluations: 2000,
    restarts: 0,
    step: 0.1,
};

/// Fits the independent form by maximum likelihood, from `start` (natural parameters) when given,
/// otherwise from the best point of a grid.
pub fn fit_independent(
    kind: CurveKind,
    data: &Patterns,
    weights: &[f64],
    start: Option<&[f64]>,
    precision: Precision,
) -> Estimate {
    let rule = FactorRule::single();
    let mut objective = |u: &[f64]| -log_likelihood(kind, &kind.natural(u), 0.0, data, weights, &rule);
    let grid = match start {
        Some(theta) => vec![kind.unconstrained(theta)],
        None => kind.start_grid(),
    };
    let start = grid
        .into_iter()
        .map(|u| {
            let v = objective(&u);
            (u, v)
        })
        .min_by(|a, b| clean(a.1).total_cmp(&clean(b.1)))
        .map(|(u, _)| u)
        .unwrap_or_else(|| vec![0.0; kind.param_names().len()]);
    let (u, v) = nelder_mead(
        &mut objective,
        &start,
        precision.step,
        precision.x_tol,
        precision.f_tol,
        precision.evaluations,
        precision.restarts,
    );
    Estimate {
        theta: kind.natural(&u),
        rho: 0.0,
        log_likelihood: -v,
    }
}

fn clean(v: f64) -> f64 {
    if v.is_nan() { f64::INFINITY } else { v }
}

/// Fits the clustered form by maximum marginal likelihood, jointly in the curve parameters and rho.
/// `start` is a starting estimate (the independent fit, or the full-data fit for a bootstrap refit);
/// `independent` is the independent fit, which is the clustered model at rho = 0 and so a floor the
/// clustered fit must reach.
pub fn fit_clustered(
    kind: CurveKind,
    data: &Patterns,
    weights: &[f64],
    start: &Estimate,
    independent: &Estimate,
    precision: Precision,
) -> Estimate {
    let rule = FactorRule::hermite(HERMITE_NODES);
    let d = kind.param_names().len();
    let mut objective = |u: &[f64]| {
        let rho = rho_of(u[d]);
        if rho > 0.999 {
            return f64::NAN;
        }
        -log_likelihood(kind, &kind.natural(&u[..d]), rho, data, weights, &rule)
    };
    let mut u0 = kind.unconstrained(&start.theta);
    let rho_starts: Vec<f64> = if start.rho > 0.0 {
        vec![start.rho]
    } else {
        vec![0.01, 0.05, 0.1, 0.2, 0.35, 0.5]
    };
    let best_rho = rho_starts
        .iter()
        .map(|&r| {
            let mut u = u0.clone();
            u.push((r / (1.0 - r)).sqrt());
            (r, clean(objective(&u)))
        })
        .min_by(|a, b| a.1.total_cmp(&b.1))
        .map_or(0.1, |(r, _)| r);
    u0.push((best_rho / (1.0 - best_rho)).sqrt());
    let (u, v) = nelder_mead(
        &mut objective,
        &u0,
        precision.step,
        precision.x_tol,
        precision.f_tol,
        precision.evaluations,
        precision.restarts,
    );
    let fitted = Estimate {
        theta: kind.natural(&u[..d]),
        rho: rho_of(u[d]),
        log_likelihood: -v,
    };
    // rho = 0 is the independent model: a search that ends below it, or at a rho too small to
    // matter, has found the boundary, and the boundary's exact values are the independent fit's
    // (when one is given; a bootstrap refit passes none and keeps its own curve parameters).
    let on_boundary =
        fitted.log_likelihood.is_nan() || fitted.log_likelihood <= independent.log_likelihood || fitted.rho < 1e-6;
    if on_boundary && independent.log_likelihood.is_finite() {
        Estimate {
            theta: independent.theta.clone(),
            rho: 0.0,
            log_likelihood: independent.log_likelihood,
        }
    } else if on_boundary {
        Estimate { rho: 0.0, ..fitted }
    } else {
        fitted
    }
}

/// Standard errors from the observed information at an estimate, in the order curve parameters then
/// (clustered form) rho. A parameter on its boundary gets none, and the others are computed with it
/// held fixed; all are `None` when the information is not positive definite.
pub fn standard_errors(kind: CurveKind, form: Form, estimate: &Estimate, data: &Patterns) -> Vec<Option<f64>> {
    let d = kind.param_names().len();
    let mut params = estimate.theta.clone();
    if form == Form::Clustered {
        params.push(estimate.rho);
    }
    let boundary: Vec<bool> = (0..params.len())
        .map(|i| {
            if i == d {
                !(1e-6..=0.999).contains(&estimate.rho)
            } else {
                kind.on_boundary(&estimate.theta, i)
            }
        })
        .collect();
    let free: Vec<usize> = (0..params.len()).filter(|&i| !boundary[i]).collect();
    let mut out = vec![None; params.len()];
    if free.is_empty() {
        return out;
    }
    let rule = match form {
        Form::Independent => FactorRule::single(),
        Form::Clustered => FactorRule::hermite(HERMITE_NODES),
    };
    let x: Vec<f64> = free.iter().map(|&i| params[i]).collect();
    // Relative steps of 1e-4 (bounded by the distance to the edge of the range) balance the
    // truncation error of central differences against the rounding of the log-likelihood.
    let h: Vec<f64> = free
        .iter()
        .map(|&i| {
            let v = params[i];
            let edge = if kind == CurveKind::Constant && i == 0 || i == d {
                v.min(1.0 - v)
            } else {
                v
            };
            1e-4 * edge.abs().max(1e-12)
        })
        .collect();
    let mut negative = |y: &[f64]| {
        let mut p = params.clone();
        for (j, &i) in free.iter().enumerate() {
            p[i] = y[j];
        }
        let rho = if form == Form::Clustered { p[d] } else { 0.0 };
        -log_likelihood(kind, &p[..d], rho, data, &data.weights, &rule)
    };
    let Some(info) = hessian(&mut negative, &x, &h) else {
        return out;
    };
    let Some(cov) = inverse_positive_definite(&info) else {
        return out;
    };
    for (j, &i) in free.iter().enumerate() {
        out[i] = Some(cov[j][j].sqrt());
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::fit::book::read_loan_book_str;

    fn book() -> LoanBook {
        // Two villages, two cycles, sizes 2 and 3; one default in each village-cycle but one.
        let mut text = String::from("cycle,village,group,member,due,paid\n");
        let mut id = 0;
        for cycle in 1..=2 {
            for (v, sizes) in [("north", [2, 3, 3]), ("south", [2, 2, 3])] {
                for (g, &k) in sizes.iter().enumerate() {
                    for j in 0..k {
                        id += 1;
                        let short = j == 0 && g == 0 && !(cycle == 2 && v == "south");
                        let paid = if short { 3 } else { 10 };
                        text.push_str(&format!("{cycle},{v},{v}{g},m{id},10,{paid}\n"));
                    }
                }
            }
        }
        read_loan_book_str(&text, "t.csv", false).unwrap()
    }

    #[test]
    fn patterns_merge_identical_village_cycles() {
        let data = Patterns::build(&book(), 1);
        assert_eq!(data.sizes, [2, 3]);
        assert_eq!(data.groups, 12);
        // north has the same pattern in both cycles; south differs between cycles.
        assert_eq!(data.patterns.len(), 3);
        assert_eq!(data.weights.iter().sum::<f64>(), 4.0);
        assert_eq!(data.resample_weights(&[2, 0]).iter().sum::<f64>(), 4.0);
    }

    #[test]
    fn independent_constant_fit_is_the_closed_form() {
        // With phi constant, each size-k group repays with (1 - phi)^k; the likelihood
        // sum r_k k ln(1 - phi) + d_k ln(1 - (1 - phi)^k) is maximised where its derivative vanishes,
        // which a bisection on the derivative finds independently of the simplex search.
        let data = Patterns::build(&book(), 1);
        let fit = fit_independent(CurveKind::Constant, &data, &data.weights, None, PRECISE);
        let (mut r, mut d) = ([0.0; 2], [0.0; 2]);
        for (cells, w) in data.patterns.iter().zip(&data.weights) {
            for c in cells {
                r[c.size_index as usize] += w * c.repaid as f64;
                d[c.size_index as usize] += w * c.defaulted as f64;
            }
        }
        let slope = |q: f64| -> f64 {
            [2.0, 3.0]
                .iter()
                .enumerate()
                .map(|(i, &k)| {
                    let s = (1.0 - q).powf(k);
                    -r[i] * k / (1.0 - q) + d[i] * k * (1.0 - q).powf(k - 1.0) / (1.0 - s)
                })
                .sum()
        };
        let (mut lo, mut hi) = (1e-6, 0.999);
        for _ in 0..200 {
            let mid = 0.5 * (lo + hi);
            if slope(mid) > 0.0 { lo = mid } else { hi = mid }
        }
        assert!((fit.theta[0] - lo).abs() < 1e-7, "{} vs {lo}", fit.theta[0]);
    }

    #[test]
    fn more_nodes_change_the_likelihood_little() {
        let data = Patterns::build(&book(), 1);
        for rho in [0.05, 0.3, 0.6] {
            let a = log_likelihood(
                CurveKind::Power,
                &[1.2],
                rho,
                &data,
                &data.weights,
                &FactorRule::hermite(64),
            );
            let b = log_likelihood(
                CurveKind::Power,
                &[1.2],
                rho,
                &data,
                &data.weights,
                &FactorRule::hermite(256),
            );
            assert!((a - b).abs() < 1e-7, "rho {rho}: {a} vs {b}");
        }
    }

    #[test]
    fn no_defaults_puts_the_constant_on_its_boundary() {
        let text = "cycle,village,group,member,due,paid\n1,v,g,a,1,1\n1,v,g,b,1,1\n1,w,h,c,1,1\n";
        let book = read_loan_book_str(text, "t.csv", false).unwrap();
        let data = Patterns::build(&book, 1);
        let ind = fit_independent(CurveKind::Constant, &data, &data.weights, None, PRECISE);
        assert!(ind.theta[0] < 1e-4);
        let se = standard_errors(CurveKind::Constant, Form::Independent, &ind, &data);
        assert_eq!(se, [None]);
        let clu = fit_clustered(CurveKind::Constant, &data, &data.weights, &ind, &ind, PRECISE);
        assert_eq!(clu.rho, 0.0);
        assert_eq!(
            standard_errors(CurveKind::Constant, Form::Clustered, &clu, &data),
            [None, None]
        );
    }
}
