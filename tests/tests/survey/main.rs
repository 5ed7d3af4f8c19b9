//! End-to-end surveys of the simulated board, checked against the truth the scenario wired.
//!
//! The simulated board adds what the fit does not model (unit spread of the hold capacitor
//! and switch, converter offset/gain/INL, kT/C noise, charge injection, leakage, firmware
//! overhead), so these checks are not the fit agreeing with itself.

mod accuracy;
mod calibration;
mod demo;
mod faults;
mod honesty;
mod link;
mod pull;
mod verdicts;
