//! Surveys through a fault-injecting link: each must complete, give the clean run's verdicts,
//! and put each estimate inside the clean run's 95% interval; and the record must hold every
//! run the board made, no more.

use ohmsight::faulty::{Direction, FaultCounts, FaultPlan, Faults, FaultyLink};
use ohmsight::link::InProcessLink;
use ohmsight::session::Session;
use ohmsight::{survey, SurveyOptions, SurveyReport};
use ohmsight_tests::{covers, default_board, driven, scenario, show};
use std::sync::OnceLock;
use std::time::Duration;

fn setup() -> ohmsight_virtual::Scenario {
    scenario("faulty links", 23, default_board(), vec![driven(0, 1.0, 22e3, 10e-12), driven(1, 2.0, 470e3, 15e-12)])
}

fn clean() -> &'static SurveyReport {
    static CLEAN: OnceLock<SurveyReport> = OnceLock::new();
    CLEAN.get_or_init(|| through(FaultPlan::default(), Duration::from_secs(2)).0)
}

fn through(plan: FaultPlan, timeout: Duration) -> (SurveyReport, FaultCounts) {
    let mut session = Session::new(FaultyLink::new(InProcessLink::new(&setup()), plan));
    session.timeout = timeout;
    let r = survey(&mut session, &SurveyOptions::default()).expect("the survey completes");
    (r, session.link().counts())
}

/// The survey finished and agrees with the clean one.
fn agrees(r: &SurveyReport, what: &str) {
    let clean = clean();
    assert_eq!(r.fault, None, "{what}");
    assert!(r.record.run.complete, "{what}");
    assert_eq!(r.pins.len(), clean.pins.len(), "{what}");
    for (c, f) in clean.pins.iter().zip(&r.pins) {
        assert_eq!(c.channel, f.channel, "{what}");
        assert_eq!(c.verdict, f.verdict, "{what}: ch{}", c.channel);
        for (name, ci, fi) in [("Rs", &c.source_ohms, &f.source_ohms), ("Cn", &c.node_farads, &f.node_farads)] {
            if let Some(x) = fi.estimate {
                assert!(covers(ci, x), "{what}: ch{} {name} {x:e} outside the clean {}", c.channel, show(ci));
            }
        }
    }
}

fn rates(p: f64) -> Faults {
    Faults { flip_bit: p, ..Faults::default() }
}

#[test]
fn one_percent_of_bytes_corrupted_both_ways() {
    let plan = FaultPlan { seed: 1, to_board: rates(0.01), from_board: rates(0.01), ..FaultPlan::default() };
    let (r, counts) = through(plan, Duration::from_secs(2));
    assert!(counts.damaged[0] > 5 && counts.damaged[1] > 50, "{counts:?}");
    agrees(&r, "1% corruption");
}

#[test]
fn drops_and_duplicates_and_garbage_bursts() {
    let faults = Faults { drop_byte: 0.005, dup_byte: 0.005, dup_frame: 0.005, garbage: 0.01, ..Faults::default() };
    let plan = FaultPlan { seed: 2, to_board: faults, from_board: faults, ..FaultPlan::default() };
    let (r, counts) = through(plan, Duration::from_secs(2));
    assert!(counts.damaged[1] > 20 && counts.duplicated.iter().sum::<u64>() > 0, "{counts:?}");
    agrees(&r, "drops, duplicates and garbage");
    // Every run the board made is in the record once: run numbers without gaps or repeats.
    let mut runs: Vec<u32> = r.record.experiments.iter().map(|e| e.board_run).collect();
    runs.sort_unstable();
    let first = runs[0];
    assert_eq!(runs, (first..first + runs.len() as u32).collect::<Vec<_>>());
}

#[test]
fn stalls_longer_than_the_time_out_in_the_handshake() {
    // Replies 1 (the description), 4 and 9 (channel descriptions) come 1.5 s late, after the
    // host's 1 s time-out and its next try: the late reply must not be taken for the next one.
    let pause = Duration::from_millis(1500);
    let plan = FaultPlan { stalls: vec![(1, pause), (4, pause), (9, pause)], ..FaultPlan::default() };
    let (r, counts) = through(plan, Duration::from_secs(1));
    assert_eq!(counts.stalls, 3);
    assert_eq!(r.record.board.channels, clean().record.board.channels, "each channel once, in order");
    agrees(&r, "stalls");
}

#[test]
fn any_single_request_or_reply_damaged() {
    let n_requests = clean_frames().0;
    let n_replies = clean_frames().1;
    // A sample: the handshake, the first runs, the middle, the end.
    let picks = |n: u64| [0, 1, 2, n / 3, n / 2, n - 2, n - 1];
    for dir in [Direction::ToBoard, Direction::FromBoard] {
        let n = if dir == Direction::ToBoard { n_requests } else { n_replies };
        for k in picks(n) {
            let plan = FaultPlan { damage: vec![(dir, k)], ..FaultPlan::default() };
            let (r, counts) = through(plan, Duration::from_secs(2));
            let what = format!("{dir:?} frame {k} of {n} damaged");
            assert_eq!(counts.damaged.iter().sum::<u64>(), 1, "{what}");
            agrees(&r, &what);
        }
    }
}

/// Frames each way of the clean survey.
fn clean_frames() -> (u64, u64) {
    static FRAMES: OnceLock<(u64, u64)> = OnceLock::new();
    *FRAMES.get_or_init(|| {
        let (_, counts) = through(FaultPlan::default(), Duration::from_secs(2));
        (counts.frames[0], counts.frames[1])
    })
}

/// The request frame of the clean survey's fourth run (a pin's screen): requests before it are
/// the hello, the description, one per channel and the first three runs.
fn fourth_run_request() -> u64 {
    2 + clean().record.board.channels.len() as u64 + 3
}

#[test]
fn a_request_duplicated_on_the_wire_is_counted_twice() {
    let k = fourth_run_request();
    let plan = FaultPlan { duplicate: vec![(Direction::ToBoard, k)], ..FaultPlan::default() };
    let (r, _) = through(plan, Duration::from_secs(2));
    let exps = &r.record.experiments;
    let clean = &clean().record.experiments;
    assert_eq!(exps.len(), clean.len() + 1, "one run more than the clean survey");
    let extra: Vec<_> = exps.iter().filter(|e| !e.received).collect();
    assert_eq!(extra.len(), 1);
    let ghost = extra[0];
    let twin = &exps[ghost.seq as usize - 1];
    // The board ran the same experiment right after the one the host took, by its own report.
    assert_eq!(
        (twin.experiment.clone(), twin.pin, twin.board_run + 1),
        (ghost.experiment.clone(), ghost.pin, ghost.board_run)
    );
    assert_eq!(twin, &clean[twin.seq as usize], "the first run is the clean survey's");
    assert!(ghost.start_ps >= twin.end_ps && ghost.end_ps > ghost.start_ps);
    assert_eq!(ghost.conversions, twin.conversions);
    assert!(ghost.cells.is_empty() && ghost.samples.is_empty());
    agrees(&r, "a duplicated request");
}

#[test]
fn a_request_lost_on_the_wire_adds_nothing() {
    let k = fourth_run_request();
    let plan = FaultPlan { lose: vec![(Direction::ToBoard, k)], ..FaultPlan::default() };
    let (r, counts) = through(plan, Duration::from_secs(2));
    assert_eq!(counts.damaged[0], 1);
    let exps = &r.record.experiments;
    assert_eq!(exps.len(), clean().record.experiments.len());
    assert!(exps.iter().all(|e| e.received));
    assert!(exps.windows(2).all(|w| w[1].board_run == w[0].board_run + 1), "the board ran each once");
    agrees(&r, "a lost request");
}
