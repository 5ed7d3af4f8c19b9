//! Calibration of a unit off its datasheet: two fixture resistors give the unit's real hold
//! capacitance and switch resistance, and the other pins' source resistances come right.
//!
//! The simulated unit's hold capacitor is 1.3× and its switch 0.7× the declared values (far
//! outside the declared ±5% / ±10%), plus the usual unit spread within those tolerances: the
//! truth is the board's own (`true_hold_and_switch`), not the ratios.

use ohmsight::calibration::{apply, calibrate_record, summary, FixtureSpec};
use ohmsight::link::InProcessLink;
use ohmsight::record::RunKind;
use ohmsight::run::{survey_with, ProfileChoice, SurveyOptions};
use ohmsight::session::Session;
use ohmsight::SurveyReport;
use ohmsight_tests::{covers, default_board, driven, scenario, show};
use ohmsight_virtual::{BoardProfile, Scenario};

/// Fixture pins 0 (10 kΩ) and 1 (470 kΩ), and six pins of an invented logger from 22 kΩ to 1 MΩ.
fn off_datasheet(seed: u64) -> Scenario {
    let board = BoardProfile { unit_hold_ratio: 1.3, unit_switch_ratio: 0.7, ..default_board() };
    scenario(
        "calibration test unit",
        seed,
        board,
        vec![
            driven(0, 1.65, 10e3, 5e-12),
            driven(1, 1.65, 470e3, 5e-12),
            driven(2, 0.82, 22e3, 8e-12),
            driven(3, 1.91, 47e3, 10e-12),
            driven(4, 1.2, 100e3, 6e-12),
            driven(5, 2.3, 220e3, 12e-12),
            driven(6, 0.6, 470e3, 7e-12),
            driven(7, 2.75, 1e6, 9e-12),
        ],
    )
}

fn survey(sc: &Scenario, opts: &SurveyOptions) -> SurveyReport {
    let mut session = Session::new(InProcessLink::new(sc));
    survey_with(&mut session, opts, &mut |_| {}).expect("survey on the simulated board").report
}

/// Median relative error of the source resistance of channels 2–7 against the scenario.
fn median_error(sc: &Scenario, r: &SurveyReport) -> f64 {
    let mut errors: Vec<f64> = sc.pins[2..]
        .iter()
        .map(|pin| {
            let ohmsight_virtual::Source::Driven { ohms, .. } = pin.source else { unreachable!() };
            let p = r.pins.iter().find(|p| p.channel == pin.channel).unwrap();
            let est = p.source_ohms.estimate.unwrap_or_else(|| panic!("ch{} has no estimate", pin.channel));
            (est / ohms - 1.0).abs()
        })
        .collect();
    errors.sort_by(f64::total_cmp);
    (errors[2] + errors[3]) / 2.0
}

#[test]
fn two_fixture_resistors_calibrate_a_unit_off_its_datasheet() {
    let sc = off_datasheet(606);
    let (hold, switch) = InProcessLink::new(&sc).board().true_hold_and_switch();

    let fixtures = [
        FixtureSpec { channel: 0, ohms: 10e3, tolerance: 0.01 },
        FixtureSpec { channel: 1, ohms: 470e3, tolerance: 0.01 },
    ];
    let run = survey(&sc, &SurveyOptions { channels: vec![0, 1], kind: RunKind::Calibration, ..Default::default() });
    let c = calibrate_record(&run.record, &fixtures).expect("a calibration");
    println!(
        "hold {} (truth {:.3} pF), switch {} (truth {:.0} Ω), χ²/dof {:.2}",
        ohmsight::render::text::interval_text(&c.hold_farads, ohmsight::units::farads),
        hold * 1e12,
        show(&c.switch_ohms),
        switch,
        c.chi2 / c.dof as f64
    );
    assert!(covers(&c.hold_farads, hold), "the hold interval holds the unit's real hold capacitance");
    assert!(covers(&c.switch_ohms, switch), "the switch interval holds the unit's real switch resistance");
    // Far tighter than the datasheet's ±5% / ±10%, or calibrating would gain nothing.
    let width = |iv: &ohmsight::fit::Interval| iv.high.unwrap() / iv.low.unwrap() - 1.0;
    assert!(width(&c.hold_farads) < 0.05, "hold interval {:.3} wide", width(&c.hold_farads));
    assert!(width(&c.switch_ohms) < 0.2, "switch interval {:.3} wide", width(&c.switch_ohms));

    let stored = summary(&run.record, &fixtures, &c, "2026-12-04T00:00:00.000Z");
    let uncalibrated = survey(&sc, &SurveyOptions::default());
    let calibrated = survey(
        &sc,
        &SurveyOptions {
            profile: Some(ProfileChoice(std::sync::Arc::new(move |_, own| Ok(apply(&own, &stored))))),
            ..Default::default()
        },
    );
    assert!(calibrated.record.profile.source.starts_with("calibration "), "the run says what it was analysed with");
    let (before, after) = (median_error(&sc, &uncalibrated), median_error(&sc, &calibrated));
    println!(
        "median source-resistance error of ch2–ch7: uncalibrated {:.1}%, calibrated {:.2}%",
        before * 100.0,
        after * 100.0
    );
    assert!(after <= 0.05, "calibrated median error {:.2}% (at most 5%)", after * 100.0);
    assert!(before > 2.0 * after, "calibrating improved the other pins ({before:.3} → {after:.3})");
    for pin in &sc.pins[2..] {
        let ohmsight_virtual::Source::Driven { ohms, .. } = pin.source else { unreachable!() };
        let p = calibrated.pins.iter().find(|p| p.channel == pin.channel).unwrap();
        assert!(covers(&p.source_ohms, ohms), "ch{}: {} holds {ohms} Ω", pin.channel, show(&p.source_ohms));
    }
}

#[test]
fn a_wrong_fixture_value_is_refused_not_stored() {
    let sc = off_datasheet(607);
    // The 10 kΩ fixture declared as 33 kΩ: no hold capacitor and switch explain both pins.
    let fixtures = [
        FixtureSpec { channel: 0, ohms: 33e3, tolerance: 0.01 },
        FixtureSpec { channel: 1, ohms: 470e3, tolerance: 0.01 },
    ];
    let run = survey(&sc, &SurveyOptions { channels: vec![0, 1], kind: RunKind::Calibration, ..Default::default() });
    let e = calibrate_record(&run.record, &fixtures).expect_err("refused");
    assert!(e.to_string().contains("do not fit resistors of the stated values"), "{e}");
}
