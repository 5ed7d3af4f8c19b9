//! One scenario surveyed over different paths to the board: in-process, over a pseudo-terminal
//! to `ohmsight simulate`, and (with a board image under an emulator) over its serial port.
//! Whatever the path, the verdicts must be the same and the estimates inside each other's
//! intervals.
//!
//! - [`survey_port`] surveys whatever answers on a serial port path;
//! - [`assert_same_survey`] compares such a survey with the in-process one;
//! - [`Simulator`] runs `ohmsight simulate` and hands out its pseudo-terminal;
//! - [`Peer`] is a misbehaving board on a pseudo-terminal (garbage, another protocol version);
//! - [`RawPort`] sends hand-made bytes to a port and decodes what comes back.

use ohmsight::fit::Interval;
use ohmsight::link::SerialLink;
use ohmsight::session::Session;
use ohmsight::{survey, SurveyOptions, SurveyReport};
use ohmsight_protocol::{encode_frame, FrameAccumulator, FrameError, Request, Response, MAX_FRAME};
use serialport::{SerialPort, TTYPort};
use std::io::{BufRead, BufReader, Read, Write};
use std::path::{Path, PathBuf};
use std::process::{Child, Command, ExitStatus, Stdio};
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::{mpsc, Arc, Mutex};
use std::time::{Duration, Instant};

/// Nominal rate used for the host's time-outs on a pseudo-terminal (115 200 baud, 8N1).
const PTY_BYTES_PER_S: u64 = 11_520;

/// Writes `toml` to a fresh file in a directory of this test process; returns its path.
pub fn scenario_file(name: &str, toml: &str) -> PathBuf {
    let dir = std::env::temp_dir().join(format!("ohmsight-paths-{}", std::process::id()));
    std::fs::create_dir_all(&dir).expect("a temporary directory");
    let path = dir.join(name);
    std::fs::write(&path, toml).expect("writing a scenario file");
    path
}

/// Opens the serial port `path` so that processes the tests start do not inherit it.
///
/// Tests run side by side in threads that start processes, and serialport opens without
/// close-on-exec: a port that a stray child holds open never hangs up for the board.
pub fn open_port(path: &str) -> TTYPort {
    let port = serialport::new(path, 115_200)
        .timeout(Duration::from_millis(50))
        .open_native()
        .unwrap_or_else(|e| panic!("cannot open {path}: {e}"));
    close_on_exec(&port);
    port
}

fn close_on_exec(port: &TTYPort) {
    use nix::fcntl::{fcntl, FcntlArg, FdFlag};
    use std::os::fd::AsRawFd;
    fcntl(port.as_raw_fd(), FcntlArg::F_SETFD(FdFlag::FD_CLOEXEC)).expect("setting close-on-exec");
}

/// Surveys the board on the serial port `path` (all pins, default options).
pub fn survey_port(path: &str) -> SurveyReport {
    let link = SerialLink::from_port(Box::new(open_port(path)), path);
    let mut session = Session::new(link);
    session.link_bytes_per_s = PTY_BYTES_PER_S;
    survey(&mut session, &SurveyOptions::default()).unwrap_or_else(|e| panic!("survey over {path}: {e}"))
}

fn within(iv: &Interval, x: f64) -> bool {
    iv.low.is_none_or(|l| l <= x) && iv.high.is_none_or(|h| h >= x)
}

/// Asserts that `other` (surveyed over `path_name`) agrees with `reference` (in-process): the
/// same pins, the same verdicts, and each estimate of source resistance and node capacitance
/// inside the other survey's interval, both ways. No bad frames on the way.
pub fn assert_same_survey(reference: &SurveyReport, other: &SurveyReport, path_name: &str) {
    assert_eq!(other.fault, None, "{path_name}: the survey was cut short");
    assert_eq!(other.link.bad_frames, 0, "{path_name}: frames were damaged on the way");
    let channels = |r: &SurveyReport| r.pins.iter().map(|p| p.channel).collect::<Vec<_>>();
    assert_eq!(channels(other), channels(reference), "{path_name}: not the same pins");
    for (a, b) in reference.pins.iter().zip(&other.pins) {
        let ctx = format!("{path_name}, ch{} {}", a.channel, a.label);
        assert_eq!(b.verdict, a.verdict, "{ctx}: verdicts differ");
        for (what, x, y) in [("source R", &a.source_ohms, &b.source_ohms), ("node C", &a.node_farads, &b.node_farads)] {
            assert_eq!(x.estimate.is_some(), y.estimate.is_some(), "{ctx}: {what} is an estimate on one path only");
            if let (Some(ex), Some(ey)) = (x.estimate, y.estimate) {
                assert!(within(y, ex), "{ctx}: {what} in-process {ex:e} outside the other interval {y:?}");
                assert!(within(x, ey), "{ctx}: {what} over the path {ey:e} outside the in-process interval {x:?}");
            }
        }
    }
}

/// `ohmsight simulate` running as a child process, serving on [`Simulator::path`].
/// Killed when dropped.
pub struct Simulator {
    child: Child,
    /// The pseudo-terminal it printed on its first line.
    pub path: String,
    /// Everything it has printed on stdout (first line included).
    stdout: Arc<Mutex<String>>,
    /// Everything it has written on stderr so far.
    stderr: Arc<Mutex<String>>,
}

impl Simulator {
    /// Starts `exe simulate ARGS…` and waits (at most 20 s) for the path on its first line.
    pub fn start(exe: &Path, args: &[&str]) -> Simulator {
        let mut child = Command::new(exe)
            .arg("simulate")
            .args(args)
            .stdin(Stdio::null())
            .stdout(Stdio::piped())
            .stderr(Stdio::piped())
            .spawn()
            .unwrap_or_else(|e| panic!("cannot start {}: {e}", exe.display()));
        let stdout = Arc::new(Mutex::new(String::new()));
        let stderr = Arc::new(Mutex::new(String::new()));
        let (tx, rx) = mpsc::channel();
        let out = child.stdout.take().expect("piped stdout");
        let sink = stdout.clone();
        std::thread::spawn(move || {
            for (i, line) in BufReader::new(out).lines().map_while(Result::ok).enumerate() {
                sink.lock().unwrap().push_str(&(line.clone() + "\n"));
                if i == 0 {
                    let _ = tx.send(line);
                }
            }
        });
        let err = child.stderr.take().expect("piped stderr");
        let sink = stderr.clone();
        std::thread::spawn(move || {
            let mut r = BufReader::new(err);
            let mut line = String::new();
            while r.read_line(&mut line).is_ok_and(|n| n > 0) {
                sink.lock().unwrap().push_str(&line);
                line.clear();
            }
        });
        let path = match rx.recv_timeout(Duration::from_secs(20)) {
            Ok(p) => p,
            Err(_) => {
                let _ = child.kill();
                let _ = child.wait();
                panic!("`ohmsight simulate` printed no path in 20 s; stderr: {}", stderr.lock().unwrap());
            }
        };
        Simulator { child, path, stdout, stderr }
    }

    /// What it printed on stdout so far.
    pub fn stdout(&self) -> String {
        self.stdout.lock().unwrap().clone()
    }

    /// What it printed on stderr so far.
    pub fn stderr(&self) -> String {
        self.stderr.lock().unwrap().clone()
    }

    /// Sends SIGTERM and waits (at most `within`) for it to end; its exit status, or `None` if
    /// it was still running (it is then killed).
    pub fn terminate(&mut self, within: Duration) -> Option<ExitStatus> {
        use nix::sys::signal::{kill, Signal};
        use nix::unistd::Pid;
        let pid = Pid::from_raw(i32::try_from(self.child.id()).expect("a pid"));
        kill(pid, Signal::SIGTERM).expect("sending SIGTERM");
        let deadline = Instant::now() + within;
        while Instant::now() < deadline {
            if let Ok(Some(status)) = self.child.try_wait() {
                // Let the reader threads take the last lines.
                std::thread::sleep(Duration::from_millis(50));
                return Some(status);
            }
            std::thread::sleep(Duration::from_millis(20));
        }
        None
    }
}

impl Drop for Simulator {
    fn drop(&mut self) {
        let _ = self.child.kill();
        let _ = self.child.wait();
    }
}

/// What a misbehaving [`Peer`] answers to every read.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum PeerKind {
    /// Bytes that are not ohmsight frames (with delimiters, as a device at another baud rate
    /// or another protocol produces).
    Garbage,
    /// A correct ohmsight hello of protocol version `n`.
    Version(u16),
    /// Nothing at all.
    Silent,
}

/// A misbehaving board on a pseudo-terminal: the client opens [`Peer::path`].
pub struct Peer {
    /// The path to open.
    pub path: String,
    stop: Arc<AtomicBool>,
    received: Arc<Mutex<usize>>,
    thread: Option<std::thread::JoinHandle<()>>,
}

impl Peer {
    /// Starts answering as `kind`.
    pub fn start(kind: PeerKind) -> Peer {
        let (master, slave) = TTYPort::pair().expect("a pseudo-terminal pair");
        close_on_exec(&master);
        let path = slave.name().expect("pty path");
        // Only the client may read that side.
        drop(slave);
        let stop = Arc::new(AtomicBool::new(false));
        let received = Arc::new(Mutex::new(0usize));
        let (flag, count) = (stop.clone(), received.clone());
        let thread = std::thread::spawn(move || answer_as(master, kind, &flag, &count));
        Peer { path, stop, received, thread: Some(thread) }
    }

    /// Bytes the peer has received so far.
    pub fn received(&self) -> usize {
        *self.received.lock().unwrap()
    }
}

impl Drop for Peer {
    fn drop(&mut self) {
        self.stop.store(true, Ordering::Relaxed);
        if let Some(t) = self.thread.take() {
            let _ = t.join();
        }
    }
}

fn answer_as(mut port: TTYPort, kind: PeerKind, stop: &AtomicBool, received: &Mutex<usize>) {
    let reply: Vec<u8> = match kind {
        PeerKind::Garbage => b"\x13\x37 not a frame \xfe\x00\x41\x54\x0d\x00".to_vec(),
        PeerKind::Version(protocol) => frame(&Response::Hello {
            protocol,
            seq: 1,
            runs: 0,
            firmware: heapless::String::try_from("7.0.0").unwrap(),
            board: heapless::String::try_from("future board").unwrap(),
            unit_id: 9,
            channels: 0,
        }),
        PeerKind::Silent => Vec::new(),
    };
    let _ = port.set_timeout(Duration::from_millis(50));
    let mut buf = [0u8; 256];
    while !stop.load(Ordering::Relaxed) {
        match port.read(&mut buf) {
            Ok(n) if n > 0 => {
                *received.lock().unwrap() += n;
                let _ = port.write_all(&reply);
            }
            Ok(_) => {}
            Err(e) if e.kind() == std::io::ErrorKind::TimedOut => {}
            // No client has the other side open (yet, or any more).
            Err(_) => std::thread::sleep(Duration::from_millis(20)),
        }
    }
}

/// `msg` as one complete frame.
pub fn frame<T: serde::Serialize>(msg: &T) -> Vec<u8> {
    let mut buf = [0u8; MAX_FRAME];
    let n = encode_frame(msg, &mut buf).expect("message fits a frame");
    buf[..n].to_vec()
}

/// A serial port driven byte by byte, to send what a correct host never would.
pub struct RawPort {
    port: Box<dyn SerialPort>,
    rx: FrameAccumulator,
}

impl RawPort {
    /// Opens `path`.
    pub fn open(path: &str) -> RawPort {
        RawPort { port: Box::new(open_port(path)), rx: FrameAccumulator::new() }
    }

    /// Sends bytes as they are.
    pub fn send_bytes(&mut self, bytes: &[u8]) {
        self.port.write_all(bytes).expect("writing to the port");
        self.port.flush().expect("flushing the port");
    }

    /// Sends one request.
    pub fn send(&mut self, req: &Request) {
        self.send_bytes(&frame(req));
    }

    /// Frames received until `count` have arrived or `wait` passes with nothing new.
    pub fn responses(&mut self, count: usize, wait: Duration) -> Vec<Result<Response, FrameError>> {
        let mut out = Vec::new();
        let mut buf = [0u8; 512];
        let mut quiet_since = Instant::now();
        while out.len() < count && quiet_since.elapsed() < wait {
            match self.port.read(&mut buf) {
                Ok(n) if n > 0 => {
                    quiet_since = Instant::now();
                    out.extend(buf[..n].iter().filter_map(|&b| self.rx.push::<Response>(b)));
                }
                Ok(_) => {}
                Err(e) if e.kind() == std::io::ErrorKind::TimedOut => {}
                Err(e) => panic!("reading the port: {e}"),
            }
        }
        out
    }

    /// The next `count` responses to bytes already sent, bad frames included as errors
    /// (panics on fewer within 5 s).
    pub fn answers(&mut self, count: usize) -> Vec<Response> {
        let got = self.responses(count, Duration::from_secs(5));
        assert_eq!(got.len(), count, "wanted {count} responses, got {got:?}");
        got.into_iter().map(|r| r.unwrap_or_else(|e| panic!("a bad frame came back: {e}"))).collect()
    }

    /// Sends `req` and returns the first `count` responses (panics on fewer within 5 s).
    pub fn ask(&mut self, req: &Request, count: usize) -> Vec<Response> {
        self.send(req);
        self.answers(count)
    }
}
