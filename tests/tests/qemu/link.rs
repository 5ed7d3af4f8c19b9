//! Bad input on the UART leaves the QEMU firmware answering; the host says what went wrong.

use crate::board::session;
use ohmsight_protocol::{encode_frame, ErrorKind, FrameAccumulator, Request, Response, MAX_FRAME, PROTOCOL_VERSION};
use std::io::{Read, Write};
use std::time::{Duration, Instant};
use xtask::qemu::Qemu;

fn frame(req: &Request) -> Vec<u8> {
    let mut buf = [0u8; MAX_FRAME];
    let n = encode_frame(req, &mut buf).unwrap();
    buf[..n].to_vec()
}

/// Sends `bytes` and collects `want` response frames (or what came within 5 s).
fn exchange(port: &mut Box<dyn serialport::SerialPort>, bytes: &[u8], want: usize) -> Vec<Response> {
    port.write_all(bytes).unwrap();
    let mut acc = FrameAccumulator::new();
    let mut got = Vec::new();
    let deadline = Instant::now() + Duration::from_secs(5);
    let mut buf = [0u8; 256];
    while got.len() < want && Instant::now() < deadline {
        match port.read(&mut buf) {
            Ok(n) => got.extend(
                buf[..n]
                    .iter()
                    .filter_map(|&b| acc.push::<Response>(b))
                    .map(|r| r.expect("a clean frame from the board")),
            ),
            Err(e) if e.kind() == std::io::ErrorKind::TimedOut => {}
            Err(e) => panic!("reading the pseudo-terminal: {e}"),
        }
    }
    got
}

#[test]
fn garbage_truncated_frames_and_a_wrong_version_leave_the_firmware_answering() {
    let Some(image) = crate::image() else { return };
    let qemu = Qemu::start(&image.elf).expect("starting qemu-system-arm");
    let mut port = serialport::new(&qemu.device, 115_200).timeout(Duration::from_millis(100)).open().unwrap();
    // QEMU notices the terminal was opened within about a second; until then the first bytes
    // wait in the terminal, so ask until the board answers.
    let hello = frame(&Request::Hello { protocol: PROTOCOL_VERSION, seq: 1 });
    let first = (0..10).map(|_| exchange(&mut port, &hello, 1)).find(|r| !r.is_empty()).expect("the board answers");
    assert!(matches!(first[0], Response::Hello { protocol: PROTOCOL_VERSION, .. }), "{first:?}");

    let mut bad = vec![0x13, 0x37, 0xff, 0x00]; // garbage, then a delimiter
    bad.extend_from_slice(&hello[..hello.len() / 2]); // a truncated frame …
    bad.push(0x00); // … cut short by a delimiter
    bad.extend(frame(&Request::Hello { protocol: PROTOCOL_VERSION + 40, seq: 2 })); // a host from the future
    bad.extend(frame(&Request::Describe { seq: 3 }));
    let r = exchange(&mut port, &bad, 5);
    assert_eq!(r.len(), 5, "{r:?}");
    assert_eq!(r[0], Response::Error { seq: 0, kind: ErrorKind::BadFrame });
    assert_eq!(r[1], Response::Error { seq: 0, kind: ErrorKind::BadFrame });
    assert_eq!(r[2], Response::Error { seq: 2, kind: ErrorKind::Version });
    assert!(matches!(r[3], Response::Hello { protocol: PROTOCOL_VERSION, .. }), "it says which version it speaks");
    assert!(matches!(r[4], Response::FrontEnd { seq: 3, .. }), "and keeps answering");
    drop(port);

    // A set-up the simulator cannot run: refused in words, and the board keeps its old one.
    let mut s = session(&qemu.device);
    let mut sc = ohmsight_tests::scenario(
        "bad",
        1,
        ohmsight_tests::default_board(),
        vec![ohmsight_tests::driven(0, 1.0, 1e3, 10e-12)],
    );
    sc.board.sample_cycles = heapless::Vec::from_slice(&[15.0, 3.0]).unwrap();
    let e = s.load_scenario(&sc).expect_err("a board with descending sample times is refused");
    let said = e.to_string();
    assert!(said.contains("refused") && said.contains("out of range"), "{said}");
    let info = s.handshake(false).expect("the board still answers");
    assert_eq!(info.channels.len(), 3, "still the boot set-up: one pin and two precharge sources");
}
