//! Request/response over a [`Link`]: handshake, version check, experiment runs with recovery.

use crate::link::Link;
use ohmsight_protocol::{
    encode_frame, Aggregate, ChannelInfo, ErrorKind, Experiment, FrameAccumulator, FrameError, FrontEnd, Request,
    Response, MAX_FRAME, PROTOCOL_VERSION,
};
use std::time::{Duration, Instant};

/// Errors talking to a board.
#[derive(Debug)]
#[non_exhaustive]
pub enum SessionError {
    /// The link itself failed.
    Io(std::io::Error),
    /// No answer in time.
    Timeout {
        /// What was waited for.
        waiting_for: &'static str,
        /// The link.
        link: String,
    },
    /// The board speaks another protocol version.
    Version {
        /// The board's version.
        board: u16,
    },
    /// The board refused a request.
    Refused {
        /// What was asked.
        what: &'static str,
        /// Why.
        kind: ErrorKind,
    },
    /// An answer that makes no sense here.
    Unexpected(String),
    /// A run kept failing on the link.
    Unrecoverable {
        /// What was run.
        what: &'static str,
        /// Tries made.
        tries: u32,
        /// The last problem.
        last: String,
    },
}

impl std::fmt::Display for SessionError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            SessionError::Io(e) => write!(f, "link error: {e}"),
            SessionError::Timeout { waiting_for, link } => write!(
                f,
                "no answer to {waiting_for} from {link}: is the ohmsight firmware running, and the baud rate right?"
            ),
            SessionError::Version { board } => write!(
                f,
                "the board speaks protocol version {board}, this host speaks {PROTOCOL_VERSION}: \
                 update the firmware or the host (or pass --any-version to try anyway)"
            ),
            SessionError::Refused { what, kind } => write!(f, "the board refused the {what}: {kind}"),
            SessionError::Unexpected(s) => write!(f, "unexpected answer from the board: {s}"),
            SessionError::Unrecoverable { what, tries, last } => {
                write!(f, "the {what} failed {tries} times on the link (last: {last}); check the cable and baud rate")
            }
        }
    }
}

impl std::error::Error for SessionError {}

impl From<std::io::Error> for SessionError {
    fn from(e: std::io::Error) -> Self {
        SessionError::Io(e)
    }
}

/// Link traffic counters.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
pub struct LinkStats {
    /// Bytes sent to the board.
    pub bytes_sent: u64,
    /// Bytes received from the board.
    pub bytes_received: u64,
    /// Frames that failed to decode (CRC, COBS, …).
    pub bad_frames: u64,
    /// Experiments run again after a link problem.
    pub reruns: u64,
    /// Conversions the board reported.
    pub conversions: u64,
}

/// What the board said about itself.
#[derive(Debug, Clone)]
pub struct BoardInfo {
    /// Protocol version it speaks.
    pub protocol: u16,
    /// Firmware version.
    pub firmware: String,
    /// Board name.
    pub name: String,
    /// Unit id.
    pub unit_id: u64,
    /// Front-end description.
    pub front_end: FrontEnd,
    /// Channels.
    pub channels: Vec<ChannelInfo>,
}

/// Records of one completed run.
#[derive(Debug, Clone, Default)]
pub struct RunRecords {
    /// Aggregates by cell index.
    pub cells: Vec<Aggregate>,
    /// Raw codes (noise record).
    pub samples: Vec<u16>,
    /// Conversions the board made.
    pub conversions: u32,
    /// Failed attempts before this one (their conversions happened too).
    pub failed_attempts: u32,
}

/// A conversation with one board.
pub struct Session<L> {
    link: L,
    rx: FrameAccumulator,
    /// Bytes received but not yet decoded.
    pending: Vec<u8>,
    pending_pos: usize,
    seq: u16,
    /// Traffic counters.
    pub stats: LinkStats,
    /// Base time-out for an answer.
    pub timeout: Duration,
    /// Bytes per second of the link (for time-outs of long answers); 0 for in-process.
    pub link_bytes_per_s: u64,
}

const TRIES: u32 = 3;
/// Bytes asked of the link at a time.
const RX_CHUNK: usize = 512;

impl<L: Link> Session<L> {
    /// Wraps a link.
    pub fn new(link: L) -> Self {
        Self {
            link,
            rx: FrameAccumulator::new(),
            pending: Vec::with_capacity(RX_CHUNK),
            pending_pos: 0,
            seq: 0,
            stats: LinkStats::default(),
            timeout: Duration::from_secs(2),
            link_bytes_per_s: 0,
        }
    }

    /// The link.
    pub fn link(&mut self) -> &mut L {
        &mut self.link
    }

    fn send(&mut self, req: &Request) -> Result<(), SessionError> {
        let mut buf = [0u8; MAX_FRAME];
        let n = encode_frame(req, &mut buf).map_err(|e| SessionError::Unexpected(e.to_string()))?;
        self.stats.bytes_sent += n as u64;
        self.link.send(&buf[..n])?;
        Ok(())
    }

    /// Next decoded frame, or `Ok(None)` at the deadline.
    fn next_frame(&mut self, deadline: Instant) -> Result<Option<Result<Response, FrameError>>, SessionError> {
        loop {
            while self.pending_pos < self.pending.len() {
                let byte = self.pending[self.pending_pos];
                self.pending_pos += 1;
                if let Some(r) = self.rx.push::<Response>(byte) {
                    if r.is_err() {
                        self.stats.bad_frames += 1;
                    }
                    return Ok(Some(r));
                }
            }
            let now = Instant::now();
            if now >= deadline {
                return Ok(None);
            }
            self.pending.resize(RX_CHUNK, 0);
            let n = self.link.recv(&mut self.pending, deadline - now)?;
            self.pending.truncate(n);
            self.pending_pos = 0;
            self.stats.bytes_received += n as u64;
            // In-process links never time out: when they have nothing, nothing more will come.
            if n == 0 && self.link_bytes_per_s == 0 {
                return Ok(None);
            }
        }
    }

    fn ask(&mut self, req: &Request, what: &'static str) -> Result<Response, SessionError> {
        let mut last: Option<String> = None;
        for _ in 0..TRIES {
            self.send(req)?;
            let deadline = Instant::now() + self.timeout;
            match self.next_frame(deadline)? {
                Some(Ok(r)) => return Ok(r),
                Some(Err(e)) => last = Some(e.to_string()),
                None => {}
            }
            self.drain();
        }
        Err(match last {
            None => SessionError::Timeout { waiting_for: what, link: self.link.name() },
            Some(last) => SessionError::Unrecoverable { what, tries: TRIES, last },
        })
    }

    /// Discards whatever is still arriving (after a failed exchange).
    fn drain(&mut self) {
        // An in-process link hands out what it has at once; a serial link gets a moment.
        let deadline = Instant::now() + Duration::from_millis(50);
        while let Ok(Some(_)) = self.next_frame(deadline) {}
        self.rx = FrameAccumulator::new();
        self.pending.clear();
        self.pending_pos = 0;
    }

    /// First exchange: versions, board, front end and channels.
    pub fn handshake(&mut self, any_version: bool) -> Result<BoardInfo, SessionError> {
        let mut complaints = 0;
        let (protocol, firmware, name, unit_id, n_channels) = loop {
            match self.ask(&Request::Hello { protocol: PROTOCOL_VERSION }, "hello")? {
                Response::Hello { protocol, firmware, board, unit_id, channels } => {
                    break (protocol, firmware.to_string(), board.to_string(), unit_id, channels)
                }
                // A board of another version says so first, then hellos with its version. A
                // board that still held half a frame of an earlier client that died mid-send
                // complains about the joined frame; the next hello gets through.
                Response::Error { kind: ErrorKind::Version | ErrorKind::BadFrame, .. } if complaints < TRIES => {
                    complaints += 1;
                    continue;
                }
                other => return Err(SessionError::Unexpected(format!("{other:?} to hello"))),
            }
        };
        if protocol != PROTOCOL_VERSION && !any_version {
            return Err(SessionError::Version { board: protocol });
        }
        let front_end = match self.ask(&Request::Describe, "front-end description")? {
            Response::FrontEnd(fe) => fe,
            other => return Err(SessionError::Unexpected(format!("{other:?} to describe"))),
        };
        let mut channels = Vec::new();
        for position in 0..n_channels {
            match self.ask(&Request::Channel { position }, "channel description")? {
                Response::Channel(c) => channels.push(c),
                other => return Err(SessionError::Unexpected(format!("{other:?} to channel {position}"))),
            }
        }
        Ok(BoardInfo { protocol, firmware, name, unit_id, front_end, channels })
    }

    /// Loads `scenario` into a simulated board over the link (the board part, then one part per
    /// pin; a part sent twice is harmless). From then on the board describes and simulates the
    /// new set-up, so run [`Session::handshake`] after it. A real board refuses.
    pub fn load_scenario(&mut self, scenario: &ohmsight_virtual::Scenario) -> Result<(), SessionError> {
        let what = "simulated set-up";
        let mut pending = None;
        for part in scenario.to_parts() {
            match self.ask(&Request::Simulate(part), what)? {
                Response::SimLoaded { pending: p } => pending = Some(p),
                Response::Error { kind, .. } => return Err(SessionError::Refused { what, kind }),
                other => return Err(SessionError::Unexpected(format!("{other:?} to a {what} part"))),
            }
        }
        match pending {
            Some(0) => Ok(()),
            other => Err(SessionError::Unexpected(format!("the board still waits for {other:?} pins of the set-up"))),
        }
    }

    /// Runs an experiment, re-running it when the link loses or corrupts a record.
    /// `nominal` is its expected duration on the board (for the time-out).
    pub fn run(&mut self, experiment: &Experiment, nominal: Duration) -> Result<RunRecords, SessionError> {
        let what = experiment.name();
        let mut last = String::new();
        for attempt in 0..TRIES {
            self.seq = self.seq.wrapping_add(1);
            let seq = self.seq;
            self.send(&Request::Run { seq, experiment: experiment.clone() })?;
            let deadline = Instant::now() + nominal + self.timeout + self.transfer_time();
            let mut rec = RunRecords { failed_attempts: attempt, ..Default::default() };
            let mut damaged = false;
            loop {
                let frame = match self.next_frame(deadline)? {
                    None => {
                        last = "answer timed out".into();
                        damaged = true;
                        break;
                    }
                    Some(f) => f,
                };
                match frame {
                    Err(e) => {
                        last = e.to_string();
                        damaged = true;
                    }
                    Ok(Response::Cell { seq: s, index, agg }) if s == seq => {
                        if usize::from(index) != rec.cells.len() {
                            last = format!("cell {} missing", rec.cells.len());
                            damaged = true;
                        }
                        rec.cells.push(agg);
                    }
                    Ok(Response::Samples { seq: s, offset, codes }) if s == seq => {
                        if usize::from(offset) != rec.samples.len() {
                            last = format!("samples from {} missing", rec.samples.len());
                            damaged = true;
                        }
                        rec.samples.extend_from_slice(&codes);
                    }
                    Ok(Response::Done { seq: s, conversions }) if s == seq => {
                        rec.conversions = conversions;
                        self.stats.conversions += u64::from(conversions);
                        break;
                    }
                    Ok(Response::Error { seq: s, kind }) if s == seq => {
                        return Err(SessionError::Refused { what, kind });
                    }
                    Ok(_) => {} // a straggler of an earlier run
                }
            }
            if !damaged {
                return Ok(rec);
            }
            self.stats.reruns += 1;
            self.drain();
        }
        Err(SessionError::Unrecoverable { what, tries: TRIES, last })
    }

    fn transfer_time(&self) -> Duration {
        if self.link_bytes_per_s == 0 {
            Duration::ZERO
        } else {
            Duration::from_secs_f64(4096.0 / self.link_bytes_per_s as f64)
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use ohmsight_protocol::{encode_frame, MAX_FRAME};
    use std::collections::VecDeque;

    /// A board that answers every request with the next scripted responses.
    struct Scripted {
        answers: VecDeque<Vec<Response>>,
        out: VecDeque<u8>,
    }

    impl Link for Scripted {
        fn send(&mut self, _bytes: &[u8]) -> std::io::Result<()> {
            for r in self.answers.pop_front().unwrap_or_default() {
                let mut buf = [0u8; MAX_FRAME];
                let n = encode_frame(&r, &mut buf).unwrap();
                self.out.extend(&buf[..n]);
            }
            Ok(())
        }
        fn recv(&mut self, buf: &mut [u8], _t: Duration) -> std::io::Result<usize> {
            let n = buf.len().min(self.out.len());
            for (b, v) in buf.iter_mut().zip(self.out.drain(..n)) {
                *b = v;
            }
            Ok(n)
        }
        fn name(&self) -> String {
            "scripted board".into()
        }
    }

    fn hello(protocol: u16) -> Response {
        Response::Hello {
            protocol,
            firmware: heapless::String::try_from("9.9.9").unwrap(),
            board: heapless::String::try_from("future").unwrap(),
            unit_id: 1,
            channels: 0,
        }
    }

    #[test]
    fn another_protocol_version_is_refused_in_words() {
        let link = Scripted {
            answers: VecDeque::from([vec![Response::Error { seq: 0, kind: ErrorKind::Version }, hello(99)]]),
            out: VecDeque::new(),
        };
        let err = Session::new(link).handshake(false).unwrap_err();
        assert!(matches!(err, SessionError::Version { board: 99 }), "{err:?}");
        let text = err.to_string();
        assert!(text.contains("99") && text.contains("--any-version"), "{text}");
    }

    #[test]
    fn a_hello_lost_in_an_earlier_half_frame_is_asked_again_but_not_forever() {
        let bad = Response::Error { seq: 0, kind: ErrorKind::BadFrame };
        let link = Scripted {
            answers: VecDeque::from([vec![bad.clone()], vec![hello(PROTOCOL_VERSION)]]),
            out: VecDeque::new(),
        };
        // The second hello is answered: the handshake goes on to ask for the description.
        let err = Session::new(link).handshake(false).unwrap_err();
        assert!(matches!(err, SessionError::Timeout { waiting_for: "front-end description", .. }), "{err:?}");
        let link = Scripted { answers: VecDeque::from(vec![vec![bad]; 10]), out: VecDeque::new() };
        let err = Session::new(link).handshake(false).unwrap_err();
        assert!(matches!(err, SessionError::Unexpected(_)), "{err:?}");
    }

    #[test]
    fn silence_is_a_timeout_that_says_what_to_check() {
        let link = Scripted { answers: VecDeque::new(), out: VecDeque::new() };
        let err = Session::new(link).handshake(false).unwrap_err();
        assert!(matches!(err, SessionError::Timeout { .. }), "{err:?}");
        assert!(err.to_string().contains("baud rate"));
    }

    #[test]
    fn a_refused_run_reports_the_reason() {
        let link = Scripted {
            answers: VecDeque::from([vec![Response::Error { seq: 1, kind: ErrorKind::BadChannel }]]),
            out: VecDeque::new(),
        };
        let exp = Experiment::NoiseRecord { target: 40, sample: 0, period_ns: 0, count: 1, settle_ns: 0 };
        let err = Session::new(link).run(&exp, Duration::ZERO).unwrap_err();
        assert!(err.to_string().contains("no such channel"), "{err}");
    }
}
