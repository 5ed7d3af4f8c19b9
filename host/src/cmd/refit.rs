//! `ohmsight refit`: analyse a stored run again from its evidence.

use super::common::{print_analysed, DbArgs};
use super::Failure;
use ohmsight::advice::AdviceOptions;
use ohmsight::record::{profile_file, read_document, Document, RunRecord};
use std::path::{Path, PathBuf};

pub const EXAMPLES: &str = "Examples:
  ohmsight survey --json > run.json
  ohmsight refit run.json                          the same numbers again, from the evidence
  ohmsight refit 01KBX3 --profile unit-0042.toml   a stored run under calibrated values
  ohmsight refit run.json --json > refit.json

A profile file is TOML with any of the record's profile keys, in SI units:
  hold_farads = 4.3e-12        hold_tolerance = 0.05
  switch_ohms = 5.1e3          switch_tolerance = 0.1
  adc_noise_lsb = 0.6          leakage_amps = 1e-11
  vref_volts = 3.3             conversion_ps = 400000
  sample_ps = [...]            (one per sample-time setting of the board)

The refit is printed, not stored. Exit status: 0 analysed; 2 bad input (a file that is not a
survey document, a v1 document (it carries no evidence), an unknown run id, a bad profile
file); 1 the database could not be read.";

#[derive(clap::Args)]
pub struct Args {
    /// A survey document (the JSON of `survey --json`) or the id of a stored run (a unique
    /// prefix of at least 6 characters will do).
    #[arg(value_name = "FILE|RUN_ID")]
    source: String,
    /// Converter values to analyse under instead of those the run used (TOML, see below).
    #[arg(long, value_name = "FILE.toml")]
    profile: Option<PathBuf>,
    /// Print one JSON document (schema ohmsight.survey.v2) instead of the table.
    #[arg(long)]
    json: bool,
    /// Also write the result as one self-contained HTML page.
    #[arg(long, value_name = "FILE")]
    html: Option<PathBuf>,
    /// The smallest change you need to see on a pin, volts (as for survey).
    #[arg(long, value_name = "VOLTS", value_parser = super::common::positive_volts)]
    resolve: Option<f64>,
    #[command(flatten)]
    db: DbArgs,
}

/// The record in a survey document file.
pub fn record_from_file(path: &Path) -> Result<RunRecord, Failure> {
    let text = std::fs::read_to_string(path)
        .map_err(|e| Failure::bad_input(format!("cannot read {}: {e}", path.display())))?;
    match read_document(&text).map_err(|e| Failure::bad_input(format!("{}:{e}", path.display())))? {
        Document::V2(doc) => Ok(doc.record()),
        Document::V1(_) => Err(Failure::bad_input(format!(
            "{}: an ohmsight.survey.v1 document holds results only, no evidence to analyse again; \
             survey the board again with this version",
            path.display()
        ))),
    }
}

/// The record `source` names: a survey document file, else a run id (or unique prefix) that
/// `load` looks up in the database (so it is opened only when needed).
pub fn load_record(source: &str, load: impl FnOnce(&str) -> Result<RunRecord, Failure>) -> Result<RunRecord, Failure> {
    let path = Path::new(source);
    if path.is_file() {
        record_from_file(path)
    } else if source.contains(['/', '.']) {
        Err(Failure::bad_input(format!("{source}: no such file (give a survey document or a run id)")))
    } else {
        load(source)
    }
}

pub fn run(args: Args) -> Result<(), Failure> {
    let mut record = load_record(&args.source, |id| Ok(args.db.open()?.load_run(id)?))?;
    if let Some(file) = &args.profile {
        let text = std::fs::read_to_string(file)
            .map_err(|e| Failure::bad_input(format!("cannot read the profile file {}: {e}", file.display())))?;
        record.profile = profile_file::apply(&record.profile, &file.display().to_string(), &text)
            .map_err(|e| Failure::bad_input(e.to_string()))?;
    }
    print_analysed(&record, &AdviceOptions { resolve_volts: args.resolve }, args.json, args.html.as_deref())
}
