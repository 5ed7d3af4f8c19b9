//! A scenario surveyed on the QEMU board and in-process.

use ohmsight::link::{InProcessLink, SerialLink};
use ohmsight::session::Session;
use ohmsight::{survey, SurveyOptions, SurveyReport};
use ohmsight_tests::{covers, default_board, driven, floating, scenario, show};
use ohmsight_virtual::Scenario;
use xtask::qemu::Qemu;

/// Three pins: a moderate source, an open pin, and a large filter capacitor behind 1 MΩ.
fn three_pins() -> Scenario {
    scenario(
        "qemu three pins",
        5,
        default_board(),
        vec![driven(0, 1.3, 68e3, 12e-12), floating(1, 8e-12), driven(2, 2.5, 1e6, 10e-9)],
    )
}

/// Opens the board's UART like a user's host would.
pub fn session(device: &str) -> Session<SerialLink> {
    let link = SerialLink::open(device, 115_200).expect("opening the QEMU pseudo-terminal");
    let mut s = Session::new(link);
    s.link_bytes_per_s = 11_520;
    s
}

fn agree(qemu: &SurveyReport, local: &SurveyReport) {
    assert_eq!(qemu.pins.len(), local.pins.len());
    for (q, l) in qemu.pins.iter().zip(&local.pins) {
        assert_eq!(q.verdict, l.verdict, "ch{}: verdicts differ", q.channel);
        let pairs = [("Rs", &q.source_ohms, &l.source_ohms), ("Cn", &q.node_farads, &l.node_farads)];
        for (what, a, b) in pairs {
            // Each survey's estimate inside the other's 95% interval.
            for (x, iv, whose) in [(a.estimate, b, "QEMU"), (b.estimate, a, "in-process")] {
                if let Some(x) = x {
                    assert!(covers(iv, x), "ch{} {what}: {whose} estimate {x:e} outside {}", q.channel, show(iv));
                }
            }
        }
    }
}

#[test]
fn a_scenario_loaded_into_the_qemu_board_surveys_like_in_process() {
    let Some(image) = crate::image() else { return };
    let sc = three_pins();
    let qemu = Qemu::start(&image.elf).expect("starting qemu-system-arm");
    let t0 = std::time::Instant::now();
    let mut s = session(&qemu.device);
    s.load_scenario(&sc).expect("loading the scenario over the UART");
    let info = s.handshake(false).expect("handshake with the QEMU board");
    assert_eq!(info.name, "qemu-m4");
    let remote = survey(&mut s, &SurveyOptions::default()).expect("survey over the QEMU UART");
    eprintln!(
        "QEMU survey: {:.1} s wall, {} conversions, {} bytes back, {} bad frames",
        t0.elapsed().as_secs_f64(),
        remote.link.conversions,
        remote.link.bytes_received,
        remote.link.bad_frames
    );
    let t1 = std::time::Instant::now();
    let local = survey(&mut Session::new(InProcessLink::new(&sc)), &SurveyOptions::default()).unwrap();
    eprintln!("in-process survey: {:.1} s wall", t1.elapsed().as_secs_f64());
    assert_eq!(remote.link.bad_frames, 0);
    assert_eq!(remote.link.conversions, local.link.conversions, "the same plan ran");
    agree(&remote, &local);
    let exact = remote.pins.iter().zip(&local.pins).all(|(a, b)| a.source_ohms == b.source_ohms);
    eprintln!("estimates bit-identical to the in-process survey: {exact}");
    // The stack reserve in the footprint table must hold what a whole survey used.
    let reserve = xtask::firmware::footprint(&image.elf).unwrap().stack_reserve;
    let stack = qemu.stack_use(&image.elf, 4 * reserve).expect("reading the stack through QEMU's monitor");
    eprintln!("qemu-m4 stack used by the survey: {} of {} bytes reserved", stack.used, reserve);
    assert!(stack.used > 1024 && stack.used <= reserve, "stack {stack:?} against a reserve of {reserve} bytes");
}

#[test]
fn loading_over_the_in_process_link_equals_building_the_board_for_the_scenario() {
    // The same check without QEMU: the set-up message alone (parts, rounding, rewiring, clock
    // restart) must leave nothing of the board it replaced. One pin keeps it quick.
    let sc = scenario("one pin", 8, default_board(), vec![driven(3, 0.9, 22e3, 15e-12)]);
    let mut s =
        Session::new(InProcessLink::new(&scenario("something else", 1, default_board(), vec![floating(4, 5e-12)])));
    s.load_scenario(&sc).unwrap();
    let loaded = survey(&mut s, &SurveyOptions::default()).unwrap();
    let built = survey(&mut Session::new(InProcessLink::new(&sc)), &SurveyOptions::default()).unwrap();
    assert_eq!(loaded.link.conversions, built.link.conversions);
    for (a, b) in loaded.pins.iter().zip(&built.pins) {
        assert_eq!((a.channel, a.verdict, &a.source_ohms), (b.channel, b.verdict, &b.source_ohms));
    }
}
