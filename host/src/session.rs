//! Request/response over a [`Link`]: handshake, version check, experiment runs with recovery.

use crate::link::Link;
use ohmsight_protocol::{
    decode_message, encode_frame, Aggregate, ChannelInfo, ErrorKind, Experiment, FrameAccumulator, FrameError,
    FrontEnd, HelloHead, Request, Response, RunReport, MAX_FRAME, PROTOCOL_VERSION, SAMPLES_PER_MESSAGE, SUMMARY_CHUNK,
};
use std::collections::{BTreeMap, HashMap};
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

/// A run the board made whose records the host did not take (its answer was lost, or the
/// request reached the board twice), and which call of [`Session::run`] asked for it.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct UnansweredRun {
    /// The index of the [`Session::run`] call (0, 1, …) whose request started it.
    pub call: usize,
    /// What the board reported about it.
    pub report: RunReport,
}

/// Records of one completed run.
#[derive(Debug, Clone, Default)]
pub struct RunRecords {
    /// Aggregates by cell index.
    pub cells: Vec<Aggregate>,
    /// Raw codes (noise record).
    pub samples: Vec<u16>,
    /// What the board reports it ran for these records.
    pub report: RunReport,
    /// The index of this [`Session::run`] call.
    pub call: usize,
    /// Runs the board made before this one that the host has no records of, in board order.
    pub unanswered: Vec<UnansweredRun>,
}

/// A conversation with one board.
///
/// Every request is numbered; an answer whose number is not the one awaited (late, or a
/// duplicate) is dropped. Every request is tried up to [`TRIES`] times, the tries [`backoff`]
/// apart on a serial link, at most [`SILENT_TRIES`] of them met by silence; an experiment is
/// run at most [`RUN_TRIES`] times, and within a run the chunks that did not arrive are asked
/// for again, at most [`RESEND_ROUNDS`] rounds. The board's run numbers tell the host of every
/// run it made ([`RunRecords::unanswered`], [`Session::unanswered_runs`]).
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
    /// The board's run number up to which every run is accounted for.
    board_runs: u32,
    /// Request seq of each run request sent, and the run call it belongs to.
    run_calls: HashMap<u16, usize>,
    calls: usize,
    /// Data chunks received, by the board's run number (kept until that run is accounted).
    chunks: HashMap<u32, BTreeMap<u16, Response>>,
}

/// Most tries of one request (a handshake request, a resend, a run-log query).
pub const TRIES: u32 = 8;
/// Most tries of one request met by silence (nothing at all received): a board that is not
/// there is given up on sooner than a noisy one.
pub const SILENT_TRIES: u32 = 3;
/// Most runs of one experiment.
pub const RUN_TRIES: u32 = 4;
/// Most rounds of asking again for missing chunks within one run.
pub const RESEND_ROUNDS: u32 = 16;
/// Bytes asked of the link at a time.
const RX_CHUNK: usize = 512;

/// Pause before try `k` (from 0) of a request on a serial link: 0, then 20 ms doubling to at
/// most 320 ms, so a board busy with a burst of noise is not flooded.
pub fn backoff(k: u32) -> Duration {
    if k == 0 {
        Duration::ZERO
    } else {
        Duration::from_millis(20 << (k - 1).min(4))
    }
}

/// One decoded frame (short-lived, one at a time: not worth boxing).
#[allow(clippy::large_enum_variant)]
enum Incoming {
    Msg(Response),
    /// A hello of another protocol version (the rest of it not readable here).
    OtherHello(u16),
    Bad(FrameError),
}

/// What an exchange does with an answer that echoes its request.
enum Accept<T> {
    Done(T),
    /// Keep waiting within this try (e.g. a version complaint before the hello).
    Wait,
    Fail(SessionError),
}

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
            board_runs: 0,
            run_calls: HashMap::new(),
            calls: 0,
            chunks: HashMap::new(),
        }
    }

    /// The link.
    pub fn link(&mut self) -> &mut L {
        &mut self.link
    }

    fn next_seq(&mut self) -> u16 {
        self.seq = self.seq.wrapping_add(1);
        if self.seq == 0 {
            // 0 is what the board uses for frames it could not decode.
            self.seq = 1;
        }
        self.seq
    }

    fn send(&mut self, req: &Request) -> Result<(), SessionError> {
        let mut buf = [0u8; MAX_FRAME];
        let n = encode_frame(req, &mut buf).map_err(|e| SessionError::Unexpected(e.to_string()))?;
        self.stats.bytes_sent += n as u64;
        self.link.send(&buf[..n])?;
        Ok(())
    }

    fn pause(&self, k: u32) {
        if self.link_bytes_per_s != 0 {
            std::thread::sleep(backoff(k));
        }
    }

    /// Next decoded frame, or `Ok(None)` at the deadline.
    fn next_frame(&mut self, deadline: Instant) -> Result<Option<Incoming>, SessionError> {
        loop {
            while self.pending_pos < self.pending.len() {
                let byte = self.pending[self.pending_pos];
                self.pending_pos += 1;
                if let Some(r) = self.rx.push_payload(byte) {
                    let incoming = match r {
                        Ok(payload) => match decode_message::<Response>(payload) {
                            Ok(msg) => Incoming::Msg(msg),
                            Err(e) => match decode_message::<HelloHead>(payload) {
                                Ok(HelloHead::Hello { protocol }) if protocol != PROTOCOL_VERSION => {
                                    Incoming::OtherHello(protocol)
                                }
                                _ => Incoming::Bad(e),
                            },
                        },
                        Err(e) => Incoming::Bad(e),
                    };
                    if matches!(incoming, Incoming::Bad(_)) {
                        self.stats.bad_frames += 1;
                    }
                    if let Incoming::Msg(msg) = &incoming {
                        self.keep_chunk(msg);
                    }
                    return Ok(Some(incoming));
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

    /// Keeps a data chunk of a run not yet accounted for (first copy wins).
    fn keep_chunk(&mut self, msg: &Response) {
        let (run, index) = match msg {
            Response::Cell { run, index, .. } => (*run, *index),
            // Chunk numbers of raw codes follow the cells; stored by offset here, renumbered on use.
            Response::Samples { run, offset, .. } => (*run, u16::MAX - 1 - offset / SAMPLES_PER_MESSAGE as u16),
            _ => return,
        };
        if run > self.board_runs {
            self.chunks.entry(run).or_default().entry(index).or_insert_with(|| msg.clone());
        }
    }

    /// Sends `make(seq)` with a new `seq` per try until `accept` takes an answer that echoes it.
    fn exchange<T>(
        &mut self,
        what: &'static str,
        make: &dyn Fn(u16) -> Request,
        accept: &mut dyn FnMut(Response) -> Accept<T>,
    ) -> Result<T, SessionError> {
        let mut last: Option<String> = None;
        let mut silent = 0;
        for k in 0..TRIES {
            if silent >= SILENT_TRIES {
                break;
            }
            self.pause(k);
            let seq = self.next_seq();
            self.send(&make(seq))?;
            let deadline = Instant::now() + self.timeout;
            let received_before = self.stats.bytes_received;
            loop {
                match self.next_frame(deadline)? {
                    None => {
                        if self.stats.bytes_received == received_before {
                            silent += 1;
                        }
                        break;
                    }
                    // Most likely the answer, damaged: ask again at once.
                    Some(Incoming::Bad(e)) => {
                        last = Some(e.to_string());
                        break;
                    }
                    Some(Incoming::OtherHello(board)) => return Err(SessionError::Version { board }),
                    Some(Incoming::Msg(Response::Hello { protocol, .. })) if protocol != PROTOCOL_VERSION => {
                        match accept(Response::Hello {
                            protocol,
                            seq,
                            firmware: Default::default(),
                            board: Default::default(),
                            unit_id: 0,
                            channels: 0,
                            runs: 0,
                        }) {
                            Accept::Done(t) => return Ok(t),
                            Accept::Fail(e) => return Err(e),
                            Accept::Wait => {}
                        }
                    }
                    Some(Incoming::Msg(msg)) => match msg.seq() {
                        Some(s) if s == seq => match accept(msg) {
                            Accept::Done(t) => return Ok(t),
                            Accept::Fail(e) => return Err(e),
                            Accept::Wait => {}
                        },
                        // The board could not decode a frame: most likely this request.
                        Some(0) if matches!(msg, Response::Error { kind: ErrorKind::BadFrame, .. }) => {
                            last = Some(ErrorKind::BadFrame.to_string());
                            break;
                        }
                        // Late, duplicated, or a chunk of some run: not this answer.
                        _ => {}
                    },
                }
            }
        }
        Err(match last {
            None => SessionError::Timeout { waiting_for: what, link: self.link.name() },
            Some(last) => SessionError::Unrecoverable { what, tries: TRIES, last },
        })
    }

    /// First exchange: versions, board, front end and channels.
    pub fn handshake(&mut self, any_version: bool) -> Result<BoardInfo, SessionError> {
        let hello =
            self.exchange("hello", &|seq| Request::Hello { protocol: PROTOCOL_VERSION, seq }, &mut |r| match r {
                Response::Hello { protocol, firmware, board, unit_id, channels, runs, .. } => {
                    if protocol != PROTOCOL_VERSION && !any_version {
                        return Accept::Fail(SessionError::Version { board: protocol });
                    }
                    Accept::Done((protocol, firmware.to_string(), board.to_string(), unit_id, channels, runs))
                }
                // A board of another version says so first, then hellos with its version.
                Response::Error { kind: ErrorKind::Version, .. } => Accept::Wait,
                other => Accept::Fail(SessionError::Unexpected(format!("{other:?} to hello"))),
            });
        let (protocol, firmware, name, unit_id, n_channels, runs) = match hello {
            Err(SessionError::Version { board }) if any_version => {
                return Err(SessionError::Unexpected(format!(
                    "a hello of protocol version {board} that this host cannot read"
                )))
            }
            other => other?,
        };
        self.board_runs = runs;
        self.chunks.clear();
        let front_end = self.exchange("front-end description", &|seq| Request::Describe { seq }, &mut |r| match r {
            Response::FrontEnd { front_end, .. } => Accept::Done(front_end),
            other => Accept::Fail(SessionError::Unexpected(format!("{other:?} to describe"))),
        })?;
        let mut channels = Vec::new();
        for position in 0..n_channels {
            let c =
                self.exchange("channel description", &|seq| Request::Channel { seq, position }, &mut |r| match r {
                    Response::Channel { info, .. } => Accept::Done(info),
                    other => Accept::Fail(SessionError::Unexpected(format!("{other:?} to channel {position}"))),
                })?;
            channels.push(c);
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
            let p = self.exchange(what, &|seq| Request::Simulate { seq, part: part.clone() }, &mut |r| match r {
                Response::SimLoaded { pending, .. } => Accept::Done(pending),
                Response::Error { kind, .. } => Accept::Fail(SessionError::Refused { what, kind }),
                other => Accept::Fail(SessionError::Unexpected(format!("{other:?} to a {what} part"))),
            })?;
            pending = Some(p);
        }
        match pending {
            Some(0) => Ok(()),
            other => Err(SessionError::Unexpected(format!("the board still waits for {other:?} pins of the set-up"))),
        }
    }

    /// The board's log of runs from `since` on.
    fn run_log(&mut self, since: u32) -> Result<Vec<RunReport>, SessionError> {
        self.exchange("run log", &|seq| Request::Runs { seq, since }, &mut |r| match r {
            Response::Runs { runs, .. } => Accept::Done(runs.to_vec()),
            other => Accept::Fail(SessionError::Unexpected(format!("{other:?} to the run log"))),
        })
    }

    /// Accounts for the board's runs up to `upto` (excluded) that the host has no records of.
    fn account_until(&mut self, upto: u32) -> Result<Vec<UnansweredRun>, SessionError> {
        let mut out = Vec::new();
        if upto > self.board_runs + 1 {
            for r in self.run_log(self.board_runs + 1)? {
                if r.run > self.board_runs && r.run < upto {
                    // A run of a request this host did not send (another client) is not ours.
                    if let Some(&call) = self.run_calls.get(&r.seq) {
                        out.push(UnansweredRun { call, report: r });
                    }
                }
            }
        }
        self.board_runs = self.board_runs.max(upto.saturating_sub(1));
        self.chunks.retain(|&run, _| run >= upto);
        Ok(out)
    }

    /// Runs the board made since the last accounted one that the host has no records of (a
    /// duplicated request at the end of a survey): ask once the survey's runs are over.
    pub fn unanswered_runs(&mut self) -> Result<Vec<UnansweredRun>, SessionError> {
        let mut out = Vec::new();
        let log = self.run_log(self.board_runs + 1)?;
        for r in log {
            if r.run > self.board_runs {
                if let Some(&call) = self.run_calls.get(&r.seq) {
                    out.push(UnansweredRun { call, report: r });
                }
                self.board_runs = r.run;
            }
        }
        Ok(out)
    }

    /// Runs an experiment and returns its records and what the board reports it ran.
    ///
    /// Chunks lost on the way are asked for again from the board's buffer; a run whose answer
    /// cannot be completed is run again (a new request), at most [`RUN_TRIES`] times in all.
    /// `nominal` is its expected duration on the board (for the time-out).
    pub fn run(&mut self, experiment: &Experiment, nominal: Duration) -> Result<RunRecords, SessionError> {
        let what = experiment.name();
        let call = self.calls;
        self.calls += 1;
        let (n_cells, n_raw) = (experiment.cells(), experiment.raw_samples());
        let mut last = String::from("no answer");
        for attempt in 0..RUN_TRIES {
            if attempt > 0 {
                self.stats.reruns += 1;
            }
            self.pause(attempt);
            let seq = self.next_seq();
            self.run_calls.insert(seq, call);
            self.send(&Request::Run { seq, experiment: experiment.clone() })?;
            let wait = nominal + self.timeout + self.transfer_time();
            let report = match self.await_report(seq, wait, what, &mut last)? {
                Some(r) => r,
                None => continue,
            };
            if let Some(done) = self.complete(seq, report, n_cells, n_raw, &mut last)? {
                let unanswered = self.account_until(report.run)?;
                self.board_runs = self.board_runs.max(report.run);
                self.stats.conversions += u64::from(report.conversions);
                let (cells, samples) = done;
                return Ok(RunRecords { cells, samples, report, call, unanswered });
            }
        }
        Err(SessionError::Unrecoverable { what, tries: RUN_TRIES, last })
    }

    /// Waits for the report of run request `seq`; when it does not come, asks for it again
    /// (the board keeps it). `None`: the board never ran it, or cannot be heard.
    fn await_report(
        &mut self,
        seq: u16,
        wait: Duration,
        what: &'static str,
        last: &mut String,
    ) -> Result<Option<RunReport>, SessionError> {
        let mut deadline = Instant::now() + wait;
        let mut silent = 0;
        for k in 0..TRIES {
            let received_before = self.stats.bytes_received;
            loop {
                match self.next_frame(deadline)? {
                    None => break,
                    Some(Incoming::Msg(Response::Done(r))) if r.seq == seq => return Ok(Some(r)),
                    Some(Incoming::Msg(Response::Error { seq: s, kind })) if s == seq => {
                        if kind == ErrorKind::Gone {
                            *last = "the board never received the run request".into();
                            return Ok(None);
                        }
                        return Err(SessionError::Refused { what, kind });
                    }
                    Some(Incoming::Bad(e)) => *last = e.to_string(),
                    Some(_) => {}
                }
            }
            if self.stats.bytes_received == received_before {
                silent += 1;
                if silent >= SILENT_TRIES {
                    *last = "answer timed out".into();
                    return Ok(None);
                }
            }
            // The summary may have been lost: the board answers again from its buffer.
            self.pause(k + 1);
            self.send(&Request::Resend { seq, run: 0, chunk: SUMMARY_CHUNK })?;
            deadline = Instant::now() + self.timeout;
        }
        Ok(None)
    }

    /// The records of `report`'s run, asking for missing chunks again; `None` when they cannot
    /// be completed (the board no longer holds them, or the link keeps losing them).
    #[allow(clippy::type_complexity)]
    fn complete(
        &mut self,
        seq: u16,
        report: RunReport,
        n_cells: u16,
        n_raw: u16,
        last: &mut String,
    ) -> Result<Option<(Vec<Aggregate>, Vec<u16>)>, SessionError> {
        let n_sample_msgs = n_raw.div_ceil(SAMPLES_PER_MESSAGE as u16);
        if report.chunks != n_cells + n_sample_msgs {
            *last = format!("the board announced {} chunks for {} expected", report.chunks, n_cells + n_sample_msgs);
            return Ok(None);
        }
        let key = |chunk: u16| {
            if chunk < n_cells {
                chunk
            } else {
                u16::MAX - 1 - (chunk - n_cells)
            }
        };
        for round in 0..=RESEND_ROUNDS {
            let got = self.chunks.get(&report.run);
            let missing: Vec<u16> =
                (0..report.chunks).filter(|&c| !got.is_some_and(|g| g.contains_key(&key(c)))).collect();
            if missing.is_empty() {
                break;
            }
            if round == RESEND_ROUNDS {
                *last = format!("{} chunks still missing after {RESEND_ROUNDS} resends", missing.len());
                return Ok(None);
            }
            self.pause(round + 1);
            for &chunk in &missing {
                self.send(&Request::Resend { seq, run: report.run, chunk })?;
            }
            let deadline = Instant::now() + self.timeout + self.transfer_time();
            loop {
                let all =
                    self.chunks.get(&report.run).is_some_and(|g| missing.iter().all(|&c| g.contains_key(&key(c))));
                if all {
                    break;
                }
                match self.next_frame(deadline)? {
                    None => break,
                    Some(Incoming::Msg(Response::Error { seq: s, kind: ErrorKind::Gone })) if s == seq => {
                        *last = "the board no longer held the run's answer".into();
                        return Ok(None);
                    }
                    Some(Incoming::Bad(e)) => *last = e.to_string(),
                    Some(_) => {}
                }
            }
        }
        let got = self.chunks.remove(&report.run).unwrap_or_default();
        let mut cells = Vec::with_capacity(usize::from(n_cells));
        let mut samples = Vec::with_capacity(usize::from(n_raw));
        for chunk in 0..report.chunks {
            match got.get(&key(chunk)) {
                Some(Response::Cell { agg, .. }) => cells.push(*agg),
                Some(Response::Samples { offset, codes, .. }) if usize::from(*offset) == samples.len() => {
                    samples.extend_from_slice(codes)
                }
                other => {
                    *last = format!("chunk {chunk} of the wrong shape: {other:?}");
                    return Ok(None);
                }
            }
        }
        if samples.len() != usize::from(n_raw) {
            *last = format!("{} raw codes for {n_raw}", samples.len());
            return Ok(None);
        }
        Ok(Some((cells, samples)))
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

    fn hello(protocol: u16, seq: u16) -> Response {
        Response::Hello {
            protocol,
            seq,
            runs: 0,
            firmware: heapless::String::try_from("9.9.9").unwrap(),
            board: heapless::String::try_from("future").unwrap(),
            unit_id: 1,
            channels: 0,
        }
    }

    #[test]
    fn another_protocol_version_is_refused_in_words() {
        let link = Scripted {
            answers: VecDeque::from([vec![Response::Error { seq: 1, kind: ErrorKind::Version }, hello(99, 1)]]),
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
            answers: VecDeque::from([vec![bad.clone()], vec![hello(PROTOCOL_VERSION, 2)]]),
            out: VecDeque::new(),
        };
        // The second hello is answered: the handshake goes on to ask for the description.
        let err = Session::new(link).handshake(false).unwrap_err();
        assert!(matches!(err, SessionError::Timeout { waiting_for: "front-end description", .. }), "{err:?}");
        let link = Scripted { answers: VecDeque::from(vec![vec![bad]; 10]), out: VecDeque::new() };
        let err = Session::new(link).handshake(false).unwrap_err();
        assert!(matches!(err, SessionError::Unrecoverable { what: "hello", tries: TRIES, .. }), "{err:?}");
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
