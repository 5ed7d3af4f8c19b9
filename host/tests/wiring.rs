//! Wiring files as a user meets them: the pins of the simulated demo board renamed from a file
//! on the host (labels of up to 64 characters in any language, no reflash), in the table, the
//! JSON and a check's limits by label; and every mistake refused with file, line and fix.

use serde_json::Value;
use std::path::Path;
use std::process::{Command, Output};

fn ohmsight(args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_ohmsight")).args(args).output().unwrap()
}

fn stderr(out: &Output) -> String {
    String::from_utf8_lossy(&out.stderr).into_owned()
}

fn write(dir: &Path, name: &str, text: &str) -> String {
    let path = dir.join(name);
    std::fs::write(&path, text).unwrap();
    path.display().to_string()
}

// Invented labels for the demo board's channels 0 and 3, in German and Japanese, the second one
// 64 characters long.
const SOIL: &str = "Bodenfeuchte Beet 2 (Nordseite)";
const LONG: &str = "北側温室の土壌水分センサー二番、コネクタJ7経由、ケーブル長さ十二メートル、シールド付き、二〇二六年十二月交換済み、予備ありです";

#[test]
fn a_wiring_file_names_the_pins_everywhere() {
    assert_eq!(LONG.chars().count(), 64, "the long label is the longest allowed");
    let dir = tempfile::tempdir().unwrap();
    let wiring = write(
        dir.path(),
        "wiring.toml",
        &format!("# bench harness B\nboard = \"virtual\"\n[[pin]]\nchannel = 0\nlabel = \"{SOIL}\"\n[[pin]]\nchannel = 3\nlabel = \"{LONG}\"\n"),
    );
    let out = ohmsight(&[
        "survey",
        "--no-store",
        "--quiet",
        "--json",
        "--channel",
        "0",
        "--channel",
        "3",
        "--wiring",
        &wiring,
    ]);
    assert!(out.status.success(), "{}", stderr(&out));
    let doc: Value = serde_json::from_slice(&out.stdout).unwrap();
    let labels: Vec<&str> = doc["pins"].as_array().unwrap().iter().map(|p| p["label"].as_str().unwrap()).collect();
    assert_eq!(labels, [SOIL, LONG]);

    // The table pads by display width: the columns after the labels line up.
    let out = ohmsight(&["survey", "--no-store", "--quiet", "--channel", "0", "--channel", "3", "--wiring", &wiring]);
    assert!(out.status.success(), "{}", stderr(&out));
    let text = String::from_utf8(out.stdout).unwrap();
    // The table's rows (the advice below names the pins too).
    let rows: Vec<&str> = text.lines().filter(|l| l.starts_with("0 ") || l.starts_with("3 ")).collect();
    assert!(rows[0].contains(SOIL) && rows[1].contains(LONG), "{text}");
    assert_eq!(rows.len(), 2, "{text}");
    let verdict_column = |row: &str| {
        let at = row.find("driven").unwrap_or_else(|| panic!("{row}"));
        unicode_width::UnicodeWidthStr::width(&row[..at])
    };
    let (a, b) = (verdict_column(rows[0]), verdict_column(rows[1]));
    assert_eq!(a, b, "verdicts at columns {a} and {b}:\n{text}");

    // A check's limits may name a pin by its wiring label.
    let limits = write(
        dir.path(),
        "limits.toml",
        &format!("name = \"harness B\"\n[[pin]]\nlabel = \"{SOIL}\"\nverdict = \"driven\"\n"),
    );
    let db = dir.path().join("runs.db").display().to_string();
    let out = ohmsight(&["check", "--quiet", "--json", "--limits", &limits, "--wiring", &wiring, "--db", &db]);
    assert!(out.status.code() == Some(0) || out.status.code() == Some(1), "{}", stderr(&out));
    let doc: Value = serde_json::from_slice(&out.stdout).unwrap();
    assert_eq!(doc["pins"][0]["label"], SOIL, "{doc:#}");
}

#[test]
fn wiring_mistakes_are_bad_input_with_file_and_line() {
    let dir = tempfile::tempdir().unwrap();
    let cases = [
        ("other.toml", "board = \"nrf52840\"\n[[pin]]\nchannel = 0\nlabel = \"a\"\n", "board \"virtual\" answered"),
        (
            "nopin.toml",
            "[[pin]]\nchannel = 12\nlabel = \"a\"\n",
            "channel 12 is not a pin of board \"virtual\"; it has pins",
        ),
        (
            "long.toml",
            &format!("[[pin]]\nchannel = 0\nlabel = \"{LONG}x\"\n"),
            "long.toml:3:9: label has 65 characters",
        ),
        (
            "escape.toml",
            "[[pin]]\nchannel = 0\nlabel = \"a\\u001b[31mb\"\n",
            "escape.toml:3:9: label holds the control character U+001B",
        ),
    ];
    for (name, text, says) in cases {
        let file = write(dir.path(), name, text);
        let out = ohmsight(&["survey", "--no-store", "--quiet", "--channel", "0", "--wiring", &file]);
        assert_eq!(out.status.code(), Some(2), "{name}: {}", stderr(&out));
        assert!(stderr(&out).contains(says), "{name}: {}", stderr(&out));
    }
    let out = ohmsight(&["survey", "--no-store", "--quiet", "--wiring", "/no/such/wiring.toml"]);
    assert_eq!(out.status.code(), Some(2));
    assert!(stderr(&out).contains("cannot read the wiring file /no/such/wiring.toml"), "{}", stderr(&out));
}
