//! Hardware in the loop: a real board running an ohmsight image, with known resistors on known
//! pins. Runs only when `OHMSIGHT_HIL_PORT` names the board's serial port and
//! `OHMSIGHT_HIL_FIXTURE` a fixture file; otherwise it says it was skipped and passes.
//!
//! The fixture file (TOML) lists the wiring, as in the README's "Wiring a calibration fixture":
//!
//! ```toml
//! baud = 115200            # optional; any value works over USB CDC
//! [[resistor]]
//! channel = 1              # the protocol's channel number (see the board's profile.toml)
//! ohms = 10e3
//! tolerance = 0.01         # the resistor's own, relative
//! ```
//!
//! Each resistor must lie inside the survey's 95 % interval for its pin's source resistance
//! widened by the resistor's tolerance: the datasheet values the board reports are uncertain
//! and the fit's intervals carry that uncertainty.

use ohmsight::link::SerialLink;
use ohmsight::session::Session;
use ohmsight::{survey, SurveyOptions};
use ohmsight_protocol::ChannelRole;

struct Resistor {
    channel: u8,
    ohms: f64,
    tolerance: f64,
}

fn fixture(path: &str) -> (u32, Vec<Resistor>) {
    let text = std::fs::read_to_string(path).unwrap_or_else(|e| panic!("{path}: {e}"));
    let t = text.parse::<toml::Table>().unwrap_or_else(|e| panic!("{path}: {e}"));
    let baud = t.get("baud").and_then(|b| b.as_integer()).unwrap_or(115_200) as u32;
    let list = t.get("resistor").and_then(|r| r.as_array()).unwrap_or_else(|| panic!("{path}: no [[resistor]]"));
    let resistors = list
        .iter()
        .map(|r| {
            let num = |k: &str| {
                r.get(k)
                    .and_then(|v| v.as_float().or_else(|| v.as_integer().map(|i| i as f64)))
                    .unwrap_or_else(|| panic!("{path}: a [[resistor]] needs `{k}`"))
            };
            Resistor { channel: num("channel") as u8, ohms: num("ohms"), tolerance: num("tolerance") }
        })
        .collect();
    (baud, resistors)
}

#[test]
fn known_resistors_on_a_real_board_fall_inside_their_intervals() {
    let (Ok(port), Ok(file)) = (std::env::var("OHMSIGHT_HIL_PORT"), std::env::var("OHMSIGHT_HIL_FIXTURE")) else {
        eprintln!(
            "SKIPPED: hardware-in-the-loop test; set OHMSIGHT_HIL_PORT=/dev/ttyACM0 and \
             OHMSIGHT_HIL_FIXTURE=fixture.toml (see this file's docs) to run it on a real board"
        );
        return;
    };
    let (baud, resistors) = fixture(&file);
    let link = SerialLink::open(&port, baud).unwrap_or_else(|e| panic!("{port}: {e}"));
    let mut session = Session::new(link);
    let info = session.handshake(false).expect("the board answers the handshake");
    eprintln!("board {} unit {:016x}, firmware {}", info.name, info.unit_id, info.firmware);
    for r in &resistors {
        let ch = info.channels.iter().find(|c| c.channel == r.channel);
        assert!(
            ch.is_some_and(|c| c.role == ChannelRole::Pin),
            "{file}: channel {} is not a pin of {}",
            r.channel,
            info.name
        );
    }
    let opts = SurveyOptions { channels: resistors.iter().map(|r| r.channel).collect(), ..Default::default() };
    let report = survey(&mut session, &opts).expect("the survey runs");
    for r in &resistors {
        let pin = report.pins.iter().find(|p| p.channel == r.channel).expect("the pin was surveyed");
        let iv = &pin.source_ohms;
        eprintln!("ch{}: {} Ω fitted {}", r.channel, r.ohms, ohmsight_tests::show(iv));
        let inside = [r.ohms * (1.0 - r.tolerance), r.ohms, r.ohms * (1.0 + r.tolerance)]
            .iter()
            .any(|&x| ohmsight_tests::covers(iv, x));
        assert!(inside, "ch{}: {} Ω outside the fitted {}", r.channel, r.ohms, ohmsight_tests::show(iv));
    }
}
