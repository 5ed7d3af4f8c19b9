//! `ohmsight`: the command-line tool. Logic lives in the library; this file parses arguments
//! and maps outcomes to exit codes.
//!
//! Exit codes: 0 success; 1 the survey could not be done (link, board); 2 bad input (file,
//! arguments).

use clap::{Parser, Subcommand};
use ohmsight::advice::{advise, AdviceOptions};
use ohmsight::link::{InProcessLink, Link, SerialLink};
use ohmsight::session::Session;
use ohmsight::survey::{survey, SurveyOptions};
use ohmsight::{html, loading, report, scenario};
use ohmsight_protocol::ChannelRole;
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
    /// What attaching an instrument (scope, probe, meter) to a pin would do to its node.
    ///
    /// From a stored survey (--from run.json) or a live one of that pin alone (the same link
    /// options as survey): the DC shift in volts and LSB, the node's time constant and bandwidth
    /// before and with the instrument, and whether the reading stays trustworthy (shift below
    /// ½ LSB), over the 95% interval of the source resistance.
    #[command(after_long_help = LOADING_EXAMPLES)]
    Loading(LoadingArgs),
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

/// How the board is reached: the same options for every command that surveys.
#[derive(clap::Args)]
struct LinkArgs {
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
    /// Talk to a board of another protocol version anyway.
    #[arg(long)]
    any_version: bool,
}

#[derive(clap::Args)]
#[command(group(clap::ArgGroup::new("instrument").required(true).args(["input", "preset"])))]
struct LoadingArgs {
    /// The pin (channel number) the instrument would touch.
    #[arg(long, value_name = "N")]
    pin: u8,
    /// The instrument's input as RESISTANCE,CAPACITANCE in parallel, SI prefixes allowed
    /// (e.g. 1M,25p or 10MΩ,12pF).
    #[arg(long, value_name = "R,C", value_parser = ohmsight::loading::parse_input)]
    input: Option<ohmsight::loading::Instrument>,
    /// A typical instrument: scope-1x (1 MΩ ∥ 25 pF), probe-10x (10 MΩ ∥ 12 pF) or meter
    /// (handheld multimeter, 10 MΩ ∥ 100 pF). Typical values, not your instrument's: use
    /// --input with its data sheet's values where you have them.
    #[arg(long, value_name = "NAME", value_parser = ["scope-1x", "probe-10x", "meter"])]
    preset: Option<String>,
    /// A stored survey (the JSON of `ohmsight survey --json`) instead of surveying the pin now.
    #[arg(long, value_name = "RUN.json", conflicts_with_all = ["scenario", "port", "seed"])]
    from: Option<PathBuf>,
    #[command(flatten)]
    link: LinkArgs,
    /// Print one JSON document on stdout instead of the text.
    #[arg(long)]
    json: bool,
    /// No progress bar.
    #[arg(long, short)]
    quiet: bool,
}

#[derive(clap::Args)]
struct SurveyArgs {
    #[command(flatten)]
    link: LinkArgs,
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
    /// The smallest change you need to see on a pin, volts (e.g. 100e-6): where it is below one
    /// LSB the advice says how many readings to average and whether dither is needed.
    #[arg(long, value_name = "VOLTS", value_parser = positive_volts)]
    resolve: Option<f64>,
}

fn positive_volts(text: &str) -> Result<f64, String> {
    match text.trim().parse::<f64>() {
        Ok(v) if v.is_finite() && v > 0.0 => Ok(v),
        _ => Err(format!("'{text}' is not a positive voltage in volts (e.g. 100e-6 for 100 µV)")),
    }
}

const SURVEY_EXAMPLES: &str = "Examples:
  ohmsight survey                                  the demo board, simulated
  ohmsight survey --scenario boards/virtual/scenarios/demo.toml --seed 7
  ohmsight survey --port /dev/ttyACM0 --json > unit-0042.json
  ohmsight survey --html demo-report.html          the table, and a page with the plots

The text and the JSON end with advice per pin (sample time to use, a buffer or filter
capacitor where none settles, dummy conversions against memory, averaging) and a scan plan
whose worst error stays under ½ LSB with the other pins at any level.

Exit status: 0 surveyed; 1 the survey failed (link or board, said on stderr); 2 bad input
(scenario file, arguments, a serial port that cannot be opened).

A board tied to mains or high voltage must be surveyed through an isolated link and supply;
follow local codes and licensed practice.";

const LOADING_EXAMPLES: &str = "Examples:
  ohmsight survey --json > run.json
  ohmsight loading --pin 3 --from run.json --preset scope-1x
  ohmsight loading --pin 6 --input 10M,12p --json          surveys pin 6 of the demo board now
  ohmsight loading --pin 0 --port /dev/ttyACM0 --preset meter

Presets are typical values (common practice, no source): scope-1x 1 MΩ ∥ 25 pF, probe-10x
10 MΩ ∥ 12 pF, meter 10 MΩ ∥ 100 pF. The instrument is taken as referenced to ground.

Exit status: 0 answered; 1 the survey failed (link or board); 2 bad input (a pin that is not
there, --input syntax, an unreadable or foreign --from file).

Touching a board tied to mains or high voltage with an instrument needs isolation and the
usual precautions; follow local codes and licensed practice.";

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
        Command::Loading(args) => run_loading(args),
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
    print(&out)?;
    Ok(ExitCode::SUCCESS)
}

/// Writes `text` to stdout; a closed pipe is not an error.
fn print(text: &str) -> anyhow::Result<()> {
    let mut stdout = std::io::stdout().lock();
    match stdout.write_all(text.as_bytes()).and_then(|_| stdout.flush()) {
        Err(e) if e.kind() != std::io::ErrorKind::BrokenPipe => Err(e.into()),
        _ => Ok(()),
    }
}

/// Any link, boxed, so one code path serves the serial port and the simulated board.
struct AnyLink(Box<dyn Link>);

impl Link for AnyLink {
    fn send(&mut self, bytes: &[u8]) -> std::io::Result<()> {
        self.0.send(bytes)
    }
    fn recv(&mut self, buf: &mut [u8], timeout: std::time::Duration) -> std::io::Result<usize> {
        self.0.recv(buf, timeout)
    }
    fn name(&self) -> String {
        self.0.name()
    }
}

/// A session on the board the link options name: its serial port, or the simulated board
/// (the scenario file's, or the demo). `Err` carries the exit code once the problem is said.
fn open_session(link: &LinkArgs) -> Result<Session<AnyLink>, ExitCode> {
    if let Some(port) = &link.port {
        let serial = SerialLink::open(port, link.baud).map_err(|e| {
            eprintln!("ohmsight: {e}");
            ExitCode::from(EXIT_INPUT)
        })?;
        let mut session = Session::new(AnyLink(Box::new(serial)));
        session.link_bytes_per_s = u64::from(link.baud / 10);
        return Ok(session);
    }
    let sc = load_scenario(link.scenario.as_ref(), link.seed)?;
    Ok(Session::new(AnyLink(Box::new(InProcessLink::new(&sc)))))
}

fn progress(quiet: bool) -> bool {
    !quiet && std::io::IsTerminal::is_terminal(&std::io::stderr())
}

fn run_survey(args: SurveyArgs) -> anyhow::Result<ExitCode> {
    let opts = SurveyOptions {
        any_version: args.link.any_version,
        progress: progress(args.quiet),
        channels: args.channels.clone(),
    };
    let mut session = match open_session(&args.link) {
        Ok(s) => s,
        Err(code) => return Ok(code),
    };
    let name = session.link().name();
    let r = survey(&mut session, &opts)?;
    let advice_opts = AdviceOptions { resolve_volts: args.resolve };
    let advice = advise(&r, &advice_opts);
    let out = if args.json {
        serde_json::to_string_pretty(&report::survey_json_with(&r, &name, &advice, &advice_opts))? + "\n"
    } else {
        report::survey_text_with(&r, &name, &advice)
    };
    print(&out)?;
    if let Some(path) = &args.html {
        if let Err(e) = write_page(path, &html::survey_html(&r, &name)) {
            eprintln!(
                "ohmsight: cannot write the HTML report to {}: {e} (the table above is complete; pick another path)",
                path.display()
            );
            return Ok(ExitCode::from(EXIT_INPUT));
        }
    }
    if let Some(f) = &r.fault {
        // What was measured is printed above; the exit status still says the survey is partial.
        eprintln!("ohmsight: the survey was cut short: {f}");
        return Ok(ExitCode::from(EXIT_FAILED));
    }
    Ok(ExitCode::SUCCESS)
}

fn run_loading(args: LoadingArgs) -> anyhow::Result<ExitCode> {
    let instrument = match (&args.input, &args.preset) {
        (Some(i), _) => i.clone(),
        (None, Some(name)) => loading::preset(name).ok_or_else(|| anyhow::anyhow!("no preset {name}"))?,
        (None, None) => anyhow::bail!("give the instrument with --input R,C or --preset NAME"),
    };
    let from;
    let doc = if let Some(path) = &args.from {
        from = format!("the stored survey {}", path.display());
        let text = match std::fs::read_to_string(path) {
            Ok(t) => t,
            Err(e) => {
                eprintln!("ohmsight: cannot read {}: {e}", path.display());
                return Ok(ExitCode::from(EXIT_INPUT));
            }
        };
        match serde_json::from_str::<serde_json::Value>(&text) {
            Ok(d) => d,
            Err(e) => {
                eprintln!(
                    "ohmsight: {}:{}:{}: not JSON ({e}); give --from the output of `ohmsight survey --json`",
                    path.display(),
                    e.line(),
                    e.column()
                );
                return Ok(ExitCode::from(EXIT_INPUT));
            }
        }
    } else {
        let mut session = match open_session(&args.link) {
            Ok(s) => s,
            Err(code) => return Ok(code),
        };
        // Check the pin against the board's own list before spending conversions on it.
        let info = session.handshake(args.link.any_version)?;
        let pins: Vec<u8> = info.channels.iter().filter(|c| c.role == ChannelRole::Pin).map(|c| c.channel).collect();
        if !pins.contains(&args.pin) {
            let list: Vec<String> = pins.iter().map(u8::to_string).collect();
            eprintln!("ohmsight: pin {} is not a pin of this board; it has pins {}", args.pin, list.join(", "));
            return Ok(ExitCode::from(EXIT_INPUT));
        }
        let name = session.link().name();
        let opts = SurveyOptions {
            any_version: args.link.any_version,
            progress: progress(args.quiet),
            channels: vec![args.pin],
        };
        let r = survey(&mut session, &opts)?;
        if let Some(f) = &r.fault {
            eprintln!("ohmsight: the survey of pin {} failed: {f}", args.pin);
            return Ok(ExitCode::from(EXIT_FAILED));
        }
        from = format!("a survey of pin {} alone, now, over the {name}", args.pin);
        report::survey_json(&r, &name)
    };
    let facts = match loading::facts_from_survey(&doc, args.pin) {
        Ok(f) => f,
        Err(e) => {
            let from = args.from.as_ref().map_or(String::new(), |p| format!("{}: ", p.display()));
            eprintln!("ohmsight: {from}{e}");
            return Ok(ExitCode::from(EXIT_INPUT));
        }
    };
    let answer = loading::Loading { from, ..loading::loading(&facts, &instrument) };
    let out = if args.json {
        serde_json::to_string_pretty(&loading::loading_json(&answer))? + "\n"
    } else {
        loading::loading_text(&answer)
    };
    print(&out)?;
    Ok(ExitCode::SUCCESS)
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
