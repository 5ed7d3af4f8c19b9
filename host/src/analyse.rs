//! Analyse a run record: rebuild each pin's history from the evidence, fit the model, judge.
//!
//! The live survey and `refit` go through the same functions, so a record analysed again gives
//! the numbers the survey printed, to the last digit.
//!
//! - [`board_model`]: the profile's values with the precharge levels as measured;
//! - [`pin_evidence`]: per pin, the experiment history the fit simulates (the node's state
//!   carries from one experiment to the next), the screen, the noise record and the order swap;
//! - [`fit_pins`]: the fits, in parallel;
//! - [`report`]: verdicts, flags and memory per pin ([`crate::judge`]).

use crate::fit::{fit_pin_for, Fit, FitInput, Goals};
use crate::judge::{judge_pin, PinReport, SurveyReport};
use crate::model::{hum_cell_means_lsb, BoardModel, CellObs, Event, EventClock};
use crate::noise::{analyse as analyse_noise, NoiseSummary, MAINS_HZ};
use crate::plan::{screen_rail, RAW_LEAD_IN};
use crate::record::{ExperimentRecord, ExperimentSpec, Profile, Purpose, RunRecord};
use crate::session::LinkStats;
use ohmsight_protocol::{Experiment, Steps};

/// The order swap of a pin's memory test.
#[derive(Debug, Clone, PartialEq)]
pub struct Swap {
    /// The channel converted before the pin.
    pub previous: u8,
    /// Sample index.
    pub sample: u8,
    /// Cells: [A in AB, B after A, first B of BB, B after B].
    pub cells: Vec<CellObs>,
}

/// One pin's evidence, as the fit and the judge need it.
#[derive(Debug, Clone, PartialEq)]
pub struct PinEvidence {
    /// Channel.
    pub channel: u8,
    /// Label.
    pub label: String,
    /// Every planned experiment before the memory test ran.
    pub complete: bool,
    /// The history the fit simulates (the memory test excluded).
    pub events: Vec<Event>,
    /// The memory test's events.
    pub memory_events: Vec<Event>,
    /// The screen's short precharge sweep.
    pub screen: Vec<CellObs>,
    /// The rail the screen found the pin at, V.
    pub rail: Option<f64>,
    /// The noise record's codes (lead-in dropped).
    pub noise_codes: Vec<u16>,
    /// Their analysis.
    pub noise: Option<NoiseSummary>,
    /// The memory test.
    pub swap: Option<Swap>,
    /// The loading burst, where one ran (after the memory test: nothing the fit replays
    /// follows it).
    pub burst: Option<crate::burst::Burst>,
    /// The pull test's cells (unpulled, up, down), where one ran: after everything the fit
    /// replays, and not replayed itself.
    pub pull: Option<Vec<CellObs>>,
    /// Conversions spent on the pin (runs without records included).
    pub conversions: u64,
    /// The survey steps with at least one experiment on the pin.
    pub purposes: Vec<Purpose>,
}

/// One pin's readings in a noise record or a scan record.
#[derive(Debug, Clone, PartialEq)]
pub struct PinRaw {
    /// The readings after the lead-in, in order.
    pub codes: Vec<u16>,
    /// Time between readings, ns.
    pub period_ns: u32,
    /// Index of the first of them among the record's raw codes.
    pub first: usize,
    /// Step between them among the record's raw codes (the scan's number of targets).
    pub stride: usize,
}

/// The readings of `channel` in `e` when `e` is its noise record or a scan record that reads it.
pub fn pin_raw(e: &ExperimentRecord, channel: u8) -> Option<PinRaw> {
    let (first, stride, period_ns) = match &e.experiment {
        ExperimentSpec::NoiseRecord { period_ns, .. } if e.pin == Some(channel) => (RAW_LEAD_IN, 1, *period_ns),
        ExperimentSpec::ScanRecord { targets, period_ns, .. } => {
            let k = targets.iter().position(|&t| t == channel)?;
            let n = e.experiment.pins_sharing();
            (crate::plan::scan_lead_in(*period_ns) * n + k, n, *period_ns)
        }
        _ => return None,
    };
    let codes = e.samples.iter().skip(first).step_by(stride).copied().collect();
    Some(PinRaw { codes, period_ns, first, stride })
}

/// Whether `e` converts `channel` as a pin under test: the pin's own experiments, and the scan
/// records that read it among others.
fn on_pin(e: &ExperimentRecord, channel: u8) -> bool {
    e.pin == Some(channel) || e.experiment.scan_targets().is_some_and(|t| t.contains(&channel))
}

/// The last noise reading of `channel` the record holds (its own noise record, or a scan
/// record that read it), with the experiment it came from.
pub fn last_noise(record: &RunRecord, channel: u8) -> Option<(&ExperimentRecord, PinRaw)> {
    record
        .experiments
        .iter()
        .rev()
        .filter(|e| e.purpose == Purpose::Noise && e.received)
        .find_map(|e| Some((e, pin_raw(e, channel)?)))
}

/// Mean level of a raw record after its lead-in, LSB.
fn raw_mean(samples: &[u16]) -> Option<f64> {
    let codes = &samples[RAW_LEAD_IN.min(samples.len())..];
    (!codes.is_empty()).then(|| codes.iter().map(|&c| f64::from(c)).sum::<f64>() / codes.len() as f64)
}

/// The board model of a record's profile, with the precharge levels the run measured.
pub fn board_model(record: &RunRecord) -> BoardModel {
    model_with(&record.profile, &record.experiments)
}

fn model_with(profile: &Profile, experiments: &[ExperimentRecord]) -> BoardModel {
    let mut model = profile.model();
    for e in experiments.iter().filter(|e| e.purpose == Purpose::PrechargeLevel && e.received) {
        if let (ExperimentSpec::NoiseRecord { target, .. }, Some(mean)) = (&e.experiment, raw_mean(&e.samples)) {
            model.precharge_volts.insert(*target, model.code_volts(mean));
        }
    }
    model
}

/// How long each cell of an experiment takes to collect its readings, s: the whole run for
/// interleaved patterns, one period block for a period sweep.
fn cell_spans_s(model: &BoardModel, exp: &Experiment) -> Vec<f64> {
    let Ok(steps) = Steps::new(exp, model.timing()) else { return Vec::new() };
    let total = steps.nominal_ps() as f64 * 1e-12;
    match exp {
        Experiment::PeriodSweep { periods_ns, repeats, precharge_sample, sample, .. } => {
            // Each block runs `repeats` pairs, one per period (or back to back).
            let timing = model.timing();
            let busy_s = (timing.busy_ps(*precharge_sample) + timing.busy_ps(*sample)) as f64 * 1e-12;
            let pair_s = |p: u32| (f64::from(p) * 1e-9).max(busy_s);
            periods_ns.iter().map(|&p| f64::from(*repeats) * pair_s(p)).collect()
        }
        _ => vec![total; usize::from(steps.cells())],
    }
}

/// Each pin's evidence, in the record's pin order.
pub fn pin_evidence(record: &RunRecord, model: &BoardModel) -> Vec<PinEvidence> {
    record
        .pins
        .iter()
        .map(|pin| {
            let mut ev = PinEvidence {
                channel: pin.channel,
                label: pin.label.clone(),
                complete: pin.complete,
                events: Vec::new(),
                memory_events: Vec::new(),
                screen: Vec::new(),
                rail: None,
                noise_codes: Vec::new(),
                noise: None,
                swap: None,
                burst: None,
                pull: None,
                conversions: 0,
                purposes: Vec::new(),
            };
            // The pin's timeline is the board's own report of each run, runs the host took no
            // records of included: their conversions acted on the node too.
            let mut end_ps: Option<u64> = None;
            let mut noise_record: Option<&ExperimentRecord> = None;
            for e in record.experiments.iter().filter(|e| on_pin(e, pin.channel)) {
                let Some(exp) = e.experiment.to_experiment() else { continue };
                let cells: Vec<CellObs> = e.cells.iter().map(|c| CellObs::from_aggregate(&c.aggregate())).collect();
                // A scan's conversions are shared among the pins it reads.
                ev.conversions += u64::from(e.conversions) / e.experiment.pins_sharing() as u64;
                if !ev.purposes.contains(&e.purpose) {
                    ev.purposes.push(e.purpose);
                }
                let clock = EventClock::of(model, &exp, e.start_ps, e.end_ps);
                let event = Event {
                    experiment: exp,
                    target: pin.channel,
                    gap_before_ps: end_ps.map(|end| e.start_ps.saturating_sub(end)).unwrap_or(0),
                    cells: e.fitted().then(|| cells.clone()),
                    coherent_var_lsb2: Vec::new(),
                    clock,
                    hum: None,
                    hum_at_steps: None,
                };
                end_ps = Some(e.end_ps.max(e.start_ps));
                if e.purpose == Purpose::Load {
                    if e.received {
                        ev.burst =
                            Some(crate::burst::Burst { event, cells, hum_lsb: None, coherent_var_lsb2: Vec::new() });
                    }
                    continue;
                }
                if e.purpose == Purpose::Pull {
                    if e.received {
                        ev.pull = Some(cells);
                    }
                    continue;
                }
                if e.purpose == Purpose::Memory {
                    ev.memory_events.push(event);
                } else {
                    ev.events.push(event);
                }
                if !e.received {
                    continue;
                }
                match (e.purpose, &e.experiment) {
                    (Purpose::Screen, ExperimentSpec::PrechargeSweep { .. }) if ev.screen.is_empty() => {
                        ev.rail = screen_rail(model, &cells);
                        ev.screen = cells;
                    }
                    (Purpose::Noise, ExperimentSpec::NoiseRecord { .. } | ExperimentSpec::ScanRecord { .. }) => {
                        if let Some(raw) = pin_raw(e, pin.channel) {
                            ev.noise = analyse_noise(&raw.codes, f64::from(raw.period_ns) * 1e-9);
                            ev.noise_codes = raw.codes;
                            noise_record = Some(e);
                        }
                    }
                    (Purpose::Memory, ExperimentSpec::OrderSwap { a, sample, .. }) => {
                        ev.swap = Some(Swap { previous: *a, sample: *sample, cells });
                    }
                    _ => {}
                }
            }
            let waveform = HUM_WAVEFORM.load(std::sync::atomic::Ordering::Relaxed);
            if let Some(hum) = noise_record.filter(|_| waveform).and_then(|e| node_hum(model, e, pin.channel, &ev)) {
                // Hum measured on the board's clock is a known waveform: the model carries it,
                // and only what is uncertain about it weighs on the cells.
                let amplitude_lsb = hum.amplitude_volts() / model.lsb_volts();
                let se_lsb = hum.se_volts / model.lsb_volts();
                let var = se_lsb * se_lsb + (HUM_MODEL_SHARE * amplitude_lsb).powi(2);
                let hum = std::sync::Arc::new(hum);
                for event in &mut ev.events {
                    event.set_hum(model, hum.clone());
                    event.coherent_var_lsb2 = vec![var; event.cells.as_ref().map_or(0, Vec::len)];
                }
                for event in &mut ev.memory_events {
                    event.set_hum(model, hum.clone());
                }
                if let Some(b) = ev.burst.as_mut() {
                    b.event.set_hum(model, hum.clone());
                    b.hum_lsb = hum_cell_means_lsb(model, &b.event);
                    b.coherent_var_lsb2 = vec![var; b.cells.len()];
                }
                // The order swap compares cells read at different moments of the hum: take the
                // hum out of them before they are compared.
                let swap_hum = ev.memory_events.last().and_then(|e| hum_cell_means_lsb(model, e));
                if let (Some(swap), Some(h)) = (ev.swap.as_mut(), swap_hum) {
                    for (c, h) in swap.cells.iter_mut().zip(h) {
                        c.mean -= h;
                    }
                }
            } else if let Some(n) = &ev.noise {
                // Hum is nearly constant over a cell that spans a fraction of its period: it adds
                // to each cell mean as an offset. Averaged down for cells spanning many cycles.
                let hum_var = |span_s: f64| -> f64 {
                    MAINS_HZ
                        .iter()
                        .zip(n.hum_lsb)
                        .map(|(f, a)| a * a / 2.0 / (1.0 + (std::f64::consts::PI * f * span_s).powi(2)))
                        .sum()
                };
                for event in &mut ev.events {
                    event.coherent_var_lsb2 = cell_spans_s(model, &event.experiment).into_iter().map(hum_var).collect();
                }
                if let Some(b) = ev.burst.as_mut() {
                    b.coherent_var_lsb2 = cell_spans_s(model, &b.event.experiment).into_iter().map(hum_var).collect();
                }
            }
            ev
        })
        .collect()
}

/// Whether the fit models measured hum as a waveform (the default) or only as variance that
/// widens every cell (the method before it; kept so that benchmarks can compare the two).
pub static HUM_WAVEFORM: std::sync::atomic::AtomicBool = std::sync::atomic::AtomicBool::new(true);

/// What the hum model leaves unexplained, as a share of the hum's amplitude: the sample
/// window treats the hum as constant, and the node's hum under back-to-back conversions is
/// taken to be its hum under the noise record's.
pub const HUM_MODEL_SHARE: f64 = 0.005;

/// The mains hum of a pin's node from its noise record, on the board's clock, where the record
/// shows hum and every experiment of the pin has a clock.
fn node_hum(
    model: &BoardModel,
    record: &ExperimentRecord,
    channel: u8,
    pin: &PinEvidence,
) -> Option<crate::model::Hum> {
    let noise = pin.noise.as_ref()?;
    let mains: Vec<f64> =
        MAINS_HZ.iter().zip(crate::noise::hum_present(noise)).filter(|(_, on)| *on).map(|(f, _)| *f).collect();
    if mains.is_empty() || pin.events.iter().any(|e| e.clock.is_none()) {
        return None;
    }
    let exp = record.experiment.to_experiment()?;
    let clock = EventClock::of(model, &exp, record.start_ps, record.end_ps)?;
    let raw = pin_raw(record, channel)?;
    let times: Vec<f64> =
        crate::model::raw_sample_times(model, &exp, &clock).into_iter().skip(raw.first).step_by(raw.stride).collect();
    let codes: Vec<f64> = pin.noise_codes.iter().map(|&c| f64::from(c)).collect();
    let mid = times.get(times.len() / 2).copied()?;
    let span = pin.events.iter().filter_map(|e| e.clock).map(|c| (mid - c.start_s).abs()).fold(0.0, f64::max);
    crate::noise::fit_hum(&codes, &times, &mains, model.lsb_volts(), span)
}

/// Fits every pin that was fully measured and is not at a rail (in parallel: fits are
/// independent).
pub fn fit_pins(model: &BoardModel, pins: &[PinEvidence]) -> Vec<Option<Fit>> {
    fit_pins_for(model, pins, &|_| Goals::FULL)
}

/// [`fit_pins`] with each pin's intervals as precise as `goals` asks for its channel (a
/// check's limits, see [`Goals`]).
pub fn fit_pins_for(
    model: &BoardModel,
    pins: &[PinEvidence],
    goals: &(dyn Fn(u8) -> Goals + Sync),
) -> Vec<Option<Fit>> {
    std::thread::scope(|scope| {
        let handles: Vec<_> = pins
            .iter()
            .map(|pin| {
                scope.spawn(move || {
                    // Rails have nothing to fit; pins cut short are reported unsurveyed.
                    if pin.rail.is_some() || !pin.complete {
                        return None;
                    }
                    fit_pin_for(&FitInput { board: model, events: &pin.events }, &goals(pin.channel))
                })
            })
            .collect();
        handles.into_iter().map(|h| h.join().ok().flatten()).collect()
    })
}

/// Judges every pin with its fit; `run_complete`: the run did everything it planned.
pub fn judge_pins(
    model: &BoardModel,
    pins: &[PinEvidence],
    fits: &[Option<Fit>],
    run_complete: bool,
) -> Vec<PinReport> {
    pins.iter().zip(fits).map(|(pin, fit)| judge_pin(model, pin, fit.clone(), run_complete)).collect()
}

/// Why a pin opted in for pulls had no pull test in a run that did all it planned: the same
/// sizing the survey used ([`crate::plan::Plan::pull_test`]) from the fit's node
/// ([`crate::plan::pull_node_farads`]).
fn pull_not_run(fe: &ohmsight_protocol::FrontEnd, node_farads: &crate::fit::Interval) -> String {
    let (node, upper) = crate::plan::pull_node_farads(node_farads);
    match crate::plan::pull_rest_ns(fe, node) {
        None => "the board states no pull resistance".into(),
        Some(ns) => format!(
            "a node {} {} would need {} between conversions to settle under the pull; the test rests at most {}",
            if upper { "up to" } else { "of at least" },
            crate::units::farads(node),
            if ns.is_finite() { crate::units::ns(ns) } else { "forever".into() },
            crate::units::ns(f64::from(crate::plan::PULL_REST_MAX_NS)),
        ),
    }
}

/// The report of a record whose pins have been fitted.
pub fn report(record: &RunRecord, model: &BoardModel, pins: &[PinEvidence], fits: &[Option<Fit>]) -> SurveyReport {
    let stats = &record.run.stats;
    let mut judged = judge_pins(model, pins, fits, record.run.complete);
    let front_end = record.board.front_end.to_front_end();
    for (r, ev) in judged.iter_mut().zip(pins) {
        r.pull_source_ohms = ev.pull.as_deref().and_then(|cells| pull_estimate(model, &record.board.front_end, cells));
        if record.board.may_pull(r.channel) && ev.pull.is_none() && ev.complete && record.run.complete {
            r.pull_not_run = Some(pull_not_run(&front_end, &r.node_farads));
        }
    }
    SurveyReport {
        record: record.clone(),
        board: record.board.clone(),
        model: model.clone(),
        pins: judged,
        link: LinkStats {
            bytes_sent: stats.link_bytes_sent,
            bytes_received: stats.link_bytes_received,
            bad_frames: stats.bad_frames,
            reruns: stats.reruns,
            conversions: stats.conversions,
        },
        board_seconds: stats.board_seconds,
        wall_seconds: stats.wall_seconds,
        fault: record.run.fault.clone(),
    }
}

/// The pull test's source resistance from its cells (unpulled, up, down, up again), against the
/// pull the board described; no claim when the two pulled-up cells disagree (the node had not
/// settled); `None` without a pull-up level or without the four cells.
fn pull_estimate(
    model: &BoardModel,
    fe: &crate::record::FrontEndRecord,
    cells: &[CellObs],
) -> Option<crate::fit::Interval> {
    let [_, up, down, again] = cells else { return None };
    if fe.pull_milliohms == 0 || fe.pull_supply_microvolts == 0 {
        return None;
    }
    let floor = crate::fit::model_floor_lsb(model);
    let level = |c: &CellObs| crate::pull::Level {
        volts: model.code_volts(c.mean),
        se_volts: model.code_volts(crate::fit::cell_se(
            c.variance.max(model.variance_floor_lsb2()),
            c.count,
            0.0,
            floor,
        )),
    };
    let pull = crate::pull::PullProfile {
        ohms: f64::from(fe.pull_milliohms) * 1e-3,
        tolerance: f64::from(fe.pull_tolerance_ppm) * 1e-6,
        supply_volts: f64::from(fe.pull_supply_microvolts) * 1e-6,
    };
    let (up, again, down) = (level(up), level(again), level(down));
    // Unsettled: the second pulled-up level, after the pulled-down one, reads lower.
    if (up.volts - again.volts).abs() > 3.0 * up.se_volts.hypot(again.se_volts) {
        return Some(crate::fit::Interval::NONE);
    }
    let up =
        crate::pull::Level { volts: (up.volts + again.volts) / 2.0, se_volts: up.se_volts.hypot(again.se_volts) / 2.0 };
    Some(crate::pull::source_ohms(up, down, &pull))
}

/// Analyses a whole record: model, evidence, fits, verdicts.
pub fn analyse(record: &RunRecord) -> SurveyReport {
    let model = board_model(record);
    let pins = pin_evidence(record, &model);
    let fits = fit_pins(&model, &pins);
    report(record, &model, &pins, &fits)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::advice::{advise, AdviceOptions};
    use crate::link::InProcessLink;
    use crate::record::{read_document, Document};
    use crate::render::{survey_json, text::survey_text};
    use crate::run::{survey, SurveyOptions};
    use crate::session::Session;

    #[test]
    fn a_record_read_back_from_its_document_analyses_to_the_same_digits() {
        let sc = crate::scenario::demo();
        let live = survey(&mut Session::new(InProcessLink::new(&sc)), &SurveyOptions::default()).unwrap();
        let opts = AdviceOptions::default();
        let advice = advise(&live, &opts);
        let json = survey_json(&live, &advice, &opts);
        let Ok(Document::V2(doc)) = read_document(&json) else { panic!("not a v2 document") };
        let record = doc.record();
        assert_eq!(record, live.record, "the document carries the record unchanged");
        let again = analyse(&record);
        let advice_again = advise(&again, &opts);
        assert_eq!(survey_text(&again, &advice_again), survey_text(&live, &advice));
        assert_eq!(survey_json(&again, &advice_again, &opts), json);
        for (a, b) in again.pins.iter().zip(&live.pins) {
            assert_eq!(a.source_ohms, b.source_ohms, "ch{}", a.channel);
            assert_eq!(a.node_farads, b.node_farads, "ch{}", a.channel);
            assert_eq!(a.memory, b.memory, "ch{}", a.channel);
        }
    }
}
