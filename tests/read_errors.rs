//! Each bad input gets its own message naming the file, the record or byte offset, what
//! was found and what was expected, and exit code 2 through the binary.

mod common;

use std::path::{Path, PathBuf};
use tagsieve::read::container::{write_container, Container};
use tagsieve::read::{ReadOptions, TagSource};
use tagsieve::ChannelTags;

/// Run the binary; return (exit code, stderr).
fn run(args: &[&str]) -> (i32, String) {
    let out = common::tagsieve().arg("--quiet").args(args).output().unwrap();
    (out.status.code().unwrap(), String::from_utf8_lossy(&out.stderr).into_owned())
}

/// `import` (strict reader) must fail with exit 2 and every `needles` text in the message.
fn import_fails(inputs: &[&str], extra: &[&str], needles: &[&str]) {
    let d = tempfile::tempdir().unwrap();
    let out = d.path().join("o.tsieve");
    let mut args = vec!["import"];
    args.extend_from_slice(inputs);
    args.extend_from_slice(extra);
    args.extend(["-o", out.to_str().unwrap()]);
    let (code, err) = run(&args);
    assert_eq!(code, 2, "{args:?}: {err}");
    for n in needles {
        assert!(err.contains(n), "{args:?}: expected {n:?} in: {err}");
    }
    assert!(!out.exists());
    assert_eq!(std::fs::read_dir(d.path()).unwrap().count(), 0, "temporaries left behind");
}

fn file(dir: &Path, name: &str, bytes: &[u8]) -> PathBuf {
    let p = dir.join(name);
    std::fs::write(&p, bytes).unwrap();
    p
}

fn le(values: &[u64]) -> Vec<u8> {
    values.iter().flat_map(|v| v.to_le_bytes()).collect()
}

#[test]
fn channel_array_errors() {
    let d = tempfile::tempdir().unwrap();
    let part = file(d.path(), "part.u64", &[le(&[1, 2]), vec![9, 9, 9]].concat());
    import_fails(&[&format!("1={}", part.display())], &[], &["part.u64", "byte offset 16", "trailing partial record of 3 bytes"]);
    let empty = file(d.path(), "empty.u64", b"");
    import_fails(&[&format!("1={}", empty.display())], &[], &["empty.u64", "empty file"]);
    let back = file(d.path(), "back.u64", &le(&[3, 9, 5, 11]));
    import_fails(&[&format!("1={}", back.display())], &[], &["back.u64", "record 2 (byte offset 16)", "timestamp 5 ps after 9 ps", "expected ≥ 9 ps"]);
    let huge = file(d.path(), "huge.u64", &le(&[3, 1 << 62]));
    import_fails(&[&format!("1={}", huge.display())], &[], &["huge.u64", "record 1 (byte offset 8)", "below 2^62"]);
    let be: Vec<u8> = [100u64, 200, 300, 400].iter().flat_map(|v| v.to_be_bytes()).collect();
    let be = file(d.path(), "be.u64", &be);
    import_fails(&[&format!("1={}", be.display())], &[], &["be.u64", "byte-swapped"]);
}

#[test]
fn input_set_errors() {
    let d = tempfile::tempdir().unwrap();
    let a = file(d.path(), "a.u64", &le(&[1, 2]));
    let b = file(d.path(), "b.u64", &le(&[1, 2]));
    let (sa, sb) = (format!("3={}", a.display()), format!("3={}", b.display()));
    import_fails(&[&sa, &sb], &[], &["channel 3 appears twice", "a.u64", "b.u64"]);
    let dir = d.path().join("sub");
    std::fs::create_dir(&dir).unwrap();
    let sd = format!("1={}", dir.display());
    import_fails(&[&sd], &[], &["sub", "is a directory"]);
    import_fails(&["1=/nonexistent/x.u64"], &[], &["/nonexistent/x.u64", "No such file"]);
    import_fails(&[a.to_str().unwrap()], &[], &["a.u64", "not a container file", "no --layout given"]);
}

fn rec16(pairs: &[(u64, u16)], big: bool) -> Vec<u8> {
    pairs
        .iter()
        .flat_map(|&(t, c)| {
            let mut r = if big { t.to_be_bytes().to_vec() } else { t.to_le_bytes().to_vec() };
            r.extend_from_slice(&c.to_le_bytes());
            r.extend_from_slice(&[0; 6]);
            r
        })
        .collect()
}

#[test]
fn record_errors() {
    let d = tempfile::tempdir().unwrap();
    let spec = "rec=16,time=0:8:le,chan=8:2:le,tick_ps=1";
    let good = rec16(&[(10, 1), (20, 2), (30, 1)], false);
    let part = file(d.path(), "part.bin", &good[..40]);
    import_fails(&[part.to_str().unwrap()], &["--layout", spec], &["part.bin", "byte offset 32", "trailing partial record of 8 bytes"]);
    let back = file(d.path(), "back.bin", &rec16(&[(10, 1), (30, 2), (20, 1)], false));
    import_fails(&[back.to_str().unwrap()], &["--layout", spec], &["back.bin", "record 2 (byte offset 32)", "time counter 20 ticks after 30 ticks"]);
    let pairs: Vec<(u64, u16)> = (1..50).map(|i| (i * 1000, 1)).collect();
    let swapped = file(d.path(), "swapped.bin", &rec16(&pairs, true));
    import_fails(&[swapped.to_str().unwrap()], &["--layout", spec], &["swapped.bin", "records look byte-swapped: try time=0:8:be"]);
    let empty = file(d.path(), "empty.bin", b"");
    import_fails(&[empty.to_str().unwrap()], &["--layout", spec], &["empty.bin", "empty file"]);
    let short = file(d.path(), "short.bin", &good[..8]);
    import_fails(&[short.to_str().unwrap()], &["--layout", &format!("{spec},skip=16")], &["short.bin", "more than the 16 header bytes"]);
    let g = file(d.path(), "good.bin", &good);
    let gp = g.to_str().unwrap();
    for (layout, want) in [
        ("rec=16,time=0:8:le,chan=8:2:le,tick_ps=0", "must be positive"),
        ("rec=16,time=0:8:le,chan=8:2:le,tick_ps=-12.345", "must be positive"),
        ("rec=16,time=0:8:le,chan=8:2:le,tick_ps=8o", "expected a positive decimal"),
        ("rec=16,time=0:4:le,chan=8:2:le,tick_ps=1,wrap=40", "does not fit the 32-bit time field"),
        ("rec=16,time=0:8:le,chan=15:2:le,tick_ps=1", "wider than the 16-byte record"),
    ] {
        import_fails(&[gp], &["--layout", layout], &[want]);
    }
}

#[test]
fn toml_layout_errors_carry_line_numbers() {
    let d = tempfile::tempdir().unwrap();
    let g = file(d.path(), "good.bin", &rec16(&[(10, 1)], false));
    let bad_key = file(d.path(), "l.toml", b"record_bytes = 16\ntick_ps = \"1\"\n[time]\noffset = 0\nwidth = 8\n[channel]\noffset = 8\nwidth = 2\nbyte_order = \"big\"\n");
    import_fails(&[g.to_str().unwrap()], &["--layout", bad_key.to_str().unwrap()], &["l.toml: line 9", "byte_order"]);
    let bad_tick = file(d.path(), "t.toml", b"record_bytes = 16\n\ntick_ps = \"0.0\"\n[time]\noffset = 0\nwidth = 8\n[channel]\noffset = 8\nwidth = 2\n");
    import_fails(&[g.to_str().unwrap()], &["--layout", bad_tick.to_str().unwrap()], &["t.toml: line 3", "must be positive"]);
}

/// A valid two-channel container to corrupt at the offsets docs/formats.md gives.
fn container(dir: &Path) -> (PathBuf, Vec<u8>) {
    let p = dir.join("c.tsieve");
    let chans = [ChannelTags::owned(1, "a", vec![1, 5, 9]), ChannelTags::owned(2, "b", vec![2, 4])];
    write_container(&p, &chans, 1.0, "t").unwrap();
    let bytes = std::fs::read(&p).unwrap();
    (p, bytes)
}

fn patched(dir: &Path, base: &[u8], at: usize, value: &[u8]) -> PathBuf {
    let mut b = base.to_vec();
    b[at..at + value.len()].copy_from_slice(value);
    file(dir, "bad.tsieve", &b)
}

fn open_err(p: &Path) -> String {
    match Container::open(p, ReadOptions::mapped()).and_then(|c| c.channels().map(|_| ())) {
        Ok(()) => panic!("{} opened", p.display()),
        Err(e) => {
            assert_eq!(e.exit_code(), 2);
            e.to_string()
        }
    }
}

#[test]
fn container_errors() {
    let d = tempfile::tempdir().unwrap();
    let (_, base) = container(d.path());
    // Entries at 96 and 160: channel +0, count +8, offset +16; sections from 224.
    let cases: [(usize, Vec<u8>, &[&str]); 9] = [
        (0, b"XTSIEVE\n".to_vec(), &["byte offset 0", "container magic"]),
        (8, 2u32.to_le_bytes().to_vec(), &["byte offset 8", "version 2"]),
        (12, 9u32.to_le_bytes().to_vec(), &["channel table of 9 entries", "past the end"]),
        (16, 0i64.to_le_bytes().to_vec(), &["byte offset 16", "tick length 0 fs"]),
        (16, (-80955i64).to_le_bytes().to_vec(), &["tick length -80955 fs"]),
        (160, 1u32.to_le_bytes().to_vec(), &["entry 1 (byte offset 160)", "channel 1 again"]),
        (176, 228u64.to_le_bytes().to_vec(), &["entry 1", "not a multiple of 8"]),
        (176, 232u64.to_le_bytes().to_vec(), &["entry 1", "inside entry 0's section"]),
        (104, 99u64.to_le_bytes().to_vec(), &["entry 0", "past the end"]),
    ];
    for (at, value, needles) in cases {
        let p = patched(d.path(), &base, at, &value);
        let e = open_err(&p);
        for n in needles {
            assert!(e.contains(n) && e.contains("bad.tsieve"), "patch at {at}: expected {n:?} in: {e}");
        }
    }
    let p = patched(d.path(), &base, 176, &64u64.to_le_bytes());
    assert!(open_err(&p).contains("inside the header or channel table"));
    // Timestamps backwards in channel 1 (record 1 at byte 232): 5 → 0.
    let p = patched(d.path(), &base, 232, &0u64.to_le_bytes());
    let e = open_err(&p);
    assert!(e.contains("record 1 (byte offset 232): found timestamp 0 ps after 1 ps"), "{e}");
    let empty = file(d.path(), "empty.tsieve", b"");
    assert!(Container::open(&empty, ReadOptions::mapped()).unwrap_err().to_string().contains("empty file"));
}

#[test]
fn container_errors_exit_2_through_the_binary() {
    let d = tempfile::tempdir().unwrap();
    let (_, base) = container(d.path());
    let p = patched(d.path(), &base, 8, &7u32.to_le_bytes());
    let (code, err) = run(&["inspect", p.to_str().unwrap()]);
    assert_eq!(code, 2, "{err}");
    assert!(err.contains("bad.tsieve: byte offset 8: found version 7"), "{err}");
}

/// Containers are written as `.tsieve`; one still named `.sieve` (the earlier extension,
/// which shared-mime-info gives to the Sieve mail-filter language) is read the same, with a
/// deprecation note on stderr that --quiet silences.
#[test]
fn old_container_extension_is_read_with_a_note() {
    let d = tempfile::tempdir().unwrap();
    let st = common::tagsieve().current_dir(d.path()).args(["simulate", "-o", "run", "--duration-s", "0.05", "-q"]).status().unwrap();
    assert!(st.success());
    assert!(d.path().join("run/ab.tsieve").exists(), "simulate names containers .tsieve");
    std::fs::copy(d.path().join("run/ab.tsieve"), d.path().join("old.sieve")).unwrap();
    let new = common::tagsieve().current_dir(d.path()).args(["inspect", "--json", "run/ab.tsieve"]).output().unwrap();
    let old = common::tagsieve().current_dir(d.path()).args(["inspect", "--json", "old.sieve"]).output().unwrap();
    assert!(new.status.success() && old.status.success());
    let err = String::from_utf8_lossy(&old.stderr);
    assert!(err.contains("old.sieve: the .sieve extension is deprecated") && err.contains(".tsieve"), "{err}");
    assert!(!String::from_utf8_lossy(&new.stderr).contains("deprecated"));
    let events = |o: &std::process::Output| serde_json::from_slice::<serde_json::Value>(&o.stdout).unwrap()["totals"]["events"].clone();
    assert_eq!(events(&new), events(&old));
    let quiet = common::tagsieve().current_dir(d.path()).args(["inspect", "-q", "old.sieve"]).output().unwrap();
    assert!(!String::from_utf8_lossy(&quiet.stderr).contains("deprecated"));
}
