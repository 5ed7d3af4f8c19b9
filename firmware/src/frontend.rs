//! The board-facing trait.

use crate::BoardDescription;
use ohmsight_protocol::{ErrorKind, Pull, SimPart};

/// How far a simulated set-up has been loaded (see [`AnalogFrontEnd::simulate`]).
#[derive(Debug, Clone, PartialEq)]
// Returned once per set-up part, and there is no heap to box it in on the target.
#[allow(clippy::large_enum_variant)]
pub enum SetupProgress {
    /// Waiting for this many more pins.
    Pending(u8),
    /// The new set-up is live; the engine describes the board this way from now on.
    Ready(BoardDescription),
}

/// What kind of failure a front end reports (in the style of embedded-hal's error kinds).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[non_exhaustive]
pub enum FrontEndErrorKind {
    /// The channel does not exist on this converter.
    BadChannel,
    /// The sample-time index is not supported.
    BadSampleTime,
    /// The converter did not finish (timeout, overrun).
    Timeout,
    /// Anything else.
    Other,
}

/// Error type of an [`AnalogFrontEnd`].
pub trait FrontEndError: core::fmt::Debug {
    /// The kind of failure.
    fn kind(&self) -> FrontEndErrorKind;
}

impl FrontEndError for core::convert::Infallible {
    fn kind(&self) -> FrontEndErrorKind {
        match *self {}
    }
}

/// One SAR ADC as the experiments need it.
///
/// `convert` must sample `channel` for exactly the sample time at position `sample` of the
/// board's table, then convert, and return the raw code; it returns when the conversion is done.
/// Nothing else may be converted in between, or the host's model of "the previous channel" is
/// wrong.
pub trait AnalogFrontEnd {
    /// Error type.
    type Error: FrontEndError;

    /// One conversion.
    fn convert(&mut self, channel: u8, sample: u8) -> Result<u16, Self::Error>;

    /// The board's own clock, ps, if it has one (a monotonic timer; the virtual clock of a
    /// simulated board). Without one (the default) the engine counts the nominal duration of
    /// everything it has run, which is what it reports as its clock.
    fn clock_ps(&mut self) -> Option<u64> {
        None
    }

    /// Takes one part of a simulated set-up. Only a simulated board can be rewired over the
    /// link; a real converter keeps this default, which refuses.
    fn simulate(&mut self, part: &SimPart) -> Result<SetupProgress, ErrorKind> {
        let _ = part;
        Err(ErrorKind::Unsupported)
    }

    /// Connects `pull` to `channel` (`None`: releases every pull). The engine calls it only for
    /// a pin the board's description opts in for pulls, and releases the pull before the
    /// experiment ends. A converter without pulls keeps this default, which refuses to pull.
    fn set_pull(&mut self, channel: u8, pull: Option<Pull>) -> Result<(), ErrorKind> {
        let _ = channel;
        match pull {
            None => Ok(()),
            Some(_) => Err(ErrorKind::Unsupported),
        }
    }
}

impl<T: AnalogFrontEnd + ?Sized> AnalogFrontEnd for &mut T {
    type Error = T::Error;
    fn convert(&mut self, channel: u8, sample: u8) -> Result<u16, Self::Error> {
        T::convert(self, channel, sample)
    }
    fn clock_ps(&mut self) -> Option<u64> {
        T::clock_ps(self)
    }
    fn simulate(&mut self, part: &SimPart) -> Result<SetupProgress, ErrorKind> {
        T::simulate(self, part)
    }
    fn set_pull(&mut self, channel: u8, pull: Option<Pull>) -> Result<(), ErrorKind> {
        T::set_pull(self, channel, pull)
    }
}
