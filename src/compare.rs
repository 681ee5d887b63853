//! `cavern compare`: several settings side by side — a terminal table, a Markdown report, a CSV
//! of every number and overlay figures, all in one folder.
//!
//! Inputs are configs (`.toml`) or result files (`.h5`, or a point of a scan file written
//! `scan.h5@axis=value[,axis=value…]`, the grid point nearest to the values). A config is run
//! unless an existing result with the same config hash (the root attribute `config_sha256`,
//! SHA-256 of the config text) is found as `<stem>.h5` in the output folder, the current
//! directory or beside the config; that result is then reused.
//!
//! Rows: recall success and time to recall per number of flipped sites (`/recall`, contract C2),
//! pattern overlaps, output flux and photon number per mode, ⟨σᶻ⟩ per site and purity — steady
//! state when the file has one, else the final sample — and the spectral gap of the Liouvillian
//! (`/relaxation`). Columns: each input, and for every input after the first its difference and
//! ratio to the first. When standard errors are stored (trajectory results, recall success) the
//! difference is tested with a two-sided z-test on the difference of two means with combined
//! standard error √(s₁² + s₂²) at the 95 % level, |z| > 1.96 (common practice; normal
//! approximation of the sampling distribution of a mean). Density-matrix numbers carry no
//! statistical error: their differences are exact up to the solver tolerances.

use crate::budget::{self, Detector};
use crate::h5out::{AttrValue, Group};
use crate::plot::{self, attr_str, values, Line, LineFigure};
use crate::{config, h5in, output, run, AppError};
use std::fmt::Write;
use std::path::{Path, PathBuf};

/// z for a two-sided test at 95 %: Φ⁻¹(0.975) (standard normal tables).
pub const Z_95: f64 = 1.959_964;

/// One number of one input.
#[derive(Clone, Debug, PartialEq)]
pub struct Metric {
    /// Quantity, e.g. `output_flux`.
    pub quantity: String,
    /// `steady state`, `final time` or `` (for quantities without a time, such as the gap).
    pub when: String,
    /// Row label (mode, site, pattern, `flips=2`), or empty.
    pub row: String,
    /// Unit as stored.
    pub unit: String,
    /// Value.
    pub value: f64,
    /// Standard error, when the file stores one.
    pub stderr: Option<f64>,
}

/// A loaded input.
#[derive(Clone, Debug)]
pub struct Input {
    /// Column label (file stem, plus the scan point).
    pub label: String,
    /// Result file read.
    pub file: PathBuf,
    /// How it was obtained (`read`, `reused (config hash matches)`, `ran`).
    pub origin: String,
    /// The result tree.
    pub tree: Group,
    /// Flat index of the selected scan point (row-major, first axis slowest), for scan files.
    pub point: Option<usize>,
}

/// Values of `ds` belonging to scan point `point` when the first `n_axes` dimensions are scan
/// axes (all values for a single run), and the remaining shape.
fn point_block(
    ds: &crate::h5out::Dataset,
    n_axes: usize,
    point: usize,
) -> Option<(Vec<f64>, Vec<usize>)> {
    if ds.shape.len() < n_axes {
        return None;
    }
    let rest = ds.shape[n_axes..].to_vec();
    let per: usize = rest.iter().product();
    let v = values(ds);
    let block = v.get(point * per..(point + 1) * per)?.to_vec();
    Some((block, rest))
}

/// The numbers of one result tree (see the module documentation for the rows).
pub fn metrics(root: &Group, point: Option<usize>) -> Vec<Metric> {
    let n_axes = if point.is_some() {
        plot::scan_axes(root).len()
    } else {
        0
    };
    let p = point.unwrap_or(0);
    let mut out = Vec::new();
    if let Some(rec) = root.get_group("recall") {
        let flips = rec.get_dataset("flips").map(values).unwrap_or_default();
        let success = rec.get_dataset("success");
        let stderr = rec.get_dataset("success_stderr").map(values);
        let ttr = rec.get_dataset("time_to_recall");
        for (k, f) in flips.iter().enumerate() {
            let row = format!("flips={}", *f as i64);
            if let Some(s) = success {
                out.push(Metric {
                    quantity: "recall_success".into(),
                    when: String::new(),
                    row: row.clone(),
                    unit: "probability".into(),
                    value: values(s).get(k).copied().unwrap_or(f64::NAN),
                    stderr: stderr.as_ref().and_then(|e| e.get(k)).copied(),
                });
            }
            if let Some(t) = ttr {
                out.push(Metric {
                    quantity: "time_to_recall".into(),
                    when: String::new(),
                    row,
                    unit: attr_str(&t.attrs, "units").unwrap_or("").into(),
                    value: values(t).get(k).copied().unwrap_or(f64::NAN),
                    stderr: None,
                });
            }
        }
    }
    for name in [
        "pattern_overlap",
        "output_flux",
        "photon_number",
        "spin_z",
        "purity",
    ] {
        let steady = root.get_group("steady_state").and_then(|g| {
            if n_axes == 0 {
                g.get_dataset(name)
            } else {
                None
            }
            .or_else(|| g.get_group("observables").and_then(|o| o.get_dataset(name)))
        });
        let obs = root.get_group("observables");
        let (ds, when, timed) = match (steady, obs.and_then(|o| o.get_dataset(name))) {
            (Some(ds), _) => (ds, "steady state", false),
            (None, Some(ds)) => (ds, "final time", true),
            _ => continue,
        };
        let Some((block, rest)) = point_block(ds, n_axes, p) else {
            continue;
        };
        let n_t = if timed {
            rest.last().copied().unwrap_or(0)
        } else {
            1
        };
        if n_t == 0 || block.len() % n_t != 0 {
            continue;
        }
        let n_rows = block.len() / n_t;
        let labels = if rest.len() > usize::from(timed) {
            plot::row_labels(ds, n_rows)
        } else {
            vec![String::new()]
        };
        let err = if timed {
            obs.and_then(|o| o.get_dataset(&format!("{name}_stderr")))
                .and_then(|e| point_block(e, n_axes, p))
                .map(|(b, _)| b)
                .filter(|b| b.len() == block.len())
        } else {
            None
        };
        for r in 0..n_rows {
            let k = r * n_t + n_t - 1;
            out.push(Metric {
                quantity: name.into(),
                when: when.into(),
                row: labels[r].clone(),
                unit: attr_str(&ds.attrs, "units").unwrap_or("").into(),
                value: block[k],
                stderr: err.as_ref().map(|e| e[k]).filter(|e| e.is_finite()),
            });
        }
    }
    if n_axes == 0 {
        if let Some(rel) = root.get_group("relaxation") {
            if let Some((_, AttrValue::F64(gap))) =
                rel.attrs().iter().find(|(n, _)| n == "spectral_gap")
            {
                out.push(Metric {
                    quantity: "spectral_gap".into(),
                    when: String::new(),
                    row: String::new(),
                    unit: attr_str(rel.attrs(), "units").unwrap_or("").into(),
                    value: *gap,
                    stderr: None,
                });
            }
        }
    }
    out
}

/// One row of the comparison: a quantity and its value in each input.
#[derive(Clone, Debug)]
pub struct Row {
    /// Quantity name.
    pub quantity: String,
    /// `steady state`, `final time` or empty.
    pub when: String,
    /// Row label.
    pub row: String,
    /// Unit (of the first input that has the quantity).
    pub unit: String,
    /// Per input: the metric, if the input has it.
    pub cells: Vec<Option<Metric>>,
}

/// The comparison of input k (≥ 1) with the first input.
#[derive(Clone, Debug, PartialEq)]
pub struct Delta {
    /// v_k − v_0.
    pub difference: f64,
    /// v_k / v_0 (NaN when v_0 = 0).
    pub ratio: f64,
    /// z = (v_k − v_0)/√(s_0² + s_k²), when a standard error is stored.
    pub z: Option<f64>,
}

impl Delta {
    /// Whether |z| > 1.96 (two-sided 95 %), when a z exists.
    pub fn significant(&self) -> Option<bool> {
        self.z.map(|z| z.abs() > Z_95)
    }
}

impl Row {
    /// Difference and ratio of input `k` relative to the first (None when either is missing or
    /// the units differ).
    pub fn delta(&self, k: usize) -> Option<Delta> {
        let a = self.cells.first()?.as_ref()?;
        let b = self.cells.get(k)?.as_ref()?;
        if a.unit != b.unit {
            return None;
        }
        let difference = b.value - a.value;
        let ratio = if a.value == 0.0 {
            f64::NAN
        } else {
            b.value / a.value
        };
        let z = match (a.stderr, b.stderr) {
            (None, None) => None,
            (sa, sb) => {
                let s = (sa.unwrap_or(0.0).powi(2) + sb.unwrap_or(0.0).powi(2)).sqrt();
                if s > 0.0 {
                    Some(difference / s)
                } else if difference == 0.0 {
                    Some(0.0)
                } else {
                    None
                }
            }
        };
        Some(Delta {
            difference,
            ratio,
            z,
        })
    }
}

/// Rows in order of first appearance over the inputs.
pub fn rows(all: &[Vec<Metric>]) -> Vec<Row> {
    let mut rows: Vec<Row> = Vec::new();
    for (k, ms) in all.iter().enumerate() {
        for m in ms {
            let pos = rows
                .iter()
                .position(|r| r.quantity == m.quantity && r.when == m.when && r.row == m.row);
            let i = match pos {
                Some(i) => i,
                None => {
                    rows.push(Row {
                        quantity: m.quantity.clone(),
                        when: m.when.clone(),
                        row: m.row.clone(),
                        unit: m.unit.clone(),
                        cells: vec![None; all.len()],
                    });
                    rows.len() - 1
                }
            };
            rows[i].cells[k] = Some(m.clone());
        }
    }
    rows
}

/// Six significant digits.
fn num6(x: f64) -> String {
    if x == 0.0 {
        "0".into()
    } else if !x.is_finite() {
        format!("{x}")
    } else if (1e-3..1e5).contains(&x.abs()) {
        let digits = (5 - x.abs().log10().floor() as i32).max(0) as usize;
        format!("{x:.digits$}")
    } else {
        format!("{x:.5e}")
    }
}

fn cell_text(m: &Option<Metric>) -> String {
    match m {
        None => "–".into(),
        Some(m) => match m.stderr {
            Some(e) => format!("{} ± {}", num6(m.value), budget::num(e)),
            None => num6(m.value),
        },
    }
}

fn delta_texts(d: Option<Delta>) -> (String, String, String) {
    match d {
        None => ("–".into(), "–".into(), "–".into()),
        Some(d) => (
            num6(d.difference),
            if d.ratio.is_nan() {
                "–".into()
            } else {
                budget::num(d.ratio)
            },
            match (d.z, d.significant()) {
                (Some(z), Some(true)) => format!("yes (z = {z:.2})"),
                (Some(z), _) => format!("no (z = {z:.2})"),
                _ => "exact".into(),
            },
        ),
    }
}

fn quantity_label(r: &Row) -> String {
    if r.when.is_empty() {
        r.quantity.clone()
    } else {
        format!("{} ({})", r.quantity, r.when)
    }
}

/// The side-by-side table as plain text for the terminal.
pub fn terminal_table(inputs: &[Input], rows: &[Row]) -> String {
    let mut header = vec!["quantity".to_string(), "row".into(), "unit".into()];
    for (k, i) in inputs.iter().enumerate() {
        header.push(i.label.clone());
        if k > 0 {
            header.push(format!("{} − {}", i.label, inputs[0].label));
            header.push("ratio".into());
            header.push("significant?".into());
        }
    }
    let mut table = vec![header];
    for r in rows {
        let mut line = vec![quantity_label(r), r.row.clone(), r.unit.clone()];
        for k in 0..inputs.len() {
            line.push(cell_text(&r.cells[k]));
            if k > 0 {
                let (d, q, s) = delta_texts(r.delta(k));
                line.extend([d, q, s]);
            }
        }
        table.push(line);
    }
    let n_cols = table[0].len();
    let widths: Vec<usize> = (0..n_cols)
        .map(|c| {
            table
                .iter()
                .map(|l| l[c].chars().count())
                .max()
                .unwrap_or(0)
        })
        .collect();
    let mut s = String::new();
    for (i, l) in table.iter().enumerate() {
        let cells: Vec<String> = l
            .iter()
            .zip(&widths)
            .enumerate()
            .map(|(c, (t, &w))| {
                let pad = w - t.chars().count();
                if c < 3 {
                    format!("{t}{}", " ".repeat(pad))
                } else {
                    format!("{}{t}", " ".repeat(pad))
                }
            })
            .collect();
        let _ = writeln!(s, "{}", cells.join("  ").trim_end());
        if i == 0 {
            let _ = writeln!(
                s,
                "{}",
                "-".repeat(widths.iter().sum::<usize>() + 2 * (n_cols - 1))
            );
        }
    }
    s
}

/// The Markdown table (same content as [`terminal_table`]).
pub fn markdown_table(inputs: &[Input], rows: &[Row]) -> String {
    let mut s = String::new();
    let mut head = String::from("| quantity | row | unit |");
    let mut rule = String::from("|---|---|---|");
    for (k, i) in inputs.iter().enumerate() {
        let _ = write!(head, " {} |", i.label);
        rule.push_str("---:|");
        if k > 0 {
            let _ = write!(
                head,
                " {} − {} | ratio | significant? |",
                i.label, inputs[0].label
            );
            rule.push_str("---:|---:|---|");
        }
    }
    let _ = writeln!(s, "{head}\n{rule}");
    for r in rows {
        let _ = write!(s, "| {} | {} | {} |", quantity_label(r), r.row, r.unit);
        for k in 0..inputs.len() {
            let _ = write!(s, " {} |", cell_text(&r.cells[k]));
            if k > 0 {
                let (d, q, z) = delta_texts(r.delta(k));
                let _ = write!(s, " {d} | {q} | {z} |");
            }
        }
        s.push('\n');
    }
    s
}

/// Every number as CSV: `quantity,when,row,unit,input,value,stderr,difference,ratio,z,significant`.
pub fn csv(inputs: &[Input], rows: &[Row]) -> String {
    let mut s =
        String::from("quantity,when,row,unit,input,value,stderr,difference,ratio,z,significant\n");
    let q = |t: &str| format!("\"{}\"", t.replace('"', "\"\""));
    for r in rows {
        for (k, input) in inputs.iter().enumerate() {
            let Some(m) = &r.cells[k] else { continue };
            let d = if k > 0 { r.delta(k) } else { None };
            let _ = writeln!(
                s,
                "{},{},{},{},{},{:e},{},{},{},{},{}",
                q(&r.quantity),
                q(&r.when),
                q(&r.row),
                q(&m.unit),
                q(&input.label),
                m.value,
                m.stderr.map(|e| format!("{e:e}")).unwrap_or_default(),
                d.as_ref()
                    .map(|d| format!("{:e}", d.difference))
                    .unwrap_or_default(),
                d.as_ref()
                    .map(|d| format!("{:e}", d.ratio))
                    .unwrap_or_default(),
                d.as_ref()
                    .and_then(|d| d.z)
                    .map(|z| format!("{z:e}"))
                    .unwrap_or_default(),
                d.as_ref()
                    .and_then(Delta::significant)
                    .map(|b| if b { "yes" } else { "no" })
                    .unwrap_or_default(),
            );
        }
    }
    s
}

// ---------------------------------------------------------------------------------------------
// Inputs

fn stem_of(path: &Path) -> String {
    path.file_stem()
        .map(|s| s.to_string_lossy().into_owned())
        .unwrap_or_else(|| "input".into())
}

fn read_tree(path: &Path) -> Result<Group, AppError> {
    h5in::read(path).map_err(|e| AppError::Input(e.to_string()))
}

/// `scan.h5@loss=0.5,drive=0.1` → the flat index of the nearest grid point and its description.
fn select_point(root: &Group, file: &Path, spec: &str) -> Result<(usize, String), AppError> {
    let axes = plot::scan_axes(root);
    if axes.is_empty() {
        return Err(AppError::Input(format!(
            "{}: `@{spec}` selects a scan point, but the file has no /scan group with axes",
            file.display()
        )));
    }
    let mut index = vec![0usize; axes.len()];
    let names = axes
        .iter()
        .map(|a| a.name.as_str())
        .collect::<Vec<_>>()
        .join(", ");
    for part in spec.split(',') {
        let (name, value) = part.split_once('=').ok_or_else(|| {
            AppError::Input(format!(
                "{}: scan point `{part}`: write axis=value (axes: {names})",
                file.display()
            ))
        })?;
        let (name, value) = (name.trim(), value.trim());
        let k = axes.iter().position(|a| a.name == name).ok_or_else(|| {
            AppError::Input(format!(
                "{}: unknown scan axis `{name}`; axes: {names}",
                file.display()
            ))
        })?;
        let v: f64 = value.parse().map_err(|_| {
            AppError::Input(format!(
                "{}: scan point `{part}`: `{value}` is not a number",
                file.display()
            ))
        })?;
        let vals = &axes[k].values;
        index[k] = (0..vals.len())
            .min_by(|&i, &j| (vals[i] - v).abs().total_cmp(&(vals[j] - v).abs()))
            .unwrap_or(0);
    }
    let mut flat = 0;
    let mut desc = Vec::new();
    for (a, &i) in axes.iter().zip(&index) {
        flat = flat * a.values.len() + i;
        desc.push(format!(
            "{}={}",
            a.name,
            a.values.get(i).copied().unwrap_or(f64::NAN)
        ));
    }
    Ok((flat, desc.join(",")))
}

/// Load one command-line input (config, result file or scan point), running a config whose
/// result is not found. `taken` lists the result files of earlier inputs: a new run never
/// overwrites one of them (two configs with the same file name in different folders get
/// `<stem>.h5` and `<stem>-2.h5`).
///
/// # Errors
/// Bad input (missing file, bad config, unknown axis) or a failed run.
pub fn resolve(
    arg: &str,
    out_dir: &Path,
    taken: &[PathBuf],
    say: &dyn Fn(&str),
) -> Result<Input, AppError> {
    let (path_text, spec) = match arg.rsplit_once('@') {
        Some((p, s)) if !Path::new(arg).exists() => (p, Some(s)),
        _ => (arg, None),
    };
    let path = PathBuf::from(path_text);
    if !path.is_file() {
        return Err(AppError::Input(format!("{}: no such file", path.display())));
    }
    let stem = stem_of(&path);
    let is_toml = path.extension().is_some_and(|e| e == "toml");
    if !is_toml {
        let tree = read_tree(&path)?;
        let (point, label) = match spec {
            Some(s) => {
                let (p, d) = select_point(&tree, &path, s)?;
                (Some(p), format!("{stem}@{d}"))
            }
            None => (None, stem),
        };
        return Ok(Input {
            label,
            file: path,
            origin: "read".into(),
            tree,
            point,
        });
    }
    if spec.is_some() {
        return Err(AppError::Input(format!(
            "{arg}: `@axis=value` selects a point of a scan result file (.h5), not of a config"
        )));
    }
    let plan = config::load(&path).map_err(|e| AppError::Input(e.to_string()))?;
    let hash = output::config_hash(&plan.source);
    let name = format!("{stem}.h5");
    let mut candidates = vec![out_dir.join(&name), PathBuf::from(&name)];
    if let Some(dir) = path.parent() {
        candidates.push(dir.join(&name));
    }
    // results of same-named configs from earlier comparisons (`<stem>-2.h5`, …)
    if let Ok(entries) = std::fs::read_dir(out_dir) {
        let mut more: Vec<PathBuf> = entries
            .flatten()
            .map(|e| e.path())
            .filter(|p| {
                p.file_name().and_then(|n| n.to_str()).is_some_and(|n| {
                    n.strip_prefix(&format!("{stem}-"))
                        .and_then(|r| r.strip_suffix(".h5"))
                        .is_some_and(|k| k.parse::<u32>().is_ok())
                })
            })
            .collect();
        more.sort();
        candidates.extend(more);
    }
    for c in &candidates {
        if !c.is_file() {
            continue;
        }
        let Ok(tree) = h5in::read(c) else { continue };
        if attr_str(tree.attrs(), "config_sha256") == Some(hash.as_str()) {
            say(&format!(
                "{arg}: reusing {} (config hash matches)\n",
                c.display()
            ));
            return Ok(Input {
                label: stem,
                file: c.clone(),
                origin: format!("reused {} (config hash matches)", c.display()),
                tree,
                point: None,
            });
        }
    }
    let mut target = out_dir.join(&name);
    let mut k = 2;
    while taken.contains(&target) {
        target = out_dir.join(format!("{stem}-{k}.h5"));
        k += 1;
    }
    say(&format!(
        "{arg}: running (no result with this config hash found) → {}\n",
        target.display()
    ));
    let res = run::run(&plan, &|_, _| {})?;
    output::write(&plan, &res, &target)?;
    for w in &res.warnings {
        eprintln!("warning: {}: {w}", path.display());
    }
    let tree = read_tree(&target)?;
    Ok(Input {
        label: stem,
        file: target,
        origin: "ran".into(),
        tree,
        point: None,
    })
}

/// Make column labels unique (`ring4`, `ring4 (2)`).
fn unique_labels(inputs: &mut [Input]) {
    for k in 1..inputs.len() {
        let base = inputs[k].label.clone();
        let mut n = 2;
        while inputs[..k].iter().any(|i| i.label == inputs[k].label) {
            inputs[k].label = format!("{base} ({n})");
            n += 1;
        }
    }
}

// ---------------------------------------------------------------------------------------------
// Photon budget from the compared outputs

/// The output flux per mode of each input, for the photon budget, and the time unit of the
/// flux (`s` for photons/s, `time unit` otherwise).
///
/// # Errors
/// When an input has no output flux or the flux units differ.
pub fn budget_outcomes(
    inputs: &[Input],
    all: &[Vec<Metric>],
) -> Result<(Vec<budget::Outcome>, String), String> {
    let mut unit: Option<String> = None;
    let mut out = Vec::new();
    for (i, ms) in inputs.iter().zip(all) {
        let flux: Vec<&Metric> = ms.iter().filter(|m| m.quantity == "output_flux").collect();
        if flux.is_empty() {
            return Err(format!("{} has no output flux (no cavity mode)", i.label));
        }
        match &unit {
            None => unit = Some(flux[0].unit.clone()),
            Some(u) if *u != flux[0].unit => {
                return Err(format!(
                    "flux units differ: {u} vs {} ({})",
                    flux[0].unit, i.label
                ))
            }
            _ => {}
        }
        out.push(budget::Outcome {
            label: i.label.clone(),
            modes: flux.iter().map(|m| m.row.clone()).collect(),
            flux: flux.iter().map(|m| m.value).collect(),
        });
    }
    let u = unit.unwrap_or_default();
    let time_unit = if u == "photons/s" { "s" } else { "time unit" };
    Ok((out, time_unit.into()))
}

// ---------------------------------------------------------------------------------------------
// Figures

fn figures(inputs: &[Input], dir: &Path) -> Result<Vec<PathBuf>, String> {
    let mut files = Vec::new();
    let runs: Vec<&Input> = inputs
        .iter()
        .filter(|i| i.point.is_none() && i.tree.get_group("scan").is_none())
        .collect();
    if runs.is_empty() {
        return Ok(files);
    }
    for obs in plot::TRACE_OBSERVABLES {
        let traces: Vec<(&Input, plot::Trace)> = runs
            .iter()
            .filter_map(|i| plot::trace(&i.tree, obs).map(|t| (*i, t)))
            .collect();
        let Some((_, first)) = traces.first() else {
            continue;
        };
        for row in first.rows.iter().take(8) {
            let mut lines = Vec::new();
            for (input, tr) in &traces {
                let Some(k) = tr.rows.iter().position(|x| x == row) else {
                    continue;
                };
                lines.push(Line {
                    label: input.label.clone(),
                    x: input
                        .tree
                        .get_dataset("time")
                        .map(values)
                        .unwrap_or_default(),
                    y: tr.data[k].clone(),
                    err: tr.stderr.as_ref().map(|e| e[k].clone()),
                });
            }
            let band = if traces.iter().any(|(_, t)| t.stderr.is_some()) {
                ", bands ±1 s.e."
            } else {
                ""
            };
            let fig = LineFigure {
                title: if row.is_empty() {
                    format!("{}{band}", plot::quantity_name(obs))
                } else {
                    format!("{}, {row}{band}", plot::quantity_name(obs))
                },
                x_label: plot::time_label(&runs[0].tree),
                y_quantity: plot::quantity_name(obs),
                y_unit: first.unit.clone(),
                lines,
            };
            let stem = if row.is_empty() {
                format!("compare-{obs}")
            } else {
                format!("compare-{obs}-{}", plot::slug(row))
            };
            files.extend(plot::lines(&fig, dir, &stem)?);
        }
    }
    Ok(files)
}

// ---------------------------------------------------------------------------------------------
// The command

/// Everything `cavern compare` was asked for.
#[derive(Clone, Debug)]
pub struct CompareRequest {
    /// Inputs as given on the command line.
    pub inputs: Vec<String>,
    /// Output folder (created if missing).
    pub out_dir: PathBuf,
    /// Photon budget detector, if requested.
    pub detector: Option<Detector>,
    /// Skip the figures.
    pub no_figures: bool,
    /// Print nothing but errors.
    pub quiet: bool,
}

/// Run the comparison: resolve inputs, print the table, write `report.md`, `summary.csv` and
/// the figures into the output folder.
///
/// # Errors
/// Bad input (exit 2) or a failed run or write (exit 1).
pub fn compare(req: &CompareRequest, say: &dyn Fn(&str)) -> Result<(), AppError> {
    if req.inputs.len() < 2 {
        return Err(AppError::Input("compare needs at least two inputs".into()));
    }
    if req.out_dir.exists() && !req.out_dir.is_dir() {
        return Err(AppError::Input(format!(
            "{} exists and is not a directory",
            req.out_dir.display()
        )));
    }
    std::fs::create_dir_all(&req.out_dir)
        .map_err(|e| AppError::Runtime(format!("cannot create {}: {e}", req.out_dir.display())))?;
    let quiet_say = |t: &str| {
        if !req.quiet {
            say(t)
        }
    };
    let mut inputs = Vec::new();
    for a in &req.inputs {
        let taken: Vec<PathBuf> = inputs.iter().map(|i: &Input| i.file.clone()).collect();
        inputs.push(resolve(a, &req.out_dir, &taken, &quiet_say)?);
    }
    unique_labels(&mut inputs);
    let all: Vec<Vec<Metric>> = inputs.iter().map(|i| metrics(&i.tree, i.point)).collect();
    let rows = rows(&all);
    let table = terminal_table(&inputs, &rows);
    let budget_text = req
        .detector
        .as_ref()
        .map(|det| match budget_outcomes(&inputs, &all) {
            Ok((outcomes, tu)) => budget::report(det, &outcomes, &tu),
            Err(e) => format!("Photon budget not computed: {e}.\n"),
        });
    let figs = if req.no_figures {
        Vec::new()
    } else {
        figures(&inputs, &req.out_dir).map_err(|e| AppError::Runtime(format!("figure: {e}")))?
    };
    let md = markdown_report(&inputs, &rows, budget_text.as_deref(), &figs);
    let write = |name: &str, text: &str| {
        let p = req.out_dir.join(name);
        std::fs::write(&p, text)
            .map_err(|e| AppError::Runtime(format!("cannot write {}: {e}", p.display())))
    };
    write("report.md", &md)?;
    write("summary.csv", &csv(&inputs, &rows))?;
    quiet_say(&table);
    if let Some(b) = &budget_text {
        quiet_say(&format!("\nphoton budget\n{b}"));
    }
    quiet_say(&format!(
        "\nwrote {}/report.md, summary.csv and {} figure files\n",
        req.out_dir.display(),
        figs.len()
    ));
    Ok(())
}

fn markdown_report(
    inputs: &[Input],
    rows: &[Row],
    budget: Option<&str>,
    figs: &[PathBuf],
) -> String {
    let mut s = String::from("# cavern comparison\n\n## Inputs\n\n| label | result file | origin | title | final time |\n|---|---|---|---|---|\n");
    for i in inputs {
        let t_end = i
            .tree
            .get_dataset("time")
            .map(values)
            .and_then(|t| t.last().copied())
            .map(|t| {
                let u = i
                    .tree
                    .get_dataset("time")
                    .and_then(|d| attr_str(&d.attrs, "units"))
                    .unwrap_or("");
                format!("{} {}", num6(t), plot::pretty_unit(u))
            })
            .unwrap_or_else(|| "–".into());
        let _ = writeln!(
            s,
            "| {} | {} | {} | {} | {t_end} |",
            i.label,
            i.file.display(),
            i.origin,
            attr_str(i.tree.attrs(), "title").unwrap_or("–")
        );
    }
    s.push_str(
        "\n## Side by side\n\nDifferences and ratios are relative to the first input. \"steady state\" \
         rows come from the steady-state solve, \"final time\" rows from the last sample. Values with ± \
         are means with their standard errors (trajectory results, recall over probes); for those the \
         difference is tested with a two-sided z-test on the difference of means with combined \
         standard error √(s₁² + s₂²), significant at 95 % when |z| > 1.96 (common practice). \
         \"exact\" marks deterministic (density-matrix) numbers, whose differences are real up to the \
         solver tolerances.\n\n",
    );
    s.push_str(&markdown_table(inputs, rows));
    if let Some(b) = budget {
        s.push_str("\n## Photon budget\n\n");
        s.push_str(b);
    }
    if !figs.is_empty() {
        s.push_str("\n## Figures\n\n");
        for n in plot::names(figs).iter().filter(|n| n.ends_with(".png")) {
            let _ = writeln!(s, "![{n}]({n})\n");
        }
    }
    s
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::h5out::Data;

    /// A two-axis scan (2 × 3 points) with a timed two-row observable and its standard error.
    fn scan_tree() -> Group {
        let mut root = Group::new();
        let s = root.group("scan");
        s.attr("axes", vec!["a".to_string(), "b".to_string()]);
        let axes = s.group("axes");
        axes.dataset("a", &[2], Data::F64(vec![1.0, 2.0]));
        axes.dataset("b", &[3], Data::F64(vec![10.0, 20.0, 30.0]));
        // value at point (i, j), row r, time k = 100 i + 10 j + r + 0.1 k
        let mut v = Vec::new();
        let mut e = Vec::new();
        for i in 0..2 {
            for j in 0..3 {
                for r in 0..2 {
                    for k in 0..4 {
                        v.push(f64::from(100 * i + 10 * j + r) + 0.1 * f64::from(k));
                        e.push(0.01 * f64::from(r + 1));
                    }
                }
            }
        }
        let obs = root.group("observables");
        obs.dataset("photon_number", &[2, 3, 2, 4], Data::F64(v))
            .attr("units", "photons")
            .attr("rows", vec!["m0".to_string(), "m1".to_string()]);
        obs.dataset("photon_number_stderr", &[2, 3, 2, 4], Data::F64(e))
            .attr("units", "photons");
        root
    }

    #[test]
    fn scan_point_metrics_take_the_final_sample_of_the_selected_point() {
        let root = scan_tree();
        let (p, desc) = select_point(&root, Path::new("s.h5"), "a=2.2,b=19").unwrap();
        assert_eq!((p, desc.as_str()), (4, "a=2,b=20"));
        let m = metrics(&root, Some(p));
        assert_eq!(m.len(), 2);
        assert_eq!(
            (m[0].row.as_str(), m[0].when.as_str()),
            ("m0", "final time")
        );
        assert!((m[0].value - 110.3).abs() < 1e-12, "{m:?}");
        assert!((m[1].value - 111.3).abs() < 1e-12);
        assert_eq!(m[1].stderr, Some(0.02));
        assert!(select_point(&root, Path::new("s.h5"), "c=1").is_err());
        assert!(select_point(&root, Path::new("s.h5"), "a").is_err());
    }

    #[test]
    fn deltas_ratios_and_z() {
        let m = |v: f64, e: Option<f64>, unit: &str| Metric {
            quantity: "q".into(),
            when: String::new(),
            row: String::new(),
            unit: unit.into(),
            value: v,
            stderr: e,
        };
        let r = Row {
            quantity: "q".into(),
            when: String::new(),
            row: String::new(),
            unit: "1".into(),
            cells: vec![
                Some(m(4.0, Some(0.3), "1")),
                Some(m(5.0, Some(0.4), "1")),
                Some(m(5.0, None, "1")),
                Some(m(5.0, None, "photons")),
                None,
            ],
        };
        let d = r.delta(1).unwrap();
        assert_eq!((d.difference, d.ratio), (1.0, 1.25));
        assert!((d.z.unwrap() - 2.0).abs() < 1e-12 && d.significant() == Some(true));
        // one standard error only: it alone is the combined error
        assert!((r.delta(2).unwrap().z.unwrap() - 1.0 / 0.3).abs() < 1e-12);
        assert!(r.delta(3).is_none(), "units differ");
        assert!(r.delta(4).is_none(), "missing");
        let exact = Row {
            cells: vec![Some(m(0.0, None, "1")), Some(m(0.0, None, "1"))],
            ..r.clone()
        };
        let d = exact.delta(1).unwrap();
        assert_eq!((d.difference, d.z), (0.0, None));
        assert!(d.ratio.is_nan());
    }
}
