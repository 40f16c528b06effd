//! A model-free check on clustering: the intra-cluster correlation of group defaults over
//! village-cycles, by beta-binomial maximum likelihood and by the one-way ANOVA moment estimator.
//!
//! Neither assumes the one-factor model or any group-size curve, so agreement with the clustered
//! fit's rho in sign and rough size says the clustering is in the data and not an artefact of the
//! model (the two correlations are on different scales: latent members versus observed groups).

use super::optim::{hessian, inverse_positive_definite, nelder_mead};
use serde::Serialize;

/// Beta-binomial estimates from clusters given as (cluster size n, successes y, number of clusters).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct BetaBinomialFit {
    /// Clusters used (those with at least one trial).
    pub clusters: u64,
    /// Maximum-likelihood mean success probability mu = alpha / (alpha + beta).
    pub mean: f64,
    /// Maximum-likelihood intra-cluster correlation 1 / (alpha + beta + 1).
    pub icc_ml: f64,
    /// Standard error of `icc_ml` from the observed information; `None` on the boundary icc = 0.
    pub icc_ml_std_error: Option<f64>,
    /// Maximised log-likelihood including the binomial coefficients (as scipy.stats.betabinom.logpmf).
    pub log_likelihood: f64,
    /// One-way ANOVA moment estimator of the intra-cluster correlation (may be negative).
    pub icc_moment: Option<f64>,
}

fn ln_choose(n: u32, y: u32) -> f64 {
    let y = y.min(n - y);
    (0..y).map(|i| f64::from(n - i).ln() - f64::from(i + 1).ln()).sum()
}

/// Beta-binomial log-likelihood in (mu, icc), written as products so that icc = 0 (the binomial) is
/// an ordinary point: ln B(y + a, n - y + b) - ln B(a, b) = sum_{i<y} ln(mu (1 - icc) + i icc)
/// + sum_{i<n-y} ln((1 - mu)(1 - icc) + i icc) - sum_{i<n} ln(1 - icc + i icc).
fn log_likelihood(mu: f64, icc: f64, clusters: &[(u32, u32, u64)]) -> f64 {
    if !(0.0..=1.0).contains(&mu) || !(0.0..1.0).contains(&icc) {
        return f64::NAN;
    }
    let mut total = 0.0;
    for &(n, y, count) in clusters {
        let mut t = ln_choose(n, y);
        for i in 0..y {
            t += (mu * (1.0 - icc) + f64::from(i) * icc).ln();
        }
        for i in 0..n - y {
            t += ((1.0 - mu) * (1.0 - icc) + f64::from(i) * icc).ln();
        }
        for i in 0..n {
            t -= (1.0 - icc + f64::from(i) * icc).ln();
        }
        total += count as f64 * t;
    }
    total
}

/// Fits the beta-binomial by maximum likelihood and computes the ANOVA moment estimator.
/// `clusters` holds (n, y, how many clusters have exactly these counts); clusters with n = 0 are
/// ignored. `None` when no cluster has a trial.
pub fn fit(clusters: &[(u32, u32, u64)]) -> Option<BetaBinomialFit> {
    let clusters: Vec<(u32, u32, u64)> = clusters.iter().copied().filter(|c| c.0 > 0 && c.2 > 0).collect();
    let count: u64 = clusters.iter().map(|c| c.2).sum();
    let trials: f64 = clusters.iter().map(|c| c.0 as f64 * c.2 as f64).sum();
    if count == 0 {
        return None;
    }
    let successes: f64 = clusters.iter().map(|c| c.1 as f64 * c.2 as f64).sum();
    let pooled = successes / trials;
    let logistic = |u: f64| 1.0 / (1.0 + (-u).exp());
    // mu on the logit scale; icc = t^2 / (1 + t^2) reaches the binomial boundary smoothly.
    let mut objective = |u: &[f64]| {
        let t2 = u[1] * u[1];
        -log_likelihood(logistic(u[0]), t2 / (1.0 + t2), &clusters)
    };
    let mut best: Option<(Vec<f64>, f64)> = None;
    let pooled_logit = (pooled.clamp(1e-9, 1.0 - 1e-9) / (1.0 - pooled.clamp(1e-9, 1.0 - 1e-9))).ln();
    for icc in [0.001f64, 0.05, 0.3] {
        let start = [pooled_logit, (icc / (1.0 - icc)).sqrt()];
        let found = nelder_mead(&mut objective, &start, 0.2, 1e-10, 1e-11, 4000, 1);
        if best.as_ref().is_none_or(|b| found.1 < b.1) {
            best = Some(found);
        }
    }
    let (u, v) = best?;
    let mean = logistic(u[0]);
    let t2 = u[1] * u[1];
    let mut icc = t2 / (1.0 + t2);
    let mut log_lik = -v;
    let binomial = log_likelihood(pooled, 0.0, &clusters);
    if icc < 1e-8 || binomial >= log_lik {
        icc = 0.0;
        log_lik = binomial;
    }
    let icc_ml_std_error = (icc > 0.0)
        .then(|| {
            let mut f = |x: &[f64]| -log_likelihood(x[0], x[1], &clusters);
            let h = [1e-4 * mean.min(1.0 - mean), 1e-4 * icc.min(1.0 - icc)];
            let info = hessian(&mut f, &[mean, icc], &h)?;
            let cov = inverse_positive_definite(&info)?;
            Some(cov[1][1].sqrt())
        })
        .flatten();
    Some(BetaBinomialFit {
        clusters: count,
        mean,
        icc_ml: icc,
        icc_ml_std_error,
        log_likelihood: log_lik,
        icc_moment: anova_icc(&clusters),
    })
}

/// One-way ANOVA estimator of the intra-cluster correlation of binary outcomes with unequal cluster
/// sizes: (MSB - MSW) / (MSB + (n0 - 1) MSW), n0 = (N - sum n_i^2 / N) / (C - 1). `None` with fewer
/// than two clusters or no within-cluster degrees of freedom.
fn anova_icc(clusters: &[(u32, u32, u64)]) -> Option<f64> {
    let c: f64 = clusters.iter().map(|x| x.2 as f64).sum();
    let n: f64 = clusters.iter().map(|x| x.0 as f64 * x.2 as f64).sum();
    let y: f64 = clusters.iter().map(|x| x.1 as f64 * x.2 as f64).sum();
    if c < 2.0 || n - c <= 0.0 {
        return None;
    }
    let p = y / n;
    let (mut ssb, mut ssw, mut sum_n2) = (0.0, 0.0, 0.0);
    for &(ni, yi, count) in clusters {
        let (ni, yi, w) = (ni as f64, yi as f64, count as f64);
        ssb += w * ni * (yi / ni - p).powi(2);
        ssw += w * (yi - yi * yi / ni);
        sum_n2 += w * ni * ni;
    }
    let msb = ssb / (c - 1.0);
    let msw = ssw / (n - c);
    let n0 = (n - sum_n2 / n) / (c - 1.0);
    let denominator = msb + (n0 - 1.0) * msw;
    (denominator > 0.0).then(|| (msb - msw) / denominator)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn independent_clusters_have_no_correlation_and_the_moment_estimator_agrees_in_sign() {
        // Every cluster of 4 with exactly 2 successes: less spread than the binomial, so the ML sits
        // on the boundary icc = 0 and the moment estimator is negative (textbook property of the
        // ANOVA estimator under underdispersion).
        let f = fit(&[(4, 2, 50)]).unwrap();
        assert_eq!(f.icc_ml, 0.0);
        assert!((f.mean - 0.5).abs() < 1e-7);
        assert_eq!(f.icc_ml_std_error, None);
        assert!(f.icc_moment.unwrap() < 0.0);
        // All-or-nothing clusters: perfect correlation, which the moment estimator gives as 1.
        let g = fit(&[(4, 0, 30), (4, 4, 30)]).unwrap();
        assert!((g.icc_moment.unwrap() - 1.0).abs() < 1e-12);
        assert!(g.icc_ml > 0.9);
    }
}
