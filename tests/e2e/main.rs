//! End-to-end tests of the `cavern` command-line tool: every test runs the real binary in a fresh
//! temporary directory and looks only at what a user sees — exit code, stdout, stderr and the
//! files left behind (HDF5 results are read back with h5py through `python3`).
//!
//! - `config_errors` — the bad-input corpus in `tests/bad-input/` (one mistake per file, the
//!   expected message stated in the file's leading comments).
//! - `check` — what `cavern check` reports (dimension, memory, units, cooperativity).
//! - `run_output` — `cavern run`: the HDF5 layout, the summary table, quiet mode, determinism,
//!   the truncation warning and output-path errors.
//! - `recall` — `[memory]` and `[probes]`: the couplings and spectrum `check` prints, the
//!   `/memory` and `/recall` groups recomputed with NumPy, the recall table, erased probes, the
//!   classical limit of the quantum network.
//! - `scipy_reference` — a 2-spin + 1-mode run against an independent SciPy propagation.
//! - `steady_state` — `[steady_state]`: analytic steady states, relaxation rates, non-uniqueness.
//! - `compare` — `cavern compare`: zero differences against itself, the analytic changes when
//!   the loss of an empty driven cavity doubles, the z-test, recall rows and scan points.
//! - `budget` — the photon budget against a Poisson hand calculation and exact SciPy errors.
//! - `plot` — `cavern plot` / compare figures are valid PNG and SVG files of sensible size.
//! - `scan`, `scan_slurm` — parameter scans: output layout, kill -9 and resume, shards and merge,
//!   and a SLURM job array on a local cluster (run only when `.ci/run` started one).
//! - `trajectories` — the quantum-trajectory solver: agreement with the density matrix,
//!   antibunching, Poissonian counts, thread-count reproducibility, `auto`, the file layout.

mod budget;
mod check;
mod compare;
mod config_errors;
mod plot;
mod recall;
mod run_output;
mod scan;
mod scan_slurm;
mod scipy_reference;
mod steady_state;
mod trajectories;
mod util;
