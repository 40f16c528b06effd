//! The best group size when members are independent and identical and nobody covers anybody.
//!
//! Then a group of k repays only if none of its members is hit, with probability (1 - phi(k))^k, and
//! the trade-off the group-size curve encodes (bigger groups screen better, but have more members to
//! fail) has a closed-form answer: the maximiser of f(x) = x ln(1 - phi(x)). This module finds it for
//! every curve kind, reports the best integer size beside it, and sweeps a band of curve exponents so a
//! planner can see how much the answer depends on a parameter nobody knows precisely.

use super::{AnalyticError, bad};
use crate::curve::{CurveError, GroupSizeCurve};
use serde::Serialize;
use std::collections::BTreeSet;

/// Right end of the scanned range of real group sizes.
pub const SCAN_END: f64 = 1e6;
/// Log-grid points used to bracket local maxima: neighbouring points differ by 0.17 %, far finer than
/// any feature of the parametric curves.
const SCAN_POINTS: usize = 8000;
/// Most integer sizes one request may tabulate.
pub const MAX_RANGE_ROWS: u32 = 100_000;
/// Most steps a parameter band may be cut into.
pub const MAX_BAND_STEPS: usize = 100_000;

/// Where the objective x ln(1 - phi(x)) reaches its largest value on the scanned range.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum MaximiserKind {
    /// A root of the derivative strictly inside the range.
    Interior,
    /// The objective falls from the smallest admissible size on, so the smallest group is best.
    DomainStart,
    /// The objective keeps rising to the end of the range: there is no finite maximiser.
    RisingToEnd,
    /// The objective is constant (phi is 0 or 1 everywhere): every size is equally good.
    Flat,
    /// A table curve, defined at integer sizes only: there is no continuous maximiser.
    IntegerOnly,
}

/// The continuous maximiser of x ln(1 - phi(x)) over [domain start, [`SCAN_END`]].
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ContinuousOptimum {
    /// What kind of maximum was found.
    pub kind: MaximiserKind,
    /// The maximiser x*, or `None` when there is no finite one (or the curve is a table).
    pub x_star: Option<f64>,
    /// (1 - phi(x*))^x*, the group repayment probability at x*.
    pub repayment_at_x_star: Option<f64>,
    /// Whether the scan found exactly one local maximum and the objective is not rising at the end.
    pub unique: bool,
    /// Every local maximum found (interior roots and a maximum at the domain start), increasing.
    pub local_maxima: Vec<f64>,
    /// Left end of the scanned range (the curve's domain start).
    pub scan_start: f64,
    /// Right end of the scanned range.
    pub scan_end: f64,
    /// (1 - phi)^x at the right end, the value a rising objective is approaching.
    pub repayment_at_scan_end: Option<f64>,
}

/// phi, 1 - phi and phi' of a (possibly scaled) curve at a real size.
struct Point {
    phi: f64,
    one_minus_phi: f64,
    slope_of_phi: f64,
}

/// The objective for the curve u * phi(x), capped at 1; u = 1 is the plain curve.
struct Objective<'a> {
    curve: &'a GroupSizeCurve,
    scale: f64,
}

impl Objective<'_> {
    fn point(&self, x: f64) -> Option<Point> {
        // 1 - phi is formed without subtraction where phi is near 1, so that the log stays accurate.
        let (phi, one_minus_phi, slope_of_phi) = match *self.curve {
            GroupSizeCurve::Constant { value } => (value, 1.0 - value, 0.0),
            GroupSizeCurve::Power { p } => {
                if x < 1.0 {
                    return None;
                }
                let phi = (-p * x.ln()).exp();
                (phi, -(-p * x.ln()).exp_m1(), -p * phi / x)
            }
            GroupSizeCurve::PowerPlusLog { p } => {
                if x < 2.0 {
                    return None;
                }
                let log = x.ln();
                let g = x.powf(p) + log.powf(1.0 / p);
                if !g.is_finite() {
                    // phi is below the smallest double: the objective has saturated at 0.
                    return Some(Point {
                        phi: 0.0,
                        one_minus_phi: 1.0,
                        slope_of_phi: 0.0,
                    });
                }
                let g_minus_one = (p * log).exp_m1() + log.powf(1.0 / p);
                let dg = p * x.powf(p - 1.0) + log.powf(1.0 / p - 1.0) / (p * x);
                // phi' = -g' / g^2, written as -(g'/g) phi so that g^2 cannot overflow.
                let phi = 1.0 / g;
                (phi, g_minus_one / g, -(dg / g) * phi)
            }
            GroupSizeCurve::Table { .. } => return None,
        };
        if self.scale == 1.0 {
            return Some(Point {
                phi,
                one_minus_phi,
                slope_of_phi,
            });
        }
        let scaled = self.scale * phi;
        if scaled >= 1.0 {
            Some(Point {
                phi: 1.0,
                one_minus_phi: 0.0,
                slope_of_phi: self.scale * slope_of_phi,
            })
        } else {
            Some(Point {
                phi: scaled,
                one_minus_phi: 1.0 - scaled,
                slope_of_phi: self.scale * slope_of_phi,
            })
        }
    }

    /// ln(1 - phi), accurate for small phi too.
    fn log_survival(pt: &Point) -> f64 {
        if pt.one_minus_phi <= 0.0 {
            f64::NEG_INFINITY
        } else if pt.phi < 0.5 {
            (-pt.phi).ln_1p()
        } else {
            pt.one_minus_phi.ln()
        }
    }

    fn value(&self, x: f64) -> f64 {
        self.point(x).map_or(f64::NAN, |pt| x * Self::log_survival(&pt))
    }

    /// f'(x) = ln(1 - phi) - x phi' / (1 - phi); where phi = 1 the objective is -inf and climbs out
    /// of it as phi falls, which the sign of phi' tells.
    fn slope(&self, x: f64) -> f64 {
        let Some(pt) = self.point(x) else { return f64::NAN };
        if pt.one_minus_phi <= 0.0 {
            return if pt.slope_of_phi < 0.0 {
                f64::INFINITY
            } else if pt.slope_of_phi > 0.0 {
                f64::NEG_INFINITY
            } else {
                0.0
            };
        }
        Self::log_survival(&pt) - x * pt.slope_of_phi / pt.one_minus_phi
    }

    /// The root of f' in [lo, hi] given f'(lo) > 0 >= f'(hi), to the last representable bit. Bisection
    /// on the derivative's sign: near a flat maximum comparing f itself cannot separate neighbours.
    fn root_of_slope(&self, mut lo: f64, mut hi: f64) -> f64 {
        for _ in 0..300 {
            let mid = 0.5 * (lo + hi);
            if mid <= lo || mid >= hi {
                break;
            }
            if self.slope(mid) > 0.0 {
                lo = mid;
            } else {
                hi = mid;
            }
        }
        0.5 * (lo + hi)
    }
}

fn repayment_from_value(value: f64) -> f64 {
    value.exp()
}

/// The continuous optimum of u * phi (capped at 1), scanned over [domain start, SCAN_END].
fn scan(curve: &GroupSizeCurve, scale: f64) -> ContinuousOptimum {
    let start = curve.domain_start();
    let mut report = ContinuousOptimum {
        kind: MaximiserKind::IntegerOnly,
        x_star: None,
        repayment_at_x_star: None,
        unique: false,
        local_maxima: Vec::new(),
        scan_start: start,
        scan_end: SCAN_END,
        repayment_at_scan_end: None,
    };
    if matches!(curve, GroupSizeCurve::Table { .. }) {
        return report;
    }
    let objective = Objective { curve, scale };
    report.repayment_at_scan_end = Some(repayment_from_value(objective.value(SCAN_END)));
    let ratio = (SCAN_END / start).ln() / SCAN_POINTS as f64;
    let grid: Vec<f64> = (0..=SCAN_POINTS)
        .map(|i| {
            if i == SCAN_POINTS {
                SCAN_END
            } else {
                start * (ratio * i as f64).exp()
            }
        })
        .collect();
    let slopes: Vec<f64> = grid.iter().map(|&x| objective.slope(x)).collect();
    if slopes.iter().all(|&s| s == 0.0) {
        report.kind = MaximiserKind::Flat;
        return report;
    }
    // Exact zeros are skipped when bracketing: they come from phi underflowing to 0, where the
    // objective has saturated at its supremum, not from a root of the derivative.
    let signed: Vec<usize> = (0..=SCAN_POINTS).filter(|&i| slopes[i] != 0.0).collect();
    let mut maxima = Vec::new();
    if slopes[0] < 0.0 {
        maxima.push(start);
    }
    for pair in signed.windows(2) {
        let (i, j) = (pair[0], pair[1]);
        if slopes[i] > 0.0 && slopes[j] < 0.0 {
            maxima.push(objective.root_of_slope(grid[i], grid[j]));
        }
    }
    // Rising at the end: the last non-zero slope is positive (a saturated tail counts as rising).
    let rising_at_end = signed.last().is_some_and(|&i| slopes[i] > 0.0);
    let best = maxima
        .iter()
        .copied()
        .map(|x| (x, objective.value(x)))
        .max_by(|a, b| a.1.total_cmp(&b.1));
    report.unique = maxima.len() == 1 && !rising_at_end;
    report.local_maxima = maxima;
    match best {
        Some((x, v)) if !(rising_at_end && objective.value(SCAN_END) >= v) => {
            report.kind = if x == start && slopes[0] < 0.0 {
                MaximiserKind::DomainStart
            } else {
                MaximiserKind::Interior
            };
            report.x_star = Some(x);
            report.repayment_at_x_star = Some(repayment_from_value(v));
        }
        _ => report.kind = MaximiserKind::RisingToEnd,
    }
    report
}

/// The continuous maximiser x* of x ln(1 - phi(x)) for a parametric curve: `None` for a table curve,
/// when the objective keeps rising to [`SCAN_END`] (no finite maximiser), or when it is flat. A curve
/// whose objective falls from the start yields its domain start (the smallest group is best).
pub fn closed_form_optimum(curve: &GroupSizeCurve) -> Option<f64> {
    closed_form_optimum_scaled(curve, 1.0)
}

/// As [`closed_form_optimum`] for the curve min(1, u * phi(x)): members whose risk multiplier u
/// scales every size's failure probability alike. `None` also for a negative or non-finite u.
pub fn closed_form_optimum_scaled(curve: &GroupSizeCurve, scale: f64) -> Option<f64> {
    if !(scale.is_finite() && scale >= 0.0) || validate_curve(curve).is_err() {
        return None;
    }
    let optimum = scan(curve, scale);
    match optimum.kind {
        MaximiserKind::Interior | MaximiserKind::DomainStart => optimum.x_star,
        _ => None,
    }
}

/// Largest group size [`best_integer_scaled`] considers for a parametric curve.
pub const LARGEST_SIZE_SCANNED: u32 = 1000;

/// The integer group size k >= 1 (from the curve's first defined size) that maximises the group
/// repayment (1 - min(1, u phi(k)))^k of independent members without cover, with every member's
/// probability scaled by the risk multiplier u; the smaller size on ties. A table curve is read at
/// its keys; a parametric curve up to [`LARGEST_SIZE_SCANNED`]. `None` for a bad u or when no size
/// repays at all.
pub fn best_integer_scaled(curve: &GroupSizeCurve, scale: f64) -> Option<u32> {
    if !(scale.is_finite() && scale >= 0.0) || validate_curve(curve).is_err() {
        return None;
    }
    let sizes: Vec<u32> = match curve {
        GroupSizeCurve::Table { values } => values.keys().copied().collect(),
        _ => (1..=LARGEST_SIZE_SCANNED).collect(),
    };
    let mut best: Option<(u32, f64)> = None;
    for k in sizes {
        let Some(phi) = curve.at(k) else { continue };
        let q = (scale * phi).min(1.0);
        let log_repayment = f64::from(k) * (-q).ln_1p();
        if log_repayment.is_finite() && best.is_none_or(|(_, b)| log_repayment > b) {
            best = Some((k, log_repayment));
        }
    }
    best.map(|b| b.0)
}

/// What to solve: a curve, optionally a band of its exponent, and the integer sizes to tabulate.
#[derive(Debug, Clone, PartialEq)]
pub struct OptimumRequest {
    /// The curve at its own parameter.
    pub curve: GroupSizeCurve,
    /// Optional band of the exponent p: (from, to, steps), giving steps + 1 equally spaced values of p
    /// from `from` to `to` inclusive. Allowed for power and power_plus_log curves only.
    pub band: Option<(f64, f64, usize)>,
    /// Inclusive range of integer group sizes to tabulate, starting at 1 or more.
    pub range: (u32, u32),
}

/// The repayment probability at one integer group size.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct IntegerRow {
    /// Group size k.
    pub group_size: u32,
    /// phi(k), or `None` where the curve is not defined.
    pub phi: Option<f64>,
    /// (1 - phi(k))^k, or `None` where the curve is not defined.
    pub repayment: Option<f64>,
}

/// One value of the exponent in a band.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct BandPoint {
    /// The exponent p.
    pub p: f64,
    /// The continuous maximiser at p, `None` when there is no finite one.
    pub x_star: Option<f64>,
    /// (1 - phi(x*))^x* at p.
    pub repayment_at_x_star: Option<f64>,
    /// The best integer size of the requested range at p.
    pub best_integer: Option<u32>,
}

/// Where the band's smallest or largest x* occurs.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct BandExtreme {
    /// The exponent p.
    pub p: f64,
    /// x* at that p.
    pub x_star: f64,
}

/// How the optimum moves as the exponent sweeps a band.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct BandReport {
    /// First exponent of the band.
    pub p_from: f64,
    /// Last exponent of the band.
    pub p_to: f64,
    /// Number of equal steps (steps + 1 points).
    pub steps: usize,
    /// Every grid point of the band.
    pub points: Vec<BandPoint>,
    /// The smallest finite x*, refined between grid points by golden-section search when it falls
    /// inside the band.
    pub min_x_star: Option<BandExtreme>,
    /// The largest finite x*, refined the same way.
    pub max_x_star: Option<BandExtreme>,
    /// The integers the band admits: those in [min x*, max x*]. These are the sizes a planner who
    /// trusts the band but not a single p cannot rule out as the continuous optimum.
    pub integers_inside: Vec<u32>,
    /// The integers that are the best integer of the range for at least one grid point (and the
    /// refined extremes). Can be wider than `integers_inside`: near x* = 3.5 the best integer may be 3.
    pub best_integers: Vec<u32>,
    /// Grid exponents where the objective rises to the end of the range (no finite maximiser). Near
    /// them x* can grow without bound, so the extremes above describe the other grid values only.
    pub without_finite_maximiser: Vec<f64>,
}

/// The full answer to an [`OptimumRequest`].
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct OptimumReport {
    /// The curve solved.
    pub curve: GroupSizeCurve,
    /// The continuous maximiser, `None` when there is no finite one or the curve is a table.
    pub x_star: Option<f64>,
    /// (1 - phi(x*))^x*.
    pub repayment_at_x_star: Option<f64>,
    /// Full detail of the continuous scan.
    pub continuous: ContinuousOptimum,
    /// Inclusive range of integers tabulated.
    pub range: (u32, u32),
    /// The integer size of the range with the highest repayment probability (smallest on ties), `None`
    /// when the curve is defined at none of them.
    pub best_integer: Option<u32>,
    /// Repayment probability at the best integer.
    pub repayment_at_best_integer: Option<f64>,
    /// Every integer of the range.
    pub by_integer: Vec<IntegerRow>,
    /// The band sweep, when one was requested.
    pub band: Option<BandReport>,
    /// The mean risk multiplier u applied to every phi (capped at 1); 1 for the plain curve.
    pub risk_multiplier: f64,
    /// The best integer size over every size from the curve's first up to [`LARGEST_SIZE_SCANNED`]
    /// (a table's keys), whatever the range: what group_size.csv reports as `best_closed_form`.
    pub best_integer_overall: Option<u32>,
}

fn from_curve_error(e: CurveError) -> AnalyticError {
    let CurveError::BadParameter { name, value, allowed } = e;
    bad(name, value, allowed)
}

/// Re-checks a curve built by hand (its fields are public) with the curve's own constructors.
fn validate_curve(curve: &GroupSizeCurve) -> Result<(), AnalyticError> {
    match curve {
        GroupSizeCurve::Constant { value } => GroupSizeCurve::constant(*value),
        GroupSizeCurve::Power { p } => GroupSizeCurve::power(*p),
        GroupSizeCurve::PowerPlusLog { p } => GroupSizeCurve::power_plus_log(*p),
        GroupSizeCurve::Table { values } => GroupSizeCurve::table(values.clone()),
    }
    .map(|_| ())
    .map_err(from_curve_error)
}

fn integer_rows(curve: &GroupSizeCurve, range: (u32, u32), scale: f64) -> Vec<IntegerRow> {
    (range.0..=range.1)
        .map(|k| {
            let phi = curve.at(k).map(|q| if scale == 1.0 { q } else { (scale * q).min(1.0) });
            IntegerRow {
                group_size: k,
                phi,
                repayment: phi.map(|q| (k as f64 * (-q).ln_1p()).exp()),
            }
        })
        .collect()
}

/// The best row as (size, repayment). Sizes are compared on k ln(1 - phi(k)), which keeps its
/// resolution where (1 - phi)^k has rounded to 1.
fn best_of(rows: &[IntegerRow]) -> Option<(u32, f64)> {
    let mut best: Option<(u32, f64, f64)> = None;
    for row in rows {
        if let (Some(phi), Some(r)) = (row.phi, row.repayment) {
            let log_repayment = row.group_size as f64 * (-phi).ln_1p();
            if best.is_none_or(|(_, b, _)| log_repayment > b) {
                best = Some((row.group_size, log_repayment, r));
            }
        }
    }
    best.map(|(k, _, r)| (k, r))
}

fn with_exponent(curve: &GroupSizeCurve, p: f64) -> GroupSizeCurve {
    match curve {
        GroupSizeCurve::Power { .. } => GroupSizeCurve::Power { p },
        _ => GroupSizeCurve::PowerPlusLog { p },
    }
}

/// Golden-section search for an extreme of x*(p) on [lo, hi]; `sign` = 1 finds the minimum, -1 the
/// maximum. Returns the best point seen, which never loses to the grid point it started from.
fn refine_extreme(curve: &GroupSizeCurve, lo: f64, hi: f64, sign: f64, scale: f64) -> Option<BandExtreme> {
    let x_star = |p: f64| scan(&with_exponent(curve, p), scale).x_star;
    let inv_phi = (5f64.sqrt() - 1.0) / 2.0;
    let (mut a, mut b) = (lo, hi);
    let mut c = b - inv_phi * (b - a);
    let mut d = a + inv_phi * (b - a);
    let (mut fc, mut fd) = (x_star(c)?, x_star(d)?);
    for _ in 0..80 {
        if sign * fc < sign * fd {
            b = d;
            d = c;
            fd = fc;
            c = b - inv_phi * (b - a);
            fc = x_star(c)?;
        } else {
            a = c;
            c = d;
            fc = fd;
            d = a + inv_phi * (b - a);
            fd = x_star(d)?;
        }
        if b - a <= 1e-12 * (1.0 + a.abs()) {
            break;
        }
    }
    Some(if sign * fc < sign * fd {
        BandExtreme { p: c, x_star: fc }
    } else {
        BandExtreme { p: d, x_star: fd }
    })
}

fn solve_band(
    curve: &GroupSizeCurve,
    (from, to, steps): (f64, f64, usize),
    range: (u32, u32),
    scale: f64,
) -> Result<BandReport, AnalyticError> {
    if !matches!(
        curve,
        GroupSizeCurve::Power { .. } | GroupSizeCurve::PowerPlusLog { .. }
    ) {
        return Err(bad(
            "band",
            format!("{from}..{to}"),
            format!(
                "a band of the exponent p, which a {} curve does not have",
                curve.kind_name()
            ),
        ));
    }
    for (name, v) in [("band start", from), ("band end", to)] {
        if !(v.is_finite() && v > 0.0) {
            return Err(bad(name, v, "a finite exponent > 0"));
        }
    }
    if from > to {
        return Err(bad("band", format!("{from}..{to}"), "a band whose start is <= its end"));
    }
    if steps == 0 || steps > MAX_BAND_STEPS {
        return Err(bad("steps", steps, format!("a step count in 1..={MAX_BAND_STEPS}")));
    }
    let ps: Vec<f64> = (0..=steps)
        .map(|i| {
            if i == steps {
                to
            } else {
                from + (to - from) * i as f64 / steps as f64
            }
        })
        .collect();
    let mut points = Vec::with_capacity(ps.len());
    let mut best_integers = BTreeSet::new();
    let mut without = Vec::new();
    for &p in &ps {
        let c = with_exponent(curve, p);
        let opt = scan(&c, scale);
        let best = best_of(&integer_rows(&c, range, scale)).map(|b| b.0);
        best_integers.extend(best);
        if opt.x_star.is_none() {
            without.push(p);
        }
        points.push(BandPoint {
            p,
            x_star: opt.x_star,
            repayment_at_x_star: opt.repayment_at_x_star,
            best_integer: best,
        });
    }
    let finite: Vec<(usize, f64)> = points
        .iter()
        .enumerate()
        .filter_map(|(i, pt)| pt.x_star.map(|x| (i, x)))
        .collect();
    let mut extremes = [None, None];
    for (slot, sign) in [(0usize, 1.0), (1, -1.0)] {
        let Some(&(i, x)) = finite.iter().min_by(|a, b| (sign * a.1).total_cmp(&(sign * b.1))) else {
            continue;
        };
        let mut extreme = BandExtreme { p: ps[i], x_star: x };
        let neighbours_finite = i > 0 && i < steps && points[i - 1].x_star.is_some() && points[i + 1].x_star.is_some();
        if neighbours_finite
            && let Some(r) = refine_extreme(curve, ps[i - 1], ps[i + 1], sign, scale)
            && sign * r.x_star < sign * extreme.x_star
        {
            extreme = r;
        }
        extremes[slot] = Some(extreme);
    }
    let [min_x_star, max_x_star] = extremes;
    for e in [min_x_star, max_x_star].into_iter().flatten() {
        best_integers.extend(best_of(&integer_rows(&with_exponent(curve, e.p), range, scale)).map(|b| b.0));
    }
    let integers_inside = match (min_x_star, max_x_star) {
        (Some(lo), Some(hi)) => {
            let first = lo.x_star.ceil().max(0.0) as u64;
            let last = hi.x_star.floor().min(u32::MAX as f64) as u64;
            (first..=last)
                .filter_map(|k| u32::try_from(k).ok())
                .take(MAX_RANGE_ROWS as usize)
                .collect()
        }
        _ => Vec::new(),
    };
    Ok(BandReport {
        p_from: from,
        p_to: to,
        steps,
        points,
        min_x_star,
        max_x_star,
        integers_inside,
        best_integers: best_integers.into_iter().collect(),
        without_finite_maximiser: without,
    })
}

/// Solves a request: the continuous optimum, the integer table and, if asked, the band sweep.
pub fn solve(request: &OptimumRequest) -> Result<OptimumReport, AnalyticError> {
    solve_with_risk(request, 1.0)
}

/// As [`solve`] for members whose mean risk multiplier u scales every size's failure probability,
/// min(1, u phi(k)), as `run` applies an arm's mean risk in group_size.csv's `best_closed_form`.
pub fn solve_with_risk(request: &OptimumRequest, risk: f64) -> Result<OptimumReport, AnalyticError> {
    if !(risk.is_finite() && risk >= 0.0) {
        return Err(bad("risk", risk, "a finite mean risk multiplier >= 0"));
    }
    validate_curve(&request.curve)?;
    let (first, last) = request.range;
    if first == 0 {
        return Err(bad("range start", first, "a group size >= 1"));
    }
    if first > last {
        return Err(bad(
            "range",
            format!("{first}..{last}"),
            "a range whose start is <= its end",
        ));
    }
    if last - first >= MAX_RANGE_ROWS {
        return Err(bad(
            "range",
            format!("{first}..{last}"),
            format!("at most {MAX_RANGE_ROWS} group sizes"),
        ));
    }
    let continuous = scan(&request.curve, risk);
    let by_integer = integer_rows(&request.curve, request.range, risk);
    let best = best_of(&by_integer);
    let band = request
        .band
        .map(|b| solve_band(&request.curve, b, request.range, risk))
        .transpose()?;
    Ok(OptimumReport {
        curve: request.curve.clone(),
        x_star: continuous.x_star,
        repayment_at_x_star: continuous.repayment_at_x_star,
        continuous,
        range: request.range,
        best_integer: best.map(|b| b.0),
        repayment_at_best_integer: best.map(|b| b.1),
        by_integer,
        band,
        risk_multiplier: risk,
        best_integer_overall: best_integer_scaled(&request.curve, risk),
    })
}

// Command-line input of `optimum`. The curve itself is read by `curve_from_parts`, the one place
// that turns command-line text into a curve, through the scenario's curve parser.

fn split_range(text: &str) -> Option<(&str, &str)> {
    let (a, b) = text.split_once("..")?;
    Some((a.trim(), b.strip_prefix('=').unwrap_or(b).trim()))
}

/// Parses a band of exponents such as `0.5..1` (both ends finite, start <= end).
pub fn parse_band(text: &str) -> Result<(f64, f64), AnalyticError> {
    let allowed = "two numbers written from..to with from <= to, such as 0.5..1";
    let (a, b) = split_range(text).ok_or_else(|| bad("band", format!("\"{text}\""), allowed))?;
    let (Ok(a), Ok(b)) = (a.parse::<f64>(), b.parse::<f64>()) else {
        return Err(bad("band", format!("\"{text}\""), allowed));
    };
    if !(a.is_finite() && b.is_finite() && a <= b) {
        return Err(bad("band", format!("\"{text}\""), allowed));
    }
    Ok((a, b))
}

/// Parses an inclusive range of group sizes such as `2..12` (start >= 1, start <= end).
pub fn parse_range(text: &str) -> Result<(u32, u32), AnalyticError> {
    let allowed = "two whole group sizes written from..to with 1 <= from <= to, such as 2..12";
    let (a, b) = split_range(text).ok_or_else(|| bad("range", format!("\"{text}\""), allowed))?;
    let (Ok(a), Ok(b)) = (a.parse::<u32>(), b.parse::<u32>()) else {
        return Err(bad("range", format!("\"{text}\""), allowed));
    };
    if a == 0 || a > b {
        return Err(bad("range", format!("\"{text}\""), allowed));
    }
    Ok((a, b))
}

/// Builds a curve from command-line parts through the scenario's own curve checks
/// ([`crate::scenario::curve_from_flags`]), so a bad curve is refused with the bounds and words a
/// scenario file gets, naming the flag: the kind name as written in scenario files, the flag and text
/// of its one number (`--value` of a constant, `--p` of power and power_plus_log) and, for a table,
/// the text of `--values` (`2=0.08,3=0.06`).
pub fn curve_from_parts(
    kind: &str,
    parameter: Option<(&'static str, &str)>,
    table: Option<&str>,
) -> Result<GroupSizeCurve, crate::scenario::ScenarioError> {
    crate::scenario::curve_from_flags("optimum", kind, parameter, table)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn request(curve: GroupSizeCurve) -> OptimumRequest {
        OptimumRequest {
            curve,
            band: None,
            range: (2, 12),
        }
    }

    #[test]
    fn constant_curve_prefers_the_smallest_group_and_zero_is_flat() {
        let r = solve(&OptimumRequest {
            range: (1, 5),
            ..request(GroupSizeCurve::constant(0.1).unwrap())
        })
        .unwrap();
        assert_eq!(r.continuous.kind, MaximiserKind::DomainStart);
        assert_eq!(r.x_star, Some(1.0));
        assert_eq!(r.best_integer, Some(1));
        let flat = solve(&request(GroupSizeCurve::constant(0.0).unwrap())).unwrap();
        assert_eq!(flat.continuous.kind, MaximiserKind::Flat);
        assert_eq!(flat.x_star, None);
        assert_eq!(closed_form_optimum(&GroupSizeCurve::constant(0.0).unwrap()), None);
    }

    #[test]
    fn scaling_the_curve_moves_the_optimum() {
        // Doubling every failure probability of k^-0.6 makes the screening of larger groups worth
        // more, so x* moves up; halving it makes the smallest group best. The new x* is checked to be
        // a root of the scaled derivative.
        let curve = GroupSizeCurve::power(0.6).unwrap();
        let plain = closed_form_optimum(&curve).unwrap();
        let scaled = closed_form_optimum_scaled(&curve, 2.0).unwrap();
        assert!(scaled > plain + 1.0, "{plain} -> {scaled}");
        assert_eq!(closed_form_optimum_scaled(&curve, 0.5), Some(1.0));
        let obj = Objective {
            curve: &curve,
            scale: 2.0,
        };
        assert!(obj.slope(scaled * 0.999) > 0.0 && obj.slope(scaled * 1.001) < 0.0);
        assert_eq!(closed_form_optimum_scaled(&curve, f64::NAN), None);
    }

    #[test]
    fn underflowing_curves_rise_to_the_end_instead_of_inventing_a_maximum() {
        // For p > 1 both parametric objectives rise towards 0 for ever; with p this large phi
        // underflows (power) or g^2 would overflow (power_plus_log) well inside the scanned range.
        for curve in [
            GroupSizeCurve::power(1e6).unwrap(),
            GroupSizeCurve::power_plus_log(50.0).unwrap(),
        ] {
            let r = solve(&request(curve.clone())).unwrap();
            assert_eq!(
                r.continuous.kind,
                MaximiserKind::RisingToEnd,
                "{curve:?}: {:?}",
                r.continuous
            );
            assert!(r.continuous.local_maxima.is_empty(), "{curve:?}");
        }
        // (1 - phi(k))^k rounds to 1 from k = 3 on for power_plus_log p = 50, but the largest size of
        // the range is still the best, as k ln(1 - phi(k)) shows.
        let r = solve(&request(GroupSizeCurve::power_plus_log(50.0).unwrap())).unwrap();
        assert_eq!(r.best_integer, Some(12));
        // power_plus_log with p = 0.1: phi ~ (ln x)^-10 for large x, so x ln(1 - phi) ~ -x (ln x)^-10,
        // whose derivative vanishes at ln x = 10 (calculus), i.e. near x = e^10.
        let x = closed_form_optimum(&GroupSizeCurve::power_plus_log(0.1).unwrap()).unwrap();
        assert!((x.ln() - 10.0).abs() < 0.01, "{x}");
    }

    #[test]
    fn parsers_accept_the_documented_forms_and_name_bad_input() {
        assert_eq!(parse_band("0.5..1").unwrap(), (0.5, 1.0));
        assert_eq!(parse_band(" 0.5 ..= 1 ").unwrap(), (0.5, 1.0));
        assert!(
            parse_band("1..0.5")
                .unwrap_err()
                .to_string()
                .contains("band = \"1..0.5\"")
        );
        assert!(parse_band("a..b").is_err() && parse_band("0.5").is_err() && parse_band("nan..1").is_err());
        assert_eq!(parse_range("2..12").unwrap(), (2, 12));
        assert!(parse_range("0..3").is_err() && parse_range("5..2").is_err() && parse_range("2..x").is_err());
        assert!(curve_from_parts("power", Some(("--p", "0.5")), None).is_ok());
        assert!(
            curve_from_parts("power", None, None)
                .unwrap_err()
                .to_string()
                .contains("option --p: a power curve needs its exponent p")
        );
        assert!(
            curve_from_parts("zigzag", Some(("--p", "1")), None)
                .unwrap_err()
                .to_string()
                .contains("\"zigzag\"")
        );
        let t = curve_from_parts("table", None, Some("2=0.08, 3=0.06")).unwrap();
        assert_eq!(t.at(2), Some(0.08));
        // The scenario's bounds and words, naming the flag.
        let e = curve_from_parts("table", None, Some("2=0.08,2=0.07"))
            .unwrap_err()
            .to_string();
        assert!(e.contains("option --values") && e.contains("repeats"), "{e}");
        for bad in ["0=0.1", "2=1.5", "x=0.1", "2"] {
            assert!(curve_from_parts("table", None, Some(bad)).is_err(), "{bad}");
        }
        let e = curve_from_parts("power", Some(("--p", "-2")), None)
            .unwrap_err()
            .to_string();
        assert_eq!(e, "optimum: option --p: -2 is not allowed: a finite number > 0");
    }

    #[test]
    fn solve_refuses_bad_requests() {
        let curve = GroupSizeCurve::power(0.5).unwrap();
        assert!(
            solve(&OptimumRequest {
                curve: curve.clone(),
                band: None,
                range: (0, 4)
            })
            .is_err()
        );
        assert!(
            solve(&OptimumRequest {
                curve: curve.clone(),
                band: None,
                range: (5, 4)
            })
            .is_err()
        );
        assert!(
            solve(&OptimumRequest {
                curve: curve.clone(),
                band: None,
                range: (1, 1_000_000)
            })
            .is_err()
        );
        assert!(
            solve(&OptimumRequest {
                curve: curve.clone(),
                band: Some((0.5, 1.0, 0)),
                range: (2, 4)
            })
            .is_err()
        );
        assert!(
            solve(&OptimumRequest {
                curve: curve.clone(),
                band: Some((1.0, 0.5, 4)),
                range: (2, 4)
            })
            .is_err()
        );
        assert!(
            solve(&OptimumRequest {
                curve: curve.clone(),
                band: Some((-1.0, 0.5, 4)),
                range: (2, 4)
            })
            .is_err()
        );
        let e = solve(&OptimumRequest {
            curve: GroupSizeCurve::Power { p: -2.0 },
            band: None,
            range: (2, 4),
        })
        .unwrap_err();
        assert!(e.to_string().contains("p = -2"), "{e}");
        let constant = GroupSizeCurve::constant(0.1).unwrap();
        assert!(
            solve(&OptimumRequest {
                curve: constant,
                band: Some((0.5, 1.0, 4)),
                range: (2, 4)
            })
            .is_err()
        );
    }
}
