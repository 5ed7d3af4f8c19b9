//! Run: executes the survey's plan over a link, experiment by experiment, and writes what the
//! board answered into the run record as it arrives.
//!
//! Progress and every new piece of the record are emitted as [`RunEvent`]s: the command line
//! draws its progress bar from them and the store commits each experiment as it comes, so a
//! crash or an unplugged cable loses at most the experiment in flight.

use crate::analyse::{board_model, fit_pins, judge_pins, pin_evidence, report};
use crate::judge::{SurveyReport, Verdict};
use crate::link::Link;
use crate::model::{BoardModel, CellObs};
use crate::plan::{burst_droop, Plan, PlanError, ScreenResult, Screened};
use crate::record::{
    new_run_id, now_rfc3339, role_name, BoardRecord, ChannelRecord, ExperimentRecord, ExperimentSpec, FrontEndRecord,
    LinkRecord, PinRecord, Profile, Purpose, RunKind, RunMeta, RunRecord, RunStats,
};
use crate::session::{RunRecords, Session, SessionError, UnansweredRun};
use ohmsight_protocol::analog::volts_to_lsb;
use ohmsight_protocol::{ChannelRole, Experiment, Steps};
use std::collections::HashMap;
use std::time::{Duration, Instant};

/// Something that happened during a run.
#[derive(Debug)]
pub enum RunEvent<'a> {
    /// The board answered the handshake and the run record exists (no experiments yet).
    Began(&'a RunRecord),
    /// More experiments are planned than announced so far (`total` in all).
    Planned {
        /// Experiments planned in all.
        total: u64,
    },
    /// An experiment is about to run.
    Starting {
        /// The pin, if the experiment is on one.
        pin: Option<u8>,
        /// What it is (`screen`, `precharge sweep`, …).
        what: &'static str,
    },
    /// An experiment's records arrived and were added to the record.
    Recorded(&'a ExperimentRecord),
    /// Every planned experiment of this pin (before the memory test) has been recorded.
    PinComplete(u8),
    /// Measuring paused for the fit.
    Fitting,
}

/// How the board is reached and what is being surveyed, for the run record.
#[derive(Debug, Clone, PartialEq)]
pub struct RunContext {
    /// The link.
    pub link: LinkRecord,
    /// The scenario of a simulated board.
    pub scenario: Option<String>,
    /// The seed of a simulated board.
    pub seed: Option<u64>,
    /// The command line.
    pub command: String,
}

impl Default for RunContext {
    fn default() -> Self {
        RunContext { link: LinkRecord::InProcess, scenario: None, seed: None, command: String::new() }
    }
}

/// Survey options.
#[derive(Debug, Clone, Default)]
pub struct SurveyOptions {
    /// Accept a board with another protocol version.
    pub any_version: bool,
    /// Survey only these channels (all pins when empty).
    pub channels: Vec<u8>,
    /// Link, scenario and command line for the record.
    pub context: RunContext,
}

/// Errors of a survey.
#[derive(Debug)]
#[non_exhaustive]
pub enum SurveyError {
    /// Talking to the board failed before anything was measured.
    Session(SessionError),
    /// The board cannot be surveyed as described.
    Board(PlanError),
    /// A channel asked for is not a pin of the board.
    NoSuchPin {
        /// The channel.
        channel: u8,
        /// The board's pins.
        pins: Vec<u8>,
    },
}

impl SurveyError {
    /// Whether the user asked for something the board does not have (bad input), rather than
    /// the link or board failing.
    pub fn is_bad_input(&self) -> bool {
        matches!(self, SurveyError::NoSuchPin { .. })
    }
}

impl std::fmt::Display for SurveyError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            SurveyError::Session(e) => e.fmt(f),
            SurveyError::Board(e) => e.fmt(f),
            SurveyError::NoSuchPin { channel, pins } => {
                let list: Vec<String> = pins.iter().map(u8::to_string).collect();
                write!(f, "channel {channel} is not a pin of this board; it has pins {}", list.join(", "))
            }
        }
    }
}

impl std::error::Error for SurveyError {}

impl From<SessionError> for SurveyError {
    fn from(e: SessionError) -> Self {
        SurveyError::Session(e)
    }
}

/// Runs experiments and keeps the record, each run placed where the board says it ran.
struct Runner<'s, 'e, L> {
    session: &'s mut Session<L>,
    model: BoardModel,
    record: RunRecord,
    on_event: &'e mut dyn FnMut(&RunEvent),
    planned: u64,
    /// What each [`Session::run`] call asked for, by call index.
    calls: HashMap<usize, (Purpose, Option<u8>, ExperimentSpec)>,
}

impl<L: Link> Runner<'_, '_, L> {
    fn plan_more(&mut self, n: i64) {
        self.planned = self.planned.saturating_add_signed(n);
        (self.on_event)(&RunEvent::Planned { total: self.planned });
    }

    fn push(&mut self, e: ExperimentRecord) {
        self.record.experiments.push(e);
        if let Some(e) = self.record.experiments.last() {
            (self.on_event)(&RunEvent::Recorded(e));
        }
    }

    /// Adds runs the board made that the host took no records of, where the board ran them.
    fn push_unanswered(&mut self, runs: &[UnansweredRun]) {
        for u in runs {
            let Some((purpose, pin, spec)) = self.calls.get(&u.call).cloned() else { continue };
            let e = ExperimentRecord {
                seq: self.record.experiments.len() as u32,
                purpose,
                pin,
                experiment: spec,
                board_run: u.report.run,
                start_ps: u.report.start_ps,
                end_ps: u.report.end_ps,
                received: false,
                conversions: u.report.conversions,
                cells: Vec::new(),
                samples: Vec::new(),
            };
            self.push(e);
        }
    }

    /// Runs `exp` and adds it to the record (with any run the board made that the host has no
    /// records of before it).
    fn run(&mut self, purpose: Purpose, pin: Option<u8>, exp: Experiment) -> Result<RunRecords, SessionError> {
        let what = if purpose == Purpose::Screen { "screen" } else { exp.name() };
        (self.on_event)(&RunEvent::Starting { pin, what });
        let nominal = Steps::new(&exp, self.model.timing()).map(|s| s.nominal_ps()).unwrap_or(0);
        let rec = self.session.run(&exp, Duration::from_nanos(nominal / 1000))?;
        let spec = ExperimentSpec::from(&exp);
        self.calls.insert(rec.call, (purpose, pin, spec.clone()));
        self.push_unanswered(&rec.unanswered);
        let e = ExperimentRecord {
            seq: self.record.experiments.len() as u32,
            purpose,
            pin,
            experiment: spec,
            board_run: rec.report.run,
            start_ps: rec.report.start_ps,
            end_ps: rec.report.end_ps,
            received: true,
            conversions: rec.report.conversions,
            cells: rec.cells.iter().map(Into::into).collect(),
            samples: rec.samples.clone(),
        };
        self.push(e);
        Ok(rec)
    }

    /// The screen of one pin: what the detail step needs, or `None` for a pin at a rail.
    fn screen(&mut self, plan: &Plan, pin: u8) -> Result<Option<ScreenResult>, SessionError> {
        let rec = self.run(Purpose::Screen, Some(pin), plan.screen(pin))?;
        let cells: Vec<CellObs> = rec.cells.iter().map(CellObs::from_aggregate).collect();
        match plan.after_screen(&self.model, pin, &cells) {
            Screened::Rail(_) => {
                // No droop run on a rail.
                self.plan_more(-1);
                Ok(None)
            }
            Screened::Droop { far, droop } => {
                let rec = self.run(Purpose::Screen, Some(pin), droop)?;
                let burst: Vec<CellObs> = rec.cells.iter().map(CellObs::from_aggregate).collect();
                Ok(Some(ScreenResult { cells, burst_droop: burst_droop(&burst), far }))
            }
        }
    }

    /// The detail experiments and the noise record of one pin not at a rail.
    fn detail(&mut self, plan: &Plan, pin: u8, screen: &ScreenResult) -> Result<(), SessionError> {
        let exps = plan.detail(&self.model, pin, screen);
        self.plan_more(exps.len() as i64 + 1);
        for exp in exps {
            self.run(Purpose::Detail, Some(pin), exp)?;
        }
        self.run(Purpose::Noise, Some(pin), plan.noise(pin))?;
        Ok(())
    }
}

/// A finished (or cut short) survey: its record and the analysis of it.
#[derive(Debug, Clone)]
pub struct Surveyed {
    /// The analysis; `report.record` is the run record.
    pub report: SurveyReport,
}

/// The board as it described itself, for the record.
fn board_record(info: &crate::session::BoardInfo) -> BoardRecord {
    BoardRecord {
        name: info.name.clone(),
        firmware: info.firmware.clone(),
        protocol: info.protocol,
        unit_id: info.unit_id,
        front_end: FrontEndRecord::from(&info.front_end),
        channels: info
            .channels
            .iter()
            .map(|c| ChannelRecord { channel: c.channel, label: c.label.to_string(), role: role_name(c.role).into() })
            .collect(),
    }
}

/// Runs a survey on a connected board, emitting progress and record events.
///
/// A link fault after the handshake does not fail the survey: what was measured is analysed
/// and reported, the record says what cut it short (`run.fault`) and that it is incomplete.
pub fn survey_with<L: Link>(
    session: &mut Session<L>,
    opts: &SurveyOptions,
    on_event: &mut dyn FnMut(&RunEvent),
) -> Result<Surveyed, SurveyError> {
    let wall = Instant::now();
    let started = now_rfc3339();
    let info = session.handshake(opts.any_version)?;
    let plan = Plan::new(&info.front_end).map_err(SurveyError::Board)?;
    let all_pins: Vec<u8> = info.channels.iter().filter(|c| c.role == ChannelRole::Pin).map(|c| c.channel).collect();
    for &c in &opts.channels {
        if !all_pins.contains(&c) {
            return Err(SurveyError::NoSuchPin { channel: c, pins: all_pins });
        }
    }
    let pins: Vec<PinRecord> = info
        .channels
        .iter()
        .filter(|c| c.role == ChannelRole::Pin && (opts.channels.is_empty() || opts.channels.contains(&c.channel)))
        .map(|c| PinRecord { channel: c.channel, label: c.label.to_string(), complete: false })
        .collect();
    if pins.is_empty() {
        return Err(SurveyError::NoSuchPin { channel: opts.channels.first().copied().unwrap_or(0), pins: all_pins });
    }
    let nominal_model = BoardModel::from_front_end(&info.front_end);
    let ctx = &opts.context;
    let record = RunRecord {
        run: RunMeta {
            id: new_run_id(),
            kind: RunKind::Survey,
            started,
            finished: None,
            tool_version: env!("CARGO_PKG_VERSION").into(),
            firmware_version: info.firmware.clone(),
            protocol_version: info.protocol,
            board: info.name.clone(),
            unit_id: format!("{:016x}", info.unit_id),
            link: ctx.link.clone(),
            scenario: ctx.scenario.clone(),
            seed: ctx.seed,
            command: ctx.command.clone(),
            channels: opts.channels.clone(),
            complete: false,
            fault: None,
            stats: RunStats::default(),
        },
        board: board_record(&info),
        profile: Profile::from_model(&nominal_model, &info.front_end),
        pins,
        experiments: Vec::new(),
    };
    // The analysis builds its model from the record; so does the plan, so both agree.
    let model = record.profile.model();
    on_event(&RunEvent::Began(&record));
    let n_pins = record.pins.len() as u64;
    let mut runner = Runner { session, model, record, on_event, planned: 0, calls: HashMap::new() };
    runner.plan_more(2 + 2 * n_pins as i64);

    // 1. Precharge levels, measured. 2. Screen, 3. detail where needed. A link fault stops the
    //    experiments; what was measured up to it is still fitted and reported.
    let mut fault: Option<String> = None;
    for exp in plan.precharge_levels() {
        if let Err(e) = runner.run(Purpose::PrechargeLevel, None, exp) {
            fault = Some(e.to_string());
            break;
        }
    }
    runner.model = board_model(&runner.record);
    let channels: Vec<u8> = runner.record.pins.iter().map(|p| p.channel).collect();
    let mut screens: Vec<Option<ScreenResult>> = Vec::new();
    if fault.is_none() {
        for &ch in &channels {
            match runner.screen(&plan, ch) {
                Ok(s) => screens.push(s),
                Err(e) => {
                    fault = Some(e.to_string());
                    break;
                }
            }
        }
    }
    if fault.is_none() {
        for (i, (&ch, screen)) in channels.iter().zip(&screens).enumerate() {
            let done = screen.as_ref().map_or(Ok(()), |s| runner.detail(&plan, ch, s));
            if let Err(e) = done {
                fault = Some(e.to_string());
                break;
            }
            runner.record.pins[i].complete = true;
            (runner.on_event)(&RunEvent::PinComplete(ch));
        }
    }

    // 4. Fit every pin; 5. verdicts, then the memory test where a pin has a verdict to test.
    (runner.on_event)(&RunEvent::Fitting);
    let model = runner.model.clone();
    let evidence = pin_evidence(&runner.record, &model);
    let fits = fit_pins(&model, &evidence);
    let judged = judge_pins(&model, &evidence, &fits);
    if fault.is_none() {
        let wanted: Vec<_> = judged
            .iter()
            .zip(&runner.record.pins)
            .filter(|(r, p)| p.complete && (r.verdict != Verdict::AtRail || r.fit.is_some()))
            .map(|(r, _)| r)
            .collect();
        runner.plan_more(wanted.len() as i64);
        for r in wanted {
            let level = r.source_volts.map(|v| volts_to_lsb(v, model.vref_volts, model.bits)).unwrap_or(0.0);
            let exp = plan.memory(&model, r.channel, r.min_sample_index, level);
            if let Err(e) = runner.run(Purpose::Memory, Some(r.channel), exp) {
                fault = Some(e.to_string());
                break;
            }
        }
    }

    // A request that reached the board twice after its last answer: the board's run log says.
    if fault.is_none() {
        match runner.session.unanswered_runs() {
            Ok(runs) => runner.push_unanswered(&runs),
            Err(e) => fault = Some(e.to_string()),
        }
    }
    let stats = runner.session.stats;
    let mut record = runner.record;
    record.run.finished = Some(now_rfc3339());
    record.run.complete = fault.is_none() && record.pins.iter().all(|p| p.complete);
    record.run.fault = fault;
    record.run.stats = RunStats {
        conversions: stats.conversions,
        link_bytes_sent: stats.bytes_sent,
        link_bytes_received: stats.bytes_received,
        bad_frames: stats.bad_frames,
        reruns: stats.reruns,
        board_seconds: record.experiments.iter().map(|e| e.end_ps.saturating_sub(e.start_ps)).sum::<u64>() as f64
            * 1e-12,
        wall_seconds: wall.elapsed().as_secs_f64(),
    };
    // The memory tests only add to the evidence: the fits stand, the verdicts take them in.
    let evidence = pin_evidence(&record, &model);
    Ok(Surveyed { report: report(&record, &model, &evidence, &fits) })
}

/// Runs a survey with no one listening to its progress.
pub fn survey<L: Link>(session: &mut Session<L>, opts: &SurveyOptions) -> Result<SurveyReport, SurveyError> {
    survey_with(session, opts, &mut |_| {}).map(|s| s.report)
}
