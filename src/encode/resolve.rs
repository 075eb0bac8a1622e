//! Options meet the data: every check before anything runs or is written, and the
//! choices that depend on the data (family, classes, base prior).

use datafusion::arrow::array::{Array, AsArray};
use datafusion::arrow::compute::cast;
use datafusion::arrow::datatypes::{DataType, Float64Type, Int64Type};
use datafusion::prelude::SessionContext;

use super::options::{
    EncodeOptions, HalfLife, Horizon, Method, PriorChoice, Reader, ScoreEvidence, TimeTies,
    Treatment,
};
use super::{quote, sanitize, text, usage, EncodeError, Result};
use crate::layout::Kind;

/// One encoded key: a column or an interaction of columns.
#[derive(Debug, Clone, PartialEq)]
pub struct KeyPlan {
    /// Output name: the column, or the columns joined by `_x_`.
    pub name: String,
    /// The input columns it is built from.
    pub columns: Vec<String>,
    /// This key's own constant prior (SQL), when it differs from the plan's base
    /// prior: a refresh keeps each column's stored prior.
    pub prior: Option<String>,
    pub treatment: Treatment,
    /// Why the treatment was chosen, in the user's words (for the summary).
    pub why: String,
    /// Indicator columns for this many of the largest levels (the plan counts the
    /// levels with at least `--indicator-min-rows` rows)...
    pub indicators: usize,
    /// ...or, in a refresh, for exactly the previous run's indicator levels in their
    /// order, so that `<key>_top1` keeps its level.
    pub stored_indicators: Option<Vec<String>>,
    /// Recency weighting of its fits: a row this many time units older than the
    /// newest training row (as-of: than the row encoded) counts half.
    pub half_life: Option<f64>,
    /// How the half-life was chosen, in the user's words (empty without one asked).
    pub recency: String,
    /// As-of training rows read only rows at least this many time units older.
    pub horizon: Option<f64>,
    /// How the horizon was chosen, in the user's words (empty without one asked).
    pub horizon_why: String,
    /// Its reader columns (`--readers`, or the default for its spread).
    pub readers: Vec<Reader>,
    /// Why a default reader set was chosen, in the user's words (empty when given).
    pub readers_why: String,
    /// The key whose levels' posteriors centre this key's level priors (`--hierarchy`).
    pub parent: Option<usize>,
    /// Under a parent: the layer's strength when given (a refresh keeps the stored
    /// one); `None` fits it.
    pub strength: Option<f64>,
}

impl KeyPlan {
    /// A key encoded with posterior readers and the options' indicators.
    pub fn posterior(name: String, columns: Vec<String>, options: &EncodeOptions) -> KeyPlan {
        KeyPlan {
            name,
            columns,
            prior: None,
            treatment: Treatment::Posterior,
            why: String::new(),
            indicators: options.indicators,
            stored_indicators: None,
            half_life: None,
            recency: String::new(),
            horizon: None,
            horizon_why: String::new(),
            readers: options
                .readers
                .clone()
                .unwrap_or_else(|| vec![Reader::Mean]),
            readers_why: String::new(),
            parent: None,
            strength: None,
        }
    }

    /// How a user names the key: the column, or the columns joined by `:`.
    pub fn spelled(&self) -> String {
        self.columns.join(":")
    }

    /// Its input columns, each with the role named in a message about it.
    pub(super) fn roles(&self) -> impl Iterator<Item = (&String, String)> {
        self.columns.iter().map(|c| (c, "key column".to_string()))
    }

    /// The SQL of the key's text over table alias `t`: the column's `key_text`, or for an
    /// interaction each part's text prefixed by its length in characters and `:`,
    /// joined by `|` (collision-free; `crate::bundle::interaction_key` is the same).
    /// With `normalize`, each part goes through `normalize_key` first.
    pub fn sql(&self, normalize: bool) -> String {
        let part = |c: &str| match normalize {
            true => format!("normalize_key(key_text(t.{}))", quote(c)),
            false => format!("key_text(t.{})", quote(c)),
        };
        if let [one] = self.columns.as_slice() {
            return part(one);
        }
        let all_present = self
            .columns
            .iter()
            .map(|c| format!("t.{} IS NOT NULL", quote(c)))
            .collect::<Vec<_>>()
            .join(" AND ");
        let prefixed = self
            .columns
            .iter()
            .map(|c| format!("character_length({}), ':', {}", part(c), part(c)))
            .collect::<Vec<_>>()
            .join(", '|', ");
        format!("CASE WHEN {all_present} THEN concat({prefixed}) END")
    }
}

/// Everything the statements need, settled against the data.
#[derive(Debug, Clone)]
pub struct EncodePlan {
    pub options: EncodeOptions,
    pub family: Kind,
    pub method: Method,
    /// Dirichlet classes, sorted; empty for the other families.
    pub classes: Vec<String>,
    /// The constant prior of every fit (SQL); with a fitted prior the fits are
    /// re-priored afterwards.
    pub base_prior: String,
    pub fitted: bool,
    pub keys: Vec<KeyPlan>,
    /// The training table's columns, in order.
    pub train_columns: Vec<String>,
    /// The scoring table's columns, in order.
    pub score_columns: Vec<String>,
    /// With a half-life: the newest time in the training rows (ages count from it)...
    pub newest_time: Option<f64>,
    /// ...and the oldest (as-of encodings scale their running sums from it).
    pub oldest_time: Option<f64>,
    /// What one time unit of `--time-column` is (half-lives and horizons count them).
    pub time_units: TimeUnits,
    /// The factor on each level's data in the posteriors that score rows (1: all of it).
    pub score_scale: f64,
}

/// What one unit of `--time-column` is: a number's own unit (days, hours, seasons),
/// or for a date or timestamp a day, so `--horizon 30` reads rows at least thirty
/// days older whatever the column's type. Timestamps count from 1970-01-01 UTC.
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub enum TimeUnits {
    #[default]
    Numbers,
    Days,
}

impl TimeUnits {
    /// The units of a column of type `d`; `None` for a type that is no time.
    pub fn of(d: &DataType) -> Option<TimeUnits> {
        match d {
            d if d.is_numeric() => Some(TimeUnits::Numbers),
            DataType::Null => Some(TimeUnits::Numbers),
            DataType::Date32 | DataType::Date64 | DataType::Timestamp(_, _) => {
                Some(TimeUnits::Days)
            }
            _ => None,
        }
    }

    /// An amount of time for a message: `7`, or `7 days`.
    pub fn show(self, amount: f64) -> String {
        match self {
            TimeUnits::Numbers => crate::render::short(amount),
            TimeUnits::Days => format!("{} days", crate::render::short(amount)),
        }
    }

    /// A point in time for a message: the number, or the UTC date (and time of day
    /// when it has one).
    pub fn show_time(self, t: f64) -> String {
        let seconds = (t * 86400.0).round();
        let when = match self {
            TimeUnits::Days if seconds.abs() < 1e15 => {
                datafusion::arrow::array::temporal_conversions::timestamp_s_to_datetime(
                    seconds as i64,
                )
            }
            _ => None,
        };
        match when {
            Some(w) if seconds % 86400.0 == 0.0 => w.date().to_string(),
            Some(w) => w.to_string(),
            None => crate::render::short(t),
        }
    }

    /// The SQL number of time units of the time expression `expr`.
    pub fn number(self, expr: &str) -> String {
        match self {
            TimeUnits::Numbers => format!("CAST({expr} AS DOUBLE)"),
            TimeUnits::Days => format!("(date_part('epoch', {expr}) / 86400.0)"),
        }
    }
}

/// What one output column of a key holds.
#[derive(Debug, Clone, PartialEq)]
pub enum OutputColumn {
    /// Reader `index` of the options (for a Dirichlet class when `class` is set).
    Reader { index: usize, class: Option<String> },
    /// 1 for rows of the key's `rank`-th largest level, else 0.
    Indicator { rank: usize },
    /// A seeded posterior draw (per class for Dirichlet).
    Draw { class: Option<String> },
    /// The level's position among the sorted training levels; -1 when unseen.
    Code,
}

impl EncodePlan {
    /// The output columns of `key`, in order, with their names.
    pub fn output_columns(&self, key: &KeyPlan) -> Vec<(String, OutputColumn)> {
        feature_columns(
            &key.name,
            key.treatment,
            key.indicators,
            &key.readers,
            &self.classes,
            self.options.draws.is_some(),
        )
    }

    /// The reader columns of `key` only: (name, reader, class).
    pub(super) fn reader_columns<'a>(
        &self,
        key: &'a KeyPlan,
    ) -> Vec<(String, &'a Reader, Option<String>)> {
        self.output_columns(key)
            .into_iter()
            .filter_map(|(name, column)| match column {
                OutputColumn::Reader { index, class } => Some((name, &key.readers[index], class)),
                _ => None,
            })
            .collect()
    }
}

/// The feature columns of a key named `name`, in order, with their names: one
/// place for the names the training table, the scored table and scoring with a
/// bundle all use.
pub fn feature_columns(
    name: &str,
    treatment: Treatment,
    indicators: usize,
    readers: &[Reader],
    classes: &[String],
    draws: bool,
) -> Vec<(String, OutputColumn)> {
    let per_class = |with_class: bool| -> Vec<(String, Option<String>)> {
        if classes.is_empty() || !with_class {
            vec![(name.to_string(), None)]
        } else {
            classes
                .iter()
                .map(|c| (format!("{name}_{}", sanitize(c)), Some(c.clone())))
                .collect()
        }
    };
    let indicators = (1..=indicators).map(|rank| {
        (
            format!("{name}_top{rank}"),
            OutputColumn::Indicator { rank },
        )
    });
    match treatment {
        Treatment::Levels => return indicators.collect(),
        Treatment::Codes => return vec![(format!("{name}_code"), OutputColumn::Code)],
        Treatment::Posterior => {}
    }
    let mut out = Vec::new();
    for (index, reader) in readers.iter().enumerate() {
        for (prefix, class) in per_class(reader.per_class()) {
            out.push((
                format!("{prefix}_{}", reader.suffix()),
                OutputColumn::Reader { index, class },
            ));
        }
    }
    out.extend(indicators);
    if draws {
        for (prefix, class) in per_class(true) {
            out.push((format!("{prefix}_draw"), OutputColumn::Draw { class }));
        }
    }
    out
}

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

fn keys_of(options: &EncodeOptions) -> Result<Vec<KeyPlan>> {
    let mut keys = Vec::new();
    for c in &options.columns {
        if c.is_empty() {
            return usage("--columns: an empty column name");
        }
        keys.push(KeyPlan::posterior(sanitize(c), vec![c.clone()], options));
    }
    for parts in &options.interactions {
        if parts.len() < 2 || parts.iter().any(|p| p.is_empty()) {
            return usage(format!(
                "--interactions: '{}' must be two or more columns joined by ':'",
                parts.join(":")
            ));
        }
        if let Some(twice) = parts
            .iter()
            .enumerate()
            .find_map(|(i, p)| parts[..i].contains(p).then_some(p))
        {
            return usage(format!(
                "--interactions: '{}' names '{twice}' twice; an interaction joins different columns",
                parts.join(":")
            ));
        }
        let name = parts
            .iter()
            .map(|p| sanitize(p))
            .collect::<Vec<_>>()
            .join("_x_");
        keys.push(KeyPlan::posterior(name, parts.clone(), options));
    }
    if keys.is_empty() {
        return usage("--columns: name at least one column to encode");
    }
    Ok(keys)
}

/// `--hierarchy`: each child key's parent, checked (one-column posterior keys, one
/// parent each, no cycle; as-of encodings with strict ties).
fn link_hierarchy(options: &EncodeOptions, method: Method, keys: &mut [KeyPlan]) -> Result<()> {
    if options.hierarchy.is_empty() {
        return Ok(());
    }
    if options.readers.as_ref().is_some_and(Vec::is_empty) && options.draws.is_none() {
        return usage("--hierarchy: name at least one reader (a parent's posteriors are read)");
    }
    if method == Method::Time && options.time_ties == TimeTies::FileOrder {
        return usage(
            "--hierarchy: as-of encodings read a parent at a time, so rows of one time \
             must not read each other (drop --time-ties file-order)",
        );
    }
    let find = |keys: &[KeyPlan], column: &str| -> Result<usize> {
        let Some(i) = keys
            .iter()
            .position(|k| k.columns.len() == 1 && k.columns[0] == column)
        else {
            return usage(format!(
                "--hierarchy: '{column}' is not one of --columns (a hierarchy links \
                 one-column keys)"
            ));
        };
        if keys[i].treatment != Treatment::Posterior {
            return usage(format!(
                "--hierarchy: '{column}' is given as {}; keys in a hierarchy are posterior \
                 encodings (drop its --treatment)",
                keys[i].treatment.name()
            ));
        }
        Ok(i)
    };
    for chain in &options.hierarchy {
        for pair in chain.windows(2) {
            let (child, parent) = (find(keys, &pair[0])?, find(keys, &pair[1])?);
            if child == parent {
                return usage(format!(
                    "--hierarchy: '{}' cannot be its own parent",
                    pair[0]
                ));
            }
            match keys[child].parent {
                Some(p) if p != parent => {
                    return usage(format!(
                        "--hierarchy: '{}' is given two parents, '{}' and '{}'",
                        pair[0], keys[p].columns[0], pair[1]
                    ))
                }
                _ => keys[child].parent = Some(parent),
            }
        }
    }
    for start in 0..keys.len() {
        let (mut at, mut steps) = (start, 0);
        while let Some(p) = keys[at].parent {
            (at, steps) = (p, steps + 1);
            if steps > keys.len() {
                return usage(format!(
                    "--hierarchy: '{}' is its own ancestor (the chains make a cycle)",
                    keys[start].columns[0]
                ));
            }
        }
    }
    Ok(())
}

/// Indicator columns one key may have (each is a column of the training table).
const MAX_INDICATORS: usize = 1000;

/// The most folds `--method kfold` takes. With more, a row's fold holds hardly any
/// other row of its level and the encodings approach leave-one-out: measured with
/// `benches/modeling/leakage.py` (10 rows a level), the mean alone gained 0.0033 in
/// sample at 5 folds, 0.0050 at 10, 0.0088 at 20 (one column of noise: 0.0072),
/// 0.0147 at 50 and 0.0230 at one row a fold. 10 is the most that stays below the
/// noise (the leakage test's margin would let 20 pass, but that gain is a leak).
const MAX_FOLDS: u32 = 10;

/// Each key's treatment: the user's choice, or from the data (see
/// `EncodeOptions::treatments`), with the reason in the user's words.
async fn choose_treatments(
    ctx: &SessionContext,
    options: &EncodeOptions,
    keys: &mut [KeyPlan],
) -> Result<()> {
    for (spec, _) in &options.treatments {
        if !keys.iter().any(|k| k.spelled() == *spec) {
            return usage(format!(
                "--treatment: '{spec}' is not an encoded key (keys: {})",
                keys.iter()
                    .map(KeyPlan::spelled)
                    .collect::<Vec<_>>()
                    .join(", ")
            ));
        }
    }
    for key in keys.iter_mut() {
        let chosen = options
            .treatments
            .iter()
            .find(|(spec, _)| *spec == key.spelled())
            .map(|(_, t)| *t);
        // Level sizes are needed to decide, and for every level's indicator.
        let sizes = match chosen {
            Some(Treatment::Codes) | Some(Treatment::Posterior) => None,
            None if options.indicators == 0 => None,
            _ => Some(level_sizes(ctx, options, key).await?),
        };
        let min_rows = options.indicator_min_rows;
        key.treatment = chosen.unwrap_or(Treatment::Posterior);
        key.why = match (chosen, sizes) {
            (Some(Treatment::Levels), Some((levels, _, _))) => {
                if levels as usize > MAX_INDICATORS {
                    return usage(format!(
                        "--treatment {}=levels: the key has {levels} levels; allowed: at most {MAX_INDICATORS} (one indicator column each); use codes or posterior",
                        key.spelled()
                    ));
                }
                key.indicators = levels as usize;
                "chosen (--treatment)".to_string()
            }
            (Some(_), _) => "chosen (--treatment)".to_string(),
            (None, None) => "indicators are off (--indicators 0)".to_string(),
            (None, Some((levels, smallest, small))) => {
                // No column for indicators no level qualifies for.
                key.indicators = key.indicators.min((levels - small) as usize);
                // Few large levels stay posterior encodings with an indicator each:
                // measured on held-out data, giving them as indicators alone did
                // worse (MODELING.md, ablation), so `levels` is only chosen on request.
                if levels > 0 && levels as usize <= options.indicators && smallest >= min_rows {
                    format!(
                        "{levels} levels, each with at least {} rows: readers and an indicator \
                         for every level",
                        crate::render::short(min_rows)
                    )
                } else {
                    format!(
                        "{levels} levels, {small} with fewer than {} rows",
                        crate::render::short(min_rows)
                    )
                }
            }
        };
        if key.treatment == Treatment::Codes {
            key.indicators = 0;
        }
    }
    Ok(())
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
async fn check_missing_marker(
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
/// smallest such value as text (for the message).
pub(super) async fn rows_failing(
    ctx: &SessionContext,
    table: &str,
    column: &str,
    ok: &str,
) -> Result<(i64, String)> {
    let from = datafusion::common::TableReference::from(table).to_quoted_string();
    let b = one_row(
        ctx,
        &format!(
            "SELECT COUNT(*), MIN(CAST({column} AS VARCHAR)) FROM {from} \
             WHERE {column} IS NOT NULL AND NOT ({ok})"
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

/// A key's number of levels, the rows of its smallest level, and the number of
/// levels with fewer than `indicator_min_rows` rows.
async fn level_sizes(
    ctx: &SessionContext,
    options: &EncodeOptions,
    key: &KeyPlan,
) -> Result<(u64, f64, u64)> {
    let b = one_row(
        ctx,
        &format!(
            "SELECT COUNT(*), CAST(MIN(n) AS DOUBLE), COUNT(*) FILTER (WHERE n < {}) FROM              (SELECT {} AS k, COUNT(*) AS n FROM {} t GROUP BY 1) WHERE k IS NOT NULL",
            options.indicator_min_rows,
            key.sql(options.normalize_keys),
            datafusion::common::TableReference::from(options.train.as_str()).to_quoted_string()
        ),
    )
    .await?;
    let count = |c: usize| b.column(c).as_primitive::<Int64Type>().value(0) as u64;
    let smallest = b.column(1).as_primitive::<Float64Type>();
    let smallest = if smallest.is_null(0) {
        0.0
    } else {
        smallest.value(0)
    };
    Ok((count(0), smallest, count(2)))
}

/// A key built from the target (or time-ordered by it) hands every row its own
/// outcome: refuse it rather than write a perfect leak.
fn refuse_leaky_keys(options: &EncodeOptions, keys: &[KeyPlan]) -> Result<()> {
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

/// The first batch with rows of a query that gives one row.
pub(super) async fn one_row(
    ctx: &SessionContext,
    sql: &str,
) -> Result<datafusion::arrow::array::RecordBatch> {
    let batches = ctx.sql(sql).await?.collect().await?;
    batches
        .into_iter()
        .find(|b| b.num_rows() > 0)
        .ok_or_else(|| EncodeError::Query(format!("no result from {sql}")))
}

/// Check the options against the tables and settle the plan.
pub async fn resolve(ctx: &SessionContext, options: &EncodeOptions) -> Result<EncodePlan> {
    let method = options.method()?;
    if !(2..=MAX_FOLDS).contains(&options.folds) {
        return usage(format!(
            "--folds {} is out of range; allowed: 2 to {MAX_FOLDS} (more folds approach \
             leave-one-out, whose encodings leak each row's own target to tree learners)",
            options.folds
        ));
    }
    if !(options.indicator_min_rows.is_finite() && options.indicator_min_rows >= 0.0) {
        return usage("--indicator-min-rows must be a finite number >= 0");
    }
    if options.indicators > MAX_INDICATORS {
        return usage(format!(
            "--indicators {} is out of range; allowed: 0 to {MAX_INDICATORS} indicator columns per key",
            options.indicators
        ));
    }
    if options.readers.as_ref().is_some_and(Vec::is_empty)
        && options.draws.is_none()
        && options.indicators == 0
    {
        return usage(
            "--readers: name at least one reader (mean, sd, var, data_weight, qNN, above:T)",
        );
    }
    let mut keys = keys_of(options)?;
    refuse_leaky_keys(options, &keys)?;
    let train = columns_of(ctx, &options.train).await?;
    let target = &options.target;
    require_columns(
        "training table",
        &train,
        keys.iter()
            .flat_map(KeyPlan::roles)
            .chain(std::iter::once((target, "--target".to_string())))
            .chain(
                options
                    .time_column
                    .iter()
                    .map(|c| (c, "--time-column".to_string())),
            )
            .chain(
                options
                    .exposure
                    .iter()
                    .map(|c| (c, "--exposure".to_string())),
            ),
    )?;
    require_key_types("training table", &train, &keys)?;
    choose_treatments(ctx, options, &mut keys).await?;
    link_hierarchy(options, method, &mut keys)?;
    let score_columns = scoring_columns(ctx, options.score.as_deref(), &keys).await?;
    check_input_names(&train, &score_columns)?;

    let t = quote(target);
    let from = quote(&options.train);
    let target_type = train
        .iter()
        .find(|(n, _)| n == target)
        .map(|(_, d)| d.clone())
        .unwrap_or(DataType::Null);
    let with_target = one_row(ctx, &format!("SELECT COUNT({t}) FROM {from}")).await?;
    if with_target.column(0).as_primitive::<Int64Type>().value(0) == 0 {
        return usage(format!(
            "the training table has no rows with a value of --target '{target}' (it is empty or \
             the target is all NULL); encode needs at least one"
        ));
    }
    let binary = || async {
        let b = one_row(
            ctx,
            &format!("SELECT COUNT(*) FROM {from} WHERE {t} IS NOT NULL AND {t} NOT IN (0, 1)"),
        )
        .await?;
        Ok::<bool, EncodeError>(b.column(0).as_primitive::<Int64Type>().value(0) == 0)
    };
    let family = match options.family {
        Some(f) => f,
        // A dictionary column (pandas' category dtype) is inferred from its values.
        None => match crate::fit::values_type(&target_type) {
            DataType::Boolean => Kind::Beta,
            // Decimals (amounts) are continuous unless they are all 0 or 1.
            // An exposure is only ever given for counts: 0/1 counts are counts then.
            d if d.is_numeric() && options.exposure.is_some() => Kind::Gamma,
            d if d.is_numeric() => match (binary().await?, d.is_integer()) {
                (true, _) => Kind::Beta,
                (false, true) => Kind::Gamma,
                (false, false) => Kind::Nig,
            },
            DataType::Utf8 | DataType::LargeUtf8 | DataType::Utf8View => Kind::Dirichlet,
            other => {
                return usage(format!(
                    "cannot infer a family for target '{target}' of type {other}; pass --family"
                ))
            }
        },
    };
    check_thresholds(options.readers.as_deref().unwrap_or_default(), family)?;
    if options.exposure.is_some() && family != Kind::Gamma {
        return usage(format!(
            "--exposure is for count targets (the gamma family); target '{target}' is encoded \
             with the {} family",
            family.short_name()
        ));
    }
    check_target_values(
        ctx,
        (&options.train, &train),
        target,
        options.exposure.as_deref(),
        family,
    )
    .await
    .map_err(|e| match (e, options.family) {
        // The user never named the family: say where it came from.
        (EncodeError::Usage(m), None) if family == Kind::Gamma && options.exposure.is_none() => {
            EncodeError::Usage(format!(
                "{m}. The gamma family (counts) was chosen because '{target}' holds integers; \
                 for scores, amounts or other measurements pass --family nig"
            ))
        }
        (e, _) => e,
    })?;
    let classes = if family == Kind::Dirichlet {
        let batches = ctx
            .sql(&format!(
                "SELECT DISTINCT CAST({t} AS VARCHAR) AS c FROM {from} WHERE {t} IS NOT NULL ORDER BY c"
            ))
            .await?
            .collect()
            .await?;
        let mut classes = Vec::new();
        for b in &batches {
            let col = cast(b.column(0), &DataType::Utf8)?;
            let col = col.as_string::<i32>();
            classes.extend((0..col.len()).map(|i| col.value(i).to_string()));
        }
        if classes.is_empty() {
            return usage(format!("target '{target}' has no non-NULL values"));
        }
        if options.family.is_none() {
            check_missing_marker(ctx, (from.as_str(), &t), target, &classes).await?;
        }
        classes
    } else {
        Vec::new()
    };
    let class_list = classes
        .iter()
        .map(|c| text(c))
        .collect::<Vec<_>>()
        .join(", ");
    let base_prior = match (family, &options.prior) {
        (Kind::Beta, PriorChoice::Fitted | PriorChoice::Jeffreys) => "beta_prior(0.5, 0.5)".into(),
        (Kind::Beta, PriorChoice::Uniform) => "beta_prior(1, 1)".into(),
        (Kind::Beta, PriorChoice::Numbers(v)) if v.len() == 2 => {
            format!("beta_prior({}, {})", v[0], v[1])
        }
        (Kind::Gamma, PriorChoice::Numbers(v)) if v.len() == 2 => {
            format!("gamma_prior({}, {})", v[0], v[1])
        }
        (Kind::Gamma, PriorChoice::Numbers(_)) => String::new(),
        (Kind::Gamma, _) => "gamma_prior(0.5, 1)".into(),
        (Kind::Nig, PriorChoice::Numbers(v)) if v.len() == 4 => {
            format!("nig_prior({}, {}, {}, {})", v[0], v[1], v[2], v[3])
        }
        (Kind::Nig, PriorChoice::Numbers(_)) => String::new(),
        (Kind::Nig, _) => {
            // A weak prior on the data's own scale: centred on the overall mean, worth
            // one observation, with the overall variance as the expected within-level
            // variance. posterity's own fit, not AVG/VAR_POP: its sums do not depend on
            // the thread count, so neither does the prior.
            let b = one_row(
                ctx,
                &format!(
                    "SELECT posterior_data_weight(p), get_field(p, 'mean'), get_field(p, 'm2') / get_field(p, 'n') \
                     FROM (SELECT nig_posterior(CAST({t} AS DOUBLE)) AS p FROM {from})"
                ),
            )
            .await?;
            let get = |i: usize| {
                let c = b.column(i).as_primitive::<Float64Type>();
                if c.is_null(0) || !c.value(0).is_finite() {
                    0.0
                } else {
                    c.value(0)
                }
            };
            let var = if get(0) > 0.0 && get(2) > 0.0 {
                get(2)
            } else {
                1.0
            };
            format!("nig_prior({}, 1, 2, {})", get(1), var)
        }
        (Kind::Dirichlet, PriorChoice::Fitted | PriorChoice::Jeffreys) => {
            format!("dirichlet_prior([{class_list}], 0.5)")
        }
        (Kind::Dirichlet, PriorChoice::Uniform) => format!("dirichlet_prior([{class_list}], 1)"),
        (Kind::Dirichlet, PriorChoice::Numbers(v)) if v.len() == 1 => {
            format!("dirichlet_prior([{class_list}], {})", v[0])
        }
        _ => String::new(),
    };
    if base_prior.is_empty() {
        return usage(format!(
            "--prior '{}' does not fit the {} family; use fitted, jeffreys, uniform or its \
             numbers (beta: a,b; gamma: shape,rate; nig: mu0,kappa0,alpha0,beta0; dirichlet: c)",
            options.prior.describe(),
            family.short_name()
        ));
    }
    // A prior given as numbers is checked here, before anything runs.
    ctx.sql(&format!("SELECT {base_prior}"))
        .await?
        .collect()
        .await
        .map_err(|e| EncodeError::Usage(format!("--prior: {}", crate::render::engine_error(e))))?;

    // As-of encodings order rows by time and recency weights age them: NaN has no
    // place in either.
    if let Some(time) = &options.time_column {
        if train.iter().any(|(n, d)| n == time && d.is_floating()) {
            let t = quote(time);
            let b = one_row(
                ctx,
                &format!(
                    "SELECT COUNT(*) FROM {from} WHERE {t} IS NOT NULL AND NOT \
                     ({t} > CAST('-Infinity' AS DOUBLE) AND {t} < CAST('Infinity' AS DOUBLE))"
                ),
            )
            .await?;
            let bad = b.column(0).as_primitive::<Int64Type>().value(0);
            if bad > 0 {
                return usage(format!(
                    "--time-column '{time}' has {bad} row(s) with NaN or an infinite time; \
                     allowed: finite numbers (a row with a NULL time gets the prior)"
                ));
            }
        }
    }
    // Half-lives and horizons count time units.
    let timed = match (&options.half_life, &options.horizon) {
        (Some(_), _) => Some("--half-life"),
        (None, Some(Horizon::Units(_) | Horizon::Matched)) => Some("--horizon"),
        _ => None,
    };
    let time_units = options
        .time_column
        .as_ref()
        .and_then(|time| train.iter().find(|(n, _)| n == time))
        .and_then(|(_, d)| TimeUnits::of(d));
    let time_range = match (timed, &options.time_column) {
        (Some(flag), Some(time)) => {
            let Some(units) = time_units else {
                return usage(format!(
                    "{flag} needs a --time-column of numbers (days, hours, ...), dates or \
                     timestamps (counted in days); '{time}' is neither"
                ));
            };
            let t = units.number(&quote(time));
            let b = one_row(ctx, &format!("SELECT MIN({t}), MAX({t}) FROM {from}")).await?;
            let (oldest, newest) = (
                b.column(0).as_primitive::<Float64Type>(),
                b.column(1).as_primitive::<Float64Type>(),
            );
            if newest.is_null(0) {
                return usage(format!("--time-column '{time}' has no values"));
            }
            let (oldest, newest) = (oldest.value(0), newest.value(0));
            if !(oldest.is_finite() && newest.is_finite()) {
                return usage(format!(
                    "--time-column '{time}' has a non-finite value; allowed: finite numbers"
                ));
            }
            if let (Method::Time, Some(HalfLife::Units(h))) = (method, options.half_life) {
                check_as_of_half_life(h, newest - oldest, units)?;
            }
            Some((oldest, newest))
        }
        _ => None,
    };
    let (oldest_time, newest_time) = time_range.unzip();
    let score_scale = match (method, options.score_evidence) {
        (Method::Kfold, ScoreEvidence::Matched) => {
            (options.folds - 1) as f64 / options.folds as f64
        }
        _ => 1.0,
    };
    let mut plan = EncodePlan {
        newest_time,
        oldest_time,
        time_units: time_units.unwrap_or_default(),
        score_scale,
        options: options.clone(),
        family,
        method,
        classes,
        base_prior,
        fitted: options.prior == PriorChoice::Fitted,
        keys,
        train_columns: train.into_iter().map(|(n, _)| n).collect(),
        score_columns,
    };
    choose_reading(ctx, &mut plan).await?;
    choose_readers(ctx, &mut plan).await?;
    check_output_names(&plan)?;
    Ok(plan)
}

/// The spread reader joins the default mean where a continuous key's levels differ
/// widely in spread: its prior's inverse-gamma shape alpha0 is at most 2, so the
/// levels' variances have no finite variance. A level's `sd` then says how volatile
/// it is, not only how much data it has. Measured on eleven tasks (MODELING.md:
/// "Which keys get the sd reader"): with k-fold encodings the learner gained from
/// `sd` on every key below that line and lost on every key above it.
const VOLATILE_SHAPE: f64 = 2.0;

async fn choose_readers(ctx: &SessionContext, plan: &mut EncodePlan) -> Result<()> {
    if plan.options.readers.is_some() || plan.family != Kind::Nig {
        return Ok(());
    }
    for i in 0..plan.keys.len() {
        if plan.keys[i].treatment != Treatment::Posterior {
            continue;
        }
        let Some(alpha0) = prior_shape(ctx, plan, &plan.keys[i]).await? else {
            continue;
        };
        let shape = crate::render::short(alpha0);
        let key = &mut plan.keys[i];
        key.readers_why = if alpha0 <= VOLATILE_SHAPE {
            key.readers.push(Reader::Sd);
            format!(
                "mean and sd: the levels differ widely in spread (prior shape alpha0 = {shape} \
                 <= {VOLATILE_SHAPE}), so a level's sd says how volatile it is"
            )
        } else {
            format!(
                "mean: the levels are alike in spread (prior shape alpha0 = {shape} > \
                 {VOLATILE_SHAPE})"
            )
        };
    }
    Ok(())
}

/// The Normal-Inverse-Gamma shape alpha0 of `key`'s prior: the given one, or the
/// one `fit_prior` will fit from the same per-level fits encode makes. `None`
/// when it cannot be fitted (the encode statements then report why).
async fn prior_shape(
    ctx: &SessionContext,
    plan: &EncodePlan,
    key: &KeyPlan,
) -> Result<Option<f64>> {
    let prior = key.prior.as_ref().unwrap_or(&plan.base_prior);
    let sql = if plan.fitted {
        let level = key.sql(plan.options.normalize_keys);
        format!(
            "SELECT fit_prior(p) FROM (SELECT {level} AS level, {} AS p FROM {} t \
             WHERE {level} IS NOT NULL GROUP BY {level})",
            plan.fit(key),
            datafusion::common::TableReference::from(plan.options.train.as_str())
                .to_quoted_string()
        )
    } else {
        format!("SELECT {prior}")
    };
    let Ok(batch) = one_row(ctx, &sql).await else {
        return Ok(None);
    };
    let column = crate::layout::PosteriorColumn::new("encode", batch.column(0))
        .map_err(|e| EncodeError::Query(e.to_string()))?;
    Ok(match column.get(0) {
        Ok(Some(crate::layout::AnyPosterior::Nig(p))) => Some(p.prior.alpha0),
        _ => None,
    })
}

/// Each posterior key's horizon, then its half-life: the ones given, or (half-life)
/// fitted per key by a trial on the training rows that reads them as the horizon
/// says (`recency.rs`).
async fn choose_reading(ctx: &SessionContext, plan: &mut EncodePlan) -> Result<()> {
    let matched = match plan.options.horizon {
        Some(Horizon::Matched) => Some(scoring_horizon(ctx, plan).await?),
        _ => None,
    };
    let cut = match plan.options.half_life == Some(HalfLife::Fitted) {
        true => {
            // The trial folds rows by their number, as encode's training rows are.
            crate::numbered::register(ctx, &plan.options.train, super::sql::TRAIN).await?;
            super::recency::cut(ctx, plan).await?
        }
        false => None,
    };
    for i in 0..plan.keys.len() {
        if let Some(HalfLife::Units(h)) = plan.options.half_life {
            plan.keys[i].half_life = Some(h);
        }
        // Keys given as levels or codes read no history.
        if plan.keys[i].treatment != Treatment::Posterior {
            continue;
        }
        let (horizon, why) = match (plan.options.horizon, matched) {
            (Some(Horizon::Units(h)), _) => (
                Some(h),
                format!("horizon {} (--horizon)", plan.time_units.show(h)),
            ),
            (_, Some(Some(h))) => (
                Some(h),
                format!(
                    "horizon {}: the scored rows' median time past the newest training row \
                     (--horizon matched)",
                    plan.time_units.show(h)
                ),
            ),
            (_, Some(None)) => (
                None,
                "no horizon: no scored row is later than the newest training row".to_string(),
            ),
            _ => (None, String::new()),
        };
        plan.keys[i].horizon = horizon;
        plan.keys[i].horizon_why = why;
        if plan.options.half_life == Some(HalfLife::Fitted) {
            let (h, why) = super::recency::fit_half_life(ctx, plan, &plan.keys[i], cut).await?;
            plan.keys[i].half_life = h;
            plan.keys[i].recency = why;
        }
    }
    Ok(())
}

/// `--horizon matched`: the scored rows' median time past the newest training
/// row (rows within the training period count 0); `None` when that is 0. Every
/// posterior key gets it: a trial per key like the half-life's was measured to
/// keep it where the learner lost by it and drop it where the learner gained
/// most (MODELING.md).
async fn scoring_horizon(ctx: &SessionContext, plan: &EncodePlan) -> Result<Option<f64>> {
    let (Some(score), Some(time), Some(newest)) = (
        &plan.options.score,
        &plan.options.time_column,
        plan.newest_time,
    ) else {
        return usage(
            "--horizon matched needs --score: the scored rows' times set how old the data \
             they read is",
        );
    };
    let columns = columns_of(ctx, score).await?;
    let units = columns
        .iter()
        .find(|(n, _)| n == time)
        .and_then(|(_, d)| TimeUnits::of(d));
    if units != Some(plan.time_units) {
        let kind = match plan.time_units {
            TimeUnits::Numbers => "numbers",
            TimeUnits::Days => "dates or timestamps",
        };
        return usage(format!(
            "--horizon matched needs the --time-column '{time}' in the scoring table, of \
             {kind} as in the training table (the scored rows' times); give a number of time \
             units instead"
        ));
    }
    let b = one_row(
        ctx,
        &format!(
            "SELECT CAST(median(GREATEST({} - {newest}, 0.0)) AS DOUBLE) FROM {}",
            plan.time_units.number(&quote(time)),
            datafusion::common::TableReference::from(score.as_str()).to_quoted_string()
        ),
    )
    .await?;
    let median = b.column(0).as_primitive::<Float64Type>();
    Ok((!median.is_null(0))
        .then(|| median.value(0))
        .filter(|h| h.is_finite() && *h > 0.0))
}

/// The most half-lives as-of encodings span: their running sums weigh the newest
/// rows 2^(period / half-life) times the oldest, which must stay a finite number.
const MAX_AS_OF_HALF_LIVES: f64 = 1000.0;

/// An `above:T` reader whose threshold lies outside the family's parameter range
/// would be the same number for every level: a column that carries nothing.
fn check_thresholds(readers: &[Reader], family: Kind) -> Result<()> {
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

fn check_as_of_half_life(h: f64, period: f64, units: TimeUnits) -> Result<()> {
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
