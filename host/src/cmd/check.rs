//! `ohmsight check`: a production check of one unit against a limits file.

use super::common::{open_session, print, write_output, Bar, DbArgs, Keeper, LinkArgs, ProfileArgs, WiringArgs};
use super::Failure;
use ohmsight::check::{more_wanted, needs, CheckReport, CheckResult};
use ohmsight::limits::{self, Limits, ResolvedPin};
use ohmsight::record::{BoardRecord, RunKind};
use ohmsight::run::{check_with, RunEvent, SurveyOptions};
use ohmsight::store::PinSummary;
use std::cell::RefCell;
use std::path::PathBuf;

pub const EXAMPLES: &str = "Examples:
  ohmsight check --limits gh12.toml --unit SN0042                       the demo board, simulated
  ohmsight check --limits gh12.toml --port /dev/ttyACM0 --unit SN0042 --junit SN0042.xml
  ohmsight check --limits gh12.toml --scenario unit.toml --seed 3 --json
  ohmsight limits --from 01KBX3Q2 01KBX4A7 01KBX5C9 --out gh12.toml    limits from golden units

A check runs only what its limits need: each pin's screen; a short set of settling experiments
where a verdict, source resistance or voltage, node capacitance or settling time is limited;
a 50 ms noise record where noise or hum is. A limit whose 95% interval still straddles its
edge gets the survey's long settling experiments (or its long noise record, for a noise or hum
limit) on that pin, once. Intervals are searched only as far as the limits need: each end is
reported at a value shown to lie outside the interval, so it holds the survey's. With
mains_hz = 50 or 60 in the limits file (one mains frequency at a time), each mains line is
fitted alone and the larger judged, which the short record settles.

A limit passes only when the measurement's whole 95% interval lies inside it and fails when
the interval lies wholly outside; an interval that still straddles the edge is `undecided`,
and an undecided limit fails the unit: it has not been shown to conform (guarded acceptance,
ISO 14253-1). A pin whose verdict is unknown fails a verdict limit.

Every check is stored as a run of kind `check` (the unit serial, the result and per pin and
limit the measured value, its interval, the limit and the outcome: tables `checks` and
`check_limits`); `ohmsight history --kind check` lists them.

Exit status: 0 the unit passes every limit; 1 the unit fails (a limit failed or stayed
undecided); 2 bad input (limits file, arguments, a channel the board lacks); 3 the check could
not be completed (the link, the board or the store failed): no verdict on the unit, and what
was measured is still stored. With --json the result is then \"error\".";

#[derive(clap::Args)]
pub struct Args {
    #[command(flatten)]
    link: LinkArgs,
    /// The limits file (TOML) to judge the unit by.
    #[arg(long, value_name = "FILE.toml")]
    limits: PathBuf,
    /// The unit's serial number, as the station knows it (default: the board's unit id).
    #[arg(long, value_name = "SERIAL")]
    unit: Option<String>,
    /// Print one JSON document (schema ohmsight.check.v1) on stdout instead of the lines.
    #[arg(long)]
    json: bool,
    /// Also write the result as JUnit-style XML (one test case per pin and limit).
    #[arg(long, value_name = "FILE")]
    junit: Option<PathBuf>,
    /// No progress bar, no note of where the run was stored.
    #[arg(long, short)]
    quiet: bool,
    #[command(flatten)]
    profile: ProfileArgs,
    #[command(flatten)]
    wiring: WiringArgs,
    #[command(flatten)]
    db: DbArgs,
}

/// Resolves the limits against the board; the message names the file and line.
fn resolve<'a>(limits: &'a Limits, board: &BoardRecord) -> Result<Vec<ResolvedPin<'a>>, String> {
    limits.resolve(board).map_err(|e| e.to_string())
}

pub fn run(args: Args) -> Result<(), Failure> {
    let limits_toml = std::fs::read_to_string(&args.limits)
        .map_err(|e| Failure::bad_input(format!("{}: cannot read the limits file: {e}", args.limits.display())))?;
    let limits = limits::parse(&args.limits.display().to_string(), &limits_toml)
        .map_err(|e| Failure::bad_input(e.to_string()))?;
    let mut keeper = Keeper::new(args.db.open().map_err(Failure::no_verdict)?);
    let calibrations =
        if args.profile.uncalibrated { None } else { Some(args.db.open().map_err(Failure::no_verdict)?) };
    let profile = args.profile.choice(calibrations)?;
    let wiring = args.wiring.load()?;
    let (mut session, context) = open_session(&args.link)?;
    let opts = SurveyOptions {
        any_version: args.link.any_version,
        channels: Vec::new(),
        context,
        kind: RunKind::Check,
        profile,
        wiring,
    };
    let bar = Bar::new(args.quiet || args.json);
    let resolved: RefCell<Option<Vec<ResolvedPin<'_>>>> = RefCell::new(None);
    let mut on_event = |e: &RunEvent| {
        bar.on(e);
        keeper.on(e);
    };
    let checked = check_with(
        &mut session,
        &opts,
        &mut |board| {
            let pins = resolve(&limits, board)?;
            let wanted = needs(&pins);
            *resolved.borrow_mut() = Some(pins);
            Ok(wanted)
        },
        &mut |first| resolved.borrow().as_deref().map_or(Vec::new(), |pins| more_wanted(pins, first)),
        &mut on_event,
    );
    bar.finish();
    let checked = checked.map_err(|e| Failure::from(e).no_verdict())?;
    let judging = std::time::Instant::now();
    let survey = checked.report;
    let pins = resolved.into_inner().unwrap_or_default();
    let unit = args.unit.clone().unwrap_or_else(|| survey.record.run.unit_id.clone());
    let mut report = CheckReport::new(survey, unit, limits.clone(), limits_toml, &pins, None);
    report.host_seconds = checked.analysis_seconds + judging.elapsed().as_secs_f64();
    // Store the outcome; a store that failed leaves no verdict (exit 3), but the result is
    // still printed.
    if keeper.error.is_none() {
        let r = &report.survey;
        let summaries: Vec<PinSummary> = r.pins.iter().map(PinSummary::from_report).collect();
        let stored = keeper
            .store
            .finish_run(&r.record.run, &summaries)
            .and_then(|_| keeper.store.put_check(&r.record.run.id, &report.summary()));
        if let Err(e) = stored {
            keeper.error = Some(e);
        }
    }
    if let Some(e) = &keeper.error {
        let msg = format!("the run could not be kept in {}: {e}", keeper.store.describe());
        report = CheckReport { error: Some(msg), result: CheckResult::Error, ..report };
    }
    if args.json {
        print(&report.json())?;
    } else {
        print(&report.text())?;
    }
    if let Some(path) = &args.junit {
        write_output(path, report.junit().as_bytes(), "JUnit XML")?;
    }
    if !args.quiet && keeper.error.is_none() {
        eprintln!("ohmsight: run {} kept in {}", report.survey.record.run.id, keeper.store.describe());
    }
    match report.result {
        CheckResult::Pass => Ok(()),
        CheckResult::Fail => Err(Failure::rejected(format!("the unit fails: {}", report.not_passed().join(", ")))),
        CheckResult::Error => {
            Err(Failure::failed(report.error.clone().unwrap_or_else(|| "the check was not completed".into()))
                .no_verdict())
        }
    }
}
