//! The HTML report in a real browser: headless Chromium (Debian's `chromium`) loads the page the
//! binary wrote for the demo board, finds every pin section and plot in the DOM it built, logs no
//! console message, and takes a screenshot (written under the target directory; its path is
//! printed).
//!
//! Chromium is required: a machine without it fails this test with a message saying what to
//! install (CI installs the Debian package `chromium`).

use std::path::PathBuf;
use std::process::Command;

mod browser_support;

use browser_support::{png_size, require_chromium, run_chromium};

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
    let dom = run_chromium(&dir.join("profile"), &page, &["--dump-dom"]);
    assert!(dom.status.success(), "chromium --dump-dom failed: {}", String::from_utf8_lossy(&dom.stderr));
    let text = String::from_utf8_lossy(&dom.stdout);
    assert!(text.contains("id=\"report-end\""), "the page loaded to its end");
    for ch in &channels {
        assert!(text.contains(&format!("id=\"pin-{ch}\"")), "pin {ch} has a section");
        for plot in ["precharge", "period", "histogram", "spectrum", "memory"] {
            assert!(text.contains(&format!("id=\"pin-{ch}-{plot}\"")), "pin {ch} has its {plot} figure");
        }
    }
    assert_eq!(text.matches("<svg").count(), html.matches("<svg").count(), "every inline SVG is in the DOM");
    assert!(html.matches("<svg").count() >= 4 * channels.len(), "most pins have most plots drawn");
    // No script, so no console output at all: a message here means the page did something.
    let log = String::from_utf8_lossy(&dom.stderr);
    let console: Vec<&str> = log.lines().filter(|l| l.contains(":CONSOLE")).collect();
    assert!(console.is_empty(), "console messages: {console:#?}");

    // The screenshot, kept in the target directory (CI keeps it as an artefact).
    let shot = dir.join("report-demo.png");
    let run = run_chromium(
        &dir.join("profile"),
        &page,
        &[&format!("--screenshot={}", shot.display()), "--window-size=1200,3000"],
    );
    assert!(run.status.success(), "chromium --screenshot failed: {}", String::from_utf8_lossy(&run.stderr));
    let png = std::fs::read(&shot).expect("a screenshot file");
    assert_eq!(png_size(&png), (1200, 3000));
    // A blank page compresses to a few kilobytes; tables and plots do not.
    assert!(png.len() > 100_000, "the screenshot holds a drawn page ({} bytes)", png.len());
    println!("screenshot of the demo report: {}", shot.display());
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
