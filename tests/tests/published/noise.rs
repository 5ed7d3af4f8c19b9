//! Noise the simulated board adds, against textbook formulas.

use ohmsight_firmware::AnalogFrontEnd;
use ohmsight_protocol::analog::volts_to_lsb;
use ohmsight_tests::{driven, scenario, Gauss};
use ohmsight_virtual::{BoardProfile, Realism, VirtualBoard, VirtualClock};

/// Boltzmann constant, J/K (exact in the SI since 2019).
const BOLTZMANN: f64 = 1.380_649e-23;

/// A board with the converter's own noise off, a stiff source on channel 0 at `lsb` LSB, and
/// only the non-idealities in `realism`.
fn quiet_board(hold_farads: f64, lsb: f64, realism: Realism) -> (BoardProfile, VirtualBoard<Box<VirtualClock>>) {
    let profile = BoardProfile { hold_farads, adc_noise_lsb: 0.0, ..BoardProfile::default() };
    let volts = lsb * profile.vref_volts / f64::from(1u32 << profile.bits);
    let s = scenario("noise check", 3, profile.clone(), vec![driven(0, volts, 50.0, 5e-12)]);
    (profile, VirtualBoard::with_realism(&s, Box::new(VirtualClock::new()), realism))
}

/// Share of `n` conversions (longest sample time: fully settled) that read `code` or above.
fn share_at_or_above(board: &mut VirtualBoard<Box<VirtualClock>>, slots: u8, code: u16, n: usize) -> f64 {
    let hits = (0..n).filter(|_| board.convert(0, slots - 1).expect("conversion") >= code).count();
    hits as f64 / n as f64
}

#[test]
fn ktc_noise_on_the_hold_capacitor() {
    // Textbook: the voltage frozen on a capacitor C when a resistive switch opens has rms
    // √(kT/C), whatever the resistance (thermal noise integrated over the RC bandwidth; e.g.
    // Johns & Martin, Analog Integrated Circuit Design, 1997, ch. 4 — from memory). At 300 K on
    // 0.2 pF it is 144 µV ≈ 0.18 LSB of 3.3 V / 4096, large enough to see through the quantizer
    // with the converter's own noise off: a source δ above a code threshold reads the upper code
    // with probability Φ(δ/σ).
    let hold = 0.2e-12;
    let sigma_volts = (BOLTZMANN * 300.0 / hold).sqrt();
    let realism = Realism { ktc: true, ..Realism::ideal() };
    let (profile, _) = quiet_board(hold, 0.0, realism);
    let sigma_lsb = volts_to_lsb(sigma_volts, profile.vref_volts, profile.bits);
    let slots = profile.sample_cycles.len() as u8;
    let n = 40_000;
    // Thresholds between codes 2047 and 2048 sit at 2047.5 LSB; probe ±1σ around it.
    let (_, mut above) = quiet_board(hold, 2047.5 + sigma_lsb, realism);
    let (_, mut below) = quiet_board(hold, 2047.5 - sigma_lsb, realism);
    let p_above = share_at_or_above(&mut above, slots, 2048, n);
    let p_below = share_at_or_above(&mut below, slots, 2048, n);
    // Φ(1) = 0.8413, Φ(−1) = 0.1587 (standard normal table); binomial standard error 0.0018.
    println!("kT/C {:.1} µV = {sigma_lsb:.3} LSB: P(+1σ) = {p_above:.4}, P(−1σ) = {p_below:.4}", sigma_volts * 1e6);
    assert!((p_above - 0.8413).abs() < 0.01, "P(+1σ) = {p_above}");
    assert!((p_below - 0.1587).abs() < 0.01, "P(−1σ) = {p_below}");
    // With kT/C off the same inputs read one code only: the spread above is the kT/C term.
    let (_, mut off) = quiet_board(hold, 2047.5 + sigma_lsb, Realism::ideal());
    assert_eq!(share_at_or_above(&mut off, slots, 2048, 1000), 1.0);
}

#[test]
fn quantization_noise_is_one_twelfth_of_an_lsb_squared() {
    // Textbook: rounding a signal spread over many codes leaves an error uniform over ±½ LSB,
    // of variance LSB²/12 and rms 0.2887 LSB (Bennett, "Spectra of quantized signals", Bell
    // System Technical Journal, 1948 — from memory). The simulated converter with every
    // non-ideality and its own noise off must show exactly that; the fit's noise model adds the
    // same 1/12 LSB² to the converter's noise.
    let mut inputs = Gauss::new(11);
    let (mut sum, mut sum2, mut worst) = (0.0, 0.0, 0.0f64);
    let n = 4000;
    for _ in 0..n {
        // Spread over codes 200 … 3900, away from the rails.
        let x = 2050.0 + 600.0 * inputs.sample().clamp(-3.0, 3.0);
        let (profile, mut b) = quiet_board(4e-12, x, Realism::ideal());
        let code = b.convert(0, profile.sample_cycles.len() as u8 - 1).expect("conversion");
        let e = f64::from(code) - x;
        sum += e;
        sum2 += e * e;
        worst = worst.max(e.abs());
    }
    let mean = sum / n as f64;
    let rms = (sum2 / n as f64).sqrt();
    println!("quantization error: mean {mean:+.4} LSB, rms {rms:.4} LSB, worst {worst:.4} LSB");
    // Standard error of the mean square of a uniform ±½ over 4000 draws: 0.0012 LSB².
    assert!((rms * rms - 1.0 / 12.0).abs() < 0.005, "rms {rms}");
    assert!(mean.abs() < 0.02, "mean {mean}");
    assert!(worst <= 0.5 + 1e-6, "worst {worst}");

    let fe = ohmsight_virtual::VirtualBoard::new(
        &scenario(
            "model",
            1,
            BoardProfile { adc_noise_lsb: 0.0, ..BoardProfile::default() },
            vec![driven(0, 1.0, 50.0, 5e-12)],
        ),
        Box::new(VirtualClock::new()),
    )
    .description()
    .front_end;
    let model = ohmsight::model::BoardModel::from_front_end(&fe);
    assert!((model.variance_floor_lsb2() - 1.0 / 12.0).abs() < 1e-12);
}
