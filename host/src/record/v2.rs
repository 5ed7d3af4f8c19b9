//! `ohmsight.survey.v2`: the survey document `survey --json`, `refit --json` and
//! `history show --json` print.
//!
//! Everything `ohmsight.survey.v1` has, with the same names and meanings (board, pins with
//! their verdicts, intervals, flags, memory and advice, the scan plan, the fault and the
//! totals), plus:
//! - `run`: id, times, versions, board, unit, link, scenario and seed, the command line,
//!   `complete` and `fault`;
//! - `profile`: the converter values the analysis used;
//! - `board.front_end` and `board.channels`: the board's own description, as on the wire;
//! - `precharge_evidence` and, per pin, `complete` and `evidence`: every experiment with its
//!   parameters, board time and records, enough to redo the analysis from the document alone
//!   ([`Survey::record`]).

use super::{
    BoardRecord, ChannelRecord, ExperimentRecord, FrontEndRecord, PinRecord, Profile, RunMeta, RunRecord, RunStats,
};
use crate::advice::{AdviceOptions, BoardAdvice, PinAdvice};
use crate::fit::Interval;
use crate::judge::{PinReport, SurveyReport};
use serde::{Deserialize, Serialize};

/// The schema name.
pub const SCHEMA: &str = "ohmsight.survey.v2";

/// A survey document.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Survey {
    /// [`SCHEMA`].
    pub schema: String,
    /// Who, when, how (its traffic and time are in `totals`).
    pub run: RunMeta,
    /// The board and its converter.
    pub board: Board,
    /// The converter values the analysis used.
    pub profile: Profile,
    /// Experiments that measured the precharge sources' levels.
    pub precharge_evidence: Vec<ExperimentRecord>,
    /// Pins, in survey order.
    pub pins: Vec<Pin>,
    /// What the advice was asked for.
    pub advice_options: AdviceOptionsDoc,
    /// The whole-board scan plan.
    pub scan_plan: ScanPlanDoc,
    /// What cut the survey short, if anything.
    pub fault: Option<String>,
    /// Traffic and time.
    pub totals: RunStats,
}

/// The `board` object.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Board {
    /// Board name.
    pub name: String,
    /// Firmware version.
    pub firmware: String,
    /// Protocol version.
    pub protocol: u16,
    /// Unit id, 16 hex digits.
    pub unit_id: String,
    /// The link, in words.
    pub link: String,
    /// Resolution, bits.
    pub bits: u8,
    /// Full scale, V.
    pub vref_volts: f64,
    /// One LSB, V.
    pub lsb_volts: f64,
    /// Hold capacitance, F.
    pub hold_farads: f64,
    /// ±2σ of the hold capacitance.
    pub hold_tolerance: f64,
    /// Switch resistance, Ω.
    pub switch_ohms: f64,
    /// ±2σ of the switch resistance.
    pub switch_tolerance: f64,
    /// Sample times, ns.
    pub sample_ns: Vec<f64>,
    /// Conversion time, ns.
    pub conversion_ns: f64,
    /// ADC noise, LSB rms.
    pub adc_noise_lsb: f64,
    /// Precharge sources at their measured levels.
    pub precharges: Vec<PrechargeLevel>,
    /// The board's description as on the wire.
    pub front_end: FrontEndRecord,
    /// Every channel the board described.
    pub channels: Vec<ChannelRecord>,
}

/// A precharge source's measured level.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct PrechargeLevel {
    /// Channel.
    pub channel: u8,
    /// Label.
    pub label: Option<String>,
    /// Level, V.
    pub volts: f64,
}

/// An interval: `estimate` (null for a bound) and the 95% ends present.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct IntervalDoc {
    /// Best estimate, null when the data only bound the value.
    pub estimate: Option<f64>,
    /// Lower 95% end, absent when unbounded.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub low: Option<f64>,
    /// Upper 95% end, absent when unbounded.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub high: Option<f64>,
}

impl From<&Interval> for IntervalDoc {
    fn from(iv: &Interval) -> Self {
        IntervalDoc { estimate: iv.estimate, low: iv.low, high: iv.high }
    }
}

impl From<&IntervalDoc> for Interval {
    fn from(iv: &IntervalDoc) -> Self {
        Interval { estimate: iv.estimate, low: iv.low, high: iv.high }
    }
}

/// Hum amplitudes, LSB.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct HumDoc {
    /// At 50 Hz (harmonics folded in).
    #[serde(rename = "50")]
    pub hz50: f64,
    /// At 60 Hz.
    #[serde(rename = "60")]
    pub hz60: f64,
}

/// Memory of the previous channel.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct MemoryDoc {
    /// Sample index it was measured at.
    pub sample_index: u8,
    /// Reading after the far precharge minus reading after itself, LSB.
    pub shift_lsb: f64,
    /// Standard error of that shift, LSB.
    pub shift_se_lsb: f64,
    /// Shift per LSB of difference between the previous channel and this one.
    pub coefficient: f64,
}

/// What a loading burst showed (see the survey's `load` purpose).
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct LoadDoc {
    /// Conversions of the burst.
    pub conversions: u64,
    /// Drift toward the precharge from the middle third of the burst to the last, LSB.
    pub drift_lsb: f64,
    /// Its standard error, LSB.
    pub drift_se_lsb: f64,
    /// The most drift a network within the bound's assumption shows, LSB.
    pub allowed_lsb: f64,
    /// Whether the drift refutes the stiff bound (the pin is then `unknown`).
    pub refuted: bool,
    /// Refuted: the node of an open pin that drifts as this one did, F; otherwise the largest
    /// open node the burst would have missed, F.
    pub open_node_farads: Option<f64>,
}

/// How well the model fitted.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct FitDoc {
    /// χ² of the data residuals.
    pub chi2: f64,
    /// Degrees of freedom.
    pub dof: usize,
    /// χ²/dof, as the notes quote it (0 when there are no degrees of freedom).
    #[serde(default)]
    pub chi2_per_dof: f64,
    /// Model evaluations spent.
    pub evaluations: usize,
}

/// One pin.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Pin {
    /// Channel.
    pub channel: u8,
    /// Label.
    pub label: String,
    /// `driven`, `floating`, `at-rail` or `unknown`.
    pub verdict: String,
    /// Why, where the verdict needs a reason.
    pub reason: Option<String>,
    /// Source resistance, Ω.
    pub source_ohms: IntervalDoc,
    /// Node capacitance, F.
    pub node_farads: IntervalDoc,
    /// `source_ohms` holds for a node below this capacitance, F (a stiff node whose size the
    /// readings do not show); null when it needs no such assumption.
    #[serde(default)]
    pub source_ohms_assumes_node_below_farads: Option<f64>,
    /// The source resistance the pull test found against the board's own pull, Ω; absent
    /// where no pull test ran (the pin is not opted in, or the board has no pulls).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub pull_source_ohms: Option<IntervalDoc>,
    /// Why a pin opted in for pulls had no pull test although the run did all it planned (its
    /// node may be too large to settle under the pull in the longest rest); absent otherwise.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub pull_test_not_run: Option<String>,
    /// Source voltage, V.
    pub source_volts: Option<f64>,
    /// Noise, LSB rms.
    pub noise_lsb_rms: Option<f64>,
    /// Shortest sample time that settles to ½ LSB, ns.
    pub min_sample_ns: Option<f64>,
    /// Flags.
    pub flags: Vec<String>,
    /// Hum amplitudes.
    pub hum_lsb: Option<HumDoc>,
    /// Memory of the previous channel.
    pub memory: Option<MemoryDoc>,
    /// The loading burst that tested a stiff pin's bound, where one ran.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub load: Option<LoadDoc>,
    /// The fit's quality.
    pub fit: Option<FitDoc>,
    /// Conversions spent on the pin.
    pub conversions: u64,
    /// Advice.
    pub advice: Option<PinAdvice>,
    /// Every planned experiment before the memory test was measured.
    pub complete: bool,
    /// What the survey set out to measure on this pin and did not (`screen`, `detail`,
    /// `noise`, `memory`, `load`): nothing is claimed about these.
    #[serde(default)]
    pub not_measured: Vec<String>,
    /// Every experiment run on this pin, in order.
    pub evidence: Vec<ExperimentRecord>,
}

/// The `advice_options` object.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct AdviceOptionsDoc {
    /// The smallest change to resolve, V.
    pub resolve_volts: Option<f64>,
}

/// One entry of the scan plan.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ScanEntryDoc {
    /// Position in the scan, from 1.
    pub position: usize,
    /// Channel.
    pub channel: u8,
    /// Label.
    pub label: Option<String>,
    /// Sample-time index.
    pub sample_index: u8,
    /// Sample time, ns.
    pub sample_ns: f64,
    /// Dummy conversions before the one that counts.
    pub dummies: u8,
    /// Error with every other pin anywhere, LSB.
    pub worst_error_lsb: f64,
    /// Error at the measured levels, LSB.
    pub error_now_lsb: f64,
}

/// A pin left out of the scan plan.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct LeftOutDoc {
    /// Channel.
    pub channel: u8,
    /// Why.
    pub reason: String,
}

/// The `scan_plan` object.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ScanPlanDoc {
    /// The error limit, LSB.
    pub limit_lsb: f64,
    /// Pins in scan order.
    pub entries: Vec<ScanEntryDoc>,
    /// Idle after each scan, s.
    pub idle_s: f64,
    /// The pin the idle time is for.
    pub idle_for: Option<u8>,
    /// One scan, s.
    pub scan_s: f64,
    /// Scans per second (null for an empty plan).
    pub scan_hz: Option<f64>,
    /// Worst error, LSB.
    pub worst_error_lsb: f64,
    /// Pins not in the plan.
    pub left_out: Vec<LeftOutDoc>,
}

fn pin_doc(p: &PinReport, advice: &BoardAdvice, record: &RunRecord) -> Pin {
    Pin {
        channel: p.channel,
        label: p.label.clone(),
        verdict: p.verdict.as_str().into(),
        reason: p.reason.clone(),
        source_ohms: (&p.source_ohms).into(),
        node_farads: (&p.node_farads).into(),
        source_ohms_assumes_node_below_farads: p.source_assumes_node_below,
        pull_source_ohms: p.pull_source_ohms.as_ref().map(Into::into),
        pull_test_not_run: p.pull_not_run.clone(),
        source_volts: p.source_volts,
        noise_lsb_rms: p.noise_lsb_rms,
        min_sample_ns: p.min_sample_ns,
        flags: p.flags.iter().map(|f| f.as_str().to_string()).collect(),
        hum_lsb: p.noise.as_ref().map(|n| HumDoc { hz50: n.hum_lsb[0], hz60: n.hum_lsb[1] }),
        memory: p.memory.map(|m| MemoryDoc {
            sample_index: m.sample,
            shift_lsb: m.shift_lsb,
            shift_se_lsb: m.shift_se_lsb,
            coefficient: m.coefficient,
        }),
        load: p.load.as_ref().map(|t| LoadDoc {
            conversions: t.conversions,
            drift_lsb: t.drift_lsb,
            drift_se_lsb: t.se_lsb,
            allowed_lsb: t.allowed_lsb,
            refuted: t.refuted,
            open_node_farads: t.open_farads,
        }),
        fit: p.fit.as_ref().map(|f| FitDoc {
            chi2: f.chi2,
            dof: f.dof,
            chi2_per_dof: if f.dof > 0 { f.chi2 / f.dof as f64 } else { 0.0 },
            evaluations: f.evaluations,
        }),
        conversions: p.conversions,
        advice: advice.pins.iter().find(|a| a.channel == p.channel).cloned(),
        complete: record.pins.iter().any(|q| q.channel == p.channel && q.complete),
        not_measured: p.not_measured.iter().map(|w| w.to_string()).collect(),
        evidence: record.experiments.iter().filter(|e| e.pin == Some(p.channel)).cloned().collect(),
    }
}

impl Survey {
    /// The document of an analysed run.
    pub fn new(record: &RunRecord, r: &SurveyReport, advice: &BoardAdvice, opts: &AdviceOptions) -> Self {
        let m = &r.model;
        let b = &record.board;
        let meta = &record.run;
        let label = |ch: u8| b.channels.iter().find(|c| c.channel == ch).map(|c| c.label.clone());
        let plan = &advice.plan;
        Survey {
            schema: SCHEMA.into(),
            run: meta.clone(),
            board: Board {
                name: b.name.clone(),
                firmware: b.firmware.clone(),
                protocol: b.protocol,
                unit_id: format!("{:016x}", b.unit_id),
                link: meta.link.describe(),
                bits: m.bits,
                vref_volts: m.vref_volts,
                lsb_volts: m.lsb_volts(),
                hold_farads: m.hold_farads,
                hold_tolerance: m.hold_tolerance,
                switch_ohms: m.switch_ohms,
                switch_tolerance: m.switch_tolerance,
                sample_ns: m.sample_ps.iter().map(|&p| f64::from(p) / 1000.0).collect(),
                conversion_ns: f64::from(m.conversion_ps) / 1000.0,
                adc_noise_lsb: m.noise_lsb,
                precharges: m
                    .precharge_volts
                    .iter()
                    .map(|(&channel, &volts)| PrechargeLevel { channel, label: label(channel), volts })
                    .collect(),
                front_end: b.front_end.clone(),
                channels: b.channels.clone(),
            },
            profile: record.profile.clone(),
            precharge_evidence: record.experiments.iter().filter(|e| e.pin.is_none()).cloned().collect(),
            pins: r.pins.iter().map(|p| pin_doc(p, advice, record)).collect(),
            advice_options: AdviceOptionsDoc { resolve_volts: opts.resolve_volts },
            scan_plan: ScanPlanDoc {
                limit_lsb: 0.5,
                entries: plan
                    .entries
                    .iter()
                    .enumerate()
                    .map(|(i, e)| ScanEntryDoc {
                        position: i + 1,
                        channel: e.channel,
                        label: r.pins.iter().find(|p| p.channel == e.channel).map(|p| p.label.clone()),
                        sample_index: e.sample_index,
                        sample_ns: e.sample_ns,
                        dummies: e.dummies,
                        worst_error_lsb: e.worst_error_lsb,
                        error_now_lsb: e.error_now_lsb,
                    })
                    .collect(),
                idle_s: plan.idle_s,
                idle_for: plan.idle_for,
                scan_s: plan.scan_s,
                scan_hz: (plan.scan_s > 0.0).then(|| 1.0 / plan.scan_s),
                worst_error_lsb: plan.worst_error_lsb,
                left_out: plan
                    .left_out
                    .iter()
                    .map(|l| LeftOutDoc { channel: l.channel, reason: l.reason.clone() })
                    .collect(),
            },
            fault: meta.fault.clone(),
            totals: meta.stats,
        }
    }

    /// The run record this document carries: enough to analyse the run again.
    pub fn record(&self) -> RunRecord {
        let mut experiments: Vec<ExperimentRecord> =
            self.precharge_evidence.iter().chain(self.pins.iter().flat_map(|p| p.evidence.iter())).cloned().collect();
        experiments.sort_by_key(|e| e.seq);
        RunRecord {
            run: RunMeta { stats: self.totals, ..self.run.clone() },
            board: BoardRecord {
                name: self.board.name.clone(),
                firmware: self.board.firmware.clone(),
                protocol: self.board.protocol,
                unit_id: u64::from_str_radix(&self.board.unit_id, 16).unwrap_or(0),
                front_end: self.board.front_end.clone(),
                channels: self.board.channels.clone(),
            },
            profile: self.profile.clone(),
            pins: self
                .pins
                .iter()
                .map(|p| PinRecord { channel: p.channel, label: p.label.clone(), complete: p.complete })
                .collect(),
            experiments,
        }
    }
}
