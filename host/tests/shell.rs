//! Completion scripts and manual pages as a shell and `man` read them.

use std::path::PathBuf;
use std::process::Command;

fn ohmsight() -> Command {
    let mut c = Command::new(env!("CARGO_BIN_EXE_ohmsight"));
    c.env("OHMSIGHT_DB", std::env::temp_dir().join(format!("ohmsight-shell-{}.db", std::process::id())));
    c
}

fn dir() -> PathBuf {
    let dir = std::env::temp_dir().join(format!("ohmsight-shell-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    dir
}

fn completions(shell: &str) -> String {
    let out = ohmsight().args(["completions", shell]).output().unwrap();
    assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
    String::from_utf8(out.stdout).unwrap()
}

/// What bash offers after `words` (the last one being completed), asked through the script's own
/// completion function as bash's programmable completion would call it.
fn bash_offers(script: &std::path::Path, words: &[&str]) -> Vec<String> {
    let quoted: Vec<String> = words.iter().map(|w| format!("'{w}'")).collect();
    let program = format!(
        "source '{}'\nfunc=$(complete -p ohmsight | sed -n 's/.*-F \\([^ ]*\\).*/\\1/p')\n\
         COMP_WORDS=({})\nCOMP_CWORD={}\nCOMP_LINE=\"${{COMP_WORDS[*]}}\"\nCOMP_POINT=${{#COMP_LINE}}\n\
         \"$func\" ohmsight '{}' '{}'\nprintf '%s\\n' \"${{COMPREPLY[@]}}\"\n",
        script.display(),
        quoted.join(" "),
        words.len() - 1,
        words[words.len() - 1],
        words[words.len().saturating_sub(2)],
    );
    let out = Command::new("bash").arg("-c").arg(program).output().expect("bash runs");
    assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
    String::from_utf8(out.stdout).unwrap().lines().map(str::to_string).filter(|l| !l.is_empty()).collect()
}

#[test]
fn the_bash_script_parses_and_completes_commands_and_choices() {
    let script = dir().join("ohmsight.bash");
    std::fs::write(&script, completions("bash")).unwrap();
    let check = Command::new("bash").arg("-n").arg(&script).output().expect("bash runs");
    assert!(check.status.success(), "bash -n refuses it: {}", String::from_utf8_lossy(&check.stderr));
    assert_eq!(bash_offers(&script, &["ohmsight", "pl"]), ["plan"]);
    let mut langs = bash_offers(&script, &["ohmsight", "plan", "--emit", ""]);
    langs.sort();
    assert_eq!(langs, ["c", "rust"]);
    let shells = bash_offers(&script, &["ohmsight", "completions", ""]);
    for s in ["bash", "zsh", "fish", "powershell", "elvish"] {
        assert!(shells.iter().any(|x| x == s), "{s} not offered: {shells:?}");
    }
}

#[test]
fn every_shell_gets_a_script_naming_the_commands() {
    for shell in ["bash", "zsh", "fish", "powershell", "elvish"] {
        let text = completions(shell);
        for word in ["survey", "refit", "plan", "completions", "emit"] {
            assert!(text.contains(word), "the {shell} script lacks {word}");
        }
    }
    let out = ohmsight().args(["completions", "tcsh"]).output().unwrap();
    assert_eq!(out.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&out.stderr).contains("bash"), "the error lists the shells");
}

#[test]
fn manual_pages_cover_every_command_and_man_reads_their_options() {
    let out_dir = dir().join("man");
    let out = ohmsight().env("OHMSIGHT_WRITE_MAN_PAGES", &out_dir).output().unwrap();
    assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
    let help = String::from_utf8(ohmsight().arg("--help").output().unwrap().stdout).unwrap();
    // Every command the help lists (the lines after "Commands:") has its page.
    let commands: Vec<&str> = help
        .lines()
        .skip_while(|l| !l.starts_with("Commands:"))
        .skip(1)
        .take_while(|l| !l.is_empty())
        .filter_map(|l| l.split_whitespace().next().filter(|_| l.starts_with("  ") && !l.starts_with("   ")))
        .filter(|c| *c != "help")
        .collect();
    assert!(commands.len() >= 10, "{help}");
    for c in &commands {
        assert!(out_dir.join(format!("ohmsight-{c}.1")).is_file(), "no page for {c}");
    }
    assert!(out_dir.join("ohmsight.1").is_file() && out_dir.join("ohmsight-history-show.1").is_file());
    // Rendered by man itself (groff underneath): the options and their words are there.
    let page = Command::new("man")
        .args(["-l", "-P", "cat"])
        .arg(out_dir.join("ohmsight-plan.1"))
        .env("MANWIDTH", "100")
        .output()
        .expect("man runs (Debian man-db)");
    assert!(page.status.success(), "{}", String::from_utf8_lossy(&page.stderr));
    let text = String::from_utf8_lossy(&page.stdout);
    for word in ["--emit", "--from", "--out", "--db", "rust", "verified scan plan"] {
        assert!(text.contains(word), "the page lacks {word}:\n{text}");
    }
}
