//! Refresh without refit: a previous run's posteriors pooled with new rows under
//! the stored priors. Because a conjugate posterior is its prior plus additive
//! statistics, the result equals a fit on old and new rows together under the same
//! priors (exactly for integer evidence).

use std::collections::BTreeMap;
use std::sync::Arc;

use datafusion::arrow::array::{ArrayRef, RecordBatch, StringArray};
use datafusion::arrow::datatypes::{DataType, Field, Schema};
use datafusion::datasource::MemTable;
use datafusion::prelude::SessionContext;

use super::checks::{
    check_input_names, check_output_names, check_target_values, columns_of, require_columns,
    scoring_columns,
};
use super::options::{EncodeOptions, Method, PriorChoice, Reader, TimeTies};
use super::plan::{EncodePlan, KeyPlan};
use super::run::{execute, finish, EncodeOutput};
use super::sql::{SCORE, TRAIN};
use super::{text, usage, EncodeError, Result};
use crate::bundle::{interaction_key, interaction_parts, Bundle, ColumnEncoding};
use crate::layout::{build, AnyPosterior, Combine, Kind};

/// What a refresh needs.
#[derive(Debug, Clone)]
pub struct UpdateOptions {
    /// The previous run's bundle (its priors, levels and readers).
    pub previous: Bundle,
    /// A table registered on the session: the new rows.
    pub train: String,
    /// Exposure column of a Gamma target; without it, the one the bundle records.
    pub exposure: Option<String>,
    /// Multiply the stored evidence by this factor in (0, 1] first: 0.5 after one
    /// half-life of age.
    pub decay: Option<f64>,
    /// A table registered on the session to score with the refreshed encodings.
    pub score: Option<String>,
}

fn family_of(name: &str) -> Result<Kind> {
    Kind::from_short_name(name).ok_or_else(|| {
        EncodeError::Usage(format!(
            "--update: the bundle's family '{name}' is not known"
        ))
    })
}

/// A class target's new rows may only hold the classes the previous run's priors
/// have: a refresh pools under those priors, which cannot take a new class.
async fn check_classes(
    ctx: &SessionContext,
    table: &str,
    target: &str,
    classes: &[String],
) -> Result<()> {
    let listed = classes
        .iter()
        .map(|c| text(c))
        .collect::<Vec<_>>()
        .join(", ");
    let class = format!("CAST({} AS VARCHAR)", super::quote(target));
    let (new_rows, example) =
        super::checks::rows_failing(ctx, table, &class, &format!("{class} IN ({listed})")).await?;
    if new_rows > 0 {
        return usage(format!(
            "--update: {new_rows} new row(s) have a class of '{target}' the previous run did \
             not have (for example '{example}'; its classes: {}); a refresh keeps the stored \
             priors, so encode old and new rows again to add a class",
            classes.join(", ")
        ));
    }
    Ok(())
}

/// Pool the previous run's posteriors with the new rows and return the refreshed
/// encodings, bundle and (with a scoring table) scored rows.
pub async fn update(ctx: &SessionContext, options: &UpdateOptions) -> Result<EncodeOutput> {
    let previous = &options.previous;
    let family = family_of(&previous.family)?;
    if let Some(d) = options.decay {
        if !(d > 0.0 && d <= 1.0) {
            return usage(format!(
                "--decay {d} is out of range; allowed: a factor in (0, 1]"
            ));
        }
    }
    if options.exposure.is_some() && family != Kind::Gamma {
        return usage("--exposure is for count targets (the gamma family)");
    }
    // The new rows' exposures come from the column the previous run read, unless
    // another is given: without it each new row would count as one unit of exposure.
    let exposure = options.exposure.as_ref().or(previous.exposure.as_ref());
    let readers = previous
        .readers
        .iter()
        .map(|r| Reader::parse(r))
        .collect::<Result<Vec<_>>>()?;
    let mut encode_options = EncodeOptions::new(&options.train, &previous.target, &[]);
    let train = columns_of(ctx, &options.train).await?;
    let mut keys = Vec::new();
    let mut stored = Vec::new();
    // In the first run's order, so that the refreshed outputs keep its columns' order.
    for (name, column) in previous.keys_in_order() {
        if column.parent.is_some() && column.parent_levels.is_empty() && !column.levels.is_empty() {
            return usage(format!(
                "--update: key '{name}' was encoded under a parent (--hierarchy) by an earlier \
                 version, whose bundle does not record each level's parent; encode the rows again"
            ));
        }
        if column.key_columns.is_empty() {
            return usage(format!(
                "--update: the bundle does not say which columns make key '{name}' (a version 1 \
                 bundle); run encode once more to write a version 2 bundle"
            ));
        }
        let mut key = KeyPlan::posterior(name.clone(), column.key_columns.clone(), &encode_options);
        key.prior = Some(column.prior.prior_sql());
        key.readers = previous
            .readers_of(column)
            .iter()
            .map(|r| Reader::parse(r))
            .collect::<Result<_>>()?;
        // The previous run's treatment carries over, and with it its indicators.
        key.treatment = column.treatment;
        key.why = "as in the previous run".into();
        let in_hierarchy = column.parent.is_some()
            || previous
                .columns
                .values()
                .any(|c| c.parent.as_ref().is_some_and(|(parent, _)| parent == name));
        let column = levels_as_this_build_reads_them(name, column, in_hierarchy, &train)?;
        // The refreshed outputs keep the previous run's indicator columns, each for
        // the same level, so that a model trained on them reads them as before.
        key.indicators = column.indicators.len();
        key.stored_indicators = Some(column.indicators.clone());
        keys.push(key);
        stored.push(column);
    }
    // Under a hierarchy each child keeps its parent key and the layer's strength.
    for (i, column) in stored.iter().enumerate() {
        if let Some((parent, strength)) = &column.parent {
            keys[i].parent = keys.iter().position(|k| &k.name == parent);
            keys[i].strength = Some(*strength);
        }
    }
    let first_prior = &stored
        .first()
        .ok_or_else(|| EncodeError::Usage("--update: the bundle encodes no columns".into()))?
        .prior;
    let classes = match first_prior {
        AnyPosterior::Dirichlet(d) => d.prior.classes.clone(),
        _ => Vec::new(),
    };
    require_columns(
        "table of new rows",
        &train,
        keys.iter()
            .flat_map(KeyPlan::roles)
            .chain(std::iter::once((
                &previous.target,
                "the bundle's target".to_string(),
            )))
            .chain(
                options
                    .exposure
                    .iter()
                    .map(|c| (c, "--exposure".to_string())),
            ),
    )?;
    if let (None, Some(stored)) = (&options.exposure, &previous.exposure) {
        if !train.iter().any(|(name, _)| name == stored) {
            return usage(format!(
                "--update: the previous run read exposures from column '{stored}', which the \
                 table of new rows lacks; give --exposure with the column that holds them"
            ));
        }
    }
    super::checks::require_key_types("table of new rows", &train, &keys)?;
    check_target_values(
        ctx,
        (&options.train, &train),
        &previous.target,
        exposure.map(String::as_str),
        family,
    )
    .await?;
    if let Some(AnyPosterior::Dirichlet(stored)) =
        previous.columns.values().next().map(|c| &c.prior)
    {
        check_classes(ctx, &options.train, &previous.target, &stored.prior.classes).await?;
    }
    let score_columns = scoring_columns(ctx, options.score.as_deref(), &keys).await?;
    check_input_names(&train, &score_columns)?;
    encode_options.readers = Some(readers);
    encode_options.normalize_keys = stored.iter().any(|c| c.normalized);
    encode_options.exposure = exposure.cloned();
    encode_options.score = options.score.clone();
    encode_options.prior = PriorChoice::Numbers(Vec::new());
    encode_options.time_ties = TimeTies::Strict;
    let plan = EncodePlan {
        newest_time: None,
        oldest_time: None,
        time_units: Default::default(),
        // The previous run's scoring rule carries over (every column has the same one).
        score_scale: stored.first().map_or(1.0, |c| c.score_scale),
        options: encode_options,
        family,
        method: Method::Kfold,
        classes,
        base_prior: first_prior.prior_sql(),
        fitted: false,
        keys,
        train_columns: train.into_iter().map(|(n, _)| n).collect(),
        score_columns,
    };
    check_output_names(&plan)?;

    for (i, column) in stored.iter().enumerate() {
        let mut levels = Vec::with_capacity(column.levels.len());
        let mut posteriors = Vec::with_capacity(column.levels.len());
        for (level, p) in &column.levels {
            levels.push(level.as_str());
            posteriors.push(Some(decayed(p, options.decay)?));
        }
        register_columns(
            ctx,
            &format!("__stored{i}"),
            vec![
                ("level", Arc::new(StringArray::from(levels))),
                (
                    "p",
                    build("encode --update", column.prior.kind(), &posteriors)?,
                ),
            ],
        )?;
    }
    for (i, column) in stored.iter().enumerate() {
        if column.parent.is_some() {
            register_parents(ctx, i, column, options.decay)?;
        }
    }
    crate::numbered::register(ctx, &options.train, TRAIN).await?;
    if let Some(score) = &options.score {
        crate::numbered::register(ctx, score, SCORE).await?;
    }
    let outputs = execute(
        ctx,
        plan.update_statements(),
        plan.options.work_dir.as_deref(),
        &mut |_| {},
    )
    .await?;
    finish(ctx, &plan, outputs).await
}

/// A stored column whose levels read as this build reads the new rows' keys.
///
/// Bundles written before [`crate::key_text`] read a float key value with its
/// fraction ("106.0"); this build reads a whole float as the integer it is ("106")
/// and NaN as no key. Refreshed as stored, every such level would meet the new rows
/// as a second level of the same key, so the stored levels are re-read first
/// (levels that now share a text, such as 0.0 and -0.0, are merged; a level that
/// was NaN is dropped, as NaN keys now read the prior).
fn levels_as_this_build_reads_them(
    name: &str,
    column: &ColumnEncoding,
    in_hierarchy: bool,
    train: &[(String, DataType)],
) -> Result<ColumnEncoding> {
    let float_parts: Vec<bool> = column
        .key_columns
        .iter()
        .map(|c| {
            train
                .iter()
                .any(|(n, t)| n == c && crate::key_text::is_float(t))
        })
        .collect();
    let mut column = column.clone();
    if column.whole_floats || !float_parts.contains(&true) {
        return Ok(column);
    }
    if in_hierarchy {
        return usage(format!(
            "--update: key '{name}' is a float key in a hierarchy (--hierarchy), encoded by an \
             earlier version that wrote whole floats with their fraction ('106.0'); this version \
             writes them as integers ('106'); encode the rows again"
        ));
    }
    let retext = |level: &str| -> Result<Option<String>> {
        let parts: Vec<String> = match float_parts.len() {
            1 => vec![level.to_string()],
            _ => interaction_parts(level).ok_or_else(|| {
                EncodeError::Usage(format!(
                    "--update: the bundle's level '{level}' of key '{name}' is not an \
                     interaction's level"
                ))
            })?,
        };
        let mut out = Vec::with_capacity(parts.len());
        for (part, float) in parts.iter().zip(&float_parts) {
            match (*float, part.parse::<f64>()) {
                (true, Ok(v)) if v.is_nan() => return Ok(None),
                (true, Ok(v)) => out.push(crate::key_text::float_text(v, part)),
                _ => out.push(part.clone()),
            }
        }
        Ok(Some(match float_parts.len() {
            1 => out.remove(0),
            _ => interaction_key(&out.iter().map(String::as_str).collect::<Vec<_>>()),
        }))
    };
    let mut levels: BTreeMap<String, AnyPosterior> = BTreeMap::new();
    for (level, p) in &column.levels {
        let Some(level) = retext(level)? else {
            continue;
        };
        let p = match levels.remove(&level) {
            Some(q) => q
                .combine(p, Combine::Merge)
                .map_err(|e| EncodeError::Usage(format!("--update: key '{name}': {e}")))?,
            None => p.clone(),
        };
        levels.insert(level, p);
    }
    let mut indicators = Vec::new();
    for level in &column.indicators {
        if let Some(level) = retext(level)? {
            if !indicators.contains(&level) {
                indicators.push(level);
            }
        }
    }
    column.levels = levels;
    column.indicators = indicators;
    column.whole_floats = true;
    Ok(column)
}

/// Register `__storedparent{i}`: child column `i`'s levels, their parent levels and
/// their data outside them (NULL when none), decayed like the stored posteriors.
fn register_parents(
    ctx: &SessionContext,
    i: usize,
    column: &crate::bundle::ColumnEncoding,
    decay: Option<f64>,
) -> Result<()> {
    let (mut levels, mut parents, mut outside) = (Vec::new(), Vec::new(), Vec::new());
    for (level, (parent, out)) in &column.parent_levels {
        levels.push(level.as_str());
        parents.push(parent.as_str());
        outside.push(out.as_ref().map(|p| decayed(p, decay)).transpose()?);
    }
    register_columns(
        ctx,
        &format!("__storedparent{i}"),
        vec![
            ("level", Arc::new(StringArray::from(levels))),
            ("parent", Arc::new(StringArray::from(parents))),
            (
                "p",
                build("encode --update", column.prior.kind(), &outside)?,
            ),
        ],
    )
}

/// A stored posterior with its evidence multiplied by `--decay`, if given.
fn decayed(p: &AnyPosterior, decay: Option<f64>) -> Result<AnyPosterior> {
    match decay {
        Some(d) => p
            .scale(d)
            .map_err(|e| EncodeError::Usage(format!("--decay: {e}"))),
        None => Ok(p.clone()),
    }
}

/// Register `columns` (name and values) as the one-batch table `name`, replacing
/// any table of that name.
fn register_columns(
    ctx: &SessionContext,
    name: &str,
    columns: Vec<(&str, ArrayRef)>,
) -> Result<()> {
    let schema = Arc::new(Schema::new(
        columns
            .iter()
            .map(|(n, a)| Field::new(*n, a.data_type().clone(), true))
            .collect::<Vec<_>>(),
    ));
    let batch = RecordBatch::try_new(
        schema.clone(),
        columns.into_iter().map(|(_, a)| a).collect(),
    )?;
    ctx.deregister_table(name)?;
    ctx.register_table(
        name,
        Arc::new(MemTable::try_new(schema, vec![vec![batch]])?),
    )?;
    Ok(())
}
