//! `ohmsight.survey.v1`: the survey document of earlier versions (results only, no evidence).
//!
//! Read, never written: `loading --from` still takes these files. Only the fields a reader of
//! results needs are typed; the rest of such a document is ignored.

use super::v2::IntervalDoc;
use serde::Deserialize;

/// The schema name.
pub const SCHEMA: &str = "ohmsight.survey.v1";

/// A v1 survey document, as far as it is read.
#[derive(Debug, Clone, PartialEq, Deserialize)]
pub struct Survey {
    /// [`SCHEMA`].
    pub schema: String,
    /// The board.
    pub board: Board,
    /// Pins.
    pub pins: Vec<Pin>,
    /// What cut the survey short.
    #[serde(default)]
    pub fault: Option<String>,
}

/// The `board` object of a v1 document.
#[derive(Debug, Clone, PartialEq, Deserialize)]
pub struct Board {
    /// Board name.
    pub name: String,
    /// Resolution, bits.
    pub bits: u8,
    /// Full scale, V.
    pub vref_volts: f64,
}

/// A pin of a v1 document.
#[derive(Debug, Clone, PartialEq, Deserialize)]
pub struct Pin {
    /// Channel.
    pub channel: u8,
    /// Label.
    #[serde(default)]
    pub label: String,
    /// Verdict.
    pub verdict: String,
    /// Why.
    #[serde(default)]
    pub reason: Option<String>,
    /// Source resistance, Ω.
    pub source_ohms: IntervalDoc,
    /// Node capacitance, F.
    pub node_farads: IntervalDoc,
    /// Source voltage, V.
    #[serde(default)]
    pub source_volts: Option<f64>,
}
