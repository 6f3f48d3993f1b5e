//! The bad-input catalogue (docs/bad-inputs.md), one test per case, each running the real
//! binary on a file made here: the exit code, the stable part of the message (file, record
//! or byte offset, what was found, what was expected) and never a panic.
//!
//! Byte layouts written here by hand follow docs/bad-inputs.md and src/read/container.rs's
//! header description (our own format); exit codes follow the documented contract
//! (2 bad input or usage, 1 runtime failure).

mod common;

use std::io::Write;
use std::path::{Path, PathBuf};
use std::process::Output;

const LAYOUT16: &str = "rec=16,time=0:8:le,chan=8:4:le,tick_ps=1";

/// Run the binary in `dir` and return its output.
fn run(dir: &Path, args: &[&str]) -> Output {
    common::tagsieve().current_dir(dir).args(args).output().expect("run tagsieve")
}

/// Assert exit code `code`, every part in stderr, and no panic; return stderr.
#[track_caller]
fn expect(out: &Output, code: i32, parts: &[&str]) -> String {
    let err = String::from_utf8_lossy(&out.stderr).into_owned();
    assert!(!err.contains("panicked"), "panic: {err}");
    assert_eq!(out.status.code(), Some(code), "exit code; stderr: {err}");
    for p in parts {
        assert!(err.contains(p), "stderr lacks {p:?}: {err}");
    }
    err
}

fn u64s_le(values: &[u64]) -> Vec<u8> {
    values.iter().flat_map(|v| v.to_le_bytes()).collect()
}

/// 16-byte records: u64 LE time at 0, u32 LE channel at 8, 4 bytes padding.
fn records(events: &[(u64, u32)]) -> Vec<u8> {
    events.iter().flat_map(|&(t, c)| [&t.to_le_bytes()[..], &c.to_le_bytes()[..], &[0u8; 4][..]].concat()).collect()
}

/// A container by hand: magic, version, count, tick (fs), creation time, creator; one
/// 64-byte table entry per channel (channel, pad, count, offset, name); sections after.
fn container(version: u32, tick_fs: i64, channels: &[(u32, &[u64])]) -> Vec<u8> {
    let mut b = b"\x7fTSIEVE\n".to_vec();
    b.extend_from_slice(&version.to_le_bytes());
    b.extend_from_slice(&(channels.len() as u32).to_le_bytes());
    b.extend_from_slice(&tick_fs.to_le_bytes());
    b.extend_from_slice(&0i64.to_le_bytes());
    b.resize(96, 0);
    let mut offset = 96 + 64 * channels.len() as u64;
    for (ch, times) in channels {
        b.extend_from_slice(&ch.to_le_bytes());
        b.extend_from_slice(&0u32.to_le_bytes());
        b.extend_from_slice(&(times.len() as u64).to_le_bytes());
        b.extend_from_slice(&offset.to_le_bytes());
        b.resize(b.len() + 40, 0);
        offset += 8 * times.len() as u64;
    }
    for (_, times) in channels {
        b.extend_from_slice(&u64s_le(times));
    }
    b
}

fn put_u64(b: &mut [u8], at: usize, v: u64) {
    b[at..at + 8].copy_from_slice(&v.to_le_bytes());
}

struct Dir(tempfile::TempDir);

impl Dir {
    fn new() -> Self {
        Dir(tempfile::tempdir().expect("tempdir"))
    }
    fn path(&self) -> &Path {
        self.0.path()
    }
    fn file(&self, name: &str, bytes: &[u8]) -> PathBuf {
        let p = self.path().join(name);
        std::fs::write(&p, bytes).expect("write fixture");
        p
    }
    fn good_array(&self, name: &str) {
        self.file(name, &u64s_le(&(0..100).map(|i| 1000 + i * 1000).collect::<Vec<_>>()));
    }
}

// ---- per-channel arrays ----

#[test]
fn truncated_last_record_of_an_array() {
    let d = Dir::new();
    let mut b = u64s_le(&(1..=100).collect::<Vec<_>>());
    b.extend_from_slice(&[1, 2, 3]);
    d.file("t.u64", &b);
    let out = run(d.path(), &["inspect", "1=t.u64"]);
    expect(&out, 2, &["t.u64", "byte offset 800", "trailing partial record of 3 bytes", "file size 803", "whole number of 8-byte"]);
}

#[test]
fn time_going_backwards_in_an_array() {
    let d = Dir::new();
    d.file("b.u64", &u64s_le(&[10, 20, 30, 25, 40]));
    d.good_array("g.u64");
    let out = run(d.path(), &["count", "-w", "1000", "1=b.u64", "2=g.u64"]);
    expect(&out, 2, &["b.u64", "record 3 (byte offset 24)", "timestamp 25 ps after 30 ps", "≥ 30 ps"]);
}

/// The whole-file `count`, `scan` and `sweep` check a channel's order during their first
/// pass over it (src/engine/parallel.rs); the message must still be the reader's, and the
/// descent must be found wherever it lies: in channel B far from every A event, or in a
/// channel that is in no pair.
#[test]
fn time_going_backwards_found_by_every_whole_file_pass() {
    let d = Dir::new();
    d.good_array("g.u64"); // 1000 ps … 100 000 ps
    // B reaches far past A's last event (100 µs); its descent sits at 5 ms, where no A
    // event's window reaches.
    let mut far: Vec<u64> = (0..100).map(|i| 1_000 + i * 1_000).collect();
    far.extend((0..50).map(|i| 5_000_000 + i * 10));
    far[120] = far[119] - 3;
    d.file("far.u64", &u64s_le(&far));
    let (t, t0) = (far[120], far[119]);
    let found = format!("timestamp {t} ps after {t0} ps");
    for cmd in [
        &["count", "-w", "1000", "1=g.u64", "2=far.u64"][..],
        &["scan", "--half-range-ps", "2000", "--bin-ps", "100", "1=g.u64", "2=far.u64"][..],
        &["sweep", "--windows-ps", "500,1000", "1=g.u64", "2=far.u64"][..],
    ] {
        let out = run(d.path(), cmd);
        expect(&out, 2, &["far.u64", "record 120 (byte offset 960)", &found]);
    }
    // Channel 3 is in no pair counted; its descent is still found.
    d.file("b.u64", &u64s_le(&[10, 20, 30, 25, 40]));
    d.good_array("h.u64");
    let out = run(d.path(), &["count", "-w", "1000", "--pairs", "1:2", "1=g.u64", "2=h.u64", "3=b.u64"]);
    expect(&out, 2, &["b.u64", "record 3 (byte offset 24)", "timestamp 25 ps after 30 ps"]);
}

#[test]
fn byte_swapped_array_gets_the_hint() {
    let d = Dir::new();
    let b: Vec<u8> = (1..200u64).flat_map(|v| (v * 1000).to_be_bytes()).collect();
    d.file("s.u64", &b);
    d.good_array("g.u64");
    let out = run(d.path(), &["count", "-w", "1000", "1=s.u64", "2=g.u64"]);
    expect(&out, 2, &["s.u64", "record 0 (byte offset 0)", "below 2^62", "hint: values look byte-swapped"]);
}

#[test]
fn zero_length_file() {
    let d = Dir::new();
    d.file("e.u64", b"");
    expect(&run(d.path(), &["inspect", "1=e.u64"]), 2, &["e.u64", "whole file", "an empty file (0 bytes)", "at least one 8-byte"]);
    // Without CH= the file could be a container or records: the message says which it is not.
    expect(&run(d.path(), &["inspect", "e.u64"]), 2, &["e.u64", "an empty file (0 bytes)", "not a container file"]);
}

#[test]
fn directory_as_input() {
    let d = Dir::new();
    std::fs::create_dir(d.path().join("sub")).unwrap();
    expect(&run(d.path(), &["inspect", "sub"]), 2, &["sub", "is a directory, expected a tag file"]);
}

#[test]
fn missing_file() {
    let d = Dir::new();
    expect(&run(d.path(), &["inspect", "1=nope.u64"]), 2, &["nope.u64", "No such file or directory (os error 2), expected an existing tag file"]);
}

#[test]
fn fifo_as_input_is_refused_not_waited_on() {
    let d = Dir::new();
    let fifo = d.path().join("pipe");
    let made = std::process::Command::new("mkfifo").arg(&fifo).status().map(|s| s.success()).unwrap_or(false);
    if !made {
        eprintln!("skipped: mkfifo not available");
        return;
    }
    expect(&run(d.path(), &["inspect", "1=pipe"]), 2, &["pipe", "not a regular file", "expected a tag file"]);
}

/// chmod 000 does not stop root; as root the binary runs as `nobody` (uid 65534) instead.
#[test]
fn unreadable_file() {
    use std::os::unix::fs::PermissionsExt;
    use std::os::unix::process::CommandExt;
    let d = Dir::new();
    std::fs::set_permissions(d.path(), std::fs::Permissions::from_mode(0o755)).unwrap();
    d.good_array("locked.u64");
    let p = d.path().join("locked.u64");
    std::fs::set_permissions(&p, std::fs::Permissions::from_mode(0o000)).unwrap();
    let mut cmd = common::tagsieve();
    cmd.current_dir(d.path()).args(["inspect", "1=locked.u64"]);
    // SAFETY: geteuid has no preconditions.
    if unsafe { libc::geteuid() } == 0 {
        cmd.uid(65534).gid(65534);
    }
    let out = match cmd.output() {
        Ok(o) => o,
        Err(e) => {
            eprintln!("skipped: cannot run the binary as uid 65534: {e}");
            return;
        }
    };
    expect(&out, 2, &["locked.u64", "Permission denied (os error 13), expected a file this user may read"]);
}

#[test]
fn channel_named_twice_across_inputs() {
    let d = Dir::new();
    d.good_array("x.u64");
    d.good_array("y.u64");
    let out = run(d.path(), &["count", "-w", "1000", "1=x.u64", "1=y.u64"]);
    expect(&out, 2, &["channel 1 appears twice: in x.u64 and in y.u64"]);
}

// ---- interleaved records ----

#[test]
fn truncated_last_record_of_records() {
    let d = Dir::new();
    let mut b = records(&(0..50).map(|i| (1000 + 100 * i, 1 + i as u32 % 2)).collect::<Vec<_>>());
    b.extend_from_slice(&[0; 5]);
    d.file("r.bin", &b);
    let out = run(d.path(), &["inspect", "r.bin", "--layout", LAYOUT16]);
    expect(&out, 2, &["r.bin", "byte offset 800", "trailing partial record of 5 bytes", "whole number of 16-byte records"]);
}

#[test]
fn time_going_backwards_in_records() {
    let d = Dir::new();
    d.file("r.bin", &records(&[(10, 1), (20, 2), (30, 1), (15, 2), (40, 1)]));
    let out = run(d.path(), &["count", "-w", "1000", "r.bin", "--layout", LAYOUT16]);
    expect(&out, 2, &["r.bin", "record 3 (byte offset 48)", "time counter 15 ticks after 30 ticks", "≥ 30 ticks"]);
}

#[test]
fn records_without_layout() {
    let d = Dir::new();
    d.file("r.bin", &records(&[(1000, 1), (2000, 2)]));
    // 1000 = 0x3e8, little-endian: e8 03 00 ...
    expect(&run(d.path(), &["count", "-w", "1000", "r.bin"]), 2, &["r.bin", "byte offset 0", "first bytes [e8, 03", "no --layout given"]);
}

#[test]
fn byte_swapped_records_get_the_hint() {
    let d = Dir::new();
    let b: Vec<u8> = (1..500u64).flat_map(|t| [&(t * 1000).to_be_bytes()[..], &1u32.to_le_bytes()[..], &[0u8; 4][..]].concat()).collect();
    d.file("r.bin", &b);
    let out = run(d.path(), &["count", "-w", "1000", "r.bin", "--layout", LAYOUT16]);
    expect(&out, 2, &["r.bin", "record 0 (byte offset 0)", "below 2^62", "hint: records look byte-swapped: try time=0:8:be"]);
}

/// A 16-bit counter in a 32-bit field that wraps (…, 65 000, then 66 000 − 65 536 = 464)
/// while the layout has no wrap: the step back fails, with a hint naming the wrap.
#[test]
fn counter_wraps_but_the_layout_has_no_wrap() {
    let d = Dir::new();
    let b: Vec<u8> = (0..200u32).flat_map(|i| [(i * 1000 % 65_536).to_le_bytes(), 1u32.to_le_bytes()].concat()).collect();
    d.file("w.bin", &b);
    let out = run(d.path(), &["count", "-w", "1000", "w.bin", "--layout", "rec=8,time=0:4:le,chan=4:4:le,tick_ps=1"]);
    // Record 66 (byte offset 66 · 8 = 528) holds 464 after 65 000.
    expect(&out, 2, &["w.bin", "record 66 (byte offset 528)", "time counter 464 ticks after 65000 ticks", "hint:", "add wrap=16"]);
}

/// The opposite mismatch, wrap=16 on a counter that really uses 32 bits, is no error by
/// the format's rule (docs/formats.md: only the low wrap_bits are the counter, higher bits
/// are ignored): with steps below 2^16 ticks the wraps rebuild the true times exactly.
#[test]
fn narrow_wrap_reads_the_low_bits_of_a_wider_counter() {
    let d = Dir::new();
    let b: Vec<u8> = (0..200u32).flat_map(|i| [(i * 1000).to_le_bytes(), 1u32.to_le_bytes()].concat()).collect();
    d.file("w.bin", &b);
    let out = run(d.path(), &["--json", "inspect", "w.bin", "--layout", "rec=8,time=0:4:le,chan=4:4:le,tick_ps=1,wrap=16"]);
    expect(&out, 0, &[]);
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    // The data: 200 tags at 0, 1000, …, 199 000 ps.
    assert_eq!((v["totals"]["events"].as_u64(), v["totals"]["max_ps"].as_u64()), (Some(200), Some(199_000)), "{v}");
}

#[test]
fn wrap_wider_than_the_field() {
    let d = Dir::new();
    d.file("w.bin", &[0u8; 16]);
    let out = run(d.path(), &["count", "-w", "1000", "w.bin", "--layout", "rec=8,time=0:4:le,chan=4:4:le,tick_ps=1,wrap=40"]);
    expect(&out, 2, &["wrap=40 bits does not fit the 32-bit time field", "expected 1..=32"]);
}

#[test]
fn zero_and_negative_tick_in_a_layout() {
    let d = Dir::new();
    d.file("r.bin", &records(&[(1000, 1)]));
    let zero = run(d.path(), &["inspect", "r.bin", "--layout", "rec=16,time=0:8:le,chan=8:4:le,tick_ps=0"]);
    expect(&zero, 2, &["tick length 0", "must be positive"]);
    let toml = "record_bytes = 16\ntick_ps = -2\n[time]\noffset = 0\nwidth = 8\n[channel]\noffset = 8\nwidth = 4\n";
    d.file("neg.toml", toml.as_bytes());
    expect(&run(d.path(), &["inspect", "r.bin", "--layout", "neg.toml"]), 2, &["neg.toml: line 2", "tick length -2", "must be positive"]);
}

#[test]
fn layout_toml_with_an_unknown_key() {
    let d = Dir::new();
    d.file("r.bin", &records(&[(1000, 1)]));
    let toml = "record_bytes = 16\ntick_ps = 1\ncolour = 2\n[time]\noffset = 0\nwidth = 8\n[channel]\noffset = 8\nwidth = 4\n";
    d.file("l.toml", toml.as_bytes());
    expect(&run(d.path(), &["inspect", "r.bin", "--layout", "l.toml"]), 2, &["l.toml: line 3", "unknown field `colour`", "expected one of"]);
}

// ---- container ----

#[test]
fn container_wrong_magic() {
    let d = Dir::new();
    let mut b = container(1, 1000, &[(1, &[5, 9])]);
    b[1] = b'X';
    d.file("m.tsieve", &b);
    expect(&run(d.path(), &["inspect", "m.tsieve"]), 2, &["m.tsieve", "byte offset 0", "first bytes [7f, 58, 53", "not a container file (its .tsieve magic is [7f, 54, 53"]);
}

#[test]
fn container_unknown_version() {
    let d = Dir::new();
    d.file("v.tsieve", &container(7, 1000, &[(1, &[5, 9])]));
    expect(&run(d.path(), &["inspect", "v.tsieve"]), 2, &["v.tsieve", "byte offset 8", "found version 7", "expected version 1"]);
}

#[test]
fn container_channel_table_past_end_of_file() {
    let d = Dir::new();
    let mut b = container(1, 1000, &[(1, &[5, 9])]);
    b[12..16].copy_from_slice(&1000u32.to_le_bytes());
    d.file("t.tsieve", &b);
    // 96 + 1000 · 64 = 64 096.
    expect(&run(d.path(), &["inspect", "t.tsieve"]), 2, &["t.tsieve", "byte offset 96", "1000 entries ending at byte 64096", "past the end of the 176-byte file"]);
}

#[test]
fn container_section_cut_short() {
    let d = Dir::new();
    let mut b = container(1, 1000, &[(1, &[5, 9, 12])]);
    b.truncate(b.len() - 4);
    d.file("c.tsieve", &b);
    let out = run(d.path(), &["inspect", "c.tsieve"]);
    expect(&out, 2, &["c.tsieve", "channel table entry 0 (byte offset 96)", "3 timestamps at byte 160 running past the end of the 180-byte file"]);
}

#[test]
fn container_overlapping_channel_sections() {
    let d = Dir::new();
    let mut b = container(1, 1000, &[(1, &[5, 9, 12]), (2, &[6, 7])]);
    // Entry 1 (at byte 160) gets the section offset of entry 0 + 8: inside entry 0's section.
    put_u64(&mut b, 160 + 16, 224 + 8);
    d.file("o.tsieve", &b);
    let out = run(d.path(), &["inspect", "o.tsieve"]);
    expect(&out, 2, &["o.tsieve", "channel table entry 1 (byte offset 160)", "starting at byte 232, inside entry 0's section (ends at 248)", "non-overlapping"]);
}

#[test]
fn container_zero_and_negative_tick_length() {
    let d = Dir::new();
    d.file("z.tsieve", &container(1, 0, &[(1, &[5])]));
    d.file("n.tsieve", &container(1, -5, &[(1, &[5])]));
    expect(&run(d.path(), &["inspect", "z.tsieve"]), 2, &["z.tsieve", "byte offset 16", "tick length 0 fs", "a positive tick length"]);
    expect(&run(d.path(), &["inspect", "n.tsieve"]), 2, &["n.tsieve", "byte offset 16", "tick length -5 fs", "a positive tick length"]);
}

#[test]
fn time_going_backwards_in_a_container() {
    let d = Dir::new();
    d.file("b.tsieve", &container(1, 1000, &[(1, &[5, 9, 12]), (2, &[6, 40, 7])]));
    let out = run(d.path(), &["count", "-w", "1000", "b.tsieve"]);
    // Channel 2's section starts at 96 + 2 · 64 + 3 · 8 = 248; its record 2 sits at 264.
    expect(&out, 2, &["b.tsieve", "record 2 (byte offset 264)", "timestamp 7 ps after 40 ps", "≥ 40 ps"]);
}

// ---- run manifests ----

/// A valid four-detector CHSH manifest (the inputs need not exist: these checks come first).
fn manifest() -> String {
    let mut t = String::from("manifest_version = 1\nsetup = \"four-detectors\"\n\n[roles]\n\"alice+\" = 1\nalice- = 2\n\"bob+\" = 3\nbob- = 4\n\n");
    t += "[settings.alice]\na = 0.0\n\"a'\" = 45.0\n\n[settings.bob]\nb = 22.5\n\"b'\" = 67.5\n\n";
    for n in 1..=4 {
        t += &format!("[[channel]]\nnumber = {n}\nname = \"ch{n}\"\n\n");
    }
    for (name, a, b) in [("ab", "a", "b"), ("abp", "a", "b'"), ("apb", "a'", "b"), ("apbp", "a'", "b'")] {
        t += &format!("[[block]]\nname = \"{name}\"\nalice = \"{a}\"\nbob = \"{b}\"\nformat = \"container\"\ninputs = [\"{name}.tsieve\"]\n\n");
    }
    t
}

/// 1-based line of the `nth` (0-based) line equal to `needle`.
fn line_of(text: &str, needle: &str, nth: usize) -> usize {
    text.lines().enumerate().filter(|(_, l)| *l == needle).nth(nth).expect("line in fixture").0 + 1
}

#[test]
fn manifest_with_an_unknown_key() {
    let d = Dir::new();
    let t = manifest().replace("setup = ", "colour = 3\nsetup = ");
    d.file("run.toml", t.as_bytes());
    let line = format!("run.toml: line {}", line_of(&t, "colour = 3", 0));
    expect(&run(d.path(), &["chsh", "-w", "1000", "run.toml"]), 2, &[&line, "unknown field `colour`", "expected one of"]);
}

#[test]
fn manifest_missing_a_block() {
    let d = Dir::new();
    let full = manifest();
    let t = &full[..full.find("[[block]]\nname = \"apbp\"").unwrap()];
    d.file("run.toml", t.as_bytes());
    let line = format!("run.toml: line {}", t.lines().count());
    expect(&run(d.path(), &["chsh", "-w", "1000", "run.toml"]), 2, &[&line, "missing block", "alice = \"a'\" and bob = \"b'\""]);
    // No [[block]] at all.
    let none = &full[..full.find("[[block]]").unwrap()];
    d.file("none.toml", none.as_bytes());
    expect(&run(d.path(), &["chsh", "-w", "1000", "none.toml"]), 2, &["none.toml: line", "no blocks: add one [[block]] table"]);
}

#[test]
fn manifest_with_a_duplicate_channel() {
    let d = Dir::new();
    let t = manifest().replace("number = 4\n", "number = 3\n");
    d.file("run.toml", t.as_bytes());
    let (first, again) = (line_of(&t, "number = 3", 0), line_of(&t, "number = 3", 1));
    let want = format!("run.toml: line {again}: duplicate channel 3 (first given on line {first})");
    expect(&run(d.path(), &["chsh", "-w", "1000", "run.toml"]), 2, &[&want]);
}

#[test]
fn manifest_role_without_a_channel() {
    let d = Dir::new();
    let t = manifest().replace("bob- = 4", "bob- = 9");
    d.file("run.toml", t.as_bytes());
    let want = format!("run.toml: line {}: role bob- names channel 9, which no [[channel]] table defines", line_of(&t, "bob- = 9", 0));
    expect(&run(d.path(), &["chsh", "-w", "1000", "run.toml"]), 2, &[&want]);
}

// ---- command-line values ----

fn good_pair(d: &Dir) {
    d.good_array("x.u64");
    d.file("y.u64", &u64s_le(&(0..100).map(|i| 1200 + i * 1000).collect::<Vec<_>>()));
}

#[test]
fn window_of_zero() {
    let d = Dir::new();
    good_pair(&d);
    expect(&run(d.path(), &["count", "--window-ps", "0", "1=x.u64", "2=y.u64"]), 2, &["--window-ps", "0 ps is not allowed here", "expected a whole number of ps > 0"]);
}

#[test]
fn negative_window_gets_the_same_message_spaced_or_joined() {
    let d = Dir::new();
    good_pair(&d);
    let parts = ["--window-ps", "-5 ps is not allowed here", "expected a whole number of ps > 0"];
    let spaced = expect(&run(d.path(), &["count", "--window-ps", "-5", "1=x.u64", "2=y.u64"]), 2, &parts);
    let joined = expect(&run(d.path(), &["count", "--window-ps=-5", "1=x.u64", "2=y.u64"]), 2, &parts);
    assert_eq!(spaced, joined);
}

#[test]
fn scan_span_and_bin_of_zero() {
    let d = Dir::new();
    good_pair(&d);
    expect(&run(d.path(), &["scan", "--half-range-ps", "0", "1=x.u64", "2=y.u64"]), 2, &["--half-range-ps", "0 ps is not allowed here"]);
    expect(&run(d.path(), &["scan", "--bin-ps", "0", "1=x.u64", "2=y.u64"]), 2, &["--bin-ps", "0 ps is not allowed here"]);
}

// ---- outputs ----

#[test]
fn output_in_a_missing_directory() {
    let d = Dir::new();
    good_pair(&d);
    let out = run(d.path(), &["count", "-w", "1000", "1=x.u64", "2=y.u64", "-o", "nodir/c.h5"]);
    expect(&out, 2, &["nodir/c.h5", "output directory nodir does not exist"]);
}

#[test]
fn output_that_already_exists() {
    let d = Dir::new();
    good_pair(&d);
    d.file("c.h5", b"keep me");
    let out = run(d.path(), &["count", "-w", "1000", "1=x.u64", "2=y.u64", "-o", "c.h5"]);
    expect(&out, 2, &["c.h5", "output exists; pass --force"]);
    assert_eq!(std::fs::read(d.path().join("c.h5")).unwrap(), b"keep me");
}

/// Mounts a 64 KiB tmpfs (needs root on Linux) and writes more than fits.
#[test]
fn full_disk_during_the_write() {
    let d = Dir::new();
    let mnt = d.path().join("small");
    std::fs::create_dir(&mnt).unwrap();
    let mounted = std::process::Command::new("mount").args(["-t", "tmpfs", "-o", "size=64k", "tmpfs"]).arg(&mnt).output();
    if !mounted.as_ref().is_ok_and(|o| o.status.success()) {
        eprintln!("skipped: cannot mount a tmpfs here ({mounted:?})");
        return;
    }
    // 20 000 timestamps = 160 000 bytes of container sections: more than 64 KiB.
    d.file("big.u64", &u64s_le(&(0..20_000).map(|i| i * 100).collect::<Vec<_>>()));
    let import = run(d.path(), &["import", "-q", "1=big.u64", "-o", "small/x.tsieve"]);
    let json = run(d.path(), &["scan", "-q", "1=big.u64", "2=big.u64", "--format", "json", "-o", "small/s.json"]);
    let left: Vec<_> = std::fs::read_dir(&mnt).unwrap().map(|e| e.unwrap().file_name()).collect();
    let _ = std::process::Command::new("umount").arg(&mnt).status();
    expect(&import, 1, &["small/x.tsieve", "No space left on device"]);
    expect(&json, 1, &["small/s.json", "No space left on device"]);
    assert!(left.is_empty(), "left behind on the full disk: {left:?}");
}

// ---- files that change underneath ----

/// A 400 MB per-channel file on tmpfs (else the temp dir), mapped by `inspect` and
/// truncated to 0 once the mapping shows in /proc/PID/maps: page accesses then fault.
#[test]
fn input_truncated_while_mapped_exits_1_with_a_message() {
    let run = Truncation::new(50_000_000);
    let (out, seen) = run.cut_when(&["inspect", "-q"], Ready::Mapped, 0);
    assert!(seen, "the mapping never appeared in /proc/PID/maps");
    expect_changed_exit(&out);
}

/// The same during `import`, once its first temporary (a per-channel spill) exists: the
/// SIGBUS handler must unlink it, so nothing is left beside the output.
#[test]
fn import_truncated_while_mapped_leaves_no_temporary() {
    let run = Truncation::new(50_000_000);
    let out_dir = run.dir.path().join("out");
    std::fs::create_dir(&out_dir).unwrap();
    let dest = out_dir.join("x.tsieve");
    let dest = dest.to_str().unwrap();
    let (out, seen) = run.cut_when(&["import", "-q", "-o", dest], Ready::TempIn(&out_dir), 0);
    assert!(seen, "no temporary output ever appeared in {}", out_dir.display());
    expect_changed_exit(&out);
    let left: Vec<_> = std::fs::read_dir(&out_dir).unwrap().map(|e| e.unwrap().file_name()).collect();
    assert!(left.is_empty(), "left behind: {left:?}");
}

/// With --no-mmap a shrinking file shows as a short read or a size check: exit 1, named.
#[test]
fn input_truncated_while_read_buffered_exits_1() {
    let run = Truncation::new(25_000_000);
    let (out, seen) = run.cut_when(&["inspect", "-q", "--no-mmap"], Ready::Open, 8000);
    assert!(seen, "the file never appeared among the open files");
    let err = expect(&out, 1, &["big.u64", "file changed while it was read", "with --no-mmap"]);
    assert!(err.contains("before") && err.contains("8000 after"), "{err}");
}

/// Exit code 1 with one of the two changed-file messages; not a signal death
/// (`code()` is `None` when a signal ended the process) and no panic.
#[track_caller]
fn expect_changed_exit(out: &Output) {
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(!err.contains("panicked"), "{err}");
    assert_eq!(out.status.code(), Some(1), "{:?}: {err}", out.status);
    assert!(
        err.contains("big.u64: input file changed size while mapped; rerun on a stable copy or with --no-mmap")
            || err.contains("file changed while it was read"),
        "{err}"
    );
}

/// When to cut the input: once it is mapped, once it is open, or once a `.partial`
/// temporary shows in a directory.
enum Ready<'a> {
    Mapped,
    Open,
    TempIn(&'a Path),
}

/// A large per-channel input on tmpfs (else the temp dir) to cut while a command reads it.
struct Truncation {
    dir: tempfile::TempDir,
    input: PathBuf,
}

impl Truncation {
    fn new(n: u64) -> Self {
        let base = if Path::new("/dev/shm").is_dir() { PathBuf::from("/dev/shm") } else { std::env::temp_dir() };
        let dir = tempfile::tempdir_in(base).unwrap();
        let input = dir.path().join("big.u64");
        write_ramp(&input, n);
        Truncation { dir, input }
    }

    /// Run `args` + `1=INPUT`, wait for `ready`, cut the input to `new_len` bytes; the
    /// output and whether `ready` was seen (within about 5 s).
    fn cut_when(&self, args: &[&str], ready: Ready, new_len: u64) -> (Output, bool) {
        let child = common::tagsieve()
            .args(args)
            .arg(format!("1={}", self.input.display()))
            .stdout(std::process::Stdio::null())
            .stderr(std::process::Stdio::piped())
            .spawn()
            .unwrap();
        let seen = self.wait_for(child.id(), &ready);
        std::fs::OpenOptions::new().write(true).open(&self.input).unwrap().set_len(new_len).unwrap();
        (child.wait_with_output().unwrap(), seen)
    }

    fn wait_for(&self, pid: u32, ready: &Ready) -> bool {
        let name = self.input.to_string_lossy().into_owned();
        let until = std::time::Instant::now() + std::time::Duration::from_secs(5);
        while std::time::Instant::now() < until {
            let found = match ready {
                Ready::Mapped => std::fs::read_to_string(format!("/proc/{pid}/maps")).is_ok_and(|m| m.contains(&name)),
                Ready::Open => std::fs::read_dir(format!("/proc/{pid}/fd")).is_ok_and(|mut it| {
                    it.any(|e| e.is_ok_and(|e| std::fs::read_link(e.path()).is_ok_and(|l| l == self.input)))
                }),
                Ready::TempIn(d) => std::fs::read_dir(d)
                    .is_ok_and(|mut it| it.any(|e| e.is_ok_and(|e| e.file_name().to_string_lossy().ends_with(".partial")))),
            };
            if found {
                return true;
            }
            std::thread::sleep(std::time::Duration::from_micros(20));
        }
        false
    }
}

/// `n` ascending u64 values, written in 8 MB pieces.
fn write_ramp(p: &Path, n: u64) {
    let mut f = std::io::BufWriter::new(std::fs::File::create(p).unwrap());
    let mut buf = Vec::with_capacity(8 << 20);
    for start in (0..n).step_by(1 << 20) {
        buf.clear();
        (start..n.min(start + (1 << 20))).for_each(|v| buf.extend_from_slice(&(v * 10).to_le_bytes()));
        f.write_all(&buf).unwrap();
    }
    f.flush().unwrap();
}

/// The streamed pass's own order check (the engine's streamer) reports through the
/// reader: the located message names the file, the record and its byte offset.
#[test]
fn streamed_descent_found_by_the_engine_is_located_by_the_reader() {
    use tagsieve::read::{self, layout::RecordLayout, ReadOptions};
    let d = tempfile::tempdir().unwrap();
    let mut ev: Vec<(u64, u32)> = (0..200u64).map(|i| (1_000 + 10 * i, 1 + (i % 2) as u32)).collect();
    ev[121].0 = 5; // channel 2 goes backwards at record 121
    std::fs::write(d.path().join("r.bin"), records(&ev)).unwrap();
    let layout = RecordLayout::from_arg(LAYOUT16).unwrap();
    let path = d.path().join("r.bin").display().to_string();
    let sources = read::open_inputs(&[path], Some(&layout), ReadOptions::mapped()).unwrap();
    let e = read::locate_disorder_streamed::<()>(Err(tagsieve::Error::Unordered { channel: 2 }), sources[0].as_ref()).unwrap_err();
    let msg = e.to_string();
    assert_eq!(e.exit_code(), 2);
    for part in ["r.bin", "record 121", "byte offset 1936"] {
        assert!(msg.contains(part), "{msg} lacks {part}");
    }
}
