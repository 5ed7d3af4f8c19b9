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
    let n = cobs::decode_in_place(body).map_err(|_| FrameError::DecodeCobs)?;
    if n < 4 {
        return Err(FrameError::DecodeTruncated);
    }
    let (payload, crc) = body[..n].split_at(n - 4);
    let want = u32::from_le_bytes([crc[0], crc[1], crc[2], crc[3]]);
    if FRAME_CRC.checksum(payload) != want {
        return Err(FrameError::DecodeBadCrc);
    }
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
        Some(decode_frame(&mut self.buf[..len]))
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

    #[test]
    fn golden_bytes_of_hello_request() {
        let mut out = [0u8; MAX_FRAME];
        let n = encode_frame(&Request::Hello { protocol: 1 }, &mut out).unwrap();
        // payload: 00 = variant Hello, 01 = protocol 1 (postcard varint);
        // CRC-32 of [00 01] little-endian; then COBS; then the 0x00 delimiter.
        let crc = FRAME_CRC.checksum(&[0x00, 0x01]).to_le_bytes();
        let mut body = std::vec![0x00, 0x01];
        body.extend_from_slice(&crc);
        let mut want = std::vec![0u8; 16];
        let m = cobs::encode(&body, &mut want);
        want.truncate(m);
        want.push(0);
        assert_eq!(&out[..n], &want[..]);
        // The leading zero byte of the payload must have been replaced: only the delimiter is 0.
        assert_eq!(out[..n].iter().filter(|&&b| b == 0).count(), 1);
        assert_eq!(out[0], 0x01, "COBS code byte: the first zero is right at the start");
    }

    #[test]
    fn round_trip_through_accumulator_with_garbage_before() {
        let mut out = [0u8; MAX_FRAME];
        let msg = Response::Done { seq: 7, conversions: 123_456 };
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
        let n = encode_frame(&Response::Done { seq: 1, conversions: 99 }, &mut out).unwrap();
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
        let n = encode_frame(&Response::Done { seq: 1, conversions: 99 }, &mut out).unwrap();
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
        encode_frame(&Response::Samples { seq: u16::MAX, offset: u16::MAX, codes }, &mut out).unwrap();
        encode_frame(&Response::FrontEnd(FrontEnd::largest_for_tests()), &mut out).unwrap();
        encode_frame(&Request::Run { seq: u16::MAX, experiment: Experiment::largest_for_tests() }, &mut out).unwrap();
        for part in SimPart::largest_for_tests() {
            encode_frame(&Request::Simulate(part), &mut out).unwrap();
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
