//! `ohmsight`: the command-line tool. Logic lives in the library; this file parses arguments
//! and maps outcomes to exit codes.
//!
//! Exit codes: 0 success; 1 the survey could not be done (link, board); 2 bad input (file,
//! arguments).

use clap::{Parser, Subcommand};
use ohmsight::link::{InProcessLink, Link, SerialLink};
use ohmsight::session::Session;
use ohmsight::survey::{survey, SurveyOptions};
use ohmsight::{report, scenario};
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
    /// Serve the simulated board on a pseudo-terminal, so serial tools can talk to it.
    ///
    /// Prints the device path (e.g. /dev/pts/4) alone on the first line of stdout, then answers
    /// on it until interrupted (Ctrl-C, SIGTERM). Notes go to stderr.
    #[command(after_long_help = SIMULATE_EXAMPLES)]
    Simulate(SimulateArgs),
    /// List serial ports and mark those where a board answers the ohmsight handshake.
    #[command(after_long_help = PORTS_EXAMPLES)]
    Ports(PortsArgs),
}

#[derive(clap::Args)]
struct SimulateArgs {
    /// Wire the simulated board as described in this scenario file (TOML); the demo board if absent.
    #[arg(long, value_name = "FILE.toml")]
    scenario: Option<PathBuf>,
    /// Seed of the simulated board's noise (overrides the scenario's).
    #[arg(long, value_name = "N")]
    seed: Option<u64>,
    /// No notes on stderr about clients coming and going.
    #[arg(long, short)]
    quiet: bool,
}

#[derive(clap::Args)]
struct PortsArgs {
    /// Look only at these paths instead of every port found (e.g. the pseudo-terminal of
    /// `ohmsight simulate`, which no scan finds).
    #[arg(value_name = "PATH")]
    paths: Vec<String>,
    /// Only list; send nothing to any port.
    #[arg(long)]
    no_probe: bool,
    /// Baud rate for the probe.
    #[arg(long, value_name = "N", default_value_t = 115_200)]
    baud: u32,
    /// How long to wait for a port to answer, in milliseconds (ports are probed in parallel).
    #[arg(long, value_name = "MS", default_value_t = 1500)]
    wait_ms: u64,
    /// Print one JSON document on stdout instead of the table.
    #[arg(long)]
    json: bool,
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

Exit status: 0 surveyed; 1 the survey failed (link or board, said on stderr); 2 bad input
(scenario file, arguments, a serial port that cannot be opened).

A board tied to mains or high voltage must be surveyed through an isolated link and supply;
follow local codes and licensed practice.";

const SIMULATE_EXAMPLES: &str = "Examples:
  ohmsight simulate                                the demo board on a new pseudo-terminal
  ohmsight simulate --scenario my-board.toml --seed 3

In another terminal, with the path it printed:
  ohmsight survey --port /dev/pts/4

The simulated board keeps its state while clients come and go, like a powered board whose
cable is unplugged and plugged back in. Give it one client at a time: two programs reading the
same port take each other's bytes.

Exit status: 0 stopped by Ctrl-C or SIGTERM; 1 the pseudo-terminal failed; 2 bad input
(scenario file, arguments).";

const PORTS_EXAMPLES: &str = "Examples:
  ohmsight ports                                   list and probe every serial port
  ohmsight ports --no-probe                        list only, send nothing
  ohmsight ports /dev/pts/4 --json                 only this port, as JSON

Probing opens each port and sends a short ohmsight hello frame (a few bytes) at the given baud
rate. Use --no-probe when ports lead to equipment that must not receive stray bytes. A board
that resets when its port opens may need a longer --wait-ms.

Exit status: 0 listed; 1 the ports could not be listed.";

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
        Command::Simulate(args) => run_simulate(args),
        Command::Ports(args) => run_ports(args),
    }
}

/// Loads the scenario of `--scenario` (or the demo) with the `--seed` override; `Err` is the
/// exit status after the problem has been said.
fn load_scenario(path: Option<&PathBuf>, seed: Option<u64>) -> Result<ohmsight_virtual::Scenario, ExitCode> {
    let mut sc = match path {
        Some(path) => scenario::load(path).map_err(|e| {
            eprintln!("ohmsight: {e}");
            ExitCode::from(EXIT_INPUT)
        })?,
        None => scenario::demo(),
    };
    if let Some(seed) = seed {
        sc.seed = seed;
    }
    Ok(sc)
}

#[cfg(unix)]
fn run_simulate(args: SimulateArgs) -> anyhow::Result<ExitCode> {
    use ohmsight::simulate::{open_pty, serve, ServeEvent};
    use std::sync::atomic::AtomicBool;
    use std::sync::Arc;

    let sc = match load_scenario(args.scenario.as_ref(), args.seed) {
        Ok(s) => s,
        Err(code) => return Ok(code),
    };
    let stop = Arc::new(AtomicBool::new(false));
    stop_on_signals(stop.clone())?;
    let (mut pty, path) = open_pty()?;
    {
        let mut stdout = std::io::stdout().lock();
        writeln!(stdout, "{path}")?;
        stdout.flush()?;
    }
    let quiet = args.quiet;
    if !quiet {
        eprintln!(
            "ohmsight: simulated board \"{}\" ({} wired pins, seed {}) on {path}; Ctrl-C stops it",
            sc.name,
            sc.pins.len(),
            sc.seed
        );
    }
    let mut note = |e: ServeEvent| {
        if quiet {
            return;
        }
        match e {
            ServeEvent::ClientArrived => eprintln!("ohmsight: a client opened {path}"),
            ServeEvent::ClientLeft { bytes_in, bytes_out } => {
                eprintln!("ohmsight: the client closed {path} ({bytes_in} bytes in, {bytes_out} out)")
            }
            ServeEvent::ReplyDropped { bytes, reason } => {
                eprintln!("ohmsight: dropped {bytes} bytes of a reply: {reason}")
            }
        }
    };
    let stats = serve(&mut pty, &sc, &stop, &mut note)?;
    if !quiet {
        eprintln!(
            "ohmsight: stopped after {} client{}, {} bytes in, {} out, {} conversions",
            stats.clients,
            if stats.clients == 1 { "" } else { "s" },
            stats.bytes_in,
            stats.bytes_out,
            stats.conversions
        );
    }
    Ok(ExitCode::SUCCESS)
}

#[cfg(not(unix))]
fn run_simulate(_args: SimulateArgs) -> anyhow::Result<ExitCode> {
    anyhow::bail!("`ohmsight simulate` needs a Unix pseudo-terminal; on this system use `ohmsight survey --scenario`")
}

/// Sets `stop` on SIGINT or SIGTERM instead of dying, so serving ends with a summary; a second
/// signal before serving has stopped ends the process at once.
#[cfg(unix)]
fn stop_on_signals(stop: std::sync::Arc<std::sync::atomic::AtomicBool>) -> anyhow::Result<()> {
    use signal_hook::consts::{SIGINT, SIGTERM};
    use signal_hook::flag;
    for signal in [SIGINT, SIGTERM] {
        flag::register_conditional_shutdown(signal, 1, stop.clone())?;
        flag::register(signal, stop.clone())?;
    }
    Ok(())
}

fn run_ports(args: PortsArgs) -> anyhow::Result<ExitCode> {
    use ohmsight::ports;
    let wait = std::time::Duration::from_millis(args.wait_ms);
    let mut entries = ports::list(&args.paths).map_err(anyhow::Error::msg)?;
    if !args.no_probe {
        ports::probe_all(&mut entries, args.baud, wait);
    }
    let out = if args.json {
        serde_json::to_string_pretty(&ports::json(&entries))? + "\n"
    } else {
        ports::table(&entries, wait)
    };
    print_out(&out)?;
    Ok(ExitCode::SUCCESS)
}

/// Writes `text` on stdout; a reader that went away (a closed pipe) is not an error.
fn print_out(text: &str) -> anyhow::Result<()> {
    let mut stdout = std::io::stdout().lock();
    match stdout.write_all(text.as_bytes()).and_then(|_| stdout.flush()) {
        Err(e) if e.kind() != std::io::ErrorKind::BrokenPipe => Err(e.into()),
        _ => Ok(()),
    }
}

fn run_survey(args: SurveyArgs) -> anyhow::Result<ExitCode> {
    let opts = SurveyOptions {
        any_version: args.any_version,
        progress: !args.quiet && std::io::IsTerminal::is_terminal(&std::io::stderr()),
        channels: args.channels.clone(),
    };
    let (text, json, fault) = if let Some(port) = &args.port {
        let link = match SerialLink::open(port, args.baud) {
            Ok(l) => l,
            Err(e) => {
                eprintln!("ohmsight: {e}");
                return Ok(ExitCode::from(EXIT_INPUT));
            }
        };
        let mut session = Session::new(link);
        session.link_bytes_per_s = u64::from(args.baud / 10);
        render(&mut session, &opts)?
    } else {
        let sc = match load_scenario(args.scenario.as_ref(), args.seed) {
            Ok(s) => s,
            Err(code) => return Ok(code),
        };
        let mut session = Session::new(InProcessLink::new(&sc));
        render(&mut session, &opts)?
    };
    print_out(&if args.json { json + "\n" } else { text })?;
    if let Some(f) = fault {
        // What was measured is printed above; the exit status still says the survey is partial.
        eprintln!("ohmsight: the survey was cut short: {f}");
        return Ok(ExitCode::from(EXIT_FAILED));
    }
    Ok(ExitCode::SUCCESS)
}

/// The survey as text and as JSON, and the link fault that cut it short, if any.
fn render<L: Link>(session: &mut Session<L>, opts: &SurveyOptions) -> anyhow::Result<(String, String, Option<String>)> {
    let name = session.link().name();
    let r = survey(session, opts)?;
    let json = serde_json::to_string_pretty(&report::survey_json(&r, &name))?;
    Ok((report::survey_text(&r, &name), json, r.fault.clone()))
}
