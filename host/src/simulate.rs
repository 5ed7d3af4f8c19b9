//! Serves the simulated board on a serial port, as a board running the ohmsight firmware would:
//! the firmware engine and the simulated analog front end answer whatever arrives on the port.
//!
//! [`open_pty`] makes a pseudo-terminal whose other end any serial client can open by path
//! (`ohmsight survey --port …`, a terminal program); [`serve`] answers on it until told to stop.
//! The board keeps its state (virtual clock, node charges) across clients, like a powered board
//! whose USB cable is unplugged and plugged back in.

use ohmsight_firmware::Engine;
use ohmsight_virtual::{Scenario, VirtualBoard, VirtualClock, VirtualDelay};
use serialport::{ClearBuffer, SerialPort, TTYPort};
use std::io::{self, ErrorKind, Write};
use std::rc::Rc;
use std::sync::atomic::{AtomicBool, Ordering};
use std::time::{Duration, Instant};

/// How long a reply may wait for a client that does not read before it is dropped.
pub const STALLED_CLIENT: Duration = Duration::from_secs(10);
/// Pause between looks at a port that has no client.
const IDLE_POLL: Duration = Duration::from_millis(20);
/// Read errors in a row, other than a hang-up, taken for the port failing (about a second).
const ODD_ERRORS_TOLERATED: u32 = 50;
/// Longest wait for bytes before the stop flag is looked at again.
const READ_SLICE: Duration = Duration::from_millis(100);

type SimEngine = Engine<VirtualBoard<Rc<VirtualClock>>, VirtualDelay<Rc<VirtualClock>>>;

/// Something worth telling the person who runs the simulator.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum ServeEvent {
    /// A client opened the port.
    ClientArrived,
    /// The client closed the port.
    ClientLeft {
        /// Bytes received from this client.
        bytes_in: u64,
        /// Bytes sent to this client.
        bytes_out: u64,
    },
    /// A reply could not be delivered (the client stopped reading or went away) and was dropped.
    ReplyDropped {
        /// Bytes of the reply that were not sent.
        bytes: usize,
        /// Why.
        reason: String,
    },
}

/// Totals of a serving session.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
pub struct ServeStats {
    /// Clients that opened the port.
    pub clients: u64,
    /// Bytes received.
    pub bytes_in: u64,
    /// Bytes sent.
    pub bytes_out: u64,
    /// Conversions the simulated board made.
    pub conversions: u64,
}

/// A new pseudo-terminal: the controlling side (to pass to [`serve`]) and the path of the other
/// side, which clients open like any serial port (`/dev/pts/N`).
///
/// The other side is left closed, so the first client to open it is the only reader.
pub fn open_pty() -> io::Result<(TTYPort, String)> {
    let (master, slave) =
        TTYPort::pair().map_err(|e| io::Error::other(format!("cannot make a pseudo-terminal: {e}")))?;
    let path = slave.name().ok_or_else(|| io::Error::other("the pseudo-terminal has no path"))?;
    drop(slave);
    Ok((master, path))
}

/// Answers requests on `port` with the firmware engine driving a simulated board wired as in
/// `scenario`, until `stop` is set (looked at every 100 ms) or the port fails.
///
/// A port that reports a hang-up (a pseudo-terminal whose client closed it) is watched until a
/// client opens it again; a half-received request of the client that left is discarded, and so
/// is whatever it left unread. A fresh port is not cleared: no client has been there, and a
/// client may open it the moment the first look sees nobody. (One that opens the port in the
/// instant after another left can lose its first bytes with the leaver's; the host asks for its
/// hello again.) `on_event` hears of clients coming and going.
pub fn serve<P: SerialPort>(
    port: &mut P,
    scenario: &Scenario,
    stop: &AtomicBool,
    on_event: &mut dyn FnMut(ServeEvent),
) -> io::Result<ServeStats> {
    let clock = Rc::new(VirtualClock::new());
    let board = VirtualBoard::new(scenario, clock.clone());
    let desc = board.description();
    let mut engine = Engine::new(board, VirtualDelay(clock), desc);
    let mut stats = ServeStats::default();
    let mut connected = false;
    let (mut client_in, mut client_out) = (0u64, 0u64);
    let mut odd_errors = 0u32;
    // Whether the last look at the port saw a hang-up (the pseudo-terminal starts with none).
    let mut hung_up = false;
    let mut buf = [0u8; 256];
    let mut reply: Vec<u8> = Vec::new();
    port.set_timeout(READ_SLICE).map_err(io::Error::other)?;
    while !stop.load(Ordering::Relaxed) {
        let n = match port.read(&mut buf) {
            Ok(n) => {
                (odd_errors, hung_up) = (0, false);
                n
            }
            Err(e) if e.kind() == ErrorKind::TimedOut || e.kind() == ErrorKind::WouldBlock => {
                (odd_errors, hung_up) = (0, false);
                0
            }
            Err(e) if e.kind() == ErrorKind::Interrupted => continue,
            // A hang-up, or an error that a hang-up racing a read can give (EIO after the poll
            // saw data): the client is gone. Errors that persist while nobody hangs up are real.
            Err(e) if e.kind() == ErrorKind::BrokenPipe || odd_errors < ODD_ERRORS_TOLERATED => {
                odd_errors = if e.kind() == ErrorKind::BrokenPipe { 0 } else { odd_errors + 1 };
                if !hung_up {
                    hung_up = true;
                    // Only a client that was here can have left bytes behind. A new
                    // pseudo-terminal holds none, and clearing it could drop the first bytes
                    // of a client that opens it between the poll and the clear.
                    if connected {
                        forget_client(&mut engine, port);
                    }
                }
                if connected {
                    connected = false;
                    on_event(ServeEvent::ClientLeft { bytes_in: client_in, bytes_out: client_out });
                }
                std::thread::sleep(IDLE_POLL);
                continue;
            }
            Err(e) => return Err(e),
        };
        if !connected {
            // The port no longer hangs up: someone opened it (whether or not they sent yet).
            connected = true;
            stats.clients += 1;
            (client_in, client_out) = (0, 0);
            on_event(ServeEvent::ClientArrived);
        }
        if n == 0 {
            continue;
        }
        client_in += n as u64;
        stats.bytes_in += n as u64;
        reply.clear();
        let conversions_before = engine.conversions();
        let Ok(()) = engine.feed(&buf[..n], &mut reply);
        let sent = write_reply(port, &reply, stop);
        client_out += sent as u64;
        stats.bytes_out += sent as u64;
        if sent < reply.len() {
            let reason = if stop.load(Ordering::Relaxed) {
                "stopping".to_string()
            } else {
                format!("the client read nothing for {} s or went away", STALLED_CLIENT.as_secs())
            };
            on_event(ServeEvent::ReplyDropped { bytes: reply.len() - sent, reason });
        }
        // The engine counts in a wrapping u32; add what this request made.
        stats.conversions += u64::from(engine.conversions().wrapping_sub(conversions_before));
    }
    Ok(stats)
}

/// Drops what the client that left had half sent and never read, so the next one starts clean.
fn forget_client<P: SerialPort>(engine: &mut SimEngine, port: &mut P) {
    // A delimiter ends any partial frame; the engine's complaint about it goes nowhere.
    let mut sink = Vec::new();
    let Ok(()) = engine.feed(&[0], &mut sink);
    // On a pseudo-terminal: what the client sent after our last read (a hang-up hides it from
    // the read), and what waits to be read on the client's side.
    let _ = port.clear(ClearBuffer::All);
}

/// Writes as much of `bytes` as the client takes; returns how many were written. Gives up when
/// the client hangs up, reads nothing for [`STALLED_CLIENT`], or `stop` is set.
fn write_reply<P: Write>(port: &mut P, bytes: &[u8], stop: &AtomicBool) -> usize {
    let mut done = 0;
    let mut last_progress = Instant::now();
    while done < bytes.len() {
        match port.write(&bytes[done..]) {
            Ok(0) => {}
            Ok(n) => {
                done += n;
                last_progress = Instant::now();
                continue;
            }
            Err(e) if matches!(e.kind(), ErrorKind::TimedOut | ErrorKind::WouldBlock | ErrorKind::Interrupted) => {}
            Err(_) => return done,
        }
        if stop.load(Ordering::Relaxed) || last_progress.elapsed() > STALLED_CLIENT {
            return done;
        }
    }
    done
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::link::{Link, SerialLink};
    use crate::session::Session;
    use ohmsight_protocol::{Request, Response, PROTOCOL_VERSION};
    use std::sync::Arc;

    fn one_pin() -> Scenario {
        crate::scenario::parse(
            "t.toml",
            "name = \"t\"\n[[pin]]\nchannel = 0\nvolts = 1.0\nohms = 1e3\nnode_farads = 5e-12\n",
        )
        .unwrap()
    }

    /// Serves `one_pin` on a fresh pty in a thread; returns the path, the stop flag, the thread.
    type Server = std::thread::JoinHandle<(ServeStats, Vec<ServeEvent>)>;

    fn spawn_server() -> (String, Arc<AtomicBool>, Server) {
        let (mut master, path) = open_pty().unwrap();
        let stop = Arc::new(AtomicBool::new(false));
        let flag = stop.clone();
        let handle = std::thread::spawn(move || {
            let mut events = Vec::new();
            let stats = serve(&mut master, &one_pin(), &flag, &mut |e| events.push(e)).unwrap();
            (stats, events)
        });
        (path, stop, handle)
    }

    #[test]
    fn a_client_can_leave_mid_frame_and_the_next_one_starts_clean() {
        let (path, stop, handle) = spawn_server();
        let mut session = Session::new(SerialLink::open(&path, 115_200).unwrap());
        session.link_bytes_per_s = 11_520;
        session.handshake(false).expect("first client");
        // Leave with half a request sent.
        session.link().send(&[0x05, 0x11, 0x22]).unwrap();
        drop(session);
        std::thread::sleep(Duration::from_millis(300));
        // The next client's first frame must not be joined to that half.
        let mut link = SerialLink::open(&path, 115_200).unwrap();
        let mut frame = [0u8; ohmsight_protocol::MAX_FRAME];
        let n = ohmsight_protocol::encode_frame(&Request::Hello { protocol: PROTOCOL_VERSION, seq: 1 }, &mut frame)
            .unwrap();
        link.send(&frame[..n]).unwrap();
        let mut acc = ohmsight_protocol::FrameAccumulator::new();
        let mut first = None;
        let deadline = Instant::now() + Duration::from_secs(3);
        let mut buf = [0u8; 64];
        while first.is_none() && Instant::now() < deadline {
            let got = link.recv(&mut buf, Duration::from_millis(100)).unwrap();
            first = buf[..got].iter().find_map(|&b| acc.push::<Response>(b));
        }
        assert!(matches!(first, Some(Ok(Response::Hello { .. }))), "{first:?}");
        drop(link);
        std::thread::sleep(Duration::from_millis(300));
        stop.store(true, Ordering::Relaxed);
        let (stats, events) = handle.join().unwrap();
        assert_eq!(stats.clients, 2, "{events:?}");
        assert_eq!(events.iter().filter(|e| matches!(e, ServeEvent::ClientLeft { .. })).count(), 2, "{events:?}");
        assert!(stats.bytes_in > 0 && stats.bytes_out > stats.bytes_in);
    }

    /// A port that reports a hang-up on its first read while a client opens it and sends
    /// `arriving` at that very moment: the race of a client that opens a fresh pseudo-terminal
    /// between the server's poll and whatever the server does about the hang-up.
    struct RacingPort {
        arriving: Vec<u8>,
        unread: std::sync::Mutex<Vec<u8>>,
        written: Vec<u8>,
        reads: usize,
        stop: Arc<AtomicBool>,
    }

    impl io::Read for RacingPort {
        fn read(&mut self, buf: &mut [u8]) -> io::Result<usize> {
            self.reads += 1;
            if self.reads == 1 {
                self.unread.lock().unwrap().extend_from_slice(&self.arriving);
                return Err(io::Error::from(ErrorKind::BrokenPipe));
            }
            if self.reads > 20 {
                self.stop.store(true, Ordering::Relaxed);
            }
            let mut unread = self.unread.lock().unwrap();
            if unread.is_empty() {
                return Err(io::Error::from(ErrorKind::TimedOut));
            }
            let n = unread.len().min(buf.len());
            buf[..n].copy_from_slice(&unread[..n]);
            unread.drain(..n);
            Ok(n)
        }
    }

    impl io::Write for RacingPort {
        fn write(&mut self, buf: &[u8]) -> io::Result<usize> {
            self.written.extend_from_slice(buf);
            Ok(buf.len())
        }
        fn flush(&mut self) -> io::Result<()> {
            Ok(())
        }
    }

    impl SerialPort for RacingPort {
        fn clear(&self, _: ClearBuffer) -> serialport::Result<()> {
            self.unread.lock().unwrap().clear();
            Ok(())
        }
        fn set_timeout(&mut self, _: Duration) -> serialport::Result<()> {
            Ok(())
        }
        fn name(&self) -> Option<String> {
            None
        }
        fn baud_rate(&self) -> serialport::Result<u32> {
            Ok(115_200)
        }
        fn data_bits(&self) -> serialport::Result<serialport::DataBits> {
            Ok(serialport::DataBits::Eight)
        }
        fn flow_control(&self) -> serialport::Result<serialport::FlowControl> {
            Ok(serialport::FlowControl::None)
        }
        fn parity(&self) -> serialport::Result<serialport::Parity> {
            Ok(serialport::Parity::None)
        }
        fn stop_bits(&self) -> serialport::Result<serialport::StopBits> {
            Ok(serialport::StopBits::One)
        }
        fn timeout(&self) -> Duration {
            READ_SLICE
        }
        fn set_baud_rate(&mut self, _: u32) -> serialport::Result<()> {
            Ok(())
        }
        fn set_data_bits(&mut self, _: serialport::DataBits) -> serialport::Result<()> {
            Ok(())
        }
        fn set_flow_control(&mut self, _: serialport::FlowControl) -> serialport::Result<()> {
            Ok(())
        }
        fn set_parity(&mut self, _: serialport::Parity) -> serialport::Result<()> {
            Ok(())
        }
        fn set_stop_bits(&mut self, _: serialport::StopBits) -> serialport::Result<()> {
            Ok(())
        }
        fn write_request_to_send(&mut self, _: bool) -> serialport::Result<()> {
            Ok(())
        }
        fn write_data_terminal_ready(&mut self, _: bool) -> serialport::Result<()> {
            Ok(())
        }
        fn read_clear_to_send(&mut self) -> serialport::Result<bool> {
            Ok(true)
        }
        fn read_data_set_ready(&mut self) -> serialport::Result<bool> {
            Ok(true)
        }
        fn read_ring_indicator(&mut self) -> serialport::Result<bool> {
            Ok(false)
        }
        fn read_carrier_detect(&mut self) -> serialport::Result<bool> {
            Ok(true)
        }
        fn bytes_to_read(&self) -> serialport::Result<u32> {
            Ok(self.unread.lock().unwrap().len() as u32)
        }
        fn bytes_to_write(&self) -> serialport::Result<u32> {
            Ok(0)
        }
        fn try_clone(&self) -> serialport::Result<Box<dyn SerialPort>> {
            Err(serialport::Error::new(serialport::ErrorKind::Unknown, "not in this test"))
        }
        fn set_break(&self) -> serialport::Result<()> {
            Ok(())
        }
        fn clear_break(&self) -> serialport::Result<()> {
            Ok(())
        }
    }

    #[test]
    fn a_client_that_opens_the_fresh_port_as_it_is_polled_is_answered() {
        // The first look at a new pseudo-terminal sees no client; one opens it and sends a hello
        // before the server acts on that. Nobody was there before, so nothing may be cleared.
        let mut frame = [0u8; ohmsight_protocol::MAX_FRAME];
        let n = ohmsight_protocol::encode_frame(&Request::Hello { protocol: PROTOCOL_VERSION, seq: 7 }, &mut frame)
            .unwrap();
        let stop = Arc::new(AtomicBool::new(false));
        let mut port = RacingPort {
            arriving: frame[..n].to_vec(),
            unread: Default::default(),
            written: Vec::new(),
            reads: 0,
            stop: stop.clone(),
        };
        let stats = serve(&mut port, &one_pin(), &stop, &mut |_| {}).unwrap();
        let mut acc = ohmsight_protocol::FrameAccumulator::new();
        let answers: Vec<_> = port.written.iter().filter_map(|&b| acc.push::<Response>(b)).collect();
        assert!(matches!(answers[..], [Ok(Response::Hello { seq: 7, .. })]), "{answers:?}");
        assert_eq!((stats.clients, stats.bytes_in), (1, n as u64));
    }

    #[test]
    fn stop_ends_serving_with_no_client() {
        let (_path, stop, handle) = spawn_server();
        std::thread::sleep(Duration::from_millis(50));
        let t = Instant::now();
        stop.store(true, Ordering::Relaxed);
        let (stats, events) = handle.join().unwrap();
        assert!(t.elapsed() < Duration::from_secs(1), "stopping took {:?}", t.elapsed());
        assert_eq!(stats, ServeStats::default());
        assert!(events.is_empty());
    }
}
