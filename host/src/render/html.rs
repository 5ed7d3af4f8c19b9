//! The survey as one self-contained HTML page: the board summary, the per-pin table, a
//! board-wide memory heat map, and per pin the plots of the evidence behind its verdict.
//!
//! Everything is inline: the plots are SVG drawn with `plotters` (its SVG backend needs no
//! fonts or system libraries), the style sheet sits in the page, and there is no script, so the
//! file opens offline and can be mailed or archived as it is. Every text that comes from a
//! board or a scenario file is escaped.
//!
//! The fitted curves are the forward model of [`crate::model`] at the fitted parameters; no
//! plot carries physics of its own.

use crate::fit::{profile_rise, FitInput, Interval, CHI2_95_1DOF, LN_CN, LN_RS};
use crate::judge::{Flag, PinReport, SurveyReport, Verdict};
use crate::model::{predict, BoardModel, Event, PinParams};
use crate::noise::{HARMONICS, MAINS_HZ};
#[cfg(test)]
use crate::render::plot_marks::hex;
use crate::render::plot_marks::{decade_label, decades, y_label_area, Key, Overlay, Swatch};
use crate::render::text::{converter_text, interval_text};
use crate::units;
use ohmsight_protocol::analog::volts_to_lsb;
use ohmsight_protocol::{Experiment, Steps};
use plotters::chart::{ChartContext, MeshStyle};
use plotters::coord::ranged1d::ValueFormatter;
use plotters::coord::Shift;
use plotters::prelude::*;
use plotters::style::text_anchor::{HPos, Pos, VPos};
use std::error::Error;
use std::fmt::Write as _;

/// Width of one plot, px (two fit side by side in a 1200 px window).
pub(crate) const PLOT_W: u32 = 540;
/// Height of one plot, px.
pub(crate) const PLOT_H: u32 = 300;
/// Half-height of the zoomed settling panel, LSB.
const ZOOM_LSB: f64 = 4.0;
/// Points of a fitted curve.
const CURVE_POINTS: usize = 48;

// Our palette: ink, a teal for readings after the low precharge, a copper for those after the
// high one, a plum for the model, a sage band for the ½ LSB tolerance, a crimson for hum.
pub(crate) const INK: RGBColor = RGBColor(0x24, 0x2e, 0x38);
pub(crate) const GRID: RGBColor = RGBColor(0xe4, 0xe1, 0xda);
pub(crate) const LOW: RGBColor = RGBColor(0x0e, 0x7c, 0x86);
pub(crate) const HIGH: RGBColor = RGBColor(0xc8, 0x64, 0x1a);
pub(crate) const MODEL: RGBColor = RGBColor(0x4b, 0x2c, 0x6e);
const BAND: RGBColor = RGBColor(0x8c, 0xc9, 0x9b);
pub(crate) const HUM: RGBColor = RGBColor(0xc2, 0x1f, 0x4a);
pub(crate) const PAPER: RGBColor = RGBColor(0xff, 0xfe, 0xfb);
/// Heat-map ends: reading pulled down (slate blue) and pulled up (brick red).
const COLD: RGBColor = RGBColor(0x2f, 0x5d, 0x9b);
const HOT: RGBColor = RGBColor(0xb3, 0x3a, 0x2a);

const FONT: &str = "sans-serif";

pub(crate) type Draw<'a> = DrawingArea<SVGBackend<'a>, Shift>;
pub(crate) type PlotResult = Result<(), Box<dyn Error>>;

/// `text` with `& < > " '` replaced by entities: safe inside HTML text and attribute values.
pub fn escape(text: &str) -> String {
    let mut out = String::with_capacity(text.len());
    for c in text.chars() {
        match c {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '"' => out.push_str("&quot;"),
            '\'' => out.push_str("&#39;"),
            c => out.push(c),
        }
    }
    out
}

/// Renders one SVG of `w`×`h` px; a failure becomes a note in the page instead of a plot.
pub(crate) fn svg(w: u32, h: u32, draw: impl FnOnce(&Draw<'_>) -> PlotResult) -> String {
    svg_with(w, h, |root, _| draw(root))
}

/// [`svg`] with marks of our own ([`Overlay`]) drawn over the plot.
fn svg_with(w: u32, h: u32, draw: impl FnOnce(&Draw<'_>, &mut Overlay) -> PlotResult) -> String {
    let mut buf = String::new();
    let mut overlay = Overlay::default();
    let result = {
        let root = SVGBackend::with_string(&mut buf, (w, h)).into_drawing_area();
        root.fill(&PAPER)
            .map_err(|e| e.into())
            .and_then(|_| draw(&root, &mut overlay))
            .and_then(|_| Ok(root.present()?))
    };
    match result {
        Ok(()) => {
            let end = buf.rfind("</svg>").unwrap_or(buf.len());
            buf.insert_str(end, &overlay.into_svg());
            buf
        }
        Err(e) => format!("<p class=\"nodata\">this plot could not be drawn: {}</p>", escape(&e.to_string())),
    }
}

pub(crate) fn figure(id: &str, svg: String, caption: &str) -> String {
    format!("<figure id=\"{id}\">{svg}<figcaption>{caption}</figcaption></figure>\n")
}

pub(crate) fn no_data(id: &str, title: &str, why: &str) -> String {
    format!("<figure id=\"{id}\" class=\"empty\"><p class=\"nodata\"><b>{title}</b>: {why}</p></figure>\n")
}

/// Compact number for cells and captions: `0.42`, `12.3`, `418`, `3.1k`.
fn short(v: f64) -> String {
    let a = v.abs();
    if a >= 9999.5 {
        format!("{:.1}k", v / 1000.0)
    } else if a >= 99.95 {
        format!("{v:.0}")
    } else if a >= 9.995 {
        format!("{v:.1}")
    } else {
        format!("{v:.2}")
    }
}

/// A label formatter for an axis spanning `span`: as many decimals as its ticks need.
fn axis_label(span: f64) -> impl Fn(&f64) -> String {
    let digits = if span >= 20.0 {
        0
    } else if span >= 2.0 {
        1
    } else {
        2
    };
    move |v: &f64| format!("{v:.digits$}")
}

/// `n` points from `a` to `b`, evenly spaced in log.
fn log_space(a: f64, b: f64, n: usize) -> Vec<f64> {
    let (la, lb) = (a.ln(), b.ln());
    (0..n).map(|i| (la + (lb - la) * i as f64 / (n - 1).max(1) as f64).exp()).collect()
}

/// The level a pin settles to, LSB: the fitted network at rest, else what the survey found;
/// none for a floating node (it keeps whatever charge it is given).
fn settled_lsb(m: &BoardModel, p: &PinReport) -> Option<f64> {
    if p.verdict == Verdict::Floating {
        return None;
    }
    let volts = match &p.fit {
        Some(f) => f.params.network().rest_volts().unwrap_or(f.params.source_volts),
        None => p.source_volts.or(p.noise.as_ref().map(|n| m.code_volts(n.mean_lsb)))?,
    };
    Some(volts_to_lsb(volts, m.vref_volts, m.bits).clamp(0.0, m.max_code()))
}

/// One observed cell: where it sits, its mean and standard error, and the fitted model's
/// prediction for the same cell of the same run.
#[derive(Debug, Clone, Copy)]
struct Point {
    x: f64,
    mean: f64,
    se: f64,
    precharge: u8,
    model: Option<f64>,
    /// The cell of a run of back-to-back pairs (period sweep with period 0).
    back_to_back: bool,
}

/// The fitted model's mean code for every observed cell of the pin's history, event by event
/// (empty entries for events the model cannot run or that kept no cells).
fn model_as_run(m: &BoardModel, p: &PinReport) -> Vec<Vec<f64>> {
    let Some(fit) = &p.fit else { return vec![Vec::new(); p.events.len()] };
    let mut flat = Vec::new();
    predict(m, &fit.params, &p.events, &mut flat);
    let mut at = 0;
    p.events
        .iter()
        .map(|ev| match (&ev.cells, Steps::new(&ev.experiment, m.timing())) {
            (Some(_), Ok(steps)) => {
                let n = usize::from(steps.cells());
                let v = flat.get(at..at + n).map(<[f64]>::to_vec).unwrap_or_default();
                at += n;
                v
            }
            _ => Vec::new(),
        })
        .collect()
}

fn precharge_points(m: &BoardModel, p: &PinReport, model: &[Vec<f64>]) -> Vec<Point> {
    let mut pts = Vec::new();
    for (ev, pred) in p.events.iter().zip(model) {
        let (Experiment::PrechargeSweep { precharges, samples, .. }, Some(cells)) = (&ev.experiment, &ev.cells) else {
            continue;
        };
        for (i, c) in cells.iter().enumerate() {
            let (Some(&s), Some(&pre)) = (samples.get(i / precharges.len()), precharges.get(i % precharges.len()))
            else {
                continue;
            };
            pts.push(Point {
                x: m.sample_s(usize::from(s)),
                mean: c.mean,
                se: (c.variance / f64::from(c.count.max(1))).sqrt(),
                precharge: pre,
                model: pred.get(i).copied(),
                back_to_back: false,
            });
        }
    }
    pts
}

/// Cells of the period sweeps; runs of back-to-back pairs only where the pin had no sweep
/// (they are its only droop evidence then; next to a sweep they are screening runs at the
/// shortest sample time, whose readings are not settled).
fn period_points(m: &BoardModel, p: &PinReport, model: &[Vec<f64>]) -> Vec<Point> {
    let pts = period_cells(m, p, model);
    if pts.iter().any(|q| !q.back_to_back) {
        pts.into_iter().filter(|q| !q.back_to_back).collect()
    } else {
        pts
    }
}

fn period_cells(m: &BoardModel, p: &PinReport, model: &[Vec<f64>]) -> Vec<Point> {
    let mut pts = Vec::new();
    for (ev, pred) in p.events.iter().zip(model) {
        let (Experiment::PeriodSweep { precharge, precharge_sample, sample, periods_ns, .. }, Some(cells)) =
            (&ev.experiment, &ev.cells)
        else {
            continue;
        };
        let pair_s = (m.timing().busy_ps(*precharge_sample) + m.timing().busy_ps(*sample)) as f64 * 1e-12;
        for (i, (c, &period)) in cells.iter().zip(periods_ns.iter()).enumerate() {
            pts.push(Point {
                x: (f64::from(period) * 1e-9).max(pair_s),
                mean: c.mean,
                se: (c.variance / f64::from(c.count.max(1))).sqrt(),
                precharge: *precharge,
                model: pred.get(i).copied(),
                back_to_back: period == 0,
            });
        }
    }
    pts
}

/// The fitted model's curve through one run of the pin's history, with one setting varied:
/// for each value on the grid, the run is replayed after the same history with the nearest
/// of its settings replaced by that value (`vary` builds the varied run and the board table
/// it needs, and says which position it replaced), so the curve passes through the model's
/// values for the cells as run and carries the node's state as the experiments left it.
/// Returns, per grid value, the predicted cells of the varied position (one per group).
fn model_curve_as_run(
    params: &PinParams,
    events: &[Event],
    run: usize,
    grid: &[f64],
    vary: impl Fn(&Experiment, f64) -> Option<(BoardModel, Experiment, usize)>,
) -> Vec<(f64, Vec<f64>)> {
    let mut history: Vec<Event> = events[..=run].iter().map(|e| Event { cells: None, ..e.clone() }).collect();
    let mut out = Vec::new();
    let mut curve = Vec::new();
    for &x in grid {
        let Some((board, exp, pos)) = vary(&events[run].experiment, x) else { continue };
        let last = history.len() - 1;
        history[last].experiment = exp;
        history[last].cells = Some(Vec::new());
        predict(&board, params, &history, &mut out);
        curve.push((x, out.clone(), pos));
    }
    curve
        .into_iter()
        .map(|(x, cells, pos)| {
            let groups = cells.len() / period_or_sample_count(&events[run].experiment).max(1);
            (x, cells.iter().skip(pos * groups).take(groups).copied().collect())
        })
        .collect()
}

/// How many sample times (precharge sweep) or periods (period sweep) a run steps through.
fn period_or_sample_count(exp: &Experiment) -> usize {
    match exp {
        Experiment::PrechargeSweep { samples, .. } => samples.len(),
        Experiment::PeriodSweep { periods_ns, .. } => periods_ns.len(),
        _ => 1,
    }
}

/// Index of the value nearest to `x` in log.
fn nearest_log(values: impl Iterator<Item = f64>, x: f64) -> Option<usize> {
    values
        .enumerate()
        .map(|(i, v)| (i, (v.max(1e-15) / x).ln().abs()))
        .min_by(|a, b| a.1.total_cmp(&b.1))
        .map(|(i, _)| i)
}

/// A precharge sweep with its nearest sample time replaced by `sample_s` (appended to the
/// board's table).
fn vary_sample(m: &BoardModel, exp: &Experiment, sample_s: f64) -> Option<(BoardModel, Experiment, usize)> {
    let Experiment::PrechargeSweep { samples, .. } = exp else { return None };
    let pos = nearest_log(samples.iter().map(|&i| m.sample_s(usize::from(i))), sample_s)?;
    let mut board = m.clone();
    board.sample_ps.push((sample_s * 1e12).round().clamp(1.0, f64::from(u32::MAX)) as u32);
    let new_index = u8::try_from(board.sample_ps.len() - 1).ok()?;
    let mut exp = exp.clone();
    if let Experiment::PrechargeSweep { samples, .. } = &mut exp {
        samples[pos] = new_index;
    }
    Some((board, exp, pos))
}

/// A period sweep with its nearest period replaced by `period_s`.
fn vary_period(m: &BoardModel, exp: &Experiment, period_s: f64) -> Option<(BoardModel, Experiment, usize)> {
    let Experiment::PeriodSweep { periods_ns, .. } = exp else { return None };
    let pos = nearest_log(periods_ns.iter().map(|&p| f64::from(p) * 1e-9), period_s)?;
    let mut exp = exp.clone();
    if let Experiment::PeriodSweep { periods_ns, .. } = &mut exp {
        periods_ns[pos] = (period_s * 1e9).round().clamp(0.0, f64::from(u32::MAX)) as u32;
    }
    Some((m.clone(), exp, pos))
}

fn precharge_colour(m: &BoardModel, ch: u8) -> RGBColor {
    let mid = m.vref_volts / 2.0;
    if m.precharge_volts.get(&ch).copied().unwrap_or(mid) < mid {
        LOW
    } else {
        HIGH
    }
}

fn precharge_name(m: &BoardModel, r: &SurveyReport, ch: u8) -> String {
    let v = m.precharge_volts.get(&ch).copied().unwrap_or(f64::NAN);
    let label = r.board.channels.iter().find(|c| c.channel == ch).map(|c| c.label.to_string()).unwrap_or_default();
    if label.is_empty() {
        format!("after ch{ch} ({})", units::volts(v))
    } else {
        format!("after {label}")
    }
}

/// Splits a curve into runs of points inside `lo..=hi` (a line leaving the panel is cut, not
/// pressed against its edge).
fn inside_runs(pts: &[(f64, f64)], lo: f64, hi: f64) -> Vec<Vec<(f64, f64)>> {
    let mut runs: Vec<Vec<(f64, f64)>> = Vec::new();
    let mut cur = Vec::new();
    for &(x, y) in pts {
        if y.is_finite() && y >= lo && y <= hi {
            cur.push((x, y));
        } else if !cur.is_empty() {
            runs.push(std::mem::take(&mut cur));
        }
    }
    if !cur.is_empty() {
        runs.push(cur);
    }
    runs
}

/// Text of `px` pixels (plotters' SVG backend writes a size 1.24 times smaller than it is given).
pub(crate) fn label_style(px: u32) -> TextStyle<'static> {
    (FONT, f64::from(px) * 1.24).into_font().color(&INK)
}

/// A chart in our layout: margins and room for the axis labels.
pub(crate) fn builder<'a, 'b>(area: &'a Draw<'b>) -> ChartBuilder<'a, 'b, SVGBackend<'b>> {
    let mut b = ChartBuilder::on(area);
    b.margin(8).margin_right(16);
    b
}

/// The mesh in our style: a light grid, small labels; the caller adds descriptions and draws.
pub(crate) fn mesh<'a, 'b, XT, YT, X, Y>(
    chart: &'b mut ChartContext<'a, SVGBackend<'a>, Cartesian2d<X, Y>>,
) -> MeshStyle<'a, 'b, X, Y, SVGBackend<'a>>
where
    X: Ranged<ValueType = XT> + ValueFormatter<XT>,
    Y: Ranged<ValueType = YT> + ValueFormatter<YT>,
{
    let mut m = chart.configure_mesh();
    m.light_line_style(GRID.mix(0.0))
        .bold_line_style(GRID)
        .label_style(label_style(11))
        .axis_desc_style(label_style(12));
    m
}

/// The legend box in our style.
pub(crate) fn legend<'a, X: Ranged, Y: Ranged>(
    chart: &mut ChartContext<'a, SVGBackend<'a>, Cartesian2d<X, Y>>,
    position: SeriesLabelPosition,
) -> PlotResult {
    chart
        .configure_series_labels()
        .position(position)
        .label_font(label_style(11))
        .background_style(PAPER.mix(0.85))
        .border_style(GRID)
        .draw()?;
    Ok(())
}

/// Precharge sweep: readings against sample time with the fitted curve (top) and the
/// deviation from the settled level zoomed to a few LSB with the ½ LSB band (bottom).
fn precharge_plot(r: &SurveyReport, p: &PinReport, model: &[Vec<f64>]) -> String {
    let m = &r.model;
    let id = format!("pin-{}-precharge", p.channel);
    let title = "Precharge sweep";
    let pts = precharge_points(m, p, model);
    if pts.is_empty() {
        return no_data(&id, title, "no precharge sweep of this pin came back");
    }
    let settled = settled_lsb(m, p);
    let t_lo = m.sample_times().into_iter().fold(f64::INFINITY, f64::min) / 1.4;
    let t_hi = m.sample_times().into_iter().fold(0.0, f64::max) * 1.4;
    let mut pres: Vec<u8> = pts.iter().map(|q| q.precharge).collect();
    pres.sort_unstable();
    pres.dedup();
    // The fitted model through the last (most detailed) sweep, its sample time varied.
    let mut curves: Vec<(u8, Vec<(f64, f64)>)> = Vec::new();
    let last_sweep =
        p.events.iter().rposition(|e| e.cells.is_some() && matches!(e.experiment, Experiment::PrechargeSweep { .. }));
    if let (Some(fit), Some(run)) = (&p.fit, last_sweep) {
        if let Experiment::PrechargeSweep { precharges, .. } = &p.events[run].experiment {
            let grid = log_space(m.sample_s(0), m.sample_s(m.sample_ps.len() - 1), CURVE_POINTS);
            let points = model_curve_as_run(&fit.params, &p.events, run, &grid, |e, t| vary_sample(m, e, t));
            for (k, &pre) in precharges.iter().enumerate() {
                curves.push((pre, points.iter().filter_map(|(t, ys)| ys.get(k).map(|&y| (*t, y))).collect()));
            }
        }
    }
    let (mut y_lo, mut y_hi) = (f64::INFINITY, f64::NEG_INFINITY);
    for y in pts.iter().map(|q| q.mean).chain(curves.iter().flat_map(|(_, c)| c.iter().map(|q| q.1))).chain(settled) {
        y_lo = y_lo.min(y);
        y_hi = y_hi.max(y);
    }
    let pad = ((y_hi - y_lo) * 0.08).max(2.0);
    let (y_lo, y_hi) = (y_lo - pad, y_hi + pad);
    let y_fmt = axis_label(y_hi - y_lo);
    let y_area = y_label_area([y_fmt(&y_lo), y_fmt(&y_hi), "-4".into()], 58);
    let (t_lo, t_hi, t_ticks) = decades(t_lo, t_hi);
    let times = m.sample_times();
    let mut key = Key::new(PLOT_W);
    for &pre in &pres {
        key.add(Swatch::Dot(precharge_colour(m, pre)), precharge_name(m, r, pre));
    }
    if p.fit.is_some() {
        key.add(Swatch::Cross(MODEL), "fitted model, as run");
    }
    if !curves.is_empty() {
        key.add(Swatch::Line(INK, 2), "fitted model, sample time varied");
    }
    key.add(Swatch::Tick(MODEL), "selectable sample time");
    let plots_h = if settled.is_some() { PLOT_H + 150 } else { PLOT_H };
    let svg = svg_with(PLOT_W, plots_h + key.height(), |root, marks| {
        let (plots, band) = root.split_vertically(plots_h);
        let (top, bottom) = plots.split_vertically(if settled.is_some() { PLOT_H - 20 } else { PLOT_H });
        let mut chart = builder(&top)
            .caption("readings vs sample time", label_style(15))
            .x_label_area_size(28)
            .y_label_area_size(y_area)
            .build_cartesian_2d((t_lo..t_hi).log_scale().with_key_points(t_ticks.clone()), y_lo..y_hi)?;
        mesh(&mut chart)
            .x_label_formatter(&|v| decade_label(*v, "s"))
            .y_desc("mean code, LSB")
            .y_label_formatter(&y_fmt)
            .draw()?;
        for (pre, c) in &curves {
            let colour = precharge_colour(m, *pre);
            chart.draw_series(LineSeries::new(c.iter().copied(), colour.mix(0.9).stroke_width(2)))?;
        }
        if let Some(s) = settled {
            chart.draw_series(LineSeries::new([(t_lo, s), (t_hi, s)], MODEL.mix(0.5).stroke_width(1)))?;
        }
        for &pre in &pres {
            let colour = precharge_colour(m, pre);
            chart.draw_series(
                pts.iter().filter(|q| q.precharge == pre).map(|q| Circle::new((q.x, q.mean), 3, colour.filled())),
            )?;
        }
        chart
            .draw_series(pts.iter().filter_map(|q| q.model.map(|y| Cross::new((q.x, y), 4, MODEL.stroke_width(1)))))?;
        marks.plot_area(&chart);
        marks.sample_times(&chart, &times, MODEL);
        marks.key(&key, &band);

        // Zoom: reading minus settled level, with the ½ LSB band.
        let Some(s) = settled else { return Ok(()) };
        let mut zoom = builder(&bottom)
            .x_label_area_size(40)
            .y_label_area_size(y_area)
            .build_cartesian_2d((t_lo..t_hi).log_scale().with_key_points(t_ticks.clone()), -ZOOM_LSB..ZOOM_LSB)?;
        marks.plot_area(&zoom);
        marks.sample_times(&zoom, &times, MODEL);
        mesh(&mut zoom)
            .x_label_formatter(&|v| decade_label(*v, "s"))
            .x_desc("sample time")
            .y_desc("minus settled, LSB")
            .y_label_formatter(&|v| format!("{v:.0}"))
            .y_labels(5)
            .draw()?;
        zoom.draw_series([Rectangle::new([(t_lo, -0.5), (t_hi, 0.5)], BAND.mix(0.45).filled())])?;
        if let Some(ns) = p.min_sample_ns {
            let t = ns * 1e-9;
            zoom.draw_series(LineSeries::new([(t, -ZOOM_LSB), (t, ZOOM_LSB)], MODEL.mix(0.6).stroke_width(1)))?;
            zoom.draw_series([Text::new(
                format!("min sample {}", units::ns(ns)),
                (t * 1.08, ZOOM_LSB * 0.92),
                label_style(11),
            )])?;
        }
        for (pre, c) in &curves {
            let colour = precharge_colour(m, *pre);
            let dev: Vec<(f64, f64)> = c.iter().map(|&(x, y)| (x, y - s)).collect();
            for run in inside_runs(&dev, -ZOOM_LSB, ZOOM_LSB) {
                zoom.draw_series(LineSeries::new(run, colour.mix(0.9).stroke_width(2)))?;
            }
        }
        for q in &pts {
            let colour = precharge_colour(m, q.precharge);
            let d = q.mean - s;
            if d.abs() <= ZOOM_LSB {
                let e = 2.0 * q.se;
                zoom.draw_series(LineSeries::new(
                    [(q.x, (d - e).max(-ZOOM_LSB)), (q.x, (d + e).min(ZOOM_LSB))],
                    colour.stroke_width(1),
                ))?;
                zoom.draw_series([Circle::new((q.x, d), 3, colour.filled())])?;
                if let Some(y) = q.model.map(|y| y - s).filter(|y| y.abs() <= ZOOM_LSB) {
                    zoom.draw_series([Cross::new((q.x, y), 4, MODEL.stroke_width(1))])?;
                }
            } else {
                // Off the panel: a hollow marker at the edge it left by.
                let y = d.clamp(-ZOOM_LSB * 0.96, ZOOM_LSB * 0.96);
                zoom.draw_series([TriangleMarker::new((q.x, y), 4, colour.stroke_width(1))])?;
            }
        }
        Ok(())
    });
    let zoom = settled.map_or(" A floating node has no settled level to zoom in on.".into(), |s| {
        format!(
            " The lower panel shows the same readings minus the settled level ({} LSB) with ±2 standard \
             errors (triangles: off the panel) and the ±½ LSB band.",
            short(s)
        )
    });
    let model = if p.fit.is_some() {
        " Crosses: the fitted model for the cells as run; lines: the most detailed sweep replayed with \
         its nearest sample time varied."
    } else {
        " No fit was made for this pin."
    };
    let caption = format!(
        "<b>{title}.</b> Each dot is the mean of one cell (a sample time after a precharge \
         conversion).{model}{zoom}"
    );
    figure(&id, svg, &caption)
}

/// Period sweep: the mean reading minus the settled level against the pair period, the
/// fitted model's curve and its values for the cells as run.
fn period_plot(r: &SurveyReport, p: &PinReport, model: &[Vec<f64>]) -> String {
    let m = &r.model;
    let id = format!("pin-{}-period", p.channel);
    let title = "Period sweep";
    let pts = period_points(m, p, model);
    if pts.is_empty() {
        let why = if p.verdict == Verdict::AtRail {
            "the pin reads at a rail: no period sweep was needed"
        } else {
            "no period sweep of this pin came back"
        };
        return no_data(&id, title, why);
    }
    // Readings relative to the settled level where there is one (a floating node has none).
    let settled = settled_lsb(m, p);
    let s = settled.unwrap_or(0.0);
    // The fitted model through every swept run (not the back-to-back ones), period varied.
    let mut curves: Vec<(u8, Vec<(f64, f64)>)> = Vec::new();
    if let Some(fit) = &p.fit {
        for (run, ev) in p.events.iter().enumerate() {
            let Experiment::PeriodSweep { precharge, precharge_sample, sample, periods_ns, .. } = &ev.experiment else {
                continue;
            };
            if ev.cells.is_none() || periods_ns.iter().all(|&q| q == 0) {
                continue;
            }
            let pair_s = (m.timing().busy_ps(*precharge_sample) + m.timing().busy_ps(*sample)) as f64 * 1e-12;
            let hi = f64::from(periods_ns.iter().copied().max().unwrap_or(0)) * 1e-9;
            let grid = log_space(pair_s, hi.max(pair_s * 2.0), CURVE_POINTS);
            let points = model_curve_as_run(&fit.params, &p.events, run, &grid, |e, q| vary_period(m, e, q));
            curves.push((*precharge, points.iter().filter_map(|(q, ys)| ys.first().map(|&y| (*q, y - s))).collect()));
        }
    }
    let x_lo = pts.iter().map(|q| q.x).fold(f64::INFINITY, f64::min) / 1.5;
    let x_hi = pts.iter().map(|q| q.x).fold(0.0, f64::max) * 1.5;
    let (mut y_lo, mut y_hi) = if settled.is_some() { (-1.0f64, 1.0f64) } else { (f64::INFINITY, f64::NEG_INFINITY) };
    for y in pts
        .iter()
        .flat_map(|q| [q.mean - s - 2.0 * q.se, q.mean - s + 2.0 * q.se])
        .chain(curves.iter().flat_map(|(_, c)| c.iter().map(|q| q.1)))
    {
        if y.is_finite() {
            y_lo = y_lo.min(y);
            y_hi = y_hi.max(y);
        }
    }
    let pad = ((y_hi - y_lo) * 0.08).max(1.0);
    let (y_lo, y_hi) = (y_lo - pad, y_hi + pad);
    let y_fmt = axis_label(y_hi - y_lo);
    let y_area = y_label_area([y_fmt(&y_lo), y_fmt(&y_hi)], 58);
    let (x_lo, x_hi, x_ticks) = decades(x_lo, x_hi);
    let mut pres: Vec<u8> = pts.iter().map(|q| q.precharge).collect();
    pres.sort_unstable();
    pres.dedup();
    let any_b2b = pts.iter().any(|q| q.back_to_back);
    let mut key = Key::new(PLOT_W);
    for &pre in &pres {
        key.add(Swatch::Dot(precharge_colour(m, pre)), precharge_name(m, r, pre));
    }
    key.add(Swatch::Cross(MODEL), "fitted model, as run");
    if !curves.is_empty() {
        key.add(Swatch::Line(INK, 2), "fitted model, period varied");
    }
    if any_b2b {
        key.add(Swatch::Triangle(INK), "back-to-back run");
    }
    let svg = svg_with(PLOT_W, PLOT_H + key.height(), |root, marks| {
        let (plot, band) = root.split_vertically(PLOT_H);
        let mut chart = builder(&plot)
            .caption("droop vs pair period", label_style(15))
            .x_label_area_size(40)
            .y_label_area_size(y_area)
            .build_cartesian_2d((x_lo..x_hi).log_scale().with_key_points(x_ticks.clone()), y_lo..y_hi)?;
        mesh(&mut chart)
            .x_label_formatter(&|v| decade_label(*v, "s"))
            .x_desc("period of [precharge, pin] pairs")
            .y_desc(if settled.is_some() { "minus settled, LSB" } else { "mean code, LSB" })
            .y_label_formatter(&y_fmt)
            .draw()?;
        if settled.is_some() {
            chart.draw_series([Rectangle::new([(x_lo, -0.5), (x_hi, 0.5)], BAND.mix(0.45).filled())])?;
        }
        for (pre, c) in &curves {
            let colour = precharge_colour(m, *pre);
            chart
                .draw_series(LineSeries::new(c.iter().copied().filter(|q| q.1.is_finite()), colour.stroke_width(2)))?;
        }
        for &pre in &pres {
            let colour = precharge_colour(m, pre);
            for q in pts.iter().filter(|q| q.precharge == pre) {
                let (d, e) = (q.mean - s, 2.0 * q.se);
                chart.draw_series(LineSeries::new([(q.x, d - e), (q.x, d + e)], colour.stroke_width(1)))?;
            }
            chart.draw_series(
                pts.iter()
                    .filter(|q| q.precharge == pre && !q.back_to_back)
                    .map(|q| Circle::new((q.x, q.mean - s), 3, colour.filled())),
            )?;
            chart.draw_series(
                pts.iter()
                    .filter(|q| q.precharge == pre && q.back_to_back)
                    .map(|q| TriangleMarker::new((q.x, q.mean - s), 5, colour.filled())),
            )?;
        }
        chart.draw_series(
            pts.iter().filter_map(|q| q.model.map(|y| Cross::new((q.x, y - s), 4, MODEL.stroke_width(1)))),
        )?;
        marks.plot_area(&chart);
        marks.key(&key, &band);
        Ok(())
    });
    let level = settled.map_or("the mean reading (a floating node has no settled level)".into(), |s| {
        format!("the reading minus the settled level ({} LSB; band: ±½ LSB)", short(s))
    });
    let caption = format!(
        "<b>{title}.</b> Pairs of [precharge, pin] conversions repeated at each period: {level}, ±2 \
         standard errors. A source that cannot refill the node between pairs droops toward the \
         precharge at short periods. Crosses: the fitted model for the cells as run; lines: the same \
         run with its nearest period varied (where a fit was made)."
    );
    figure(&id, svg, &caption)
}

/// Histogram of the noise record's codes with the converter's own floor for comparison.
fn histogram_plot(r: &SurveyReport, p: &PinReport) -> String {
    let m = &r.model;
    let id = format!("pin-{}-histogram", p.channel);
    let title = "Noise histogram";
    let (Some(n), false) = (&p.noise, p.noise_codes.is_empty()) else {
        return no_data(&id, title, noise_missing(p));
    };
    let codes = &p.noise_codes;
    let lo = f64::from(*codes.iter().min().unwrap_or(&0));
    let hi = f64::from(*codes.iter().max().unwrap_or(&0));
    let width = ((hi - lo + 1.0) / 60.0).ceil().max(1.0);
    let bins = ((hi - lo + 1.0) / width).ceil() as usize;
    let mut counts = vec![0u32; bins.max(1)];
    for &c in codes {
        let i = ((f64::from(c) - lo) / width) as usize;
        let last = counts.len() - 1;
        counts[i.min(last)] += 1;
    }
    let floor_sigma = m.variance_floor_lsb2().sqrt();
    // The floor curve whole: out to 4.5 σ either side of the mean, and its peak inside the range.
    let reach = (4.5 * floor_sigma).max(4.0);
    let x_lo = (lo - 0.5).min(n.mean_lsb - reach);
    let x_hi = (lo - 0.5 + width * counts.len() as f64).max(n.mean_lsb + reach);
    let total = codes.len() as f64;
    let gauss = |x: f64| {
        total * width * (-(x - n.mean_lsb).powi(2) / (2.0 * floor_sigma * floor_sigma)).exp()
            / (floor_sigma * (2.0 * std::f64::consts::PI).sqrt())
    };
    let tallest = f64::from(*counts.iter().max().unwrap_or(&1)).max(gauss(n.mean_lsb));
    let y_hi = tallest * 1.12;
    let mut xs: Vec<f64> = (0..=200).map(|i| x_lo + (x_hi - x_lo) * f64::from(i) / 200.0).collect();
    xs.push(n.mean_lsb);
    xs.sort_by(f64::total_cmp);
    let floor_curve: Vec<(f64, f64)> = xs.iter().map(|&x| (x, gauss(x))).collect();
    let y_area = y_label_area([format!("{y_hi:.0}")], 58);
    let mut key = Key::new(PLOT_W);
    key.add(Swatch::Bar(LOW, 0.75), format!("{} readings, {:.2} LSB rms", codes.len(), n.rms_lsb));
    key.add(Swatch::Line(MODEL, 2), format!("converter floor alone, {floor_sigma:.2} LSB rms"));
    let svg = svg_with(PLOT_W, PLOT_H + key.height(), |root, marks| {
        let (plot, band) = root.split_vertically(PLOT_H);
        let mut chart = builder(&plot)
            .caption("codes of the noise record", label_style(15))
            .x_label_area_size(40)
            .y_label_area_size(y_area)
            .build_cartesian_2d(x_lo..x_hi, 0.0..y_hi)?;
        mesh(&mut chart)
            .x_desc("code, LSB")
            .y_desc("readings")
            .x_label_formatter(&|v| format!("{v:.0}"))
            .y_label_formatter(&|v| format!("{v:.0}"))
            .draw()?;
        chart.draw_series(counts.iter().enumerate().map(|(i, &k)| {
            let x0 = lo - 0.5 + i as f64 * width;
            Rectangle::new([(x0 + 0.06 * width, 0.0), (x0 + 0.94 * width, f64::from(k))], LOW.mix(0.75).filled())
        }))?;
        chart.draw_series(LineSeries::new(floor_curve.iter().copied(), MODEL.stroke_width(2)))?;
        marks.plot_area(&chart);
        marks.key(&key, &band);
        Ok(())
    });
    let caption = format!(
        "<b>{title}.</b> Every code of the noise record (one reading every {}, mean {} LSB), against the \
         spread the converter alone would show (its noise and quantization) around the same mean. \
         White noise {:.2} LSB rms; drift {} LSB/s.",
        units::ns(noise_period_ns(n)),
        short(n.mean_lsb),
        n.white_rms_lsb,
        short(n.drift_lsb_per_s)
    );
    figure(&id, svg, &caption)
}

/// The noise record's sampling period, ns, from its spectrum (the last bin is Nyquist).
fn noise_period_ns(n: &crate::noise::NoiseSummary) -> f64 {
    n.psd.last().map_or(f64::NAN, |&(f, _)| 1e9 / (2.0 * f))
}

fn noise_missing(p: &PinReport) -> &'static str {
    match p.verdict {
        Verdict::AtRail if p.fit.is_none() => "the pin reads at a rail: no noise record was taken",
        _ if p.reason.as_deref().is_some_and(|s| s.starts_with("not surveyed")) => "the pin was not surveyed",
        _ => "no noise record of this pin came back",
    }
}

/// Welch spectrum of the noise record with the mains lines marked (strong where flagged).
fn spectrum_plot(r: &SurveyReport, p: &PinReport) -> String {
    let m = &r.model;
    let id = format!("pin-{}-spectrum", p.channel);
    let title = "Noise spectrum";
    let Some(n) = &p.noise else {
        return no_data(&id, title, noise_missing(p));
    };
    let psd: Vec<(f64, f64)> = n.psd.iter().copied().filter(|&(f, d)| f > 0.0 && d > 0.0).collect();
    if psd.len() < 4 {
        return no_data(&id, title, "the noise record is too short for a spectrum");
    }
    let nyquist = psd.last().map_or(1.0, |q| q.0);
    // One-sided density of white noise at the converter's floor: 2σ²/fs.
    let floor = 2.0 * m.variance_floor_lsb2() / (2.0 * nyquist);
    let d_lo = psd.iter().map(|q| q.1).fold(f64::INFINITY, f64::min).min(floor) / 3.0;
    let d_hi = psd.iter().map(|q| q.1).fold(0.0, f64::max).max(floor) * 8.0;
    let (f_lo, f_hi, f_ticks) = decades(psd[0].0 / 1.2, nyquist);
    let (d_lo, d_hi, d_ticks) = decades(d_lo, d_hi);
    let flagged = [p.flags.contains(&Flag::Hum50), p.flags.contains(&Flag::Hum60)];
    let y_area = y_label_area(d_ticks.iter().map(|d| format!("{d:.0e}")), 58);
    let mut key = Key::new(PLOT_W);
    key.add(Swatch::Line(LOW, 2), "Welch estimate");
    key.add(Swatch::Line(MODEL, 1), "converter floor (white)");
    let svg = svg_with(PLOT_W, PLOT_H + key.height(), |root, marks| {
        let (plot, band) = root.split_vertically(PLOT_H);
        let mut chart = builder(&plot)
            .caption("power spectral density", label_style(15))
            .x_label_area_size(40)
            .y_label_area_size(y_area)
            .build_cartesian_2d(
                (f_lo..f_hi).log_scale().with_key_points(f_ticks.clone()),
                (d_lo..d_hi).log_scale().with_key_points(d_ticks.clone()),
            )?;
        mesh(&mut chart)
            .x_label_formatter(&|v| decade_label(*v, "Hz"))
            .y_label_formatter(&|v| format!("{v:.0e}"))
            .x_desc("frequency")
            .y_desc("LSB²/Hz")
            .draw()?;
        for (k, &f) in MAINS_HZ.iter().enumerate() {
            let (colour, width) = if flagged[k] { (HUM.mix(0.85), 2) } else { (HUM.mix(0.25), 1) };
            for h in 1..=HARMONICS {
                let fh = f * h as f64;
                if fh >= nyquist {
                    continue;
                }
                chart.draw_series(LineSeries::new([(fh, d_lo), (fh, d_hi)], colour.stroke_width(width)))?;
            }
            let label = format!("{f:.0} Hz{}", if flagged[k] { " hum" } else { "" });
            let y = if k == 0 { d_hi / 1.6 } else { d_hi / 4.0 };
            chart.draw_series([Text::new(label, (f * 1.04, y), label_style(11).color(&colour))])?;
        }
        chart.draw_series(LineSeries::new([(f_lo, floor), (f_hi, floor)], MODEL.stroke_width(1)))?;
        chart.draw_series(LineSeries::new(psd.iter().copied(), LOW.stroke_width(1)))?;
        marks.plot_area(&chart);
        marks.key(&key, &band);
        Ok(())
    });
    let caption = format!(
        "<b>{title}.</b> Welch estimate (Hann window, 50% overlap) of the detrended noise record. Red \
         lines: 50 and 60 Hz and their harmonics, bold where the pin is flagged for hum. Fitted hum \
         amplitude: 50 Hz {} LSB, 60 Hz {} LSB (±{} LSB).",
        short(n.hum_lsb[0]),
        short(n.hum_lsb[1]),
        short(n.hum_se_lsb)
    );
    figure(&id, svg, &caption)
}

/// One of a pin's intervals that the table prints as a bound (no estimate: `< h`, `> l` or a
/// range): the figure's id, the quantity's name, the fit parameter it profiles, the interval,
/// how its values print and their unit.
struct PrintedBound {
    id: String,
    name: &'static str,
    param: usize,
    interval: Interval,
    fmt: fn(f64) -> String,
    unit: &'static str,
}

fn printed_bounds(p: &PinReport) -> Vec<PrintedBound> {
    let mut out = Vec::new();
    for (slug, name, param, interval, fmt, unit) in [
        ("source-r", "source R", LN_RS, p.source_ohms, units::ohms as fn(f64) -> String, "Ω"),
        ("node-c", "node C", LN_CN, p.node_farads, units::farads as fn(f64) -> String, "F"),
    ] {
        if interval.estimate.is_none() && (interval.low.is_some() || interval.high.is_some()) {
            let id = format!("pin-{}-bound-{slug}", p.channel);
            out.push(PrintedBound { id, name, param, interval, fmt, unit });
        }
    }
    out
}

/// Points of a bound's profile.
const PROFILE_POINTS: usize = 21;

/// The evidence for each bound the table prints for `p`: the profile of the fit's objective
/// over the bounded quantity (the other parameters re-optimized at each point), the 95%
/// threshold it must stay under, the printed bound and, shaded, the side it excludes.
fn bound_plots(r: &SurveyReport, p: &PinReport) -> String {
    let mut out = String::new();
    for PrintedBound { id, name, param: i, interval: iv, fmt, unit } in printed_bounds(p) {
        let title = format!("Bound on {name}");
        let printed = match (i, p.source_assumes_node_below) {
            (LN_RS, Some(_)) => crate::render::text::source_text(p),
            _ => interval_text(&iv, fmt),
        };
        let Some(fit) = &p.fit else {
            out += &no_data(&id, &escape(&title), "no fit was kept for this pin, so there is no profile to show");
            continue;
        };
        let (a, b) = match (iv.low, iv.high) {
            (Some(l), Some(h)) => (l / 10.0, h * 10.0),
            (None, Some(h)) => (h / 300.0, h * 30.0),
            (Some(l), _) => (l / 30.0, l * 300.0),
            (None, None) => continue,
        };
        let mut grid = log_space(a, b, PROFILE_POINTS);
        // Closer around each printed end, where the curve crosses the threshold.
        for e in iv.low.iter().chain(iv.high.iter()) {
            grid.extend([0.6, 0.75, 0.87, 1.0, 1.15, 1.33, 1.67].map(|k| e * k));
        }
        grid.sort_by(f64::total_cmp);
        let input = FitInput { board: &r.model, events: &p.events };
        let rise = profile_rise(&input, fit, i, &grid);
        if rise.len() < 2 {
            out +=
                &no_data(&id, &escape(&title), "the bound lies at the edge of the search range: no profile beyond it");
            continue;
        }
        let threshold = CHI2_95_1DOF * fit.birge();
        let y_hi = threshold * 3.0;
        let (x_lo, x_hi, ticks) = decades(rise[0].0, rise[rise.len() - 1].0);
        let y_fmt = axis_label(y_hi);
        let y_area = y_label_area([y_fmt(&y_hi)], 58);
        let mut key = Key::new(PLOT_W);
        key.add(Swatch::Line(LOW, 2), "profile: rise of χ² (others re-fitted)");
        key.add(Swatch::Dashed(MODEL), format!("95% threshold, {}", short(threshold)));
        key.add(Swatch::Bar(HIGH, 0.18), format!("outside {name} {printed}: excluded"));
        let svg = svg_with(PLOT_W, PLOT_H + key.height(), |root, marks| {
            let (plot, band) = root.split_vertically(PLOT_H);
            let mut chart = builder(&plot)
                .caption(format!("{name}: profile of the fit"), label_style(15))
                .x_label_area_size(40)
                .y_label_area_size(y_area)
                .build_cartesian_2d((x_lo..x_hi).log_scale().with_key_points(ticks.clone()), 0.0..y_hi)?;
            mesh(&mut chart)
                .x_label_formatter(&|v| decade_label(*v, unit))
                .x_desc(name)
                .y_desc("χ² above the fit")
                .y_label_formatter(&y_fmt)
                .draw()?;
            // The excluded side of each printed end.
            for (end, below) in [(iv.low, true), (iv.high, false)] {
                let Some(e) = end else { continue };
                let span = if below { [(x_lo, 0.0), (e, y_hi)] } else { [(e, 0.0), (x_hi, y_hi)] };
                chart.draw_series([Rectangle::new(span, HIGH.mix(0.18).filled())])?;
                chart.draw_series(LineSeries::new([(e, 0.0), (e, y_hi)], HIGH.stroke_width(2)))?;
                // Labelled on the side the bound allows.
                let (label, pos, at) = if below {
                    (format!("> {}", fmt(e)), Pos::new(HPos::Left, VPos::Top), e * 1.06)
                } else {
                    (format!("< {}", fmt(e)), Pos::new(HPos::Right, VPos::Top), e / 1.06)
                };
                chart.draw_series([Text::new(label, (at, y_hi * 0.97), label_style(11).pos(pos))])?;
            }
            chart.draw_series(DashedLineSeries::new(
                [(x_lo, threshold), (x_hi, threshold)],
                6,
                4,
                MODEL.stroke_width(2),
            ))?;
            for run in inside_runs(&rise, f64::NEG_INFINITY, y_hi) {
                chart.draw_series(LineSeries::new(run, LOW.stroke_width(2)))?;
            }
            chart
                .draw_series(rise.iter().filter(|q| q.1 <= y_hi).map(|&(x, y)| Circle::new((x, y), 2, LOW.filled())))?;
            // Points above the panel: triangles along its top.
            chart.draw_series(
                rise.iter()
                    .filter(|q| q.1 > y_hi)
                    .map(|&(x, _)| TriangleMarker::new((x, y_hi * 0.97), 4, LOW.stroke_width(1))),
            )?;
            marks.plot_area(&chart);
            marks.key(&key, &band);
            Ok(())
        });
        let assumption = match (i, p.source_assumes_node_below) {
            (LN_RS, Some(c)) => format!(
                " The readings did not show the node's size: the profile holds the node below {}, as the bound assumes.",
                units::farads(c)
            ),
            _ => String::new(),
        };
        let caption = format!(
            "<b>{}.</b> The table prints {name} {} because the fit gets worse past it: at each value the other \
             parameters are fitted again, and where χ² rises above the fit's own by more than {} (3.84, the 95% \
             point of χ² with one degree of freedom, times the misfit ratio {:.2}) the value is excluded. \
             Triangles along the top: points above the panel.{}",
            escape(&title),
            escape(&printed),
            short(threshold),
            fit.birge(),
            escape(&assumption)
        );
        out += &figure(&id, svg, &caption);
    }
    out
}

/// One row of the memory matrix: the pin, and the shift of its reading after each previous
/// channel, LSB (`None` where nothing was measured), and the channel actually measured.
struct MemoryRow {
    channel: u8,
    shifts: Vec<Option<f64>>,
    measured: Option<u8>,
}

/// The channels a pin can follow in a scan: precharge sources, then the surveyed pins.
fn memory_columns(r: &SurveyReport) -> Vec<(u8, Option<f64>)> {
    let m = &r.model;
    let mut cols: Vec<(u8, Option<f64>)> =
        m.precharge_volts.iter().map(|(&ch, &v)| (ch, Some(volts_to_lsb(v, m.vref_volts, m.bits)))).collect();
    for p in &r.pins {
        let level = p
            .memory
            .map(|mem| mem.level_lsb)
            .or(p.source_volts.map(|v| volts_to_lsb(v, m.vref_volts, m.bits)))
            .or(p.noise.as_ref().map(|n| n.mean_lsb));
        if !cols.iter().any(|c| c.0 == p.channel) {
            cols.push((p.channel, level));
        }
    }
    cols
}

/// Rows of the memory matrix: the measured shift after the channel the order swap used, and
/// for every other channel the shift the measured coefficient predicts (the hold capacitor
/// shares charge linearly, so the shift scales with the difference of levels).
fn memory_rows(r: &SurveyReport, cols: &[(u8, Option<f64>)]) -> Vec<MemoryRow> {
    r.pins
        .iter()
        .map(|p| {
            let shifts = cols
                .iter()
                .map(|&(ch, level)| {
                    let mem = p.memory?;
                    if ch == p.channel {
                        Some(0.0)
                    } else if ch == mem.previous {
                        Some(mem.shift_lsb)
                    } else {
                        // Charge sharing makes the reading a weighted average of the pin and the
                        // previous level (a coefficient from 0 to 1); a coefficient outside that
                        // within the shift's noise is one inside it. A floating node, or a real
                        // shift no weighted average explains, is something else: nothing to scale.
                        let within_noise = mem.shift_lsb.abs() <= 3.0 * mem.shift_se_lsb;
                        let sharing = (0.0..=1.0).contains(&mem.coefficient) || within_noise;
                        let coefficient = mem.coefficient.clamp(0.0, 1.0);
                        level
                            .filter(|_| sharing && p.verdict != Verdict::Floating)
                            .map(|l| coefficient * (l - mem.level_lsb))
                    }
                })
                .collect();
            MemoryRow { channel: p.channel, shifts, measured: p.memory.map(|mem| mem.previous) }
        })
        .collect()
}

/// Colour of a shift on a signed log scale that saturates at `max` LSB; near white inside ½ LSB.
fn heat_colour(v: f64, max: f64) -> RGBColor {
    let t = ((1.0 + v.abs() / 0.5).ln() / (1.0 + max / 0.5).ln()).clamp(0.0, 1.0);
    let end = if v < 0.0 { COLD } else { HOT };
    let mix = |a: u8, b: u8| (f64::from(a) + (f64::from(b) - f64::from(a)) * t).round() as u8;
    RGBColor(mix(PAPER.0, end.0), mix(PAPER.1, end.1), mix(PAPER.2, end.2))
}

/// The memory matrix as a heat map: rows are the converted pins, columns the channel converted
/// just before. Measured cells are outlined.
fn memory_heatmap(r: &SurveyReport, rows: &[MemoryRow], cols: &[(u8, Option<f64>)], max: f64) -> String {
    let cell_w = 52.0f64.min(880.0 / cols.len().max(1) as f64).max(34.0);
    let cell_h = 26.0;
    let (left, top) = (64.0, 52.0);
    let w = (left + cell_w * cols.len() as f64 + 16.0).ceil() as u32;
    let h = (top + cell_h * rows.len() as f64 + 56.0).ceil() as u32;
    let precharges: Vec<u8> = r.model.precharge_volts.keys().copied().collect();
    svg(w, h, |root| {
        let center = |style: TextStyle<'static>| style.pos(Pos::new(HPos::Center, VPos::Center));
        let right = |style: TextStyle<'static>| style.pos(Pos::new(HPos::Right, VPos::Center));
        root.draw(&Text::new(
            "converted after →",
            ((left + cell_w * cols.len() as f64 / 2.0) as i32, 12),
            center(label_style(12)),
        ))?;
        for (j, &(ch, _)) in cols.iter().enumerate() {
            let x = (left + cell_w * (j as f64 + 0.5)) as i32;
            let name = if precharges.contains(&ch) { format!("ref{ch}") } else { format!("ch{ch}") };
            root.draw(&Text::new(name, (x, (top - 14.0) as i32), center(label_style(11))))?;
        }
        for (i, row) in rows.iter().enumerate() {
            let y0 = top + cell_h * i as f64;
            root.draw(&Text::new(
                format!("ch{}", row.channel),
                ((left - 8.0) as i32, (y0 + cell_h / 2.0) as i32),
                right(label_style(11)),
            ))?;
            for (j, shift) in row.shifts.iter().enumerate() {
                let x0 = left + cell_w * j as f64;
                let corners = [(x0 as i32 + 1, y0 as i32 + 1), ((x0 + cell_w) as i32 - 1, (y0 + cell_h) as i32 - 1)];
                let centre = ((x0 + cell_w / 2.0) as i32, (y0 + cell_h / 2.0) as i32);
                match shift {
                    Some(_) if cols[j].0 == row.channel => {
                        root.draw(&Rectangle::new(corners, GRID.filled()))?;
                    }
                    Some(v) => {
                        let fill = heat_colour(*v, max);
                        root.draw(&Rectangle::new(corners, fill.filled()))?;
                        if row.measured == Some(cols[j].0) {
                            root.draw(&Rectangle::new(corners, INK.stroke_width(2)))?;
                        }
                        let dark = (1.0 + v.abs() / 0.5).ln() / (1.0 + max / 0.5).ln() > 0.55;
                        let ink: &'static RGBColor = if dark { &PAPER } else { &INK };
                        root.draw(&Text::new(short(*v), centre, center(label_style(10).color(ink))))?;
                    }
                    None => {
                        root.draw(&Rectangle::new(corners, GRID.mix(0.5).filled()))?;
                        root.draw(&Text::new("·", centre, center(label_style(11))))?;
                    }
                }
            }
        }
        // Colour key.
        let ky = (top + cell_h * rows.len() as f64 + 18.0) as i32;
        let kx0 = left;
        let kw = (cell_w * cols.len() as f64).min(360.0);
        let steps = 60;
        for k in 0..steps {
            let v = -max + 2.0 * max * (k as f64 + 0.5) / steps as f64;
            let v = v.signum() * (v.abs() / max).powi(3) * max;
            let x = kx0 + kw * k as f64 / steps as f64;
            root.draw(&Rectangle::new(
                [(x as i32, ky), ((x + kw / steps as f64).ceil() as i32, ky + 10)],
                heat_colour(v, max).filled(),
            ))?;
        }
        let key = label_style(10);
        root.draw(&Text::new(format!("−{} LSB", short(max)), (kx0 as i32, ky + 14), key.clone()))?;
        root.draw(&Text::new("0", ((kx0 + kw / 2.0) as i32, ky + 14), key.clone()))?;
        root.draw(&Text::new(format!("+{} LSB", short(max)), ((kx0 + kw - 40.0) as i32, ky + 14), key))?;
        Ok(())
    })
}

fn memory_caption(r: &SurveyReport) -> String {
    let sample = r.pins.iter().find_map(|p| p.memory.map(|m| m.sample));
    let at = sample
        .map(|s| {
            format!(
                " at each pin's recommended sample time (e.g. {})",
                units::ns(r.model.sample_s(usize::from(s)) * 1e9)
            )
        })
        .unwrap_or_default();
    format!(
        "<b>Memory of the previous channel.</b> How far a pin's reading moves, in LSB, when it is \
         converted right after another channel instead of after itself{at}. Outlined cells were \
         measured by an order swap; the others follow from the measured coefficient and the \
         difference of levels (charge sharing on the hold capacitor is linear). Dots: nothing to \
         scale (a pin at a rail has no order swap; a floating node, or a shift that no weighted \
         average of the two levels explains, shows only its measured cell). Cells inside ±½ LSB \
         are near white."
    )
}

pub(crate) fn verdict_chip(v: Verdict) -> String {
    format!("<span class=\"chip {0}\">{0}</span>", v.as_str())
}

fn flags_html(p: &PinReport) -> String {
    p.flags.iter().map(|f| format!("<span class=\"flag\">{}</span>", f.as_str())).collect::<Vec<_>>().join(" ")
}

fn iv(iv: &Interval, f: fn(f64) -> String) -> String {
    escape(&interval_text(iv, f))
}

pub(crate) const STYLE: &str = "
:root { --ink:#242e38; --muted:#5d6873; --paper:#fffefb; --rule:#e4e1da; --accent:#4b2c6e; }
* { box-sizing: border-box; }
body { margin: 0; background: #f3f1ec; color: var(--ink); font: 14px/1.45 system-ui, sans-serif; }
main { max-width: 1180px; margin: 0 auto; padding: 20px 16px 40px; }
header { border-bottom: 3px solid var(--accent); margin-bottom: 14px; padding-bottom: 8px; }
h1 { font-size: 22px; margin: 0 0 4px; }
h2 { font-size: 18px; margin: 0 0 6px; }
.sub { color: var(--muted); margin: 2px 0; }
table.pins { border-collapse: collapse; width: 100%; background: var(--paper); font-size: 13px; }
table.pins th, table.pins td { text-align: left; padding: 4px 8px; border-bottom: 1px solid var(--rule); white-space: nowrap; }
table.pins th { background: #ebe7de; font-weight: 600; }
table.pins td.label { white-space: normal; }
a { color: var(--accent); }
.chip { display: inline-block; padding: 0 7px; border-radius: 9px; font-size: 12px; font-weight: 600; color: #fff; }
.chip.driven { background: #2f7d4f; } .chip.floating { background: #7b4fa3; }
.chip.at-rail { background: #51657a; } .chip.unknown { background: #b07a12; }
.flag { display: inline-block; padding: 0 6px; border: 1px solid #c9a9a0; border-radius: 4px; font-size: 12px; background: #fbeee9; }
section.pin, section.board { background: var(--paper); border: 1px solid var(--rule); border-radius: 6px; padding: 14px 16px; margin: 16px 0; }
dl.facts { display: grid; grid-template-columns: max-content 1fr max-content 1fr; gap: 2px 14px; margin: 6px 0 10px; }
dl.facts dt { color: var(--muted); } dl.facts dd { margin: 0; }
.plots { display: flex; flex-wrap: wrap; gap: 12px; }
figure { margin: 0; width: 540px; }
figure.wide { width: auto; }
figure svg { display: block; border: 1px solid var(--rule); }
figcaption { font-size: 12px; color: var(--muted); margin-top: 4px; }
.nodata { color: var(--muted); border: 1px dashed var(--rule); padding: 12px; margin: 0; }
.note { background: #fff6df; border-left: 3px solid #d9a527; padding: 6px 10px; margin: 8px 0; }
.fault { background: #fdecea; border-left: 3px solid #b33a2a; padding: 6px 10px; }
footer { color: var(--muted); font-size: 12px; margin-top: 24px; }
";

/// The survey as one self-contained HTML page (no script, no external assets).
pub fn survey_html(r: &SurveyReport) -> String {
    let link_name = r.record.run.link.describe();
    let b = &r.board;
    let m = &r.model;
    let mut out = String::with_capacity(1 << 20);
    let title = format!("ohmsight survey — {}", b.name);
    let _ = write!(
        out,
        "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n\
         <meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\n<title>{}</title>\n\
         <style>{STYLE}</style>\n</head>\n<body>\n<main>\n",
        escape(&title)
    );
    let _ = writeln!(
        out,
        "<header><h1>{}</h1><p class=\"sub\">board “{}”, unit {:016x}, firmware {}, over the {}</p>\
         <p class=\"sub\" id=\"run\">run {} started {}{}</p><p class=\"sub\">converter: {}</p></header>",
        escape("ohmsight survey"),
        escape(&b.name),
        b.unit_id,
        escape(&b.firmware),
        escape(&link_name),
        escape(&r.record.run.id),
        escape(&r.record.run.started),
        if r.record.run.complete { "" } else { ", incomplete" },
        escape(&converter_text(m)),
    );
    if let Some(f) = &r.fault {
        let _ = writeln!(
            out,
            "<p class=\"fault\">The survey was cut short: {}. Pins finished before the fault are shown as measured.</p>",
            escape(f)
        );
    }

    // Summary table.
    out += "<section class=\"board\" id=\"summary\"><h2>Pins</h2>\n<table class=\"pins\">\n<thead><tr>\
            <th>ch</th><th>label</th><th>verdict</th><th>source R (95%)</th><th>node C (95%)</th>\
            <th>source V</th><th>noise</th><th>min sample</th><th>flags</th></tr></thead>\n<tbody>\n";
    for p in &r.pins {
        let _ = writeln!(
            out,
            "<tr><td><a href=\"#pin-{0}\">{0}</a></td><td class=\"label\">{1}</td><td>{2}</td><td>{3}</td><td>{4}</td>\
             <td>{5}</td><td>{6}</td><td>{7}</td><td>{8}</td></tr>",
            p.channel,
            escape(&p.label),
            verdict_chip(p.verdict),
            escape(&crate::render::text::source_text(p)),
            iv(&p.node_farads, units::farads),
            p.source_volts.map_or("—".into(), |v| format!("{v:.4} V")),
            p.noise_lsb_rms.map_or("—".into(), |n| format!("{n:.2} LSB")),
            crate::render::text::min_sample_cell(p),
            flags_html(p),
        );
    }
    let _ = write!(
        out,
        "</tbody></table>\n<p class=\"sub\">{} conversions, {} bytes to the board and {} back ({} bad frames, {} re-runs); \
         {:.2} s on the board, {:.2} s here.</p>\n",
        r.link.conversions, r.link.bytes_sent, r.link.bytes_received, r.link.bad_frames, r.link.reruns, r.board_seconds, r.wall_seconds
    );

    // Board-wide memory matrix.
    let cols = memory_columns(r);
    let rows = memory_rows(r, &cols);
    let max = rows.iter().flat_map(|row| row.shifts.iter().flatten()).fold(2.0f64, |a, v| a.max(v.abs()));
    let _ = write!(
        out,
        "<figure id=\"memory-matrix\" class=\"wide\">{}<figcaption>{}</figcaption></figure>\n</section>\n",
        memory_heatmap(r, &rows, &cols, max),
        memory_caption(r)
    );

    for (p, row) in r.pins.iter().zip(&rows) {
        out += &pin_section(r, p, row, &cols, max);
    }
    let _ = write!(
        out,
        "<footer id=\"report-end\">Made by ohmsight {}. A board tied to mains or high voltage must be surveyed \
         through an isolated link and supply; follow local codes and licensed practice.</footer>\n\
         </main>\n</body>\n</html>\n",
        env!("CARGO_PKG_VERSION")
    );
    out
}

fn pin_section(r: &SurveyReport, p: &PinReport, row: &MemoryRow, cols: &[(u8, Option<f64>)], max: f64) -> String {
    let mut out = String::new();
    let _ = write!(
        out,
        "<section class=\"pin\" id=\"pin-{0}\">\n<h2>ch{0} — {1} {2}</h2>\n",
        p.channel,
        escape(&p.label),
        verdict_chip(p.verdict)
    );
    let fit = p
        .fit
        .as_ref()
        .map_or("—".into(), |f| format!("χ²/dof {:.2} ({} degrees of freedom)", f.chi2 / f.dof.max(1) as f64, f.dof));
    let memory = p.memory.map_or("—".into(), |mem| {
        format!("{} ± {} LSB after ch{}", short(mem.shift_lsb), short(mem.shift_se_lsb), mem.previous)
    });
    let _ = writeln!(
        out,
        "<dl class=\"facts\"><dt>source R</dt><dd>{}</dd><dt>node C</dt><dd>{}</dd>\
         <dt>source V</dt><dd>{}</dd><dt>noise</dt><dd>{}</dd>\
         <dt>min sample</dt><dd>{}</dd><dt>memory</dt><dd>{}</dd>\
         <dt>flags</dt><dd>{}</dd><dt>fit</dt><dd>{} · {} conversions</dd></dl>",
        escape(&crate::render::text::source_text(p)),
        iv(&p.node_farads, units::farads),
        p.source_volts.map_or("—".into(), |v| format!("{v:.4} V")),
        p.noise_lsb_rms.map_or("—".into(), |n| format!("{n:.2} LSB rms")),
        crate::render::text::min_sample_cell(p),
        escape(&memory),
        if p.flags.is_empty() { "none".into() } else { flags_html(p) },
        escape(&fit),
        p.conversions,
    );
    if let Some(why) = &p.reason {
        let _ = writeln!(out, "<p class=\"note\">{}</p>", escape(why));
    }
    let model = model_as_run(&r.model, p);
    out += "<div class=\"plots\">\n";
    out += &precharge_plot(r, p, &model);
    out += &period_plot(r, p, &model);
    out += &histogram_plot(r, p);
    out += &spectrum_plot(r, p);
    out += &bound_plots(r, p);
    out += "</div>\n";
    let id = format!("pin-{}-memory", p.channel);
    if p.memory.is_some() {
        let strip = memory_heatmap(r, std::slice::from_ref(row), cols, max);
        let caption = format!(
            "<b>Memory.</b> This pin's row of the board's memory matrix: the shift of its reading, LSB, \
             after each channel (outlined: measured after ch{}).",
            row.measured.unwrap_or_default()
        );
        let _ = writeln!(out, "<figure id=\"{id}\" class=\"wide\">{strip}<figcaption>{caption}</figcaption></figure>");
    } else {
        out += &no_data(&id, "Memory", "no order swap was run on this pin");
    }
    out += "</section>\n";
    out
}

#[cfg(test)]
#[path = "html_plot_tests.rs"]
mod plot_tests;

#[cfg(test)]
mod tests {
    use super::*;
    use crate::link::InProcessLink;
    use crate::run::{survey, SurveyOptions};
    use crate::session::Session;
    use ohmsight_protocol::analog::volts_to_lsb;
    use ohmsight_protocol::{FrontEnd, Precharge};

    /// A 12-bit, 3.3 V board with an 8 pF / 1 kΩ input and precharges at 0 V and 3.3 V.
    fn board(sample_ns: &[f64]) -> BoardModel {
        let fe = FrontEnd {
            bits: 12,
            vref_microvolts: 3_300_000,
            sample_ps: sample_ns.iter().map(|ns| (ns * 1000.0).round() as u32).collect(),
            conversion_ps: 1_000_000,
            hold_attofarads: 8_000_000,
            hold_tolerance_ppm: 0,
            switch_milliohms: 1_000_000,
            switch_tolerance_ppm: 0,
            noise_millilsb: 300,
            leakage_picoamps: 0,
            pull_milliohms: 0,
            pull_tolerance_ppm: 0,
            pull_supply_microvolts: 0,
            precharges: heapless::Vec::from_slice(&[
                Precharge { channel: 16, nominal_microvolts: 0 },
                Precharge { channel: 17, nominal_microvolts: 3_300_000 },
            ])
            .unwrap(),
        };
        BoardModel::from_front_end(&fe)
    }

    fn event(exp: Experiment) -> Event {
        Event::replay(exp, 3, 1_000_000_000)
    }

    #[test]
    fn escape_covers_markup_and_quotes() {
        assert_eq!(escape(r#"<b>"R&D" 'x'</b>"#), "&lt;b&gt;&quot;R&amp;D&quot; &#39;x&#39;&lt;/b&gt;");
        assert_eq!(escape("µs ½ LSB"), "µs ½ LSB");
    }

    #[test]
    fn precharge_curve_follows_the_rc_step_response() {
        // Textbook single-pole RC: after a precharge to 0 V, a source Vs behind Rs charges the
        // hold capacitor through Rs + Rm as Vs·(1 − exp(−t/τ)), τ = (Rs + Rm)·Ch, when the node
        // capacitance is negligible (1 fF against 8 pF here: its charge moves the hold
        // capacitor by a third of an LSB).
        let b = board(&[100.0, 400.0, 1600.0]);
        let (rs, vs) = (20e3, 2.0);
        let p = PinParams::nominal(&b, rs, 1e-15, vs);
        let exp = Experiment::PrechargeSweep {
            target: 3,
            precharges: heapless::Vec::from_slice(&[16]).unwrap(),
            precharge_sample: 2,
            samples: heapless::Vec::from_slice(&[0, 1, 2]).unwrap(),
            repeats: 1,
            rest_ns: 100_000,
            settle_ns: 0,
        };
        let events = [event(exp)];
        let grid = log_space(60e-9, 1.5e-6, 15);
        let curve = model_curve_as_run(&p, &events, 0, &grid, |e, t| vary_sample(&b, e, t));
        assert_eq!(curve.len(), grid.len());
        let tau = (rs + 1e3) * 8e-12;
        for (t, ys) in &curve {
            let want = volts_to_lsb(vs * (1.0 - (-t / tau).exp()), 3.3, 12);
            let got = ys[0];
            assert!((got - want).abs() <= 0.01 * want + 0.6, "t = {t:e} s: {got:.1} vs {want:.1} LSB");
        }
    }

    #[test]
    fn period_curve_follows_the_switched_capacitor_resistance() {
        // Textbook switched capacitor: a hold capacitor Ch precharged to Vpre and connected once
        // per period P draws an average current as a resistance P/Ch would, so behind a large
        // node capacitor the node settles at Vs − (Vs − Vpre)·Rs/(Rs + P/Ch).
        let b = board(&[100.0, 2000.0]);
        let (rs, vs) = (100e3, 1.65);
        let p = PinParams::nominal(&b, rs, 10e-9, vs);
        let exp = Experiment::PeriodSweep {
            target: 3,
            precharge: 16,
            precharge_sample: 1,
            sample: 1,
            periods_ns: heapless::Vec::from_slice(&[10_000, 30_000, 100_000]).unwrap(),
            repeats: 2000,
            settle_ns: 0,
        };
        let events = [event(exp)];
        let grid = [10e-6, 15e-6, 30e-6, 60e-6, 100e-6];
        let curve = model_curve_as_run(&p, &events, 0, &grid, |e, q| vary_period(&b, e, q));
        assert_eq!(curve.len(), grid.len());
        let settled = volts_to_lsb(vs, 3.3, 12);
        for (period, ys) in &curve {
            let droop = settled - ys[0];
            let want = volts_to_lsb(vs * rs / (rs + period / 8e-12), 3.3, 12);
            // The block mean includes the node's approach to equilibrium (about 1 ms of 20+).
            assert!((droop - want).abs() <= 0.08 * want + 1.0, "P = {period:e} s: droop {droop:.1} vs {want:.1} LSB");
        }
    }

    const SCENARIO: &str = r#"
name = "html test bench"
seed = 11
[[pin]]
channel = 0
label = "probe <b>&\"A\""
volts = 1.2
ohms = 47e3
node_farads = 15e-12
[[pin]]
channel = 1
label = "mains-side amp"
volts = 2.0
ohms = 10e3
node_farads = 10e-12
hum_volts = 0.006
hum_hz = 50.0
[[pin]]
channel = 2
label = "rail"
volts = 3.32
ohms = 10.0
node_farads = 10e-12
"#;

    /// The page of [`SCENARIO`]: a driven pin, a pin with 50 Hz hum, a pin at a rail.
    pub(super) fn page() -> (SurveyReport, String) {
        page_of("html-test.toml", SCENARIO)
    }

    /// A survey of the scenario `text` (read from `file`) and its page.
    pub(super) fn page_of(file: &str, text: &str) -> (SurveyReport, String) {
        let sc = crate::scenario::parse(file, text).unwrap();
        let mut session = Session::new(InProcessLink::new(&sc));
        let r = survey(&mut session, &SurveyOptions::default()).unwrap();
        let html = survey_html(&r);
        (r, html)
    }

    #[test]
    fn page_has_every_pin_and_its_evidence_and_nothing_external() {
        let (r, html) = page();
        assert!(html.starts_with("<!DOCTYPE html>") && html.trim_end().ends_with("</html>"));
        // Self-contained: no script, no style sheet or image fetched, no link off the page.
        for bad in ["<script", "<link", "<img", "<iframe", "src=", "url(", "@import", "href=\"http"] {
            assert!(!html.contains(bad), "the page holds {bad}");
        }
        for (i, _) in html.match_indices("http") {
            assert!(
                html[i..].starts_with("http://www.w3.org/2000/svg"),
                "only the SVG namespace: {}",
                &html[i..i + 40]
            );
        }
        // Labels from the board are escaped.
        assert!(!html.contains("<b>&\"A\""));
        assert!(html.contains("probe &lt;b&gt;&amp;&quot;A&quot;"));
        assert!(html.contains("id=\"memory-matrix\""));
        for p in &r.pins {
            assert!(html.contains(&format!("<section class=\"pin\" id=\"pin-{}\">", p.channel)), "pin {}", p.channel);
            for plot in ["precharge", "period", "histogram", "spectrum", "memory"] {
                assert!(html.contains(&format!("id=\"pin-{}-{plot}\"", p.channel)), "pin {} {plot}", p.channel);
            }
        }
        // Where the survey measured something, the figure is a plot, not a note.
        let figure = |id: &str| {
            let start = html.find(&format!("<figure id=\"{id}\"")).unwrap();
            let end = start + html[start..].find("</figure>").unwrap();
            html[start..end].to_string()
        };
        let driven = r.pins.iter().find(|p| p.channel == 0).unwrap();
        assert_eq!(driven.verdict, Verdict::Driven);
        for plot in ["precharge", "period", "histogram", "spectrum", "memory"] {
            assert!(figure(&format!("pin-0-{plot}")).contains("<svg"), "pin 0 {plot} is drawn");
        }
        // The hum pin's spectrum marks its 50 Hz line as hum and no 60 Hz one.
        let hum = r.pins.iter().find(|p| p.channel == 1).unwrap();
        assert!(hum.flags.contains(&Flag::Hum50), "{:?}", hum.flags);
        let spectrum = figure("pin-1-spectrum");
        assert!(spectrum.contains("50 Hz hum") && !spectrum.contains("60 Hz hum"));
        assert!(!figure("pin-0-spectrum").contains("Hz hum"));
        // A pin at a rail had no period sweep and no noise record: said in words.
        let rail = r.pins.iter().find(|p| p.channel == 2).unwrap();
        if rail.fit.is_none() {
            assert!(figure("pin-2-period").contains("class=\"nodata\""));
            assert!(figure("pin-2-histogram").contains("class=\"nodata\""));
        }
        // The histogram counts every code of the noise record.
        assert!(figure("pin-0-histogram").contains(&format!("{} readings", driven.noise_codes.len())));
        assert!(driven.noise_codes.len() >= 1000);

        // A survey a link fault cut short: the fault is said, the unsurveyed pin's figures
        // say why they are empty, and the page is still whole.
        let mut cut = r.clone();
        cut.fault = Some("no answer <from> the board".into());
        let p0 = &mut cut.pins[0];
        (p0.fit, p0.noise, p0.memory) = (None, None, None);
        p0.events.clear();
        p0.noise_codes.clear();
        p0.verdict = Verdict::Unknown;
        p0.reason = Some("not surveyed: the link failed before this pin was done".into());
        let html = survey_html(&cut);
        assert!(html.contains("class=\"fault\">The survey was cut short: no answer &lt;from&gt; the board"));
        assert!(html.trim_end().ends_with("</html>"));
        for plot in ["precharge", "period", "histogram", "spectrum", "memory"] {
            let start = html.find(&format!("<figure id=\"pin-0-{plot}\"")).unwrap();
            let end = start + html[start..].find("</figure>").unwrap();
            assert!(html[start..end].contains("class=\"nodata\""), "pin 0 {plot}: {}", &html[start..end]);
        }
        assert!(html.contains("the pin was not surveyed"));
    }
}
