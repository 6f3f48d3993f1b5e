//! Tried as a new user would: the README's two commands are the ones CI runs, and the main
//! job (`tools/demo.sh`) run from a fresh clone produces the files its summary names, holding
//! the numbers it prints; every plot is a valid PNG or SVG of a sensible size.

mod common;
use std::path::Path;
use std::process::Command;
use tagsieve::output::{hdf5::read_document, AttrValue, ColumnData};

fn readme_commands() -> Vec<String> {
    let text = std::fs::read_to_string(common::root().join("README.md")).unwrap();
    let section = text.split("## The two commands").nth(1).expect("README has a 'The two commands' section");
    let block = section.split("```").nth(1).expect("a code block with the commands");
    block.lines().filter_map(|l| l.split('#').next()).map(str::trim).filter(|l| !l.is_empty() && *l != "sh").map(String::from).collect()
}

#[test]
fn readme_names_two_commands_and_ci_runs_the_test_one() {
    let cmds = readme_commands();
    assert_eq!(cmds, ["tools/demo.sh", "tools/test.sh"], "README commands: {cmds:?}");
    let ci = std::fs::read_to_string(common::root().join(".ci/run")).unwrap();
    assert!(ci.lines().any(|l| l.trim() == "exec ./tools/test.sh"), ".ci/run must call the README's test command");
}

fn png_size(path: &Path) -> (u32, u32) {
    let b = std::fs::read(path).unwrap();
    // PNG signature and the IHDR chunk first (ISO/IEC 15948, §5.2 and §11.2.2; from memory).
    assert_eq!(&b[..8], b"\x89PNG\r\n\x1a\n", "{} is not a PNG", path.display());
    assert_eq!(&b[12..16], b"IHDR");
    let w = u32::from_be_bytes(b[16..20].try_into().unwrap());
    let h = u32::from_be_bytes(b[20..24].try_into().unwrap());
    (w, h)
}

fn f64_attr(g: &tagsieve::output::Group, key: &str) -> f64 {
    match g.attr(key) {
        Some(AttrValue::F64(v)) => *v,
        other => panic!("attribute {key}: {other:?}"),
    }
}

#[test]
fn demo_from_a_fresh_clone_writes_what_its_summary_says() {
    let root = common::root();
    let tmp = tempfile::tempdir().unwrap();
    let clone = tmp.path().join("clone");
    let st = Command::new("git").args(["clone", "-q"]).arg(&root).arg(&clone).status().unwrap();
    assert!(st.success(), "git clone failed");
    // A target dir of its own that survives between runs, so only the first run builds deps.
    let out = Command::new(clone.join("tools/demo.sh"))
        .arg(tmp.path().join("demo"))
        .env("CARGO_TARGET_DIR", root.join("target/readme-clone"))
        .current_dir(&clone)
        .output()
        .unwrap();
    let stdout = String::from_utf8_lossy(&out.stdout).to_string();
    assert!(out.status.success(), "{stdout}\n{}", String::from_utf8_lossy(&out.stderr));

    let demo = tmp.path().join("demo");
    // Every path the summary lists exists.
    let listed: Vec<&str> = stdout.lines().map(str::trim).filter(|l| l.starts_with(&*demo.to_string_lossy())).collect();
    assert!(listed.len() >= 10, "{stdout}");
    for p in &listed {
        assert!(Path::new(p).is_file(), "{p} listed but missing");
        if p.ends_with(".png") {
            let (w, h) = png_size(Path::new(p));
            assert!(w >= 600 && h >= 400, "{p}: {w}×{h}");
        } else if p.ends_with(".svg") {
            let t = std::fs::read_to_string(p).unwrap();
            assert!(t.contains("<svg") && t.trim_end().ends_with("</svg>") && t.len() > 2000, "{p} is not a whole SVG");
        }
    }
    assert!(listed.iter().filter(|p| p.ends_with(".png")).count() >= 4, "scan, sweep, CHSH and visibility plots");

    // The numbers printed are the numbers stored.
    let doc = read_document(&demo.join("run.h5")).unwrap();
    let chsh = doc.root.group("chsh").expect("/chsh");
    let s = f64_attr(chsh, "s_raw");
    let sig = f64_attr(chsh, "s_raw_sigma");
    assert!(stdout.contains(&format!("S = {s:.4} ± {sig:.4} (raw)")), "S {s} ± {sig} not in summary:\n{stdout}");
    let ab = doc.root.group("blocks").and_then(|b| b.group("ab")).expect("/blocks/ab");
    let Some(AttrValue::U64(w)) = ab.attr("window_ps") else { panic!("window_ps") };
    assert!(stdout.contains(&format!("window: {w} ps, the widest of the pairs' sweep recommendations")), "window {w}:\n{stdout}");
    let delays = ab.table("delays").expect("delays table");
    let (Some(ColumnData::U64(ch)), Some(ColumnData::I64(ps))) =
        (delays.column("channel").map(|c| &c.data), delays.column("delay_ps").map(|c| &c.data))
    else {
        panic!("delays columns: {delays:?}")
    };
    for (c, d) in ch.iter().zip(ps) {
        assert!(stdout.contains(&format!("channel {c}: {d:>7} ps")), "delay of {c} = {d}:\n{stdout}");
    }
    assert!(s > 2.0 + 5.0 * sig, "the demo source violates the local bound clearly");
}
