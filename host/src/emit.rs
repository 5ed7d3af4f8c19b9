//! The scan plan of a surveyed board as source code for the user's own firmware: a C header
//! or a `no_std` Rust module, each a constant table the firmware walks once per scan.
//!
//! The plan is emitted only when it is verified: the run is a complete survey (no fault, every
//! pin fully measured) and every pin the plan reads stays within its ½ LSB limit (the steady
//! state of the whole scan, [`crate::advice::scan_plan`]). Times are whole nanoseconds rounded
//! up, so a firmware that waits at least that long never waits less than the plan.

use crate::advice::{BoardAdvice, LIMIT_LSB};
use crate::judge::SurveyReport;
use crate::record::RunKind;
use std::fmt::Write;

/// The languages a plan is emitted in.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Language {
    /// A C99 header: `static const` table of structs, `#define`s for the times.
    C,
    /// A Rust module (`no_std`, no dependencies): a `const` array of a small struct.
    Rust,
}

/// Why a run's plan cannot be emitted. Each is the user's input (another run will do).
#[derive(Debug, Clone, PartialEq)]
#[non_exhaustive]
pub enum EmitError {
    /// The run is a production check: it runs no memory test, so it has no scan plan.
    NotASurvey { run: String, kind: &'static str },
    /// The run was cut short or a pin is not fully measured.
    Incomplete { run: String, why: String },
    /// No pin can be read within the limit.
    Empty { run: String },
    /// A pin of the plan exceeds the limit.
    NotVerified { run: String, channel: u8, worst_lsb: f64 },
    /// A time does not fit the emitted 32-bit integers.
    TooLong { what: &'static str, ns: f64 },
}

impl std::fmt::Display for EmitError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            EmitError::NotASurvey { run, kind } => write!(
                f,
                "run {run} is a {kind}, not a survey: a scan plan needs the survey's memory tests; \
                 give the id of a survey of the board"
            ),
            EmitError::Incomplete { run, why } => write!(
                f,
                "run {run} is not complete ({why}): its scan plan is not verified; finish it with \
                 `ohmsight survey --resume {run}` or survey the board again"
            ),
            EmitError::Empty { run } => {
                write!(f, "run {run}: no pin can be read within ½ LSB, so there is no scan plan to emit")
            }
            EmitError::NotVerified { run, channel, worst_lsb } => write!(
                f,
                "run {run}: the scan plan reads ch{channel} with a worst error of {worst_lsb:.3} LSB, \
                 over the ½ LSB limit: the plan is not verified and is not emitted"
            ),
            EmitError::TooLong { what, ns } => {
                write!(f, "the {what} ({ns:.0} ns) does not fit the emitted 32-bit nanosecond count")
            }
        }
    }
}

impl std::error::Error for EmitError {}

/// One step of the emitted plan, in scan order: the numbers exactly as emitted.
#[derive(Debug, Clone, PartialEq)]
pub struct Step {
    /// ADC channel.
    pub channel: u8,
    /// Index into the board's table of selectable sample times.
    pub sample_setting: u8,
    /// That sample time, ns, rounded up.
    pub sample_ns: u32,
    /// Conversions of the channel itself, discarded, right before the one that counts.
    pub dummies: u8,
    /// The channel's label (for a comment).
    pub label: String,
    /// Its worst error in the plan, LSB (for a comment).
    pub worst_error_lsb: f64,
}

/// A verified scan plan with what its header comment says.
#[derive(Debug, Clone, PartialEq)]
pub struct EmittedPlan {
    /// Run id.
    pub run: String,
    /// When the run started (RFC 3339).
    pub started: String,
    /// Board name.
    pub board: String,
    /// Unit id, 16 hex digits.
    pub unit_id: String,
    /// The version of ohmsight that measured.
    pub measured_by: String,
    /// Converter resolution, bits.
    pub bits: u8,
    /// Reference, V.
    pub vref_volts: f64,
    /// The steps in scan order.
    pub steps: Vec<Step>,
    /// Idle time after each scan, ns, rounded up.
    pub idle_ns: u32,
    /// The channel the idle time is for.
    pub idle_for: Option<u8>,
    /// One whole scan including the idle time, ns, rounded up (no firmware overhead).
    pub period_ns: u32,
    /// The worst error of any reading in the plan, LSB.
    pub worst_error_lsb: f64,
    /// The limit it is verified against, LSB.
    pub limit_lsb: f64,
    /// Channels left out, with the reason.
    pub left_out: Vec<(u8, String, String)>,
}

/// Whole nanoseconds, rounded up, from seconds.
fn ceil_ns(seconds: f64, what: &'static str) -> Result<u32, EmitError> {
    // A hair of tolerance so 714.286 ns stored as 714286 ps stays 715, not 716, after float noise.
    let ns = (seconds * 1e9 - 1e-6).ceil().max(0.0);
    if ns > f64::from(u32::MAX) {
        return Err(EmitError::TooLong { what, ns });
    }
    Ok(ns as u32)
}

/// The verified plan of an analysed run, or why there is none.
pub fn verified_plan(r: &SurveyReport, advice: &BoardAdvice) -> Result<EmittedPlan, EmitError> {
    let meta = &r.record.run;
    let run = meta.id.clone();
    if meta.kind != RunKind::Survey {
        return Err(EmitError::NotASurvey { run, kind: meta.kind.as_str() });
    }
    if let Some(fault) = &meta.fault {
        return Err(EmitError::Incomplete { run, why: format!("cut short: {fault}") });
    }
    let unfinished: Vec<String> = r
        .pins
        .iter()
        .filter(|p| !p.not_measured.is_empty() || !r.record.pins.iter().any(|q| q.channel == p.channel && q.complete))
        .map(|p| format!("ch{}", p.channel))
        .collect();
    if !unfinished.is_empty() {
        return Err(EmitError::Incomplete { run, why: format!("not fully measured: {}", unfinished.join(", ")) });
    }
    if !meta.complete {
        return Err(EmitError::Incomplete { run, why: "the record is marked incomplete".into() });
    }
    let plan = &advice.plan;
    if plan.entries.is_empty() {
        return Err(EmitError::Empty { run });
    }
    if let Some(e) = plan.entries.iter().find(|e| e.worst_error_lsb.is_nan() || e.worst_error_lsb > LIMIT_LSB) {
        return Err(EmitError::NotVerified { run, channel: e.channel, worst_lsb: e.worst_error_lsb });
    }
    let label = |ch: u8| r.pins.iter().find(|p| p.channel == ch).map(|p| p.label.clone()).unwrap_or_default();
    let steps = plan
        .entries
        .iter()
        .map(|e| {
            Ok(Step {
                channel: e.channel,
                sample_setting: e.sample_index,
                sample_ns: ceil_ns(e.sample_ns * 1e-9, "sample time")?,
                dummies: e.dummies,
                label: label(e.channel),
                worst_error_lsb: e.worst_error_lsb,
            })
        })
        .collect::<Result<Vec<_>, EmitError>>()?;
    let mut left_out: Vec<(u8, String, String)> =
        plan.left_out.iter().map(|l| (l.channel, label(l.channel), l.reason.clone())).collect();
    // Pins of the board this run did not survey (a survey of chosen channels).
    for c in r.board.channels.iter().filter(|c| c.role == "pin") {
        let planned = plan.entries.iter().any(|e| e.channel == c.channel);
        if !planned && !left_out.iter().any(|l| l.0 == c.channel) {
            left_out.push((c.channel, c.label.clone(), "not surveyed in this run".into()));
        }
    }
    left_out.sort_by_key(|l| l.0);
    Ok(EmittedPlan {
        run: meta.id.clone(),
        started: meta.started.clone(),
        board: meta.board.clone(),
        unit_id: meta.unit_id.clone(),
        measured_by: meta.tool_version.clone(),
        bits: r.model.bits,
        vref_volts: r.model.vref_volts,
        steps,
        idle_ns: ceil_ns(plan.idle_s, "idle time")?,
        idle_for: plan.idle_for,
        period_ns: ceil_ns(plan.scan_s, "scan period")?,
        worst_error_lsb: plan.worst_error_lsb,
        limit_lsb: LIMIT_LSB,
        left_out,
    })
}

/// Text safe inside a comment of either language: printable ASCII only (some embedded
/// compilers refuse other bytes), no `*/` to end a C comment early.
fn comment_text(s: &str) -> String {
    let mut out = String::new();
    for c in s.chars() {
        match c {
            '½' => out.push_str("1/2"),
            'µ' | 'μ' => out.push('u'),
            'Ω' => out.push_str("ohm"),
            '±' => out.push_str("+/-"),
            '–' | '—' => out.push('-'),
            '…' => out.push_str("..."),
            '·' => out.push('*'),
            c if c.is_ascii_graphic() || c == ' ' => out.push(c),
            _ => out.push('?'),
        }
    }
    out.replace("*/", "* /")
}

/// The lines of the header comment, without comment markers.
fn header_lines(p: &EmittedPlan) -> Vec<String> {
    let mut lines = vec![
        "Scan plan for this board's ADC, emitted by ohmsight ".to_string() + env!("CARGO_PKG_VERSION") + ".",
        format!("Run {} (started {}), measured by ohmsight {}.", p.run, p.started, p.measured_by),
        format!("Board \"{}\", unit {}: {} bits, Vref {:.4} V.", p.board, p.unit_id, p.bits, p.vref_volts),
        String::new(),
        format!(
            "Every reading stays within {:.3} LSB of its source (limit {} LSB) with every other pin at",
            p.worst_error_lsb, p.limit_lsb
        ),
        "any level, in the periodic steady state of the whole scan as the survey's fitted model".into(),
        "predicts it. Per step: convert the channel `dummies` times and discard the codes, then".into(),
        "convert it once more at the same sample time and keep that code. After the last step".into(),
        "wait the idle time; a whole scan then takes the scan period (sample, conversion, dummy".into(),
        "and idle times; add your firmware's own time per conversion). Times are whole ns rounded".into(),
        "up. The plan holds only for this board's wiring as surveyed: survey again after a change.".into(),
    ];
    if let Some(ch) = p.idle_for {
        lines.push(format!("The idle time is for ch{ch}: its node recovers slowly."));
    }
    if p.left_out.is_empty() {
        lines.push("No pin is left out.".into());
    } else {
        lines.push(String::new());
        lines.push("Left out of the plan:".into());
        for (ch, label, why) in &p.left_out {
            lines.push(format!("  ch{ch} \"{label}\": {why}"));
        }
    }
    lines.into_iter().map(|l| comment_text(&l)).collect()
}

/// The fields of one step, in order: name, width in bits, what it is (both languages).
const FIELDS: [(&str, u8, &str); 4] = [
    ("channel", 8, "ADC channel"),
    ("sample_setting", 8, "index into the board's selectable sample times"),
    ("sample_ns", 32, "that sample time, ns"),
    ("dummies", 8, "conversions of the channel to discard first"),
];

/// A step's values in the order of [`FIELDS`].
fn values(s: &Step) -> [u32; 4] {
    [u32::from(s.channel), u32::from(s.sample_setting), s.sample_ns, u32::from(s.dummies)]
}

/// The times after the table: the name in C, in Rust, what it is, the value.
fn times(p: &EmittedPlan) -> [(&'static str, &'static str, &'static str, u32); 2] {
    [
        ("OHMSIGHT_SCAN_IDLE_NS", "IDLE_NS", "Idle time after each scan, ns", p.idle_ns),
        ("OHMSIGHT_SCAN_PERIOD_NS", "SCAN_PERIOD_NS", "One whole scan with its idle time, ns", p.period_ns),
    ]
}

/// What one step is, for both languages' doc comments.
const STEP_DOC: &str = "One conversion to keep, and the dummy conversions before it.";

/// The plan as a C99 header.
pub fn c_header(p: &EmittedPlan) -> String {
    let mut o = String::from("/*\n");
    for l in header_lines(p) {
        o += &if l.is_empty() { " *\n".to_string() } else { format!(" * {l}\n") };
    }
    o += " */\n\n#ifndef OHMSIGHT_SCAN_PLAN_H\n#define OHMSIGHT_SCAN_PLAN_H\n\n#include <stdint.h>\n\n";
    let _ = writeln!(o, "/* {STEP_DOC} */\nstruct ohmsight_scan_step {{");
    for (name, bits, doc) in FIELDS {
        let _ = writeln!(o, "    {:<24} /* {doc} */", format!("uint{bits}_t {name};"));
    }
    o += "};\n\n";
    let _ = writeln!(o, "#define OHMSIGHT_SCAN_STEPS {}u", p.steps.len());
    for (name, _, doc, value) in times(p) {
        let _ = writeln!(o, "/* {doc}. */\n#define {name} {value}ul");
    }
    o += "\nstatic const struct ohmsight_scan_step ohmsight_scan_plan[OHMSIGHT_SCAN_STEPS] = {\n";
    for s in &p.steps {
        let v: Vec<String> =
            values(s).iter().zip(FIELDS).map(|(v, f)| format!("{v}u{}", if f.1 > 16 { "l" } else { "" })).collect();
        let _ = writeln!(
            o,
            "    {{ {} }}, /* {}: worst {:.3} LSB */",
            v.join(", "),
            comment_text(&s.label),
            s.worst_error_lsb
        );
    }
    o += "};\n\n#endif /* OHMSIGHT_SCAN_PLAN_H */\n";
    o
}

/// The plan as a Rust module (`no_std`, no dependencies).
pub fn rust_module(p: &EmittedPlan) -> String {
    let mut o = String::new();
    for l in header_lines(p) {
        o += &if l.is_empty() { "//!\n".to_string() } else { format!("//! {l}\n") };
    }
    o += "//!\n//! Plain `core` only: include it with `mod scan_plan;` in a `no_std` crate.\n\n";
    o += "// A firmware may use only part of the table.\n#![allow(dead_code)]\n\n";
    let _ = writeln!(o, "/// {STEP_DOC}\n#[derive(Clone, Copy, Debug, PartialEq, Eq)]\npub struct ScanStep {{");
    for (name, bits, doc) in FIELDS {
        let mut doc = doc.to_string();
        doc[..1].make_ascii_uppercase();
        let _ = writeln!(o, "    /// {doc}.\n    pub {name}: u{bits},");
    }
    o += "}\n\n";
    for (_, name, doc, value) in times(p) {
        let _ = writeln!(o, "/// {doc}.\npub const {name}: u32 = {value};\n");
    }
    let _ = writeln!(o, "/// The steps in scan order.\npub const SCAN_PLAN: [ScanStep; {}] = [", p.steps.len());
    for s in &p.steps {
        let v: Vec<String> = values(s).iter().zip(FIELDS).map(|(v, f)| format!("{}: {v}", f.0)).collect();
        let _ = writeln!(o, "    // {}: worst {:.3} LSB", comment_text(&s.label), s.worst_error_lsb);
        let _ = writeln!(o, "    ScanStep {{ {} }},", v.join(", "));
    }
    o += "];\n";
    o
}

/// The plan in `lang`.
pub fn emit(p: &EmittedPlan, lang: Language) -> String {
    match lang {
        Language::C => c_header(p),
        Language::Rust => rust_module(p),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn plan() -> EmittedPlan {
        EmittedPlan {
            run: "01TEST".into(),
            started: "2026-12-04T00:00:00Z".into(),
            board: "bench */ board".into(),
            unit_id: "0000000000000001".into(),
            measured_by: "0.1.0".into(),
            bits: 12,
            vref_volts: 3.3,
            steps: vec![Step {
                channel: 3,
                sample_setting: 2,
                sample_ns: 1334,
                dummies: 1,
                label: "probe\u{1b}[31m ½ µ".into(),
                worst_error_lsb: 0.25,
            }],
            idle_ns: 0,
            idle_for: None,
            period_ns: 5000,
            worst_error_lsb: 0.25,
            limit_lsb: 0.5,
            left_out: vec![(4, "open".into(), "floating: nothing to read".into())],
        }
    }

    #[test]
    fn rounds_up_to_whole_nanoseconds() {
        assert_eq!(ceil_ns(714.286e-9, "t"), Ok(715));
        assert_eq!(ceil_ns(4000e-9, "t"), Ok(4000));
        assert_eq!(ceil_ns(0.0, "t"), Ok(0));
        assert!(ceil_ns(5.0, "t").is_err());
    }

    #[test]
    fn comments_stay_ascii_and_closed() {
        for text in [c_header(&plan()), rust_module(&plan())] {
            assert!(text.chars().all(|c| c == '\n' || c.is_ascii_graphic() || c == ' '), "{text}");
            assert!(text.contains("probe?[31m 1/2 u"), "{text}");
        }
        let c = c_header(&plan());
        assert_eq!(c.matches("*/").count(), c.matches("/*").count(), "{c}");
    }
}
