//! `ohmsight compare`: what changed on a unit since its baseline, per pin, in physical terms.

use super::common::Keeper;
use super::common::{print, write_output, DbArgs, LinkArgs, ProfileArgs, WiringArgs};
use super::refit::load_record;
use super::survey::{measure, Choices};
use super::Failure;
use ohmsight::analyse::analyse;
use ohmsight::compare::{comparable, Document};
use ohmsight::record::RunKind;
use ohmsight::render::compare::{compare_html, compare_text};
use ohmsight::store::{RunFilter, Store};
use ohmsight::{RunRecord, SurveyReport};
use std::path::{Path, PathBuf};

pub const EXAMPLES: &str = "Examples:
  ohmsight compare                                 the demo board now, against its first survey
  ohmsight compare --port /dev/ttyACM0             a unit in the field, against its first survey
  ohmsight compare --baseline unit-0042.json --port /dev/ttyACM0 --html what-changed.html
  ohmsight compare --baseline 01KBX3Q2 --run 01KC7M4T --json
  ohmsight compare --scenario boards/virtual/scenarios/coldframe-loose.toml
  ohmsight compare --run today.json --baseline golden.json --other-unit

The rule: a measurement changed when the two runs' 95% intervals do not overlap; against a
bound (`> 361 GΩ`, `< 1.15 kΩ`) the other run's interval must lie entirely beyond it. A verdict
that changed (driven → floating, → at-rail, → unknown) is a change. Where either run has no
number (an unknown verdict, a pin not measured, a rail with no node), nothing is claimed: the
pin is listed as \"cannot tell\". Source resistance, node capacitance, source voltage (its
interval at least ±½ LSB; with --other-unit ±0.2% of full scale more, for the converters' own
offset and gain) and the 50/60 Hz hum lines are compared; each change comes with what it likely
means, for example
  series resistance grew 9.6× (10.1 kΩ → 97.0 kΩ): a corroded or loose connector, a cracked resistor
  now floating (> 361 GΩ): the sensor came loose or its wire broke

The baseline defaults to the unit's first complete survey of every pin in the run database
(same board and unit id). --baseline takes a run id (a unique prefix will do) or a survey
document (`survey --json`). Without --run the unit is surveyed now over the link options
(the built-in demo board when none is given), and that survey is kept in the database like
any other. Both runs are analysed again from their evidence. Runs of different boards are
never compared; runs of another unit of the same board only with --other-unit.

Exit status: 0 no significant change (pins that cannot be told are listed); 1 changes found;
2 bad input (a run id or file that is not there, runs of different boards or units, no
baseline in the database); 3 no verdict: the board, the link or the database failed, or the
survey was cut short (what it measured stays stored).";

#[derive(clap::Args)]
pub struct Args {
    #[command(flatten)]
    link: LinkArgs,
    /// The run to compare with: a run id (a unique prefix of at least 6 characters) or a survey
    /// document. Default: the unit's first complete survey in the database.
    #[arg(long, value_name = "RUN_ID|FILE")]
    baseline: Option<String>,
    /// Compare this stored run or survey document instead of surveying the unit now.
    #[arg(long = "run", value_name = "RUN_ID|FILE", conflicts_with_all = ["scenario", "port", "seed"])]
    run: Option<String>,
    /// The baseline may be another unit of the same board (a golden unit).
    #[arg(long)]
    other_unit: bool,
    /// Print one JSON document (schema ohmsight.compare.v1) instead of the text.
    #[arg(long)]
    json: bool,
    /// Also write the comparison as one self-contained HTML page (a plot per change).
    #[arg(long, value_name = "FILE")]
    html: Option<PathBuf>,
    /// No progress bar, no note of where the survey was stored.
    #[arg(long, short)]
    quiet: bool,
    #[command(flatten)]
    profile: ProfileArgs,
    #[command(flatten)]
    wiring: WiringArgs,
    #[command(flatten)]
    db: DbArgs,
}

/// The database, opened on first use.
struct Db<'a> {
    args: &'a DbArgs,
    store: Option<Box<dyn Store>>,
}

impl Db<'_> {
    fn get(&mut self) -> Result<&mut Box<dyn Store>, Failure> {
        if self.store.is_none() {
            self.store = Some(self.args.open()?);
        }
        Ok(self.store.as_mut().unwrap_or_else(|| unreachable!("opened above")))
    }

    /// Where a record named on the command line came from, for the document.
    fn from(&mut self, source: &str) -> String {
        if Path::new(source).is_file() {
            format!("file {source}")
        } else {
            self.store.as_ref().map_or("store".into(), |s| s.describe())
        }
    }

    fn load(&mut self, source: &str) -> Result<RunRecord, Failure> {
        load_record(source, |id| Ok(self.get()?.load_run(id)?))
    }
}

/// The unit's first complete survey of every pin, other than `now` (`surveyed_now`: made by
/// this command, so it will be the baseline of later ones).
fn first_complete_survey(
    store: &mut Box<dyn Store>,
    now: &RunRecord,
    surveyed_now: bool,
) -> Result<RunRecord, Failure> {
    let filter = RunFilter {
        unit: Some(now.run.unit_id.clone()),
        board: Some(now.run.board.clone()),
        since: None,
        kind: Some(RunKind::Survey),
    };
    for listing in store.list_runs(&filter)?.iter().filter(|l| l.complete && l.id != now.run.id) {
        let record = store.load_run(&listing.id)?;
        if record.run.channels.is_empty() {
            return Ok(record);
        }
    }
    Err(Failure::bad_input(format!(
        "no earlier complete survey of unit {} (board \"{}\") in {}: {}give a baseline with --baseline RUN_ID|FILE",
        now.run.unit_id,
        now.run.board,
        store.describe(),
        if surveyed_now { "this survey is kept and will be the unit's baseline from now on; or " } else { "" }
    )))
}

pub fn run(args: Args) -> Result<(), Failure> {
    compare(args).map_err(Failure::no_verdict)
}

fn compare(args: Args) -> Result<(), Failure> {
    let mut db = Db { args: &args.db, store: None };
    // Bad input first, before the board is touched.
    if args.run.is_some() && (args.profile.profile.is_some() || args.profile.uncalibrated) {
        return Err(Failure::bad_input(
            "--profile and --uncalibrated choose the values a survey made now is analysed with; with --run, \
             analyse that run again under other values with `ohmsight refit RUN --profile FILE` first",
        ));
    }
    if args.run.is_some() && args.wiring.wiring.is_some() {
        return Err(Failure::bad_input(
            "--wiring names the pins of a survey made now; a stored run keeps the names it was made with",
        ));
    }
    let baseline = match &args.baseline {
        Some(source) => Some((db.load(source)?, source.clone())),
        None => None,
    };
    let (now, now_from): (SurveyReport, String) = match &args.run {
        Some(source) => {
            let record = db.load(source)?;
            (analyse(&record), db.from(source))
        }
        None => {
            let store = match db.store.take() {
                Some(store) => store,
                None => args.db.open()?,
            };
            // The unit's calibration, when it has one, as for a survey.
            let choices = Choices {
                kind: RunKind::Survey,
                profile: args.profile.choice(Some(args.db.open()?))?,
                wiring: args.wiring.load()?,
            };
            let mut keeper = Keeper::new(store);
            let measured = measure(&args.link, Vec::new(), None, args.quiet, Some(&mut keeper), choices);
            let described = keeper.store.describe();
            db.store = Some(keeper.store);
            let r = measured?;
            if let Some(e) = keeper.error {
                return Err(Failure::failed(format!(
                    "the survey could not be kept in {described}: {e}; no comparison made"
                )));
            }
            if let Some(f) = &r.fault {
                return Err(Failure::failed(format!(
                    "the survey was cut short: {f}; what it measured is kept as run {} in {described}; no comparison made",
                    r.record.run.id
                )));
            }
            if !r.record.run.complete {
                return Err(Failure::failed(format!(
                    "the survey did not measure every pin (kept as run {} in {described}); no comparison made",
                    r.record.run.id
                )));
            }
            if !args.quiet {
                eprintln!("ohmsight: run {} kept in {described}", r.record.run.id);
            }
            (r, format!("surveyed now, kept in {described}"))
        }
    };
    let (baseline, baseline_from) = match baseline {
        Some((record, source)) => {
            let from = db.from(&source);
            (record, from)
        }
        None => {
            let store = db.get()?;
            let record = first_complete_survey(store, &now.record, args.run.is_none())?;
            (record, format!("the unit's first complete survey in {}", store.describe()))
        }
    };
    comparable(&baseline, &now.record, args.other_unit).map_err(|m| Failure::bad_input(m.to_string()))?;
    let before = analyse(&baseline);
    let doc = Document::new(&before, &baseline_from, &now, &now_from);
    print(&if args.json { doc.json() } else { compare_text(&doc) })?;
    if let Some(path) = &args.html {
        write_output(path, compare_html(&doc).as_bytes(), "HTML page")?;
    }
    if doc.changed {
        Err(Failure::rejected(format!(
            "{} of {} pins changed since the baseline (run {})",
            doc.pins_changed,
            doc.pins.len(),
            doc.baseline.id
        )))
    } else {
        Ok(())
    }
}
