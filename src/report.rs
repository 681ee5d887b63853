//! Terminal reports: what `cavern check` prints about a model, and the summary table of a run.

use crate::config::{Method, MethodRequest, RunPlan};
use crate::recall::{MemoryPlan, ProbePlan, Realisation, RecallResult};
use crate::run::{bytes_label, resolved_threads, MemoryEstimate, RunResult, SolverChoice};
use cavern_model::{Channel, CouplingForm, Envelope};
use std::fmt::Write;

fn envelope_text(e: &Envelope, tu: &str) -> String {
    match e {
        Envelope::Constant => String::new(),
        Envelope::Ramp {
            start,
            stop,
            from,
            to,
        } => {
            format!(" × linear ramp {from} → {to} over t = {start} … {stop} {tu}")
        }
        Envelope::SmoothStep {
            start,
            stop,
            from,
            to,
        } => {
            format!(" × smooth step {from} → {to} over t = {start} … {stop} {tu}")
        }
        Envelope::Table { times, .. } => format!(
            " × piecewise-linear table ({} points, t = {} … {} {tu})",
            times.len(),
            times[0],
            times[times.len() - 1]
        ),
    }
}

/// " us" etc. after a time in physical units; nothing in dimensionless units.
fn time_suffix(plan: &RunPlan) -> String {
    if plan.units.seconds_per_time_unit().is_some() {
        format!(" {}", plan.units.time_label())
    } else {
        String::new()
    }
}

fn sig(x: f64) -> String {
    if x == 0.0 {
        "0".into()
    } else if (1e-3..1e5).contains(&x.abs()) {
        format!("{}", (x * 1e6).round() / 1e6)
    } else {
        format!("{x:.4e}")
    }
}

fn memory_line(what: &str, mem: &MemoryEstimate, verdict: &str) -> String {
    format!(
        "{what} ≈ {}; allowed {} ({} of {}) → {verdict}",
        bytes_label(mem.needed),
        mem.allowed_label(),
        mem.share,
        mem.physical
            .map(bytes_label)
            .unwrap_or_else(|| "unknown".into()),
    )
}

/// The report of `cavern check`.
pub fn check_text(plan: &RunPlan, dim: usize, choice: &SolverChoice) -> String {
    let mem = &choice.density;
    let u = plan.units;
    let fu = u.frequency_label();
    let tu = u.time_label();
    let back = |w: f64| w / u.angular(1.0); // angular → config value
    let net = &plan.network;
    let mut s = String::new();
    let _ = writeln!(s, "config      {}", plan.path.display());
    if let Some(t) = &plan.title {
        let _ = writeln!(s, "title       {t}");
    }
    let _ = writeln!(s, "units       {}", u.convention());
    let levels: Vec<String> = net
        .modes
        .iter()
        .zip(&plan.mode_names)
        .map(|(m, n)| format!("{n}: {} levels", m.levels))
        .collect();
    let _ = writeln!(
        s,
        "space       {} site(s) (2 levels each), {} mode(s) ({}) → dimension d = {dim}",
        net.sites.len(),
        net.modes.len(),
        if levels.is_empty() {
            "none".into()
        } else {
            levels.join(", ")
        }
    );
    let too_large = "TOO LARGE: `cavern run` will refuse (exit 2)";
    let dm_verdict = match (mem.fits(), choice.requested) {
        (true, _) => "ok",
        (false, MethodRequest::Trajectories) => "too large, but not used",
        (false, MethodRequest::Auto) => "too large: auto uses trajectories",
        (false, MethodRequest::DensityMatrix) => too_large,
    };
    let _ = writeln!(
        s,
        "memory      {}",
        memory_line("density matrix needs", mem, dm_verdict)
    );
    if let (Some(t), Some(tp)) = (&choice.trajectories, &plan.solver.trajectories) {
        let verdict = match (choice.method, t.fits()) {
            (Method::Trajectories, true) => "ok",
            (Method::Trajectories, false) => too_large,
            (Method::DensityMatrix, true) => "ok, but not used",
            (Method::DensityMatrix, false) => "too large, but not used",
        };
        let _ = writeln!(
            s,
            "            {}",
            memory_line(
                &format!(
                    "trajectories ({} on {} thread(s), jump records bounded by the largest jump rates) need",
                    tp.trajectories,
                    resolved_threads(plan)
                ),
                t,
                verdict
            )
        );
    }
    let t_end = plan.times.last().copied().unwrap_or(0.0);
    let _ = writeln!(
        s,
        "time        0 … {} {tu}, {} samples",
        sig(t_end),
        plan.times.len()
    );
    let threads = if plan.solver.threads == 0 {
        "one per core".to_string()
    } else {
        plan.solver.threads.to_string()
    };
    let _ = writeln!(
        s,
        "method      {} ({})",
        choice.method.name(),
        choice.reason
    );
    match choice.method {
        Method::DensityMatrix => {
            let _ = writeln!(
                s,
                "solver      density matrix, adaptive Dormand–Prince 5(4), rtol {:e}, atol {:e}, threads {threads}",
                plan.solver.rtol, plan.solver.atol
            );
        }
        Method::Trajectories => {
            let _ = writeln!(
                s,
                "solver      quantum trajectories (Monte Carlo wave functions; adaptive Dormand–Prince 5(4) between jumps), rtol {:e}, atol {:e}, threads {threads}",
                plan.solver.rtol, plan.solver.atol
            );
        }
    }
    if let Some(sp) = &plan.steady {
        let n = (dim as u128) * (dim as u128);
        let (gmres, _) = crate::run::steady_workspaces(sp, dim);
        let _ = writeln!(
            s,
            "steady      {} solver ({} unknowns d²; GMRES with the {} preconditioner: workspace ≈ {}), {} relaxation rate(s), envelopes frozen at t = {}{}",
            sp.method.name(),
            n,
            sp.preconditioner.name(),
            bytes_label(gmres),
            sp.relaxation_rates,
            sig(sp.at_time),
            time_suffix(plan)
        );
    }
    if let Some(tp) = &plan.solver.trajectories {
        let tu = time_suffix(plan);
        let _ = writeln!(
            s,
            "ensemble    {} trajectories (seed {}), keep {}; results are means ± standard errors",
            tp.trajectories, tp.seed, tp.keep
        );
        let _ = writeln!(
            s,
            "clicks      counts in bins of {}{tu}; g² and waiting times of {} over t = {} … {}{tu}, delays up to {}{tu}",
            sig(tp.bin_width),
            tp.correlate
                .map(|c| c.label())
                .unwrap_or_else(|| "no channel (the model has no jump operators)".into()),
            sig(tp.correlate_after),
            sig(t_end),
            sig(tp.max_delay)
        );
    }
    let _ = writeln!(s, "\nHamiltonian and dissipators (config values, {fu}; cavern uses 2π × value where physical):");
    for (i, st) in net.sites.iter().enumerate() {
        let _ = writeln!(
            s,
            "  site {i}: Δa/2π = {} {fu} [(Δa/2)σᶻ], γ/2π = {} {fu} [√γ σ⁻], γφ/2π = {} {fu} [√(γφ/2) σᶻ], P/2π = {} {fu} [√P σ⁺], Ω/2π = {} {fu} [(Ω/2)σˣ]{}",
            sig(back(st.detuning)),
            sig(back(st.decay)),
            sig(back(st.dephasing)),
            sig(back(st.pump)),
            sig(back(st.rabi)),
            if st.rabi != 0.0 { envelope_text(&net.rabi_envelope, tu) } else { String::new() }
        );
    }
    for (m, md) in net.modes.iter().enumerate() {
        let _ = writeln!(
            s,
            "  mode {}: {} Fock levels, Δc/2π = {} {fu} [Δc a†a], κ/2π = {} {fu} [√(κ(1+n_th)) a, √(κ n_th) a†], n_th = {}, ε/2π = {} {fu} [ε(a + a†)]{}",
            plan.mode_names[m],
            md.levels,
            sig(back(md.detuning)),
            sig(back(md.loss)),
            sig(md.thermal),
            sig(back(md.drive)),
            if md.drive != 0.0 { envelope_text(&md.drive_envelope, tu) } else { String::new() }
        );
    }
    if !net.coupling.is_empty() {
        let form = match net.coupling_form {
            CouplingForm::Exchange => "exchange g(aσ⁺ + a†σ⁻)",
            CouplingForm::Dipole => "dipole g(a + a†)σˣ",
            CouplingForm::Longitudinal => "longitudinal g(a + a†)σᶻ",
        };
        let _ = writeln!(
            s,
            "  coupling ({form}), g/2π in {fu}{}:",
            envelope_text(&net.coupling_envelope, tu)
        );
        for (i, row) in net.coupling.iter().enumerate() {
            let r: Vec<String> = row.iter().map(|&g| sig(back(g))).collect();
            let _ = writeln!(s, "    site {i}: [{}]", r.join(", "));
        }
    }
    for (name, mat, env) in [
        ("zz Jᶻσᶻσᶻ", &net.zz, &net.zz_envelope),
        (
            "flip-flop Jˣ(σ⁺σ⁻ + σ⁻σ⁺)",
            &net.flip_flop,
            &net.flip_flop_envelope,
        ),
    ] {
        if !mat.is_empty() {
            let _ = writeln!(
                s,
                "  spin–spin {name}, J/2π in {fu}, summed over i < j{}:",
                envelope_text(env, tu)
            );
            for (i, row) in mat.iter().enumerate() {
                let r: Vec<String> = row.iter().map(|&g| sig(back(g))).collect();
                let _ = writeln!(s, "    site {i}: [{}]", r.join(", "));
            }
        }
    }
    let ch: Vec<String> = net.channels().iter().map(Channel::label).collect();
    let _ = writeln!(
        s,
        "  jump operators ({}): {}",
        ch.len(),
        if ch.is_empty() {
            "none".into()
        } else {
            ch.join(", ")
        }
    );
    // derived figures
    let mut derived = Vec::new();
    for (i, st) in net.sites.iter().enumerate() {
        for (m, md) in net.modes.iter().enumerate() {
            let g = net
                .coupling
                .get(i)
                .and_then(|r| r.get(m))
                .copied()
                .unwrap_or(0.0);
            if g == 0.0 {
                continue;
            }
            let c = if md.loss > 0.0 && st.decay > 0.0 {
                format!("C = 4g²/(κγ) = {}", sig(4.0 * g * g / (md.loss * st.decay)))
            } else {
                "C = ∞ (κ or γ is zero)".into()
            };
            let regime = if 2.0 * g.abs() > (md.loss + st.decay) / 2.0 {
                "2g > (κ+γ)/2: strong coupling"
            } else {
                "2g ≤ (κ+γ)/2: weak coupling"
            };
            derived.push(format!(
                "  site {i} – mode {}: g/2π = {} {fu}, {c}, {regime}",
                plan.mode_names[m],
                sig(back(g))
            ));
        }
    }
    if !derived.is_empty() {
        let _ = writeln!(
            s,
            "\nderived (single-site cooperativity with the energy decay rates κ and γ):"
        );
        for d in derived {
            let _ = writeln!(s, "{d}");
        }
    }
    let spins: String = plan
        .initial
        .spins
        .iter()
        .map(|sp| {
            if sp.theta == 0.0 {
                '+'
            } else if sp.theta == std::f64::consts::PI {
                '-'
            } else {
                '~'
            }
        })
        .collect();
    let _ = writeln!(
        s,
        "\ninitial     spins \"{spins}\" (+ = |e⟩, - = |g⟩, ~ = Bloch angles), modes {:?}",
        plan.initial.modes
    );
    if !plan.observe.patterns.is_empty() {
        let p: Vec<String> = plan.observe.patterns.iter().map(|p| signs(p)).collect();
        let _ = writeln!(s, "patterns    {}", p.join(", "));
    }
    if let Some(mem) = &plan.memory {
        s.push_str(&memory_text(plan, mem));
    }
    s
}

/// A ±1 pattern as a string of + and −.
fn signs(p: &[i8]) -> String {
    p.iter().map(|&x| if x > 0 { '+' } else { '-' }).collect()
}

/// The `[memory]` and `[probes]` part of `cavern check`: J, its spectrum, the scale, the
/// realisation and the probes.
fn memory_text(plan: &RunPlan, mem: &MemoryPlan) -> String {
    let u = plan.units;
    let fu = u.frequency_label();
    let back = |w: f64| w / u.angular(1.0);
    let mut s = String::new();
    let n = mem.couplings.n();
    let rule = mem
        .rule
        .map_or("none (the matrix is given)".to_string(), |r| {
            r.name().to_string()
        });
    let _ = writeln!(
        s,
        "\nmemory      {} pattern(s) of {n} sites, rule {rule}, realisation {}",
        mem.patterns.len(),
        mem.realisation.name()
    );
    for (mu, p) in mem.patterns.iter().enumerate() {
        let _ = writeln!(s, "  pattern {mu}: \"{}\"", signs(p));
    }
    let _ = writeln!(
        s,
        "  coupling matrix J (rule units, dimensionless; energy E(s) = −½ Σᵢⱼ Jᵢⱼ sᵢsⱼ):"
    );
    for (i, row) in mem.couplings.rows().iter().enumerate() {
        let r: Vec<String> = row.iter().map(|&x| sig(x)).collect();
        let _ = writeln!(s, "    site {i}: [{}]", r.join(", "));
    }
    let spec: Vec<String> = mem.couplings.spectrum().iter().map(|&x| sig(x)).collect();
    let _ = writeln!(s, "  spectrum of J (ascending): [{}]", spec.join(", "));
    let _ = writeln!(
        s,
        "  scale c/2π = {} {fu}: Jᶻ = −c·J, so H_zz = Σᵢ<ⱼ Jᶻᵢⱼ σᶻᵢσᶻⱼ = c·E(s)",
        sig(back(mem.scale))
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
        let _ = writeln!(
            s,
            "  memory modes {} … {}: one per pattern, {levels} Fock levels, Δ/2π = {} {fu}, κ/2π = {} {fu}, longitudinal coupling gξᵢ^μ (a_μ + a_μ†)σᶻᵢ with g/2π = {} {fu}",
            first_mode,
            first_mode + mem.patterns.len() - 1,
            sig(back(*detuning)),
            sig(back(*loss)),
            sig(back(*coupling))
        );
        let d = *detuning;
        let k = *loss;
        let _ = writeln!(
            s,
            "  effective zz after adiabatic elimination of the modes (effective-operator formalism, Reiter & Sørensen, Phys. Rev. A 85, 032111 (2012)): \
             Jᶻᵢⱼ = −2g²Δ/(Δ² + κ²/4) Σ_μ ξᵢ^μξⱼ^μ, i.e. the Hebbian J with c = 2N g²Δ/(Δ² + κ²/4); g²Δ/(Δ² + κ²/4)/2π = {} {fu}; valid for |Δ| ≫ g√N and small g/Δ",
            sig(back(coupling * coupling * d / (d * d + 0.25 * k * k)))
        );
        if *eliminated {
            let labels: Vec<String> = mem
                .mediated_jumps
                .iter()
                .map(|j| cavern_model::Channel::MediatedDephasing(j.mode).label())
                .collect();
            let _ = writeln!(
                s,
                "  the modes are ELIMINATED: the run uses the spin-only effective model, with the effective Jᶻ as the zz couplings above and one collective dephasing jump √κ Σᵢ gξᵢ^μσᶻᵢ/|Δ − iκ/2| per pattern ({}); corrections of relative order (N g/|Δ − iκ/2|)² = {} (the mode displacement at a retrieved pattern, squared)",
                labels.join(", "),
                sig((n * n) as f64 * coupling * coupling / (d * d + 0.25 * k * k))
            );
        } else {
            let jz = cavern_model::memory::zz_from_couplings(&mem.couplings, mem.scale);
            let _ = writeln!(
                s,
                "  effective Jᶻ/2π in {fu} (not in the Hamiltonian; the modes are):"
            );
            for (i, row) in jz.iter().enumerate() {
                let r: Vec<String> = row.iter().map(|&x| sig(back(x))).collect();
                let _ = writeln!(s, "    site {i}: [{}]", r.join(", "));
            }
        }
    }
    if let Some(r) = &mem.relaxation {
        let _ = writeln!(
            s,
            "  local-field (Glauber) relaxation: jumps √γ_G σ⁺ᵢ w↑(ĥᵢ)^½ and √γ_G σ⁻ᵢ w↓(ĥᵢ)^½, ĥᵢ = −Σⱼ Jᶻᵢⱼσᶻⱼ, w↑(h) = 1/(1 + e^(−2h/T)); γ_G/2π = {} {fu}, k_B T/h = {} {fu} (T/c = {} in units of J)",
            sig(back(r.rate)),
            sig(back(r.temperature)),
            sig(r.temperature / mem.scale)
        );
    }
    if let Some(pp) = &mem.probes {
        let mut pats: Vec<usize> = pp.probes.iter().map(|p| p.pattern).collect();
        pats.dedup();
        let mut ks: Vec<usize> = pp.probes.iter().map(|p| p.sites.len()).collect();
        ks.sort_unstable();
        ks.dedup();
        let _ = writeln!(
            s,
            "probes      {} probe(s) of pattern(s) {pats:?} with k = {ks:?} corrupted site(s) ({}), seed {}; recalled: a σᶻ configuration with overlap > {} with the probed pattern at the last sample",
            pp.probes.len(),
            pp.corruption.name(),
            pp.seed,
            pp.threshold
        );
        let _ = writeln!(
            s,
            "baseline    classical on the same J: zero-temperature asynchronous descent, and Glauber at T = {} (units of J), {} sweeps, {} runs per probe",
            sig(pp.glauber_temperature),
            pp.glauber_sweeps,
            pp.glauber_runs
        );
    }
    s
}

/// The recall table printed after a run with `[probes]`.
pub fn recall_table(plan: &RunPlan, pp: &ProbePlan, rec: &RecallResult) -> String {
    let tu = plan.units.time_label();
    let t1 = plan.times.last().copied().unwrap_or(0.0);
    let mut s = String::new();
    let how = match rec.method {
        Method::DensityMatrix => {
            "density matrix; ± is the standard error of the mean over the probes".to_string()
        }
        Method::Trajectories => format!(
            "{} trajectories per probe; ± is the standard error over trajectories",
            rec.trajectories
        ),
    };
    let _ = writeln!(
        s,
        "\nrecall of {} probe(s) ({}; {how}): quantum success = mean probability that measuring σᶻ of every site finds an overlap with the probed pattern > {} at t = {} {tu}",
        rec.outcomes.len(),
        pp.corruption.name(),
        pp.threshold,
        sig(t1)
    );
    let ttr = format!("time to recall [{tu}]");
    let gl = format!("Glauber success (T = {})", sig(pp.glauber_temperature));
    let _ = writeln!(
        s,
        "{:>3}  {:>6}  {:>22}  {:>20}  {:>16}  {:>w$}",
        "k",
        "probes",
        "quantum success ± err",
        ttr,
        "descent success",
        gl,
        w = gl.chars().count().max(16)
    );
    for c in &rec.curve {
        let _ = writeln!(
            s,
            "{:>3}  {:>6}  {:>22}  {:>20}  {:>16.3}  {:>w$.3}",
            c.flips,
            c.probes,
            format!("{:.3} ± {:.3}", c.success, c.success_stderr),
            if c.time_to_recall.is_nan() {
                "–".to_string()
            } else {
                format!("{:.4}", c.time_to_recall)
            },
            c.descent_success,
            c.glauber_success,
            w = gl.chars().count().max(16)
        );
    }
    let _ = writeln!(
        s,
        "(probes: {:.3} s wall; per-probe overlaps, retrieved patterns and times in /recall)",
        rec.wall_seconds
    );
    s
}

/// The summary table printed after a run: value at the first and last sample, min and max (for
/// trajectories: mean ± standard error at the first and last sample, min and max of the mean),
/// then the solver line and, for trajectories, the jumps per channel.
pub fn summary_table(plan: &RunPlan, res: &RunResult) -> String {
    let tu = plan.units.time_label();
    let t0 = res.times.first().copied().unwrap_or(0.0);
    let t1 = res.times.last().copied().unwrap_or(0.0);
    let mut s = String::new();
    let tu = if plan.units.seconds_per_time_unit().is_some() {
        format!(" {tu}")
    } else {
        String::new()
    };
    let h0 = format!("t = {}{tu}", sig(t0));
    let h1 = format!("t = {}{tu}", sig(t1));
    let traj = res.trajectory.as_ref();
    if let Some(t) = traj {
        let _ = writeln!(
            s,
            "trajectory means ± standard errors of the mean over {} trajectories (min and max: of the mean)",
            t.trajectories
        );
    }
    let w = if traj.is_some() { 24 } else { 14 };
    let _ = writeln!(
        s,
        "{:<22} {:<10} {:<22} {:>w$} {:>w$} {:>14} {:>14}",
        "quantity", "row", "unit", h0, h1, "min", "max"
    );
    for se in &res.series {
        for r in 0..se.n_rows() {
            let row = se.row(r);
            let err = se.row_stderr(r);
            let label = se.rows.get(r).map(String::as_str).unwrap_or("-");
            let min = row.iter().copied().fold(f64::INFINITY, f64::min);
            let max = row.iter().copied().fold(f64::NEG_INFINITY, f64::max);
            let at = |k: Option<usize>| {
                let v = k.and_then(|k| row.get(k)).copied().unwrap_or(f64::NAN);
                if traj.is_some() {
                    let e = k.and_then(|k| err.get(k)).copied().unwrap_or(f64::NAN);
                    format!("{v:.6e} ± {e:.1e}")
                } else {
                    format!("{v:.6e}")
                }
            };
            let _ = writeln!(
                s,
                "{:<22} {:<10} {:<22} {:>w$} {:>w$} {:>14.6e} {:>14.6e}",
                se.name,
                label,
                se.units,
                at(Some(0)),
                at(row.len().checked_sub(1)),
                min,
                max
            );
        }
    }
    let _ = writeln!(
        s,
        "\nsolver: {} steps ({} rejected), {} right-hand-side evaluations, {:.3} s wall on {} thread(s), d = {}{}",
        res.stats.steps,
        res.stats.rejected,
        res.stats.rhs_evals,
        res.wall_seconds,
        res.threads,
        res.dim,
        if traj.is_some() { " (summed over trajectories)" } else { "" }
    );
    if let Some(t) = traj {
        let per: Vec<String> = t
            .channels
            .iter()
            .zip(&t.clicks.per_channel)
            .map(|(c, n)| format!("{} {n}", c.label()))
            .collect();
        let _ = writeln!(
            s,
            "jumps per channel over {} trajectories: {}",
            t.trajectories,
            if per.is_empty() {
                "none (the model has no jump operators)".into()
            } else {
                per.join(", ")
            }
        );
        if let Some(c) = &t.clicks.correlation {
            let g0 = c.g2.first().copied().unwrap_or(f64::NAN);
            let _ = writeln!(
                s,
                "clicks of {}: mean rate {:.4e} {} over t = {} … {}{tu}; g²(first delay bin, τ < {}{tu}) = {:.3}",
                t.channels[c.channel].label(),
                plan.units.flux(c.mean_rate),
                plan.units.flux_label(),
                sig(c.window_start),
                sig(c.window_end),
                sig(2.0 * c.delay.first().copied().unwrap_or(0.0)),
                g0
            );
        }
    }
    if let Some(st) = &res.steady {
        s.push_str(&steady_text(plan, st));
    }
    if let (Some(pp), Some(rec)) = (
        plan.memory.as_ref().and_then(|m| m.probes.as_ref()),
        &res.recall,
    ) {
        s.push_str(&recall_table(plan, pp, rec));
    }
    s
}

/// The steady-state and relaxation part of the summary.
fn steady_text(plan: &RunPlan, st: &crate::run::SteadyOutput) -> String {
    let mut s = String::new();
    let rate = plan.units.rate_label();
    match &st.state {
        Some(state) => {
            let _ = writeln!(
                s,
                "\nsteady state ({}, {} iteration(s); residual max|𝓛ρ| = {:.2e} {rate}, relative {:.2e}):",
                state.method.name(),
                state.iterations,
                state.residual,
                state.relative_residual
            );
            let _ = writeln!(
                s,
                "{:<22} {:<10} {:<22} {:>14}",
                "quantity", "row", "unit", "steady value"
            );
            for se in &st.series {
                for r in 0..se.n_rows() {
                    let label = se.rows.get(r).map(String::as_str).unwrap_or("-");
                    let _ = writeln!(
                        s,
                        "{:<22} {:<10} {:<22} {:>14.6e}",
                        se.name,
                        label,
                        se.units,
                        se.row(r)[0]
                    );
                }
            }
        }
        None => {
            let _ = writeln!(
                s,
                "\nsteady state: NOT UNIQUE — the time evolution from the given initial state decides the outcome"
            );
        }
    }
    if let Some(rel) = &st.relaxation {
        let ev: Vec<String> = rel
            .eigenvalues
            .iter()
            .map(|z| {
                // imaginary parts at rounding level are noise, not oscillations
                if z.im.abs() <= 1e-12 * rel.scale {
                    format!("{:.4e}", z.re)
                } else {
                    format!("{:.4e}{:+.4e}i", z.re, z.im)
                }
            })
            .collect();
        let _ = writeln!(
            s,
            "Liouvillian eigenvalues nearest 0 ({rate}): {}",
            ev.join(", ")
        );
        let _ = writeln!(
            s,
            "zero eigenspace dimension {}{}; spectral gap {} {rate}{}",
            rel.zero_dimension,
            if rel.zero_dimension_is_lower_bound {
                " (at least)"
            } else {
                ""
            },
            rel.gap
                .map(|g| format!("{g:.4e}"))
                .unwrap_or_else(|| "not found".into()),
            rel.time_scale
                .map(|t| format!(
                    ", slowest relaxation time {t:.4e} {}",
                    plan.units.time_label()
                ))
                .unwrap_or_default()
        );
    }
    s
}
