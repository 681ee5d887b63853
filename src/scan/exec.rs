//! Running a scan: checking every point, splitting the machine between concurrent points and
//! per-point threads, journaling each finished point, progress, and the time estimate of
//! `cavern check`.

use super::journal::{self, Header, Journal, PointRecord};
use super::spec::Scan;
use crate::config::{Method, RunPlan};
use crate::run::{self, RunResult, Series};
use crate::AppError;
use indicatif::{ProgressBar, ProgressDrawTarget, ProgressStyle};
use std::io::IsTerminal;
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicBool, AtomicUsize, Ordering};
use std::time::{Duration, Instant, SystemTime, UNIX_EPOCH};

/// Which observables a point produces, in the order their values are stored.
#[derive(Clone, Debug)]
pub struct Layout {
    /// Time-evolution observables (data empty: names, units, rows, descriptions only).
    pub series: Vec<Series>,
    /// Steady-state observables (empty without `[steady_state]`).
    pub steady: Vec<Series>,
    /// Whether standard errors follow the means (trajectories).
    pub stderr: bool,
    /// Number of sample times.
    pub n_times: usize,
    /// The solver.
    pub method: Method,
}

impl Layout {
    fn of(plan: &RunPlan, method: Method) -> Layout {
        let n_t = plan.times.len();
        let strip = |mut v: Vec<Series>| {
            for s in &mut v {
                s.data = Vec::new();
            }
            v
        };
        Layout {
            series: strip(run::make_series(plan, n_t, method)),
            steady: plan
                .steady
                .as_ref()
                .map(|_| strip(run::make_series(plan, 1, Method::DensityMatrix)))
                .unwrap_or_default(),
            stderr: method == Method::Trajectories,
            n_times: n_t,
            method,
        }
    }

    fn signature(&self) -> Vec<(String, usize)> {
        self.series
            .iter()
            .chain(&self.steady)
            .map(|s| (s.name.clone(), s.n_rows()))
            .chain([
                ("times".to_string(), self.n_times),
                ("stderr".into(), usize::from(self.stderr)),
            ])
            .collect()
    }

    /// Values per point.
    pub fn n_values(&self) -> usize {
        let evo: usize = self.series.iter().map(|s| s.n_rows() * self.n_times).sum();
        let st: usize = self.steady.iter().map(Series::n_rows).sum();
        evo * (1 + usize::from(self.stderr)) + st
    }

    /// The values of a finished run in layout order: means, standard errors, steady state (NaN
    /// where the steady state is not unique). `Err` names a non-finite mean.
    fn values(&self, res: &RunResult) -> Result<Vec<f64>, String> {
        let mut v = Vec::with_capacity(self.n_values());
        for s in &self.series {
            let got = res
                .get(&s.name)
                .ok_or_else(|| format!("no series {}", s.name))?;
            if let Some(k) = got.data.iter().position(|x| !x.is_finite()) {
                let t = res
                    .times
                    .get(k % self.n_times.max(1))
                    .copied()
                    .unwrap_or(f64::NAN);
                return Err(format!(
                    "the observable {} is not finite ({}) at t = {t}",
                    s.name, got.data[k]
                ));
            }
            v.extend_from_slice(&got.data);
        }
        if self.stderr {
            for s in &self.series {
                v.extend_from_slice(
                    &res.get(&s.name)
                        .map(|g| g.stderr.clone())
                        .unwrap_or_default(),
                );
            }
        }
        for s in &self.steady {
            let got = res
                .steady
                .as_ref()
                .and_then(|st| st.series.iter().find(|x| x.name == s.name));
            match got {
                Some(g) => v.extend_from_slice(&g.data[..s.n_rows()]),
                None => v.extend(std::iter::repeat_n(f64::NAN, s.n_rows())),
            }
        }
        if v.len() != self.n_values() {
            return Err(
                "internal error: the run's observables do not match the scan layout".into(),
            );
        }
        Ok(v)
    }
}

/// Every point checked: the common layout, the largest model and memory.
#[derive(Clone, Debug)]
pub struct Survey {
    /// The layout of every point.
    pub layout: Layout,
    /// Largest Hilbert-space dimension.
    pub max_dim: usize,
    /// Largest memory estimate of one point with one thread (bytes).
    pub max_memory: u128,
    /// Memory the scan may use in total (bytes), if known.
    pub allowed: Option<u128>,
}

/// Resolve every point (same validation as a single run), check that they share one layout, and
/// (with `guard`) that each passes the memory guard.
///
/// # Errors
/// [`AppError::Input`] naming the point, file, line and key.
pub fn survey(scan: &Scan, guard: bool) -> Result<Survey, AppError> {
    let mut first: Option<Layout> = None;
    let (mut max_dim, mut max_memory) = (0, 0);
    let mut allowed = None;
    for i in 0..scan.n_points() {
        let mut plan = scan
            .point_plan(i)
            .map_err(|e| AppError::Input(e.to_string()))?;
        plan.solver.threads = 1;
        let at = || {
            format!(
                "{}: at scan point {i} ({})",
                scan.path.display(),
                scan.describe_point(i)
            )
        };
        let space = plan
            .network
            .space()
            .map_err(|e| AppError::Input(format!("{}: {e}", at())))?;
        let choice = run::choose(&plan, space.dim());
        if guard {
            run::memory_guard(&plan, &choice)
                .map_err(|e| AppError::Input(format!("{}: {e}", at())))?;
        }
        let est = choice.estimate();
        allowed = est.physical.map(|p| (p as f64 * est.share) as u128);
        max_dim = max_dim.max(space.dim());
        max_memory = max_memory.max(est.needed);
        let layout = Layout::of(&plan, choice.method);
        match &first {
            None => first = Some(layout),
            Some(l) if l.signature() != layout.signature() => {
                return Err(AppError::Input(format!(
                    "{}: the observables differ from those of point 0 ({} with {} samples, vs {} with {}): every point of a scan must \
                     record the same observables with the same rows and number of samples. Scan only values that keep the model's \
                     shape (not `sites.count` or `time.samples`), and set [solver] method explicitly rather than \"auto\"",
                    at(),
                    layout.method.name(),
                    layout.n_times,
                    l.method.name(),
                    l.n_times
                )))
            }
            Some(_) => {}
        }
    }
    Ok(Survey {
        layout: first.expect("a scan has at least one point"),
        max_dim,
        max_memory,
        allowed,
    })
}

/// Cores available to this process (SLURM's `SLURM_CPUS_PER_TASK` inside a job, else the
/// machine's).
pub fn cores() -> usize {
    std::env::var("SLURM_CPUS_PER_TASK")
        .ok()
        .and_then(|s| s.parse().ok())
        .filter(|&n: &usize| n > 0)
        .unwrap_or_else(|| std::thread::available_parallelism().map_or(1, |n| n.get()))
}

/// How the machine is shared: points at a time and threads per point.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Split {
    /// Points running concurrently.
    pub parallel: usize,
    /// Worker threads of each point.
    pub threads: usize,
    /// Cores used for the choice.
    pub cores: usize,
    /// Largest number of concurrent points that fits in memory.
    pub memory_cap: usize,
}

/// Choose the split: as many concurrent points as cores, points to run and memory allow (points
/// are independent and need no synchronisation, while the density-matrix kernel only uses threads
/// from d = 64 on), and the remaining cores as threads per point. `parallel` / `threads` override
/// either.
pub fn split(
    survey: &Survey,
    todo: usize,
    parallel: Option<usize>,
    threads: Option<usize>,
) -> Split {
    let cores = cores();
    let memory_cap = match survey.allowed {
        Some(a) => ((a / survey.max_memory.max(1)) as usize).max(1),
        None => usize::MAX,
    };
    let (p, t) = match (parallel, threads) {
        (Some(p), Some(t)) => (p, t),
        (Some(p), None) => (p, (cores / p.max(1)).max(1)),
        (None, Some(t)) => (
            (cores / t.max(1)).max(1).min(todo.max(1)).min(memory_cap),
            t,
        ),
        (None, None) => {
            let p = cores.min(todo.max(1)).min(memory_cap).max(1);
            (p, (cores / p).max(1))
        }
    };
    Split {
        parallel: p.max(1),
        threads: t.max(1),
        cores,
        memory_cap,
    }
}

fn now() -> f64 {
    SystemTime::now()
        .duration_since(UNIX_EPOCH)
        .map_or(0.0, |d| d.as_secs_f64())
}

/// Run point `index` with `threads` worker threads; failures are recorded, never returned.
pub fn run_point(scan: &Scan, index: usize, threads: usize, layout: &Layout) -> PointRecord {
    let start = Instant::now();
    let mut rec = PointRecord {
        index: index as u64,
        ok: false,
        error: String::new(),
        warnings: Vec::new(),
        steps: 0,
        rejected: 0,
        rhs_evals: 0,
        dim: 0,
        seed: scan.seed_of(index),
        wall_seconds: 0.0,
        finished_at: 0.0,
        times: Vec::new(),
        values: Vec::new(),
    };
    match scan.point_plan(index) {
        Err(e) => rec.error = e.to_string(),
        Ok(mut plan) => {
            plan.solver.threads = threads;
            rec.times = plan.times.clone();
            let outcome = std::panic::catch_unwind(std::panic::AssertUnwindSafe(|| {
                run::run(&plan, &|_, _| {})
            }));
            match outcome {
                Ok(Ok(res)) => {
                    rec.steps = res.stats.steps;
                    rec.rejected = res.stats.rejected;
                    rec.rhs_evals = res.stats.rhs_evals;
                    rec.dim = res.dim as u64;
                    rec.warnings = res
                        .warnings
                        .iter()
                        .filter(|w| !scan.base.warnings.contains(w))
                        .cloned()
                        .collect();
                    match layout.values(&res) {
                        Ok(v) => {
                            rec.ok = true;
                            rec.values = v;
                        }
                        Err(e) => rec.error = e,
                    }
                }
                Ok(Err(e)) => rec.error = e.to_string(),
                Err(p) => {
                    let what = p
                        .downcast_ref::<String>()
                        .cloned()
                        .or_else(|| p.downcast_ref::<&str>().map(|s| s.to_string()))
                        .unwrap_or_default();
                    rec.error = format!("internal error (a bug, please report): {what}");
                }
            }
        }
    }
    rec.wall_seconds = start.elapsed().as_secs_f64();
    rec.finished_at = now();
    rec
}

/// Human-readable duration.
pub fn duration_label(s: f64) -> String {
    if !s.is_finite() {
        return "unknown".into();
    }
    let s = s.max(0.0);
    if s < 1.0 {
        format!("{:.0} ms", s * 1e3)
    } else if s < 10.0 {
        format!("{s:.1} s")
    } else if s < 60.0 {
        format!("{s:.0} s")
    } else if s < 3600.0 {
        format!("{} min {:.0} s", (s / 60.0).floor(), s % 60.0)
    } else if s < 86400.0 {
        format!("{} h {:.0} min", (s / 3600.0).floor(), (s % 3600.0) / 60.0)
    } else {
        format!(
            "{} d {:.0} h",
            (s / 86400.0).floor(),
            (s % 86400.0) / 3600.0
        )
    }
}

/// The journal of output `out` for shard `k` of `n`.
pub fn journal_path(out: &Path, shard: (usize, usize)) -> PathBuf {
    let mut s = out.as_os_str().to_owned();
    if shard.1 > 1 {
        s.push(format!(".shard-{}-of-{}.journal", shard.0, shard.1));
    } else {
        s.push(".journal");
    }
    PathBuf::from(s)
}

/// Whether point `index` belongs to shard `k` (1-based) of `n`: points are dealt round-robin, so
/// every shard gets a similar mix of cheap and expensive corners of the grid.
pub fn in_shard(index: usize, shard: (usize, usize)) -> bool {
    index % shard.1 == shard.0 - 1
}

/// What `cavern scan` asked for.
#[derive(Clone, Debug)]
pub struct Options {
    /// The final HDF5 file.
    pub output: PathBuf,
    /// Shard k of n (1-based); (1, 1) for the whole scan.
    pub shard: (usize, usize),
    /// Concurrent points (None: automatic).
    pub parallel: Option<usize>,
    /// Threads per point (None: automatic).
    pub threads: Option<usize>,
    /// No progress output.
    pub quiet: bool,
    /// Recompute points recorded as failed.
    pub retry_failed: bool,
}

/// How a scan run ended.
#[derive(Clone, Debug)]
pub struct Outcome {
    /// Failed points among this run's (shard's) points.
    pub failed: usize,
    /// Points of this shard.
    pub total: usize,
    /// The journal.
    pub journal: PathBuf,
    /// The result file, when this run wrote it (whole scans).
    pub wrote: Option<PathBuf>,
}

/// Progress output: a bar on a terminal, periodic plain lines otherwise.
struct Progress {
    bar: Option<ProgressBar>,
    log: bool,
    total: usize,
    done: usize,
    failed: usize,
    new: usize,
    start: Instant,
    last_log: Instant,
}

/// Seconds between plain progress lines when stderr is not a terminal.
const LOG_EVERY: Duration = Duration::from_secs(30);

impl Progress {
    fn new(total: usize, done: usize, failed: usize, quiet: bool) -> Self {
        let tty = std::io::stderr().is_terminal();
        let bar = (!quiet && tty).then(|| {
            let b = ProgressBar::with_draw_target(Some(total as u64), ProgressDrawTarget::stderr());
            b.set_style(
                ProgressStyle::with_template("{bar:30} {pos}/{len} points  {msg}  eta {eta}")
                    .unwrap_or_else(|_| ProgressStyle::default_bar()),
            );
            b.set_position(done as u64);
            b.reset_eta();
            b
        });
        let mut p = Progress {
            bar,
            log: !quiet && !tty,
            total,
            done,
            failed,
            new: 0,
            start: Instant::now(),
            last_log: Instant::now(),
        };
        p.message();
        p
    }

    fn rate(&self) -> f64 {
        self.new as f64 / self.start.elapsed().as_secs_f64().max(1e-9)
    }

    fn line(&self) -> String {
        let rate = self.rate();
        let eta = if self.new > 0 {
            duration_label((self.total - self.done) as f64 / rate)
        } else {
            "unknown".into()
        };
        format!(
            "scan: {}/{} points done, {} failed, {:.2} points/min, eta {eta}",
            self.done,
            self.total,
            self.failed,
            rate * 60.0
        )
    }

    fn message(&mut self) {
        if let Some(b) = &self.bar {
            b.set_message(format!(
                "{} failed  {:.2} points/min",
                self.failed,
                self.rate() * 60.0
            ));
        }
    }

    fn point(&mut self, ok: bool) {
        self.done += 1;
        self.new += 1;
        self.failed += usize::from(!ok);
        if let Some(b) = &self.bar {
            b.set_position(self.done as u64);
        }
        self.message();
        if self.log && self.last_log.elapsed() >= LOG_EVERY {
            eprintln!("{}", self.line());
            self.last_log = Instant::now();
        }
    }

    fn finish(&self) {
        if let Some(b) = &self.bar {
            b.finish_and_clear();
        }
        if self.log {
            eprintln!("{}", self.line());
        }
    }
}

/// Open (resume) or create the journal of this run, refusing one written by another config.
fn open_journal(
    scan: &Scan,
    path: &Path,
    shard: (usize, usize),
    quiet: bool,
) -> Result<(Journal, Vec<PointRecord>), AppError> {
    let io = |e: std::io::Error| AppError::Runtime(format!("scan journal {}: {e}", path.display()));
    match journal::read(path).map_err(io)? {
        Some(c) => {
            let h = &c.header;
            if h.config_hash != scan.hash {
                return Err(AppError::Input(format!(
                    "{}: the journal {} was written for a different config (SHA-256 {}… then, {}… now): the config changed \
                     since this scan started, so its {} finished point(s) cannot be reused. To start over, delete {} \
                     (its points are lost) and run again; or restore the config the journal was written for; or write the \
                     new scan to another output with -o",
                    scan.path.display(),
                    path.display(),
                    &h.config_hash[..12.min(h.config_hash.len())],
                    &scan.hash[..12],
                    c.latest().len(),
                    path.display()
                )));
            }
            if h.n_points != scan.n_points() as u64 || h.shard != (shard.0 as u64, shard.1 as u64) {
                return Err(AppError::Input(format!(
                    "the journal {} belongs to another run (shard {}/{} of {} points); delete it to start over",
                    path.display(),
                    h.shard.0,
                    h.shard.1,
                    h.n_points
                )));
            }
            if c.torn_bytes > 0 && !quiet {
                eprintln!(
                    "note: discarded {} byte(s) at the end of {} (a record torn by an interrupted write); that point is recomputed",
                    c.torn_bytes,
                    path.display()
                );
            }
            let j = Journal::open(path, Some(c.valid_len)).map_err(io)?;
            Ok((j, c.points))
        }
        None => {
            let header = Header {
                config_hash: scan.hash.clone(),
                config_path: scan.path.display().to_string(),
                config_abs: std::fs::canonicalize(&scan.path)
                    .unwrap_or_else(|_| scan.path.clone())
                    .display()
                    .to_string(),
                config_text: scan.source.clone(),
                n_points: scan.n_points() as u64,
                shard: (shard.0 as u64, shard.1 as u64),
            };
            Ok((Journal::create(path, &header).map_err(io)?, Vec::new()))
        }
    }
}

/// Run (or resume) the scan, or one shard of it.
///
/// # Errors
/// [`AppError::Input`] for bad configs and foreign journals; [`AppError::Runtime`] for I/O.
/// Failed points are not errors: they are counted in [`Outcome::failed`].
pub fn run_scan(scan: &Scan, opts: &Options) -> Result<Outcome, AppError> {
    let sv = survey(scan, true)?;
    let jpath = journal_path(&opts.output, opts.shard);
    let (mut journal, previous) = open_journal(scan, &jpath, opts.shard, opts.quiet)?;
    let mine: Vec<usize> = (0..scan.n_points())
        .filter(|&i| in_shard(i, opts.shard))
        .collect();
    let mut latest = std::collections::BTreeMap::new();
    for r in &previous {
        latest.insert(r.index as usize, r.ok);
    }
    let todo: Vec<usize> = mine
        .iter()
        .copied()
        .filter(|i| match latest.get(i) {
            None => true,
            Some(ok) => !ok && opts.retry_failed,
        })
        .collect();
    let sp = split(&sv, todo.len(), opts.parallel, opts.threads);
    let done_before = mine.len() - todo.len();
    let failed_before = mine
        .iter()
        .filter(|i| latest.get(i) == Some(&false) && !todo.contains(i))
        .count();
    if !opts.quiet {
        let shard = if opts.shard.1 > 1 {
            format!("shard {}/{}: ", opts.shard.0, opts.shard.1)
        } else {
            String::new()
        };
        let resumed = if done_before > 0 {
            format!(", {done_before} already in {} (resumed)", jpath.display())
        } else {
            String::new()
        };
        eprintln!(
            "scan: {shard}{} of {} points to run{resumed}; {} point(s) at a time × {} thread(s) each ({} cores)",
            todo.len(),
            mine.len(),
            sp.parallel,
            sp.threads,
            sp.cores
        );
    }
    let mut progress = Progress::new(mine.len(), done_before, failed_before, opts.quiet);
    let next = AtomicUsize::new(0);
    let stop = AtomicBool::new(false);
    let mut write_error = None;
    std::thread::scope(|s| {
        let (tx, rx) = std::sync::mpsc::channel::<PointRecord>();
        for _ in 0..sp.parallel.min(todo.len()) {
            let tx = tx.clone();
            let (next, stop, todo, layout) = (&next, &stop, &todo, &sv.layout);
            s.spawn(move || loop {
                if stop.load(Ordering::Relaxed) {
                    break;
                }
                let k = next.fetch_add(1, Ordering::Relaxed);
                let Some(&index) = todo.get(k) else { break };
                if tx.send(run_point(scan, index, sp.threads, layout)).is_err() {
                    break;
                }
            });
        }
        drop(tx);
        for rec in rx {
            if write_error.is_some() {
                continue;
            }
            match journal.append(&rec) {
                Ok(()) => progress.point(rec.ok),
                Err(e) => {
                    stop.store(true, Ordering::Relaxed);
                    write_error = Some(e);
                }
            }
        }
    });
    progress.finish();
    if let Some(e) = write_error {
        return Err(AppError::Runtime(format!(
            "cannot record a finished point in the scan journal {}: {e}; the points recorded before are kept, rerun the same command to resume",
            jpath.display()
        )));
    }
    let total = mine.len();
    if opts.shard.1 > 1 {
        return Ok(Outcome {
            failed: progress.failed,
            total,
            journal: jpath,
            wrote: None,
        });
    }
    // the result file is built from the journal, so a resumed scan gives the same file as an
    // uninterrupted one
    let c = journal::read(&jpath)
        .map_err(|e| AppError::Runtime(format!("scan journal {}: {e}", jpath.display())))?
        .ok_or_else(|| {
            AppError::Runtime(format!("the scan journal {} vanished", jpath.display()))
        })?;
    let records = c.latest();
    let failed = records.values().filter(|r| !r.ok).count();
    super::file::write(scan, &sv.layout, &records, &opts.output)?;
    Ok(Outcome {
        failed,
        total,
        journal: jpath,
        wrote: Some(opts.output.clone()),
    })
}

/// Time estimate of a whole scan from short calibration runs.
#[derive(Clone, Debug)]
pub struct Estimate {
    /// Estimated seconds of one point (mean of the calibrated points).
    pub per_point: f64,
    /// Estimated wall-clock seconds of the whole scan with the automatic split.
    pub total: f64,
    /// How it was calibrated, in one sentence.
    pub how: String,
}

fn calibrate_point(scan: &Scan, index: usize, threads: usize) -> Result<(f64, f64), AppError> {
    let mut plan = scan
        .point_plan(index)
        .map_err(|e| AppError::Input(e.to_string()))?;
    plan.solver.threads = threads;
    let t_end = plan.times.last().copied().unwrap_or(0.0);
    let steady = plan.steady.take();
    let mut scale = 1.0;
    if let Some(tp) = plan.solver.trajectories.as_mut() {
        let n = tp.trajectories.min(4 * threads.max(1));
        scale = tp.trajectories as f64 / n as f64;
        tp.trajectories = n;
        tp.keep = 0;
    }
    let all = plan.times.clone();
    let mut frac = 1.0 / 64.0;
    let (mut evo, mut used) = loop {
        let mut p = plan.clone();
        p.times = all.iter().copied().filter(|&t| t <= frac * t_end).collect();
        if p.times.len() < 2 {
            p.times = all[..2.min(all.len())].to_vec();
        }
        let reached = p.times.last().copied().unwrap_or(t_end) / t_end.max(f64::MIN_POSITIVE);
        let res = run::run(&p, &|_, _| {})?;
        if res.wall_seconds >= 0.2 || reached >= 1.0 {
            break (res.wall_seconds / reached.max(1e-12), reached);
        }
        frac *= 4.0;
    };
    evo *= scale;
    used = used.min(1.0);
    if steady.is_some() {
        let mut p = plan.clone();
        p.times = all[..2.min(all.len())].to_vec();
        p.steady = steady;
        let res = run::run(&p, &|_, _| {})?;
        evo += res.steady.map_or(0.0, |s| s.wall_seconds);
    }
    Ok((evo, used))
}

/// Estimate the total time: evolve the first, middle and last points over a growing fraction of
/// the time span (from 1/64, ×4 until it takes 0.2 s or the whole span), extrapolate linearly in
/// the time span (and in the number of trajectories), add the steady-state solve, and divide the
/// sum over all points by the number of concurrent points. Points after the calibration has taken
/// 5 s are skipped.
///
/// # Errors
/// A calibration point that fails (it would fail in the scan too).
pub fn estimate(scan: &Scan, sp: &Split) -> Result<Estimate, AppError> {
    let n = scan.n_points();
    let mut picks = vec![0, n / 2, n - 1];
    picks.dedup();
    let mut secs = Vec::new();
    let mut fracs = Vec::new();
    let started = Instant::now();
    for &i in &picks {
        let (s, f) = calibrate_point(scan, i, sp.threads)?;
        secs.push(s);
        fracs.push(f);
        if started.elapsed() > Duration::from_secs(5) {
            break; // slow points: `check` should stay quick, one or two calibrations must do
        }
    }
    picks.truncate(secs.len());
    let per_point = secs.iter().sum::<f64>() / secs.len() as f64;
    let total = per_point * n as f64 / sp.parallel as f64;
    let list: Vec<String> = picks.iter().map(|i| i.to_string()).collect();
    let fmin = fracs.iter().copied().fold(1.0, f64::min);
    let how = format!(
        "calibrated by evolving point(s) {} with {} thread(s) over a growing part of the time span (from 1/64, ×4 until a run took \
         0.2 s or the whole span; at least {:.1}% here), extrapolating linearly in time{}{}, and assuming every point costs their mean",
        list.join(", "),
        sp.threads,
        100.0 * fmin,
        if scan.base.solver.trajectories.is_some() { " and in the number of trajectories" } else { "" },
        if scan.base.steady.is_some() { ", plus one steady-state solve per point" } else { "" },
    );
    Ok(Estimate {
        per_point,
        total,
        how,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    fn survey(max_memory: u128, allowed: Option<u128>) -> Survey {
        Survey {
            layout: Layout {
                series: Vec::new(),
                steady: Vec::new(),
                stderr: false,
                n_times: 2,
                method: Method::DensityMatrix,
            },
            max_dim: 4,
            max_memory,
            allowed,
        }
    }

    #[test]
    fn split_respects_overrides_points_and_memory() {
        let c = cores();
        let s = split(&survey(1, None), 1000, None, None);
        assert_eq!((s.parallel, s.threads), (c, 1));
        let s = split(&survey(1, None), 1, None, None);
        assert_eq!((s.parallel, s.threads), (1, c));
        // memory for one point only
        let s = split(&survey(100, Some(150)), 1000, None, None);
        assert_eq!((s.parallel, s.memory_cap), (1, 1));
        let s = split(&survey(1, None), 1000, Some(3), Some(5));
        assert_eq!((s.parallel, s.threads), (3, 5));
    }

    #[test]
    fn shards_partition_the_points() {
        for n in 1..6 {
            for i in 0..40 {
                let owners = (1..=n).filter(|&k| in_shard(i, (k, n))).count();
                assert_eq!(owners, 1);
            }
        }
        assert_eq!(
            journal_path(Path::new("d/out.h5"), (2, 4)),
            PathBuf::from("d/out.h5.shard-2-of-4.journal")
        );
        assert_eq!(
            journal_path(Path::new("out.h5"), (1, 1)),
            PathBuf::from("out.h5.journal")
        );
    }
}
