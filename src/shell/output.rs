//! Rendering query results: table, CSV, TSV, JSON and NDJSON, written atomically
//! when they go to a file.

use std::io::Write;
use std::path::Path;

use datafusion::arrow::array::{Array, ArrayRef, AsArray, RecordBatch};
use datafusion::arrow::datatypes::{DataType, Float64Type};
use datafusion::arrow::util::display::{ArrayFormatter, FormatOptions};
use datafusion::arrow::util::pretty::pretty_format_batches_with_options;
use posterity::render::{describe, short};
use serde_json::{Map, Number, Value};

/// Output formats of the shell.
#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum Format {
    Table,
    Csv,
    Tsv,
    Json,
    Ndjson,
}

impl Format {
    /// The format a file name asks for: .csv, .tsv, .json, .ndjson/.jsonl, .txt (table).
    pub fn from_extension(path: &std::path::Path) -> Option<Format> {
        let ext = path.extension()?.to_str()?.to_ascii_lowercase();
        Some(match ext.as_str() {
            "csv" => Format::Csv,
            "tsv" | "tab" => Format::Tsv,
            "json" => Format::Json,
            "ndjson" | "jsonl" => Format::Ndjson,
            "txt" => Format::Table,
            _ => return None,
        })
    }
}

/// Render `batches` in `format`.
pub fn render(batches: &[RecordBatch], format: Format) -> Result<String, String> {
    match format {
        Format::Table => {
            if batches.iter().all(|b| b.num_rows() == 0) && batches.is_empty() {
                return Ok(String::new());
            }
            let readable = batches
                .iter()
                .map(readable_batch)
                .collect::<Result<Vec<_>, _>>()?;
            let options = FormatOptions::default().with_null("NULL");
            pretty_format_batches_with_options(&readable, &options)
                .map(|t| format!("{t}\n"))
                .map_err(|e| e.to_string())
        }
        Format::Csv => delimited(batches, ','),
        Format::Tsv => delimited(batches, '\t'),
        Format::Json => {
            // One row per line, columns in query order; `[]` for no rows. The file
            // reads back with -t.
            let rows = json_rows(batches)?;
            if rows.is_empty() {
                return Ok("[]\n".into());
            }
            Ok(format!("[\n{}\n]\n", rows.join(",\n")))
        }
        Format::Ndjson => Ok(json_rows(batches)?
            .into_iter()
            .map(|r| format!("{r}\n"))
            .collect()),
    }
}

/// For people: floats with at most 6 significant digits, posteriors as their
/// distribution, e.g. `Beta(12.5, 88.5) from 100 trials`. CSV and JSON keep full values.
fn readable_batch(batch: &RecordBatch) -> Result<RecordBatch, String> {
    use datafusion::arrow::array::{ArrayRef, StringArray};
    use datafusion::arrow::datatypes::{Field, Schema};
    use std::sync::Arc;
    let mut fields = Vec::new();
    let mut columns: Vec<ArrayRef> = Vec::new();
    for (field, column) in batch.schema().fields().iter().zip(batch.columns()) {
        let text: Option<Vec<Option<String>>> =
            if posterity::layout::Kind::detect(column.data_type()).is_some() {
                let decoded = posterity::layout::PosteriorColumn::new("display", column)
                    .map_err(|e| e.to_string())?;
                Some(
                    (0..column.len())
                        .map(|i| decoded.get(i).ok().flatten().map(|p| describe(&p)))
                        .collect(),
                )
            } else if column.data_type() == &DataType::Float64 {
                let c = column.as_primitive::<Float64Type>();
                Some(
                    (0..c.len())
                        .map(|i| c.is_valid(i).then(|| short(c.value(i))))
                        .collect(),
                )
            } else {
                None
            };
        match text {
            Some(t) => {
                fields.push(Field::new(field.name(), DataType::Utf8, true));
                columns.push(Arc::new(StringArray::from(t)));
            }
            None => {
                fields.push(field.as_ref().clone());
                columns.push(column.clone());
            }
        }
    }
    RecordBatch::try_new(Arc::new(Schema::new(fields)), columns).map_err(|e| e.to_string())
}

fn delimited(batches: &[RecordBatch], sep: char) -> Result<String, String> {
    let mut out = String::new();
    let Some(first) = batches.first() else {
        return Ok(out);
    };
    let quote = |s: &str| -> String {
        if s.contains(sep) || s.contains('"') || s.contains('\n') {
            format!("\"{}\"", s.replace('"', "\"\""))
        } else {
            s.to_string()
        }
    };
    let header: Vec<String> = first
        .schema()
        .fields()
        .iter()
        .map(|f| quote(f.name()))
        .collect();
    out.push_str(&header.join(&sep.to_string()));
    out.push('\n');
    let options = FormatOptions::default();
    for batch in batches {
        let formatters = batch
            .columns()
            .iter()
            .map(|c| ArrayFormatter::try_new(c.as_ref(), &options))
            .collect::<Result<Vec<_>, _>>()
            .map_err(|e| e.to_string())?;
        for row in 0..batch.num_rows() {
            let cells: Vec<String> = formatters
                .iter()
                .zip(batch.columns())
                .map(|(f, c)| {
                    if c.is_null(row) {
                        Ok(String::new())
                    } else if matches!(c.data_type(), DataType::Struct(_) | DataType::List(_)) {
                        // Posteriors, intervals and lists as JSON (the bundle's form), so
                        // the file parses and reads back.
                        Ok(quote(&json_value(c, row)?.to_string()))
                    } else {
                        Ok(quote(&f.value(row).to_string()))
                    }
                })
                .collect::<Result<Vec<String>, String>>()?
                .into_iter()
                .collect();
            out.push_str(&cells.join(&sep.to_string()));
            out.push('\n');
        }
    }
    Ok(out)
}

/// Each row as a JSON object text with its columns in query order (a JSON map
/// would sort them).
fn json_rows(batches: &[RecordBatch]) -> Result<Vec<String>, String> {
    let mut rows = Vec::new();
    for batch in batches {
        let schema = batch.schema();
        for row in 0..batch.num_rows() {
            let mut cells = Vec::with_capacity(batch.num_columns());
            for (field, column) in schema.fields().iter().zip(batch.columns()) {
                cells.push(format!(
                    "{}:{}",
                    Value::String(field.name().clone()),
                    json_value(column, row)?
                ));
            }
            rows.push(format!("{{{}}}", cells.join(",")));
        }
    }
    Ok(rows)
}

/// One cell as JSON: numbers stay numbers, structs become objects, lists arrays.
fn json_value(column: &ArrayRef, row: usize) -> Result<Value, String> {
    if column.is_null(row) {
        return Ok(Value::Null);
    }
    Ok(match column.data_type() {
        DataType::Struct(fields) => {
            let st = column.as_struct();
            let mut object = Map::new();
            for (f, c) in fields.iter().zip(st.columns()) {
                object.insert(f.name().clone(), json_value(c, row)?);
            }
            Value::Object(object)
        }
        DataType::List(_) => {
            let list = column.as_list::<i32>().value(row);
            Value::Array(
                (0..list.len())
                    .map(|i| json_value(&list, i))
                    .collect::<Result<_, _>>()?,
            )
        }
        DataType::Boolean => Value::Bool(column.as_boolean().value(row)),
        t if t.is_integer() => {
            let v = datafusion::arrow::compute::cast(&column.slice(row, 1), &DataType::Int64)
                .map_err(|e| e.to_string())?;
            Value::from(
                v.as_primitive::<datafusion::arrow::datatypes::Int64Type>()
                    .value(0),
            )
        }
        t if t.is_floating() => {
            let v = datafusion::arrow::compute::cast(&column.slice(row, 1), &DataType::Float64)
                .map_err(|e| e.to_string())?;
            let x = v.as_primitive::<Float64Type>().value(0);
            Number::from_f64(x).map_or_else(|| Value::String(x.to_string()), Value::Number)
        }
        _ => {
            let options = FormatOptions::default();
            let f =
                ArrayFormatter::try_new(column.as_ref(), &options).map_err(|e| e.to_string())?;
            Value::String(f.value(row).to_string())
        }
    })
}

/// Write `text` to `path`. A regular file (or a new one) is written through a
/// temporary file in the same directory and a rename, so a failure never leaves a
/// partial file and the old one stays intact; a symbolic link is followed to the
/// file it names (the link stays); a device, FIFO or socket is written straight
/// into (renaming over /dev/null would replace the device with a file).
pub fn write_atomically(path: &Path, text: &str) -> std::io::Result<()> {
    let path = &match std::fs::canonicalize(path) {
        Ok(target) => target,
        Err(_) => path.to_path_buf(),
    };
    if let Ok(meta) = std::fs::metadata(path) {
        if !meta.is_file() {
            if meta.is_dir() {
                return Err(std::io::Error::other("it is a directory"));
            }
            let mut f = std::fs::OpenOptions::new().write(true).open(path)?;
            return f.write_all(text.as_bytes());
        }
    }
    let dir = path
        .parent()
        .filter(|p| !p.as_os_str().is_empty())
        .unwrap_or(Path::new("."));
    let name = path
        .file_name()
        .map(|n| n.to_string_lossy().to_string())
        .unwrap_or_else(|| "output".into());
    // A writer killed earlier may have left its temporary file: remove such leftovers.
    let prefix = format!(".{name}.");
    if let Ok(entries) = std::fs::read_dir(dir) {
        for e in entries.flatten() {
            let n = e.file_name().to_string_lossy().to_string();
            if n.starts_with(&prefix) && n.ends_with(".tmp") {
                std::fs::remove_file(e.path()).ok();
            }
        }
    }
    let tmp = dir.join(format!(".{name}.{}.tmp", std::process::id()));
    let result = (|| {
        let mut f = std::fs::File::create(&tmp)?;
        f.write_all(text.as_bytes())?;
        f.sync_all()?;
        std::fs::rename(&tmp, path)
    })();
    if result.is_err() {
        std::fs::remove_file(&tmp).ok();
    }
    result
}
