//! The target-side engine and protocol carry no floating point: the stub image (engine +
//! protocol + a stub front end) built for thumbv6m-none-eabi, where every float operation
//! would need a run-time helper, links none; the QEMU image, whose simulated board computes in
//! f64, links many (so the check can see them).

use xtask::firmware::{build_for, footprint, pick_route};

#[test]
fn the_engine_and_protocol_link_no_floating_point_on_a_cortex_m0() {
    let Some(qemu) = crate::image() else { return };
    if let Err(e) = pick_route("thumbv6m-none-eabi") {
        assert!(std::env::var_os("CI").is_none(), "CI must build for thumbv6m-none-eabi: {e}");
        eprintln!("SKIPPING the footprint check on this machine: {e}");
        return;
    }
    let stub = build_for("stub-m0", Some("thumbv6m-none-eabi")).expect("building the stub image");
    let f = footprint(&stub.elf).unwrap();
    eprintln!("stub-m0 on thumbv6m: flash {} B, RAM {} B (stack reserve {} B)", f.flash(), f.ram(), f.stack_reserve);
    assert_eq!(f.float_routines, 0, "the engine or protocol pulled in floating point");
    assert!(f.text > 8192, "the image holds the engine and protocol: {f:?}");
    let q = footprint(&qemu.elf).unwrap();
    assert!(q.float_routines > 0, "the simulated board's f64 helpers must be visible to the check: {q:?}");
}

/// Every request the engine serves, at its largest, so the deepest call chains run.
fn exercise(device: &str) {
    use ohmsight_protocol::Experiment;
    use std::time::Duration;
    let mut s = crate::board::session(device);
    let info = s.handshake(false).expect("handshake with the stub image");
    assert_eq!(info.name, "stub-m0");
    let runs = [
        Experiment::PrechargeSweep {
            target: 0,
            precharges: heapless::Vec::from_slice(&[16]).unwrap(),
            precharge_sample: 2,
            samples: heapless::Vec::from_slice(&[0, 1, 2]).unwrap(),
            repeats: 2,
            rest_ns: 100,
            settle_ns: 100,
        },
        Experiment::OrderSwap { a: 0, b: 1, sample: 1, repeats: 4, rest_ns: 100, settle_ns: 100 },
        Experiment::RepeatBurst {
            target: 1,
            precharge: 16,
            precharge_sample: 2,
            sample: 0,
            length: 32,
            repeats: 2,
            rest_ns: 100,
            settle_ns: 100,
        },
        Experiment::PeriodSweep {
            target: 0,
            precharge: 16,
            precharge_sample: 2,
            sample: 0,
            periods_ns: heapless::Vec::from_slice(&[1_000; 12]).unwrap(),
            repeats: 2,
            settle_ns: 100,
        },
        Experiment::NoiseRecord { target: 0, sample: 0, period_ns: 2_000, count: 1024, settle_ns: 100 },
    ];
    for e in &runs {
        let r = s.run(e, Duration::from_millis(200)).unwrap_or_else(|err| panic!("{}: {err}", e.name()));
        assert!(r.report.conversions > 0);
    }
    let mut bad =
        ohmsight_tests::scenario("x", 1, ohmsight_tests::default_board(), vec![ohmsight_tests::floating(0, 5e-12)]);
    bad.name.clear();
    assert!(s.load_scenario(&bad).is_err(), "a real front end refuses set-ups");
}

#[test]
fn the_stub_images_stack_reserve_holds_every_request() {
    // The stub built for the M4 runs on the same emulated board (same UART, memory that fits):
    // its stack use stands for the M0 build's, whose code is the same.
    if crate::image().is_none() {
        return;
    }
    let stub = build_for("stub-m0", Some("thumbv7em-none-eabihf")).expect("building the stub image for the M4");
    let reserve = footprint(&stub.elf).unwrap().stack_reserve;
    let qemu = xtask::qemu::Qemu::start(&stub.elf).expect("starting qemu-system-arm");
    exercise(&qemu.device);
    let stack = qemu.stack_use(&stub.elf, 4 * reserve).expect("reading the stack through QEMU's monitor");
    eprintln!("stub-m0 stack used: {} of {} bytes reserved", stack.used, reserve);
    assert!(stack.used > 256 && stack.used <= reserve, "stack {stack:?} against a reserve of {reserve} bytes");
}
