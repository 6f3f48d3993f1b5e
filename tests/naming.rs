//! One name for one thing, on every command. The first test walks every subcommand's clap
//! definition (the binary's own `Cli`, compiled in here from src/main.rs) against the table
//! of concepts below: each concept has one accepted long flag (and short letter), shown on
//! exactly the commands where it acts; any flag not in the table, a second spelling of a
//! concept, or a hidden spelling that is not a listed deprecated alias fails the test. The
//! other tests check the names the commands print and write.

#[allow(dead_code, unused_imports)]
#[path = "../src/main.rs"]
mod app;

mod common;

use clap::CommandFactory;
use common::{root, tagsieve};
use std::collections::{BTreeMap, BTreeSet};

/// Every command but `completions` (which only prints a script).
const WORKERS: &[&str] = &["inspect", "import", "simulate", "scan", "sweep", "count", "chsh", "clock-fit", "demo"];
/// The commands that read tag files.
const READERS: &[&str] = &["inspect", "import", "scan", "sweep", "count", "chsh", "clock-fit"];
/// The commands that write result tables.
const TABLES: &[&str] = &["scan", "sweep", "count", "chsh"];
/// The commands that count coincidences over one block's inputs.
const BLOCK: &[&str] = &["scan", "sweep", "count"];
/// The commands that estimate accidentals.
const ACC: &[&str] = &["sweep", "count", "chsh"];
const ALL: &[&str] = &["inspect", "import", "simulate", "scan", "sweep", "count", "chsh", "clock-fit", "demo", "completions"];

/// A concept: (what it is, its one long flag, its short letter, the commands that show it).
type Concept = (&'static str, &'static str, Option<char>, &'static [&'static str]);

const CONCEPTS: &[Concept] = &[
    // Shared by several commands.
    ("no progress bars or chatter", "quiet", Some('q'), ALL),
    ("JSON on stdout", "json", None, ALL),
    ("worker threads", "threads", None, WORKERS),
    ("buffered reads instead of memory maps", "no-mmap", None, READERS),
    ("where results go (file or directory)", "output", Some('o'), &["import", "simulate", "scan", "sweep", "count", "chsh", "clock-fit", "demo"]),
    ("replace an existing output", "force", None, &["import", "simulate", "scan", "sweep", "count", "chsh", "clock-fit"]),
    ("record layout of interleaved-record inputs", "layout", None, &["inspect", "import", "scan", "sweep", "count", "clock-fit"]),
    ("pass over the data (auto, whole, stream)", "pass", None, &["scan", "sweep", "count", "chsh"]),
    ("channel pairs", "pairs", None, BLOCK),
    ("delay of one channel, CH=PS", "delay", None, &["scan", "sweep", "count", "chsh", "clock-fit"]),
    ("delays file", "delays", None, &["scan", "sweep", "count", "chsh", "clock-fit"]),
    ("coincidence window w", "window-ps", Some('w'), &["simulate", "count", "chsh"]),
    ("off-peak window offsets", "acc-offsets-ps", None, ACC),
    ("no off-peak windows", "no-offpeak", None, ACC),
    ("time slice of the analytic accidentals", "slice-s", None, ACC),
    ("table format (hdf5, csv, json)", "format", None, TABLES),
    ("plot file", "plot", None, &["scan", "sweep", "chsh"]),
    ("block label (HDF5 group name)", "label", None, BLOCK),
    ("random seed", "seed", None, &["simulate", "demo"]),
    ("length of each simulated block, s", "duration-s", None, &["simulate", "demo"]),
    // One command each.
    ("delay histogram half-range (not 'span': that is the acquisition span)", "half-range-ps", None, &["scan"]),
    ("delay histogram bin width", "bin-ps", None, &["scan"]),
    ("reference channel for proposed delays", "reference", None, &["scan"]),
    ("delays file to write", "delays-out", None, &["scan"]),
    ("logarithmic count axis", "log", None, &["scan"]),
    ("windows to sweep", "windows-ps", None, &["sweep"]),
    ("smallest swept window", "from-ps", None, &["sweep"]),
    ("largest swept window", "to-ps", None, &["sweep"]),
    ("sweep step", "step-ps", None, &["sweep"]),
    ("window recommendation rule", "criterion", None, &["sweep"]),
    ("fraction for the peak-fraction rule", "fraction", None, &["sweep"]),
    ("three-setting sign convention", "bell3-convention", None, &["chsh"]),
    ("visibility plot file", "plot-visibility", None, &["chsh"]),
    ("correlation model", "model", None, &["simulate"]),
    ("detector set-up", "setup", None, &["simulate"]),
    ("pair emission rate", "pair-rate-hz", None, &["simulate"]),
    ("source visibility", "visibility", None, &["simulate"]),
    ("CHSH analyzer angles", "angles", None, &["simulate"]),
    ("visibility series angles", "series", None, &["simulate"]),
    ("detector override", "detector", None, &["simulate"]),
    // The one homonym kept: the file format of the simulated blocks (container, arrays,
    // records) on the one command that writes tag files, where no table format exists.
    ("file format of the simulated blocks", "format", None, &["simulate"]),
    ("leave the delays out of run.toml", "omit-delays", None, &["simulate"]),
    ("channels on the second recorder's clock", "second-site", None, &["simulate", "clock-fit"]),
    ("clock file mapping the second site's channels", "clock", None, BLOCK),
    ("offsets searched by the clock fit, ± s", "offset-range-s", None, &["clock-fit"]),
    ("frequency offsets searched by the clock fit, ± ppm", "ppm-range", None, &["clock-fit"]),
    ("second recorder's frequency offset, ppm", "clock-ppm", None, &["simulate"]),
    ("second recorder's start offset, s", "clock-offset-s", None, &["simulate"]),
    ("Allan deviation of the second recorder at 1 s", "clock-adev", None, &["simulate"]),
    ("time of a jump of the second recorder", "clock-step-at-s", None, &["simulate"]),
    ("size of that jump", "clock-step-ps", None, &["simulate"]),
];

/// Old spellings kept hidden, each warning and pointing to the one name: (command, old, new).
const DEPRECATED: &[(&str, &str, &str)] = &[
    ("simulate", "out", "output"),
    ("demo", "out", "output"),
    ("demo", "block-s", "duration-s"),
    ("scan", "span-ps", "half-range-ps"),
];

/// (command, long flag) → (short letter, hidden) for every flag of every subcommand.
fn flags() -> BTreeMap<(String, String), (Option<char>, bool)> {
    let mut cli = app::Cli::command();
    cli.build(); // propagates the global flags into the subcommands
    let mut out = BTreeMap::new();
    for sub in cli.get_subcommands() {
        for arg in sub.get_arguments() {
            let Some(long) = arg.get_long() else { continue };
            if long == "help" || long == "version" {
                continue; // clap's own
            }
            out.insert((sub.get_name().to_string(), long.to_string()), (arg.get_short(), arg.is_hide_set()));
            for alias in arg.get_all_aliases().unwrap_or_default() {
                out.insert((sub.get_name().to_string(), alias.to_string()), (None, true));
            }
        }
    }
    out
}

#[test]
fn every_concept_has_one_spelling_on_every_command() {
    let flags = flags();
    let commands: BTreeSet<String> = flags.keys().map(|(c, _)| c.clone()).collect();
    assert_eq!(commands, ALL.iter().map(|c| c.to_string()).collect(), "every subcommand is walked");
    let mut problems = Vec::new();

    for ((cmd, long), (short, hidden)) in &flags {
        if *hidden {
            if !DEPRECATED.iter().any(|(c, old, _)| c == cmd && old == long) {
                problems.push(format!("{cmd} --{long}: hidden, but not a listed deprecated spelling"));
            }
            continue;
        }
        let rows: Vec<&Concept> = CONCEPTS.iter().filter(|(_, l, _, on)| l == long && on.contains(&cmd.as_str())).collect();
        match rows.as_slice() {
            [] => problems.push(format!("{cmd} --{long}: not in the table of concepts (a new concept, or a second name for one?)")),
            [(what, _, want_short, _)] if short != want_short => {
                problems.push(format!("{cmd} --{long} ({what}): short {short:?}, the table says {want_short:?}"))
            }
            [_] => {}
            _ => problems.push(format!("{cmd} --{long}: two concepts claim it")),
        }
    }
    for (what, long, _, on) in CONCEPTS {
        for cmd in *on {
            match flags.get(&(cmd.to_string(), long.to_string())) {
                Some((_, false)) => {}
                _ => problems.push(format!("{cmd}: {what} should be shown as --{long}")),
            }
        }
    }
    for (cmd, old, new) in DEPRECATED {
        match (flags.get(&(cmd.to_string(), old.to_string())), flags.get(&(cmd.to_string(), new.to_string()))) {
            (Some((_, true)), Some((_, false))) => {}
            other => problems.push(format!("{cmd}: --{old} should be a hidden alias of the shown --{new}: {other:?}")),
        }
    }
    // One letter, one long flag, on every command; and one long flag, one letter.
    let mut by_short: BTreeMap<char, BTreeSet<&str>> = BTreeMap::new();
    let mut by_long: BTreeMap<&str, BTreeSet<Option<char>>> = BTreeMap::new();
    for ((_, long), (short, hidden)) in &flags {
        if !hidden {
            if let Some(s) = short {
                by_short.entry(*s).or_default().insert(long);
            }
            by_long.entry(long).or_default().insert(*short);
        }
    }
    for (s, longs) in &by_short {
        if longs.len() > 1 {
            problems.push(format!("-{s} stands for {longs:?}"));
        }
    }
    for (long, shorts) in &by_long {
        if shorts.len() > 1 {
            problems.push(format!("--{long} has the letters {shorts:?} on different commands"));
        }
    }
    assert!(problems.is_empty(), "naming problems:\n  {}", problems.join("\n  "));
}

#[test]
fn the_table_catches_a_second_spelling() {
    // The check above can fail: the old spellings, shown, are second names of table concepts.
    for (cmd, old, new) in DEPRECATED {
        let claimed = CONCEPTS.iter().any(|(_, l, _, on)| l == old && on.contains(cmd));
        assert!(!claimed, "{cmd} --{old} must not be accepted as a name of its own (the name is --{new})");
        assert!(CONCEPTS.iter().any(|(_, l, _, on)| l == new && on.contains(cmd)), "{cmd} --{new} in the table");
    }
}

#[test]
fn input_help_names_every_input_form() {
    let mut cli = app::Cli::command();
    cli.build();
    let mut seen = BTreeSet::new();
    for sub in cli.get_subcommands() {
        for arg in sub.get_arguments().filter(|a| a.is_positional() && a.get_id() == "inputs") {
            let help = arg.get_help().map(|h| h.to_string()).unwrap_or_default();
            assert!(help.contains("CH=PATH") && help.contains("CH:NAME=PATH"), "{}: INPUT help {help:?}", sub.get_name());
            seen.insert(sub.get_name().to_string());
        }
    }
    let want: BTreeSet<String> = ["inspect", "import", "scan", "sweep", "count", "clock-fit"].iter().map(|c| c.to_string()).collect();
    assert_eq!(seen, want, "the commands with INPUT arguments");
}

fn run(args: &[&str]) -> std::process::Output {
    let out = tagsieve().current_dir(root()).args(args).output().unwrap();
    assert!(out.status.success(), "{args:?}: {}", String::from_utf8_lossy(&out.stderr));
    out
}

const ARRAYS: [&str; 2] = ["1:larch_plus=fixtures/larch_plus.u64", "3:rowan_plus=fixtures/rowan_plus.u64"];

#[test]
fn a_deprecated_spelling_still_works_and_warns() {
    let scan = |flag: &str| {
        let mut a = vec!["--json", "-q", "scan", flag, "3000", "--bin-ps", "50", "--pairs", "1:3"];
        a.extend(ARRAYS);
        run(&a)
    };
    let (old, new) = (scan("--span-ps"), scan("--half-range-ps"));
    let warning = String::from_utf8_lossy(&old.stderr);
    assert!(warning.contains("--span-ps is deprecated") && warning.contains("--half-range-ps"), "{warning}");
    assert!(new.stderr.is_empty(), "{}", String::from_utf8_lossy(&new.stderr));
    // The command lines differ (provenance); the blocks do not.
    let (old, new): (serde_json::Value, serde_json::Value) = (serde_json::from_slice(&old.stdout).unwrap(), serde_json::from_slice(&new.stdout).unwrap());
    assert_eq!(common::doc_at(&old, "/blocks"), common::doc_at(&new, "/blocks"), "the same histogram under both spellings");
    let scan = common::doc_at(&new, "/blocks/block/scans/1-3");
    assert_eq!(scan["attrs"]["half_range_ps"], 3000, "{new}");
    assert_eq!(scan["columns"]["counts"]["data"].as_array().unwrap().len(), 120, "2·3000/50 bins");
}

#[test]
fn sweep_names_the_accidentals_agreement_without_delta() {
    let mut a = vec!["sweep", "--windows-ps", "500,1000", "--pairs", "1:3"];
    a.extend(ARRAYS);
    let text = String::from_utf8(run(&a).stdout).unwrap();
    let header = text.lines().find(|l| l.contains("window") && l.contains("coinc")).expect("a header line");
    // Δ is the arrival-time difference (README, "The coincidence rule").
    assert!(header.contains("agreement σ") && !header.contains('Δ'), "{header}");
}

#[test]
fn inspect_names_formats_as_the_manifest_does() {
    let names: Vec<String> = [tagsieve::manifest::InputFormat::Arrays, tagsieve::manifest::InputFormat::Container, tagsieve::manifest::InputFormat::Records]
        .iter()
        .map(|f| serde_json::to_value(f).unwrap().as_str().unwrap().to_string())
        .collect();
    let cases: [&[&str]; 3] = [
        &ARRAYS,
        &["fixtures/link_small.tsieve"],
        &["fixtures/records_be64.bin", "--layout", "rec=16,time=8:8:be,chan=0:1,tick_ps=1"],
    ];
    for (args, want) in cases.iter().zip(&names) {
        let mut a = vec!["--json", "-q", "inspect"];
        a.extend_from_slice(args);
        let v: serde_json::Value = serde_json::from_slice(&run(&a).stdout).unwrap();
        for input in v["inputs"].as_array().unwrap() {
            assert_eq!(input["format"].as_str(), Some(want.as_str()), "{args:?}");
        }
    }
}

#[test]
fn written_manifest_quotes_role_keys_alike_and_sorts_settings_naturally() {
    let d = tempfile::tempdir().unwrap();
    let dir = d.path().join("run");
    let angles = "0,10,20,30,40,50,60,70,80,90,100,110";
    run(&["-q", "simulate", "-o", dir.to_str().unwrap(), "--duration-s", "0.01", "--series", angles]);
    let text = std::fs::read_to_string(dir.join("run.toml")).unwrap();
    let roles: Vec<&str> = text.split("[roles]\n").nth(1).unwrap().lines().take_while(|l| !l.is_empty()).collect();
    assert_eq!(roles, ["\"alice+\" = 1", "\"alice-\" = 2", "\"bob+\" = 3", "\"bob-\" = 4"], "{text}");
    let bob: Vec<&str> = text
        .split("[settings.bob]\n")
        .nth(1)
        .unwrap()
        .lines()
        .take_while(|l| !l.is_empty())
        .map(|l| l.split(" = ").next().unwrap())
        .collect();
    // Natural order: digit runs by value (b2 before b10); common practice, no source.
    let want: Vec<String> = (0..12).map(|i| format!("b{i}")).collect();
    assert_eq!(bob, want, "{text}");
    let m = tagsieve::manifest::Manifest::load(&dir.join("run.toml")).unwrap();
    assert_eq!(m.settings.bob.len(), 12);
    assert_eq!(m.settings.bob["b10"], 100.0, "the manifest reads back");
}

#[test]
fn chsh_below_the_bound_says_so_and_its_plot_has_the_model_line() {
    let d = tempfile::tempdir().unwrap();
    let dir = d.path().join("lhv");
    // A local-hidden-variable source: |S| ≤ 2 (CHSH 1969), so no violation to report.
    run(&["-q", "simulate", "-o", dir.to_str().unwrap(), "--model", "lhv", "--duration-s", "0.2", "--seed", "4"]);
    let svg = d.path().join("chsh.svg");
    let out = run(&["chsh", dir.join("run.toml").to_str().unwrap(), "-w", "1000", "--plot", svg.to_str().unwrap()]);
    let text = String::from_utf8(out.stdout).unwrap();
    let s_lines: Vec<&str> = text.lines().filter(|l| l.trim_start().starts_with("S = ")).collect();
    assert_eq!(s_lines.len(), 8, "{text}");
    for l in &s_lines {
        assert!(l.contains("no violation") && !l.contains("beyond") && !l.contains("p ="), "{l}");
    }
    let plot = std::fs::read_to_string(&svg).unwrap();
    assert!(plot.contains("fitted to E") && plot.contains("Alice, Bob") && !plot.contains("analyzer A"), "model line and side names");
    assert!(plot.contains("no violation"), "the plot's S box says it too");
    let json = run(&["--json", "-q", "chsh", dir.join("run.toml").to_str().unwrap(), "-w", "1000"]);
    let v: serde_json::Value = serde_json::from_slice(&json.stdout).unwrap();
    // No variant beyond the local bound |S| ≤ 2 (CHSH 1969).
    for s in common::doc_rows(&v, "/chsh/s_values") {
        assert!(s["s"].as_f64().unwrap().abs() <= 2.0, "{s}");
    }
}

#[test]
fn readme_commands_use_the_one_names() {
    use clap::Parser;
    let text = std::fs::read_to_string(root().join("README.md")).unwrap();
    let section = text.split("## Using it").nth(1).expect("README has a 'Using it' section");
    let block = section.split("```").nth(1).expect("a code block of commands");
    let lines: Vec<&str> = block.lines().filter_map(|l| l.split(['#', '>']).next()).map(str::trim).filter(|l| l.starts_with("tagsieve ")).collect();
    assert!(lines.len() >= 8, "{lines:?}");
    for line in lines {
        let words: Vec<&str> = line.split_whitespace().collect();
        if let Err(e) = app::Cli::try_parse_from(&words) {
            panic!("README: `{line}` does not parse: {e}");
        }
        for (_, old, new) in DEPRECATED {
            assert!(!words.contains(&format!("--{old}").as_str()), "README: `{line}` uses --{old}; the name is --{new}");
        }
    }
}
