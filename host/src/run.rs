//! Run: executes the survey's plan over a link, experiment by experiment, and writes what the
//! board answered into the run record as it arrives.
//!
//! Progress and every new piece of the record are emitted as [`RunEvent`]s: the command line
//! draws its progress bar from them and the store commits each experiment as it comes, so a
//! crash or an unplugged cable loses at most the experiment in flight.

use crate::analyse::{board_model, fit_pins, fit_pins_for, judge_pins, pin_evidence, report, PinEvidence};
use crate::fit::{Fit, Goals};
use crate::judge::{load_planned, memory_planned, SurveyReport};
use crate::link::Link;
use crate::model::{BoardModel, CellObs};
use crate::plan::{burst_droop, Plan, PlanError, ScreenResult, Screened};
use crate::record::{
    new_run_id, now_rfc3339, role_name, BoardRecord, ChannelRecord, ExperimentRecord, ExperimentSpec, FrontEndRecord,
    LinkRecord, PinRecord, Profile, Purpose, RunKind, RunMeta, RunRecord, RunStats,
};
use crate::session::{BoardInfo, LinkStats, RunRecords, Session, SessionError, UnansweredRun};
use ohmsight_protocol::analog::volts_to_lsb;
use ohmsight_protocol::{ChannelRole, Experiment, RunReport, Steps};
use std::collections::HashMap;
use std::time::{Duration, Instant};

/// Something that happened during a run.
#[derive(Debug)]
pub enum RunEvent<'a> {
    /// The board answered the handshake and the run record exists (no experiments yet).
    Began(&'a RunRecord),
    /// An interrupted run goes on: the board answered and is the run's; new experiments follow.
    Resumed(&'a RunRecord),
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
    /// The kind of run the record says it is.
    pub kind: RunKind,
    /// Chooses the converter values the run is analysed with once the board has described
    /// itself (a unit's calibration, a profile file); `None`: the board's own description.
    pub profile: Option<ProfileChoice>,
    /// The pins' names from a wiring file, in place of the board's own labels.
    pub wiring: Option<crate::wiring::Wiring>,
}

/// What a run is analysed with, chosen once the board has said which board and unit it is:
/// given the board and the values of its own description, the values to use (with
/// [`Profile::source`] saying where they came from), or why they could not be found (the run
/// then stops before measuring: analysing under values the user did not mean is worse).
#[derive(Clone)]
pub struct ProfileChoice(pub std::sync::Arc<ChooseProfile>);

/// The function inside a [`ProfileChoice`].
pub type ChooseProfile = dyn Fn(&BoardRecord, Profile) -> Result<Profile, String> + Send + Sync;

impl std::fmt::Debug for ProfileChoice {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str("ProfileChoice(..)")
    }
}

impl SurveyOptions {
    /// The board as it described itself, its pins named by the wiring file when there is one.
    fn board_of(&self, info: &BoardInfo) -> Result<BoardRecord, SurveyError> {
        let mut board = board_record(info);
        if let Some(w) = &self.wiring {
            w.apply(&mut board).map_err(SurveyError::Wiring)?;
        }
        Ok(board)
    }

    /// The values a run on `board` is analysed with: the board's own, or what
    /// [`SurveyOptions::profile`] chooses.
    fn profile_for(&self, board: &BoardRecord, own: Profile) -> Result<Profile, SurveyError> {
        match &self.profile {
            None => Ok(own),
            Some(choose) => (choose.0)(board, own).map_err(SurveyError::Profile),
        }
    }
}

/// Errors of a survey.
#[derive(Debug)]
#[non_exhaustive]
pub enum SurveyError {
    /// Talking to the board failed before anything was measured.
    Session(SessionError),
    /// The board cannot be surveyed as described.
    Board(PlanError),
    /// The board on the link is not the one the run to resume was made on.
    OtherBoard {
        /// The run.
        run: String,
        /// The board and unit of the run.
        was: String,
        /// The board and unit answering now.
        now: String,
    },
    /// The run to resume measured nothing (its board never answered): survey anew.
    NothingToResume {
        /// The run.
        run: String,
    },
    /// A channel asked for is not a pin of the board.
    NoSuchPin {
        /// The channel.
        channel: u8,
        /// The board's pins.
        pins: Vec<u8>,
    },
    /// The limits of a check do not fit the board that answered (file, line, what to change).
    Limits(String),
    /// The values to analyse with could not be chosen (the store could not be read for the
    /// unit's calibration).
    Profile(String),
    /// The wiring file does not fit the board that answered.
    Wiring(String),
}

impl SurveyError {
    /// Whether the user asked for something the board does not have (bad input), rather than
    /// the link or board failing.
    pub fn is_bad_input(&self) -> bool {
        matches!(
            self,
            SurveyError::NoSuchPin { .. }
                | SurveyError::OtherBoard { .. }
                | SurveyError::NothingToResume { .. }
                | SurveyError::Limits(_)
                | SurveyError::Wiring(_)
        )
    }
}

impl std::fmt::Display for SurveyError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            SurveyError::Session(e) => e.fmt(f),
            SurveyError::Board(e) => e.fmt(f),
            SurveyError::Limits(e) => f.write_str(e),
            SurveyError::Profile(e) | SurveyError::Wiring(e) => f.write_str(e),
            SurveyError::OtherBoard { run, was, now } => write!(
                f,
                "run {run} was made on board {was}, but board {now} answers on this link: connect the board of \
                 that run, or survey this one anew"
            ),
            SurveyError::NothingToResume { run } => {
                write!(f, "run {run} measured nothing (its board never answered): survey the board anew")
            }
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
    /// Added to the board's clock in the record: 0 for a new run; for a resumed one, past the
    /// earlier part's end and a rest gap (the board's clock may have started again at zero).
    clock_offset_ps: u64,
}

impl<L: Link> Runner<'_, '_, L> {
    fn plan_more(&mut self, n: i64) {
        self.planned = self.planned.saturating_add_signed(n);
        (self.on_event)(&RunEvent::Planned { total: self.planned });
    }

    fn next_seq(&self) -> u32 {
        self.record.experiments.iter().map(|e| e.seq + 1).max().unwrap_or(0)
    }

    fn push(&mut self, e: ExperimentRecord) {
        self.record.experiments.push(e);
        if let Some(e) = self.record.experiments.last() {
            (self.on_event)(&RunEvent::Recorded(e));
        }
    }

    /// The record of one run the board reported, placed on the run's clock; `records`: what
    /// the host took of it (`None`: a run it has no records of).
    fn entry(
        &self,
        purpose: Purpose,
        pin: Option<u8>,
        experiment: ExperimentSpec,
        report: &RunReport,
        records: Option<&RunRecords>,
    ) -> ExperimentRecord {
        ExperimentRecord {
            seq: self.next_seq(),
            purpose,
            pin,
            experiment,
            board_run: report.run,
            start_ps: report.start_ps + self.clock_offset_ps,
            end_ps: report.end_ps + self.clock_offset_ps,
            received: records.is_some(),
            conversions: report.conversions,
            cells: records.map_or(Vec::new(), |r| r.cells.iter().map(Into::into).collect()),
            samples: records.map_or(Vec::new(), |r| r.samples.clone()),
        }
    }

    /// Adds runs the board made that the host took no records of, where the board ran them.
    fn push_unanswered(&mut self, runs: &[UnansweredRun]) {
        for u in runs {
            let Some((purpose, pin, spec)) = self.calls.get(&u.call).cloned() else { continue };
            let e = self.entry(purpose, pin, spec, &u.report, None);
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
        let e = self.entry(purpose, pin, spec, &rec.report, Some(&rec));
        self.push(e);
        Ok(rec)
    }

    /// Measures the precharge sources' `levels` (announcing them and `more` experiments after
    /// them) and takes the levels into the model; the fault that stopped it, if one did.
    fn precharge_levels(&mut self, levels: Vec<Experiment>, more: i64) -> Option<String> {
        self.plan_more(levels.len() as i64 + more);
        let mut fault = None;
        for exp in levels {
            if let Err(e) = self.run(Purpose::PrechargeLevel, None, exp) {
                fault = Some(e.to_string());
                break;
            }
        }
        self.model = board_model(&self.record);
        fault
    }

    /// The experiments of `purpose` the record already holds on `pin`, in order.
    fn recorded(&self, pin: u8, purpose: Purpose) -> Vec<ExperimentRecord> {
        self.record.experiments.iter().filter(|e| e.pin == Some(pin) && e.purpose == purpose).cloned().collect()
    }

    /// The cells of `exp` on `pin`: from the record when it holds them, else measured now.
    fn cells(
        &mut self,
        recorded: Option<&ExperimentRecord>,
        purpose: Purpose,
        pin: u8,
        exp: Experiment,
    ) -> Result<Vec<CellObs>, SessionError> {
        Ok(match recorded {
            Some(e) => e.cells.iter().map(|c| CellObs::from_aggregate(&c.aggregate())).collect(),
            None => self.run(purpose, Some(pin), exp)?.cells.iter().map(CellObs::from_aggregate).collect(),
        })
    }

    /// The screen of one pin (what the record lacks of it is measured): what the detail step
    /// needs, or `None` for a pin at a rail.
    fn screen(&mut self, plan: &Plan, pin: u8) -> Result<Option<ScreenResult>, SessionError> {
        let recorded = self.recorded(pin, Purpose::Screen);
        let cells = self.cells(recorded.first(), Purpose::Screen, pin, plan.screen(pin))?;
        match plan.after_screen(&self.model, pin, &cells) {
            Screened::Rail(_) => {
                // No droop run on a rail.
                self.plan_more(-1);
                Ok(None)
            }
            Screened::Droop { far, droop } => {
                let burst = self.cells(recorded.get(1), Purpose::Screen, pin, droop)?;
                Ok(Some(ScreenResult { cells, burst_droop: burst_droop(&burst), far }))
            }
        }
    }

    /// The detail experiments and the noise record of one pin not at a rail (those the record
    /// does not hold yet: the plan runs them in order, so the record holds the first ones).
    fn detail(&mut self, plan: &Plan, pin: u8, screen: &ScreenResult) -> Result<(), SessionError> {
        let done = self.recorded(pin, Purpose::Detail).len();
        let exps: Vec<Experiment> = plan.detail(&self.model, pin, screen).into_iter().skip(done).collect();
        let noise = self.recorded(pin, Purpose::Noise).is_empty();
        self.plan_more(exps.len() as i64 + i64::from(noise));
        for exp in exps {
            self.run(Purpose::Detail, Some(pin), exp)?;
        }
        if noise {
            self.run(Purpose::Noise, Some(pin), plan.noise(pin))?;
        }
        Ok(())
    }
}

/// The board name and unit id of a run whose board never identified itself.
pub const UNIDENTIFIED: &str = "unidentified";

/// A finished (or cut short) survey: its record and the analysis of it.
#[derive(Debug, Clone)]
pub struct Surveyed {
    /// The analysis; `report.record` is the run record.
    pub report: SurveyReport,
    /// Host computing time spent analysing (evidence, fits, verdicts), s.
    pub analysis_seconds: f64,
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
            .map(|c| ChannelRecord {
                channel: c.channel,
                label: c.label.to_string(),
                role: role_name(c.role).into(),
                pull: c.pull,
                drive: c.drive,
            })
            .collect(),
    }
}

/// The handshake and the plan; a board that does not answer or cannot be surveyed still gets
/// a record (the run, its fault, nothing measured), returned as the error.
fn connect<L: Link>(
    session: &mut Session<L>,
    opts: &SurveyOptions,
    wall: Instant,
    on_event: &mut dyn FnMut(&RunEvent),
) -> Result<(BoardInfo, Plan, String), Box<Surveyed>> {
    let started = now_rfc3339();
    match session.handshake(opts.any_version) {
        Ok(info) => match Plan::new(&info.front_end) {
            Ok(plan) => Ok((info, plan, started)),
            Err(e) => Err(Box::new(unsurveyed(opts, started, wall, Some(&info), e.to_string(), session, on_event))),
        },
        Err(e) => Err(Box::new(unsurveyed(opts, started, wall, None, e.to_string(), session, on_event))),
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
    let (info, plan, started) = match connect(session, opts, wall, on_event) {
        Ok(connected) => connected,
        Err(unsurveyed) => return Ok(*unsurveyed),
    };
    let all_pins: Vec<u8> = info.channels.iter().filter(|c| c.role == ChannelRole::Pin).map(|c| c.channel).collect();
    for &c in &opts.channels {
        if !all_pins.contains(&c) {
            return Err(SurveyError::NoSuchPin { channel: c, pins: all_pins });
        }
    }
    let board = opts.board_of(&info)?;
    let pins: Vec<PinRecord> = board
        .channels
        .iter()
        .filter(|c| c.role == "pin" && (opts.channels.is_empty() || opts.channels.contains(&c.channel)))
        .map(|c| PinRecord { channel: c.channel, label: c.label.clone(), complete: false })
        .collect();
    if pins.is_empty() {
        return Err(SurveyError::NoSuchPin { channel: opts.channels.first().copied().unwrap_or(0), pins: all_pins });
    }
    let nominal_model = BoardModel::from_front_end(&info.front_end);
    let profile = opts.profile_for(&board, Profile::from_model(&nominal_model, &info.front_end))?;
    let record = RunRecord { run: run_meta(opts, started, Some(&info)), board, profile, pins, experiments: Vec::new() };
    on_event(&RunEvent::Began(&record));
    Ok(measure(session, &plan, record, 0, RunStats::default(), wall, on_event))
}

/// Idle time assumed before the first experiment of a resumed run, ps: the board was
/// unplugged or restarted for an unknown while, so the model lets every node come to rest.
pub const RESUME_GAP_PS: u64 = 1_000_000_000_000_000;

/// Finishes an interrupted run on the same board: re-does only what the record lacks (the
/// experiments after the fault, and the tests that depended on them), adds them to the same
/// run, and analyses the whole.
pub fn resume_with<L: Link>(
    session: &mut Session<L>,
    record: RunRecord,
    opts: &SurveyOptions,
    on_event: &mut dyn FnMut(&RunEvent),
) -> Result<Surveyed, SurveyError> {
    let wall = Instant::now();
    if record.pins.is_empty() {
        return Err(SurveyError::NothingToResume { run: record.run.id });
    }
    let info = session.handshake(opts.any_version)?;
    // The same board, unit and description, or the evidence would mix two boards.
    if info.name != record.board.name
        || info.unit_id != record.board.unit_id
        || FrontEndRecord::from(&info.front_end) != record.board.front_end
    {
        return Err(SurveyError::OtherBoard {
            run: record.run.id,
            was: format!("\"{}\" unit {:016x}", record.board.name, record.board.unit_id),
            now: format!("\"{}\" unit {:016x}", info.name, info.unit_id),
        });
    }
    let plan = Plan::new(&info.front_end).map_err(SurveyError::Board)?;
    let last_end = record.experiments.iter().map(|e| e.end_ps).max().unwrap_or(0);
    let base = record.run.stats;
    let mut record = record;
    record.run.fault = None;
    record.run.finished = None;
    on_event(&RunEvent::Resumed(&record));
    Ok(measure(session, &plan, record, last_end + RESUME_GAP_PS, base, wall, on_event))
}

/// Measures whatever of the plan the record does not hold yet (everything, for a new run),
/// then fits every pin, runs the memory tests the verdicts call for, and analyses the whole.
/// A link fault stops the experiments; what was measured up to it is still fitted and reported.
fn measure<L: Link>(
    session: &mut Session<L>,
    plan: &Plan,
    record: RunRecord,
    clock_offset_ps: u64,
    base: RunStats,
    wall: Instant,
    on_event: &mut dyn FnMut(&RunEvent),
) -> Surveyed {
    let model = board_model(&record);
    let mut runner = Runner { session, model, record, on_event, planned: 0, calls: HashMap::new(), clock_offset_ps };
    let todo: Vec<(usize, u8)> =
        runner.record.pins.iter().enumerate().filter(|(_, p)| !p.complete).map(|(i, p)| (i, p.channel)).collect();
    let levels: Vec<Experiment> = plan
        .precharge_levels()
        .into_iter()
        .filter(|e| {
            !runner.record.experiments.iter().any(|r| r.purpose == Purpose::PrechargeLevel && r.experiment == e.into())
        })
        .collect();
    // 1. Precharge levels, measured. 2. Screen, 3. detail where needed.
    let mut fault = runner.precharge_levels(levels, 2 * todo.len() as i64);
    let mut screens: Vec<Option<ScreenResult>> = Vec::new();
    if fault.is_none() {
        for &(_, ch) in &todo {
            match runner.screen(plan, ch) {
                Ok(s) => screens.push(s),
                Err(e) => {
                    fault = Some(e.to_string());
                    break;
                }
            }
        }
    }
    if fault.is_none() {
        for (&(i, ch), screen) in todo.iter().zip(&screens) {
            let done = screen.as_ref().map_or(Ok(()), |s| runner.detail(plan, ch, s));
            if let Err(e) = done {
                fault = Some(e.to_string());
                break;
            }
            runner.record.pins[i].complete = true;
            (runner.on_event)(&RunEvent::PinComplete(ch));
        }
    }

    // 4. Fit every pin; 5. verdicts, then the memory test where a pin has a verdict to test;
    // 6. the loading burst where a stiff pin's bound rests on an assumed node size.
    (runner.on_event)(&RunEvent::Fitting);
    let analysing = Instant::now();
    let model = runner.model.clone();
    let evidence = pin_evidence(&runner.record, &model);
    let fits = fit_pins(&model, &evidence);
    let judged = judge_pins(&model, &evidence, &fits, true);
    let mut analysis_seconds = analysing.elapsed().as_secs_f64();
    if fault.is_none() {
        // Per pin, the burst after the memory test: the burst moves a large open node, and
        // nothing the fit replays comes after it.
        let mut todo: Vec<(Purpose, u8, Experiment)> = Vec::new();
        let front_end = runner.record.board.front_end.to_front_end();
        for (r, ev) in judged.iter().zip(&evidence).filter(|(_, ev)| ev.complete) {
            let level = r.source_volts.map(|v| volts_to_lsb(v, model.vref_volts, model.bits)).unwrap_or(0.0);
            if memory_planned(r) && ev.swap.is_none() {
                todo.push((Purpose::Memory, r.channel, plan.memory(&model, r.channel, r.min_sample_index, level)));
            }
            if load_planned(r) && ev.burst.is_none() {
                let far = plan.far_from(&model, level);
                todo.push((Purpose::Load, r.channel, crate::burst::experiment(plan, &model, r.channel, far)));
            }
            // Last on the pin, where the board lets it be pulled; the rest between conversions
            // is sized from the node's upper end, or from the least it holds where the fit has
            // none (see plan::pull_node_farads).
            if runner.record.board.may_pull(r.channel) && ev.pull.is_none() {
                let (node, _) = crate::plan::pull_node_farads(&r.node_farads);
                if let Some(exp) = plan.pull_test(&front_end, r.channel, node) {
                    todo.push((Purpose::Pull, r.channel, exp));
                }
            }
        }
        runner.plan_more(todo.len() as i64);
        for (purpose, channel, exp) in todo {
            if let Err(e) = runner.run(purpose, Some(channel), exp) {
                fault = Some(e.to_string());
                break;
            }
        }
    }

    let record = close(runner, fault, base, wall);
    // The memory tests only add to the evidence: the fits stand, the verdicts take them in.
    let analysing = Instant::now();
    let evidence = pin_evidence(&record, &model);
    let report = report(&record, &model, &evidence, &fits);
    analysis_seconds += analysing.elapsed().as_secs_f64();
    Surveyed { report, analysis_seconds }
}

/// Ends a run: the runs the board made that the host has no answer of, the fault, the totals.
fn close<L: Link>(
    mut runner: Runner<'_, '_, L>,
    mut fault: Option<String>,
    base: RunStats,
    wall: Instant,
) -> RunRecord {
    // A request that reached the board twice after its last answer: the board's run log says.
    if fault.is_none() {
        match runner.session.unanswered_runs() {
            Ok(runs) => runner.push_unanswered(&runs),
            Err(e) => fault = Some(e.to_string()),
        }
    }
    let link = runner.session.stats;
    let mut record = runner.record;
    record.run.finished = Some(now_rfc3339());
    record.run.complete = fault.is_none() && record.pins.iter().all(|p| p.complete);
    record.run.fault = fault;
    let board_ps: u64 = record.experiments.iter().map(|e| e.end_ps.saturating_sub(e.start_ps)).sum();
    let this = run_stats(&link, board_ps, wall);
    record.run.stats = RunStats {
        conversions: base.conversions + this.conversions,
        link_bytes_sent: base.link_bytes_sent + this.link_bytes_sent,
        link_bytes_received: base.link_bytes_received + this.link_bytes_received,
        bad_frames: base.bad_frames + this.bad_frames,
        reruns: base.reruns + this.reruns,
        board_seconds: this.board_seconds,
        wall_seconds: base.wall_seconds + this.wall_seconds,
    };
    record
}

/// What a check needs measured on one pin.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct PinNeeds {
    /// The channel.
    pub channel: u8,
    /// Settling data for a fit (verdict, source resistance and voltage, node, settling time).
    pub fit: bool,
    /// A noise record (noise, hum).
    pub noise: bool,
    /// How precise the fit's intervals must be (the values the pin's limits turn on).
    pub goals: Goals,
}

/// A production check: only what `needs` asks of each pin, in two passes.
///
/// `needs` is given the board as it described itself and names the pins and what each needs
/// (an `Err` is bad input: the limits do not fit this board). The first pass runs each pin's
/// screen, a short set of settling experiments ([`Plan::quick_detail`]) where a fit is needed
/// and then the short noise records of every pin where noise or hum is, read many pins at once
/// ([`Plan::quick_scans`]). `more` then sees
/// the analysis and names the pins whose decisions are still open; they get the survey's full
/// settling experiments and noise record, and are fitted again on all their evidence.
pub fn check_with<L: Link>(
    session: &mut Session<L>,
    opts: &SurveyOptions,
    needs: &mut dyn FnMut(&BoardRecord) -> Result<Vec<PinNeeds>, String>,
    more: &mut dyn FnMut(&SurveyReport) -> Vec<PinNeeds>,
    on_event: &mut dyn FnMut(&RunEvent),
) -> Result<Surveyed, SurveyError> {
    let wall = Instant::now();
    let (info, plan, started) = match connect(session, opts, wall, on_event) {
        Ok(connected) => connected,
        Err(unsurveyed) => return Ok(*unsurveyed),
    };
    let board = opts.board_of(&info)?;
    let wanted = needs(&board).map_err(SurveyError::Limits)?;
    let pins: Vec<PinRecord> = board
        .channels
        .iter()
        .filter(|c| wanted.iter().any(|w| w.channel == c.channel))
        .map(|c| PinRecord { channel: c.channel, label: c.label.clone(), complete: false })
        .collect();
    let nominal_model = BoardModel::from_front_end(&info.front_end);
    let mut run = run_meta(opts, started, Some(&info));
    run.channels = pins.iter().map(|p| p.channel).collect();
    let profile = opts.profile_for(&board, Profile::from_model(&nominal_model, &info.front_end))?;
    let record = RunRecord { run, board, profile, pins, experiments: Vec::new() };
    on_event(&RunEvent::Began(&record));
    let model = board_model(&record);
    let mut runner = Runner { session, model, record, on_event, planned: 0, calls: HashMap::new(), clock_offset_ps: 0 };
    let mut fault = runner.precharge_levels(plan.precharge_levels().to_vec(), 2 * wanted.len() as i64);
    // Pass 1: screen and short settling experiments pin by pin, then the short noise records
    // of every pin that needs one, many pins at once (scan records).
    let mut screens: HashMap<u8, Option<ScreenResult>> = HashMap::new();
    for need in runner.record.pins.clone() {
        if fault.is_some() {
            break;
        }
        let Some(need) = wanted.iter().find(|w| w.channel == need.channel).copied() else { continue };
        let pass = runner.screen(&plan, need.channel).and_then(|screen| {
            if let Some(sc) = &screen {
                let model = runner.model.clone();
                let exps: Vec<Experiment> =
                    if need.fit { plan.quick_detail(&model, need.channel, sc) } else { Vec::new() };
                runner.plan_more(exps.len() as i64);
                for exp in exps {
                    runner.run(Purpose::Detail, Some(need.channel), exp)?;
                }
            }
            Ok(screen)
        });
        match pass {
            Ok(screen) => {
                screens.insert(need.channel, screen);
            }
            Err(e) => fault = Some(e.to_string()),
        }
    }
    if fault.is_none() {
        let noisy: Vec<(u8, f64)> = wanted
            .iter()
            .filter(|w| w.noise)
            .filter_map(|w| Some((w.channel, screens.get(&w.channel)?.as_ref()?.level_lsb()?)))
            .collect();
        let scans = plan.quick_scans(&runner.model, &noisy);
        runner.plan_more(scans.len() as i64);
        if let Err(e) = scans.into_iter().try_for_each(|exp| runner.run(Purpose::Noise, None, exp).map(|_| ())) {
            fault = Some(e.to_string());
        }
    }
    if fault.is_none() {
        // A pin is complete once its screen, settling experiments and noise reading are in.
        for i in 0..runner.record.pins.len() {
            let ch = runner.record.pins[i].channel;
            if screens.contains_key(&ch) {
                runner.record.pins[i].complete = true;
                (runner.on_event)(&RunEvent::PinComplete(ch));
            }
        }
    }
    (runner.on_event)(&RunEvent::Fitting);
    let analysing = Instant::now();
    let model = runner.model.clone();
    let evidence = pin_evidence(&runner.record, &model);
    let goals = |ch: u8| wanted.iter().find(|w| w.channel == ch).map_or(Goals::FULL, |w| w.goals);
    let mut fits = fit_pins_for(&model, &evidence, &goals);
    let mut analysis_seconds = analysing.elapsed().as_secs_f64();
    // Pass 2: the survey's own experiments where a decision is still open.
    if fault.is_none() {
        let analysing = Instant::now();
        let first = report(&runner.record, &model, &evidence, &fits);
        let again: Vec<PinNeeds> = more(&first);
        analysis_seconds += analysing.elapsed().as_secs_f64();
        for need in &again {
            let Some(Some(sc)) = screens.get(&need.channel) else { continue };
            let exps: Vec<Experiment> = if need.fit { plan.check_detail(&model, need.channel, sc) } else { Vec::new() };
            runner.plan_more(exps.len() as i64 + i64::from(need.noise));
            let pass = exps
                .into_iter()
                .try_for_each(|exp| runner.run(Purpose::Detail, Some(need.channel), exp).map(|_| ()))
                .and_then(|_| match need.noise {
                    true => runner.run(Purpose::Noise, Some(need.channel), plan.noise(need.channel)).map(|_| ()),
                    false => Ok(()),
                });
            if let Err(e) = pass {
                fault = Some(e.to_string());
                break;
            }
        }
        if !again.is_empty() {
            (runner.on_event)(&RunEvent::Fitting);
            let analysing = Instant::now();
            let evidence = pin_evidence(&runner.record, &model);
            let refit: Vec<bool> = evidence.iter().map(|e| again.iter().any(|a| a.channel == e.channel)).collect();
            fits = refit_some(&model, &evidence, fits, &refit, &goals);
            analysis_seconds += analysing.elapsed().as_secs_f64();
        }
    }
    let record = close(runner, fault, RunStats::default(), wall);
    let analysing = Instant::now();
    let evidence = pin_evidence(&record, &model);
    let report = report(&record, &model, &evidence, &fits);
    analysis_seconds += analysing.elapsed().as_secs_f64();
    Ok(Surveyed { report, analysis_seconds })
}

/// Fits again the pins marked in `which` (in parallel), keeping the other fits.
fn refit_some(
    model: &BoardModel,
    pins: &[PinEvidence],
    fits: Vec<Option<Fit>>,
    which: &[bool],
    goals: &(dyn Fn(u8) -> Goals + Sync),
) -> Vec<Option<Fit>> {
    let chosen: Vec<PinEvidence> = pins.iter().zip(which).filter(|(_, w)| **w).map(|(p, _)| p.clone()).collect();
    let mut new = fit_pins_for(model, &chosen, goals).into_iter();
    fits.into_iter().zip(which).map(|(old, w)| if *w { new.next().flatten() } else { old }).collect()
}

/// The run's metadata at its start (`info`: the board, when it answered).
fn run_meta(opts: &SurveyOptions, started: String, info: Option<&BoardInfo>) -> RunMeta {
    let ctx = &opts.context;
    RunMeta {
        id: new_run_id(),
        kind: opts.kind,
        started,
        finished: None,
        tool_version: env!("CARGO_PKG_VERSION").into(),
        firmware_version: info.map_or(String::new(), |i| i.firmware.clone()),
        protocol_version: info.map_or(0, |i| i.protocol),
        board: info.map_or(UNIDENTIFIED.into(), |i| i.name.clone()),
        unit_id: info.map_or(UNIDENTIFIED.into(), |i| format!("{:016x}", i.unit_id)),
        link: ctx.link.clone(),
        scenario: ctx.scenario.clone(),
        seed: ctx.seed,
        command: ctx.command.clone(),
        channels: opts.channels.clone(),
        complete: false,
        fault: None,
        stats: RunStats::default(),
    }
}

fn run_stats(stats: &LinkStats, board_ps: u64, wall: Instant) -> RunStats {
    RunStats {
        conversions: stats.conversions,
        link_bytes_sent: stats.bytes_sent,
        link_bytes_received: stats.bytes_received,
        bad_frames: stats.bad_frames,
        reruns: stats.reruns,
        board_seconds: board_ps as f64 * 1e-12,
        wall_seconds: wall.elapsed().as_secs_f64(),
    }
}

/// The record of a survey that measured nothing: the board did not answer, or described itself
/// in a way that cannot be surveyed. Emitted as begun, so the store keeps it.
fn unsurveyed<L: Link>(
    opts: &SurveyOptions,
    started: String,
    wall: Instant,
    info: Option<&BoardInfo>,
    fault: String,
    session: &Session<L>,
    on_event: &mut dyn FnMut(&RunEvent),
) -> Surveyed {
    let mut run = run_meta(opts, started, info);
    let board = info.map(board_record).unwrap_or_else(|| BoardRecord {
        name: UNIDENTIFIED.into(),
        firmware: String::new(),
        protocol: 0,
        unit_id: 0,
        front_end: FrontEndRecord::default(),
        channels: Vec::new(),
    });
    let fe = board.front_end.to_front_end();
    let record = RunRecord {
        profile: Profile::from_model(&BoardModel::from_front_end(&fe), &fe),
        board,
        pins: Vec::new(),
        experiments: Vec::new(),
        run: run.clone(),
    };
    on_event(&RunEvent::Began(&record));
    run.finished = Some(now_rfc3339());
    run.fault = Some(fault);
    run.stats = run_stats(&session.stats, 0, wall);
    let record = RunRecord { run, ..record };
    Surveyed { report: report(&record, &record.profile.model(), &[], &[]), analysis_seconds: 0.0 }
}

/// Runs a survey with no one listening to its progress.
pub fn survey<L: Link>(session: &mut Session<L>, opts: &SurveyOptions) -> Result<SurveyReport, SurveyError> {
    survey_with(session, opts, &mut |_| {}).map(|s| s.report)
}
