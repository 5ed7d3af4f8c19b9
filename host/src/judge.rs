//! Judge: from a pin's evidence and its fit to a verdict (driven, floating, at a rail,
//! unknown), flags (hum, excess noise, under-settled, memory), the settling sample time and
//! the memory of the previous channel.

use crate::analyse::PinEvidence;
use crate::fit::{Fit, Interval};
use crate::model::{BoardModel, CellObs, Event, PinParams};
use crate::noise::NoiseSummary;
use crate::record::RunRecord;
use crate::session::LinkStats;
use ohmsight_protocol::analog::State;

/// A source this close to 0 V or to full scale (a fraction of full scale: about a converter's
/// gain error) is at a rail.
pub const RAIL_MARGIN: f64 = 0.002;

/// The least source resistance a floating verdict needs, Ω, when the board states no leakage.
pub const FLOATING_OHMS: f64 = 1e9;

/// Source resistance above which a pin is called floating, Ω: where the most current the path
/// could carry (Vref/Rs) is a tenth of the board's leakage bound, at least [`FLOATING_OHMS`].
pub fn floating_ohms(model: &BoardModel) -> f64 {
    if model.leakage_amps > 0.0 {
        (0.1 * model.vref_volts / model.leakage_amps).clamp(FLOATING_OHMS, 1e12)
    } else {
        1e12
    }
}
/// χ²/dof above which the report says the model explains a pin's readings poorly (its
/// intervals are already widened by √(χ²/dof)).
pub const POOR_FIT_CHI2_PER_DOF: f64 = 4.0;
/// χ²/dof above which nothing is claimed from the fit: the readings hold something the model
/// does not describe, and widening alone would not make its numbers true.
pub const FAILED_FIT_CHI2_PER_DOF: f64 = 25.0;

/// Excess noise: white variance above this multiple of the ADC floor.
const EXCESS_NOISE_RATIO: f64 = 2.0;

/// What a pin is.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Verdict {
    /// A source drives the pin.
    Driven,
    /// Nothing drives the pin (no DC path found).
    Floating,
    /// The pin sits at a supply rail.
    AtRail,
    /// The evidence does not decide.
    Unknown,
}

impl Verdict {
    /// Name used in JSON and tables.
    pub fn as_str(&self) -> &'static str {
        match self {
            Verdict::Driven => "driven",
            Verdict::Floating => "floating",
            Verdict::AtRail => "at-rail",
            Verdict::Unknown => "unknown",
        }
    }
}

/// Something about a pin worth knowing.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord)]
pub enum Flag {
    /// 50 Hz mains hum (or harmonics).
    Hum50,
    /// 60 Hz mains hum (or harmonics).
    Hum60,
    /// Noise above the converter's own floor.
    ExcessNoise,
    /// No selectable sample time settles a full-scale step to ½ LSB.
    UnderSettled,
    /// The reading depends on the previously converted channel by more than ½ LSB.
    Memory,
}

impl Flag {
    /// Name used in JSON and tables.
    pub fn as_str(&self) -> &'static str {
        match self {
            Flag::Hum50 => "hum-50hz",
            Flag::Hum60 => "hum-60hz",
            Flag::ExcessNoise => "excess-noise",
            Flag::UnderSettled => "under-settled",
            Flag::Memory => "memory",
        }
    }
}

/// Memory of the previous channel, measured by an order swap.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Memory {
    /// Sample index it was measured at.
    pub sample: u8,
    /// The channel converted before this one (the precharge farther from the pin's level).
    pub previous: u8,
    /// Mean reading after itself, LSB.
    pub level_lsb: f64,
    /// Reading after the far precharge minus reading after itself, LSB.
    pub shift_lsb: f64,
    /// Standard error of that shift, LSB.
    pub shift_se_lsb: f64,
    /// Shift per LSB of difference between the previous channel and this one.
    pub coefficient: f64,
}

/// Everything the survey found on one pin.
#[derive(Debug, Clone)]
pub struct PinReport {
    /// Hardware channel.
    pub channel: u8,
    /// What the survey set out to measure on this pin and did not (a run cut short): `screen`,
    /// `detail`, `noise`, `memory`, `load`. Nothing is claimed about what is listed here.
    pub not_measured: Vec<&'static str>,
    /// Label from the board.
    pub label: String,
    /// Verdict.
    pub verdict: Verdict,
    /// Why the verdict is `unknown` (or other notes).
    pub reason: Option<String>,
    /// Source resistance, Ω.
    pub source_ohms: Interval,
    /// Node capacitance, F.
    pub node_farads: Interval,
    /// `source_ohms` holds for a node below this capacitance, F: a stiff node whose size the
    /// readings do not show (a larger capacitor could hide a larger source).
    pub source_assumes_node_below: Option<f64>,
    /// Source voltage, V.
    pub source_volts: Option<f64>,
    /// Noise, LSB rms.
    pub noise_lsb_rms: Option<f64>,
    /// Shortest sample time that settles to ½ LSB, ns.
    pub min_sample_ns: Option<f64>,
    /// Sample index of `min_sample_ns`.
    pub min_sample_index: Option<u8>,
    /// Flags.
    pub flags: Vec<Flag>,
    /// Noise-record analysis.
    pub noise: Option<NoiseSummary>,
    /// The raw codes of the noise record that `noise` analyses (for histograms).
    pub noise_codes: Vec<u16>,
    /// Memory of the previous channel.
    pub memory: Option<Memory>,
    /// What the loading burst showed of a stiff pin's bound, where one ran.
    pub load: Option<crate::burst::LoadTest>,
    /// The source resistance the pull test found against the board's own pull, where one ran
    /// ([`crate::pull`]): an independent measurement beside `source_ohms`.
    pub pull_source_ohms: Option<Interval>,
    /// Why a pin opted in for pulls had no pull test, in a run that did all it planned.
    pub pull_not_run: Option<String>,
    /// The fit, where one was made.
    pub fit: Option<Fit>,
    /// Conversions spent on this pin.
    pub conversions: u64,
    /// The pin's experiment history (for plots and re-fits).
    pub events: Vec<Event>,
}

/// The whole survey.
#[derive(Debug, Clone)]
pub struct SurveyReport {
    /// The run record the report was computed from.
    pub record: RunRecord,
    /// The board as it described itself.
    pub board: crate::record::BoardRecord,
    /// The model used (precharge levels measured).
    pub model: BoardModel,
    /// Pins, by channel.
    pub pins: Vec<PinReport>,
    /// Link traffic.
    pub link: LinkStats,
    /// Nominal time the board spent on experiments, s.
    pub board_seconds: f64,
    /// Wall-clock time of the survey, s.
    pub wall_seconds: f64,
    /// The link fault that cut the survey short, if one did (pins not reached are `unknown`).
    pub fault: Option<String>,
}

/// Judges one pin: verdict, intervals, settling, noise flags and memory. A pin whose planned
/// experiments did not all run is `unknown`, whatever part of it was measured.
///
/// `run_complete` says whether the run did everything it planned: a pin of a run cut short that
/// would have had a memory test and has none says so (`not_measured`).
pub fn judge_pin(model: &BoardModel, pin: &PinEvidence, fit: Option<Fit>, run_complete: bool) -> PinReport {
    let mut r = judge(model, pin, fit);
    if !pin.complete {
        r.verdict = Verdict::Unknown;
        r.reason = Some("not surveyed: the survey was cut short before this pin was done".into());
        // No claim on what was not measured: a settling time found from a partial history
        // would be a guess.
        withdraw_settling(&mut r);
        let has = |purpose| pin.purposes.contains(&purpose);
        use crate::record::Purpose;
        r.not_measured = [(Purpose::Screen, "screen"), (Purpose::Detail, "detail"), (Purpose::Noise, "noise")]
            .into_iter()
            .filter(|(p, _)| !has(*p))
            .map(|(_, name)| name)
            .collect();
        r.not_measured.push("memory");
    } else if let Some(swap) = &pin.swap {
        memory(model, swap.previous, swap.sample, &swap.cells, &mut r);
    } else if !run_complete && memory_planned(&r) {
        r.not_measured.push("memory");
    }
    // (A pin cut short is `unknown` above, and an unknown pin gets no load test.)
    if let Some(burst) = &pin.burst {
        load_test(model, burst, &mut r);
    } else if pin.complete && !run_complete && load_planned(&r) {
        r.not_measured.push("load");
    }
    r.conversions = pin.conversions;
    r.events = pin.events.iter().chain(&pin.memory_events).cloned().collect();
    r.noise_codes = pin.noise_codes.clone();
    r.flags.sort();
    r.flags.dedup();
    r
}

/// Takes back the pin's settling claims (minimum sample time, under-settled): the evidence for
/// them is incomplete or refuted.
fn withdraw_settling(r: &mut PinReport) {
    r.min_sample_index = None;
    r.min_sample_ns = None;
    r.flags.retain(|f| *f != Flag::UnderSettled);
}

/// Whether the survey tests this pin's memory: a pin with a verdict to test (not a rail read
/// without a fit).
pub fn memory_planned(r: &PinReport) -> bool {
    r.verdict != Verdict::AtRail || r.fit.is_some()
}

/// Whether a judged pin gets a loading burst: a stiff pin whose source bound assumes a node
/// below some size ([`crate::burst`]).
pub fn load_planned(r: &PinReport) -> bool {
    matches!(r.verdict, Verdict::Driven | Verdict::AtRail) && r.source_assumes_node_below.is_some() && r.fit.is_some()
}

/// Puts a stiff pin's bound to its loading burst: a drift that no network within the bound's
/// assumption shows makes the pin `unknown` (an open pin behind a large node, or a large source
/// behind it); otherwise the burst's reach is added to the reason.
fn load_test(model: &BoardModel, burst: &crate::burst::Burst, r: &mut PinReport) {
    if !load_planned(r) {
        return;
    }
    let (Some(assumed), Some(high), Some(fit)) = (r.source_assumes_node_below, r.source_ohms.high, r.fit.as_ref())
    else {
        return;
    };
    let Some(t) = crate::burst::assess(model, burst, &fit.params, high, assumed) else { return };
    let words = crate::burst::describe(&t, high, assumed);
    if t.refuted || t.moved() {
        r.verdict = Verdict::Unknown;
        r.source_ohms = Interval::NONE;
        r.node_farads = Interval::NONE;
        r.source_assumes_node_below = None;
        r.source_volts = None;
        withdraw_settling(r);
        r.reason = Some(words);
    } else {
        r.reason = Some(match r.reason.take() {
            Some(before) => format!("{before}; {words}"),
            None => words,
        });
    }
    r.load = Some(t);
}

/// The memory of the previous channel from an order swap's cells
/// ([A in AB, B after A, first B of BB, B after B]).
fn memory(model: &BoardModel, previous: u8, sample: u8, cells: &[CellObs], r: &mut PinReport) {
    let (full_scale, floor) = (model.full_scale(), model.variance_floor_lsb2());
    if cells.len() != 4 {
        return;
    }
    let shift = cells[1].mean - cells[3].mean;
    let se = (cells[1].variance.max(floor) / f64::from(cells[1].count)
        + cells[3].variance.max(floor) / f64::from(cells[3].count))
    .sqrt();
    let step = cells[0].mean - cells[3].mean;
    let coefficient = if step.abs() > 1.0 { shift / step } else { 0.0 };
    // Worst case: the previous channel a full-scale step away.
    if (coefficient * full_scale).abs() > 0.5 && shift.abs() > 3.0 * se {
        r.flags.push(Flag::Memory);
    }
    r.memory =
        Some(Memory { sample, previous, level_lsb: cells[3].mean, shift_lsb: shift, shift_se_lsb: se, coefficient });
}

/// Verdict, intervals, settling and noise flags of one pin from its fit and noise record.
fn judge(model: &BoardModel, pin: &PinEvidence, fit: Option<Fit>) -> PinReport {
    let none = Interval::NONE;
    let mut r = PinReport {
        channel: pin.channel,
        not_measured: Vec::new(),
        label: pin.label.clone(),
        verdict: Verdict::Unknown,
        reason: None,
        source_ohms: none,
        node_farads: none,
        source_assumes_node_below: None,
        source_volts: None,
        noise_lsb_rms: None,
        min_sample_ns: None,
        min_sample_index: None,
        flags: Vec::new(),
        noise: None,
        noise_codes: Vec::new(),
        memory: None,
        load: None,
        pull_source_ohms: None,
        pull_not_run: None,
        fit: None,
        conversions: 0,
        events: Vec::new(),
    };
    if let Some(rail) = pin.rail {
        r.verdict = Verdict::AtRail;
        r.source_volts = Some(rail);
        r.noise_lsb_rms = Some(pin.screen.iter().map(|c| c.variance).fold(0.0, f64::max).sqrt());
        // Nothing is fitted: settle a stiff source at the rail (1 Ω, 1 pF) through the switch,
        // the model the scan plan uses for it too.
        r.min_sample_index = min_sample_index(model, &PinParams::nominal(model, 1.0, 1e-12, rail));
        r.min_sample_ns = r.min_sample_index.map(|i| f64::from(model.sample_ps[usize::from(i)]) / 1000.0);
        r.reason = Some("every reading at the rail: source resistance not measurable".into());
        return r;
    }
    if let Some(n) = pin.noise.clone() {
        r.noise_lsb_rms = Some(n.rms_lsb);
        if n.white_rms_lsb.powi(2) > EXCESS_NOISE_RATIO * model.variance_floor_lsb2() {
            r.flags.push(Flag::ExcessNoise);
        }
        for (present, flag) in crate::noise::hum_present(&n).into_iter().zip([Flag::Hum50, Flag::Hum60]) {
            if present {
                r.flags.push(flag);
            }
        }
        r.noise = Some(n);
    }
    let Some(fit) = fit else {
        r.reason = Some("too few readings to fit".into());
        return r;
    };
    let chi2_dof = if fit.dof > 0 { fit.chi2 / fit.dof as f64 } else { 1.0 };
    // A misfit cannot conjure a DC path: a lower bound on the source resistance above the
    // floating threshold, from intervals already widened by the misfit, still says "open"
    // (an open node wanders with charges the model leaves out). Nothing else is claimed.
    let open = fit.source_ohms.low.is_some_and(|l| l >= floating_ohms(model));
    if chi2_dof > FAILED_FIT_CHI2_PER_DOF && !open {
        r.reason = Some(format!(
            "the model does not explain this pin's readings (χ²/dof = {chi2_dof:.1}): no claim on its source or node"
        ));
        r.fit = Some(fit);
        return r;
    }
    let lsb = model.lsb_volts();
    let vs = fit.theta[crate::fit::VS];
    r.source_ohms = fit.source_ohms;
    r.node_farads = fit.node_farads;
    let rs = fit.source_ohms;
    // A path that can carry no more than a tenth of the pin's own leakage is no source: the
    // node is governed by leakage and by the charge the converter leaves on it.
    if open {
        r.verdict = Verdict::Floating;
        r.source_ohms = Interval { estimate: None, low: rs.low, high: None };
        r.reason = Some(format!(
            "no path below {} (a tenth of the pin's leakage): the node keeps the charge the converter leaves on it{}",
            crate::units::ohms(floating_ohms(model)),
            if chi2_dof > POOR_FIT_CHI2_PER_DOF {
                format!(" (and wanders with charges the model leaves out: χ²/dof = {chi2_dof:.1})")
            } else {
                String::new()
            }
        ));
    } else if rs.high.is_none() {
        r.verdict = Verdict::Unknown;
        r.reason = Some(match (rs.low, fit.node_farads.low) {
            (Some(l), Some(c)) => format!(
                "a node of at least {} hides the source: above {} it cannot be told from an open pin with these experiments",
                crate::units::farads(c),
                crate::units::ohms(l)
            ),
            (Some(l), None) => {
                format!("source resistance above {} cannot be told from an open pin with these experiments", crate::units::ohms(l))
            }
            (None, _) => "the readings bound neither the source resistance nor the node: no claim".into(),
        });
    } else if vs < RAIL_MARGIN * model.vref_volts || vs > (1.0 - RAIL_MARGIN) * model.vref_volts - lsb {
        r.verdict = Verdict::AtRail;
        r.source_volts = Some(vs.clamp(0.0, model.vref_volts));
        // Readings clipped at the end of the scale show how fast the node settles, not how much
        // charge it holds: no claim on the node.
        r.node_farads = Interval::NONE;
    } else {
        r.verdict = Verdict::Driven;
        r.source_volts = Some(vs);
        // A source known only to be small settles the node within the shortest sample time:
        // the readings show the charge sharing with the hold capacitor too little to size the
        // node, and a fit's node interval there rests on the model's small print. No claim.
        if rs.low.is_none() {
            r.node_farads = Interval::NONE;
        }
    }
    if chi2_dof > POOR_FIT_CHI2_PER_DOF && r.reason.is_none() {
        r.reason = Some(format!(
            "the model explains the readings poorly (χ²/dof = {chi2_dof:.1}): its intervals are widened {:.1}×",
            chi2_dof.sqrt()
        ));
    }
    if matches!(r.verdict, Verdict::Driven | Verdict::AtRail) {
        if let (Some(c), Some(h)) = (fit.assumes_node_below, rs.high) {
            r.source_assumes_node_below = Some(c);
            // The node's size is what the readings could not show: whatever bound the open fit
            // gives it rests on a source the data do not bound. No claim on the node.
            r.node_farads = Interval::NONE;
            r.reason = Some(format!(
                "a stiff node: the source is below {} unless the node holds more than {}, which the survey's conversions could not move",
                crate::units::ohms(h),
                crate::units::farads(c)
            ));
        }
        // At the best fit: the parameters that explain the readings, bounds or not.
        r.min_sample_index = min_sample_index(model, &fit.params);
        r.min_sample_ns = r.min_sample_index.map(|i| f64::from(model.sample_ps[usize::from(i)]) / 1000.0);
        if r.min_sample_index.is_none() {
            r.flags.push(Flag::UnderSettled);
        }
    }
    r.fit = Some(fit);
    r
}

/// Shortest sample index at which a full-scale step on the hold capacitor (previous
/// conversion at 0 V or at Vref, whichever is worse) settles within ½ LSB of the source,
/// with the node at rest.
pub fn min_sample_index(model: &BoardModel, p: &PinParams) -> Option<u8> {
    let net = p.network();
    let rest = net.rest_volts().unwrap_or(p.source_volts);
    let half_lsb = model.lsb_volts() / 2.0;
    (0..model.sample_ps.len()).find_map(|i| {
        let map = net.sampling(model.sample_s(i));
        let worst = [0.0, model.vref_volts]
            .iter()
            .map(|&h| (map.apply(State { node_volts: rest, hold_volts: h }).hold_volts - rest).abs())
            .fold(0.0, f64::max);
        (worst <= half_lsb).then_some(i as u8)
    })
}

impl crate::store::PinSummary {
    /// The result summary of a judged pin, as the store keeps it.
    pub fn from_report(p: &PinReport) -> Self {
        let ends = |iv: &Interval| [iv.estimate, iv.low, iv.high];
        crate::store::PinSummary {
            channel: p.channel,
            verdict: p.verdict.as_str().into(),
            reason: p.reason.clone(),
            source_ohms: ends(&p.source_ohms),
            node_farads: ends(&p.node_farads),
            source_volts: p.source_volts,
            noise_lsb_rms: p.noise_lsb_rms,
            min_sample_ns: p.min_sample_ns,
            flags: p.flags.iter().map(|f| f.as_str().to_string()).collect(),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use ohmsight_protocol::{FrontEnd, Precharge};

    fn board(sample_cycles: &[f64], clock_hz: f64, hold: f64, switch: f64, bits: u8) -> BoardModel {
        let fe = FrontEnd {
            bits,
            vref_microvolts: 3_300_000,
            sample_ps: sample_cycles.iter().map(|c| (c / clock_hz * 1e12).round() as u32).collect(),
            conversion_ps: 1_000_000,
            hold_attofarads: (hold * 1e18) as u32,
            hold_tolerance_ppm: 0,
            switch_milliohms: (switch * 1e3) as u32,
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
    fn min_sample_follows_the_rc_settling_rule() {
        // Textbook: a single-pole RC settles a full-scale step to ½ LSB of an N-bit converter in
        // ln(2^(N+1)) time constants. With a negligible node capacitance the time constant is
        // (Rs + Rm)·Ch, and the answer must be the first sample time at or beyond that.
        let cycles = [1.5, 7.5, 13.5, 28.5, 41.5, 55.5, 71.5, 239.5];
        let b = board(&cycles, 14e6, 8e-12, 1e3, 12);
        for rs in [100.0, 2e3, 5e3, 12e3, 30e3, 60e3] {
            let tau = (rs + 1e3) * 8e-12;
            let need_s = tau * (2f64.powi(13)).ln();
            let want = cycles.iter().position(|c| c / 14e6 >= need_s * 1.0005);
            // Full scale from 0 V to Vref with the source at Vref is the worst case here.
            let got = min_sample_index(&b, &PinParams::nominal(&b, rs, 1e-18, 3.3)).map(usize::from);
            assert_eq!(got, want, "Rs = {rs} Ω needs {:.0} ns", need_s * 1e9);
        }
    }

    #[test]
    fn a_large_filter_capacitor_settles_by_charge_sharing() {
        // Charge conservation: behind 100 nF a full-scale step on 8 pF moves the node by
        // Vref·Ch/(Ch + Cn) ≈ 0.26 mV < ½ LSB (0.40 mV), so even the shortest sample time settles
        // whatever the source resistance — while 1 nF (26 mV) does not settle at 10 MΩ.
        let b = board(&[1.5, 239.5], 14e6, 8e-12, 1e3, 12);
        assert_eq!(min_sample_index(&b, &PinParams::nominal(&b, 10e6, 100e-9, 1.65)), Some(0));
        assert_eq!(min_sample_index(&b, &PinParams::nominal(&b, 10e6, 1e-9, 1.65)), None);
    }
}
