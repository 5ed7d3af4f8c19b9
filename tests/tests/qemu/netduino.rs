//! The STM32F411 image's serial path under QEMU's `netduinoplus2` (an STM32F405 model): built with
//! its `netduinoplus2` feature (internal oscillator, USART2 link), it must answer the host's
//! handshake with its profile's description and run an experiment. The model's ADC never sets
//! its end-of-conversion flag, so the experiment must end in the converter error the driver
//! reports after its timeout — which exercises that path too — and the board must keep
//! answering afterwards.

use crate::board::session;
use ohmsight::session::SessionError;
use ohmsight_protocol::{ChannelRole, ErrorKind, Experiment};
use std::time::Duration;
use xtask::qemu::Qemu;

#[test]
fn stm32f411_usart2_image_answers_the_handshake_and_runs_an_experiment() {
    if crate::image().is_none() {
        return; // said why already
    }
    let image =
        xtask::firmware::build_with("stm32f411", None, &["netduinoplus2"]).expect("building the stm32f411 image");
    // USART2 is the model's second serial port.
    let qemu = Qemu::start_on(&image.elf, "netduinoplus2", 1).expect("starting qemu-system-arm");
    let mut s = session(&qemu.device);
    // QEMU notices the terminal was opened within about a second: ask until the board answers.
    let info = (0..10).find_map(|_| s.handshake(false).ok()).expect("the board answers the handshake");
    assert_eq!(info.name, "stm32f411");
    assert_eq!(info.unit_id, 0, "the model has no unique-id words; this build reports 0");
    let pins = info.channels.iter().filter(|c| c.role == ChannelRole::Pin).count();
    assert_eq!(pins, 7, "PA1, PA4–PA7, PB0, PB1: {:?}", info.channels);
    assert_eq!(info.front_end.precharges[0].channel, 17, "VREFINT is the precharge source");
    // This build's ADC clock is 16 MHz / 4: 3 cycles are 750 ns, 480 cycles 120 µs
    // (STM32F4 SMPx table, 3…480 cycles).
    assert_eq!(info.front_end.sample_ps.first(), Some(&750_000));
    assert_eq!(info.front_end.sample_ps.last(), Some(&120_000_000));

    let experiment = Experiment::NoiseRecord { target: 1, sample: 0, period_ns: 50_000, count: 4, settle_ns: 1_000 };
    match s.run(&experiment, Duration::from_millis(1)) {
        Err(SessionError::Refused { kind: ErrorKind::Converter, .. }) => {}
        other => panic!("QEMU's ADC never finishes a conversion; the board must say so, got {other:?}"),
    }
    let again = s.handshake(false).expect("the board still answers");
    assert!(again.channels.len() >= 9);

    // The stack reserve its memory.x declares (16 KiB) held, stack painted by cortex-m-rt.
    let used = qemu.stack_use(&image.elf, 16 * 1024).expect("reading the stack through QEMU's monitor");
    eprintln!("stm32f411 (netduinoplus2 build): {} bytes of stack used", used.used);
    assert!(used.used < used.window, "the stack reached the end of its 16 KiB reserve");
}
