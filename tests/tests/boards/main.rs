//! The real boards' handshake descriptions, checked against their profiles.
//!
//! Each board image describes itself from one Rust file (`boards/<board>/src/profile.rs`). That
//! file is compiled here for the host, served by the real firmware engine, read by the host's
//! own handshake (`Session::handshake`) and compared, value by value, with the board's
//! `profile.toml` as the `toml` crate parses it. The profile must also give every electrical
//! value a source, a tolerance and a confidence.

use ohmsight::link::Link;
use ohmsight::session::{BoardInfo, Session};
use ohmsight_firmware::{AnalogFrontEnd, BoardDescription, Engine};
use ohmsight_protocol::ChannelRole;
use std::io;
use std::time::Duration;

// Each description includes the boards' shared pin type (boards/common/pin.rs) as its own module,
// as each image does.
#[allow(dead_code, unexpected_cfgs, clippy::duplicate_mod)]
#[path = "../../../boards/stm32f411/src/profile.rs"]
mod stm32f411;

#[allow(dead_code, unexpected_cfgs, clippy::duplicate_mod)]
#[path = "../../../boards/nrf52840/src/profile.rs"]
mod nrf52840;

/// A converter that answers every conversion with one code: the handshake converts nothing.
struct Quiet;

impl AnalogFrontEnd for Quiet {
    type Error = core::convert::Infallible;
    fn convert(&mut self, _channel: u8, _sample: u8) -> Result<u16, Self::Error> {
        Ok(2048)
    }
}

struct NoDelay;

impl embedded_hal::delay::DelayNs for NoDelay {
    fn delay_ns(&mut self, _ns: u32) {}
}

/// The firmware engine with a board's description, as a host link.
struct DescribedBoard {
    engine: Engine<Quiet, NoDelay>,
    out: std::collections::VecDeque<u8>,
}

impl Link for DescribedBoard {
    fn send(&mut self, bytes: &[u8]) -> io::Result<()> {
        let mut out = Vec::new();
        if let Err(never) = self.engine.feed(bytes, &mut out) {
            match never {}
        }
        self.out.extend(out);
        Ok(())
    }
    fn recv(&mut self, buf: &mut [u8], _timeout: Duration) -> io::Result<usize> {
        let n = buf.len().min(self.out.len());
        for (b, v) in buf.iter_mut().zip(self.out.drain(..n)) {
            *b = v;
        }
        Ok(n)
    }
    fn name(&self) -> String {
        "a board description served by the firmware engine".into()
    }
}

fn handshake(description: BoardDescription) -> BoardInfo {
    let link = DescribedBoard { engine: Engine::new(Quiet, NoDelay, description), out: Default::default() };
    Session::new(link).handshake(false).expect("the host reads the board's handshake")
}

fn profile(board: &str) -> (String, toml::Table) {
    let path = format!("{}/../boards/{board}/profile.toml", env!("CARGO_MANIFEST_DIR"));
    let text = std::fs::read_to_string(&path).unwrap_or_else(|e| panic!("{path}: {e}"));
    let table = text.parse::<toml::Table>().unwrap_or_else(|e| panic!("{path}: {e}"));
    (path, table)
}

/// `[adc.<key>]`: its value and tolerance, after checking it says where it comes from.
fn electrical<'a>(path: &str, t: &'a toml::Table, key: &str) -> (&'a toml::Value, f64) {
    let entry = t["adc"].get(key).and_then(|v| v.as_table()).unwrap_or_else(|| panic!("{path}: no [adc.{key}]"));
    let source = entry.get("source").and_then(|v| v.as_str()).unwrap_or("");
    assert!(source.len() > 20, "{path}: [adc.{key}] needs a source saying where the value comes from");
    let confidence = entry.get("confidence").and_then(|v| v.as_str()).unwrap_or("");
    assert!(["high", "medium", "low"].contains(&confidence), "{path}: [adc.{key}] confidence {confidence:?}");
    let tolerance = entry.get("tolerance").and_then(number).unwrap_or_else(|| panic!("{path}: [adc.{key}] tolerance"));
    assert!((0.0..=1.0).contains(&tolerance), "{path}: [adc.{key}] tolerance {tolerance} is not relative");
    (entry.get("value").unwrap_or_else(|| panic!("{path}: [adc.{key}] value")), tolerance)
}

fn number(v: &toml::Value) -> Option<f64> {
    v.as_float().or_else(|| v.as_integer().map(|i| i as f64))
}

fn scaled(v: &toml::Value, scale: f64) -> u64 {
    (number(v).expect("a number") * scale).round() as u64
}

fn ppm(tolerance: f64) -> u32 {
    (tolerance * 1e6).round() as u32
}

/// Everything the handshake and the Rust pin table say, against the profile.
fn check(board: &str, info: &BoardInfo, pins: &[(u8, &str, bool, bool)]) {
    let (path, t) = profile(board);
    let fe = &info.front_end;
    assert_eq!(t["board"]["name"].as_str(), Some(info.name.as_str()), "{path}: board name");

    let (bits, _) = electrical(&path, &t, "bits");
    assert_eq!(bits.as_integer(), Some(i64::from(fe.bits)), "{path}: bits");
    let (vref, _) = electrical(&path, &t, "vref_volts");
    assert_eq!(scaled(vref, 1e6), u64::from(fe.vref_microvolts), "{path}: full scale");
    let (hold, hold_tol) = electrical(&path, &t, "hold_farads");
    assert_eq!(scaled(hold, 1e18), u64::from(fe.hold_attofarads), "{path}: hold capacitance");
    assert_eq!(ppm(hold_tol), fe.hold_tolerance_ppm, "{path}: hold capacitance tolerance");
    let (switch, switch_tol) = electrical(&path, &t, "switch_ohms");
    assert_eq!(scaled(switch, 1e3), u64::from(fe.switch_milliohms), "{path}: switch resistance");
    assert_eq!(ppm(switch_tol), fe.switch_tolerance_ppm, "{path}: switch resistance tolerance");
    let (noise, _) = electrical(&path, &t, "noise_lsb");
    assert_eq!(scaled(noise, 1e3), u64::from(fe.noise_millilsb), "{path}: converter noise");
    let (leak, _) = electrical(&path, &t, "leakage_amps");
    assert_eq!(scaled(leak, 1e12), u64::from(fe.leakage_picoamps), "{path}: leakage bound");
    let (clock, _) = electrical(&path, &t, "clock_hz");
    let clock = number(clock).expect("clock_hz is a number");
    assert!(clock > 0.0, "{path}: clock");

    // The sample-time table: in ADC cycles of the ADC clock, or in seconds.
    let adc = t["adc"].as_table().expect("[adc]");
    let (samples_s, conversion_s): (Vec<f64>, f64) = if adc.contains_key("sample_cycles") {
        let (cycles, _) = electrical(&path, &t, "sample_cycles");
        let (conv, _) = electrical(&path, &t, "conversion_cycles");
        let cycles = cycles.as_array().expect("sample_cycles is a list");
        (cycles.iter().map(|c| number(c).expect("a number") / clock).collect(), number(conv).unwrap() / clock)
    } else {
        let (secs, _) = electrical(&path, &t, "sample_seconds");
        let (conv, _) = electrical(&path, &t, "conversion_seconds");
        (
            secs.as_array().expect("sample_seconds is a list").iter().map(|s| number(s).unwrap()).collect(),
            number(conv).unwrap(),
        )
    };
    let want_ps: Vec<u32> = samples_s.iter().map(|s| (s * 1e12).round() as u32).collect();
    assert_eq!(fe.sample_ps.as_slice(), want_ps.as_slice(), "{path}: sample-time table, ps");
    assert!(fe.sample_ps.windows(2).all(|w| w[0] < w[1]), "{path}: sample times ascend");
    assert_eq!(fe.conversion_ps, (conversion_s * 1e12).round() as u32, "{path}: conversion time");

    // Pins: the profile's list, the Rust table and the handshake's channels agree, opt-ins too.
    let listed = t["pin"].as_array().expect("[[pin]]");
    assert_eq!(listed.len(), pins.len(), "{path}: pin count against src/profile.rs");
    for (p, &(channel, label, may_pull, may_drive)) in listed.iter().zip(pins) {
        assert_eq!(p["channel"].as_integer(), Some(i64::from(channel)), "{path}: pin order");
        assert_eq!(p["label"].as_str(), Some(label), "{path}: label of channel {channel}");
        assert_eq!(p["pull"].as_bool(), Some(may_pull), "{path}: pull opt-in of channel {channel}");
        assert_eq!(p["drive"].as_bool(), Some(may_drive), "{path}: drive opt-in of channel {channel}");
        let ch = info.channels.iter().find(|c| c.channel == channel).expect("the pin is in the handshake");
        assert_eq!((ch.label.as_str(), ch.role), (label, ChannelRole::Pin), "{path}: channel {channel}");
        assert_eq!((ch.pull, ch.drive), (may_pull, may_drive), "{path}: the handshake's opt-ins of channel {channel}");
    }
    for ch in info.channels.iter().filter(|c| c.role != ChannelRole::Pin) {
        assert!(!ch.pull && !ch.drive, "{path}: internal channel {} is never pulled or driven", ch.channel);
    }
    let pull_key = if adc.contains_key("ladder_ohms") { "ladder_ohms" } else { "pull_ohms" };
    let (pull, _) = electrical(&path, &t, pull_key);
    let offered = if pins.iter().any(|p| p.2) { scaled(pull, 1e3) } else { 0 };
    assert_eq!(u64::from(fe.pull_milliohms), offered, "{path}: pull resistance offered only to opted-in pins");
    let (_, pull_tol) = electrical(&path, &t, pull_key);
    assert_eq!(ppm(pull_tol), fe.pull_tolerance_ppm, "{path}: pull tolerance");
    assert!(fe.pull_supply_microvolts > 0, "{path}: the pull-up's level is stated");

    // Precharge sources and internal channels.
    let pre = t["precharge"].as_array().expect("[[precharge]]");
    assert_eq!(pre.len(), fe.precharges.len(), "{path}: precharge sources");
    for (p, got) in pre.iter().zip(&fe.precharges) {
        assert_eq!(p["channel"].as_integer(), Some(i64::from(got.channel)), "{path}: precharge channel");
        assert_eq!(scaled(&p["volts"], 1e6), u64::from(got.nominal_microvolts), "{path}: precharge level");
        assert!(p.get("source").and_then(|s| s.as_str()).is_some_and(|s| s.len() > 20), "{path}: precharge source");
        let ch = info.channels.iter().find(|c| c.channel == got.channel).expect("the precharge channel is listed");
        assert_eq!(ch.role, ChannelRole::Precharge, "{path}: role of channel {}", got.channel);
    }
    for i in t["internal"].as_array().expect("[[internal]]") {
        let channel = i["channel"].as_integer().expect("channel");
        let ch =
            info.channels.iter().find(|c| i64::from(c.channel) == channel).expect("the internal channel is listed");
        assert_eq!(ch.role, ChannelRole::Internal, "{path}: role of channel {channel}");
    }
    assert_eq!(
        info.channels.len(),
        pins.len() + pre.len() + t["internal"].as_array().unwrap().len(),
        "{path}: channels"
    );
}

#[test]
fn stm32f411_handshake_matches_its_profile() {
    let info = handshake(stm32f411::description(0x0123_4567_89ab_cdef));
    assert_eq!(info.unit_id, 0x0123_4567_89ab_cdef);
    let pins: Vec<_> = stm32f411::PINS.iter().map(|p| (p.channel, p.label, p.may_pull, p.may_drive)).collect();
    check("stm32f411", &info, &pins);
    // The temperature sensor is where profile.toml says the image looks for it.
    assert_eq!(stm32f411::TEMPERATURE_CHANNEL, 18);
}

#[test]
fn nrf52840_handshake_matches_its_profile() {
    let info = handshake(nrf52840::description(42));
    let pins: Vec<_> = nrf52840::PINS.iter().map(|p| (p.channel, p.label, p.may_pull, p.may_drive)).collect();
    check("nrf52840", &info, &pins);
}

/// The STM32's sample times against the datasheet's input-impedance rule: the widely published
/// `R_AIN = (k − 0.5)/(f_ADC·C_ADC·ln(2^(N+2))) − R_ADC` (STM32F4 datasheets' ADC section). At the
/// profile's clock, hold capacitance and worst-case switch resistance, the longest sample time
/// must allow the 50 kΩ the datasheet names as R_AIN's maximum, and the shortest a source below
/// 1 kΩ only: the table spans what the survey needs.
#[test]
fn stm32f411_sample_table_spans_the_published_source_range() {
    let f = stm32f411::ADC_CLOCK_HZ as f64;
    let c = stm32f411::HOLD_ATTOFARADS as f64 * 1e-18;
    let r_adc = 6e3; // the datasheet's maximum
    let r_ain = |k: f64| (k - 0.5) / (f * c * (2f64.powi(14)).ln()) - r_adc;
    assert!(r_ain(3.0) < 1e3, "3 cycles: {:.0} Ω", r_ain(3.0));
    assert!(r_ain(480.0) > 50e3, "480 cycles: {:.0} Ω", r_ain(480.0));
}
