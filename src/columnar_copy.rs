//! A Parquet copy of a table read from text files, for encode.
//!
//! encode scans its training rows once per statement (a key's fit, its fold fits,
//! the output) and its scoring rows several times, and each scan of a CSV, TSV or
//! NDJSON file parses every byte of it again: four keys on 2 M CSV rows took 5.8 s,
//! the same rows from Parquet 3.3 s (BENCHMARKS.md). The copy is parsed once, in
//! file order (encode's row numbers, and so its folds, follow that order), and
//! later scans read only the columns they need.

use std::path::{Path, PathBuf};

use datafusion::dataframe::DataFrameWriteOptions;
use datafusion::error::{DataFusionError, Result};
use datafusion::prelude::{ParquetReadOptions, SessionContext};

/// The copy's file, removed when dropped (after the encode that reads it).
#[derive(Debug)]
pub struct ColumnarCopy(PathBuf);

impl ColumnarCopy {
    pub fn path(&self) -> &Path {
        &self.0
    }
}

impl Drop for ColumnarCopy {
    fn drop(&mut self) {
        let _ = std::fs::remove_file(&self.0);
    }
}

/// Table `name` (registered from `path`) replaced by a Parquet copy of its rows in
/// the same order, when `path` is text files. `None` leaves the table as it was:
/// Parquet already, or a copy that could not be written (a full disk, a row the
/// engine cannot parse), so that encode then reads the files themselves and any
/// error is its own.
pub async fn replace_text_table(
    ctx: &SessionContext,
    name: &str,
    path: &str,
) -> Option<ColumnarCopy> {
    if !crate::files::is_text_source(path) {
        return None;
    }
    let file = crate::files::temporary_path(path, "parquet").ok()?;
    let copy = ColumnarCopy(file);
    write_copy(ctx, name, &copy.0).await.ok()?;
    Some(copy)
}

async fn write_copy(ctx: &SessionContext, name: &str, file: &Path) -> Result<()> {
    const ROWS: &str = "__posterity_rows_to_copy";
    const COPY: &str = "__posterity_copied_rows";
    let file = file
        .to_str()
        .ok_or_else(|| DataFusionError::Execution("a temporary path is not UTF-8".into()))?;
    crate::numbered::register(ctx, name, ROWS).await?;
    let columns: Vec<String> = ctx
        .table_provider(name)
        .await?
        .schema()
        .fields()
        .iter()
        .map(|f| crate::encode::quote(f.name()))
        .collect();
    let written = async {
        // The numbered scan is in order within each part, so this merges, not sorts.
        let rows = ctx
            .sql(&format!(
                "SELECT {} FROM {ROWS} ORDER BY {}",
                columns.join(", "),
                crate::numbered::ROW
            ))
            .await?;
        let single = DataFrameWriteOptions::new().with_single_file_output(true);
        rows.write_parquet(file, single, None).await?;
        ctx.register_parquet(COPY, file, ParquetReadOptions::default())
            .await?;
        ctx.table_provider(COPY).await
    }
    .await;
    ctx.deregister_table(ROWS)?;
    ctx.deregister_table(COPY)?;
    let copied = written?;
    ctx.deregister_table(name)?;
    ctx.register_table(name, copied)?;
    Ok(())
}
