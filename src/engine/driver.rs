//! The one driver of a block pass. Count, scan and sweep each supply only a [`BlockPass`]:
//! the per-pair task and the assembly of the pair results into tables. The driver runs the
//! task over whole-file tags (with the deferred order check) or over chunks in time order.

use super::count::{block_span, resolve_pairs, singles_rows, PairOutcome};
use super::delays::Delays;
use super::parallel::{self, Disorder, Unchecked};
use super::rule;
use super::stream::{ChannelSummary, PairTask, Streamer};
use super::tables::{BlockSpan, BlockTables};
use super::accidentals;
use crate::{Channel, ChannelTags, Error, Result};

/// What one kind of pass contributes: its checked task, its settings and its assembly.
pub trait BlockPass {
    /// What the pass hands back besides the block's span and channel summaries.
    type Tables;
    /// Check the settings and give the task every pair runs.
    fn task(&self) -> Result<PairTask>;
    /// Channel pairs (A, B); empty = every pair of the channels present, A < B.
    fn pairs(&self) -> &[(Channel, Channel)];
    fn delays(&self) -> &Delays;
    /// Slice length of the per-channel counts (analytic accidentals), ps; `None`: the pass
    /// needs no slices (one slice over the block).
    fn slice_ps(&self) -> Option<u64>;
    /// Whether a block whose every channel is empty is refused (else the pass runs on it).
    fn needs_events(&self) -> bool {
        true
    }
    /// Turn the pair results (in [`BlockPass::pairs`] order, or A < B) into tables.
    fn assemble(&self, span: Option<BlockSpan>, channels: &[ChannelSummary], results: &[PairOutcome]) -> Self::Tables;
}

/// A pass's result: the block's span (`None` when every channel is empty), its channel
/// summaries sorted by channel, and the tables.
#[derive(Debug, Clone)]
pub struct PassOutput<T> {
    pub span: Option<BlockSpan>,
    pub channels: Vec<ChannelSummary>,
    pub tables: T,
}

impl<T> PassOutput<T> {
    /// The block's tables: span, singles and delays used, plus what `fill` adds from the
    /// pass's own tables.
    pub fn block(self, label: &str, delays: &Delays, fill: impl FnOnce(&mut BlockTables, T)) -> BlockTables {
        let mut b = BlockTables {
            label: label.into(),
            span: self.span,
            singles: self.span.map(|s| singles_rows(&self.channels, s)).unwrap_or_default(),
            delays_ps: self.channels.iter().map(|c| (c.channel, delays.get(c.channel))).collect(),
            ..Default::default()
        };
        fill(&mut b, self.tables);
        b
    }
}

fn empty_block(label: &str) -> Error {
    Error::Usage(format!("block {label}: every channel is empty"))
}

/// Run `pass` over whole-file tags. Channels whose order is not yet checked
/// ([`ChannelTags::order_checked`] false) are checked during the first pass that reads
/// them ([`run_pairs`]).
pub fn whole<P: BlockPass>(label: &str, tags: &[ChannelTags<'_>], pass: &P) -> Result<PassOutput<P::Tables>> {
    let task = pass.task()?;
    let pairs = resolve_pairs(tags, pass.pairs())?;
    let span = block_span(tags);
    if span.is_none() && pass.needs_events() {
        return Err(empty_block(label));
    }
    let results = run_pairs(tags, &pairs, pass.delays(), &task)?;
    let channels = summaries(tags, span, pass.slice_ps());
    let tables = pass.assemble(span, &channels, &results);
    Ok(PassOutput { span, channels, tables })
}

/// Run `pass` over chunks in time order (bounded memory); equal to [`whole`] on the same
/// events.
pub fn streamed<'a, P, I>(label: &str, chunks: I, pass: &P) -> Result<PassOutput<P::Tables>>
where
    P: BlockPass,
    I: Iterator<Item = Result<Vec<ChannelTags<'a>>>>,
{
    let mut s = Streamer::new(pass.task()?, pass.pairs().to_vec(), pass.delays().clone(), pass.slice_ps().unwrap_or(u64::MAX));
    for chunk in chunks {
        s.push(&chunk?)?;
    }
    let (start, channels, mut results) = s.finish();
    let end = channels.iter().filter_map(|c| c.last_ps).max();
    let (Some(start_ps), Some(last)) = (start, end) else {
        return Err(empty_block(label));
    };
    let wanted = pass.pairs();
    for &(a, b) in wanted {
        for c in [a, b] {
            if !channels.iter().any(|s| s.channel == c) {
                return Err(Error::Usage(format!("channel {c} is not in the inputs")));
            }
        }
    }
    if !wanted.is_empty() {
        results.sort_by_key(|r| wanted.iter().position(|p| *p == r.0));
    }
    let span = Some(BlockSpan { start_ps, end_ps: last + 1 });
    let tables = pass.assemble(span, &channels, &results);
    Ok(PassOutput { span, channels, tables })
}

/// Run `task` over every pair of whole-file tags. Channels whose order is not yet checked
/// ([`ChannelTags::order_checked`] false) are checked during the first pass that reads
/// them, and those in no pair on their own, all before anything else reads them; a
/// channel that goes backwards gives [`Error::Unordered`].
pub fn run_pairs(tags: &[ChannelTags<'_>], pairs: &[(Channel, Channel)], delays: &Delays, task: &PairTask) -> Result<Vec<PairOutcome>> {
    let mut checked: std::collections::BTreeMap<Channel, bool> = tags.iter().map(|t| (t.channel, t.order_checked)).collect();
    let mut results = Vec::with_capacity(pairs.len());
    for &(ca, cb) in pairs {
        let delta = delays.relative(ca, cb);
        rule::check_shift(delta, "relative delay")?;
        let unchecked = Unchecked { a: !checked.get(&ca).copied().unwrap_or(true), b: !checked.get(&cb).copied().unwrap_or(true) };
        let r = task.run_whole_checked(super::count::channel(tags, ca)?, super::count::channel(tags, cb)?, delta, unchecked).map_err(|d| {
            Error::Unordered {
                channel: match d {
                    Disorder::A => ca,
                    Disorder::B => cb,
                },
            }
        })?;
        checked.insert(ca, true);
        checked.insert(cb, true);
        results.push(((ca, cb), delta, r));
    }
    for t in tags.iter().filter(|t| !checked.get(&t.channel).copied().unwrap_or(true)) {
        if !parallel::ascending(&t.times_ps) {
            return Err(Error::Unordered { channel: t.channel });
        }
    }
    Ok(results)
}

/// Channel summaries of whole-file tags, sorted by channel: per-slice counts of
/// `slice_ps` over `span` (one slice when `None`; none when the block is empty).
pub fn summaries(tags: &[ChannelTags<'_>], span: Option<BlockSpan>, slice_ps: Option<u64>) -> Vec<ChannelSummary> {
    let mut v: Vec<ChannelSummary> = tags
        .iter()
        .map(|t| ChannelSummary {
            channel: t.channel,
            name: t.name.clone(),
            events: t.len() as u64,
            first_ps: t.times_ps.first().copied(),
            last_ps: t.times_ps.last().copied(),
            slice_counts: span.map(|s| accidentals::slice_counts(&t.times_ps, s, slice_ps.unwrap_or(s.duration_ps().max(1)))).unwrap_or_default(),
        })
        .collect();
    v.sort_by_key(|c| c.channel);
    v
}
