//! Production history: per board, pin and measurement the count, mean and standard deviation
//! of the stored results, the process capability Cp / Cpk against a limits file, and the
//! first-pass yield per board and per pin (`ohmsight history stats`).
//!
//! Everything here reads the result summaries runs stored when they finished
//! ([`crate::store::PinSummary`]); nothing is fitted again, so hundreds of units take moments.
//!
//! Choices, stated once:
//! - **Which runs.** Complete runs only (a run cut short is counted and left out). Every run is
//!   one point of the statistics and the control chart, in time order (a unit tested twice is
//!   two points: the chart shows the process as the station saw it). For the first-pass yield
//!   only each unit's first complete run in the selection counts.
//! - **σ** is the sample standard deviation (n − 1) of every value, so strictly these are the
//!   overall ("long-term") indices that some texts call Pp / Ppk.
//! - **Cp = (USL − LSL) / 6σ, Cpk = min(USL − μ, μ − LSL) / 3σ**; with one limit only
//!   Cpk = CPU = (USL − μ)/3σ or CPL = (μ − LSL)/3σ and no Cp (NIST/SEMATECH e-Handbook of
//!   Statistical Methods, §6.1.6 "What is process capability?"). With fewer than 2 values or
//!   σ = 0 there is no index, and the reason is given instead of a number.
//! - **Source resistance and node capacitance** spread roughly log-normally; their statistics
//!   are computed on the values as they are (the limits are in the same units), and the mean
//!   and σ of their natural logarithm are given beside them.
//! - **A limit passes** the way `ohmsight check` decides it ([`Range::decide`]): on the stored
//!   95% interval, or on the point value where no interval is stored; an interval that
//!   straddles a limit does not pass (guarded acceptance, ISO 14253-1). A pin whose verdict is
//!   `unknown` fails a verdict limit; a limit on something the run did not measure fails.

use crate::limits::{LimitKind, Limits, Outcome, PinLimits, Range, ResolvedPin};
use crate::record::BoardRecord;
use crate::store::{PinSummary, RunListing};
use serde::Serialize;
use std::collections::{BTreeMap, BTreeSet};

/// JSON schema name of `history stats --json`.
pub const SCHEMA: &str = "ohmsight.stats.v1";

/// A measurement with a number per pin and run.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Measurement {
    /// Source resistance, Ω (the estimate).
    SourceOhms,
    /// Node capacitance, F (the estimate).
    NodeFarads,
    /// Source voltage, V.
    SourceVolts,
    /// Noise (white plus hum), LSB rms.
    NoiseLsbRms,
    /// Shortest sample time that settles to ½ LSB, ns.
    MinSampleNs,
}

impl Measurement {
    /// Every measurement, in report order.
    pub const ALL: [Measurement; 5] = [
        Measurement::SourceOhms,
        Measurement::NodeFarads,
        Measurement::SourceVolts,
        Measurement::NoiseLsbRms,
        Measurement::MinSampleNs,
    ];

    /// Name in tables and JSON.
    pub fn key(&self) -> &'static str {
        match self {
            Measurement::SourceOhms => "source_ohms",
            Measurement::NodeFarads => "node_farads",
            Measurement::SourceVolts => "source_volts",
            Measurement::NoiseLsbRms => "noise_lsb_rms",
            Measurement::MinSampleNs => "min_sample_ns",
        }
    }

    /// Its value as text with its unit.
    pub fn format(&self, v: f64) -> String {
        match self {
            Measurement::SourceOhms => crate::units::ohms(v),
            Measurement::NodeFarads => crate::units::farads(v),
            Measurement::SourceVolts => format!("{v:.4} V"),
            Measurement::NoiseLsbRms => format!("{v:.3} LSB"),
            Measurement::MinSampleNs => crate::units::ns(v),
        }
    }

    /// A spread (σ) as text with its unit.
    pub fn format_spread(&self, v: f64) -> String {
        match self {
            Measurement::SourceVolts => crate::units::volts(v),
            _ => self.format(v),
        }
    }

    /// Whether its spread is roughly log-normal (then ln statistics are given too).
    pub fn lognormal(&self) -> bool {
        matches!(self, Measurement::SourceOhms | Measurement::NodeFarads)
    }

    /// The pin's value in a run's summary (the estimate; none for a bound only).
    pub fn value(&self, s: &PinSummary) -> Option<f64> {
        let v = match self {
            Measurement::SourceOhms => s.source_ohms[0],
            Measurement::NodeFarads => s.node_farads[0],
            Measurement::SourceVolts => s.source_volts,
            Measurement::NoiseLsbRms => s.noise_lsb_rms,
            Measurement::MinSampleNs => s.min_sample_ns,
        };
        v.filter(|x| x.is_finite())
    }

    /// The specification limits of a pin for this measurement.
    pub fn limit(&self, l: &PinLimits) -> Option<Range> {
        match self {
            Measurement::SourceOhms => l.source_ohms,
            Measurement::NodeFarads => l.node_farads,
            Measurement::SourceVolts => l.source_volts,
            Measurement::NoiseLsbRms => l.noise_lsb_max.map(|h| Range { low: None, high: Some(h) }),
            Measurement::MinSampleNs => l.min_sample_ns_max.map(|h| Range { low: None, high: Some(h) }),
        }
    }
}

/// Mean and sample standard deviation (n − 1), two-pass; `None` for no values, σ `None` for
/// one value.
pub fn mean_sd(values: &[f64]) -> Option<(f64, Option<f64>)> {
    if values.is_empty() {
        return None;
    }
    let n = values.len() as f64;
    let mean = values.iter().sum::<f64>() / n;
    let sd = (values.len() >= 2).then(|| (values.iter().map(|x| (x - mean).powi(2)).sum::<f64>() / (n - 1.0)).sqrt());
    Some((mean, sd))
}

/// A capability index, or why there is none.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Index {
    /// The value.
    pub value: Option<f64>,
    /// Why there is no value.
    pub why: Option<String>,
}

impl Index {
    fn of(value: f64) -> Self {
        Index { value: Some(value), why: None }
    }
    fn none(why: impl Into<String>) -> Self {
        Index { value: None, why: Some(why.into()) }
    }

    /// `1.42`, or `—`.
    pub fn text(&self) -> String {
        self.value.map_or("—".into(), |v| format!("{v:.2}"))
    }
}

/// Cp and Cpk of `n` values of mean `mean` and standard deviation `sd` against `limit`
/// (NIST/SEMATECH e-Handbook §6.1.6): Cp = (USL − LSL)/6σ, Cpk = min(USL − μ, μ − LSL)/3σ; one
/// limit gives only Cpk (CPU or CPL).
pub fn capability(limit: Option<Range>, n: usize, mean: f64, sd: Option<f64>) -> (Index, Index) {
    let Some(r) = limit else {
        let why = "no limit for it in the limits file";
        return (Index::none(why), Index::none(why));
    };
    if n < 2 {
        let why = format!("{n} value{}: σ needs at least 2", if n == 1 { "" } else { "s" });
        return (Index::none(why.clone()), Index::none(why));
    }
    let sd = sd.unwrap_or(0.0);
    if sd.is_nan() || sd <= 0.0 {
        let why = "σ = 0 (every value the same): the index would be infinite";
        return (Index::none(why), Index::none(why));
    }
    let cpu = r.high.map(|h| (h - mean) / (3.0 * sd));
    let cpl = r.low.map(|l| (mean - l) / (3.0 * sd));
    let cp = match (r.low, r.high) {
        (Some(l), Some(h)) => Index::of((h - l) / (6.0 * sd)),
        _ => Index::none("one-sided limit: Cp needs both; Cpk is CPU or CPL"),
    };
    let cpk = match (cpu, cpl) {
        (Some(u), Some(l)) => Index::of(u.min(l)),
        (Some(u), None) => Index::of(u),
        (None, Some(l)) => Index::of(l),
        (None, None) => Index::none("the limit has no end"),
    };
    (cp, cpk)
}

/// Judges a limit on an interval `[estimate, low, high]`: on the interval where one end is
/// stored (a missing end is open), on the estimate where none is, undecided with nothing.
fn decide_interval(r: &Range, v: [Option<f64>; 3]) -> Outcome {
    match v {
        [_, None, None] => v[0].map_or(Outcome::Undecided, |x| r.decide(x, x)),
        [_, lo, hi] => r.decide(lo.unwrap_or(f64::NEG_INFINITY), hi.unwrap_or(f64::INFINITY)),
    }
}

fn decide_point(r: &Range, v: Option<f64>) -> Outcome {
    v.map_or(Outcome::Undecided, |x| r.decide(x, x))
}

/// Whether the stored flags say mains hum was seen.
fn has_hum(s: &PinSummary) -> bool {
    s.flags.iter().any(|f| f.starts_with("hum"))
}

/// How each of a pin's limits comes out on a run's stored summary (`None`: the run has no
/// result for the pin, so every limit is undecided).
pub fn judge(l: &PinLimits, s: Option<&PinSummary>) -> Vec<(LimitKind, Outcome)> {
    l.kinds()
        .into_iter()
        .map(|k| {
            let Some(s) = s else { return (k, Outcome::Undecided) };
            let o = match k {
                LimitKind::Verdict => match l.verdict {
                    Some(v) if v.as_str() == s.verdict => Outcome::Pass,
                    _ => Outcome::Fail,
                },
                LimitKind::SourceOhms => {
                    l.source_ohms.map_or(Outcome::Undecided, |r| decide_interval(&r, s.source_ohms))
                }
                LimitKind::NodeFarads => {
                    l.node_farads.map_or(Outcome::Undecided, |r| decide_interval(&r, s.node_farads))
                }
                LimitKind::SourceVolts => {
                    l.source_volts.map_or(Outcome::Undecided, |r| decide_point(&r, s.source_volts))
                }
                LimitKind::NoiseLsbMax => decide_point(&Range { low: None, high: l.noise_lsb_max }, s.noise_lsb_rms),
                LimitKind::MinSampleNsMax => {
                    decide_point(&Range { low: None, high: l.min_sample_ns_max }, s.min_sample_ns)
                }
                // Hum is known only where the noise record was taken.
                LimitKind::Hum => match (l.hum, s.noise_lsb_rms) {
                    (Some(want), Some(_)) if has_hum(s) == want => Outcome::Pass,
                    (Some(_), Some(_)) => Outcome::Fail,
                    _ => Outcome::Undecided,
                },
            };
            (k, o)
        })
        .collect()
}

/// One complete run's results, as the statistics read them.
#[derive(Debug, Clone)]
pub struct RunResults {
    /// The run as listed.
    pub listing: RunListing,
    /// The board as the run recorded it (for labels and resolving the limits).
    pub board: BoardRecord,
    /// Per pin results.
    pub summaries: Vec<PinSummary>,
}

/// One point of a control chart: a run's value.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Point {
    /// Run id.
    pub run: String,
    /// Unit id.
    pub unit: String,
    /// Start of the run, RFC 3339 UTC.
    pub started: String,
    /// The value.
    pub value: f64,
}

/// One pin's statistics of one measurement.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct MeasurementStats {
    /// Which measurement.
    pub measurement: Measurement,
    /// Values (runs with a value for it).
    pub count: usize,
    /// Runs of the pin without a value for it (not measured, or only bounded).
    pub missing: usize,
    /// Mean.
    pub mean: Option<f64>,
    /// Sample standard deviation (n − 1).
    pub sd: Option<f64>,
    /// Mean of ln(value), for the log-normal measurements (all values positive).
    pub ln_mean: Option<f64>,
    /// Sample standard deviation of ln(value).
    pub ln_sd: Option<f64>,
    /// The limits (from the limits file), if any.
    pub limits: Option<LimitsJson>,
    /// Cp.
    pub cp: Index,
    /// Cpk (CPU or CPL for a one-sided limit).
    pub cpk: Index,
    /// Every value in time order (the control chart).
    pub points: Vec<Point>,
}

/// A limit as JSON: low and high, either open.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct LimitsJson {
    /// Lower specification limit.
    pub low: Option<f64>,
    /// Upper specification limit.
    pub high: Option<f64>,
}

/// A share of units.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Yield {
    /// Units judged (each by its first complete run).
    pub units: usize,
    /// Of them, those whose first run passed.
    pub passed: usize,
    /// passed / units (`None` for no units).
    pub fraction: Option<f64>,
}

impl Yield {
    fn new(units: usize, passed: usize) -> Self {
        Yield { units, passed, fraction: (units > 0).then(|| passed as f64 / units as f64) }
    }

    /// `92.0% (23/25)` or `—`.
    pub fn text(&self) -> String {
        match self.fraction {
            Some(f) => format!("{:.1}% ({}/{})", 100.0 * f, self.passed, self.units),
            None => "— (no units)".into(),
        }
    }
}

/// One pin of a board.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct PinStats {
    /// Channel.
    pub channel: u8,
    /// The board's label of it.
    pub label: String,
    /// Per measurement.
    pub measurements: Vec<MeasurementStats>,
    /// First-pass yield of this pin's limits (`None` without limits for the pin).
    pub first_pass_yield: Option<Yield>,
}

/// A unit whose first run did not pass, and why.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct FirstFailure {
    /// Unit id.
    pub unit: String,
    /// Its first run.
    pub run: String,
    /// `ch3 source_ohms undecided`, … .
    pub limits: Vec<String>,
}

/// One board's history.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct BoardStats {
    /// Board name.
    pub board: String,
    /// Complete runs used.
    pub runs: usize,
    /// Distinct units among them.
    pub units: usize,
    /// Per pin (every pin any run has a result for, by channel).
    pub pins: Vec<PinStats>,
    /// First-pass yield of the whole limits file (`None` without limits).
    pub first_pass_yield: Option<Yield>,
    /// The units behind the yield's losses.
    pub first_pass_failures: Vec<FirstFailure>,
}

/// The whole answer.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Stats {
    /// Per board, by name.
    pub boards: Vec<BoardStats>,
    /// Complete runs used.
    pub runs: usize,
    /// Runs in the selection left out because they were not complete.
    pub incomplete_left_out: usize,
    /// The limits file's name and path, when given.
    pub limits: Option<LimitsSource>,
}

/// Which limits file was used.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct LimitsSource {
    /// Its path.
    pub file: String,
    /// Its `name`.
    pub name: String,
}

/// The statistics of complete runs (oldest first, as [`crate::store::Store::list_runs`]
/// gives them), judged against `limits` where given; `incomplete` is how many runs were left
/// out. A limits file that does not fit a run's board is an error (its message names the file).
pub fn compute(
    runs: &[RunResults],
    incomplete: usize,
    limits: Option<&Limits>,
) -> Result<Stats, crate::limits::LimitsError> {
    let mut by_board: BTreeMap<&str, Vec<&RunResults>> = BTreeMap::new();
    for r in runs {
        by_board.entry(r.listing.board.as_str()).or_default().push(r);
    }
    let mut boards = Vec::new();
    for (name, runs) in by_board {
        boards.push(board_stats(name, &runs, limits)?);
    }
    Ok(Stats {
        boards,
        runs: runs.len(),
        incomplete_left_out: incomplete,
        limits: limits.map(|l| LimitsSource { file: l.file.clone(), name: l.name.clone() }),
    })
}

fn board_stats(
    name: &str,
    runs: &[&RunResults],
    limits: Option<&Limits>,
) -> Result<BoardStats, crate::limits::LimitsError> {
    // The limits resolved against each run's own board (channel lists may differ by firmware).
    let resolved: Vec<Option<Vec<ResolvedPin<'_>>>> =
        runs.iter().map(|r| limits.map(|l| l.resolve(&r.board)).transpose()).collect::<Result<_, _>>()?;
    let channels: BTreeSet<u8> = runs.iter().flat_map(|r| r.summaries.iter().map(|s| s.channel)).collect();
    let channels: BTreeSet<u8> =
        channels.into_iter().chain(resolved.iter().flatten().flat_map(|pins| pins.iter().map(|p| p.channel))).collect();
    // Each unit's first run (runs are oldest first).
    let mut first: BTreeMap<&str, usize> = BTreeMap::new();
    for (i, r) in runs.iter().enumerate() {
        first.entry(r.listing.unit_id.as_str()).or_insert(i);
    }
    let label = |ch: u8| {
        runs.iter()
            .rev()
            .find_map(|r| r.board.channels.iter().find(|c| c.channel == ch).map(|c| c.label.clone()))
            .unwrap_or_default()
    };
    let pin_limits = |i: usize, ch: u8| -> Option<&PinLimits> {
        resolved[i].as_ref().and_then(|pins| pins.iter().find(|p| p.channel == ch)).map(|p| p.limits)
    };
    let mut pins = Vec::new();
    for &ch in &channels {
        let mut measurements = Vec::new();
        let with_pin: Vec<(usize, &PinSummary)> = runs
            .iter()
            .enumerate()
            .filter_map(|(i, r)| r.summaries.iter().find(|s| s.channel == ch).map(|s| (i, s)))
            .collect();
        // The limit of the newest run that has one (one limits file: the same for every run).
        let limit_of = |m: Measurement| (0..runs.len()).rev().find_map(|i| pin_limits(i, ch)).and_then(|l| m.limit(l));
        for m in Measurement::ALL {
            let points: Vec<Point> = with_pin
                .iter()
                .filter_map(|&(i, s)| {
                    m.value(s).map(|value| Point {
                        run: runs[i].listing.id.clone(),
                        unit: runs[i].listing.unit_id.clone(),
                        started: runs[i].listing.started.clone(),
                        value,
                    })
                })
                .collect();
            let values: Vec<f64> = points.iter().map(|p| p.value).collect();
            let (mean, sd) = match mean_sd(&values) {
                Some((mean, sd)) => (Some(mean), sd),
                None => (None, None),
            };
            let (ln_mean, ln_sd) = match (m.lognormal() && values.iter().all(|&v| v > 0.0))
                .then(|| mean_sd(&values.iter().map(|v| v.ln()).collect::<Vec<_>>()))
                .flatten()
            {
                Some((a, b)) => (Some(a), b),
                None => (None, None),
            };
            let limit = limit_of(m);
            let (cp, cpk) = match (limits, mean) {
                (None, _) => {
                    let why = "no limits file given (--limits)";
                    (Index::none(why), Index::none(why))
                }
                (Some(_), None) => (Index::none("no values"), Index::none("no values")),
                (Some(_), Some(mean)) => capability(limit, values.len(), mean, sd),
            };
            measurements.push(MeasurementStats {
                measurement: m,
                count: values.len(),
                missing: with_pin.len() - values.len(),
                mean,
                sd,
                ln_mean,
                ln_sd,
                limits: limit.map(|r| LimitsJson { low: r.low, high: r.high }),
                cp,
                cpk,
                points,
            });
        }
        let first_pass_yield = limits.and_then(|_| {
            let judged: Vec<bool> = first
                .values()
                .filter_map(|&i| {
                    pin_limits(i, ch).map(|l| {
                        let s = runs[i].summaries.iter().find(|s| s.channel == ch);
                        judge(l, s).iter().all(|(_, o)| *o == Outcome::Pass)
                    })
                })
                .collect();
            (!judged.is_empty()).then(|| Yield::new(judged.len(), judged.iter().filter(|p| **p).count()))
        });
        pins.push(PinStats { channel: ch, label: label(ch), measurements, first_pass_yield });
    }
    let mut first_pass_failures = Vec::new();
    let first_pass_yield = limits.map(|_| {
        for (unit, &i) in &first {
            let failed: Vec<String> = resolved[i]
                .iter()
                .flatten()
                .flat_map(|p| {
                    let s = runs[i].summaries.iter().find(|s| s.channel == p.channel);
                    judge(p.limits, s)
                        .into_iter()
                        .filter(|(_, o)| *o != Outcome::Pass)
                        .map(move |(k, o)| format!("ch{} {} {}", p.channel, k.key(), o.as_str()))
                })
                .collect();
            if !failed.is_empty() {
                first_pass_failures.push(FirstFailure {
                    unit: unit.to_string(),
                    run: runs[i].listing.id.clone(),
                    limits: failed,
                });
            }
        }
        Yield::new(first.len(), first.len() - first_pass_failures.len())
    });
    Ok(BoardStats {
        board: name.to_string(),
        runs: runs.len(),
        units: first.len(),
        pins,
        first_pass_yield,
        first_pass_failures,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn capability_of_a_worked_example() {
        // Hand computed: LSL 10, USL 20, μ 16, σ 1 → Cp = 10/6 = 1.667, CPU = 4/3 = 1.333,
        // CPL = 6/3 = 2, Cpk = min = 1.333 (the formulas of NIST/SEMATECH §6.1.6).
        let r = Range { low: Some(10.0), high: Some(20.0) };
        let (cp, cpk) = capability(Some(r), 30, 16.0, Some(1.0));
        assert!((cp.value.unwrap() - 10.0 / 6.0).abs() < 1e-12);
        assert!((cpk.value.unwrap() - 4.0 / 3.0).abs() < 1e-12);
        let (cp, cpk) = capability(Some(Range { low: Some(10.0), high: None }), 30, 16.0, Some(1.0));
        assert!(cp.value.is_none() && cp.why.unwrap().contains("one-sided"));
        assert!((cpk.value.unwrap() - 2.0).abs() < 1e-12, "CPL");
        let (cp, cpk) = capability(Some(r), 1, 16.0, None);
        assert!(cp.value.is_none() && cpk.value.is_none() && cpk.why.unwrap().contains("at least 2"));
        let (_, cpk) = capability(Some(r), 5, 16.0, Some(0.0));
        assert!(cpk.value.is_none() && cpk.why.unwrap().contains("σ = 0"));
    }

    #[test]
    fn intervals_are_judged_like_a_check() {
        let r = Range { low: Some(40e3), high: Some(52e3) };
        assert_eq!(decide_interval(&r, [Some(45e3), Some(44e3), Some(46e3)]), Outcome::Pass);
        assert_eq!(decide_interval(&r, [Some(51e3), Some(50e3), Some(53e3)]), Outcome::Undecided);
        assert_eq!(decide_interval(&r, [Some(45e3), None, None]), Outcome::Pass, "a point where no interval");
        assert_eq!(decide_interval(&r, [Some(45e3), None, Some(46e3)]), Outcome::Undecided, "open below");
        assert_eq!(decide_interval(&r, [None, Some(3e8), None]), Outcome::Fail);
        assert_eq!(decide_interval(&r, [None, None, None]), Outcome::Undecided);
    }

    #[test]
    fn judged_like_a_check_pin_by_pin() {
        use crate::limits::{ExpectedVerdict, PinRef};
        let mut l = PinLimits::new(PinRef { channel: Some(0), label: None });
        l.verdict = Some(ExpectedVerdict::Driven);
        l.hum = Some(false);
        l.noise_lsb_max = Some(1.0);
        let s = PinSummary {
            channel: 0,
            verdict: "driven".into(),
            reason: None,
            source_ohms: [None; 3],
            node_farads: [None; 3],
            source_volts: None,
            noise_lsb_rms: Some(0.6),
            min_sample_ns: None,
            flags: Vec::new(),
        };
        let outcomes = |s: Option<&PinSummary>| judge(&l, s).into_iter().map(|(_, o)| o).collect::<Vec<_>>();
        assert_eq!(outcomes(Some(&s)), [Outcome::Pass; 3]);
        let unknown = PinSummary { verdict: "unknown".into(), ..s.clone() };
        assert_eq!(outcomes(Some(&unknown))[0], Outcome::Fail, "unknown fails a verdict limit");
        let hum = PinSummary { flags: vec!["hum-50hz".into()], ..s.clone() };
        // In report order: verdict, noise_lsb_max, hum.
        assert_eq!(outcomes(Some(&hum))[2], Outcome::Fail, "hum seen where none is allowed");
        let no_record = PinSummary { noise_lsb_rms: None, ..s.clone() };
        assert_eq!(outcomes(Some(&no_record))[1..], [Outcome::Undecided; 2], "not measured: not a pass");
        assert_eq!(outcomes(None), [Outcome::Undecided; 3], "no result for the pin");
    }
}
