//! Link faults: corrupted frames are detected and what they carried is asked for again.

use ohmsight::link::InProcessLink;
use ohmsight::session::Session;
use ohmsight::{survey, SurveyOptions};
use ohmsight_tests::{default_board, driven, floating, run, scenario};

#[test]
fn corrupted_frames_are_rerun_and_change_no_verdict() {
    let s = scenario(
        "faulty link",
        21,
        default_board(),
        vec![driven(0, 1.0, 22e3, 10e-12), driven(1, 2.0, 470e3, 15e-12), floating(2, 8e-12)],
    );
    let clean = run(&s);
    let mut session = Session::new(InProcessLink::new(&s).corrupt_every(41));
    let faulty = survey(&mut session, &SurveyOptions::default()).expect("survey despite a noisy link");
    assert!(faulty.link.bad_frames > 0, "the fault injector corrupted nothing");
    // Lost chunks are asked for again from the board's buffer: no experiment runs twice.
    assert_eq!(faulty.record.experiments.len(), clean.record.experiments.len());
    assert!(faulty.record.experiments.iter().all(|e| e.received));
    for (a, b) in clean.pins.iter().zip(&faulty.pins) {
        assert_eq!(a.verdict, b.verdict, "ch{}", a.channel);
        if let (Some(x), Some(y)) = (a.source_ohms.estimate, b.source_ohms.estimate) {
            // The board's noise differs between the runs, so the numbers move a little; they must
            // stay within each other's intervals.
            let (lo, hi) = (b.source_ohms.low.unwrap(), b.source_ohms.high.unwrap());
            assert!(lo <= x && x <= hi, "ch{}: clean {x} outside faulty interval {lo}..{hi} (est {y})", a.channel);
        }
    }
}

#[test]
fn a_link_that_dies_mid_survey_keeps_what_was_measured() {
    let pins = vec![driven(0, 1.0, 22e3, 10e-12), driven(1, 2.0, 470e3, 15e-12), driven(2, 0.7, 4.7e3, 10e-12)];
    let s = scenario("pulled cable", 22, default_board(), pins);
    let mut session = Session::new(InProcessLink::new(&s));
    let clean = survey(&mut session, &SurveyOptions::default()).unwrap();
    // Go quiet 40 frames before the end: inside the last pin's noise record (its 1024 codes
    // take 22 frames), before the order swaps (5 frames a pin) that close the survey.
    let total = session.link().frames_sent();
    let mut session = Session::new(InProcessLink::new(&s).silent_after(total - 40));
    let r = survey(&mut session, &SurveyOptions::default()).expect("a partial survey is still a report");
    let fault = r.fault.as_deref().expect("the fault is reported");
    assert!(fault.contains("failed") || fault.contains("timed out"), "{fault}");
    assert_eq!(r.pins.len(), 3);
    assert_eq!(r.pins[0].verdict, clean.pins[0].verdict, "the pin finished before the fault keeps its verdict");
    assert!(r.pins[0].source_ohms.estimate.is_some());
    let last = r.pins.last().unwrap();
    assert_eq!(last.verdict, ohmsight::Verdict::Unknown);
    assert!(last.reason.as_deref().unwrap_or("").contains("link failed"));
}
