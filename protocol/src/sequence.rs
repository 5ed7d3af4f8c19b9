//! The exact conversion sequence of each experiment.
//!
//! One implementation serves both sides: the firmware engine executes [`Steps`] on the board,
//! the host fit simulates the same [`Steps`] on the model. Integer arithmetic only.

use crate::messages::{
    ErrorKind, Experiment, Pull, MAX_BURST, MAX_CELLS, MAX_CHANNELS, MAX_CONVERSIONS, MAX_RAW_SAMPLES, MAX_RUN_PS,
    MAX_WAIT_NS,
};

/// The board timing the sequence needs.
#[derive(Debug, Clone, Copy)]
pub struct Timing<'a> {
    /// Selectable sample times, ps.
    pub sample_ps: &'a [u32],
    /// Conversion time, ps.
    pub conversion_ps: u32,
}

impl Timing<'_> {
    /// Time one conversion keeps the ADC busy (sampling + conversion), ps.
    pub fn busy_ps(&self, sample: u8) -> u64 {
        u64::from(self.sample_ps[usize::from(sample)]) + u64::from(self.conversion_ps)
    }

    /// Idle time that makes a group of conversions busy for `busy_ps` start every `period_ns`;
    /// zero when the group is longer than the period.
    pub fn gap_ns(period_ns: u32, busy_ps: u64) -> u32 {
        let period_ps = u64::from(period_ns) * 1000;
        (period_ps.saturating_sub(busy_ps) / 1000) as u32
    }
}

/// Where the code of a step goes.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum StepRecord {
    /// Not recorded (precharge conversions).
    None,
    /// Added to the aggregate cell with this index.
    Cell(u16),
    /// Stored as raw sample number this.
    Raw(u16),
}

/// One conversion and the idle time after it.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Step {
    /// Channel to convert.
    pub channel: u8,
    /// Sample-time index.
    pub sample: u8,
    /// Idle time after the conversion, ns.
    pub wait_after_ns: u32,
    /// Where the code goes.
    pub record: StepRecord,
    /// The pull connected to `channel` during this step (its conversion and the wait after);
    /// `None`: no pull on any channel.
    pub pull: Option<Pull>,
}

impl Step {
    /// A conversion with no pull connected.
    const fn unpulled(channel: u8, sample: u8, wait_after_ns: u32, record: StepRecord) -> Step {
        Step { channel, sample, wait_after_ns, record, pull: None }
    }

    /// A precharge conversion: nothing recorded, no wait after it, no pull.
    const fn precharge(channel: u8, sample: u8) -> Step {
        Step::unpulled(channel, sample, 0, StepRecord::None)
    }
}

/// The validated step sequence of one experiment (random access, no allocation).
#[derive(Debug, Clone)]
pub struct Steps<'a> {
    exp: &'a Experiment,
    timing: Timing<'a>,
    len: u32,
    /// Idle time before each period block (period sweep) or the gap (noise record), ns.
    gap_ns: [u32; crate::messages::MAX_PERIODS],
}

impl<'a> Steps<'a> {
    /// Checks the experiment against the board timing and the protocol limits.
    pub fn new(exp: &'a Experiment, timing: Timing<'a>) -> Result<Self, ErrorKind> {
        let n_samples = timing.sample_ps.len();
        let sample_ok = |s: u8| usize::from(s) < n_samples;
        let mut gap_ns = [0u32; crate::messages::MAX_PERIODS];
        let check_wait = |w: u32| {
            if w > MAX_WAIT_NS {
                Err(ErrorKind::TooLarge)
            } else {
                Ok(())
            }
        };
        let len: u64 = match exp {
            Experiment::PrechargeSweep {
                precharges, precharge_sample, samples, repeats, rest_ns, settle_ns, ..
            } => {
                if precharges.is_empty() || samples.is_empty() || *repeats == 0 {
                    return Err(ErrorKind::Empty);
                }
                if !sample_ok(*precharge_sample) || !samples.iter().all(|&s| sample_ok(s)) {
                    return Err(ErrorKind::BadSampleIndex);
                }
                if precharges.len() * samples.len() > MAX_CELLS {
                    return Err(ErrorKind::TooLarge);
                }
                check_wait(*rest_ns)?;
                check_wait(*settle_ns)?;
                u64::from(*repeats) * (samples.len() * precharges.len() * 2) as u64
            }
            Experiment::OrderSwap { sample, repeats, rest_ns, settle_ns, .. } => {
                if *repeats == 0 {
                    return Err(ErrorKind::Empty);
                }
                if !sample_ok(*sample) {
                    return Err(ErrorKind::BadSampleIndex);
                }
                check_wait(*rest_ns)?;
                check_wait(*settle_ns)?;
                4 * u64::from(*repeats)
            }
            Experiment::RepeatBurst { precharge_sample, sample, length, repeats, rest_ns, settle_ns, .. } => {
                if *length == 0 || *repeats == 0 {
                    return Err(ErrorKind::Empty);
                }
                if !sample_ok(*precharge_sample) || !sample_ok(*sample) {
                    return Err(ErrorKind::BadSampleIndex);
                }
                if *length > MAX_BURST {
                    return Err(ErrorKind::TooLarge);
                }
                check_wait(*rest_ns)?;
                check_wait(*settle_ns)?;
                u64::from(*repeats) * (u64::from(*length) + 1)
            }
            Experiment::PeriodSweep { precharge_sample, sample, periods_ns, repeats, settle_ns, .. } => {
                if periods_ns.is_empty() || *repeats == 0 {
                    return Err(ErrorKind::Empty);
                }
                if !sample_ok(*precharge_sample) || !sample_ok(*sample) {
                    return Err(ErrorKind::BadSampleIndex);
                }
                check_wait(*settle_ns)?;
                let busy = timing.busy_ps(*precharge_sample) + timing.busy_ps(*sample);
                for (g, &p) in gap_ns.iter_mut().zip(periods_ns.iter()) {
                    check_wait(p)?;
                    *g = Timing::gap_ns(p, busy);
                }
                u64::from(*repeats) * 2 * periods_ns.len() as u64
            }
            Experiment::NoiseRecord { sample, period_ns, count, settle_ns, .. } => {
                if *count == 0 {
                    return Err(ErrorKind::Empty);
                }
                if !sample_ok(*sample) {
                    return Err(ErrorKind::BadSampleIndex);
                }
                if *count > MAX_RAW_SAMPLES {
                    return Err(ErrorKind::TooLarge);
                }
                check_wait(*period_ns)?;
                check_wait(*settle_ns)?;
                gap_ns[0] = Timing::gap_ns(*period_ns, timing.busy_ps(*sample));
                u64::from(*count)
            }
            Experiment::ScanRecord { targets, precharge_sample, sample, period_ns, count, settle_ns, .. } => {
                if *count == 0 || targets.is_empty() {
                    return Err(ErrorKind::Empty);
                }
                if !sample_ok(*precharge_sample) || !sample_ok(*sample) {
                    return Err(ErrorKind::BadSampleIndex);
                }
                let codes = u64::from(*count) * targets.len() as u64;
                if codes > u64::from(MAX_RAW_SAMPLES) {
                    return Err(ErrorKind::TooLarge);
                }
                check_wait(*period_ns)?;
                check_wait(*settle_ns)?;
                let pair = timing.busy_ps(*precharge_sample) + timing.busy_ps(*sample);
                gap_ns[0] = Timing::gap_ns(*period_ns, pair * targets.len() as u64);
                2 * codes
            }
            Experiment::PullTest { pulls, sample, lead, repeats, rest_ns, settle_ns, .. } => {
                if pulls.is_empty() || *repeats == 0 {
                    return Err(ErrorKind::Empty);
                }
                if !sample_ok(*sample) {
                    return Err(ErrorKind::BadSampleIndex);
                }
                check_wait(*rest_ns)?;
                check_wait(*settle_ns)?;
                pulls.len() as u64 * (u64::from(*lead) + u64::from(*repeats))
            }
        };
        if len > u64::from(MAX_CONVERSIONS) {
            return Err(ErrorKind::TooLarge);
        }
        let steps = Self { exp, timing, len: len as u32, gap_ns };
        // Every run ends in bounded time: a host waiting on a board must never wait for days.
        if steps.nominal_ps() > MAX_RUN_PS {
            return Err(ErrorKind::TooLarge);
        }
        Ok(steps)
    }

    /// Number of conversions.
    pub fn len(&self) -> u32 {
        self.len
    }

    /// True when there are no steps (never, for a validated experiment).
    pub fn is_empty(&self) -> bool {
        self.len == 0
    }

    /// Idle time before the first conversion, ns.
    pub fn settle_ns(&self) -> u32 {
        match *self.exp {
            Experiment::PrechargeSweep { settle_ns, .. }
            | Experiment::OrderSwap { settle_ns, .. }
            | Experiment::RepeatBurst { settle_ns, .. }
            | Experiment::PeriodSweep { settle_ns, .. }
            | Experiment::NoiseRecord { settle_ns, .. }
            | Experiment::ScanRecord { settle_ns, .. }
            | Experiment::PullTest { settle_ns, .. } => settle_ns,
        }
    }

    /// Number of aggregate cells (0 for a noise or scan record).
    pub fn cells(&self) -> u16 {
        self.exp.cells()
    }

    /// Number of raw samples (0 unless a noise or scan record).
    pub fn raw_samples(&self) -> u16 {
        self.exp.raw_samples()
    }

    /// Channels the experiment converts: (channels under test, channels used as precharge).
    pub fn channels(&self) -> (heapless::Vec<u8, MAX_CHANNELS>, &'a [u8]) {
        let one = |c: u8| heapless::Vec::from_slice(&[c]).unwrap_or_default();
        match self.exp {
            Experiment::PrechargeSweep { target, precharges, .. } => (one(*target), precharges.as_slice()),
            Experiment::OrderSwap { a, b, .. } => (heapless::Vec::from_slice(&[*a, *b]).unwrap_or_default(), &[]),
            Experiment::RepeatBurst { target, precharge, .. } | Experiment::PeriodSweep { target, precharge, .. } => {
                (one(*target), core::slice::from_ref(precharge))
            }
            Experiment::NoiseRecord { target, .. } | Experiment::PullTest { target, .. } => (one(*target), &[]),
            Experiment::ScanRecord { targets, precharge, .. } => (targets.clone(), core::slice::from_ref(precharge)),
        }
    }

    /// Nominal duration of the whole experiment (settle, conversions and waits), ps.
    pub fn nominal_ps(&self) -> u64 {
        let mut t = u64::from(self.settle_ns()) * 1000;
        for i in 0..self.len {
            let s = self.step(i);
            t += self.timing.busy_ps(s.sample) + u64::from(s.wait_after_ns) * 1000;
        }
        t
    }

    /// Step `i` (`i < len()`).
    pub fn step(&self, i: u32) -> Step {
        debug_assert!(i < self.len);
        match self.exp {
            Experiment::PrechargeSweep { target, precharges, precharge_sample, samples, rest_ns, .. } => {
                let np = precharges.len() as u32;
                let block = samples.len() as u32 * np * 2;
                let j = i % block;
                let pair = j / 2;
                if j.is_multiple_of(2) {
                    Step::precharge(precharges[(pair % np) as usize], *precharge_sample)
                } else {
                    Step::unpulled(*target, samples[(pair / np) as usize], *rest_ns, StepRecord::Cell(pair as u16))
                }
            }
            Experiment::OrderSwap { a, b, sample, repeats, rest_ns, .. } => {
                let first_phase = i < 2 * u32::from(*repeats);
                let second = i % 2 == 1;
                let channel = if first_phase && !second { *a } else { *b };
                let cell = if first_phase { 0 } else { 2 } + u16::from(second);
                Step::unpulled(channel, *sample, if second { *rest_ns } else { 0 }, StepRecord::Cell(cell))
            }
            Experiment::RepeatBurst { target, precharge, precharge_sample, sample, length, rest_ns, .. } => {
                let block = u32::from(*length) + 1;
                let j = i % block;
                if j == 0 {
                    Step::precharge(*precharge, *precharge_sample)
                } else {
                    Step::unpulled(
                        *target,
                        *sample,
                        if j == block - 1 { *rest_ns } else { 0 },
                        StepRecord::Cell((j - 1) as u16),
                    )
                }
            }
            Experiment::PeriodSweep { target, precharge, precharge_sample, sample, repeats, .. } => {
                let per = 2 * u32::from(*repeats);
                let p = (i / per) as usize;
                if i.is_multiple_of(2) {
                    Step::precharge(*precharge, *precharge_sample)
                } else {
                    Step::unpulled(*target, *sample, self.gap_ns[p], StepRecord::Cell(p as u16))
                }
            }
            Experiment::PullTest { target, pulls, sample, lead, repeats, rest_ns, .. } => {
                let per = u32::from(*lead) + u32::from(*repeats);
                let (k, j) = (i / per, i % per);
                Step {
                    channel: *target,
                    sample: *sample,
                    wait_after_ns: *rest_ns,
                    record: if j < u32::from(*lead) { StepRecord::None } else { StepRecord::Cell(k as u16) },
                    pull: pulls[k as usize],
                }
            }
            Experiment::NoiseRecord { target, sample, .. } => {
                Step::unpulled(*target, *sample, self.gap_ns[0], StepRecord::Raw(i as u16))
            }
            Experiment::ScanRecord { targets, precharge, precharge_sample, sample, .. } => {
                let n = targets.len() as u32;
                let (round, j) = (i / (2 * n), i % (2 * n));
                let k = j / 2;
                if j.is_multiple_of(2) {
                    Step::precharge(*precharge, *precharge_sample)
                } else {
                    Step::unpulled(
                        targets[k as usize],
                        *sample,
                        if k == n - 1 { self.gap_ns[0] } else { 0 },
                        StepRecord::Raw((round * n + k) as u16),
                    )
                }
            }
        }
    }

    /// All steps in order.
    pub fn iter(&self) -> impl Iterator<Item = Step> + '_ {
        (0..self.len).map(move |i| self.step(i))
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use heapless::Vec;

    const SAMPLE_PS: [u32; 3] = [100_000, 500_000, 2_000_000];
    const T: Timing = Timing { sample_ps: &SAMPLE_PS, conversion_ps: 600_000 };

    #[test]
    fn a_pull_test_settles_then_records_each_setting_with_its_pull() {
        let exp = Experiment::PullTest {
            target: 5,
            pulls: Vec::from_slice(&[None, Some(Pull::Up), Some(Pull::Down)]).unwrap(),
            sample: 2,
            lead: 2,
            repeats: 3,
            rest_ns: 10_000,
            settle_ns: 1_000,
        };
        let s = Steps::new(&exp, T).unwrap();
        assert_eq!((s.len(), s.cells()), (15, 3));
        let v: std::vec::Vec<Step> = s.iter().collect();
        assert!(v.iter().all(|st| st.channel == 5 && st.sample == 2 && st.wait_after_ns == 10_000));
        let shape: std::vec::Vec<(StepRecord, Option<Pull>)> = v.iter().map(|st| (st.record, st.pull)).collect();
        let setting = |k: u16, p: Option<Pull>| {
            [
                (StepRecord::None, p),
                (StepRecord::None, p),
                (StepRecord::Cell(k), p),
                (StepRecord::Cell(k), p),
                (StepRecord::Cell(k), p),
            ]
        };
        let want: std::vec::Vec<_> =
            [setting(0, None), setting(1, Some(Pull::Up)), setting(2, Some(Pull::Down))].concat();
        assert_eq!(shape, want);
        // 15 × (2 µs + 0.6 µs + 10 µs) after a 1 µs settle.
        assert_eq!(s.nominal_ps(), 1_000_000 + 15 * (2_000_000 + 600_000 + 10_000_000));
        let mut empty = exp.clone();
        if let Experiment::PullTest { pulls, .. } = &mut empty {
            pulls.clear();
        }
        assert_eq!(Steps::new(&empty, T).unwrap_err(), ErrorKind::Empty);
    }

    #[test]
    fn precharge_sweep_alternates_precharge_and_target() {
        let exp = Experiment::PrechargeSweep {
            target: 3,
            precharges: Vec::from_slice(&[16, 17]).unwrap(),
            precharge_sample: 2,
            samples: Vec::from_slice(&[0, 1]).unwrap(),
            repeats: 2,
            rest_ns: 700,
            settle_ns: 5,
        };
        let s = Steps::new(&exp, T).unwrap();
        assert_eq!(s.len(), 16);
        assert_eq!(s.cells(), 4);
        let v: std::vec::Vec<_> = s.iter().collect();
        assert_eq!(v[0], Step { channel: 16, sample: 2, wait_after_ns: 0, record: StepRecord::None, pull: None });
        assert_eq!(v[1], Step { channel: 3, sample: 0, wait_after_ns: 700, record: StepRecord::Cell(0), pull: None });
        assert_eq!(v[2].channel, 17);
        assert_eq!(v[3].record, StepRecord::Cell(1));
        assert_eq!(v[5], Step { channel: 3, sample: 1, wait_after_ns: 700, record: StepRecord::Cell(2), pull: None });
        assert_eq!(v[9], v[1], "second repeat repeats the first");
    }

    #[test]
    fn period_sweep_waits_the_rest_of_the_period() {
        let exp = Experiment::PeriodSweep {
            target: 1,
            precharge: 16,
            precharge_sample: 2,
            sample: 0,
            periods_ns: Vec::from_slice(&[1_000, 10_000]).unwrap(),
            repeats: 3,
            settle_ns: 0,
        };
        let s = Steps::new(&exp, T).unwrap();
        // busy = (2.0 + 0.6) + (0.1 + 0.6) µs = 3.3 µs: the 1 µs period runs back to back.
        assert_eq!(s.step(1).wait_after_ns, 0);
        assert_eq!(
            s.step(7),
            Step { channel: 1, sample: 0, wait_after_ns: 6_700, record: StepRecord::Cell(1), pull: None }
        );
        assert_eq!(s.nominal_ps(), 6 * 3_300_000 + 3 * 6_700_000);
    }

    #[test]
    fn scan_record_reads_each_target_after_the_precharge_once_per_round_then_waits() {
        let exp = Experiment::ScanRecord {
            targets: Vec::from_slice(&[4, 1, 7]).unwrap(),
            precharge: 16,
            precharge_sample: 0,
            sample: 1,
            period_ns: 10_000,
            count: 3,
            settle_ns: 0,
        };
        let s = Steps::new(&exp, T).unwrap();
        assert_eq!((s.len(), s.raw_samples(), s.cells()), (18, 9, 0));
        let v: std::vec::Vec<_> = s.iter().collect();
        let order: std::vec::Vec<u8> = v.iter().map(|x| x.channel).collect();
        assert_eq!(order, [16, 4, 16, 1, 16, 7].repeat(3));
        let raw: std::vec::Vec<StepRecord> = v.iter().skip(1).step_by(2).map(|x| x.record).collect();
        assert_eq!(raw, (0..9).map(StepRecord::Raw).collect::<std::vec::Vec<_>>(), "round by round, target by target");
        assert!(v.iter().step_by(2).all(|x| x.record == StepRecord::None && x.sample == 0));
        // A round is 3 × ((0.1 + 0.6) + (0.5 + 0.6)) µs = 5.4 µs busy: the rest of the 10 µs
        // period follows its last reading.
        assert_eq!(v[3].wait_after_ns, 0);
        assert_eq!(v[5].wait_after_ns, 4_600);
        assert_eq!(s.nominal_ps(), 3 * 10_000_000);
        assert_eq!(s.channels().1, [16]);
        // Every code of every round must fit the board's raw buffer.
        let big = Experiment::ScanRecord {
            targets: Vec::from_slice(&[0, 1]).unwrap(),
            precharge: 16,
            precharge_sample: 0,
            sample: 0,
            period_ns: 1,
            count: MAX_RAW_SAMPLES / 2 + 1,
            settle_ns: 0,
        };
        assert_eq!(Steps::new(&big, T).unwrap_err(), ErrorKind::TooLarge);
        let none = Experiment::ScanRecord {
            targets: Vec::new(),
            precharge: 16,
            precharge_sample: 0,
            sample: 0,
            period_ns: 1,
            count: 4,
            settle_ns: 0,
        };
        assert_eq!(Steps::new(&none, T).unwrap_err(), ErrorKind::Empty);
    }

    #[test]
    fn order_swap_cells() {
        let exp = Experiment::OrderSwap { a: 2, b: 5, sample: 1, repeats: 2, rest_ns: 10, settle_ns: 0 };
        let s = Steps::new(&exp, T).unwrap();
        let ch: std::vec::Vec<_> = s.iter().map(|x| (x.channel, x.record)).collect();
        use StepRecord::Cell;
        assert_eq!(
            ch,
            [
                (2, Cell(0)),
                (5, Cell(1)),
                (2, Cell(0)),
                (5, Cell(1)),
                (5, Cell(2)),
                (5, Cell(3)),
                (5, Cell(2)),
                (5, Cell(3))
            ]
        );
    }

    #[test]
    fn bad_parameters_are_refused() {
        let burst = |length, sample| Experiment::RepeatBurst {
            target: 0,
            precharge: 1,
            precharge_sample: 0,
            sample,
            length,
            repeats: 4,
            rest_ns: 0,
            settle_ns: 0,
        };
        assert_eq!(Steps::new(&burst(0, 0), T).unwrap_err(), ErrorKind::Empty);
        assert_eq!(Steps::new(&burst(4, 3), T).unwrap_err(), ErrorKind::BadSampleIndex);
        assert_eq!(Steps::new(&burst(MAX_BURST + 1, 0), T).unwrap_err(), ErrorKind::TooLarge);
        let big =
            Experiment::NoiseRecord { target: 0, sample: 0, period_ns: 1, count: MAX_RAW_SAMPLES + 1, settle_ns: 0 };
        assert_eq!(Steps::new(&big, T).unwrap_err(), ErrorKind::TooLarge);
        let long = Experiment::OrderSwap { a: 0, b: 1, sample: 0, repeats: u16::MAX, rest_ns: 0, settle_ns: 0 };
        assert_eq!(Steps::new(&long, T).unwrap_err(), ErrorKind::TooLarge);
        // 4096 pairs with 1 s rest each: too many conversions for no, too long for yes.
        let slow = Experiment::OrderSwap { a: 0, b: 1, sample: 0, repeats: 4096, rest_ns: 1_000_000_000, settle_ns: 0 };
        assert_eq!(Steps::new(&slow, T).unwrap_err(), ErrorKind::TooLarge);
    }
}
