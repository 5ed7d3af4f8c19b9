//! ohmsight firmware for QEMU's `mps2-an386` machine (Cortex-M4F): the real experiment engine
//! on a Cortex-M, the simulated board as its analog front end, and the emulated CMSDK UART0 as
//! the link. The host loads a scenario over the link (`Request::Simulate`), so one image serves
//! every scenario; until then the board is wired with one stiff source on channel 0.
#![no_std]
#![no_main]

use cortex_m_rt::entry;
use ohmsight_cmsdk_uart::CmsdkUart;
use ohmsight_firmware::Engine;
use ohmsight_virtual::{BoardProfile, PinSetup, Scenario, Source, VirtualBoard, VirtualClock, VirtualDelay};

/// UART0 of the MPS2 FPGA images (AN385/AN386 memory map).
const UART0_BASE: usize = 0x4000_4000;
/// The peripheral clock of the MPS2 FPGA images.
const PCLK_HZ: u32 = 25_000_000;
const BAUD: u32 = 115_200;

/// The set-up the board has before the host loads one.
fn boot_scenario() -> Scenario {
    let mut pins = heapless::Vec::new();
    let _ = pins.push(PinSetup {
        channel: 0,
        label: heapless::String::try_from("load a scenario").unwrap_or_default(),
        source: Source::Driven { volts: 1.65, ohms: 1e3 },
        node_farads: 10e-12,
        hum_volts: 0.0,
        hum_hz: 50.0,
        noise_volts: 0.0,
        pull: false,
    });
    Scenario {
        name: heapless::String::try_from("qemu-m4 at boot").unwrap_or_default(),
        seed: 1,
        board: BoardProfile::default(),
        pins,
    }
}

#[entry]
fn main() -> ! {
    // SAFETY: UART0 is the only user of that address; nothing else in this image touches it.
    let mut uart = unsafe { CmsdkUart::new(UART0_BASE, PCLK_HZ, BAUD) };
    let clock = VirtualClock::new();
    let board = VirtualBoard::new(&boot_scenario(), &clock).named("qemu-m4");
    let description = board.description();
    let mut engine = Engine::new(board, VirtualDelay(&clock), description);
    engine.serve(&mut uart)
}

#[panic_handler]
fn panic(_: &core::panic::PanicInfo) -> ! {
    // Nothing here should panic (the engine answers bad input with error records); if it does,
    // stop answering rather than answer wrongly.
    loop {
        core::hint::spin_loop();
    }
}
