//! The HDF5 result file of a time-evolution run.
//!
//! Layout (all our own names):
//! - root attributes: `tool`, `kind` (= `run`), `version`, `config_sha256`, `units_system`, `frequency_unit`,
//!   `time_unit`, `units_convention`, `title` (if given), `n_warnings` and `warnings` (one string per warning, when any).
//! - `/time` — sample times, attribute `units`.
//! - `/observables/<name>` — `[rows, time]` (or `[time]` for single-row quantities) with
//!   attributes `units`, `description` and `rows` (row labels).
//! - `/model` — attributes: `dimension`, `n_sites`, `n_modes`, `mode_levels`, `mode_names`.
//! - `/solver` — attributes: `method` (the method used), `method_requested`, `method_reason`,
//!   `integrator`, `rtol`, `atol`, `max_step`, `steps`, `rejected_steps`, `rhs_evaluations`,
//!   `wall_seconds`, `threads`; for trajectories also `trajectories`, `seed`, `keep`, `unravelling`.
//! - `/input/config_toml` — the config text exactly as read.
//! - `/memory` (with `[memory]`) — the stored patterns, the coupling matrix J, its spectrum and
//!   the realisation; `/recall` (with `[probes]`) — the recall curve and every probe (README.md,
//!   "Associative memory").
//!
//! Trajectory runs only (see README.md, "Quantum trajectories"):
//! - `/observables/<name>_stderr` — standard error of the mean of each observable.
//! - `/jumps/{trajectory,time,channel}` — every jump; attribute `channel_labels`.
//! - `/clicks/{bin_edges,counts,rate}` — counts per channel and time bin, and the rate.
//! - `/clicks/{waiting_time_edges,waiting_time_density,g2_delay,g2,g2_pairs}` — the correlated
//!   channel.
//! - `/kept_trajectories/<name>` — `[trajectory, rows, time]` traces of the first `keep`.

use crate::clicks::ClickAnalysis;
use crate::config::{Method, RunPlan};
use crate::h5out::{write_atomic, Data, Group};
use crate::recall::{MemoryPlan, ProbePlan, Realisation, RecallResult};
use crate::run::RunResult;
use crate::AppError;
use sha2::{Digest, Sha256};
use std::path::Path;

/// The integrator, as the `/solver` attribute `integrator` names it.
pub const INTEGRATOR: &str = "Dormand-Prince 5(4), PI step control, 4th-order dense output";

/// Hex SHA-256 of the config text.
pub fn config_hash(text: &str) -> String {
    let digest = Sha256::digest(text.as_bytes());
    digest.iter().map(|b| format!("{b:02x}")).collect()
}

/// The root attributes every cavern file has: tool, version, config hash and path, units, title.
pub fn identity_attrs(root: &mut Group, plan: &RunPlan) {
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
        .attr("units_convention", plan.units.convention());
    if let Some(t) = &plan.title {
        root.attr("title", t.as_str());
    }
}

/// Build the file tree of a run.
pub fn tree(plan: &RunPlan, res: &RunResult) -> Group {
    let mut root = Group::new();
    identity_attrs(&mut root, plan);
    root.attr("kind", "run")
        .attr("n_warnings", res.warnings.len() as i64);
    if !res.warnings.is_empty() {
        root.attr("warnings", res.warnings.clone());
    }
    let n_t = res.times.len();
    root.dataset("time", &[n_t], Data::F64(res.times.clone()))
        .attr("units", plan.units.time_label())
        .attr("description", "sample times");
    let traj = res.trajectory.as_ref();
    let n_traj = traj.map_or(0, |t| t.trajectories);
    let obs = root.group("observables");
    for s in &res.series {
        let shape: Vec<usize> = if s.rows.is_empty() {
            vec![n_t]
        } else {
            vec![s.rows.len(), n_t]
        };
        let description = if traj.is_some() {
            format!(
                "{}; mean over {n_traj} quantum trajectories (standard error in {}_stderr)",
                s.description, s.name
            )
        } else {
            s.description.clone()
        };
        let ds = obs.dataset(&s.name, &shape, Data::F64(s.data.clone()));
        ds.attr("units", s.units.as_str())
            .attr("description", description);
        if !s.rows.is_empty() {
            ds.attr("rows", s.rows.clone());
        }
        if traj.is_some() {
            let ds = obs.dataset(
                &format!("{}_stderr", s.name),
                &shape,
                Data::F64(s.stderr.clone()),
            );
            ds.attr("units", s.units.as_str()).attr(
                "description",
                format!(
                    "standard error of the mean of {} over {n_traj} trajectories: sample standard deviation / sqrt({n_traj}) (NaN for a single trajectory)",
                    s.name
                ),
            );
            if !s.rows.is_empty() {
                ds.attr("rows", s.rows.clone());
            }
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
        .attr("method", res.choice.method.name())
        .attr("method_requested", res.choice.requested.name())
        .attr("method_reason", res.choice.reason.as_str())
        .attr("integrator", INTEGRATOR)
        .attr("rtol", plan.solver.rtol)
        .attr("atol", plan.solver.atol)
        .attr("max_step", plan.solver.max_step)
        .attr("steps", res.stats.steps as i64)
        .attr("rejected_steps", res.stats.rejected as i64)
        .attr("rhs_evaluations", res.stats.rhs_evals as i64)
        .attr("wall_seconds", res.wall_seconds)
        .attr("threads", res.threads as i64);
    if let (Some(t), Method::Trajectories) = (traj, res.choice.method) {
        solver
            .attr("trajectories", t.trajectories as i64)
            .attr("seed", t.seed as i64)
            .attr("keep", t.keep as i64)
            .attr(
                "unravelling",
                "Monte Carlo wave functions (Dalibard, Castin & Molmer 1992): between jumps \
                 d psi/dt = -i H_eff psi, H_eff = H - (i/2) sum_k L_k^dagger L_k; a jump when \
                 |psi|^2 reaches a uniform random threshold, channel k with probability \
                 proportional to |L_k psi|^2; trajectory k uses stream k of ChaCha8 seeded with \
                 `seed`; steps, rejected_steps and rhs_evaluations are summed over trajectories",
            );
        write_trajectory_groups(&mut root, plan, res, t);
    }
    if let Some(st) = &res.steady {
        write_steady_groups(&mut root, plan, st);
    }
    if let Some(mem) = &plan.memory {
        write_memory_group(&mut root, plan, mem);
        if let (Some(pp), Some(rec)) = (&mem.probes, &res.recall) {
            write_recall_group(&mut root, plan, mem, pp, rec);
        }
    }
    root.group("input")
        .dataset("config_toml", &[], Data::Str(plan.source.clone()));
    root
}

/// `/steady_state` and `/relaxation`.
fn write_steady_groups(root: &mut Group, plan: &RunPlan, st: &crate::run::SteadyOutput) {
    let rate_unit = plan.units.rate_label();
    let g = root.group("steady_state");
    g.attr("unique", i64::from(!st.not_unique))
        .attr("wall_seconds", st.wall_seconds)
        .attr(
            "note",
            if st.not_unique {
                "the steady state is not unique: the time evolution from the given initial state \
                 decides the outcome; no steady-state observables are written"
            } else {
                "observables of the steady state rho_ss (L rho_ss = 0, Tr rho_ss = 1)"
            },
        );
    if let Some(s) = &plan.steady {
        g.attr("method_requested", s.method.name())
            .attr("at_time", s.at_time);
    }
    if let Some(state) = &st.state {
        g.attr("method", state.method.name())
            .attr("residual", state.residual)
            .attr("residual_units", rate_unit.as_str())
            .attr(
                "residual_definition",
                "max |(L rho_ss)_rc| (angular, per time unit); relative_residual divides by the \
                 generator scale times max |rho_ss|",
            )
            .attr("relative_residual", state.relative_residual)
            .attr("iterations", state.iterations as i64);
        if let Some(t) = state.time {
            g.attr("time_reached", t);
        }
        if let Some(p) = state.preconditioner {
            g.attr("preconditioner", p.name());
        }
        if let Some(f) = &state.factor {
            g.attr("factor_nnz_l", f.nnz_l as i64)
                .attr("factor_nnz_u", f.nnz_u as i64)
                .attr("factor_bytes", f.bytes as i64);
        }
        if !state.fallbacks.is_empty() {
            g.attr("fallbacks", state.fallbacks.clone());
        }
    }
    for s in &st.series {
        let shape: Vec<usize> = if s.rows.is_empty() {
            vec![]
        } else {
            vec![s.rows.len()]
        };
        let data = if s.rows.is_empty() {
            s.data[..1].to_vec()
        } else {
            s.data.clone()
        };
        let ds = g.dataset(&s.name, &shape, Data::F64(data));
        ds.attr("units", s.units.as_str())
            .attr("description", s.description.as_str());
        if !s.rows.is_empty() {
            ds.attr("rows", s.rows.clone());
        }
    }
    if st.relaxation.is_none() && st.relaxation_error.is_none() {
        return;
    }
    let r = root.group("relaxation");
    if let Some(e) = &st.relaxation_error {
        r.attr("error", e.as_str());
    }
    if let Some(rel) = &st.relaxation {
        let n = rel.eigenvalues.len();
        r.attr("zero_dimension", rel.zero_dimension as i64)
            .attr("zero_dimension_is_lower_bound", i64::from(rel.zero_dimension_is_lower_bound))
            .attr("unique", i64::from(rel.degenerate.is_none()))
            .attr("shift", rel.shift)
            .attr("units", rate_unit.as_str())
            .attr(
                "description",
                "eigenvalues lambda of the Liouvillian nearest zero (angular, per time unit), \
                 zeros first then slowest decay first; every deviation from the steady state decays \
                 as exp(lambda t)",
            );
        if let Some(gap) = rel.gap {
            r.attr("spectral_gap", gap);
        }
        if let Some(ts) = rel.time_scale {
            r.attr("relaxation_time", ts)
                .attr("relaxation_time_units", plan.units.time_label());
        }
        r.dataset(
            "eigenvalues_re",
            &[n],
            Data::F64(rel.eigenvalues.iter().map(|z| z.re).collect()),
        )
        .attr("units", rate_unit.as_str());
        r.dataset(
            "eigenvalues_im",
            &[n],
            Data::F64(rel.eigenvalues.iter().map(|z| z.im).collect()),
        )
        .attr("units", rate_unit.as_str());
        r.dataset(
            "error_estimates",
            &[n],
            Data::F64(rel.error_estimates.clone()),
        )
        .attr("units", rate_unit.as_str());
    }
}

/// `/memory`: patterns, couplings J (rule units), their spectrum, the realisation.
fn write_memory_group(root: &mut Group, plan: &RunPlan, mem: &MemoryPlan) {
    let n = mem.couplings.n();
    let n_p = mem.patterns.len();
    let fu = plan.units.frequency_label();
    let back = |w: f64| w / plan.units.angular(1.0);
    let g = root.group("memory");
    g.attr(
        "rule",
        mem.rule.map_or("none (a given matrix)", |r| r.name()),
    )
    .attr("realisation", mem.realisation.name())
    .attr("scale", back(mem.scale))
    .attr("scale_units", fu)
    .attr(
        "scale_definition",
        "the zz couplings are Jz_ij = -(2 pi scale) J_ij (physical units; Jz = -scale J in \
         dimensionless units), i.e. H_zz = sum_{i<j} Jz_ij sz_i sz_j = (2 pi scale) E(s) with the \
         Hopfield energy E(s) = -1/2 sum_ij J_ij s_i s_j",
    );
    if let Realisation::Modes {
        first_mode,
        levels,
        detuning,
        loss,
        coupling,
        eliminated,
    } = &mem.realisation
    {
        g.attr("modes_eliminated", i64::from(*eliminated))
            .attr("first_memory_mode", *first_mode as i64)
            .attr("mode_levels", *levels as i64)
            .attr("mode_detuning", back(*detuning))
            .attr("mode_loss", back(*loss))
            .attr("mode_coupling", back(*coupling))
            .attr(
                "mediation",
                "one mode per pattern, H = Delta a^dagger a + g xi_i (a + a^dagger) sz_i; after \
                 adiabatic elimination (Reiter & Sorensen, Phys. Rev. A 85, 032111 (2012)) \
                 Jz_ij = -2 g^2 Delta/(Delta^2 + kappa^2/4) sum_mu xi_i xi_j, so the scale is \
                 2 N g^2 Delta/(Delta^2 + kappa^2/4) and J is the Hebbian matrix",
            );
    }
    if let Some(r) = &mem.relaxation {
        g.attr("relaxation_rate", back(r.rate))
            .attr("relaxation_temperature", back(r.temperature))
            .attr("relaxation_units", fu);
    }
    g.dataset(
        "couplings",
        &[n, n],
        Data::F64(mem.couplings.rows().concat()),
    )
    .attr("units", "1 (rule units)")
    .attr(
        "description",
        "symmetric coupling matrix J with zero diagonal; E(s) = -1/2 sum_ij J_ij s_i s_j",
    );
    g.dataset("spectrum", &[n], Data::F64(mem.couplings.spectrum()))
        .attr("units", "1 (rule units)")
        .attr("description", "eigenvalues of J, ascending");
    g.dataset(
        "patterns",
        &[n_p, n],
        Data::I64(
            mem.patterns
                .iter()
                .flatten()
                .map(|&x| i64::from(x))
                .collect(),
        ),
    )
    .attr("units", "1")
    .attr(
        "description",
        "stored patterns, +1 = excited |e> (sz = +1), -1 = ground",
    );
}

/// `/recall`: the recall curve and every probe (contract C2).
fn write_recall_group(
    root: &mut Group,
    plan: &RunPlan,
    mem: &MemoryPlan,
    pp: &ProbePlan,
    rec: &RecallResult,
) {
    let tu = plan.units.time_label();
    let k = rec.curve.len();
    let p = rec.outcomes.len();
    let n = mem.couplings.n();
    let n_p = mem.patterns.len();
    let n_t = plan.times.len();
    let g = root.group("recall");
    g.attr("threshold", pp.threshold)
        .attr("probe_count", p as i64)
        .attr("method", rec.method.name())
        .attr("corruption", pp.corruption.name())
        .attr("seed", pp.seed as i64)
        .attr("trajectories_per_probe", rec.trajectories as i64)
        .attr("glauber_temperature", pp.glauber_temperature)
        .attr("glauber_sweeps", pp.glauber_sweeps as i64)
        .attr("glauber_runs", pp.glauber_runs as i64)
        .attr("wall_seconds", rec.wall_seconds)
        .attr(
            "description",
            "recall of stored patterns from corrupted probes: a probe succeeds when its final \
             overlap m = (1/N) sum_i xi_i <sz_i> with the probed pattern is above threshold",
        );
    let col = |f: &dyn Fn(&crate::recall::CurvePoint) -> f64| -> Data {
        Data::F64(rec.curve.iter().map(f).collect())
    };
    g.dataset(
        "flips",
        &[k],
        Data::I64(rec.curve.iter().map(|c| c.flips as i64).collect()),
    )
    .attr("units", "sites")
    .attr(
        "description",
        "number of corrupted (flipped or erased) sites k",
    );
    g.dataset(
        "n_probes",
        &[k],
        Data::I64(rec.curve.iter().map(|c| c.probes as i64).collect()),
    )
    .attr("units", "probes")
    .attr("description", "probes with k corrupted sites");
    g.dataset("success", &[k], col(&|c| c.success))
        .attr("units", "1")
        .attr(
            "description",
            "mean over the probes of the recall probability Tr(Πρ) at the last sample (see \
             probes/success_probability)",
        );
    g.dataset("success_stderr", &[k], col(&|c| c.success_stderr))
        .attr("units", "1")
        .attr(
            "description",
            "density matrix: standard error of the mean over the n probes, sd/sqrt(n) (the \
             sampling error when the probes are random draws); trajectories: sqrt(sum of the \
             probes' squared standard errors)/n",
        );
    g.dataset("time_to_recall", &[k], col(&|c| c.time_to_recall))
        .attr("units", tu)
        .attr(
            "description",
            "mean over the successful probes of the first sample time after which the overlap \
             stays above threshold; NaN if none succeeded",
        );
    g.dataset(
        "baseline_descent_success",
        &[k],
        col(&|c| c.descent_success),
    )
    .attr("units", "1")
    .attr(
        "description",
        "classical zero-temperature asynchronous Hopfield dynamics on the same J from the same \
         probes (erased sites: random signs): fraction recalled",
    );
    g.dataset(
        "baseline_glauber_success",
        &[k],
        col(&|c| c.glauber_success),
    )
    .attr("units", "1")
    .attr(
        "description",
        "classical Glauber dynamics on the same J at glauber_temperature (units of J) for \
         glauber_sweeps sweeps, glauber_runs runs per probe: fraction recalled",
    );
    let o = &rec.outcomes;
    let probes = g.group("probes");
    probes
        .dataset(
            "pattern",
            &[p],
            Data::I64(pp.probes.iter().map(|x| x.pattern as i64).collect()),
        )
        .attr("units", "1")
        .attr("description", "index of the probed pattern");
    probes
        .dataset(
            "flips",
            &[p],
            Data::I64(pp.probes.iter().map(|x| x.sites.len() as i64).collect()),
        )
        .attr("units", "sites")
        .attr("description", "number of corrupted sites");
    probes
        .dataset(
            "flipped_sites",
            &[p, n],
            Data::I64(
                pp.probes
                    .iter()
                    .flat_map(|x| (0..n).map(|i| i64::from(x.sites.contains(&i))))
                    .collect(),
            ),
        )
        .attr("units", "1")
        .attr("description", "1 where the site started flipped or erased");
    probes
        .dataset(
            "final_overlap",
            &[p, n_p],
            Data::F64(o.iter().flat_map(|x| x.final_overlap.clone()).collect()),
        )
        .attr("units", "1")
        .attr(
            "description",
            "overlap with every pattern at the last sample",
        );
    probes
        .dataset(
            "retrieved",
            &[p],
            Data::I64(o.iter().map(|x| x.retrieved).collect()),
        )
        .attr("units", "1")
        .attr(
            "description",
            format!(
                "retrieved entry: mu when m_mu > threshold, {n_p} + mu when -m_mu > threshold \
                 (the negation of pattern mu), -1 when none"
            ),
        );
    probes
        .dataset(
            "success",
            &[p],
            Data::I64(o.iter().map(|x| i64::from(x.success)).collect()),
        )
        .attr("units", "1")
        .attr(
            "description",
            "1 when the final overlap with the probed pattern is above threshold (for \
             trajectories: the trajectory-averaged overlap)",
        );
    probes
        .dataset(
            "time_to_recall",
            &[p],
            Data::F64(o.iter().map(|x| x.time_to_recall).collect()),
        )
        .attr("units", tu)
        .attr(
            "description",
            "first sample time after which the overlap with the probed pattern stays above \
             threshold; NaN when the final overlap is not above it",
        );
    probes
        .dataset(
            "overlaps",
            &[p, n_p, n_t],
            Data::F64(o.iter().flat_map(|x| x.overlaps.clone()).collect()),
        )
        .attr("units", "1")
        .attr(
            "description",
            "m_mu(t) = (1/N) sum_i xi_i^mu <sz_i>(t) for every pattern at the times of /time",
        );
    probes
        .dataset(
            "descent_success",
            &[p],
            Data::F64(o.iter().map(|x| x.descent_success).collect()),
        )
        .attr("units", "1")
        .attr(
            "description",
            "classical descent from the same probe recalled it (0/1)",
        );
    probes
        .dataset(
            "glauber_success",
            &[p],
            Data::F64(o.iter().map(|x| x.glauber_success).collect()),
        )
        .attr("units", "1")
        .attr(
            "description",
            "fraction of the classical Glauber runs that recalled it",
        );
    if o.iter().all(|x| x.success_probability.is_some()) && !o.is_empty() {
        let sp = |f: fn((f64, f64)) -> f64| {
            Data::F64(
                o.iter()
                    .map(|x| x.success_probability.map_or(f64::NAN, f))
                    .collect(),
            )
        };
        probes
            .dataset("success_probability", &[p], sp(|x| x.0))
            .attr("units", "1")
            .attr(
                "description",
                "recall probability Tr(Πρ) at the last sample: the probability that measuring \
                 every site's σᶻ finds a configuration whose overlap with the probed pattern is \
                 above threshold (exact for the density matrix; for trajectories the mean of \
                 ⟨ψ|Π|ψ⟩)",
            );
        probes
            .dataset("success_probability_stderr", &[p], sp(|x| x.1))
            .attr("units", "1")
            .attr(
                "description",
                "its standard error over the trajectories (0 for the density matrix: exact)",
            );
    }
}

/// `/jumps`, `/clicks` and `/kept_trajectories` of a trajectory run.
fn write_trajectory_groups(
    root: &mut Group,
    plan: &RunPlan,
    res: &RunResult,
    t: &crate::run::TrajectoryOutput,
) {
    let u = plan.units;
    let tu = u.time_label();
    let per_tu = match u.seconds_per_time_unit() {
        Some(_) => format!("1/{tu}"),
        None => "1 (per time unit)".to_string(),
    };
    let n = t.trajectories;
    let labels: Vec<String> = t.channels.iter().map(|c| c.label()).collect();
    let n_j = t.jumps.len();
    let jumps = root.group("jumps");
    jumps
        .attr("channel_labels", labels.clone())
        .attr("n_trajectories", n as i64)
        .attr(
            "description",
            "every quantum jump of every trajectory, ordered by trajectory then time; \
             channel indexes channel_labels",
        );
    jumps
        .dataset(
            "trajectory",
            &[n_j],
            Data::I64(t.jumps.iter().map(|j| j.trajectory as i64).collect()),
        )
        .attr("units", "1")
        .attr("description", format!("trajectory index 0 … {}", n - 1));
    jumps
        .dataset(
            "time",
            &[n_j],
            Data::F64(t.jumps.iter().map(|j| j.time).collect()),
        )
        .attr("units", tu)
        .attr(
            "description",
            "time of the jump (located on the integrator's dense output)",
        );
    jumps
        .dataset(
            "channel",
            &[n_j],
            Data::I64(t.jumps.iter().map(|j| j.channel as i64).collect()),
        )
        .attr("units", "1")
        .attr(
            "description",
            "jump channel: index into the channel_labels attribute of /jumps",
        );

    let c: &ClickAnalysis = &t.clicks;
    let n_bins = c.bin_edges.len() - 1;
    let clicks = root.group("clicks");
    clicks
        .attr("bin_width", plan.solver.trajectories.as_ref().map_or(f64::NAN, |p| p.bin_width))
        .attr("bin_width_units", tu)
        .attr("channel_labels", labels.clone())
        .attr("n_trajectories", n as i64)
        .attr(
            "description",
            "photon counting: every jump of a channel is a click of an ideal detector on that channel",
        );
    clicks
        .dataset("bin_edges", &[n_bins + 1], Data::F64(c.bin_edges.clone()))
        .attr("units", tu)
        .attr(
            "description",
            "edges of the count bins from 0 to the end of the run (the last bin may be shorter)",
        );
    clicks
        .dataset(
            "counts",
            &[labels.len(), n_bins],
            Data::I64(c.counts.clone()),
        )
        .attr("units", "clicks")
        .attr("rows", labels.clone())
        .attr(
            "description",
            format!("clicks (jumps) per channel and time bin, summed over all {n} trajectories"),
        );
    clicks
        .dataset(
            "rate",
            &[labels.len(), n_bins],
            Data::F64(c.rate.iter().map(|&r| u.flux(r)).collect()),
        )
        .attr("units", u.flux_label())
        .attr("rows", labels.clone())
        .attr(
            "description",
            format!(
                "click rate per trajectory: counts / ({n} trajectories * bin width); for loss and \
                 decay channels the emitted photon flux, compare output_flux"
            ),
        );
    let Some(k) = &c.correlation else {
        return;
    };
    let label = labels[k.channel].clone();
    clicks
        .attr("correlated_channel", label.as_str())
        .attr("correlate_after", k.window_start)
        .attr("window_end", k.window_end)
        .attr(
            "max_delay",
            k.delay.len() as f64
                * plan
                    .solver
                    .trajectories
                    .as_ref()
                    .map_or(f64::NAN, |p| p.bin_width),
        )
        .attr("mean_rate", u.flux(k.mean_rate))
        .attr("mean_rate_units", u.flux_label())
        .attr("n_clicks_analysed", k.clicks as i64)
        .attr("n_intervals", k.intervals as i64);
    let n_w = k.waiting_edges.len() - 1;
    clicks
        .dataset(
            "waiting_time_edges",
            &[n_w + 1],
            Data::F64(k.waiting_edges.clone()),
        )
        .attr("units", tu)
        .attr(
            "description",
            format!("edges of the waiting-time bins for channel {label}, from 0 to the length of the analysed window"),
        );
    clicks
        .dataset(
            "waiting_time_density",
            &[n_w],
            Data::F64(k.waiting_density.clone()),
        )
        .attr("units", per_tu.as_str())
        .attr(
            "description",
            format!(
                "normalised histogram (integral 1) of the intervals between successive {label} clicks \
                 of the same trajectory, both inside the analysed window [correlate_after, end]; \
                 NaN when there is no such interval"
            ),
        );
    let n_d = k.delay.len();
    clicks
        .dataset("g2_delay", &[n_d], Data::F64(k.delay.clone()))
        .attr("units", tu)
        .attr(
            "description",
            "centre of each delay bin [k*bin_width, (k+1)*bin_width)",
        );
    clicks
        .dataset("g2_pairs", &[n_d], Data::I64(k.pairs.clone()))
        .attr("units", "pairs")
        .attr(
            "description",
            format!("ordered pairs of {label} clicks of the same trajectory, both inside the analysed window, per delay bin"),
        );
    clicks
        .dataset("g2", &[n_d], Data::F64(k.g2.clone()))
        .attr("units", "1")
        .attr(
            "description",
            format!(
                "second-order intensity correlation of channel {label} from clicks, assuming the \
                 process is stationary in the analysed window [correlate_after, end] of length T_w: \
                 g2 = pairs / (N * bin_width * (T_w - delay) * R^2) with N = {n} trajectories and \
                 R = clicks in the window / (N * T_w) the mean rate; 1 for Poissonian (coherent) \
                 light, < 1 antibunched; relative statistical error about 1/sqrt(g2_pairs); NaN \
                 without clicks"
            ),
        );

    if t.keep > 0 {
        let kept = root.group("kept_trajectories");
        kept.attr("n_kept", t.keep as i64).attr(
            "description",
            "single-trajectory traces of the first `keep` trajectories, shape [trajectory, rows, time]; \
             their jumps are the /jumps records with trajectory < n_kept",
        );
        for (name, data) in &t.kept {
            let Some(s) = res.get(name) else { continue };
            let ds = kept.dataset(
                name,
                &[t.keep, s.n_rows(), res.times.len()],
                Data::F64(data.clone()),
            );
            ds.attr("units", s.units.as_str()).attr(
                "description",
                format!("{} of single trajectories", s.description),
            );
            if !s.rows.is_empty() {
                ds.attr("rows", s.rows.clone());
            }
        }
    }
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
