//! `ohmsight`: the command-line tool. Logic lives in the library; this file parses arguments
//! and maps outcomes to exit codes.
//!
//! Exit codes: 0 success; 1 the survey could not be done (link, board); 2 bad input (file,
//! arguments).

use clap::{Parser, Subcommand};
use ohmsight::link::{InProcessLink, Link, SerialLink};
use ohmsight::session::Session;
use ohmsight::survey::{survey, SurveyOptions};
use ohmsight::{html, report, scenario};
use std::io::Write;
use std::path::PathBuf;
use std::process::ExitCode;

#[derive(Parser)]
#[command(
    name = "ohmsight",
    version,
    about = "Measure the analog side of a microcontroller's ADC pins from the MCU itself",
    long_about = "ohmsight runs controlled ADC experiments on a board (or on its built-in simulated board) \
and fits a physical model of the sampling network: per pin, source resistance and node capacitance with \
95% intervals, driven / floating / at-rail, noise and mains hum, memory of the previous channel, and the \
shortest sample time that settles to half an LSB."
)]
struct Cli {
    #[command(subcommand)]
    command: Command,
}

#[derive(Subcommand)]
enum Command {
    /// Survey every pin of a board: fit source resistance, node capacitance, verdicts, settling.
    ///
    /// With no link option the built-in demo scenario runs on the simulated board.
    #[command(after_long_help = SURVEY_EXAMPLES)]
    Survey(SurveyArgs),
}

#[derive(clap::Args)]
struct SurveyArgs {
    /// Simulated board wired as described in this scenario file (TOML).
    #[arg(long, value_name = "FILE.toml", conflicts_with = "port")]
    scenario: Option<PathBuf>,
    /// Serial port of a board running the ohmsight firmware (e.g. /dev/ttyACM0).
    #[arg(long, value_name = "PATH")]
    port: Option<String>,
    /// Baud rate of the serial port.
    #[arg(long, value_name = "N", default_value_t = 115_200, requires = "port")]
    baud: u32,
    /// Seed of the simulated board's noise (overrides the scenario's).
    #[arg(long, value_name = "N", conflicts_with = "port")]
    seed: Option<u64>,
    /// Survey only this channel (repeat for several).
    #[arg(long = "channel", value_name = "N")]
    channels: Vec<u8>,
    /// Print one JSON document on stdout instead of the table.
    #[arg(long)]
    json: bool,
    /// Also write the survey as one self-contained HTML page (plots inline, opens offline).
    #[arg(long, value_name = "FILE")]
    html: Option<PathBuf>,
    /// No progress bar.
    #[arg(long, short)]
    quiet: bool,
    /// Talk to a board of another protocol version anyway.
    #[arg(long)]
    any_version: bool,
}

const SURVEY_EXAMPLES: &str = "Examples:
  ohmsight survey                                  the demo board, simulated
  ohmsight survey --scenario boards/virtual/scenarios/demo.toml --seed 7
  ohmsight survey --port /dev/ttyACM0 --json > unit-0042.json
  ohmsight survey --html demo-report.html          the table, and a page with the plots

Exit status: 0 surveyed; 1 the survey failed (link or board, said on stderr); 2 bad input
(scenario file, arguments, a serial port that cannot be opened).

A board tied to mains or high voltage must be surveyed through an isolated link and supply;
follow local codes and licensed practice.";

/// Exit status for bad input.
const EXIT_INPUT: u8 = 2;
/// Exit status for a failed survey.
const EXIT_FAILED: u8 = 1;

fn main() -> ExitCode {
    let cli = Cli::parse();
    match run(cli) {
        Ok(code) => code,
        Err(e) => {
            eprintln!("ohmsight: {e:#}");
            ExitCode::from(EXIT_FAILED)
        }
    }
}

fn run(cli: Cli) -> anyhow::Result<ExitCode> {
    match cli.command {
        Command::Survey(args) => run_survey(args),
    }
}

fn run_survey(args: SurveyArgs) -> anyhow::Result<ExitCode> {
    let opts = SurveyOptions {
        any_version: args.any_version,
        progress: !args.quiet && std::io::IsTerminal::is_terminal(&std::io::stderr()),
        channels: args.channels.clone(),
    };
    let (text, json, page, fault) = if let Some(port) = &args.port {
        let link = match SerialLink::open(port, args.baud) {
            Ok(l) => l,
            Err(e) => {
                eprintln!("ohmsight: {e}");
                return Ok(ExitCode::from(EXIT_INPUT));
            }
        };
        let mut session = Session::new(link);
        session.link_bytes_per_s = u64::from(args.baud / 10);
        render(&mut session, &opts, args.html.is_some())?
    } else {
        let mut sc = match &args.scenario {
            Some(path) => match scenario::load(path) {
                Ok(s) => s,
                Err(e) => {
                    eprintln!("ohmsight: {e}");
                    return Ok(ExitCode::from(EXIT_INPUT));
                }
            },
            None => scenario::demo(),
        };
        if let Some(seed) = args.seed {
            sc.seed = seed;
        }
        let mut session = Session::new(InProcessLink::new(&sc));
        render(&mut session, &opts, args.html.is_some())?
    };
    let mut stdout = std::io::stdout().lock();
    let out = if args.json { json + "\n" } else { text };
    match stdout.write_all(out.as_bytes()).and_then(|_| stdout.flush()) {
        Err(e) if e.kind() != std::io::ErrorKind::BrokenPipe => return Err(e.into()),
        _ => {}
    }
    if let (Some(path), Some(page)) = (&args.html, page) {
        if let Err(e) = write_page(path, &page) {
            eprintln!(
                "ohmsight: cannot write the HTML report to {}: {e} (the table above is complete; pick another path)",
                path.display()
            );
            return Ok(ExitCode::from(EXIT_INPUT));
        }
    }
    if let Some(f) = fault {
        // What was measured is printed above; the exit status still says the survey is partial.
        eprintln!("ohmsight: the survey was cut short: {f}");
        return Ok(ExitCode::from(EXIT_FAILED));
    }
    Ok(ExitCode::SUCCESS)
}

/// The survey as text, as JSON and (when asked for) as an HTML page, and the link fault that
/// cut it short, if any.
type Rendered = (String, String, Option<String>, Option<String>);

fn render<L: Link>(session: &mut Session<L>, opts: &SurveyOptions, page: bool) -> anyhow::Result<Rendered> {
    let name = session.link().name();
    let r = survey(session, opts)?;
    let json = serde_json::to_string_pretty(&report::survey_json(&r, &name))?;
    let page = page.then(|| html::survey_html(&r, &name));
    Ok((report::survey_text(&r, &name), json, page, r.fault.clone()))
}

/// Writes the page beside its destination first, so an interrupted write never leaves a
/// half page under the name asked for.
fn write_page(path: &std::path::Path, page: &str) -> std::io::Result<()> {
    let mut tmp = path.as_os_str().to_owned();
    tmp.push(".part");
    let tmp = PathBuf::from(tmp);
    std::fs::write(&tmp, page)?;
    std::fs::rename(&tmp, path).inspect_err(|_| {
        let _ = std::fs::remove_file(&tmp);
    })
}
