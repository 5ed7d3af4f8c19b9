//! The host side of ohmsight (always runs on the host, never on the target).
pub mod fit;
pub mod html;
pub mod link;
pub mod model;
pub mod noise;
pub mod report;
pub mod scenario;
pub mod session;
pub mod survey;
pub mod units;
