//! The strict readers' order check on the streamed path: a step backwards at any position,
//! in particular at the first value of a chunk (where the check must compare with the last
//! value of the chunk before), is refused for arrays, containers and interleaved records,
//! and the message names the record that goes backwards. Positions are walked one by one
//! over several chunk lengths, as the engine's deferred check is tested
//! (`engine::parallel` tests); the whole-file read is checked alongside.
//!
//! The rule tested: timestamps of a channel (records: the time counter of the file, which
//! has no wrap here) never decrease; equal neighbours are allowed (docs/formats.md).

use std::path::Path;
use tagsieve::read::channel_array::{write_channel_array, ChannelArray};
use tagsieve::read::container::{write_container, Container};
use tagsieve::read::layout::RecordLayout;
use tagsieve::read::records::Records;
use tagsieve::read::{ReadOptions, TagSource};
use tagsieve::{ChannelTags, Error};

const CHUNKS: [usize; 6] = [1, 2, 3, 5, 8, 64];

/// Ascending values with equal neighbours in places (a step of 0 is allowed).
fn ascending(n: usize, seed: u64) -> Vec<u64> {
    let mut t = 1_000 + seed;
    (0..n as u64)
        .map(|i| {
            t += (i * 7 + seed) % 5 * 100;
            t
        })
        .collect()
}

/// `v` with position `i` stepping backwards: v[i] = v[i−1] − 1 (for i = 0, v[1] below v[0]).
/// Returns the broken values and the index of the first value that is below its predecessor.
fn descent_at(v: &[u64], i: usize) -> (Vec<u64>, usize) {
    let mut w = v.to_vec();
    if i == 0 {
        w[1] = w[0] - 1;
        (w, 1)
    } else {
        w[i] = w[i - 1] - 1;
        (w, i)
    }
}

fn opts(mmap: bool) -> ReadOptions {
    ReadOptions { mmap, lenient_order: false }
}

/// The first error of a streamed read in chunks of `chunk` events, or the number of chunks read.
fn stream(src: &dyn TagSource, chunk: usize) -> Result<usize, Error> {
    src.chunks(chunk)?.collect::<Result<Vec<Vec<ChannelTags<'static>>>, Error>>().map(|v| v.len())
}

/// The error must be a bad-input error at `record` (index within the channel or file).
fn assert_names_record(e: &Error, record: usize, what: &str) {
    match e {
        Error::BadInput { location, found, .. } => {
            assert!(location.starts_with(&format!("record {record} ")), "{what}: location {location:?}, found {found:?}, expected record {record}");
        }
        other => panic!("{what}: expected a bad-input error at record {record}, got {other:?}"),
    }
}

#[test]
fn arrays_refuse_a_step_backwards_at_every_position_and_chunk_edge() {
    let d = tempfile::tempdir().unwrap();
    let good = ascending(40, 3);
    for i in 0..good.len() {
        let (bad, at) = descent_at(&good, i);
        let p = d.path().join(format!("a{i}.u64"));
        write_channel_array(&p, &bad).unwrap();
        for mmap in [true, false] {
            let a = ChannelArray::open(1, "", &p, opts(mmap)).unwrap();
            let e = a.channels().expect_err("whole-file read accepted a descent");
            assert_names_record(&e, at, &format!("array, whole file, descent at {at}"));
            for chunk in CHUNKS {
                let e = stream(&a, chunk).expect_err(&format!("array, chunks of {chunk}: descent at {at} accepted"));
                assert_names_record(&e, at, &format!("array, chunks of {chunk}, descent at {at}"));
            }
        }
    }
}

#[test]
fn containers_refuse_a_step_backwards_in_any_channel_at_every_position_and_chunk_edge() {
    // Two channels interleaved in time, so the time-aligned chunks cut each channel at
    // varying places; each channel in turn gets the descent.
    let d = tempfile::tempdir().unwrap();
    let (one, two) = (ascending(30, 1), ascending(30, 4));
    for broken in [0usize, 1] {
        for i in 0..30 {
            let (bad, at) = descent_at(if broken == 0 { &one } else { &two }, i);
            let chans = if broken == 0 {
                [ChannelTags::owned(1, "", bad), ChannelTags::owned(2, "", two.clone())]
            } else {
                [ChannelTags::owned(1, "", one.clone()), ChannelTags::owned(2, "", bad)]
            };
            let p = d.path().join(format!("c{broken}-{i}.tsieve"));
            write_container(&p, &chans, 1.0, "order test").unwrap();
            for mmap in [true, false] {
                let c = Container::open(&p, opts(mmap)).unwrap();
                let what = format!("container channel {}, descent at {at}", broken + 1);
                assert_names_record(&c.channels().expect_err(&what), at, &format!("{what}, whole file"));
                for chunk in CHUNKS {
                    let e = stream(&c, chunk).expect_err(&format!("{what}, chunks of {chunk}: accepted"));
                    assert_names_record(&e, at, &format!("{what}, chunks of {chunk}"));
                }
            }
        }
    }
}

/// 16-byte records: u64 LE time counter in 1 ps ticks, u32 LE channel; no wrap.
fn write_records_raw(path: &Path, counters: &[u64]) {
    let mut bytes = Vec::with_capacity(16 * counters.len());
    for (k, &t) in counters.iter().enumerate() {
        bytes.extend_from_slice(&t.to_le_bytes());
        bytes.extend_from_slice(&(1 + (k as u32 % 3)).to_le_bytes());
        bytes.extend_from_slice(&[0; 4]);
    }
    std::fs::write(path, bytes).unwrap();
}

#[test]
fn records_refuse_a_step_backwards_at_every_position_and_chunk_edge() {
    let d = tempfile::tempdir().unwrap();
    let layout = RecordLayout::from_spec("rec=16,time=0:8:le,chan=8:4:le,tick_ps=1").unwrap();
    let good = ascending(40, 2);
    // Sanity: the unbroken file reads, whole and in chunks.
    let p = d.path().join("good.bin");
    write_records_raw(&p, &good);
    let r = Records::open(&p, layout.clone(), opts(true)).unwrap();
    assert_eq!(r.channels().unwrap().iter().map(|c| c.len()).sum::<usize>(), good.len());
    for chunk in CHUNKS {
        assert!(stream(&r, chunk).is_ok(), "chunks of {chunk}");
    }
    for i in 0..good.len() {
        let (bad, at) = descent_at(&good, i);
        let p = d.path().join(format!("r{i}.bin"));
        write_records_raw(&p, &bad);
        for mmap in [true, false] {
            let r = Records::open(&p, layout.clone(), opts(mmap)).unwrap();
            let what = format!("records, descent at {at}");
            assert_names_record(&r.channels().expect_err(&what), at, &format!("{what}, whole file"));
            for chunk in CHUNKS {
                let e = stream(&r, chunk).expect_err(&format!("{what}, chunks of {chunk}: accepted"));
                assert_names_record(&e, at, &format!("{what}, chunks of {chunk}"));
            }
        }
    }
}
