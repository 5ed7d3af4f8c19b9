//! The USB CDC device both USB boards present. Shared by the board images (each includes this
//! file as a module).

use usb_device::bus::{UsbBus, UsbBusAllocator};
use usb_device::prelude::*;

/// pid.codes' test VID:PID (0x1209:0x0001), for devices not distributed; a product needs its own.
pub const VID_PID: (u16, u16) = (0x1209, 0x0001);

/// A CDC device on `bus` named `product`, with `serial_number` (the unit id) so the host can
/// tell units apart.
pub fn device<B: UsbBus>(
    bus: &'static UsbBusAllocator<B>,
    product: &'static str,
    serial_number: &'static str,
) -> UsbDevice<'static, B> {
    let strings = StringDescriptors::default().manufacturer("ohmsight").product(product).serial_number(serial_number);
    let builder = UsbDeviceBuilder::new(bus, UsbVidPid(VID_PID.0, VID_PID.1)).device_class(usbd_serial::USB_CLASS_CDC);
    // Three strings always fit the builder's table; without them the device still works.
    match builder.strings(&[strings]) {
        Ok(b) => b.build(),
        Err(_) => {
            UsbDeviceBuilder::new(bus, UsbVidPid(VID_PID.0, VID_PID.1)).device_class(usbd_serial::USB_CLASS_CDC).build()
        }
    }
}

/// `id` as 16 upper-case hex digits in `buf`.
pub fn hex_id(id: u64, buf: &'static mut [u8; 16]) -> &'static str {
    const HEX: &[u8; 16] = b"0123456789ABCDEF";
    for (i, b) in buf.iter_mut().enumerate() {
        *b = HEX[((id >> (60 - 4 * i)) & 0xf) as usize];
    }
    core::str::from_utf8(buf).unwrap_or("0")
}
