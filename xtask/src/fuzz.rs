//! `cargo xtask fuzz`: the decoders' fuzz targets, millions of cases each, in-process.
//!
//! - `frames`: the frame accumulator and decoder on streams of valid, damaged and garbage frames
//!   ([`ohmsight_protocol::fuzz::Frames`]);
//! - `messages`: the message decoder as `Request` and as `Response` past a correct CRC, and round
//!   trips of random messages ([`ohmsight_protocol::fuzz::Messages`]);
//! - `engine`: the firmware's command loop on the simulated board of the demo scenario, fed random
//!   streams and mixtures of valid requests and garbage ([`ohmsight_firmware::fuzz::EngineTarget`]).
//!
//! The same targets run briefly in the protocol and firmware crates' unit tests. A benchmark in
//! the sense that it prints cases/s; it fails (exit 1) on the first case that breaks a property,
//! printing the seed, the case and its input in hex.

use anyhow::{bail, Context, Result};
use ohmsight_firmware::fuzz::EngineTarget;
use ohmsight_firmware::Engine;
use ohmsight_protocol::fuzz::{run, Frames, Messages, Target};
use ohmsight_protocol::{ChannelRole, Experiment, Request, PROTOCOL_VERSION};
use ohmsight_virtual::{Scenario, VirtualBoard, VirtualClock, VirtualDelay};
use std::io::{IsTerminal, Write};
use std::rc::Rc;
use std::time::{Instant, SystemTime, UNIX_EPOCH};

const TARGETS: [&str; 3] = ["frames", "messages", "engine"];

pub fn command(args: &[String]) -> Result<()> {
    let mut cases = 10_000_000u64;
    let mut seed = None;
    let mut start = 0u64;
    let mut targets: Vec<&str> = TARGETS.to_vec();
    let mut it = args.iter();
    while let Some(a) = it.next() {
        let mut val = || it.next().context("missing value");
        match a.as_str() {
            "--cases" => cases = number(val()?)?,
            "--seed" => seed = Some(number(val()?)?),
            "--start" => start = number(val()?)?,
            "--target" => {
                let t = val()?;
                targets = match TARGETS.iter().find(|&&n| n == t) {
                    Some(n) => vec![*n],
                    None if t == "all" => TARGETS.to_vec(),
                    None => bail!("unknown target {t} (frames, messages, engine, all)"),
                }
            }
            other => bail!("unknown option {other}"),
        }
    }
    let seed = match seed {
        Some(s) => s,
        None => SystemTime::now().duration_since(UNIX_EPOCH)?.as_nanos() as u64,
    };
    println!("fuzz: seed {seed:#x}, cases {start}..{} per target", start + cases);
    let mut failed = false;
    for name in targets {
        let outcome = match name {
            "frames" => go(&mut Frames, seed, start, cases),
            "messages" => go(&mut Messages, seed, start, cases),
            _ => {
                let scenario = ohmsight::scenario::demo();
                let mut target = EngineTarget::new(|| simulated_engine(&scenario), seeds(&scenario));
                go(&mut target, seed, start, cases)
            }
        };
        failed |= !outcome;
    }
    if failed {
        bail!("a fuzz target failed (see above)");
    }
    Ok(())
}

/// A decimal or 0x-prefixed hexadecimal number.
fn number(s: &str) -> Result<u64> {
    let n = match s.strip_prefix("0x") {
        Some(h) => u64::from_str_radix(h, 16),
        None => s.replace('_', "").parse(),
    };
    n.with_context(|| format!("not a number: {s}"))
}

/// Runs one target, printing progress on stderr and the figures (or the failure) on stdout.
fn go<T: Target>(target: &mut T, seed: u64, start: u64, cases: u64) -> bool {
    let name = target.name();
    let t0 = Instant::now();
    let mut shown = Instant::now();
    let tty = std::io::stderr().is_terminal();
    let outcome = run(target, seed, start, cases, |done| {
        if tty && shown.elapsed().as_secs_f64() >= 1.0 {
            shown = Instant::now();
            eprint!("\r  {name:<8} {done:>10} / {cases}");
            let _ = std::io::stderr().flush();
        }
    });
    if tty {
        eprint!("\r{:40}\r", "");
    }
    let secs = t0.elapsed().as_secs_f64();
    match outcome {
        Ok(()) => {
            println!("  {name:<8} {cases:>10} cases  {secs:8.1} s  {:>9.0} cases/s  ok", cases as f64 / secs.max(1e-9));
            true
        }
        Err(f) => {
            println!("  {name:<8} FAILED after {} cases ({secs:.1} s)", f.case - start);
            println!("{f}");
            false
        }
    }
}

type SimEngine = Engine<VirtualBoard<Rc<VirtualClock>>, VirtualDelay<Rc<VirtualClock>>>;

/// The engine on a freshly built simulated board (its own clock): every one starts the same.
fn simulated_engine(scenario: &Scenario) -> SimEngine {
    let clock = Rc::new(VirtualClock::new());
    let board = VirtualBoard::new(scenario, clock.clone());
    let desc = board.description();
    Engine::new(board, VirtualDelay(clock), desc)
}

/// Requests that get past validation on this board: the handshake, each experiment on a real pin
/// with a real precharge channel, and the scenario's own set-up (all its parts, in order), which
/// the target also sends with a field or two off.
fn seeds(scenario: &Scenario) -> Vec<Vec<Request>> {
    let e = simulated_engine(scenario);
    let board = e.board();
    let target = board.channels.iter().find(|c| c.role == ChannelRole::Pin).map_or(0, |c| c.channel);
    let other = board.channels.iter().filter(|c| c.role == ChannelRole::Pin).nth(1).map_or(target, |c| c.channel);
    let precharge = board.front_end.precharges.first().map_or(0, |p| p.channel);
    let experiments = [
        Experiment::PrechargeSweep {
            target,
            precharges: heapless::Vec::from_slice(&[precharge]).unwrap_or_default(),
            precharge_sample: 0,
            samples: heapless::Vec::from_slice(&[0, 1]).unwrap_or_default(),
            repeats: 2,
            rest_ns: 1000,
            settle_ns: 1000,
        },
        Experiment::OrderSwap { a: other, b: target, sample: 0, repeats: 3, rest_ns: 100, settle_ns: 0 },
        Experiment::RepeatBurst {
            target,
            precharge,
            precharge_sample: 0,
            sample: 1,
            length: 4,
            repeats: 2,
            rest_ns: 100,
            settle_ns: 0,
        },
        Experiment::PeriodSweep {
            target,
            precharge,
            precharge_sample: 0,
            sample: 0,
            periods_ns: heapless::Vec::from_slice(&[1_000, 100_000]).unwrap_or_default(),
            repeats: 2,
            settle_ns: 0,
        },
        Experiment::NoiseRecord { target, sample: 0, period_ns: 10_000, count: 60, settle_ns: 0 },
        Experiment::ScanRecord {
            targets: heapless::Vec::from_slice(&[target, other]).unwrap_or_default(),
            precharge,
            precharge_sample: 0,
            sample: 1,
            period_ns: 20_000,
            count: 30,
            settle_ns: 0,
        },
    ];
    let mut seeds = vec![
        vec![Request::Hello { protocol: PROTOCOL_VERSION, seq: 1 }],
        vec![Request::Describe { seq: 2 }],
        vec![Request::Channel { seq: 3, position: 0 }],
    ];
    seeds.extend(
        experiments.into_iter().enumerate().map(|(i, experiment)| vec![Request::Run { seq: i as u16, experiment }]),
    );
    seeds.push(
        scenario.to_parts().enumerate().map(|(i, part)| Request::Simulate { seq: 100 + i as u16, part }).collect(),
    );
    seeds
}
