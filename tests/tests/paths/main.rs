//! The same board reached over different paths: in-process and over a pseudo-terminal to the
//! `ohmsight simulate` command, with bad input on the link, and the `ports` listing.
//!
//! These tests run the real command (built from host/src/main.rs as `ohmsight-under-test`).
//! Pseudo-terminals are a Unix thing: elsewhere this target is empty.
#![cfg(unix)]

mod agreement;
mod commands;
mod faults;

/// The `ohmsight` command under test.
pub fn exe() -> &'static std::path::Path {
    std::path::Path::new(env!("CARGO_BIN_EXE_ohmsight-under-test"))
}

/// A small invented bench board: a sensor divider, an open header pin and a filtered battery tap.
pub const BENCH_TOML: &str = "name = \"paths bench\"\nseed = 11\n\
[[pin]]\nchannel = 0\nlabel = \"divider 47k\"\nvolts = 1.2\nohms = 47e3\nnode_farads = 10e-12\n\
[[pin]]\nchannel = 1\nlabel = \"open header\"\nfloating = true\nnode_farads = 8e-12\n\
[[pin]]\nchannel = 2\nlabel = \"battery tap\"\nvolts = 2.4\nohms = 1e6\nnode_farads = 10e-9\n";
