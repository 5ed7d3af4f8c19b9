//! What the simulated board is and what is wired to it.

use heapless::{String, Vec};

/// Most external pins a scenario can wire.
pub const MAX_PINS: usize = 16;

/// The board's electrical profile: the nominal (datasheet) values the host is told.
#[derive(Debug, Clone, PartialEq)]
pub struct BoardProfile {
    /// Resolution, bits.
    pub bits: u8,
    /// Full-scale reference, V.
    pub vref_volts: f64,
    /// Nominal hold capacitance, F.
    pub hold_farads: f64,
    /// ±2σ relative uncertainty of the hold capacitance (the real unit differs within it).
    pub hold_tolerance: f64,
    /// Nominal switch + multiplexer resistance, Ω.
    pub switch_ohms: f64,
    /// ±2σ relative uncertainty of the switch resistance.
    pub switch_tolerance: f64,
    /// ADC clock, Hz.
    pub adc_clock_hz: f64,
    /// Selectable sample times, ADC cycles (may be fractional), ascending.
    pub sample_cycles: Vec<f64, 16>,
    /// Conversion time, ADC cycles.
    pub conversion_cycles: f64,
    /// Datasheet ADC noise, LSB rms.
    pub adc_noise_lsb: f64,
    /// Input leakage bound, A.
    pub leakage_amps: f64,
}

impl Default for BoardProfile {
    /// A 12-bit, 3.3 V converter with a 4 pF / 6 kΩ input at 21 MHz (an invented profile in the
    /// range of common Cortex-M parts).
    fn default() -> Self {
        Self {
            bits: 12,
            vref_volts: 3.3,
            hold_farads: 4e-12,
            hold_tolerance: 0.05,
            switch_ohms: 6000.0,
            switch_tolerance: 0.10,
            adc_clock_hz: 21e6,
            sample_cycles: Vec::from_slice(&[3.0, 15.0, 28.0, 56.0, 84.0, 112.0, 144.0, 480.0]).unwrap_or_default(),
            conversion_cycles: 12.0,
            adc_noise_lsb: 0.5,
            leakage_amps: 10e-12,
        }
    }
}

/// What drives a pin.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Source {
    /// A Thevenin source.
    Driven {
        /// Open-circuit voltage, V.
        volts: f64,
        /// Source resistance, Ω.
        ohms: f64,
    },
    /// Nothing: the pin is not connected.
    Floating,
}

/// One wired pin.
#[derive(Debug, Clone, PartialEq)]
pub struct PinSetup {
    /// ADC channel number (0–15).
    pub channel: u8,
    /// Free-text label.
    pub label: String<24>,
    /// What drives it.
    pub source: Source,
    /// Pin + trace + filter capacitance, F.
    pub node_farads: f64,
    /// Mains pickup amplitude, V (at the source for a driven pin, at the node for a floating one).
    pub hum_volts: f64,
    /// Mains frequency, Hz.
    pub hum_hz: f64,
    /// White noise at the source, V rms.
    pub noise_volts: f64,
}

/// A whole simulated set-up.
#[derive(Debug, Clone, PartialEq)]
pub struct Scenario {
    /// Free-text name.
    pub name: String<48>,
    /// Seed of the noise generator.
    pub seed: u64,
    /// Electrical profile.
    pub board: BoardProfile,
    /// Wired pins, by ascending channel.
    pub pins: Vec<PinSetup, MAX_PINS>,
}
