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

#[test]
fn demo_report_loads_in_chromium_with_every_pin_and_a_screenshot() {
    require_chromium();
    let dir = PathBuf::from(env!("CARGO_TARGET_TMPDIR")).join("html-report");
    let _ = std::fs::remove_dir_all(&dir);
    std::fs::create_dir_all(&dir).unwrap();
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
    let dir = PathBuf::from(env!("CARGO_TARGET_TMPDIR")).join("html-compare");
    let _ = std::fs::remove_dir_all(&dir);
    std::fs::create_dir_all(&dir).unwrap();
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
