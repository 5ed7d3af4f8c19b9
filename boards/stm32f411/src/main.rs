//! ohmsight firmware for STM32F411 boards ("Black Pill" style: STM32F411CE, 25 MHz crystal,
//! USB on PA11/PA12). The experiment engine drives ADC1 at register level, one conversion at a
//! time with its own sample time; the board's clock is TIM2 in microseconds. The link is USB
//! CDC, or USART2 (PA2 TX, PA3 RX, 115200 8N1) with the `usart2` feature. The `netduinoplus2`
//! feature builds the image QEMU's model of that board runs (see Cargo.toml).
#![no_std]
#![no_main]

mod adc;
#[cfg(not(feature = "usart2"))]
#[path = "../../common/cdc.rs"]
mod cdc;
#[path = "../../common/cycle_delay.rs"]
mod cycle_delay;
#[path = "../../common/halt.rs"]
mod halt;
mod profile;
#[path = "../../common/reg.rs"]
mod reg;
#[path = "../../common/timed.rs"]
mod timed;
mod timing;
#[cfg(feature = "usart2")]
mod usart;
#[cfg(not(feature = "usart2"))]
mod usb;

#[cfg(feature = "defmt")]
use defmt_rtt as _;

use adc::Adc1;
use cortex_m_rt::entry;
use cycle_delay::CycleDelay;
use ohmsight_firmware::Engine;
use profile::PINS;
use stm32f4xx_hal::pac;
use timed::Timed;
use timing::Tim2Micros;

/// The 96-bit unique device id (RM0383 "Device electronic signature": 0x1FFF_7A10), folded to 64
/// bits.
fn unit_id() -> u64 {
    if cfg!(feature = "netduinoplus2") {
        return 0;
    }
    // SAFETY: the unique-id words are read-only system memory, always readable.
    let w = unsafe { [reg::read(0x1fff_7a10), reg::read(0x1fff_7a14), reg::read(0x1fff_7a18)] };
    (u64::from(w[1]) << 32 | u64::from(w[0])) ^ u64::from(w[2]).rotate_left(16)
}

/// Puts the board's ADC pins in analog mode (no pull, input buffer off).
fn analog_pins() {
    const RCC_AHB1ENR: usize = 0x4002_3830;
    const GPIOA_MODER: usize = 0x4002_0000;
    const GPIOB_MODER: usize = 0x4002_0400;
    // SAFETY: the listed pins belong to the ADC in this image; the other bits are kept.
    unsafe {
        reg::modify(RCC_AHB1ENR, |v| v | 0b11);
        let _ = reg::read(RCC_AHB1ENR);
        for pin in PINS {
            let (port, n) = match pin.name.as_bytes() {
                [b'P', b'A', d] => (GPIOA_MODER, u32::from(d - b'0')),
                [b'P', b'B', d] => (GPIOB_MODER, u32::from(d - b'0')),
                _ => continue,
            };
            reg::modify(port, |v| v | 0b11 << (2 * n));
        }
    }
}

#[entry]
fn main() -> ! {
    let (Some(cp), Some(dp)) = (cortex_m::Peripherals::take(), pac::Peripherals::take()) else {
        panic!("peripherals taken twice");
    };

    #[cfg(not(feature = "netduinoplus2"))]
    let (core_hz, timer_hz, pclk1_hz, rcc) = {
        use stm32f4xx_hal::prelude::*;
        use stm32f4xx_hal::rcc::Config;
        // 25 MHz crystal → PLL: 96 MHz core and PCLK2 (ADC1 at PCLK2/4 = 24 MHz, as the profile
        // says), 48 MHz PCLK1 and USB.
        let rcc = dp.RCC.freeze(
            Config::hse(25.MHz()).sysclk(96.MHz()).hclk(96.MHz()).pclk1(48.MHz()).pclk2(96.MHz()).require_pll48clk(),
        );
        let c = &rcc.clocks;
        assert!(u64::from(c.pclk2().raw()) == 4 * profile::ADC_CLOCK_HZ, "PCLK2 must be 4 × the profile's ADC clock");
        (c.sysclk().raw(), c.timclk1().raw(), c.pclk1().raw(), rcc)
    };
    // Reset state: HSI 16 MHz for the core and both buses.
    #[cfg(feature = "netduinoplus2")]
    let (core_hz, timer_hz, pclk1_hz) = (16_000_000u32, 16_000_000u32, 16_000_000u32);
    #[cfg(feature = "netduinoplus2")]
    drop(dp);
    #[cfg(all(feature = "usart2", not(feature = "netduinoplus2")))]
    drop(rcc);

    let id = unit_id();
    #[cfg(feature = "defmt")]
    defmt::info!("ohmsight stm32f411, unit {=u64:016x}, core {=u32} Hz", id, core_hz);

    #[cfg(feature = "usart2")]
    // SAFETY: USART2, PA2 and PA3 are used by nothing else in this image.
    let mut link = unsafe { usart::Usart2::new(pclk1_hz, 115_200) };
    #[cfg(not(feature = "usart2"))]
    let mut link = {
        use stm32f4xx_hal::gpio::GpioExt;
        let (_, mut rcc) = (pclk1_hz, rcc);
        static mut SERIAL: [u8; 16] = [0; 16];
        // SAFETY: main runs once; nothing else names SERIAL.
        let serial = cdc::hex_id(id, unsafe { &mut *core::ptr::addr_of_mut!(SERIAL) });
        let gpioa = dp.GPIOA.split(&mut rcc);
        let usb = stm32f4xx_hal::otg_fs::USB::new(
            (dp.OTG_FS_GLOBAL, dp.OTG_FS_DEVICE, dp.OTG_FS_PWRCLK),
            (gpioa.pa11, gpioa.pa12),
            &rcc.clocks,
        );
        usb::UsbLink::start(usb, serial)
    };

    analog_pins();
    // SAFETY: ADC1 and TIM2 are used by nothing else in this image.
    let (adc, clock) = unsafe { (Adc1::new(), Tim2Micros::start(timer_hz)) };
    // QEMU models no cycle counter.
    #[cfg(feature = "netduinoplus2")]
    let delay = {
        drop(cp);
        CycleDelay::spinning(core_hz)
    };
    #[cfg(not(feature = "netduinoplus2"))]
    let delay = {
        let mut cp = cp;
        CycleDelay::new(&mut cp.DCB, &mut cp.DWT, core_hz)
    };
    let mut engine = Engine::new(Timed::new(adc, clock), delay, profile::description(id));
    engine.serve(&mut link)
}
