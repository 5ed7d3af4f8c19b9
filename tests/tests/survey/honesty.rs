//! Never a confident wrong number: the cases where the survey used to print an interval, a
//! bound or a verdict that the truth contradicts, and the field case of mains hum.
//!
//! The scenarios are our own (an invented sensor board). Each check compares the report with
//! the truth the scenario wired; "wrong" means an interval or bound that misses the truth by
//! more than 15% beyond its end, or a wrong verdict (the accuracy benchmark's count).

use ohmsight::advice::{advise, AdviceOptions};
use ohmsight::fit::Interval;
use ohmsight::{PinReport, SurveyReport, Verdict};
use ohmsight_tests::{default_board, driven, floating, run, scenario, show};
use ohmsight_virtual::{BoardProfile, PinSetup};
use std::sync::OnceLock;

/// An interval or bound that misses `truth` by more than 15% beyond one of its ends.
fn misses(iv: &Interval, truth: f64) -> bool {
    iv.low.is_some_and(|l| truth < l / 1.15) || iv.high.is_some_and(|h| truth > h * 1.15)
}

fn hum(pin: PinSetup, volts: f64, hz: f64) -> PinSetup {
    PinSetup { hum_volts: volts, hum_hz: hz, ..pin }
}

/// One sensor board: a slow RC filter larger than a survey can move, mains hum on three
/// sources, and two unconnected inputs behind 100 nF filter capacitors.
fn board() -> &'static SurveyReport {
    static R: OnceLock<SurveyReport> = OnceLock::new();
    R.get_or_init(|| {
        let pins = vec![
            driven(0, 1.2, 220e3, 4.7e-6),                    // thermistor divider, big filter
            hum(driven(1, 1.0, 1e3, 10e-12), 0.030, 60.0),    // current-loop shunt, 60 Hz pickup
            hum(driven(2, 1.65, 4.7e3, 10e-12), 0.030, 50.0), // divider, 50 Hz pickup
            hum(driven(3, 2.2, 100e3, 20e-12), 0.030, 50.0),  // high-impedance divider
            floating(4, 100e-9),                              // unplugged sensor, filter left
            floating(5, 100e-9),
            hum(driven(6, 0.9, 47e3, 10e-12), 0.050, 50.0), // 50 mV of hum
        ];
        run(&scenario("honest sensor board", 1307, default_board(), pins))
    })
}

/// Each pin's channel, source resistance (`None` for an open pin) and node, as wired.
fn truths(pins: &[PinSetup]) -> Vec<(u8, Option<f64>, f64)> {
    pins.iter()
        .map(|p| match p.source {
            ohmsight_virtual::Source::Driven { ohms, .. } => (p.channel, Some(ohms), p.node_farads),
            _ => (p.channel, None, p.node_farads),
        })
        .collect()
}

fn pin(r: &SurveyReport, ch: u8) -> &PinReport {
    r.pins.iter().find(|p| p.channel == ch).expect("pin surveyed")
}

/// What an open pin behind `farads` may be reported as: `floating` or `unknown`, no upper bound
/// on its source, no node claim that misses the capacitor, and where the loading burst refuted
/// or moved it, an open node named within 25% of the capacitor. `case` heads each message.
fn assert_open_pin(p: &PinReport, farads: f64, case: &str) {
    assert!(matches!(p.verdict, Verdict::Floating | Verdict::Unknown), "{case}{}", about(p));
    assert!(p.source_ohms.high.is_none(), "{case}no upper bound on an open pin: {}", about(p));
    assert!(!misses(&p.node_farads, farads), "{case}{}", about(p));
    if let Some(t) = p.load.as_ref().filter(|t| t.refuted || t.moved()) {
        let named = t.open_farads.unwrap_or(f64::NAN);
        assert!((named / farads - 1.0).abs() < 0.25, "{case}{} names {named:e}", about(p));
    }
}

fn about(p: &PinReport) -> String {
    format!(
        "ch{} {}: Rs {}{} Cn {} reason {:?}",
        p.channel,
        p.verdict.as_str(),
        show(&p.source_ohms),
        p.source_assumes_node_below.map_or(String::new(), |c| format!(" if C < {c:e}")),
        ohmsight::render::text::interval_text(&p.node_farads, ohmsight::units::farads),
        p.reason
    )
}

#[test]
fn a_node_larger_than_the_survey_can_move_is_a_bound_with_its_reason() {
    let p = pin(board(), 0);
    // 220 kΩ behind 4.7 µF: a time constant of a second, far beyond the survey's milliseconds.
    assert_ne!(p.verdict, Verdict::Floating, "{}", about(p));
    let conditional_void = p.source_assumes_node_below.is_some_and(|c| 4.7e-6 > c);
    assert!(conditional_void || !misses(&p.source_ohms, 220e3), "{}", about(p));
    assert!(!misses(&p.node_farads, 4.7e-6), "{}", about(p));
    assert!(p.source_ohms.estimate.is_none(), "no estimate the data cannot support: {}", about(p));
    if p.verdict == Verdict::Unknown {
        // Either the readings showed the node, or the loading burst drifted it.
        let why = |r: &str| r.contains("hides the source") || r.contains("an open pin behind about");
        assert!(p.reason.as_deref().is_some_and(why), "{}", about(p));
    }
}

#[test]
fn open_pins_behind_filter_capacitors_are_never_driven() {
    for ch in [4, 5] {
        assert_open_pin(pin(board(), ch), 100e-9, "");
    }
}

#[test]
fn hum_of_30_mv_is_measured_through_not_given_up_on() {
    let r = board();
    // 1 kΩ: below what the default board resolves; a bound of at most 3 kΩ that holds it.
    let p = pin(r, 1);
    assert_eq!(p.verdict, Verdict::Driven, "{}", about(p));
    assert!(p.source_ohms.high.is_some_and(|h| (1e3..=3e3).contains(&h)), "{}", about(p));
    assert!(p.flags.contains(&ohmsight::Flag::Hum60), "{}", about(p));
    // 4.7 kΩ and 100 kΩ: within 10%, with the truth inside the interval.
    for (ch, truth) in [(2, 4.7e3), (3, 100e3)] {
        let p = pin(r, ch);
        assert_eq!(p.verdict, Verdict::Driven, "{}", about(p));
        let e = p.source_ohms.estimate.unwrap_or(f64::NAN);
        assert!((e / truth - 1.0).abs() <= 0.10, "{}", about(p));
        assert!(ohmsight_tests::covers(&p.source_ohms, truth), "{}", about(p));
        assert!(p.flags.contains(&ohmsight::Flag::Hum50), "{}", about(p));
        // The hum is taken out of the order swap too: no memory conjured from it.
        assert!(!p.flags.contains(&ohmsight::Flag::Memory), "{}", about(p));
    }
}

#[test]
fn hum_of_50_mv_leaves_an_interval_that_holds_the_truth() {
    let p = pin(board(), 6);
    assert_eq!(p.verdict, Verdict::Driven, "{}", about(p));
    assert!(ohmsight_tests::covers(&p.source_ohms, 47e3), "{}", about(p));
    assert!(p.source_ohms.estimate.is_some(), "{}", about(p));
}

#[test]
fn a_stiff_buffer_on_a_16_bit_board_gets_no_node_claim_and_a_stated_assumption() {
    // A 50 Ω op-amp output with 30 pF on a 16-bit converter: its readings show a stiff node
    // and nothing of its size.
    let board = BoardProfile { bits: 16, ..default_board() };
    let r =
        run(&scenario("16-bit buffer", 1311, board, vec![driven(0, 1.4, 50.0, 30e-12), driven(1, 2.4, 10e3, 30e-12)]));
    let p = pin(&r, 0);
    assert_eq!(p.verdict, Verdict::Driven, "{}", about(p));
    assert!(!misses(&p.node_farads, 30e-12), "{}", about(p));
    assert!(!misses(&p.source_ohms, 50.0), "{}", about(p));
    if p.source_ohms.high.is_some() && p.node_farads.low.is_none() {
        assert!(p.source_assumes_node_below.is_some(), "a bound on a stiff node says what it assumes: {}", about(p));
    }
    let q = pin(&r, 1);
    assert!(ohmsight_tests::covers(&q.source_ohms, 10e3), "{}", about(q));
}

#[test]
fn a_source_known_only_to_be_small_gets_no_node_claim() {
    // Low-impedance sources behind filter capacitors (the cases the accuracy grid caught with a
    // node interval that missed the truth: 316 Ω behind 1 µF read "42–680 nF"). Where the
    // source is only bounded from above, the readings do not size the node.
    let pins = vec![
        driven(0, 2.33, 316.0, 1e-6),    // reference buffer, 1 µF bypass
        driven(1, 0.383, 316.0, 4.7e-6), // bridge midpoint, 4.7 µF
        driven(2, 1.72, 100.0, 1e-9),    // op-amp output, 1 nF
    ];
    let r = run(&scenario("stiff sources", 1313, default_board(), pins));
    let bounded = |p: &&PinReport| p.source_ohms.high.is_some() && p.source_ohms.low.is_none();
    assert!(r.pins.iter().any(|p| bounded(&p)), "the case under test: a source bounded from above only");
    for p in &r.pins {
        assert_ne!(p.verdict, Verdict::Floating, "{}", about(p));
        if bounded(&p) {
            let cn = &p.node_farads;
            assert!(cn.estimate.is_none() && cn.low.is_none() && cn.high.is_none(), "{}", about(p));
        }
    }
}

#[test]
fn advice_and_scan_plan_tell_one_story() {
    let r = board();
    let advice = advise(r, &AdviceOptions::default());
    let plan = &advice.plan;
    if let Some(ch) = plan.idle_for {
        assert!(
            plan.entries.iter().any(|e| e.channel == ch),
            "idle time named after ch{ch}, which the plan leaves out"
        );
    }
    for e in &plan.entries {
        let p = pin(r, e.channel);
        let a = advice.pins.iter().find(|a| a.channel == e.channel).expect("advice per pin");
        let own = a.sample.map(|s| s.index);
        assert_eq!(own, p.min_sample_index, "ch{}: the advice's sample time is the table's", e.channel);
        if own != Some(e.sample_index) || e.dummies > 0 {
            let u = a
                .scan
                .as_ref()
                .unwrap_or_else(|| panic!("ch{}: the plan differs from its advice unexplained", e.channel));
            assert_eq!((u.sample_index, u.dummies), (e.sample_index, e.dummies));
            assert!(!u.reason.is_empty());
        } else {
            assert!(a.scan.is_none(), "ch{}", e.channel);
        }
    }
}

/// A production check's fits stop refining an interval end once no limit can change side
/// ([`ohmsight::fit::Goals`]). What they report must hold what the survey's full search
/// reports: an end as far out or farther, a side the survey leaves open left open. On this
/// board's hard cases (a hidden node, hum, open pins behind 100 nF) and for limits that cut
/// through the intervals, they must do so with fewer model evaluations.
#[test]
fn a_checks_quicker_intervals_hold_the_surveys() {
    use ohmsight::analyse::{board_model, pin_evidence};
    use ohmsight::fit::{fit_pin_for, FitInput, Goals};
    let r = board();
    let model = board_model(&r.record);
    let (mut quick_evals, mut full_evals) = (0, 0);
    for ev in pin_evidence(&r.record, &model).iter().filter(|e| e.rail.is_none()) {
        let Some(full) = pin(r, ev.channel).fit.clone() else { continue };
        // Limits at ±20% of the survey's estimate (or of its bound): they cut near the ends.
        let centre = full.source_ohms.estimate.or(full.source_ohms.low).or(full.source_ohms.high).unwrap_or(1e4);
        let goals =
            Goals { decide_only: true, source_ohms: [Some(centre / 1.2), Some(centre * 1.2)], node_farads: [None; 2] };
        let quick = fit_pin_for(&FitInput { board: &model, events: &ev.events }, &goals).expect("fits");
        let (q, f) = (quick.source_ohms, full.source_ohms);
        let why = format!("ch{}: quick {} against the survey's {}", ev.channel, show(&q), show(&f));
        // Within 3% (the survey's bisection stops within a tenth of a Wald width).
        match (q.low, f.low) {
            (Some(ql), Some(fl)) => assert!(ql <= fl * 1.03, "{why}"),
            (Some(_), None) => panic!("a side the survey leaves open is closed: {why}"),
            _ => {}
        }
        match (q.high, f.high) {
            (Some(qh), Some(fh)) => assert!(qh >= fh / 1.03, "{why}"),
            (Some(_), None) if quick.assumes_node_below.is_none() => {
                panic!("a side the survey leaves open is closed: {why}")
            }
            _ => {}
        }
        assert!(
            quick.node_farads.low.is_none() && quick.node_farads.high.is_none(),
            "no node limit, no node claim: {why}"
        );
        quick_evals += quick.evaluations;
        full_evals += full.evaluations;
    }
    println!("model evaluations: {quick_evals} for the check's fits, {full_evals} for the survey's");
    assert!(quick_evals * 2 < full_evals, "{quick_evals} against {full_evals}");
}

#[test]
fn an_open_pin_behind_microfarads_is_not_called_driven_and_a_stiff_source_still_is() {
    // A stiff reading is a small source or a node too large to move: the loading burst tells
    // an unplugged sensor behind its 4.7 µF and 10 µF filters from low-impedance sources behind
    // the same capacitors (the accuracy grid's open pin behind 4.7 µF was called driven).
    let pins = vec![
        floating(0, 4.7e-6),             // unplugged sensor, filter left
        floating(1, 10e-6),              // the same with a bigger filter
        driven(2, 0.383, 316.0, 4.7e-6), // bridge midpoint, 4.7 µF
        driven(3, 2.33, 316.0, 1e-6),    // reference buffer, 1 µF bypass
        driven(4, 1.4, 100.0, 30e-12),   // op-amp output
    ];
    let r = run(&scenario("big filters", 1317, default_board(), pins));
    for (ch, c) in [(0, 4.7e-6), (1, 10e-6)] {
        // Where the burst decided it (or moved it), the open node it names is the filter.
        assert_open_pin(pin(&r, ch), c, "");
    }
    // The 10 µF pin is the case under test: stiff to the survey, decided by the burst.
    assert!(pin(&r, 1).load.as_ref().is_some_and(|t| t.refuted), "{}", about(pin(&r, 1)));
    for ch in [2, 3, 4] {
        let p = pin(&r, ch);
        assert_eq!(p.verdict, Verdict::Driven, "{}", about(p));
        // Each was put to the burst, which held, and says how big an open node it rules out.
        let t = p.load.as_ref().expect("a stiff pin gets a loading burst");
        assert!(!t.refuted && t.open_farads.is_some_and(|c| c > 20e-6), "{}: {t:?}", about(p));
        assert!(p.reason.as_deref().is_some_and(|r| r.contains("not an open pin unless")), "{}", about(p));
    }
}

#[test]
fn a_small_source_with_two_explanations_keeps_both_in_its_interval() {
    // Op-amp outputs (100 Ω) behind 1 nF on a fast converter: a small source behind the modest
    // node and a large one behind a stiff node both explain the readings, and the source
    // interval must span both valleys. The accuracy grid caught "134 Ω–1.47 kΩ" here: the
    // edge search, walking down from the stiff valley, stopped at the ridge between them.
    // (A seed where it did.)
    let pins = vec![driven(0, 1.2, 100.0, 1e-9)];
    let r = run(&scenario("op-amp output, fast converter", 1005, ohmsight_tests::fast_board(), pins));
    for p in &r.pins {
        assert_ne!(p.verdict, Verdict::Floating, "{}", about(p));
        let void = p.source_assumes_node_below.is_some_and(|c| 1e-9 > c);
        assert!(void || !misses(&p.source_ohms, 100.0), "{}", about(p));
        assert!(!misses(&p.node_farads, 1e-9), "{}", about(p));
    }
}

#[test]
fn a_node_pinned_by_the_bursts_drift_stays_inside_its_interval() {
    // A 47 kΩ divider behind a 10 µF reservoir: the loading burst's drift allows the node only
    // a valley about half a decade wide around 10 µF, and the fit had stopped in a shallower
    // one at 55 nF. Its upper-edge search probed a decade and three decades past 277 nF, both
    // outside that valley, and printed `55.3 nF (27.9–277 nF)`. (A seed where it did.)
    let pins = vec![driven(0, 1.2, 47e3, 10e-6)];
    let r = run(&scenario("reservoir divider", 1002, default_board(), pins));
    let p = pin(&r, 0);
    assert!(!misses(&p.node_farads, 10e-6), "{}", about(p));
    let void = p.source_assumes_node_below.is_some_and(|c| 10e-6 > c);
    assert!(void || !misses(&p.source_ohms, 47e3), "{}", about(p));
    assert_ne!(p.verdict, Verdict::Floating, "{}", about(p));
}

#[test]
fn a_hummed_small_source_on_a_fast_converter_keeps_the_truth_in_its_interval() {
    // A 1 kΩ current-loop shunt with 30 mV of 50 Hz pickup on the fast converter: the profile
    // of the source is flat from about 180 Ω to 1.5 kΩ, but one re-fit near 270 Ω missed the
    // floor, and the edge search stopped there: `183 Ω (171–232 Ω)`, probing next a decade
    // past it, beyond the flat stretch. (Seeds where it did.)
    for seed in [1006, 1009] {
        let pins = vec![hum(driven(0, 2.32, 1e3, 10e-12), 0.030, 50.0)];
        let r = run(&scenario("shunt with pickup, fast converter", seed, ohmsight_tests::fast_board(), pins));
        let p = pin(&r, 0);
        assert!(!misses(&p.source_ohms, 1e3), "seed {seed}: {}", about(p));
        assert!(p.source_ohms.high.is_some_and(|h| h <= 3e3), "seed {seed}: at most 3 kΩ: {}", about(p));
    }
}

#[test]
fn a_second_explanation_only_a_little_worse_is_not_excluded() {
    // A greenhouse controller's mixed inputs, sixteen pins on one board. On ch7, 316 kΩ behind
    // a 10 µF reservoir, the best fit is a small source behind 1 nF, and the truth's valley (a
    // large source behind a large node) lies only 4.1–4.4 above it, past a ridge of about 100:
    // just outside the 95% threshold. The source read `< 1.18 kΩ`, 268 times too low, with no
    // assumption. A separate valley within 9 of the best fit now joins the interval. (A seed
    // where it did; the accuracy grid's board 50035.)
    let pins = vec![
        hum(driven(0, 2.608, 10e3, 10e-12), 0.010, 50.0),
        hum(driven(1, 1.342, 470e3, 10e-12), 0.050, 50.0),
        driven(2, 1.715, 100.0, 1e-9),
        driven(3, 0.677, 10e6, 1e-6),
        driven(4, 2.044, 3.162e3, 1e-9),
        driven(5, 0.712, 10e3, 4.7e-6),
        driven(6, 2.087, 1e6, 5e-12),
        driven(7, 1.734, 316.2e3, 10e-6),
        hum(driven(8, 0.985, 1e3, 10e-12), 0.050, 50.0),
        driven(9, 2.253, 1e3, 4.7e-6),
        driven(10, 1.681, 100e3, 50e-12),
        floating(11, 1e-6),
        driven(12, 1.162, 31.62e6, 1e-9),
        driven(13, 2.911, 1e6, 4.7e-6),
        driven(14, 2.175, 3.162e3, 10e-6),
        driven(15, 1.525, 1e6, 100e-9),
    ];
    let truths = truths(&pins);
    let r = run(&scenario("greenhouse controller", 50035, default_board(), pins));
    for (ch, ohms, farads) in truths {
        let p = pin(&r, ch);
        assert!(!misses(&p.node_farads, farads), "ch{ch}: {}", about(p));
        let Some(ohms) = ohms else {
            assert_ne!(p.verdict, Verdict::Driven, "ch{ch}: {}", about(p));
            continue;
        };
        let void = p.source_assumes_node_below.is_some_and(|c| farads > c);
        assert!(void || !misses(&p.source_ohms, ohms), "ch{ch}: {}", about(p));
        assert_ne!(p.verdict, Verdict::Floating, "ch{ch}: {}", about(p));
    }
}

#[test]
fn a_node_that_moved_under_the_burst_keeps_every_explanation_in_its_note() {
    // A pump-house logger's level dividers behind 2.2 µF and 3.3 µF filters: too slow for the
    // survey's conversions, so the fit gives a stiff bound assuming a node below 2 µF, and the
    // loading burst then moves the node more than 4 standard errors but less than that bound
    // allows. The note used to offer only "a source below the bound behind less than 2 µF, or an
    // open pin", leaving out the truth: a large source behind a node above the assumption.
    let pins = vec![
        driven(0, 1.5, 150e3, 2.2e-6),
        driven(1, 1.5, 150e3, 3.3e-6),
        driven(2, 1.5, 470e3, 2.2e-6),
        driven(3, 1.5, 470e3, 3.3e-6),
    ];
    let truths = truths(&pins);
    let r = run(&scenario("pump-house logger", 1331, default_board(), pins));
    let mut moved = 0;
    for (ch, ohms, farads) in truths {
        let ohms = ohms.expect("every divider is driven");
        let p = pin(&r, ch);
        assert_ne!(p.verdict, Verdict::Floating, "{}", about(p));
        assert!(!misses(&p.node_farads, farads), "{}", about(p));
        let void = p.source_assumes_node_below.is_some_and(|c| farads > c);
        assert!(void || !misses(&p.source_ohms, ohms), "{}", about(p));
        if !p.load.as_ref().is_some_and(|t| t.moved() && !t.refuted) {
            continue;
        }
        moved += 1;
        assert_eq!(p.verdict, Verdict::Unknown, "{}", about(p));
        let reason = p.reason.as_deref().unwrap_or_default();
        assert!(reason.contains("behind a larger source or none"), "{}", about(p));
    }
    assert!(moved >= 1, "the case: at least one node moved under a bound too wide to refute");
}

#[test]
fn an_open_pin_seen_only_through_slow_drift_keeps_its_filter_inside_the_node_interval() {
    // An unplugged sensor behind a 10 µF filter, on two units. The readings see the node only
    // through its slow drift under the survey's conversions, and at the 95% level these units
    // read `3.53 µF (2.26–8.02 µF)` and `3.72 µF (2.39–7.85 µF)`: tails (the truth 6–7 above
    // the best fit), but wrong claims. Such a pin's ends are drawn at χ² 9. (Seeds where it
    // did.)
    for seed in [1019, 1022] {
        let r = run(&scenario("unplugged sensor", seed, default_board(), vec![floating(0, 10e-6)]));
        let p = pin(&r, 0);
        assert_open_pin(p, 10e-6, &format!("seed {seed}: "));
        assert!(p.node_farads.low.is_some(), "seed {seed}: the case: a node interval: {}", about(p));
    }
}

#[test]
fn an_open_pin_behind_47_uf_is_not_called_driven_and_a_stiff_source_behind_it_still_is() {
    // A cellar sump monitor: an open float switch whose 47 µF debounce capacitor stays on the
    // pin, a level buffer behind the same capacitor, and the pump's current sense (100 kΩ
    // behind 4.7 µF, 50 mV of 50 Hz). With a 120 ms burst such a pin read `driven < 3.92 kΩ if
    // C < 2.00 µF` (a survey of the same board with one more pin: a drift of 0.30 ± 0.11 LSB,
    // under four standard errors; reach 32.2 µF), and this test failed on its verdict. A 480 ms
    // burst moves it four times as far (1.19 LSB) against about the same standard error (0.10
    // LSB, set mostly by the model's floor).
    let pins = vec![floating(0, 47e-6), driven(1, 1.2, 100.0, 47e-6), hum(driven(2, 0.7, 100e3, 4.7e-6), 0.050, 50.0)];
    let r = run(&scenario("cellar sump monitor", 4242, default_board(), pins));
    let open = pin(&r, 0);
    assert_open_pin(open, 47e-6, "");
    // The case: the burst refutes the stiff bound (and names the capacitor: 45.9 µF here).
    assert!(open.load.as_ref().is_some_and(|t| t.refuted), "refuted: {}", about(open));
    let stiff = pin(&r, 1);
    assert_eq!(stiff.verdict, Verdict::Driven, "{}", about(stiff));
    let t = stiff.load.as_ref().expect("a stiff pin gets a loading burst");
    assert!(!t.moved() && t.open_farads.is_some_and(|c| c > 100e-6), "{}: {t:?}", about(stiff));
    // The pump input moves under the burst like an open pin behind about 9 µF: not driven,
    // and its note never sends the reader to a node of that size.
    let pump = pin(&r, 2);
    assert_eq!(pump.verdict, Verdict::Unknown, "{}", about(pump));
    assert!(pump.load.as_ref().is_some_and(|t| t.moved()), "{}", about(pump));
    assert!(!pump.reason.as_deref().unwrap_or_default().contains("of that size"), "{}", about(pump));
}
