//! Survey output: the terminal table and the JSON document.

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

/// The survey as one JSON document.
pub fn survey_json(r: &SurveyReport, link_name: &str) -> Value {
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
            "hold_farads": m.hold_farads,
            "switch_ohms": m.switch_ohms,
            "sample_ns": m.sample_ps.iter().map(|&p| f64::from(p) / 1000.0).collect::<Vec<_>>(),
            "conversion_ns": f64::from(m.conversion_ps) / 1000.0,
            "adc_noise_lsb": m.noise_lsb,
            "precharges": precharges,
        },
        "pins": r.pins.iter().map(pin_json).collect::<Vec<_>>(),
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

/// The human-readable survey.
pub fn survey_text(r: &SurveyReport, link_name: &str) -> String {
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
    let mut width = header.map(|h| h.chars().count());
    for row in &rows {
        for (w, c) in width.iter_mut().zip(row.iter()) {
            *w = (*w).max(c.chars().count());
        }
    }
    let line = |cells: &[String]| {
        let mut s = String::new();
        for (i, c) in cells.iter().enumerate() {
            let pad = width[i] - c.chars().count();
            s += c;
            if i + 1 < cells.len() {
                s += &" ".repeat(pad + 2);
            }
        }
        s.trim_end().to_string() + "\n"
    };
    out += &line(&header.map(String::from));
    out += &line(&width.map(|w| "─".repeat(w)));
    for row in &rows {
        out += &line(row);
    }
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
