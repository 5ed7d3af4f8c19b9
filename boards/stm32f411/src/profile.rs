//! What the STM32F411 board says about itself in the handshake: one source for the image and
//! for the host's tests, which compile this file for the host (tests/tests/boards) and check it
//! against `profile.toml`, where every value has its source and tolerance.
//!
//! Only `heapless`, `ohmsight-protocol` and `ohmsight-firmware` may be used here.

use heapless::Vec;
use ohmsight_firmware::BoardDescription;
use ohmsight_protocol::{ChannelRole, FrontEnd, Precharge};

#[path = "../../common/pin.rs"]
mod pin;
pub use pin::Pin;
use pin::{internal, label};

/// Board (profile) name in the hello.
pub const NAME: &str = "stm32f411";

/// ADC clock: PCLK2 divided by 4 (ADC_CCR.ADCPRE = 01): 96 MHz / 4, or 16 MHz / 4 in the QEMU
/// build.
pub const ADC_CLOCK_HZ: u64 = if cfg!(feature = "netduinoplus2") { 4_000_000 } else { 24_000_000 };
/// Selectable sample times, ADC cycles, in the order of the SMPx codes 0..7.
pub const SAMPLE_CYCLES: [u32; 8] = [3, 15, 28, 56, 84, 112, 144, 480];
/// Successive-approximation cycles after sampling at 12 bits.
pub const CONVERSION_CYCLES: u32 = 12;
/// Resolution.
pub const BITS: u8 = 12;
/// VDDA = VREF+ on the board (its 3.3 V regulator), µV.
pub const VREF_MICROVOLTS: u32 = 3_300_000;
/// Sampling capacitance C_ADC, aF, and its ±2σ tolerance, ppm.
pub const HOLD_ATTOFARADS: u32 = 4_000_000;
/// See [`HOLD_ATTOFARADS`].
pub const HOLD_TOLERANCE_PPM: u32 = 750_000;
/// Sampling-switch + multiplexer resistance R_ADC, mΩ, and its ±2σ tolerance, ppm.
pub const SWITCH_MILLIOHMS: u32 = 3_000_000;
/// See [`SWITCH_MILLIOHMS`].
pub const SWITCH_TOLERANCE_PPM: u32 = 1_000_000;
/// Converter noise referred to the input, milli-LSB rms.
pub const NOISE_MILLILSB: u32 = 1_000;
/// Input leakage bound, pA.
pub const LEAKAGE_PICOAMPS: u32 = 1_000_000;

/// The GPIO weak pull resistance, mΩ (reported only when a pin is opted in for pulls).
pub const PULL_MILLIOHMS: u32 = 40_000_000;
/// Its ±2σ tolerance, ppm (30–50 kΩ around 40 kΩ; see profile.toml).
pub const PULL_TOLERANCE_PPM: u32 = 250_000;

/// ADC1 channel of the internal reference VREFINT.
pub const VREFINT_CHANNEL: u8 = 17;
/// VREFINT, µV (the host measures the real level).
pub const VREFINT_MICROVOLTS: u32 = 1_210_000;
/// ADC1 channel of the temperature sensor on the F411 (shared with VBAT; see profile.toml).
pub const TEMPERATURE_CHANNEL: u8 = 18;

/// The board's ADC pins. PA0 (the KEY button), PA2/PA3 (USART2) and PA11/PA12 (USB) are left
/// out. No pin is opted in for pulls or driving: a user who has checked the wiring edits both
/// this table and profile.toml.
pub const PINS: [Pin; 7] = [
    Pin { channel: 1, name: "PA1", label: "PA1 (ADC1_IN1)", may_pull: false, may_drive: false },
    Pin { channel: 4, name: "PA4", label: "PA4 (ADC1_IN4)", may_pull: false, may_drive: false },
    Pin { channel: 5, name: "PA5", label: "PA5 (ADC1_IN5)", may_pull: false, may_drive: false },
    Pin { channel: 6, name: "PA6", label: "PA6 (ADC1_IN6)", may_pull: false, may_drive: false },
    Pin { channel: 7, name: "PA7", label: "PA7 (ADC1_IN7)", may_pull: false, may_drive: false },
    Pin { channel: 8, name: "PB0", label: "PB0 (ADC1_IN8)", may_pull: false, may_drive: false },
    Pin { channel: 9, name: "PB1", label: "PB1 (ADC1_IN9)", may_pull: false, may_drive: false },
];

// No pull test on this image. A pin the ADC reads is in analog mode, and in analog mode the
// GPIO's weak pull-up and pull-down are disconnected (RM0383, GPIO "analog configuration", from
// memory); pulling would mean leaving analog mode, which puts the input buffer on the node the
// survey measures. The front end keeps the default `set_pull`, which refuses, and no pin may be
// opted in.
const _: () = {
    let mut i = 0;
    while i < PINS.len() {
        assert!(!PINS[i].may_pull, "the F411's pulls are off in analog mode: this image has no pull test");
        i += 1;
    }
};

/// `cycles` ADC cycles in ps, rounded to the nearest.
pub const fn cycles_ps(cycles: u32) -> u32 {
    ((cycles as u64 * 1_000_000_000_000 + ADC_CLOCK_HZ / 2) / ADC_CLOCK_HZ) as u32
}

/// The description the firmware sends, for the unit `unit_id`.
pub fn description(unit_id: u64) -> BoardDescription {
    let mut sample_ps = Vec::new();
    for c in SAMPLE_CYCLES {
        let _ = sample_ps.push(cycles_ps(c));
    }
    let mut precharges = Vec::new();
    let _ = precharges.push(Precharge { channel: VREFINT_CHANNEL, nominal_microvolts: VREFINT_MICROVOLTS });
    let mut channels = Vec::new();
    for p in PINS {
        let _ = channels.push(p.info());
    }
    let _ = channels.push(internal(VREFINT_CHANNEL, "VREFINT (ADC1_IN17)", ChannelRole::Precharge));
    let _ = channels.push(internal(TEMPERATURE_CHANNEL, "temperature (IN18)", ChannelRole::Internal));
    BoardDescription {
        name: label(NAME),
        unit_id,
        front_end: FrontEnd {
            bits: BITS,
            vref_microvolts: VREF_MICROVOLTS,
            sample_ps,
            conversion_ps: cycles_ps(CONVERSION_CYCLES),
            hold_attofarads: HOLD_ATTOFARADS,
            hold_tolerance_ppm: HOLD_TOLERANCE_PPM,
            switch_milliohms: SWITCH_MILLIOHMS,
            switch_tolerance_ppm: SWITCH_TOLERANCE_PPM,
            noise_millilsb: NOISE_MILLILSB,
            leakage_picoamps: LEAKAGE_PICOAMPS,
            // Pulls are opt-in per pin: none opted in, no pull resistance to offer.
            pull_milliohms: if PINS.iter().any(|p| p.may_pull) { PULL_MILLIOHMS } else { 0 },
            pull_tolerance_ppm: PULL_TOLERANCE_PPM,
            // The weak pull-up goes to VDD, which this board ties to VDDA, the reference.
            pull_supply_microvolts: VREF_MICROVOLTS,
            precharges,
        },
        channels,
    }
}
