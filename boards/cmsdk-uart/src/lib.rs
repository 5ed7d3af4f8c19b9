//! A polled driver for Arm's CMSDK APB UART, as an `embedded-io` byte link.
//!
//! The CMSDK (Cortex-M System Design Kit) UART is a minimal 8N1 UART with one-byte transmit and
//! receive buffers. QEMU emulates it on its MPS2 machines (`mps2-an385`, `mps2-an386`, …), and
//! Cortex-M0/M3/M4 designs built from the kit carry it. Register map (from the kit's technical
//! reference manual, as remembered; QEMU's `cmsdk-apb-uart` model agrees):
//!
//! | offset | register | bits used here |
//! |---|---|---|
//! | 0x00 | DATA | 7:0 the byte |
//! | 0x04 | STATE | 0 transmit buffer full, 1 receive buffer full |
//! | 0x08 | CTRL | 0 transmit enable, 1 receive enable |
//! | 0x10 | BAUDDIV | clock divider, at least 16 |
//!
//! `no_std`, no interrupts: the engine polls, which is all a command loop needs.
#![no_std]
#![deny(missing_docs)]

use core::convert::Infallible;
use core::ptr::{read_volatile, write_volatile};

const DATA: usize = 0x00;
const STATE: usize = 0x04;
const CTRL: usize = 0x08;
const BAUDDIV: usize = 0x10;
const STATE_TX_FULL: u32 = 1 << 0;
const STATE_RX_FULL: u32 = 1 << 1;
const CTRL_TX_ENABLE: u32 = 1 << 0;
const CTRL_RX_ENABLE: u32 = 1 << 1;
/// The smallest divider the UART accepts (16 clocks per bit).
pub const MIN_BAUDDIV: u32 = 16;

/// One CMSDK APB UART.
pub struct CmsdkUart {
    base: usize,
}

impl CmsdkUart {
    /// Takes the UART at `base`, enables transmit and receive and sets the bit rate to
    /// `clock_hz / baud` (at least [`MIN_BAUDDIV`]).
    ///
    /// # Safety
    /// `base` must be the address of a CMSDK APB UART that nothing else drives while this value
    /// lives.
    pub unsafe fn new(base: usize, clock_hz: u32, baud: u32) -> Self {
        let uart = Self { base };
        let div = (clock_hz / baud.max(1)).max(MIN_BAUDDIV);
        uart.write_reg(BAUDDIV, div);
        uart.write_reg(CTRL, CTRL_TX_ENABLE | CTRL_RX_ENABLE);
        uart
    }

    fn read_reg(&self, offset: usize) -> u32 {
        // SAFETY: `new`'s caller promised a UART at `base`; every offset is one of its registers.
        unsafe { read_volatile((self.base + offset) as *const u32) }
    }

    fn write_reg(&self, offset: usize, value: u32) {
        // SAFETY: as in `read_reg`.
        unsafe { write_volatile((self.base + offset) as *mut u32, value) }
    }

    /// A received byte, if one is waiting.
    pub fn try_read(&mut self) -> Option<u8> {
        if self.read_reg(STATE) & STATE_RX_FULL != 0 {
            Some(self.read_reg(DATA) as u8)
        } else {
            None
        }
    }

    /// Sends one byte, waiting while the transmit buffer is full.
    pub fn write_byte(&mut self, byte: u8) {
        while self.read_reg(STATE) & STATE_TX_FULL != 0 {}
        self.write_reg(DATA, u32::from(byte));
    }
}

impl embedded_io::ErrorType for CmsdkUart {
    type Error = Infallible;
}

impl embedded_io::Read for CmsdkUart {
    /// Waits for the first byte, then takes what else has already arrived.
    fn read(&mut self, buf: &mut [u8]) -> Result<usize, Infallible> {
        if buf.is_empty() {
            return Ok(0);
        }
        let first = loop {
            if let Some(b) = self.try_read() {
                break b;
            }
        };
        buf[0] = first;
        let mut n = 1;
        while n < buf.len() {
            match self.try_read() {
                Some(b) => {
                    buf[n] = b;
                    n += 1;
                }
                None => break,
            }
        }
        Ok(n)
    }
}

impl embedded_io::Write for CmsdkUart {
    fn write(&mut self, buf: &[u8]) -> Result<usize, Infallible> {
        for &b in buf {
            self.write_byte(b);
        }
        Ok(buf.len())
    }

    fn flush(&mut self) -> Result<(), Infallible> {
        while self.read_reg(STATE) & STATE_TX_FULL != 0 {}
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use embedded_io::{Read, Write};

    /// The register block in plain memory: checks which offsets and bits the driver touches.
    #[repr(C)]
    #[derive(Default)]
    struct Regs {
        data: u32,
        state: u32,
        ctrl: u32,
        int: u32,
        bauddiv: u32,
    }

    #[test]
    fn set_up_receive_and_transmit_touch_the_documented_registers() {
        let mut regs = Regs::default();
        let base = &mut regs as *mut Regs as usize;
        // SAFETY: `regs` outlives the driver and nothing else touches it meanwhile.
        let mut uart = unsafe { CmsdkUart::new(base, 25_000_000, 115_200) };
        // SAFETY: reading back plain memory the driver wrote through volatile pointers.
        let (ctrl, div) = unsafe { (read_volatile(&regs.ctrl), read_volatile(&regs.bauddiv)) };
        assert_eq!(ctrl, 0b11, "transmit and receive enabled");
        assert_eq!(div, 217, "25 MHz / 115200");
        assert_eq!(uart.try_read(), None, "nothing waiting while STATE bit 1 is clear");
        // SAFETY: as above.
        unsafe {
            write_volatile(&mut regs.state, STATE_RX_FULL);
            write_volatile(&mut regs.data, 0x15a);
        }
        let mut one = [0u8; 1];
        assert_eq!(uart.read(&mut one), Ok(1));
        assert_eq!(one[0], 0x5a, "only DATA's low byte");
        // SAFETY: as above.
        unsafe { write_volatile(&mut regs.state, 0) };
        assert_eq!(uart.write(b"hi"), Ok(2));
        // SAFETY: as above.
        assert_eq!(unsafe { read_volatile(&regs.data) }, u32::from(b'i'));
        assert_eq!(uart.flush(), Ok(()));
        // SAFETY: `new` with a divider below the minimum on the same block.
        let _slow = unsafe { CmsdkUart::new(base, 1_000, 115_200) };
        // SAFETY: as above.
        assert_eq!(unsafe { read_volatile(&regs.bauddiv) }, MIN_BAUDDIV);
    }
}
