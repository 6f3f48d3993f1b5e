//! Records as recorders write them: random layouts (word sizes, byte orders, shifts,
//! widths, kinds with overflow and marker records, channel maps, edge flags, reorder
//! tolerance) written by the independent writer below from random per-channel tags and
//! read back to exactly those tags: serial and parallel, whole and streamed, mapped and
//! buffered. The writer sets bits with its own loops (no project code); the expected ps
//! come from the documented rule ps = (ticks · tick_fs + 500) div 1000 (docs/formats.md).

mod common;

use common::SplitMix64;
use proptest::prelude::*;
use std::collections::BTreeMap;
use tagsieve::read::layout::RecordLayout;
use tagsieve::read::records::Records;
use tagsieve::read::{ReadOptions, TagSource};

/// One field's place: word byte offset, word bytes, big-endian?, shift, bits.
#[derive(Debug, Clone, Copy)]
struct Place {
    off: usize,
    bytes: usize,
    big: bool,
    shift: u32,
    bits: u32,
}

impl Place {
    fn spec(&self) -> String {
        format!("{}:{}:{}[{}..{}]", self.off, self.bytes, if self.big { "be" } else { "le" }, self.shift, self.shift + self.bits)
    }
    /// Set the field's bits in `rec` to `v` (low `bits` bits), byte by byte.
    fn put(&self, rec: &mut [u8], v: u64) {
        for k in 0..self.bits {
            let bit = self.shift + k;
            let byte = (bit / 8) as usize;
            let at = if self.big { self.off + self.bytes - 1 - byte } else { self.off + byte };
            let m = 1u8 << (bit % 8);
            if (v >> k) & 1 == 1 {
                rec[at] |= m;
            } else {
                rec[at] &= !m;
            }
        }
    }
}

/// What a record stands for in the generated stream.
#[derive(Debug, Clone, Copy, PartialEq)]
enum Label {
    /// A tag on raw channel index `ch`, `falling` edge or not.
    Tag { ch: usize, falling: bool },
    Marker,
}

/// A random layout and file: the spec, the file bytes, the expected channels, the
/// records of unknown kinds written.
struct Case {
    spec: String,
    bytes: Vec<u8>,
    want: BTreeMap<u32, Vec<u64>>,
    unknown: u64,
    reorder: bool,
}

fn ps_of(ticks: u64, fs: u64) -> u64 {
    ((ticks as u128 * fs as u128 + 500) / 1000) as u64
}

/// Pack fields of the given bit widths into words (shared where they fit).
fn place_fields(rng: &mut SplitMix64, widths: &[u32]) -> (Vec<Place>, usize) {
    let mut order: Vec<usize> = (0..widths.len()).collect();
    for i in (1..order.len()).rev() {
        order.swap(i, rng.next_u64() as usize % (i + 1));
    }
    let mut places = vec![Place { off: 0, bytes: 0, big: false, shift: 0, bits: 0 }; widths.len()];
    let mut off = (rng.next_u64() % 3) as usize;
    let mut word: Option<(usize, usize, bool, u32)> = None; // off, bytes, big, next free bit
    for &f in &order {
        let bits = widths[f];
        let gap = (rng.next_u64() % 3) as u32;
        match word {
            Some((o, b, big, next)) if next + gap + bits <= 8 * b as u32 && rng.next_u64() % 4 != 0 => {
                places[f] = Place { off: o, bytes: b, big, shift: next + gap, bits };
                word = Some((o, b, big, next + gap + bits));
            }
            _ => {
                let min = bits.div_ceil(8) as usize;
                let bytes = min + (rng.next_u64() as usize % (9 - min));
                let big = rng.next_u64() & 1 == 1;
                let shift = (rng.next_u64() % (8 * bytes as u64 - bits as u64 + 1)).min(3) as u32;
                places[f] = Place { off, bytes, big, shift, bits };
                word = Some((off, bytes, big, shift + bits));
                off += bytes;
            }
        }
    }
    (places, off + (rng.next_u64() % 3) as usize)
}

fn make_case(seed: u64) -> Case {
    let mut rng = SplitMix64(seed);
    let mut pick = |n: u64| rng.next_u64() % n;
    let time_bits = [10u32, 12, 16, 25, 32, 40, 48, 56, 64][pick(9) as usize];
    let chan_bits = 3 + pick(6) as u32;
    let kinds = pick(3) != 0;
    let counted = kinds && pick(2) == 0;
    let edge = pick(2) == 0;
    let map = pick(2) == 0;
    let signed = map && pick(2) == 0;
    let mut widths = vec![time_bits, chan_bits];
    if kinds {
        widths.push(3);
    }
    if counted {
        widths.push(4 + pick(5) as u32);
    }
    if edge {
        widths.push(1);
    }
    let mut rng2 = SplitMix64(seed ^ 0xABCD);
    let (places, record_bytes) = place_fields(&mut rng2, &widths);
    let mut rng = SplitMix64(seed.wrapping_mul(3) ^ 77);
    let mut pick = |n: u64| rng.next_u64() % n.max(1);
    let (tp, cp) = (places[0], places[1]);
    let mut k = 2;
    let kp = kinds.then(|| {
        k += 1;
        places[k - 1]
    });
    let np = counted.then(|| {
        k += 1;
        places[k - 1]
    });
    let ep = edge.then(|| places[k]);

    // Counter period: implicit wrap or overflow records when the time field is short.
    let wrap_bits = if time_bits < 64 || pick(3) == 0 { Some(time_bits - pick(3.min(time_bits as u64 - 9)) as u32) } else { None };
    let overflow_records = kinds && wrap_bits.is_some();
    let period_bits = wrap_bits.unwrap_or(64);
    let fs = [1000u64, 12_345, 500, 4000, 250][pick(5) as usize];
    let big_gap = if period_bits >= 31 { 1u64 << 30 } else { 1u64 << (period_bits - 1) };
    let reorder = pick(3) == 0;
    let tol_ticks = if reorder { 1 + pick((big_gap / 4).min(1 << 20)) } else { 0 };
    let reorder_ps = if reorder { (tol_ticks * fs / 1000).max(1) } else { 0 };
    // Ticks two records may be swapped by: d · fs ≤ T·1000 − 500 keeps d within the tolerance.
    let swap_ok = |d: u64| reorder && (d as u128 * fs as u128) + 500 <= reorder_ps as u128 * 1000;

    // Channels: raw values and our numbers.
    let n_ch = 1 + pick(4) as usize;
    let mut raws: Vec<i64> = Vec::new();
    while raws.len() < n_ch {
        let r = if signed { pick(1 << chan_bits) as i64 - (1 << (chan_bits - 1)) } else { pick(1 << chan_bits) as i64 };
        if !raws.contains(&r) {
            raws.push(r);
        }
    }
    let ours: Vec<u32> = if map { (0..n_ch).map(|i| 1 + i as u32 * 7 + pick(5) as u32).collect() } else { raws.iter().map(|&r| r as u32).collect() };
    let (keep, falling_value, falling_add) = if edge { (["rising", "falling", "both"][pick(3) as usize], pick(2), 100u32) } else { ("rising", 1, 0) };
    let marker_channel = 300 + pick(50) as u32;
    // Kind values 0..8, shuffled: event, event, overflow, marker, ignore, unknown…
    let mut kv: Vec<u64> = (0..8).collect();
    for i in (1..8).rev() {
        kv.swap(i, pick(i as u64 + 1) as usize);
    }
    let (ev, ev2, ov, mk, ig) = (kv[0], kv[1], kv[2], kv[3], kv[4]);
    let skip_unknown = kinds && pick(2) == 0;

    // Tags in time order, then swaps within the tolerance (never two of one output channel).
    let n = 1 + pick(2500) as usize;
    // The first tag lies in the first period (a reader starts at epoch 0).
    let mut t = pick(1000.min(big_gap));
    let mut stream: Vec<(u64, Label)> = Vec::with_capacity(n);
    for i in 0..n {
        t += if i == 0 { 0 } else { match pick(10) {
            0 => pick(big_gap),
            1..=4 => pick(tol_ticks.max(3)),
            _ => pick(2000.min(big_gap)),
        } };
        let label = if kinds && pick(12) == 0 { Label::Marker } else { Label::Tag { ch: pick(n_ch as u64) as usize, falling: edge && pick(2) == 0 } };
        stream.push((t, label));
    }
    let out_ch = |l: &Label| -> Option<u32> {
        match *l {
            Label::Marker => Some(marker_channel),
            Label::Tag { ch, falling } => {
                let fall = edge && falling;
                let kept = match keep {
                    "rising" => !fall,
                    "falling" => fall,
                    _ => true,
                };
                kept.then(|| ours[ch] + if fall { falling_add } else { 0 })
            }
        }
    };
    let mut want: BTreeMap<u32, Vec<u64>> = BTreeMap::new();
    for (t, l) in &stream {
        if let Some(c) = out_ch(l) {
            want.entry(c).or_default().push(ps_of(*t, fs));
        }
    }
    if reorder {
        let mut i = 0;
        while i + 1 < stream.len() {
            let (a, b) = (stream[i], stream[i + 1]);
            let same = matches!((out_ch(&a.1), out_ch(&b.1)), (Some(x), Some(y)) if x == y);
            if !same && swap_ok(b.0 - a.0) && pick(2) == 0 {
                stream.swap(i, i + 1);
                i += 2;
            } else {
                i += 1;
            }
        }
    }

    // Write: garbage bytes, then the fields; overflow records when the period advances.
    let mut bytes: Vec<u8> = (0..pick(20)).map(|_| pick(256) as u8).collect();
    let header_bytes = bytes.len();
    let mut rec = vec![0u8; record_bytes];
    let garbage = |rec: &mut Vec<u8>, rng: &mut SplitMix64| rec.iter_mut().for_each(|b| *b = rng.next_u64() as u8);
    let mut rng = SplitMix64(seed ^ 0x5555);
    let mut unknown = 0u64;
    let mut epoch_q = 0u64;
    let count_max = np.map_or(1, |p| (1u64 << p.bits) - 1);
    let wrap_mask = if period_bits >= 64 { u64::MAX } else { (1u64 << period_bits) - 1 };
    for &(t, label) in &stream {
        let q = if period_bits >= 64 { 0 } else { t >> period_bits };
        if overflow_records && q > epoch_q {
            let mut left = q - epoch_q;
            while left > 0 {
                let c = if counted { (1 + rng.next_u64() % count_max).min(left) } else { 1 };
                garbage(&mut rec, &mut rng);
                kp.unwrap().put(&mut rec, ov);
                if let Some(p) = np {
                    p.put(&mut rec, c);
                }
                bytes.extend_from_slice(&rec);
                left -= c;
            }
            epoch_q = q;
        }
        if kinds && rng.next_u64() % 20 == 0 {
            garbage(&mut rec, &mut rng);
            kp.unwrap().put(&mut rec, ig);
            bytes.extend_from_slice(&rec);
        }
        if skip_unknown && rng.next_u64() % 25 == 0 {
            garbage(&mut rec, &mut rng);
            kp.unwrap().put(&mut rec, kv[5 + (rng.next_u64() % 3) as usize]);
            bytes.extend_from_slice(&rec);
            unknown += 1;
        }
        garbage(&mut rec, &mut rng);
        // Bits of the time field above the wrap are noise the reader must ignore.
        let raw = (t & wrap_mask) | (rng.next_u64() & !wrap_mask);
        tp.put(&mut rec, raw);
        match label {
            Label::Marker => kp.unwrap().put(&mut rec, mk),
            Label::Tag { ch, falling } => {
                if let Some(p) = kp {
                    p.put(&mut rec, if rng.next_u64() & 1 == 0 { ev } else { ev2 });
                }
                cp.put(&mut rec, raws[ch] as u64);
                if let Some(p) = ep {
                    p.put(&mut rec, if falling { falling_value } else { 1 - falling_value });
                }
            }
        }
        bytes.extend_from_slice(&rec);
    }

    let mut spec = format!("rec={record_bytes},skip={header_bytes},time={},chan={}", tp.spec(), cp.spec());
    if signed {
        spec = spec.replace(&format!("chan={}", cp.spec()), &format!("chan={}:{}:{}:signed[{}..{}]", cp.off, cp.bytes, if cp.big { "be" } else { "le" }, cp.shift, cp.shift + cp.bits));
    }
    spec.push_str(&format!(",tick_ps={}.{:03}", fs / 1000, fs % 1000));
    if let Some(w) = wrap_bits {
        spec.push_str(&format!(",wrap={w}"));
    }
    if kinds {
        spec.push_str(&format!(",kind={},event={ev}+{ev2},marker={mk}>{marker_channel},ignore={ig}", kp.unwrap().spec()));
        spec.push_str(&if counted { format!(",overflow_count={ov},count={}", np.unwrap().spec()) } else { format!(",overflow={ov}") });
        if skip_unknown {
            spec.push_str(",unknown=skip");
        }
    }
    if map {
        spec.push_str(&format!(",map={}", raws.iter().zip(&ours).map(|(r, c)| format!("{r}>{c}")).collect::<Vec<_>>().join("+")));
    }
    if edge {
        spec.push_str(&format!(",edge={},edge_keep={keep},edge_falling={falling_value},edge_falling_add={falling_add}", ep.unwrap().spec()));
    }
    if reorder {
        spec.push_str(&format!(",reorder_ps={reorder_ps}"));
    }
    want.retain(|_, v| !v.is_empty());
    Case { spec, bytes, want, unknown, reorder }
}

type Tags = BTreeMap<u32, Vec<u64>>;

fn flat(c: Vec<tagsieve::ChannelTags<'_>>) -> Tags {
    c.into_iter().filter(|c| !c.is_empty()).map(|c| (c.channel, c.times_ps.to_vec())).collect()
}

/// Read `case` every way and compare with what was written.
fn check(case: &Case) -> std::result::Result<(), TestCaseError> {
    let layout = RecordLayout::from_spec(&case.spec).map_err(|e| TestCaseError::fail(format!("{}: {e}", case.spec)))?;
    prop_assert_eq!(RecordLayout::from_spec(&layout.to_spec()).unwrap(), layout.clone(), "spec round trip");
    let d = tempfile::tempdir().unwrap();
    let p = d.path().join("r.bin");
    std::fs::write(&p, &case.bytes).unwrap();
    let pool = rayon::ThreadPoolBuilder::new().num_threads(3).build().unwrap();
    for mmap in [true, false] {
        let opts = ReadOptions { mmap, lenient_order: false };
        let serial = Records::open(&p, layout.clone(), opts).unwrap();
        let got = serial.channels().map(flat).map_err(|e| TestCaseError::fail(format!("{}: {e}", case.spec)))?;
        prop_assert_eq!(&got, &case.want, "whole read, mmap {}: {}", mmap, case.spec);
        prop_assert_eq!(serial.skipped_records(), case.unknown);
        // Small ranges: the parallel passes (mapped files; buffered reads stay serial).
        let par = Records::open(&p, layout.clone(), opts).unwrap().with_ranges(97, 3);
        if mmap && !(case.reorder && layout.period_bits().is_some()) {
            prop_assert!(par.reads_in_parallel() || serial.event_count() <= 97);
        }
        let got = pool.install(|| par.channels().map(flat)).map_err(|e| TestCaseError::fail(format!("{}: {e}", case.spec)))?;
        prop_assert_eq!(&got, &case.want, "parallel read, mmap {}: {}", mmap, case.spec);
        prop_assert_eq!(par.skipped_records(), case.unknown);
        // Streamed, in chunks that span several ranges: each channel joined is the whole;
        // no chunk holds a tag later than a tag of a later chunk.
        for chunk in [1usize, 250, 1000] {
            let mut joined: Tags = BTreeMap::new();
            let mut prev_max = 0u64;
            for c in pool.install(|| par.chunks(chunk).unwrap().collect::<Vec<_>>()) {
                let c = c.map_err(|e| TestCaseError::fail(format!("{}: {e}", case.spec)))?;
                let min = c.iter().filter_map(|c| c.times_ps.first().copied()).min();
                if let Some(m) = min {
                    prop_assert!(m >= prev_max, "chunk starts at {} before {}: {}", m, prev_max, case.spec);
                }
                prev_max = c.iter().filter_map(|c| c.times_ps.last().copied()).max().unwrap_or(0).max(prev_max);
                for t in c {
                    joined.entry(t.channel).or_default().extend_from_slice(&t.times_ps);
                }
            }
            joined.retain(|_, v| !v.is_empty());
            prop_assert_eq!(&joined, &case.want, "chunks of {}, mmap {}: {}", chunk, mmap, case.spec);
            prop_assert_eq!(par.skipped_records(), case.unknown);
        }
    }
    Ok(())
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(256))]
    #[test]
    fn random_layouts_round_trip_serial_parallel_streamed(seed in any::<u64>()) {
        check(&make_case(seed))?;
    }
}

/// The generator reaches every feature (so the property above tests them all).
#[test]
fn generator_covers_every_feature() {
    let specs: Vec<String> = (0..300u64).map(|s| make_case(s).spec).collect();
    for key in ["kind=", "overflow=", "overflow_count=", "marker=", "ignore=", "unknown=skip", "map=", ":signed", "edge_keep=both", "edge_keep=falling", "reorder_ps=", "wrap=", ":be["] {
        assert!(specs.iter().any(|s| s.contains(key)), "no generated layout has {key}");
    }
    assert!(specs.iter().any(|s| s.contains("reorder_ps=") && s.contains("overflow")), "reorder with overflow records");
}

