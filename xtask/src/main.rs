//! Build automation and benchmarks: `cargo xtask <command>`.
//!
//! - `test`: installs the Debian packages the tests need (`.ci/debian-packages`), then runs
//!   `cargo test --workspace` (extra arguments are passed on).
//! - `bench`: a 16-pin survey on the simulated board, then a check of it against a typical
//!   limits file; prints wall time, board and host time, conversions and link bytes of each.
//! - `study`: one pin surveyed over several seeds, optionally with some of the simulated board's
//!   non-idealities switched off; prints the estimates against the truth.
//! - `firmware <board>`, `qemu [--scenario F]`, `size`: board images (see the library).
//! - `fuzz [--cases N] [--seed S] [--start I] [--target frames|messages|engine|all]`: the decoders'
//!   fuzz targets (see [`fuzz`]), 10^7 cases each by default; prints cases/s, exits non-zero with
//!   the seed and the input on a failure.
//! - `man`: the manual page of every command (clap_mangen) under `target/man/`.
//! - `accuracy`: a grid of simulated set-ups; errors, interval coverage, verdicts, cost and the
//!   Cramér–Rao bound (see [`accuracy`]).

mod accuracy;
mod fuzz;

use anyhow::{bail, Context, Result};
use ohmsight::link::InProcessLink;
use ohmsight::session::Session;
use ohmsight::units;
use ohmsight::{survey, SurveyOptions};
use ohmsight_virtual::{BoardProfile, PinSetup, Realism, Scenario, Source};
use std::time::Instant;

mod setup;

fn main() -> Result<()> {
    let args: Vec<String> = std::env::args().skip(1).collect();
    // `test` hands its arguments to `cargo test`, whose own `--help` they may hold.
    let help = |a: &String| a == "--help" || a == "-h";
    if args.first().is_some_and(help) || (args.first().is_some_and(|c| c != "test") && args.iter().any(help)) {
        usage();
        return Ok(());
    }
    match args.first().map(String::as_str) {
        Some("test") => setup::test(&args[1..]),
        Some("bench") => bench(),
        Some("study") => study(&args[1..]),
        Some("accuracy") => accuracy::accuracy(&args[1..]),
        Some("fuzz") => fuzz::command(&args[1..]),
        Some("firmware") => xtask::firmware::command(&args[1..]),
        Some("qemu") => xtask::qemu::command(&args[1..]),
        Some("size") => xtask::firmware::size_command(),
        Some("man") => man(),
        _ => {
            usage();
            bail!("unknown or missing command")
        }
    }
}

fn usage() {
    eprintln!("usage: cargo xtask test [ARGS] | bench | firmware <board> | qemu [--scenario FILE] | size | man");
    eprintln!("       cargo xtask accuracy [--quick] [--seeds N] [--jobs N] [--detail] [--board-seed S] [--ideal | --off a,b]");
    eprintln!("       cargo xtask fuzz [--cases N] [--seed S] [--start I] [--target frames|messages|engine|all]");
    eprintln!("       cargo xtask study [--ohms R | --floating] [--farads C] [--volts V] [--hum VOLTS,HZ] [--seeds N]");
    eprintln!("                         [--board fast] [--hold-tol T] [--switch-tol T] [--ideal | --off a,b]");
    eprintln!("         (study: one simulated pin over N seeds; STUDY_OBJECTIVE=1 and STUDY_PROFILE=1 print the");
    eprintln!("          fit's objective at the truth and its profiles)");
}

/// A fitted pin's likelihood profiles, for a look at why an interval ends where it does: the
/// objective with the other parameters re-fitted, above its value at the fit's own node, over
/// node capacitances at half-decade steps and over source resistances `rs = (from, to, steps
/// per decade)`. A step far above both neighbours is a re-fit that missed the valley's floor.
pub(crate) fn print_profiles(
    input: &ohmsight::fit::FitInput<'_>,
    params: &ohmsight::model::PinParams,
    rs: (f64, f64, f64),
) {
    use ohmsight::fit::{profile_objective, LN_CN, LN_RS};
    let prof = |i: usize, x: f64| profile_objective(input, i, x.ln(), params);
    let base = prof(LN_CN, params.node_farads);
    println!("  profiles, χ² above the fit's {base:.1}:");
    // (name, parameter, first and last value, steps per decade, its units)
    type Row = (&'static str, usize, f64, f64, f64, fn(f64) -> String);
    let rows: [Row; 2] = [("Cn", LN_CN, 1e-10, 2e-3, 2.0, units::farads), ("Rs", LN_RS, rs.0, rs.1, rs.2, units::ohms)];
    for (name, i, first, last, per_decade, unit) in rows {
        let mut line = format!("  {name}:");
        let mut x = first;
        while x < last {
            line += &format!(" {}:{:.1}", unit(x), prof(i, x) - base);
            x *= 10f64.powf(1.0 / per_decade);
        }
        println!("{line}");
    }
}

/// `cargo xtask man`: `ohmsight.1` and a page per command under `target/man/` (or
/// `$CARGO_TARGET_DIR/man/`). The pages come from the binary's own command line definition
/// (clap_mangen), which it writes when `OHMSIGHT_WRITE_MAN_PAGES` names a folder.
fn man() -> Result<()> {
    let root = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).parent().context("the workspace folder")?;
    let target = std::env::var_os("CARGO_TARGET_DIR").map_or_else(|| root.join("target"), std::path::PathBuf::from);
    let out = target.join("man");
    // Pages of commands that no longer exist must not linger.
    if let Ok(old) = std::fs::read_dir(&out) {
        for entry in old.flatten() {
            if entry.path().extension().is_some_and(|e| e == "1") {
                std::fs::remove_file(entry.path()).with_context(|| format!("removing {}", entry.path().display()))?;
            }
        }
    }
    let cargo = std::env::var_os("CARGO").unwrap_or_else(|| "cargo".into());
    let status = std::process::Command::new(cargo)
        .current_dir(root)
        .args(["run", "--quiet", "--release", "-p", "ohmsight", "--bin", "ohmsight"])
        .env("OHMSIGHT_WRITE_MAN_PAGES", &out)
        .status()
        .context("running cargo")?;
    if !status.success() {
        bail!("building or running ohmsight to write the manual pages failed ({status})");
    }
    let mut pages: Vec<String> = std::fs::read_dir(&out)
        .with_context(|| format!("reading {}", out.display()))?
        .flatten()
        .map(|e| e.file_name().to_string_lossy().into_owned())
        .filter(|n| n.ends_with(".1"))
        .collect();
    pages.sort();
    println!("{} manual pages in {}: {}", pages.len(), out.display(), pages.join(" "));
    println!("read one with `man -l {}`", out.join("ohmsight-survey.1").display());
    Ok(())
}

fn pin(channel: u8, source: Source, node_farads: f64) -> PinSetup {
    PinSetup {
        channel,
        label: heapless::String::try_from(format!("ch{channel}").as_str()).unwrap_or_default(),
        source,
        node_farads,
        hum_volts: 0.0,
        hum_hz: 50.0,
        noise_volts: 0.0,
        pull: false,
    }
}

/// A 16-pin board: a ladder of source resistances and node capacitances.
fn bench() -> Result<()> {
    let mut pins = heapless::Vec::new();
    let ohms = [100.0, 1e3, 3.3e3, 10e3, 33e3, 100e3, 330e3, 1e6, 3.3e6, 10e6, 1e3, 47e3, 1e6, 10e3];
    let farads =
        [10e-12, 10e-12, 5e-12, 20e-12, 10e-12, 10e-12, 15e-12, 10e-12, 10e-12, 10e-12, 1e-9, 100e-9, 100e-9, 10e-12];
    for (i, (&r, &c)) in ohms.iter().zip(&farads).enumerate() {
        let v = 0.3 + 0.18 * i as f64;
        pins.push(pin(i as u8, Source::Driven { volts: v, ohms: r }, c)).ok();
    }
    pins.push(pin(14, Source::Floating, 8e-12)).ok();
    pins.push(pin(15, Source::Driven { volts: 0.0, ohms: 50.0 }, 10e-12)).ok();
    let sc =
        Scenario { name: "bench16".try_into().unwrap_or_default(), seed: 11, board: BoardProfile::default(), pins };
    let t0 = Instant::now();
    let mut session = Session::new(InProcessLink::new(&sc));
    let r = survey(&mut session, &SurveyOptions::default()).context("survey")?;
    let wall = t0.elapsed().as_secs_f64();
    println!("16-pin survey on the simulated board");
    println!(
        "  wall time        {wall:.2} s  ({} worker threads for the fits)",
        std::thread::available_parallelism().map_or(1, |n| n.get())
    );
    println!("  conversions      {}", r.link.conversions);
    println!("  link bytes       {} to the board, {} back", r.link.bytes_sent, r.link.bytes_received);
    println!("  board time       {:.2} s (nominal)", r.board_seconds);
    let evals: usize = r.pins.iter().filter_map(|p| p.fit.as_ref()).map(|f| f.evaluations).sum();
    println!("  model evaluations {evals}");
    bench_check(&sc, &r)
}

/// The production check of the same board against a typical limits file, beside the survey.
fn bench_check(sc: &Scenario, surveyed: &ohmsight::SurveyReport) -> Result<()> {
    use ohmsight::check::{more_wanted, needs, CheckReport};
    let file = "boards/virtual/limits/bench16.toml";
    let text = include_str!("../../boards/virtual/limits/bench16.toml");
    let limits = ohmsight::limits::parse(file, text).map_err(|e| anyhow::anyhow!("{e}"))?;
    let opts = SurveyOptions { kind: ohmsight::record::RunKind::Check, ..Default::default() };
    let mut session = Session::new(InProcessLink::new(sc));
    let resolved = std::cell::RefCell::new(Vec::new());
    let t0 = Instant::now();
    let checked = ohmsight::run::check_with(
        &mut session,
        &opts,
        &mut |board| {
            let pins = limits.resolve(board).map_err(|e| e.to_string())?;
            let wanted = needs(&pins);
            *resolved.borrow_mut() = pins;
            Ok(wanted)
        },
        &mut |first| more_wanted(&resolved.borrow(), first),
        &mut |_| {},
    )
    .map_err(|e| anyhow::anyhow!("{e}"))?;
    let wall = t0.elapsed().as_secs_f64();
    let judging = Instant::now();
    let pins = resolved.borrow().clone();
    let report = CheckReport::new(checked.report, "bench".into(), limits.clone(), text.into(), &pins, None);
    let host = checked.analysis_seconds + judging.elapsed().as_secs_f64();
    let r = &report.survey;
    let again = r.record.experiments.iter().filter(|e| e.purpose == ohmsight::record::Purpose::Detail).count();
    println!();
    println!("16-pin check against {file} ({} limits)", report.summary().limits.len());
    println!("                   check        survey");
    println!("  board time       {:>8.2} s   {:>8.2} s (nominal)", r.board_seconds, surveyed.board_seconds);
    println!("  host computing   {host:>8.2} s   (fits, verdicts, judging; the survey's: wall time above)");
    println!("  wall time        {wall:>8.2} s");
    println!("  conversions      {:>8}     {:>8}", r.link.conversions, surveyed.link.conversions);
    println!("  bytes to board   {:>8}     {:>8}", r.link.bytes_sent, surveyed.link.bytes_sent);
    println!("  bytes back       {:>8}     {:>8}", r.link.bytes_received, surveyed.link.bytes_received);
    println!("  result           {} ({} settling experiments; not passed: {})", report.result.as_str(), again, {
        let np = report.not_passed();
        if np.is_empty() {
            "none".to_string()
        } else {
            np.join(", ")
        }
    });
    if std::env::var_os("BENCH_DETAIL").is_some() {
        for p in &report.pins {
            for l in p.limits.iter().filter(|l| l.outcome != ohmsight::limits::Outcome::Pass) {
                println!("  ch{} {}", p.channel, l.sentence());
            }
            if let Some(r) = report.survey.pins.iter().find(|r| r.channel == p.channel && p.result != "pass") {
                println!("     {:?} {:?} {:?}", r.verdict, r.reason, r.fit.as_ref().map(|f| (f.chi2, f.dof)));
            }
        }
    }
    breakdown(r)
}

/// Per pin: the board time its experiments took, their conversions, and the model evaluations
/// its last fit spent, to show where a check's time goes.
fn breakdown(report: &ohmsight::SurveyReport) -> Result<()> {
    let record = &report.record;
    let secs = |e: &ohmsight::record::ExperimentRecord| e.end_ps.saturating_sub(e.start_ps) as f64 * 1e-12;
    println!("  per pin          board s  conversions  experiments  evaluations");
    for pin in &report.pins {
        let exps: Vec<_> = record.experiments.iter().filter(|e| e.pin == Some(pin.channel)).collect();
        let board: f64 = exps.iter().map(|e| secs(e)).sum();
        let conv: u64 = exps.iter().map(|e| u64::from(e.conversions)).sum();
        let evals = pin.fit.as_ref().map_or(0, |f| f.evaluations);
        println!("    ch{:<2}           {board:>7.3}  {conv:>11}  {:>11}  {evals:>11}", pin.channel, exps.len());
        if std::env::var_os("BENCH_DETAIL").is_some() {
            for e in &exps {
                println!("        {:?} {:.4} s {} conv  {:?}", e.purpose, secs(e), e.conversions, e.experiment);
            }
        }
    }
    Ok(())
}

/// Switches off the simulated board's non-idealities named in a comma-separated list.
pub(crate) fn switch_off(realism: &mut Realism, list: &str) -> Result<()> {
    for k in list.split(',') {
        match k {
            "spread" => realism.unit_spread = false,
            "converter" => realism.converter_errors = false,
            "ktc" => realism.ktc = false,
            "charge" => realism.charge_effects = false,
            "leakage" => realism.leakage = false,
            "overhead" => realism.overhead = false,
            other => bail!("unknown effect {other} (spread, converter, ktc, charge, leakage, overhead)"),
        }
    }
    Ok(())
}

fn study(args: &[String]) -> Result<()> {
    let mut ohms = 100e3;
    let mut farads = 10e-12;
    let mut volts = 1.2;
    let mut seeds = 5u64;
    let mut realism = Realism::full();
    let mut board = BoardProfile::default();
    let mut floating = false;
    let mut hum: Option<(f64, f64)> = None;
    let mut it = args.iter();
    while let Some(a) = it.next() {
        let mut val = || it.next().context("missing value");
        match a.as_str() {
            "--ohms" => ohms = val()?.parse()?,
            "--farads" => farads = val()?.parse()?,
            "--volts" => volts = val()?.parse()?,
            "--seeds" => seeds = val()?.parse()?,
            "--floating" => floating = true,
            "--hum" => {
                let v = val()?;
                let (a, f) = v.split_once(',').context("--hum takes VOLTS,HZ")?;
                hum = Some((a.parse()?, f.parse()?));
            }
            "--hold-tol" => board.hold_tolerance = val()?.parse()?,
            "--switch-tol" => board.switch_tolerance = val()?.parse()?,
            "--ideal" => realism = Realism::ideal(),
            "--off" => switch_off(&mut realism, val()?)?,
            "--board" => {
                if val()? == "fast" {
                    board.hold_farads = 8e-12;
                    board.switch_ohms = 1e3;
                    board.adc_clock_hz = 14e6;
                    board.sample_cycles =
                        heapless::Vec::from_slice(&[1.5, 7.5, 13.5, 28.5, 41.5, 55.5, 71.5, 239.5]).unwrap_or_default();
                    board.conversion_cycles = 12.5;
                }
            }
            other => bail!("unknown option {other}"),
        }
    }
    let source = if floating { Source::Floating } else { Source::Driven { volts, ohms } };
    // An open pin's source is infinite: its coverage is judged against that, not --ohms.
    if floating {
        ohms = f64::INFINITY;
    }
    println!(
        "truth: {} {}  Cn {}",
        if floating { "floating".to_string() } else { units::ohms(ohms) },
        units::volts(volts),
        units::farads(farads)
    );
    let mut inside = 0;
    let mut zs: Vec<f64> = Vec::new();
    for seed in 0..seeds {
        let mut pins = heapless::Vec::new();
        let mut p = pin(0, source, farads);
        if let Some((v, hz)) = hum {
            p.hum_volts = v;
            p.hum_hz = hz;
        }
        pins.push(p).ok();
        let sc =
            Scenario { name: "study".try_into().unwrap_or_default(), seed: 1000 + seed, board: board.clone(), pins };
        let mut link = InProcessLink::with_realism(&sc, realism);
        let (ch, rm) = link.board().true_hold_and_switch();
        let mut session = Session::new(link);
        let r = survey(&mut session, &SurveyOptions::default())?;
        let p = &r.pins[0];
        let rs = p.source_ohms;
        // A bound that assumes a node smaller than the truth's claims nothing about this pin.
        let void = p.source_assumes_node_below.is_some_and(|c| farads > c);
        let ok = (void || ohmsight_tests::covers(&rs, ohms)) && ohmsight_tests::covers(&p.node_farads, farads);
        inside += usize::from(ok);
        let fit = p.fit.as_ref();
        if let (Some(f), Some(e)) = (fit.filter(|_| !floating), rs.estimate) {
            zs.push((e / ohms).ln() / f.sigma_ln_rs);
        }
        if let Some(f) = fit.filter(|_| std::env::var_os("STUDY_OBJECTIVE").is_some()) {
            let truth = ohmsight::model::PinParams {
                source_ohms: ohms,
                node_farads: farads,
                source_volts: volts,
                hold_farads: ch,
                switch_ohms: rm,
                overhead_s: if realism.overhead { 130e-9 } else { 0.0 },
                leak_amps: 0.0,
            };
            let input = ohmsight::fit::FitInput { board: &r.model, events: &p.events };
            let at_fit = ohmsight::fit::objective_at(&input, &f.params);
            let at_truth = ohmsight::fit::objective_at(&input, &truth);
            println!("  objective at fit {at_fit:.1}, at truth {at_truth:.1}, cells {}", f.dof + 3);
            if std::env::var_os("STUDY_PROFILE").is_some() {
                print_profiles(&input, &f.params, (10.0, 2e12, 2.0));
            }
        }
        println!(
            "seed {seed}: {:8} Rs {:28} Cn {:28} Vs {:?}  chi2/dof {:.2}  σlnRs {:.3}  δ {:.0} ns Ch {:+.1}% Rm {:+.1}% (true {:+.1}% {:+.1}%) {}",
            p.verdict.as_str(),
            ohmsight::render::text::source_text(p),
            ohmsight::render::text::interval_text(&p.node_farads, units::farads),
            p.source_volts.map(|v| (v * 1e4).round() / 1e4),
            fit.map_or(0.0, |f| f.chi2 / f.dof.max(1) as f64),
            fit.map_or(0.0, |f| f.sigma_ln_rs),
            fit.map_or(0.0, |f| f.params.overhead_s * 1e9),
            fit.map_or(0.0, |f| (f.params.hold_farads / board.hold_farads - 1.0) * 100.0),
            fit.map_or(0.0, |f| (f.params.switch_ohms / board.switch_ohms - 1.0) * 100.0),
            (ch / board.hold_farads - 1.0) * 100.0,
            (rm / board.switch_ohms - 1.0) * 100.0,
            if ok { "" } else { "  <-- truth outside" }
        );
    }
    println!("truth inside both 95% intervals (Rs and Cn): {inside}/{seeds}");
    if !zs.is_empty() {
        let rms = (zs.iter().map(|z| z * z).sum::<f64>() / zs.len() as f64).sqrt();
        let mean = zs.iter().sum::<f64>() / zs.len() as f64;
        println!(
            "z = ln(Rs_fit/Rs_true)/σ: mean {mean:+.2}, rms {rms:.2} over {} fits (1.00 if the σ is right)",
            zs.len()
        );
    }
    Ok(())
}
