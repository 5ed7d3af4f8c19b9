//! Per-unit calibration: the unit's hold capacitance and switch resistance from fixture pins
//! of known resistance, and the converter values later runs of the unit are analysed with.
//!
//! A datasheet gives the hold capacitor and the switch to ±20–30% or as a maximum; every source
//! resistance the fit reports leans on them. A calibration run surveys fixture pins (resistors of
//! known value from a stiff source to the pin) and fits both values jointly over all of them
//! ([`crate::fit::calibrate`]); the result is stored per unit, and [`apply`] turns it into the
//! profile later surveys and checks of that unit use, with the calibration's own uncertainty as
//! the tolerance.

use crate::analyse::{board_model, pin_evidence};
use crate::fit::{self, Calibration, Fixture};
use crate::record::{Profile, RunRecord};
use crate::store::{CalibrationSummary, FixtureSummary};

/// Largest χ²/dof of the joint fit that is stored as a calibration: beyond it the readings do
/// not fit resistors of the stated values (a wrong value, a fixture wired to another pin, a
/// source that is not stiff), and a calibration from them would move every later result. A
/// good calibration fits to about 1 (0.72 on the simulated off-datasheet logger); a 10 kΩ
/// fixture declared as 33 kΩ gave 3.6.
pub const MAX_CHI2_PER_DOF: f64 = 2.0;

/// Smallest node capacitance of a fixture pin the calibration accepts, F: a pin's own
/// capacitance is a few picofarads (common practice, no source), so a fit that needs less has
/// bent the node to explain a fixture that is not what it was said to be.
pub const MIN_FIXTURE_NODE_FARADS: f64 = 0.5e-12;

/// A fixture pin: a resistor of known value between a stiff source and the pin.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct FixtureSpec {
    /// Channel.
    pub channel: u8,
    /// The resistor, Ω.
    pub ohms: f64,
    /// Its ±2σ relative tolerance (0.01 for a 1% part).
    pub tolerance: f64,
}

/// Why a calibration run gave no calibration.
#[derive(Debug, Clone, PartialEq)]
pub enum CalibrationError {
    /// A fixture pin was not fully measured (the run was cut short).
    NotMeasured(u8),
    /// A fixture pin reads at a rail: no resistor to a source within range is on it.
    AtRail(u8),
    /// The fit found no optimum.
    NoFit,
    /// The readings do not fit resistors of the stated values.
    PoorFit {
        /// χ²/dof of the joint fit.
        chi2_per_dof: f64,
    },
    /// The fit explained the readings only with a value no real board has (a fixture's node
    /// below [`MIN_FIXTURE_NODE_FARADS`], the hold capacitor or switch at the end of the search).
    Implausible(String),
}

impl std::fmt::Display for CalibrationError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            CalibrationError::NotMeasured(ch) => {
                write!(f, "fixture ch{ch} was not fully measured: calibrate again once the link holds")
            }
            CalibrationError::AtRail(ch) => write!(
                f,
                "fixture ch{ch} reads at a rail: wire its resistor from a source between the rails (see the README's \
                 fixture wiring)"
            ),
            CalibrationError::NoFit => f.write_str("the fixture readings could not be fitted"),
            CalibrationError::Implausible(what) => write!(
                f,
                "the fixture readings fit only with {what}, which no real board has: check each fixture's value, \
                 that it is on the channel named, and that its source is stiff; nothing was stored as a calibration"
            ),
            CalibrationError::PoorFit { chi2_per_dof } => write!(
                f,
                "the fixture readings do not fit resistors of the stated values (χ²/dof {chi2_per_dof:.1}, at most \
                 {MAX_CHI2_PER_DOF} is accepted): check each fixture's value, that it is on the channel named, and \
                 that its source is stiff; nothing was stored as a calibration"
            ),
        }
    }
}

impl std::error::Error for CalibrationError {}

/// The joint calibration fit of a calibration run's fixture pins, under the profile the run
/// recorded (the board's own values: the prior's centre).
pub fn calibrate_record(record: &RunRecord, fixtures: &[FixtureSpec]) -> Result<Calibration, CalibrationError> {
    let model = board_model(record);
    let evidence = pin_evidence(record, &model);
    let mut inputs = Vec::new();
    for f in fixtures {
        let pin = evidence.iter().find(|p| p.channel == f.channel).ok_or(CalibrationError::NotMeasured(f.channel))?;
        if !pin.complete {
            return Err(CalibrationError::NotMeasured(f.channel));
        }
        if pin.rail.is_some() {
            return Err(CalibrationError::AtRail(f.channel));
        }
        inputs.push(Fixture { events: &pin.events, ohms: f.ohms, tolerance: f.tolerance });
    }
    let c = fit::calibrate(&model, &inputs).ok_or(CalibrationError::NoFit)?;
    let chi2_per_dof = if c.dof > 0 { c.chi2 / c.dof as f64 } else { f64::INFINITY };
    if chi2_per_dof > MAX_CHI2_PER_DOF {
        return Err(CalibrationError::PoorFit { chi2_per_dof });
    }
    for (f, &node) in fixtures.iter().zip(&c.node_farads) {
        if node < MIN_FIXTURE_NODE_FARADS {
            return Err(CalibrationError::Implausible(format!(
                "a node of {} on fixture ch{}",
                crate::units::farads(node),
                f.channel
            )));
        }
    }
    for (name, iv, nominal) in [
        ("hold capacitance", &c.hold_farads, model.hold_farads),
        ("switch resistance", &c.switch_ohms, model.switch_ohms),
    ] {
        let ratio = iv.estimate.unwrap_or(nominal) / nominal;
        if ratio.ln().abs() >= 0.99 * fit::CALIBRATION_LIMIT {
            return Err(CalibrationError::Implausible(format!("a {name} {ratio:.2}× the datasheet's")));
        }
    }
    Ok(c)
}

/// The calibration as the store keeps it.
pub fn summary(record: &RunRecord, fixtures: &[FixtureSpec], c: &Calibration, created: &str) -> CalibrationSummary {
    let three =
        |iv: &fit::Interval| [iv.estimate.unwrap_or(f64::NAN), iv.low.unwrap_or(f64::NAN), iv.high.unwrap_or(f64::NAN)];
    CalibrationSummary {
        run_id: record.run.id.clone(),
        board: record.run.board.clone(),
        unit_id: record.run.unit_id.clone(),
        created: created.to_string(),
        hold_farads: three(&c.hold_farads),
        switch_ohms: three(&c.switch_ohms),
        chi2: c.chi2,
        dof: c.dof as u64,
        fixtures: fixtures
            .iter()
            .zip(&c.node_farads)
            .map(|(f, &node_farads)| FixtureSummary {
                channel: f.channel,
                ohms: f.ohms,
                tolerance: f.tolerance,
                node_farads,
            })
            .collect(),
    }
}

/// The ±2σ relative tolerance of a value from its 95% interval: the interval's wider side.
fn tolerance_of([estimate, low, high]: [f64; 3]) -> f64 {
    ((high / estimate - 1.0).max(1.0 - low / estimate)).max(0.0)
}

/// `profile` with the unit's hold capacitance and switch resistance from calibration `c`, each
/// with the calibration's own uncertainty as its tolerance.
pub fn apply(profile: &Profile, c: &CalibrationSummary) -> Profile {
    Profile {
        hold_farads: c.hold_farads[0],
        hold_tolerance: tolerance_of(c.hold_farads),
        switch_ohms: c.switch_ohms[0],
        switch_tolerance: tolerance_of(c.switch_ohms),
        source: format!("calibration {}", c.run_id),
        ..profile.clone()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_tolerance_is_the_wider_side_of_the_interval() {
        assert!((tolerance_of([4e-12, 3.8e-12, 4.3e-12]) - 0.075).abs() < 1e-12);
        assert!((tolerance_of([4e-12, 3.6e-12, 4.1e-12]) - 0.1).abs() < 1e-12);
    }
}
