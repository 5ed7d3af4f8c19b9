//! Checks against published tables and textbook formulas, each named beside its check.
//!
//! - the minimum sample time against a 12-bit SAADC's acquisition-time table;
//! - the minimum sample time against the worked table of the RC input-resistance rule;
//! - kT/C noise frozen on the simulated board's hold capacitor;
//! - quantization noise of the simulated board's converter, and the fit's noise model.

mod noise;
mod tables;
