//! The `[scan]` table of a config: axes of values for dotted config paths, the points of the
//! scan, their seeds, and the config of each point.
//!
//! A point's config is the config text with the point's values written into the TOML document
//! (toml_edit keeps everything else as it was) and resolved by [`config::parse`], so every point
//! gets exactly the validation of a single run. Errors of a point name the line of the scan axis
//! that set the offending value, or the line of the key in the config file.

use crate::config::{self, ConfigError, ConfigErrors, RunPlan};
use crate::output::config_hash;
use crate::units::Units;
use std::path::{Path, PathBuf};
use toml_edit::{ImDocument, Item, Value};

/// One step of a dotted path: a key and the array indices after it (`strength[2][0]`).
#[derive(Clone, Debug, PartialEq)]
struct Segment {
    key: String,
    index: Vec<usize>,
}

/// Parse `modes[0].loss`-style paths.
fn parse_path(path: &str) -> Option<Vec<Segment>> {
    let mut out = Vec::new();
    for part in path.split('.') {
        let (key, mut rest) = match part.find('[') {
            Some(p) => (&part[..p], &part[p..]),
            None => (part, ""),
        };
        let bare = |c: char| c.is_ascii_alphanumeric() || c == '_' || c == '-';
        if key.is_empty() || !key.chars().all(bare) {
            return None;
        }
        let mut index = Vec::new();
        while !rest.is_empty() {
            let close = rest.find(']')?;
            if !rest.starts_with('[') {
                return None;
            }
            index.push(rest[1..close].parse().ok()?);
            rest = &rest[close + 1..];
        }
        out.push(Segment {
            key: key.into(),
            index,
        });
    }
    Some(out)
}

/// How an axis value is written into the TOML document.
#[derive(Clone, Copy, Debug, PartialEq)]
enum Target {
    /// An integer key: integral values are written as integers.
    Integer,
    /// A float key, or a key absent from the config (inserted as a float unless the scan gave
    /// integers).
    Float,
}

/// One config value varied by an axis.
#[derive(Clone, Debug)]
pub struct Setting {
    /// Dotted config path, e.g. `modes[0].loss`.
    pub path: String,
    segs: Vec<Segment>,
    /// The values, in the config's units (as they are written in the config).
    pub values: Vec<f64>,
    /// Whether each value was given as a TOML integer.
    ints: Vec<bool>,
    target: Target,
    /// Unit label of the config key (`MHz`, `us`, `1`, …).
    pub units: String,
    /// Line of the axis entry that sets this path, and its dotted key (`scan.axis[1].path`).
    line: Option<usize>,
    key: String,
}

/// One axis of the scan grid: a name and one or more settings varied together (zipped).
#[derive(Clone, Debug)]
pub struct Axis {
    /// Axis name (the HDF5 coordinate name).
    pub name: String,
    /// The settings; all have the same number of values. The first gives the coordinate.
    pub settings: Vec<Setting>,
}

impl Axis {
    /// Number of values.
    pub fn len(&self) -> usize {
        self.settings[0].values.len()
    }

    /// Never true: an axis has at least one value.
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }
}

/// A parsed scan: the base config, the axes, and how to make each point's config.
#[derive(Clone, Debug)]
pub struct Scan {
    /// The config file.
    pub path: PathBuf,
    /// The config text as read.
    pub source: String,
    /// Hex SHA-256 of the config text (a journal is only resumed by the same config).
    pub hash: String,
    /// The scan seed (`[scan] seed`).
    pub seed: u64,
    /// Axes in order; the grid is their product, the last axis varying fastest.
    pub axes: Vec<Axis>,
    /// The config without the scan's values (as written).
    pub base: RunPlan,
    /// Whether every point gets its own `solver.seed` (trajectory settings present and the seed
    /// not scanned).
    pub per_point_seed: bool,
    doc: toml_edit::DocumentMut,
}

/// SplitMix64 output function (Steele, Lea & Flood, "Fast splittable pseudorandom number
/// generators", OOPSLA 2014; constants of Vigna's splitmix64.c): the state advanced by the golden
/// gamma, then mixed.
pub fn splitmix64(x: u64) -> u64 {
    let mut z = x.wrapping_add(0x9E37_79B9_7F4A_7C15);
    z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
    z ^ (z >> 31)
}

/// The seed of point `index` of a scan with seed `scan_seed`: a function of these two numbers
/// only (not of thread count, order or shards), in 0 … 2⁶³−1 as `solver.seed` requires.
pub fn point_seed(scan_seed: u64, index: u64) -> u64 {
    splitmix64(splitmix64(scan_seed) ^ index) >> 1
}

/// True when the config text has a `[scan]` table.
pub fn has_scan(text: &str) -> bool {
    text.parse::<ImDocument<String>>()
        .map(|d| d.get("scan").is_some())
        .unwrap_or(false)
}

/// Unit label of the config key at `path` (the last key name decides).
pub fn key_units(path: &str, units: Units) -> String {
    let segs = parse_path(path).unwrap_or_default();
    let last = segs.last().map_or("", |s| s.key.as_str());
    let first = segs.first().map_or("", |s| s.key.as_str());
    let in_envelope = segs.iter().any(|s| s.key.ends_with("envelope"));
    match last {
        "detuning" | "decay" | "dephasing" | "pump" | "rabi" | "loss" | "drive" | "strength"
        | "zz" | "flip_flop" => units.frequency_label().into(),
        "start" | "stop" | "times" if in_envelope => units.time_label().into(),
        "stop" | "at" if first == "time" => units.time_label().into(),
        "max_step" | "bin_width" | "max_delay" | "correlate_after" | "max_time" | "at_time" => {
            units.time_label().into()
        }
        "thermal" => "photons".into(),
        _ => "1".into(),
    }
}

/// Collects located errors of the `[scan]` table.
struct Errors<'a> {
    path: &'a Path,
    text: &'a str,
    list: Vec<ConfigError>,
}

impl Errors<'_> {
    fn at(&mut self, span: Option<std::ops::Range<usize>>, key: &str, message: impl Into<String>) {
        let line = span.map(|s| {
            self.text[..s.start.min(self.text.len())]
                .matches('\n')
                .count()
                + 1
        });
        self.list.push(ConfigError {
            file: self.path.to_path_buf(),
            line,
            key: key.into(),
            message: message.into(),
        });
    }
}

const SCAN_KEYS: &[&str] = &["seed", "axis"];
const AXIS_KEYS: &[&str] = &["name", "path", "values", "linear", "log", "zip_with"];
const RANGE_KEYS: &[&str] = &["from", "to", "count"];

fn unknown_key(bad: &str, allowed: &[&str]) -> String {
    let hint = config::nearest(bad, allowed)
        .map(|s| format!(" (did you mean `{s}`?)"))
        .unwrap_or_default();
    format!(
        "unknown key `{bad}`{hint}; allowed here: {}",
        allowed.join(", ")
    )
}

fn number(v: &Value) -> Option<(f64, bool)> {
    match v {
        Value::Integer(i) => Some((*i.value() as f64, true)),
        Value::Float(f) => Some((*f.value(), false)),
        _ => None,
    }
}

/// Values of a `linear` or `log` range `{ from, to, count }`: inclusive end points, equally spaced
/// in the value (linear) or in its logarithm (log), like numpy.linspace / numpy.geomspace.
pub fn range_values(from: f64, to: f64, count: usize, log: bool) -> Vec<f64> {
    if count == 1 {
        return vec![from];
    }
    let n = (count - 1) as f64;
    (0..count)
        .map(|k| {
            if k == count - 1 {
                to
            } else if log {
                (from.ln() + (to.ln() - from.ln()) * k as f64 / n).exp()
            } else {
                from + (to - from) * k as f64 / n
            }
        })
        .map(|v| {
            if log && count > 1 && v == 0.0 {
                from
            } else {
                v
            }
        })
        .collect()
}

/// Walk `segs` from `root`; `Ok(Some(item))` for a present key, `Ok(None)` for a last key absent
/// from an existing table, `Err(what is missing)` otherwise.
fn walk<'a>(root: &'a Item, segs: &[Segment]) -> Result<Option<&'a Item>, String> {
    let mut cur = root;
    let mut at = String::new();
    for (k, seg) in segs.iter().enumerate() {
        if !at.is_empty() {
            at.push('.');
        }
        at.push_str(&seg.key);
        let Some(table) = cur.as_table_like() else {
            return Err(format!("`{at}` is inside a value that is not a table"));
        };
        match table.get(&seg.key) {
            Some(it) => cur = it,
            None if k + 1 == segs.len() && seg.index.is_empty() => return Ok(None),
            None => {
                return Err(format!(
                "the config has no `{at}`; write it into the config (any value) to scan inside it"
            ))
            }
        }
        for &i in &seg.index {
            at.push_str(&format!("[{i}]"));
            cur = cur
                .get(i)
                .ok_or_else(|| format!("the config has no `{at}` (index out of range)"))?;
        }
    }
    Ok(Some(cur))
}

fn walk_mut<'a>(root: &'a mut Item, segs: &[Segment]) -> Option<&'a mut Item> {
    let mut cur = root;
    for (k, seg) in segs.iter().enumerate() {
        let table = cur.as_table_like_mut()?;
        if table.get(&seg.key).is_none() && k + 1 == segs.len() && seg.index.is_empty() {
            table.insert(&seg.key, toml_edit::value(0.0));
        }
        cur = table.get_mut(&seg.key)?;
        for &i in &seg.index {
            cur = cur.get_mut(i)?;
        }
    }
    Some(cur)
}

impl Scan {
    /// Read the config at `path`; `Ok(None)` when it has no `[scan]` table.
    ///
    /// # Errors
    /// Every problem of the config or of the scan, located.
    pub fn load(path: &Path) -> Result<Option<Scan>, ConfigErrors> {
        Self::from_base(config::load(path)?)
    }

    /// As [`Scan::load`] for config text read from `path`.
    ///
    /// # Errors
    /// As [`Scan::load`].
    pub fn parse(path: &Path, text: &str) -> Result<Option<Scan>, ConfigErrors> {
        Self::from_base(config::parse(path, text)?)
    }

    /// The scan of a resolved config (its `source` holds the text).
    fn from_base(base: RunPlan) -> Result<Option<Scan>, ConfigErrors> {
        let (path, text) = (base.path.clone(), base.source.clone());
        let (path, text) = (path.as_path(), text.as_str());
        let im: ImDocument<String> = text.parse().map_err(|e: toml_edit::TomlError| {
            ConfigErrors(vec![ConfigError {
                file: path.to_path_buf(),
                line: None,
                key: String::new(),
                message: e.to_string(),
            }])
        })?;
        let Some(scan_item) = im.get("scan") else {
            return Ok(None);
        };
        let mut errs = Errors {
            path,
            text,
            list: Vec::new(),
        };
        let axes = parse_axes(&mut errs, im.as_item(), scan_item, base.units);
        let (seed, per_point_seed) = {
            let given = scan_item.get("seed");
            let seed = match given.map(|s| (s, s.as_integer())) {
                None => base.solver.trajectories.as_ref().map_or(0, |t| t.seed),
                Some((_, Some(v))) if v >= 0 => v as u64,
                Some((s, _)) => {
                    errs.at(
                        s.span(),
                        "scan.seed",
                        "the scan seed must be an integer 0 … 9223372036854775807",
                    );
                    0
                }
            };
            let scans_seed = axes
                .iter()
                .flat_map(|a| &a.settings)
                .any(|s| s.path == "solver.seed");
            (seed, base.solver.trajectories.is_some() && !scans_seed)
        };
        if !errs.list.is_empty() {
            return Err(ConfigErrors(errs.list));
        }
        let doc: toml_edit::DocumentMut = text.parse().map_err(|e: toml_edit::TomlError| {
            ConfigErrors(vec![ConfigError {
                file: path.to_path_buf(),
                line: None,
                key: String::new(),
                message: e.to_string(),
            }])
        })?;
        let scan = Scan {
            path: path.to_path_buf(),
            source: text.to_string(),
            hash: config_hash(text),
            seed,
            axes,
            base,
            per_point_seed,
            doc,
        };
        // the first point is checked here, so that a bad path is reported by every command
        scan.point_plan(0)?;
        Ok(Some(scan))
    }

    /// Number of values of each axis.
    pub fn shape(&self) -> Vec<usize> {
        self.axes.iter().map(Axis::len).collect()
    }

    /// Number of points (product of the axis lengths).
    pub fn n_points(&self) -> usize {
        self.shape().iter().product()
    }

    /// Axis indices of point `index` (row-major: the last axis varies fastest).
    pub fn coords(&self, index: usize) -> Vec<usize> {
        let shape = self.shape();
        let mut c = vec![0; shape.len()];
        let mut rest = index;
        for (k, &n) in shape.iter().enumerate().rev() {
            c[k] = rest % n;
            rest /= n;
        }
        c
    }

    /// The seed of point `index` when points get their own seed.
    pub fn seed_of(&self, index: usize) -> Option<u64> {
        self.per_point_seed
            .then(|| point_seed(self.seed, index as u64))
    }

    /// `loss = 0.2 MHz, pump = 1 MHz` for point `index`.
    pub fn describe_point(&self, index: usize) -> String {
        let c = self.coords(index);
        let mut parts = Vec::new();
        for (a, &k) in self.axes.iter().zip(&c) {
            for s in &a.settings {
                let u = if s.units == "1" { "" } else { s.units.as_str() };
                parts.push(
                    format!("{} = {} {u}", s.path, s.values[k])
                        .trim_end()
                        .to_string(),
                );
            }
        }
        parts.join(", ")
    }

    /// The config text of point `index`.
    pub fn point_text(&self, index: usize) -> String {
        let mut doc = self.doc.clone();
        let c = self.coords(index);
        let mut writes: Vec<(&[Segment], Value)> = Vec::new();
        for (a, &k) in self.axes.iter().zip(&c) {
            for s in &a.settings {
                let v = s.values[k];
                let as_int = v.fract() == 0.0
                    && v.abs() < 9.0e15
                    && (s.target == Target::Integer || s.ints[k]);
                let val = if as_int {
                    Value::from(v as i64)
                } else {
                    Value::from(v)
                };
                writes.push((&s.segs, val));
            }
        }
        let seed_path = [
            Segment {
                key: "solver".into(),
                index: vec![],
            },
            Segment {
                key: "seed".into(),
                index: vec![],
            },
        ];
        if let Some(seed) = self.seed_of(index) {
            writes.push((&seed_path, Value::from(seed as i64)));
        }
        for (segs, mut val) in writes {
            if let Some(item) = walk_mut(doc.as_item_mut(), segs) {
                if let Some(old) = item.as_value() {
                    *val.decor_mut() = old.decor().clone();
                }
                *item = Item::Value(val);
            }
        }
        doc.to_string()
    }

    /// Resolve point `index` with the config layer.
    ///
    /// # Errors
    /// The config layer's errors, located in the config file: at the scan axis that set the value
    /// when the error is about a scanned key, else at the key.
    pub fn point_plan(&self, index: usize) -> Result<RunPlan, ConfigErrors> {
        let text = self.point_text(index);
        config::parse(&self.path, &text).map_err(|e| self.relocate(index, e))
    }

    fn relocate(&self, index: usize, errs: ConfigErrors) -> ConfigErrors {
        let what = self.describe_point(index);
        ConfigErrors(
            errs.0
                .into_iter()
                .map(|mut e| {
                    let setter = self
                        .axes
                        .iter()
                        .flat_map(|a| a.settings.iter().map(move |s| (a, s)))
                        .find(|(_, s)| e.key == s.path || e.key.starts_with(&format!("{}.", s.path)));
                    match setter {
                        Some((a, s)) => {
                            e.message = format!(
                                "scan axis `{}` sets `{}` (point {index}: {what}), which is not valid: {}",
                                a.name, s.path, e.message
                            );
                            e.key = s.key.clone();
                            e.line = s.line;
                        }
                        None => {
                            e.line = config::key_line(&self.source, &e.key).or(e.line);
                            e.message = format!("at scan point {index} ({what}): {}", e.message);
                        }
                    }
                    e
                })
                .collect(),
        )
    }
}

/// Parse `[[scan.axis]]` entries.
fn parse_axes(errs: &mut Errors, root: &Item, scan: &Item, units: Units) -> Vec<Axis> {
    let mut axes: Vec<Axis> = Vec::new();
    let Some(table) = scan.as_table_like() else {
        errs.at(
            scan.span(),
            "scan",
            "`scan` must be a table: [scan] with [[scan.axis]] entries",
        );
        return axes;
    };
    for (k, _) in table.iter() {
        if !SCAN_KEYS.contains(&k) {
            let span = table.get_key_value(k).and_then(|(key, _)| key.span());
            errs.at(span, &format!("scan.{k}"), unknown_key(k, SCAN_KEYS));
        }
    }
    let entries: Vec<&toml_edit::Table> = match table.get("axis") {
        Some(Item::ArrayOfTables(a)) => a.iter().collect(),
        Some(other) => {
            errs.at(
                other.span(),
                "scan.axis",
                "write each axis as its own [[scan.axis]] table",
            );
            return axes;
        }
        None => {
            errs.at(
                scan.span(),
                "scan",
                "a scan needs at least one [[scan.axis]] with `path` and one of `values`, `linear`, `log`",
            );
            return axes;
        }
    };
    for (n, t) in entries.iter().enumerate() {
        let key = |k: &str| format!("scan.axis[{n}].{k}");
        let span_of = |k: &str| {
            t.get_key_value(k)
                .and_then(|(kk, it)| kk.span().or(it.span()))
                .or(t.span())
        };
        let before = errs.list.len();
        for (k, _) in t.iter() {
            if !AXIS_KEYS.contains(&k) {
                errs.at(span_of(k), &key(k), unknown_key(k, AXIS_KEYS));
            }
        }
        // path
        let path = match t.get("path").map(|p| p.as_str()) {
            Some(Some(p)) => p.to_string(),
            Some(None) => {
                errs.at(
                    span_of("path"),
                    &key("path"),
                    "must be a dotted config path as a string, e.g. \"modes[0].loss\"",
                );
                continue;
            }
            None => {
                errs.at(t.span(), &format!("scan.axis[{n}]"), "missing `path`: the dotted config key this axis sets, e.g. \"modes[0].loss\", \"sites.pump\", \"solver.rtol\"");
                continue;
            }
        };
        let Some(segs) = parse_path(&path) else {
            errs.at(span_of("path"), &key("path"), format!("`{path}` is not a dotted config path (keys separated by `.`, array entries as `[0]`, e.g. \"modes[0].loss\")"));
            continue;
        };
        if segs[0].key == "scan" || segs[0].key == "units" {
            errs.at(
                span_of("path"),
                &key("path"),
                format!("`{path}` cannot be scanned: only numeric model and solver parameters"),
            );
            continue;
        }
        let target = match walk(root, &segs) {
            Ok(None) => Target::Float,
            Ok(Some(Item::Value(Value::Integer(_)))) => Target::Integer,
            Ok(Some(Item::Value(Value::Float(_)))) => Target::Float,
            Ok(Some(other)) => {
                errs.at(span_of("path"), &key("path"), format!(
                    "`{path}` is {} in the config, not a number; only numeric keys can be scanned (for a matrix, scan one entry such as `{path}[0][1]`)",
                    match other { Item::Value(v) => format!("a {}", v.type_name()), Item::Table(_) | Item::ArrayOfTables(_) => "a table".into(), Item::None => "empty".into() }
                ));
                continue;
            }
            Err(m) => {
                errs.at(span_of("path"), &key("path"), m);
                continue;
            }
        };
        // values
        let kinds: Vec<&str> = ["values", "linear", "log"]
            .into_iter()
            .filter(|k| t.contains_key(k))
            .collect();
        if kinds.len() != 1 {
            errs.at(t.span(), &format!("scan.axis[{n}]"), format!(
                "give exactly one of `values` (a list), `linear` or `log` ({{ from, to, count }}); found {}",
                if kinds.is_empty() { "none".into() } else { kinds.join(" and ") }
            ));
            continue;
        }
        let kind = kinds[0];
        let (values, ints) = if kind == "values" {
            match t.get("values").and_then(|v| v.as_array()) {
                Some(a) if !a.is_empty() => {
                    let nums: Option<Vec<(f64, bool)>> = a.iter().map(number).collect();
                    match nums {
                        Some(v) if v.iter().all(|x| x.0.is_finite()) => v.into_iter().unzip(),
                        _ => {
                            errs.at(
                                span_of("values"),
                                &key("values"),
                                "must be a list of finite numbers",
                            );
                            continue;
                        }
                    }
                }
                _ => {
                    errs.at(
                        span_of("values"),
                        &key("values"),
                        "must be a non-empty list of numbers, e.g. [0.1, 0.2, 0.5]",
                    );
                    continue;
                }
            }
        } else {
            let Some(r) = t.get(kind).and_then(|v| v.as_table_like()) else {
                errs.at(
                    span_of(kind),
                    &key(kind),
                    "must be an inline table { from = …, to = …, count = … }",
                );
                continue;
            };
            for (k, _) in r.iter() {
                if !RANGE_KEYS.contains(&k) {
                    errs.at(
                        span_of(kind),
                        &format!("{}.{k}", key(kind)),
                        unknown_key(k, RANGE_KEYS),
                    );
                }
            }
            let num = |k: &str| {
                r.get(k)
                    .and_then(|i| i.as_value())
                    .and_then(number)
                    .map(|x| x.0)
            };
            let count = r.get("count").and_then(|i| i.as_integer());
            let log = kind == "log";
            match (num("from"), num("to"), count) {
                (Some(a), Some(b), Some(c))
                    if a.is_finite()
                        && b.is_finite()
                        && (1..=10_000_000).contains(&c)
                        && (!log || (a > 0.0 && b > 0.0)) =>
                {
                    let v = range_values(a, b, c as usize, log);
                    let n = v.len();
                    (v, vec![false; n])
                }
                _ => {
                    errs.at(span_of(kind), &key(kind), format!(
                        "must be {{ from = …, to = …, count = … }} with finite numbers and an integer count 1 … 10000000{}",
                        if log { "; a log range needs from > 0 and to > 0" } else { "" }
                    ));
                    continue;
                }
            }
        };
        if errs.list.len() > before {
            continue;
        }
        let setting = Setting {
            units: key_units(&path, units),
            path: path.clone(),
            segs,
            values,
            ints,
            target,
            line: span_of("path").map(|s| text_line(errs.text, s.start)),
            key: key("path"),
        };
        if axes
            .iter()
            .flat_map(|a| &a.settings)
            .any(|s| s.path == path)
        {
            errs.at(
                span_of("path"),
                &key("path"),
                format!("`{path}` is already set by another axis"),
            );
            continue;
        }
        match t.get("zip_with") {
            Some(z) => {
                let Some(other) = z.as_str() else {
                    errs.at(
                        span_of("zip_with"),
                        &key("zip_with"),
                        "must be the name of an earlier axis",
                    );
                    continue;
                };
                if t.contains_key("name") {
                    errs.at(
                        span_of("name"),
                        &key("name"),
                        format!("a zipped axis shares the name of `{other}`; remove `name`"),
                    );
                    continue;
                }
                let names: Vec<String> = axes.iter().map(|a| a.name.clone()).collect();
                let Some(a) = axes.iter_mut().find(|a| a.name == other) else {
                    let names: Vec<&str> = names.iter().map(String::as_str).collect();
                    let hint = config::nearest(other, &names)
                        .map(|s| format!(" (did you mean `{s}`?)"))
                        .unwrap_or_default();
                    errs.at(
                        span_of("zip_with"),
                        &key("zip_with"),
                        format!(
                            "no earlier axis is named `{other}`{hint}; axes so far: {}",
                            if names.is_empty() {
                                "none".into()
                            } else {
                                names.join(", ")
                            }
                        ),
                    );
                    continue;
                };
                if a.len() != setting.values.len() {
                    errs.at(span_of("zip_with"), &key("zip_with"), format!(
                        "zipped axes vary together and need the same number of values: `{}` has {}, this one {}",
                        a.name, a.len(), setting.values.len()
                    ));
                    continue;
                }
                a.settings.push(setting);
            }
            None => {
                let name = match t.get("name") {
                    None => path.clone(),
                    Some(v) => match v.as_str() {
                        Some(s) if !s.is_empty() && !s.contains('/') && s != "." && s != ".." => {
                            s.to_string()
                        }
                        _ => {
                            errs.at(
                                span_of("name"),
                                &key("name"),
                                "must be a non-empty string without `/`",
                            );
                            continue;
                        }
                    },
                };
                if axes.iter().any(|a| a.name == name) {
                    errs.at(
                        span_of("name"),
                        &key("name"),
                        format!("two axes are named `{name}`"),
                    );
                    continue;
                }
                axes.push(Axis {
                    name,
                    settings: vec![setting],
                });
            }
        }
    }
    axes
}

fn text_line(text: &str, offset: usize) -> usize {
    text[..offset.min(text.len())].matches('\n').count() + 1
}

#[cfg(test)]
mod tests {
    use super::*;

    const BASE: &str = "[units]\nsystem = \"physical\"\nfrequency = \"MHz\"\n[time]\nstop = 1.0\nsamples = 3\n\
                        [sites]\ncount = 1\ndecay = 1.0\n[[modes]]\nlevels = 3\nloss = 2.0  # kappa\n";

    fn scan(extra: &str) -> Result<Option<Scan>, ConfigErrors> {
        Scan::parse(Path::new("s.toml"), &format!("{BASE}{extra}"))
    }

    #[test]
    fn splitmix64_matches_the_reference_sequence() {
        // Vigna, splitmix64.c (2015): seeded with 1234567 the generator's first outputs are
        // 6457827717110365317 and 3203168211198807973 (from memory; widely used test vector).
        assert_eq!(splitmix64(1234567), 6457827717110365317);
        assert_eq!(
            splitmix64(1234567u64.wrapping_add(0x9E37_79B9_7F4A_7C15)),
            3203168211198807973
        );
        assert!(point_seed(7, 3) < 1 << 63);
        assert_ne!(point_seed(7, 3), point_seed(7, 4));
        assert_ne!(point_seed(7, 3), point_seed(8, 3));
    }

    #[test]
    fn grid_and_zip_points_and_texts() {
        let s = scan(
            "[scan]\n[[scan.axis]]\nname = \"kappa\"\npath = \"modes[0].loss\"\nvalues = [1, 2.5]\n\
             [[scan.axis]]\npath = \"sites.pump\"\nlinear = { from = 0, to = 1, count = 3 }\n\
             [[scan.axis]]\npath = \"sites.dephasing\"\nzip_with = \"sites.pump\"\nlog = { from = 0.01, to = 1, count = 3 }\n",
        )
        .unwrap()
        .unwrap();
        assert_eq!(s.shape(), vec![2, 3]);
        assert_eq!(s.coords(4), vec![1, 1]);
        let p = s.point_plan(4).unwrap();
        let tau = std::f64::consts::TAU;
        assert_eq!(p.network.modes[0].loss, 2.5 * tau);
        assert_eq!(p.network.sites[0].pump, 0.5 * tau);
        assert!((p.network.sites[0].dephasing - 0.1 * tau).abs() < 1e-14);
        // the comment after the replaced value and the line count are kept
        let text = s.point_text(4);
        assert!(text.contains("loss = 2.5  # kappa"), "{text}");
        assert_eq!(s.axes[0].settings[0].units, "MHz");
        assert!(!s.per_point_seed);
    }

    #[test]
    fn errors_name_the_line_and_key() {
        let e = scan("[scan]\n[[scan.axis]]\npath = \"modes[0].los\"\nvalues = [1]\n")
            .unwrap_err()
            .to_string();
        assert!(e.contains("s.toml:15") && e.contains("modes[0].los"), "{e}");
        let e = scan("[scan]\n[[scan.axis]]\npath = \"modes[0].levels\"\nvalues = [1]\n")
            .unwrap_err()
            .to_string();
        assert!(
            e.contains("s.toml:15") && e.contains("scan.axis[0].path"),
            "{e}"
        );
        let e = scan("[scan]\n[[scan.axis]]\npath = \"time\"\nvalues = [1]\n")
            .unwrap_err()
            .to_string();
        assert!(e.contains("not a number"), "{e}");
        let e = scan("[scan]\nsed = 1\n[[scan.axis]]\npath = \"sites.pump\"\nvalues = [1]\n")
            .unwrap_err()
            .to_string();
        assert!(
            e.contains("s.toml:14") && e.contains("did you mean `seed`"),
            "{e}"
        );
    }
}
