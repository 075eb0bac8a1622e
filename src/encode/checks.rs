//! Checks of the options against the data, each refusing in the user's words
//! before anything runs: columns and their types, target values, leaky keys,
//! reader thresholds, half-lives, and the names of inputs and outputs.

use datafusion::arrow::array::{Array, AsArray};
use datafusion::arrow::compute::cast;
use datafusion::arrow::datatypes::{DataType, Int64Type};
use datafusion::prelude::SessionContext;

use super::options::{EncodeOptions, Reader};
use super::plan::{EncodePlan, KeyPlan, TimeUnits};
use super::resolve::one_row;
use super::{quote, text, usage, EncodeError, Result};
use crate::layout::Kind;

/// The columns of a registered table, with their types.
pub(super) async fn columns_of(
    ctx: &SessionContext,
    table: &str,
) -> Result<Vec<(String, DataType)>> {
    let df = ctx.table(table).await.map_err(|_| {
        EncodeError::Usage(format!(
            "no table named '{table}' is registered on the session"
        ))
    })?;
    Ok(df
        .schema()
        .fields()
        .iter()
        .map(|f| (f.name().clone(), f.data_type().clone()))
        .collect())
}

/// Texts that mark a missing value in files written by common tools (R and pandas
/// write `NA`, spreadsheets `#N/A`; common practice, no source).
const MISSING_MARKERS: [&str; 10] = [
    "na", "n/a", "#n/a", "nan", "null", "none", "nil", "missing", "?", "-",
];

/// A text target whose classes are numbers plus a missing-value marker (`0`, `1`,
/// `NA`) was almost surely numbers with gaps that the file reader took for text:
/// encoded as classes it would give every marker row a class of its own and change
/// the family without a word. Refused unless the family is named.
pub(super) async fn check_missing_marker(
    ctx: &SessionContext,
    (from, t): (&str, &str),
    target: &str,
    classes: &[String],
) -> Result<()> {
    let is_marker = |c: &str| MISSING_MARKERS.contains(&c.trim().to_lowercase().as_str());
    let markers: Vec<&String> = classes.iter().filter(|c| is_marker(c)).collect();
    let numbers = classes
        .iter()
        .filter(|c| !is_marker(c))
        .all(|c| c.trim().parse::<f64>().is_ok());
    if markers.is_empty() || markers.len() == classes.len() || !numbers {
        return Ok(());
    }
    let list = markers
        .iter()
        .map(|c| text(c))
        .collect::<Vec<_>>()
        .join(", ");
    let rows = one_row(
        ctx,
        &format!("SELECT COUNT(*) FROM {from} WHERE CAST({t} AS VARCHAR) IN ({list})"),
    )
    .await?;
    let rows = rows.column(0).as_primitive::<Int64Type>().value(0);
    usage(format!(
        "--target '{target}' holds numbers and {list} ({rows} row(s)), so it was read as text and \
         would be encoded as {} classes. If {list} marks a missing value, read it as NULL (the \
         shell's --csv-null {}; pandas' read_csv does so by default) and those rows are skipped; \
         to encode it as a class of its own, name the family (--family dirichlet)",
        classes.len(),
        markers[0]
    ))
}

/// Refuse a target (or exposure) of the wrong type, or values outside the family's
/// domain, before any fit meets them, naming the option, how many rows and one such
/// value: the fits would stop with their own, less helpful, error. NULLs are skipped
/// rows, not errors. `table` is the table's name and its columns.
pub(super) async fn check_target_values(
    ctx: &SessionContext,
    (table, columns): (&str, &[(String, DataType)]),
    target: &str,
    exposure: Option<&str>,
    family: Kind,
) -> Result<()> {
    // A value v is finite when -inf < v < inf (so is 0 <= v < 1e100): NaN fails
    // both comparisons in IEEE order and the second in Arrow's total order (where
    // NaN sorts last).
    let finite = |c: &str| {
        format!("(CAST({c} AS DOUBLE) > CAST('-Infinity' AS DOUBLE) AND CAST({c} AS DOUBLE) < CAST('Infinity' AS DOUBLE))")
    };
    let t = quote(target);
    let mut checks = match family {
        Kind::Beta => vec![(
            format!("--target '{target}'"),
            format!("CAST({t} AS DOUBLE) IN (0, 1)"),
            "0 or 1 (or false/true) for the beta family",
            t.clone(),
        )],
        Kind::Gamma => vec![(
            format!("--target '{target}'"),
            format!("CAST({t} AS DOUBLE) >= 0 AND CAST({t} AS DOUBLE) < 1e100"),
            "counts from 0 to 1e100 for the gamma family",
            t.clone(),
        )],
        // Squares of values this large stay finite when summed over any table.
        Kind::Nig => vec![(
            format!("--target '{target}'"),
            format!("{} AND ABS(CAST({t} AS DOUBLE)) < 1e100", finite(&t)),
            "finite numbers between -1e100 and 1e100 for the nig family",
            t.clone(),
        )],
        Kind::Dirichlet => Vec::new(),
    };
    if let (Some(x), Kind::Gamma) = (exposure, family) {
        let q = quote(x);
        checks.push((
            format!("--exposure '{x}'"),
            format!("CAST({q} AS DOUBLE) >= 0 AND CAST({q} AS DOUBLE) < 1e100"),
            "numbers from 0 to 1e100",
            q,
        ));
    }
    let hint = " (text classes take the dirichlet family: drop --family)";
    for (what, name, hint) in std::iter::once((format!("--target '{target}'"), target, hint))
        .chain(exposure.map(|x| (format!("--exposure '{x}'"), x, "")))
        .filter(|_| family != Kind::Dirichlet)
    {
        let numeric = columns
            .iter()
            .any(|(n, d)| n == name && crate::fit::is_number(d));
        if !numeric {
            return usage(format!(
                "{what} is not numeric; the {} family needs numbers{hint}",
                family.short_name()
            ));
        }
    }
    for (what, ok, allowed, column) in checks {
        let (bad, example) = rows_failing(ctx, table, &column, &ok).await?;
        if bad > 0 {
            return usage(format!(
                "{what} has {bad} row(s) with a value outside the allowed range (for example \
                 {example}); allowed: {allowed}. Fix or filter those rows (NULLs are skipped)"
            ));
        }
    }
    Ok(())
}

/// How many rows of `table` have a non-NULL `column` that fails `ok`, and the
/// smallest such value as text (for the message). The test is a FILTER, never a
/// WHERE: Parquet statistics leave NaN out, and the engine skips the row groups
/// whose statistics rule a WHERE out, NaNs and all (DataFusion 55: `WHERE NOT (x >=
/// 0)` counted none of a file's NaNs).
pub(super) async fn rows_failing(
    ctx: &SessionContext,
    table: &str,
    column: &str,
    ok: &str,
) -> Result<(i64, String)> {
    let from = datafusion::common::TableReference::from(table).to_quoted_string();
    let failing = format!("{column} IS NOT NULL AND NOT ({ok})");
    let b = one_row(
        ctx,
        &format!(
            "SELECT COUNT(*) FILTER (WHERE {failing}), \
               MIN(CAST({column} AS VARCHAR)) FILTER (WHERE {failing}) FROM {from}"
        ),
    )
    .await?;
    let bad = b.column(0).as_primitive::<Int64Type>().value(0);
    let example = cast(b.column(1), &DataType::Utf8)?;
    let example = example.as_string::<i32>();
    let example = if example.is_valid(0) {
        example.value(0).to_string()
    } else {
        String::new()
    };
    Ok((bad, example))
}

/// A key built from the target (or time-ordered by it) hands every row its own
/// outcome: refuse it rather than write a perfect leak.
pub(super) fn refuse_leaky_keys(options: &EncodeOptions, keys: &[KeyPlan]) -> Result<()> {
    let target = &options.target;
    for key in keys {
        if key.columns.contains(target) {
            let what = if key.columns.len() == 1 {
                "--columns".to_string()
            } else {
                format!("the interaction '{}'", key.columns.join(":"))
            };
            return usage(format!(
                "{what} includes the target '{target}': its encoding would be the row's own \
                 outcome (a perfect leak); encode other columns"
            ));
        }
        if let Some(time) = &options.time_column {
            if key.columns.len() == 1 && key.columns[0] == *time {
                return usage(format!(
                    "--time-column '{time}' is also encoded as a key: every row of a level shares \
                     its time, so as-of encodings of it would all be the prior"
                ));
            }
        }
    }
    if options.time_column.as_deref() == Some(target.as_str()) {
        return usage(format!(
            "--time-column '{target}' is the target: ordering rows by their own outcome leaks it"
        ));
    }
    if options.exposure.as_deref() == Some(target.as_str()) {
        return usage(format!(
            "--exposure '{target}' is the target; give the column of exposure (time at risk, visits)"
        ));
    }
    Ok(())
}

pub(super) fn require_columns<'a>(
    what: &str,
    available: &[(String, DataType)],
    wanted: impl IntoIterator<Item = (&'a String, String)>,
) -> Result<()> {
    for (column, role) in wanted {
        if !available.iter().any(|(n, _)| n == column) {
            return usage(format!(
                "{role} '{column}' is not a column of the {what} (columns: {}){}",
                available
                    .iter()
                    .map(|(n, _)| n.as_str())
                    .collect::<Vec<_>>()
                    .join(", "),
                other_delimiter_hint(available)
            ));
        }
    }
    Ok(())
}

/// A CSV read with the wrong delimiter has one column whose name holds the others:
/// say which delimiter the header seems to use (in the shell, `--csv-delimiter`;
/// from Python, a DataFrame read with it).
fn other_delimiter_hint(available: &[(String, DataType)]) -> String {
    let [(name, _)] = available else {
        return String::new();
    };
    [(';', "';'"), ('|', "'|'"), ('\t', "tabs"), (',', "','")]
        .into_iter()
        .find(|(d, _)| name.contains(*d))
        .map(|(_, shown)| format!("; its header looks separated by {shown}"))
        .unwrap_or_default()
}

/// Refuse a key column whose values have no text form (a struct, a map): a key's
/// levels are its values' text.
pub(super) fn require_key_types(
    what: &str,
    available: &[(String, DataType)],
    keys: &[KeyPlan],
) -> Result<()> {
    for column in keys.iter().flat_map(|k| &k.columns) {
        let Some((_, d)) = available.iter().find(|(n, _)| n == column) else {
            continue;
        };
        if !datafusion::arrow::compute::can_cast_types(d, &DataType::Utf8View) {
            return usage(format!(
                "key column '{column}' of the {what} is {}, which has no text form; \
                 allowed: text, numbers, booleans, dates and times (encode one field of it \
                 as its own column)",
                crate::layout::describe_type(d)
            ));
        }
    }
    Ok(())
}

/// The scoring table's columns, after checking that it has every key column.
pub(super) async fn scoring_columns(
    ctx: &SessionContext,
    score: Option<&str>,
    keys: &[KeyPlan],
) -> Result<Vec<String>> {
    let Some(score) = score else {
        return Ok(Vec::new());
    };
    let columns = columns_of(ctx, score).await?;
    require_columns(
        "scoring table",
        &columns,
        keys.iter().flat_map(KeyPlan::roles),
    )?;
    require_key_types("scoring table", &columns, keys)?;
    Ok(columns.into_iter().map(|(n, _)| n).collect())
}

/// The most half-lives as-of encodings span: their running sums weigh the newest
/// rows 2^(period / half-life) times the oldest, which must stay a finite number.
const MAX_AS_OF_HALF_LIVES: f64 = 1000.0;

/// An `above:T` reader whose threshold lies outside the family's parameter range
/// would be the same number for every level: a column that carries nothing.
pub(super) fn check_thresholds(readers: &[Reader], family: Kind) -> Result<()> {
    for reader in readers {
        let Reader::Above(t) = *reader else { continue };
        let (inside, range) = match family {
            Kind::Beta | Kind::Dirichlet => (
                t > 0.0 && t < 1.0,
                "strictly between 0 and 1 (a probability)",
            ),
            Kind::Gamma => (t > 0.0, "greater than 0 (a rate)"),
            Kind::Nig => (true, ""),
        };
        if !inside {
            return usage(format!(
                "--readers: 'above:{t}' would be the same for every level of a {} posterior; \
                 allowed: a threshold {range}",
                family.short_name()
            ));
        }
    }
    Ok(())
}

pub(super) fn check_as_of_half_life(h: f64, period: f64, units: TimeUnits) -> Result<()> {
    if period / h > MAX_AS_OF_HALF_LIVES {
        let period_shown = match units {
            TimeUnits::Numbers => format!("{} time units", crate::render::short(period)),
            TimeUnits::Days => units.show(period),
        };
        return usage(format!(
            "--half-life {} is out of range for as-of encodings over a training period of \
             {period_shown}; allowed: at least {} (1/{MAX_AS_OF_HALF_LIVES} of the period), or \
             --method kfold",
            crate::render::short(h),
            units.show(period / MAX_AS_OF_HALF_LIVES)
        ));
    }
    Ok(())
}

/// Input columns must not take the names of the statements' working columns;
/// checked before any statement runs.
pub(super) fn check_input_names(train: &[(String, DataType)], score: &[String]) -> Result<()> {
    let train = train.iter().map(|(name, _)| name);
    let inputs = train
        .map(|c| ("training", c))
        .chain(score.iter().map(|c| ("scored", c)));
    for (table, c) in inputs {
        if super::sql::is_working_column(c) {
            return usage(format!(
                "the {table} column '{c}' has a name encode keeps for its working columns \
                 (__row, __fold, __level, __time, __x, __y, __k0, __k1, ...); rename it"
            ));
        }
    }
    Ok(())
}

/// Output columns must not collide with each other or with the input columns.
pub(super) fn check_output_names(plan: &EncodePlan) -> Result<()> {
    let mut seen: std::collections::HashMap<String, String> = plan
        .train_columns
        .iter()
        .map(|c| (c.clone(), format!("the training column '{c}'")))
        .collect();
    let mut key_names = std::collections::HashMap::new();
    for key in &plan.keys {
        let spelled = key.columns.join(":");
        if let Some(other) = key_names.insert(key.name.clone(), spelled.clone()) {
            if other == spelled {
                return usage(format!(
                    "key '{spelled}' is named twice; name each key once"
                ));
            }
            return usage(format!(
                "keys '{other}' and '{spelled}' both make output names '{}_...'; encode one of them",
                key.name
            ));
        }
        for (name, _) in plan.output_columns(key) {
            let this_key = format!("key '{spelled}'");
            if let Some(other) = seen.insert(name.clone(), this_key.clone()) {
                if other == this_key {
                    return usage(format!(
                        "the readers of key '{spelled}' give the column '{name}' twice (a \
                         reader named twice, or two spellings of one such as q5 and q05); name \
                         each reader once"
                    ));
                }
                return usage(format!(
                    "the output column '{name}' of key '{spelled}' would repeat {other}; \
                     rename the column or choose other readers"
                ));
            }
            // The scored file keeps the scoring table's columns beside the encodings
            // (a file scored before, given again, holds them already).
            if plan.score_columns.contains(&name) {
                return usage(format!(
                    "the output column '{name}' of key '{spelled}' would repeat the scoring \
                     table's column '{name}' (a file scored before?); drop or rename that column"
                ));
            }
        }
    }
    Ok(())
}
