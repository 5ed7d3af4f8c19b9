//! The serial link end to end: the firmware engine and simulated board on one side of a
//! pseudo-terminal pair, the host's `SerialLink` on the other. The survey must come out exactly
//! as over the in-process link: the board is deterministic, so the same requests give the same
//! records.

use ohmsight::link::{InProcessLink, SerialLink};
use ohmsight::session::Session;
use ohmsight::simulate::serve;
use ohmsight::{survey, SurveyOptions};
use serialport::{SerialPort, TTYPort};
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::Arc;

#[test]
fn survey_over_a_pseudo_terminal_matches_in_process() {
    let scenario = ohmsight::scenario::parse(
        "pty.toml",
        "name = \"pty\"\nseed = 5\n[[pin]]\nchannel = 0\nvolts = 1.3\nohms = 68e3\nnode_farads = 12e-12\n\
         [[pin]]\nchannel = 1\nfloating = true\n[[pin]]\nchannel = 2\nvolts = 2.5\nohms = 1e6\nnode_farads = 10e-9\n",
    )
    .unwrap();
    let (master, mut slave) = TTYPort::pair().expect("a pseudo-terminal pair");
    slave.set_timeout(std::time::Duration::from_millis(100)).unwrap();
    let stop = Arc::new(AtomicBool::new(false));
    let server = {
        let (sc, stop) = (scenario.clone(), stop.clone());
        std::thread::spawn(move || {
            let mut master = master;
            serve(&mut master, &sc, &stop, &mut |_| {}).expect("serving the pty")
        })
    };
    let name = slave.name().unwrap_or_default();
    let mut session = Session::new(SerialLink::from_port(Box::new(slave), &name));
    session.link_bytes_per_s = 11_520;
    let serial = survey(&mut session, &SurveyOptions::default()).expect("survey over the pty");
    stop.store(true, Ordering::Relaxed);
    server.join().unwrap();
    let local = survey(&mut Session::new(InProcessLink::new(&scenario)), &SurveyOptions::default()).unwrap();
    assert_eq!(serial.link.bad_frames, 0);
    assert_eq!(serial.link.conversions, local.link.conversions);
    assert_eq!(serial.link.bytes_received, local.link.bytes_received);
    for (a, b) in serial.pins.iter().zip(&local.pins) {
        assert_eq!(a.verdict, b.verdict, "ch{}", a.channel);
        assert_eq!(a.source_ohms, b.source_ohms, "ch{}: the same records must give the same fit", a.channel);
        assert_eq!(a.flags, b.flags);
    }
}
