//! `ohmsight survey`: survey a board, print the result, keep the run in the store.

use super::common::{
    channel, open_run_link, open_session, positive_volts, print, write_output, Bar, DbArgs, Keeper, LinkArgs,
    ProfileArgs, WiringArgs,
};
use super::Failure;
use ohmsight::advice::{advise, AdviceOptions};
use ohmsight::record::RunKind;
use ohmsight::render::{html::survey_html, survey_json, text::survey_text};
use ohmsight::run::{resume_with, survey_with, ProfileChoice, RunEvent, SurveyOptions};
use ohmsight::store::PinSummary;
use ohmsight::{RunRecord, SurveyReport};
use std::path::PathBuf;

pub const EXAMPLES: &str = "Examples:
  ohmsight survey                                  the demo board, simulated
  ohmsight survey --scenario boards/virtual/scenarios/demo.toml --seed 7
  ohmsight survey --port /dev/ttyACM0 --json > unit-0042.json
  ohmsight survey --html demo-report.html          the table, and a page with the plots
  ohmsight survey --db postgres://station3@db.example/factory
  ohmsight survey --resume 01KBX3Q2                finish a run a fault cut short

The text and the JSON end with advice per pin (sample time to use, a buffer or filter
capacitor where none settles, dummy conversions against memory, averaging) and a scan plan
whose worst error stays under ½ LSB with the other pins at any level.

Every survey is kept in the run database (--db, $OHMSIGHT_DB, or runs.db in this user's data
folder), each experiment committed as it arrives: a crash or an unplugged cable loses at most
the experiment in flight, and the run stays marked incomplete. `ohmsight history` lists runs,
`ohmsight refit RUN_ID` analyses one again. --no-store keeps nothing. `--resume RUN_ID`
finishes an interrupted run on the same board: only what it lacks is measured, into the same
run (with no link option, the run's own: its serial port, or its scenario and seed).

Exit status: 0 every pin fully surveyed (and stored); 1 the survey failed or was cut short
(what was measured is still printed and stored), or the run could not be stored; 2 bad input
(scenario file, arguments, a serial port that cannot be opened, a database URL).

A board tied to mains or high voltage must be surveyed through an isolated link and supply;
follow local codes and licensed practice.";

#[derive(clap::Args)]
pub struct Args {
    #[command(flatten)]
    link: LinkArgs,
    /// Survey only this channel (repeat for several).
    #[arg(long = "channel", value_name = "N", value_parser = channel)]
    channels: Vec<u8>,
    /// Print one JSON document (schema ohmsight.survey.v2) on stdout instead of the table.
    #[arg(long)]
    json: bool,
    /// Also write the survey as one self-contained HTML page (plots inline, opens offline).
    #[arg(long, value_name = "FILE")]
    html: Option<PathBuf>,
    /// No progress bar, no note of where the run was stored.
    #[arg(long, short)]
    quiet: bool,
    /// The smallest change you need to see on a pin, volts (e.g. 100u or 100e-6): where it is below one
    /// LSB the advice says how many readings to average and whether dither is needed.
    #[arg(long, value_name = "VOLTS", value_parser = positive_volts)]
    resolve: Option<f64>,
    #[command(flatten)]
    profile: ProfileArgs,
    #[command(flatten)]
    wiring: WiringArgs,
    #[command(flatten)]
    db: DbArgs,
    /// Keep nothing: do not write the run to the database (nor read the unit's calibration
    /// from it: the board's own values are used, or --profile).
    #[arg(long, conflicts_with = "db")]
    no_store: bool,
    /// Finish an interrupted run from the database: re-do only what it lacks, on the same
    /// board (the run's own link when no link option is given), and mark it complete.
    #[arg(long, value_name = "RUN_ID", conflicts_with_all = ["no_store", "channels"])]
    resume: Option<String>,
}

pub fn run(args: Args) -> Result<(), Failure> {
    let mut keeper = if args.no_store {
        None
    } else {
        let store = args.db.open().map_err(|f| Failure {
            message: format!("{} (or survey with --no-store to keep nothing)", f.message),
            ..f
        })?;
        Some(Keeper::new(store))
    };
    let resume = match (&args.resume, keeper.as_mut()) {
        (Some(id), Some(k)) => {
            let record = k.store.load_run(id)?;
            if record.run.complete {
                return Err(Failure::bad_input(format!("run {} is complete: nothing to resume", record.run.id)));
            }
            Some(record)
        }
        _ => None,
    };
    // The unit's calibration is read through a connection of its own (the keeper's writes the
    // run as it goes).
    let calibrations = if args.no_store || args.profile.uncalibrated { None } else { Some(args.db.open()?) };
    let choices =
        Choices { kind: RunKind::Survey, profile: args.profile.choice(calibrations)?, wiring: args.wiring.load()? };
    let r = measure(&args.link, args.channels.clone(), resume, args.quiet, keeper.as_mut(), choices)?;
    let advice_opts = AdviceOptions { resolve_volts: args.resolve };
    let advice = advise(&r, &advice_opts);
    let stored = keeper.as_ref().map(|k| k.store.describe());
    // A board that never answered has no table: the one sentence below says it all; the JSON
    // document still records the attempt.
    let measured = !r.record.pins.is_empty();
    if args.json {
        print(&survey_json(&r, &advice, &advice_opts))?;
    } else if measured {
        print(&survey_text(&r, &advice))?;
    }
    if let Some(path) = args.html.as_ref().filter(|_| measured) {
        write_output(path, survey_html(&r).as_bytes(), "HTML report").map_err(|f| Failure {
            message: format!(
                "{} (the survey above is complete{})",
                f.message,
                stored.as_ref().map_or("", |_| " and stored")
            ),
            ..f
        })?;
    }
    if let Some(Keeper { error: Some(e), .. }) = &keeper {
        return Err(Failure::failed(format!(
            "the run could not be kept in {}: {e} (what was printed above is complete; save it with --json)",
            stored.unwrap_or_default()
        )));
    }
    if let (Some(db), false) = (&stored, args.quiet) {
        eprintln!("ohmsight: run {} kept in {db}", r.record.run.id);
    }
    match (&r.fault, measured) {
        (Some(f), false) => Err(Failure::failed(f.clone())),
        // What was measured is printed above and stored; the exit status still says it is partial.
        (Some(f), true) => Err(Failure::failed(format!("the survey was cut short: {f}"))),
        (None, _) if !r.record.run.complete => Err(Failure::failed("the survey did not measure every pin")),
        (None, _) => Ok(()),
    }
}

/// What a surveying command chose for its run: its kind, the converter values it is analysed
/// with (`None`: the board's own), the pins' names (`None`: the board's own).
pub(super) struct Choices {
    pub kind: RunKind,
    pub profile: Option<ProfileChoice>,
    pub wiring: Option<ohmsight::wiring::Wiring>,
}

/// Surveys the board of `link` (or finishes `resume` on its own link when no link option is
/// given), drawing the progress bar and writing the run to `keeper` as it happens, the pins'
/// summaries at the end. A store error is kept in `keeper` for the caller to report; a fault of
/// the board or link is in the report (`fault`, `record.run.complete`). `choices` say what the
/// run is and how it is named and analysed (a resumed run keeps its own).
pub(super) fn measure(
    link: &LinkArgs,
    channels: Vec<u8>,
    resume: Option<RunRecord>,
    quiet: bool,
    mut keeper: Option<&mut Keeper>,
    choices: Choices,
) -> Result<SurveyReport, Failure> {
    let (mut session, context) = match &resume {
        Some(record) if !link.given() => open_run_link(record, link.any_version)?,
        _ => open_session(link)?,
    };
    let Choices { kind, profile, wiring } = choices;
    let opts = SurveyOptions { any_version: link.any_version, channels, context, kind, profile, wiring };
    let bar = Bar::new(quiet);
    let mut on_event = |e: &RunEvent| {
        bar.on(e);
        if let Some(k) = keeper.as_deref_mut() {
            k.on(e);
        }
    };
    let surveyed = match resume {
        Some(record) => resume_with(&mut session, record, &opts, &mut on_event),
        None => survey_with(&mut session, &opts, &mut on_event),
    };
    bar.finish();
    let r = surveyed?.report;
    if let Some(k) = keeper.filter(|k| k.error.is_none()) {
        let pins: Vec<PinSummary> = r.pins.iter().map(PinSummary::from_report).collect();
        if let Err(e) = k.store.finish_run(&r.record.run, &pins) {
            k.error = Some(e);
        }
    }
    Ok(r)
}
