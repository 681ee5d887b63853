//! `cavern compare`: a config against itself, an empty driven cavity whose loss rate doubles
//! (against the analytic steady state and relaxation rate), the significance test on trajectory
//! results, recall rows (contract C2) and scan points (contract C3), with synthetic result files
//! written through `cavern::h5out`.

use crate::util::{close, Sandbox};
use cavern::h5out::{write_atomic, Data, Group};
use std::f64::consts::TAU;
use std::path::Path;

/// An empty driven cavity, κ/2π = `loss` MHz, Δ/2π = 0.5 MHz, ε/2π = 0.4 MHz, with a steady-state
/// solve.
pub fn cavity_config(loss: f64) -> String {
    format!(
        r#"title = "empty driven cavity (test)"
[units]
system = "physical"
frequency = "MHz"
[time]
stop = 3.0
samples = 31
[[modes]]
name = "cavity"
levels = 14
detuning = 0.5
loss = {loss}
drive = 0.4
[steady_state]
"#
    )
}

/// One parsed line of `summary.csv`.
#[derive(Debug, Clone)]
pub struct CsvRow {
    pub quantity: String,
    pub when: String,
    pub row: String,
    pub unit: String,
    pub input: String,
    pub value: f64,
    pub stderr: Option<f64>,
    pub difference: Option<f64>,
    pub ratio: Option<f64>,
    pub z: Option<f64>,
    pub significant: String,
}

fn split_csv(line: &str) -> Vec<String> {
    let mut out = Vec::new();
    let mut cur = String::new();
    let mut quoted = false;
    let mut chars = line.chars().peekable();
    while let Some(c) = chars.next() {
        match c {
            '"' if quoted && chars.peek() == Some(&'"') => {
                cur.push('"');
                chars.next();
            }
            '"' => quoted = !quoted,
            ',' if !quoted => out.push(std::mem::take(&mut cur)),
            _ => cur.push(c),
        }
    }
    out.push(cur);
    out
}

/// Parse the `summary.csv` of a comparison folder.
pub fn read_csv(dir: &Path) -> Vec<CsvRow> {
    let text = std::fs::read_to_string(dir.join("summary.csv")).expect("summary.csv");
    let mut lines = text.lines();
    assert_eq!(
        lines.next(),
        Some("quantity,when,row,unit,input,value,stderr,difference,ratio,z,significant")
    );
    let opt = |s: &str| {
        if s.is_empty() {
            None
        } else {
            Some(s.parse::<f64>().expect("number"))
        }
    };
    lines
        .map(|l| {
            let f = split_csv(l);
            assert_eq!(f.len(), 11, "{l}");
            CsvRow {
                quantity: f[0].clone(),
                when: f[1].clone(),
                row: f[2].clone(),
                unit: f[3].clone(),
                input: f[4].clone(),
                value: f[5].parse().expect("value"),
                stderr: opt(&f[6]),
                difference: opt(&f[7]),
                ratio: opt(&f[8]),
                z: opt(&f[9]),
                significant: f[10].clone(),
            }
        })
        .collect()
}

/// The row of `quantity`/`row` for `input`.
pub fn find<'a>(rows: &'a [CsvRow], quantity: &str, row: &str, input: &str) -> &'a CsvRow {
    rows.iter()
        .find(|r| r.quantity == quantity && r.row == row && r.input == input)
        .unwrap_or_else(|| panic!("no {quantity}/{row}/{input} in {rows:#?}"))
}

/// A synthetic single-run result: `/time`, `/observables/output_flux` (one mode) with an
/// optional standard error, and the root attributes of a run file.
pub fn synthetic_run(path: &Path, flux: &[f64], stderr: Option<&[f64]>) {
    let n = flux.len();
    let mut root = Group::new();
    root.attr("tool", "cavern")
        .attr("kind", "run")
        .attr("time_unit", "us")
        .attr("title", "synthetic result (test)");
    root.dataset(
        "time",
        &[n],
        Data::F64((0..n).map(|k| k as f64 * 0.1).collect()),
    )
    .attr("units", "us");
    let obs = root.group("observables");
    obs.dataset("output_flux", &[1, n], Data::F64(flux.to_vec()))
        .attr("units", "photons/s")
        .attr("rows", vec!["cavity".to_string()]);
    if let Some(e) = stderr {
        obs.dataset("output_flux_stderr", &[1, n], Data::F64(e.to_vec()))
            .attr("units", "photons/s")
            .attr("rows", vec!["cavity".to_string()]);
    }
    write_atomic(&root, path).expect("write a synthetic result");
}

fn compare(sb: &Sandbox, inputs: &[&Path], extra: &[&str]) -> crate::util::Outcome {
    let mut args: Vec<std::ffi::OsString> = vec!["compare".into()];
    args.extend(inputs.iter().map(|p| p.as_os_str().to_owned()));
    args.push("-o".into());
    args.push(sb.join("cmp").into_os_string());
    args.extend(extra.iter().map(|s| (*s).into()));
    sb.cavern(args)
}

#[test]
fn a_config_compared_with_itself_shows_no_difference() {
    let sb = Sandbox::new();
    let a = sb.write("a.toml", &cavity_config(1.0));
    // same physics, different text: a separate run (different config hash), which must agree
    // exactly because runs are deterministic
    let b = sb.write("b.toml", &format!("# a comment\n{}", cavity_config(1.0)));
    let out = compare(&sb, &[&a, &b, &a], &["--no-figures"]);
    out.assert_success();
    // the third input is the first config again: its result is reused, not recomputed
    assert!(
        out.stdout.contains("reusing") && out.stdout.contains("config hash matches"),
        "{}",
        out.describe()
    );
    let rows = read_csv(&sb.join("cmp"));
    let compared: Vec<&CsvRow> = rows.iter().filter(|r| r.difference.is_some()).collect();
    assert!(compared.len() >= 2 * 4, "{rows:#?}");
    for r in compared {
        assert_eq!(r.difference, Some(0.0), "{r:?}");
        assert_eq!(r.ratio, Some(1.0), "{r:?}");
        assert_eq!(
            r.significant, "",
            "deterministic results carry no test: {r:?}"
        );
    }
    let md = std::fs::read_to_string(sb.join("cmp/report.md")).expect("report.md");
    assert!(
        md.contains("| output_flux (steady state) | cavity | photons/s |"),
        "{md}"
    );
}

#[test]
fn doubling_the_loss_of_an_empty_driven_cavity_matches_the_analytic_changes() {
    // Empty driven cavity (Walls & Milburn, Quantum Optics, 2nd ed. (2008), ch. 7, from memory):
    // the steady state is a coherent state with ⟨n⟩ = ε²/(Δ² + κ²/4); the output flux is κ⟨n⟩;
    // the field amplitude relaxes at κ/2, which is the Liouvillian spectral gap.
    let sb = Sandbox::new();
    let a = sb.write("k1.toml", &cavity_config(1.0));
    let b = sb.write("k2.toml", &cavity_config(2.0));
    let out = compare(&sb, &[&a, &b], &[]);
    out.assert_success();
    let rows = read_csv(&sb.join("cmp"));
    let (eps, delta) = (TAU * 0.4, TAU * 0.5);
    let n = |kappa: f64| eps * eps / (delta * delta + kappa * kappa / 4.0);
    let (k1, k2) = (TAU * 1.0, TAU * 2.0);
    // photons/s: κ in rad/µs × 10⁶
    let flux = |kappa: f64| kappa * n(kappa) * 1e6;
    let n1 = find(&rows, "photon_number", "cavity", "k1");
    let n2 = find(&rows, "photon_number", "cavity", "k2");
    assert_eq!(n1.when, "steady state");
    assert!(close(n1.value, n(k1), 1e-7, 1e-12), "{n1:?} vs {}", n(k1));
    assert!(close(n2.value, n(k2), 1e-7, 1e-12), "{n2:?} vs {}", n(k2));
    let f2 = find(&rows, "output_flux", "cavity", "k2");
    assert_eq!(f2.unit, "photons/s");
    let want_ratio = flux(k2) / flux(k1); // = 2 (Δ² + κ₁²/4)/(Δ² + κ₂²/4) = 0.8 here
    assert!(close(want_ratio, 0.8, 1e-12, 0.0));
    assert!(close(f2.ratio.unwrap(), want_ratio, 1e-7, 0.0), "{f2:?}");
    assert!(
        close(f2.difference.unwrap(), flux(k2) - flux(k1), 1e-6, 0.0),
        "{f2:?} vs {}",
        flux(k2) - flux(k1)
    );
    let g1 = find(&rows, "spectral_gap", "", "k1");
    let g2 = find(&rows, "spectral_gap", "", "k2");
    assert_eq!(g1.unit, "rad/us");
    assert!(close(g1.value, k1 / 2.0, 1e-7, 0.0), "{g1:?}");
    assert!(
        close(g2.difference.unwrap(), (k2 - k1) / 2.0, 1e-7, 0.0),
        "{g2:?}"
    );
    assert!(close(g2.ratio.unwrap(), 2.0, 1e-7, 0.0), "{g2:?}");
    // the terminal table shows the same rows, and the figures are there
    assert!(out.stdout.contains("spectral_gap") && out.stdout.contains("k2 − k1"));
    for f in [
        "report.md",
        "summary.csv",
        "compare-output_flux-cavity.png",
        "compare-output_flux-cavity.svg",
        "k1.h5",
        "k2.h5",
    ] {
        assert!(
            sb.join("cmp").join(f).is_file(),
            "{f} missing: {:?}",
            sb.entries()
        );
    }
}

#[test]
fn trajectory_differences_get_a_two_sided_z_test() {
    // z = (b − a)/√(s_a² + s_b²), significant at 95 % when |z| > 1.96 (common practice)
    let sb = Sandbox::new();
    let (a, b, c) = (sb.join("a.h5"), sb.join("b.h5"), sb.join("c.h5"));
    synthetic_run(&a, &[0.0, 100.0], Some(&[0.0, 3.0]));
    synthetic_run(&b, &[0.0, 110.0], Some(&[0.0, 4.0])); // z = 10/5 = 2.0
    synthetic_run(&c, &[0.0, 105.0], Some(&[0.0, 4.0])); // z = 5/5 = 1.0
    let out = compare(&sb, &[&a, &b, &c], &["--no-figures"]);
    out.assert_success();
    let rows = read_csv(&sb.join("cmp"));
    let rb = find(&rows, "output_flux", "cavity", "b");
    assert_eq!(rb.when, "final time");
    assert_eq!(rb.stderr, Some(4.0));
    assert!(close(rb.z.unwrap(), 2.0, 1e-12, 0.0), "{rb:?}");
    assert_eq!(rb.significant, "yes");
    let rc = find(&rows, "output_flux", "cavity", "c");
    assert!(close(rc.z.unwrap(), 1.0, 1e-12, 0.0), "{rc:?}");
    assert_eq!(rc.significant, "no");
    assert!(out.stdout.contains("yes (z = 2.00)"), "{}", out.describe());
}

#[test]
fn recall_rows_and_scan_points_are_compared() {
    let sb = Sandbox::new();
    // contract C2: /recall with success ± stderr and time to recall per number of flips
    let recall = |path: &Path, success: [f64; 2], err: [f64; 2]| {
        let mut root = Group::new();
        root.attr("kind", "run");
        let r = root.group("recall");
        r.attr("threshold", 0.9)
            .attr("probe_count", 50_i64)
            .attr("method", "trajectories");
        r.dataset("flips", &[2], Data::I64(vec![1, 2]));
        r.dataset("success", &[2], Data::F64(success.to_vec()));
        r.dataset("success_stderr", &[2], Data::F64(err.to_vec()));
        r.dataset("time_to_recall", &[2], Data::F64(vec![1.5, 2.5]))
            .attr("units", "us");
        write_atomic(&root, path).expect("write");
    };
    let (a, b) = (sb.join("ra.h5"), sb.join("rb.h5"));
    recall(&a, [0.9, 0.6], [0.03, 0.04]);
    recall(&b, [0.8, 0.6], [0.04, 0.04]);
    // contract C3: a one-axis scan with steady-state photon numbers
    let scan = sb.join("scan.h5");
    let mut root = Group::new();
    root.attr("kind", "scan");
    let s = root.group("scan");
    s.attr("axes", vec!["loss".to_string()]);
    s.group("axes")
        .dataset("loss", &[3], Data::F64(vec![0.5, 1.0, 2.0]))
        .attr("units", "MHz")
        .attr("path", "modes[0].loss");
    s.dataset("status", &[3], Data::I64(vec![0, 0, 0]));
    root.group("steady_state")
        .group("observables")
        .dataset("photon_number", &[3, 1], Data::F64(vec![0.5, 0.32, 0.128]))
        .attr("units", "photons")
        .attr("rows", vec!["cavity".to_string()]);
    write_atomic(&root, &scan).expect("write scan");

    let out = compare(&sb, &[&a, &b], &["--no-figures"]);
    out.assert_success();
    let rows = read_csv(&sb.join("cmp"));
    let s1 = find(&rows, "recall_success", "flips=1", "rb");
    // z = −0.1/√(0.03² + 0.04²) = −2.0
    assert!(close(s1.z.unwrap(), -2.0, 1e-12, 0.0), "{s1:?}");
    assert_eq!(s1.significant, "yes");
    let t2 = find(&rows, "time_to_recall", "flips=2", "rb");
    assert_eq!((t2.unit.as_str(), t2.difference), ("us", Some(0.0)));

    let sb2 = Sandbox::new();
    let p1 = format!("{}@loss=0.9", scan.display()); // nearest grid point: loss = 1.0
    let p2 = format!("{}@loss=2", scan.display());
    let out = sb2.cavern(["compare", &p1, &p2, "-o", "cmp", "--no-figures"]);
    out.assert_success();
    let rows = read_csv(&sb2.join("cmp"));
    let r = find(&rows, "photon_number", "cavity", "scan@loss=2");
    assert!(close(r.ratio.unwrap(), 0.128 / 0.32, 1e-12, 0.0), "{r:?}");
    let bad = sb2.cavern([
        "compare",
        &p1,
        &format!("{}@gain=1", scan.display()),
        "-o",
        "cmp",
    ]);
    assert_eq!(bad.code, Some(2), "{}", bad.describe());
    assert!(
        bad.stderr.contains("unknown scan axis `gain`"),
        "{}",
        bad.describe()
    );
}

#[test]
fn same_named_configs_in_different_folders_keep_separate_results() {
    let sb = Sandbox::new();
    std::fs::create_dir_all(sb.join("x")).unwrap();
    std::fs::create_dir_all(sb.join("y")).unwrap();
    let a = sb.write("x/run.toml", &cavity_config(1.0));
    let b = sb.write("y/run.toml", &cavity_config(2.0));
    let out = compare(&sb, &[&a, &b], &["--no-figures"]);
    out.assert_success();
    assert!(sb.join("cmp/run.h5").is_file() && sb.join("cmp/run-2.h5").is_file());
    let rows = read_csv(&sb.join("cmp"));
    let r = find(&rows, "spectral_gap", "", "run (2)");
    assert!(close(r.ratio.unwrap(), 2.0, 1e-7, 0.0), "{r:?}");
    // a second comparison finds both results again instead of running
    let again = compare(&sb, &[&a, &b], &["--no-figures"]);
    again.assert_success();
    assert_eq!(
        again.stdout.matches("reusing").count(),
        2,
        "{}",
        again.describe()
    );
}
