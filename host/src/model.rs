//! The forward model: what a pin's readings should be, for given parameters, over the exact
//! sequence of experiments the firmware ran on it.

use ohmsight_protocol::analog::{volts_to_lsb, Network, Open, Sampling, State};
use ohmsight_protocol::{Experiment, FrontEnd, StepRecord, Steps, Timing};
use std::collections::BTreeMap;

/// What the host knows of the board's converter (from its front-end description, plus the
/// measured precharge levels).
#[derive(Debug, Clone, PartialEq)]
pub struct BoardModel {
    /// Resolution, bits.
    pub bits: u8,
    /// Full scale, V.
    pub vref_volts: f64,
    /// Sample times, ps (as on the wire, for [`Timing`]).
    pub sample_ps: Vec<u32>,
    /// Conversion time, ps.
    pub conversion_ps: u32,
    /// Nominal hold capacitance, F.
    pub hold_farads: f64,
    /// ±2σ relative uncertainty of the hold capacitance.
    pub hold_tolerance: f64,
    /// Nominal switch resistance, Ω.
    pub switch_ohms: f64,
    /// ±2σ relative uncertainty of the switch resistance.
    pub switch_tolerance: f64,
    /// ADC noise, LSB rms (quantization excluded).
    pub noise_lsb: f64,
    /// Leakage bound, A.
    pub leakage_amps: f64,
    /// Level of each precharge channel, V (nominal until measured).
    pub precharge_volts: BTreeMap<u8, f64>,
}

impl BoardModel {
    /// The model of a described front end.
    pub fn from_front_end(fe: &FrontEnd) -> Self {
        Self {
            bits: fe.bits,
            vref_volts: f64::from(fe.vref_microvolts) * 1e-6,
            sample_ps: fe.sample_ps.to_vec(),
            conversion_ps: fe.conversion_ps,
            hold_farads: f64::from(fe.hold_attofarads) * 1e-18,
            hold_tolerance: f64::from(fe.hold_tolerance_ppm) * 1e-6,
            switch_ohms: f64::from(fe.switch_milliohms) * 1e-3,
            switch_tolerance: f64::from(fe.switch_tolerance_ppm) * 1e-6,
            noise_lsb: f64::from(fe.noise_millilsb) * 1e-3,
            leakage_amps: f64::from(fe.leakage_picoamps) * 1e-12,
            precharge_volts: fe
                .precharges
                .iter()
                .map(|p| (p.channel, f64::from(p.nominal_microvolts) * 1e-6))
                .collect(),
        }
    }

    /// Timing for [`Steps`].
    pub fn timing(&self) -> Timing<'_> {
        Timing { sample_ps: &self.sample_ps, conversion_ps: self.conversion_ps }
    }

    /// Number of codes, `2^N`.
    pub fn full_scale(&self) -> f64 {
        (1u64 << self.bits) as f64
    }

    /// Largest code.
    pub fn max_code(&self) -> f64 {
        self.full_scale() - 1.0
    }

    /// One LSB, V.
    pub fn lsb_volts(&self) -> f64 {
        self.vref_volts / self.full_scale()
    }

    /// Sample time at index `i`, s.
    pub fn sample_s(&self, i: usize) -> f64 {
        f64::from(self.sample_ps[i]) * 1e-12
    }

    /// Voltage of a mean code.
    pub fn code_volts(&self, code: f64) -> f64 {
        code * self.lsb_volts()
    }

    /// Noise floor of one reading, LSB² (ADC noise plus quantization).
    pub fn variance_floor_lsb2(&self) -> f64 {
        self.noise_lsb * self.noise_lsb + 1.0 / 12.0
    }
}

/// The unknowns of one pin, plus the board's two uncertain constants.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct PinParams {
    /// Source resistance, Ω (infinite: floating).
    pub source_ohms: f64,
    /// Node capacitance, F.
    pub node_farads: f64,
    /// Source voltage, V (for a floating pin: its initial level).
    pub source_volts: f64,
    /// Hold capacitance, F.
    pub hold_farads: f64,
    /// Switch resistance, Ω.
    pub switch_ohms: f64,
    /// Firmware overhead added to the idle time after every conversion, s.
    pub overhead_s: f64,
}

impl PinParams {
    /// A pin of `source_volts` behind `source_ohms` with node `node_farads`, on a board whose
    /// hold capacitor and switch are as its profile states, with no firmware overhead.
    pub fn nominal(model: &BoardModel, source_ohms: f64, node_farads: f64, source_volts: f64) -> Self {
        PinParams {
            source_ohms,
            node_farads,
            source_volts,
            hold_farads: model.hold_farads,
            switch_ohms: model.switch_ohms,
            overhead_s: 0.0,
        }
    }

    /// The network these parameters describe (no leakage: the host does not model it).
    pub fn network(&self) -> Network {
        Network {
            source_volts: self.source_volts,
            source_ohms: self.source_ohms,
            node_farads: self.node_farads,
            switch_ohms: self.switch_ohms,
            hold_farads: self.hold_farads,
            leak_amps: 0.0,
        }
    }
}

/// Mean and spread of the codes in one cell.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct CellObs {
    /// Number of codes.
    pub count: u32,
    /// Mean code.
    pub mean: f64,
    /// Sample variance, LSB².
    pub variance: f64,
    /// Smallest and largest code.
    pub min: u16,
    /// Largest code.
    pub max: u16,
}

impl CellObs {
    /// From an integer aggregate.
    pub fn from_aggregate(a: &ohmsight_protocol::Aggregate) -> Self {
        let n = f64::from(a.count.max(1));
        let mean = a.sum as f64 / n;
        let variance = if a.count > 1 { ((a.sum_sq as f64 - a.sum as f64 * mean) / (n - 1.0)).max(0.0) } else { 0.0 };
        Self { count: a.count, mean, variance, min: a.min, max: a.max }
    }
}

/// One experiment in a pin's history.
#[derive(Debug, Clone, PartialEq)]
pub struct Event {
    /// What ran.
    pub experiment: Experiment,
    /// The target channel.
    pub target: u8,
    /// Idle time of this pin between the end of the previous event and the start of this one
    /// (the experiment's own settle time excluded), ps.
    pub gap_before_ps: u64,
    /// Cells of the target, when the run's records arrived and are used by the fit.
    pub cells: Option<Vec<CellObs>>,
    /// Variance, LSB², that slow interference (mains hum) adds to each cell mean (one entry
    /// per cell, or empty for none): a cell that spans a small part of a hum cycle sees the
    /// hum as an offset, not as spread among its own readings.
    pub coherent_var_lsb2: Vec<f64>,
}

/// `E[clamp(round(x + σ·Z), 0, max)]` for a standard normal `Z`: the mean code a converter
/// with input `x` LSB and Gaussian noise `σ` LSB reports.
///
/// Away from the rails `round(y) = y − saw(y)` and the Fourier series of the sawtooth,
/// averaged over the noise, gives `x − Σ (−1)^{k+1} sin(2πkx) e^{−2π²k²σ²}/(πk)`; near a rail
/// the clamped sum `Σ P(code ≥ k)` is evaluated directly.
pub fn expected_code(x: f64, sigma: f64, max_code: f64) -> f64 {
    let sigma = sigma.max(0.05);
    let reach = 6.0 * sigma + 1.0;
    if x > reach && x < max_code - reach {
        let mut e = x;
        let two_pi_sq_s2 = 2.0 * std::f64::consts::PI.powi(2) * sigma * sigma;
        for k in 1..=4 {
            let kf = f64::from(k);
            let damp = (-two_pi_sq_s2 * kf * kf).exp();
            if damp < 1e-12 {
                break;
            }
            let sign = if k % 2 == 1 { 1.0 } else { -1.0 };
            e -= sign * (2.0 * std::f64::consts::PI * kf * x).sin() * damp / (std::f64::consts::PI * kf);
        }
        return e;
    }
    // Near a rail: E = Σ_{k=1}^{max} P(code ≥ k) = Σ Q((k − ½ − x)/σ).
    let q = |k: f64| 0.5 * libm::erfc((k - 0.5 - x) / (sigma * std::f64::consts::SQRT_2));
    if x <= reach {
        let top = (x + 8.0 * sigma + 2.0).min(max_code).max(1.0) as i64;
        (1..=top).map(|k| q(k as f64)).sum()
    } else {
        // E = max − Σ_{k=0}^{max−1} P(code ≤ k)
        let low = (x - 8.0 * sigma - 2.0).max(0.0) as i64;
        let p_le = |k: f64| 1.0 - q(k + 1.0);
        // Terms below `low` are P(code ≤ k) ≈ 0.
        max_code - (low..max_code as i64).map(|k| p_le(k as f64)).sum::<f64>()
    }
}

/// Simulates a pin's whole history and returns the predicted mean code of every observed
/// cell, in order (events without observations are simulated but contribute nothing).
pub fn predict(board: &BoardModel, p: &PinParams, events: &[Event], out: &mut Vec<f64>) {
    predict_with_spread(board, p, events, out, None);
}

/// Like [`predict`], and also the variance of the predicted codes within each cell (the
/// deterministic spread: a cell whose readings drift over its repeats is not noisier for it).
pub fn predict_with_spread(
    board: &BoardModel,
    p: &PinParams,
    events: &[Event],
    out: &mut Vec<f64>,
    mut spread: Option<&mut Vec<f64>>,
) {
    out.clear();
    if let Some(v) = spread.as_deref_mut() {
        v.clear();
    }
    let net = p.network();
    let sampling: Vec<Sampling> = (0..board.sample_ps.len()).map(|i| net.sampling(board.sample_s(i))).collect();
    let hold_tau = p.switch_ohms * p.hold_farads;
    let precharge_keep: Vec<f64> = (0..board.sample_ps.len()).map(|i| (-board.sample_s(i) / hold_tau).exp()).collect();
    let mut opens: Vec<(u64, Open)> = Vec::with_capacity(32);
    let mut open = |ps: u64| -> Open {
        if let Some((_, o)) = opens.iter().find(|(d, _)| *d == ps) {
            return *o;
        }
        let o = net.open(ps as f64 * 1e-12);
        if opens.len() < 64 {
            opens.push((ps, o));
        }
        o
    };
    let sigma = board.noise_lsb;
    let max_code = board.max_code();
    let timing = board.timing();
    let overhead_ps = (p.overhead_s * 1e12).round().max(0.0) as u64;
    let mut s = State { node_volts: p.source_volts, hold_volts: board.vref_volts / 2.0 };
    let mut sums: Vec<(f64, f64, u32)> = Vec::new();
    for ev in events {
        let Ok(steps) = Steps::new(&ev.experiment, timing) else {
            continue;
        };
        s = open(ev.gap_before_ps + u64::from(steps.settle_ns()) * 1000).apply(s);
        sums.clear();
        sums.resize(usize::from(steps.cells()), (0.0, 0.0, 0));
        for step in steps.iter() {
            let busy_after_sample = u64::from(board.conversion_ps) + u64::from(step.wait_after_ns) * 1000 + overhead_ps;
            if step.channel == ev.target {
                s = sampling[usize::from(step.sample)].apply(s);
                if let StepRecord::Cell(c) = step.record {
                    let x = volts_to_lsb(s.hold_volts, board.vref_volts, board.bits);
                    let cell = &mut sums[usize::from(c)];
                    let e = expected_code(x, sigma, max_code);
                    cell.0 += e;
                    cell.1 += e * e;
                    cell.2 += 1;
                }
                s = open(busy_after_sample).apply(s);
            } else {
                let level = board.precharge_volts.get(&step.channel).copied().unwrap_or(board.vref_volts / 2.0);
                let keep = precharge_keep[usize::from(step.sample)];
                s.hold_volts = level + (s.hold_volts - level) * keep;
                s = open(u64::from(board.sample_ps[usize::from(step.sample)]) + busy_after_sample).apply(s);
            }
        }
        if ev.cells.is_some() {
            let mean = |&(sum, _, n): &(f64, f64, u32)| if n > 0 { sum / f64::from(n) } else { 0.0 };
            out.extend(sums.iter().map(mean));
            if let Some(v) = spread.as_deref_mut() {
                v.extend(sums.iter().map(|c| {
                    let m = mean(c);
                    if c.2 > 1 {
                        ((c.1 - f64::from(c.2) * m * m) / f64::from(c.2 - 1)).max(0.0)
                    } else {
                        0.0
                    }
                }));
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn expected_code_matches_brute_force() {
        // Reference: numerical integration of the rounded, clamped Gaussian.
        let brute = |x: f64, s: f64, max: f64| {
            let n = 20_000;
            let mut acc = 0.0;
            let mut wsum = 0.0;
            for i in 0..=n {
                let z = -8.0 + 16.0 * i as f64 / n as f64;
                let w = (-z * z / 2.0).exp();
                acc += w * (x + s * z).round().clamp(0.0, max);
                wsum += w;
            }
            acc / wsum
        };
        for &s in &[0.2, 0.35, 0.5, 1.0] {
            for &x in &[0.0, 0.3, 1.2, 2.5, 7.7, 100.25, 2047.5, 4093.6, 4095.0, 4096.4] {
                let want = brute(x, s, 4095.0);
                let got = expected_code(x, s, 4095.0);
                assert!((got - want).abs() < 2e-3, "x={x} σ={s}: {got} vs {want}");
            }
        }
    }
}
