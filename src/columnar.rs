//! Results as Parquet files: one file per table (nodes, links, and for a simulation tanks and
//! pumps) in an output directory, typed columns, the unit of each column in its field metadata
//! (`unit`) and all of them in the schema metadata (`units`, a JSON object), so that pandas,
//! polars, DuckDB or pyarrow read them directly; the table's name, the model's title and the
//! program's version are the file's key-value metadata (`table`, `title`, `producer`). The same
//! results give the same bytes at every run.
//!
//! Written with the Apache Arrow project's `parquet` and `arrow-*` crates (the reference Rust
//! implementation of the format), Snappy-compressed, in record batches of at most [`BATCH`] rows:
//! memory holds one batch per table, whatever the size of the network or the length of the run.
//! Each file is written whole or not at all, as every output file is
//! ([`ringmain_core::output::OutputFile`]), so a failed run leaves no half-written table.

use arrow_array::builder::{BooleanBuilder, Float64Builder, StringBuilder};
use arrow_array::{ArrayRef, RecordBatch};
use arrow_schema::{DataType, Field, Schema, SchemaRef};
use parquet::arrow::ArrowWriter;
use parquet::basic::Compression;
use parquet::file::metadata::KeyValue;
use parquet::file::properties::WriterProperties;
use ringmain_core::output::{EarlyWriteback, OutputFile};
use std::collections::HashMap;
use std::io;
use std::path::{Path, PathBuf};
use std::sync::Arc;

/// Rows per record batch (and at most per write): large enough for the columnar encodings to
/// pay, small enough that a table's buffers stay a few megabytes.
pub const BATCH: usize = 1 << 16;

/// The type of a column.
#[derive(Clone, Copy, PartialEq, Eq, Debug)]
pub enum Kind {
    /// 64-bit float; a value that is not finite is written as null.
    F64,
    /// UTF-8 text; may be null.
    Text,
    /// True or false.
    Bool,
}

/// One column of a table: its name, type and unit (empty: none).
#[derive(Clone)]
pub struct Column {
    pub name: std::borrow::Cow<'static, str>,
    pub kind: Kind,
    pub unit: String,
}

impl Column {
    pub fn new(name: impl Into<std::borrow::Cow<'static, str>>, kind: Kind, unit: impl Into<String>) -> Self {
        Column { name: name.into(), kind, unit: unit.into() }
    }
}

enum Builder {
    F64(Float64Builder),
    Text(StringBuilder),
    Bool(BooleanBuilder),
}

/// One table being written: the rows of the current batch in builders, flushed every
/// [`BATCH`] rows.
pub struct Table {
    name: &'static str,
    schema: SchemaRef,
    builders: Vec<Builder>,
    rows: usize,
    writer: Option<ArrowWriter<EarlyWriteback>>,
    /// The file until it is finished: under a temporary name, removed if the table is dropped
    /// unfinished (a failed run).
    output: Option<OutputFile>,
    path: PathBuf,
}

fn to_io(e: impl std::fmt::Display) -> io::Error {
    io::Error::other(e.to_string())
}

impl Table {
    /// Creates `<dir>/<name>.parquet` (under a temporary name until [`Table::finish`]).
    /// The units go into the schema metadata (`units`); `metadata`, `table` and `producer` into
    /// the file's key-value metadata (`metadata` cannot replace those three).
    pub fn create(dir: &Path, name: &'static str, columns: &[Column], metadata: &[(&str, String)]) -> io::Result<Self> {
        let mut units = serde_json::Map::new();
        let fields: Vec<Field> = columns
            .iter()
            .map(|c| {
                let (dt, nullable) = match c.kind {
                    Kind::F64 => (DataType::Float64, true),
                    Kind::Text => (DataType::Utf8, true),
                    Kind::Bool => (DataType::Boolean, false),
                };
                let mut field = Field::new(c.name.as_ref(), dt, nullable);
                if !c.unit.is_empty() {
                    units.insert(c.name.to_string(), c.unit.clone().into());
                    field = field.with_metadata(HashMap::from([("unit".to_owned(), c.unit.clone())]));
                }
                field
            })
            .collect();
        // The units are the Arrow schema's only metadata, and the rest (`table`, `title`,
        // `producer`) is the file's key-value metadata, sorted by key: the schema's metadata is a
        // hash map, which the schema embedded in the file (`ARROW:schema`) lists in a random
        // order, so that with several keys there the same results made different bytes at every
        // run. (arrow-rs and polars show the key-value metadata among the schema's; pyarrow has
        // it in `pyarrow.parquet.read_metadata(path).metadata`.)
        const OWN: [&str; 3] = ["units", "table", "producer"];
        let mut meta: Vec<(String, String)> =
            metadata.iter().filter(|(k, _)| !OWN.contains(k)).map(|(k, v)| ((*k).to_owned(), v.clone())).collect();
        meta.push(("table".to_owned(), name.to_owned()));
        meta.push(("producer".to_owned(), format!("ringmain {}", env!("CARGO_PKG_VERSION"))));
        meta.sort();
        let units = HashMap::from([("units".to_owned(), serde_json::Value::Object(units).to_string())]);
        let schema = Arc::new(Schema::new_with_metadata(fields, units));
        let path = dir.join(format!("{name}.parquet"));
        let (output, file) = OutputFile::create(&path)?;
        let props = WriterProperties::builder()
            .set_compression(Compression::SNAPPY)
            .set_max_row_group_size(1 << 20)
            .set_key_value_metadata(Some(meta.into_iter().map(|(k, v)| KeyValue::new(k, v)).collect()))
            .build();
        let writer = ArrowWriter::try_new(file, schema.clone(), Some(props)).map_err(to_io)?;
        let builders = columns
            .iter()
            .map(|c| match c.kind {
                Kind::F64 => Builder::F64(Float64Builder::with_capacity(BATCH)),
                Kind::Text => Builder::Text(StringBuilder::with_capacity(BATCH, BATCH * 8)),
                Kind::Bool => Builder::Bool(BooleanBuilder::with_capacity(BATCH)),
            })
            .collect();
        Ok(Table { name, schema, builders, rows: 0, writer: Some(writer), output: Some(output), path })
    }

    /// The table's file name (once finished).
    pub fn path(&self) -> &Path {
        &self.path
    }

    /// Appends a number to column `c` of the current row (null if not finite).
    pub fn f64(&mut self, c: usize, v: f64) {
        match &mut self.builders[c] {
            Builder::F64(b) => b.append_option(v.is_finite().then_some(v)),
            _ => unreachable!("column {c} of {} is not a number column", self.name),
        }
    }

    /// Appends a text (or null) to column `c` of the current row.
    pub fn text(&mut self, c: usize, v: Option<&str>) {
        match &mut self.builders[c] {
            Builder::Text(b) => b.append_option(v),
            _ => unreachable!("column {c} of {} is not a text column", self.name),
        }
    }

    /// Appends a flag to column `c` of the current row.
    pub fn bool(&mut self, c: usize, v: bool) {
        match &mut self.builders[c] {
            Builder::Bool(b) => b.append_value(v),
            _ => unreachable!("column {c} of {} is not a flag column", self.name),
        }
    }

    /// Ends the current row (every column must have had its value); writes a batch when full.
    pub fn end_row(&mut self) -> io::Result<()> {
        self.rows += 1;
        if self.rows >= BATCH {
            self.flush()?;
        }
        Ok(())
    }

    fn flush(&mut self) -> io::Result<()> {
        if self.rows == 0 {
            return Ok(());
        }
        let columns: Vec<ArrayRef> = self
            .builders
            .iter_mut()
            .map(|b| -> ArrayRef {
                match b {
                    Builder::F64(b) => Arc::new(b.finish()),
                    Builder::Text(b) => Arc::new(b.finish()),
                    Builder::Bool(b) => Arc::new(b.finish()),
                }
            })
            .collect();
        self.rows = 0;
        let batch = RecordBatch::try_new(self.schema.clone(), columns).map_err(to_io)?;
        self.writer.as_mut().expect("an open table").write(&batch).map_err(to_io)
    }

    /// Writes the last rows and the file's footer, and gives the file its name.
    pub fn finish(&mut self) -> io::Result<()> {
        self.flush()?;
        if let (Some(writer), Some(output)) = (self.writer.take(), self.output.take()) {
            drop(writer.into_inner().map_err(to_io)?);
            output.commit()?;
        }
        Ok(())
    }
}

/// Makes the output directory of a Parquet result (creating it, and its parents, if needed);
/// refuses a path that is an existing file.
pub fn output_dir(dir: &Path) -> io::Result<()> {
    if dir.is_file() {
        return Err(io::Error::new(
            io::ErrorKind::AlreadyExists,
            "is a file: Parquet results are written as one file per table into a directory",
        ));
    }
    std::fs::create_dir_all(dir)
}
