//! The TOML configuration: a raw serde layer (`deny_unknown_fields`, types only), then a resolved
//! [`RunPlan`] in angular units with every value checked. Every error names the file, the line and
//! the dotted key, and says what is allowed.
//!
//! The key reference with units and conventions is in README.md ("Config reference"); each key
//! below is documented once, where it is parsed.

mod memory;

use crate::recall::MemoryPlan;
use crate::units::Units;
use cavern_model::{
    Channel, CouplingForm, Envelope, ModeInit, ModeParams, Network, ProductState, SiteParams,
    SpinInit, C64,
};
use serde::Deserialize;
use std::fmt;
use std::path::{Path, PathBuf};
use toml::Value;

/// One problem found in a config file.
#[derive(Clone, Debug, PartialEq)]
pub struct ConfigError {
    /// The config file.
    pub file: PathBuf,
    /// 1-based line, when it could be located.
    pub line: Option<usize>,
    /// Dotted key path, e.g. `modes[0].levels`.
    pub key: String,
    /// What is wrong and what is allowed.
    pub message: String,
}

impl fmt::Display for ConfigError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self.line {
            Some(l) => write!(f, "{}:{}: ", self.file.display(), l)?,
            None => write!(f, "{}: ", self.file.display())?,
        }
        if self.key.is_empty() {
            write!(f, "{}", self.message)
        } else {
            write!(f, "key `{}`: {}", self.key, self.message)
        }
    }
}

/// All problems found in one config file.
#[derive(Clone, Debug, PartialEq)]
pub struct ConfigErrors(pub Vec<ConfigError>);

impl fmt::Display for ConfigErrors {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        for (k, e) in self.0.iter().enumerate() {
            if k > 0 {
                writeln!(f)?;
            }
            write!(f, "error: {e}")?;
        }
        Ok(())
    }
}

impl std::error::Error for ConfigErrors {}

// ---------------------------------------------------------------------------------------------
// Raw layer

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawConfig {
    title: Option<String>,
    units: RawUnits,
    time: RawTime,
    #[serde(default)]
    solver: RawSolver,
    sites: Option<RawSites>,
    #[serde(default)]
    modes: Vec<RawMode>,
    coupling: Option<RawCoupling>,
    spin_spin: Option<RawSpinSpin>,
    initial: Option<RawInitial>,
    #[serde(default)]
    observe: RawObserve,
    steady_state: Option<RawSteady>,
    /// `[scan]`: read and checked by [`crate::scan`]; a single run ignores it.
    #[serde(rename = "scan")]
    _scan: Option<serde::de::IgnoredAny>,
    memory: Option<memory::RawMemory>,
    probes: Option<memory::RawProbes>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawSteady {
    method: Option<String>,
    tolerance: Option<f64>,
    max_iterations: Option<i64>,
    max_time: Option<f64>,
    relaxation_rates: Option<i64>,
    at_time: Option<f64>,
    preconditioner: Option<String>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawUnits {
    system: String,
    frequency: Option<String>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawTime {
    stop: Option<f64>,
    samples: Option<i64>,
    at: Option<Vec<f64>>,
}

#[derive(Deserialize, Default)]
#[serde(deny_unknown_fields)]
struct RawSolver {
    method: Option<String>,
    rtol: Option<f64>,
    atol: Option<f64>,
    max_step: Option<f64>,
    memory_share: Option<f64>,
    threads: Option<i64>,
    trajectories: Option<i64>,
    seed: Option<Value>,
    keep: Option<i64>,
    bin_width: Option<f64>,
    correlate: Option<String>,
    max_delay: Option<f64>,
    correlate_after: Option<f64>,
}

impl RawSolver {
    /// Names of the trajectory-only keys that are set.
    fn trajectory_keys_set(&self) -> Vec<&'static str> {
        [
            ("trajectories", self.trajectories.is_some()),
            ("seed", self.seed.is_some()),
            ("keep", self.keep.is_some()),
            ("bin_width", self.bin_width.is_some()),
            ("correlate", self.correlate.is_some()),
            ("max_delay", self.max_delay.is_some()),
            ("correlate_after", self.correlate_after.is_some()),
        ]
        .into_iter()
        .filter(|(_, set)| *set)
        .map(|(k, _)| k)
        .collect()
    }
}

#[derive(Default, Clone)]
struct RawSiteValues {
    detuning: Option<f64>,
    decay: Option<f64>,
    dephasing: Option<f64>,
    pump: Option<f64>,
    rabi: Option<f64>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawSites {
    count: i64,
    detuning: Option<f64>,
    decay: Option<f64>,
    dephasing: Option<f64>,
    pump: Option<f64>,
    rabi: Option<f64>,
    rabi_envelope: Option<RawEnvelope>,
    #[serde(default, rename = "override")]
    overrides: Vec<RawSiteOverride>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawSiteOverride {
    index: i64,
    detuning: Option<f64>,
    decay: Option<f64>,
    dephasing: Option<f64>,
    pump: Option<f64>,
    rabi: Option<f64>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawMode {
    name: Option<String>,
    levels: i64,
    detuning: Option<f64>,
    loss: Option<f64>,
    thermal: Option<f64>,
    drive: Option<f64>,
    drive_envelope: Option<RawEnvelope>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawCoupling {
    form: Option<String>,
    strength: Value,
    envelope: Option<RawEnvelope>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawSpinSpin {
    zz: Option<Value>,
    zz_envelope: Option<RawEnvelope>,
    flip_flop: Option<Value>,
    flip_flop_envelope: Option<RawEnvelope>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawInitial {
    spins: Option<Value>,
    bloch: Option<Vec<Vec<f64>>>,
    modes: Option<Vec<Value>>,
}

#[derive(Deserialize, Default)]
#[serde(deny_unknown_fields)]
struct RawObserve {
    spin_axes: Option<Vec<String>>,
    patterns: Option<Vec<Value>>,
    truncation_warning: Option<f64>,
}

#[derive(Deserialize, Clone)]
#[serde(deny_unknown_fields)]
struct RawEnvelope {
    shape: String,
    start: Option<f64>,
    stop: Option<f64>,
    from: Option<f64>,
    to: Option<f64>,
    times: Option<Vec<f64>>,
    values: Option<Vec<f64>>,
    file: Option<String>,
}

// ---------------------------------------------------------------------------------------------
// Resolved plan

/// Which solver runs the model.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Method {
    /// Dense density matrix, adaptive Dormand–Prince 5(4).
    DensityMatrix,
    /// Quantum trajectories (Monte Carlo wave functions), averaged.
    Trajectories,
}

impl Method {
    /// Name used in config and output.
    pub fn name(self) -> &'static str {
        match self {
            Method::DensityMatrix => "density-matrix",
            Method::Trajectories => "trajectories",
        }
    }
}

/// The solver the config asks for.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum MethodRequest {
    /// Always the density matrix.
    DensityMatrix,
    /// Always trajectories.
    Trajectories,
    /// The density matrix when it fits in the memory guard, trajectories otherwise.
    Auto,
}

impl MethodRequest {
    /// Name used in config and output.
    pub fn name(self) -> &'static str {
        match self {
            MethodRequest::DensityMatrix => "density-matrix",
            MethodRequest::Trajectories => "trajectories",
            MethodRequest::Auto => "auto",
        }
    }
}

/// Settings of the trajectory solver and of the click analysis (all times in the time unit).
#[derive(Clone, Debug, PartialEq)]
pub struct TrajectoryPlan {
    /// Number of trajectories (≥ 1).
    pub trajectories: usize,
    /// Run seed (trajectory k uses stream k of ChaCha8 seeded with it).
    pub seed: u64,
    /// Keep the traces of the first `keep` trajectories.
    pub keep: usize,
    /// Width of the click-count, waiting-time and g² delay bins.
    pub bin_width: f64,
    /// The channel whose clicks are correlated (g², waiting times); `None` when the model has no
    /// jump operators.
    pub correlate: Option<Channel>,
    /// Largest delay of g²(τ) (a whole number of bins).
    pub max_delay: f64,
    /// Start of the analysed (assumed stationary) window of g² and the waiting times.
    pub correlate_after: f64,
}

/// Numerical settings of a run.
#[derive(Clone, Debug, PartialEq)]
pub struct SolverPlan {
    /// Solver asked for.
    pub method: MethodRequest,
    /// Relative tolerance.
    pub rtol: f64,
    /// Absolute tolerance (on density-matrix elements, or state-vector amplitudes).
    pub atol: f64,
    /// Largest step, in the time unit (∞ if unset).
    pub max_step: f64,
    /// Share of physical memory the run may use (0, 1].
    pub memory_share: f64,
    /// Worker threads; 0 = one per core.
    pub threads: usize,
    /// Trajectory settings; present for `trajectories` and `auto`.
    pub trajectories: Option<TrajectoryPlan>,
}

/// Which spin components to record.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Default)]
pub struct SpinAxes {
    /// ⟨σˣ⟩.
    pub x: bool,
    /// ⟨σʸ⟩.
    pub y: bool,
    /// ⟨σᶻ⟩.
    pub z: bool,
}

/// What to record at the sample times.
#[derive(Clone, Debug, PartialEq)]
pub struct ObservePlan {
    /// Spin components.
    pub spin_axes: SpinAxes,
    /// ±1 patterns for overlaps m = (1/N) Σ ξᵢ⟨σᶻᵢ⟩.
    pub patterns: Vec<Vec<i8>>,
    /// Warn when a mode's top Fock level holds more than this population.
    pub truncation_warning: f64,
}

/// A fully checked run: the model in angular units, the initial state, times and settings.
#[derive(Clone, Debug)]
pub struct RunPlan {
    /// Config file path.
    pub path: PathBuf,
    /// The config text as read.
    pub source: String,
    /// Optional title.
    pub title: Option<String>,
    /// Unit system.
    pub units: Units,
    /// The network (angular units).
    pub network: Network,
    /// Mode names (default `mode0`, …).
    pub mode_names: Vec<String>,
    /// Initial product state.
    pub initial: ProductState,
    /// Sample times, in the time unit.
    pub times: Vec<f64>,
    /// Solver settings.
    pub solver: SolverPlan,
    /// Observables.
    pub observe: ObservePlan,
    /// Non-fatal remarks about the config (shown by `check` and `run`, stored in the output).
    pub warnings: Vec<String>,
    /// Steady state and relaxation rates, when `[steady_state]` is present.
    pub steady: Option<SteadyPlan>,
    /// Stored patterns and probes, when `[memory]` is present (already applied to `network`,
    /// `initial` and `observe`).
    pub memory: Option<MemoryPlan>,
}

/// Which steady-state solver the config asks for.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum SteadyRequest {
    /// Direct sparse LU when d² is small enough, else GMRES, else time evolution.
    Auto,
    /// Sparse LU of the Liouvillian with the trace condition.
    Direct,
    /// Restarted GMRES, matrix-free, preconditioned ([`SteadyPlan::preconditioner`]).
    Iterative,
    /// Time evolution until dρ/dt is negligible.
    Evolve,
}

impl SteadyRequest {
    /// Name used in config and output.
    pub fn name(self) -> &'static str {
        match self {
            SteadyRequest::Auto => "auto",
            SteadyRequest::Direct => "direct",
            SteadyRequest::Iterative => "iterative",
            SteadyRequest::Evolve => "evolve",
        }
    }
}

/// Settings of the steady-state and relaxation-rate computation (`[steady_state]`).
#[derive(Clone, Debug, PartialEq)]
pub struct SteadyPlan {
    /// Solver.
    pub method: SteadyRequest,
    /// Relative-residual tolerance of the iterative and evolution solvers (`None`: their defaults,
    /// 1e-11 for GMRES on its augmented system and 1e-9 for evolution).
    pub tolerance: Option<f64>,
    /// Matrix–vector products allowed to GMRES.
    pub max_iterations: usize,
    /// Longest evolution of the fallback, in the time unit.
    pub max_time: f64,
    /// Number of Liouvillian eigenvalues near zero to compute (0 = none).
    pub relaxation_rates: usize,
    /// Time at which envelopes are frozen for the steady state (time unit).
    pub at_time: f64,
    /// GMRES preconditioner: `"no-jump"` (default) or `"diagonal"`.
    pub preconditioner: cavern_evolve::steady::GmresPreconditioner,
}

/// Read and resolve a config file.
///
/// # Errors
/// [`ConfigErrors`] listing every problem found (a TOML syntax or type error stops at the first).
pub fn load(path: &Path) -> Result<RunPlan, ConfigErrors> {
    let text = std::fs::read_to_string(path).map_err(|e| {
        ConfigErrors(vec![ConfigError {
            file: path.to_path_buf(),
            line: None,
            key: String::new(),
            message: format!("cannot read the config file: {e}"),
        }])
    })?;
    parse(path, &text)
}

/// Resolve config text (read from `path`, which is used for messages and relative CSV files).
///
/// # Errors
/// As [`load`].
pub fn parse(path: &Path, text: &str) -> Result<RunPlan, ConfigErrors> {
    let raw: RawConfig =
        toml::from_str(text).map_err(|e| ConfigErrors(vec![serde_error(path, text, &e)]))?;
    let mut r = Resolver {
        path: path.to_path_buf(),
        text: text.to_string(),
        errors: Vec::new(),
        warnings: Vec::new(),
        doc: None,
    };
    r.doc = text.parse::<toml_edit::ImDocument<String>>().ok();
    let plan = r.resolve(raw);
    match plan {
        Some(p) if r.errors.is_empty() => Ok(p),
        _ => Err(ConfigErrors(r.errors)),
    }
}

/// The 1-based line of the dotted key `key` (e.g. `modes[1].loss`) in the config text `text`, when
/// it is present (or the line of its closest present parent).
pub fn key_line(text: &str, key: &str) -> Option<usize> {
    let r = Resolver {
        path: PathBuf::new(),
        text: text.to_string(),
        errors: Vec::new(),
        warnings: Vec::new(),
        doc: text.parse::<toml_edit::ImDocument<String>>().ok(),
    };
    r.locate(key)
}

fn line_of(text: &str, offset: usize) -> usize {
    text[..offset.min(text.len())].matches('\n').count() + 1
}

/// Turn a TOML/serde error into a located message with the dotted key and a suggestion.
pub(crate) fn serde_error(path: &Path, text: &str, e: &toml::de::Error) -> ConfigError {
    let line = e.span().map(|s| line_of(text, s.start));
    let mut message = e.message().trim().replace('\n', "; ");
    let key = line.map(|l| key_at_line(text, l)).unwrap_or_default();
    if let Some(rest) = message.strip_prefix("unknown field `") {
        if let Some(end) = rest.find('`') {
            let bad = &rest[..end];
            let allowed: Vec<&str> = rest[end..].split('`').skip(2).step_by(2).collect();
            let mut m = format!("unknown key `{bad}`");
            if let Some(best) = nearest(bad, &allowed) {
                m.push_str(&format!(" (did you mean `{best}`?)"));
            }
            if !allowed.is_empty() {
                m.push_str(&format!("; allowed here: {}", allowed.join(", ")));
            }
            message = m;
        }
    } else if message.starts_with("invalid type") {
        message = format!("wrong type: {message}");
    }
    ConfigError {
        file: path.to_path_buf(),
        line,
        key,
        message,
    }
}

/// Best-effort dotted key for a line: the enclosing `[table]` header plus the key on that line.
fn key_at_line(text: &str, line: usize) -> String {
    let lines: Vec<&str> = text.lines().collect();
    let Some(this) = lines.get(line.saturating_sub(1)) else {
        return String::new();
    };
    let mut header = String::new();
    for (k, l) in lines[..line.saturating_sub(1)].iter().enumerate().rev() {
        let t = l.trim();
        if t.starts_with('[') {
            header = t.trim_matches(|c| c == '[' || c == ']').trim().to_string();
            if t.starts_with("[[") {
                // index of this array-of-tables entry
                let idx = lines[..k].iter().filter(|x| x.trim() == t).count();
                header = format!("{header}[{idx}]");
            }
            break;
        }
    }
    let t = this.trim();
    if t.starts_with('[') {
        return t.trim_matches(|c| c == '[' || c == ']').trim().to_string();
    }
    let key = t.split('=').next().unwrap_or("").trim();
    match (header.is_empty(), key.is_empty()) {
        (true, _) => key.to_string(),
        (false, true) => header,
        (false, false) => format!("{header}.{key}"),
    }
}

/// The allowed name closest to `bad` by edit distance, if reasonably close.
pub fn nearest<'a>(bad: &str, allowed: &[&'a str]) -> Option<&'a str> {
    let best = allowed
        .iter()
        .map(|a| (levenshtein(bad, a), *a))
        .min_by_key(|x| x.0)?;
    (best.0 <= 2.max(bad.len() / 3)).then_some(best.1)
}

fn levenshtein(a: &str, b: &str) -> usize {
    let a: Vec<char> = a.chars().collect();
    let b: Vec<char> = b.chars().collect();
    let mut prev: Vec<usize> = (0..=b.len()).collect();
    for i in 1..=a.len() {
        let mut cur = vec![i; b.len() + 1];
        for j in 1..=b.len() {
            let sub = prev[j - 1] + usize::from(a[i - 1] != b[j - 1]);
            cur[j] = sub.min(prev[j] + 1).min(cur[j - 1] + 1);
        }
        prev = cur;
    }
    prev[b.len()]
}

struct Resolver {
    path: PathBuf,
    text: String,
    errors: Vec<ConfigError>,
    warnings: Vec<String>,
    doc: Option<toml_edit::ImDocument<String>>,
}

enum Node<'a> {
    Item(&'a toml_edit::Item),
    Value(&'a toml_edit::Value),
    Table(&'a toml_edit::Table),
}

impl Resolver {
    /// Locate a dotted path like `modes[1].levels` or `coupling.strength[2][0]` in the document.
    fn locate(&self, key: &str) -> Option<usize> {
        let doc = self.doc.as_ref()?;
        let mut node = Node::Table(doc.as_table());
        let mut best: Option<std::ops::Range<usize>> = None;
        for seg in key.split('.') {
            let (name, idx) = match seg.find('[') {
                Some(p) => (&seg[..p], &seg[p..]),
                None => (seg, ""),
            };
            let next = match node {
                Node::Table(t) => t.get_key_value(name).map(|(k, it)| {
                    best = k.span().or(it.span()).or(best.clone());
                    Node::Item(it)
                }),
                Node::Item(it) => match it {
                    toml_edit::Item::Table(t) => t.get_key_value(name).map(|(k, it)| {
                        best = k.span().or(it.span()).or(best.clone());
                        Node::Item(it)
                    }),
                    toml_edit::Item::Value(toml_edit::Value::InlineTable(t)) => {
                        t.get_key_value(name).map(|(k, it)| {
                            best = k.span().or(it.span()).or(best.clone());
                            Node::Item(it)
                        })
                    }
                    _ => None,
                },
                Node::Value(toml_edit::Value::InlineTable(t)) => {
                    t.get_key_value(name).map(|(k, it)| {
                        best = k.span().or(it.span()).or(best.clone());
                        Node::Item(it)
                    })
                }
                Node::Value(_) => None,
            };
            let Some(mut cur) = next else { break };
            for part in idx.split(']').filter(|p| p.starts_with('[')) {
                let Ok(i) = part[1..].parse::<usize>() else {
                    break;
                };
                cur = match cur {
                    Node::Item(toml_edit::Item::ArrayOfTables(a)) => match a.get(i) {
                        Some(t) => {
                            best = t.span().or(best.clone());
                            Node::Table(t)
                        }
                        None => break,
                    },
                    Node::Item(toml_edit::Item::Value(toml_edit::Value::Array(a)))
                    | Node::Value(toml_edit::Value::Array(a)) => match a.get(i) {
                        Some(v) => {
                            best = v.span().or(best.clone());
                            Node::Value(v)
                        }
                        None => break,
                    },
                    _ => break,
                };
            }
            node = cur;
        }
        best.map(|s| line_of(&self.text, s.start))
    }

    fn err(&mut self, key: &str, message: impl Into<String>) {
        let message = message.into();
        if self
            .errors
            .iter()
            .any(|e| e.key == key && e.message == message)
        {
            return; // a default shared by several sites is reported once
        }
        let line = self.locate(key);
        self.errors.push(ConfigError {
            file: self.path.clone(),
            line,
            key: key.into(),
            message,
        });
    }

    fn rate(&mut self, key: &str, v: Option<f64>, units: Units, what: &str) -> f64 {
        let x = v.unwrap_or(0.0);
        if !x.is_finite() || x < 0.0 {
            self.err(
                key,
                format!(
                    "{what} must be a finite number ≥ 0 (got {x}); units: {}",
                    units.frequency_label()
                ),
            );
            return 0.0;
        }
        units.angular(x)
    }

    fn freq(&mut self, key: &str, v: Option<f64>, units: Units, what: &str) -> f64 {
        let x = v.unwrap_or(0.0);
        if !x.is_finite() {
            self.err(
                key,
                format!(
                    "{what} must be a finite number (got {x}); units: {}",
                    units.frequency_label()
                ),
            );
            return 0.0;
        }
        units.angular(x)
    }

    fn resolve(&mut self, raw: RawConfig) -> Option<RunPlan> {
        // [units]
        let units = match Units::parse(&raw.units.system, raw.units.frequency.as_deref()) {
            Some(u) => u,
            None => {
                if raw.units.system != "physical" && raw.units.system != "dimensionless" {
                    let hint = nearest(&raw.units.system, &["physical", "dimensionless"])
                        .map(|s| format!(" (did you mean `{s}`?)"))
                        .unwrap_or_default();
                    self.err("units.system", format!("unknown unit system `{}`{hint}; allowed: \"physical\", \"dimensionless\"", raw.units.system));
                } else {
                    let got = raw.units.frequency.as_deref().unwrap_or("(missing)");
                    self.err("units.frequency", format!("unknown frequency unit `{got}`; allowed with system = \"physical\": \"kHz\", \"MHz\", \"GHz\""));
                }
                Units::Dimensionless
            }
        };
        if units == Units::Dimensionless
            && raw.units.frequency.is_some()
            && raw.units.system == "dimensionless"
        {
            self.err(
                "units.frequency",
                "`frequency` is only allowed with system = \"physical\"",
            );
        }

        let times = self.resolve_time(&raw.time);
        let solver = self.resolve_solver(&raw.solver);

        // [sites]
        let (n_sites, mut network) = match &raw.sites {
            None => (0, Network::empty()),
            Some(s) => self.resolve_sites(s, units),
        };

        // [[modes]]
        let mut mode_names = Vec::new();
        for (m, md) in raw.modes.iter().enumerate() {
            let key = |k: &str| format!("modes[{m}].{k}");
            let levels = if md.levels < 2 || md.levels > 1_000_000 {
                self.err(&key("levels"), format!("the Fock truncation needs at least 2 Fock levels and at most 1000000 (got {}); allowed: an integer 2 … 1000000", md.levels));
                2
            } else {
                md.levels as usize
            };
            let thermal = md.thermal.unwrap_or(0.0);
            if !thermal.is_finite() || thermal < 0.0 {
                self.err(&key("thermal"), format!("thermal occupation n_th must be a finite number ≥ 0 (got {thermal}; dimensionless, mean photons)"));
            }
            let drive_envelope = self.envelope(&key("drive_envelope"), md.drive_envelope.as_ref());
            network.modes.push(ModeParams {
                levels,
                detuning: self.freq(&key("detuning"), md.detuning, units, "detuning Δc/2π"),
                loss: self.rate(&key("loss"), md.loss, units, "loss rate κ/2π"),
                thermal: if thermal.is_finite() && thermal >= 0.0 {
                    thermal
                } else {
                    0.0
                },
                drive: self.freq(&key("drive"), md.drive, units, "drive amplitude ε/2π"),
                drive_envelope,
            });
            mode_names.push(md.name.clone().unwrap_or_else(|| format!("mode{m}")));
        }
        let n_modes = network.modes.len();

        // [coupling]
        if let Some(c) = &raw.coupling {
            network.coupling_form = match c.form.as_deref().unwrap_or("exchange") {
                "exchange" => CouplingForm::Exchange,
                "dipole" => CouplingForm::Dipole,
                other => {
                    self.err("coupling.form", format!("unknown coupling form `{other}`; allowed: \"exchange\" (g(aσ⁺ + a†σ⁻)), \"dipole\" (g(a + a†)σˣ)"));
                    CouplingForm::Exchange
                }
            };
            if let Some(g) = self.matrix(
                "coupling.strength",
                &c.strength,
                n_sites,
                n_modes,
                "sites × modes",
            ) {
                network.coupling = g
                    .into_iter()
                    .map(|row| row.into_iter().map(|x| units.angular(x)).collect())
                    .collect();
            }
            network.coupling_envelope = self.envelope("coupling.envelope", c.envelope.as_ref());
        }

        // [spin_spin]
        if let Some(ss) = &raw.spin_spin {
            for (name, val, env) in [
                ("zz", &ss.zz, &ss.zz_envelope),
                ("flip_flop", &ss.flip_flop, &ss.flip_flop_envelope),
            ] {
                let Some(v) = val else { continue };
                let key = format!("spin_spin.{name}");
                if let Some(mut m) = self.matrix(&key, v, n_sites, n_sites, "sites × sites") {
                    if v.is_float() || v.is_integer() {
                        // one number means every pair i ≠ j
                        (0..n_sites).for_each(|i| m[i][i] = 0.0);
                    }
                    let mut ok = true;
                    for i in 0..n_sites {
                        if m[i][i] != 0.0 {
                            self.err(&format!("{key}[{i}][{i}]"), format!("the diagonal must be 0 (got {}); a site does not couple to itself", m[i][i]));
                            ok = false;
                        }
                        for j in 0..i {
                            if m[i][j] != m[j][i] {
                                self.err(&format!("{key}[{i}][{j}]"), format!("the matrix must be symmetric: [{i}][{j}] = {} but [{j}][{i}] = {}", m[i][j], m[j][i]));
                                ok = false;
                            }
                        }
                    }
                    if ok {
                        let m: Vec<Vec<f64>> = m
                            .into_iter()
                            .map(|r| r.into_iter().map(|x| units.angular(x)).collect())
                            .collect();
                        if name == "zz" {
                            network.zz = m;
                        } else {
                            network.flip_flop = m;
                        }
                    }
                }
                let e = self.envelope(&format!("spin_spin.{name}_envelope"), env.as_ref());
                if name == "zz" {
                    network.zz_envelope = e;
                } else {
                    network.flip_flop_envelope = e;
                }
            }
        }

        let mut initial = self.resolve_initial(raw.initial.as_ref(), n_sites, &network.modes);
        let memory = self.resolve_memory(
            raw.memory.as_ref(),
            raw.probes.as_ref(),
            memory::Target {
                has_zz: raw.spin_spin.as_ref().is_some_and(|s| s.zz.is_some()),
                has_coupling: raw.coupling.is_some(),
                network: &mut network,
                initial: &mut initial,
                mode_names: &mut mode_names,
                method: solver.method,
                units,
            },
        );
        let mut observe = self.resolve_observe(&raw.observe, n_sites);
        if let Some(m) = &memory {
            // the stored patterns are observed first, then any other configured pattern
            let extra: Vec<Vec<i8>> = std::mem::take(&mut observe.patterns)
                .into_iter()
                .filter(|p| !m.patterns.contains(p))
                .collect();
            observe.patterns = m.patterns.iter().cloned().chain(extra).collect();
        }
        let t_end = times.last().copied().unwrap_or(0.0);
        let steady = raw
            .steady_state
            .as_ref()
            .map(|st| self.resolve_steady(st, t_end));
        let mut solver = solver;
        solver.trajectories = self.resolve_trajectories(
            &raw.solver,
            solver.method,
            &times,
            &network,
            &initial,
            units,
        );

        // final structural check by the model itself (should pass after the checks above)
        if self.errors.is_empty() {
            if let Err(e) = network.validate() {
                self.err("", format!("the model is inconsistent: {e}"));
            }
        }
        Some(RunPlan {
            path: self.path.clone(),
            source: self.text.clone(),
            title: raw.title,
            units,
            network,
            mode_names,
            initial,
            times,
            solver,
            observe,
            warnings: std::mem::take(&mut self.warnings),
            steady,
            memory,
        })
    }

    fn resolve_steady(&mut self, st: &RawSteady, t_end: f64) -> SteadyPlan {
        let method = match st.method.as_deref().unwrap_or("auto") {
            "auto" => SteadyRequest::Auto,
            "direct" => SteadyRequest::Direct,
            "iterative" => SteadyRequest::Iterative,
            "evolve" => SteadyRequest::Evolve,
            other => {
                let hint = nearest(other, &["auto", "direct", "iterative", "evolve"])
                    .map(|s| format!(" (did you mean \"{s}\"?)"))
                    .unwrap_or_default();
                self.err(
                    "steady_state.method",
                    format!("unknown steady-state method `{other}`{hint}; allowed: \"auto\", \"direct\", \"iterative\", \"evolve\""),
                );
                SteadyRequest::Auto
            }
        };
        if let Some(t) = st.tolerance {
            if !(t > 0.0 && t < 1.0) {
                self.err(
                    "steady_state.tolerance",
                    format!("must be a relative residual in (0, 1) (got {t})"),
                );
            }
        }
        use cavern_evolve::steady::GmresPreconditioner as Gp;
        let preconditioner = match st.preconditioner.as_deref().unwrap_or("no-jump") {
            "no-jump" => Gp::NoJump,
            "diagonal" => Gp::Diagonal,
            other => {
                let hint = nearest(other, &["no-jump", "diagonal"])
                    .map(|s| format!(" (did you mean \"{s}\"?)"))
                    .unwrap_or_default();
                self.err(
                    "steady_state.preconditioner",
                    format!("unknown GMRES preconditioner `{other}`{hint}; allowed: \"no-jump\", \"diagonal\""),
                );
                Gp::NoJump
            }
        };
        let max_iterations = st.max_iterations.unwrap_or(5000);
        if !(1..=100_000_000).contains(&max_iterations) {
            self.err(
                "steady_state.max_iterations",
                format!("must be an integer 1 … 100000000 (got {max_iterations})"),
            );
        }
        let max_time = st.max_time.unwrap_or(1e6);
        if !(max_time > 0.0 && max_time.is_finite()) {
            self.err(
                "steady_state.max_time",
                format!("must be a finite time > 0, in the time unit (got {max_time})"),
            );
        }
        let rates = st.relaxation_rates.unwrap_or(6);
        if !(0..=100).contains(&rates) {
            self.err(
                "steady_state.relaxation_rates",
                format!("must be an integer 0 … 100 (got {rates})"),
            );
        }
        let at_time = st.at_time.unwrap_or(t_end);
        if !(at_time >= 0.0 && at_time.is_finite()) {
            self.err(
                "steady_state.at_time",
                format!("must be a finite time ≥ 0, in the time unit (got {at_time})"),
            );
        }
        SteadyPlan {
            method,
            tolerance: st.tolerance.filter(|t| *t > 0.0 && *t < 1.0),
            max_iterations: max_iterations.clamp(1, 100_000_000) as usize,
            max_time: if max_time > 0.0 && max_time.is_finite() {
                max_time
            } else {
                1e6
            },
            relaxation_rates: rates.clamp(0, 100) as usize,
            preconditioner,
            at_time: if at_time >= 0.0 && at_time.is_finite() {
                at_time
            } else {
                t_end
            },
        }
    }

    fn resolve_time(&mut self, t: &RawTime) -> Vec<f64> {
        match (&t.at, t.stop, t.samples) {
            (Some(at), None, None) => {
                if at.is_empty() {
                    self.err("time.at", "needs at least one sample time");
                } else if at.iter().any(|x| !x.is_finite() || *x < 0.0) {
                    self.err(
                        "time.at",
                        "sample times must be finite and ≥ 0 (the run starts at t = 0)",
                    );
                } else if at.windows(2).any(|w| w[1] <= w[0]) {
                    self.err("time.at", "sample times must be strictly increasing");
                }
                let mut v = at.clone();
                if v.first().is_some_and(|&x| x > 0.0) {
                    v.insert(0, 0.0);
                }
                v
            }
            (None, Some(stop), samples) => {
                let n = samples.unwrap_or(101);
                if !stop.is_finite() || stop <= 0.0 {
                    self.err(
                        "time.stop",
                        format!("the end time must be a finite number > 0 (got {stop})"),
                    );
                    return vec![0.0];
                }
                if !(2..=10_000_000).contains(&n) {
                    self.err(
                        "time.samples",
                        format!("the number of samples must be an integer 2 … 10000000 (got {n})"),
                    );
                    return vec![0.0, stop];
                }
                let n = n as usize;
                (0..n)
                    .map(|k| {
                        if k + 1 == n {
                            stop
                        } else {
                            stop * k as f64 / (n - 1) as f64
                        }
                    })
                    .collect()
            }
            _ => {
                self.err("time", "give either `stop` (with optional `samples`, default 101) or an explicit list `at`, not both");
                vec![0.0]
            }
        }
    }

    fn resolve_solver(&mut self, s: &RawSolver) -> SolverPlan {
        let method = match s.method.as_deref().unwrap_or("density-matrix") {
            "density-matrix" => MethodRequest::DensityMatrix,
            "trajectories" => MethodRequest::Trajectories,
            "auto" => MethodRequest::Auto,
            other => {
                let allowed = ["density-matrix", "trajectories", "auto"];
                let hint = nearest(other, &allowed)
                    .map(|s| format!(" (did you mean \"{s}\"?)"))
                    .unwrap_or_default();
                self.err(
                    "solver.method",
                    format!("unknown method \"{other}\"{hint}; allowed: \"density-matrix\", \"trajectories\", \"auto\""),
                );
                MethodRequest::DensityMatrix
            }
        };
        let mut tol = |key: &str, v: Option<f64>, default: f64| {
            let x = v.unwrap_or(default);
            if !(x > 0.0 && x < 1.0) {
                self.err(
                    key,
                    format!("a tolerance must be a number in (0, 1) (got {x})"),
                );
                return default;
            }
            x
        };
        let rtol = tol("solver.rtol", s.rtol, 1e-6);
        let atol = tol("solver.atol", s.atol, 1e-9);
        let max_step = s.max_step.unwrap_or(f64::INFINITY);
        if !(max_step > 0.0) {
            self.err(
                "solver.max_step",
                format!("must be > 0, in the time unit (got {max_step})"),
            );
        }
        let memory_share = s.memory_share.unwrap_or(0.5);
        if !(memory_share > 0.0 && memory_share <= 1.0) {
            self.err(
                "solver.memory_share",
                format!("must be a fraction in (0, 1] of physical memory (got {memory_share})"),
            );
        }
        let threads = s.threads.unwrap_or(0);
        if !(0..=4096).contains(&threads) {
            self.err(
                "solver.threads",
                format!("must be an integer 0 … 4096, 0 meaning one per core (got {threads})"),
            );
        }
        SolverPlan {
            method,
            rtol,
            atol,
            max_step: if max_step > 0.0 {
                max_step
            } else {
                f64::INFINITY
            },
            memory_share: if memory_share > 0.0 && memory_share <= 1.0 {
                memory_share
            } else {
                0.5
            },
            threads: threads.clamp(0, 4096) as usize,
            trajectories: None,
        }
    }

    /// The trajectory settings: required for `trajectories` and `auto` (auto may pick them on a
    /// smaller machine, so a config valid on one machine stays valid on another), checked but
    /// unused (with a warning) for `density-matrix`.
    fn resolve_trajectories(
        &mut self,
        s: &RawSolver,
        method: MethodRequest,
        times: &[f64],
        network: &Network,
        initial: &ProductState,
        units: Units,
    ) -> Option<TrajectoryPlan> {
        let set = s.trajectory_keys_set();
        if method == MethodRequest::DensityMatrix {
            if set.is_empty() {
                return None;
            }
            self.warnings.push(format!(
                "{}: [solver] {} only apply to method = \"trajectories\" or \"auto\"; they are ignored with method = \"density-matrix\"",
                self.path.display(),
                set.iter().map(|k| format!("`{k}`")).collect::<Vec<_>>().join(", ")
            ));
        }
        let tu = units.time_label();
        let why = match method {
            MethodRequest::Auto => " (method = \"auto\" runs trajectories when the density matrix does not fit in memory, so it needs them too)",
            _ => "",
        };
        let n_before = self.errors.len();
        let trajectories = match s.trajectories {
            None => {
                if method != MethodRequest::DensityMatrix {
                    self.err(
                        "solver",
                        format!("the trajectory solver needs `trajectories`, the number of trajectories to average (an integer ≥ 1, e.g. trajectories = 1000){why}"),
                    );
                }
                1
            }
            Some(n) if (1..=1_000_000_000).contains(&n) => n as usize,
            Some(n) => {
                self.err(
                    "solver.trajectories",
                    format!(
                        "the number of trajectories must be an integer 1 … 1000000000 (got {n})"
                    ),
                );
                1
            }
        };
        let seed_help = "an explicit integer 0 … 9223372036854775807 (e.g. seed = 1), so that the run is reproducible: the same seed gives the same trajectories";
        let seed = match &s.seed {
            None => {
                if method != MethodRequest::DensityMatrix {
                    self.err(
                        "solver",
                        format!("the trajectory solver needs `seed`, {seed_help}; there is no random default{why}"),
                    );
                }
                0
            }
            Some(Value::Integer(x)) if *x >= 0 => *x as u64,
            Some(Value::String(text)) => {
                self.err(
                    "solver.seed",
                    format!(
                        "the seed must be {seed_help}; a string such as \"{text}\" is not accepted"
                    ),
                );
                0
            }
            Some(other) => {
                self.err(
                    "solver.seed",
                    format!("the seed must be {seed_help} (got {other})"),
                );
                0
            }
        };
        let keep = match s.keep.unwrap_or(0) {
            k if k >= 0 && (k as u64) <= trajectories as u64 => k as usize,
            k => {
                self.err(
                    "solver.keep",
                    format!("the number of kept trajectory traces must be an integer 0 … trajectories = {trajectories} (got {k})"),
                );
                0
            }
        };
        let t_end = times.last().copied().unwrap_or(0.0);
        if !(t_end > 0.0) {
            if self.errors.len() == n_before
                && !self.errors.iter().any(|e| e.key.starts_with("time"))
            {
                self.err("time", "the trajectory solver needs a run longer than t = 0 (click counts are binned over the run)");
            }
            return None;
        }
        // bin width: default the mean sample spacing
        let default_bin = t_end / (times.len().max(2) - 1) as f64;
        let bin_width = match s.bin_width {
            None => default_bin,
            Some(b) if b > 0.0 && b <= t_end => b,
            Some(b) => {
                self.err(
                    "solver.bin_width",
                    format!("the click-count bin width must be > 0 and at most the run length {t_end} (time unit: {tu}; got {b})"),
                );
                default_bin
            }
        };
        let correlate_after = match s.correlate_after {
            None => 0.0,
            Some(a) if a >= 0.0 && a + bin_width <= t_end => a,
            Some(a) => {
                self.err(
                    "solver.correlate_after",
                    format!("the start of the analysed window must be ≥ 0 and leave at least one bin (bin_width = {bin_width}) before the end of the run at {t_end} (time unit: {tu}; got {a})"),
                );
                0.0
            }
        };
        let window = t_end - correlate_after;
        let max_delay = match s.max_delay {
            None => (window / 10.0).max(bin_width).min(window),
            Some(m) if m >= bin_width && m <= window => m,
            Some(m) => {
                self.err(
                    "solver.max_delay",
                    format!("the largest g² delay must be at least one bin (bin_width = {bin_width}) and at most the analysed window {window} = end {t_end} − correlate_after {correlate_after} (time unit: {tu}; got {m})"),
                );
                bin_width
            }
        };
        let channels = network.channels();
        let labels: Vec<String> = channels.iter().map(Channel::label).collect();
        let correlate = match &s.correlate {
            Some(name) => match labels.iter().position(|l| l == name) {
                Some(k) => Some(channels[k]),
                None => {
                    let refs: Vec<&str> = labels.iter().map(String::as_str).collect();
                    let hint = nearest(name, &refs)
                        .map(|s| format!(" (did you mean \"{s}\"?)"))
                        .unwrap_or_default();
                    let allowed = if labels.is_empty() {
                        "none: this model has no jump operators (no loss, decay, dephasing or pump)"
                            .to_string()
                    } else {
                        labels
                            .iter()
                            .map(|l| format!("\"{l}\""))
                            .collect::<Vec<_>>()
                            .join(", ")
                    };
                    self.err(
                        "solver.correlate",
                        format!("unknown jump channel \"{name}\"{hint}; the channels of this model are {allowed}"),
                    );
                    None
                }
            },
            None => channels
                .iter()
                .find(|c| **c == Channel::ModeLoss(0))
                .or_else(|| channels.iter().find(|c| **c == Channel::SiteDecay(0)))
                .or(channels.first())
                .copied(),
        };
        if method == MethodRequest::Trajectories {
            self.require_pure(initial, "method = \"trajectories\"");
        }
        if method == MethodRequest::DensityMatrix {
            return None; // checked, but unused (the warning above says so)
        }
        Some(TrajectoryPlan {
            trajectories,
            seed,
            keep,
            bin_width,
            correlate,
            max_delay,
            correlate_after,
        })
    }

    /// Trajectories evolve state vectors: a mixed (thermal) initial mode state is refused.
    fn require_pure(&mut self, initial: &ProductState, what: &str) {
        for (m, st) in initial.modes.iter().enumerate() {
            if let ModeInit::Thermal(nbar) = st {
                self.err(
                    &format!("initial.modes[{m}]"),
                    format!("{what} evolves pure states (state vectors), but a thermal state (n̄ = {nbar}) is mixed; use method = \"density-matrix\", or a pure initial state (\"vacuum\", {{ fock = n }}, {{ coherent = α }})"),
                );
            }
        }
    }

    fn resolve_sites(&mut self, s: &RawSites, units: Units) -> (usize, Network) {
        let mut net = Network::empty();
        if !(1..=24).contains(&s.count) {
            self.err(
                "sites.count",
                format!(
                    "the number of sites must be an integer 1 … 24 (got {})",
                    s.count
                ),
            );
            return (0, net);
        }
        let n = s.count as usize;
        let base = RawSiteValues {
            detuning: s.detuning,
            decay: s.decay,
            dephasing: s.dephasing,
            pump: s.pump,
            rabi: s.rabi,
        };
        let mut per_site: Vec<(RawSiteValues, String)> = (0..n)
            .map(|_| (base.clone(), "sites".to_string()))
            .collect();
        let mut seen = vec![false; n];
        for (k, o) in s.overrides.iter().enumerate() {
            let key = format!("sites.override[{k}]");
            if o.index < 0 || o.index as usize >= n {
                self.err(
                    &format!("{key}.index"),
                    format!(
                        "site index {} is out of range; allowed: 0 … {}",
                        o.index,
                        n - 1
                    ),
                );
                continue;
            }
            let i = o.index as usize;
            if seen[i] {
                self.err(
                    &format!("{key}.index"),
                    format!("site {i} is overridden twice"),
                );
            }
            seen[i] = true;
            let v = o;
            let p = &mut per_site[i].0;
            p.detuning = v.detuning.or(p.detuning);
            p.decay = v.decay.or(p.decay);
            p.dephasing = v.dephasing.or(p.dephasing);
            p.pump = v.pump.or(p.pump);
            p.rabi = v.rabi.or(p.rabi);
            per_site[i].1 = key;
        }
        for (v, key) in per_site {
            let k = |f: &str| format!("{key}.{f}");
            net.sites.push(SiteParams {
                detuning: self.freq(&k("detuning"), v.detuning, units, "detuning Δa/2π"),
                decay: self.rate(&k("decay"), v.decay, units, "decay rate γ/2π"),
                dephasing: self.rate(&k("dephasing"), v.dephasing, units, "dephasing rate γφ/2π"),
                pump: self.rate(&k("pump"), v.pump, units, "pump rate P/2π"),
                rabi: self.freq(&k("rabi"), v.rabi, units, "Rabi frequency Ω/2π"),
            });
        }
        net.rabi_envelope = self.envelope("sites.rabi_envelope", s.rabi_envelope.as_ref());
        (n, net)
    }

    /// A `rows × cols` matrix: either one number (all entries) or nested arrays.
    fn matrix(
        &mut self,
        key: &str,
        v: &Value,
        rows: usize,
        cols: usize,
        what: &str,
    ) -> Option<Vec<Vec<f64>>> {
        let num = |x: &Value| match x {
            Value::Float(f) => Some(*f),
            Value::Integer(i) => Some(*i as f64),
            _ => None,
        };
        if let Some(x) = num(v) {
            if !x.is_finite() {
                self.err(key, format!("must be finite (got {x})"));
                return None;
            }
            return Some(vec![vec![x; cols]; rows]);
        }
        let Value::Array(rs) = v else {
            self.err(
                key,
                format!(
                    "wrong type: expected a number or a {what} matrix ({rows}×{cols}) of numbers"
                ),
            );
            return None;
        };
        if rs.len() != rows {
            self.err(
                key,
                format!(
                    "wrong shape: expected {rows} rows ({what} = {rows}×{cols}), got {} rows",
                    rs.len()
                ),
            );
            return None;
        }
        let mut out = Vec::with_capacity(rows);
        for (i, r) in rs.iter().enumerate() {
            let Value::Array(cs) = r else {
                self.err(
                    &format!("{key}[{i}]"),
                    format!("wrong type: row {i} must be an array of {cols} numbers"),
                );
                return None;
            };
            if cs.len() != cols {
                self.err(&format!("{key}[{i}]"), format!("wrong shape: row {i} has {} entries, expected {cols} ({what} = {rows}×{cols})", cs.len()));
                return None;
            }
            let mut row = Vec::with_capacity(cols);
            for (j, c) in cs.iter().enumerate() {
                match num(c) {
                    Some(x) if x.is_finite() => row.push(x),
                    _ => {
                        self.err(
                            &format!("{key}[{i}][{j}]"),
                            format!("must be a finite number (got {c})"),
                        );
                        return None;
                    }
                }
            }
            out.push(row);
        }
        Some(out)
    }

    fn envelope(&mut self, key: &str, e: Option<&RawEnvelope>) -> Envelope {
        let Some(e) = e else {
            return Envelope::Constant;
        };
        let fields_used = |names: &[&str]| -> Vec<&'static str> {
            let mut extra = Vec::new();
            let all: [(&'static str, bool); 7] = [
                ("start", e.start.is_some()),
                ("stop", e.stop.is_some()),
                ("from", e.from.is_some()),
                ("to", e.to.is_some()),
                ("times", e.times.is_some()),
                ("values", e.values.is_some()),
                ("file", e.file.is_some()),
            ];
            for (n, set) in all {
                if set && !names.contains(&n) {
                    extra.push(n);
                }
            }
            extra
        };
        let shapes = ["constant", "ramp", "smooth-step", "table"];
        let (allowed, env): (&[&str], Option<Envelope>) = match e.shape.as_str() {
            "constant" => (&[], Some(Envelope::Constant)),
            "ramp" | "smooth-step" => {
                let names: &[&str] = &["start", "stop", "from", "to"];
                match (e.start, e.stop) {
                    (Some(start), Some(stop))
                        if start.is_finite() && stop.is_finite() && stop > start =>
                    {
                        let from = e.from.unwrap_or(0.0);
                        let to = e.to.unwrap_or(1.0);
                        if !from.is_finite() || !to.is_finite() {
                            self.err(key, "`from` and `to` must be finite numbers");
                        }
                        let env = if e.shape == "ramp" {
                            Envelope::Ramp {
                                start,
                                stop,
                                from,
                                to,
                            }
                        } else {
                            Envelope::SmoothStep {
                                start,
                                stop,
                                from,
                                to,
                            }
                        };
                        (names, Some(env))
                    }
                    _ => {
                        self.err(key, format!("shape \"{}\" needs finite `start` < `stop` (time unit); `from` (default 0) and `to` (default 1) are optional", e.shape));
                        (names, None)
                    }
                }
            }
            "table" => {
                let names: &[&str] = &["times", "values", "file"];
                let table = match (&e.file, &e.times, &e.values) {
                    (Some(f), None, None) => self.csv_table(key, f),
                    (None, Some(t), Some(v)) => Some((t.clone(), v.clone())),
                    _ => {
                        self.err(key, "shape \"table\" needs either `times` and `values` (same length) or `file` (a CSV of time,value rows)");
                        None
                    }
                };
                let env = table.and_then(|(t, v)| match Envelope::table(t, v) {
                    Ok(env) => Some(env),
                    Err(err) => {
                        self.err(key, err.to_string());
                        None
                    }
                });
                (names, env)
            }
            other => {
                let hint = nearest(other, &shapes)
                    .map(|s| format!(" (did you mean \"{s}\"?)"))
                    .unwrap_or_default();
                self.err(&format!("{key}.shape"), format!("unknown envelope shape \"{other}\"{hint}; allowed: \"constant\", \"ramp\", \"smooth-step\", \"table\""));
                (&[], None)
            }
        };
        let extra = fields_used(allowed);
        if env.is_some() && !extra.is_empty() {
            self.err(
                key,
                format!(
                    "shape \"{}\" does not use {}",
                    e.shape,
                    extra
                        .iter()
                        .map(|s| format!("`{s}`"))
                        .collect::<Vec<_>>()
                        .join(", ")
                ),
            );
        }
        env.unwrap_or(Envelope::Constant)
    }

    fn csv_table(&mut self, key: &str, file: &str) -> Option<(Vec<f64>, Vec<f64>)> {
        let base = self.path.parent().unwrap_or(Path::new("."));
        let p = base.join(file);
        let text = match std::fs::read_to_string(&p) {
            Ok(t) => t,
            Err(e) => {
                self.err(
                    &format!("{key}.file"),
                    format!("cannot read the envelope CSV `{}`: {e}", p.display()),
                );
                return None;
            }
        };
        let mut times = Vec::new();
        let mut values = Vec::new();
        let mut header_seen = false;
        for (k, line) in text.lines().enumerate() {
            let l = line.trim();
            if l.is_empty() || l.starts_with('#') {
                continue;
            }
            let first_row = !header_seen && times.is_empty();
            header_seen = true;
            let cols: Vec<&str> = l.split(',').map(str::trim).collect();
            let parsed =
                (cols.len() == 2).then(|| (cols[0].parse::<f64>(), cols[1].parse::<f64>()));
            match parsed {
                Some((Ok(t), Ok(v))) => {
                    times.push(t);
                    values.push(v);
                }
                _ if first_row && cols.len() == 2 => {} // a header line
                _ => {
                    self.err(
                        &format!("{key}.file"),
                        format!(
                            "{}:{}: expected two comma-separated numbers `time,value`, got `{l}`",
                            p.display(),
                            k + 1
                        ),
                    );
                    return None;
                }
            }
        }
        if times.is_empty() {
            self.err(
                &format!("{key}.file"),
                format!("the envelope CSV `{}` has no data rows", p.display()),
            );
            return None;
        }
        Some((times, values))
    }

    fn spin_list(&mut self, key: &str, v: &Value, n: usize) -> Option<Vec<i8>> {
        let signs: Option<Vec<i8>> = match v {
            Value::String(s) => s
                .chars()
                .filter(|c| !c.is_whitespace())
                .map(|c| match c {
                    '+' | 'u' | '1' => Some(1),
                    '-' | 'd' | '0' => Some(-1),
                    _ => None,
                })
                .collect(),
            Value::Array(a) => a
                .iter()
                .map(|x| match x {
                    Value::Integer(1) => Some(1),
                    Value::Integer(-1) => Some(-1),
                    _ => None,
                })
                .collect(),
            _ => None,
        };
        let Some(signs) = signs else {
            self.err(key, "expected a string of + and − signs (e.g. \"+-+\"; + is the excited state |e⟩, s = +1) or a list of +1/−1");
            return None;
        };
        if signs.len() != n {
            self.err(
                key,
                format!("has length {} but there are {n} sites", signs.len()),
            );
            return None;
        }
        Some(signs)
    }

    fn resolve_initial(
        &mut self,
        init: Option<&RawInitial>,
        n: usize,
        modes: &[ModeParams],
    ) -> ProductState {
        let mut spins = vec![SpinInit::from_sign(-1); n];
        let mut mstates = vec![ModeInit::Vacuum; modes.len()];
        let Some(init) = init else {
            return ProductState {
                spins,
                modes: mstates,
            };
        };
        match (&init.spins, &init.bloch) {
            (Some(_), Some(_)) => self.err("initial", "give either `spins` or `bloch`, not both"),
            (Some(v), None) => {
                if let Some(s) = self.spin_list("initial.spins", v, n) {
                    spins = s.into_iter().map(SpinInit::from_sign).collect();
                }
            }
            (None, Some(b)) => {
                if b.len() != n
                    || b.iter()
                        .any(|p| p.len() != 2 || p.iter().any(|x| !x.is_finite()))
                {
                    self.err(
                        "initial.bloch",
                        format!(
                            "expected {n} pairs [θ, φ] of finite angles in radians (θ = 0 is |e⟩)"
                        ),
                    );
                } else {
                    spins = b
                        .iter()
                        .map(|p| SpinInit {
                            theta: p[0],
                            phi: p[1],
                        })
                        .collect();
                }
            }
            (None, None) => {}
        }
        if let Some(ms) = &init.modes {
            if ms.len() != modes.len() {
                self.err(
                    "initial.modes",
                    format!(
                        "has {} entries but there are {} modes",
                        ms.len(),
                        modes.len()
                    ),
                );
            } else {
                for (m, v) in ms.iter().enumerate() {
                    let key = format!("initial.modes[{m}]");
                    let levels = modes[m].levels;
                    let st = match v {
                        Value::String(s) if s == "vacuum" => Some(ModeInit::Vacuum),
                        Value::Table(t) if t.len() == 1 => {
                            let (k, x) = t.iter().next().expect("table has one entry");
                            match (k.as_str(), x) {
                                ("fock", Value::Integer(n))
                                    if *n >= 0 && (*n as usize) < levels =>
                                {
                                    Some(ModeInit::Fock(*n as usize))
                                }
                                ("fock", _) => {
                                    self.err(&key, format!("Fock number must be an integer 0 … {} (the mode keeps {levels} levels)", levels - 1));
                                    None
                                }
                                ("coherent", x) => match complex(x) {
                                    Some(a) => Some(ModeInit::Coherent(a)),
                                    None => {
                                        self.err(
                                            &key,
                                            "coherent amplitude α must be a number or [re, im]",
                                        );
                                        None
                                    }
                                },
                                ("thermal", x) => {
                                    match x.as_float().or(x.as_integer().map(|i| i as f64)) {
                                        Some(nb) if nb.is_finite() && nb >= 0.0 => {
                                            Some(ModeInit::Thermal(nb))
                                        }
                                        _ => {
                                            self.err(
                                                &key,
                                                "thermal occupation n̄ must be a finite number ≥ 0",
                                            );
                                            None
                                        }
                                    }
                                }
                                _ => None,
                            }
                        }
                        _ => None,
                    };
                    match st {
                        Some(s) => mstates[m] = s,
                        None if !self.errors.iter().any(|e| e.key == key) => self.err(
                            &key,
                            "expected \"vacuum\", { fock = n }, { coherent = α or [re, im] } or { thermal = n̄ }",
                        ),
                        None => {}
                    }
                }
            }
        }
        ProductState {
            spins,
            modes: mstates,
        }
    }

    fn resolve_observe(&mut self, o: &RawObserve, n: usize) -> ObservePlan {
        let mut axes = SpinAxes {
            z: true,
            ..Default::default()
        };
        if let Some(list) = &o.spin_axes {
            axes = SpinAxes::default();
            for (k, a) in list.iter().enumerate() {
                match a.as_str() {
                    "x" => axes.x = true,
                    "y" => axes.y = true,
                    "z" => axes.z = true,
                    other => self.err(
                        &format!("observe.spin_axes[{k}]"),
                        format!("unknown axis `{other}`; allowed: \"x\", \"y\", \"z\""),
                    ),
                }
            }
        }
        let mut patterns = Vec::new();
        for (k, p) in o.patterns.iter().flatten().enumerate() {
            if let Some(s) = self.spin_list(&format!("observe.patterns[{k}]"), p, n) {
                patterns.push(s);
            }
        }
        let tw = o.truncation_warning.unwrap_or(1e-3);
        if !(tw > 0.0 && tw < 1.0) {
            self.err(
                "observe.truncation_warning",
                format!("must be a population in (0, 1) (got {tw})"),
            );
        }
        ObservePlan {
            spin_axes: axes,
            patterns,
            truncation_warning: tw,
        }
    }
}

fn complex(v: &Value) -> Option<C64> {
    let f = |x: &Value| {
        x.as_float()
            .or(x.as_integer().map(|i| i as f64))
            .filter(|f| f.is_finite())
    };
    match v {
        Value::Array(a) if a.len() == 2 => Some(C64::new(f(&a[0])?, f(&a[1])?)),
        x => Some(C64::new(f(x)?, 0.0)),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn parse_str(s: &str) -> Result<RunPlan, ConfigErrors> {
        parse(Path::new("test.toml"), s)
    }

    const MINIMAL: &str = r#"
[units]
system = "physical"
frequency = "MHz"
[time]
stop = 1.0
samples = 11
[sites]
count = 2
decay = 0.5
[[sites.override]]
index = 1
decay = 1.0
[[modes]]
levels = 3
loss = 2.0
[coupling]
strength = 0.25
"#;

    #[test]
    fn minimal_config_resolves_with_two_pi() {
        let p = parse_str(MINIMAL).unwrap();
        assert_eq!(p.times.len(), 11);
        assert_eq!(p.times[10], 1.0);
        let tau = std::f64::consts::TAU;
        assert_eq!(p.network.sites[0].decay, 0.5 * tau);
        assert_eq!(p.network.sites[1].decay, 1.0 * tau);
        assert_eq!(p.network.modes[0].loss, 2.0 * tau);
        assert_eq!(p.network.coupling, vec![vec![0.25 * tau]; 2]);
        assert_eq!(p.initial.spins[0], SpinInit::from_sign(-1));
    }

    #[test]
    fn errors_name_line_and_key() {
        let bad = MINIMAL.replace("decay = 0.5", "decay = -0.5");
        let e = parse_str(&bad).unwrap_err();
        assert_eq!(e.0.len(), 1, "{e}");
        assert_eq!(e.0[0].key, "sites.decay");
        assert_eq!(e.0[0].line, Some(10));
        let bad = MINIMAL.replace("loss = 2.0", "los = 2.0");
        let e = parse_str(&bad).unwrap_err().to_string();
        assert!(e.contains("did you mean `loss`"), "{e}");
        assert!(e.contains("test.toml:16"), "{e}");
    }

    #[test]
    fn trajectory_defaults() {
        let cfg = MINIMAL.replace(
            "[sites]",
            "[solver]\nmethod = \"trajectories\"\ntrajectories = 50\nseed = 3\n[sites]",
        );
        let p = parse_str(&cfg).unwrap();
        let t = p.solver.trajectories.unwrap();
        assert_eq!((t.trajectories, t.seed, t.keep), (50, 3, 0));
        // the sample spacing (1 µs / 10 intervals); max_delay a tenth of the run, at least a bin
        assert!((t.bin_width - 0.1).abs() < 1e-15);
        assert!((t.max_delay - 0.1).abs() < 1e-15);
        assert_eq!(t.correlate_after, 0.0);
        // the first mode's loss channel when there is one
        assert_eq!(t.correlate, Some(Channel::ModeLoss(0)));
        let no_mode = "[units]\nsystem = \"dimensionless\"\n[time]\nstop = 2.0\nsamples = 5\n\
                       [solver]\nmethod = \"trajectories\"\ntrajectories = 1\nseed = 0\n\
                       [sites]\ncount = 2\ndephasing = 0.1\ndecay = 1.0\n";
        let t = parse_str(no_mode).unwrap().solver.trajectories.unwrap();
        assert_eq!(t.correlate, Some(Channel::SiteDecay(0)));
        // a bin wider than a tenth of the run sets the default delay range to one bin
        assert!((t.max_delay - 0.5).abs() < 1e-15);
    }

    #[test]
    fn trajectory_keys_with_the_density_matrix_warn_and_auto_needs_them() {
        let cfg = MINIMAL.replace("[sites]", "[solver]\ntrajectories = 50\nseed = 3\n[sites]");
        let p = parse_str(&cfg).unwrap();
        assert!(p.solver.trajectories.is_none());
        assert_eq!(p.warnings.len(), 1);
        assert!(
            p.warnings[0].contains("`trajectories`, `seed`"),
            "{:?}",
            p.warnings
        );
        let auto = MINIMAL.replace(
            "[sites]",
            "[solver]\nmethod = \"auto\"\ntrajectories = 5\n[sites]",
        );
        let e = parse_str(&auto).unwrap_err().to_string();
        assert!(
            e.contains("needs `seed`") && e.contains("method = \"auto\""),
            "{e}"
        );
        assert!(e.contains("test.toml:8: key `solver`"), "{e}");
    }

    #[test]
    fn nearest_key_suggestion() {
        assert_eq!(nearest("decy", &["decay", "detuning"]), Some("decay"));
        assert_eq!(nearest("zzzzzz", &["decay"]), None);
    }
}
