//! Transient simulations of the sampling network in ngspice (a circuit simulator nobody here
//! wrote), for cross-checks of the closed-form model and the fit.
//!
//! The netlist is the network of every channel on one board: a source behind its resistance
//! (none for a floating pin), the node capacitance, and a voltage-controlled switch with the
//! multiplexer's on-resistance into the one shared hold capacitor. Each switch is driven by a
//! piecewise-linear control voltage that closes it exactly for the sampling phases of its
//! channel's conversions, so ngspice sees the same timeline the firmware produced.

use std::fmt::Write as _;
use std::io;
use std::path::{Path, PathBuf};
use std::process::Command;

/// What ngspice is called as.
pub const NGSPICE: &str = "ngspice";

/// Half the width of a switch edge, s: the control voltage crosses the switch threshold at
/// the nominal instant.
const EDGE_S: f64 = 1e-11;

/// Off-resistance of a switch, Ω (its leak over a second moves a 4 pF hold capacitor by less
/// than 10⁻³ of the voltage across it).
const OFF_OHMS: f64 = 1e15;
/// Largest print step of a run, s (see `netlist`).
const MAX_STEP_S: f64 = 1e-4;

/// One channel of the simulated board.
#[derive(Debug, Clone, PartialEq)]
pub struct SpiceChannel {
    /// Channel number.
    pub channel: u8,
    /// Thevenin source `(volts, ohms)`; `None` for an unconnected pin.
    pub source: Option<(f64, f64)>,
    /// Node capacitance, F.
    pub node_farads: f64,
}

/// The board's network.
#[derive(Debug, Clone, PartialEq)]
pub struct SpiceCircuit {
    /// Every channel that can be sampled.
    pub channels: Vec<SpiceChannel>,
    /// Multiplexer + sampling-switch on-resistance, Ω.
    pub switch_ohms: f64,
    /// Hold capacitance, F.
    pub hold_farads: f64,
}

impl SpiceCircuit {
    /// One pin (`volts` behind `ohms`, node `farads`) and the simulated board's two internal
    /// precharge references (3% and 97% of full scale, stiff sources behind 50 Ω on 5 pF), with
    /// the board profile's nominal hold capacitor and switch.
    pub fn one_pin(board: &ohmsight_virtual::BoardProfile, pin: u8, volts: f64, ohms: f64, farads: f64) -> Self {
        use ohmsight_virtual::{PRECHARGE_HIGH, PRECHARGE_LOW};
        let v = board.vref_volts;
        SpiceCircuit {
            channels: vec![
                SpiceChannel { channel: pin, source: Some((volts, ohms)), node_farads: farads },
                SpiceChannel { channel: PRECHARGE_LOW, source: Some((0.03 * v, 50.0)), node_farads: 5e-12 },
                SpiceChannel { channel: PRECHARGE_HIGH, source: Some((0.97 * v, 50.0)), node_farads: 5e-12 },
            ],
            switch_ohms: board.switch_ohms,
            hold_farads: board.hold_farads,
        }
    }
}

/// One sampling phase: the switch of `channel` is closed from `start_s` for `sample_s`.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Sampling {
    /// Channel sampled.
    pub channel: u8,
    /// Start of the phase, s from the start of the simulation.
    pub start_s: f64,
    /// Length of the phase, s.
    pub sample_s: f64,
}

/// What a transient run gives back.
#[derive(Debug, Clone, PartialEq)]
pub struct Transient {
    /// Hold-capacitor voltage at the end of each sampling phase, in order, V.
    pub hold_volts: Vec<f64>,
    /// Node voltage of every channel at the end of the run (order of the circuit's channels), V.
    pub node_volts_end: Vec<f64>,
    /// Hold-capacitor voltage at the end of the run, V.
    pub hold_volts_end: f64,
    /// Time points ngspice computed.
    pub points: usize,
}

/// Why a simulation could not be done.
#[derive(Debug)]
pub enum SpiceError {
    /// ngspice is not installed.
    Missing,
    /// ngspice ran and failed; its output.
    Failed(String),
    /// Files could not be written or read.
    Io(io::Error),
    /// The output file was not what was expected.
    BadOutput(String),
}

impl std::fmt::Display for SpiceError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            SpiceError::Missing => write!(
                f,
                "`{NGSPICE}` was not found on PATH: these checks need the circuit simulator; install it \
                 (Debian/Ubuntu: `apt-get install ngspice`)"
            ),
            SpiceError::Failed(out) => write!(f, "ngspice failed:\n{out}"),
            SpiceError::Io(e) => write!(f, "ngspice files: {e}"),
            SpiceError::BadOutput(why) => write!(f, "ngspice output: {why}"),
        }
    }
}

impl From<io::Error> for SpiceError {
    fn from(e: io::Error) -> Self {
        SpiceError::Io(e)
    }
}

/// A scratch directory for netlists and results, unique to this process and call.
pub fn scratch_dir(tag: &str) -> PathBuf {
    use std::sync::atomic::{AtomicU64, Ordering};
    static NEXT: AtomicU64 = AtomicU64::new(0);
    let n = NEXT.fetch_add(1, Ordering::Relaxed);
    let dir = std::env::temp_dir().join(format!("ohmsight-spice-{}-{tag}-{n}", std::process::id()));
    let _ = std::fs::create_dir_all(&dir);
    dir
}

/// The netlist of `circuit` running `phases` from the given initial voltages until `end_s`.
pub fn netlist(circuit: &SpiceCircuit, node0: &[f64], hold0: f64, phases: &[Sampling], end_s: f64) -> String {
    let mut n = String::new();
    let _ = writeln!(n, "ohmsight sampling network");
    let _ = writeln!(n, ".model adcsw sw vt=0.5 vh=0 ron={:e} roff={OFF_OHMS:e}", circuit.switch_ohms);
    let _ = writeln!(n, "CH hold 0 {:e} IC={:e}", circuit.hold_farads, hold0);
    for (k, ch) in circuit.channels.iter().enumerate() {
        let c = ch.channel;
        if let Some((volts, ohms)) = ch.source {
            let _ = writeln!(n, "VS{c} src{c} 0 DC {volts:e}");
            let _ = writeln!(n, "RS{c} src{c} node{c} {ohms:e}");
        }
        let _ = writeln!(n, "CN{c} node{c} 0 {:e} IC={:e}", ch.node_farads, node0[k]);
        let _ = writeln!(n, "S{c} node{c} hold ctl{c} 0 adcsw");
        let _ = write!(n, "VC{c} ctl{c} 0 PWL(");
        let mut points: Vec<(f64, f64)> = vec![(0.0, 0.0)];
        for p in phases.iter().filter(|p| p.channel == c) {
            let end = p.start_s + p.sample_s;
            if p.start_s < 2.0 * EDGE_S {
                points[0].1 = 1.0;
            } else {
                points.push((p.start_s - EDGE_S, 0.0));
                points.push((p.start_s + EDGE_S, 1.0));
            }
            points.push((end - EDGE_S, 1.0));
            points.push((end + EDGE_S, 0.0));
        }
        for (i, (t, v)) in points.iter().enumerate() {
            if i % 4 == 0 {
                let _ = write!(n, "\n+");
            }
            let _ = write!(n, " {t:e} {v}");
        }
        let _ = writeln!(n, ")");
    }
    // Tight tolerances: the check is at the level of a hundredth of an LSB of 3.3 V / 4096.
    let _ =
        writeln!(n, ".options minbreak=1e-14 reltol=1e-7 abstol=1e-16 vntol=1e-10 chgtol=1e-20 trtol=0.3 method=trap");
    let _ = write!(n, ".save v(hold)");
    for ch in &circuit.channels {
        let _ = write!(n, " v(node{})", ch.channel);
    }
    let _ = writeln!(n);
    // The step also bounds ngspice's smallest step (a fixed fraction of it): keep it small
    // enough that the switch edges can be resolved on long runs.
    let _ = writeln!(n, ".tran {:e} {:e} uic", (end_s / 1000.0).clamp(1e-12, MAX_STEP_S), end_s);
    let _ = writeln!(n, ".end");
    n
}

/// Runs the transient of `circuit` in ngspice (batch mode) in `dir`.
pub fn transient(
    circuit: &SpiceCircuit,
    node0: &[f64],
    hold0: f64,
    phases: &[Sampling],
    end_s: f64,
    dir: &Path,
) -> Result<Transient, SpiceError> {
    let last = phases.iter().map(|p| p.start_s + p.sample_s).fold(0.0, f64::max);
    let end_s = end_s.max(last + 10.0 * EDGE_S);
    let cir = dir.join("network.cir");
    let raw = dir.join("network.raw");
    std::fs::write(&cir, netlist(circuit, node0, hold0, phases, end_s))?;
    let out = match Command::new(NGSPICE).arg("-b").arg("-r").arg(&raw).arg(&cir).output() {
        Ok(o) => o,
        Err(e) if e.kind() == io::ErrorKind::NotFound => return Err(SpiceError::Missing),
        Err(e) => return Err(SpiceError::Io(e)),
    };
    let text = format!("{}{}", String::from_utf8_lossy(&out.stdout), String::from_utf8_lossy(&out.stderr));
    if !out.status.success() || text.contains("Error") || text.contains("error:") {
        return Err(SpiceError::Failed(text));
    }
    let data = Raw::parse(&std::fs::read(&raw)?)?;
    let time = data.column("time")?;
    let hold = data.column("v(hold)")?;
    // The hold capacitor is isolated from the end of a sampling phase until the next one
    // begins: read it a little after the switch opens, where the curve is flat.
    let mut hold_volts = Vec::with_capacity(phases.len());
    for (i, p) in phases.iter().enumerate() {
        let end = p.start_s + p.sample_s;
        // A time step that jumps over a whole sampling phase would silently leave the hold
        // capacitor untouched: make sure ngspice computed points inside every one.
        let inside = time.partition_point(|&t| t < end - EDGE_S) - time.partition_point(|&t| t <= p.start_s + EDGE_S);
        if inside < 2 {
            return Err(SpiceError::BadOutput(format!(
                "the time steps skipped the sampling phase of ch{} at {:e} s",
                p.channel, p.start_s
            )));
        }
        let next = phases.get(i + 1).map_or(end_s, |q| q.start_s);
        let at = end + ((next - end) / 2.0).clamp(2.0 * EDGE_S, 1e-9);
        hold_volts.push(interpolate(time, hold, at));
    }
    let mut node_volts_end = Vec::new();
    for ch in &circuit.channels {
        let v = data.column(&format!("v(node{})", ch.channel))?;
        node_volts_end.push(*v.last().ok_or_else(|| SpiceError::BadOutput("no points".into()))?);
    }
    let hold_volts_end = *hold.last().ok_or_else(|| SpiceError::BadOutput("no points".into()))?;
    Ok(Transient { hold_volts, node_volts_end, hold_volts_end, points: time.len() })
}

/// Runs a long history as a chain of transients of at most `chunk` sampling phases each, every
/// run starting from the capacitor voltages the previous one ended with.
///
/// ngspice looks its piecewise-linear sources up from their first point on every time step, so
/// one run over thousands of phases costs time quadratic in their number; the chain is linear.
/// The runs are cut halfway through the gap after a phase, where every switch is open.
pub fn transient_chained(
    circuit: &SpiceCircuit,
    node0: &[f64],
    hold0: f64,
    phases: &[Sampling],
    end_s: f64,
    dir: &Path,
    chunk: usize,
) -> Result<Transient, SpiceError> {
    let mut node = node0.to_vec();
    let mut hold = hold0;
    let mut out = Transient {
        hold_volts: Vec::with_capacity(phases.len()),
        node_volts_end: Vec::new(),
        hold_volts_end: hold0,
        points: 0,
    };
    let mut t0 = 0.0;
    let mut rest = phases;
    while !rest.is_empty() {
        let (now, later) = rest.split_at(chunk.max(1).min(rest.len()));
        let last = now[now.len() - 1];
        let t1 = match later.first() {
            Some(next) => {
                let end = last.start_s + last.sample_s;
                end + (next.start_s - end) / 2.0
            }
            None => end_s,
        };
        let shifted: Vec<Sampling> = now.iter().map(|p| Sampling { start_s: p.start_s - t0, ..*p }).collect();
        let part = transient(circuit, &node, hold, &shifted, t1 - t0, dir)?;
        out.hold_volts.extend(&part.hold_volts);
        out.points += part.points;
        node = part.node_volts_end;
        hold = part.hold_volts_end;
        t0 = t1;
        rest = later;
    }
    out.node_volts_end = node;
    out.hold_volts_end = hold;
    Ok(out)
}

/// Linear interpolation of `y(x)` at `at`, `x` increasing.
fn interpolate(x: &[f64], y: &[f64], at: f64) -> f64 {
    let i = x.partition_point(|&t| t < at);
    if i == 0 {
        return y[0];
    }
    if i >= x.len() {
        return y[y.len() - 1];
    }
    let (x0, x1) = (x[i - 1], x[i]);
    if x1 <= x0 {
        return y[i];
    }
    y[i - 1] + (y[i] - y[i - 1]) * (at - x0) / (x1 - x0)
}

/// An ngspice binary raw file of real data.
struct Raw {
    names: Vec<String>,
    columns: Vec<Vec<f64>>,
}

impl Raw {
    fn parse(bytes: &[u8]) -> Result<Self, SpiceError> {
        let bad = |why: &str| SpiceError::BadOutput(why.to_string());
        let marker = b"Binary:\n";
        let at = bytes.windows(marker.len()).position(|w| w == marker).ok_or_else(|| bad("no binary section"))?;
        let header = String::from_utf8_lossy(&bytes[..at]);
        let field = |name: &str| -> Result<usize, SpiceError> {
            header
                .lines()
                .find_map(|l| l.strip_prefix(name))
                .and_then(|v| v.trim().parse().ok())
                .ok_or_else(|| bad(name))
        };
        let nvars = field("No. Variables:")?;
        let npoints = field("No. Points:")?;
        if header.lines().any(|l| l.starts_with("Flags:") && l.contains("complex")) {
            return Err(bad("complex data"));
        }
        let mut names = Vec::new();
        let mut in_vars = false;
        for line in header.lines() {
            if line.starts_with("Variables:") {
                in_vars = true;
                continue;
            }
            if in_vars {
                let mut parts = line.split_whitespace();
                if let (Some(_), Some(name)) = (parts.next(), parts.next()) {
                    names.push(name.to_ascii_lowercase());
                }
            }
        }
        if names.len() != nvars {
            return Err(bad("variable list"));
        }
        let data = &bytes[at + marker.len()..];
        let need = nvars * npoints * 8;
        if data.len() < need {
            return Err(bad("truncated data"));
        }
        let mut columns = vec![Vec::with_capacity(npoints); nvars];
        for (k, chunk) in data[..need].chunks_exact(8).enumerate() {
            let v = f64::from_le_bytes(chunk.try_into().unwrap_or([0; 8]));
            columns[k % nvars].push(v);
        }
        Ok(Self { names, columns })
    }

    fn column(&self, name: &str) -> Result<&[f64], SpiceError> {
        self.names
            .iter()
            .position(|n| n == name)
            .map(|i| self.columns[i].as_slice())
            .ok_or_else(|| SpiceError::BadOutput(format!("no column {name}")))
    }
}

/// Where a sampling phase's reading goes: `(event index, cell)` for a recorded conversion of the
/// pin under test, `None` otherwise.
pub type Recorded = Option<(usize, u16)>;

/// The sampling phases of a pin's history, as the firmware runs it: each event starts after its
/// gap and its own settle time; every conversion is preceded by `overhead_ps` of firmware time,
/// then samples, converts and waits. Returns the phases, where each phase's reading goes, and
/// the end time, s.
pub fn history_timeline(
    model: &ohmsight::model::BoardModel,
    events: &[ohmsight::model::Event],
    overhead_ps: u64,
) -> (Vec<Sampling>, Vec<Recorded>, f64) {
    use ohmsight_protocol::{StepRecord, Steps};
    let mut t_ps: u64 = 0;
    let mut phases = Vec::new();
    let mut recorded = Vec::new();
    for (k, e) in events.iter().enumerate() {
        let steps = Steps::new(&e.experiment, model.timing()).expect("a valid experiment");
        t_ps += e.gap_before_ps + u64::from(steps.settle_ns()) * 1000;
        for s in steps.iter() {
            t_ps += overhead_ps;
            let sample_ps = u64::from(model.sample_ps[usize::from(s.sample)]);
            phases.push(Sampling {
                channel: s.channel,
                start_s: t_ps as f64 * 1e-12,
                sample_s: sample_ps as f64 * 1e-12,
            });
            recorded.push(match s.record {
                StepRecord::Cell(c) if s.channel == e.target => Some((k, c)),
                _ => None,
            });
            t_ps += sample_ps + u64::from(model.conversion_ps) + u64::from(s.wait_after_ns) * 1000;
        }
    }
    (phases, recorded, t_ps as f64 * 1e-12)
}
