//! The choices encode makes from the data when the user leaves them open: each
//! key's treatment, its default readers, its horizon and half-life.

use datafusion::arrow::array::{Array, AsArray};
use datafusion::arrow::datatypes::{Float64Type, Int64Type};
use datafusion::prelude::SessionContext;

use super::checks::columns_of;
use super::options::{EncodeOptions, HalfLife, Horizon, Reader, Treatment};
use super::plan::{EncodePlan, KeyPlan, TimeUnits};
use super::resolve::{one_row, MAX_INDICATORS};
use super::{quote, usage, EncodeError, Result};
use crate::layout::Kind;

/// Each key's treatment: the user's choice, or from the data (see
/// `EncodeOptions::treatments`), with the reason in the user's words.
pub(super) async fn choose_treatments(
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

/// The spread reader joins the default mean where a continuous key's levels differ
/// widely in spread: its prior's inverse-gamma shape alpha0 is at most 2, so the
/// levels' variances have no finite variance. A level's `sd` then says how volatile
/// it is, not only how much data it has. Measured on eleven tasks (MODELING.md:
/// "Which keys get the sd reader"): with k-fold encodings the learner gained from
/// `sd` on every key below that line and lost on every key above it.
const VOLATILE_SHAPE: f64 = 2.0;

pub(super) async fn choose_readers(ctx: &SessionContext, plan: &mut EncodePlan) -> Result<()> {
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
pub(super) async fn choose_reading(ctx: &SessionContext, plan: &mut EncodePlan) -> Result<()> {
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
