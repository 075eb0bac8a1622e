//! Options meet the data: every check before anything runs or is written, and the
//! choices that depend on the data (family, classes, base prior).

use datafusion::arrow::array::{Array, AsArray};
use datafusion::arrow::compute::cast;
use datafusion::arrow::datatypes::{DataType, Float64Type, Int64Type};
use datafusion::arrow::util::display::array_value_to_string;
use datafusion::prelude::SessionContext;

use super::checks::{
    check_as_of_half_life, check_input_names, check_missing_marker, check_output_names,
    check_target_values, check_thresholds, columns_of, refuse_leaky_keys, require_columns,
    require_key_types, rows_failing, scoring_columns,
};
use super::choose::{choose_readers, choose_reading, choose_treatments};
use super::options::{
    EncodeOptions, HalfLife, Horizon, Method, PriorChoice, ScoreEvidence, TimeTies, Treatment,
};
use super::plan::{is_text, EncodePlan, KeyPlan, TimeUnits};
use super::{quote, sanitize, text, usage, EncodeError, Result};
use crate::layout::Kind;

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
pub(super) const MAX_INDICATORS: usize = 1000;

/// The most folds `--method kfold` takes. With more, a row's fold holds hardly any
/// other row of its level and the encodings approach leave-one-out: measured with
/// `benches/modeling/leakage.py` (10 rows a level), the mean alone gained 0.0033 in
/// sample at 5 folds, 0.0050 at 10, 0.0088 at 20 (one column of noise: 0.0072),
/// 0.0147 at 50 and 0.0230 at one row a fold. 10 is the most that stays below the
/// noise (the leakage test's margin would let 20 pass, but that gain is a leak).
const MAX_FOLDS: u32 = 10;

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

/// What the checks of the tables' columns found.
struct Columns {
    method: Method,
    keys: Vec<KeyPlan>,
    train: Vec<(String, DataType)>,
    score: Vec<String>,
}

/// Check the options against the tables' columns and types, reading no rows: a
/// front end that copies the rows first (text files, `columnar_copy`) runs this
/// before, so that a misspelt column is refused at once. [`resolve`] runs it too.
pub async fn check_columns(ctx: &SessionContext, options: &EncodeOptions) -> Result<()> {
    columns_checked(ctx, options).await.map(|_| ())
}

async fn columns_checked(ctx: &SessionContext, options: &EncodeOptions) -> Result<Columns> {
    let method = options.method()?;
    check_numbers(options)?;
    let keys = keys_of(options)?;
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
    let score = scoring_columns(ctx, options.score.as_deref(), &keys).await?;
    check_input_names(&train, &score)?;
    Ok(Columns {
        method,
        keys,
        train,
        score,
    })
}

/// Check the options against the tables and settle the plan.
pub async fn resolve(ctx: &SessionContext, options: &EncodeOptions) -> Result<EncodePlan> {
    let Columns {
        method,
        mut keys,
        train,
        score: score_columns,
    } = columns_checked(ctx, options).await?;
    choose_treatments(ctx, options, &mut keys).await?;
    link_hierarchy(options, method, &mut keys)?;

    let family = family_of(ctx, options, &train).await?;
    let classes = classes_of(ctx, options, family).await?;
    let base_prior = base_prior_of(ctx, options, family, &classes).await?;
    check_time_values(ctx, options, method, &train).await?;
    let (time_units, time_range) = times_of(ctx, options, method, &train).await?;
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

/// The numbers among the options that need no data: folds, indicators, readers.
fn check_numbers(options: &EncodeOptions) -> Result<()> {
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
    Ok(())
}

/// The target's family: the one named, or from the target's type (and whether its
/// numbers are all 0 or 1); the target's values are checked against it.
async fn family_of(
    ctx: &SessionContext,
    options: &EncodeOptions,
    train: &[(String, DataType)],
) -> Result<Kind> {
    let target = &options.target;
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
        (&options.train, train),
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
    Ok(family)
}

/// A class target's classes, sorted; empty for the other families.
async fn classes_of(
    ctx: &SessionContext,
    options: &EncodeOptions,
    family: Kind,
) -> Result<Vec<String>> {
    let (target, t, from) = (
        &options.target,
        quote(&options.target),
        quote(&options.train),
    );
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
    Ok(classes)
}

/// The constant prior of every fit, as SQL: the numbers given, or a weak prior on
/// the data's scale (a fitted prior re-priors the fits afterwards). Checked here,
/// before anything runs.
async fn base_prior_of(
    ctx: &SessionContext,
    options: &EncodeOptions,
    family: Kind,
    classes: &[String],
) -> Result<String> {
    let (t, from) = (quote(&options.target), quote(&options.train));
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
    Ok(base_prior)
}

/// As-of encodings order rows by time and recency weights age them: a NaN or
/// infinite time has no place in either, and text is ordered as written, which is
/// the order of time only for ISO dates and times (text orders "10/1/2024" before
/// "9/1/2024"); other types have no order of time at all. A scoring table's text
/// times are read as times too where the scored rows' times count (as-of encodings).
async fn check_time_values(
    ctx: &SessionContext,
    options: &EncodeOptions,
    method: Method,
    train: &[(String, DataType)],
) -> Result<()> {
    let from = quote(&options.train);
    if let Some(time) = &options.time_column {
        match train.iter().find(|(n, _)| n == time) {
            Some((_, d)) if is_text(d) => {
                check_text_times(ctx, "training table", &from, time).await?
            }
            Some((_, d)) if TimeUnits::of(d).is_none() => {
                return usage(format!(
                    "--time-column '{time}' is {}; allowed: numbers (days, hours, ...), dates, \
                     timestamps or text of ISO dates and times (2024-01-31, 2024-01-31T08:30:00)",
                    time_type_words(d)
                ));
            }
            _ => {}
        }
        if let (Method::Time, Some(score)) = (method, &options.score) {
            let columns = columns_of(ctx, score).await?;
            if columns.iter().any(|(n, d)| n == time && is_text(d)) {
                check_text_times(ctx, "scoring table", &quote(score), time).await?;
            }
        }
        if train.iter().any(|(n, d)| n == time && d.is_floating()) {
            let t = quote(time);
            let finite =
                format!("{t} > CAST('-Infinity' AS DOUBLE) AND {t} < CAST('Infinity' AS DOUBLE)");
            let (bad, _) = rows_failing(ctx, &options.train, &t, &finite).await?;
            if bad > 0 {
                return usage(format!(
                    "--time-column '{time}' has {bad} row(s) with NaN or an infinite time; \
                     allowed: finite numbers (a row with a NULL time gets the prior)"
                ));
            }
        }
    }
    Ok(())
}

/// A text time column must hold ISO dates and times whose order as text is their
/// order in time (one offset from UTC, or none).
async fn check_text_times(ctx: &SessionContext, what: &str, from: &str, time: &str) -> Result<()> {
    let t = quote(time);
    let b = one_row(
        ctx,
        &format!(
            "SELECT COUNT(*) FILTER (WHERE at IS NULL), MIN(v) FILTER (WHERE at IS NULL), \
               COUNT(*) FILTER (WHERE at <= before), MIN(v) FILTER (WHERE at <= before) \
             FROM (SELECT v, at, LAG(at) OVER (ORDER BY v) AS before FROM \
               (SELECT DISTINCT CAST({t} AS VARCHAR) AS v, TRY_CAST({t} AS TIMESTAMP) AS at \
                FROM {from} WHERE {t} IS NOT NULL))"
        ),
    )
    .await?;
    let count = |c: usize| b.column(c).as_primitive::<Int64Type>().value(0);
    let example = |c: usize| array_value_to_string(b.column(c), 0).unwrap_or_default();
    if count(0) > 0 {
        return usage(format!(
            "--time-column '{time}' of the {what} is text, and {} \
             (for example '{}'); allowed: numbers (days, hours, ...), dates, timestamps or text \
             of ISO dates and times (2024-01-31, 2024-01-31T08:30:00): convert the column first",
            match count(0) {
                1 => "one value of it is not an ISO date or time".to_string(),
                n => format!("{n} distinct values of it are not ISO dates or times"),
            },
            example(1)
        ));
    }
    if count(2) > 0 {
        return usage(format!(
            "--time-column '{time}' of the {what} is text whose order as written is not its \
             order in time: '{}' is no later than a value before it as text (another offset \
             from UTC, or another spelling of one time); convert the column to timestamps \
             first",
            example(3)
        ));
    }
    Ok(())
}

/// A time column's type as its user knows it.
fn time_type_words(d: &DataType) -> String {
    match d {
        DataType::Boolean => "true/false".to_string(),
        DataType::List(_) | DataType::LargeList(_) | DataType::FixedSizeList(..) => {
            "a list".to_string()
        }
        DataType::Binary | DataType::LargeBinary | DataType::BinaryView => "bytes".to_string(),
        other => crate::layout::describe_type(other),
    }
}

/// The time column's units and, when half-lives or horizons count them, the
/// training rows' oldest and newest times.
async fn times_of(
    ctx: &SessionContext,
    options: &EncodeOptions,
    method: Method,
    train: &[(String, DataType)],
) -> Result<(Option<TimeUnits>, Option<(f64, f64)>)> {
    let from = quote(&options.train);
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
    if let (Some(flag), Some(time), true) = (timed, &options.time_column, options.durations_in_days)
    {
        if time_units != Some(TimeUnits::Days) {
            return usage(format!(
                "{flag} was given as a duration, which counts days; --time-column '{time}' is \
                 not dates or timestamps, so give {flag} as a number of its own units"
            ));
        }
    }
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
    Ok((time_units, time_range))
}
