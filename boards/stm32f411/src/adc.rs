//! ADC1 of the STM32F411 at register level: one regular conversion at a time, each with its
//! own sample time (the channel's SMPx field is written before every conversion), so the
//! engine can choose the sample time per conversion. Register map from the STM32F411 reference
//! manual (RM0383, ADC chapter), as remembered; the offsets are the same on every STM32F4.

use crate::profile::{SAMPLE_CYCLES, TEMPERATURE_CHANNEL, VREFINT_CHANNEL};
use crate::reg;
use ohmsight_firmware::{AnalogFrontEnd, FrontEndError, FrontEndErrorKind};

const RCC_APB2ENR: usize = 0x4002_3844;
const RCC_APB2ENR_ADC1EN: u32 = 1 << 8;

const ADC1: usize = 0x4001_2000;
const SR: usize = ADC1;
const CR1: usize = ADC1 + 0x04;
const CR2: usize = ADC1 + 0x08;
const SMPR1: usize = ADC1 + 0x0c;
const SMPR2: usize = ADC1 + 0x10;
const SQR1: usize = ADC1 + 0x2c;
const SQR3: usize = ADC1 + 0x34;
const DR: usize = ADC1 + 0x4c;
const CCR: usize = 0x4001_2300 + 0x04;

const SR_EOC: u32 = 1 << 1;
const SR_OVR: u32 = 1 << 5;
const CR2_ADON: u32 = 1 << 0;
const CR2_SWSTART: u32 = 1 << 30;
/// ADC_CCR.ADCPRE = 01: PCLK2 / 4.
const CCR_ADCPRE_DIV4: u32 = 0b01 << 16;
const CCR_ADCPRE_MASK: u32 = 0b11 << 16;
const CCR_TSVREFE: u32 = 1 << 23;
const CCR_VBATE: u32 = 1 << 22;

/// Polls of the status register before a conversion counts as lost: the longest conversion
/// (480 + 12 cycles at 24 MHz, 20.5 µs) takes about 2,000 core cycles at 96 MHz; this is 100×.
const EOC_POLLS: u32 = 200_000;

/// Why a conversion failed.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum AdcError {
    /// Not a channel of ADC1 (0..=18).
    BadChannel,
    /// Past the sample-time table.
    BadSampleTime,
    /// End of conversion never came, or the data register was overrun.
    Timeout,
}

impl FrontEndError for AdcError {
    fn kind(&self) -> FrontEndErrorKind {
        match self {
            AdcError::BadChannel => FrontEndErrorKind::BadChannel,
            AdcError::BadSampleTime => FrontEndErrorKind::BadSampleTime,
            AdcError::Timeout => FrontEndErrorKind::Timeout,
        }
    }
}

/// ADC1, owned: nothing else in the image touches its registers.
pub struct Adc1 {
    _private: (),
}

impl Adc1 {
    /// Clocks and powers ADC1: 12 bits, right-aligned, one regular conversion per start,
    /// PCLK2/4, VREFINT and the temperature sensor on.
    ///
    /// # Safety
    /// ADC1 and the ADC common registers must not be used by anything else.
    pub unsafe fn new() -> Self {
        reg::modify(RCC_APB2ENR, |v| v | RCC_APB2ENR_ADC1EN);
        let _ = reg::read(RCC_APB2ENR); // the clock is on before the first ADC access
        reg::modify(CCR, |v| (v & !(CCR_ADCPRE_MASK | CCR_VBATE)) | CCR_ADCPRE_DIV4 | CCR_TSVREFE);
        reg::write(CR1, 0); // 12 bits, no scan, no interrupts
        reg::write(SQR1, 0); // one conversion in the regular sequence
        reg::write(CR2, CR2_ADON); // right-aligned, single conversion
                                   // t_STAB (ADC power-up) is at most 3 µs and the temperature sensor's start-up 10 µs:
                                   // wait 20 µs at up to 100 MHz before the first conversion.
        cortex_m::asm::delay(2_000);
        Adc1 { _private: () }
    }

    /// Sample-time code `code` (0..=7) for `channel`.
    fn set_sample_time(channel: u8, code: u32) {
        let (addr, shift) =
            if channel < 10 { (SMPR2, 3 * u32::from(channel)) } else { (SMPR1, 3 * u32::from(channel - 10)) };
        // SAFETY: ADC1 is owned by this driver (see `new`).
        unsafe { reg::modify(addr, |v| (v & !(0b111 << shift)) | (code << shift)) };
    }
}

impl AnalogFrontEnd for Adc1 {
    type Error = AdcError;

    fn convert(&mut self, channel: u8, sample: u8) -> Result<u16, AdcError> {
        if channel > TEMPERATURE_CHANNEL.max(VREFINT_CHANNEL) {
            return Err(AdcError::BadChannel);
        }
        if usize::from(sample) >= SAMPLE_CYCLES.len() {
            return Err(AdcError::BadSampleTime);
        }
        Self::set_sample_time(channel, u32::from(sample));
        // SAFETY: ADC1 is owned by this driver (see `new`).
        unsafe {
            reg::write(SQR3, u32::from(channel));
            reg::write(SR, 0); // clear EOC and OVR
            reg::modify(CR2, |v| v | CR2_SWSTART);
            for _ in 0..EOC_POLLS {
                let sr = reg::read(SR);
                if sr & SR_OVR != 0 {
                    reg::write(SR, 0);
                    return Err(AdcError::Timeout);
                }
                if sr & SR_EOC != 0 {
                    // Reading DR clears EOC.
                    return Ok((reg::read(DR) & 0x0fff) as u16);
                }
            }
        }
        Err(AdcError::Timeout)
    }
}
