//! The board's clock: TIM2 counting microseconds (32 bits; `Timed` extends it to 64).

use crate::reg;
use crate::timed::MicrosCounter;

const RCC_APB1ENR: usize = 0x4002_3840;
const RCC_APB1ENR_TIM2EN: u32 = 1 << 0;
const TIM2: usize = 0x4000_0000;
const TIM2_CR1: usize = TIM2;
const TIM2_EGR: usize = TIM2 + 0x14;
const TIM2_CNT: usize = TIM2 + 0x24;
const TIM2_PSC: usize = TIM2 + 0x28;
const TIM2_ARR: usize = TIM2 + 0x2c;

/// TIM2 at 1 MHz.
pub struct Tim2Micros {
    _private: (),
}

impl Tim2Micros {
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
        Tim2Micros { _private: () }
    }
}

impl MicrosCounter for Tim2Micros {
    fn now(&mut self) -> u32 {
        // SAFETY: TIM2 is ours (see `start`).
        unsafe { reg::read(TIM2_CNT) }
    }
}
