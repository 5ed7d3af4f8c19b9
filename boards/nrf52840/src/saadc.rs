//! The nRF52840 SAADC at register level: one single-ended conversion at a time on CH[0], each
//! with its own acquisition time (TACQ) and resistor-ladder setting (RESP), which the HAL fixes
//! when it is built. Register map from the nRF52840 Product Specification (SAADC chapter), as
//! remembered.

use crate::profile::{PINS, TACQ_MICROS, VDDHDIV5_CHANNEL, VDD_CHANNEL};
use crate::reg;
use ohmsight_firmware::{AnalogFrontEnd, FrontEndError, FrontEndErrorKind};
use ohmsight_protocol::{ErrorKind, Pull};

const SAADC: usize = 0x4000_7000;
const TASKS_START: usize = SAADC;
const TASKS_SAMPLE: usize = SAADC + 0x004;
const TASKS_STOP: usize = SAADC + 0x008;
const EVENTS_STARTED: usize = SAADC + 0x100;
const EVENTS_END: usize = SAADC + 0x104;
const EVENTS_STOPPED: usize = SAADC + 0x114;
const ENABLE: usize = SAADC + 0x500;
const CH0_PSELP: usize = SAADC + 0x510;
const CH0_PSELN: usize = SAADC + 0x514;
const CH0_CONFIG: usize = SAADC + 0x518;
const RESOLUTION: usize = SAADC + 0x5f0;
const OVERSAMPLE: usize = SAADC + 0x5f4;
const SAMPLERATE: usize = SAADC + 0x5f8;
const RESULT_PTR: usize = SAADC + 0x62c;
const RESULT_MAXCNT: usize = SAADC + 0x630;
const RESULT_AMOUNT: usize = SAADC + 0x634;

/// PSELP code of VDD.
const PSELP_VDD: u32 = 9;
/// PSELP code of VDDH/5.
const PSELP_VDDHDIV5: u32 = 0x0d;
/// CONFIG.GAIN = 1/6 (code 0) with REFSEL = internal 0.6 V (bit 12 clear): 3.6 V full scale.
const CONFIG_GAIN_1_6: u32 = 0 << 8;
/// Index of 10 µs in the TACQ table: the shortest VDDH/5 may use.
const TACQ_10US: u8 = 2;

/// Events polled before a conversion counts as lost: the longest (40 µs + 2 µs) is about 2,700
/// core cycles at 64 MHz; this is about 100×.
const EVENT_POLLS: u32 = 300_000;

/// The ladder setting of one conversion (CH[n].CONFIG.RESP).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Ladder {
    /// Bypass: nothing connected.
    None,
    /// Pull-down to ground.
    PullDown,
    /// Pull-up to VDD.
    PullUp,
    /// Both: the input held towards VDD/2.
    HalfVdd,
}

impl Ladder {
    fn from_pull(pull: Option<Pull>) -> Ladder {
        match pull {
            None => Ladder::None,
            Some(Pull::Up) => Ladder::PullUp,
            Some(Pull::Down) => Ladder::PullDown,
            Some(Pull::Half) => Ladder::HalfVdd,
        }
    }

    fn resp(self) -> u32 {
        match self {
            Ladder::None => 0,
            Ladder::PullDown => 1,
            Ladder::PullUp => 2,
            Ladder::HalfVdd => 3,
        }
    }
}

/// Why a conversion failed.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum SaadcError {
    /// Not an input of this board.
    BadChannel,
    /// Past the TACQ table, or too short for VDDH/5.
    BadSampleTime,
    /// The ladder on a pin not opted in for it.
    NotAllowed,
    /// An event never came.
    Timeout,
}

impl FrontEndError for SaadcError {
    fn kind(&self) -> FrontEndErrorKind {
        match self {
            SaadcError::BadChannel => FrontEndErrorKind::BadChannel,
            SaadcError::BadSampleTime => FrontEndErrorKind::BadSampleTime,
            SaadcError::Timeout => FrontEndErrorKind::Timeout,
            SaadcError::NotAllowed => FrontEndErrorKind::Other,
        }
    }
}

/// The SAADC, owned.
pub struct Saadc {
    result: &'static mut i16,
    /// The pin a pull test has pulled and its ladder setting; `None` when nothing is pulled.
    pulled: Option<(u8, Ladder)>,
}

fn wait_event(addr: usize) -> Result<(), SaadcError> {
    for _ in 0..EVENT_POLLS {
        // SAFETY: a SAADC event register; the SAADC is owned by `Saadc`.
        if unsafe { reg::read(addr) } != 0 {
            unsafe { reg::write(addr, 0) };
            return Ok(());
        }
    }
    Err(SaadcError::Timeout)
}

impl Saadc {
    /// 12 bits, no oversampling, one sample per SAMPLE task, result by EasyDMA into `result`.
    ///
    /// # Safety
    /// The SAADC must not be used by anything else.
    pub unsafe fn new(result: &'static mut i16) -> Self {
        // SAFETY: the caller owns the SAADC.
        unsafe {
            reg::write(RESOLUTION, 2);
            reg::write(OVERSAMPLE, 0);
            reg::write(SAMPLERATE, 0); // sampling by task
            reg::write(CH0_PSELN, 0); // single-ended
            reg::write(ENABLE, 1);
        }
        Saadc { result, pulled: None }
    }

    /// One conversion of `channel` with TACQ at `sample` and the ladder set to `ladder`.
    pub fn convert_with(&mut self, channel: u8, sample: u8, ladder: Ladder) -> Result<u16, SaadcError> {
        let pselp = match channel {
            0..=7 => u32::from(channel) + 1,
            VDD_CHANNEL => PSELP_VDD,
            VDDHDIV5_CHANNEL => PSELP_VDDHDIV5,
            _ => return Err(SaadcError::BadChannel),
        };
        if usize::from(sample) >= TACQ_MICROS.len() || (channel == VDDHDIV5_CHANNEL && sample < TACQ_10US) {
            return Err(SaadcError::BadSampleTime);
        }
        if ladder != Ladder::None && !PINS.iter().any(|p| p.channel == channel && p.may_pull) {
            return Err(SaadcError::NotAllowed);
        }
        let config = ladder.resp() | CONFIG_GAIN_1_6 | u32::from(sample) << 16;
        let ptr = core::ptr::addr_of_mut!(*self.result) as u32;
        // SAFETY: the SAADC is ours (see `new`); the result pointer is a static in RAM.
        unsafe {
            reg::write(CH0_PSELP, pselp);
            reg::write(CH0_CONFIG, config);
            reg::write(RESULT_PTR, ptr);
            reg::write(RESULT_MAXCNT, 1);
            for e in [EVENTS_STARTED, EVENTS_END, EVENTS_STOPPED] {
                reg::write(e, 0);
            }
            reg::write(TASKS_START, 1);
        }
        let done = wait_event(EVENTS_STARTED).and_then(|()| {
            // SAFETY: as above. Acquisition starts now and lasts TACQ; then the conversion.
            unsafe { reg::write(TASKS_SAMPLE, 1) };
            wait_event(EVENTS_END)
        });
        // SAFETY: as above; stopping leaves the input unselected until the next conversion.
        unsafe { reg::write(TASKS_STOP, 1) };
        let stopped = wait_event(EVENTS_STOPPED);
        done?;
        stopped?;
        // SAFETY: as above.
        if unsafe { reg::read(RESULT_AMOUNT) } != 1 {
            return Err(SaadcError::Timeout);
        }
        // SAFETY: EasyDMA finished writing the result (END came); read it as memory the
        // compiler did not see written.
        let raw = unsafe { core::ptr::read_volatile(core::ptr::addr_of!(*self.result)) };
        // Single-ended results can dip slightly below zero (offset): clamp to the code range.
        Ok(raw.clamp(0, 4095) as u16)
    }
}

impl AnalogFrontEnd for Saadc {
    type Error = SaadcError;
    fn convert(&mut self, channel: u8, sample: u8) -> Result<u16, SaadcError> {
        let ladder = match self.pulled {
            Some((pin, ladder)) if pin == channel => ladder,
            _ => Ladder::None,
        };
        self.convert_with(channel, sample, ladder)
    }

    /// The ladder is a setting of the channel's CONFIG, so a pull is kept here and applied to
    /// every conversion of the pulled pin until it is released.
    ///
    /// Not checked on hardware, and not settled from the Product Specification as remembered:
    /// whether the ladder holds the pin between conversions (the SAADC stopped) or only while the
    /// channel is acquiring. If only while acquiring, the node moves towards the divider's level
    /// a little with each conversion of the lead instead of resting there; the host's pull test
    /// repeats its pulled-up setting after the pulled-down one and makes no claim when the two
    /// disagree, so an unsettled node gives `unknown`, not a wrong resistance.
    fn set_pull(&mut self, channel: u8, pull: Option<Pull>) -> Result<(), ErrorKind> {
        if pull.is_none() {
            self.pulled = None;
            return Ok(());
        }
        if !PINS.iter().any(|p| p.channel == channel && p.may_pull) {
            return Err(ErrorKind::NotAllowed);
        }
        self.pulled = Some((channel, Ladder::from_pull(pull)));
        Ok(())
    }
}
