//! The run record and the store as a user meets them: `survey --json` then `refit`, `history`,
//! a survey killed with SIGKILL, and many surveys writing into one database at once.

// Shared with the store tests, which use more of it than this file does.
#[allow(dead_code)]
mod store_support;

use ohmsight::store::DbUrl;
use serde_json::Value;
use std::path::{Path, PathBuf};
use std::process::{Command, Output, Stdio};
use std::time::{Duration, Instant};

fn ohmsight() -> Command {
    Command::new(env!("CARGO_BIN_EXE_ohmsight"))
}

fn temp_dir(name: &str) -> PathBuf {
    let dir = std::env::temp_dir().join(format!("ohmsight-runs-{}-{name}", std::process::id()));
    let _ = std::fs::remove_dir_all(&dir);
    std::fs::create_dir_all(&dir).unwrap();
    dir
}

fn ok(out: &Output) -> String {
    assert!(out.status.success(), "exit {:?}: {}", out.status.code(), String::from_utf8_lossy(&out.stderr));
    String::from_utf8(out.stdout.clone()).unwrap()
}

/// An invented four-pin bench board (47 kΩ divider, 2.2 MΩ sensor, 470 kΩ behind 100 nF, open pin).
fn bench() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("tests/data/bench4.toml")
}

fn survey_json(db: &str, extra: &[&str]) -> String {
    let mut c = ohmsight();
    c.args(["survey", "--quiet", "--json"]);
    if !extra.contains(&"--no-store") {
        c.args(["--db", db]);
    }
    ok(&c.args(extra).output().unwrap())
}

fn history_json(db: &str) -> Value {
    serde_json::from_str(&ok(&ohmsight().args(["history", "--json", "--db", db]).output().unwrap())).unwrap()
}

#[test]
fn refit_of_a_survey_document_repeats_every_number() {
    let dir = temp_dir("refit");
    let db = dir.join("runs.db").display().to_string();
    let json = survey_json(&db, &["--scenario", bench().to_str().unwrap()]);
    let file = dir.join("run.json");
    std::fs::write(&file, &json).unwrap();
    let doc: Value = serde_json::from_str(&json).unwrap();
    assert_eq!(doc["schema"], "ohmsight.survey.v2");
    assert_eq!(doc["run"]["complete"], true);
    let id = doc["run"]["id"].as_str().unwrap();
    // From the file, and from the store by a prefix of the id: the same document, digit for digit.
    let again = ok(&ohmsight().args(["refit", "--json"]).arg(&file).output().unwrap());
    assert_eq!(again, json);
    let stored = ok(&ohmsight().args(["refit", "--json", "--db", &db, &id[..10]]).output().unwrap());
    assert_eq!(stored, json);
    // The text too.
    let text = ok(&ohmsight().args(["refit"]).arg(&file).output().unwrap());
    let shown = ok(&ohmsight().args(["history", "show", id, "--db", &db]).output().unwrap());
    assert_eq!(text, shown);
    assert!(text.contains(&format!("run {id} started")), "{text}");
    // Every pin carries its evidence, and the run its metadata.
    for p in doc["pins"].as_array().unwrap() {
        let evidence = p["evidence"].as_array().unwrap();
        assert!(!evidence.is_empty(), "{}", p["channel"]);
        for e in evidence {
            assert_eq!(e["pin"], p["channel"]);
            assert!(e["experiment"]["kind"].is_string() && e["start_ps"].is_u64() && e["end_ps"].is_u64());
        }
    }
    for key in ["started", "finished", "tool_version", "firmware_version", "protocol_version", "board", "unit_id"] {
        assert!(!doc["run"][key].is_null(), "run.{key}");
    }
    assert_eq!(doc["run"]["link"]["kind"], "in-process");
    assert_eq!(doc["run"]["seed"], doc["run"]["seed"].as_u64().unwrap());
    assert!(doc["run"]["command"].as_str().unwrap().contains("survey"));
}

#[test]
fn refit_with_another_profile_reanalyses_under_it() {
    let dir = temp_dir("profile");
    let db = dir.join("runs.db").display().to_string();
    let json = survey_json(&db, &["--scenario", bench().to_str().unwrap()]);
    let file = dir.join("run.json");
    std::fs::write(&file, &json).unwrap();
    let doc: Value = serde_json::from_str(&json).unwrap();
    let hold = doc["profile"]["hold_farads"].as_f64().unwrap();
    let profile = dir.join("cal.toml");
    std::fs::write(&profile, format!("# a calibrated unit\nhold_farads = {:e}\n", hold * 1.5)).unwrap();
    let out = ok(&ohmsight().args(["refit", "--json", "--profile"]).arg(&profile).arg(&file).output().unwrap());
    let re: Value = serde_json::from_str(&out).unwrap();
    assert_eq!(re["profile"]["hold_farads"].as_f64().unwrap(), hold * 1.5);
    assert_eq!(re["board"]["hold_farads"].as_f64().unwrap(), hold * 1.5);
    assert_eq!(re["profile"]["source"], profile.display().to_string());
    // The same evidence under a larger hold capacitor: the fitted sources move.
    let rs = |d: &Value, ch: usize| d["pins"][ch]["source_ohms"]["estimate"].as_f64();
    let moved = (0..4).filter(|&ch| rs(&doc, ch).is_some() && rs(&doc, ch) != rs(&re, ch)).count();
    assert!(moved >= 2, "{moved} pins moved");
    assert_eq!(re["pins"][0]["evidence"], doc["pins"][0]["evidence"]);
    // A profile with a mistake says where.
    std::fs::write(&profile, "hold_farads = 4e-12\nswitch_ohm = 3\n").unwrap();
    let out = ohmsight().args(["refit", "--profile"]).arg(&profile).arg(&file).output().unwrap();
    assert_eq!(out.status.code(), Some(2));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(err.contains(&format!("{}:2:", profile.display())), "{err}");
}

/// A v1 document written by ohmsight 0.1.0 before the run record existed (the bench board).
fn v1_document() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("tests/data/bench4-survey-v1.json")
}

#[test]
fn a_v1_document_still_loads_but_cannot_be_refitted() {
    let doc: Value = serde_json::from_str(&std::fs::read_to_string(v1_document()).unwrap()).unwrap();
    assert_eq!(doc["schema"], "ohmsight.survey.v1");
    let out = ok(&ohmsight()
        .args(["loading", "--pin", "0", "--preset", "scope-1x", "--json", "--from"])
        .arg(v1_document())
        .output()
        .unwrap());
    let answer: Value = serde_json::from_str(&out).unwrap();
    assert_eq!(answer["pin"]["channel"], 0, "{answer}");
    let out = ohmsight().arg("refit").arg(v1_document()).output().unwrap();
    assert_eq!(out.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&out.stderr).contains("no evidence"), "{}", String::from_utf8_lossy(&out.stderr));
}

#[test]
fn history_lists_runs_with_their_verdicts_and_filters_them() {
    let dir = temp_dir("history");
    let db = dir.join("runs.db").display().to_string();
    let a: Value = serde_json::from_str(&survey_json(&db, &["--scenario", bench().to_str().unwrap()])).unwrap();
    let b: Value = serde_json::from_str(&survey_json(&db, &["--channel", "3"])).unwrap();
    let list = history_json(&db);
    assert_eq!(list["schema"], "ohmsight.history.v1");
    let runs = list["runs"].as_array().unwrap();
    assert_eq!(runs.len(), 2);
    assert_eq!(runs[0]["id"], a["run"]["id"]);
    assert_eq!(runs[1]["id"], b["run"]["id"]);
    for (run, doc) in runs.iter().zip([&a, &b]) {
        assert_eq!(run["complete"], true);
        assert_eq!(run["kind"], "survey");
        let mut want = std::collections::BTreeMap::new();
        for p in doc["pins"].as_array().unwrap() {
            *want.entry(p["verdict"].as_str().unwrap().to_string()).or_insert(0u64) += 1;
        }
        let got: std::collections::BTreeMap<String, u64> =
            run["verdicts"].as_object().unwrap().iter().map(|(k, v)| (k.clone(), v.as_u64().unwrap())).collect();
        assert_eq!(got, want);
    }
    let board = b["board"]["name"].as_str().unwrap();
    let only = ok(&ohmsight().args(["history", "--json", "--db", &db, "--board", board]).output().unwrap());
    let only: Value = serde_json::from_str(&only).unwrap();
    assert!(only["runs"].as_array().unwrap().iter().all(|r| r["board"] == board));
    let future = ok(&ohmsight().args(["history", "--json", "--db", &db, "--since", "2999-01-01"]).output().unwrap());
    assert_eq!(serde_json::from_str::<Value>(&future).unwrap()["runs"].as_array().unwrap().len(), 0);
    let text = ok(&ohmsight().args(["history", "--db", &db]).output().unwrap());
    assert!(text.contains(a["run"]["id"].as_str().unwrap()) && text.contains("driven"), "{text}");
    // Mistakes are bad input, in words.
    for (args, words) in [
        (vec!["history", "show", "ZZZZZZZZ"], "ZZZZZZZZ"),
        (vec!["history", "--since", "last tuesday"], "not a date"),
        (vec!["refit", "ZZZZZZZZ"], "ZZZZZZZZ"),
    ] {
        let out = ohmsight().args(&args).args(["--db", &db]).output().unwrap();
        assert_eq!(out.status.code(), Some(2), "{args:?}");
        assert!(String::from_utf8_lossy(&out.stderr).contains(words), "{}", String::from_utf8_lossy(&out.stderr));
    }
}

#[test]
fn a_survey_killed_mid_run_is_kept_incomplete_and_resumed_to_the_clean_verdicts() {
    let dir = temp_dir("kill");
    let db = dir.join("runs.db").display().to_string();
    let mut child = ohmsight()
        .args(["survey", "--quiet", "--db", &db, "--scenario", bench().to_str().unwrap()])
        .stdout(Stdio::null())
        .stderr(Stdio::null())
        .spawn()
        .unwrap();
    // Wait until some experiments are in, then kill it as a crash would.
    let t = Instant::now();
    let stored = loop {
        assert!(t.elapsed() < Duration::from_secs(120), "no experiments stored in 2 minutes");
        if let Ok(out) = ohmsight().args(["history", "--json", "--db", &db]).output() {
            if let Ok(list) = serde_json::from_slice::<Value>(&out.stdout) {
                if let Some(n) = list["runs"][0]["experiments"].as_u64().filter(|&n| n >= 6) {
                    break n;
                }
            }
        }
        std::thread::sleep(Duration::from_millis(20));
    };
    // SIGKILL: no handler runs, nothing is flushed.
    child.kill().unwrap();
    let status = child.wait().unwrap();
    assert!(!status.success());
    let list = history_json(&db);
    let run = &list["runs"][0];
    assert_eq!(run["complete"], false, "{run}");
    assert!(run["finished"].is_null(), "{run}");
    let n = run["experiments"].as_u64().unwrap();
    assert!(n >= stored, "{n} experiments now, {stored} seen before the kill");
    // What it measured is all there and can be shown and analysed again.
    let id = run["id"].as_str().unwrap();
    let shown: Value =
        serde_json::from_str(&ok(&ohmsight().args(["history", "show", id, "--json", "--db", &db]).output().unwrap()))
            .unwrap();
    let evidence = shown["precharge_evidence"].as_array().unwrap().len()
        + shown["pins"].as_array().unwrap().iter().map(|p| p["evidence"].as_array().unwrap().len()).sum::<usize>();
    assert_eq!(evidence as u64, n);
    assert_eq!(shown["run"]["complete"], false);
    let mut seqs: Vec<u64> = shown["pins"]
        .as_array()
        .unwrap()
        .iter()
        .flat_map(|p| p["evidence"].as_array().unwrap().iter().map(|e| e["seq"].as_u64().unwrap()))
        .chain(shown["precharge_evidence"].as_array().unwrap().iter().map(|e| e["seq"].as_u64().unwrap()))
        .collect();
    seqs.sort();
    assert_eq!(seqs, (0..n).collect::<Vec<_>>(), "experiments 0..{n}, none missing");
    // Where the kill fell decides how far it got; a pin it cut short is never given a verdict.
    for p in shown["pins"].as_array().unwrap() {
        if p["complete"] == false {
            assert_eq!(p["verdict"], "unknown", "{}", p["channel"]);
        }
    }
    ok(&ohmsight().args(["refit", id, "--db", &db]).output().unwrap());

    // Plugged back in: --resume (the run's own link: the same scenario and seed) measures what
    // the run lacks, into the same run, and gives the clean run's verdicts.
    let resumed: Value = serde_json::from_str(&ok(&ohmsight()
        .args(["survey", "--quiet", "--json", "--db", &db, "--resume", id])
        .output()
        .unwrap()))
    .unwrap();
    assert_eq!(resumed["run"]["id"], id);
    assert_eq!(resumed["run"]["complete"], true);
    let list = history_json(&db);
    assert_eq!(list["runs"].as_array().unwrap().len(), 1, "the same run, not a new one");
    assert_eq!(list["runs"][0]["complete"], true);
    let clean: Value =
        serde_json::from_str(&survey_json(&db, &["--no-store", "--scenario", bench().to_str().unwrap()])).unwrap();
    let verdicts = |d: &Value| d["pins"].as_array().unwrap().iter().map(|p| p["verdict"].clone()).collect::<Vec<_>>();
    assert_eq!(verdicts(&resumed), verdicts(&clean));
    // A complete run has nothing to resume.
    let out = ohmsight().args(["survey", "--quiet", "--db", &db, "--resume", id]).output().unwrap();
    assert_eq!(out.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&out.stderr).contains("nothing to resume"));
}

/// Eight surveys at once into one database: every run complete, and each stored run equal to
/// the document its survey printed.
fn eight_at_once(db: &str) {
    let children: Vec<_> = (0..8u8)
        .map(|i| {
            ohmsight()
                .args(["survey", "--quiet", "--json", "--db", db, "--seed", &(100 + u64::from(i)).to_string()])
                .args(["--channel", &(i % 8).to_string()])
                .stdout(Stdio::piped())
                .stderr(Stdio::piped())
                .spawn()
                .unwrap()
        })
        .collect();
    let docs: Vec<Value> =
        children.into_iter().map(|c| serde_json::from_str(&ok(&c.wait_with_output().unwrap())).unwrap()).collect();
    let list = history_json(db);
    let runs = list["runs"].as_array().unwrap();
    assert_eq!(runs.len(), 8, "{list}");
    for doc in &docs {
        let id = doc["run"]["id"].as_str().unwrap();
        let run = runs.iter().find(|r| r["id"] == id).unwrap_or_else(|| panic!("run {id} missing"));
        assert_eq!(run["complete"], true, "{run}");
        let shown: Value = serde_json::from_str(&ok(&ohmsight()
            .args(["history", "show", id, "--json", "--db", db])
            .output()
            .unwrap()))
        .unwrap();
        assert_eq!(shown["pins"], doc["pins"], "run {id}");
        assert_eq!(shown["run"], doc["run"], "run {id}");
    }
}

#[test]
fn eight_surveys_into_one_sqlite_file_lose_nothing() {
    let dir = temp_dir("eight");
    eight_at_once(&format!("sqlite://{}", dir.join("shared.db").display()));
}

#[test]
fn eight_surveys_into_one_postgresql_database_lose_nothing() {
    // A fresh schema on the test server (CI starts one; elsewhere a private one is started).
    let Some(db) = store_support::postgres() else { return };
    let DbUrl::Postgres(url) = &db.url else { unreachable!() };
    eight_at_once(url);
}

#[test]
fn the_default_database_follows_ohmsight_db() {
    let dir = temp_dir("env");
    let db = dir.join("from-env.db");
    ok(&ohmsight().args(["survey", "--quiet", "--channel", "3"]).env("OHMSIGHT_DB", &db).output().unwrap());
    assert!(Path::new(&db).exists());
    let list: Value =
        serde_json::from_str(&ok(&ohmsight().args(["history", "--json"]).env("OHMSIGHT_DB", &db).output().unwrap()))
            .unwrap();
    assert_eq!(list["runs"].as_array().unwrap().len(), 1);
    // --no-store keeps nothing.
    ok(&ohmsight()
        .args(["survey", "--quiet", "--channel", "3", "--no-store"])
        .env("OHMSIGHT_DB", &db)
        .output()
        .unwrap());
    let list: Value =
        serde_json::from_str(&ok(&ohmsight().args(["history", "--json"]).env("OHMSIGHT_DB", &db).output().unwrap()))
            .unwrap();
    assert_eq!(list["runs"].as_array().unwrap().len(), 1);
}
