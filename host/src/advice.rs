//! Advice a user can act on, per pin and for the whole board, from a survey's fitted models.
//!
//! Per pin: the sample-time setting to use; when none settles, a buffer or a filter capacitor of
//! at least `2^(N+1)·Ch` with the scan rate it then allows; a dummy conversion or another order
//! when the previous channel moves the reading by more than ½ LSB; how many readings to
//! average for a signal smaller than one LSB; averaging over whole mains periods against hum.
//!
//! For the board: a scan plan (order, per-pin sample times, dummy conversions, idle time) whose
//! worst error stays under ½ LSB with every other pin anywhere between 0 V and Vref. Every
//! error is computed with the same sampling-network equations the fit uses
//! ([`ohmsight_protocol::analog`]), applied to the fitted parameters.

use crate::judge::{min_sample_index, Flag, PinReport, SurveyReport, Verdict};
use crate::model::{BoardModel, PinParams};
use nalgebra::{DMatrix, DVector};
use ohmsight_protocol::analog::State;

/// Most dummy conversions the scan plan puts before one pin.
pub const MAX_DUMMIES: u8 = 3;
/// Longest idle time the scan plan adds after a scan, s.
pub const MAX_IDLE_S: f64 = 1.0;
/// First idle time the scan plan tries, s.
const FIRST_IDLE_S: f64 = 1e-6;
/// E6 preferred values (IEC 60063), one decade.
const E6: [f64; 6] = [1.0, 1.5, 2.2, 3.3, 4.7, 6.8];
/// Mains periods, s (50 Hz, 60 Hz).
const MAINS_PERIOD_S: [f64; 2] = [0.02, 1.0 / 60.0];

/// What the advice needs beyond the survey.
#[derive(Debug, Clone, Copy, Default, PartialEq)]
pub struct AdviceOptions {
    /// The smallest change the user needs to see on a pin, V (averaging advice when it is below
    /// one LSB).
    pub resolve_volts: Option<f64>,
}

/// The sample-time setting to use.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct SampleChoice {
    /// Index in the board's sample-time table.
    pub index: u8,
    /// Sample time, ns.
    pub sample_ns: f64,
}

/// What to do when no selectable sample time settles.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct SettleFix {
    /// Source resistance the numbers are computed for (the upper end of its 95% interval), Ω.
    pub source_ohms: f64,
    /// Largest source resistance that settles at the longest sample time with this node
    /// capacitance: what a buffer's output resistance must stay under, Ω.
    pub buffer_max_ohms: f64,
    /// `2^(N+1)`, the multiple of the board's hold capacitance a filter capacitor needs.
    pub hold_multiple: f64,
    /// Least filter capacitor from pin to ground, F (`2^(N+1)·Ch`).
    pub min_farads: f64,
    /// Highest rate at which the pin can then be converted (neighbours a full scale away), Hz.
    pub min_farads_max_rate_hz: f64,
    /// A preferred (E6) value of at least twice the minimum, F.
    pub suggested_farads: f64,
    /// Highest conversion rate with the suggested capacitor, Hz.
    pub suggested_max_rate_hz: f64,
    /// Sample time that settles with the suggested capacitor, ns.
    pub suggested_sample_ns: Option<f64>,
}

/// Memory of the previous channel, and what to do about it.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct MemoryFix {
    /// Measured shift of the reading with the previous channel a full scale away, LSB.
    pub worst_shift_lsb: f64,
    /// What is left after one dummy conversion of the pin itself (model), LSB.
    pub after_dummy_lsb: Option<f64>,
    /// The previous channel's level must be this close to the pin's to keep the shift under
    /// ½ LSB, V.
    pub similar_within_volts: f64,
}

/// Averaging for a signal smaller than one LSB.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct Averaging {
    /// The signal to resolve, V.
    pub resolve_volts: f64,
    /// Noise of one reading, LSB rms (measured).
    pub noise_lsb_rms: f64,
    /// Readings to average so the standard error is half the signal.
    pub readings: u64,
    /// Resolution those readings add, bits: `½·log2(n)` (oversampling by 4^k gives k bits,
    /// common practice, no source).
    pub extra_bits: f64,
    /// Time those readings take at the recommended sample time, s.
    pub seconds: f64,
    /// Bias the quantizer's staircase leaves in an average at this noise level, V.
    pub staircase_volts: f64,
    /// The noise is too small to dither the quantizer: add dither first.
    pub needs_dither: bool,
}

/// Advice for one pin.
#[derive(Debug, Clone, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct PinAdvice {
    /// Channel.
    pub channel: u8,
    /// Sample time to use, when one settles.
    pub sample: Option<SampleChoice>,
    /// What to do when none settles.
    pub settle: Option<SettleFix>,
    /// What to do about memory of the previous channel.
    pub memory: Option<MemoryFix>,
    /// Averaging for a sub-LSB signal (only when asked for one).
    pub averaging: Option<Averaging>,
    /// Average over whole periods of this length against mains hum, s.
    pub hum_period_s: Option<f64>,
    /// Why there is no numeric advice (floating, unknown).
    pub note: Option<String>,
    /// How the board's scan plan reads this pin, where that differs from the pin's own sample
    /// time (the plan judges every level and the neighbours of the scan): the plan's settings
    /// are advice too.
    #[serde(default)]
    pub scan: Option<ScanUse>,
}

/// How the scan plan reads a pin, and why that differs from the pin's own advice.
#[derive(Debug, Clone, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct ScanUse {
    /// Sample-time index in the plan.
    pub sample_index: u8,
    /// Sample time, ns.
    pub sample_ns: f64,
    /// Dummy conversions before the one that counts.
    pub dummies: u8,
    /// Worst error in the plan, LSB.
    pub worst_error_lsb: f64,
    /// Why the plan needs more than the pin's own sample time.
    pub reason: String,
}

/// One pin in the scan plan.
#[derive(Debug, Clone, PartialEq)]
pub struct ScanEntry {
    /// Channel.
    pub channel: u8,
    /// Sample-time index.
    pub sample_index: u8,
    /// Sample time, ns.
    pub sample_ns: f64,
    /// Conversions of the pin itself, discarded, right before the one that counts.
    pub dummies: u8,
    /// Error of the reading with every other pin anywhere between 0 V and Vref, LSB.
    pub worst_error_lsb: f64,
    /// Error of the reading at the levels the survey measured, LSB (signed).
    pub error_now_lsb: f64,
}

/// A pin the scan plan leaves out, and why.
#[derive(Debug, Clone, PartialEq)]
pub struct LeftOut {
    /// Channel.
    pub channel: u8,
    /// Why.
    pub reason: String,
}

/// A whole-board scan: order, settings and the time it takes.
#[derive(Debug, Clone, PartialEq)]
pub struct ScanPlan {
    /// Pins in scan order.
    pub entries: Vec<ScanEntry>,
    /// Idle time after each scan, s.
    pub idle_s: f64,
    /// The pin the idle time is for (its node recovers slowly).
    pub idle_for: Option<u8>,
    /// One whole scan, s (sample and conversion times, dummies and idle; no firmware overhead).
    pub scan_s: f64,
    /// Largest [`ScanEntry::worst_error_lsb`].
    pub worst_error_lsb: f64,
    /// Pins not in the plan.
    pub left_out: Vec<LeftOut>,
}

/// Advice for a surveyed board.
#[derive(Debug, Clone, PartialEq)]
pub struct BoardAdvice {
    /// One LSB, V.
    pub lsb_volts: f64,
    /// Per pin, by channel.
    pub pins: Vec<PinAdvice>,
    /// The scan plan.
    pub plan: ScanPlan,
}

/// Least capacitance on a node that keeps charge sharing with the hold capacitor under ½ LSB.
///
/// Derivation (charge conservation, textbook): the hold capacitor arrives with the previous
/// channel's level, at worst a full scale `Vref` away, and sharing moves the node by
/// `ΔV = Vref·Ch/(Ch + C)`. `ΔV < ½ LSB = Vref/2^(N+1)` ⇔ `C > (2^(N+1) − 1)·Ch`, which the
/// usual rule rounds up to `C ≥ 2^(N+1)·Ch` (common practice, no source).
pub fn min_filter_farads(bits: u8, hold_farads: f64) -> f64 {
    2f64.powi(i32::from(bits) + 1) * hold_farads
}

/// Shortest period between conversions of a pin whose node (capacitance `node_farads`, total)
/// hangs behind `source_ohms`, so that every reading stays within ½ LSB with the neighbours a
/// full scale away; `None` when the capacitor is too small for any period.
///
/// Derivation: each conversion shares charge and leaves the node `d = Vref·Ch/(Ch + C)` lower
/// (worst case); between conversions the node recovers through `Rs` with `τ = Rs·C`, keeping a
/// fraction `k = e^(−P/τ)` of its error. In steady state the error before a conversion is
/// `e = (e + d)·k`, so a reading is off by `e + d = d/(1 − k)`. Requiring `d/(1 − k) ≤ Vref/2^(N+1)`
/// gives `k ≤ 1 − 2^(N+1)·Ch/(Ch + C)`, i.e. `P ≥ τ·ln(1/(1 − 2^(N+1)·Ch/(Ch + C)))`; with the
/// least capacitor `C = 2^(N+1)·Ch` this is `P ≥ Rs·C·ln(2^(N+1) + 1)`, the RC settling rule.
pub fn min_period_s(bits: u8, hold_farads: f64, source_ohms: f64, node_farads: f64) -> Option<f64> {
    let m = 2f64.powi(i32::from(bits) + 1);
    let keep = 1.0 - m * hold_farads / (hold_farads + node_farads);
    (keep > 0.0).then(|| source_ohms * node_farads * (1.0 / keep).ln())
}

/// The smallest E6 preferred value at or above `farads`.
pub fn e6_at_least(farads: f64) -> f64 {
    let decade = 10f64.powf(farads.log10().floor());
    for scale in [decade, decade * 10.0] {
        for v in E6 {
            // A hair of slack so that 4.7e-9 is its own value despite rounding.
            if v * scale >= farads * (1.0 - 1e-9) {
                return v * scale;
            }
        }
    }
    decade * 10.0
}

/// The upper end of an interval, or its estimate, or its lower end: the pessimistic value.
fn upper(iv: &crate::fit::Interval) -> Option<f64> {
    iv.high.or(iv.estimate).or(iv.low)
}

/// The sample index a pin would use: its settling one, else the longest.
fn plan_sample(model: &BoardModel, p: &PinReport) -> u8 {
    p.min_sample_index.unwrap_or((model.sample_ps.len() - 1) as u8)
}

/// Advice for every pin and a scan plan.
pub fn advise(r: &SurveyReport, opts: &AdviceOptions) -> BoardAdvice {
    let model = &r.model;
    if r.pins.is_empty() || model.sample_ps.is_empty() {
        let plan = ScanPlan {
            entries: Vec::new(),
            idle_s: 0.0,
            idle_for: None,
            scan_s: 0.0,
            worst_error_lsb: 0.0,
            left_out: Vec::new(),
        };
        return BoardAdvice { lsb_volts: model.lsb_volts(), pins: Vec::new(), plan };
    }
    let plan = scan_plan(model, &r.pins);
    let mut pins: Vec<PinAdvice> = r.pins.iter().map(|p| pin_advice(model, p, opts)).collect();
    for (a, p) in pins.iter_mut().zip(&r.pins) {
        a.scan = scan_use(model, a.sample.map(|s| s.index), p, &plan);
    }
    BoardAdvice { lsb_volts: model.lsb_volts(), pins, plan }
}

/// The plan's reading of a pin where it asks for more than the pin's own sample time, with the
/// reason, so that the advice and the plan tell one story.
fn scan_use(model: &BoardModel, own: Option<u8>, p: &PinReport, plan: &ScanPlan) -> Option<ScanUse> {
    let e = plan.entries.iter().find(|e| e.channel == p.channel)?;
    if own == Some(e.sample_index) && e.dummies == 0 {
        return None;
    }
    let at = |i: u8| crate::units::ns(f64::from(model.sample_ps[usize::from(i)]) / 1000.0);
    let reason = match own {
        None if e.dummies > 0 => format!(
            "no sample time settles a full-scale step from the previous channel, but {} dummy conversion{} of the \
             pin itself first bring{} the hold capacitor to its level",
            e.dummies,
            if e.dummies == 1 { "" } else { "s" },
            if e.dummies == 1 { "s" } else { "" }
        ),
        None => "no sample time settles a full-scale step with the node at rest; the plan, computed for the \
                 whole scan's periodic steady state, keeps it within ½ LSB at every level"
            .to_string(),
        Some(i) if e.sample_index > i || e.dummies > 0 => format!(
            "its own {} settles a step with the node at rest; in the scan the node has only one scan period to \
             recover from the conversions before",
            at(i)
        ),
        Some(i) => format!(
            "its own {} covers a full-scale step; in this scan the neighbours' levels leave it within ½ LSB at {}",
            at(i),
            at(e.sample_index)
        ),
    };
    Some(ScanUse {
        sample_index: e.sample_index,
        sample_ns: e.sample_ns,
        dummies: e.dummies,
        worst_error_lsb: e.worst_error_lsb,
        reason,
    })
}

fn pin_advice(model: &BoardModel, p: &PinReport, opts: &AdviceOptions) -> PinAdvice {
    let mut a = PinAdvice {
        channel: p.channel,
        sample: None,
        settle: None,
        memory: None,
        averaging: None,
        hum_period_s: None,
        note: None,
        scan: None,
    };
    match p.verdict {
        Verdict::Floating => {
            a.note = Some(
                "nothing drives this pin: its reading is whatever charge the converter leaves on it; connect \
                 the source, or tie the pin to a known level through a resistor"
                    .into(),
            );
            return a;
        }
        Verdict::Unknown => {
            a.note = Some(format!(
                "no advice: {}",
                p.reason.as_deref().unwrap_or("the survey could not decide what drives this pin")
            ));
            return a;
        }
        Verdict::Driven | Verdict::AtRail => {}
    }
    a.sample = p.min_sample_index.zip(p.min_sample_ns).map(|(index, sample_ns)| SampleChoice { index, sample_ns });
    if let Some(fit) = p.fit.as_ref().filter(|_| p.min_sample_index.is_none()) {
        a.settle = Some(settle_fix(model, &fit.params, p));
    }
    if let (Some(m), true) = (p.memory, p.flags.contains(&Flag::Memory)) {
        let after_dummy_lsb = p.fit.as_ref().map(|f| after_dummy_lsb(model, &f.params, plan_sample(model, p)));
        a.memory = Some(MemoryFix {
            worst_shift_lsb: (m.coefficient * model.full_scale()).abs(),
            after_dummy_lsb,
            similar_within_volts: model.lsb_volts() / 2.0 / m.coefficient.abs().max(1e-12),
        });
    }
    // A pin at a rail reads the rail: there is no small signal on it to average out.
    if let (Some(resolve), Some(noise), false) = (opts.resolve_volts, p.noise_lsb_rms, p.verdict == Verdict::AtRail) {
        if resolve < model.lsb_volts() && resolve > 0.0 {
            a.averaging = Some(averaging(model, resolve, noise, plan_sample(model, p)));
        }
    }
    a.hum_period_s = if p.flags.contains(&Flag::Hum50) {
        Some(MAINS_PERIOD_S[0])
    } else if p.flags.contains(&Flag::Hum60) {
        Some(MAINS_PERIOD_S[1])
    } else {
        None
    };
    a
}

fn settle_fix(model: &BoardModel, params: &PinParams, p: &PinReport) -> SettleFix {
    let rs = upper(&p.source_ohms).unwrap_or(params.source_ohms);
    let cn = p.node_farads.estimate.unwrap_or(params.node_farads);
    // The board's stated hold capacitance: the rule is about the converter, not one pin's fit.
    let ch = model.hold_farads;
    let min_farads = min_filter_farads(model.bits, ch);
    let suggested = e6_at_least(2.0 * min_farads);
    let rate = |c_ext: f64| min_period_s(model.bits, ch, rs, c_ext + cn).map_or(0.0, |p| 1.0 / p);
    let with_cap = PinParams { node_farads: cn + suggested, source_ohms: rs, ..*params };
    let suggested_sample_ns =
        min_sample_index(model, &with_cap).map(|i| f64::from(model.sample_ps[usize::from(i)]) / 1000.0);
    // Bisect (in ln Rs) for the largest source resistance that settles at the longest sample time.
    let longest = model.sample_ps.len() - 1;
    let settles = |r: f64| {
        min_sample_index(model, &PinParams { source_ohms: r, node_farads: cn, ..*params })
            .is_some_and(|i| usize::from(i) <= longest)
    };
    let (mut lo, mut hi) = (1e-3f64.ln(), rs.ln());
    if !settles(lo.exp()) {
        hi = lo;
    }
    for _ in 0..60 {
        let mid = (lo + hi) / 2.0;
        if settles(mid.exp()) {
            lo = mid;
        } else {
            hi = mid;
        }
    }
    SettleFix {
        source_ohms: rs,
        buffer_max_ohms: lo.exp(),
        hold_multiple: min_farads / ch,
        min_farads,
        min_farads_max_rate_hz: rate(min_farads),
        suggested_farads: suggested,
        suggested_max_rate_hz: rate(suggested),
        suggested_sample_ns,
    }
}

/// Error of the second of two back-to-back conversions of the pin, the hold capacitor arriving
/// a full scale away (the farther rail), node at rest, LSB.
fn after_dummy_lsb(model: &BoardModel, params: &PinParams, sample: u8) -> f64 {
    let net = params.network();
    let rest = net.rest_volts().unwrap_or(params.source_volts);
    let far = if rest > model.vref_volts / 2.0 { 0.0 } else { model.vref_volts };
    let sampling = net.sampling(model.sample_s(usize::from(sample)));
    let gap = net.open(f64::from(model.conversion_ps) * 1e-12);
    let s = sampling.apply(State { node_volts: rest, hold_volts: far });
    let s = sampling.apply(gap.apply(s));
    (s.hold_volts - rest).abs() / model.lsb_volts()
}

fn averaging(model: &BoardModel, resolve_volts: f64, noise_lsb: f64, sample: u8) -> Averaging {
    let lsb = model.lsb_volts();
    // Standard error of a mean of n readings σ/√n (textbook) ≤ half the signal.
    let readings = ((2.0 * noise_lsb * lsb / resolve_volts).powi(2)).ceil().max(1.0) as u64;
    let per_reading_s = model.sample_s(usize::from(sample)) + f64::from(model.conversion_ps) * 1e-12;
    // Rounding is x − saw(x); averaged over Gaussian noise σ the sawtooth's first Fourier term
    // leaves a ripple of amplitude e^(−2π²σ²)/π LSB in the mean (the series model::expected_code
    // uses): averaging cannot remove it, only enough noise (dither) does.
    let staircase_lsb = (-2.0 * std::f64::consts::PI.powi(2) * noise_lsb * noise_lsb).exp() / std::f64::consts::PI;
    let staircase_volts = staircase_lsb * lsb;
    Averaging {
        resolve_volts,
        noise_lsb_rms: noise_lsb,
        readings,
        extra_bits: 0.5 * (readings as f64).log2(),
        seconds: readings as f64 * per_reading_s,
        staircase_volts,
        needs_dither: staircase_volts > resolve_volts / 2.0,
    }
}

/// A pin as the scan plan models it.
#[derive(Debug, Clone)]
struct ScanPin {
    channel: u8,
    params: PinParams,
    sample: u8,
    dummies: u8,
}

/// Settings under evaluation.
#[derive(Debug, Clone)]
struct Candidate {
    pins: Vec<ScanPin>,
    idle_s: f64,
}

/// Errors of one scan, LSB: worst case over all levels, and at the present levels.
struct ScanErrors {
    worst: Vec<f64>,
    now: Vec<f64>,
}

impl Candidate {
    fn scan_s(&self, model: &BoardModel) -> f64 {
        let conv = f64::from(model.conversion_ps) * 1e-12;
        self.pins.iter().map(|p| f64::from(p.dummies + 1) * (model.sample_s(usize::from(p.sample)) + conv)).sum::<f64>()
            + self.idle_s
    }

    /// The periodic steady state of the scan, by the exact per-phase maps.
    ///
    /// State `x = (node of each pin, hold)`, sources `v`; every phase is affine,
    /// `x ← A·x + B·v` (no constant: no leakage), so a whole scan is one such map and its
    /// steady state is `x* = (I − A)⁻¹·B·v`. The reading of pin `i` is the hold voltage after its
    /// last conversion, `H_i·v`; since equal sources give equal readings, `Σ_j H_ij = 1` and the
    /// worst error over all sources in `[0, Vref]` is `Vref·max(Σ⁺(H_i − e_i), Σ⁻(H_i − e_i))`.
    fn errors(&self, model: &BoardModel) -> ScanErrors {
        let k = self.pins.len();
        let n = k + 1;
        let h = k;
        let mut a = DMatrix::<f64>::identity(n, n);
        let mut b = DMatrix::<f64>::zeros(n, k);
        let nets: Vec<_> = self
            .pins
            .iter()
            .map(|p| ohmsight_protocol::analog::Network { source_volts: 1.0, ..p.params.network() })
            .collect();
        // All nodes but `except` recover through their sources for `t` seconds.
        let open_all = |a: &mut DMatrix<f64>, b: &mut DMatrix<f64>, t: f64, except: Option<usize>| {
            for (j, net) in nets.iter().enumerate() {
                if Some(j) == except || t <= 0.0 {
                    continue;
                }
                let o = net.open(t);
                a.row_mut(j).scale_mut(o.a);
                b.row_mut(j).scale_mut(o.a);
                b[(j, j)] += o.c;
            }
        };
        let conv = f64::from(model.conversion_ps) * 1e-12;
        let mut reading_rows: Vec<(DVector<f64>, DVector<f64>)> = Vec::with_capacity(k);
        for (i, pin) in self.pins.iter().enumerate() {
            let ts = model.sample_s(usize::from(pin.sample));
            let s = nets[i].sampling(ts);
            for _ in 0..=pin.dummies {
                let (ai, ah) = (a.row(i).into_owned(), a.row(h).into_owned());
                let (bi, bh) = (b.row(i).into_owned(), b.row(h).into_owned());
                a.set_row(i, &(&ai * s.phi[0][0] + &ah * s.phi[0][1]));
                a.set_row(h, &(&ai * s.phi[1][0] + &ah * s.phi[1][1]));
                b.set_row(i, &(&bi * s.phi[0][0] + &bh * s.phi[0][1]));
                b.set_row(h, &(&bi * s.phi[1][0] + &bh * s.phi[1][1]));
                b[(i, i)] += s.gamma[0];
                b[(h, i)] += s.gamma[1];
                open_all(&mut a, &mut b, ts, Some(i));
                open_all(&mut a, &mut b, conv, None);
            }
            // The conversion that counts read the hold voltage as it was when sampling ended;
            // the node's recovery during the conversion does not touch the hold capacitor.
            reading_rows.push((a.row(h).transpose(), b.row(h).transpose()));
        }
        open_all(&mut a, &mut b, self.idle_s, None);
        let steady = (DMatrix::<f64>::identity(n, n) - &a).lu().solve(&b).unwrap_or_else(|| DMatrix::zeros(n, k));
        let lsb = model.lsb_volts();
        let levels: Vec<f64> = self.pins.iter().map(|p| p.params.source_volts).collect();
        let mut worst = Vec::with_capacity(k);
        let mut now = Vec::with_capacity(k);
        for (i, (ar, br)) in reading_rows.iter().enumerate() {
            let row = steady.transpose() * ar + br;
            let (mut pos, mut neg, mut e_now) = (0.0, 0.0, 0.0);
            for j in 0..k {
                let d = row[j] - if i == j { 1.0 } else { 0.0 };
                if d > 0.0 {
                    pos += d;
                } else {
                    neg -= d;
                }
                e_now += d * levels[j];
            }
            worst.push(model.vref_volts * f64::max(pos, neg) / lsb);
            now.push(e_now / lsb);
        }
        ScanErrors { worst, now }
    }
}

/// The worst error the plan allows, LSB.
pub const LIMIT_LSB: f64 = 0.5;

/// A scan plan: tries a few orders (channel order, low source resistance first, ascending
/// level), and for each lengthens sample times, adds dummy conversions and idle time where a
/// pin's worst error exceeds ½ LSB; keeps the shortest plan that leaves out fewest pins.
pub fn scan_plan(model: &BoardModel, pins: &[PinReport]) -> ScanPlan {
    let mut left_out = Vec::new();
    let mut scan = Vec::new();
    for p in pins {
        let params = match (p.verdict, &p.fit) {
            (Verdict::Driven | Verdict::AtRail, Some(f)) => f.params,
            // A rail with nothing to fit reads the rail: modelled as a stiff source (1 Ω, 1 pF).
            (Verdict::AtRail, None) => PinParams::nominal(model, 1.0, 1e-12, p.source_volts.unwrap_or(0.0)),
            (v, _) => {
                let reason = match v {
                    Verdict::Floating => "floating: nothing to read".to_string(),
                    _ => "unknown: nothing to plan for".to_string(),
                };
                left_out.push(LeftOut { channel: p.channel, reason });
                continue;
            }
        };
        scan.push(ScanPin { channel: p.channel, params, sample: plan_sample(model, p), dummies: 0 });
    }
    let mut orders: Vec<Vec<ScanPin>> = vec![scan.clone()];
    let mut by_ohms = scan.clone();
    by_ohms.sort_by(|x, y| x.params.source_ohms.total_cmp(&y.params.source_ohms));
    orders.push(by_ohms);
    let mut by_volts = scan;
    by_volts.sort_by(|x, y| x.params.source_volts.total_cmp(&y.params.source_volts));
    orders.push(by_volts);
    let mut best: Option<(ScanPlan, f64)> = None;
    for order in orders {
        let plan = settle_order(model, order, left_out.clone());
        let key = (plan.left_out.len(), plan.scan_s);
        let now_max = plan.entries.iter().map(|e| e.error_now_lsb.abs()).fold(0.0, f64::max);
        let better = match &best {
            None => true,
            Some((b, b_now)) => {
                let bk = (b.left_out.len(), b.scan_s);
                key.0 < bk.0 || (key.0 == bk.0 && (key.1 < bk.1 * (1.0 - 1e-9) || (key.1 <= bk.1 && now_max < *b_now)))
            }
        };
        if better {
            best = Some((plan, now_max));
        }
    }
    best.map(|(p, _)| p).unwrap_or(ScanPlan {
        entries: Vec::new(),
        idle_s: 0.0,
        idle_for: None,
        scan_s: 0.0,
        worst_error_lsb: 0.0,
        left_out,
    })
}

/// Greedy repair of one order: while some pin's worst error exceeds ½ LSB, give the worst pin
/// whichever of a longer sample time, one more dummy conversion or twice the idle time lowers
/// its error most; a pin that nothing improves is left out.
fn settle_order(model: &BoardModel, pins: Vec<ScanPin>, mut left_out: Vec<LeftOut>) -> ScanPlan {
    let longest = (model.sample_ps.len() - 1) as u8;
    let mut c = Candidate { pins, idle_s: 0.0 };
    let mut idle_for = None;
    let floor: Vec<(u8, u8)> = c.pins.iter().map(|p| (p.channel, p.sample)).collect();
    for _ in 0..400 {
        if c.pins.is_empty() {
            break;
        }
        let err = c.errors(model);
        let Some((w, &e)) = err.worst.iter().enumerate().max_by(|x, y| x.1.total_cmp(y.1)) else { break };
        if e <= LIMIT_LSB {
            break;
        }
        let mut options: Vec<(Candidate, bool)> = Vec::new();
        if c.pins[w].sample < longest {
            let mut t = c.clone();
            t.pins[w].sample += 1;
            options.push((t, false));
        }
        if c.pins[w].dummies < MAX_DUMMIES {
            let mut t = c.clone();
            t.pins[w].dummies += 1;
            options.push((t, false));
        }
        if c.idle_s < MAX_IDLE_S {
            // At least double the scan period: a slow node needs the period to grow, not a nudge.
            let mut t = c.clone();
            t.idle_s = (c.idle_s * 2.0).max(c.scan_s(model)).max(FIRST_IDLE_S);
            options.push((t, true));
        }
        // The cheapest step: most error removed (logarithmically) per second added to the scan.
        let now_s = c.scan_s(model);
        let best = options
            .into_iter()
            .map(|(t, idle)| {
                let e_new = t.errors(model).worst[w];
                let cost = (t.scan_s(model) - now_s).max(1e-15);
                let gain = (e / e_new.max(1e-300)).ln() / cost;
                (t, idle, e_new, gain)
            })
            .filter(|(_, _, e_new, _)| *e_new < 0.99 * e)
            .max_by(|x, y| x.3.total_cmp(&y.3));
        match best {
            Some((t, idle, _, _)) => {
                if idle {
                    idle_for = Some(t.pins[w].channel);
                }
                c = t;
            }
            None => {
                let pin = c.pins.remove(w);
                left_out.push(LeftOut {
                    channel: pin.channel,
                    reason: "no sample time, dummy conversion or idle time brings it under ½ LSB: see its advice"
                        .into(),
                });
            }
        }
    }
    // Undo steps that later ones made unnecessary: fewer dummies, shorter sample times (never
    // below the pin's own settling one).
    let holds = |t: &Candidate| t.errors(model).worst.iter().all(|&e| e <= LIMIT_LSB);
    if holds(&c) {
        for i in 0..c.pins.len() {
            while c.pins[i].dummies > 0 {
                let mut t = c.clone();
                t.pins[i].dummies -= 1;
                if !holds(&t) {
                    break;
                }
                c = t;
            }
            let least = floor.iter().find(|f| f.0 == c.pins[i].channel).map_or(0, |f| f.1);
            while c.pins[i].sample > least {
                let mut t = c.clone();
                t.pins[i].sample -= 1;
                if !holds(&t) {
                    break;
                }
                c = t;
            }
        }
    }
    // The idle time went up in doublings: trim it to the least that still holds the limit.
    if c.idle_s > 0.0 {
        let ok = |idle: f64| {
            let t = Candidate { idle_s: idle, ..c.clone() };
            t.errors(model).worst.iter().all(|&e| e <= LIMIT_LSB)
        };
        if ok(c.idle_s) {
            let (mut lo, mut hi) = (0.0, c.idle_s);
            if ok(0.0) {
                hi = 0.0;
            } else {
                for _ in 0..30 {
                    let mid = (lo + hi) / 2.0;
                    if ok(mid) {
                        hi = mid;
                    } else {
                        lo = mid;
                    }
                }
            }
            c.idle_s = hi;
        }
    }
    if c.idle_s == 0.0 {
        idle_for = None;
    } else {
        // Name the pin that needs the idle time now, in this plan: the one whose error grows
        // most without it (the pin the idle was first added for may have been left out since).
        let without = Candidate { idle_s: 0.0, ..c.clone() }.errors(model);
        idle_for = without
            .worst
            .iter()
            .enumerate()
            .max_by(|x, y| x.1.total_cmp(y.1))
            .map(|(i, _)| c.pins[i].channel)
            .or(idle_for);
    }
    let err = c.errors(model);
    let entries: Vec<ScanEntry> = c
        .pins
        .iter()
        .enumerate()
        .map(|(i, p)| ScanEntry {
            channel: p.channel,
            sample_index: p.sample,
            sample_ns: f64::from(model.sample_ps[usize::from(p.sample)]) / 1000.0,
            dummies: p.dummies,
            worst_error_lsb: err.worst[i],
            error_now_lsb: err.now[i],
        })
        .collect();
    left_out.sort_by_key(|l| l.channel);
    ScanPlan {
        worst_error_lsb: entries.iter().map(|e| e.worst_error_lsb).fold(0.0, f64::max),
        entries,
        idle_s: c.idle_s,
        idle_for,
        scan_s: c.scan_s(model),
        left_out,
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use ohmsight_protocol::analog::Network;
    use ohmsight_protocol::{FrontEnd, Precharge};

    /// A 12-bit, 3.3 V converter with a 4 pF / 6 kΩ input (sample times in ns).
    fn board(sample_ns: &[f64]) -> BoardModel {
        let fe = FrontEnd {
            bits: 12,
            vref_microvolts: 3_300_000,
            sample_ps: sample_ns.iter().map(|n| (n * 1000.0).round() as u32).collect(),
            conversion_ps: 571_429,
            hold_attofarads: 4_000_000,
            hold_tolerance_ppm: 0,
            switch_milliohms: 6_000_000,
            switch_tolerance_ppm: 0,
            noise_millilsb: 500,
            leakage_picoamps: 0,
            pull_milliohms: 0,
            pull_tolerance_ppm: 0,
            pull_supply_microvolts: 0,
            precharges: heapless::Vec::from_slice(&[Precharge { channel: 0, nominal_microvolts: 0 }]).unwrap(),
        };
        BoardModel::from_front_end(&fe)
    }

    #[test]
    fn filter_capacitor_rule_by_hand() {
        // 12 bits, Ch = 4 pF: 2^13 · 4 pF = 8192 · 4 pF = 32.768 nF.
        assert!((min_filter_farads(12, 4e-12) - 32.768e-9).abs() < 1e-15);
        // 10 bits, Ch = 8 pF: 2^11 · 8 pF = 16.384 nF.
        assert!((min_filter_farads(10, 8e-12) - 16.384e-9).abs() < 1e-15);
        // With exactly that capacitor the period rule reduces to P = Rs·C·ln(2^13 + 1):
        // Rs = 1 MΩ, C = 32.768 nF → τ = 32.768 ms, ln(8193) = 9.01105 → P = 295.27 ms.
        let p = min_period_s(12, 4e-12, 1e6, 32.768e-9).unwrap();
        assert!((p - 0.032768 * 8193f64.ln()).abs() < 1e-9 && (p - 0.29527).abs() < 1e-4, "{p}");
        // Twice the capacitor, 65.536 nF: keep = 1 − 8192·4/(4 + 65536) = 1 − 32768/65540
        // = 0.500031; P = 1 MΩ · 65.536 nF · ln(1/0.500031) = 65.536 ms · 0.693085 = 45.42 ms.
        let p = min_period_s(12, 4e-12, 1e6, 65.536e-9).unwrap();
        assert!((p - 0.045422).abs() < 2e-5, "{p}");
        // Below the rule no period is enough.
        assert_eq!(min_period_s(12, 4e-12, 1e6, 30e-9), None);
        // E6 values (IEC 60063): 65.5 nF → 68 nF; 4.7 nF is itself; 69 nF → 100 nF.
        assert!((e6_at_least(65.536e-9) - 68e-9).abs() < 1e-15);
        assert!((e6_at_least(4.7e-9) - 4.7e-9).abs() < 1e-18);
        assert!((e6_at_least(69e-9) - 100e-9).abs() < 1e-15);
    }

    /// Steady-state reading error of a pin converted every `period_s`, the hold capacitor
    /// precharged to 0 V before each conversion, the source at Vref; by the exact network.
    fn simulated_error_lsb(b: &BoardModel, rs: f64, c: f64, period_s: f64) -> f64 {
        let net = Network {
            source_volts: b.vref_volts,
            source_ohms: rs,
            node_farads: c,
            switch_ohms: b.switch_ohms,
            hold_farads: b.hold_farads,
            leak_amps: 0.0,
        };
        let ts = 1e-6;
        let (sample, open) = (net.sampling(ts), net.open(period_s - ts));
        let mut s = State { node_volts: b.vref_volts, hold_volts: 0.0 };
        let mut err = 0.0;
        for _ in 0..200 {
            s = sample.apply(State { hold_volts: 0.0, ..s });
            err = (b.vref_volts - s.hold_volts) / b.lsb_volts();
            s = open.apply(s);
        }
        err
    }

    #[test]
    fn the_period_rule_holds_half_an_lsb_in_the_exact_network() {
        // The derivation assumes instant charge sharing; the exact network (which also recovers
        // during the sample time) must read within ½ LSB at the rule's period and worse well
        // below it.
        let b = board(&[1000.0]);
        for (rs, c) in [(1e6, 68e-9), (2.2e6, 40e-9), (100e3, 100e-9)] {
            let p = min_period_s(12, 4e-12, rs, c).unwrap();
            let at = simulated_error_lsb(&b, rs, c, p);
            assert!(at <= 0.5 && at > 0.4, "Rs {rs} C {c}: {at} LSB at the rule's period {p}");
            let short = simulated_error_lsb(&b, rs, c, 0.5 * p);
            assert!(short > 0.5, "Rs {rs} C {c}: {short} LSB at half the period");
        }
    }

    #[test]
    fn dummy_conversion_is_the_square_for_a_small_node() {
        // With a negligible node the hold charges through Rs + Rm (single RC, textbook): a
        // conversion leaves e^(−ts/τ) of a step, two back-to-back conversions e^(−2ts/τ).
        // Rs = 60 kΩ, Rm = 6 kΩ, Ch = 4 pF: τ = 264 ns; ts = 500 ns → e^(−1.894) = 0.1505;
        // a full-scale step of 4096 LSB (source at 0 V, hold at Vref) leaves 616.5 LSB after
        // one and 92.8 LSB after two.
        let b = board(&[500.0]);
        let p = PinParams::nominal(&b, 60e3, 1e-18, 0.0);
        let got = after_dummy_lsb(&b, &p, 0);
        let want = 4096.0 * (-2.0 * 500e-9 / 264e-9f64).exp();
        assert!((got - want).abs() / want < 1e-3, "{got} vs {want}");
        assert!((want - 92.8).abs() < 0.1);
    }

    #[test]
    fn averaging_by_hand() {
        // 1 LSB = 3.3 V / 4096 = 805.66 µV. Noise 0.6 LSB = 483.4 µV; to resolve 100 µV the
        // standard error must be 50 µV: n = (483.4/50)² = 93.47 → 94 readings.
        let b = board(&[1000.0]);
        let a = averaging(&b, 100e-6, 0.6, 0);
        assert_eq!(a.readings, 94);
        // ½·log2(94) = ½·6.5546 = 3.2773 extra bits.
        assert!((a.extra_bits - 3.2773).abs() < 1e-4, "{}", a.extra_bits);
        // 94 × (1 µs + 0.571429 µs) = 147.71 µs.
        assert!((a.seconds - 147.714e-6).abs() < 1e-9, "{}", a.seconds);
        // Staircase: e^(−2π²·0.36)/π = e^(−7.106)/π = 2.62e-4 LSB = 0.21 µV: no dither needed.
        assert!((a.staircase_volts - 0.2113e-6).abs() < 0.001e-6, "{}", a.staircase_volts);
        assert!(!a.needs_dither);
        // At 0.2 LSB the staircase is e^(−0.7896)/π = 0.1444 LSB = 116 µV > 50 µV: dither.
        let a = averaging(&b, 100e-6, 0.2, 0);
        assert!(a.needs_dither && (a.staircase_volts - 116.4e-6).abs() < 0.2e-6, "{}", a.staircase_volts);
    }

    fn scan_pin(b: &BoardModel, ch: u8, rs: f64, cn: f64, vs: f64, sample: u8) -> ScanPin {
        ScanPin { channel: ch, params: PinParams::nominal(b, rs, cn, vs), sample, dummies: 0 }
    }

    #[test]
    fn scan_steady_state_matches_a_brute_force_loop() {
        // Reference: run the same scan phase by phase with the 2×2 maps for many cycles, at
        // the present levels, and compare the last readings with the steady state.
        let b = board(&[200.0, 2000.0]);
        let c = Candidate {
            pins: vec![
                scan_pin(&b, 0, 1e3, 10e-12, 0.3, 0),
                scan_pin(&b, 1, 500e3, 100e-9, 2.9, 1),
                scan_pin(&b, 2, 200e3, 20e-12, 1.1, 1),
            ],
            idle_s: 3e-6,
        };
        let err = c.errors(&b);
        let conv = f64::from(b.conversion_ps) * 1e-12;
        let nets: Vec<Network> = c.pins.iter().map(|p| p.params.network()).collect();
        let mut nodes: Vec<f64> = c.pins.iter().map(|p| p.params.source_volts).collect();
        let mut hold = 0.0;
        let mut readings = [0.0; 3];
        for _ in 0..60_000 {
            for (i, p) in c.pins.iter().enumerate() {
                let ts = b.sample_s(usize::from(p.sample));
                let s = nets[i].sampling(ts).apply(State { node_volts: nodes[i], hold_volts: hold });
                nodes[i] = s.node_volts;
                hold = s.hold_volts;
                readings[i] = hold;
                for (j, n) in nets.iter().enumerate() {
                    if j != i {
                        nodes[j] = n.open(ts).apply(State { node_volts: nodes[j], hold_volts: 0.0 }).node_volts;
                    }
                    nodes[j] = n.open(conv).apply(State { node_volts: nodes[j], hold_volts: 0.0 }).node_volts;
                }
            }
            for (j, n) in nets.iter().enumerate() {
                nodes[j] = n.open(c.idle_s).apply(State { node_volts: nodes[j], hold_volts: 0.0 }).node_volts;
            }
        }
        for (i, reading) in readings.iter().enumerate() {
            let brute = (reading - c.pins[i].params.source_volts) / b.lsb_volts();
            // The loop covers 6 time constants of the 50 ms node: agreement to 1e-5 relative.
            assert!((brute - err.now[i]).abs() < 1e-3 + 1e-5 * brute.abs(), "pin {i}: {brute} vs {}", err.now[i]);
        }
        // The big node droops under the switched capacitor: Rs·Ch·ΔV/P-sized, well over ½ LSB.
        assert!(err.worst[1] > 0.5);
    }

    #[test]
    fn worst_case_droop_follows_the_switched_capacitor_rule() {
        // A 1 MΩ source behind 100 nF after a stiff pin, scanned with period P ≫ the
        // conversions: each scan the hold capacitor arrives up to Vref away and takes the
        // charge Ch·ΔV (switched-capacitor resistance P/Ch, textbook), so the period must be
        // long enough for the node to recover: the same recovery rule as for a filter
        // capacitor, P ≥ Rs·Cn·ln(1/(1 − 2^13·Ch/(Ch + Cn))) = 0.1 s · ln(1/(1 − 8192·4/100004))
        // = 0.1 s · ln(1/0.672333) = 0.1 s · 0.39700 = 39.70 ms (≈ Rs·Ch·2^13 = 32.8 ms for
        // P ≪ Rs·Cn).
        let b = board(&[2000.0]);
        let pins = vec![scan_pin(&b, 0, 10.0, 10e-12, 0.0, 0), scan_pin(&b, 1, 1e6, 100e-9, 1.65, 0)];
        let plan = settle_order(&b, pins, Vec::new());
        assert!(plan.left_out.is_empty());
        assert_eq!(plan.idle_for, Some(1));
        // Within a few percent of the hand value: the exact network also recovers during the
        // sample time and shares through Rm rather than instantly.
        assert!((plan.scan_s - 39.70e-3).abs() / 39.70e-3 < 0.03, "scan {} s", plan.scan_s);
        assert!(plan.worst_error_lsb <= 0.5);
    }

    #[test]
    fn a_slow_small_node_gets_dummy_conversions_or_is_left_out() {
        let b = board(&[200.0, 1000.0]);
        // 150 kΩ + 6 kΩ, 4 pF: τ ≈ 0.64 µs with Cn small; 1 µs leaves e^(−1.6) ≈ 20% of a step,
        // each dummy conversion another ×0.2: ½ LSB of 4096 needs ln(8192)/1.6 ≈ 5.6 conversions
        // — more than MAX_DUMMIES + 1, so the pin is left out.
        let slow = vec![scan_pin(&b, 0, 10.0, 10e-12, 0.0, 1), scan_pin(&b, 1, 150e3, 1e-12, 1.0, 1)];
        let plan = settle_order(&b, slow, Vec::new());
        assert_eq!(plan.left_out.iter().map(|l| l.channel).collect::<Vec<_>>(), vec![1]);
        // 40 kΩ: τ = 46 kΩ·~4.8 pF ≈ 0.22 µs, 1 µs leaves e^(−4.5) ≈ 1.1% = 45 LSB; one dummy
        // 0.5 LSB-ish, two surely under: the plan settles it with dummies, nothing left out.
        let mid = vec![scan_pin(&b, 0, 10.0, 10e-12, 0.0, 1), scan_pin(&b, 1, 40e3, 1e-12, 1.0, 1)];
        let plan = settle_order(&b, mid, Vec::new());
        assert!(plan.left_out.is_empty());
        let e = &plan.entries[1];
        assert!(e.dummies >= 1 && e.worst_error_lsb <= 0.5, "{e:?}");
    }
}
