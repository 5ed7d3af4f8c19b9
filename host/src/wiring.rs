//! Wiring files: the names of a board's pins as this set-up wires them, kept on the host so a
//! new wiring needs no new firmware.
//!
//! ```toml
//! # LX-6 logger, greenhouse north, rev B harness
//! board = "nrf52840"          # optional: refused when another board answers
//!
//! [[pin]]
//! channel = 3
//! label = "Bodenfeuchte Beet 2 (Nordseite)"
//! ```
//!
//! A label is 1 to 64 characters of any language, with no control characters (they would
//! reach a terminal as commands). The labels replace the board's own in the run's record, so
//! tables, pages, the store and limits files all use them.

use crate::record::BoardRecord;
use crate::scenario::{control_character, FileError};
use serde::Deserialize;
use std::collections::BTreeMap;
use toml::Spanned;

/// Longest label, characters.
pub const MAX_LABEL_CHARS: usize = 64;

/// A wiring file's content.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Wiring {
    /// The file, for messages.
    pub file: String,
    /// The board it is for, when it names one.
    pub board: Option<String>,
    /// Each channel's label.
    pub labels: BTreeMap<u8, String>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct FileToml {
    board: Option<Spanned<String>>,
    #[serde(default)]
    pin: Vec<Spanned<PinToml>>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct PinToml {
    channel: Spanned<i64>,
    label: Spanned<String>,
}

/// Reads a wiring file's text; `file` names it in errors (with line and column).
pub fn parse(file: &str, text: &str) -> Result<Wiring, FileError> {
    let err = |span: Option<std::ops::Range<usize>>, message: String| FileError::at(file, text, span, message);
    let f: FileToml = toml::from_str(text).map_err(|e| err(e.span(), e.message().trim().to_string()))?;
    if f.pin.is_empty() {
        return Err(err(None, "no [[pin]] tables: name at least one pin (channel and label)".into()));
    }
    let mut labels = BTreeMap::new();
    for p in &f.pin {
        let p = p.get_ref();
        let ch = u8::try_from(*p.channel.get_ref())
            .map_err(|_| err(Some(p.channel.span()), "channel must be a whole number from 0 to 255".into()))?;
        let label = p.label.get_ref().trim();
        if let Some(why) = control_character("label", label) {
            return Err(err(Some(p.label.span()), why));
        }
        let chars = label.chars().count();
        if chars == 0 || chars > MAX_LABEL_CHARS {
            return Err(err(
                Some(p.label.span()),
                format!("label has {chars} characters: give 1 to {MAX_LABEL_CHARS}"),
            ));
        }
        if labels.insert(ch, label.to_string()).is_some() {
            return Err(err(Some(p.channel.span()), format!("channel {ch} is named twice")));
        }
    }
    Ok(Wiring { file: file.to_string(), board: f.board.map(|b| b.into_inner()), labels })
}

impl Wiring {
    /// `board` with its pins named as this file says; an error (bad input) when the file is for
    /// another board or names a channel that is not one of its pins.
    pub fn apply(&self, board: &mut BoardRecord) -> Result<(), String> {
        if let Some(name) = self.board.as_ref().filter(|n| **n != board.name) {
            return Err(format!(
                "{}: the wiring is for board \"{name}\", but board \"{}\" answered: use that board's wiring file",
                self.file, board.name
            ));
        }
        let pins: Vec<u8> = board.channels.iter().filter(|c| c.role == "pin").map(|c| c.channel).collect();
        for (ch, label) in &self.labels {
            let Some(c) = board.channels.iter_mut().find(|c| c.channel == *ch && c.role == "pin") else {
                let list: Vec<String> = pins.iter().map(u8::to_string).collect();
                return Err(format!(
                    "{}: channel {ch} is not a pin of board \"{}\"; it has pins {}",
                    self.file,
                    board.name,
                    list.join(", ")
                ));
            };
            c.label = label.clone();
        }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn labels_in_any_language_up_to_64_characters() {
        let w = parse(
            "w.toml",
            "board = \"nrf52840\"\n[[pin]]\nchannel = 3\nlabel = \"土壌水分センサー 2 — 北側の温室\"\n",
        )
        .unwrap();
        assert_eq!(w.board.as_deref(), Some("nrf52840"));
        assert_eq!(w.labels[&3], "土壌水分センサー 2 — 北側の温室");
        let long = "é".repeat(64);
        assert!(parse("w.toml", &format!("[[pin]]\nchannel = 1\nlabel = \"{long}\"\n")).is_ok());
    }

    #[test]
    fn mistakes_name_file_line_and_fix() {
        let too_long = format!("[[pin]]\nchannel = 1\nlabel = \"{}\"\n", "x".repeat(65));
        let cases = [
            (too_long.as_str(), 3, "65 characters"),
            ("[[pin]]\nchannel = 1\nlabel = \"a\\u001b[2Jb\"\n", 3, "control character"),
            ("[[pin]]\nchannel = 1\nlabel = \"a\"\n[[pin]]\nchannel = 1\nlabel = \"b\"\n", 5, "named twice"),
            ("[[pin]]\nchannel = 300\nlabel = \"a\"\n", 2, "0 to 255"),
            ("[[pin]]\nchannel = 1\nlable = \"a\"\n", 3, "lable"),
        ];
        for (text, line, says) in cases {
            let e = parse("w.toml", text).unwrap_err();
            assert_eq!(e.line, Some(line), "{text}: {e}");
            assert!(e.message.contains(says), "{text}: {e}");
        }
        assert!(parse("w.toml", "board = \"x\"\n").unwrap_err().message.contains("no [[pin]]"));
    }
}
