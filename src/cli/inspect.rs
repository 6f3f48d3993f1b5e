//! `tagsieve inspect`: arguments → an inspect job ([`tagsieve::jobs::inspect`], the lenient
//! one-pass check); its report → a table or JSON. Exit code 2 when any channel has
//! out-of-order steps (after printing the report); duplicates alone are not a problem.

use super::Global;
use serde_json::json;
use tagsieve::jobs::inputs::BlockInputs;
use tagsieve::jobs::inspect::{self, ChannelReport, InspectJob, InspectReport};
use tagsieve::units::{fmt_count, fmt_duration_ps, fmt_rate_hz};
use tagsieve::{Error, Result};

#[derive(clap::Args, Debug)]
pub struct Args {
    /// Inputs: CH=PATH or CH:NAME=PATH for a per-channel u64 array (ps), a container
    /// file, or an interleaved-record file (needs --layout).
    #[arg(required = true, value_name = "INPUT")]
    pub inputs: Vec<String>,
    /// Layout of interleaved-record inputs: a TOML file or a spec such as
    /// rec=16,skip=0,time=0:8:le,chan=8:2:le,tick_ps=1,wrap=32 (offsets and widths in bytes,
    /// tick in ps; default: none, so record files are refused).
    #[arg(long, value_name = "FILE|SPEC")]
    pub layout: Option<String>,
    #[command(flatten)]
    pub read: super::ReadArgs,
}

pub fn run(args: Args, g: &Global) -> Result<()> {
    let inputs = BlockInputs { inputs: args.inputs.clone(), layout: args.layout.clone(), read: args.read.read_options(), clock: None };
    let report = inspect::run(&InspectJob { ctx: super::context(g), inputs })?;
    if g.json {
        println!("{}", serde_json::to_string_pretty(&to_json(&report)).map_err(|e| Error::Usage(e.to_string()))?);
    } else {
        print_table(&report);
        report.notes.iter().for_each(|n| println!("note: {n}"));
    }
    match report.problems().first() {
        None => Ok(()),
        Some(first) => Err(Error::Usage(format!(
            "inspect found {} problem(s); first: {first}",
            report.problems().len()
        ))),
    }
}

/// Stable keys; times in ps and rates in Hz as plain numbers.
fn to_json(r: &InspectReport) -> serde_json::Value {
    let inputs: Vec<_> = r.inputs.iter().map(|f| json!({"path": f.path.display().to_string(), "format": f.format, "size_bytes": f.size_bytes})).collect();
    json!({
        "inputs": inputs,
        "channels": r.channels,
        "totals": r.totals,
        "problems": r.problems(),
        "notes": r.notes,
        "ok": r.problems().is_empty(),
    })
}

fn print_table(r: &InspectReport) {
    for f in &r.inputs {
        println!("input {} ({}, {} bytes)", f.path.display(), f.format, fmt_count(f.size_bytes));
    }
    println!(
        "{:>8} {:<14} {:>13} {:>12} {:>12} {:>12} {:>12} {:>10} {:>9} {:>9}",
        "channel", "name", "events", "first", "last", "span", "rate", "min gap", "backward", "dup"
    );
    for c in &r.channels {
        print_row(c);
    }
    let t = &r.totals;
    println!(
        "{:>8} {:<14} {:>13} {:>12} {:>12} {:>12} {:>12} {:>10} {:>9} {:>9}",
        "total",
        format!("{} ch", t.channels),
        fmt_count(t.events),
        fmt_duration_ps(t.min_ps as f64),
        fmt_duration_ps(t.max_ps as f64),
        fmt_duration_ps(t.span_ps as f64),
        t.rate_hz.map_or("-".into(), fmt_rate_hz),
        "",
        t.out_of_order_steps,
        t.duplicate_timestamps
    );
}

fn print_row(c: &ChannelReport) {
    println!(
        "{:>8} {:<14} {:>13} {:>12} {:>12} {:>12} {:>12} {:>10} {:>9} {:>9}",
        c.channel,
        if c.name.is_empty() { "-" } else { &c.name },
        fmt_count(c.events),
        fmt_duration_ps(c.first_ps as f64),
        fmt_duration_ps(c.last_ps as f64),
        fmt_duration_ps(c.span_ps as f64),
        c.rate_hz.map_or("-".into(), fmt_rate_hz),
        c.min_gap_ps.map_or("-".into(), |g| fmt_duration_ps(g as f64)),
        c.out_of_order_steps,
        c.duplicate_timestamps
    );
}
