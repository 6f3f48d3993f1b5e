//! A whole simulated run on disk: every block's tag file(s) in the chosen format, plus the
//! run manifest `run.toml` listing exactly what was written (used by `tagsieve simulate`).

use super::clocks::{restamp_second_site, SiteClock};
use super::{block_seed, simulate_block_reporting, BlockPlan, DetectorModel, SourceModel};
use crate::manifest::{BlockSpec, ChannelSpec, InputFormat, Manifest, Role, Roles, Settings, Setup, MANIFEST_VERSION};
use crate::sys::progress::Progress;
use crate::read::{channel_array, container, layout::RecordLayout, records};
use crate::{Channel, ChannelTags, Error, Result};
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

/// Name of the manifest written beside the blocks.
pub const MANIFEST_FILE: &str = "run.toml";

/// Record layout of simulated `records` files: 16-byte records, u64 ps time at byte 0,
/// u32 channel at byte 8, little-endian, 1 ps ticks.
pub const RECORDS_LAYOUT_SPEC: &str = "rec=16,time=0:8:le,chan=8:4:le,tick_ps=1";

/// Everything a simulated run needs.
#[derive(Debug, Clone)]
pub struct RunConfig {
    pub source: SourceModel,
    pub detectors: Vec<DetectorModel>,
    pub setup: Setup,
    /// Setting labels → angles (degrees), per side, as the manifest will list them.
    pub settings: Settings,
    pub blocks: Vec<BlockPlan>,
    /// Length of each block (s).
    pub duration_s: f64,
    pub seed: u64,
    pub format: InputFormat,
    /// Coincidence window to record in the manifest (ps); `None` leaves it to a sweep.
    pub window_ps: Option<u64>,
    /// Leave the true cable delays out of the manifest (so `scan` has to find them).
    pub omit_delays: bool,
    /// Free text for the manifest's `description`.
    pub description: String,
}

/// What one block put on disk.
#[derive(Debug, Clone, serde::Serialize)]
pub struct BlockSummary {
    pub name: String,
    pub alpha_deg: f64,
    pub beta_deg: f64,
    pub files: Vec<PathBuf>,
    /// Tags written per channel.
    pub tags_per_channel: BTreeMap<Channel, u64>,
}

/// What the run put on disk.
#[derive(Debug, Clone, serde::Serialize)]
pub struct RunSummary {
    pub manifest: PathBuf,
    pub blocks: Vec<BlockSummary>,
    pub total_tags: u64,
}

impl RunConfig {
    fn duration_ps(&self) -> Result<u64> {
        let ps = self.duration_s * 1e12;
        if !(1.0..1.8e19).contains(&ps) {
            return Err(Error::Usage(format!("simulate: duration_s = {}, expected a positive number of seconds", self.duration_s)));
        }
        Ok(ps.round() as u64)
    }

    /// File names (relative to the output directory) of one block, and the manifest's input strings.
    fn block_files(&self, plan: &BlockPlan) -> (Vec<String>, Vec<String>) {
        match self.format {
            InputFormat::Container => {
                let f = format!("{}{}", plan.name, container::EXTENSION);
                (vec![f.clone()], vec![f])
            }
            InputFormat::Records => {
                let f = format!("{}.records", plan.name);
                (vec![f.clone()], vec![f])
            }
            InputFormat::Arrays => {
                // channel order, the order simulate_block returns the tags in
                let mut channels: Vec<Channel> = self.detectors.iter().map(|d| d.channel).collect();
                channels.sort_unstable();
                channels
                    .into_iter()
                    .map(|ch| {
                        let f = format!("{}_ch{ch}.u64", plan.name);
                        (f.clone(), format!("{ch}={f}"))
                    })
                    .unzip()
            }
        }
    }

    /// The manifest describing this run's files.
    pub fn manifest(&self, out_dir: &Path) -> Manifest {
        let mut roles = Roles::default();
        for d in &self.detectors {
            roles.set(Role { side: d.side, port: d.port }, Some(d.channel));
        }
        let channels = self
            .detectors
            .iter()
            .map(|d| ChannelSpec {
                number: d.channel,
                name: d.name.clone(),
                delay_ps: (!self.omit_delays).then_some(d.delay_ps as i64),
            })
            .collect();
        let blocks = self
            .blocks
            .iter()
            .map(|p| BlockSpec {
                name: p.name.clone(),
                alice: p.alice.clone(),
                bob: p.bob.clone(),
                outcomes: p.outcomes,
                format: self.format,
                inputs: self.block_files(p).1,
                layout: (self.format == InputFormat::Records).then(|| RECORDS_LAYOUT_SPEC.to_string()),
                live_time_s: Some(self.duration_s),
            })
            .collect();
        Manifest {
            manifest_version: MANIFEST_VERSION,
            description: Some(self.description.clone()),
            setup: self.setup,
            window_ps: self.window_ps,
            delays_file: None,
            roles,
            settings: self.settings.clone(),
            channels,
            blocks,
            base_dir: out_dir.to_path_buf(),
        }
    }
}

/// Simulate every block of `cfg` and write it into `out_dir` (created if missing), then the
/// manifest. Refuses to replace any existing file unless `force`; checks all names first.
pub fn write_run(cfg: &RunConfig, out_dir: &Path, force: bool, progress: &Progress) -> Result<RunSummary> {
    write_run_two_site(cfg, None, out_dir, force, progress)
}

/// The second site of a two-site run: its channels and its recorder's clock.
#[derive(Debug, Clone)]
pub struct SecondSite {
    pub channels: Vec<Channel>,
    pub clock: SiteClock,
}

/// Name of the true clock map written beside block `block` of a two-site run.
pub fn true_map_file(block: &str) -> String {
    format!("{block}.clock-true.toml")
}

/// [`write_run`], with the channels of `second` (if given) re-stamped on the second
/// recorder's clock, a fresh clock realisation per block (seed from the clock's seed and
/// the block index), and each block's true map written as `<block>.clock-true.toml`.
pub fn write_run_two_site(cfg: &RunConfig, second: Option<&SecondSite>, out_dir: &Path, force: bool, progress: &Progress) -> Result<RunSummary> {
    let duration_ps = cfg.duration_ps()?;
    let manifest = cfg.manifest(out_dir);
    let manifest_path = out_dir.join(MANIFEST_FILE);
    check_outputs(cfg, out_dir, &manifest_path, force)?;
    if let Some(s) = second {
        if !force {
            if let Some(p) = cfg.blocks.iter().map(|b| out_dir.join(true_map_file(&b.name))).find(|p| p.exists()) {
                return Err(Error::OutputExists(p));
            }
        }
        if let Some(ch) = s.channels.iter().find(|ch| !cfg.detectors.iter().any(|d| d.channel == **ch)) {
            return Err(Error::Usage(format!("simulate: second-site channel {ch} is not a simulated detector")));
        }
    }
    // All files appear together at the end: an interrupted or failed run leaves none.
    let batch = crate::sys::atomic::OutputBatch::begin();
    let layout = RecordLayout::from_spec(RECORDS_LAYOUT_SPEC)?;
    let mut blocks = Vec::with_capacity(cfg.blocks.len());
    for (k, plan) in cfg.blocks.iter().enumerate() {
        let on_ms = |ms: u64| progress.inc(ms);
        progress.set_message(format!("block {}", plan.name));
        let mut tags =
            simulate_block_reporting(&cfg.source, &cfg.detectors, plan.setting, duration_ps, block_seed(cfg.seed, k as u64), &on_ms)?;
        let files: Vec<PathBuf> = cfg.block_files(plan).0.iter().map(|f| out_dir.join(f)).collect();
        if let Some(s) = second {
            let clock = SiteClock { seed: crate::simulate::rng::mix_seed(&[s.clock.seed, k as u64]), ..s.clock.clone() };
            let map = restamp_second_site(&mut tags, &s.channels, &clock, duration_ps)?;
            map.save(&out_dir.join(true_map_file(&plan.name)), force)?;
        }
        write_block(cfg.format, &files, &tags, &layout)?;
        blocks.push(BlockSummary {
            name: plan.name.clone(),
            alpha_deg: plan.setting.alpha_deg,
            beta_deg: plan.setting.beta_deg,
            files,
            tags_per_channel: tags.iter().map(|c| (c.channel, c.len() as u64)).collect(),
        });
    }
    manifest.save(&manifest_path, force)?;
    batch.commit()?;
    progress.finish();
    let total_tags = blocks.iter().flat_map(|b| b.tags_per_channel.values()).sum();
    Ok(RunSummary { manifest: manifest_path, blocks, total_tags })
}

fn check_outputs(cfg: &RunConfig, out_dir: &Path, manifest_path: &Path, force: bool) -> Result<()> {
    std::fs::create_dir_all(out_dir).map_err(|e| Error::io(out_dir, e))?;
    if force {
        return Ok(());
    }
    let mut all = vec![manifest_path.to_path_buf()];
    all.extend(cfg.blocks.iter().flat_map(|p| cfg.block_files(p).0).map(|f| out_dir.join(f)));
    match all.into_iter().find(|p| p.exists()) {
        Some(p) => Err(Error::OutputExists(p)),
        None => Ok(()),
    }
}

fn write_block(format: InputFormat, files: &[PathBuf], tags: &[ChannelTags<'static>], layout: &RecordLayout) -> Result<()> {
    match format {
        InputFormat::Container => container::write_container(&files[0], tags, 1.0, "tagsieve simulate"),
        InputFormat::Records => records::write_records(&files[0], layout, tags),
        InputFormat::Arrays => files.iter().zip(tags).try_for_each(|(f, c)| channel_array::write_channel_array(f, &c.times_ps)),
    }
}
