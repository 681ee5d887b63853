//! HDF5 output for cavern results.
//!
//! Results are first assembled as an in-memory tree ([`Group`] → [`Dataset`] /
//! attributes) and then written in one go by [`write_atomic`]. The tree types do
//! not mention the HDF5 backend, so the backend can be swapped without touching
//! callers.
//!
//! The backend is the pure-Rust [`hdf5_pure`] crate (no system `libhdf5`); see
//! `docs/hdf5.md` for why. How h5py sees what is written here:
//!
//! | Rust | h5py |
//! | --- | --- |
//! | [`Data::F64`] / [`Data::I64`] | `float64` / `int64` dataset of the given shape (little-endian, contiguous, uncompressed) |
//! | [`Data::Str`] | variable-length UTF-8 string dataset; read it with `ds.asstr()[()]` (plain `ds[()]` gives `bytes`, as for every h5py vlen string dataset) |
//! | [`AttrValue::Str`] | `str` (variable-length UTF-8) |
//! | [`AttrValue::F64`] / [`AttrValue::I64`] | `numpy.float64` / `numpy.int64` scalar |
//! | [`AttrValue::F64s`] / [`AttrValue::I64s`] | 1-D `float64` / `int64` array |
//! | [`AttrValue::Strs`] | 1-D object array of `str` |
//!
//! ```no_run
//! use cavern::h5out::{write_atomic, Data, Group};
//!
//! let mut root = Group::new();
//! root.attr("cavern_version", "0.1.0");
//! let results = root.group("results");
//! results
//!     .dataset("rho", &[2, 2], Data::F64(vec![1.0, 0.0, 0.0, 0.0]))
//!     .attr("units", "dimensionless");
//! write_atomic(&root, std::path::Path::new("out.h5"))?;
//! # Ok::<(), cavern::h5out::H5Error>(())
//! ```

use std::fs::{self, OpenOptions};
use std::io;
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicU64, Ordering};

/// Value of an HDF5 attribute.
#[derive(Debug, Clone, PartialEq)]
pub enum AttrValue {
    /// A UTF-8 string (h5py returns `str`).
    Str(String),
    /// A scalar 64-bit float.
    F64(f64),
    /// A scalar 64-bit signed integer.
    I64(i64),
    /// A 1-D array of 64-bit floats.
    F64s(Vec<f64>),
    /// A 1-D array of 64-bit signed integers.
    I64s(Vec<i64>),
    /// A 1-D array of UTF-8 strings (h5py returns an object array of `str`).
    Strs(Vec<String>),
}

impl From<&str> for AttrValue {
    fn from(v: &str) -> Self {
        AttrValue::Str(v.to_owned())
    }
}

impl From<String> for AttrValue {
    fn from(v: String) -> Self {
        AttrValue::Str(v)
    }
}

impl From<&String> for AttrValue {
    fn from(v: &String) -> Self {
        AttrValue::Str(v.clone())
    }
}

impl From<f64> for AttrValue {
    fn from(v: f64) -> Self {
        AttrValue::F64(v)
    }
}

impl From<i64> for AttrValue {
    fn from(v: i64) -> Self {
        AttrValue::I64(v)
    }
}

/// Stored as [`AttrValue::I64`]; lets untyped integer literals (`attr("n", 3)`) work.
impl From<i32> for AttrValue {
    fn from(v: i32) -> Self {
        AttrValue::I64(i64::from(v))
    }
}

/// Stored as [`AttrValue::I64`].
impl From<u32> for AttrValue {
    fn from(v: u32) -> Self {
        AttrValue::I64(i64::from(v))
    }
}

impl From<Vec<f64>> for AttrValue {
    fn from(v: Vec<f64>) -> Self {
        AttrValue::F64s(v)
    }
}

impl From<&[f64]> for AttrValue {
    fn from(v: &[f64]) -> Self {
        AttrValue::F64s(v.to_vec())
    }
}

impl From<Vec<i64>> for AttrValue {
    fn from(v: Vec<i64>) -> Self {
        AttrValue::I64s(v)
    }
}

impl From<&[i64]> for AttrValue {
    fn from(v: &[i64]) -> Self {
        AttrValue::I64s(v.to_vec())
    }
}

impl From<Vec<String>> for AttrValue {
    fn from(v: Vec<String>) -> Self {
        AttrValue::Strs(v)
    }
}

impl From<&[&str]> for AttrValue {
    fn from(v: &[&str]) -> Self {
        AttrValue::Strs(v.iter().map(|s| (*s).to_owned()).collect())
    }
}

/// Contents of a dataset, flattened in row-major (C) order.
#[derive(Debug, Clone, PartialEq)]
pub enum Data {
    /// 64-bit floats.
    F64(Vec<f64>),
    /// 64-bit signed integers.
    I64(Vec<i64>),
    /// A single UTF-8 string, stored as one variable-length string element
    /// (use shape `&[]` for a scalar dataset). Meant for texts such as the
    /// whole input TOML; there is no size limit beyond memory.
    Str(String),
    /// A 1-D array of UTF-8 strings (h5py: variable-length strings; read with `ds.asstr()[()]`).
    Strs(Vec<String>),
}

impl Data {
    /// Number of elements: the vector length, or 1 for [`Data::Str`].
    pub fn len(&self) -> usize {
        match self {
            Data::F64(v) => v.len(),
            Data::I64(v) => v.len(),
            Data::Str(_) => 1,
            Data::Strs(v) => v.len(),
        }
    }

    /// Whether there are no elements (never true for [`Data::Str`]).
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }
}

impl From<Vec<f64>> for Data {
    fn from(v: Vec<f64>) -> Self {
        Data::F64(v)
    }
}

impl From<Vec<i64>> for Data {
    fn from(v: Vec<i64>) -> Self {
        Data::I64(v)
    }
}

impl From<String> for Data {
    fn from(v: String) -> Self {
        Data::Str(v)
    }
}

impl From<&str> for Data {
    fn from(v: &str) -> Self {
        Data::Str(v.to_owned())
    }
}

/// An HDF5 dataset to be written: shape, row-major data and attributes.
///
/// The fields are public for inspection; if they are edited directly so that
/// the shape no longer matches the data, [`write_atomic`] reports
/// [`H5Error::InvalidTree`].
#[derive(Debug, Clone, PartialEq)]
pub struct Dataset {
    /// Dimensions; `[]` is a scalar (one element).
    pub shape: Vec<usize>,
    /// Elements in row-major order; their count equals the product of `shape`.
    pub data: Data,
    /// Attributes in insertion order (names unique).
    pub attrs: Vec<(String, AttrValue)>,
}

impl Dataset {
    /// Sets attribute `name`, replacing (in place) any earlier value of that name.
    pub fn attr(&mut self, name: &str, v: impl Into<AttrValue>) -> &mut Self {
        set_attr(&mut self.attrs, name, v.into());
        self
    }
}

/// In-memory tree of an HDF5 file to be written.
///
/// A `Group` holds attributes, datasets and subgroups, each in insertion order
/// with unique names. The root of the file is a `Group` too. Link names must be
/// non-empty, must not be `.` and must not contain `/` or NUL; such problems (and
/// a dataset and a subgroup sharing a name) are reported by [`write_atomic`] as
/// [`H5Error::InvalidTree`] before anything touches the file system.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct Group {
    attrs: Vec<(String, AttrValue)>,
    datasets: Vec<(String, Dataset)>,
    groups: Vec<(String, Group)>,
}

impl Group {
    /// An empty group.
    pub fn new() -> Self {
        Self::default()
    }

    /// Sets attribute `name`, replacing (in place) any earlier value of that name.
    pub fn attr(&mut self, name: &str, v: impl Into<AttrValue>) -> &mut Self {
        set_attr(&mut self.attrs, name, v.into());
        self
    }

    /// Adds dataset `name` with the given shape and row-major data and returns
    /// it (to add attributes). A dataset already present under `name` is
    /// replaced in place, attributes included.
    ///
    /// # Panics
    ///
    /// If the product of `shape` (1 for `&[]`) differs from `data.len()`
    /// (which is 1 for [`Data::Str`]), or overflows `usize`.
    pub fn dataset(&mut self, name: &str, shape: &[usize], data: Data) -> &mut Dataset {
        let expected = element_count(shape)
            .unwrap_or_else(|| panic!("h5out: dataset {name:?}: shape {shape:?} overflows usize"));
        assert_eq!(
            expected,
            data.len(),
            "h5out: dataset {name:?}: shape {shape:?} holds {expected} element(s) but data has {}",
            data.len()
        );
        let ds = Dataset {
            shape: shape.to_vec(),
            data,
            attrs: Vec::new(),
        };
        let idx = match self.datasets.iter().position(|(n, _)| n == name) {
            Some(i) => {
                self.datasets[i].1 = ds;
                i
            }
            None => {
                self.datasets.push((name.to_owned(), ds));
                self.datasets.len() - 1
            }
        };
        &mut self.datasets[idx].1
    }

    /// Returns subgroup `name`, creating it (empty) if it does not exist.
    pub fn group(&mut self, name: &str) -> &mut Group {
        let idx = match self.groups.iter().position(|(n, _)| n == name) {
            Some(i) => i,
            None => {
                self.groups.push((name.to_owned(), Group::new()));
                self.groups.len() - 1
            }
        };
        &mut self.groups[idx].1
    }

    /// Attributes in insertion order.
    pub fn attrs(&self) -> &[(String, AttrValue)] {
        &self.attrs
    }

    /// Datasets (name, dataset) in insertion order.
    pub fn datasets(&self) -> impl Iterator<Item = (&str, &Dataset)> {
        self.datasets.iter().map(|(n, d)| (n.as_str(), d))
    }

    /// Subgroups (name, group) in insertion order.
    pub fn groups(&self) -> impl Iterator<Item = (&str, &Group)> {
        self.groups.iter().map(|(n, g)| (n.as_str(), g))
    }

    /// The dataset called `name`, if any.
    pub fn get_dataset(&self, name: &str) -> Option<&Dataset> {
        self.datasets
            .iter()
            .find(|(n, _)| n == name)
            .map(|(_, d)| d)
    }

    /// The subgroup called `name`, if any.
    pub fn get_group(&self, name: &str) -> Option<&Group> {
        self.groups.iter().find(|(n, _)| n == name).map(|(_, g)| g)
    }
}

fn set_attr(attrs: &mut Vec<(String, AttrValue)>, name: &str, v: AttrValue) {
    match attrs.iter_mut().find(|(n, _)| n == name) {
        Some(slot) => slot.1 = v,
        None => attrs.push((name.to_owned(), v)),
    }
}

fn element_count(shape: &[usize]) -> Option<usize> {
    shape.iter().try_fold(1usize, |acc, &d| acc.checked_mul(d))
}

/// Error from [`write_atomic`]. Every variant names the destination path.
#[derive(Debug, thiserror::Error)]
#[non_exhaustive]
pub enum H5Error {
    /// The tree cannot be written (bad name, shape/data mismatch, name clash,
    /// NUL in a string). Nothing was written.
    #[error("cannot write HDF5 file {}: object {object}: {reason}", path.display())]
    InvalidTree {
        /// Destination file.
        path: PathBuf,
        /// HDF5 path of the offending object (e.g. `/results/rho` or `/results@units`).
        object: String,
        /// What is wrong with it.
        reason: String,
    },
    /// The destination path has no file name (e.g. it ends in `..` or is `/`).
    #[error("cannot write HDF5 file {}: path has no file name", path.display())]
    InvalidPath {
        /// Destination file.
        path: PathBuf,
    },
    /// An I/O operation failed. `path` itself was left untouched unless the
    /// failing operation is the final directory sync, which runs after the
    /// complete file was already renamed into place.
    #[error("cannot write HDF5 file {}: {op}: {source}", path.display())]
    Io {
        /// Destination file.
        path: PathBuf,
        /// The operation that failed (e.g. "creating temporary file").
        op: &'static str,
        /// Underlying I/O error.
        #[source]
        source: io::Error,
    },
    /// The HDF5 backend refused to encode the tree. Nothing was written to `path`.
    #[error("cannot write HDF5 file {}: HDF5 encoder: {source}", path.display())]
    Encode {
        /// Destination file.
        path: PathBuf,
        /// Backend error.
        #[source]
        source: Box<dyn std::error::Error + Send + Sync + 'static>,
    },
    /// Reading a file back ([`crate::h5in::read`]) failed: the file is missing or not HDF5, or
    /// an object holds something the tree cannot represent.
    #[error("cannot read HDF5 file {}: {object}: {reason}", path.display())]
    Read {
        /// The file read.
        path: PathBuf,
        /// HDF5 path of the offending object (`/` for the file itself).
        object: String,
        /// What is wrong.
        reason: String,
    },
}

/// Distinguishes temporary files of concurrent writes within one process.
static TMP_COUNTER: AtomicU64 = AtomicU64::new(0);

/// Writes `root` as an HDF5 file at `path`, atomically.
///
/// The file is encoded into a temporary file in the same directory (named
/// `.<file name>.tmp-<pid>-<n>`, created exclusively), which is fsynced and
/// then renamed over `path`; finally the directory is fsynced so the rename is
/// durable. Readers therefore see either the old file or the complete new one,
/// never a half-written `path`. On any error the temporary file is removed.
/// An existing `path` is replaced (its permissions are not carried over; if
/// it is a symlink, the link itself is replaced). If the process dies midway,
/// only the temporary file can be left behind, never a partial `path`.
///
/// # Errors
///
/// [`H5Error::InvalidTree`] if the tree is not writable (checked before any
/// file is created), [`H5Error::InvalidPath`] if `path` has no file name,
/// [`H5Error::Encode`] if the backend refuses the tree, and [`H5Error::Io`]
/// for file-system failures (e.g. the directory does not exist or `path` is a
/// directory).
pub fn write_atomic(root: &Group, path: &Path) -> Result<(), H5Error> {
    if let Err((object, reason)) = validate_group(root, "") {
        return Err(H5Error::InvalidTree {
            path: path.to_owned(),
            object,
            reason,
        });
    }
    let Some(file_name) = path.file_name() else {
        return Err(H5Error::InvalidPath {
            path: path.to_owned(),
        });
    };
    let dir = match path.parent() {
        Some(p) if !p.as_os_str().is_empty() => p,
        _ => Path::new("."),
    };
    let mut tmp_name = std::ffi::OsString::from(".");
    tmp_name.push(file_name);
    tmp_name.push(format!(
        ".tmp-{}-{}",
        std::process::id(),
        TMP_COUNTER.fetch_add(1, Ordering::Relaxed)
    ));
    let tmp = dir.join(tmp_name);

    let io_err = |op: &'static str| {
        move |source: io::Error| H5Error::Io {
            path: path.to_owned(),
            op,
            source,
        }
    };

    // `create_new` never follows or clobbers an existing entry at `tmp`.
    let file = OpenOptions::new()
        .write(true)
        .create_new(true)
        .open(&tmp)
        .map_err(io_err("creating temporary file"))?;

    let written = (|| {
        let mut file = file;
        backend::write(root, &mut file).map_err(|e| match e {
            backend::Failure::Io(source) => io_err("writing temporary file")(source),
            backend::Failure::Encode(source) => H5Error::Encode {
                path: path.to_owned(),
                source,
            },
        })?;
        file.sync_all().map_err(io_err("syncing temporary file"))?;
        drop(file);
        fs::rename(&tmp, path).map_err(io_err("renaming temporary file over destination"))
    })();
    if let Err(e) = written {
        // Best effort: the original error is what matters to the caller.
        let _ = fs::remove_file(&tmp);
        return Err(e);
    }
    sync_dir(dir).map_err(io_err("syncing directory after rename"))
}

#[cfg(unix)]
fn sync_dir(dir: &Path) -> io::Result<()> {
    fs::File::open(dir)?.sync_all()
}

#[cfg(not(unix))]
fn sync_dir(_dir: &Path) -> io::Result<()> {
    // Directories cannot be opened as files on this platform; the rename is
    // still atomic, only its durability across power loss is not forced.
    Ok(())
}

/// Checks what the HDF5 format (or h5py) would reject or silently mangle.
/// `at` is the HDF5 path of `g` without trailing slash (`""` for the root).
fn validate_group(g: &Group, at: &str) -> Result<(), (String, String)> {
    let here = if at.is_empty() { "/" } else { at };
    validate_attrs(&g.attrs, here)?;
    for (name, ds) in &g.datasets {
        let obj = format!("{at}/{name}");
        validate_name(name).map_err(|r| (obj.clone(), r))?;
        if g.groups.iter().any(|(n, _)| n == name) {
            return Err((obj, "a dataset and a group share this name".into()));
        }
        match element_count(&ds.shape) {
            Some(n) if n == ds.data.len() => {}
            _ => {
                return Err((
                    obj,
                    format!(
                        "shape {:?} does not match {} data element(s)",
                        ds.shape,
                        ds.data.len()
                    ),
                ))
            }
        }
        let nul = match &ds.data {
            Data::Str(s) => s.contains('\0'),
            Data::Strs(v) => v.iter().any(|s| s.contains('\0')),
            _ => false,
        };
        if nul {
            return Err((obj, "string data contains a NUL character".into()));
        }
        validate_attrs(&ds.attrs, &obj)?;
    }
    for (name, sub) in &g.groups {
        let obj = format!("{at}/{name}");
        validate_name(name).map_err(|r| (obj.clone(), r))?;
        validate_group(sub, &obj)?;
    }
    Ok(())
}

fn validate_attrs(attrs: &[(String, AttrValue)], owner: &str) -> Result<(), (String, String)> {
    for (name, v) in attrs {
        let obj = format!("{owner}@{name}");
        if name.is_empty() || name.contains('\0') {
            return Err((obj, "attribute name is empty or contains NUL".into()));
        }
        let has_nul = match v {
            AttrValue::Str(s) => s.contains('\0'),
            AttrValue::Strs(v) => v.iter().any(|s| s.contains('\0')),
            _ => false,
        };
        if has_nul {
            return Err((obj, "string value contains a NUL character".into()));
        }
    }
    Ok(())
}

fn validate_name(name: &str) -> Result<(), String> {
    if name.is_empty() || name == "." || name.contains('/') || name.contains('\0') {
        Err(format!(
            "invalid link name {name:?} (must be non-empty, not \".\", without '/' or NUL)"
        ))
    } else {
        Ok(())
    }
}

/// The only place that knows about the HDF5 crate.
mod backend {
    use super::{AttrValue, Data, Dataset, Group};
    use hdf5_pure as hp;
    use std::io::Write;

    pub(super) enum Failure {
        Io(std::io::Error),
        Encode(Box<dyn std::error::Error + Send + Sync + 'static>),
    }

    /// Encodes `root` and streams it to `out` (which is then flushed).
    pub(super) fn write<W: Write>(root: &Group, out: W) -> Result<(), Failure> {
        let mut fb = hp::FileBuilder::new();
        for (name, v) in &root.attrs {
            fb.set_attr(name, attr_value(v));
        }
        for (name, ds) in &root.datasets {
            fill_dataset(fb.create_dataset(name), ds);
        }
        for (name, g) in &root.groups {
            let finished = build_group(fb.create_group(name), g);
            fb.add_group(finished);
        }
        fb.finish_to(out).map_err(|e| match e {
            hp::Error::Io(io) => Failure::Io(io),
            other => Failure::Encode(Box::new(other)),
        })
    }

    fn build_group(mut gb: hp::GroupBuilder, g: &Group) -> hp::FinishedGroup {
        for (name, v) in &g.attrs {
            gb.set_attr(name, attr_value(v));
        }
        for (name, ds) in &g.datasets {
            fill_dataset(gb.create_dataset(name), ds);
        }
        for (name, sub) in &g.groups {
            let finished = build_group(gb.create_group(name), sub);
            gb.add_group(finished);
        }
        gb.finish()
    }

    fn fill_dataset(b: &mut hp::DatasetBuilder, ds: &Dataset) {
        let shape: Vec<u64> = ds.shape.iter().map(|&d| d as u64).collect();
        match &ds.data {
            Data::F64(v) => b.with_f64_data(v),
            Data::I64(v) => b.with_i64_data(v),
            Data::Str(s) => b.with_vlen_strings(&[s.as_str()]),
            Data::Strs(v) => {
                let refs: Vec<&str> = v.iter().map(String::as_str).collect();
                b.with_vlen_strings(&refs)
            }
        };
        b.with_shape(&shape);
        for (name, v) in &ds.attrs {
            b.set_attr(name, attr_value(v));
        }
    }

    fn attr_value(v: &AttrValue) -> hp::AttrValue {
        match v {
            AttrValue::Str(s) => hp::AttrValue::VarLenString(s.clone()),
            AttrValue::F64(x) => hp::AttrValue::F64(*x),
            AttrValue::I64(x) => hp::AttrValue::I64(*x),
            AttrValue::F64s(x) => hp::AttrValue::F64Array(x.clone()),
            AttrValue::I64s(x) => hp::AttrValue::I64Array(x.clone()),
            AttrValue::Strs(x) => hp::AttrValue::VarLenStringArray(x.clone()),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use sha2::{Digest, Sha256};
    use std::process::Command;

    fn hex(bytes: &[u8]) -> String {
        bytes.iter().map(|b| format!("{b:02x}")).collect()
    }

    /// A Python expression for `s` that survives any content (hex-encoded UTF-8).
    fn py_str(s: &str) -> String {
        format!("s('{}')", hex(s.as_bytes()))
    }

    fn py_list<T>(items: impl IntoIterator<Item = T>, f: impl Fn(T) -> String) -> String {
        let parts: Vec<String> = items.into_iter().map(f).collect();
        format!("[{}]", parts.join(", "))
    }

    fn py_attrs(attrs: &[(String, AttrValue)]) -> String {
        let parts: Vec<String> = attrs
            .iter()
            .map(|(name, v)| {
                let v = match v {
                    AttrValue::Str(s) => format!("('str', {})", py_str(s)),
                    AttrValue::F64(x) => format!("('f64', {})", x.to_bits()),
                    AttrValue::I64(x) => format!("('i64', {x})"),
                    AttrValue::F64s(v) => {
                        format!("('f64s', {})", py_list(v, |x| x.to_bits().to_string()))
                    }
                    AttrValue::I64s(v) => format!("('i64s', {})", py_list(v, |x| x.to_string())),
                    AttrValue::Strs(v) => format!("('strs', {})", py_list(v, |s| py_str(s))),
                };
                format!("{}: {v}", py_str(name))
            })
            .collect();
        format!("{{{}}}", parts.join(", "))
    }

    /// The whole tree as a Python literal; floats as bit patterns so the
    /// comparison is exact (NaN, -0.0 and subnormals included), the long string
    /// as its byte length and SHA-256 computed here, independently of Python.
    fn py_group(g: &Group) -> String {
        let datasets: Vec<String> = g
            .datasets()
            .map(|(name, ds)| {
                let data = match &ds.data {
                    Data::F64(v) => format!("('f64', {})", py_list(v, |x| x.to_bits().to_string())),
                    Data::I64(v) => format!("('i64', {})", py_list(v, |x| x.to_string())),
                    Data::Str(s) => format!(
                        "('str', {}, '{}')",
                        s.len(),
                        hex(&Sha256::digest(s.as_bytes()))
                    ),
                    Data::Strs(v) => format!("('strs', {})", py_list(v, |s| py_str(s))),
                };
                let shape: String = ds.shape.iter().map(|d| format!("{d},")).collect();
                format!(
                    "{}: {{'shape': ({shape}), 'data': {data}, 'attrs': {}}}",
                    py_str(name),
                    py_attrs(&ds.attrs)
                )
            })
            .collect();
        let groups: Vec<String> = g
            .groups()
            .map(|(name, sub)| format!("{}: {}", py_str(name), py_group(sub)))
            .collect();
        format!(
            "{{'attrs': {}, 'datasets': {{{}}}, 'groups': {{{}}}}}",
            py_attrs(g.attrs()),
            datasets.join(", "),
            groups.join(", ")
        )
    }

    /// Walks the file with h5py and compares every object, attribute and value
    /// (and that there is nothing else) with EXPECTED; then runs EXTRA.
    const CHECKER: &str = r#"
import sys, hashlib
try:
    import h5py
    import numpy as np
except ImportError as e:
    sys.stderr.write(f"cannot import h5py/numpy ({e}); run `pip install h5py numpy`\n")
    sys.exit(3)

def s(h):
    return bytes.fromhex(h).decode("utf-8")

def bits(a):
    return np.ascontiguousarray(a, dtype="<f8").view("<u8").ravel().tolist()

def join(path, name):
    return path.rstrip("/") + "/" + name

def check_attrs(path, obj, exp):
    got_names = sorted(obj.attrs.keys())
    assert got_names == sorted(exp), f"{path}: attributes {got_names} != {sorted(exp)}"
    for name, (kind, val) in exp.items():
        where = f"{path}@{name}"
        got = obj.attrs[name]
        if kind == "str":
            assert isinstance(got, str), f"{where}: expected str, got {type(got)} {got!r}"
            assert got == val, f"{where}: {got!r} != {val!r}"
        elif kind == "f64":
            assert isinstance(got, np.float64), f"{where}: expected float64, got {type(got)}"
            assert bits(got) == [val], f"{where}: {got!r} has wrong bits"
        elif kind == "i64":
            assert isinstance(got, np.int64), f"{where}: expected int64, got {type(got)}"
            assert int(got) == val, f"{where}: {got} != {val}"
        elif kind == "f64s":
            assert isinstance(got, np.ndarray) and got.dtype == np.float64, f"{where}: {got!r}"
            assert got.shape == (len(val),), f"{where}: shape {got.shape}"
            assert bits(got) == val, f"{where}: {got!r} has wrong bits"
        elif kind == "i64s":
            assert isinstance(got, np.ndarray) and got.dtype == np.int64, f"{where}: {got!r}"
            assert got.tolist() == val, f"{where}: {got!r} != {val}"
        elif kind == "strs":
            assert isinstance(got, np.ndarray) and got.shape == (len(val),), f"{where}: {got!r}"
            items = got.tolist()
            assert all(isinstance(x, str) for x in items), f"{where}: not all str: {items!r}"
            assert items == val, f"{where}: {items!r} != {val!r}"
        else:
            raise AssertionError(f"{where}: unknown kind {kind}")

def check_dataset(path, ds, exp):
    assert isinstance(ds, h5py.Dataset), f"{path}: not a dataset"
    assert ds.shape == exp["shape"], f"{path}: shape {ds.shape} != {exp['shape']}"
    kind = exp["data"][0]
    if kind == "f64":
        assert ds.dtype == np.dtype("<f8"), f"{path}: dtype {ds.dtype}"
        assert bits(ds[()]) == exp["data"][1], f"{path}: values differ: {ds[()]!r}"
    elif kind == "i64":
        assert ds.dtype == np.dtype("<i8"), f"{path}: dtype {ds.dtype}"
        got = np.asarray(ds[()]).ravel().tolist()
        assert got == exp["data"][1], f"{path}: {got} != {exp['data'][1]}"
    elif kind == "str":
        info = h5py.check_string_dtype(ds.dtype)
        assert info is not None and info.encoding == "utf-8" and info.length is None, \
            f"{path}: not a variable-length UTF-8 string: {ds.dtype} {info}"
        v = ds.asstr()[()]
        if isinstance(v, np.ndarray):
            assert v.size == 1, f"{path}: {v.size} strings"
            v = v.ravel()[0]
        assert isinstance(v, str), f"{path}: {type(v)}"
        raw = v.encode("utf-8")
        n, digest = exp["data"][1], exp["data"][2]
        assert len(raw) == n, f"{path}: {len(raw)} bytes != {n}"
        assert hashlib.sha256(raw).hexdigest() == digest, f"{path}: SHA-256 differs"
    check_attrs(path, ds, exp["attrs"])

def check_group(path, g, exp):
    assert isinstance(g, h5py.Group), f"{path}: not a group"
    check_attrs(path, g, exp["attrs"])
    want = sorted(list(exp["datasets"]) + list(exp["groups"]))
    assert sorted(g.keys()) == want, f"{path}: members {sorted(g.keys())} != {want}"
    for name, e in exp["datasets"].items():
        check_dataset(join(path, name), g[name], e)
    for name, e in exp["groups"].items():
        check_group(join(path, name), g[name], e)

EXPECTED = @EXPECTED@

f = h5py.File(sys.argv[1], "r")
check_group("/", f, EXPECTED)
@EXTRA@
f.close()
print("H5PY-CHECK-OK h5py", h5py.__version__)
"#;

    /// Reads `path` with h5py and checks it holds exactly `root`; `extra` is
    /// Python run afterwards with the open file as `f`.
    fn h5py_check(path: &Path, root: &Group, extra: &str) {
        let script = CHECKER
            .replace("@EXPECTED@", &py_group(root))
            .replace("@EXTRA@", extra);
        let out = match Command::new("python3")
            .arg("-c")
            .arg(&script)
            .arg(path)
            .output()
        {
            Ok(out) => out,
            Err(e) => panic!(
                "cannot run python3 ({e}): the h5out tests read the files back with h5py; \
                 install Python 3 and run `pip install h5py numpy`"
            ),
        };
        let stdout = String::from_utf8_lossy(&out.stdout);
        let stderr = String::from_utf8_lossy(&out.stderr);
        if out.status.code() == Some(3) {
            panic!("h5py/numpy not available to python3: run `pip install h5py numpy`\n{stderr}");
        }
        assert!(
            out.status.success() && stdout.contains("H5PY-CHECK-OK"),
            "h5py check of {} failed ({})\nstdout:\n{stdout}\nstderr:\n{stderr}",
            path.display(),
            out.status
        );
    }

    /// A TOML-like text of more than 70 KB with newlines and non-ASCII.
    fn long_input_text() -> String {
        let mut s = String::from("# cavern input — κ/2π in MHz, Δ/2π detuning\n\n");
        let mut i = 0;
        while s.len() < 72_000 {
            s.push_str(&format!(
                "[[site]]\nindex = {i}\nkappa = 0.{i}  # κ/2π = 0.{i} MHz ✓\n\
                 label = \"spin-{i} «ünïcödé» 量子\"\n\tnote = 'tab\\tand \"quotes\"'\n\n"
            ));
            i += 1;
        }
        s.push_str("end = true"); // no trailing newline
        s
    }

    fn rho_values() -> Vec<f64> {
        vec![
            0.1,
            -0.0,
            0.0,
            f64::MAX,
            f64::MIN_POSITIVE,
            5e-324, // smallest subnormal
            f64::INFINITY,
            f64::NEG_INFINITY,
            f64::NAN,
            std::f64::consts::PI,
            -1.0 / 3.0,
            1e300,
        ]
    }

    fn full_tree(text: &str) -> Group {
        let mut root = Group::new();
        root.attr("title", "cavern test κ/2π")
            .attr("format_version", 3)
            .attr("g", 0.1)
            .attr("freqs", vec![1.0, -2.5, 1e-300])
            .attr("dims", vec![2_i64, 3, i64::MAX])
            .attr(
                "labels",
                vec!["a".to_string(), "βγ".to_string(), String::new()],
            )
            .attr("empty_str", "");
        root.dataset("input_toml", &[], Data::Str(text.to_owned()))
            .attr("content_type", "application/toml");
        let params = root.group("params");
        params.attr("n_sites", 2_i64);
        let mode = params.group("cavity").group("mode0");
        mode.attr("omega_over_2pi", 5.123_456_789e9)
            .attr("units", "Hz");
        mode.dataset("couplings", &[2], Data::F64(vec![0.25, -0.5]));
        let results = root.group("results");
        results.attr("kind", "steady_state");
        results
            .dataset("rho", &[3, 4], Data::F64(rho_values()))
            .attr("units", "1/μs")
            .attr("scale", vec![0.5, 2.0])
            .attr("n", -7_i64)
            .attr("tol", 1e-12);
        results.dataset(
            "steps",
            &[6],
            Data::I64(vec![i64::MIN, -1, 0, 1, 42, i64::MAX]),
        );
        results.dataset(
            "cube",
            &[2, 1, 3],
            Data::F64((0..6).map(|i| f64::from(i) * 1.5).collect()),
        );
        results.dataset("energy", &[], Data::F64(vec![-1.25]));
        results.dataset("nothing", &[0, 3], Data::F64(vec![]));
        root.group("empty");
        root
    }

    #[test]
    fn h5py_reads_back_full_tree() {
        let dir = tempfile::tempdir().expect("create temp dir");
        let path = dir.path().join("run.h5");
        let text = long_input_text();
        assert!(text.len() > 70_000 && text.contains('\n') && text.contains("κ/2π"));
        let root = full_tree(&text);
        write_atomic(&root, &path).expect("write_atomic");

        // Hand-written spot checks on top of the generic tree comparison.
        let extra = format!(
            r#"
assert f["results/rho"].shape == (3, 4)
assert f["results/rho"].attrs["units"] == "1/μs"
assert f["results/rho"][0, 0] == 0.1 and np.isnan(f["results/rho"][2, 0])
assert f["results/steps"][()].tolist() == [-2**63, -1, 0, 1, 42, 2**63 - 1]
assert f["params/cavity/mode0"].attrs["units"] == "Hz"
assert f.attrs["format_version"] == 3 and f.attrs["title"] == "cavern test κ/2π"
assert list(f.attrs["labels"]) == ["a", "βγ", ""]
text = f["input_toml"].asstr()[()]
assert hashlib.sha256(text.encode()).hexdigest() == "{}"
assert len(f["empty"]) == 0 and len(f["empty"].attrs) == 0
"#,
            hex(&Sha256::digest(text.as_bytes()))
        );
        h5py_check(&path, &root, &extra);
        assert_no_temp_files(dir.path());
    }

    fn assert_no_temp_files(dir: &Path) {
        let leftovers: Vec<_> = fs::read_dir(dir)
            .expect("read temp dir")
            .filter_map(|e| e.ok())
            .map(|e| e.file_name().to_string_lossy().into_owned())
            .filter(|n| n.contains(".tmp-"))
            .collect();
        assert!(leftovers.is_empty(), "temporary files left: {leftovers:?}");
    }

    #[test]
    fn write_over_existing_file_replaces_it() {
        let dir = tempfile::tempdir().expect("create temp dir");
        let path = dir.path().join("out.h5");
        fs::write(&path, b"not an HDF5 file").expect("write placeholder");

        let mut first = Group::new();
        first.attr("which", "first");
        first.dataset("a", &[2], Data::I64(vec![1, 2]));
        first.group("old_group").attr("x", 1.0);
        write_atomic(&first, &path).expect("first write");
        h5py_check(&path, &first, "");

        let mut second = Group::new();
        second.attr("which", "second");
        second.dataset("b", &[1, 2], Data::F64(vec![3.0, 4.0]));
        write_atomic(&second, &path).expect("second write");
        // The checker also asserts that nothing of `first` is left.
        h5py_check(&path, &second, "");
        assert_no_temp_files(dir.path());
    }

    #[test]
    fn write_into_missing_directory_fails_and_leaves_nothing() {
        let dir = tempfile::tempdir().expect("create temp dir");
        let missing = dir.path().join("no-such-dir");
        let path = missing.join("out.h5");
        let mut root = Group::new();
        root.dataset("x", &[1], Data::F64(vec![1.0]));
        let err = write_atomic(&root, &path).expect_err("must fail");
        assert!(matches!(err, H5Error::Io { .. }), "{err:?}");
        assert!(err.to_string().contains(&*path.to_string_lossy()), "{err}");
        assert!(!missing.exists() && !path.exists());
        assert_eq!(fs::read_dir(dir.path()).expect("read dir").count(), 0);
    }

    #[test]
    fn failed_rename_removes_temp_file_and_keeps_target() {
        // `path` is a non-empty directory: the temporary file is written and
        // synced, then the rename fails.
        let dir = tempfile::tempdir().expect("create temp dir");
        let path = dir.path().join("out.h5");
        fs::create_dir(&path).expect("create dir");
        fs::write(path.join("keep"), b"keep").expect("write file");
        let mut root = Group::new();
        root.dataset("x", &[1], Data::F64(vec![1.0]));
        let err = write_atomic(&root, &path).expect_err("must fail");
        match &err {
            H5Error::Io { op, path: p, .. } => {
                assert!(op.contains("renaming"), "{err}");
                assert_eq!(p, &path);
            }
            other => panic!("unexpected error {other:?}"),
        }
        assert_eq!(fs::read(path.join("keep")).expect("read"), b"keep");
        assert_no_temp_files(dir.path());
        assert_eq!(fs::read_dir(dir.path()).expect("read dir").count(), 1);
    }

    #[test]
    fn invalid_trees_are_rejected_before_touching_disk() {
        let dir = tempfile::tempdir().expect("create temp dir");
        let path = dir.path().join("out.h5");
        let original = b"previous results".to_vec();
        fs::write(&path, &original).expect("write placeholder");

        let mut cases: Vec<(Group, &str)> = Vec::new();
        let mut g = Group::new();
        g.group("a/b");
        cases.push((g, "/a/b"));
        let mut g = Group::new();
        g.group("results").dataset("", &[], Data::I64(vec![1]));
        cases.push((g, "/results/"));
        let mut g = Group::new();
        g.dataset("x", &[1], Data::I64(vec![1]));
        g.group("x");
        cases.push((g, "/x"));
        let mut g = Group::new();
        g.group("p").attr("s", "nul\0inside");
        cases.push((g, "/p@s"));
        let mut g = Group::new();
        g.dataset("t", &[], Data::Str("a\0b".into()));
        cases.push((g, "/t"));
        let mut g = Group::new();
        g.dataset("m", &[2, 2], Data::F64(vec![0.0; 4])).shape = vec![3];
        cases.push((g, "/m"));

        for (tree, where_) in cases {
            match write_atomic(&tree, &path) {
                Err(H5Error::InvalidTree {
                    object, path: p, ..
                }) => {
                    assert_eq!(object, where_);
                    assert_eq!(p, path);
                }
                other => panic!("{where_}: expected InvalidTree, got {other:?}"),
            }
        }
        assert_eq!(fs::read(&path).expect("read"), original);
        assert_eq!(fs::read_dir(dir.path()).expect("read dir").count(), 1);
    }

    #[test]
    #[should_panic(expected = "holds 12 element(s) but data has 11")]
    fn dataset_panics_on_shape_mismatch() {
        Group::new().dataset("rho", &[3, 4], Data::F64(vec![0.0; 11]));
    }

    #[test]
    fn builder_keeps_order_and_replaces_by_name() {
        let mut g = Group::new();
        g.attr("b", 1).attr("a", "x").attr("b", 2.5);
        assert_eq!(
            g.attrs(),
            &[
                ("b".to_string(), AttrValue::F64(2.5)),
                ("a".to_string(), AttrValue::Str("x".into()))
            ]
        );
        g.group("z").attr("k", 1_i64);
        g.group("y");
        g.group("z").attr("l", 2_i64);
        let names: Vec<_> = g.groups().map(|(n, _)| n).collect();
        assert_eq!(names, ["z", "y"]);
        assert_eq!(g.get_group("z").map(|z| z.attrs().len()), Some(2));
        g.dataset("d", &[1], Data::I64(vec![1])).attr("u", "s");
        g.dataset("e", &[], "text".into());
        g.dataset("d", &[2], Data::F64(vec![1.0, 2.0]));
        let names: Vec<_> = g.datasets().map(|(n, _)| n).collect();
        assert_eq!(names, ["d", "e"]);
        let d = g.get_dataset("d").expect("dataset d");
        assert_eq!(d.data, Data::F64(vec![1.0, 2.0]));
        assert!(
            d.attrs.is_empty(),
            "replaced dataset starts without attributes"
        );
        assert_eq!(AttrValue::from(3_u32), AttrValue::I64(3));
        assert_eq!(
            AttrValue::from(&["p", "q"][..]),
            AttrValue::Strs(vec!["p".into(), "q".into()])
        );
        assert_eq!(AttrValue::from(&[1.0][..]), AttrValue::F64s(vec![1.0]));
    }
}
