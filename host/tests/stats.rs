//! `ohmsight history stats` on both backends: runs with known summaries are written straight
//! into a store (SQLite, then PostgreSQL), and the binary's numbers are checked against values
//! computed independently here (the `statrs` crate for mean and σ, hand-worked Cp/Cpk).
//!
//! The scenario is invented: a sensor board "fixture-7" whose ch0 reads a 47 kΩ divider and
//! whose ch2 is an unconnected spare. Units a…d are tested in November:
//! - a passes first time;
//! - b fails ch0's source resistance (55 kΩ > 52 kΩ), then passes a retest: not first-pass;
//! - c measures 51 kΩ with an interval 50–53 kΩ that straddles the 52 kΩ limit: undecided,
//!   not a pass;
//! - d's ch0 verdict is unknown: it fails the verdict limit;
//! - e's run was cut short (left out), and one run is of another board.

mod browser_support;
// The store tests use more of it (plain SQL) than this file does.
#[allow(dead_code)]
#[macro_use]
mod store_support;

use ohmsight::record::{
    BoardRecord, ChannelRecord, FrontEndRecord, LinkRecord, PinRecord, Profile, RunKind, RunMeta, RunRecord, RunStats,
};
use ohmsight::store::{DbUrl, PinSummary};
use statrs::statistics::Statistics;
use std::path::{Path, PathBuf};
use std::process::{Command, Output};
use store_support::TestDb;

on_both_backends!(
    statistics_match_an_independent_computation,
    first_pass_yield_counts_only_first_runs,
    since_and_board_filter_the_runs,
    bad_input_exits_2,
    without_limits_there_is_no_index_and_it_says_so,
);

const BOARD: &str = "fixture-7";

fn record(id: &str, board: &str, unit: &str, started: &str) -> RunRecord {
    let ch = |channel: u8, label: &str, role: &str| ChannelRecord {
        channel,
        label: label.into(),
        role: role.into(),
        pull: false,
        drive: false,
    };
    RunRecord {
        run: RunMeta {
            id: id.into(),
            kind: RunKind::Survey,
            started: started.into(),
            finished: None,
            tool_version: "0.1.0".into(),
            firmware_version: "2.0.0".into(),
            protocol_version: 3,
            board: board.into(),
            unit_id: unit.into(),
            link: LinkRecord::InProcess,
            scenario: None,
            seed: None,
            command: "ohmsight survey".into(),
            channels: vec![0, 2],
            complete: false,
            fault: None,
            stats: RunStats::default(),
        },
        board: BoardRecord {
            name: board.into(),
            firmware: "2.0.0".into(),
            protocol: 3,
            unit_id: u64::from_str_radix(unit, 16).unwrap(),
            front_end: FrontEndRecord::default(),
            // The other board calls its ch2 otherwise.
            channels: vec![
                ch(0, "divider", "pin"),
                ch(2, if board == BOARD { "spare" } else { "aux in" }, "pin"),
                ch(16, "VSS", "precharge"),
            ],
        },
        profile: Profile {
            bits: 12,
            vref_volts: 3.3,
            sample_ps: vec![125_000, 3_375_000],
            conversion_ps: 1_041_667,
            hold_farads: 4e-12,
            hold_tolerance: 0.05,
            switch_ohms: 6e3,
            switch_tolerance: 0.1,
            adc_noise_lsb: 0.5,
            leakage_amps: 0.0,
            precharges: Vec::new(),
            source: "board".into(),
        },
        pins: vec![
            PinRecord { channel: 0, label: "divider".into(), complete: true },
            PinRecord { channel: 2, label: "spare".into(), complete: true },
        ],
        experiments: Vec::new(),
    }
}

/// ch0 driven with Rs `[est, low, high]`, `volts`, `noise`; ch2 floating.
fn pins(verdict: &str, rs: [Option<f64>; 3], volts: Option<f64>, noise: Option<f64>) -> Vec<PinSummary> {
    vec![
        PinSummary {
            channel: 0,
            verdict: verdict.into(),
            reason: None,
            source_ohms: rs,
            node_farads: [Some(12e-12), Some(11e-12), Some(13e-12)],
            source_volts: volts,
            noise_lsb_rms: noise,
            min_sample_ns: Some(6000.0),
            flags: Vec::new(),
        },
        PinSummary {
            channel: 2,
            verdict: "floating".into(),
            reason: None,
            source_ohms: [None, Some(5e9), None],
            node_farads: [None, None, None],
            source_volts: None,
            noise_lsb_rms: Some(0.4),
            min_sample_ns: None,
            flags: Vec::new(),
        },
    ]
}

/// The unit, run id and start of each run of the scenario, with ch0's values.
struct Run {
    id: &'static str,
    board: &'static str,
    unit: &'static str,
    started: &'static str,
    complete: bool,
    verdict: &'static str,
    rs: [Option<f64>; 3],
    volts: Option<f64>,
    noise: Option<f64>,
}

const fn some3(e: f64, l: f64, h: f64) -> [Option<f64>; 3] {
    [Some(e), Some(l), Some(h)]
}

const RUNS: [Run; 7] = [
    Run {
        id: "01KSTATS000000000000000A01",
        board: BOARD,
        unit: "000000000000000a",
        started: "2026-11-02T08:00:00.000Z",
        complete: true,
        verdict: "driven",
        rs: some3(47e3, 46e3, 48e3),
        volts: Some(1.38),
        noise: Some(0.5),
    },
    Run {
        id: "01KSTATS000000000000000B01",
        board: BOARD,
        unit: "000000000000000b",
        started: "2026-11-03T08:00:00.000Z",
        complete: true,
        verdict: "driven",
        rs: some3(55e3, 54e3, 56e3),
        volts: Some(1.40),
        noise: Some(0.6),
    },
    Run {
        id: "01KSTATS000000000000000B02",
        board: BOARD,
        unit: "000000000000000b",
        started: "2026-11-04T08:00:00.000Z",
        complete: true,
        verdict: "driven",
        rs: some3(48e3, 47e3, 49e3),
        volts: Some(1.42),
        noise: Some(0.7),
    },
    Run {
        id: "01KSTATS000000000000000C01",
        board: BOARD,
        unit: "000000000000000c",
        started: "2026-11-05T08:00:00.000Z",
        complete: true,
        verdict: "driven",
        rs: some3(51e3, 50e3, 53e3),
        volts: Some(1.40),
        noise: Some(0.6),
    },
    Run {
        id: "01KSTATS000000000000000D01",
        board: BOARD,
        unit: "000000000000000d",
        started: "2026-11-06T08:00:00.000Z",
        complete: true,
        verdict: "unknown",
        rs: [None, None, None],
        volts: None,
        noise: None,
    },
    Run {
        id: "01KSTATS000000000000000E01",
        board: BOARD,
        unit: "000000000000000e",
        started: "2026-11-07T08:00:00.000Z",
        complete: false,
        verdict: "driven",
        rs: some3(10e3, 9e3, 11e3),
        volts: Some(0.1),
        noise: Some(9.0),
    },
    Run {
        id: "01KSTATS000000000000000F01",
        board: "other-board",
        unit: "000000000000000f",
        started: "2026-11-08T08:00:00.000Z",
        complete: true,
        verdict: "driven",
        rs: some3(1e3, 0.9e3, 1.1e3),
        volts: Some(3.0),
        noise: Some(0.2),
    },
];

/// The limits of the scenario: ch0 driven 40–52 kΩ, 1.30–1.45 V, noise ≤ 1 LSB; ch2 floating,
/// found by its label.
const LIMITS: &str = r#"name = "fixture-7 end of line"
[[pin]]
channel = 0
verdict = "driven"
source_ohms = [40e3, 52e3]
source_volts = [1.3, 1.45]
noise_lsb_max = 1.0

[[pin]]
label = "spare"
verdict = "floating"
source_ohms = { low = 1e9 }
noise_lsb_max = 1.0
"#;

/// Writes the scenario's runs into the store, the way a survey does (begin, then finish).
fn fill(db: &TestDb) {
    let mut store = db.open();
    for r in &RUNS {
        let rec = record(r.id, r.board, r.unit, r.started);
        store.begin_run(&rec).unwrap();
        let meta = RunMeta {
            finished: Some(r.started.replace("08:00", "08:01")),
            complete: r.complete,
            fault: (!r.complete).then(|| "link lost".to_string()),
            ..rec.run.clone()
        };
        let summaries = if r.complete { pins(r.verdict, r.rs, r.volts, r.noise) } else { Vec::new() };
        store.finish_run(&meta, &summaries).unwrap();
    }
}

fn db_arg(db: &TestDb) -> String {
    match &db.url {
        DbUrl::Sqlite(path) => path.display().to_string(),
        DbUrl::Postgres(url) => url.clone(),
    }
}

fn limits_file(dir: &Path, name: &str, text: &str) -> PathBuf {
    let path = dir.join(name);
    std::fs::write(&path, text).unwrap();
    path
}

fn stats(db: &TestDb, args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_ohmsight"))
        .args(["history", "stats", "--db", &db_arg(db)])
        .args(args)
        .output()
        .unwrap()
}

fn json(db: &TestDb, args: &[&str]) -> serde_json::Value {
    let out = stats(db, &[args, &["--json"]].concat());
    assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
    serde_json::from_slice(&out.stdout).unwrap()
}

fn board<'a>(doc: &'a serde_json::Value, name: &str) -> &'a serde_json::Value {
    doc["stats"]["boards"].as_array().unwrap().iter().find(|b| b["board"] == name).expect("the board is reported")
}

fn measurement<'a>(b: &'a serde_json::Value, ch: u64, key: &str) -> &'a serde_json::Value {
    let pin = b["pins"].as_array().unwrap().iter().find(|p| p["channel"] == ch).expect("the pin");
    pin["measurements"].as_array().unwrap().iter().find(|m| m["measurement"] == key).expect("the measurement")
}

fn close(a: f64, b: f64) -> bool {
    (a - b).abs() <= 1e-9 * b.abs().max(1e-300)
}

fn statistics_match_an_independent_computation(db: &TestDb) {
    fill(db);
    let dir = tempfile::tempdir().unwrap();
    let limits = limits_file(dir.path(), "eol.toml", LIMITS);
    let doc = json(db, &["--limits", limits.to_str().unwrap(), "--board", BOARD]);
    assert_eq!(doc["schema"], "ohmsight.stats.v1");
    assert_eq!(doc["stats"]["runs"], 5, "the five complete runs of the board");
    assert_eq!(doc["stats"]["incomplete_left_out"], 1, "unit e's cut-short run");
    let b = board(&doc, BOARD);
    assert_eq!(b["units"], 4);

    // Mean and σ of ch0's source resistance against statrs (sample σ, n − 1): every complete
    // run is a value, d's (no estimate) is missing.
    let rs = measurement(b, 0, "source_ohms");
    let values = [47e3, 55e3, 48e3, 51e3];
    assert_eq!(rs["count"], 4);
    assert_eq!(rs["missing"], 1);
    assert!(close(rs["mean"].as_f64().unwrap(), values.mean()), "{rs}");
    assert!(close(rs["sd"].as_f64().unwrap(), values.std_dev()), "{rs}");
    let ln: Vec<f64> = values.iter().map(|v| v.ln()).collect();
    assert!(close(rs["ln_mean"].as_f64().unwrap(), ln.iter().mean()));
    assert!(close(rs["ln_sd"].as_f64().unwrap(), ln.iter().std_dev()));
    assert_eq!(rs["limits"]["low"], 40e3);
    assert_eq!(rs["limits"]["high"], 52e3);
    let points: Vec<&str> = rs["points"].as_array().unwrap().iter().map(|p| p["run"].as_str().unwrap()).collect();
    assert_eq!(points, [RUNS[0].id, RUNS[1].id, RUNS[2].id, RUNS[3].id], "every run, in time order");

    // Cp/Cpk worked by hand (formulas of NIST/SEMATECH e-Handbook §6.1.6): source volts 1.38,
    // 1.40, 1.42, 1.40 → μ = 1.40, σ = √(0.0008/3) = 0.0163299; limits 1.30–1.45:
    // Cp = 0.15/(6σ) = 1.530931, Cpk = min(0.05, 0.10)/(3σ) = 1.020621.
    let v = measurement(b, 0, "source_volts");
    assert!((v["cp"]["value"].as_f64().unwrap() - 1.530931).abs() < 1e-6, "{v}");
    assert!((v["cpk"]["value"].as_f64().unwrap() - 1.020621).abs() < 1e-6, "{v}");
    // One-sided: noise 0.5, 0.6, 0.7, 0.6 LSB, at most 1.0 → σ = √(0.02/3) = 0.0816497,
    // CPU = 0.4/(3σ) = 1.632993, and no Cp.
    let n = measurement(b, 0, "noise_lsb_rms");
    assert!((n["cpk"]["value"].as_f64().unwrap() - 1.632993).abs() < 1e-6, "{n}");
    assert!(n["cp"]["value"].is_null() && n["cp"]["why"].as_str().unwrap().contains("one-sided"), "{n}");
    // No limit for the node capacitance: no index, and why.
    let c = measurement(b, 0, "node_farads");
    assert!(c["cpk"]["value"].is_null() && c["cpk"]["why"].as_str().unwrap().contains("no limit"), "{c}");
    // σ = 0 (ch2's noise is 0.4 every time): `—`, never a number.
    let spare_noise = measurement(b, 2, "noise_lsb_rms");
    assert_eq!(spare_noise["sd"], 0.0);
    assert!(spare_noise["cpk"]["value"].is_null(), "{spare_noise}");
    assert!(spare_noise["cpk"]["why"].as_str().unwrap().contains("σ = 0"), "{spare_noise}");

    // The table says the same.
    let out = stats(db, &["--limits", limits.to_str().unwrap(), "--board", BOARD]);
    assert!(out.status.success());
    let text = String::from_utf8_lossy(&out.stdout);
    assert!(text.contains("1 incomplete run left out"), "{text}");
    assert!(text.contains("1.53") && text.contains("1.02") && text.contains("1.63"), "{text}");
    assert!(text.contains("one-sided: Cpk only"), "{text}");
}

fn first_pass_yield_counts_only_first_runs(db: &TestDb) {
    fill(db);
    let dir = tempfile::tempdir().unwrap();
    let limits = limits_file(dir.path(), "eol.toml", LIMITS);
    let doc = json(db, &["--limits", limits.to_str().unwrap(), "--board", BOARD]);
    let b = board(&doc, BOARD);
    // a passes; b failed first (passing its retest does not count); c's interval straddles the
    // limit (undecided, no pass); d's verdict is unknown.
    assert_eq!(b["first_pass_yield"]["units"], 4);
    assert_eq!(b["first_pass_yield"]["passed"], 1);
    assert_eq!(b["first_pass_yield"]["fraction"], 0.25);
    let failures = b["first_pass_failures"].as_array().unwrap();
    let why = |unit: &str| -> String {
        failures.iter().find(|f| f["unit"] == unit).map(|f| f["limits"].to_string()).unwrap_or_default()
    };
    assert!(why("000000000000000b").contains("ch0 source_ohms fail"), "{failures:?}");
    assert!(why("000000000000000c").contains("ch0 source_ohms undecided"), "{failures:?}");
    assert!(why("000000000000000d").contains("ch0 verdict fail"), "{failures:?}");
    assert_eq!(why("000000000000000a"), "");
    let pin_yield = |ch: u64| {
        let pin = b["pins"].as_array().unwrap().iter().find(|p| p["channel"] == ch).unwrap();
        (pin["first_pass_yield"]["passed"].as_u64().unwrap(), pin["first_pass_yield"]["units"].as_u64().unwrap())
    };
    assert_eq!(pin_yield(0), (1, 4));
    assert_eq!(pin_yield(2), (4, 4), "the spare, found by its label, is floating every time");
}

fn since_and_board_filter_the_runs(db: &TestDb) {
    fill(db);
    let dir = tempfile::tempdir().unwrap();
    let limits = limits_file(dir.path(), "eol.toml", LIMITS);
    // From 4 November: b's first run in the window is its (passing) retest.
    let doc = json(db, &["--limits", limits.to_str().unwrap(), "--board", BOARD, "--since", "2026-11-04"]);
    let b = board(&doc, BOARD);
    assert_eq!(b["runs"], 3);
    assert_eq!(b["first_pass_yield"]["units"], 3);
    assert_eq!(b["first_pass_yield"]["passed"], 1);
    assert_eq!(measurement(b, 0, "source_ohms")["count"], 2);
    // Without --board both boards, each on its own.
    let doc = json(db, &[]);
    let names: Vec<&str> =
        doc["stats"]["boards"].as_array().unwrap().iter().map(|b| b["board"].as_str().unwrap()).collect();
    assert_eq!(names, ["fixture-7", "other-board"]);
    let other = json(db, &["--board", "other-board"]);
    assert_eq!(other["stats"]["runs"], 1);
    assert_eq!(measurement(board(&other, "other-board"), 0, "source_volts")["mean"], 3.0);
    // A limits file naming its board selects that board's runs.
    let named = limits_file(dir.path(), "named.toml", &format!("board = \"fixture-7\"\n{LIMITS}"));
    let doc = json(db, &["--limits", named.to_str().unwrap()]);
    assert_eq!(doc["stats"]["runs"], 5);
    assert_eq!(doc["stats"]["boards"].as_array().unwrap().len(), 1);
}

fn bad_input_exits_2(db: &TestDb) {
    fill(db);
    let dir = tempfile::tempdir().unwrap();
    let bad = limits_file(dir.path(), "bad.toml", &LIMITS.replace("[40e3, 52e3]", "[52e3, 40e3]"));
    let out = stats(db, &["--limits", bad.to_str().unwrap()]);
    assert_eq!(out.status.code(), Some(2));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(err.contains(&format!("{}:5:", bad.display())) && err.contains("swap"), "{err}");
    let out = stats(db, &["--since", "last tuesday"]);
    assert_eq!(out.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&out.stderr).contains("YYYY-MM-DD"));
    // Limits that do not fit a board in the selection: the other board has no "spare".
    let limits = limits_file(dir.path(), "eol.toml", LIMITS);
    let out = stats(db, &["--limits", limits.to_str().unwrap()]);
    assert_eq!(out.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&out.stderr).contains("no pin labelled \"spare\""));
    let named = limits_file(dir.path(), "named.toml", &format!("board = \"fixture-7\"\n{LIMITS}"));
    let out = stats(db, &["--limits", named.to_str().unwrap(), "--board", "other-board"]);
    assert_eq!(out.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&out.stderr).contains("is for board \"fixture-7\""));
}

fn without_limits_there_is_no_index_and_it_says_so(db: &TestDb) {
    fill(db);
    let out = stats(db, &["--board", BOARD]);
    assert!(out.status.success());
    let text = String::from_utf8_lossy(&out.stdout);
    assert!(text.contains("no limits file given") && !text.contains("Cpk  "), "{text}");
    assert!(!text.contains("first-pass yield:"), "{text}");
    let doc = json(db, &["--board", BOARD]);
    let b = board(&doc, BOARD);
    assert!(b["first_pass_yield"].is_null());
    assert!(measurement(b, 0, "source_ohms")["cpk"]["why"].as_str().unwrap().contains("--limits"));
    // Nothing matches: said, exit 0.
    let out = stats(db, &["--board", "no-such-board"]);
    assert!(out.status.success());
    assert!(String::from_utf8_lossy(&out.stdout).contains("no complete runs match"));
}

#[test]
fn html_page_has_a_control_chart_and_histogram_per_measurement_in_chromium() {
    browser_support::require_chromium();
    let db = store_support::sqlite();
    fill(&db);
    let dir = PathBuf::from(env!("CARGO_TARGET_TMPDIR")).join("stats-page");
    let _ = std::fs::remove_dir_all(&dir);
    std::fs::create_dir_all(&dir).unwrap();
    let limits = limits_file(&dir, "eol.toml", LIMITS);
    let page = dir.join("stats.html");
    let out = stats(&db, &["--limits", limits.to_str().unwrap(), "--board", BOARD, "--html", page.to_str().unwrap()]);
    assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
    let html = std::fs::read_to_string(&page).unwrap();

    let dom = browser_support::run_chromium(&dir.join("profile"), &page, &["--dump-dom"]);
    assert!(dom.status.success(), "{}", String::from_utf8_lossy(&dom.stderr));
    let text = String::from_utf8_lossy(&dom.stdout);
    assert!(text.contains("id=\"report-end\""), "the page loaded to its end");
    for key in ["source_ohms", "node_farads", "source_volts", "noise_lsb_rms", "min_sample_ns"] {
        for plot in ["control", "histogram"] {
            let id = format!("id=\"board-0-ch0-{key}-{plot}\"");
            assert!(text.contains(&id), "{id} is in the page");
        }
    }
    // Every figure of a measurement with values holds a drawn plot, not a note.
    assert_eq!(text.matches("<svg").count(), html.matches("<svg").count());
    assert_eq!(html.matches("<svg").count(), 2 * 5 + 2, "ch0's five measurements and ch2's noise");
    // ch2's source resistance has a limit but only bounds were stored: a note says so.
    assert!(text.contains("id=\"board-0-ch2-source_ohms-control\" class=\"empty\""), "no plot, a note");
    assert!(html.contains("only a bound"), "the note says why");
    assert!(!html.contains("could not be drawn"));
    // The limit lines are drawn (the crimson of the limits) and the yield is shown.
    assert!(html.to_ascii_lowercase().contains("#c21f4a"), "limit lines");
    assert!(text.contains("First-pass yield:</b> 25.0% (1/4)"), "the yield is on the page");
    let console: Vec<String> =
        String::from_utf8_lossy(&dom.stderr).lines().filter(|l| l.contains(":CONSOLE")).map(String::from).collect();
    assert!(console.is_empty(), "console messages: {console:#?}");

    let shot = dir.join("stats.png");
    let run = browser_support::run_chromium(
        &dir.join("profile"),
        &page,
        &[&format!("--screenshot={}", shot.display()), "--window-size=1200,2400"],
    );
    assert!(run.status.success(), "{}", String::from_utf8_lossy(&run.stderr));
    let png = std::fs::read(&shot).unwrap();
    assert_eq!(browser_support::png_size(&png), (1200, 2400));
    assert!(png.len() > 60_000, "the screenshot holds a drawn page ({} bytes)", png.len());
    println!("screenshot of the stats page: {}", shot.display());
}
