//! Which serial ports this machine has, and which of them have a board running the ohmsight
//! firmware on the other end.
//!
//! Listing uses the `serialport` crate's enumeration (on Linux built without libudev: it reads
//! `/sys/class/tty`, and the USB ids from the USB device's sysfs directory). Probing opens each
//! port, sends the ohmsight hello and reads the board's description; every probe runs in its own
//! thread and is abandoned after a fixed budget, so a port that blocks or never answers cannot
//! hold up the listing.

use crate::link::SerialLink;
use crate::session::{Session, SessionError};
use serde_json::{json, Value};
use serialport::{SerialPortInfo, SerialPortType};
use std::path::Path;
use std::sync::mpsc;
use std::time::{Duration, Instant};

/// JSON schema name of a port listing.
pub const PORTS_SCHEMA: &str = "ohmsight.ports.v1";

/// What kind of port, as far as the system tells.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum PortKind {
    /// A USB device (CDC-ACM board, USB–UART adapter).
    Usb {
        /// USB vendor id.
        vid: u16,
        /// USB product id.
        pid: u16,
        /// Manufacturer string, when the device has one.
        manufacturer: Option<String>,
        /// Product string, when the device has one.
        product: Option<String>,
        /// Serial-number string, when the device has one.
        serial_number: Option<String>,
    },
    /// A UART on a PCI card.
    Pci,
    /// A Bluetooth serial link.
    Bluetooth,
    /// A UART of the machine itself (or of unknown kind).
    Builtin,
    /// A path given by the user (a pseudo-terminal, a symlink), not found by enumeration.
    Given,
}

/// What the ohmsight handshake found on a port.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Probe {
    /// Not probed (`--no-probe`).
    Skipped,
    /// A board running the ohmsight firmware answered.
    Board {
        /// Board name.
        name: String,
        /// Unit id.
        unit_id: u64,
        /// Firmware version.
        firmware: String,
        /// Channels it describes.
        channels: usize,
    },
    /// An ohmsight board of another protocol version.
    OtherVersion {
        /// The board's protocol version.
        protocol: u16,
    },
    /// Something answered, but not with ohmsight frames (another device, or a wrong baud rate).
    NotOhmsight(String),
    /// Nothing answered in time.
    Silent,
    /// The port could not be opened or failed.
    Failed(String),
}

impl Probe {
    /// True when an ohmsight board of any protocol version answered.
    pub fn answers(&self) -> bool {
        matches!(self, Probe::Board { .. } | Probe::OtherVersion { .. })
    }

    /// Short machine-readable status (used in JSON).
    pub fn status(&self) -> &'static str {
        match self {
            Probe::Skipped => "not-probed",
            Probe::Board { .. } => "answers",
            Probe::OtherVersion { .. } => "other-version",
            Probe::NotOhmsight(_) => "not-ohmsight",
            Probe::Silent => "no-answer",
            Probe::Failed(_) => "failed",
        }
    }

    /// One line for the table.
    pub fn text(&self, wait: Duration) -> String {
        match self {
            Probe::Skipped => "not probed".into(),
            Probe::Board { name, unit_id, firmware, channels } => {
                format!("yes: board \"{name}\" unit {unit_id:016x}, firmware {firmware}, {channels} channels")
            }
            Probe::OtherVersion { protocol } => format!(
                "yes, but protocol {protocol} (this host speaks {}): update one side",
                ohmsight_protocol::PROTOCOL_VERSION
            ),
            Probe::NotOhmsight(why) => format!("no: answers, but not ohmsight ({why})"),
            Probe::Silent => format!("no answer within {:.1} s", wait.as_secs_f64()),
            Probe::Failed(why) => format!("no: {why}"),
        }
    }
}

/// One serial port.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct PortEntry {
    /// Device path (`/dev/ttyACM0`, `COM3`).
    pub path: String,
    /// Kind and USB ids.
    pub kind: PortKind,
    /// What the handshake found.
    pub probe: Probe,
}

impl PortEntry {
    /// `VID:PID` in hex, for USB ports.
    pub fn usb_id(&self) -> Option<String> {
        match &self.kind {
            PortKind::Usb { vid, pid, .. } => Some(format!("{vid:04x}:{pid:04x}")),
            _ => None,
        }
    }

    /// What the system says the port is.
    pub fn description(&self) -> String {
        match &self.kind {
            PortKind::Usb { manufacturer, product, serial_number, .. } => {
                let mut words: Vec<&str> = Vec::new();
                if let Some(m) = manufacturer.as_deref().filter(|m| !m.is_empty()) {
                    words.push(m);
                }
                // Many products repeat the manufacturer's name; say it once.
                if let Some(p) = product.as_deref().filter(|p| !p.is_empty()) {
                    if words.first().is_none_or(|m| !p.starts_with(m)) {
                        words.push(p);
                    } else {
                        words = vec![p];
                    }
                }
                let mut s = if words.is_empty() { "USB serial device".to_string() } else { words.join(" ") };
                if let Some(sn) = serial_number.as_deref().filter(|s| !s.is_empty()) {
                    s += &format!(" (serial {sn})");
                }
                s
            }
            PortKind::Pci => "PCI serial card".into(),
            PortKind::Bluetooth => "Bluetooth serial link".into(),
            PortKind::Builtin => "built-in UART".into(),
            PortKind::Given => "given on the command line".into(),
        }
    }
}

fn kind_of(t: &SerialPortType) -> PortKind {
    match t {
        SerialPortType::UsbPort(u) => PortKind::Usb {
            vid: u.vid,
            pid: u.pid,
            manufacturer: u.manufacturer.clone(),
            product: u.product.clone(),
            serial_number: u.serial_number.clone(),
        },
        SerialPortType::PciPort => PortKind::Pci,
        SerialPortType::BluetoothPort => PortKind::Bluetooth,
        SerialPortType::Unknown => PortKind::Builtin,
    }
}

/// True for a legacy 8250-style port that Linux lists although no UART sits behind it
/// (`/sys/class/tty/<name>/type` reads 0, "unknown UART"). Such ports fail to open.
fn is_empty_legacy_uart(path: &str) -> bool {
    let Some(name) = Path::new(path).file_name() else { return false };
    let ty = Path::new("/sys/class/tty").join(name).join("type");
    std::fs::read_to_string(ty).is_ok_and(|t| t.trim() == "0")
}

/// Serial ports the system knows, sorted by path.
fn enumerate() -> Result<Vec<PortEntry>, String> {
    let mut found: Vec<SerialPortInfo> = if cfg!(target_os = "linux") && !Path::new("/sys/class/tty").is_dir() {
        // The crate's sysfs scan needs /sys; a container without it simply has no ports to list.
        Vec::new()
    } else {
        serialport::available_ports().map_err(|e| format!("cannot list serial ports: {e}"))?
    };
    found.retain(|p| !is_empty_legacy_uart(&p.port_name));
    found.sort_by(|a, b| a.port_name.cmp(&b.port_name));
    Ok(found
        .iter()
        .map(|p| PortEntry { path: p.port_name.clone(), kind: kind_of(&p.port_type), probe: Probe::Skipped })
        .collect())
}

/// The ports to look at: every serial port the system knows, sorted by path; or, when `only`
/// names some, just those (once each, in the order given, with what the system knows of them).
/// Nothing is probed yet.
pub fn list(only: &[String]) -> Result<Vec<PortEntry>, String> {
    if only.is_empty() {
        return enumerate();
    }
    // A given path need not be enumerable (a pseudo-terminal is not), so a failed scan is no error.
    let known = enumerate().unwrap_or_default();
    let mut out: Vec<PortEntry> = Vec::new();
    for path in only {
        if out.iter().any(|e| &e.path == path) {
            continue;
        }
        let kind = known.iter().find(|e| &e.path == path).map_or(PortKind::Given, |e| e.kind.clone());
        out.push(PortEntry { path: path.clone(), kind, probe: Probe::Skipped });
    }
    Ok(out)
}

/// Opens `path` at `baud` and asks for the ohmsight hello and board description. A silent port
/// is given `wait` in all (its hello tries share it) before it is called silent; see
/// [`probe_all`] for the hard bound on a port that blocks.
pub fn probe(path: &str, baud: u32, wait: Duration) -> Probe {
    let link = match SerialLink::open(path, baud) {
        Ok(l) => l,
        Err(e) => return Probe::Failed(e.to_string()),
    };
    let mut session = Session::new(link);
    // A silent port is asked SILENT_TRIES times, each try waiting its share of `wait`: the whole
    // wait the user asked for (not less: a board that resets when its port opens needs it).
    session.timeout = (wait / crate::session::SILENT_TRIES).max(Duration::from_millis(20));
    session.link_bytes_per_s = u64::from(baud / 10).max(1);
    match session.handshake(false) {
        Ok(info) => Probe::Board {
            name: info.name,
            unit_id: info.unit_id,
            firmware: info.firmware,
            channels: info.channels.len(),
        },
        Err(SessionError::Version { board }) => Probe::OtherVersion { protocol: board },
        Err(SessionError::Timeout { .. }) => Probe::Silent,
        Err(SessionError::Unrecoverable { last, .. }) => Probe::NotOhmsight(last),
        Err(SessionError::Unexpected(what)) => Probe::NotOhmsight(what),
        Err(e) => Probe::Failed(e.to_string()),
    }
}

/// Probes every entry at once, one thread each. A probe that has not finished `wait` plus one
/// second after the start is reported [`Probe::Silent`] and left behind (its thread ends when
/// the port lets it, or with the process).
pub fn probe_all(entries: &mut [PortEntry], baud: u32, wait: Duration) {
    let (tx, rx) = mpsc::channel();
    for (i, e) in entries.iter().enumerate() {
        let (thread_tx, path) = (tx.clone(), e.path.clone());
        let spawned = std::thread::Builder::new().name(format!("probe {path}")).spawn(move || {
            let _ = thread_tx.send((i, probe(&path, baud, wait)));
        });
        if let Err(err) = spawned {
            let _ = tx.send((i, Probe::Failed(format!("cannot start a probe: {err}"))));
        }
    }
    drop(tx);
    for e in entries.iter_mut() {
        e.probe = Probe::Silent;
    }
    let deadline = Instant::now() + wait + Duration::from_secs(1);
    while let Ok((i, p)) = rx.recv_timeout(deadline.saturating_duration_since(Instant::now())) {
        entries[i].probe = p;
    }
}

/// The listing as a table: path, USB id, description, and whether ohmsight answers.
pub fn table(entries: &[PortEntry], wait: Duration) -> String {
    if entries.is_empty() {
        return "no serial ports found (a board appears as /dev/ttyACM* or /dev/ttyUSB* on Linux, \
                /dev/cu.* on macOS, COM* on Windows; check the cable and permissions)\n"
            .into();
    }
    let rows: Vec<[String; 4]> =
        std::iter::once(["path", "usb id", "description", "ohmsight"].map(String::from))
            .chain(entries.iter().map(|e| {
                [e.path.clone(), e.usb_id().unwrap_or_else(|| "—".into()), e.description(), e.probe.text(wait)]
            }))
            .collect();
    let widths: Vec<usize> =
        (0..4).map(|c| rows.iter().map(|r| crate::units::width(&r[c])).max().unwrap_or(0)).collect();
    let mut out = String::new();
    for (n, row) in rows.iter().enumerate() {
        let cells: Vec<String> = row.iter().zip(&widths).map(|(cell, &w)| crate::units::pad(cell, w)).collect();
        out += cells.join("  ").trim_end();
        out.push('\n');
        if n == 0 {
            out += &widths.iter().map(|&w| "─".repeat(w)).collect::<Vec<_>>().join("  ");
            out.push('\n');
        }
    }
    out
}

/// The listing as one JSON document.
pub fn json(entries: &[PortEntry]) -> Value {
    let ports: Vec<Value> = entries
        .iter()
        .map(|e| {
            let usb = match &e.kind {
                PortKind::Usb { vid, pid, manufacturer, product, serial_number } => json!({
                    "vid": vid, "pid": pid, "id": e.usb_id(),
                    "manufacturer": manufacturer, "product": product, "serial_number": serial_number,
                }),
                _ => Value::Null,
            };
            let kind = match e.kind {
                PortKind::Usb { .. } => "usb",
                PortKind::Pci => "pci",
                PortKind::Bluetooth => "bluetooth",
                PortKind::Builtin => "builtin",
                PortKind::Given => "given",
            };
            let mut probe = json!({ "status": e.probe.status(), "ohmsight": e.probe.answers() });
            match &e.probe {
                Probe::Board { name, unit_id, firmware, channels } => {
                    probe["board"] = json!({"name": name, "unit_id": format!("{unit_id:016x}"),
                                            "firmware": firmware, "channels": channels});
                }
                Probe::OtherVersion { protocol } => probe["protocol"] = json!(protocol),
                Probe::NotOhmsight(why) | Probe::Failed(why) => probe["detail"] = json!(why),
                Probe::Skipped | Probe::Silent => {}
            }
            json!({"path": e.path, "kind": kind, "usb": usb, "description": e.description(), "probe": probe})
        })
        .collect();
    json!({ "schema": PORTS_SCHEMA, "ports": ports })
}

#[cfg(test)]
mod tests {
    use super::*;

    fn usb(manufacturer: Option<&str>, product: Option<&str>, serial: Option<&str>) -> PortEntry {
        PortEntry {
            path: "/dev/ttyACM0".into(),
            kind: PortKind::Usb {
                vid: 0x0483,
                pid: 0x5740,
                manufacturer: manufacturer.map(String::from),
                product: product.map(String::from),
                serial_number: serial.map(String::from),
            },
            probe: Probe::Skipped,
        }
    }

    #[test]
    fn usb_ids_are_four_hex_digits_each() {
        assert_eq!(usb(None, None, None).usb_id().as_deref(), Some("0483:5740"));
        let mut e = usb(None, None, None);
        e.kind = PortKind::Usb { vid: 0x1a, pid: 0xbeef, manufacturer: None, product: None, serial_number: None };
        assert_eq!(e.usb_id().as_deref(), Some("001a:beef"));
        e.kind = PortKind::Builtin;
        assert_eq!(e.usb_id(), None);
    }

    #[test]
    fn descriptions_use_what_the_device_says_once() {
        assert_eq!(usb(Some("Acme"), Some("Probe Bridge"), None).description(), "Acme Probe Bridge");
        assert_eq!(usb(Some("Acme"), Some("Acme Probe Bridge"), None).description(), "Acme Probe Bridge");
        assert_eq!(usb(None, Some("Bridge"), Some("A1")).description(), "Bridge (serial A1)");
        assert_eq!(usb(None, None, None).description(), "USB serial device");
    }

    #[test]
    fn table_aligns_columns_and_marks_answering_ports() {
        let mut a = usb(Some("Acme"), Some("Bridge"), None);
        a.probe = Probe::Board { name: "bench".into(), unit_id: 0x2a, firmware: "0.1.0".into(), channels: 10 };
        let b = PortEntry { path: "/dev/pts/7".into(), kind: PortKind::Given, probe: Probe::Silent };
        let t = table(&[a, b], Duration::from_millis(1500));
        let lines: Vec<&str> = t.lines().collect();
        assert_eq!(lines.len(), 4, "{t}");
        // Every column starts at the same character position on every line.
        let col = |s: &str, needle: &str| s[..s.find(needle).unwrap()].chars().count();
        assert_eq!(col(lines[0], "usb id"), col(lines[2], "0483:5740"));
        assert_eq!(col(lines[0], "ohmsight"), col(lines[2], "yes: board \"bench\" unit 000000000000002a"));
        assert_eq!(col(lines[0], "ohmsight"), col(lines[3], "no answer within 1.5 s"));
        assert!(lines[3].contains("—") && lines[3].contains("given on the command line"), "{t}");
        assert!(table(&[], Duration::ZERO).starts_with("no serial ports found"));
    }

    #[test]
    fn json_carries_ids_and_probe_status() {
        let mut a = usb(Some("Acme"), Some("Bridge"), Some("A1"));
        a.probe = Probe::OtherVersion { protocol: 9 };
        let doc = json(&[a]);
        assert_eq!(doc["schema"], PORTS_SCHEMA);
        let p = &doc["ports"][0];
        assert_eq!(p["usb"]["vid"], 0x0483);
        assert_eq!(p["usb"]["id"], "0483:5740");
        assert_eq!(p["probe"]["status"], "other-version");
        assert_eq!(p["probe"]["ohmsight"], true);
        assert_eq!(p["probe"]["protocol"], 9);
    }

    #[test]
    fn given_paths_replace_the_scan_and_are_listed_once() {
        let only = ["/dev/pts/99", "/dev/pts/98", "/dev/pts/99"].map(String::from);
        let l = list(&only).unwrap();
        let paths: Vec<&str> = l.iter().map(|e| e.path.as_str()).collect();
        assert_eq!(paths, ["/dev/pts/99", "/dev/pts/98"]);
        assert!(l.iter().all(|e| e.kind == PortKind::Given && e.probe == Probe::Skipped));
    }

    #[cfg(unix)]
    #[test]
    fn a_silent_port_is_given_the_whole_wait() {
        // A pseudo-terminal whose other end never answers.
        let (_silent, path) = crate::simulate::open_pty().unwrap();
        for wait_ms in [300, 900] {
            let wait = Duration::from_millis(wait_ms);
            let t = Instant::now();
            let p = probe(&path, 115_200, wait);
            let took = t.elapsed();
            assert!(matches!(p, Probe::Silent), "{p:?}");
            assert!(took >= wait, "gave up after {took:?} of {wait:?}");
            // Not much more either (generous: the machine may be busy).
            assert!(took < wait + Duration::from_millis(1500), "{took:?} for {wait:?}");
        }
    }

    #[test]
    fn a_missing_port_fails_fast_in_words() {
        let t = Instant::now();
        let p = probe("/dev/ohmsight-no-such-port", 115_200, Duration::from_millis(400));
        assert!(matches!(&p, Probe::Failed(why) if why.contains("cannot open")), "{p:?}");
        assert!(t.elapsed() < Duration::from_secs(1));
    }
}
