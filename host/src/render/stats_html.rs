//! `history stats --html`: one self-contained page (inline SVG from `plotters`, no script) with
//! the yield and the table, and per pin and measurement a control chart (every run's value in
//! time order with the limits, the mean and the ±3σ lines) and a histogram against the limits.

use crate::render::html::{
    builder, escape, figure, label_style, legend, mesh, no_data, svg, HUM, INK, LOW, MODEL, PLOT_H, PLOT_W, STYLE,
};
use crate::render::stats_text::METHOD;
use crate::stats::{BoardStats, Measurement, MeasurementStats, PinStats, Stats};
use plotters::prelude::*;
use std::fmt::Write as _;

/// A measurement's values scaled for an axis: (factor to divide by, unit text).
fn axis_unit(m: Measurement, max_abs: f64) -> (f64, String) {
    let (base, prefixed) = match m {
        Measurement::SourceOhms => ("Ω", true),
        Measurement::NodeFarads => ("F", true),
        Measurement::SourceVolts => ("V", false),
        Measurement::NoiseLsbRms => ("LSB rms", false),
        Measurement::MinSampleNs => ("ns", false),
    };
    if !prefixed || max_abs.is_nan() || max_abs <= 0.0 || !max_abs.is_finite() {
        return (1.0, base.into());
    }
    let prefixes = [(1e12, "T"), (1e9, "G"), (1e6, "M"), (1e3, "k"), (1.0, ""), (1e-3, "m"), (1e-6, "µ"), (1e-9, "n")];
    let (scale, p) = prefixes.iter().copied().find(|(s, _)| max_abs >= *s).unwrap_or((1e-12, "p"));
    (scale, format!("{p}{base}"))
}

/// The lowest and highest of the values, the limits and mean ± 3σ, padded by 6%.
fn span(m: &MeasurementStats) -> (f64, f64) {
    let mut xs: Vec<f64> = m.points.iter().map(|p| p.value).collect();
    xs.extend(m.limits.iter().flat_map(|l| [l.low, l.high]).flatten());
    if let (Some(mu), Some(sd)) = (m.mean, m.sd) {
        xs.extend([mu - 3.0 * sd, mu + 3.0 * sd]);
    }
    let lo = xs.iter().copied().fold(f64::INFINITY, f64::min);
    let hi = xs.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    let pad = if hi > lo { (hi - lo) * 0.06 } else { lo.abs().max(1e-30) * 0.05 };
    (lo - pad, hi + pad)
}

/// Value label for an axis spanning `span` (in axis units).
fn tick(span: f64) -> impl Fn(&f64) -> String {
    let digits = if span >= 20.0 {
        0
    } else if span >= 2.0 {
        1
    } else if span >= 0.2 {
        2
    } else {
        3
    };
    move |v: &f64| format!("{v:.digits$}")
}

/// A count or run number: whole ticks labelled, fractional ones left blank.
fn whole(v: &f64) -> String {
    if (v - v.round()).abs() < 1e-6 {
        format!("{v:.0}")
    } else {
        String::new()
    }
}

/// Horizontal (or, in the histogram, vertical) reference lines: (value, name, colour).
fn references(m: &MeasurementStats) -> Vec<(f64, String, RGBColor)> {
    let mut out = Vec::new();
    if let Some(l) = m.limits {
        if let Some(v) = l.low {
            out.push((v, "LSL".to_string(), HUM));
        }
        if let Some(v) = l.high {
            out.push((v, "USL".to_string(), HUM));
        }
    }
    if let Some(mu) = m.mean {
        out.push((mu, "mean".into(), INK));
        if let Some(sd) = m.sd.filter(|s| *s > 0.0) {
            out.push((mu - 3.0 * sd, "−3σ".into(), MODEL));
            out.push((mu + 3.0 * sd, "+3σ".into(), MODEL));
        }
    }
    out
}

fn outside(m: &MeasurementStats, v: f64) -> bool {
    m.limits.is_some_and(|l| l.low.is_some_and(|lo| v < lo) || l.high.is_some_and(|hi| v > hi))
}

/// Why a measurement has no plot.
fn no_values(m: &MeasurementStats) -> String {
    match m.missing {
        0 => "no run has a value for it".into(),
        n => format!("no estimate to plot: the {n} runs of this pin have only a bound or no value for it"),
    }
}

/// Control chart (individuals): every run's value against its run number in time order.
fn control_chart(id: &str, pin: &PinStats, m: &MeasurementStats) -> String {
    let title = format!("{} control chart", m.measurement.key());
    if m.points.is_empty() {
        return no_data(id, &escape(&title), &no_values(m));
    }
    let (lo, hi) = span(m);
    // Room above the data for the legend (about half the plot), so it never hides a point.
    let hi = hi + 1.1 * (hi - lo);
    let (scale, unit) = axis_unit(m.measurement, lo.abs().max(hi.abs()));
    let n = m.points.len();
    let refs = references(m);
    let svg = svg(PLOT_W, PLOT_H, |root| {
        let mut chart = builder(root)
            .caption(format!("ch{} {}", pin.channel, m.measurement.key()), label_style(15))
            .x_label_area_size(40)
            .y_label_area_size(64)
            .build_cartesian_2d(0.5..(n as f64 + 0.5), (lo / scale)..(hi / scale))?;
        mesh(&mut chart)
            .x_desc("run, in time order")
            .y_desc(unit.as_str())
            .x_label_formatter(&whole)
            .y_label_formatter(&tick((hi - lo) / scale))
            .draw()?;
        for &(v, ref name, colour) in &refs {
            let width = if name == "LSL" || name == "USL" { 2 } else { 1 };
            chart
                .draw_series(LineSeries::new(
                    [(0.5, v / scale), (n as f64 + 0.5, v / scale)],
                    colour.stroke_width(width),
                ))?
                .label(format!("{name} {}", m.measurement.format(v)))
                .legend(move |(x, y)| PathElement::new(vec![(x, y), (x + 16, y)], colour.stroke_width(width)));
        }
        let xy: Vec<(f64, f64)> = m.points.iter().enumerate().map(|(i, p)| ((i + 1) as f64, p.value / scale)).collect();
        chart.draw_series(LineSeries::new(xy.iter().copied(), LOW.mix(0.45).stroke_width(1)))?;
        chart.draw_series(
            m.points
                .iter()
                .zip(&xy)
                .map(|(p, &xy)| Circle::new(xy, 3, if outside(m, p.value) { HUM.filled() } else { LOW.filled() })),
        )?;
        legend(&mut chart, SeriesLabelPosition::UpperRight)?;
        Ok(())
    });
    let (first, last) = (&m.points[0].started, &m.points[n - 1].started);
    let caption = format!(
        "<b>{}.</b> {n} runs from {} to {}; red points lie outside the limits. The lines are the limits (LSL, USL), \
         the mean and mean ± 3σ.",
        escape(&title),
        escape(first),
        escape(last)
    );
    figure(id, svg, &caption)
}

/// Histogram of the values with the limits and the mean marked.
fn histogram(id: &str, pin: &PinStats, m: &MeasurementStats) -> String {
    let title = format!("{} histogram", m.measurement.key());
    if m.points.is_empty() {
        return no_data(id, &escape(&title), &no_values(m));
    }
    let values: Vec<f64> = m.points.iter().map(|p| p.value).collect();
    let vmin = values.iter().copied().fold(f64::INFINITY, f64::min);
    let vmax = values.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    // Sturges' rule for the number of bins: ⌈log2 n⌉ + 1.
    let bins = ((values.len() as f64).log2().ceil() as usize + 1).clamp(1, 40);
    let width = if vmax > vmin { (vmax - vmin) / bins as f64 } else { vmin.abs().max(1e-30) * 0.01 };
    let mut counts = vec![0u32; bins];
    for v in &values {
        let i = (((v - vmin) / width) as usize).min(bins - 1);
        counts[i] += 1;
    }
    let (lo, hi) = span(m);
    let (lo, hi) = (lo.min(vmin - width), hi.max(vmin + width * bins as f64 + width));
    let (scale, unit) = axis_unit(m.measurement, lo.abs().max(hi.abs()));
    // Bars in the lower half: the legend takes the upper one.
    let top = f64::from(*counts.iter().max().unwrap_or(&1)) * 2.0;
    let refs: Vec<(f64, String, RGBColor)> =
        references(m).into_iter().filter(|(_, name, _)| !name.ends_with('σ')).collect();
    let svg = svg(PLOT_W, PLOT_H, |root| {
        let mut chart = builder(root)
            .caption(format!("ch{} {}", pin.channel, m.measurement.key()), label_style(15))
            .x_label_area_size(40)
            .y_label_area_size(48)
            .build_cartesian_2d((lo / scale)..(hi / scale), 0.0..top)?;
        mesh(&mut chart)
            .x_desc(unit.as_str())
            .y_desc("runs")
            .x_label_formatter(&tick((hi - lo) / scale))
            .y_label_formatter(&whole)
            .draw()?;
        chart
            .draw_series(counts.iter().enumerate().map(|(i, &k)| {
                let x0 = (vmin + i as f64 * width) / scale;
                let x1 = x0 + width / scale;
                Rectangle::new(
                    [(x0 + 0.04 * (x1 - x0), 0.0), (x1 - 0.04 * (x1 - x0), f64::from(k))],
                    LOW.mix(0.75).filled(),
                )
            }))?
            .label(format!("{} runs", values.len()))
            .legend(|(x, y)| Rectangle::new([(x, y - 4), (x + 14, y + 4)], LOW.mix(0.75).filled()));
        for &(v, ref name, colour) in &refs {
            let width = if name == "mean" { 1 } else { 2 };
            chart
                .draw_series(LineSeries::new([(v / scale, 0.0), (v / scale, top)], colour.stroke_width(width)))?
                .label(format!("{name} {}", m.measurement.format(v)))
                .legend(move |(x, y)| PathElement::new(vec![(x, y), (x + 16, y)], colour.stroke_width(width)));
        }
        legend(&mut chart, SeriesLabelPosition::UpperRight)?;
        Ok(())
    });
    let caption = format!(
        "<b>{}.</b> The values of {} runs in {bins} bins (Sturges' rule), the limits and the mean marked.",
        escape(&title),
        values.len()
    );
    figure(id, svg, &caption)
}

fn cell(v: Option<f64>, m: Measurement) -> String {
    v.map_or("—".into(), |v| escape(&m.format(v)))
}

fn board_section(out: &mut String, bi: usize, b: &BoardStats, with_limits: bool) {
    let _ = writeln!(
        out,
        "<section class=\"board\" id=\"board-{bi}\"><h2>Board “{}”: {} runs, {} units</h2>",
        escape(&b.board),
        b.runs,
        b.units
    );
    match &b.first_pass_yield {
        Some(y) => {
            let _ = writeln!(out, "<p id=\"board-{bi}-yield\"><b>First-pass yield:</b> {}</p>", escape(&y.text()));
            if !b.first_pass_failures.is_empty() {
                out.push_str("<ul>\n");
                for f in &b.first_pass_failures {
                    let _ = writeln!(
                        out,
                        "<li>unit {} (run {}): {}</li>",
                        escape(&f.unit),
                        escape(&f.run),
                        escape(&f.limits.join(", "))
                    );
                }
                out.push_str("</ul>\n");
            }
        }
        None => out.push_str("<p class=\"note\">No limits file given: no Cp, Cpk or first-pass yield.</p>\n"),
    }
    out.push_str(
        "<table class=\"pins\">\n<thead><tr><th>ch</th><th>label</th><th>measurement</th><th>n</th><th>mean</th>\
         <th>σ</th><th>LSL</th><th>USL</th><th>Cp</th><th>Cpk</th><th>pin FPY</th><th>note</th></tr></thead>\n<tbody>\n",
    );
    for p in &b.pins {
        for (row, m) in p.measurements.iter().filter(|m| m.count > 0 || m.limits.is_some()).enumerate() {
            let k = m.measurement;
            let why = m.cpk.why.clone().or_else(|| m.cp.why.as_ref().map(|_| "one-sided: Cpk only".to_string()));
            let _ = writeln!(
                out,
                "<tr><td><a href=\"#board-{bi}-ch{}\">{}</a></td><td class=\"label\">{}</td><td>{}</td><td>{}</td>\
                 <td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td class=\"label\">{}</td></tr>",
                p.channel,
                p.channel,
                escape(&p.label),
                k.key(),
                m.count,
                cell(m.mean, k),
                m.sd.map_or("—".into(), |v| escape(&k.format_spread(v))),
                cell(m.limits.and_then(|l| l.low), k),
                cell(m.limits.and_then(|l| l.high), k),
                m.cp.text(),
                m.cpk.text(),
                match (&p.first_pass_yield, row) {
                    (_, 1..) => String::new(),
                    (Some(y), 0) => escape(&y.text()),
                    (None, 0) => "—".into(),
                },
                if with_limits { escape(&why.unwrap_or_default()) } else { String::new() },
            );
        }
    }
    out.push_str("</tbody></table>\n</section>\n");
    for p in &b.pins {
        let _ = writeln!(
            out,
            "<section class=\"pin\" id=\"board-{bi}-ch{0}\">\n<h2>ch{0} — {1}</h2>\n<div class=\"plots\">",
            p.channel,
            escape(&p.label)
        );
        for m in p.measurements.iter().filter(|m| m.count > 0 || m.limits.is_some()) {
            let id = format!("board-{bi}-ch{}-{}", p.channel, m.measurement.key());
            out.push_str(&control_chart(&format!("{id}-control"), p, m));
            out.push_str(&histogram(&format!("{id}-histogram"), p, m));
        }
        out.push_str("</div>\n</section>\n");
    }
}

/// The statistics as one self-contained HTML page.
pub fn stats_html(s: &Stats, database: &str) -> String {
    let mut out = String::with_capacity(1 << 20);
    let _ = write!(
        out,
        "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n\
         <meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\n<title>ohmsight production history</title>\n\
         <style>{STYLE}</style>\n</head>\n<body>\n<main>\n"
    );
    let limits = match &s.limits {
        Some(l) => format!("limits “{}” ({})", escape(&l.name), escape(&l.file)),
        None => "no limits file".into(),
    };
    let _ = writeln!(
        out,
        "<header><h1>ohmsight production history</h1><p class=\"sub\">{} complete run{} in {}; {} incomplete \
         run{} left out; {limits}</p><p class=\"sub\">{}</p></header>",
        s.runs,
        if s.runs == 1 { "" } else { "s" },
        escape(database),
        s.incomplete_left_out,
        if s.incomplete_left_out == 1 { "" } else { "s" },
        escape(METHOD)
    );
    if s.boards.is_empty() {
        out.push_str("<p class=\"nodata\">No complete runs match: nothing to compute.</p>\n");
    }
    for (bi, b) in s.boards.iter().enumerate() {
        board_section(&mut out, bi, b, s.limits.is_some());
    }
    let _ = write!(
        out,
        "<footer id=\"report-end\">Made by ohmsight {}.</footer>\n</main>\n</body>\n</html>\n",
        env!("CARGO_PKG_VERSION")
    );
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn axis_units_take_an_si_prefix() {
        assert_eq!(axis_unit(Measurement::SourceOhms, 47e3), (1e3, "kΩ".to_string()));
        assert_eq!(axis_unit(Measurement::NodeFarads, 12e-12), (1e-12, "pF".to_string()));
        assert_eq!(axis_unit(Measurement::SourceVolts, 1.4), (1.0, "V".to_string()));
    }
}
