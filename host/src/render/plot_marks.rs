//! Marks of our own on the page's plots, written as SVG after what `plotters` drew: the plot
//! area's outline (invisible; the tests and any style sheet find it by class), the legend in a
//! band of its own below the axes, the board's selectable sample times along a sample-time
//! axis, and the helpers that keep log axes on decades and tick labels inside their margin.
//!
//! Every mark carries a class naming what it is, so a reader of the SVG (or a test) can tell
//! the legend from the data without guessing from colours. All text is escaped.

use super::html::{escape, Draw};
use plotters::chart::ChartContext;
use plotters::coord::cartesian::Cartesian2d;
use plotters::coord::ranged1d::Ranged;
use plotters::prelude::{RGBColor, SVGBackend};
use std::fmt::Write as _;

/// Font size of legend text, px (as the axis labels).
const KEY_FONT_PX: f64 = 11.0;
/// Width of a character of the sans-serif font at 1 px, as a share of its size: an estimate
/// for layout (common practice, no source; digits of common sans faces run 0.55–0.6).
pub(crate) const CHAR_EM: f64 = 0.6;
/// Height of one row of the legend, px.
const KEY_ROW_PX: u32 = 17;

/// SVG of our own, appended after the plot (drawn over it, in the order added).
#[derive(Default)]
pub(crate) struct Overlay(String);

impl Overlay {
    /// Outlines the plotting area of `chart` (no stroke, no fill): where the data may be drawn.
    pub(crate) fn plot_area<X: Ranged, Y: Ranged>(
        &mut self,
        chart: &ChartContext<'_, SVGBackend<'_>, Cartesian2d<X, Y>>,
    ) {
        let (xs, ys) = chart.plotting_area().get_pixel_range();
        let _ = write!(
            self.0,
            "<rect class=\"plot-area\" x=\"{}\" y=\"{}\" width=\"{}\" height=\"{}\" fill=\"none\" stroke=\"none\"/>",
            xs.start,
            ys.start,
            xs.end - xs.start,
            ys.end - ys.start
        );
    }

    /// Short marks rising from the bottom edge of the plotting area at each of `times`, s,
    /// inside the x range: the sample times the board can be set to.
    pub(crate) fn sample_times<X: Ranged<ValueType = f64>, Y: Ranged>(
        &mut self,
        chart: &ChartContext<'_, SVGBackend<'_>, Cartesian2d<X, Y>>,
        times: &[f64],
        colour: RGBColor,
    ) {
        let (xs, ys) = chart.plotting_area().get_pixel_range();
        let range = chart.x_range();
        let _ = write!(self.0, "<g class=\"sample-times\" stroke=\"{}\" stroke-width=\"2\">", hex(colour));
        for &t in times.iter().filter(|&&t| t >= range.start && t <= range.end) {
            let x = chart.plotting_area().map_coordinate(&(t, chart.y_range().start)).0.clamp(xs.start, xs.end);
            let _ = write!(
                self.0,
                "<line x1=\"{x}\" y1=\"{}\" x2=\"{x}\" y2=\"{}\"><title>{}</title></line>",
                ys.end,
                ys.end - 7,
                escape(&format!("selectable sample time {}", crate::units::si(t, "s")))
            );
        }
        self.0 += "</g>";
    }

    /// The legend `key` laid out in rows inside `band` (a strip of the figure below the axes).
    pub(crate) fn key(&mut self, key: &Key, band: &Draw<'_>) {
        let (xs, ys) = band.get_pixel_range();
        let _ = write!(self.0, "<g class=\"key\" font-family=\"sans-serif\" font-size=\"{KEY_FONT_PX}\">");
        for (entry, (x, y)) in key.entries.iter().zip(key.layout(xs.end - xs.start)) {
            let (x, y) = (xs.start + x, ys.start + y + KEY_ROW_PX as i32 / 2);
            self.0 += &entry.swatch.svg(x, y);
            let _ = write!(
                self.0,
                "<text x=\"{}\" y=\"{y}\" dy=\"0.35em\" fill=\"{}\">{}</text>",
                x + SWATCH_PX + 5,
                hex(super::html::INK),
                escape(&entry.text)
            );
        }
        self.0 += "</g>";
    }

    pub(crate) fn into_svg(self) -> String {
        self.0
    }
}

/// `#rrggbb`.
pub(crate) fn hex(c: RGBColor) -> String {
    format!("#{:02x}{:02x}{:02x}", c.0, c.1, c.2)
}

/// Width a swatch takes in the legend, px.
const SWATCH_PX: i32 = 18;

/// How a series looks, for its legend entry.
#[derive(Debug, Clone, Copy)]
pub(crate) enum Swatch {
    Dot(RGBColor),
    Line(RGBColor, u32),
    Dashed(RGBColor),
    Cross(RGBColor),
    Triangle(RGBColor),
    Bar(RGBColor, f64),
    /// A short upright mark, as those along an axis.
    Tick(RGBColor),
}

impl Swatch {
    fn svg(self, x: i32, y: i32) -> String {
        let mid = x + SWATCH_PX / 2;
        match self {
            Swatch::Dot(c) => format!("<circle cx=\"{mid}\" cy=\"{y}\" r=\"3\" fill=\"{}\"/>", hex(c)),
            Swatch::Line(c, w) => format!(
                "<line x1=\"{x}\" y1=\"{y}\" x2=\"{}\" y2=\"{y}\" stroke=\"{}\" stroke-width=\"{w}\"/>",
                x + SWATCH_PX,
                hex(c)
            ),
            Swatch::Dashed(c) => format!(
                "<line x1=\"{x}\" y1=\"{y}\" x2=\"{}\" y2=\"{y}\" stroke=\"{}\" stroke-width=\"2\" stroke-dasharray=\"4 3\"/>",
                x + SWATCH_PX,
                hex(c)
            ),
            Swatch::Cross(c) => format!(
                "<path d=\"M{} {} l8 8 M{} {} l-8 8\" stroke=\"{}\" stroke-width=\"1\"/>",
                mid - 4,
                y - 4,
                mid + 4,
                y - 4,
                hex(c)
            ),
            Swatch::Triangle(c) => format!(
                "<polygon points=\"{},{} {},{} {},{}\" fill=\"{}\"/>",
                mid,
                y - 5,
                mid - 5,
                y + 4,
                mid + 5,
                y + 4,
                hex(c)
            ),
            Swatch::Tick(c) => format!(
                "<line x1=\"{mid}\" y1=\"{}\" x2=\"{mid}\" y2=\"{}\" stroke=\"{}\" stroke-width=\"2\"/>",
                y + 4,
                y - 3,
                hex(c)
            ),
            Swatch::Bar(c, opacity) => format!(
                "<rect x=\"{}\" y=\"{}\" width=\"14\" height=\"8\" fill=\"{}\" opacity=\"{opacity}\"/>",
                mid - 7,
                y - 4,
                hex(c)
            ),
        }
    }
}

pub(crate) struct KeyEntry {
    swatch: Swatch,
    text: String,
}

/// A plot's legend: entries laid out left to right in rows below the axes.
#[derive(Default)]
pub(crate) struct Key {
    entries: Vec<KeyEntry>,
    /// Width the rows may take, px.
    width: i32,
}

impl Key {
    /// An empty legend for a figure `width` px wide.
    pub(crate) fn new(width: u32) -> Key {
        Key { entries: Vec::new(), width: width as i32 - 24 }
    }

    pub(crate) fn add(&mut self, swatch: Swatch, text: impl Into<String>) {
        self.entries.push(KeyEntry { swatch, text: text.into() });
    }

    /// Where each entry starts, relative to the band's top left.
    fn layout(&self, width: i32) -> Vec<(i32, i32)> {
        let width = width.min(self.width).max(120);
        let (mut x, mut y) = (16, 0);
        let mut at = Vec::new();
        for e in &self.entries {
            let w = SWATCH_PX + 5 + text_px(&e.text, KEY_FONT_PX).ceil() as i32 + 14;
            if x > 16 && x + w > width {
                (x, y) = (16, y + KEY_ROW_PX as i32);
            }
            at.push((x, y));
            x += w;
        }
        at
    }

    /// Height of the band the legend needs, px (none for no entries).
    pub(crate) fn height(&self) -> u32 {
        let rows = self.layout(self.width).last().map_or(0, |&(_, y)| y as u32 / KEY_ROW_PX + 1);
        if rows == 0 {
            0
        } else {
            rows * KEY_ROW_PX + 6
        }
    }
}

/// Estimated width of `text` at `px`, px.
pub(crate) fn text_px(text: &str, px: f64) -> f64 {
    text.chars().count() as f64 * px * CHAR_EM
}

/// Width of a y label area that holds the widest of `labels` at 11 px, the tick and a gap,
/// and the axis description beside them: at least `min` px.
pub(crate) fn y_label_area(labels: impl IntoIterator<Item = String>, min: u32) -> u32 {
    let widest = labels.into_iter().map(|s| text_px(&s, 11.0)).fold(0.0, f64::max);
    // Tick 5 px, gap 5 px, the rotated description 12 px high with 8 px either side.
    ((widest + 5.0 + 5.0 + 28.0).ceil() as u32).max(min)
}

/// A log axis from about `lo` to `hi` with its major ticks on the decades: the range widened
/// to the next decades outside it where it would hold fewer than two, and the decades inside.
pub(crate) fn decades(lo: f64, hi: f64) -> (f64, f64, Vec<f64>) {
    let (mut lo, mut hi) = (lo.min(hi), hi.max(lo));
    // An end within a factor 1.5 of a decade reaches it: its tick is then on the axis too.
    let below = 10f64.powf((lo.log10() - 1e-9).floor());
    if lo / below < 1.5 {
        lo = below;
    }
    let above = 10f64.powf((hi.log10() + 1e-9).ceil());
    if above / hi < 1.5 {
        hi = above;
    }
    let inside = |lo: f64, hi: f64| -> Vec<f64> {
        let (a, b) = ((lo.log10() - 1e-9).ceil() as i32, (hi.log10() + 1e-9).floor() as i32);
        (a..=b).map(|k| 10f64.powi(k)).collect()
    };
    let mut ticks = inside(lo, hi);
    while ticks.len() < 2 {
        // Widen on the side nearer its next decade (in log), so the least room is added.
        let down = lo.log10() - (lo.log10() - 1e-9).floor();
        let up = (hi.log10() + 1e-9).ceil() - hi.log10();
        if down <= up {
            lo = 10f64.powf((lo.log10() - 1e-9).floor());
        } else {
            hi = 10f64.powf((hi.log10() + 1e-9).ceil());
        }
        ticks = inside(lo, hi);
    }
    (lo, hi, ticks)
}

/// A decade as a label with an SI prefix and no trailing zeros: `1 µs`, `10 ns`, `100 Hz`.
pub(crate) fn decade_label(v: f64, unit: &str) -> String {
    let s = crate::units::si(v, unit);
    match s.split_once(' ') {
        Some((number, rest)) if number.contains('.') => {
            format!("{} {rest}", number.trim_end_matches('0').trim_end_matches('.'))
        }
        _ => s,
    }
}

#[cfg(test)]
pub(crate) mod tests {
    use super::*;
    use crate::render::html::PAPER;

    #[test]
    fn decades_are_powers_of_ten_and_at_least_two() {
        let (lo, hi, t) = decades(71e-9, 33e-6);
        assert_eq!((lo, hi), (71e-9, 33e-6));
        assert_eq!(t.len(), 3);
        // Ends near a decade reach it.
        let (lo, hi, _) = decades(102e-9, 9e-6);
        assert!((lo / 1e-7 - 1.0).abs() < 1e-12 && (hi / 1e-5 - 1.0).abs() < 1e-12, "{lo:e} {hi:e}");
        for (k, v) in t.iter().enumerate() {
            let want = 10f64.powi(-7 + k as i32);
            assert!((v / want - 1.0).abs() < 1e-12, "{v:e}");
        }
        // Inside one decade: widened to hold two.
        let (lo, hi, t) = decades(3e-6, 8e-6);
        assert_eq!(t.len(), 2);
        assert!(lo <= 3e-6 && hi >= 8e-6);
        assert!((hi / 1e-5 - 1.0).abs() < 1e-12 && (lo / 1e-6 - 1.0).abs() < 1e-12, "{lo:e} {hi:e}");
    }

    #[test]
    fn decade_labels_drop_trailing_zeros() {
        assert_eq!(decade_label(1e-6, "s"), "1 µs");
        assert_eq!(decade_label(1e-8, "s"), "10 ns");
        assert_eq!(decade_label(1e-7, "s"), "100 ns");
        assert_eq!(decade_label(1e3, "Hz"), "1 kHz");
        assert_eq!(decade_label(1.0, "Hz"), "1 Hz");
    }

    #[test]
    fn key_rows_wrap_inside_the_width() {
        let mut k = Key::new(540);
        assert_eq!(k.height(), 0);
        k.add(Swatch::Dot(PAPER), "after ch16 (0.000 V)");
        assert_eq!(k.height(), KEY_ROW_PX + 6);
        for _ in 0..6 {
            k.add(Swatch::Line(PAPER, 2), "a rather long legend entry");
        }
        let rows = k.layout(k.width);
        assert!(rows.iter().all(|&(x, _)| x < k.width));
        assert!(k.height() >= 3 * KEY_ROW_PX);
    }

    /// `1 µs` → 1e-6 for the unit `unit`; `None` for anything else.
    pub(crate) fn si_value(text: &str, unit: &str) -> Option<f64> {
        let (number, rest) = text.split_once(' ')?;
        let prefix = rest.strip_suffix(unit)?;
        let scale = match prefix {
            "" => 1.0,
            "k" => 1e3,
            "M" => 1e6,
            "G" => 1e9,
            "m" => 1e-3,
            "µ" => 1e-6,
            "n" => 1e-9,
            "p" => 1e-12,
            "f" => 1e-15,
            _ => return None,
        };
        Some(number.parse::<f64>().ok()? * scale)
    }

    /// Checks that `values` are successive powers of ten (each exactly 10ᵏ, each the last × 10).
    pub(crate) fn assert_decades(what: &str, values: &[f64]) {
        let mut v = values.to_vec();
        v.sort_by(f64::total_cmp);
        v.dedup();
        assert!(v.len() >= 2, "{what}: at least two decade ticks, got {v:?}");
        for x in &v {
            let k = x.log10().round();
            assert!((x / 10f64.powf(k) - 1.0).abs() < 1e-9, "{what}: tick {x:e} is not a power of ten ({v:?})");
        }
        for w in v.windows(2) {
            assert!(
                (w[1] / w[0] / 10.0 - 1.0).abs() < 1e-9,
                "{what}: ticks {:e} and {:e} skip or split a decade",
                w[0],
                w[1]
            );
        }
    }
}
