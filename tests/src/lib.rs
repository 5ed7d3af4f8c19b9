//! Shared helpers for the end-to-end tests: scenarios with known truth, surveyed on the
//! simulated board over the in-process link.

use ohmsight::fit::Interval;
use ohmsight::link::InProcessLink;
use ohmsight::session::Session;
use ohmsight::{survey, SurveyOptions, SurveyReport};
use ohmsight_virtual::{BoardProfile, PinSetup, Scenario, Source};

/// A pin driven by `volts` behind `ohms`, with node capacitance `farads`.
pub fn driven(channel: u8, volts: f64, ohms: f64, farads: f64) -> PinSetup {
    PinSetup {
        channel,
        label: heapless::String::try_from(format!("ch{channel}").as_str()).unwrap(),
        source: Source::Driven { volts, ohms },
        node_farads: farads,
        hum_volts: 0.0,
        hum_hz: 50.0,
        noise_volts: 0.0,
        pull: false,
    }
}

/// An unconnected pin.
pub fn floating(channel: u8, farads: f64) -> PinSetup {
    PinSetup { source: Source::Floating, ..driven(channel, 0.0, 1.0, farads) }
}

/// The simulated board's default profile (12 bits, 4 pF / 6 kΩ, 21 MHz).
pub fn default_board() -> BoardProfile {
    BoardProfile::default()
}

/// Another converter: 8 pF hold, 1 kΩ switch, 14 MHz, fractional sample cycles 1.5 … 239.5.
pub fn fast_board() -> BoardProfile {
    BoardProfile {
        hold_farads: 8e-12,
        switch_ohms: 1e3,
        adc_clock_hz: 14e6,
        sample_cycles: heapless::Vec::from_slice(&[1.5, 7.5, 13.5, 28.5, 41.5, 55.5, 71.5, 239.5]).unwrap(),
        conversion_cycles: 12.5,
        ..BoardProfile::default()
    }
}

/// A scenario of these pins on this board.
pub fn scenario(name: &str, seed: u64, board: BoardProfile, pins: Vec<PinSetup>) -> Scenario {
    Scenario {
        name: heapless::String::try_from(name).unwrap(),
        seed,
        board,
        pins: heapless::Vec::from_slice(&pins).unwrap(),
    }
}

/// Surveys a scenario on the simulated board.
pub fn run(s: &Scenario) -> SurveyReport {
    let mut session = Session::new(InProcessLink::new(s));
    survey(&mut session, &SurveyOptions::default()).expect("survey on the simulated board")
}

/// True when `truth` is inside the reported interval (one-sided bounds count on their side).
pub fn covers(iv: &Interval, truth: f64) -> bool {
    iv.low.is_none_or(|l| l <= truth) && iv.high.is_none_or(|h| h >= truth)
}

/// The interval as text, for failure messages.
pub fn show(iv: &Interval) -> String {
    ohmsight::render::text::interval_text(iv, ohmsight::units::ohms)
}

/// How many of the board's sample times leave a step from 0 V on the hold capacitor more than
/// ½ LSB from a source of `ohms` behind `farads` (computed from the truth with the closed-form
/// network, nominal board values). With fewer than two such sample times the settling curve
/// has one informative point, and `Rs` trades off against `Cn`: unless the node is large
/// enough for its recovery between conversions to show (see [`resolvable`]), the survey can
/// only bound it.
pub fn informative_samples(board: &BoardProfile, ohms: f64, farads: f64) -> usize {
    use ohmsight_protocol::analog::{Network, State};
    let net = Network {
        source_volts: board.vref_volts / 2.0,
        source_ohms: ohms,
        node_farads: farads,
        switch_ohms: board.switch_ohms,
        hold_farads: board.hold_farads,
        leak_amps: 0.0,
    };
    let lsb = board.vref_volts / f64::from(1u32 << board.bits);
    board
        .sample_cycles
        .iter()
        .filter(|&&c| {
            let s = net.sampling(c / board.adc_clock_hz).apply(State { node_volts: net.source_volts, hold_volts: 0.0 });
            (s.hold_volts - net.source_volts).abs() > 0.5 * lsb
        })
        .count()
}

/// Whether the survey's experiments can tell `Rs` apart from `Cn`: two informative sample
/// times, or a node capacitor of 1 nF or more, whose recovery through `Rs` between conversions
/// the repeat bursts and period sweeps measure.
pub fn resolvable(board: &BoardProfile, ohms: f64, farads: f64) -> bool {
    informative_samples(board, ohms, farads) >= 2 || farads >= 1e-9
}

#[cfg(unix)]
pub mod paths;
pub mod spice;

/// A seeded source of standard normal numbers (SplitMix64 and Box–Muller: small, well known,
/// and independent of the simulated board's own generator).
pub struct Gauss {
    state: u64,
    spare: Option<f64>,
}

impl Gauss {
    /// A generator for `seed`.
    pub fn new(seed: u64) -> Self {
        Self { state: seed, spare: None }
    }

    fn uniform(&mut self) -> f64 {
        self.state = self.state.wrapping_add(0x9e37_79b9_7f4a_7c15);
        let mut z = self.state;
        z = (z ^ (z >> 30)).wrapping_mul(0xbf58_476d_1ce4_e5b9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94d0_49bb_1331_11eb);
        z ^= z >> 31;
        ((z >> 11) as f64 + 0.5) / (1u64 << 53) as f64
    }

    /// The next standard normal number.
    pub fn sample(&mut self) -> f64 {
        if let Some(z) = self.spare.take() {
            return z;
        }
        let (u1, u2) = (self.uniform(), self.uniform());
        let r = (-2.0 * u1.ln()).sqrt();
        let a = 2.0 * std::f64::consts::PI * u2;
        self.spare = Some(r * a.sin());
        r * a.cos()
    }
}
