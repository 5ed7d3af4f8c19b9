//! A production check: each pin's measurements judged against its limits ([`crate::limits`]),
//! with the guarded-acceptance rule of ISO 14253-1 — a limit passes only when the
//! measurement's 95% interval lies inside it, fails when the interval lies wholly outside, and
//! is `undecided` otherwise (conformity not shown: the unit fails).
//!
//! Also here: what each pin needs measured ([`needs`]), which undecided limits more
//! measurement could settle ([`more_wanted`]), the short noise record's statistics
//! ([`record_noise`]), and the outputs: JSON `ohmsight.check.v1`, JUnit XML, the store rows.

use crate::fit::{Goals, Interval};
use crate::judge::{min_sample_index, PinReport, SurveyReport, Verdict, RAIL_MARGIN};
use crate::limits::{LimitKind, Limits, Outcome, Range, ResolvedPin};
use crate::noise::HUM_MIN_LSB;
use crate::run::PinNeeds;
use crate::store::{CheckSummary, LimitSummary};
use crate::units;
use nalgebra::{DMatrix, DVector};
use serde::Serialize;

/// The JSON schema name of a check document.
pub const SCHEMA: &str = "ohmsight.check.v1";

/// What a pin's limits need measured.
pub fn needs(pins: &[ResolvedPin<'_>]) -> Vec<PinNeeds> {
    pins.iter()
        .map(|p| {
            let l = p.limits;
            let fit = l.verdict.is_some()
                || l.source_ohms.is_some()
                || l.source_volts.is_some()
                || l.node_farads.is_some()
                || l.min_sample_ns_max.is_some();
            // A fit needs the pin's hum too (the model carries it as a known waveform): a pin
            // fitted without a noise record could hide hum in narrow, wrong intervals.
            PinNeeds { channel: p.channel, fit, noise: fit || l.needs_noise(), goals: goals(l) }
        })
        .collect()
}

/// How precise a pin's fit must be for its limits: only the side of each limit end matters,
/// except for a settling-time limit, which the whole of both intervals feeds.
fn goals(l: &crate::limits::PinLimits) -> Goals {
    let ends = |r: &Option<Range>| r.map_or([None, None], |r| [r.low, r.high]);
    Goals {
        decide_only: l.min_sample_ns_max.is_none(),
        source_ohms: ends(&l.source_ohms),
        node_farads: ends(&l.node_farads),
    }
}

/// The pins whose limits are still undecided after the first pass and what more would settle
/// them: the survey's full settling experiments, its full noise record.
pub fn more_wanted(pins: &[ResolvedPin<'_>], first: &SurveyReport) -> Vec<PinNeeds> {
    let judged = judge(pins, first);
    judged
        .iter()
        .filter_map(|pc| {
            let r = first.pins.iter().find(|r| r.channel == pc.channel)?;
            // (The memory test and the loading burst are no part of a check.)
            if r.not_measured.iter().any(|w| !matches!(*w, "memory" | "load")) || r.verdict == Verdict::AtRail {
                return None;
            }
            let open = |kinds: &[LimitKind]| {
                pc.limits.iter().any(|l| l.outcome == Outcome::Undecided && kinds.contains(&l.kind))
                    || (kinds.contains(&LimitKind::Verdict)
                        && r.verdict == Verdict::Unknown
                        && pc.limits.iter().any(|l| l.kind == LimitKind::Verdict))
            };
            let fit = open(&[
                LimitKind::Verdict,
                LimitKind::SourceOhms,
                LimitKind::SourceVolts,
                LimitKind::NodeFarads,
                LimitKind::MinSampleNsMax,
            ]);
            // The fit models the hum the first pass's record showed; a longer record only where
            // a noise or hum limit is still open.
            let noise = open(&[LimitKind::NoiseLsbMax, LimitKind::Hum]);
            let goals = pins.iter().find(|p| p.channel == pc.channel).map_or(Goals::FULL, |p| goals(p.limits));
            (fit || noise).then_some(PinNeeds { channel: pc.channel, fit, noise, goals })
        })
        .collect()
}

/// One limit of one pin, judged.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct LimitResult {
    /// Which limit.
    #[serde(rename = "limit", serialize_with = "kind_key")]
    pub kind: LimitKind,
    /// pass, fail or undecided.
    #[serde(serialize_with = "outcome_name")]
    pub outcome: Outcome,
    /// The measured value (a number limit), `None` when only bounded or not measured.
    pub measured: Option<f64>,
    /// Low end of its 95% interval (`None`: unbounded below, or not measured).
    pub measured_low: Option<f64>,
    /// High end of its 95% interval.
    pub measured_high: Option<f64>,
    /// The limit's low end (`None`: open).
    pub limit_low: Option<f64>,
    /// The limit's high end.
    pub limit_high: Option<f64>,
    /// What a verdict or hum limit expects, in words (`driven`, `no hum`).
    pub expected: Option<String>,
    /// The measurement in words, as the text shows it.
    pub measured_text: String,
    /// The limit in words.
    pub limit_text: String,
}

fn kind_key<S: serde::Serializer>(k: &LimitKind, s: S) -> Result<S::Ok, S::Error> {
    s.serialize_str(k.key())
}

fn outcome_name<S: serde::Serializer>(o: &Outcome, s: S) -> Result<S::Ok, S::Error> {
    s.serialize_str(o.as_str())
}

impl LimitResult {
    /// `source_ohms 61.2 kΩ (58.0–64.1 kΩ) against 40.0 kΩ…52.0 kΩ: fail`.
    pub fn sentence(&self) -> String {
        format!("{} {} against {}: {}", self.kind.key(), self.measured_text, self.limit_text, self.outcome.as_str())
    }
}

/// One pin, judged.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct PinCheck {
    /// Channel.
    pub channel: u8,
    /// Label.
    pub label: String,
    /// The survey verdict.
    #[serde(serialize_with = "verdict_name")]
    pub verdict: Verdict,
    /// pass when every limit passes, else fail.
    pub result: &'static str,
    /// Each limit.
    pub limits: Vec<LimitResult>,
}

fn verdict_name<S: serde::Serializer>(v: &Verdict, s: S) -> Result<S::Ok, S::Error> {
    s.serialize_str(v.as_str())
}

/// The statistics of a pin's noise record that noise and hum limits are judged by.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct RecordNoise {
    /// Noise rms (white plus hum), LSB, with its 95% interval.
    pub rms_lsb: [f64; 3],
    /// Mains hum amplitude (50 and 60 Hz together), LSB, with its 95% interval.
    pub hum_lsb: [f64; 3],
}

/// Standard normal quantile for two-sided 95%.
const Z95: f64 = 1.959_963_984_540_054;

/// The p-quantile of χ² with `dof` degrees of freedom, by the Wilson–Hilferty cube-root
/// approximation (Wilson & Hilferty 1931; within 1% of the tables from 10 degrees up), `z`
/// the standard normal quantile of p.
fn chi2_quantile(dof: f64, z: f64) -> f64 {
    let a = 2.0 / (9.0 * dof);
    dof * (1.0 - a + z * a.sqrt()).powi(3)
}

/// Noise and hum of a raw record of `codes` read every `period_s`, with intervals that hold on
/// a record of any length: a least-squares fit of a straight trend and the 50 and 60 Hz lines
/// (sine and cosine each), whose covariance says how well a short record separates them.
///
/// - White noise: the residual's rms, with the χ² interval of a variance (n − 6 degrees of
///   freedom; Wilson–Hilferty quantiles).
/// - Hum: per frequency the amplitude √(s² + c²), its interval the estimate ± the radius of
///   the 97.5% confidence ellipse of (s, c) (√(λmax · χ²₂(0.975))), so that both
///   frequencies' intervals hold together at 95% (Bonferroni); the two add in quadrature.
/// - Noise rms: √(white² + hum²/2), from the ends of both intervals.
///
/// `mains`: the frequencies to look for hum at (both 50 and 60 Hz unless the mains is known:
/// over a short record the two waves look alike, and their intervals widen for it).
///
/// `None` for fewer than 32 readings.
pub fn record_noise(codes: &[u16], period_s: f64, mains: &[f64]) -> Option<RecordNoise> {
    let n = codes.len();
    if n < 32 {
        return None;
    }
    let t_mid = (n - 1) as f64 * period_s / 2.0;
    let cols = 2 + 2 * mains.len();
    let mut a = DMatrix::zeros(n, cols);
    for i in 0..n {
        let t = i as f64 * period_s;
        a[(i, 0)] = 1.0;
        a[(i, 1)] = t - t_mid;
        for (k, f) in mains.iter().enumerate() {
            let w = 2.0 * std::f64::consts::PI * f * t;
            a[(i, 2 + 2 * k)] = w.sin();
            a[(i, 3 + 2 * k)] = w.cos();
        }
    }
    let y = DVector::from_iterator(n, codes.iter().map(|&c| f64::from(c)));
    let ata = a.transpose() * &a;
    let inv = ata.try_inverse()?;
    let beta = &inv * (a.transpose() * &y);
    let resid = &y - &a * &beta;
    let dof = (n - cols) as f64;
    let s2 = resid.norm_squared() / dof;
    // χ²: the variance's interval [ν s²/χ²(0.975), ν s²/χ²(0.025)].
    let white = [s2.sqrt(), (dof * s2 / chi2_quantile(dof, Z95)).sqrt(), (dof * s2 / chi2_quantile(dof, -Z95)).sqrt()];
    // χ²₂(0.975) = −2 ln 0.025.
    let q = -2.0 * 0.025f64.ln();
    let mut hum = [0.0f64; 3];
    for k in 0..mains.len() {
        let (i, j) = (2 + 2 * k, 3 + 2 * k);
        let amp = beta[i].hypot(beta[j]);
        let (p, r, u) = (inv[(i, i)] * s2, inv[(i, j)] * s2, inv[(j, j)] * s2);
        let lmax = (p + u) / 2.0 + (((p - u) / 2.0).powi(2) + r * r).sqrt();
        let radius = (lmax * q).sqrt();
        hum[0] += amp * amp;
        hum[1] += (amp - radius).max(0.0).powi(2);
        hum[2] += (amp + radius).powi(2);
    }
    let hum = hum.map(f64::sqrt);
    let rms = |w: f64, h: f64| (w * w + h * h / 2.0).sqrt();
    Some(RecordNoise { rms_lsb: [rms(white[0], hum[0]), rms(white[1], hum[1]), rms(white[2], hum[2])], hum_lsb: hum })
}

fn range_text(r: &Range, fmt: fn(f64) -> String) -> String {
    match (r.low, r.high) {
        (Some(l), Some(h)) => format!("{}…{}", fmt(l), fmt(h)),
        (Some(l), None) => format!("≥ {}", fmt(l)),
        (None, Some(h)) => format!("≤ {}", fmt(h)),
        (None, None) => "anything".into(),
    }
}

fn lsb(v: f64) -> String {
    crate::units::lsb(v)
}

/// Judges a number measurement with interval `iv` against `range`.
fn number(kind: LimitKind, iv: Option<Interval>, range: Range, fmt: fn(f64) -> String) -> LimitResult {
    let iv = iv.unwrap_or(Interval::NONE);
    let measured = iv.estimate.is_some() || iv.low.is_some() || iv.high.is_some();
    let outcome = if measured {
        range.decide(iv.low.unwrap_or(f64::NEG_INFINITY), iv.high.unwrap_or(f64::INFINITY))
    } else {
        Outcome::Undecided
    };
    LimitResult {
        kind,
        outcome,
        measured: iv.estimate,
        measured_low: iv.low,
        measured_high: iv.high,
        limit_low: range.low,
        limit_high: range.high,
        expected: None,
        measured_text: if measured { crate::render::text::interval_text(&iv, fmt) } else { "not measured".into() },
        limit_text: range_text(&range, fmt),
    }
}

/// The source voltage's interval: the fit's, or a rail's own margin.
pub fn volts_interval(r: &PinReport, vref: f64) -> Option<Interval> {
    match (r.verdict, r.source_volts, &r.fit) {
        (Verdict::AtRail, Some(v), _) => {
            let m = RAIL_MARGIN * vref;
            Some(Interval { estimate: Some(v), low: Some((v - m).max(0.0)), high: Some((v + m).min(vref)) })
        }
        (Verdict::Driven, _, Some(f)) => Some(f.source_volts),
        _ => None,
    }
}

/// The minimum sample time's interval, ns: at the slowest and the fastest corner of the Rs
/// and Cn intervals (no setting settles: infinite).
pub fn min_sample_interval(report: &SurveyReport, r: &PinReport) -> Option<Interval> {
    let model = &report.model;
    let ns = |i: Option<u8>| i.map_or(f64::INFINITY, |i| f64::from(model.sample_ps[usize::from(i)]) / 1000.0);
    match (r.verdict, &r.fit) {
        (Verdict::AtRail, _) => r.min_sample_ns.map(|v| Interval { estimate: Some(v), low: Some(v), high: Some(v) }),
        (Verdict::Driven, Some(fit)) => {
            let corner = |rs: Option<f64>, cn: Option<f64>| {
                let mut p = fit.params;
                p.source_ohms = rs.unwrap_or(p.source_ohms);
                p.node_farads = cn.unwrap_or(p.node_farads);
                ns(min_sample_index(model, &p))
            };
            let (rs, cn) = (r.source_ohms, r.node_farads);
            // Unbounded ends: nothing bounds the settling time on that side.
            let slow = if rs.high.is_none() || (cn.high.is_none() && r.source_assumes_node_below.is_none()) {
                f64::INFINITY
            } else {
                corner(rs.high, cn.high)
            };
            let fast = corner(rs.low.or(Some(0.0)), cn.low);
            let est = ns(r.min_sample_index);
            Some(Interval {
                estimate: est.is_finite().then_some(est),
                low: fast.is_finite().then_some(fast),
                high: slow.is_finite().then_some(slow),
            })
        }
        _ => None,
    }
}

/// The noise statistics of a pin's last noise record, hum looked for at `mains_hz` (both 50
/// and 60 Hz when `None`).
pub fn pin_noise(report: &SurveyReport, r: &PinReport, mains_hz: Option<f64>) -> Option<RecordNoise> {
    let (_, raw) = crate::analyse::last_noise(&report.record, r.channel)?;
    record_noise_for(&raw.codes, f64::from(raw.period_ns) * 1e-9, mains_hz)
}

/// [`record_noise`] as a check judges it. Without a stated mains, both lines are fitted
/// together. With one, each mains line is fitted alone (no collinear partner, so a short
/// record bounds it tightly) and the larger of the two is taken, end by end: the stated
/// frequency decides nothing by itself, so a unit that picks up the other one (a 60 Hz
/// instrument on a 50 Hz line) is not passed as quiet. (A 60 Hz wave of 0.6 LSB, fitted at
/// 50 Hz alone over 50 ms, read 0.06–0.13 LSB, upper ends 0.15–0.23 LSB: "no hum".)
/// This assumes one mains frequency at a time.
pub fn record_noise_for(codes: &[u16], period_s: f64, mains_hz: Option<f64>) -> Option<RecordNoise> {
    if mains_hz.is_none() {
        return record_noise(codes, period_s, &crate::noise::MAINS_HZ);
    }
    let each: Vec<RecordNoise> =
        crate::noise::MAINS_HZ.iter().map(|&hz| record_noise(codes, period_s, &[hz])).collect::<Option<_>>()?;
    let larger = |f: fn(&RecordNoise) -> [f64; 3]| {
        let mut m = [0.0f64; 3];
        for n in &each {
            for (a, b) in m.iter_mut().zip(f(n)) {
                *a = a.max(b);
            }
        }
        m
    };
    Some(RecordNoise { rms_lsb: larger(|n| n.rms_lsb), hum_lsb: larger(|n| n.hum_lsb) })
}

/// Judges each resolved pin against its limits on the measured report.
pub fn judge(pins: &[ResolvedPin<'_>], report: &SurveyReport) -> Vec<PinCheck> {
    pins.iter()
        .map(|p| {
            let l = p.limits;
            let r = report.pins.iter().find(|r| r.channel == p.channel);
            let verdict = r.map_or(Verdict::Unknown, |r| r.verdict);
            let noise = r.and_then(|r| pin_noise(report, r, p.mains_hz));
            let mut out = Vec::new();
            for kind in l.kinds() {
                let res = match kind {
                    LimitKind::Verdict => {
                        let want = l.verdict.map(|v| v.verdict()).unwrap_or(Verdict::Unknown);
                        LimitResult {
                            kind,
                            // A pin whose verdict is unknown fails a verdict limit.
                            outcome: if verdict == want { Outcome::Pass } else { Outcome::Fail },
                            measured: None,
                            measured_low: None,
                            measured_high: None,
                            limit_low: None,
                            limit_high: None,
                            expected: Some(want.as_str().into()),
                            measured_text: match r.and_then(|r| r.source_assumes_node_below) {
                                Some(c) => format!("{} (if C < {})", verdict.as_str(), units::farads(c)),
                                None => verdict.as_str().into(),
                            },
                            limit_text: want.as_str().into(),
                        }
                    }
                    LimitKind::SourceOhms => {
                        let mut res = number(
                            kind,
                            r.filter(|r| r.verdict != Verdict::Unknown).map(|r| r.source_ohms),
                            l.source_ohms.unwrap_or(Range { low: None, high: None }),
                            units::ohms,
                        );
                        // A stiff pin's bound holds only for a node below the stated size: the
                        // readings could not show the node. Say so wherever the result is read.
                        if let Some(c) = r.and_then(|r| r.source_assumes_node_below) {
                            res.measured_text.push_str(&format!(" if C < {}", units::farads(c)));
                        }
                        res
                    }
                    LimitKind::SourceVolts => number(
                        kind,
                        r.and_then(|r| volts_interval(r, report.model.vref_volts)),
                        l.source_volts.unwrap_or(Range { low: None, high: None }),
                        units::volts,
                    ),
                    LimitKind::NodeFarads => number(
                        kind,
                        r.filter(|r| r.verdict != Verdict::Unknown).map(|r| r.node_farads),
                        l.node_farads.unwrap_or(Range { low: None, high: None }),
                        units::farads,
                    ),
                    LimitKind::MinSampleNsMax => number(
                        kind,
                        r.and_then(|r| min_sample_interval(report, r)),
                        Range { low: None, high: l.min_sample_ns_max },
                        units::ns,
                    ),
                    LimitKind::NoiseLsbMax => number(
                        kind,
                        noise.map(|n| Interval {
                            estimate: Some(n.rms_lsb[0]),
                            low: Some(n.rms_lsb[1]),
                            high: Some(n.rms_lsb[2]),
                        }),
                        Range { low: None, high: l.noise_lsb_max },
                        lsb,
                    ),
                    LimitKind::Hum => {
                        let want = l.hum.unwrap_or(false);
                        // Hum is present above the survey's flag threshold, absent below it.
                        let threshold = Range { low: None, high: Some(HUM_MIN_LSB) };
                        let mut res = number(
                            kind,
                            noise.map(|n| Interval {
                                estimate: Some(n.hum_lsb[0]),
                                low: Some(n.hum_lsb[1]),
                                high: Some(n.hum_lsb[2]),
                            }),
                            threshold,
                            lsb,
                        );
                        if want {
                            res.outcome = match res.outcome {
                                Outcome::Pass => Outcome::Fail,
                                Outcome::Fail => Outcome::Pass,
                                Outcome::Undecided => Outcome::Undecided,
                            };
                            res.limit_low = Some(HUM_MIN_LSB);
                            res.limit_high = None;
                        }
                        res.expected = Some(if want { "hum".into() } else { "no hum".into() });
                        res.limit_text = format!(
                            "{} (amplitude {} {})",
                            if want { "hum" } else { "no hum" },
                            if want { ">" } else { "<" },
                            lsb(HUM_MIN_LSB)
                        );
                        res
                    }
                };
                out.push(res);
            }
            let pass = out.iter().all(|x| x.outcome == Outcome::Pass);
            PinCheck {
                channel: p.channel,
                label: p.label.clone(),
                verdict,
                result: if pass { "pass" } else { "fail" },
                limits: out,
            }
        })
        .collect()
}

/// The overall result of a check.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum CheckResult {
    /// Every limit of every pin passed.
    Pass,
    /// A limit failed or stayed undecided: the unit has not been shown to conform.
    Fail,
    /// The check could not be completed (link, board, store): no verdict on the unit.
    Error,
}

impl CheckResult {
    /// `pass`, `fail`, `error`.
    pub fn as_str(&self) -> &'static str {
        match self {
            CheckResult::Pass => "pass",
            CheckResult::Fail => "fail",
            CheckResult::Error => "error",
        }
    }
}

/// A finished check: the run, the limits, each pin judged.
#[derive(Debug, Clone)]
pub struct CheckReport {
    /// The measurement.
    pub survey: SurveyReport,
    /// The unit's serial (`--unit`, else the board's unit id).
    pub unit: String,
    /// The limits.
    pub limits: Limits,
    /// The limits file's text (stored with the run).
    pub limits_toml: String,
    /// Each pin.
    pub pins: Vec<PinCheck>,
    /// The overall result.
    pub result: CheckResult,
    /// Why the result is `error`, in words.
    pub error: Option<String>,
    /// Host computing time of the check, s (wall time less the board's and the link's).
    pub host_seconds: f64,
}

impl CheckReport {
    /// Judges `survey` against `limits` (resolved as `pins`); a fault, an incomplete run or
    /// `error` makes the result `error`.
    pub fn new(
        survey: SurveyReport,
        unit: String,
        limits: Limits,
        limits_toml: String,
        pins: &[ResolvedPin<'_>],
        error: Option<String>,
    ) -> CheckReport {
        let judged = judge(pins, &survey);
        let error = error.or_else(|| survey.fault.clone()).or_else(|| {
            (!survey.record.run.complete).then(|| "the check did not measure every pin it needed".to_string())
        });
        let result = if error.is_some() {
            CheckResult::Error
        } else if judged.iter().all(|p| p.result == "pass") {
            CheckResult::Pass
        } else {
            CheckResult::Fail
        };
        CheckReport { survey, unit, limits, limits_toml, pins: judged, result, error, host_seconds: 0.0 }
    }

    /// The limits that did not pass, as `ch3 source_ohms` names.
    pub fn not_passed(&self) -> Vec<String> {
        self.pins
            .iter()
            .flat_map(|p| {
                p.limits
                    .iter()
                    .filter(|l| l.outcome != Outcome::Pass)
                    .map(move |l| format!("ch{} {}", p.channel, l.kind.key()))
            })
            .collect()
    }

    /// What the store keeps of it.
    pub fn summary(&self) -> CheckSummary {
        CheckSummary {
            unit_serial: self.unit.clone(),
            result: self.result.as_str().into(),
            limits_name: self.limits.name.clone(),
            limits_file: self.limits.file.clone(),
            limits_toml: self.limits_toml.clone(),
            limits: self
                .pins
                .iter()
                .flat_map(|p| {
                    p.limits.iter().map(move |l| LimitSummary {
                        channel: p.channel,
                        label: p.label.clone(),
                        limit: l.kind.key().into(),
                        outcome: l.outcome.as_str().into(),
                        measured: [l.measured, l.measured_low, l.measured_high],
                        limit_range: [l.limit_low, l.limit_high],
                        expected: l.expected.clone(),
                        measured_text: l.measured_text.clone(),
                    })
                })
                .collect(),
        }
    }

    /// One line per pin and the overall PASS / FAIL / ERROR.
    pub fn text(&self) -> String {
        let run = &self.survey.record.run;
        let source = &self.survey.record.profile.source;
        let mut out = format!(
            "ohmsight check — unit {}, board \"{}\", limits \"{}\" ({})\nrun {} started {}{}\n\n",
            self.unit,
            run.board,
            self.limits.name,
            self.limits.file,
            run.id,
            run.started,
            if source == "board" { String::new() } else { format!("; analysed with the converter values of {source}") }
        );
        let width = self.pins.iter().map(|p| units::width(&p.label)).max().unwrap_or(0).max(5);
        for p in &self.pins {
            let failing: Vec<String> =
                p.limits.iter().filter(|l| l.outcome != Outcome::Pass).map(LimitResult::sentence).collect();
            let assumed = self
                .survey
                .pins
                .iter()
                .find(|r| r.channel == p.channel)
                .and_then(|r| r.source_assumes_node_below)
                .filter(|_| p.limits.iter().any(|l| matches!(l.kind, LimitKind::Verdict | LimitKind::SourceOhms)));
            let detail = if failing.is_empty() {
                format!(
                    "{} limit{}{}",
                    p.limits.len(),
                    if p.limits.len() == 1 { "" } else { "s" },
                    assumed.map_or(String::new(), |c| format!(
                        " (a stiff source: shown for a node below {}, which the readings cannot size)",
                        units::farads(c)
                    ))
                )
            } else {
                failing.join("; ")
            };
            out += &format!(
                "ch{:<3} {}  {:<4}  {}\n",
                p.channel,
                units::pad(&p.label, width),
                p.result.to_uppercase(),
                detail,
            );
        }
        let s = &self.survey;
        out += &format!(
            "\n{}{}\n{} conversions, {} bytes to the board and {} back; {:.2} s on the board, {:.2} s computing here\n",
            self.result.as_str().to_uppercase(),
            match (&self.error, self.result) {
                (Some(e), _) => format!(": no verdict on the unit ({e})"),
                (None, CheckResult::Fail) => format!(": {}", self.not_passed().join(", ")),
                _ => String::new(),
            },
            s.link.conversions,
            s.link.bytes_sent,
            s.link.bytes_received,
            s.board_seconds,
            self.host_seconds
        );
        out
    }

    /// The JSON document, schema `ohmsight.check.v1`.
    pub fn json(&self) -> String {
        let s = &self.survey;
        let run = &s.record.run;
        let doc = serde_json::json!({
            "schema": SCHEMA,
            "result": self.result.as_str(),
            "error": self.error,
            "unit": self.unit,
            "limits": { "name": self.limits.name, "file": self.limits.file },
            "profile": &s.record.profile,
            "run": run,
            "pins": self.pins,
            "totals": {
                "conversions": s.link.conversions,
                "link_bytes_sent": s.link.bytes_sent,
                "link_bytes_received": s.link.bytes_received,
                "board_seconds": s.board_seconds,
                "host_seconds": self.host_seconds,
                "wall_seconds": s.wall_seconds,
            },
        });
        serde_json::to_string_pretty(&doc).unwrap_or_default() + "\n"
    }

    /// JUnit-style XML: one `<testsuite>` for the unit, one `<testcase>` per pin and limit
    /// (`ch3 source_ohms`), `<failure>` for a limit that failed or stayed undecided, `<error>`
    /// for a check that could not be completed.
    pub fn junit(&self) -> String {
        let run = &self.survey.record.run;
        let cases: usize = self.pins.iter().map(|p| p.limits.len()).sum();
        let failures: usize =
            self.pins.iter().map(|p| p.limits.iter().filter(|l| l.outcome != Outcome::Pass).count()).sum();
        let errors = usize::from(self.error.is_some());
        let mut x = String::from("<?xml version=\"1.0\" encoding=\"UTF-8\"?>\n");
        x += &format!(
            "<testsuites name=\"ohmsight check\" tests=\"{cases}\" failures=\"{failures}\" errors=\"{errors}\" time=\"{:.3}\">\n",
            self.survey.wall_seconds
        );
        x += &format!(
            "  <testsuite name=\"{}\" tests=\"{cases}\" failures=\"{failures}\" errors=\"{errors}\" skipped=\"0\" time=\"{:.3}\" timestamp=\"{}\">\n",
            xml(&format!("unit {}", self.unit)),
            self.survey.wall_seconds,
            xml(&run.started)
        );
        x += "    <properties>\n";
        for (k, v) in [
            ("run_id", run.id.as_str()),
            ("board", run.board.as_str()),
            ("unit", self.unit.as_str()),
            ("unit_id", run.unit_id.as_str()),
            ("tool_version", run.tool_version.as_str()),
            ("firmware_version", run.firmware_version.as_str()),
            ("limits", self.limits.name.as_str()),
            ("limits_file", self.limits.file.as_str()),
            ("result", self.result.as_str()),
        ] {
            x += &format!("      <property name=\"{}\" value=\"{}\"/>\n", xml(k), xml(v));
        }
        x += "    </properties>\n";
        let classname = xml(&run.board);
        for p in &self.pins {
            for l in &p.limits {
                let name = xml(&format!("ch{} {}", p.channel, l.kind.key()));
                if l.outcome == Outcome::Pass {
                    x += &format!("    <testcase name=\"{name}\" classname=\"{classname}\" time=\"0\"/>\n");
                } else {
                    let message = format!(
                        "{} \"{}\": {} measured {}, limit {}",
                        format_args!("ch{}", p.channel),
                        p.label,
                        l.outcome.as_str(),
                        l.measured_text,
                        l.limit_text
                    );
                    x += &format!("    <testcase name=\"{name}\" classname=\"{classname}\" time=\"0\">\n");
                    x += &format!(
                        "      <failure message=\"{}\" type=\"{}\">{}</failure>\n",
                        xml(&message),
                        l.outcome.as_str(),
                        xml(&l.sentence())
                    );
                    x += "    </testcase>\n";
                }
            }
        }
        if let Some(e) = &self.error {
            x += &format!("    <testcase name=\"check completed\" classname=\"{classname}\" time=\"0\">\n");
            x += &format!("      <error message=\"{}\" type=\"no-verdict\"/>\n", xml(e));
            x += "    </testcase>\n";
        }
        x += "  </testsuite>\n</testsuites>\n";
        x
    }
}

/// Text escaped for an XML attribute or element (XML 1.0 §2.4 and §3.3.3): markup characters
/// as entities ([`crate::render::html::escape`]), line breaks and tabs as character
/// references (an attribute keeps them), other control characters, which XML 1.0 cannot
/// carry, as U+FFFD.
pub fn xml(text: &str) -> String {
    let clean: String = text
        .chars()
        .map(|c| if (c as u32) < 0x20 && !matches!(c, '\n' | '\t' | '\r') { '\u{FFFD}' } else { c })
        .collect();
    crate::render::html::escape(&clean).replace('\n', "&#10;").replace('\t', "&#9;").replace('\r', "&#13;")
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A record of white Gaussian noise (Box–Muller over a fixed LCG) plus a sine.
    fn record(n: usize, period_s: f64, sigma: f64, hum_lsb: f64, hum_hz: f64, seed: u64) -> Vec<u16> {
        let mut state = seed;
        let mut uniform = || {
            state = state.wrapping_mul(6364136223846793005).wrapping_add(1442695040888963407);
            ((state >> 11) as f64 + 0.5) / (1u64 << 53) as f64
        };
        (0..n)
            .map(|i| {
                let g = (-2.0 * uniform().ln()).sqrt() * (2.0 * std::f64::consts::PI * uniform()).cos();
                let t = i as f64 * period_s;
                let v = 2000.0 + sigma * g + hum_lsb * (2.0 * std::f64::consts::PI * hum_hz * t + 0.3).sin();
                v.round() as u16
            })
            .collect()
    }

    #[test]
    fn chi2_quantiles_match_the_tables() {
        // χ² table values (NIST/SEMATECH e-Handbook, 1.3.6.7.4): ν = 100: 74.222 and 129.561.
        assert!((chi2_quantile(100.0, -Z95) - 74.222).abs() < 0.1);
        assert!((chi2_quantile(100.0, Z95) - 129.561).abs() < 0.1);
    }

    #[test]
    fn short_records_bound_hum_and_noise_honestly() {
        // Over seeds, the intervals hold the truth at least as often as they claim.
        let mut held = [0usize; 2];
        let trials = 200;
        for seed in 0..trials {
            let sigma = 3.0; // coarse enough that rounding adds little (1/12 LSB² against 9)
            let codes = record(200, 250e-6, sigma, 2.0, 50.0, seed);
            let n = record_noise(&codes, 250e-6, &crate::noise::MAINS_HZ).unwrap();
            let true_rms = (sigma * sigma + 1.0 / 12.0 + 2.0).sqrt();
            held[0] += usize::from(n.hum_lsb[1] <= 2.0 && 2.0 <= n.hum_lsb[2]);
            held[1] += usize::from(n.rms_lsb[1] <= true_rms && true_rms <= n.rms_lsb[2]);
        }
        assert!(held[0] as f64 >= 0.93 * trials as f64, "hum interval held {} of {trials}", held[0]);
        assert!(held[1] as f64 >= 0.90 * trials as f64, "rms interval held {} of {trials}", held[1]);
        // A clean record at the converter's floor shows no hum: its upper end is under the
        // survey's flag threshold in 50 ms.
        let clean = record_noise(&record(200, 250e-6, 0.6, 0.0, 50.0, 9), 250e-6, &crate::noise::MAINS_HZ).unwrap();
        assert!(clean.hum_lsb[2] < HUM_MIN_LSB, "{clean:?}");
        // 60 Hz hum of 3 LSB is seen.
        let hum = record_noise(&record(200, 250e-6, 0.6, 3.0, 60.0, 9), 250e-6, &crate::noise::MAINS_HZ).unwrap();
        assert!(hum.hum_lsb[1] > HUM_MIN_LSB, "{hum:?}");
    }

    #[test]
    fn a_known_mains_frequency_settles_hum_in_a_short_record() {
        // Least squares with known frequencies (a fact of linear regression; no source): over
        // 52 ms the 50 and 60 Hz waves are nearly collinear and each one's interval is wide;
        // with the mains known, one wave is fitted and the interval narrows, still holding.
        let mut held = 0;
        let trials = 200;
        for seed in 0..trials {
            let codes = record(200, 250e-6, 3.0, 2.0, 50.0, seed);
            let n = record_noise(&codes, 250e-6, &[50.0]).unwrap();
            held += usize::from(n.hum_lsb[1] <= 2.0 && 2.0 <= n.hum_lsb[2]);
        }
        assert!(held as f64 >= 0.93 * trials as f64, "hum interval held {held} of {trials}");
        let mut narrower = 0;
        for seed in 0..20 {
            let codes = record(200, 250e-6, 0.6, 0.0, 50.0, seed);
            let both = record_noise(&codes, 250e-6, &crate::noise::MAINS_HZ).unwrap();
            let one = record_noise(&codes, 250e-6, &[50.0]).unwrap();
            narrower += usize::from(one.hum_lsb[2] < both.hum_lsb[2]);
            assert!(one.hum_lsb[2] < HUM_MIN_LSB, "seed {seed}: {one:?}");
        }
        assert_eq!(narrower, 20);
        // The check with a stated mains looks at each frequency alone and keeps the larger:
        // a quiet record still passes "no hum", and hum at the frequency the file does not
        // name is not missed.
        for seed in 0..20 {
            let quiet = record_noise_for(&record(200, 250e-6, 0.6, 0.0, 50.0, seed), 250e-6, Some(50.0)).unwrap();
            assert!(quiet.hum_lsb[2] < HUM_MIN_LSB, "seed {seed}: {quiet:?}");
            let other = record_noise_for(&record(200, 250e-6, 0.6, 0.8, 60.0, seed), 250e-6, Some(50.0)).unwrap();
            assert!(other.hum_lsb[2] >= HUM_MIN_LSB, "seed {seed}: 0.8 LSB at 60 Hz missed: {other:?}");
        }
    }

    #[test]
    fn xml_escapes_markup_and_control_characters() {
        assert_eq!(xml("a<b & \"c\" 'd'>"), "a&lt;b &amp; &quot;c&quot; &#39;d&#39;&gt;");
        assert_eq!(xml("x\u{1}y\nz"), "x\u{FFFD}y&#10;z");
    }
}
