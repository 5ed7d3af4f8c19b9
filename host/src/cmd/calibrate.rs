//! `ohmsight calibrate`: the unit's hold capacitance and switch resistance from fixture pins of
//! known resistance, stored per unit for its later surveys and checks.

use super::common::{print, DbArgs, Keeper, LinkArgs};
use super::survey::{measure, Choices};
use super::Failure;
use ohmsight::calibration::{self, FixtureSpec};
use ohmsight::fit::Interval;
use ohmsight::record::RunKind;
use ohmsight::store::CalibrationSummary;
use ohmsight::units;
use std::fmt::Write as _;

pub const EXAMPLES: &str = "Examples:
  ohmsight calibrate --scenario boards/virtual/scenarios/fixture.toml --fixture 0=10k --fixture 1=470k
  ohmsight calibrate --port /dev/ttyACM0 --fixture 3=10k --fixture 4=1M --tolerance 0.1%
  ohmsight calibrate --port /dev/ttyACM0 --fixture 3=10k --fixture 4=1M --unit 5f3a09c2e41b7d60 --json
  ohmsight calibrate --from 01M90EAN38 --fixture 3=10k --fixture 4=1M     fit a stored run again
  ohmsight calibrate --resume 01M90EAN38 --fixture 3=10k --fixture 4=1M   finish a run cut short

A fixture pin is a resistor of known value from a stiff source (a supply rail through a divider
with a buffer, or a reference) to the pin, with nothing else on it. Two fixtures of different
resistance, one near the switch resistance (about 10 kΩ) and one of a few hundred kΩ or more,
separate the hold capacitance from the switch resistance; one fixture fits mostly their
product.

The fixture pins are surveyed (a run of kind `calibration`, kept like any run), and the two
values are fitted jointly over all of them with the datasheet values only as a loose starting
point, so a unit far off its datasheet is found where it is. The result, with its 95% interval,
is stored for the unit (table `calibrations`); later surveys, checks and comparisons of that
unit are analysed with it (their header names the calibration), unless they are given
--uncalibrated or --profile FILE.

Exit status: 0 calibrated and stored; 1 the survey was cut short, the readings do not fit the
stated resistors (nothing is stored as a calibration; the run is, so `--from RUN_ID` can fit it
again with corrected values), or the database failed; 2 bad input (a fixture that is not
CH=OHMS, a channel the board lacks, another unit than --unit, a run that did not measure the
fixture pins).

Driving a fixture's source on a board tied to mains or high voltage needs the usual isolation;
follow local codes and licensed practice.";

#[derive(clap::Args)]
pub struct Args {
    #[command(flatten)]
    link: LinkArgs,
    /// A fixture pin and its resistor: CH=OHMS (e.g. 3=10k, 4=1M, 5=470kΩ). Repeat for each;
    /// two of different value are needed to separate the hold capacitance from the switch.
    #[arg(long = "fixture", value_name = "CH=OHMS", value_parser = fixture, required = true)]
    fixtures: Vec<(u8, f64)>,
    /// The fixture resistors' tolerance (1%, 0.1%, or 0.01).
    #[arg(long, value_name = "FRACTION", default_value = "1%", value_parser = tolerance)]
    tolerance: f64,
    /// The unit this calibration is for (its unit id, 16 hex digits, as `ohmsight ports`
    /// shows it): refused if another unit answers.
    #[arg(long, value_name = "ID")]
    unit: Option<String>,
    /// Fit a stored run instead of surveying now: a calibration run (for example with a fixture
    /// value corrected) or any survey that measured the fixture pins. Nothing is measured.
    #[arg(long, value_name = "RUN_ID", conflicts_with = "resume")]
    from: Option<String>,
    /// Finish a calibration run a fault cut short (only what it lacks is measured, on its own
    /// link when no link option is given), then fit it.
    #[arg(long, value_name = "RUN_ID")]
    resume: Option<String>,
    /// Print one JSON document (schema ohmsight.calibration.v1) instead of the text.
    #[arg(long)]
    json: bool,
    /// No progress bar, no note of where the run was stored.
    #[arg(long, short)]
    quiet: bool,
    #[command(flatten)]
    db: DbArgs,
}

/// `CH=OHMS`: a channel and a positive resistance with an optional SI prefix and unit.
fn fixture(text: &str) -> Result<(u8, f64), String> {
    let bad = || format!("'{text}' is not a fixture: give the channel and the resistor as CH=OHMS, e.g. 3=10k or 4=1M");
    let (ch, ohms) = text.split_once('=').ok_or_else(bad)?;
    let ch = super::common::channel(ch)?;
    match units::parse_si(ohms, &["ohms", "ohm", "Ω", "R"]) {
        Some(v) if v > 0.0 && v.is_finite() => Ok((ch, v)),
        _ => Err(bad()),
    }
}

/// A tolerance: `1%`, `0.1 %` or a fraction `0.01`, from 0 to 50%.
fn tolerance(text: &str) -> Result<f64, String> {
    let t = text.trim();
    let v = match t.strip_suffix('%') {
        Some(p) => p.trim().parse::<f64>().ok().map(|v| v / 100.0),
        None => t.parse::<f64>().ok(),
    };
    match v {
        Some(v) if (0.0..=0.5).contains(&v) => Ok(v),
        _ => Err(format!("'{text}' is not a resistor tolerance: give a percentage from 0 to 50, e.g. 1% or 0.1%")),
    }
}

pub fn run(args: Args) -> Result<(), Failure> {
    let mut specs: Vec<FixtureSpec> = Vec::new();
    for &(channel, ohms) in &args.fixtures {
        if specs.iter().any(|f| f.channel == channel) {
            return Err(Failure::bad_input(format!("fixture ch{channel} is given twice: name each channel once")));
        }
        specs.push(FixtureSpec { channel, ohms, tolerance: args.tolerance });
    }
    let unit = match &args.unit {
        None => None,
        Some(text) => Some(u64::from_str_radix(text.trim(), 16).map_err(|_| {
            Failure::bad_input(format!(
                "--unit '{text}' is not a unit id: give its 16 hex digits as `ohmsight ports` shows"
            ))
        })?),
    };
    let mut keeper = Keeper::new(args.db.open()?);
    if args.from.is_some() && args.link.given() {
        return Err(Failure::bad_input(
            "--from fits a stored run and measures nothing: leave out the link options (--port, --scenario, --seed)",
        ));
    }
    let stored = match args.from.as_ref().or(args.resume.as_ref()) {
        Some(id) => Some(keeper.store.load_run(id)?),
        None => None,
    };
    let described = keeper.store.describe();
    let record = match (stored, &args.from) {
        (Some(record), Some(_)) => record,
        (resume, _) => {
            if let Some(r) = resume.as_ref().filter(|r| r.run.complete) {
                return Err(Failure::bad_input(format!(
                    "run {} is complete: nothing to resume (fit it with --from {})",
                    r.run.id, r.run.id
                )));
            }
            let channels = if resume.is_some() { Vec::new() } else { specs.iter().map(|f| f.channel).collect() };
            let choices = Choices { kind: RunKind::Calibration, profile: None, wiring: None };
            let r = measure(&args.link, channels, resume, args.quiet || args.json, Some(&mut keeper), choices)?;
            if let Some(e) = keeper.error.take() {
                return Err(Failure::failed(format!("the calibration run could not be kept in {described}: {e}")));
            }
            if let Some(f) = &r.fault {
                return Err(Failure::failed(format!(
                    "the calibration run was cut short: {f}; what it measured is kept as run {id} in {described} \
                     (finish it with `ohmsight calibrate --resume {id}` and the same fixtures)",
                    id = r.record.run.id
                )));
            }
            if r.record.pins.is_empty() {
                return Err(Failure::failed("the board did not answer: nothing was calibrated"));
            }
            r.record
        }
    };
    let record = &record;
    let pins: Vec<u8> = record.pins.iter().map(|p| p.channel).collect();
    if let Some(f) = specs.iter().find(|f| !pins.contains(&f.channel)) {
        let list: Vec<String> = pins.iter().map(u8::to_string).collect();
        return Err(Failure::bad_input(format!(
            "run {} did not measure fixture ch{}; it measured channels {}",
            record.run.id,
            f.channel,
            list.join(", ")
        )));
    }
    if let Some(want) = unit.filter(|&u| u != record.board.unit_id) {
        return Err(Failure::bad_input(format!(
            "unit {} answered, not unit {want:016x}: nothing was stored as a calibration (the run is kept as {})",
            record.run.unit_id, record.run.id
        )));
    }
    let c = calibration::calibrate_record(record, &specs).map_err(|e| {
        Failure::failed(format!(
            "{e} (the run is kept as {id}: `ohmsight calibrate --from {id}` with the right fixtures fits it again)",
            id = record.run.id
        ))
    })?;
    let created = record.run.finished.clone().unwrap_or_else(|| record.run.started.clone());
    let summary = calibration::summary(record, &specs, &c, &created);
    keeper.store.put_calibration(&summary).map_err(|e| {
        Failure::failed(format!(
            "the calibration could not be stored in {described}: {e} (its run is {})",
            record.run.id
        ))
    })?;
    let datasheet = &record.profile;
    if args.json {
        print(&json(&summary, datasheet))?;
    } else {
        print(&text(&summary, datasheet))?;
    }
    if !args.quiet && !args.json {
        eprintln!("ohmsight: calibration of run {} kept in {described}", record.run.id);
    }
    Ok(())
}

/// A percentage as people write it: `1`, `0.1`, `12.5`.
fn trim(percent: f64) -> String {
    let t = format!("{percent:.3}");
    t.trim_end_matches('0').trim_end_matches('.').to_string()
}

fn interval(v: [f64; 3], f: fn(f64) -> String) -> String {
    ohmsight::render::text::interval_text(&Interval { estimate: Some(v[0]), low: Some(v[1]), high: Some(v[2]) }, f)
}

/// The calibration as text: each value with its interval beside the datasheet's.
fn text(c: &CalibrationSummary, datasheet: &ohmsight::record::Profile) -> String {
    let mut out = format!("ohmsight calibrate — board \"{}\" unit {}, run {}\n", c.board, c.unit_id, c.run_id);
    let fixtures: Vec<String> = c
        .fixtures
        .iter()
        .map(|f| {
            format!(
                "ch{} {} ±{}% (node {})",
                f.channel,
                units::ohms(f.ohms),
                trim(f.tolerance * 100.0),
                units::farads(f.node_farads)
            )
        })
        .collect();
    let _ = writeln!(out, "fixtures: {}", fixtures.join(", "));
    let rows = [
        (
            "hold capacitance",
            interval(c.hold_farads, units::farads),
            datasheet.hold_farads,
            datasheet.hold_tolerance,
            units::farads as fn(f64) -> String,
            c.hold_farads[0],
        ),
        (
            "switch resistance",
            interval(c.switch_ohms, units::ohms),
            datasheet.switch_ohms,
            datasheet.switch_tolerance,
            units::ohms,
            c.switch_ohms[0],
        ),
    ];
    for (name, found, nominal, tol, f, est) in rows {
        let _ = writeln!(
            out,
            "{name:<18} {found:<28} datasheet {} ±{}%   ×{:.2}",
            f(nominal),
            trim(tol * 100.0),
            est / nominal
        );
    }
    let _ = writeln!(out, "fit: χ²/dof {:.2} ({} degrees of freedom)", c.chi2 / c.dof.max(1) as f64, c.dof);
    let _ = writeln!(
        out,
        "Later surveys, checks and comparisons of unit {} use these values (--uncalibrated: the datasheet's).",
        c.unit_id
    );
    out
}

/// The calibration as one JSON document (schema `ohmsight.calibration.v1`).
fn json(c: &CalibrationSummary, datasheet: &ohmsight::record::Profile) -> String {
    let value = |v: [f64; 3], nominal: f64, tol: f64| serde_json::json!({"estimate": v[0], "low": v[1], "high": v[2], "datasheet": nominal, "datasheet_tolerance": tol});
    let doc = serde_json::json!({
        "schema": "ohmsight.calibration.v1",
        "run_id": c.run_id,
        "board": c.board,
        "unit_id": c.unit_id,
        "created": c.created,
        "hold_farads": value(c.hold_farads, datasheet.hold_farads, datasheet.hold_tolerance),
        "switch_ohms": value(c.switch_ohms, datasheet.switch_ohms, datasheet.switch_tolerance),
        "chi2": c.chi2,
        "dof": c.dof,
        "fixtures": c.fixtures,
    });
    format!("{}\n", serde_json::to_string_pretty(&doc).unwrap_or_default())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn fixtures_read_channel_and_si_resistance() {
        assert_eq!(fixture("3=10k"), Ok((3, 10e3)));
        assert_eq!(fixture(" 4 = 1M"), Ok((4, 1e6)));
        assert_eq!(fixture("5=470kΩ"), Ok((5, 470e3)));
        assert!(fixture("3:10k").unwrap_err().contains("CH=OHMS"));
        assert!(fixture("3=-5").is_err());
        assert!(fixture("300=1k").is_err());
    }

    #[test]
    fn tolerances_read_percent_or_fraction() {
        assert_eq!(tolerance("1%"), Ok(0.01));
        assert_eq!(tolerance("0.01"), Ok(0.01));
        assert!((tolerance("0.1 %").unwrap() - 0.001).abs() < 1e-15);
        assert!(tolerance("60%").is_err());
    }
}
