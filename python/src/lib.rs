//! `posterity._posterity`, the engine of the Python package: posterity's functions
//! as foreign functions for datafusion-python (the engine's FFI structs in
//! PyCapsules), and the encode workflow and bundle scoring over Arrow data (the
//! Arrow C stream interface, no copy). The user-facing API is the Python package in
//! `pysrc/posterity`.
//!
//! Nothing here panics on user input: every failure becomes a `posterity.Error`
//! with the library's message.

#[global_allocator]
static ALLOCATOR: mimalloc::MiMalloc = mimalloc::MiMalloc;

use std::fmt::Display;
use std::path::PathBuf;
use std::sync::{Arc, OnceLock};

use datafusion_ffi::udaf::FFI_AggregateUDF;
use datafusion_ffi::udf::FFI_ScalarUDF;
use datafusion_ffi::udwf::FFI_WindowUDF;
use posterity::bundle::Bundle as RustBundle;
use posterity::columnar_copy::{replace_text_table, ColumnarCopy};
use posterity::datafusion::arrow::array::{RecordBatch, RecordBatchIterator};
use posterity::datafusion::arrow::compute::cast;
use posterity::datafusion::arrow::datatypes::{DataType, SchemaRef};
use posterity::datafusion::arrow::error::ArrowError;
use posterity::datafusion::arrow::ffi_stream::{ArrowArrayStreamReader, FFI_ArrowArrayStream};
use posterity::datafusion::datasource::MemTable;
use posterity::datafusion::logical_expr::{AggregateUDF, ScalarUDF, WindowUDF};
use posterity::datafusion::prelude::{DataFrame, SessionContext};
use posterity::encode::{
    self, EncodeOptions, EncodeOutput, HalfLife, Horizon, Method, PriorChoice, Reader,
    ScoreEvidence, TimeTies, Treatment, UpdateOptions,
};
use posterity::files::CsvOptions;
use posterity::layout::Kind;
use pyo3::prelude::*;
use pyo3::types::PyCapsule;

pyo3::create_exception!(
    posterity,
    Error,
    pyo3::exceptions::PyValueError,
    "A posterity function, encode or bundle refused its input; the message names the \
     function, the argument and what is allowed."
);

fn error(e: impl Display) -> PyErr {
    Error::new_err(e.to_string())
}

/// A message of the encode workflow in a Python user's words: its option names
/// are the shell's flags (`--time-column`); here they are keyword arguments
/// (`time_column`).
fn in_python_words(message: impl Display) -> PyErr {
    error(python_words(&message.to_string()))
}

/// A message of the workflow `function` (`encode`, `update`) in a Python user's
/// words, naming the function first as every refusal does.
fn from_workflow(function: &str, message: impl Display) -> PyErr {
    let message = python_words(&message.to_string());
    if message.starts_with(function) {
        error(message)
    } else {
        error(format!("{function}: {message}"))
    }
}

/// `message` with each shell flag (`--` at the start or after a character that is
/// not part of a name, then lowercase letters and dashes) written as its keyword
/// argument; a `--` inside a name (a key called `a--b`) is left as it is.
fn python_words(message: &str) -> String {
    let mut out = String::with_capacity(message.len());
    let mut rest = message;
    while let Some(at) = rest.find("--") {
        let starts_a_flag = !rest[..at]
            .chars()
            .next_back()
            .is_some_and(|c| c.is_alphanumeric() || c == '_' || c == '-');
        out.push_str(&rest[..at]);
        let after = &rest[at + 2..];
        let end = after
            .find(|c: char| !(c.is_ascii_lowercase() || c == '-'))
            .unwrap_or(after.len());
        if end == 0 || !starts_a_flag {
            out.push_str("--");
            rest = after;
            continue;
        }
        out.push_str(&after[..end].replace('-', "_"));
        rest = &after[end..];
    }
    out.push_str(rest);
    out
}

/// The summary with its reasons and warnings in a Python user's words.
fn summary_in_python_words(summary: &[encode::ColumnSummary]) -> Vec<encode::ColumnSummary> {
    summary
        .iter()
        .cloned()
        .map(|mut s| {
            for text in [
                &mut s.why,
                &mut s.recency,
                &mut s.horizon_why,
                &mut s.readers_why,
            ] {
                *text = python_words(text);
            }
            for w in &mut s.warnings {
                *w = python_words(w);
            }
            s
        })
        .collect()
}

/// One runtime for every call from Python (the engine is asynchronous).
fn runtime() -> PyResult<&'static tokio::runtime::Runtime> {
    static RUNTIME: OnceLock<Option<tokio::runtime::Runtime>> = OnceLock::new();
    RUNTIME
        .get_or_init(|| {
            tokio::runtime::Builder::new_multi_thread()
                .enable_all()
                .build()
                .ok()
        })
        .as_ref()
        .ok_or_else(|| error("posterity: cannot start its worker threads"))
}

// ------------------------------------------------------------------ functions

/// A scalar function, shared with datafusion-python through its FFI capsule.
#[pyclass(frozen, module = "posterity")]
struct ScalarFunction {
    udf: Arc<ScalarUDF>,
}

#[pymethods]
impl ScalarFunction {
    #[getter]
    fn name(&self) -> String {
        self.udf.name().to_string()
    }

    fn __datafusion_scalar_udf__<'py>(&self, py: Python<'py>) -> PyResult<Bound<'py, PyCapsule>> {
        PyCapsule::new_with_value(
            py,
            FFI_ScalarUDF::from(Arc::clone(&self.udf)),
            c"datafusion_scalar_udf",
        )
    }
}

/// An aggregate (and window) function, shared through its FFI capsule.
#[pyclass(frozen, module = "posterity")]
struct AggregateFunction {
    udaf: Arc<AggregateUDF>,
}

#[pymethods]
impl AggregateFunction {
    #[getter]
    fn name(&self) -> String {
        self.udaf.name().to_string()
    }

    fn __datafusion_aggregate_udf__<'py>(
        &self,
        py: Python<'py>,
    ) -> PyResult<Bound<'py, PyCapsule>> {
        PyCapsule::new_with_value(
            py,
            FFI_AggregateUDF::from(Arc::clone(&self.udaf)),
            c"datafusion_aggregate_udf",
        )
    }
}

/// A window function (`posterior_pool_before`), shared through its FFI capsule.
#[pyclass(frozen, module = "posterity")]
struct WindowFunction {
    udwf: Arc<WindowUDF>,
}

#[pymethods]
impl WindowFunction {
    #[getter]
    fn name(&self) -> String {
        self.udwf.name().to_string()
    }

    fn __datafusion_window_udf__<'py>(&self, py: Python<'py>) -> PyResult<Bound<'py, PyCapsule>> {
        PyCapsule::new_with_value(
            py,
            FFI_WindowUDF::from(Arc::clone(&self.udwf)),
            c"datafusion_window_udf",
        )
    }
}

#[pyfunction]
fn scalar_functions() -> Vec<ScalarFunction> {
    posterity::scalar::all()
        .into_iter()
        .map(|udf| ScalarFunction { udf: Arc::new(udf) })
        .collect()
}

#[pyfunction]
fn aggregate_functions() -> Vec<AggregateFunction> {
    posterity::foreign_aggregates()
        .into_iter()
        .map(|udaf| AggregateFunction {
            udaf: Arc::new(udaf),
        })
        .collect()
}

#[pyfunction]
fn window_functions() -> Vec<WindowFunction> {
    posterity::foreign_window_functions()
        .into_iter()
        .map(|udwf| WindowFunction {
            udwf: Arc::new(udwf),
        })
        .collect()
}

/// Every function's documentation, as JSON: name, section, description, syntax,
/// arguments ([name, text] pairs), example.
#[pyfunction]
fn documentation() -> String {
    let docs: Vec<serde_json::Value> = posterity::docs::FUNCTIONS
        .iter()
        .map(|f| {
            serde_json::json!({
                "name": f.name, "section": f.section, "description": f.description,
                "syntax": f.syntax, "arguments": f.arguments, "example": f.example,
            })
        })
        .collect();
    serde_json::Value::Array(docs).to_string()
}

/// The DataFusion version posterity is built on.
#[pyfunction]
fn engine_version() -> &'static str {
    posterity::datafusion::DATAFUSION_VERSION
}

// ------------------------------------------------------------------ Arrow data

/// Record batches handed to Python through the Arrow C stream interface
/// (`pyarrow.table(x)`, `polars.from_arrow(x)`), without a copy.
#[pyclass(frozen, module = "posterity")]
struct ArrowData {
    schema: SchemaRef,
    batches: Vec<RecordBatch>,
}

#[pymethods]
impl ArrowData {
    #[pyo3(signature = (requested_schema=None))]
    fn __arrow_c_stream__<'py>(
        &self,
        py: Python<'py>,
        requested_schema: Option<Bound<'py, PyAny>>,
    ) -> PyResult<Bound<'py, PyCapsule>> {
        // The schema is what it is; a consumer that asked for another casts.
        let _ = requested_schema;
        let reader = RecordBatchIterator::new(
            self.batches.clone().into_iter().map(Ok),
            Arc::clone(&self.schema),
        );
        PyCapsule::new_with_value(
            py,
            FFI_ArrowArrayStream::new(Box::new(reader)),
            c"arrow_array_stream",
        )
    }

    #[getter]
    fn num_rows(&self) -> usize {
        self.batches.iter().map(RecordBatch::num_rows).sum()
    }
}

/// The batches of an object with `__arrow_c_stream__` (pyarrow, polars, ...).
fn read_stream(data: &Bound<'_, PyAny>, what: &str) -> PyResult<(SchemaRef, Vec<RecordBatch>)> {
    let capsule = data.call_method0("__arrow_c_stream__").map_err(|_| {
        error(format!(
            "{what}: expected a path, a pyarrow Table, a pandas or a polars DataFrame (an object \
             with __arrow_c_stream__), got {}",
            data.get_type()
                .name()
                .map(|n| n.to_string())
                .unwrap_or_default()
        ))
    })?;
    let capsule = capsule.cast::<PyCapsule>().map_err(|_| {
        error(format!(
            "{what}: __arrow_c_stream__ did not return a capsule"
        ))
    })?;
    let pointer = capsule.pointer_checked(Some(c"arrow_array_stream"))?;
    // SAFETY: the capsule holds an ArrowArrayStream (checked by name); from_raw
    // moves it out and marks the original released, as the protocol requires.
    let reader = unsafe {
        ArrowArrayStreamReader::from_raw(pointer.as_ptr().cast::<FFI_ArrowArrayStream>())
    }
    .map_err(|e| error(format!("{what}: {e}")))?;
    let schema = posterity::datafusion::arrow::array::RecordBatchReader::schema(&reader);
    let batches = reader
        .collect::<Result<Vec<_>, _>>()
        .map_err(|e| error(format!("{what}: {e}")))?;
    Ok((schema, batches))
}

async fn collect(df: DataFrame) -> posterity::datafusion::error::Result<ArrowData> {
    let schema = Arc::new(df.schema().as_arrow().clone());
    let batches = df
        .collect()
        .await?
        .into_iter()
        .map(unique_dictionaries)
        .collect::<Result<_, _>>()?;
    Ok(ArrowData { schema, batches })
}

/// The batch with every dictionary column re-encoded so that its dictionary holds
/// each value once. The engine may hand back a dictionary concatenated from its
/// inputs' (the same values twice), which Arrow allows and pandas refuses
/// ("Categorical categories must be unique") when a category key comes back.
fn unique_dictionaries(batch: RecordBatch) -> Result<RecordBatch, ArrowError> {
    if !batch
        .schema()
        .fields()
        .iter()
        .any(|f| matches!(f.data_type(), DataType::Dictionary(..)))
    {
        return Ok(batch);
    }
    let columns = batch
        .columns()
        .iter()
        .map(|column| match column.data_type() {
            DataType::Dictionary(_, values) => cast(&cast(column, values)?, column.data_type()),
            _ => Ok(Arc::clone(column)),
        })
        .collect::<Result<Vec<_>, _>>()?;
    RecordBatch::try_new(batch.schema(), columns)
}

async fn collect_some(df: &Option<DataFrame>) -> Result<Option<ArrowData>, String> {
    match df {
        Some(df) => Ok(Some(collect(df.clone()).await.map_err(|e| e.to_string())?)),
        None => Ok(None),
    }
}

// ------------------------------------------------------------------ encode

/// A training or scoring input: a file path (registered like the shell does, key
/// columns of CSV files as text) or Arrow batches.
enum Input {
    Path(String),
    Batches(SchemaRef, Vec<RecordBatch>),
}

impl Input {
    fn from_python(data: &Bound<'_, PyAny>, what: &str) -> PyResult<Input> {
        if let Ok(path) = data.extract::<PathBuf>() {
            return Ok(Input::Path(path.to_string_lossy().to_string()));
        }
        let (schema, batches) = read_stream(data, what)?;
        Ok(Input::Batches(schema, batches))
    }

    /// The path of an input given as a file.
    fn path(&self) -> Option<String> {
        match self {
            Input::Path(path) => Some(path.clone()),
            Input::Batches(..) => None,
        }
    }

    /// Register the input as table `name`; a CSV file is read with `csv`, its key
    /// columns as text.
    async fn register(
        self,
        ctx: &SessionContext,
        name: &str,
        what: &str,
        csv: &CsvOptions,
        key_columns: &[String],
    ) -> Result<(), String> {
        match self {
            Input::Path(path) => {
                let mut csv = csv.clone();
                csv.text.extend_from_slice(key_columns);
                posterity::files::register(ctx, name, &path, &csv)
                    .await
                    .map_err(|e| format!("{what}: {e}"))
            }
            Input::Batches(schema, batches) => {
                let table = MemTable::try_new(schema, vec![batches]).map_err(|e| e.to_string())?;
                ctx.register_table(name, Arc::new(table))
                    .map(|_| ())
                    .map_err(|e| e.to_string())
            }
        }
    }
}

/// What `encode` returned: the tables (collected), the bundle and the summary; it
/// can write the same directory as the shell's `--out`.
#[pyclass(module = "posterity")]
struct EncodeResult {
    output: EncodeOutput,
    train_encoded: Option<Py<ArrowData>>,
    scored: Option<Py<ArrowData>>,
    encodings: Vec<(String, Py<ArrowData>)>,
    /// The Parquet copies of text inputs that `output`'s tables read (`write` runs
    /// them again): removed with the result.
    _copies: Vec<ColumnarCopy>,
}

#[pymethods]
impl EncodeResult {
    #[getter]
    fn train_encoded(&self, py: Python<'_>) -> Option<Py<ArrowData>> {
        self.train_encoded.as_ref().map(|d| d.clone_ref(py))
    }

    #[getter]
    fn scored(&self, py: Python<'_>) -> Option<Py<ArrowData>> {
        self.scored.as_ref().map(|d| d.clone_ref(py))
    }

    #[getter]
    fn encodings(&self, py: Python<'_>) -> Vec<(String, Py<ArrowData>)> {
        self.encodings
            .iter()
            .map(|(k, d)| (k.clone(), d.clone_ref(py)))
            .collect()
    }

    #[getter]
    fn bundle(&self) -> Bundle {
        Bundle {
            inner: self.output.bundle.clone(),
        }
    }

    /// The summary as JSON (what `summary.json` holds).
    #[getter]
    fn summary_json(&self) -> String {
        encode::summary_json(&summary_in_python_words(&self.output.summary)).to_string()
    }

    /// With `report=True`: the HTML report (what `report.html` holds).
    #[getter]
    fn report(&self) -> Option<String> {
        self.output.report.clone()
    }

    /// The summary as the shell prints it.
    #[getter]
    fn summary_text(&self) -> String {
        let summary = summary_in_python_words(&self.output.summary);
        let mut text = encode::summary_table(&summary);
        if let Some(unseen) = &self.output.unseen {
            text.push_str(
                "scored rows (rows at levels the training rows never saw get the prior):\n",
            );
            text.push_str(&encode::unseen_table(&summary, unseen));
        }
        text
    }

    /// Write the directory the shell's `--out` writes (whole, or not at all).
    #[pyo3(signature = (path, replace=false))]
    fn write(&self, py: Python<'_>, path: PathBuf, replace: bool) -> PyResult<()> {
        let rt = runtime()?;
        py.detach(|| rt.block_on(encode::write(&self.output, &path, replace)))
            .map_err(error)
    }
}

/// How the engine runs a call: the shell's `--threads` and `--memory-limit`.
#[derive(Default)]
struct EngineOptions {
    threads: Option<usize>,
    memory_limit: Option<usize>,
}

/// `threads` (a whole number from 1) and `memory_limit` (bytes, or text such as
/// "4G"), taken out of `options`.
fn engine_options(
    options: &Bound<'_, pyo3::types::PyDict>,
    function: &str,
) -> PyResult<EngineOptions> {
    let mut engine = EngineOptions::default();
    if let Some(value) = options.get_item("threads")? {
        options.del_item("threads")?;
        if !value.is_none() {
            engine.threads = Some(
                value
                    .extract::<usize>()
                    .ok()
                    .filter(|n| *n >= 1 && !value.is_instance_of::<pyo3::types::PyBool>())
                    .ok_or_else(|| {
                        error(format!(
                            "{function}: threads must be a whole number from 1; got {value}"
                        ))
                    })?,
            );
        }
    }
    if let Some(value) = options.get_item("memory_limit")? {
        options.del_item("memory_limit")?;
        if !value.is_none() {
            let text = match value.extract::<u64>() {
                Ok(bytes) if !value.is_instance_of::<pyo3::types::PyBool>() => bytes.to_string(),
                _ => value.extract::<String>().map_err(|_| {
                    error(format!(
                        "{function}: memory_limit must be bytes or a size such as '4G'; got \
                         {value}"
                    ))
                })?,
            };
            engine.memory_limit = Some(
                posterity::shell::parse_size(&text)
                    .map_err(|e| error(format!("{function}: memory_limit: {e}")))?,
            );
        }
    }
    Ok(engine)
}

/// The options that say how CSV files given by path are read (the shell's `--csv-*`
/// flags), taken out of `options`; with the first one's name, for messages.
fn csv_options(
    options: &Bound<'_, pyo3::types::PyDict>,
    function: &str,
) -> PyResult<Option<(String, CsvOptions)>> {
    let mut csv = CsvOptions::default();
    let mut first = None;
    for key in [
        "csv_no_header",
        "csv_delimiter",
        "csv_null",
        "csv_infer_rows",
        "csv_text",
    ] {
        let Some(value) = options.get_item(key)? else {
            continue;
        };
        options.del_item(key)?;
        if value.is_none() {
            continue;
        }
        first.get_or_insert_with(|| key.to_string());
        let wrong = |what: &str| error(format!("{function}: {key} must be {what}"));
        match key {
            "csv_no_header" => {
                csv.header = !value
                    .extract::<bool>()
                    .map_err(|_| wrong("True or False"))?
            }
            "csv_delimiter" => {
                let text: String = value.extract().map_err(|_| wrong("one character"))?;
                csv.delimiter = CsvOptions::parse_delimiter(&text)
                    .map_err(|e| error(format!("{function}: {key} {e}")))?
            }
            "csv_null" => csv.null = Some(value.extract().map_err(|_| wrong("text, e.g. 'NA'"))?),
            "csv_infer_rows" => {
                let text = match value.extract::<i64>() {
                    Ok(n) => n.to_string(),
                    Err(_) => value
                        .extract::<String>()
                        .map_err(|_| wrong("a number of rows from 1, or 'all'"))?,
                };
                csv.infer_rows = Some(
                    CsvOptions::parse_infer_rows(&text)
                        .map_err(|e| error(format!("{function}: {key}: {e}")))?,
                )
            }
            _ => {
                csv.text = match value.extract::<String>() {
                    Ok(one) => vec![one],
                    Err(_) => value
                        .extract()
                        .map_err(|_| wrong("a column name or a list of them"))?,
                }
            }
        }
    }
    Ok(first.map(|named| (named, csv)))
}

fn parse_options(options: &Bound<'_, pyo3::types::PyDict>, o: &mut EncodeOptions) -> PyResult<()> {
    for (key, value) in options.iter() {
        let key: String = key.extract()?;
        let text = || -> PyResult<String> { value.extract::<String>() };
        let texts = || -> PyResult<Vec<String>> { value.extract::<Vec<String>>() };
        let wrong = |what: &str| error(format!("encode: {key} must be {what}"));
        match key.as_str() {
            "interactions" => {
                o.interactions = value
                    .extract::<Vec<Vec<String>>>()
                    .map_err(|_| wrong("a list of column lists, e.g. [['breed', 'clinic']]"))?
            }
            "family" => {
                let name = text().map_err(|_| wrong("a family name"))?;
                o.family = Some(Kind::from_short_name(&name).ok_or_else(|| {
                    error(format!(
                        "encode: family '{name}' is not beta, gamma, nig or dirichlet"
                    ))
                })?)
            }
            "prior" => {
                o.prior = match value.extract::<Vec<f64>>() {
                    Ok(numbers) => PriorChoice::parse(
                        &numbers
                            .iter()
                            .map(f64::to_string)
                            .collect::<Vec<_>>()
                            .join(","),
                    ),
                    Err(_) => PriorChoice::parse(
                        &text().map_err(|_| wrong("'fitted', 'jeffreys', 'uniform' or numbers"))?,
                    ),
                }
                .map_err(error)?
            }
            "method" => {
                o.method = Some(
                    Method::parse(&text().map_err(|_| wrong("'kfold' or 'time'"))?)
                        .map_err(error)?,
                )
            }
            "folds" => {
                o.folds = value
                    .extract()
                    .map_err(|_| wrong("an integer from 2 to 10"))?
            }
            "seed" => o.seed = value.extract().map_err(|_| wrong("an integer >= 0"))?,
            "time_column" => o.time_column = Some(text().map_err(|_| wrong("a column name"))?),
            "half_life" => {
                o.half_life = Some(match value.extract::<f64>() {
                    Ok(h) => HalfLife::Units(h),
                    Err(_) => HalfLife::parse(&text().map_err(|_| {
                        wrong(
                            "a number > 0 (the time column's units: days for dates and \
                             datetimes), a Timedelta or 'fitted'",
                        )
                    })?)
                    .map_err(in_python_words)?,
                })
            }
            "horizon" => {
                o.horizon = Some(match value.extract::<f64>() {
                    Ok(h) => Horizon::Units(h),
                    Err(_) => Horizon::parse(&text().map_err(|_| {
                        wrong(
                            "a number > 0 (the time column's units: days for dates and \
                             datetimes), a Timedelta, 'matched' or 'none'",
                        )
                    })?)
                    .map_err(in_python_words)?,
                })
            }
            // Set by the Python API when half_life or horizon came as a Timedelta.
            "_durations_in_days" => {
                o.durations_in_days = value.extract().map_err(|_| wrong("True or False"))?
            }
            "normalize_keys" => {
                o.normalize_keys = value.extract().map_err(|_| wrong("True or False"))?
            }
            "report" => o.report = value.extract().map_err(|_| wrong("True or False"))?,
            "time_ties" => {
                o.time_ties =
                    TimeTies::parse(&text().map_err(|_| wrong("'strict' or 'file-order'"))?)
                        .map_err(in_python_words)?
            }
            "exposure" => o.exposure = Some(text().map_err(|_| wrong("a column name"))?),
            "readers" => {
                o.readers = Some(
                    texts()
                        .map_err(|_| wrong("a list such as ['mean', 'sd', 'q05']"))?
                        .iter()
                        .map(|r| Reader::parse(r))
                        .collect::<Result<_, _>>()
                        .map_err(error)?,
                )
            }
            "draws" => {
                o.draws = Some(
                    value
                        .extract()
                        .map_err(|_| wrong("a seed (integer >= 0)"))?,
                )
            }
            "indicators" => o.indicators = value.extract().map_err(|_| wrong("an integer >= 0"))?,
            "indicator_min_rows" => {
                o.indicator_min_rows = value.extract().map_err(|_| wrong("a number >= 0"))?
            }
            "treatment" => {
                let map: std::collections::BTreeMap<String, String> = value
                    .extract()
                    .map_err(|_| wrong("a dict such as {'clinic': 'levels'}"))?;
                o.treatments = map
                    .into_iter()
                    .map(|(k, t)| Ok((k, Treatment::parse(&t).map_err(error)?)))
                    .collect::<PyResult<_>>()?
            }
            "hierarchy" => {
                let chains: Vec<String> = match value.extract::<String>() {
                    Ok(one) => vec![one],
                    Err(_) => value
                        .extract()
                        .map_err(|_| wrong("'child>parent' or a list of such chains"))?,
                };
                o.hierarchy = chains
                    .iter()
                    .map(|c| posterity::encode::parse_hierarchy(c))
                    .collect::<Result<_, _>>()
                    .map_err(error)?
            }
            "score_evidence" => {
                o.score_evidence =
                    ScoreEvidence::parse(&text().map_err(|_| wrong("'matched' or 'full'"))?)
                        .map_err(in_python_words)?
            }
            other => return Err(error(format!("encode: unknown option '{other}'"))),
        }
    }
    Ok(())
}

/// Run the encode workflow on `train` (and `score`), as the shell's command does.
#[pyfunction]
#[pyo3(signature = (train, target, columns, score=None, **options))]
fn encode_data(
    py: Python<'_>,
    train: &Bound<'_, PyAny>,
    target: String,
    columns: Vec<String>,
    score: Option<&Bound<'_, PyAny>>,
    options: Option<&Bound<'_, pyo3::types::PyDict>>,
) -> PyResult<EncodeResult> {
    let mut o = EncodeOptions::new(TRAIN, &target, &[]);
    o.columns = columns;
    let mut csv = None;
    let mut engine = EngineOptions::default();
    if let Some(options) = options {
        csv = csv_options(options, "encode")?;
        engine = engine_options(options, "encode")?;
        // Option parsers share the shell's words: given here in Python's.
        parse_options(options, &mut o).map_err(|e| from_workflow("encode", e.value(py)))?;
    }
    let (train, score, csv) =
        inputs("encode", train, score, csv).map_err(|e| from_workflow("encode", e.value(py)))?;
    if score.is_some() {
        o.score = Some(SCORE.to_string());
    }
    let key_columns: Vec<String> = o
        .columns
        .iter()
        .chain(o.interactions.iter().flatten())
        .cloned()
        .collect();
    let rt = runtime()?;
    let output = py
        .detach(|| {
            rt.block_on(async {
                let mut files = Vec::new();
                files.extend(train.path().map(|p| (TRAIN, p)));
                files.extend(score.as_ref().and_then(Input::path).map(|p| (SCORE, p)));
                let ctx = session_with(&engine, train, score, &csv, &key_columns).await?;
                // A misspelt column is refused before text files are copied.
                encode::check_columns(&ctx, &o)
                    .await
                    .map_err(|e| e.to_string())?;
                let mut copies = Vec::new();
                for (table, path) in &files {
                    copies.extend(replace_text_table(&ctx, table, path).await);
                }
                let plan = encode::resolve(&ctx, &o).await.map_err(|e| e.to_string())?;
                let output = encode::run(&ctx, &plan).await.map_err(|e| e.to_string())?;
                let mut collected = Collected::of(output).await?;
                collected.copies = copies;
                Ok::<_, String>(collected)
            })
        })
        .map_err(|e| from_workflow("encode", e))?;
    output.into_python(py)
}

/// The inputs of `function` (`encode` or `update`) and the CSV options for the
/// files among them; the options are refused when no input is a file.
fn inputs(
    function: &str,
    train: &Bound<'_, PyAny>,
    score: Option<&Bound<'_, PyAny>>,
    csv: Option<(String, CsvOptions)>,
) -> PyResult<(Input, Option<Input>, CsvOptions)> {
    let train = Input::from_python(train, "train")?;
    let score = score.map(|s| Input::from_python(s, "score")).transpose()?;
    let paths = matches!(train, Input::Path(_)) || matches!(score, Some(Input::Path(_)));
    if let (Some((named, _)), false) = (&csv, paths) {
        return Err(error(format!(
            "{function}: {named} is for CSV files given by path; train and score here are \
             tables already read (give the reading options to the reader that made them)"
        )));
    }
    Ok((train, score, csv.map(|(_, csv)| csv).unwrap_or_default()))
}

/// What the Python functions register their inputs as.
const TRAIN: &str = "train";
const SCORE: &str = "score";

/// A session with posterity's functions and the inputs registered as `train` and
/// (when given) `score`, read as the shell reads them.
async fn session_with(
    engine: &EngineOptions,
    train: Input,
    score: Option<Input>,
    csv: &CsvOptions,
    key_columns: &[String],
) -> Result<SessionContext, String> {
    // The shell's session: its thread count and memory limit, and its join rule.
    let ctx =
        posterity::shell::session(engine.memory_limit, engine.threads).map_err(|e| e.message)?;
    train
        .register(&ctx, TRAIN, "train", csv, key_columns)
        .await?;
    if let Some(score) = score {
        score
            .register(&ctx, SCORE, "score", csv, key_columns)
            .await?;
    }
    Ok(ctx)
}

/// An encode output with its tables collected, ready to cross into Python.
struct Collected {
    output: EncodeOutput,
    train_encoded: Option<ArrowData>,
    scored: Option<ArrowData>,
    encodings: Vec<(String, ArrowData)>,
    copies: Vec<ColumnarCopy>,
}

impl Collected {
    async fn of(output: EncodeOutput) -> Result<Collected, String> {
        let train_encoded = collect_some(&output.train_encoded).await?;
        let scored = collect_some(&output.scored).await?;
        let mut encodings = Vec::new();
        for (name, df) in &output.encodings {
            encodings.push((
                name.clone(),
                collect(df.clone()).await.map_err(|e| e.to_string())?,
            ));
        }
        Ok(Collected {
            output,
            train_encoded,
            scored,
            encodings,
            copies: Vec::new(),
        })
    }

    fn into_python(self, py: Python<'_>) -> PyResult<EncodeResult> {
        Ok(EncodeResult {
            output: self.output,
            train_encoded: self.train_encoded.map(|d| Py::new(py, d)).transpose()?,
            scored: self.scored.map(|d| Py::new(py, d)).transpose()?,
            encodings: self
                .encodings
                .into_iter()
                .map(|(k, d)| Ok((k, Py::new(py, d)?)))
                .collect::<PyResult<_>>()?,
            _copies: self.copies,
        })
    }
}

/// Refresh a previous run's bundle with new rows (`train`), as the shell's
/// `encode --update` does: its posteriors pooled with the new rows under its stored
/// priors, no refit.
#[pyfunction]
#[pyo3(signature = (previous, train, score=None, exposure=None, decay=None, **options))]
fn update_data(
    py: Python<'_>,
    previous: &Bundle,
    train: &Bound<'_, PyAny>,
    score: Option<&Bound<'_, PyAny>>,
    exposure: Option<String>,
    decay: Option<f64>,
    options: Option<&Bound<'_, pyo3::types::PyDict>>,
) -> PyResult<EncodeResult> {
    let mut csv = None;
    let mut engine = EngineOptions::default();
    if let Some(options) = options {
        csv = csv_options(options, "update")?;
        engine = engine_options(options, "update")?;
        if let Some((key, _)) = options.iter().next() {
            return Err(error(format!(
                "update: unknown option {key}; a refresh takes the new rows, score, exposure, \
                 decay, threads, memory_limit and the csv_* options (the previous bundle fixes the target, keys, \
                 family, priors and readers)"
            )));
        }
    }
    let (train, score, csv) =
        inputs("update", train, score, csv).map_err(|e| from_workflow("update", e.value(py)))?;
    let key_columns = previous.inner.key_columns();
    let options = UpdateOptions {
        previous: previous.inner.clone(),
        train: TRAIN.into(),
        exposure,
        decay,
        score: score.as_ref().map(|_| SCORE.to_string()),
    };
    let rt = runtime()?;
    let output = py
        .detach(|| {
            rt.block_on(async {
                let ctx = session_with(&engine, train, score, &csv, &key_columns).await?;
                let output = encode::update(&ctx, &options)
                    .await
                    .map_err(|e| e.to_string())?;
                Collected::of(output).await
            })
        })
        .map_err(|e| from_workflow("update", e))?;
    output.into_python(py)
}

// ------------------------------------------------------------------ bundle

/// A serving bundle: priors and per-level posteriors, to score rows without an
/// engine session.
#[pyclass(frozen, module = "posterity")]
struct Bundle {
    inner: RustBundle,
}

#[pymethods]
impl Bundle {
    /// Read `bundle.json` (or a directory holding one, as `encode` writes).
    #[staticmethod]
    fn load(path: PathBuf) -> PyResult<Bundle> {
        let file = if path.is_dir() {
            path.join("bundle.json")
        } else {
            path
        };
        let text = std::fs::read_to_string(&file)
            .map_err(|e| error(format!("Bundle.load: cannot read {}: {e}", file.display())))?;
        RustBundle::from_json(&text)
            .map(|inner| Bundle { inner })
            .map_err(|e| error(format!("Bundle.load {}: {e}", file.display())))
    }

    #[staticmethod]
    fn from_json(text: &str) -> PyResult<Bundle> {
        RustBundle::from_json(text)
            .map(|inner| Bundle { inner })
            .map_err(|e| error(format!("Bundle.from_json: {e}")))
    }

    fn to_json(&self) -> String {
        self.inner.to_json()
    }

    #[getter]
    fn target(&self) -> String {
        self.inner.target.clone()
    }

    #[getter]
    fn family(&self) -> String {
        self.inner.family.clone()
    }

    #[getter]
    fn readers(&self) -> Vec<String> {
        self.inner.readers.clone()
    }

    /// The encoded keys, in the order their columns are added.
    #[getter]
    fn keys(&self) -> Vec<String> {
        self.inner.keys_in_order().map(|(k, _)| k.clone()).collect()
    }

    /// Score rows (an object with `__arrow_c_stream__`): the rows with every
    /// key's feature columns appended.
    fn score_data(&self, py: Python<'_>, data: &Bound<'_, PyAny>) -> PyResult<ArrowData> {
        let (schema, batches) = read_stream(data, "Bundle.score")?;
        // The scorer's messages name `score` (or a reader): here the method is named.
        let named = |e: encode::EncodeError| {
            let message = e.to_string();
            let message = message.strip_prefix("score: ").unwrap_or(&message);
            error(format!("Bundle.score: {message}"))
        };
        py.detach(|| {
            let mut out = Vec::with_capacity(batches.len());
            for batch in &batches {
                out.push(posterity::serve::score(&self.inner, batch).map_err(named)?);
            }
            let schema = match out.first() {
                Some(b) => b.schema(),
                None => {
                    let empty = RecordBatch::new_empty(schema);
                    posterity::serve::score(&self.inner, &empty)
                        .map_err(named)?
                        .schema()
                }
            };
            Ok(ArrowData {
                schema,
                batches: out,
            })
        })
    }
}

/// The SQL to hand the engine for `sql`: refused when it puts an aggregate or
/// window clause on a scalar function, which the engine would drop without a word
/// (`posterity::clauses`); with each windowed fit falling back to its prior, which
/// the engine cannot ask the function for (`posterity::window_priors`).
#[pyfunction]
fn prepare_sql(sql: &str) -> PyResult<String> {
    let refused = |e| error(posterity::render::engine_error(e));
    posterity::clauses::check_sql_default(sql).map_err(refused)?;
    Ok(posterity::window_priors::with_window_priors(sql).unwrap_or_else(|| sql.to_string()))
}

/// Remove the copies of input files written for the engine (decompressed `.gz`
/// files, JSON arrays as NDJSON); called when the interpreter exits.
#[pyfunction]
fn remove_temporaries() {
    posterity::files::remove_temporaries();
}

#[pymodule]
fn _posterity(m: &Bound<'_, PyModule>) -> PyResult<()> {
    // As in the shell: mimalloc on huge pages faulted most of encode's time away.
    posterity::shell::without_huge_pages();
    m.add("Error", m.py().get_type::<Error>())?;
    m.add_class::<ScalarFunction>()?;
    m.add_class::<AggregateFunction>()?;
    m.add_class::<WindowFunction>()?;
    m.add_class::<ArrowData>()?;
    m.add_class::<EncodeResult>()?;
    m.add_class::<Bundle>()?;
    m.add_function(wrap_pyfunction!(scalar_functions, m)?)?;
    m.add_function(wrap_pyfunction!(aggregate_functions, m)?)?;
    m.add_function(wrap_pyfunction!(window_functions, m)?)?;
    m.add_function(wrap_pyfunction!(documentation, m)?)?;
    m.add_function(wrap_pyfunction!(engine_version, m)?)?;
    m.add_function(wrap_pyfunction!(encode_data, m)?)?;
    m.add_function(wrap_pyfunction!(remove_temporaries, m)?)?;
    m.add_function(wrap_pyfunction!(prepare_sql, m)?)?;
    m.add_function(wrap_pyfunction!(update_data, m)?)?;
    Ok(())
}
