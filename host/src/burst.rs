//! The loading burst: a stiff reading put to the test.
//!
//! A pin whose readings do not move under a survey's conversions is either a small source
//! resistance or a node capacitor too large for those conversions to move; the fit bounds the
//! source under an assumed largest node ([`crate::fit::STIFF_NODE_FARADS`]). An open pin behind a
//! few microfarads satisfies the readings as well, and would be called driven.
//!
//! The burst tells them apart by loading the node far harder: thousands of back-to-back
//! [far precharge, pin] pairs, each taking `Ch·(Vn − Vfar)` of charge from the node, in
//! [`BLOCKS`] consecutive blocks of about [`BLOCK_S`]. A source within the bound's assumption
//! (`Rs` below the bound, node below the assumed size: a time constant of milliseconds) settles
//! to its switched-capacitor equilibrium in the first blocks and holds there; an open node keeps
//! drifting toward the precharge, by `Ch/Cn` of the difference per pair, for as long as the burst
//! lasts. The statistic is the drift toward the precharge between the middle third of the
//! blocks and the last third, compared with the most that any network within the assumption
//! produces (simulated with the same forward model as the fit).

use crate::model::{predict, BoardModel, CellObs, Event, PinParams};
use crate::plan::Plan;
use heapless::Vec as HVec;
use ohmsight_protocol::{Experiment, MAX_CONVERSIONS, MAX_PERIODS};

/// Blocks of the burst (cells of its period sweep).
pub const BLOCKS: usize = 12;
/// Length of one block, s. The drift of a large open node grows with the burst while its
/// standard error hardly falls (the model's floor sets most of it), so the largest open node the
/// burst tells from a stiff source grows about as the burst's length: 12 × 40 ms reaches about
/// 100–200 µF on the default board, 12 × 10 ms reached a few tens of microfarads (an open pin
/// behind 47 µF read `driven`).
pub const BLOCK_S: f64 = 40e-3;
/// Drift, in standard errors beyond what the assumption allows, that refutes it. A refuted
/// bound turns a `driven` verdict into `unknown`, so the evidence must be strong.
pub const Z_REFUTE: f64 = 4.0;

/// The burst for a pin, from the precharge `far` (the one farther from the pin's level).
pub fn experiment(plan: &Plan, model: &BoardModel, pin: u8, far: u8) -> Experiment {
    let timing = model.timing();
    let pair_s = (timing.busy_ps(plan.longest) + timing.busy_ps(0)) as f64 * 1e-12;
    let most = MAX_CONVERSIONS as usize / (2 * BLOCKS);
    let repeats = ((BLOCK_S / pair_s).ceil() as usize).clamp(16, most.min(usize::from(u16::MAX)));
    let mut periods: HVec<u32, MAX_PERIODS> = HVec::new();
    for _ in 0..BLOCKS.min(MAX_PERIODS) {
        let _ = periods.push(0);
    }
    Experiment::PeriodSweep {
        target: pin,
        precharge: far,
        precharge_sample: plan.longest,
        sample: 0,
        periods_ns: periods,
        repeats: repeats as u16,
        settle_ns: 0,
    }
}

/// What a pin's burst showed.
#[derive(Debug, Clone, PartialEq)]
pub struct LoadTest {
    /// Conversions of the burst.
    pub conversions: u64,
    /// Drift toward the precharge from the middle third of the blocks to the last, LSB.
    pub drift_lsb: f64,
    /// Its standard error, LSB.
    pub se_lsb: f64,
    /// The most drift any network within the bound's assumption shows, LSB.
    pub allowed_lsb: f64,
    /// The drift exceeds what the assumption allows by more than [`Z_REFUTE`] standard errors.
    pub refuted: bool,
    /// Refuted or moved ([`LoadTest::moved`]): the node capacitance of an open pin that
    /// drifts as this one did, F. Otherwise: the smallest open node the burst would have
    /// missed, F (`None`: none found below a farad).
    pub open_farads: Option<f64>,
}

impl LoadTest {
    /// Whether the node moved under the burst by more than [`Z_REFUTE`] standard errors: within
    /// the bound's assumption or not, an open pin behind a node of about
    /// [`LoadTest::open_farads`] moves the same way, and the bound cannot say "driven".
    pub fn moved(&self) -> bool {
        self.drift_lsb > Z_REFUTE * self.se_lsb
    }
}

/// The burst's evidence: its event (cells, clock, hum) and the hum each cell carries, LSB.
#[derive(Debug, Clone, PartialEq)]
pub struct Burst {
    /// The burst as the model replays it.
    pub event: Event,
    /// The cells, as received.
    pub cells: Vec<CellObs>,
    /// Mean hum of each cell, LSB, where the hum is known as a waveform (taken out of the
    /// cells before they are compared).
    pub hum_lsb: Option<Vec<f64>>,
    /// Hum variance each cell mean carries where the hum is not known as a waveform, LSB².
    pub coherent_var_lsb2: Vec<f64>,
}

/// Drift toward the precharge between the middle and the last third of a burst's cell means,
/// LSB (`toward`: +1 when the precharge is above the pin's level, −1 below).
fn drift(means: &[f64], toward: f64) -> Option<f64> {
    let third = means.len() / 3;
    if third == 0 {
        return None;
    }
    let avg = |s: &[f64]| s.iter().sum::<f64>() / s.len() as f64;
    Some(toward * (avg(&means[means.len() - third..]) - avg(&means[means.len() - 2 * third..means.len() - third])))
}

/// Rest before a replayed burst, ps: every network within a bound is at rest after it.
const AT_REST_PS: u64 = 1_000_000_000_000_000;

/// The burst's cell means a network predicts (its node at rest at the burst's start), LSB.
fn predicted(model: &BoardModel, burst: &Event, p: &PinParams) -> Vec<f64> {
    let ev = Event::replay(burst.experiment.clone(), burst.target, AT_REST_PS);
    let mut out = Vec::new();
    predict(model, p, std::slice::from_ref(&ev), &mut out);
    out
}

/// Tests a stiff pin's bound (`source_high` Ω for a node below `assumed_farads`) against its
/// burst. `fitted`: the fit's parameters within the assumption (the board's constants, the
/// level). `None` when the burst is not a burst or its cells are missing.
pub fn assess(
    model: &BoardModel,
    burst: &Burst,
    fitted: &PinParams,
    source_high: f64,
    assumed_farads: f64,
) -> Option<LoadTest> {
    let Experiment::PeriodSweep { precharge, repeats, periods_ns, .. } = &burst.event.experiment else { return None };
    if burst.cells.len() != periods_ns.len() || burst.cells.len() < 3 {
        return None;
    }
    let far_volts = *model.precharge_volts.get(precharge)?;
    let toward = if far_volts > fitted.source_volts { 1.0 } else { -1.0 };
    let means: Vec<f64> = match &burst.hum_lsb {
        Some(h) if h.len() == burst.cells.len() => burst.cells.iter().zip(h).map(|(c, h)| c.mean - h).collect(),
        _ => burst.cells.iter().map(|c| c.mean).collect(),
    };
    let observed = drift(&means, toward)?;
    // Each third's mean: its cells' noise over their counts, plus the hum they share, plus
    // the model's floor (converter non-linearity as the level moves).
    let third = burst.cells.len() / 3;
    let floor = model.variance_floor_lsb2();
    let var_third = |cells: std::ops::Range<usize>| -> f64 {
        cells
            .map(|i| {
                let c = &burst.cells[i];
                c.variance.max(floor) / f64::from(c.count.max(1))
                    + burst.coherent_var_lsb2.get(i).copied().unwrap_or(0.0)
            })
            .sum::<f64>()
            / (third * third) as f64
    };
    let n = burst.cells.len();
    let model_floor = crate::fit::model_floor_lsb(model);
    let se = (var_third(n - 2 * third..n - third) + var_third(n - third..n) + model_floor * model_floor).sqrt();
    // The most drift within the assumption: the fitted network, and the bound's source behind
    // nodes up to the assumed size.
    let with = |rs: f64, cn: f64| PinParams { source_ohms: rs, node_farads: cn, ..*fitted };
    let allowed = [*fitted, with(source_high, assumed_farads), with(source_high, assumed_farads / 10.0)]
        .iter()
        .filter_map(|p| drift(&predicted(model, &burst.event, p), toward))
        .fold(0.0, f64::max);
    let refuted = observed - allowed > Z_REFUTE * se;
    let open_drift = |cn: f64| drift(&predicted(model, &burst.event, &with(f64::INFINITY, cn)), toward).unwrap_or(0.0);
    let moved = observed > Z_REFUTE * se;
    let target = if refuted || moved { observed } else { allowed + Z_REFUTE * se };
    let open_farads = open_node_for(open_drift, target);
    let conversions = 2 * u64::from(*repeats) * periods_ns.len() as u64;
    Some(LoadTest { conversions, drift_lsb: observed, se_lsb: se, allowed_lsb: allowed, refuted, open_farads })
}

/// The open node whose drift over the burst is `target`, F, on the large-node side (a small
/// open node reaches the precharge's level early and stops drifting too). `None` when no node
/// between 1 nF and 1 F drifts that much.
fn open_node_for(drift_of: impl Fn(f64) -> f64, target: f64) -> Option<f64> {
    // Coarse scan down from a farad to the largest node that drifts at least `target`, then
    // bisect between it and the grid point above it (the drift falls with the node there).
    let grid: Vec<f64> = (0..=36).map(|k| 10f64.powf(-(k as f64) / 4.0)).collect();
    let mut above = None;
    for &c in &grid {
        if drift_of(c) >= target {
            let (mut lo, mut hi) = (c.ln(), above.unwrap_or(c).ln());
            for _ in 0..40 {
                let mid = 0.5 * (lo + hi);
                if drift_of(mid.exp()) >= target {
                    lo = mid;
                } else {
                    hi = mid;
                }
            }
            return Some(lo.exp());
        }
        above = Some(c);
    }
    None
}

/// Two decimals without a "-0.00".
fn lsb(x: f64) -> String {
    format!("{:.2}", if x.abs() < 0.005 { 0.0 } else { x })
}

/// The words a judged pin carries for its burst.
pub fn describe(t: &LoadTest, source_high: f64, assumed_farads: f64) -> String {
    let farads = crate::units::farads;
    if t.refuted {
        format!(
            "a stiff reading that drifted {} LSB toward the precharge under a burst of {} conversions, where no source below {} behind less than {} drifts more than {} LSB: an open pin{}, or a source behind a smaller node, with the source above {} or the node above {}",
            lsb(t.drift_lsb),
            t.conversions,
            crate::units::ohms(source_high),
            farads(assumed_farads),
            lsb(t.allowed_lsb),
            t.open_farads.map(|c| format!(" behind about {}", farads(c))).unwrap_or_default(),
            crate::units::ohms(source_high),
            farads(assumed_farads),
        )
    } else if t.moved() {
        format!(
            "a burst of {} conversions moved it {} LSB (±{}) toward the precharge: a source below {} behind less than {}, or a node of more than {} behind a larger source or none{}; the survey's conversions cannot tell them apart",
            t.conversions,
            lsb(t.drift_lsb),
            lsb(t.se_lsb),
            crate::units::ohms(source_high),
            farads(assumed_farads),
            farads(assumed_farads),
            t.open_farads.map(|c| format!(" (an open pin: about {})", farads(c))).unwrap_or_default(),
        )
    } else {
        format!(
            "a burst of {} conversions moved it {} LSB (±{}): not an open pin{}",
            t.conversions,
            lsb(t.drift_lsb),
            lsb(t.se_lsb),
            match t.open_farads {
                Some(c) => format!(" unless its node holds more than {}", farads(c)),
                None => String::new(),
            }
        )
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_node_that_moved_under_the_burst_is_not_called_driven_even_within_the_bound() {
        // The grid's case: an open pin behind 4.7 µF whose stiff-node bound was 13.2 MΩ, wide
        // enough that a source within it drifts up to 80 LSB, while the pin drifted 3.72 ± 0.11.
        let t = LoadTest {
            conversions: 9960,
            drift_lsb: 3.72,
            se_lsb: 0.11,
            allowed_lsb: 79.6,
            refuted: false,
            open_farads: Some(4.7e-6),
        };
        assert!(t.moved());
        let words = describe(&t, 13.2e6, 2e-6);
        // The truth may also be a source above the bound behind a node above the assumption
        // (470 kΩ behind 2.2 µF reads this way), so the note names that too.
        assert!(
            words
                .contains("or a node of more than 2.00 µF behind a larger source or none (an open pin: about 4.70 µF)"),
            "{words}"
        );
        // Within four standard errors of no drift: a stiff source, not moved.
        let still = LoadTest { drift_lsb: 0.3, se_lsb: 0.1, open_farads: Some(42.7e-6), ..t };
        assert!(!still.moved());
        assert!(describe(&still, 1.2e3, 2e-6).contains("not an open pin unless its node holds more than 42.7 µF"));
        // Refuted: 100 kΩ behind 4.7 µF (a sump monitor's pump-current input) drifts like an
        // open pin behind 9.14 µF. A source pulls its node back, so a driven node that drifts as
        // much is smaller than the open one: the note must not name a node "of that size".
        let refuted = LoadTest { refuted: true, drift_lsb: 8.91, allowed_lsb: 0.0, open_farads: Some(9.14e-6), ..t };
        let words = describe(&refuted, 4.09e3, 2e-6);
        assert!(
            words.contains(
                "an open pin behind about 9.14 µF, or a source behind a smaller node, with the source above 4.09 kΩ or the node above 2.00 µF"
            ),
            "{words}"
        );
    }
    use crate::model::Event;
    use ohmsight_protocol::{FrontEnd, Precharge};

    /// A board whose switch (1 kΩ) and hold capacitor (4 pF) settle within the shortest sample
    /// time (1 µs: 250 time constants), with a precharge at 0.1 V and one at 3.2 V.
    fn board() -> (BoardModel, Plan) {
        let fe = FrontEnd {
            bits: 12,
            vref_microvolts: 3_300_000,
            sample_ps: heapless::Vec::from_slice(&[1_000_000, 20_000_000]).unwrap(),
            conversion_ps: 1_000_000,
            hold_attofarads: 4_000_000,
            hold_tolerance_ppm: 0,
            switch_milliohms: 1_000_000,
            switch_tolerance_ppm: 0,
            noise_millilsb: 500,
            leakage_picoamps: 0,
            pull_milliohms: 0,
            pull_tolerance_ppm: 0,
            pull_supply_microvolts: 0,
            precharges: heapless::Vec::from_slice(&[
                Precharge { channel: 20, nominal_microvolts: 100_000 },
                Precharge { channel: 21, nominal_microvolts: 3_200_000 },
            ])
            .unwrap(),
        };
        (BoardModel::from_front_end(&fe), Plan::new(&fe).unwrap())
    }

    fn event(exp: Experiment) -> Event {
        Event::replay(exp, 3, 0)
    }

    #[test]
    fn an_open_node_drifts_by_charge_conservation() {
        // Charge conservation (no source): each pair shares the node's charge with the hold
        // capacitor just set to the precharge, so after k pairs Vn = Vp + (V0 − Vp)·q^k with
        // q = Cn/(Cn + Ch); each reading is the shared level. The model's block means must
        // follow it.
        let (model, plan) = board();
        let exp = experiment(&plan, &model, 3, 21);
        let Experiment::PeriodSweep { repeats, .. } = exp else { panic!("a period sweep") };
        let (cn, ch, v0, vp): (f64, f64, f64, f64) = (4.7e-6, 4e-12, 1.2, 3.2);
        let q = cn / (cn + ch);
        let lsb = model.lsb_volts();
        let blocks: Vec<f64> = (0..BLOCKS)
            .map(|j| {
                let ks = (j * usize::from(repeats) + 1)..=((j + 1) * usize::from(repeats));
                ks.clone().map(|k| vp + (v0 - vp) * q.powi(k as i32)).sum::<f64>() / ks.count() as f64 / lsb
            })
            .collect();
        let p = PinParams { leak_amps: 0.0, ..PinParams::nominal(&model, f64::INFINITY, cn, v0) };
        let got = predicted(&model, &event(exp), &p);
        let (want, got) = (drift(&blocks, 1.0).unwrap(), drift(&got, 1.0).unwrap());
        assert!(want > 1.0, "the case: a drift of several LSB ({want})");
        assert!((got / want - 1.0).abs() < 0.01, "model {got} LSB, charge conservation {want} LSB");
    }

    #[test]
    fn the_burst_refutes_a_stiff_bound_on_an_open_node_and_names_its_size() {
        let (model, plan) = board();
        let ev = event(experiment(&plan, &model, 3, 21));
        let cells_of = |p: &PinParams| -> Vec<CellObs> {
            predicted(&model, &ev, p)
                .into_iter()
                .map(|mean| CellObs { count: 400, mean, variance: 0.3, min: 0, max: 4095 })
                .collect()
        };
        let burst = |cells| Burst { event: ev.clone(), cells, hum_lsb: None, coherent_var_lsb2: Vec::new() };
        // The bound the fit would state: below 1 kΩ if the node is below 2 µF.
        let stiff = PinParams::nominal(&model, 300.0, 1e-9, 1.2);
        for (truth, refuted) in [(4.7e-6, true), (10e-6, true), (1e-3, false)] {
            let open = PinParams { leak_amps: 0.0, ..PinParams::nominal(&model, f64::INFINITY, truth, 1.2) };
            let t = assess(&model, &burst(cells_of(&open)), &stiff, 1e3, 2e-6).unwrap();
            assert_eq!(t.refuted, refuted, "open behind {truth:e}: {t:?}");
            if refuted {
                let named = t.open_farads.unwrap();
                assert!((named / truth - 1.0).abs() < 0.02, "open behind {truth:e} named {named:e}");
            }
        }
        // A source within the bound holds: no drift, and the reach is stated.
        for (rs, cn) in [(300.0, 1e-9), (900.0, 1.5e-6)] {
            let t =
                assess(&model, &burst(cells_of(&PinParams::nominal(&model, rs, cn, 1.2))), &stiff, 1e3, 2e-6).unwrap();
            assert!(!t.refuted, "{rs} Ω behind {cn:e}: {t:?}");
            assert!(t.open_farads.is_some_and(|c| c > 20e-6), "{t:?}");
        }
    }
}
