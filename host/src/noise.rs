//! Noise records: white-noise level, mains hum, drift.
//!
//! The spectrum is a Welch estimate (Hann window, 50 % overlap) computed with `rustfft`; hum
//! lines are measured by a joint linear least-squares fit of a trend plus sines and cosines at
//! 50 and 60 Hz and their 2nd and 3rd harmonics, so that one mains frequency does not leak into
//! the other in a record that holds a non-integer number of cycles.

use nalgebra::{DMatrix, DVector};
use rustfft::{num_complex::Complex, FftPlanner};

/// Mains frequencies looked for, Hz.
pub const MAINS_HZ: [f64; 2] = [50.0, 60.0];
/// Harmonics of each mains frequency fitted (the fundamental included).
pub const HARMONICS: usize = 3;
/// Control frequencies, Hz: near the mains lines but on none of their harmonics. A real hum
/// line stands well above them; broadband drift (a node still recovering) does not.
pub const CONTROL_HZ: [f64; 4] = [37.0, 43.0, 77.0, 83.0];

/// What a noise record says.
#[derive(Debug, Clone, PartialEq)]
pub struct NoiseSummary {
    /// Mean code.
    pub mean_lsb: f64,
    /// Rms of white noise and hum together, LSB (slow drift excluded).
    pub rms_lsb: f64,
    /// White-noise rms (trend and hum lines removed, from first differences), LSB.
    pub white_rms_lsb: f64,
    /// Drift over the record, LSB per second.
    pub drift_lsb_per_s: f64,
    /// Fundamental amplitude per mains frequency, LSB (harmonics folded in as rms sum).
    pub hum_lsb: [f64; 2],
    /// Largest amplitude at the control frequencies [`CONTROL_HZ`], LSB.
    pub control_lsb: f64,
    /// Standard error of a hum amplitude under white noise, LSB.
    pub hum_se_lsb: f64,
    /// Welch power spectral density, (frequency Hz, LSB²/Hz), one-sided.
    pub psd: Vec<(f64, f64)>,
    /// Frequency of the strongest spectral line above 10 Hz, Hz.
    pub peak_hz: Option<f64>,
}

/// Analyses `codes` taken every `period_s`.
pub fn analyse(codes: &[u16], period_s: f64) -> Option<NoiseSummary> {
    let n = codes.len();
    if n < 32 {
        return None;
    }
    let x: Vec<f64> = codes.iter().map(|&c| f64::from(c)).collect();
    let mean = x.iter().sum::<f64>() / n as f64;
    let t: Vec<f64> = (0..n).map(|i| i as f64 * period_s).collect();
    let t_mid = t[n - 1] / 2.0;
    // Trend-only fit.
    let trend_cols = 2;
    // A record too short to tell the control frequencies from the mains lines (a check's
    // 50 ms record) fits the mains lines alone; its hum amplitudes' standard error then comes
    // from the fit's covariance, which says how well the record separates 50 from 60 Hz.
    let controls = if (n as f64) * period_s >= CONTROL_SPAN_S { CONTROL_HZ.len() } else { 0 };
    let cols = trend_cols + MAINS_HZ.len() * HARMONICS * 2 + controls * 2;
    let mut a = DMatrix::zeros(n, cols);
    for i in 0..n {
        a[(i, 0)] = 1.0;
        a[(i, 1)] = t[i] - t_mid;
        let mut c = trend_cols;
        for &f in &MAINS_HZ {
            for h in 1..=HARMONICS {
                let w = 2.0 * std::f64::consts::PI * f * h as f64 * t[i];
                a[(i, c)] = w.sin();
                a[(i, c + 1)] = w.cos();
                c += 2;
            }
        }
        for &f in &CONTROL_HZ[..controls] {
            let w = 2.0 * std::f64::consts::PI * f * t[i];
            a[(i, c)] = w.sin();
            a[(i, c + 1)] = w.cos();
            c += 2;
        }
    }
    let y = DVector::from_vec(x.clone());
    let trend = a.columns(0, trend_cols).into_owned();
    let tc = trend.clone().svd(true, true).solve(&y, 1e-12).ok()?;
    let detrended = &y - &trend * &tc;

    let full = a.clone().svd(true, true).solve(&y, 1e-12).ok()?;
    let resid = &y - &a * &full;
    // White noise from first differences of the residual: a node still recovering from an
    // earlier experiment drifts along a curve no straight trend removes, and differencing
    // cancels such slow drift while keeping white noise (var(Δx) = 2σ²).
    let diffs: Vec<f64> = resid.as_slice().windows(2).map(|w| w[1] - w[0]).collect();
    let dmean = diffs.iter().sum::<f64>() / diffs.len() as f64;
    let white = (diffs.iter().map(|d| (d - dmean).powi(2)).sum::<f64>() / (diffs.len() as f64 - 1.0) / 2.0).sqrt();
    let mut hum = [0.0; 2];
    let mut c = trend_cols;
    for h_f in hum.iter_mut() {
        let mut p = 0.0;
        for _ in 0..HARMONICS {
            p += full[c] * full[c] + full[c + 1] * full[c + 1];
            c += 2;
        }
        *h_f = p.sqrt();
    }
    let control = CONTROL_HZ[..controls]
        .iter()
        .enumerate()
        .map(|(k, _)| {
            let j = c + 2 * k;
            (full[j] * full[j] + full[j + 1] * full[j + 1]).sqrt()
        })
        .fold(0.0, f64::max);
    // Noise as a reading sees it: white noise plus the hum lines, without slow drift.
    let rms = (white * white + hum.iter().map(|h| h * h / 2.0).sum::<f64>()).sqrt();
    let psd = welch(detrended.as_slice(), period_s);
    let peak_hz = psd.iter().filter(|(f, _)| *f > 10.0).max_by(|a, b| a.1.total_cmp(&b.1)).map(|&(f, _)| f);
    Some(NoiseSummary {
        mean_lsb: mean,
        rms_lsb: rms,
        white_rms_lsb: white,
        drift_lsb_per_s: tc[1],
        hum_lsb: hum,
        control_lsb: control,
        hum_se_lsb: if controls > 0 {
            white * (2.0 / n as f64).sqrt()
        } else {
            // The worst-determined line coefficient, from (AᵀA)⁻¹ scaled by the white variance.
            let inv = (a.transpose() * &a).try_inverse()?;
            let worst = (trend_cols..cols).map(|j| inv[(j, j)]).fold(0.0, f64::max);
            white * worst.sqrt()
        },
        psd,
        peak_hz,
    })
}

/// Shortest record, s, whose analysis fits the control frequencies beside the mains lines (37
/// and 43 Hz stand 7 Hz from 50 Hz: 1/7 Hz ≈ 143 ms separates them).
pub const CONTROL_SPAN_S: f64 = 0.2;

/// Smallest hum amplitude worth flagging, LSB.
pub const HUM_MIN_LSB: f64 = 0.5;

/// Which mains frequencies ([`MAINS_HZ`]) a noise record shows as a line of its own: above
/// [`HUM_MIN_LSB`] and six standard errors, at least a quarter of the strongest (one mains
/// frequency leaks a little into the other on a drifting node), and four times the control
/// frequencies (a line stands above them; broadband drift does not).
pub fn hum_present(n: &NoiseSummary) -> [bool; 2] {
    let strongest = n.hum_lsb.iter().copied().fold(0.0, f64::max);
    n.hum_lsb.map(|a| a > HUM_MIN_LSB && a > 6.0 * n.hum_se_lsb && a >= 0.25 * strongest && a > 4.0 * n.control_lsb)
}

/// Widest relative deviation of the mains frequency searched, around its nominal value
/// (grids hold their frequency within a few tenths of a per cent; common practice, no source).
pub const MAINS_TOLERANCE: f64 = 0.004;

/// The hum of a noise record on the board's clock: `codes` read at board times `times_s`, with
/// lines at each of `mains_hz` and its harmonics, the frequency refined within
/// [`MAINS_TOLERANCE`] (one scale for all lines: the grid's frequency moves them together).
/// `span_s` is how far from the record the waveform will be used: the frequency's uncertainty
/// grows into a phase error over it, which goes into [`crate::model::Hum::se_volts`].
pub fn fit_hum(
    codes: &[f64],
    times_s: &[f64],
    mains_hz: &[f64],
    volts_per_lsb: f64,
    span_s: f64,
) -> Option<crate::model::Hum> {
    let n = codes.len();
    if n < 32 || times_s.len() != n || mains_hz.is_empty() {
        return None;
    }
    let t_mid = (times_s[0] + times_s[n - 1]) / 2.0;
    let cols = 3 + mains_hz.len() * HARMONICS * 2;
    let design = |scale: f64| {
        let mut a = DMatrix::zeros(n, cols);
        for (i, &t) in times_s.iter().enumerate() {
            let u = t - t_mid;
            a[(i, 0)] = 1.0;
            a[(i, 1)] = u;
            a[(i, 2)] = u * u;
            let mut c = 3;
            for &f in mains_hz {
                for h in 1..=HARMONICS {
                    let w = 2.0 * std::f64::consts::PI * f * scale * h as f64 * t;
                    a[(i, c)] = w.sin();
                    a[(i, c + 1)] = w.cos();
                    c += 2;
                }
            }
        }
        a
    };
    let y = DVector::from_column_slice(codes);
    let solve = |scale: f64| -> Option<(f64, DVector<f64>)> {
        let a = design(scale);
        let x = a.clone().svd(true, true).solve(&y, 1e-12).ok()?;
        let r = &y - &a * &x;
        Some((r.norm_squared(), x))
    };
    // The residual is smooth and single-valued in the scale over a window much narrower than
    // the record's frequency resolution: a coarse scan, then golden-section search.
    let rss = |k: f64| solve(k).map_or(f64::INFINITY, |r| r.0);
    let (lo, hi) = (1.0 - MAINS_TOLERANCE, 1.0 + MAINS_TOLERANCE);
    let grid: Vec<f64> = (0..=16).map(|i| lo + (hi - lo) * f64::from(i) / 16.0).collect();
    let best = grid.iter().copied().min_by(|a, b| rss(*a).total_cmp(&rss(*b)))?;
    let step = (hi - lo) / 16.0;
    let (mut a, mut b) = ((best - step).max(lo), (best + step).min(hi));
    let g = (5f64.sqrt() - 1.0) / 2.0;
    for _ in 0..40 {
        let (c, d) = (b - g * (b - a), a + g * (b - a));
        if rss(c) < rss(d) {
            b = d;
        } else {
            a = c;
        }
    }
    let scale = (a + b) / 2.0;
    let (rss_best, x) = solve(scale)?;
    let sigma = (rss_best / (n - cols).max(1) as f64).sqrt();
    let mut lines = Vec::new();
    let mut c = 3;
    let mut strongest: f64 = 0.0;
    for &f in mains_hz {
        for h in 1..=HARMONICS {
            let (s_lsb, c_lsb) = (x[c], x[c + 1]);
            strongest = strongest.max(s_lsb.hypot(c_lsb));
            lines.push((f * scale * h as f64, s_lsb * volts_per_lsb, c_lsb * volts_per_lsb));
            c += 2;
        }
    }
    // Cramér–Rao bound of a sinusoid's frequency in white noise, σ_ω ≥ √12·σ/(A·N^{3/2}·Δt)
    // (Rife and Boorstyn, IEEE Trans. Inf. Theory 20(5), 1974 — from memory), and of each of
    // its two amplitudes, σ·√(2/N).
    let dt = (times_s[n - 1] - times_s[0]) / (n - 1) as f64;
    let sd_omega = if strongest > 0.0 { 12f64.sqrt() * sigma / (strongest * (n as f64).powf(1.5) * dt) } else { 0.0 };
    let phase_lsb = strongest * sd_omega * span_s.abs();
    let amp_lsb = sigma * (2.0 / n as f64).sqrt() * ((lines.len() as f64).sqrt());
    Some(crate::model::Hum { lines, se_volts: phase_lsb.hypot(amp_lsb) * volts_per_lsb })
}

/// Welch PSD with Hann segments of up to 1024 points and 50 % overlap; one-sided, LSB²/Hz.
pub fn welch(x: &[f64], period_s: f64) -> Vec<(f64, f64)> {
    if x.len() < 8 {
        return Vec::new();
    }
    let seg = 1usize << x.len().min(1024).ilog2();
    let hop = seg / 2;
    let window: Vec<f64> =
        (0..seg).map(|i| 0.5 - 0.5 * (2.0 * std::f64::consts::PI * i as f64 / seg as f64).cos()).collect();
    let wpow: f64 = window.iter().map(|w| w * w).sum();
    let fft = FftPlanner::new().plan_fft_forward(seg);
    let mut acc = vec![0.0; seg / 2 + 1];
    let mut segments = 0;
    let mut start = 0;
    while start + seg <= x.len() {
        let mut buf: Vec<Complex<f64>> = (0..seg).map(|i| Complex::new(x[start + i] * window[i], 0.0)).collect();
        fft.process(&mut buf);
        for (k, a) in acc.iter_mut().enumerate() {
            *a += buf[k].norm_sqr();
        }
        segments += 1;
        start += hop;
    }
    let fs = 1.0 / period_s;
    acc.iter()
        .enumerate()
        .map(|(k, &p)| {
            let one_sided = if k == 0 || k == seg / 2 { 1.0 } else { 2.0 };
            (k as f64 * fs / seg as f64, one_sided * p / (segments as f64 * wpow * fs))
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    fn lcg(seed: &mut u64) -> f64 {
        *seed = seed.wrapping_mul(6364136223846793005).wrapping_add(1442695040888963407);
        (*seed >> 11) as f64 / (1u64 << 53) as f64
    }

    #[test]
    fn separates_50_from_60_hz_and_measures_amplitude() {
        let mut s = 1;
        let period = 250e-6;
        let codes: Vec<u16> = (0..1024)
            .map(|i| {
                let t = i as f64 * period;
                let v = 2000.0 + 6.0 * (2.0 * std::f64::consts::PI * 50.0 * t + 0.3).sin() + (lcg(&mut s) - 0.5) * 2.0;
                v.round() as u16
            })
            .collect();
        let n = analyse(&codes, period).unwrap();
        assert!((n.hum_lsb[0] - 6.0).abs() < 0.2, "{:?}", n.hum_lsb);
        assert!(n.hum_lsb[1] < 0.2, "no leakage into 60 Hz: {:?}", n.hum_lsb);
        assert!(n.control_lsb < 0.2, "nor into the control frequencies: {}", n.control_lsb);
        assert!((n.peak_hz.unwrap() - 50.0).abs() < 4.0);
        // Uniform ±1 LSB noise, then rounding: variance 1/3 + 1/12.
        assert!((n.white_rms_lsb - (1.0f64 / 3.0 + 1.0 / 12.0).sqrt()).abs() < 0.06, "{}", n.white_rms_lsb);
    }

    #[test]
    fn hum_on_the_board_clock_recovers_frequency_phase_and_amplitude() {
        // A 30 LSB line at 50.06 Hz (inside the grid's usual deviation) with its 3rd harmonic,
        // read every 250 µs from t = 12.3 s on the board's clock, with ±1 LSB uniform noise.
        let mut s = 11;
        let (f, lsb) = (50.06, 1e-3);
        let times: Vec<f64> = (0..1024).map(|i| 12.3 + i as f64 * 250e-6).collect();
        let wave = |t: f64| {
            let w = 2.0 * std::f64::consts::PI * f * t;
            30.0 * (w + 0.7).sin() + 3.0 * (3.0 * w).cos()
        };
        let codes: Vec<f64> = times.iter().map(|&t| (2000.0 + wave(t) + (lcg(&mut s) - 0.5) * 2.0).round()).collect();
        let hum = fit_hum(&codes, &times, &[50.0], lsb, 0.5).unwrap();
        assert!((hum.lines[0].0 - f).abs() < 0.01, "frequency {}", hum.lines[0].0);
        // The waveform half a second before the record (where earlier experiments ran) matches
        // the truth to a small share of its amplitude: phase carried by the refined frequency.
        for k in 0..50 {
            let t = 11.8 + k as f64 * 1.3e-3;
            let err = hum.volts_at(t) / lsb - wave(t);
            assert!(err.abs() < 0.6, "t = {t}: off by {err} LSB");
        }
        assert!(hum.se_volts / lsb < 0.6, "se {} LSB", hum.se_volts / lsb);
        assert!((hum.amplitude_volts() / lsb - 30.0).abs() < 0.3);
    }

    #[test]
    fn welch_psd_integrates_to_the_variance() {
        // Parseval: the one-sided PSD integrated over frequency equals the variance.
        let mut s = 7;
        let x: Vec<f64> = (0..4096).map(|_| (lcg(&mut s) - 0.5) * 12f64.sqrt()).collect(); // σ² = 1
        let psd = welch(&x, 1e-3);
        let df = psd[1].0 - psd[0].0;
        let total: f64 = psd.iter().map(|p| p.1 * df).sum();
        assert!((total - 1.0).abs() < 0.08, "{total}");
    }
}

#[cfg(test)]
mod drift_tests {
    use super::*;

    #[test]
    fn a_recovering_node_is_not_hum() {
        // An exponential recovery (τ = 10 ms) over a 256 ms record: broadband, so it shows at
        // the control frequencies as much as at 50/60 Hz.
        let codes: Vec<u16> = (0..1024)
            .map(|i| {
                let t = i as f64 * 250e-6;
                (30_000.0 - 400.0 * (-t / 10e-3).exp() + if i % 2 == 0 { 0.4 } else { -0.4 }).round() as u16
            })
            .collect();
        let n = analyse(&codes, 250e-6).unwrap();
        let strongest = n.hum_lsb[0].max(n.hum_lsb[1]);
        assert!(n.control_lsb > 0.25 * strongest, "hum {:?} vs control {}", n.hum_lsb, n.control_lsb);
    }
}
