//! The `loancycle` command: parses arguments, calls the library, prints. No computation here.

use clap::{Parser, Subcommand};
use indicatif::{ProgressBar, ProgressDrawTarget, ProgressStyle};
use loancycle::analytic::{self, optimum};
use loancycle::output::{self, terminal};
use loancycle::scenario::Scenario;
use loancycle::{demo, report, run};
use std::path::PathBuf;
use std::process::ExitCode;

/// Monte Carlo simulation of repeated joint-liability loan cycles.
#[derive(Parser)]
#[command(name = "loancycle", version, about, long_about = None)]
struct Cli {
    #[command(subcommand)]
    command: Command,
}

#[derive(Subcommand)]
enum Command {
    /// Simulate a scenario (the built-in baseline demo when no file is given) and write results.
    Run {
        /// Scenario file (TOML).
        file: Option<PathBuf>,
        /// Directory for summary.csv, timeseries.csv, differences.csv and summary.json.
        #[arg(long, default_value = "results/")]
        out: PathBuf,
        /// Replications, overriding the file.
        #[arg(long, value_parser = clap::value_parser!(u32).range(1..))]
        replications: Option<u32>,
        /// Master seed, overriding the file (0 to 9223372036854775807, like a scenario file).
        #[arg(long, allow_negative_numbers = true, value_parser = clap::value_parser!(u64).range(0..=i64::MAX as u64))]
        seed: Option<u64>,
        /// Worker threads (default: all cores); results do not depend on it.
        #[arg(long, value_parser = clap::value_parser!(u16).range(1..))]
        threads: Option<u16>,
        /// No progress bar and no table.
        #[arg(long)]
        quiet: bool,
        /// Replace results already in the output directory.
        #[arg(long)]
        force: bool,
    },
    /// Validate a scenario file and list the arms it resolves to, without simulating.
    Check {
        /// Scenario file (TOML).
        file: PathBuf,
    },
    /// Print the built-in baseline scenario, a starting point for your own file.
    DemoScenario,
    /// Closed-form best group size of a group-size curve (independent members, no peer cover).
    Optimum {
        /// The curve: constant, power, power_plus_log or table.
        #[arg(long)]
        curve: String,
        /// Exponent p of power and power_plus_log, or a band `from..to` of exponents.
        #[arg(long, allow_negative_numbers = true)]
        p: Option<String>,
        /// Value of a constant curve.
        #[arg(long)]
        value: Option<f64>,
        /// Values of a table curve, e.g. `2=0.08,3=0.06,4=0.05`.
        #[arg(long)]
        values: Option<String>,
        /// Number of equally spaced exponents in a band, both ends included.
        #[arg(long, default_value_t = 501, value_parser = clap::value_parser!(u32).range(2..=1_000_000))]
        steps: u32,
        /// Integer group sizes to tabulate, both ends included.
        #[arg(long, default_value = "2..12")]
        range: String,
        /// Print JSON instead of a table.
        #[arg(long, conflicts_with = "csv")]
        json: bool,
        /// Print the per-size table as CSV.
        #[arg(long)]
        csv: bool,
    },
    /// Exact group repayment of the one-factor class, the large-portfolio loss law and the Basel II
    /// retail comparison for a scenario, without simulating.
    Analyze {
        /// Scenario file (TOML).
        file: PathBuf,
        /// Print JSON instead of a table.
        #[arg(long)]
        json: bool,
    },
    /// Calibrate group-size curves and the village correlation from a loan book (CSV, one row per
    /// member loan) and recommend a group size; writes fit.csv and fit.json.
    Fit(FitArgs),
}

/// Flags of `fit`.
#[derive(clap::Args)]
struct FitArgs {
    /// Loan book: columns cycle, village, group, member, due, paid (own_paid optional).
    book: PathBuf,
    /// Directory for fit.csv and fit.json.
    #[arg(long, default_value = "fit/")]
    out: PathBuf,
    /// Also write a scenario file with the fitted curve and correlation.
    #[arg(long)]
    scenario_out: Option<PathBuf>,
    /// Skip and count invalid rows instead of refusing the book.
    #[arg(long)]
    skip_bad_rows: bool,
    /// Bootstrap resamples over villages.
    #[arg(long, default_value_t = 1000, value_parser = clap::value_parser!(u32).range(i64::from(loancycle::fit::MIN_RESAMPLES)..))]
    resamples: u32,
    /// Bootstrap seed.
    #[arg(long, default_value_t = 1)]
    seed: u64,
    /// Worker threads (default: all cores); results do not depend on it.
    #[arg(long, value_parser = clap::value_parser!(u16).range(1..))]
    threads: Option<u16>,
    /// Replace results already written.
    #[arg(long)]
    force: bool,
    /// No terminal summary.
    #[arg(long)]
    quiet: bool,
}

/// `fit`: read, fit, write, print. Bad input of any kind exits with code 2.
fn fit_command(args: FitArgs) -> ExitCode {
    use loancycle::fit;
    let options = fit::FitOptions {
        resamples: args.resamples,
        seed: args.seed,
        threads: args.threads.map(usize::from),
    };
    let report = match fit::fit_file(&args.book, args.skip_bad_rows, &options) {
        Ok(r) => r,
        Err(e) => {
            eprintln!("error: {e}");
            return ExitCode::from(BAD_INPUT);
        }
    };
    match fit::write_outputs(&report, &args.out, args.scenario_out.as_deref(), args.force) {
        Ok(paths) => {
            if !args.quiet {
                print!("{}", report.to_terminal());
                for p in paths {
                    println!("wrote {}", p.display());
                }
            }
            ExitCode::SUCCESS
        }
        Err(e) => {
            eprintln!("error: {e}");
            ExitCode::from(BAD_INPUT)
        }
    }
}

/// Exit code for invalid input (scenario, flags, output directory).
const BAD_INPUT: u8 = 2;

fn load(file: Option<&PathBuf>) -> Result<(Scenario, String, String), String> {
    match file {
        Some(path) => Scenario::load(path)
            .map(|(s, text)| (s, text, path.display().to_string()))
            .map_err(|e| e.to_string()),
        None => Scenario::from_toml_str(demo::BASELINE, demo::BASELINE_ORIGIN)
            .map(|s| (s, demo::BASELINE.to_string(), demo::BASELINE_ORIGIN.to_string()))
            .map_err(|e| e.to_string()),
    }
}

/// Turns the `optimum` flags into a request; every refusal names the flag, the value and what is allowed.
fn optimum_request(
    curve: &str,
    p: Option<&str>,
    value: Option<f64>,
    values: Option<&str>,
    steps: u32,
    range: &str,
) -> Result<optimum::OptimumRequest, String> {
    let range = optimum::parse_range(range).map_err(|e| format!("--range: {e}"))?;
    let (parameter, band) = match p {
        Some(text) if text.contains("..") => {
            let (from, to) = optimum::parse_band(text).map_err(|e| format!("--p: {e}"))?;
            (Some(from), Some((from, to, steps as usize - 1)))
        }
        Some(text) => {
            let x = text
                .trim()
                .parse::<f64>()
                .map_err(|_| format!("--p = \"{text}\" is not allowed: a number, or a band such as 0.5..1"))?;
            (Some(x), None)
        }
        None => (value, None),
    };
    let curve = optimum::curve_from_parts(curve, parameter, values).map_err(|e| format!("--curve: {e}"))?;
    Ok(optimum::OptimumRequest { curve, band, range })
}

fn main() -> ExitCode {
    let cli = Cli::parse();
    match cli.command {
        Command::Fit(args) => fit_command(args),
        Command::Optimum {
            curve,
            p,
            value,
            values,
            steps,
            range,
            json,
            csv,
        } => {
            let report = optimum_request(&curve, p.as_deref(), value, values.as_deref(), steps, &range)
                .and_then(|req| optimum::solve(&req).map_err(|e| e.to_string()));
            match report {
                Ok(r) => {
                    print!(
                        "{}",
                        if json {
                            r.to_json()
                        } else if csv {
                            r.to_csv()
                        } else {
                            r.to_table()
                        }
                    );
                    ExitCode::SUCCESS
                }
                Err(e) => {
                    eprintln!("error: {e}");
                    ExitCode::from(BAD_INPUT)
                }
            }
        }
        Command::Analyze { file, json } => match load(Some(&file)) {
            Ok((scenario, _, _)) => {
                let report = analytic::report::analyze(&scenario);
                print!("{}", if json { report.to_json() } else { report.to_table() });
                ExitCode::SUCCESS
            }
            Err(e) => {
                eprintln!("error: {e}");
                ExitCode::from(BAD_INPUT)
            }
        },
        Command::DemoScenario => {
            print!("{}", demo::BASELINE);
            ExitCode::SUCCESS
        }
        Command::Check { file } => match load(Some(&file)) {
            Ok((scenario, _, origin)) => {
                print!("{}", terminal::arms_listing(&scenario, &origin));
                ExitCode::SUCCESS
            }
            Err(e) => {
                eprintln!("error: {e}");
                ExitCode::from(BAD_INPUT)
            }
        },
        Command::Run {
            file,
            out,
            replications,
            seed,
            threads,
            quiet,
            force,
        } => {
            let (mut scenario, text, origin) = match load(file.as_ref()) {
                Ok(x) => x,
                Err(e) => {
                    eprintln!("error: {e}");
                    return ExitCode::from(BAD_INPUT);
                }
            };
            if file.is_none() && !quiet {
                eprintln!("no scenario file given: running the built-in baseline demo, {origin}");
            }
            run::apply_overrides(&mut scenario, replications, seed);
            if let Err(e) = run::check_size(&scenario) {
                eprintln!("error: {origin}: {e}");
                return ExitCode::from(BAD_INPUT);
            }
            if let Err(e) = output::prepare_destination(&out, force) {
                eprintln!("error: {e}");
                return ExitCode::from(BAD_INPUT);
            }
            let tasks = u64::from(scenario.replications) * scenario.arms.len() as u64;
            let bar = if quiet {
                ProgressBar::with_draw_target(Some(tasks), ProgressDrawTarget::hidden())
            } else {
                ProgressBar::new(tasks)
            };
            bar.set_style(
                ProgressStyle::with_template("{elapsed_precise} [{bar:40}] {pos}/{len} replication-arms ({eta} left)")
                    .unwrap_or_else(|_| ProgressStyle::default_bar())
                    .progress_chars("=> "),
            );
            let started = std::time::Instant::now();
            let options = run::RunOptions {
                threads: threads.map(usize::from),
            };
            let results = match run::simulate(&scenario, options, &mut |done| bar.set_position(done)) {
                Ok(r) => r,
                Err(e) => {
                    bar.finish_and_clear();
                    eprintln!("error: {e}");
                    return ExitCode::FAILURE;
                }
            };
            bar.finish_and_clear();
            let seconds = started.elapsed().as_secs_f64();
            let report = report::build(&scenario, &text, &origin, &results);
            match output::write_all(&out, &report, force) {
                Ok(paths) => {
                    if !quiet {
                        print!("{}", terminal::summary_table(&report));
                        for p in paths {
                            println!("wrote {}", p.display());
                        }
                        eprintln!(
                            "simulated {} served member-cycles in {:.2} s ({:.1} million per second)",
                            results.served_member_cycles,
                            seconds,
                            results.served_member_cycles as f64 / seconds / 1e6
                        );
                    } else {
                        for w in &report.warnings {
                            eprintln!("warning: {w}");
                        }
                    }
                    ExitCode::SUCCESS
                }
                Err(e) => {
                    eprintln!("error: {e}");
                    ExitCode::from(BAD_INPUT)
                }
            }
        }
    }
}
