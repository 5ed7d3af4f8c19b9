//! The firmware on a Cortex-M: the `qemu-m4` image (the real engine and the simulated board,
//! built for thumbv7em-none-eabihf) under `qemu-system-arm -machine mps2-an386`, talked to over
//! the emulated UART0 on a pseudo-terminal. The survey of a scenario loaded over that link must
//! agree with the in-process survey of the same scenario.
//!
//! Needs `qemu-system-arm` and a tool-chain for thumbv7em-none-eabihf (a rustup target, or
//! Debian's `rustc-web rust-web-src cargo-web lld`). In CI (`CI` set) a missing tool fails the
//! test; elsewhere the test says what to install and passes without running.

mod board;
mod footprint;
mod link;
mod netduino;

use std::sync::OnceLock;
use xtask::firmware::Image;

/// The image, built once per test run (inside the run's target directory).
pub fn image() -> Option<&'static Image> {
    static IMAGE: OnceLock<Option<Image>> = OnceLock::new();
    IMAGE
        .get_or_init(|| {
            let missing = missing_tools();
            if let Some(what) = missing {
                assert!(std::env::var_os("CI").is_none(), "CI must have the QEMU tools: {what}");
                eprintln!("SKIPPING the QEMU tests on this machine: {what}");
                return None;
            }
            let t0 = std::time::Instant::now();
            let image = xtask::firmware::build("qemu-m4").expect("building the qemu-m4 image");
            eprintln!("built {} in {:.1} s", image.elf.display(), t0.elapsed().as_secs_f64());
            Some(image)
        })
        .as_ref()
}

fn missing_tools() -> Option<String> {
    let on_path = |name: &str| {
        std::env::var_os("PATH").is_some_and(|p| std::env::split_paths(&p).any(|d| d.join(name).is_file()))
    };
    if !on_path(xtask::qemu::QEMU) {
        return Some(xtask::qemu::install_hint().to_string());
    }
    match xtask::firmware::pick_route("thumbv7em-none-eabihf") {
        Ok(_) => None,
        Err(e) => Some(e.to_string()),
    }
}
