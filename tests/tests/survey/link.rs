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
    assert!(last.reason.as_deref().unwrap_or("").contains("cut short"));
    // Nothing is claimed about what was not measured: no settling time for the cut pin, and
    // the finished pins say their memory test is missing instead of dropping it silently.
    assert_eq!(last.min_sample_ns, None);
    assert!(last.not_measured.contains(&"noise") && last.not_measured.contains(&"memory"), "{:?}", last.not_measured);
    assert_eq!(r.pins[0].not_measured, vec!["memory"]);
    assert!(r.pins[0].memory.is_none());
    assert!(!r.record.run.complete);
    let advice = ohmsight::advice::advise(&r, &Default::default());
    let text = ohmsight::render::text::survey_text(&r, &advice);
    let row = text.lines().find(|l| l.starts_with("2 ")).expect("the cut pin's row");
    assert!(row.contains("not measured") && !row.contains("none settles"), "{row}");
    assert!(text.contains("ch0: not measured: memory"), "{text}");
}

#[test]
fn a_stiff_pin_cut_before_its_loading_burst_says_an_open_pin_is_not_ruled_out() {
    // A boiler-room logger's unplugged input with 100 µF left on it: stiff to the survey's
    // conversions, so only the loading burst at the end of the survey tells it from a driven
    // pin. Cut before the burst, the table still reads `driven` with the stiff bound; the notes
    // must say what the missing burst leaves open.
    let s = scenario("boiler room logger", 24, default_board(), vec![floating(0, 100e-6)]);
    let mut session = Session::new(InProcessLink::new(&s));
    let clean = survey(&mut session, &SurveyOptions::default()).unwrap();
    assert_eq!(clean.pins[0].verdict, ohmsight::Verdict::Unknown, "the burst decides it: {:?}", clean.pins[0].reason);
    // The burst runs last: go quiet two frames before the end, inside it (on this scenario
    // every cut from 2 to 11 frames before the end leaves only the burst missing).
    let total = session.link().frames_sent();
    let mut session = Session::new(InProcessLink::new(&s).silent_after(total - 2));
    let r = survey(&mut session, &SurveyOptions::default()).expect("a partial survey is still a report");
    let p = &r.pins[0];
    assert!(p.not_measured.contains(&"load"), "{:?} {:?}", p.verdict, p.not_measured);
    assert_eq!(p.verdict, ohmsight::Verdict::Driven, "the case: a stiff verdict without its burst");
    let text = ohmsight::render::text::survey_text(&r, &ohmsight::advice::advise(&r, &Default::default()));
    assert!(text.contains("does not rule out an open pin behind a large capacitor"), "{text}");
}

#[test]
fn a_board_that_never_answers_still_gets_a_document() {
    let s = scenario("dead board", 23, default_board(), vec![driven(0, 1.0, 22e3, 10e-12)]);
    let mut session = Session::new(InProcessLink::new(&s).silent_after(0));
    let r = survey(&mut session, &SurveyOptions::default()).expect("a document, not an error");
    assert!(r.fault.as_deref().unwrap_or("").contains("hello"), "{:?}", r.fault);
    assert!(r.pins.is_empty() && !r.record.run.complete);
    assert_eq!(r.record.run.board, ohmsight::run::UNIDENTIFIED);
    let opts = Default::default();
    let advice = ohmsight::advice::advise(&r, &opts);
    let json = ohmsight::render::survey_json(&r, &advice, &opts);
    let Ok(ohmsight::record::Document::V2(doc)) = ohmsight::record::read_document(&json) else { panic!("{json}") };
    assert_eq!(doc.run.fault, r.fault);
    assert_eq!(doc.record(), r.record);
    // The page and the text say what happened rather than fail.
    assert!(ohmsight::render::html::survey_html(&r).contains("hello"));
    assert!(ohmsight::render::text::survey_text(&r, &advice).contains("cut short"));
}

/// Cut points for the resume test: `OHMSIGHT_RESUME_POINTS` of them (6 by default, 20 for the
/// figure in the README), spread over the clean run's frames after the handshake by a fixed
/// seed. (A cut inside the handshake leaves a run that measured nothing, which `--resume`
/// refuses in words: survey anew.)
fn cut_points(handshake: u64, frames: u64) -> Vec<u64> {
    let n: u64 = std::env::var("OHMSIGHT_RESUME_POINTS").ok().and_then(|v| v.parse().ok()).unwrap_or(6);
    let mut x = 0x9e37_79b9_7f4a_7c15u64;
    (0..n)
        .map(|i| {
            // xorshift64: a point in each of n equal spans, so early and late cuts are both tried.
            x ^= x << 13;
            x ^= x >> 7;
            x ^= x << 17;
            let span = (frames - handshake) / n;
            (handshake + i * span + x % span.max(1)).clamp(handshake, frames - 1)
        })
        .collect()
}

#[test]
fn a_run_cut_anywhere_is_resumed_to_the_clean_verdicts() {
    let pins = vec![driven(0, 1.0, 22e3, 10e-12), driven(1, 2.0, 470e3, 47e-9), floating(2, 8e-12)];
    let s = scenario("pulled and plugged back", 24, default_board(), pins);
    let mut session = Session::new(InProcessLink::new(&s));
    let clean = survey(&mut session, &SurveyOptions::default()).unwrap();
    let frames = session.link().frames_sent();
    let mut hello = Session::new(InProcessLink::new(&s));
    hello.handshake(false).unwrap();
    let handshake = hello.link().frames_sent();
    // Cut inside the handshake: nothing was measured, and resume says to survey anew.
    let mut session = Session::new(InProcessLink::new(&s).silent_after(1));
    let nothing = survey(&mut session, &SurveyOptions::default()).unwrap();
    assert!(nothing.record.pins.is_empty() && nothing.fault.is_some());
    let mut session = Session::new(InProcessLink::new(&s));
    let refused = ohmsight::run::resume_with(&mut session, nothing.record, &SurveyOptions::default(), &mut |_| {});
    assert!(refused.err().is_some_and(|e| e.is_bad_input() && e.to_string().contains("survey the board anew")));
    for cut in cut_points(handshake, frames) {
        let mut session = Session::new(InProcessLink::new(&s).silent_after(cut));
        let partial = survey(&mut session, &SurveyOptions::default()).unwrap();
        assert!(!partial.record.run.complete, "cut at frame {cut} of {frames}");
        let before = partial.record.experiments.len();
        // Plugged back in: the board restarts (a fresh simulated board of the same unit).
        let mut session = Session::new(InProcessLink::new(&s));
        let resumed = ohmsight::run::resume_with(&mut session, partial.record, &SurveyOptions::default(), &mut |_| {})
            .unwrap_or_else(|e| panic!("resume after frame {cut}: {e}"))
            .report;
        assert!(resumed.record.run.complete && resumed.fault.is_none(), "cut at {cut}: {:?}", resumed.fault);
        let seqs: Vec<u32> = resumed.record.experiments.iter().map(|e| e.seq).collect();
        assert_eq!(seqs, (0..seqs.len() as u32).collect::<Vec<_>>(), "one run, numbered on");
        assert!(resumed.record.experiments.len() >= before);
        for (a, b) in clean.pins.iter().zip(&resumed.pins) {
            assert_eq!(a.verdict, b.verdict, "cut at frame {cut} of {frames}: ch{}", a.channel);
            if let (Some(x), Some(lo), Some(hi)) = (b.source_ohms.estimate, a.source_ohms.low, a.source_ohms.high) {
                assert!(lo <= x && x <= hi, "cut at {cut}: ch{} {x} outside the clean {lo}..{hi}", a.channel);
            }
        }
    }
}
