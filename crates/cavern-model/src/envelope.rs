//! Dimensionless time envelopes f(t) that multiply a drive amplitude or coupling strength.
//!
//! Times are in the model's time unit (the config's time unit under physical units).

use crate::ModelError;

/// A real, dimensionless factor f(t) applied to an amplitude: the term's strength at time t is
/// `amplitude · f(t)`.
#[derive(Clone, Debug, PartialEq, Default)]
pub enum Envelope {
    /// f(t) = 1.
    #[default]
    Constant,
    /// Linear ramp: f = `from` for t ≤ `start`, `to` for t ≥ `stop`, linear in between.
    Ramp {
        /// Ramp start time.
        start: f64,
        /// Ramp end time (> start).
        stop: f64,
        /// Value before the ramp.
        from: f64,
        /// Value after the ramp.
        to: f64,
    },
    /// Smooth (C¹) step: f = from + (to − from)·(3u² − 2u³), u = (t − start)/(stop − start) clamped
    /// to [0, 1]; zero slope at both ends.
    SmoothStep {
        /// Step start time.
        start: f64,
        /// Step end time (> start).
        stop: f64,
        /// Value before the step.
        from: f64,
        /// Value after the step.
        to: f64,
    },
    /// Piecewise-linear interpolation through (`times[k]`, `values[k]`); held at the first/last value
    /// outside the table. Times strictly increasing.
    Table {
        /// Knot times, strictly increasing.
        times: Vec<f64>,
        /// Values at the knots.
        values: Vec<f64>,
    },
}

impl Envelope {
    /// Checked piecewise-linear table.
    ///
    /// # Errors
    /// [`ModelError::Envelope`] if the table is empty, lengths differ, a value is not finite, or
    /// times are not strictly increasing.
    pub fn table(times: Vec<f64>, values: Vec<f64>) -> Result<Self, ModelError> {
        if times.is_empty() || times.len() != values.len() {
            return Err(ModelError::Envelope(format!(
                "a table needs the same non-zero number of times and values (got {} and {})",
                times.len(),
                values.len()
            )));
        }
        if times.iter().chain(values.iter()).any(|x| !x.is_finite()) {
            return Err(ModelError::Envelope(
                "table entries must be finite numbers".into(),
            ));
        }
        if let Some(k) = times.windows(2).position(|w| w[1] <= w[0]) {
            return Err(ModelError::Envelope(format!(
                "table times must be strictly increasing (entry {} = {} follows {})",
                k + 1,
                times[k + 1],
                times[k]
            )));
        }
        Ok(Envelope::Table { times, values })
    }

    /// True for the constant envelope.
    pub fn is_constant(&self) -> bool {
        matches!(self, Envelope::Constant)
    }

    /// f(t).
    pub fn value(&self, t: f64) -> f64 {
        match self {
            Envelope::Constant => 1.0,
            Envelope::Ramp {
                start,
                stop,
                from,
                to,
            } => {
                let u = ((t - start) / (stop - start)).clamp(0.0, 1.0);
                from + (to - from) * u
            }
            Envelope::SmoothStep {
                start,
                stop,
                from,
                to,
            } => {
                let u = ((t - start) / (stop - start)).clamp(0.0, 1.0);
                from + (to - from) * u * u * (3.0 - 2.0 * u)
            }
            Envelope::Table { times, values } => {
                let n = times.len();
                if t <= times[0] {
                    return values[0];
                }
                if t >= times[n - 1] {
                    return values[n - 1];
                }
                // first knot strictly greater than t; 1 ≤ k ≤ n−1 here
                let k = times.partition_point(|&x| x <= t);
                let (t0, t1) = (times[k - 1], times[k]);
                let (v0, v1) = (values[k - 1], values[k]);
                v0 + (v1 - v0) * (t - t0) / (t1 - t0)
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn shapes_hit_their_end_values() {
        let r = Envelope::Ramp {
            start: 1.0,
            stop: 3.0,
            from: 0.0,
            to: 2.0,
        };
        assert_eq!(r.value(0.0), 0.0);
        assert_eq!(r.value(2.0), 1.0);
        assert_eq!(r.value(5.0), 2.0);
        let s = Envelope::SmoothStep {
            start: 0.0,
            stop: 2.0,
            from: 1.0,
            to: 3.0,
        };
        assert_eq!(s.value(-1.0), 1.0);
        assert_eq!(s.value(1.0), 2.0);
        assert_eq!(s.value(2.0), 3.0);
        let t = Envelope::table(vec![0.0, 1.0, 3.0], vec![0.0, 1.0, 0.0]).unwrap();
        assert_eq!(t.value(-1.0), 0.0);
        assert_eq!(t.value(0.5), 0.5);
        assert_eq!(t.value(2.0), 0.5);
        assert_eq!(t.value(1.0), 1.0);
        assert_eq!(t.value(9.0), 0.0);
    }

    #[test]
    fn bad_tables_are_refused() {
        assert!(Envelope::table(vec![0.0, 0.0], vec![1.0, 2.0]).is_err());
        assert!(Envelope::table(vec![0.0], vec![1.0, 2.0]).is_err());
        assert!(Envelope::table(vec![], vec![]).is_err());
        assert!(Envelope::table(vec![0.0, f64::NAN], vec![1.0, 2.0]).is_err());
    }
}
