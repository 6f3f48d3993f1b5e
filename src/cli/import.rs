//! `tagsieve import`: arguments → an import job ([`tagsieve::jobs::import`]: per-channel
//! arrays or interleaved records → one .tsieve container); a line on stderr when done.

use super::Global;
use tagsieve::jobs::import::{self, ImportJob};
use tagsieve::jobs::inputs::BlockInputs;
use tagsieve::units::fmt_count;
use tagsieve::Result;
use std::path::PathBuf;

#[derive(clap::Args, Debug)]
pub struct Args {
    /// Inputs: CH=PATH or CH:NAME=PATH for a per-channel u64 array (ps), or an
    /// interleaved-record file (needs --layout).
    #[arg(required = true, value_name = "INPUT")]
    pub inputs: Vec<String>,
    /// Layout of interleaved-record inputs: a TOML file or a spec such as
    /// rec=16,skip=0,time=0:8:le,chan=8:2:le,tick_ps=1,wrap=32 (offsets and widths in bytes,
    /// tick in ps; default: none).
    #[arg(long, value_name = "FILE|SPEC")]
    pub layout: Option<String>,
    /// Output container file (convention: .tsieve extension).
    #[arg(long, short, value_name = "OUT")]
    pub output: PathBuf,
    /// Replace OUT if it exists (default: refuse).
    #[arg(long)]
    pub force: bool,
    #[command(flatten)]
    pub read: super::ReadArgs,
}

pub fn run(args: Args, g: &Global) -> Result<()> {
    let inputs = BlockInputs { inputs: args.inputs.clone(), layout: args.layout.clone(), read: args.read.read_options(), clock: None };
    let summary = import::run(&ImportJob { ctx: super::context(g), inputs, output: args.output.clone(), force: args.force })?;
    if g.json {
        // Under the Document's conventions (docs/hdf5-layout.md): counts as plain numbers,
        // one row object per channel.
        let channels: Vec<serde_json::Value> = summary.channels.iter().map(|&(channel, events)| serde_json::json!({ "channel": channel, "events": events })).collect();
        let events: u64 = summary.channels.iter().map(|c| c.1).sum();
        super::common::print_json(&serde_json::json!({ "container": summary.path, "channels": channels, "events": events }));
    }
    if !g.quiet {
        let events: u64 = summary.channels.iter().map(|c| c.1).sum();
        eprintln!("wrote {} ({} channels, {} events)", summary.path.display(), summary.channels.len(), fmt_count(events));
    }
    Ok(())
}
