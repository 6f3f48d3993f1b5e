//! The documented layout (docs/hdf5-layout.md) against the code and against real files:
//! the Markdown must equal describe_layout(), and a written file walked with the hdf5
//! crate (and, where installed, h5dump from the HDF Group's tools) must hold exactly the
//! documented groups, attributes, datasets, dtypes and units.

mod common;

use hdf5 as h5;
use h5::types::{FloatSize, IntSize, TypeDescriptor};
use h5::{IndexType, IterationOrder, LocationType};
use tagsieve::output::layout::{describe_layout, layout_entries, sample_document, EntryKind, LayoutEntry};
use tagsieve::output::{write_document, Format};

#[test]
fn docs_file_matches_generated_layout() {
    let path = common::root().join("docs/hdf5-layout.md");
    let generated = describe_layout();
    if std::env::var_os("TAGSIEVE_BLESS").is_some() {
        std::fs::write(&path, &generated).unwrap();
    }
    let on_disk = std::fs::read_to_string(&path).unwrap_or_default();
    assert!(
        on_disk == generated,
        "docs/hdf5-layout.md is out of date with layout.rs; rerun with TAGSIEVE_BLESS=1 to regenerate"
    );
}

fn write_sample(dir: &std::path::Path) -> std::path::PathBuf {
    let p = dir.join("sample.h5");
    write_document(&sample_document(), Some(&p), Format::Hdf5, false).unwrap();
    p
}

/// HDF5 type → the documented type name; anything else is reported as is.
fn dtype_name(desc: &TypeDescriptor) -> String {
    match desc {
        TypeDescriptor::Unsigned(IntSize::U8) => "u64".into(),
        TypeDescriptor::Integer(IntSize::U8) => "i64".into(),
        TypeDescriptor::Float(FloatSize::U8) => "f64".into(),
        TypeDescriptor::VarLenUnicode => "string".into(),
        other => format!("{other:?}"),
    }
}

fn plain(kind: EntryKind, path: String, dtype: String, unit: String) -> LayoutEntry {
    LayoutEntry { kind, path, dtype, unit, rows: String::new(), note: String::new() }
}

fn join(path: &str, name: &str) -> String {
    if path == "/" { format!("/{name}") } else { format!("{path}/{name}") }
}

fn walk_attrs(loc: &h5::Location, path: &str, out: &mut Vec<LayoutEntry>) {
    for name in loc.attr_names_by(IndexType::CreationOrder, IterationOrder::Increasing).unwrap() {
        let d = loc.attr(&name).unwrap().dtype().unwrap().to_descriptor().unwrap();
        out.push(plain(EntryKind::Attribute, format!("{path}@{name}"), dtype_name(&d), String::new()));
    }
}

/// Walk the file with the hdf5 crate only (no tagsieve reader).
fn walk(g: &h5::Group, path: &str, out: &mut Vec<LayoutEntry>) {
    out.push(plain(EntryKind::Group, path.to_string(), String::new(), String::new()));
    walk_attrs(g, path, out);
    let members = g.member_names_by(IndexType::CreationOrder, IterationOrder::Increasing).unwrap();
    // Datasets of a table come before the next group, as documented.
    for m in &members {
        let p = join(path, m);
        match g.loc_type_by_name(m).unwrap() {
            LocationType::Dataset => {
                let ds = g.dataset(m).unwrap();
                assert_eq!(ds.ndim(), 1, "{p} must be 1-D");
                let units = ds.attr("units").unwrap().read_scalar::<h5::types::VarLenUnicode>().unwrap();
                assert_eq!(ds.attr_names().unwrap(), ["units"], "{p}");
                let d = ds.dtype().unwrap().to_descriptor().unwrap();
                out.push(plain(EntryKind::Dataset, p, dtype_name(&d), units.as_str().to_string()));
            }
            LocationType::Group => walk(&g.group(m).unwrap(), &p, out),
            other => panic!("{p}: unexpected {other:?}"),
        }
    }
}

#[test]
fn written_file_holds_exactly_the_documented_entries() {
    let d = tempfile::tempdir().unwrap();
    let p = write_sample(d.path());
    let f = h5::File::open(&p).unwrap();
    let mut found = Vec::new();
    walk(&f, "/", &mut found);
    let documented: Vec<LayoutEntry> = layout_entries(&sample_document())
        .into_iter()
        .map(|e| LayoutEntry { rows: String::new(), note: String::new(), ..e })
        .collect();
    assert_eq!(found, documented);
    // And the Markdown lists every dataset with its dtype and unit.
    let md = describe_layout();
    for e in documented.iter().filter(|e| e.kind == EntryKind::Dataset) {
        let unit = if e.unit.is_empty() { "`\"\"` (label)".to_string() } else { format!("`{}`", e.unit) };
        assert!(md.contains(&format!("| `{}` | {} |", e.path, e.dtype)), "{} missing from the docs", e.path);
        assert!(md.lines().any(|l| l.starts_with(&format!("| `{}` ", e.path)) && l.contains(&format!("| {unit} |"))));
    }
    for top in ["/provenance", "/provenance/inputs", "/blocks", "/blocks/{label}/singles", "/blocks/{label}/coincidences"] {
        assert!(md.contains(&format!("| `{top}` |")), "{top}");
    }
}

#[test]
fn h5dump_sees_the_documented_names_and_types() {
    // h5dump is the HDF Group's reference dumper (Debian hdf5-tools); skip only where absent.
    let d = tempfile::tempdir().unwrap();
    let Ok(out) = std::process::Command::new("h5dump").arg("-H").arg(write_sample(d.path())).output() else {
        eprintln!("h5dump not installed: skipping the h5dump check");
        return;
    };
    assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
    let text = String::from_utf8(out.stdout).unwrap();
    for e in layout_entries(&sample_document()) {
        let name = e.path.rsplit(['/', '@']).next().unwrap();
        let want = match e.kind {
            EntryKind::Group if e.path == "/" => "GROUP \"/\"".to_string(),
            EntryKind::Group => format!("GROUP \"{name}\""),
            EntryKind::Attribute => format!("ATTRIBUTE \"{name}\""),
            EntryKind::Dataset => format!("DATASET \"{name}\""),
        };
        assert!(text.contains(&want), "h5dump -H lacks {want} ({})", e.path);
    }
    // u64 columns are stored as unsigned 64-bit little-endian; strings as UTF-8.
    assert!(text.contains("H5T_STD_U64LE") && text.contains("H5T_STD_I64LE") && text.contains("H5T_IEEE_F64LE"));
    assert!(text.contains("CSET H5T_CSET_UTF8"));
}
