//! Replays every input the fuzzers found crashing (tests/fuzz_cases/TARGET/*) and the seed
//! corpus (fuzz/seeds/TARGET/*) through the same harness the fuzz targets run
//! (fuzz/src/lib.rs), so a returning bug fails here without libFuzzer or a nightly flag.

#[path = "../fuzz/src/lib.rs"]
mod harness;

use harness::Outcome;
use std::path::{Path, PathBuf};

type Target = fn(&[u8]) -> Outcome;
const TARGETS: [(&str, Target); 4] = [
    ("records", harness::records),
    ("container", harness::container),
    ("layout_toml", harness::layout_toml),
    ("manifest", harness::manifest),
];

fn files(dir: &Path) -> Vec<PathBuf> {
    let mut v: Vec<PathBuf> = std::fs::read_dir(dir).map(|d| d.map(|e| e.unwrap().path()).collect()).unwrap_or_default();
    v.retain(|p| p.is_file() && p.extension().is_none_or(|e| e != "md"));
    v.sort();
    v
}

fn case(target: &str, name: &str) -> Vec<u8> {
    let p = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/fuzz_cases").join(target).join(name);
    std::fs::read(&p).unwrap_or_else(|e| panic!("{}: {e}", p.display()))
}

/// Every saved crashing input runs to an answer (no panic, no abort) in its target.
#[test]
fn every_saved_case_replays_without_panicking() {
    let root = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/fuzz_cases");
    let mut replayed = 0;
    for (target, run) in TARGETS {
        for p in files(&root.join(target)) {
            let bytes = std::fs::read(&p).unwrap();
            let r = std::panic::catch_unwind(|| run(&bytes));
            assert!(r.is_ok(), "{target}: {} panics again", p.display());
            replayed += 1;
        }
    }
    assert!(replayed > 0, "no cases found under {}", root.display());
}

/// The seeds are valid inputs: the harness must reach the readers and read them, or the
/// fuzzers would only ever exercise the error paths. Event counts are those the seed
/// generator wrote (fuzz/make_seeds.py), counted by hand from its lists (manifests: the number of [[block]] tables).
#[test]
fn seeds_are_read_by_the_real_readers() {
    let seeds = Path::new(env!("CARGO_MANIFEST_DIR")).join("fuzz/seeds");
    let expect = [
        ("container", "two_channels", Outcome::Read { events: 5 }),
        ("container", "empty_channel", Outcome::Read { events: 1 }),
        ("container", "no_channels", Outcome::Read { events: 0 }),
        // 30, 20, 10, 40 goes backwards: strict readers refuse it.
        ("container", "unsorted", Outcome::Refused),
        ("records", "wrap32_le", Outcome::Read { events: 4 }),
        ("records", "be64", Outcome::Read { events: 3 }),
        ("records", "spec_wrap16", Outcome::Read { events: 3 }),
        ("layout_toml", "wrap32", Outcome::Read { events: 0 }),
        ("layout_toml", "be64", Outcome::Read { events: 0 }),
        ("layout_toml", "float_tick", Outcome::Read { events: 0 }),
        ("manifest", "four_detectors", Outcome::Read { events: 4 }),
        ("manifest", "one_per_side", Outcome::Read { events: 16 }),
    ];
    for (target, name, want) in expect {
        let run = TARGETS.iter().find(|t| t.0 == target).unwrap().1;
        let bytes = std::fs::read(seeds.join(target).join(name)).unwrap();
        assert_eq!(run(&bytes), want, "seed {target}/{name}");
    }
}

/// A field offset near usize::MAX used to wrap `offset + width` round to a small number:
/// a panic with overflow checks, and past `validate` into an out-of-bounds slice without.
/// The layout must be refused as not fitting the record.
#[test]
fn huge_field_offsets_are_refused_not_wrapped() {
    for (name, what) in [("time_offset_overflow", "time field"), ("chan_offset_overflow", "channel field")] {
        assert_eq!(harness::records(&case("records", name)), Outcome::Refused, "{name}");
        let bytes = case("records", name);
        let spec = std::str::from_utf8(&bytes[1..]).unwrap().lines().next().unwrap();
        let e = tagsieve::read::layout::RecordLayout::from_spec(spec).unwrap_err().to_string();
        assert!(e.contains(what) && e.contains("wider than"), "{name}: {e}");
    }
    // The same through the 8-byte layout form (time offset 2^64 - 4).
    assert_eq!(harness::records(&case("records", "structured_offset_overflow")), Outcome::Refused);
}

/// `wrap=` above u32::MAX used to be truncated (2^32 + 32 read as 32) and accepted.
#[test]
fn wrap_bits_beyond_u32_are_refused() {
    let spec = format!("rec=8,time=0:4,chan=4:1,tick_ps=1,wrap={}", (1u64 << 32) + 32);
    assert!(tagsieve::read::layout::RecordLayout::from_spec(&spec).is_err(), "{spec}");
}
