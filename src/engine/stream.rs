//! Streaming: the same counts, histograms and profiles as the whole-file path, over
//! chunks of demultiplexed events with bounded memory. Each pair keeps the A events that
//! may still gain partners and the B events that may still be partners; everything
//! older is finished and dropped. Results equal the whole-file path bit for bit.

use super::kernels::WindowCount;
use super::parallel::{self, Disorder, Unchecked};
use crate::{Channel, ChannelTags, Error, Result};
use std::collections::BTreeMap;

/// What one pair accumulates.
#[derive(Debug, Clone)]
pub enum PairTask {
    /// Window counts at each shift c (relative to δ), half-width `half_ps`.
    Count { centres_ps: Vec<i64>, half_ps: u64 },
    /// Delay histogram over [−span, span).
    Histogram { half_range_ps: u64, bin_ps: u64 },
    /// Window profiles at each shift c, up to `max_half_ps`.
    Profile { centres_ps: Vec<i64>, max_half_ps: u64 },
    /// Several tasks over the same events, in order (a sweep's peak profile and each
    /// window's own off-peak counts).
    Several(Vec<PairTask>),
}

/// A task's accumulated result.
#[derive(Debug, Clone, PartialEq)]
pub enum PairResult {
    Count(Vec<WindowCount>),
    Histogram(Vec<u64>),
    Profile(Vec<Vec<u64>>),
    Several(Vec<PairResult>),
}

impl PairTask {
    /// Smallest and largest b − a any task looks at, given δ.
    fn reach(&self, delta: i64) -> (i64, i64) {
        let around = |c: &[i64], h: u64| {
            let lo = c.iter().min().copied().unwrap_or(0);
            let hi = c.iter().max().copied().unwrap_or(0);
            (delta + lo - h as i64, delta + hi + h as i64)
        };
        match self {
            PairTask::Count { centres_ps, half_ps } => around(centres_ps, *half_ps),
            PairTask::Profile { centres_ps, max_half_ps } => around(centres_ps, *max_half_ps),
            PairTask::Histogram { half_range_ps, .. } => (delta - *half_range_ps as i64, delta + *half_range_ps as i64),
            PairTask::Several(tasks) => {
                tasks.iter().map(|t| t.reach(delta)).fold((delta, delta), |(lo, hi), (l, h)| (lo.min(l), hi.max(h)))
            }
        }
    }

    fn empty_result(&self) -> PairResult {
        match self {
            PairTask::Count { centres_ps, .. } => PairResult::Count(vec![WindowCount::default(); centres_ps.len()]),
            PairTask::Histogram { half_range_ps, bin_ps } => PairResult::Histogram(vec![0; (2 * half_range_ps).div_ceil(*bin_ps) as usize]),
            PairTask::Profile { centres_ps, max_half_ps } => {
                PairResult::Profile(vec![vec![0; 2 * (*max_half_ps as usize + 1)]; centres_ps.len()])
            }
            PairTask::Several(tasks) => PairResult::Several(tasks.iter().map(PairTask::empty_result).collect()),
        }
    }

    /// Run the whole-file kernels on finished A events `a` against `b`, adding to `acc`.
    fn run(&self, a: &[u64], b: &[u64], delta: i64, acc: &mut PairResult) {
        match self.run_checked(a, b, delta, Unchecked::default(), acc) {
            Ok(()) => {}
            Err(_) => unreachable!("a pass without order checks cannot find disorder"),
        }
    }

    /// [`PairTask::run`], checking on the way the order of the inputs marked in `unchecked`
    /// (in the first of a profile's passes; the later ones read checked data).
    fn run_checked(&self, a: &[u64], b: &[u64], delta: i64, unchecked: Unchecked, acc: &mut PairResult) -> Result<(), Disorder> {
        let chunk = parallel::CHUNK_EVENTS;
        match (self, acc) {
            (PairTask::Count { centres_ps, half_ps }, PairResult::Count(v)) => {
                let shifts: Vec<i64> = centres_ps.iter().map(|c| delta + c).collect();
                for (slot, c) in v.iter_mut().zip(parallel::count_windows_checked(a, b, &shifts, *half_ps, unchecked, chunk)?) {
                    *slot = *slot + c;
                }
            }
            (PairTask::Histogram { half_range_ps, bin_ps }, PairResult::Histogram(v)) => {
                add(v, &parallel::histogram_checked(a, b, delta, *half_range_ps, *bin_ps, unchecked, chunk)?);
            }
            (PairTask::Profile { centres_ps, max_half_ps }, PairResult::Profile(vs)) => {
                let mut unchecked = unchecked;
                for (c, v) in centres_ps.iter().zip(vs.iter_mut()) {
                    add(v, &parallel::profile_checked(a, b, delta + c, *max_half_ps, unchecked, chunk)?);
                    unchecked = Unchecked::default();
                }
                if centres_ps.is_empty() {
                    check_alone(a, b, unchecked)?;
                }
            }
            (PairTask::Several(tasks), PairResult::Several(vs)) => {
                // The first task checks the order; the later ones read checked data.
                let mut unchecked = unchecked;
                for (t, v) in tasks.iter().zip(vs.iter_mut()) {
                    t.run_checked(a, b, delta, unchecked, v)?;
                    unchecked = Unchecked::default();
                }
                if tasks.is_empty() {
                    check_alone(a, b, unchecked)?;
                }
            }
            _ => unreachable!("result kind always matches its task"),
        }
        Ok(())
    }

    /// The whole-file result in one call (the reference the streaming path must equal).
    pub fn run_whole(&self, a: &[u64], b: &[u64], delta: i64) -> PairResult {
        let mut acc = self.empty_result();
        self.run(a, b, delta, &mut acc);
        acc
    }

    /// [`PairTask::run_whole`], checking on the way the order of the inputs marked in
    /// `unchecked` (see [`parallel`]).
    pub fn run_whole_checked(&self, a: &[u64], b: &[u64], delta: i64, unchecked: Unchecked) -> Result<PairResult, Disorder> {
        let mut acc = self.empty_result();
        self.run_checked(a, b, delta, unchecked, &mut acc)?;
        Ok(acc)
    }
}

/// The order check alone, for a pass that reads nothing.
fn check_alone(a: &[u64], b: &[u64], unchecked: Unchecked) -> Result<(), Disorder> {
    if unchecked.a && !parallel::ascending(a) {
        return Err(Disorder::A);
    }
    if unchecked.b && !parallel::ascending(b) {
        return Err(Disorder::B);
    }
    Ok(())
}

fn add(x: &mut [u64], y: &[u64]) {
    for (p, q) in x.iter_mut().zip(y) {
        *p += q;
    }
}

/// One channel's running singles.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct ChannelSummary {
    pub channel: Channel,
    pub name: String,
    pub events: u64,
    pub first_ps: Option<u64>,
    pub last_ps: Option<u64>,
    /// Events per slice of `slice_ps` from the stream's first tag.
    pub slice_counts: Vec<u64>,
}

struct PairState {
    a: Channel,
    b: Channel,
    delta: i64,
    reach: (i64, i64),
    pending_a: Vec<u64>,
    buf_b: Vec<u64>,
    result: PairResult,
}

/// Streaming accumulator over chunks in time order.
pub struct Streamer {
    task: PairTask,
    delays: super::Delays,
    wanted: Vec<(Channel, Channel)>,
    slice_ps: u64,
    start_ps: Option<u64>,
    channels: BTreeMap<Channel, ChannelSummary>,
    /// Recent events of every channel, for pairs whose second channel appears late.
    tails: BTreeMap<Channel, Vec<u64>>,
    pairs: Vec<PairState>,
    /// Bound on |b − a| any pair looks at; tails keep 2× this behind the newest tag.
    max_reach: i64,
    seen_ps: u64,
}

impl Streamer {
    /// `pairs` empty = every pair of channels seen (A < B).
    pub fn new(task: PairTask, pairs: Vec<(Channel, Channel)>, delays: super::Delays, slice_ps: u64) -> Self {
        // Any pair's |δ| is at most twice the largest |delay|; tails must cover every reach.
        let max_delay = delays.by_channel.values().map(|d| d.abs()).max().unwrap_or(0);
        let (lo, hi) = task.reach(0);
        let max_reach = 2 * max_delay + lo.abs().max(hi.abs());
        Streamer {
            task,
            delays,
            wanted: pairs,
            slice_ps: slice_ps.max(1),
            start_ps: None,
            channels: BTreeMap::new(),
            tails: BTreeMap::new(),
            pairs: Vec::new(),
            max_reach,
            seen_ps: 0,
        }
    }

    /// Feed the next chunk. Within each channel, events must not precede earlier chunks'.
    pub fn push(&mut self, chunk: &[ChannelTags<'_>]) -> Result<()> {
        if self.start_ps.is_none() {
            self.start_ps = chunk.iter().filter_map(|t| t.times_ps.first().copied()).min();
        }
        let Some(start) = self.start_ps else { return Ok(()) };
        for t in chunk.iter().filter(|t| !t.is_empty()) {
            self.note_channel(t, start)?;
        }
        self.seen_ps = chunk.iter().filter_map(|t| t.times_ps.last().copied()).max().unwrap_or(0).max(self.seen_ps);
        self.open_pairs();
        for p in &mut self.pairs {
            for t in chunk {
                if t.channel == p.a {
                    p.pending_a.extend_from_slice(&t.times_ps);
                }
                if t.channel == p.b {
                    p.buf_b.extend_from_slice(&t.times_ps);
                }
            }
        }
        self.extend_tails(chunk);
        // Future events are ≥ seen_ps, so an A event a is finished once a + reach_hi < seen_ps.
        let seen = self.seen_ps as i64;
        let task = &self.task;
        for p in &mut self.pairs {
            let limit = seen - p.reach.1;
            let n_done = p.pending_a.partition_point(|&x| (x as i64) < limit);
            finish(task, p, n_done, seen);
        }
        Ok(())
    }

    fn note_channel(&mut self, t: &ChannelTags<'_>, start: u64) -> Result<()> {
        let s = self.channels.entry(t.channel).or_insert_with(|| ChannelSummary { channel: t.channel, name: t.name.clone(), ..Default::default() });
        if let (Some(last), Some(&first)) = (s.last_ps, t.times_ps.first()) {
            if first < last {
                // The block pass (`jobs::pass`) has the reader locate it (file, record, byte offset).
                return Err(Error::Unordered { channel: t.channel });
            }
        }
        if t.times_ps[0] < start {
            return Err(Error::Unordered { channel: t.channel });
        }
        s.events += t.len() as u64;
        s.first_ps.get_or_insert(t.times_ps[0]);
        s.last_ps = t.times_ps.last().copied();
        for &x in t.times_ps.iter() {
            let k = ((x - start) / self.slice_ps) as usize;
            if k >= s.slice_counts.len() {
                s.slice_counts.resize(k + 1, 0);
            }
            s.slice_counts[k] += 1;
        }
        Ok(())
    }

    /// Start pairs whose two channels are now both known, seeded from the tails.
    fn open_pairs(&mut self) {
        let known: Vec<Channel> = self.channels.keys().copied().collect();
        let candidates: Vec<(Channel, Channel)> = if self.wanted.is_empty() {
            known.iter().enumerate().flat_map(|(i, &a)| known[i + 1..].iter().map(move |&b| (a, b))).collect()
        } else {
            self.wanted.iter().copied().filter(|(a, b)| known.contains(a) && known.contains(b)).collect()
        };
        for (a, b) in candidates {
            if self.pairs.iter().any(|p| p.a == a && p.b == b) {
                continue;
            }
            let delta = self.delays.relative(a, b);
            let reach = self.task.reach(delta);
            self.pairs.push(PairState {
                a,
                b,
                delta,
                reach,
                pending_a: self.tails.get(&a).cloned().unwrap_or_default(),
                buf_b: self.tails.get(&b).cloned().unwrap_or_default(),
                result: self.task.empty_result(),
            });
        }
        self.pairs.sort_by_key(|p| (p.a, p.b));
    }

    /// Keep each channel's events within the largest reach of the newest tag.
    fn extend_tails(&mut self, chunk: &[ChannelTags<'_>]) {
        for t in chunk {
            self.tails.entry(t.channel).or_default().extend_from_slice(&t.times_ps);
        }
        let keep_from = self.seen_ps as i64 - 2 * self.max_reach.max(1) - 1;
        for v in self.tails.values_mut() {
            let n = v.partition_point(|&x| (x as i64) < keep_from);
            v.drain(..n);
        }
    }

    /// Finish every pending event and return (channel summaries, per-pair results).
    pub fn finish(mut self) -> (Option<u64>, Vec<ChannelSummary>, Vec<((Channel, Channel), i64, PairResult)>) {
        let task = &self.task;
        for p in &mut self.pairs {
            let n = p.pending_a.len();
            finish(task, p, n, i64::MAX);
        }
        let pairs = self.pairs.into_iter().map(|p| ((p.a, p.b), p.delta, p.result)).collect();
        (self.start_ps, self.channels.into_values().collect(), pairs)
    }
}

/// Run the kernels on the first `n_done` pending A events, then drop what no later A
/// event can reach: B events below (next pending a, or `seen`) + reach_lo.
fn finish(task: &PairTask, p: &mut PairState, n_done: usize, seen: i64) {
    if n_done > 0 {
        task.run(&p.pending_a[..n_done], &p.buf_b, p.delta, &mut p.result);
        p.pending_a.drain(..n_done);
    }
    let next_a = p.pending_a.first().map(|&x| x as i64).unwrap_or(seen);
    let keep_from = next_a.saturating_add(p.reach.0);
    let n = p.buf_b.partition_point(|&x| (x as i64) < keep_from);
    p.buf_b.drain(..n);
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A chunk that starts before the previous chunk's last event is an
    /// [`Error::Unordered`] naming the channel, which the block pass (`jobs::pass`) has the reader locate
    /// (`read::locate_disorder_streamed`); it is never a usage error without a file.
    #[test]
    fn a_descent_between_chunks_is_unordered() {
        let task = PairTask::Count { centres_ps: vec![0], half_ps: 10 };
        let mut s = Streamer::new(task, vec![(1, 2)], Default::default(), u64::MAX);
        s.push(&[ChannelTags::owned(1, "", vec![100, 200]), ChannelTags::owned(2, "", vec![150])]).unwrap();
        let e = s.push(&[ChannelTags::owned(1, "", vec![199, 300])]).unwrap_err();
        assert!(matches!(e, Error::Unordered { channel: 1 }), "{e}");
        // Ties across a chunk edge are fine (equal stamps are ordered).
        let task = PairTask::Count { centres_ps: vec![0], half_ps: 10 };
        let mut s = Streamer::new(task, vec![(1, 2)], Default::default(), u64::MAX);
        s.push(&[ChannelTags::owned(1, "", vec![100, 200])]).unwrap();
        s.push(&[ChannelTags::owned(1, "", vec![200, 300])]).unwrap();
    }
}
