//! Framing: `COBS(postcard(message) ‖ CRC-32/ISO-HDLC little-endian) ‖ 0x00`.
//!
//! COBS removes every zero byte from the frame body, so `0x00` marks frame ends unambiguously
//! and a receiver that joins mid-stream re-synchronises at the next zero. The CRC catches
//! corrupted bytes that still decode.

use crc::{Crc, CRC_32_ISO_HDLC};
use serde::{de::DeserializeOwned, Serialize};

/// Largest postcard payload of any message (bytes, CRC excluded).
pub const MAX_PAYLOAD: usize = 400;
/// Largest encoded frame: payload + CRC, COBS overhead, delimiter.
pub const MAX_FRAME: usize = MAX_PAYLOAD + 4 + (MAX_PAYLOAD + 4) / 254 + 2;

/// CRC-32/ISO-HDLC (the CRC of zip and Ethernet): polynomial 0x04C11DB7, reflected, init and
/// xorout 0xFFFFFFFF; catalogue check value for "123456789" is 0xCBF43926.
pub const FRAME_CRC: Crc<u32> = Crc::<u32>::new(&CRC_32_ISO_HDLC);

/// Why a frame could not be encoded or decoded.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[non_exhaustive]
pub enum FrameError {
    /// The message does not fit in [`MAX_PAYLOAD`] or the output buffer.
    EncodeTooLarge,
    /// The bytes between two delimiters are not valid COBS.
    DecodeCobs,
    /// The frame is shorter than its CRC.
    DecodeTruncated,
    /// The CRC does not match: the frame was corrupted on the way.
    DecodeBadCrc,
    /// The CRC matches but the payload is not a message of this protocol version.
    DecodeMessage,
    /// More bytes arrived without a delimiter than any frame can hold.
    DecodeOverflow,
}

impl core::fmt::Display for FrameError {
    fn fmt(&self, f: &mut core::fmt::Formatter<'_>) -> core::fmt::Result {
        f.write_str(match self {
            FrameError::EncodeTooLarge => "message too large for one frame",
            FrameError::DecodeCobs => "frame is not valid COBS (bytes lost or inserted)",
            FrameError::DecodeTruncated => "frame too short to hold a CRC",
            FrameError::DecodeBadCrc => "frame CRC mismatch (corrupted on the link)",
            FrameError::DecodeMessage => "frame payload is not a message of this protocol",
            FrameError::DecodeOverflow => "no frame delimiter within the largest frame size",
        })
    }
}

#[cfg(feature = "std")]
impl std::error::Error for FrameError {}

/// Encodes `msg` into `out` as one complete frame (delimiter included); returns its length.
pub fn encode_frame<T: Serialize>(msg: &T, out: &mut [u8]) -> Result<usize, FrameError> {
    let mut raw = [0u8; MAX_PAYLOAD + 4];
    let n = postcard::to_slice(msg, &mut raw[..MAX_PAYLOAD]).map_err(|_| FrameError::EncodeTooLarge)?.len();
    let crc = FRAME_CRC.checksum(&raw[..n]);
    raw[n..n + 4].copy_from_slice(&crc.to_le_bytes());
    let body = n + 4;
    if out.len() < cobs::max_encoding_length(body) + 1 {
        return Err(FrameError::EncodeTooLarge);
    }
    let len = cobs::encode(&raw[..body], out);
    out[len] = 0;
    Ok(len + 1)
}

/// Decodes one frame body (the bytes between delimiters, delimiter excluded) in place.
pub fn decode_frame<T: DeserializeOwned>(body: &mut [u8]) -> Result<T, FrameError> {
    decode_payload(body).and_then(decode_message)
}

/// Checks one frame body in place (COBS, CRC) and returns its postcard payload.
pub fn decode_payload(body: &mut [u8]) -> Result<&[u8], FrameError> {
    let n = cobs::decode_in_place(body).map_err(|_| FrameError::DecodeCobs)?;
    if n < 4 {
        return Err(FrameError::DecodeTruncated);
    }
    let (payload, crc) = body[..n].split_at(n - 4);
    let want = u32::from_le_bytes([crc[0], crc[1], crc[2], crc[3]]);
    if FRAME_CRC.checksum(payload) != want {
        return Err(FrameError::DecodeBadCrc);
    }
    Ok(payload)
}

/// Decodes a checked payload as a message.
pub fn decode_message<T: DeserializeOwned>(payload: &[u8]) -> Result<T, FrameError> {
    postcard::from_bytes(payload).map_err(|_| FrameError::DecodeMessage)
}

/// Collects bytes from a stream into frames.
///
/// Push bytes one at a time; a complete frame is returned when its delimiter arrives. Garbage
/// never wedges the accumulator: an over-long run is dropped at the next delimiter.
pub struct FrameAccumulator {
    buf: [u8; MAX_FRAME],
    len: usize,
    overflowed: bool,
}

impl Default for FrameAccumulator {
    fn default() -> Self {
        Self::new()
    }
}

impl FrameAccumulator {
    /// An empty accumulator.
    pub const fn new() -> Self {
        Self { buf: [0; MAX_FRAME], len: 0, overflowed: false }
    }

    /// Feeds one byte. Returns `None` while a frame is incomplete, `Some(Ok(msg))` for a good
    /// frame and `Some(Err(_))` for a bad one (the accumulator is ready for the next frame either way).
    pub fn push<T: DeserializeOwned>(&mut self, byte: u8) -> Option<Result<T, FrameError>> {
        self.push_payload(byte).map(|r| r.and_then(decode_message))
    }

    /// Like [`FrameAccumulator::push`], but returns the checked payload (COBS and CRC good) so
    /// the caller can decode it as it likes (e.g. a message of another protocol version).
    pub fn push_payload(&mut self, byte: u8) -> Option<Result<&[u8], FrameError>> {
        if byte != 0 {
            if self.len < MAX_FRAME {
                self.buf[self.len] = byte;
                self.len += 1;
            } else {
                self.overflowed = true;
            }
            return None;
        }
        let len = core::mem::replace(&mut self.len, 0);
        if core::mem::replace(&mut self.overflowed, false) {
            return Some(Err(FrameError::DecodeOverflow));
        }
        if len == 0 {
            // Back-to-back delimiters: an empty frame, used to flush a link. Not an error.
            return None;
        }
        Some(decode_payload(&mut self.buf[..len]))
    }

    /// Bytes of the current frame held so far: never more than [`MAX_FRAME`], however long the
    /// run without a delimiter (the excess is dropped and reported at the delimiter).
    pub fn buffered(&self) -> usize {
        self.len
    }

    /// True when part of a frame has been received.
    pub fn is_mid_frame(&self) -> bool {
        self.len > 0 || self.overflowed
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::messages::*;

    #[test]
    fn crc_matches_catalogue_check_value() {
        // Source: the CRC catalogue entry for CRC-32/ISO-HDLC ("check" field, the CRC of the
        // ASCII string "123456789"): 0xCBF43926.
        assert_eq!(FRAME_CRC.checksum(b"123456789"), 0xCBF4_3926);
    }

    /// The frame of `payload` built by hand: CRC-32 little-endian appended, COBS, delimiter.
    fn by_hand(payload: &[u8]) -> std::vec::Vec<u8> {
        let mut body = payload.to_vec();
        body.extend_from_slice(&FRAME_CRC.checksum(payload).to_le_bytes());
        let mut want = std::vec![0u8; body.len() + body.len() / 254 + 2];
        let m = cobs::encode(&body, &mut want);
        want.truncate(m);
        want.push(0);
        want
    }

    fn encoded<T: Serialize>(msg: &T) -> std::vec::Vec<u8> {
        let mut out = [0u8; MAX_FRAME];
        let n = encode_frame(msg, &mut out).unwrap();
        out[..n].to_vec()
    }

    #[test]
    fn golden_bytes_of_hello_request() {
        let out = encoded(&Request::Hello { protocol: 3, seq: 1 });
        // payload: 00 = variant Hello, 03 = protocol 3, 01 = seq 1 (postcard varints);
        // CRC-32 of [00 03 01] little-endian; then COBS; then the 0x00 delimiter.
        assert_eq!(out, by_hand(&[0x00, 0x03, 0x01]));
        // The leading zero byte of the payload must have been replaced: only the delimiter is 0.
        assert_eq!(out.iter().filter(|&&b| b == 0).count(), 1);
        assert_eq!(out[0], 0x01, "COBS code byte: the first zero is right at the start");
    }

    #[test]
    fn golden_bytes_of_protocol_3_requests() {
        // 01 = Describe, 05 = seq 5.
        assert_eq!(encoded(&Request::Describe { seq: 5 }), by_hand(&[0x01, 0x05]));
        // 02 = Channel, 06 = seq, 0A = position 10.
        assert_eq!(encoded(&Request::Channel { seq: 6, position: 10 }), by_hand(&[0x02, 0x06, 0x0A]));
        // 05 = Resend, seq 300 = AC 02 (varint: 300 = 0b10_0101100 → 0xAC, 0x02), run 7 = 07,
        // chunk 0xFFFF (the summary) = FF FF 03.
        assert_eq!(
            encoded(&Request::Resend { seq: 300, run: 7, chunk: SUMMARY_CHUNK }),
            by_hand(&[0x05, 0xAC, 0x02, 0x07, 0xFF, 0xFF, 0x03])
        );
        // 06 = Runs, seq 1, since 129 = 81 01.
        assert_eq!(encoded(&Request::Runs { seq: 1, since: 129 }), by_hand(&[0x06, 0x01, 0x81, 0x01]));
    }

    #[test]
    fn golden_bytes_of_a_run_report() {
        let done = Response::Done(RunReport {
            seq: 2,
            run: 3,
            start_ps: 1_000,
            end_ps: 1_000_000,
            conversions: 200,
            chunks: 4,
        });
        // 05 = Done, 02 = seq, 03 = run, 1000 = E8 07, 1 000 000 = C0 84 3D, 200 = C8 01, 04.
        assert_eq!(encoded(&done), by_hand(&[0x05, 0x02, 0x03, 0xE8, 0x07, 0xC0, 0x84, 0x3D, 0xC8, 0x01, 0x04]));
        // 03 = Cell, run 3, index 1, then the aggregate: count 2, sum 9, sum_sq 41, min 4, max 5.
        let cell = Response::Cell { run: 3, index: 1, agg: Aggregate { count: 2, sum: 9, sum_sq: 41, min: 4, max: 5 } };
        assert_eq!(encoded(&cell), by_hand(&[0x03, 0x03, 0x01, 0x02, 0x09, 0x29, 0x04, 0x05]));
    }

    #[test]
    fn a_hello_of_any_version_tells_its_version() {
        // A protocol 2 board's hello: variant 0, protocol 2, then fields this version lays out
        // differently (firmware "1", board "b", unit 1, 4 channels).
        let v2 = by_hand(&[0x00, 0x02, 0x01, b'1', 0x01, b'b', 0x01, 0x04]);
        let mut acc = FrameAccumulator::new();
        let mut head = None;
        for &b in &v2 {
            if let Some(r) = acc.push_payload(b) {
                let payload = r.unwrap();
                assert!(decode_message::<Response>(payload).is_err(), "not a protocol 3 hello");
                head = Some(decode_message::<HelloHead>(payload).unwrap());
            }
        }
        assert_eq!(head, Some(HelloHead::Hello { protocol: 2 }));
    }

    #[test]
    fn round_trip_through_accumulator_with_garbage_before() {
        let mut out = [0u8; MAX_FRAME];
        let msg = Response::Done(RunReport { seq: 7, run: 9, start_ps: 5, end_ps: 6, conversions: 123_456, chunks: 2 });
        let n = encode_frame(&msg, &mut out).unwrap();
        let mut acc = FrameAccumulator::new();
        let mut got = std::vec::Vec::new();
        for &b in [0x55u8, 0x12, 0x00].iter().chain(out[..n].iter()) {
            if let Some(r) = acc.push::<Response>(b) {
                got.push(r);
            }
        }
        assert_eq!(got.len(), 2);
        assert!(got[0].is_err(), "garbage before the frame is reported, not swallowed");
        assert_eq!(got[1], Ok(msg));
    }

    #[test]
    fn corrupted_byte_is_caught() {
        let mut out = [0u8; MAX_FRAME];
        let n = encode_frame(&Response::Error { seq: 1, kind: ErrorKind::TooLarge }, &mut out).unwrap();
        for i in 0..n - 1 {
            let mut bad = out;
            bad[i] ^= 0x10;
            if bad[i] == 0 {
                continue; // that would split the frame: a different failure, tested elsewhere
            }
            let r = decode_frame::<Response>(&mut bad[..n - 1]);
            assert!(r.is_err(), "flip at byte {i} went unnoticed");
        }
    }

    #[test]
    fn truncated_frame_is_an_error_not_a_panic() {
        let mut out = [0u8; MAX_FRAME];
        let n = encode_frame(&Response::Error { seq: 1, kind: ErrorKind::TooLarge }, &mut out).unwrap();
        for cut in 0..n - 1 {
            let mut part = out;
            let _ = decode_frame::<Response>(&mut part[..cut]);
        }
        let mut acc = FrameAccumulator::new();
        for _ in 0..MAX_FRAME + 10 {
            assert!(acc.push::<Response>(0x41).is_none());
        }
        assert_eq!(acc.push::<Response>(0), Some(Err(FrameError::DecodeOverflow)));
        assert!(!acc.is_mid_frame());
    }

    #[test]
    fn largest_messages_fit() {
        let mut out = [0u8; MAX_FRAME];
        let mut codes = heapless::Vec::new();
        for _ in 0..SAMPLES_PER_MESSAGE {
            codes.push(u16::MAX).unwrap();
        }
        encode_frame(&Response::Samples { run: u32::MAX, offset: u16::MAX, codes }, &mut out).unwrap();
        let front_end = FrontEnd::largest_for_tests();
        encode_frame(&Response::FrontEnd { seq: u16::MAX, front_end }, &mut out).unwrap();
        let most = RunReport {
            seq: u16::MAX,
            run: u32::MAX,
            start_ps: u64::MAX,
            end_ps: u64::MAX,
            conversions: u32::MAX,
            chunks: u16::MAX,
        };
        let runs = heapless::Vec::from_slice(&[most; RUN_LOG]).unwrap();
        encode_frame(&Response::Runs { seq: u16::MAX, runs }, &mut out).unwrap();
        encode_frame(&Request::Run { seq: u16::MAX, experiment: Experiment::largest_for_tests() }, &mut out).unwrap();
        for part in SimPart::largest_for_tests() {
            encode_frame(&Request::Simulate { seq: u16::MAX, part }, &mut out).unwrap();
        }
    }

    #[test]
    fn random_bytes_never_panic_the_decoder() {
        // A small deterministic fuzz: xorshift bytes with frequent zeros.
        let mut x: u32 = 0x1234_5678;
        let mut acc = FrameAccumulator::new();
        for _ in 0..200_000 {
            x ^= x << 13;
            x ^= x >> 17;
            x ^= x << 5;
            let b = if x.is_multiple_of(17) { 0 } else { (x >> 8) as u8 };
            let _ = acc.push::<Request>(b);
            let _ = acc.push::<Response>(b);
        }
    }
}
