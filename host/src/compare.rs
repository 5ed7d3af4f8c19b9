//! Compare: what changed on a unit between two analysed surveys, per pin, in physical terms.
//!
//! The rule: a measurement changed when the two runs' 95% intervals do not overlap. A bound
//! (`> 361 GΩ`, `< 1.15 kΩ`) is an interval open at one end, so a change against a bound needs
//! the other run's interval entirely on the far side of it. A verdict that changed (driven →
//! floating, → at-rail, → unknown) is a change. Where either side has no number (the verdict is
//! `unknown`, the pin was not measured, a rail pin has no node), nothing is claimed: the pair is
//! listed as "cannot tell".
//!
//! What a change likely means comes from a small table of rules ([`RULES`]); the first rule of
//! a change's quantity whose condition holds writes its meaning, with the numbers.
//!
//! The comparison works on [`PinFacts`], the few numbers of a [`PinReport`] it needs, so the
//! rules can be tested with facts written by hand.

use crate::fit::Interval;
use crate::judge::{PinReport, SurveyReport, Verdict, RAIL_MARGIN};
use crate::noise::{hum_present, MAINS_HZ};
use crate::render::text::interval_text;
use crate::units;
use serde::Serialize;

/// JSON schema name of a comparison document.
pub const SCHEMA: &str = "ohmsight.compare.v1";

/// Two-sided 95% quantile of the standard normal, for hum amplitudes (the fit's intervals are
/// already 95%).
const Z95: f64 = 1.959_964;

/// A capacitance this large is a fitted filter capacitor (common practice, no source: pins and
/// traces are tens of pF, filter capacitors nanofarads and more).
const FILTER_FARADS: f64 = 1e-9;
/// A capacitance this small is a bare pin with its trace and cable, no filter capacitor.
const BARE_FARADS: f64 = 100e-12;

/// What was measured.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Quantity {
    /// The verdict (driven, floating, at-rail, unknown).
    Verdict,
    /// Source resistance, Ω.
    SourceOhms,
    /// Node capacitance, F.
    NodeFarads,
    /// Source voltage, V.
    SourceVolts,
    /// 50 Hz hum amplitude, V.
    #[serde(rename = "hum_50hz")]
    Hum50,
    /// 60 Hz hum amplitude, V.
    #[serde(rename = "hum_60hz")]
    Hum60,
}

impl Quantity {
    /// The name in tables (the JSON uses the snake-case name).
    pub fn label(&self) -> &'static str {
        match self {
            Quantity::Verdict => "verdict",
            Quantity::SourceOhms => "source R",
            Quantity::NodeFarads => "node C",
            Quantity::SourceVolts => "source V",
            Quantity::Hum50 => "hum 50 Hz",
            Quantity::Hum60 => "hum 60 Hz",
        }
    }

    /// The SI unit of its values (`""` for the verdict).
    pub fn unit(&self) -> &'static str {
        match self {
            Quantity::Verdict => "",
            Quantity::SourceOhms => "Ω",
            Quantity::NodeFarads => "F",
            Quantity::SourceVolts | Quantity::Hum50 | Quantity::Hum60 => "V",
        }
    }

    /// How its numbers print.
    fn formatter(&self) -> fn(f64) -> String {
        match self {
            Quantity::Verdict | Quantity::SourceOhms => units::ohms,
            Quantity::NodeFarads => units::farads,
            Quantity::SourceVolts => |v| format!("{v:.4} V"),
            Quantity::Hum50 | Quantity::Hum60 => units::volts,
        }
    }

    /// An interval of it as the tables print it.
    fn text(&self, iv: &Interval) -> String {
        interval_text(iv, self.formatter())
    }
}

/// The few numbers of a pin that a comparison looks at.
#[derive(Debug, Clone, PartialEq)]
pub struct PinFacts {
    /// Hardware channel.
    pub channel: u8,
    /// Label from the board.
    pub label: String,
    /// Verdict.
    pub verdict: Verdict,
    /// Why the verdict is what it is (the report's notes).
    pub reason: Option<String>,
    /// Everything planned on the pin was measured.
    pub complete: bool,
    /// Source resistance, Ω, 95%.
    pub source_ohms: Interval,
    /// Node capacitance, F, 95%.
    pub node_farads: Interval,
    /// Source voltage, V, 95%: the fit's interval; for a rail read without a fit, the rail
    /// test's own margin around it.
    pub source_volts: Interval,
    /// Per mains frequency ([`MAINS_HZ`]): the line's amplitude, V, 95%, when a noise record
    /// was analysed.
    pub hum_volts: [Option<Interval>; 2],
    /// Per mains frequency: the line stands out as the survey's hum flag requires.
    pub hum_flagged: [bool; 2],
}

impl PinFacts {
    /// The facts of a judged pin of `report`.
    pub fn of(report: &SurveyReport, p: &PinReport) -> PinFacts {
        let none = Interval::NONE;
        let lsb = report.model.lsb_volts();
        let source_volts = match (p.verdict, &p.fit, p.source_volts) {
            (Verdict::Driven | Verdict::AtRail, Some(fit), Some(_)) => {
                at_least(fit.source_volts, VOLTS_FLOOR_LSB * lsb)
            }
            (Verdict::AtRail, None, Some(v)) => {
                let margin = RAIL_MARGIN * report.model.vref_volts;
                Interval { estimate: Some(v), low: Some(v - margin), high: Some(v + margin) }
            }
            _ => none,
        };
        let (hum_volts, hum_flagged) = match &p.noise {
            Some(n) => {
                let amp = |i: usize| {
                    let (a, se) = (n.hum_lsb[i] * lsb, n.hum_se_lsb * lsb);
                    Some(Interval { estimate: Some(a), low: Some((a - Z95 * se).max(0.0)), high: Some(a + Z95 * se) })
                };
                ([amp(0), amp(1)], hum_present(n))
            }
            None => ([None, None], [false, false]),
        };
        PinFacts {
            channel: p.channel,
            label: p.label.clone(),
            verdict: p.verdict,
            reason: p.reason.clone(),
            complete: p.not_measured.is_empty(),
            source_ohms: p.source_ohms,
            node_farads: p.node_farads,
            source_volts,
            hum_volts,
            hum_flagged,
        }
    }

    /// The facts of every pin of a report, by channel.
    pub fn all(report: &SurveyReport) -> Vec<PinFacts> {
        report.pins.iter().map(|p| PinFacts::of(report, p)).collect()
    }

    fn interval(&self, q: Quantity) -> Interval {
        match q {
            Quantity::Verdict | Quantity::SourceOhms => self.source_ohms,
            Quantity::NodeFarads => self.node_farads,
            Quantity::SourceVolts => self.source_volts,
            Quantity::Hum50 => self.hum_volts[0].unwrap_or(NO_INTERVAL),
            Quantity::Hum60 => self.hum_volts[1].unwrap_or(NO_INTERVAL),
        }
    }
}

/// The least half-width of a fitted source voltage's interval, LSB. The fit's interval is
/// statistical and shrinks with the number of readings, but what the model leaves out (the
/// converter's non-linearity, residual charge: [`crate::fit::MODEL_FLOOR_LSB`] a reading) is
/// common to readings at one level and does not average away between two runs, whose plans
/// (adapted to what each run saw) put their readings at other levels. Found by comparing two
/// surveys of one simulated unit: a 220 kΩ source behind 100 nF moved by 0.36 LSB between them,
/// with intervals of ±0.08 and ±0.23 LSB.
pub const VOLTS_FLOOR_LSB: f64 = 0.5;

/// `iv` widened to at least ±`half` around its estimate.
fn at_least(iv: Interval, half: f64) -> Interval {
    match iv.estimate {
        Some(e) => {
            Interval { estimate: Some(e), low: iv.low.map(|l| l.min(e - half)), high: iv.high.map(|h| h.max(e + half)) }
        }
        None => iv,
    }
}

const NO_INTERVAL: Interval = Interval::NONE;

/// One side of a change: a value with its 95% interval, and the pin's verdict.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Value {
    /// The pin's verdict in that run.
    pub verdict: &'static str,
    /// Best estimate, in `unit` (`null` for a bound).
    pub estimate: Option<f64>,
    /// Lower end of the 95% interval (`null`: unbounded below).
    pub low: Option<f64>,
    /// Upper end of the 95% interval (`null`: unbounded above).
    pub high: Option<f64>,
    /// SI unit of the numbers: `Ω`, `F`, `V` (for a verdict change, those of the source
    /// resistance).
    pub unit: &'static str,
    /// As the table prints it: `47.2 kΩ (44.9–49.6 kΩ)`, `> 361 GΩ`, `driven, 47.2 kΩ (…)`.
    pub text: String,
}

impl Value {
    fn of(f: &PinFacts, q: Quantity) -> Value {
        let iv = f.interval(q);
        let number = |q: Quantity| q.text(&f.interval(q));
        let text = match q {
            Quantity::Verdict => match f.verdict {
                Verdict::Driven => {
                    format!("driven, {} at {}", number(Quantity::SourceOhms), number(Quantity::SourceVolts))
                }
                Verdict::Floating => format!("floating, {}", number(Quantity::SourceOhms)),
                Verdict::AtRail => format!("at-rail, {}", number(Quantity::SourceVolts)),
                Verdict::Unknown => "unknown".into(),
            },
            q => number(q),
        };
        let unit = if q == Quantity::Verdict { Quantity::SourceOhms.unit() } else { q.unit() };
        Value { verdict: f.verdict.as_str(), estimate: iv.estimate, low: iv.low, high: iv.high, unit, text }
    }
}

/// A measurement that changed beyond the two runs' intervals.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Change {
    /// What changed.
    pub what: Quantity,
    /// In the baseline.
    pub before: Value,
    /// Now.
    pub after: Value,
    /// The rule of [`RULES`] that wrote `meaning`.
    pub rule: &'static str,
    /// What it likely means physically, with the numbers.
    pub meaning: String,
}

/// A measurement that cannot be compared: one side has no number (or no verdict).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct CannotTell {
    /// What cannot be compared.
    pub what: Quantity,
    /// The baseline's value as printed (`—` when it has none).
    pub before: String,
    /// The value now as printed.
    pub after: String,
    /// Why not.
    pub why: String,
}

/// One pin's comparison.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct PinComparison {
    /// Hardware channel.
    pub channel: u8,
    /// Label (now; the baseline's where the pin is only there).
    pub label: String,
    /// Some measurement changed beyond the intervals.
    pub changed: bool,
    /// What changed.
    pub changes: Vec<Change>,
    /// What could not be compared.
    pub cannot_tell: Vec<CannotTell>,
}

/// Both runs' facts about one change, for the rules.
pub struct Pair<'a> {
    /// The quantity.
    pub what: Quantity,
    /// The baseline.
    pub before: &'a PinFacts,
    /// Now.
    pub after: &'a PinFacts,
}

impl Pair<'_> {
    /// The quantity's interval before and after.
    fn ivs(&self) -> (Interval, Interval) {
        (self.before.interval(self.what), self.after.interval(self.what))
    }

    /// A representative value of each side: the estimate, else the bound's end.
    fn values(&self) -> (f64, f64) {
        let (b, a) = self.ivs();
        (representative(&b), representative(&a))
    }

    /// The after value is above the before value.
    fn grew(&self) -> bool {
        let (b, a) = self.values();
        a > b
    }

    fn text(&self, f: &PinFacts) -> String {
        self.what.text(&f.interval(self.what))
    }

    /// `9.6×` (or `1/9.6` for a fall) between the representative values.
    fn ratio(&self) -> String {
        let (b, a) = self.values();
        let r = if a >= b { a / b } else { b / a };
        let digits = if r >= 10.0 { 0 } else { 1 };
        if a >= b {
            format!("{r:.digits$}×")
        } else {
            format!("to 1/{r:.digits$}")
        }
    }

    /// `+13%` between the representative values.
    fn percent(&self) -> String {
        let (b, a) = self.values();
        format!("{:+.0}%", (a - b) / b.abs().max(f64::MIN_POSITIVE) * 100.0)
    }

    fn hum_hz(&self) -> f64 {
        if self.what == Quantity::Hum60 {
            MAINS_HZ[1]
        } else {
            MAINS_HZ[0]
        }
    }

    fn hum_index(&self) -> usize {
        usize::from(self.what == Quantity::Hum60)
    }
}

fn representative(iv: &Interval) -> f64 {
    iv.estimate.or(iv.low).or(iv.high).unwrap_or(f64::NAN)
}

/// A rule that says what a change likely means.
pub struct Rule {
    /// Its name (in JSON: `changes[].rule`).
    pub name: &'static str,
    /// The quantity it reads.
    pub what: Quantity,
    /// When it applies (the change is already established).
    pub applies: fn(&Pair) -> bool,
    /// The meaning, with the numbers.
    pub says: fn(&Pair) -> String,
}

/// The rules, in order: the first of a change's quantity that applies writes its meaning. The
/// last rule of each quantity applies always.
pub const RULES: &[Rule] = &[
    Rule {
        name: "came-loose",
        what: Quantity::Verdict,
        applies: |p| p.after.verdict == Verdict::Floating,
        says: |p| format!("now floating ({}): the sensor came loose or its wire broke", p.text(p.after)),
    },
    Rule {
        name: "now-connected",
        what: Quantity::Verdict,
        applies: |p| p.before.verdict == Verdict::Floating && p.after.verdict == Verdict::Driven,
        says: |p| {
            format!(
                "now driven ({} at {}), open before: something is connected that was not (a sensor fitted, \
                 a bridge, moisture or flux residue)",
                p.text(p.after),
                Quantity::SourceVolts.text(&p.after.source_volts)
            )
        },
    },
    Rule {
        name: "to-rail",
        what: Quantity::Verdict,
        applies: |p| p.after.verdict == Verdict::AtRail,
        says: |p| {
            format!(
                "now at a rail ({}): shorted to ground or the supply, or the sensor's output saturated (it was {})",
                Quantity::SourceVolts.text(&p.after.source_volts),
                Value::of(p.before, Quantity::Verdict).text
            )
        },
    },
    Rule {
        name: "off-rail",
        what: Quantity::Verdict,
        applies: |p| p.before.verdict == Verdict::AtRail && p.after.verdict == Verdict::Driven,
        says: |p| {
            format!(
                "no longer at the rail: now {}: a short cleared, or the sensor came back into range",
                Value::of(p.after, Quantity::Verdict).text
            )
        },
    },
    Rule {
        name: "undecided",
        what: Quantity::Verdict,
        applies: |p| p.after.verdict == Verdict::Unknown,
        says: |p| {
            format!(
                "the survey can no longer decide what drives this pin (it was {}): {}; something on the node \
                 changed beyond what the experiments resolve — inspect the pin",
                Value::of(p.before, Quantity::Verdict).text,
                p.after.reason.as_deref().unwrap_or("no reason given")
            )
        },
    },
    Rule {
        name: "verdict",
        what: Quantity::Verdict,
        applies: |_| true,
        says: |p| format!("{} → {}", p.before.verdict.as_str(), p.after.verdict.as_str()),
    },
    Rule {
        name: "series-grew",
        what: Quantity::SourceOhms,
        applies: |p| p.grew(),
        says: |p| {
            format!(
                "series resistance grew {} ({} → {}): a corroded or loose connector, a cracked resistor",
                p.ratio(),
                p.text(p.before),
                p.text(p.after)
            )
        },
    },
    Rule {
        name: "series-fell",
        what: Quantity::SourceOhms,
        applies: |_| true,
        says: |p| {
            format!(
                "source resistance fell {} ({} → {}): a leak path across the sensor (moisture, flux residue), \
                 a short, or another part fitted",
                p.ratio(),
                p.text(p.before),
                p.text(p.after)
            )
        },
    },
    Rule {
        name: "filter-gone",
        what: Quantity::NodeFarads,
        applies: |p| {
            let (b, a) = p.ivs();
            b.low.is_some_and(|l| l >= FILTER_FARADS) && a.high.is_some_and(|h| h <= BARE_FARADS)
        },
        says: |p| {
            format!(
                "node capacitance fell from {} to {}: the filter capacitor is gone (open or not fitted)",
                p.text(p.before),
                p.text(p.after)
            )
        },
    },
    Rule {
        name: "filter-added",
        what: Quantity::NodeFarads,
        applies: |p| {
            let (b, a) = p.ivs();
            b.high.is_some_and(|h| h <= BARE_FARADS) && a.low.is_some_and(|l| l >= FILTER_FARADS)
        },
        says: |p| {
            format!(
                "node capacitance grew from {} to {}: a capacitor on the node that was not there (a part fitted \
                 in rework, a wrong value, a bridge to a neighbour's capacitor)",
                p.text(p.before),
                p.text(p.after)
            )
        },
    },
    Rule {
        name: "capacitance-fell",
        what: Quantity::NodeFarads,
        applies: |p| !p.grew(),
        says: |p| {
            format!(
                "node capacitance fell {} ({} → {}): the filter capacitor lost value (cracked, dried out), or a \
                 cable or sensor is no longer attached",
                p.percent(),
                p.text(p.before),
                p.text(p.after)
            )
        },
    },
    Rule {
        name: "capacitance-grew",
        what: Quantity::NodeFarads,
        applies: |_| true,
        says: |p| {
            format!(
                "node capacitance grew {} ({} → {}): a larger filter capacitor, a longer cable, or moisture on the board",
                p.percent(),
                p.text(p.before),
                p.text(p.after)
            )
        },
    },
    Rule {
        name: "source-drift",
        what: Quantity::SourceVolts,
        applies: |_| true,
        says: |p| {
            let (b, a) = p.values();
            format!(
                "source moved from {} to {} ({}): the sensor's output drifted or its supply changed",
                units::volts(b),
                units::volts(a),
                p.percent()
            )
        },
    },
    Rule { name: "hum-new-open", what: Quantity::Hum50, applies: hum_new_open, says: says_hum_new_open },
    Rule { name: "hum-new", what: Quantity::Hum50, applies: hum_new, says: says_hum_new },
    Rule { name: "hum-gone", what: Quantity::Hum50, applies: hum_gone, says: says_hum_gone },
    Rule { name: "hum-grew", what: Quantity::Hum50, applies: |p| p.grew(), says: says_hum_grew },
    Rule { name: "hum-fell", what: Quantity::Hum50, applies: |_| true, says: says_hum_fell },
];

fn hum_new(p: &Pair) -> bool {
    let i = p.hum_index();
    p.after.hum_flagged[i] && !p.before.hum_flagged[i]
}

fn hum_new_open(p: &Pair) -> bool {
    hum_new(p) && p.after.verdict == Verdict::Floating
}

fn hum_gone(p: &Pair) -> bool {
    let i = p.hum_index();
    p.before.hum_flagged[i] && !p.after.hum_flagged[i]
}

fn says_hum_new_open(p: &Pair) -> String {
    format!("new {:.0} Hz hum of {} amplitude: the open input picks up mains", p.hum_hz(), p.text(p.after))
}

fn says_hum_new(p: &Pair) -> String {
    format!(
        "new {:.0} Hz hum of {} amplitude (was {}): mains pick-up on the wiring — a broken shield or ground, \
         or a cable now run beside mains",
        p.hum_hz(),
        p.text(p.after),
        p.text(p.before)
    )
}

fn says_hum_gone(p: &Pair) -> String {
    format!(
        "{:.0} Hz hum gone ({} → {}): the pick-up path is gone (a shield or ground repaired, wiring moved), \
         or the node is now held stiffer",
        p.hum_hz(),
        p.text(p.before),
        p.text(p.after)
    )
}

fn says_hum_grew(p: &Pair) -> String {
    format!(
        "{:.0} Hz hum grew {} ({} → {}): more mains pick-up (a shield or ground degrading, a source of higher impedance)",
        p.hum_hz(),
        p.ratio(),
        p.text(p.before),
        p.text(p.after)
    )
}

fn says_hum_fell(p: &Pair) -> String {
    format!(
        "{:.0} Hz hum fell {} ({} → {}): less mains pick-up",
        p.hum_hz(),
        p.ratio(),
        p.text(p.before),
        p.text(p.after)
    )
}

/// The rule that explains a change of `pair.what` (hum rules serve both mains frequencies).
pub fn rule_for(pair: &Pair) -> &'static Rule {
    let what = if pair.what == Quantity::Hum60 { Quantity::Hum50 } else { pair.what };
    RULES
        .iter()
        .filter(|r| r.what == what)
        .find(|r| (r.applies)(pair))
        .unwrap_or_else(|| unreachable!("the last rule of each quantity applies always"))
}

/// The two intervals do not overlap (an end left open is unbounded that way).
pub fn apart(a: &Interval, b: &Interval) -> bool {
    let lo = |iv: &Interval| iv.low.unwrap_or(f64::NEG_INFINITY);
    let hi = |iv: &Interval| iv.high.unwrap_or(f64::INFINITY);
    hi(a) < lo(b) || hi(b) < lo(a)
}

fn has_number(iv: &Interval) -> bool {
    iv.low.is_some() || iv.high.is_some()
}

fn change(pair: &Pair) -> Change {
    let rule = rule_for(pair);
    Change {
        what: pair.what,
        before: Value::of(pair.before, pair.what),
        after: Value::of(pair.after, pair.what),
        rule: rule.name,
        meaning: (rule.says)(pair),
    }
}

/// Compares one pin's two runs.
pub fn compare_pin(before: &PinFacts, after: &PinFacts) -> PinComparison {
    let mut changes = Vec::new();
    let mut cannot_tell = Vec::new();
    let pair = |what| Pair { what, before, after };
    let mut cannot = |what: Quantity, why: String| {
        let text = |f: &PinFacts| match what {
            Quantity::Verdict => f.verdict.as_str().to_string(),
            q => q.text(&f.interval(q)),
        };
        cannot_tell.push(CannotTell { what, before: text(before), after: text(after), why });
    };
    let not_measured = |f: &PinFacts, run: &str| {
        (!f.complete).then(|| format!("the {run} did not finish this pin: nothing is compared"))
    };
    if let Some(why) = not_measured(before, "baseline").or_else(|| not_measured(after, "survey now")) {
        cannot(Quantity::Verdict, why);
        return PinComparison {
            channel: after.channel,
            label: after.label.clone(),
            changed: false,
            changes,
            cannot_tell,
        };
    }
    let verdict_changed = before.verdict != after.verdict;
    if before.verdict == Verdict::Unknown {
        cannot(
            Quantity::Verdict,
            format!(
                "the baseline could not decide this pin ({}): nothing is compared",
                before.reason.as_deref().unwrap_or("no reason given")
            ),
        );
    } else if verdict_changed {
        changes.push(change(&pair(Quantity::Verdict)));
    } else if after.verdict == Verdict::Unknown {
        cannot(
            Quantity::Verdict,
            format!(
                "neither run could decide this pin (now: {}): nothing is compared",
                after.reason.as_deref().unwrap_or("no reason given")
            ),
        );
    }
    // Numbers are compared where both runs decided the pin. A verdict that changed to or from
    // floating already carries the source resistance; the source voltage of an open pin means
    // nothing.
    let decided = before.verdict != Verdict::Unknown && after.verdict != Verdict::Unknown;
    let floating_involved = before.verdict == Verdict::Floating || after.verdict == Verdict::Floating;
    let mut numbers = vec![Quantity::NodeFarads];
    if !(verdict_changed && floating_involved) {
        numbers.insert(0, Quantity::SourceOhms);
        numbers.push(Quantity::SourceVolts);
    }
    if decided {
        for what in numbers {
            let (b, a) = (before.interval(what), after.interval(what));
            match (has_number(&b), has_number(&a)) {
                (true, true) if apart(&b, &a) => changes.push(change(&pair(what))),
                (true, true) | (false, false) => {}
                // A verdict change explains a number appearing or going (a rail has no node).
                _ if verdict_changed => {}
                (true, false) => cannot(what, "measured in the baseline, no claim now".into()),
                (false, true) => cannot(what, "no claim in the baseline, measured now".into()),
            }
        }
    }
    // Hum: a line at a mains frequency that appeared, went, or moved beyond both intervals.
    // Checked whatever the verdicts: mains pick-up is a fact of the noise record alone.
    for (i, what) in [Quantity::Hum50, Quantity::Hum60].into_iter().enumerate() {
        match (&before.hum_volts[i], &after.hum_volts[i]) {
            (Some(b), Some(a)) => {
                let flagged = before.hum_flagged[i] || after.hum_flagged[i];
                if flagged && apart(b, a) {
                    changes.push(change(&pair(what)));
                }
            }
            (None, Some(_)) if after.hum_flagged[i] => cannot(what, "no noise record in the baseline".into()),
            (Some(_), None) if before.hum_flagged[i] => cannot(what, "no noise record now".into()),
            _ => {}
        }
    }
    PinComparison {
        channel: after.channel,
        label: after.label.clone(),
        changed: !changes.is_empty(),
        changes,
        cannot_tell,
    }
}

/// Compares every pin of two runs, by channel; a pin in one run only cannot be told.
pub fn compare(before: &[PinFacts], after: &[PinFacts]) -> Vec<PinComparison> {
    let mut channels: Vec<u8> = before.iter().chain(after).map(|p| p.channel).collect();
    channels.sort_unstable();
    channels.dedup();
    channels
        .into_iter()
        .map(|ch| {
            let b = before.iter().find(|p| p.channel == ch);
            let a = after.iter().find(|p| p.channel == ch);
            match (b, a) {
                (Some(b), Some(a)) => compare_pin(b, a),
                (b, a) => {
                    let only = b.or(a).unwrap_or_else(|| unreachable!("the channel came from one of them"));
                    let (before, after, run) = if b.is_some() {
                        (only.verdict.as_str().to_string(), "—".to_string(), "the baseline")
                    } else {
                        ("—".to_string(), only.verdict.as_str().to_string(), "the survey now")
                    };
                    PinComparison {
                        channel: ch,
                        label: only.label.clone(),
                        changed: false,
                        changes: Vec::new(),
                        cannot_tell: vec![CannotTell {
                            what: Quantity::Verdict,
                            before,
                            after,
                            why: format!("surveyed in {run} only"),
                        }],
                    }
                }
            }
        })
        .collect()
}

/// Between two units, each source voltage's interval is widened by this fraction of full scale:
/// about a converter's offset and gain error (the rail margin, [`RAIL_MARGIN`]), which the fit's
/// interval leaves out because it is common to every run of one unit.
pub const OTHER_UNIT_VOLTS: f64 = RAIL_MARGIN;

/// The rule, in words, as the documents state it.
pub const RULE: &str = "a measurement changed when the two runs' 95% intervals do not overlap (against a bound, \
the other run's interval must lie entirely beyond it); a verdict that changed is a change; where either run \
has no number or no verdict, nothing is claimed (cannot tell)";

/// Which run a side of the comparison is, and where it came from.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct RunRef {
    /// Run id.
    pub id: String,
    /// Start, RFC 3339 UTC.
    pub started: String,
    /// Board name.
    pub board: String,
    /// Unit id, 16 hex digits.
    pub unit_id: String,
    /// Every planned experiment was measured.
    pub complete: bool,
    /// Where it came from: `surveyed now`, `store`, `file PATH`, or `store: first complete
    /// survey of the unit`.
    pub from: String,
}

impl RunRef {
    /// The run of `report`, from `from`.
    pub fn of(report: &SurveyReport, from: impl Into<String>) -> RunRef {
        let run = &report.record.run;
        RunRef {
            id: run.id.clone(),
            started: run.started.clone(),
            board: run.board.clone(),
            unit_id: run.unit_id.clone(),
            complete: run.complete,
            from: from.into(),
        }
    }
}

/// The comparison as its `ohmsight.compare.v1` document.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Document {
    /// [`SCHEMA`].
    pub schema: &'static str,
    /// [`RULE`].
    pub rule: &'static str,
    /// The baseline run.
    pub baseline: RunRef,
    /// The run compared with it.
    pub now: RunRef,
    /// Both runs are of one unit (false when comparing with another unit of the board).
    pub same_unit: bool,
    /// Some pin changed.
    pub changed: bool,
    /// Pins with a change.
    pub pins_changed: usize,
    /// Pins with something that could not be compared.
    pub pins_cannot_tell: usize,
    /// Per pin, by channel.
    pub pins: Vec<PinComparison>,
}

impl Document {
    /// Compares two analysed runs. Runs of two units have their source voltages widened by
    /// [`OTHER_UNIT_VOLTS`] of full scale each: a converter's offset and gain errors are common
    /// to two runs of one unit, and not in either fit's interval.
    pub fn new(baseline: &SurveyReport, baseline_from: &str, now: &SurveyReport, now_from: &str) -> Document {
        let same_unit = baseline.record.run.unit_id == now.record.run.unit_id;
        let facts = |r: &SurveyReport| {
            let mut pins = PinFacts::all(r);
            if !same_unit {
                let by = OTHER_UNIT_VOLTS * r.model.vref_volts;
                for p in &mut pins {
                    let v = &mut p.source_volts;
                    (v.low, v.high) = (v.low.map(|l| l - by), v.high.map(|h| h + by));
                }
            }
            pins
        };
        let pins = compare(&facts(baseline), &facts(now));
        Document {
            schema: SCHEMA,
            rule: RULE,
            baseline: RunRef::of(baseline, baseline_from),
            now: RunRef::of(now, now_from),
            same_unit,
            changed: pins.iter().any(|p| p.changed),
            pins_changed: pins.iter().filter(|p| p.changed).count(),
            pins_cannot_tell: pins.iter().filter(|p| !p.cannot_tell.is_empty()).count(),
            pins,
        }
    }

    /// Pretty-printed JSON, ending in a newline.
    pub fn json(&self) -> String {
        // Serialising plain data into a string cannot fail.
        serde_json::to_string_pretty(self).unwrap_or_default() + "\n"
    }
}

/// Why two runs cannot be compared.
#[derive(Debug, Clone, PartialEq, Eq)]
#[non_exhaustive]
pub enum Mismatch {
    /// Different boards (name, converter or channels differ).
    OtherBoard(String),
    /// The same board, another unit.
    OtherUnit {
        /// The baseline's unit id.
        baseline: String,
        /// The unit id now.
        now: String,
    },
    /// Both sides are one run.
    SameRun(String),
}

impl std::fmt::Display for Mismatch {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            Mismatch::OtherBoard(why) => write!(f, "the two runs are of different boards: {why}"),
            Mismatch::OtherUnit { baseline, now } => write!(
                f,
                "the baseline is unit {baseline} and this is unit {now}: give --other-unit to compare with \
                 another unit of the same board (a golden unit), or a baseline of this unit"
            ),
            Mismatch::SameRun(id) => write!(f, "the baseline and the run compared are one run ({id})"),
        }
    }
}

/// Whether two records can be compared: one board (name, converter, channels), one unit unless
/// `other_unit`, two runs.
pub fn comparable(baseline: &crate::RunRecord, now: &crate::RunRecord, other_unit: bool) -> Result<(), Mismatch> {
    let (b, n) = (&baseline.board, &now.board);
    if baseline.run.id == now.run.id {
        return Err(Mismatch::SameRun(now.run.id.clone()));
    }
    if b.name != n.name {
        return Err(Mismatch::OtherBoard(format!("board \"{}\" in the baseline, \"{}\" now", b.name, n.name)));
    }
    if b.front_end != n.front_end {
        return Err(Mismatch::OtherBoard(format!(
            "board \"{}\" describes another converter now (bits, reference, sample times or input values differ)",
            n.name
        )));
    }
    let pins = |r: &crate::record::BoardRecord| {
        r.channels.iter().filter(|c| c.role == "pin").map(|c| (c.channel, c.label.clone())).collect::<Vec<_>>()
    };
    if pins(b) != pins(n) {
        return Err(Mismatch::OtherBoard(format!("board \"{}\" lists other pins or labels now", n.name)));
    }
    if !other_unit && baseline.run.unit_id != now.run.unit_id {
        return Err(Mismatch::OtherUnit { baseline: baseline.run.unit_id.clone(), now: now.run.unit_id.clone() });
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    fn iv(e: Option<f64>, l: Option<f64>, h: Option<f64>) -> Interval {
        Interval { estimate: e, low: l, high: h }
    }

    /// `value` with a symmetric relative 95% interval of ±`rel`.
    fn near(value: f64, rel: f64) -> Interval {
        iv(Some(value), Some(value * (1.0 - rel)), Some(value * (1.0 + rel)))
    }

    /// A driven pin: 47 kΩ ±5%, 15 pF ±5%, 1.42 V ± 1 mV, no hum.
    fn driven() -> PinFacts {
        PinFacts {
            channel: 0,
            label: "probe".into(),
            verdict: Verdict::Driven,
            reason: None,
            complete: true,
            source_ohms: near(47e3, 0.05),
            node_farads: near(15e-12, 0.05),
            source_volts: iv(Some(1.42), Some(1.419), Some(1.421)),
            hum_volts: [Some(iv(Some(50e-6), Some(0.0), Some(300e-6))), Some(iv(Some(40e-6), Some(0.0), Some(300e-6)))],
            hum_flagged: [false, false],
        }
    }

    fn open_pin() -> PinFacts {
        PinFacts {
            verdict: Verdict::Floating,
            source_ohms: iv(None, Some(361e9), None),
            source_volts: NO_INTERVAL,
            ..driven()
        }
    }

    fn only(p: &PinComparison) -> &Change {
        assert_eq!(p.changes.len(), 1, "{:#?}", p.changes);
        &p.changes[0]
    }

    #[test]
    fn overlap_rule_with_bounds() {
        // Common practice, no source: two closed intervals are apart when one ends before the
        // other begins; an open end reaches infinity.
        assert!(!apart(&near(10.0, 0.1), &near(10.5, 0.1)));
        assert!(apart(&near(10.0, 0.1), &near(20.0, 0.1)));
        let below = iv(None, None, Some(1150.0));
        assert!(!apart(&below, &near(1100.0, 0.2)), "an interval reaching under the bound is no change");
        assert!(apart(&below, &iv(Some(2000.0), Some(1200.0), Some(3000.0))), "entirely beyond the bound");
        assert!(!apart(&iv(None, Some(1e9), None), &iv(None, Some(1e12), None)), "two lower bounds never part");
        assert!(!apart(&NO_INTERVAL, &near(1.0, 0.1)));
    }

    #[test]
    fn identical_pins_do_not_change() {
        let p = compare_pin(&driven(), &driven());
        assert!(!p.changed && p.changes.is_empty() && p.cannot_tell.is_empty(), "{p:#?}");
    }

    #[test]
    fn came_loose() {
        let p = compare_pin(&driven(), &open_pin());
        let c = only(&p);
        assert_eq!((c.what, c.rule), (Quantity::Verdict, "came-loose"));
        assert_eq!((c.before.verdict, c.after.verdict), ("driven", "floating"));
        assert_eq!(c.after.low, Some(361e9));
        assert!(c.meaning.starts_with("now floating (> 361 GΩ): the sensor came loose"), "{}", c.meaning);
    }

    #[test]
    fn now_connected() {
        let c = compare_pin(&open_pin(), &driven()).changes[0].clone();
        assert_eq!(c.rule, "now-connected");
        assert!(c.meaning.contains("47.0 kΩ") && c.meaning.contains("1.4200 V"), "{}", c.meaning);
    }

    #[test]
    fn to_rail_and_off_rail() {
        let rail = PinFacts { verdict: Verdict::AtRail, source_volts: near(3.3, 0.002), ..driven() };
        let p = compare_pin(&driven(), &rail);
        assert_eq!(p.changes[0].rule, "to-rail");
        assert!(p.changes[0].meaning.contains("3.3000 V"), "{}", p.changes[0].meaning);
        // The source voltage moved too, and says so.
        assert!(p.changes.iter().any(|c| c.rule == "source-drift"), "{:#?}", p.changes);
        assert_eq!(compare_pin(&rail, &driven()).changes[0].rule, "off-rail");
    }

    #[test]
    fn undecided_is_a_change_and_unknown_before_cannot_be_told() {
        let unknown = PinFacts {
            verdict: Verdict::Unknown,
            reason: Some("a node of at least 2.10 µF hides the source".into()),
            source_ohms: iv(None, Some(3e3), None),
            ..driven()
        };
        let p = compare_pin(&driven(), &unknown);
        let c = only(&p);
        assert_eq!(c.rule, "undecided");
        assert!(c.meaning.contains("2.10 µF"), "{}", c.meaning);
        let back = compare_pin(&unknown, &driven());
        assert!(!back.changed && back.cannot_tell.len() == 1, "{back:#?}");
        // A pin the survey did not finish is never a change.
        let cut = PinFacts { complete: false, ..open_pin() };
        let p = compare_pin(&driven(), &cut);
        assert!(!p.changed && p.cannot_tell[0].why.contains("did not finish"), "{p:#?}");
    }

    #[test]
    fn series_resistance_grew_and_fell() {
        // The brief's example: 10.1 kΩ → 97 kΩ is 9.6×.
        let before = PinFacts { source_ohms: near(10.1e3, 0.06), ..driven() };
        let after = PinFacts { source_ohms: near(97e3, 0.06), ..driven() };
        let c = only(&compare_pin(&before, &after)).clone();
        assert_eq!((c.what, c.rule), (Quantity::SourceOhms, "series-grew"));
        assert!(
            c.meaning.starts_with("series resistance grew 9.6× (10.1 kΩ (9.49–10.7 kΩ) → 97.0 kΩ"),
            "{}",
            c.meaning
        );
        assert_eq!((c.before.estimate, c.after.estimate), (Some(10.1e3), Some(97e3)));
        let c = only(&compare_pin(&after, &before)).clone();
        assert_eq!(c.rule, "series-fell");
        assert!(c.meaning.contains("fell to 1/9.6"), "{}", c.meaning);
    }

    #[test]
    fn filter_capacitor_gone_added_and_drifting() {
        let filtered = PinFacts { node_farads: near(98e-9, 0.05), ..driven() };
        let bare = PinFacts { node_farads: near(14e-12, 0.05), ..driven() };
        let c = only(&compare_pin(&filtered, &bare)).clone();
        assert_eq!(c.rule, "filter-gone");
        assert!(c.meaning.starts_with("node capacitance fell from 98.0 nF"), "{}", c.meaning);
        assert!(c.meaning.contains("to 14.0 pF") && c.meaning.contains("the filter capacitor is gone"));
        assert_eq!(only(&compare_pin(&bare, &filtered)).rule, "filter-added");
        let aged = PinFacts { node_farads: near(60e-9, 0.05), ..driven() };
        let c = only(&compare_pin(&filtered, &aged)).clone();
        assert_eq!(c.rule, "capacitance-fell");
        // (60 − 98) / 98 = −38.8%.
        assert!(c.meaning.starts_with("node capacitance fell -39%"), "{}", c.meaning);
        assert_eq!(only(&compare_pin(&aged, &filtered)).rule, "capacitance-grew");
    }

    #[test]
    fn source_drift_with_percent() {
        // The brief's example: 1.42 V → 1.61 V is +13%.
        let after = PinFacts { source_volts: iv(Some(1.61), Some(1.609), Some(1.611)), ..driven() };
        let c = only(&compare_pin(&driven(), &after)).clone();
        assert_eq!(c.rule, "source-drift");
        assert!(c.meaning.starts_with("source moved from 1.42 V to 1.61 V (+13%)"), "{}", c.meaning);
    }

    #[test]
    fn hum_new_gone_and_grown() {
        let hum = |amp: f64, flagged: bool| PinFacts {
            hum_volts: [Some(iv(Some(amp), Some(amp - 100e-6), Some(amp + 100e-6))), driven().hum_volts[1]],
            hum_flagged: [flagged, false],
            ..driven()
        };
        let c = only(&compare_pin(&driven(), &hum(16e-3, true))).clone();
        assert_eq!((c.what, c.rule), (Quantity::Hum50, "hum-new"));
        assert!(c.meaning.starts_with("new 50 Hz hum of 16.0 mV"), "{}", c.meaning);
        assert_eq!(only(&compare_pin(&hum(16e-3, true), &driven())).rule, "hum-gone");
        assert_eq!(only(&compare_pin(&hum(2e-3, true), &hum(16e-3, true))).rule, "hum-grew");
        assert_eq!(only(&compare_pin(&hum(16e-3, true), &hum(2e-3, true))).rule, "hum-fell");
        // A line below the flag's threshold on both sides is no change, whatever its intervals.
        assert!(!compare_pin(&hum(1e-3, false), &hum(2e-3, false)).changed);
        // On a pin now open, the new hum says so.
        let open_hum = PinFacts { hum_flagged: [true, false], ..open_pin() };
        let open_hum = PinFacts { hum_volts: hum(16e-3, true).hum_volts, ..open_hum };
        let p = compare_pin(&driven(), &open_hum);
        assert!(p.changes.iter().any(|c| c.rule == "hum-new-open"), "{:#?}", p.changes);
        // The 60 Hz line goes through the same rules.
        let sixty = PinFacts {
            hum_volts: [driven().hum_volts[0], Some(iv(Some(8e-3), Some(7.9e-3), Some(8.1e-3)))],
            hum_flagged: [false, true],
            ..driven()
        };
        let c = only(&compare_pin(&driven(), &sixty)).clone();
        assert_eq!((c.what, c.rule), (Quantity::Hum60, "hum-new"));
        assert!(c.meaning.starts_with("new 60 Hz hum"), "{}", c.meaning);
    }

    #[test]
    fn every_rule_is_reached_by_a_test_above() {
        // The names the tests above assert, against the table: a rule added without a test fails here.
        let tested = [
            "came-loose",
            "now-connected",
            "to-rail",
            "off-rail",
            "undecided",
            "series-grew",
            "series-fell",
            "filter-gone",
            "filter-added",
            "capacitance-fell",
            "capacitance-grew",
            "source-drift",
            "hum-new-open",
            "hum-new",
            "hum-gone",
            "hum-grew",
            "hum-fell",
        ];
        let untested: Vec<&str> =
            RULES.iter().map(|r| r.name).filter(|n| !tested.contains(n) && *n != "verdict").collect();
        assert!(untested.is_empty(), "rules without a test: {untested:?}");
    }

    #[test]
    fn pins_in_one_run_only_cannot_be_told() {
        let other = PinFacts { channel: 5, ..driven() };
        let pins = compare(&[driven()], &[driven(), other]);
        assert_eq!(pins.len(), 2);
        assert!(!pins[1].changed && pins[1].cannot_tell[0].why.contains("survey now only"), "{:#?}", pins[1]);
    }
}
