//! `cavern plot` and the figures of `cavern compare`: the demo's figures, a trajectory result
//! with error bands, scans (contract C3) and the coupling matrix (contract C2) are rendered, and
//! every file is checked to be a valid PNG (signature and IHDR size) or SVG of sensible size.

use crate::compare::synthetic_run;
use crate::util::{repo, Sandbox};
use cavern::h5out::{write_atomic, Data, Group};
use std::path::Path;

/// Check a PNG: the 8-byte signature, an IHDR chunk first, 1600 × 1000 pixels, and more than
/// 20 kB (an empty white image compresses to far less).
fn assert_png(path: &Path) {
    let b = std::fs::read(path).unwrap_or_else(|e| panic!("{}: {e}", path.display()));
    assert_eq!(
        &b[..8],
        b"\x89PNG\r\n\x1a\n",
        "{}: not a PNG",
        path.display()
    );
    assert_eq!(&b[12..16], b"IHDR", "{}: no IHDR chunk", path.display());
    let w = u32::from_be_bytes([b[16], b[17], b[18], b[19]]);
    let h = u32::from_be_bytes([b[20], b[21], b[22], b[23]]);
    assert_eq!((w, h), (1600, 1000), "{}", path.display());
    assert!(
        b.len() > 20_000,
        "{}: only {} bytes",
        path.display(),
        b.len()
    );
}

/// Check an SVG: XML with one `<svg …>` root of the figure size, closed, with text and shapes.
fn assert_svg(path: &Path) -> String {
    let s = std::fs::read_to_string(path).unwrap_or_else(|e| panic!("{}: {e}", path.display()));
    let open = s
        .find("<svg")
        .unwrap_or_else(|| panic!("{}: no <svg>", path.display()));
    assert!(s[open..].contains("width=\"1600\"") && s[open..].contains("height=\"1000\""));
    assert!(
        s.trim_end().ends_with("</svg>"),
        "{}: not closed",
        path.display()
    );
    assert!(s.contains("<text") && (s.contains("<polyline") || s.contains("<rect")));
    assert!(
        s.len() > 5_000,
        "{}: only {} bytes",
        path.display(),
        s.len()
    );
    s
}

fn figures(dir: &Path) -> Vec<String> {
    let mut v: Vec<String> = std::fs::read_dir(dir)
        .expect("figure folder")
        .map(|e| e.expect("entry").file_name().to_string_lossy().into_owned())
        .collect();
    v.sort();
    v
}

#[test]
fn demo_figures_are_valid_images() {
    let sb = Sandbox::new();
    let demo = repo().join("configs/ring4-resonator.toml");
    let out = sb.cavern([
        "run".as_ref(),
        demo.as_os_str(),
        "-o".as_ref(),
        "ring4.h5".as_ref(),
        "-q".as_ref(),
    ]);
    out.assert_success();
    let out = sb.cavern(["plot", "ring4.h5"]);
    out.assert_success();
    let dir = sb.join("ring4-figures");
    let names = figures(&dir);
    for obs in [
        "pattern_overlap",
        "photon_number",
        "output_flux",
        "spin_z",
        "purity",
    ] {
        assert!(names.contains(&format!("{obs}.png")), "{obs}: {names:?}");
        assert_png(&dir.join(format!("{obs}.png")));
        let svg = assert_svg(&dir.join(format!("{obs}.svg")));
        assert!(svg.contains("time t (µs)"), "time axis label with unit");
    }
    let svg = std::fs::read_to_string(dir.join("output_flux.svg")).unwrap();
    assert!(
        svg.contains("output flux κ⟨a†a⟩ (10"),
        "flux label with power of ten and unit"
    );
    assert!(svg.contains("photons/s"));
    // Okabe–Ito blue and vermillion for the first two rows of a multi-row figure
    let spins = std::fs::read_to_string(dir.join("spin_z.svg")).unwrap();
    assert!(
        spins.contains("#0072B2") && spins.contains("#D55E00"),
        "palette"
    );
    // the associative-memory demo adds the recall curve and the coupling matrix
    let demo = repo().join("demo-data/ring6.toml");
    let out = sb.cavern([
        "run".as_ref(),
        demo.as_os_str(),
        "-o".as_ref(),
        "ring6.h5".as_ref(),
        "-q".as_ref(),
    ]);
    out.assert_success();
    sb.cavern(["plot", "ring6.h5"]).assert_success();
    let dir = sb.join("ring6-figures");
    let names = figures(&dir);
    for fig in ["recall", "couplings", "pattern_overlap"] {
        assert!(names.contains(&format!("{fig}.png")), "{fig}: {names:?}");
        assert_png(&dir.join(format!("{fig}.png")));
        assert_svg(&dir.join(format!("{fig}.svg")));
    }
}

#[test]
fn trajectory_bands_scans_and_coupling_matrix() {
    let sb = Sandbox::new();
    synthetic_run(
        &sb.join("traj.h5"),
        &[0.0, 1.0, 1.5, 1.8],
        Some(&[0.0, 0.1, 0.1, 0.1]),
    );
    let out = sb.cavern(["plot", "traj.h5", "-o", "t"]);
    out.assert_success();
    assert_png(&sb.join("t/output_flux.png"));
    let svg = assert_svg(&sb.join("t/output_flux.svg"));
    assert!(svg.contains("<polygon"), "error band drawn as a polygon");
    assert!(svg.contains("±1 s.e."), "band stated in the caption");

    // contract C3, two axes (heat maps, one failed point) + C2 coupling matrix
    let mut root = Group::new();
    root.attr("kind", "scan")
        .attr("title", "synthetic scan (test)");
    let s = root.group("scan");
    s.attr("axes", vec!["loss".to_string(), "drive".to_string()]);
    let axes = s.group("axes");
    axes.dataset("loss", &[4], Data::F64(vec![0.5, 1.0, 1.5, 2.0]))
        .attr("units", "MHz");
    axes.dataset("drive", &[3], Data::F64(vec![0.1, 0.2, 0.4]))
        .attr("units", "MHz");
    let mut status = vec![0_i64; 12];
    status[5] = 1;
    s.dataset("status", &[4, 3], Data::I64(status));
    root.dataset("time", &[2], Data::F64(vec![0.0, 1.0]))
        .attr("units", "us");
    let mut n = Vec::new();
    for k in [0.5_f64, 1.0, 1.5, 2.0] {
        for e in [0.1_f64, 0.2, 0.4] {
            let v = e * e / (0.25 + k * k / 4.0);
            n.extend([0.0, v]);
        }
    }
    root.group("observables")
        .dataset("photon_number", &[4, 3, 1, 2], Data::F64(n))
        .attr("units", "photons")
        .attr("rows", vec!["cavity".to_string()]);
    let m = root.group("memory");
    m.dataset(
        "couplings",
        &[3, 3],
        Data::F64(vec![0.0, 0.5, -0.5, 0.5, 0.0, 0.25, -0.5, 0.25, 0.0]),
    )
    .attr("units", "1 (rule units)");
    write_atomic(&root, &sb.join("scan2.h5")).expect("write");
    let out = sb.cavern(["plot", "scan2.h5", "-o", "s2"]);
    out.assert_success();
    for f in ["scan-photon_number-cavity", "couplings"] {
        assert_png(&sb.join(&format!("s2/{f}.png")));
        assert_svg(&sb.join(&format!("s2/{f}.svg")));
    }
    let map = std::fs::read_to_string(sb.join("s2/scan-photon_number-cavity.svg")).unwrap();
    assert!(
        map.contains("drive (MHz)") && map.contains("loss (MHz)") && map.contains("grey: no value")
    );

    // one axis: lines
    let mut root = Group::new();
    let s = root.group("scan");
    s.attr("axes", vec!["loss".to_string()]);
    s.group("axes")
        .dataset("loss", &[3], Data::F64(vec![0.5, 1.0, 2.0]))
        .attr("units", "MHz");
    root.group("steady_state")
        .group("observables")
        .dataset("photon_number", &[3], Data::F64(vec![0.5, 0.32, 0.128]))
        .attr("units", "photons");
    write_atomic(&root, &sb.join("scan1.h5")).expect("write");
    let out = sb.cavern(["plot", "scan1.h5", "-o", "s1"]);
    out.assert_success();
    assert_png(&sb.join("s1/scan-photon_number.png"));
    assert!(assert_svg(&sb.join("s1/scan-photon_number.svg")).contains("loss (MHz)"));

    // contract C2: recall success against flipped sites, with the classical baselines
    let mut root = Group::new();
    let r = root.group("recall");
    r.dataset("flips", &[3], Data::I64(vec![0, 1, 2]));
    r.dataset("success", &[3], Data::F64(vec![1.0, 0.8, 0.4]));
    r.dataset("success_stderr", &[3], Data::F64(vec![0.0, 0.06, 0.08]));
    r.dataset(
        "baseline_descent_success",
        &[3],
        Data::F64(vec![1.0, 1.0, 0.5]),
    );
    r.dataset(
        "baseline_glauber_success",
        &[3],
        Data::F64(vec![1.0, 0.7, 0.3]),
    );
    write_atomic(&root, &sb.join("recall.h5")).expect("write");
    let out = sb.cavern(["plot", "recall.h5", "-o", "rc"]);
    out.assert_success();
    assert_png(&sb.join("rc/recall.png"));
    let svg = assert_svg(&sb.join("rc/recall.svg"));
    assert!(svg.contains("classical Glauber") && svg.contains("flipped sites in the probe"));

    // nothing to draw, and not a result file: clear errors, exit 2
    write_atomic(&Group::new(), &sb.join("empty.h5")).expect("write");
    let out = sb.cavern(["plot", "empty.h5"]);
    assert_eq!(out.code, Some(2), "{}", out.describe());
    assert!(out.stderr.contains("nothing to plot"), "{}", out.describe());
    sb.write("junk.h5", "not hdf5");
    let out = sb.cavern(["plot", "junk.h5"]);
    assert_eq!(out.code, Some(2), "{}", out.describe());
    assert!(out.stderr.contains("cannot read HDF5 file") && out.stderr.contains("junk.h5"));
}
