//! The smallest ohmsight image: the experiment engine and the wire protocol, with a stub
//! front end (codes from a counter) and a CMSDK UART link. It exists to measure what the engine
//! and protocol cost in flash and RAM (`cargo xtask size`); it is never flashed.
#![no_std]
#![no_main]

use cortex_m_rt::entry;
use embedded_hal::delay::DelayNs;
use heapless::{String, Vec};
use ohmsight_cmsdk_uart::CmsdkUart;
use ohmsight_firmware::{AnalogFrontEnd, BoardDescription, Engine};
use ohmsight_protocol::{ChannelInfo, ChannelRole, FrontEnd, Precharge};

/// A converter that returns a changing code: enough to keep every engine path alive.
struct StubAdc {
    code: u16,
}

impl AnalogFrontEnd for StubAdc {
    type Error = core::convert::Infallible;
    fn convert(&mut self, channel: u8, sample: u8) -> Result<u16, Self::Error> {
        self.code = self.code.wrapping_mul(75).wrapping_add(u16::from(channel) << 4 | u16::from(sample)) & 0x0fff;
        Ok(self.code)
    }
}

/// Busy-wait delay (about one loop per nanosecond × 1/8 at a few tens of MHz: a stand-in).
struct SpinDelay;

impl DelayNs for SpinDelay {
    fn delay_ns(&mut self, ns: u32) {
        for _ in 0..ns / 8 {
            core::hint::spin_loop();
        }
    }
}

fn board() -> BoardDescription {
    let mut channels = Vec::new();
    for (channel, role) in [(0, ChannelRole::Pin), (1, ChannelRole::Pin), (16, ChannelRole::Precharge)] {
        let _ = channels.push(ChannelInfo {
            channel,
            label: String::try_from("stub").unwrap_or_default(),
            role,
            pull: false,
            drive: false,
        });
    }
    BoardDescription {
        name: String::try_from("stub-m0").unwrap_or_default(),
        unit_id: 0,
        front_end: FrontEnd {
            bits: 12,
            vref_microvolts: 3_300_000,
            sample_ps: Vec::from_slice(&[142_857, 714_286, 22_857_143]).unwrap_or_default(),
            conversion_ps: 571_429,
            hold_attofarads: 4_000_000,
            hold_tolerance_ppm: 50_000,
            switch_milliohms: 6_000_000,
            switch_tolerance_ppm: 100_000,
            noise_millilsb: 500,
            leakage_picoamps: 10,
            pull_milliohms: 0,
            pull_tolerance_ppm: 0,
            pull_supply_microvolts: 0,
            precharges: Vec::from_slice(&[Precharge { channel: 16, nominal_microvolts: 99_000 }]).unwrap_or_default(),
        },
        channels,
    }
}

#[entry]
fn main() -> ! {
    // SAFETY: a CMSDK UART at the MPS2 UART0 address stands for the board's UART; nothing else
    // drives it.
    let mut uart = unsafe { CmsdkUart::new(0x4000_4000, 25_000_000, 115_200) };
    let mut engine = Engine::new(StubAdc { code: 0 }, SpinDelay, board());
    engine.serve(&mut uart)
}

#[panic_handler]
fn panic(_: &core::panic::PanicInfo) -> ! {
    loop {
        core::hint::spin_loop();
    }
}
