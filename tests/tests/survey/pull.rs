//! The pull test on a simulated nRF52840-like board: the source against the board's own
//! 160 kΩ ±20% ladder, as a voltage divider (common practice, no source), checked against the
//! scenario's truth with the unit's real pull drawn within its tolerance.

use ohmsight_tests::{covers, default_board, driven, run, scenario, show};
use ohmsight_virtual::{BoardProfile, PinSetup, Source};

/// TACQ 3–40 µs at 16 MHz, 2 µs conversions, 2.5 pF, a 2 kΩ switch, the ladder on every pin.
fn nrf_like() -> BoardProfile {
    BoardProfile {
        vref_volts: 3.6,
        hold_farads: 2.5e-12,
        hold_tolerance: 0.2,
        switch_ohms: 2e3,
        switch_tolerance: 0.5,
        adc_clock_hz: 16e6,
        sample_cycles: heapless::Vec::from_slice(&[48.0, 80.0, 160.0, 240.0, 320.0, 640.0]).unwrap(),
        conversion_cycles: 32.0,
        adc_noise_lsb: 1.5,
        pull_ohms: 160e3,
        pull_tolerance: 0.2,
        ..default_board()
    }
}

fn pulled(pin: PinSetup) -> PinSetup {
    PinSetup { pull: true, ..pin }
}

#[test]
fn the_pull_test_recovers_20k_to_2m_within_30_percent_with_intervals_holding_the_truth() {
    let truths = [(0, 0.6, 20e3), (1, 2.9, 50e3), (2, 1.2, 200e3), (3, 2.2, 500e3), (4, 0.9, 1e6), (5, 1.8, 2e6)];
    for seed in [31, 32] {
        let pins = truths.iter().map(|&(ch, v, r)| pulled(driven(ch, v, r, 10e-12))).collect();
        let sc = scenario("pull test", seed, nrf_like(), pins);
        let report = run(&sc);
        for pin in &sc.pins {
            let Source::Driven { ohms, .. } = pin.source else { unreachable!() };
            let p = report.pins.iter().find(|p| p.channel == pin.channel).unwrap();
            let iv = p.pull_source_ohms.unwrap_or_else(|| {
                panic!(
                    "seed {seed} ch{}: no pull test (node {:?}, opted in {:?}, pull experiments {})",
                    pin.channel,
                    p.node_farads,
                    report.record.board.channels.iter().find(|c| c.channel == pin.channel).map(|c| c.pull),
                    report.record.experiments.iter().filter(|e| e.purpose == ohmsight::record::Purpose::Pull).count()
                )
            });
            println!("seed {seed} ch{} {ohms} Ω: pull test {} (fit {})", pin.channel, show(&iv), show(&p.source_ohms));
            let est = iv.estimate.unwrap_or_else(|| panic!("ch{}: only a bound: {}", pin.channel, show(&iv)));
            assert!((est / ohms - 1.0).abs() <= 0.3, "seed {seed} ch{}: {est} for {ohms}", pin.channel);
            assert!(covers(&iv, ohms), "seed {seed} ch{}: {} misses {ohms}", pin.channel, show(&iv));
        }
    }
}

#[test]
fn a_pull_test_too_slow_for_the_node_is_skipped_and_says_so() {
    // The drip-line scenario: a 330 kΩ moisture probe behind a 1 µF reservoir. Five time
    // constants of the 160 kΩ ladder against 1 µF are 0.8 s between conversions, far past the
    // test's longest rest, so no pull test runs, and the report says why instead of nothing.
    // (A unit whose readings size the node at three standard deviations: see the README's
    // slow pins. On some units they do not, and the test is sized for a nominal node.)
    let sc = scenario(
        "drip line",
        34,
        nrf_like(),
        vec![pulled(driven(0, 1.4, 330e3, 1e-6)), pulled(driven(1, 1.1, 47e3, 10e-12))],
    );
    let report = run(&sc);
    let big = report.pins.iter().find(|p| p.channel == 0).unwrap();
    assert!(big.pull_source_ohms.is_none(), "{:?}", big.pull_source_ohms.map(|iv| show(&iv)));
    let why = big.pull_not_run.as_deref().expect("a reason for the missing pull test");
    assert!(why.contains("would need") && why.contains("at most 4.00 ms"), "{why}");
    // The small node beside it had its test, and no such note.
    let small = report.pins.iter().find(|p| p.channel == 1).unwrap();
    assert!(small.pull_source_ohms.is_some() && small.pull_not_run.is_none());
    let opts = Default::default();
    let advice = ohmsight::advice::advise(&report, &opts);
    let text = ohmsight::render::text::survey_text(&report, &advice);
    assert!(text.contains("ch0: pull test: not run (a node up to"), "{text}");
    let json = ohmsight::render::survey_json(&report, &advice, &opts);
    let doc: serde_json::Value = serde_json::from_str(&json).unwrap();
    let pins = doc["pins"].as_array().unwrap();
    let ch = |n: u64| pins.iter().find(|p| p["channel"] == n).unwrap();
    assert!(ch(0)["pull_test_not_run"].as_str().is_some_and(|s| s.contains("would need")), "{}", ch(0));
    assert!(ch(1).get("pull_test_not_run").is_none());
}

#[test]
fn the_pull_test_measures_through_mains_hum() {
    // Soil-moisture probes on a pump controller's board, each with 30 mV of mains hum on its
    // lead. Each pull setting spans whole mains periods of both 50 and 60 Hz with its readings
    // evenly spread, so the hum averages out of every setting's mean and the divider reads
    // as on a quiet pin (before, a setting lasted ~2 ms and no hummed pin got a claim).
    let truths = [(0, 0.7, 47e3), (1, 2.1, 100e3), (2, 1.3, 330e3), (3, 2.6, 1e6)];
    for (seed, hz) in [(41, 50.0), (42, 60.0)] {
        let pins = truths
            .iter()
            .map(|&(ch, v, r)| PinSetup { hum_volts: 0.030, hum_hz: hz, ..pulled(driven(ch, v, r, 10e-12)) })
            .collect();
        let sc = scenario("hummed probes", seed, nrf_like(), pins);
        let report = run(&sc);
        for &(ch, _, ohms) in &truths {
            let p = report.pins.iter().find(|p| p.channel == ch).unwrap();
            let iv =
                p.pull_source_ohms.unwrap_or_else(|| panic!("{hz} Hz ch{ch}: no pull test ({:?})", p.pull_not_run));
            println!("{hz} Hz ch{ch} {ohms} Ω: pull test {} (fit {})", show(&iv), show(&p.source_ohms));
            let est = iv.estimate.unwrap_or_else(|| panic!("{hz} Hz ch{ch}: no claim: {}", show(&iv)));
            assert!((est / ohms - 1.0).abs() <= 0.3, "{hz} Hz ch{ch}: {est} for {ohms}");
            assert!(covers(&iv, ohms), "{hz} Hz ch{ch}: {} misses {ohms}", show(&iv));
        }
    }
}
