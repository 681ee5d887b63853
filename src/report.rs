//! Terminal reports: what `cavern check` prints about a model, and the summary table of a run.

use crate::config::RunPlan;
use crate::run::{bytes_label, MemoryEstimate, RunResult};
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

fn sig(x: f64) -> String {
    if x == 0.0 {
        "0".into()
    } else if (1e-3..1e5).contains(&x.abs()) {
        format!("{}", (x * 1e6).round() / 1e6)
    } else {
        format!("{x:.4e}")
    }
}

/// The report of `cavern check`.
pub fn check_text(plan: &RunPlan, dim: usize, mem: &MemoryEstimate) -> String {
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
    let _ = writeln!(
        s,
        "memory      density matrix needs ≈ {}; allowed {} ({} of {}) → {}",
        bytes_label(mem.needed),
        mem.physical
            .map(|p| bytes_label((p as f64 * mem.share) as u128))
            .unwrap_or_else(|| "unknown".into()),
        mem.share,
        mem.physical
            .map(bytes_label)
            .unwrap_or_else(|| "unknown".into()),
        if mem.fits() {
            "ok"
        } else {
            "TOO LARGE: `cavern run` will refuse (exit 2)"
        }
    );
    let t_end = plan.times.last().copied().unwrap_or(0.0);
    let _ = writeln!(
        s,
        "time        0 … {} {tu}, {} samples",
        sig(t_end),
        plan.times.len()
    );
    let _ = writeln!(
        s,
        "solver      {} (adaptive Dormand–Prince 5(4)), rtol {:e}, atol {:e}, threads {}",
        plan.solver.method.name(),
        plan.solver.rtol,
        plan.solver.atol,
        if plan.solver.threads == 0 {
            "one per core".to_string()
        } else {
            plan.solver.threads.to_string()
        }
    );
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
        let p: Vec<String> = plan
            .observe
            .patterns
            .iter()
            .map(|p| p.iter().map(|&x| if x > 0 { '+' } else { '-' }).collect())
            .collect();
        let _ = writeln!(s, "patterns    {}", p.join(", "));
    }
    s
}

/// The summary table printed after a run: value at the first and last sample, min and max.
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
    let _ = writeln!(
        s,
        "{:<22} {:<10} {:<22} {:>14} {:>14} {:>14} {:>14}",
        "quantity", "row", "unit", h0, h1, "min", "max"
    );
    for se in &res.series {
        for r in 0..se.n_rows() {
            let row = se.row(r);
            let label = se.rows.get(r).map(String::as_str).unwrap_or("-");
            let min = row.iter().copied().fold(f64::INFINITY, f64::min);
            let max = row.iter().copied().fold(f64::NEG_INFINITY, f64::max);
            let _ = writeln!(
                s,
                "{:<22} {:<10} {:<22} {:>14.6e} {:>14.6e} {:>14.6e} {:>14.6e}",
                se.name,
                label,
                se.units,
                row.first().copied().unwrap_or(f64::NAN),
                row.last().copied().unwrap_or(f64::NAN),
                min,
                max
            );
        }
    }
    let _ = writeln!(
        s,
        "\nsolver: {} steps ({} rejected), {} right-hand-side evaluations, {:.3} s wall on {} thread(s), d = {}",
        res.stats.steps, res.stats.rejected, res.stats.rhs_evals, res.wall_seconds, res.threads, res.dim
    );
    s
}
