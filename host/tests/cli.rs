//! The `ohmsight` binary as a user runs it: JSON shape, errors and exit codes.

use std::process::Command;

fn ohmsight() -> Command {
    let mut c = Command::new(env!("CARGO_BIN_EXE_ohmsight"));
    // Surveys are kept in a database of this test process, not in the user's.
    c.env("OHMSIGHT_DB", std::env::temp_dir().join(format!("ohmsight-cli-{}.db", std::process::id())));
    c
}

fn temp_file(name: &str, text: &str) -> std::path::PathBuf {
    let dir = std::env::temp_dir().join(format!("ohmsight-cli-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let path = dir.join(name);
    std::fs::write(&path, text).unwrap();
    path
}

#[test]
fn demo_survey_json_is_one_document_with_the_documented_fields() {
    let out = ohmsight().args(["survey", "--json", "--quiet"]).output().unwrap();
    assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
    let doc: serde_json::Value = serde_json::from_slice(&out.stdout).expect("stdout is exactly one JSON document");
    assert_eq!(doc["schema"], "ohmsight.survey.v2");
    assert!(doc["board"].is_object());
    let pins = doc["pins"].as_array().unwrap();
    assert!(pins.len() >= 8);
    let mut verdicts = std::collections::BTreeSet::new();
    for p in pins {
        for key in [
            "channel",
            "label",
            "verdict",
            "source_ohms",
            "node_farads",
            "source_volts",
            "noise_lsb_rms",
            "min_sample_ns",
            "flags",
        ] {
            assert!(p.get(key).is_some(), "pin lacks {key}: {p}");
        }
        let v = p["verdict"].as_str().unwrap();
        assert!(["driven", "floating", "at-rail", "unknown"].contains(&v));
        verdicts.insert(v.to_string());
        for iv in [&p["source_ohms"], &p["node_farads"]] {
            let has = |k: &str| iv.get(k).is_some_and(|x| !x.is_null());
            if iv["estimate"].is_null() {
                assert!(!(has("low") && has("high")), "a bound has one side only: {iv}");
            } else {
                assert!(has("low") && has("high"), "an estimate has both ends: {iv}");
                assert!(
                    iv["low"].as_f64() <= iv["estimate"].as_f64() && iv["estimate"].as_f64() <= iv["high"].as_f64()
                );
            }
        }
        for f in p["flags"].as_array().unwrap() {
            assert!(["hum-50hz", "hum-60hz", "excess-noise", "under-settled", "memory"].contains(&f.as_str().unwrap()));
        }
    }
    for v in ["driven", "floating", "at-rail"] {
        assert!(verdicts.contains(v), "the demo has a {v} pin");
    }
    assert!(doc["totals"]["conversions"].as_u64().unwrap() > 1000);
}

#[test]
fn bad_scenario_names_file_and_line_and_exits_2() {
    let path = temp_file("bad.toml", "name = \"bench\"\n\n[[pin]]\nchannel = 2\nvolts = 1.0\nohms = \"lots\"\n");
    let out = ohmsight().args(["survey", "--quiet", "--scenario"]).arg(&path).output().unwrap();
    assert_eq!(out.status.code(), Some(2));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(err.contains(&format!("{}:6:", path.display())), "{err}");
    assert!(out.stdout.is_empty());
    let out = ohmsight().args(["survey", "--scenario", "/no/such/file.toml"]).output().unwrap();
    assert_eq!(out.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&out.stderr).contains("cannot read"));
}

#[test]
fn small_scenario_table_shows_units_and_totals() {
    let path = temp_file(
        "ok.toml",
        "name = \"two pins\"\nseed = 3\n[[pin]]\nchannel = 0\nlabel = \"divider\"\nvolts = 1.5\nohms = 22000\nnode_farads = 10e-12\n\
         [[pin]]\nchannel = 1\nlabel = \"open\"\nfloating = true\n",
    );
    let out = ohmsight().args(["survey", "--quiet", "--scenario"]).arg(&path).output().unwrap();
    assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
    let text = String::from_utf8(out.stdout).unwrap();
    assert!(text.contains("divider") && text.contains("kΩ") && text.contains("pF"), "{text}");
    assert!(text.contains("floating"), "{text}");
    assert!(text.contains("conversions") && text.contains("bytes"), "{text}");
}

#[test]
fn missing_serial_port_is_bad_input() {
    let out = ohmsight().args(["survey", "--port", "/dev/does-not-exist-ohmsight"]).output().unwrap();
    assert_eq!(out.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&out.stderr).contains("cannot open serial port"));
}

#[test]
fn help_explains_the_survey() {
    let out = ohmsight().args(["survey", "--help"]).output().unwrap();
    let text = String::from_utf8(out.stdout).unwrap();
    for word in ["--scenario", "--port", "--baud", "--json", "demo"] {
        assert!(text.contains(word), "help lacks {word}: {text}");
    }
}

#[cfg(unix)]
#[test]
fn html_output_goes_through_symlinks_keeps_modes_and_leaves_devices_alone() {
    use std::os::unix::fs::{FileTypeExt, PermissionsExt};
    let dir = std::env::temp_dir().join(format!("ohmsight-cli-out-{}", std::process::id()));
    let _ = std::fs::remove_dir_all(&dir);
    std::fs::create_dir_all(dir.join("site")).unwrap();
    let target = dir.join("site/report.html");
    std::fs::write(&target, "old").unwrap();
    std::fs::set_permissions(&target, std::fs::Permissions::from_mode(0o640)).unwrap();
    let link = dir.join("latest.html");
    std::os::unix::fs::symlink("site/report.html", &link).unwrap();
    let survey = |html: &std::path::Path| {
        let out = ohmsight()
            .args(["survey", "--quiet", "--no-store", "--channel", "3", "--html"])
            .arg(html)
            .output()
            .unwrap();
        assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
    };
    survey(&link);
    assert!(std::fs::symlink_metadata(&link).unwrap().file_type().is_symlink(), "the link stays a link");
    let page = std::fs::read_to_string(&target).unwrap();
    assert!(page.starts_with("<!DOCTYPE html>") && page.contains("id=\"report-end\""), "a whole page");
    assert_eq!(std::fs::metadata(&target).unwrap().permissions().mode() & 0o777, 0o640);
    let names: Vec<_> = std::fs::read_dir(dir.join("site")).unwrap().map(|e| e.unwrap().file_name()).collect();
    assert_eq!(names.len(), 1, "nothing left beside it: {names:?}");
    // A device is written into, never replaced by a file.
    survey(std::path::Path::new("/dev/null"));
    assert!(std::fs::metadata("/dev/null").unwrap().file_type().is_char_device());
    let _ = std::fs::remove_dir_all(&dir);
}
