//! `cavern budget` and the photon budget of `cavern compare`: expected counts and the
//! integration time to tell two outcomes apart, against a hand calculation from Poisson
//! statistics and against exact Poisson error probabilities from SciPy.

use crate::compare::synthetic_run;
use crate::util::{close, python, Sandbox};

/// Φ⁻¹(0.99) (standard normal tables, e.g. Abramowitz & Stegun 1964, Table 26.5).
const Z_99: f64 = 2.326_348;

/// The number in the column `col` (0-based, Markdown table) of the line starting with `start`.
fn cell(text: &str, start: &str, col: usize) -> f64 {
    let line = text
        .lines()
        .find(|l| l.starts_with(start))
        .unwrap_or_else(|| panic!("no line starting with {start:?} in\n{text}"));
    let cells: Vec<&str> = line.trim_matches('|').split('|').map(str::trim).collect();
    cells[col]
        .parse()
        .unwrap_or_else(|_| panic!("column {col} of {line:?} is not a number"))
}

#[test]
fn integration_time_matches_the_poisson_hand_calculation() {
    let sb = Sandbox::new();
    let (a, b) = (sb.join("bright.h5"), sb.join("dim.h5"));
    // final output flux 2.0e6 and 1.5e6 photons/s
    synthetic_run(&a, &[0.0, 2.0e6], None);
    synthetic_run(&b, &[0.0, 1.5e6], None);
    let out = sb.cavern([
        "budget",
        "bright.h5",
        "dim.h5",
        "--efficiency",
        "0.5",
        "--dark-rate",
        "100",
        "--window",
        "1e-6",
        "--confidence",
        "0.99",
    ]);
    out.assert_success();
    // Hand calculation. Counts in a window T at one detector are Poisson with mean λT,
    // λ = η F + d (independent Poisson counts; e.g. Casella & Berger, Statistical Inference
    // (2002), from memory):
    let (la, lb) = (0.5 * 2.0e6 + 100.0, 0.5 * 1.5e6 + 100.0);
    // expected counts in the 1 µs window
    assert!(
        close(cell(&out.stdout, "| bright |", 4), la * 1e-6, 1e-3, 0.0),
        "{}",
        out.stdout
    );
    assert!(
        close(cell(&out.stdout, "| dim |", 4), lb * 1e-6, 1e-3, 0.0),
        "{}",
        out.stdout
    );
    // Threshold test on one Poisson count in the normal approximation (variance = mean): both
    // error probabilities ≤ 1 − p when λ_A T − z√(λ_A T) ≥ λ_B T + z√(λ_B T), i.e.
    // T = z² (√λ_A + √λ_B)² / (λ_A − λ_B)² with z = Φ⁻¹(p) (common practice).
    let t = Z_99 * Z_99 * (la.sqrt() + lb.sqrt()).powi(2) / (la - lb).powi(2);
    let shown = cell(&out.stdout, "| bright | dim |", 4);
    assert!(
        close(shown, t, 1e-3, 0.0),
        "{shown} s vs hand calculation {t} s\n{}",
        out.stdout
    );

    // Exact Poisson check of that time (SciPy): with the threshold c = λ_B T + z√(λ_B T), both
    // error probabilities P_A(N ≤ c) and P_B(N > c) are about 1 %.
    let errs = python(
        "import sys\nfrom scipy.stats import poisson\nla, lb, t, z = map(float, sys.argv[1:5])\n\
         c = lb*t + z*(lb*t)**0.5\nprint(poisson.cdf(c, la*t), poisson.sf(c, lb*t))\n",
        &[
            la.to_string().as_ref(),
            lb.to_string().as_ref(),
            t.to_string().as_ref(),
            Z_99.to_string().as_ref(),
        ],
    );
    let v: Vec<f64> = errs
        .split_whitespace()
        .map(|x| x.parse().unwrap())
        .collect();
    for e in v {
        assert!(
            (0.005..0.015).contains(&e),
            "exact Poisson error probability {e} at T = {t}"
        );
    }
}

#[test]
fn detector_file_and_flag_errors() {
    let sb = Sandbox::new();
    synthetic_run(&sb.join("a.h5"), &[0.0, 1.0e6], None);
    let det = sb.write(
        "det.toml",
        "# invented detector\n[detection]\nefficiency = 0.4\ndark_rate = 50.0   # counts/s\nwindow = 1e-3     # s\n",
    );
    let ok = sb.cavern(["budget", "a.h5", "--detector", det.to_str().unwrap()]);
    ok.assert_success();
    // (0.4 × 10⁶ + 50) counts/s × 1 ms
    assert!(
        close(cell(&ok.stdout, "| a |", 4), 400.05, 1e-3, 0.0),
        "{}",
        ok.stdout
    );
    // a flag overrides the file
    let over = sb.cavern([
        "budget",
        "a.h5",
        "--detector",
        det.to_str().unwrap(),
        "--window",
        "2e-3",
    ]);
    over.assert_success();
    assert!(
        close(cell(&over.stdout, "| a |", 4), 800.1, 1e-3, 0.0),
        "{}",
        over.stdout
    );

    let bad = sb.write("bad.toml", "[detection]\nefficiency = 1.5\n");
    let out = sb.cavern(["budget", "a.h5", "--detector", bad.to_str().unwrap()]);
    assert_eq!(out.code, Some(2), "{}", out.describe());
    assert!(
        out.stderr.contains("bad.toml:2:") && out.stderr.contains("detection.efficiency"),
        "{}",
        out.describe()
    );
    let typo = sb.write("typo.toml", "[detection]\nefficency = 0.5\n");
    let out = sb.cavern(["budget", "a.h5", "--detector", typo.to_str().unwrap()]);
    assert_eq!(out.code, Some(2), "{}", out.describe());
    assert!(
        out.stderr.contains("did you mean `efficiency`"),
        "{}",
        out.describe()
    );
    let none = sb.cavern(["budget", "a.h5"]);
    assert_eq!(none.code, Some(2), "{}", none.describe());
    assert!(none.stderr.contains("--efficiency"), "{}", none.describe());
    let dark0 = sb.cavern([
        "budget",
        "a.h5",
        "--efficiency",
        "0.5",
        "--confidence",
        "1.2",
    ]);
    assert_eq!(dark0.code, Some(2), "{}", dark0.describe());
    assert!(dark0.stderr.contains("confidence"), "{}", dark0.describe());
}
