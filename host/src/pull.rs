//! The pull test's source resistance: the pin's source against the board's own pull, as a
//! voltage divider.
//!
//! With the pull `Rp` to the supply `Vsup` the node settles at `(Vs·Rp + Vsup·Rs)/(Rs + Rp)`;
//! pulled to ground at `Vs·Rp/(Rs + Rp)`. Their difference is `Vsup·Rs/(Rs + Rp)` whatever the
//! source voltage is, so `x = (Vup − Vdown)/Vsup = Rs/(Rs + Rp)` and `Rs = Rp·x/(1 − x)` (the
//! voltage-divider rule; common practice, no source). The pull is known only to its tolerance
//! (±20% on the nRF52840's ladder), which enters the interval as the log-normal spread it is.

use crate::fit::{Interval, Z95};

/// One pulled level as read: mean and standard error of the mean, V.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Level {
    /// Mean, V.
    pub volts: f64,
    /// Standard error of the mean, V (noise over the count, plus what the model leaves out).
    pub se_volts: f64,
}

/// The board's pull as its profile states it.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct PullProfile {
    /// Nominal resistance, Ω.
    pub ohms: f64,
    /// ±2σ relative tolerance.
    pub tolerance: f64,
    /// The voltage the pull-up goes to, V (pull-down: ground).
    pub supply_volts: f64,
}

/// Where `x = Rs/(Rs + Rp)` must lie, in standard errors, for the divider to say more than a
/// bound: near 0 the source is too stiff for the pull to move it, near 1 too weak to hold
/// against it.
const RESOLVED_SIGMAS: f64 = 2.0 * Z95;

/// The source resistance from the levels pulled up and down, with its 95% interval; a bound
/// where the divider barely moves (`Rs ≪ Rp`: "at most"; `Rs ≫ Rp`: "at least").
pub fn source_ohms(up: Level, down: Level, pull: &PullProfile) -> Interval {
    let x = (up.volts - down.volts) / pull.supply_volts;
    let sx = up.se_volts.hypot(down.se_volts) / pull.supply_volts;
    // ±t as 2σ, on the wider side in log: −20% is ln 0.8 = −0.22, +20% only ln 1.2 = +0.18.
    let sd_ln_rp = -(1.0 - pull.tolerance.min(0.9)).ln() / 2.0;
    let rs = |x: f64| pull.ohms * x / (1.0 - x);
    // The bound of a barely moved divider: x's 95% end, and the pull at its own 95% end.
    if x < RESOLVED_SIGMAS * sx {
        let hi = (x + Z95 * sx).clamp(0.0, 1.0 - 1e-12);
        return Interval { estimate: None, low: None, high: Some(rs(hi) * (Z95 * sd_ln_rp).exp()) };
    }
    if 1.0 - x < RESOLVED_SIGMAS * sx {
        let lo = (x - Z95 * sx).clamp(1e-12, 1.0);
        return Interval { estimate: None, low: Some(rs(lo) * (-Z95 * sd_ln_rp).exp()), high: None };
    }
    // ln Rs = ln Rp + ln(x/(1 − x)); d/dx ln(x/(1 − x)) = 1/(x(1 − x)).
    let sd = sd_ln_rp.hypot(sx / (x * (1.0 - x)));
    let est = rs(x);
    Interval { estimate: Some(est), low: Some(est * (-Z95 * sd).exp()), high: Some(est * (Z95 * sd).exp()) }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The divider's levels for a source `vs` behind `rs` against a pull `rp` to `vsup`.
    fn levels(vs: f64, rs: f64, rp: f64, vsup: f64, se: f64) -> (Level, Level) {
        let up = (vs * rp + vsup * rs) / (rs + rp);
        let down = vs * rp / (rs + rp);
        (Level { volts: up, se_volts: se }, Level { volts: down, se_volts: se })
    }

    const NRF: PullProfile = PullProfile { ohms: 160e3, tolerance: 0.2, supply_volts: 3.0 };

    #[test]
    fn the_divider_gives_the_source_back_whatever_its_voltage() {
        for rs in [20e3, 200e3, 2e6] {
            for vs in [0.2, 1.5, 2.8] {
                let (up, down) = levels(vs, rs, NRF.ohms, NRF.supply_volts, 1e-4);
                let iv = source_ohms(up, down, &NRF);
                let est = iv.estimate.unwrap();
                assert!((est / rs - 1.0).abs() < 1e-9, "{rs} Ω at {vs} V: {est}");
                // The pull's ±20% (2σ) sets the interval: about ±22% around the estimate (×1.55 wide).
                let (lo, hi) = (iv.low.unwrap(), iv.high.unwrap());
                assert!(lo < rs && rs < hi && hi / lo < 1.6, "{rs} Ω: {lo}–{hi}");
            }
        }
    }

    #[test]
    fn a_pull_off_its_nominal_value_stays_inside_the_interval_within_its_tolerance() {
        // The unit's real pull 18% below nominal (inside ±20%): the estimate moves by as much,
        // and the interval still holds the truth.
        let (up, down) = levels(1.2, 300e3, 0.82 * NRF.ohms, NRF.supply_volts, 1e-4);
        let iv = source_ohms(up, down, &NRF);
        assert!(iv.low.unwrap() < 300e3 && 300e3 < iv.high.unwrap(), "{iv:?}");
    }

    #[test]
    fn a_divider_that_barely_moves_is_a_bound() {
        // 100 Ω against 160 kΩ moves the node by 1.9 mV, below twice its own resolution here.
        let (up, down) = levels(1.5, 100.0, NRF.ohms, NRF.supply_volts, 1e-3);
        let iv = source_ohms(up, down, &NRF);
        assert_eq!((iv.estimate, iv.low), (None, None), "{iv:?}");
        assert!(iv.high.unwrap() > 100.0, "{iv:?}");
        // 1 GΩ: the pull takes the node to the rails.
        let (up, down) = levels(1.5, 1e9, NRF.ohms, NRF.supply_volts, 1e-3);
        let iv = source_ohms(up, down, &NRF);
        assert_eq!((iv.estimate, iv.high), (None, None), "{iv:?}");
        assert!(iv.low.unwrap() < 1e9, "{iv:?}");
    }
}
