//! The ohmsight firmware: an experiment engine and command loop that runs on the board.
//!
//! The engine is generic over the board's [`AnalogFrontEnd`] (one conversion of a chosen channel
//! at a chosen sample-time index), an `embedded-hal` [`DelayNs`](embedded_hal::delay::DelayNs)
//! and an `embedded-io` byte link. It decodes framed [`Request`](ohmsight_protocol::Request)s,
//! runs the experiment sequences of [`ohmsight_protocol::sequence`] and streams integer
//! aggregates back. Bad requests get an error record; nothing here panics, allocates or uses
//! floating point. Board crates are tiny: they build the front end and call [`Engine::serve`].
#![cfg_attr(not(any(test, feature = "std")), no_std)]
#![deny(missing_docs)]

mod engine;
mod frontend;
#[cfg(any(test, feature = "fuzz"))]
pub mod fuzz;

pub use engine::{BoardDescription, Engine, FIRMWARE_VERSION, MAX_REPLY_FRAMES};
pub use frontend::{AnalogFrontEnd, FrontEndError, FrontEndErrorKind, SetupProgress};
