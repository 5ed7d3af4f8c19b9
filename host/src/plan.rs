//! The plan: which experiments a survey runs on each pin, decided from what the board is and
//! what the earlier experiments showed. Pure functions: nothing here talks to a board.
//!
//! 1. Measure the precharge sources ([`Plan::precharge_levels`]).
//! 2. Screen every pin: a short precharge sweep (shortest, middle, longest sample time; low and
//!    high precharge), then, unless the pin sits at a rail, a run of back-to-back pairs that
//!    shows droop behind a large node capacitor ([`Plan::screen`], [`Plan::after_screen`]).
//! 3. Only where the screen shows something to resolve: a full precharge sweep, a repeat
//!    burst, period sweeps from both precharges (and a droop sweep); otherwise a long droop run
//!    that bounds a stiff source ([`Plan::detail`]). Every pin not at a rail gets a noise record.
//! 4. After the fit: an order swap at the recommended sample time measures the memory of the
//!    previous channel ([`Plan::memory`]).

use crate::model::{BoardModel, CellObs};
use heapless::Vec as HVec;
use ohmsight_protocol::{Experiment, FrontEnd, Pull, MAX_CHANNELS, MAX_RAW_SAMPLES};

/// Longest period of a period sweep, ns.
const LONGEST_PERIOD_NS: u32 = 20_000_000;
/// Noise-record period, ns (4 kHz: 50/60 Hz and harmonics well inside Nyquist).
pub const NOISE_PERIOD_NS: u32 = 250_000;
/// Idle time before a noise record, ns.
const NOISE_SETTLE_NS: u32 = 100_000_000;
/// Noise-record length.
const NOISE_COUNT: u16 = 1024;
/// Longest period of a check's first-pass period sweep, ns.
pub const QUICK_LONGEST_PERIOD_NS: u32 = 1_000_000;
/// Readings at 4 kHz whose span a check's short noise reading covers (the lead-in included).
pub const QUICK_NOISE_COUNT: u16 = 208;
/// Idle time before a check's short noise record, ns.
const QUICK_NOISE_SETTLE_NS: u32 = 2_000_000;
/// Readings at the start of a raw record that are left out of its analysis (the node's
/// response to the conversion before the record).
pub const RAW_LEAD_IN: usize = 8;

/// Rounds at the start of a scan record whose readings are left out of its analysis: as long as
/// the lead-in of a noise record ([`RAW_LEAD_IN`] readings at [`NOISE_PERIOD_NS`]), at least one.
pub fn scan_lead_in(period_ns: u32) -> usize {
    let lead_ns = RAW_LEAD_IN as u64 * u64::from(NOISE_PERIOD_NS);
    (lead_ns.div_ceil(u64::from(period_ns.max(1))) as usize).max(1)
}

/// Why a board cannot be surveyed.
#[derive(Debug, Clone, PartialEq, Eq)]
#[non_exhaustive]
pub enum PlanError {
    /// The board lists no sample times.
    NoSampleTimes,
    /// The board has no low and high precharge sources.
    NoPrecharges,
}

impl std::fmt::Display for PlanError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            PlanError::NoSampleTimes => f.write_str("the board lists no sample times"),
            PlanError::NoPrecharges => f.write_str("the board needs a low and a high precharge source to be surveyed"),
        }
    }
}

impl std::error::Error for PlanError {}

/// Channel choices that every pin's experiments share.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Plan {
    /// The low precharge source.
    pub lo: u8,
    /// The high precharge source.
    pub hi: u8,
    /// Number of selectable sample times.
    pub n_samples: u8,
    /// Index of the longest sample time.
    pub longest: u8,
    /// Index of the middle sample time.
    pub mid: u8,
}

/// What the screen found on a pin.
#[derive(Debug, Clone, PartialEq)]
pub enum Screened {
    /// Every reading at a rail (its level, V): nothing more to measure.
    Rail(f64),
    /// Not at a rail: run `droop` next, with `far` the precharge farther from the pin's level.
    Droop {
        /// The precharge farther from the pin's level.
        far: u8,
        /// The run of back-to-back pairs.
        droop: Experiment,
    },
}

/// A pin's screen, as the detail step needs it.
#[derive(Debug, Clone, PartialEq)]
pub struct ScreenResult {
    /// The short precharge sweep's cells: [s0 lo, s0 hi, mid lo, mid hi, long lo, long hi].
    pub cells: Vec<CellObs>,
    /// Drift between the halves of the back-to-back run, LSB.
    pub burst_droop: f64,
    /// The precharge farther from the pin's level.
    pub far: u8,
}

impl ScreenResult {
    /// The pin's level as the screen's longest sample time read it (both precharges), LSB.
    pub fn level_lsb(&self) -> Option<f64> {
        let long = self.cells.get(4..6)?;
        Some((long[0].mean + long[1].mean) / 2.0)
    }
}

/// The node a pull test is sized for where the fit could not size the pin's node (a stiff
/// pin), F; the test's repeated pulled-up setting shows whether it was enough.
pub const PULL_NODE_UNSIZED_FARADS: f64 = 1e-9;

/// The node a pin's pull test is sized for, F, and whether that is the fit's upper end (`true`)
/// or only the least the node holds (`false`): the upper end where the fit has one; otherwise
/// its lower end where that is larger than [`PULL_NODE_UNSIZED_FARADS`] (a node open above but
/// at least 800 nF is no 1 nF node), else that nominal node.
pub fn pull_node_farads(node: &crate::fit::Interval) -> (f64, bool) {
    match node.high {
        Some(h) => (h, true),
        None => (node.low.unwrap_or(0.0).max(PULL_NODE_UNSIZED_FARADS), false),
    }
}

/// Longest rest between a pull test's conversions, ns: 200 ms for a setting's 48 conversions
/// keeps the test under half a minute even for the largest node it serves.
pub const PULL_REST_MAX_NS: u32 = 4_000_000;
/// How long each pull setting's recorded conversions span, ns (or a multiple of it): five
/// periods of 50 Hz mains and six of 60 Hz. Readings spread evenly over whole periods average
/// the hum, and every harmonic below the count of readings, out of the setting's mean; without
/// it a setting lasted ~2 ms, a tenth of a period, and hum moved each setting's mean its own way.
pub const PULL_SPAN_NS: u64 = 100_000_000;
/// Unrecorded conversions leading each pull setting (the hold capacitor, last at another
/// level, shares its charge with the node on the first few).
const PULL_LEAD: u16 = 16;
/// Recorded conversions of each pull setting.
const PULL_REPEATS: u16 = 32;

/// The rest a pull test needs between conversions for a node up to `node_farads_high`, ns: five
/// time constants of the pull alone against the node and the hold capacitor. `None` when the
/// board has no pull.
pub fn pull_rest_ns(fe: &FrontEnd, node_farads_high: f64) -> Option<f64> {
    if fe.pull_milliohms == 0 || fe.pull_supply_microvolts == 0 {
        return None;
    }
    let rp = f64::from(fe.pull_milliohms) * 1e-3;
    let hold = f64::from(fe.hold_attofarads) * 1e-18;
    let rest_ns = (5.0 * rp * (node_farads_high + hold) * 1e9).ceil();
    Some(if rest_ns.is_finite() { rest_ns } else { f64::INFINITY })
}

impl Plan {
    /// The plan for a described front end.
    pub fn new(fe: &FrontEnd) -> Result<Plan, PlanError> {
        if fe.sample_ps.is_empty() {
            return Err(PlanError::NoSampleTimes);
        }
        let (lo, hi) = match (
            fe.precharges.iter().min_by_key(|p| p.nominal_microvolts),
            fe.precharges.iter().max_by_key(|p| p.nominal_microvolts),
        ) {
            (Some(l), Some(h)) if l.channel != h.channel => (l.channel, h.channel),
            _ => return Err(PlanError::NoPrecharges),
        };
        let n_samples = fe.sample_ps.len() as u8;
        Ok(Plan { lo, hi, n_samples, longest: n_samples - 1, mid: n_samples / 2 })
    }

    /// A raw record of each precharge source at the longest sample time.
    pub fn precharge_levels(&self) -> [Experiment; 2] {
        [self.lo, self.hi].map(|p| Experiment::NoiseRecord {
            target: p,
            sample: self.longest,
            period_ns: 0,
            count: 64,
            settle_ns: 0,
        })
    }

    /// `repeats` × [low, pin; high, pin] at each sample index, precharged at the longest.
    fn precharge_sweep(&self, target: u8, samples: &[u8], repeats: u16) -> Experiment {
        Experiment::PrechargeSweep {
            target,
            precharges: vec_of(&[self.lo, self.hi]),
            precharge_sample: self.longest,
            samples: vec_of(samples),
            repeats,
            rest_ns: 0,
            settle_ns: 0,
        }
    }

    /// The precharge farther from a pin that reads `level_lsb`.
    pub fn far_from(&self, model: &BoardModel, level_lsb: f64) -> u8 {
        if level_lsb > model.full_scale() / 2.0 {
            self.lo
        } else {
            self.hi
        }
    }

    /// The screen's first experiment: a short precharge sweep.
    pub fn screen(&self, pin: u8) -> Experiment {
        self.precharge_sweep(pin, &[0, self.mid, self.longest], 8)
    }

    /// What the short sweep's cells say: a rail, or the droop run to do next. A large node
    /// capacitor hides its source behind a tiny charge-sharing step; a run of back-to-back
    /// [precharge, pin] pairs accumulates the droop where the source cannot keep up (two
    /// cells: the first and the second half of the run).
    pub fn after_screen(&self, model: &BoardModel, pin: u8, cells: &[CellObs]) -> Screened {
        if let Some(rail) = screen_rail(model, cells) {
            return Screened::Rail(rail);
        }
        let level = if cells.len() >= 6 { (cells[4].mean + cells[5].mean) / 2.0 } else { 0.0 };
        let far = self.far_from(model, level);
        Screened::Droop { far, droop: period_sweep(pin, far, self.longest, 0, &[0, 0], 32) }
    }

    /// The detailed experiments for a pin not at a rail, in the order to run them (the noise
    /// record comes after them: [`Plan::noise`]).
    pub fn detail(&self, model: &BoardModel, pin: u8, screen: &ScreenResult) -> Vec<Experiment> {
        let s = &screen.cells;
        let longest = self.longest;
        // cells: [s0 lo, s0 hi, mid lo, mid hi, long lo, long hi]
        let settled = s.len() >= 6
            && (s[0].mean - s[4].mean).abs() < 1.0
            && (s[1].mean - s[5].mean).abs() < 1.0
            && screen.burst_droop < 1.0;
        if settled {
            // Stiff on every timescale so far: hundreds of back-to-back pairs push the node
            // toward the switched-capacitor equilibrium Rs/(Rs + P/Ch), which bounds Rs even if
            // a large capacitor hides it from single conversions.
            return vec![period_sweep(pin, screen.far, longest, 0, &[0, 0, 0], DROOP_RUN_REPEATS)];
        }
        let all: Vec<u8> = (0..self.n_samples).collect();
        let mut out = vec![
            self.precharge_sweep(pin, &all, 24),
            Experiment::RepeatBurst {
                target: pin,
                precharge: screen.far,
                precharge_sample: longest,
                sample: 0,
                length: 16,
                repeats: 8,
                rest_ns: 0,
                settle_ns: 0,
            },
        ];
        let pair_ns = (2 * model.timing().busy_ps(longest) / 1000) as u32;
        let mut periods = HVec::<u32, 12>::new();
        for k in [1u32, 3, 10, 30, 100, 300, 1000, 3000] {
            let p = pair_ns.saturating_mul(k).min(LONGEST_PERIOD_NS);
            if periods.last().is_none_or(|&l| p > l) {
                let _ = periods.push(p);
            }
        }
        if periods.last() != Some(&LONGEST_PERIOD_NS) {
            let _ = periods.push(LONGEST_PERIOD_NS);
        }
        for pre in [self.lo, self.hi] {
            out.push(period_sweep(pin, pre, longest, longest, &periods, 12));
        }
        if screen.burst_droop >= 1.0 {
            // The source cannot keep up with back-to-back conversions: hundreds of them at the
            // shortest periods drive the node toward the switched-capacitor equilibrium
            // Rs/(Rs + P/Ch), which measures Rs even behind a large capacitor.
            out.push(period_sweep(
                pin,
                screen.far,
                longest,
                longest,
                &periods[..3.min(periods.len())],
                DROOP_RUN_REPEATS,
            ));
        }
        out
    }

    /// A check's first pass at a pin's settling: the survey's [`Plan::detail`] cut to what
    /// decides most limits (fewer repeats, period sweeps up to [`QUICK_LONGEST_PERIOD_NS`]). A
    /// pin whose limits it leaves open gets the full detail afterwards.
    pub fn quick_detail(&self, model: &BoardModel, pin: u8, screen: &ScreenResult) -> Vec<Experiment> {
        let mut out = self.detail(model, pin, screen);
        for exp in &mut out {
            match exp {
                Experiment::PrechargeSweep { repeats, .. } => *repeats = 8,
                Experiment::PeriodSweep { periods_ns, repeats, .. } => {
                    let mut short: HVec<u32, { ohmsight_protocol::MAX_PERIODS }> = HVec::new();
                    for p in periods_ns.iter().map(|&p| p.min(QUICK_LONGEST_PERIOD_NS)) {
                        if short.last().is_none_or(|&l| p > l) {
                            let _ = short.push(p);
                        }
                    }
                    *periods_ns = short;
                    *repeats = (*repeats / 4).max(4);
                }
                _ => {}
            }
        }
        out
    }

    /// A check's second pass at a pin whose limits the first left open: the survey's
    /// [`Plan::detail`] with a third of its period-sweep repeats (at least 4; the long droop
    /// runs keep theirs), and its long periods from the farther precharge only. The long
    /// periods are what the first pass lacks (they show an open node, or a source behind a
    /// large one), and the farther precharge moves the node most; the first pass's cells, from
    /// both precharges, are fitted with these, so few repeats are needed.
    pub fn check_detail(&self, model: &BoardModel, pin: u8, screen: &ScreenResult) -> Vec<Experiment> {
        let mut out = self.detail(model, pin, screen);
        out.retain(|exp| !matches!(exp, Experiment::PeriodSweep { precharge, repeats, .. } if !is_droop_run(*repeats) && *precharge != screen.far));
        for exp in &mut out {
            if let Experiment::PeriodSweep { repeats, .. } = exp {
                if !is_droop_run(*repeats) {
                    *repeats = (*repeats / 3).max(4);
                }
            }
        }
        out
    }

    /// A check's short noise records of many pins at once: scan records of [`QUICK_NOISE_COUNT`]
    /// rounds at the survey's 4 kHz (52 ms: three 60 Hz periods, two and a half of 50 Hz), as
    /// many pins in each as the board's raw buffer holds. A pin gets as many readings over as
    /// long a span as in a record of its own: the survey's noise analysis, which the fit's hum
    /// model rests on, looks at both mains frequencies and becomes unsure of the hum on a
    /// shorter span or on fewer readings (64 readings per pin left "no hum" undecided on 3 of
    /// 16 quiet pins). `pins` are (channel, level in LSB). Each reading follows a conversion of
    /// the precharge nearer the pins' median level, so no pin's reading carries another pin's
    /// level, noise or hum on the hold capacitor.
    pub fn quick_scans(&self, model: &BoardModel, pins: &[(u8, f64)]) -> Vec<Experiment> {
        let per_scan = (usize::from(MAX_RAW_SAMPLES) / usize::from(QUICK_NOISE_COUNT)).clamp(1, MAX_CHANNELS);
        pins.chunks(per_scan)
            .map(|group| {
                let mut levels: Vec<f64> = group.iter().map(|g| g.1).collect();
                levels.sort_by(f64::total_cmp);
                let median = levels[levels.len() / 2];
                // The precharge not farther from the median: the smaller kick to most pins.
                let precharge = if self.far_from(model, median) == self.lo { self.hi } else { self.lo };
                Experiment::ScanRecord {
                    targets: group.iter().map(|g| g.0).collect(),
                    precharge,
                    precharge_sample: self.longest,
                    sample: self.longest,
                    period_ns: NOISE_PERIOD_NS,
                    count: QUICK_NOISE_COUNT,
                    settle_ns: QUICK_NOISE_SETTLE_NS,
                }
            })
            .collect()
    }

    /// The noise record, after the node has had time to recover from the experiments before it.
    pub fn noise(&self, pin: u8) -> Experiment {
        Experiment::NoiseRecord {
            target: pin,
            sample: self.longest,
            period_ns: NOISE_PERIOD_NS,
            count: NOISE_COUNT,
            settle_ns: NOISE_SETTLE_NS,
        }
    }

    /// The pull test of a pin the board lets pull: unpulled, pulled up, pulled down and up
    /// again, at the longest sample time, each setting led by unrecorded conversions while the
    /// node settles. The two pulled-up cells follow different levels, so they agree only if the
    /// node settled: that is the test's own check. `node_farads` is the node the test is sized
    /// for ([`pull_node_farads`]: the fit's upper end, else the least it holds, else
    /// [`PULL_NODE_UNSIZED_FARADS`], which the check then tests), and sets the least rest
    /// between conversions: five time constants of the pull alone against the node and the
    /// hold capacitor (the source in parallel only shortens it), at most [`PULL_REST_MAX_NS`].
    /// The rest is then lengthened so that each setting's recorded conversions span
    /// [`PULL_SPAN_NS`] (or a multiple), evenly: mains hum averages out of each setting's mean.
    /// `None` when the pull is too weak for that node to settle in the longest rest, or the
    /// board has no pull.
    pub fn pull_test(&self, fe: &FrontEnd, pin: u8, node_farads: f64) -> Option<Experiment> {
        let settle_ns = pull_rest_ns(fe, node_farads).filter(|&ns| ns <= f64::from(PULL_REST_MAX_NS))?;
        // Each setting's recorded conversions evenly over whole mains periods: the rest that
        // makes their span a multiple of PULL_SPAN_NS, and at least the settling rest.
        let convert_ns = (f64::from(*fe.sample_ps.get(usize::from(self.longest))?) + f64::from(fe.conversion_ps)) / 1e3;
        let slot_ns = PULL_SPAN_NS as f64 / f64::from(PULL_REPEATS);
        let spans = ((settle_ns + convert_ns) / slot_ns).ceil().max(1.0);
        let rest_ns = (spans * slot_ns - convert_ns).round().max(settle_ns);
        let pulls = heapless::Vec::from_slice(&[None, Some(Pull::Up), Some(Pull::Down), Some(Pull::Up)]).ok()?;
        Some(Experiment::PullTest {
            target: pin,
            pulls,
            sample: self.longest,
            lead: PULL_LEAD,
            repeats: PULL_REPEATS,
            rest_ns: rest_ns as u32,
            settle_ns: settle_ns as u32,
        })
    }

    /// The order swap that measures the memory of the previous channel: at the pin's settling
    /// sample time (the longest when none settles), after the precharge farther from its level.
    pub fn memory(&self, model: &BoardModel, pin: u8, sample: Option<u8>, level_lsb: f64) -> Experiment {
        let sample = sample.unwrap_or(self.longest);
        let far = self.far_from(model, level_lsb);
        Experiment::OrderSwap { a: far, b: pin, sample, repeats: 32, rest_ns: 0, settle_ns: 0 }
    }
}

/// The rail a pin sits at when every reading of its screen is there, V.
pub fn screen_rail(model: &BoardModel, cells: &[CellObs]) -> Option<f64> {
    let max = model.max_code();
    if cells.is_empty() {
        None
    } else if cells.iter().all(|c| c.mean <= 0.5) {
        Some(0.0)
    } else if cells.iter().all(|c| c.mean >= max - 0.5) {
        Some(model.vref_volts)
    } else {
        None
    }
}

/// Repeats of a droop run: hundreds of back-to-back conversions that push a node toward its
/// switched-capacitor equilibrium (the detail's settling sweeps have a dozen).
const DROOP_RUN_REPEATS: u16 = 256;

/// Whether a period sweep of `repeats` is a droop run, whose length is its point: a check
/// shortens or drops the other sweeps, never these.
fn is_droop_run(repeats: u16) -> bool {
    repeats >= DROOP_RUN_REPEATS / 4
}

/// Drift between the first and the last cell of a back-to-back run, LSB.
pub fn burst_droop(cells: &[CellObs]) -> f64 {
    cells.first().zip(cells.last()).map_or(0.0, |(a, b)| (a.mean - b.mean).abs())
}

/// `repeats` × [precharge, target] at each period (see [`Experiment::PeriodSweep`]).
fn period_sweep(
    target: u8,
    precharge: u8,
    precharge_sample: u8,
    sample: u8,
    periods: &[u32],
    repeats: u16,
) -> Experiment {
    Experiment::PeriodSweep {
        target,
        precharge,
        precharge_sample,
        sample,
        periods_ns: HVec::from_slice(&periods[..periods.len().min(ohmsight_protocol::MAX_PERIODS)]).unwrap_or_default(),
        repeats,
        settle_ns: 0,
    }
}

fn vec_of<const N: usize>(items: &[u8]) -> HVec<u8, N> {
    HVec::from_slice(&items[..items.len().min(N)]).unwrap_or_default()
}

#[cfg(test)]
mod tests {
    use super::*;
    use ohmsight_protocol::{Precharge, Steps, Timing};

    /// An nRF52840-like front end: TACQ 3–40 µs, 2.5 pF, the 160 kΩ ladder to a 3.0 V VDD.
    fn nrf_like() -> FrontEnd {
        FrontEnd {
            bits: 12,
            vref_microvolts: 3_600_000,
            sample_ps: HVec::from_slice(&[3_000_000, 5_000_000, 10_000_000, 15_000_000, 20_000_000, 40_000_000])
                .unwrap(),
            conversion_ps: 2_000_000,
            hold_attofarads: 2_500_000,
            hold_tolerance_ppm: 200_000,
            switch_milliohms: 2_000_000,
            switch_tolerance_ppm: 1_000_000,
            noise_millilsb: 1_500,
            leakage_picoamps: 1_000_000,
            pull_milliohms: 160_000_000,
            pull_tolerance_ppm: 200_000,
            pull_supply_microvolts: 3_000_000,
            precharges: HVec::from_slice(&[
                Precharge { channel: 9, nominal_microvolts: 3_000_000 },
                Precharge { channel: 30, nominal_microvolts: 0 },
            ])
            .unwrap(),
        }
    }

    #[test]
    fn a_pull_test_rests_five_time_constants_of_the_pull_against_the_node() {
        let fe = nrf_like();
        let plan = Plan::new(&fe).unwrap();
        let Some(Experiment::PullTest { rest_ns, settle_ns, sample, pulls, .. }) = plan.pull_test(&fe, 3, 10e-12)
        else {
            panic!("a pull test")
        };
        // 5 · 160 kΩ · (10 pF + 2.5 pF) = 10 µs settles it; the rest is lengthened to spread the
        // 32 readings over 100 ms: 3.125 ms a reading, less the 40 µs sample and 2 µs conversion.
        assert_eq!((rest_ns, settle_ns, sample), (3_083_000, 10_000, 5));
        assert_eq!(pulls.as_slice(), [None, Some(Pull::Up), Some(Pull::Down), Some(Pull::Up)]);
        // The largest node it serves stays within the protocol's limits and half a minute.
        let farads = f64::from(PULL_REST_MAX_NS) * 1e-9 / (5.0 * 160e3) - 2.5e-12;
        let exp = plan.pull_test(&fe, 3, farads * 0.999).expect("just within the rest limit");
        let steps = Steps::new(&exp, Timing { sample_ps: &fe.sample_ps, conversion_ps: fe.conversion_ps }).unwrap();
        assert!(steps.nominal_ps() < 30_000_000_000_000, "{} ps", steps.nominal_ps());
        // A settling rest past one slot: the readings span two periods' worth, 200 ms.
        let Experiment::PullTest { rest_ns, repeats, .. } = exp else { unreachable!() };
        assert_eq!((rest_ns, repeats), (6_250_000 - 42_000, 32));
        // Too large a node for the pull to settle, or no pull at all: no pull test.
        assert_eq!(plan.pull_test(&fe, 3, 100e-9), None);
        assert_eq!(plan.pull_test(&FrontEnd { pull_milliohms: 0, ..fe.clone() }, 3, 10e-12), None);
        // Sized by the node's upper end; open above, by the least it holds (never below the
        // nominal unsized node); with neither, by the nominal one.
        let iv = |low, high| crate::fit::Interval { estimate: None, low, high };
        assert_eq!(pull_node_farads(&iv(Some(0.5e-6), Some(1.5e-6))), (1.5e-6, true));
        assert_eq!(pull_node_farads(&iv(Some(0.5e-6), None)), (0.5e-6, false));
        assert_eq!(pull_node_farads(&iv(Some(1e-12), None)), (PULL_NODE_UNSIZED_FARADS, false));
        assert_eq!(pull_node_farads(&crate::fit::Interval::NONE), (PULL_NODE_UNSIZED_FARADS, false));
    }
}
