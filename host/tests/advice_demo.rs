//! Advice and scan plan on a surveyed bench board (simulated, in process), checked against the
//! hand rules the advice derives from.

use ohmsight::advice::{advise, min_filter_farads, min_period_s, AdviceOptions};
use ohmsight::link::InProcessLink;
use ohmsight::scenario;
use ohmsight::session::Session;
use ohmsight::{survey, SurveyOptions};

#[test]
fn bench_board_advice_follows_the_hand_rules() {
    let text = include_str!("data/bench4.toml");
    let sc = scenario::parse("bench4.toml", text).unwrap();
    let mut session = Session::new(InProcessLink::new(&sc));
    let r = survey(&mut session, &SurveyOptions::default()).unwrap();
    let a = advise(&r, &AdviceOptions { resolve_volts: Some(100e-6) });
    let pin = |ch: u8| r.pins.iter().find(|p| p.channel == ch).unwrap();
    let adv = |ch: u8| a.pins.iter().find(|p| p.channel == ch).unwrap();

    // The 47 kΩ divider settles: the advice is the survey's own minimum sample time.
    assert_eq!(adv(0).sample.map(|s| s.index), pin(0).min_sample_index);
    assert!(adv(0).sample.is_some() && adv(0).settle.is_none());

    // 2.2 MΩ behind 25 pF does not settle in 22.9 µs (τ ≈ 2.2 MΩ·29 pF = 64 µs; ½ LSB of 12 bits
    // needs ln(8192) = 9.0 τ): a buffer or at least 2^13·Ch = 8192·4 pF = 32.8 nF (common practice).
    let fix = adv(1).settle.expect("the slow sensor needs a fix");
    let ch = r.model.hold_farads;
    assert!((fix.min_farads - 8192.0 * ch).abs() < 1e-15 && (fix.min_farads - min_filter_farads(12, ch)).abs() < 1e-18);
    assert!((fix.min_farads - 32.8e-9).abs() < 0.5e-9, "{}", fix.min_farads);
    // The rate it allows is the recovery rule at the upper end of Rs: P = Rs·C·ln(2^13 + 1)
    // with C = Cext + Cn (≈ 2.3 MΩ · 32.8 nF · 9.01 ≈ 0.68 s).
    let cn = pin(1).node_farads.estimate.unwrap();
    let p = min_period_s(12, ch, fix.source_ohms, fix.min_farads + cn).unwrap();
    assert!((fix.min_farads_max_rate_hz - 1.0 / p).abs() < 1e-12);
    assert!(p > 0.5 && p < 0.9, "{p} s");
    // The buffer threshold: below it the longest sample time settles, above it not.
    assert!(fix.buffer_max_ohms < 2.2e6 && fix.buffer_max_ohms > 10e3, "{}", fix.buffer_max_ohms);

    // Memory: the slow sensor remembers the previous channel (survey flag), the advice says by
    // how much and what a dummy conversion leaves.
    let m = adv(1).memory.expect("memory advice on the slow sensor");
    assert!(m.worst_shift_lsb > 0.5);
    assert!(m.after_dummy_lsb.unwrap() < m.worst_shift_lsb);

    // Averaging: 1 LSB = 806 µV > 100 µV; n = ⌈(2σ/100 µV)²⌉ with σ the pin's noise in volts.
    let av = adv(0).averaging.expect("averaging advice for 100 µV");
    let sigma_v = pin(0).noise_lsb_rms.unwrap() * 3.3 / 4096.0;
    assert_eq!(av.readings, ((2.0 * sigma_v / 100e-6).powi(2)).ceil() as u64);

    // Floating pin: no numbers, a note, left out of the plan.
    assert!(adv(3).note.as_deref().unwrap().contains("nothing drives this pin"));
    let plan = &a.plan;
    assert!(plan.left_out.iter().any(|l| l.channel == 3));
    // Every planned pin within ½ LSB with the others at any level.
    assert!(plan.worst_error_lsb <= 0.5 && plan.entries.iter().all(|e| e.worst_error_lsb <= 0.5), "{plan:?}");
    // The 470 kΩ / 100 nF node sets the scan period: the node must recover from the charge the
    // hold capacitor takes, P ≥ Rs·Cn·ln(1/(1 − 2^13·Ch/(Ch + Cn))) ≈ 470 kΩ·100 nF·0.39 ≈ 18 ms.
    let f = pin(2).fit.as_ref().unwrap().params;
    if plan.entries.iter().any(|e| e.channel == 2) {
        let want = min_period_s(12, f.hold_farads, f.source_ohms, f.node_farads).unwrap();
        assert_eq!(plan.idle_for, Some(2));
        assert!((plan.scan_s - want).abs() / want < 0.05, "scan {} s vs rule {want} s", plan.scan_s);
    } else {
        panic!("the filtered pin can be planned with an idle time: {plan:?}");
    }
}
