//! (a) in-process against (b) a pseudo-terminal to `ohmsight simulate`.

use crate::{exe, BENCH_TOML};
use ohmsight::link::InProcessLink;
use ohmsight::session::Session;
use ohmsight::{survey, SurveyOptions};
use ohmsight_tests::paths::{assert_same_survey, scenario_file, survey_port, Simulator};

#[test]
fn a_survey_over_the_simulate_command_agrees_with_the_in_process_one() {
    let file = scenario_file("agreement.toml", BENCH_TOML);
    let scenario = ohmsight::scenario::load(&file).expect("the bench scenario parses");
    let local =
        survey(&mut Session::new(InProcessLink::new(&scenario)), &SurveyOptions::default()).expect("in-process survey");
    let mut sim = Simulator::start(exe(), &["--scenario", file.to_str().unwrap()]);
    let over_pty = survey_port(&sim.path);
    assert_same_survey(&local, &over_pty, "pty to `ohmsight simulate`");
    // The simulated board is deterministic and fresh: the very same records came back.
    assert_eq!(over_pty.link.conversions, local.link.conversions);
    assert_eq!(over_pty.link.bytes_received, local.link.bytes_received);
    for (a, b) in local.pins.iter().zip(&over_pty.pins) {
        assert_eq!(a.source_ohms, b.source_ohms, "ch{}", a.channel);
    }
    // The server counted the same traffic the host did.
    let status = sim.terminate(std::time::Duration::from_secs(3)).expect("SIGTERM stops it");
    assert!(status.success(), "{status:?}: {}", sim.stderr());
    let l = &over_pty.link;
    let summary = format!("{} bytes in, {} out, {} conversions", l.bytes_sent, l.bytes_received, l.conversions);
    assert!(sim.stderr().contains(&summary), "wanted {summary:?} in: {}", sim.stderr());
}
