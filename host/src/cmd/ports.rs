//! `ohmsight ports`: list serial ports and probe them for a board.

use super::common::print;
use super::Failure;

pub const EXAMPLES: &str = "Examples:
  ohmsight ports                                   list and probe every serial port
  ohmsight ports --no-probe                        list only, send nothing
  ohmsight ports /dev/pts/4 --json                 only this port, as JSON

Probing opens each port and sends a short ohmsight hello frame (a few bytes) at the given baud
rate. Use --no-probe when ports lead to equipment that must not receive stray bytes. A board
that resets when its port opens may need a longer --wait-ms.

Exit status: 0 listed; 1 the ports could not be listed.";

#[derive(clap::Args)]
pub struct Args {
    /// Look only at these paths instead of every port found (e.g. the pseudo-terminal of
    /// `ohmsight simulate`, which no scan finds).
    #[arg(value_name = "PATH")]
    paths: Vec<String>,
    /// Only list; send nothing to any port.
    #[arg(long)]
    no_probe: bool,
    /// Baud rate for the probe.
    #[arg(long, value_name = "N", default_value_t = 115_200, value_parser = super::common::baud_rate)]
    baud: u32,
    /// How long to wait for a port to answer, in milliseconds (ports are probed in parallel).
    #[arg(long, value_name = "MS", default_value_t = 1500, value_parser = super::common::millis)]
    wait_ms: u64,
    /// Print one JSON document on stdout instead of the table.
    #[arg(long)]
    json: bool,
}

pub fn run(args: Args) -> Result<(), Failure> {
    use ohmsight::ports;
    let wait = std::time::Duration::from_millis(args.wait_ms);
    let mut entries = ports::list(&args.paths).map_err(Failure::failed)?;
    if !args.no_probe {
        ports::probe_all(&mut entries, args.baud, wait);
    }
    let out = if args.json {
        serde_json::to_string_pretty(&ports::json(&entries)).unwrap_or_default() + "\n"
    } else {
        ports::table(&entries, wait)
    };
    print(&out)
}
