//! The HTML report in a real browser: headless Chromium (Debian's `chromium`) loads the page the
//! binary wrote for the demo board, finds every pin section and plot in the DOM it built, logs no
//! console message, and takes a screenshot (written under the target directory; its path is
//! printed).
//!
//! Chromium is required: a machine without it fails this test with a message saying what to
//! install (CI installs the Debian package `chromium`).

use std::path::{Path, PathBuf};
use std::process::Command;

mod browser_support;

use browser_support::{png_size, require_chromium, run_chromium};

/// The DOM headless Chromium builds from `page`, checked: it loaded to the footer and logged no
/// console message (the pages have no script, so a message means the page did something).
fn loaded_dom(dir: &Path, page: &Path) -> String {
    let dom = run_chromium(&dir.join("profile"), page, &["--dump-dom"]);
    assert!(dom.status.success(), "chromium --dump-dom failed: {}", String::from_utf8_lossy(&dom.stderr));
    let text = String::from_utf8_lossy(&dom.stdout).into_owned();
    assert!(text.contains("id=\"report-end\""), "the page loaded to its end");
    let log = String::from_utf8_lossy(&dom.stderr);
    let console: Vec<&str> = log.lines().filter(|l| l.contains(":CONSOLE")).collect();
    assert!(console.is_empty(), "console messages: {console:#?}");
    text
}

/// A `w`×`h` screenshot of `page` into `shot`, checked to be that size and to hold more than
/// `min_bytes` of PNG (a blank page compresses to a few kilobytes; tables and plots do not).
fn screenshot(dir: &Path, page: &Path, shot: &Path, (w, h): (u32, u32), min_bytes: usize) {
    let run = run_chromium(
        &dir.join("profile"),
        page,
        &[&format!("--screenshot={}", shot.display()), &format!("--window-size={w},{h}")],
    );
    assert!(run.status.success(), "chromium --screenshot failed: {}", String::from_utf8_lossy(&run.stderr));
    let png = std::fs::read(shot).expect("a screenshot file");
    assert_eq!(png_size(&png), (w, h));
    assert!(png.len() > min_bytes, "the screenshot holds a drawn page ({} bytes)", png.len());
    println!("screenshot: {}", shot.display());
}

/// An empty directory `name` under the target directory for one test's files.
fn fresh_dir(name: &str) -> PathBuf {
    let dir = PathBuf::from(env!("CARGO_TARGET_TMPDIR")).join(name);
    let _ = std::fs::remove_dir_all(&dir);
    std::fs::create_dir_all(&dir).unwrap();
    dir
}

#[test]
fn demo_report_loads_in_chromium_with_every_pin_and_a_screenshot() {
    require_chromium();
    let dir = fresh_dir("html-report");
    let page = dir.join("report-demo.html");

    let out = Command::new(env!("CARGO_BIN_EXE_ohmsight"))
        .args(["survey", "--no-store", "--json", "--quiet", "--html"])
        .arg(&page)
        .output()
        .unwrap();
    assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
    let doc: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    let channels: Vec<u64> = doc["pins"].as_array().unwrap().iter().map(|p| p["channel"].as_u64().unwrap()).collect();
    assert!(channels.len() >= 8);
    let html = std::fs::read_to_string(&page).unwrap();
    assert!(!dir.join("report-demo.html.part").exists(), "the page was written whole");

    // The DOM Chromium built: the whole page parsed, every pin and plot in it.
    let text = loaded_dom(&dir, &page);
    for ch in &channels {
        assert!(text.contains(&format!("id=\"pin-{ch}\"")), "pin {ch} has a section");
        for plot in ["precharge", "period", "histogram", "spectrum", "memory"] {
            assert!(text.contains(&format!("id=\"pin-{ch}-{plot}\"")), "pin {ch} has its {plot} figure");
        }
    }
    assert_eq!(text.matches("<svg").count(), html.matches("<svg").count(), "every inline SVG is in the DOM");
    assert!(html.matches("<svg").count() >= 4 * channels.len(), "most pins have most plots drawn");

    // The screenshot, kept in the target directory (CI keeps it as an artefact).
    screenshot(&dir, &page, &dir.join("report-demo.png"), (1200, 3000), 100_000);
}

/// Measures, in Chromium's layout, every plot of `page`: a copy of the page with a script
/// appended (the page itself has none) writes the boxes of each SVG, its plot areas, its legend
/// and its texts, relative to the SVG's drawing, into a `<pre>` the dumped DOM carries.
fn measured_plots(dir: &Path, page: &Path) -> Vec<Measured> {
    const MEASURE: &str = r#"<script>
(function () {
  var out = [];
  document.querySelectorAll('figure[id] > svg').forEach(function (svg) {
    var id = svg.parentNode.id, s = svg.getBoundingClientRect();
    var x0 = s.left + svg.clientLeft, y0 = s.top + svg.clientTop;
    function box(r) { return [r.left - x0, r.top - y0, r.right - x0, r.bottom - y0].map(function (v) { return v.toFixed(2); }).join(' '); }
    out.push(['svg', id, [0, 0, svg.clientWidth, svg.clientHeight].join(' '), '-'].join('\t'));
    svg.querySelectorAll('rect.plot-area').forEach(function (r) { out.push(['area', id, box(r.getBoundingClientRect()), '-'].join('\t')); });
    svg.querySelectorAll('g.key').forEach(function (g) { out.push(['key', id, box(g.getBoundingClientRect()), '-'].join('\t')); });
    svg.querySelectorAll('text').forEach(function (t) {
      if (t.closest('g.key')) { return; }
      out.push(['text', id, box(t.getBoundingClientRect()), encodeURIComponent(t.textContent.trim())].join('\t'));
    });
  });
  var pre = document.createElement('pre');
  pre.id = 'measured';
  pre.textContent = out.join('\n');
  document.body.appendChild(pre);
})();
</script>"#;
    let html = std::fs::read_to_string(page).unwrap();
    assert!(!html.contains("<script"), "the page itself has no script");
    let copy = dir.join("measure.html");
    std::fs::write(&copy, html.replace("</body>", &format!("{MEASURE}</body>"))).unwrap();
    let dom = loaded_dom(dir, &copy);
    let start = dom.find("<pre id=\"measured\">").expect("the measuring script ran") + "<pre id=\"measured\">".len();
    let end = start + dom[start..].find("</pre>").unwrap();
    dom[start..end]
        .lines()
        .map(|line| {
            let f: Vec<&str> = line.split('\t').collect();
            let b: Vec<f64> = f[2].split(' ').map(|v| v.parse().unwrap()).collect();
            Measured {
                kind: f[0].into(),
                figure: f[1].into(),
                bx: (b[0], b[1], b[2], b[3]),
                text: percent_decoded(f[3]),
            }
        })
        .collect()
}

/// One measured box: what it is (`svg`, `area`, `key` or `text`), its figure, left, top,
/// right, bottom in px from the SVG's top left, and a text's content.
struct Measured {
    kind: String,
    figure: String,
    bx: (f64, f64, f64, f64),
    text: String,
}

/// `encodeURIComponent`'s output decoded.
fn percent_decoded(s: &str) -> String {
    let b = s.as_bytes();
    let mut out = Vec::new();
    let mut i = 0;
    while i < b.len() {
        if b[i] == b'%' && i + 2 < b.len() {
            out.push(u8::from_str_radix(&s[i + 1..i + 3], 16).unwrap());
            i += 3;
        } else {
            out.push(b[i]);
            i += 1;
        }
    }
    String::from_utf8(out).unwrap()
}

fn overlap((a0, a1, a2, a3): (f64, f64, f64, f64), (b0, b1, b2, b3): (f64, f64, f64, f64), slack: f64) -> bool {
    a0 + slack < b2 && b0 + slack < a2 && a1 + slack < b3 && b1 + slack < a3
}

#[test]
fn sixteen_bit_plots_keep_legends_and_labels_clear_in_chromium() {
    require_chromium();
    let dir = fresh_dir("html-16-bit");
    let page = dir.join("bench16.html");
    let scenario = PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("../boards/virtual/scenarios/bench16.toml");
    let out = Command::new(env!("CARGO_BIN_EXE_ohmsight"))
        .args(["survey", "--no-store", "--json", "--quiet", "--scenario"])
        .arg(&scenario)
        .arg("--html")
        .arg(&page)
        .output()
        .unwrap();
    assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
    let doc: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();

    // A plot behind every bound the table prints (an interval with no estimate).
    let dom = loaded_dom(&dir, &page);
    let mut bounds = 0;
    for p in doc["pins"].as_array().unwrap() {
        let ch = p["channel"].as_u64().unwrap();
        for (key, slug) in [("source_ohms", "source-r"), ("node_farads", "node-c")] {
            let iv = &p[key];
            if iv["estimate"].is_null() && (iv["low"].is_number() || iv["high"].is_number()) {
                assert!(
                    dom.contains(&format!("id=\"pin-{ch}-bound-{slug}\"><svg")),
                    "ch{ch} {key}: its bound has a plot"
                );
                bounds += 1;
            }
        }
    }
    assert!(bounds >= 2, "the 16-bit board's table prints bounds ({bounds})");

    let boxes = measured_plots(&dir, &page);
    let mut plots = 0;
    let figures: Vec<&str> = boxes.iter().filter(|m| m.kind == "svg").map(|m| m.figure.as_str()).collect();
    for fig in figures {
        let of = |kind: &'static str| boxes.iter().filter(move |m| m.figure == fig && m.kind == kind);
        let svg = of("svg").next().unwrap().bx;
        let areas: Vec<_> = of("area").map(|m| m.bx).collect();
        if areas.is_empty() {
            continue; // the memory heat map
        }
        plots += 1;
        // The legend: in the figure, clear of every plot area.
        let keys: Vec<_> = of("key").map(|m| m.bx).collect();
        assert_eq!(keys.len(), 1, "{fig}: one legend");
        assert!(
            keys[0].0 >= 0.0 && keys[0].2 <= svg.2 && keys[0].3 <= svg.3,
            "{fig}: legend {:?} inside the figure",
            keys[0]
        );
        for a in &areas {
            assert!(!overlap(keys[0], *a, 0.0), "{fig}: legend {:?} over the plot area {a:?}", keys[0]);
        }
        // Every label whole inside the figure, and no two labels on top of each other.
        let texts: Vec<&Measured> = of("text").collect();
        for t in &texts {
            let b = t.bx;
            assert!(
                b.0 >= -0.5 && b.1 >= -0.5 && b.2 <= svg.2 + 0.5 && b.3 <= svg.3 + 0.5,
                "{fig}: label {:?} at {b:?} is cut off (figure {svg:?})",
                t.text
            );
        }
        for (i, a) in texts.iter().enumerate() {
            for b in &texts[i + 1..] {
                assert!(
                    !overlap(a.bx, b.bx, 1.0),
                    "{fig}: labels {:?} {:?} and {:?} {:?} overlap",
                    a.text,
                    a.bx,
                    b.text,
                    b.bx
                );
            }
        }
    }
    assert!(plots >= 12, "{plots} plots measured");
    screenshot(&dir, &page, &dir.join("bench16.png"), (1200, 2400), 100_000);
}

#[test]
fn a_page_that_cannot_be_written_is_bad_input_after_the_table() {
    let dir = PathBuf::from(env!("CARGO_TARGET_TMPDIR")).join("html-report-missing");
    let _ = std::fs::remove_dir_all(&dir);
    let page = dir.join("no-such-folder").join("r.html");
    let out = Command::new(env!("CARGO_BIN_EXE_ohmsight"))
        .args(["survey", "--no-store", "--quiet", "--channel", "3", "--html"])
        .arg(&page)
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2), "{}", String::from_utf8_lossy(&out.stderr));
    let stdout = String::from_utf8_lossy(&out.stdout);
    assert!(stdout.contains("light sensor buffer"), "the table is printed first: {stdout}");
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert!(stderr.contains(&page.display().to_string()), "the error names the path: {stderr}");
    assert!(!page.exists());
}

#[test]
fn compare_page_loads_in_chromium_with_a_plot_per_change() {
    require_chromium();
    let dir = fresh_dir("html-compare");
    // Two pins of the invented CF-4 unit, before and after its NTC connector corroded and its
    // leaf-wetness filter capacitor went.
    let scenarios = PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("../boards/virtual/scenarios");
    let survey = |scenario: &str, file: &str| {
        let out = Command::new(env!("CARGO_BIN_EXE_ohmsight"))
            .args(["survey", "--no-store", "--json", "--quiet", "--channel", "1", "--channel", "2", "--scenario"])
            .arg(scenarios.join(scenario))
            .output()
            .unwrap();
        assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
        let path = dir.join(file);
        std::fs::write(&path, &out.stdout).unwrap();
        path
    };
    let before = survey("coldframe.toml", "before.json");
    let after = survey("coldframe-worn.toml", "after.json");
    let page = dir.join("compare.html");
    let out = Command::new(env!("CARGO_BIN_EXE_ohmsight"))
        .args(["compare", "--quiet", "--json", "--baseline"])
        .arg(&before)
        .arg("--run")
        .arg(&after)
        .arg("--html")
        .arg(&page)
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(1), "{}", String::from_utf8_lossy(&out.stderr));
    let doc: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    let changes: Vec<(u64, usize)> = doc["pins"]
        .as_array()
        .unwrap()
        .iter()
        .flat_map(|p| (0..p["changes"].as_array().unwrap().len()).map(|i| (p["channel"].as_u64().unwrap(), i)))
        .collect();
    assert!(changes.len() >= 2, "{doc:#}");

    let text = loaded_dom(&dir, &page);
    assert!(text.contains("id=\"summary\""), "the table of changes");
    for (ch, i) in &changes {
        assert!(text.contains(&format!("id=\"pin-{ch}-change-{i}\"><svg")), "ch{ch} change {i} has its plot");
    }
    let html = std::fs::read_to_string(&page).unwrap();
    assert_eq!(text.matches("<svg").count(), html.matches("<svg").count(), "every inline SVG is in the DOM");
    assert_eq!(html.matches("<svg").count(), changes.len(), "one plot per change");
    screenshot(&dir, &page, &dir.join("compare.png"), (1200, 1100), 30_000);
}
