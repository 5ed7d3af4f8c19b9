//! What the nRF52840 board says about itself in the handshake: one source for the image and
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
pub const NAME: &str = "nrf52840";

/// Selectable acquisition times (CH[n].CONFIG.TACQ codes 0..5), µs.
pub const TACQ_MICROS: [u32; 6] = [3, 5, 10, 15, 20, 40];
/// Conversion time after acquisition, ps (t_CONV, upper bound).
pub const CONVERSION_PS: u32 = 2_000_000;
/// Resolution (RESOLUTION = 12 bit).
pub const BITS: u8 = 12;
/// Full scale: the internal 0.6 V reference over gain 1/6, µV.
pub const VREF_MICROVOLTS: u32 = 3_600_000;
/// Sampling capacitance C_SAMPLE, aF, and its ±2σ tolerance, ppm.
pub const HOLD_ATTOFARADS: u32 = 2_500_000;
/// See [`HOLD_ATTOFARADS`].
pub const HOLD_TOLERANCE_PPM: u32 = 200_000;
/// Input switch resistance, mΩ (no published value: an estimate), and its tolerance, ppm.
pub const SWITCH_MILLIOHMS: u32 = 2_000_000;
/// See [`SWITCH_MILLIOHMS`].
pub const SWITCH_TOLERANCE_PPM: u32 = 1_000_000;
/// Converter noise referred to the input, milli-LSB rms.
pub const NOISE_MILLILSB: u32 = 1_500;
/// Input leakage bound, pA.
pub const LEAKAGE_PICOAMPS: u32 = 1_000_000;
/// The SAADC's resistor ladder (RESP pull-up, pull-down, VDD/2), mΩ.
pub const LADDER_MILLIOHMS: u32 = 160_000_000;
/// Its ±2σ tolerance, ppm (±20% as quoted; see profile.toml).
pub const LADDER_TOLERANCE_PPM: u32 = 200_000;

/// The channel number of the internal VDD input (its PSELP code).
pub const VDD_CHANNEL: u8 = 9;
/// VDD, µV: 3.0 V on the development kit and the dongle (the host measures the real level).
pub const VDD_MICROVOLTS: u32 = 3_000_000;
/// The channel number of VDDH/5 (its PSELP code); valid only with TACQ ≥ 10 µs.
pub const VDDHDIV5_CHANNEL: u8 = 13;

/// AIN0..AIN7. No pin is opted in for the ladder or driving: a user who has checked the wiring
/// edits both this table and profile.toml.
pub const PINS: [Pin; 8] = [
    Pin { channel: 0, name: "P0.02", label: "AIN0 (P0.02)", may_pull: false, may_drive: false },
    Pin { channel: 1, name: "P0.03", label: "AIN1 (P0.03)", may_pull: false, may_drive: false },
    Pin { channel: 2, name: "P0.04", label: "AIN2 (P0.04)", may_pull: false, may_drive: false },
    Pin { channel: 3, name: "P0.05", label: "AIN3 (P0.05)", may_pull: false, may_drive: false },
    Pin { channel: 4, name: "P0.28", label: "AIN4 (P0.28)", may_pull: false, may_drive: false },
    Pin { channel: 5, name: "P0.29", label: "AIN5 (P0.29)", may_pull: false, may_drive: false },
    Pin { channel: 6, name: "P0.30", label: "AIN6 (P0.30)", may_pull: false, may_drive: false },
    Pin { channel: 7, name: "P0.31", label: "AIN7 (P0.31)", may_pull: false, may_drive: false },
];

/// The description the firmware sends, for the unit `unit_id`.
pub fn description(unit_id: u64) -> BoardDescription {
    let mut sample_ps = Vec::new();
    for us in TACQ_MICROS {
        let _ = sample_ps.push(us * 1_000_000);
    }
    let mut precharges = Vec::new();
    let _ = precharges.push(Precharge { channel: VDD_CHANNEL, nominal_microvolts: VDD_MICROVOLTS });
    let mut channels = Vec::new();
    for p in PINS {
        let _ = channels.push(p.info());
    }
    let _ = channels.push(internal(VDD_CHANNEL, "VDD", ChannelRole::Precharge));
    let _ = channels.push(internal(VDDHDIV5_CHANNEL, "VDDH/5 (TACQ >= 10 us)", ChannelRole::Internal));
    BoardDescription {
        name: label(NAME),
        unit_id,
        front_end: FrontEnd {
            bits: BITS,
            vref_microvolts: VREF_MICROVOLTS,
            sample_ps,
            conversion_ps: CONVERSION_PS,
            hold_attofarads: HOLD_ATTOFARADS,
            hold_tolerance_ppm: HOLD_TOLERANCE_PPM,
            switch_milliohms: SWITCH_MILLIOHMS,
            switch_tolerance_ppm: SWITCH_TOLERANCE_PPM,
            noise_millilsb: NOISE_MILLILSB,
            leakage_picoamps: LEAKAGE_PICOAMPS,
            // The ladder is opt-in per pin: offered only when a pin may use it.
            pull_milliohms: if PINS.iter().any(|p| p.may_pull) { LADDER_MILLIOHMS } else { 0 },
            pull_tolerance_ppm: LADDER_TOLERANCE_PPM,
            // The ladder's pull-up goes to VDD (the host measures the real level on VDD_CHANNEL).
            pull_supply_microvolts: VDD_MICROVOLTS,
            precharges,
        },
        channels,
    }
}
