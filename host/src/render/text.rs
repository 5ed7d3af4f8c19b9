//! Survey output: the terminal table and the JSON document.

use crate::advice::{advise, AdviceOptions, BoardAdvice, PinAdvice, ScanPlan};
use crate::fit::Interval;
use crate::model::BoardModel;
use crate::survey::{PinReport, SurveyReport};
use crate::units;
use serde_json::{json, Map, Value};

/// JSON schema name of a survey document.
pub const SURVEY_SCHEMA: &str = "ohmsight.survey.v1";

fn interval_json(iv: &Interval) -> Value {
    let mut m = Map::new();
    m.insert("estimate".into(), iv.estimate.map_or(Value::Null, Value::from));
    if let Some(l) = iv.low {
        m.insert("low".into(), l.into());
    }
    if let Some(h) = iv.high {
        m.insert("high".into(), h.into());
    }
    Value::Object(m)
}

fn pin_json(p: &PinReport) -> Value {
    let memory = p.memory.map(|m| {
        json!({
            "sample_index": m.sample,
            "shift_lsb": m.shift_lsb,
            "shift_se_lsb": m.shift_se_lsb,
            "coefficient": m.coefficient,
        })
    });
    let hum = p.noise.as_ref().map(|n| json!({"50": n.hum_lsb[0], "60": n.hum_lsb[1]}));
    json!({
        "channel": p.channel,
        "label": p.label,
        "verdict": p.verdict.as_str(),
        "reason": p.reason,
        "source_ohms": interval_json(&p.source_ohms),
        "node_farads": interval_json(&p.node_farads),
        "source_volts": p.source_volts,
        "noise_lsb_rms": p.noise_lsb_rms,
        "min_sample_ns": p.min_sample_ns,
        "flags": p.flags.iter().map(|f| f.as_str()).collect::<Vec<_>>(),
        "hum_lsb": hum,
        "memory": memory,
        "fit": p.fit.as_ref().map(|f| json!({"chi2": f.chi2, "dof": f.dof, "evaluations": f.evaluations})),
        "conversions": p.conversions,
    })
}

/// The survey as one JSON document, with advice for a sub-LSB signal of none.
pub fn survey_json(r: &SurveyReport, link_name: &str) -> Value {
    survey_json_with(r, link_name, &advise(r, &AdviceOptions::default()), &AdviceOptions::default())
}

/// The survey as one JSON document, with per-pin advice and the scan plan.
pub fn survey_json_with(r: &SurveyReport, link_name: &str, advice: &BoardAdvice, opts: &AdviceOptions) -> Value {
    let b = &r.board;
    let m = &r.model;
    let precharges: Vec<Value> = m
        .precharge_volts
        .iter()
        .map(|(ch, v)| {
            let label = b.channels.iter().find(|c| c.channel == *ch).map(|c| c.label.to_string());
            json!({"channel": ch, "label": label, "volts": v})
        })
        .collect();
    json!({
        "schema": SURVEY_SCHEMA,
        "board": {
            "name": b.name,
            "firmware": b.firmware,
            "protocol": b.protocol,
            "unit_id": format!("{:016x}", b.unit_id),
            "link": link_name,
            "bits": m.bits,
            "vref_volts": m.vref_volts,
            "lsb_volts": m.lsb_volts(),
            "hold_farads": m.hold_farads,
            "hold_tolerance": m.hold_tolerance,
            "switch_ohms": m.switch_ohms,
            "switch_tolerance": m.switch_tolerance,
            "sample_ns": m.sample_ps.iter().map(|&p| f64::from(p) / 1000.0).collect::<Vec<_>>(),
            "conversion_ns": f64::from(m.conversion_ps) / 1000.0,
            "adc_noise_lsb": m.noise_lsb,
            "precharges": precharges,
        },
        "pins": r.pins.iter().map(|p| {
            let mut v = pin_json(p);
            let a = advice.pins.iter().find(|a| a.channel == p.channel);
            v["advice"] = a.map_or(Value::Null, advice_json);
            v
        }).collect::<Vec<_>>(),
        "advice_options": {"resolve_volts": opts.resolve_volts},
        "scan_plan": plan_json(&advice.plan, r),
        "fault": r.fault,
        "totals": {
            "conversions": r.link.conversions,
            "link_bytes_sent": r.link.bytes_sent,
            "link_bytes_received": r.link.bytes_received,
            "bad_frames": r.link.bad_frames,
            "reruns": r.link.reruns,
            "board_seconds": r.board_seconds,
            "wall_seconds": r.wall_seconds,
        },
    })
}

/// `47.2 kΩ (44.1–50.6 kΩ)`, `< 1.60 kΩ`, `> 2.30 GΩ` or `—`.
pub fn interval_text(iv: &Interval, fmt: fn(f64) -> String) -> String {
    match (iv.estimate, iv.low, iv.high) {
        (Some(e), Some(l), Some(h)) => {
            format!("{} ({}–{})", fmt(e), fmt(l).trim_end_matches(char::is_alphabetic).trim_end(), fmt(h))
        }
        (_, None, Some(h)) => format!("< {}", fmt(h)),
        (_, Some(l), None) => format!("> {}", fmt(l)),
        (Some(e), None, None) => fmt(e),
        _ => "—".into(),
    }
}

/// A plain-text table: a header, a rule, and the rows, columns padded to their widest cell.
pub fn table<S: AsRef<str>>(header: &[S], rows: &[Vec<String>]) -> String {
    let mut width: Vec<usize> = header.iter().map(|h| h.as_ref().chars().count()).collect();
    for row in rows {
        for (w, c) in width.iter_mut().zip(row.iter()) {
            *w = (*w).max(c.chars().count());
        }
    }
    let line = |cells: &mut dyn Iterator<Item = &str>| {
        let mut s = String::new();
        for (i, c) in cells.enumerate() {
            s += c;
            if i + 1 < width.len() {
                s += &" ".repeat(width[i] - c.chars().count() + 2);
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
    format!(
        "{} bits, Vref {}, hold {} ±{:.0}%, switch {} ±{:.0}%, sample times {}…{}, 1 LSB = {}",
        m.bits,
        units::volts(m.vref_volts),
        units::farads(m.hold_farads),
        m.hold_tolerance * 100.0,
        units::ohms(m.switch_ohms),
        m.switch_tolerance * 100.0,
        units::ns(f64::from(m.sample_ps[0]) / 1000.0),
        units::ns(f64::from(*m.sample_ps.last().unwrap_or(&0)) / 1000.0),
        units::volts(m.lsb_volts()),
    )
}

/// The human-readable survey, with advice for a sub-LSB signal of none.
pub fn survey_text(r: &SurveyReport, link_name: &str) -> String {
    survey_text_with(r, link_name, &advise(r, &AdviceOptions::default()))
}

/// The human-readable survey with its advice block and scan plan.
pub fn survey_text_with(r: &SurveyReport, link_name: &str, advice: &BoardAdvice) -> String {
    let b = &r.board;
    let m = &r.model;
    let mut out = String::new();
    out += &format!(
        "ohmsight survey — board \"{}\" unit {:016x}, firmware {}, over the {}\n",
        b.name, b.unit_id, b.firmware, link_name
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
                interval_text(&p.source_ohms, units::ohms),
                interval_text(&p.node_farads, units::farads),
                p.source_volts.map_or("—".into(), |v| format!("{v:.4} V")),
                p.noise_lsb_rms.map_or("—".into(), |n| format!("{n:.2} LSB")),
                p.min_sample_ns.map_or("none settles".into(), units::ns),
                p.flags.iter().map(|f| f.as_str()).collect::<Vec<_>>().join(" "),
            ]
        })
        .collect();
    let rows: Vec<Vec<String>> = rows.into_iter().map(Vec::from).collect();
    out += &table(&header, &rows);
    let notes: Vec<String> = r
        .pins
        .iter()
        .filter_map(|p| p.reason.as_ref().map(|why| format!("  ch{} {}: {why}", p.channel, p.verdict.as_str())))
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

fn advice_json(a: &PinAdvice) -> Value {
    json!({
        "sample": a.sample.map(|s| json!({"index": s.index, "sample_ns": s.sample_ns})),
        "settle": a.settle.map(|f| json!({
            "source_ohms": f.source_ohms,
            "buffer_max_ohms": f.buffer_max_ohms,
            "hold_multiple": f.hold_multiple,
            "min_farads": f.min_farads,
            "min_farads_max_rate_hz": f.min_farads_max_rate_hz,
            "suggested_farads": f.suggested_farads,
            "suggested_max_rate_hz": f.suggested_max_rate_hz,
            "suggested_sample_ns": f.suggested_sample_ns,
        })),
        "memory": a.memory.map(|m| json!({
            "worst_shift_lsb": m.worst_shift_lsb,
            "after_dummy_lsb": m.after_dummy_lsb,
            "similar_within_volts": m.similar_within_volts,
        })),
        "averaging": a.averaging.map(|v| json!({
            "resolve_volts": v.resolve_volts,
            "noise_lsb_rms": v.noise_lsb_rms,
            "readings": v.readings,
            "extra_bits": v.extra_bits,
            "seconds": v.seconds,
            "staircase_volts": v.staircase_volts,
            "needs_dither": v.needs_dither,
        })),
        "hum_period_s": a.hum_period_s,
        "note": a.note,
    })
}

fn plan_json(plan: &ScanPlan, r: &SurveyReport) -> Value {
    let label = |ch: u8| r.pins.iter().find(|p| p.channel == ch).map(|p| p.label.clone());
    json!({
        "limit_lsb": 0.5,
        "entries": plan.entries.iter().enumerate().map(|(i, e)| json!({
            "position": i + 1,
            "channel": e.channel,
            "label": label(e.channel),
            "sample_index": e.sample_index,
            "sample_ns": e.sample_ns,
            "dummies": e.dummies,
            "worst_error_lsb": e.worst_error_lsb,
            "error_now_lsb": e.error_now_lsb,
        })).collect::<Vec<_>>(),
        "idle_s": plan.idle_s,
        "idle_for": plan.idle_for,
        "scan_s": plan.scan_s,
        "scan_hz": if plan.scan_s > 0.0 { Value::from(1.0 / plan.scan_s) } else { Value::Null },
        "worst_error_lsb": plan.worst_error_lsb,
        "left_out": plan.left_out.iter().map(|l| json!({"channel": l.channel, "reason": l.reason})).collect::<Vec<_>>(),
    })
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
        if let Some(m) = a.memory {
            out +=
                &format!("    memory: the previous channel moves this reading by up to {:.2} LSB; ", m.worst_shift_lsb);
            if let Some(d) = m.after_dummy_lsb {
                out += &format!("a dummy conversion of this pin first leaves {d:.2} LSB");
                out += if d > 0.5 { " (not enough: fix the settling first), " } else { ", " };
            }
            out += &format!("or convert it after a channel within {} of its level\n", volts(m.similar_within_volts));
        }
        if let Some(v) = a.averaging {
            out += &format!(
                "    averaging: to see {} average {} readings ({:.1} extra bits, {}; noise {:.2} LSB rms); ",
                volts(v.resolve_volts),
                v.readings,
                v.extra_bits,
                si(v.seconds, "s"),
                v.noise_lsb_rms
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
                    format!("{:.2} LSB", e.worst_error_lsb),
                    format!("{:.2} LSB", e.error_now_lsb),
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
            "  one scan takes {} ({}); worst error {:.2} LSB\n",
            si(plan.scan_s, "s"),
            si(1.0 / plan.scan_s, "Hz"),
            plan.worst_error_lsb
        );
    }
    for l in &plan.left_out {
        out += &format!("  left out: ch{} {}\n", l.channel, l.reason);
    }
    out
}
