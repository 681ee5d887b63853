//! Parameter scans: a `[scan]` table sweeps numeric config keys over lists, linear and
//! logarithmic ranges, grids and zipped axes. Every finished point is appended to a journal with
//! fsync before it counts as done, so a killed scan resumes where it stopped and gives the same
//! file as an uninterrupted run; shards of a scan (e.g. SLURM array tasks) are merged from their
//! journals. User documentation: README.md, "Parameter scans".

pub mod cmd;
pub mod exec;
pub mod file;
pub mod journal;
pub mod spec;

pub use spec::Scan;
