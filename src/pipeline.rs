//! The whole job in library form: open a block's inputs and pick the pass (zero-copy
//! whole-file or bounded-memory streaming), count every block of a run manifest, and turn
//! the tables into the inputs of the CHSH, visibility and three-setting analyses.

use crate::analysis::chsh::SettingCounts;
use crate::analysis::visibility::AnglePoint;
use crate::engine::tables::{BlockTables, Estimate};
use crate::engine::{self, count, scan, sweep, CountConfig, Criterion, Delays, ScanConfig};
use crate::manifest::{Manifest, Port, Role, Setup};
use crate::sys::progress::Progress;
use crate::read::{self, layout::RecordLayout, ReadOptions, TagSource};
use crate::{Channel, Error, Result};

/// Events per chunk on the streaming pass (32 MiB of u64 per chunk at most).
pub const STREAM_CHUNK_EVENTS: usize = 4 << 20;

/// Which pass to use over a block's inputs.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum PassMode {
    /// Streaming for a single interleaved-record file (demultiplexing it whole would need
    /// 8 bytes of memory per event), whole-file otherwise (mapped, zero copy).
    #[default]
    Auto,
    /// Always whole-file.
    Whole,
    /// Always streaming (single input file only).
    Stream,
}

impl PassMode {
    pub fn parse(s: &str) -> Result<Self> {
        match s {
            "auto" => Ok(PassMode::Auto),
            "whole" => Ok(PassMode::Whole),
            "stream" => Ok(PassMode::Stream),
            _ => Err(Error::Usage(format!("--pass {s}: expected auto, whole or stream"))),
        }
    }

    fn streams(self, sources: &[Box<dyn TagSource>]) -> Result<bool> {
        match self {
            PassMode::Whole => Ok(false),
            PassMode::Auto => Ok(sources.len() == 1 && sources[0].file().format == "records"),
            PassMode::Stream if sources.len() == 1 => Ok(true),
            PassMode::Stream => Err(Error::Usage(format!(
                "--pass stream reads one input file in time order; this block has {} files (use a container or records file)",
                sources.len()
            ))),
        }
    }
}

/// Open a block's inputs given as command-line strings.
pub fn open_block(inputs: &[String], layout: Option<&str>, opts: ReadOptions) -> Result<Vec<Box<dyn TagSource>>> {
    let layout = layout.map(RecordLayout::from_arg).transpose()?;
    read::open_inputs(inputs, layout.as_ref(), opts)
}

fn total_bytes(sources: &[Box<dyn TagSource>]) -> u64 {
    sources.iter().map(|s| s.file().size_bytes).sum()
}

/// Chunks of the single source, feeding a progress bar (bytes done, events/s, ETA).
fn chunks_with_progress<'a>(
    src: &'a dyn TagSource,
    progress: &'a Progress,
) -> Result<impl Iterator<Item = Result<Vec<crate::ChannelTags<'static>>>> + 'a> {
    let it = src.chunks(STREAM_CHUNK_EVENTS)?;
    // Bytes per event of this file, so the bar runs over its real size.
    let bytes_per_event = src.file().size_bytes as f64 / src.event_count().max(1) as f64;
    Ok(it.inspect(move |c| {
        if let Ok(c) = c {
            let events: u64 = c.iter().map(|t| t.len() as u64).sum();
            progress.inc_events((events as f64 * bytes_per_event) as u64, events);
        }
    }))
}

/// Channels a block's inputs declare without reading the data; `None` when a record
/// file's channels appear only as it is read.
pub fn declared_channels(sources: &[Box<dyn TagSource>]) -> Option<Vec<Channel>> {
    let mut all = Vec::new();
    for s in sources {
        all.extend(s.declared_channels()?);
    }
    all.sort_unstable();
    Some(all)
}

/// Which delays a pass may use: a `--delay` for a channel no input has is refused, and,
/// with `require`, once a delays file is involved every channel of the pairs (every
/// channel when `pairs` is empty) must have a delay ([`Delays::require`]).
/// Checked before the pass where the inputs declare their channels, else after it.
struct DelayCheck<'a> {
    delays: &'a Delays,
    pairs: &'a [(Channel, Channel)],
    require: bool,
    done: bool,
}

impl<'a> DelayCheck<'a> {
    fn before(sources: &[Box<dyn TagSource>], delays: &'a Delays, pairs: &'a [(Channel, Channel)], require: bool) -> Result<Self> {
        let mut c = DelayCheck { delays, pairs, require, done: false };
        if let Some(channels) = declared_channels(sources) {
            c.check(&channels)?;
        }
        Ok(c)
    }

    fn after(self, block: &BlockTables) -> Result<()> {
        if self.done {
            return Ok(());
        }
        let channels: Vec<Channel> = block.singles.iter().map(|s| s.channel).collect();
        let mut c = self;
        c.check(&channels)
    }

    fn check(&mut self, channels: &[Channel]) -> Result<()> {
        self.done = true;
        self.delays.check_given(channels)?;
        if !self.require {
            return Ok(());
        }
        if self.pairs.is_empty() {
            self.delays.require(channels.iter().copied())
        } else {
            self.delays.require(self.pairs.iter().flat_map(|&(a, b)| [a, b]))
        }
    }
}

/// Count one block: coincidences and accidentals at the configured window.
pub fn count_sources(label: &str, sources: &[Box<dyn TagSource>], cfg: &CountConfig, mode: PassMode, quiet: bool) -> Result<BlockTables> {
    let check = DelayCheck::before(sources, &cfg.delays, &cfg.pairs, true)?;
    let progress = Progress::bytes("count", total_bytes(sources), quiet);
    let out = if mode.streams(sources)? {
        read::locate_disorder_streamed(count::count_stream(label, chunks_with_progress(sources[0].as_ref(), &progress)?, cfg), sources[0].as_ref())
    } else {
        let tags = read::all_channels_order_deferred(sources)?;
        read::locate_disorder(engine::count_block(label, &tags, cfg), sources)
    };
    progress.finish();
    check_unchanged(sources)?;
    let block = out?;
    check.after(&block)?;
    Ok(block)
}

/// Window sweep of one block.
#[allow(clippy::too_many_arguments)] // each is one independent choice of the sweep; a struct would only rename them
pub fn sweep_sources(
    label: &str,
    sources: &[Box<dyn TagSource>],
    cfg: &CountConfig,
    windows_ps: &[u64],
    offpeak: &sweep::OffPeak,
    criterion: Criterion,
    mode: PassMode,
    quiet: bool,
) -> Result<BlockTables> {
    let check = DelayCheck::before(sources, &cfg.delays, &cfg.pairs, true)?;
    let progress = Progress::bytes("sweep", total_bytes(sources), quiet);
    let block = if mode.streams(sources)? {
        let r = sweep::sweep_stream(chunks_with_progress(sources[0].as_ref(), &progress)?, cfg, windows_ps, offpeak, criterion);
        let (span, channels, sweeps) = read::locate_disorder_streamed(r, sources[0].as_ref())?;
        streamed_block(label, span, &channels, &cfg.delays, |b| b.sweeps = sweeps)
    } else {
        let tags = read::all_channels_order_deferred(sources)?;
        let sweeps = read::locate_disorder(engine::sweep_block(&tags, cfg, windows_ps, offpeak, criterion), sources)?;
        summary_block(label, &tags, &cfg.delays, |b| b.sweeps = sweeps)
    };
    progress.finish();
    check_unchanged(sources)?;
    check.after(&block)?;
    Ok(block)
}

/// Delay scan of one block.
///
/// A scan looks for delays, so a channel its delays file lacks starts from 0 here (the
/// histogram's ±half-range is the search range); a `--delay` for a channel no input has is
/// still refused.
pub fn scan_sources(label: &str, sources: &[Box<dyn TagSource>], cfg: &ScanConfig, mode: PassMode, quiet: bool) -> Result<BlockTables> {
    let check = DelayCheck::before(sources, &cfg.delays, &cfg.pairs, false)?;
    let progress = Progress::bytes("scan", total_bytes(sources), quiet);
    let block = if mode.streams(sources)? {
        let r = scan::scan_stream(chunks_with_progress(sources[0].as_ref(), &progress)?, cfg);
        let (span, channels, scans) = read::locate_disorder_streamed(r, sources[0].as_ref())?;
        streamed_block(label, span, &channels, &cfg.delays, |b| b.scans = scans)
    } else {
        let tags = read::all_channels_order_deferred(sources)?;
        let scans = read::locate_disorder(engine::scan_block(&tags, cfg), sources)?;
        summary_block(label, &tags, &cfg.delays, |b| b.scans = scans)
    };
    progress.finish();
    check_unchanged(sources)?;
    check.after(&block)?;
    Ok(block)
}

/// Span, singles and delays of a streamed block, plus what `fill` adds.
fn streamed_block(
    label: &str,
    span: crate::engine::tables::BlockSpan,
    channels: &[crate::engine::stream::ChannelSummary],
    delays: &Delays,
    fill: impl FnOnce(&mut BlockTables),
) -> BlockTables {
    let mut b = BlockTables {
        label: label.into(),
        span: Some(span),
        singles: count::singles_rows(channels, span),
        delays_ps: channels.iter().map(|c| (c.channel, delays.get(c.channel))).collect(),
        ..Default::default()
    };
    fill(&mut b);
    b
}

fn summary_block(label: &str, tags: &[crate::ChannelTags<'_>], delays: &Delays, fill: impl FnOnce(&mut BlockTables)) -> BlockTables {
    let span = count::block_span(tags);
    let mut b = BlockTables {
        label: label.into(),
        span,
        singles: span.map(|s| count::singles(tags, s)).unwrap_or_default(),
        delays_ps: count::delays_used(tags, delays),
        ..Default::default()
    };
    fill(&mut b);
    b
}

/// Every input must still be the size it was when opened.
pub fn check_unchanged(sources: &[Box<dyn TagSource>]) -> Result<()> {
    sources.iter().try_for_each(|s| s.check_unchanged())
}

/// Delays for a run: the manifest's per-channel `delay_ps`, then its delays file, then
/// `overrides` (a delays file and flags from the command line; later wins).
pub fn manifest_delays(m: &Manifest, overrides: &Delays) -> Result<Delays> {
    let mut d = Delays::default();
    for (c, v) in m.channel_delays_ps() {
        d.by_channel.insert(c, v);
        d.obtained.insert(c, "manifest delay_ps".into());
    }
    if let Some(p) = m.delays_file_path() {
        d.overlay(&Delays::load(&p)?);
    }
    d.overlay(overrides);
    Ok(d)
}

/// Channel pairs a run's CHSH needs: (A±, B±) for four detectors, (A+, B+) for one per side,
/// in the order ++, +−, −+, −−.
pub fn role_pairs(m: &Manifest) -> Result<Vec<(Channel, Channel)>> {
    let ch = |r: Role| m.channel_of(r).ok_or_else(|| Error::Usage(format!("manifest: no channel for role {r:?}")));
    Ok(match m.setup {
        Setup::FourDetectors => vec![
            (ch(Role::ALICE_PLUS)?, ch(Role::BOB_PLUS)?),
            (ch(Role::ALICE_PLUS)?, ch(Role::BOB_MINUS)?),
            (ch(Role::ALICE_MINUS)?, ch(Role::BOB_PLUS)?),
            (ch(Role::ALICE_MINUS)?, ch(Role::BOB_MINUS)?),
        ],
        Setup::OnePerSide => vec![(ch(Role::ALICE_PLUS)?, ch(Role::BOB_PLUS)?)],
    })
}

/// Count every block of a run at one window. `base.pairs` is replaced by the role pairs.
pub fn count_run(m: &Manifest, base: &CountConfig, opts: ReadOptions, mode: PassMode, quiet: bool) -> Result<(Vec<BlockTables>, Vec<std::path::PathBuf>)> {
    let cfg = CountConfig { pairs: role_pairs(m)?, ..base.clone() };
    let mut blocks = Vec::with_capacity(m.blocks.len());
    let mut files = Vec::new();
    for b in &m.blocks {
        let sources = open_block(&m.block_inputs(b), m.block_layout(b).as_deref(), opts)?;
        files.extend(sources.iter().map(|s| s.file().path));
        blocks.push(count_sources(&b.name, &sources, &cfg, mode, quiet)?);
    }
    Ok((blocks, files))
}

fn row_of(block: &BlockTables, pair: (Channel, Channel)) -> Result<&engine::tables::CoincidenceRow> {
    block
        .coincidences
        .iter()
        .find(|r| (r.a, r.b) == pair)
        .ok_or_else(|| Error::Usage(format!("block {}: no coincidences for pair {}:{}", block.label, pair.0, pair.1)))
}

/// CHSH inputs, one per setting pair, from counted blocks (same order as `m.blocks`).
pub fn setting_counts(m: &Manifest, blocks: &[BlockTables]) -> Result<Vec<SettingCounts>> {
    let pairs = role_pairs(m)?;
    let mut out = Vec::new();
    for sp in m.setting_pairs() {
        let mut counts = [0u64; 4];
        let mut acc = [Estimate { value: 0.0, sigma: 0.0 }; 4];
        let mut live: Option<[f64; 4]> = None;
        match m.setup {
            Setup::FourDetectors => {
                let [i] = sp.blocks[..] else {
                    return Err(Error::Usage(format!("manifest: setting pair ({},{}) needs exactly one block in a four-detector set-up", sp.alice, sp.bob)));
                };
                for (k, &p) in pairs.iter().enumerate() {
                    let r = row_of(&blocks[i], p)?;
                    counts[k] = r.coincidences;
                    acc[k] = r.acc_analytic;
                }
            }
            Setup::OnePerSide => {
                let mut l = [0.0f64; 4];
                for &i in &sp.blocks {
                    let spec = &m.blocks[i];
                    let o = spec.outcomes.ok_or_else(|| Error::Usage(format!("manifest: block {} has no outcomes", spec.name)))?;
                    let k = match (o.alice, o.bob) {
                        (Port::Plus, Port::Plus) => 0,
                        (Port::Plus, Port::Minus) => 1,
                        (Port::Minus, Port::Plus) => 2,
                        (Port::Minus, Port::Minus) => 3,
                    };
                    let r = row_of(&blocks[i], pairs[0])?;
                    counts[k] = r.coincidences;
                    acc[k] = r.acc_analytic;
                    l[k] = spec.live_time_s.unwrap_or_else(|| blocks[i].span.map(|s| crate::units::ps_to_s(s.duration_ps())).unwrap_or(0.0));
                }
                live = Some(l);
            }
        }
        out.push(SettingCounts {
            label_a: sp.alice.clone(),
            label_b: sp.bob.clone(),
            angle_a_deg: sp.alpha_deg,
            angle_b_deg: sp.beta_deg,
            counts,
            accidentals: Some(acc),
            live_time_s: live,
        });
    }
    Ok(out)
}

/// Visibility series: for each Alice setting with ≥ 3 distinct Bob angles, the raw
/// (A+, B+) coincidences against Bob's analyzer angle β (the fit models the background).
pub fn visibility_series(m: &Manifest, blocks: &[BlockTables]) -> Result<Vec<(String, Vec<AnglePoint>)>> {
    let pair = role_pairs(m)?[0];
    let mut by_alice: std::collections::BTreeMap<String, Vec<AnglePoint>> = Default::default();
    for (spec, block) in m.blocks.iter().zip(blocks) {
        if spec.outcomes.is_some_and(|o| o.alice == Port::Minus) {
            continue;
        }
        let Some((_, beta)) = m.block_angles_deg(spec) else { continue };
        let r = row_of(block, pair)?;
        by_alice.entry(spec.alice.clone()).or_default().push(AnglePoint { angle_deg: beta, counts: r.coincidences });
    }
    Ok(by_alice
        .into_iter()
        .filter(|(_, pts)| {
            let mut a: Vec<i64> = pts.iter().map(|p| (p.angle_deg * 1e6).round() as i64).collect();
            a.sort_unstable();
            a.dedup();
            a.len() >= 3
        })
        .collect())
}

/// CHSH on the standard setting pairs (a,b), (a,b'), (a',b), (a',b') when all four are
/// present; `None` when the run has no CHSH settings (e.g. a visibility series).
pub fn chsh_report(settings: &[SettingCounts]) -> Option<Result<crate::analysis::chsh::ChshReport>> {
    let chosen: Vec<SettingCounts> = settings
        .iter()
        .filter(|s| crate::analysis::chsh::PAIR_ORDER.iter().any(|(a, b)| s.label_a == *a && s.label_b == *b))
        .cloned()
        .collect();
    (chosen.len() == 4).then(|| crate::analysis::chsh::evaluate(&chosen))
}

/// The three-setting form for the first angle triple (x, y, z) whose blocks (x,y), (x,z)
/// and (y,z) all exist, trying Alice angles for x and y and Bob angles for y and z.
pub fn bell3_search(
    settings: &[SettingCounts],
    convention: crate::analysis::bell3::Convention,
) -> Option<([f64; 3], crate::analysis::bell3::Bell3Result)> {
    let mut alice: Vec<f64> = settings.iter().map(|s| s.angle_a_deg).collect();
    let mut bob: Vec<f64> = settings.iter().map(|s| s.angle_b_deg).collect();
    for v in [&mut alice, &mut bob] {
        v.sort_by(f64::total_cmp);
        v.dedup();
    }
    for &x in &alice {
        for &y in alice.iter().filter(|&&y| y != x) {
            for &z in bob.iter().filter(|&&z| z != y && z != x) {
                if let Ok(r) = crate::analysis::bell3::evaluate_blocks(settings, [x, y, z], convention, false) {
                    return Some(([x, y, z], r));
                }
            }
        }
    }
    None
}

/// Clock fit of one block's inputs: split the channels of `sources` into the two sites (`second_site` lists the
/// second's; all others are the first's), subtract nothing yet but carry each channel's
/// delay (0 where none is given), and fit.
pub fn fit_sources(
    sources: &[Box<dyn TagSource>],
    second_site: &[u32],
    delays: &Delays,
    cfg: &crate::analysis::clock_fit::FitConfig,
) -> Result<(crate::tags::clock::ClockMap, crate::analysis::clock_fit::CoarseResult)> {
    let channels = read::all_channels(sources)?;
    if let Some(ch) = second_site.iter().find(|ch| !channels.iter().any(|c| c.channel == **ch)) {
        let known: Vec<String> = channels.iter().map(|c| c.channel.to_string()).collect();
        return Err(Error::Usage(format!("clock fit: second-site channel {ch} is not in the inputs (channels: {})", known.join(", "))));
    }
    let delay = |ch: u32| delays.by_channel.get(&ch).copied().unwrap_or(0);
    let part = |second: bool| {
        let v: Vec<(&[u64], i64)> = channels
            .iter()
            .filter(|c| second_site.contains(&c.channel) == second)
            .map(|c| (c.times_ps.as_ref(), delay(c.channel)))
            .collect();
        crate::analysis::clock_fit::SiteTags::merge(&v)
    };
    let (first, second) = (part(false), part(true));
    crate::analysis::clock_fit::fit_clock(&first, &second, second_site.to_vec(), cfg)
}
