//! `ohmsight check` and `ohmsight limits --from` as a production station runs them: golden
//! units surveyed, limits proposed from them, a good and a bad unit checked (exit 0 and 1),
//! bad limits files (exit 2 with file:line), a board that never answers (exit 3), the stored
//! run of kind `check` on SQLite and PostgreSQL, the JSON document and the JUnit XML (read
//! back with the `junit-parser` crate).

// Shared with the store tests, which use more of it than this file does.
#[allow(dead_code)]
#[macro_use]
mod store_support;

use ohmsight::store::DbUrl;
use serde_json::Value;
use std::path::{Path, PathBuf};
use std::process::{Command, Output};

fn ohmsight(db: &str) -> Command {
    let mut c = Command::new(env!("CARGO_BIN_EXE_ohmsight"));
    c.env("OHMSIGHT_DB", db);
    c
}

/// A fresh folder for one test: emptied first, since a later process can be given the same id
/// as an earlier one whose folder is still there (a CI run once found a database of a local run).
fn temp_dir(name: &str) -> PathBuf {
    let dir = std::env::temp_dir().join(format!("ohmsight-check-{}-{name}", std::process::id()));
    let _ = std::fs::remove_dir_all(&dir);
    std::fs::create_dir_all(&dir).unwrap();
    dir
}

/// An invented three-pin sensor board: a 47 kΩ divider behind 15 pF, an open header pin, a
/// pin tied to the 3.3 V rail. `divider_ohms` lets a unit's resistor be off.
fn scenario(dir: &Path, name: &str, divider_ohms: f64) -> PathBuf {
    let text = format!(
        "name = \"test board {name}\"\nseed = 1\n\
         [[pin]]\nchannel = 0\nlabel = \"divider\"\nvolts = 1.42\nohms = {divider_ohms:e}\nnode_farads = 15e-12\n\
         [[pin]]\nchannel = 1\nlabel = \"open header\"\nfloating = true\nnode_farads = 8e-12\n\
         [[pin]]\nchannel = 2\nlabel = \"3V3 sense\"\nvolts = 3.3\nohms = 100\n"
    );
    let path = dir.join(format!("{name}.toml"));
    std::fs::write(&path, text).unwrap();
    path
}

fn stdout(out: &Output) -> String {
    String::from_utf8_lossy(&out.stdout).into_owned()
}

fn stderr(out: &Output) -> String {
    String::from_utf8_lossy(&out.stderr).into_owned()
}

/// Surveys two golden units (seeds) and returns their run ids (two keep the test short; a
/// station would use more).
fn golden_runs(db: &str, good: &Path) -> Vec<String> {
    (11..13)
        .map(|seed| {
            let out = ohmsight(db)
                .args(["survey", "--json", "--quiet", "--seed", &seed.to_string(), "--scenario"])
                .arg(good)
                .output()
                .unwrap();
            assert!(out.status.success(), "golden survey: {}", stderr(&out));
            let doc: Value = serde_json::from_slice(&out.stdout).unwrap();
            doc["run"]["id"].as_str().unwrap().to_string()
        })
        .collect()
}

/// The whole station flow on one database: golden units → limits → a good and a bad unit.
fn station_flow(db: &store_support::TestDb) {
    let url = match &db.url {
        DbUrl::Sqlite(path) => path.display().to_string(),
        DbUrl::Postgres(url) => url.clone(),
    };
    let dir = temp_dir(db.backend);
    let good = scenario(&dir, "good", 47e3);
    let bad = scenario(&dir, "bad", 68e3);
    let runs = golden_runs(&url, &good);

    // Fewer than two runs: refused, exit 2.
    let one = ohmsight(&url).args(["limits", "--from", &runs[0]]).output().unwrap();
    assert_eq!(one.status.code(), Some(2), "{}", stderr(&one));
    assert!(stderr(&one).contains("at least two"), "{}", stderr(&one));

    let limits = dir.join("limits.toml");
    let out = ohmsight(&url).args(["limits", "--out"]).arg(&limits).arg("--from").args(&runs).output().unwrap();
    assert!(out.status.success(), "limits --from: {}", stderr(&out));
    let text = std::fs::read_to_string(&limits).unwrap();
    // The file reads back as limits, names each pin by its label, and limits what the golden
    // units share: the divider's resistance, the open pin's verdict, the rail.
    let parsed = ohmsight::limits::parse("limits.toml", &text).unwrap_or_else(|e| panic!("{e}\n{text}"));
    assert_eq!(parsed.pins.len(), 3, "{text}");
    assert_eq!(parsed.pins[0].pin.label.as_deref(), Some("divider"));
    let rs = parsed.pins[0].source_ohms.expect("a source_ohms limit on the divider");
    assert!(rs.contains(47e3) && !rs.contains(68e3), "{rs:?}");
    assert_eq!(parsed.pins[1].verdict.map(|v| v.as_str()), Some("floating"), "{text}");
    assert_eq!(parsed.pins[2].verdict.map(|v| v.as_str()), Some("at-rail"), "{text}");
    assert_eq!(parsed.from_runs, runs);

    // A good unit (another seed) passes: exit 0, JSON result pass.
    let junit_good = dir.join("good.xml");
    let out = ohmsight(&url)
        .args(["check", "--json", "--quiet", "--unit", "SN-GOOD-1", "--seed", "21", "--limits"])
        .arg(&limits)
        .arg("--scenario")
        .arg(&good)
        .arg("--junit")
        .arg(&junit_good)
        .output()
        .unwrap();
    let doc: Value = serde_json::from_slice(&out.stdout).unwrap_or_else(|e| panic!("{e}: {}", stderr(&out)));
    assert_eq!(out.status.code(), Some(0), "{doc:#}\n{}", stderr(&out));
    assert_eq!(doc["schema"], "ohmsight.check.v1");
    assert_eq!(doc["result"], "pass");
    assert_eq!(doc["unit"], "SN-GOOD-1");
    for pin in doc["pins"].as_array().unwrap() {
        for l in pin["limits"].as_array().unwrap() {
            for key in ["limit", "outcome", "measured", "measured_low", "measured_high", "limit_low", "limit_high"] {
                assert!(l.get(key).is_some(), "{key} missing in {l}");
            }
            assert_eq!(l["outcome"], "pass", "{l}");
        }
    }
    let good_id = doc["run"]["id"].as_str().unwrap().to_string();

    // A bad unit (the divider's resistor 68 kΩ instead of 47 kΩ) fails: exit 1, the failing
    // limit named on stderr, in the text and in the JUnit file.
    let junit_bad = dir.join("bad.xml");
    let out = ohmsight(&url)
        .args(["check", "--unit", "SN-BAD-1", "--limits"])
        .arg(&limits)
        .arg("--scenario")
        .arg(&bad)
        .arg("--junit")
        .arg(&junit_bad)
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(1), "{}\n{}", stdout(&out), stderr(&out));
    assert!(stdout(&out).contains("ch0 ") && stdout(&out).contains("FAIL"), "{}", stdout(&out));
    assert!(stderr(&out).contains("ch0 source_ohms"), "{}", stderr(&out));

    // JUnit, read back by an independent parser: one suite per unit, a case per pin and limit,
    // the failure with the measured value and the limit.
    let suites = junit_parser::from_reader(std::io::BufReader::new(std::fs::File::open(&junit_bad).unwrap())).unwrap();
    assert_eq!(suites.suites.len(), 1);
    let suite = &suites.suites[0];
    assert!(suite.name.contains("SN-BAD-1"), "{}", suite.name);
    let cases: usize = parsed.pins.iter().map(|p| p.kinds().len()).sum();
    assert_eq!(suite.cases.len(), cases);
    assert_eq!(suite.tests as usize, cases);
    let failing: Vec<_> = suite.cases.iter().filter(|c| c.status.is_failure()).collect();
    assert_eq!(suite.failures as usize, failing.len());
    let rs_case = suite.cases.iter().find(|c| c.original_name == "ch0 source_ohms").expect("a ch0 source_ohms case");
    assert_eq!(rs_case.classname.as_deref(), Some("virtual"), "classname: the board");
    let junit_parser::TestStatus::Failure(f) = &rs_case.status else { panic!("ch0 source_ohms passed: {rs_case:?}") };
    assert!(f.message.contains("kΩ") && f.message.contains('…'), "measured value and limit: {}", f.message);
    let good_suites =
        junit_parser::from_reader(std::io::BufReader::new(std::fs::File::open(&junit_good).unwrap())).unwrap();
    assert_eq!(good_suites.suites[0].failures, 0);
    assert!(good_suites.suites[0].cases.iter().all(|c| c.status.is_success()));

    // Stored: kind check, the serial, the result and every limit's row.
    let mut store = db.open();
    let record = store.load_run(&good_id).unwrap();
    assert_eq!(record.run.kind, ohmsight::record::RunKind::Check);
    let check = store.load_check(&good_id).unwrap().expect("the check's outcome is stored");
    assert_eq!((check.unit_serial.as_str(), check.result.as_str()), ("SN-GOOD-1", "pass"));
    assert_eq!(check.limits.len(), cases);
    assert_eq!(check.limits_toml, text);
    let filter = ohmsight::store::RunFilter { kind: Some(ohmsight::record::RunKind::Check), ..Default::default() };
    assert_eq!(store.list_runs(&filter).unwrap().len(), 2, "the two checks, not the surveys");
    // Plain SQL sees the rows (the later `history stats` reads them so).
    let fails = db.texts("SELECT limit_name FROM check_limits JOIN checks USING (run_id) WHERE checks.unit_serial = 'SN-BAD-1' AND outcome <> 'pass' ORDER BY ordinal");
    assert!(fails.iter().any(|l| l == "source_ohms"), "{fails:?}");
}

on_both_backends!(station_flow);

#[test]
fn bad_limits_files_exit_2_with_file_and_line() {
    let dir = temp_dir("bad");
    let db = dir.join("runs.db").display().to_string();
    let cases = [
        ("unknown-key.toml", "name = \"x\"\n[[pin]]\nchannel = 0\nsource_ohm = [1e3, 2e3]\n", 4),
        ("reversed.toml", "name = \"x\"\n[[pin]]\nchannel = 0\nsource_ohms = [2e3, 1e3]\n", 4),
        // A channel the board lacks (the demo has no channel 14 pin): found after the handshake.
        ("no-channel.toml", "name = \"x\"\n\n[[pin]]\nchannel = 14\nverdict = \"driven\"\n", 3),
    ];
    for (name, text, line) in cases {
        let path = dir.join(name);
        std::fs::write(&path, text).unwrap();
        let out = ohmsight(&db).args(["check", "--quiet", "--limits"]).arg(&path).output().unwrap();
        assert_eq!(out.status.code(), Some(2), "{name}: {}", stderr(&out));
        let want = format!("{}:{line}", path.display());
        assert!(stderr(&out).contains(&want), "{name}: wants {want} in {}", stderr(&out));
    }
    let out = ohmsight(&db).args(["check", "--limits", "/nonexistent/limits.toml"]).output().unwrap();
    assert_eq!(out.status.code(), Some(2), "{}", stderr(&out));
}

#[cfg(unix)]
#[test]
fn a_board_that_never_answers_is_no_verdict_exit_3_and_stays_stored() {
    // A pseudo-terminal whose far side is held open and never answers: the handshake fails.
    let (mut master, mut slave) = (0, 0);
    // SAFETY: openpty writes two descriptors into the given integers; the name, termios and
    // window size are optional and passed as null.
    let rc =
        unsafe { libc::openpty(&mut master, &mut slave, std::ptr::null_mut(), std::ptr::null(), std::ptr::null()) };
    assert_eq!(rc, 0);
    // SAFETY: `slave` is a descriptor openpty just returned.
    let name = unsafe { std::ffi::CStr::from_ptr(libc::ttyname(slave)) }.to_string_lossy().into_owned();
    let dir = temp_dir("silent");
    let db = dir.join("runs.db").display().to_string();
    let limits = dir.join("l.toml");
    std::fs::write(&limits, "name = \"x\"\n[[pin]]\nchannel = 0\nverdict = \"driven\"\n").unwrap();
    let junit = dir.join("silent.xml");
    let out = ohmsight(&db)
        .args(["check", "--json", "--quiet", "--port", &name, "--limits"])
        .arg(&limits)
        .arg("--junit")
        .arg(&junit)
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(3), "{}", stderr(&out));
    let doc: Value = serde_json::from_slice(&out.stdout).unwrap();
    assert_eq!(doc["result"], "error");
    assert!(doc["error"].is_string());
    let suites = junit_parser::from_reader(std::io::BufReader::new(std::fs::File::open(&junit).unwrap())).unwrap();
    assert_eq!(suites.suites[0].errors, 1);
    // The attempt is stored, of kind check, with its fault.
    let list = ohmsight(&db).args(["history", "--json", "--kind", "check"]).output().unwrap();
    let list: Value = serde_json::from_slice(&list.stdout).unwrap();
    let runs = list["runs"].as_array().unwrap();
    assert_eq!(runs.len(), 1, "{list:#}");
    assert!(runs[0]["fault"].is_string());
    // SAFETY: closing the descriptors openpty returned, once.
    unsafe {
        libc::close(master);
        libc::close(slave);
    }
}

/// A stiff buffer (100 Ω behind 10 pF) settles within the shortest sample time, so its readings
/// bound the source only for a node below a stated size: a check that passes on that bound
/// says so on the pin's line and in the JSON, and a `mains_hz` file is accepted.
#[test]
fn a_pass_on_a_stiff_sources_bound_states_its_assumption() {
    let dir = temp_dir("stiff");
    let db = dir.join("runs.db").display().to_string();
    let sc = dir.join("buffer.toml");
    std::fs::write(
        &sc,
        "name = \"buffered reference\"\nseed = 3\n[[pin]]\nchannel = 0\nlabel = \"buffer\"\nvolts = 0.3\nohms = 100\nnode_farads = 10e-12\n",
    )
    .unwrap();
    let limits = dir.join("limits.toml");
    std::fs::write(
        &limits,
        "name = \"buffer\"\nmains_hz = 50\n[[pin]]\nchannel = 0\nverdict = \"driven\"\nsource_ohms = { high = 5e3 }\nhum = false\n",
    )
    .unwrap();
    let out = ohmsight(&db).args(["check", "--scenario"]).arg(&sc).arg("--limits").arg(&limits).output().unwrap();
    assert_eq!(out.status.code(), Some(0), "{}{}", stdout(&out), stderr(&out));
    let line = stdout(&out).lines().find(|l| l.starts_with("ch0")).unwrap_or_default().to_string();
    assert!(line.contains("PASS") && line.contains("node below 2.00 µF"), "{line}");
    let out =
        ohmsight(&db).args(["check", "--json", "--scenario"]).arg(&sc).arg("--limits").arg(&limits).output().unwrap();
    let doc: Value = serde_json::from_slice(&out.stdout).unwrap();
    let pin_limits = doc["pins"][0]["limits"].as_array().unwrap();
    for key in ["verdict", "source_ohms"] {
        let l = pin_limits.iter().find(|l| l["limit"] == key).unwrap();
        assert_eq!(l["outcome"], "pass", "{l}");
        assert!(l["measured_text"].as_str().unwrap().contains("if C < 2.00 µF"), "{l}");
    }
}

/// A check reads the noise of many pins in one scan record, each reading right after a
/// precharge conversion: mains hum on one pin is found there and nowhere else, not even on the
/// high-impedance pin read right after it. Without the precharge the hold capacitor carries
/// the hummy pin's reading into the next one: 4 pF shared with 10 pF at the node, recovering
/// through 1 MΩ (τ = 14 µs) for the longest sample time (22.9 µs), leaves about 6% of it, some
/// 2 LSB of hum. (Converting the previous pin in place of the precharge fails this test.)
#[test]
fn one_scan_reads_every_pins_noise_and_keeps_one_pins_hum_to_itself() {
    let dir = temp_dir("scan");
    let db = store_support::sqlite();
    let DbUrl::Sqlite(path) = &db.url else { unreachable!() };
    let sc = dir.join("hum.toml");
    std::fs::write(
        &sc,
        "name = \"pump controller (invented)\"\nseed = 5\n\
         [[pin]]\nchannel = 0\nlabel = \"mains sense\"\nvolts = 1.2\nohms = 1e3\nnode_farads = 10e-12\nhum_volts = 0.03\nhum_hz = 50\n\
         [[pin]]\nchannel = 1\nlabel = \"thermistor\"\nvolts = 0.8\nohms = 1e6\nnode_farads = 10e-12\n\
         [[pin]]\nchannel = 2\nlabel = \"divider\"\nvolts = 2.0\nohms = 1e4\nnode_farads = 10e-12\n",
    )
    .unwrap();
    let limits = dir.join("limits.toml");
    let mut text = String::from("name = \"no hum\"\nmains_hz = 50\n");
    for ch in 0..3 {
        text += &format!("[[pin]]\nchannel = {ch}\nhum = false\nnoise_lsb_max = 3.0\n");
    }
    std::fs::write(&limits, text).unwrap();
    let out = ohmsight(&path.display().to_string())
        .args(["check", "--json", "--scenario"])
        .arg(&sc)
        .arg("--limits")
        .arg(&limits)
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(1), "{}{}", stdout(&out), stderr(&out));
    let doc: Value = serde_json::from_slice(&out.stdout).unwrap();
    let outcome = |ch: usize, key: &str| {
        let l = doc["pins"][ch]["limits"].as_array().unwrap().iter().find(|l| l["limit"] == key).cloned().unwrap();
        l["outcome"].as_str().unwrap().to_string()
    };
    // 30 mV of 50 Hz is about 37 LSB on this 12-bit, 3.3 V board: far beyond "no hum".
    assert_eq!(outcome(0, "hum"), "fail");
    assert_eq!((outcome(1, "hum"), outcome(2, "hum")), ("pass".into(), "pass".into()));
    assert_eq!((outcome(1, "noise_lsb_max"), outcome(2, "noise_lsb_max")), ("pass".into(), "pass".into()));
    // The three noise readings were one experiment on the board.
    let kinds = db.texts("SELECT kind FROM experiments WHERE purpose = 'noise'");
    assert_eq!(kinds, ["scan-record"], "{kinds:?}");
    let pins = db.texts("SELECT COALESCE(CAST(pin AS TEXT), 'NULL') FROM experiments WHERE kind = 'scan-record'");
    assert_eq!(pins, ["NULL"], "a scan belongs to no one pin");
}
