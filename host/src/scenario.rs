//! Scenario files (TOML) for the simulated board, with errors that name file, line and fix.

use ohmsight_virtual::{BoardProfile, PinSetup, Scenario, Source, MAX_PINS};
use serde::de::{self, Deserializer, Visitor};
use serde::Deserialize;
use std::ops::Range;
use toml::Spanned;

/// The built-in demo scenario (an invented board), as TOML.
pub const DEMO_TOML: &str = include_str!("../../boards/virtual/scenarios/demo.toml");
/// Name shown for the demo file in messages.
pub const DEMO_NAME: &str = "<built-in demo scenario>";

/// A file a user wrote (a scenario, a limits file) that could not be used: file, line, column
/// and what to change.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct FileError {
    /// File name.
    pub file: String,
    /// 1-based line, when known.
    pub line: Option<usize>,
    /// 1-based column, when known.
    pub column: Option<usize>,
    /// What is wrong and what to do.
    pub message: String,
}

/// A scenario file that could not be used.
pub type ScenarioError = FileError;

impl FileError {
    /// An error in `file` (whose text is `text`) at byte range `span`.
    pub fn at(file: &str, text: &str, span: Option<Range<usize>>, message: impl Into<String>) -> FileError {
        let (line, column) = match span.map(|s| line_column(text, s.start)) {
            Some((l, c)) => (Some(l), Some(c)),
            None => (None, None),
        };
        FileError { file: file.to_string(), line, column, message: plain_words(&message.into()) }
    }
}

/// A parser's message in the words of the file's reader: "expected i64" says what Rust type a
/// field has, not what to write, so it becomes "expected a whole number".
pub fn plain_words(message: &str) -> String {
    const WORDS: [(&str, &str); 15] = [
        ("expected a boolean", "expected true or false"),
        ("invalid type: ", "wrong kind of value: "),
        ("floating point `", "the decimal number `"),
        ("string \"", "the text \""),
        ("expected i64", "expected a whole number"),
        ("expected i32", "expected a whole number"),
        ("expected i16", "expected a whole number"),
        ("expected i8", "expected a whole number"),
        ("expected u64", "expected a whole number from 0 up"),
        ("expected u32", "expected a whole number from 0 up"),
        ("expected u16", "expected a whole number from 0 up"),
        ("expected u8", "expected a whole number from 0 to 255"),
        ("expected usize", "expected a whole number from 0 up"),
        ("expected f64", "expected a number"),
        ("expected f32", "expected a number"),
    ];
    WORDS.iter().fold(message.to_string(), |m, (from, to)| m.replace(from, to))
}

impl std::fmt::Display for FileError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match (self.line, self.column) {
            (Some(l), Some(c)) => write!(f, "{}:{l}:{c}: {}", self.file, self.message),
            (Some(l), None) => write!(f, "{}:{l}: {}", self.file, self.message),
            _ => write!(f, "{}: {}", self.file, self.message),
        }
    }
}

impl std::error::Error for FileError {}

/// A number written as an integer or a float.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(crate) struct Real(pub f64);

impl<'de> Deserialize<'de> for Real {
    fn deserialize<D: Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        struct V;
        impl Visitor<'_> for V {
            type Value = Real;
            fn expecting(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
                f.write_str("a number")
            }
            fn visit_f64<E: de::Error>(self, v: f64) -> Result<Real, E> {
                Ok(Real(v))
            }
            fn visit_i64<E: de::Error>(self, v: i64) -> Result<Real, E> {
                Ok(Real(v as f64))
            }
            fn visit_u64<E: de::Error>(self, v: u64) -> Result<Real, E> {
                Ok(Real(v as f64))
            }
        }
        d.deserialize_any(V)
    }
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct FileToml {
    name: Spanned<String>,
    seed: Option<u64>,
    board: Option<BoardToml>,
    #[serde(default)]
    pin: Vec<Spanned<PinToml>>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct BoardToml {
    bits: Option<Spanned<i64>>,
    vref_volts: Option<Spanned<Real>>,
    hold_farads: Option<Spanned<Real>>,
    hold_tolerance: Option<Spanned<Real>>,
    switch_ohms: Option<Spanned<Real>>,
    switch_tolerance: Option<Spanned<Real>>,
    adc_clock_hz: Option<Spanned<Real>>,
    sample_cycles: Option<Spanned<Vec<Real>>>,
    conversion_cycles: Option<Spanned<Real>>,
    adc_noise_lsb: Option<Spanned<Real>>,
    leakage_amps: Option<Spanned<Real>>,
    unit_hold_ratio: Option<Spanned<Real>>,
    unit_switch_ratio: Option<Spanned<Real>>,
    pull_ohms: Option<Spanned<Real>>,
    pull_tolerance: Option<Spanned<Real>>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct PinToml {
    channel: Spanned<i64>,
    label: Option<Spanned<String>>,
    volts: Option<Spanned<Real>>,
    ohms: Option<Spanned<Real>>,
    floating: Option<bool>,
    node_farads: Option<Spanned<Real>>,
    hum_volts: Option<Spanned<Real>>,
    hum_hz: Option<Spanned<Real>>,
    noise_volts: Option<Spanned<Real>>,
    pull: Option<bool>,
}

struct Ctx<'a> {
    file: &'a str,
    text: &'a str,
}

/// The 1-based line and column of byte `offset` in `text`.
pub(crate) fn line_column(text: &str, offset: usize) -> (usize, usize) {
    let before = &text[..offset.min(text.len())];
    let line = before.matches('\n').count() + 1;
    let column = before.rsplit('\n').next().map(|l| l.chars().count() + 1).unwrap_or(1);
    (line, column)
}

/// Why `text` (a name or label that will be printed on terminals) is refused: a control
/// character (an escape sequence would reach the terminal; a newline would break a table row).
pub(crate) fn control_character(key: &str, text: &str) -> Option<String> {
    text.chars().find(|c| c.is_control()).map(|c| {
        format!(
            "{key} holds the control character U+{:04X}: it would reach the terminal as a command, not text; \
             write the {key} with printable characters only",
            u32::from(c)
        )
    })
}

impl Ctx<'_> {
    fn err(&self, span: Option<Range<usize>>, message: impl Into<String>) -> ScenarioError {
        FileError::at(self.file, self.text, span, message)
    }

    /// A value within `[lo, hi]` or the default.
    fn real(&self, v: &Option<Spanned<Real>>, key: &str, lo: f64, hi: f64, default: f64) -> Result<f64, ScenarioError> {
        match v {
            None => Ok(default),
            Some(s) => {
                let x = s.get_ref().0;
                if x.is_finite() && x >= lo && x <= hi {
                    Ok(x)
                } else {
                    Err(self
                        .err(Some(s.span()), format!("{key} = {x} is out of range: use a value from {lo:e} to {hi:e}")))
                }
            }
        }
    }
}

/// Parses a scenario file's text. `file` names it in errors.
pub fn parse(file: &str, text: &str) -> Result<Scenario, ScenarioError> {
    let cx = Ctx { file, text };
    let f: FileToml = toml::from_str(text).map_err(|e| cx.err(e.span(), e.message().trim().to_string()))?;
    let name = f.name.get_ref();
    if let Some(why) = control_character("name", name) {
        return Err(cx.err(Some(f.name.span()), why));
    }
    let name = heapless::String::try_from(name.as_str())
        .map_err(|_| cx.err(Some(f.name.span()), "name is longer than 48 bytes: shorten it"))?;
    let d = BoardProfile::default();
    let board = match &f.board {
        None => d,
        Some(b) => {
            let bits = match &b.bits {
                None => d.bits,
                Some(s) if (6..=16).contains(s.get_ref()) => *s.get_ref() as u8,
                Some(s) => return Err(cx.err(Some(s.span()), "bits must be from 6 to 16")),
            };
            let sample_cycles = match &b.sample_cycles {
                None => d.sample_cycles.clone(),
                Some(s) => {
                    let v: Vec<f64> = s.get_ref().iter().map(|r| r.0).collect();
                    if v.is_empty() || v.len() > 16 {
                        return Err(cx.err(Some(s.span()), "sample_cycles needs 1 to 16 entries"));
                    }
                    if v.iter().any(|&c| !(c > 0.0 && c.is_finite())) || v.windows(2).any(|w| w[1] <= w[0]) {
                        return Err(cx.err(Some(s.span()), "sample_cycles must be positive and strictly ascending"));
                    }
                    heapless::Vec::from_slice(&v).unwrap_or_default()
                }
            };
            BoardProfile {
                bits,
                vref_volts: cx.real(&b.vref_volts, "vref_volts", 0.5, 10.0, d.vref_volts)?,
                hold_farads: cx.real(&b.hold_farads, "hold_farads", 0.1e-12, 1e-9, d.hold_farads)?,
                hold_tolerance: cx.real(&b.hold_tolerance, "hold_tolerance", 0.0, 0.5, d.hold_tolerance)?,
                switch_ohms: cx.real(&b.switch_ohms, "switch_ohms", 1.0, 1e6, d.switch_ohms)?,
                switch_tolerance: cx.real(&b.switch_tolerance, "switch_tolerance", 0.0, 0.5, d.switch_tolerance)?,
                adc_clock_hz: cx.real(&b.adc_clock_hz, "adc_clock_hz", 1e3, 1e9, d.adc_clock_hz)?,
                sample_cycles,
                conversion_cycles: cx.real(&b.conversion_cycles, "conversion_cycles", 0.5, 1e4, d.conversion_cycles)?,
                adc_noise_lsb: cx.real(&b.adc_noise_lsb, "adc_noise_lsb", 0.0, 20.0, d.adc_noise_lsb)?,
                leakage_amps: cx.real(&b.leakage_amps, "leakage_amps", 0.0, 1e-6, d.leakage_amps)?,
                unit_hold_ratio: cx.real(&b.unit_hold_ratio, "unit_hold_ratio", 0.2, 5.0, d.unit_hold_ratio)?,
                unit_switch_ratio: cx.real(&b.unit_switch_ratio, "unit_switch_ratio", 0.2, 5.0, d.unit_switch_ratio)?,
                pull_ohms: cx.real(&b.pull_ohms, "pull_ohms", 0.0, 4e6, d.pull_ohms)?,
                pull_tolerance: cx.real(&b.pull_tolerance, "pull_tolerance", 0.0, 0.5, d.pull_tolerance)?,
            }
        }
    };
    // The sample-time table goes on the wire in picoseconds (u32).
    let longest_ps = board.sample_cycles.last().copied().unwrap_or(0.0) / board.adc_clock_hz * 1e12;
    if longest_ps > f64::from(u32::MAX) {
        let span = f.board.as_ref().and_then(|b| b.sample_cycles.as_ref()).map(|s| s.span());
        return Err(cx.err(span, "the longest sample time exceeds 4.29 ms: use fewer cycles or a faster adc_clock_hz"));
    }
    if f.pin.len() > MAX_PINS {
        return Err(cx.err(Some(f.pin[MAX_PINS].span()), format!("at most {MAX_PINS} [[pin]] tables")));
    }
    let vref = board.vref_volts;
    let mut pins: Vec<PinSetup> = Vec::new();
    for sp in &f.pin {
        let p = sp.get_ref();
        let ch = *p.channel.get_ref();
        if !(0..MAX_PINS as i64).contains(&ch) {
            return Err(cx.err(Some(p.channel.span()), format!("channel must be from 0 to {}", MAX_PINS - 1)));
        }
        if pins.iter().any(|q| i64::from(q.channel) == ch) {
            return Err(cx.err(Some(p.channel.span()), format!("channel {ch} is wired twice")));
        }
        let label = match &p.label {
            None => heapless::String::try_from(format!("ch{ch}").as_str()).unwrap_or_default(),
            Some(l) if control_character("label", l.get_ref()).is_some() => {
                return Err(cx.err(Some(l.span()), control_character("label", l.get_ref()).unwrap_or_default()))
            }
            Some(l) => heapless::String::try_from(l.get_ref().as_str())
                .map_err(|_| cx.err(Some(l.span()), "label is longer than 24 bytes: shorten it"))?,
        };
        let source = match (p.floating.unwrap_or(false), &p.volts, &p.ohms) {
            (true, None, None) => Source::Floating,
            (true, _, _) => {
                return Err(
                    cx.err(Some(sp.span()), "a floating pin has no volts or ohms: remove them or floating = true")
                )
            }
            (false, Some(_), Some(_)) => Source::Driven {
                volts: cx.real(&p.volts, "volts", -1.0, vref + 1.0, 0.0)?,
                ohms: cx.real(&p.ohms, "ohms", 0.1, 1e12, 0.0)?,
            },
            (false, _, _) => return Err(cx.err(Some(sp.span()), "a pin needs both volts and ohms, or floating = true")),
        };
        let hum_volts = cx.real(&p.hum_volts, "hum_volts", 0.0, vref, 0.0)?;
        let hum_hz = cx.real(&p.hum_hz, "hum_hz", 1.0, 1000.0, 50.0)?;
        pins.push(PinSetup {
            channel: ch as u8,
            label,
            source,
            node_farads: cx.real(&p.node_farads, "node_farads", 0.1e-12, 100e-6, 10e-12)?,
            hum_volts,
            hum_hz,
            noise_volts: cx.real(&p.noise_volts, "noise_volts", 0.0, vref, 0.0)?,
            pull: p.pull.unwrap_or(false),
        });
    }
    if pins.is_empty() {
        return Err(cx.err(None, "no [[pin]] tables: wire at least one pin"));
    }
    pins.sort_by_key(|p| p.channel);
    Ok(Scenario { name, seed: f.seed.unwrap_or(1), board, pins: heapless::Vec::from_slice(&pins).unwrap_or_default() })
}

/// Reads and parses a scenario file.
pub fn load(path: &std::path::Path) -> Result<Scenario, ScenarioError> {
    let file = path.display().to_string();
    let text = std::fs::read_to_string(path).map_err(|e| ScenarioError {
        file: file.clone(),
        line: None,
        column: None,
        message: format!("cannot read the scenario file: {e}"),
    })?;
    parse(&file, &text)
}

/// The built-in demo scenario.
pub fn demo() -> Scenario {
    parse(DEMO_NAME, DEMO_TOML).expect("the built-in demo scenario parses")
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn demo_parses_and_covers_the_cases() {
        let s = demo();
        assert!(s.pins.len() >= 8);
        assert!(s.pins.iter().any(|p| p.source == Source::Floating));
        assert!(s.pins.iter().any(|p| p.node_farads >= 1e-9));
        assert!(s.pins.iter().any(|p| matches!(p.source, Source::Driven { volts, .. } if volts >= s.board.vref_volts)));
    }

    #[test]
    fn parser_words_become_plain_words() {
        let e = parse("t.toml", "name = \"b\"\n[[pin]]\nchannel = \"x\"\nfloating = true\n").unwrap_err();
        assert_eq!(e.line, Some(3));
        assert!(!e.message.contains("i64") && e.message.contains("expected a whole number"), "{e}");
        assert!(e.message.contains("the text \"x\""), "{e}");
        let e = parse("t.toml", "name = \"b\"\n[[pin]]\nchannel = 1.5\nfloating = true\n").unwrap_err();
        assert!(e.message.contains("the decimal number `1.5`, expected a whole number"), "{e}");
    }

    #[test]
    fn control_characters_in_labels_and_names_are_refused_at_their_line() {
        // An ANSI escape (ECMA-48 CSI, ESC [) and a newline written as TOML escapes.
        let text = "name = \"bench\"\n[[pin]]\nchannel = 0\nlabel = \"red\\u001b[31m\"\nvolts = 1.0\nohms = 1e3\n";
        let e = parse("esc.toml", text).unwrap_err();
        assert_eq!(e.line, Some(4), "{e}");
        assert!(e.message.contains("U+001B"), "{e}");
        let e = parse("nl.toml", "name = \"two\\nlines\"\n[[pin]]\nchannel = 0\nfloating = true\n").unwrap_err();
        assert_eq!(e.line, Some(1), "{e}");
        assert!(e.message.contains("U+000A"), "{e}");
        assert!(parse("ok.toml", "name = \"土壌 ½\"\n[[pin]]\nchannel = 0\nfloating = true\n").is_ok());
    }

    #[test]
    fn errors_name_file_line_and_fix() {
        let text = "name = \"x\"\n[[pin]]\nchannel = 3\nvolts = 1.0\nohms = -5\n";
        let e = parse("bad.toml", text).unwrap_err();
        assert_eq!((e.file.as_str(), e.line), ("bad.toml", Some(5)));
        assert!(e.message.contains("ohms"), "{e}");
        let e = parse("bad.toml", "name = \"x\"\n[[pin]]\nchannel = 1\nvolts = 1.0\n").unwrap_err();
        assert_eq!(e.line, Some(2));
        assert!(e.message.contains("both volts and ohms"));
        let e = parse("bad.toml", "name = \"x\"\n\n[board]\nbitz = 12\n").unwrap_err();
        assert_eq!(e.line, Some(4), "{e}");
        let e = parse(
            "bad.toml",
            "name = \"x\"\n[[pin]]\nchannel = 1\nfloating = true\n[[pin]]\nchannel = 1\nfloating = true\n",
        )
        .unwrap_err();
        assert_eq!(e.line, Some(6));
        let e = parse("bad.toml", "name = \"x\"\n[board]\nsample_cycles = [3, 2]\n").unwrap_err();
        assert_eq!(e.line, Some(3));
    }

    #[test]
    fn integers_and_floats_both_accepted() {
        let s = parse("ok.toml", "name = \"x\"\n[board]\nsample_cycles = [1.5, 7.5, 239.5]\nhold_farads = 8e-12\n[[pin]]\nchannel = 0\nvolts = 1\nohms = 4700\n")
            .unwrap();
        assert_eq!(s.board.sample_cycles.as_slice(), &[1.5, 7.5, 239.5]);
        assert_eq!(s.pins[0].source, Source::Driven { volts: 1.0, ohms: 4700.0 });
        assert_eq!(s.pins[0].node_farads, 10e-12);
    }
}
