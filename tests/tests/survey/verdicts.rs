//! Driven, floating and at-rail, at the edges where they are easy to confuse.

use ohmsight::Verdict;
use ohmsight_tests::{default_board, driven, fast_board, floating, run, scenario, show};

#[test]
fn high_resistance_is_driven_open_is_floating_rails_are_rails() {
    for (board, seed) in [(default_board(), 31), (fast_board(), 32)] {
        let vref = board.vref_volts;
        let pins = vec![
            driven(0, 1.2, 10e6, 10e-12),
            driven(1, 2.0, 300e6, 10e-12),
            floating(2, 5e-12),
            floating(3, 30e-12),
            driven(4, 0.0, 100.0, 10e-12),        // tied to ground
            driven(5, vref, 47e3, 10e-12),        // pulled up to the reference through 47 kΩ
            driven(6, vref + 0.05, 10.0, 10e-12), // a little above full scale
            driven(7, 0.0, 1e6, 10e-12),          // pulled down through 1 MΩ
        ];
        let r = run(&scenario("edges", seed, board, pins));
        let want = [
            Verdict::Driven,
            Verdict::Driven,
            Verdict::Floating,
            Verdict::Floating,
            Verdict::AtRail,
            Verdict::AtRail,
            Verdict::AtRail,
            Verdict::AtRail,
        ];
        for (p, w) in r.pins.iter().zip(want) {
            assert_eq!(p.verdict, w, "seed {seed} ch{}: Rs {} reason {:?}", p.channel, show(&p.source_ohms), p.reason);
        }
        // A rail reached through a resistor still has that resistor measured.
        let pulled = &r.pins[7];
        assert!(ohmsight_tests::covers(&pulled.source_ohms, 1e6), "seed {seed}: {}", show(&pulled.source_ohms));
    }
}
