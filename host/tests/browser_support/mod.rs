//! Headless Chromium for the tests of HTML pages (Debian's `chromium`; override with
//! `OHMSIGHT_CHROMIUM`): run it on a page with a timeout, read a screenshot's size.

use std::path::Path;
use std::process::{Command, Output, Stdio};
use std::time::{Duration, Instant};

/// What Chromium is called as (override with `OHMSIGHT_CHROMIUM`).
pub fn chromium() -> String {
    std::env::var("OHMSIGHT_CHROMIUM").unwrap_or_else(|_| "chromium".into())
}

/// Fails the test, saying what to install, when there is no Chromium to run.
pub fn require_chromium() {
    let found = Command::new(chromium()).arg("--version").stdout(Stdio::null()).stderr(Stdio::null()).status();
    assert!(
        found.is_ok_and(|s| s.success()),
        "`{}` was not found: this test needs a headless browser; install it (Debian/Ubuntu: \
         `apt-get install chromium`) or point OHMSIGHT_CHROMIUM at one",
        chromium()
    );
}

/// Runs headless Chromium on `page` with `args`, killing it after two minutes.
pub fn run_chromium(profile: &Path, page: &Path, args: &[&str]) -> Output {
    let mut child = Command::new(chromium())
        .args(["--headless", "--no-sandbox", "--disable-gpu", "--hide-scrollbars", "--enable-logging=stderr", "--v=0"])
        .arg(format!("--user-data-dir={}", profile.display()))
        .args(args)
        .arg(format!("file://{}", page.display()))
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .expect("chromium starts");
    let started = Instant::now();
    // Read the pipes on threads so a large DOM cannot fill a pipe and stall the browser.
    let mut out_pipe = child.stdout.take().unwrap();
    let mut err_pipe = child.stderr.take().unwrap();
    let out = std::thread::spawn(move || {
        let mut v = Vec::new();
        std::io::Read::read_to_end(&mut out_pipe, &mut v).map(|_| v)
    });
    let err = std::thread::spawn(move || {
        let mut v = Vec::new();
        std::io::Read::read_to_end(&mut err_pipe, &mut v).map(|_| v)
    });
    let status = loop {
        if let Some(s) = child.try_wait().unwrap() {
            break s;
        }
        if started.elapsed() > Duration::from_secs(120) {
            let _ = child.kill();
            panic!("chromium did not finish within two minutes on {}", page.display());
        }
        std::thread::sleep(Duration::from_millis(100));
    };
    Output { status, stdout: out.join().unwrap().unwrap(), stderr: err.join().unwrap().unwrap() }
}

/// Width and height from a PNG's IHDR chunk.
pub fn png_size(bytes: &[u8]) -> (u32, u32) {
    assert_eq!(&bytes[..8], b"\x89PNG\r\n\x1a\n", "a PNG signature");
    assert_eq!(&bytes[12..16], b"IHDR");
    let be = |i: usize| u32::from_be_bytes([bytes[i], bytes[i + 1], bytes[i + 2], bytes[i + 3]]);
    (be(16), be(20))
}
