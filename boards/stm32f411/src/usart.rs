//! USART2 at register level (PA2 TX, PA3 RX, alternate function 7), polled: the link when the
//! image is built with the `usart2` feature.

use crate::reg;
use core::convert::Infallible;

const RCC_AHB1ENR: usize = 0x4002_3830;
const RCC_APB1ENR: usize = 0x4002_3840;
const GPIOA_MODER: usize = 0x4002_0000;
const GPIOA_AFRL: usize = 0x4002_0020;
const USART2: usize = 0x4000_4400;
const SR: usize = USART2;
const DR: usize = USART2 + 0x04;
const BRR: usize = USART2 + 0x08;
const CR1: usize = USART2 + 0x0c;

const SR_RXNE: u32 = 1 << 5;
const SR_TXE: u32 = 1 << 7;
const SR_TC: u32 = 1 << 6;
const SR_ORE: u32 = 1 << 3;
const CR1_UE: u32 = 1 << 13;
const CR1_TE: u32 = 1 << 3;
const CR1_RE: u32 = 1 << 2;

/// USART2, owned.
pub struct Usart2 {
    _private: (),
}

impl Usart2 {
    /// 8N1 at `baud` from a peripheral clock of `pclk1_hz`, on PA2/PA3.
    ///
    /// # Safety
    /// USART2, PA2 and PA3 must not be used by anything else.
    pub unsafe fn new(pclk1_hz: u32, baud: u32) -> Self {
        // SAFETY: the caller owns USART2 and the two pins.
        unsafe {
            reg::modify(RCC_AHB1ENR, |v| v | 1); // GPIOA
            reg::modify(RCC_APB1ENR, |v| v | 1 << 17); // USART2
            let _ = reg::read(RCC_APB1ENR);
            // PA2, PA3: alternate function 7.
            reg::modify(GPIOA_AFRL, |v| (v & !(0xff << 8)) | (0x77 << 8));
            reg::modify(GPIOA_MODER, |v| (v & !(0b1111 << 4)) | (0b1010 << 4));
            // 16× oversampling: BRR holds the divider in sixteenths.
            reg::write(BRR, (pclk1_hz + baud / 2) / baud);
            reg::write(CR1, CR1_UE | CR1_TE | CR1_RE);
        }
        Usart2 { _private: () }
    }
}

impl embedded_io::ErrorType for Usart2 {
    type Error = Infallible;
}

impl embedded_io::Read for Usart2 {
    /// Waits for the first byte, then takes what has arrived.
    fn read(&mut self, buf: &mut [u8]) -> Result<usize, Infallible> {
        if buf.is_empty() {
            return Ok(0);
        }
        let mut n = 0;
        loop {
            // SAFETY: USART2 is ours (see `new`).
            let sr = unsafe { reg::read(SR) };
            if sr & (SR_RXNE | SR_ORE) != 0 {
                // Reading DR after SR clears RXNE and an overrun; a lost byte shows up as a bad
                // frame, which the host re-sends.
                buf[n] = unsafe { reg::read(DR) } as u8;
                n += 1;
                if n == buf.len() {
                    return Ok(n);
                }
            } else if n > 0 {
                return Ok(n);
            }
        }
    }
}

impl embedded_io::Write for Usart2 {
    fn write(&mut self, buf: &[u8]) -> Result<usize, Infallible> {
        for &b in buf {
            // SAFETY: USART2 is ours (see `new`).
            unsafe {
                while reg::read(SR) & SR_TXE == 0 {}
                reg::write(DR, u32::from(b));
            }
        }
        Ok(buf.len())
    }

    fn flush(&mut self) -> Result<(), Infallible> {
        // SAFETY: USART2 is ours (see `new`).
        unsafe { while reg::read(SR) & SR_TC == 0 {} }
        Ok(())
    }
}
