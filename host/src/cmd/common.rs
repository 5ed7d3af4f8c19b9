//! Options and helpers several commands share: how the board is reached, which database,
//! printing, the progress bar, writing the files a user names.

use super::Failure;
use indicatif::{ProgressBar, ProgressStyle};
use ohmsight::calibration;
use ohmsight::link::{InProcessLink, Link, SerialLink};
use ohmsight::record::{profile_file, BoardRecord, LinkRecord, Profile};
use ohmsight::run::{ProfileChoice, RunContext, RunEvent};
use ohmsight::scenario;
use ohmsight::session::Session;
use ohmsight::store::{self, DbUrl, Store};
use std::io::Write;
use std::path::{Path, PathBuf};

/// How the board is reached: the same options for every command that surveys.
#[derive(clap::Args)]
pub struct LinkArgs {
    /// Simulated board wired as described in this scenario file (TOML).
    #[arg(long, value_name = "FILE.toml", conflicts_with = "port")]
    pub scenario: Option<PathBuf>,
    /// Serial port of a board running the ohmsight firmware (e.g. /dev/ttyACM0).
    #[arg(long, value_name = "PATH")]
    pub port: Option<String>,
    /// Baud rate of the serial port (bits per second; 115200 or 115.2k).
    #[arg(long, value_name = "N", default_value_t = 115_200, requires = "port", value_parser = baud_rate)]
    pub baud: u32,
    /// Seed of the simulated board's noise (overrides the scenario's).
    #[arg(long, value_name = "N", conflicts_with = "port", value_parser = seed)]
    pub seed: Option<u64>,
    /// Talk to a board of another protocol version anyway.
    #[arg(long)]
    pub any_version: bool,
}

impl LinkArgs {
    /// Whether any option names a link (a port or a simulated board).
    pub fn given(&self) -> bool {
        self.port.is_some() || self.scenario.is_some() || self.seed.is_some()
    }
}

/// A session over the link a stored run was made on: its serial port, or its simulated board
/// (scenario file and seed).
pub fn open_run_link(
    record: &ohmsight::RunRecord,
    any_version: bool,
) -> Result<(Session<AnyLink>, RunContext), Failure> {
    let run = &record.run;
    let args = match &run.link {
        LinkRecord::Serial { port, baud } => {
            LinkArgs { scenario: None, port: Some(port.clone()), baud: *baud, seed: None, any_version }
        }
        LinkRecord::InProcess => LinkArgs {
            scenario: run.scenario.as_deref().filter(|s| *s != scenario::DEMO_NAME).map(PathBuf::from),
            port: None,
            baud: 115_200,
            seed: run.seed,
            any_version,
        },
    };
    open_session(&args)
}

// Value parsers: every option that takes a quantity reads SI prefixes the same way
// (`ohmsight::units::parse_si`), and a value that cannot be says what kind of value was expected.

/// `--resolve`: a positive voltage (`100u`, `100 µV`, `100e-6`, `0.1m`).
pub fn positive_volts(text: &str) -> Result<f64, String> {
    match ohmsight::units::parse_si(text, &["V"]) {
        Some(v) if v > 0.0 => Ok(v),
        _ => Err(format!(
            "'{text}' is not a positive voltage: give volts with an optional SI prefix, e.g. 100u or 100e-6 for 100 µV"
        )),
    }
}

/// A serial baud rate: a whole number of bits per second above zero (`115200`, `115.2k`, `1M`).
pub fn baud_rate(text: &str) -> Result<u32, String> {
    match ohmsight::units::parse_count(text).and_then(|n| u32::try_from(n).ok()) {
        Some(n) if n > 0 => Ok(n),
        _ => Err(format!(
            "'{text}' is not a baud rate: give the serial port's speed in bits per second, e.g. 115200 or 115.2k"
        )),
    }
}

/// A seed: any whole number from 0 to 2^64 − 1.
pub fn seed(text: &str) -> Result<u64, String> {
    text.trim()
        .parse::<u64>()
        .map_err(|_| format!("'{text}' is not a seed: give a whole number from 0 to {}", u64::MAX))
}

/// A channel number (0 to 255).
pub fn channel(text: &str) -> Result<u8, String> {
    text.trim()
        .parse::<u8>()
        .map_err(|_| format!("'{text}' is not a channel number: give the ADC channel as a whole number from 0 to 255"))
}

/// A time in milliseconds, a whole number (`1500`, `1.5k`).
pub fn millis(text: &str) -> Result<u64, String> {
    ohmsight::units::parse_count(text)
        .ok_or_else(|| format!("'{text}' is not a time in milliseconds: give a whole number, e.g. 1500"))
}

/// Which database runs are kept in.
#[derive(clap::Args)]
pub struct DbArgs {
    /// The run database: a file path or sqlite://PATH (SQLite), or postgres://USER@HOST/DB for a
    /// PostgreSQL server that several stations share. Default: $OHMSIGHT_DB, else runs.db in
    /// this user's data folder (e.g. ~/.local/share/ohmsight/runs.db).
    #[arg(long, value_name = "URL", global = true)]
    pub db: Option<String>,
}

impl DbArgs {
    /// The database named, or the default one.
    pub fn url(&self) -> Result<DbUrl, Failure> {
        Ok(match &self.db {
            Some(text) => DbUrl::parse(text)?,
            None => store::default_url()?,
        })
    }

    /// Opens the database (creating it and its tables when new).
    pub fn open(&self) -> Result<Box<dyn Store>, Failure> {
        Ok(store::open(&self.url()?)?)
    }
}

/// The pins' names for this set-up: the same option for every command that surveys.
#[derive(clap::Args)]
pub struct WiringArgs {
    /// Name the board's pins from this wiring file (TOML: [[pin]] tables of channel and label,
    /// 1 to 64 characters of any language; optional board = "NAME"). The labels replace the
    /// board's own in the run's table, page, record and limits.
    #[arg(long, value_name = "FILE.toml")]
    pub wiring: Option<PathBuf>,
}

impl WiringArgs {
    /// The wiring file, read and checked (bad input names file and line), or `None`.
    pub fn load(&self) -> Result<Option<ohmsight::wiring::Wiring>, Failure> {
        let Some(path) = &self.wiring else { return Ok(None) };
        let text = std::fs::read_to_string(path)
            .map_err(|e| Failure::bad_input(format!("cannot read the wiring file {}: {e}", path.display())))?;
        ohmsight::wiring::parse(&path.display().to_string(), &text)
            .map(Some)
            .map_err(|e| Failure::bad_input(e.to_string()))
    }
}

/// Which converter values a run is analysed with: the same options for survey and check.
#[derive(clap::Args)]
pub struct ProfileArgs {
    /// Converter values to analyse with, by hand (TOML, keys as for `refit --profile`); they
    /// override the unit's calibration and the board's own values.
    #[arg(long, value_name = "FILE.toml")]
    pub profile: Option<PathBuf>,
    /// Analyse with the board's own (datasheet) values even where the unit has a calibration in
    /// the database.
    #[arg(long)]
    pub uncalibrated: bool,
}

impl ProfileArgs {
    /// How the run chooses its converter values: the unit's newest calibration in `store`
    /// (unless --uncalibrated), then the profile file's values over them. A profile file that
    /// cannot be read or parsed is bad input now, before the board is touched.
    pub fn choice(&self, store: Option<Box<dyn Store>>) -> Result<Option<ProfileChoice>, Failure> {
        let file = match &self.profile {
            None => None,
            Some(path) => {
                let text = std::fs::read_to_string(path)
                    .map_err(|e| Failure::bad_input(format!("cannot read the profile file {}: {e}", path.display())))?;
                let name = path.display().to_string();
                // Checked against a profile of any board: what it says about the board itself
                // (the number of sample times) is checked again once the board has answered.
                profile_file::check_syntax(&name, &text).map_err(|e| Failure::bad_input(e.to_string()))?;
                Some((name, text))
            }
        };
        let store = store.filter(|_| !self.uncalibrated).map(std::sync::Mutex::new);
        if file.is_none() && store.is_none() {
            return Ok(None);
        }
        Ok(Some(ProfileChoice(std::sync::Arc::new(move |board: &BoardRecord, own: Profile| {
            let mut profile = own;
            if let Some(store) = &store {
                let mut store = store.lock().map_err(|_| "the run database's connection was lost".to_string())?;
                let unit = format!("{:016x}", board.unit_id);
                let found = store.latest_calibration(&board.name, &unit).map_err(|e| {
                    format!(
                        "the unit's calibration could not be read from {}: {e} (survey with --uncalibrated to use                          the board's own values)",
                        store.describe()
                    )
                })?;
                if let Some(c) = found {
                    profile = calibration::apply(&profile, &c);
                }
            }
            if let Some((name, text)) = &file {
                let under = profile.source.clone();
                profile = profile_file::apply(&profile, name, text).map_err(|e| e.to_string())?;
                if under != "board" {
                    profile.source = format!("{name} over {under}");
                }
            }
            Ok(profile)
        }))))
    }
}

/// Writes `text` to stdout; a closed pipe is not an error.
pub fn print(text: &str) -> Result<(), Failure> {
    let mut stdout = std::io::stdout().lock();
    match stdout.write_all(text.as_bytes()).and_then(|_| stdout.flush()) {
        Err(e) if e.kind() != std::io::ErrorKind::BrokenPipe => {
            Err(Failure::failed(format!("cannot write to stdout: {e}")))
        }
        _ => Ok(()),
    }
}

/// Writes a file the user named (following symlinks, never replacing a device, never half a
/// file); a failure is bad input: another path will do.
pub fn write_output(path: &Path, bytes: &[u8], what: &str) -> Result<(), Failure> {
    ohmsight::output::write_file(path, bytes).map_err(|e| Failure::bad_input(format!("cannot write the {what}: {e}")))
}

/// Prints a stored record analysed again (text, or its v2 JSON document) and writes the page
/// when asked: what `refit` and `history show` both do.
pub fn print_analysed(
    record: &ohmsight::RunRecord,
    opts: &ohmsight::advice::AdviceOptions,
    json: bool,
    html: Option<&Path>,
) -> Result<(), Failure> {
    use ohmsight::render::{html::survey_html, survey_json, text::survey_text};
    let r = ohmsight::analyse::analyse(record);
    let advice = ohmsight::advice::advise(&r, opts);
    print(&if json { survey_json(&r, &advice, opts) } else { survey_text(&r, &advice) })?;
    match html {
        Some(path) => write_output(path, survey_html(&r).as_bytes(), "HTML report"),
        None => Ok(()),
    }
}

/// Loads the scenario of `--scenario` (or the demo) with the `--seed` override.
pub fn load_scenario(path: Option<&PathBuf>, seed: Option<u64>) -> Result<ohmsight_virtual::Scenario, Failure> {
    let mut sc = match path {
        Some(path) => scenario::load(path).map_err(|e| Failure::bad_input(e.to_string()))?,
        None => scenario::demo(),
    };
    if let Some(seed) = seed {
        sc.seed = seed;
    }
    Ok(sc)
}

/// Any link, boxed, so one code path serves the serial port and the simulated board.
pub struct AnyLink(Box<dyn Link>);

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

/// The command line as typed, arguments with spaces or quotes quoted.
pub fn command_line() -> String {
    std::env::args()
        .map(|a| {
            if !a.is_empty() && a.chars().all(|c| c.is_ascii_alphanumeric() || "-_./=:,@+%".contains(c)) {
                a
            } else {
                format!("'{}'", a.replace('\'', "'\\''"))
            }
        })
        .collect::<Vec<_>>()
        .join(" ")
}

/// A session on the board the link options name (its serial port, or the simulated board of
/// the scenario file or the demo), and how it was reached, for the record.
pub fn open_session(link: &LinkArgs) -> Result<(Session<AnyLink>, RunContext), Failure> {
    let command = command_line();
    if let Some(port) = &link.port {
        let serial = SerialLink::open(port, link.baud).map_err(|e| Failure::bad_input(e.to_string()))?;
        let mut session = Session::new(AnyLink(Box::new(serial)));
        session.link_bytes_per_s = u64::from(link.baud / 10);
        let ctx = RunContext {
            link: LinkRecord::Serial { port: port.clone(), baud: link.baud },
            scenario: None,
            seed: None,
            command,
        };
        return Ok((session, ctx));
    }
    let sc = load_scenario(link.scenario.as_ref(), link.seed)?;
    let ctx = RunContext {
        link: LinkRecord::InProcess,
        scenario: Some(link.scenario.as_ref().map_or(scenario::DEMO_NAME.to_string(), |p| p.display().to_string())),
        seed: Some(sc.seed),
        command,
    };
    Ok((Session::new(AnyLink(Box::new(InProcessLink::new(&sc)))), ctx))
}

/// The progress bar on stderr, drawn from a run's events (hidden when stderr is no terminal
/// or `quiet`).
pub struct Bar(ProgressBar);

impl Bar {
    /// A bar, shown when stderr is a terminal and not `quiet`.
    pub fn new(quiet: bool) -> Self {
        let shown = !quiet && std::io::IsTerminal::is_terminal(&std::io::stderr());
        let bar = if shown { ProgressBar::new(0) } else { ProgressBar::hidden() };
        bar.set_style(
            ProgressStyle::with_template("{spinner} {bar:30} {pos}/{len} experiments · {msg}")
                .unwrap_or_else(|_| ProgressStyle::default_bar()),
        );
        Bar(bar)
    }

    /// Follows one event.
    pub fn on(&self, event: &RunEvent) {
        match event {
            RunEvent::Planned { total } => self.0.set_length(*total),
            RunEvent::Starting { pin: Some(ch), what } => self.0.set_message(format!("ch{ch} {what}")),
            RunEvent::Starting { pin: None, what: "scan record" } => self.0.set_message("noise, many pins at once"),
            RunEvent::Starting { pin: None, .. } => self.0.set_message("precharge sources"),
            RunEvent::Recorded(_) => self.0.inc(1),
            RunEvent::Fitting => self.0.set_message("fitting"),
            _ => {}
        }
    }

    /// Clears the bar.
    pub fn finish(&self) {
        self.0.finish_and_clear();
    }
}

/// Writes a run to the store as it happens; after the first failure it writes nothing more
/// and keeps the error for the end.
pub struct Keeper {
    /// The database.
    pub store: Box<dyn Store>,
    /// The run being written.
    pub run_id: Option<String>,
    /// The first failure.
    pub error: Option<store::StoreError>,
}

impl Keeper {
    /// Writes into `store`.
    pub fn new(store: Box<dyn Store>) -> Self {
        Keeper { store, run_id: None, error: None }
    }

    /// Follows one event.
    pub fn on(&mut self, event: &RunEvent) {
        if self.error.is_some() {
            return;
        }
        let done = match (event, &self.run_id) {
            (RunEvent::Began(record), _) => {
                self.run_id = Some(record.run.id.clone());
                self.store.begin_run(record)
            }
            (RunEvent::Resumed(record), _) => {
                self.run_id = Some(record.run.id.clone());
                Ok(())
            }
            (RunEvent::Recorded(e), Some(id)) => self.store.add_experiment(id, e),
            (RunEvent::PinComplete(ch), Some(id)) => self.store.set_pin_complete(id, *ch, true),
            _ => Ok(()),
        };
        if let Err(e) = done {
            self.error = Some(e);
        }
    }
}
