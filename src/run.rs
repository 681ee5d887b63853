//! Running a resolved plan: solver choice and memory guard, time evolution (density matrix or
//! quantum trajectories), observables at the sample times, click analysis of the jumps.

use crate::clicks::{self, ClickAnalysis, ClickSettings};
use crate::config::{Method, MethodRequest, RunPlan, SteadyRequest, TrajectoryPlan};
use crate::AppError;
use cavern_evolve::{
    density_workspace_bytes, evolve_density, run_trajectories, DopriOptions, JumpRecord, Par,
    Stats, TrajectoryOptions,
};
use cavern_model::{Channel, MasterEquation, ModeInit, C64};
use cavern_observe as obs;
use std::sync::atomic::{AtomicUsize, Ordering};
use std::time::Instant;

/// One recorded observable: `rows` time series of equal length (row-major `[rows, time]`).
#[derive(Clone, Debug, PartialEq)]
pub struct Series {
    /// Dataset name in the output.
    pub name: String,
    /// Unit label.
    pub units: String,
    /// What it is, with its convention.
    pub description: String,
    /// Label of each row (e.g. `site0`, `mode1`, `pattern0`); empty for a single unlabelled row.
    pub rows: Vec<String>,
    /// Values, `rows.len().max(1)` × number of times, row-major (the mean for trajectories).
    pub data: Vec<f64>,
    /// Standard error of the mean over trajectories, same layout; empty for the density matrix.
    pub stderr: Vec<f64>,
}

impl Series {
    fn new(name: &str, units: &str, description: &str, rows: Vec<String>, n_times: usize) -> Self {
        let n = rows.len().max(1);
        Self {
            name: name.into(),
            units: units.into(),
            description: description.into(),
            rows,
            data: vec![f64::NAN; n * n_times],
            stderr: Vec::new(),
        }
    }

    /// Number of rows (at least 1).
    pub fn n_rows(&self) -> usize {
        self.rows.len().max(1)
    }

    /// Time series of row `r`.
    pub fn row(&self, r: usize) -> &[f64] {
        let t = self.data.len() / self.n_rows();
        &self.data[r * t..(r + 1) * t]
    }

    /// Standard errors of row `r` (empty for the density matrix).
    pub fn row_stderr(&self, r: usize) -> &[f64] {
        if self.stderr.is_empty() {
            return &[];
        }
        let t = self.stderr.len() / self.n_rows();
        &self.stderr[r * t..(r + 1) * t]
    }
}

/// The memory a solver needs, against what the run may use.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct MemoryEstimate {
    /// Hilbert-space dimension d.
    pub dim: usize,
    /// Estimated bytes for the solver workspace.
    pub needed: u128,
    /// Physical memory of the machine (bytes), if known.
    pub physical: Option<u128>,
    /// Allowed share of physical memory.
    pub share: f64,
}

impl MemoryEstimate {
    /// True when the estimate fits in the allowed share (or physical memory is unknown).
    pub fn fits(&self) -> bool {
        match self.physical {
            Some(p) => (self.needed as f64) <= self.share * p as f64,
            None => true,
        }
    }

    /// The allowed bytes, as a label ("unknown" without /proc/meminfo).
    pub fn allowed_label(&self) -> String {
        self.physical
            .map(|p| bytes_label((p as f64 * self.share) as u128))
            .unwrap_or_else(|| "unknown".into())
    }
}

/// Physical memory in bytes, from /proc/meminfo (Linux); `None` elsewhere.
pub fn physical_memory() -> Option<u128> {
    let text = std::fs::read_to_string("/proc/meminfo").ok()?;
    let line = text.lines().find(|l| l.starts_with("MemTotal:"))?;
    let kb: u128 = line.split_whitespace().nth(1)?.parse().ok()?;
    Some(kb * 1024)
}

/// Human-readable byte count.
pub fn bytes_label(b: u128) -> String {
    let b = b as f64;
    if b >= 1024f64.powi(4) {
        format!("{:.2} TiB", b / 1024f64.powi(4))
    } else if b >= 1024f64.powi(3) {
        format!("{:.2} GiB", b / 1024f64.powi(3))
    } else if b >= 1024f64.powi(2) {
        format!("{:.1} MiB", b / 1024f64.powi(2))
    } else {
        format!("{:.0} KiB", (b / 1024.0).max(1.0))
    }
}

/// Bytes of the recorded series (mean and, for trajectories, standard error), plus the
/// per-probe overlap traces and metrics of `[probes]`.
fn series_bytes(plan: &RunPlan) -> u128 {
    let t = plan.times.len() as u128;
    let probes = plan.memory.as_ref().map_or(0, |m| {
        let p = m.probes.as_ref().map_or(0, |pp| pp.probes.len()) as u128;
        let n_p = m.patterns.len() as u128;
        p * (n_p * t + n_p + plan.network.sites.len() as u128 + 8) * 8
    });
    (plan.network.sites.len() * 3 + plan.network.modes.len() * 6 + plan.observe.patterns.len() + 2)
        as u128
        * t
        * 8
        + probes
}

/// Estimate the density-matrix workspace of `plan` (solver matrices plus recorded series).
pub fn density_memory(plan: &RunPlan, dim: usize) -> MemoryEstimate {
    MemoryEstimate {
        dim,
        needed: density_workspace_bytes(dim) + series_bytes(plan),
        physical: physical_memory(),
        share: plan.solver.memory_share,
    }
}

/// Worker threads a run will use (`threads = 0` means one per core).
pub fn resolved_threads(plan: &RunPlan) -> usize {
    if plan.solver.threads > 0 {
        plan.solver.threads
    } else {
        std::thread::available_parallelism().map_or(1, |n| n.get())
    }
}

/// Upper bound of the total jump rate of the model (per time unit): every channel at its largest
/// possible rate ‖L ψ‖² over the truncated space.
pub fn max_jump_rate(plan: &RunPlan) -> f64 {
    let mut r = 0.0;
    for s in &plan.network.sites {
        r += s.decay + s.dephasing / 2.0 + s.pump;
    }
    // local-field relaxation: ‖L↑ψ‖² + ‖L↓ψ‖² ≤ γ_G per site (w↑ + w↓ = 1)
    if let Some(fr) = &plan.network.field_relaxation {
        r += fr.rate * plan.network.sites.len() as f64;
    }
    for m in &plan.network.modes {
        r += m.loss * (1.0 + 2.0 * m.thermal) * (m.levels - 1) as f64;
    }
    // eliminated memory modes: ‖Σᵢ wᵢσᶻᵢ ψ‖² ≤ (Σᵢ|wᵢ|)²
    for j in plan.memory.iter().flat_map(|m| &m.mediated_jumps) {
        r += j.weights.iter().map(|w| w.abs()).sum::<f64>().powi(2);
    }
    r
}

/// Estimate the memory of a trajectory run: per worker thread the integrator's vectors and a copy
/// of H_eff; shared the sparse operators, the per-block sums of the statistics, the kept traces
/// and the jump records (bounded with [`max_jump_rate`], so usually far fewer).
pub fn trajectory_memory(plan: &RunPlan, tp: &TrajectoryPlan, dim: usize) -> MemoryEstimate {
    let d = dim as u128;
    let n = plan.network.sites.len() as u128;
    let m = plan.network.modes.len() as u128;
    // bytes of a complex number
    let c = 16u128;
    // non-zeros per row of H (diagonal, Rabi flips, mode drives, site–mode and site–site terms)
    let row_nnz = 1 + n + 2 * m + 2 * n * m + n * n.saturating_sub(1);
    let groups = 6 + m; // static part and envelope-scaled terms
    let op_bytes = d * row_nnz * (c + 8) + groups * (d + 1) * 8;
    let jumps_ops = plan.network.channels().len() as u128 * d * (c + 16);
    let per_worker = 14 * d * c + op_bytes;
    let threads = resolved_threads(plan) as u128;
    let n_t = plan.times.len() as u128;
    let n_traj = tp.trajectories as u128;
    // one f64 sum and sum of squares per observable and time, per block of 16 trajectories
    let n_obs = (plan.network.sites.len() * 3
        + plan.network.modes.len() * 5
        + plan.observe.patterns.len()) as u128;
    let sums = n_traj.div_ceil(16).max(1) * 2 * n_obs * n_t * 8;
    let kept = tp.keep as u128 * n_obs * n_t * 8;
    let t_end = plan.times.last().copied().unwrap_or(0.0);
    let max_jumps = (tp.trajectories as f64 * t_end * max_jump_rate(plan)).min(1e30) as u128;
    let jumps = max_jumps * 48; // records in memory and as output columns
    MemoryEstimate {
        dim,
        needed: threads * per_worker
            + 3 * op_bytes
            + jumps_ops
            + sums
            + kept
            + jumps
            + 2 * series_bytes(plan),
        physical: physical_memory(),
        share: plan.solver.memory_share,
    }
}

/// Which solver a run uses, and why.
#[derive(Clone, Debug, PartialEq)]
pub struct SolverChoice {
    /// What the config asked for.
    pub requested: MethodRequest,
    /// What runs.
    pub method: Method,
    /// The density-matrix estimate.
    pub density: MemoryEstimate,
    /// The trajectory estimate (when the config has trajectory settings).
    pub trajectories: Option<MemoryEstimate>,
    /// One sentence: why this method.
    pub reason: String,
}

impl SolverChoice {
    /// The estimate of the method that runs.
    pub fn estimate(&self) -> &MemoryEstimate {
        match (self.method, &self.trajectories) {
            (Method::Trajectories, Some(t)) => t,
            _ => &self.density,
        }
    }
}

/// Choose the solver for `plan` with Hilbert-space dimension `dim` (nothing is allocated).
pub fn choose(plan: &RunPlan, dim: usize) -> SolverChoice {
    let density = density_memory(plan, dim);
    let trajectories = plan
        .solver
        .trajectories
        .as_ref()
        .map(|tp| trajectory_memory(plan, tp, dim));
    let requested = plan.solver.method;
    let (method, reason) = match requested {
        MethodRequest::DensityMatrix => (Method::DensityMatrix, "requested in the config".into()),
        MethodRequest::Trajectories => (Method::Trajectories, "requested in the config".into()),
        MethodRequest::Auto => {
            if density.fits() {
                (
                    Method::DensityMatrix,
                    format!(
                        "auto: the density matrix fits in memory (needs ≈ {} of the allowed {})",
                        bytes_label(density.needed),
                        density.allowed_label()
                    ),
                )
            } else {
                (
                    Method::Trajectories,
                    format!(
                        "auto: the density matrix would need ≈ {}, more than the allowed {}; trajectories need ≈ {}",
                        bytes_label(density.needed),
                        density.allowed_label(),
                        trajectories.map_or("?".into(), |t| bytes_label(t.needed))
                    ),
                )
            }
        }
    };
    SolverChoice {
        requested,
        method,
        density,
        trajectories,
        reason,
    }
}

/// Check the memory guard of the chosen solver, and that trajectories start from a pure state.
///
/// # Errors
/// [`AppError::Input`] (exit 2) naming the estimate and what to change.
pub fn memory_guard(plan: &RunPlan, choice: &SolverChoice) -> Result<(), AppError> {
    let file = plan.path.display();
    if choice.method == Method::Trajectories {
        if let Some(m) = plan
            .initial
            .modes
            .iter()
            .position(|s| matches!(s, ModeInit::Thermal(_)))
        {
            return Err(AppError::Input(format!(
                "{file}: {}; the trajectory solver evolves pure states (state vectors), but the initial state of mode `{}` is thermal, i.e. mixed. \
                 Use a pure initial state (\"vacuum\", {{ fock = n }}, {{ coherent = α }}), or reduce the model so that the density matrix fits",
                choice.reason, plan.mode_names[m]
            )));
        }
    }
    steady_memory_guard(plan, choice.density.dim)?;
    let est = choice.estimate();
    if est.fits() {
        return Ok(());
    }
    let levels: Vec<usize> = plan.network.modes.iter().map(|m| m.levels).collect();
    let raise = if est.physical.is_some_and(|p| est.needed < p) {
        ", or raise `memory_share` if the machine is otherwise idle"
    } else {
        " (more than this machine's whole memory, so raising `memory_share` cannot help)"
    };
    let allowed = format!(
        "[solver] memory_share = {} of this machine's {} of memory",
        est.share,
        est.physical
            .map(bytes_label)
            .unwrap_or_else(|| "unknown".into())
    );
    let shape = format!(
        "Hilbert-space dimension d = {} ({} sites, mode levels {:?})",
        est.dim,
        plan.network.sites.len(),
        levels
    );
    Err(AppError::Input(match (choice.method, choice.requested) {
        (Method::DensityMatrix, _) => format!(
            "{file}: the density-matrix solver needs about {} for {shape}, more than {allowed}. Reduce the Fock truncation (`levels`) \
             or the number of sites{raise}; or use [solver] method = \"trajectories\" (or \"auto\"), which stores state vectors only.",
            bytes_label(est.needed)
        ),
        (Method::Trajectories, req) => format!(
            "{file}: {}the trajectory solver needs about {} for {shape} ({} trajectories on {} thread(s), including up to {} for jump records), more than {allowed}. \
             Reduce the Fock truncation (`levels`), the number of sites, the trajectories, `keep` or the number of samples{raise}.",
            if req == MethodRequest::Auto {
                format!("neither solver fits: the density matrix would need about {}, and ", bytes_label(choice.density.needed))
            } else {
                String::new()
            },
            bytes_label(est.needed),
            plan.solver.trajectories.as_ref().map_or(0, |t| t.trajectories),
            resolved_threads(plan),
            bytes_label(
                (plan.solver.trajectories.as_ref().map_or(0, |t| t.trajectories) as f64
                    * plan.times.last().copied().unwrap_or(0.0)
                    * max_jump_rate(plan)) as u128
                    * 48
            )
        ),
    }))
}

/// Bytes of the iterative (GMRES, with the configured preconditioner) and the time-evolution
/// steady-state solves for dimension `d`.
pub fn steady_workspaces(sp: &crate::config::SteadyPlan, d: usize) -> (u128, u128) {
    use cavern_evolve::steady::{evolution_workspace_bytes, gmres_workspace_bytes, GmresOptions};
    let gmres = GmresOptions {
        preconditioner: sp.preconditioner,
        ..Default::default()
    };
    (
        gmres_workspace_bytes(d, &gmres),
        evolution_workspace_bytes(d),
    )
}

/// Up-front memory check of `[steady_state]` (before anything runs): GMRES (`"iterative"`) and
/// time evolution (`"evolve"`) have known workspaces; `"auto"` needs one of them to fit (the
/// sparse LU, tried first, is checked after its symbolic analysis). `"direct"` is checked there.
fn steady_memory_guard(plan: &RunPlan, d: usize) -> Result<(), AppError> {
    let Some(sp) = &plan.steady else {
        return Ok(());
    };
    let Some(physical) = physical_memory() else {
        return Ok(());
    };
    let allowed = (physical as f64 * plan.solver.memory_share) as u128;
    let (gmres, evolution) = steady_workspaces(sp, d);
    let too_large = match sp.method {
        SteadyRequest::Iterative => gmres > allowed,
        SteadyRequest::Evolve => evolution > allowed,
        SteadyRequest::Auto => gmres.min(evolution) > allowed,
        SteadyRequest::Direct => false,
    };
    if !too_large {
        return Ok(());
    }
    Err(AppError::Input(format!(
        "{}: [steady_state] method = \"{}\" does not fit: for d = {d} GMRES needs about {} and the \
         time-evolution solve about {}, more than [solver] memory_share = {} of this machine's {} \
         of memory. Reduce the model (Fock truncation `levels`, sites), or raise `memory_share` \
         if the machine is otherwise idle",
        plan.path.display(),
        sp.method.name(),
        bytes_label(gmres),
        bytes_label(evolution),
        plan.solver.memory_share,
        bytes_label(physical)
    )))
}

/// What a trajectory run produced besides the averaged series.
#[derive(Clone, Debug)]
pub struct TrajectoryOutput {
    /// Number of trajectories.
    pub trajectories: usize,
    /// Run seed.
    pub seed: u64,
    /// Every jump, ordered by trajectory then time.
    pub jumps: Vec<JumpRecord>,
    /// Jump channels (index = `JumpRecord::channel`).
    pub channels: Vec<Channel>,
    /// Traces of the first `keep` trajectories: per series, `[trajectory][row][time]` row-major.
    pub kept: Vec<(String, Vec<f64>)>,
    /// Number of kept trajectories.
    pub keep: usize,
    /// Counts, rates, waiting times and g².
    pub clicks: ClickAnalysis,
}

/// Everything a finished run produced.
#[derive(Clone, Debug)]
pub struct RunResult {
    /// Sample times (time unit).
    pub times: Vec<f64>,
    /// Recorded observables, in output order.
    pub series: Vec<Series>,
    /// Integrator counters.
    pub stats: Stats,
    /// Wall-clock seconds of the evolution.
    pub wall_seconds: f64,
    /// Threads used.
    pub threads: usize,
    /// Hilbert-space dimension.
    pub dim: usize,
    /// Warnings to show the user (also written to the output).
    pub warnings: Vec<String>,
    /// The solver used, the one requested, and why.
    pub choice: SolverChoice,
    /// Jumps, clicks and kept traces of a trajectory run.
    pub trajectory: Option<TrajectoryOutput>,
    /// Steady state and relaxation rates, when the config asks for them.
    pub steady: Option<SteadyOutput>,
    /// The probes of `[probes]`: recall curve and per-probe metrics.
    pub recall: Option<crate::recall::RecallResult>,
}

/// What the steady-state computation produced.
#[derive(Clone, Debug)]
pub struct SteadyOutput {
    /// Observables of ρₛₛ (one sample each), when a unique steady state was found.
    pub series: Vec<Series>,
    /// How ρₛₛ was obtained (its `rho` is emptied to save memory), or `None` when the steady state
    /// is not unique.
    pub state: Option<cavern_evolve::steady::SteadySolution>,
    /// Eigenvalues near zero, gap and degeneracy, when requested and computed.
    pub relaxation: Option<cavern_evolve::steady::Relaxation>,
    /// Why the relaxation rates are missing, if they were requested but failed.
    pub relaxation_error: Option<String>,
    /// True when the steady state is not unique (zero eigenspace of dimension ≥ 2, or a singular
    /// direct solve): then the time evolution from the given initial state decides the outcome.
    pub not_unique: bool,
    /// Wall-clock seconds of the steady-state and relaxation computations.
    pub wall_seconds: f64,
}

impl RunResult {
    /// The series named `name`.
    pub fn get(&self, name: &str) -> Option<&Series> {
        self.series.iter().find(|s| s.name == name)
    }
}

/// Build the observable table for `plan` solved by `method` (trajectories have no purity and no
/// trace error: every trajectory is a normalised pure state).
pub fn make_series(plan: &RunPlan, n_t: usize, method: Method) -> Vec<Series> {
    let n = plan.network.sites.len();
    let sites: Vec<String> = (0..n).map(|i| format!("site{i}")).collect();
    let modes = plan.mode_names.clone();
    let flux_units = plan.units.flux_label();
    let mut v = Vec::new();
    let axes = plan.observe.spin_axes;
    if n > 0 {
        for (on, name, desc) in [
            (
                axes.z,
                "spin_z",
                "<sigma_z> per site; +1 excited |e>, -1 ground |g>",
            ),
            (axes.x, "spin_x", "<sigma_x> per site"),
            (
                axes.y,
                "spin_y",
                "<sigma_y> per site; sigma_y = i(sigma_minus - sigma_plus)",
            ),
        ] {
            if on {
                v.push(Series::new(name, "1", desc, sites.clone(), n_t));
            }
        }
    }
    if !modes.is_empty() {
        v.push(Series::new(
            "photon_number",
            "photons",
            "<a^dagger a> per mode",
            modes.clone(),
            n_t,
        ));
        v.push(Series::new(
            "output_flux",
            flux_units,
            "photon flux leaving each mode through its loss port: kappa <a^dagger a> (kappa angular energy decay rate)",
            modes.clone(),
            n_t,
        ));
        v.push(Series::new(
            "field_re",
            "sqrt(photons)",
            "Re <a> per mode (frame rotating with the drive)",
            modes.clone(),
            n_t,
        ));
        v.push(Series::new(
            "field_im",
            "sqrt(photons)",
            "Im <a> per mode (frame rotating with the drive)",
            modes.clone(),
            n_t,
        ));
        v.push(Series::new(
            "top_level_population",
            "1",
            "population of each mode's highest kept Fock level; large values mean the truncation is too small",
            modes,
            n_t,
        ));
    }
    if !plan.observe.patterns.is_empty() {
        let rows = (0..plan.observe.patterns.len())
            .map(|p| format!("pattern{p}"))
            .collect();
        v.push(Series::new(
            "pattern_overlap",
            "1",
            "m = (1/N) sum_i xi_i <sigma_z_i> for each configured pattern",
            rows,
            n_t,
        ));
    }
    if method == Method::DensityMatrix {
        v.push(Series::new("purity", "1", "Tr rho^2", Vec::new(), n_t));
        v.push(Series::new(
            "trace_error",
            "1",
            "|Tr rho - 1| (integration error)",
            Vec::new(),
            n_t,
        ));
    }
    v
}

/// The state a sample is taken from: a density matrix or a normalised trajectory state vector.
#[derive(Clone, Copy)]
enum StateRef<'a> {
    Rho(&'a [C64]),
    Psi(&'a [C64]),
}

impl StateRef<'_> {
    fn spin_z(self, space: &cavern_model::Space, i: usize) -> f64 {
        match self {
            StateRef::Rho(x) => obs::spin_z(space, x, i),
            StateRef::Psi(x) => obs::state::spin_z(space, x, i),
        }
    }
}

/// Value of row `r` of the observable `name` (one of the names of [`make_series`]); `sz` holds
/// ⟨σᶻ⟩ of every site for the pattern overlaps.
fn observable(
    plan: &RunPlan,
    space: &cavern_model::Space,
    st: StateRef,
    sz: &[f64],
    name: &str,
    r: usize,
) -> f64 {
    use StateRef::{Psi, Rho};
    let photons = |m| match st {
        Rho(x) => obs::photon_number(space, x, m),
        Psi(x) => obs::state::photon_number(space, x, m),
    };
    let field = |m| match st {
        Rho(x) => obs::field(space, x, m),
        Psi(x) => obs::state::field(space, x, m),
    };
    match (name, st) {
        ("spin_z", _) => sz[r],
        ("spin_x", Rho(x)) => obs::spin_x(space, x, r),
        ("spin_x", Psi(x)) => obs::state::spin_x(space, x, r),
        ("spin_y", Rho(x)) => obs::spin_y(space, x, r),
        ("spin_y", Psi(x)) => obs::state::spin_y(space, x, r),
        ("photon_number", _) => photons(r),
        ("output_flux", _) => plan.units.flux(plan.network.modes[r].loss * photons(r)),
        ("field_re", _) => field(r).re,
        ("field_im", _) => field(r).im,
        ("top_level_population", Rho(x)) => obs::top_level_population(space, x, r),
        ("top_level_population", Psi(x)) => obs::state::top_level_population(space, x, r),
        ("pattern_overlap", _) => obs::pattern_overlap(sz, &plan.observe.patterns[r]),
        ("purity", Rho(x)) => obs::purity(x),
        ("trace_error", Rho(x)) => obs::trace_error(space, x),
        (other, _) => unreachable!("series {other} has no recorder for this kind of state"),
    }
}

/// Observables of a normalised state vector, concatenated over `series` (rows in order).
fn record_state(
    plan: &RunPlan,
    me: &MasterEquation,
    series: &[Series],
    psi: &[C64],
    out: &mut [f64],
) {
    let st = StateRef::Psi(psi);
    let sz: Vec<f64> = (0..me.space.n_sites())
        .map(|i| st.spin_z(&me.space, i))
        .collect();
    let mut k = 0;
    for s in series {
        for r in 0..s.n_rows() {
            out[k] = observable(plan, &me.space, st, &sz, &s.name, r);
            k += 1;
        }
    }
}

/// Record all observables of ρ at sample `k`.
fn record(
    plan: &RunPlan,
    me: &MasterEquation,
    series: &mut [Series],
    k: usize,
    n_t: usize,
    rho: &[C64],
) {
    let st = StateRef::Rho(rho);
    let sz: Vec<f64> = (0..me.space.n_sites())
        .map(|i| st.spin_z(&me.space, i))
        .collect();
    for s in series.iter_mut() {
        for r in 0..s.n_rows() {
            s.data[r * n_t + k] = observable(plan, &me.space, st, &sz, &s.name, r);
        }
    }
}

/// Warnings for initial mode states that lose more than the warning threshold to truncation.
pub fn initial_truncation_warnings(plan: &RunPlan) -> Vec<String> {
    let mut w = Vec::new();
    for (m, st) in plan.initial.modes.iter().enumerate() {
        let Some(md) = plan.network.modes.get(m) else {
            continue;
        };
        let lost = st.truncated_weight(md.levels);
        if lost > plan.observe.truncation_warning {
            w.push(format!(
                "mode `{}`: the initial state {st:?} has weight {lost:.3e} beyond the {} kept Fock levels; \
                 it was truncated and renormalised, raise `levels`",
                plan.mode_names[m], md.levels
            ));
        }
    }
    w
}

/// Units of progress of a run: samples (density matrix) or trajectories of the main evolution,
/// plus one per probe.
pub fn progress_total(plan: &RunPlan, method: Method) -> usize {
    let main = match (method, &plan.solver.trajectories) {
        (Method::Trajectories, Some(tp)) => tp.trajectories,
        _ => plan.times.len(),
    };
    main + plan
        .memory
        .as_ref()
        .and_then(|m| m.probes.as_ref())
        .map_or(0, |p| p.probes.len())
}

/// Run `plan`. `progress(done, total)` is called after every sample (density matrix) or every
/// finished trajectory (trajectories), then after every probe, possibly from worker threads
/// (`total` = [`progress_total`]).
///
/// # Errors
/// [`AppError::Input`] for a model the config layer let through but the solver refuses or the
/// memory guard; [`AppError::Runtime`] for NaN/Inf or step-size underflow (naming the time).
pub fn run(
    plan: &RunPlan,
    progress: &(dyn Fn(usize, usize) + Sync),
) -> Result<RunResult, AppError> {
    let space = plan
        .network
        .space()
        .map_err(|e| AppError::Input(format!("{}: {e}", plan.path.display())))?;
    let choice = choose(plan, space.dim());
    memory_guard(plan, &choice)?;
    let me = crate::recall::master_equation(plan)
        .map_err(|e| AppError::Input(format!("{}: {e}", plan.path.display())))?;
    let dim = me.space.dim();
    let n_t = plan.times.len();
    let mut series = make_series(plan, n_t, choice.method);
    let opts = DopriOptions {
        rtol: plan.solver.rtol,
        atol: plan.solver.atol,
        h_max: plan.solver.max_step,
        par: Par::Rayon,
        ..Default::default()
    };
    let pool = rayon::ThreadPoolBuilder::new()
        .num_threads(plan.solver.threads)
        .build()
        .map_err(|e| AppError::Runtime(format!("cannot start worker threads: {e}")))?;
    let threads = pool.current_num_threads();
    let failed = |e: cavern_evolve::EvolveError| {
        AppError::Runtime(format!(
            "{}: the time evolution failed: {e}",
            plan.path.display()
        ))
    };
    let start = Instant::now();
    let (stats, trajectory) = match choice.method {
        Method::DensityMatrix => {
            let rho0 = plan.initial.density(&me.space).map_err(|e| {
                AppError::Input(format!("{}: initial state: {e}", plan.path.display()))
            })?;
            let stats = pool
                .install(|| {
                    evolve_density(&me, &rho0, &plan.times, opts, |k, _t, rho, _st| {
                        record(plan, &me, &mut series, k, n_t, rho);
                        progress(k + 1, n_t);
                    })
                })
                .map_err(failed)?;
            (stats, None)
        }
        Method::Trajectories => {
            let tp = plan
                .solver
                .trajectories
                .as_ref()
                .expect("the config layer resolves trajectory settings for this method");
            let psi0 = plan.initial.vector(&me.space).map_err(|e| {
                AppError::Input(format!("{}: initial state: {e}", plan.path.display()))
            })?;
            let n_obs: usize = series.iter().map(Series::n_rows).sum();
            let topts = TrajectoryOptions {
                dopri: opts,
                trajectories: tp.trajectories,
                seed: tp.seed,
                keep: tp.keep,
            };
            let done = AtomicUsize::new(0);
            let total = tp.trajectories;
            let layout = series.clone();
            let res = pool
                .install(|| {
                    run_trajectories(
                        &me,
                        &psi0,
                        &plan.times,
                        &topts,
                        n_obs,
                        |psi, out| record_state(plan, &me, &layout, psi, out),
                        &|k| progress(done.fetch_add(k, Ordering::Relaxed) + k, total),
                    )
                })
                .map_err(failed)?;
            // split the [observable][time] statistics into the series
            let mut off = 0;
            let mut kept = Vec::new();
            for s in series.iter_mut() {
                let len = s.n_rows() * n_t;
                s.data = res.mean[off..off + len].to_vec();
                s.stderr = res.stderr[off..off + len].to_vec();
                if !res.kept.is_empty() {
                    let mut k = Vec::with_capacity(res.kept.len() * len);
                    for trace in &res.kept {
                        k.extend_from_slice(&trace[off..off + len]);
                    }
                    kept.push((s.name.clone(), k));
                }
                off += len;
            }
            let channel_index = |c: Channel| res.channels.iter().position(|x| *x == c);
            let clicks = clicks::analyse(
                &res.jumps,
                &ClickSettings {
                    trajectories: tp.trajectories,
                    channels: res.channels.len(),
                    t_end: plan.times.last().copied().unwrap_or(0.0),
                    bin_width: tp.bin_width,
                    correlate: tp.correlate.and_then(channel_index),
                    correlate_after: tp.correlate_after,
                    max_delay: tp.max_delay,
                },
            );
            let out = TrajectoryOutput {
                trajectories: tp.trajectories,
                seed: tp.seed,
                keep: res.kept.len(),
                jumps: res.jumps,
                channels: res.channels,
                kept,
                clicks,
            };
            (res.stats, Some(out))
        }
    };
    let wall_seconds = start.elapsed().as_secs_f64();
    let mut warnings = plan.warnings.clone();
    warnings.extend(initial_truncation_warnings(plan));
    if let Some(top) = series.iter().find(|s| s.name == "top_level_population") {
        for (m, name) in plan.mode_names.iter().enumerate() {
            let max = top.row(m).iter().copied().fold(0.0, f64::max);
            if max > plan.observe.truncation_warning {
                warnings.push(format!(
                    "mode `{name}`: its highest kept Fock level (n = {}) reaches population {max:.3e} > {:.1e}; \
                     the truncation is too small, raise `levels`",
                    plan.network.modes[m].levels - 1,
                    plan.observe.truncation_warning
                ));
            }
        }
    }
    let steady = match &plan.steady {
        Some(sp) => Some(pool.install(|| solve_steady(plan, &me, sp, &mut warnings))?),
        None => None,
    };
    let recall = match &plan.memory {
        Some(mem) => {
            let total = progress_total(plan, choice.method);
            let main = total - mem.probes.as_ref().map_or(0, |p| p.probes.len());
            let done = AtomicUsize::new(main);
            pool.install(|| {
                crate::recall::run_probes(plan, &me, mem, choice.method, opts, &|k| {
                    progress(done.fetch_add(k, Ordering::Relaxed) + k, total)
                })
            })?
        }
        None => None,
    };
    Ok(RunResult {
        times: plan.times.clone(),
        series,
        stats,
        wall_seconds,
        threads,
        dim,
        warnings,
        choice,
        trajectory,
        steady,
        recall,
    })
}

/// Solve for the steady state and the relaxation rates of `me` as `sp` asks.
///
/// # Errors
/// [`AppError::Runtime`] when no solver reaches a steady state (with the residual reached); a
/// non-unique steady state is not an error but reported in the output.
fn solve_steady(
    plan: &RunPlan,
    me: &cavern_model::MasterEquation,
    sp: &crate::config::SteadyPlan,
    warnings: &mut Vec<String>,
) -> Result<SteadyOutput, AppError> {
    use cavern_evolve::steady::{self, SteadyError, SteadyOptions};
    let start = Instant::now();
    let mut opts = SteadyOptions::default();
    opts.gmres.max_iterations = sp.max_iterations;
    opts.gmres.preconditioner = sp.preconditioner;
    if let Some(t) = sp.tolerance {
        opts.gmres.tol = t;
        opts.evolution.tol = t;
    }
    opts.evolution.max_time = sp.max_time;
    opts.evolution.dopri.rtol = plan.solver.rtol.min(opts.evolution.dopri.rtol);
    opts.evolution.dopri.atol = plan.solver.atol.min(opts.evolution.dopri.atol);
    // memory guard of the sparse LU: its predicted size against the allowed share of memory
    let allowed = physical_memory().map(|p| (p as f64 * plan.solver.memory_share) as u128);
    opts.direct.max_factor_bytes = allowed;
    // memory_guard has already refused the explicit methods that cannot fit (exit 2); these
    // limits make `auto` skip a solver that does not fit instead of allocating it
    opts.gmres.max_workspace_bytes = allowed;
    opts.evolution.max_workspace_bytes = allowed;
    let t = sp.at_time;
    let solved = match sp.method {
        SteadyRequest::Auto => steady::steady_state(me, t, &opts),
        SteadyRequest::Direct => steady::steady_state_direct(me, t, &opts.direct),
        SteadyRequest::Iterative => steady::steady_state_gmres(me, t, &opts.gmres, None),
        SteadyRequest::Evolve => steady::steady_state_evolve(me, t, &opts.evolution, None),
    };
    let mut relaxation = None;
    let mut relaxation_error = None;
    if sp.relaxation_rates > 0 {
        let ropts = steady::RelaxationOptions {
            count: sp.relaxation_rates,
            max_factor_bytes: allowed,
            ..Default::default()
        };
        match steady::relaxation(me, t, &ropts) {
            Ok(r) => relaxation = Some(r),
            Err(e) => relaxation_error = Some(e.to_string()),
        }
    }
    let degenerate = relaxation.as_ref().and_then(|r| r.degenerate);
    let (state, not_unique) = match solved {
        Ok(st) if degenerate.is_none() => (Some(st), false),
        Ok(_) => (None, true),
        Err(SteadyError::Singular { .. }) => (None, true),
        Err(e @ SteadyError::TooLarge { .. }) => {
            return Err(AppError::Input(format!(
                "{}: [steady_state] method = \"direct\": {e} ([solver] memory_share = {} of this \
                 machine's memory); use method = \"iterative\" (GMRES, matrix-free) or \"auto\", \
                 which falls back to it, or reduce the model",
                plan.path.display(),
                plan.solver.memory_share
            )))
        }
        Err(e) => {
            return Err(AppError::Runtime(format!(
                "{}: the steady state could not be computed: {e}",
                plan.path.display()
            )))
        }
    };
    // GMRES and time evolution return one steady state even when several exist; only the direct
    // LU (singular bordered matrix) and the relaxation spectrum (several zero eigenvalues) see it
    if let Some(st) = &state {
        if st.method != steady::SteadyMethod::Direct && relaxation.is_none() {
            warnings.push(format!(
                "the uniqueness of the steady state was not checked: {} finds one steady state even \
                 when several exist; set [steady_state] relaxation_rates > 0 or method = \"direct\" \
                 to check it",
                st.method
            ));
        }
    }
    if not_unique {
        let dim = degenerate
            .map(|k| format!(" (zero eigenspace of dimension {k})"))
            .unwrap_or_default();
        warnings.push(format!(
            "the steady state is not unique{dim}: several attractors (e.g. several stored memories) \
             coexist, so the time evolution from the given initial state, not the steady-state solver, \
             decides the outcome"
        ));
    }
    if let Some(e) = &relaxation_error {
        warnings.push(format!("relaxation rates could not be computed: {e}"));
    }
    let mut series = make_series(plan, 1, Method::DensityMatrix);
    let state = state.map(|mut st| {
        record(plan, me, &mut series, 0, 1, &st.rho);
        st.rho = Vec::new();
        st
    });
    Ok(SteadyOutput {
        series: if state.is_some() { series } else { Vec::new() },
        state,
        relaxation,
        relaxation_error,
        not_unique,
        wall_seconds: start.elapsed().as_secs_f64(),
    })
}
