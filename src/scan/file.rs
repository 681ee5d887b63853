//! The HDF5 result file of a scan (contract C3 of docs/notes; layout in README.md, "Parameter
//! scans"), built from journal records only.

use super::exec::Layout;
use super::journal::PointRecord;
use super::spec::Scan;
use crate::h5out::{write_atomic, Data, Group};
use crate::AppError;
use std::collections::BTreeMap;
use std::path::Path;

/// Build the file tree from one record per point (all points present).
pub fn tree(scan: &Scan, layout: &Layout, records: &BTreeMap<u64, &PointRecord>) -> Group {
    let plan = &scan.base;
    let shape = scan.shape();
    let n = scan.n_points();
    let n_t = layout.n_times;
    let rec = |i: usize| records.get(&(i as u64)).copied();
    let failed = (0..n).filter(|&i| rec(i).is_none_or(|r| !r.ok)).count();

    let mut root = Group::new();
    crate::output::identity_attrs(&mut root, plan);
    root.attr("kind", "scan")
        .attr("n_points", n as i64)
        .attr("n_failed", failed as i64);

    // times: shared, or per point when a scanned key changes them
    let times0 = rec(0).map(|r| r.times.clone()).unwrap_or_default();
    let shared = (0..n).all(|i| rec(i).is_some_and(|r| r.times == times0));
    if shared {
        root.dataset("time", &[n_t], Data::F64(times0))
            .attr("units", plan.units.time_label())
            .attr("description", "sample times (the same for every point)");
    } else {
        let mut v = Vec::with_capacity(n * n_t);
        for i in 0..n {
            match rec(i).filter(|r| r.times.len() == n_t) {
                Some(r) => v.extend_from_slice(&r.times),
                None => v.extend(std::iter::repeat_n(f64::NAN, n_t)),
            }
        }
        let mut s = shape.clone();
        s.push(n_t);
        root.dataset("time", &s, Data::F64(v))
            .attr("units", plan.units.time_label())
            .attr(
                "description",
                "sample times of each point [axis…, time] (a scanned key changes them)",
            );
    }

    // observables: [axis…, rows?, time]; values of point i are at offset `off` of its record
    let mut off = 0;
    let block = |g: &mut Group,
                 name: &str,
                 s: &crate::run::Series,
                 per_point: usize,
                 trailing: &[usize],
                 description: String,
                 off: &mut usize| {
        let mut v = Vec::with_capacity(n * per_point);
        for i in 0..n {
            match rec(i).filter(|r| r.ok) {
                Some(r) => v.extend_from_slice(&r.values[*off..*off + per_point]),
                None => v.extend(std::iter::repeat_n(f64::NAN, per_point)),
            }
        }
        *off += per_point;
        let mut sh = shape.clone();
        sh.extend_from_slice(trailing);
        let ds = g.dataset(name, &sh, Data::F64(v));
        ds.attr("units", s.units.as_str())
            .attr("description", description);
        if !s.rows.is_empty() {
            ds.attr("rows", s.rows.clone());
        }
    };
    let trailing = |s: &crate::run::Series, t: Option<usize>| -> Vec<usize> {
        let mut v = Vec::new();
        if !s.rows.is_empty() {
            v.push(s.rows.len());
        }
        v.extend(t);
        v
    };
    let obs = root.group("observables");
    for s in &layout.series {
        let desc = format!(
            "{}; [axis…{}, time], NaN for failed points",
            s.description,
            if s.rows.is_empty() { "" } else { ", rows" }
        );
        block(
            obs,
            &s.name,
            s,
            s.n_rows() * n_t,
            &trailing(s, Some(n_t)),
            desc,
            &mut off,
        );
    }
    if layout.stderr {
        for s in &layout.series {
            let desc = format!(
                "standard error of the mean of {} over the trajectories of each point",
                s.name
            );
            block(
                obs,
                &format!("{}_stderr", s.name),
                s,
                s.n_rows() * n_t,
                &trailing(s, Some(n_t)),
                desc,
                &mut off,
            );
        }
    }
    if !layout.steady.is_empty() {
        let g = root.group("steady_state").group("observables");
        for s in &layout.steady {
            let desc = format!(
                "{} of the steady state of each point; NaN where it failed or is not unique",
                s.description
            );
            block(
                g,
                &s.name,
                s,
                s.n_rows(),
                &trailing(s, None),
                desc,
                &mut off,
            );
        }
    }

    // the scan: axes, per-point status, errors and statistics
    let sg = root.group("scan");
    sg.attr("axes", scan.axes.iter().map(|a| a.name.clone()).collect::<Vec<_>>())
        .attr("shape", shape.iter().map(|&k| k as i64).collect::<Vec<_>>())
        .attr("n_points", n as i64)
        .attr("seed", scan.seed as i64)
        .attr(
            "order",
            "points are numbered row-major over the axes (the last axis varies fastest); every per-point \
             dataset has the axes as leading dimensions",
        );
    let axes = sg.group("axes");
    for a in &scan.axes {
        let s0 = &a.settings[0];
        let ds = axes.dataset(&a.name, &[a.len()], Data::F64(s0.values.clone()));
        ds.attr("units", s0.units.as_str())
            .attr("path", s0.path.as_str());
        if a.settings.len() > 1 {
            ds.attr(
                "zipped_paths",
                a.settings
                    .iter()
                    .map(|s| s.path.clone())
                    .collect::<Vec<_>>(),
            );
        }
    }
    let zipped: Vec<_> = scan
        .axes
        .iter()
        .flat_map(|a| a.settings.iter().skip(1).map(move |s| (a, s)))
        .collect();
    if !zipped.is_empty() {
        let z = sg.group("zipped");
        for (a, s) in zipped {
            z.dataset(&s.path, &[a.len()], Data::F64(s.values.clone()))
                .attr("units", s.units.as_str())
                .attr("path", s.path.as_str())
                .attr("axis", a.name.as_str());
        }
    }
    let ints = |f: &dyn Fn(&PointRecord) -> i64, missing: i64| -> Data {
        Data::I64((0..n).map(|i| rec(i).map_or(missing, f)).collect())
    };
    let per_point = [
        (
            "status",
            ints(&|r| i64::from(!r.ok), 1),
            "1",
            "0 = ok, 1 = failed (see /scan/error)",
        ),
        (
            "steps",
            ints(&|r| r.steps as i64, 0),
            "1",
            "accepted integrator steps (summed over trajectories)",
        ),
        (
            "rejected_steps",
            ints(&|r| r.rejected as i64, 0),
            "1",
            "rejected integrator steps",
        ),
        (
            "rhs_evaluations",
            ints(&|r| r.rhs_evals as i64, 0),
            "1",
            "right-hand-side evaluations",
        ),
        (
            "dimension",
            ints(&|r| r.dim as i64, 0),
            "1",
            "Hilbert-space dimension d (0 if the point failed before building the model)",
        ),
    ];
    for (name, data, units, desc) in per_point {
        sg.dataset(name, &shape, data)
            .attr("units", units)
            .attr("description", desc);
    }
    if scan.per_point_seed {
        sg.dataset(
            "seed",
            &shape,
            ints(&|r| r.seed.map_or(-1, |s| s as i64), -1),
        )
        .attr("units", "1")
        .attr(
            "description",
            "solver.seed of each point: SplitMix64(SplitMix64(scan seed) XOR point index) >> 1, \
                 independent of thread count, order and shards",
        );
    }
    let texts = |f: &dyn Fn(&PointRecord) -> String| -> Data {
        Data::Strs(
            (0..n)
                .map(|i| rec(i).map_or_else(|| "missing".into(), f))
                .collect(),
        )
    };
    sg.dataset("error", &[n], texts(&|r| r.error.clone())).attr(
        "description",
        "why each point failed (flat, in point order; empty if ok)",
    );
    sg.dataset("warnings", &[n], texts(&|r| r.warnings.join("\n")))
        .attr(
            "description",
            "warnings of each point (flat, in point order; one per line)",
        );

    let model = root.group("model");
    model
        .attr("n_sites", plan.network.sites.len() as i64)
        .attr("n_modes", plan.network.modes.len() as i64)
        .attr("mode_names", plan.mode_names.clone());
    root.group("solver")
        .attr("method", layout.method.name())
        .attr("integrator", crate::output::INTEGRATOR);
    root.group("input")
        .dataset("config_toml", &[], Data::Str(scan.source.clone()));
    root
}

/// Write the scan's result file atomically.
///
/// # Errors
/// [`AppError::Runtime`] naming the path.
pub fn write(
    scan: &Scan,
    layout: &Layout,
    records: &BTreeMap<u64, &PointRecord>,
    path: &Path,
) -> Result<(), AppError> {
    if let Some(bad) = records
        .values()
        .find(|r| r.ok && r.values.len() != layout.n_values())
    {
        return Err(AppError::Runtime(format!(
            "point {} holds {} values but this scan's observables need {} (a journal from another cavern version or machine?)",
            bad.index,
            bad.values.len(),
            layout.n_values()
        )));
    }
    write_atomic(&tree(scan, layout, records), path).map_err(|e| {
        AppError::Runtime(format!(
            "cannot write the result file {}: {e}",
            path.display()
        ))
    })
}
