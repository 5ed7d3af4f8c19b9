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
    assert!(f.text > 4096 && f.bss > 1024, "the image holds the engine: {f:?}");
    let q = footprint(&qemu.elf).unwrap();
    assert!(q.float_routines > 0, "the simulated board's f64 helpers must be visible to the check: {q:?}");
}
