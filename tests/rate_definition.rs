//! One rate definition for `inspect` and `count` (README, "Rates"): events / live time, the
//! live time running from the earliest tag of any channel given together to the latest,
//! plus 1 ps. Both commands on the same inputs must report the same rate per channel, and
//! that rate must be the one NumPy computes in tools/make_fixtures.py
//! (fixtures/arrays.expected.json, the outside reference).

mod common;

use common::{root, tagsieve};
use serde_json::Value;

const INPUTS: [&str; 2] = ["1:larch_plus=fixtures/larch_plus.u64", "3:rowan_plus=fixtures/rowan_plus.u64"];

fn json_of(args: &[&str]) -> Value {
    let out = tagsieve().current_dir(root()).args(["--json", "--quiet"]).args(args).args(INPUTS).output().unwrap();
    assert!(out.status.success(), "{args:?}: {}", String::from_utf8_lossy(&out.stderr));
    serde_json::from_slice(&out.stdout).unwrap()
}

fn by_channel<'a>(rows: &'a Value, key: &str) -> Vec<(u64, &'a Value)> {
    rows.as_array().unwrap().iter().map(|r| (r["channel"].as_u64().unwrap(), &r[key])).collect()
}

#[test]
fn inspect_and_count_report_the_same_rate_per_channel() {
    let inspect = json_of(&["inspect"]);
    let count = json_of(&["count", "-w", "1000", "--pairs", "1:3"]);
    let block = common::doc_at(&count, "/blocks/block");
    let singles = common::doc_rows(&count, "/blocks/block/singles");
    let expected: Value =
        serde_json::from_str(&std::fs::read_to_string(root().join("fixtures/arrays.expected.json")).unwrap()).unwrap();

    // The live time: inspect's totals, count's singles and NumPy's max − min + 1 agree.
    let live = expected["totals"]["live_time_ps"].as_u64().unwrap();
    assert_eq!(inspect["totals"]["live_time_ps"].as_u64(), Some(live));
    // count: the block span in integer ps, and each channel's live time in s.
    let span = |k: &str| block["attrs"][k].as_u64().unwrap();
    assert_eq!(span("span_end_ps") - span("span_start_ps"), live, "count: block span");
    for (ch, t) in by_channel(&Value::from(singles.clone()), "live_time_s") {
        let t = t.as_f64().unwrap();
        assert!((t - live as f64 / 1e12).abs() <= 1e-15 * t, "count: channel {ch} live time {t} s, NumPy {live} ps");
    }

    let from_inspect = by_channel(&inspect["channels"], "rate_hz");
    let singles = Value::from(singles);
    let from_count = by_channel(&singles, "rate_hz");
    let from_numpy = by_channel(&expected["channels"], "rate_hz");
    assert_eq!(from_inspect.len(), 2);
    for (((ci, ri), (cc, rc)), (cn, rn)) in from_inspect.iter().zip(&from_count).zip(&from_numpy) {
        assert_eq!((ci, cc), (cn, cn));
        let (ri, rc, rn) = (ri.as_f64().unwrap(), rc.as_f64().unwrap(), rn.as_f64().unwrap());
        // One function computes both: the same bits, not merely close.
        assert_eq!(ri.to_bits(), rc.to_bits(), "channel {ci}: inspect {ri} Hz, count {rc} Hz");
        assert!((ri - rn).abs() <= 1e-12 * rn, "channel {ci}: inspect {ri} Hz, NumPy {rn} Hz");
    }
    // The two channels' own spans differ (1.124 ms against 1.266 ms): a per-channel live time
    // would give channel 1 a rate 12 % higher, so this test tells the definitions apart.
    let own = |c: &Value| c["span_ps"].as_u64().unwrap();
    let chans = expected["channels"].as_array().unwrap();
    assert!(own(&chans[0]) + 100_000_000 < own(&chans[1]), "fixture no longer separates the definitions");
}
