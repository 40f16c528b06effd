//! The fit's outputs: the terminal summary, `fit.csv` (one row per group size), `fit.json` and the
//! calibrated scenario. The writers compute nothing; files are staged under temporary names and
//! renamed, so a failed run never leaves a half-written file.

use super::model::{CurveKind, Form};
use super::{FitError, FitReport};
use std::collections::BTreeSet;
use std::fmt::Write as _;
use std::path::{Path, PathBuf};

fn cell(v: Option<f64>) -> String {
    v.map_or_else(String::new, |x| x.to_string())
}

impl FitReport {
    /// `fit.json`: the whole report, pretty-printed.
    pub fn to_json(&self) -> String {
        serde_json::to_string_pretty(self).unwrap_or_else(|e| format!("{{\"error\": \"cannot serialise: {e}\"}}"))
            + "\n"
    }

    /// `fit.csv`: one row per group size, observed and fitted side by side. The `phi_<curve>` columns
    /// are the clustered fits (empty where a curve does not cover the size).
    pub fn to_csv(&self) -> String {
        let curves: Vec<CurveKind> = self
            .curves
            .iter()
            .filter(|c| c.form == Form::Clustered)
            .map(|c| c.curve)
            .collect();
        let mut out = String::from(
            "group_size,groups,village_cycles,repaid,repayment_rate,rate_ci_low,rate_ci_high,phi,phi_ci_low,phi_ci_high",
        );
        for c in &curves {
            let _ = write!(out, ",phi_{}", c.name());
        }
        out.push_str(",best_curve_repayment\n");
        for r in &self.by_size {
            let _ = write!(
                out,
                "{},{},{},{},{},{},{},{},{},{}",
                r.group_size,
                r.groups,
                r.village_cycles,
                r.repaid,
                r.repayment_rate,
                cell(r.rate_ci_low),
                cell(r.rate_ci_high),
                r.phi,
                cell(r.phi_ci_low),
                cell(r.phi_ci_high)
            );
            for c in &curves {
                let _ = write!(out, ",{}", cell(r.fitted_phi.get(c.name()).copied()));
            }
            let _ = writeln!(out, ",{}", cell(r.best_curve_repayment));
        }
        out
    }

    /// The readable summary printed after a fit.
    pub fn to_terminal(&self) -> String {
        let mut out = String::new();
        let _ = writeln!(
            out,
            "Loan book {}: {} loans in {} groups, {} villages, {} cycles ({} village-cycles)",
            self.source, self.loans, self.groups, self.villages, self.cycles, self.village_cycles
        );
        if self.rows_skipped > 0 {
            let _ = writeln!(
                out,
                "  {} bad rows skipped of {} read",
                self.rows_skipped, self.rows_read
            );
        }
        let _ = writeln!(
            out,
            "  outcomes are group repayment without peer cover ({} groups from own_paid); {} groups defaulted, {} \
             after peer cover",
            self.groups_with_own_paid, self.groups_defaulted, self.groups_defaulted_with_cover
        );
        let _ = writeln!(
            out,
            "\nGroup repayment by size (95% intervals clustered by village-cycle)"
        );
        let _ = writeln!(
            out,
            "  {:>4} {:>8} {:>8} {:>19} {:>8} {:>19}",
            "k", "groups", "rate", "interval", "phi", "interval"
        );
        let pair = |a: Option<f64>, b: Option<f64>| match (a, b) {
            (Some(a), Some(b)) => format!("{a:.4} to {b:.4}"),
            _ => "-".into(),
        };
        for r in &self.by_size {
            let _ = writeln!(
                out,
                "  {:>4} {:>8} {:>8.4} {:>19} {:>8.4} {:>19}",
                r.group_size,
                r.groups,
                r.repayment_rate,
                pair(r.rate_ci_low, r.rate_ci_high),
                r.phi,
                pair(r.phi_ci_low, r.phi_ci_high)
            );
        }
        let _ = writeln!(
            out,
            "\nCurves by maximum likelihood (estimate ± standard error; '-' on a boundary)"
        );
        for c in &self.curves {
            let params: Vec<String> = c
                .params
                .iter()
                .map(|(name, v)| match c.std_errors.get(name).copied().flatten() {
                    Some(se) => format!("{name} = {v:.4} ± {se:.4}"),
                    None => format!("{name} = {v:.4} ± -"),
                })
                .collect();
            let mark = if c.form == Form::Clustered && c.curve == self.best_curve {
                "  <- best"
            } else {
                ""
            };
            let _ = writeln!(
                out,
                "  {:<15} {:<12} lnL {:>12.3}  AIC {:>11.3}  {}{}",
                c.curve.name(),
                c.form.name(),
                c.log_likelihood,
                c.aic,
                params.join(", "),
                mark
            );
        }
        if let Some(b) = self.independent_bias.iter().find(|b| b.curve == self.best_curve) {
            let _ = writeln!(
                out,
                "  ignoring correlation misstates phi of {} by {:+.1}% on average over the sizes seen",
                b.curve.name(),
                100.0 * b.mean_relative
            );
        }
        let _ = writeln!(
            out,
            "\nCorrelation of members of one village and cycle: rho = {:.4}{} (village plus portfolio correlation; \
             written as village_correlation)",
            self.village_correlation,
            self.village_correlation_std_error
                .map_or(String::from(" (on the boundary 0)"), |se| format!(" ± {se:.4}"))
        );
        if let Some(bb) = &self.beta_binomial {
            let _ = writeln!(
                out,
                "  model-free check over village-cycles, correlation of group defaults: beta-binomial ML {:.4}, moment \
                 {}",
                bb.icc_ml,
                bb.icc_moment.map_or("-".into(), |v| format!("{v:.4}"))
            );
        }
        let o = &self.optimum;
        let _ = writeln!(
            out,
            "\nRecommended group size ({}, clustered fit; bootstrap over villages, {} resamples, seed {}, {:.1} s)",
            o.curve.name(),
            o.resamples,
            o.seed,
            self.bootstrap_seconds
        );
        let _ = writeln!(out, "  {}", o.statement);
        for n in &self.notes {
            let _ = writeln!(out, "  note: {n}");
        }
        let _ = writeln!(
            out,
            "\nRead in {:.2} s, fitted in {:.2} s, bootstrap {:.2} s",
            self.read_seconds, self.fit_seconds, self.bootstrap_seconds
        );
        let _ = writeln!(out, "\n{}", crate::CAUTION);
        out
    }

    /// A scenario file with the best clustered curve and its correlation, ready for `run`.
    pub fn scenario_toml(&self) -> String {
        let best = self
            .curves
            .iter()
            .find(|c| c.form == Form::Clustered && c.curve == self.best_curve);
        let mut sizes: BTreeSet<u32> = self.by_size.iter().map(|r| r.group_size).collect();
        sizes.extend(self.optimum.integers.iter().copied());
        sizes.extend(self.optimum.best_integer);
        let smallest = self.best_curve.smallest_size();
        sizes.retain(|&k| k >= smallest);
        let sizes: Vec<u32> = sizes.into_iter().collect();
        let recommended = self
            .optimum
            .best_integer
            .filter(|k| sizes.contains(k))
            .or_else(|| sizes.last().copied())
            .unwrap_or(1);
        let largest = sizes.last().copied().unwrap_or(1).max(recommended);
        let per_cycle = (self.loans as f64 / self.cycles.max(1) as f64).round() as u64;
        let villages = self.villages.max(1);
        let borrowers = per_cycle.max(villages * u64::from(largest));
        let probability = match best {
            Some(c) => {
                let theta: Vec<f64> = c.curve.param_names().iter().map(|n| c.params[*n]).collect();
                match c.curve {
                    CurveKind::Constant => format!("{{ curve = \"constant\", value = {} }}", theta[0]),
                    CurveKind::Power => format!("{{ curve = \"power\", p = {} }}", theta[0]),
                    CurveKind::PowerPlusLog => format!("{{ curve = \"power_plus_log\", p = {} }}", theta[0]),
                    CurveKind::ScaledPower => {
                        let entries: Vec<String> = sizes.iter().map(|&k| format!("\"{k}\" = {}", c.phi(k))).collect();
                        format!("{{ curve = \"table\", values = {{ {} }} }}", entries.join(", "))
                    }
                }
            }
            None => "0.0".into(),
        };
        let name = toml::Value::String(format!("calibrated from {}", self.source)).to_string();
        let mut out = String::new();
        let _ = writeln!(out, "# Calibrated by `loancycle fit` from {}:", self.source);
        let _ = writeln!(
            out,
            "# {} groups in {} villages over {} cycles. Best curve by AIC (clustered form): {}.",
            self.groups,
            self.villages,
            self.cycles,
            self.best_curve.name()
        );
        if self.best_curve == CurveKind::ScaledPower {
            let _ = writeln!(
                out,
                "# scaled_power, min(1, scale k^-p), has no scenario syntax: it is written as a table over the \
                 group sizes seen and recommended."
            );
        }
        let _ = writeln!(
            out,
            "# village_correlation is rho, the total correlation of members of one village and cycle. A loan book"
        );
        let _ = writeln!(
            out,
            "# cannot separate village from portfolio correlation without many cycles, so all of rho is written as"
        );
        let _ = writeln!(out, "# village correlation and portfolio_correlation is 0.");
        let _ = writeln!(
            out,
            "# The fit describes repayment without peer cover, so peer_cover is 0; a hit loses the whole instalment."
        );
        let _ = writeln!(out, "name = {name}");
        let _ = writeln!(out, "seed = 1");
        let _ = writeln!(out, "replications = 200");
        let _ = writeln!(out, "cycles = {}", self.cycles.max(1));
        let _ = writeln!(out, "\n[portfolio]\nborrowers = {borrowers}\nvillages = {villages}");
        let _ = writeln!(out, "\n[loan]\nprincipal = {}", self.mean_due);
        let _ = writeln!(out, "\n[[shock]]\nname = \"member_failure\"\nscope = \"member\"");
        let _ = writeln!(out, "probability = {probability}");
        let _ = writeln!(out, "village_correlation = {}", self.village_correlation);
        let _ = writeln!(out, "portfolio_correlation = 0.0");
        let _ = writeln!(out, "\n[policy]\ngroup_size = {recommended}\npeer_cover = 0.0");
        if sizes.len() > 1 {
            let _ = writeln!(out, "\n[sweep]\ngroup_size = [{}]", super::join(&sizes));
        }
        out
    }
}

/// Writes `text` to `path` through a temporary file in the same directory and a rename.
fn stage(path: &Path, text: &str) -> Result<PathBuf, FitError> {
    let fail = |e: std::io::Error| FitError::Output {
        path: path.display().to_string(),
        reason: e.to_string(),
    };
    let name = path
        .file_name()
        .map(|n| n.to_string_lossy().to_string())
        .unwrap_or_default();
    let temporary = path.with_file_name(format!(".{name}.partial"));
    std::fs::write(&temporary, text).map_err(fail)?;
    Ok(temporary)
}

/// Writes `DIR/fit.csv`, `DIR/fit.json` and, when asked, the scenario file. Everything is staged
/// first and renamed only when all staging succeeded. Existing results are replaced only with
/// `force`.
pub fn write_outputs(
    report: &FitReport,
    dir: &Path,
    scenario: Option<&Path>,
    force: bool,
) -> Result<Vec<PathBuf>, FitError> {
    let fail = |p: &Path, e: std::io::Error| FitError::Output {
        path: p.display().to_string(),
        reason: e.to_string(),
    };
    std::fs::create_dir_all(dir).map_err(|e| fail(dir, e))?;
    let mut targets = vec![
        (dir.join("fit.csv"), report.to_csv()),
        (dir.join("fit.json"), report.to_json()),
    ];
    if let Some(path) = scenario {
        if let Some(parent) = path.parent().filter(|p| !p.as_os_str().is_empty()) {
            std::fs::create_dir_all(parent).map_err(|e| fail(parent, e))?;
        }
        targets.push((path.to_path_buf(), report.scenario_toml()));
    }
    if !force && let Some((existing, _)) = targets.iter().find(|(p, _)| p.exists()) {
        return Err(FitError::Exists {
            path: existing.display().to_string(),
        });
    }
    let mut staged = Vec::new();
    for (path, text) in &targets {
        match stage(path, text) {
            Ok(t) => staged.push((t, path.clone())),
            Err(e) => {
                for (t, _) in &staged {
                    let _ = std::fs::remove_file(t);
                }
                return Err(e);
            }
        }
    }
    let mut written = Vec::new();
    for (temporary, path) in staged {
        std::fs::rename(&temporary, &path).map_err(|e| fail(&path, e))?;
        written.push(path);
    }
    Ok(written)
}
