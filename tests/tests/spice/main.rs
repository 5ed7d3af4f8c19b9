//! Cross-checks against ngspice, a circuit simulator nobody here wrote: the closed-form network
//! against its transient analysis, and the whole survey against a board whose physics ngspice
//! computes.
//!
//! ngspice is required: a machine without it fails these tests with a message saying what to
//! install (CI installs the Debian package `ngspice`).

mod agreement;
mod recovery;
