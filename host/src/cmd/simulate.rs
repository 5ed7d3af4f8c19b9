//! `ohmsight simulate`: the simulated board served on a pseudo-terminal.

use super::common::{load_scenario, print};
use super::Failure;
use std::path::PathBuf;

pub const EXAMPLES: &str = "Examples:
  ohmsight simulate                                the demo board on a new pseudo-terminal
  ohmsight simulate --scenario my-board.toml --seed 3

In another terminal, with the path it printed:
  ohmsight survey --port /dev/pts/4

The simulated board keeps its state while clients come and go, like a powered board whose
cable is unplugged and plugged back in. Give it one client at a time: two programs reading the
same port take each other's bytes.

Exit status: 0 stopped by Ctrl-C or SIGTERM; 1 the pseudo-terminal failed; 2 bad input
(scenario file, arguments).";

#[derive(clap::Args)]
pub struct Args {
    /// Wire the simulated board as described in this scenario file (TOML); the demo board if absent.
    #[arg(long, value_name = "FILE.toml")]
    scenario: Option<PathBuf>,
    /// Seed of the simulated board's noise (overrides the scenario's).
    #[arg(long, value_name = "N", value_parser = super::common::seed)]
    seed: Option<u64>,
    /// No notes on stderr about clients coming and going.
    #[arg(long, short)]
    quiet: bool,
}

#[cfg(unix)]
pub fn run(args: Args) -> Result<(), Failure> {
    use ohmsight::simulate::{open_pty, serve, ServeEvent};
    use std::sync::atomic::AtomicBool;
    use std::sync::Arc;

    let sc = load_scenario(args.scenario.as_ref(), args.seed)?;
    let stop = Arc::new(AtomicBool::new(false));
    stop_on_signals(stop.clone()).map_err(|e| Failure::failed(format!("cannot handle signals: {e}")))?;
    let (mut pty, path) = open_pty().map_err(|e| Failure::failed(format!("cannot open a pseudo-terminal: {e}")))?;
    print(&format!("{path}\n"))?;
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
    let stats = serve(&mut pty, &sc, &stop, &mut note)
        .map_err(|e| Failure::failed(format!("the pseudo-terminal failed: {e}")))?;
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
    Ok(())
}

#[cfg(not(unix))]
pub fn run(_args: Args) -> Result<(), Failure> {
    Err(Failure::failed(
        "`ohmsight simulate` needs a Unix pseudo-terminal; on this system use `ohmsight survey --scenario`",
    ))
}

/// Sets `stop` on SIGINT or SIGTERM instead of dying, so serving ends with a summary; a second
/// signal before serving has stopped ends the process at once.
#[cfg(unix)]
fn stop_on_signals(stop: std::sync::Arc<std::sync::atomic::AtomicBool>) -> std::io::Result<()> {
    use signal_hook::consts::{SIGINT, SIGTERM};
    use signal_hook::flag;
    for signal in [SIGINT, SIGTERM] {
        flag::register_conditional_shutdown(signal, 1, stop.clone())?;
        flag::register(signal, stop.clone())?;
    }
    Ok(())
}
