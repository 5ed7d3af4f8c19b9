//! Wire messages, framing and the sampling-network model shared by the ohmsight firmware,
//! the simulated board and the host.
//!
//! - [`frame`]: postcard payload + CRC-32, COBS-encoded, `0x00`-delimited frames.
//! - [`messages`]: requests (host → board) and responses (board → host), versioned by
//!   [`PROTOCOL_VERSION`].
//! - [`sequence`]: the exact conversion sequence of every experiment, one implementation that the
//!   firmware executes and the host simulates, so "the previous channel" is always known.
//! - [`analog`]: the sampling network of one ADC channel solved exactly per phase (closed-form
//!   2×2 matrix exponential, no ODE stepping).
//!
//! - [`fuzz`] (feature `fuzz`, host-side): random-input generators and the frame and message
//!   fuzz targets, shared by the unit tests and `cargo xtask fuzz`.
//!
//! `no_std`; the `std` feature adds `std::error::Error` impls.
#![cfg_attr(not(any(test, feature = "std")), no_std)]
#![deny(missing_docs)]

pub mod analog;
pub mod frame;
#[cfg(any(test, feature = "fuzz"))]
pub mod fuzz;
pub mod messages;
pub mod sequence;

pub use frame::{
    decode_frame, decode_message, decode_payload, encode_frame, FrameAccumulator, FrameError, MAX_FRAME, MAX_PAYLOAD,
};
pub use messages::*;
pub use sequence::{Step, StepRecord, Steps, Timing};

/// Version of the wire protocol. The host refuses a board that answers with another version
/// unless told to try anyway.
///
/// History: 1 the first release; 2 added [`Request::Simulate`] (loading a set-up into a
/// simulated board), [`Response::SimLoaded`] and [`ErrorKind::BadSetup`]; 3 gave every
/// request a `seq` its answer echoes, made [`Response::Done`] a [`RunReport`] (the board's run
/// number, clock and conversions), tagged data chunks with the run number, and added
/// [`Request::Resend`], [`Request::Runs`], [`Response::Runs`] and [`ErrorKind::Gone`]; 4 added
/// [`Experiment::ScanRecord`] (the noise records of many pins at once); 5 added the simulated
/// unit's departure from its datasheet ([`SimBoard::unit_hold_ppm`], [`SimBoard::unit_switch_ppm`])
/// and which pins may be pulled or driven ([`ChannelInfo::pull`], [`ChannelInfo::drive`]); 6
/// added [`Experiment::PullTest`] and the pull a [`Step`] carries.
pub const PROTOCOL_VERSION: u16 = 6;
