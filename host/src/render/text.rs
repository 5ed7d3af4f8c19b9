//! The survey as text for the terminal: the table, notes, advice and the scan plan.

use crate::advice::BoardAdvice;
use crate::fit::Interval;
use crate::judge::{PinReport, SurveyReport, Verdict};
use crate::model::BoardModel;
use crate::units;

/// `47.2 kΩ (44.1–50.6 kΩ)`, `44.1–50.6 kΩ`, `< 1.60 kΩ`, `> 2.30 GΩ` or `—`.
pub fn interval_text(iv: &Interval, fmt: fn(f64) -> String) -> String {
    match (iv.estimate, iv.low, iv.high) {
        (Some(e), Some(l), Some(h)) => format!("{} ({})", fmt(e), range_text(l, h, fmt)),
        (None, Some(l), Some(h)) => range_text(l, h, fmt),
        (_, None, Some(h)) => format!("< {}", fmt(h)),
        (_, Some(l), None) => format!("> {}", fmt(l)),
        (Some(e), None, None) => fmt(e),
        _ => "—".into(),
    }
}

/// `44.1–50.6 kΩ`; the low end keeps its unit where the ends differ in prefix: `999 kΩ–1.05 MΩ`.
fn range_text(low: f64, high: f64, fmt: fn(f64) -> String) -> String {
    let (l, h) = (fmt(low), fmt(high));
    let unit = |s: &str| s.rsplit_once(' ').map(|(_, u)| u.to_string()).unwrap_or_default();
    if unit(&l) == unit(&h) {
        let number = l.rsplit_once(' ').map_or(l.as_str(), |(n, _)| n);
        format!("{number}–{h}")
    } else {
        format!("{l}–{h}")
    }
}

/// A pin's source resistance as the table shows it, with the node it assumes where it needs
/// one: `< 2.52 kΩ if C < 2.00 µF`.
pub fn source_text(p: &PinReport) -> String {
    match p.source_assumes_node_below {
        Some(c) => format!("{} if C < {}", interval_text(&p.source_ohms, units::ohms), units::farads(c)),
        None => interval_text(&p.source_ohms, units::ohms),
    }
}

/// The min-sample cell of a pin: the time, `none settles` (measured: no setting is long
/// enough), `not measured` (the survey was cut short before it), or `—` (no claim: the verdict
/// is unknown).
pub fn min_sample_cell(p: &PinReport) -> String {
    match p.min_sample_ns {
        Some(ns) => units::ns(ns),
        None if p.not_measured.iter().any(|w| !matches!(*w, "memory" | "load")) => "not measured".into(),
        None if p.verdict == Verdict::Unknown => "—".into(),
        None => "none settles".into(),
    }
}

/// A plain-text table: a header, a rule, and the rows, columns padded to their widest cell.
pub fn table<S: AsRef<str>>(header: &[S], rows: &[Vec<String>]) -> String {
    let mut width: Vec<usize> = header.iter().map(|h| units::width(h.as_ref())).collect();
    for row in rows {
        for (w, c) in width.iter_mut().zip(row.iter()) {
            *w = (*w).max(units::width(c));
        }
    }
    let line = |cells: &mut dyn Iterator<Item = &str>| {
        let mut s = String::new();
        for (i, c) in cells.enumerate() {
            s += c;
            if i + 1 < width.len() {
                s += &" ".repeat(width[i] - units::width(c) + 2);
            }
        }
        s.trim_end().to_string() + "\n"
    };
    let mut out = line(&mut header.iter().map(|h| h.as_ref()));
    let rules: Vec<String> = width.iter().map(|&w| "─".repeat(w)).collect();
    out += &line(&mut rules.iter().map(String::as_str));
    for row in rows {
        out += &line(&mut row.iter().map(String::as_str));
    }
    out
}

/// `12 bits, Vref 3.30 V, hold 4.00 pF ±5%, …, 1 LSB = 806 µV`: the converter as the board
/// described it.
pub fn converter_text(m: &BoardModel) -> String {
    let (Some(first), Some(last)) = (m.sample_ps.first(), m.sample_ps.last()) else {
        return "not described (the board did not answer)".into();
    };
    format!(
        "{} bits, Vref {}, hold {} ±{:.0}%, switch {} ±{:.0}%, sample times {}…{}, 1 LSB = {}",
        m.bits,
        units::volts(m.vref_volts),
        units::farads(m.hold_farads),
        m.hold_tolerance * 100.0,
        units::ohms(m.switch_ohms),
        m.switch_tolerance * 100.0,
        units::ns(f64::from(*first) / 1000.0),
        units::ns(f64::from(*last) / 1000.0),
        units::volts(m.lsb_volts()),
    )
}

/// The human-readable survey with its advice block and scan plan.
pub fn survey_text(r: &SurveyReport, advice: &BoardAdvice) -> String {
    let b = &r.board;
    let link_name = r.record.run.link.describe();
    let m = &r.model;
    let mut out = String::new();
    out += &format!(
        "ohmsight survey — board \"{}\" unit {:016x}, firmware {}, over the {}\n",
        b.name, b.unit_id, b.firmware, link_name
    );
    let run = &r.record.run;
    out += &format!(
        "run {} started {}{}{}\n",
        run.id,
        run.started,
        if run.complete { "" } else { ", incomplete" },
        if r.record.profile.source == "board" {
            String::new()
        } else {
            format!("; analysed with the converter values of {}", r.record.profile.source)
        }
    );
    out += &format!("converter: {}\n\n", converter_text(m));
    let header =
        ["ch", "label", "verdict", "source R (95%)", "node C (95%)", "source V", "noise", "min sample", "flags"];
    let rows: Vec<[String; 9]> = r
        .pins
        .iter()
        .map(|p| {
            [
                p.channel.to_string(),
                p.label.clone(),
                p.verdict.as_str().to_string(),
                source_text(p),
                interval_text(&p.node_farads, units::farads),
                p.source_volts.map_or("—".into(), |v| format!("{v:.4} V")),
                p.noise_lsb_rms.map_or("—".into(), units::lsb),
                min_sample_cell(p),
                p.flags.iter().map(|f| f.as_str()).collect::<Vec<_>>().join(" "),
            ]
        })
        .collect();
    let rows: Vec<Vec<String>> = rows.into_iter().map(Vec::from).collect();
    out += &table(&header, &rows);
    let notes: Vec<String> = r
        .pins
        .iter()
        .flat_map(|p| {
            let reason = p.reason.as_ref().map(|why| format!("  ch{} {}: {why}", p.channel, p.verdict.as_str()));
            // A stiff pin's verdict stands on its loading burst: without it, say what is open.
            let unburst = p.not_measured.contains(&"load") && matches!(p.verdict, Verdict::Driven | Verdict::AtRail);
            let missing = (!p.not_measured.is_empty()).then(|| {
                format!(
                    "  ch{}: not measured: {}{}",
                    p.channel,
                    p.not_measured.join(", "),
                    if unburst {
                        format!(
                            " (without its loading burst, `{}` does not rule out an open pin behind a large capacitor; \
                             `survey --resume` runs it)",
                            p.verdict.as_str()
                        )
                    } else {
                        String::new()
                    }
                )
            });
            let pull = p.pull_source_ohms.as_ref().map(|iv| match iv.estimate.or(iv.low).or(iv.high) {
                Some(_) => format!(
                    "  ch{}: pull test: source {} against the board's pull",
                    p.channel,
                    interval_text(iv, units::ohms)
                ),
                None => format!(
                    "  ch{}: pull test: no claim (its two pulled-up readings disagree: the node had not settled, \
                     or the source moved between them: a drift, or interference the readings do not average out)",
                    p.channel
                ),
            });
            let skipped = p.pull_not_run.as_ref().map(|why| format!("  ch{}: pull test: not run ({why})", p.channel));
            reason.into_iter().chain(missing).chain(pull).chain(skipped)
        })
        .collect();
    if !notes.is_empty() {
        out += "\nnotes:\n";
        for n in notes {
            out += &n;
            out += "\n";
        }
    }
    out += &advice_text(r, advice);
    if let Some(f) = &r.fault {
        out += &format!("\nthe survey was cut short: {f}\n");
    }
    out += &format!(
        "\n{} conversions, {} bytes to the board and {} back ({} bad frames, {} re-runs); {:.2} s on the board, {:.2} s here\n",
        r.link.conversions,
        r.link.bytes_sent,
        r.link.bytes_received,
        r.link.bad_frames,
        r.link.reruns,
        r.board_seconds,
        r.wall_seconds
    );
    out
}

/// The advice block and the scan plan for the terminal.
fn advice_text(r: &SurveyReport, advice: &BoardAdvice) -> String {
    use units::{farads, ns, ohms, si, volts};
    let mut out = format!("\nadvice (1 LSB = {}; errors judged against ½ LSB):\n", volts(advice.lsb_volts));
    for a in &advice.pins {
        let label = r.pins.iter().find(|p| p.channel == a.channel).map_or("", |p| p.label.as_str());
        out += &format!("  ch{} {label}: ", a.channel);
        if let Some(note) = &a.note {
            out += note;
        } else if let Some(s) = a.sample {
            out += &format!("use sample time {} (setting {})", ns(s.sample_ns), s.index);
        } else if let Some(f) = a.settle {
            out += &format!(
                "no sample time settles with Rs up to {}: buffer it (an output resistance under {} settles at \
                 the longest sample time), or add at least {} from pin to ground ({} × the hold capacitance), \
                 which allows conversions of this pin at most at {} with neighbours a full scale away; \
                 {} allows {}",
                ohms(f.source_ohms),
                ohms(f.buffer_max_ohms),
                farads(f.min_farads),
                f.hold_multiple,
                si(f.min_farads_max_rate_hz, "Hz"),
                farads(f.suggested_farads),
                si(f.suggested_max_rate_hz, "Hz"),
            );
            if let Some(t) = f.suggested_sample_ns {
                out += &format!(" at sample time {}", ns(t));
            }
        } else {
            out += "no sample-time advice";
        }
        out += "\n";
        if let Some(u) = &a.scan {
            out += &format!(
                "    in the scan plan: sample time {} with {} dummy conversion{} (worst error {}): {}\n",
                ns(u.sample_ns),
                u.dummies,
                if u.dummies == 1 { "" } else { "s" },
                units::lsb(u.worst_error_lsb),
                u.reason
            );
        }
        if let Some(m) = a.memory {
            out += &format!(
                "    memory: the previous channel moves this reading by up to {}; ",
                units::lsb(m.worst_shift_lsb)
            );
            if let Some(d) = m.after_dummy_lsb {
                out += &format!("a dummy conversion of this pin first leaves {}", units::lsb(d));
                out += if d > 0.5 { " (not enough: fix the settling first), " } else { ", " };
            }
            out += &format!("or convert it after a channel within {} of its level\n", volts(m.similar_within_volts));
        }
        if let Some(v) = a.averaging {
            out += &format!(
                "    averaging: to see {} average {} readings ({:.1} extra bits, {}; noise {} rms); ",
                volts(v.resolve_volts),
                v.readings,
                v.extra_bits,
                si(v.seconds, "s"),
                units::lsb(v.noise_lsb_rms)
            );
            if v.needs_dither {
                out += &format!(
                    "the noise is too small to dither the converter: the average keeps a staircase of up to {}, so add dither first\n",
                    volts(v.staircase_volts)
                );
            } else {
                // Below a picovolt the staircase is nothing worth a number.
                let left = if v.staircase_volts < 1e-12 { "none".into() } else { volts(v.staircase_volts) };
                out += &format!("the noise dithers the converter (staircase left: {left})\n");
            }
        }
        if let Some(t) = a.hum_period_s {
            out += &format!("    hum: average over whole periods of {}\n", si(t, "s"));
        }
    }
    let plan = &advice.plan;
    // Stricter than a pin's own advice, which takes its level as measured: here every level,
    // this pin's too, may be anywhere in the range, so a sample time can come out longer.
    out += "\nscan plan (worst error with every pin, this one too, at any level; limit ½ LSB):\n";
    if plan.entries.is_empty() {
        out += "  no pin to scan\n";
    } else {
        let rows: Vec<Vec<String>> = plan
            .entries
            .iter()
            .enumerate()
            .map(|(i, e)| {
                vec![
                    (i + 1).to_string(),
                    e.channel.to_string(),
                    r.pins.iter().find(|p| p.channel == e.channel).map_or(String::new(), |p| p.label.clone()),
                    ns(e.sample_ns),
                    e.dummies.to_string(),
                    units::lsb(e.worst_error_lsb),
                    units::lsb(e.error_now_lsb),
                ]
            })
            .collect();
        let header = ["#", "ch", "label", "sample", "dummies", "worst error", "error now"];
        for line in table(&header, &rows).lines() {
            out += "  ";
            out += line;
            out += "\n";
        }
        if let Some(ch) = plan.idle_for {
            out += &format!("  idle {} after each scan, for ch{ch} (its node recovers slowly)\n", si(plan.idle_s, "s"));
        }
        out += &format!(
            "  one scan takes {} ({}); worst error {}\n",
            si(plan.scan_s, "s"),
            si(1.0 / plan.scan_s, "Hz"),
            units::lsb(plan.worst_error_lsb)
        );
    }
    for l in &plan.left_out {
        out += &format!("  left out: ch{} {}\n", l.channel, l.reason);
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    fn iv(estimate: Option<f64>, low: Option<f64>, high: Option<f64>) -> Interval {
        Interval { estimate, low, high }
    }

    #[test]
    fn an_interval_reads_as_its_ends_with_each_ones_unit() {
        assert_eq!(interval_text(&iv(Some(47.2e3), Some(44.1e3), Some(50.6e3)), units::ohms), "47.2 kΩ (44.1–50.6 kΩ)");
        // Ends in different decades keep their own prefixes: "(999–1.05 MΩ)" would read as 999 Ω.
        assert_eq!(
            interval_text(&iv(Some(1.02e6), Some(999e3), Some(1.05e6)), units::ohms),
            "1.02 MΩ (999 kΩ–1.05 MΩ)"
        );
        // A two-sided interval without a best value (a bound under an assumption) still shows both ends.
        assert_eq!(interval_text(&iv(None, Some(80.0), Some(2.52e3)), units::ohms), "80.0 Ω–2.52 kΩ");
        assert_eq!(interval_text(&iv(None, None, Some(1.6e3)), units::ohms), "< 1.60 kΩ");
        assert_eq!(interval_text(&iv(None, Some(2.3e9), None), units::ohms), "> 2.30 GΩ");
        assert_eq!(interval_text(&Interval::NONE, units::ohms), "—");
    }
}
