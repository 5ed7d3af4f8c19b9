//! `ohmsight simulate` and `ohmsight ports` as a user runs them.

use crate::{exe, BENCH_TOML};
use ohmsight_protocol::{Request, Response, PROTOCOL_VERSION};
use ohmsight_tests::paths::{scenario_file, Peer, PeerKind, RawPort, Simulator};
use std::process::Command;
use std::time::{Duration, Instant};

fn hello_answered(path: &str) -> bool {
    let mut port = RawPort::open(path);
    matches!(port.ask(&Request::Hello { protocol: PROTOCOL_VERSION, seq: 1 }, 1)[0], Response::Hello { seq: 1, .. })
}

#[test]
fn simulate_prints_the_path_alone_serves_clients_in_turn_and_stops_on_sigterm() {
    let file = scenario_file("commands.toml", BENCH_TOML);
    let mut sim = Simulator::start(exe(), &["--scenario", file.to_str().unwrap(), "--seed", "4"]);
    assert!(sim.path.starts_with("/dev/pts/"), "{}", sim.path);
    assert!(std::path::Path::new(&sim.path).exists());
    // A client comes, leaves, and another comes back: the board answers both.
    assert!(hello_answered(&sim.path));
    std::thread::sleep(Duration::from_millis(200));
    assert!(hello_answered(&sim.path));
    std::thread::sleep(Duration::from_millis(200));
    // SIGTERM while a third client holds the port open (the server then waits on the port).
    let mut third = RawPort::open(&sim.path);
    assert!(matches!(third.ask(&Request::Describe { seq: 2 }, 1)[0], Response::FrontEnd { seq: 2, .. }));
    let status = sim.terminate(Duration::from_secs(3)).expect("SIGTERM stops it within 3 s");
    assert!(status.success(), "{status:?}: {}", sim.stderr());
    assert_eq!(sim.stdout(), format!("{}\n", sim.path), "stdout holds the path and nothing else");
    let err = sim.stderr();
    assert!(err.contains("\"paths bench\"") && err.contains("seed 4") && err.contains(&sim.path), "{err}");
    assert_eq!(err.matches("a client opened").count(), 3, "{err}");
    assert_eq!(err.matches("the client closed").count(), 2, "{err}");
    assert!(err.contains("stopped after 3 clients"), "{err}");
}

#[test]
fn simulate_refuses_a_bad_scenario_naming_file_and_line() {
    let file = scenario_file("bad.toml", "name = \"bad\"\n[[pin]]\nchannel = 0\nvolts = \"high\"\n");
    let out = Command::new(exe()).args(["simulate", "--scenario"]).arg(&file).output().unwrap();
    assert_eq!(out.status.code(), Some(2));
    assert!(out.stdout.is_empty(), "no path is printed for a board that cannot be built");
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(err.contains(&format!("{}:4:", file.display())), "{err}");
}

/// `ohmsight ports --json ARGS…`: the document and how long it took.
fn ports_json(args: &[&str]) -> (serde_json::Value, Duration) {
    let t = Instant::now();
    let out = Command::new(exe()).args(["ports", "--json"]).args(args).output().unwrap();
    assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
    (serde_json::from_slice(&out.stdout).expect("stdout is one JSON document"), t.elapsed())
}

#[test]
fn ports_marks_the_boards_that_answer_and_says_why_others_do_not() {
    let sim = Simulator::start(exe(), &["--quiet"]);
    let silent = Peer::start(PeerKind::Silent);
    let garbage = Peer::start(PeerKind::Garbage);
    let newer = Peer::start(PeerKind::Version(PROTOCOL_VERSION + 1));
    let missing = "/dev/ohmsight-no-such-port";
    let (doc, took) = ports_json(&["--wait-ms", "800", &sim.path, &silent.path, &garbage.path, missing, &newer.path]);
    assert_eq!(doc["schema"], "ohmsight.ports.v1");
    let ports = doc["ports"].as_array().unwrap();
    let status: Vec<(&str, &str)> =
        ports.iter().map(|p| (p["path"].as_str().unwrap(), p["probe"]["status"].as_str().unwrap())).collect();
    assert_eq!(
        status,
        [
            (sim.path.as_str(), "answers"),
            (silent.path.as_str(), "no-answer"),
            (garbage.path.as_str(), "not-ohmsight"),
            (missing, "failed"),
            (newer.path.as_str(), "other-version"),
        ]
    );
    assert_eq!(ports[0]["probe"]["ohmsight"], true);
    assert!(ports[0]["probe"]["board"]["channels"].as_u64().unwrap() >= 9, "{}", ports[0]);
    assert!(ports[1..4].iter().all(|p| p["probe"]["ohmsight"] == false));
    assert!(ports[3]["probe"]["detail"].as_str().unwrap().contains("cannot open"));
    // A board of another protocol version does answer the handshake, and says which version.
    assert_eq!(ports[4]["probe"]["ohmsight"], true);
    assert_eq!(ports[4]["probe"]["protocol"], PROTOCOL_VERSION + 1);
    assert!(ports.iter().all(|p| p["kind"] == "given" && p["usb"].is_null()));
    // Probes run side by side, each bounded: the silent port costs its wait, not more.
    assert!(took < Duration::from_millis(800 + 2500), "{took:?}");
}

#[test]
fn ports_table_shows_the_answering_board() {
    let sim = Simulator::start(exe(), &["--quiet"]);
    let out = Command::new(exe()).args(["ports", &sim.path]).output().unwrap();
    assert!(out.status.success());
    let text = String::from_utf8(out.stdout).unwrap();
    let lines: Vec<&str> = text.lines().collect();
    assert_eq!(lines.len(), 3, "{text}");
    assert!(lines[0].starts_with("path") && lines[0].contains("usb id") && lines[0].contains("ohmsight"), "{text}");
    assert!(lines[2].starts_with(&sim.path) && lines[2].contains("yes: board"), "{text}");
}

#[test]
fn ports_without_probing_sends_nothing() {
    let silent = Peer::start(PeerKind::Silent);
    let (doc, _) = ports_json(&["--no-probe", &silent.path]);
    assert_eq!(doc["ports"][0]["probe"]["status"], "not-probed");
    std::thread::sleep(Duration::from_millis(100));
    assert_eq!(silent.received(), 0);
}
