//! `[memory]` (stored patterns, learning rule, realisation, local-field relaxation) and
//! `[probes]` (corrupted initial states and recall settings). The keys, their units and their
//! interplay with `[spin_spin]`, `[coupling]` and `[[modes]]` are documented in README.md
//! ("Associative memory").

use super::{nearest, MethodRequest, Resolver};
use crate::recall::{choose, draw_probes, Corruption, MemoryPlan, Probe, ProbePlan, Realisation};
use crate::units::Units;
use cavern_model::effective;
use cavern_model::memory::{self, Couplings, LearningRule};
use cavern_model::{CouplingForm, FieldRelaxation, ModeInit, ModeParams, Network, ProductState};
use serde::Deserialize;
use toml::Value;

/// Largest number of probes a config may ask for.
const MAX_PROBES: u128 = 10_000;

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
pub(super) struct RawMemory {
    patterns: Vec<Value>,
    rule: Option<String>,
    realisation: Option<String>,
    scale: Option<f64>,
    matrix: Option<Value>,
    modes: Option<RawMemoryModes>,
    relaxation: Option<RawRelaxation>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawMemoryModes {
    eliminate: Option<bool>,
    levels: Option<i64>,
    detuning: f64,
    loss: Option<f64>,
    coupling: f64,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawRelaxation {
    rate: f64,
    temperature: Option<f64>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
pub(super) struct RawProbes {
    patterns: Option<Vec<i64>>,
    max_flips: Option<i64>,
    draws: Option<i64>,
    sites: Option<Vec<Vec<i64>>>,
    seed: Option<Value>,
    corruption: Option<String>,
    threshold: Option<f64>,
    glauber_temperature: Option<f64>,
    glauber_sweeps: Option<i64>,
    glauber_runs: Option<i64>,
}

/// What the memory section may change besides its own plan.
pub(super) struct Target<'a> {
    pub network: &'a mut Network,
    pub initial: &'a mut ProductState,
    pub mode_names: &'a mut Vec<String>,
    /// `[spin_spin] zz` is set.
    pub has_zz: bool,
    /// `[coupling]` is present.
    pub has_coupling: bool,
    pub method: MethodRequest,
    pub units: Units,
}

impl Resolver {
    /// Resolve `[memory]` and `[probes]` and apply the memory to the network (zz couplings, or
    /// memory modes appended after the user's modes, starting in the vacuum), the initial state
    /// and the field relaxation.
    pub(super) fn resolve_memory(
        &mut self,
        raw: Option<&RawMemory>,
        probes: Option<&RawProbes>,
        t: Target,
    ) -> Option<MemoryPlan> {
        let Some(raw) = raw else {
            if probes.is_some() {
                self.err(
                    "probes",
                    "[probes] needs a [memory] section: the stored patterns to probe",
                );
            }
            return None;
        };
        let n = t.network.sites.len();
        if n == 0 {
            self.err(
                "memory",
                "[memory] needs [sites]: the patterns are ±1 per site",
            );
            return None;
        }
        let n_errors = self.errors.len();
        if raw.patterns.is_empty() {
            self.err("memory.patterns", "needs at least one pattern (a string of + and − signs, one per site, or a list of ±1)");
        }
        let patterns: Vec<Vec<i8>> = raw
            .patterns
            .iter()
            .enumerate()
            .filter_map(|(k, p)| self.spin_list(&format!("memory.patterns[{k}]"), p, n))
            .collect();
        let realisation = raw.realisation.as_deref().unwrap_or("zz");
        let allowed = ["zz", "modes", "matrix"];
        if !allowed.contains(&realisation) {
            let hint = nearest(realisation, &allowed)
                .map(|s| format!(" (did you mean \"{s}\"?)"))
                .unwrap_or_default();
            self.err("memory.realisation", format!("unknown realisation \"{realisation}\"{hint}; allowed: \"zz\" (direct zz couplings Jᶻ = −scale·J), \"modes\" (one mode per pattern, longitudinal coupling), \"matrix\" (a given J as zz couplings)"));
            return None;
        }
        let rule = match raw.rule.as_deref() {
            None => LearningRule::Hebbian,
            Some(r) => match LearningRule::parse(r) {
                Some(rule) => rule,
                None => {
                    let hint = nearest(r, &["hebbian", "projection", "storkey"])
                        .map(|s| format!(" (did you mean \"{s}\"?)"))
                        .unwrap_or_default();
                    self.err("memory.rule", format!("unknown learning rule \"{r}\"{hint}; allowed: \"hebbian\", \"projection\", \"storkey\""));
                    LearningRule::Hebbian
                }
            },
        };
        // keys that belong to another realisation
        let misplaced = [
            (
                "scale",
                raw.scale.is_some(),
                realisation != "modes",
                "\"zz\" or \"matrix\" (with \"modes\" the scale follows from g, Δ and κ)",
            ),
            (
                "matrix",
                raw.matrix.is_some(),
                realisation == "matrix",
                "\"matrix\"",
            ),
            (
                "modes",
                raw.modes.is_some(),
                realisation == "modes",
                "\"modes\"",
            ),
        ];
        for (key, set, fits, with) in misplaced {
            if set && !fits {
                self.err(
                    &format!("memory.{key}"),
                    format!("only applies with realisation = {with}, not with realisation = \"{realisation}\""),
                );
            }
        }
        if realisation == "matrix" && raw.rule.is_some() {
            self.err("memory.rule", "does not apply with realisation = \"matrix\": the coupling matrix is given, not learned");
        }
        if realisation == "modes" && rule != LearningRule::Hebbian {
            self.err("memory.rule", format!("realisation = \"modes\" mediates the Hebbian couplings (one mode per pattern); rule = \"{}\" needs realisation = \"zz\"", rule.name()));
        }
        if t.has_zz {
            self.err("spin_spin.zz", format!("[memory] sets the zz couplings (realisation = \"{realisation}\"); remove `zz` from [spin_spin] (`flip_flop` may stay)"));
        }
        if realisation == "modes" && t.has_coupling {
            self.err("coupling", "[memory] realisation = \"modes\" sets the spin–mode coupling (longitudinal, one memory mode per pattern); a network has one coupling form, so remove [coupling] (uncoupled [[modes]] may stay) or use realisation = \"zz\"");
        }
        for (key, need) in [
            ("scale", realisation != "modes" && raw.scale.is_none()),
            ("matrix", realisation == "matrix" && raw.matrix.is_none()),
            ("modes", realisation == "modes" && raw.modes.is_none()),
        ] {
            if need {
                let what = match key {
                    "scale" => "`scale` (c/2π in the frequency unit; Jᶻ = −c·J)",
                    "matrix" => "`matrix` (the N×N coupling matrix J, rule units)",
                    _ => "a [memory.modes] table (levels, detuning, loss, coupling)",
                };
                self.err(
                    "memory",
                    format!("realisation = \"{realisation}\" needs {what}"),
                );
            }
        }
        if self.errors.len() > n_errors || patterns.len() != raw.patterns.len() {
            return None;
        }
        let couplings = if realisation == "matrix" {
            let m = self.matrix("memory.matrix", raw.matrix.as_ref()?, n, n, "sites × sites")?;
            match Couplings::from_rows(&m) {
                Ok(j) => j,
                Err(e) => {
                    self.err("memory.matrix", format!("{e}; J must be symmetric with a zero diagonal (rule units, dimensionless)"));
                    return None;
                }
            }
        } else {
            match memory::learn(rule, &patterns) {
                Ok(j) => j,
                Err(e) => {
                    self.err(
                        "memory.patterns",
                        format!("the {} rule cannot store these patterns: {e}", rule.name()),
                    );
                    return None;
                }
            }
        };
        let units = t.units;
        let realised = match (realisation, &raw.modes) {
            ("modes", Some(md)) => {
                let levels = md.levels.unwrap_or(3);
                if !(2..=1000).contains(&levels) {
                    self.err("memory.modes.levels", format!("the Fock truncation of each memory mode must be an integer 2 … 1000 (got {levels})"));
                }
                let detuning = self.freq(
                    "memory.modes.detuning",
                    Some(md.detuning),
                    units,
                    "detuning Δ/2π",
                );
                if !(md.detuning > 0.0) {
                    self.err("memory.modes.detuning", format!("must be > 0 (got {}; units: {}): the mediated coupling ∝ Δ/(Δ² + κ²/4) makes the stored patterns energy minima only for Δ > 0", md.detuning, units.frequency_label()));
                }
                let loss = self.rate("memory.modes.loss", md.loss, units, "loss rate κ/2π");
                let g = self.freq(
                    "memory.modes.coupling",
                    Some(md.coupling),
                    units,
                    "coupling g/2π",
                );
                let eliminated = md.eliminate.unwrap_or(false);
                if eliminated && !t.network.modes.is_empty() {
                    self.err("memory.modes.eliminate", "eliminating the memory modes eliminates every mode of the network; remove the config's own [[modes]] or set eliminate = false");
                }
                (
                    Realisation::Modes {
                        first_mode: t.network.modes.len(),
                        levels: levels.clamp(2, 1000) as usize,
                        detuning,
                        loss,
                        coupling: g,
                        eliminated,
                    },
                    -memory::mediated_zz(g, g, detuning, loss) * n as f64,
                )
            }
            (r, _) => {
                let c = raw.scale.unwrap_or(0.0);
                if !(c.is_finite() && c > 0.0) {
                    self.err("memory.scale", format!("must be a finite number > 0 (got {c}; units: {}): Jᶻ = −scale·J, and a positive scale makes the stored patterns energy minima", units.frequency_label()));
                }
                (
                    if r == "matrix" {
                        Realisation::Matrix
                    } else {
                        Realisation::Zz
                    },
                    units.angular(c),
                )
            }
        };
        let (realisation, scale) = realised;
        let relaxation = raw.relaxation.as_ref().and_then(|r| {
            if matches!(
                realisation,
                Realisation::Modes {
                    eliminated: false,
                    ..
                }
            ) {
                self.err("memory.relaxation", "the local-field relaxation uses the direct zz couplings, which realisation = \"modes\" does not have; use realisation = \"zz\", or eliminate the modes ([memory.modes] eliminate = true), which turns them into zz couplings");
                return None;
            }
            let rate = self.rate("memory.relaxation.rate", Some(r.rate), units, "relaxation rate γ_G/2π");
            let temperature = self.rate("memory.relaxation.temperature", r.temperature, units, "temperature k_B T/h");
            Some(FieldRelaxation { rate, temperature })
        });
        let probes = probes.and_then(|p| {
            self.resolve_probes(
                p,
                n,
                patterns.len(),
                relaxation.map(|r| r.temperature / scale),
                t.method,
            )
        });
        if self.errors.len() > n_errors {
            return None;
        }
        // apply to the network
        let net = t.network;
        net.field_relaxation = relaxation;
        let mut mediated_jumps = Vec::new();
        match &realisation {
            Realisation::Modes {
                levels,
                detuning,
                loss,
                coupling,
                first_mode,
                eliminated,
            } => {
                let user_modes = *first_mode;
                for mu in 0..patterns.len() {
                    net.modes.push(ModeParams {
                        levels: *levels,
                        detuning: *detuning,
                        loss: *loss,
                        ..Default::default()
                    });
                    t.mode_names.push(format!("memory{mu}"));
                    t.initial.modes.push(ModeInit::Vacuum);
                }
                let g = memory::mode_strengths(&patterns, *coupling);
                net.coupling = g
                    .into_iter()
                    .map(|row| std::iter::repeat_n(0.0, user_modes).chain(row).collect())
                    .collect();
                net.coupling_form = CouplingForm::Longitudinal;
                if *eliminated {
                    match effective::eliminate_modes(net) {
                        Ok(eff) => {
                            *net = eff.network;
                            mediated_jumps = eff.jumps;
                            t.mode_names.clear();
                            t.initial.modes.clear();
                        }
                        Err(e) => {
                            self.err(
                                "memory.modes.eliminate",
                                format!("the modes cannot be eliminated: {e}"),
                            );
                            return None;
                        }
                    }
                }
            }
            _ => net.zz = memory::zz_from_couplings(&couplings, scale),
        }
        Some(MemoryPlan {
            patterns,
            rule: (realisation != Realisation::Matrix).then_some(rule),
            realisation,
            couplings,
            scale,
            relaxation,
            probes,
            mediated_jumps,
        })
    }

    fn resolve_probes(
        &mut self,
        p: &RawProbes,
        n: usize,
        n_patterns: usize,
        relaxation_temperature: Option<f64>,
        method: MethodRequest,
    ) -> Option<ProbePlan> {
        let n_errors = self.errors.len();
        let mut chosen = Vec::new();
        for (k, &mu) in p.patterns.iter().flatten().enumerate() {
            if mu < 0 || mu as usize >= n_patterns {
                self.err(&format!("probes.patterns[{k}]"), format!("pattern index {mu} is out of range; allowed: 0 … {} (the index into [memory] patterns)", n_patterns - 1));
            } else {
                chosen.push(mu as usize);
            }
        }
        if p.patterns.is_none() {
            chosen = (0..n_patterns).collect();
        } else if chosen.is_empty() && self.errors.len() == n_errors {
            self.err("probes.patterns", "needs at least one pattern index");
        }
        let corruption = match p.corruption.as_deref().unwrap_or("flip") {
            "flip" => Corruption::Flip,
            "erase-mixed" => Corruption::EraseMixed,
            "erase-superposition" => Corruption::EraseSuperposition,
            other => {
                let allowed = ["flip", "erase-mixed", "erase-superposition"];
                let hint = nearest(other, &allowed)
                    .map(|s| format!(" (did you mean \"{s}\"?)"))
                    .unwrap_or_default();
                self.err("probes.corruption", format!("unknown corruption \"{other}\"{hint}; allowed: \"flip\" (the sites start flipped), \"erase-mixed\" (maximally mixed), \"erase-superposition\" ((|e⟩ + |g⟩)/√2)"));
                Corruption::Flip
            }
        };
        if corruption == Corruption::EraseMixed && method == MethodRequest::Trajectories {
            self.err("probes.corruption", "\"erase-mixed\" starts from a mixed state, which the trajectory solver (state vectors) cannot evolve; use \"erase-superposition\" or method = \"density-matrix\"");
        }
        let seed = match &p.seed {
            None => 0,
            Some(Value::Integer(x)) if *x >= 0 => *x as u64,
            Some(other) => {
                self.err(
                    "probes.seed",
                    format!("the seed must be an integer 0 … 9223372036854775807 (got {other})"),
                );
                0
            }
        };
        let mut probes = Vec::new();
        match (&p.sites, p.max_flips) {
            (Some(_), Some(_)) => self.err("probes", "give either `max_flips` (every k = 1 … max_flips, drawn) or `sites` (explicit lists of corrupted sites), not both"),
            (None, None) => self.err("probes", "needs `max_flips` (probe every k = 1 … max_flips corrupted sites) or `sites` (explicit lists of corrupted sites)"),
            (Some(lists), None) => {
                if p.draws.is_some() {
                    self.err("probes.draws", "only applies with `max_flips`; `sites` lists the corrupted sites explicitly");
                }
                let mut sets = Vec::new();
                for (k, l) in lists.iter().enumerate() {
                    let key = format!("probes.sites[{k}]");
                    let mut s: Vec<usize> = Vec::new();
                    for &i in l {
                        if i < 0 || i as usize >= n {
                            self.err(&key, format!("site index {i} is out of range; allowed: 0 … {}", n - 1));
                        } else if s.contains(&(i as usize)) {
                            self.err(&key, format!("site {i} is listed twice"));
                        } else {
                            s.push(i as usize);
                        }
                    }
                    if l.is_empty() {
                        self.err(&key, "needs at least one site index");
                    }
                    s.sort_unstable();
                    sets.push(s);
                }
                for &mu in &chosen {
                    for s in &sets {
                        probes.push(Probe { pattern: mu, sites: s.clone() });
                    }
                }
            }
            (None, Some(k)) => {
                if !(1..=n as i64).contains(&k) {
                    self.err("probes.max_flips", format!("must be an integer 1 … {n} (the number of sites; got {k})"));
                    return None;
                }
                let k = k as usize;
                let all: u128 = (1..=k).map(|j| choose(n, j)).sum();
                let draws = match p.draws {
                    None => None,
                    Some(d) if d >= 1 => Some(d as u128),
                    Some(d) => {
                        self.err("probes.draws", format!("must be an integer ≥ 1 (got {d}); leave it out to probe every subset"));
                        return None;
                    }
                };
                let per_pattern: u128 = match draws {
                    None => all,
                    Some(d) => (1..=k).map(|j| choose(n, j).min(d)).sum(),
                };
                if per_pattern * chosen.len() as u128 > MAX_PROBES {
                    self.err(if draws.is_some() { "probes.draws" } else { "probes.max_flips" }, format!("asks for {} probes (at most {MAX_PROBES}); every subset of up to {k} of {n} sites is probed unless `draws` limits the random draws per pattern and k", per_pattern * chosen.len() as u128));
                    return None;
                }
                let d = draws.map_or(usize::MAX, |d| d as usize);
                probes = draw_probes(n, &chosen, k, d, seed);
            }
        }
        let threshold = p.threshold.unwrap_or(0.8);
        if !(threshold > 0.0 && threshold <= 1.0) {
            self.err("probes.threshold", format!("the success threshold on the final overlap must be in (0, 1] (got {threshold})"));
        }
        let glauber_temperature = p
            .glauber_temperature
            .or(relaxation_temperature)
            .unwrap_or(0.1);
        if !(glauber_temperature.is_finite() && glauber_temperature >= 0.0) {
            self.err("probes.glauber_temperature", format!("must be a finite temperature ≥ 0 in the units of J (dimensionless; got {glauber_temperature})"));
        }
        let mut count = |key: &str, v: Option<i64>, default: i64| {
            let x = v.unwrap_or(default);
            if !(1..=1_000_000).contains(&x) {
                self.err(key, format!("must be an integer 1 … 1000000 (got {x})"));
            }
            x.clamp(1, 1_000_000) as usize
        };
        let glauber_sweeps = count("probes.glauber_sweeps", p.glauber_sweeps, 100);
        let glauber_runs = count("probes.glauber_runs", p.glauber_runs, 20);
        if self.errors.len() > n_errors {
            return None;
        }
        Some(ProbePlan {
            probes,
            corruption,
            threshold,
            seed,
            glauber_temperature,
            glauber_sweeps,
            glauber_runs,
        })
    }
}

#[cfg(test)]
mod tests {
    use super::super::parse;
    use cavern_model::{CouplingForm, ModeInit};
    use std::f64::consts::TAU;
    use std::path::Path;

    const BASE: &str = "[units]\nsystem = \"physical\"\nfrequency = \"MHz\"\n[time]\nstop = 1.0\n\
                        [sites]\ncount = 4\n[[modes]]\nname = \"readout\"\nlevels = 2\n";

    #[test]
    fn zz_realisation_sets_minus_scale_times_j_and_observes_the_patterns() {
        let cfg = format!(
            "{BASE}[memory]\npatterns = [\"++--\", \"+-+-\"]\nscale = 0.5\n\
             [observe]\npatterns = [\"++++\", \"+-+-\"]\n"
        );
        let p = parse(Path::new("t.toml"), &cfg).unwrap();
        let m = p.memory.as_ref().unwrap();
        // Hebbian J₀₃ = (1/4)(−1 − 1) = −½, so Jᶻ₀₃ = −c·J₀₃ = 2π·0.5·½
        assert!((m.couplings.get(0, 3) + 0.5).abs() < 1e-15);
        assert!((p.network.zz[0][3] - TAU * 0.25).abs() < 1e-12);
        assert_eq!(p.network.zz[0][1], 0.0);
        // stored patterns first, then the extra observed one (the duplicate is dropped)
        assert_eq!(
            p.observe.patterns,
            vec![vec![1, 1, -1, -1], vec![1, -1, 1, -1], vec![1, 1, 1, 1]]
        );
        assert!(m.probes.is_none() && p.network.field_relaxation.is_none());
    }

    #[test]
    fn mode_realisation_appends_one_longitudinal_mode_per_pattern() {
        let cfg = format!(
            "{BASE}[memory]\npatterns = [\"++--\", \"+-+-\"]\nrealisation = \"modes\"\n\
             [memory.modes]\ndetuning = 2.0\nloss = 1.0\ncoupling = 0.1\n"
        );
        let p = parse(Path::new("t.toml"), &cfg).unwrap();
        let net = &p.network;
        assert_eq!(net.modes.len(), 3);
        assert_eq!(p.mode_names, ["readout", "memory0", "memory1"]);
        assert_eq!(net.coupling_form, CouplingForm::Longitudinal);
        assert_eq!(p.initial.modes, vec![ModeInit::Vacuum; 3]);
        // [site][mode]: the readout mode uncoupled, then g ξᵢ^μ (angular)
        assert_eq!(net.coupling[1], vec![0.0, TAU * 0.1, -TAU * 0.1]);
        assert_eq!(net.modes[2].levels, 3);
        assert!(net.zz.is_empty());
        // c = 2N g²Δ/(Δ² + κ²/4), angular: one power of 2π
        let c = 2.0 * 4.0 * 0.01 * 2.0 / (4.0 + 0.25) * TAU;
        assert!((p.memory.unwrap().scale - c).abs() < 1e-12 * c);
    }

    #[test]
    fn probes_are_every_subset_unless_drawn() {
        let mem = format!("{BASE}[memory]\npatterns = [\"++--\", \"+-+-\"]\nscale = 1.0\n");
        let p = parse(
            Path::new("t.toml"),
            &format!("{mem}[probes]\nmax_flips = 2\npatterns = [1]\n"),
        )
        .unwrap();
        let pp = p.memory.unwrap().probes.unwrap();
        assert_eq!(pp.probes.len(), 4 + 6);
        assert!(pp.probes.iter().all(|x| x.pattern == 1));
        assert_eq!((pp.threshold, pp.glauber_temperature), (0.8, 0.1));
        let p = parse(
            Path::new("t.toml"),
            &format!("{mem}[probes]\nmax_flips = 2\ndraws = 3\nseed = 9\n"),
        )
        .unwrap();
        // k = 1: 3 of 4 sets, k = 2: 3 of 6 sets, for each of the two patterns
        assert_eq!(p.memory.unwrap().probes.unwrap().probes.len(), 2 * (3 + 3));
    }
}
