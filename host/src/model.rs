//! The forward model: what a pin's readings should be, for given parameters, over the exact
//! sequence of experiments the firmware ran on it.

use ohmsight_protocol::analog::{volts_to_lsb, Network, Open, Sampling, State};
use ohmsight_protocol::{Experiment, FrontEnd, Step, StepRecord, Steps, Timing};
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

    /// Every sample time the board can be set to, s, in the order of its table.
    pub fn sample_times(&self) -> Vec<f64> {
        (0..self.sample_ps.len()).map(|i| self.sample_s(i)).collect()
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
    /// Leakage current out of the node, A (the pin's own, within the board's leakage bound).
    pub leak_amps: f64,
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
            leak_amps: 0.0,
        }
    }

    /// The network these parameters describe.
    pub fn network(&self) -> Network {
        Network {
            source_volts: self.source_volts,
            source_ohms: self.source_ohms,
            node_farads: self.node_farads,
            switch_ohms: self.switch_ohms,
            hold_farads: self.hold_farads,
            leak_amps: self.leak_amps,
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
    /// When the experiment ran on the board's clock, for the hum model; `None` when the record
    /// has no clock (a v1 document) or the pin has no hum.
    pub clock: Option<EventClock>,
    /// Mains hum at the node during the experiment, as the pin's noise record measured it.
    pub hum: Option<std::sync::Arc<Hum>>,
    /// The hum at each step's sample, V (index: step), computed once from `hum` and `clock`:
    /// the fit evaluates the model thousands of times.
    pub hum_at_steps: Option<std::sync::Arc<[f64]>>,
}

impl Event {
    /// An experiment on `target` whose cells a prediction should give, with no clock or hum,
    /// after `gap_before_ps` of rest.
    pub fn replay(experiment: Experiment, target: u8, gap_before_ps: u64) -> Self {
        Event {
            experiment,
            target,
            gap_before_ps,
            cells: Some(Vec::new()),
            coherent_var_lsb2: Vec::new(),
            clock: None,
            hum: None,
            hum_at_steps: None,
        }
    }

    /// Sets the hum the node carries during this event (needs its clock).
    pub fn set_hum(&mut self, board: &BoardModel, hum: std::sync::Arc<Hum>) {
        let Some(clock) = self.clock else { return };
        let at: Vec<f64> = timed_steps(board, &self.experiment, &clock)
            .into_iter()
            .map(|(step, t)| if step.channel == self.target { hum.volts_at(t) } else { 0.0 })
            .collect();
        self.hum_at_steps = Some(at.into());
        self.hum = Some(hum);
    }
}

/// An experiment's place on the board's clock.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct EventClock {
    /// Start of the experiment (its settle time included), s.
    pub start_s: f64,
    /// Time each conversion took beyond its nominal sample, conversion and wait time, s: the
    /// firmware's own overhead, from the measured duration (spread over the conversions, not
    /// over the settle time before them, where no firmware runs).
    pub extra_per_step_s: f64,
}

impl EventClock {
    /// The clock of an experiment the board reports from `start_ps` to `end_ps`.
    pub fn of(board: &BoardModel, exp: &Experiment, start_ps: u64, end_ps: u64) -> Option<EventClock> {
        let steps = Steps::new(exp, board.timing()).ok()?;
        let nominal = steps.nominal_ps() as f64;
        let measured = end_ps.checked_sub(start_ps)? as f64;
        let n = steps.len().max(1) as f64;
        if nominal <= 0.0 || measured <= 0.0 {
            return None;
        }
        let extra = (measured - nominal) / n * 1e-12;
        // A clock that disagrees with the nominal timing by more than a few per cent, or
        // that ran faster than the nominal steps, is no clock to place hum on.
        (measured >= 0.999 * nominal && measured <= 1.5 * nominal)
            .then_some(EventClock { start_s: start_ps as f64 * 1e-12, extra_per_step_s: extra.max(0.0) })
    }

    /// Board time of the middle of step `index`'s sample window, which starts `nominal_ps`
    /// into the experiment on the nominal clock, s.
    pub fn at(&self, nominal_ps: u64, sample_ps: u64, index: usize) -> f64 {
        self.start_s + (nominal_ps as f64 + sample_ps as f64 / 2.0) * 1e-12 + index as f64 * self.extra_per_step_s
    }
}

/// A periodic disturbance at a node: `Σ sᵢ·sin(2π fᵢ t) + cᵢ·cos(2π fᵢ t)` volts, `t` on the
/// board's clock. Mains hum reaches a node through its source (filtered by the node's own RC)
/// or by capacitive pickup; either way the node's response to it is what a settled noise record
/// reads, and the switched network's response to everything else is the same with it or
/// without it (superposition), so the model carries the node's state relative to this waveform.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct Hum {
    /// (frequency Hz, sine amplitude V, cosine amplitude V).
    pub lines: Vec<(f64, f64, f64)>,
    /// Standard error of the waveform at any instant, V (from the noise record's fit,
    /// including what its frequency's uncertainty does over the span of the survey).
    pub se_volts: f64,
}

impl Hum {
    /// The waveform at board time `t`, V.
    pub fn volts_at(&self, t_s: f64) -> f64 {
        self.lines
            .iter()
            .map(|&(f, s, c)| {
                let w = 2.0 * std::f64::consts::PI * f * t_s;
                s * w.sin() + c * w.cos()
            })
            .sum()
    }

    /// Peak amplitude of the largest line, V.
    pub fn amplitude_volts(&self) -> f64 {
        self.lines.iter().map(|&(_, s, c)| s.hypot(c)).fold(0.0, f64::max)
    }
}

/// The mean of an event's hum over each of its cells, LSB: what the hum adds to each cell mean
/// of a settled pin (the cells of other channels get none). `None` without hum or clock.
pub fn hum_cell_means_lsb(board: &BoardModel, ev: &Event) -> Option<Vec<f64>> {
    let hum = ev.hum_at_steps.as_deref()?;
    let steps = Steps::new(&ev.experiment, board.timing()).ok()?;
    let mut sums = vec![(0.0, 0u32); usize::from(steps.cells())];
    for (step, &v) in steps.iter().zip(hum) {
        if let StepRecord::Cell(c) = step.record {
            let cell = &mut sums[usize::from(c)];
            cell.0 += v / board.lsb_volts();
            cell.1 += 1;
        }
    }
    Some(sums.iter().map(|&(s, n)| if n > 0 { s / f64::from(n) } else { 0.0 }).collect())
}

/// Every step of an experiment with the board time of the middle of its sample window, s.
fn timed_steps(board: &BoardModel, exp: &Experiment, clock: &EventClock) -> Vec<(Step, f64)> {
    let Ok(steps) = Steps::new(exp, board.timing()) else { return Vec::new() };
    let mut t_ps = u64::from(steps.settle_ns()) * 1000;
    steps
        .iter()
        .enumerate()
        .map(|(k, step)| {
            let sample_ps = u64::from(board.sample_ps[usize::from(step.sample)]);
            let t = clock.at(t_ps, sample_ps, k);
            t_ps += sample_ps + u64::from(board.conversion_ps) + u64::from(step.wait_after_ns) * 1000;
            (step, t)
        })
        .collect()
}

/// Board times of the recorded conversions of an experiment (middle of each sample window), s:
/// raw samples in record order.
pub fn raw_sample_times(board: &BoardModel, exp: &Experiment, clock: &EventClock) -> Vec<f64> {
    let mut out = Vec::new();
    for (step, t) in timed_steps(board, exp, clock) {
        if let StepRecord::Raw(j) = step.record {
            let j = usize::from(j);
            if out.len() <= j {
                out.resize(j + 1, 0.0);
            }
            out[j] = t;
        }
    }
    out
}

/// `E[clamp(round(x + σ·Z), 0, max)]` for a standard normal `Z`: the mean code a converter
/// with input `x` LSB and Gaussian noise `σ` LSB reports.
///
/// Away from the rails `round(y) = y − saw(y)` and the Fourier series of the sawtooth,
/// averaged over the noise, gives `x − Σ (−1)^{k+1} sin(2πkx) e^{−2π²k²σ²}/(πk)`; near a rail
/// the clamped sum `Σ P(code ≥ k)` is evaluated directly.
pub fn expected_code(x: f64, sigma: f64, max_code: f64) -> f64 {
    Quantizer::new(sigma, max_code).expected_code(x)
}

/// [`expected_code`] for one noise level, its series' damping factors worked out once: a fit
/// evaluates it for every conversion of a pin's history, thousands of times per evaluation.
#[derive(Debug, Clone, Copy)]
pub struct Quantizer {
    sigma: f64,
    max_code: f64,
    /// `(−1)^{k+1} e^{−2π²k²σ²}/(πk)` for k = 1…4, zero where negligible.
    terms: [f64; 4],
}

impl Quantizer {
    /// The quantizer of a converter with Gaussian noise `sigma` LSB (at least 0.05) and codes
    /// up to `max_code`.
    pub fn new(sigma: f64, max_code: f64) -> Quantizer {
        let sigma = sigma.max(0.05);
        let two_pi_sq_s2 = 2.0 * std::f64::consts::PI.powi(2) * sigma * sigma;
        let mut terms = [0.0; 4];
        for (i, t) in terms.iter_mut().enumerate() {
            let kf = (i + 1) as f64;
            let damp = (-two_pi_sq_s2 * kf * kf).exp();
            if damp < 1e-12 {
                break;
            }
            let sign = if i % 2 == 0 { 1.0 } else { -1.0 };
            *t = sign * damp / (std::f64::consts::PI * kf);
        }
        Quantizer { sigma, max_code, terms }
    }

    /// The mean code for an input of `x` LSB.
    pub fn expected_code(&self, x: f64) -> f64 {
        let (sigma, max_code) = (self.sigma, self.max_code);
        let reach = 6.0 * sigma + 1.0;
        if x > reach && x < max_code - reach {
            // sin(2πkx) for k = 1…4 from one sine and cosine by the angle-addition formulas.
            let (s1, c1) = sin_cos_turns(x);
            let (mut sk, mut ck) = (s1, c1);
            let mut e = x;
            for (i, &t) in self.terms.iter().enumerate() {
                if t == 0.0 {
                    break;
                }
                if i > 0 {
                    (sk, ck) = (sk * c1 + ck * s1, ck * c1 - sk * s1);
                }
                e -= t * sk;
            }
            return e;
        }
        // Near a rail: E = Σ_{k=1}^{max} P(code ≥ k) = Σ Q((k − ½ − x)/σ). Terms more than
        // 6σ below the input are 1 and those more than 6σ above it 0 (to 1e-9 each): only
        // the window between needs the error function.
        let q = |k: f64| 0.5 * libm::erfc((k - 0.5 - x) / (sigma * std::f64::consts::SQRT_2));
        let first = (x + 0.5 - 6.0 * sigma).ceil().max(1.0);
        let last = (x + 0.5 + 6.0 * sigma).floor().min(max_code);
        if first > max_code {
            return max_code;
        }
        let ones = first - 1.0;
        ones + (first as i64..=last as i64).map(|k| q(k as f64)).sum::<f64>()
    }
}

/// A pin's history with each experiment's conversions worked out once: the steps depend on
/// the experiment and the board's timing only, and a fit replays the same history for every
/// one of its thousands of model evaluations. Events after the last one whose cells are
/// wanted change no prediction and are left out (a check's noise readings of many pins, last
/// in a pin's history, are most of its steps).
#[derive(Debug, Clone)]
pub struct Replay<'e> {
    events: Vec<ReplayEvent<'e>>,
    /// The distinct idle times after a conversion, ps, the firmware's overhead (a fitted
    /// parameter) not included: each is worked out once per evaluation.
    idle_ps: Vec<u64>,
}

#[derive(Debug, Clone)]
struct ReplayEvent<'e> {
    event: &'e Event,
    settle_ns: u32,
    cells: u16,
    /// Each step, the index of its idle time in [`Replay::idle_ps`], and the level of the
    /// precharge source it converts (when it is not the target), V.
    steps: Vec<(Step, u32, f64)>,
}

impl<'e> Replay<'e> {
    /// The replay of `events` on `board` (events whose experiment the board's timing cannot
    /// run are skipped, as the board would refuse them).
    pub fn new(board: &BoardModel, events: &'e [Event]) -> Replay<'e> {
        let timing = board.timing();
        let wanted = events.iter().rposition(|e| e.cells.is_some()).map_or(0, |i| i + 1);
        let mut idle_ps: Vec<u64> = Vec::new();
        let mut index: BTreeMap<u64, u32> = BTreeMap::new();
        let events = events[..wanted]
            .iter()
            .filter_map(|event| {
                let steps = Steps::new(&event.experiment, timing).ok()?;
                let (settle_ns, cells) = (steps.settle_ns(), steps.cells());
                let steps = steps
                    .iter()
                    .map(|step| {
                        // After the sample: the conversion and the wait; a precharge source's
                        // sample is idle time for the pin too.
                        let mut ps = u64::from(board.conversion_ps) + u64::from(step.wait_after_ns) * 1000;
                        if step.channel != event.target {
                            ps += u64::from(board.sample_ps[usize::from(step.sample)]);
                        }
                        let i = *index.entry(ps).or_insert_with(|| {
                            idle_ps.push(ps);
                            (idle_ps.len() - 1) as u32
                        });
                        let level = board.precharge_volts.get(&step.channel).copied().unwrap_or(board.vref_volts / 2.0);
                        (step, i, level)
                    })
                    .collect();
                Some(ReplayEvent { event, settle_ns, cells, steps })
            })
            .collect();
        Replay { events, idle_ps }
    }
}

/// `(sin 2πu, cos 2πu)`, to about 1e-11: the quantizer's series needs it once per modelled
/// conversion, where the C library's `sincos` was two fifths of a fit's time. `u` is reduced to
/// [−¼, ¼] turn by symmetry and the Taylor series of sine taken to the 15th power there
/// (remainder below (π/2)¹⁷/17! ≈ 6e-12), evaluated by Estrin's scheme (short dependency
/// chains: the two polynomials run side by side). For |u| < 2⁵⁰.
fn sin_cos_turns(u: f64) -> (f64, f64) {
    // Round to nearest without a library call: adding 1.5·2⁵² leaves no fraction bits.
    const ROUND: f64 = 6_755_399_441_055_744.0;
    let nearest = |x: f64| (x + ROUND) - ROUND;
    // sin 2πv for v in [−½, ½].
    let sin_half_turn = |v: f64| {
        let v = if v > 0.25 {
            0.5 - v
        } else if v < -0.25 {
            -0.5 - v
        } else {
            v
        };
        let z = 2.0 * std::f64::consts::PI * v;
        // z·(1 − y/3! + y²/5! − … − y⁷/15!), y = z².
        const C: [f64; 8] = [
            1.0,
            -1.0 / 6.0,
            1.0 / 120.0,
            -1.0 / 5_040.0,
            1.0 / 362_880.0,
            -1.0 / 39_916_800.0,
            1.0 / 6_227_020_800.0,
            -1.0 / 1_307_674_368_000.0,
        ];
        let y = z * z;
        let y2 = y * y;
        let y4 = y2 * y2;
        let low = (C[0] + C[1] * y) + y2 * (C[2] + C[3] * y);
        let high = (C[4] + C[5] * y) + y2 * (C[6] + C[7] * y);
        z * (low + y4 * high)
    };
    let v = u - nearest(u);
    let w = v + 0.25;
    (sin_half_turn(v), sin_half_turn(w - nearest(w)))
}

/// Simulates a pin's whole history and returns the predicted mean code of every observed
/// cell, in order (events without observations are simulated but contribute nothing).
pub fn predict(board: &BoardModel, p: &PinParams, events: &[Event], out: &mut Vec<f64>) {
    predict_replay(board, p, &Replay::new(board, events), out, None);
}

/// Like [`predict`], for a history whose steps are already worked out, and with `spread` also
/// the variance of the predicted codes within each cell (the deterministic spread: a cell
/// whose readings drift over its repeats is not noisier for it).
pub fn predict_replay(
    board: &BoardModel,
    p: &PinParams,
    replay: &Replay<'_>,
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
    let overhead_ps = (p.overhead_s * 1e12).round().max(0.0) as u64;
    let open = |ps: u64| -> Open { net.open(ps as f64 * 1e-12) };
    let idle: Vec<Open> = replay.idle_ps.iter().map(|&ps| open(ps + overhead_ps)).collect();
    let quantizer = Quantizer::new(board.noise_lsb, board.max_code());
    let mut last = (f64::NAN, 0.0);
    let mut s = State { node_volts: p.source_volts, hold_volts: board.vref_volts / 2.0 };
    let mut sums: Vec<(f64, f64, u32)> = Vec::new();
    // With hum, the node's state is carried relative to the hum waveform (exact for the open
    // phases, whose map is linear); a sample, microseconds long, sees the hum as a constant.
    for r in &replay.events {
        let ev = r.event;
        let hum = ev.hum_at_steps.as_deref();
        s = open(ev.gap_before_ps + u64::from(r.settle_ns) * 1000).apply(s);
        sums.clear();
        sums.resize(usize::from(r.cells), (0.0, 0.0, 0));
        for (k, &(step, idle_index, level)) in r.steps.iter().enumerate() {
            let after = &idle[idle_index as usize];
            if step.channel == ev.target {
                match hum.and_then(|h| h.get(k)) {
                    Some(&v) => {
                        s.hold_volts -= v;
                        s = sampling[usize::from(step.sample)].apply(s);
                        s.hold_volts += v;
                    }
                    None => s = sampling[usize::from(step.sample)].apply(s),
                }
                if let StepRecord::Cell(c) = step.record {
                    let x = volts_to_lsb(s.hold_volts, board.vref_volts, board.bits);
                    let cell = &mut sums[usize::from(c)];
                    // A settled node reads the same input over and over: the same answer.
                    let e = if x == last.0 {
                        last.1
                    } else {
                        let e = quantizer.expected_code(x);
                        last = (x, e);
                        e
                    };
                    cell.0 += e;
                    cell.1 += e * e;
                    cell.2 += 1;
                }
                s = after.apply(s);
            } else {
                let keep = precharge_keep[usize::from(step.sample)];
                s.hold_volts = level + (s.hold_volts - level) * keep;
                s = after.apply(s);
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
    fn a_stiff_pin_reads_its_source_plus_the_hum_and_the_clock_places_it() {
        // Superposition: a 100 Ω source with 20 mV of 50 Hz hum, read by a noise record at the
        // longest sample time, reads Vs plus the hum at each sample's time on the board's clock
        // (firmware overhead included: 1 µs per conversion, from the measured duration).
        let fe = ohmsight_protocol::FrontEnd {
            bits: 12,
            vref_microvolts: 3_300_000,
            sample_ps: vec![1_000_000, 20_000_000].as_slice().try_into().unwrap(),
            conversion_ps: 1_000_000,
            hold_attofarads: 4_000_000,
            hold_tolerance_ppm: 0,
            switch_milliohms: 6_000_000,
            switch_tolerance_ppm: 0,
            // Noise of 1 LSB: the expected code is then the input itself (the quantizer's
            // staircase averages out), so the comparison below is of the analog model alone.
            noise_millilsb: 1000,
            leakage_picoamps: 0,
            pull_milliohms: 0,
            pull_tolerance_ppm: 0,
            pull_supply_microvolts: 0,
            precharges: heapless::Vec::new(),
        };
        let b = BoardModel::from_front_end(&fe);
        let exp = Experiment::NoiseRecord { target: 2, sample: 1, period_ns: 250_000, count: 64, settle_ns: 1_000 };
        let nominal = Steps::new(&exp, b.timing()).unwrap().nominal_ps();
        let clock = EventClock::of(&b, &exp, 5_000_000_000_000, 5_000_000_000_000 + nominal + 64 * 1_000_000).unwrap();
        assert!((clock.extra_per_step_s - 1e-6).abs() < 1e-12);
        let hum = std::sync::Arc::new(Hum { lines: vec![(50.0, 0.020, 0.004)], se_volts: 0.0 });
        let mut ev = Event {
            experiment: exp.clone(),
            target: 2,
            gap_before_ps: 0,
            cells: Some(Vec::new()),
            coherent_var_lsb2: Vec::new(),
            clock: Some(clock),
            hum: None,
            hum_at_steps: None,
        };
        ev.set_hum(&b, hum.clone());
        let times = raw_sample_times(&b, &exp, &clock);
        assert_eq!(times.len(), 64);
        // The k-th reading: 1 µs settle, k periods of 250 µs, k µs of overhead, half the sample.
        assert!((times[10] - (5.0 + 1e-6 + 10.0 * 250e-6 + 10e-6 + 10e-6)).abs() < 1e-12);
        let steps = ev.hum_at_steps.as_deref().unwrap();
        for (k, &t) in times.iter().enumerate() {
            assert!((steps[k] - hum.volts_at(t)).abs() < 1e-15);
        }
        // A stiff source read with long samples, precharged low and high in turn over some
        // 50 ms: each cell mean moves by the mean of the hum over that cell's own conversions.
        let sweep = Experiment::PrechargeSweep {
            target: 2,
            precharges: heapless::Vec::from_slice(&[0, 1]).unwrap(),
            precharge_sample: 1,
            samples: heapless::Vec::from_slice(&[1, 0]).unwrap(),
            repeats: 50,
            rest_ns: 500_000,
            settle_ns: 1_000,
        };
        let mut b = b;
        b.precharge_volts.insert(0, 0.0);
        b.precharge_volts.insert(1, 3.3);
        let nominal = Steps::new(&sweep, b.timing()).unwrap().nominal_ps();
        let clock = EventClock::of(&b, &sweep, 7_000_000_000_000, 7_000_000_000_000 + nominal).unwrap();
        let quiet = Event { experiment: sweep, clock: Some(clock), hum: None, hum_at_steps: None, ..ev };
        let mut humming = quiet.clone();
        humming.set_hum(&b, hum);
        let p = PinParams::nominal(&b, 100.0, 10e-12, 1.5);
        let (mut with, mut without) = (Vec::new(), Vec::new());
        predict(&b, &p, std::slice::from_ref(&humming), &mut with);
        predict(&b, &p, std::slice::from_ref(&quiet), &mut without);
        let means = hum_cell_means_lsb(&b, &humming).unwrap();
        assert_eq!(with.len(), 4);
        let spread = means.iter().fold(0.0f64, |m, x| m.max(x.abs()));
        assert!(spread > 1.0, "the cells see different parts of the hum: {means:?}");
        for k in 0..4 {
            assert!(
                (with[k] - without[k] - means[k]).abs() < 0.02,
                "cell {k}: {} vs {}",
                with[k] - without[k],
                means[k]
            );
        }
    }

    #[test]
    fn the_quantizers_sine_matches_the_libraries() {
        // Against the C library's sin and cos over many turns, both signs, and the quarter
        // points where the reduction folds.
        let mut worst: f64 = 0.0;
        for k in -40_000..=40_000 {
            let u = f64::from(k) * 0.000_731 + 0.125 * f64::from(k % 9);
            let (s, c) = sin_cos_turns(u);
            let (rs, rc) = (2.0 * std::f64::consts::PI * u).sin_cos();
            worst = worst.max((s - rs).abs()).max((c - rc).abs());
        }
        for u in [0.0, 0.25, 0.5, 0.75, -0.25, -0.5, 1000.25, 4095.5] {
            let (s, c) = sin_cos_turns(u);
            let (rs, rc) = (2.0 * std::f64::consts::PI * u).sin_cos();
            worst = worst.max((s - rs).abs()).max((c - rc).abs());
        }
        assert!(worst < 1e-10, "worst difference {worst:e}");
    }

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
