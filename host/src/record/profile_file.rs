//! Profile files: other converter values for `refit --profile FILE` (a calibration, a corrected
//! datasheet figure). TOML, every key optional, the names of the record's `profile` object:
//!
//! ```toml
//! # hold capacitor and switch from a calibration of unit 0042
//! hold_farads = 4.3e-12
//! hold_tolerance = 0.05
//! switch_ohms = 5.1e3
//! ```

use super::Profile;
use serde::Deserialize;

/// A profile file that could not be used.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct ProfileFileError {
    /// File name.
    pub file: String,
    /// 1-based line, when known.
    pub line: Option<usize>,
    /// What is wrong and what to do.
    pub message: String,
}

impl std::fmt::Display for ProfileFileError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self.line {
            Some(l) => write!(f, "{}:{l}: {}", self.file, self.message),
            None => write!(f, "{}: {}", self.file, self.message),
        }
    }
}

impl std::error::Error for ProfileFileError {}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct FileToml {
    vref_volts: Option<toml::Spanned<f64>>,
    sample_ps: Option<toml::Spanned<Vec<u32>>>,
    conversion_ps: Option<toml::Spanned<u32>>,
    hold_farads: Option<toml::Spanned<f64>>,
    hold_tolerance: Option<toml::Spanned<f64>>,
    switch_ohms: Option<toml::Spanned<f64>>,
    switch_tolerance: Option<toml::Spanned<f64>>,
    adc_noise_lsb: Option<toml::Spanned<f64>>,
    leakage_amps: Option<toml::Spanned<f64>>,
}

/// `profile` with the values a profile file gives replaced. `file` names it in errors and in
/// the new profile's `source`.
pub fn apply(profile: &Profile, file: &str, text: &str) -> Result<Profile, ProfileFileError> {
    let line_of = |span: std::ops::Range<usize>| {
        Some(text.as_bytes()[..span.start.min(text.len())].iter().filter(|&&b| b == b'\n').count() + 1)
    };
    let err = |span: Option<std::ops::Range<usize>>, message: String| ProfileFileError {
        file: file.into(),
        line: span.and_then(line_of),
        message,
    };
    let f: FileToml =
        toml::from_str(text).map_err(|e| err(e.span(), crate::scenario::plain_words(e.message().trim())))?;
    let mut p = profile.clone();
    let positive =
        |v: &Option<toml::Spanned<f64>>, name: &str, zero_ok: bool| -> Result<Option<f64>, ProfileFileError> {
            match v {
                None => Ok(None),
                Some(s) if s.get_ref().is_finite() && (*s.get_ref() > 0.0 || zero_ok && *s.get_ref() == 0.0) => {
                    Ok(Some(*s.get_ref()))
                }
                Some(s) => Err(err(
                    Some(s.span()),
                    format!("{name} must be a {} number (SI units)", if zero_ok { "non-negative" } else { "positive" }),
                )),
            }
        };
    if let Some(v) = positive(&f.vref_volts, "vref_volts", false)? {
        p.vref_volts = v;
    }
    if let Some(v) = positive(&f.hold_farads, "hold_farads", false)? {
        p.hold_farads = v;
    }
    if let Some(v) = positive(&f.hold_tolerance, "hold_tolerance", true)? {
        p.hold_tolerance = v;
    }
    if let Some(v) = positive(&f.switch_ohms, "switch_ohms", false)? {
        p.switch_ohms = v;
    }
    if let Some(v) = positive(&f.switch_tolerance, "switch_tolerance", true)? {
        p.switch_tolerance = v;
    }
    if let Some(v) = positive(&f.adc_noise_lsb, "adc_noise_lsb", true)? {
        p.adc_noise_lsb = v;
    }
    if let Some(v) = positive(&f.leakage_amps, "leakage_amps", true)? {
        p.leakage_amps = v;
    }
    if let Some(s) = f.sample_ps {
        let v = s.get_ref();
        if v.len() != profile.sample_ps.len() || v.windows(2).any(|w| w[0] >= w[1]) || v.first() == Some(&0) {
            return Err(err(
                Some(s.span()),
                format!(
                    "sample_ps must list {} rising sample times in picoseconds, one per setting the board has",
                    profile.sample_ps.len()
                ),
            ));
        }
        p.sample_ps = v.clone();
    }
    if let Some(s) = f.conversion_ps {
        if *s.get_ref() == 0 {
            return Err(err(Some(s.span()), "conversion_ps must be positive (picoseconds)".into()));
        }
        p.conversion_ps = *s.get_ref();
    }
    p.source = file.into();
    Ok(p)
}

/// Whether a profile file can be read at all (TOML, known keys, values in range), before any
/// board has described itself; only what depends on the board (the number of sample times) is
/// left for [`apply`].
pub fn check_syntax(file: &str, text: &str) -> Result<(), ProfileFileError> {
    let settings = toml::from_str::<FileToml>(text).ok().and_then(|f| f.sample_ps).map_or(0, |s| s.get_ref().len());
    let any = Profile {
        bits: 12,
        vref_volts: 3.3,
        sample_ps: (1..=settings as u32).collect(),
        conversion_ps: 1,
        hold_farads: 1e-12,
        hold_tolerance: 0.0,
        switch_ohms: 1.0,
        switch_tolerance: 0.0,
        adc_noise_lsb: 0.0,
        leakage_amps: 0.0,
        precharges: Vec::new(),
        source: String::new(),
    };
    apply(&any, file, text).map(|_| ())
}

#[cfg(test)]
mod tests {
    use super::*;

    fn base() -> Profile {
        Profile {
            bits: 12,
            vref_volts: 3.3,
            sample_ps: vec![100_000, 1_000_000],
            conversion_ps: 400_000,
            hold_farads: 4e-12,
            hold_tolerance: 0.3,
            switch_ohms: 6e3,
            switch_tolerance: 0.3,
            adc_noise_lsb: 0.5,
            leakage_amps: 1e-11,
            precharges: Vec::new(),
            source: "board".into(),
        }
    }

    #[test]
    fn values_given_replace_the_rest_stay() {
        let p = apply(&base(), "cal.toml", "# calibrated\nhold_farads = 4.3e-12\nswitch_ohms = 5100\n").unwrap();
        assert_eq!(p.hold_farads, 4.3e-12);
        assert_eq!(p.switch_ohms, 5100.0);
        assert_eq!(p.hold_tolerance, 0.3);
        assert_eq!(p.source, "cal.toml");
    }

    #[test]
    fn mistakes_name_the_file_and_line() {
        let e = apply(&base(), "cal.toml", "hold_farads = 4e-12\nhold_farad = 1\n").unwrap_err();
        assert_eq!(e.line, Some(2), "{e}");
        assert!(e.to_string().starts_with("cal.toml:2: "), "{e}");
        let e = apply(&base(), "cal.toml", "\n\nswitch_ohms = -3\n").unwrap_err();
        assert_eq!(e.line, Some(3), "{e}");
        assert!(e.message.contains("positive"), "{e}");
        let e = apply(&base(), "cal.toml", "sample_ps = [5, 3]\n").unwrap_err();
        assert!(e.message.contains("2 rising"), "{e}");
    }
}
