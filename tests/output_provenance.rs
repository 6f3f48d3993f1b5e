//! Provenance against outside references: the UTC time stamp against Python's datetime over
//! four centuries of instants, and the recorded inputs as h5py reads them from a written file.

mod common;

use tagsieve::output::layout::run_document;
use tagsieve::output::provenance::{iso8601_utc, Provenance};
use tagsieve::output::{write_document, AttrValue, Format};

#[test]
fn utc_stamps_match_python_datetime() {
    // Every 7919th day from 1900 to 2300 at varying seconds of day, plus leap-year edges.
    let mut instants: Vec<i64> = (-25_567i64..120_000).step_by(7919).map(|d| d * 86_400 + (d.rem_euclid(86_400) * 37) % 86_400).collect();
    instants.extend([951_782_400, 951_868_799, 4_107_542_400, -2_203_891_200, 0, -1]);
    let list = instants.iter().map(|s| s.to_string()).collect::<Vec<_>>().join(",");
    let script = format!(
        "import datetime\nfor s in [{list}]:\n    print((datetime.datetime(1970,1,1)+datetime.timedelta(seconds=s)).strftime('%Y-%m-%dT%H:%M:%SZ'))"
    );
    let out = common::python().arg("-c").arg(script).output().unwrap();
    assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
    let want: Vec<String> = String::from_utf8(out.stdout).unwrap().lines().map(str::to_string).collect();
    let got: Vec<String> = instants.iter().map(|&s| iso8601_utc(s)).collect();
    assert_eq!(got, want);
}

#[test]
fn inputs_table_reads_back_in_h5py() {
    let d = tempfile::tempdir().unwrap();
    let input = d.path().join("larch.u64");
    let bytes: Vec<u8> = (0..100_000u64).flat_map(|t| (t * 1000).to_le_bytes()).collect();
    std::fs::write(&input, &bytes).unwrap();
    let prov = Provenance::new(vec!["tagsieve".into(), "count".into(), format!("1={}", input.display())])
        .param("window_ps", AttrValue::U64(800))
        .input(&input)
        .unwrap();
    let h5 = d.path().join("p.h5");
    write_document(&run_document(&[], &prov), Some(&h5), Format::Hdf5, false).unwrap();
    let script = "import sys, h5py\n\
                  f = h5py.File(sys.argv[1], 'r'); t = f['provenance/inputs']\n\
                  print(t['path'].asstr()[0]); print(t['size_bytes'][0]); print(t['xxh3'].asstr()[0])\n\
                  print(f.attrs['param.window_ps']); print(f.attrs['created_utc']); print(f.attrs['command_line'])";
    let out = common::python().arg("-c").arg(script).arg(&h5).output().unwrap();
    assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
    let text = String::from_utf8(out.stdout).unwrap();
    let lines: Vec<&str> = text.lines().collect();
    assert_eq!(lines[0], input.display().to_string());
    assert_eq!(lines[1], bytes.len().to_string());
    // The checksum the file carries is the one-shot XXH3-64 of the bytes on disk.
    assert_eq!(lines[2], format!("{:016x}", xxhash_rust::xxh3::xxh3_64(&bytes)));
    assert_eq!(lines[3], "800");
    assert!(lines[4].len() == 20 && lines[4].ends_with('Z') && lines[4].as_bytes()[10] == b'T', "{}", lines[4]);
    assert!(lines[5].starts_with("tagsieve count 1="), "{}", lines[5]);
}
