//! The encode workflow as a library: from a training table to leak-free training
//! encodings, serving encoding tables, a JSON serving bundle and a scored table,
//! on any DataFusion session with posterity registered.
//!
//! Three steps, each usable on its own:
//!
//! 1. [`resolve`] checks the options against the training (and scoring) table and
//!    settles everything that depends on the data — the family, the classes, the
//!    base prior — into an [`EncodePlan`]. Every input is checked here, before
//!    anything is written.
//! 2. [`EncodePlan::statements`] lists the SQL the plan runs, as data (a name and
//!    the statement); no text from the data is ever substituted into a template:
//!    identifiers are quoted and literals escaped where they are built.
//! 3. [`run`] executes the statements and returns the results as DataFusion
//!    DataFrames (stream them, collect them, or write them) plus the bundle;
//!    [`write`] puts them into a directory, atomically as a whole.
//!
//! [`update`] refreshes a previous run's encodings with new rows under the stored
//! priors, without refitting from scratch.
//!
//! ```no_run
//! # async fn demo() -> Result<(), posterity::encode::EncodeError> {
//! use posterity::encode::{self, EncodeOptions};
//! let ctx = datafusion::prelude::SessionContext::new();
//! posterity::register(&ctx);
//! ctx.register_parquet("train", "demo-out/train.parquet", Default::default()).await?;
//! let options = EncodeOptions::new("train", "no_show", &["breed", "postcode_area"]);
//! let plan = encode::resolve(&ctx, &options).await?;
//! let output = encode::run(&ctx, &plan).await?;
//! encode::write(&output, std::path::Path::new("encoded"), true).await?;
//! # Ok(()) }
//! ```

mod checks;
mod choose;
mod options;
mod plan;
mod recency;
mod resolve;
mod run;
mod sql;
mod update;

pub use options::{
    parse_hierarchy, EncodeOptions, HalfLife, Horizon, Method, PriorChoice, Reader, ScoreEvidence,
    TimeTies, Treatment, LOO_REFUSED,
};
pub use plan::{feature_columns, EncodePlan, KeyPlan, OutputColumn};
pub use resolve::{check_columns, resolve};
pub use run::{
    run, run_with_progress, summary_json, summary_table, unseen_table, write, ColumnSummary,
    EncodeOutput,
};
pub use sql::Statement;
pub use update::{update, UpdateOptions};

use std::fmt;

/// Why an encode could not be done.
#[derive(Debug)]
pub enum EncodeError {
    /// Options that contradict each other or the data (the user must change them).
    Usage(String),
    /// The engine or the data failed while running.
    Query(String),
    /// A file could not be read or written.
    Io(String),
}

impl fmt::Display for EncodeError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            EncodeError::Usage(m) | EncodeError::Query(m) | EncodeError::Io(m) => f.write_str(m),
        }
    }
}

impl std::error::Error for EncodeError {}

impl From<datafusion::error::DataFusionError> for EncodeError {
    fn from(e: datafusion::error::DataFusionError) -> Self {
        EncodeError::Query(crate::render::engine_error(e))
    }
}

impl From<datafusion::arrow::error::ArrowError> for EncodeError {
    fn from(e: datafusion::arrow::error::ArrowError) -> Self {
        EncodeError::Query(e.to_string())
    }
}

pub type Result<T, E = EncodeError> = std::result::Result<T, E>;

fn usage<T>(message: impl Into<String>) -> Result<T> {
    Err(EncodeError::Usage(message.into()))
}

/// `"name"`, with inner quotes doubled: any column name is safe in SQL.
pub(crate) fn quote(ident: &str) -> String {
    format!("\"{}\"", ident.replace('"', "\"\""))
}

/// `'text'`, with inner quotes doubled: any text is safe as a SQL literal.
pub(crate) fn text(s: &str) -> String {
    format!("'{}'", s.replace('\'', "''"))
}

/// A name made of letters, digits and `_` (for output column and file names).
pub(crate) fn sanitize(s: &str) -> String {
    s.chars()
        .map(|c| {
            if c.is_alphanumeric() || c == '_' {
                c
            } else {
                '_'
            }
        })
        .collect()
}
