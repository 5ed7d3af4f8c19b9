//! `ohmsight completions SHELL`: the shell's completion script; and every command's manual
//! page, which `cargo xtask man` has the binary write (see [`MAN_PAGES_ENV`]).

use super::common::print;
use super::{Cli, Failure};
use clap::CommandFactory;
use std::path::Path;

pub const EXAMPLES: &str = "Install (one of):
  ohmsight completions bash > ~/.local/share/bash-completion/completions/ohmsight
  ohmsight completions zsh > ~/.zfunc/_ohmsight        (with fpath+=~/.zfunc before compinit)
  ohmsight completions fish > ~/.config/fish/completions/ohmsight.fish
  ohmsight completions powershell >> $PROFILE
  ohmsight completions elvish >> ~/.config/elvish/rc.elv

Open a new shell afterwards. The script completes commands, options and the fixed choices of
options (such as plan --emit c|rust); regenerate it after updating ohmsight.";

#[derive(clap::Args)]
pub struct Args {
    /// The shell to complete in.
    #[arg(value_enum, value_name = "SHELL")]
    shell: clap_complete::Shell,
}

pub fn run(args: Args) -> Result<(), Failure> {
    let mut script = Vec::new();
    clap_complete::generate(args.shell, &mut Cli::command(), "ohmsight", &mut script);
    print(&String::from_utf8_lossy(&script))
}

/// The environment variable that makes the binary write its manual pages into the folder it
/// names and exit, instead of running a command: how `cargo xtask man` gets them. Not a
/// subcommand, so that no completion script offers it.
pub const MAN_PAGES_ENV: &str = "OHMSIGHT_WRITE_MAN_PAGES";

/// Writes `ohmsight.1` and one page per command (`ohmsight-survey.1`,
/// `ohmsight-history-show.1`, …) into `dir`, created when missing.
pub fn man_pages(dir: &Path) -> Result<(), Failure> {
    std::fs::create_dir_all(dir).map_err(|e| Failure::bad_input(format!("cannot create {}: {e}", dir.display())))?;
    clap_mangen::generate_to(Cli::command(), dir)
        .map_err(|e| Failure::bad_input(format!("cannot write the manual pages into {}: {e}", dir.display())))
}
