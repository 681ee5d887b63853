//! Unit systems of the configuration and the output.
//!
//! Physical units: every frequency and rate in the config is an ordinary frequency f = ω/2π
//! (for example κ/2π = 1.2 MHz is written `loss = 1.2` with `frequency = "MHz"`); cavern multiplies
//! by 2π to get the angular quantities of the master equation. Times are in the matching unit
//! (kHz ↔ ms, MHz ↔ µs, GHz ↔ ns), so ω·t stays dimensionless.
//!
//! Dimensionless units: frequencies and rates are the angular quantities themselves (ħ = 1) and
//! times are in the inverse unit; no 2π is applied.

use std::f64::consts::TAU;

/// The unit system of a run.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Units {
    /// Ordinary frequencies with an SI prefix; 2π applied on input.
    Physical(Prefix),
    /// Angular frequencies in arbitrary units; times in the inverse unit.
    Dimensionless,
}

/// SI prefix of the frequency unit.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Prefix {
    /// kHz, times in ms.
    Kilo,
    /// MHz, times in µs.
    Mega,
    /// GHz, times in ns.
    Giga,
}

impl Units {
    /// Parse the `[units]` keys; `None` if the names are not recognised.
    pub fn parse(system: &str, frequency: Option<&str>) -> Option<Self> {
        match system {
            "dimensionless" => Some(Units::Dimensionless),
            "physical" => Some(Units::Physical(match frequency? {
                "kHz" => Prefix::Kilo,
                "MHz" => Prefix::Mega,
                "GHz" => Prefix::Giga,
                _ => return None,
            })),
            _ => None,
        }
    }

    /// Angular value (rad per time unit) of a config frequency or rate.
    pub fn angular(self, f: f64) -> f64 {
        match self {
            Units::Physical(_) => TAU * f,
            Units::Dimensionless => f,
        }
    }

    /// Unit label of config frequencies and rates (the f = ω/2π values).
    pub fn frequency_label(self) -> &'static str {
        match self {
            Units::Physical(Prefix::Kilo) => "kHz",
            Units::Physical(Prefix::Mega) => "MHz",
            Units::Physical(Prefix::Giga) => "GHz",
            Units::Dimensionless => "1 (angular, dimensionless)",
        }
    }

    /// Unit label of times.
    pub fn time_label(self) -> &'static str {
        match self {
            Units::Physical(Prefix::Kilo) => "ms",
            Units::Physical(Prefix::Mega) => "us",
            Units::Physical(Prefix::Giga) => "ns",
            Units::Dimensionless => "1 (dimensionless)",
        }
    }

    /// Seconds per time unit (`None` when dimensionless).
    pub fn seconds_per_time_unit(self) -> Option<f64> {
        match self {
            Units::Physical(Prefix::Kilo) => Some(1e-3),
            Units::Physical(Prefix::Mega) => Some(1e-6),
            Units::Physical(Prefix::Giga) => Some(1e-9),
            Units::Dimensionless => None,
        }
    }

    /// Unit label of an angular rate as computed internally (eigenvalues, residuals): rad per
    /// time unit under physical units (e.g. `rad/us`), the inverse time unit otherwise.
    pub fn rate_label(self) -> String {
        match self {
            Units::Physical(_) => format!("rad/{}", self.time_label()),
            Units::Dimensionless => "1 (angular, per time unit)".into(),
        }
    }

    /// Unit label of a photon flux as written to the output.
    pub fn flux_label(self) -> &'static str {
        match self {
            Units::Physical(_) => "photons/s",
            Units::Dimensionless => "photons per time unit",
        }
    }

    /// Convert an angular rate × number (per time unit) to the output flux unit.
    pub fn flux(self, per_time_unit: f64) -> f64 {
        match self.seconds_per_time_unit() {
            Some(s) => per_time_unit / s,
            None => per_time_unit,
        }
    }

    /// One-line statement of the convention, written into outputs and reports.
    pub fn convention(self) -> String {
        match self {
            Units::Physical(_) => format!(
                "config frequencies and rates are ordinary frequencies f = omega/2pi in {}; cavern \
                 applies 2pi; times in {}; hbar = 1; rates are energy (population) decay rates",
                self.frequency_label(),
                self.time_label()
            ),
            Units::Dimensionless => {
                "config frequencies and rates are angular (omega, no 2pi applied); \
                 times in inverse units; hbar = 1; rates are energy (population) decay rates"
                    .into()
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn physical_units_apply_two_pi_and_scale_flux() {
        let u = Units::parse("physical", Some("MHz")).unwrap();
        assert_eq!(u.angular(1.0), TAU);
        // κ/2π = 1 MHz, ⟨n⟩ = 1: κ⟨n⟩ = 2π × 10⁶ photons/s
        assert!((u.flux(u.angular(1.0)) - TAU * 1e6).abs() < 1e-6);
        assert_eq!(u.time_label(), "us");
        assert!(Units::parse("physical", Some("Hz")).is_none());
        assert!(Units::parse("physical", None).is_none());
        assert_eq!(
            Units::parse("dimensionless", None).unwrap().angular(3.0),
            3.0
        );
    }
}
