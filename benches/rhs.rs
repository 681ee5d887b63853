//! Benchmark of the Lindblad right-hand side `LindbladRhs::apply` against the machine's memory
//! bandwidth.
//!
//! Model (invented, loosely after `configs/ring4-resonator.toml`): N two-level sites, all coupled to one
//! driven 6-level mode by the exchange form g(aσ⁺ + a†σ⁻); spin decay and dephasing, mode loss,
//! and a few zz couplings between mirror pairs of sites. N = 4, 6, 8, 10 gives d = 96, 384, 1536,
//! 6144. Every size runs on rayon pools of 1 and 2 threads.
//!
//! Alongside, a STREAM-style triad a[i] = b[i] + s·c[i] on three f64 arrays of 256 MiB each
//! (768 MiB in all, more than any cache here, including the 480 MiB L3 this VM reports) measures the sustainable memory bandwidth, counted as 24 bytes per
//! element (two reads and one write; write-allocate traffic is not counted, as in STREAM).
//!
//! Two paths are timed. *full*: `apply` on the whole matrix, as the steady-state solvers call it.
//! *lower half*: what the time integrator calls per stage, `Rhs::complete` (mirror the upper
//! tiles of ρ from the lower ones) followed by `apply` in lower-half mode, which writes only the
//! diagonal and lower tiles of dρ/dt (d·(d + w)/2 entries, w = panel width).
//!
//! For each d the memory-traffic lower bound of one right-hand-side call is
//! (bytes of ρ read once + bytes of dρ/dt written once) / triad bandwidth, using the best triad
//! bandwidth at the same thread count: 2·16·d² B / BW for the full path, and 2·16·d(d + w)/2 B /
//! BW for the lower-half path, whose input and output are only the carried entries. At the end
//! the bench prints a table of time per call, bound and ratio, and writes it to
//! `target/perf/rhs-summary.md`.
//!
//! ρ and dρ/dt are passed in the kernel's panel-major layout (`LindbladRhs::to_panels`); the
//! conversion is done once, outside the timed loop.
//!
//! Run: `cargo bench --bench rhs` (a few minutes on 2 cores; d = 6144 needs about 2.5 GB).

use cavern_evolve::{LindbladRhs, Par, Rhs};
use cavern_model::{CouplingForm, ModeParams, Network, SiteParams, C64};
use criterion::measurement::WallTime;
use criterion::{black_box, BenchmarkGroup, BenchmarkId, Criterion, SamplingMode, Throughput};
use rayon::prelude::*;
use std::collections::BTreeMap;
use std::fmt::Write as _;
use std::sync::Mutex;
use std::time::{Duration, Instant};

const TWO_PI: f64 = std::f64::consts::TAU;
/// Numbers of spins: d = 2^N · 6.
const SPINS: [usize; 4] = [4, 6, 8, 10];
/// Thread counts of the rayon pools.
const THREADS: [usize; 2] = [1, 2];
/// Elements per triad array: 32 Mi f64 = 256 MiB each, 768 MiB in all.
const TRIAD_LEN: usize = 32 << 20;
/// Elements per parallel chunk of the triad.
const TRIAD_CHUNK: usize = 1 << 16;
/// Mode truncation.
const LEVELS: usize = 6;

/// Per-call times (seconds) recorded by the timing closures, keyed by benchmark id. Criterion
/// calls the closure during warm-up and then once per sample, so the last `sample_size` entries
/// are the measurement samples.
static TIMES: Mutex<BTreeMap<String, Vec<f64>>> = Mutex::new(BTreeMap::new());

/// Bytes one call must move at least (read its input once, write its output once), keyed by the
/// group and dimension (`rhs/d384`, `rhs-lower/d384`).
static BYTES: Mutex<BTreeMap<String, u64>> = Mutex::new(BTreeMap::new());

fn record(key: &str, per_call: f64) {
    TIMES
        .lock()
        .expect("timing table poisoned")
        .entry(key.to_string())
        .or_default()
        .push(per_call);
}

/// Median and minimum of the last `n` recorded per-call times of `key`, and how many were used.
fn stats_of_last(key: &str, n: usize) -> Option<(f64, f64, usize)> {
    let map = TIMES.lock().expect("timing table poisoned");
    let v = map.get(key)?;
    let mut last: Vec<f64> = v[v.len().saturating_sub(n)..].to_vec();
    last.sort_by(f64::total_cmp);
    let m = last.len();
    if m == 0 {
        return None;
    }
    let med = if m % 2 == 1 {
        last[m / 2]
    } else {
        0.5 * (last[m / 2 - 1] + last[m / 2])
    };
    Some((med, last[0], m))
}

/// The benchmark network with `n` spins (angular units: 2π × MHz, time in µs).
fn network(n: usize) -> Network {
    let sites = (0..n)
        .map(|i| SiteParams {
            detuning: TWO_PI * if i % 2 == 0 { 0.05 } else { -0.05 },
            decay: TWO_PI * 0.02,
            dephasing: TWO_PI * 0.01,
            ..Default::default()
        })
        .collect();
    let mode = ModeParams {
        levels: LEVELS,
        detuning: TWO_PI * 0.5,
        loss: TWO_PI * 0.8,
        drive: TWO_PI * 0.15,
        ..Default::default()
    };
    let coupling = (0..n)
        .map(|i| vec![TWO_PI * if i % 2 == 0 { 0.30 } else { 0.25 }])
        .collect();
    // zz between mirror pairs (k, n−1−k) for even k: (0,3), (2,1) for n = 4, …
    let mut zz = vec![vec![0.0; n]; n];
    for k in (0..n).step_by(2) {
        let j = n - 1 - k;
        if j != k {
            zz[k][j] = TWO_PI * 0.025;
            zz[j][k] = TWO_PI * 0.025;
        }
    }
    Network {
        sites,
        modes: vec![mode],
        coupling,
        coupling_form: CouplingForm::Exchange,
        zz,
        ..Network::empty()
    }
}

fn splitmix(mut x: u64) -> u64 {
    x = x.wrapping_add(0x9e37_79b9_7f4a_7c15);
    x = (x ^ (x >> 30)).wrapping_mul(0xbf58_476d_1ce4_e5b9);
    x = (x ^ (x >> 27)).wrapping_mul(0x94d0_49bb_1331_11eb);
    x ^ (x >> 31)
}

/// A dense Hermitian test matrix of trace 1 with no zero (or subnormal) entries:
/// ρ = (I + ½U)/d with U Hermitian, |U_rc| ≤ 1, pseudo-random.
fn test_density(d: usize) -> Vec<C64> {
    let mut rho = vec![C64::new(0.0, 0.0); d * d];
    let unit = |x: u64| (x >> 11) as f64 / (1u64 << 53) as f64 - 0.5;
    rho.par_chunks_mut(d).enumerate().for_each(|(r, row)| {
        for (c, x) in row.iter_mut().enumerate() {
            let (lo, hi) = (r.min(c) as u64, r.max(c) as u64);
            let h = splitmix(lo * d as u64 + hi);
            let re = unit(h);
            let im = if r == c { 0.0 } else { unit(splitmix(h)) };
            let v = C64::new(re, im) * 0.5 / d as f64;
            *x = if r < c { v } else { v.conj() };
            if r == c {
                *x += 1.0 / d as f64;
            }
        }
    });
    let tr: f64 = (0..d).map(|r| rho[r * d + r].re).sum();
    rho.iter_mut().for_each(|x| *x /= tr);
    rho
}

/// Whether benchmark `id` can pass the command-line filter (the first positional argument, a
/// regex for criterion). Used only to skip building the large inputs of filtered-out benchmarks;
/// a filter with regex syntax is treated as matching everything.
fn wanted(id: &str) -> bool {
    let args: Vec<String> = std::env::args().skip(1).collect();
    let mut it = args.iter();
    let mut filter = None;
    while let Some(a) = it.next() {
        const WITH_VALUE: [&str; 15] = [
            "--profile-time",
            "--save-baseline",
            "--baseline",
            "--baseline-lenient",
            "--load-baseline",
            "--color",
            "--sample-size",
            "--warm-up-time",
            "--measurement-time",
            "--nresamples",
            "--noise-threshold",
            "--confidence-level",
            "--significance-level",
            "--plotting-backend",
            "--output-format",
        ];
        if WITH_VALUE.contains(&a.as_str()) {
            it.next();
        } else if !a.starts_with('-') {
            filter = Some(a.as_str());
            break;
        }
    }
    match filter {
        None => true,
        Some(f) if f.chars().any(|c| "\\.^$*+?()[]{}|".contains(c)) => true,
        Some(f) => id.contains(f),
    }
}

fn pool(threads: usize) -> rayon::ThreadPool {
    rayon::ThreadPoolBuilder::new()
        .num_threads(threads)
        .build()
        .expect("cannot build the rayon pool")
}

fn triad(a: &mut [f64], b: &[f64], c: &[f64], s: f64) {
    a.par_chunks_mut(TRIAD_CHUNK)
        .zip(b.par_chunks(TRIAD_CHUNK))
        .zip(c.par_chunks(TRIAD_CHUNK))
        .for_each(|((a, b), c)| {
            for ((x, &y), &z) in a.iter_mut().zip(b).zip(c) {
                *x = y + s * z;
            }
        });
}

fn bench_triad(c: &mut Criterion) {
    let mut group = c.benchmark_group("triad");
    group
        .sample_size(10)
        .sampling_mode(SamplingMode::Flat)
        .warm_up_time(Duration::from_millis(500))
        .measurement_time(Duration::from_secs(3))
        .throughput(Throughput::Bytes(24 * TRIAD_LEN as u64));
    for &t in &THREADS {
        if !wanted(&format!("triad/{t}t")) {
            continue;
        }
        let p = pool(t);
        // first touch inside the pool that uses the arrays
        let (mut a, b, cc) = p.install(|| {
            let mk = |v: f64| {
                let mut x = vec![0.0f64; TRIAD_LEN];
                x.par_chunks_mut(TRIAD_CHUNK).for_each(|ch| ch.fill(v));
                x
            };
            (mk(0.0), mk(1.0), mk(2.0))
        });
        let key = format!("triad/{t}t");
        group.bench_function(BenchmarkId::from_parameter(format!("{t}t")), |bch| {
            bch.iter_custom(|iters| {
                p.install(|| {
                    let start = Instant::now();
                    for _ in 0..iters {
                        triad(&mut a, black_box(&b), black_box(&cc), black_box(0.5));
                    }
                    let e = start.elapsed();
                    record(&key, e.as_secs_f64() / iters as f64);
                    e
                })
            })
        });
        assert!(a.iter().step_by(4099).all(|&x| x == 2.0), "triad result");
    }
    group.finish();
}

/// Sample size of the right-hand-side benchmark of dimension `d`.
fn rhs_samples(d: usize) -> usize {
    if d >= 1536 {
        10
    } else {
        20
    }
}

/// Sampling of the right-hand-side group `name` of dimension `d` that moves `bytes` per call at
/// best (recorded for the summary).
fn configure(name: &str, group: &mut BenchmarkGroup<'_, WallTime>, d: usize, bytes: u64) {
    BYTES
        .lock()
        .expect("byte table poisoned")
        .insert(format!("{name}/d{d}"), bytes);
    group
        .sample_size(rhs_samples(d))
        .throughput(Throughput::Bytes(bytes))
        .warm_up_time(Duration::from_millis(500));
    if d >= 1536 {
        group
            .sampling_mode(SamplingMode::Flat)
            .measurement_time(Duration::from_secs(if d >= 6144 { 5 } else { 3 }));
    } else {
        group.measurement_time(Duration::from_secs(2));
    }
}

fn bench_rhs(c: &mut Criterion) {
    for &n in &SPINS {
        let d = (1 << n) * LEVELS;
        if !THREADS.iter().any(|t| wanted(&format!("rhs/d{d}/{t}t"))) {
            continue;
        }
        let me = network(n).build().expect("benchmark network");
        assert_eq!(d, me.space.dim());
        let mut rhs = LindbladRhs::new(&me, Par::Rayon).expect("right-hand side");
        // the kernel works on ρ and dρ/dt in its panel-major layout
        let mut rho_rm = test_density(d);
        let mut rho = vec![C64::new(0.0, 0.0); d * d];
        rhs.to_panels(&rho_rm, &mut rho);
        let mut out = vec![C64::new(0.0, 0.0); d * d];
        // sanity: the generator is trace preserving and keeps ρ Hermitian
        rhs.apply(0.0, &rho, &mut out);
        rhs.from_panels(&out, &mut rho_rm);
        let drho = rho_rm;
        let tr: C64 = (0..d).map(|r| drho[r * d + r]).sum();
        let scale = drho.iter().map(|x| x.norm()).fold(0.0, f64::max);
        assert!(tr.norm() <= 1e-10 * scale * d as f64, "Tr dρ/dt = {tr}");
        for (r, c) in [(0, 1), (1, d - 1), (d / 3, d / 2)] {
            let defect = (drho[r * d + c] - drho[c * d + r].conj()).norm();
            assert!(defect <= 1e-12 * scale, "dρ/dt is not Hermitian");
        }
        drop(drho);

        let mut group = c.benchmark_group("rhs");
        configure("rhs", &mut group, d, 2 * 16 * (d * d) as u64);
        for &t in &THREADS {
            let p = pool(t);
            let key = format!("rhs/d{d}/{t}t");
            group.bench_function(BenchmarkId::new(format!("d{d}"), format!("{t}t")), |bch| {
                bch.iter_custom(|iters| {
                    p.install(|| {
                        let start = Instant::now();
                        for _ in 0..iters {
                            rhs.apply(black_box(0.0), black_box(&rho), &mut out);
                        }
                        let e = start.elapsed();
                        record(&key, e.as_secs_f64() / iters as f64);
                        e
                    })
                })
            });
        }
        group.finish();
        // the integrator's path: mirror the upper tiles, then write the lower ones
        let mut lower = LindbladRhs::new(&me, Par::Rayon)
            .expect("right-hand side")
            .lower_half_only();
        let mut group = c.benchmark_group("rhs-lower");
        configure(
            "rhs-lower",
            &mut group,
            d,
            2 * 16 * lower.lower_len().1 as u64,
        );
        for &t in &THREADS {
            let p = pool(t);
            let key = format!("rhs-lower/d{d}/{t}t");
            group.bench_function(BenchmarkId::new(format!("d{d}"), format!("{t}t")), |bch| {
                bch.iter_custom(|iters| {
                    p.install(|| {
                        let start = Instant::now();
                        for _ in 0..iters {
                            lower.complete(black_box(&mut rho));
                            lower.apply(black_box(0.0), black_box(&rho), &mut out);
                        }
                        let e = start.elapsed();
                        record(&key, e.as_secs_f64() / iters as f64);
                        e
                    })
                })
            });
        }
        group.finish();
    }
}

fn fmt_time(s: f64) -> String {
    if s >= 1.0 {
        format!("{s:.3} s")
    } else if s >= 1e-3 {
        format!("{:.3} ms", s * 1e3)
    } else {
        format!("{:.2} µs", s * 1e6)
    }
}

/// The summary table (Markdown).
fn summary() -> String {
    let mut s = String::new();
    let load = std::fs::read_to_string("/proc/loadavg").unwrap_or_default();
    let _ = writeln!(s, "## Lindblad RHS vs memory-traffic bound\n");
    let _ = writeln!(s, "Load average at the end: {}\n", load.trim());
    let mut bw = BTreeMap::new();
    let _ = writeln!(
        s,
        "Triad a = b + s·c on 3 × {} MiB f64 arrays, 24 B/element; as in STREAM, the bandwidth \
         is taken from the best (minimum) time:\n",
        (TRIAD_LEN * 8) >> 20
    );
    let _ = writeln!(
        s,
        "| threads | triad time median | min | bandwidth GB/s (best) | at median |"
    );
    let _ = writeln!(s, "|---:|---:|---:|---:|---:|");
    for &t in &THREADS {
        if let Some((m, lo, k)) = stats_of_last(&format!("triad/{t}t"), 10) {
            let gb = 24.0 * TRIAD_LEN as f64 / 1e9;
            bw.insert(t, gb / lo);
            let _ = writeln!(
                s,
                "| {t} | {} (n={k}) | {} | {:.2} | {:.2} |",
                fmt_time(m),
                fmt_time(lo),
                gb / lo,
                gb / m
            );
        }
    }
    let _ = writeln!(
        s,
        "\nRHS: bound = bytes of the input read once + bytes of the output written once, / best \
         triad bandwidth at the same thread count: 2·16·d² B for the full path, 2·16·d(d + w)/2 B \
         for the lower-half path (w = panel width); effective = those bytes / median time. Ratios \
         and speedups are given for the median time and, after the semicolon, for the minimum \
         time.\n"
    );
    let _ = writeln!(
        s,
        "| d | spins | ρ (MB) | path | threads | time/call median | min | effective GB/s | bound | measured/bound | speedup 1→2 |"
    );
    let _ = writeln!(s, "|---:|---:|---:|---|---:|---:|---:|---:|---:|---:|---:|");
    let bytes_of = BYTES.lock().expect("byte table poisoned").clone();
    for &n in &SPINS {
        let d = (1usize << n) * LEVELS;
        for (group, path) in [("rhs", "full"), ("rhs-lower", "lower half")] {
            let Some(&bytes) = bytes_of.get(&format!("{group}/d{d}")) else {
                continue;
            };
            let bytes = bytes as f64;
            let one = stats_of_last(&format!("{group}/d{d}/1t"), rhs_samples(d));
            for &t in &THREADS {
                let Some((m, lo, k)) = stats_of_last(&format!("{group}/d{d}/{t}t"), rhs_samples(d))
                else {
                    continue;
                };
                let (bound, ratio) = match bw.get(&t) {
                    Some(&g) => {
                        let b = bytes / (g * 1e9);
                        (fmt_time(b), format!("{:.2}; {:.2}", m / b, lo / b))
                    }
                    None => ("(no triad run)".into(), "–".into()),
                };
                let speedup = match (t, one) {
                    (1, _) => "".into(),
                    (_, Some((om, olo, _))) => format!("{:.2}×; {:.2}×", om / m, olo / lo),
                    _ => "–".into(),
                };
                let _ = writeln!(
                    s,
                    "| {d} | {n} | {:.1} | {path} | {t} | {} (n={k}) | {} | {:.2} | {bound} | {ratio} | {speedup} |",
                    16.0 * (d * d) as f64 / 1e6,
                    fmt_time(m),
                    fmt_time(lo),
                    bytes / m / 1e9,
                );
            }
        }
    }
    s
}

/// `target/` of this build: the bench executable lives in `target/<profile>/deps/`.
fn target_dir() -> Option<std::path::PathBuf> {
    let exe = std::env::current_exe().ok()?;
    Some(exe.parent()?.parent()?.parent()?.to_path_buf())
}

fn main() {
    let args: Vec<String> = std::env::args().collect();
    let benchmarking =
        args.iter().any(|a| a == "--bench") && !args.iter().any(|a| a == "--test" || a == "--list");
    let mut c = Criterion::default().configure_from_args();
    bench_triad(&mut c);
    bench_rhs(&mut c);
    c.final_summary();
    if !benchmarking {
        return;
    }
    let table = summary();
    println!("\n{table}");
    if let Some(dir) = target_dir() {
        let dir = dir.join("perf");
        let path = dir.join("rhs-summary.md");
        match std::fs::create_dir_all(&dir).and_then(|_| std::fs::write(&path, &table)) {
            Ok(()) => println!("(table written to {})", path.display()),
            Err(e) => eprintln!("cannot write {}: {e}", path.display()),
        }
    }
}
