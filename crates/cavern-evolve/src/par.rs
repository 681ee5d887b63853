//! Deterministic data-parallel helpers: fixed chunking so results never depend on thread count.

use num_complex::Complex64 as C64;
use rayon::prelude::*;

/// Whether a kernel may use the rayon thread pool.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Default)]
pub enum Par {
    /// Run on the calling thread (used inside already-parallel loops, e.g. one trajectory each).
    Seq,
    /// Split work over the current rayon pool (its thread count is set by the application).
    #[default]
    Rayon,
}

/// Elements per parallel chunk of a vector operation. Fixed, so that reductions combine the same
/// partial sums in the same order whatever the number of threads. 4096 complex numbers (64 KiB):
/// small enough that d = 384 (36 chunks) splits evenly over two threads (1 << 14 gave 9 chunks,
/// 5 against 4, and the end-to-end run at d = 384 took 0.80 s instead of 0.72 s on 2 threads;
/// no change at d = 1536; docs/performance.md §2).
pub const CHUNK: usize = 1 << 12;

/// Run `f` compiled for the widest vector instruction set the CPU offers (AVX2 on x86-64 when
/// available, detected at run time; the baseline otherwise). The code inside must be inlined into
/// `f` to profit: mark called kernels `#[inline(always)]`. Floating-point results do not depend on
/// the path taken: no operation is contracted into a fused multiply-add or reordered, only the
/// vector width changes.
#[inline(always)]
pub fn vectorized<R>(f: impl FnOnce() -> R) -> R {
    #[cfg(test)]
    if BASELINE.with(|b| b.get()) {
        return pulp::Arch::Scalar.dispatch(f);
    }
    // the CPU is probed once per process, not once per chunk
    static ARCH: std::sync::OnceLock<pulp::Arch> = std::sync::OnceLock::new();
    ARCH.get_or_init(pulp::Arch::new).dispatch(f)
}

#[cfg(test)]
thread_local! {
    /// Test switch: force the baseline instruction set on this thread (with [`Par::Seq`] all
    /// work stays on the calling thread).
    pub(crate) static BASELINE: std::cell::Cell<bool> = const { std::cell::Cell::new(false) };
}

/// Run `f(offset, chunk)` over consecutive chunks of `out` of [`CHUNK`] elements.
pub fn for_chunks<F>(par: Par, out: &mut [C64], f: F)
where
    F: Fn(usize, &mut [C64]) + Sync + Send,
{
    if par == Par::Seq || out.len() <= CHUNK {
        for (b, o) in out.chunks_mut(CHUNK).enumerate() {
            vectorized(
                #[inline(always)]
                || f(b * CHUNK, o),
            );
        }
    } else {
        out.par_chunks_mut(CHUNK).enumerate().for_each(|(b, o)| {
            vectorized(
                #[inline(always)]
                || f(b * CHUNK, o),
            )
        });
    }
}

/// As [`for_chunks`] over two outputs of the same length, chunked alike:
/// `f(offset, chunk of a, chunk of b)`.
///
/// # Panics
/// If the lengths differ.
pub fn for_chunks2<F>(par: Par, a: &mut [C64], b: &mut [C64], f: F)
where
    F: Fn(usize, &mut [C64], &mut [C64]) + Sync + Send,
{
    assert_eq!(a.len(), b.len());
    if par == Par::Seq || a.len() <= CHUNK {
        for (i, (x, y)) in a.chunks_mut(CHUNK).zip(b.chunks_mut(CHUNK)).enumerate() {
            vectorized(
                #[inline(always)]
                || f(i * CHUNK, x, y),
            );
        }
    } else {
        a.par_chunks_mut(CHUNK)
            .zip(b.par_chunks_mut(CHUNK))
            .enumerate()
            .for_each(|(i, (x, y))| {
                vectorized(
                    #[inline(always)]
                    || f(i * CHUNK, x, y),
                )
            });
    }
}

/// Sum of `f(lo, hi)` over consecutive index ranges of [`CHUNK`] elements covering `0..n`, added
/// in range order (deterministic). `partials` is caller-owned scratch.
pub fn sum_ranges<F>(par: Par, n: usize, partials: &mut Vec<f64>, f: F) -> f64
where
    F: Fn(usize, usize) -> f64 + Sync + Send,
{
    let n_chunks = n.div_ceil(CHUNK);
    partials.resize(n_chunks, 0.0);
    let range = |b: usize| (b * CHUNK, ((b + 1) * CHUNK).min(n));
    if par == Par::Seq || n_chunks <= 1 {
        for (b, p) in partials.iter_mut().enumerate() {
            let (lo, hi) = range(b);
            *p = vectorized(
                #[inline(always)]
                || f(lo, hi),
            );
        }
    } else {
        partials.par_iter_mut().enumerate().for_each(|(b, p)| {
            let (lo, hi) = range(b);
            *p = vectorized(
                #[inline(always)]
                || f(lo, hi),
            );
        });
    }
    partials.iter().sum()
}
