//! The board's clock and delays: TIM2 counts microseconds (a 32-bit timer, extended to 64 bits
//! here), the core's DWT cycle counter times the engine's waits.

use crate::reg;
use cortex_m::peripheral::{DCB, DWT};
use embedded_hal::delay::DelayNs;

const RCC_APB1ENR: usize = 0x4002_3840;
const RCC_APB1ENR_TIM2EN: u32 = 1 << 0;
const TIM2: usize = 0x4000_0000;
const TIM2_CR1: usize = TIM2;
const TIM2_EGR: usize = TIM2 + 0x14;
const TIM2_CNT: usize = TIM2 + 0x24;
const TIM2_PSC: usize = TIM2 + 0x28;
const TIM2_ARR: usize = TIM2 + 0x2c;

/// A microsecond clock on TIM2, read as picoseconds.
pub struct MicrosClock {
    last: u32,
    high: u64,
}

impl MicrosClock {
    /// Starts TIM2 counting at 1 MHz from a timer clock of `timer_hz`.
    ///
    /// # Safety
    /// TIM2 must not be used by anything else.
    pub unsafe fn start(timer_hz: u32) -> Self {
        // SAFETY: TIM2 is ours (caller's promise).
        unsafe {
            reg::modify(RCC_APB1ENR, |v| v | RCC_APB1ENR_TIM2EN);
            let _ = reg::read(RCC_APB1ENR);
            reg::write(TIM2_PSC, timer_hz / 1_000_000 - 1);
            reg::write(TIM2_ARR, u32::MAX);
            reg::write(TIM2_EGR, 1); // load the prescaler now
            reg::write(TIM2_CNT, 0);
            reg::write(TIM2_CR1, 1);
        }
        MicrosClock { last: 0, high: 0 }
    }

    /// Microseconds since start. Must be called at least once every 71 minutes (the engine
    /// calls it at the start and end of every run, and no run is longer than 2 minutes).
    pub fn micros(&mut self) -> u64 {
        // SAFETY: TIM2 is ours (see `start`).
        let now = unsafe { reg::read(TIM2_CNT) };
        if now < self.last {
            self.high += 1 << 32;
        }
        self.last = now;
        self.high | u64::from(now)
    }

    /// Picoseconds since start (microsecond resolution).
    pub fn ps(&mut self) -> u64 {
        self.micros() * 1_000_000
    }
}

/// Busy-waits on the DWT cycle counter.
pub struct CycleDelay {
    core_hz: u32,
}

impl CycleDelay {
    /// Enables the cycle counter; `core_hz` is the core clock.
    pub fn new(dcb: &mut DCB, dwt: &mut DWT, core_hz: u32) -> Self {
        dcb.enable_trace();
        DWT::unlock();
        dwt.enable_cycle_counter();
        CycleDelay { core_hz }
    }

    fn wait_cycles(cycles: u32) {
        if cfg!(feature = "netduinoplus2") {
            // QEMU models no cycle counter: a calibrated spin loop stands in.
            cortex_m::asm::delay(cycles);
            return;
        }
        let start = DWT::cycle_count();
        while DWT::cycle_count().wrapping_sub(start) < cycles {}
    }
}

impl DelayNs for CycleDelay {
    fn delay_ns(&mut self, ns: u32) {
        // In pieces of at most 1 ms, so the cycle count fits 32 bits at any core clock.
        let mut left = ns;
        while left > 0 {
            let piece = left.min(1_000_000);
            let cycles = (u64::from(piece) * u64::from(self.core_hz)).div_ceil(1_000_000_000);
            Self::wait_cycles(cycles as u32);
            left -= piece;
        }
    }
}
