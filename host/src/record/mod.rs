//! The run record: one typed, versioned description of what a run measured, from which every
//! result can be computed again.
//!
//! The record is the boundary between measuring and everything after it. A survey writes it
//! experiment by experiment as the board answers (to the store, so a crash loses at most the
//! experiment in flight); the analysis ([`crate::analyse`]) turns it into verdicts; renderers,
//! `refit`, `history` and `loading` read it back.
//!
//! Everything here is what the board said or what the host asked, never a conclusion:
//! - [`RunMeta`]: who, when, with which tool, firmware and link, and whether the run finished;
//! - [`BoardRecord`]: the board's own description (integers exactly as on the wire);
//! - [`Profile`]: the converter values the analysis uses (SI units), which `refit --profile`
//!   may replace;
//! - [`PinRecord`]: the pins the run set out to survey and whether each was fully measured;
//! - [`ExperimentRecord`]: every experiment in the order the board ran it, with its parameters,
//!   the board time at which it ran and its records (aggregates, raw samples).
//!
//! The JSON documents that carry a record are versioned modules: [`v2`] (written and read) and
//! [`v1`] (read, for `loading --from` of older files).

pub mod profile_file;
pub mod v1;
pub mod v2;

use ohmsight_protocol::{Aggregate, ChannelRole, Experiment, FrontEnd, Precharge, MAX_PERIODS};
use serde::{Deserialize, Serialize};

/// Everything a run measured.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct RunRecord {
    /// Who, when, how.
    pub run: RunMeta,
    /// The board as it described itself.
    pub board: BoardRecord,
    /// The converter values the analysis uses.
    pub profile: Profile,
    /// The pins the run set out to survey, in survey order.
    pub pins: Vec<PinRecord>,
    /// Every experiment, in the order the board ran it.
    pub experiments: Vec<ExperimentRecord>,
}

/// What kind of run a record is.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
#[non_exhaustive]
pub enum RunKind {
    /// A commissioning survey of every (or the chosen) pins.
    #[default]
    Survey,
    /// A production check: only the experiments a limits file needs, judged against it.
    Check,
    /// A calibration: a survey of fixture pins of known resistance, from which the unit's hold
    /// capacitance and switch resistance are fitted.
    Calibration,
}

impl RunKind {
    /// The name in JSON, the store and tables.
    pub fn as_str(&self) -> &'static str {
        match self {
            RunKind::Survey => "survey",
            RunKind::Check => "check",
            RunKind::Calibration => "calibration",
        }
    }

    /// The kind of a stored name.
    pub fn parse(name: &str) -> Option<Self> {
        match name {
            "survey" => Some(RunKind::Survey),
            "check" => Some(RunKind::Check),
            "calibration" => Some(RunKind::Calibration),
            _ => None,
        }
    }
}

/// How the host reached the board.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
#[serde(tag = "kind", rename_all = "kebab-case")]
pub enum LinkRecord {
    /// The built-in simulated board, in this process.
    InProcess,
    /// A serial port.
    Serial {
        /// Device path.
        port: String,
        /// Baud rate.
        baud: u32,
    },
}

impl LinkRecord {
    /// `built-in simulated board` or `serial port /dev/ttyACM0`, as in the survey's header.
    pub fn describe(&self) -> String {
        match self {
            LinkRecord::InProcess => "built-in simulated board".into(),
            LinkRecord::Serial { port, .. } => format!("serial port {port}"),
        }
    }
}

/// Traffic and time of a run.
#[derive(Debug, Clone, Copy, Default, PartialEq, Serialize, Deserialize)]
pub struct RunStats {
    /// Conversions the board reported.
    pub conversions: u64,
    /// Bytes sent to the board.
    pub link_bytes_sent: u64,
    /// Bytes received from the board.
    pub link_bytes_received: u64,
    /// Frames that failed to decode.
    pub bad_frames: u64,
    /// Experiments run again after a link problem.
    pub reruns: u64,
    /// Nominal time the board spent on experiments, s.
    pub board_seconds: f64,
    /// Wall-clock time of the run, s.
    pub wall_seconds: f64,
}

/// Who, when and how a run was made.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct RunMeta {
    /// Unique, sortable id (a ULID: 26 characters, time first).
    pub id: String,
    /// What kind of run.
    pub kind: RunKind,
    /// Start, RFC 3339 UTC.
    pub started: String,
    /// End, RFC 3339 UTC; `None` while running or when the run was cut off.
    pub finished: Option<String>,
    /// The ohmsight version that measured.
    pub tool_version: String,
    /// The board's firmware version.
    pub firmware_version: String,
    /// The protocol version the board spoke.
    pub protocol_version: u16,
    /// Board name.
    pub board: String,
    /// Unit id, 16 hex digits.
    pub unit_id: String,
    /// How the board was reached.
    pub link: LinkRecord,
    /// The scenario of a simulated board (a file path, or `built-in demo`).
    pub scenario: Option<String>,
    /// The seed of a simulated board.
    pub seed: Option<u64>,
    /// The command line that made the run.
    pub command: String,
    /// Channels asked for (empty: every pin).
    pub channels: Vec<u8>,
    /// Every experiment the run planned was measured.
    pub complete: bool,
    /// What cut the run short, in words.
    pub fault: Option<String>,
    /// Traffic and time (in documents: their `totals` object).
    #[serde(skip)]
    pub stats: RunStats,
}

/// One channel as the board described it.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct ChannelRecord {
    /// Hardware channel number.
    pub channel: u8,
    /// Label from the board.
    pub label: String,
    /// `pin`, `precharge` or `internal`.
    pub role: String,
    /// The board may pull this pin for a pull test (its profile opts the pin in).
    #[serde(default)]
    pub pull: bool,
    /// The board may drive this pin (its profile opts the pin in).
    #[serde(default)]
    pub drive: bool,
}

/// The board's front-end description, integers exactly as on the wire.
#[derive(Debug, Clone, Default, PartialEq, Eq, Serialize, Deserialize)]
pub struct FrontEndRecord {
    /// Resolution, bits.
    pub bits: u8,
    /// Full scale, µV.
    pub vref_microvolts: u32,
    /// Sample times, ps.
    pub sample_ps: Vec<u32>,
    /// Conversion time, ps.
    pub conversion_ps: u32,
    /// Hold capacitance, aF.
    pub hold_attofarads: u32,
    /// ±2σ of the hold capacitance, ppm.
    pub hold_tolerance_ppm: u32,
    /// Switch resistance, mΩ.
    pub switch_milliohms: u32,
    /// ±2σ of the switch resistance, ppm.
    pub switch_tolerance_ppm: u32,
    /// ADC noise, milli-LSB rms.
    pub noise_millilsb: u32,
    /// Leakage bound, pA.
    pub leakage_picoamps: u32,
    /// Pull resistance, mΩ (0: none).
    pub pull_milliohms: u32,
    /// ±2σ of the pull resistance, ppm.
    #[serde(default)]
    pub pull_tolerance_ppm: u32,
    /// The level the pull-up goes to, µV.
    #[serde(default)]
    pub pull_supply_microvolts: u32,
    /// Precharge sources: (channel, nominal µV).
    pub precharges: Vec<PrechargeRecord>,
}

/// A precharge source as the board described it.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub struct PrechargeRecord {
    /// Channel.
    pub channel: u8,
    /// Nominal level, µV.
    pub nominal_microvolts: u32,
}

impl From<&FrontEnd> for FrontEndRecord {
    fn from(fe: &FrontEnd) -> Self {
        FrontEndRecord {
            bits: fe.bits,
            vref_microvolts: fe.vref_microvolts,
            sample_ps: fe.sample_ps.to_vec(),
            conversion_ps: fe.conversion_ps,
            hold_attofarads: fe.hold_attofarads,
            hold_tolerance_ppm: fe.hold_tolerance_ppm,
            switch_milliohms: fe.switch_milliohms,
            switch_tolerance_ppm: fe.switch_tolerance_ppm,
            noise_millilsb: fe.noise_millilsb,
            leakage_picoamps: fe.leakage_picoamps,
            pull_milliohms: fe.pull_milliohms,
            pull_tolerance_ppm: fe.pull_tolerance_ppm,
            pull_supply_microvolts: fe.pull_supply_microvolts,
            precharges: fe
                .precharges
                .iter()
                .map(|p| PrechargeRecord { channel: p.channel, nominal_microvolts: p.nominal_microvolts })
                .collect(),
        }
    }
}

impl FrontEndRecord {
    /// The wire form (lists longer than the wire allows are cut).
    pub fn to_front_end(&self) -> FrontEnd {
        let mut sample_ps = heapless::Vec::new();
        for &s in &self.sample_ps {
            let _ = sample_ps.push(s);
        }
        let mut precharges = heapless::Vec::new();
        for p in &self.precharges {
            let _ = precharges.push(Precharge { channel: p.channel, nominal_microvolts: p.nominal_microvolts });
        }
        FrontEnd {
            bits: self.bits,
            vref_microvolts: self.vref_microvolts,
            sample_ps,
            conversion_ps: self.conversion_ps,
            hold_attofarads: self.hold_attofarads,
            hold_tolerance_ppm: self.hold_tolerance_ppm,
            switch_milliohms: self.switch_milliohms,
            switch_tolerance_ppm: self.switch_tolerance_ppm,
            noise_millilsb: self.noise_millilsb,
            leakage_picoamps: self.leakage_picoamps,
            pull_milliohms: self.pull_milliohms,
            pull_tolerance_ppm: self.pull_tolerance_ppm,
            pull_supply_microvolts: self.pull_supply_microvolts,
            precharges,
        }
    }
}

/// The board as it described itself in the handshake.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct BoardRecord {
    /// Board name.
    pub name: String,
    /// Firmware version.
    pub firmware: String,
    /// Protocol version.
    pub protocol: u16,
    /// Unit id.
    pub unit_id: u64,
    /// Front end.
    pub front_end: FrontEndRecord,
    /// Channels.
    pub channels: Vec<ChannelRecord>,
}

impl BoardRecord {
    /// Whether the board opts `channel` in for pulls (the pull test runs only there).
    pub fn may_pull(&self, channel: u8) -> bool {
        self.channels.iter().any(|c| c.channel == channel && c.pull)
    }
}

/// The name of a channel role in records.
pub fn role_name(role: ChannelRole) -> &'static str {
    match role {
        ChannelRole::Pin => "pin",
        ChannelRole::Precharge => "precharge",
        ChannelRole::Internal => "internal",
    }
}

/// The converter values the analysis uses, in SI units.
///
/// A live run takes them from the board's description; `refit --profile FILE` replaces any of
/// them (a calibration, a corrected datasheet figure) and analyses the same evidence again.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Profile {
    /// Resolution, bits.
    pub bits: u8,
    /// Full scale, V.
    pub vref_volts: f64,
    /// Selectable sample times, ps.
    pub sample_ps: Vec<u32>,
    /// Conversion time, ps.
    pub conversion_ps: u32,
    /// Hold capacitance, F.
    pub hold_farads: f64,
    /// ±2σ relative uncertainty of the hold capacitance.
    pub hold_tolerance: f64,
    /// Switch resistance, Ω.
    pub switch_ohms: f64,
    /// ±2σ relative uncertainty of the switch resistance.
    pub switch_tolerance: f64,
    /// ADC noise, LSB rms (quantization excluded).
    pub adc_noise_lsb: f64,
    /// Input leakage bound, A.
    pub leakage_amps: f64,
    /// Precharge sources and their nominal levels (the analysis measures the real ones).
    pub precharges: Vec<ProfilePrecharge>,
    /// Where these values came from: `board` (its own description) or the profile file.
    pub source: String,
}

/// A precharge source in a profile.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct ProfilePrecharge {
    /// Channel.
    pub channel: u8,
    /// Nominal level, V.
    pub nominal_volts: f64,
}

impl Profile {
    /// The values of a board model (nominal precharge levels).
    pub fn from_model(m: &crate::model::BoardModel, nominal: &FrontEnd) -> Self {
        Profile {
            bits: m.bits,
            vref_volts: m.vref_volts,
            sample_ps: m.sample_ps.clone(),
            conversion_ps: m.conversion_ps,
            hold_farads: m.hold_farads,
            hold_tolerance: m.hold_tolerance,
            switch_ohms: m.switch_ohms,
            switch_tolerance: m.switch_tolerance,
            adc_noise_lsb: m.noise_lsb,
            leakage_amps: m.leakage_amps,
            precharges: nominal
                .precharges
                .iter()
                .map(|p| ProfilePrecharge { channel: p.channel, nominal_volts: f64::from(p.nominal_microvolts) * 1e-6 })
                .collect(),
            source: "board".into(),
        }
    }

    /// The board model of these values, precharge levels at their nominal values.
    pub fn model(&self) -> crate::model::BoardModel {
        crate::model::BoardModel {
            bits: self.bits,
            vref_volts: self.vref_volts,
            sample_ps: self.sample_ps.clone(),
            conversion_ps: self.conversion_ps,
            hold_farads: self.hold_farads,
            hold_tolerance: self.hold_tolerance,
            switch_ohms: self.switch_ohms,
            switch_tolerance: self.switch_tolerance,
            noise_lsb: self.adc_noise_lsb,
            leakage_amps: self.leakage_amps,
            precharge_volts: self.precharges.iter().map(|p| (p.channel, p.nominal_volts)).collect(),
        }
    }
}

/// A pin the run set out to survey.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct PinRecord {
    /// Channel.
    pub channel: u8,
    /// Label.
    pub label: String,
    /// Every experiment the plan wanted on this pin before the memory test was measured.
    pub complete: bool,
}

/// Why an experiment was run: the step of the survey it belongs to.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Purpose {
    /// Measures a precharge source's level (no pin).
    PrechargeLevel,
    /// The screen every pin gets.
    Screen,
    /// Detailed experiments where the screen shows something to resolve.
    Detail,
    /// The noise record.
    Noise,
    /// The order swap that measures the memory of the previous channel.
    Memory,
    /// The loading burst that tests a stiff pin's bound ([`crate::burst`]).
    Load,
    /// The pull test: the source against the board's own pull ([`crate::pull`]).
    Pull,
}

impl Purpose {
    /// The name in JSON and the store.
    pub fn as_str(&self) -> &'static str {
        match self {
            Purpose::PrechargeLevel => "precharge-level",
            Purpose::Screen => "screen",
            Purpose::Detail => "detail",
            Purpose::Noise => "noise",
            Purpose::Memory => "memory",
            Purpose::Load => "load",
            Purpose::Pull => "pull",
        }
    }

    /// The purpose of a stored name.
    pub fn parse(name: &str) -> Option<Self> {
        [
            Purpose::PrechargeLevel,
            Purpose::Screen,
            Purpose::Detail,
            Purpose::Noise,
            Purpose::Memory,
            Purpose::Load,
            Purpose::Pull,
        ]
        .into_iter()
        .find(|p| p.as_str() == name)
    }
}

/// An experiment's parameters, as in the protocol but named for people and stable across
/// protocol versions.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
#[serde(tag = "kind", rename_all = "kebab-case")]
pub enum ExperimentSpec {
    /// See [`Experiment::PrechargeSweep`].
    PrechargeSweep {
        /// Channel under test.
        target: u8,
        /// Precharge channels.
        precharges: Vec<u8>,
        /// Sample index of the precharge conversions.
        precharge_sample: u8,
        /// Sample indices tested.
        samples: Vec<u8>,
        /// Repeats.
        repeats: u16,
        /// Idle after each target conversion, ns.
        rest_ns: u32,
        /// Idle before the first conversion, ns.
        settle_ns: u32,
    },
    /// See [`Experiment::OrderSwap`].
    OrderSwap {
        /// The channel converted before `b`.
        a: u8,
        /// The channel whose memory is measured.
        b: u8,
        /// Sample index.
        sample: u8,
        /// Repeats of each pattern.
        repeats: u16,
        /// Idle after each pair, ns.
        rest_ns: u32,
        /// Idle before the first conversion, ns.
        settle_ns: u32,
    },
    /// See [`Experiment::RepeatBurst`].
    RepeatBurst {
        /// Channel under test.
        target: u8,
        /// Precharge channel.
        precharge: u8,
        /// Sample index of the precharge conversion.
        precharge_sample: u8,
        /// Sample index of the target conversions.
        sample: u8,
        /// Conversions per burst.
        length: u8,
        /// Repeats.
        repeats: u16,
        /// Idle after each burst, ns.
        rest_ns: u32,
        /// Idle before the first conversion, ns.
        settle_ns: u32,
    },
    /// See [`Experiment::PeriodSweep`].
    PeriodSweep {
        /// Channel under test.
        target: u8,
        /// Precharge channel.
        precharge: u8,
        /// Sample index of the precharge conversion.
        precharge_sample: u8,
        /// Sample index of the target conversion.
        sample: u8,
        /// Periods, ns.
        periods_ns: Vec<u32>,
        /// Pairs per period.
        repeats: u16,
        /// Idle before the first conversion, ns.
        settle_ns: u32,
    },
    /// See [`Experiment::NoiseRecord`].
    NoiseRecord {
        /// Channel under test.
        target: u8,
        /// Sample index.
        sample: u8,
        /// Conversion period, ns.
        period_ns: u32,
        /// Number of codes.
        count: u16,
        /// Idle before the first conversion, ns.
        settle_ns: u32,
    },
    /// See [`Experiment::ScanRecord`].
    ScanRecord {
        /// Channels read in each round, in order.
        targets: Vec<u8>,
        /// Precharge channel converted before each target.
        precharge: u8,
        /// Sample index of the precharge conversions.
        precharge_sample: u8,
        /// Sample index of the target conversions.
        sample: u8,
        /// Round period, ns.
        period_ns: u32,
        /// Number of rounds.
        count: u16,
        /// Idle before the first conversion, ns.
        settle_ns: u32,
    },
    /// See [`Experiment::PullTest`].
    PullTest {
        /// Channel under test.
        target: u8,
        /// The settings, one cell each.
        pulls: Vec<PullSetting>,
        /// Sample index.
        sample: u8,
        /// Unrecorded conversions at the start of each setting.
        lead: u16,
        /// Recorded conversions of each setting.
        repeats: u16,
        /// Idle after each conversion, ns.
        rest_ns: u32,
        /// Idle before the first conversion, ns.
        settle_ns: u32,
    },
}

/// One setting of a pull test, as records name it.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum PullSetting {
    /// No pull.
    None,
    /// Pulled to the supply.
    Up,
    /// Pulled to ground.
    Down,
    /// Pulled to half the supply.
    Half,
}

impl PullSetting {
    fn of(p: Option<ohmsight_protocol::Pull>) -> Self {
        use ohmsight_protocol::Pull;
        match p {
            None => PullSetting::None,
            Some(Pull::Up) => PullSetting::Up,
            Some(Pull::Down) => PullSetting::Down,
            Some(Pull::Half) => PullSetting::Half,
        }
    }

    fn pull(self) -> Option<ohmsight_protocol::Pull> {
        use ohmsight_protocol::Pull;
        match self {
            PullSetting::None => None,
            PullSetting::Up => Some(Pull::Up),
            PullSetting::Down => Some(Pull::Down),
            PullSetting::Half => Some(Pull::Half),
        }
    }
}

fn hvec<T: Copy, const N: usize>(items: &[T]) -> Option<heapless::Vec<T, N>> {
    heapless::Vec::from_slice(items).ok()
}

impl ExperimentSpec {
    /// The kind's name (`precharge-sweep`, …).
    pub fn kind(&self) -> &'static str {
        match self {
            ExperimentSpec::PrechargeSweep { .. } => "precharge-sweep",
            ExperimentSpec::OrderSwap { .. } => "order-swap",
            ExperimentSpec::RepeatBurst { .. } => "repeat-burst",
            ExperimentSpec::PeriodSweep { .. } => "period-sweep",
            ExperimentSpec::NoiseRecord { .. } => "noise-record",
            ExperimentSpec::ScanRecord { .. } => "scan-record",
            ExperimentSpec::PullTest { .. } => "pull-test",
        }
    }

    /// The pins a scan record reads, in round order; `None` for an experiment on one pin.
    pub fn scan_targets(&self) -> Option<&[u8]> {
        match self {
            ExperimentSpec::ScanRecord { targets, .. } => Some(targets),
            _ => None,
        }
    }

    /// How many pins share this experiment's conversions (a scan's targets; otherwise one).
    pub fn pins_sharing(&self) -> usize {
        self.scan_targets().map_or(1, |t| t.len().max(1))
    }

    /// The wire form, or `None` when a list is longer than the protocol allows.
    pub fn to_experiment(&self) -> Option<Experiment> {
        Some(match self.clone() {
            ExperimentSpec::PrechargeSweep {
                target,
                precharges,
                precharge_sample,
                samples,
                repeats,
                rest_ns,
                settle_ns,
            } => Experiment::PrechargeSweep {
                target,
                precharges: hvec(&precharges)?,
                precharge_sample,
                samples: hvec(&samples)?,
                repeats,
                rest_ns,
                settle_ns,
            },
            ExperimentSpec::OrderSwap { a, b, sample, repeats, rest_ns, settle_ns } => {
                Experiment::OrderSwap { a, b, sample, repeats, rest_ns, settle_ns }
            }
            ExperimentSpec::RepeatBurst {
                target,
                precharge,
                precharge_sample,
                sample,
                length,
                repeats,
                rest_ns,
                settle_ns,
            } => Experiment::RepeatBurst {
                target,
                precharge,
                precharge_sample,
                sample,
                length,
                repeats,
                rest_ns,
                settle_ns,
            },
            ExperimentSpec::PeriodSweep {
                target,
                precharge,
                precharge_sample,
                sample,
                periods_ns,
                repeats,
                settle_ns,
            } => {
                if periods_ns.len() > MAX_PERIODS {
                    return None;
                }
                Experiment::PeriodSweep {
                    target,
                    precharge,
                    precharge_sample,
                    sample,
                    periods_ns: hvec(&periods_ns)?,
                    repeats,
                    settle_ns,
                }
            }
            ExperimentSpec::NoiseRecord { target, sample, period_ns, count, settle_ns } => {
                Experiment::NoiseRecord { target, sample, period_ns, count, settle_ns }
            }
            ExperimentSpec::ScanRecord {
                targets,
                precharge,
                precharge_sample,
                sample,
                period_ns,
                count,
                settle_ns,
            } => Experiment::ScanRecord {
                targets: hvec(&targets)?,
                precharge,
                precharge_sample,
                sample,
                period_ns,
                count,
                settle_ns,
            },
            ExperimentSpec::PullTest { target, pulls, sample, lead, repeats, rest_ns, settle_ns } => {
                let pulls: Vec<Option<ohmsight_protocol::Pull>> = pulls.iter().map(|p| p.pull()).collect();
                Experiment::PullTest { target, pulls: hvec(&pulls)?, sample, lead, repeats, rest_ns, settle_ns }
            }
        })
    }
}

impl From<&Experiment> for ExperimentSpec {
    fn from(e: &Experiment) -> Self {
        match e.clone() {
            Experiment::PrechargeSweep {
                target,
                precharges,
                precharge_sample,
                samples,
                repeats,
                rest_ns,
                settle_ns,
            } => ExperimentSpec::PrechargeSweep {
                target,
                precharges: precharges.to_vec(),
                precharge_sample,
                samples: samples.to_vec(),
                repeats,
                rest_ns,
                settle_ns,
            },
            Experiment::OrderSwap { a, b, sample, repeats, rest_ns, settle_ns } => {
                ExperimentSpec::OrderSwap { a, b, sample, repeats, rest_ns, settle_ns }
            }
            Experiment::RepeatBurst {
                target,
                precharge,
                precharge_sample,
                sample,
                length,
                repeats,
                rest_ns,
                settle_ns,
            } => ExperimentSpec::RepeatBurst {
                target,
                precharge,
                precharge_sample,
                sample,
                length,
                repeats,
                rest_ns,
                settle_ns,
            },
            Experiment::PeriodSweep { target, precharge, precharge_sample, sample, periods_ns, repeats, settle_ns } => {
                ExperimentSpec::PeriodSweep {
                    target,
                    precharge,
                    precharge_sample,
                    sample,
                    periods_ns: periods_ns.to_vec(),
                    repeats,
                    settle_ns,
                }
            }
            Experiment::NoiseRecord { target, sample, period_ns, count, settle_ns } => {
                ExperimentSpec::NoiseRecord { target, sample, period_ns, count, settle_ns }
            }
            Experiment::ScanRecord { targets, precharge, precharge_sample, sample, period_ns, count, settle_ns } => {
                ExperimentSpec::ScanRecord {
                    targets: targets.to_vec(),
                    precharge,
                    precharge_sample,
                    sample,
                    period_ns,
                    count,
                    settle_ns,
                }
            }
            Experiment::PullTest { target, pulls, sample, lead, repeats, rest_ns, settle_ns } => {
                ExperimentSpec::PullTest {
                    target,
                    pulls: pulls.iter().map(|&p| PullSetting::of(p)).collect(),
                    sample,
                    lead,
                    repeats,
                    rest_ns,
                    settle_ns,
                }
            }
        }
    }
}

/// One cell's integer aggregate, as the board sent it.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize, Deserialize)]
pub struct CellRecord {
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

impl From<&Aggregate> for CellRecord {
    fn from(a: &Aggregate) -> Self {
        CellRecord { count: a.count, sum: a.sum, sum_sq: a.sum_sq, min: a.min, max: a.max }
    }
}

impl CellRecord {
    /// The protocol's aggregate.
    pub fn aggregate(&self) -> Aggregate {
        Aggregate { count: self.count, sum: self.sum, sum_sq: self.sum_sq, min: self.min, max: self.max }
    }
}

/// One experiment as it ran.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct ExperimentRecord {
    /// Position in the run (0, 1, 2, …): the order the board ran them in.
    pub seq: u32,
    /// The survey step it belongs to.
    pub purpose: Purpose,
    /// The pin it was run on (`None` for a precharge source's level).
    pub pin: Option<u8>,
    /// What ran.
    pub experiment: ExperimentSpec,
    /// The board's run number (it counts every experiment it starts; 0 in records written
    /// before protocol 3).
    #[serde(default)]
    pub board_run: u32,
    /// The board's clock at the start of the run, ps, as the board reported it.
    pub start_ps: u64,
    /// The board's clock at the end of the run, ps.
    pub end_ps: u64,
    /// Whether the host took this run's records. `false` for a run the board reports in its
    /// run log but whose answer the host did not take (the request reached the board twice,
    /// or the answer was lost and the experiment run again): it has no cells, but its
    /// conversions acted on the node, so the pin's history includes it.
    #[serde(default = "received_by_default")]
    pub received: bool,
    /// Conversions the board reported for this run.
    pub conversions: u32,
    /// Aggregate cells, by cell index.
    pub cells: Vec<CellRecord>,
    /// Raw codes (noise records).
    pub samples: Vec<u16>,
}

fn received_by_default() -> bool {
    true
}

impl ExperimentRecord {
    /// Whether the fit uses this experiment's cells (the order swap and noise records are
    /// analysed on their own).
    pub fn fitted(&self) -> bool {
        self.received
            && !matches!(
                self.experiment,
                ExperimentSpec::OrderSwap { .. }
                    | ExperimentSpec::NoiseRecord { .. }
                    | ExperimentSpec::ScanRecord { .. }
                    // Until the model replays pulled steps, the pull test is analysed on its own.
                    | ExperimentSpec::PullTest { .. }
            )
            && !matches!(self.purpose, Purpose::Memory | Purpose::Load | Purpose::Pull)
    }
}

/// Errors reading a document.
#[derive(Debug)]
#[non_exhaustive]
pub enum DocumentError {
    /// Not JSON at all.
    NotJson {
        /// Line, from 1.
        line: usize,
        /// Column, from 1.
        column: usize,
        /// What the parser said.
        what: String,
    },
    /// JSON, but not a survey document this tool knows.
    UnknownSchema(String),
    /// A survey document with a field missing or of the wrong type.
    Invalid {
        /// The schema it claims.
        schema: &'static str,
        /// Line, from 1.
        line: usize,
        /// Column, from 1.
        column: usize,
        /// What is wrong.
        what: String,
    },
}

impl std::fmt::Display for DocumentError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            DocumentError::NotJson { line, column, what } => {
                write!(f, "{line}:{column}: not JSON ({what}); give the output of `ohmsight survey --json`")
            }
            DocumentError::UnknownSchema(s) => write!(
                f,
                " not an ohmsight survey document: its schema is \"{s}\" (expected \"{}\" or \"{}\"; write one \
                 with `ohmsight survey --json > run.json`)",
                v2::SCHEMA,
                v1::SCHEMA
            ),
            DocumentError::Invalid { schema, line, column, what } => {
                write!(f, "{line}:{column}: not a valid {schema} document: {what}")
            }
        }
    }
}

impl std::error::Error for DocumentError {}

/// A survey document of any version this tool reads.
#[derive(Debug, Clone)]
pub enum Document {
    /// `ohmsight.survey.v1`: results only, no evidence.
    V1(Box<v1::Survey>),
    /// `ohmsight.survey.v2`: results, the run record and the evidence.
    V2(Box<v2::Survey>),
}

impl Document {
    /// The results every version carries (board, pins' verdicts and intervals), in the v1 form.
    pub fn results(&self) -> v1::Survey {
        match self {
            Document::V1(d) => (**d).clone(),
            Document::V2(d) => v1::Survey {
                schema: v1::SCHEMA.into(),
                board: v1::Board { name: d.board.name.clone(), bits: d.board.bits, vref_volts: d.board.vref_volts },
                pins: d
                    .pins
                    .iter()
                    .map(|p| v1::Pin {
                        channel: p.channel,
                        label: p.label.clone(),
                        verdict: p.verdict.clone(),
                        reason: p.reason.clone(),
                        source_ohms: p.source_ohms,
                        node_farads: p.node_farads,
                        source_volts: p.source_volts,
                    })
                    .collect(),
                fault: d.fault.clone(),
            },
        }
    }
}

/// Reads a survey document of any known version.
pub fn read_document(text: &str) -> Result<Document, DocumentError> {
    #[derive(Deserialize)]
    struct Head {
        schema: Option<String>,
    }
    let head: Head = serde_json::from_str(text).map_err(|e| DocumentError::NotJson {
        line: e.line(),
        column: e.column(),
        what: e.to_string(),
    })?;
    let invalid = |schema: &'static str| {
        move |e: serde_json::Error| DocumentError::Invalid {
            schema,
            line: e.line(),
            column: e.column(),
            what: e.to_string(),
        }
    };
    match head.schema.as_deref() {
        Some(v2::SCHEMA) => Ok(Document::V2(Box::new(serde_json::from_str(text).map_err(invalid(v2::SCHEMA))?))),
        Some(v1::SCHEMA) => Ok(Document::V1(Box::new(serde_json::from_str(text).map_err(invalid(v1::SCHEMA))?))),
        other => Err(DocumentError::UnknownSchema(other.unwrap_or("none").to_string())),
    }
}

/// A new run id: a ULID (milliseconds since 1970 then 80 random bits, Crockford base 32), so
/// ids sort by start time and never collide between stations.
pub fn new_run_id() -> String {
    ulid::Ulid::new().to_string()
}

/// Now, RFC 3339 in UTC with milliseconds (`2026-12-03T03:06:28.123Z`).
pub fn now_rfc3339() -> String {
    let now = jiff::Timestamp::now();
    // Whole milliseconds: enough to order runs, short enough to read.
    let ms = now.as_millisecond();
    jiff::Timestamp::from_millisecond(ms).unwrap_or(now).strftime("%Y-%m-%dT%H:%M:%S%.3fZ").to_string()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn every_experiment_kind_survives_the_record_form() {
        let exps = [
            Experiment::PrechargeSweep {
                target: 3,
                precharges: heapless::Vec::from_slice(&[16, 17]).unwrap(),
                precharge_sample: 7,
                samples: heapless::Vec::from_slice(&[0, 3, 7]).unwrap(),
                repeats: 8,
                rest_ns: 5,
                settle_ns: 6,
            },
            Experiment::OrderSwap { a: 16, b: 2, sample: 4, repeats: 32, rest_ns: 1, settle_ns: 2 },
            Experiment::RepeatBurst {
                target: 1,
                precharge: 17,
                precharge_sample: 7,
                sample: 0,
                length: 16,
                repeats: 8,
                rest_ns: 3,
                settle_ns: 4,
            },
            Experiment::largest_for_tests(),
            Experiment::NoiseRecord { target: 5, sample: 7, period_ns: 250_000, count: 1024, settle_ns: 100_000_000 },
            Experiment::ScanRecord {
                targets: heapless::Vec::from_slice(&[3, 0, 9]).unwrap(),
                precharge: 16,
                precharge_sample: 7,
                sample: 7,
                period_ns: 406_000,
                count: 128,
                settle_ns: 2_000_000,
            },
            Experiment::PullTest {
                target: 4,
                pulls: heapless::Vec::from_slice(&[
                    None,
                    Some(ohmsight_protocol::Pull::Up),
                    Some(ohmsight_protocol::Pull::Down),
                    Some(ohmsight_protocol::Pull::Half),
                ])
                .unwrap(),
                sample: 5,
                lead: 8,
                repeats: 32,
                rest_ns: 50_000,
                settle_ns: 1_000_000,
            },
        ];
        for e in exps {
            let spec = ExperimentSpec::from(&e);
            let json = serde_json::to_string(&spec).unwrap();
            let back: ExperimentSpec = serde_json::from_str(&json).unwrap();
            assert_eq!(back.to_experiment(), Some(e.clone()), "{json}");
            assert!(json.contains(&format!("\"kind\":\"{}\"", spec.kind())));
        }
    }

    #[test]
    fn run_ids_sort_by_time_and_differ() {
        let a = new_run_id();
        std::thread::sleep(std::time::Duration::from_millis(2));
        let b = new_run_id();
        assert_eq!(a.len(), 26);
        assert!(a < b, "{a} then {b}");
    }

    #[test]
    fn times_are_rfc3339_utc() {
        let t = now_rfc3339();
        assert!(t.ends_with('Z') && t.len() == 24, "{t}");
        assert!(t.parse::<jiff::Timestamp>().is_ok(), "{t}");
    }

    #[test]
    fn a_document_that_is_not_json_says_where() {
        match read_document("{\n  \"schema\": ,\n}") {
            Err(DocumentError::NotJson { line: 2, .. }) => {}
            other => panic!("{other:?}"),
        }
        assert!(matches!(read_document("{\"schema\": \"x.y\"}"), Err(DocumentError::UnknownSchema(s)) if s == "x.y"));
    }
}
