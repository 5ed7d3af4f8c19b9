//! Bad input on the link: the simulated board keeps answering, and the host says what went
//! wrong in words and exits non-zero.

use crate::{exe, BENCH_TOML};
use ohmsight_protocol::{ErrorKind, Experiment, Request, Response, RunReport, MAX_FRAME, PROTOCOL_VERSION};
use ohmsight_tests::paths::{frame, scenario_file, Peer, PeerKind, RawPort, Simulator};
use std::process::Command;
use std::time::{Duration, Instant};

const BAD_FRAME: Response = Response::Error { seq: 0, kind: ErrorKind::BadFrame };

#[test]
fn garbage_truncated_frames_and_a_wrong_version_leave_the_board_answering() {
    let file = scenario_file("faults.toml", BENCH_TOML);
    let sim = Simulator::start(exe(), &["--quiet", "--scenario", file.to_str().unwrap()]);
    let mut port = RawPort::open(&sim.path);

    // Line noise that happens to hold a delimiter.
    port.send_bytes(b"\x13\x37 line noise \xff\x00");
    assert_eq!(port.answers(1), [BAD_FRAME], "garbage");
    // A run longer than any frame, then a delimiter.
    port.send_bytes(&vec![0x55; 3 * MAX_FRAME]);
    port.send_bytes(&[0]);
    assert_eq!(port.answers(1), [BAD_FRAME], "over-long run");
    // The first half of a good request, cut off by a delimiter.
    let run = Request::Run {
        seq: 3,
        experiment: Experiment::NoiseRecord { target: 0, sample: 0, period_ns: 0, count: 8, settle_ns: 0 },
    };
    let whole = frame(&run);
    port.send_bytes(&whole[..whole.len() / 2]);
    port.send_bytes(&[0]);
    assert_eq!(port.answers(1), [BAD_FRAME], "truncated frame");
    // A good request with one bit flipped on the way.
    let mut flipped = whole.clone();
    flipped[whole.len() / 2] ^= 0x04;
    port.send_bytes(&flipped);
    assert_eq!(port.answers(1), [BAD_FRAME], "corrupted frame");
    // A host of another protocol version: told so, and told the board's version.
    let r = port.ask(&Request::Hello { protocol: PROTOCOL_VERSION + 1, seq: 4 }, 2);
    assert_eq!(r[0], Response::Error { seq: 4, kind: ErrorKind::Version });
    assert!(matches!(r[1], Response::Hello { protocol: PROTOCOL_VERSION, .. }), "{r:?}");

    // Good requests after all that are answered as usual.
    let r = port.ask(&Request::Hello { protocol: PROTOCOL_VERSION, seq: 5 }, 1);
    assert!(matches!(r[0], Response::Hello { protocol: PROTOCOL_VERSION, .. }), "{r:?}");
    assert!(matches!(port.ask(&Request::Describe { seq: 6 }, 1)[0], Response::FrontEnd { seq: 6, .. }));
    let r = port.ask(&run, 2);
    assert!(matches!(&r[0], Response::Samples { offset: 0, codes, .. } if codes.len() == 8), "{r:?}");
    assert!(matches!(r[1], Response::Done(RunReport { seq: 3, conversions: 8, chunks: 1, .. })), "{r:?}");
    // Nothing else was sent: one answer per request, no stray frames.
    assert!(port.responses(1, Duration::from_millis(300)).is_empty());
}

/// Runs `ohmsight survey --port` against a peer of `kind`: it must exit 1 within `limit`,
/// print nothing on stdout, and say one sentence on stderr holding `words`.
fn survey_fails_in_words(kind: PeerKind, words: &[&str], limit: Duration) {
    let peer = Peer::start(kind);
    let t = Instant::now();
    let out = Command::new(exe()).args(["survey", "--no-store", "--quiet", "--port", &peer.path]).output().unwrap();
    let took = t.elapsed();
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(1), "{kind:?}: {stderr}");
    assert!(out.stdout.is_empty(), "{kind:?}: {}", String::from_utf8_lossy(&out.stdout));
    let lines: Vec<&str> = stderr.lines().collect();
    assert_eq!(lines.len(), 1, "{kind:?}: one line on stderr: {stderr}");
    assert!(lines[0].starts_with("ohmsight: ") && lines[0].split(' ').count() > 6, "{stderr}");
    for w in words {
        assert!(lines[0].contains(w), "{kind:?}: stderr lacks {w:?}: {stderr}");
    }
    assert!(peer.received() > 0, "{kind:?}: the host sent its hello");
    assert!(took < limit, "{kind:?}: took {took:?}");
}

#[test]
fn survey_against_a_peer_that_speaks_garbage_fails_in_words() {
    survey_fails_in_words(PeerKind::Garbage, &["hello", "check the cable and baud rate"], Duration::from_secs(10));
}

#[test]
fn survey_against_a_board_of_another_version_fails_in_words() {
    let version = format!("protocol version {}", PROTOCOL_VERSION + 6);
    survey_fails_in_words(
        PeerKind::Version(PROTOCOL_VERSION + 6),
        &[&version, "--any-version"],
        Duration::from_secs(10),
    );
}

#[test]
fn survey_against_a_silent_port_fails_in_words() {
    // Three hellos, each waited for 2 s.
    survey_fails_in_words(PeerKind::Silent, &["no answer to hello", "firmware running"], Duration::from_secs(15));
}
