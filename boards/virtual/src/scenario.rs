//! What the simulated board is and what is wired to it.

use heapless::{String, Vec};
use libm::round;
use ohmsight_protocol::{ErrorKind, SimBoard, SimPart, SimPin, SimSource};

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
    /// The unit's real hold capacitance as a multiple of [`Self::hold_farads`] (1: as declared,
    /// within the tolerance): a unit off its datasheet, for calibration.
    pub unit_hold_ratio: f64,
    /// The unit's real switch resistance as a multiple of [`Self::switch_ohms`].
    pub unit_switch_ratio: f64,
    /// Nominal pull resistance, Ω (0: no pulls). The pulls go to the reference voltage, to
    /// ground, and to half the reference.
    pub pull_ohms: f64,
    /// ±2σ relative uncertainty of the pull resistance (the unit's pulls differ within it).
    pub pull_tolerance: f64,
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
            unit_hold_ratio: 1.0,
            unit_switch_ratio: 1.0,
            pull_ohms: 0.0,
            pull_tolerance: 0.2,
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
    /// The board may pull this pin for a pull test (the profile opts it in).
    pub pull: bool,
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

impl Scenario {
    /// The set-up as the parts [`ohmsight_protocol::Request::Simulate`] carries: the board
    /// first, then one part per pin. Values are rounded to each field's unit (µV, mΩ, aF, fA,
    /// mHz, thousandths of a cycle, ppm), which round-trips every value written with at most
    /// that many decimals.
    pub fn to_parts(&self) -> impl Iterator<Item = SimPart> + '_ {
        let p = &self.board;
        let board = SimBoard {
            name: self.name.clone(),
            seed: self.seed,
            bits: p.bits,
            vref_microvolts: scaled(p.vref_volts, 1e6) as u32,
            hold_attofarads: scaled(p.hold_farads, 1e18) as u32,
            hold_tolerance_ppm: scaled(p.hold_tolerance, 1e6) as u32,
            switch_milliohms: scaled(p.switch_ohms, 1e3) as u32,
            switch_tolerance_ppm: scaled(p.switch_tolerance, 1e6) as u32,
            adc_clock_millihertz: scaled(p.adc_clock_hz, 1e3) as u64,
            sample_millicycles: p.sample_cycles.iter().map(|&c| scaled(c, 1e3) as u32).collect(),
            conversion_millicycles: scaled(p.conversion_cycles, 1e3) as u32,
            noise_millilsb: scaled(p.adc_noise_lsb, 1e3) as u32,
            leakage_femtoamps: scaled(p.leakage_amps, 1e15) as u32,
            unit_hold_ppm: scaled(p.unit_hold_ratio, 1e6) as u32,
            unit_switch_ppm: scaled(p.unit_switch_ratio, 1e6) as u32,
            pull_milliohms: scaled(p.pull_ohms, 1e3) as u64,
            pull_tolerance_ppm: scaled(p.pull_tolerance, 1e6) as u32,
            pins: self.pins.len() as u8,
        };
        let pins = self.pins.iter().enumerate().map(|(index, pin)| {
            SimPart::Pin(SimPin {
                index: index as u8,
                channel: pin.channel,
                label: pin.label.clone(),
                source: match pin.source {
                    Source::Driven { volts, ohms } => {
                        SimSource::Driven { microvolts: scaled(volts, 1e6) as i32, milliohms: scaled(ohms, 1e3) as u64 }
                    }
                    Source::Floating => SimSource::Floating,
                },
                node_attofarads: scaled(pin.node_farads, 1e18) as u64,
                hum_microvolts: scaled(pin.hum_volts, 1e6) as u32,
                hum_millihertz: scaled(pin.hum_hz, 1e3) as u32,
                noise_microvolts: scaled(pin.noise_volts, 1e6) as u32,
                pull: pin.pull,
            })
        });
        core::iter::once(SimPart::Board(board)).chain(pins)
    }

    /// The scenario the parts describe, or [`ErrorKind::BadSetup`] when the simulator could
    /// not run it (no pins, a channel wired twice or out of range, a zero clock or capacitance,
    /// sample times not ascending, more than 16 bits).
    pub fn from_parts(board: &SimBoard, pins: &[SimPin]) -> Result<Scenario, ErrorKind> {
        let bad = ErrorKind::BadSetup;
        let ok = |c: bool| if c { Ok(()) } else { Err(bad) };
        ok((6..=16).contains(&board.bits))?;
        ok(board.vref_microvolts > 0 && board.hold_attofarads > 0 && board.switch_milliohms > 0)?;
        ok(board.adc_clock_millihertz > 0 && board.conversion_millicycles > 0)?;
        ok(!board.sample_millicycles.is_empty() && board.sample_millicycles[0] > 0)?;
        ok(board.sample_millicycles.windows(2).all(|w| w[0] < w[1]))?;
        ok(!pins.is_empty() && pins.len() <= MAX_PINS)?;
        ok(board.unit_hold_ppm > 0 && board.unit_switch_ppm > 0)?;
        let profile = BoardProfile {
            bits: board.bits,
            vref_volts: f64::from(board.vref_microvolts) / 1e6,
            hold_farads: f64::from(board.hold_attofarads) / 1e18,
            hold_tolerance: f64::from(board.hold_tolerance_ppm) / 1e6,
            switch_ohms: f64::from(board.switch_milliohms) / 1e3,
            switch_tolerance: f64::from(board.switch_tolerance_ppm) / 1e6,
            adc_clock_hz: board.adc_clock_millihertz as f64 / 1e3,
            sample_cycles: board.sample_millicycles.iter().map(|&c| f64::from(c) / 1e3).collect(),
            conversion_cycles: f64::from(board.conversion_millicycles) / 1e3,
            adc_noise_lsb: f64::from(board.noise_millilsb) / 1e3,
            leakage_amps: f64::from(board.leakage_femtoamps) / 1e15,
            unit_hold_ratio: f64::from(board.unit_hold_ppm) / 1e6,
            unit_switch_ratio: f64::from(board.unit_switch_ppm) / 1e6,
            pull_ohms: board.pull_milliohms as f64 / 1e3,
            pull_tolerance: f64::from(board.pull_tolerance_ppm) / 1e6,
        };
        let mut wired: Vec<PinSetup, MAX_PINS> = Vec::new();
        for p in pins {
            ok(usize::from(p.channel) < MAX_PINS && p.node_attofarads > 0)?;
            ok(!wired.iter().any(|q| q.channel == p.channel))?;
            let source = match p.source {
                SimSource::Driven { microvolts, milliohms } => {
                    ok(milliohms > 0)?;
                    Source::Driven { volts: f64::from(microvolts) / 1e6, ohms: milliohms as f64 / 1e3 }
                }
                SimSource::Floating => Source::Floating,
            };
            wired
                .push(PinSetup {
                    channel: p.channel,
                    label: p.label.clone(),
                    source,
                    node_farads: p.node_attofarads as f64 / 1e18,
                    hum_volts: f64::from(p.hum_microvolts) / 1e6,
                    hum_hz: f64::from(p.hum_millihertz) / 1e3,
                    noise_volts: f64::from(p.noise_microvolts) / 1e6,
                    pull: p.pull,
                })
                .map_err(|_| bad)?;
        }
        wired.sort_unstable_by_key(|p| p.channel);
        Ok(Scenario { name: board.name.clone(), seed: board.seed, board: profile, pins: wired })
    }
}

/// `value · scale` rounded to the nearest integer (saturating where it is cast).
fn scaled(value: f64, scale: f64) -> f64 {
    round(value * scale)
}
