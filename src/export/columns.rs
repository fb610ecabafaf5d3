//! Parquet files column by column, with the `parquet` crate's low-level writer and its row
//! reader: the few column types the export uses, the schema built from them, and typed access
//! to a row's fields by name with the file and row in every error.

use std::collections::HashMap;
use std::fs::File;
use std::path::{Path, PathBuf};
use std::sync::Arc;

use parquet::basic::Compression;
use parquet::data_type::{BoolType, ByteArray, ByteArrayType, DoubleType, Int32Type, Int64Type};
use parquet::file::properties::WriterProperties;
use parquet::file::reader::{FileReader, SerializedFileReader};
use parquet::file::writer::SerializedFileWriter;
use parquet::record::Field;
use parquet::schema::parser::parse_message_type;

use super::ExportError;

/// The values of one column.
#[derive(Debug, Clone, PartialEq)]
pub enum Values {
    /// `INT64`.
    Long(Vec<i64>),
    /// `INT64`, nullable.
    OptLong(Vec<Option<i64>>),
    /// `DOUBLE`.
    Double(Vec<f64>),
    /// `BOOLEAN`.
    Bool(Vec<bool>),
    /// `BYTE_ARRAY (STRING)`.
    Str(Vec<String>),
    /// `BYTE_ARRAY (STRING)`, nullable.
    OptStr(Vec<Option<String>>),
    /// `INT32 (DATE)`: days since 1970-01-01.
    Date(Vec<i32>),
    /// `INT64 (TIMESTAMP(MICROS, UTC))`: microseconds since 1970-01-01 00:00 UTC.
    Micros(Vec<i64>),
    /// A list of strings (the standard three-level `LIST` of `STRING`).
    StrList(Vec<Vec<String>>),
}

impl Values {
    fn schema_line(&self, name: &str) -> String {
        match self {
            Self::Long(_) => format!("REQUIRED INT64 {name};"),
            Self::OptLong(_) => format!("OPTIONAL INT64 {name};"),
            Self::Double(_) => format!("REQUIRED DOUBLE {name};"),
            Self::Bool(_) => format!("REQUIRED BOOLEAN {name};"),
            Self::Str(_) => format!("REQUIRED BYTE_ARRAY {name} (STRING);"),
            Self::OptStr(_) => format!("OPTIONAL BYTE_ARRAY {name} (STRING);"),
            Self::Date(_) => format!("REQUIRED INT32 {name} (DATE);"),
            Self::Micros(_) => format!("REQUIRED INT64 {name} (TIMESTAMP(MICROS,true));"),
            Self::StrList(_) => format!(
                "REQUIRED group {name} (LIST) {{ REPEATED group list {{ REQUIRED BYTE_ARRAY element (STRING); }} }}"
            ),
        }
    }

    fn len(&self) -> usize {
        match self {
            Self::Long(v) | Self::Micros(v) => v.len(),
            Self::OptLong(v) => v.len(),
            Self::Double(v) => v.len(),
            Self::Bool(v) => v.len(),
            Self::Str(v) => v.len(),
            Self::OptStr(v) => v.len(),
            Self::Date(v) => v.len(),
            Self::StrList(v) => v.len(),
        }
    }
}

/// A named column.
#[derive(Debug, Clone, PartialEq)]
pub struct Column {
    pub name: &'static str,
    pub values: Values,
}

/// The Parquet message type of `columns`, in their order.
#[must_use]
pub fn schema(table: &str, columns: &[Column]) -> String {
    let mut s = format!("message {table} {{\n");
    for c in columns {
        s.push_str("  ");
        s.push_str(&c.values.schema_line(c.name));
        s.push('\n');
    }
    s.push('}');
    s
}

fn strings(v: &[String]) -> Vec<ByteArray> {
    v.iter().map(|s| ByteArray::from(s.as_str())).collect()
}

/// Writes one Parquet file (one row group, Snappy-compressed pages) and returns its size in
/// bytes.
///
/// # Errors
/// [`ExportError::Write`] when the file cannot be created or written.
pub fn write_file(path: &Path, table: &str, columns: &[Column]) -> Result<u64, ExportError> {
    let fail = |message: String| ExportError::Write {
        path: path.to_owned(),
        message,
    };
    let rows = columns.first().map_or(0, |c| c.values.len());
    if let Some(c) = columns.iter().find(|c| c.values.len() != rows) {
        return Err(fail(format!(
            "column {} has {} values, not {rows}",
            c.name,
            c.values.len()
        )));
    }
    let message = schema(table, columns);
    let schema = Arc::new(parse_message_type(&message).map_err(|e| fail(e.to_string()))?);
    let props = Arc::new(
        WriterProperties::builder()
            .set_compression(Compression::SNAPPY)
            .set_created_by(format!("hexvigil {}", env!("CARGO_PKG_VERSION")))
            .build(),
    );
    let file = File::create(path).map_err(|e| fail(e.to_string()))?;
    let mut writer =
        SerializedFileWriter::new(file, schema, props).map_err(|e| fail(e.to_string()))?;
    let mut group = writer.next_row_group().map_err(|e| fail(e.to_string()))?;
    for c in columns {
        let Some(mut col) = group.next_column().map_err(|e| fail(e.to_string()))? else {
            return Err(fail(format!("no column writer for {}", c.name)));
        };
        let written = match &c.values {
            Values::Long(v) | Values::Micros(v) => {
                col.typed::<Int64Type>().write_batch(v, None, None)
            }
            Values::OptLong(v) => {
                let present: Vec<i64> = v.iter().flatten().copied().collect();
                let def: Vec<i16> = v.iter().map(|x| i16::from(x.is_some())).collect();
                col.typed::<Int64Type>()
                    .write_batch(&present, Some(&def), None)
            }
            Values::Double(v) => col.typed::<DoubleType>().write_batch(v, None, None),
            Values::Bool(v) => col.typed::<BoolType>().write_batch(v, None, None),
            Values::Date(v) => col.typed::<Int32Type>().write_batch(v, None, None),
            Values::Str(v) => col
                .typed::<ByteArrayType>()
                .write_batch(&strings(v), None, None),
            Values::OptStr(v) => {
                let present: Vec<ByteArray> = v
                    .iter()
                    .flatten()
                    .map(|s| ByteArray::from(s.as_str()))
                    .collect();
                let def: Vec<i16> = v.iter().map(|x| i16::from(x.is_some())).collect();
                col.typed::<ByteArrayType>()
                    .write_batch(&present, Some(&def), None)
            }
            Values::StrList(v) => {
                // Definition level 1 for an element, 0 for an empty list; repetition level 0
                // starts a row's list, 1 continues it.
                let mut values = Vec::new();
                let (mut def, mut rep) = (Vec::new(), Vec::new());
                for list in v {
                    if list.is_empty() {
                        def.push(0);
                        rep.push(0);
                    }
                    for (i, s) in list.iter().enumerate() {
                        values.push(ByteArray::from(s.as_str()));
                        def.push(1);
                        rep.push(i16::from(i > 0));
                    }
                }
                col.typed::<ByteArrayType>()
                    .write_batch(&values, Some(&def), Some(&rep))
            }
        };
        written.map_err(|e| fail(format!("column {}: {e}", c.name)))?;
        col.close().map_err(|e| fail(e.to_string()))?;
    }
    group.close().map_err(|e| fail(e.to_string()))?;
    writer.close().map_err(|e| fail(e.to_string()))?;
    std::fs::metadata(path)
        .map(|m| m.len())
        .map_err(|e| fail(e.to_string()))
}

/// One row of a file being read: its fields by name, with typed getters whose errors name the
/// file, the row and the column.
pub struct Row<'a> {
    path: &'a Path,
    /// Row number in the file, from 1.
    number: u64,
    index: &'a HashMap<String, usize>,
    fields: Vec<(String, Field)>,
}

impl Row<'_> {
    fn bad(&self, column: &str, message: &str) -> ExportError {
        ExportError::Read {
            path: self.path.to_owned(),
            position: format!("row {}, column {column}", self.number),
            message: message.to_owned(),
        }
    }

    /// An error about this row (not about one column).
    #[must_use]
    pub fn error(&self, message: &str) -> ExportError {
        ExportError::Read {
            path: self.path.to_owned(),
            position: format!("row {}", self.number),
            message: message.to_owned(),
        }
    }

    fn field(&self, column: &str) -> Result<Option<&Field>, ExportError> {
        let i = self
            .index
            .get(column)
            .ok_or_else(|| self.bad(column, "no such column in the file"))?;
        Ok(match self.fields.get(*i).map(|f| &f.1) {
            None | Some(Field::Null) => None,
            Some(f) => Some(f),
        })
    }

    /// A nullable integer column of any width.
    ///
    /// # Errors
    /// When the column is missing or not an integer.
    pub fn opt_long(&self, column: &str) -> Result<Option<i64>, ExportError> {
        let Some(f) = self.field(column)? else {
            return Ok(None);
        };
        let v = match *f {
            Field::Byte(x) => Some(i64::from(x)),
            Field::Short(x) => Some(i64::from(x)),
            Field::Int(x) => Some(i64::from(x)),
            Field::Long(x) => Some(x),
            Field::UByte(x) => Some(i64::from(x)),
            Field::UShort(x) => Some(i64::from(x)),
            Field::UInt(x) => Some(i64::from(x)),
            Field::ULong(x) => i64::try_from(x).ok(),
            _ => None,
        };
        v.map(Some)
            .ok_or_else(|| self.bad(column, &format!("{f} is not a 64-bit integer")))
    }

    /// A required integer column.
    ///
    /// # Errors
    /// When the column is missing, null or not an integer.
    pub fn long(&self, column: &str) -> Result<i64, ExportError> {
        self.opt_long(column)?
            .ok_or_else(|| self.bad(column, "null where a value is required"))
    }

    /// A required count: an integer of at least 0.
    ///
    /// # Errors
    /// As [`Row::long`], and for a negative value.
    pub fn count(&self, column: &str) -> Result<u64, ExportError> {
        let v = self.long(column)?;
        u64::try_from(v).map_err(|_| self.bad(column, &format!("{v} is negative")))
    }

    /// A required floating-point column.
    ///
    /// # Errors
    /// When the column is missing, null or not a number.
    pub fn double(&self, column: &str) -> Result<f64, ExportError> {
        match self.field(column)? {
            Some(Field::Double(x)) => Ok(*x),
            Some(Field::Float(x)) => Ok(f64::from(*x)),
            Some(f) => Err(self.bad(column, &format!("{f} is not a number"))),
            None => Err(self.bad(column, "null where a value is required")),
        }
    }

    /// A nullable string column.
    ///
    /// # Errors
    /// When the column is missing or not a string.
    pub fn opt_string(&self, column: &str) -> Result<Option<String>, ExportError> {
        match self.field(column)? {
            Some(Field::Str(s)) => Ok(Some(s.clone())),
            Some(f) => Err(self.bad(column, &format!("{f} is not a string"))),
            None => Ok(None),
        }
    }

    /// A required string column.
    ///
    /// # Errors
    /// When the column is missing, null or not a string.
    pub fn string(&self, column: &str) -> Result<String, ExportError> {
        self.opt_string(column)?
            .ok_or_else(|| self.bad(column, "null where a value is required"))
    }

    /// A required timestamp column, in Unix seconds (rounded down).
    ///
    /// # Errors
    /// When the column is missing, null or not a timestamp.
    pub fn timestamp_secs(&self, column: &str) -> Result<i64, ExportError> {
        match self.field(column)? {
            Some(Field::TimestampMicros(x)) => Ok(x.div_euclid(1_000_000)),
            Some(Field::TimestampMillis(x)) => Ok(x.div_euclid(1_000)),
            Some(f) => Err(self.bad(column, &format!("{f} is not a timestamp"))),
            None => Err(self.bad(column, "null where a value is required")),
        }
    }

    /// A list-of-strings column (null reads as empty).
    ///
    /// # Errors
    /// When the column is missing or not a list of strings.
    pub fn strings(&self, column: &str) -> Result<Vec<String>, ExportError> {
        match self.field(column)? {
            None => Ok(Vec::new()),
            Some(Field::ListInternal(list)) => list
                .elements()
                .iter()
                .map(|f| match f {
                    Field::Str(s) => Ok(s.clone()),
                    other => Err(self.bad(column, &format!("{other} is not a string"))),
                })
                .collect(),
            Some(f) => Err(self.bad(column, &format!("{f} is not a list"))),
        }
    }
}

/// Reads every row of a Parquet file, in order, handing each to `each`.
///
/// # Errors
/// [`ExportError::Parquet`] when the file cannot be read as Parquet, or what `each` returns.
pub fn read_file(
    path: &Path,
    mut each: impl FnMut(&Row<'_>) -> Result<(), ExportError>,
) -> Result<(), ExportError> {
    let parquet_err = |e: parquet::errors::ParquetError| ExportError::Parquet {
        path: path.to_owned(),
        message: e.to_string(),
    };
    let file = File::open(path).map_err(|e| ExportError::Io {
        path: path.to_owned(),
        source: e,
    })?;
    let reader = SerializedFileReader::new(file).map_err(parquet_err)?;
    let index: HashMap<String, usize> = reader
        .metadata()
        .file_metadata()
        .schema_descr()
        .root_schema()
        .get_fields()
        .iter()
        .enumerate()
        .map(|(i, f)| (f.name().to_owned(), i))
        .collect();
    let rows = reader.get_row_iter(None).map_err(parquet_err)?;
    for (n, row) in rows.enumerate() {
        let row = Row {
            path,
            number: n as u64 + 1,
            index: &index,
            fields: row.map_err(parquet_err)?.into_columns(),
        };
        each(&row)?;
    }
    Ok(())
}

/// The Parquet files under `dir`, at any depth, sorted by path.
///
/// # Errors
/// [`ExportError::Io`] when a folder cannot be listed.
pub fn parquet_files(dir: &Path) -> Result<Vec<PathBuf>, ExportError> {
    let mut out = Vec::new();
    let mut stack = vec![dir.to_owned()];
    while let Some(d) = stack.pop() {
        let entries = std::fs::read_dir(&d).map_err(|e| ExportError::Io {
            path: d.clone(),
            source: e,
        })?;
        for entry in entries {
            let p = entry
                .map_err(|e| ExportError::Io {
                    path: d.clone(),
                    source: e,
                })?
                .path();
            if p.is_dir() {
                stack.push(p);
            } else if p.extension().is_some_and(|x| x == "parquet") {
                out.push(p);
            }
        }
    }
    out.sort();
    Ok(out)
}

#[cfg(test)]
#[allow(clippy::unwrap_used, reason = "constant test inputs")]
mod tests {
    use super::*;

    #[test]
    fn every_column_type_reads_back() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("t.parquet");
        let columns = vec![
            Column {
                name: "long",
                values: Values::Long(vec![i64::MIN, 0, 612_951_562_311_958_527]),
            },
            Column {
                name: "opt_long",
                values: Values::OptLong(vec![None, Some(-5), None]),
            },
            Column {
                name: "double",
                values: Values::Double(vec![0.1, -2.5e-300, 1.0]),
            },
            Column {
                name: "flag",
                values: Values::Bool(vec![true, false, true]),
            },
            Column {
                name: "text",
                values: Values::Str(vec![
                    String::new(),
                    "ö «x» \"q\"\n".to_owned(),
                    "z".to_owned(),
                ]),
            },
            Column {
                name: "opt_text",
                values: Values::OptStr(vec![Some("a".to_owned()), None, None]),
            },
            Column {
                name: "day",
                values: Values::Date(vec![20_000, 0, -1]),
            },
            Column {
                name: "at",
                values: Values::Micros(vec![1_700_000_000_000_000, 0, -1]),
            },
            Column {
                name: "list",
                values: Values::StrList(vec![
                    vec!["one".to_owned(), "two".to_owned()],
                    Vec::new(),
                    vec!["three".to_owned()],
                ]),
            },
        ];
        write_file(&path, "t", &columns).unwrap();
        let mut rows = Vec::new();
        read_file(&path, |r| {
            rows.push((
                r.long("long")?,
                r.opt_long("opt_long")?,
                r.double("double")?,
                r.opt_string("opt_text")?,
                r.string("text")?,
                r.timestamp_secs("at")?,
                r.strings("list")?,
            ));
            Ok(())
        })
        .unwrap();
        assert_eq!(rows.len(), 3);
        assert_eq!(rows[0].0, i64::MIN);
        assert_eq!(rows[2].0, 612_951_562_311_958_527);
        assert_eq!(rows[1].1, Some(-5));
        assert_eq!(rows[0].1, None);
        assert!((rows[1].2 + 2.5e-300).abs() < 1e-310);
        assert_eq!(rows[0].3.as_deref(), Some("a"));
        assert_eq!(rows[1].4, "ö «x» \"q\"\n");
        assert_eq!(rows[0].5, 1_700_000_000);
        // One microsecond before 1970 is in the second before.
        assert_eq!(rows[2].5, -1);
        assert_eq!(rows[0].6, ["one", "two"]);
        assert!(rows[1].6.is_empty());
        // A required value that is null, and a column that is not there.
        let e = read_file(&path, |r| r.long("opt_long").map(|_| ())).unwrap_err();
        assert!(
            e.to_string().contains("row 1, column opt_long: null"),
            "{e}"
        );
        let e = read_file(&path, |r| r.long("nope").map(|_| ())).unwrap_err();
        assert!(e.to_string().contains("no such column"), "{e}");
        assert!(schema("t", &columns).contains("REQUIRED group list (LIST)"));
    }

    #[test]
    fn garbage_is_not_parquet() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("bad.parquet");
        std::fs::write(&path, b"PAR1 not really").unwrap();
        let e = read_file(&path, |_| Ok(())).unwrap_err();
        assert!(matches!(e, ExportError::Parquet { .. }), "{e}");
        assert!(e.to_string().contains("bad.parquet"));
    }
}
