//! The run manifest: the fixtures load, round-trip through TOML, and each kind of bad
//! manifest is rejected as a Config error naming the line where the problem sits.

use std::path::Path;
use tagsieve::manifest::{InputFormat, Manifest, Outcomes, Port, Role, Setup};
use tagsieve::Error;

fn fixture(name: &str) -> std::path::PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("fixtures/manifest").join(name)
}

fn four_text() -> String {
    std::fs::read_to_string(fixture("four_detectors.toml")).unwrap()
}

/// 1-based number of the first line containing `needle` (searched in the test's own text).
fn line_with(text: &str, needle: &str) -> usize {
    text.lines().position(|l| l.contains(needle)).expect("needle in text") + 1
}

/// Parse `text`, expect a Config error; return (line, message).
fn rejection(text: &str) -> (usize, String) {
    match Manifest::parse(text, Path::new("bad.toml"), Path::new(".")) {
        Err(Error::Config { line, message, .. }) => (line, message),
        other => panic!("expected a Config error, got {other:?}"),
    }
}

#[test]
fn four_detector_fixture_loads() {
    let m = Manifest::load(&fixture("four_detectors.toml")).unwrap();
    assert_eq!(m.setup, Setup::FourDetectors);
    assert_eq!(m.window_ps, Some(400));
    assert_eq!(m.channel_of(Role::BOB_MINUS), Some(4));
    assert_eq!(m.role_of(2), Some(Role::ALICE_MINUS));
    assert_eq!(m.channel_delays_ps()[&3], 41_250);
    assert_eq!(m.blocks.len(), 4);
    let pairs = m.setting_pairs();
    assert_eq!(pairs.len(), 4);
    assert_eq!((pairs[1].alice.as_str(), pairs[1].bob.as_str(), pairs[1].beta_deg), ("a", "b'", 67.5));
    let dir = fixture("");
    let arrays = &m.blocks[1];
    assert_eq!(arrays.format, InputFormat::Arrays);
    assert_eq!(m.block_inputs(arrays)[0], format!("1={}", dir.join("abp/ch1.u64").display()));
    assert_eq!(m.block_layout(&m.blocks[2]), Some(dir.join("records_layout.toml").display().to_string()));
    let mut spec = m.blocks[2].clone();
    spec.layout = Some("rec=16,time=0:8:le,chan=8:4:le,tick_ps=1".into());
    assert_eq!(m.block_layout(&spec).as_deref(), Some("rec=16,time=0:8:le,chan=8:4:le,tick_ps=1"));
    assert_eq!(m.blocks[3].live_time_s, None);
}

#[test]
fn one_per_side_fixture_loads() {
    let m = Manifest::load(&fixture("one_per_side.toml")).unwrap();
    assert_eq!(m.setup, Setup::OnePerSide);
    assert_eq!(m.blocks.len(), 16);
    assert_eq!(m.setting_pairs().len(), 4);
    assert_eq!(m.delays_file_path(), Some(fixture("delays.toml")));
    let mp = m.blocks.iter().find(|b| b.outcomes == Some(Outcomes { alice: Port::Minus, bob: Port::Plus })).unwrap();
    // analyzer at α + 90° sends the − outcome to the + detector: common practice, no source
    assert_eq!(m.block_angles_deg(mp), Some((90.0, 22.5)));
}

#[test]
fn round_trip_through_toml() {
    for name in ["four_detectors.toml", "one_per_side.toml"] {
        let m = Manifest::load(&fixture(name)).unwrap();
        let text = m.to_toml_string().unwrap();
        let back = Manifest::parse(&text, Path::new("rt.toml"), &m.base_dir).unwrap();
        assert_eq!(back, m, "{name}:\n{text}");
    }
}

#[test]
fn save_writes_a_loadable_file_and_refuses_to_overwrite() {
    let m = Manifest::load(&fixture("four_detectors.toml")).unwrap();
    let d = tempfile::tempdir().unwrap();
    let p = d.path().join("run.toml");
    m.save(&p, false).unwrap();
    let back = Manifest::load(&p).unwrap();
    assert_eq!(back.blocks, m.blocks);
    assert!(matches!(m.save(&p, false), Err(Error::OutputExists(_))));
}

#[test]
fn unknown_key_is_rejected_with_its_line() {
    let text = four_text().replace("live_time_s = 2.0\n\n[[block]]\nname = \"apb\"", "live_time_s = 2.0\ncolour = \"red\"\n\n[[block]]\nname = \"apb\"");
    let (line, msg) = rejection(&text);
    assert!(msg.contains("unknown field `colour`"), "{msg}");
    assert_eq!(line, line_with(&text, "colour"));
}

#[test]
fn unknown_top_level_key_is_rejected() {
    let text = four_text().replace("window_ps = 400", "window_ps = 400\nwindow_ns = 0.4");
    let (line, msg) = rejection(&text);
    assert!(msg.contains("window_ns"), "{msg}");
    assert_eq!(line, line_with(&text, "window_ns"));
}

#[test]
fn missing_field_is_rejected_with_its_table_line() {
    // drop `format` from the first block
    let text = four_text().replacen("format = \"container\"\n", "", 1);
    let (line, msg) = rejection(&text);
    assert!(msg.contains("missing field `format`"), "{msg}");
    let block_start = line_with(&text, "name = \"ab\"");
    assert!(line + 1 >= block_start && line <= block_start + 4, "line {line}, block starts at {block_start}");
}

#[test]
fn duplicate_channel_is_rejected_at_the_second() {
    let text = four_text().replace("number = 4\n", "number = 2\n");
    let (line, msg) = rejection(&text);
    assert!(msg.contains("duplicate channel 2"), "{msg}");
    assert_eq!(line, line_with(&text, "name = \"rowan_minus\"") - 1);
}

#[test]
fn role_without_channel_is_rejected_at_the_role() {
    let text = four_text().replace("\"bob-\" = 4", "\"bob-\" = 9");
    let (line, msg) = rejection(&text);
    assert!(msg.contains("role bob- names channel 9"), "{msg}");
    assert_eq!(line, line_with(&text, "\"bob-\" = 9"));
}

#[test]
fn required_role_missing_is_rejected() {
    let text = four_text().replace("\"alice-\" = 2\n", "");
    let (line, msg) = rejection(&text);
    assert!(msg.contains("role alice- has no channel"), "{msg}");
    assert_eq!(line, line_with(&text, "[roles]"));
}

#[test]
fn unknown_setting_label_is_rejected_at_the_block() {
    let text = four_text().replace("bob = \"b'\"\nformat = \"arrays\"", "bob = \"c\"\nformat = \"arrays\"");
    let (line, msg) = rejection(&text);
    assert!(msg.contains("bob = \"c\" is not a label"), "{msg}");
    assert_eq!(line, line_with(&text, "bob = \"c\""));
}

#[test]
fn missing_one_per_side_block_is_rejected() {
    let full = std::fs::read_to_string(fixture("one_per_side.toml")).unwrap();
    let start = full.find("[[block]]\nname = \"apb_mp\"").unwrap();
    let end = start + full[start + 1..].find("[[block]]").unwrap() + 1;
    let text = format!("{}{}", &full[..start], &full[end..]);
    let (line, msg) = rejection(&text);
    assert!(msg.contains("setting pair (a', b) lacks the block(s) for outcomes -+"), "{msg}");
    assert_eq!(line, line_with(&text, "name = \"apb_pp\""));
}

#[test]
fn no_blocks_is_rejected() {
    let text = four_text();
    let text = &text[..text.find("[[block]]").unwrap()];
    let (_, msg) = rejection(text);
    assert!(msg.contains("no blocks"), "{msg}");
}

#[test]
fn arrays_input_must_name_a_defined_channel() {
    let text = four_text().replace("\"4=abp/ch4.u64\"", "\"7=abp/ch4.u64\"");
    let (line, msg) = rejection(&text);
    assert!(msg.contains("names channel 7"), "{msg}");
    assert_eq!(line, line_with(&text, "7=abp"));
}

#[test]
fn bad_outcomes_string_is_rejected_with_its_line() {
    let full = std::fs::read_to_string(fixture("one_per_side.toml")).unwrap();
    let text = full.replacen("outcomes = \"+-\"", "outcomes = \"+x\"", 1);
    let (line, msg) = rejection(&text);
    assert!(msg.contains("expected two of + and -"), "{msg}");
    assert_eq!(line, line_with(&text, "outcomes = \"+x\""));
}

#[test]
fn missing_file_is_an_io_error_naming_it() {
    let e = Manifest::load(Path::new("/nonexistent/run.toml")).unwrap_err();
    assert!(e.to_string().contains("/nonexistent/run.toml"));
    assert_eq!(e.exit_code(), 2);
}
