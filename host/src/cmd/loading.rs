//! `ohmsight loading`: what an instrument would do to a pin's node.

use super::common::{open_session, print, Bar, LinkArgs};
use super::Failure;
use ohmsight::advice::{advise, AdviceOptions};
use ohmsight::loading;
use ohmsight::record::{read_document, v2, Document};
use ohmsight::run::{survey_with, SurveyOptions};
use ohmsight_protocol::ChannelRole;
use std::path::PathBuf;

pub const EXAMPLES: &str = "Examples:
  ohmsight survey --json > run.json
  ohmsight loading --pin 3 --from run.json --preset scope-1x
  ohmsight loading --pin 6 --input 10M,12p --json          surveys pin 6 of the demo board now
  ohmsight loading --pin 0 --port /dev/ttyACM0 --preset meter

Presets are typical values (common practice, no source): scope-1x 1 MΩ ∥ 25 pF, probe-10x
10 MΩ ∥ 12 pF, meter 10 MΩ ∥ 100 pF. The instrument is taken as referenced to ground.

Exit status: 0 answered; 1 the survey failed (link or board); 2 bad input (a pin that is not
there, --input syntax, an unreadable or foreign --from file).

Touching a board tied to mains or high voltage with an instrument needs isolation and the
usual precautions; follow local codes and licensed practice.";

#[derive(clap::Args)]
#[command(group(clap::ArgGroup::new("instrument").required(true).args(["input", "preset"])))]
pub struct Args {
    /// The pin (channel number) the instrument would touch.
    #[arg(long, value_name = "N", value_parser = super::common::channel)]
    pin: u8,
    /// The instrument's input as RESISTANCE,CAPACITANCE in parallel, SI prefixes allowed
    /// (e.g. 1M,25p or 10MΩ,12pF).
    #[arg(long, value_name = "R,C", value_parser = ohmsight::loading::parse_input)]
    input: Option<ohmsight::loading::Instrument>,
    /// A typical instrument: scope-1x (1 MΩ ∥ 25 pF), probe-10x (10 MΩ ∥ 12 pF) or meter
    /// (handheld multimeter, 10 MΩ ∥ 100 pF). Typical values, not your instrument's: use
    /// --input with its data sheet's values where you have them.
    #[arg(long, value_name = "NAME", value_parser = ["scope-1x", "probe-10x", "meter"])]
    preset: Option<String>,
    /// A stored survey (the JSON of `ohmsight survey --json`) instead of surveying the pin now.
    #[arg(long, value_name = "RUN.json", conflicts_with_all = ["scenario", "port", "seed"])]
    from: Option<PathBuf>,
    #[command(flatten)]
    link: LinkArgs,
    /// Print one JSON document on stdout instead of the text.
    #[arg(long)]
    json: bool,
    /// No progress bar.
    #[arg(long, short)]
    quiet: bool,
}

pub fn run(args: Args) -> Result<(), Failure> {
    let instrument = match (&args.input, &args.preset) {
        (Some(i), _) => i.clone(),
        (None, Some(name)) => loading::preset(name).ok_or_else(|| Failure::bad_input(format!("no preset {name}")))?,
        (None, None) => return Err(Failure::bad_input("give the instrument with --input R,C or --preset NAME")),
    };
    for warning in loading::implausible(&instrument) {
        eprintln!("ohmsight: warning: {warning}");
    }
    let (from, doc) = if let Some(path) = &args.from {
        let text = std::fs::read_to_string(path)
            .map_err(|e| Failure::bad_input(format!("cannot read {}: {e}", path.display())))?;
        let doc = read_document(&text).map_err(|e| Failure::bad_input(format!("{}:{e}", path.display())))?;
        (format!("the stored survey {}", path.display()), doc)
    } else {
        let (mut session, context) = open_session(&args.link)?;
        // Check the pin against the board's own list before spending conversions on it.
        let info = session.handshake(args.link.any_version)?;
        let pins: Vec<u8> = info.channels.iter().filter(|c| c.role == ChannelRole::Pin).map(|c| c.channel).collect();
        if !pins.contains(&args.pin) {
            let list: Vec<String> = pins.iter().map(u8::to_string).collect();
            return Err(Failure::bad_input(format!(
                "pin {} is not a pin of this board; it has pins {}",
                args.pin,
                list.join(", ")
            )));
        }
        let name = context.link.describe();
        let opts = SurveyOptions {
            any_version: args.link.any_version,
            channels: vec![args.pin],
            context,
            ..Default::default()
        };
        let bar = Bar::new(args.quiet);
        let surveyed = survey_with(&mut session, &opts, &mut |e| bar.on(e));
        bar.finish();
        let r = surveyed?.report;
        if let Some(f) = &r.fault {
            return Err(Failure::failed(format!("the survey of pin {} failed: {f}", args.pin)));
        }
        let advice_opts = AdviceOptions::default();
        let doc = v2::Survey::new(&r.record, &r, &advise(&r, &advice_opts), &advice_opts);
        (format!("a survey of pin {} alone, now, over the {name}", args.pin), Document::V2(Box::new(doc)))
    };
    let facts = loading::facts_from_document(&doc, args.pin).map_err(|e| {
        let from = args.from.as_ref().map_or(String::new(), |p| format!("{}: ", p.display()));
        Failure::bad_input(format!("{from}{e}"))
    })?;
    let answer = loading::Loading { from, ..loading::loading(&facts, &instrument) };
    print(&if args.json {
        serde_json::to_string_pretty(&loading::loading_json(&answer)).unwrap_or_default() + "\n"
    } else {
        loading::loading_text(&answer)
    })
}
