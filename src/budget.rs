//! Photon budget: expected detector counts and the integration time needed to tell two outcomes
//! apart under shot noise.
//!
//! # Detector model
//! Each output mode j is watched by a photon counter of efficiency η (probability that a photon
//! leaving the mode is counted, 0 < η ≤ 1) with dark-count rate d. The mean count rate is
//! λⱼ = η Fⱼ + d, where Fⱼ is the photon flux leaving mode j (cavern's `output_flux`, κ⟨a†a⟩), and
//! the expected counts in a window T are λⱼ T.
//!
//! # Statistical model and test
//! The counts Nⱼ of the detectors in a window T are independent Poisson variables with means λⱼT
//! (ideal shot-noise-limited counting of a stationary signal; detector dead time, afterpulsing and
//! the photon statistics of the source beyond Poisson are ignored). To decide between outcome A
//! (rates λᴬ) and outcome B (rates λᴮ) we use the likelihood-ratio test, which is the most powerful
//! test of two simple hypotheses (Neyman–Pearson lemma: Neyman & Pearson, Phil. Trans. R. Soc. A
//! 231, 289 (1933)). For Poisson counts its statistic is linear in the counts,
//! Λ = Σⱼ Nⱼ ln(λᴬⱼ/λᴮⱼ) − T Σⱼ (λᴬⱼ − λᴮⱼ), decide A when Λ exceeds a threshold c.
//!
//! In the normal approximation (each Poisson count ≈ normal with variance = mean, good once the
//! expected counts are ≳ 10; see e.g. Casella & Berger, *Statistical Inference*, 2nd ed. (2002),
//! from memory), with wⱼ = ln(λᴬⱼ/λᴮⱼ), Λ has mean T·Σ λⱼ wⱼ + const and standard deviation
//! √(T Σ λⱼ wⱼ²) under either hypothesis. Requiring both error probabilities (deciding B when A
//! is true and vice versa) to be at most 1 − p, p the confidence, with z = Φ⁻¹(p):
//!
//! T ≥ z² (σ_A + σ_B)² / Δ²,  Δ = Σⱼ (λᴬⱼ − λᴮⱼ) wⱼ,  σ_X = √(Σⱼ λˣⱼ wⱼ²).
//!
//! For a single detector this reduces to the textbook threshold test on one Poisson count,
//! T = z² (√λᴬ + √λᴮ)² / (λᴬ − λᴮ)² (common practice). Detectors with λᴬⱼ = λᴮⱼ carry no
//! information (wⱼ = 0). A detector with a zero rate under one hypothesis (no dark counts and no
//! light) makes w infinite; such inputs are rejected (give a dark-count rate > 0).

use std::fmt::Write;

/// A photon counter on every output mode.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Detector {
    /// Detection efficiency η, 0 < η ≤ 1 (dimensionless).
    pub efficiency: f64,
    /// Dark-count rate d ≥ 0 per detector, in counts per second (physical units) or per time
    /// unit (dimensionless units) — the unit of the output flux.
    pub dark_rate: f64,
    /// Integration window T > 0, in seconds (physical units) or time units (dimensionless).
    pub window: f64,
    /// Confidence p, 0.5 < p < 1: each error probability of the decision is at most 1 − p.
    pub confidence: f64,
}

impl Detector {
    /// Check the ranges; the message names the flag or key and what is allowed.
    ///
    /// # Errors
    /// A message when a value is out of range.
    pub fn validate(&self) -> Result<(), String> {
        if !(self.efficiency > 0.0 && self.efficiency <= 1.0) {
            return Err(format!(
                "efficiency must be in (0, 1] (got {})",
                self.efficiency
            ));
        }
        if !(self.dark_rate >= 0.0 && self.dark_rate.is_finite()) {
            return Err(format!(
                "dark_rate must be a finite number ≥ 0 counts per second (got {})",
                self.dark_rate
            ));
        }
        if !(self.window > 0.0 && self.window.is_finite()) {
            return Err(format!(
                "window must be a finite number > 0 (seconds) (got {})",
                self.window
            ));
        }
        if !(self.confidence > 0.5 && self.confidence < 1.0) {
            return Err(format!(
                "confidence must be in (0.5, 1), e.g. 0.95 (got {})",
                self.confidence
            ));
        }
        Ok(())
    }

    /// Count rate λ = η F + d of a detector on a mode with output flux `flux`.
    pub fn rate(&self, flux: f64) -> f64 {
        self.efficiency * flux + self.dark_rate
    }

    /// Expected counts (η F + d)·T in one window.
    pub fn counts(&self, flux: f64) -> f64 {
        self.rate(flux) * self.window
    }
}

/// Detector settings as given: every field optional, so flags can override a file.
#[derive(Clone, Copy, Debug, Default, PartialEq, serde::Deserialize)]
#[serde(deny_unknown_fields)]
pub struct DetectorSettings {
    /// η, dimensionless, 0 < η ≤ 1 (required somewhere).
    pub efficiency: Option<f64>,
    /// Dark-count rate, counts/s (physical units) or counts per time unit; default 0.
    pub dark_rate: Option<f64>,
    /// Integration window, s (physical units) or time units; default 1.
    pub window: Option<f64>,
    /// Confidence p; default 0.95.
    pub confidence: Option<f64>,
}

#[derive(serde::Deserialize)]
#[serde(deny_unknown_fields)]
struct DetectorFile {
    detection: DetectorSettings,
}

impl DetectorSettings {
    /// Read the `[detection]` table of a TOML file (keys `efficiency`, `dark_rate` in counts/s,
    /// `window` in s, `confidence`).
    ///
    /// # Errors
    /// A message naming the file, line and key.
    pub fn load(path: &std::path::Path) -> Result<Self, String> {
        let text = std::fs::read_to_string(path)
            .map_err(|e| format!("{}: cannot read the detector file: {e}", path.display()))?;
        let f: DetectorFile = toml::from_str(&text)
            .map_err(|e| crate::config::serde_error(path, &text, &e).to_string())?;
        let d = f.detection;
        let check = |key: &str, v: Option<f64>, ok: bool, allowed: &str| -> Result<(), String> {
            match v {
                Some(x) if !ok => {
                    let line = text
                        .lines()
                        .position(|l| l.trim_start().starts_with(key) && l.contains('='))
                        .map(|n| format!("{}:", n + 1))
                        .unwrap_or_default();
                    Err(format!(
                        "{}:{line} key `detection.{key}`: {x} is out of range; allowed: {allowed}",
                        path.display()
                    ))
                }
                _ => Ok(()),
            }
        };
        let within = |v: Option<f64>, f: &dyn Fn(f64) -> bool| v.is_none_or(f);
        check(
            "efficiency",
            d.efficiency,
            within(d.efficiency, &|x| x > 0.0 && x <= 1.0),
            "0 < efficiency ≤ 1",
        )?;
        check(
            "dark_rate",
            d.dark_rate,
            within(d.dark_rate, &|x| x >= 0.0 && x.is_finite()),
            "a finite rate ≥ 0 (counts/s)",
        )?;
        check(
            "window",
            d.window,
            within(d.window, &|x| x > 0.0 && x.is_finite()),
            "a finite time > 0 (s)",
        )?;
        check(
            "confidence",
            d.confidence,
            within(d.confidence, &|x| x > 0.5 && x < 1.0),
            "0.5 < confidence < 1",
        )?;
        Ok(d)
    }

    /// `self` with the values of `over` taking precedence.
    pub fn overridden_by(self, over: DetectorSettings) -> Self {
        DetectorSettings {
            efficiency: over.efficiency.or(self.efficiency),
            dark_rate: over.dark_rate.or(self.dark_rate),
            window: over.window.or(self.window),
            confidence: over.confidence.or(self.confidence),
        }
    }

    /// The detector with defaults filled in (dark rate 0, window 1, confidence 0.95).
    ///
    /// # Errors
    /// When the efficiency is missing or a value is out of range.
    pub fn resolve(self) -> Result<Detector, String> {
        let det = Detector {
            efficiency: self.efficiency.ok_or(
                "the photon budget needs the detection efficiency: --efficiency or `efficiency` in [detection]",
            )?,
            dark_rate: self.dark_rate.unwrap_or(0.0),
            window: self.window.unwrap_or(1.0),
            confidence: self.confidence.unwrap_or(0.95),
        };
        det.validate()?;
        Ok(det)
    }

    /// Whether any value is set.
    pub fn any(&self) -> bool {
        self.efficiency.is_some()
            || self.dark_rate.is_some()
            || self.window.is_some()
            || self.confidence.is_some()
    }
}

/// Standard normal cumulative distribution Φ(x) = ½ erfc(−x/√2).
pub fn normal_cdf(x: f64) -> f64 {
    0.5 * erfc(-x / std::f64::consts::SQRT_2)
}

/// Complementary error function, relative accuracy about 1.2 × 10⁻⁷ everywhere: the Chebyshev
/// fit of Press, Teukolsky, Vetterling & Flannery, *Numerical Recipes*, 3rd ed. (2007), §6.2
/// (`erfcc`), from memory.
fn erfc(x: f64) -> f64 {
    let z = x.abs();
    let t = 1.0 / (1.0 + 0.5 * z);
    let poly = -z * z - 1.265_512_23
        + t * (1.000_023_68
            + t * (0.374_091_96
                + t * (0.096_784_18
                    + t * (-0.186_288_06
                        + t * (0.278_868_07
                            + t * (-1.135_203_98
                                + t * (1.488_515_87 + t * (-0.822_152_23 + t * 0.170_872_77))))))));
    let r = t * poly.exp();
    if x >= 0.0 {
        r
    } else {
        2.0 - r
    }
}

/// Quantile z = Φ⁻¹(p) of the standard normal distribution for 0 < p < 1, by bisection on
/// [`normal_cdf`] (accurate to the 1e-7 of the erfc fit, ample for confidence levels).
pub fn normal_quantile(p: f64) -> f64 {
    let (mut lo, mut hi) = (-40.0_f64, 40.0_f64);
    for _ in 0..200 {
        let mid = 0.5 * (lo + hi);
        if normal_cdf(mid) < p {
            lo = mid;
        } else {
            hi = mid;
        }
    }
    0.5 * (lo + hi)
}

/// The result of [`discriminate`].
#[derive(Clone, Debug, PartialEq)]
pub struct Discrimination {
    /// z = Φ⁻¹(confidence).
    pub z: f64,
    /// Separation rate Δ = Σ (λᴬ − λᴮ) ln(λᴬ/λᴮ) (per unit time).
    pub separation: f64,
    /// σ_A + σ_B per √(unit time).
    pub spread: f64,
    /// Integration time T = z²(σ_A + σ_B)²/Δ² (same time unit as 1/rate); infinite when the
    /// outcomes give identical rates.
    pub time: f64,
}

/// Integration time needed to tell outcome A (count rates `a`) from outcome B (rates `b`), one
/// entry per detector, with both error probabilities at most 1 − `confidence` (see the module
/// documentation for the model and its sources).
///
/// # Errors
/// When the lengths differ, a rate is negative or not finite, or a rate is zero under one outcome
/// only (the likelihood ratio is then unbounded; add dark counts).
pub fn discriminate(a: &[f64], b: &[f64], confidence: f64) -> Result<Discrimination, String> {
    if a.len() != b.len() {
        return Err(format!(
            "the outcomes have {} and {} detectors",
            a.len(),
            b.len()
        ));
    }
    let z = normal_quantile(confidence);
    let (mut sep, mut var_a, mut var_b) = (0.0, 0.0, 0.0);
    for (j, (&la, &lb)) in a.iter().zip(b).enumerate() {
        if !(la >= 0.0 && lb >= 0.0 && la.is_finite() && lb.is_finite()) {
            return Err(format!(
                "detector {j}: count rates must be finite and ≥ 0 (got {la}, {lb})"
            ));
        }
        if la == lb {
            continue;
        }
        if la == 0.0 || lb == 0.0 {
            return Err(format!(
                "detector {j}: rate zero under one outcome only ({la} vs {lb}): a single count \
                 would decide; give a dark-count rate > 0 for a meaningful estimate"
            ));
        }
        let w = (la / lb).ln();
        sep += (la - lb) * w;
        var_a += la * w * w;
        var_b += lb * w * w;
    }
    let spread = var_a.sqrt() + var_b.sqrt();
    let time = if sep > 0.0 {
        z * z * spread * spread / (sep * sep)
    } else {
        f64::INFINITY
    };
    Ok(Discrimination {
        z,
        separation: sep,
        spread,
        time,
    })
}

/// One outcome for the budget table: a label and the output flux of every mode.
#[derive(Clone, Debug)]
pub struct Outcome {
    /// Name shown in the table (e.g. the result file).
    pub label: String,
    /// Mode names, one per flux entry.
    pub modes: Vec<String>,
    /// Output flux of each mode (photons per second, or per time unit when dimensionless).
    pub flux: Vec<f64>,
}

/// The budget as Markdown-compatible text: expected counts per output and, for every outcome
/// after the first, the integration time to tell it from the first. `time_unit` names the unit
/// of the window and of the times ("s", or "time units").
pub fn report(det: &Detector, outcomes: &[Outcome], time_unit: &str) -> String {
    let mut s = String::new();
    let rate_unit = format!("counts/{time_unit}");
    let _ = writeln!(
        s,
        "Detector: efficiency η = {}, dark-count rate d = {} {rate_unit}, window T = {} {time_unit}, confidence {}.",
        num(det.efficiency), num(det.dark_rate), num(det.window), det.confidence
    );
    let _ = writeln!(
        s,
        "Expected counts per output = (η·flux + d)·T. Model: independent Poisson counts at each detector; \
         likelihood-ratio (Neyman–Pearson) threshold test, normal approximation, both error \
         probabilities ≤ 1 − confidence: T_needed = z²(σ_A + σ_B)²/Δ² (see README, \"Photon budget\").\n"
    );
    let _ = writeln!(
        s,
        "| outcome | output | flux (photons/{time_unit}) | count rate η·flux + d ({rate_unit}) | expected counts in T |"
    );
    let _ = writeln!(s, "|---|---|---:|---:|---:|");
    for o in outcomes {
        for (m, f) in o.modes.iter().zip(&o.flux) {
            let _ = writeln!(
                s,
                "| {} | {m} | {} | {} | {} |",
                o.label,
                num(*f),
                num(det.rate(*f)),
                num(det.counts(*f))
            );
        }
    }
    if outcomes.len() < 2 {
        return s;
    }
    let _ = writeln!(
        s,
        "\n| outcome A | outcome B | Δ ({rate_unit}) | z | integration time needed ({time_unit}) | windows T needed |"
    );
    let _ = writeln!(s, "|---|---|---:|---:|---:|---:|");
    let first = &outcomes[0];
    let ra: Vec<f64> = first.flux.iter().map(|&f| det.rate(f)).collect();
    for o in &outcomes[1..] {
        let rb: Vec<f64> = o.flux.iter().map(|&f| det.rate(f)).collect();
        match discriminate(&ra, &rb, det.confidence) {
            Ok(d) => {
                // counts of the dimmest informative detector at T_needed
                let fewest = ra
                    .iter()
                    .zip(&rb)
                    .filter(|(a, b)| a != b)
                    .map(|(a, b)| a.min(*b) * d.time)
                    .fold(f64::INFINITY, f64::min);
                let caveat = if fewest < 10.0 {
                    " (fewer than 10 expected counts: the normal approximation is rough)"
                } else {
                    ""
                };
                let _ = writeln!(
                    s,
                    "| {} | {} | {} | {:.4} | {}{caveat} | {} |",
                    first.label,
                    o.label,
                    num(d.separation),
                    d.z,
                    if d.time.is_finite() {
                        num(d.time)
                    } else {
                        "∞ (identical rates)".into()
                    },
                    if d.time.is_finite() {
                        num(d.time / det.window)
                    } else {
                        "∞".into()
                    }
                );
            }
            Err(e) => {
                let _ = writeln!(
                    s,
                    "| {} | {} | – | – | not computable: {e} | – |",
                    first.label, o.label
                );
            }
        }
    }
    s
}

/// A number with 4 significant digits.
pub fn num(x: f64) -> String {
    if x == 0.0 {
        "0".into()
    } else if !x.is_finite() {
        format!("{x}")
    } else if (1e-3..1e5).contains(&x.abs()) {
        let digits = (3 - x.abs().log10().floor() as i32).max(0) as usize;
        format!("{x:.digits$}")
    } else {
        format!("{x:.3e}")
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn normal_quantiles_match_tables() {
        // Φ⁻¹(0.975) = 1.959964, Φ⁻¹(0.95) = 1.644854, Φ⁻¹(0.999) = 3.090232 (standard normal
        // tables, e.g. Abramowitz & Stegun 1964, Table 26.5)
        for (p, z) in [
            (0.975, 1.959_964),
            (0.95, 1.644_854),
            (0.999, 3.090_232),
            (0.5, 0.0),
        ] {
            assert!(
                (normal_quantile(p) - z).abs() < 2e-6,
                "p = {p}: {}",
                normal_quantile(p)
            );
        }
        assert!((normal_cdf(1.0) - 0.841_344_7).abs() < 1e-6);
    }

    #[test]
    fn one_detector_reduces_to_the_threshold_formula() {
        // T = z²(√λA + √λB)²/(λA − λB)² for one Poisson count (common practice)
        let (la, lb) = (1500.0, 900.0);
        let d = discriminate(&[la], &[lb], 0.99).unwrap();
        let z = normal_quantile(0.99);
        let t = z * z * (la.sqrt() + lb.sqrt()).powi(2) / (la - lb).powi(2);
        assert!((d.time - t).abs() < 1e-12 * t, "{} vs {t}", d.time);
        // identical rates: never distinguishable; a detector without information is ignored
        assert!(discriminate(&[5.0], &[5.0], 0.95)
            .unwrap()
            .time
            .is_infinite());
        let two = discriminate(&[la, 7.0], &[lb, 7.0], 0.99).unwrap();
        assert!((two.time - t).abs() < 1e-12 * t);
        assert!(discriminate(&[1.0], &[0.0], 0.95).is_err());
        assert!(discriminate(&[1.0, 2.0], &[1.0], 0.95).is_err());
    }

    #[test]
    fn detector_ranges() {
        let ok = Detector {
            efficiency: 0.5,
            dark_rate: 10.0,
            window: 1e-3,
            confidence: 0.95,
        };
        assert!(ok.validate().is_ok());
        assert!((ok.counts(1e4) - (0.5 * 1e4 + 10.0) * 1e-3).abs() < 1e-12);
        for bad in [
            Detector {
                efficiency: 0.0,
                ..ok
            },
            Detector {
                efficiency: 1.5,
                ..ok
            },
            Detector {
                dark_rate: -1.0,
                ..ok
            },
            Detector { window: 0.0, ..ok },
            Detector {
                confidence: 1.0,
                ..ok
            },
            Detector {
                confidence: f64::NAN,
                ..ok
            },
        ] {
            assert!(bad.validate().is_err(), "{bad:?}");
        }
    }
}
