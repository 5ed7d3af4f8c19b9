//! Build automation for ohmsight as a library, so end-to-end tests can build and start board
//! images the same way `cargo xtask` does.
//!
//! - [`firmware`]: board images for their Cortex-M target (an installed rustup target, or
//!   Debian's offline tool-chain with `-Zbuild-std=core`), and their flash and RAM footprint.
//! - [`qemu`]: the `qemu-m4` image under `qemu-system-arm`, its UART on a pseudo-terminal.

pub mod firmware;
pub mod qemu;
