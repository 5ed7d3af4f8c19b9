//! Volatile access to memory-mapped registers by address. Shared by the board images (each
//! includes this file as a module).
//!
//! # Safety
//! Every function takes the address of a 32-bit peripheral register of this chip; the caller
//! owns that peripheral.

/// Reads a register.
#[inline(always)]
pub unsafe fn read(addr: usize) -> u32 {
    // SAFETY: the caller passes the address of a register it owns (module docs).
    unsafe { core::ptr::read_volatile(addr as *const u32) }
}

/// Writes a register.
#[inline(always)]
pub unsafe fn write(addr: usize, value: u32) {
    // SAFETY: as for `read`.
    unsafe { core::ptr::write_volatile(addr as *mut u32, value) }
}

/// Read-modify-write of a register.
#[inline(always)]
#[allow(dead_code)] // not every board needs it
pub unsafe fn modify(addr: usize, f: impl FnOnce(u32) -> u32) {
    // SAFETY: as for `read`.
    unsafe { write(addr, f(read(addr))) }
}
