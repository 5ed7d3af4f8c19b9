//! `cargo xtask test`: install what the test suite needs, then run it.
//!
//! The Debian packages the tests call (a circuit simulator, a PostgreSQL server for the run
//! store, and so on) are listed once, in `.ci/debian-packages`; CI installs the same list. (The
//! store tests start a private PostgreSQL server of their own from the installed package, so
//! nothing here starts one; CI's `.ci/run` starts one and names it in `OHMSIGHT_TEST_POSTGRES`.) Packages already installed are left alone;
//! the missing ones are installed with apt-get (through sudo when not root), so a fresh Debian or
//! Ubuntu machine needs this one command. Elsewhere it names what to install and stops.

use anyhow::{bail, Context, Result};
use std::path::{Path, PathBuf};
use std::process::Command;

/// The workspace root (the parent of this crate).
pub fn root() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).parent().map_or_else(|| PathBuf::from("."), Path::to_path_buf)
}

/// Package names from a list file: one per line, `#` comments and blank lines ignored.
pub fn parse_packages(text: &str) -> Vec<String> {
    text.lines()
        .map(|l| l.split('#').next().unwrap_or("").trim())
        .filter(|l| !l.is_empty())
        .map(str::to_string)
        .collect()
}

/// Whether dpkg knows `package` as installed.
fn installed(package: &str) -> bool {
    Command::new("dpkg-query")
        .args(["-W", "-f=${Status}", package])
        .output()
        .is_ok_and(|o| o.status.success() && String::from_utf8_lossy(&o.stdout).contains("install ok installed"))
}

/// Runs a command, failing with its name when it fails.
fn run(cmd: &mut Command) -> Result<()> {
    let what = format!("{cmd:?}");
    let status = cmd.status().with_context(|| format!("could not start {what}"))?;
    if !status.success() {
        bail!("{what} failed ({status})");
    }
    Ok(())
}

/// Installs the missing packages of the list.
pub fn install_packages() -> Result<()> {
    let list = root().join(".ci/debian-packages");
    let text = std::fs::read_to_string(&list).with_context(|| format!("reading {}", list.display()))?;
    let wanted = parse_packages(&text);
    if Command::new("dpkg-query").arg("--version").output().is_err() {
        eprintln!("xtask: not a Debian-family system; make sure these are installed: {}", wanted.join(" "));
        return Ok(());
    }
    let missing: Vec<&String> = wanted.iter().filter(|p| !installed(p)).collect();
    if missing.is_empty() {
        eprintln!("xtask: test dependencies present ({})", wanted.join(", "));
        return Ok(());
    }
    eprintln!("xtask: installing {}", missing.iter().map(|s| s.as_str()).collect::<Vec<_>>().join(" "));
    let root_user =
        Command::new("id").arg("-u").output().is_ok_and(|o| String::from_utf8_lossy(&o.stdout).trim() == "0");
    let apt = |args: &[&str]| {
        let mut c = if root_user { Command::new("apt-get") } else { Command::new("sudo") };
        if !root_user {
            c.arg("apt-get");
        }
        c.args(args).env("DEBIAN_FRONTEND", "noninteractive");
        c
    };
    run(&mut apt(&["update"])).context("apt-get update (run as root or with sudo)")?;
    let mut install = apt(&["install", "-y", "--no-install-recommends"]);
    install.args(missing.iter().map(|s| s.as_str()));
    run(&mut install).context("apt-get install")
}

/// Installs what the tests need, then runs `cargo test --workspace` with `args` appended.
pub fn test(args: &[String]) -> Result<()> {
    install_packages()?;
    let cargo = std::env::var("CARGO").unwrap_or_else(|_| "cargo".into());
    run(Command::new(cargo).current_dir(root()).args(["test", "--workspace"]).args(args))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn package_list_skips_comments_and_blanks() {
        let text = "# header\nngspice\n\n  qemu-system-arm  # emulator\n#chromium\n";
        assert_eq!(parse_packages(text), ["ngspice", "qemu-system-arm"]);
    }

    #[test]
    fn the_committed_list_names_the_circuit_simulator() {
        let text = std::fs::read_to_string(root().join(".ci/debian-packages")).unwrap();
        assert!(parse_packages(&text).iter().any(|p| p == "ngspice"));
    }

    #[test]
    fn the_committed_list_names_the_store_database_server() {
        let text = std::fs::read_to_string(root().join(".ci/debian-packages")).unwrap();
        assert!(parse_packages(&text).iter().any(|p| p == "postgresql"));
    }
}
