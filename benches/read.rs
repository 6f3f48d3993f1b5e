//! Read throughput of each input format from a warm page cache, each beside a plain sum
//! over the same mapping in the same run (the memory-bandwidth yardstick). Files of
//! `TAGSIEVE_BENCH_MIB` MiB (default 256) are generated in a temp dir with an integer PRNG.
//! Targets: arrays and container ≥ 50% of the plain-sum rate; records demux ≥ 25%, also
//! for 8-byte packed records (plain, and with a kind field and overflow records). Each
//! format is set beside two sums: one thread (`plain_sum`) and the whole rayon pool
//! (`plain_sum_all_threads`, the stricter yardstick, as the readers run on the pool).

use criterion::{black_box, criterion_group, criterion_main, Criterion, Throughput};
use std::path::{Path, PathBuf};
use std::time::Duration;
use tagsieve::read::channel_array::write_channel_array;
use tagsieve::read::container::write_container;
use tagsieve::read::layout::RecordLayout;
use tagsieve::read::records::write_records;
use tagsieve::read::{all_channels, open_inputs, ReadOptions};
use tagsieve::ChannelTags;

const CHANNELS: u32 = 4;
const RECORD_SPEC: &str = "rec=16,time=0:8:le,chan=8:2:le,tick_ps=1";
/// One little-endian 64-bit word per record: the channel in the top 8 bits, a 56-bit time.
const PACKED_SPEC: &str = "rec=8,time=0:8:le[0..56],chan=0:8:le[56..64],tick_ps=1";
/// The same word with a 3-bit kind (0 a time tag, 1 an overflow of 2^48 ticks), the
/// channel in bits 48..56 and a 48-bit time: the classifying loops.
const PACKED_KINDS_SPEC: &str = "rec=8,time=0:8:le[0..48],chan=0:8:le[48..56],kind=0:8:le[56..59],event=0,overflow=1,tick_ps=1,wrap=48";

fn bench_mib() -> u64 {
    std::env::var("TAGSIEVE_BENCH_MIB").ok().and_then(|s| s.parse().ok()).unwrap_or(256)
}

/// Four interleaved Poisson-like channels from one xorshift stream: ascending times with
/// gaps uniform in 1..=2000 ps, each assigned to a channel by the generator.
fn synthetic(events: usize) -> Vec<ChannelTags<'static>> {
    let mut x: u64 = 0x2545_F491_4F6C_DD1D;
    let mut t = 0u64;
    let mut per: Vec<Vec<u64>> = (0..CHANNELS).map(|_| Vec::with_capacity(events / CHANNELS as usize + 16)).collect();
    for _ in 0..events {
        x ^= x << 13;
        x ^= x >> 7;
        x ^= x << 17;
        t += 1 + x % 2000;
        per[(x >> 60) as usize % CHANNELS as usize].push(t);
    }
    per.into_iter().enumerate().map(|(c, v)| ChannelTags::owned(c as u32 + 1, "", v)).collect()
}

struct Files {
    _dir: tempfile::TempDir,
    array: PathBuf,
    records: PathBuf,
    container: PathBuf,
    packed: PathBuf,
    packed_kinds: PathBuf,
}

/// Tags of `chans` in time order as packed words `time | channel << chan_shift` (and,
/// for `kinds`, an overflow record every 2^20 tags: kind 1 in bits 56..59, no time).
fn packed_words(chans: &[ChannelTags<'_>], chan_shift: u32, kinds: bool) -> Vec<u8> {
    let mut all: Vec<(u64, u64)> = chans.iter().flat_map(|c| c.times_ps.iter().map(move |&t| (t, c.channel as u64))).collect();
    all.sort_unstable();
    let mut out = Vec::with_capacity(all.len() * 8 + 64);
    for (i, (t, ch)) in all.into_iter().enumerate() {
        if kinds && i % (1 << 20) == (1 << 20) - 1 {
            out.extend_from_slice(&(1u64 << 56).to_le_bytes());
        }
        let shift_mask = (1u64 << chan_shift) - 1;
        out.extend_from_slice(&((t & shift_mask) | ch << chan_shift).to_le_bytes());
    }
    out
}

fn make_files() -> Files {
    let dir = tempfile::tempdir().expect("temp dir");
    let bytes = bench_mib() << 20;
    let one = synthetic((bytes / 8) as usize);
    let mut single: Vec<u64> = one.iter().flat_map(|c| c.times_ps.iter().copied()).collect();
    single.sort_unstable();
    let array = dir.path().join("a.u64");
    write_channel_array(&array, &single).expect("array");
    drop(single);
    let container = dir.path().join("c.tsieve");
    write_container(&container, &one, 1.0, "bench").expect("container");
    let records = dir.path().join("r.bin");
    let half = synthetic((bytes / 16) as usize);
    write_records(&records, &RecordLayout::from_spec(RECORD_SPEC).expect("spec"), &half).expect("records");
    drop(half);
    let (packed, packed_kinds) = (dir.path().join("p.bin"), dir.path().join("pk.bin"));
    std::fs::write(&packed, packed_words(&one, 56, false)).expect("packed");
    std::fs::write(&packed_kinds, packed_words(&one, 48, true)).expect("packed kinds");
    Files { _dir: dir, array, records, container, packed, packed_kinds }
}

/// The yardstick: sum every u64 of the mapped file.
fn plain_sum(path: &Path) -> u64 {
    sum_mapped(path, |words| words.iter().fold(0u64, |a, &w| a.wrapping_add(w)))
}

/// The same sum on every thread of the rayon pool (the readers use them all too): the
/// machine's memory-read rate, the stricter yardstick.
fn plain_sum_all_threads(path: &Path) -> u64 {
    use rayon::prelude::*;
    sum_mapped(path, |words| words.par_chunks(1 << 16).map(|c| c.iter().fold(0u64, |a, &w| a.wrapping_add(w))).reduce(|| 0, u64::wrapping_add))
}

fn sum_mapped(path: &Path, sum: impl Fn(&[u64]) -> u64) -> u64 {
    let f = std::fs::File::open(path).expect("open");
    // SAFETY: benchmark files in our own temp dir; nobody else writes them.
    let map = unsafe { memmap2::Mmap::map(&f) }.expect("map");
    let (_, words, _) = unsafe { map.align_to::<u64>() };
    sum(words)
}

/// Open, validate and hand out every channel (zero-copy where the format allows).
fn read_all(arg: &str, layout: Option<&RecordLayout>) -> usize {
    let src = open_inputs(&[arg.to_string()], layout, ReadOptions::mapped()).expect("open");
    let chans = all_channels(&src).expect("read");
    chans.iter().map(|c| c.len()).sum()
}

fn formats(c: &mut Criterion) {
    let files = make_files();
    let layout = RecordLayout::from_spec(RECORD_SPEC).expect("spec");
    let (packed, packed_kinds) = (RecordLayout::from_spec(PACKED_SPEC).expect("spec"), RecordLayout::from_spec(PACKED_KINDS_SPEC).expect("spec"));
    let sets: [(&str, String, &Path, Option<&RecordLayout>); 5] = [
        ("channel_array", format!("1={}", files.array.display()), &files.array, None),
        ("records_demux", files.records.display().to_string(), &files.records, Some(&layout)),
        ("packed_demux", files.packed.display().to_string(), &files.packed, Some(&packed)),
        ("packed_kinds_demux", files.packed_kinds.display().to_string(), &files.packed_kinds, Some(&packed_kinds)),
        ("container", files.container.display().to_string(), &files.container, None),
    ];
    for (name, arg, path, layout) in sets {
        let mut g = c.benchmark_group(name);
        g.sample_size(10);
        g.throughput(Throughput::Bytes(std::fs::metadata(path).expect("size").len()));
        let _ = plain_sum(path); // warm the page cache
        g.bench_function("plain_sum", |b| b.iter(|| black_box(plain_sum(path))));
        g.bench_function("plain_sum_all_threads", |b| b.iter(|| black_box(plain_sum_all_threads(path))));
        g.bench_function("read", |b| b.iter(|| black_box(read_all(&arg, layout))));
        g.finish();
    }
}

criterion_group! {
    name = read;
    config = Criterion::default().warm_up_time(Duration::from_secs(1)).measurement_time(Duration::from_secs(3));
    targets = formats
}
criterion_main!(read);
