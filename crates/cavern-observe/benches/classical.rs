//! Benchmark of the classical Hopfield baselines (`classical::descend`, `classical::glauber`)
//! on Hebbian networks of N = 500, 2000 and 4000 sites at load P/N = 0.05 (invented random
//! patterns, seeded).
//!
//! - descend: start from a stored pattern with 10% of its sites flipped (the recall baseline);
//!   time until convergence (a few sweeps).
//! - glauber: 10 heat-bath sweeps at T = 0.5 (rule units) from a stored pattern.
//!
//! Both include the O(N²) initial local fields. Single-threaded by construction.
//!
//! Run: `cargo bench -p cavern-observe --bench classical` (about a minute).

use cavern_model::memory::{learn, LearningRule};
use cavern_observe::classical::{descend, glauber, random_patterns};
use criterion::{black_box, BenchmarkId, Criterion};
use std::time::Duration;

fn bench(c: &mut Criterion) {
    let mut group = c.benchmark_group("classical");
    group
        .sample_size(10)
        .measurement_time(Duration::from_secs(3))
        .warm_up_time(Duration::from_millis(500));
    for n in [500usize, 2000, 4000] {
        let patterns = random_patterns(n, n / 20, 1);
        let j = learn(LearningRule::Hebbian, &patterns).expect("valid random patterns");
        let mut probe = patterns[0].clone();
        for x in probe.iter_mut().step_by(10) {
            *x = -*x;
        }
        group.bench_with_input(BenchmarkId::new("descend", n), &n, |b, _| {
            b.iter(|| descend(black_box(&j), black_box(&probe), 3, 1000))
        });
        group.bench_with_input(BenchmarkId::new("glauber-10-sweeps", n), &n, |b, _| {
            b.iter(|| glauber(black_box(&j), black_box(&patterns[0]), 0.5, 10, 3))
        });
    }
    group.finish();
}

fn main() {
    let mut c = Criterion::default().configure_from_args();
    bench(&mut c);
    c.final_summary();
}
