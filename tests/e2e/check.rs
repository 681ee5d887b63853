//! `cavern check FILE`: validates a config and describes the model without running it.

use crate::util::{close, repo, Sandbox};

/// The cooperativity values `C = 4g²/(κγ) = x` printed by `check`, in order.
fn cooperativities(stdout: &str) -> Vec<f64> {
    const TAG: &str = "C = 4g²/(κγ) = ";
    stdout
        .lines()
        .filter_map(|l| {
            let rest = &l[l.find(TAG)? + TAG.len()..];
            let num = rest.split(',').next()?.trim();
            Some(
                num.parse::<f64>()
                    .unwrap_or_else(|_| panic!("cannot parse the cooperativity in `{l}`")),
            )
        })
        .collect()
}

#[test]
fn resonator_ring_check_reports_dimension_memory_units_and_cooperativity() {
    let sb = Sandbox::new();
    let demo = repo().join("configs").join("ring4-resonator.toml");
    let out = sb.cavern(["check".as_ref(), demo.as_os_str()]);
    out.assert_success();
    let s = &out.stdout;
    let d = || out.describe();
    // 4 two-level sites and a 6-level mode: d = 2⁴ · 6 = 96.
    assert!(s.contains("dimension d = 96"), "{}", d());
    let mem = s
        .lines()
        .find(|l| l.starts_with("memory"))
        .unwrap_or_else(|| panic!("no memory line\n{}", d()));
    assert!(
        mem.contains("needs ≈") && ["KiB", "MiB", "GiB"].iter().any(|u| mem.contains(u)),
        "memory line without an estimate: {mem}"
    );
    assert!(
        mem.ends_with("ok"),
        "the example should fit in memory: {mem}"
    );
    let units = s
        .lines()
        .find(|l| l.starts_with("units"))
        .unwrap_or_else(|| panic!("no units line\n{}", d()));
    assert!(
        units.contains("MHz") && units.contains("times in us"),
        "{units}"
    );
    // One cooperativity line per coupled site–mode pair. By hand (config values, MHz):
    // C = 4 g² / (κ γ) with κ = 0.8, γ = 0.02 (site 2: 0.04 by override), g = 0.3 / 0.25.
    let c = cooperativities(s);
    let expected = [
        4.0 * 0.3 * 0.3 / (0.8 * 0.02),
        4.0 * 0.25 * 0.25 / (0.8 * 0.02),
        4.0 * 0.3 * 0.3 / (0.8 * 0.04),
        4.0 * 0.25 * 0.25 / (0.8 * 0.02),
    ];
    assert_eq!(c.len(), 4, "expected 4 cooperativity lines\n{}", d());
    for (got, want) in c.iter().zip(expected) {
        assert!(close(*got, want, 1e-6, 0.0), "C = {got}, expected {want}");
    }
    assert!(s.contains("is valid"), "{}", d());
    assert!(out.stderr.is_empty(), "{}", d());
    assert!(
        sb.entries().is_empty(),
        "check wrote files: {:?}",
        sb.entries()
    );
}

/// One site, one mode; `units` is the whole `[units]` table body.
fn single_pair(units: &str, g: f64, kappa: f64, gamma: f64) -> String {
    format!(
        "[units]\n{units}\n\n[time]\nstop = 1.0\nsamples = 3\n\n[sites]\ncount = 1\ndecay = {gamma}\n\n\
         [[modes]]\nname = \"cav\"\nlevels = 3\nloss = {kappa}\n\n[coupling]\nstrength = {g}\n"
    )
}

#[test]
fn cooperativity_matches_a_hand_calculation() {
    // g/2π = 0.12 MHz, κ/2π = 0.9 MHz, γ/2π = 0.015 MHz. cavern multiplies every physical value
    // by 2π, but C = 4g²/(κγ) = 4(2π)²g'²/((2π)κ'(2π)γ') = 4g'²/(κ'γ'): the 2π cancels, so the
    // config numbers give C directly: 4 · 0.0144 / 0.0135 = 4.2666…
    let (g, kappa, gamma) = (0.12, 0.9, 0.015);
    let want = 4.0 * g * g / (kappa * gamma);
    assert!(close(want, 4.266_666_666_666_667, 1e-12, 0.0));
    let sb = Sandbox::new();
    for (name, units) in [
        (
            "physical.toml",
            "system = \"physical\"\nfrequency = \"MHz\"",
        ),
        ("ghz.toml", "system = \"physical\"\nfrequency = \"GHz\""),
        // Angular units: no 2π at all, the same numbers give the same C.
        ("dimensionless.toml", "system = \"dimensionless\""),
    ] {
        let cfg = sb.write(name, &single_pair(units, g, kappa, gamma));
        let out = sb.cavern(["check".as_ref(), cfg.as_os_str()]);
        out.assert_success();
        let c = cooperativities(&out.stdout);
        assert_eq!(c.len(), 1, "{}", out.describe());
        // printed with 6 decimals
        assert!(
            close(c[0], want, 1e-6, 0.0),
            "{name}: C = {}, expected {want}\n{}",
            c[0],
            out.describe()
        );
        // 2g = 0.24 < (κ + γ)/2 = 0.4575
        assert!(out.stdout.contains("weak coupling"), "{}", out.describe());
        // 1 site × 3 levels
        assert!(out.stdout.contains("dimension d = 6"), "{}", out.describe());
    }
    let ghz = sb.cavern(["check", "ghz.toml"]);
    assert!(
        ghz.stdout.contains("GHz") && ghz.stdout.contains("times in ns"),
        "{}",
        ghz.describe()
    );
}

#[test]
fn check_of_a_missing_file_is_a_clear_input_error() {
    let sb = Sandbox::new();
    let out = sb.cavern(["check", "no-such-config.toml"]);
    assert_eq!(out.code, Some(2), "{}", out.describe());
    out.assert_no_panic();
    assert!(
        out.stderr.starts_with("error: ")
            && out.stderr.contains("no-such-config.toml")
            && out.stderr.contains("cannot read the config file"),
        "{}",
        out.describe()
    );
    assert!(sb.entries().is_empty());
}

/// Every shipped example (`configs/`) and the demo (`demo-data/`) must stay valid as the schema
/// evolves.
#[test]
fn shipped_examples_pass_check() {
    let sb = Sandbox::new();
    let mut n = 0;
    for dir in ["configs", "demo-data"] {
        for entry in std::fs::read_dir(repo().join(dir)).expect("list examples") {
            let path = entry.expect("entry").path();
            if path.extension().is_some_and(|e| e == "toml") {
                let out = sb.cavern(["check".as_ref(), path.as_os_str()]);
                assert_eq!(out.code, Some(0), "{}", out.describe());
                n += 1;
            }
        }
    }
    assert!(
        n >= 4,
        "expected the demo and at least three examples, found {n}"
    );
}
