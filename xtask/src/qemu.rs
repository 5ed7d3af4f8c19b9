//! The `qemu-m4` image under `qemu-system-arm -machine mps2-an386`, its UART0 on a
//! pseudo-terminal.

use anyhow::{bail, Context, Result};
use std::io::{BufRead, BufReader, Read};
use std::path::{Path, PathBuf};
use std::process::{Child, Command, Stdio};
use std::sync::{Arc, Mutex};

/// The emulator binary.
pub const QEMU: &str = "qemu-system-arm";
/// The machine the `qemu-m4` image is linked for.
pub const MACHINE: &str = "mps2-an386";

/// What to install when the emulator is missing.
pub fn install_hint() -> &'static str {
    "install QEMU's Arm system emulator: `apt-get install qemu-system-arm` (Debian/Ubuntu)"
}

/// A running emulator. Dropping it stops QEMU (also when a test panics).
pub struct Qemu {
    child: Child,
    /// The pseudo-terminal QEMU put UART0 on (`/dev/pts/N`).
    pub device: String,
    log: Arc<Mutex<String>>,
    monitor: PathBuf,
}

/// What cortex-m-rt's `paint-stack` start-up fills the stack with.
const STACK_PAINT: u32 = 0xcccc_cccc;

/// How much of its stack an image has used so far.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct StackUse {
    /// Bytes from the top of the stack down to the deepest word ever written.
    pub used: u64,
    /// Bytes looked at (the used part can only be told within them).
    pub window: u64,
}

impl Qemu {
    /// Starts `elf` on the emulated board and waits for QEMU to say where the UART is.
    pub fn start(elf: &Path) -> Result<Qemu> {
        Qemu::start_on(elf, MACHINE, 0)
    }

    /// Starts `elf` on QEMU's `machine` with its serial port number `serial` (0 = the first)
    /// on a pseudo-terminal and the ports before it unconnected.
    pub fn start_on(elf: &Path, machine: &str, serial: usize) -> Result<Qemu> {
        static STARTED: std::sync::atomic::AtomicU32 = std::sync::atomic::AtomicU32::new(0);
        let n = STARTED.fetch_add(1, std::sync::atomic::Ordering::Relaxed);
        let monitor = std::env::temp_dir().join(format!("ohmsight-qemu-{}-{n}.sock", std::process::id()));
        let _ = std::fs::remove_file(&monitor);
        let mut cmd = Command::new(QEMU);
        cmd.args(["-machine", machine, "-display", "none"]);
        for _ in 0..serial {
            cmd.args(["-serial", "null"]);
        }
        cmd.args(["-serial", "pty", "-monitor"])
            .arg(format!("unix:{},server=on,wait=off", monitor.display()))
            .arg("-kernel")
            .arg(elf)
            .stdin(Stdio::null())
            .stdout(Stdio::piped())
            .stderr(Stdio::piped());
        stop_with_parent(&mut cmd);
        let mut child = cmd.spawn().map_err(|e| {
            if e.kind() == std::io::ErrorKind::NotFound {
                anyhow::anyhow!("{QEMU} not found: {}", install_hint())
            } else {
                anyhow::anyhow!("cannot start {QEMU}: {e}")
            }
        })?;
        let log = Arc::new(Mutex::new(String::new()));
        // QEMU 7 says "char device redirected to /dev/pts/N (label serial0)" on stderr; read
        // both streams so neither fills up, and keep them for error messages.
        let (tx, rx) = std::sync::mpsc::channel::<String>();
        for stream in [
            child.stdout.take().map(|s| Box::new(s) as Box<dyn Read + Send>),
            child.stderr.take().map(|s| Box::new(s) as Box<dyn Read + Send>),
        ]
        .into_iter()
        .flatten()
        {
            let (tx, log) = (tx.clone(), log.clone());
            std::thread::spawn(move || {
                for line in BufReader::new(stream).lines().map_while(Result::ok) {
                    if let Ok(mut l) = log.lock() {
                        l.push_str(&line);
                        l.push('\n');
                    }
                    let _ = tx.send(line);
                }
            });
        }
        drop(tx);
        let deadline = std::time::Instant::now() + std::time::Duration::from_secs(20);
        let device = loop {
            let left = deadline.saturating_duration_since(std::time::Instant::now());
            match rx.recv_timeout(left) {
                Ok(line) => {
                    if let Some(dev) = pts_in(&line) {
                        break dev;
                    }
                }
                Err(_) => {
                    let _ = child.kill();
                    let _ = child.wait();
                    let said = log.lock().map(|l| l.clone()).unwrap_or_default();
                    bail!("{QEMU} did not report its serial pseudo-terminal; it said:\n{said}");
                }
            }
        };
        Ok(Qemu { child, device, log, monitor })
    }

    /// Reads `words` 32-bit words of guest memory at `addr` through QEMU's monitor.
    pub fn read_words(&self, addr: u32, words: usize) -> Result<Vec<u32>> {
        use std::io::Write;
        let mut sock = std::os::unix::net::UnixStream::connect(&self.monitor)
            .with_context(|| format!("connecting to QEMU's monitor at {}", self.monitor.display()))?;
        sock.set_read_timeout(Some(std::time::Duration::from_secs(10)))?;
        let mut text = String::new();
        let mut buf = [0u8; 65536];
        let mut until_prompt = |sock: &mut std::os::unix::net::UnixStream, text: &mut String| -> Result<()> {
            while !text.ends_with("(qemu) ") {
                let n = sock.read(&mut buf).context("reading QEMU's monitor")?;
                if n == 0 {
                    bail!("QEMU's monitor closed");
                }
                text.push_str(&String::from_utf8_lossy(&buf[..n]));
            }
            Ok(())
        };
        until_prompt(&mut sock, &mut text)?;
        let mut out = Vec::with_capacity(words);
        let mut at = addr;
        while out.len() < words {
            let chunk = (words - out.len()).min(1024);
            text.clear();
            writeln!(sock, "xp /{chunk}wx {at:#x}")?;
            until_prompt(&mut sock, &mut text)?;
            // Lines look like "0000000020000000: 0xcccccccc 0xcccccccc 0x00000000 0x20000010".
            let got: Vec<u32> = text
                .lines()
                .filter_map(|l| l.split_once(": ").map(|(_, rest)| rest))
                .flat_map(str::split_whitespace)
                .filter_map(|w| u32::from_str_radix(w.strip_prefix("0x")?, 16).ok())
                .collect();
            if got.len() != chunk {
                bail!("QEMU's monitor gave {} words for {chunk}:\n{text}", got.len());
            }
            out.extend(got);
            at += 4 * chunk as u32;
        }
        Ok(out)
    }

    /// The deepest stack use so far of `elf` (which must be built with cortex-m-rt's
    /// `paint-stack`), looking at most `window` bytes below the top of the stack.
    pub fn stack_use(&self, elf: &Path, window: u64) -> Result<StackUse> {
        use object::{Object, ObjectSymbol};
        let bytes = std::fs::read(elf)?;
        let file = object::File::parse(&*bytes)?;
        let sym = |name: &str| file.symbols().find(|s| s.name() == Ok(name)).map(|s| s.address());
        let top = sym("_stack_start").context("no _stack_start symbol (not a cortex-m-rt image?)")?;
        let bottom = sym("_stack_end").context("no _stack_end symbol (cortex-m-rt 0.7.4 or newer needed)")?;
        let window = window.min(top - bottom) & !3;
        let start = top - window;
        let words = self.read_words(start as u32, (window / 4) as usize)?;
        let deepest = words.iter().position(|&w| w != STACK_PAINT).unwrap_or(words.len());
        Ok(StackUse { used: window - 4 * deepest as u64, window })
    }

    /// Whether QEMU is still running.
    pub fn is_running(&mut self) -> bool {
        matches!(self.child.try_wait(), Ok(None))
    }

    /// What QEMU printed so far.
    pub fn log(&self) -> String {
        self.log.lock().map(|l| l.clone()).unwrap_or_default()
    }

    /// Waits until QEMU exits by itself (or is interrupted).
    pub fn wait(&mut self) -> Result<std::process::ExitStatus> {
        self.child.wait().context("waiting for qemu")
    }
}

impl Drop for Qemu {
    fn drop(&mut self) {
        let _ = self.child.kill();
        let _ = self.child.wait();
        let _ = std::fs::remove_file(&self.monitor);
    }
}

/// The `/dev/pts/N` in QEMU's "char device redirected to …" line.
fn pts_in(line: &str) -> Option<String> {
    let rest = &line[line.find("redirected to ")? + "redirected to ".len()..];
    let dev = rest.split_whitespace().next()?;
    dev.starts_with("/dev/").then(|| dev.to_string())
}

/// Asks the kernel to stop QEMU when this process goes away, so no emulator outlives its caller.
fn stop_with_parent(cmd: &mut Command) {
    use std::os::unix::process::CommandExt;
    // SAFETY: prctl is async-signal-safe and touches nothing of the parent's state.
    unsafe {
        cmd.pre_exec(|| {
            libc::prctl(libc::PR_SET_PDEATHSIG, libc::SIGTERM);
            Ok(())
        });
    }
}

/// Opens the board's pseudo-terminal, loads `scenario`, and closes it again.
pub fn load(device: &str, scenario: &ohmsight_virtual::Scenario) -> Result<()> {
    let link = ohmsight::link::SerialLink::open(device, 115_200)?;
    let mut session = ohmsight::session::Session::new(link);
    session.link_bytes_per_s = 11_520;
    session.load_scenario(scenario).with_context(|| format!("loading the scenario into the board on {device}"))?;
    Ok(())
}

/// `cargo xtask qemu [--scenario F]`: builds the image, starts it, loads the scenario (the
/// demo when none is given), prints the device path alone on the first line of stdout, and
/// runs until interrupted.
pub fn command(args: &[String]) -> Result<()> {
    let mut scenario_path = None;
    let mut it = args.iter();
    while let Some(a) = it.next() {
        match a.as_str() {
            "--scenario" => scenario_path = Some(it.next().context("--scenario needs a file")?),
            other => bail!("unknown option {other}: usage: cargo xtask qemu [--scenario FILE]"),
        }
    }
    let scenario = match scenario_path {
        Some(p) => ohmsight::scenario::load(Path::new(p)).map_err(|e| anyhow::anyhow!("{e}"))?,
        None => ohmsight::scenario::demo(),
    };
    let image = crate::firmware::build("qemu-m4")?;
    let mut qemu = Qemu::start(&image.elf)?;
    load(&qemu.device, &scenario)?;
    println!("{}", qemu.device);
    eprintln!(
        "{} running {} with scenario \"{}\"; survey it with `ohmsight survey --port {}`; Ctrl-C stops it",
        QEMU,
        image.elf.display(),
        scenario.name,
        qemu.device
    );
    let status = qemu.wait()?;
    if !status.success() {
        bail!("{QEMU} stopped: {status}\n{}", qemu.log());
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    #[test]
    fn the_device_path_is_read_from_qemus_line() {
        let line = "char device redirected to /dev/pts/7 (label serial0)";
        assert_eq!(super::pts_in(line).as_deref(), Some("/dev/pts/7"));
        assert_eq!(super::pts_in("qemu-system-arm: warning: something"), None);
    }
}
