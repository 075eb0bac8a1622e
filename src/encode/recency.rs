//! A half-life fitted from the training rows (`--half-life fitted`).
//!
//! Recency weights help when a level's rate drifts and hurt when it does not (they
//! throw data away), and how fast it drifts differs per key. So each key is tried
//! on its own training rows the way its encodings are used: the latest fifth of the
//! rows (by time) is scored with the posterior mean of fits of the earlier rows,
//! each row weighted 2^(-age/h) with its age counted from where the late rows begin,
//! for half-lives h from 1/64 to 4 times the training period, and without weights.
//! A half-life is kept only when its loss beats no weighting by more than one
//! standard error of the paired difference over the scored rows (the more
//! conservative choice wins near-ties); otherwise the key gets none.
//!
//! Losses, per scored row: log-loss for 0/1 outcomes, squared error for values and
//! for counts, minus the log-probability of the class for classes; the prediction
//! is the level's posterior mean relative to its prior's, put on the scored rows'
//! overall rate (see `loss`). Unseen levels read the prior.

use datafusion::arrow::array::{Array, AsArray};
use datafusion::arrow::datatypes::{Float64Type, Int64Type};
use datafusion::prelude::SessionContext;

use super::resolve::{EncodePlan, KeyPlan};
use super::sql::TRAIN;
use super::{quote, text, EncodeError, Result};
use crate::layout::Kind;
use crate::render::short;

/// Candidate half-lives as fractions of the training period (powers of two: the
/// loss changes slowly with h, so a coarse grid loses little).
const FRACTIONS: [f64; 9] = [
    1.0 / 64.0,
    1.0 / 32.0,
    1.0 / 16.0,
    1.0 / 8.0,
    1.0 / 4.0,
    1.0 / 2.0,
    1.0,
    2.0,
    4.0,
];

/// The share of training rows scored (the rest is fitted).
const SCORED_SHARE: f64 = 0.2;

/// Bins of the training period used to place the cut (exact enough, one pass,
/// and the same on every run).
const BINS: u32 = 100;

/// The training period and where its latest fifth of rows begins.
#[derive(Debug, Clone, Copy)]
pub(super) struct Cut {
    /// Newest minus oldest time.
    pub span: f64,
    /// Rows at or after this time are scored.
    pub at: f64,
}

/// Where the latest `SCORED_SHARE` of the training rows with a time and a target
/// begins; `None` when the times do not spread (one time, or all rows in the last
/// bin).
pub(super) async fn cut(ctx: &SessionContext, plan: &EncodePlan) -> Result<Option<Cut>> {
    let (Some(time), Some(newest)) = (&plan.options.time_column, plan.newest_time) else {
        return Ok(None);
    };
    let from =
        datafusion::common::TableReference::from(plan.options.train.as_str()).to_quoted_string();
    let (t, y) = (
        format!("CAST({} AS DOUBLE)", quote(time)),
        quote(&plan.options.target),
    );
    let batches = ctx
        .sql(&format!(
            "SELECT MIN({t}) FROM {from} WHERE {y} IS NOT NULL AND {t} IS NOT NULL"
        ))
        .await?
        .collect()
        .await?;
    let oldest = batches
        .iter()
        .find(|b| b.num_rows() > 0)
        .map(|b| b.column(0).as_primitive::<Float64Type>())
        .filter(|c| !c.is_null(0))
        .map(|c| c.value(0));
    let Some(oldest) = oldest else {
        return Ok(None);
    };
    let span = newest - oldest;
    if !(span.is_finite() && span > 0.0) {
        return Ok(None);
    }
    let bins = ctx
        .sql(&format!(
            "SELECT LEAST(CAST(FLOOR(({t} - {oldest}) / {span} * {BINS}) AS BIGINT), {}) AS bin, \
             COUNT(*) AS n FROM {from} WHERE {y} IS NOT NULL AND {t} IS NOT NULL \
             GROUP BY 1 ORDER BY 1",
            BINS - 1
        ))
        .await?
        .collect()
        .await?;
    let mut counts = vec![0i64; BINS as usize];
    for b in &bins {
        let (bin, n) = (
            b.column(0).as_primitive::<Int64Type>(),
            b.column(1).as_primitive::<Int64Type>(),
        );
        for r in 0..b.num_rows() {
            counts[bin.value(r).clamp(0, BINS as i64 - 1) as usize] += n.value(r);
        }
    }
    let total: i64 = counts.iter().sum();
    let mut before = 0;
    for (bin, n) in counts.iter().enumerate() {
        before += n;
        if before as f64 >= (1.0 - SCORED_SHARE) * total as f64 {
            // Rows of the bins after this one are scored; none after the last.
            if bin + 1 >= BINS as usize || before == total {
                return Ok(None);
            }
            let at = oldest + span * (bin + 1) as f64 / BINS as f64;
            return Ok(Some(Cut { span, at }));
        }
    }
    Ok(None)
}

/// The half-life chosen for `key` (or none) and why, in the user's words.
pub(super) async fn fit_half_life(
    ctx: &SessionContext,
    plan: &EncodePlan,
    key: &KeyPlan,
    cut: Option<Cut>,
) -> Result<(Option<f64>, String)> {
    let Some(cut) = cut else {
        return Ok((
            None,
            "no half-life: the training rows' times do not spread enough to score a later \
             fifth of them"
                .into(),
        ));
    };
    let half_lives: Vec<Option<f64>> = std::iter::once(None)
        .chain(FRACTIONS.iter().map(|f| Some(f * cut.span)))
        .collect();
    let trial = Trial::new(plan, key, cut.at, &half_lives);

    // The slope a learner would read from each candidate's early rows (none when
    // every departure is equal: the encoding adds nothing).
    let fitted_slopes = one_row(ctx, &trial.slopes_sql()).await?;
    let parts = trial.components.len();
    let slopes: Vec<Vec<f64>> = (0..half_lives.len())
        .map(|i| {
            (0..parts)
                .map(|c| number(&fitted_slopes, i * parts + c).unwrap_or(0.0))
                .collect()
        })
        .collect();
    let b = one_row(ctx, &trial.losses_sql(&slopes)).await?;
    let rows = b.column(0).as_primitive::<Int64Type>().value(0);
    let Some(base) = number(&b, 1) else {
        return Ok((None, "no half-life: no later training rows to score".into()));
    };
    // The best candidate: (half-life, mean difference to no weighting, its standard error).
    let mut best: Option<(f64, f64, f64)> = None;
    for (i, h) in half_lives.iter().enumerate().skip(1) {
        let (Some(h), Some(d), Some(sd)) = (h, number(&b, 2 * i), number(&b, 2 * i + 1)) else {
            continue;
        };
        let se = sd / (rows as f64).sqrt();
        if d + se < 0.0 && best.is_none_or(|(_, bd, _)| d < bd) {
            best = Some((*h, d, se));
        }
    }
    let scored = format!(
        "the latest fifth of training rows ({rows} rows from {} = {}) scored by fits of the \
         earlier ones, read through a line fitted on those rows' out-of-fold encodings",
        plan.options.time_column.as_deref().unwrap_or_default(),
        short(cut.at)
    );
    Ok(match best {
        Some((h, d, se)) => (
            Some(h),
            format!(
                "half-life {} fitted: {scored}; mean loss {} against {} without recency weights \
                 (standard error of the difference {})",
                short(h),
                short(base + d),
                short(base),
                short(se)
            ),
        ),
        None => (
            None,
            format!(
                "no half-life: {scored}; no half-life from {} to {} beat no recency weights \
                 (mean loss {}) by more than a standard error",
                short(FRACTIONS[0] * cut.span),
                short(FRACTIONS[FRACTIONS.len() - 1] * cut.span),
                short(base)
            ),
        ),
    })
}

/// The value in column `c` of a one-row batch, when it is a finite number.
fn number(b: &datafusion::arrow::array::RecordBatch, c: usize) -> Option<f64> {
    let c = b.column(c).as_primitive::<Float64Type>();
    (!c.is_null(0))
        .then(|| c.value(0))
        .filter(|v| v.is_finite())
}

async fn one_row(ctx: &SessionContext, sql: &str) -> Result<datafusion::arrow::array::RecordBatch> {
    ctx.sql(sql)
        .await?
        .collect()
        .await?
        .into_iter()
        .find(|b| b.num_rows() > 0)
        .ok_or_else(|| EncodeError::Query("--half-life fitted: no result".into()))
}

/// The queries that try every candidate half-life on one key.
///
/// Early rows (before the cut) are split into the plan's folds; each early row
/// reads its level's posterior from the other folds (as encode's training rows
/// do), each late row the posterior of all early rows (as scored rows do), every
/// fit weighted by the candidate's decay from the cut.
///
/// A learner reads an encoding through what it learned on training rows, so each
/// candidate is scored that way: a line through the early rows' outcomes against
/// their encodings' departure from the prior (each class on its own), put on the
/// late rows' overall rate (a rate that moves for every level at once says nothing
/// about the key), its squared error over the late rows. A half-life that tracks
/// the latest rows but leaves the early rows' encodings unrelated to their own
/// outcomes earns a small slope and gains nothing.
struct Trial {
    /// The CTEs: `early` and `late` rows with `__level`, `__fold`, `__y`, `__x`; per
    /// candidate `f{i}` (level and fold fits), `a{i}` (level fits), `q{i}` (prior).
    with: Vec<String>,
    /// Per outcome component: its value over a row and, for classes, the class.
    components: Vec<(String, Option<String>)>,
    candidates: usize,
    family: Kind,
    fitted: bool,
}

impl Trial {
    fn new(plan: &EncodePlan, key: &KeyPlan, cut: f64, half_lives: &[Option<f64>]) -> Self {
        let time = plan.options.time_column.as_deref().unwrap_or_default();
        // Rows are `t`, as in `EncodePlan::fit_with_weight`.
        let t = format!("CAST(t.{} AS DOUBLE)", quote(time));
        let y = format!("t.{}", quote(&plan.options.target));
        let x = plan
            .options
            .exposure
            .as_ref()
            .map(|x| format!("CAST(t.{} AS DOUBLE)", quote(x)))
            .unwrap_or_else(|| "1.0".into());
        let outcome = match plan.family {
            Kind::Dirichlet => format!("CAST({y} AS VARCHAR)"),
            _ => format!("CAST({y} AS DOUBLE)"),
        };
        let rows = |when: &str| {
            format!(
                "SELECT t.*, {} AS __level, fold_of(t.__row, {}, {}) AS __fold, {outcome} AS __y, \
                 {x} AS __x FROM {TRAIN} t WHERE {t} {when} {cut} AND {y} IS NOT NULL",
                key.sql(plan.options.normalize_keys),
                plan.options.folds,
                plan.options.seed,
            )
        };
        let mut with = vec![
            format!("early AS ({})", rows("<")),
            format!("late AS ({})", rows(">=")),
        ];
        for (i, h) in half_lives.iter().enumerate() {
            let weight = h.map(|h| format!("decay_weight({cut} - {t}, {h})"));
            with.push(format!(
                "f{i} AS (SELECT t.__level AS level, t.__fold AS fold, {} AS p FROM early t \
                 WHERE t.__level IS NOT NULL GROUP BY 1, 2)",
                plan.fit_with_weight(key, weight.as_deref())
            ));
            with.push(format!(
                "a{i} AS (SELECT level, posterior_pool(p) AS p FROM f{i} GROUP BY level)"
            ));
            with.push(if plan.fitted {
                format!("q{i} AS (SELECT fit_prior(p) AS prior FROM a{i})")
            } else {
                format!(
                    "q{i} AS (SELECT {} AS prior)",
                    key.prior.as_ref().unwrap_or(&plan.base_prior)
                )
            });
        }
        let components = match plan.family {
            Kind::Dirichlet => plan
                .classes
                .iter()
                .map(|c| {
                    let class = text(c);
                    (
                        format!("CASE WHEN __y = {class} THEN 1.0 ELSE 0.0 END"),
                        Some(class),
                    )
                })
                .collect(),
            // Counts: events per unit of exposure.
            Kind::Gamma => vec![("__y / __x".to_string(), None)],
            _ => vec![("__y".to_string(), None)],
        };
        Trial {
            with,
            components,
            candidates: half_lives.len(),
            family: plan.family,
            fitted: plan.fitted,
        }
    }

    /// Component `c`'s departure from the prior under candidate `i`, of posterior
    /// `p` (the prior itself where `p` is NULL: an unseen level).
    fn departure(&self, i: usize, c: usize, p: &str) -> String {
        let p = match self.fitted {
            true => format!("COALESCE(posterior_with_prior({p}, q{i}.prior), q{i}.prior)"),
            false => format!("COALESCE({p}, q{i}.prior)"),
        };
        let mean = |p: &str| match &self.components[c].1 {
            Some(class) => format!("posterior_mean({p}, {class})"),
            None => format!("posterior_mean({p})"),
        };
        format!("({} - {})", mean(&p), mean(&format!("q{i}.prior")))
    }

    /// Per row of `rows` (`early` or `late`): each component's outcome
    /// `o{c}` and, per candidate, its departure `d{i}_{c}`; plus `__y`, `__x`.
    fn per_row(&self, rows: &str) -> String {
        let mut joins = Vec::new();
        let mut columns = vec!["r.__y".to_string(), "r.__x".to_string()];
        for (c, (outcome, _)) in self.components.iter().enumerate() {
            columns.push(format!(
                "{} AS o{c}",
                outcome.replace("__y", "r.__y").replace("__x", "r.__x")
            ));
        }
        for i in 0..self.candidates {
            let p = if rows == "early" {
                joins.push(format!(
                    "LEFT JOIN f{i} ON f{i}.level = r.__level AND f{i}.fold = r.__fold \
                     LEFT JOIN a{i} ON a{i}.level = r.__level"
                ));
                // The other folds: the level's fit less this row's fold's.
                format!("posterior_subtract(a{i}.p, f{i}.p)")
            } else {
                joins.push(format!("LEFT JOIN a{i} ON a{i}.level = r.__level"));
                format!("a{i}.p")
            };
            joins.push(format!("CROSS JOIN q{i}"));
            for c in 0..self.components.len() {
                columns.push(format!("{} AS d{i}_{c}", self.departure(i, c, &p)));
            }
        }
        format!(
            "SELECT {} FROM {rows} r {}",
            columns.join(", "),
            joins.join(" ")
        )
    }

    /// Per candidate and component (candidate-major): the slope of the outcome on the
    /// departure over the early rows.
    fn slopes_sql(&self) -> String {
        let slopes = (0..self.candidates)
            .flat_map(|i| {
                (0..self.components.len()).map(move |c| format!("REGR_SLOPE(o{c}, d{i}_{c})"))
            })
            .collect::<Vec<_>>();
        format!(
            "WITH {} SELECT {} FROM ({})",
            self.with.join(", "),
            slopes.join(", "),
            self.per_row("early")
        )
    }

    /// Row count, candidate 0's mean loss, then each other candidate's mean and
    /// standard deviation of its loss less candidate 0's, over the late rows;
    /// `slopes[i][c]` from `slopes_sql`.
    fn losses_sql(&self, slopes: &[Vec<f64>]) -> String {
        let losses = slopes
            .iter()
            .enumerate()
            .map(|(i, slopes)| {
                let terms = slopes
                    .iter()
                    .enumerate()
                    .map(|(c, slope)| {
                        let pred = format!("(g.rate{c} + {slope} * d{i}_{c})");
                        match self.family {
                            Kind::Gamma => format!("power(__y - {pred} * __x, 2)"),
                            _ => format!("power(o{c} - {pred}, 2)"),
                        }
                    })
                    .collect::<Vec<_>>();
                format!("{} AS l{i}", terms.join(" + "))
            })
            .collect::<Vec<_>>();
        let rates = self
            .components
            .iter()
            .enumerate()
            .map(|(c, (outcome, _))| match self.family {
                Kind::Gamma => format!("SUM(__y) / SUM(__x) AS rate{c}"),
                _ => format!("AVG({outcome}) AS rate{c}"),
            })
            .collect::<Vec<_>>();
        let mut summaries = vec!["COUNT(*)".to_string(), "AVG(l0)".to_string()];
        for i in 1..self.candidates {
            summaries.push(format!("AVG(l{i} - l0)"));
            summaries.push(format!("STDDEV_SAMP(l{i} - l0)"));
        }
        format!(
            "WITH {}, g AS (SELECT {} FROM late) SELECT {} FROM (SELECT {} FROM ({}) CROSS JOIN g)",
            self.with.join(", "),
            rates.join(", "),
            summaries.join(", "),
            losses.join(", "),
            self.per_row("late")
        )
    }
}
