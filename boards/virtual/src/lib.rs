//! A simulated board for ohmsight.
//!
//! What is wired to each pin comes from a [`Scenario`]: a Thevenin source (or nothing: a floating
//! pin) and a node capacitance. The board solves the sampling network exactly with
//! [`ohmsight_protocol::analog`], and adds what a real converter does that the host's fit does
//! *not* model, so fitting it is not circular:
//!
//! - unit-to-unit spread of the hold capacitance and switch resistance around the profile's
//!   nominal values (drawn within the profile's tolerance),
//! - offset, gain error and a bowed integral non-linearity,
//! - ADC noise slightly above the datasheet figure, kT/C noise on the hold capacitor,
//! - charge injection of the sampling switch (a fixed pedestal on the hold capacitor and random
//!   kicks on the node), residual charge left on the hold capacitor by the conversion,
//! - input leakage on every pin, firmware overhead and jitter between conversions,
//! - on floating pins: leakage drift, switching-noise kicks, capacitively coupled mains hum and
//!   ESD-diode clamping; on driven pins optional hum and white noise at the source.
//!
//! Time is virtual ([`VirtualClock`]) and the noise comes from a seeded generator, so a scenario
//! and a seed always give the same codes.
#![cfg_attr(not(any(test, feature = "std")), no_std)]
#![deny(missing_docs)]

mod board;
mod scenario;

pub use board::{Realism, VirtualBoard, VirtualClock, VirtualDelay, VirtualError, PRECHARGE_HIGH, PRECHARGE_LOW};
pub use scenario::{BoardProfile, PinSetup, Scenario, Source, MAX_PINS};
