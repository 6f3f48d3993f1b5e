//! CSV writer: one section per table, blank line between sections. A section opens with
//! `# table /path` and the table's attributes as `# key = value`, then a header of
//! `name [unit]` cells and the rows; each group opens with `# group /path` and its attributes.

use super::{AttrValue, ColumnData, Document, Group, Table, Writer};
use crate::{Error, Result};
use std::io::Write;
use std::path::Path;

/// Writes a [`Document`] as CSV sections.
#[derive(Debug, Clone, Copy, Default)]
pub struct CsvWriter;

impl Writer for CsvWriter {
    fn write(&self, doc: &Document, dest: &Path) -> Result<()> {
        let f = std::fs::File::create(dest).map_err(|e| Error::io(dest, e))?;
        let mut out = std::io::BufWriter::new(f);
        write_to(doc, &mut out).and_then(|()| out.flush().map_err(|e| Error::io(dest, e))).map_err(|e| super::name_sink(e, dest))
    }

}

/// Write `doc` as CSV to any byte sink (a file, stdout, a Vec).
pub fn write_to(doc: &Document, out: &mut dyn Write) -> Result<()> {
    let mut text = String::new();
    write_group(&mut text, &doc.root, "/", out)?;
    out.write_all(text.as_bytes()).map_err(|e| Error::io("<csv>", e))
}

/// Groups are emitted depth first; `text` is flushed to `out` after each table so a large
/// document never sits in memory twice.
fn write_group(text: &mut String, g: &Group, path: &str, out: &mut dyn Write) -> Result<()> {
    text.push_str(&format!("# group {path}\n"));
    push_attrs(text, &g.attrs);
    text.push('\n');
    for t in &g.tables {
        write_table(text, t, &child(path, &t.name));
        out.write_all(text.as_bytes()).map_err(|e| Error::io("<csv>", e))?;
        text.clear();
    }
    for sub in &g.groups {
        write_group(text, sub, &child(path, &sub.name), out)?;
    }
    Ok(())
}

fn child(path: &str, name: &str) -> String {
    if path == "/" {
        format!("/{name}")
    } else {
        format!("{path}/{name}")
    }
}

fn push_attrs(text: &mut String, attrs: &[(String, AttrValue)]) {
    for (k, v) in attrs {
        // A comment line must stay one line.
        let value = v.to_text().replace('\\', "\\\\").replace('\n', "\\n").replace('\r', "\\r");
        text.push_str(&format!("# {k} = {value}\n"));
    }
}

fn write_table(text: &mut String, t: &Table, path: &str) {
    text.push_str(&format!("# table {path}\n"));
    push_attrs(text, &t.attrs);
    let header: Vec<String> = t.columns.iter().map(|c| quote(&format!("{} [{}]", c.name, c.unit))).collect();
    text.push_str(&header.join(","));
    text.push('\n');
    for row in 0..t.rows() {
        let cells: Vec<String> = t.columns.iter().map(|c| cell(&c.data, row)).collect();
        text.push_str(&cells.join(","));
        text.push('\n');
    }
    text.push('\n');
}

/// One cell; empty past the end of a shorter column (histogram edges have one more row).
pub(crate) fn cell(data: &ColumnData, row: usize) -> String {
    match data {
        ColumnData::U64(v) => v.get(row).map(|x| x.to_string()),
        ColumnData::I64(v) => v.get(row).map(|x| x.to_string()),
        // Rust's shortest round-trip form; NaN and inf as "NaN", "inf", "-inf".
        ColumnData::F64(v) => v.get(row).map(|x| x.to_string()),
        ColumnData::Str(v) => v.get(row).map(|s| quote(s)),
    }
    .unwrap_or_default()
}

/// RFC 4180 quoting (fields with comma, quote or line break are quoted, quotes doubled);
/// a field starting with `#` is quoted too so no data line reads as a comment.
pub(crate) fn quote(s: &str) -> String {
    if s.contains([',', '"', '\n', '\r']) || s.starts_with('#') {
        format!("\"{}\"", s.replace('"', "\"\""))
    } else {
        s.to_string()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn quoting_follows_rfc_4180() {
        // RFC 4180 (2005), section 2, rules 6 and 7.
        assert_eq!(quote("plain"), "plain");
        assert_eq!(quote("a,b"), "\"a,b\"");
        assert_eq!(quote("say \"hi\""), "\"say \"\"hi\"\"\"");
        assert_eq!(quote("#x"), "\"#x\"");
    }

    #[test]
    fn section_has_path_attrs_header_and_ragged_rows() {
        let mut root = Group::new("");
        let mut blocks = Group::new("blocks");
        blocks.tables.push(
            Table::new("scan")
                .col("counts", "counts", ColumnData::U64(vec![3, 4]))
                .col("bin_edges_ps", "ps", ColumnData::I64(vec![-10, 0, 10]))
                .attr("fwhm_ps", AttrValue::F64(12.5)),
        );
        root.groups.push(blocks);
        let mut buf = Vec::new();
        write_to(&Document { root }, &mut buf).unwrap();
        let text = String::from_utf8(buf).unwrap();
        let want = "# table /blocks/scan\n# fwhm_ps = 12.5\ncounts [counts],bin_edges_ps [ps]\n3,-10\n4,0\n,10\n";
        assert!(text.contains(want), "{text}");
        assert!(text.contains("# group /blocks\n"));
    }
}
