//! Render: a survey report as text for the terminal, as the JSON document
//! ([`crate::record::v2`]) and as one self-contained HTML page; a comparison of two runs
//! ([`compare`]) as text and as a page.

pub mod compare;
pub mod html;
mod plot_marks;
pub mod stats_html;
pub mod stats_text;
pub mod text;

use crate::advice::{AdviceOptions, BoardAdvice};
use crate::judge::SurveyReport;
use crate::record::v2;

/// The survey as its `ohmsight.survey.v2` JSON document, pretty-printed, ending in a newline.
pub fn survey_json(r: &SurveyReport, advice: &BoardAdvice, opts: &AdviceOptions) -> String {
    let doc = v2::Survey::new(&r.record, r, advice, opts);
    // Serialising plain data into a string cannot fail.
    serde_json::to_string_pretty(&doc).unwrap_or_default() + "\n"
}
