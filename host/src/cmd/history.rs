//! `ohmsight history`: list stored runs; `history show RUN_ID`: one as `survey` printed it;
//! `history stats`: the production history of many units (count, mean, σ, Cp/Cpk, yield).

use super::common::{print, print_analysed, write_output, DbArgs};
use super::Failure;
use ohmsight::advice::AdviceOptions;
use ohmsight::record::RunKind;
use ohmsight::render::text::table;
use ohmsight::stats::{self, RunResults};
use ohmsight::store::{RunFilter, RunListing, Store};
use std::path::PathBuf;

pub const EXAMPLES: &str = "Examples:
  ohmsight history                                 every run in the default database
  ohmsight history --unit 00000000c0ffee42 --since 2026-11-01
  ohmsight history --board bench-f4 --json
  ohmsight history --kind check --unit SN0042      the production checks of one unit
  ohmsight history show 01KBX3Q2                   a run as `survey` printed it
  ohmsight history show 01KBX3Q2 --html run.html
  ohmsight history stats --limits eol.toml         count, mean, σ, Cp/Cpk, first-pass yield
  ohmsight history --db postgres://station3@db.example/factory

A run cut short (a crash, kill -9, an unplugged cable) is listed as incomplete with what it
measured up to then; `history show` prints that part, `refit` analyses it again.

Exit status: 0 listed or shown; 1 the database could not be read; 2 bad input (an unknown or
ambiguous run id, a date that is not YYYY-MM-DD or RFC 3339, a database URL).";

pub const STATS_EXAMPLES: &str = "Examples:
  ohmsight history stats                                      count, mean and σ of every stored run
  ohmsight history stats --limits eol.toml                    with Cp, Cpk and first-pass yield
  ohmsight history stats --limits eol.toml --board virtual --since 2026-11-01
  ohmsight history stats --limits eol.toml --html week48.html
  ohmsight history stats --limits eol.toml --json --db postgres://qa@db.example/factory

Which runs: complete runs only (the number of incomplete runs left out is printed); every run is
one point of the statistics and of the control chart, in time order, so a unit tested twice counts
twice. First-pass yield: each unit's first complete run in the selection (after --since) judged
against every limit of the file; a unit that fails first and passes on a retest is not first-pass.
A limit passes as `ohmsight check` decides it: the stored 95% interval (the point value where
none is stored) must lie inside it; a pin whose verdict is unknown fails a verdict limit.

σ is the sample standard deviation (n − 1) of all values. Cp = (USL − LSL)/6σ and
Cpk = min(USL − μ, μ − LSL)/3σ (NIST/SEMATECH e-Handbook §6.1.6); a one-sided limit
(noise_lsb_max, min_sample_ns_max, { low = … }) gives only Cpk. Fewer than 2 values or σ = 0
give `—` and the reason, never a number. Source resistance and node capacitance are computed on
the values as they are (the limits are in those units); the mean and σ of their logarithm are in
the JSON (ln_mean, ln_sd). Without --limits there is no Cp, Cpk or yield.

A limits file that names a board (board = \"…\") selects that board's runs.

Exit status: 0 computed (also when no run matches: it says so); 1 the database could not be read;
2 bad input (a limits file, with its file:line; a date; a database URL; a limits file for another
board than --board).";

/// JSON schema name of the run list.
pub const LIST_SCHEMA: &str = "ohmsight.history.v1";

#[derive(clap::Args)]
#[command(args_conflicts_with_subcommands = true)]
pub struct Args {
    #[command(subcommand)]
    show: Option<Show>,
    /// Only runs of this unit (its 16-hex-digit id, as `survey` prints it).
    #[arg(long, value_name = "ID")]
    unit: Option<String>,
    /// Only runs of this board (its name).
    #[arg(long, value_name = "NAME")]
    board: Option<String>,
    /// Only runs started on or after this day (YYYY-MM-DD, UTC) or instant (RFC 3339).
    #[arg(long, value_name = "DATE", value_parser = parse_since)]
    since: Option<String>,
    /// Only runs of this kind: survey, check or calibration.
    #[arg(long, value_name = "KIND", value_parser = parse_kind)]
    kind: Option<RunKind>,
    /// Print one JSON document instead of the table.
    #[arg(long)]
    json: bool,
    #[command(flatten)]
    db: DbArgs,
}

#[derive(clap::Subcommand)]
enum Show {
    /// Print one stored run as `survey` printed it (analysed again from its evidence).
    Show {
        /// The run's id (a unique prefix of at least 6 characters will do).
        #[arg(value_name = "RUN_ID")]
        id: String,
        /// Print its JSON document (schema ohmsight.survey.v2) instead of the table.
        #[arg(long)]
        json: bool,
        /// Also write it as one self-contained HTML page.
        #[arg(long, value_name = "FILE")]
        html: Option<PathBuf>,
    },
    /// Production statistics of many runs: per pin and measurement count, mean, σ, Cp/Cpk
    /// against a limits file; first-pass yield per board and per pin.
    #[command(after_long_help = STATS_EXAMPLES)]
    Stats(StatsArgs),
}

/// The options of `history stats`.
#[derive(clap::Args)]
struct StatsArgs {
    /// Judge against this limits file (TOML, as `ohmsight check` reads): gives Cp, Cpk and
    /// the first-pass yield.
    #[arg(long, value_name = "FILE")]
    limits: Option<PathBuf>,
    /// Only runs of this board (its name).
    #[arg(long, value_name = "NAME")]
    board: Option<String>,
    /// Only runs started on or after this day (YYYY-MM-DD, UTC) or instant (RFC 3339).
    #[arg(long, value_name = "DATE", value_parser = parse_since)]
    since: Option<String>,
    /// Only runs of this kind (survey, check or calibration); default: every kind.
    #[arg(long, value_name = "KIND", value_parser = parse_kind)]
    kind: Option<RunKind>,
    /// Print one JSON document (schema ohmsight.stats.v1) instead of the table.
    #[arg(long)]
    json: bool,
    /// Also write one self-contained HTML page: per measurement a control chart and a histogram.
    #[arg(long, value_name = "FILE")]
    html: Option<PathBuf>,
}

/// Runs `history stats` reads when `--kind` is not given: every kind (`--kind check` for a
/// station's checks alone).
const STATS_DEFAULT_KIND: Option<RunKind> = None;

fn parse_kind(text: &str) -> Result<RunKind, String> {
    RunKind::parse(text.trim())
        .ok_or_else(|| format!("'{text}' is not a kind of run: use survey, check or calibration"))
}

/// `2026-11-01` (midnight UTC) or an RFC 3339 instant, as the store's fixed-width UTC text.
fn parse_since(text: &str) -> Result<String, String> {
    let t = text.trim();
    let ts = if let Ok(date) = t.parse::<jiff::civil::Date>() {
        date.to_zoned(jiff::tz::TimeZone::UTC).map(|z| z.timestamp()).map_err(|e| e.to_string())?
    } else {
        t.parse::<jiff::Timestamp>()
            .map_err(|_| format!("'{text}' is not a date (YYYY-MM-DD) or an RFC 3339 instant (2026-11-01T08:00:00Z)"))?
    };
    Ok(ts.strftime("%Y-%m-%dT%H:%M:%S%.3fZ").to_string())
}

/// `12 driven, 2 floating, 1 at-rail, 1 unknown`, or `—` before any verdict was stored.
fn verdicts_text(l: &RunListing) -> String {
    if l.verdicts.is_empty() {
        return "—".into();
    }
    let order = ["driven", "floating", "at-rail", "unknown"];
    let mut parts: Vec<String> = order.iter().filter_map(|k| l.verdicts.get(*k).map(|n| format!("{n} {k}"))).collect();
    parts.extend(l.verdicts.iter().filter(|(k, _)| !order.contains(&k.as_str())).map(|(k, n)| format!("{n} {k}")));
    parts.join(", ")
}

fn list_text(db: &str, runs: &[RunListing]) -> String {
    if runs.is_empty() {
        return format!("no runs in {db} match\n");
    }
    let header = ["run", "started (UTC)", "kind", "board", "unit", "complete", "experiments", "verdicts"];
    let rows: Vec<Vec<String>> = runs
        .iter()
        .map(|l| {
            vec![
                l.id.clone(),
                l.started.clone(),
                l.kind.as_str().into(),
                l.board.clone(),
                l.unit_id.clone(),
                if l.complete { "yes".into() } else { "no".into() },
                l.experiments.to_string(),
                verdicts_text(l),
            ]
        })
        .collect();
    let mut out = format!("{} run{} in {db}\n\n", runs.len(), if runs.len() == 1 { "" } else { "s" });
    out += &table(&header, &rows);
    for l in runs.iter().filter(|l| l.fault.is_some()) {
        out += &format!("  {}: {}\n", l.id, l.fault.as_deref().unwrap_or_default());
    }
    out
}

/// `history stats`.
fn stats(args: StatsArgs, store: &mut dyn Store) -> Result<(), Failure> {
    let limits = match &args.limits {
        Some(path) => Some(ohmsight::limits::load(path).map_err(|e| Failure::bad_input(e.to_string()))?),
        None => None,
    };
    let board = match (&args.board, limits.as_ref().and_then(|l| l.board.as_ref())) {
        (Some(a), Some(b)) if a != b => {
            return Err(Failure::bad_input(format!(
                "--board {a} but the limits file {} is for board \"{b}\": drop --board or use the limits of {a}",
                args.limits.as_ref().map(|p| p.display().to_string()).unwrap_or_default()
            )))
        }
        (a, b) => a.clone().or_else(|| b.cloned()),
    };
    let filter = RunFilter { unit: None, board, since: args.since, kind: args.kind.or(STATS_DEFAULT_KIND) };
    let listed = store.list_runs(&filter)?;
    let incomplete = listed.iter().filter(|l| !l.complete).count();
    let mut runs = Vec::new();
    for listing in listed.into_iter().filter(|l| l.complete) {
        let board = store.load_board(&listing.id)?;
        let summaries = store.load_summaries(&listing.id)?;
        runs.push(RunResults { listing, board, summaries });
    }
    let s = stats::compute(&runs, incomplete, limits.as_ref()).map_err(|e| Failure::bad_input(e.to_string()))?;
    let db = store.describe();
    if args.json {
        let doc = serde_json::json!({ "schema": stats::SCHEMA, "database": db, "stats": s });
        print(&(serde_json::to_string_pretty(&doc).unwrap_or_default() + "\n"))?;
    } else {
        print(&ohmsight::render::stats_text::stats_text(&s, &db))?;
    }
    match &args.html {
        Some(path) => write_output(path, ohmsight::render::stats_html::stats_html(&s, &db).as_bytes(), "HTML page"),
        None => Ok(()),
    }
}

pub fn run(args: Args) -> Result<(), Failure> {
    let mut store = args.db.open()?;
    match args.show {
        Some(Show::Show { id, json, html }) => {
            let record = store.load_run(&id)?;
            return print_analysed(&record, &AdviceOptions::default(), json, html.as_deref());
        }
        Some(Show::Stats(s)) => return stats(s, store.as_mut()),
        None => {}
    }
    let filter = RunFilter { unit: args.unit, board: args.board, since: args.since, kind: args.kind };
    let runs = store.list_runs(&filter)?;
    let db = store.describe();
    if args.json {
        let doc = serde_json::json!({ "schema": LIST_SCHEMA, "database": db, "runs": runs });
        print(&(serde_json::to_string_pretty(&doc).unwrap_or_default() + "\n"))
    } else {
        print(&list_text(&db, &runs))
    }
}
