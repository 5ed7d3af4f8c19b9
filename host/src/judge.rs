//! The survey: an adaptive plan of experiments per pin, the fit, and the per-pin verdict.
//!
//! 1. Measure the precharge sources.
//! 2. Screen every pin: a short precharge sweep (shortest, middle, longest sample time; low and
//!    high precharge).
//! 3. Only where the screen shows something to resolve: a full precharge sweep, a repeat burst,
//!    period sweeps from both precharges; every pin that is not at a rail gets a noise record.
//! 4. Fit each pin's whole history (the node's state carries from one experiment to the next).
//! 5. An order swap at the recommended sample time measures the memory of the previous channel.

use crate::fit::{fit_pin, Fit, FitInput, Interval};
use crate::link::Link;
use crate::model::{BoardModel, CellObs, Event, PinParams};
use crate::noise::{analyse, NoiseSummary, MAINS_HZ};
use crate::session::{BoardInfo, LinkStats, Session, SessionError};
use heapless::Vec as HVec;
use indicatif::{ProgressBar, ProgressStyle};
use ohmsight_protocol::analog::{volts_to_lsb, State};
use ohmsight_protocol::{ChannelRole, Experiment, Steps};
use std::time::{Duration, Instant};

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
/// Longest period of a period sweep, ns.
const LONGEST_PERIOD_NS: u32 = 20_000_000;
/// Noise-record period, ns (4 kHz: 50/60 Hz and harmonics well inside Nyquist).
const NOISE_PERIOD_NS: u32 = 250_000;
/// Idle time before a noise record, ns.
const NOISE_SETTLE_NS: u32 = 100_000_000;
/// Noise-record length.
const NOISE_COUNT: u16 = 1024;
/// Excess noise: white variance above this multiple of the ADC floor.
const EXCESS_NOISE_RATIO: f64 = 2.0;
/// Smallest hum amplitude worth flagging, LSB.
const HUM_MIN_LSB: f64 = 0.5;

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
    /// The board as it described itself.
    pub board: BoardInfo,
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

/// Survey options.
#[derive(Debug, Clone, Default)]
pub struct SurveyOptions {
    /// Accept a board with another protocol version.
    pub any_version: bool,
    /// Show a progress bar on stderr.
    pub progress: bool,
    /// Survey only these channels (all pins when empty).
    pub channels: Vec<u8>,
}

/// Errors of a survey.
#[derive(Debug)]
pub enum SurveyError {
    /// Talking to the board failed.
    Session(SessionError),
    /// The board cannot be surveyed as described.
    Board(String),
}

impl std::fmt::Display for SurveyError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            SurveyError::Session(e) => e.fmt(f),
            SurveyError::Board(s) => f.write_str(s),
        }
    }
}

impl std::error::Error for SurveyError {}

impl From<SessionError> for SurveyError {
    fn from(e: SessionError) -> Self {
        SurveyError::Session(e)
    }
}

/// A pin's history as the survey builds it.
struct PinWork {
    channel: u8,
    label: String,
    events: Vec<Event>,
    end_ps: Option<u64>,
    conversions: u64,
    screen: Vec<CellObs>,
    noise: Option<NoiseSummary>,
    noise_codes: Vec<u16>,
    rail: Option<f64>,
    /// Drift between the halves of the screening run of back-to-back pairs, LSB.
    burst_droop: f64,
    /// The precharge farther from the pin's level (set by the screen).
    far: u8,
    /// Every planned experiment ran.
    complete: bool,
}

/// Channel choices that every pin's experiments share.
struct Plan {
    lo: u8,
    hi: u8,
    n_samples: u8,
    longest: u8,
    mid: u8,
}

impl Plan {
    /// The precharge farther from a pin that reads `level_lsb`.
    /// `repeats` × [low, pin; high, pin] at each sample index, precharged at the longest.
    fn precharge_sweep(&self, target: u8, samples: &[u8], repeats: u16) -> Experiment {
        Experiment::PrechargeSweep {
            target,
            precharges: vec_of(&[self.lo, self.hi]),
            precharge_sample: self.longest,
            samples: vec_of(samples),
            repeats,
            rest_ns: 0,
            settle_ns: 0,
        }
    }

    fn far_from(&self, model: &BoardModel, level_lsb: f64) -> u8 {
        if level_lsb > model.full_scale() / 2.0 {
            self.lo
        } else {
            self.hi
        }
    }
}

/// Runs experiments and keeps the board's nominal timeline.
struct Runner<'s, L> {
    session: &'s mut Session<L>,
    model: BoardModel,
    now_ps: u64,
    bar: ProgressBar,
}

impl<L: Link> Runner<'_, L> {
    fn nominal_ps(&self, exp: &Experiment) -> u64 {
        Steps::new(exp, self.model.timing()).map(|s| s.nominal_ps()).unwrap_or(0)
    }

    /// Runs `exp` on `pin` (or on no pin) and appends it to the pin's history.
    fn run(
        &mut self,
        pin: Option<&mut PinWork>,
        exp: Experiment,
        fit_cells: bool,
    ) -> Result<crate::session::RunRecords, SurveyError> {
        let nominal = self.nominal_ps(&exp);
        let rec = self.session.run(&exp, Duration::from_nanos(nominal / 1000))?;
        self.bar.inc(1);
        let attempts = u64::from(rec.failed_attempts) + 1;
        if let Some(pin) = pin {
            pin.conversions += u64::from(rec.conversions) * attempts;
            for attempt in 0..attempts {
                let start = self.now_ps + attempt * nominal;
                let gap = pin.end_ps.map(|e| start.saturating_sub(e)).unwrap_or(0);
                let last = attempt + 1 == attempts;
                let cells = (last && fit_cells).then(|| rec.cells.iter().map(CellObs::from_aggregate).collect());
                pin.events.push(Event {
                    experiment: exp.clone(),
                    target: pin.channel,
                    gap_before_ps: gap,
                    cells,
                    coherent_var_lsb2: Vec::new(),
                });
                pin.end_ps = Some(start + nominal);
            }
        }
        self.now_ps += attempts * nominal;
        Ok(rec)
    }

    /// The screen: a short precharge sweep, and a run of back-to-back pairs.
    fn screen(&mut self, plan: &Plan, pin: &mut PinWork) -> Result<(), SurveyError> {
        let longest = plan.longest;
        self.bar.set_message(format!("ch{} screen", pin.channel));
        let exp = plan.precharge_sweep(pin.channel, &[0, plan.mid, longest], 8);
        let rec = self.run(Some(pin), exp, true)?;
        pin.screen = rec.cells.iter().map(CellObs::from_aggregate).collect();
        let max = self.model.max_code();
        if pin.screen.iter().all(|c| c.mean <= 0.5) {
            pin.rail = Some(0.0);
        } else if pin.screen.iter().all(|c| c.mean >= max - 0.5) {
            pin.rail = Some(self.model.vref_volts);
        } else {
            // A large node capacitor hides its source behind a tiny charge-sharing step; a
            // run of back-to-back [precharge, pin] pairs accumulates the droop where the source
            // cannot keep up (two cells: the first and the second half of the run).
            let s = &pin.screen;
            pin.far = plan.far_from(&self.model, (s[4].mean + s[5].mean) / 2.0);
            let exp = period_sweep(pin.channel, pin.far, longest, 0, &[0, 0], 32);
            let rec = self.run(Some(pin), exp, true)?;
            let burst: Vec<CellObs> = rec.cells.iter().map(CellObs::from_aggregate).collect();
            pin.burst_droop = burst.first().zip(burst.last()).map_or(0.0, |(a, b)| (a.mean - b.mean).abs());
        }
        Ok(())
    }

    /// Detailed experiments where the screen shows something to resolve; a noise record for
    /// every pin not at a rail.
    fn detail(&mut self, plan: &Plan, pin: &mut PinWork) -> Result<(), SurveyError> {
        if pin.rail.is_some() {
            return Ok(());
        }
        let (lo, hi, longest) = (plan.lo, plan.hi, plan.longest);
        let s = &pin.screen;
        // cells: [s0 lo, s0 hi, mid lo, mid hi, long lo, long hi]
        let settled =
            (s[0].mean - s[4].mean).abs() < 1.0 && (s[1].mean - s[5].mean).abs() < 1.0 && pin.burst_droop < 1.0;
        let far = pin.far;
        if settled {
            // Stiff on every timescale so far: hundreds of back-to-back pairs push the node
            // toward the switched-capacitor equilibrium Rs/(Rs + P/Ch), which bounds Rs even if
            // a large capacitor hides it from single conversions.
            self.bar.inc_length(1);
            self.bar.set_message(format!("ch{} droop run", pin.channel));
            let exp = period_sweep(pin.channel, far, longest, 0, &[0, 0, 0], 256);
            self.run(Some(pin), exp, true)?;
        } else {
            self.bar.inc_length(4);
            self.bar.set_message(format!("ch{} precharge sweep", pin.channel));
            let all: Vec<u8> = (0..plan.n_samples).collect();
            let exp = plan.precharge_sweep(pin.channel, &all, 24);
            self.run(Some(pin), exp, true)?;
            self.bar.set_message(format!("ch{} repeat burst", pin.channel));
            let exp = Experiment::RepeatBurst {
                target: pin.channel,
                precharge: far,
                precharge_sample: longest,
                sample: 0,
                length: 16,
                repeats: 8,
                rest_ns: 0,
                settle_ns: 0,
            };
            self.run(Some(pin), exp, true)?;
            let pair_ns = (2 * self.model.timing().busy_ps(longest) / 1000) as u32;
            let mut periods = HVec::<u32, 12>::new();
            for k in [1u32, 3, 10, 30, 100, 300, 1000, 3000] {
                let p = pair_ns.saturating_mul(k).min(LONGEST_PERIOD_NS);
                if periods.last().is_none_or(|&l| p > l) {
                    let _ = periods.push(p);
                }
            }
            if periods.last() != Some(&LONGEST_PERIOD_NS) {
                let _ = periods.push(LONGEST_PERIOD_NS);
            }
            for pre in [lo, hi] {
                self.bar.set_message(format!("ch{} period sweep", pin.channel));
                let exp = period_sweep(pin.channel, pre, longest, longest, &periods, 12);
                self.run(Some(pin), exp, true)?;
            }
            if pin.burst_droop >= 1.0 {
                // The source cannot keep up with back-to-back conversions: hundreds of them
                // at the shortest periods drive the node toward the switched-capacitor
                // equilibrium Rs/(Rs + P/Ch), which measures Rs even behind a large capacitor.
                self.bar.inc_length(1);
                self.bar.set_message(format!("ch{} droop sweep", pin.channel));
                let exp = period_sweep(pin.channel, far, longest, longest, &periods[..3.min(periods.len())], 256);
                self.run(Some(pin), exp, true)?;
            }
        }
        self.bar.set_message(format!("ch{} noise record", pin.channel));
        // Let the node recover from the experiments before it before listening to it.
        let exp = Experiment::NoiseRecord {
            target: pin.channel,
            sample: longest,
            period_ns: NOISE_PERIOD_NS,
            count: NOISE_COUNT,
            settle_ns: NOISE_SETTLE_NS,
        };
        let rec = self.run(Some(pin), exp, false)?;
        pin.noise_codes = rec.samples[8.min(rec.samples.len())..].to_vec();
        pin.noise = analyse(&pin.noise_codes, f64::from(NOISE_PERIOD_NS) * 1e-9);
        if let Some(n) = &pin.noise {
            // Hum is nearly constant over a cell that spans a fraction of its period: it adds
            // to each cell mean as an offset. Averaged down for cells spanning many cycles.
            let hum_var = |span_s: f64| -> f64 {
                MAINS_HZ
                    .iter()
                    .zip(n.hum_lsb)
                    .map(|(f, a)| a * a / 2.0 / (1.0 + (std::f64::consts::PI * f * span_s).powi(2)))
                    .sum()
            };
            for ev in &mut pin.events {
                ev.coherent_var_lsb2 = cell_spans_s(&self.model, &ev.experiment).into_iter().map(hum_var).collect();
            }
        }
        Ok(())
    }

    /// An order swap at the recommended sample time: the memory of the previous channel.
    fn memory(&mut self, plan: &Plan, pin: &mut PinWork, r: &mut PinReport) -> Result<(), SurveyError> {
        let model = &self.model;
        let sample = r.min_sample_index.unwrap_or(plan.longest);
        let level = r.source_volts.map(|v| volts_to_lsb(v, model.vref_volts, model.bits)).unwrap_or(0.0);
        let far = plan.far_from(model, level);
        let (full_scale, floor) = (model.full_scale(), model.variance_floor_lsb2());
        self.bar.inc_length(1);
        self.bar.set_message(format!("ch{} order swap", pin.channel));
        let exp = Experiment::OrderSwap { a: far, b: pin.channel, sample, repeats: 32, rest_ns: 0, settle_ns: 0 };
        let rec = self.run(Some(pin), exp, false)?;
        let cells: Vec<CellObs> = rec.cells.iter().map(CellObs::from_aggregate).collect();
        if cells.len() == 4 {
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
            r.memory = Some(Memory {
                sample,
                previous: far,
                level_lsb: cells[3].mean,
                shift_lsb: shift,
                shift_se_lsb: se,
                coefficient,
            });
        }
        Ok(())
    }
}

/// `repeats` × [precharge, target] at each period (see [`Experiment::PeriodSweep`]).
fn period_sweep(
    target: u8,
    precharge: u8,
    precharge_sample: u8,
    sample: u8,
    periods: &[u32],
    repeats: u16,
) -> Experiment {
    Experiment::PeriodSweep {
        target,
        precharge,
        precharge_sample,
        sample,
        periods_ns: HVec::from_slice(&periods[..periods.len().min(ohmsight_protocol::MAX_PERIODS)]).unwrap_or_default(),
        repeats,
        settle_ns: 0,
    }
}

fn vec_of<const N: usize>(items: &[u8]) -> HVec<u8, N> {
    HVec::from_slice(&items[..items.len().min(N)]).unwrap_or_default()
}

/// Runs a survey on a connected board.
pub fn survey<L: Link>(session: &mut Session<L>, opts: &SurveyOptions) -> Result<SurveyReport, SurveyError> {
    let started = Instant::now();
    let info = session.handshake(opts.any_version)?;
    let mut model = BoardModel::from_front_end(&info.front_end);
    let fe = &info.front_end;
    if fe.sample_ps.is_empty() {
        return Err(SurveyError::Board("the board lists no sample times".into()));
    }
    let (lo, hi) = match (
        fe.precharges.iter().min_by_key(|p| p.nominal_microvolts),
        fe.precharges.iter().max_by_key(|p| p.nominal_microvolts),
    ) {
        (Some(l), Some(h)) if l.channel != h.channel => (l.channel, h.channel),
        _ => return Err(SurveyError::Board("the board needs a low and a high precharge source to be surveyed".into())),
    };
    let pins: Vec<_> = info
        .channels
        .iter()
        .filter(|c| c.role == ChannelRole::Pin && (opts.channels.is_empty() || opts.channels.contains(&c.channel)))
        .collect();
    if pins.is_empty() {
        return Err(SurveyError::Board("no pins to survey (check --channel)".into()));
    }
    for &c in &opts.channels {
        if !pins.iter().any(|p| p.channel == c) {
            return Err(SurveyError::Board(format!("channel {c} is not a pin of this board")));
        }
    }
    let n_samples = fe.sample_ps.len() as u8;
    let longest = n_samples - 1;
    let mid = n_samples / 2;
    let bar = if opts.progress { ProgressBar::new(0) } else { ProgressBar::hidden() };
    bar.set_style(
        ProgressStyle::with_template("{spinner} {bar:30} {pos}/{len} experiments · {msg}")
            .unwrap_or_else(|_| ProgressStyle::default_bar()),
    );
    bar.set_length((2 + pins.len() * 4) as u64);
    let mut runner = Runner { session, model: model.clone(), now_ps: 0, bar };

    // 1. Precharge levels, measured.
    runner.bar.set_message("precharge sources");
    for p in [lo, hi] {
        let exp = Experiment::NoiseRecord { target: p, sample: longest, period_ns: 0, count: 64, settle_ns: 0 };
        let rec = runner.run(None, exp, false)?;
        let codes = &rec.samples[8.min(rec.samples.len())..];
        if !codes.is_empty() {
            let mean = codes.iter().map(|&c| f64::from(c)).sum::<f64>() / codes.len() as f64;
            model.precharge_volts.insert(p, model.code_volts(mean));
        }
    }
    runner.model = model.clone();

    // 2. Screen, 3. detail where needed. A link fault stops the experiments; what was
    //    measured up to it is still fitted and reported.
    let mut work: Vec<PinWork> = pins
        .iter()
        .map(|c| PinWork {
            channel: c.channel,
            label: c.label.to_string(),
            events: Vec::new(),
            end_ps: None,
            conversions: 0,
            screen: Vec::new(),
            noise: None,
            noise_codes: Vec::new(),
            rail: None,
            burst_droop: 0.0,
            far: hi,
            complete: false,
        })
        .collect();
    let plan = Plan { lo, hi, n_samples, longest, mid };
    let mut fault: Option<String> = None;
    for pin in &mut work {
        if let Err(e) = runner.screen(&plan, pin) {
            fault = Some(e.to_string());
            break;
        }
    }
    if fault.is_none() {
        for pin in &mut work {
            match runner.detail(&plan, pin) {
                Ok(()) => pin.complete = true,
                Err(e) => {
                    fault = Some(e.to_string());
                    break;
                }
            }
        }
    }

    // 4. Fit every pin (in parallel: fits are independent).
    runner.bar.set_message("fitting");
    let fits: Vec<Option<Fit>> = std::thread::scope(|scope| {
        let handles: Vec<_> = work
            .iter()
            .map(|pin| {
                let model = &model;
                scope.spawn(move || {
                    // Rails have nothing to fit; pins a link fault cut short are reported unsurveyed.
                    if pin.rail.is_some() || !pin.complete {
                        return None;
                    }
                    fit_pin(&FitInput { board: model, events: &pin.events })
                })
            })
            .collect();
        handles.into_iter().map(|h| h.join().ok().flatten()).collect()
    });

    // 5. Verdicts, settling, memory.
    let mut reports = Vec::new();
    for (mut pin, fit) in work.into_iter().zip(fits) {
        let mut r = judge(&model, &pin, fit);
        if !pin.complete {
            r.verdict = Verdict::Unknown;
            r.reason = Some("not surveyed: the link failed before this pin was done".into());
        } else if fault.is_none() && (r.verdict != Verdict::AtRail || r.fit.is_some()) {
            if let Err(e) = runner.memory(&plan, &mut pin, &mut r) {
                fault = Some(e.to_string());
            }
        }
        r.conversions = pin.conversions;
        r.events = pin.events;
        r.noise_codes = pin.noise_codes;
        r.flags.sort();
        r.flags.dedup();
        reports.push(r);
    }
    runner.bar.finish_and_clear();
    let board_seconds = runner.now_ps as f64 * 1e-12;
    let link = runner.session.stats;
    Ok(SurveyReport {
        board: info,
        model,
        pins: reports,
        link,
        board_seconds,
        wall_seconds: started.elapsed().as_secs_f64(),
        fault,
    })
}

/// How long each cell of an experiment takes to collect its readings, s: the whole run for
/// interleaved patterns, one period block for a period sweep.
fn cell_spans_s(model: &BoardModel, exp: &Experiment) -> Vec<f64> {
    let Ok(steps) = Steps::new(exp, model.timing()) else { return Vec::new() };
    let total = steps.nominal_ps() as f64 * 1e-12;
    match exp {
        Experiment::PeriodSweep { periods_ns, repeats, .. } => {
            // Each block runs `repeats` pairs, one per period (or back to back).
            let pair_s = |p: u32| f64::from(p).max(1.0) * 1e-9;
            periods_ns.iter().map(|&p| f64::from(*repeats) * pair_s(p)).collect()
        }
        _ => vec![total; usize::from(steps.cells())],
    }
}

/// Verdict, intervals, settling and noise flags of one pin from its fit and noise record.
fn judge(model: &BoardModel, pin: &PinWork, fit: Option<Fit>) -> PinReport {
    let none = Interval { estimate: None, low: None, high: None };
    let mut r = PinReport {
        channel: pin.channel,
        label: pin.label.clone(),
        verdict: Verdict::Unknown,
        reason: None,
        source_ohms: none,
        node_farads: none,
        source_volts: None,
        noise_lsb_rms: None,
        min_sample_ns: None,
        min_sample_index: None,
        flags: Vec::new(),
        noise: None,
        noise_codes: Vec::new(),
        memory: None,
        fit: None,
        conversions: 0,
        events: Vec::new(),
    };
    if let Some(rail) = pin.rail {
        r.verdict = Verdict::AtRail;
        r.source_volts = Some(rail);
        r.noise_lsb_rms = Some(pin.screen.iter().map(|c| c.variance).fold(0.0, f64::max).sqrt());
        r.min_sample_index = Some(0);
        r.min_sample_ns = Some(f64::from(model.sample_ps[0]) / 1000.0);
        r.reason = Some("every reading at the rail: source resistance not measurable".into());
        return r;
    }
    if let Some(n) = pin.noise.clone() {
        r.noise_lsb_rms = Some(n.rms_lsb);
        if n.white_rms_lsb.powi(2) > EXCESS_NOISE_RATIO * model.variance_floor_lsb2() {
            r.flags.push(Flag::ExcessNoise);
        }
        let strongest = n.hum_lsb.iter().copied().fold(0.0, f64::max);
        for (i, flag) in [Flag::Hum50, Flag::Hum60].into_iter().enumerate() {
            // One mains frequency leaks a little into the other on a drifting node; flag the
            // weaker only when it is a real line of its own.
            let a = n.hum_lsb[i];
            // A line stands above the control frequencies; broadband drift does not.
            if a > HUM_MIN_LSB && a > 6.0 * n.hum_se_lsb && a >= 0.25 * strongest && a > 4.0 * n.control_lsb {
                r.flags.push(flag);
            }
        }
        r.noise = Some(n);
    }
    let Some(fit) = fit else {
        r.reason = Some("too few readings to fit".into());
        return r;
    };
    let lsb = model.lsb_volts();
    let vs = fit.theta[crate::fit::VS];
    r.source_ohms = fit.source_ohms;
    r.node_farads = fit.node_farads;
    let rs = fit.source_ohms;
    // A path that can carry no more than a tenth of the pin's own leakage is no source: the
    // node is governed by leakage and by the charge the converter leaves on it.
    if rs.low.is_some_and(|l| l >= floating_ohms(model)) {
        r.verdict = Verdict::Floating;
        r.source_ohms = Interval { estimate: None, low: rs.low, high: None };
        r.reason = Some(format!(
            "no path below {} (a tenth of the pin's leakage): the node keeps the charge the converter leaves on it",
            crate::units::ohms(floating_ohms(model))
        ));
    } else if rs.high.is_none() {
        r.verdict = Verdict::Unknown;
        r.reason = Some(format!(
            "source resistance above {} cannot be told from an open pin with these experiments",
            crate::units::ohms(rs.low.unwrap_or(0.0))
        ));
    } else if vs < RAIL_MARGIN * model.vref_volts || vs > (1.0 - RAIL_MARGIN) * model.vref_volts - lsb {
        r.verdict = Verdict::AtRail;
        r.source_volts = Some(vs.clamp(0.0, model.vref_volts));
    } else {
        r.verdict = Verdict::Driven;
        r.source_volts = Some(vs);
    }
    if matches!(r.verdict, Verdict::Driven | Verdict::AtRail) {
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
