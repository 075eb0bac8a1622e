//! A half-life fitted from the training rows (`--half-life fitted`).
//!
//! Recency weights help when a level's rate drifts and hurt when it does not (they
//! throw data away), and how fast it drifts differs per key. So each key is tried
//! on its own training rows the way its encodings are used (see `Trial`): the
//! latest fifth of the rows (by time) is scored with fits of the earlier rows,
//! each row weighted 2^(-age/h), for half-lives h from 1/64 to 4 times the
//! training period, and without weights. A half-life is kept only when its loss
//! beats no weighting by more than one standard error of the paired difference
//! over the scored rows; otherwise the key gets none (no weighting is the
//! conservative choice: it keeps all the data). The trial reads the rows as the
//! key's horizon (`--horizon`) says.
//!
//! Cost: two queries per candidate over the training rows (the first pass of each
//! is one fit): on 273,000 flights with four keys, 12-17 times an encode without one
//! (BENCHMARKS.md).

use datafusion::arrow::array::{Array, AsArray};
use datafusion::arrow::datatypes::{Float64Type, Int64Type};
use datafusion::prelude::SessionContext;

use super::options::Method;
use super::plan::{EncodePlan, KeyPlan, TimeUnits};
use super::sql::{as_of_pool, AsOfDecay, TRAIN};
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
    /// The earliest scored row's time (for messages: a bin's edge can fall between
    /// two dates).
    pub first: f64,
}

/// Where the latest `SCORED_SHARE` of the training rows with a time and a target
/// begins; `None` when the times do not spread (one time, or all rows in the last
/// bin).
pub(super) async fn cut(ctx: &SessionContext, plan: &EncodePlan) -> Result<Option<Cut>> {
    // The training times' range, as `resolve` found it.
    let (Some(time), Some(oldest), Some(newest)) = (
        &plan.options.time_column,
        plan.oldest_time,
        plan.newest_time,
    ) else {
        return Ok(None);
    };
    let from =
        datafusion::common::TableReference::from(plan.options.train.as_str()).to_quoted_string();
    let (t, y) = (plan.time_number(&quote(time)), quote(&plan.options.target));
    let span = newest - oldest;
    if !(span.is_finite() && span > 0.0) {
        return Ok(None);
    }
    let bins = ctx
        .sql(&format!(
            "SELECT LEAST(CAST(FLOOR(({t} - {oldest}) / {span} * {BINS}) AS BIGINT), {}) AS bin, \
             COUNT(*) AS n, MIN({t}) AS first FROM {from} WHERE {y} IS NOT NULL AND {t} IS NOT NULL \
             GROUP BY 1 ORDER BY 1",
            BINS - 1
        ))
        .await?
        .collect()
        .await?;
    let mut counts = vec![0i64; BINS as usize];
    let mut firsts = vec![f64::INFINITY; BINS as usize];
    for b in &bins {
        let (bin, n, first) = (
            b.column(0).as_primitive::<Int64Type>(),
            b.column(1).as_primitive::<Int64Type>(),
            b.column(2).as_primitive::<Float64Type>(),
        );
        for r in 0..b.num_rows() {
            let bin = bin.value(r).clamp(0, BINS as i64 - 1) as usize;
            counts[bin] += n.value(r);
            firsts[bin] = firsts[bin].min(first.value(r));
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
            let first = firsts[bin + 1..]
                .iter()
                .copied()
                .fold(f64::INFINITY, f64::min);
            return Ok(Some(Cut { span, at, first }));
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
    let candidates: Vec<Candidate> = half_lives
        .iter()
        .map(|&half_life| Candidate {
            half_life,
            horizon: key.horizon,
        })
        .collect();
    let design = design_of(plan);
    let trial = Trial::new(plan, key, design, cut.at, &candidates);
    let (rows, base, differences) = trial.against_first(ctx).await?;
    // The best half-life that beats none by more than a standard error: (half-life,
    // mean difference to no weighting, its standard error).
    let best = half_lives
        .iter()
        .zip(&differences)
        .filter_map(|pair| match pair {
            (Some(h), Some((d, se))) => Some((*h, *d, *se)),
            _ => None,
        })
        .filter(|(_, d, se)| d + se < 0.0)
        .min_by(|a, b| a.1.total_cmp(&b.1));
    let Some(base) = base else {
        return Ok((None, "no half-life: no later training rows to score".into()));
    };
    let scored = format!(
        "the latest fifth of training rows ({rows} rows from {} = {}) scored by fits of the \
         earlier ones, read through a line fitted on those rows' {} encodings",
        plan.options.time_column.as_deref().unwrap_or_default(),
        plan.time_units.show_time(cut.first),
        match design {
            Design::OutOfFold => "out-of-fold",
            Design::AsOf { .. } => "as-of",
        }
    );
    Ok(match best {
        Some((h, d, se)) => (
            Some(h),
            format!(
                "half-life {} fitted: {scored}; mean loss {} against {} without recency weights \
                 (standard error of the difference {})",
                plan.time_units.show(h),
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
                plan.time_units.show(FRACTIONS[0] * cut.span),
                plan.time_units
                    .show(FRACTIONS[FRACTIONS.len() - 1] * cut.span),
                short(base)
            ),
        ),
    })
}

/// How encode's training rows read their posteriors, which the trial repeats.
fn design_of(plan: &EncodePlan) -> Design {
    match (plan.method, plan.oldest_time) {
        (Method::Time, Some(oldest)) => Design::AsOf { oldest },
        _ => Design::OutOfFold,
    }
}

/// One way of reading a key's history, tried on the training rows.
#[derive(Debug, Clone, Copy)]
struct Candidate {
    half_life: Option<f64>,
    /// As-of only.
    horizon: Option<f64>,
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

/// How the early rows read their posteriors: as encode's training rows would.
#[derive(Debug, Clone, Copy)]
enum Design {
    /// From the other folds of the early rows.
    OutOfFold,
    /// From the early rows of strictly earlier times, ages counted from the row's
    /// own time (running sums weighted from the oldest time, then scaled).
    AsOf { oldest: f64 },
}

/// The queries that try candidate half-lives on one key.
///
/// Early rows (before the cut) read their level's posterior as encode's training
/// rows do (out-of-fold or as-of); late rows read the posterior of all early rows,
/// aged from the cut, as scored rows read the training rows' posterior.
///
/// A learner reads an encoding through what it learned on training rows, so each
/// candidate is scored that way: a line through the early rows' outcomes against
/// their encodings' departure from the prior (each class on its own), put on the
/// late rows' overall rate (a rate that moves for every level at once says nothing
/// about the key), its squared error over the late rows. A half-life that tracks
/// the latest rows but leaves the early rows' encodings unrelated to their own
/// outcomes, or that tracks the early rows' recent past but not the late rows'
/// distance from it, earns a small slope and gains nothing.
struct Trial {
    /// The CTEs every query needs: `early` and `late` rows with `__level`,
    /// `__fold`, `__time`, `__y`, `__x`.
    rows: Vec<String>,
    /// Per candidate `i`, its CTEs: `f{i}` (fits), `a{i}` (a level's early fit,
    /// aged from the cut), `q{i}` (prior) and as-of `s{i}` (a level's posterior
    /// before each time).
    candidates: Vec<Vec<String>>,
    /// Per outcome component: its value over a row and, for classes, the class.
    components: Vec<(String, Option<String>)>,
    design: Design,
    family: Kind,
    fitted: bool,
}

impl Trial {
    fn new(
        plan: &EncodePlan,
        key: &KeyPlan,
        design: Design,
        cut: f64,
        candidates: &[Candidate],
    ) -> Self {
        let time = plan.options.time_column.as_deref().unwrap_or_default();
        // Rows are `t`, as in `EncodePlan::fit_with_weight`.
        let t = plan.time_number(&format!("t.{}", quote(time)));
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
                "SELECT t.*, {} AS __level, fold_of(t.__row, {}, {}) AS __fold, {t} AS __time, \
                 {outcome} AS __y, {x} AS __x FROM {TRAIN} t WHERE {t} {when} {cut} AND {y} IS NOT NULL",
                key.sql(plan.options.normalize_keys),
                plan.options.folds,
                plan.options.seed,
            )
        };
        let rows = vec![
            format!("early AS ({})", rows("<")),
            format!("late AS ({})", rows(">=")),
        ];
        let prior = |i: usize| match plan.fitted {
            true => format!("q{i} AS (SELECT fit_prior(p) AS prior FROM a{i})"),
            false => format!(
                "q{i} AS (SELECT {} AS prior)",
                key.prior.as_ref().unwrap_or(&plan.base_prior)
            ),
        };
        let candidates = candidates
            .iter()
            .enumerate()
            .map(|(i, candidate)| match design {
                Design::OutOfFold => {
                    let weight = candidate
                        .half_life
                        .map(|h| format!("decay_weight({cut} - {t}, {h})"));
                    vec![
                        format!(
                            "f{i} AS (SELECT t.__level AS level, t.__fold AS fold, {} AS p FROM early t \
                             WHERE t.__level IS NOT NULL GROUP BY 1, 2)",
                            plan.fit_with_weight(key, weight.as_deref())
                        ),
                        format!("a{i} AS (SELECT level, posterior_pool(p) AS p FROM f{i} GROUP BY level)"),
                        prior(i),
                    ]
                }
                Design::AsOf { oldest } => {
                    // At most 2^64 here: the shortest candidate is 1/64 of the period.
                    let decay = candidate
                        .half_life
                        .map(|half_life| AsOfDecay { oldest, half_life });
                    let weight = decay.map(|d| d.growing_weight("t.__time"));
                    let aged = |p: &str, at: &str| match decay {
                        Some(d) => d.aged(p, at),
                        None => p.to_string(),
                    };
                    vec![
                        format!(
                            "f{i} AS (SELECT t.__level AS level, t.__time AS time, {} AS p FROM early t \
                             WHERE t.__level IS NOT NULL GROUP BY 1, 2)",
                            plan.fit_with_weight(key, weight.as_deref())
                        ),
                        format!(
                            "s{i} AS (SELECT level, time, {} AS p FROM f{i})",
                            aged(
                                &as_of_pool(
                                    "p",
                                    "level",
                                    ("time", TimeUnits::Numbers),
                                    candidate.horizon,
                                ),
                                "time"
                            )
                        ),
                        format!(
                            "a{i} AS (SELECT level, {} AS p FROM f{i} GROUP BY level)",
                            aged("posterior_pool(p)", &cut.to_string())
                        ),
                        prior(i),
                    ]
                }
            })
            .collect();
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
            rows,
            candidates,
            components,
            design,
            family: plan.family,
            fitted: plan.fitted,
        }
    }

    /// Every candidate against the first: the late rows scored, the first's mean
    /// loss, and per candidate the mean difference of its loss less the first's with
    /// its standard error (`None` for the first, and where there is nothing to
    /// compare). One query per candidate and per pair keeps the memory of a trial
    /// that of one fit.
    async fn against_first(
        &self,
        ctx: &SessionContext,
    ) -> Result<(i64, Option<f64>, Vec<Option<(f64, f64)>>)> {
        // The slopes a learner would read from each candidate's early rows (none when
        // every departure is equal: the encoding adds nothing).
        let mut slopes = Vec::new();
        for i in 0..self.candidates.len() {
            let b = one_row(ctx, &self.slopes_sql(i)).await?;
            slopes.push(
                (0..self.components.len())
                    .map(|c| number(&b, c).unwrap_or(0.0))
                    .collect::<Vec<_>>(),
            );
        }
        let (mut rows, mut base, mut differences) = (0, None, vec![None]);
        for i in 1..self.candidates.len() {
            let b = one_row(ctx, &self.losses_sql((0, &slopes[0]), (i, &slopes[i]))).await?;
            rows = b.column(0).as_primitive::<Int64Type>().value(0);
            base = number(&b, 1);
            differences.push(
                number(&b, 2)
                    .zip(number(&b, 3))
                    .map(|(d, sd)| (d, sd / (rows as f64).sqrt())),
            );
        }
        Ok((rows, base, differences))
    }

    /// The CTEs of the rows and of candidates `chosen`.
    fn with(&self, chosen: &[usize]) -> String {
        self.rows
            .iter()
            .chain(chosen.iter().flat_map(|&i| self.candidates[i].iter()))
            .cloned()
            .collect::<Vec<_>>()
            .join(", ")
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

    /// Per row of `rows` (`early` or `late`): each component's outcome `o{c}` and,
    /// per chosen candidate, its departure `d{i}_{c}`; plus `__y`, `__x`.
    fn per_row(&self, rows: &str, chosen: &[usize]) -> String {
        let mut joins = Vec::new();
        let mut columns = vec!["r.__y".to_string(), "r.__x".to_string()];
        for (c, (outcome, _)) in self.components.iter().enumerate() {
            columns.push(format!(
                "{} AS o{c}",
                outcome.replace("__y", "r.__y").replace("__x", "r.__x")
            ));
        }
        for &i in chosen {
            let p = match (rows, self.design) {
                ("early", Design::OutOfFold) => {
                    joins.push(format!(
                        "LEFT JOIN f{i} ON f{i}.level = r.__level AND f{i}.fold = r.__fold \
                         LEFT JOIN a{i} ON a{i}.level = r.__level"
                    ));
                    // The other folds: the level's fit less this row's fold's.
                    format!("posterior_subtract(a{i}.p, f{i}.p)")
                }
                ("early", Design::AsOf { .. }) => {
                    joins.push(format!(
                        "LEFT JOIN s{i} ON s{i}.level = r.__level AND s{i}.time = r.__time"
                    ));
                    format!("s{i}.p")
                }
                _ => {
                    joins.push(format!("LEFT JOIN a{i} ON a{i}.level = r.__level"));
                    format!("a{i}.p")
                }
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

    /// Per component: the slope of the outcome on candidate `i`'s departure over
    /// the early rows.
    fn slopes_sql(&self, i: usize) -> String {
        let slopes = (0..self.components.len())
            .map(|c| format!("REGR_SLOPE(o{c}, d{i}_{c})"))
            .collect::<Vec<_>>();
        format!(
            "WITH {} SELECT {} FROM ({})",
            self.with(&[i]),
            slopes.join(", "),
            self.per_row("early", &[i])
        )
    }

    /// Over the late rows, candidate `a` against candidate `b` (each with its
    /// slopes per component): the row count, `a`'s mean loss, and the mean and
    /// standard deviation of `b`'s loss less `a`'s.
    fn losses_sql(&self, (a, a_slopes): (usize, &[f64]), (b, b_slopes): (usize, &[f64])) -> String {
        let loss = |i: usize, slopes: &[f64]| {
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
        };
        let rates = self
            .components
            .iter()
            .enumerate()
            .map(|(c, (outcome, _))| match self.family {
                Kind::Gamma => format!("SUM(__y) / SUM(__x) AS rate{c}"),
                _ => format!("AVG({outcome}) AS rate{c}"),
            })
            .collect::<Vec<_>>();
        format!(
            "WITH {}, g AS (SELECT {} FROM late) \
             SELECT COUNT(*), AVG(l{a}), AVG(l{b} - l{a}), STDDEV_SAMP(l{b} - l{a}) \
             FROM (SELECT {}, {} FROM ({}) CROSS JOIN g)",
            self.with(&[a, b]),
            rates.join(", "),
            loss(a, a_slopes),
            loss(b, b_slopes),
            self.per_row("late", &[a, b])
        )
    }
}
