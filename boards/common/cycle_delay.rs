//! The engine's waits on a Cortex-M4: busy-waiting on the DWT cycle counter. Shared by the board
//! images (each includes this file as a module).

use cortex_m::peripheral::{DCB, DWT};
use embedded_hal::delay::DelayNs;

/// Busy-waits on the DWT cycle counter (or, where none is modelled, a spin loop).
pub struct CycleDelay {
    core_hz: u32,
    counter: bool,
}

impl CycleDelay {
    /// Enables the cycle counter; `core_hz` is the core clock.
    #[allow(dead_code)] // a board's QEMU build spins instead
    pub fn new(dcb: &mut DCB, dwt: &mut DWT, core_hz: u32) -> Self {
        dcb.enable_trace();
        DWT::unlock();
        dwt.enable_cycle_counter();
        CycleDelay { core_hz, counter: true }
    }

    /// Waits with a spin loop of about one core cycle per count instead: for emulators that
    /// model no cycle counter (QEMU), where waits only need to pass.
    #[allow(dead_code)] // only the QEMU build of a board uses it
    pub fn spinning(core_hz: u32) -> Self {
        CycleDelay { core_hz, counter: false }
    }

    fn wait_cycles(&self, cycles: u32) {
        if !self.counter {
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
            self.wait_cycles(cycles as u32);
            left -= piece;
        }
    }
}
