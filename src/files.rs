//! Registering files as tables: Parquet, CSV, TSV, NDJSON and JSON arrays, a file,
//! a directory of files (also partitioned by value, `year=2024/`, its path columns
//! typed from their values) or a glob (a file or a directory's files also gzip-compressed),
//! with checks the engine does not make (broken Parquet, empty CSV, unterminated
//! quotes, CSV directories whose headers disagree) so that a broken file fails at
//! registration with its name. Used by the shell and by every front end that reads
//! files for `encode`.

use std::collections::BTreeSet;
use std::path::{Path, PathBuf};

use datafusion::arrow::datatypes::DataType;
use datafusion::common::ScalarValue;
use datafusion::datasource::file_format::options::{
    CsvReadOptions, JsonReadOptions, ParquetReadOptions,
};
use datafusion::error::DataFusionError;
use datafusion::prelude::SessionContext;

/// How tables from CSV files are read.
#[derive(Debug, Clone)]
pub struct CsvOptions {
    pub header: bool,
    pub delimiter: u8,
    pub null: Option<String>,
    /// Columns read as text whatever they look like.
    pub text: Vec<String>,
    /// How many rows of each file a column's type is inferred from (the engine's
    /// 1000 when `None`; `usize::MAX` reads whole files).
    pub infer_rows: Option<usize>,
}

impl Default for CsvOptions {
    fn default() -> Self {
        CsvOptions {
            header: true,
            delimiter: b',',
            null: None,
            text: Vec::new(),
            infer_rows: None,
        }
    }
}

impl CsvOptions {
    /// A field delimiter as users write it: one character, or `\t` for a tab.
    pub fn parse_delimiter(value: &str) -> Result<u8, String> {
        match value.as_bytes() {
            [b] => Ok(*b),
            b"\\t" => Ok(b'\t'),
            _ => Err(format!(
                "must be one character (or \\t for a tab), got '{value}'"
            )),
        }
    }

    /// How many rows a CSV column's type is inferred from: a number from 1, or `all`.
    pub fn parse_infer_rows(value: &str) -> Result<usize, String> {
        match value.trim() {
            "all" => Ok(usize::MAX),
            n => n
                .parse::<usize>()
                .ok()
                .filter(|n| *n >= 1)
                .ok_or_else(|| format!("'{value}' is not a number of rows from 1, or all")),
        }
    }
}

/// Why a file could not be registered.
#[derive(Debug, Clone, PartialEq)]
pub enum FileError {
    /// The path says nothing the reader can use (no known format).
    Usage(String),
    /// The file is missing, unreadable or broken.
    Read(String),
    /// The engine refused the file at `path`.
    Engine { path: String, message: String },
}

impl std::fmt::Display for FileError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            FileError::Usage(m) | FileError::Read(m) => f.write_str(m),
            FileError::Engine { path, message } => write!(f, "{path}: {message}"),
        }
    }
}

impl std::error::Error for FileError {}

/// Register the file(s) at `path` (a file, a directory of files or a glob;
/// Parquet, CSV, TSV, NDJSON or a JSON array) as table `name`. CSV columns
/// named in `csv.text` are read as text exactly as written.
pub async fn register(
    ctx: &SessionContext,
    name: &str,
    path: &str,
    csv: &CsvOptions,
) -> Result<(), FileError> {
    let source = Source::of(path).map_err(FileError::Usage)?;
    if !source.gzip {
        return register_plain(ctx, name, path, &source, csv).await;
    }
    // Gzip files are read from decompressed copies; messages name the path given.
    let copy = decompressed_copy(path).map_err(FileError::Read)?;
    let shown = |m: String| m.replace(&copy, path);
    let copied = Source::of(&copy).map_err(|m| FileError::Usage(shown(m)))?;
    register_plain(ctx, name, &copy, &copied, csv)
        .await
        .map_err(|e| match e {
            FileError::Usage(m) => FileError::Usage(shown(m)),
            FileError::Read(m) => FileError::Read(shown(m)),
            FileError::Engine { message, .. } => FileError::Engine {
                path: path.to_string(),
                message: shown(message),
            },
        })
}

async fn register_plain(
    ctx: &SessionContext,
    name: &str,
    path: &str,
    source: &Source,
    csv: &CsvOptions,
) -> Result<(), FileError> {
    let text: Vec<&str> = csv.text.iter().map(String::as_str).collect();
    let format = source.kind.ok_or_else(|| {
        FileError::Usage(format!(
            "cannot tell the format of '{path}'; use a .parquet, .csv, .tsv, .json or .ndjson \
             path (also gzip-compressed: .csv.gz)"
        ))
    })?;
    if !path.contains('*') && !Path::new(path).exists() {
        return Err(FileError::Read(format!("'{path}' does not exist")));
    }
    let delimiter = if format == FileKind::Tsv {
        b'\t'
    } else {
        csv.delimiter
    };
    let files: Vec<PathBuf> = match &source.directory {
        Some(directory) => directory.files.clone(),
        None if Path::new(path).is_file() => vec![PathBuf::from(path)],
        None => Vec::new(), // globs are checked by the engine
    };
    preflight(path, &files, format, csv.header, delimiter).map_err(FileError::Read)?;
    // A partitioned directory's path columns are read as text, as CSV keys are.
    let partition_columns: Vec<(String, DataType)> = source
        .directory
        .iter()
        .flat_map(|d| d.partitions.iter())
        .map(|(c, _)| (c.clone(), DataType::Utf8))
        .collect();
    let result = match format {
        FileKind::Parquet => {
            let ext = extension_of(path, ".parquet");
            ctx.register_parquet(
                name,
                path,
                ParquetReadOptions::default()
                    .file_extension(&ext)
                    .table_partition_cols(partition_columns),
            )
            .await
        }
        FileKind::Csv | FileKind::Tsv => {
            let ext = extension_of(
                path,
                if format == FileKind::Tsv {
                    ".tsv"
                } else {
                    ".csv"
                },
            );
            let mut options = CsvReadOptions::new()
                .has_header(csv.header)
                .delimiter(delimiter)
                .file_extension(&ext)
                .table_partition_cols(partition_columns);
            if let Some(null) = &csv.null {
                options = options.null_regex(Some(null_pattern(null)));
            }
            if let Some(rows) = csv.infer_rows {
                options = options.schema_infer_max_records(rows);
            }
            let directory_files = source.directory.as_ref().map(|_| files.as_slice());
            register_csv(
                ctx,
                name,
                path,
                options,
                (directory_files, csv.null.as_deref()),
                &text,
            )
            .await
        }
        FileKind::Json => {
            // A JSON array (what --format json writes) is read through NDJSON.
            let path = json_array_as_ndjson(path).map_err(FileError::Read)?;
            let ext = extension_of(&path, ".json");
            ctx.register_json(
                name,
                &path,
                JsonReadOptions::default()
                    .file_extension(&ext)
                    .table_partition_cols(partition_columns),
            )
            .await
        }
    };
    let engine = |e: DataFusionError| FileError::Engine {
        path: path.to_string(),
        message: crate::render::engine_error(e),
    };
    result.map_err(engine)?;
    match &source.directory {
        Some(directory) => type_partitions(ctx, name, &directory.partitions, &text)
            .await
            .map_err(engine),
        None => Ok(()),
    }
}

/// A CSV file or directory (`directory_files`: its data files) with its inferred
/// types, except that columns `text` stay text as written. DataFusion 55 honours a
/// CSV null marker only while inferring the schema, so with a marker the file is
/// read as text and a view turns the marker into NULL and casts each column to its
/// type.
async fn register_csv(
    ctx: &SessionContext,
    name: &str,
    path: &str,
    options: CsvReadOptions<'_>,
    (directory_files, null): (Option<&[PathBuf]>, Option<&str>),
    text: &[&str],
) -> datafusion::error::Result<()> {
    use datafusion::arrow::datatypes::{Field, Schema};
    if null.is_none() && text.is_empty() && directory_files.is_none() {
        return ctx.register_csv(name, path, options).await;
    }
    let inferred = match directory_files {
        Some(files) => directory_schema(ctx, files, &options).await?,
        None => ctx
            .read_csv(path, options.clone())
            .await?
            .schema()
            .as_arrow()
            .clone(),
    };
    // A schema given to the reader is the files' own: without the path's columns.
    let path_columns: Vec<String> = options
        .table_partition_cols
        .iter()
        .map(|(c, _)| c.clone())
        .collect();
    let in_path = |f: &Field| path_columns.contains(f.name());
    let typed = Schema::new(
        inferred
            .fields()
            .iter()
            .filter(|f| !in_path(f))
            .map(|f| match text.contains(&f.name().as_str()) {
                true => Field::new(f.name(), DataType::Utf8, true),
                false => f.as_ref().clone(),
            })
            .collect::<Vec<_>>(),
    );
    let Some(null) = null else {
        return ctx.register_csv(name, path, options.schema(&typed)).await;
    };
    let all_text = Schema::new(
        typed
            .fields()
            .iter()
            .map(|f| Field::new(f.name(), DataType::Utf8, true))
            .collect::<Vec<_>>(),
    );
    let raw = ctx.read_csv(path, options.schema(&all_text)).await?;
    // The files' columns, then the path's (text).
    let from_path = inferred.fields().iter().filter(|f| in_path(f)).cloned();
    let columns: Vec<datafusion::prelude::Expr> = typed
        .fields()
        .iter()
        .cloned()
        .chain(from_path)
        .map(|f| {
            let column = datafusion::prelude::ident(f.name());
            datafusion::prelude::cast(
                datafusion::prelude::nullif(column, datafusion::prelude::lit(null)),
                f.data_type().clone(),
            )
            .alias(f.name())
        })
        .collect();
    ctx.register_table(name, raw.select(columns)?.into_view())?;
    Ok(())
}

/// The columns of a directory's CSV `files`: each file's types inferred on its own
/// and widened where files disagree (whole numbers in one file and fractions in
/// another make a float column, any other disagreement a text column; the engine
/// refuses such a directory), then the path's partition columns as text.
async fn directory_schema(
    ctx: &SessionContext,
    files: &[PathBuf],
    options: &CsvReadOptions<'_>,
) -> datafusion::error::Result<datafusion::arrow::datatypes::Schema> {
    use datafusion::arrow::datatypes::{Field, Schema};
    let mut one_file = options.clone();
    one_file.table_partition_cols = Vec::new();
    let mut fields: Vec<Field> = Vec::new();
    for file in files {
        let file = file.display().to_string();
        let df = ctx.read_csv(&file, one_file.clone()).await?;
        for field in df.schema().as_arrow().fields() {
            match fields.iter_mut().find(|f| f.name() == field.name()) {
                Some(f) => {
                    let widened = widen(f.data_type(), field.data_type());
                    *f = f.clone().with_data_type(widened);
                }
                None => fields.push(field.as_ref().clone()),
            }
        }
    }
    for (column, data_type) in &options.table_partition_cols {
        fields.push(Field::new(column, data_type.clone(), true));
    }
    Ok(Schema::new(fields))
}

/// The type that holds values inferred as `a` in one file and `b` in another.
fn widen(a: &DataType, b: &DataType) -> DataType {
    match (a, b) {
        (a, b) if a == b => a.clone(),
        (DataType::Null, t) | (t, DataType::Null) => t.clone(),
        (DataType::Int64, DataType::Float64) | (DataType::Float64, DataType::Int64) => {
            DataType::Float64
        }
        _ => DataType::Utf8,
    }
}

/// For a file holding one JSON array of objects: the same rows as NDJSON in a
/// temporary file (see `temporary_path`); any other path unchanged.
fn json_array_as_ndjson(path: &str) -> Result<String, String> {
    if !is_json_array(path) {
        return Ok(path.to_string());
    }
    let text = std::fs::read_to_string(path).map_err(|e| format!("cannot read {path}: {e}"))?;
    // Raw elements keep their keys in the order written (the columns' order).
    let rows: Vec<Box<serde_json::value::RawValue>> =
        serde_json::from_str(&text).map_err(|e| format!("{path} is not a JSON array: {e}"))?;
    if rows.is_empty() {
        return Err(format!(
            "{path} holds an empty JSON array: no columns to read"
        ));
    }
    let mut out = String::new();
    for row in &rows {
        let raw = row.get().trim();
        if !raw.starts_with('{') {
            return Err(format!(
                "{path}: every element of the JSON array must be an object"
            ));
        }
        // One line per row: NDJSON allows no line breaks inside a row.
        out.push_str(&raw.replace(['\n', '\r'], " "));
        out.push('\n');
    }
    let tmp = temporary_path(path, "json")?;
    std::fs::write(&tmp, out).map_err(|e| format!("cannot write {}: {e}", tmp.display()))?;
    Ok(tmp.display().to_string())
}

/// What makes the file at `path` read from a temporary copy (see `temporary_path`), if
/// anything: "a gzip file" or "a JSON array".
pub fn read_from_copy(path: &str) -> Option<&'static str> {
    let source = Source::of(path).ok()?;
    if source.gzip {
        return Some("a gzip file");
    }
    (source.kind == Some(FileKind::Json) && is_json_array(path)).then_some("a JSON array")
}

/// Whether `path` names text files (CSV, TSV, NDJSON or a JSON array, also
/// gzip-compressed), which every scan parses in full.
pub(crate) fn is_text_source(path: &str) -> bool {
    Source::of(path).is_ok_and(|s| s.kind.is_some_and(|k| k != FileKind::Parquet))
}

/// Whether the file at `path` starts with '[' (a JSON array, not NDJSON).
fn is_json_array(path: &str) -> bool {
    use std::io::Read as _;
    let mut head = [0u8; 64];
    let n = std::fs::File::open(path)
        .and_then(|mut f| f.read(&mut head))
        .unwrap_or(0);
    head[..n].iter().find(|b| !b.is_ascii_whitespace()) == Some(&b'[')
}

/// The file at `path` (`name.csv.gz` and the like) decompressed into a temporary file
/// named like it without `.gz`, so that the format is told from the name as usual; for a
/// directory of gzip files (`part-0.csv.gz`, ...), a temporary directory of their copies.
fn decompressed_copy(path: &str) -> Result<String, String> {
    if path.contains('*') {
        return Err(format!(
            "'{path}': gzip files are not read through a glob; name the directory that holds \
             them, or each .gz file as a table of its own"
        ));
    }
    if !Path::new(path).exists() {
        return Err(format!("'{path}' does not exist"));
    }
    if !Path::new(path).is_dir() {
        let (inner, extension) = inner_name(path)?;
        let copy = temporary_path(&inner, &extension)?;
        decompress_file(path, &copy)?;
        return Ok(copy.display().to_string());
    }
    let mut files = Vec::new();
    gzip_files(Path::new(path), Path::new(""), &mut files)?;
    // Every name checked before anything is decompressed.
    let inner: Vec<String> = files
        .iter()
        .map(|(f, _)| inner_name(&f.display().to_string()).map(|(inner, _)| inner))
        .collect::<Result<_, _>>()?;
    if inner
        .iter()
        .any(|i| kind_of_name(i) != kind_of_name(&inner[0]))
    {
        return Err(format!(
            "'{path}' holds gzip files of more than one format; give a directory of one format"
        ));
    }
    // The copies keep the tree, so a partitioned dataset keeps its path columns.
    let copies = temporary_path(path, "d")?;
    std::fs::create_dir(&copies).map_err(|e| format!("cannot create {}: {e}", copies.display()))?;
    for ((file, under), inner) in files.iter().zip(&inner) {
        let to = copies.join(under);
        std::fs::create_dir_all(&to).map_err(|e| format!("cannot create {}: {e}", to.display()))?;
        let name = Path::new(inner).file_name().unwrap_or_default();
        decompress_file(&file.display().to_string(), &to.join(name))?;
    }
    Ok(copies.display().to_string())
}

/// Every gzip file in the tree under `dir` (as a listing reads it: names starting
/// with `.` or `_` skipped), sorted, with its directory relative to the top. A plain
/// data file among them is refused: a listing of the copies would not hold it.
fn gzip_files(dir: &Path, under: &Path, out: &mut Vec<(PathBuf, PathBuf)>) -> Result<(), String> {
    for (name, path) in visible_entries(dir)? {
        if path.is_dir() {
            gzip_files(&path, &under.join(&name), out)?;
        } else if name.to_ascii_lowercase().ends_with(".gz") {
            out.push((path, under.to_path_buf()));
        } else if kind_of_name(&name).is_some() {
            return Err(format!(
                "'{}' holds both gzip and uncompressed data files, and only one kind would be \
                 read; keep one kind in the directory",
                dir.display()
            ));
        }
    }
    Ok(())
}

/// `name.csv` and `csv` for `name.csv.gz`; refused when the name hides the format.
fn inner_name(path: &str) -> Result<(String, String), String> {
    let refused = || {
        format!(
            "cannot tell the format of '{path}'; name it .csv.gz, .tsv.gz, .json.gz, \
             .ndjson.gz or .parquet.gz"
        )
    };
    if !path.to_ascii_lowercase().ends_with(".gz") {
        return Err(refused());
    }
    // ".gz" is ASCII, so the cut falls between characters.
    let inner = &path[..path.len() - ".gz".len()];
    if kind_of_name(inner).is_none() {
        return Err(refused());
    }
    let extension = Path::new(inner)
        .extension()
        .map(|e| e.to_string_lossy().to_string())
        .unwrap_or_default();
    Ok((inner.to_string(), extension))
}

/// The gzip file at `path` decompressed into `copy` (removed again on failure).
fn decompress_file(path: &str, copy: &Path) -> Result<(), String> {
    let file = std::fs::File::open(path).map_err(|e| format!("cannot open {path}: {e}"))?;
    let reader = flate2::read::MultiGzDecoder::new(std::io::BufReader::new(file));
    let failure = match decompress(reader, copy) {
        Ok(()) => return Ok(()),
        Err(Side::Read(e)) => {
            format!("{path} is not a complete gzip file (truncated or another format): {e}")
        }
        Err(Side::Write(e)) => format!(
            "cannot write the decompressed copy of {path} to {}: {e} (set TMPDIR to a \
             directory with room for it)",
            copy.display()
        ),
    };
    let _ = std::fs::remove_file(copy);
    Err(failure)
}

/// Which side of a copy failed: a full disk is not a broken file.
enum Side {
    Read(std::io::Error),
    Write(std::io::Error),
}

fn decompress(mut reader: impl std::io::Read, to: &Path) -> Result<(), Side> {
    use std::io::Write as _;
    let mut writer = std::io::BufWriter::new(std::fs::File::create(to).map_err(Side::Write)?);
    let mut buffer = vec![0u8; 1 << 16];
    loop {
        let n = match reader.read(&mut buffer) {
            Ok(0) => break,
            Ok(n) => n,
            Err(e) if e.kind() == std::io::ErrorKind::Interrupted => continue,
            Err(e) => return Err(Side::Read(e)),
        };
        writer.write_all(&buffer[..n]).map_err(Side::Write)?;
    }
    writer.flush().map_err(Side::Write)
}

/// A fresh path for a file written for the engine to read (a JSON array as NDJSON, a
/// decompressed gzip file), named after `original` so that messages stay readable.
/// Each call gets its own name: two files with one name in different directories
/// must not share a copy. Kept until `remove_temporaries` or the system's temp cleaning.
pub(crate) fn temporary_path(original: &str, extension: &str) -> Result<PathBuf, String> {
    use std::sync::atomic::{AtomicU64, Ordering};
    static NEXT: AtomicU64 = AtomicU64::new(0);
    let dir = temporary_dir();
    std::fs::create_dir_all(&dir).map_err(|e| format!("cannot create {}: {e}", dir.display()))?;
    let stem = Path::new(original)
        .file_stem()
        .map(|s| s.to_string_lossy().to_string())
        .unwrap_or_default();
    let n = NEXT.fetch_add(1, Ordering::Relaxed);
    Ok(dir.join(format!("{n}-{stem}.{extension}")))
}

fn temporary_dir() -> PathBuf {
    std::env::temp_dir().join(format!("posterity-{}", std::process::id()))
}

/// Remove the files this process wrote for the engine to read (decompressed and
/// converted copies). Call it when no table registered from them will be read again.
pub fn remove_temporaries() {
    let _ = std::fs::remove_dir_all(temporary_dir());
}

/// Checks the engine does not make, so that broken files fail at registration with
/// the file's name: Parquet magic bytes, empty CSV files, unterminated quotes, a
/// header naming one column twice (the engine reports a wrong field count on the
/// first row), and CSV directories whose files disagree on the header.
fn preflight(
    path: &str,
    files: &[PathBuf],
    kind: FileKind,
    header: bool,
    delimiter: u8,
) -> Result<(), String> {
    use std::io::Read as _;
    let mut first_header: Option<(String, &PathBuf)> = None;
    for file in files {
        let shown = file.display();
        let mut f = std::fs::File::open(file).map_err(|e| format!("cannot open {shown}: {e}"))?;
        let len = f.metadata().map(|m| m.len()).unwrap_or(0);
        match kind {
            FileKind::Parquet => {
                let mut head = [0u8; 4];
                let ok = len >= 12 && f.read_exact(&mut head).is_ok() && &head == b"PAR1" && {
                    use std::io::Seek as _;
                    let mut tail = [0u8; 4];
                    f.seek(std::io::SeekFrom::End(-4)).is_ok()
                        && f.read_exact(&mut tail).is_ok()
                        && &tail == b"PAR1"
                };
                if !ok {
                    return Err(format!("{shown} is not a complete Parquet file ({len} bytes; empty, truncated or another format)"));
                }
            }
            FileKind::Csv | FileKind::Tsv => {
                if len == 0 && header {
                    return Err(format!("{shown} is empty: no header row (use --csv-no-header for files without one)"));
                }
                let mut quotes = 0u64;
                let mut first_line = Vec::new();
                let mut in_first = true;
                let mut buf = vec![0u8; 1 << 16];
                loop {
                    let n = f
                        .read(&mut buf)
                        .map_err(|e| format!("cannot read {shown}: {e}"))?;
                    if n == 0 {
                        break;
                    }
                    for &b in &buf[..n] {
                        quotes += u64::from(b == b'"');
                        if in_first {
                            if b == b'\n' {
                                in_first = false;
                            } else if b != b'\r' {
                                first_line.push(b);
                            }
                        }
                    }
                }
                if quotes % 2 == 1 {
                    return Err(format!("{shown} has an unterminated quoted field (an odd number of '\"' characters)"));
                }
                let line = String::from_utf8_lossy(&first_line).to_string();
                if header {
                    let names = header_names(&line, delimiter);
                    if let Some(twice) = names
                        .iter()
                        .enumerate()
                        .find_map(|(i, n)| names[..i].contains(n).then_some(n))
                    {
                        return Err(if twice.is_empty() {
                            format!(
                                "{shown} has more than one column without a name in its header \
                                 (delimiters at the end of the line?); name every column"
                            )
                        } else {
                            format!(
                                "{shown} names the column '{twice}' twice in its header; give \
                                 every column its own name"
                            )
                        });
                    }
                }
                if header && kind_of_name(path).is_none() {
                    match &first_header {
                        None => first_header = Some((line, file)),
                        Some((h, other)) if *h != line => {
                            return Err(format!(
                                "files in {path} disagree on their columns: {} has '{h}', {shown} has '{line}'",
                                other.display()
                            ))
                        }
                        _ => {}
                    }
                }
            }
            FileKind::Json => {}
        }
    }
    Ok(())
}

/// The data files of `kind` under `dir` and its subdirectories (a listing reads them
/// all), skipping names that start with `_` or `.`.
fn data_files(dir: &Path, kind: FileKind, out: &mut Vec<PathBuf>) -> Result<(), String> {
    let entries =
        std::fs::read_dir(dir).map_err(|e| format!("cannot list {}: {e}", dir.display()))?;
    for entry in entries.filter_map(|e| e.ok()) {
        let name = entry.file_name().to_string_lossy().to_string();
        let path = entry.path();
        if name.starts_with('_') || name.starts_with('.') {
            continue;
        }
        if path.is_dir() {
            data_files(&path, kind, out)?;
        } else if kind_of_name(&name) == Some(kind) {
            out.push(path);
        }
    }
    Ok(())
}

/// What a path names, looked at once: a file (or glob), or a directory with its
/// partition columns and data files.
struct Source {
    /// The format, from the name or else a directory's first data file; `None` when
    /// neither tells.
    kind: Option<FileKind>,
    /// A gzip file, or a directory of them (read from decompressed copies).
    gzip: bool,
    directory: Option<Directory>,
}

struct Directory {
    /// The columns the directory names hold, outermost first, with their values
    /// (none for a plain directory).
    partitions: Vec<(String, BTreeSet<String>)>,
    /// Every data file of the source's format under it, sorted (none for gzip files,
    /// which are listed from their copies).
    files: Vec<PathBuf>,
}

impl Source {
    /// The source at `path`. A directory holding both gzip and plain data files is
    /// refused: the listing would read one kind and skip the other without a word.
    fn of(path: &str) -> Result<Source, String> {
        if !Path::new(path).is_dir() {
            return Ok(Source {
                kind: kind_of_name(path),
                gzip: path.to_ascii_lowercase().ends_with(".gz"),
                directory: None,
            });
        }
        let partitions = partitions(path)?;
        let names: Vec<String> = visible_entries(&partitions.leaf)?
            .into_iter()
            .map(|(name, _)| name)
            .collect();
        let kind = kind_of_name(path).or_else(|| names.iter().find_map(|n| kind_of_name(n)));
        let gzip_inside = names
            .iter()
            .any(|n| n.to_ascii_lowercase().ends_with(".gz"));
        let gzip = match (kind.is_some(), gzip_inside) {
            (true, true) => {
                return Err(format!(
                    "'{path}' holds both gzip and uncompressed data files, and only one kind \
                     would be read; keep one kind in the directory"
                ))
            }
            (_, gzip) => gzip,
        };
        let mut files = Vec::new();
        if let (Some(kind), false) = (kind, gzip) {
            data_files(Path::new(path), kind, &mut files)?;
            files.sort();
        }
        Ok(Source {
            kind,
            gzip,
            directory: Some(Directory {
                partitions: partitions.columns,
                files,
            }),
        })
    }
}

/// How a directory is partitioned by value, as Spark, pyarrow and polars write
/// datasets (`region=north/year=2024/part-0.parquet`).
struct Partitions {
    /// The columns the directory names hold, outermost first (none for a plain
    /// directory), each with every value its directories name.
    columns: Vec<(String, BTreeSet<String>)>,
    /// The first directory that holds the data files.
    leaf: PathBuf,
}

/// The partition columns of the directory at `path`: every level whose entries are all
/// directories named `column=value`, one column per level. A level mixing such
/// directories with files, or naming two columns, is refused: part of it would be
/// read without its column.
fn partitions(path: &str) -> Result<Partitions, String> {
    let mut columns: Vec<String> = Vec::new();
    let mut leaf = PathBuf::from(path);
    loop {
        let entries = visible_entries(&leaf)?;
        let column_of = |(name, path): &(String, PathBuf)| {
            name.split_once('=')
                .filter(|(c, _)| path.is_dir() && !c.is_empty())
                .map(|(c, _)| c.to_string())
        };
        let named: Vec<String> = entries.iter().filter_map(column_of).collect();
        if named.is_empty() {
            let mut values = vec![BTreeSet::new(); columns.len()];
            partition_values(Path::new(path), &columns, &mut values)?;
            let columns = columns.into_iter().zip(values).collect();
            return Ok(Partitions { columns, leaf });
        }
        if named.len() != entries.len() {
            return Err(format!(
                "'{}' mixes partition directories ({}=...) with other files or directories; \
                 keep one kind",
                leaf.display(),
                named[0]
            ));
        }
        if let Some(other) = named.iter().find(|c| **c != named[0]) {
            return Err(format!(
                "'{}' is partitioned by two columns at one level ({}=... and {other}=...)",
                leaf.display(),
                named[0]
            ));
        }
        if columns.contains(&named[0]) {
            return Err(format!(
                "'{path}' is partitioned by '{}' at two levels",
                named[0]
            ));
        }
        columns.push(named[0].clone());
        leaf = entries[0].1.clone();
    }
}

/// Every value of each partition column in the tree under `dir` (`columns` from its
/// first branch), checking that every directory at a level is named for that level's
/// column: the engine would skip the files of any other without a word.
fn partition_values(
    dir: &Path,
    columns: &[String],
    values: &mut [BTreeSet<String>],
) -> Result<(), String> {
    let Some((column, deeper)) = columns.split_first() else {
        return Ok(());
    };
    let (here, below) = values.split_at_mut(1);
    for (name, path) in visible_entries(dir)? {
        match name.split_once('=') {
            Some((c, value)) if c == column && path.is_dir() => {
                here[0].insert(value.to_string());
                partition_values(&path, deeper, below)?;
            }
            _ => {
                return Err(format!(
                    "'{}' holds '{name}' where the dataset's directories at that level are \
                     {column}=...; keep one column per level, and data files only below the \
                     last",
                    dir.display()
                ))
            }
        }
    }
    Ok(())
}

/// The entries of `dir` a listing reads (names starting with `.` or `_` are skipped),
/// sorted by name.
fn visible_entries(dir: &Path) -> Result<Vec<(String, PathBuf)>, String> {
    let mut entries: Vec<(String, PathBuf)> = std::fs::read_dir(dir)
        .map_err(|e| format!("cannot list {}: {e}", dir.display()))?
        .filter_map(|e| e.ok())
        .map(|e| (e.file_name().to_string_lossy().to_string(), e.path()))
        .filter(|(n, _)| !n.starts_with('.') && !n.starts_with('_'))
        .collect();
    entries.sort();
    Ok(entries)
}

/// What Spark and pyarrow name the directory of a missing partition value.
const NULL_PARTITION: &str = "__HIVE_DEFAULT_PARTITION__";

/// The type of a partition column, from its values as the directories name them:
/// whole numbers (`year=2024`) are integers, other numbers floats, ISO dates
/// (`day=2024-03-01`) dates; `None` (text) for anything else. A number written with
/// a leading zero (`area=007`) is a code, and stays text.
fn partition_type(values: &BTreeSet<String>) -> Option<DataType> {
    let values: Vec<&str> = values
        .iter()
        .map(String::as_str)
        .filter(|v| *v != NULL_PARTITION)
        .collect();
    let leading_zero = |v: &str| {
        let digits = v.trim_start_matches(['-', '+']);
        digits.len() > 1 && digits.starts_with('0') && !digits.starts_with("0.")
    };
    let whole = |v: &str| {
        let digits = v.strip_prefix('-').unwrap_or(v);
        !digits.is_empty() && digits.bytes().all(|b| b.is_ascii_digit()) && v.parse::<i64>().is_ok()
    };
    // Digits alone that overflow an integer are an identifier, not a float.
    let number = |v: &str| {
        v.bytes()
            .all(|b| b.is_ascii_digit() || b"+-.eE".contains(&b))
            && (whole(v) || v.contains(['.', 'e', 'E']))
            && v.parse::<f64>().is_ok_and(f64::is_finite)
    };
    let date = |v: &str| {
        v.len() == 10
            && v.bytes().enumerate().all(|(i, b)| match i {
                4 | 7 => b == b'-',
                _ => b.is_ascii_digit(),
            })
            && ScalarValue::try_from_string(v.to_string(), &DataType::Date32).is_ok()
    };
    let all = |test: &dyn Fn(&str) -> bool| !values.is_empty() && values.iter().all(|v| test(v));
    if values.iter().any(|v| leading_zero(v)) {
        None
    } else if all(&whole) {
        Some(DataType::Int64)
    } else if all(&number) {
        Some(DataType::Float64)
    } else if all(&date) {
        Some(DataType::Date32)
    } else {
        None
    }
}

/// Re-register table `name` with its partition columns typed by `partition_type`
/// (unless named in `text`) and the missing-value directory read as NULL. Nothing
/// changes for columns that stay text and have no missing value.
async fn type_partitions(
    ctx: &SessionContext,
    name: &str,
    partitions: &[(String, BTreeSet<String>)],
    text: &[&str],
) -> datafusion::error::Result<()> {
    use datafusion::prelude::{cast, ident, lit, nullif};
    let typed: Vec<(&str, Option<DataType>, bool)> = partitions
        .iter()
        .map(|(column, values)| {
            let data_type = match text.contains(&column.as_str()) {
                true => None,
                false => partition_type(values),
            };
            (column.as_str(), data_type, values.contains(NULL_PARTITION))
        })
        .collect();
    if typed.iter().all(|(_, t, null)| t.is_none() && !null) {
        return Ok(());
    }
    let table = ctx.table(name).await?;
    let columns: Vec<datafusion::prelude::Expr> = table
        .schema()
        .fields()
        .iter()
        .map(|f| match typed.iter().find(|(c, ..)| c == f.name()) {
            None => ident(f.name()),
            Some((column, data_type, _)) => {
                let value = nullif(ident(f.name()), lit(NULL_PARTITION));
                match data_type {
                    Some(t) => cast(value, t.clone()),
                    None => value,
                }
                .alias(*column)
            }
        })
        .collect();
    let typed = table.select(columns)?.into_view();
    ctx.deregister_table(name)?;
    ctx.register_table(name, typed)?;
    Ok(())
}

/// The column names of a CSV header line: fields split at `delimiter` outside
/// double quotes, a doubled quote inside quotes read as one.
fn header_names(line: &str, delimiter: u8) -> Vec<String> {
    let delimiter = char::from(delimiter);
    let mut names = Vec::new();
    let mut name = String::new();
    let mut quoted = false;
    let mut chars = line.chars().peekable();
    while let Some(c) = chars.next() {
        match c {
            '"' if quoted && chars.peek() == Some(&'"') => {
                chars.next();
                name.push('"');
            }
            '"' => quoted = !quoted,
            c if c == delimiter && !quoted => names.push(std::mem::take(&mut name)),
            c => name.push(c),
        }
    }
    names.push(name);
    names
}

#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum FileKind {
    Parquet,
    Csv,
    Tsv,
    Json,
}

fn kind_of_name(name: &str) -> Option<FileKind> {
    let lower = name.to_ascii_lowercase();
    if lower.ends_with(".parquet") || lower.ends_with(".parq") {
        Some(FileKind::Parquet)
    } else if lower.ends_with(".csv") {
        Some(FileKind::Csv)
    } else if lower.ends_with(".tsv") {
        Some(FileKind::Tsv)
    } else if lower.ends_with(".json") || lower.ends_with(".ndjson") || lower.ends_with(".jsonl") {
        Some(FileKind::Json)
    } else {
        None
    }
}

/// The extension a listing should match: the path's own when it names a file.
fn extension_of(path: &str, default: &str) -> String {
    let p = Path::new(path);
    if !p.is_dir() {
        if let Some(ext) = p.extension() {
            return format!(".{}", ext.to_string_lossy());
        }
    }
    default.to_string()
}

/// The CSV reader's NULL pattern for `marker`: the marker itself or an empty field.
/// An empty field stays NULL as without a marker; otherwise one empty field would
/// make a column of numbers text when its type is inferred.
fn null_pattern(marker: &str) -> String {
    let mut out = String::from("^(?:");
    for c in marker.chars() {
        if "\\.+*?()|[]{}^$".contains(c) {
            out.push('\\');
        }
        out.push(c);
    }
    out.push_str(")?$");
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    fn type_of(values: &[&str]) -> Option<DataType> {
        partition_type(&values.iter().map(|v| v.to_string()).collect())
    }

    #[test]
    fn partition_values_are_typed_as_dataset_writers_type_them() {
        assert_eq!(type_of(&["2024", "2025", "-3"]), Some(DataType::Int64));
        assert_eq!(type_of(&["0", "10"]), Some(DataType::Int64));
        assert_eq!(
            type_of(&["1.5", "2", "1e3", "0.25"]),
            Some(DataType::Float64)
        );
        assert_eq!(
            type_of(&["2024-03-01", "2024-12-31"]),
            Some(DataType::Date32)
        );
        assert_eq!(type_of(&["2024", NULL_PARTITION]), Some(DataType::Int64));
        // Codes and identifiers stay text.
        assert_eq!(type_of(&["007", "12"]), None);
        assert_eq!(type_of(&["01.5"]), None);
        assert_eq!(type_of(&["99999999999999999999"]), None);
        assert_eq!(type_of(&["2024-02-30"]), None);
        assert_eq!(type_of(&["2024-03-01", "north"]), None);
        assert_eq!(type_of(&["inf", "nan", "NaN"]), None);
        assert_eq!(type_of(&[NULL_PARTITION]), None);
        assert_eq!(type_of(&[]), None);
    }
}
