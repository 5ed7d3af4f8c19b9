//! `ohmsight plan --emit`: the demo survey's scan plan as C and as Rust, compiled by the real
//! compilers with every warning an error, run, and its numbers checked against `survey --json`.

use serde_json::Value;
use std::path::{Path, PathBuf};
use std::process::{Command, Output};
use std::sync::OnceLock;

fn db() -> PathBuf {
    std::env::temp_dir().join(format!("ohmsight-plan-{}.db", std::process::id()))
}

fn ohmsight() -> Command {
    let mut c = Command::new(env!("CARGO_BIN_EXE_ohmsight"));
    // Surveys are kept in a database of this test process, not in the user's.
    c.env("OHMSIGHT_DB", db());
    c
}

fn dir() -> PathBuf {
    let dir = std::env::temp_dir().join(format!("ohmsight-plan-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    dir
}

fn ok(out: &Output) -> String {
    assert!(out.status.success(), "exit {:?}: {}", out.status.code(), String::from_utf8_lossy(&out.stderr));
    String::from_utf8(out.stdout.clone()).unwrap()
}

/// The demo survey (simulated board), stored in the test database and as a file.
fn demo() -> &'static (PathBuf, Value) {
    static RUN: OnceLock<(PathBuf, Value)> = OnceLock::new();
    RUN.get_or_init(|| {
        let text = ok(&ohmsight().args(["survey", "--quiet", "--json"]).output().unwrap());
        let path = dir().join("demo.json");
        std::fs::write(&path, &text).unwrap();
        (path, serde_json::from_str(&text).unwrap())
    })
}

/// Whole nanoseconds rounded up, as the emitted code promises (a float hair below an integer
/// stays that integer).
fn ceil_ns(seconds: f64) -> u64 {
    (seconds * 1e9 - 1e-6).ceil() as u64
}

/// The plan in `survey --json` as the lines the compiled programs print: one line per step
/// (`channel setting sample_ns dummies`), then `idle NS` and `period NS`.
fn expected_lines(doc: &Value) -> Vec<String> {
    let plan = &doc["scan_plan"];
    let mut lines: Vec<String> = plan["entries"]
        .as_array()
        .unwrap()
        .iter()
        .map(|e| {
            format!(
                "{} {} {} {}",
                e["channel"],
                e["sample_index"],
                ceil_ns(e["sample_ns"].as_f64().unwrap() * 1e-9),
                e["dummies"]
            )
        })
        .collect();
    lines.push(format!("idle {}", ceil_ns(plan["idle_s"].as_f64().unwrap())));
    lines.push(format!("period {}", ceil_ns(plan["scan_s"].as_f64().unwrap())));
    lines
}

fn run_tool(cmd: &mut Command, what: &str) -> String {
    let out = cmd.output().unwrap_or_else(|e| panic!("cannot run {what}: {e}"));
    assert!(
        out.status.success(),
        "{what} failed ({:?}):\n{}{}",
        out.status.code(),
        String::from_utf8_lossy(&out.stdout),
        String::from_utf8_lossy(&out.stderr)
    );
    String::from_utf8(out.stdout).unwrap()
}

fn check_header_comment(source: &str, doc: &Value) {
    assert!(source.contains(doc["run"]["id"].as_str().unwrap()), "the run id is named");
    assert!(source.contains(&format!("Board \"{}\"", doc["board"]["name"].as_str().unwrap())));
    assert!(source.contains(doc["board"]["unit_id"].as_str().unwrap()), "the unit is named");
    assert!(source.contains(&format!("measured by ohmsight {}", doc["run"]["tool_version"].as_str().unwrap())));
    let worst = doc["scan_plan"]["worst_error_lsb"].as_f64().unwrap();
    assert!(source.contains(&format!("within {worst:.3} LSB")), "the worst error is stated");
    for l in doc["scan_plan"]["left_out"].as_array().unwrap() {
        assert!(source.contains(&format!("ch{} ", l["channel"])), "left-out ch{} is named", l["channel"]);
    }
}

#[test]
fn the_demo_plan_as_c_compiles_warning_free_and_carries_the_surveys_numbers() {
    let (path, doc) = demo();
    let d = dir().join("c");
    std::fs::create_dir_all(&d).unwrap();
    let header = d.join("scan_plan.h");
    ok(&ohmsight().args(["plan", "--emit", "c", "--from"]).arg(path).arg("--out").arg(&header).output().unwrap());
    let source = std::fs::read_to_string(&header).unwrap();
    check_header_comment(&source, doc);
    // Merely included: no warning for a table the unit does not use.
    std::fs::write(d.join("only_include.c"), "#include \"scan_plan.h\"\nint answer(void) { return 42; }\n").unwrap();
    // Used: walk the table and print it, so the compiler reads every number, not a regex.
    std::fs::write(
        d.join("print.c"),
        "#include <stdio.h>\n#include \"scan_plan.h\"\n#include \"scan_plan.h\"\n\
         int main(void) {\n    unsigned i;\n    for (i = 0; i < OHMSIGHT_SCAN_STEPS; i++) {\n\
         const struct ohmsight_scan_step *s = &ohmsight_scan_plan[i];\n\
         printf(\"%u %u %lu %u\\n\", (unsigned)s->channel, (unsigned)s->sample_setting,\n\
         (unsigned long)s->sample_ns, (unsigned)s->dummies);\n    }\n\
         printf(\"idle %lu\\nperiod %lu\\n\", (unsigned long)OHMSIGHT_SCAN_IDLE_NS,\n\
         (unsigned long)OHMSIGHT_SCAN_PERIOD_NS);\n    return 0;\n}\n",
    )
    .unwrap();
    let cc = |args: &[&str]| {
        run_tool(
            Command::new("cc")
                .current_dir(&d)
                .args(["-Wall", "-Wextra", "-Werror", "-pedantic", "-std=c99"])
                .args(args),
            "the system C compiler (cc)",
        )
    };
    cc(&["-c", "only_include.c", "-o", "only_include.o"]);
    cc(&["-c", "print.c", "-o", "print.o"]);
    cc(&["print.o", "-o", "print"]);
    let printed = run_tool(&mut Command::new(d.join("print")), "the compiled C program");
    assert_eq!(printed.lines().collect::<Vec<_>>(), expected_lines(doc));
}

#[test]
fn the_demo_plan_as_rust_compiles_no_std_under_deny_warnings_and_carries_the_surveys_numbers() {
    let (_, doc) = demo();
    let id = doc["run"]["id"].as_str().unwrap();
    let d = dir().join("rust");
    std::fs::create_dir_all(&d).unwrap();
    // From the store this time, by a unique prefix of the run id; to stdout.
    let source = ok(&ohmsight().args(["plan", "--emit", "rust", "--from", &id[..12]]).output().unwrap());
    check_header_comment(&source, doc);
    std::fs::write(d.join("scan_plan.rs"), &source).unwrap();
    // A no_std library that includes it privately and uses nothing: still no warning.
    std::fs::write(d.join("lib.rs"), "#![no_std]\n#![deny(warnings)]\nmod scan_plan;\n").unwrap();
    let rustc =
        |args: &[&str]| run_tool(Command::new("rustc").current_dir(&d).args(["--edition", "2021"]).args(args), "rustc");
    rustc(&["--crate-type", "lib", "--out-dir", ".", "lib.rs"]);
    std::fs::write(
        d.join("print.rs"),
        "#![deny(warnings)]\nmod scan_plan;\nfn main() {\n    for s in scan_plan::SCAN_PLAN.iter() {\n\
         println!(\"{} {} {} {}\", s.channel, s.sample_setting, s.sample_ns, s.dummies);\n    }\n\
         println!(\"idle {}\", scan_plan::IDLE_NS);\n    println!(\"period {}\", scan_plan::SCAN_PERIOD_NS);\n}\n",
    )
    .unwrap();
    rustc(&["--crate-type", "bin", "-o", "print", "print.rs"]);
    let printed = run_tool(&mut Command::new(d.join("print")), "the compiled Rust program");
    assert_eq!(printed.lines().collect::<Vec<_>>(), expected_lines(doc));
}

fn bad(args: &[&str], file: Option<&Path>) -> (Option<i32>, String) {
    let mut cmd = ohmsight();
    cmd.args(args);
    if let Some(f) = file {
        cmd.arg(f);
    }
    let out = cmd.output().unwrap();
    assert!(out.stdout.is_empty(), "nothing emitted on bad input");
    (out.status.code(), String::from_utf8_lossy(&out.stderr).into_owned())
}

#[test]
fn runs_without_a_verified_plan_are_refused_as_bad_input() {
    let (_, doc) = demo();
    let (code, err) = bad(&["plan", "--emit", "c", "--from", "01ZZZZZZZZ"], None);
    assert_eq!(code, Some(2), "{err}");
    assert!(err.contains("01ZZZZZZZZ"), "{err}");

    let not_a_survey = dir().join("not-a-survey.json");
    std::fs::write(&not_a_survey, "{\"hello\": 1}\n").unwrap();
    let (code, err) = bad(&["plan", "--emit", "rust", "--from"], Some(&not_a_survey));
    assert_eq!(code, Some(2), "{err}");
    assert!(err.contains(&not_a_survey.display().to_string()), "{err}");

    // The same evidence, but a pin not fully measured: the plan is not verified.
    let mut cut = doc.clone();
    cut["pins"][0]["complete"] = Value::Bool(false);
    let cut_path = dir().join("cut.json");
    std::fs::write(&cut_path, serde_json::to_string(&cut).unwrap()).unwrap();
    let out_file = dir().join("never.h");
    let (code, err) = bad(&["plan", "--emit", "c", "--out", out_file.to_str().unwrap(), "--from"], Some(&cut_path));
    assert_eq!(code, Some(2), "{err}");
    assert!(err.contains("not complete") && err.contains("ch0"), "{err}");
    assert!(!out_file.exists(), "no file written for a refused plan");

    // A production check's record has no memory tests, so no scan plan.
    let mut check = doc.clone();
    check["run"]["kind"] = Value::String("check".into());
    let check_path = dir().join("check.json");
    std::fs::write(&check_path, serde_json::to_string(&check).unwrap()).unwrap();
    let (code, err) = bad(&["plan", "--emit", "c", "--from"], Some(&check_path));
    assert_eq!(code, Some(2), "{err}");
    assert!(err.contains("not a survey"), "{err}");

    let (code, err) = bad(&["plan", "--emit", "pascal", "--from"], Some(&cut_path));
    assert_eq!(code, Some(2), "{err}");
    assert!(err.contains("c") && err.contains("rust"), "{err}");
}
