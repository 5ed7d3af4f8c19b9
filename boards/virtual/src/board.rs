//! The simulated converter and what is wired to it.

use crate::scenario::{Scenario, Source};
use core::cell::Cell;
use core::ops::Deref;
use embedded_hal::delay::DelayNs;
use heapless::{String, Vec};
use libm::{cos, log, round, sin, sqrt};
use ohmsight_firmware::{AnalogFrontEnd, BoardDescription, FrontEndError, FrontEndErrorKind, SetupProgress};
use ohmsight_protocol::analog::{volts_to_lsb, Network, State};
use ohmsight_protocol::{
    ChannelInfo, ChannelRole, ErrorKind, FrontEnd, Precharge, Pull, SimBoard, SimPart, SimPin, MAX_SIM_PINS,
};
use rand_xoshiro::rand_core::{Rng, SeedableRng};
use rand_xoshiro::Xoshiro256PlusPlus;

/// Channel number of the internal low precharge source.
pub const PRECHARGE_LOW: u8 = 16;
/// Channel number of the internal high precharge source.
pub const PRECHARGE_HIGH: u8 = 17;

const BOLTZMANN: f64 = 1.380_649e-23;
const TEMPERATURE_K: f64 = 300.0;
/// Longest open-phase step while a hum waveform is applied (the source is piecewise constant).
const HUM_STEP_PS: u64 = 250_000_000;

/// The virtual time shared by the board and its delay.
#[derive(Debug, Default)]
pub struct VirtualClock {
    now_ps: Cell<u64>,
}

impl VirtualClock {
    /// A clock at zero.
    pub const fn new() -> Self {
        Self { now_ps: Cell::new(0) }
    }
    /// Current virtual time, ps.
    pub fn now_ps(&self) -> u64 {
        self.now_ps.get()
    }
    /// Moves time forward.
    pub fn advance_ps(&self, ps: u64) {
        self.now_ps.set(self.now_ps.get() + ps);
    }
    /// Back to zero (a board rewired over the link starts its time again, like a fresh one).
    pub fn restart(&self) {
        self.now_ps.set(0);
    }
}

/// `DelayNs` that advances a [`VirtualClock`] instead of spinning.
pub struct VirtualDelay<C>(pub C);

impl<C: Deref<Target = VirtualClock>> DelayNs for VirtualDelay<C> {
    fn delay_ns(&mut self, ns: u32) {
        self.0.advance_ps(u64::from(ns) * 1000);
    }
}

/// Errors of the simulated converter.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum VirtualError {
    /// No such channel.
    BadChannel,
    /// No such sample time.
    BadSampleTime,
}

impl FrontEndError for VirtualError {
    fn kind(&self) -> FrontEndErrorKind {
        match self {
            VirtualError::BadChannel => FrontEndErrorKind::BadChannel,
            VirtualError::BadSampleTime => FrontEndErrorKind::BadSampleTime,
        }
    }
}

/// Which non-idealities the simulated board applies (all of them by default).
///
/// Turning them off one at a time shows what each costs the fit; surveys always use
/// [`Realism::full`].
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Realism {
    /// Hold capacitance and switch resistance differ from the profile.
    pub unit_spread: bool,
    /// Offset, gain error, INL, ADC noise above the datasheet figure.
    pub converter_errors: bool,
    /// kT/C noise on the hold capacitor.
    pub ktc: bool,
    /// Switch charge injection and residual charge after conversion.
    pub charge_effects: bool,
    /// Input leakage.
    pub leakage: bool,
    /// Firmware overhead and jitter between conversions.
    pub overhead: bool,
}

impl Realism {
    /// Everything on.
    pub const fn full() -> Self {
        Self {
            unit_spread: true,
            converter_errors: true,
            ktc: true,
            charge_effects: true,
            leakage: true,
            overhead: true,
        }
    }
    /// Everything off: the board then is exactly the host's model plus ADC noise and quantization.
    pub const fn ideal() -> Self {
        Self {
            unit_spread: false,
            converter_errors: false,
            ktc: false,
            charge_effects: false,
            leakage: false,
            overhead: false,
        }
    }
}

impl Default for Realism {
    fn default() -> Self {
        Self::full()
    }
}

/// One simulated channel.
#[derive(Debug, Clone)]
struct SimChannel {
    channel: u8,
    net: Network,
    floating: bool,
    hum_volts: f64,
    hum_omega: f64,
    hum_phase: f64,
    noise_volts: f64,
    node_volts: f64,
    node_time_ps: u64,
    /// While a pull is connected: the network and floating flag without it.
    unpulled: Option<(Network, bool)>,
}

/// The simulated board: implements [`AnalogFrontEnd`] over a [`VirtualClock`].
pub struct VirtualBoard<C> {
    clock: C,
    board_name: String<24>,
    realism: Realism,
    /// A set-up arriving over the link: its board part and the pins received so far.
    staged: Option<(SimBoard, Vec<Option<SimPin>, MAX_SIM_PINS>)>,
    rng: Xoshiro256PlusPlus,
    spare_normal: Option<f64>,
    scenario_name: String<48>,
    seed: u64,
    description: BoardDescription,
    channels: Vec<SimChannel, 24>,
    hold_volts: f64,
    sample_s: Vec<f64, 16>,
    conversion_s: f64,
    // the real unit, as opposed to its profile
    full_scale: f64,
    vref: f64,
    bits: u8,
    offset_lsb: f64,
    gain: f64,
    inl_lsb: f64,
    noise_lsb: f64,
    ktc_volts: f64,
    pedestal_volts: f64,
    injection_coulombs: f64,
    residual: f64,
    overhead_ps: f64,
    jitter_ps: f64,
    conversions: u64,
    /// The unit's real pull resistance, Ω (0: no pulls).
    pull_ohms: f64,
}

impl<C: Deref<Target = VirtualClock>> VirtualBoard<C> {
    /// Builds the board for a scenario. The unit's deviations from its profile are drawn from
    /// the scenario's seed.
    pub fn new(scenario: &Scenario, clock: C) -> Self {
        Self::with_realism(scenario, clock, Realism::full())
    }

    /// Builds the board with only some non-idealities (for studies of the fit).
    pub fn with_realism(scenario: &Scenario, clock: C, realism: Realism) -> Self {
        let mut b = Self {
            clock,
            board_name: String::try_from("virtual").unwrap_or_default(),
            realism,
            staged: None,
            rng: Xoshiro256PlusPlus::seed_from_u64(0),
            spare_normal: None,
            scenario_name: String::new(),
            seed: 0,
            description: describe(scenario),
            channels: Vec::new(),
            hold_volts: 0.0,
            sample_s: Vec::new(),
            conversion_s: 0.0,
            full_scale: 0.0,
            vref: 0.0,
            bits: 0,
            offset_lsb: 0.0,
            gain: 1.0,
            inl_lsb: 0.0,
            noise_lsb: 0.0,
            ktc_volts: 0.0,
            pedestal_volts: 0.0,
            injection_coulombs: 0.0,
            residual: 0.0,
            overhead_ps: 0.0,
            jitter_ps: 0.0,
            conversions: 0,
            pull_ohms: 0.0,
        };
        b.wire(scenario);
        b
    }

    /// Wires the board for a scenario: the unit's deviations from its profile are drawn from
    /// the scenario's seed, so one scenario always gives one unit.
    fn wire(&mut self, scenario: &Scenario) {
        let mut rng = Xoshiro256PlusPlus::seed_from_u64(scenario.seed);
        let p = &scenario.board;
        let b = self;
        b.spare_normal = None;
        b.scenario_name = scenario.name.clone();
        b.seed = scenario.seed;
        b.description = describe(scenario);
        b.description.name = b.board_name.clone();
        b.channels.clear();
        b.hold_volts = p.vref_volts / 2.0;
        b.sample_s = p.sample_cycles.iter().map(|c| c / p.adc_clock_hz).collect();
        b.conversion_s = p.conversion_cycles / p.adc_clock_hz;
        b.full_scale = (1u64 << p.bits) as f64;
        b.vref = p.vref_volts;
        b.bits = p.bits;
        // The unit: within the profile's ±2σ tolerance (a normal draw, σ = tolerance / 2,
        // clamped to ±tolerance: about one unit in 22 sits exactly at an edge of its tolerance,
        // just past the ±1.96σ of a 95% interval that the profile's prior alone sets).
        let within = |tol: f64, rng: &mut Xoshiro256PlusPlus| (normal(rng) * tol / 2.0).clamp(-tol, tol);
        // Every draw is made whatever is switched on, so one seed gives one unit.
        let on = |flag: bool, v: f64, off: f64| if flag { v } else { off };
        let r = b.realism;
        // A unit off its datasheet ([`BoardProfile::unit_hold_ratio`]) is off by that factor
        // whatever is switched on: it is the scenario's truth, not a non-ideality.
        let hold =
            p.hold_farads * p.unit_hold_ratio * (1.0 + on(r.unit_spread, within(p.hold_tolerance, &mut rng), 0.0));
        let switch =
            p.switch_ohms * p.unit_switch_ratio * (1.0 + on(r.unit_spread, within(p.switch_tolerance, &mut rng), 0.0));
        b.offset_lsb = on(r.converter_errors, uniform(&mut rng, -0.6, 0.6), 0.0);
        b.gain = 1.0 + on(r.converter_errors, uniform(&mut rng, -1e-3, 1e-3), 0.0);
        b.inl_lsb = on(r.converter_errors, uniform(&mut rng, -0.4, 0.4), 0.0);
        b.noise_lsb = p.adc_noise_lsb * on(r.converter_errors, uniform(&mut rng, 1.0, 1.15), 1.0);
        b.ktc_volts = on(r.ktc, sqrt(BOLTZMANN * TEMPERATURE_K / hold), 0.0);
        b.pedestal_volts = on(r.charge_effects, uniform(&mut rng, -0.3, 0.3) * p.vref_volts / b.full_scale, 0.0);
        b.injection_coulombs = on(r.charge_effects, 2e-15, 0.0);
        b.residual = on(r.charge_effects, 1e-3, 0.0);
        b.overhead_ps = on(r.overhead, uniform(&mut rng, 60_000.0, 200_000.0), 0.0);
        b.jitter_ps = on(r.overhead, 10_000.0, 0.0);
        let leak = |rng: &mut Xoshiro256PlusPlus| on(r.leakage, uniform(rng, -1.0, 1.0) * p.leakage_amps, 0.0);
        for pin in &scenario.pins {
            let (volts, ohms, floating) = match pin.source {
                Source::Driven { volts, ohms } => (volts, ohms, false),
                Source::Floating => (0.0, f64::INFINITY, true),
            };
            let net = Network {
                source_volts: volts,
                source_ohms: ohms,
                node_farads: pin.node_farads,
                switch_ohms: switch,
                hold_farads: hold,
                leak_amps: leak(&mut rng),
            };
            // A floating node starts wherever its last charge left it.
            let start =
                if floating { uniform(&mut rng, 0.2, 0.8) * p.vref_volts } else { net.rest_volts().unwrap_or(0.0) };
            let ch = SimChannel {
                channel: pin.channel,
                net,
                floating,
                hum_volts: pin.hum_volts,
                hum_omega: 2.0 * core::f64::consts::PI * pin.hum_hz,
                hum_phase: uniform(&mut rng, 0.0, 2.0 * core::f64::consts::PI),
                noise_volts: pin.noise_volts,
                node_volts: start,
                node_time_ps: 0,
                unpulled: None,
            };
            let _ = b.channels.push(ch);
        }
        // Internal precharge sources: stiff references behind 50 Ω.
        for (channel, volts) in [(PRECHARGE_LOW, 0.03 * p.vref_volts), (PRECHARGE_HIGH, 0.97 * p.vref_volts)] {
            let net = Network {
                source_volts: volts,
                source_ohms: 50.0,
                node_farads: 5e-12,
                switch_ohms: switch,
                hold_farads: hold,
                leak_amps: 0.0,
            };
            let _ = b.channels.push(SimChannel {
                channel,
                net,
                floating: false,
                hum_volts: 0.0,
                hum_omega: 0.0,
                hum_phase: 0.0,
                noise_volts: 0.0,
                node_volts: volts,
                node_time_ps: 0,
                unpulled: None,
            });
        }
        // From a stream of its own: drawing it from `rng` would move every later noise sample,
        // and every survey of every seed with it (a compare test of two surveys noticed).
        let mut pull_rng = Xoshiro256PlusPlus::seed_from_u64(scenario.seed ^ 0x70_75_6c_6c);
        b.pull_ohms = p.pull_ohms * (1.0 + on(r.unit_spread, within(p.pull_tolerance, &mut pull_rng), 0.0));
        b.rng = rng;
    }

    /// Reports `name` as the board name (an image that runs the simulated board names itself).
    pub fn named(mut self, name: &str) -> Self {
        self.board_name = String::try_from(name).unwrap_or_default();
        self.description.name = self.board_name.clone();
        self
    }

    /// What the board tells the host about itself.
    pub fn description(&self) -> BoardDescription {
        self.description.clone()
    }

    /// The scenario's name.
    pub fn scenario_name(&self) -> &str {
        &self.scenario_name
    }

    /// The scenario's seed.
    pub fn seed(&self) -> u64 {
        self.seed
    }

    /// Conversions performed so far.
    pub fn conversions(&self) -> u64 {
        self.conversions
    }

    /// Virtual time, ps.
    pub fn now_ps(&self) -> u64 {
        self.clock.now_ps()
    }

    /// The real (not nominal) hold capacitance and switch resistance of this unit.
    pub fn true_hold_and_switch(&self) -> (f64, f64) {
        self.channels.first().map(|c| (c.net.hold_farads, c.net.switch_ohms)).unwrap_or((0.0, 0.0))
    }

    /// The firmware overhead this unit adds before every conversion, s (its mean: the jitter
    /// around it is not included).
    pub fn true_overhead_s(&self) -> f64 {
        self.overhead_ps * 1e-12
    }

    fn gauss(&mut self) -> f64 {
        if let Some(z) = self.spare_normal.take() {
            return z;
        }
        let (z0, z1) = normal_pair(&mut self.rng);
        self.spare_normal = Some(z1);
        z0
    }

    fn hum(ch: &SimChannel, t_ps: u64) -> f64 {
        if ch.hum_volts == 0.0 {
            0.0
        } else {
            ch.hum_volts * sin(ch.hum_omega * (t_ps as f64 * 1e-12) + ch.hum_phase)
        }
    }

    /// Brings a channel's node, untouched by the converter, up to time `to_ps`.
    fn advance_node(ch: &mut SimChannel, to_ps: u64, vref: f64) {
        let from = ch.node_time_ps;
        if to_ps <= from {
            return;
        }
        if ch.floating {
            let open = ch.net.open((to_ps - from) as f64 * 1e-12);
            let coupled = Self::hum(ch, to_ps) - Self::hum(ch, from);
            ch.node_volts = open.apply(State { node_volts: ch.node_volts, hold_volts: 0.0 }).node_volts + coupled;
        } else if ch.hum_volts == 0.0 {
            let open = ch.net.open((to_ps - from) as f64 * 1e-12);
            ch.node_volts = open.apply(State { node_volts: ch.node_volts, hold_volts: 0.0 }).node_volts;
        } else {
            let mut t = from;
            while t < to_ps {
                let step = (to_ps - t).min(HUM_STEP_PS);
                let mut net = ch.net;
                net.source_volts += Self::hum(ch, t + step / 2);
                let open = net.open(step as f64 * 1e-12);
                ch.node_volts = open.apply(State { node_volts: ch.node_volts, hold_volts: 0.0 }).node_volts;
                t += step;
            }
        }
        // ESD diodes hold the pin within a diode drop of the rails.
        ch.node_volts = ch.node_volts.clamp(-0.3, vref + 0.3);
        ch.node_time_ps = to_ps;
    }
}

impl<C: Deref<Target = VirtualClock>> AnalogFrontEnd for VirtualBoard<C> {
    type Error = VirtualError;

    fn clock_ps(&mut self) -> Option<u64> {
        Some(self.clock.now_ps())
    }

    fn convert(&mut self, channel: u8, sample: u8) -> Result<u16, VirtualError> {
        let idx = self.channels.iter().position(|c| c.channel == channel).ok_or(VirtualError::BadChannel)?;
        let ts = *self.sample_s.get(usize::from(sample)).ok_or(VirtualError::BadSampleTime)?;
        // Firmware overhead before the conversion starts.
        let overhead = (self.overhead_ps + self.jitter_ps * self.gauss()).max(0.0) as u64;
        self.clock.advance_ps(overhead);
        let t0 = self.clock.now_ps();
        let vref = self.vref;
        Self::advance_node(&mut self.channels[idx], t0, vref);
        let noise = self.gauss();
        let kick = self.gauss();
        let ktc = self.gauss();
        let adc = self.gauss();
        let ch = &mut self.channels[idx];
        let mut net = ch.net;
        if !ch.floating {
            net.source_volts += Self::hum(ch, t0) + ch.noise_volts * noise;
        }
        let s = net.sampling(ts).apply(State { node_volts: ch.node_volts, hold_volts: self.hold_volts });
        let ts_ps = (ts * 1e12) as u64;
        // Switch opens: kT/C noise frozen on the hold capacitor, charge injection on both sides.
        let hold = s.hold_volts + self.ktc_volts * ktc + self.pedestal_volts;
        ch.node_volts = (s.node_volts + kick * self.injection_coulombs / net.node_farads).clamp(-0.3, vref + 0.3);
        ch.node_time_ps = t0 + ts_ps;
        // Quantizer: gain, offset, bowed INL, noise.
        let x = volts_to_lsb(hold, vref, self.bits) * self.gain;
        let u = (x / self.full_scale).clamp(0.0, 1.0);
        let inl = self.inl_lsb * (1.0 - cos(2.0 * core::f64::consts::PI * u)) / 2.0;
        let y = round(x + self.offset_lsb + inl + self.noise_lsb * adc);
        let code = y.clamp(0.0, self.full_scale - 1.0) as u16;
        // The conversion leaves a little charge of its own on the hold capacitor.
        self.hold_volts = hold + self.residual * (vref / 2.0 - hold);
        self.clock.advance_ps(ts_ps + (self.conversion_s * 1e12) as u64);
        self.conversions += 1;
        Ok(code)
    }

    /// Connects the unit's pull to a pin opted in for it: the node then sees its source in
    /// parallel with the pull, a Thevenin source `((Vs·Rp + Vp·Rs)/(Rs + Rp), Rs ∥ Rp)` (an open
    /// pin: the pull alone), with `Vp` the reference, ground or half the reference.
    fn set_pull(&mut self, channel: u8, pull: Option<Pull>) -> Result<(), ErrorKind> {
        let now = self.clock.now_ps();
        let vref = self.vref;
        // Release first: at most one pin is pulled at a time.
        for ch in self.channels.iter_mut().filter(|c| c.unpulled.is_some()) {
            Self::advance_node(ch, now, vref);
            if let Some((net, floating)) = ch.unpulled.take() {
                ch.net = net;
                ch.floating = floating;
            }
        }
        let Some(pull) = pull else { return Ok(()) };
        if self.pull_ohms <= 0.0 {
            return Err(ErrorKind::Unsupported);
        }
        if !self.description.channels.iter().any(|c| c.channel == channel && c.pull) {
            return Err(ErrorKind::NotAllowed);
        }
        let rp = self.pull_ohms;
        let vp = match pull {
            Pull::Up => vref,
            Pull::Down => 0.0,
            Pull::Half => vref / 2.0,
        };
        let ch = self.channels.iter_mut().find(|c| c.channel == channel).ok_or(ErrorKind::BadChannel)?;
        Self::advance_node(ch, now, vref);
        ch.unpulled = Some((ch.net, ch.floating));
        if ch.floating {
            ch.net.source_volts = vp;
            ch.net.source_ohms = rp;
            ch.floating = false;
        } else {
            let (vs, rs) = (ch.net.source_volts, ch.net.source_ohms);
            ch.net.source_volts = (vs * rp + vp * rs) / (rs + rp);
            ch.net.source_ohms = rs * rp / (rs + rp);
        }
        Ok(())
    }

    /// Stages the parts of a set-up; when the last pin arrives the board is wired anew for it
    /// (seeded unit, fresh nodes) and its clock starts again at zero, so a survey after a load
    /// over the link sees what a survey of a board built for that scenario sees.
    fn simulate(&mut self, part: &SimPart) -> Result<SetupProgress, ErrorKind> {
        match part {
            SimPart::Board(head) => {
                if head.pins == 0 || usize::from(head.pins) > MAX_SIM_PINS {
                    return Err(ErrorKind::BadSetup);
                }
                let mut slots = Vec::new();
                slots.resize(usize::from(head.pins), None).map_err(|_| ErrorKind::BadSetup)?;
                self.staged = Some((head.clone(), slots));
                Ok(SetupProgress::Pending(head.pins))
            }
            SimPart::Pin(pin) => {
                let (head, slots) = self.staged.as_mut().ok_or(ErrorKind::BadSetup)?;
                *slots.get_mut(usize::from(pin.index)).ok_or(ErrorKind::BadSetup)? = Some(pin.clone());
                let pending = slots.iter().filter(|p| p.is_none()).count() as u8;
                if pending > 0 {
                    return Ok(SetupProgress::Pending(pending));
                }
                let pins: Vec<SimPin, MAX_SIM_PINS> = slots.iter().flatten().cloned().collect();
                let scenario = Scenario::from_parts(head, &pins);
                // A set-up the simulator cannot use is dropped whole: the board keeps its old one.
                self.staged = None;
                let scenario = scenario?;
                self.wire(&scenario);
                self.clock.restart();
                Ok(SetupProgress::Ready(self.description()))
            }
        }
    }
}

fn uniform(rng: &mut Xoshiro256PlusPlus, lo: f64, hi: f64) -> f64 {
    let u = (rng.next_u64() >> 11) as f64 / (1u64 << 53) as f64;
    lo + (hi - lo) * u
}

fn normal_pair(rng: &mut Xoshiro256PlusPlus) -> (f64, f64) {
    // Box–Muller.
    let u1 = ((rng.next_u64() >> 11) as f64 + 0.5) / (1u64 << 53) as f64;
    let u2 = (rng.next_u64() >> 11) as f64 / (1u64 << 53) as f64;
    let r = sqrt(-2.0 * log(u1));
    let a = 2.0 * core::f64::consts::PI * u2;
    (r * cos(a), r * sin(a))
}

fn normal(rng: &mut Xoshiro256PlusPlus) -> f64 {
    normal_pair(rng).0
}

/// The front-end description of the board a scenario describes (nominal profile values).
fn describe(s: &Scenario) -> BoardDescription {
    let p = &s.board;
    let ps = |cycles: f64| round(cycles / p.adc_clock_hz * 1e12) as u32;
    let uv = |v: f64| round(v * 1e6) as u32;
    let mut channels = Vec::new();
    for pin in &s.pins {
        let _ = channels.push(ChannelInfo {
            channel: pin.channel,
            label: pin.label.clone(),
            role: ChannelRole::Pin,
            pull: pin.pull && p.pull_ohms > 0.0,
            drive: false,
        });
    }
    for (channel, label) in [(PRECHARGE_LOW, "int-lo (3% Vref)"), (PRECHARGE_HIGH, "int-hi (97% Vref)")] {
        let _ = channels.push(ChannelInfo {
            channel,
            label: String::try_from(label).unwrap_or_default(),
            role: ChannelRole::Precharge,
            pull: false,
            drive: false,
        });
    }
    let mut precharges = Vec::new();
    let _ = precharges.push(Precharge { channel: PRECHARGE_LOW, nominal_microvolts: uv(0.03 * p.vref_volts) });
    let _ = precharges.push(Precharge { channel: PRECHARGE_HIGH, nominal_microvolts: uv(0.97 * p.vref_volts) });
    // Unit id: a hash of scenario name and seed, so runs of one scenario look like one unit.
    let mut id: u64 = 0xcbf2_9ce4_8422_2325 ^ s.seed;
    for byte in s.name.bytes() {
        id = (id ^ u64::from(byte)).wrapping_mul(0x0100_0000_01b3);
    }
    BoardDescription {
        name: String::try_from("virtual").unwrap_or_default(),
        unit_id: id,
        front_end: FrontEnd {
            bits: p.bits,
            vref_microvolts: uv(p.vref_volts),
            sample_ps: p.sample_cycles.iter().map(|&c| ps(c)).collect(),
            conversion_ps: ps(p.conversion_cycles),
            hold_attofarads: round(p.hold_farads * 1e18) as u32,
            hold_tolerance_ppm: round(p.hold_tolerance * 1e6) as u32,
            switch_milliohms: round(p.switch_ohms * 1e3) as u32,
            switch_tolerance_ppm: round(p.switch_tolerance * 1e6) as u32,
            noise_millilsb: round(p.adc_noise_lsb * 1e3) as u32,
            leakage_picoamps: round(p.leakage_amps * 1e12) as u32,
            pull_milliohms: if s.pins.iter().any(|pin| pin.pull) { round(p.pull_ohms * 1e3) as u32 } else { 0 },
            pull_tolerance_ppm: round(p.pull_tolerance * 1e6) as u32,
            // The simulated board's pull-up goes to its reference.
            pull_supply_microvolts: uv(p.vref_volts),
            precharges,
        },
        channels,
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::scenario::{BoardProfile, PinSetup};
    use ohmsight_protocol::SimPin;

    fn scenario(source: Source, node_farads: f64) -> Scenario {
        let mut pins = Vec::new();
        let _ = pins.push(PinSetup {
            channel: 0,
            label: String::try_from("p").unwrap(),
            source,
            node_farads,
            hum_volts: 0.0,
            hum_hz: 50.0,
            noise_volts: 0.0,
            pull: false,
        });
        Scenario { name: String::try_from("t").unwrap(), seed: 3, board: BoardProfile::default(), pins }
    }

    #[test]
    fn a_pull_divides_with_the_source_and_lets_go() {
        // 100 kΩ from 1.0 V, a 160 kΩ pull to 3.3 V: the node sits at
        // (1.0·160k + 3.3·100k) / 260k = 1.8846 V, i.e. 2339 codes; pulled down, 0.6154 V (764).
        let mut s = scenario(Source::Driven { volts: 1.0, ohms: 100e3 }, 10e-12);
        s.board.pull_ohms = 160e3;
        s.pins[0].pull = true;
        let clock = VirtualClock::new();
        let mut b = VirtualBoard::with_realism(&s, &clock, Realism::ideal());
        assert!(b.description().channels[0].pull, "the opted-in pin is offered for pulls");
        assert_eq!(b.description().front_end.pull_milliohms, 160_000_000);
        let mean = |b: &mut VirtualBoard<&VirtualClock>| {
            // Long sample time, the node settled between conversions (τ ≈ 62 kΩ · 14 pF ≈ 0.9 µs).
            let n = 400;
            (0..n)
                .map(|_| {
                    clock.advance_ps(20_000_000);
                    f64::from(b.convert(0, 7).unwrap())
                })
                .sum::<f64>()
                / f64::from(n)
        };
        b.set_pull(0, Some(Pull::Up)).unwrap();
        let up = mean(&mut b);
        b.set_pull(0, Some(Pull::Down)).unwrap();
        let down = mean(&mut b);
        b.set_pull(0, None).unwrap();
        let none = mean(&mut b);
        assert!((up - 2339.0).abs() < 2.0, "pulled up: {up}");
        assert!((down - 764.0).abs() < 2.0, "pulled down: {down}");
        assert!((none - 1241.0).abs() < 2.0, "released: {none}");
        // A pin not opted in is never pulled.
        let mut plain = VirtualBoard::with_realism(&scenario(Source::Floating, 10e-12), &clock, Realism::ideal());
        assert_eq!(plain.set_pull(0, Some(Pull::Up)), Err(ErrorKind::Unsupported));
    }

    #[test]
    fn stiff_source_reads_its_voltage() {
        let clock = VirtualClock::new();
        let mut b = VirtualBoard::new(&scenario(Source::Driven { volts: 1.65, ohms: 100.0 }, 10e-12), &clock);
        let n = 2000;
        let mean: f64 = (0..n).map(|_| f64::from(b.convert(0, 7).unwrap())).sum::<f64>() / n as f64;
        assert!((mean - 2048.0).abs() < 2.0, "mean {mean}");
        assert!(clock.now_ps() > n * (480 + 12) * 1_000_000 / 21);
    }

    #[test]
    fn high_impedance_source_remembers_the_previous_channel() {
        let clock = VirtualClock::new();
        let mut b = VirtualBoard::new(&scenario(Source::Driven { volts: 1.65, ohms: 200e3 }, 5e-12), &clock);
        let after = |b: &mut VirtualBoard<&VirtualClock>, pre: u8| {
            let mut s = 0.0;
            for _ in 0..64 {
                b.convert(pre, 7).unwrap();
                s += f64::from(b.convert(0, 0).unwrap());
            }
            s / 64.0
        };
        let lo = after(&mut b, PRECHARGE_LOW);
        let hi = after(&mut b, PRECHARGE_HIGH);
        assert!(hi - lo > 1000.0, "a 143 ns sample cannot settle 200 kΩ: lo {lo}, hi {hi}");
    }

    #[test]
    fn floating_pin_follows_the_precharge() {
        let clock = VirtualClock::new();
        let mut b = VirtualBoard::new(&scenario(Source::Floating, 5e-12), &clock);
        let mut last = 0;
        for _ in 0..40 {
            b.convert(PRECHARGE_HIGH, 7).unwrap();
            last = b.convert(0, 7).unwrap();
        }
        assert!(last > 3700, "the node was charged up by the hold capacitor: {last}");
    }

    #[test]
    fn bad_channel_and_sample_are_errors() {
        let clock = VirtualClock::new();
        let mut b = VirtualBoard::new(&scenario(Source::Floating, 5e-12), &clock);
        assert_eq!(b.convert(5, 0), Err(VirtualError::BadChannel));
        assert_eq!(b.convert(0, 8), Err(VirtualError::BadSampleTime));
    }

    fn two_pins() -> Scenario {
        let mut s = scenario(Source::Driven { volts: 1.3, ohms: 68e3 }, 12e-12);
        let _ = s.pins.push(PinSetup {
            channel: 3,
            label: String::try_from("open").unwrap(),
            source: Source::Floating,
            node_farads: 7.5e-12,
            hum_volts: 0.021,
            hum_hz: 60.0,
            noise_volts: 0.0,
            pull: false,
        });
        s.board.sample_cycles = Vec::from_slice(&[1.5, 7.5, 239.5]).unwrap();
        s.name = String::try_from("wired over the link").unwrap();
        s.seed = 99;
        s
    }

    #[test]
    fn parts_round_trip_exactly() {
        let s = two_pins();
        let parts: std::vec::Vec<SimPart> = s.to_parts().collect();
        let SimPart::Board(head) = &parts[0] else { panic!("the board part comes first") };
        assert_eq!(usize::from(head.pins), parts.len() - 1);
        let pins: std::vec::Vec<SimPin> =
            parts[1..].iter().map(|p| if let SimPart::Pin(p) = p { p.clone() } else { panic!() }).collect();
        assert_eq!(Scenario::from_parts(head, &pins), Ok(s));
    }

    #[test]
    fn a_board_rewired_over_the_link_equals_one_built_for_the_scenario() {
        let s = two_pins();
        let (c1, c2) = (VirtualClock::new(), VirtualClock::new());
        let mut built = VirtualBoard::new(&s, &c1);
        let mut rewired = VirtualBoard::new(&scenario(Source::Floating, 5e-12), &c2);
        rewired.convert(0, 2).unwrap(); // it has lived a little before the load
        let mut last = None;
        for part in s.to_parts().collect::<std::vec::Vec<_>>().iter().rev() {
            // Pins may come in any order, once the board part is in; here the board comes last
            // and is refused first.
            last = Some(rewired.simulate(part));
        }
        assert_eq!(last, Some(Ok(SetupProgress::Pending(2))));
        let mut got = None;
        for part in s.to_parts() {
            got = Some(rewired.simulate(&part));
        }
        assert_eq!(got, Some(Ok(SetupProgress::Ready(built.description()))));
        assert_eq!(c2.now_ps(), 0);
        for i in 0..200u8 {
            let (ch, sample) = ([0, 3, PRECHARGE_HIGH][usize::from(i % 3)], i % 3);
            assert_eq!(built.convert(ch, sample), rewired.convert(ch, sample), "conversion {i}");
        }
    }

    #[test]
    fn bad_set_ups_are_refused_and_the_old_one_stays() {
        let clock = VirtualClock::new();
        let mut b = VirtualBoard::new(&two_pins(), &clock);
        let before = b.description();
        let parts: std::vec::Vec<SimPart> = two_pins().to_parts().collect();
        assert_eq!(b.simulate(&parts[1]), Err(ErrorKind::BadSetup), "a pin before any board part");
        let SimPart::Board(mut head) = parts[0].clone() else { panic!() };
        head.sample_millicycles = Vec::from_slice(&[7500, 1500]).unwrap();
        assert_eq!(b.simulate(&SimPart::Board(head.clone())), Ok(SetupProgress::Pending(2)));
        assert_eq!(b.simulate(&parts[1]), Ok(SetupProgress::Pending(1)));
        assert_eq!(b.simulate(&parts[2]), Err(ErrorKind::BadSetup), "sample times not ascending");
        assert_eq!(b.description(), before);
        assert_eq!(b.simulate(&parts[2]), Err(ErrorKind::BadSetup), "the refused set-up was dropped");
        head.pins = 0;
        assert_eq!(b.simulate(&SimPart::Board(head)), Err(ErrorKind::BadSetup));
        assert!(b.convert(3, 2).is_ok(), "the old set-up still converts");
    }
}
