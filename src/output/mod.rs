//! The output stage: a format-neutral [`Document`] (groups, column tables with units,
//! attributes) and one writer per format behind the [`Writer`] trait. Writers never see
//! engine types; `layout` turns engine and analysis results into a Document.

pub mod atomic;
pub mod csv;
pub mod hdf5;
pub mod json;
pub mod layout;
pub mod plot;
pub mod provenance;

use crate::Result;
use std::path::Path;

/// One column of a table.
#[derive(Debug, Clone, PartialEq)]
pub enum ColumnData {
    U64(Vec<u64>),
    I64(Vec<i64>),
    F64(Vec<f64>),
    Str(Vec<String>),
}

impl ColumnData {
    pub fn len(&self) -> usize {
        match self {
            ColumnData::U64(v) => v.len(),
            ColumnData::I64(v) => v.len(),
            ColumnData::F64(v) => v.len(),
            ColumnData::Str(v) => v.len(),
        }
    }
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }
}

/// A named column with its unit ("ps", "Hz", "counts", "1" for dimensionless, "" for labels).
#[derive(Debug, Clone, PartialEq)]
pub struct Column {
    pub name: String,
    pub unit: String,
    pub data: ColumnData,
}

/// Column datasets of equal length, stored under one group named `name`.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct Table {
    pub name: String,
    pub columns: Vec<Column>,
}

/// Attribute value (HDF5 attribute, CSV comment, JSON field).
#[derive(Debug, Clone, PartialEq)]
pub enum AttrValue {
    Str(String),
    U64(u64),
    I64(i64),
    F64(f64),
}

/// A group: attributes, tables and subgroups.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct Group {
    pub name: String,
    pub attrs: Vec<(String, AttrValue)>,
    pub tables: Vec<Table>,
    pub groups: Vec<Group>,
}

/// A whole output file. The root group's attributes carry provenance.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct Document {
    pub root: Group,
}

/// One output format. Implementations write `doc` to `dest` (already a temporary path
/// chosen by [`atomic`]); they never rename or clean up.
pub trait Writer {
    fn write(&self, doc: &Document, dest: &Path) -> Result<()>;
    /// Whether the format can stream to stdout (`-o -`).
    fn can_stdout(&self) -> bool;
}
