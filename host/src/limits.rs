//! Limits files (TOML): what a production check demands of each pin, validated on load with
//! errors that name the file, the line and what to change, and written back out (by
//! `ohmsight limits --from`) in a form that loads unchanged.
//!
//! ```toml
//! name = "GH-12 rev B, end of line"
//! board = "virtual"                # optional: refuse another board
//!
//! [[pin]]
//! channel = 0                      # or label = "soil moisture probe" (or both: both must match)
//! verdict = "driven"               # driven, floating, at-rail
//! source_ohms = [40e3, 52e3]       # low, high; one-sided: { low = 40e3 } or { high = 52e3 }
//! source_volts = [1.3, 1.5]
//! node_farads = [5e-12, 30e-12]
//! noise_lsb_max = 1.0
//! hum = false                      # no mains hum allowed (true: hum must be seen)
//! min_sample_ns_max = 8000.0
//! ```
//!
//! A limit is judged against the measurement's 95% interval ([`Range::decide`]): it passes
//! only when the interval lies inside, fails when it lies wholly outside, and is undecided
//! when it straddles an end (guarded acceptance, ISO 14253-1: conformity must be shown).

use crate::record::BoardRecord;
use crate::scenario::{line_column, FileError, Real};
use serde::Deserialize;
use std::ops::Range as Span;
use toml::Spanned;

/// A limits file that cannot be used: where and what to change.
pub type LimitsError = FileError;

/// An allowed range; either end may be open.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Range {
    /// Lowest allowed value.
    pub low: Option<f64>,
    /// Highest allowed value.
    pub high: Option<f64>,
}

/// How one limit came out.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Outcome {
    /// The measurement's 95% interval lies inside the limit.
    Pass,
    /// The measurement lies outside the limit (its whole 95% interval).
    Fail,
    /// The interval straddles the limit, or there is no measurement: conformity not shown.
    Undecided,
}

impl Outcome {
    /// Name used in JSON, JUnit and the store.
    pub fn as_str(&self) -> &'static str {
        match self {
            Outcome::Pass => "pass",
            Outcome::Fail => "fail",
            Outcome::Undecided => "undecided",
        }
    }

    /// Parses [`Outcome::as_str`].
    pub fn parse(name: &str) -> Option<Outcome> {
        [Outcome::Pass, Outcome::Fail, Outcome::Undecided].into_iter().find(|o| o.as_str() == name)
    }
}

impl Range {
    /// Judges a measurement whose 95% interval is `[lo, hi]` (infinite ends for a bound):
    /// pass only inside, fail only wholly outside (guarded acceptance, ISO 14253-1).
    pub fn decide(&self, lo: f64, hi: f64) -> Outcome {
        let low = self.low.unwrap_or(f64::NEG_INFINITY);
        let high = self.high.unwrap_or(f64::INFINITY);
        if lo.is_nan() || hi.is_nan() {
            Outcome::Undecided
        } else if lo >= low && hi <= high {
            Outcome::Pass
        } else if hi < low || lo > high {
            Outcome::Fail
        } else {
            Outcome::Undecided
        }
    }

    /// Whether `x` lies within the range.
    pub fn contains(&self, x: f64) -> bool {
        self.low.is_none_or(|l| x >= l) && self.high.is_none_or(|h| x <= h)
    }
}

/// The verdicts a limit may ask for (`unknown` is never asked for: it is what fails).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ExpectedVerdict {
    /// Driven by a source.
    Driven,
    /// Nothing drives it.
    Floating,
    /// At a supply rail.
    AtRail,
}

impl ExpectedVerdict {
    /// The verdict's name, as `survey` prints it.
    pub fn as_str(&self) -> &'static str {
        self.verdict().as_str()
    }

    /// The survey verdict it stands for.
    pub fn verdict(&self) -> crate::judge::Verdict {
        match self {
            ExpectedVerdict::Driven => crate::judge::Verdict::Driven,
            ExpectedVerdict::Floating => crate::judge::Verdict::Floating,
            ExpectedVerdict::AtRail => crate::judge::Verdict::AtRail,
        }
    }

    /// From a survey verdict (`None` for unknown).
    pub fn of(v: crate::judge::Verdict) -> Option<Self> {
        match v {
            crate::judge::Verdict::Driven => Some(ExpectedVerdict::Driven),
            crate::judge::Verdict::Floating => Some(ExpectedVerdict::Floating),
            crate::judge::Verdict::AtRail => Some(ExpectedVerdict::AtRail),
            crate::judge::Verdict::Unknown => None,
        }
    }

    fn parse(name: &str) -> Option<Self> {
        [ExpectedVerdict::Driven, ExpectedVerdict::Floating, ExpectedVerdict::AtRail]
            .into_iter()
            .find(|v| v.as_str() == name)
    }
}

/// Which pin a `[[pin]]` table is about.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct PinRef {
    /// Channel number.
    pub channel: Option<u8>,
    /// The board's label for it.
    pub label: Option<String>,
}

/// What one pin must be.
#[derive(Debug, Clone, PartialEq)]
pub struct PinLimits {
    /// The pin.
    pub pin: PinRef,
    /// Line of its `[[pin]]` table in the file (0 when built in code).
    pub line: usize,
    /// Required verdict.
    pub verdict: Option<ExpectedVerdict>,
    /// Source resistance, Ω.
    pub source_ohms: Option<Range>,
    /// Source voltage, V.
    pub source_volts: Option<Range>,
    /// Node capacitance, F.
    pub node_farads: Option<Range>,
    /// Highest noise (white plus hum), LSB rms.
    pub noise_lsb_max: Option<f64>,
    /// Whether mains hum must be absent (`false`) or present (`true`).
    pub hum: Option<bool>,
    /// Longest acceptable minimum sample time, ns.
    pub min_sample_ns_max: Option<f64>,
}

/// The limits a check judges each pin by: the name of one kind of limit, as in the file.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord)]
pub enum LimitKind {
    /// `verdict`.
    Verdict,
    /// `source_ohms`.
    SourceOhms,
    /// `source_volts`.
    SourceVolts,
    /// `node_farads`.
    NodeFarads,
    /// `noise_lsb_max`.
    NoiseLsbMax,
    /// `hum`.
    Hum,
    /// `min_sample_ns_max`.
    MinSampleNsMax,
}

impl LimitKind {
    /// Every kind, in the order a check reports them.
    pub const ALL: [LimitKind; 7] = [
        LimitKind::Verdict,
        LimitKind::SourceOhms,
        LimitKind::SourceVolts,
        LimitKind::NodeFarads,
        LimitKind::NoiseLsbMax,
        LimitKind::Hum,
        LimitKind::MinSampleNsMax,
    ];

    /// The key in the limits file (and the JSON / JUnit name).
    pub fn key(&self) -> &'static str {
        match self {
            LimitKind::Verdict => "verdict",
            LimitKind::SourceOhms => "source_ohms",
            LimitKind::SourceVolts => "source_volts",
            LimitKind::NodeFarads => "node_farads",
            LimitKind::NoiseLsbMax => "noise_lsb_max",
            LimitKind::Hum => "hum",
            LimitKind::MinSampleNsMax => "min_sample_ns_max",
        }
    }

    /// Parses [`LimitKind::key`].
    pub fn parse(key: &str) -> Option<LimitKind> {
        LimitKind::ALL.into_iter().find(|k| k.key() == key)
    }
}

impl PinLimits {
    /// Limits for one pin, none set yet.
    pub fn new(pin: PinRef) -> Self {
        PinLimits {
            pin,
            line: 0,
            verdict: None,
            source_ohms: None,
            source_volts: None,
            node_farads: None,
            noise_lsb_max: None,
            hum: None,
            min_sample_ns_max: None,
        }
    }

    /// The kinds of limit set on this pin, in report order.
    pub fn kinds(&self) -> Vec<LimitKind> {
        LimitKind::ALL
            .into_iter()
            .filter(|k| match k {
                LimitKind::Verdict => self.verdict.is_some(),
                LimitKind::SourceOhms => self.source_ohms.is_some(),
                LimitKind::SourceVolts => self.source_volts.is_some(),
                LimitKind::NodeFarads => self.node_farads.is_some(),
                LimitKind::NoiseLsbMax => self.noise_lsb_max.is_some(),
                LimitKind::Hum => self.hum.is_some(),
                LimitKind::MinSampleNsMax => self.min_sample_ns_max.is_some(),
            })
            .collect()
    }

    /// Whether any limit needs the noise record (noise, hum).
    pub fn needs_noise(&self) -> bool {
        self.noise_lsb_max.is_some() || self.hum.is_some()
    }

    /// A name for messages: `ch3` or the label.
    pub fn describe(&self) -> String {
        match (&self.pin.channel, &self.pin.label) {
            (Some(c), Some(l)) => format!("ch{c} \"{l}\""),
            (Some(c), None) => format!("ch{c}"),
            (None, Some(l)) => format!("\"{l}\""),
            (None, None) => "a pin".into(),
        }
    }
}

/// A limits file.
#[derive(Debug, Clone, PartialEq)]
pub struct Limits {
    /// The file it was read from (for messages).
    pub file: String,
    /// Free text.
    pub name: String,
    /// The board name the limits are for (the board's own name), when stated.
    pub board: Option<String>,
    /// The golden runs the limits were proposed from (informational).
    pub from_runs: Vec<String>,
    /// The K of mean ± K·σ they were proposed with (informational).
    pub sigma: Option<f64>,
    /// The mains frequency where the units are tested, Hz (50 or 60), when stated: one mains
    /// at a time, so each line is fitted alone ([`crate::check::record_noise_for`]), which a
    /// short noise record settles (telling 50 from 60 Hz apart in one fit takes 100 ms).
    pub mains_hz: Option<f64>,
    /// Per pin, in file order.
    pub pins: Vec<PinLimits>,
}

/// A `[[pin]]` table resolved against the board: the channel it is.
#[derive(Debug, Clone, PartialEq)]
pub struct ResolvedPin<'a> {
    /// The channel.
    pub channel: u8,
    /// The board's label of it.
    pub label: String,
    /// Its limits.
    pub limits: &'a PinLimits,
    /// The file's mains frequency, Hz, when stated.
    pub mains_hz: Option<f64>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct FileToml {
    name: Spanned<String>,
    board: Option<Spanned<String>>,
    from_runs: Option<Vec<String>>,
    sigma: Option<Spanned<Real>>,
    mains_hz: Option<Spanned<Real>>,
    #[serde(default)]
    pin: Vec<Spanned<PinToml>>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct PinToml {
    channel: Option<Spanned<i64>>,
    label: Option<Spanned<String>>,
    verdict: Option<Spanned<String>>,
    source_ohms: Option<Spanned<toml::Value>>,
    source_volts: Option<Spanned<toml::Value>>,
    node_farads: Option<Spanned<toml::Value>>,
    noise_lsb_max: Option<Spanned<Real>>,
    hum: Option<bool>,
    min_sample_ns_max: Option<Spanned<Real>>,
}

struct Ctx<'a> {
    file: &'a str,
    text: &'a str,
}

impl Ctx<'_> {
    fn err(&self, span: Option<Span<usize>>, message: impl Into<String>) -> LimitsError {
        FileError::at(self.file, self.text, span, message)
    }

    /// A range written `[low, high]`, `{ low = … }`, `{ high = … }` or `{ low = …, high = … }`,
    /// each end within `[min, max]`.
    fn range(&self, v: &Spanned<toml::Value>, key: &str, min: f64, max: f64, unit: &str) -> Result<Range, LimitsError> {
        let span = v.span();
        let num = |x: &toml::Value, what: &str| -> Result<f64, LimitsError> {
            let n = match x {
                toml::Value::Float(f) => *f,
                toml::Value::Integer(i) => *i as f64,
                _ => return Err(self.err(Some(span.clone()), format!("{key}: the {what} end must be a number"))),
            };
            if n.is_finite() && n >= min && n <= max {
                Ok(n)
            } else {
                Err(self.err(
                    Some(span.clone()),
                    format!("{key}: {what} end {n} is impossible: use a value from {min:e} to {max:e} {unit}"),
                ))
            }
        };
        let shape = || {
            self.err(
                Some(span.clone()),
                format!("{key} must be [low, high], {{ low = … }}, {{ high = … }} or {{ low = …, high = … }}"),
            )
        };
        let range = match v.get_ref() {
            toml::Value::Array(a) if a.len() == 2 => {
                Range { low: Some(num(&a[0], "low")?), high: Some(num(&a[1], "high")?) }
            }
            toml::Value::Table(t) => {
                if let Some(k) = t.keys().find(|k| *k != "low" && *k != "high") {
                    return Err(self.err(Some(span.clone()), format!("{key}: unknown key `{k}`: use low and high")));
                }
                let low = t.get("low").map(|x| num(x, "low")).transpose()?;
                let high = t.get("high").map(|x| num(x, "high")).transpose()?;
                if low.is_none() && high.is_none() {
                    return Err(shape());
                }
                Range { low, high }
            }
            _ => return Err(shape()),
        };
        if let (Some(l), Some(h)) = (range.low, range.high) {
            if l > h {
                return Err(self.err(Some(span), format!("{key}: low {l} is above high {h}: swap them")));
            }
        }
        Ok(range)
    }

    /// A positive number no larger than `max`.
    fn max(&self, v: &Spanned<Real>, key: &str, max: f64, unit: &str) -> Result<f64, LimitsError> {
        let x = v.get_ref().0;
        if x.is_finite() && x > 0.0 && x <= max {
            Ok(x)
        } else {
            Err(self.err(
                Some(v.span()),
                format!("{key} = {x} is impossible: use a value above 0 and up to {max:e} {unit}"),
            ))
        }
    }
}

/// Parses a limits file's text. `file` names it in errors.
pub fn parse(file: &str, text: &str) -> Result<Limits, LimitsError> {
    let cx = Ctx { file, text };
    let f: FileToml = toml::from_str(text).map_err(|e| cx.err(e.span(), e.message().trim().to_string()))?;
    if let Some(why) = crate::scenario::control_character("name", f.name.get_ref()) {
        return Err(cx.err(Some(f.name.span()), why));
    }
    let mains_hz = match &f.mains_hz {
        Some(m) if crate::noise::MAINS_HZ.contains(&m.get_ref().0) => Some(m.get_ref().0),
        Some(m) => {
            return Err(cx.err(
                Some(m.span()),
                format!("mains_hz = {}: mains is 50 or 60 Hz; leave the key out to look for both", m.get_ref().0),
            ))
        }
        None => None,
    };
    let sigma = match &f.sigma {
        Some(s) => Some(cx.max(s, "sigma", 100.0, "")?),
        None => None,
    };
    if f.pin.is_empty() {
        return Err(cx.err(None, "no [[pin]] tables: a limits file names at least one pin and its limits"));
    }
    let mut pins: Vec<PinLimits> = Vec::new();
    for sp in &f.pin {
        let p = sp.get_ref();
        let (line, _) = line_column(text, sp.span().start);
        let channel = match &p.channel {
            Some(c) if (0..=255).contains(c.get_ref()) => Some(*c.get_ref() as u8),
            Some(c) => return Err(cx.err(Some(c.span()), "channel must be from 0 to 255")),
            None => None,
        };
        if let Some(l) = &p.label {
            if let Some(why) = crate::scenario::control_character("label", l.get_ref()) {
                return Err(cx.err(Some(l.span()), why));
            }
        }
        let label = p.label.as_ref().map(|l| l.get_ref().clone());
        if channel.is_none() && label.is_none() {
            return Err(cx.err(Some(sp.span()), "a [[pin]] table needs channel = N or label = \"…\""));
        }
        let mut limits = PinLimits::new(PinRef { channel, label });
        limits.line = line;
        if let Some(v) = &p.verdict {
            limits.verdict = Some(ExpectedVerdict::parse(v.get_ref()).ok_or_else(|| {
                cx.err(
                    Some(v.span()),
                    format!(
                        "verdict = \"{}\" is not one a limit can ask for: use driven, floating or at-rail",
                        v.get_ref()
                    ),
                )
            })?);
        }
        limits.source_ohms = p.source_ohms.as_ref().map(|v| cx.range(v, "source_ohms", 0.0, 1e15, "Ω")).transpose()?;
        limits.source_volts =
            p.source_volts.as_ref().map(|v| cx.range(v, "source_volts", -100.0, 100.0, "V")).transpose()?;
        limits.node_farads = p.node_farads.as_ref().map(|v| cx.range(v, "node_farads", 0.0, 1.0, "F")).transpose()?;
        limits.noise_lsb_max = p.noise_lsb_max.as_ref().map(|v| cx.max(v, "noise_lsb_max", 1e5, "LSB")).transpose()?;
        limits.hum = p.hum;
        limits.min_sample_ns_max =
            p.min_sample_ns_max.as_ref().map(|v| cx.max(v, "min_sample_ns_max", 1e9, "ns")).transpose()?;
        // Limits the verdict makes impossible: the survey never reports them for such a pin.
        let conflict = match limits.verdict {
            Some(ExpectedVerdict::Floating) if limits.source_volts.is_some() => {
                Some("a floating pin has no source voltage: remove source_volts or change the verdict")
            }
            Some(ExpectedVerdict::AtRail) if limits.node_farads.is_some() => {
                Some("a pin at a rail gets no node capacitance (clipped readings): remove node_farads")
            }
            _ => None,
        };
        if let Some(msg) = conflict {
            return Err(cx.err(Some(sp.span()), msg));
        }
        if limits.kinds().is_empty() {
            return Err(cx.err(
                Some(sp.span()),
                "this [[pin]] sets no limit: add verdict, source_ohms, source_volts, node_farads, noise_lsb_max, hum \
                 or min_sample_ns_max",
            ));
        }
        if let Some(other) = pins.iter().find(|q| same_pin(&q.pin, &limits.pin)) {
            return Err(cx.err(
                Some(sp.span()),
                format!("{} already has limits on line {}: merge the two tables", limits.describe(), other.line),
            ));
        }
        pins.push(limits);
    }
    Ok(Limits {
        file: file.to_string(),
        name: f.name.get_ref().clone(),
        board: f.board.map(|b| b.into_inner()),
        from_runs: f.from_runs.unwrap_or_default(),
        sigma,
        mains_hz,
        pins,
    })
}

fn same_pin(a: &PinRef, b: &PinRef) -> bool {
    (a.channel.is_some() && a.channel == b.channel) || (a.label.is_some() && a.label == b.label)
}

/// Reads and parses a limits file.
pub fn load(path: &std::path::Path) -> Result<Limits, LimitsError> {
    let file = path.display().to_string();
    let text = std::fs::read_to_string(path).map_err(|e| LimitsError {
        file: file.clone(),
        line: None,
        column: None,
        message: format!("cannot read the limits file: {e}"),
    })?;
    parse(&file, &text)
}

impl Limits {
    /// Each `[[pin]]` table as a channel of `board`: refuses another board (when the file names
    /// one), channels the board lacks or that are not pins, and labels it does not have.
    pub fn resolve<'a>(&'a self, board: &BoardRecord) -> Result<Vec<ResolvedPin<'a>>, LimitsError> {
        let at = |line: usize, message: String| LimitsError {
            file: self.file.clone(),
            line: (line > 0).then_some(line),
            column: None,
            message,
        };
        if let Some(name) = &self.board {
            if *name != board.name {
                return Err(at(
                    0,
                    format!(
                        "these limits are for board \"{name}\" but board \"{}\" answers: connect a {name}, or change \
                         board = in the file",
                        board.name
                    ),
                ));
            }
        }
        let pins: Vec<_> = board.channels.iter().filter(|c| c.role == "pin").collect();
        let list = || pins.iter().map(|c| format!("{} \"{}\"", c.channel, c.label)).collect::<Vec<_>>().join(", ");
        let mut out: Vec<ResolvedPin<'a>> = Vec::new();
        for p in &self.pins {
            let found = match (&p.pin.channel, &p.pin.label) {
                (Some(ch), label) => {
                    let c = pins.iter().find(|c| c.channel == *ch).ok_or_else(|| {
                        at(
                            p.line,
                            format!("board \"{}\" has no pin on channel {ch}: its pins are {}", board.name, list()),
                        )
                    })?;
                    if let Some(l) = label.as_ref().filter(|l| **l != c.label) {
                        return Err(at(
                            p.line,
                            format!(
                                "channel {ch} is labelled \"{}\" on this board, not \"{l}\": fix the label or the channel",
                                c.label
                            ),
                        ));
                    }
                    c
                }
                (None, Some(label)) => {
                    let matching: Vec<_> = pins.iter().filter(|c| c.label == *label).collect();
                    match matching.as_slice() {
                        [one] => **one,
                        [] => {
                            return Err(at(
                                p.line,
                                format!(
                                    "board \"{}\" has no pin labelled \"{label}\": its pins are {}",
                                    board.name,
                                    list()
                                ),
                            ))
                        }
                        _ => {
                            return Err(at(
                                p.line,
                                format!("several pins are labelled \"{label}\": name the channel too (channel = N)"),
                            ))
                        }
                    }
                }
                (None, None) => return Err(at(p.line, "a [[pin]] table needs channel or label".into())),
            };
            if let Some(other) = out.iter().find(|r| r.channel == found.channel) {
                return Err(at(
                    p.line,
                    format!(
                        "channel {} already has limits on line {}: merge the two tables",
                        found.channel, other.limits.line
                    ),
                ));
            }
            out.push(ResolvedPin {
                channel: found.channel,
                label: found.label.clone(),
                limits: p,
                mains_hz: self.mains_hz,
            });
        }
        Ok(out)
    }

    /// The file as TOML that [`parse`] reads back to the same limits.
    pub fn to_toml(&self) -> String {
        let mut out = String::new();
        out.push_str(&format!("name = {}\n", quote(&self.name)));
        if let Some(b) = &self.board {
            out.push_str(&format!("board = {}\n", quote(b)));
        }
        if let Some(k) = self.sigma {
            out.push_str(&format!("sigma = {}\n", number(k)));
        }
        if let Some(m) = self.mains_hz {
            out.push_str(&format!("mains_hz = {}\n", number(m)));
        }
        if !self.from_runs.is_empty() {
            let runs: Vec<String> = self.from_runs.iter().map(|r| quote(r)).collect();
            out.push_str(&format!("from_runs = [{}]\n", runs.join(", ")));
        }
        for p in &self.pins {
            out.push_str("\n[[pin]]\n");
            if let Some(c) = p.pin.channel {
                out.push_str(&format!("channel = {c}\n"));
            }
            if let Some(l) = &p.pin.label {
                out.push_str(&format!("label = {}\n", quote(l)));
            }
            if let Some(v) = p.verdict {
                out.push_str(&format!("verdict = {}\n", quote(v.as_str())));
            }
            for (key, r) in
                [("source_ohms", p.source_ohms), ("source_volts", p.source_volts), ("node_farads", p.node_farads)]
            {
                if let Some(r) = r {
                    out.push_str(&format!("{key} = {}\n", range_toml(&r)));
                }
            }
            if let Some(x) = p.noise_lsb_max {
                out.push_str(&format!("noise_lsb_max = {}\n", number(x)));
            }
            if let Some(h) = p.hum {
                out.push_str(&format!("hum = {h}\n"));
            }
            if let Some(x) = p.min_sample_ns_max {
                out.push_str(&format!("min_sample_ns_max = {}\n", number(x)));
            }
        }
        out
    }
}

/// A TOML basic string.
fn quote(s: &str) -> String {
    toml::Value::String(s.to_string()).to_string()
}

/// A TOML float that reads back to the same f64 (shortest round-trip digits, exponent form).
fn number(x: f64) -> String {
    format!("{x:e}")
}

fn range_toml(r: &Range) -> String {
    match (r.low, r.high) {
        (Some(l), Some(h)) => format!("[{}, {}]", number(l), number(h)),
        (Some(l), None) => format!("{{ low = {} }}", number(l)),
        (None, Some(h)) => format!("{{ high = {} }}", number(h)),
        (None, None) => "{}".into(),
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::record::ChannelRecord;

    const GOOD: &str = r#"name = "end of line"
[[pin]]
channel = 0
verdict = "driven"
source_ohms = [40e3, 52e3]
source_volts = [1.3, 1.5]
node_farads = [5e-12, 30e-12]
noise_lsb_max = 1.0
hum = false
min_sample_ns_max = 8000.0

[[pin]]
label = "spare"
verdict = "floating"
source_ohms = { low = 1e9 }
"#;

    fn board() -> BoardRecord {
        let ch = |channel: u8, label: &str, role: &str| ChannelRecord {
            channel,
            label: label.into(),
            role: role.into(),
            pull: false,
            drive: false,
        };
        BoardRecord {
            name: "virtual".into(),
            firmware: String::new(),
            protocol: 3,
            unit_id: 1,
            front_end: Default::default(),
            channels: vec![ch(0, "probe", "pin"), ch(1, "spare", "pin"), ch(16, "vref", "precharge")],
        }
    }

    #[test]
    fn the_issue_example_parses() {
        let l = parse("l.toml", GOOD).unwrap();
        assert_eq!(l.pins.len(), 2);
        let p = &l.pins[0];
        assert_eq!(p.line, 2);
        assert_eq!(p.source_ohms, Some(Range { low: Some(40e3), high: Some(52e3) }));
        assert_eq!(p.hum, Some(false));
        assert_eq!(p.kinds().len(), 7);
        assert_eq!(l.pins[1].source_ohms, Some(Range { low: Some(1e9), high: None }));
        let r = l.resolve(&board()).unwrap();
        assert_eq!((r[0].channel, r[1].channel), (0, 1));
    }

    #[test]
    fn written_limits_read_back_unchanged() {
        let mut l = parse("l.toml", GOOD).unwrap();
        l.pins[0].source_volts = Some(Range { low: None, high: Some(1.0 / 3.0) });
        l.pins[0].pin.label = Some("a \"quoted\" label\\".into());
        l.from_runs = vec!["01A".into(), "01B".into()];
        l.sigma = Some(4.0);
        l.mains_hz = Some(60.0);
        let again = parse("l.toml", &l.to_toml()).unwrap();
        let strip = |mut l: Limits| {
            l.pins.iter_mut().for_each(|p| p.line = 0);
            l
        };
        assert_eq!(strip(again), strip(l));
    }

    #[test]
    fn errors_name_line_and_fix() {
        let cases: [(&str, usize, &str); 12] = [
            // A control character in a name or label (an ANSI escape, a newline), written as TOML escapes.
            ("name = \"x\\u001b[2J\"\n[[pin]]\nchannel = 0\nhum = false\n", 1, "U+001B"),
            ("name = \"x\"\n[[pin]]\nlabel = \"a\\nb\"\nhum = false\n", 3, "U+000A"),
            ("name = \"x\"\n[[pin]]\nchannel = \"one\"\nhum = false\n", 3, "expected a whole number"),
            ("name = \"x\"\nmains_hz = 55\n[[pin]]\nchannel = 0\nhum = false\n", 2, "50 or 60"),
            ("name = \"x\"\n[[pin]]\nchannel = 0\nsource_ohm = [1, 2]\n", 4, "unknown field"),
            ("name = \"x\"\n[[pin]]\nchannel = 0\nsource_ohms = [52e3, 40e3]\n", 4, "swap"),
            ("name = \"x\"\n[[pin]]\nchannel = 0\nnode_farads = [-1e-12, 5e-12]\n", 4, "impossible"),
            ("name = \"x\"\n[[pin]]\nchannel = 0\nverdict = \"unknown\"\n", 4, "driven, floating or at-rail"),
            ("name = \"x\"\n[[pin]]\nchannel = 0\nsource_volts = { lo = 1 }\n", 4, "low and high"),
            ("name = \"x\"\n[[pin]]\nverdict = \"driven\"\n", 2, "channel"),
            (
                "name = \"x\"\n[[pin]]\nchannel = 0\nverdict = \"driven\"\n\n[[pin]]\nchannel = 0\nhum = false\n",
                6,
                "line 2",
            ),
            ("name = \"x\"\n[[pin]]\nchannel = 0\nnoise_lsb_max = 0\n", 4, "above 0"),
        ];
        for (text, line, words) in cases {
            let e = parse("bad.toml", text).unwrap_err();
            assert_eq!(e.line, Some(line), "{e}");
            assert!(e.to_string().starts_with(&format!("bad.toml:{line}:")), "{e}");
            assert!(e.message.contains(words), "{e} lacks {words}");
        }
    }

    #[test]
    fn channels_and_labels_the_board_lacks_are_refused_with_their_line() {
        let text = "name = \"x\"\n\n[[pin]]\nchannel = 0\nhum = false\n\n[[pin]]\nchannel = 7\nhum = false\n";
        let e = parse("l.toml", text).unwrap().resolve(&board()).unwrap_err();
        assert_eq!(e.line, Some(7), "{e}");
        assert!(e.message.contains("no pin on channel 7") && e.message.contains("0 \"probe\""), "{e}");
        let text = "name = \"x\"\n[[pin]]\nchannel = 16\nhum = false\n";
        assert!(parse("l.toml", text).unwrap().resolve(&board()).is_err(), "a precharge source is no pin");
        let text = "name = \"x\"\n[[pin]]\nlabel = \"nope\"\nhum = false\n";
        assert!(parse("l.toml", text).unwrap().resolve(&board()).unwrap_err().message.contains("no pin labelled"));
        let text = "name = \"x\"\n[[pin]]\nchannel = 1\nlabel = \"probe\"\nhum = false\n";
        assert!(parse("l.toml", text).unwrap().resolve(&board()).unwrap_err().message.contains("labelled \"spare\""));
        let text = "name = \"x\"\nboard = \"other\"\n[[pin]]\nchannel = 1\nhum = false\n";
        assert!(parse("l.toml", text).unwrap().resolve(&board()).unwrap_err().message.contains("\"other\""));
    }

    #[test]
    fn guarded_acceptance() {
        // ISO 14253-1: conformity is proven only when the uncertainty interval lies within the
        // specification, non-conformity only when it lies wholly outside.
        let r = Range { low: Some(10.0), high: Some(20.0) };
        assert_eq!(r.decide(11.0, 19.0), Outcome::Pass);
        assert_eq!(r.decide(9.0, 12.0), Outcome::Undecided);
        assert_eq!(r.decide(18.0, 21.0), Outcome::Undecided);
        assert_eq!(r.decide(21.0, 30.0), Outcome::Fail);
        assert_eq!(r.decide(1.0, 9.9), Outcome::Fail);
        assert_eq!(r.decide(f64::NEG_INFINITY, 15.0), Outcome::Undecided, "a bound is no number");
        assert_eq!(r.decide(f64::NAN, 15.0), Outcome::Undecided);
        let one_sided = Range { low: None, high: Some(20.0) };
        assert_eq!(one_sided.decide(f64::NEG_INFINITY, 15.0), Outcome::Pass);
    }
}
