//! The survey's minimum-sample-time answer against published tables.

use ohmsight::judge::min_sample_index;
use ohmsight::model::{BoardModel, PinParams};
use ohmsight::units;
use ohmsight_protocol::{FrontEnd, Precharge};

/// A board model of `bits` bits with these sample times (s), hold capacitor and switch.
fn board(sample_s: &[f64], hold_farads: f64, switch_ohms: f64, bits: u8, vref_volts: f64) -> BoardModel {
    let fe = FrontEnd {
        bits,
        vref_microvolts: (vref_volts * 1e6).round() as u32,
        sample_ps: sample_s.iter().map(|s| (s * 1e12).round() as u32).collect(),
        conversion_ps: 2_000_000,
        hold_attofarads: (hold_farads * 1e18).round() as u32,
        hold_tolerance_ppm: 0,
        switch_milliohms: (switch_ohms * 1e3).round() as u32,
        switch_tolerance_ppm: 0,
        noise_millilsb: 500,
        leakage_picoamps: 0,
        pull_milliohms: 0,
        pull_tolerance_ppm: 0,
        pull_supply_microvolts: 0,
        precharges: heapless::Vec::from_slice(&[Precharge { channel: 0, nominal_microvolts: 0 }]).unwrap(),
    };
    BoardModel::from_front_end(&fe)
}

/// A pin at full scale behind `ohms`, node `farads`: the step from a hold capacitor left at
/// 0 V is full scale, the worst case the tables are written for.
fn pin(b: &BoardModel, ohms: f64, farads: f64) -> PinParams {
    PinParams::nominal(b, ohms, farads, b.vref_volts)
}

/// Acquisition time vs maximum source resistance of a 12-bit successive-approximation ADC with
/// a selectable acquisition time (the SAADC of a Nordic nRF52-series part: the product
/// specification's "acquisition time" table, as quoted from memory, medium confidence).
/// (acquisition time µs, largest source resistance Ω).
const SAADC_TABLE: [(f64, f64); 6] =
    [(3.0, 10e3), (5.0, 40e3), (10.0, 100e3), (15.0, 200e3), (20.0, 400e3), (40.0, 800e3)];

/// The profile of that ADC, chosen once for every row:
/// - hold (sampling) capacitance 2.5 pF: the same product specification's C_SAMPLE (from
///   memory, medium confidence);
/// - switch resistance 1 kΩ: not published there; an assumption that matters little, since it
///   is ≤ 0.5% of the source resistances (≥ 200 kΩ) where the comparison is strict;
/// - node 3 pF: a package pin and a short trace (common practice, no source).
const SAADC_HOLD_F: f64 = 2.5e-12;
const SAADC_SWITCH_OHMS: f64 = 1e3;
const SAADC_NODE_F: f64 = 3e-12;
/// 0.6 V internal reference at gain 1/6 (same specification, from memory).
const SAADC_FULL_SCALE_V: f64 = 3.6;

/// Our answer (index into the table's acquisition times) for each row's resistance.
fn saadc_answers(node_farads: f64) -> Vec<Option<usize>> {
    let times: Vec<f64> = SAADC_TABLE.iter().map(|r| r.0 * 1e-6).collect();
    let b = board(&times, SAADC_HOLD_F, SAADC_SWITCH_OHMS, 12, SAADC_FULL_SCALE_V);
    SAADC_TABLE.iter().map(|&(_, ohms)| min_sample_index(&b, &pin(&b, ohms, node_farads)).map(usize::from)).collect()
}

#[test]
fn minimum_sample_time_against_the_saadc_acquisition_table() {
    let ours = saadc_answers(SAADC_NODE_F);
    println!("{:>10} {:>10} {:>10}  settling rule", "Rs", "table", "ours");
    let mut wrong = Vec::new();
    for (row, (&(table_us, ohms), got)) in SAADC_TABLE.iter().zip(&ours).enumerate() {
        let got_us = got.map(|i| SAADC_TABLE[i].0);
        println!(
            "{:>10} {:>8} µs {:>10}",
            units::ohms(ohms),
            table_us,
            got_us.map_or("none".to_string(), |u| format!("{u} µs"))
        );
        let Some(got) = *got else {
            wrong.push(format!("{}: no acquisition time settles", units::ohms(ohms)));
            continue;
        };
        if ohms >= 200e3 {
            // Here the RC term dominates: within one step of the table.
            if got.abs_diff(row) > 1 {
                wrong.push(format!("{}: ours {} µs, table {table_us} µs", units::ohms(ohms), SAADC_TABLE[got].0));
            }
        } else if got > row {
            // Below 200 kΩ the table is more conservative than RC settling (it keeps a floor of
            // settling margin the network alone does not need): ours may be shorter, never longer.
            wrong.push(format!(
                "{}: ours {} µs is longer than the table's {table_us} µs",
                units::ohms(ohms),
                SAADC_TABLE[got].0
            ));
        }
    }
    assert!(wrong.is_empty(), "{wrong:#?}");
    // Measured with this profile: 10k → 3 µs (table 3), 40k → 3 (5), 100k → 5 (10), 200k → 10
    // (15), 400k → 20 (20), 800k → 40 (40).
}

#[test]
fn the_saadc_comparison_does_not_hinge_on_the_node_capacitance() {
    // The pad-and-trace figure is a guess; any plausible value gives the same comparison.
    let reference = saadc_answers(SAADC_NODE_F);
    for node_farads in [1.5e-12, 2e-12, 2.5e-12, 3.5e-12] {
        let ours = saadc_answers(node_farads);
        for (row, (got, want)) in ours.iter().zip(&reference).enumerate() {
            let (Some(got), Some(want)) = (got, want) else { panic!("row {row}: no answer") };
            assert!(
                got.abs_diff(*want) <= 1 && (SAADC_TABLE[row].1 < 200e3 || got.abs_diff(row) <= 1),
                "node {}: row {row} gives step {got}, {want} at 3 pF",
                units::farads(node_farads)
            );
        }
    }
}

#[test]
fn minimum_sample_time_against_the_rc_rule_worked_table() {
    // The widely published SAR-ADC input rule R_AIN < k/(f_ADC·C_ADC·ln(2^(N+2))) − R_ADC and
    // its worked table for f_ADC = 14 MHz, C_ADC = 8 pF, R_ADC = 1 kΩ, N = 12 (a 12-bit MCU
    // datasheet's "R_AIN max" table, as quoted in DESIGN.md §8): sample cycles → largest source
    // resistance. The rule settles to ¼ LSB; ours to ½ LSB, so at the table's resistance our
    // answer is that row's sample time or one step shorter — never longer.
    let table = [(1.5, 0.4e3), (7.5, 5.9e3), (13.5, 11.4e3), (28.5, 25.2e3), (41.5, 37.2e3), (55.5, 50e3)];
    let times: Vec<f64> = table.iter().map(|r| r.0 / 14e6).collect();
    let b = board(&times, 8e-12, 1e3, 12, 3.3);
    for (row, &(cycles, ohms)) in table.iter().enumerate() {
        // Negligible node capacitance: the rule's single-pole network.
        let got = min_sample_index(&b, &pin(&b, ohms, 1e-15)).map(usize::from);
        println!("{:>9}: table {cycles} cycles, ours {:?}", units::ohms(ohms), got.map(|i| table[i].0));
        let got = got.unwrap_or_else(|| panic!("{}: nothing settles", units::ohms(ohms)));
        assert!(got == row || got + 1 == row, "{}: ours {} cycles, table {cycles}", units::ohms(ohms), table[got].0);
    }
}
