//! Command loop and experiment execution.

use crate::frontend::{AnalogFrontEnd, FrontEndError, FrontEndErrorKind, SetupProgress};
use embedded_hal::delay::DelayNs;
use embedded_io::{Read, Write};
use heapless::{String, Vec};
use ohmsight_protocol::{
    encode_frame, Aggregate, ChannelInfo, ErrorKind, FrameAccumulator, FrontEnd, Request, Response, StepRecord, Steps,
    Timing, MAX_CELLS, MAX_CHANNELS, MAX_FRAME, MAX_RAW_SAMPLES, PROTOCOL_VERSION, SAMPLES_PER_MESSAGE,
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
            match self.rx.push::<Request>(b) {
                None => {}
                Some(Ok(req)) => self.handle(&req, out)?,
                Some(Err(_)) => self.send(out, &Response::Error { seq: 0, kind: ErrorKind::BadFrame })?,
            }
        }
        out.flush()
    }

    /// Answers one request.
    pub fn handle<W: Write>(&mut self, req: &Request, out: &mut W) -> Result<(), W::Error> {
        match req {
            Request::Hello { protocol } => {
                if *protocol != PROTOCOL_VERSION {
                    // Answer with our version anyway so the host can say what it met.
                    self.send(out, &Response::Error { seq: 0, kind: ErrorKind::Version })?;
                }
                let mut firmware = String::new();
                let _ = firmware.push_str(&FIRMWARE_VERSION[..FIRMWARE_VERSION.len().min(16)]);
                let hello = Response::Hello {
                    protocol: PROTOCOL_VERSION,
                    firmware,
                    board: self.board.name.clone(),
                    unit_id: self.board.unit_id,
                    channels: self.board.channels.len() as u8,
                };
                self.send(out, &hello)
            }
            Request::Describe => {
                let fe = Response::FrontEnd(self.board.front_end.clone());
                self.send(out, &fe)
            }
            Request::Channel { position } => match self.board.channels.get(usize::from(*position)) {
                Some(c) => {
                    let c = Response::Channel(c.clone());
                    self.send(out, &c)
                }
                None => self.send(out, &Response::Error { seq: 0, kind: ErrorKind::BadPosition }),
            },
            Request::Run { seq, experiment } => {
                let seq = *seq;
                match self.run_experiment(seq, experiment, out) {
                    Ok(Ok(conversions)) => self.send(out, &Response::Done { seq, conversions }),
                    Ok(Err(kind)) => self.send(out, &Response::Error { seq, kind }),
                    Err(e) => Err(e),
                }
            }
            Request::Simulate(part) => {
                let answer = match self.fe.simulate(part) {
                    Ok(SetupProgress::Pending(pending)) => Response::SimLoaded { pending },
                    Ok(SetupProgress::Ready(board)) => {
                        self.board = board;
                        Response::SimLoaded { pending: 0 }
                    }
                    Err(kind) => Response::Error { seq: 0, kind },
                };
                self.send(out, &answer)
            }
        }
    }

    fn has_channel(&self, ch: u8) -> bool {
        self.board.channels.iter().any(|c| c.channel == ch)
    }

    /// Runs one experiment; the outer `Result` is the link, the inner one the experiment.
    fn run_experiment<W: Write>(
        &mut self,
        seq: u16,
        exp: &ohmsight_protocol::Experiment,
        out: &mut W,
    ) -> Result<Result<u32, ErrorKind>, W::Error> {
        let fe_desc = &self.board.front_end;
        let timing = Timing { sample_ps: &fe_desc.sample_ps, conversion_ps: fe_desc.conversion_ps };
        let steps = match Steps::new(exp, timing) {
            Ok(s) => s,
            Err(k) => return Ok(Err(k)),
        };
        let (tested, precharges) = steps.channels();
        if !tested.iter().flatten().all(|&c| self.has_channel(c)) || !precharges.iter().all(|&c| self.has_channel(c)) {
            return Ok(Err(ErrorKind::BadChannel));
        }
        let n_cells = usize::from(steps.cells());
        let n_raw = steps.raw_samples();
        self.cells[..n_cells].fill(Aggregate::default());
        self.delay.delay_ns(steps.settle_ns());
        let mut done = 0u32;
        for i in 0..steps.len() {
            let step = steps.step(i);
            let code = match self.fe.convert(step.channel, step.sample) {
                Ok(c) => c,
                Err(e) => {
                    self.conversions = self.conversions.wrapping_add(done);
                    return Ok(Err(match e.kind() {
                        FrontEndErrorKind::BadChannel => ErrorKind::BadChannel,
                        FrontEndErrorKind::BadSampleTime => ErrorKind::BadSampleIndex,
                        _ => ErrorKind::Converter,
                    }));
                }
            };
            done += 1;
            match step.record {
                StepRecord::None => {}
                StepRecord::Cell(c) => self.cells[usize::from(c)].add(code),
                StepRecord::Raw(j) => self.raw[usize::from(j)] = code,
            }
            if step.wait_after_ns > 0 {
                self.delay.delay_ns(step.wait_after_ns);
            }
        }
        self.conversions = self.conversions.wrapping_add(done);
        for index in 0..n_cells {
            let agg = self.cells[index];
            self.send(out, &Response::Cell { seq, index: index as u16, agg })?;
        }
        let mut offset = 0u16;
        while offset < n_raw {
            let end = (offset as usize + SAMPLES_PER_MESSAGE).min(usize::from(n_raw));
            let codes = Vec::from_slice(&self.raw[usize::from(offset)..end]).unwrap_or_default();
            self.send(out, &Response::Samples { seq, offset, codes })?;
            offset = end as u16;
        }
        Ok(Ok(done))
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
        for (ch, role) in [(0, ChannelRole::Pin), (1, ChannelRole::Pin), (9, ChannelRole::Precharge)] {
            channels.push(ChannelInfo { channel: ch, label: String::try_from("x").unwrap(), role }).unwrap();
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

    #[test]
    fn hello_describe_and_a_burst() {
        let mut e = Engine::new(Fake { log: StdVec::new() }, NoDelay(0), board());
        let mut out = StdVec::new();
        let mut bytes = frame(&Request::Hello { protocol: PROTOCOL_VERSION });
        bytes.extend(frame(&Request::Describe));
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
        assert!(matches!(r[0], Response::Hello { protocol: PROTOCOL_VERSION, channels: 3, unit_id: 7, .. }));
        assert!(matches!(r[1], Response::FrontEnd(_)));
        assert_eq!(r.len(), 2 + 3 + 1);
        for (j, resp) in r[2..5].iter().enumerate() {
            let Response::Cell { seq: 5, index, agg } = resp else { panic!("{resp:?}") };
            assert_eq!(usize::from(*index), j);
            assert_eq!((agg.count, agg.sum, agg.min, agg.max), (2, 200, 100, 100));
        }
        assert_eq!(r[5], Response::Done { seq: 5, conversions: 8 });
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
        bytes.extend_from_slice(&frame(&Request::Hello { protocol: 1 })[..3]); // truncated …
        bytes.push(0); // … then cut off by a delimiter
        bytes.extend(frame(&Request::Channel { position: 40 }));
        bytes.extend(frame(&Request::Hello { protocol: 99 }));
        e.feed(&bytes, &mut out).unwrap();
        let r = responses(&out);
        assert_eq!(r[0], Response::Error { seq: 1, kind: ErrorKind::BadChannel });
        assert_eq!(r[1], Response::Error { seq: 0, kind: ErrorKind::BadFrame });
        assert_eq!(r[2], Response::Error { seq: 0, kind: ErrorKind::BadFrame });
        assert_eq!(r[3], Response::Error { seq: 0, kind: ErrorKind::BadPosition });
        assert_eq!(r[4], Response::Error { seq: 0, kind: ErrorKind::Version });
        assert!(matches!(r[5], Response::Hello { .. }));
        assert!(e.fe.log.is_empty(), "nothing was converted for refused requests");
    }

    #[test]
    fn a_set_up_is_refused_by_a_real_converter_and_the_engine_keeps_answering() {
        let mut e = Engine::new(Fake { log: StdVec::new() }, NoDelay(0), board());
        let mut out = StdVec::new();
        let [part, _] = SimPart::largest_for_tests();
        let mut bytes = frame(&Request::Simulate(part));
        bytes.extend(frame(&Request::Hello { protocol: PROTOCOL_VERSION }));
        e.feed(&bytes, &mut out).unwrap();
        let r = responses(&out);
        assert_eq!(r[0], Response::Error { seq: 0, kind: ErrorKind::Unsupported });
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
        let mut bytes = frame(&Request::Simulate(SimPart::Board(head)));
        bytes.extend(frame(&Request::Simulate(pin)));
        bytes.extend(frame(&Request::Hello { protocol: PROTOCOL_VERSION }));
        e.feed(&bytes, &mut out).unwrap();
        let r = responses(&out);
        assert_eq!(r[0], Response::SimLoaded { pending: 1 });
        assert_eq!(r[1], Response::SimLoaded { pending: 0 });
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
            let Response::Samples { seq: 2, offset, codes: c } = resp else { panic!() };
            assert_eq!(usize::from(*offset), codes.len());
            codes.extend_from_slice(c);
        }
        assert_eq!(codes, [1u16; 100]);
        assert_eq!(r.last(), Some(&Response::Done { seq: 2, conversions: 100 }));
        // 100 gaps of 10 µs − (1 µs + 0.5 µs) busy.
        assert_eq!(e.delay.0, 100 * 8_500);
    }
}
