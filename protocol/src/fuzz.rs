//! Random inputs for the decoders, and the frame and message fuzz targets.
//!
//! Shared by the unit tests (a short run of each target) and `cargo xtask fuzz` (millions of
//! cases). Everything is seeded: case `i` of a run with seed `s` is generated from
//! [`Gen::for_case`]`(s, i)` alone, so a failure can be replayed on its own.
//!
//! Messages are generated through serde: [`Gen`] is a [`serde::Deserializer`] that makes up every
//! value it is asked for (a random variant of each enum, random integers biased to small and edge
//! values, strings and sequences of random length). A new variant or field of [`Request`] or
//! [`Response`] is therefore generated without touching this file.

use crate::frame::{decode_frame, encode_frame, FrameAccumulator, FrameError, FRAME_CRC, MAX_FRAME, MAX_PAYLOAD};
use crate::messages::{Request, Response};
use core::fmt::{self, Debug, Display};
use rand_xoshiro::rand_core::{Rng, SeedableRng};
use rand_xoshiro::Xoshiro256PlusPlus;
use serde::de::{self, DeserializeOwned, DeserializeSeed, IntoDeserializer, Visitor};
use serde::Serialize;
use std::panic::{catch_unwind, AssertUnwindSafe};
use std::string::{String, ToString};
use std::vec::Vec;
use std::{format, vec};

/// A seeded source of random inputs.
pub struct Gen {
    rng: Xoshiro256PlusPlus,
    dictionary: Vec<u64>,
}

impl Gen {
    /// A generator seeded with `seed`.
    pub fn new(seed: u64) -> Self {
        Self { rng: Xoshiro256PlusPlus::seed_from_u64(seed), dictionary: Vec::new() }
    }

    /// The generator of case `case` of a run seeded with `seed`.
    pub fn for_case(seed: u64, case: u64) -> Self {
        Self::new(seed ^ case.wrapping_mul(0x9E37_79B9_7F4A_7C15))
    }

    /// Integers that random integer fields take often (channel numbers of a board, the protocol
    /// version…), so generated requests get past the first validity checks.
    pub fn set_dictionary(&mut self, words: &[u64]) {
        self.dictionary = words.to_vec();
    }

    /// 64 random bits.
    pub fn next_u64(&mut self) -> u64 {
        self.rng.next_u64()
    }

    /// Uniform in `0..n` (`n > 0`).
    pub fn below(&mut self, n: u64) -> u64 {
        // Lemire's multiply-shift; the bias is below 2^-32 for the small n used here.
        ((u128::from(self.next_u64()) * u128::from(n)) >> 64) as u64
    }

    /// True with probability `num / den`.
    pub fn ratio(&mut self, num: u64, den: u64) -> bool {
        self.below(den) < num
    }

    /// An integer in `0..=max` (`max` of the form 2^k − 1): small values, the edges and the
    /// dictionary's words far more often than uniform draws would give them.
    pub fn int(&mut self, max: u64) -> u64 {
        match self.below(16) {
            0..=3 if !self.dictionary.is_empty() => {
                let i = self.below(self.dictionary.len() as u64) as usize;
                let w = self.dictionary[i];
                if w <= max {
                    return w;
                }
                self.next_u64() & max
            }
            0..=5 => self.below(max.min(16) + 1),
            6..=7 => [0, 1, max, max - 1, max / 2, max / 2 + 1][self.below(6) as usize],
            _ => self.next_u64() & max,
        }
    }

    /// A length for a string or sequence: mostly short, sometimes past any capacity.
    pub fn length(&mut self) -> usize {
        let top = match self.below(16) {
            0..=7 => 4,
            8..=11 => 32,
            12..=14 => 64,
            _ => 600,
        };
        self.below(top + 1) as usize
    }

    fn char(&mut self) -> char {
        match self.below(8) {
            0..=4 => char::from(b' ' + self.below(95) as u8),
            5 => ['é', '\u{7ff}', '\u{800}', '\u{ffff}', '😀', '\0'][self.below(6) as usize],
            _ => char::from_u32(self.below(0x11_0000) as u32).unwrap_or('?'),
        }
    }

    /// Random bytes: `len` of them, zeros with the given odds in 256 (as well as by chance).
    pub fn bytes(&mut self, len: usize, zeros_in_256: u64) -> Vec<u8> {
        (0..len).map(|_| if self.below(256) < zeros_in_256 { 0 } else { self.next_u64() as u8 }).collect()
    }

    /// Line noise: random bytes, from none to several frames' worth, with zeros rare or frequent
    /// (runs longer than [`MAX_FRAME`] without a zero included).
    pub fn garbage(&mut self) -> Vec<u8> {
        let len = match self.below(8) {
            0..=4 => self.below(16),
            5..=6 => self.below(MAX_FRAME as u64),
            _ => MAX_FRAME as u64 - 2 + self.below(2 * MAX_FRAME as u64),
        } as usize;
        let zeros = [0, 0, 1, 8, 32, 128][self.below(6) as usize];
        let mut g = self.bytes(len, zeros);
        if zeros == 0 {
            g.iter_mut().filter(|b| **b == 0).for_each(|b| *b = 0x5a);
        }
        g
    }

    /// Damages `bytes` as a link would: flipped bits or bytes, a cut, bytes lost, inserted,
    /// repeated, or garbage appended.
    pub fn mutate(&mut self, bytes: &mut Vec<u8>) {
        for _ in 0..=self.below(3) {
            let n = bytes.len() as u64;
            match self.below(7) {
                0 if n > 0 => {
                    let i = self.below(n) as usize;
                    bytes[i] ^= 1 << self.below(8);
                }
                1 if n > 0 => {
                    let i = self.below(n) as usize;
                    bytes[i] = self.next_u64() as u8;
                }
                2 => bytes.truncate(self.below(n + 1) as usize),
                3 if n > 0 => {
                    bytes.remove(self.below(n) as usize);
                }
                4 => {
                    let b = self.next_u64() as u8;
                    bytes.insert(self.below(n + 1) as usize, b);
                }
                5 if n > 0 => {
                    let from = self.below(n) as usize;
                    let to = from + self.below((n - from as u64).min(16) + 1) as usize;
                    let part = bytes[from..to].to_vec();
                    let at = self.below(bytes.len() as u64 + 1) as usize;
                    bytes.splice(at..at, part);
                }
                _ => {
                    let g = self.garbage();
                    bytes.extend(g);
                }
            }
        }
    }

    /// `v` with a byte or two of its encoding changed, decoded again (`v` itself when that does
    /// not decode): a value near a valid one, with a field or a variant off.
    pub fn nudge<T: Serialize + DeserializeOwned + Clone>(&mut self, v: &T) -> T {
        let mut buf = [0u8; MAX_PAYLOAD];
        let Ok(bytes) = postcard::to_slice(v, &mut buf) else { return v.clone() };
        for _ in 0..=self.below(2) {
            let i = self.below(bytes.len() as u64) as usize;
            bytes[i] = if self.ratio(1, 2) { bytes[i] ^ (1 << self.below(8)) } else { self.next_u64() as u8 };
        }
        postcard::from_bytes(bytes).unwrap_or_else(|_| v.clone())
    }

    /// A random value of any serde type (here: a message), through [`Gen`]'s `Deserializer`.
    ///
    /// A draw that does not fit the type (a string or sequence past its capacity) is drawn again.
    pub fn value<T: DeserializeOwned>(&mut self) -> T {
        for _ in 0..1000 {
            if let Ok(v) = T::deserialize(&mut *self) {
                return v;
            }
        }
        panic!("no value of {} in 1000 draws: the generator cannot make this type", core::any::type_name::<T>())
    }
}

/// Why [`Gen`] could not make a value (the caller draws again).
#[derive(Debug)]
pub struct GenError(String);

impl Display for GenError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(&self.0)
    }
}

impl de::StdError for GenError {}

impl de::Error for GenError {
    fn custom<T: Display>(msg: T) -> Self {
        GenError(msg.to_string())
    }
}

macro_rules! unsigned {
    ($($method:ident $visit:ident $t:ty),*) => {$(
        fn $method<V: Visitor<'de>>(self, v: V) -> Result<V::Value, GenError> {
            v.$visit(self.int(<$t>::MAX as u64) as $t)
        }
    )*};
}

macro_rules! signed {
    ($($method:ident $visit:ident $t:ty, $u:ty),*) => {$(
        fn $method<V: Visitor<'de>>(self, v: V) -> Result<V::Value, GenError> {
            // Two's complement of a biased unsigned draw: 0, ±1, MIN, MAX and small negatives.
            let u = self.int(<$u>::MAX as u64) as $u;
            v.$visit(if self.ratio(1, 4) { (u as $t).wrapping_neg() } else { u as $t })
        }
    )*};
}

impl<'de> de::Deserializer<'de> for &mut Gen {
    type Error = GenError;

    fn deserialize_any<V: Visitor<'de>>(self, _: V) -> Result<V::Value, GenError> {
        Err(GenError("a type that is not described by its Deserialize impl".into()))
    }

    unsigned!(deserialize_u8 visit_u8 u8, deserialize_u16 visit_u16 u16, deserialize_u32 visit_u32 u32,
        deserialize_u64 visit_u64 u64);
    signed!(deserialize_i8 visit_i8 i8, u8, deserialize_i16 visit_i16 i16, u16, deserialize_i32 visit_i32 i32, u32,
        deserialize_i64 visit_i64 i64, u64);

    fn deserialize_u128<V: Visitor<'de>>(self, v: V) -> Result<V::Value, GenError> {
        let hi = self.int(u64::MAX);
        v.visit_u128(u128::from(hi) << 64 | u128::from(self.int(u64::MAX)))
    }

    fn deserialize_i128<V: Visitor<'de>>(self, v: V) -> Result<V::Value, GenError> {
        let hi = self.int(u64::MAX);
        v.visit_i128((u128::from(hi) << 64 | u128::from(self.int(u64::MAX))) as i128)
    }

    fn deserialize_bool<V: Visitor<'de>>(self, v: V) -> Result<V::Value, GenError> {
        v.visit_bool(self.ratio(1, 2))
    }

    fn deserialize_f32<V: Visitor<'de>>(self, v: V) -> Result<V::Value, GenError> {
        let x = [0.0, -0.0, 1.0, -1.0, f32::NAN, f32::INFINITY, f32::NEG_INFINITY, f32::MIN_POSITIVE, f32::MAX];
        v.visit_f32(if self.ratio(1, 2) { x[self.below(9) as usize] } else { f32::from_bits(self.next_u64() as u32) })
    }

    fn deserialize_f64<V: Visitor<'de>>(self, v: V) -> Result<V::Value, GenError> {
        let x = [0.0, -0.0, 1.0, -1.0, f64::NAN, f64::INFINITY, f64::NEG_INFINITY, f64::MIN_POSITIVE, f64::MAX];
        v.visit_f64(if self.ratio(1, 2) { x[self.below(9) as usize] } else { f64::from_bits(self.next_u64()) })
    }

    fn deserialize_char<V: Visitor<'de>>(self, v: V) -> Result<V::Value, GenError> {
        v.visit_char(self.char())
    }

    fn deserialize_str<V: Visitor<'de>>(self, v: V) -> Result<V::Value, GenError> {
        let n = self.length();
        let s: String = (0..n).map(|_| self.char()).collect();
        v.visit_str(&s)
    }

    fn deserialize_string<V: Visitor<'de>>(self, v: V) -> Result<V::Value, GenError> {
        self.deserialize_str(v)
    }

    fn deserialize_bytes<V: Visitor<'de>>(self, v: V) -> Result<V::Value, GenError> {
        let n = self.length();
        v.visit_bytes(&self.bytes(n, 16))
    }

    fn deserialize_byte_buf<V: Visitor<'de>>(self, v: V) -> Result<V::Value, GenError> {
        self.deserialize_bytes(v)
    }

    fn deserialize_option<V: Visitor<'de>>(self, v: V) -> Result<V::Value, GenError> {
        if self.ratio(1, 2) {
            v.visit_none()
        } else {
            v.visit_some(self)
        }
    }

    fn deserialize_unit<V: Visitor<'de>>(self, v: V) -> Result<V::Value, GenError> {
        v.visit_unit()
    }

    fn deserialize_unit_struct<V: Visitor<'de>>(self, _: &'static str, v: V) -> Result<V::Value, GenError> {
        v.visit_unit()
    }

    fn deserialize_newtype_struct<V: Visitor<'de>>(self, _: &'static str, v: V) -> Result<V::Value, GenError> {
        v.visit_newtype_struct(self)
    }

    fn deserialize_seq<V: Visitor<'de>>(self, v: V) -> Result<V::Value, GenError> {
        let left = self.length();
        v.visit_seq(Elements { gen: self, left })
    }

    fn deserialize_tuple<V: Visitor<'de>>(self, len: usize, v: V) -> Result<V::Value, GenError> {
        v.visit_seq(Elements { gen: self, left: len })
    }

    fn deserialize_tuple_struct<V: Visitor<'de>>(
        self,
        _: &'static str,
        len: usize,
        v: V,
    ) -> Result<V::Value, GenError> {
        v.visit_seq(Elements { gen: self, left: len })
    }

    fn deserialize_map<V: Visitor<'de>>(self, v: V) -> Result<V::Value, GenError> {
        let left = self.length();
        v.visit_map(Elements { gen: self, left })
    }

    fn deserialize_struct<V: Visitor<'de>>(
        self,
        _: &'static str,
        fields: &'static [&'static str],
        v: V,
    ) -> Result<V::Value, GenError> {
        v.visit_seq(Elements { gen: self, left: fields.len() })
    }

    fn deserialize_enum<V: Visitor<'de>>(
        self,
        _: &'static str,
        variants: &'static [&'static str],
        v: V,
    ) -> Result<V::Value, GenError> {
        let index = self.below(variants.len() as u64) as u32;
        v.visit_enum(Variant { gen: self, index })
    }

    fn deserialize_identifier<V: Visitor<'de>>(self, v: V) -> Result<V::Value, GenError> {
        v.visit_u32(self.below(8) as u32)
    }

    fn deserialize_ignored_any<V: Visitor<'de>>(self, v: V) -> Result<V::Value, GenError> {
        v.visit_unit()
    }

    fn is_human_readable(&self) -> bool {
        false
    }
}

struct Elements<'a> {
    gen: &'a mut Gen,
    left: usize,
}

impl<'de> de::SeqAccess<'de> for Elements<'_> {
    type Error = GenError;

    fn next_element_seed<T: DeserializeSeed<'de>>(&mut self, seed: T) -> Result<Option<T::Value>, GenError> {
        if self.left == 0 {
            return Ok(None);
        }
        self.left -= 1;
        seed.deserialize(&mut *self.gen).map(Some)
    }

    fn size_hint(&self) -> Option<usize> {
        Some(self.left)
    }
}

impl<'de> de::MapAccess<'de> for Elements<'_> {
    type Error = GenError;

    fn next_key_seed<K: DeserializeSeed<'de>>(&mut self, seed: K) -> Result<Option<K::Value>, GenError> {
        if self.left == 0 {
            return Ok(None);
        }
        self.left -= 1;
        seed.deserialize(&mut *self.gen).map(Some)
    }

    fn next_value_seed<T: DeserializeSeed<'de>>(&mut self, seed: T) -> Result<T::Value, GenError> {
        seed.deserialize(&mut *self.gen)
    }
}

struct Variant<'a> {
    gen: &'a mut Gen,
    index: u32,
}

impl<'de, 'a> de::EnumAccess<'de> for Variant<'a> {
    type Error = GenError;
    type Variant = &'a mut Gen;

    fn variant_seed<T: DeserializeSeed<'de>>(self, seed: T) -> Result<(T::Value, &'a mut Gen), GenError> {
        let index: de::value::U32Deserializer<GenError> = self.index.into_deserializer();
        Ok((seed.deserialize(index)?, self.gen))
    }
}

impl<'de> de::VariantAccess<'de> for &mut Gen {
    type Error = GenError;

    fn unit_variant(self) -> Result<(), GenError> {
        Ok(())
    }

    fn newtype_variant_seed<T: DeserializeSeed<'de>>(self, seed: T) -> Result<T::Value, GenError> {
        seed.deserialize(self)
    }

    fn tuple_variant<V: Visitor<'de>>(self, len: usize, v: V) -> Result<V::Value, GenError> {
        v.visit_seq(Elements { gen: self, left: len })
    }

    fn struct_variant<V: Visitor<'de>>(self, fields: &'static [&'static str], v: V) -> Result<V::Value, GenError> {
        v.visit_seq(Elements { gen: self, left: fields.len() })
    }
}

// ---------------------------------------------------------------------------------------------
// Helpers shared by the targets.

/// `msg` as one complete frame, delimiter included.
pub fn frame<T: Serialize>(msg: &T) -> Vec<u8> {
    let mut out = [0u8; MAX_FRAME];
    let n = encode_frame(msg, &mut out).expect("every message fits one frame");
    out[..n].to_vec()
}

/// The body of a frame (delimiter excluded) carrying `payload` with a correct CRC, whatever the
/// payload is: the way to reach the message decoder past the CRC.
pub fn frame_body_of_payload(payload: &[u8]) -> Vec<u8> {
    let mut raw = payload.to_vec();
    raw.extend_from_slice(&FRAME_CRC.checksum(payload).to_le_bytes());
    let mut body = vec![0u8; cobs::max_encoding_length(raw.len())];
    let n = cobs::encode(&raw, &mut body);
    body.truncate(n);
    body
}

/// What a receiver must make of `stream`: for every delimiter that ends a non-empty run of bytes,
/// the position of that delimiter and the result — [`FrameError::DecodeOverflow`] for a run longer
/// than [`MAX_FRAME`], else [`decode_frame`] of the run. Bytes after the last delimiter are an
/// incomplete frame and give nothing. This is the accumulator's contract, written as plainly as
/// possible to check the accumulator against.
pub fn reference_frames<T: DeserializeOwned>(stream: &[u8]) -> Received<T> {
    let mut out = Vec::new();
    let mut start = 0;
    for (i, &b) in stream.iter().enumerate() {
        if b != 0 {
            continue;
        }
        let run = &stream[start..i];
        if run.len() > MAX_FRAME {
            out.push((i, Err(FrameError::DecodeOverflow)));
        } else if !run.is_empty() {
            out.push((i, decode_frame(&mut run.to_vec())));
        }
        start = i + 1;
    }
    out
}

/// Lower-case hex of `bytes`.
pub fn hex(bytes: &[u8]) -> String {
    bytes.iter().map(|b| format!("{b:02x}")).collect()
}

/// A case that failed: enough to see why and to replay it.
#[derive(Debug, Clone)]
pub struct Failure {
    /// The target's name.
    pub target: &'static str,
    /// The run's seed.
    pub seed: u64,
    /// The failing case's index (replay with `--seed`, `--start` and `--cases 1`).
    pub case: u64,
    /// What went wrong (a panic's message, or the property that did not hold).
    pub what: String,
    /// The failing input (the bytes fed to the decoder).
    pub input: Vec<u8>,
}

impl Display for Failure {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        writeln!(
            f,
            "fuzz target `{}` failed at case {} of seed {:#x}: {}",
            self.target, self.case, self.seed, self.what
        )?;
        writeln!(f, "input ({} bytes): {}", self.input.len(), hex(&self.input))?;
        write!(
            f,
            "replay: cargo xtask fuzz --target {} --seed {:#x} --start {} --cases 1",
            self.target, self.seed, self.case
        )
    }
}

impl std::error::Error for Failure {}

/// A fuzz target: a generator of inputs and the properties every input must satisfy.
pub trait Target {
    /// One generated input.
    type Input;
    /// The target's name (as `cargo xtask fuzz --target` spells it).
    fn name(&self) -> &'static str;
    /// Generates one input.
    fn generate(&mut self, gen: &mut Gen) -> Self::Input;
    /// The bytes of an input, as a failure report shows them.
    fn bytes(&self, input: &Self::Input) -> Vec<u8>;
    /// Checks one input: `Err` says which property did not hold. A panic is a failure too.
    fn check(&mut self, input: &Self::Input) -> Result<(), String>;
}

/// Runs cases `start..start + cases` of `target` with `seed`; stops at the first failure (a
/// property that did not hold, or a panic). `progress` is called every 4096 cases with the number
/// done so far.
pub fn run<T: Target>(
    target: &mut T,
    seed: u64,
    start: u64,
    cases: u64,
    mut progress: impl FnMut(u64),
) -> Result<(), Box<Failure>> {
    for case in start..start + cases {
        let mut gen = Gen::for_case(seed, case);
        let input = target.generate(&mut gen);
        let what = match catch_unwind(AssertUnwindSafe(|| target.check(&input))) {
            Ok(Ok(())) => None,
            Ok(Err(why)) => Some(why),
            Err(panic) => Some(format!(
                "panic: {}",
                panic
                    .downcast_ref::<&str>()
                    .map(|s| s.to_string())
                    .or_else(|| panic.downcast_ref::<String>().cloned())
                    .unwrap_or_default()
            )),
        };
        if let Some(what) = what {
            return Err(Box::new(Failure { target: target.name(), seed, case, what, input: target.bytes(&input) }));
        }
        if (case - start + 1).is_multiple_of(4096) {
            progress(case - start + 1);
        }
    }
    progress(cases);
    Ok(())
}

/// A message of either direction.
#[derive(Debug, Clone, PartialEq)]
pub enum Message {
    /// Host → board.
    Request(Request),
    /// Board → host.
    Response(Response),
}

impl Message {
    fn random(gen: &mut Gen) -> Self {
        if gen.ratio(1, 2) {
            Message::Request(gen.value())
        } else {
            Message::Response(gen.value())
        }
    }

    fn frame(&self) -> Vec<u8> {
        match self {
            Message::Request(m) => frame(m),
            Message::Response(m) => frame(m),
        }
    }

    fn payload(&self) -> Vec<u8> {
        let mut buf = [0u8; MAX_PAYLOAD];
        let n = match self {
            Message::Request(m) => postcard::to_slice(m, &mut buf),
            Message::Response(m) => postcard::to_slice(m, &mut buf),
        }
        .expect("every message fits MAX_PAYLOAD")
        .len();
        buf[..n].to_vec()
    }
}

// ---------------------------------------------------------------------------------------------
// Target `frames`: the accumulator and the frame decoder on streams.

/// A byte stream for the frame layer and the frames in it that must decode.
#[derive(Debug, Clone)]
pub struct StreamInput {
    /// The bytes, in order.
    pub stream: Vec<u8>,
    /// Each intact frame that follows a delimiter (or opens the stream): the position of its
    /// own delimiter and its message. The stream always ends with one.
    pub intact: Vec<(usize, Message)>,
}

/// Builds a stream: valid frames, damaged frames and garbage, in any order, with or without
/// delimiters between them, then a delimiter and one valid frame (the resynchronisation check).
pub fn stream(gen: &mut Gen, mut message: impl FnMut(&mut Gen) -> Message) -> StreamInput {
    let mut s = StreamInput { stream: Vec::new(), intact: Vec::new() };
    let parts = gen.below(7);
    for i in 0..=parts {
        let last = i == parts;
        if last {
            s.stream.push(0);
        }
        match if last { 0 } else { gen.below(3) } {
            0 => {
                let m = message(gen);
                let after_delimiter = s.stream.last().is_none_or(|&b| b == 0);
                s.stream.extend(m.frame());
                if after_delimiter {
                    s.intact.push((s.stream.len() - 1, m));
                }
            }
            1 => {
                let mut f = message(gen).frame();
                gen.mutate(&mut f);
                s.stream.extend(f);
            }
            _ => {
                let g = gen.garbage();
                s.stream.extend(g);
            }
        }
        if !last && gen.ratio(1, 3) {
            s.stream.push(0);
        }
    }
    s
}

/// Target `frames`: [`FrameAccumulator::push`] (as [`Request`] and as [`Response`]) on streams
/// of valid, damaged and garbage frames.
///
/// Properties: no panic; the accumulator holds at most [`MAX_FRAME`] bytes and nothing after a
/// delimiter; it reports exactly what [`reference_frames`] says for each delimiter (an overlong run
/// as [`FrameError::DecodeOverflow`], an empty one as nothing); every intact frame that follows a
/// delimiter decodes to its message, whatever came before.
#[derive(Default)]
pub struct Frames;

impl Target for Frames {
    type Input = StreamInput;

    fn name(&self) -> &'static str {
        "frames"
    }

    fn generate(&mut self, gen: &mut Gen) -> StreamInput {
        stream(gen, Message::random)
    }

    fn bytes(&self, input: &StreamInput) -> Vec<u8> {
        input.stream.clone()
    }

    fn check(&mut self, input: &StreamInput) -> Result<(), String> {
        let requests = accumulate::<Request>(&input.stream)?;
        let responses = accumulate::<Response>(&input.stream)?;
        for (at, m) in &input.intact {
            let got = match m {
                Message::Request(want) => requests.iter().find(|(i, _)| i == at).map(|(_, r)| r == &Ok(want.clone())),
                Message::Response(want) => responses.iter().find(|(i, _)| i == at).map(|(_, r)| r == &Ok(want.clone())),
            };
            if got != Some(true) {
                return Err(format!("the intact frame ending at byte {at} did not decode to {m:?}"));
            }
        }
        Ok(())
    }
}

/// Each delimiter that ends a frame, by position, and what the receiver made of the frame.
pub type Received<T> = Vec<(usize, Result<T, FrameError>)>;

/// Feeds `stream` to a fresh accumulator byte by byte and checks it against [`reference_frames`].
fn accumulate<T: DeserializeOwned + PartialEq + Debug>(stream: &[u8]) -> Result<Received<T>, String> {
    let mut acc = FrameAccumulator::new();
    let mut got = Vec::new();
    for (i, &b) in stream.iter().enumerate() {
        if let Some(r) = acc.push::<T>(b) {
            got.push((i, r));
        }
        if acc.buffered() > MAX_FRAME {
            return Err(format!("the accumulator holds {} bytes after byte {i}", acc.buffered()));
        }
        if b == 0 && acc.is_mid_frame() {
            return Err(format!("the accumulator is mid-frame right after the delimiter at byte {i}"));
        }
    }
    let want = reference_frames::<T>(stream);
    if got != want {
        let n = got.iter().zip(&want).take_while(|(g, w)| g == w).count();
        return Err(format!(
            "as {}: the accumulator gave {:?} where the reference gives {:?} (result {n})",
            core::any::type_name::<T>(),
            got.get(n),
            want.get(n)
        ));
    }
    Ok(got)
}

// ---------------------------------------------------------------------------------------------
// Target `messages`: the message decoder past the CRC, and round trips.

/// A postcard payload, and the message it encodes when it is the encoding of one.
#[derive(Debug, Clone)]
pub struct PayloadInput {
    /// The payload (the frame's CRC is made to match it).
    pub payload: Vec<u8>,
    /// The message of which `payload` is the encoding, if it is one.
    pub encodes: Option<Message>,
}

/// Target `messages`: [`decode_frame`] as [`Request`] and as [`Response`] on frames with a
/// correct CRC around random payloads, damaged encodings and valid encodings.
///
/// Properties: no panic; a CRC-valid frame is never refused for its framing (only as
/// [`FrameError::DecodeMessage`]); a decoded message re-encodes to at most the bytes it was read
/// from, decodes again to itself, and fits one frame; a random valid message survives
/// encode → decode (directly and through the accumulator) equal.
#[derive(Default)]
pub struct Messages;

impl Target for Messages {
    type Input = PayloadInput;

    fn name(&self) -> &'static str {
        "messages"
    }

    fn generate(&mut self, gen: &mut Gen) -> PayloadInput {
        match gen.below(3) {
            0 => {
                let m = Message::random(gen);
                PayloadInput { payload: m.payload(), encodes: Some(m) }
            }
            1 => {
                let mut payload = Message::random(gen).payload();
                gen.mutate(&mut payload);
                PayloadInput { payload, encodes: None }
            }
            _ => {
                let len = if gen.ratio(1, 8) { gen.below(MAX_PAYLOAD as u64 + 64) as usize } else { gen.length() };
                let zeros = gen.below(256);
                PayloadInput { payload: gen.bytes(len, zeros), encodes: None }
            }
        }
    }

    fn bytes(&self, input: &PayloadInput) -> Vec<u8> {
        input.payload.clone()
    }

    fn check(&mut self, input: &PayloadInput) -> Result<(), String> {
        let want_request = match &input.encodes {
            Some(Message::Request(m)) => Some(m),
            _ => None,
        };
        let want_response = match &input.encodes {
            Some(Message::Response(m)) => Some(m),
            _ => None,
        };
        decodes_as(&input.payload, want_request)?;
        decodes_as(&input.payload, want_response)
    }
}

fn decodes_as<T>(payload: &[u8], want: Option<&T>) -> Result<(), String>
where
    T: DeserializeOwned + Serialize + PartialEq + Debug,
{
    let name = core::any::type_name::<T>();
    let body = frame_body_of_payload(payload);
    let got = decode_frame::<T>(&mut body.clone());
    match &got {
        Ok(m) => {
            let mut buf = vec![0u8; payload.len().max(MAX_PAYLOAD)];
            let again = postcard::to_slice(m, &mut buf).map_err(|e| format!("{m:?} does not re-encode: {e}"))?;
            if again.len() > payload.len() {
                return Err(format!("{m:?} re-encodes to {} bytes, read from {}", again.len(), payload.len()));
            }
            let back: Result<T, _> = postcard::from_bytes(again);
            if back.as_ref().ok() != Some(m) {
                return Err(format!("{m:?} re-encoded decodes to {back:?}"));
            }
            let mut out = [0u8; MAX_FRAME];
            encode_frame(m, &mut out).map_err(|e| format!("{m:?}, decoded from a frame, does not fit one: {e}"))?;
        }
        Err(FrameError::DecodeMessage) => {}
        Err(e) => return Err(format!("as {name}: a frame with a correct CRC was refused: {e}")),
    }
    if let Some(want) = want {
        if got.as_ref() != Ok(want) {
            return Err(format!("as {name}: the encoding of {want:?} decoded to {got:?}"));
        }
        let mut acc = FrameAccumulator::new();
        let through: Vec<_> = frame(want).iter().filter_map(|&b| acc.push::<T>(b)).collect();
        if through.len() != 1 || through[0].as_ref() != Ok(want) {
            return Err(format!("as {name}: {want:?} came through the accumulator as {through:?}"));
        }
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Short runs of both targets in the normal suite (`cargo xtask fuzz` runs millions).
    #[test]
    fn frames_target_short_run() {
        run(&mut Frames, 0x0c0b5, 0, 20_000, |_| {}).unwrap_or_else(|f| panic!("{f}"));
    }

    #[test]
    fn messages_target_short_run() {
        run(&mut Messages, 0xc4c32, 0, 30_000, |_| {}).unwrap_or_else(|f| panic!("{f}"));
    }

    #[test]
    fn generator_reaches_every_variant_and_the_edges() {
        // The generator is only as good as what it reaches: every variant of both enums, empty
        // and long collections, and the extreme integers, within a few thousand draws.
        let mut gen = Gen::new(1);
        let (mut requests, mut responses) = (std::collections::BTreeSet::new(), std::collections::BTreeSet::new());
        let (mut max_seq, mut longest) = (false, 0);
        for _ in 0..5000 {
            let r: Request = gen.value();
            requests.insert(format!("{r:?}").split([' ', '(', '{']).next().unwrap().to_string());
            let s: Response = gen.value();
            responses.insert(format!("{s:?}").split([' ', '(', '{']).next().unwrap().to_string());
            if let Response::Samples { run, codes, .. } = &s {
                max_seq |= *run == u32::MAX;
                longest = longest.max(codes.len());
            }
        }
        assert_eq!(requests.len(), 7, "{requests:?}");
        assert_eq!(responses.len(), 9, "{responses:?}");
        assert!(max_seq && longest > 32, "edges reached: run MAX {max_seq}, longest samples {longest}");
    }

    fn done(seq: u16, conversions: u32) -> crate::RunReport {
        crate::RunReport { seq, conversions, ..Default::default() }
    }

    #[test]
    fn the_targets_catch_what_they_claim_to() {
        // A target that cannot fail proves nothing: each check refuses a broken input.
        let mut gen = Gen::new(2);
        let m = Message::Response(Response::Done(done(1, 2)));
        let mut bad = StreamInput { stream: m.frame(), intact: vec![] };
        bad.intact.push((bad.stream.len() - 1, Message::Response(Response::Done(done(1, 3)))));
        assert!(Frames.check(&bad).is_err(), "a frame that decodes to another message");
        let wrong = PayloadInput { payload: m.payload(), encodes: Some(Message::Response(Response::Done(done(9, 2)))) };
        assert!(Messages.check(&wrong).is_err(), "a payload that encodes another message");
        let ok = Frames.generate(&mut gen);
        assert!(Frames.check(&ok).is_ok());
        // And the runner reports a panic as a failure with the input.
        struct Panics;
        impl Target for Panics {
            type Input = u8;
            fn name(&self) -> &'static str {
                "panics"
            }
            fn generate(&mut self, gen: &mut Gen) -> u8 {
                gen.next_u64() as u8
            }
            fn bytes(&self, input: &u8) -> Vec<u8> {
                vec![*input]
            }
            fn check(&mut self, input: &u8) -> Result<(), String> {
                assert!(*input < 200, "byte {input}");
                Ok(())
            }
        }
        let f = run(&mut Panics, 3, 0, 1000, |_| {}).unwrap_err();
        assert!(f.what.contains("panic") && f.input[0] >= 200, "{f}");
        assert_eq!(Panics.generate(&mut Gen::for_case(3, f.case)), f.input[0], "the case replays on its own");
    }

    #[test]
    fn accumulator_overflow_is_bounded_and_the_next_frame_decodes() {
        // Regression-style check of the promise the fuzz targets lean on: however long the run,
        // the accumulator holds MAX_FRAME bytes at most and the frame after the delimiter decodes.
        let mut acc = FrameAccumulator::new();
        for _ in 0..10 * MAX_FRAME {
            assert!(acc.push::<Request>(0x7f).is_none());
            assert!(acc.buffered() <= MAX_FRAME);
        }
        assert_eq!(acc.push::<Request>(0), Some(Err(FrameError::DecodeOverflow)));
        let got: Vec<_> = frame(&Request::Describe { seq: 0 }).iter().filter_map(|&b| acc.push::<Request>(b)).collect();
        assert_eq!(got, [Ok(Request::Describe { seq: 0 })]);
    }
}
