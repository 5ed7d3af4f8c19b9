//! `ohmsight plan`: the verified scan plan of a stored survey as source code for firmware.

use super::common::{print, write_output, DbArgs};
use super::refit::load_record;
use super::Failure;
use ohmsight::advice::AdviceOptions;
use ohmsight::emit::{self, Language};
use std::path::PathBuf;

pub const EXAMPLES: &str = "Examples:
  ohmsight survey --json > run.json
  ohmsight plan --emit c --from run.json --out scan_plan.h
  ohmsight plan --emit rust --from 01KBX3 --out src/scan_plan.rs

C: a C99 header with `struct ohmsight_scan_step` (channel, sample_setting, sample_ns, dummies),
the table `ohmsight_scan_plan[OHMSIGHT_SCAN_STEPS]`, OHMSIGHT_SCAN_IDLE_NS and
OHMSIGHT_SCAN_PERIOD_NS. Rust: a module (no_std, no dependencies) with `struct ScanStep`,
`SCAN_PLAN`, `IDLE_NS` and `SCAN_PERIOD_NS`. Times are whole nanoseconds rounded up.

The run is analysed again from its evidence (as `refit` does), so the plan is the one
`survey` printed. Only a verified plan is emitted: a complete survey whose every planned pin
stays within ½ LSB.

Exit status: 0 written; 2 bad input (a file that is not a survey document, an unknown run id,
a check run, a run cut short, a plan that is not verified, a file that cannot be written);
1 the database could not be read.";

/// The languages `--emit` takes.
#[derive(Clone, Copy, clap::ValueEnum)]
enum Emit {
    /// A C99 header (static const table of structs).
    C,
    /// A Rust module (const array, no_std, no dependencies).
    Rust,
}

#[derive(clap::Args)]
pub struct Args {
    /// The language of the source code.
    #[arg(long, value_enum, value_name = "LANG")]
    emit: Emit,
    /// A survey document (the JSON of `survey --json`) or the id of a stored survey (a unique
    /// prefix of at least 6 characters will do).
    #[arg(long, value_name = "FILE|RUN_ID")]
    from: String,
    /// Write the source to this file (whole or not at all) instead of stdout.
    #[arg(long, value_name = "FILE")]
    out: Option<PathBuf>,
    #[command(flatten)]
    db: DbArgs,
}

pub fn run(args: Args) -> Result<(), Failure> {
    let record = load_record(&args.from, |id| Ok(args.db.open()?.load_run(id)?))?;
    let report = ohmsight::analyse::analyse(&record);
    let advice = ohmsight::advice::advise(&report, &AdviceOptions::default());
    let plan = emit::verified_plan(&report, &advice).map_err(|e| Failure::bad_input(e.to_string()))?;
    let lang = match args.emit {
        Emit::C => Language::C,
        Emit::Rust => Language::Rust,
    };
    let source = emit::emit(&plan, lang);
    match &args.out {
        Some(path) => write_output(path, source.as_bytes(), "source file"),
        None => print(&source),
    }
}
