//! Photon-counting analysis of the quantum jumps of a trajectory run: click counts per channel in
//! time bins, the waiting-time distribution and the intensity correlation g²(τ) of one channel.
//!
//! Every jump of a channel is a "click" of an ideal detector watching that channel (unit
//! efficiency, no dead time): the jump records of the Monte Carlo wave-function unravelling are
//! the photocounting records of direct detection (H. J. Carmichael, *An Open Systems Approach to
//! Quantum Optics*, Springer 1993; from memory).
//!
//! g²(τ) estimator (standard for photon-counting records; see e.g. R. Loudon, *The Quantum Theory of
//! Light*, 3rd ed., §6; from memory). Only clicks in the analysed window [t_a, T] are used
//! (t_a = `correlate_after`, T the end of the run, T_w = T − t_a), where the process is assumed
//! stationary. Over all N trajectories, every ordered pair of clicks i < j of the same trajectory
//! with delay τ = t_j − t_i in a delay bin [τ_k, τ_k + Δ) is counted (P_k pairs). The mean click
//! rate is R = (clicks in the window) / (N T_w). For a stationary process with rate R and
//! correlation g²(τ), the expected pair count is N R² ∫ g²(τ)(T_w − τ) dτ over the bin, so
//!
//! ```text
//! g²_k = P_k / (N · Δ · (T_w − τ̄_k) · R²),   τ̄_k = τ_k + Δ/2 (the bin centre)
//! ```
//!
//! which is exact (in expectation) for a Poisson process (g² = 1) and for any g² that is linear
//! across a bin. The factor T_w − τ̄ counts the start times that leave room for the delay.

use cavern_evolve::JumpRecord;

/// The analysis of one correlated channel.
#[derive(Clone, Debug, PartialEq)]
pub struct Correlation {
    /// Index of the channel (into the run's channel list).
    pub channel: usize,
    /// Start of the analysed window (time unit).
    pub window_start: f64,
    /// End of the analysed window = end of the run (time unit).
    pub window_end: f64,
    /// Clicks of the channel inside the window, over all trajectories.
    pub clicks: u64,
    /// Mean click rate R in the window, per time unit (clicks / (N · T_w)).
    pub mean_rate: f64,
    /// Edges of the waiting-time bins (time unit), `n + 1` values from 0 to T_w.
    pub waiting_edges: Vec<f64>,
    /// Normalised waiting-time density (per time unit): histogram of the intervals between
    /// successive clicks of a trajectory inside the window, divided by (intervals · bin width).
    /// NaN when there are no intervals.
    pub waiting_density: Vec<f64>,
    /// Number of intervals in the histogram.
    pub intervals: u64,
    /// Centres of the delay bins [kΔ, (k+1)Δ) (time unit).
    pub delay: Vec<f64>,
    /// Pairs of clicks per delay bin.
    pub pairs: Vec<i64>,
    /// g²(τ) per delay bin (NaN when the window holds no click).
    pub g2: Vec<f64>,
}

/// Click counts of every channel and the correlation analysis of one channel.
#[derive(Clone, Debug, PartialEq)]
pub struct ClickAnalysis {
    /// Bin edges (time unit), `n_bins + 1` values from 0 to the end of the run; the last bin may be
    /// shorter than the others.
    pub bin_edges: Vec<f64>,
    /// Counts summed over trajectories, `[channel][bin]` row-major.
    pub counts: Vec<i64>,
    /// Click rate per trajectory, `counts / (N · bin width)`, per time unit, `[channel][bin]`.
    pub rate: Vec<f64>,
    /// Total jumps per channel.
    pub per_channel: Vec<u64>,
    /// The correlated channel, if any.
    pub correlation: Option<Correlation>,
}

/// What to analyse.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct ClickSettings {
    /// Number of trajectories N.
    pub trajectories: usize,
    /// Number of jump channels.
    pub channels: usize,
    /// End of the run T (the run starts at 0).
    pub t_end: f64,
    /// Bin width Δ of counts, waiting times and delays.
    pub bin_width: f64,
    /// Channel to correlate.
    pub correlate: Option<usize>,
    /// Start of the analysed window.
    pub correlate_after: f64,
    /// Largest delay (rounded down to whole bins, at least one bin).
    pub max_delay: f64,
}

/// Equal bins of width `w` covering [0, span]; the last one is cut at `span`.
fn edges(span: f64, w: f64) -> Vec<f64> {
    let n = ((span / w) - 1e-9).ceil().max(1.0) as usize;
    let mut e: Vec<f64> = (0..n).map(|k| k as f64 * w).collect();
    e.push(span);
    e
}

/// Index of the bin holding `x` (clamped to the last bin).
fn bin_of(x: f64, w: f64, n: usize) -> usize {
    ((x / w).floor().max(0.0) as usize).min(n - 1)
}

/// Analyse the jump records.
pub fn analyse(jumps: &[JumpRecord], s: &ClickSettings) -> ClickAnalysis {
    let n_traj = s.trajectories as f64;
    let bin_edges = edges(s.t_end, s.bin_width);
    let n_bins = bin_edges.len() - 1;
    let mut counts = vec![0i64; s.channels * n_bins];
    let mut per_channel = vec![0u64; s.channels];
    for j in jumps {
        counts[j.channel * n_bins + bin_of(j.time, s.bin_width, n_bins)] += 1;
        per_channel[j.channel] += 1;
    }
    let rate = counts
        .iter()
        .enumerate()
        .map(|(i, &c)| {
            let b = i % n_bins;
            c as f64 / (n_traj * (bin_edges[b + 1] - bin_edges[b]))
        })
        .collect();
    let correlation = s.correlate.map(|ch| correlate(jumps, s, ch));
    ClickAnalysis {
        bin_edges,
        counts,
        rate,
        per_channel,
        correlation,
    }
}

fn correlate(jumps: &[JumpRecord], s: &ClickSettings, ch: usize) -> Correlation {
    let (t_a, t_end, w) = (s.correlate_after, s.t_end, s.bin_width);
    let window = t_end - t_a;
    // clicks of the channel inside the window, by trajectory then time
    let mut clicks: Vec<(u64, f64)> = jumps
        .iter()
        .filter(|j| j.channel == ch && j.time >= t_a && j.time <= t_end)
        .map(|j| (j.trajectory, j.time))
        .collect();
    clicks.sort_by(|a, b| a.0.cmp(&b.0).then(a.1.total_cmp(&b.1)));
    let n_traj = s.trajectories as f64;
    let mean_rate = clicks.len() as f64 / (n_traj * window);

    let waiting_edges = edges(window, w);
    let n_w = waiting_edges.len() - 1;
    let mut waits = vec![0u64; n_w];
    let mut intervals = 0u64;
    let n_d = ((s.max_delay / w) + 1e-9).floor().max(1.0) as usize;
    let span = n_d as f64 * w;
    let mut pairs = vec![0i64; n_d];
    for (i, &(tr, ti)) in clicks.iter().enumerate() {
        if let Some(&(tr2, t2)) = clicks.get(i + 1) {
            if tr2 == tr {
                waits[bin_of(t2 - ti, w, n_w)] += 1;
                intervals += 1;
            }
        }
        for &(trj, tj) in &clicks[i + 1..] {
            let tau = tj - ti;
            if trj != tr || tau >= span {
                break;
            }
            pairs[bin_of(tau, w, n_d)] += 1;
        }
    }
    let waiting_density = waits
        .iter()
        .enumerate()
        .map(|(k, &c)| {
            if intervals == 0 {
                f64::NAN
            } else {
                c as f64 / (intervals as f64 * (waiting_edges[k + 1] - waiting_edges[k]))
            }
        })
        .collect();
    let delay: Vec<f64> = (0..n_d).map(|k| (k as f64 + 0.5) * w).collect();
    let g2 = pairs
        .iter()
        .zip(&delay)
        .map(|(&p, &tau)| {
            let norm = n_traj * w * (window - tau) * mean_rate * mean_rate;
            if norm > 0.0 {
                p as f64 / norm
            } else {
                f64::NAN
            }
        })
        .collect();
    Correlation {
        channel: ch,
        window_start: t_a,
        window_end: t_end,
        clicks: clicks.len() as u64,
        mean_rate,
        waiting_edges,
        waiting_density,
        intervals,
        delay,
        pairs,
        g2,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn rec(trajectory: u64, time: f64, channel: usize) -> JumpRecord {
        JumpRecord {
            trajectory,
            time,
            channel,
        }
    }

    /// Deterministic uniform numbers in (0, 1) (SplitMix64), so the test needs no RNG crate.
    struct SplitMix(u64);
    impl SplitMix {
        fn next(&mut self) -> f64 {
            self.0 = self.0.wrapping_add(0x9E37_79B9_7F4A_7C15);
            let mut z = self.0;
            z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
            z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
            z ^= z >> 31;
            ((z >> 11) as f64 + 0.5) / (1u64 << 53) as f64
        }
    }

    #[test]
    fn counts_rates_and_pairs_by_hand() {
        // two trajectories, channel 1 clicks at 0.1, 0.4, 0.95 (traj 0) and 0.5 (traj 1); one
        // channel-0 click. Bins of 0.25 over [0, 1] (no time or delay on a bin edge).
        let jumps = [
            rec(0, 0.1, 1),
            rec(0, 0.4, 1),
            rec(0, 0.6, 0),
            rec(0, 0.95, 1),
            rec(1, 0.5, 1),
        ];
        let s = ClickSettings {
            trajectories: 2,
            channels: 2,
            t_end: 1.0,
            bin_width: 0.25,
            correlate: Some(1),
            correlate_after: 0.0,
            max_delay: 0.5,
        };
        let a = analyse(&jumps, &s);
        assert_eq!(a.bin_edges, vec![0.0, 0.25, 0.5, 0.75, 1.0]);
        assert_eq!(a.counts, vec![0, 0, 1, 0, 1, 1, 1, 1]);
        assert_eq!(a.per_channel, vec![1, 4]);
        assert_eq!(a.rate[4], 1.0 / (2.0 * 0.25));
        let c = a.correlation.unwrap();
        assert_eq!(c.clicks, 4);
        assert_eq!(c.mean_rate, 2.0);
        // delays within trajectory 0: 0.3 (bin 1), 0.55 and 0.85 (beyond 0.5)
        assert_eq!(c.pairs, vec![0, 1]);
        assert_eq!(c.delay, vec![0.125, 0.375]);
        // g² = 1 / (2 · 0.25 · (1 − 0.375) · 4)
        assert!((c.g2[1] - 1.0 / (2.0 * 0.25 * 0.625 * 4.0)).abs() < 1e-15);
        // intervals 0.3 and 0.55 (trajectory 1 has a single click)
        assert_eq!(c.intervals, 2);
        let dens: f64 = c
            .waiting_density
            .iter()
            .zip(c.waiting_edges.windows(2))
            .map(|(d, e)| d * (e[1] - e[0]))
            .sum();
        assert!((dens - 1.0).abs() < 1e-12);
    }

    #[test]
    fn last_bin_is_cut_at_the_end_of_the_run() {
        let e = edges(1.0, 0.3);
        assert_eq!(e.len(), 5);
        assert!((e[3] - 0.9).abs() < 1e-15 && e[4] == 1.0);
        // an exact multiple does not create an empty sliver
        assert_eq!(edges(1.0, 0.25).len(), 5);
        assert_eq!(edges(0.9, 0.3).len(), 4);
    }

    #[test]
    fn poisson_clicks_give_flat_g2_and_exponential_waiting_times() {
        // A Poisson process of rate r: g²(τ) = 1 and waiting-time density r e^{−rτ} (textbook
        // properties of the Poisson process).
        let (r, t_end, n) = (2.0, 50.0, 400);
        let mut rng = SplitMix(42);
        let mut jumps = Vec::new();
        for k in 0..n {
            let mut t = 0.0;
            loop {
                t += -rng.next().ln() / r;
                if t > t_end {
                    break;
                }
                jumps.push(rec(k, t, 0));
            }
        }
        let s = ClickSettings {
            trajectories: n as usize,
            channels: 1,
            t_end,
            bin_width: 0.1,
            correlate: Some(0),
            correlate_after: 5.0,
            max_delay: 2.0,
        };
        let c = analyse(&jumps, &s).correlation.unwrap();
        assert!((c.mean_rate - r).abs() < 0.02 * r, "{}", c.mean_rate);
        // each delay bin holds ~ N Δ T_w R² ≈ 7200 pairs: 1.2 % relative error
        for (k, g) in c.g2.iter().enumerate() {
            assert!((g - 1.0).abs() < 0.06, "bin {k}: g2 = {g}");
        }
        let mean_g2: f64 = c.g2.iter().sum::<f64>() / c.g2.len() as f64;
        assert!((mean_g2 - 1.0).abs() < 0.01, "{mean_g2}");
        // waiting-time density near 0: r (bin average of r e^{−rτ} over [0, 0.1])
        let want = (1.0 - (-r * 0.1f64).exp()) / 0.1;
        assert!(
            (c.waiting_density[0] - want).abs() < 0.06 * want,
            "{}",
            c.waiting_density[0]
        );
    }

    #[test]
    fn no_clicks_give_nan_not_a_panic() {
        let s = ClickSettings {
            trajectories: 3,
            channels: 1,
            t_end: 2.0,
            bin_width: 0.5,
            correlate: Some(0),
            correlate_after: 0.0,
            max_delay: 1.0,
        };
        let a = analyse(&[], &s);
        assert_eq!(a.counts, vec![0; 4]);
        let c = a.correlation.unwrap();
        assert!(c.g2.iter().all(|g| g.is_nan()));
        assert!(c.waiting_density.iter().all(|g| g.is_nan()));
    }
}
