//! The link over USB CDC (OTG FS on PA11/PA12): the device is polled from the OTG_FS interrupt,
//! so enumeration and control requests are answered while an experiment runs; the main loop
//! reads and writes the serial class under a critical section.

use core::cell::RefCell;
use core::convert::Infallible;
use critical_section::Mutex;
use stm32f4xx_hal::otg_fs::{UsbBus, UsbBusType, USB};
use stm32f4xx_hal::pac::{interrupt, Interrupt, NVIC};
use usb_device::bus::UsbBusAllocator;
use usb_device::prelude::*;
use usbd_serial::SerialPort;

type Device = (UsbDevice<'static, UsbBus<USB>>, SerialPort<'static, UsbBus<USB>>);

static USB_LINK: Mutex<RefCell<Option<Device>>> = Mutex::new(RefCell::new(None));

fn poll(dev: &mut Device) {
    let (usb, serial) = dev;
    usb.poll(&mut [serial]);
}

/// The CDC port as an `embedded-io` byte stream.
pub struct UsbLink {
    _private: (),
}

impl UsbLink {
    /// Sets up the device and unmasks its interrupt. `serial` is the USB serial-number string
    /// (the unit id), so the host can tell units apart.
    pub fn start(usb: USB, serial_number: &'static str) -> Self {
        static mut EP_MEMORY: [u32; 1024] = [0; 1024];
        static mut BUS: Option<UsbBusAllocator<UsbBusType>> = None;
        // SAFETY: `start` is called once, before the interrupt is unmasked; nothing else names
        // these statics.
        let bus: &'static UsbBusAllocator<UsbBusType> = unsafe {
            let memory = &mut *core::ptr::addr_of_mut!(EP_MEMORY);
            let slot = &mut *core::ptr::addr_of_mut!(BUS);
            slot.insert(UsbBusType::new(usb, memory))
        };
        let serial = SerialPort::new(bus);
        let device = crate::cdc::device(bus, "ohmsight stm32f411", serial_number);
        critical_section::with(|cs| USB_LINK.borrow(cs).replace(Some((device, serial))));
        // SAFETY: the handler below only touches USB_LINK under a critical section.
        unsafe { NVIC::unmask(Interrupt::OTG_FS) };
        UsbLink { _private: () }
    }

    fn with<R>(f: impl FnOnce(&mut Device) -> R) -> Option<R> {
        critical_section::with(|cs| USB_LINK.borrow(cs).borrow_mut().as_mut().map(f))
    }
}

#[interrupt]
fn OTG_FS() {
    UsbLink::with(poll);
}

impl embedded_io::ErrorType for UsbLink {
    type Error = Infallible;
}

impl embedded_io::Read for UsbLink {
    fn read(&mut self, buf: &mut [u8]) -> Result<usize, Infallible> {
        if buf.is_empty() {
            return Ok(0);
        }
        loop {
            let got = Self::with(|(usb, serial)| {
                usb.poll(&mut [serial]);
                serial.read(buf).unwrap_or(0)
            });
            if let Some(n @ 1..) = got {
                return Ok(n);
            }
            // The interrupt wakes the core when the host sends.
            cortex_m::asm::wfi();
        }
    }
}

impl embedded_io::Write for UsbLink {
    fn write(&mut self, buf: &[u8]) -> Result<usize, Infallible> {
        if buf.is_empty() {
            return Ok(0);
        }
        loop {
            let sent = Self::with(|(usb, serial)| {
                let n = serial.write(buf).unwrap_or(0);
                usb.poll(&mut [serial]);
                n
            });
            if let Some(n @ 1..) = sent {
                return Ok(n);
            }
            // Full: the host drains it (the interrupt keeps the device going meanwhile).
            cortex_m::asm::wfi();
        }
    }

    fn flush(&mut self) -> Result<(), Infallible> {
        loop {
            let done = Self::with(|(usb, serial)| {
                let r = serial.flush();
                usb.poll(&mut [serial]);
                r.is_ok()
            });
            if done != Some(false) {
                return Ok(());
            }
            cortex_m::asm::wfi();
        }
    }
}
