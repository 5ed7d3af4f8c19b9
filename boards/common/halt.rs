//! The board images' panic handler. Shared by the board images (each includes this file as a
//! module).

#[panic_handler]
fn panic(_info: &core::panic::PanicInfo) -> ! {
    #[cfg(feature = "defmt")]
    defmt::error!("panic: {}", defmt::Display2Format(_info));
    // Nothing here should panic; if it does, stop answering rather than answer wrongly.
    loop {
        cortex_m::asm::nop();
    }
}
