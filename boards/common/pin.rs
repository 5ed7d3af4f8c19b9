//! A board's analog pin as its profile declares it, shared by the board descriptions (each
//! profile.rs includes this file as a module; the host's tests compile it too).

use heapless::String;
use ohmsight_protocol::{ChannelInfo, ChannelRole};

/// One analog pin of a board.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Pin {
    /// The protocol's channel number.
    pub channel: u8,
    /// The chip's name for the pin, e.g. "PA1" or "P0.02".
    pub name: &'static str,
    /// Label reported to the host.
    pub label: &'static str,
    /// The firmware may connect a pull resistor (or ladder) to this pin for a pull test.
    pub may_pull: bool,
    /// The firmware may drive this pin (as a precharge source).
    pub may_drive: bool,
}

impl Pin {
    /// The pin as the handshake lists it, with its opt-ins.
    pub fn info(&self) -> ChannelInfo {
        ChannelInfo {
            channel: self.channel,
            label: label(self.label),
            role: ChannelRole::Pin,
            pull: self.may_pull,
            drive: self.may_drive,
        }
    }
}

/// A channel inside the chip (a precharge source or an internal signal): never pulled or
/// driven.
pub fn internal(channel: u8, name: &str, role: ChannelRole) -> ChannelInfo {
    ChannelInfo { channel, label: label(name), role, pull: false, drive: false }
}

/// `s` cut to the 24 characters a channel label holds.
pub fn label(s: &str) -> String<24> {
    let mut out = String::new();
    for c in s.chars() {
        if out.push(c).is_err() {
            break;
        }
    }
    out
}
