//! Command loop and experiment execution.

use crate::frontend::{AnalogFrontEnd, FrontEndError, FrontEndErrorKind, SetupProgress};
use embedded_hal::delay::DelayNs;
use embedded_io::{Read, Write};
use heapless::{Deque, String, Vec};
use ohmsight_protocol::{
    decode_message, encode_frame, Aggregate, ChannelInfo, ChannelRole, ErrorKind, Experiment, FrameAccumulator,
    FrontEnd, HelloHead, Request, Response, RunReport, StepRecord, Steps, Timing, MAX_CELLS, MAX_CHANNELS, MAX_FRAME,
    MAX_RAW_SAMPLES, PROTOCOL_VERSION, RUN_LOG, SAMPLES_PER_MESSAGE, SUMMARY_CHUNK,
};

/// Most frames the engine sends for one received frame: a run's cells, its raw codes in
/// [`SAMPLES_PER_MESSAGE`] pieces and its end record (any other request gets two at most). So the
/// engine's output is bounded by `MAX_REPLY_FRAMES × MAX_FRAME` bytes per delimiter received, and
/// is nothing for any other byte.
pub const MAX_REPLY_FRAMES: usize = MAX_CELLS + (MAX_RAW_SAMPLES as usize).div_ceil(SAMPLES_PER_MESSAGE) + 1;

/// Version string the firmware reports in its hello.
pub const FIRMWARE_VERSION: &str = env!("CARGO_PKG_VERSION");

/// What the board says about itself in the first exchange.
#[derive(Debug, Clone, PartialEq)]
pub struct BoardDescription {
    /// Board (profile) name.
    pub name: String<24>,
    /// Unit identifier.
    pub unit_id: u64,
    /// Electrical description of the ADC front end.
    pub front_end: FrontEnd,
    /// Every channel the host may use.
    pub channels: Vec<ChannelInfo, MAX_CHANNELS>,
}

/// Sampling plus conversion time of one conversion at sample index `sample`, ps.
fn timing_busy_ps(fe: &FrontEnd, sample: u8) -> u64 {
    u64::from(fe.sample_ps.get(usize::from(sample)).copied().unwrap_or(0)) + u64::from(fe.conversion_ps)
}

/// The experiment engine.
pub struct Engine<F, D> {
    fe: F,
    delay: D,
    board: BoardDescription,
    rx: FrameAccumulator,
    cells: [Aggregate; MAX_CELLS],
    raw: [u16; MAX_RAW_SAMPLES as usize],
    tx: [u8; MAX_FRAME],
    conversions: u32,
    /// Runs started (the last run number).
    runs: u32,
    /// The last run, whose answer `cells` and `raw` still hold (for resends).
    last: Option<RunReport>,
    /// Cells and raw codes of the last run.
    last_shape: (u16, u16),
    /// The last runs, oldest first.
    log: Deque<RunReport, RUN_LOG>,
    /// Nominal duration of everything run so far, ps: the clock of a board without one.
    nominal_ps: u64,
}

impl<F: AnalogFrontEnd, D: DelayNs> Engine<F, D> {
    /// An engine for one board.
    pub fn new(fe: F, delay: D, board: BoardDescription) -> Self {
        Self {
            fe,
            delay,
            board,
            rx: FrameAccumulator::new(),
            cells: [Aggregate::default(); MAX_CELLS],
            raw: [0; MAX_RAW_SAMPLES as usize],
            tx: [0; MAX_FRAME],
            conversions: 0,
            runs: 0,
            last: None,
            last_shape: (0, 0),
            log: Deque::new(),
            nominal_ps: 0,
        }
    }

    /// The front end (a simulated board may be reconfigured through it).
    pub fn front_end_mut(&mut self) -> &mut F {
        &mut self.fe
    }

    /// The board description.
    pub fn board(&self) -> &BoardDescription {
        &self.board
    }

    /// Total conversions since start.
    pub fn conversions(&self) -> u32 {
        self.conversions
    }

    /// Serves the link forever: the firmware's main loop. Returns only on a link error.
    pub fn run<L: Read + Write>(&mut self, link: &mut L) -> Result<core::convert::Infallible, L::Error> {
        let mut buf = [0u8; 64];
        loop {
            let n = link.read(&mut buf)?;
            self.feed(&buf[..n], link)?;
        }
    }

    /// [`Engine::run`] on a link that cannot fail (a polled UART): the board's main loop.
    pub fn serve<L: Read + Write + embedded_io::ErrorType<Error = core::convert::Infallible>>(
        &mut self,
        link: &mut L,
    ) -> ! {
        match self.run(link) {
            Ok(never) => match never {},
            Err(never) => match never {},
        }
    }

    /// Processes received bytes; every complete request is answered on `out`.
    pub fn feed<W: Write>(&mut self, bytes: &[u8], out: &mut W) -> Result<(), W::Error> {
        for &b in bytes {
            let decoded = match self.rx.push_payload(b) {
                None => continue,
                Some(Ok(payload)) => match decode_message::<Request>(payload) {
                    Ok(req) => Ok(req),
                    // A host of another version: its hello still says which version it speaks.
                    Err(e) => match decode_message::<HelloHead>(payload) {
                        Ok(HelloHead::Hello { protocol }) if protocol != PROTOCOL_VERSION => {
                            Ok(Request::Hello { protocol, seq: 0 })
                        }
                        _ => Err(e),
                    },
                },
                Some(Err(e)) => Err(e),
            };
            match decoded {
                Ok(req) => self.handle(&req, out)?,
                Err(_) => self.send(out, &Response::Error { seq: 0, kind: ErrorKind::BadFrame })?,
            }
        }
        out.flush()
    }

    /// Answers one request.
    pub fn handle<W: Write>(&mut self, req: &Request, out: &mut W) -> Result<(), W::Error> {
        match req {
            Request::Hello { protocol, seq } => {
                let seq = *seq;
                if *protocol != PROTOCOL_VERSION {
                    // Answer with our version anyway so the host can say what it met.
                    self.send(out, &Response::Error { seq, kind: ErrorKind::Version })?;
                }
                let mut firmware = String::new();
                let _ = firmware.push_str(&FIRMWARE_VERSION[..FIRMWARE_VERSION.len().min(16)]);
                let hello = Response::Hello {
                    protocol: PROTOCOL_VERSION,
                    seq,
                    firmware,
                    board: self.board.name.clone(),
                    unit_id: self.board.unit_id,
                    channels: self.board.channels.len() as u8,
                    runs: self.runs,
                };
                self.send(out, &hello)
            }
            Request::Describe { seq } => {
                let fe = Response::FrontEnd { seq: *seq, front_end: self.board.front_end.clone() };
                self.send(out, &fe)
            }
            Request::Channel { seq, position } => match self.board.channels.get(usize::from(*position)) {
                Some(c) => {
                    let c = Response::Channel { seq: *seq, info: c.clone() };
                    self.send(out, &c)
                }
                None => self.send(out, &Response::Error { seq: *seq, kind: ErrorKind::BadPosition }),
            },
            Request::Run { seq, experiment } => {
                let seq = *seq;
                match self.run_experiment(seq, experiment, out) {
                    Ok(Ok(report)) => self.send(out, &Response::Done(report)),
                    Ok(Err(kind)) => self.send(out, &Response::Error { seq, kind }),
                    Err(e) => Err(e),
                }
            }
            Request::Resend { seq, run, chunk } => {
                let seq = *seq;
                match self.last {
                    Some(last) if last.seq == seq && (*run == 0 || *run == last.run) => {
                        if *chunk == SUMMARY_CHUNK {
                            self.send(out, &Response::Done(last))
                        } else if *chunk < last.chunks {
                            self.send_chunk(out, last.run, *chunk)
                        } else {
                            self.send(out, &Response::Error { seq, kind: ErrorKind::BadPosition })
                        }
                    }
                    _ => self.send(out, &Response::Error { seq, kind: ErrorKind::Gone }),
                }
            }
            Request::Runs { seq, since } => {
                let mut runs = Vec::new();
                for r in self.log.iter().filter(|r| r.run >= *since) {
                    let _ = runs.push(*r);
                }
                self.send(out, &Response::Runs { seq: *seq, runs })
            }
            Request::Simulate { seq, part } => {
                let seq = *seq;
                let answer = match self.fe.simulate(part) {
                    Ok(SetupProgress::Pending(pending)) => Response::SimLoaded { seq, pending },
                    Ok(SetupProgress::Ready(board)) => {
                        self.board = board;
                        Response::SimLoaded { seq, pending: 0 }
                    }
                    Err(kind) => Response::Error { seq, kind },
                };
                self.send(out, &answer)
            }
        }
    }

    /// Sends data chunk `chunk` of the buffered run `run`: a cell, or a message of raw codes.
    fn send_chunk<W: Write>(&mut self, out: &mut W, run: u32, chunk: u16) -> Result<(), W::Error> {
        let (n_cells, n_raw) = self.last_shape;
        if chunk < n_cells {
            let agg = self.cells[usize::from(chunk)];
            return self.send(out, &Response::Cell { run, index: chunk, agg });
        }
        let offset = usize::from(chunk - n_cells) * SAMPLES_PER_MESSAGE;
        if offset >= usize::from(n_raw) {
            return Ok(());
        }
        let end = (offset + SAMPLES_PER_MESSAGE).min(usize::from(n_raw));
        let codes = Vec::from_slice(&self.raw[offset..end]).unwrap_or_default();
        self.send(out, &Response::Samples { run, offset: offset as u16, codes })
    }

    /// Whether `ch` may be converted to set the hold capacitor before another channel: only the
    /// precharge sources the board declares.
    fn is_declared_precharge(&self, ch: u8) -> bool {
        self.board.front_end.precharges.iter().any(|p| p.channel == ch)
    }

    /// Whether the experiment converts only declared precharge sources as precharges. The first
    /// channel of an order swap precharges the second: it must be a declared source, or a pin
    /// whose memory effect on the other is what is being compared.
    fn precharges_declared(&self, exp: &Experiment, precharges: &[u8]) -> bool {
        let a_ok = match exp {
            Experiment::OrderSwap { a, .. } => {
                self.is_declared_precharge(*a)
                    || self.board.channels.iter().any(|c| c.channel == *a && c.role == ChannelRole::Pin)
            }
            _ => true,
        };
        a_ok && precharges.iter().all(|&c| self.is_declared_precharge(c))
    }

    fn has_channel(&self, ch: u8) -> bool {
        self.board.channels.iter().any(|c| c.channel == ch)
    }

    /// Runs one experiment; the outer `Result` is the link, the inner one the experiment.
    fn run_experiment<W: Write>(
        &mut self,
        seq: u16,
        exp: &Experiment,
        out: &mut W,
    ) -> Result<Result<RunReport, ErrorKind>, W::Error> {
        let fe_desc = &self.board.front_end;
        let timing = Timing { sample_ps: &fe_desc.sample_ps, conversion_ps: fe_desc.conversion_ps };
        let steps = match Steps::new(exp, timing) {
            Ok(s) => s,
            Err(k) => return Ok(Err(k)),
        };
        let (tested, precharges) = steps.channels();
        if !tested.iter().all(|&c| self.has_channel(c)) || !precharges.iter().all(|&c| self.has_channel(c)) {
            return Ok(Err(ErrorKind::BadChannel));
        }
        if !self.precharges_declared(exp, precharges) {
            return Ok(Err(ErrorKind::NotAllowed));
        }
        if let Experiment::PullTest { target, pulls, .. } = exp {
            if pulls.iter().any(Option::is_some) {
                if self.board.front_end.pull_milliohms == 0 {
                    return Ok(Err(ErrorKind::Unsupported));
                }
                // Only a pin the board's profile opts in may be pulled.
                if !self.board.channels.iter().any(|c| c.channel == *target && c.role == ChannelRole::Pin && c.pull) {
                    return Ok(Err(ErrorKind::NotAllowed));
                }
            }
        }
        let n_cells = steps.cells();
        let n_raw = steps.raw_samples();
        let chunks = n_cells + n_raw.div_ceil(SAMPLES_PER_MESSAGE as u16);
        // From here on the run counts: the buffers belong to it.
        self.runs = self.runs.wrapping_add(1);
        let run = self.runs;
        let start_ps = self.fe.clock_ps().unwrap_or(self.nominal_ps);
        let mut report = RunReport { seq, run, start_ps, end_ps: start_ps, conversions: 0, chunks: 0 };
        self.last = None;
        self.last_shape = (n_cells, n_raw);
        self.cells[..usize::from(n_cells)].fill(Aggregate::default());
        self.delay.delay_ns(steps.settle_ns());
        self.nominal_ps += u64::from(steps.settle_ns()) * 1000;
        let mut failed = None;
        let mut pulled: Option<(u8, ohmsight_protocol::Pull)> = None;
        for i in 0..steps.len() {
            let step = steps.step(i);
            let want = step.pull.map(|p| (step.channel, p));
            if want != pulled {
                if let Err(k) = self.fe.set_pull(step.channel, step.pull) {
                    failed = Some(k);
                    break;
                }
                pulled = want;
            }
            let code = match self.fe.convert(step.channel, step.sample) {
                Ok(c) => c,
                Err(e) => {
                    failed = Some(match e.kind() {
                        FrontEndErrorKind::BadChannel => ErrorKind::BadChannel,
                        FrontEndErrorKind::BadSampleTime => ErrorKind::BadSampleIndex,
                        _ => ErrorKind::Converter,
                    });
                    break;
                }
            };
            report.conversions += 1;
            self.nominal_ps +=
                timing_busy_ps(&self.board.front_end, step.sample) + u64::from(step.wait_after_ns) * 1000;
            match step.record {
                StepRecord::None => {}
                StepRecord::Cell(c) => self.cells[usize::from(c)].add(code),
                StepRecord::Raw(j) => self.raw[usize::from(j)] = code,
            }
            if step.wait_after_ns > 0 {
                self.delay.delay_ns(step.wait_after_ns);
            }
        }
        // Never leave a pin pulled, whatever ended the run.
        if pulled.is_some() {
            if let Err(k) = self.fe.set_pull(0, None) {
                failed = failed.or(Some(k));
            }
        }
        self.conversions = self.conversions.wrapping_add(report.conversions);
        report.end_ps = self.fe.clock_ps().unwrap_or(self.nominal_ps);
        if failed.is_none() {
            report.chunks = chunks;
        }
        if self.log.is_full() {
            self.log.pop_front();
        }
        let _ = self.log.push_back(report);
        if let Some(kind) = failed {
            return Ok(Err(kind));
        }
        self.last = Some(report);
        for chunk in 0..chunks {
            self.send_chunk(out, run, chunk)?;
        }
        Ok(Ok(report))
    }

    fn send<W: Write>(&mut self, out: &mut W, msg: &Response) -> Result<(), W::Error> {
        // Every response fits by construction (checked by the protocol's frame-size tests).
        if let Ok(n) = encode_frame(msg, &mut self.tx) {
            out.write_all(&self.tx[..n])?;
        }
        Ok(())
    }
}

#[cfg(test)]
pub(crate) mod tests {
    use super::*;
    use ohmsight_protocol::{ChannelRole, Experiment, Precharge, SimPart};
    use std::string::String as StdString;
    use std::vec::Vec as StdVec;

    /// A front end whose code is `100·channel + sample`, logging every conversion.
    pub(crate) struct Fake {
        pub(crate) log: StdVec<(u8, u8)>,
    }
    impl AnalogFrontEnd for Fake {
        type Error = core::convert::Infallible;
        fn convert(&mut self, channel: u8, sample: u8) -> Result<u16, Self::Error> {
            self.log.push((channel, sample));
            Ok(100 * u16::from(channel) + u16::from(sample))
        }
    }
    pub(crate) struct NoDelay(pub(crate) u64);
    impl DelayNs for NoDelay {
        fn delay_ns(&mut self, ns: u32) {
            self.0 += u64::from(ns);
        }
    }

    pub(crate) fn board() -> BoardDescription {
        let mut channels = Vec::new();
        for (ch, role) in
            [(0, ChannelRole::Pin), (1, ChannelRole::Pin), (9, ChannelRole::Precharge), (12, ChannelRole::Internal)]
        {
            channels
                .push(ChannelInfo {
                    channel: ch,
                    label: String::try_from("x").unwrap(),
                    role,
                    pull: false,
                    drive: false,
                })
                .unwrap();
        }
        BoardDescription {
            name: String::try_from("test").unwrap(),
            unit_id: 7,
            front_end: FrontEnd {
                bits: 12,
                vref_microvolts: 3_300_000,
                sample_ps: Vec::from_slice(&[100_000, 1_000_000]).unwrap(),
                conversion_ps: 500_000,
                hold_attofarads: 4_000_000,
                hold_tolerance_ppm: 50_000,
                switch_milliohms: 6_000_000,
                switch_tolerance_ppm: 100_000,
                noise_millilsb: 500,
                leakage_picoamps: 1000,
                pull_milliohms: 0,
                pull_tolerance_ppm: 0,
                pull_supply_microvolts: 0,
                precharges: Vec::from_slice(&[Precharge { channel: 9, nominal_microvolts: 0 }]).unwrap(),
            },
            channels,
        }
    }

    fn responses(bytes: &[u8]) -> StdVec<Response> {
        let mut acc = FrameAccumulator::new();
        bytes.iter().filter_map(|&b| acc.push::<Response>(b)).map(|r| r.unwrap()).collect()
    }

    fn frame(req: &Request) -> StdVec<u8> {
        let mut buf = [0u8; MAX_FRAME];
        let n = encode_frame(req, &mut buf).unwrap();
        buf[..n].to_vec()
    }

    /// A front end with pulls: reads 2000 unpulled, 3000 pulled up, 1000 pulled down, and logs
    /// every conversion and every pull change in order.
    struct Pulling {
        log: StdVec<StdString>,
        pull: Option<ohmsight_protocol::Pull>,
    }
    impl AnalogFrontEnd for Pulling {
        type Error = core::convert::Infallible;
        fn convert(&mut self, channel: u8, _sample: u8) -> Result<u16, Self::Error> {
            self.log.push(format!("c{channel}"));
            Ok(match self.pull {
                None => 2000,
                Some(ohmsight_protocol::Pull::Up) => 3000,
                Some(ohmsight_protocol::Pull::Down) => 1000,
                Some(ohmsight_protocol::Pull::Half) => 1500,
            })
        }
        fn set_pull(&mut self, channel: u8, pull: Option<ohmsight_protocol::Pull>) -> Result<(), ErrorKind> {
            self.log.push(format!("p{channel}:{pull:?}"));
            self.pull = pull;
            Ok(())
        }
    }

    #[test]
    fn a_pull_test_pulls_only_an_opted_in_pin_and_always_releases_it() {
        use ohmsight_protocol::Pull;
        let mut desc = board();
        desc.channels[1].pull = true; // channel 1 is opted in, channel 0 is not
        desc.front_end.pull_milliohms = 160_000_000;
        let exp = |target: u8| Experiment::PullTest {
            target,
            pulls: Vec::from_slice(&[None, Some(Pull::Up), Some(Pull::Down)]).unwrap(),
            sample: 1,
            lead: 1,
            repeats: 2,
            rest_ns: 10,
            settle_ns: 0,
        };
        let mut e = Engine::new(Pulling { log: StdVec::new(), pull: None }, NoDelay(0), desc.clone());
        let mut out = StdVec::new();
        e.feed(&frame(&Request::Run { seq: 1, experiment: exp(1) }), &mut out).unwrap();
        let r = responses(&out);
        let cells: StdVec<(u32, u64)> = r
            .iter()
            .filter_map(|m| if let Response::Cell { agg, .. } = m { Some((agg.count, agg.sum)) } else { None })
            .collect();
        assert_eq!(cells, [(2, 4000), (2, 6000), (2, 2000)], "the lead conversion of each setting is not recorded");
        assert_eq!(
            e.fe.log.join(" "),
            "c1 c1 c1 p1:Some(Up) c1 c1 c1 p1:Some(Down) c1 c1 c1 p0:None",
            "pulls change between settings and are released at the end"
        );
        // A pin the profile does not opt in is never pulled; nor is any pin of a board without pulls.
        out.clear();
        e.fe.log.clear();
        e.feed(&frame(&Request::Run { seq: 2, experiment: exp(0) }), &mut out).unwrap();
        assert!(matches!(responses(&out)[..], [Response::Error { seq: 2, kind: ErrorKind::NotAllowed }]));
        desc.front_end.pull_milliohms = 0;
        let mut e = Engine::new(Pulling { log: StdVec::new(), pull: None }, NoDelay(0), desc);
        out.clear();
        e.feed(&frame(&Request::Run { seq: 3, experiment: exp(1) }), &mut out).unwrap();
        assert!(matches!(responses(&out)[..], [Response::Error { seq: 3, kind: ErrorKind::Unsupported }]));
        assert!(e.fe.log.is_empty(), "nothing converted or pulled: {:?}", e.fe.log);
    }

    #[test]
    fn hello_describe_and_a_burst() {
        let mut e = Engine::new(Fake { log: StdVec::new() }, NoDelay(0), board());
        let mut out = StdVec::new();
        let mut bytes = frame(&Request::Hello { protocol: PROTOCOL_VERSION, seq: 1 });
        bytes.extend(frame(&Request::Describe { seq: 2 }));
        let exp = Experiment::RepeatBurst {
            target: 1,
            precharge: 9,
            precharge_sample: 1,
            sample: 0,
            length: 3,
            repeats: 2,
            rest_ns: 50,
            settle_ns: 1000,
        };
        bytes.extend(frame(&Request::Run { seq: 5, experiment: exp }));
        e.feed(&bytes, &mut out).unwrap();
        let r = responses(&out);
        assert!(matches!(
            r[0],
            Response::Hello { protocol: PROTOCOL_VERSION, seq: 1, channels: 4, unit_id: 7, runs: 0, .. }
        ));
        assert!(matches!(r[1], Response::FrontEnd { seq: 2, .. }));
        assert_eq!(r.len(), 2 + 3 + 1);
        for (j, resp) in r[2..5].iter().enumerate() {
            let Response::Cell { run: 1, index, agg } = resp else { panic!("{resp:?}") };
            assert_eq!(usize::from(*index), j);
            assert_eq!((agg.count, agg.sum, agg.min, agg.max), (2, 200, 100, 100));
        }
        // No clock on this front end: the nominal one: 1 µs settle, 2 precharges of 1 + 0.5 µs,
        // 6 targets of 0.1 + 0.5 µs, 2 rests of 50 ns.
        let end_ps = 1_000_000 + 2 * 1_500_000 + 6 * 600_000 + 2 * 50_000;
        assert_eq!(r[5], Response::Done(RunReport { seq: 5, run: 1, start_ps: 0, end_ps, conversions: 8, chunks: 3 }));
        assert_eq!(e.fe.log, [(9, 1), (1, 0), (1, 0), (1, 0), (9, 1), (1, 0), (1, 0), (1, 0)]);
        assert_eq!(e.delay.0, 1000 + 2 * 50);
    }

    #[test]
    fn bad_requests_get_error_records_and_the_engine_keeps_answering() {
        let mut e = Engine::new(Fake { log: StdVec::new() }, NoDelay(0), board());
        let mut out = StdVec::new();
        let unknown = Experiment::NoiseRecord { target: 4, sample: 0, period_ns: 10, count: 8, settle_ns: 0 };
        let mut bytes = frame(&Request::Run { seq: 1, experiment: unknown });
        bytes.extend_from_slice(&[0x13, 0x37, 0x00]); // garbage frame
        bytes.extend_from_slice(&frame(&Request::Hello { protocol: 1, seq: 2 })[..3]); // truncated …
        bytes.push(0); // … then cut off by a delimiter
        bytes.extend(frame(&Request::Channel { seq: 3, position: 40 }));
        bytes.extend(frame(&Request::Hello { protocol: 99, seq: 4 }));
        e.feed(&bytes, &mut out).unwrap();
        let r = responses(&out);
        assert_eq!(r[0], Response::Error { seq: 1, kind: ErrorKind::BadChannel });
        assert_eq!(r[1], Response::Error { seq: 0, kind: ErrorKind::BadFrame });
        assert_eq!(r[2], Response::Error { seq: 0, kind: ErrorKind::BadFrame });
        assert_eq!(r[3], Response::Error { seq: 3, kind: ErrorKind::BadPosition });
        assert_eq!(r[4], Response::Error { seq: 4, kind: ErrorKind::Version });
        assert!(matches!(r[5], Response::Hello { seq: 4, .. }));
        assert!(e.fe.log.is_empty(), "nothing was converted for refused requests");
    }

    #[test]
    fn a_set_up_is_refused_by_a_real_converter_and_the_engine_keeps_answering() {
        let mut e = Engine::new(Fake { log: StdVec::new() }, NoDelay(0), board());
        let mut out = StdVec::new();
        let [part, _] = SimPart::largest_for_tests();
        let mut bytes = frame(&Request::Simulate { seq: 1, part });
        bytes.extend(frame(&Request::Hello { protocol: PROTOCOL_VERSION, seq: 2 }));
        e.feed(&bytes, &mut out).unwrap();
        let r = responses(&out);
        assert_eq!(r[0], Response::Error { seq: 1, kind: ErrorKind::Unsupported });
        assert!(matches!(&r[1], Response::Hello { board, .. } if board == "test"));
    }

    /// A front end that takes a set-up of one pin and then calls itself "rewired".
    pub(crate) struct Rewirable;
    impl AnalogFrontEnd for Rewirable {
        type Error = core::convert::Infallible;
        fn convert(&mut self, _: u8, _: u8) -> Result<u16, Self::Error> {
            Ok(0)
        }
        fn simulate(&mut self, part: &SimPart) -> Result<SetupProgress, ErrorKind> {
            match part {
                SimPart::Board(b) => Ok(SetupProgress::Pending(b.pins)),
                SimPart::Pin(_) => {
                    let mut d = board();
                    d.name = String::try_from("rewired").unwrap();
                    d.channels.truncate(1);
                    Ok(SetupProgress::Ready(d))
                }
            }
        }
    }

    #[test]
    fn a_completed_set_up_replaces_the_board_description() {
        let mut e = Engine::new(Rewirable, NoDelay(0), board());
        let mut out = StdVec::new();
        let [SimPart::Board(mut head), pin] = SimPart::largest_for_tests() else { panic!() };
        head.pins = 1;
        let mut bytes = frame(&Request::Simulate { seq: 1, part: SimPart::Board(head) });
        bytes.extend(frame(&Request::Simulate { seq: 2, part: pin }));
        bytes.extend(frame(&Request::Hello { protocol: PROTOCOL_VERSION, seq: 3 }));
        e.feed(&bytes, &mut out).unwrap();
        let r = responses(&out);
        assert_eq!(r[0], Response::SimLoaded { seq: 1, pending: 1 });
        assert_eq!(r[1], Response::SimLoaded { seq: 2, pending: 0 });
        assert!(matches!(&r[2], Response::Hello { board, channels: 1, .. } if board == "rewired"));
    }

    #[test]
    fn noise_record_streams_raw_codes_in_order() {
        let mut e = Engine::new(Fake { log: StdVec::new() }, NoDelay(0), board());
        let mut out = StdVec::new();
        let exp = Experiment::NoiseRecord { target: 0, sample: 1, period_ns: 10_000, count: 100, settle_ns: 0 };
        e.feed(&frame(&Request::Run { seq: 2, experiment: exp }), &mut out).unwrap();
        let r = responses(&out);
        let mut codes = StdVec::new();
        for resp in &r[..r.len() - 1] {
            let Response::Samples { run: 1, offset, codes: c } = resp else { panic!() };
            assert_eq!(usize::from(*offset), codes.len());
            codes.extend_from_slice(c);
        }
        assert_eq!(codes, [1u16; 100]);
        assert!(matches!(
            r.last(),
            Some(Response::Done(RunReport { seq: 2, run: 1, conversions: 100, chunks: 3, .. }))
        ));
        // 100 gaps of 10 µs − (1 µs + 0.5 µs) busy.
        assert_eq!(e.delay.0, 100 * 8_500);
    }

    fn scan(precharge: u8) -> Experiment {
        Experiment::ScanRecord {
            targets: Vec::from_slice(&[1, 0]).unwrap(),
            precharge,
            precharge_sample: 1,
            sample: 0,
            period_ns: 10_000,
            count: 30,
            settle_ns: 0,
        }
    }

    #[test]
    fn a_scan_record_reads_every_target_after_the_precharge_and_streams_all_codes() {
        let mut e = Engine::new(Fake { log: StdVec::new() }, NoDelay(0), board());
        let mut out = StdVec::new();
        e.feed(&frame(&Request::Run { seq: 3, experiment: scan(9) }), &mut out).unwrap();
        let r = responses(&out);
        let mut codes = StdVec::new();
        for resp in &r[..r.len() - 1] {
            let Response::Samples { run: 1, offset, codes: c } = resp else { panic!("{resp:?}") };
            assert_eq!(usize::from(*offset), codes.len());
            codes.extend_from_slice(c);
        }
        assert_eq!(codes.len(), 60, "30 rounds of 2 targets");
        assert!(matches!(
            r.last(),
            Some(Response::Done(RunReport { seq: 3, run: 1, conversions: 120, chunks: 2, .. }))
        ));
        assert_eq!(e.fe.log[..4], [(9, 1), (1, 0), (9, 1), (0, 0)]);
        assert_eq!(e.fe.log.len(), 120);
        // Per round: 10 µs − 2 × ((1 + 0.5) + (0.1 + 0.5)) µs busy = 5.8 µs idle.
        assert_eq!(e.delay.0, 30 * 5_800);
        // A pin is no precharge source: a scan behind one is refused before anything converts.
        let mut e = Engine::new(Fake { log: StdVec::new() }, NoDelay(0), board());
        let mut out = StdVec::new();
        e.feed(&frame(&Request::Run { seq: 4, experiment: scan(0) }), &mut out).unwrap();
        assert_eq!(responses(&out), [Response::Error { seq: 4, kind: ErrorKind::NotAllowed }]);
        assert!(e.fe.log.is_empty());
    }

    fn burst(precharge: u8) -> Experiment {
        Experiment::RepeatBurst {
            target: 1,
            precharge,
            precharge_sample: 0,
            sample: 0,
            length: 2,
            repeats: 1,
            rest_ns: 0,
            settle_ns: 0,
        }
    }

    #[test]
    fn no_experiment_converts_an_undeclared_channel_as_a_precharge() {
        // Channel 0 is a pin and 12 an internal channel: neither is declared a precharge source.
        let mut sweep_precharges = Vec::new();
        sweep_precharges.push(9).unwrap();
        sweep_precharges.push(12).unwrap();
        let samples = Vec::from_slice(&[0]).unwrap();
        let mut periods_ns = Vec::new();
        periods_ns.push(10_000).unwrap();
        let exps = [
            Experiment::PrechargeSweep {
                target: 1,
                precharges: sweep_precharges,
                precharge_sample: 0,
                samples,
                repeats: 1,
                rest_ns: 0,
                settle_ns: 0,
            },
            burst(0),
            burst(12),
            Experiment::PeriodSweep {
                target: 1,
                precharge: 0,
                precharge_sample: 0,
                sample: 0,
                periods_ns,
                repeats: 1,
                settle_ns: 0,
            },
            Experiment::OrderSwap { a: 12, b: 1, sample: 0, repeats: 1, rest_ns: 0, settle_ns: 0 },
        ];
        for (i, exp) in exps.into_iter().enumerate() {
            let mut e = Engine::new(Fake { log: StdVec::new() }, NoDelay(0), board());
            let mut out = StdVec::new();
            let name = exp.name();
            e.feed(&frame(&Request::Run { seq: i as u16, experiment: exp }), &mut out).unwrap();
            assert_eq!(responses(&out), [Response::Error { seq: i as u16, kind: ErrorKind::NotAllowed }], "{name}");
            assert!(e.fe.log.is_empty(), "{name}: nothing converted");
        }
        // The declared source and a pin compared with a pin are allowed.
        let mut e = Engine::new(Fake { log: StdVec::new() }, NoDelay(0), board());
        let mut out = StdVec::new();
        let swap = Experiment::OrderSwap { a: 0, b: 1, sample: 0, repeats: 1, rest_ns: 0, settle_ns: 0 };
        e.feed(&frame(&Request::Run { seq: 1, experiment: swap }), &mut out).unwrap();
        e.feed(&frame(&Request::Run { seq: 2, experiment: burst(9) }), &mut out).unwrap();
        let r = responses(&out);
        assert!(matches!(r[4], Response::Done(RunReport { run: 1, conversions: 4, .. })), "{r:?}");
        assert!(matches!(r[7], Response::Done(RunReport { run: 2, conversions: 3, .. })), "{r:?}");
    }

    #[test]
    fn a_duplicated_run_is_counted_twice_and_chunks_are_resent_from_the_buffer() {
        let mut e = Engine::new(Fake { log: StdVec::new() }, NoDelay(0), board());
        let mut out = StdVec::new();
        let run = frame(&Request::Run { seq: 7, experiment: burst(9) });
        let mut bytes = run.clone();
        bytes.extend(&run); // the same frame twice, as a faulty link may deliver it
        e.feed(&bytes, &mut out).unwrap();
        let r = responses(&out);
        let Response::Done(first) = r[2] else { panic!("{r:?}") };
        let Response::Done(second) = r[5] else { panic!("{r:?}") };
        assert_eq!((first.run, second.run), (1, 2));
        assert_eq!(second.start_ps, first.end_ps, "the second run starts where the first ended");
        assert_eq!(e.fe.log.len(), 6, "both ran");
        // Chunk 1 of the last run of seq 7 again, its summary, then the run log.
        let mut out = StdVec::new();
        let mut bytes = frame(&Request::Resend { seq: 7, run: 2, chunk: 1 });
        bytes.extend(frame(&Request::Resend { seq: 7, run: 0, chunk: SUMMARY_CHUNK }));
        bytes.extend(frame(&Request::Resend { seq: 7, run: 1, chunk: 0 }));
        bytes.extend(frame(&Request::Resend { seq: 6, run: 0, chunk: 0 }));
        bytes.extend(frame(&Request::Runs { seq: 8, since: 1 }));
        e.feed(&bytes, &mut out).unwrap();
        let r = responses(&out);
        assert_eq!(
            r[0],
            Response::Cell {
                run: 2,
                index: 1,
                agg: Aggregate { count: 1, sum: 100, sum_sq: 10_000, min: 100, max: 100 }
            }
        );
        assert_eq!(r[1], Response::Done(second));
        assert_eq!(r[2], Response::Error { seq: 7, kind: ErrorKind::Gone }, "run 1 is no longer buffered");
        assert_eq!(r[3], Response::Error { seq: 6, kind: ErrorKind::Gone });
        assert_eq!(r[4], Response::Runs { seq: 8, runs: Vec::from_slice(&[first, second]).unwrap() });
        assert_eq!(e.fe.log.len(), 6, "resends convert nothing");
        let mut out = StdVec::new();
        e.feed(&frame(&Request::Hello { protocol: PROTOCOL_VERSION, seq: 9 }), &mut out).unwrap();
        assert!(matches!(responses(&out)[0], Response::Hello { runs: 2, .. }));
    }

    #[test]
    fn the_run_log_keeps_the_last_runs() {
        let mut e = Engine::new(Fake { log: StdVec::new() }, NoDelay(0), board());
        let mut out = StdVec::new();
        for seq in 0..(RUN_LOG as u16 + 3) {
            e.feed(&frame(&Request::Run { seq, experiment: burst(9) }), &mut out).unwrap();
        }
        let mut out = StdVec::new();
        e.feed(&frame(&Request::Runs { seq: 99, since: 0 }), &mut out).unwrap();
        let [Response::Runs { seq: 99, runs }] = &responses(&out)[..] else { panic!() };
        let numbers: StdVec<u32> = runs.iter().map(|r| r.run).collect();
        assert_eq!(numbers, (4..=RUN_LOG as u32 + 3).collect::<StdVec<_>>());
    }

    #[test]
    fn a_hello_of_a_protocol_2_host_is_answered_in_words() {
        // Protocol 2's hello: variant 0, protocol 2, and nothing else.
        let mut e = Engine::new(Fake { log: StdVec::new() }, NoDelay(0), board());
        let mut out = StdVec::new();
        let mut buf = [0u8; MAX_FRAME];
        let n = encode_frame(&(0u8, 2u8), &mut buf).unwrap();
        e.feed(&buf[..n], &mut out).unwrap();
        let r = responses(&out);
        assert_eq!(r[0], Response::Error { seq: 0, kind: ErrorKind::Version });
        assert!(matches!(r[1], Response::Hello { protocol: PROTOCOL_VERSION, .. }));
    }
}
