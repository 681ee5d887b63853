//! The HDF5 result file of a time-evolution run.
//!
//! Layout (all our own names):
//! - root attributes: `tool`, `version`, `config_sha256`, `units_system`, `frequency_unit`,
//!   `time_unit`, `units_convention`, `title` (if given), `n_warnings` and `warnings` (one string per warning, when any).
//! - `/time` — sample times, attribute `units`.
//! - `/observables/<name>` — `[rows, time]` (or `[time]` for single-row quantities) with
//!   attributes `units`, `description` and `rows` (row labels).
//! - `/model` — attributes: `dimension`, `n_sites`, `n_modes`, `mode_levels`, `mode_names`.
//! - `/solver` — attributes: `method`, `rtol`, `atol`, `max_step`, `steps`, `rejected_steps`,
//!   `rhs_evaluations`, `wall_seconds`, `threads`.
//! - `/input/config_toml` — the config text exactly as read.

use crate::config::RunPlan;
use crate::h5out::{write_atomic, Data, Group};
use crate::run::RunResult;
use crate::AppError;
use sha2::{Digest, Sha256};
use std::path::Path;

/// Hex SHA-256 of the config text.
pub fn config_hash(text: &str) -> String {
    let digest = Sha256::digest(text.as_bytes());
    digest.iter().map(|b| format!("{b:02x}")).collect()
}

/// Build the file tree of a run.
pub fn tree(plan: &RunPlan, res: &RunResult) -> Group {
    let mut root = Group::new();
    root.attr("tool", "cavern")
        .attr("version", env!("CARGO_PKG_VERSION"))
        .attr("config_sha256", config_hash(&plan.source))
        .attr("config_path", plan.path.display().to_string())
        .attr(
            "units_system",
            if plan.units.seconds_per_time_unit().is_some() {
                "physical"
            } else {
                "dimensionless"
            },
        )
        .attr("frequency_unit", plan.units.frequency_label())
        .attr("time_unit", plan.units.time_label())
        .attr("units_convention", plan.units.convention())
        .attr("n_warnings", res.warnings.len() as i64);
    if !res.warnings.is_empty() {
        root.attr("warnings", res.warnings.clone());
    }
    if let Some(t) = &plan.title {
        root.attr("title", t.as_str());
    }
    let n_t = res.times.len();
    root.dataset("time", &[n_t], Data::F64(res.times.clone()))
        .attr("units", plan.units.time_label())
        .attr("description", "sample times");
    let obs = root.group("observables");
    for s in &res.series {
        let shape: Vec<usize> = if s.rows.is_empty() {
            vec![n_t]
        } else {
            vec![s.rows.len(), n_t]
        };
        let ds = obs.dataset(&s.name, &shape, Data::F64(s.data.clone()));
        ds.attr("units", s.units.as_str())
            .attr("description", s.description.as_str());
        if !s.rows.is_empty() {
            ds.attr("rows", s.rows.clone());
        }
    }
    let model = root.group("model");
    model
        .attr("dimension", res.dim as i64)
        .attr("n_sites", plan.network.sites.len() as i64)
        .attr("n_modes", plan.network.modes.len() as i64)
        .attr(
            "mode_levels",
            plan.network
                .modes
                .iter()
                .map(|m| m.levels as i64)
                .collect::<Vec<i64>>(),
        )
        .attr("mode_names", plan.mode_names.clone());
    let solver = root.group("solver");
    solver
        .attr("method", plan.solver.method.name())
        .attr(
            "integrator",
            "Dormand-Prince 5(4), PI step control, 4th-order dense output",
        )
        .attr("rtol", plan.solver.rtol)
        .attr("atol", plan.solver.atol)
        .attr("max_step", plan.solver.max_step)
        .attr("steps", res.stats.steps as i64)
        .attr("rejected_steps", res.stats.rejected as i64)
        .attr("rhs_evaluations", res.stats.rhs_evals as i64)
        .attr("wall_seconds", res.wall_seconds)
        .attr("threads", res.threads as i64);
    root.group("input")
        .dataset("config_toml", &[], Data::Str(plan.source.clone()));
    root
}

/// Write the result file atomically (temporary file, fsync, rename).
///
/// # Errors
/// [`AppError::Runtime`] naming the path.
pub fn write(plan: &RunPlan, res: &RunResult, path: &Path) -> Result<(), AppError> {
    write_atomic(&tree(plan, res), path).map_err(|e| {
        AppError::Runtime(format!(
            "cannot write the result file {}: {e}",
            path.display()
        ))
    })
}
