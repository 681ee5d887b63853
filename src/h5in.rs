//! Reading HDF5 result files back into the in-memory tree of [`crate::h5out`].
//!
//! [`read`] is the inverse of [`crate::h5out::write_atomic`] for every tree that module can write:
//! `float64` / `int64` datasets of any shape, scalar UTF-8 string datasets, and scalar or 1-D
//! attributes of floats, integers and strings. It also reads other simple files (written by h5py,
//! say) by widening: any floating-point dataset or attribute becomes `f64`, any integer one `i64`
//! (an unsigned value above `i64::MAX` is an error), fixed- and variable-length strings become
//! strings. A string dataset of several elements, which `h5out` cannot write, is read as one
//! string with the elements joined by newlines (shape `[]`). Compound, enum, reference and other
//! datatypes are refused with an error naming the object.
//!
//! Order: datasets and subgroups come in the order the file lists them; attributes are sorted by
//! name (the backend does not report their creation order).
//!
//! ```no_run
//! let root = cavern::h5in::read(std::path::Path::new("run.h5"))?;
//! let flux = root.get_group("observables").and_then(|g| g.get_dataset("output_flux"));
//! # Ok::<(), cavern::h5out::H5Error>(())
//! ```

use crate::h5out::{AttrValue, Data, Group, H5Error};
use hdf5_pure as hp;
use std::path::Path;

/// Read the whole file at `path` into a [`Group`] tree.
///
/// # Errors
/// [`H5Error::Read`] naming the file and the object (e.g. `/observables/photon_number@units`)
/// when the file cannot be opened or parsed, or holds a datatype the tree cannot represent.
pub fn read(path: &Path) -> Result<Group, H5Error> {
    let fail = |object: &str, e: &dyn std::fmt::Display| H5Error::Read {
        path: path.to_owned(),
        object: object.to_owned(),
        reason: e.to_string(),
    };
    if !path.is_file() {
        return Err(fail("/", &"no such file"));
    }
    let file = hp::File::open(path).map_err(|e| fail("/", &e))?;
    let mut root = Group::new();
    read_group(&file.root(), "", &mut root).map_err(|(object, reason)| H5Error::Read {
        path: path.to_owned(),
        object,
        reason,
    })?;
    Ok(root)
}

/// (HDF5 path of the object, what went wrong)
type Failure = (String, String);

fn here(at: &str) -> String {
    if at.is_empty() {
        "/".into()
    } else {
        at.to_owned()
    }
}

fn read_group(g: &hp::Group, at: &str, out: &mut Group) -> Result<(), Failure> {
    let err = |e: hp::Error| (here(at), e.to_string());
    let mut attrs: Vec<(String, hp::AttrValue)> = g.attrs().map_err(err)?.into_iter().collect();
    attrs.sort_by(|a, b| a.0.cmp(&b.0));
    for (name, v) in attrs {
        let obj = format!("{}@{name}", here(at));
        out.attr(&name, convert_attr(&v).map_err(|r| (obj, r))?);
    }
    for name in g.datasets().map_err(err)? {
        let obj = format!("{at}/{name}");
        let ds = g.dataset(&name).map_err(|e| (obj.clone(), e.to_string()))?;
        read_dataset(&ds, &obj, &name, out)?;
    }
    for name in g.groups().map_err(err)? {
        let obj = format!("{at}/{name}");
        let sub = g.group(&name).map_err(|e| (obj.clone(), e.to_string()))?;
        read_group(&sub, &obj, out.group(&name))?;
    }
    Ok(())
}

fn read_dataset(ds: &hp::Dataset, obj: &str, name: &str, out: &mut Group) -> Result<(), Failure> {
    let err = |e: hp::Error| (obj.to_owned(), e.to_string());
    let shape: Vec<usize> = ds
        .shape()
        .map_err(err)?
        .iter()
        .map(|&d| usize::try_from(d).map_err(|_| (obj.to_owned(), format!("extent {d} too large"))))
        .collect::<Result<_, _>>()?;
    let dtype = ds.dtype().map_err(err)?;
    let (shape, data) = match dtype {
        hp::DType::F32 | hp::DType::F64 => (shape, Data::F64(ds.read_f64().map_err(err)?)),
        hp::DType::I8 | hp::DType::I16 | hp::DType::I32 | hp::DType::I64 => {
            (shape, Data::I64(ds.read_i64().map_err(err)?))
        }
        hp::DType::U8 | hp::DType::U16 | hp::DType::U32 | hp::DType::U64 => {
            let v = ds.read_u64().map_err(err)?;
            let v = v
                .into_iter()
                .map(|x| {
                    i64::try_from(x)
                        .map_err(|_| (obj.to_owned(), format!("unsigned value {x} exceeds i64")))
                })
                .collect::<Result<Vec<i64>, _>>()?;
            (shape, Data::I64(v))
        }
        hp::DType::String | hp::DType::VariableLengthString => {
            let v = ds.read_string().map_err(err)?;
            if v.len() == 1 {
                (shape, Data::Str(v.into_iter().next().unwrap_or_default()))
            } else {
                (Vec::new(), Data::Str(v.join("\n")))
            }
        }
        other => {
            return Err((
                obj.to_owned(),
                format!("datatype {other} is not supported (only floats, integers and strings)"),
            ))
        }
    };
    let expected: usize = shape.iter().product();
    if expected != data.len() {
        return Err((
            obj.to_owned(),
            format!(
                "shape {shape:?} does not match {} element(s) read",
                data.len()
            ),
        ));
    }
    let mut attrs: Vec<(String, hp::AttrValue)> = ds.attrs().map_err(err)?.into_iter().collect();
    attrs.sort_by(|a, b| a.0.cmp(&b.0));
    let mut converted = Vec::with_capacity(attrs.len());
    for (a, v) in attrs {
        let v = convert_attr(&v).map_err(|r| (format!("{obj}@{a}"), r))?;
        converted.push((a, v));
    }
    let d = out.dataset(name, &shape, data);
    for (a, v) in converted {
        d.attr(&a, v);
    }
    Ok(())
}

fn widen_u64(x: u64) -> Result<i64, String> {
    i64::try_from(x).map_err(|_| format!("unsigned value {x} exceeds i64"))
}

fn convert_attr(v: &hp::AttrValue) -> Result<AttrValue, String> {
    use hp::AttrValue as A;
    let ints = |v: Vec<i64>| AttrValue::I64s(v);
    Ok(match v {
        A::F32(x) => AttrValue::F64(f64::from(*x)),
        A::F64(x) => AttrValue::F64(*x),
        A::F32Array(x) => AttrValue::F64s(x.iter().map(|&y| f64::from(y)).collect()),
        A::F64Array(x) => AttrValue::F64s(x.clone()),
        A::I8(x) => AttrValue::I64(i64::from(*x)),
        A::I16(x) => AttrValue::I64(i64::from(*x)),
        A::I32(x) => AttrValue::I64(i64::from(*x)),
        A::I64(x) => AttrValue::I64(*x),
        A::U8(x) => AttrValue::I64(i64::from(*x)),
        A::U16(x) => AttrValue::I64(i64::from(*x)),
        A::U32(x) => AttrValue::I64(i64::from(*x)),
        A::U64(x) => AttrValue::I64(widen_u64(*x)?),
        A::I8Array(x) => ints(x.iter().map(|&y| i64::from(y)).collect()),
        A::I16Array(x) => ints(x.iter().map(|&y| i64::from(y)).collect()),
        A::I32Array(x) => ints(x.iter().map(|&y| i64::from(y)).collect()),
        A::I64Array(x) => ints(x.clone()),
        A::U8Array(x) => ints(x.iter().map(|&y| i64::from(y)).collect()),
        A::U16Array(x) => ints(x.iter().map(|&y| i64::from(y)).collect()),
        A::U32Array(x) => ints(x.iter().map(|&y| i64::from(y)).collect()),
        A::U64Array(x) => ints(x.iter().map(|&y| widen_u64(y)).collect::<Result<_, _>>()?),
        A::String(s) | A::AsciiString(s) | A::VarLenString(s) | A::VarLenAsciiString(s) => {
            AttrValue::Str(s.clone())
        }
        A::StringSized { value, .. } | A::AsciiStringSized { value, .. } => {
            AttrValue::Str(value.clone())
        }
        A::StringArray(s)
        | A::AsciiStringArray(s)
        | A::VarLenStringArray(s)
        | A::VarLenAsciiStringArray(s)
        | A::VarLenAsciiCharArray(s) => AttrValue::Strs(s.clone()),
        A::StringArraySized { values, .. } | A::AsciiStringArraySized { values, .. } => {
            AttrValue::Strs(values.clone())
        }
        other => return Err(format!("attribute type not supported: {other:?}")),
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::h5out::{write_atomic, Dataset};

    /// The same tree with attributes sorted by name (what [`read`] returns) — datasets and groups
    /// keep their order, so a reordering by the backend would still fail the comparison.
    fn attrs_sorted(g: &Group) -> Group {
        let mut out = Group::new();
        let mut attrs = g.attrs().to_vec();
        attrs.sort_by(|a, b| a.0.cmp(&b.0));
        for (n, v) in attrs {
            out.attr(&n, v);
        }
        for (n, d) in g.datasets() {
            let mut attrs = d.attrs.clone();
            attrs.sort_by(|a, b| a.0.cmp(&b.0));
            let nd: &mut Dataset = out.dataset(n, &d.shape, d.data.clone());
            nd.attrs = attrs;
        }
        for (n, s) in g.groups() {
            *out.group(n) = attrs_sorted(s);
        }
        out
    }

    /// NaN ≠ NaN under `PartialEq`; compare floats by bits instead (so -0.0 and 0.0 differ too).
    fn bitwise(g: &Group) -> String {
        format!("{g:?}")
    }

    fn sample_tree() -> Group {
        let mut root = Group::new();
        root.attr("tool", "cavern")
            .attr("config_sha256", "ab12")
            .attr("n_warnings", 0_i64)
            .attr("g", -0.25)
            .attr("freqs", vec![1.0, -2.5, 1e-300])
            .attr("one_float", vec![7.5])
            .attr("dims", vec![2_i64, 3, i64::MAX])
            .attr("labels", vec!["a".to_string(), "βγ ⟨n⟩".to_string()]);
        root.dataset("time", &[4], Data::F64(vec![0.0, 0.5, 1.0, 1.5]))
            .attr("units", "us");
        let obs = root.group("observables");
        obs.dataset(
            "photon_number",
            &[2, 4],
            Data::F64(vec![0.0, 0.1, 0.2, 0.3, 1.0, f64::INFINITY, -0.0, 5e-324]),
        )
        .attr("units", "photons")
        .attr("rows", vec!["readout".to_string(), "probe".to_string()]);
        obs.dataset("purity", &[4], Data::F64(vec![1.0, 0.9, 0.8, 0.7]));
        let scan = root.group("scan");
        scan.attr("axes", vec!["loss".to_string(), "drive".to_string()]);
        scan.dataset("status", &[2, 3], Data::I64(vec![0, 0, 1, 0, i64::MIN, -1]));
        scan.group("axes")
            .dataset("loss", &[2], Data::F64(vec![0.5, 1.0]))
            .attr("units", "MHz")
            .attr("path", "modes[0].loss");
        root.dataset("scalar", &[], Data::F64(vec![-1.25]));
        root.dataset("nothing", &[0, 3], Data::F64(vec![]));
        root.group("input").dataset(
            "config_toml",
            &[],
            Data::Str("title = \"κ/2π\"\n[units]\n".into()),
        );
        root.group("empty");
        root
    }

    #[test]
    fn round_trip_equals_written_tree() {
        let dir = tempfile::tempdir().expect("temp dir");
        let path = dir.path().join("rt.h5");
        let tree = sample_tree();
        write_atomic(&tree, &path).expect("write");
        let back = read(&path).expect("read back");
        assert_eq!(bitwise(&back), bitwise(&attrs_sorted(&tree)));
    }

    #[test]
    fn reads_a_file_written_by_h5py_with_other_types() {
        let dir = tempfile::tempdir().expect("temp dir");
        let path = dir.path().join("py.h5");
        let script = r#"
import sys, h5py, numpy as np
with h5py.File(sys.argv[1], "w") as f:
    f.create_dataset("f32", data=np.array([1.5, -2.25], dtype=np.float32))
    f.create_dataset("i32", data=np.array([[1, -2], [3, 4]], dtype=np.int32))
    f.create_dataset("u8", data=np.array([0, 255], dtype=np.uint8))
    f.create_dataset("errors", data=np.array(["", "diverged"], dtype=h5py.string_dtype()))
    f.attrs["fixed"] = np.bytes_("ascii text")
    f.attrs["n"] = np.int16(-7)
    f.attrs["ratios"] = np.array([0.5, 0.25], dtype=np.float32)
    g = f.create_group("g")
    g.attrs["names"] = np.array(["a", "b"], dtype=h5py.string_dtype())
"#;
        let out = std::process::Command::new("python3")
            .args(["-c", script])
            .arg(&path)
            .output()
            .expect("python3 with h5py and numpy (pip install h5py numpy)");
        assert!(
            out.status.success(),
            "{}",
            String::from_utf8_lossy(&out.stderr)
        );
        let root = read(&path).expect("read");
        let ds = |n: &str| root.get_dataset(n).unwrap_or_else(|| panic!("{n}"));
        assert_eq!(ds("f32").data, Data::F64(vec![1.5, -2.25]));
        assert_eq!(
            (ds("i32").shape.clone(), ds("i32").data.clone()),
            (vec![2, 2], Data::I64(vec![1, -2, 3, 4]))
        );
        assert_eq!(ds("u8").data, Data::I64(vec![0, 255]));
        assert_eq!(ds("errors").data, Data::Str("\ndiverged".into()));
        let attr = |n: &str| {
            root.attrs()
                .iter()
                .find(|(k, _)| k == n)
                .map(|(_, v)| v.clone())
        };
        assert_eq!(attr("fixed"), Some(AttrValue::Str("ascii text".into())));
        assert_eq!(attr("n"), Some(AttrValue::I64(-7)));
        assert_eq!(attr("ratios"), Some(AttrValue::F64s(vec![0.5, 0.25])));
        let g = root.get_group("g").expect("group g");
        assert_eq!(
            g.attrs()[0].1,
            AttrValue::Strs(vec!["a".into(), "b".into()])
        );
    }

    #[test]
    fn missing_and_garbage_files_are_errors_naming_the_path() {
        let dir = tempfile::tempdir().expect("temp dir");
        let missing = dir.path().join("nope.h5");
        let e = read(&missing).expect_err("missing file");
        assert!(e.to_string().contains("nope.h5"), "{e}");
        let junk = dir.path().join("junk.h5");
        std::fs::write(&junk, b"this is not HDF5").expect("write junk");
        let e = read(&junk).expect_err("junk file");
        assert!(e.to_string().contains("junk.h5"), "{e}");
    }
}
