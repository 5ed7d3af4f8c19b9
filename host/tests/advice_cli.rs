//! The binary's advice and `loading` as a user runs them: the same numbers in the text and the
//! JSON, the loading arithmetic against the Thevenin divider, errors and exit codes.

use serde_json::Value;
use std::path::PathBuf;
use std::process::{Command, Output};
use std::sync::OnceLock;

fn ohmsight() -> Command {
    let mut c = Command::new(env!("CARGO_BIN_EXE_ohmsight"));
    // Surveys are kept in a database of this test process, not in the user's.
    c.env("OHMSIGHT_DB", std::env::temp_dir().join(format!("ohmsight-advice-cli-{}.db", std::process::id())));
    c
}

/// An invented four-pin bench board (47 kΩ divider, 2.2 MΩ sensor, 470 kΩ behind 100 nF, open pin).
fn bench() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("tests/data/bench4.toml")
}

fn temp_dir() -> PathBuf {
    let dir = std::env::temp_dir().join(format!("ohmsight-advice-cli-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    dir
}

fn ok(out: &Output) -> String {
    assert!(out.status.success(), "exit {:?}: {}", out.status.code(), String::from_utf8_lossy(&out.stderr));
    String::from_utf8(out.stdout.clone()).unwrap()
}

/// The bench survey as JSON (stored in a file, for `--from`) and as text: surveyed once each.
fn stored_run() -> &'static (PathBuf, Value) {
    static RUN: OnceLock<(PathBuf, Value)> = OnceLock::new();
    RUN.get_or_init(|| {
        let out = ohmsight()
            .args(["survey", "--quiet", "--json", "--resolve", "100e-6", "--scenario"])
            .arg(bench())
            .output()
            .unwrap();
        let text = ok(&out);
        let path = temp_dir().join("run.json");
        std::fs::write(&path, &text).unwrap();
        (path, serde_json::from_str(&text).unwrap())
    })
}

fn survey_text() -> &'static str {
    static TEXT: OnceLock<String> = OnceLock::new();
    TEXT.get_or_init(|| {
        ok(&ohmsight().args(["survey", "--quiet", "--resolve", "100e-6", "--scenario"]).arg(bench()).output().unwrap())
    })
}

/// A number as printed: its value in SI base units, and half a unit of its last digit.
#[derive(Debug, Clone, Copy)]
struct Printed {
    value: f64,
    tol: f64,
}

const PREFIXES: [(char, f64); 10] = [
    ('T', 1e12),
    ('G', 1e9),
    ('M', 1e6),
    ('k', 1e3),
    ('m', 1e-3),
    ('µ', 1e-6),
    ('n', 1e-9),
    ('p', 1e-12),
    ('f', 1e-15),
    ('a', 1e-18),
];
const UNITS: [&str; 5] = ["Ω", "F", "V", "s", "Hz"];

/// Every number in `text` with its printed scale. The low end of an interval (`43.6–48.1 kΩ`)
/// is printed without its unit: it may carry the high end's prefix or the one below, so both
/// readings are returned for it.
fn printed_numbers(text: &str) -> Vec<Vec<Printed>> {
    let chars: Vec<char> = text.chars().collect();
    let mut out: Vec<Vec<Printed>> = Vec::new();
    let mut pending_low: Vec<(f64, f64)> = Vec::new();
    let mut i = 0;
    while i < chars.len() {
        let negative = chars[i] == '-' && chars.get(i + 1).is_some_and(|c| c.is_ascii_digit());
        if !(chars[i].is_ascii_digit() || negative) {
            i += 1;
            continue;
        }
        let start = i;
        i += usize::from(negative);
        while i < chars.len() && (chars[i].is_ascii_digit() || chars[i] == '.') {
            i += 1;
        }
        let token: String = chars[start..i].iter().collect();
        let Ok(number) = token.trim_end_matches('.').parse::<f64>() else { continue };
        let decimals = token.split_once('.').map_or(0, |(_, d)| d.len());
        let half = 0.5 * 10f64.powi(-(decimals as i32));
        if chars.get(i) == Some(&'–') {
            pending_low.push((number, half));
            continue;
        }
        let mut j = i;
        if chars.get(j) == Some(&' ') {
            j += 1;
        }
        let rest: String = chars[j..chars.len().min(j + 3)].iter().collect();
        let unit_at = |s: &str| UNITS.iter().any(|u| s.starts_with(u));
        let scale = if chars.get(j) == Some(&'%') {
            0.01
        } else if let Some(&(_, s)) =
            PREFIXES.iter().find(|(p, _)| rest.starts_with(*p) && unit_at(&rest[p.len_utf8()..]))
        {
            s
        } else {
            1.0
        };
        for (low, low_half) in pending_low.drain(..) {
            out.push([scale, scale / 1000.0].iter().map(|&s| Printed { value: low * s, tol: low_half * s }).collect());
        }
        out.push(vec![Printed { value: number * scale, tol: half * scale }]);
    }
    out
}

/// Every number in a JSON document, in SI base units (`*_ns` fields are nanoseconds), with the
/// numbers printed inside its strings.
fn json_numbers(v: &Value, key: &str, out: &mut Vec<Printed>) {
    match v {
        Value::Number(n) => {
            let scale = if key.ends_with("_ns") { 1e-9 } else { 1.0 };
            out.push(Printed { value: n.as_f64().unwrap() * scale, tol: 0.0 });
        }
        Value::String(s) => out.extend(printed_numbers(s).into_iter().flatten()),
        Value::Array(a) => a.iter().for_each(|x| json_numbers(x, key, out)),
        Value::Object(m) => m.iter().for_each(|(k, x)| json_numbers(x, k, out)),
        Value::Bool(_) | Value::Null => {}
    }
}

/// Fails unless every number the text prints is a number of the JSON, to the printed digits.
fn assert_text_numbers_in_json(text: &str, doc: &Value, strip: &[String]) {
    let mut candidates = Vec::new();
    json_numbers(doc, "", &mut candidates);
    let mut checked = 0;
    for line in text.lines() {
        let mut line = line.to_string();
        for s in strip {
            line = line.replace(s.as_str(), " ");
        }
        for readings in printed_numbers(&line) {
            let found = readings.iter().any(|t| {
                candidates.iter().any(|c| (c.value - t.value).abs() <= t.tol.max(c.tol) + 1e-9 * t.value.abs() + 1e-300)
            });
            assert!(found, "{readings:?} in the line\n  {line}\nis not in the JSON");
            checked += 1;
        }
    }
    assert!(checked > 20, "only {checked} numbers checked");
}

#[test]
fn survey_text_and_json_carry_the_same_numbers() {
    let (_, doc) = stored_run();
    let text = survey_text();
    // Labels, flags and the firmware line are words; the wall time differs between two runs.
    let mut strip: Vec<String> =
        doc["pins"].as_array().unwrap().iter().map(|p| p["label"].as_str().unwrap().to_string()).collect();
    strip.extend(["hum-50hz", "hum-60hz", "1 LSB =", "½"].map(String::from));
    // The header names the board and the run (id and start time), not measured numbers.
    let body: String = text
        .lines()
        .skip(2)
        .map(|l| match l.rfind(" s here") {
            Some(end) => l[..l[..end].rfind(' ').unwrap_or(0)].to_string(),
            None => l.to_string(),
        })
        .collect::<Vec<_>>()
        .join("\n");
    assert_text_numbers_in_json(&body, doc, &strip);

    // The scan plan row by row: channel, dummies and errors at the printed digits.
    let plan = &doc["scan_plan"];
    let entries = plan["entries"].as_array().unwrap();
    assert!(!entries.is_empty());
    let start = text.find("scan plan").unwrap();
    let rows: Vec<Vec<&str>> = text[start..]
        .lines()
        .skip(3)
        .take(entries.len())
        .map(|l| l.split("  ").map(str::trim).filter(|c| !c.is_empty()).collect())
        .collect();
    for (row, e) in rows.iter().zip(entries) {
        assert_eq!(row[0], e["position"].to_string());
        assert_eq!(row[1], e["channel"].to_string());
        assert_eq!(row[4], e["dummies"].to_string());
        let lsb = |cell: &str| cell.trim_end_matches(" LSB").parse::<f64>().unwrap();
        assert!((lsb(row[5]) - e["worst_error_lsb"].as_f64().unwrap()).abs() <= 0.005 + 1e-12, "{row:?} vs {e}");
        assert!((lsb(row[6]) - e["error_now_lsb"].as_f64().unwrap()).abs() <= 0.005 + 1e-12, "{row:?} vs {e}");
    }
    assert!(plan["worst_error_lsb"].as_f64().unwrap() <= 0.5);
    // Every pin carries its advice under the same names.
    for p in doc["pins"].as_array().unwrap() {
        for key in ["sample", "settle", "memory", "averaging", "hum_period_s", "note"] {
            assert!(p["advice"].get(key).is_some(), "advice lacks {key}: {p}");
        }
    }
    assert_eq!(doc["advice_options"]["resolve_volts"], 100e-6);
    assert!((doc["board"]["lsb_volts"].as_f64().unwrap() - 3.3 / 4096.0).abs() < 1e-12);
    assert!(text.contains("one scan takes"), "{text}");
    // The advice block names what it recommends.
    assert!(text.contains("buffer it") && text.contains("8192 × the hold capacitance"), "{text}");
    assert!(text.contains("dummy conversion") && text.contains("averaging: to see 100 µV"), "{text}");
}

/// The stored pin's facts and a loading answer for it.
fn stored_loading(pin: u8, instrument: &[&str]) -> (Value, Value) {
    let (path, doc) = stored_run();
    let out = ohmsight()
        .args(["loading", "--pin", &pin.to_string(), "--json", "--from"])
        .arg(path)
        .args(instrument)
        .output()
        .unwrap();
    let answer: Value = serde_json::from_str(&ok(&out)).unwrap();
    let p = doc["pins"].as_array().unwrap().iter().find(|p| p["channel"] == pin).unwrap().clone();
    (p, answer)
}

#[test]
fn loading_from_a_stored_run_is_the_thevenin_divider() {
    // For each end of the Rs interval (hand rule: node = Vs·Ri/(Rs + Ri), shift = −Vs·Rs/(Rs + Ri);
    // τ = (Rs ∥ Ri)·(Cn + Ci); bandwidth = 1/(2πτ); trustworthy iff |shift| < ½ LSB), recomputed
    // here from the stored survey and the preset's 1 MΩ ∥ 25 pF.
    let (p, a) = stored_loading(0, &["--preset", "scope-1x"]);
    assert_eq!(a["schema"], "ohmsight.loading.v1");
    assert_eq!(a["instrument"]["input_ohms"], 1e6);
    assert_eq!(a["instrument"]["input_farads"], 25e-12);
    assert_eq!(a["instrument"]["typical"], true);
    let vs = p["source_volts"].as_f64().unwrap();
    let half_lsb = 3.3 / 4096.0 / 2.0;
    let cases = a["cases"].as_array().unwrap();
    assert_eq!(cases.len(), 3);
    for c in cases {
        let which = c["which"].as_str().unwrap();
        let rs = p["source_ohms"][which].as_f64().unwrap();
        let cn = p["node_farads"][which].as_f64().unwrap();
        let (ri, ci) = (1e6, 25e-12);
        let close = |got: &Value, want: f64| (got.as_f64().unwrap() - want).abs() <= 1e-9 * want.abs();
        assert!(close(&c["source_ohms"], rs));
        assert!(close(&c["node_volts"], vs * ri / (rs + ri)), "{c}");
        assert!(close(&c["shift_volts"], -vs * rs / (rs + ri)), "{c}");
        assert!(close(&c["shift_lsb"], -vs * rs / (rs + ri) / (2.0 * half_lsb)), "{c}");
        let tau = rs * ri / (rs + ri) * (cn + ci);
        assert!(close(&c["tau_s"], tau), "{c}");
        assert!(close(&c["bandwidth_hz"], 1.0 / (2.0 * std::f64::consts::PI * tau)), "{c}");
        assert!(close(&c["tau_before_s"], rs * cn), "{c}");
        assert_eq!(c["trustworthy"], (vs * rs / (rs + ri)).abs() < half_lsb);
    }
    // 1.42 V behind ~47 kΩ on a 1 MΩ scope: about −64 mV, far over ½ LSB.
    assert_eq!(a["outcome"], "not-trustworthy");
    assert!((a["trust_below_ohms"].as_f64().unwrap() - half_lsb * 1e6 / (vs - half_lsb)).abs() < 1e-6);

    // The terminal shows the same numbers.
    let (path, _) = stored_run();
    let out = ohmsight().args(["loading", "--pin", "0", "--preset", "scope-1x", "--from"]).arg(path).output().unwrap();
    let text = ok(&out);
    assert!(text.contains("typical values") && text.contains("½ LSB"), "{text}");
    let strip = ["½", "divider 47k"].map(String::from);
    assert_text_numbers_in_json(&text, &a, &strip);
}

#[test]
fn loading_a_floating_pin_says_the_instrument_defines_the_node() {
    let (p, a) = stored_loading(3, &["--input", "10M,12p"]);
    assert_eq!(p["verdict"], "floating");
    assert_eq!(a["outcome"], "instrument-defines-node");
    // τ = Ri·(Cn + Ci) = 10 MΩ·(Cn + 12 pF).
    let cn = p["node_farads"]["estimate"].as_f64().unwrap();
    assert!((a["floating_tau_s"].as_f64().unwrap() - 10e6 * (cn + 12e-12)).abs() < 1e-15);
    assert_eq!(a["instrument"]["typical"], false);
}

#[test]
fn loading_live_surveys_that_pin_only() {
    let out = ohmsight()
        .args(["loading", "--pin", "0", "--quiet", "--json", "--preset", "meter", "--scenario"])
        .arg(bench())
        .output()
        .unwrap();
    let a: Value = serde_json::from_str(&ok(&out)).unwrap();
    assert_eq!(a["pin"]["channel"], 0);
    // The wired truth is 1.42 V behind 47 kΩ: a 10 MΩ meter shifts it by about
    // −1.42·47e3/10.047e6 = −6.64 mV (hand value; the fit is within a few percent of the truth).
    let shift = a["cases"][0]["shift_volts"].as_f64().unwrap();
    assert!((shift + 6.64e-3).abs() < 0.5e-3, "{shift}");
    assert_eq!(a["outcome"], "not-trustworthy");
}

#[test]
fn bad_pins_are_bad_input() {
    let (path, _) = stored_run();
    let out = ohmsight().args(["loading", "--pin", "9", "--preset", "meter", "--from"]).arg(path).output().unwrap();
    assert_eq!(out.status.code(), Some(2));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(err.contains("pin 9 is not in this survey") && err.contains("0, 1, 2, 3"), "{err}");
    assert!(out.stdout.is_empty());
    let out =
        ohmsight().args(["loading", "--pin", "9", "--preset", "meter", "--scenario"]).arg(bench()).output().unwrap();
    assert_eq!(out.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&out.stderr).contains("pin 9 is not a pin of this board"));
}

#[test]
fn bad_instrument_syntax_is_bad_input_with_an_example() {
    for bad in ["1M;25p", "1M,25x", "lots,25p", "1M"] {
        let out = ohmsight().args(["loading", "--pin", "0", "--input", bad]).output().unwrap();
        assert_eq!(out.status.code(), Some(2), "{bad}");
        let err = String::from_utf8_lossy(&out.stderr);
        assert!(err.contains("--input") && err.contains("1M,25p"), "{bad}: {err}");
    }
    let out = ohmsight().args(["loading", "--pin", "0"]).output().unwrap();
    assert_eq!(out.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&out.stderr).contains("--preset"));
    let out = ohmsight().args(["loading", "--pin", "0", "--preset", "scope"]).output().unwrap();
    assert_eq!(out.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&out.stderr).contains("scope-1x"));
    let out = ohmsight().args(["survey", "--resolve", "-3"]).output().unwrap();
    assert_eq!(out.status.code(), Some(2));
}

#[test]
fn bad_stored_runs_are_bad_input() {
    let dir = temp_dir();
    let out = ohmsight()
        .args(["loading", "--pin", "0", "--preset", "meter", "--from", "/no/such/run.json"])
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&out.stderr).contains("cannot read /no/such/run.json"));
    let broken = dir.join("broken.json");
    std::fs::write(&broken, "{\n  \"schema\": \"ohmsight.survey.v1\",\n  oops\n}\n").unwrap();
    let out = ohmsight().args(["loading", "--pin", "0", "--preset", "meter", "--from"]).arg(&broken).output().unwrap();
    assert_eq!(out.status.code(), Some(2));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(err.contains(&format!("{}:3:", broken.display())) && err.contains("ohmsight survey --json"), "{err}");
    let foreign = dir.join("foreign.json");
    std::fs::write(&foreign, "{\"schema\": \"something.else\"}").unwrap();
    let out = ohmsight().args(["loading", "--pin", "0", "--preset", "meter", "--from"]).arg(&foreign).output().unwrap();
    assert_eq!(out.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&out.stderr).contains("not an ohmsight survey document"));
}

#[test]
fn loading_help_states_the_typical_values() {
    let text = ok(&ohmsight().args(["loading", "--help"]).output().unwrap());
    for word in [
        "--pin",
        "--input",
        "--preset",
        "--from",
        "scope-1x",
        "probe-10x",
        "meter",
        "typical",
        "1 MΩ ∥ 25 pF",
        "--scenario",
    ] {
        assert!(text.contains(word), "help lacks {word}: {text}");
    }
}

#[test]
fn the_number_check_catches_a_wrong_digit() {
    let doc = serde_json::json!({"sample_ns": 6857.143, "error": 0.4054, "low": 853.2, "high": 1180.0, "note": "under 33.0 GΩ"});
    let good = "6.86 µs, 0.41 LSB, (853–1.18 kΩ), 33.0 GΩ\n".repeat(6);
    assert_text_numbers_in_json(&good, &doc, &[]);
    for wrong in ["6.87 µs", "0.42 LSB", "(863–1.18 kΩ)", "33.1 GΩ", "6.86 ms"] {
        let bad = good.replacen(wrong.split(' ').next().unwrap(), "§", 0) + &format!("{wrong}\n");
        let caught = std::panic::catch_unwind(|| assert_text_numbers_in_json(&bad, &doc, &[])).is_err();
        assert!(caught, "{wrong} passed");
    }
}
