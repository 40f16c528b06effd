//! The `loancycle` command: parses arguments, calls the library, prints. No computation here.

use clap::{Parser, Subcommand};
use indicatif::{ProgressBar, ProgressDrawTarget, ProgressStyle};
use loancycle::analytic::{self, optimum};
use loancycle::output::{self, terminal};
use loancycle::scenario::{Overrides, Scenario};
use loancycle::{board, demo, report, run};
use signal_hook::consts::{SIGINT, SIGTERM};
use std::path::PathBuf;
use std::process::ExitCode;
use std::sync::Arc;
use std::sync::atomic::{AtomicUsize, Ordering};

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
        /// Memory limit in GiB (default: the memory available); a run estimated above it is refused.
        #[arg(long, value_name = "GIB", allow_negative_numbers = true)]
        max_memory: Option<f64>,
        /// Also write the board report (report.html and charts/) into the output directory.
        #[arg(long)]
        report: bool,
        /// Also write a synthetic loan book (CSV in the format `fit` reads) from one simulation of
        /// every arm; the other results do not change.
        #[arg(long, value_name = "FILE")]
        loan_book: Option<PathBuf>,
        /// The arm differences.csv compares against: a label or a number from 1, as `check` lists them.
        #[arg(long, value_name = "ARM")]
        baseline: Option<String>,
        /// Simulate only shard I of N (a block of the replications) and write OUT/shard-I-of-N.jsonl
        /// for `merge`.
        #[arg(long, value_name = "I/N", conflicts_with_all = ["report", "loan_book"])]
        shard: Option<String>,
        /// Continue an interrupted run from the checkpoint in the output directory.
        #[arg(long)]
        resume: bool,
    },
    /// Merge the shards of a run (directories holding shard-I-of-N.jsonl) into the files the
    /// unsharded run writes.
    Merge {
        /// Directories holding the shard files (one, or one per shard).
        #[arg(required = true)]
        dirs: Vec<PathBuf>,
        /// Directory for the merged results.
        #[arg(long, default_value = "results/")]
        out: PathBuf,
        /// No table.
        #[arg(long)]
        quiet: bool,
        /// Replace results already in the output directory.
        #[arg(long)]
        force: bool,
        /// Also write the board report into the output directory.
        #[arg(long)]
        report: bool,
    },
    /// Draw the random numbers a scenario's run needs, with no model logic, and print the rate: the
    /// bound scripts/bench.sh compares the engine with.
    #[command(hide = true)]
    BenchDraws {
        /// Scenario file (TOML).
        file: PathBuf,
        /// Worker threads (default: all cores).
        #[arg(long, value_parser = clap::value_parser!(u16).range(1..))]
        threads: Option<u16>,
    },
    /// Redo comparisons from a finished run's files (summary.json, replications.csv), without
    /// simulating again.
    Compare {
        /// The run's output directory.
        dir: PathBuf,
        /// Rewrite DIR/differences.csv against this arm: a label or a number from 1, as `check` lists them.
        #[arg(long, value_name = "ARM")]
        baseline: Option<String>,
        /// Write DIR/contrasts.csv: every pair of arms that differ only in this swept key, paired by
        /// replication, at each level of the other keys.
        #[arg(long, value_name = "KEY")]
        along: Option<String>,
        /// Choose the arm with the highest FIGURE among those meeting every --subject-to.
        #[arg(long, value_name = "FIGURE", conflicts_with = "minimize")]
        maximize: Option<String>,
        /// Choose the arm with the lowest FIGURE among those meeting every --subject-to.
        #[arg(long, value_name = "FIGURE")]
        minimize: Option<String>,
        /// A constraint "FIGURE<=X" or "FIGURE>=X", met with 95% one-sided confidence; repeatable.
        #[arg(long = "subject-to", value_name = "CONSTRAINT", allow_hyphen_values = true)]
        subject_to: Vec<String>,
        /// Print the selection as one JSON object on stdout, and nothing else.
        #[arg(long)]
        json: bool,
    },
    /// Write DIR/report.html and DIR/charts/*.svg from a finished run, without simulating again.
    Report {
        /// The run's output directory.
        dir: PathBuf,
    },
    /// Validate a scenario file, list the arms it resolves to and estimate the peak memory of running
    /// it, without simulating.
    Check {
        /// Scenario file (TOML).
        file: PathBuf,
        /// Replications, overriding the file (as `run --replications` would).
        #[arg(long, value_parser = clap::value_parser!(u32).range(1..))]
        replications: Option<u32>,
        /// Worker threads the memory estimate is for (default: all cores).
        #[arg(long, value_parser = clap::value_parser!(u16).range(1..))]
        threads: Option<u16>,
        /// Estimate the memory of shard I of N (as `run --shard I/N` would hold) instead of the run.
        #[arg(long, value_name = "I/N")]
        shard: Option<String>,
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
        #[arg(long, allow_negative_numbers = true)]
        value: Option<String>,
        /// Values of a table curve, e.g. `2=0.08,3=0.06,4=0.05`.
        #[arg(long)]
        values: Option<String>,
        /// Number of equally spaced exponents in a band, both ends included.
        #[arg(long, default_value_t = 501, value_parser = clap::value_parser!(u32).range(2..=1_000_000))]
        steps: u32,
        /// Integer group sizes to tabulate, both ends included.
        #[arg(long, default_value = "2..12")]
        range: String,
        /// Mean risk multiplier u: every phi(k) becomes min(1, u phi(k)), as `run` applies an arm's
        /// mean risk in group_size.csv's best_closed_form.
        #[arg(long, value_name = "U", default_value_t = 1.0, allow_negative_numbers = true)]
        risk: f64,
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
fn fit_command(args: FitArgs) -> Result<(), Failure> {
    use loancycle::fit;
    let options = fit::FitOptions {
        resamples: args.resamples,
        seed: args.seed,
        threads: args.threads.map(usize::from),
    };
    let report =
        fit::fit_file(&args.book, args.skip_bad_rows, &options).map_err(|e| Failure::BadInput(e.to_string()))?;
    let paths =
        fit::write_outputs(&report, &args.out, args.scenario_out.as_deref(), args.force).map_err(|e| match e {
            // A failed write is a failure while running; existing results without --force are bad input.
            fit::FitError::Output { .. } => Failure::Running(e.to_string()),
            _ => Failure::BadInput(e.to_string()),
        })?;
    if !args.quiet {
        print!("{}", report.to_terminal());
        for p in paths {
            println!("wrote {}", p.display());
        }
    }
    Ok(())
}

/// Why a command ended without success. The exit code is decided here and nowhere else.
enum Failure {
    /// Invalid input: scenario, flags, output directory. Exit 2.
    BadInput(String),
    /// A failure while running, such as a full disk or an unwritable file. Exit 1.
    Running(String),
    /// Stopped by a signal; the text says what was kept. Exit 128 + the signal number.
    Interrupted(usize, String),
}

/// A destination the user chose badly is bad input; a failure of the machine is a running failure.
impl From<output::OutputError> for Failure {
    fn from(e: output::OutputError) -> Self {
        if e.is_bad_destination() {
            Failure::BadInput(e.to_string())
        } else {
            Failure::Running(e.to_string())
        }
    }
}

impl Failure {
    fn exit_code(&self) -> u8 {
        match self {
            Failure::BadInput(_) => 2,
            Failure::Running(_) => 1,
            // 130 for SIGINT and 143 for SIGTERM, the shells' convention for death by signal.
            Failure::Interrupted(signal, _) => u8::try_from(128 + signal).unwrap_or(1),
        }
    }

    fn message(&self) -> String {
        match self {
            Failure::BadInput(m) | Failure::Running(m) => format!("error: {m}"),
            Failure::Interrupted(signal, kept) => {
                let name = if *signal == SIGTERM as usize {
                    "SIGTERM"
                } else {
                    "SIGINT"
                };
                format!("interrupted by {name}: {kept}")
            }
        }
    }
}

/// The signal that asked the process to stop, 0 while none has. SIGINT and SIGTERM no longer kill
/// the process: a run notices, stops cleanly and leaves no half-written file.
fn install_stop_signals() -> Arc<AtomicUsize> {
    let stop = Arc::new(AtomicUsize::new(0));
    for signal in [SIGINT, SIGTERM] {
        // Registration fails only for forbidden signals; then the default action (death) remains.
        let _ = signal_hook::flag::register_usize(signal, Arc::clone(&stop), signal as usize);
    }
    stop
}

fn load(file: Option<&PathBuf>) -> Result<(Scenario, String, String), Failure> {
    load_with(file, &Overrides::default())
}

/// Loads a scenario with command-line overrides put in before validation, and prints its warnings.
fn load_with(file: Option<&PathBuf>, overrides: &Overrides) -> Result<(Scenario, String, String), Failure> {
    let loaded = match file {
        Some(path) => Scenario::load_with(path, overrides)
            .map(|(s, text)| (s, text, path.display().to_string()))
            .map_err(|e| Failure::BadInput(e.to_string())),
        None => Scenario::from_toml_str_with(demo::BASELINE, demo::BASELINE_ORIGIN, overrides)
            .map(|s| (s, demo::BASELINE.to_string(), demo::BASELINE_ORIGIN.to_string()))
            .map_err(|e| Failure::BadInput(e.to_string())),
    }?;
    for w in loaded.0.warnings() {
        eprintln!("warning: {}: {w}", loaded.2);
    }
    Ok(loaded)
}

/// Turns the `optimum` flags into a request; every refusal names the flag, the value and what is allowed.
fn optimum_request(
    curve: &str,
    p: Option<&str>,
    value: Option<&str>,
    values: Option<&str>,
    steps: u32,
    range: &str,
) -> Result<optimum::OptimumRequest, String> {
    let range = optimum::parse_range(range).map_err(|e| format!("--range: {e}"))?;
    let (parameter, band) = match p {
        Some(text) if text.contains("..") => {
            let (from, to) = optimum::parse_band(text).map_err(|e| format!("--p: {e}"))?;
            // The curve is checked at the band's start, so the band's ends get the curve's bounds.
            let start: &str = text.split("..").next().unwrap_or(text);
            (Some(("--p", start)), Some((from, to, steps as usize - 1)))
        }
        Some(text) => (Some(("--p", text)), None),
        None => (value.map(|v| ("--value", v)), None),
    };
    let curve = optimum::curve_from_parts(curve, parameter, values).map_err(|e| e.to_string())?;
    Ok(optimum::OptimumRequest { curve, band, range })
}

/// A refusal of `optimum`'s solver, prefixed with the flag that gave the value.
fn optimum_flag_error(e: &analytic::AnalyticError) -> String {
    let flag = match e {
        analytic::AnalyticError::BadInput { name, .. } if name == "risk" => "--risk",
        analytic::AnalyticError::BadInput { name, .. } if name.starts_with("range") => "--range",
        analytic::AnalyticError::BadInput { name, .. } if name == "steps" => "--steps",
        analytic::AnalyticError::BadInput { name, .. } if name.starts_with("band") => "--p",
        _ => "--curve",
    };
    format!("{flag}: {e}")
}

/// Writes the board report of the run in `dir`.
fn board_report(dir: &std::path::Path, quiet: bool) -> Result<(), Failure> {
    let paths = board::write_report(dir).map_err(|e| {
        if e.is_bad_input() {
            Failure::BadInput(e.to_string())
        } else {
            Failure::Running(e.to_string())
        }
    })?;
    if !quiet {
        for p in paths {
            println!("wrote {}", p.display());
        }
    }
    Ok(())
}

/// `compare`: reads the run's own files and redoes the comparisons asked for.
fn compare_command(
    dir: &std::path::Path,
    baseline: Option<&str>,
    along: Option<&str>,
    objective: Option<(String, loancycle::stats::compare::Direction)>,
    subject_to: &[String],
    json: bool,
) -> Result<(), Failure> {
    use loancycle::stats::{compare, select};
    if objective.is_none() && (!subject_to.is_empty() || json) {
        return Err(Failure::BadInput(
            "--subject-to and --json go with --maximize FIGURE or --minimize FIGURE".to_string(),
        ));
    }
    // Flags are checked before the files are read, so a typo is named first.
    let selection_request = match &objective {
        Some((name, direction)) => {
            let metric = select::figure(name).map_err(|e| {
                let flag = match direction {
                    compare::Direction::Maximize => "--maximize",
                    compare::Direction::Minimize => "--minimize",
                };
                Failure::BadInput(format!("{flag}: {e}"))
            })?;
            let constraints = subject_to
                .iter()
                .map(|t| select::parse_constraint(t).map(|c| (t.clone(), c)))
                .collect::<Result<Vec<_>, _>>()
                .map_err(|e| Failure::BadInput(format!("--subject-to: {e}")))?;
            Some((metric, *direction, constraints))
        }
        None => None,
    };
    let stored = loancycle::stored::StoredRun::read(dir).map_err(|e| Failure::BadInput(e.to_string()))?;
    if let Some((metric, direction, constraints)) = selection_request {
        if baseline.is_some() || along.is_some() {
            return Err(Failure::BadInput(
                "--baseline and --along write files; ask for them apart from --maximize/--minimize".to_string(),
            ));
        }
        let selection = select::select(&stored.compared(), metric, direction, &constraints);
        print!(
            "{}",
            if json {
                output::tables::selection_json(&selection)
            } else {
                terminal::selection_text(&selection)
            }
        );
        return Ok(());
    }
    if baseline.is_none() && along.is_none() {
        return Err(Failure::BadInput(
            "compare: nothing asked; give --baseline ARM, --along KEY, or --maximize/--minimize FIGURE".to_string(),
        ));
    }
    // Both requests are checked before either file is written.
    let differences = baseline
        .map(|given| {
            compare::resolve_arm(&stored.labels(), given)
                .map(|index| compare::differences(&stored.compared(), index))
                .map_err(|e| Failure::BadInput(format!("--baseline: {e}")))
        })
        .transpose()?;
    let contrasts = along
        .map(|key| {
            let swept: Vec<Vec<(String, String)>> = stored.arms.iter().map(|a| a.swept.clone()).collect();
            compare::contrasts(&stored.compared(), &swept, key).map_err(|e| Failure::BadInput(format!("--along: {e}")))
        })
        .transpose()?;
    let files = [
        differences.map(|rows| ("differences.csv", output::tables::difference_rows_csv(&rows))),
        contrasts.map(|rows| ("contrasts.csv", output::tables::contrasts_csv(&rows))),
    ];
    for (name, bytes) in files.into_iter().flatten() {
        let path = output::replace_file(dir, name, &bytes).map_err(|e| Failure::Running(e.to_string()))?;
        println!("wrote {}", path.display());
    }
    Ok(())
}

fn main() -> ExitCode {
    let cli = Cli::parse();
    match execute(cli.command) {
        Ok(()) => ExitCode::SUCCESS,
        Err(failure) => {
            eprintln!("{}", failure.message());
            ExitCode::from(failure.exit_code())
        }
    }
}

fn execute(command: Command) -> Result<(), Failure> {
    match command {
        Command::Fit(args) => fit_command(args),
        Command::Optimum {
            curve,
            p,
            value,
            values,
            steps,
            range,
            risk,
            json,
            csv,
        } => {
            let report = optimum_request(&curve, p.as_deref(), value.as_deref(), values.as_deref(), steps, &range)
                .and_then(|req| optimum::solve_with_risk(&req, risk).map_err(|e| optimum_flag_error(&e)))
                .map_err(Failure::BadInput)?;
            print!(
                "{}",
                if json {
                    output::optimum::json(&report)
                } else if csv {
                    output::optimum::csv(&report)
                } else {
                    output::optimum::table(&report)
                }
            );
            Ok(())
        }
        Command::Analyze { file, json } => {
            let (scenario, _, _) = load(Some(&file))?;
            let report = analytic::report::analyze(&scenario);
            print!(
                "{}",
                if json {
                    output::analysis::json(&report)
                } else {
                    output::analysis::table(&report)
                }
            );
            Ok(())
        }
        Command::Report { dir } => board_report(&dir, false),
        Command::Compare {
            dir,
            baseline,
            along,
            maximize,
            minimize,
            subject_to,
            json,
        } => {
            let objective = match (maximize, minimize) {
                (Some(f), _) => Some((f, loancycle::stats::compare::Direction::Maximize)),
                (None, Some(f)) => Some((f, loancycle::stats::compare::Direction::Minimize)),
                (None, None) => None,
            };
            compare_command(
                &dir,
                baseline.as_deref(),
                along.as_deref(),
                objective,
                &subject_to,
                json,
            )
        }
        Command::BenchDraws { file, threads } => {
            let (scenario, _, _) = load(Some(&file))?;
            let options = run::RunOptions {
                threads: threads.map(usize::from),
                ..Default::default()
            };
            let started = std::time::Instant::now();
            let drawn =
                loancycle::bench::bare_draws(&scenario, options).map_err(|e| Failure::Running(e.to_string()))?;
            let seconds = started.elapsed().as_secs_f64();
            println!(
                "drew for {} member-cycles in {:.2} s ({:.1} million per second; checksum {:.6e})",
                drawn.member_cycles,
                seconds,
                drawn.member_cycles as f64 / seconds / 1e6,
                drawn.checksum
            );
            Ok(())
        }
        Command::DemoScenario => {
            print!("{}", demo::BASELINE);
            Ok(())
        }
        Command::Check {
            file,
            replications,
            threads,
            shard,
        } => {
            let overrides = Overrides {
                replications,
                seed: None,
            };
            let (scenario, _, origin) = load_with(Some(&file), &overrides)?;
            let shard = shard
                .map(|s| loancycle::shard::parse(&s, scenario.replications()))
                .transpose()
                .map_err(Failure::BadInput)?;
            let options = run::RunOptions {
                threads: threads.map(usize::from),
                ..Default::default()
            };
            print!("{}", terminal::arms_listing(&scenario, &origin));
            println!("{}", terminal::memory_line(&scenario, &options, shard));
            Ok(())
        }
        Command::Run {
            file,
            out,
            replications,
            seed,
            threads,
            quiet,
            force,
            max_memory,
            report: with_report,
            loan_book,
            baseline,
            shard,
            resume,
        } => {
            // Only `run` catches signals: it has files to protect. The other commands write nothing
            // and keep the default action, so Ctrl-C ends them at once.
            let stop = install_stop_signals();
            let overrides = Overrides { replications, seed };
            let (scenario, text, origin) = load_with(file.as_ref(), &overrides)?;
            let labels: Vec<&str> = scenario.arms().iter().map(|a| a.label()).collect();
            let baseline = match &baseline {
                Some(given) => loancycle::stats::compare::resolve_arm(&labels, given)
                    .map_err(|e| Failure::BadInput(format!("--baseline: {e}")))?,
                None => 0,
            };
            let shard = shard
                .map(|s| loancycle::shard::parse(&s, scenario.replications()))
                .transpose()
                .map_err(Failure::BadInput)?;
            if file.is_none() && !quiet {
                eprintln!("no scenario file given: running the built-in baseline demo, {origin}");
            }
            let options = run::RunOptions {
                threads: threads.map(usize::from),
                // finished replications beyond the last thousand or so wait on disk, not in memory
                spill_dir: Some(out.clone()),
                ..Default::default()
            };
            let (range, checkpoint_path, final_shard) = match shard {
                Some(id) => (
                    loancycle::shard::range(id.index, id.count, scenario.replications()),
                    out.join(loancycle::shard::checkpoint_name(id)),
                    Some(out.join(loancycle::shard::file_name(id))),
                ),
                None => (
                    0..scenario.replications(),
                    out.join(loancycle::checkpoint::CHECKPOINT_FILE),
                    None,
                ),
            };
            // a shard holds only its own replications
            run::check_memory(&scenario, &options, range.len() as u32, max_memory)
                .map_err(|e| Failure::BadInput(format!("{origin}: {e}")))?;
            if let Some(path) = &loan_book {
                loancycle::loanbook::check_destination(path, force).map_err(|e| Failure::BadInput(e.to_string()))?;
            }
            // A shard directory holds shard files, not results; an earlier shard or checkpoint is
            // kept unless --force or --resume says what to do with it.
            let existing = final_shard.iter().chain([&checkpoint_path]).find(|p| p.exists());
            if let (Some(path), false, false) = (existing, force, resume) {
                return Err(Failure::BadInput(format!(
                    "output directory {} already holds {}; continue it with --resume, or pass --force to start again",
                    out.display(),
                    path.file_name().unwrap_or_default().to_string_lossy()
                )));
            }
            let created = output::prepare_destination(&out, force || resume || shard.is_some())?;
            if let (Some(done), true, false) = (&final_shard, resume, checkpoint_path.exists())
                && done.exists()
            {
                return Err(Failure::BadInput(format!(
                    "--resume: {} is already complete; nothing to continue",
                    done.display()
                )));
            }
            // A shard run again with --force: the earlier file must not be merged meanwhile.
            if let (Some(earlier), false) = (&final_shard, resume)
                && earlier.exists()
            {
                std::fs::remove_file(earlier).map_err(|e| {
                    Failure::Running(format!(
                        "cannot remove {}: {}",
                        earlier.display(),
                        e.to_string().to_lowercase()
                    ))
                })?;
            }
            let header = loancycle::checkpoint::Header::new(&scenario, &text, &origin, baseline, shard, range.clone());
            let (mut writer, already) = loancycle::checkpoint::open(&checkpoint_path, &header, resume, Some(&out))
                .map_err(|e| {
                    output::abandon_destination(&out, created);
                    match e {
                        loancycle::checkpoint::OpenError::Refused(m) => Failure::BadInput(m),
                        loancycle::checkpoint::OpenError::Failed(e) => Failure::Running(e.to_string()),
                    }
                })?;
            let stopped = || stop.load(Ordering::Relaxed) != 0;
            let signal = || stop.load(Ordering::Relaxed);
            let tasks = u64::from(range.end - range.start) * scenario.arms().len() as u64;
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
            let simulated = run::simulate_range(
                &scenario,
                options,
                range.clone(),
                already,
                &stopped,
                &mut |batch| writer.append(batch).map_err(|e| e.to_string()),
                &mut |done| bar.set_position(done),
            );
            bar.finish_and_clear();
            let partial = simulated.map_err(|e| Failure::Running(e.to_string()))?;
            let seconds = started.elapsed().as_secs_f64();
            // The flags that shape the run must be given again, or the resume is refused.
            let resume_hint = || {
                let mut command = String::from("loancycle run");
                if let Some(f) = &file {
                    command += &format!(" {}", f.display());
                }
                if let Some(r) = replications {
                    command += &format!(" --replications {r}");
                }
                if let Some(s) = seed {
                    command += &format!(" --seed {s}");
                }
                if baseline != 0 {
                    command += &format!(" --baseline {}", baseline + 1);
                }
                if let Some(id) = shard {
                    command += &format!(" --shard {}/{}", id.index, id.count);
                }
                format!("continue with: {command} --out {} --resume", out.display())
            };
            writer.sync().map_err(|e| Failure::Running(e.to_string()))?;
            if let Some(done_path) = &final_shard {
                if partial.complete() {
                    std::fs::rename(&checkpoint_path, done_path).map_err(|e| {
                        Failure::Running(format!(
                            "cannot write {}: {}",
                            done_path.display(),
                            e.to_string().to_lowercase()
                        ))
                    })?;
                    if !quiet {
                        println!("wrote {}", done_path.display());
                    }
                }
                return match signal() {
                    0 => Ok(()),
                    s if partial.complete() => Err(Failure::Interrupted(
                        s,
                        format!("the shard was complete and is written to {}", done_path.display()),
                    )),
                    s => Err(Failure::Interrupted(
                        s,
                        format!(
                            "{} of the shard's {} replications are kept in {}; {}",
                            partial.done_until - range.start,
                            range.end - range.start,
                            checkpoint_path.display(),
                            resume_hint()
                        ),
                    )),
                };
            }
            if partial.done_until == 0 {
                // Stopped before the first batch finished: there is nothing to keep.
                let _ = std::fs::remove_file(&checkpoint_path);
                output::abandon_destination(&out, created);
                return Err(Failure::Interrupted(signal(), "no results were written".to_string()));
            }
            let results = partial.results;
            // The book is staged before the results and put in place after them: all files or none.
            let book = match loan_book
                .as_deref()
                .filter(|_| partial.done_until == partial.end)
                .map(|p| loancycle::loanbook::stage(&scenario, p, &stopped))
            {
                None => None,
                Some(Ok(staged)) => Some(staged),
                Some(Err(loancycle::loanbook::LoanBookError::Interrupted)) => None,
                Some(Err(e)) => {
                    return Err(if e.is_bad_input() {
                        Failure::BadInput(e.to_string())
                    } else {
                        Failure::Running(e.to_string())
                    });
                }
            };
            let mut report = report::build_with_baseline(&scenario, &text, &origin, &results, baseline);
            if let Some(e) = results.read_failure() {
                return Err(Failure::Running(e.to_string()));
            }
            if partial.done_until < partial.end {
                report.incomplete = Some(report::Incomplete {
                    replications_done: partial.done_until,
                    replications_asked: partial.end,
                    checkpoint: checkpoint_path.display().to_string(),
                });
            }
            // Results are written even when a signal came during the simulation: a stopped run keeps
            // what it finished, marked incomplete, beside its checkpoint.
            let mut paths =
                output::write_all(&out, &report, true, &|| false).map_err(|e| Failure::Running(e.to_string()))?;
            let book_written = book.is_some();
            if let Some(staged) = book {
                paths.push(staged.commit().map_err(|e| Failure::Running(e.to_string()))?);
            }
            if signal() != 0 {
                if !quiet {
                    for p in &paths {
                        println!("wrote {}", p.display());
                    }
                }
                let kept = if partial.done_until < partial.end {
                    format!(
                        "partial results of {} of {} replications written to {} and marked incomplete; {}",
                        partial.done_until,
                        partial.end,
                        out.display(),
                        resume_hint()
                    )
                } else {
                    format!(
                        "the simulation had finished; complete results written to {}{}",
                        out.display(),
                        if loan_book.is_some() && !book_written {
                            " (the loan book was not written)"
                        } else {
                            ""
                        }
                    )
                };
                return Err(Failure::Interrupted(signal(), kept));
            }
            drop(writer);
            std::fs::remove_file(&checkpoint_path).map_err(|e| {
                Failure::Running(format!(
                    "cannot remove {}: {}",
                    checkpoint_path.display(),
                    e.to_string().to_lowercase()
                ))
            })?;
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
            if with_report {
                board_report(&out, quiet)?;
            }
            Ok(())
        }
        Command::Merge {
            dirs,
            out,
            quiet,
            force,
            report: with_report,
        } => {
            // Replications beyond the last 1,024 of each arm wait in unnamed files beside the first
            // shard (the output directory is only made once the merge is known to succeed).
            let merged =
                loancycle::shard::merge(&dirs, dirs.first().map(PathBuf::as_path)).map_err(Failure::BadInput)?;
            for w in merged.scenario.warnings() {
                eprintln!("warning: {}: {w}", merged.origin);
            }
            let report = report::build_with_baseline(
                &merged.scenario,
                &merged.text,
                &merged.origin,
                &merged.results,
                merged.baseline,
            );
            let paths = output::write_all(&out, &report, force, &|| false)?;
            if !quiet {
                print!("{}", terminal::summary_table(&report));
                for p in paths {
                    println!("wrote {}", p.display());
                }
            } else {
                for w in &report.warnings {
                    eprintln!("warning: {w}");
                }
            }
            if with_report {
                board_report(&out, quiet)?;
            }
            Ok(())
        }
    }
}
