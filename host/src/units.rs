//! Engineering notation with units.

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
}
