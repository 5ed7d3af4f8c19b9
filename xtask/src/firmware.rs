//! Board images: picking a tool-chain route, building, and measuring the footprint.
//!
//! Route 1 is an installed rustup target (`rustup target add thumbv7em-none-eabihf`). Route 2
//! works offline with Debian's `rustc-web`, `rust-web-src` and `cargo-web`: `/usr/bin/cargo`
//! builds `core` from source (`-Zbuild-std=core`, allowed on a stable compiler by
//! `RUSTC_BOOTSTRAP=1`) and links with LLVM's `ld.lld` (Debian's `lld`) or the `rust-lld` of a
//! rustup tool-chain. `OHMSIGHT_FIRMWARE_ROUTE=rustup|debian` forces one.

use anyhow::{bail, Context, Result};
use object::{Object, ObjectSection, ObjectSymbol, SectionFlags, SectionKind};
use std::path::{Path, PathBuf};
use std::process::Command;

/// What to install when no route can build for `target`.
pub fn install_hint(target: &str) -> String {
    format!(
        "install the target with `rustup target add {target}`, or, offline on Debian, \
         `apt-get install rustc-web rust-web-src cargo-web lld`"
    )
}

/// How an image gets built.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Route {
    /// The target's standard library is installed in the rustup tool-chain.
    Rustup {
        /// The tool-chain's cargo.
        cargo: PathBuf,
    },
    /// Debian's tool-chain builds `core` from its source package.
    Debian {
        /// `/usr/bin/cargo` (cargo-web).
        cargo: PathBuf,
        /// `/usr/bin/rustc` (rustc-web).
        rustc: PathBuf,
        /// An LLVM linker for the thumb targets.
        linker: PathBuf,
    },
}

impl Route {
    /// One line saying which route this is.
    pub fn describe(&self) -> String {
        match self {
            Route::Rustup { cargo } => format!("route 1: installed rustup target ({})", cargo.display()),
            Route::Debian { rustc, linker, .. } => format!(
                "route 2: offline Debian tool-chain, {} with -Zbuild-std=core, linked by {}",
                rustc.display(),
                linker.display()
            ),
        }
    }

    fn dir_name(&self) -> &'static str {
        match self {
            Route::Rustup { .. } => "rustup",
            Route::Debian { .. } => "debian",
        }
    }
}

fn output(cmd: &mut Command) -> Option<String> {
    let out = cmd.output().ok()?;
    out.status.success().then(|| String::from_utf8_lossy(&out.stdout).trim().to_string())
}

fn on_path(name: &str) -> Option<PathBuf> {
    std::env::var_os("PATH")?.to_str()?.split(':').map(|d| Path::new(d).join(name)).find(|p| p.is_file())
}

fn rustup_route(target: &str) -> Option<Route> {
    let rustc = std::env::var("RUSTC").unwrap_or_else(|_| "rustc".into());
    let sysroot = output(Command::new(&rustc).args(["--print", "sysroot"]))?;
    let lib = Path::new(&sysroot).join("lib/rustlib").join(target).join("lib");
    let has_core =
        std::fs::read_dir(lib).ok()?.flatten().any(|e| e.file_name().to_string_lossy().starts_with("libcore-"));
    has_core.then(|| Route::Rustup { cargo: std::env::var_os("CARGO").map_or_else(|| "cargo".into(), PathBuf::from) })
}

fn debian_route() -> Option<Route> {
    let (cargo, rustc) = (PathBuf::from("/usr/bin/cargo"), PathBuf::from("/usr/bin/rustc"));
    if !cargo.is_file() || !rustc.is_file() {
        return None;
    }
    let sysroot = output(Command::new(&rustc).args(["--print", "sysroot"]))?;
    if !Path::new(&sysroot).join("lib/rustlib/src/rust/library/core/Cargo.toml").is_file() {
        return None;
    }
    let rustup_lld = || {
        let rustc = std::env::var("RUSTC").unwrap_or_else(|_| "rustc".into());
        let sysroot = output(Command::new(rustc).args(["--print", "sysroot"]))?;
        let p = Path::new(&sysroot).join("lib/rustlib/x86_64-unknown-linux-gnu/bin/rust-lld");
        p.is_file().then_some(p)
    };
    let linker = on_path("ld.lld").or_else(rustup_lld)?;
    Some(Route::Debian { cargo, rustc, linker })
}

/// The route this machine can build `target` with.
pub fn pick_route(target: &str) -> Result<Route> {
    let forced = std::env::var("OHMSIGHT_FIRMWARE_ROUTE").ok();
    let route = match forced.as_deref() {
        Some("rustup") => rustup_route(target),
        Some("debian") => debian_route(),
        Some(other) => bail!("OHMSIGHT_FIRMWARE_ROUTE={other}: use rustup or debian"),
        None => rustup_route(target).or_else(debian_route),
    };
    route.with_context(|| format!("cannot build for {target}: {}", install_hint(target)))
}

/// The workspace root (where the top Cargo.toml is).
pub fn workspace_root() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).parent().map_or_else(|| PathBuf::from("."), Path::to_path_buf)
}

/// Where firmware builds go: `firmware/<route>` inside the workspace's target directory.
fn target_dir(root: &Path, route: &Route) -> PathBuf {
    let base = std::env::var_os("CARGO_TARGET_DIR").map_or_else(|| root.join("target"), PathBuf::from);
    base.join("firmware").join(route.dir_name())
}

/// The target a board crate builds for (the `target` in its `.cargo/config.toml`).
pub fn board_target(board_dir: &Path) -> Result<String> {
    let path = board_dir.join(".cargo/config.toml");
    let text = std::fs::read_to_string(&path).with_context(|| format!("reading {}", path.display()))?;
    text.lines()
        .filter_map(|l| l.trim().strip_prefix("target"))
        .filter_map(|rest| rest.trim_start().strip_prefix('='))
        .map(|v| v.trim().trim_matches('"').to_string())
        .next()
        .with_context(|| format!("{}: no `target = \"…\"` under [build]", path.display()))
}

/// A built board image.
#[derive(Debug, Clone)]
pub struct Image {
    /// Board name (its directory under `boards/`).
    pub board: String,
    /// Target triple.
    pub target: String,
    /// How it was built.
    pub route: Route,
    /// The linked ELF file.
    pub elf: PathBuf,
}

/// Names of the board crates under `boards/` that build an image.
pub fn boards(root: &Path) -> Vec<String> {
    let mut v: Vec<String> = std::fs::read_dir(root.join("boards"))
        .into_iter()
        .flatten()
        .flatten()
        .filter(|e| e.path().join("memory.x").is_file())
        .map(|e| e.file_name().to_string_lossy().into_owned())
        .collect();
    v.sort();
    v
}

/// Builds `boards/<board>` for its own target (release profile). Cargo's own progress goes to
/// stderr.
pub fn build(board: &str) -> Result<Image> {
    build_for(board, None)
}

/// Builds `boards/<board>` for `target`, or for the board's own target when `None`.
pub fn build_for(board: &str, target: Option<&str>) -> Result<Image> {
    build_with(board, target, &[])
}

/// Builds `boards/<board>` with the cargo `features` on (into a target directory of its own,
/// so the default image stays where it is).
pub fn build_with(board: &str, target: Option<&str>, features: &[&str]) -> Result<Image> {
    let root = workspace_root();
    let dir = root.join("boards").join(board);
    if !dir.join("Cargo.toml").is_file() || !dir.join("memory.x").is_file() {
        bail!("no board crate boards/{board}: the boards are {}", boards(&root).join(", "));
    }
    let target = match target {
        Some(t) => t.to_string(),
        None => board_target(&dir)?,
    };
    let route = pick_route(&target)?;
    eprintln!("building boards/{board} for {target}: {}", route.describe());
    let mut tdir = target_dir(&root, &route);
    if !features.is_empty() {
        tdir = tdir.join(format!("features-{}", features.join("+")));
    }
    let mut cmd = match &route {
        Route::Rustup { cargo } => Command::new(cargo),
        Route::Debian { cargo, rustc, linker } => {
            let mut c = Command::new(cargo);
            let var = format!("CARGO_TARGET_{}_LINKER", target.to_uppercase().replace('-', "_"));
            c.env("RUSTC", rustc).env("RUSTC_BOOTSTRAP", "1").env(var, linker).env_remove("RUSTUP_TOOLCHAIN");
            c
        }
    };
    cmd.current_dir(&dir).args(["build", "--release", "--target", &target]).env("CARGO_TARGET_DIR", &tdir);
    if matches!(route, Route::Debian { .. }) {
        cmd.args(["-Zbuild-std=core"]);
    }
    if !features.is_empty() {
        cmd.args(["--features", &features.join(",")]);
    }
    // Settings of the cargo that runs this tool must not leak into the board's build.
    for var in ["RUSTFLAGS", "CARGO_ENCODED_RUSTFLAGS", "CARGO_BUILD_TARGET", "RUSTC_WRAPPER", "RUSTDOCFLAGS"] {
        cmd.env_remove(var);
    }
    let status = cmd.status().with_context(|| format!("running {:?}", cmd.get_program()))?;
    if !status.success() {
        bail!("building boards/{board} failed ({status}); the compiler's messages are above");
    }
    let elf = tdir.join(&target).join("release").join(package_name(&dir)?);
    if !elf.is_file() {
        bail!("the build succeeded but {} is missing", elf.display());
    }
    Ok(Image { board: board.to_string(), target, route, elf })
}

fn package_name(dir: &Path) -> Result<String> {
    let text = std::fs::read_to_string(dir.join("Cargo.toml"))?;
    text.lines()
        .filter_map(|l| l.trim().strip_prefix("name"))
        .filter_map(|rest| rest.trim_start().strip_prefix('='))
        .map(|v| v.trim().trim_matches('"').to_string())
        .next()
        .context("no package name in the board's Cargo.toml")
}

/// Flash and RAM use of an image, bytes.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
pub struct Footprint {
    /// Code, vector table included.
    pub text: u64,
    /// Read-only data.
    pub rodata: u64,
    /// Initialised data (in flash, copied to RAM at start).
    pub data: u64,
    /// Zero-initialised and uninitialised RAM.
    pub bss: u64,
    /// Stack reserved by the board's `memory.x` (`_ohmsight_stack_reserve`).
    pub stack_reserve: u64,
    /// Whether floating-point helper routines (`__aeabi_d*`, `__aeabi_f*`, …) are linked in.
    pub float_routines: usize,
}

impl Footprint {
    /// Flash: text + rodata + data.
    pub fn flash(&self) -> u64 {
        self.text + self.rodata + self.data
    }
    /// RAM: data + bss + stack reserve.
    pub fn ram(&self) -> u64 {
        self.data + self.bss + self.stack_reserve
    }
}

/// Reads the footprint from the ELF's allocated sections and symbols.
pub fn footprint(elf: &Path) -> Result<Footprint> {
    let bytes = std::fs::read(elf).with_context(|| format!("reading {}", elf.display()))?;
    let file = object::File::parse(&*bytes).with_context(|| format!("{} is not an ELF file", elf.display()))?;
    let mut f = Footprint::default();
    for s in file.sections() {
        let SectionFlags::Elf { sh_flags } = s.flags() else { continue };
        const ALLOC: u64 = 0x2;
        if sh_flags & ALLOC == 0 || s.size() == 0 {
            continue;
        }
        match s.kind() {
            SectionKind::Text => f.text += s.size(),
            SectionKind::UninitializedData | SectionKind::UninitializedTls => f.bss += s.size(),
            SectionKind::Data | SectionKind::Tls => f.data += s.size(),
            _ if s.name().is_ok_and(|n| n == ".vector_table") => f.text += s.size(),
            _ => f.rodata += s.size(),
        }
    }
    for sym in file.symbols() {
        let name = sym.name().unwrap_or("");
        if name == "_ohmsight_stack_reserve" {
            f.stack_reserve = sym.address();
        }
        if is_float_routine(name) {
            f.float_routines += 1;
        }
    }
    Ok(f)
}

/// Soft-float helpers of the ARM EABI run-time and compiler-builtins.
fn is_float_routine(name: &str) -> bool {
    const EABI: [&str; 8] = [
        "__aeabi_d",
        "__aeabi_f",
        "__aeabi_i2d",
        "__aeabi_ui2d",
        "__aeabi_l2d",
        "__aeabi_ul2d",
        "__aeabi_i2f",
        "__aeabi_ui2f",
    ];
    const GCC: [&str; 6] = ["__adddf3", "__muldf3", "__divdf3", "__addsf3", "__mulsf3", "__divsf3"];
    EABI.iter().any(|p| name.starts_with(p)) || GCC.contains(&name)
}

/// `cargo xtask firmware <board>`: builds the image and prints where it is and what it uses.
pub fn command(args: &[String]) -> Result<()> {
    let root = workspace_root();
    let Some(board) = args.first() else {
        bail!("usage: cargo xtask firmware <board>   (boards: {})", boards(&root).join(", "));
    };
    let image = build(board)?;
    let f = footprint(&image.elf)?;
    println!("board   {} ({})", image.board, image.target);
    println!("route   {}", image.route.describe());
    println!("image   {}", image.elf.display());
    println!(
        "flash   {} bytes ({:.1} KiB: text {} + rodata {} + data {})",
        f.flash(),
        f.flash() as f64 / 1024.0,
        f.text,
        f.rodata,
        f.data
    );
    println!(
        "RAM     {} bytes ({:.1} KiB: data {} + bss {} + stack reserve {})",
        f.ram(),
        f.ram() as f64 / 1024.0,
        f.data,
        f.bss,
        f.stack_reserve
    );
    Ok(())
}

/// `cargo xtask size`: the footprint table of the stub image on both thumb targets, of the QEMU
/// image and of the real boards' images, as Markdown.
pub fn size_command() -> Result<()> {
    let rows = [
        ("stub-m0", "thumbv6m-none-eabi", "engine + protocol, stub front end"),
        ("stub-m0", "thumbv7em-none-eabihf", "engine + protocol, stub front end"),
        ("qemu-m4", "thumbv7em-none-eabihf", "engine + protocol + simulated board (f64)"),
        ("stm32f411", "thumbv7em-none-eabihf", "engine + protocol + ADC1 (registers) + USB CDC (HAL)"),
        ("nrf52840", "thumbv7em-none-eabihf", "engine + protocol + SAADC (registers) + USB CDC (nrf-usbd)"),
    ];
    let mut table = Vec::new();
    for (board, target, what) in rows {
        let image = build_for(board, Some(target))?;
        table.push((board, target, what, footprint(&image.elf)?, image.route));
    }
    println!("| image | target | contents | flash (text+rodata+data) | RAM (data+bss+stack) | float routines |");
    println!("|---|---|---|---|---|---|");
    for (board, target, what, f, _) in &table {
        println!(
            "| {board} | {target} | {what} | {} B ({:.1} KiB) = {}+{}+{} | {} B ({:.1} KiB) = {}+{}+{} | {} |",
            f.flash(),
            f.flash() as f64 / 1024.0,
            f.text,
            f.rodata,
            f.data,
            f.ram(),
            f.ram() as f64 / 1024.0,
            f.data,
            f.bss,
            f.stack_reserve,
            if f.float_routines == 0 { "none".to_string() } else { f.float_routines.to_string() }
        );
    }
    if let Some((.., route)) = table.first() {
        println!();
        println!("Built with {}, release profile (opt-level \"s\", LTO).", route.describe());
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn float_routines_are_recognised_and_others_not() {
        for name in ["__aeabi_dadd", "__aeabi_fmul", "__aeabi_ui2d", "__muldf3"] {
            assert!(is_float_routine(name), "{name}");
        }
        for name in ["__aeabi_memcpy", "__aeabi_uidiv", "__aeabi_lmul", "main"] {
            assert!(!is_float_routine(name), "{name}");
        }
    }

    #[test]
    fn the_real_boards_build_images_for_the_m4f_target() {
        let root = workspace_root();
        let listed = boards(&root);
        for board in ["stm32f411", "nrf52840"] {
            assert!(listed.iter().any(|b| b == board), "{board} in {listed:?}");
            assert_eq!(board_target(&root.join("boards").join(board)).unwrap(), "thumbv7em-none-eabihf");
        }
        assert!(!listed.iter().any(|b| b == "common"), "boards/common holds shared sources, not an image");
    }

    #[test]
    fn board_target_comes_from_the_board_config() {
        let dir = workspace_root().join("boards/qemu-m4");
        assert_eq!(board_target(&dir).unwrap(), "thumbv7em-none-eabihf");
    }
}
