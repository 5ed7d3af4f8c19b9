//! Habits users bring from other tools: SI prefixes on value options, warnings for implausible
//! instruments, labels that cannot steer the terminal and line up by display width, LSB
//! figures to three significant figures, bad channels and baud rates as bad input, plain words.

use serde_json::Value;
use std::path::PathBuf;
use std::process::{Command, Output};
use std::sync::OnceLock;

fn ohmsight() -> Command {
    let mut c = Command::new(env!("CARGO_BIN_EXE_ohmsight"));
    c.env("OHMSIGHT_DB", std::env::temp_dir().join(format!("ohmsight-habits-{}.db", std::process::id())));
    c
}

fn file(name: &str, text: &str) -> PathBuf {
    let dir = std::env::temp_dir().join(format!("ohmsight-habits-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let path = dir.join(name);
    std::fs::write(&path, text).unwrap();
    path
}

fn stderr(out: &Output) -> String {
    String::from_utf8_lossy(&out.stderr).into_owned()
}

/// A two-pin board: a divider with a wide (CJK) label, and an open pin with a narrow one.
fn board() -> PathBuf {
    file(
        "two.toml",
        "name = \"two pins\"\nseed = 5\n[[pin]]\nchannel = 0\nlabel = \"土壌 probe\"\nvolts = 1.5\nohms = 22e3\n\
         node_farads = 10e-12\n[[pin]]\nchannel = 1\nlabel = \"open\"\nfloating = true\n",
    )
}

/// The board surveyed with `--resolve 100u`: JSON document, saved for `--from`.
fn surveyed() -> &'static (PathBuf, Value) {
    static RUN: OnceLock<(PathBuf, Value)> = OnceLock::new();
    RUN.get_or_init(|| {
        let out = ohmsight()
            .args(["survey", "--quiet", "--json", "--resolve", "100u", "--scenario"])
            .arg(board())
            .output()
            .unwrap();
        assert!(out.status.success(), "{}", stderr(&out));
        let text = String::from_utf8(out.stdout).unwrap();
        (file("two.json", &text), serde_json::from_str(&text).unwrap())
    })
}

#[test]
fn value_options_take_si_prefixes() {
    let (path, doc) = surveyed();
    let resolve = doc["advice_options"]["resolve_volts"].as_f64().unwrap();
    assert!((resolve - 100e-6).abs() < 1e-15, "--resolve 100u is 100 µV: {resolve}");
    // The same value written three ways gives the same analysis.
    let refit = |v: &str| {
        let out = ohmsight().arg("refit").arg(path).args(["--json", "--resolve", v]).output().unwrap();
        assert!(out.status.success(), "--resolve {v}: {}", stderr(&out));
        let d: Value = serde_json::from_slice(&out.stdout).unwrap();
        d["advice_options"]["resolve_volts"].as_f64().unwrap()
    };
    assert_eq!(refit("0.1m"), refit("100e-6"));
    assert_eq!(refit("100 µV"), refit("100e-6"));
    let out = ohmsight().arg("refit").arg(path).args(["--resolve", "lots"]).output().unwrap();
    assert_eq!(out.status.code(), Some(2));
    assert!(stderr(&out).contains("not a positive voltage") && stderr(&out).contains("100u"), "{}", stderr(&out));
}

#[test]
fn an_implausible_instrument_is_warned_about() {
    let (path, _) = surveyed();
    let run = |input: &str| {
        ohmsight().args(["loading", "--pin", "0", "--input", input, "--from"]).arg(path).output().unwrap()
    };
    let slip = run("1m,25p");
    assert!(slip.status.success(), "{}", stderr(&slip));
    let err = stderr(&slip);
    assert!(err.contains("warning") && err.contains("1.00 mΩ") && err.contains("M is mega"), "{err}");
    let fine = run("1M,25p");
    assert!(fine.status.success() && !stderr(&fine).contains("warning"), "{}", stderr(&fine));
}

/// Display columns of `text` per Unicode Standard Annex #11: CJK Unified Ideographs
/// (U+4E00–U+9FFF) are East Asian Wide, two columns; the rest here one.
fn columns(text: &str) -> usize {
    text.chars().map(|c| if ('\u{4E00}'..='\u{9FFF}').contains(&c) { 2 } else { 1 }).sum()
}

#[test]
fn labels_line_up_by_display_width_and_lsb_figures_have_three_significant_figures() {
    let out = ohmsight().args(["survey", "--quiet", "--no-store", "--scenario"]).arg(board()).output().unwrap();
    assert!(out.status.success(), "{}", stderr(&out));
    let text = String::from_utf8(out.stdout).unwrap();
    let rows: Vec<&str> = text
        .lines()
        .filter(|l| l.starts_with("0   土壌") || l.starts_with("1   open") || l.starts_with("ch "))
        .collect();
    assert_eq!(rows.len(), 3, "{text}");
    let verdict_at = |row: &str, word: &str| columns(&row[..row.find(word).unwrap_or_else(|| panic!("{word}: {row}"))]);
    assert_eq!(verdict_at(rows[1], "driven"), verdict_at(rows[0], "verdict"), "{text}");
    assert_eq!(verdict_at(rows[2], "floating"), verdict_at(rows[0], "verdict"), "{text}");
    // Every figure in LSB: three significant figures (thousandths below 0.1 LSB).
    let mut seen = 0;
    for (i, _) in text.match_indices(" LSB").filter(|(i, _)| !text[*i..].starts_with(" LSB =")) {
        let number = text[..i].rsplit([' ', '(']).next().unwrap();
        let Ok(v) = number.parse::<f64>() else { continue };
        seen += 1;
        let digits: String = number.chars().filter(char::is_ascii_digit).collect();
        let significant = digits.trim_start_matches('0').len();
        if v.abs() >= 0.1 {
            assert_eq!(significant, 3, "{number} LSB in:\n{text}");
        } else {
            assert_eq!(number.split('.').nth(1).map(str::len), Some(3), "{number} LSB in:\n{text}");
        }
    }
    assert!(seen >= 2, "{text}");
}

#[test]
fn control_characters_in_labels_are_refused_at_their_line() {
    let path = file("esc.toml", "name = \"b\"\n[[pin]]\nchannel = 0\nlabel = \"x\\u001b[2J\"\nfloating = true\n");
    let out = ohmsight().args(["survey", "--no-store", "--scenario"]).arg(&path).output().unwrap();
    assert_eq!(out.status.code(), Some(2));
    let err = stderr(&out);
    assert!(err.contains(&format!("{}:4:", path.display())) && err.contains("U+001B"), "{err}");
    assert!(!err.contains('\u{1b}') && out.stdout.is_empty(), "the escape reached the terminal");
}

#[test]
fn bad_channels_and_baud_rates_are_bad_input() {
    let out = ohmsight().args(["survey", "--no-store", "--channel", "7", "--scenario"]).arg(board()).output().unwrap();
    assert_eq!(out.status.code(), Some(2));
    assert!(stderr(&out).contains("channel 7 is not a pin of this board; it has pins 0, 1"), "{}", stderr(&out));
    let out = ohmsight().args(["survey", "--port", "/dev/null", "--baud", "0"]).output().unwrap();
    assert_eq!(out.status.code(), Some(2));
    assert!(stderr(&out).contains("not a baud rate"), "{}", stderr(&out));
    let out = ohmsight().args(["survey", "--no-store", "--channel", "x"]).output().unwrap();
    assert_eq!(out.status.code(), Some(2));
    assert!(stderr(&out).contains("not a channel number"), "{}", stderr(&out));
    // 115.2k is 115200: accepted, and the port is then what fails.
    let out = ohmsight().args(["survey", "--port", "/dev/ohmsight-none", "--baud", "115.2k"]).output().unwrap();
    assert!(stderr(&out).contains("no such device"), "{}", stderr(&out));
}

#[test]
fn errors_say_what_kind_of_value_or_device_was_expected() {
    let out = ohmsight().args(["survey", "--port", "/dev/null"]).output().unwrap();
    assert_eq!(out.status.code(), Some(2));
    let err = stderr(&out);
    assert!(err.contains("not a serial port") && !err.to_lowercase().contains("typewriter"), "{err}");
    let path = file("kind.toml", "name = \"b\"\nseed = 1\n[[pin]]\nchannel = \"zero\"\nfloating = true\n");
    let out = ohmsight().args(["survey", "--no-store", "--scenario"]).arg(&path).output().unwrap();
    assert_eq!(out.status.code(), Some(2));
    let err = stderr(&out);
    assert!(err.contains("expected a whole number") && !err.contains("i64"), "{err}");
}
