//! `ohmsight calibrate` as a user meets it: calibrate the invented off-datasheet logger of
//! `boards/virtual/scenarios/offsheet.toml` (hold capacitor 1.3×, switch 0.7× the declared
//! values) with its two fixture pins, then survey it: the survey uses the calibration and says
//! so, `--uncalibrated` and `--profile` choose otherwise, and bad input is refused before the
//! board is touched.

use serde_json::Value;
use std::path::{Path, PathBuf};
use std::process::{Command, Output};

fn ohmsight() -> Command {
    Command::new(env!("CARGO_BIN_EXE_ohmsight"))
}

fn offsheet() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("../boards/virtual/scenarios/offsheet.toml")
}

fn run(db: &Path, args: &[&str]) -> Output {
    ohmsight().args(args).arg("--db").arg(db).arg("--scenario").arg(offsheet()).output().unwrap()
}

fn json(out: &Output) -> Value {
    assert!(out.status.success(), "exit {:?}: {}", out.status.code(), String::from_utf8_lossy(&out.stderr));
    serde_json::from_slice(&out.stdout).unwrap()
}

fn stderr(out: &Output) -> String {
    String::from_utf8_lossy(&out.stderr).into_owned()
}

/// A pin's source-resistance estimate in a survey document.
fn source_ohms(doc: &Value, ch: u64) -> f64 {
    let pin = doc["pins"].as_array().unwrap().iter().find(|p| p["channel"] == ch).unwrap();
    pin["source_ohms"]["estimate"].as_f64().unwrap_or_else(|| panic!("ch{ch}: {pin:#}"))
}

#[test]
fn a_calibrated_unit_is_surveyed_with_its_calibration() {
    let dir = tempfile::tempdir().unwrap();
    let db = dir.path().join("runs.db");
    let cal = json(&run(&db, &["calibrate", "--json", "--fixture", "0=10k", "--fixture", "1=470k"]));
    assert_eq!(cal["schema"], "ohmsight.calibration.v1");
    let ratio = |key: &str| cal[key]["estimate"].as_f64().unwrap() / cal[key]["datasheet"].as_f64().unwrap();
    // The scenario's ratios, within the unit's spread (the declared ±5% and ±10%).
    assert!((ratio("hold_farads") / 1.3 - 1.0).abs() < 0.06, "hold ×{:.3}", ratio("hold_farads"));
    assert!((ratio("switch_ohms") / 0.7 - 1.0).abs() < 0.12, "switch ×{:.3}", ratio("switch_ohms"));
    let run_id = cal["run_id"].as_str().unwrap().to_string();

    // The next survey of the unit is analysed with it, and its header says so.
    let text = run(&db, &["survey", "--quiet", "--channel", "3"]);
    let text = String::from_utf8_lossy(&text.stdout);
    assert!(text.contains(&format!("calibration {run_id}")), "{text}");
    let calibrated = json(&run(&db, &["survey", "--quiet", "--json", "--channel", "3", "--channel", "7"]));
    assert_eq!(calibrated["profile"]["source"], format!("calibration {run_id}"));
    let uncalibrated =
        json(&run(&db, &["survey", "--quiet", "--json", "--uncalibrated", "--channel", "3", "--channel", "7"]));
    assert_eq!(uncalibrated["profile"]["source"], "board");
    // ch3 is 47 kΩ and ch7 1 MΩ in the scenario.
    for (ch, truth) in [(3, 47e3), (7, 1e6)] {
        let (with, without) = (source_ohms(&calibrated, ch), source_ohms(&uncalibrated, ch));
        assert!((with / truth - 1.0).abs() < 0.05, "ch{ch} calibrated {with}");
        assert!((without / truth - 1.0).abs() > 0.15, "ch{ch} uncalibrated {without}");
    }

    // A profile file by hand goes over the calibration.
    let file = dir.path().join("bench.toml");
    std::fs::write(&file, "# a corrected figure\nswitch_ohms = 4.3e3\n").unwrap();
    let by_hand =
        json(&run(&db, &["survey", "--quiet", "--json", "--channel", "3", "--profile", file.to_str().unwrap()]));
    let profile = &by_hand["profile"];
    assert_eq!(profile["switch_ohms"], 4.3e3);
    assert_eq!(profile["hold_farads"], cal["hold_farads"]["estimate"], "the calibration's hold capacitance stays");
    assert!(profile["source"].as_str().unwrap().ends_with(&format!("over calibration {run_id}")), "{profile}");

    // A production check of the unit judges with the calibration too: ch3's 47 kΩ passes a
    // 44–50 kΩ limit with it, and fails without it (the datasheet values read it near 60 kΩ).
    let limits = dir.path().join("lx6.toml");
    std::fs::write(&limits, "name = \"LX-6 leaf thermistor\"\n[[pin]]\nchannel = 3\nsource_ohms = [44e3, 50e3]\n")
        .unwrap();
    let check = |extra: &[&str]| {
        let mut args = vec!["check", "--quiet", "--json", "--limits", limits.to_str().unwrap()];
        args.extend_from_slice(extra);
        run(&db, &args)
    };
    let passed = check(&[]);
    assert_eq!(passed.status.code(), Some(0), "{}", stderr(&passed));
    let doc: Value = serde_json::from_slice(&passed.stdout).unwrap();
    assert_eq!(doc["profile"]["source"], format!("calibration {run_id}"));
    let failed = check(&["--uncalibrated"]);
    assert_eq!(failed.status.code(), Some(1), "{}", stderr(&failed));

    // The calibration run is a run like any other.
    let listed =
        json(&ohmsight().args(["history", "--json", "--kind", "calibration", "--db"]).arg(&db).output().unwrap());
    assert_eq!(listed["runs"].as_array().map(Vec::len), Some(1), "{listed:#}");
    assert_eq!(listed["runs"][0]["kind"], "calibration");
}

#[test]
fn bad_fixtures_are_bad_input_and_a_misfit_stores_nothing() {
    let dir = tempfile::tempdir().unwrap();
    let db = dir.path().join("runs.db");
    for (args, says) in [
        (vec!["calibrate", "--fixture", "0:10k"], "CH=OHMS"),
        (vec!["calibrate", "--fixture", "0=ten"], "CH=OHMS"),
        (vec!["calibrate", "--fixture", "0=10k", "--fixture", "0=470k"], "given twice"),
        (vec!["calibrate", "--fixture", "0=10k", "--tolerance", "80%"], "tolerance"),
        (vec!["calibrate", "--fixture", "12=10k"], "not a pin"),
        (vec!["calibrate", "--fixture", "0=10k", "--unit", "0123456789abcdef"], "not unit 0123456789abcdef"),
        (vec!["survey", "--profile", "/no/such/profile.toml"], "cannot read the profile file"),
    ] {
        let out = run(&db, &args);
        assert_eq!(out.status.code(), Some(2), "{args:?}: {}", stderr(&out));
        assert!(stderr(&out).contains(says), "{args:?}: {}", stderr(&out));
    }
    // The 10 kΩ fixture declared as 33 kΩ: refused, and the unit stays uncalibrated.
    let out = run(&db, &["calibrate", "--quiet", "--fixture", "0=33k", "--fixture", "1=470k"]);
    assert_eq!(out.status.code(), Some(1), "{}", stderr(&out));
    assert!(stderr(&out).contains("nothing was stored as a calibration"), "{}", stderr(&out));
    let doc = json(&run(&db, &["survey", "--quiet", "--json", "--channel", "3"]));
    assert_eq!(doc["profile"]["source"], "board");

    // Nothing lost: the refused run is kept, and fits with the right value, measuring nothing.
    let said = stderr(&out);
    let id = said.split("the run is kept as ").nth(1).and_then(|t| t.split(':').next()).unwrap().to_string();
    let refit = |args: &[&str]| ohmsight().args(args).arg("--db").arg(&db).output().unwrap();
    let cal = json(&refit(&["calibrate", "--json", "--from", &id, "--fixture", "0=10k", "--fixture", "1=470k"]));
    assert_eq!(cal["run_id"], id.as_str());
    let doc = json(&run(&db, &["survey", "--quiet", "--json", "--channel", "3"]));
    assert_eq!(doc["profile"]["source"], format!("calibration {id}"));
    // --from measures nothing, so it takes no link, and needs the fixtures measured.
    let out = run(&db, &["calibrate", "--from", &id, "--fixture", "0=10k", "--fixture", "1=470k"]);
    assert_eq!(out.status.code(), Some(2), "{}", stderr(&out));
    assert!(stderr(&out).contains("measures nothing"), "{}", stderr(&out));
    let out = refit(&["calibrate", "--from", &id, "--fixture", "0=10k", "--fixture", "5=470k"]);
    assert_eq!(out.status.code(), Some(2), "{}", stderr(&out));
    assert!(stderr(&out).contains("did not measure fixture ch5; it measured channels 0, 1"), "{}", stderr(&out));
}

#[test]
fn a_calibration_killed_mid_run_is_resumed_and_fitted() {
    let dir = tempfile::tempdir().unwrap();
    let db = dir.path().join("runs.db");
    let mut child = ohmsight()
        .args(["calibrate", "--quiet", "--fixture", "0=10k", "--fixture", "1=470k", "--db"])
        .arg(&db)
        .arg("--scenario")
        .arg(offsheet())
        .stdout(std::process::Stdio::null())
        .stderr(std::process::Stdio::null())
        .spawn()
        .unwrap();
    // Some experiments in, then a crash (SIGKILL: nothing is flushed, no handler runs).
    let t = std::time::Instant::now();
    let id = loop {
        assert!(t.elapsed() < std::time::Duration::from_secs(120), "no experiments stored in 2 minutes");
        let out = ohmsight().args(["history", "--json", "--db"]).arg(&db).output().unwrap();
        if let Ok(list) = serde_json::from_slice::<Value>(&out.stdout) {
            if list["runs"][0]["experiments"].as_u64().is_some_and(|n| n >= 4) {
                break list["runs"][0]["id"].as_str().unwrap().to_string();
            }
        }
        std::thread::sleep(std::time::Duration::from_millis(20));
    };
    child.kill().unwrap();
    assert!(!child.wait().unwrap().success());
    let list = json(&ohmsight().args(["history", "--json", "--db"]).arg(&db).output().unwrap());
    assert_eq!(list["runs"][0]["complete"], false, "the kill fell mid-run: {list:#}");
    // The run's own link (scenario and seed) is used when none is given.
    let out = ohmsight()
        .args(["calibrate", "--json", "--resume", &id, "--fixture", "0=10k", "--fixture", "1=470k", "--db"])
        .arg(&db)
        .output()
        .unwrap();
    let cal = json(&out);
    assert_eq!(cal["run_id"], id.as_str(), "the same run, finished");
    let ratio = cal["hold_farads"]["estimate"].as_f64().unwrap() / cal["hold_farads"]["datasheet"].as_f64().unwrap();
    assert!((ratio / 1.3 - 1.0).abs() < 0.06, "hold ×{ratio:.3}");
    let list = json(&ohmsight().args(["history", "--json", "--db"]).arg(&db).output().unwrap());
    assert_eq!(list["runs"][0]["complete"], true);
}
