//! The host side of ohmsight (always runs on the host, never on the target).
//!
//! The data flow, one module a step:
//!
//! | step | module | what it does |
//! |---|---|---|
//! | plan | [`plan`] | which experiments each pin gets, from what the earlier ones showed |
//! | run | [`run`] over [`link`] and [`session`] | executes the plan on a board, emits [`run::RunEvent`]s |
//! | record | [`record`] | the typed, versioned run record and its JSON documents |
//! | model and fit | [`model`], [`fit`], [`noise`] | the sampling network's forward model, the fit, noise records |
//! | analyse | [`analyse`] | a record's pins rebuilt, fitted and judged (live and `refit` alike) |
//! | judge | [`judge`], [`burst`] | verdicts, flags, settling, memory; a stiff pin's bound put to the test |
//! | advise | [`advice`], [`loading`], [`emit`] | sample times, fixes, the scan plan (and as C or Rust source); instrument loading |
//! | render | [`render`] | text, JSON, HTML |
//! | compare | [`compare`] | what changed on a unit between two analysed runs, and what it likely means |
//! | store | [`store`] | SQLite or PostgreSQL, committed experiment by experiment |
//!
//! Around them: [`limits`] and [`check`] (production checks: limits files, judging, JUnit), [`stats`]
//! (production history), [`compare`] (what changed on a unit), [`scenario`] (simulated boards),
//! [`simulate`] and [`ports`] (serial tools), [`output`] (writing the files a user names), [`units`].
pub mod advice;
pub mod analyse;
pub mod burst;
pub mod calibration;
pub mod check;
pub mod compare;
pub mod emit;
pub mod faulty;
pub mod fit;
pub mod judge;
pub mod limits;
pub mod link;
pub mod loading;
pub mod model;
pub mod noise;
pub mod output;
pub mod plan;
pub mod ports;
pub mod pull;
pub mod record;
pub mod render;
pub mod run;
pub mod scenario;
pub mod session;
#[cfg(unix)]
pub mod simulate;
pub mod stats;
pub mod store;
pub mod units;
pub mod wiring;

pub use judge::{Flag, PinReport, SurveyReport, Verdict};
pub use record::RunRecord;
pub use run::{survey, survey_with, RunEvent, SurveyError, SurveyOptions};
