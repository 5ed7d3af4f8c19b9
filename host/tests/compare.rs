//! `ohmsight compare` as a field engineer runs it, on the invented CF-4 unit of
//! boards/virtual/scenarios/coldframe*.toml: two surveys of one unit compare clean, each kind of
//! change is found with its before and after values and its meaning, the baseline defaults to
//! the unit's first complete survey (on SQLite and on PostgreSQL), a file baseline, bad input.

// Shared with the store tests, which use more of it than this file does.
#[allow(dead_code)]
#[macro_use]
mod store_support;

use ohmsight::compare::{Document, SCHEMA};
use ohmsight::link::InProcessLink;
use ohmsight::record::{read_document, Document as SurveyDoc};
use ohmsight::session::Session;
use ohmsight::store::PinSummary;
use ohmsight::{scenario, survey, RunRecord, SurveyOptions};
use serde_json::Value;
use std::collections::HashMap;
use std::path::{Path, PathBuf};
use std::process::{Command, Output};
use std::sync::{Mutex, OnceLock};

fn ohmsight() -> Command {
    Command::new(env!("CARGO_BIN_EXE_ohmsight"))
}

fn scenarios() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("../boards/virtual/scenarios")
}

fn dir() -> &'static Path {
    static DIR: OnceLock<tempfile::TempDir> = OnceLock::new();
    DIR.get_or_init(|| tempfile::Builder::new().prefix("ohmsight-compare-").tempdir().unwrap()).path()
}

fn code(out: &Output) -> i32 {
    out.status.code().unwrap_or(-1)
}

fn stderr(out: &Output) -> String {
    String::from_utf8_lossy(&out.stderr).into_owned()
}

/// A survey document of `scenario` (with `extra` arguments), made once per test binary and
/// kept in a file: its path.
fn surveyed(scenario: &str, extra: &[&str]) -> PathBuf {
    static DONE: OnceLock<Mutex<HashMap<String, PathBuf>>> = OnceLock::new();
    let key = format!("{scenario} {}", extra.join(" "));
    // Held while surveying: tests running at once wait for one survey instead of each making it.
    let mut done = DONE.get_or_init(|| Mutex::new(HashMap::new())).lock().unwrap_or_else(|e| e.into_inner());
    if let Some(path) = done.get(&key) {
        return path.clone();
    }
    let out = ohmsight()
        .args(["survey", "--quiet", "--json", "--no-store", "--scenario"])
        .arg(scenarios().join(scenario))
        .args(extra)
        .output()
        .unwrap();
    assert_eq!(code(&out), 0, "{key}: {}", stderr(&out));
    let path = dir().join(format!("{}.json", key.replace([' ', '/', '.'], "_")));
    std::fs::write(&path, &out.stdout).unwrap();
    done.insert(key, path.clone());
    path
}

fn record(path: &Path) -> RunRecord {
    match read_document(&std::fs::read_to_string(path).unwrap()).unwrap() {
        SurveyDoc::V2(doc) => doc.record(),
        SurveyDoc::V1(_) => panic!("a v2 document"),
    }
}

/// `compare --json` with `args`: the exit code and the document (Null when none was printed).
fn compare_json(args: &[&str]) -> (i32, Value, String) {
    let out = ohmsight().args(["compare", "--quiet", "--json"]).args(args).output().unwrap();
    let doc = serde_json::from_slice(&out.stdout).unwrap_or(Value::Null);
    (code(&out), doc, stderr(&out))
}

fn pin(doc: &Value, ch: u64) -> &Value {
    doc["pins"].as_array().unwrap().iter().find(|p| p["channel"] == ch).unwrap()
}

/// The one change of a pin, checked to be the only one.
fn the_change(doc: &Value, ch: u64) -> &Value {
    let p = pin(doc, ch);
    assert_eq!(p["changed"], true, "ch{ch}: {p:#}");
    let changes = p["changes"].as_array().unwrap();
    assert_eq!(changes.len(), 1, "ch{ch}: {p:#}");
    &changes[0]
}

fn s(path: &Path) -> &str {
    path.to_str().unwrap()
}

#[test]
fn two_surveys_of_one_unit_compare_clean_over_seeds() {
    // The same simulated unit (the board keeps its unit and its noise generator between
    // surveys) surveyed twice: new noise, nothing changed. Over several units (the seed draws
    // the unit's hold capacitor, switch resistance and converter errors) no change may appear.
    let text = std::fs::read_to_string(scenarios().join("coldframe.toml")).unwrap();
    let mut spurious = Vec::new();
    for seed in [1u64, 2, 3] {
        let mut sc = scenario::parse("coldframe.toml", &text).unwrap();
        sc.seed = seed;
        let mut session = Session::new(InProcessLink::new(&sc));
        let first = survey(&mut session, &SurveyOptions::default()).unwrap();
        let second = survey(&mut session, &SurveyOptions::default()).unwrap();
        assert_eq!(first.record.run.unit_id, second.record.run.unit_id);
        assert_ne!(first.record.experiments, second.record.experiments, "new noise on the second survey");
        let doc = Document::new(&first, "first", &second, "second");
        assert_eq!(doc.pins.len(), 4);
        for p in doc.pins.iter().filter(|p| p.changed || !p.cannot_tell.is_empty()) {
            spurious.push(format!("seed {seed} ch{}: {:#?} {:#?}", p.channel, p.changes, p.cannot_tell));
        }
    }
    assert!(spurious.is_empty(), "two surveys of one unit differ:\n{}", spurious.join("\n"));
}

#[test]
fn every_kind_of_change_is_found_with_its_numbers_and_meaning() {
    let baseline = surveyed("coldframe.toml", &[]);
    let worn = surveyed("coldframe-worn.toml", &[]);
    let (exit, doc, err) = compare_json(&["--baseline", s(&baseline), "--run", s(&worn)]);
    assert_eq!(exit, 1, "{err}");
    assert!(err.contains("4 of 4 pins changed"), "{err}");
    // The document's shape.
    assert_eq!(doc["schema"], SCHEMA);
    assert_eq!(doc["changed"], true);
    assert_eq!(doc["same_unit"], true);
    assert_eq!(doc["baseline"]["id"], record(&baseline).run.id);
    assert_eq!(doc["now"]["id"], record(&worn).run.id);
    assert!(doc["baseline"]["from"].as_str().unwrap().starts_with("file "), "{}", doc["baseline"]);
    for p in doc["pins"].as_array().unwrap() {
        for key in ["channel", "label", "changed", "changes"] {
            assert!(!p[key].is_null(), "pins[].{key}");
        }
        for c in p["changes"].as_array().unwrap() {
            for key in ["what", "before", "after", "meaning"] {
                assert!(!c[key].is_null(), "changes[].{key}: {c:#}");
            }
            for side in ["before", "after"] {
                for key in ["estimate", "low", "high", "unit", "text", "verdict"] {
                    assert!(c[side].get(key).is_some(), "changes[].{side}.{key}: {c:#}");
                }
            }
        }
    }
    // Each change against the truth the scenarios set (coldframe.toml → coldframe-worn.toml),
    // with the interval of each side holding its own truth. A source voltage's interval leaves
    // out the converter's own offset and gain errors (common to every run of a unit; the
    // simulated unit's add up to about 3 LSB), so it is allowed 0.2% of full scale beyond its ends.
    let holds = |side: &Value, truth: f64| {
        let slack = if side["unit"] == "V" { 0.002 * 3.3 } else { 0.0 };
        side["low"].as_f64().is_some_and(|l| l - slack <= truth * 1.000_001)
            && side["high"].as_f64().is_some_and(|h| h + slack >= truth * 0.999_999)
    };
    // ch0: the probe's output 1.42 V → 1.61 V: +13% ((1.61 − 1.42) / 1.42 = 13.4%).
    let c = the_change(&doc, 0);
    assert_eq!(c["what"], "source_volts");
    assert!(holds(&c["before"], 1.42) && holds(&c["after"], 1.61), "{c:#}");
    let meaning = c["meaning"].as_str().unwrap();
    assert!(meaning.starts_with("source moved from 1.42 V to 1.61 V (+13%)"), "{meaning}");
    // ch1: 10 kΩ → 100 kΩ in series: about a decade, and the interpretation of a connector.
    let c = the_change(&doc, 1);
    assert_eq!(c["what"], "source_ohms");
    assert!(holds(&c["before"], 10e3) && holds(&c["after"], 100e3), "{c:#}");
    let ratio = c["after"]["estimate"].as_f64().unwrap() / c["before"]["estimate"].as_f64().unwrap();
    assert!((8.0..12.5).contains(&ratio), "{ratio}");
    let meaning = c["meaning"].as_str().unwrap();
    assert!(meaning.starts_with("series resistance grew") && meaning.contains("connector"), "{meaning}");
    // ch2: 100 nF → 15 pF: the filter capacitor is gone.
    let c = the_change(&doc, 2);
    assert_eq!((c["what"].as_str(), c["rule"].as_str()), (Some("node_farads"), Some("filter-gone")));
    assert!(holds(&c["before"], 100e-9), "{c:#}");
    assert!(c["after"]["high"].as_f64().unwrap() < 100e-12, "{c:#}");
    assert!(c["meaning"].as_str().unwrap().contains("the filter capacitor is gone"), "{c:#}");
    // ch3: 20 mV of 50 Hz hum, new. The amplitude the noise record sees is the source's hum
    // through the first-order low-pass of Rs·Cn (2.2 kΩ · 20 pF: a corner at 3.6 MHz, no loss
    // at 50 Hz), so 20 mV within the converter's gain: the interval, widened by 5%, holds it.
    let c = the_change(&doc, 3);
    assert_eq!((c["what"].as_str(), c["rule"].as_str()), (Some("hum_50hz"), Some("hum-new")));
    let (lo, hi) = (c["after"]["low"].as_f64().unwrap(), c["after"]["high"].as_f64().unwrap());
    assert!(lo * 0.95 <= 0.02 && hi * 1.05 >= 0.02, "{c:#}");
    assert!(c["before"]["high"].as_f64().unwrap() < 1e-3, "{c:#}");
    assert!(c["meaning"].as_str().unwrap().starts_with("new 50 Hz hum of"), "{c:#}");

    // The text says the same, and the page draws a plot per change.
    let page = dir().join("worn.html");
    let out = ohmsight()
        .args(["compare", "--baseline", s(&baseline), "--run", s(&worn), "--html", s(&page)])
        .output()
        .unwrap();
    assert_eq!(code(&out), 1, "{}", stderr(&out));
    let text = String::from_utf8(out.stdout).unwrap();
    for ch in 0..4 {
        let meaning = pin(&doc, ch)["changes"][0]["meaning"].as_str().unwrap();
        assert!(text.contains(meaning), "{text}");
    }
    assert!(text.contains("4 of 4 pins changed since the baseline"), "{text}");
    let html = std::fs::read_to_string(&page).unwrap();
    for ch in 0..4 {
        assert!(html.contains(&format!("id=\"pin-{ch}-change-0\"><svg")), "ch{ch}");
    }
    for external in ["<script", "src=\"http", "href=\"http", "url(http"] {
        assert!(!html.contains(external), "the page is self-contained: {external}");
    }
}

#[test]
fn a_sensor_come_loose_is_floating_now() {
    let baseline = surveyed("coldframe.toml", &[]);
    let loose = surveyed("coldframe-loose.toml", &[]);
    let (exit, doc, err) = compare_json(&["--baseline", s(&baseline), "--run", s(&loose)]);
    assert_eq!(exit, 1, "{err}");
    let p = pin(&doc, 0);
    let verdict = p["changes"].as_array().unwrap().iter().find(|c| c["what"] == "verdict").expect("a verdict change");
    assert_eq!(
        (verdict["before"]["verdict"].as_str(), verdict["after"]["verdict"].as_str()),
        (Some("driven"), Some("floating"))
    );
    assert!(verdict["after"]["low"].as_f64().unwrap() > 1e9, "{verdict:#}");
    assert!(verdict["after"]["high"].is_null(), "a floating pin is a lower bound: {verdict:#}");
    let meaning = verdict["meaning"].as_str().unwrap();
    assert!(meaning.starts_with("now floating (>") && meaning.contains("came loose"), "{meaning}");
    for ch in 1..4 {
        assert_eq!(pin(&doc, ch)["changed"], false, "ch{ch}: {:#}", pin(&doc, ch));
    }
}

#[test]
fn one_survey_against_itself_and_another_unit_as_golden() {
    let baseline = surveyed("coldframe.toml", &[]);
    let other = surveyed("coldframe.toml", &["--seed", "7"]);
    // Another seed is another unit: refused unless asked for.
    let (exit, _, err) = compare_json(&["--baseline", s(&baseline), "--run", s(&other)]);
    assert_eq!(exit, 2, "{err}");
    assert!(err.contains("--other-unit"), "{err}");
    // Asked for: the same wiring on a unit within the board's tolerances compares clean.
    let (exit, doc, err) = compare_json(&["--baseline", s(&baseline), "--run", s(&other), "--other-unit"]);
    assert_eq!(exit, 0, "{err}\n{doc:#}");
    assert_eq!(doc["same_unit"], false);
    assert_eq!(doc["changed"], false);
    for p in doc["pins"].as_array().unwrap() {
        assert_eq!(p["changed"], false, "{p:#}");
        assert!(p["changes"].as_array().unwrap().is_empty());
    }
    // One run against itself is bad input, not a clean compare.
    let (exit, _, err) = compare_json(&["--baseline", s(&baseline), "--run", s(&baseline)]);
    assert_eq!(exit, 2, "{err}");
}

#[test]
fn bad_input_exits_2() {
    let baseline = surveyed("coldframe.toml", &[]);
    let db = dir().join("bad-input.db");
    let db = s(&db);
    // A run id the database does not hold.
    let (exit, _, err) = compare_json(&["--baseline", "01M8ZZZZZZZZ", "--run", s(&baseline), "--db", db]);
    assert_eq!(exit, 2, "{err}");
    // A file that is not there.
    let (exit, _, err) = compare_json(&["--baseline", "nowhere/run.json", "--run", s(&baseline)]);
    assert_eq!(exit, 2, "{err}");
    assert!(err.contains("nowhere/run.json"), "{err}");
    // Another board (other pins), even as a golden unit.
    let bench = PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("tests/data/bench4.toml");
    let out = ohmsight()
        .args(["survey", "--quiet", "--json", "--no-store", "--channel", "0", "--scenario"])
        .arg(&bench)
        .output()
        .unwrap();
    assert_eq!(code(&out), 0, "{}", stderr(&out));
    let other_board = dir().join("bench4-ch0.json");
    std::fs::write(&other_board, &out.stdout).unwrap();
    let (exit, _, err) = compare_json(&["--baseline", s(&baseline), "--run", s(&other_board), "--other-unit"]);
    assert_eq!(exit, 2, "{err}");
    assert!(err.contains("different boards"), "{err}");
    // No baseline in an empty database.
    let (exit, _, err) = compare_json(&["--run", s(&baseline), "--db", db]);
    assert_eq!(exit, 2, "{err}");
    assert!(err.contains("no earlier complete survey"), "{err}");
    // --run and a link option together.
    let (exit, _, err) = compare_json(&["--run", s(&baseline), "--seed", "3"]);
    assert_eq!(exit, 2, "{err}");
}

/// Stores a survey document's record in `db` as a survey would (its pins' summaries too).
fn store_run(db: &store_support::TestDb, path: &Path) -> String {
    let record = record(path);
    let report = ohmsight::analyse::analyse(&record);
    let mut store = db.open();
    store.begin_run(&record).unwrap();
    let pins: Vec<PinSummary> = report.pins.iter().map(PinSummary::from_report).collect();
    store.finish_run(&record.run, &pins).unwrap();
    record.run.id
}

on_both_backends!(baseline_defaults_to_the_units_first_complete_survey);

fn baseline_defaults_to_the_units_first_complete_survey(db: &store_support::TestDb) {
    let url = match &db.url {
        ohmsight::store::DbUrl::Sqlite(path) => path.display().to_string(),
        ohmsight::store::DbUrl::Postgres(url) => url.clone(),
    };
    // In the order a unit's life would put them: a survey of one pin (complete, but not of
    // every pin), the first full survey, another unit's survey, then the worn unit.
    let one_pin = store_run(db, &surveyed("coldframe.toml", &["--channel", "3"]));
    let first = store_run(db, &surveyed("coldframe.toml", &[]));
    let other_unit = store_run(db, &surveyed("coldframe.toml", &["--seed", "7"]));
    let worn = store_run(db, &surveyed("coldframe-worn.toml", &[]));
    let (exit, doc, err) = compare_json(&["--run", &worn[..10], "--db", &url]);
    assert_eq!(exit, 1, "{err}");
    assert_eq!(doc["baseline"]["id"], first.as_str(), "not {one_pin} nor {other_unit}");
    assert_eq!(doc["now"]["id"], worn.as_str());
    assert!(doc["baseline"]["from"].as_str().unwrap().contains("first complete survey"), "{}", doc["baseline"]);
    assert_eq!(doc["pins_changed"], 4);
    // The first survey compared with the unit's baseline: that is itself, so the next one is
    // taken; and a live compare of the unchanged unit over the simulated board is clean and
    // kept in the database as a survey of its own.
    let scenario = scenarios().join("coldframe.toml");
    let (exit, doc, err) = compare_json(&["--scenario", s(&scenario), "--db", &url]);
    assert_eq!(exit, 0, "{err}\n{doc:#}");
    assert_eq!(doc["baseline"]["id"], first.as_str());
    let now = doc["now"]["id"].as_str().unwrap();
    assert!(doc["now"]["from"].as_str().unwrap().starts_with("surveyed now"), "{}", doc["now"]);
    let stored = db.open().load_run(now).unwrap();
    assert!(stored.run.complete && stored.run.command.contains("compare"), "{:?}", stored.run);
}

#[test]
fn a_board_that_never_answers_is_no_verdict_exit_3() {
    // A serial port where nothing answers: no verdict on the unit (exit 3, not 1), and the
    // attempt is kept in the database with its fault.
    let (_master, path) = ohmsight::simulate::open_pty().unwrap();
    let db = dir().join("silent.db");
    let out = ohmsight().args(["compare", "--quiet", "--port", &path, "--db", s(&db)]).output().unwrap();
    assert_eq!(code(&out), 3, "{}", stderr(&out));
    let err = stderr(&out);
    assert!(err.contains("no comparison made"), "{err}");
    let mut store = ohmsight::store::open(&ohmsight::store::DbUrl::Sqlite(db.clone())).unwrap();
    let runs = store.list_runs(&ohmsight::store::RunFilter::default()).unwrap();
    assert_eq!(runs.len(), 1, "{runs:?}");
    assert!(!runs[0].complete && runs[0].fault.is_some(), "{:?}", runs[0]);
}
