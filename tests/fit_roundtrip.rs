//! Round trips: loan books simulated from a known curve and correlation (tests/fit_support, a direct
//! simulation of the one-factor model) are fitted, and the fit must recover what was simulated.

mod fit_support;

use fit_support::{BookSpec, loan_book};
use loancycle::fit::model::{self, CurveKind, Form, Patterns};
use loancycle::fit::{FitOptions, fit_book, read_loan_book_str};
use loancycle::stats::tolerance::{STANDARD_ERRORS, Z_95};

const TRUE_P: f64 = 1.6;
const TRUE_RHO: f64 = 0.2;

fn power(k: u32) -> f64 {
    (k as f64).powf(-TRUE_P)
}

fn spec(seed: u64) -> BookSpec<'static> {
    BookSpec {
        villages: 60,
        cycles: 6,
        groups: 8,
        sizes: &[3, 4, 5, 6],
        phi: &power,
        rho: TRUE_RHO,
        seed,
    }
}

#[test]
fn clustered_intervals_cover_the_truth_and_the_independent_fit_is_biased() {
    // 50 seeded books; the 95% Wald intervals from the observed information must cover the true p
    // and rho in 44 to 50 of them (88-100%: the coverage a correct 95% interval reaches with
    // probability about 0.99 under Binomial(50, 0.95)). The books have 360 village-cycles of 8
    // groups: with 240 village-cycles of 6 groups the maximum-likelihood rho is biased low enough
    // that its interval covered only about 90% (180 of 200 books), a small-sample effect.
    let (mut covered_p, mut covered_rho) = (0, 0);
    let mut independent_p = Vec::new();
    for seed in 0..50 {
        let text = loan_book(&spec(1000 + seed));
        let book = read_loan_book_str(&text, "simulated.csv", false).unwrap();
        let data = Patterns::build(&book, 1);
        let ind = model::fit_independent(CurveKind::Power, &data, &data.weights, None, model::PRECISE);
        let clu = model::fit_clustered(CurveKind::Power, &data, &data.weights, &ind, &ind, model::PRECISE);
        let se = model::standard_errors(CurveKind::Power, Form::Clustered, &clu, &data);
        let (se_p, se_rho) = (se[0].expect("p is interior"), se[1].expect("rho is interior"));
        covered_p += usize::from((clu.theta[0] - TRUE_P).abs() <= Z_95 * se_p);
        covered_rho += usize::from((clu.rho - TRUE_RHO).abs() <= Z_95 * se_rho);
        independent_p.push(ind.theta[0]);
    }
    eprintln!("coverage over 50 books: p {covered_p}, rho {covered_rho}");
    assert!((44..=50).contains(&covered_p), "p covered in {covered_p} of 50");
    assert!((44..=50).contains(&covered_rho), "rho covered in {covered_rho} of 50");
    // Ignoring correlation misstates phi: positively correlated failures make all-repay outcomes more
    // likely than independence would, so the independent fit reads a smaller phi, i.e. a larger p.
    // The mean over 50 books must exceed the truth by more than 4 standard errors of that mean.
    let n = independent_p.len() as f64;
    let mean = independent_p.iter().sum::<f64>() / n;
    let sd = (independent_p.iter().map(|p| (p - mean).powi(2)).sum::<f64>() / (n - 1.0)).sqrt();
    assert!(
        mean - TRUE_P > STANDARD_ERRORS * sd / n.sqrt(),
        "independent p mean {mean}, sd {sd}"
    );
}

#[test]
fn full_fit_recovers_the_curve_the_correlation_and_the_optimum() {
    // power with p = 0.7 has an interior optimum: x ln(1 - x^-0.7) peaks where
    // -(1 - phi) ln(1 - phi) / phi = 0.7 (calculus), which the project's solver gives.
    let curve = |k: u32| (k as f64).powf(-0.7);
    let truth_x =
        loancycle::analytic::optimum::closed_form_optimum(&loancycle::curve::GroupSizeCurve::power(0.7).unwrap())
            .unwrap();
    let text = loan_book(&BookSpec {
        villages: 60,
        cycles: 5,
        groups: 5,
        sizes: &[2, 3, 4, 5],
        phi: &curve,
        rho: 0.15,
        seed: 77,
    });
    let book = read_loan_book_str(&text, "simulated.csv", false).unwrap();
    let report = fit_book(
        &book,
        &FitOptions {
            resamples: 500,
            seed: 5,
            threads: None,
        },
    )
    .unwrap();
    // scaled_power nests power, so either may win by AIC; both must put the truth inside 4 SE.
    assert!(
        matches!(report.best_curve, CurveKind::Power | CurveKind::ScaledPower),
        "{:?}",
        report.best_curve
    );
    let power = report
        .curves
        .iter()
        .find(|c| c.curve == CurveKind::Power && c.form == Form::Clustered)
        .unwrap();
    let se = power.std_errors["p"].unwrap();
    assert!((power.params["p"] - 0.7).abs() <= STANDARD_ERRORS * se, "{power:?}");
    let se_rho = power.std_errors["rho"].unwrap();
    assert!(
        (power.params["rho"] - 0.15).abs() <= STANDARD_ERRORS * se_rho,
        "{power:?}"
    );
    let o = &report.optimum;
    // The interval may be open above: resamples whose refitted curve has no finite maximiser count as
    // an optimum beyond every size.
    let (lo, hi) = (o.ci_low.unwrap(), o.ci_high.unwrap_or(f64::INFINITY));
    assert!(lo <= truth_x && truth_x <= hi, "x* {truth_x} outside {lo}..{hi}");
    assert!(o.integers.iter().all(|&k| f64::from(k) >= lo && f64::from(k) <= hi));
    assert_eq!(o.resamples, 500);
    // The calibrated scenario must validate; a scaled_power winner is written as a table curve.
    let toml = report.scenario_toml();
    let scenario = loancycle::scenario::Scenario::from_toml_str(&toml, "calibrated.toml")
        .unwrap_or_else(|e| panic!("{e}\n{toml}"));
    assert!(scenario.arms().len() >= 4, "one arm per size seen");
    if report.best_curve == CurveKind::ScaledPower {
        assert!(toml.contains("curve = \"table\""), "{toml}");
    }
    // Every observed rate's clustered interval should be wider than the naive binomial one.
    for row in &report.by_size {
        let naive = Z_95 * (row.repayment_rate * (1.0 - row.repayment_rate) / row.groups as f64).sqrt();
        let half = (row.rate_ci_high.unwrap() - row.rate_ci_low.unwrap()) / 2.0;
        assert!(half > naive, "size {}: {half} vs naive {naive}", row.group_size);
    }
}

#[test]
fn bootstrap_is_identical_for_any_thread_count() {
    let text = loan_book(&BookSpec {
        villages: 20,
        cycles: 3,
        groups: 4,
        sizes: &[2, 4],
        phi: &|k| 0.4 * (k as f64).powf(-0.5),
        rho: 0.1,
        seed: 3,
    });
    let book = read_loan_book_str(&text, "simulated.csv", false).unwrap();
    let run = |threads| {
        fit_book(
            &book,
            &FitOptions {
                resamples: 500,
                seed: 11,
                threads: Some(threads),
            },
        )
        .unwrap()
        .to_json()
    };
    assert_eq!(run(1), run(2));
}
