//! Hold-capacitor voltages at the end of every sampling phase: `protocol::analog` against an
//! ngspice transient of the same network and the same timeline.

use ohmsight::model::{BoardModel, Event};
use ohmsight_protocol::analog::{volts_to_lsb, Network, State};
use ohmsight_protocol::Experiment;
use ohmsight_tests::spice::{history_timeline, scratch_dir, transient, Sampling, SpiceCircuit};
use ohmsight_tests::{default_board, fast_board, scenario};
use ohmsight_virtual::{BoardProfile, VirtualBoard, VirtualClock, PRECHARGE_HIGH, PRECHARGE_LOW};

/// The largest disagreement allowed, LSB (the target).
const TOLERANCE_LSB: f64 = 0.05;

/// The pin under test.
const PIN: u8 = 0;

/// The board's nominal front end, as the firmware describes it.
fn model_of(board: &BoardProfile) -> BoardModel {
    let s = scenario("spice", 1, board.clone(), vec![ohmsight_tests::driven(PIN, 1.0, 1e3, 1e-12)]);
    let vb = VirtualBoard::new(&s, std::rc::Rc::new(VirtualClock::new()));
    BoardModel::from_front_end(&vb.description().front_end)
}

/// Three experiments back to back, as a survey runs them on one pin: every sample time from
/// both precharges, a period sweep from microseconds to a millisecond, a repeat burst.
fn experiments(model: &BoardModel) -> Vec<Experiment> {
    let n = model.sample_ps.len() as u8;
    let longest = n - 1;
    let pair_ns = (2 * model.timing().busy_ps(longest) / 1000) as u32;
    vec![
        Experiment::PrechargeSweep {
            target: PIN,
            precharges: heapless::Vec::from_slice(&[PRECHARGE_LOW, PRECHARGE_HIGH]).unwrap(),
            precharge_sample: longest,
            samples: (0..n).collect(),
            repeats: 2,
            rest_ns: 0,
            settle_ns: 0,
        },
        Experiment::PeriodSweep {
            target: PIN,
            precharge: PRECHARGE_HIGH,
            precharge_sample: longest,
            sample: 0,
            periods_ns: heapless::Vec::from_slice(&[pair_ns, 10 * pair_ns, 1_000_000]).unwrap(),
            repeats: 3,
            settle_ns: 5_000,
        },
        Experiment::RepeatBurst {
            target: PIN,
            precharge: PRECHARGE_LOW,
            precharge_sample: longest,
            sample: 0,
            length: 6,
            repeats: 2,
            rest_ns: 20_000,
            settle_ns: 0,
        },
    ]
}

/// The same timeline in closed form: each channel's node moves on its own while its switch is
/// open; a sampling phase is the exact two-state map.
fn closed_form(circuit: &SpiceCircuit, node0: &[f64], hold0: f64, phases: &[Sampling]) -> Vec<f64> {
    let nets: Vec<Network> = circuit
        .channels
        .iter()
        .map(|c| Network {
            source_volts: c.source.map_or(0.0, |s| s.0),
            source_ohms: c.source.map_or(f64::INFINITY, |s| s.1),
            node_farads: c.node_farads,
            switch_ohms: circuit.switch_ohms,
            hold_farads: circuit.hold_farads,
            leak_amps: 0.0,
        })
        .collect();
    let mut node: Vec<(f64, f64)> = node0.iter().map(|&v| (v, 0.0)).collect(); // (volts, since s)
    let mut hold = hold0;
    let mut out = Vec::new();
    for p in phases {
        let k = circuit.channels.iter().position(|c| c.channel == p.channel).expect("a known channel");
        let (v, since) = node[k];
        let v = nets[k].open(p.start_s - since).apply(State { node_volts: v, hold_volts: hold }).node_volts;
        let s = nets[k].sampling(p.sample_s).apply(State { node_volts: v, hold_volts: hold });
        hold = s.hold_volts;
        node[k] = (s.node_volts, p.start_s + p.sample_s);
        out.push(hold);
    }
    out
}

/// Largest |ngspice − closed form| over the grid, LSB, with the worst case named.
fn worst_over_grid(board: &BoardProfile) -> (f64, String, usize) {
    let model = model_of(board);
    let events: Vec<Event> = experiments(&model)
        .into_iter()
        .map(|experiment| Event {
            experiment,
            target: PIN,
            gap_before_ps: 0,
            cells: None,
            coherent_var_lsb2: Vec::new(),
            clock: None,
            hum: None,
            hum_at_steps: None,
        })
        .collect();
    let (phases, _, end_s) = history_timeline(&model, &events, 0);
    let dir = scratch_dir("agreement");
    let volts = 0.37 * board.vref_volts;
    let mut worst = (0.0, String::new(), 0);
    let mut span = (f64::INFINITY, f64::NEG_INFINITY);
    for ohms in [100.0, 1e3, 10e3, 100e3, 1e6, 10e6] {
        for farads in [2e-12, 20e-12, 1e-9, 100e-9] {
            let c = SpiceCircuit::one_pin(board, PIN, volts, ohms, farads);
            let node0 = [volts, 0.03 * board.vref_volts, 0.97 * board.vref_volts];
            let hold0 = board.vref_volts / 2.0;
            let spice = transient(&c, &node0, hold0, &phases, end_s, &dir).unwrap_or_else(|e| panic!("{e}"));
            let exact = closed_form(&c, &node0, hold0, &phases);
            assert_eq!(spice.hold_volts.len(), exact.len());
            for (i, (s, e)) in spice.hold_volts.iter().zip(&exact).enumerate() {
                if phases[i].channel == PIN {
                    span.0 = span.0.min(*e);
                    span.1 = span.1.max(*e);
                }
                let d = volts_to_lsb((s - e).abs(), board.vref_volts, board.bits);
                if d > worst.0 {
                    worst = (d, format!("Rs {ohms:e} Ω, Cn {farads:e} F, phase {i} ({:?})", phases[i]), spice.points);
                }
            }
        }
    }
    let _ = std::fs::remove_dir_all(&dir);
    // The check must see the network at work: the pin's readings cover most of the range
    // between the precharges, unsettled ones included.
    assert!(span.1 - span.0 > 0.5 * board.vref_volts, "readings span only {span:?} V");
    worst
}

#[test]
fn closed_form_agrees_with_ngspice_on_the_default_board() {
    let (d, at, _) = worst_over_grid(&default_board());
    eprintln!("default board: worst disagreement {d:.4} LSB at {at}");
    assert!(d <= TOLERANCE_LSB, "{d:.4} LSB at {at}");
}

#[test]
fn closed_form_agrees_with_ngspice_on_the_fast_board() {
    let (d, at, _) = worst_over_grid(&fast_board());
    eprintln!("fast board: worst disagreement {d:.4} LSB at {at}");
    assert!(d <= TOLERANCE_LSB, "{d:.4} LSB at {at}");
}
