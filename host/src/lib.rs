//! The host side of ohmsight (always runs on the host, never on the target).
pub mod advice;
pub mod fit;
pub mod html;
pub mod link;
pub mod loading;
pub mod model;
pub mod noise;
pub mod output;
pub mod ports;
pub mod report;
pub mod scenario;
pub mod session;
#[cfg(unix)]
pub mod simulate;
pub mod survey;
pub mod units;
