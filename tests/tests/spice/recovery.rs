//! The fit recovers `Rs` and `Cn` from readings whose physics ngspice computed.
//!
//! The survey runs once on the simulated board to choose its experiments for the pin (the
//! plan is adaptive); that exact history — every conversion, gap and settle time — is then
//! simulated in ngspice on a unit whose hold capacitor and switch differ from the profile (as a
//! real unit's do), with firmware overhead before every conversion. The hold-capacitor voltages
//! ngspice reports are quantized with Gaussian converter noise from a seeded generator and
//! aggregated into the cells the firmware would have sent; the host fit sees only those.

use ohmsight::fit::{fit_pin, FitInput, Interval};
use ohmsight::model::{CellObs, Event};
use ohmsight::units;
use ohmsight_protocol::analog::volts_to_lsb;
use ohmsight_protocol::{Aggregate, Experiment};
use ohmsight_tests::spice::{history_timeline, scratch_dir, transient_chained, SpiceCircuit};
use ohmsight_tests::{covers, default_board, driven, fast_board, resolvable, run, scenario, show, Gauss};
use ohmsight_virtual::{BoardProfile, PRECHARGE_HIGH, PRECHARGE_LOW};

/// How far the unit under test is from its profile, in σ of the profile's tolerance (which is
/// stated at ±2σ): a typical unit, hold capacitor high and switch low. The fit must absorb this
/// through its nuisance parameters; nothing but the priors can, since scaling every capacitance
/// up and every resistance down by one factor leaves all time constants and charge-sharing
/// ratios, and so every reading, unchanged.
const HOLD_SIGMAS: f64 = 1.0;
const SWITCH_SIGMAS: f64 = -1.0;
/// Firmware time before every conversion, ps (the fit does not know it).
const OVERHEAD_PS: u64 = 150_000;
/// Sampling phases per ngspice run.
const CHUNK: usize = 64;

struct Outcome {
    source_ohms: Interval,
    node_farads: Interval,
    source_volts: f64,
    conversions: usize,
}

/// Surveys (plan only) on the simulated board, replays the pin's history in ngspice, and fits.
fn recover(board: &BoardProfile, volts: f64, ohms: f64, farads: f64, seed: u64) -> Outcome {
    let planned = run(&scenario("ngspice plan", seed, board.clone(), vec![driven(0, volts, ohms, farads)]));
    let pin = &planned.pins[0];
    let mut model = planned.model.clone();
    // The precharge references as wired (the survey measured them through the simulated
    // converter's offset and gain; ngspice's converter has neither).
    model.precharge_volts.insert(PRECHARGE_LOW, 0.03 * board.vref_volts);
    model.precharge_volts.insert(PRECHARGE_HIGH, 0.97 * board.vref_volts);
    // The history the fit saw: everything before the order swap that follows the fit.
    let mut events: Vec<Event> =
        pin.events.iter().take_while(|e| !matches!(e.experiment, Experiment::OrderSwap { .. })).cloned().collect();
    for e in &mut events {
        e.coherent_var_lsb2.clear();
    }
    let (phases, recorded, end_s) = history_timeline(&model, &events, OVERHEAD_PS);

    let mut circuit = SpiceCircuit::one_pin(board, 0, volts, ohms, farads);
    circuit.hold_farads *= 1.0 + HOLD_SIGMAS * board.hold_tolerance / 2.0;
    circuit.switch_ohms *= 1.0 + SWITCH_SIGMAS * board.switch_tolerance / 2.0;
    let node0: Vec<f64> = circuit.channels.iter().map(|c| c.source.map_or(0.0, |s| s.0)).collect();
    let dir = scratch_dir("recovery");
    let spice = transient_chained(&circuit, &node0, board.vref_volts / 2.0, &phases, end_s, &dir, CHUNK)
        .unwrap_or_else(|e| panic!("{e}"));
    let _ = std::fs::remove_dir_all(&dir);

    // Quantize with converter noise and aggregate, as the firmware would.
    let mut noise = Gauss::new(0x5eed ^ seed);
    let max_code = f64::from((1u32 << board.bits) - 1);
    let mut cells: Vec<Vec<Aggregate>> = events
        .iter()
        .map(|e| {
            let n = e.cells.as_ref().map_or(0, Vec::len);
            vec![Aggregate::default(); n]
        })
        .collect();
    for (v, r) in spice.hold_volts.iter().zip(&recorded) {
        let x = volts_to_lsb(*v, board.vref_volts, board.bits) + board.adc_noise_lsb * noise.sample();
        if let Some((k, c)) = *r {
            if let Some(agg) = cells[k].get_mut(usize::from(c)) {
                agg.add(x.round().clamp(0.0, max_code) as u16);
            }
        }
    }
    for (e, aggs) in events.iter_mut().zip(&cells) {
        if e.cells.is_some() {
            e.cells = Some(aggs.iter().map(CellObs::from_aggregate).collect());
        }
    }
    let fit = fit_pin(&FitInput { board: &model, events: &events }).expect("enough cells to fit");
    Outcome {
        source_ohms: fit.source_ohms,
        node_farads: fit.node_farads,
        source_volts: fit.theta[ohmsight::fit::VS],
        conversions: phases.len(),
    }
}

/// Fits a list of (ohms, farads) on one board; prints the errors; checks the intervals hold the
/// truth and resolvable estimates are close.
fn check(board: BoardProfile, cases: &[(f64, f64)]) {
    println!(
        "{:>10} {:>9} {:>6}  {:>28} {:>8}  {:>28} {:>8} {:>6}",
        "Rs", "Cn", "conv", "Rs fit (95%)", "err", "Cn fit (95%)", "err", "s"
    );
    let mut failures = Vec::new();
    for (i, &(ohms, farads)) in cases.iter().enumerate() {
        let volts = 0.3 * board.vref_volts + 0.07 * i as f64;
        let started = std::time::Instant::now();
        let o = recover(&board, volts, ohms, farads, 40 + i as u64);
        let secs = started.elapsed().as_secs_f64();
        let err = |iv: &Interval, truth: f64| {
            iv.estimate.map_or("bound".to_string(), |e| format!("{:+.1}%", (e / truth - 1.0) * 100.0))
        };
        println!(
            "{:>10} {:>9} {:>6}  {:>28} {:>8}  {:>28} {:>8} {secs:>6.1}",
            units::ohms(ohms),
            units::farads(farads),
            o.conversions,
            show(&o.source_ohms),
            err(&o.source_ohms, ohms),
            ohmsight::render::text::interval_text(&o.node_farads, units::farads),
            err(&o.node_farads, farads),
        );
        let ctx = format!("{} / {}", units::ohms(ohms), units::farads(farads));
        if (o.source_volts - volts).abs() > 2e-3 {
            failures.push(format!("{ctx}: source {:.4} V, wired {volts:.4} V", o.source_volts));
        }
        if !covers(&o.source_ohms, ohms) {
            failures.push(format!("{ctx}: Rs interval {} misses the truth", show(&o.source_ohms)));
        }
        if !covers(&o.node_farads, farads) {
            failures.push(format!("{ctx}: Cn interval misses the truth"));
        }
        if resolvable(&board, ohms, farads) {
            match o.source_ohms.estimate {
                Some(e) if (e / ohms - 1.0).abs() <= 0.10 => {}
                _ => failures.push(format!("{ctx}: Rs {} not within 10%", show(&o.source_ohms))),
            }
        }
    }
    assert!(failures.is_empty(), "{failures:#?}");
}

#[test]
fn fit_recovers_ngspice_readings_on_the_default_board() {
    check(default_board(), &[(47e3, 15e-12), (470e3, 10e-12), (2.2e6, 25e-12), (1e3, 1e-9), (470e3, 100e-9)]);
}

#[test]
fn fit_recovers_ngspice_readings_on_the_fast_board() {
    check(fast_board(), &[(10e3, 10e-12), (100e3, 20e-12), (1e6, 10e-12), (3.3e3, 1e-9)]);
}
