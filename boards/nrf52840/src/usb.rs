//! The link over USB CDC (the USBD peripheral through nrf-usbd). The device is polled by the
//! link's read and write calls: between requests and while answering. During a run (at most two
//! minutes, usually well under a second) the USBD hardware answers the host's data requests
//! with NAK by itself; a control request arriving then waits for the run to end.

use core::convert::Infallible;
use nrf52840_hal::usbd::{UsbPeripheral, Usbd};
use usb_device::device::UsbDevice;
use usbd_serial::SerialPort;

type Bus = Usbd<UsbPeripheral<'static>>;

/// The CDC port as an `embedded-io` byte stream.
pub struct UsbLink {
    device: UsbDevice<'static, Bus>,
    serial: SerialPort<'static, Bus>,
}

impl UsbLink {
    /// Sets up the device on `bus`; `serial_number` (the unit id) lets the host tell units apart.
    pub fn new(bus: &'static usb_device::bus::UsbBusAllocator<Bus>, serial_number: &'static str) -> Self {
        let serial = SerialPort::new(bus);
        let device = crate::cdc::device(bus, "ohmsight nrf52840", serial_number);
        UsbLink { device, serial }
    }

    fn poll(&mut self) {
        self.device.poll(&mut [&mut self.serial]);
    }
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
            self.poll();
            if let Ok(n @ 1..) = self.serial.read(buf) {
                return Ok(n);
            }
        }
    }
}

impl embedded_io::Write for UsbLink {
    fn write(&mut self, buf: &[u8]) -> Result<usize, Infallible> {
        if buf.is_empty() {
            return Ok(0);
        }
        loop {
            let sent = self.serial.write(buf);
            self.poll();
            if let Ok(n @ 1..) = sent {
                return Ok(n);
            }
        }
    }

    fn flush(&mut self) -> Result<(), Infallible> {
        loop {
            let done = self.serial.flush().is_ok();
            self.poll();
            if done {
                return Ok(());
            }
        }
    }
}
