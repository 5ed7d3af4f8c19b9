//! Requests, responses and the board's front-end description.
//!
//! Everything on the wire is an integer: the target side never needs floating point. Times are
//! picoseconds or nanoseconds, capacitances attofarads, resistances milliohms, voltages
//! microvolts, as each field name says.

use heapless::{String, Vec};
use serde::{Deserialize, Serialize};

/// Most channels a board can describe.
pub const MAX_CHANNELS: usize = 24;
/// Most selectable sample times.
pub const MAX_SAMPLE_TIMES: usize = 16;
/// Most precharge sources.
pub const MAX_PRECHARGES: usize = 4;
/// Most periods in one period sweep.
pub const MAX_PERIODS: usize = 12;
/// Most raw codes in one [`Response::Samples`] message.
pub const SAMPLES_PER_MESSAGE: usize = 48;
/// Most raw codes one noise record may ask for (the target buffers them).
pub const MAX_RAW_SAMPLES: u16 = 1024;
/// Most aggregate cells one experiment produces.
pub const MAX_CELLS: usize = 32;
/// Longest burst of back-to-back conversions in a repeat burst.
pub const MAX_BURST: u8 = 32;
/// Most conversions one experiment may take (keeps every run bounded in time).
pub const MAX_CONVERSIONS: u32 = 65_536;
/// Longest wait the engine accepts in any one place (4 s), in nanoseconds.
pub const MAX_WAIT_NS: u32 = 4_000_000_000;
/// Longest nominal duration of one experiment (2 minutes), in picoseconds.
pub const MAX_RUN_PS: u64 = 120_000_000_000_000;

/// Host → board.
///
/// Every request carries a sequence number `seq` that its answer echoes (protocol 3), so the
/// host can drop an answer that arrives late for an earlier request, or twice. The host
/// numbers each try of a request anew.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub enum Request {
    /// First exchange: the host's protocol version. Answered by [`Response::Hello`].
    ///
    /// `protocol` stays the first field of variant 0 in every version, so a board of any
    /// version can read which version the host speaks and answer in words.
    Hello {
        /// [`crate::PROTOCOL_VERSION`] of the host.
        protocol: u16,
        /// Echoed in the answer.
        seq: u16,
    },
    /// Asks for the electrical description. Answered by [`Response::FrontEnd`].
    Describe {
        /// Echoed in the answer.
        seq: u16,
    },
    /// Asks for one channel's description. Answered by [`Response::Channel`].
    Channel {
        /// Echoed in the answer.
        seq: u16,
        /// Position in the board's channel list (not the hardware channel number).
        position: u8,
    },
    /// Runs one experiment. Answered by its data chunks ([`Response::Cell`],
    /// [`Response::Samples`], tagged with the board's run number), then [`Response::Done`]
    /// (which pairs `seq` with that run number) or [`Response::Error`].
    Run {
        /// Echoed in the run's [`RunReport`].
        seq: u16,
        /// What to run.
        experiment: Experiment,
    },
    /// One part of a simulated set-up (only simulated boards accept it; others answer
    /// [`ErrorKind::Unsupported`]). Answered by [`Response::SimLoaded`]. A [`SimPart::Board`]
    /// starts a new set-up; once all its pins have arrived the board is rebuilt and describes
    /// the new set-up from then on (its virtual clock starts again at zero).
    Simulate {
        /// Echoed in the answer.
        seq: u16,
        /// The part.
        part: SimPart,
    },
    /// Asks again for one chunk of the last run's answer, from the board's buffer: nothing is
    /// converted. `chunk` below [`RunReport::chunks`] is a data chunk (cells first, then the
    /// raw-sample messages), [`SUMMARY_CHUNK`] the run's [`Response::Done`]. Answered by that
    /// message, or by [`ErrorKind::Gone`] when the buffer holds another run.
    Resend {
        /// The `seq` of the [`Request::Run`] whose answer is wanted.
        seq: u16,
        /// The board's run number from its [`RunReport`]; 0: the last run of request `seq`.
        run: u32,
        /// Which chunk.
        chunk: u16,
    },
    /// Asks for the board's log of the runs it started from run number `since` on (the last
    /// [`RUN_LOG`] at most). Answered by [`Response::Runs`].
    Runs {
        /// Echoed in the answer.
        seq: u16,
        /// First run number wanted.
        since: u32,
    },
}

/// The [`Request::Resend`] chunk that stands for the run's [`Response::Done`].
pub const SUMMARY_CHUNK: u16 = u16::MAX;
/// Runs the board remembers for [`Request::Runs`].
pub const RUN_LOG: usize = 4;

/// What the board actually ran for one experiment, by its own count and clock.
///
/// The run number counts every experiment the board started (from 1); the clock is the
/// board's own: virtual picoseconds on a simulated board, a monotonic timer on a real one, or
/// (on a board without one) the nominal duration of everything it has run. The host builds
/// each pin's timeline from these reports alone.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize, Deserialize)]
pub struct RunReport {
    /// The `seq` of the [`Request::Run`] that started it.
    pub seq: u16,
    /// The board's run number.
    pub run: u32,
    /// Board clock at the start of the run (before its settle time), ps.
    pub start_ps: u64,
    /// Board clock at its end, ps.
    pub end_ps: u64,
    /// Conversions performed, precharge conversions included.
    pub conversions: u32,
    /// Data chunks of its answer (cells, then raw-sample messages).
    pub chunks: u16,
}

/// Board → host.
///
/// Variant order and the first field of [`Response::Hello`] and [`Response::Error`] are kept
/// across versions, so a host can tell a board of another version in words.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub enum Response {
    /// Answer to [`Request::Hello`].
    Hello {
        /// The board's [`crate::PROTOCOL_VERSION`] (first field in every version).
        protocol: u16,
        /// The request's `seq`.
        seq: u16,
        /// Firmware version string.
        firmware: String<16>,
        /// Board name (profile name).
        board: String<24>,
        /// Unit identifier (serial number or chip unique id folded to 64 bits).
        unit_id: u64,
        /// How many channels [`Request::Channel`] can describe.
        channels: u8,
        /// Runs started since the board booted (the last run number).
        runs: u32,
    },
    /// Answer to [`Request::Describe`].
    FrontEnd {
        /// The request's `seq`.
        seq: u16,
        /// The description.
        front_end: FrontEnd,
    },
    /// Answer to [`Request::Channel`].
    Channel {
        /// The request's `seq`.
        seq: u16,
        /// The channel.
        info: ChannelInfo,
    },
    /// One aggregate cell of a run: data chunk `index`.
    Cell {
        /// The board's run number (see [`RunReport`]).
        run: u32,
        /// Cell index (meaning per experiment, see [`crate::sequence`]).
        index: u16,
        /// The aggregate.
        agg: Aggregate,
    },
    /// Raw codes of a noise record, in order: data chunk `cells + offset / SAMPLES_PER_MESSAGE`.
    Samples {
        /// The board's run number.
        run: u32,
        /// Index of the first code in this message.
        offset: u16,
        /// The codes.
        codes: Vec<u16, SAMPLES_PER_MESSAGE>,
    },
    /// The run finished and every chunk has been sent: what the board ran.
    Done(RunReport),
    /// Answer to [`Request::Simulate`].
    SimLoaded {
        /// The request's `seq`.
        seq: u16,
        /// Pins of the set-up still to come; 0 means the new set-up is live.
        pending: u8,
    },
    /// The request was refused or failed; nothing more follows for it.
    Error {
        /// The request's `seq` (0 for a frame that could not be decoded).
        seq: u16,
        /// What went wrong.
        kind: ErrorKind,
    },
    /// Answer to [`Request::Runs`]: the runs logged from `since` on, oldest first.
    Runs {
        /// The request's `seq`.
        seq: u16,
        /// The runs.
        runs: Vec<RunReport, RUN_LOG>,
    },
}

impl Response {
    /// The request `seq` this answer echoes; `None` for data chunks (tagged by run number).
    pub fn seq(&self) -> Option<u16> {
        match self {
            Response::Hello { seq, .. }
            | Response::FrontEnd { seq, .. }
            | Response::Channel { seq, .. }
            | Response::SimLoaded { seq, .. }
            | Response::Error { seq, .. }
            | Response::Runs { seq, .. } => Some(*seq),
            Response::Done(r) => Some(r.seq),
            Response::Cell { .. } | Response::Samples { .. } => None,
        }
    }
}

/// The start of a [`Response::Hello`] of any protocol version: enough to say which version a
/// board speaks when the rest of its hello is not of this version.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub enum HelloHead {
    /// Variant 0, first field.
    Hello {
        /// The board's protocol version.
        protocol: u16,
    },
}

/// Why the board refused or abandoned a request.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[non_exhaustive]
pub enum ErrorKind {
    /// A channel number the board does not have.
    BadChannel,
    /// A sample-time index past the table.
    BadSampleIndex,
    /// The experiment would take too many conversions, cells or samples, or too long a wait.
    TooLarge,
    /// The experiment has nothing to do (empty list, zero repeats).
    Empty,
    /// The channel may not be driven or used as a precharge source on this board.
    NotAllowed,
    /// The board cannot do this (e.g. no pull resistors).
    Unsupported,
    /// The converter itself failed.
    Converter,
    /// The request frame could not be decoded.
    BadFrame,
    /// Position past the channel list.
    BadPosition,
    /// The host speaks another protocol version.
    Version,
    /// A simulated set-up with values the simulator cannot use, or a pin without its board part.
    BadSetup,
    /// [`Request::Resend`] for a run the board no longer buffers (or never ran).
    Gone,
}

impl core::fmt::Display for ErrorKind {
    fn fmt(&self, f: &mut core::fmt::Formatter<'_>) -> core::fmt::Result {
        f.write_str(match self {
            ErrorKind::BadChannel => "no such channel on this board",
            ErrorKind::BadSampleIndex => "sample-time index past the board's table",
            ErrorKind::TooLarge => "experiment too large (conversions, cells, samples or wait)",
            ErrorKind::Empty => "experiment has nothing to do",
            ErrorKind::NotAllowed => "channel not declared safe for this use",
            ErrorKind::Unsupported => "the board cannot do this",
            ErrorKind::Converter => "the converter failed",
            ErrorKind::BadFrame => "the board could not decode the request frame",
            ErrorKind::BadPosition => "no channel at that position",
            ErrorKind::Version => "protocol version not supported by the board",
            ErrorKind::BadSetup => "simulated set-up out of range or out of order (send the board part first)",
            ErrorKind::Gone => "the board no longer holds that run's answer",
        })
    }
}

/// Most pins a simulated set-up can wire.
pub const MAX_SIM_PINS: usize = 16;

/// A simulated set-up, sent in parts so each fits one frame: the board, then each pin.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub enum SimPart {
    /// The board profile and how many pins follow.
    Board(SimBoard),
    /// One pin.
    Pin(SimPin),
}

/// The simulated board's profile, in integers (resolution: the unit in each field's name).
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct SimBoard {
    /// Free-text name of the set-up.
    pub name: String<48>,
    /// Seed of the simulator's noise generator.
    pub seed: u64,
    /// Resolution, bits.
    pub bits: u8,
    /// Full-scale reference, µV.
    pub vref_microvolts: u32,
    /// Nominal hold capacitance, aF.
    pub hold_attofarads: u32,
    /// ±2σ relative uncertainty of the hold capacitance, ppm.
    pub hold_tolerance_ppm: u32,
    /// Nominal switch + multiplexer resistance, mΩ.
    pub switch_milliohms: u32,
    /// ±2σ relative uncertainty of the switch resistance, ppm.
    pub switch_tolerance_ppm: u32,
    /// ADC clock, mHz.
    pub adc_clock_millihertz: u64,
    /// Selectable sample times, thousandths of an ADC cycle, ascending.
    pub sample_millicycles: Vec<u32, MAX_SAMPLE_TIMES>,
    /// Conversion time, thousandths of an ADC cycle.
    pub conversion_millicycles: u32,
    /// Datasheet ADC noise, milli-LSB rms.
    pub noise_millilsb: u32,
    /// Input leakage bound, fA.
    pub leakage_femtoamps: u32,
    /// The simulated unit's real hold capacitance as a multiple of the declared one, ppm
    /// (1,000,000: the unit is as its datasheet says, within its tolerance).
    pub unit_hold_ppm: u32,
    /// The same for the switch resistance, ppm.
    pub unit_switch_ppm: u32,
    /// Nominal pull resistance, mΩ (0: the board has no pulls); the pulls go to the reference
    /// voltage, to ground and to half the reference.
    pub pull_milliohms: u64,
    /// ±2σ relative uncertainty of the pull resistance, ppm (the unit's pulls differ within it).
    pub pull_tolerance_ppm: u32,
    /// Number of [`SimPart::Pin`] parts that follow.
    pub pins: u8,
}

/// What drives a simulated pin.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub enum SimSource {
    /// A Thevenin source.
    Driven {
        /// Open-circuit voltage, µV.
        microvolts: i32,
        /// Source resistance, mΩ.
        milliohms: u64,
    },
    /// Nothing connected.
    Floating,
}

/// One simulated pin.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct SimPin {
    /// Position in the set-up's pin list (0-based): sending a part twice is harmless.
    pub index: u8,
    /// ADC channel number.
    pub channel: u8,
    /// Free-text label.
    pub label: String<24>,
    /// What drives it.
    pub source: SimSource,
    /// Pin + trace + filter capacitance, aF.
    pub node_attofarads: u64,
    /// Mains pickup amplitude, µV.
    pub hum_microvolts: u32,
    /// Mains frequency, mHz.
    pub hum_millihertz: u32,
    /// White noise at the source, µV rms.
    pub noise_microvolts: u32,
    /// The board may pull this pin for a pull test.
    pub pull: bool,
}

impl SimPart {
    /// The largest parts, for frame-size tests.
    #[doc(hidden)]
    pub fn largest_for_tests() -> [Self; 2] {
        let mut sample_millicycles = Vec::new();
        while sample_millicycles.push(u32::MAX).is_ok() {}
        let mut name = String::new();
        while name.push('\u{7ff}').is_ok() {}
        let mut label = String::new();
        while label.push('\u{7ff}').is_ok() {}
        [
            SimPart::Board(SimBoard {
                name,
                seed: u64::MAX,
                bits: u8::MAX,
                vref_microvolts: u32::MAX,
                hold_attofarads: u32::MAX,
                hold_tolerance_ppm: u32::MAX,
                switch_milliohms: u32::MAX,
                switch_tolerance_ppm: u32::MAX,
                adc_clock_millihertz: u64::MAX,
                sample_millicycles,
                conversion_millicycles: u32::MAX,
                noise_millilsb: u32::MAX,
                leakage_femtoamps: u32::MAX,
                unit_hold_ppm: u32::MAX,
                unit_switch_ppm: u32::MAX,
                pull_milliohms: u64::MAX,
                pull_tolerance_ppm: u32::MAX,
                pins: u8::MAX,
            }),
            SimPart::Pin(SimPin {
                index: u8::MAX,
                channel: u8::MAX,
                label,
                source: SimSource::Driven { microvolts: i32::MIN, milliohms: u64::MAX },
                node_attofarads: u64::MAX,
                hum_microvolts: u32::MAX,
                hum_millihertz: u32::MAX,
                noise_microvolts: u32::MAX,
                pull: true,
            }),
        ]
    }
}

/// Integer aggregate of the codes that fell in one cell.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize, Deserialize)]
pub struct Aggregate {
    /// Number of codes.
    pub count: u32,
    /// Sum of codes.
    pub sum: u64,
    /// Sum of squared codes.
    pub sum_sq: u64,
    /// Smallest code.
    pub min: u16,
    /// Largest code.
    pub max: u16,
}

impl Aggregate {
    /// Adds one code.
    pub fn add(&mut self, code: u16) {
        if self.count == 0 {
            self.min = code;
            self.max = code;
        } else {
            self.min = self.min.min(code);
            self.max = self.max.max(code);
        }
        self.count += 1;
        self.sum += u64::from(code);
        self.sum_sq += u64::from(code) * u64::from(code);
    }
}

/// The board's analog front end, as the host needs it to model the sampling network.
///
/// Values come from the board profile (datasheet or calibration); `*_tolerance_ppm` is the
/// profile's ±2σ uncertainty of that value, used as a prior by the fit.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct FrontEnd {
    /// Resolution in bits.
    pub bits: u8,
    /// Reference (full-scale) voltage, µV.
    pub vref_microvolts: u32,
    /// Selectable sample (acquisition) times, ps, ascending; the sample index is a position here.
    pub sample_ps: Vec<u32, MAX_SAMPLE_TIMES>,
    /// Conversion time after the sampling switch opens, ps.
    pub conversion_ps: u32,
    /// Hold (sampling) capacitance, aF.
    pub hold_attofarads: u32,
    /// ±2σ uncertainty of the hold capacitance, ppm.
    pub hold_tolerance_ppm: u32,
    /// Multiplexer + sampling-switch resistance, mΩ.
    pub switch_milliohms: u32,
    /// ±2σ uncertainty of the switch resistance, ppm.
    pub switch_tolerance_ppm: u32,
    /// ADC noise referred to the input, milli-LSB rms (quantization excluded).
    pub noise_millilsb: u32,
    /// Input leakage bound, pA.
    pub leakage_picoamps: u32,
    /// Pull resistance for pull tests, mΩ; 0 when the board has no usable pulls.
    pub pull_milliohms: u32,
    /// ±2σ relative uncertainty of the pull resistance, ppm.
    pub pull_tolerance_ppm: u32,
    /// The level the pull-up goes to, µV (pull-down: ground; half: half of this).
    pub pull_supply_microvolts: u32,
    /// Channels that may be converted to precharge the hold capacitor to a known level.
    pub precharges: Vec<Precharge, MAX_PRECHARGES>,
}

/// A channel that sets the hold capacitor to a known level when converted.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub struct Precharge {
    /// Hardware channel number.
    pub channel: u8,
    /// Nominal level, µV (the host measures the real one).
    pub nominal_microvolts: u32,
}

/// What a channel is.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub enum ChannelRole {
    /// An external pin to survey.
    Pin,
    /// An internal or tied channel used as a precharge source.
    Precharge,
    /// Any other internal channel (temperature sensor, supply divider…).
    Internal,
}

/// One channel of the board.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct ChannelInfo {
    /// Hardware channel number (what the experiments name).
    pub channel: u8,
    /// Free-text label from the board profile.
    pub label: String<24>,
    /// What the channel is.
    pub role: ChannelRole,
    /// The board may connect its pull resistors to this pin for a pull test: opted in per pin
    /// in the board's profile, never by default.
    pub pull: bool,
    /// The board may drive this pin (as a precharge source or a test level): opted in per pin
    /// in the board's profile, never by default.
    pub drive: bool,
}

/// One experiment: a deterministic sequence of conversions (see [`crate::sequence`]).
///
/// Every experiment starts with `settle_ns` of idle time so the nodes are at rest.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub enum Experiment {
    /// For each repeat, each sample index, each precharge: convert the precharge channel at
    /// `precharge_sample`, then the target at that sample index, then wait `rest_ns`.
    /// Cell `s * precharges.len() + p` collects the target's codes.
    PrechargeSweep {
        /// Channel under test.
        target: u8,
        /// Precharge channels.
        precharges: Vec<u8, MAX_PRECHARGES>,
        /// Sample index used for the precharge conversions.
        precharge_sample: u8,
        /// Sample indices to test.
        samples: Vec<u8, MAX_SAMPLE_TIMES>,
        /// Repeats of the whole pattern.
        repeats: u16,
        /// Idle time after each target conversion, ns.
        rest_ns: u32,
        /// Idle time before the first conversion, ns.
        settle_ns: u32,
    },
    /// `repeats` × `[A, B]` then `repeats` × `[B, B]`, all at `sample`, `rest_ns` after each pair.
    /// Cells: 0 = A in `[A, B]`, 1 = B after A, 2 = first B of `[B, B]`, 3 = B after B.
    OrderSwap {
        /// The channel converted before B.
        a: u8,
        /// The channel whose memory is measured.
        b: u8,
        /// Sample index for all conversions.
        sample: u8,
        /// Repeats of each pattern.
        repeats: u16,
        /// Idle time after each pair, ns.
        rest_ns: u32,
        /// Idle time before the first conversion, ns.
        settle_ns: u32,
    },
    /// `repeats` × [precharge, then `length` back-to-back target conversions, then `rest_ns`].
    /// Cell `j` collects the j-th conversion of the burst.
    RepeatBurst {
        /// Channel under test.
        target: u8,
        /// Precharge channel.
        precharge: u8,
        /// Sample index for the precharge conversion.
        precharge_sample: u8,
        /// Sample index for the target conversions.
        sample: u8,
        /// Conversions per burst.
        length: u8,
        /// Repeats of the burst.
        repeats: u16,
        /// Idle time after each burst, ns.
        rest_ns: u32,
        /// Idle time before the first conversion, ns.
        settle_ns: u32,
    },
    /// For each period P: `repeats` × [precharge, target], one pair started every P
    /// (back to back when P is shorter than the pair). Cell `i` collects period `i`.
    PeriodSweep {
        /// Channel under test.
        target: u8,
        /// Precharge channel.
        precharge: u8,
        /// Sample index for the precharge conversion.
        precharge_sample: u8,
        /// Sample index for the target conversion.
        sample: u8,
        /// Periods, ns.
        periods_ns: Vec<u32, MAX_PERIODS>,
        /// Pairs per period.
        repeats: u16,
        /// Idle time before the first conversion, ns.
        settle_ns: u32,
    },
    /// `count` conversions of the target, one every `period_ns`; raw codes come back.
    NoiseRecord {
        /// Channel under test.
        target: u8,
        /// Sample index.
        sample: u8,
        /// Conversion period, ns.
        period_ns: u32,
        /// Number of codes (≤ [`MAX_RAW_SAMPLES`]).
        count: u16,
        /// Idle time before the first conversion, ns.
        settle_ns: u32,
    },
    /// `count` rounds, one started every `period_ns` (back to back when a round takes longer):
    /// each round reads every channel of `targets` once, in order, each right after a
    /// conversion of `precharge`, so what the hold capacitor brings to a target is the same
    /// known level every time, never another target's reading. Raw code `r * targets.len() + k`
    /// is round `r`'s reading of `targets[k]` (protocol 4): the noise records of many pins in
    /// the time of one.
    ScanRecord {
        /// Channels read in each round, in order.
        targets: Vec<u8, MAX_CHANNELS>,
        /// Precharge channel converted before each target.
        precharge: u8,
        /// Sample index of the precharge conversions.
        precharge_sample: u8,
        /// Sample index of the target conversions.
        sample: u8,
        /// Round period, ns.
        period_ns: u32,
        /// Number of rounds (`count * targets.len()` ≤ [`MAX_RAW_SAMPLES`]).
        count: u16,
        /// Idle time before the first conversion, ns.
        settle_ns: u32,
    },
    /// For each setting `k` of `pulls` (`None`: no pull): the pull connected to `target`, then
    /// `lead` conversions of it that are not recorded (the node settles to its pulled level
    /// under the same sampling as the recorded ones), then `repeats` conversions into cell `k`;
    /// `rest_ns` after every conversion. The pull is released at the end (protocol 6). Only a
    /// pin the board opts in for pulls ([`ChannelInfo::pull`]) may be pulled.
    PullTest {
        /// Channel under test.
        target: u8,
        /// The settings, in order; one cell each.
        pulls: Vec<Option<Pull>, MAX_PULLS>,
        /// Sample index of every conversion.
        sample: u8,
        /// Unrecorded conversions at the start of each setting.
        lead: u16,
        /// Recorded conversions of each setting.
        repeats: u16,
        /// Idle time after each conversion, ns.
        rest_ns: u32,
        /// Idle time before the first conversion, ns.
        settle_ns: u32,
    },
}

/// Most settings of one pull test.
pub const MAX_PULLS: usize = 4;

/// A pull a board connects to a pin for a pull test: its pull resistor (or resistor ladder)
/// to the supply, to ground, or to half the supply.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub enum Pull {
    /// To the supply.
    Up,
    /// To ground.
    Down,
    /// To half the supply.
    Half,
}

impl Experiment {
    /// Short name for progress lines and errors.
    pub fn name(&self) -> &'static str {
        match self {
            Experiment::PrechargeSweep { .. } => "precharge sweep",
            Experiment::OrderSwap { .. } => "order swap",
            Experiment::RepeatBurst { .. } => "repeat burst",
            Experiment::PeriodSweep { .. } => "period sweep",
            Experiment::NoiseRecord { .. } => "noise record",
            Experiment::ScanRecord { .. } => "scan record",
            Experiment::PullTest { .. } => "pull test",
        }
    }

    /// Number of aggregate cells its answer holds (0 for a noise or scan record).
    pub fn cells(&self) -> u16 {
        match self {
            Experiment::PrechargeSweep { precharges, samples, .. } => (precharges.len() * samples.len()) as u16,
            Experiment::OrderSwap { .. } => 4,
            Experiment::RepeatBurst { length, .. } => u16::from(*length),
            Experiment::PeriodSweep { periods_ns, .. } => periods_ns.len() as u16,
            Experiment::PullTest { pulls, .. } => pulls.len() as u16,
            Experiment::NoiseRecord { .. } | Experiment::ScanRecord { .. } => 0,
        }
    }

    /// Number of raw codes its answer holds (0 unless a noise or scan record; saturates).
    pub fn raw_samples(&self) -> u16 {
        match self {
            Experiment::NoiseRecord { count, .. } => *count,
            Experiment::ScanRecord { targets, count, .. } => {
                u16::try_from(usize::from(*count) * targets.len()).unwrap_or(u16::MAX)
            }
            _ => 0,
        }
    }

    /// The largest experiment message, for frame-size tests.
    #[doc(hidden)]
    pub fn largest_for_tests() -> Self {
        let mut periods_ns = Vec::new();
        while periods_ns.push(u32::MAX).is_ok() {}
        Experiment::PeriodSweep {
            target: u8::MAX,
            precharge: u8::MAX,
            precharge_sample: u8::MAX,
            sample: u8::MAX,
            periods_ns,
            repeats: u16::MAX,
            settle_ns: u32::MAX,
        }
    }
}

impl FrontEnd {
    /// The largest description, for frame-size tests.
    #[doc(hidden)]
    pub fn largest_for_tests() -> Self {
        let mut sample_ps = Vec::new();
        while sample_ps.push(u32::MAX).is_ok() {}
        let mut precharges = Vec::new();
        while precharges.push(Precharge { channel: u8::MAX, nominal_microvolts: u32::MAX }).is_ok() {}
        FrontEnd {
            bits: u8::MAX,
            vref_microvolts: u32::MAX,
            sample_ps,
            conversion_ps: u32::MAX,
            hold_attofarads: u32::MAX,
            hold_tolerance_ppm: u32::MAX,
            switch_milliohms: u32::MAX,
            switch_tolerance_ppm: u32::MAX,
            noise_millilsb: u32::MAX,
            leakage_picoamps: u32::MAX,
            pull_milliohms: u32::MAX,
            pull_tolerance_ppm: u32::MAX,
            pull_supply_microvolts: u32::MAX,
            precharges,
        }
    }
}
