//! A fault-injecting link, for tests of the link layer and for trying a host against a bad
//! cable: seeded rates of byte loss, duplicated bytes and frames, flipped bits and inserted
//! garbage, in each direction; stalls before chosen replies; chosen frames damaged; and the
//! link going dead. [`FaultyLink`] wraps any [`Link`]; [`FaultyProxy`] puts the same faults on
//! a pseudo-terminal between a serial port (`ohmsight simulate`, a board) and a client.

use crate::link::{Link, SerialLink};
use crate::simulate::open_pty;
use serialport::SerialPort;
use std::collections::VecDeque;
use std::io;
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::{Arc, Mutex};
use std::time::{Duration, Instant};

/// Fault rates of one direction (probabilities per byte or per frame, 0 to 1).
#[derive(Debug, Clone, Copy, Default, PartialEq)]
pub struct Faults {
    /// A byte is lost.
    pub drop_byte: f64,
    /// A byte arrives twice.
    pub dup_byte: f64,
    /// One bit of a byte is flipped.
    pub flip_bit: f64,
    /// A whole frame arrives twice.
    pub dup_frame: f64,
    /// A burst of 1–16 random bytes (a delimiter among them at times) precedes a frame.
    pub garbage: f64,
}

/// Which way a frame travels.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Direction {
    /// Host to board (requests).
    ToBoard,
    /// Board to host (replies).
    FromBoard,
}

/// What to do to a link.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct FaultPlan {
    /// Seed of the fault generator: the same seed and traffic give the same faults.
    pub seed: u64,
    /// Rates towards the board.
    pub to_board: Faults,
    /// Rates from the board.
    pub from_board: Faults,
    /// Pauses: before the board's frame number `.0` (from 0) is delivered, wait `.1`; the
    /// frames after it wait too, as on a real stream.
    pub stalls: Vec<(u64, Duration)>,
    /// Frames (direction, number from 0) with one bit flipped in the middle.
    pub damage: Vec<(Direction, u64)>,
    /// Frames (direction, number from 0) lost whole.
    pub lose: Vec<(Direction, u64)>,
    /// Frames (direction, number from 0) delivered twice.
    pub duplicate: Vec<(Direction, u64)>,
    /// The link goes dead after this many frames in both directions together.
    pub close_after: Option<u64>,
}

/// What the faults did, for checking that a test injected something.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
pub struct FaultCounts {
    /// Frames seen, towards the board and from it.
    pub frames: [u64; 2],
    /// Frames changed in any way (bytes lost, doubled, flipped, garbage before, lost whole).
    pub damaged: [u64; 2],
    /// Frames delivered twice.
    pub duplicated: [u64; 2],
    /// Stalls applied.
    pub stalls: u64,
    /// Whether the link went dead.
    pub closed: bool,
}

/// SplitMix64: small, seeded, good enough to place faults.
#[derive(Debug, Clone)]
struct Rng(u64);

impl Rng {
    fn next(&mut self) -> u64 {
        self.0 = self.0.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = self.0;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        z ^ (z >> 31)
    }
    fn chance(&mut self, p: f64) -> bool {
        p > 0.0 && (self.next() >> 11) as f64 * (1.0 / (1u64 << 53) as f64) < p
    }
}

/// The fault machinery of both directions, apart from any link.
#[derive(Debug)]
struct Mangler {
    plan: FaultPlan,
    rng: Rng,
    partial: [Vec<u8>; 2],
    counts: FaultCounts,
}

impl Mangler {
    fn new(plan: FaultPlan) -> Self {
        let rng = Rng(plan.seed ^ 0x6F68_6D73_6967_6874);
        Mangler { plan, rng, partial: [Vec::new(), Vec::new()], counts: FaultCounts::default() }
    }

    fn closed(&mut self) -> bool {
        if let Some(n) = self.plan.close_after {
            if self.counts.frames[0] + self.counts.frames[1] >= n {
                self.counts.closed = true;
            }
        }
        self.counts.closed
    }

    /// Splits `bytes` into frames (a trailing partial frame waits for the rest) and returns
    /// each complete frame's bytes as delivered, with its number.
    fn frames(&mut self, dir: Direction, bytes: &[u8]) -> Vec<(u64, Vec<u8>)> {
        let d = dir as usize;
        let mut out = Vec::new();
        for &b in bytes {
            self.partial[d].push(b);
            if b != 0 {
                continue;
            }
            let frame = std::mem::take(&mut self.partial[d]);
            if self.closed() {
                continue;
            }
            let n = self.counts.frames[d];
            self.counts.frames[d] += 1;
            let delivered = self.mangle(dir, n, &frame);
            out.push((n, delivered));
        }
        out
    }

    fn mangle(&mut self, dir: Direction, n: u64, frame: &[u8]) -> Vec<u8> {
        let d = dir as usize;
        let rates = if dir == Direction::ToBoard { self.plan.to_board } else { self.plan.from_board };
        if self.plan.lose.contains(&(dir, n)) {
            self.counts.damaged[d] += 1;
            return Vec::new();
        }
        let mut out = Vec::with_capacity(frame.len() + 8);
        let mut changed = false;
        if self.rng.chance(rates.garbage) {
            let len = 1 + self.rng.next() % 16;
            for _ in 0..len {
                let r = self.rng.next();
                out.push(if r.is_multiple_of(8) { 0 } else { (r >> 8) as u8 });
            }
            changed = true;
        }
        let start = out.len();
        for &b in frame {
            if self.rng.chance(rates.drop_byte) {
                changed = true;
                continue;
            }
            let mut b = b;
            if self.rng.chance(rates.flip_bit) {
                b ^= 1 << (self.rng.next() % 8);
                changed = true;
            }
            out.push(b);
            if self.rng.chance(rates.dup_byte) {
                out.push(b);
                changed = true;
            }
        }
        if self.plan.damage.contains(&(dir, n)) && frame.len() > 1 {
            let i = start + (frame.len() - 1) / 2;
            if let Some(b) = out.get_mut(i) {
                *b ^= if *b == 0x01 { 0x02 } else { 0x01 };
                changed = true;
            }
        }
        if changed {
            self.counts.damaged[d] += 1;
        }
        if self.rng.chance(rates.dup_frame) || self.plan.duplicate.contains(&(dir, n)) {
            self.counts.duplicated[d] += 1;
            let again = out[start..].to_vec();
            out.extend(again);
        }
        out
    }
}

/// A [`Link`] with faults injected both ways (see [`FaultPlan`]).
///
/// Replies held by a stall are handed out when it ends; until then `recv` waits out its
/// time-out, as a serial port would. An in-process link underneath stays synchronous otherwise.
pub struct FaultyLink<L> {
    inner: L,
    mangler: Mangler,
    /// Replies as delivered, each with the time it may be read.
    queue: VecDeque<(Instant, Vec<u8>)>,
    /// Released bytes not yet read.
    ready: VecDeque<u8>,
    /// No frame is released before this (the end of the last stall).
    hold_until: Option<Instant>,
}

impl<L: Link> FaultyLink<L> {
    /// Wraps `inner`.
    pub fn new(inner: L, plan: FaultPlan) -> Self {
        FaultyLink {
            inner,
            mangler: Mangler::new(plan),
            queue: VecDeque::new(),
            ready: VecDeque::new(),
            hold_until: None,
        }
    }

    /// What the faults did so far.
    pub fn counts(&self) -> FaultCounts {
        self.mangler.counts
    }

    /// The link underneath.
    pub fn inner(&mut self) -> &mut L {
        &mut self.inner
    }

    fn take_in(&mut self, bytes: &[u8]) {
        for (n, frame) in self.mangler.frames(Direction::FromBoard, bytes) {
            let now = Instant::now();
            if let Some(&(_, pause)) = self.mangler.plan.stalls.iter().find(|(k, _)| *k == n) {
                self.mangler.counts.stalls += 1;
                self.hold_until = Some(self.hold_until.unwrap_or(now).max(now) + pause);
            }
            let at = self.hold_until.map_or(now, |h| h.max(now));
            self.queue.push_back((at, frame));
        }
    }

    fn release(&mut self) {
        let now = Instant::now();
        while let Some((at, _)) = self.queue.front() {
            if *at > now {
                break;
            }
            if let Some((_, frame)) = self.queue.pop_front() {
                self.ready.extend(frame);
            }
        }
    }
}

impl<L: Link> Link for FaultyLink<L> {
    fn send(&mut self, bytes: &[u8]) -> io::Result<()> {
        let mut out = Vec::new();
        for (_, frame) in self.mangler.frames(Direction::ToBoard, bytes) {
            out.extend(frame);
        }
        if !out.is_empty() {
            self.inner.send(&out)?;
        }
        Ok(())
    }

    fn recv(&mut self, buf: &mut [u8], timeout: Duration) -> io::Result<usize> {
        let deadline = Instant::now() + timeout;
        loop {
            self.release();
            if !self.ready.is_empty() {
                let n = buf.len().min(self.ready.len());
                for (b, v) in buf.iter_mut().zip(self.ready.drain(..n)) {
                    *b = v;
                }
                return Ok(n);
            }
            let mut tmp = [0u8; 512];
            let wait =
                if self.queue.is_empty() { deadline.saturating_duration_since(Instant::now()) } else { Duration::ZERO };
            let n = self.inner.recv(&mut tmp, wait)?;
            if n > 0 {
                self.take_in(&tmp[..n]);
                continue;
            }
            let Some(&(at, _)) = self.queue.front() else { return Ok(0) };
            let now = Instant::now();
            if now >= deadline {
                return Ok(0);
            }
            // Something is held by a stall: wait for it, or out the time-out.
            std::thread::sleep(at.min(deadline).saturating_duration_since(now).min(Duration::from_millis(20)));
        }
    }

    fn name(&self) -> String {
        format!("{} (with injected faults)", self.inner.name())
    }
}

/// A pseudo-terminal that relays between a client and a serial port with faults injected: the
/// client opens [`FaultyProxy::path`] as it would the port.
pub struct FaultyProxy {
    /// The path the client opens.
    pub path: String,
    stop: Arc<AtomicBool>,
    counts: Arc<Mutex<FaultCounts>>,
    thread: Option<std::thread::JoinHandle<io::Result<()>>>,
}

impl FaultyProxy {
    /// Relays between a new pseudo-terminal and the port at `target` (`baud`), with `plan`.
    pub fn start(target: &str, baud: u32, plan: FaultPlan) -> io::Result<FaultyProxy> {
        let port = SerialLink::open(target, baud)?;
        let (mut master, path) = open_pty()?;
        master.set_timeout(Duration::from_millis(5)).map_err(io::Error::other)?;
        let stop = Arc::new(AtomicBool::new(false));
        let counts = Arc::new(Mutex::new(FaultCounts::default()));
        let (flag, shared) = (stop.clone(), counts.clone());
        let thread = std::thread::spawn(move || -> io::Result<()> {
            let mut link = FaultyLink::new(port, plan);
            let mut buf = [0u8; 512];
            while !flag.load(Ordering::Relaxed) {
                use std::io::{Read, Write};
                match master.read(&mut buf) {
                    Ok(n) if n > 0 => link.send(&buf[..n])?,
                    Ok(_) => {}
                    Err(e) if e.kind() == io::ErrorKind::TimedOut || e.kind() == io::ErrorKind::WouldBlock => {}
                    Err(e) if e.kind() == io::ErrorKind::Interrupted => {}
                    // No client has the other side open (yet, or any more).
                    Err(_) => std::thread::sleep(Duration::from_millis(10)),
                }
                let n = link.recv(&mut buf, Duration::from_millis(5))?;
                if n > 0 {
                    let _ = master.write_all(&buf[..n]);
                }
                if let Ok(mut c) = shared.lock() {
                    *c = link.counts();
                }
            }
            Ok(())
        });
        Ok(FaultyProxy { path, stop, counts, thread: Some(thread) })
    }

    /// What the faults did so far.
    pub fn counts(&self) -> FaultCounts {
        self.counts.lock().map(|c| *c).unwrap_or_default()
    }
}

impl Drop for FaultyProxy {
    fn drop(&mut self) {
        self.stop.store(true, Ordering::Relaxed);
        if let Some(t) = self.thread.take() {
            let _ = t.join();
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A link that echoes every byte sent back.
    struct Echo(VecDeque<u8>);
    impl Link for Echo {
        fn send(&mut self, bytes: &[u8]) -> io::Result<()> {
            self.0.extend(bytes);
            Ok(())
        }
        fn recv(&mut self, buf: &mut [u8], _t: Duration) -> io::Result<usize> {
            let n = buf.len().min(self.0.len());
            for (b, v) in buf.iter_mut().zip(self.0.drain(..n)) {
                *b = v;
            }
            Ok(n)
        }
        fn name(&self) -> String {
            "echo".into()
        }
    }

    fn frames(n: usize) -> Vec<u8> {
        (0..n).flat_map(|i| [1 + (i % 200) as u8; 20].into_iter().chain([0])).collect()
    }

    fn through(plan: FaultPlan, bytes: &[u8]) -> (Vec<u8>, FaultCounts) {
        let mut link = FaultyLink::new(Echo(VecDeque::new()), plan);
        link.send(bytes).unwrap();
        let mut got = Vec::new();
        let mut buf = [0u8; 64];
        loop {
            let n = link.recv(&mut buf, Duration::from_secs(5)).unwrap();
            if n == 0 {
                break;
            }
            got.extend_from_slice(&buf[..n]);
        }
        (got, link.counts())
    }

    #[test]
    fn rates_come_out_near_what_was_asked_and_the_seed_repeats_them() {
        let bytes = frames(2000); // 42 000 bytes each way
        let faults = Faults { drop_byte: 0.01, ..Faults::default() };
        let plan = FaultPlan { seed: 3, to_board: faults, from_board: faults, ..FaultPlan::default() };
        let (got, counts) = through(plan.clone(), &bytes);
        // Two passes of 1% loss: 42 000 · (1 − 0.99²) ≈ 836 bytes lost; binomial sd ≈ 29.
        let lost = bytes.len() - got.len();
        assert!((700..=970).contains(&lost), "{lost} bytes lost");
        assert_eq!(counts.frames, [2000, 2000 - counts.frames[0] + counts.frames[1]]);
        assert_eq!(through(plan, &bytes).0, got, "same seed, same faults");
    }

    #[test]
    fn chosen_frames_are_damaged_lost_doubled_and_the_link_closes() {
        let bytes = frames(10);
        let plan = FaultPlan {
            damage: vec![(Direction::ToBoard, 1)],
            lose: vec![(Direction::FromBoard, 2)],
            duplicate: vec![(Direction::FromBoard, 4)],
            close_after: Some(16),
            ..FaultPlan::default()
        };
        let (got, counts) = through(plan, &bytes);
        let out: Vec<&[u8]> = got.split_inclusive(|&b| b == 0).collect();
        // All 10 went to the board; of the echoes only 6 pass before 16 frames in all close
        // the link: 0, 1 (damaged), 3 (2 was lost), 4 twice, 5.
        assert_eq!(out.len(), 6, "{out:?}");
        assert_eq!(out[0], &bytes[..21]);
        assert_ne!(out[1], &bytes[21..42], "frame 1 damaged");
        assert_eq!(out[2], &bytes[63..84], "frame 2 lost: frame 3 follows frame 1");
        assert_eq!(out[3], out[4], "frame 4 twice");
        assert_eq!(out[5], &bytes[105..126]);
        assert!(counts.closed);
    }

    #[test]
    fn a_stall_holds_the_reply_and_everything_after_it() {
        let bytes = frames(3);
        let plan = FaultPlan { stalls: vec![(1, Duration::from_millis(300))], ..FaultPlan::default() };
        let mut link = FaultyLink::new(Echo(VecDeque::new()), plan);
        link.send(&bytes).unwrap();
        let t = Instant::now();
        let mut buf = [0u8; 64];
        assert_eq!(link.recv(&mut buf, Duration::from_millis(100)).unwrap(), 21, "frame 0 at once");
        assert_eq!(link.recv(&mut buf, Duration::from_millis(100)).unwrap(), 0, "frame 1 held");
        assert!(t.elapsed() >= Duration::from_millis(100), "the time-out was waited out");
        assert_eq!(link.recv(&mut buf, Duration::from_secs(2)).unwrap(), 42, "frames 1 and 2 after the stall");
        assert!(t.elapsed() >= Duration::from_millis(300));
    }

    #[test]
    fn the_proxy_puts_faults_between_a_served_board_and_a_client() {
        use crate::session::Session;
        use ohmsight_protocol::Experiment;
        let scenario = crate::scenario::parse(
            "t.toml",
            "name = \"t\"\n[[pin]]\nchannel = 0\nvolts = 1.0\nohms = 1e3\nnode_farads = 5e-12\n",
        )
        .unwrap();
        let (mut master, board_path) = open_pty().unwrap();
        let stop = Arc::new(AtomicBool::new(false));
        let flag = stop.clone();
        let server = std::thread::spawn(move || crate::simulate::serve(&mut master, &scenario, &flag, &mut |_| {}));
        let plan = FaultPlan {
            seed: 5,
            from_board: Faults { flip_bit: 0.01, ..Faults::default() },
            // The description comes 1.5 s late: after the client's 1 s time-out and its retry.
            stalls: vec![(1, Duration::from_millis(1500))],
            ..FaultPlan::default()
        };
        let proxy = FaultyProxy::start(&board_path, 115_200, plan).unwrap();
        let mut session = Session::new(SerialLink::open(&proxy.path, 115_200).unwrap());
        session.timeout = Duration::from_secs(1);
        session.link_bytes_per_s = 11_520;
        let info = session.handshake(false).expect("handshake through the proxy");
        assert_eq!(
            info.channels.len(),
            info.channels.iter().map(|c| c.channel).collect::<std::collections::BTreeSet<_>>().len()
        );
        let noise = Experiment::NoiseRecord { target: 0, sample: 0, period_ns: 10_000, count: 1024, settle_ns: 0 };
        let rec = session.run(&noise, Duration::from_millis(20)).expect("a noise record through the proxy");
        assert_eq!(rec.samples.len(), 1024);
        assert_eq!(rec.report.conversions, 1024);
        let counts = proxy.counts();
        assert_eq!(counts.stalls, 1, "{counts:?}");
        assert!(counts.damaged[1] > 0, "1% of 2 kB of replies corrupted nothing: {counts:?}");
        drop(session);
        drop(proxy);
        stop.store(true, Ordering::Relaxed);
        server.join().unwrap().unwrap();
    }
}
