//! The sampling network of one ADC channel, solved exactly per phase.
//!
//! ```text
//!   Vs ──Rs──┬── node ──Rm──/ ──┬── hold
//!            Cn   (Ileak out)   Ch
//!            ⏚                  ⏚
//! ```
//! While the sampling switch is closed the state `x = [Vn, Vh]` obeys the linear system
//! `dx/dt = A·x + b` with
//! `A = [[-(Gs+Gm)/Cn, Gm/Cn], [Gm/Ch, -Gm/Ch]]`, `b = [(Gs·Vs − Ileak)/Cn, 0]`,
//! `Gs = 1/Rs` (zero for a floating pin), `Gm = 1/Rm`. Its eigenvalues are real, distinct and
//! non-positive (`det A = Gs·Gm/(Cn·Ch) ≥ 0`, discriminant `((a11−a22)/2)² + a12·a21 > 0`), so
//! Sylvester's formula gives the matrix exponential in closed form:
//! `e^{At} = (e^{λ₁t}(A−λ₂I) − e^{λ₂t}(A−λ₁I)) / (λ₁−λ₂)` and the forced part
//! `∫₀ᵗ e^{As} ds · b` likewise with `φ(λ) = (e^{λt}−1)/λ` in place of `e^{λt}`; the floating
//! case (`λ₁ = 0`) needs no special branch. While the switch is open only the node moves.

use libm::{exp, expm1, sqrt};

/// One channel's sampling network, SI units.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Network {
    /// Thevenin source voltage, V.
    pub source_volts: f64,
    /// Thevenin source resistance, Ω; `f64::INFINITY` for a floating (unconnected) pin.
    pub source_ohms: f64,
    /// Node capacitance (pin + trace + filter capacitor), F.
    pub node_farads: f64,
    /// Multiplexer + sampling-switch resistance, Ω.
    pub switch_ohms: f64,
    /// Hold capacitance, F.
    pub hold_farads: f64,
    /// Leakage current out of the node, A.
    pub leak_amps: f64,
}

/// Voltages of the node and of the hold capacitor, V.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct State {
    /// Node (pin) voltage.
    pub node_volts: f64,
    /// Hold-capacitor voltage.
    pub hold_volts: f64,
}

/// The exact affine map of one switch-closed phase: `x ← Φ·x + γ`.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Sampling {
    /// State-transition matrix `e^{At}`.
    pub phi: [[f64; 2]; 2],
    /// Forced response `∫₀ᵗ e^{As} ds · b`.
    pub gamma: [f64; 2],
}

/// The exact affine map of one switch-open phase: `Vn ← a·Vn + c`, `Vh` unchanged.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Open {
    /// Decay factor `e^{−t·Gs/Cn}`.
    pub a: f64,
    /// Forced part.
    pub c: f64,
}

/// `(1 − e^{−x}) / x`, continuous at 0.
fn one_minus_exp_neg_over(x: f64) -> f64 {
    if x.abs() < 1e-12 {
        1.0 - x / 2.0
    } else {
        -expm1(-x) / x
    }
}

/// `φ(λ, t) = (e^{λt} − 1)/λ`, equal to `t` at `λ = 0`.
fn phi(lambda: f64, t: f64) -> f64 {
    let x = lambda * t;
    if x.abs() < 1e-12 {
        t * (1.0 + x / 2.0)
    } else {
        expm1(x) / lambda
    }
}

impl Network {
    /// Source conductance `1/Rs`, 0 for a floating pin.
    pub fn source_siemens(&self) -> f64 {
        if self.source_ohms.is_finite() {
            1.0 / self.source_ohms
        } else {
            0.0
        }
    }

    /// Node voltage at rest (switch open for a long time); `None` for a floating pin, whose
    /// rest level is wherever its charge left it.
    pub fn rest_volts(&self) -> Option<f64> {
        self.source_ohms.is_finite().then_some(self.source_volts - self.leak_amps * self.source_ohms)
    }

    /// Exact map of a switch-closed (sampling) phase of `t` seconds.
    pub fn sampling(&self, t: f64) -> Sampling {
        let gs = self.source_siemens();
        let gm = 1.0 / self.switch_ohms;
        let (cn, ch) = (self.node_farads, self.hold_farads);
        let a = [[-(gs + gm) / cn, gm / cn], [gm / ch, -gm / ch]];
        let b0 = (gs * self.source_volts - self.leak_amps) / cn;
        let tr = a[0][0] + a[1][1];
        let half_diff = (a[0][0] - a[1][1]) / 2.0;
        let disc = half_diff * half_diff + a[0][1] * a[1][0];
        let fast = tr / 2.0 - sqrt(disc); // most negative
        let det = gs * gm / (cn * ch);
        let slow = det / fast; // stable form of tr/2 + sqrt(disc)
        let span = slow - fast; // > 0
        let (es, ef) = (exp(slow * t), exp(fast * t));
        let (ps, pf) = (phi(slow, t), phi(fast, t));
        // M_f = A − fast·I, M_s = A − slow·I
        let mf = [[a[0][0] - fast, a[0][1]], [a[1][0], a[1][1] - fast]];
        let ms = [[a[0][0] - slow, a[0][1]], [a[1][0], a[1][1] - slow]];
        let mut phi_m = [[0.0; 2]; 2];
        let mut int_m = [[0.0; 2]; 2];
        for i in 0..2 {
            for j in 0..2 {
                phi_m[i][j] = (es * mf[i][j] - ef * ms[i][j]) / span;
                int_m[i][j] = (ps * mf[i][j] - pf * ms[i][j]) / span;
            }
        }
        Sampling { phi: phi_m, gamma: [int_m[0][0] * b0, int_m[1][0] * b0] }
    }

    /// Exact map of a switch-open phase of `t` seconds (the hold capacitor keeps its charge).
    pub fn open(&self, t: f64) -> Open {
        let gs = self.source_siemens();
        let x = gs * t / self.node_farads;
        let a = exp(-x);
        // c = (1 − a)·Vs − (1 − a)/Gs · Ileak, written without dividing by Gs.
        let w = one_minus_exp_neg_over(x) * t / self.node_farads; // (1 − a)/Gs
        let c = (1.0 - a) * self.source_volts - w * self.leak_amps;
        Open { a, c }
    }
}

impl Sampling {
    /// Applies the map.
    pub fn apply(&self, s: State) -> State {
        State {
            node_volts: self.phi[0][0] * s.node_volts + self.phi[0][1] * s.hold_volts + self.gamma[0],
            hold_volts: self.phi[1][0] * s.node_volts + self.phi[1][1] * s.hold_volts + self.gamma[1],
        }
    }
}

impl Open {
    /// Applies the map.
    pub fn apply(&self, s: State) -> State {
        State { node_volts: self.a * s.node_volts + self.c, hold_volts: s.hold_volts }
    }
}

/// Converts a voltage to LSB units of an `bits`-bit converter with full scale `vref_volts`
/// (code `k` is centred on `k` LSB).
pub fn volts_to_lsb(volts: f64, vref_volts: f64, bits: u8) -> f64 {
    volts * ((1u64 << bits) as f64) / vref_volts
}

#[cfg(test)]
mod tests {
    use super::*;

    fn net(rs: f64, cn: f64) -> Network {
        Network {
            source_volts: 1.0,
            source_ohms: rs,
            node_farads: cn,
            switch_ohms: 6e3,
            hold_farads: 4e-12,
            leak_amps: 0.0,
        }
    }

    /// Independent reference: classical RK4 on the same ODE with a tiny step.
    fn rk4(n: &Network, s: State, t: f64, steps: usize) -> State {
        let gs = n.source_siemens();
        let gm = 1.0 / n.switch_ohms;
        let f = |x: [f64; 2]| {
            let i_s = gs * (n.source_volts - x[0]) - n.leak_amps;
            let i_m = gm * (x[0] - x[1]);
            [(i_s - i_m) / n.node_farads, i_m / n.hold_farads]
        };
        let h = t / steps as f64;
        let mut x = [s.node_volts, s.hold_volts];
        for _ in 0..steps {
            let k1 = f(x);
            let k2 = f([x[0] + h / 2.0 * k1[0], x[1] + h / 2.0 * k1[1]]);
            let k3 = f([x[0] + h / 2.0 * k2[0], x[1] + h / 2.0 * k2[1]]);
            let k4 = f([x[0] + h * k3[0], x[1] + h * k3[1]]);
            for i in 0..2 {
                x[i] += h / 6.0 * (k1[i] + 2.0 * k2[i] + 2.0 * k3[i] + k4[i]);
            }
        }
        State { node_volts: x[0], hold_volts: x[1] }
    }

    #[test]
    fn closed_form_matches_rk4_across_regimes() {
        let start = State { node_volts: 1.0, hold_volts: 0.0 };
        for &(rs, cn, t) in &[
            (1e3, 5e-12, 200e-9),
            (100e3, 10e-12, 2e-6),
            (1e6, 2e-12, 20e-6),
            (4.7e3, 100e-9, 1e-6),
            (f64::INFINITY, 10e-12, 1e-6),
        ] {
            let n = net(rs, cn);
            let exact = n.sampling(t).apply(start);
            let num = rk4(&n, start, t, 200_000);
            assert!((exact.hold_volts - num.hold_volts).abs() < 1e-9, "Rs={rs} Cn={cn}: {exact:?} vs {num:?}");
            assert!((exact.node_volts - num.node_volts).abs() < 1e-9, "Rs={rs} Cn={cn}");
        }
    }

    #[test]
    fn charge_is_conserved_on_a_floating_node() {
        // Textbook charge conservation: with no DC path, Cn·Vn + Ch·Vh is constant and the two
        // capacitors end at the charge-weighted mean.
        let n = net(f64::INFINITY, 10e-12);
        let s0 = State { node_volts: 2.0, hold_volts: 0.5 };
        let q0 = n.node_farads * s0.node_volts + n.hold_farads * s0.hold_volts;
        for &t in &[1e-9, 30e-9, 1e-6] {
            let s = n.sampling(t).apply(s0);
            let q = n.node_farads * s.node_volts + n.hold_farads * s.hold_volts;
            assert!((q - q0).abs() < 1e-24, "charge moved: {q} vs {q0}");
        }
        let end = n.sampling(1e-3).apply(s0);
        let mean = q0 / (n.node_farads + n.hold_farads);
        assert!((end.hold_volts - mean).abs() < 1e-12 && (end.node_volts - mean).abs() < 1e-12);
    }

    #[test]
    fn large_filter_capacitor_shares_charge_instantly() {
        // ΔV = (Vn − Vh)·Ch/(Ch + Cn) once the switch has settled (≫ Rm·Ch), before Rs recovers.
        let n = net(1e6, 100e-9);
        let s = n.sampling(2e-6).apply(State { node_volts: 1.0, hold_volts: 0.0 });
        let want = 1.0 - 1.0 * 4e-12 / (4e-12 + 100e-9);
        assert!((s.node_volts - want).abs() < 1e-8, "{} vs {want}", s.node_volts);
        assert!((s.hold_volts - s.node_volts).abs() < 1e-9);
    }

    #[test]
    fn tiny_node_reduces_to_single_rc() {
        // With Cn → 0 the hold capacitor charges through Rs + Rm: Vh = Vs·(1 − e^{−t/τ}),
        // τ = (Rs + Rm)·Ch (single-pole RC, textbook).
        let mut n = net(10e3, 1e-17);
        n.switch_ohms = 1e3;
        n.hold_farads = 8e-12;
        let tau = 11e3 * 8e-12;
        for &t in &[20e-9, 88e-9, 400e-9] {
            let s = n.sampling(t).apply(State { node_volts: 0.0, hold_volts: 0.0 });
            let want = 1.0 - libm::exp(-t / tau);
            assert!((s.hold_volts - want).abs() < 1e-5, "t={t}: {} vs {want}", s.hold_volts);
        }
    }

    #[test]
    fn open_phase_recovers_through_rs_and_drifts_when_floating() {
        let n = net(1e6, 10e-12); // τ = 10 µs
        let s = n.open(10e-6).apply(State { node_volts: 0.0, hold_volts: 0.3 });
        assert!((s.node_volts - (1.0 - libm::exp(-1.0))).abs() < 1e-12);
        assert_eq!(s.hold_volts, 0.3);
        let mut f = net(f64::INFINITY, 10e-12);
        f.leak_amps = 10e-12; // 10 pA out of 10 pF: −1 V/s
        let s = f.open(1e-3).apply(State { node_volts: 1.0, hold_volts: 0.0 });
        assert!((s.node_volts - 0.999).abs() < 1e-12);
        // The same leak on a driven pin settles at Vs − I·Rs.
        let mut d = net(1e6, 10e-12);
        d.leak_amps = 10e-12;
        let s = d.open(1.0).apply(State { node_volts: 0.0, hold_volts: 0.0 });
        assert!((s.node_volts - (1.0 - 10e-12 * 1e6)).abs() < 1e-12);
        assert_eq!(d.rest_volts(), Some(1.0 - 1e-5));
    }

    #[test]
    fn rc_rule_table_for_12_bit_adc() {
        // Published SAR input rule R_AIN < k/(f_ADC·C_ADC·ln(2^(N+2))) − R_ADC and its worked
        // table for f_ADC = 14 MHz, C_ADC = 8 pF, R_ADC = 1 kΩ, N = 12 (a 12-bit MCU datasheet's
        // "R_AIN max" table, as quoted in DESIGN.md §8).
        // (cycles, tabulated R_AIN max, rounding step of the printed value)
        let table = [
            (1.5, 0.4e3, 0.1e3),
            (7.5, 5.9e3, 0.1e3),
            (13.5, 11.4e3, 0.1e3),
            (28.5, 25.2e3, 0.1e3),
            (41.5, 37.2e3, 0.1e3),
            (55.5, 50e3, 1e3), // printed without a decimal
        ];
        let (f, c, r_adc, bits) = (14e6, 8e-12, 1e3, 12u32);
        let ln = libm::log(libm::pow(2.0, f64::from(bits + 2)));
        for &(cycles, r_table, step) in &table {
            let r_rule = cycles / (f * c * ln) - r_adc;
            assert!((r_rule - r_table).abs() <= step / 2.0, "{cycles} cycles: rule {r_rule} vs table {r_table}");
            // Our exact model, with a negligible node capacitance, settles a full-scale step to
            // exactly 2^-(N+2) of full scale at that sample time when Rs is the rule's value.
            let n = Network {
                source_volts: 1.0,
                source_ohms: r_rule,
                node_farads: 1e-18,
                switch_ohms: r_adc,
                hold_farads: c,
                leak_amps: 0.0,
            };
            let s = n.sampling(cycles / f).apply(State { node_volts: 1.0, hold_volts: 0.0 });
            let err = (1.0 - s.hold_volts) * libm::pow(2.0, f64::from(bits + 2));
            assert!((err - 1.0).abs() < 1e-3, "{cycles} cycles: residual {err} quarter-LSB");
        }
    }
}
