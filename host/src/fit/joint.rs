//! The calibration fit: several fixture pins of known source resistance fitted together, with
//! the board's hold capacitance and switch resistance shared between them and free.
//!
//! Each fixture pin keeps its own node capacitance, source voltage, firmware overhead and
//! leakage, as in [`super::fit_pin`]; its source resistance enters with a Gaussian prior at the
//! resistor's value (σ = half its tolerance, the tolerance taken as 2σ as for the profile's own
//! values). `Ch` and `Rm` enter with a wide prior around the datasheet values
//! ([`CALIBRATION_PRIOR_SD`]), so a unit far off its datasheet is found where it is, not pulled
//! back to the figure it is being calibrated against.
//!
//! One fixture pin constrains mostly the product `(Rs + Rm)·Ch`; two of different resistance
//! separate `Ch` from `Rm`. The intervals come from the covariance at the optimum, scaled by
//! the Birge ratio when the fit is poorer than its error bars.

use super::{fit_pin, pseudo_inverse, FitInput, Interval, Problem, LN_CH, LN_CN, LN_RM, LN_RS, N_THETA, Z95};
use crate::model::BoardModel;
use levenberg_marquardt::{LeastSquaresProblem, LevenbergMarquardt};
use nalgebra::{DMatrix, DVector, Dyn, VecStorage};

/// Standard deviation of the calibration's prior on `ln Ch` and `ln Rm`: the datasheet value
/// as a rough centre only (a factor of e^0.7 ≈ 2 at 1σ).
pub const CALIBRATION_PRIOR_SD: f64 = 0.7;
/// How far either may go from the datasheet in the search, as a log.
pub const CALIBRATION_LIMIT: f64 = 2.5;
/// Free parameters per pin after the shared two: `ln Rs, ln Cn, Vs, ln δ, I`.
const OWN: [usize; 5] = [0, 1, 2, 5, 6];

/// One fixture pin: its history and the resistor on it.
pub struct Fixture<'a> {
    /// The pin's history.
    pub events: &'a [crate::model::Event],
    /// The fixture resistor's value, Ω.
    pub ohms: f64,
    /// Its ±2σ relative tolerance (0.01 for a 1% part).
    pub tolerance: f64,
}

/// What a calibration fit found.
#[derive(Debug, Clone)]
pub struct Calibration {
    /// The unit's hold capacitance, F (estimate and 95% interval).
    pub hold_farads: Interval,
    /// The unit's switch resistance, Ω (estimate and 95% interval).
    pub switch_ohms: Interval,
    /// Standard deviation of `ln Ch` (its 95% interval is ±[`Z95`] of it).
    pub sigma_ln_hold: f64,
    /// Standard deviation of `ln Rm`.
    pub sigma_ln_switch: f64,
    /// Correlation of `ln Ch` and `ln Rm`.
    pub correlation: f64,
    /// χ² of the data residuals of all fixture pins.
    pub chi2: f64,
    /// Degrees of freedom.
    pub dof: usize,
    /// Each fixture's node capacitance at the optimum, F.
    pub node_farads: Vec<f64>,
}

struct Joint<'a> {
    pins: Vec<Problem<'a>>,
    /// ln of each fixture's resistance and the prior's σ.
    known: Vec<(f64, f64)>,
    /// The whole parameter vector: `ln Ch, ln Rm`, then [`OWN`] per pin.
    x: Vec<f64>,
}

impl<'a> Joint<'a> {
    fn theta(&self, x: &[f64], k: usize) -> [f64; N_THETA] {
        let mut t = self.pins[k].theta;
        t[LN_CH] = x[0];
        t[LN_RM] = x[1];
        for (j, &i) in OWN.iter().enumerate() {
            t[i] = x[2 + OWN.len() * k + j];
        }
        self.pins[k].clamp(t)
    }

    /// Pin `k`'s residuals at `x`: its data, its own priors, its resistor's prior.
    fn pin_residuals(&self, x: &[f64], k: usize, out: &mut Vec<f64>) {
        let t = self.theta(x, k);
        let mut r = Vec::new();
        self.pins[k].residuals_at(&t, &mut r);
        let (ln_r, sd) = self.known[k];
        out.extend(r);
        out.push((t[LN_RS] - ln_r) / sd);
    }

    fn rows(&self, x: &[f64]) -> Vec<Vec<f64>> {
        (0..self.pins.len())
            .map(|k| {
                let mut r = Vec::new();
                self.pin_residuals(x, k, &mut r);
                r
            })
            .collect()
    }

    fn residuals_at(&self, x: &[f64]) -> Vec<f64> {
        let mut out: Vec<f64> = self.rows(x).concat();
        out.push(x[0] / CALIBRATION_PRIOR_SD);
        out.push(x[1] / CALIBRATION_PRIOR_SD);
        out
    }

    fn objective(&self, x: &[f64]) -> f64 {
        self.residuals_at(x).iter().map(|r| r * r).sum()
    }

    fn chi2_data(&self, x: &[f64]) -> (f64, usize) {
        let mut chi2 = 0.0;
        let mut n = 0;
        for (k, p) in self.pins.iter().enumerate() {
            let mut r = Vec::new();
            p.residuals_at(&self.theta(x, k), &mut r);
            chi2 += r[..p.obs.len()].iter().map(|v| v * v).sum::<f64>();
            n += p.obs.len();
        }
        (chi2, n)
    }

    /// Central-difference Jacobian, using the block structure: a pin's own parameters move only
    /// its own rows.
    fn jacobian_at(&self, x: &[f64]) -> DMatrix<f64> {
        let base = self.rows(x);
        let offsets: Vec<usize> = base.iter().scan(0, |o, r| Some(std::mem::replace(o, *o + r.len()))).collect();
        let m = base.iter().map(Vec::len).sum::<usize>() + 2;
        let mut j = DMatrix::zeros(m, x.len());
        let vref = self.pins[0].input.board.vref_volts;
        for col in 0..x.len() {
            let (param, pins): (usize, Vec<usize>) = match col {
                0 => (LN_CH, (0..self.pins.len()).collect()),
                1 => (LN_RM, (0..self.pins.len()).collect()),
                c => (OWN[(c - 2) % OWN.len()], vec![(c - 2) / OWN.len()]),
            };
            let h = Problem::step(param, vref);
            let (mut up, mut dn) = (x.to_vec(), x.to_vec());
            up[col] += h;
            dn[col] -= h;
            for k in pins {
                let (mut ru, mut rd) = (Vec::new(), Vec::new());
                self.pin_residuals(&up, k, &mut ru);
                self.pin_residuals(&dn, k, &mut rd);
                for (row, (u, d)) in ru.iter().zip(&rd).enumerate() {
                    j[(offsets[k] + row, col)] = (u - d) / (2.0 * h);
                }
            }
            if col < 2 {
                j[(m - 2 + col, col)] = 1.0 / CALIBRATION_PRIOR_SD;
            }
        }
        j
    }

    fn clamp_x(&self, x: &mut [f64]) {
        for v in x.iter_mut().take(2) {
            *v = if v.is_finite() { v.clamp(-CALIBRATION_LIMIT, CALIBRATION_LIMIT) } else { 0.0 };
        }
        for k in 0..self.pins.len() {
            let t = self.theta(x, k);
            for (j, &i) in OWN.iter().enumerate() {
                x[2 + OWN.len() * k + j] = t[i];
            }
        }
    }
}

impl LeastSquaresProblem<f64, Dyn, Dyn> for Joint<'_> {
    type ResidualStorage = VecStorage<f64, Dyn, nalgebra::U1>;
    type JacobianStorage = VecStorage<f64, Dyn, Dyn>;
    type ParameterStorage = VecStorage<f64, Dyn, nalgebra::U1>;

    fn set_params(&mut self, x: &DVector<f64>) {
        let mut v: Vec<f64> = x.iter().copied().collect();
        self.clamp_x(&mut v);
        self.x = v;
    }

    fn params(&self) -> DVector<f64> {
        DVector::from_vec(self.x.clone())
    }

    fn residuals(&self) -> Option<DVector<f64>> {
        let r = self.residuals_at(&self.x);
        r.iter().all(|v| v.is_finite()).then(|| DVector::from_vec(r))
    }

    fn jacobian(&self) -> Option<DMatrix<f64>> {
        let j = self.jacobian_at(&self.x);
        j.iter().all(|v| v.is_finite()).then_some(j)
    }
}

/// Fits the board's hold capacitance and switch resistance from `fixtures` (pins of known
/// resistance). `None` when a fixture has too little evidence to fit.
pub fn calibrate(board: &BoardModel, fixtures: &[Fixture<'_>]) -> Option<Calibration> {
    if fixtures.is_empty() {
        return None;
    }
    let inputs: Vec<FitInput<'_>> = fixtures.iter().map(|f| FitInput { board, events: f.events }).collect();
    // Starting points of each pin's own parameters: its ordinary fit under the datasheet values,
    // with the source resistance put at the resistor's value.
    let mut pins = Vec::new();
    let mut x = vec![0.0, 0.0];
    for (input, f) in inputs.iter().zip(fixtures) {
        let start = fit_pin(input)?;
        let mut p = Problem::new(input);
        // The shared two are the joint problem's; the pin's problem has no prior of its own
        // on them, only the search limits.
        p.prior_sigma[LN_CH] = 0.0;
        p.prior_sigma[LN_RM] = 0.0;
        p.bounds[LN_CH] = (-CALIBRATION_LIMIT, CALIBRATION_LIMIT);
        p.bounds[LN_RM] = (-CALIBRATION_LIMIT, CALIBRATION_LIMIT);
        let mut t = start.theta;
        t[LN_RS] = f.ohms.ln();
        t[LN_CH] = 0.0;
        t[LN_RM] = 0.0;
        p.reweight(&t);
        p.theta = t;
        x.extend(OWN.iter().map(|&i| t[i]));
        pins.push(p);
    }
    let known = fixtures.iter().map(|f| (f.ohms.ln(), ((1.0 + f.tolerance.max(1e-4)).ln() / 2.0))).collect();
    let mut joint = Joint { pins, known, x: x.clone() };
    // A coarse grid over the shared two finds the valley; LM runs from the best few points.
    let mut grid: Vec<(f64, Vec<f64>)> = Vec::new();
    for ch in [-0.7, -0.35, 0.0, 0.35, 0.7] {
        for rm in [-0.7, -0.35, 0.0, 0.35, 0.7] {
            let mut x0 = x.clone();
            x0[0] = ch;
            x0[1] = rm;
            grid.push((joint.objective(&x0), x0));
        }
    }
    grid.sort_by(|a, b| a.0.total_cmp(&b.0));
    let mut best: Option<(f64, Vec<f64>)> = None;
    for (_, x0) in grid.into_iter().take(3) {
        joint.x = x0;
        let (j, _) =
            LevenbergMarquardt::new().with_patience(super::LM_PATIENCE).with_tol(super::LM_TOL).minimize(joint);
        joint = j;
        let obj = joint.objective(&joint.x);
        if best.as_ref().is_none_or(|(o, _)| obj < *o) {
            best = Some((obj, joint.x.clone()));
        }
    }
    let (_, x) = best?;
    let (chi2, n) = joint.chi2_data(&x);
    let dof = n.saturating_sub(x.len());
    let birge2 = if dof > 0 { (chi2 / dof as f64).max(1.0) } else { 1.0 };
    let j = joint.jacobian_at(&x);
    let cov = pseudo_inverse(&(j.transpose() * &j)) * birge2;
    let (s_ch, s_rm) = (cov[(0, 0)].max(0.0).sqrt(), cov[(1, 1)].max(0.0).sqrt());
    let correlation = if s_ch > 0.0 && s_rm > 0.0 { cov[(0, 1)] / (s_ch * s_rm) } else { 0.0 };
    let log_interval = |nominal: f64, ln: f64, s: f64| Interval {
        estimate: Some(nominal * ln.exp()),
        low: Some(nominal * (ln - Z95 * s).exp()),
        high: Some(nominal * (ln + Z95 * s).exp()),
    };
    let node_farads = (0..joint.pins.len()).map(|k| joint.theta(&x, k)[LN_CN].exp()).collect();
    Some(Calibration {
        hold_farads: log_interval(board.hold_farads, x[0], s_ch),
        switch_ohms: log_interval(board.switch_ohms, x[1], s_rm),
        sigma_ln_hold: s_ch,
        sigma_ln_switch: s_rm,
        correlation,
        chi2,
        dof,
        node_farads,
    })
}
