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
    let cols = trend_cols + MAINS_HZ.len() * HARMONICS * 2 + CONTROL_HZ.len() * 2;
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
        for &f in &CONTROL_HZ {
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
    let control = CONTROL_HZ
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
        hum_se_lsb: white * (2.0 / n as f64).sqrt(),
        psd,
        peak_hz,
    })
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
