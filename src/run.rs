//! Running a resolved plan: memory guard, time evolution, observables at the sample times.

use crate::config::{Method, RunPlan};
use crate::AppError;
use cavern_evolve::{density_workspace_bytes, evolve_density, DopriOptions, Par, Stats};
use cavern_model::MasterEquation;
use cavern_observe as obs;
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
    /// Values, `rows.len().max(1)` × number of times, row-major.
    pub data: Vec<f64>,
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
}

/// The memory the density-matrix solver needs, against what the run may use.
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

/// Estimate the workspace of `plan` (solver vectors plus recorded series).
pub fn memory_estimate(plan: &RunPlan, dim: usize) -> MemoryEstimate {
    let series = (plan.network.sites.len() * 3
        + plan.network.modes.len() * 6
        + plan.observe.patterns.len()
        + 2) as u128
        * plan.times.len() as u128
        * 8;
    let needed = match plan.solver.method {
        Method::DensityMatrix => density_workspace_bytes(dim) + series,
    };
    MemoryEstimate {
        dim,
        needed,
        physical: physical_memory(),
        share: plan.solver.memory_share,
    }
}

/// Check the memory guard.
///
/// # Errors
/// [`AppError::Input`] (exit 2) naming the estimate and what to change.
pub fn memory_guard(plan: &RunPlan, est: &MemoryEstimate) -> Result<(), AppError> {
    if est.fits() {
        return Ok(());
    }
    let levels: Vec<usize> = plan.network.modes.iter().map(|m| m.levels).collect();
    let raise = if est.physical.is_some_and(|p| est.needed < p) {
        ", or raise `memory_share` if the machine is otherwise idle"
    } else {
        " (more than this machine's whole memory, so raising `memory_share` cannot help)"
    };
    Err(AppError::Input(format!(
        "{}: the density-matrix solver needs about {} for Hilbert-space dimension d = {} ({} sites, mode levels {:?}), \
         more than [solver] memory_share = {} of this machine's {} of memory. Reduce the Fock truncation (`levels`) \
         or the number of sites{raise}; networks this large are meant for the quantum-trajectory solver (planned).",
        plan.path.display(),
        bytes_label(est.needed),
        est.dim,
        plan.network.sites.len(),
        levels,
        est.share,
        est.physical.map(bytes_label).unwrap_or_else(|| "unknown".into())
    )))
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
}

impl RunResult {
    /// The series named `name`.
    pub fn get(&self, name: &str) -> Option<&Series> {
        self.series.iter().find(|s| s.name == name)
    }
}

/// Build the observable table for `plan`.
fn make_series(plan: &RunPlan, n_t: usize) -> Vec<Series> {
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
    v.push(Series::new("purity", "1", "Tr rho^2", Vec::new(), n_t));
    v.push(Series::new(
        "trace_error",
        "1",
        "|Tr rho - 1| (integration error)",
        Vec::new(),
        n_t,
    ));
    v
}

/// Record all observables of ρ at sample `k`.
fn record(
    plan: &RunPlan,
    me: &MasterEquation,
    series: &mut [Series],
    k: usize,
    n_t: usize,
    rho: &[cavern_model::C64],
) {
    let space = &me.space;
    let n = space.n_sites();
    let sz: Vec<f64> = (0..n).map(|i| obs::spin_z(space, rho, i)).collect();
    for s in series.iter_mut() {
        let rows = s.n_rows();
        for r in 0..rows {
            let x = match s.name.as_str() {
                "spin_z" => sz[r],
                "spin_x" => obs::spin_x(space, rho, r),
                "spin_y" => obs::spin_y(space, rho, r),
                "photon_number" => obs::photon_number(space, rho, r),
                "output_flux" => plan
                    .units
                    .flux(plan.network.modes[r].loss * obs::photon_number(space, rho, r)),
                "field_re" => obs::field(space, rho, r).re,
                "field_im" => obs::field(space, rho, r).im,
                "top_level_population" => obs::top_level_population(space, rho, r),
                "pattern_overlap" => obs::pattern_overlap(&sz, &plan.observe.patterns[r]),
                "purity" => obs::purity(rho),
                "trace_error" => obs::trace_error(space, rho),
                other => unreachable!("series {other} has no recorder"),
            };
            s.data[r * n_t + k] = x;
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

/// Run `plan`. `progress(done, total)` is called after every sample.
///
/// # Errors
/// [`AppError::Input`] for a model the config layer let through but the solver refuses or the
/// memory guard; [`AppError::Runtime`] for NaN/Inf or step-size underflow (naming the time).
pub fn run(
    plan: &RunPlan,
    mut progress: impl FnMut(usize, usize) + Send,
) -> Result<RunResult, AppError> {
    let space = plan
        .network
        .space()
        .map_err(|e| AppError::Input(format!("{}: {e}", plan.path.display())))?;
    let est = memory_estimate(plan, space.dim());
    memory_guard(plan, &est)?;
    let me = plan
        .network
        .build()
        .map_err(|e| AppError::Input(format!("{}: {e}", plan.path.display())))?;
    let dim = me.space.dim();
    let rho0 = plan
        .initial
        .density(&me.space)
        .map_err(|e| AppError::Input(format!("{}: initial state: {e}", plan.path.display())))?;
    let n_t = plan.times.len();
    let mut series = make_series(plan, n_t);
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
    let start = Instant::now();
    let stats = pool
        .install(|| {
            evolve_density(&me, &rho0, &plan.times, opts, |k, _t, rho, _st| {
                record(plan, &me, &mut series, k, n_t, rho);
                progress(k + 1, n_t);
            })
        })
        .map_err(|e| {
            AppError::Runtime(format!(
                "{}: the time evolution failed: {e}",
                plan.path.display()
            ))
        })?;
    let wall_seconds = start.elapsed().as_secs_f64();
    let mut warnings = initial_truncation_warnings(plan);
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
    Ok(RunResult {
        times: plan.times.clone(),
        series,
        stats,
        wall_seconds,
        threads,
        dim,
        warnings,
    })
}
