//! The built-in demo scenario: verdicts and flags for every kind of pin it wires.

use ohmsight::scenario::demo;
use ohmsight::{Flag, Verdict};
use ohmsight_tests::run;
use ohmsight_virtual::Source;

#[test]
fn verdicts_and_flags_hold_across_seeds() {
    for seed in [7, 8] {
        let mut s = demo();
        s.seed = seed;
        let r = run(&s);
        for (setup, p) in s.pins.iter().zip(&r.pins) {
            let ctx = format!("seed {seed} ch{} {}: {:?} {:?}", p.channel, p.label, p.verdict, p.flags);
            let expected = match setup.source {
                Source::Floating => Verdict::Floating,
                Source::Driven { volts, .. } if volts >= s.board.vref_volts || volts <= 0.0 => Verdict::AtRail,
                Source::Driven { .. } => Verdict::Driven,
            };
            assert_eq!(p.verdict, expected, "{ctx}");
            let hum50 = p.flags.contains(&Flag::Hum50);
            let hum60 = p.flags.contains(&Flag::Hum60);
            let excess = p.flags.contains(&Flag::ExcessNoise);
            if setup.hum_volts > 0.0 {
                // hum lines at the scenario's mains frequency, not the other one
                assert_eq!((hum50, hum60), (setup.hum_hz == 50.0, setup.hum_hz == 60.0), "{ctx}");
            } else {
                assert!(!hum50 && !hum60, "{ctx}: no hum was wired");
            }
            if setup.noise_volts > 0.0 {
                assert!(excess, "{ctx}: source noise must be flagged");
            }
            if setup.noise_volts == 0.0 && setup.hum_volts == 0.0 && expected == Verdict::Driven {
                assert!(!excess, "{ctx}: a clean source is not noisy");
            }
        }
        assert!(r.link.conversions > 0 && r.link.bytes_received > 0);
    }
}
