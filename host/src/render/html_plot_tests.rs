//! The habits of the page's plots, checked on the SVG as an independent XML parser
//! (`quick-xml`) reads it: legends off the data, log axes on decades, the board's sample times
//! on the sample-time axis, the converter floor whole, tick labels inside their margin on a
//! 16-bit board, and a figure behind every bound the table prints.

use super::*;
use crate::render::plot_marks::tests::{assert_decades, si_value};

/// One element of an SVG: its name, attributes, text, and the classes of the groups around it.
#[derive(Debug, Clone, Default)]
struct El {
    name: String,
    attrs: Vec<(String, String)>,
    text: String,
    groups: Vec<String>,
}

impl El {
    fn attr(&self, k: &str) -> Option<&str> {
        self.attrs.iter().find(|(n, _)| n == k).map(|(_, v)| v.as_str())
    }

    fn num(&self, k: &str) -> f64 {
        let v = self.attr(k).unwrap_or_else(|| panic!("<{}> has no {k}: {self:?}", self.name));
        v.parse().unwrap_or_else(|_| panic!("<{}> {k}={v:?} is not a number", self.name))
    }

    fn in_group(&self, class: &str) -> bool {
        self.groups.iter().any(|g| g == class)
    }
}

/// Every element of `svg`, in document order; panics where the SVG is not well-formed XML.
fn elements(svg: &str) -> Vec<El> {
    use quick_xml::events::{BytesStart, Event as X};
    let mut reader = quick_xml::Reader::from_str(svg);
    let mut out: Vec<El> = Vec::new();
    // Open elements: their index in `out` and their class.
    let mut open: Vec<(usize, String)> = Vec::new();
    let element = |e: &BytesStart<'_>, open: &[(usize, String)]| {
        let attrs = e
            .attributes()
            .map(|a| {
                let a = a.expect("a well-formed attribute");
                (
                    a.key.as_ref().to_string(),
                    a.normalized_value(quick_xml::XmlVersion::Implicit1_0).unwrap().into_owned(),
                )
            })
            .collect::<Vec<_>>();
        let groups = open.iter().map(|(_, c)| c.clone()).filter(|c| !c.is_empty()).collect();
        El { name: e.name().as_ref().to_string(), attrs, text: String::new(), groups }
    };
    loop {
        match reader.read_event().unwrap_or_else(|e| panic!("the SVG is not well-formed XML: {e}")) {
            X::Start(e) => {
                let el = element(&e, &open);
                let class = if el.name == "g" { el.attr("class").unwrap_or("").to_string() } else { String::new() };
                out.push(el);
                open.push((out.len() - 1, class));
            }
            X::Empty(e) => {
                let el = element(&e, &open);
                out.push(el);
            }
            X::Text(t) => {
                if let Some(&(i, _)) = open.last() {
                    out[i].text += &t.xml10_content();
                }
            }
            X::GeneralRef(r) => {
                let c = match r.resolve_char_ref().unwrap() {
                    Some(c) => c,
                    None => match r.as_ref() {
                        "amp" => '&',
                        "lt" => '<',
                        "gt" => '>',
                        "quot" => '"',
                        "apos" => '\'',
                        other => panic!("unknown entity &{other};"),
                    },
                };
                if let Some(&(i, _)) = open.last() {
                    out[i].text.push(c);
                }
            }
            X::End(_) => {
                if let Some((i, _)) = open.pop() {
                    out[i].text = out[i].text.trim().to_string();
                }
            }
            X::Eof => break,
            _ => {}
        }
    }
    out
}

/// The SVG of the figure `id` in `html`, if it has one.
fn figure_svg<'h>(html: &'h str, id: &str) -> Option<&'h str> {
    let start = html.find(&format!("<figure id=\"{id}\""))?;
    let end = start + html[start..].find("</figure>")?;
    let body = &html[start..end];
    let s = body.find("<svg")?;
    Some(&body[s..s + body[s..].find("</svg>")? + 6])
}

/// Every figure id of the page.
fn figure_ids(html: &str) -> Vec<String> {
    html.match_indices("<figure id=\"")
        .map(|(i, m)| {
            let rest = &html[i + m.len()..];
            rest[..rest.find('"').unwrap()].to_string()
        })
        .collect()
}

/// An axis-aligned box: left, top, right, bottom, px.
type Bx = (f64, f64, f64, f64);

fn overlaps(a: Bx, b: Bx) -> bool {
    a.0 < b.2 && b.0 < a.2 && a.1 < b.3 && b.1 < a.3
}

fn plot_areas(els: &[El]) -> Vec<Bx> {
    els.iter()
        .filter(|e| e.name == "rect" && e.attr("class") == Some("plot-area"))
        .map(|e| (e.num("x"), e.num("y"), e.num("x") + e.num("width"), e.num("y") + e.num("height")))
        .collect()
}

/// Estimated width of a text element, px: characters × size × 0.6 (an estimate for a sans-serif
/// face, common practice, no source; the browser test measures the real glyphs).
fn text_width(e: &El, size: f64) -> f64 {
    e.text.chars().count() as f64 * size * 0.6
}

/// The box of the legend group: its swatches and its texts (11 px, centred on their y).
fn key_box(els: &[El]) -> Option<Bx> {
    let mut b: Option<Bx> = None;
    let mut add = |x0: f64, y0: f64, x1: f64, y1: f64| {
        b = Some(b.map_or((x0, y0, x1, y1), |c| (c.0.min(x0), c.1.min(y0), c.2.max(x1), c.3.max(y1))));
    };
    for e in els.iter().filter(|e| e.in_group("key")) {
        match e.name.as_str() {
            "text" => {
                let (x, y) = (e.num("x"), e.num("y"));
                add(x, y - 7.0, x + text_width(e, 11.0), y + 7.0);
            }
            "circle" => add(
                e.num("cx") - e.num("r"),
                e.num("cy") - e.num("r"),
                e.num("cx") + e.num("r"),
                e.num("cy") + e.num("r"),
            ),
            "line" => add(e.num("x1"), e.num("y1").min(e.num("y2")), e.num("x2"), e.num("y1").max(e.num("y2"))),
            "rect" => add(e.num("x"), e.num("y"), e.num("x") + e.num("width"), e.num("y") + e.num("height")),
            "polygon" | "path" => {
                // The absolute points: a polygon's list, a path's move-to points (its strokes
                // run at most 8 px from them).
                let numbers = |s: &str| -> Vec<f64> {
                    s.split(|c: char| !(c.is_ascii_digit() || c == '.' || c == '-'))
                        .filter_map(|t| t.parse().ok())
                        .collect()
                };
                let points: Vec<Vec<f64>> = match e.attr("points") {
                    Some(list) => numbers(list).chunks(2).map(<[f64]>::to_vec).collect(),
                    None => {
                        e.attr("d").unwrap().split('M').map(|seg| numbers(seg).into_iter().take(2).collect()).collect()
                    }
                };
                for xy in points.iter().filter(|c| c.len() == 2) {
                    add(xy[0] - 8.0, xy[1] - 8.0, xy[0] + 8.0, xy[1] + 8.0);
                }
            }
            _ => {}
        }
    }
    b
}

fn sixteen_bit() -> (SurveyReport, String) {
    let path = concat!(env!("CARGO_MANIFEST_DIR"), "/../boards/virtual/scenarios/bench16.toml");
    super::tests::page_of(path, &std::fs::read_to_string(path).unwrap())
}

#[test]
fn legends_sit_in_a_band_of_their_own_off_the_data() {
    let (_, html) = sixteen_bit();
    let mut checked = 0;
    for id in figure_ids(&html) {
        let Some(svg) = figure_svg(&html, &id) else { continue };
        let els = elements(svg);
        let areas = plot_areas(&els);
        if areas.is_empty() {
            continue; // the memory heat map: no axes, no legend
        }
        let key = key_box(&els).unwrap_or_else(|| panic!("{id}: a plot with a legend"));
        let root = &els[0];
        assert!(
            key.0 >= 0.0 && key.2 <= root.num("width") && key.3 <= root.num("height"),
            "{id}: legend {key:?} inside the figure"
        );
        for a in &areas {
            assert!(!overlaps(key, *a), "{id}: legend {key:?} overlaps the plot area {a:?}");
        }
        // The legend is drawn once, in the band: no entry's text inside a plot area.
        let entries: Vec<&str> =
            els.iter().filter(|e| e.in_group("key") && e.name == "text").map(|e| e.text.as_str()).collect();
        for e in els.iter().filter(|e| e.name == "text" && !e.in_group("key")) {
            assert!(!entries.contains(&e.text.as_str()), "{id}: legend text {:?} drawn outside the legend", e.text);
        }
        checked += 1;
    }
    assert!(checked >= 10, "{checked} plots checked");
}

#[test]
fn log_axes_tick_on_decades_with_si_labels() {
    let (_, html) = sixteen_bit();
    let mut checked = 0;
    for id in figure_ids(&html) {
        let Some(svg) = figure_svg(&html, &id) else { continue };
        let unit = match id.rsplit('-').next().unwrap() {
            "precharge" | "period" => "s",
            "spectrum" => "Hz",
            "r" if id.contains("bound-source") => "Ω",
            "c" if id.contains("bound-node") => "F",
            _ => continue,
        };
        let els = elements(svg);
        let bottom = plot_areas(&els).iter().map(|a| a.3).fold(f64::INFINITY, f64::min);
        // The x tick labels: texts under a plot area that read as a quantity of the unit.
        let ticks: Vec<f64> = els
            .iter()
            .filter(|e| e.name == "text" && !e.in_group("key") && e.num("y") >= bottom)
            .filter_map(|e| si_value(&e.text, unit))
            .collect();
        assert_decades(&format!("{id} x axis"), &ticks);
        if unit == "Hz" {
            // The density axis is log too: `1e-3`-style labels.
            let ys: Vec<f64> = els
                .iter()
                .filter(|e| e.name == "text" && e.text.contains('e'))
                .filter_map(|e| e.text.parse().ok())
                .collect();
            assert_decades(&format!("{id} y axis"), &ys);
        }
        checked += 1;
    }
    assert!(checked >= 8, "{checked} log axes checked");
}

#[test]
fn the_boards_sample_times_are_marked_on_the_sample_time_axis() {
    let (r, html) = sixteen_bit();
    let times = r.model.sample_times();
    let mut panels = 0;
    for p in &r.pins {
        let Some(svg) = figure_svg(&html, &format!("pin-{}-precharge", p.channel)) else { continue };
        let els = elements(svg);
        let areas = plot_areas(&els);
        // Each group of marks sits on one panel; its marks are the board's table, in place.
        let mut group: Vec<Vec<&El>> = Vec::new();
        let mut last_group_start = usize::MAX;
        for (i, e) in els.iter().enumerate() {
            if e.name == "g" && e.attr("class") == Some("sample-times") {
                group.push(Vec::new());
                last_group_start = i;
            } else if e.name == "line" && e.in_group("sample-times") && last_group_start != usize::MAX {
                group.last_mut().unwrap().push(e);
            }
        }
        assert_eq!(group.len(), areas.len(), "ch{}: marks on each sample-time panel", p.channel);
        for (lines, area) in group.iter().zip(&areas) {
            assert_eq!(lines.len(), times.len(), "ch{}: one mark per selectable sample time", p.channel);
            // On a log axis, pixels are linear in log t: fit the first and last mark and check all.
            let xs: Vec<f64> = lines.iter().map(|l| l.num("x1")).collect();
            let (t0, t1) = (times[0].log10(), times[times.len() - 1].log10());
            for (x, t) in xs.iter().zip(&times) {
                let want = xs[0] + (xs[xs.len() - 1] - xs[0]) * (t.log10() - t0) / (t1 - t0);
                assert!((x - want).abs() <= 1.5, "ch{}: mark for {t:e} s at x {x}, want {want:.1}", p.channel);
                assert!(*x >= area.0 && *x <= area.2, "ch{}: mark inside the panel", p.channel);
            }
            assert!(lines.iter().all(|l| l.num("y1") == area.3), "ch{}: marks rise from the axis", p.channel);
        }
        panels += group.len();
    }
    assert!(panels >= 4, "{panels} panels checked");
}

#[test]
fn the_converter_floor_curve_is_drawn_whole() {
    let (r, html) = super::tests::page();
    let floor_sigma = r.model.variance_floor_lsb2().sqrt();
    let mut taller_than_data = 0;
    for p in r.pins.iter().filter(|p| !p.noise_codes.is_empty()) {
        let svg = figure_svg(&html, &format!("pin-{}-histogram", p.channel)).unwrap();
        let els = elements(svg);
        let area = plot_areas(&els)[0];
        let curve = els
            .iter()
            .find(|e| e.name == "polyline" && e.attr("stroke").is_some_and(|s| s.eq_ignore_ascii_case(&hex(MODEL))))
            .expect("the floor curve");
        let pts: Vec<(f64, f64)> = curve
            .attr("points")
            .unwrap()
            .split_whitespace()
            .map(|xy| {
                let (x, y) = xy.split_once(',').unwrap();
                (x.parse().unwrap(), y.parse().unwrap())
            })
            .collect();
        let top = pts.iter().map(|q| q.1).fold(f64::INFINITY, f64::min);
        assert!(
            top > area.1 + 1.0,
            "ch{}: the floor curve's peak ({top}) is under the top of the plot ({})",
            p.channel,
            area.1
        );
        // Both tails back down to the axis: the curve is not cut at either side.
        assert!(
            pts[0].1 >= area.3 - 1.0 && pts[pts.len() - 1].1 >= area.3 - 1.0,
            "ch{}: tails reach the axis",
            p.channel
        );
        // Where the record is wider than the floor, the floor's peak is taller than the bars: the
        // case a range scaled to the bars alone would cut.
        let n = p.noise_codes.len() as f64;
        let (lo, hi) = (p.noise_codes.iter().min().unwrap(), p.noise_codes.iter().max().unwrap());
        let width = ((f64::from(hi - lo) + 1.0) / 60.0).ceil().max(1.0);
        let mut counts = std::collections::HashMap::new();
        for &c in &p.noise_codes {
            *counts.entry(((f64::from(c - lo)) / width) as i64).or_insert(0u32) += 1;
        }
        let tallest = f64::from(*counts.values().max().unwrap());
        // Normal density peak 1/(σ√(2π)) (any statistics text).
        if n * width / (floor_sigma * (2.0 * std::f64::consts::PI).sqrt()) > 1.25 * tallest {
            taller_than_data += 1;
        }
    }
    assert!(taller_than_data >= 1, "the scenario has a pin whose floor curve is taller than its readings");
}

#[test]
fn tick_labels_of_a_16_bit_board_fit_their_margin() {
    let (r, html) = sixteen_bit();
    assert_eq!(r.model.bits, 16);
    let mut longest = 0;
    for id in figure_ids(&html) {
        let Some(svg) = figure_svg(&html, &id) else { continue };
        let els = elements(svg);
        let areas = plot_areas(&els);
        let Some(left_edge) = areas.iter().map(|a| a.0).reduce(f64::min) else { continue };
        let width = els[0].num("width");
        // The rotated axis descriptions: 12 px text turned on its side, starting at its x.
        let descs: Vec<f64> = els
            .iter()
            .filter(|e| e.name == "text" && e.attr("transform").is_some_and(|t| t.starts_with("rotate")))
            .map(|e| e.num("x") + e.num("font-size"))
            .collect();
        for e in els.iter().filter(|e| e.name == "text" && !e.in_group("key")) {
            let Some(size) = e.attr("font-size").and_then(|s| s.parse::<f64>().ok()) else { continue };
            let w = text_width(e, size);
            match e.attr("text-anchor") {
                // A y tick label (right-aligned left of the plot; right-aligned notes inside the
                // plot are not): right of the description, inside the figure.
                Some("end") if e.num("x") <= left_edge => {
                    let (x, left) = (e.num("x"), e.num("x") - w);
                    longest = longest.max(e.text.chars().count());
                    assert!(left >= 0.0, "{id}: y label {:?} is cut off at the left ({left:.1} px)", e.text);
                    for d in descs.iter().filter(|&&d| d < x) {
                        assert!(
                            left >= *d,
                            "{id}: y label {:?} ({left:.1} px) overlaps the axis description (to {d:.1} px)",
                            e.text
                        );
                    }
                }
                Some("middle") if e.attr("transform").is_none() => {
                    let x = e.num("x");
                    assert!(x - w / 2.0 >= 0.0 && x + w / 2.0 <= width, "{id}: label {:?} is cut off", e.text);
                }
                _ => {}
            }
        }
    }
    assert!(longest >= 5, "the page has 16-bit codes among its labels (longest {longest} characters)");
}

#[test]
fn every_bound_the_table_prints_has_its_profile_plotted() {
    let mut bounds = 0;
    for (r, html) in [sixteen_bit(), super::tests::page()] {
        for p in &r.pins {
            for PrintedBound { id, name, param: i, interval: iv, fmt, .. } in printed_bounds(p) {
                bounds += 1;
                let svg = figure_svg(&html, &id).unwrap_or_else(|| panic!("{id}: the {name} bound has a plot"));
                let els = elements(svg);
                // The printed ends are drawn and labelled on the plot.
                for (end, sign) in [(iv.low, ">"), (iv.high, "<")] {
                    let Some(e) = end else { continue };
                    let label = format!("{sign} {}", fmt(e));
                    assert!(els.iter().any(|t| t.name == "text" && t.text == label), "{id}: {label:?} on the plot");
                }
                // The curve is the evidence: the profile crosses the 95% threshold of χ² with one
                // degree of freedom (3.841, e.g. the NIST/SEMATECH e-Handbook's table of
                // chi-square critical values) at the printed end, within the search's tolerance,
                // and stays above it past the end.
                let fit = p.fit.as_ref().unwrap();
                let input = FitInput { board: &r.model, events: &p.events };
                let threshold = 3.841 * fit.birge();
                for (end, outward) in [(iv.low, 1.0 / 1.5), (iv.high, 1.5)] {
                    let Some(e) = end else { continue };
                    let rise = profile_rise(&input, fit, i, &[e, e * outward]);
                    assert_eq!(rise.len(), 2, "{id}");
                    assert!(
                        (rise[0].1 / threshold - 1.0).abs() < 0.35,
                        "{id}: the profile at the printed end {} is {:.2}, the threshold {threshold:.2}",
                        fmt(e),
                        rise[0].1
                    );
                    assert!(
                        rise[1].1 > threshold,
                        "{id}: past the end the profile is above the threshold ({:.2})",
                        rise[1].1
                    );
                }
            }
        }
    }
    assert!(bounds >= 2, "the pages print bounds ({bounds})");
}
