//! `ohmsight limits --from RUN_ID…`: a limits file proposed from stored runs of golden units.

use super::common::{print, write_output, DbArgs};
use super::Failure;
use ohmsight::check::{min_sample_interval, pin_noise, volts_interval};
use ohmsight::fit::Interval;
use ohmsight::judge::{PinReport, SurveyReport, Verdict};
use ohmsight::limits::{ExpectedVerdict, Limits, PinLimits, PinRef, Range};
use ohmsight::noise::HUM_MIN_LSB;
use std::path::PathBuf;

pub const EXAMPLES: &str = "Examples:
  ohmsight limits --from 01KBX3Q2 01KBX4A7 01KBX5C9              print proposed limits
  ohmsight limits --from 01KBX3Q2 01KBX4A7 01KBX5C9 --sigma 6 --out gh12.toml
  ohmsight check --limits gh12.toml --unit SN0042                 then check units with them

Survey (or check) three or more golden units and store the runs; `ohmsight history` lists
their ids (a unique prefix will do). For each pin and each measurement the runs share, the
limit is the mean ± K·σ over the runs (σ: their sample standard deviation, but no smaller than
the standard error their own 95% intervals state: a few runs can agree by chance), widened on each
side by the largest half-width of the golden runs' own 95% intervals: a check passes a limit
only when the whole interval lies inside it, so a unit measured as well as the golden ones then
passes while its value is within K·σ of their mean. One-sided limits: noise_lsb_max and
min_sample_ns_max (mean + K·σ); a limit whose low end would fall below zero keeps only its
high end. The verdict is limited where every run agrees on it; hum = false where no run shows
mains hum, true where every run does. Pins are named by their label where the board labels
its pins uniquely, else by channel.

K (--sigma) defaults to 4: for a measurement spread normally among good units, a good unit
falls outside mean ± 4σ about once in 16,000 (normal tail: 6.3e-5), so limits made from a
handful of golden units reject few good ones and still catch a resistor or capacitor that is
off by more than its spread.

Refused (exit 2): fewer than two runs, runs of different boards, a pin missing from a run, a
pin whose verdict is unknown in a run, or a measurement present in some runs and missing in
others (survey that unit again).";

#[derive(clap::Args)]
pub struct Args {
    /// Stored runs of golden units (ids or unique prefixes), at least two.
    #[arg(long = "from", value_name = "RUN_ID", num_args = 1.., required = true)]
    from: Vec<String>,
    /// K in mean ± (K·σ + the runs' own largest 95% half-width).
    #[arg(long, value_name = "K", default_value_t = 4.0, value_parser = positive)]
    sigma: f64,
    /// Write the limits file here instead of stdout.
    #[arg(long, value_name = "FILE.toml")]
    out: Option<PathBuf>,
    /// The limits file's `name` (default: the board's name and the runs' count).
    #[arg(long, value_name = "TEXT")]
    name: Option<String>,
    #[command(flatten)]
    db: DbArgs,
}

fn positive(text: &str) -> Result<f64, String> {
    match ohmsight::units::parse_si(text, &[]).ok_or(()) {
        Ok(v) if v.is_finite() && v > 0.0 && v <= 100.0 => Ok(v),
        _ => Err(format!("'{text}' is not a K from above 0 to 100 (e.g. 4)")),
    }
}

/// Mean ± (K·σ + the largest half-width of the runs' own 95% intervals on that side): a unit
/// measured as well as the golden ones then passes while its estimate is within K·σ of their
/// mean (the guard band of guarded acceptance, added outward). An end that some run leaves
/// unbounded stays open.
fn proposed(ivs: &[Interval], k: f64) -> Option<Range> {
    let est: Vec<f64> = ivs.iter().filter_map(|i| i.estimate).collect();
    if est.len() != ivs.len() || est.is_empty() {
        return None;
    }
    let n = est.len() as f64;
    let mean = est.iter().sum::<f64>() / n;
    // A few golden runs estimate σ poorly, and their estimates can agree by chance more
    // closely than one unit measured twice would: σ is taken no smaller than the standard
    // error the runs' own intervals state (their mean 95% half-width / 1.96).
    let halves: Vec<f64> =
        ivs.iter().filter_map(|i| Some((i.high? - i.low?) / 2.0)).filter(|h| h.is_finite()).collect();
    let se = if halves.is_empty() { 0.0 } else { halves.iter().sum::<f64>() / halves.len() as f64 / 1.96 };
    let sd = (est.iter().map(|x| (x - mean).powi(2)).sum::<f64>() / (n - 1.0)).sqrt().max(se);
    let below = ivs.iter().zip(&est).map(|(i, e)| i.low.map(|l| e - l)).try_fold(0.0, |m, d| d.map(|d| f64::max(m, d)));
    let above =
        ivs.iter().zip(&est).map(|(i, e)| i.high.map(|h| h - e)).try_fold(0.0, |m, d| d.map(|d| f64::max(m, d)));
    Some(Range { low: below.map(|u| mean - k * sd - u), high: above.map(|u| mean + k * sd + u) })
}

/// One measurement of one pin over the runs: every run's interval, or `None` where no run has
/// it; refused where some runs have it and some do not.
fn shared(
    reports: &[(String, SurveyReport)],
    channel: u8,
    what: &str,
    get: impl Fn(&SurveyReport, &PinReport) -> Option<Interval>,
) -> Result<Option<Vec<Interval>>, Failure> {
    let mut got = Vec::new();
    let mut missing = Vec::new();
    for (id, r) in reports {
        let Some(p) = r.pins.iter().find(|p| p.channel == channel) else { continue };
        match get(r, p).filter(|i| i.estimate.is_some() || i.low.is_some() || i.high.is_some()) {
            Some(iv) => got.push(iv),
            None => missing.push(id.as_str()),
        }
    }
    match (got.is_empty(), missing.is_empty()) {
        (true, _) => Ok(None),
        (false, true) => Ok(Some(got)),
        (false, false) => Err(Failure::bad_input(format!(
            "ch{channel}: {what} is missing in run{} {} but measured in the others: survey that unit again, or leave \
             the run out",
            if missing.len() == 1 { "" } else { "s" },
            missing.join(", ")
        ))),
    }
}

pub fn run(args: Args) -> Result<(), Failure> {
    if args.from.len() < 2 {
        return Err(Failure::bad_input(
            "limits need at least two golden runs (--from ID ID …): one unit's numbers are no spread",
        ));
    }
    let mut store = args.db.open()?;
    let mut reports: Vec<(String, SurveyReport)> = Vec::new();
    for id in &args.from {
        let record = store.load_run(id)?;
        if reports.iter().any(|(rid, _)| *rid == record.run.id) {
            return Err(Failure::bad_input(format!("run {} is given twice", record.run.id)));
        }
        if let Some((first, r0)) = reports.first() {
            if r0.record.board.name != record.board.name {
                return Err(Failure::bad_input(format!(
                    "run {} is of board \"{}\" but run {first} of board \"{}\": limits are per board",
                    record.run.id, record.board.name, r0.record.board.name
                )));
            }
        }
        reports.push((record.run.id.clone(), ohmsight::analyse::analyse(&record)));
    }
    let (first_id, first) = &reports[0];
    let k = args.sigma;
    let labels: Vec<&str> =
        first.record.board.channels.iter().filter(|c| c.role == "pin").map(|c| c.label.as_str()).collect();
    let by_label = labels.iter().enumerate().all(|(i, l)| {
        let default_name = l.starts_with("ch") && l[2..].parse::<u32>().is_ok();
        !(l.is_empty() || labels[..i].contains(l) || default_name)
    });
    let mut pins = Vec::new();
    for p in &first.pins {
        let ch = p.channel;
        for (id, r) in &reports {
            let Some(q) = r.pins.iter().find(|q| q.channel == ch) else {
                return Err(Failure::bad_input(format!(
                    "ch{ch} is in run {first_id} but not in run {id}: give runs that cover the same pins"
                )));
            };
            if q.verdict == Verdict::Unknown {
                return Err(Failure::bad_input(format!(
                    "ch{ch} is unknown in run {id} ({}): a golden unit must be measured fully; survey it again",
                    q.reason.as_deref().unwrap_or("no reason given")
                )));
            }
        }
        let pin = if by_label {
            PinRef { channel: None, label: Some(p.label.clone()) }
        } else {
            PinRef { channel: Some(ch), label: None }
        };
        let mut l = PinLimits::new(pin);
        let verdicts: Vec<Verdict> =
            reports.iter().filter_map(|(_, r)| r.pins.iter().find(|q| q.channel == ch)).map(|q| q.verdict).collect();
        if verdicts.iter().all(|v| *v == verdicts[0]) {
            l.verdict = ExpectedVerdict::of(verdicts[0]);
        }
        let rail = verdicts.contains(&Verdict::AtRail);
        let driven = |r: &PinReport| r.verdict != Verdict::AtRail;
        l.source_ohms = shared(&reports, ch, "source_ohms", |_, r| {
            driven(r).then_some(r.source_ohms).filter(|i| i.estimate.is_some())
        })?
        .and_then(|ivs| proposed(&ivs, k))
        .map(non_negative);
        l.node_farads = shared(&reports, ch, "node_farads", |_, r| {
            driven(r).then_some(r.node_farads).filter(|i| i.estimate.is_some())
        })?
        .and_then(|ivs| proposed(&ivs, k))
        .map(non_negative);
        l.source_volts = shared(&reports, ch, "source_volts", |s, r| volts_interval(r, s.model.vref_volts))?
            .and_then(|ivs| proposed(&ivs, k));
        if !rail {
            let noise = shared(&reports, ch, "noise", |s, r| {
                pin_noise(s, r, None).map(|n| Interval {
                    estimate: Some(n.rms_lsb[0]),
                    low: Some(n.rms_lsb[1]),
                    high: Some(n.rms_lsb[2]),
                })
            })?;
            l.noise_lsb_max = noise.as_deref().and_then(|ivs| proposed(ivs, k)).and_then(|r| r.high);
            let hum = shared(&reports, ch, "hum", |s, r| {
                pin_noise(s, r, None).map(|n| Interval {
                    estimate: Some(n.hum_lsb[0]),
                    low: Some(n.hum_lsb[1]),
                    high: Some(n.hum_lsb[2]),
                })
            })?;
            l.hum = hum.and_then(|ivs| {
                if ivs.iter().all(|i| i.high.is_some_and(|h| h < HUM_MIN_LSB)) {
                    Some(false)
                } else if ivs.iter().all(|i| i.low.is_some_and(|lo| lo > HUM_MIN_LSB)) {
                    Some(true)
                } else {
                    None
                }
            });
        }
        l.min_sample_ns_max = shared(&reports, ch, "min_sample_ns", min_sample_interval)?
            .and_then(|ivs| proposed(&ivs, k))
            .and_then(|r| r.high);
        if !l.kinds().is_empty() {
            pins.push(l);
        }
    }
    if pins.is_empty() {
        return Err(Failure::bad_input("the runs share no measurement to limit"));
    }
    let limits = Limits {
        file: args.out.as_ref().map_or("<stdout>".into(), |p| p.display().to_string()),
        name: args
            .name
            .clone()
            .unwrap_or_else(|| format!("{} from {} golden runs, mean ± {k}σ", first.record.board.name, reports.len())),
        board: Some(first.record.board.name.clone()),
        from_runs: reports.iter().map(|(id, _)| id.clone()).collect(),
        sigma: Some(k),
        mains_hz: None,
        pins,
    };
    let text = format!(
        "# Proposed by `ohmsight limits` from {} stored runs: per measurement mean ± {k}·σ over the runs,\n\
         # widened by the runs' own 95% interval half-widths. Review before use.\n{}",
        reports.len(),
        limits.to_toml()
    );
    match &args.out {
        Some(path) => write_output(path, text.as_bytes(), "limits file"),
        None => print(&text),
    }
}

/// A range whose low end fell below zero keeps only its high end (resistance, capacitance).
fn non_negative(r: Range) -> Range {
    Range { low: r.low.filter(|l| *l > 0.0), high: r.high }
}
