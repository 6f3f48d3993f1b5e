//! Atomic output: nothing under the final name until a writer finishes, no temporary left
//! after a failure, and no overwrite without --force (common practice for batch tools, no source).

use std::path::Path;
use tagsieve::output::{write_document, write_with, AttrValue, ColumnData, Document, Format, Group, Table, Writer};
use tagsieve::{Error, Result};

fn doc() -> Document {
    let mut root = Group::new("");
    root.tables.push(Table::new("t").col("x_ps", "ps", ColumnData::U64(vec![1, 2, 3])));
    Document { root }
}

/// Writes half its output, then fails, as a writer hitting a full disk would.
struct FailsMidway;

impl Writer for FailsMidway {
    fn write(&self, _doc: &Document, dest: &Path) -> Result<()> {
        std::fs::write(dest, b"partial bytes").map_err(|e| Error::io(dest, e))?;
        Err(Error::Output { path: dest.to_path_buf(), message: "disk full (simulated)".into() })
    }
}

fn names(dir: &Path) -> Vec<String> {
    let mut v: Vec<String> = std::fs::read_dir(dir).unwrap().map(|e| e.unwrap().file_name().to_string_lossy().into_owned()).collect();
    v.sort();
    v
}

#[test]
fn existing_output_is_kept_without_force_and_replaced_with_it() {
    let d = tempfile::tempdir().unwrap();
    for format in [Format::Hdf5, Format::Csv, Format::Json] {
        let p = d.path().join(format!("out.{format:?}"));
        std::fs::write(&p, b"old").unwrap();
        let e = write_document(&doc(), Some(&p), format, false).unwrap_err();
        assert!(matches!(e, Error::OutputExists(ref q) if q == &p), "{e}");
        assert_eq!(e.exit_code(), 2);
        assert_eq!(std::fs::read(&p).unwrap(), b"old");
        write_document(&doc(), Some(&p), format, true).unwrap();
        assert_ne!(std::fs::read(&p).unwrap(), b"old");
    }
    assert_eq!(names(d.path()), ["out.Csv", "out.Hdf5", "out.Json"]);
}

#[test]
fn failing_writer_leaves_no_final_file_and_no_temporary() {
    let d = tempfile::tempdir().unwrap();
    let p = d.path().join("run.h5");
    let e = write_with(&doc(), &p, &FailsMidway, false).unwrap_err();
    // The error names the file the user asked for, not the temporary.
    assert!(matches!(&e, Error::Output { path, .. } if path == &p), "{e:?}");
    assert!(names(d.path()).is_empty(), "left behind: {:?}", names(d.path()));
}

#[test]
fn failing_writer_with_force_keeps_the_previous_file() {
    let d = tempfile::tempdir().unwrap();
    let p = d.path().join("run.h5");
    std::fs::write(&p, b"previous run").unwrap();
    write_with(&doc(), &p, &FailsMidway, true).unwrap_err();
    assert_eq!(std::fs::read(&p).unwrap(), b"previous run");
    assert_eq!(names(d.path()), ["run.h5"]);
}

#[test]
fn hdf5_failure_after_datasets_are_written_cleans_up() {
    // A NUL byte cannot go into an HDF5 string; the bad attribute comes after the tables.
    let d = tempfile::tempdir().unwrap();
    let p = d.path().join("run.h5");
    let mut bad = doc();
    let mut g = Group::new("late");
    g.attrs.push(("note".into(), AttrValue::Str("a\0b".into())));
    bad.root.groups.push(g);
    let e = write_document(&bad, Some(&p), Format::Hdf5, false).unwrap_err();
    assert!(e.to_string().contains("run.h5"), "{e}");
    assert_eq!(e.exit_code(), 1);
    assert!(names(d.path()).is_empty(), "left behind: {:?}", names(d.path()));
}

#[test]
fn hdf5_to_stdout_is_a_usage_error() {
    let e = write_document(&doc(), None, Format::Hdf5, false).unwrap_err();
    assert!(matches!(e, Error::Usage(_)));
    assert_eq!(e.exit_code(), 2);
}

#[test]
fn streaming_formats_write_to_any_sink() {
    let mut csv = Vec::new();
    tagsieve::output::csv::write_to(&doc(), &mut csv).unwrap();
    assert!(String::from_utf8(csv).unwrap().contains("x_ps [ps]\n1\n2\n3\n"));
    let mut json = Vec::new();
    tagsieve::output::json::write_to(&doc(), &mut json).unwrap();
    let v: serde_json::Value = serde_json::from_slice(&json).unwrap();
    assert_eq!(v["tables"]["t"]["columns"]["x_ps"]["data"], serde_json::json!([1, 2, 3]));
}

#[test]
fn format_follows_the_extension() {
    assert_eq!(Format::from_extension(Path::new("a/run.H5")), Some(Format::Hdf5));
    assert_eq!(Format::from_extension(Path::new("run.csv")), Some(Format::Csv));
    assert_eq!(Format::from_extension(Path::new("run.json")), Some(Format::Json));
    assert_eq!(Format::from_extension(Path::new("run.bin")), None);
    assert_eq!(Format::from_name("hdf5"), Some(Format::Hdf5));
    assert_eq!(Format::from_name("CSV-DIR"), Some(Format::CsvDir));
}
