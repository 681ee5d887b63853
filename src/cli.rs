//! Command-line interface.

use crate::budget::DetectorSettings;
use crate::config::{self, Method, RunPlan};
use crate::{compare, h5in, output, plot, report, run, AppError};
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
    /// Compare results side by side: configs (run, or reused when a result with the same config
    /// hash exists) or result files (`scan.h5@axis=value` picks a scan point); writes a Markdown
    /// report, a CSV and figures into one folder.
    Compare {
        /// Two or more inputs: FILE.toml, FILE.h5 or SCAN.h5@axis=value[,axis=value].
        #[arg(required = true, num_args = 2..)]
        inputs: Vec<String>,
        /// Output folder for report.md, summary.csv, figures and the results of configs run.
        #[arg(short = 'o', long = "out-dir", default_value = "comparison")]
        out_dir: PathBuf,
        /// Skip the figures.
        #[arg(long)]
        no_figures: bool,
        #[command(flatten)]
        detector: DetectorArgs,
        /// Print nothing but errors.
        #[arg(short, long)]
        quiet: bool,
    },
    /// Photon budget: expected counts per output and the integration time to tell each input's
    /// outcome from the first's.
    Budget {
        /// One or more inputs: FILE.toml, FILE.h5 or SCAN.h5@axis=value.
        #[arg(required = true)]
        inputs: Vec<String>,
        /// Folder for the results of configs that must be run.
        #[arg(short = 'o', long = "out-dir", default_value = ".")]
        out_dir: PathBuf,
        #[command(flatten)]
        detector: DetectorArgs,
    },
    /// Draw the figures of a result file as PNG and SVG.
    Plot {
        /// The HDF5 result file.
        file: PathBuf,
        /// Output folder (default: <file stem>-figures).
        #[arg(short = 'o', long = "out-dir")]
        out_dir: Option<PathBuf>,
    },
    /// Run a parameter scan (a config with [scan]); rerunning the same command resumes it.
    /// Exit code 1 also when the scan finished and was written but some points failed.
    Scan(crate::scan::cmd::ScanArgs),
    /// Report a scan in progress or finished: points done, failed, remaining, ETA.
    Status(crate::scan::cmd::StatusArgs),
    /// Combine the journals of scan shards into one HDF5 file (exit code 1 if points failed).
    Merge(crate::scan::cmd::MergeArgs),
}

/// Detector of the photon budget (see README, "Photon budget"); flags override the file.
#[derive(clap::Args, Debug, Clone)]
struct DetectorArgs {
    /// Detection efficiency η, 0 < η ≤ 1 (dimensionless).
    #[arg(long)]
    efficiency: Option<f64>,
    /// Dark-count rate per detector in counts/s (counts per time unit for dimensionless runs); default 0.
    #[arg(long = "dark-rate")]
    dark_rate: Option<f64>,
    /// Integration window in s (time units for dimensionless runs); default 1.
    #[arg(long)]
    window: Option<f64>,
    /// Confidence p: each error probability at most 1 − p; default 0.95.
    #[arg(long)]
    confidence: Option<f64>,
    /// TOML file with a [detection] table (efficiency, dark_rate, window, confidence).
    #[arg(long)]
    detector: Option<PathBuf>,
}

impl DetectorArgs {
    /// The detector, or `None` when nothing was given.
    fn resolve(&self) -> Result<Option<crate::budget::Detector>, AppError> {
        let flags = DetectorSettings {
            efficiency: self.efficiency,
            dark_rate: self.dark_rate,
            window: self.window,
            confidence: self.confidence,
        };
        let base = match &self.detector {
            Some(p) => DetectorSettings::load(p).map_err(AppError::Input)?,
            None => DetectorSettings::default(),
        };
        let all = base.overridden_by(flags);
        if !all.any() {
            return Ok(None);
        }
        all.resolve().map(Some).map_err(AppError::Input)
    }
}

fn compare_cmd(req: compare::CompareRequest) -> Result<(), AppError> {
    compare::compare(&req, &say)
}

fn budget_cmd(inputs: &[String], out_dir: &Path, det: &DetectorArgs) -> Result<(), AppError> {
    let det = det.resolve()?.ok_or_else(|| {
        AppError::Input("the photon budget needs at least --efficiency (or --detector FILE)".into())
    })?;
    let mut loaded = Vec::new();
    for a in inputs {
        let taken: Vec<PathBuf> = loaded
            .iter()
            .map(|i: &compare::Input| i.file.clone())
            .collect();
        loaded.push(compare::resolve(a, out_dir, &taken, &say)?);
    }
    let all: Vec<_> = loaded
        .iter()
        .map(|i| compare::metrics(&i.tree, i.point))
        .collect();
    let (outcomes, tu) = compare::budget_outcomes(&loaded, &all).map_err(AppError::Input)?;
    say(&crate::budget::report(&det, &outcomes, &tu));
    Ok(())
}

fn plot_cmd(file: &Path, out_dir: Option<PathBuf>) -> Result<(), AppError> {
    let tree = h5in::read(file).map_err(|e| AppError::Input(e.to_string()))?;
    let stem = file
        .file_stem()
        .map(|s| s.to_string_lossy().into_owned())
        .unwrap_or_else(|| "cavern".into());
    let dir = out_dir.unwrap_or_else(|| PathBuf::from(format!("{stem}-figures")));
    std::fs::create_dir_all(&dir)
        .map_err(|e| AppError::Runtime(format!("cannot create {}: {e}", dir.display())))?;
    let files = plot::plot_file(&tree, &stem, &dir).map_err(AppError::Input)?;
    say(&format!(
        "wrote {} files to {}:\n",
        files.len(),
        dir.display()
    ));
    for n in plot::names(&files) {
        say(&format!("  {n}\n"));
    }
    Ok(())
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
    let probes = plan.memory.as_ref().and_then(|m| m.probes.as_ref());
    let unit = match (choice.method, probes.is_some()) {
        (Method::Trajectories, false) => "trajectories",
        (Method::DensityMatrix, false) => "samples",
        (Method::Trajectories, true) => "trajectories, then probes",
        (Method::DensityMatrix, true) => "samples, then probes",
    };
    let total = run::progress_total(&plan, choice.method);
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
        Command::Compare {
            inputs,
            out_dir,
            no_figures,
            detector,
            quiet,
        } => detector.resolve().and_then(|detector| {
            compare_cmd(compare::CompareRequest {
                inputs,
                out_dir,
                detector,
                no_figures,
                quiet,
            })
        }),
        Command::Budget {
            inputs,
            out_dir,
            detector,
        } => budget_cmd(&inputs, &out_dir, &detector),
        Command::Plot { file, out_dir } => plot_cmd(&file, out_dir),
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
