//! ohmsight firmware for nRF52840 boards (the USB dongle or a development kit). The experiment
//! engine drives the SAADC at register level, one conversion at a time with its own acquisition
//! time (and, for pull tests, its own ladder setting); the board's clock is TIMER0 in
//! microseconds; the link is USB CDC.
#![no_std]
#![no_main]

#[path = "../../common/cdc.rs"]
mod cdc;
#[path = "../../common/cycle_delay.rs"]
mod cycle_delay;
#[path = "../../common/halt.rs"]
mod halt;
mod profile;
#[path = "../../common/reg.rs"]
mod reg;
mod saadc;
#[path = "../../common/timed.rs"]
mod timed;
mod usb;

#[cfg(feature = "defmt")]
use defmt_rtt as _;

use cortex_m_rt::entry;
use cycle_delay::CycleDelay;
use nrf52840_hal::clocks::{Clocks, ExternalOscillator, Internal, LfOscStopped};
use nrf52840_hal::pac;
use nrf52840_hal::usbd::{UsbPeripheral, Usbd};
use ohmsight_firmware::Engine;
use saadc::Saadc;
use timed::{MicrosCounter, Timed};
use usb_device::bus::UsbBusAllocator;

/// The core clock (HFCLK), Hz.
const CORE_HZ: u32 = 64_000_000;

const TIMER0: usize = 0x4000_8000;
const TIMER0_TASKS_START: usize = TIMER0;
const TIMER0_TASKS_CAPTURE0: usize = TIMER0 + 0x040;
const TIMER0_MODE: usize = TIMER0 + 0x504;
const TIMER0_BITMODE: usize = TIMER0 + 0x508;
const TIMER0_PRESCALER: usize = TIMER0 + 0x510;
const TIMER0_CC0: usize = TIMER0 + 0x540;

/// TIMER0 at 1 MHz, 32 bits.
struct Timer0Micros {
    _private: (),
}

impl Timer0Micros {
    /// # Safety
    /// TIMER0 must not be used by anything else.
    unsafe fn start() -> Self {
        // SAFETY: TIMER0 is ours (caller's promise). 16 MHz / 2^4 = 1 MHz, 32-bit timer mode.
        unsafe {
            reg::write(TIMER0_MODE, 0);
            reg::write(TIMER0_BITMODE, 3);
            reg::write(TIMER0_PRESCALER, 4);
            reg::write(TIMER0_TASKS_START, 1);
        }
        Timer0Micros { _private: () }
    }
}

impl MicrosCounter for Timer0Micros {
    fn now(&mut self) -> u32 {
        // SAFETY: TIMER0 is ours (see `start`).
        unsafe {
            reg::write(TIMER0_TASKS_CAPTURE0, 1);
            reg::read(TIMER0_CC0)
        }
    }
}

/// The 64-bit device id (FICR.DEVICEID[0..1]).
fn unit_id() -> u64 {
    // SAFETY: FICR is read-only factory information, always readable.
    let w = unsafe { [reg::read(0x1000_0060), reg::read(0x1000_0064)] };
    u64::from(w[1]) << 32 | u64::from(w[0])
}

type UsbClocks = Clocks<ExternalOscillator, Internal, LfOscStopped>;

#[entry]
fn main() -> ! {
    static mut CLOCKS: Option<UsbClocks> = None;
    static mut BUS: Option<UsbBusAllocator<Usbd<UsbPeripheral<'static>>>> = None;
    static mut SERIAL: [u8; 16] = [0; 16];
    static mut RESULT: i16 = 0;

    let (Some(cp), Some(p)) = (cortex_m::Peripherals::take(), pac::Peripherals::take()) else {
        panic!("peripherals taken twice");
    };
    let mut cp = cp;
    let id = unit_id();
    #[cfg(feature = "defmt")]
    defmt::info!("ohmsight nrf52840, unit {=u64:016x}", id);

    // USB needs the crystal oscillator (HFXO).
    let clocks: &'static UsbClocks = CLOCKS.insert(Clocks::new(p.CLOCK).enable_ext_hfosc());
    let bus: &'static _ = BUS.insert(UsbBusAllocator::new(Usbd::new(UsbPeripheral::new(p.USBD, clocks))));
    let mut link = usb::UsbLink::new(bus, cdc::hex_id(id, SERIAL));

    // SAFETY: the SAADC and TIMER0 are used by nothing else in this image.
    let (adc, clock) = unsafe { (Saadc::new(RESULT), Timer0Micros::start()) };
    let delay = CycleDelay::new(&mut cp.DCB, &mut cp.DWT, CORE_HZ);
    let mut engine = Engine::new(Timed::new(adc, clock), delay, profile::description(id));
    engine.serve(&mut link)
}
