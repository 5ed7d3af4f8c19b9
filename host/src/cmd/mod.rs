//! The commands of the `ohmsight` binary, one file each, and the one place where an outcome
//! becomes an exit code.

mod calibrate;
mod check;
mod common;
mod compare;
mod completions;
mod history;
mod limits;
mod loading;
mod plan;
mod ports;
mod refit;
mod simulate;
mod survey;

pub use completions::{man_pages, MAN_PAGES_ENV};

use clap::{Parser, Subcommand};

#[derive(Parser)]
#[command(
    name = "ohmsight",
    version,
    about = "Measure the analog side of a microcontroller's ADC pins from the MCU itself",
    long_about = "ohmsight runs controlled ADC experiments on a board (or on its built-in simulated board) \
and fits a physical model of the sampling network: per pin, source resistance and node capacitance with \
95% intervals, driven / floating / at-rail, noise and mains hum, memory of the previous channel, and the \
shortest sample time that settles to half an LSB. Every survey is kept in a database (SQLite by default), \
so it can be listed, shown and analysed again later."
)]
pub struct Cli {
    #[command(subcommand)]
    command: Command,
}

#[derive(Subcommand)]
enum Command {
    /// Survey every pin of a board: fit source resistance, node capacitance, verdicts, settling.
    ///
    /// With no link option the built-in demo scenario runs on the simulated board. The run is
    /// stored experiment by experiment (see --db, --no-store).
    #[command(after_long_help = survey::EXAMPLES)]
    Survey(survey::Args),
    /// Analyse a stored run again: the fit, verdicts, advice and scan plan from its evidence.
    ///
    /// From a survey document (the JSON of `survey --json`) or a run id in the store. With
    /// nothing changed it repeats the survey's numbers; with --profile it re-analyses under
    /// other converter values (a calibration, a corrected datasheet figure).
    #[command(after_long_help = refit::EXAMPLES)]
    Refit(refit::Args),
    /// List stored runs, show one as `survey` printed it, or their production statistics.
    #[command(after_long_help = history::EXAMPLES)]
    History(history::Args),
    /// What changed on a unit since its baseline, per pin, and what it likely means.
    ///
    /// Surveys the unit now (same link options as survey) or takes --run, and compares it with
    /// its baseline (--baseline, or its first complete survey in the database): a sensor now
    /// floating, series resistance grown, a filter capacitor gone, new hum, a drifted source.
    /// Exit 0 no significant change, 1 changes found, 2 bad input, 3 link, board or database.
    #[command(after_long_help = compare::EXAMPLES)]
    Compare(compare::Args),
    /// What attaching an instrument (scope, probe, meter) to a pin would do to its node.
    ///
    /// From a stored survey (--from run.json) or a live one of that pin alone (the same link
    /// options as survey): the DC shift in volts and LSB, the node's time constant and bandwidth
    /// before and with the instrument, and whether the reading stays trustworthy (shift below
    /// ½ LSB), over the 95% interval of the source resistance.
    #[command(after_long_help = loading::EXAMPLES)]
    Loading(loading::Args),
    /// The verified scan plan of a stored survey as source code for your firmware (C or Rust).
    ///
    /// From a survey document (the JSON of `survey --json`) or a stored survey's run id: the
    /// scan order, each pin's sample-time setting and dummy conversions, the idle time after each
    /// scan and the scan period, with the run, board, unit, worst error and the pins left out in
    /// the header comment.
    #[command(after_long_help = plan::EXAMPLES)]
    Plan(plan::Args),
    /// Serve the simulated board on a pseudo-terminal, so serial tools can talk to it.
    ///
    /// Prints the device path (e.g. /dev/pts/4) alone on the first line of stdout, then answers
    /// on it until interrupted (Ctrl-C, SIGTERM). Notes go to stderr.
    #[command(after_long_help = simulate::EXAMPLES)]
    Simulate(simulate::Args),
    /// List serial ports and mark those where a board answers the ohmsight handshake.
    #[command(after_long_help = ports::EXAMPLES)]
    Ports(ports::Args),
    /// Production check: judge one unit against a limits file; PASS or FAIL, JSON, JUnit XML.
    ///
    /// Runs only the experiments the limits need (more only where a limit is still
    /// undecided), prints one line per pin and the overall result, and stores the run (kind
    /// check). Exit 0 pass, 1 the unit fails, 2 bad input, 3 the check could not be completed.
    #[command(after_long_help = check::EXAMPLES)]
    Check(check::Args),
    /// Calibrate a unit: its hold capacitance and switch resistance from fixture pins of known
    /// resistance, stored for its later surveys and checks.
    ///
    /// Surveys the fixture pins (--fixture CH=OHMS, two of different value), fits both values
    /// jointly with their 95% intervals, and stores them per unit in the run database.
    #[command(after_long_help = calibrate::EXAMPLES)]
    Calibrate(calibrate::Args),
    /// Propose a limits file from stored runs of golden units (mean ± K·σ per measurement).
    #[command(after_long_help = limits::EXAMPLES)]
    Limits(limits::Args),
    /// Print the completion script for a shell (bash, zsh, fish, powershell, elvish).
    #[command(after_long_help = completions::EXAMPLES)]
    Completions(completions::Args),
}

/// What kind of failure ended a command: it decides the exit code.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Kind {
    /// The board, the link, the store or the machine failed, or a run was cut short.
    Failed,
    /// The user asked for something that cannot be (a file, an argument, a run id).
    BadInput,
    /// The unit was measured and is not what was asked of it (it fails its limits, it changed
    /// since its baseline): a result, not a fault.
    Rejected,
    /// In a command whose exit 1 is a verdict on the unit (`check`, `compare`): the board, the
    /// link or the store failed, so no verdict was reached. A test executive must tell a bad
    /// unit from a broken station.
    NoVerdict,
}

/// A command that did not do everything it was asked: what to say and how to exit.
#[derive(Debug)]
pub struct Failure {
    /// Failed or bad input.
    pub kind: Kind,
    /// The sentence for stderr (empty when it has been said already).
    pub message: String,
}

impl Failure {
    /// The board, link or store failed.
    pub fn failed(message: impl Into<String>) -> Self {
        Failure { kind: Kind::Failed, message: message.into() }
    }

    /// Bad input.
    pub fn bad_input(message: impl Into<String>) -> Self {
        Failure { kind: Kind::BadInput, message: message.into() }
    }

    /// The unit is not what was asked of it.
    pub fn rejected(message: impl Into<String>) -> Self {
        Failure { kind: Kind::Rejected, message: message.into() }
    }

    /// For commands whose exit 1 is a verdict: a failure of the board, link or store becomes
    /// "no verdict" (exit 3); bad input stays bad input.
    pub fn no_verdict(self) -> Self {
        match self.kind {
            Kind::Failed => Failure { kind: Kind::NoVerdict, ..self },
            _ => self,
        }
    }

    /// The process exit code: 1 failed (or, for `check` and `compare`, the unit fails or
    /// changed), 2 bad input, 3 no verdict reached.
    pub fn exit_code(&self) -> u8 {
        match self.kind {
            Kind::Failed | Kind::Rejected => 1,
            Kind::BadInput => 2,
            Kind::NoVerdict => 3,
        }
    }
}

impl From<ohmsight::store::StoreError> for Failure {
    fn from(e: ohmsight::store::StoreError) -> Self {
        use ohmsight::store::StoreErrorKind;
        match e.kind() {
            StoreErrorKind::BadInput => Failure::bad_input(e.to_string()),
            _ => Failure::failed(e.to_string()),
        }
    }
}

impl From<ohmsight::SurveyError> for Failure {
    fn from(e: ohmsight::SurveyError) -> Self {
        if e.is_bad_input() {
            Failure::bad_input(e.to_string())
        } else {
            Failure::failed(e.to_string())
        }
    }
}

impl From<ohmsight::session::SessionError> for Failure {
    fn from(e: ohmsight::session::SessionError) -> Self {
        Failure::failed(e.to_string())
    }
}

/// Runs the command line.
pub fn run(cli: Cli) -> Result<(), Failure> {
    match cli.command {
        Command::Survey(args) => survey::run(args),
        Command::Refit(args) => refit::run(args),
        Command::History(args) => history::run(args),
        Command::Compare(args) => compare::run(args),
        Command::Loading(args) => loading::run(args),
        Command::Plan(args) => plan::run(args),
        Command::Simulate(args) => simulate::run(args),
        Command::Ports(args) => ports::run(args),
        Command::Check(args) => check::run(args),
        Command::Calibrate(args) => calibrate::run(args),
        Command::Limits(args) => limits::run(args),
        Command::Completions(args) => completions::run(args),
    }
}
