//! A comparison ([`crate::compare::Document`]) as text for the terminal and as one
//! self-contained HTML page: the per-pin table of changes and, per change, the before and
//! after values with their 95% intervals drawn side by side.

use super::html::{builder, escape, figure, label_style, mesh, svg, Draw, PlotResult, HIGH, LOW, STYLE};
use super::plot_marks::{decade_label, decades};
use crate::compare::{Change, Document, PinComparison, Quantity, Value};
use plotters::prelude::*;
use std::fmt::Write as _;

/// One word for a pin's outcome.
fn outcome(p: &PinComparison) -> &'static str {
    match (p.changed, p.cannot_tell.is_empty()) {
        (true, _) => "changed",
        (false, true) => "no change",
        (false, false) => "cannot tell",
    }
}

/// The closing line: how many pins changed, how many cannot be told.
fn summary(d: &Document) -> String {
    let n = d.pins.len();
    let mut s = if d.changed {
        format!("{} of {n} pin{} changed since the baseline", d.pins_changed, if n == 1 { "" } else { "s" })
    } else {
        format!("no significant change on {n} pin{} since the baseline", if n == 1 { "" } else { "s" })
    };
    if d.pins_cannot_tell > 0 {
        let _ =
            write!(s, "; {} pin{} cannot be told", d.pins_cannot_tell, if d.pins_cannot_tell == 1 { "" } else { "s" });
    }
    s
}

fn run_line(r: &crate::compare::RunRef) -> String {
    format!("run {} started {}{} ({})", r.id, r.started, if r.complete { "" } else { ", incomplete" }, r.from)
}

/// The comparison as text.
pub fn compare_text(d: &Document) -> String {
    let mut out = format!("ohmsight compare — board \"{}\" unit {}\n", d.now.board, d.now.unit_id);
    let _ = writeln!(out, "baseline: {}", run_line(&d.baseline));
    let _ = writeln!(out, "now:      {}", run_line(&d.now));
    if !d.same_unit {
        let _ = writeln!(out, "the baseline is another unit of this board: {}", d.baseline.unit_id);
    }
    let _ = writeln!(out, "rule: {}\n", d.rule);
    let label_w = d.pins.iter().map(|p| crate::units::width(&p.label)).max().unwrap_or(0);
    for p in &d.pins {
        let head = format!("ch{:<3} {}", p.channel, p.label);
        let _ = writeln!(out, "{}  {}", crate::units::pad(&head, label_w + 6), outcome(p));
        for c in &p.changes {
            let _ = writeln!(out, "      {:<10} {} → {}", c.what.label(), c.before.text, c.after.text);
            let _ = writeln!(out, "      {:<10} {}", "", c.meaning);
        }
        for c in &p.cannot_tell {
            let _ = writeln!(out, "      {:<10} {} → {}: cannot tell, {}", c.what.label(), c.before, c.after, c.why);
        }
    }
    let _ = writeln!(out, "\n{}", summary(d));
    out
}

/// Plot width and height, px (three fit in a row of the page).
const W: u32 = 340;
const H: u32 = 240;

/// The y range of a plot of two values: their interval ends (open ends reach the plot's edge),
/// padded; in log for resistances and capacitances.
fn y_range(values: &[&Value], log: bool) -> (f64, f64) {
    let finite: Vec<f64> = values
        .iter()
        .flat_map(|v| [v.low, v.estimate, v.high])
        .flatten()
        .filter(|x| x.is_finite() && (!log || *x > 0.0))
        .collect();
    let lo = finite.iter().copied().fold(f64::INFINITY, f64::min);
    let hi = finite.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    if !lo.is_finite() {
        return if log { (1e-12, 1.0) } else { (0.0, 1.0) };
    }
    if log {
        (lo / 4.0, hi * 4.0)
    } else {
        let pad = ((hi - lo) * 0.25).max(hi.abs().max(lo.abs()) * 0.02).max(1e-6);
        (lo - pad, hi + pad)
    }
}

/// One side's interval as a vertical bar with end ticks (an open end runs to the edge with an
/// arrow head) and its estimate as a dot.
fn draw_side<DB: DrawingBackend>(
    chart: &mut ChartContext<'_, DB, Cartesian2d<impl Ranged<ValueType = f64>, impl Ranged<ValueType = f64>>>,
    x: f64,
    v: &Value,
    range: (f64, f64),
    log: bool,
    colour: RGBColor,
) -> PlotResult
where
    DB::ErrorType: 'static,
{
    let style = ShapeStyle::from(&colour).stroke_width(2);
    let (lo, hi) = (v.low.unwrap_or(range.0).max(range.0), v.high.unwrap_or(range.1).min(range.1));
    if v.low.is_some() || v.high.is_some() {
        chart.draw_series(std::iter::once(PathElement::new(vec![(x, lo), (x, hi)], style)))?;
        for (end, open) in [(lo, v.low.is_none()), (hi, v.high.is_none())] {
            if !open {
                chart.draw_series(std::iter::once(PathElement::new(vec![(x - 0.08, end), (x + 0.08, end)], style)))?;
            }
        }
        // Arrow heads on open ends: the value lies beyond the plot that way.
        for (open, end, sign) in [(v.high.is_none(), hi, 1.0), (v.low.is_none(), lo, -1.0)] {
            if open {
                let back = if log {
                    end * (range.1 / range.0).powf(-0.05 * sign)
                } else {
                    end - 0.05 * sign * (range.1 - range.0)
                };
                chart.draw_series(std::iter::once(PathElement::new(
                    vec![(x - 0.06, back), (x, end), (x + 0.06, back)],
                    style,
                )))?;
            }
        }
    }
    if let Some(e) = v.estimate {
        chart.draw_series(std::iter::once(Circle::new((x, e), 4, colour.filled())))?;
    }
    Ok(())
}

fn change_plot_area(area: &Draw<'_>, c: &Change) -> PlotResult {
    let unit = if c.what == Quantity::Verdict { Quantity::SourceOhms.unit() } else { c.what.unit() };
    let log = matches!(c.what, Quantity::Verdict | Quantity::SourceOhms | Quantity::NodeFarads);
    let range = y_range(&[&c.before, &c.after], log);
    let xs = 0.4..2.6;
    let x_label = |x: &f64| match x.round() as i64 {
        1 => "baseline".to_string(),
        2 => "now".to_string(),
        _ => String::new(),
    };
    let y_label = move |v: &f64| crate::units::si(*v, unit);
    let mut b = builder(area);
    b.x_label_area_size(28).y_label_area_size(64).caption(c.what.label(), label_style(12));
    if log {
        // Decades only, as every log axis of the pages.
        let (lo, hi, ticks) = decades(range.0, range.1);
        let range = (lo, hi);
        let y_label = move |v: &f64| decade_label(*v, unit);
        let mut chart = b.build_cartesian_2d(xs, (lo..hi).log_scale().with_key_points(ticks))?;
        mesh(&mut chart).x_labels(3).x_label_formatter(&x_label).y_label_formatter(&y_label).draw()?;
        draw_side(&mut chart, 1.0, &c.before, range, log, LOW)?;
        draw_side(&mut chart, 2.0, &c.after, range, log, HIGH)?;
    } else {
        let mut chart = b.build_cartesian_2d(xs, range.0..range.1)?;
        mesh(&mut chart).x_labels(3).x_label_formatter(&x_label).y_label_formatter(&y_label).y_labels(5).draw()?;
        draw_side(&mut chart, 1.0, &c.before, range, log, LOW)?;
        draw_side(&mut chart, 2.0, &c.after, range, log, HIGH)?;
    }
    Ok(())
}

/// One change's plot: before and after with their 95% intervals.
fn change_plot(channel: u8, i: usize, c: &Change) -> String {
    let id = format!("pin-{channel}-change-{i}");
    let caption = format!("<b>{}</b>: {}", escape(c.what.label()), escape(&c.meaning));
    figure(&id, svg(W, H, |area| change_plot_area(area, c)), &caption)
}

const EXTRA_STYLE: &str = "
.outcome { font-weight: 600; } .outcome.changed { color: #b33a2a; } .outcome.cannot { color: #b07a12; }
.outcome.same { color: #2f7d4f; }
section.pin figure { width: 340px; }
td.meaning { white-space: normal !important; }
";

/// The comparison as one self-contained HTML page (no script, nothing fetched).
pub fn compare_html(d: &Document) -> String {
    let mut out = String::with_capacity(1 << 16);
    let title = format!("ohmsight compare — {} unit {}", d.now.board, d.now.unit_id);
    let _ = write!(
        out,
        "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n\
         <meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\n<title>{}</title>\n\
         <style>{STYLE}{EXTRA_STYLE}</style>\n</head>\n<body>\n<main>\n",
        escape(&title)
    );
    let _ = writeln!(
        out,
        "<header><h1>{}</h1><p class=\"sub\" id=\"baseline\">baseline: {}</p><p class=\"sub\" id=\"now\">now: {}</p>\
         {}<p class=\"sub\">rule: {}</p></header>",
        escape(&title),
        escape(&run_line(&d.baseline)),
        escape(&run_line(&d.now)),
        if d.same_unit {
            String::new()
        } else {
            format!(
                "<p class=\"note\">The baseline is another unit of this board: {}.</p>",
                escape(&d.baseline.unit_id)
            )
        },
        escape(d.rule)
    );
    out += "<section class=\"board\" id=\"summary\"><h2>Pins</h2>\n<table class=\"pins\">\n<thead><tr>\
            <th>ch</th><th>label</th><th>outcome</th><th>what</th><th>baseline</th><th>now</th><th>likely meaning</th>\
            </tr></thead>\n<tbody>\n";
    for p in &d.pins {
        let class = match outcome(p) {
            "changed" => "changed",
            "cannot tell" => "cannot",
            _ => "same",
        };
        let mut rows: Vec<[String; 4]> = p
            .changes
            .iter()
            .map(|c| [c.what.label().into(), c.before.text.clone(), c.after.text.clone(), c.meaning.clone()])
            .collect();
        rows.extend(
            p.cannot_tell
                .iter()
                .map(|c| [c.what.label().into(), c.before.clone(), c.after.clone(), format!("cannot tell: {}", c.why)]),
        );
        if rows.is_empty() {
            rows.push(["—".into(), String::new(), String::new(), String::new()]);
        }
        let span = rows.len();
        for (i, row) in rows.iter().enumerate() {
            out += "<tr>";
            if i == 0 {
                let link =
                    if p.changed { format!("<a href=\"#pin-{0}\">{0}</a>", p.channel) } else { p.channel.to_string() };
                let _ = write!(
                    out,
                    "<td rowspan=\"{span}\">{link}</td><td class=\"label\" rowspan=\"{span}\">{}</td>\
                     <td rowspan=\"{span}\"><span class=\"outcome {class}\">{}</span></td>",
                    escape(&p.label),
                    outcome(p)
                );
            }
            let _ = writeln!(
                out,
                "<td>{}</td><td>{}</td><td>{}</td><td class=\"meaning\">{}</td></tr>",
                escape(&row[0]),
                escape(&row[1]),
                escape(&row[2]),
                escape(&row[3])
            );
        }
    }
    let _ = writeln!(out, "</tbody></table>\n<p class=\"sub\" id=\"verdict\">{}.</p>\n</section>", escape(&summary(d)));
    for p in d.pins.iter().filter(|p| p.changed) {
        let _ = writeln!(
            out,
            "<section class=\"pin\" id=\"pin-{0}\">\n<h2>ch{0} — {1}</h2>\n<div class=\"plots\">",
            p.channel,
            escape(&p.label)
        );
        for (i, c) in p.changes.iter().enumerate() {
            out += &change_plot(p.channel, i, c);
        }
        out += "</div>\n</section>\n";
    }
    let _ = write!(
        out,
        "<footer id=\"report-end\">Made by ohmsight {}. Baseline on the left (teal), now on the right (copper); \
         bars are 95% intervals, an arrow an open end (a bound).</footer>\n</main>\n</body>\n</html>\n",
        env!("CARGO_PKG_VERSION")
    );
    out
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::render::plot_marks::tests::{assert_decades, si_value};

    #[test]
    fn a_resistance_change_is_plotted_on_decade_ticks() {
        let side = |e: f64| Value {
            verdict: "driven",
            estimate: Some(e),
            low: Some(e * 0.95),
            high: Some(e * 1.05),
            unit: "Ω",
            text: String::new(),
        };
        // A change within a decade: an axis of its own choosing would tick at 10k, 20k, 30k, …
        let c = Change {
            what: Quantity::SourceOhms,
            before: side(33e3),
            after: side(47e3),
            rule: "test",
            meaning: String::new(),
        };
        let svg = svg(W, H, |area| change_plot_area(area, &c));
        let ticks: Vec<f64> =
            svg.split("</text>").filter_map(|t| t.rsplit('>').next()).filter_map(|t| si_value(t.trim(), "Ω")).collect();
        assert_decades("the resistance axis", &ticks);
    }
}
