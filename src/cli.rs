//! Command-line interface.

use crate::config::{self, Method, RunPlan};
use crate::{output, report, run, AppError};
use clap::{Parser, Subcommand};
use indicatif::{ProgressBar, ProgressDrawTarget, ProgressStyle};
use std::io::IsTerminal;
use std::path::{Path, PathBuf};

/// Exact Lindblad master-equation solver for driven-dissipative spin–cavity networks.
#[derive(Parser, Debug)]
#[command(name = "cavern", version, about)]
pub struct Cli {
    #[command(subcommand)]
    command: Command,
}

#[derive(Subcommand, Debug)]
enum Command {
    /// Validate a config and describe the model: dimension, memory, terms with units, cooperativities.
    Check {
        /// The TOML config file.
        file: PathBuf,
    },
    /// Run a config and write the HDF5 result file.
    Run {
        /// The TOML config file.
        file: PathBuf,
        /// Output file (default: the config's file name with extension .h5, in the current directory).
        #[arg(short = 'o', long = "output")]
        output: Option<PathBuf>,
        /// Worker threads (0 = one per core); overrides [solver] threads.
        #[arg(long)]
        threads: Option<usize>,
        /// No progress bar and no summary table.
        #[arg(short, long)]
        quiet: bool,
    },
    /// Run a parameter scan (a config with [scan]); rerunning the same command resumes it.
    /// Exit code 3: finished and written, but some points failed.
    Scan(crate::scan::cmd::ScanArgs),
    /// Report a scan in progress or finished: points done, failed, remaining, ETA.
    Status(crate::scan::cmd::StatusArgs),
    /// Combine the journals of scan shards into one HDF5 file (exit code 3 if points failed).
    Merge(crate::scan::cmd::MergeArgs),
}

/// Write to standard output, ignoring a closed pipe (`cavern run … | head` must not panic; the
/// result file is what matters).
fn say(text: &str) {
    use std::io::Write;
    let mut o = std::io::stdout().lock();
    let _ = o.write_all(text.as_bytes()).and_then(|()| o.flush());
}

fn load(file: &Path) -> Result<RunPlan, AppError> {
    config::load(file).map_err(|e| AppError::Input(e.to_string()))
}

fn check(file: &Path) -> Result<(), AppError> {
    let plan = load(file)?;
    // no operator is built here: the memory guard must speak before anything large is allocated
    let space = plan
        .network
        .space()
        .map_err(|e| AppError::Input(format!("{}: {e}", file.display())))?;
    plan.initial
        .density_check(&space)
        .map_err(|e| AppError::Input(format!("{}: initial state: {e}", file.display())))?;
    let dim = space.dim();
    let choice = run::choose(&plan, dim);
    say(&report::check_text(&plan, dim, &choice));
    for w in plan
        .warnings
        .iter()
        .cloned()
        .chain(run::initial_truncation_warnings(&plan))
    {
        eprintln!("warning: {w}");
    }
    run::memory_guard(&plan, &choice)?;
    if let Some(text) = crate::scan::cmd::check_text(file)? {
        say(&text);
    }
    say(&format!("\nok: {} is valid\n", file.display()));
    Ok(())
}

/// The output file: `out`, or the config's name with extension .h5 in the current directory;
/// refused (exit 2) when it is a directory or its directory does not exist.
pub(crate) fn output_path(file: &Path, out: Option<PathBuf>) -> Result<PathBuf, AppError> {
    let out = out.unwrap_or_else(|| default_output(file));
    if out.is_dir() {
        return Err(AppError::Input(format!(
            "the output path {} is a directory; give a file name",
            out.display()
        )));
    }
    if let Some(parent) = out.parent().filter(|p| !p.as_os_str().is_empty()) {
        if !parent.is_dir() {
            return Err(AppError::Input(format!(
                "the output directory {} does not exist",
                parent.display()
            )));
        }
    }
    Ok(out)
}

fn default_output(file: &Path) -> PathBuf {
    let stem = file
        .file_stem()
        .map(|s| s.to_os_string())
        .unwrap_or_else(|| "cavern".into());
    PathBuf::from(stem).with_extension("h5")
}

fn run_cmd(
    file: &Path,
    out: Option<PathBuf>,
    threads: Option<usize>,
    quiet: bool,
) -> Result<(), AppError> {
    let mut plan = load(file)?;
    crate::scan::cmd::refuse_run(file, &plan.source)?;
    if let Some(t) = threads {
        plan.solver.threads = t;
    }
    let out = output_path(file, out)?;
    // the solver choice is decided (and the memory guard passed) before anything is printed
    let space = plan
        .network
        .space()
        .map_err(|e| AppError::Input(format!("{}: {e}", file.display())))?;
    let choice = run::choose(&plan, space.dim());
    run::memory_guard(&plan, &choice)?;
    let (total, unit) = match (choice.method, &plan.solver.trajectories) {
        (Method::Trajectories, Some(tp)) => (tp.trajectories, "trajectories"),
        _ => (plan.times.len(), "samples"),
    };
    if !quiet {
        say(&format!(
            "method: {} ({})\n",
            choice.method.name(),
            choice.reason
        ));
    }
    let bar = ProgressBar::with_draw_target(Some(total as u64), ProgressDrawTarget::stderr());
    if quiet || !std::io::stderr().is_terminal() {
        bar.set_draw_target(ProgressDrawTarget::hidden());
    }
    bar.set_style(
        ProgressStyle::with_template(&format!(
            "{{bar:40}} {{pos}}/{{len}} {unit}  {{elapsed_precise}} elapsed, eta {{eta}}"
        ))
        .unwrap_or_else(|_| ProgressStyle::default_bar()),
    );
    let res = run::run(&plan, &|done, _| bar.set_position(done as u64))?;
    bar.finish_and_clear();
    output::write(&plan, &res, &out)?;
    if !quiet {
        say(&report::summary_table(&plan, &res));
    }
    for w in &res.warnings {
        eprintln!("warning: {w}");
    }
    if !quiet {
        say(&format!("wrote {}\n", out.display()));
    }
    Ok(())
}

/// Parse arguments, run, and return the exit code (errors are printed to stderr).
pub fn main() -> i32 {
    let cli = match Cli::try_parse() {
        Ok(c) => c,
        Err(e) => {
            let _ = e.print();
            return if e.use_stderr() { 2 } else { 0 };
        }
    };
    let mut success = 0;
    let mut points_failed = |failed: usize| {
        if failed > 0 {
            success = crate::scan::cmd::EXIT_POINTS_FAILED;
        }
    };
    let r = match cli.command {
        Command::Check { file } => check(&file),
        Command::Run {
            file,
            output,
            threads,
            quiet,
        } => run_cmd(&file, output, threads, quiet),
        Command::Scan(a) => crate::scan::cmd::scan(a).map(&mut points_failed),
        Command::Status(a) => crate::scan::cmd::status(a).map(|text| say(&text)),
        Command::Merge(a) => crate::scan::cmd::merge(a).map(&mut points_failed),
    };
    match r {
        Ok(()) => success,
        Err(e) => {
            let text = e.to_string();
            if text.starts_with("error:") {
                eprintln!("{text}");
            } else {
                eprintln!("error: {text}");
            }
            e.exit_code()
        }
    }
}
