//! Rendering query results: table, CSV, TSV, JSON, NDJSON and an SVG interval plot, written atomically
//! when they go to a file.

use std::io::Write;
use std::path::Path;

use crate::render::{describe, short};
use datafusion::arrow::array::{Array, ArrayRef, AsArray, RecordBatch};
use datafusion::arrow::datatypes::{DataType, Float64Type};
use datafusion::arrow::util::display::{ArrayFormatter, FormatOptions};
use serde_json::{Map, Number, Value};

/// Output formats of the shell.
#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum Format {
    Table,
    Csv,
    Tsv,
    Json,
    Ndjson,
    /// An interval plot of a result with a label column and a posterior column.
    Svg,
}

impl Format {
    /// The format a file name asks for: .csv, .tsv, .json, .ndjson/.jsonl, .txt (table), .svg.
    pub fn from_extension(path: &std::path::Path) -> Option<Format> {
        let ext = path.extension()?.to_str()?.to_ascii_lowercase();
        Some(match ext.as_str() {
            "csv" => Format::Csv,
            "tsv" | "tab" => Format::Tsv,
            "json" => Format::Json,
            "ndjson" | "jsonl" => Format::Ndjson,
            "txt" => Format::Table,
            "svg" => Format::Svg,
            _ => return None,
        })
    }
}

/// Render `batches` in `format`; a table fits `width` characters when given (a
/// terminal's width): long cells are cut with an ellipsis, and rows too wide for it
/// are shown one field per line.
pub fn render(
    batches: &[RecordBatch],
    format: Format,
    width: Option<usize>,
) -> Result<String, String> {
    match format {
        Format::Table => {
            if batches.iter().all(|b| b.num_rows() == 0) && batches.is_empty() {
                return Ok(String::new());
            }
            table(batches, width)
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
        Format::Svg => crate::report::query_svg(batches),
    }
}

/// A table for people: every cell as readable text with tabs and line breaks
/// shown escaped (so columns stay aligned), cut to fit `width`.
fn table(batches: &[RecordBatch], width: Option<usize>) -> Result<String, String> {
    let Some(first) = batches.first() else {
        return Ok(String::new());
    };
    let names: Vec<String> = first
        .schema()
        .fields()
        .iter()
        .map(|f| f.name().clone())
        .collect();
    let mut rows: Vec<Vec<String>> = Vec::new();
    let options = FormatOptions::default().with_null("NULL");
    for batch in batches {
        let readable = readable_batch(batch)?;
        let formatters = readable
            .columns()
            .iter()
            .map(|c| ArrayFormatter::try_new(c.as_ref(), &options))
            .collect::<Result<Vec<_>, _>>()
            .map_err(|e| e.to_string())?;
        for r in 0..readable.num_rows() {
            rows.push(
                formatters
                    .iter()
                    .map(|f| escape(&f.value(r).to_string()))
                    .collect(),
            );
        }
    }
    let chars = |s: &str| s.chars().count();
    let mut widths: Vec<usize> = names.iter().map(|n| chars(n)).collect();
    for row in &rows {
        for (w, cell) in widths.iter_mut().zip(row) {
            *w = (*w).max(chars(cell));
        }
    }
    let total = widths.iter().sum::<usize>() + 3 * widths.len() + 1;
    if let Some(limit) = width.filter(|&w| total > w && names.len() > 1) {
        let label = names.iter().map(|n| chars(n)).max().unwrap_or(0);
        if label + 8 < limit {
            return Ok(vertical(&names, &rows, label, limit));
        }
    }
    let limit = width.map(|w| w.saturating_sub(4).max(8));
    let mut out = String::new();
    let line = |widths: &[usize]| {
        let parts: Vec<String> = widths.iter().map(|w| "-".repeat(w + 2)).collect();
        format!("+{}+\n", parts.join("+"))
    };
    let widths: Vec<usize> = widths
        .iter()
        .map(|w| limit.map_or(*w, |l| (*w).min(l)))
        .collect();
    let row_text = |cells: &[String]| {
        let parts: Vec<String> = cells
            .iter()
            .zip(&widths)
            .map(|(c, w)| {
                let c = cut(c, *w);
                format!(" {c}{} ", " ".repeat(w - chars(&c)))
            })
            .collect();
        format!("|{}|\n", parts.join("|"))
    };
    out.push_str(&line(&widths));
    out.push_str(&row_text(&names));
    out.push_str(&line(&widths));
    for row in &rows {
        out.push_str(&row_text(row));
    }
    out.push_str(&line(&widths));
    Ok(out)
}

/// Rows too wide for the terminal: one `name | value` line per field.
fn vertical(names: &[String], rows: &[Vec<String>], label: usize, width: usize) -> String {
    let mut out = String::new();
    for (i, row) in rows.iter().enumerate() {
        out.push_str(&format!("-- row {} --\n", i + 1));
        for (name, cell) in names.iter().zip(row) {
            let pad = label - name.chars().count();
            out.push_str(&format!(
                "{name}{} | {}\n",
                " ".repeat(pad),
                cut(cell, width.saturating_sub(label + 3).max(8))
            ));
        }
    }
    out
}

/// Tabs, line breaks and other control characters as escapes, for alignment.
fn escape(s: &str) -> String {
    if !s.chars().any(char::is_control) {
        return s.to_string();
    }
    s.chars()
        .map(|c| match c {
            '\n' => "\\n".to_string(),
            '\t' => "\\t".to_string(),
            '\r' => "\\r".to_string(),
            c if c.is_control() => format!("\\u{{{:x}}}", c as u32),
            c => c.to_string(),
        })
        .collect()
}

/// `s` in at most `width` characters, with an ellipsis where it was cut.
fn cut(s: &str, width: usize) -> String {
    if s.chars().count() <= width {
        return s.to_string();
    }
    let kept: String = s.chars().take(width.saturating_sub(1)).collect();
    format!("{kept}…")
}

/// The width of the terminal on standard output, if it is one.
pub fn terminal_width() -> Option<usize> {
    use std::io::IsTerminal;
    if !std::io::stdout().is_terminal() {
        return None;
    }
    // SAFETY: TIOCGWINSZ fills a winsize struct we own; a failure leaves it zeroed.
    let mut size: libc::winsize = unsafe { std::mem::zeroed() };
    let ok = unsafe { libc::ioctl(libc::STDOUT_FILENO, libc::TIOCGWINSZ, &mut size) } == 0;
    (ok && size.ws_col > 0).then_some(size.ws_col as usize)
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
            if crate::layout::Kind::detect(column.data_type()).is_some() {
                let decoded = crate::layout::PosteriorColumn::new("display", column)
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

#[cfg(test)]
mod tests {
    use super::*;
    use datafusion::arrow::array::StringArray;
    use datafusion::arrow::datatypes::{Field, Schema};
    use std::sync::Arc;

    fn batch(columns: &[(&str, Vec<&str>)]) -> RecordBatch {
        let schema = Schema::new(
            columns
                .iter()
                .map(|(n, _)| Field::new(*n, DataType::Utf8, true))
                .collect::<Vec<_>>(),
        );
        let arrays: Vec<ArrayRef> = columns
            .iter()
            .map(|(_, v)| Arc::new(StringArray::from(v.clone())) as ArrayRef)
            .collect();
        RecordBatch::try_new(Arc::new(schema), arrays).unwrap()
    }

    #[test]
    fn tables_escape_cut_and_turn_vertical() {
        let b = batch(&[("t", vec!["a\tb\nc"])]);
        let text = render(&[b], Format::Table, None).unwrap();
        assert!(text.contains("| a\\tb\\nc |"), "{text}");
        let long = "x".repeat(100);
        let b = batch(&[("long", vec![long.as_str()])]);
        let text = render(std::slice::from_ref(&b), Format::Table, Some(40)).unwrap();
        assert!(text.lines().all(|l| l.chars().count() <= 40), "{text}");
        assert!(text.contains('…'));
        // Never cut in CSV.
        assert!(render(&[b], Format::Csv, Some(40)).unwrap().contains(&long));
        let wide = batch(&[("first", vec!["one"]), ("second", vec![long.as_str()])]);
        let text = render(&[wide], Format::Table, Some(60)).unwrap();
        assert!(
            text.starts_with("-- row 1 --\nfirst  | one\nsecond | xxx"),
            "{text}"
        );
    }
}
