//! JSON writer: the Document as nested objects. A group is
//! `{"attrs": {..}, "tables": {name: table}, "groups": {name: group}}`, a table is
//! `{"attrs": {..}, "columns": {name: {"unit", "dtype", "data": [..]}}}`; keys keep document order.
//! JSON has no NaN or infinity: such floats are written as `null`. This is the one JSON
//! serializer of a Document: `--format json` files and `--json` on stdout both go through it.

use super::{AttrValue, Column, ColumnData, Document, Group, Table, Writer};
use crate::{Error, Result};
use serde::ser::{Serialize, SerializeMap, Serializer};
use std::io::Write;
use std::path::Path;

/// Writes a [`Document`] as one JSON object (compact, newline-terminated).
#[derive(Debug, Clone, Copy, Default)]
pub struct JsonWriter;

impl Writer for JsonWriter {
    fn write(&self, doc: &Document, dest: &Path) -> Result<()> {
        let f = std::fs::File::create(dest).map_err(|e| Error::io(dest, e))?;
        let mut out = std::io::BufWriter::new(f);
        write_to(doc, &mut out).map_err(|e| super::name_sink(e, dest))?;
        out.flush().map_err(|e| Error::io(dest, e))
    }

}

/// `--json`: the Document on stdout, byte for byte what `--format json` writes to a file.
pub fn print_document(doc: &Document) -> Result<()> {
    super::write_document(doc, None, super::Format::Json, false)
}

/// Write `doc` as JSON to any byte sink (a file, stdout, a Vec).
pub fn write_to(doc: &Document, out: &mut dyn Write) -> Result<()> {
    let to_err = |e: serde_json::Error| {
        if e.is_io() {
            Error::io("<json>", e.into())
        } else {
            Error::Output { path: "<json>".into(), message: e.to_string() }
        }
    };
    serde_json::to_writer(&mut *out, &JGroup(&doc.root)).map_err(to_err)?;
    out.write_all(b"\n").map_err(|e| Error::io("<json>", e))
}

/// Serialise in document order (serde_json's own maps would sort the keys).
struct JGroup<'a>(&'a Group);
struct JTable<'a>(&'a Table);
struct JColumn<'a>(&'a Column);
pub(crate) struct JAttrs<'a>(pub(crate) &'a [(String, AttrValue)]);
struct JAttr<'a>(&'a AttrValue);
struct JFloats<'a>(&'a [f64]);
/// A map of named items, in order.
struct Named<'a, T, W>(&'a [T], fn(&'a T) -> (&'a str, W));

impl Serialize for JGroup<'_> {
    fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        let mut m = s.serialize_map(Some(3))?;
        m.serialize_entry("attrs", &JAttrs(&self.0.attrs))?;
        m.serialize_entry("tables", &Named(&self.0.tables, |t| (t.name.as_str(), JTable(t))))?;
        m.serialize_entry("groups", &Named(&self.0.groups, |g| (g.name.as_str(), JGroup(g))))?;
        m.end()
    }
}

impl Serialize for JTable<'_> {
    fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        let mut m = s.serialize_map(Some(2))?;
        m.serialize_entry("attrs", &JAttrs(&self.0.attrs))?;
        m.serialize_entry("columns", &Named(&self.0.columns, |c| (c.name.as_str(), JColumn(c))))?;
        m.end()
    }
}

impl Serialize for JColumn<'_> {
    fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        let c = self.0;
        let mut m = s.serialize_map(Some(3))?;
        m.serialize_entry("unit", &c.unit)?;
        m.serialize_entry("dtype", c.data.dtype_name())?;
        match &c.data {
            ColumnData::U64(v) => m.serialize_entry("data", v)?,
            ColumnData::I64(v) => m.serialize_entry("data", v)?,
            ColumnData::F64(v) => m.serialize_entry("data", &JFloats(v))?,
            ColumnData::Str(v) => m.serialize_entry("data", v)?,
        }
        m.end()
    }
}

impl Serialize for JAttrs<'_> {
    fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        let mut m = s.serialize_map(Some(self.0.len()))?;
        for (k, v) in self.0 {
            m.serialize_entry(k, &JAttr(v))?;
        }
        m.end()
    }
}

impl Serialize for JAttr<'_> {
    fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        match self.0 {
            AttrValue::Str(v) => s.serialize_str(v),
            AttrValue::U64(v) => s.serialize_u64(*v),
            AttrValue::I64(v) => s.serialize_i64(*v),
            AttrValue::F64(v) => finite_or_null(*v, s),
        }
    }
}

impl Serialize for JFloats<'_> {
    fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        s.collect_seq(self.0.iter().map(|v| Float(*v)))
    }
}

impl<T, W: Serialize> Serialize for Named<'_, T, W> {
    fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        let mut m = s.serialize_map(Some(self.0.len()))?;
        for item in self.0 {
            let (name, w) = (self.1)(item);
            m.serialize_entry(name, &w)?;
        }
        m.end()
    }
}

/// A float as JSON: finite numbers as numbers, NaN and ±inf as null.
#[derive(Clone, Copy)]
struct Float(f64);

impl Serialize for Float {
    fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        finite_or_null(self.0, s)
    }
}

fn finite_or_null<S: Serializer>(v: f64, s: S) -> Result<S::Ok, S::Error> {
    if v.is_finite() {
        s.serialize_f64(v)
    } else {
        s.serialize_none()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn keys_keep_document_order_and_nan_is_null() {
        let mut root = Group::new("");
        root.attrs.push(("zeta".into(), AttrValue::U64(u64::MAX)));
        root.attrs.push(("alpha".into(), AttrValue::F64(f64::NAN)));
        root.tables.push(Table::new("t").col("y", "1", ColumnData::F64(vec![1.5, f64::INFINITY])));
        let mut buf = Vec::new();
        write_to(&Document { root }, &mut buf).unwrap();
        let text = String::from_utf8(buf).unwrap();
        assert!(text.find("zeta").unwrap() < text.find("alpha").unwrap());
        let v: serde_json::Value = serde_json::from_str(&text).unwrap();
        assert_eq!(v["attrs"]["zeta"].as_u64(), Some(u64::MAX));
        assert!(v["attrs"]["alpha"].is_null());
        assert_eq!(v["tables"]["t"]["columns"]["y"]["data"], serde_json::json!([1.5, null]));
    }
}
