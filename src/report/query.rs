//! An interval plot of any query result with a label column and a posterior
//! column: the shell's `--format svg`, so a lookup can be looked at.

use datafusion::arrow::array::{Array, RecordBatch};
use datafusion::arrow::compute::cast;
use datafusion::arrow::datatypes::DataType;

use super::levels::{interval_selection, panels_of};
use super::plots::interval_svg;
use super::{EXTREMES, MOST_DATA};
use crate::layout::{AnyPosterior, Kind, PosteriorColumn};

/// One SVG document: the posterior mean and 90 % interval of the rows that matter
/// (the same choice as the report's), labelled by the first non-posterior column;
/// one panel per class for Dirichlet posteriors. Rows with a NULL posterior are
/// left out; a NULL label shows as `NULL`.
pub fn query_svg(batches: &[RecordBatch]) -> Result<String, String> {
    let Some(first) = batches.first() else {
        return Err("--format svg: the query returned no rows to draw".into());
    };
    let schema = first.schema();
    let posterior_at = schema
        .fields()
        .iter()
        .position(|f| Kind::detect(f.data_type()).is_some())
        .ok_or(
            "--format svg: the result has no posterior column; select one (e.g. \
             beta_posterior(no_show) AS p) beside a label column",
        )?;
    let label_at = (0..schema.fields().len())
        .find(|&i| i != posterior_at && Kind::detect(schema.field(i).data_type()).is_none())
        .ok_or(
            "--format svg: the result needs a label column (e.g. the key) beside the \
             posterior column",
        )?;
    let mut labels = Vec::new();
    let mut posteriors = Vec::new();
    for batch in batches {
        let text = cast(batch.column(label_at), &DataType::Utf8).map_err(|e| e.to_string())?;
        let text = text
            .as_any()
            .downcast_ref::<datafusion::arrow::array::StringArray>();
        let column = PosteriorColumn::new("--format svg", batch.column(posterior_at))
            .map_err(|e| e.to_string())?;
        for i in 0..batch.num_rows() {
            let Some(p) = column.get(i).map_err(|e| e.to_string())? else {
                continue;
            };
            let label = match text {
                Some(t) if t.is_valid(i) => t.value(i).to_string(),
                _ => "NULL".to_string(),
            };
            labels.push(label);
            posteriors.push(p);
        }
    }
    let Some(p0) = posteriors.first() else {
        return Err("--format svg: every posterior in the result is NULL; nothing to draw".into());
    };
    // The reference line: the first row's prior (the evidence scaled to nothing).
    let prior = p0.scale(0.0).map_err(|e| e.to_string())?;
    let pairs: Vec<(&str, &AnyPosterior)> = labels
        .iter()
        .map(String::as_str)
        .zip(posteriors.iter())
        .collect();
    let name = schema.field(posterior_at).name();
    let panels = panels_of(name, name, &prior, &pairs).map_err(|e| e.to_string())?;
    let mut drawings = Vec::new();
    for panel in &panels {
        let chosen = interval_selection(&panel.levels, MOST_DATA, EXTREMES);
        let title = format!(
            "{}: posterior mean and 90 % interval, {} of {} rows",
            panel.title,
            chosen.len(),
            panel.levels.len()
        );
        drawings.push(interval_svg(panel, &chosen, Some(&title))?);
    }
    Ok(stack(drawings))
}

/// Several SVG documents one above the other in one document.
fn stack(drawings: Vec<String>) -> String {
    if drawings.len() == 1 {
        return drawings.into_iter().next().unwrap_or_default();
    }
    let size = |svg: &str, attribute: &str| -> u32 {
        let pattern = format!("{attribute}=\"");
        svg.find(&pattern)
            .and_then(|at| {
                let rest = &svg[at + pattern.len()..];
                rest[..rest.find('"')?].parse().ok()
            })
            .unwrap_or(0)
    };
    let width = drawings.iter().map(|d| size(d, "width")).max().unwrap_or(0);
    let height: u32 = drawings.iter().map(|d| size(d, "height")).sum();
    let mut out = format!(
        "<svg width=\"{width}\" height=\"{height}\" viewBox=\"0 0 {width} {height}\" \
         xmlns=\"http://www.w3.org/2000/svg\">\n"
    );
    let mut y = 0;
    for d in &drawings {
        out.push_str(&d.replacen("<svg ", &format!("<svg y=\"{y}\" "), 1));
        out.push('\n');
        y += size(d, "height");
    }
    out.push_str("</svg>\n");
    out
}
