//! `history stats` as text for the terminal: per board the first-pass yield and the units
//! behind its losses, then one row per pin and measurement.

use crate::render::text::table;
use crate::stats::{BoardStats, MeasurementStats, Stats};
use std::fmt::Write as _;

/// What every report says about how its numbers were made.
pub const METHOD: &str = "\
Each complete run is one value (a unit tested twice counts twice), in time order; σ is the sample
standard deviation (n − 1) of all values. Cp = (USL − LSL)/6σ, Cpk = min(USL − μ, μ − LSL)/3σ
(NIST/SEMATECH e-Handbook §6.1.6); a one-sided limit gives Cpk only (CPU or CPL). First-pass yield:
each unit's first complete run, judged like `ohmsight check` (the stored 95% interval must lie
inside the limit; one that straddles it does not pass).
";

/// The statistics as text; `database` names where the runs came from.
pub fn stats_text(s: &Stats, database: &str) -> String {
    let mut out = String::new();
    let _ = writeln!(
        out,
        "{} complete run{} in {database}{}",
        s.runs,
        if s.runs == 1 { "" } else { "s" },
        match s.incomplete_left_out {
            0 => String::new(),
            1 => " (1 incomplete run left out)".into(),
            n => format!(" ({n} incomplete runs left out)"),
        }
    );
    match &s.limits {
        Some(l) => {
            let _ = writeln!(out, "limits: \"{}\" ({})", l.name, l.file);
        }
        None => out
            .push_str("no limits file given (--limits FILE): no Cp, Cpk or first-pass yield, only count, mean and σ\n"),
    }
    if s.boards.is_empty() {
        out.push_str("\nno complete runs match: nothing to compute\n");
        return out;
    }
    for b in &s.boards {
        board_text(&mut out, b, s.limits.is_some());
    }
    out.push('\n');
    out.push_str(METHOD);
    out
}

fn board_text(out: &mut String, b: &BoardStats, with_limits: bool) {
    let _ = writeln!(
        out,
        "\nboard \"{}\": {} run{}, {} unit{}",
        b.board,
        b.runs,
        if b.runs == 1 { "" } else { "s" },
        b.units,
        if b.units == 1 { "" } else { "s" }
    );
    if let Some(y) = &b.first_pass_yield {
        let _ = writeln!(out, "first-pass yield: {}", y.text());
        for f in &b.first_pass_failures {
            let _ = writeln!(out, "  unit {} (run {}): {}", f.unit, f.run, f.limits.join(", "));
        }
    }
    out.push('\n');
    let mut header = vec!["ch", "label", "measurement", "n", "mean", "σ"];
    if with_limits {
        header.extend(["LSL", "USL", "Cp", "Cpk", "pin FPY", "note"]);
    } else {
        header.push("ln: mean, σ");
    }
    let mut rows = Vec::new();
    for p in &b.pins {
        let mut first = true;
        for m in p.measurements.iter().filter(|m| m.count > 0 || m.limits.is_some()) {
            let mut row = vec![
                if first { p.channel.to_string() } else { String::new() },
                if first { p.label.clone() } else { String::new() },
                m.measurement.key().to_string(),
                m.count.to_string(),
                m.mean.map_or("—".into(), |v| m.measurement.format(v)),
                m.sd.map_or("—".into(), |v| m.measurement.format_spread(v)),
            ];
            if with_limits {
                let end = |v: Option<f64>| v.map_or("—".into(), |v| m.measurement.format(v));
                row.extend([
                    end(m.limits.and_then(|l| l.low)),
                    end(m.limits.and_then(|l| l.high)),
                    m.cp.text(),
                    m.cpk.text(),
                    if first { p.first_pass_yield.as_ref().map_or("—".into(), |y| y.text()) } else { String::new() },
                    note(m),
                ]);
            } else {
                row.push(ln_text(m));
            }
            rows.push(row);
            first = false;
        }
    }
    out.push_str(&table(&header, &rows));
}

/// Why an index is missing (Cpk's reason first: it is the one that matters).
fn note(m: &MeasurementStats) -> String {
    match (&m.cp.why, &m.cpk.why) {
        (_, Some(why)) => why.clone(),
        (Some(_), None) => "one-sided: Cpk only".into(),
        (None, None) => String::new(),
    }
}

fn ln_text(m: &MeasurementStats) -> String {
    match (m.ln_mean, m.ln_sd) {
        (Some(a), Some(b)) => format!("{a:.3}, {b:.3}"),
        (Some(a), None) => format!("{a:.3}, —"),
        _ => String::new(),
    }
}
