//! The Dormand–Prince 5(4) integrator on its own (`integrate`, `Dopri5`, `Rhs`): order of
//! convergence with a fixed step, accuracy of the dense output, a published test problem (the
//! Arenstorf orbit), and the response of the adaptive error control to the tolerances.
//!
//! Method: Dormand & Prince, J. Comput. Appl. Math. 6, 19 (1980); Hairer, Nørsett & Wanner,
//! Solving Ordinary Differential Equations I, 2nd ed. (Springer, 1993), §II.4–II.6 (from memory).

use cavern_evolve::{integrate, Dopri5, DopriOptions, Par, Rhs, StepOutcome};
use num_complex::Complex64 as C64;

/// Test problem with a known solution, non-linear and non-autonomous in its first component so
/// that the stage times cᵢ and the non-linear order conditions are exercised, linear with a complex
/// rate in its second:
///   y₀' = −2t y₀²  ⇒ y₀(t) = 1/(t² + 1/y₀(0)),   y₁' = λ y₁  ⇒ y₁(t) = y₁(0)e^{λt}.
/// With y₀(0) = 0.5 + 0.5i, t² + 1/y₀(0) = t² + 1 − i never vanishes (|·| ≥ 1).
struct Known {
    lambda: C64,
}

const Y0: [C64; 2] = [C64::new(0.5, 0.5), C64::new(0.6, -0.8)];

impl Known {
    fn exact(&self, t: f64) -> [C64; 2] {
        let inv = C64::new(1.0, 0.0) / Y0[0];
        [
            C64::new(1.0, 0.0) / (inv + t * t),
            Y0[1] * (self.lambda * t).exp(),
        ]
    }
}

impl Rhs for Known {
    fn len(&self) -> usize {
        2
    }
    fn eval(&mut self, t: f64, y: &[C64], dy: &mut [C64]) {
        dy[0] = -2.0 * t * y[0] * y[0];
        dy[1] = self.lambda * y[1];
    }
}

const LAMBDA: C64 = C64::new(-0.5, 2.0);

/// Options that make every step exactly `h`: the first step is h, h_max = h caps growth, and
/// tolerances so loose that no step is rejected (asserted by the callers via `stats.rejected`).
fn fixed_step(h: f64) -> DopriOptions {
    DopriOptions {
        rtol: 1e6,
        atol: 1e6,
        h_max: h,
        h_init: Some(h),
        par: Par::Seq,
        ..Default::default()
    }
}

fn sci(v: &[f64]) -> String {
    let parts: Vec<String> = v.iter().map(|x| format!("{x:.2e}")).collect();
    parts.join(" ")
}

/// Least-squares slope of log(err) against log(h).
fn slope(hs: &[f64], errs: &[f64]) -> f64 {
    let xs: Vec<f64> = hs.iter().map(|h| h.ln()).collect();
    let ys: Vec<f64> = errs.iter().map(|e| e.ln()).collect();
    let n = xs.len() as f64;
    let (mx, my) = (xs.iter().sum::<f64>() / n, ys.iter().sum::<f64>() / n);
    let sxy: f64 = xs.iter().zip(&ys).map(|(x, y)| (x - mx) * (y - my)).sum();
    let sxx: f64 = xs.iter().map(|x| (x - mx).powi(2)).sum();
    sxy / sxx
}

/// Global error at T with a fixed step h scales like h⁵ (order 5 of the propagated solution),
/// both for y' = λy with complex λ and for the non-linear, non-autonomous y' = −2ty².
/// Source: Dormand & Prince (1980); Hairer, Nørsett & Wanner (1993), §II.5 (from memory).
#[test]
fn fixed_step_global_error_is_fifth_order() {
    // h from 1/8 to 1/64: in the asymptotic regime (error ratios per halving 38, 36, 34; the
    // next halving still gives 34) and the smallest error (~2e-13) is far above rounding
    let t_end = 1.0;
    let hs: Vec<f64> = [8, 16, 32, 64].iter().map(|&n| t_end / n as f64).collect();
    let mut errs = [Vec::new(), Vec::new()];
    for &h in &hs {
        let mut rhs = Known { lambda: LAMBDA };
        let mut last = [C64::new(0.0, 0.0); 2];
        let mut scratch = vec![C64::new(0.0, 0.0); 2];
        let stats = integrate(
            &mut rhs,
            0.0,
            &Y0,
            &[t_end],
            fixed_step(h),
            &mut scratch,
            |_, _, y, _| last.copy_from_slice(y),
        )
        .unwrap();
        assert_eq!(stats.rejected, 0);
        assert_eq!(stats.steps, (t_end / h).round() as u64, "not a fixed step");
        let exact = rhs.exact(t_end);
        for c in 0..2 {
            errs[c].push((last[c] - exact[c]).norm());
        }
    }
    for (c, name) in [(0, "y' = −2ty²"), (1, "y' = λy")] {
        let p = slope(&hs, &errs[c]);
        eprintln!(
            "order: {name}: errors {}, fitted slope {p:.3}",
            sci(&errs[c])
        );
        // the smallest error must stay well above rounding for the fit to mean anything
        assert!(errs[c][3] > 100.0 * f64::EPSILON, "{:?}", errs[c]);
        assert!((p - 5.0).abs() <= 0.3, "{name}: slope {p}");
    }
}

/// Dense output. (i) Local: one step of size h from the exact value, interpolated at mid-step:
/// the continuous extension is of order 4, so its local error is O(h⁵) (slope 5 ± 0.3; a wrong
/// coefficient would lower it). (ii) Global: interpolated values at the midpoints of a fixed-step
/// run are accurate to O(h⁴) or better (slope ≥ 4 − 0.3), and exact at step ends.
/// Source: Hairer, Nørsett & Wanner (1993), §II.6, DOPRI5's continuous extension (from memory).
#[test]
fn dense_output_accuracy() {
    // (i) one step from the exact value at t0 = 0.3, interpolate at t0 + h/2
    let t0 = 0.3;
    let hs = [0.2, 0.1, 0.05, 0.025];
    let mut local = [Vec::new(), Vec::new()];
    for &h in &hs {
        let mut rhs = Known { lambda: LAMBDA };
        let y0 = rhs.exact(t0);
        let mut ode = Dopri5::new(&mut rhs, t0, &y0, fixed_step(h)).unwrap();
        let out = ode.step(&mut rhs, t0 + 10.0).unwrap();
        assert!(matches!(out, StepOutcome::Accepted { .. }), "{out:?}");
        let mut mid = vec![C64::new(0.0, 0.0); 2];
        ode.interpolate(t0 + h / 2.0, &mut mid);
        let exact = rhs.exact(t0 + h / 2.0);
        // the interpolant reproduces both ends of the step
        let mut start = vec![C64::new(0.0, 0.0); 2];
        ode.interpolate(t0, &mut start);
        assert!((start[0] - y0[0]).norm() + (start[1] - y0[1]).norm() <= 8.0 * f64::EPSILON);
        let mut end = [C64::new(0.0, 0.0); 2];
        ode.interpolate(t0 + h, &mut end);
        assert!((end[0] - ode.y()[0]).norm() + (end[1] - ode.y()[1]).norm() <= 8.0 * f64::EPSILON);
        for c in 0..2 {
            local[c].push((mid[c] - exact[c]).norm());
        }
    }
    for c in 0..2 {
        let p = slope(&hs, &local[c]);
        eprintln!(
            "dense output, one step, component {c}: errors {}, slope {p:.3}",
            sci(&local[c])
        );
        assert!(local[c][3] > 1e4 * f64::EPSILON);
        assert!((p - 5.0).abs() <= 0.3, "local interpolation slope {p}");
    }

    // (ii) midpoints of every step of a fixed-step run
    let t_end = 4.0;
    let hs: Vec<f64> = [16, 32, 64, 128]
        .iter()
        .map(|&n| t_end / n as f64)
        .collect();
    let mut global = Vec::new();
    for &h in &hs {
        let n = (t_end / h).round() as usize;
        let times: Vec<f64> = (0..n).map(|k| (k as f64 + 0.5) * h).collect();
        let mut rhs = Known { lambda: LAMBDA };
        let mut scratch = vec![C64::new(0.0, 0.0); 2];
        let mut worst = 0.0f64;
        let reference = Known { lambda: LAMBDA };
        let stats = integrate(
            &mut rhs,
            0.0,
            &Y0,
            &times,
            fixed_step(h),
            &mut scratch,
            |_, t, y, _| {
                let e = reference.exact(t);
                worst = worst.max((y[0] - e[0]).norm()).max((y[1] - e[1]).norm());
            },
        )
        .unwrap();
        assert_eq!(stats.rejected, 0);
        global.push(worst);
    }
    let p = slope(&hs, &global);
    eprintln!(
        "dense output at midpoints: max errors {}, slope {p:.3}",
        sci(&global)
    );
    assert!(p >= 4.0 - 0.3, "dense output slope {p}");
}

/// The Arenstorf orbit of the restricted three-body problem (Hairer, Nørsett & Wanner, Solving
/// ODEs I, §II.0; from memory): with μ = 0.012277471, y(0) = (0.994, 0, 0,
/// −2.00158510637908252240537862224), the solution is periodic with period
/// T = 17.0652165601579625588917206249. Written on complex vectors with zero imaginary parts.
struct Arenstorf;

const MU: f64 = 0.012277471;
// the published digits, quoted in full (more than an f64 holds)
#[allow(clippy::excessive_precision)]
const PERIOD: f64 = 17.065_216_560_157_962_558_891_720_624_9;
#[allow(clippy::excessive_precision)]
const ARENSTORF_Y0: [f64; 4] = [0.994, 0.0, 0.0, -2.001_585_106_379_082_522_405_378_622_24];

impl Rhs for Arenstorf {
    fn len(&self) -> usize {
        4
    }
    fn eval(&mut self, _t: f64, y: &[C64], dy: &mut [C64]) {
        let (x, v, xd, vd) = (y[0].re, y[1].re, y[2].re, y[3].re);
        let mu1 = 1.0 - MU;
        let d1 = ((x + MU).powi(2) + v * v).powf(1.5);
        let d2 = ((x - mu1).powi(2) + v * v).powf(1.5);
        dy[0] = C64::new(xd, 0.0);
        dy[1] = C64::new(vd, 0.0);
        dy[2] = C64::new(
            x + 2.0 * vd - mu1 * (x + MU) / d1 - MU * (x - mu1) / d2,
            0.0,
        );
        dy[3] = C64::new(v - 2.0 * xd - mu1 * v / d1 - MU * v / d2, 0.0);
    }
}

/// Returns max |y(T) − y(0)| over the four components after one period, and the stats.
fn arenstorf_return(tol: f64) -> (f64, cavern_evolve::Stats) {
    let y0: Vec<C64> = ARENSTORF_Y0.iter().map(|&v| C64::new(v, 0.0)).collect();
    let mut end = [C64::new(0.0, 0.0); 4];
    let mut scratch = vec![C64::new(0.0, 0.0); 4];
    let opts = DopriOptions {
        rtol: tol,
        atol: tol,
        par: Par::Seq,
        ..Default::default()
    };
    let stats = integrate(
        &mut Arenstorf,
        0.0,
        &y0,
        &[PERIOD],
        opts,
        &mut scratch,
        |_, _, y, _| end.copy_from_slice(y),
    )
    .unwrap();
    assert!(end.iter().all(|z| z.im == 0.0), "imaginary parts appeared");
    let err = end
        .iter()
        .zip(&y0)
        .map(|(a, b)| (a - b).norm())
        .fold(0.0, f64::max);
    (err, stats)
}

/// The Arenstorf orbit closes after one period at rtol = atol = 1e-10. The orbit passes close to
/// the "moon", where errors are strongly amplified (Hairer, Nørsett & Wanner show DOPRI5 needs
/// tight tolerances here), so the global error is not a small multiple of the tolerance: we
/// require 1e-5, i.e. an amplification of the tolerance by at most 10⁵ (observed: 2.4e-6).
#[test]
fn arenstorf_orbit_closes() {
    let (err, stats) = arenstorf_return(1e-10);
    eprintln!(
        "Arenstorf at tol 1e-10: return error {err:.2e}; {} steps, {} rejected",
        stats.steps, stats.rejected
    );
    assert!(err <= 1e-5, "return error {err:e}");
}

/// Adaptive error control responds to the tolerances: tightening rtol = atol from 1e-6 to 1e-9
/// (1000×) must reduce the global error by at least 100× ("tolerance proportionality": Hairer,
/// Nørsett & Wanner (1993), §II.4; from memory), on the Arenstorf orbit and on the test problem
/// with a known solution. A controller that ignored the tolerances would fail this.
#[test]
fn error_decreases_with_tolerance() {
    let (loose, s_loose) = arenstorf_return(1e-6);
    let (tight, s_tight) = arenstorf_return(1e-9);
    eprintln!(
        "Arenstorf: tol 1e-6 → err {loose:.2e} ({} steps); tol 1e-9 → err {tight:.2e} ({} steps); ratio {:.0}",
        s_loose.steps,
        s_tight.steps,
        loose / tight
    );
    assert!(tight * 100.0 <= loose, "{loose:e} → {tight:e}");
    assert!(s_tight.steps > s_loose.steps);

    let known_err = |tol: f64| -> f64 {
        let mut rhs = Known { lambda: LAMBDA };
        let mut end = [C64::new(0.0, 0.0); 2];
        let mut scratch = vec![C64::new(0.0, 0.0); 2];
        let opts = DopriOptions {
            rtol: tol,
            atol: tol,
            par: Par::Seq,
            ..Default::default()
        };
        integrate(
            &mut rhs,
            0.0,
            &Y0,
            &[6.0],
            opts,
            &mut scratch,
            |_, _, y, _| end.copy_from_slice(y),
        )
        .unwrap();
        let e = rhs.exact(6.0);
        (end[0] - e[0]).norm().max((end[1] - e[1]).norm())
    };
    let (loose, tight) = (known_err(1e-6), known_err(1e-9));
    eprintln!(
        "known solution: tol 1e-6 → err {loose:.2e}; tol 1e-9 → err {tight:.2e}; ratio {:.0}",
        loose / tight
    );
    assert!(tight * 100.0 <= loose, "{loose:e} → {tight:e}");
    // and each error is of the order of its tolerance (at most 100×, as in `common::Run::tol`)
    assert!(loose <= 100.0 * 1e-6 && tight <= 100.0 * 1e-9);
}
