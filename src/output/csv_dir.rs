//! Table-directory writer (`--format csv-dir`): one plain CSV file per table (one header
//! line of column names, no comment lines), at the table's path (`blocks/ab/singles.csv`),
//! and one sidecar `attributes.json` with every group's and table's attributes (provenance
//! at the root) and each column's unit and type. The directory appears whole or not at all.

use super::atomic::AtomicDir;
use super::csv::{cell, quote};
use super::json::JAttrs;
use super::{Document, Group, Table};
use crate::{Error, Result};
use serde::Serialize;
use std::io::Write;
use std::path::{Path, PathBuf};

/// The sidecar's file name, at the top of the directory.
pub const SIDECAR: &str = "attributes.json";

/// What the sidecar's `format` field says.
pub const SIDECAR_FORMAT: &str = "tagsieve table directory";

/// Writes a [`Document`] as a table directory; `dest` must not exist yet (use
/// [`write_dir`] for the atomic form that [`super::write_document`] uses).
#[derive(Debug, Clone, Copy, Default)]
pub struct CsvDirWriter;

impl super::Writer for CsvDirWriter {
    fn write(&self, doc: &Document, dest: &Path) -> Result<()> {
        std::fs::create_dir(dest).map_err(|e| Error::io(dest, e))?;
        write_tree(doc, dest)
    }

}

/// Write `doc` as a table directory at `dest` (atomically; see [`AtomicDir`]).
pub fn write_dir(doc: &Document, dest: &Path, force: bool) -> Result<()> {
    let out = AtomicDir::prepare(dest, force, SIDECAR)?;
    let name = |e: Error| rename_error(e, out.temp_path(), dest);
    write_tree(doc, out.temp_path()).map_err(name)?;
    out.commit()
}

/// Write the tables and the sidecar into the existing, empty directory `dir`.
pub fn write_tree(doc: &Document, dir: &Path) -> Result<()> {
    let mut sidecar = Sidecar { format: SIDECAR_FORMAT, groups: Vec::new(), tables: Vec::new() };
    walk(&doc.root, "/", Path::new(""), dir, &mut sidecar)?;
    let p = dir.join(SIDECAR);
    let mut text = serde_json::to_string_pretty(&sidecar).map_err(|e| Error::Output { path: p.clone(), message: e.to_string() })?;
    text.push('\n');
    std::fs::write(&p, text).map_err(|e| Error::io(&p, e))
}

#[derive(Serialize)]
struct Sidecar<'a> {
    format: &'static str,
    groups: Vec<GroupEntry<'a>>,
    tables: Vec<TableEntry<'a>>,
}

#[derive(Serialize)]
struct GroupEntry<'a> {
    path: String,
    attrs: JAttrs<'a>,
}

#[derive(Serialize)]
struct TableEntry<'a> {
    path: String,
    /// Relative to the directory, `/`-separated.
    file: String,
    rows: usize,
    attrs: JAttrs<'a>,
    columns: Vec<ColumnEntry<'a>>,
}

#[derive(Serialize)]
struct ColumnEntry<'a> {
    name: &'a str,
    unit: &'a str,
    dtype: &'static str,
    /// Rows this column holds (a histogram's `counts` has one fewer than its
    /// `bin_edges_ps`; its last cell is empty).
    rows: usize,
}

fn walk<'a>(g: &'a Group, path: &str, rel: &Path, dir: &Path, sidecar: &mut Sidecar<'a>) -> Result<()> {
    sidecar.groups.push(GroupEntry { path: path.to_string(), attrs: JAttrs(&g.attrs) });
    if !g.tables.is_empty() || !g.groups.is_empty() {
        let d = dir.join(rel);
        std::fs::create_dir_all(&d).map_err(|e| Error::io(&d, e))?;
    }
    for t in &g.tables {
        let file = rel.join(format!("{}.csv", file_component(&t.name)));
        write_table(t, &dir.join(&file))?;
        sidecar.tables.push(TableEntry {
            path: child(path, &t.name),
            file: slash_path(&file),
            rows: t.rows(),
            attrs: JAttrs(&t.attrs),
            columns: t
                .columns
                .iter()
                .map(|c| ColumnEntry { name: &c.name, unit: &c.unit, dtype: c.data.dtype_name(), rows: c.data.len() })
                .collect(),
        });
    }
    for sub in &g.groups {
        walk(sub, &child(path, &sub.name), &rel.join(file_component(&sub.name)), dir, sidecar)?;
    }
    Ok(())
}

fn write_table(t: &Table, p: &Path) -> Result<()> {
    let f = std::fs::File::create(p).map_err(|e| Error::io(p, e))?;
    let mut out = std::io::BufWriter::new(f);
    let mut line = t.columns.iter().map(|c| quote(&c.name)).collect::<Vec<_>>().join(",");
    line.push('\n');
    out.write_all(line.as_bytes()).map_err(|e| Error::io(p, e))?;
    for row in 0..t.rows() {
        line.clear();
        for (k, c) in t.columns.iter().enumerate() {
            if k > 0 {
                line.push(',');
            }
            line.push_str(&cell(&c.data, row));
        }
        line.push('\n');
        out.write_all(line.as_bytes()).map_err(|e| Error::io(p, e))?;
    }
    out.flush().map_err(|e| Error::io(p, e))
}

fn child(path: &str, name: &str) -> String {
    if path == "/" {
        format!("/{name}")
    } else {
        format!("{path}/{name}")
    }
}

/// A group or table name as one file-name component: `/`, `\`, NUL and `%` are written
/// as `%XX`, and so is a leading `.` (no hidden files, no `.` or `..`).
pub fn file_component(name: &str) -> String {
    let mut s = String::with_capacity(name.len());
    for (i, c) in name.chars().enumerate() {
        match c {
            '/' | '\\' | '\0' | '%' => s.push_str(&format!("%{:02X}", c as u32)),
            '.' if i == 0 => s.push_str("%2E"),
            c => s.push(c),
        }
    }
    if s.is_empty() {
        s.push_str("%00");
    }
    s
}

fn slash_path(p: &Path) -> String {
    p.components().map(|c| c.as_os_str().to_string_lossy().into_owned()).collect::<Vec<_>>().join("/")
}

/// Errors inside the temporary directory name the directory the user asked for.
fn rename_error(e: Error, temp: &Path, dest: &Path) -> Error {
    let fix = |p: PathBuf| p.strip_prefix(temp).map(|r| dest.join(r)).unwrap_or(p);
    match e {
        Error::Io { path, source } => Error::Io { path: fix(path), source },
        Error::Output { path, message } => Error::Output { path: fix(path), message },
        other => other,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn names_become_safe_file_components() {
        assert_eq!(file_component("1-3"), "1-3");
        assert_eq!(file_component("a'b'"), "a'b'");
        assert_eq!(file_component("x/y"), "x%2Fy");
        assert_eq!(file_component(".."), "%2E.");
        assert_eq!(file_component("50%"), "50%25");
        assert_eq!(file_component(""), "%00");
    }
}
