//! What attaching an instrument to a pin would do to its node: the DC shift, the new time
//! constant and bandwidth, and whether the reading would still be trustworthy.
//!
//! An instrument input is a resistance `Ri` in parallel with a capacitance `Ci`, referenced to
//! ground. On a pin driven by `Vs` behind `Rs` with node capacitance `Cn`:
//! - the node moves to the Thevenin divider's level `Vs·Ri/(Rs + Ri)`, a shift of
//!   `−Vs·Rs/(Rs + Ri)` (toward ground);
//! - the node's time constant becomes `(Rs ∥ Ri)·(Cn + Ci)` (was `Rs·Cn`) and its bandwidth
//!   `1/(2π·τ)` (single-pole RC, textbook).
//!
//! The reading is called trustworthy when the shift stays below ½ LSB. A floating pin has no
//! source: the instrument defines the node.

use crate::fit::Interval;
use crate::record::Document;
use crate::units;
use serde_json::{json, Value};
use std::f64::consts::PI;

/// JSON schema name of a loading document.
pub const LOADING_SCHEMA: &str = "ohmsight.loading.v1";

/// An instrument's input.
#[derive(Debug, Clone, PartialEq)]
pub struct Instrument {
    /// What it is (a preset's description, or "instrument input" for `--input`).
    pub description: String,
    /// Input resistance, Ω.
    pub input_ohms: f64,
    /// Input capacitance, F.
    pub input_farads: f64,
    /// The values are typical ones of a kind of instrument, not of the user's.
    pub typical: bool,
}

/// A preset instrument: name, description, input resistance (Ω), input capacitance (F).
///
/// Typical values, common practice, no source: a scope input is about 1 MΩ ∥ 25 pF (1× probe
/// or a direct cable adds to the capacitance); a 10× passive probe about 10 MΩ ∥ 12 pF at its
/// tip; a handheld multimeter on DC volts about 10 MΩ with some 100 pF of input and leads.
pub const PRESETS: [(&str, &str, f64, f64); 3] = [
    ("scope-1x", "oscilloscope input, 1× (typical)", 1e6, 25e-12),
    ("probe-10x", "oscilloscope with a 10× passive probe (typical)", 10e6, 12e-12),
    ("meter", "handheld multimeter on DC volts (typical)", 10e6, 100e-12),
];

/// The preset called `name`.
pub fn preset(name: &str) -> Option<Instrument> {
    PRESETS.iter().find(|p| p.0 == name).map(|&(_, d, r, c)| Instrument {
        description: d.into(),
        input_ohms: r,
        input_farads: c,
        typical: true,
    })
}

/// A positive value with an optional SI prefix and one of `units` ([`crate::units::parse_si`]).
fn parse_value(text: &str, units: &[&str]) -> Option<f64> {
    crate::units::parse_si(text, units).filter(|v| *v > 0.0)
}

/// Parses `--input`: `RESISTANCE,CAPACITANCE`, each a positive number with an optional SI
/// prefix and unit (`1M,25p`, `10MΩ,12pF`, `1e6,25e-12`).
pub fn parse_input(text: &str) -> Result<Instrument, String> {
    const HOW: &str = "write RESISTANCE,CAPACITANCE with SI prefixes, e.g. 1M,25p for 1 MΩ in parallel with 25 pF";
    let Some((r, c)) = text.split_once(',') else {
        return Err(format!("expected two values separated by a comma; {HOW}"));
    };
    let input_ohms = parse_value(r, &["Ω", "ohms", "ohm", "R"])
        .ok_or_else(|| format!("'{}' is not a positive resistance; {HOW}", r.trim()))?;
    let input_farads =
        parse_value(c, &["F"]).ok_or_else(|| format!("'{}' is not a positive capacitance; {HOW}", c.trim()))?;
    Ok(Instrument { description: "instrument input".into(), input_ohms, input_farads, typical: false })
}

/// Input resistances of measuring instruments span about 50 Ω (a scope's terminated input) to
/// 10^15 Ω (an electrometer); input capacitances about 0.1 pF to 10 nF (common practice, no
/// source). A value outside is most likely a typing slip: `1m` (milli) for `1M` (mega).
const PLAUSIBLE_OHMS: (f64, f64) = (50.0, 1e15);
/// See [`PLAUSIBLE_OHMS`].
const PLAUSIBLE_FARADS: (f64, f64) = (0.1e-12, 10e-9);

/// Warnings for an instrument whose values no instrument has (each a sentence for stderr):
/// the answer is still computed, since the user may mean it.
pub fn implausible(i: &Instrument) -> Vec<String> {
    let mut out = Vec::new();
    let check = |v: f64, (lo, hi): (f64, f64), what: &str, unit: &str, out: &mut Vec<String>| {
        if v < lo || v > hi {
            out.push(format!(
                "an instrument input {what} of {} is implausible (instruments have {}–{}); \
                 check the prefix: m is milli, M is mega, u is micro",
                units::si(v, unit),
                units::si(lo, unit),
                units::si(hi, unit)
            ));
        }
    };
    check(i.input_ohms, PLAUSIBLE_OHMS, "resistance", "Ω", &mut out);
    check(i.input_farads, PLAUSIBLE_FARADS, "capacitance", "F", &mut out);
    out
}

/// What a survey knows about one pin, as the loading question needs it.
#[derive(Debug, Clone, PartialEq)]
pub struct PinFacts {
    /// Channel.
    pub channel: u8,
    /// Label.
    pub label: String,
    /// Survey verdict (`driven`, `floating`, `at-rail`, `unknown`).
    pub verdict: String,
    /// Why the verdict is what it is, where the survey said.
    pub reason: Option<String>,
    /// Source voltage, V.
    pub source_volts: Option<f64>,
    /// Source resistance, Ω.
    pub source_ohms: Interval,
    /// Node capacitance, F.
    pub node_farads: Interval,
    /// Converter resolution, bits.
    pub bits: u8,
    /// Converter full scale, V.
    pub vref_volts: f64,
    /// Board name.
    pub board: String,
}

/// Errors reading a stored survey.
#[derive(Debug, Clone, PartialEq)]
#[non_exhaustive]
pub enum FactsError {
    /// Not a survey document (wrong schema or a missing field).
    NotASurvey(String),
    /// The pin is not in the survey.
    NoSuchPin {
        /// The pin asked for.
        pin: u8,
        /// The pins the survey has.
        have: Vec<u8>,
    },
}

impl std::fmt::Display for FactsError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            FactsError::NotASurvey(why) => write!(f, "not an ohmsight survey document: {why}"),
            FactsError::NoSuchPin { pin, have } => {
                let list: Vec<String> = have.iter().map(u8::to_string).collect();
                write!(f, "pin {pin} is not in this survey; it has pins {} (choose one with --pin)", list.join(", "))
            }
        }
    }
}

impl std::error::Error for FactsError {}

/// Reads one pin's facts from a survey document (`ohmsight.survey.v2`, or v1 of earlier
/// versions).
pub fn facts_from_document(doc: &Document, pin: u8) -> Result<PinFacts, FactsError> {
    let results = doc.results();
    let p = results
        .pins
        .iter()
        .find(|p| p.channel == pin)
        .ok_or_else(|| FactsError::NoSuchPin { pin, have: results.pins.iter().map(|p| p.channel).collect() })?;
    Ok(PinFacts {
        channel: pin,
        label: p.label.clone(),
        verdict: p.verdict.clone(),
        reason: p.reason.clone(),
        source_volts: p.source_volts,
        source_ohms: (&p.source_ohms).into(),
        node_farads: (&p.node_farads).into(),
        bits: results.board.bits,
        vref_volts: results.board.vref_volts,
        board: results.board.name.clone(),
    })
}

/// The node with the instrument attached, for one value of the source resistance.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Case {
    /// Which value of `Rs` this is: `estimate`, `low` or `high` end of its 95% interval, or
    /// `bound` when the survey only bounds it.
    pub which: &'static str,
    /// Source resistance, Ω.
    pub source_ohms: f64,
    /// Node capacitance used (the matching end of its interval), F.
    pub node_farads: f64,
    /// Node voltage with the instrument attached, V.
    pub node_volts: f64,
    /// Change of the node voltage, V (negative: toward ground).
    pub shift_volts: f64,
    /// The same in LSB.
    pub shift_lsb: f64,
    /// Time constant without the instrument, `Rs·Cn`, s.
    pub tau_before_s: f64,
    /// Time constant with it, `(Rs ∥ Ri)·(Cn + Ci)`, s.
    pub tau_s: f64,
    /// Bandwidth without the instrument, Hz.
    pub bandwidth_before_hz: f64,
    /// Bandwidth with it, Hz.
    pub bandwidth_hz: f64,
    /// `|shift| < ½ LSB`.
    pub trustworthy: bool,
}

/// Overall answer.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Outcome {
    /// Shift below ½ LSB for every `Rs` in the interval.
    Trustworthy,
    /// Shift at or above ½ LSB for every `Rs` in the interval.
    NotTrustworthy,
    /// Depends on where in its interval `Rs` really is.
    Depends,
    /// Floating pin: the instrument sets the node.
    InstrumentDefinesNode,
    /// The survey does not know enough.
    Unknown,
}

impl Outcome {
    /// Name in JSON.
    pub fn as_str(&self) -> &'static str {
        match self {
            Outcome::Trustworthy => "trustworthy",
            Outcome::NotTrustworthy => "not-trustworthy",
            Outcome::Depends => "depends",
            Outcome::InstrumentDefinesNode => "instrument-defines-node",
            Outcome::Unknown => "unknown",
        }
    }
}

/// The answer to "what would this instrument do to the pin".
#[derive(Debug, Clone, PartialEq)]
pub struct Loading {
    /// The pin.
    pub pin: PinFacts,
    /// The instrument.
    pub instrument: Instrument,
    /// ½ LSB, V: the criterion.
    pub half_lsb_volts: f64,
    /// The answer.
    pub outcome: Outcome,
    /// Source resistances below this keep the shift under ½ LSB, Ω (`None`: any does).
    pub trust_below_ohms: Option<f64>,
    /// One case per known value of `Rs` (estimate, interval ends or bound).
    pub cases: Vec<Case>,
    /// For a floating pin: the node's time constant through the instrument, `Ri·(Cn + Ci)`, s.
    pub floating_tau_s: Option<f64>,
    /// What to keep in mind, in words.
    pub note: String,
    /// Where the pin's facts come from (a stored survey's file, or a live survey); set by the caller.
    pub from: String,
}

fn bandwidth(tau: f64) -> f64 {
    1.0 / (2.0 * PI * tau)
}

/// The node with an instrument attached (see the module documentation for the formulas).
pub fn loading(pin: &PinFacts, inst: &Instrument) -> Loading {
    let lsb = pin.vref_volts / 2f64.powi(i32::from(pin.bits));
    let half = lsb / 2.0;
    let (ri, ci) = (inst.input_ohms, inst.input_farads);
    let cn_est = pin.node_farads.estimate.or(pin.node_farads.high).or(pin.node_farads.low);
    let mut out = Loading {
        pin: pin.clone(),
        instrument: inst.clone(),
        half_lsb_volts: half,
        outcome: Outcome::Unknown,
        trust_below_ohms: None,
        cases: Vec::new(),
        floating_tau_s: None,
        note: String::new(),
        from: String::new(),
    };
    if pin.verdict == "floating" {
        let cn = cn_est.unwrap_or(0.0);
        out.outcome = Outcome::InstrumentDefinesNode;
        out.floating_tau_s = Some(ri * (cn + ci));
        out.note = "nothing drives this pin: the instrument defines the node, pulling it to its own ground \
                    through its input resistance; what it shows is the instrument, not the pin"
            .into();
        return out;
    }
    let (Some(vs), true) = (pin.source_volts, pin.source_ohms.high.is_some() || pin.source_ohms.estimate.is_some())
    else {
        out.note = format!(
            "the survey does not know this pin's source well enough to say: {}",
            pin.reason.as_deref().unwrap_or("no source resistance measured")
        );
        return out;
    };
    let case = |which: &'static str, rs: f64, cn: f64| {
        let node = vs * ri / (rs + ri);
        let shift = node - vs;
        let parallel = rs * ri / (rs + ri);
        let tau = parallel * (cn + ci);
        let tau_before = rs * cn;
        Case {
            which,
            source_ohms: rs,
            node_farads: cn,
            node_volts: node,
            shift_volts: shift,
            shift_lsb: shift / lsb,
            tau_before_s: tau_before,
            tau_s: tau,
            bandwidth_before_hz: if tau_before > 0.0 { bandwidth(tau_before) } else { f64::INFINITY },
            bandwidth_hz: bandwidth(tau),
            trustworthy: shift.abs() < half,
        }
    };
    let nf = &pin.node_farads;
    let rs = &pin.source_ohms;
    let cn_of = |end: Option<f64>| end.or(cn_est).unwrap_or(0.0);
    if let Some(e) = rs.estimate {
        out.cases.push(case("estimate", e, cn_of(nf.estimate)));
        if let Some(l) = rs.low {
            out.cases.push(case("low", l, cn_of(nf.low)));
        }
        if let Some(h) = rs.high {
            out.cases.push(case("high", h, cn_of(nf.high)));
        }
    } else if let Some(h) = rs.high {
        // An upper bound: the shift is at most this (it only grows with Rs).
        out.cases.push(case("bound", h, cn_of(nf.high)));
    }
    // |Vs|·Rs/(Rs + Ri) = ½ LSB ⇔ Rs = ½LSB·Ri/(|Vs| − ½LSB).
    out.trust_below_ohms = (vs.abs() > half).then(|| half * ri / (vs.abs() - half));
    let ok = out.cases.iter().filter(|c| c.trustworthy).count();
    out.outcome = if ok == out.cases.len() {
        Outcome::Trustworthy
    } else if ok == 0 && out.cases.iter().all(|c| c.which != "bound") {
        Outcome::NotTrustworthy
    } else {
        Outcome::Depends
    };
    let bound = out.cases.iter().any(|c| c.which == "bound");
    out.note = match out.outcome {
        Outcome::Trustworthy if bound => "the instrument moves the node by less than ½ LSB for any source \
                                          resistance under the survey's bound: what it shows is what the converter \
                                          reads"
            .into(),
        Outcome::Trustworthy => "the instrument moves the node by less than ½ LSB over the whole 95% interval of \
                                 the source resistance: what it shows is what the converter reads"
            .into(),
        Outcome::NotTrustworthy => "the instrument moves the node by ½ LSB or more over the whole 95% interval of \
                                    the source resistance: it shows a loaded node, and the converter reads that \
                                    loaded node while it is attached"
            .into(),
        _ => "the answer depends on where the source resistance really lies in its interval: compare it with the \
              limit below"
            .into(),
    };
    if pin.node_farads.estimate.is_none() && pin.node_farads.high.is_none() {
        out.note += "; the node capacitance was not measured and is taken as 0 (the time constants are the \
                     instrument's alone)";
    }
    out
}

fn finite(v: f64) -> Value {
    if v.is_finite() {
        v.into()
    } else {
        Value::Null
    }
}

/// The loading answer as one JSON document.
pub fn loading_json(l: &Loading) -> Value {
    let iv = |i: &Interval| json!({"estimate": i.estimate, "low": i.low, "high": i.high});
    json!({
        "schema": LOADING_SCHEMA,
        "from": l.from,
        "board": {"name": l.pin.board, "bits": l.pin.bits, "vref_volts": l.pin.vref_volts},
        "pin": {
            "channel": l.pin.channel,
            "label": l.pin.label,
            "verdict": l.pin.verdict,
            "source_volts": l.pin.source_volts,
            "source_ohms": iv(&l.pin.source_ohms),
            "node_farads": iv(&l.pin.node_farads),
        },
        "instrument": {
            "description": l.instrument.description,
            "input_ohms": l.instrument.input_ohms,
            "input_farads": l.instrument.input_farads,
            "typical": l.instrument.typical,
        },
        "criterion": "trustworthy when the DC shift is below ½ LSB",
        "half_lsb_volts": l.half_lsb_volts,
        "outcome": l.outcome.as_str(),
        "trust_below_ohms": l.trust_below_ohms,
        "floating_tau_s": l.floating_tau_s,
        "floating_bandwidth_hz": l.floating_tau_s.map(bandwidth),
        "cases": l.cases.iter().map(|c| json!({
            "which": c.which,
            "source_ohms": c.source_ohms,
            "node_farads": c.node_farads,
            "node_volts": c.node_volts,
            "shift_volts": c.shift_volts,
            "shift_lsb": c.shift_lsb,
            "tau_before_s": c.tau_before_s,
            "bandwidth_before_hz": finite(c.bandwidth_before_hz),
            "tau_s": c.tau_s,
            "bandwidth_hz": c.bandwidth_hz,
            "trustworthy": c.trustworthy,
        })).collect::<Vec<_>>(),
        "note": l.note,
    })
}

/// The loading answer for the terminal.
pub fn loading_text(l: &Loading) -> String {
    use crate::units::{farads, ohms, si, volts};
    let p = &l.pin;
    let mut out = format!("ohmsight loading — ch{} \"{}\" on \"{}\"\n", p.channel, p.label, p.board);
    if !l.from.is_empty() {
        out += &format!("from: {}\n", l.from);
    }
    out += &format!(
        "pin: {}, source {} behind {}, node {}\n",
        p.verdict,
        p.source_volts.map_or("—".into(), volts),
        crate::render::text::interval_text(&p.source_ohms, ohms),
        crate::render::text::interval_text(&p.node_farads, farads),
    );
    let i = &l.instrument;
    out += &format!(
        "instrument: {}, {} ∥ {}{}\n",
        i.description,
        ohms(i.input_ohms),
        farads(i.input_farads),
        if i.typical { " — typical values: check your own instrument's data sheet" } else { "" }
    );
    out += &format!("criterion: trustworthy when the DC shift is below ½ LSB ({})\n", volts(l.half_lsb_volts));
    if let Some(tau) = l.floating_tau_s {
        out += &format!(
            "\nfloating pin: the node settles to the instrument's ground with τ = {} (bandwidth {})\n",
            si(tau, "s"),
            si(bandwidth(tau), "Hz")
        );
    }
    if !l.cases.is_empty() {
        out += "\n";
    }
    if !l.cases.is_empty() {
        let header =
            ["Rs at", "source R", "node then", "DC shift", "shift", "τ before", "τ with it", "bandwidth", "ok"];
        let rows: Vec<Vec<String>> = l
            .cases
            .iter()
            .map(|c| {
                vec![
                    c.which.to_string(),
                    ohms(c.source_ohms),
                    volts(c.node_volts),
                    volts(c.shift_volts),
                    units::lsb(c.shift_lsb),
                    si(c.tau_before_s, "s"),
                    si(c.tau_s, "s"),
                    si(c.bandwidth_hz, "Hz"),
                    if c.trustworthy { "yes" } else { "no" }.to_string(),
                ]
            })
            .collect();
        out += &crate::render::text::table(&header, &rows);
    }
    out += &format!("\nverdict: {}", l.outcome.as_str());
    if let Some(t) = l.trust_below_ohms {
        out += &format!(" (the shift stays under ½ LSB only while Rs < {})", ohms(t));
    }
    out += &format!("\n{}\n", l.note);
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    fn pin(vs: f64, rs: Interval, cn: Interval) -> PinFacts {
        PinFacts {
            channel: 6,
            label: "test".into(),
            verdict: "driven".into(),
            reason: None,
            source_volts: Some(vs),
            source_ohms: rs,
            node_farads: cn,
            bits: 12,
            vref_volts: 3.3,
            board: "bench".into(),
        }
    }

    fn iv(e: f64, l: f64, h: f64) -> Interval {
        Interval { estimate: Some(e), low: Some(l), high: Some(h) }
    }

    #[test]
    fn implausible_instruments_are_named() {
        // `1m` read as 1 mΩ: no instrument has that input (the "3.14 THz").
        let slip = parse_input("1m,25p").unwrap();
        let w = implausible(&slip);
        assert_eq!(w.len(), 1, "{w:?}");
        assert!(w[0].contains("1.00 mΩ") && w[0].contains("M is mega"), "{w:?}");
        assert_eq!(implausible(&parse_input("1M,25u").unwrap()).len(), 1);
        for (name, ..) in PRESETS {
            assert!(implausible(&preset(name).unwrap()).is_empty(), "{name}");
        }
        assert!(implausible(&parse_input("50,5p").unwrap()).is_empty());
    }

    #[test]
    fn input_syntax() {
        let i = parse_input("1M,25p").unwrap();
        assert_eq!((i.input_ohms, i.input_farads), (1e6, 25e-12));
        let i = parse_input("10MΩ, 12pF").unwrap();
        assert!((i.input_ohms - 10e6).abs() < 1e-6 && (i.input_farads - 12e-12).abs() < 1e-24);
        let i = parse_input("4.7k,1n").unwrap();
        assert!((i.input_ohms - 4700.0).abs() < 1e-9 && (i.input_farads - 1e-9).abs() < 1e-21);
        assert_eq!(parse_input("1e6,25e-12").unwrap().input_ohms, 1e6);
        for bad in ["1M", "1M;25p", "1Q,25p", "1M,25x", "-1M,25p", "0,25p", "1M,", "M,25p"] {
            let e = parse_input(bad).unwrap_err();
            assert!(e.contains("1M,25p"), "{bad}: {e}");
        }
        assert!(preset("scope-1x").is_some() && preset("probe-10x").is_some() && preset("meter").is_some());
        assert!(preset("scope").is_none());
    }

    #[test]
    fn scope_on_a_47k_source_by_hand() {
        // Vs = 1.42 V behind 47 kΩ, Cn = 15 pF, scope 1 MΩ ∥ 25 pF, 12 bits on 3.3 V:
        // node = 1.42·1e6/1.047e6 = 1.356256 V; shift = −1.42·47e3/1.047e6 = −63.744 mV;
        // 1 LSB = 3.3/4096 = 805.664 µV → −79.120 LSB.
        // Rs ∥ Ri = 47e3·1e6/1.047e6 = 44.8902 kΩ; τ = 44.8902e3·40e-12 = 1.795607 µs;
        // bandwidth = 1/(2π·1.795607e-6) = 88.636 kHz. Before: τ = 47e3·15e-12 = 705 ns, 1/(2π·705 ns) =
        // 225.7517 kHz.
        let l = loading(&pin(1.42, iv(47e3, 44e3, 50e3), iv(15e-12, 14e-12, 16e-12)), &preset("scope-1x").unwrap());
        let c = &l.cases[0];
        assert_eq!(c.which, "estimate");
        assert!((c.node_volts - 1.356256).abs() < 1e-6, "{}", c.node_volts);
        assert!((c.shift_volts + 63.744e-3).abs() < 1e-6, "{}", c.shift_volts);
        assert!((c.shift_lsb + 79.120).abs() < 1e-3, "{}", c.shift_lsb);
        assert!((c.tau_s - 1.795607e-6).abs() < 1e-12, "{}", c.tau_s);
        assert!((c.bandwidth_hz - 88_636.0).abs() < 1.0, "{}", c.bandwidth_hz);
        assert!((c.tau_before_s - 705e-9).abs() < 1e-15);
        assert!((c.bandwidth_before_hz - 225_751.7).abs() < 0.1, "{}", c.bandwidth_before_hz);
        assert!(!c.trustworthy);
        assert_eq!(l.outcome, Outcome::NotTrustworthy);
        // Interval ends: Rs = 44 kΩ with 14 pF, 50 kΩ with 16 pF.
        // shift(44k) = −1.42·44e3/1.044e6 = −59.847 mV; shift(50k) = −1.42·50e3/1.05e6 = −67.619 mV.
        assert!((l.cases[1].shift_volts + 59.847e-3).abs() < 1e-6);
        assert!((l.cases[2].shift_volts + 67.619e-3).abs() < 1e-6);
        // ½ LSB = 402.832 µV; Rs* = 402.832e-6·1e6/(1.42 − 402.832e-6) = 283.77 Ω.
        assert!((l.trust_below_ohms.unwrap() - 283.77).abs() < 0.01, "{:?}", l.trust_below_ohms);
    }

    #[test]
    fn meter_on_a_stiff_source_is_trustworthy_and_an_interval_across_the_limit_depends() {
        // Vs = 0.8 V behind 100 Ω, meter 10 MΩ ∥ 100 pF: shift = −0.8·100/10000100 = −8.0 µV
        // = −0.00993 LSB: trustworthy. τ = (100 ∥ 10 MΩ = 99.999 Ω)·(10 pF + 100 pF) = 11.0 ns.
        let l = loading(&pin(0.8, iv(100.0, 90.0, 110.0), iv(10e-12, 9e-12, 11e-12)), &preset("meter").unwrap());
        let c = &l.cases[0];
        assert!((c.shift_volts + 8.0e-6).abs() < 1e-9 && (c.shift_lsb + 0.009930).abs() < 1e-5);
        assert!((c.tau_s - 99.999 * 110e-12).abs() < 1e-15);
        assert_eq!(l.outcome, Outcome::Trustworthy);
        // 10× probe (10 MΩ): Rs* = 402.832e-6·1e7/(2.0 − 402.832e-6) = 2014.57 Ω. An interval
        // 1.5–2.5 kΩ straddles it: the answer depends.
        let l = loading(&pin(2.0, iv(2e3, 1.5e3, 2.5e3), iv(10e-12, 9e-12, 11e-12)), &preset("probe-10x").unwrap());
        assert!((l.trust_below_ohms.unwrap() - 2014.57).abs() < 0.01);
        assert_eq!(l.outcome, Outcome::Depends);
        assert!(l.cases[1].trustworthy && !l.cases[2].trustworthy);
    }

    #[test]
    fn a_bound_gives_the_worst_case_and_a_rail_without_resistance_no_answer() {
        // "Rs < 1.15 kΩ" at 0.8 V under a 10 MΩ probe: shift at the bound −0.8·1150/10001150
        // = −91.99 µV = −0.1142 LSB < ½ LSB, so trustworthy for any Rs under the bound.
        let none = Interval::NONE;
        let l = loading(
            &pin(0.8, Interval { estimate: None, low: None, high: Some(1150.0) }, none),
            &preset("probe-10x").unwrap(),
        );
        assert_eq!(l.cases.len(), 1);
        assert_eq!(l.cases[0].which, "bound");
        assert!((l.cases[0].shift_volts + 91.99e-6).abs() < 0.01e-6, "{}", l.cases[0].shift_volts);
        assert_eq!(l.outcome, Outcome::Trustworthy);
        assert!(l.note.contains("not measured"));
        let mut rail = pin(3.3, none, none);
        rail.verdict = "at-rail".into();
        rail.reason = Some("every reading at the rail".into());
        let l = loading(&rail, &preset("meter").unwrap());
        assert_eq!(l.outcome, Outcome::Unknown);
        assert!(l.cases.is_empty() && l.note.contains("every reading at the rail"));
    }

    #[test]
    fn floating_pin_is_set_by_the_instrument() {
        // τ = Ri·(Cn + Ci) = 1 MΩ·(8 pF + 25 pF) = 33 µs; bandwidth 1/(2π·33 µs) = 4.823 kHz.
        let mut p = pin(0.0, Interval { estimate: None, low: Some(3e11), high: None }, iv(8e-12, 6e-12, 11e-12));
        p.verdict = "floating".into();
        p.source_volts = None;
        let l = loading(&p, &preset("scope-1x").unwrap());
        assert_eq!(l.outcome, Outcome::InstrumentDefinesNode);
        assert!((l.floating_tau_s.unwrap() - 33e-6).abs() < 1e-15);
        assert!((bandwidth(33e-6) - 4822.9).abs() < 0.1);
        assert!(l.note.contains("instrument defines the node"));
    }
}
