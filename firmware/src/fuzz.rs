//! The engine's fuzz target: [`Engine::feed`] on random byte streams and random mixtures of valid
//! request frames, damaged frames and garbage.
//!
//! Generic over the front end, so the unit tests run it on a fake converter and `cargo xtask fuzz`
//! on the simulated board. Requests are drawn through [`ohmsight_protocol::fuzz::Gen`] (any
//! variant of [`Request`], any field values), plus the caller's seed sequences — requests that get
//! past validation, such as a simulated set-up's parts — sent as they are or with their encoding
//! damaged and decoded again.

use crate::{AnalogFrontEnd, Engine, MAX_REPLY_FRAMES};
use core::marker::PhantomData;
use embedded_hal::delay::DelayNs;
use ohmsight_protocol::fuzz::{frame, reference_frames, stream, Gen, Message, Target};
use ohmsight_protocol::{ErrorKind, Request, Response, MAX_FRAME, PROTOCOL_VERSION};
use std::collections::VecDeque;
use std::format;
use std::string::String;
use std::vec::Vec;

/// One engine case: the bytes, how they are cut into `feed` calls, and the intact request frames
/// (each right after a delimiter) that must be answered.
#[derive(Debug, Clone)]
pub struct EngineInput {
    /// The bytes the host sends.
    pub stream: Vec<u8>,
    /// Lengths of the successive `feed` calls (they add up to the stream's length).
    pub chunks: Vec<usize>,
    /// Intact request frames that follow a delimiter: position of their own delimiter, request.
    pub intact: Vec<(usize, Request)>,
}

/// Target `engine`: streams fed to a fresh engine from `make`.
///
/// Properties: no panic; a `feed` call writes nothing for bytes other than `0x00` and at most
/// [`MAX_REPLY_FRAMES`] frames of [`MAX_FRAME`] bytes per `0x00`; everything written is whole
/// frames that decode as [`Response`]; and the engine answers exactly as a second engine from
/// `make` answers when given, one by one, what the frame layer's contract
/// ([`reference_frames`]) says the stream holds: each decodable request handled, each bad frame
/// one [`ErrorKind::BadFrame`] record. So after any garbage, a request after a delimiter is
/// decoded and answered as if the garbage had not been there.
pub struct EngineTarget<F, D, M> {
    make: M,
    words: Vec<u64>,
    seeds: Vec<Vec<Request>>,
    _engine: PhantomData<fn() -> (F, D)>,
}

impl<F, D, M> EngineTarget<F, D, M>
where
    F: AnalogFrontEnd,
    D: DelayNs,
    M: FnMut() -> Engine<F, D>,
{
    /// A target over the engines `make` builds (each must start in the same state), with seed
    /// sequences of requests that are sent together (e.g. the parts of a simulated set-up).
    pub fn new(mut make: M, seeds: Vec<Vec<Request>>) -> Self {
        // Integers worth drawing often: the board's channel numbers, positions and sample-time
        // indices, and the protocol version.
        let e = make();
        let board = e.board();
        let mut words: Vec<u64> = board.channels.iter().map(|c| u64::from(c.channel)).collect();
        words.extend((0..board.channels.len().max(board.front_end.sample_ps.len()) as u64).collect::<Vec<_>>());
        words.extend(board.front_end.precharges.iter().map(|p| u64::from(p.channel)));
        words.push(u64::from(PROTOCOL_VERSION));
        Self { make, words, seeds, _engine: PhantomData }
    }
}

impl<F, D, M> Target for EngineTarget<F, D, M>
where
    F: AnalogFrontEnd,
    D: DelayNs,
    M: FnMut() -> Engine<F, D>,
{
    type Input = EngineInput;

    fn name(&self) -> &'static str {
        "engine"
    }

    fn generate(&mut self, gen: &mut Gen) -> EngineInput {
        gen.set_dictionary(&self.words);
        let mut queue = VecDeque::new();
        let seeds = &self.seeds;
        let s = stream(gen, |gen| {
            if queue.is_empty() && !seeds.is_empty() && gen.ratio(1, 4) {
                let seq = &seeds[gen.below(seeds.len() as u64) as usize];
                queue.extend(seq.iter().map(|r| if gen.ratio(1, 4) { gen.nudge(r) } else { r.clone() }));
            }
            Message::Request(queue.pop_front().unwrap_or_else(|| gen.value()))
        });
        let mut chunks = Vec::new();
        let mut left = s.stream.len();
        let bytewise = gen.ratio(1, 2);
        while left > 0 {
            let n = if bytewise { 1 } else { (1 + gen.below(64) as usize).min(left) };
            chunks.push(n);
            left -= n;
        }
        let intact = s
            .intact
            .into_iter()
            .map(|(at, m)| match m {
                Message::Request(r) => (at, r),
                Message::Response(_) => unreachable!("the stream holds requests only"),
            })
            .collect();
        EngineInput { stream: s.stream, chunks, intact }
    }

    fn bytes(&self, input: &EngineInput) -> Vec<u8> {
        input.stream.clone()
    }

    fn check(&mut self, input: &EngineInput) -> Result<(), String> {
        let mut engine = (self.make)();
        let mut out = Vec::new();
        let mut at = 0;
        for &n in &input.chunks {
            let chunk = &input.stream[at..at + n];
            let before = out.len();
            engine.feed(chunk, &mut out).map_err(|e| format!("feed failed on a Vec: {e:?}"))?;
            let delimiters = chunk.iter().filter(|&&b| b == 0).count();
            if out.len() - before > delimiters * MAX_REPLY_FRAMES * MAX_FRAME {
                return Err(format!(
                    "{} bytes written for bytes {at}..{} ({delimiters} delimiters)",
                    out.len() - before,
                    at + n
                ));
            }
            at += n;
        }
        // Whole frames only, each a response.
        let sent = reference_frames::<Response>(&out);
        if out.last().is_some_and(|&b| b != 0) || sent.len() != out.iter().filter(|&&b| b == 0).count() {
            return Err("the engine wrote an empty or unfinished frame".into());
        }
        if let Some((i, Err(e))) = sent.iter().find(|(_, r)| r.is_err()) {
            return Err(format!("the engine's frame ending at byte {i} of its output does not decode: {e}"));
        }
        // The same answers as an engine handed the requests one by one.
        let requests = reference_frames::<Request>(&input.stream);
        for (at, req) in &input.intact {
            if !requests.iter().any(|(i, r)| i == at && r.as_ref() == Ok(req)) {
                return Err(format!("the intact request ending at byte {at} does not decode to {req:?}"));
            }
        }
        let mut reference = (self.make)();
        let mut want = Vec::new();
        for (_, r) in &requests {
            match r {
                Ok(req) => reference.handle(req, &mut want).map_err(|e| format!("handle failed on a Vec: {e:?}"))?,
                Err(_) => want.extend(frame(&Response::Error { seq: 0, kind: ErrorKind::BadFrame })),
            }
        }
        if out != want {
            let got: Vec<_> = sent.into_iter().map(|(_, r)| r).collect();
            let want: Vec<_> = reference_frames::<Response>(&want).into_iter().map(|(_, r)| r).collect();
            let n = got.iter().zip(&want).take_while(|(g, w)| g == w).count();
            return Err(format!(
                "answer {n} is {:?} where the requests handled one by one give {:?} ({} answers against {})",
                got.get(n),
                want.get(n),
                got.len(),
                want.len()
            ));
        }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::engine::tests::{board, Fake, NoDelay, Rewirable};
    use ohmsight_protocol::fuzz::run;
    use ohmsight_protocol::{Experiment, SimPart};
    use std::vec;

    fn seeds() -> Vec<Vec<Request>> {
        let burst = Experiment::RepeatBurst {
            target: 1,
            precharge: 9,
            precharge_sample: 1,
            sample: 0,
            length: 3,
            repeats: 2,
            rest_ns: 50,
            settle_ns: 1000,
        };
        let noise = Experiment::NoiseRecord { target: 0, sample: 1, period_ns: 10_000, count: 100, settle_ns: 0 };
        let scan = Experiment::ScanRecord {
            targets: heapless::Vec::from_slice(&[1, 0]).unwrap_or_default(),
            precharge: 9,
            precharge_sample: 1,
            sample: 0,
            period_ns: 10_000,
            count: 40,
            settle_ns: 0,
        };
        let [SimPart::Board(mut head), pin] = SimPart::largest_for_tests() else { unreachable!() };
        head.pins = 1;
        vec![
            vec![Request::Hello { protocol: PROTOCOL_VERSION, seq: 1 }],
            vec![Request::Run { seq: 3, experiment: burst }],
            vec![Request::Run { seq: 4, experiment: noise }],
            vec![Request::Run { seq: 7, experiment: scan }],
            vec![Request::Simulate { seq: 5, part: SimPart::Board(head) }, Request::Simulate { seq: 6, part: pin }],
        ]
    }

    /// A short run in the normal suite (`cargo xtask fuzz` runs millions on the simulated board).
    #[test]
    fn engine_target_short_run_on_the_fake_converter() {
        let mut t = EngineTarget::new(|| Engine::new(Fake { log: Vec::new() }, NoDelay(0), board()), seeds());
        run(&mut t, 0xe4613e, 0, 10_000, |_| {}).unwrap_or_else(|f| panic!("{f}"));
    }

    #[test]
    fn engine_target_short_run_on_a_front_end_that_takes_set_ups() {
        let mut t = EngineTarget::new(|| Engine::new(Rewirable, NoDelay(0), board()), seeds());
        run(&mut t, 0x5e7, 0, 5_000, |_| {}).unwrap_or_else(|f| panic!("{f}"));
    }

    #[test]
    fn the_engine_target_refuses_a_wrong_answer() {
        // The check must be able to fail: an engine whose board differs from the reference's
        // answers Describe differently, and the target says so.
        let mut n = 0;
        let mut t = EngineTarget::new(
            || {
                n += 1;
                let mut b = board();
                b.unit_id = n;
                Engine::new(Fake { log: Vec::new() }, NoDelay(0), b)
            },
            vec![],
        );
        let mut stream = frame(&Request::Hello { protocol: PROTOCOL_VERSION, seq: 1 });
        stream.extend([0x12, 0x34, 0]);
        let input = EngineInput { chunks: vec![stream.len()], intact: vec![], stream };
        let why = t.check(&input).unwrap_err();
        assert!(why.contains("answer 0"), "{why}");
    }
}
