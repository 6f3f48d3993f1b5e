//! Bad packed-record layouts and bad records of the new layout keys: each refused through
//! the binary with exit 2, a message naming the key (and the line, for TOML) or the record
//! and its byte offset, what was found and what was expected, and no output left behind.

mod common;

use std::path::{Path, PathBuf};

/// `import` (strict reader) must fail with exit 2 and every `needles` text on stderr.
fn import_fails(input: &Path, layout: &str, needles: &[&str]) {
    let d = tempfile::tempdir().unwrap();
    let out = d.path().join("o.sieve");
    let o = common::tagsieve()
        .args(["--quiet", "import", input.to_str().unwrap(), "--layout", layout, "-o", out.to_str().unwrap()])
        .output()
        .unwrap();
    let err = String::from_utf8_lossy(&o.stderr);
    assert_eq!(o.status.code(), Some(2), "{layout}: {err}");
    for n in needles {
        assert!(err.contains(n), "{layout}: expected {n:?} in: {err}");
    }
    assert!(!out.exists());
    assert_eq!(std::fs::read_dir(d.path()).unwrap().count(), 0, "temporaries left behind");
}

fn file(dir: &Path, name: &str, bytes: &[u8]) -> PathBuf {
    let p = dir.join(name);
    std::fs::write(&p, bytes).unwrap();
    p
}

/// A 4-byte header, then 32-bit little-endian words: time in bits 0..24, raw channel in
/// 24..28, kind in 28..31 (written here with plain shifts, not project code).
fn words(recs: &[(u32, u32, u32)]) -> Vec<u8> {
    let mut b = b"HDR!".to_vec();
    for &(t, ch, kind) in recs {
        b.extend_from_slice(&(t | ch << 24 | kind << 28).to_le_bytes());
    }
    b
}

const SPEC: &str = "rec=4,skip=4,time=0:4:le[0..24],chan=0:4:le[24..28],kind=0:4:le[28..31],event=0,overflow=1,marker=2>9,\
                    tick_ps=1,wrap=24,map=0>1+1>2,reorder_ps=10";

#[test]
fn a_good_file_of_this_layout_imports() {
    let d = tempfile::tempdir().unwrap();
    // Ticks 100 (ch 1), 95 (ch 2: 5 late, within 10), overflow, 3 (ch 1) = 2^24 + 3, marker 7.
    let g = file(d.path(), "good.bin", &words(&[(100, 0, 0), (95, 1, 0), (0, 0, 1), (3, 0, 0), (7, 0, 2)]));
    let out = d.path().join("g.sieve");
    let o = common::tagsieve().args(["--quiet", "import", g.to_str().unwrap(), "--layout", SPEC, "-o", out.to_str().unwrap()]).output().unwrap();
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
}

#[test]
fn bad_records_name_the_record_and_its_byte_offset() {
    let d = tempfile::tempdir().unwrap();
    let unknown = file(d.path(), "unknown.bin", &words(&[(100, 0, 0), (200, 1, 0), (300, 0, 5)]));
    import_fails(&unknown, SPEC, &["unknown.bin", "record 2 (byte offset 12)", "found kind value 5", "expected one of the layout's kind values (0, 1, 2)"]);
    let unmapped = file(d.path(), "unmapped.bin", &words(&[(100, 0, 0), (150, 3, 0)]));
    import_fails(&unmapped, SPEC, &["unmapped.bin", "record 1 (byte offset 8)", "found raw channel value 3", "channel map (0, 1)"]);
    let late = file(d.path(), "late.bin", &words(&[(100, 0, 0), (200, 1, 0), (150, 0, 0)]));
    import_fails(&late, SPEC, &["late.bin", "record 2 (byte offset 12)", "time 150 ticks, 50 ticks before the latest time 200 ticks", "reorder tolerance of 10 ticks"]);
    // Within the tolerance between channels, but backwards on one channel.
    let same = file(d.path(), "same.bin", &words(&[(100, 0, 0), (98, 0, 0)]));
    import_fails(&same, SPEC, &["same.bin", "record 1 (byte offset 8)", "channel 1 at 98 ps after 100 ps on the same channel"]);
}

#[test]
fn bad_layout_specs_name_the_key() {
    let d = tempfile::tempdir().unwrap();
    let g = file(d.path(), "g.bin", &[0u8; 16]);
    for (spec, want) in [
        ("rec=8,time=0:8:le[0..57],chan=0:8:le[56..64],tick_ps=1", "chan: time and channel fields overlap (both use bits of record byte 7)"),
        ("rec=8,time=0:4:le[8..40],chan=4:1,tick_ps=1", "time: time field bits 8..40 run past its 32-bit word"),
        ("rec=8,time=0:4,chan=4:1,tick_ps=1,kind=5:1,event=0,overflow_count=3", "kind value 3 is an overflow with a count, but the layout has no overflow count field"),
        ("rec=8,time=0:4,chan=4:1[0..4],tick_ps=1,kind=4:1[4..6],event=0,marker=9>5", "kind value 9 does not fit the 2-bit kind field"),
        ("rec=8,time=0:4,chan=4:1:signed,tick_ps=1", "chan: a signed channel field needs a channel map"),
        ("rec=8,time=0:4,chan=4:1,tick_ps=1,map=300>1", "map: raw value 300 does not fit the 8-bit channel field"),
        ("rec=8,time=0:4,chan=4:1[0..7],tick_ps=1,edge=4:1[7..8],edge_keep=both", "edge: keeping both edges needs falling edges on their own channels"),
        ("rec=8,time=0:4,chan=4:1,tick_ps=1,wrap=12,reorder_ps=2000", "reorder_ps: reorder_ps=2000 is 2000 ticks, not below a quarter of the 2^12-tick counter period"),
    ] {
        import_fails(&g, spec, &[want]);
    }
}

#[test]
fn bad_layout_files_name_the_key_and_line() {
    let d = tempfile::tempdir().unwrap();
    let g = file(d.path(), "g.bin", &[0u8; 16]);
    let base = "record_bytes = 8\ntick_ps = \"1\"\n[time]\noffset = 0\nwidth = 4\n[channel]\noffset = 4\nwidth = 1\n";
    let cases = [
        // An overflow with a count, no count field: the kinds entry, line 14.
        (format!("{base}[kind]\noffset = 5\nwidth = 1\n[kinds]\n0 = \"event\"\n3 = \"overflow_count\"\n"), "line 14", "[kinds] 3: kind value 3 is an overflow with a count"),
        // Overlapping bits: the second field's table, line 6.
        (base.replace("offset = 4\nwidth = 1", "offset = 3\nwidth = 1"), "line 6", "[channel]: time and channel fields overlap"),
        // A key of another table: line 8.
        (base.replace("width = 4\n", "width = 4\nshift = 0\nbits = 20\nmap = { 1 = 2 }\n"), "line 8", "[time] map: not a key of this table"),
        (format!("{base}[edge]\noffset = 5\nwidth = 1\nkeep = \"sideways\"\n"), "line 12", "[edge] keep = \"sideways\""),
        (format!("{base}[kind]\noffset = 5\nwidth = 1\n"), "line 9", "[kind] needs a [kinds] table"),
    ];
    for (k, (text, line, want)) in cases.iter().enumerate() {
        let p = file(d.path(), &format!("l{k}.toml"), text.as_bytes());
        import_fails(&g, p.to_str().unwrap(), &[&format!("l{k}.toml: {line}:"), want]);
    }
}
