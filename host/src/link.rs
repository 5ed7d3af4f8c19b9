//! Byte links to a board: the built-in simulated board in-process, or a serial port.

use ohmsight_firmware::Engine;
use ohmsight_virtual::{Realism, Scenario, VirtualBoard, VirtualClock, VirtualDelay};
use std::collections::VecDeque;
use std::io;
use std::rc::Rc;
use std::time::Duration;

/// A bidirectional byte link.
pub trait Link {
    /// Sends bytes.
    fn send(&mut self, bytes: &[u8]) -> io::Result<()>;
    /// Receives what is available within `timeout` (at least one byte, or zero on timeout).
    fn recv(&mut self, buf: &mut [u8], timeout: Duration) -> io::Result<usize>;
    /// Human-readable name of the link, for messages.
    fn name(&self) -> String;
}

type SimEngine = Engine<VirtualBoard<Rc<VirtualClock>>, VirtualDelay<Rc<VirtualClock>>>;

/// The simulated board running the real firmware engine in this process.
///
/// Every request is answered synchronously: `send` runs the engine on the request, `recv`
/// hands out its responses. Optionally corrupts frames, to exercise the host's recovery.
pub struct InProcessLink {
    engine: Box<SimEngine>,
    clock: Rc<VirtualClock>,
    out: VecDeque<u8>,
    corrupt_every: Option<u64>,
    silent_after: Option<u64>,
    frames_out: u64,
    pending: Vec<u8>,
}

impl InProcessLink {
    /// A link to a fresh simulated board for `scenario`.
    pub fn new(scenario: &Scenario) -> Self {
        Self::with_realism(scenario, Realism::full())
    }

    /// A link to a simulated board with only some non-idealities (for studies of the fit).
    pub fn with_realism(scenario: &Scenario, realism: Realism) -> Self {
        let clock = Rc::new(VirtualClock::new());
        let board = VirtualBoard::with_realism(scenario, clock.clone(), realism);
        let desc = board.description();
        let engine = Box::new(Engine::new(board, VirtualDelay(clock.clone()), desc));
        Self {
            engine,
            clock,
            out: VecDeque::new(),
            corrupt_every: None,
            silent_after: None,
            frames_out: 0,
            pending: Vec::new(),
        }
    }

    /// Flips one bit in every `n`-th response frame (for tests of link recovery).
    pub fn corrupt_every(mut self, n: u64) -> Self {
        self.corrupt_every = Some(n.max(1));
        self
    }

    /// Goes silent for good after `n` response frames, like a cable pulled mid-survey (for
    /// tests of what a survey keeps when the link dies).
    pub fn silent_after(mut self, n: u64) -> Self {
        self.silent_after = Some(n);
        self
    }

    /// Response frames the board has sent so far.
    pub fn frames_sent(&self) -> u64 {
        self.frames_out
    }

    /// Virtual time of the simulated board, ps.
    pub fn virtual_ps(&self) -> u64 {
        self.clock.now_ps()
    }

    /// The simulated board (for tests that compare with the truth).
    pub fn board(&mut self) -> &mut VirtualBoard<Rc<VirtualClock>> {
        self.engine.front_end_mut()
    }
}

impl Link for InProcessLink {
    fn send(&mut self, bytes: &[u8]) -> io::Result<()> {
        self.pending.clear();
        let mut out = std::mem::take(&mut self.pending);
        if let Err(never) = self.engine.feed(bytes, &mut out) {
            match never {}
        }
        for frame in out.split_inclusive(|&b| b == 0) {
            self.frames_out += 1;
            if self.silent_after.is_some_and(|n| self.frames_out > n) {
                break;
            }
            let start = self.out.len();
            self.out.extend(frame);
            if let Some(n) = self.corrupt_every {
                if self.frames_out.is_multiple_of(n) && frame.len() > 2 {
                    let i = start + frame.len() / 2;
                    self.out[i] ^= if self.out[i] == 0x01 { 0x02 } else { 0x01 };
                }
            }
        }
        self.pending = out;
        Ok(())
    }

    fn recv(&mut self, buf: &mut [u8], _timeout: Duration) -> io::Result<usize> {
        let n = buf.len().min(self.out.len());
        for (b, v) in buf.iter_mut().zip(self.out.drain(..n)) {
            *b = v;
        }
        Ok(n)
    }

    fn name(&self) -> String {
        "built-in simulated board".into()
    }
}

/// A serial port (USB CDC, UART adapter, or a pseudo-terminal).
pub struct SerialLink {
    port: Box<dyn serialport::SerialPort>,
    path: String,
}

impl SerialLink {
    /// Opens `path` at `baud`, 8N1, no flow control.
    pub fn open(path: &str, baud: u32) -> io::Result<Self> {
        let port = serialport::new(path, baud)
            .timeout(Duration::from_millis(100))
            .open()
            .map_err(|e| io::Error::other(format!("cannot open serial port {path}: {}", open_error(path, &e))))?;
        Ok(Self { port, path: path.to_string() })
    }

    /// Wraps a port that is already open (a pseudo-terminal pair, a port set up by the caller).
    pub fn from_port(port: Box<dyn serialport::SerialPort>, name: &str) -> Self {
        Self { port, path: name.to_string() }
    }
}

/// Why a port did not open, in words that say what was expected: the system's own text for a
/// device that is not a terminal ("Not a typewriter", ENOTTY) names a 1970s device, not the
/// problem.
fn open_error(path: &str, e: &serialport::Error) -> String {
    const HINT: &str = "give the board's serial device (e.g. /dev/ttyACM0 or COM3; `ohmsight ports` lists them)";
    match std::fs::metadata(path) {
        Err(m) if m.kind() == io::ErrorKind::NotFound => format!("no such device; {HINT}"),
        Ok(m) if m.is_dir() => format!("it is a folder, not a serial device; {HINT}"),
        Ok(m) if m.is_file() => format!("it is a regular file, not a serial device; {HINT}"),
        Ok(_) if ["typewriter", "inappropriate ioctl"].iter().any(|t| e.to_string().to_lowercase().contains(t)) => {
            format!("the device is not a serial port (no terminal settings to set); {HINT}")
        }
        _ => e.to_string(),
    }
}

impl Link for SerialLink {
    fn send(&mut self, bytes: &[u8]) -> io::Result<()> {
        use std::io::Write;
        self.port.write_all(bytes)?;
        self.port.flush()
    }

    fn recv(&mut self, buf: &mut [u8], timeout: Duration) -> io::Result<usize> {
        use std::io::Read;
        self.port.set_timeout(timeout).map_err(io::Error::other)?;
        match self.port.read(buf) {
            Ok(n) => Ok(n),
            Err(e) if e.kind() == io::ErrorKind::TimedOut => Ok(0),
            Err(e) => Err(e),
        }
    }

    fn name(&self) -> String {
        format!("serial port {}", self.path)
    }
}
