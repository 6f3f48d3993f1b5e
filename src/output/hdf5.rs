//! HDF5 writer: groups, column datasets with `units` attributes, deflate on large arrays.
//! Link and attribute creation order are tracked, so [`read_document`] gives back the
//! Document in the order it was written (used by the round-trip tests and by analysts' tools).

use super::{AttrValue, Column, ColumnData, Document, Group, Table, Writer};
use crate::{Error, Result};
use ::hdf5 as h5;
use h5::plist::file_create::{AttrCreationOrder, LinkCreationOrder};
use h5::types::{TypeDescriptor, VarLenUnicode};
use h5::{H5Type, IndexType, IterationOrder, LocationType};
use std::path::Path;

/// Arrays longer than this are chunked and deflate-compressed; shorter ones stay contiguous.
pub const CHUNK_THRESHOLD: usize = 4096;
/// Chunk length in elements (512 KiB of u64): large enough for fast sequential reads.
pub const CHUNK_ELEMENTS: usize = 65_536;
/// Deflate level: 4 is the usual speed/size compromise (common practice, no source).
pub const DEFLATE_LEVEL: u8 = 4;

/// Writes a [`Document`] as an HDF5 file.
#[derive(Debug, Clone, Copy, Default)]
pub struct Hdf5Writer;

impl Writer for Hdf5Writer {
    fn write(&self, doc: &Document, dest: &Path) -> Result<()> {
        let ctx = Ctx { path: dest };
        let mut builder = h5::File::with_options();
        builder.with_fcpl(|p| {
            p.link_creation_order(LinkCreationOrder::Indexed).attr_creation_order(AttrCreationOrder::Indexed)
        });
        // The temporary is ours alone until it is renamed, so HDF5's flock adds nothing;
        // without it a child process that inherits the descriptor cannot keep the file
        // locked after we close it, and file systems without flock still work.
        builder.with_fapl(|p| p.file_locking(false));
        let file = builder.create(dest).map_err(ctx.err("create file"))?;
        ctx.write_group_contents(&file, &doc.root, "/")?;
        file.flush().map_err(ctx.err("flush"))?;
        file.close().map_err(ctx.err("close"))
    }

}

/// Error context: the file being written or read.
struct Ctx<'a> {
    path: &'a Path,
}

impl Ctx<'_> {
    fn err<'s>(&'s self, what: &'s str) -> impl Fn(h5::Error) -> Error + 's {
        move |e| Error::Output { path: self.path.to_path_buf(), message: format!("HDF5 {what}: {e}") }
    }

    fn at<'s>(&'s self, what: &'s str, at: &'s str) -> impl Fn(h5::Error) -> Error + 's {
        move |e| Error::Output { path: self.path.to_path_buf(), message: format!("HDF5 {what} {at}: {e}") }
    }

    fn write_group_contents(&self, g: &h5::Group, src: &Group, at: &str) -> Result<()> {
        for (key, value) in &src.attrs {
            self.write_attr(g, key, value, at)?;
        }
        for t in &src.tables {
            let tg = self.create_group(g, &t.name, at)?;
            let tat = join(at, &t.name);
            for (key, value) in &t.attrs {
                self.write_attr(&tg, key, value, &tat)?;
            }
            for c in &t.columns {
                self.write_column(&tg, c, &tat)?;
            }
        }
        for sub in &src.groups {
            let sg = self.create_group(g, &sub.name, at)?;
            self.write_group_contents(&sg, sub, &join(at, &sub.name))?;
        }
        Ok(())
    }

    /// A name with '/' would silently become a path; an empty one cannot be stored.
    fn check_name(&self, name: &str, at: &str) -> Result<()> {
        if name.is_empty() || name == "." || name.contains('/') {
            return Err(Error::Output {
                path: self.path.to_path_buf(),
                message: format!("{at}: name {name:?} cannot be an HDF5 link name (must be non-empty, not \".\", without '/')"),
            });
        }
        Ok(())
    }

    fn create_group(&self, parent: &h5::Group, name: &str, at: &str) -> Result<h5::Group> {
        self.check_name(name, at)?;
        parent
            .create_group_builder()
            .with_gcpl(|p| {
                p.link_creation_order(LinkCreationOrder::Indexed).attr_creation_order(AttrCreationOrder::Indexed)
            })
            .create(name)
            .map_err(self.at("create group", &join(at, name)))
    }

    fn write_attr(&self, loc: &h5::Location, key: &str, value: &AttrValue, at: &str) -> Result<()> {
        let where_ = format!("{at} attribute {key}");
        let r = match value {
            AttrValue::U64(v) => scalar_attr(loc, key, v),
            AttrValue::I64(v) => scalar_attr(loc, key, v),
            AttrValue::F64(v) => scalar_attr(loc, key, v),
            AttrValue::Str(s) => scalar_attr(loc, key, &self.vlen(s, &where_)?),
        };
        r.map_err(self.at("write", &where_))
    }

    fn write_column(&self, g: &h5::Group, c: &Column, at: &str) -> Result<()> {
        self.check_name(&c.name, at)?;
        let ds = match &c.data {
            ColumnData::U64(v) => create_dataset(g, &c.name, v),
            ColumnData::I64(v) => create_dataset(g, &c.name, v),
            ColumnData::F64(v) => create_dataset(g, &c.name, v),
            ColumnData::Str(v) => {
                let where_ = join(at, &c.name);
                let vs = v.iter().map(|s| self.vlen(s, &where_)).collect::<Result<Vec<_>>>()?;
                create_dataset(g, &c.name, &vs)
            }
        };
        let path = join(at, &c.name);
        let ds = ds.map_err(self.at("write dataset", &path))?;
        self.write_attr(&ds, "units", &AttrValue::Str(c.unit.clone()), &path)
    }

    fn vlen(&self, s: &str, at: &str) -> Result<VarLenUnicode> {
        s.parse::<VarLenUnicode>().map_err(|_| Error::Output {
            path: self.path.to_path_buf(),
            message: format!("{at}: string {s:?} holds a NUL byte, which HDF5 strings cannot store"),
        })
    }
}

fn join(at: &str, name: &str) -> String {
    if at.ends_with('/') {
        format!("{at}{name}")
    } else {
        format!("{at}/{name}")
    }
}

fn scalar_attr<T: H5Type>(loc: &h5::Location, key: &str, v: &T) -> h5::Result<()> {
    loc.new_attr::<T>().shape(()).create(key)?.write_scalar(v)
}

/// One 1-D dataset; chunked + shuffled + deflated above [`CHUNK_THRESHOLD`] elements.
fn create_dataset<T: H5Type>(g: &h5::Group, name: &str, data: &[T]) -> h5::Result<h5::Dataset> {
    let b = g.new_dataset_builder().with_data(data);
    if data.len() > CHUNK_THRESHOLD {
        b.chunk(CHUNK_ELEMENTS.min(data.len())).shuffle().deflate(DEFLATE_LEVEL).create(name)
    } else {
        b.create(name)
    }
}

/// Read a file written by [`Hdf5Writer`] back into a Document, in creation order.
/// A group holding only datasets is a table; anything else is a group.
pub fn read_document(path: &Path) -> Result<Document> {
    let ctx = Ctx { path };
    let file = h5::File::open(path).map_err(ctx.err("open file"))?;
    let root = ctx.read_group(&file, "", "/")?;
    Ok(Document { root })
}

impl Ctx<'_> {
    fn read_group(&self, g: &h5::Group, name: &str, at: &str) -> Result<Group> {
        let mut out = Group { name: name.to_string(), attrs: self.read_attrs(g, at)?, ..Default::default() };
        for member in self.members(g, at)? {
            let sub = g.group(&member).map_err(self.at("open group", &join(at, &member)))?;
            let sub_at = join(at, &member);
            if self.is_table(&sub, &sub_at)? {
                out.tables.push(self.read_table(&sub, &member, &sub_at)?);
            } else {
                out.groups.push(self.read_group(&sub, &member, &sub_at)?);
            }
        }
        Ok(out)
    }

    fn members(&self, g: &h5::Group, at: &str) -> Result<Vec<String>> {
        g.member_names_by(IndexType::CreationOrder, IterationOrder::Increasing).map_err(self.at("list", at))
    }

    fn is_table(&self, g: &h5::Group, at: &str) -> Result<bool> {
        let members = self.members(g, at)?;
        for m in &members {
            let kind = g.loc_type_by_name(m).map_err(self.at("inspect", at))?;
            if kind != LocationType::Dataset {
                return Ok(false);
            }
        }
        Ok(!members.is_empty())
    }

    fn read_table(&self, g: &h5::Group, name: &str, at: &str) -> Result<Table> {
        let mut t = Table { name: name.to_string(), attrs: self.read_attrs(g, at)?, columns: Vec::new() };
        for m in self.members(g, at)? {
            let c_at = join(at, &m);
            let ds = g.dataset(&m).map_err(self.at("open dataset", &c_at))?;
            let unit = match self.read_attr(&ds, "units", &c_at)? {
                AttrValue::Str(s) => s,
                other => other.to_text(),
            };
            let desc = ds.dtype().and_then(|d| d.to_descriptor()).map_err(self.at("dtype of", &c_at))?;
            let data = match desc {
                TypeDescriptor::Unsigned(_) => ds.read_raw::<u64>().map(ColumnData::U64),
                TypeDescriptor::Integer(_) => ds.read_raw::<i64>().map(ColumnData::I64),
                TypeDescriptor::Float(_) => ds.read_raw::<f64>().map(ColumnData::F64),
                _ => ds.read_raw::<VarLenUnicode>().map(|v| ColumnData::Str(v.iter().map(|s| s.as_str().to_string()).collect())),
            }
            .map_err(self.at("read dataset", &c_at))?;
            t.columns.push(Column { name: m, unit, data });
        }
        Ok(t)
    }

    fn read_attrs(&self, loc: &h5::Location, at: &str) -> Result<Vec<(String, AttrValue)>> {
        let names = loc.attr_names_by(IndexType::CreationOrder, IterationOrder::Increasing).map_err(self.at("list attributes of", at))?;
        names.into_iter().map(|n| Ok((n.clone(), self.read_attr(loc, &n, at)?))).collect()
    }

    fn read_attr(&self, loc: &h5::Location, key: &str, at: &str) -> Result<AttrValue> {
        let where_ = format!("{at} attribute {key}");
        let a = loc.attr(key).map_err(self.at("open", &where_))?;
        let desc = a.dtype().and_then(|d| d.to_descriptor()).map_err(self.at("dtype of", &where_))?;
        match desc {
            TypeDescriptor::Unsigned(_) => a.read_scalar::<u64>().map(AttrValue::U64),
            TypeDescriptor::Integer(_) => a.read_scalar::<i64>().map(AttrValue::I64),
            TypeDescriptor::Float(_) => a.read_scalar::<f64>().map(AttrValue::F64),
            _ => a.read_scalar::<VarLenUnicode>().map(|s| AttrValue::Str(s.as_str().to_string())),
        }
        .map_err(self.at("read", &where_))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn doc_with(n: usize) -> Document {
        let t = Table::new("t")
            .col("x_ps", "ps", ColumnData::U64((0..n as u64).map(|i| i * 7).collect()))
            .col("label", "", ColumnData::Str((0..n).map(|i| format!("ch{i} µ")).collect()))
            .attr("note", AttrValue::Str("hello".into()));
        let mut root = Group::new("");
        root.attrs.push(("z_first".into(), AttrValue::I64(-3)));
        root.attrs.push(("a_second".into(), AttrValue::F64(0.5)));
        root.tables.push(t);
        Document { root }
    }

    #[test]
    fn large_arrays_are_chunked_and_deflated_small_ones_not() {
        let d = tempfile::tempdir().unwrap();
        for (n, chunked) in [(CHUNK_THRESHOLD, false), (CHUNK_THRESHOLD + 1, true)] {
            let p = d.path().join(format!("{n}.h5"));
            Hdf5Writer.write(&doc_with(n), &p).unwrap();
            let f = h5::File::open(&p).unwrap();
            let ds = f.dataset("t/x_ps").unwrap();
            assert_eq!(ds.is_chunked(), chunked, "n = {n}");
            let filters = ds.filters();
            assert_eq!(filters.iter().any(|f| matches!(f, h5::filters::Filter::Deflate(_))), chunked);
        }
    }

    #[test]
    fn read_back_keeps_creation_order_and_values() {
        let d = tempfile::tempdir().unwrap();
        let p = d.path().join("o.h5");
        let doc = doc_with(10);
        Hdf5Writer.write(&doc, &p).unwrap();
        assert_eq!(read_document(&p).unwrap(), doc);
    }

    #[test]
    fn slash_in_a_block_label_is_an_error() {
        let d = tempfile::tempdir().unwrap();
        let mut doc = doc_with(1);
        doc.root.groups.push(Group::new("a/b"));
        let e = Hdf5Writer.write(&doc, &d.path().join("x.h5")).unwrap_err();
        assert!(e.to_string().contains("\"a/b\""), "{e}");
    }

    #[test]
    fn nul_in_string_is_an_error_not_a_panic() {
        let d = tempfile::tempdir().unwrap();
        let mut doc = doc_with(1);
        doc.root.attrs.push(("bad".into(), AttrValue::Str("a\0b".into())));
        let e = Hdf5Writer.write(&doc, &d.path().join("x.h5")).unwrap_err();
        assert!(e.to_string().contains("NUL"), "{e}");
    }
}
