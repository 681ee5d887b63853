//! `cavern run FILE -o OUT.h5`: the HDF5 result file (read back with h5py), the summary table
//! printed on stdout, quiet mode, reproducibility, the truncation warning and output-path errors.

use crate::util::{close, python, repo, Outcome, Sandbox, VERSION};
use std::ffi::OsStr;
use std::path::Path;

/// Reads a result file, checks its layout and prints one tab-separated line per observable row
/// (`row name label units first last min max`, floats as Python `repr`, i.e. exact), then the
/// solver counters and the warnings. Exits non-zero listing every layout problem.
///
/// argv: h5 config version time_unit frequency_unit units_system n_times dim spec, where spec is
/// `name:rows,…` and `rows` is `-` for a one-row dataset of shape [time].
const INSPECT: &str = r#"
import sys, hashlib
import h5py, numpy as np

h5, cfg, version, tu, fu, system, n_t, dim, spec = sys.argv[1:]
n_t, dim = int(n_t), int(dim)
want = {}
for item in spec.split(','):
    name, rows = item.split(':')
    want[name] = None if rows == '-' else int(rows)
raw = open(cfg, 'rb').read()
problems = []

def check(ok, msg):
    if not ok:
        problems.append(msg)

def text(x):
    return x.decode('utf-8') if isinstance(x, bytes) else x

def nonempty_str(x):
    x = text(x)
    return isinstance(x, str) and x.strip() != ''

with h5py.File(h5, 'r') as f:
    a = f.attrs
    for key, expected in [('tool', 'cavern'), ('version', version),
                          ('config_sha256', hashlib.sha256(raw).hexdigest()),
                          ('time_unit', tu), ('frequency_unit', fu), ('units_system', system)]:
        check(text(a.get(key)) == expected, f'root attribute {key} = {a.get(key)!r}, expected {expected!r}')

    t = f['time']
    check(t.shape == (n_t,), f'/time shape {t.shape}, expected {(n_t,)}')
    check(t.dtype == np.float64, f'/time dtype {t.dtype}')
    check(text(t.attrs.get('units')) == tu, f"/time units {t.attrs.get('units')!r}, expected {tu!r}")
    check(nonempty_str(t.attrs.get('description')), '/time has no description')
    tv = t[()]
    check(tv[0] == 0.0 and bool(np.all(np.diff(tv) > 0)), f'/time is not 0, increasing: {tv}')

    obs = f['observables']
    check(set(obs.keys()) == set(want), f'observables {sorted(obs.keys())}, expected {sorted(want)}')
    for name in sorted(obs.keys()):
        ds = obs[name]
        rows = want.get(name)
        shape = (n_t,) if rows is None else (rows, n_t)
        check(ds.shape == shape, f'{name}: shape {ds.shape}, expected {shape}')
        check(ds.dtype == np.float64, f'{name}: dtype {ds.dtype}')
        units = text(ds.attrs.get('units'))
        check(nonempty_str(units), f'{name}: no units attribute')
        check(nonempty_str(ds.attrs.get('description')), f'{name}: no description attribute')
        data = ds[()]
        check(bool(np.all(np.isfinite(data))), f'{name}: non-finite values')
        if rows is None:
            labels = ['-']
            check('rows' not in ds.attrs, f'{name}: a [time] dataset with a rows attribute')
        else:
            labels = [text(x) for x in ds.attrs.get('rows', [])]
            check(len(labels) == rows, f'{name}: rows attribute {labels}, expected {rows} labels')
        for label, row in zip(labels, data.reshape(-1, data.shape[-1])):
            print('row', name, label, units, repr(float(row[0])), repr(float(row[-1])),
                  repr(float(row.min())), repr(float(row.max())), sep='\t')

    c = f['input/config_toml']
    check(c.shape == (), f'/input/config_toml shape {c.shape}, expected scalar')
    check(c.asstr()[()] == raw.decode('utf-8'), '/input/config_toml differs from the config file')

    s = f['solver'].attrs
    steps, rhs = int(s['steps']), int(s['rhs_evaluations'])
    check(steps > 0, f'solver steps = {steps}')
    check(rhs >= 6 * steps, f'solver rhs_evaluations = {rhs} < 6 * steps = {6 * steps}')
    check(text(s.get('method')) == 'density-matrix', f"solver method {s.get('method')!r}")
    check(text(s.get('method_requested')) == 'density-matrix', f"solver method_requested {s.get('method_requested')!r}")
    check('jumps' not in f and 'clicks' not in f, 'a density-matrix run wrote /jumps or /clicks')
    print('solver', steps, int(s['rejected_steps']), rhs, int(s['threads']), sep='\t')

    m = f['model'].attrs
    check(int(m['dimension']) == dim, f"model dimension {m['dimension']}, expected {dim}")

    warnings = [text(w) for w in a.get('warnings', [])]
    check(int(a['n_warnings']) == len(warnings), f"n_warnings = {a['n_warnings']} but {len(warnings)} warnings")
    for w in warnings:
        print('warning', w.replace('\n', ' '), sep='\t')

if problems:
    print('\n'.join(problems), file=sys.stderr)
    sys.exit(1)
"#;

/// Compares the observables and times of two result files bit for bit; exits non-zero listing
/// every difference. argv: a.h5 b.h5
const COMPARE: &str = r#"
import sys
import h5py, numpy as np

diffs = []
with h5py.File(sys.argv[1], 'r') as a, h5py.File(sys.argv[2], 'r') as b:
    names = ['time'] + ['observables/' + k for k in a['observables']]
    if set(a['observables']) != set(b['observables']):
        diffs.append(f"observables {sorted(a['observables'])} vs {sorted(b['observables'])}")
    for n in names:
        if n not in b:
            continue
        x, y = a[n][()], b[n][()]
        if x.shape != y.shape or x.dtype != y.dtype:
            diffs.append(f'{n}: {x.shape} {x.dtype} vs {y.shape} {y.dtype}')
        elif x.tobytes() != y.tobytes():
            diffs.append(f'{n}: not bit-identical, max |difference| = {np.max(np.abs(x - y)):.3e}')
if diffs:
    print('\n'.join(diffs), file=sys.stderr)
    sys.exit(1)
"#;

/// What a run's result file should look like.
struct Expect<'a> {
    time_unit: &'a str,
    frequency_unit: &'a str,
    units_system: &'a str,
    n_times: usize,
    dim: usize,
    /// `name:rows` (rows `-` for a [time] dataset).
    datasets: &'a [&'a str],
}

/// One observable row: as printed in the summary table or as read from the file.
#[derive(Debug, Clone, PartialEq)]
struct Row {
    name: String,
    label: String,
    units: String,
    /// value at the first sample, at the last sample, minimum, maximum
    values: [f64; 4],
}

/// What the result file holds, as reported by [`INSPECT`].
#[derive(Debug)]
struct FileSummary {
    rows: Vec<Row>,
    steps: u64,
    rejected: u64,
    rhs: u64,
    threads: u64,
    warnings: Vec<String>,
}

fn inspect(h5: &Path, config: &Path, e: &Expect) -> FileSummary {
    let n_t = e.n_times.to_string();
    let dim = e.dim.to_string();
    let spec = e.datasets.join(",");
    let args: Vec<&OsStr> = vec![
        h5.as_os_str(),
        config.as_os_str(),
        VERSION.as_ref(),
        e.time_unit.as_ref(),
        e.frequency_unit.as_ref(),
        e.units_system.as_ref(),
        n_t.as_ref(),
        dim.as_ref(),
        spec.as_ref(),
    ];
    let out = python(INSPECT, &args);
    let mut s = FileSummary {
        rows: Vec::new(),
        steps: 0,
        rejected: 0,
        rhs: 0,
        threads: 0,
        warnings: Vec::new(),
    };
    let float = |x: &str| x.parse::<f64>().expect("a Python float repr");
    let int = |x: &str| x.parse::<u64>().expect("an integer");
    for line in out.lines() {
        let f: Vec<&str> = line.split('\t').collect();
        match f[0] {
            "row" => s.rows.push(Row {
                name: f[1].into(),
                label: f[2].into(),
                units: f[3].into(),
                values: [float(f[4]), float(f[5]), float(f[6]), float(f[7])],
            }),
            "solver" => {
                (s.steps, s.rejected, s.rhs, s.threads) =
                    (int(f[1]), int(f[2]), int(f[3]), int(f[4]))
            }
            "warning" => s.warnings.push(f[1].into()),
            _ => panic!("unexpected line from the Python check: {line}"),
        }
    }
    s
}

/// The summary table on stdout: the header line, then one line per observable row up to a blank
/// line. Columns: quantity, row, unit (may contain spaces), then four numbers.
fn parse_table(stdout: &str) -> (String, Vec<Row>) {
    let mut lines = stdout.lines().skip_while(|l| !l.starts_with("quantity"));
    let header = lines
        .next()
        .unwrap_or_else(|| {
            panic!("no summary table (a line starting with `quantity`) in:\n{stdout}")
        })
        .to_string();
    let rows = lines
        .take_while(|l| !l.trim().is_empty())
        .map(|l| {
            let t: Vec<&str> = l.split_whitespace().collect();
            assert!(t.len() >= 7, "summary row with too few columns: `{l}`");
            let n = t.len();
            let num = |x: &str| {
                x.parse::<f64>()
                    .unwrap_or_else(|_| panic!("`{x}` in summary row `{l}` is not a number"))
            };
            Row {
                name: t[0].into(),
                label: t[1].into(),
                units: t[2..n - 4].join(" "),
                values: [num(t[n - 4]), num(t[n - 3]), num(t[n - 2]), num(t[n - 1])],
            }
        })
        .collect();
    (header, rows)
}

/// `solver: N steps (R rejected), E right-hand-side evaluations, …` → (N, R, E).
fn parse_solver_line(stdout: &str) -> (u64, u64, u64) {
    let line = stdout
        .lines()
        .find(|l| l.starts_with("solver:"))
        .unwrap_or_else(|| panic!("no `solver:` line in:\n{stdout}"));
    let nums: Vec<u64> = line
        .split(|c: char| !c.is_ascii_digit() && c != '.')
        .filter(|x| !x.is_empty() && !x.contains('.'))
        .map(|x| x.parse().expect("digits"))
        .collect();
    assert!(nums.len() >= 3, "cannot read `{line}`");
    (nums[0], nums[1], nums[2])
}

/// Assertions shared by every successful run.
#[track_caller]
fn assert_clean_run(out: &Outcome) {
    out.assert_success();
    assert!(
        !out.stderr.contains('\x1b') && !out.stderr.contains('\r'),
        "stderr is not a terminal, yet it holds progress-bar escape codes or carriage returns\n{}",
        out.describe()
    );
}

/// Run `config` with `-o out.h5`, check the file against `e` and the printed table against the
/// file. Returns the file summary.
fn run_and_compare(sb: &Sandbox, config: &Path, e: &Expect) -> FileSummary {
    let out = sb.cavern([
        "run".as_ref(),
        config.as_os_str(),
        "-o".as_ref(),
        "out.h5".as_ref(),
    ]);
    assert_clean_run(&out);
    assert_eq!(
        sb.entries()
            .into_iter()
            .filter(|f| f != "config.toml")
            .collect::<Vec<_>>(),
        ["out.h5"],
        "the run should leave exactly out.h5 (no temporary files)"
    );
    assert!(
        out.stdout.trim_end().ends_with("wrote out.h5"),
        "{}",
        out.describe()
    );
    let file = inspect(&sb.join("out.h5"), config, e);

    // every row of the file is in the table (HDF5 lists datasets by name, so compare by key),
    // with the same unit and values
    let (header, mut table) = parse_table(&out.stdout);
    let key = |r: &Row| (r.name.clone(), r.label.clone());
    table.sort_by_key(key);
    let mut stored_rows = file.rows.clone();
    stored_rows.sort_by_key(key);
    assert!(
        header.contains(&if e.time_unit.starts_with("1 ") {
            "t = 0 ".to_string()
        } else {
            format!("t = 0 {}", e.time_unit)
        }) && header.contains("min")
            && header.contains("max"),
        "table header `{header}`"
    );
    let names = |v: &[Row]| {
        v.iter()
            .map(|r| format!("{}/{} [{}]", r.name, r.label, r.units))
            .collect::<Vec<_>>()
    };
    assert_eq!(
        names(&table),
        names(&stored_rows),
        "summary table rows (left) vs HDF5 rows (right)\n{}",
        out.describe()
    );
    let what = ["t = first", "t = last", "min", "max"];
    for (printed, stored) in table.iter().zip(&stored_rows) {
        for k in 0..4 {
            // printed with 7 significant digits (`{:.6e}`)
            assert!(
                close(printed.values[k], stored.values[k], 1e-6, 1e-300),
                "{}/{} {}: table says {:e}, the file holds {:e}",
                printed.name,
                printed.label,
                what[k],
                printed.values[k],
                stored.values[k]
            );
        }
    }
    assert_eq!(
        parse_solver_line(&out.stdout),
        (file.steps, file.rejected, file.rhs),
        "solver line on stdout vs /solver attributes"
    );
    let printed_warnings: Vec<&str> = out
        .stderr
        .lines()
        .filter_map(|l| l.strip_prefix("warning: "))
        .collect();
    assert_eq!(
        printed_warnings, file.warnings,
        "warnings on stderr vs the file's `warnings` attribute"
    );
    file
}

fn resonator_ring() -> std::path::PathBuf {
    repo().join("configs").join("ring4-resonator.toml")
}

fn row<'a>(f: &'a FileSummary, name: &str, label: &str) -> &'a Row {
    f.rows
        .iter()
        .find(|r| r.name == name && r.label == label)
        .unwrap_or_else(|| panic!("no row {name}/{label} in {:?}", f.rows))
}

#[test]
fn resonator_ring_result_file_matches_layout_and_summary_table() {
    let sb = Sandbox::new();
    let file = run_and_compare(
        &sb,
        &resonator_ring(),
        &Expect {
            time_unit: "us",
            frequency_unit: "MHz",
            units_system: "physical",
            n_times: 81,
            dim: 96,
            datasets: &[
                "spin_z:4",
                "spin_x:4",
                "photon_number:1",
                "output_flux:1",
                "field_re:1",
                "field_im:1",
                "top_level_population:1",
                "pattern_overlap:2",
                "purity:-",
                "trace_error:-",
            ],
        },
    );
    // physics sanity at t = 0: spins "++-+" (+ = excited), vacuum, a pure state
    for (i, s) in [1.0, 1.0, -1.0, 1.0].into_iter().enumerate() {
        assert_eq!(row(&file, "spin_z", &format!("site{i}")).values[0], s);
    }
    assert_eq!(row(&file, "photon_number", "readout").values[0], 0.0);
    assert!(close(row(&file, "purity", "-").values[0], 1.0, 1e-12, 0.0));
    // overlap with ++-- of ++-+: (1 + 1 + 1 − 1)/4
    assert!(close(
        row(&file, "pattern_overlap", "pattern0").values[0],
        0.5,
        1e-12,
        0.0
    ));
    assert!(row(&file, "trace_error", "-").values[3] < 1e-8);
    assert!(file.warnings.is_empty(), "{:?}", file.warnings);
}

/// Dimensionless units, explicit sample times, two modes, all three spin axes, no patterns.
const TWO_MODES: &str = r#"title = "two modes, dimensionless (test)"

[units]
system = "dimensionless"

[time]
at = [0.5, 1.0, 2.0, 3.5]  # t = 0 is added in front

[sites]
count = 2
decay = 0.2
rabi = 0.7

[[modes]]
name = "a"
levels = 4
loss = 1.0

[[modes]]
name = "b"
levels = 4
loss = 0.5
thermal = 0.05

[coupling]
strength = [[0.3, 0.0], [0.1, 0.2]]

[initial]
spins = "+-"
modes = ["vacuum", { fock = 1 }]

[observe]
spin_axes = ["x", "y", "z"]
"#;

#[test]
fn dimensionless_result_file_matches_layout_and_summary_table() {
    let sb = Sandbox::new();
    let cfg = sb.write("config.toml", TWO_MODES);
    let file = run_and_compare(
        &sb,
        &cfg,
        &Expect {
            time_unit: "1 (dimensionless)",
            frequency_unit: "1 (angular, dimensionless)",
            units_system: "dimensionless",
            n_times: 5,
            dim: 2 * 2 * 4 * 4,
            datasets: &[
                "spin_z:2",
                "spin_x:2",
                "spin_y:2",
                "photon_number:2",
                "output_flux:2",
                "field_re:2",
                "field_im:2",
                "top_level_population:2",
                "purity:-",
                "trace_error:-",
            ],
        },
    );
    assert_eq!(row(&file, "photon_number", "b").values[0], 1.0);
    // dimensionless flux κ⟨n⟩ with κ = 0.5 and ⟨n⟩ = 1 at t = 0
    assert!(close(
        row(&file, "output_flux", "b").values[0],
        0.5,
        1e-12,
        0.0
    ));
}

#[test]
fn quiet_run_prints_nothing_and_still_writes_the_file() {
    let sb = Sandbox::new();
    let out = sb.cavern([
        "run".as_ref(),
        resonator_ring().as_os_str(),
        "--quiet".as_ref(),
        "-o".as_ref(),
        "quiet.h5".as_ref(),
    ]);
    assert_clean_run(&out);
    assert!(out.stdout.is_empty(), "{}", out.describe());
    assert!(out.stderr.is_empty(), "{}", out.describe());
    assert_eq!(sb.entries(), ["quiet.h5"]);
}

/// 6 sites and a 4-level mode: d = 2⁶ · 4 = 256, so ρ has 65 536 elements, several of the
/// solver's fixed parallel chunks (2¹⁴ elements); every kind of term is switched on.
const PARALLEL: &str = r#"[units]
system = "dimensionless"

[time]
stop = 1.5
samples = 16

[sites]
count = 6
detuning = 0.3
decay = 0.1
dephasing = 0.05
pump = 0.02
rabi = 0.4
rabi_envelope = { shape = "ramp", start = 0.0, stop = 1.0 }

[[modes]]
levels = 4
detuning = -0.2
loss = 1.0
thermal = 0.05
drive = 0.2
drive_envelope = { shape = "smooth-step", start = 0.0, stop = 0.5 }

[coupling]
strength = [[0.3], [0.25], [0.2], [0.3], [0.25], [0.2]]

[spin_spin]
zz = [[0.0, 0.02, 0.0, 0.0, 0.0, 0.01],
      [0.02, 0.0, 0.02, 0.0, 0.0, 0.0],
      [0.0, 0.02, 0.0, 0.02, 0.0, 0.0],
      [0.0, 0.0, 0.02, 0.0, 0.02, 0.0],
      [0.0, 0.0, 0.0, 0.02, 0.0, 0.02],
      [0.01, 0.0, 0.0, 0.0, 0.02, 0.0]]
flip_flop = [[0.0, 0.01, 0.0, 0.0, 0.0, 0.0],
             [0.01, 0.0, 0.01, 0.0, 0.0, 0.0],
             [0.0, 0.01, 0.0, 0.01, 0.0, 0.0],
             [0.0, 0.0, 0.01, 0.0, 0.01, 0.0],
             [0.0, 0.0, 0.0, 0.01, 0.0, 0.01],
             [0.0, 0.0, 0.0, 0.0, 0.01, 0.0]]

[initial]
spins = "+-+-+-"

[observe]
spin_axes = ["x", "y", "z"]
patterns = ["+-+-+-", "++++++"]
"#;

fn compare_files(a: &Path, b: &Path) {
    python(COMPARE, &[a.as_os_str(), b.as_os_str()]);
}

#[test]
fn same_config_twice_gives_identical_observables() {
    let sb = Sandbox::new();
    let cfg = sb.write("config.toml", PARALLEL);
    for name in ["first.h5", "second.h5"] {
        let out = sb.cavern([
            "run".as_ref(),
            cfg.as_os_str(),
            "-q".as_ref(),
            "-o".as_ref(),
            name.as_ref(),
        ]);
        assert_clean_run(&out);
    }
    compare_files(&sb.join("first.h5"), &sb.join("second.h5"));
}

#[test]
fn one_and_two_threads_give_bit_identical_observables() {
    let sb = Sandbox::new();
    let cfg = sb.write("config.toml", PARALLEL);
    for n in ["1", "2"] {
        let out = sb.cavern([
            "run".as_ref(),
            cfg.as_os_str(),
            "--quiet".as_ref(),
            "--threads".as_ref(),
            n.as_ref(),
            "-o".as_ref(),
            format!("threads{n}.h5").as_ref(),
        ]);
        assert_clean_run(&out);
    }
    compare_files(&sb.join("threads1.h5"), &sb.join("threads2.h5"));
    // the thread count really was applied
    let e = Expect {
        time_unit: "1 (dimensionless)",
        frequency_unit: "1 (angular, dimensionless)",
        units_system: "dimensionless",
        n_times: 16,
        dim: 256,
        datasets: &[
            "spin_z:6",
            "spin_x:6",
            "spin_y:6",
            "photon_number:1",
            "output_flux:1",
            "field_re:1",
            "field_im:1",
            "top_level_population:1",
            "pattern_overlap:2",
            "purity:-",
            "trace_error:-",
        ],
    };
    assert_eq!(inspect(&sb.join("threads1.h5"), &cfg, &e).threads, 1);
    assert_eq!(inspect(&sb.join("threads2.h5"), &cfg, &e).threads, 2);
}

/// A single 3-level mode driven hard (ε = 2, κ = 1: the steady coherent amplitude would be
/// |α| = 2ε/κ = 4, i.e. ~16 photons), so its top Fock level fills up.
const TRUNCATED: &str = r#"[units]
system = "dimensionless"

[time]
stop = 4.0
samples = 21

[[modes]]
name = "pumped"
levels = 3
loss = 1.0
drive = 2.0
"#;

#[test]
fn populated_top_fock_level_warns_but_succeeds() {
    let sb = Sandbox::new();
    let cfg = sb.write("config.toml", TRUNCATED);
    let file = run_and_compare(
        &sb,
        &cfg,
        &Expect {
            time_unit: "1 (dimensionless)",
            frequency_unit: "1 (angular, dimensionless)",
            units_system: "dimensionless",
            n_times: 21,
            dim: 3,
            datasets: &[
                "photon_number:1",
                "output_flux:1",
                "field_re:1",
                "field_im:1",
                "top_level_population:1",
                "purity:-",
                "trace_error:-",
            ],
        },
    );
    assert_eq!(file.warnings.len(), 1, "{:?}", file.warnings);
    let w = &file.warnings[0];
    assert!(
        w.contains("`pumped`") && w.contains("levels") && w.contains("truncation"),
        "{w}"
    );
    assert!(row(&file, "top_level_population", "pumped").values[3] > 0.1);

    // --quiet hides the table, not the warning
    let out = sb.cavern([
        "run".as_ref(),
        cfg.as_os_str(),
        "--quiet".as_ref(),
        "-o".as_ref(),
        "quiet.h5".as_ref(),
    ]);
    assert_clean_run(&out);
    assert!(out.stdout.is_empty(), "{}", out.describe());
    assert!(
        out.stderr.starts_with("warning: ") && out.stderr.contains("`pumped`"),
        "{}",
        out.describe()
    );
}

#[test]
fn missing_output_directory_fails_cleanly_and_writes_nothing() {
    let inputs = Sandbox::new();
    let cfg = inputs.write("config.toml", TRUNCATED);
    let sb = Sandbox::new();
    let out = sb.cavern([
        "run".as_ref(),
        cfg.as_os_str(),
        "-o".as_ref(),
        "no-such-dir/out.h5".as_ref(),
    ]);
    out.assert_no_panic();
    assert!(
        out.code.is_some_and(|c| c != 0),
        "expected failure\n{}",
        out.describe()
    );
    assert!(
        out.stderr.starts_with("error: ")
            && out.stderr.contains("no-such-dir")
            && out.stderr.contains("does not exist"),
        "{}",
        out.describe()
    );
    assert!(out.stdout.is_empty(), "{}", out.describe());
    assert!(sb.entries().is_empty(), "files created: {:?}", sb.entries());
}
