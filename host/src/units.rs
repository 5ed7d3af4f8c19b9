//! Engineering notation with units: formatting, and reading values with SI prefixes.

/// Formats `value` with an SI prefix and `unit`, three significant digits.
pub fn si(value: f64, unit: &str) -> String {
    if !value.is_finite() {
        return format!("{value} {unit}");
    }
    if value == 0.0 {
        return format!("0 {unit}");
    }
    const PREFIXES: [(f64, &str); 11] = [
        (1e12, "T"),
        (1e9, "G"),
        (1e6, "M"),
        (1e3, "k"),
        (1.0, ""),
        (1e-3, "m"),
        (1e-6, "µ"),
        (1e-9, "n"),
        (1e-12, "p"),
        (1e-15, "f"),
        (1e-18, "a"),
    ];
    let a = value.abs();
    let (scale, prefix) = PREFIXES.iter().copied().find(|(s, _)| a >= *s * 0.9995).unwrap_or((1e-18, "a"));
    let v = value / scale;
    let digits = if v.abs() >= 99.95 {
        0
    } else if v.abs() >= 9.995 {
        1
    } else {
        2
    };
    format!("{v:.digits$} {prefix}{unit}")
}

/// Ohms.
pub fn ohms(v: f64) -> String {
    si(v, "Ω")
}

/// Farads.
pub fn farads(v: f64) -> String {
    si(v, "F")
}

/// Seconds given in nanoseconds.
pub fn ns(v: f64) -> String {
    si(v * 1e-9, "s")
}

/// Volts.
pub fn volts(v: f64) -> String {
    si(v, "V")
}

/// The columns `text` takes on a terminal: a wide (East Asian) character two, a combining mark
/// none (Unicode Standard Annex #11, as the `unicode-width` crate reads it).
pub fn width(text: &str) -> usize {
    unicode_width::UnicodeWidthStr::width(text)
}

/// `text` followed by spaces up to `columns` columns of display width.
pub fn pad(text: &str, columns: usize) -> String {
    format!("{text}{}", " ".repeat(columns.saturating_sub(width(text))))
}

/// A figure in LSB with three significant figures (`603 LSB`, `16.0 LSB`, `0.650 LSB`), and
/// at most three decimals: below 0.1 LSB the thousandths are what is left (`0.035 LSB`).
pub fn lsb(v: f64) -> String {
    let a = v.abs();
    let decimals = if a >= 99.95 {
        0
    } else if a >= 9.995 {
        1
    } else if a >= 0.9995 {
        2
    } else {
        3
    };
    let text = format!("{v:.decimals$}");
    // A tiny negative value rounds to zero: no "-0.000".
    let text = match text.strip_prefix('-') {
        Some(rest) if rest.chars().all(|c| c == '0' || c == '.') => rest.to_string(),
        _ => text,
    };
    format!("{text} LSB")
}

/// Reads a number with an optional SI prefix and unit, as people write values: `100u`,
/// `100 µV`, `100e-6`, `1M`, `25pF`, `115.2k`. `units` are the unit names allowed at the end
/// (longest first, e.g. `["ohms", "ohm", "Ω"]`). Prefixes: T G M k (or K) m u µ n p f; `m` is
/// milli and `M` mega. Any finite value, either sign; `None` when it is not such a number.
pub fn parse_si(text: &str, units: &[&str]) -> Option<f64> {
    let mut t = text.trim();
    for u in units {
        if let Some(s) = t.strip_suffix(u) {
            t = s.trim_end();
            break;
        }
    }
    // Powers of ten, so that `0.1m` is read as the decimal 0.1e-3 (the nearest double to 1e-4),
    // not 0.1 × 0.001 rounded twice.
    const PREFIXES: [(char, i32); 11] = [
        ('T', 12),
        ('G', 9),
        ('M', 6),
        ('k', 3),
        ('K', 3),
        ('m', -3),
        ('u', -6),
        ('µ', -6),
        ('n', -9),
        ('p', -12),
        ('f', -15),
    ];
    let (number, scale) = match t.chars().last() {
        Some(c) if c.is_alphabetic() && c != 'e' && c != 'E' => {
            let &(_, s) = PREFIXES.iter().find(|(p, _)| *p == c)?;
            (&t[..t.len() - c.len_utf8()], s)
        }
        _ => (t, 0),
    };
    let number = number.trim_end();
    // Rust's float parser takes "inf" and "nan"; a value option does not.
    if number.is_empty() || !number.starts_with(|c: char| c.is_ascii_digit() || "+-.".contains(c)) {
        return None;
    }
    let v: f64 = if scale == 0 {
        number.parse().ok()?
    } else if number.contains(['e', 'E']) {
        number.parse::<f64>().ok()? * 10f64.powi(scale)
    } else {
        format!("{number}e{scale}").parse().ok()?
    };
    v.is_finite().then_some(v)
}

/// Reads a whole count with an optional SI prefix (`115200`, `115.2k`, `1M`): a non-negative
/// integer that fits `u64`, or `None`.
pub fn parse_count(text: &str) -> Option<u64> {
    let v = parse_si(text, &[])?;
    // Within a part in 10^12 of an integer: `115.2k` is 115200 despite binary fractions.
    let r = v.round();
    (v >= 0.0 && (v - r).abs() <= 1e-12 * r.max(1.0) && r <= u64::MAX as f64).then_some(r as u64)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn prefixes_and_digits() {
        assert_eq!(ohms(4700.0), "4.70 kΩ");
        assert_eq!(ohms(1.5e6), "1.50 MΩ");
        assert_eq!(ohms(999.96), "1.00 kΩ");
        assert_eq!(farads(100e-9), "100 nF");
        assert_eq!(farads(4e-12), "4.00 pF");
        assert_eq!(ns(142.857), "143 ns");
        assert_eq!(ns(22857.0), "22.9 µs");
        assert_eq!(volts(0.0), "0 V");
        assert_eq!(volts(-0.0123), "-12.3 mV");
    }

    #[test]
    fn pads_by_display_width() {
        // Widths per UAX #11: CJK ideographs are wide (W), é as e + U+0301 has a zero-width mark.
        assert_eq!(width("土壌"), 4);
        assert_eq!(width("e\u{301}"), 1);
        assert_eq!(width("µΩ"), 2);
        assert_eq!(pad("土壌", 6), "土壌  ");
        assert_eq!(pad("e\u{301}", 3), "e\u{301}  ");
        assert_eq!(pad("long", 2), "long");
    }

    #[test]
    fn lsb_figures_have_three_significant_figures() {
        assert_eq!(lsb(603.32), "603 LSB");
        assert_eq!(lsb(-931.03), "-931 LSB");
        assert_eq!(lsb(16.04), "16.0 LSB");
        assert_eq!(lsb(3.594), "3.59 LSB");
        assert_eq!(lsb(0.65), "0.650 LSB");
        assert_eq!(lsb(0.99951), "1.00 LSB");
        assert_eq!(lsb(9.996), "10.0 LSB");
        assert_eq!(lsb(0.0354), "0.035 LSB");
        assert_eq!(lsb(-1.7e-10), "0.000 LSB");
        assert_eq!(lsb(0.0), "0.000 LSB");
    }

    #[test]
    fn reads_values_with_si_prefixes_and_units() {
        // SI prefixes as defined by the BIPM SI Brochure (9th ed., table 7).
        let close = |a: Option<f64>, b: f64| a.is_some_and(|a| (a - b).abs() <= 1e-12 * b.abs());
        assert!(close(parse_si("100u", &["V"]), 100e-6));
        assert!(close(parse_si("100 µV", &["V"]), 100e-6));
        assert!(close(parse_si("100e-6", &["V"]), 100e-6));
        assert!(close(parse_si("1M", &["Ω"]), 1e6));
        assert!(close(parse_si("1m", &["Ω"]), 1e-3));
        assert!(close(parse_si("10MΩ", &["Ω"]), 10e6));
        assert!(close(parse_si("25pF", &["F"]), 25e-12));
        assert!(close(parse_si("4.7k", &[]), 4700.0));
        assert!(close(parse_si("-2.5m", &["V"]), -2.5e-3));
        for bad in ["", "u", "1x", "lots", "inf", "nan", "1e400", "1..2k", "k1"] {
            assert_eq!(parse_si(bad, &["V"]), None, "{bad}");
        }
        assert_eq!(parse_count("115200"), Some(115_200));
        assert_eq!(parse_count("115.2k"), Some(115_200));
        assert_eq!(parse_count("1M"), Some(1_000_000));
        assert_eq!(parse_count("0"), Some(0));
        for bad in ["1.5", "-3", "2u", "many"] {
            assert_eq!(parse_count(bad), None, "{bad}");
        }
    }
}
