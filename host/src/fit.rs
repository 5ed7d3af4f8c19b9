//! Weighted nonlinear least squares of the forward model (Levenberg–Marquardt), with 95%
//! intervals from the profile likelihood (one-sided bounds where the data only bound a
//! parameter).
//!
//! Parameters `θ = (ln Rs, ln Cn, Vs, ln(Ch/Ch₀), ln(Rm/Rm₀), ln δ, I)`. `Ch` and `Rm` are the
//! board's hold capacitance and switch resistance, which the profile knows only to a tolerance;
//! `δ` is the firmware's overhead between conversions (µs), which lengthens every idle gap and
//! which no profile states; `I` is the pin's leakage current (pA), which the profile bounds.
//! They enter with Gaussian priors (σ = tolerance/2 for `Ch` and `Rm`, [`OVERHEAD_PRIOR_US`]
//! for `δ`, half the leakage bound for `I`), so their uncertainty widens the intervals of `Rs`
//! and `Cn` as it should, instead of being silently assumed away: behind a large node a leak
//! moves the node as slowly as a gigohm source does, and only the leak's bound tells them apart.

use crate::model::{predict_replay, BoardModel, CellObs, Event, PinParams, Replay};
use levenberg_marquardt::{LeastSquaresProblem, LevenbergMarquardt};
use nalgebra::{DMatrix, DVector, Dyn, VecStorage};
use std::cell::RefCell;

mod joint;
pub use joint::{calibrate, Calibration, Fixture, CALIBRATION_LIMIT, CALIBRATION_PRIOR_SD};

/// Index of `ln Rs` in θ.
pub const LN_RS: usize = 0;
/// Index of `ln Cn` in θ.
pub const LN_CN: usize = 1;
/// Index of `Vs` in θ.
pub const VS: usize = 2;
const LN_CH: usize = 3;
const LN_RM: usize = 4;
const OVERHEAD_US: usize = 5;
const LEAK_PA: usize = 6;
const N_THETA: usize = 7;

/// Prior standard deviation of the firmware overhead per conversion, µs (centred on zero).
pub const OVERHEAD_PRIOR_US: f64 = 1.0;
/// χ²/dof above which the fit searches from more starting points (a good fit is near 1).
const MISFIT_CHI2_PER_DOF: f64 = 3.0;
/// How many further grid points a misfit tries.
const EXTRA_STARTS: usize = 12;
/// Where the fit starts the overhead, µs.
const OVERHEAD_START_US: f64 = 0.1;

/// Smallest and largest source resistance the fit considers, Ω.
pub const RS_RANGE: (f64, f64) = (1.0, 1e13);
/// Smallest and largest node capacitance the fit considers, F. The upper end is far beyond
/// what a survey's milliseconds resolve (behind microfarads any source looks stiff), so that a
/// node larger than the survey can see leaves the fit free to say "at least", and the source
/// resistance it would hide open, instead of squeezing both into a range that excludes them.
pub const CN_RANGE: (f64, f64) = (0.2e-12, 1e-3);

/// How closely the model can match any reading, LSB of a 12-bit converter: the converter's
/// differential and integral non-linearity, kT/C noise frozen on the hold capacitor and the
/// charge the conversion leaves behind are not modelled, and a fit that trusted cell means
/// beyond this would report intervals narrower than the truth allows. These are voltages, not
/// codes: a finer converter sees them as more LSB ([`model_floor_lsb`]).
pub const MODEL_FLOOR_LSB: f64 = 0.1;

/// [`MODEL_FLOOR_LSB`] in a board's own LSB: the same share of full scale, never below 0.1 LSB.
pub fn model_floor_lsb(b: &BoardModel) -> f64 {
    (MODEL_FLOOR_LSB * b.full_scale() / 4096.0).max(MODEL_FLOOR_LSB)
}

/// The node capacitance a stiff pin's source-resistance bound assumes at most, F. A reading
/// that does not move under a survey's conversions says "a small source resistance, or a node
/// capacitor too large for these conversions to move": no experiment of finite length tells
/// the two apart, so the bound is stated with this assumption beside it (common practice for
/// ADC input filters, which stay well below it; no source).
pub const STIFF_NODE_FARADS: f64 = 2e-6;

/// Largest move of any cell mean that a step of the covariance's derivatives may make, LSB.
/// A mean code is not a straight line in the level behind it: averaging quantized readings
/// leaves a ripple of one LSB period (about ±1.5% in the slope at 0.5 LSB of noise). Chords
/// that cross a good part of an LSB sample it differently for each parameter, and along the
/// network's scale (resistances down by k, capacitances up by k), which changes no reading,
/// they then find information the data do not hold: a 1 MΩ source behind 50 pF got σ(ln Rs)
/// 0.017, below the 0.024 its hold capacitor's prior alone allows. The accuracy benchmark's
/// Cramér–Rao bound takes its slopes to the same reach.
pub const COVARIANCE_REACH_LSB: f64 = 0.02;

/// Intervals of the coarse scan of the other log-parameter at each profile point.
const PROFILE_SCAN: u8 = 16;

/// Widest ratio high/low of a 95% interval still reported as an estimate.
pub const BOUND_RATIO: f64 = 3.0;

/// Two-sided 95% normal quantile.
pub const Z95: f64 = 1.959_964;
/// 95% point of χ² with one degree of freedom (= Z95²).
pub const CHI2_95_1DOF: f64 = 3.841_459;

/// How far above the best fit a second, separate valley of a profile may lie and still join
/// the interval: 9 (three standard deviations; common practice, no source) rather than the 95%
/// threshold. A distinct explanation of the data that is only a little worse than the best one
/// is not excluded by a 95% interval's edge: 316 kΩ behind 10 µF read `< 1.18 kΩ`, its true
/// valley (a large source behind a large node) 4.1–4.4 above the best fit (a small source
/// behind 1 nF), a ridge of about 100 between them.
pub const CHI2_SECOND_VALLEY: f64 = 9.0;
/// Where the readings see a pin only through slow drifts and recoveries, its ends are drawn
/// at this level of χ² above the best fit (three standard deviations; common practice, no
/// source) rather than at [`CHI2_95_1DOF`]: see [`slow_pin`].
pub const CHI2_SLOW: f64 = 9.0;
/// The smallest node whose low end, with a source open above, puts a pin in the slow regime
/// ([`slow_pin`]), F.
pub const SLOW_NODE_FARADS: f64 = 100e-9;
/// How much higher than a second valley the profile must have risen between it and the
/// interval's edge for the valley to count as separate rather than the first one's shoulder.
const VALLEY_RIDGE: f64 = CHI2_95_1DOF;

/// An interval for one parameter.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Interval {
    /// Best estimate; `None` when the data only bound the value.
    pub estimate: Option<f64>,
    /// 95% lower end; `None` when unbounded below (within the search range).
    pub low: Option<f64>,
    /// 95% upper end; `None` when unbounded above.
    pub high: Option<f64>,
}

impl Interval {
    /// No estimate and no bound: no claim.
    pub const NONE: Interval = Interval { estimate: None, low: None, high: None };
}

/// What a fit's intervals must settle. A survey wants each end of each interval to a tenth of
/// its width ([`Goals::FULL`]); a production check wants only to know on which side of its
/// limits each end lies. With `decide_only`, the profile search for an end stops as soon as no
/// decision point lies between the last value inside the interval and the first outside it, and
/// reports the end at that outside value: a wider interval that still holds the 95% one, so
/// every judgement on it stays true, found with a fraction of the model evaluations.
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub struct Goals {
    /// Stop refining an end once no decision point can change side.
    pub decide_only: bool,
    /// Source-resistance values a decision turns on (limit ends), Ω. The floating threshold
    /// ([`crate::judge::floating_ohms`]) is always one.
    pub source_ohms: [Option<f64>; 2],
    /// Node-capacitance values a decision turns on, F.
    pub node_farads: [Option<f64>; 2],
}

impl Goals {
    /// Every interval end to a tenth of its width: what a survey reports.
    pub const FULL: Goals = Goals { decide_only: false, source_ohms: [None; 2], node_farads: [None; 2] };

    /// The log-values the search for parameter `i`'s ends must not stop short of; `None` for
    /// full precision.
    fn points(&self, i: usize, b: &BoardModel) -> Option<Vec<f64>> {
        if !self.decide_only {
            return None;
        }
        let mut v: Vec<f64> = match i {
            LN_RS => self.source_ohms.iter().flatten().copied().chain([crate::judge::floating_ohms(b)]).collect(),
            _ => self.node_farads.iter().flatten().copied().collect(),
        };
        v.retain(|x| *x > 0.0 && x.is_finite());
        Some(v.iter().map(|x| x.ln()).collect())
    }
}

/// Result of fitting one pin.
#[derive(Debug, Clone)]
pub struct Fit {
    /// Best-fit parameters.
    pub params: PinParams,
    /// Best-fit θ.
    pub theta: [f64; N_THETA],
    /// χ² of the data residuals.
    pub chi2: f64,
    /// Degrees of freedom (cells − free parameters).
    pub dof: usize,
    /// Source resistance, Ω.
    pub source_ohms: Interval,
    /// Node capacitance, F.
    pub node_farads: Interval,
    /// Source voltage, V (estimate and 95% interval).
    pub source_volts: Interval,
    /// Where `source_ohms`'s upper end holds only for a node below this capacitance, F: the
    /// readings did not show the node's size (see [`STIFF_NODE_FARADS`]).
    pub assumes_node_below: Option<f64>,
    /// Standard deviation of ln Rs from the covariance (for benchmarks).
    pub sigma_ln_rs: f64,
    /// Model evaluations spent.
    pub evaluations: usize,
}

impl Fit {
    /// χ²/dof, at least 1: the factor by which model mismatch inflates the intervals.
    pub fn birge(&self) -> f64 {
        if self.dof == 0 {
            1.0
        } else {
            (self.chi2 / self.dof as f64).max(1.0)
        }
    }
}

/// Everything the fit needs for one pin.
pub struct FitInput<'a> {
    /// The board.
    pub board: &'a BoardModel,
    /// The pin's history.
    pub events: &'a [Event],
}

struct Problem<'a> {
    input: &'a FitInput<'a>,
    /// The pin's history with its steps worked out once.
    replay: Replay<'a>,
    cells: Vec<(CellObs, f64)>,
    obs: Vec<(f64, f64)>, // (mean, standard error)
    theta: [f64; N_THETA],
    free: Vec<usize>,
    bounds: [(f64, f64); N_THETA],
    prior_sigma: [f64; N_THETA],
    scratch: RefCell<Vec<f64>>,
    evaluations: RefCell<usize>,
    /// A check's fit ([`Goals::decide_only`]): a profile point already inside the threshold
    /// from its warm start is not searched further.
    decide: bool,
    /// Whether a minimization gave up before converging since this was last cleared.
    stalled: std::cell::Cell<bool>,
    /// Levenberg–Marquardt's patience.
    patience: usize,
    /// Converge only to [`LM_TOL_DECIDE`]: for probes that ask only whether a point is inside
    /// the threshold, not where its floor lies.
    coarse: bool,
}

impl<'a> Problem<'a> {
    fn new(input: &'a FitInput<'a>) -> Self {
        let b = input.board;
        let floor = b.variance_floor_lsb2();
        let cells: Vec<(CellObs, f64)> = input
            .events
            .iter()
            .filter_map(|e| e.cells.as_ref().map(|c| (c, &e.coherent_var_lsb2)))
            .flat_map(|(cells, coherent)| {
                cells.iter().enumerate().map(move |(i, c)| (*c, coherent.get(i).copied().unwrap_or(0.0)))
            })
            .collect();
        let model_floor = model_floor_lsb(b);
        let obs =
            cells.iter().map(|(c, k)| (c.mean, cell_se(c.variance.max(floor), c.count, *k, model_floor))).collect();
        let [sd_ch, sd_rm, sd_overhead] = nuisance_prior_sd(b);
        let sd_leak = leak_prior_sd_pa(b);
        let prior_sigma = [0.0, 0.0, 0.0, sd_ch, sd_rm, sd_overhead, sd_leak];
        let bounds = [
            (RS_RANGE.0.ln(), RS_RANGE.1.ln()),
            (CN_RANGE.0.ln(), CN_RANGE.1.ln()),
            (-0.25 * b.vref_volts, 1.25 * b.vref_volts),
            // Wide enough that the prior, not a wall, keeps them near nominal.
            (-10.0 * prior_sigma[LN_CH], 10.0 * prior_sigma[LN_CH]),
            (-10.0 * prior_sigma[LN_RM], 10.0 * prior_sigma[LN_RM]),
            ((1e-4 * OVERHEAD_PRIOR_US).ln(), (10.0 * OVERHEAD_PRIOR_US).ln()),
            (-10.0 * sd_leak, 10.0 * sd_leak),
        ];
        let free = (0..N_THETA).filter(|&i| i < LN_CH || prior_sigma[i] > 0.0).collect();
        Self {
            input,
            replay: Replay::new(b, input.events),
            cells,
            obs,
            theta: [0.0; N_THETA],
            free,
            bounds,
            prior_sigma,
            scratch: RefCell::new(Vec::new()),
            evaluations: RefCell::new(0),
            decide: false,
            stalled: std::cell::Cell::new(false),
            patience: LM_PATIENCE,
            coarse: false,
        }
    }

    /// Weights from the observed variance less the spread the model itself predicts within
    /// each cell at θ (a drifting cell is not noisy), floored at the converter's noise.
    fn reweight(&mut self, t: &[f64; N_THETA]) {
        let floor = self.input.board.variance_floor_lsb2();
        let (mut mean, mut spread) = (Vec::new(), Vec::new());
        predict_replay(self.input.board, &self.params_of(t), &self.replay, &mut mean, Some(&mut spread));
        let model_floor = model_floor_lsb(self.input.board);
        for ((o, (c, k)), s) in self.obs.iter_mut().zip(&self.cells).zip(&spread) {
            o.1 = cell_se((c.variance - s).max(floor), c.count, *k, model_floor);
        }
    }

    fn params_of(&self, t: &[f64; N_THETA]) -> PinParams {
        let b = self.input.board;
        PinParams {
            source_ohms: t[LN_RS].exp(),
            node_farads: t[LN_CN].exp(),
            source_volts: t[VS],
            hold_farads: b.hold_farads * t[LN_CH].exp(),
            switch_ohms: b.switch_ohms * t[LN_RM].exp(),
            overhead_s: t[OVERHEAD_US].exp() * 1e-6,
            leak_amps: t[LEAK_PA] * 1e-12,
        }
    }

    fn clamp(&self, mut t: [f64; N_THETA]) -> [f64; N_THETA] {
        for (v, &(lo, hi)) in t.iter_mut().zip(&self.bounds) {
            *v = if v.is_finite() { v.clamp(lo, hi) } else { (lo + hi) / 2.0 };
        }
        t
    }

    /// Residuals at θ: data, then priors.
    fn residuals_at(&self, t: &[f64; N_THETA], out: &mut Vec<f64>) {
        let mut pred = self.scratch.borrow_mut();
        predict_replay(self.input.board, &self.params_of(t), &self.replay, &mut pred, None);
        *self.evaluations.borrow_mut() += 1;
        out.clear();
        out.extend(self.obs.iter().zip(pred.iter()).map(|(&(m, se), &p)| (p - m) / se));
        for i in [LN_CH, LN_RM, OVERHEAD_US, LEAK_PA] {
            if self.prior_sigma[i] > 0.0 {
                // δ ≥ 0 is fitted as ln δ; its prior is on δ itself.
                let x = if i == OVERHEAD_US { t[i].exp() } else { t[i] };
                out.push(x / self.prior_sigma[i]);
            }
        }
    }

    fn chi2_data(&self, t: &[f64; N_THETA]) -> f64 {
        let mut r = Vec::new();
        self.residuals_at(t, &mut r);
        r[..self.obs.len()].iter().map(|x| x * x).sum()
    }

    fn objective(&self, t: &[f64; N_THETA]) -> f64 {
        let mut r = Vec::new();
        self.residuals_at(t, &mut r);
        r.iter().map(|x| x * x).sum()
    }

    fn step(i: usize, vref: f64) -> f64 {
        match i {
            VS => 2e-5 * vref,
            OVERHEAD_US => 2e-2,
            LEAK_PA => 1e-2,
            _ => 2e-3,
        }
    }

    /// Jacobian over the free parameters: central differences in a survey's fit; forward
    /// differences in a check's, which asks only on which side of a limit an end lies (one
    /// model evaluation per parameter instead of two, and the check's fits are its host time).
    fn jacobian_at(&self, t: &[f64; N_THETA]) -> DMatrix<f64> {
        let steps: Vec<f64> = self.free.iter().map(|&i| Self::step(i, self.input.board.vref_volts)).collect();
        self.jacobian_with(t, &steps)
    }

    /// The Jacobian for the covariance at the optimum: each step shrunk until it moves no cell
    /// mean by more than [`COVARIANCE_REACH_LSB`], so that the slopes are the model's own and
    /// not chords across the ripple of averaged quantized readings.
    /// `j` is the chord Jacobian at `t` ([`Self::jacobian_at`]), which sizes the steps.
    fn jacobian_for_covariance(&self, t: &[f64; N_THETA], j: DMatrix<f64>) -> DMatrix<f64> {
        let mut steps: Vec<f64> = self.free.iter().map(|&i| Self::step(i, self.input.board.vref_volts)).collect();
        let mut shrunk = false;
        for (col, h) in steps.iter_mut().enumerate() {
            let moved = self.obs.iter().enumerate().fold(0.0f64, |m, (row, o)| m.max((j[(row, col)] * o.1).abs())) * *h;
            if moved > COVARIANCE_REACH_LSB {
                *h *= COVARIANCE_REACH_LSB / moved;
                shrunk = true;
            }
        }
        if shrunk {
            self.jacobian_with(t, &steps)
        } else {
            j
        }
    }

    fn jacobian_with(&self, t: &[f64; N_THETA], steps: &[f64]) -> DMatrix<f64> {
        let m = self.obs.len() + self.free.iter().filter(|&&i| i >= LN_CH).count();
        let mut j = DMatrix::zeros(m, self.free.len());
        let (mut up, mut dn) = (Vec::new(), Vec::new());
        if self.decide {
            self.residuals_at(t, &mut dn);
        }
        for (col, (&i, &h)) in self.free.iter().zip(steps).enumerate() {
            let mut tp = *t;
            tp[i] += h;
            self.residuals_at(&tp, &mut up);
            let width = if self.decide {
                h
            } else {
                let mut tm = *t;
                tm[i] -= h;
                self.residuals_at(&tm, &mut dn);
                2.0 * h
            };
            for row in 0..m {
                j[(row, col)] = (up[row] - dn[row]) / width;
            }
        }
        j
    }
}

impl LeastSquaresProblem<f64, Dyn, Dyn> for Problem<'_> {
    type ResidualStorage = VecStorage<f64, Dyn, nalgebra::U1>;
    type JacobianStorage = VecStorage<f64, Dyn, Dyn>;
    type ParameterStorage = VecStorage<f64, Dyn, nalgebra::U1>;

    fn set_params(&mut self, x: &DVector<f64>) {
        let mut t = self.theta;
        for (k, &i) in self.free.iter().enumerate() {
            t[i] = x[k];
        }
        self.theta = self.clamp(t);
    }

    fn params(&self) -> DVector<f64> {
        DVector::from_iterator(self.free.len(), self.free.iter().map(|&i| self.theta[i]))
    }

    fn residuals(&self) -> Option<DVector<f64>> {
        let mut r = Vec::new();
        self.residuals_at(&self.theta, &mut r);
        r.iter().all(|x| x.is_finite()).then(|| DVector::from_vec(r))
    }

    fn jacobian(&self) -> Option<DMatrix<f64>> {
        let j = self.jacobian_at(&self.theta);
        j.iter().all(|x| x.is_finite()).then_some(j)
    }
}

fn minimize(p: Problem<'_>) -> Problem<'_> {
    let tol = if p.decide || p.coarse { LM_TOL_DECIDE } else { LM_TOL };
    let (p, report) = LevenbergMarquardt::new().with_patience(p.patience).with_tol(tol).minimize(p);
    if report.termination == levenberg_marquardt::TerminationReason::LostPatience {
        p.stalled.set(true);
    }
    p
}

/// Levenberg–Marquardt's patience (it gives up after `patience · (free parameters + 1)`
/// steps) for a survey's fits.
const LM_PATIENCE: usize = 200;
/// The same for a check's profile of a stiff pin's source under the node bound
/// [`STIFF_NODE_FARADS`]: there the search runs along the bound (a pin at a rail, whose
/// clipped readings barely move, took 18,000 evaluations for one point), and one that has not
/// converged in ~100 steps is treated as inside the interval, which can only widen it.
const LM_PATIENCE_STIFF_DECIDE: usize = 15;

/// Levenberg–Marquardt's convergence tolerance (relative, on χ² and θ) for a survey's fits.
const LM_TOL: f64 = 1e-12;
/// The same for a check's: a relative 1e-7 of χ² is far below the 3.84 that moves an interval
/// end, and takes about a third fewer model evaluations (33 kΩ, 10 pF: 15.7k against 27.5k).
const LM_TOL_DECIDE: f64 = 1e-7;

/// Standard deviations of the fit's Gaussian priors on its nuisance parameters: `ln Ch` and
/// `ln Rm` (half the log of the profile's ±2σ tolerance) and the firmware overhead, µs.
pub fn nuisance_prior_sd(b: &BoardModel) -> [f64; 3] {
    let ln_tol = |t: f64| (1.0 + t).ln();
    [ln_tol(b.hold_tolerance) / 2.0, ln_tol(b.switch_tolerance) / 2.0, OVERHEAD_PRIOR_US]
}

/// Standard deviation of the fit's Gaussian prior on the pin's leakage current, pA: half the
/// board's leakage bound (the bound as 2σ, as for the other tolerances); 0 when none is stated.
pub fn leak_prior_sd_pa(b: &BoardModel) -> f64 {
    b.leakage_amps * 1e12 / 2.0
}

/// Fits one pin. Returns `None` when there is nothing to fit.
pub fn fit_pin<'a>(input: &'a FitInput<'a>) -> Option<Fit> {
    fit_pin_for(input, &Goals::FULL)
}

/// Fits one pin with intervals as precise as `goals` asks. Returns `None` when there is
/// nothing to fit.
pub fn fit_pin_for<'a>(input: &'a FitInput<'a>, goals: &Goals) -> Option<Fit> {
    let mut p = Problem::new(input);
    p.decide = goals.decide_only;
    if p.obs.len() < 4 {
        return None;
    }
    let b = input.board;
    // Starting level: the cells read at the longest sample time.
    let longest = b.sample_ps.len().saturating_sub(1) as u8;
    let vs0 = start_level(input, longest).unwrap_or(b.vref_volts / 2.0);
    // A source behind a large node capacitor droops under repeated sampling, so the level read
    // at the longest sample time can sit tens of LSB from Vs; the level after the longest
    // period of a period sweep (the node rested) is then the better start. With Vs off by
    // that much no grid point is near the truth and LM can settle in a wrong valley.
    let mut levels = vec![vs0];
    if let Some(v) = rested_level(input).filter(|v| (v - vs0).abs() > 0.5 * b.lsb_volts()) {
        levels.push(v);
    }
    // Coarse grid over (ln Rs, ln Cn) at half-decade steps; the best few start LM.
    let mut starts: Vec<(f64, [f64; N_THETA])> = Vec::new();
    for &vs in &levels {
        let mut rs: f64 = RS_RANGE.0 * 10.0;
        while rs <= RS_RANGE.1 {
            let mut cn: f64 = 1e-12;
            while cn <= CN_RANGE.1 {
                let t = [rs.ln(), cn.ln(), vs, 0.0, 0.0, OVERHEAD_START_US.ln(), 0.0];
                starts.push((p.objective(&t), t));
                cn *= 10f64.sqrt();
            }
            rs *= 10f64.sqrt();
        }
    }
    starts.sort_by(|a, b| a.0.total_cmp(&b.0));
    let mut best: Option<(f64, [f64; N_THETA])> = None;
    for (_, t0) in starts.iter().take(3) {
        p = consider(p, *t0, &mut best);
    }
    // A fit that explains the readings this badly stopped in a wrong valley (behind a large
    // capacitor the best grid points can all lead to Rs → 0): try the next grid points too.
    let dof = p.obs.len().saturating_sub(3).max(1) as f64;
    let misfit = |p: &Problem<'_>, best: &Option<(f64, [f64; N_THETA])>| {
        best.is_none_or(|(_, t)| p.chi2_data(&t) > MISFIT_CHI2_PER_DOF * dof)
    };
    for (_, t0) in starts.iter().skip(3).take(EXTRA_STARTS) {
        if !misfit(&p, &best) {
            break;
        }
        p = consider(p, *t0, &mut best);
    }
    // The nuisance parameters can stall against their limits (the overhead at zero): restart
    // from the best point with them reset, keeping whatever improves.
    for overhead_us in [0.03, 0.3] {
        if let Some((_, t)) = best {
            let mut t0 = t;
            t0[LN_CH] = 0.0;
            t0[LN_RM] = 0.0;
            t0[OVERHEAD_US] = f64::ln(overhead_us);
            t0[LEAK_PA] = 0.0;
            p = consider(p, t0, &mut best);
        }
    }
    // Re-weight with the model's own within-cell spread at the optimum, and polish.
    let (_, t1) = best?;
    p.reweight(&t1);
    best = None;
    p = consider(p, t1, &mut best);
    let (_, theta) = best?;
    p.theta = theta;
    let chi2 = p.chi2_data(&theta);
    let dof = p.obs.len().saturating_sub(3);
    let birge2 = if dof > 0 { (chi2 / dof as f64).max(1.0) } else { 1.0 };
    // Covariance of the free parameters from the Jacobian at the optimum.
    let free = p.free.clone();
    let covariance = |j: DMatrix<f64>| pseudo_inverse(&(j.transpose() * &j)) * birge2;
    let variance =
        |cov: &DMatrix<f64>, i: usize| free.iter().position(|&f| f == i).map(|c| cov[(c, c)]).unwrap_or(0.0).max(0.0);
    // The profile searches start from the Wald ends of the fit's own (chord) Jacobian: only a
    // starting point, which moves an end only where a profile has two valleys, and the same
    // starts as the search has always had. What is reported (σ of ln Rs, the source's volts)
    // comes from the slopes themselves.
    let chords = p.jacobian_at(&theta);
    let start_cov = covariance(chords.clone());
    let (s_rs, s_cn) = (variance(&start_cov, LN_RS).sqrt(), variance(&start_cov, LN_CN).sqrt());
    let cov = covariance(p.jacobian_for_covariance(&theta, chords));
    let var = |i: usize| variance(&cov, i);
    let sigma_ln_rs = var(LN_RS).sqrt();
    let (rs_points, cn_points) = (goals.points(LN_RS, b), goals.points(LN_CN, b));
    let at95 = Rise { level: CHI2_95_1DOF, birge2 };
    let (p, mut source_ohms) = interval_log(p, theta, LN_RS, s_rs, at95, &starts, rs_points.as_deref());
    source_ohms = bound_if_wide(source_ohms, b.switch_ohms);
    // A check with no limit on the node reports it unmeasured, and sizes it only where the
    // source is open above: the stiff-node bound below needs to know whether the node's size
    // is open too.
    let node_wanted = cn_points.as_ref().is_none_or(|pts| !pts.is_empty());
    let (mut p, mut node_farads) = if node_wanted || source_ohms.high.is_none() {
        interval_log(p, theta, LN_CN, s_cn, at95, &starts, cn_points.as_deref())
    } else {
        (p, Interval::NONE)
    };
    // A slow pin's ends are redrawn at CHI2_SLOW; only ends already stated move (outward).
    let slow = slow_pin(&source_ohms, &node_farads);
    if slow {
        let slow_rise = Rise { level: CHI2_SLOW, birge2 };
        let (q, rs) = interval_log(p, theta, LN_RS, s_rs, slow_rise, &starts, rs_points.as_deref());
        let (q, cn) = interval_log(q, theta, LN_CN, s_cn, slow_rise, &starts, cn_points.as_deref());
        p = q;
        source_ohms = loosened(source_ohms, bound_if_wide(rs, b.switch_ohms));
        node_farads = loosened(node_farads, cn);
    }
    // A stiff node with nothing to show its size: a large source behind a capacitor larger than
    // the conversions could move explains the readings as well. Bound the source for a node
    // below STIFF_NODE_FARADS, and say so.
    let mut assumes_node_below = None;
    let mut reported = theta;
    if source_ohms.high.is_none() && node_farads.low.is_none() && !slow {
        let saved = p.bounds[LN_CN];
        p.bounds[LN_CN].1 = STIFF_NODE_FARADS.ln().min(saved.1);
        if p.decide {
            p.patience = LM_PATIENCE_STIFF_DECIDE;
        }
        let mut restricted = None;
        let t0 = p.clamp(theta);
        p = consider(p, t0, &mut restricted);
        if let Some((_, t)) = restricted {
            let (q, iv) = interval_log(p, t, LN_RS, s_rs, at95, &starts, rs_points.as_deref());
            p = q;
            if let Some(h) = iv.high {
                source_ohms = Interval { estimate: None, low: source_ohms.low, high: Some(h) };
                assumes_node_below = Some(STIFF_NODE_FARADS);
                // What the advice and the scan plan work from: the best fit within the
                // assumption the bound states, not a gigohm behind a millifarad.
                reported = t;
            }
        }
        p.bounds[LN_CN] = saved;
        p.patience = LM_PATIENCE;
    }
    if !node_wanted {
        node_farads = Interval::NONE;
    }
    let s_vs = var(VS).sqrt();
    let source_volts =
        Interval { estimate: Some(theta[VS]), low: Some(theta[VS] - Z95 * s_vs), high: Some(theta[VS] + Z95 * s_vs) };
    let evaluations = *p.evaluations.borrow();
    Some(Fit {
        params: p.params_of(&reported),
        theta: reported,
        chi2,
        dof,
        source_ohms,
        node_farads,
        source_volts,
        assumes_node_below,
        sigma_ln_rs,
        evaluations,
    })
}

/// An interval spanning more than a factor of [`BOUND_RATIO`] is a bound, not a measurement:
/// below the switch resistance `switch_ohms` the data say "at most", far above it "at least".
fn bound_if_wide(iv: Interval, switch_ohms: f64) -> Interval {
    match (iv.estimate, iv.low, iv.high) {
        (Some(e), Some(l), Some(h)) if h / l > BOUND_RATIO => {
            if e < switch_ohms {
                Interval { estimate: None, low: None, high: Some(h) }
            } else {
                Interval { estimate: None, low: Some(l), high: None }
            }
        }
        _ => iv,
    }
}

/// Whether a pin is seen only through slow drifts and recoveries: the data cannot rule out an
/// open pin (its source is open above) while its node holds at least [`SLOW_NODE_FARADS`]. Its
/// time constant, at least the two low ends' product, then runs to a tenth of a second and
/// more, beyond the survey's conversions, and what the readings show of it is a drift under
/// the survey's charge sharing or a recovery over the gaps between experiments: exactly where
/// what the model leaves out acts too (a capacitor's dielectric absorption and voltage
/// coefficient, leakage that changes with the pin's level), and where a miss is a large one in
/// relative terms. Its ends are drawn at [`CHI2_SLOW`]. Two tails of the accuracy grid at the
/// 95% level were such pins: an open pin behind 10 µF read `4.30 µF (3.02–7.67 µF)` (the truth
/// 6.5 above the best fit) and 100 kΩ behind 1 µF read `> 133 kΩ` (5.4 above).
pub fn slow_pin(source_ohms: &Interval, node_farads: &Interval) -> bool {
    source_ohms.high.is_none() && node_farads.low.is_some_and(|c| c >= SLOW_NODE_FARADS)
}

/// `narrow` with its ends moved out to `wide`'s: an end only one of them states is dropped
/// (never added), and the estimate stays only where both have one.
fn loosened(narrow: Interval, wide: Interval) -> Interval {
    let end = |n: Option<f64>, w: Option<f64>, outward: fn(f64, f64) -> f64| Some(outward(n?, w?));
    Interval {
        estimate: narrow.estimate.and(wide.estimate),
        low: end(narrow.low, wide.low, f64::min),
        high: end(narrow.high, wide.high, f64::max),
    }
}

/// Standard error of a cell mean: noise over the count, slow interference that the cell's
/// readings share, plus [`MODEL_FLOOR_LSB`] for what the
/// model leaves out (converter non-linearity, residual charge, timing jitter).
pub(crate) fn cell_se(noise_var: f64, count: u32, coherent_var: f64, model_floor: f64) -> f64 {
    (noise_var / f64::from(count.max(1)) + coherent_var + model_floor * model_floor).sqrt()
}

/// Runs LM from `t0` and keeps the result in `best` if it is the lowest objective so far.
fn consider<'a>(mut p: Problem<'a>, t0: [f64; N_THETA], best: &mut Option<(f64, [f64; N_THETA])>) -> Problem<'a> {
    p.theta = t0;
    p = minimize(p);
    let obj = p.objective(&p.theta);
    if best.is_none_or(|(o, _)| obj < o) {
        *best = Some((obj, p.theta));
    }
    p
}

/// Mean level of the cells read at sample index `sample` by precharge sweeps, V.
fn start_level(input: &FitInput<'_>, sample: u8) -> Option<f64> {
    let mut acc = (0.0, 0);
    for ev in input.events {
        if let (ohmsight_protocol::Experiment::PrechargeSweep { samples, precharges, .. }, Some(cells)) =
            (&ev.experiment, &ev.cells)
        {
            let np = precharges.len();
            for (si, &s) in samples.iter().enumerate() {
                if s == sample {
                    for c in &cells[si * np..(si + 1) * np] {
                        acc.0 += c.mean;
                        acc.1 += 1;
                    }
                }
            }
        }
    }
    (acc.1 > 0).then(|| input.board.code_volts(acc.0 / f64::from(acc.1)))
}

/// Mean level of the period-sweep cells at the longest period used (when it is not back to
/// back), V: the node has had the longest time to recover toward its source there.
fn rested_level(input: &FitInput<'_>) -> Option<f64> {
    let mut cells: Vec<(u32, f64)> = Vec::new();
    for ev in input.events {
        if let (ohmsight_protocol::Experiment::PeriodSweep { periods_ns, .. }, Some(c)) = (&ev.experiment, &ev.cells) {
            cells.extend(periods_ns.iter().zip(c).map(|(&p, c)| (p, c.mean)));
        }
    }
    let longest = cells.iter().map(|c| c.0).max().filter(|&p| p > 0)?;
    let at: Vec<f64> = cells.iter().filter(|c| c.0 == longest).map(|c| c.1).collect();
    Some(input.board.code_volts(at.iter().sum::<f64>() / at.len() as f64))
}

fn pseudo_inverse(m: &DMatrix<f64>) -> DMatrix<f64> {
    let n = m.nrows();
    m.clone().pseudo_inverse(1e-14 * m.norm()).unwrap_or_else(|_| DMatrix::from_element(n, n, f64::INFINITY))
}

/// Interval for a log-parameter from the profile likelihood: where the objective, with every
/// other parameter re-optimized, rises by `level` (χ²₁(95%), or [`CHI2_SLOW`] for a slow pin;
/// scaled by the Birge ratio) on each side.
/// A side that never rises within the search range is open: the parameter is only bounded.
/// The covariance's `sigma` only seeds the search; with two uncertain board constants the
/// posterior is curved enough that the Wald interval alone is too narrow (in a 30-seed study of
/// a 2.2 MΩ / 25 pF pin the Wald interval held the truth 26 times, this one 29).
///
/// The set of values the data allow need not be one piece: behind a large node a small source
/// and a large one can both explain the readings, with the values between excluded. So an edge
/// is only kept if no grid point of the fit's start-up search beyond it leads to a profile
/// within the threshold; otherwise that side is open.
fn interval_log<'a>(
    p: Problem<'a>,
    theta: [f64; N_THETA],
    i: usize,
    sigma: f64,
    rise: Rise,
    grid: &[(f64, [f64; N_THETA])],
    points: Option<&[f64]>,
) -> (Problem<'a>, Interval) {
    let (lo_b, hi_b) = p.bounds[i];
    let Rise { level, birge2 } = rise;
    let threshold = p.objective(&theta) + level * birge2;
    let (p, low) = profile_edge(p, theta, i, lo_b, threshold, sigma, points);
    let (p, high) = profile_edge(p, theta, i, hi_b, threshold, sigma, points);
    let valley = threshold + (CHI2_SECOND_VALLEY - CHI2_95_1DOF) * birge2;
    let edge = Edge { i, threshold, valley, sigma, points };
    let (p, low, crossed_low) = beyond_edge(p, &edge, low, lo_b, grid, 2);
    let (p, high, crossed_high) = beyond_edge(p, &edge, high, hi_b, grid, 2);
    // An interval that spans two valleys has no best value to quote: the optimum found first
    // need not be the deeper one. Its ends stand, as a range.
    let estimate = (low.is_some() && high.is_some() && !crossed_low && !crossed_high).then(|| theta[i].exp());
    (p, Interval { estimate, low: low.map(f64::exp), high: high.map(f64::exp) })
}

/// How far above the best fit a profile interval's ends lie: `level` (χ²) times the square of
/// the fit's Birge ratio.
#[derive(Debug, Clone, Copy)]
struct Rise {
    level: f64,
    birge2: f64,
}

/// What an edge search of parameter `i` works to: the objective's threshold, the Wald width
/// and the decision points (see [`profile_edge`]).
struct Edge<'e> {
    i: usize,
    threshold: f64,
    /// The level a separate second valley must reach ([`CHI2_SECOND_VALLEY`]).
    valley: f64,
    sigma: f64,
    points: Option<&'e [f64]>,
}

/// An edge of a profile interval, checked for another valley beyond it: the best grid point
/// past the edge (by at least a tenth of an e-fold, inside the current bounds) and probes past
/// it are profiled: for the source resistance a quarter, a half, one and three decades past
/// the edge (a profile point where the re-fit missed the valley's floor can end the walk early:
/// a 1 kΩ source under 30 mV of hum on the fast board read `183 Ω (171–232 Ω)` with the
/// profile flat to 1.5 kΩ but for a false peak at 270 Ω); for the node capacitance a quarter
/// decade past the edge and then every half decade up to `limit`, because behind a large node the
/// loading burst's drift pins the node to a valley well under a decade wide (47 kΩ behind
/// 10 µF: inside the threshold from about 5 to 25 µF, while the fit had stopped at 55 nF with
/// an upper end of 277 nF). One within the threshold is a second valley (a small source
/// behind a modest node beside a large one behind a stiff node): the edge search goes on from
/// there toward `limit`, and the side opens (`None`) once `depth` valleys have been crossed.
/// The flag says whether a valley was crossed.
fn beyond_edge<'a>(
    mut p: Problem<'a>,
    edge: &Edge<'_>,
    found: Option<f64>,
    limit: f64,
    grid: &[(f64, [f64; N_THETA])],
    depth: u8,
) -> (Problem<'a>, Option<f64>, bool) {
    let Some(e) = found else { return (p, None, false) };
    let i = edge.i;
    let dir = (limit - e).signum();
    let inside = |t: &[f64; N_THETA]| {
        [LN_RS, LN_CN].iter().all(|&k| t[k] >= p.bounds[k].0 - 1e-9 && t[k] <= p.bounds[k].1 + 1e-9)
    };
    // The best grid point past the edge, then probes a decade and three decades past it (the
    // profile's own scan of the other parameter finds the valley there, if there is one).
    let mut past: Vec<[f64; N_THETA]> =
        grid.iter().filter(|(_, t)| dir * (t[i] - e) > 0.1 && inside(t)).take(1).map(|(_, t)| *t).collect();
    let (lo, hi) = p.bounds[i];
    let steps: Vec<f64> = if p.decide {
        // A check's fit asks only on which side of its decision points each end lies: probes
        // just past the limit ends beyond the edge, besides a decade and three decades on (the
        // floating threshold is left to those: a probe there cost the bench board's check
        // 0.1 s). The fine ladder below cost a check 70% more host time (0.9 s → 1.7 s).
        let floating = crate::judge::floating_ohms(p.input.board).ln();
        let at_points =
            edge.points.unwrap_or_default().iter().filter(|&&x| dir * (x - e) > 0.0 && (x - floating).abs() > 1e-9);
        at_points.map(|&x| (x - e).abs() / std::f64::consts::LN_10 + 0.01).chain([1.0, 3.0]).collect()
    } else if i == LN_CN {
        std::iter::once(0.25)
            .chain((1..).map(|k| f64::from(k) / 2.0))
            .take_while(|k| k * std::f64::consts::LN_10 < (limit - e).abs())
            .collect()
    } else {
        vec![0.25, 0.5, 1.0, 3.0]
    };
    for k in steps {
        let x = e + dir * k * std::f64::consts::LN_10;
        if x > lo && x < hi {
            if let Some(&(_, mut t)) = grid.first() {
                t[i] = x;
                past.push(t);
            }
        }
    }
    let saved_free = p.free.clone();
    p.free.retain(|&f| f != i);
    let mut valley = None;
    // Probes already made: distance past the edge and objective. A probe above the threshold
    // but within the second-valley level counts when a nearer probe stood higher by the ridge.
    let mut seen: Vec<(f64, f64)> = Vec::new();
    // A probe asks only whether it is inside: a χ² converged to a relative 1e-7 answers that.
    p.coarse = true;
    for t in past {
        let (q, obj, at) = profile_at(p, i, t[i], t, edge.threshold);
        p = q;
        let d = dir * (t[i] - e);
        let ridge = seen.iter().any(|&(dq, oq)| dq < d && oq >= obj + VALLEY_RIDGE);
        if obj <= edge.threshold || (obj <= edge.valley && ridge) {
            valley = Some((at, obj > edge.threshold));
            break;
        }
        seen.push((d, obj));
    }
    p.coarse = false;
    p.free = saved_free;
    match valley {
        None => (p, Some(e), false),
        Some(_) if depth == 0 => (p, None, true),
        Some((at, second)) => {
            // A valley above the threshold is walked at its own level.
            let level = if second { edge.valley } else { edge.threshold };
            let (p, next) = profile_edge(p, at, i, limit, level, edge.sigma, edge.points);
            let (p, end, _) = beyond_edge(p, edge, next, limit, grid, depth - 1);
            (p, end, true)
        }
    }
}

/// The profile objective at θᵢ = x: the other free parameters re-optimized, from `warm` and
/// from the best point of a coarse scan of the other log-parameter (the valleys are narrow
/// and curved, so one warm start can miss the floor). In a check's fit, a warm start that
/// already reaches `threshold` settles the question the callers ask (is the point inside?)
/// and the scan is skipped.
fn profile_at<'a>(
    mut p: Problem<'a>,
    i: usize,
    x: f64,
    warm: [f64; N_THETA],
    threshold: f64,
) -> (Problem<'a>, f64, [f64; N_THETA]) {
    let mut t0 = warm;
    t0[i] = x;
    let mut best: Option<(f64, [f64; N_THETA])> = None;
    p.stalled.set(false);
    p = consider(p, t0, &mut best);
    if let Some((obj, t)) = best.filter(|(obj, _)| p.decide && *obj <= threshold) {
        return (p, obj, t);
    }
    let other = if i == LN_RS { LN_CN } else { LN_RS };
    let (lo, hi) = p.bounds[other];
    let scan: Vec<(f64, [f64; N_THETA])> = (0..=PROFILE_SCAN)
        .map(|k| {
            let mut t = t0;
            t[other] = lo + (hi - lo) * f64::from(k) / f64::from(PROFILE_SCAN);
            (p.objective(&t), t)
        })
        .collect();
    // The two deepest valleys of the scan: a small source behind a modest node and a large one
    // behind a stiff node can both explain a pin, and the deeper one on a coarse scan is not
    // always the deeper one at its floor.
    let mut valleys: Vec<&(f64, [f64; N_THETA])> = (0..scan.len())
        .filter(|&k| {
            let o = scan[k].0;
            (k == 0 || o <= scan[k - 1].0) && (k + 1 == scan.len() || o <= scan[k + 1].0)
        })
        .map(|k| &scan[k])
        .collect();
    valleys.sort_by(|a, b| a.0.total_cmp(&b.0));
    for &(_, t) in valleys.iter().take(2) {
        p = consider(p, *t, &mut best);
        if p.decide && best.is_some_and(|(obj, _)| obj <= threshold) {
            break;
        }
    }
    let (mut obj, t) = best.unwrap_or((f64::INFINITY, t0));
    // A check's stalled search may not have reached the floor: not shown to be outside.
    if p.decide && p.stalled.get() {
        obj = obj.min(threshold);
    }
    (p, obj, t)
}

/// Walks θᵢ from its optimum toward `limit` and returns where the profile objective crosses
/// `threshold`; `None` if it never does before the limit. With decision `points`, the search
/// stops once none lies between the last value inside and the first outside, and returns the
/// outside one (see [`Goals`]).
fn profile_edge<'a>(
    mut p: Problem<'a>,
    theta: [f64; N_THETA],
    i: usize,
    limit: f64,
    threshold: f64,
    sigma: f64,
    points: Option<&[f64]>,
) -> (Problem<'a>, Option<f64>) {
    let saved_free = p.free.clone();
    p.free.retain(|&f| f != i);
    let dir = (limit - theta[i]).signum();
    // Bracket the crossing: start where the Wald interval would end, step outward doubling.
    let mut step = if sigma.is_finite() && sigma > 0.0 { (1.5 * Z95 * sigma).clamp(0.05, 3.0) } else { 1.0 };
    let (mut inside, mut warm) = (theta[i], theta);
    let mut outside = None;
    loop {
        let x = if dir > 0.0 { (theta[i] + step).min(limit) } else { (theta[i] - step).max(limit) };
        let (q, obj, t) = profile_at(p, i, x, warm, threshold);
        p = q;
        if obj > threshold {
            outside = Some(x);
            break;
        }
        inside = x;
        warm = t;
        if x == limit {
            break;
        }
        step *= 2.0;
    }
    // Bisect to a tenth of the Wald width (at least 1% in the log).
    let tol = if sigma.is_finite() { (0.1 * sigma).clamp(0.01, 0.05) } else { 0.02 };
    let mut result = None;
    // With decision points: whether none lies between the last value inside and the first
    // outside, so that no bisection step could move one of them to the other side.
    let decided =
        |inside: f64, out: f64| points.is_some_and(|pts| !pts.iter().any(|&x| (x - inside) * (x - out) < 0.0));
    if let Some(mut out) = outside {
        while (out - inside).abs() > tol && !decided(inside, out) {
            let mid = (inside + out) / 2.0;
            let (q, obj, t) = profile_at(p, i, mid, warm, threshold);
            p = q;
            if obj <= threshold {
                inside = mid;
                warm = t;
            } else {
                out = mid;
            }
        }
        result = Some(if points.is_some() { out } else { (inside + out) / 2.0 });
    }
    p.free = saved_free;
    p.theta = theta;
    (p, result)
}

/// The profile objective of log-parameter `i` ([`LN_RS`] or [`LN_CN`]) at `ln_x`, the other
/// parameters re-optimized from `start` and a coarse scan: for studies that look for a second
/// valley the interval search missed.
pub fn profile_objective(input: &FitInput<'_>, i: usize, ln_x: f64, start: &PinParams) -> f64 {
    let mut p = Problem::new(input);
    let t = theta_of(input.board, start);
    p.reweight(&t);
    p.free.retain(|&f| f != i);
    let (_, obj, _) = profile_at(p, i, ln_x, t, f64::INFINITY);
    obj
}

/// The profile behind one of `fit`'s intervals, for a plot: at each of `xs` (Ω for [`LN_RS`],
/// F for [`LN_CN`]; those outside the search range are left out) the rise of the objective,
/// the other parameters re-optimized, above its value at the fit, with the weights the
/// interval search used. The interval's ends are where it crosses
/// `CHI2_95_1DOF · fit.birge()`. A source bound that assumes a node below some capacitance
/// ([`Fit::assumes_node_below`]) is profiled under that assumption, as it was found.
pub fn profile_rise(input: &FitInput<'_>, fit: &Fit, i: usize, xs: &[f64]) -> Vec<(f64, f64)> {
    let mut p = Problem::new(input);
    p.reweight(&fit.theta);
    if let (LN_RS, Some(c)) = (i, fit.assumes_node_below) {
        p.bounds[LN_CN].1 = c.ln().min(p.bounds[LN_CN].1);
    }
    let base = p.objective(&fit.theta);
    p.free.retain(|&f| f != i);
    let (lo, hi) = p.bounds[i];
    let mut warm = fit.theta;
    let mut out = Vec::new();
    for &x in xs {
        let ln_x = x.ln();
        if !(lo..=hi).contains(&ln_x) {
            continue;
        }
        let (q, obj, t) = profile_at(p, i, ln_x, warm, f64::INFINITY);
        p = q;
        warm = t;
        out.push((x, obj - base));
    }
    out
}

/// The fit's objective (data χ² plus prior penalties) at given parameters: for tests and
/// studies that compare the optimum with the truth.
pub fn objective_at(input: &FitInput<'_>, p: &PinParams) -> f64 {
    Problem::new(input).objective(&theta_of(input.board, p))
}

/// The fit's parameter vector for given parameters (the inverse of `Problem::params_of`).
fn theta_of(b: &BoardModel, p: &PinParams) -> [f64; N_THETA] {
    [
        p.source_ohms.ln(),
        p.node_farads.ln(),
        p.source_volts,
        (p.hold_farads / b.hold_farads).ln(),
        (p.switch_ohms / b.switch_ohms).ln(),
        (p.overhead_s * 1e6).max(1e-4 * OVERHEAD_PRIOR_US).ln(),
        p.leak_amps * 1e12,
    ]
}

#[cfg(test)]
mod tests {
    use super::*;

    fn iv(estimate: Option<f64>, low: Option<f64>, high: Option<f64>) -> Interval {
        Interval { estimate, low, high }
    }

    #[test]
    fn a_slow_pin_is_open_above_behind_a_measured_large_node() {
        let open_above = iv(None, Some(133e3), None);
        assert!(slow_pin(&open_above, &iv(Some(980e-9), Some(821e-9), Some(1.21e-6))));
        assert!(slow_pin(&iv(None, None, None), &iv(Some(4.3e-6), Some(3.02e-6), Some(7.67e-6))));
        // A measured source, a node only bounded above, or a small node: not slow.
        assert!(!slow_pin(&iv(Some(316e3), Some(200e3), Some(500e3)), &iv(Some(1e-6), Some(0.8e-6), Some(1.2e-6))));
        assert!(!slow_pin(&open_above, &iv(None, None, Some(1e-6))));
        assert!(!slow_pin(&open_above, &iv(Some(30e-9), Some(20e-9), Some(45e-9))));
    }

    #[test]
    fn loosening_moves_stated_ends_out_and_adds_none() {
        let narrow = iv(Some(4.3e-6), Some(3.02e-6), Some(7.67e-6));
        assert_eq!(
            loosened(narrow, iv(Some(4.3e-6), Some(2.5e-6), Some(11e-6))),
            iv(Some(4.3e-6), Some(2.5e-6), Some(11e-6))
        );
        // The wide search opened the top: no top; it crossed a valley: no estimate.
        assert_eq!(loosened(narrow, iv(None, Some(2.5e-6), None)), iv(None, Some(2.5e-6), None));
        // A bound stays a bound on its side, however the wide search came out.
        let bound = iv(None, Some(133e3), None);
        assert_eq!(loosened(bound, iv(Some(300e3), Some(90e3), Some(900e3))), iv(None, Some(90e3), None));
    }

    #[test]
    fn a_wide_interval_becomes_a_bound_on_the_side_of_its_estimate() {
        let switch = 2e3;
        assert_eq!(bound_if_wide(iv(Some(316e3), Some(133e3), Some(700e3)), switch), iv(None, Some(133e3), None));
        assert_eq!(bound_if_wide(iv(Some(100.0), Some(20.0), Some(900.0)), switch), iv(None, None, Some(900.0)));
        let narrow = iv(Some(316e3), Some(200e3), Some(500e3));
        assert_eq!(bound_if_wide(narrow, switch), narrow);
    }
}
