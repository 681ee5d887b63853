//! `[solver] method = "trajectories"` end to end: the same model solved by quantum trajectories
//! and by the density matrix, photon-counting statistics from the jump records (antibunching,
//! Poissonian counts), reproducibility across thread counts, the `auto` choice and the h5py
//! layout of a trajectory result file.
//!
//! Method: Monte Carlo wave functions (J. Dalibard, Y. Castin & K. Mølmer, Phys. Rev. Lett. 68,
//! 580 (1992)); the trajectory mean of an observable is an unbiased estimate of Tr(Oρ(t)).

use crate::util::{python, Outcome, Sandbox};
use std::ffi::OsStr;
use std::path::Path;

/// Run `cavern run CONFIG -o OUT [extra…]` in `sb` and require success.
#[track_caller]
fn run(sb: &Sandbox, config: &Path, out: &str, extra: &[&str]) -> Outcome {
    let mut args: Vec<&OsStr> = vec![
        "run".as_ref(),
        config.as_os_str(),
        "-o".as_ref(),
        out.as_ref(),
    ];
    args.extend(extra.iter().map(|a| OsStr::new(*a)));
    let o = sb.cavern(args);
    o.assert_success();
    o
}

/// `[solver]` with the density matrix or with trajectories, spliced into a config template.
fn with_solver(template: &str, solver: &str) -> String {
    template.replace("#SOLVER#", solver)
}

// ---------------------------------------------------------------------------------------------
// (1) trajectory means against the density matrix

/// Compares every observable of a trajectory file (mean and `<name>_stderr`) with the same
/// observable of a density-matrix file of the same model. Allowed deviation at each point:
/// 4 standard errors + 4·range/N (see [`means_agree_with_the_density_matrix`]). Prints
/// `name<TAB>worst z<TAB>points` per observable; exits non-zero listing the violations.
///
/// argv: dm.h5 traj.h5 N spec, spec = `name:range,…` (single-trajectory value range).
const AGREE: &str = r#"
import sys
import h5py, numpy as np

dm, tr, n, spec = sys.argv[1], sys.argv[2], int(sys.argv[3]), sys.argv[4]
ranges = dict((k, float(v)) for k, v in (x.split(':') for x in spec.split(',')))
bad = []
with h5py.File(dm, 'r') as a, h5py.File(tr, 'r') as b:
    assert a['solver'].attrs['method'] == 'density-matrix'
    assert b['solver'].attrs['method'] == 'trajectories'
    assert int(b['solver'].attrs['trajectories']) == n
    want = sorted(set(a['observables']) - {'purity', 'trace_error'})
    means = sorted(k for k in b['observables'] if not k.endswith('_stderr'))
    assert means == want, f'{means} vs {want}'
    assert sorted(ranges) == want, f'ranges given for {sorted(ranges)}, observables {want}'
    assert np.array_equal(a['time'][()], b['time'][()])
    for name in want:
        x = a['observables'][name][()]
        m = b['observables'][name][()]
        se = b['observables'][name + '_stderr'][()]
        assert m.shape == x.shape == se.shape, name
        assert b['observables'][name].attrs['units'] == a['observables'][name].attrs['units']
        dev = np.abs(m - x)
        allow = 4 * se + 4 * ranges[name] / n
        z = np.where(se > 0, dev / np.where(se > 0, se, 1), 0.0)
        print(name, f'{z.max():.3f}', dev.size, sep='\t')
        for idx in zip(*np.nonzero(dev > allow)):
            bad.append(f'{name}{list(idx)}: trajectories {m[idx]:.6g} ± {se[idx]:.2g}, '
                       f'density matrix {x[idx]:.6g}, allowed {allow[idx]:.3g}')
if bad:
    print('\n'.join(bad), file=sys.stderr)
    sys.exit(1)
"#;

/// Spontaneous emission from |e⟩: Pₑ = e^{−γt} (Weisskopf–Wigner decay; e.g. Allen & Eberly,
/// *Optical Resonance and Two-Level Atoms*, from memory). γ = 1.
const EMISSION: &str = r#"title = "spontaneous emission (test)"
[units]
system = "dimensionless"
[time]
stop = 3.0
samples = 31
#SOLVER#
[sites]
count = 1
decay = 1.0
[initial]
spins = "+"
[observe]
spin_axes = ["x", "y", "z"]
"#;

/// Resonance fluorescence: a resonantly driven decaying two-level system from |g⟩, Ω = 3γ
/// (B. R. Mollow, Phys. Rev. 188, 1969 (1969); from memory). γ = 1.
const FLUORESCENCE: &str = r#"title = "resonance fluorescence (test)"
[units]
system = "dimensionless"
[time]
stop = 3.0
samples = 31
#SOLVER#
[sites]
count = 1
decay = 1.0
rabi = 3.0
[observe]
spin_axes = ["x", "y", "z"]
"#;

/// A driven lossy cavity with one detuned, decaying spin in physical units (the driven
/// Jaynes–Cummings model with loss; e.g. H. J. Carmichael, *Statistical Methods in Quantum
/// Optics 2*, from memory). κ/2π = 0.2 MHz, g/2π = 0.15 MHz, ε/2π = 0.1 MHz, γ/2π = 0.05 MHz.
const CAVITY: &str = r#"title = "driven lossy cavity with one spin (test)"
[units]
system = "physical"
frequency = "MHz"
[time]
stop = 5.0
samples = 26
#SOLVER#
[sites]
count = 1
decay = 0.05
detuning = 0.05
[[modes]]
name = "cav"
levels = 8
loss = 0.2
detuning = 0.03
drive = 0.1
[coupling]
strength = 0.15
[initial]
spins = "+"
[observe]
spin_axes = ["x", "y", "z"]
patterns = ["+"]
"#;

/// Run `template` with both solvers and compare (see [`AGREE`]). Returns the printed lines.
fn agree(template: &str, n: usize, seed: u64, spec: &str) -> String {
    let sb = Sandbox::new();
    let dm = sb.write(
        "dm.toml",
        &with_solver(template, "[solver]\nrtol = 1e-9\natol = 1e-11"),
    );
    let tr = sb.write(
        "tr.toml",
        &with_solver(
            template,
            &format!("[solver]\nmethod = \"trajectories\"\ntrajectories = {n}\nseed = {seed}\nrtol = 1e-8\natol = 1e-10"),
        ),
    );
    run(&sb, &dm, "dm.h5", &["--quiet"]);
    let out = run(&sb, &tr, "tr.h5", &["--quiet"]);
    assert!(out.stderr.is_empty(), "{}", out.describe());
    let n_s = n.to_string();
    python(
        AGREE,
        &[
            sb.join("dm.h5").as_os_str(),
            sb.join("tr.h5").as_os_str(),
            n_s.as_ref(),
            spec.as_ref(),
        ],
    )
}

/// Trajectory means agree with the density matrix of the same config within 4 standard errors
/// at every sample of every observable, for three models.
///
/// The extra 4·range/N: early on (t ≲ 1/(N·rate)) no trajectory may have jumped yet. All N
/// trajectories are then the same no-jump state, so the sample standard error is 0, while the
/// exact mean differs from the no-jump value by the weight p of the jumped branch times at most
/// the range of single-trajectory values (p·range). While p·N is below a few, this is at most a
/// few grains range/N of the estimate, which the allowance covers; later 4σ dominates (a false
/// alarm at 4σ has probability ~6e-5 per point; the seeds are fixed, so the test is repeatable).
#[test]
fn means_agree_with_the_density_matrix() {
    let spins = "spin_x:2,spin_y:2,spin_z:2";
    let mut report = Vec::new();
    report.push(("spontaneous emission", agree(EMISSION, 2000, 1, spins)));
    report.push((
        "resonance fluorescence",
        agree(FLUORESCENCE, 2000, 2, spins),
    ));
    // single-trajectory ranges of the cavity: ⟨n⟩ ∈ [0, 7] (8 levels), κ⟨n⟩ in photons/s with
    // κ = 2π · 0.2 MHz, |⟨a⟩| ≤ √7, overlap of one site ∈ [−1, 1]
    let flux = std::f64::consts::TAU * 0.2e6 * 7.0;
    let cav = format!(
        "{spins},photon_number:7,output_flux:{flux},field_re:5.3,field_im:5.3,\
         top_level_population:1,pattern_overlap:2"
    );
    report.push(("driven cavity + spin", agree(CAVITY, 1500, 7, &cav)));
    for (what, lines) in &report {
        for l in lines.lines() {
            let f: Vec<&str> = l.split('\t').collect();
            eprintln!(
                "{what}: {} worst |mean − exact| / stderr = {} over {} points",
                f[0], f[1], f[2]
            );
        }
    }
}

// ---------------------------------------------------------------------------------------------
// (2) antibunching

/// A two-level emitter driven on resonance with Ω = 3γ (γ = 1), analysed after a transient of
/// 5/γ, delays up to 5/γ in bins of 0.05/γ.
const ANTIBUNCHING: &str = r#"title = "antibunching of resonance fluorescence (test)"
[units]
system = "dimensionless"
[time]
stop = 30.0
samples = 61
[solver]
method = "trajectories"
trajectories = 2000
seed = 11
bin_width = 0.05
correlate = "site0-decay"
correlate_after = 5.0
max_delay = 5.0
[sites]
count = 1
decay = 1.0
rabi = 3.0
"#;

/// Reads /clicks and prints: g2[0], pairs[0], mean g² over 3 ≤ τ < 5 and its error, the mean
/// rate, χ²/dof of g² against the analytic curve for τ ≥ 0.5, bin width, and the summary lines.
const G2: &str = r#"
import sys
import h5py, numpy as np
with h5py.File(sys.argv[1], 'r') as f:
    c = f['clicks']
    assert c.attrs['correlated_channel'] == 'site0-decay'
    tau, g2, pairs = c['g2_delay'][()], c['g2'][()], c['g2_pairs'][()]
    w = float(c.attrs['bin_width'])
    late = (tau >= 3.0) & (tau < 5.0)
    # pairs in different bins are nearly independent counts: error of the mean from Poisson errors
    mean_late = g2[late].mean()
    err_late = np.sqrt(np.sum((g2[late] / np.sqrt(np.maximum(pairs[late], 1))) ** 2)) / late.sum()
    # g²(τ) = 1 − e^{−3γτ/4}[cos μτ + (3γ/4μ) sin μτ], μ = √(Ω² − γ²/16), averaged over each bin
    G, O = 1.0, 3.0
    mu = np.sqrt(O ** 2 - G ** 2 / 16)
    th = lambda t: 1 - np.exp(-0.75 * G * t) * (np.cos(mu * t) + 0.75 * G / mu * np.sin(mu * t))
    avg = np.array([th(np.linspace(t - w / 2, t + w / 2, 65)).mean() for t in tau])
    use = tau >= 0.5
    chi2 = np.mean(((g2[use] - avg[use]) / (avg[use] / np.sqrt(pairs[use]))) ** 2)
    print(g2[0], pairs[0], avg[0], mean_late, err_late, float(c.attrs['mean_rate']), chi2, w)
"#;

/// Antibunching of resonance fluorescence (H. J. Kimble, M. Dagenais & L. Mandel, Phys. Rev.
/// Lett. 39, 691 (1977)): after one photon the emitter is in |g⟩ and cannot emit again at once, so
/// g²(0) = 0, while for delays of a few 1/γ the clicks are uncorrelated, g² ≈ 1. The whole curve
/// is compared with the analytic result g²(τ) = 1 − e^{−3γτ/4}[cos μτ + (3γ/4μ) sin μτ],
/// μ = √(Ω² − γ²/16) (H. J. Carmichael & D. F. Walls, J. Phys. B 9, L43 (1976); from memory), and
/// the mean click rate with γPₑ = γ(Ω²/4)/(γ²/4 + Ω²/2) (steady-state optical Bloch equations).
#[test]
fn resonance_fluorescence_is_antibunched() {
    let sb = Sandbox::new();
    let cfg = sb.write("config.toml", ANTIBUNCHING);
    let out = run(&sb, &cfg, "out.h5", &[]);
    let line = python(G2, &[sb.join("out.h5").as_os_str()]);
    let v: Vec<f64> = line
        .split_whitespace()
        .map(|x| x.parse().expect("a number"))
        .collect();
    let (g0, pairs0, g0_theory, late, late_err, rate, chi2, w) =
        (v[0], v[1], v[2], v[3], v[4], v[5], v[6], v[7]);
    eprintln!(
        "antibunching: g²(τ < {w}) = {g0:.4} ({pairs0} pairs; analytic bin average {g0_theory:.4}); \
         mean g² over 3 ≤ γτ < 5 = {late:.4} ± {late_err:.4}; χ²/dof against the analytic curve = {chi2:.3}; \
         click rate {rate:.4} (γPₑ = {:.4})",
        2.25 / 4.75
    );
    assert!(w <= 0.05, "the first delay bin must be ≪ 1/γ");
    assert!(g0 < 0.2, "g²(0) = {g0}: no antibunching");
    assert!(
        (late - 1.0).abs() < 4.0 * late_err + 0.02,
        "g²(3…5/γ) = {late} ± {late_err}"
    );
    assert!(chi2 < 1.5, "χ²/dof = {chi2} against the analytic g²(τ)");
    // 2000 trajectories × 25/γ × 0.47 clicks: ~23700 clicks, relative error ~0.7 %
    let pe = 2.25 / 4.75;
    assert!((rate - pe).abs() < 0.03 * pe, "rate {rate}, γPₑ = {pe}");
    // the terminal shows the same first-bin g² and the jumps per channel
    assert!(
        out.stdout
            .contains("jumps per channel over 2000 trajectories: site0-decay ")
            && out.stdout.contains(&format!("= {g0:.3}")),
        "{}",
        out.describe()
    );
}

// ---------------------------------------------------------------------------------------------
// (3) Poissonian counts of a coherent field

/// An empty cavity driven on resonance from vacuum: κ = 1, ε = 0.5, so ⟨n⟩ → ε²/(κ²/4) = 1 and
/// α(t) = α∞(1 − e^{−κt/2}). 10 levels hold all but ~1e-7 of a Poisson(1) distribution.
const COHERENT: &str = r#"title = "coherently driven empty cavity (test)"
[units]
system = "dimensionless"
[time]
stop = 30.0
samples = 31
[solver]
method = "trajectories"
trajectories = 2000
seed = 5
[[modes]]
levels = 10
loss = 1.0
drive = 0.5
"#;

/// Counts per trajectory of `mode0-loss` in [10, 30] from /jumps (trajectories without a click
/// count as 0): prints mean, variance, Q = Var/mean − 1 and its standard error
/// √((m₄ − s⁴)/N)/mean (delta method, m₄ the fourth central moment).
const MANDEL: &str = r#"
import sys
import h5py, numpy as np
with h5py.File(sys.argv[1], 'r') as f:
    labels = [x.decode() if isinstance(x, bytes) else x for x in f['jumps'].attrs['channel_labels']]
    ch = labels.index('mode0-loss')
    n = int(f['solver'].attrs['trajectories'])
    tr, t, c = f['jumps/trajectory'][()], f['jumps/time'][()], f['jumps/channel'][()]
    sel = (c == ch) & (t >= 10.0) & (t <= 30.0)
    counts = np.bincount(tr[sel], minlength=n).astype(float)
    m, s2 = counts.mean(), counts.var(ddof=1)
    m4 = np.mean((counts - m) ** 4)
    q = s2 / m - 1
    se_q = np.sqrt((m4 - s2 ** 2) / n) / m
    print(m, s2, q, se_q, n)
"#;

/// Coherent light gives Poissonian photocounts, Mandel Q = Var/mean − 1 = 0 (L. Mandel, Opt.
/// Lett. 4, 205 (1979)); in the trajectory picture a coherent state stays coherent under both
/// the no-jump evolution and the jumps, so the clicks form a Poisson process of rate κ|α(t)|².
/// The mean count is ∫κ|α|² dt = 20 − 4(e^{−5} − e^{−15}) + (e^{−10} − e^{−30}) ≈ 19.973.
#[test]
fn coherent_drive_gives_poissonian_counts() {
    let sb = Sandbox::new();
    let cfg = sb.write("config.toml", COHERENT);
    run(&sb, &cfg, "out.h5", &["--quiet"]);
    let v: Vec<f64> = python(MANDEL, &[sb.join("out.h5").as_os_str()])
        .split_whitespace()
        .map(|x| x.parse().expect("a number"))
        .collect();
    let (mean, var, q, se_q, n) = (v[0], v[1], v[2], v[3], v[4]);
    let expect =
        20.0 - 4.0 * ((-5.0f64).exp() - (-15.0f64).exp()) + ((-10.0f64).exp() - (-30.0f64).exp());
    eprintln!(
        "Mandel Q over 10 ≤ κt ≤ 30: mean count {mean:.3} (expected {expect:.3} ± {:.3}), variance {var:.3}, \
         Q = {q:.4} ± {se_q:.4} ({n} trajectories)",
        (expect / n).sqrt()
    );
    assert!(q.abs() < 4.0 * se_q, "Q = {q} ± {se_q}: not Poissonian");
    // a thermal field of the same mean would give Q = mean ≈ 20, far outside
    assert!(se_q < 0.1, "the test is not sensitive: se(Q) = {se_q}");
    assert!(
        (mean - expect).abs() < 4.0 * (expect / n).sqrt(),
        "mean count {mean}, expected {expect}"
    );
}

// ---------------------------------------------------------------------------------------------
// (4) reproducibility

/// Compares two result files: every dataset bit for bit and every attribute, except the /solver
/// attributes that describe the machine (`wall_seconds`, `threads`). argv: a.h5 b.h5 (exit 1
/// listing the differences). With a third argument `jumps-differ`, instead requires the jump
/// records to differ (and prints how many jumps each file has).
const SAME: &str = r#"
import sys
import h5py, numpy as np

def items(f):
    out = {}
    def visit(name, obj):
        out[name] = obj
    f.visititems(visit)
    return out

diffs = []
with h5py.File(sys.argv[1], 'r') as a, h5py.File(sys.argv[2], 'r') as b:
    if len(sys.argv) > 3:
        ja, jb = a['jumps/time'][()], b['jumps/time'][()]
        print(len(ja), len(jb))
        if ja.shape == jb.shape and ja.tobytes() == jb.tobytes():
            sys.exit('different seeds gave identical jump times')
        sys.exit(0)
    ia, ib = items(a), items(b)
    if sorted(ia) != sorted(ib):
        diffs.append(f'objects differ: {sorted(set(ia) ^ set(ib))}')
    for name in sorted(set(ia) & set(ib)):
        x, y = ia[name], ib[name]
        skip = {'wall_seconds', 'threads'} if name == 'solver' else set()
        ka, kb = set(x.attrs) - skip, set(y.attrs) - skip
        if ka != kb:
            diffs.append(f'{name}: attributes {sorted(ka ^ kb)}')
        for k in sorted(ka & kb):
            va, vb = np.asarray(x.attrs[k]), np.asarray(y.attrs[k])
            if va.dtype.kind == 'f':
                same = va.shape == vb.shape and va.tobytes() == vb.tobytes()
            else:
                same = va.shape == vb.shape and bool(np.all(va == vb))
            if not same:
                diffs.append(f'{name}@{k}: {va!r} vs {vb!r}')
        if isinstance(x, h5py.Dataset):
            dx, dy = x[()], y[()]
            if isinstance(dx, bytes) or isinstance(dx, str):
                same = dx == dy
            else:
                same = dx.shape == dy.shape and dx.dtype == dy.dtype and dx.tobytes() == dy.tobytes()
            if not same:
                diffs.append(f'{name}: data differ')
if diffs:
    print('\n'.join(diffs), file=sys.stderr)
    sys.exit(1)
"#;

/// The same seed gives the same file whatever the thread count (each trajectory draws from its
/// own ChaCha8 stream and the statistics are combined in a fixed block order); a different seed
/// gives different jumps. 200 trajectories are 13 blocks of 16, so two threads really share work.
#[test]
fn same_seed_is_bit_identical_on_one_and_two_threads() {
    let sb = Sandbox::new();
    let solver = |seed: u64| {
        format!("[solver]\nmethod = \"trajectories\"\ntrajectories = 200\nseed = {seed}\nkeep = 3\nbin_width = 0.2")
    };
    let a = sb.write("a.toml", &with_solver(CAVITY, &solver(3)));
    let b = sb.write("b.toml", &with_solver(CAVITY, &solver(4)));
    run(&sb, &a, "t1.h5", &["--quiet", "--threads", "1"]);
    run(&sb, &a, "t2.h5", &["--quiet", "--threads", "2"]);
    run(&sb, &b, "other.h5", &["--quiet", "--threads", "2"]);
    python(
        SAME,
        &[sb.join("t1.h5").as_os_str(), sb.join("t2.h5").as_os_str()],
    );
    let counts = python(
        SAME,
        &[
            sb.join("t2.h5").as_os_str(),
            sb.join("other.h5").as_os_str(),
            "jumps-differ".as_ref(),
        ],
    );
    eprintln!("jumps with seeds 3 and 4: {}", counts.trim());
    let threads = python(
        "import sys, h5py\nfor p in sys.argv[1:]:\n    print(int(h5py.File(p, 'r')['solver'].attrs['threads']))",
        &[sb.join("t1.h5").as_os_str(), sb.join("t2.h5").as_os_str()],
    );
    assert_eq!(threads.split_whitespace().collect::<Vec<_>>(), ["1", "2"]);
}

// ---------------------------------------------------------------------------------------------
// (5) the file layout and the terminal

/// Physical units, two channels (mode loss, site decay), two kept trajectories.
const LAYOUT: &str = r#"title = "trajectory layout (test)"
[units]
system = "physical"
frequency = "MHz"
[time]
stop = 4.0
samples = 21
[solver]
method = "trajectories"
trajectories = 300
seed = 9
keep = 2
bin_width = 0.5
[sites]
count = 1
decay = 0.1
rabi = 0.2
[[modes]]
name = "cav"
levels = 6
loss = 0.3
drive = 0.1
[coupling]
strength = 0.2
[observe]
spin_axes = ["z", "x"]
patterns = ["+"]
"#;

/// Checks the layout of a trajectory file as an h5py user sees it; prints the jumps per channel
/// (`label count`) and the first-sample mean ± stderr of spin_z. Exits 1 listing problems.
const LAYOUT_CHECK: &str = r#"
import sys
import h5py, numpy as np
problems = []
def check(ok, msg):
    if not ok:
        problems.append(msg)
def text(x):
    return x.decode() if isinstance(x, bytes) else x

T, N, K = 21, 300, 2
with h5py.File(sys.argv[1], 'r') as f:
    s = f['solver'].attrs
    for k, v in [('method', 'trajectories'), ('method_requested', 'trajectories')]:
        check(text(s[k]) == v, f'/solver@{k} = {s[k]!r}')
    for k, v in [('trajectories', N), ('seed', 9), ('keep', K)]:
        check(int(s[k]) == v, f'/solver@{k} = {s[k]!r}')
    for k in ['rtol', 'atol', 'steps', 'rejected_steps', 'rhs_evaluations', 'wall_seconds', 'threads',
              'unravelling', 'method_reason', 'integrator']:
        check(k in s, f'/solver has no attribute {k}')
    check(int(s['rhs_evaluations']) >= 6 * int(s['steps']) > 0, 'solver counters')

    obs = f['observables']
    rows = {'spin_z': 1, 'spin_x': 1, 'photon_number': 1, 'output_flux': 1, 'field_re': 1,
            'field_im': 1, 'top_level_population': 1, 'pattern_overlap': 1}
    want = sorted(list(rows) + [k + '_stderr' for k in rows])
    check(sorted(obs) == want, f'observables {sorted(obs)}, expected {want} (no purity, no trace_error)')
    for k, r in rows.items():
        if k not in obs or k + '_stderr' not in obs:
            continue
        m, e = obs[k], obs[k + '_stderr']
        check(m.shape == e.shape == (r, T), f'{k}: shapes {m.shape} {e.shape}')
        check(m.dtype == e.dtype == np.float64, f'{k}: dtype')
        check(text(m.attrs['units']) == text(e.attrs['units']), f'{k}: units differ from the stderr units')
        check(f'{N} quantum trajectories' in text(m.attrs['description']), f'{k}: description {m.attrs["description"]!r}')
        check('standard error of the mean' in text(e.attrs['description']) and str(N) in text(e.attrs['description']),
              f'{k}_stderr: description {e.attrs["description"]!r}')
        check(bool(np.all(e[()] >= 0)), f'{k}_stderr negative')
        check(list(map(text, m.attrs['rows'])) == list(map(text, e.attrs['rows'])), f'{k}: rows')
    check(text(obs['output_flux'].attrs['units']) == 'photons/s', 'flux units')

    j = f['jumps']
    labels = [text(x) for x in j.attrs['channel_labels']]
    check(labels == ['site0-decay', 'mode0-loss'], f'channel labels {labels}')
    n_j = j['time'].shape[0]
    for k, dt in [('trajectory', np.int64), ('time', np.float64), ('channel', np.int64)]:
        check(j[k].shape == (n_j,) and j[k].dtype == dt, f'/jumps/{k}: {j[k].shape} {j[k].dtype}')
    check(text(j['time'].attrs['units']) == 'us', '/jumps/time units')
    tr, t, ch = j['trajectory'][()], j['time'][()], j['channel'][()]
    check(n_j > 100, f'only {n_j} jumps')
    check(bool(np.all((tr >= 0) & (tr < N))) and bool(np.all((ch >= 0) & (ch < 2))), 'jump indices out of range')
    check(bool(np.all((t > 0) & (t <= 4.0))), 'jump times outside the run')
    order = np.lexsort((t, tr))
    check(bool(np.all(order == np.arange(n_j))), 'jumps not ordered by trajectory then time')

    c = f['clicks']
    edges = c['bin_edges'][()]
    check(np.allclose(edges, np.arange(9) * 0.5), f'bin edges {edges}')
    check(text(c['bin_edges'].attrs['units']) == 'us', 'bin edges units')
    counts, rate = c['counts'][()], c['rate'][()]
    check(counts.shape == rate.shape == (2, 8) and counts.dtype == np.int64, f'counts {counts.shape} {counts.dtype}')
    check([text(x) for x in c['counts'].attrs['rows']] == labels, 'counts rows')
    check(np.array_equal(counts.sum(axis=1), np.bincount(ch, minlength=2)), 'counts do not sum to the jumps')
    check(np.array_equal(counts, np.array([np.histogram(t[ch == k], bins=edges)[0] for k in range(2)])),
          'counts differ from a histogram of /jumps')
    check(text(c['rate'].attrs['units']) == 'photons/s', 'rate units')
    check(np.allclose(rate, counts / (N * 0.5e-6)), 'rate != counts / (N * bin width) in 1/s')
    check(text(c.attrs['correlated_channel']) == 'mode0-loss', 'default correlated channel is mode0-loss')
    we, wd = c['waiting_time_edges'][()], c['waiting_time_density'][()]
    check(we.shape == (wd.shape[0] + 1,) and abs(we[-1] - 4.0) < 1e-12, f'waiting edges {we}')
    check(abs(np.sum(wd * np.diff(we)) - 1) < 1e-9, 'waiting-time density does not integrate to 1')
    check(text(c['waiting_time_density'].attrs['units']) == '1/us', 'waiting density units')
    # default max_delay: a tenth of the run (0.4 us) is less than a bin, so one bin of 0.5 us
    d, g, p = c['g2_delay'][()], c['g2'][()], c['g2_pairs'][()]
    check(d.shape == g.shape == p.shape == (1,) and abs(d[0] - 0.25) < 1e-12, f'g2 delays {d}')
    check(text(c['g2_delay'].attrs['units']) == 'us' and text(c['g2'].attrs['units']) == '1', 'g2 units')
    check('stationary' in text(c['g2'].attrs['description']), 'g2 description names its assumption')

    k = f['kept_trajectories']
    check(int(k.attrs['n_kept']) == K, 'n_kept')
    check(sorted(k) == sorted(rows), f'kept {sorted(k)}')
    z = k['spin_z'][()]
    check(z.shape == (K, 1, T), f'kept spin_z {z.shape}')
    check(bool(np.all(np.abs(z) <= 1 + 1e-9)), 'kept spin_z outside [-1, 1]')
    # a single trajectory is pure: its photon number is a mean over the same state, so the kept
    # trajectories' mean must be in the range of the mean trace
    for name, cnt in zip(labels, counts.sum(axis=1)):
        print('jumps', name, int(cnt), sep='\t')
    print('spin_z', repr(float(obs['spin_z'][0, -1])), repr(float(obs['spin_z_stderr'][0, -1])), sep='\t')
if problems:
    print('\n'.join(problems), file=sys.stderr)
    sys.exit(1)
"#;

#[test]
fn trajectory_file_layout_and_terminal_summary() {
    let sb = Sandbox::new();
    let cfg = sb.write("config.toml", LAYOUT);
    let out = run(&sb, &cfg, "out.h5", &[]);
    let info = python(LAYOUT_CHECK, &[sb.join("out.h5").as_os_str()]);
    let s = &out.stdout;
    assert!(
        s.starts_with("method: trajectories (requested in the config)"),
        "{}",
        out.describe()
    );
    assert!(s.contains("± standard errors"), "{}", out.describe());
    // the jumps line on the terminal matches the file
    let jumps: Vec<String> = info
        .lines()
        .filter_map(|l| l.strip_prefix("jumps\t"))
        .map(|l| l.replace('\t', " "))
        .collect();
    let line = s
        .lines()
        .find(|l| l.starts_with("jumps per channel over 300 trajectories: "))
        .unwrap_or_else(|| panic!("no jumps line\n{}", out.describe()));
    assert_eq!(
        line.split(": ").nth(1).unwrap(),
        jumps.join(", "),
        "{}",
        out.describe()
    );
    // spin_z row: `mean ± stderr` at the last sample, as in the file
    let (mean, se) = info
        .lines()
        .find_map(|l| l.strip_prefix("spin_z\t"))
        .and_then(|l| l.split_once('\t'))
        .map(|(a, b)| (a.parse::<f64>().unwrap(), b.parse::<f64>().unwrap()))
        .unwrap();
    let row = s
        .lines()
        .find(|l| l.starts_with("spin_z "))
        .unwrap_or_else(|| panic!("no spin_z row\n{}", out.describe()));
    assert!(
        row.contains(&format!("{mean:.6e} ± {se:.1e}")),
        "`{row}` lacks {mean:.6e} ± {se:.1e}"
    );
    assert!(!s.contains("purity") && !s.contains("trace_error"), "{s}");
}

// ---------------------------------------------------------------------------------------------
// auto

/// A driven cavity with 200 Fock levels: the density matrix needs 14 · 200² · 16 B ≈ 8.5 MiB, the
/// trajectories well under 1 MiB. `#SHARE#` sets the allowed share of memory.
const AUTO: &str = r#"[units]
system = "dimensionless"
[time]
stop = 1.0
samples = 11
[solver]
method = "auto"
trajectories = 20
seed = 1
memory_share = #SHARE#
[[modes]]
levels = 200
loss = 1.0
drive = 0.5
"#;

fn mem_total() -> f64 {
    let text = std::fs::read_to_string("/proc/meminfo").expect("/proc/meminfo");
    let kb: f64 = text
        .lines()
        .find_map(|l| l.strip_prefix("MemTotal:"))
        .and_then(|l| l.split_whitespace().next())
        .and_then(|x| x.parse().ok())
        .expect("MemTotal");
    kb * 1024.0
}

fn solver_attrs(h5: &Path) -> String {
    python(
        "import sys, h5py\nf = h5py.File(sys.argv[1], 'r')\nprint(f['solver'].attrs['method'], f['solver'].attrs['method_requested'], 'jumps' in f)",
        &[h5.as_os_str()],
    )
}

/// `auto` runs the density matrix when it fits, and trajectories (saying why, in `check`, on the
/// terminal and in the file) when only they fit in the allowed share of memory.
#[test]
fn auto_falls_back_to_trajectories_when_the_density_matrix_does_not_fit() {
    let sb = Sandbox::new();
    // allowed: 3 MiB of this machine's memory
    let share = 3.0 * 1024.0 * 1024.0 / mem_total();
    let small = sb.write(
        "small.toml",
        &AUTO.replace("#SHARE#", &format!("{share:e}")),
    );
    let big = sb.write("big.toml", &AUTO.replace("#SHARE#", "0.5"));

    let chk = sb.cavern(["check".as_ref(), small.as_os_str()]);
    chk.assert_success();
    let m = chk
        .stdout
        .lines()
        .find(|l| l.starts_with("method"))
        .unwrap_or_else(|| panic!("no method line\n{}", chk.describe()));
    assert!(
        m.contains("trajectories (auto: the density matrix would need")
            && m.contains("more than the allowed"),
        "{m}"
    );
    assert!(
        chk.stdout.contains("too large: auto uses trajectories"),
        "{}",
        chk.describe()
    );
    let out = run(&sb, &small, "small.h5", &[]);
    assert!(
        out.stdout.starts_with("method: trajectories (auto:"),
        "{}",
        out.describe()
    );
    assert_eq!(
        solver_attrs(&sb.join("small.h5")).trim(),
        "trajectories auto True"
    );

    let chk = sb.cavern(["check".as_ref(), big.as_os_str()]);
    chk.assert_success();
    assert!(
        chk.stdout
            .contains("method      density-matrix (auto: the density matrix fits in memory"),
        "{}",
        chk.describe()
    );
    run(&sb, &big, "big.h5", &["--quiet"]);
    assert_eq!(
        solver_attrs(&sb.join("big.h5")).trim(),
        "density-matrix auto False"
    );
}
