//! The output stage: a format-neutral [`Document`] (groups, column tables with units,
//! attributes) and one writer per format behind the [`Writer`] trait. Writers never see
//! engine types; `layout` turns engine and analysis results into a Document.

pub mod csv;
pub mod csv_dir;
pub mod hdf5;
pub mod json;
pub mod layout;
pub mod layout_analysis;
pub mod plot;
pub mod provenance;

/// Atomic writes now live in [`crate::sys::atomic`]; this path stays while callers move.
pub use crate::sys::atomic;
use crate::{Error, Result};
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

/// Column datasets, stored under one group named `name`. Columns are of equal length
/// except where the layout says otherwise (histogram `bin_edges_ps`: one more than `counts`).
#[derive(Debug, Clone, PartialEq, Default)]
pub struct Table {
    pub name: String,
    pub columns: Vec<Column>,
    /// Attributes of the table's group (e.g. a fitted peak beside its histogram).
    pub attrs: Vec<(String, AttrValue)>,
}

impl Table {
    pub fn new(name: impl Into<String>) -> Self {
        Table { name: name.into(), ..Default::default() }
    }
    /// Append a column (builder style).
    pub fn col(mut self, name: &str, unit: &str, data: ColumnData) -> Self {
        self.columns.push(Column { name: name.into(), unit: unit.into(), data });
        self
    }
    /// Append an attribute (builder style).
    pub fn attr(mut self, key: &str, value: AttrValue) -> Self {
        self.attrs.push((key.into(), value));
        self
    }
    pub fn column(&self, name: &str) -> Option<&Column> {
        self.columns.iter().find(|c| c.name == name)
    }
    /// Length of the longest column.
    pub fn rows(&self) -> usize {
        self.columns.iter().map(|c| c.data.len()).max().unwrap_or(0)
    }
}

/// Attribute value (HDF5 attribute, CSV comment, JSON field).
#[derive(Debug, Clone, PartialEq)]
pub enum AttrValue {
    Str(String),
    U64(u64),
    I64(i64),
    F64(f64),
}

impl AttrValue {
    /// A list or map as JSON text: a string attribute that `json.loads` reads back (map keys
    /// become strings: `{"1":0,"2":850}`), never Rust debug text.
    pub fn json_text(value: &impl serde::Serialize) -> AttrValue {
        AttrValue::Str(serde_json::to_string(value).unwrap_or_else(|e| format!("unserialisable: {e}")))
    }
}

/// A group: attributes, tables and subgroups.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct Group {
    pub name: String,
    pub attrs: Vec<(String, AttrValue)>,
    pub tables: Vec<Table>,
    pub groups: Vec<Group>,
}

impl Group {
    pub fn new(name: impl Into<String>) -> Self {
        Group { name: name.into(), ..Default::default() }
    }
    pub fn attr(&self, key: &str) -> Option<&AttrValue> {
        self.attrs.iter().find(|(k, _)| k == key).map(|(_, v)| v)
    }
    pub fn group(&self, name: &str) -> Option<&Group> {
        self.groups.iter().find(|g| g.name == name)
    }
    pub fn table(&self, name: &str) -> Option<&Table> {
        self.tables.iter().find(|t| t.name == name)
    }
}

impl AttrValue {
    /// The value as text (CSV comments, Markdown).
    pub fn to_text(&self) -> String {
        match self {
            AttrValue::Str(s) => s.clone(),
            AttrValue::U64(v) => v.to_string(),
            AttrValue::I64(v) => v.to_string(),
            AttrValue::F64(v) => v.to_string(),
        }
    }
    /// Type name as documented in docs/hdf5-layout.md.
    pub fn dtype_name(&self) -> &'static str {
        match self {
            AttrValue::Str(_) => "string",
            AttrValue::U64(_) => "u64",
            AttrValue::I64(_) => "i64",
            AttrValue::F64(_) => "f64",
        }
    }
}

impl ColumnData {
    /// Type name as documented in docs/hdf5-layout.md.
    pub fn dtype_name(&self) -> &'static str {
        match self {
            ColumnData::U64(_) => "u64",
            ColumnData::I64(_) => "i64",
            ColumnData::F64(_) => "f64",
            ColumnData::Str(_) => "string",
        }
    }
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
}

/// An output format (the command line's `--format`).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Format {
    /// HDF5 file (groups, one dataset per column, `units` attributes).
    Hdf5,
    /// CSV sections in one file, one per table, attributes as `#` comment lines.
    Csv,
    /// A directory (`-o DIR`) of plain CSV files, one per table at the table's path
    /// (`blocks/ab/coincidences.csv`): one header line of column names, no comments; units,
    /// attributes and provenance in `attributes.json` beside them. Opens as it is in
    /// pandas or a spreadsheet.
    CsvDir,
    /// One JSON object: nested groups, columns as arrays with units.
    Json,
}

impl Format {
    /// The writer for this format.
    pub fn writer(self) -> Box<dyn Writer> {
        match self {
            Format::Hdf5 => Box::new(hdf5::Hdf5Writer),
            Format::Csv => Box::new(csv::CsvWriter),
            Format::CsvDir => Box::new(csv_dir::CsvDirWriter),
            Format::Json => Box::new(json::JsonWriter),
        }
    }

    /// The format of a name as the user types it (`hdf5`, `csv`, `csv-dir`, `json`; any case).
    pub fn from_name(name: &str) -> Option<Format> {
        match name.to_ascii_lowercase().as_str() {
            "hdf5" => Some(Format::Hdf5),
            "csv" => Some(Format::Csv),
            "csv-dir" => Some(Format::CsvDir),
            "json" => Some(Format::Json),
            _ => None,
        }
    }

    /// Guess the format from a file extension (`.h5`/`.hdf5`, `.csv`, `.json`).
    pub fn from_extension(path: &Path) -> Option<Format> {
        let ext = path.extension()?.to_str()?.to_ascii_lowercase();
        match ext.as_str() {
            "h5" | "hdf5" => Some(Format::Hdf5),
            "csv" => Some(Format::Csv),
            "json" => Some(Format::Json),
            _ => None,
        }
    }
}

/// Write `doc` to `dest` (None = stdout) in `format`. Files are written atomically
/// (temporary beside the target, renamed when complete); an existing file is replaced
/// only with `force` (else [`Error::OutputExists`]). HDF5 cannot go to stdout.
pub fn write_document(doc: &Document, dest: Option<&Path>, format: Format, force: bool) -> Result<()> {
    match dest {
        Some(path) if format == Format::CsvDir => csv_dir::write_dir(doc, path, force),
        Some(path) => write_with(doc, path, format.writer().as_ref(), force),
        None => write_stdout(doc, format),
    }
}

fn write_stdout(doc: &Document, format: Format) -> Result<()> {
    let stdout = std::io::stdout();
    let mut out = std::io::BufWriter::new(stdout.lock());
    let r = match format {
        Format::Csv => csv::write_to(doc, &mut out),
        Format::Json => json::write_to(doc, &mut out),
        Format::Hdf5 => {
            return Err(Error::Usage("HDF5 output cannot go to stdout (-o -); give a file name or --format csv|json".into()))
        }
        Format::CsvDir => {
            return Err(Error::Usage("--format csv-dir writes a directory, not stdout (-o -); give one with -o DIR".into()))
        }
    };
    let r = r.and_then(|()| std::io::Write::flush(&mut out).map_err(|e| Error::io("<stdout>", e)));
    quiet_broken_pipe(r)
}

/// A reader that stops early (`tagsieve ... -o - | head`) is not an error of ours
/// (common practice for command-line filters, no source).
fn quiet_broken_pipe(r: Result<()>) -> Result<()> {
    match r {
        Err(Error::Io { source, .. }) if source.kind() == std::io::ErrorKind::BrokenPipe => Ok(()),
        other => other,
    }
}

/// Write `doc` to `path` through `writer`, atomically: on any writer error neither the
/// final file nor the temporary remains, and errors name the final path.
pub fn write_with(doc: &Document, path: &Path, writer: &dyn Writer, force: bool) -> Result<()> {
    let out = atomic::AtomicOutput::prepare(path, force)?;
    match writer.write(doc, out.temp_path()) {
        Ok(()) => out.commit(),
        Err(e) => Err(rename_error_path(e, out.temp_path(), path)),
    }
}

/// Sink-agnostic writers name their sink `<csv>` / `<json>`; a file writer puts its
/// destination there instead, so a full disk names the file.
pub(crate) fn name_sink(e: Error, dest: &Path) -> Error {
    match e {
        Error::Io { path, source } if path.to_string_lossy().starts_with('<') => Error::Io { path: dest.to_path_buf(), source },
        Error::Output { path, message } if path.to_string_lossy().starts_with('<') => Error::Output { path: dest.to_path_buf(), message },
        other => other,
    }
}

/// Writers see the temporary path; the user should see the name they asked for.
fn rename_error_path(e: Error, temp: &Path, path: &Path) -> Error {
    match e {
        Error::Output { path: p, message } if p == temp => Error::Output { path: path.to_path_buf(), message },
        Error::Io { path: p, source } if p == temp => Error::Io { path: path.to_path_buf(), source },
        other => other,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn broken_pipe_on_stdout_is_quiet_other_errors_are_not() {
        let pipe = Error::io("<stdout>", std::io::Error::from(std::io::ErrorKind::BrokenPipe));
        assert!(quiet_broken_pipe(Err(pipe)).is_ok());
        let full = Error::io("<stdout>", std::io::Error::from(std::io::ErrorKind::StorageFull));
        assert!(quiet_broken_pipe(Err(full)).is_err());
    }
}
