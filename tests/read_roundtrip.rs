//! Every format round-trips: write → read → the same tags, through `channels()` and
//! `chunks()`, mapped and buffered; interleaved records with fractional ticks and wrapped
//! counters; import (arrays or records → container) through the binary.

mod common;

use proptest::prelude::*;
use std::path::Path;
use tagsieve::read::channel_array::write_channel_array;
use tagsieve::read::container::write_container;
use tagsieve::read::layout::RecordLayout;
use tagsieve::read::records::write_records;
use tagsieve::read::{all_channels, open_inputs, ReadOptions};
use tagsieve::ChannelTags;

fn opts(mmap: bool) -> ReadOptions {
    ReadOptions { mmap, ..Default::default() }
}

/// (channel, times) per channel.
type Tags = Vec<(u32, Vec<u64>)>;

/// (channel, times) of everything `args` opens, via channels() and via concatenated chunks.
fn read_both_ways(args: &[String], layout: Option<&RecordLayout>, mmap: bool, chunk: usize) -> (Tags, Tags) {
    let src = open_inputs(args, layout, opts(mmap)).unwrap();
    let mut whole: Vec<(u32, Vec<u64>)> = all_channels(&src).unwrap().iter().map(|c| (c.channel, c.times_ps.to_vec())).collect();
    whole.sort();
    let mut joined: std::collections::BTreeMap<u32, Vec<u64>> = Default::default();
    for s in &src {
        for ch in s.chunks(chunk).unwrap() {
            let ch = ch.unwrap();
            // Bounded memory: no chunk holds more than it was asked for.
            assert!(ch.iter().map(|c| c.len()).sum::<usize>() <= chunk);
            for c in ch {
                joined.entry(c.channel).or_default().extend_from_slice(&c.times_ps);
            }
        }
    }
    (whole, joined.into_iter().collect())
}

/// Ascending times from a simple integer PRNG (xorshift; any generator would do).
fn times(seed: u64, n: usize, mean_gap: u64) -> Vec<u64> {
    let mut x = seed | 1;
    let mut t = 0u64;
    (0..n)
        .map(|_| {
            x ^= x << 13;
            x ^= x >> 7;
            x ^= x << 17;
            t += x % (2 * mean_gap + 1);
            t
        })
        .collect()
}

fn arg(p: &Path) -> String {
    p.to_str().unwrap().to_string()
}

#[test]
fn channel_arrays_round_trip() {
    let d = tempfile::tempdir().unwrap();
    let mut args = Vec::new();
    let mut want = Vec::new();
    for ch in [1u32, 3, 4] {
        let t = times(ch as u64, 5000, 1000);
        let p = d.path().join(format!("c{ch}.u64"));
        write_channel_array(&p, &t).unwrap();
        args.push(format!("{ch}={}", p.display()));
        want.push((ch, t));
    }
    for mmap in [true, false] {
        let (whole, chunked) = read_both_ways(&args, None, mmap, 777);
        assert_eq!(whole, want);
        assert_eq!(chunked, want);
    }
}

#[test]
fn container_round_trips_zero_copy_and_chunked() {
    let d = tempfile::tempdir().unwrap();
    let p = d.path().join("run.tsieve");
    let chans: Vec<ChannelTags> = (1..=4).map(|c| ChannelTags::owned(c, format!("ch{c}"), times(c as u64 * 7, 3000 + c as usize * 100, 500))).collect();
    write_container(&p, &chans, 1.0, "test").unwrap();
    let want: Vec<(u32, Vec<u64>)> = chans.iter().map(|c| (c.channel, c.times_ps.to_vec())).collect();
    for mmap in [true, false] {
        let (whole, chunked) = read_both_ways(&[arg(&p)], None, mmap, 1000);
        assert_eq!(whole, want);
        assert_eq!(chunked, want);
    }
}

/// Chunks of a container are time slices: every event of chunk k is ≤ every event of
/// chunk k+1, across channels (what a streaming consumer needs).
#[test]
fn container_chunks_are_time_aligned() {
    let d = tempfile::tempdir().unwrap();
    let p = d.path().join("run.tsieve");
    let chans: Vec<ChannelTags> = (1..=3).map(|c| ChannelTags::owned(c, "", times(c as u64, 4000 / c as usize, 300 * c as u64))).collect();
    write_container(&p, &chans, 1.0, "test").unwrap();
    let src = open_inputs(&[arg(&p)], None, opts(true)).unwrap();
    let mut prev_max = 0u64;
    let mut total = 0usize;
    for ch in src[0].chunks(600).unwrap() {
        let ch = ch.unwrap();
        let min = ch.iter().flat_map(|c| c.times_ps.first().copied()).min().unwrap();
        assert!(min >= prev_max, "chunk starts at {min} before the previous chunk's end {prev_max}");
        prev_max = ch.iter().flat_map(|c| c.times_ps.last().copied()).max().unwrap();
        total += ch.iter().map(|c| c.len()).sum::<usize>();
        assert!(ch.iter().map(|c| c.len()).sum::<usize>() <= 600);
    }
    assert_eq!(total, chans.iter().map(|c| c.len()).sum::<usize>());
}

/// The documented tick rule: ps = (ticks · tick_fs + 500) div 1000, computed here in u128.
fn ps_of(ticks: u64, tick_fs: u64) -> u64 {
    ((ticks as u128 * tick_fs as u128 + 500) / 1000) as u64
}

fn layouts() -> impl Strategy<Value = String> {
    let time = prop_oneof![Just("0:4:le"), Just("0:4:be"), Just("0:8:le"), Just("0:8:be")];
    let chan = prop_oneof![Just("9:1"), Just("10:2:le"), Just("10:2:be"), Just("12:4:le"), Just("12:4:be")];
    let tick = prop_oneof![Just("1"), Just("12.345"), Just("0.5"), Just("4"), Just("27.001")];
    (time, chan, tick, 0u64..3).prop_map(|(t, c, k, skip)| {
        let wrap = if t.contains(":4:") { ",wrap=32" } else { "" };
        format!("rec=16,skip={},time={t},chan={c},tick_ps={k}{wrap}", skip * 8)
    })
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(40))]
    /// Records of any layout round-trip through write_records → channels()/chunks().
    /// Ticks are drawn first and mapped to ps by the documented rule, so the ps lie on the
    /// tick grid; 32-bit fields see several wraps (gaps up to ~2^31 ticks).
    #[test]
    fn records_round_trip(spec in layouts(), seed in 1u64..1000, n in 1usize..600, mmap: bool, chunk in 1usize..300) {
        let layout = RecordLayout::from_spec(&spec).unwrap();
        let d = tempfile::tempdir().unwrap();
        let p = d.path().join("r.bin");
        let gap = if layout.wrap_bits.is_some() { 1u64 << 30 } else { 1u64 << 20 };
        let ticks = times(seed, n, gap);
        let mut per: std::collections::BTreeMap<u32, Vec<u64>> = Default::default();
        for (i, &t) in ticks.iter().enumerate() {
            per.entry([2u32, 5, 7][(t ^ i as u64) as usize % 3]).or_default().push(ps_of(t, layout.tick.fs));
        }
        let chans: Vec<ChannelTags> = per.iter().map(|(&c, v)| ChannelTags::owned(c, "", v.clone())).collect();
        write_records(&p, &layout, &chans).unwrap();
        let want: Vec<(u32, Vec<u64>)> = per.into_iter().collect();
        let (whole, chunked) = read_both_ways(&[arg(&p)], Some(&layout), mmap, chunk);
        prop_assert_eq!(&whole, &want);
        prop_assert_eq!(&chunked, &want);
    }
}

fn run_ok(args: &[&str]) {
    let out = common::tagsieve().args(args).output().unwrap();
    assert!(out.status.success(), "{args:?}: {}", String::from_utf8_lossy(&out.stderr));
}

#[test]
fn import_arrays_and_records_into_containers() {
    let d = tempfile::tempdir().unwrap();
    let (a, b) = (times(11, 20_000, 100), times(12, 15_000, 130));
    let (pa, pb) = (d.path().join("a.u64"), d.path().join("b.u64"));
    write_channel_array(&pa, &a).unwrap();
    write_channel_array(&pb, &b).unwrap();
    let out = d.path().join("ab.tsieve");
    let (sa, sb) = (format!("1:larch_plus={}", pa.display()), format!("2={}", pb.display()));
    run_ok(&["--quiet", "import", &sa, &sb, "-o", out.to_str().unwrap()]);
    let (whole, _) = read_both_ways(&[arg(&out)], None, true, 100);
    assert_eq!(whole, vec![(1, a.clone()), (2, b.clone())]);
    let src = open_inputs(&[arg(&out)], None, opts(true)).unwrap();
    assert_eq!(all_channels(&src).unwrap()[0].name, "larch_plus");

    // Records with a fractional tick and a wrapping counter, via a TOML layout file.
    let layout_path = d.path().join("l.toml");
    std::fs::write(&layout_path, "record_bytes = 8\ntick_ps = \"12.345\"\nwrap_bits = 32\n[time]\noffset = 0\nwidth = 4\n[channel]\noffset = 4\nwidth = 1\n").unwrap();
    let layout = RecordLayout::from_arg(layout_path.to_str().unwrap()).unwrap();
    let ticks = times(13, 30_000, 1 << 20);
    let per: Vec<ChannelTags> = (0..2u32).map(|c| ChannelTags::owned(c + 3, "", ticks.iter().skip(c as usize).step_by(2).map(|&t| ps_of(t, 12_345)).collect())).collect();
    let rec = d.path().join("r.bin");
    write_records(&rec, &layout, &per).unwrap();
    let out2 = d.path().join("r.tsieve");
    run_ok(&["--quiet", "import", rec.to_str().unwrap(), "--layout", layout_path.to_str().unwrap(), "-o", out2.to_str().unwrap()]);
    let (whole, _) = read_both_ways(&[arg(&out2)], None, false, 100);
    assert_eq!(whole, per.iter().map(|c| (c.channel, c.times_ps.to_vec())).collect::<Vec<_>>());

    // Refuses to overwrite without --force, replaces with it; no temporaries left behind.
    let again = common::tagsieve().args(["--quiet", "import", &sa, "-o", out.to_str().unwrap()]).output().unwrap();
    assert_eq!(again.status.code(), Some(2));
    run_ok(&["--quiet", "import", &sa, "-o", out.to_str().unwrap(), "--force"]);
    let (whole, _) = read_both_ways(&[arg(&out)], None, true, 100);
    assert_eq!(whole, vec![(1, a)]);
    let mut names: Vec<String> = std::fs::read_dir(d.path()).unwrap().map(|e| e.unwrap().file_name().to_string_lossy().into_owned()).collect();
    names.sort();
    assert_eq!(names, ["a.u64", "ab.tsieve", "b.u64", "l.toml", "r.bin", "r.tsieve"]);
}
