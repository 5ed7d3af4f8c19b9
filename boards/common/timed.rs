//! A converter and a free-running 1 MHz, 32-bit counter together: the engine's front end with
//! the board's own clock. Shared by the board images (each includes this file as a module).

use ohmsight_firmware::AnalogFrontEnd;

/// A free-running counter of microseconds that wraps at 2^32.
pub trait MicrosCounter {
    /// The count now.
    fn now(&mut self) -> u32;
}

/// The converter `adc`, with `counter` extended to 64 bits as the board's clock.
pub struct Timed<A, C> {
    adc: A,
    counter: C,
    last: u32,
    high: u64,
}

impl<A, C> Timed<A, C> {
    /// Both parts; the clock starts wherever the counter is.
    pub fn new(adc: A, counter: C) -> Self {
        Timed { adc, counter, last: 0, high: 0 }
    }
}

impl<A: AnalogFrontEnd, C: MicrosCounter> AnalogFrontEnd for Timed<A, C> {
    type Error = A::Error;

    fn convert(&mut self, channel: u8, sample: u8) -> Result<u16, A::Error> {
        self.adc.convert(channel, sample)
    }

    /// Microseconds as ps. The counter must be read at least once per wrap (71 minutes): the
    /// engine reads it at each run's start and end, and no run is longer than 2 minutes.
    fn clock_ps(&mut self) -> Option<u64> {
        let now = self.counter.now();
        if now < self.last {
            self.high += 1 << 32;
        }
        self.last = now;
        Some((self.high | u64::from(now)) * 1_000_000)
    }
}
