//! The scan job: delay histograms per pair over one block's inputs and, with a reference
//! channel, the delays proposed for every other channel (a delays file for the later jobs).

use super::inputs::{BlockInputs, DelaySources};
use super::pass::{declared_channels, run_pass, PassMode};
use super::{Context, Params};
use crate::engine::tables::BlockTables;
use crate::engine::{delays, scan, Delays, ScanConfig};
use crate::output::{layout, provenance::Provenance, AttrValue, Document};
use crate::{Channel, Error, Result};
use std::path::PathBuf;

/// Scan one block.
#[derive(Debug, Clone)]
pub struct ScanJob {
    pub ctx: Context,
    pub label: String,
    pub inputs: BlockInputs,
    pub pass: PassMode,
    pub pairs: Vec<(Channel, Channel)>,
    pub delays: DelaySources,
    /// Δ from −half_range_ps to +half_range_ps.
    pub half_range_ps: u64,
    pub bin_ps: u64,
    /// Propose every other channel's delay relative to this channel.
    pub reference: Option<Channel>,
    /// Where the proposal is to be written (the caller writes it with [`Delays::to_toml`]);
    /// named in the Document's `/proposed_delays`.
    pub delays_file: PathBuf,
    pub document: bool,
}

/// What a scan gives.
#[derive(Debug, Clone)]
pub struct ScanOutcome {
    pub block: BlockTables,
    pub config: ScanConfig,
    /// With a reference: the proposed delays (write them with [`Delays::to_toml`]).
    pub proposal: Option<Delays>,
    pub provenance: Option<Provenance>,
    pub document: Option<Document>,
}

impl Params for ScanConfig {
    fn params(&self) -> Vec<(&'static str, AttrValue)> {
        vec![("half_range_ps", AttrValue::U64(self.half_range_ps)), ("bin_ps", AttrValue::U64(self.bin_ps))]
    }
}

pub fn run(job: &ScanJob) -> Result<ScanOutcome> {
    let config = ScanConfig { pairs: job.pairs.clone(), delays: job.delays.resolve(None)?, half_range_ps: job.half_range_ps, bin_ps: job.bin_ps };
    let sources = job.inputs.open(job.ctx.quiet)?;
    if let (Some(r), Some(chans)) = (job.reference, declared_channels(&sources)) {
        check_reference(r, &chans)?;
    }
    let block = scan_block(&job.label, &sources, &config, job.inputs.mode(job.pass), job.ctx.quiet)?;
    let proposal = match job.reference {
        Some(r) => {
            let chans: Vec<Channel> = block.singles.iter().map(|s| s.channel).collect();
            check_reference(r, &chans)?;
            Some(propose(&block, r, &chans, &config.delays))
        }
        None => None,
    };
    let (provenance, mut document) = super::block_document(job.document, &job.ctx, "scan", &[&config], &sources, &block)?;
    if let (Some(doc), Some(d)) = (document.as_mut(), &proposal) {
        doc.root.groups.push(layout::proposal_group(d, &job.delays_file));
    }
    Ok(ScanOutcome { block, config, proposal, provenance, document })
}

/// Scan one block of opened inputs.
///
/// A scan looks for delays, so a channel its delays file lacks starts from 0 here (the
/// histogram's ±half-range is the search range); a delay flag for a channel no input has
/// is still refused.
pub fn scan_block(label: &str, sources: &[Box<dyn crate::read::TagSource>], cfg: &ScanConfig, mode: PassMode, quiet: bool) -> Result<BlockTables> {
    let out = run_pass("scan", label, sources, cfg, mode, false, quiet)?;
    Ok(out.block(label, &cfg.delays, |b, scans| b.scans = scans))
}

fn check_reference(r: Channel, channels: &[Channel]) -> Result<()> {
    if channels.contains(&r) {
        return Ok(());
    }
    let have: Vec<String> = channels.iter().map(|c| c.to_string()).collect();
    Err(Error::setting("reference", r, format!("no input provides channel {r}; expected one of {}", have.join(", "))))
}

/// The scan's proposal, plus the delays given as flags for channels it did not find
/// (moved into the proposal's frame, where the reference has delay 0).
pub fn propose(block: &BlockTables, r: Channel, channels: &[Channel], given: &Delays) -> Delays {
    let mut d = scan::propose_delays(&block.scans, r, channels);
    for (c, v) in &given.by_channel {
        if d.by_channel.contains_key(c) || given.obtained.get(c).map(String::as_str) != Some(delays::FROM_FLAG) {
            continue;
        }
        let shift = given.get(r);
        d.by_channel.insert(*c, v - shift);
        let how = if shift == 0 { "given with --delay; not found by the scan".to_string() } else { format!("given with --delay ({v} ps, less the reference's {shift} ps); not found by the scan") };
        d.obtained.insert(*c, how);
        d.not_found.remove(c);
    }
    d
}
