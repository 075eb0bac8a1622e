//! Running a plan: numbered rows, the statements, the bundle, the summary, and
//! writing everything into a directory as one unit.

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

use datafusion::arrow::array::{new_null_array, Array, AsArray, RecordBatch};
use datafusion::arrow::compute::cast;
use datafusion::arrow::datatypes::{DataType, Field, Float64Type, Int64Type, Schema};
use std::sync::Arc;

use datafusion::dataframe::{DataFrame, DataFrameWriteOptions};
use datafusion::datasource::file_format::parquet::ParquetFormat;
use datafusion::datasource::listing::ListingOptions;
use datafusion::error::DataFusionError;
use datafusion::parquet::arrow::ArrowWriter;
use datafusion::prelude::SessionContext;
use serde_json::{json, Value};

use super::options::{Reader, Treatment};
use super::plan::{EncodePlan, KeyPlan};
use super::resolve::one_row;
use super::sql::{SCORE, TRAIN};
use super::{text, EncodeError, Result};
use crate::bundle::{Bundle, ColumnEncoding};
use crate::family::empirical::MAX_STRENGTH;
use crate::layout::{AnyPosterior, PosteriorColumn};

/// What was chosen for one encoded key, and how much data it saw.
#[derive(Debug, Clone, PartialEq)]
pub struct ColumnSummary {
    pub key: String,
    pub family: String,
    /// The prior, as a JSON posterior object.
    pub prior: Value,
    /// The prior, readable.
    pub prior_text: String,
    /// The prior's weight in rows (pseudo-observations).
    pub strength: f64,
    /// A fitted prior whose strength hit its cap (levels show no spread beyond noise:
    /// the column was pooled completely).
    pub at_bound: bool,
    pub levels: u64,
    /// Training rows with the key and a target (and an exposure), the rows its fits read.
    pub rows: u64,
    /// The weight those rows hold in the encodings (`posterior_data_weight` summed
    /// over levels): the rows themselves, unless a half-life decays older ones, an
    /// exposure is the weight of counts, or a refresh adds the stored posteriors'.
    pub weight: f64,
    /// Share of scored rows at levels never seen in training.
    pub unseen_share: Option<f64>,
    /// Levels given an indicator column (big enough, up to the limit).
    pub indicators: usize,
    /// With normalised keys: how many spellings were merged into other levels.
    pub merged_levels: u64,
    /// What the key became in the training and scored tables, and why.
    pub treatment: Treatment,
    pub why: String,
    /// The recency weighting of its fits (`--half-life`), and how it was chosen.
    pub half_life: Option<f64>,
    pub recency: String,
    /// How far back as-of training rows read (`--horizon`), and how it was chosen.
    pub horizon: Option<f64>,
    pub horizon_why: String,
    /// Its reader columns, and why (empty when `--readers` chose them).
    pub readers: Vec<String>,
    pub readers_why: String,
    /// Under `--hierarchy`: the parent key, and the layer's fitted strength
    /// (pseudo-observations; `None` when no level has a parent level).
    pub parent: Option<String>,
    pub parent_strength: Option<f64>,
    /// Whether that strength was kept from a refreshed bundle (else fitted).
    pub parent_strength_kept: bool,
    pub warnings: Vec<String>,
}

impl ColumnSummary {
    /// Why the key's weight in the encodings is not its row count, when it is not.
    pub fn weight_differs(&self) -> Option<&'static str> {
        let rows = self.rows as f64;
        if (self.weight - rows).abs() <= 1e-9 * rows.max(1.0) {
            return None;
        }
        Some(if self.half_life.is_some() {
            "the half-life decays older rows"
        } else if self.family == "gamma" {
            "counts weigh their exposure"
        } else {
            "the new rows pooled with the stored posteriors"
        })
    }
}

/// The results of [`run`]: lazily evaluated tables (stream, collect or write them)
/// and the serving bundle.
pub struct EncodeOutput {
    /// Every training column plus the reader columns, in table order (`None` for a
    /// refresh, which updates the serving outputs only).
    pub train_encoded: Option<DataFrame>,
    /// Per key: one row per level with its posterior `p` and the readers.
    pub encodings: Vec<(String, DataFrame)>,
    /// With a scoring table: every scoring column plus the readers, in table order.
    pub scored: Option<DataFrame>,
    /// With a scoring table: per key, rows, rows with the key, unseen rows and levels.
    pub unseen: Option<Value>,
    pub bundle: Bundle,
    pub summary: Vec<ColumnSummary>,
    /// With `EncodeOptions::report`: the HTML report (`crate::report`).
    pub report: Option<String>,
}

/// Fewer levels than this give a fitted prior too little to go on (common
/// practice, no source).
const FEW_LEVELS: u64 = 20;

/// Scored rows at least this many, all at unseen levels, get a warning: fewer may
/// well be a handful of new levels (our own choice, no source).
const MANY_UNSEEN_ROWS: i64 = 10;

/// Counts vary within a level about as much as their mean (a Poisson count's
/// variance equals its mean: Cameron and Trivedi, Regression Analysis of Count
/// Data, on the dispersion index, from memory); an integer target whose values
/// vary this many times more within levels is likely a measurement, not a count
/// (common practice, no source).
const COUNT_DISPERSION: f64 = 2.0;

/// A target the gamma family was given by its integer type, read per level of
/// `key`: the pooled within-level variance over the mean (the dispersion index).
async fn within_level_dispersion(
    ctx: &SessionContext,
    plan: &EncodePlan,
    key: &KeyPlan,
) -> Result<Option<f64>> {
    let y = format!("CAST(t.{} AS DOUBLE)", super::quote(&plan.options.target));
    let b = one_row(
        ctx,
        &format!(
            "SELECT SUM(v * (n - 1)) / (SUM(n) - COUNT(*)) / (SUM(s) / SUM(n)) FROM \
             (SELECT {} AS k, VAR_SAMP({y}) AS v, CAST(COUNT({y}) AS DOUBLE) AS n, SUM({y}) AS s \
              FROM {TRAIN} t GROUP BY 1 HAVING COUNT({y}) > 1) WHERE k IS NOT NULL",
            key.sql(plan.options.normalize_keys)
        ),
    )
    .await?;
    let d = cast(b.column(0), &DataType::Float64)?;
    let d = d.as_primitive::<Float64Type>();
    Ok((!d.is_null(0))
        .then(|| d.value(0))
        .filter(|d| d.is_finite()))
}

fn posterior_at(batch: &RecordBatch, column: usize, row: usize) -> Result<Option<AnyPosterior>> {
    PosteriorColumn::new("encode", batch.column(column))?
        .get(row)
        .map_err(|e| EncodeError::Query(format!("encode: {e}")))
}

/// Run the plan's statements and return the outputs.
pub async fn run(ctx: &SessionContext, plan: &EncodePlan) -> Result<EncodeOutput> {
    run_with_progress(ctx, plan, &mut |_| {}).await
}

/// [`run`], telling `progress` the name of each statement as it starts.
pub async fn run_with_progress(
    ctx: &SessionContext,
    plan: &EncodePlan,
    progress: &mut dyn FnMut(&str),
) -> Result<EncodeOutput> {
    crate::numbered::register(ctx, &plan.options.train, TRAIN).await?;
    if let Some(score) = &plan.options.score {
        crate::numbered::register(ctx, score, SCORE).await?;
    }
    let work_dir = plan.options.work_dir.as_deref();
    let outputs = execute(ctx, plan.statements(), work_dir, progress).await?;
    finish(ctx, plan, outputs).await
}

/// Run `statements`; the results of output queries come back by name, unevaluated.
/// With `work_dir`, tables are written there as Parquet and read back from it.
pub(super) async fn execute(
    ctx: &SessionContext,
    statements: Vec<super::Statement>,
    work_dir: Option<&Path>,
    progress: &mut dyn FnMut(&str),
) -> Result<BTreeMap<String, DataFrame>> {
    let ctx = &keeping_file_order(ctx);
    let mut outputs = BTreeMap::new();
    for statement in statements {
        progress(&statement.name);
        let in_words = |e| in_encode_words(&statement.name, e);
        if let (Some((table, query)), Some(dir)) = (&statement.table, work_dir) {
            write_table(ctx, dir, table, query)
                .await
                .map_err(in_words)?;
            continue;
        }
        // CREATE TABLE ... AS runs inside `sql`; queries run when collected.
        let df = ctx.sql(&statement.sql).await.map_err(in_words)?;
        match &statement.output {
            None => {
                df.collect().await.map_err(in_words)?;
            }
            Some(name) => {
                outputs.insert(name.clone(), df);
            }
        }
    }
    Ok(outputs)
}

/// `query`'s result written as Parquet files into `dir/table/` (replacing an earlier
/// run's) and registered as `table`, with the query's own schema (so an empty
/// result is still a table).
async fn write_table(
    ctx: &SessionContext,
    dir: &Path,
    table: &str,
    query: &str,
) -> std::result::Result<(), DataFusionError> {
    let path = dir.join(table);
    let io = |e: std::io::Error| {
        DataFusionError::Execution(format!(
            "--work-dir: cannot prepare {}: {e}",
            path.display()
        ))
    };
    if path.exists() {
        std::fs::remove_dir_all(&path).map_err(io)?;
    }
    std::fs::create_dir_all(&path).map_err(io)?;
    let df = ctx.sql(query).await?;
    let schema = Arc::new(df.schema().as_arrow().clone());
    let location = format!("{}/", path.display());
    df.write_parquet(&location, DataFrameWriteOptions::new(), None)
        .await?;
    // An empty result writes no file. A Ballista cluster never finishes a job that
    // joins an empty table, so an empty table holds instead one row of NULLs: its
    // NULL level matches no key, and readers of these tables skip NULL levels.
    let has_file = std::fs::read_dir(&path)
        .map_err(io)?
        .any(|e| e.is_ok_and(|e| e.path().extension().is_some_and(|x| x == "parquet")));
    let schema = match has_file {
        true => schema,
        false => {
            let nullable: Vec<Field> = schema
                .fields()
                .iter()
                .map(|f| f.as_ref().clone().with_nullable(true))
                .collect();
            let nullable = Arc::new(Schema::new(nullable));
            let nulls = nullable
                .fields()
                .iter()
                .map(|f| new_null_array(f.data_type(), 1))
                .collect();
            let row = RecordBatch::try_new(nullable.clone(), nulls)?;
            let file = std::fs::File::create(path.join("empty.parquet")).map_err(io)?;
            let mut writer = ArrowWriter::try_new(file, nullable.clone(), None)?;
            writer.write(&row)?;
            writer.close()?;
            nullable
        }
    };
    ctx.deregister_table(table)?;
    let format =
        ListingOptions::new(Arc::new(ParquetFormat::default())).with_file_extension(".parquet");
    ctx.register_listing_table(table, &location, format, Some(schema), None)
        .await
}

/// `ctx` (the same tables) planning every join with the level tables as one shared
/// build side. The engine otherwise splits both sides by key hash once a level
/// table passes a size threshold, which scatters the training rows across parts:
/// the outputs would then need a sort of every row to come back in file order,
/// where now the scan's parts, each in order, are merged.
fn keeping_file_order(ctx: &SessionContext) -> SessionContext {
    let mut state = ctx.state();
    let joins = &mut state.config_mut().options_mut().optimizer;
    // Large, not usize::MAX: planners multiply these.
    joins.hash_join_single_partition_threshold = 1 << 40;
    joins.hash_join_single_partition_threshold_rows = 1 << 36;
    SessionContext::new_with_state(state)
}

/// A statement's failure in the words of encode's options where the engine's would
/// name an inner function: a fitted prior for a key without a single level with
/// target values.
fn in_encode_words(statement: &str, e: DataFusionError) -> EncodeError {
    let message = e.to_string();
    match statement.strip_prefix("prior ") {
        Some(key) if message.contains("no level has any evidence") => EncodeError::Usage(format!(
            "--columns {key}: no training row has both a key value and a target value, so \
             there is nothing to fit a prior from; choose one with --prior (jeffreys, uniform \
             or numbers) or leave the key out"
        )),
        _ => e.into(),
    }
}

/// The bundle and the summary from the finished tables, and the outputs.
pub(super) async fn finish(
    ctx: &SessionContext,
    plan: &EncodePlan,
    mut outputs: BTreeMap<String, DataFrame>,
) -> Result<EncodeOutput> {
    let mut columns = BTreeMap::new();
    // The bundle's readers; a key with others (the default's sd) records its own.
    let base_readers = plan
        .options
        .readers
        .clone()
        .unwrap_or_else(|| vec![Reader::Mean]);
    let mut summary = Vec::new();
    let mut unseen = serde_json::Map::new();
    let rows_read = rows_read(ctx, plan).await?;
    let scored_early = match rows_read.newest {
        Some(newest) => scored_within_training(ctx, plan, newest).await?,
        None => None,
    };
    // Two classes read per class give columns that add to one: said once, on the
    // first key that has readers.
    let two_classes_said_on = plan
        .keys
        .iter()
        .position(|k| !plan.reader_columns(k).is_empty())
        .filter(|_| plan.classes.len() == 2);
    for (i, key) in plan.keys.iter().enumerate() {
        let prior_row = ctx
            .sql(&format!("SELECT prior, report FROM __prior{i}"))
            .await?
            .collect()
            .await?;
        let prior_batch = prior_row
            .iter()
            .find(|b| b.num_rows() > 0)
            .ok_or_else(|| EncodeError::Query(format!("encode: no prior for {}", key.name)))?;
        let prior = posterior_at(prior_batch, 0, 0)?
            .ok_or_else(|| EncodeError::Query(format!("encode: NULL prior for {}", key.name)))?;
        let report: Option<Value> = {
            let c = cast(prior_batch.column(1), &DataType::Utf8)?;
            let c = c.as_string::<i32>();
            (c.is_valid(0))
                .then(|| serde_json::from_str(c.value(0)).ok())
                .flatten()
        };
        // Under --hierarchy: the layer's fitted strength (NULL: no level has a parent).
        let under = match key.parent {
            Some(j) => {
                let sql = format!("SELECT CAST(strength AS DOUBLE) FROM __strength{i}");
                let batch = super::resolve::one_row(ctx, &sql).await?;
                let strength = batch.column(0).as_primitive::<Float64Type>();
                let strength = strength.is_valid(0).then(|| strength.value(0));
                Some((plan.keys[j].name.clone(), strength))
            }
            None => None,
        };
        let parent_levels = match key.parent {
            Some(_) => parent_levels(ctx, i).await?,
            None => BTreeMap::new(),
        };
        let mut levels = BTreeMap::new();
        let mut weight = 0.0;
        for batch in ctx
            .sql(&format!("SELECT level, p FROM __enc{i} ORDER BY level"))
            .await?
            .collect()
            .await?
        {
            let names = cast(batch.column(0), &DataType::Utf8)?;
            let names = names.as_string::<i32>();
            for r in 0..batch.num_rows() {
                if let Some(p) = posterior_at(&batch, 1, r)? {
                    weight += p.evidence();
                    levels.insert(names.value(r).to_string(), p);
                }
            }
        }
        let (strength, at_bound, unfitted) = match &report {
            Some(r) => (
                r["strength"].as_f64().unwrap_or(f64::NAN),
                r["at_bound"].as_bool().unwrap_or(false),
                r["unfitted"].as_str().map(str::to_string),
            ),
            None => (prior_strength(&prior), false, None),
        };
        let mut warnings = Vec::new();
        let unseen_share = match outputs.get(&format!("unseen/{}", key.name)) {
            Some(df) => {
                let b = df.clone().collect().await?;
                let v = |c: usize| b[0].column(c).as_primitive::<Int64Type>().value(0);
                // No scored rows at all is an empty file, a filter that kept nothing or a
                // stream already read: said once, as the table's zeros are easy to miss.
                if i == 0 && v(0) == 0 {
                    warnings.push(
                        "the scoring table has no rows, so nothing was scored (an empty file, \
                         a filter that kept no rows, or a stream that was already read)"
                            .to_string(),
                    );
                }
                // Every scored key unseen is more often a mismatch of how the two tables
                // write the key than a batch of new levels: say so.
                if v(1) >= MANY_UNSEEN_ROWS && v(2) == v(1) && !levels.is_empty() {
                    warnings.push(format!(
                        "none of the {} scored rows with a {} has a level seen in training: \
                         check that the scored table writes the key as the training table \
                         does (spelling, case, leading zeros, codes)",
                        v(1),
                        key.name
                    ));
                }
                unseen.insert(
                    key.name.clone(),
                    json!({"rows": v(0), "rows_with_key": v(1), "unseen_rows": v(2), "unseen_levels": v(3)}),
                );
                Some(if v(0) > 0 {
                    v(2) as f64 / v(0) as f64
                } else {
                    0.0
                })
            }
            None => None,
        };
        // Only a strength at its cap pools the levels; a bound elsewhere (a Normal
        // prior's variance shape: the levels alike in spread) changes no mean.
        if let Some(why) = unfitted {
            warnings.push(format!("{}: {why}", key.name));
        } else if strength >= MAX_STRENGTH * (1.0 - 1e-9) {
            warnings.push(format!(
                "the levels of {} show no spread beyond noise: the prior's strength hit its cap \
                 and every level is pooled to the overall rate",
                key.name
            ));
        }
        if let (Some(h), Some(oldest), Some(newest)) =
            (key.horizon, plan.oldest_time, plan.newest_time)
        {
            if h >= newest - oldest {
                warnings.push(format!(
                    "the horizon of {} ({}) is at least the training period ({}): every training \
                     row reads the prior",
                    key.name,
                    plan.time_units.show(h),
                    plan.time_units.show(newest - oldest)
                ));
            }
        }
        // A target with one value is more often the wrong column or a filter gone
        // wrong than data. Said once; a Normal target's fit says it for every key.
        if let (0, true, Some(value)) = (i, plan.fitted, &rows_read.one_value) {
            if plan.family != crate::layout::Kind::Nig {
                warnings.push(format!(
                    "every training row's target {} is {value}: the encodings cannot tell \
                     levels apart (check the target column and the rows read)",
                    plan.options.target
                ));
            }
        }
        // Said once, on the first key read as of its rows' times.
        if let Some((early, timed, newest)) = scored_early.filter(|_| {
            plan.keys
                .iter()
                .position(|k| k.treatment == Treatment::Posterior)
                == Some(i)
        }) {
            warnings.push(format!(
                "{early} of the {timed} scored rows are not later in {time} than the newest \
                 training row ({newest}): their encodings read every training row, later ones \
                 too, while each training row read only earlier ones; to test a model on them \
                 train on rows before them, or for a split that is not in time pass --method \
                 kfold",
                time = plan.options.time_column.as_deref().unwrap_or_default(),
                newest = plan.time_units.show_time(newest),
            ));
        }
        if two_classes_said_on == Some(i) {
            warnings.push(format!(
                "target '{0}' has two classes ({1}, {2}): each class's columns are one minus \
                 the other's; for one column per reader give the target as 0/1 or true/false \
                 (for example {0} = {2})",
                plan.options.target,
                text(&plan.classes[0]),
                text(&plan.classes[1]),
            ));
        }
        if plan.family == crate::layout::Kind::Gamma
            && plan.options.family.is_none()
            && plan.options.exposure.is_none()
            && key.treatment == Treatment::Posterior
        {
            if let Some(d) = within_level_dispersion(ctx, plan, key)
                .await?
                .filter(|d| *d > COUNT_DISPERSION)
            {
                warnings.push(format!(
                    "'{}' varies {} times as much within the levels of {} as counts do \
                     (variance over mean; a count's is 1): the gamma family, chosen because it \
                     holds integers, then pools levels too little and gives intervals too \
                     narrow; for counts over unequal spans of time pass --exposure, for \
                     scores, amounts or other measurements --family nig",
                    plan.options.target,
                    crate::render::short(d),
                    key.name
                ));
            }
        }
        if plan.fitted
            && key.treatment == Treatment::Posterior
            && (levels.len() as u64) < FEW_LEVELS
        {
            warnings.push(format!(
                "the prior of {} was fitted from only {} levels; consider --prior with numbers",
                key.name,
                levels.len()
            ));
        }
        let merged_levels = if plan.options.normalize_keys {
            let raw = ctx
                .sql(&format!(
                    "SELECT COUNT(DISTINCT {}) FROM {TRAIN} t",
                    key.sql(false)
                ))
                .await?
                .collect()
                .await?;
            let raw = raw[0].column(0).as_primitive::<Int64Type>().value(0) as u64;
            raw.saturating_sub(levels.len() as u64)
        } else {
            0
        };
        let mut indicators = Vec::new();
        for batch in ctx
            .sql(&format!(
                "SELECT level FROM __top{i} WHERE level IS NOT NULL ORDER BY rank"
            ))
            .await?
            .collect()
            .await?
        {
            let names = cast(batch.column(0), &DataType::Utf8)?;
            let names = names.as_string::<i32>();
            indicators.extend((0..names.len()).map(|r| names.value(r).to_string()));
        }
        summary.push(ColumnSummary {
            key: key.name.clone(),
            family: plan.family.short_name().to_string(),
            prior: crate::bundle::posterior_json(&prior),
            prior_text: crate::render::describe(&prior),
            strength,
            at_bound,
            levels: levels.len() as u64,
            rows: rows_read.per_key[i],
            weight,
            unseen_share,
            indicators: indicators.len(),
            merged_levels,
            treatment: key.treatment,
            why: key.why.clone(),
            half_life: key.half_life,
            recency: key.recency.clone(),
            horizon: key.horizon,
            horizon_why: key.horizon_why.clone(),
            readers: match key.treatment {
                Treatment::Posterior => key.readers.iter().map(|r| r.spec()).collect(),
                _ => Vec::new(),
            },
            readers_why: key.readers_why.clone(),
            parent: under.as_ref().map(|(parent, _)| parent.clone()),
            parent_strength: under.as_ref().and_then(|(_, s)| *s),
            parent_strength_kept: key.strength.is_some(),
            warnings,
        });
        columns.insert(
            key.name.clone(),
            ColumnEncoding {
                key_columns: key.columns.clone(),
                normalized: plan.options.normalize_keys,
                whole_floats: true,
                prior,
                levels,
                indicators,
                score_scale: plan.score_scale,
                treatment: key.treatment,
                readers: (key.readers != base_readers)
                    .then(|| key.readers.iter().map(|r| r.spec()).collect()),
                parent: under.and_then(|(parent, s)| s.map(|s| (parent, s))),
                parent_levels,
            },
        );
    }
    let bundle = Bundle {
        target: plan.options.target.clone(),
        family: plan.family.short_name().to_string(),
        exposure: plan.options.exposure.clone(),
        key_order: plan.keys.iter().map(|k| k.name.clone()).collect(),
        readers: base_readers.iter().map(|r| r.spec()).collect(),
        columns,
    };
    let take = |outputs: &mut BTreeMap<String, DataFrame>, name: &str| {
        outputs
            .remove(name)
            .ok_or_else(|| EncodeError::Query(format!("encode: no output {name}")))
    };
    let train_encoded = outputs.remove("train_encoded");
    let scored = outputs.remove("scored");
    let mut encodings = Vec::new();
    for key in &plan.keys {
        encodings.push((
            key.name.clone(),
            take(&mut outputs, &format!("encodings/{}", key.name))?,
        ));
    }
    let report = match plan.options.report {
        true => Some(crate::report::html(&bundle, &summary).map_err(EncodeError::Query)?),
        false => None,
    };
    Ok(EncodeOutput {
        train_encoded,
        encodings,
        scored,
        unseen: plan.options.score.as_ref().map(|_| Value::Object(unseen)),
        bundle,
        summary,
        report,
    })
}

/// Under `--hierarchy`, child key `i`'s levels' parent levels and, where a level
/// has rows outside its parent, those rows' data (its whole data less its data
/// inside the parent; rounding residue below 1e-9 of the whole is none).
async fn parent_levels(
    ctx: &SessionContext,
    i: usize,
) -> Result<BTreeMap<String, (String, Option<AnyPosterior>)>> {
    let mut out = BTreeMap::new();
    let sql = format!(
        "SELECT m.level, m.parent, CASE WHEN posterior_data_weight(posterior_subtract(f.p, m.p)) \
         > 1e-9 * posterior_data_weight(f.p) THEN posterior_subtract(f.p, m.p) END AS outside \
         FROM __pair{i} m JOIN __fit{i} f ON f.level = m.level ORDER BY m.level"
    );
    for batch in ctx.sql(&sql).await?.collect().await? {
        let (levels, parents) = (
            cast(batch.column(0), &DataType::Utf8)?,
            cast(batch.column(1), &DataType::Utf8)?,
        );
        let (levels, parents) = (levels.as_string::<i32>(), parents.as_string::<i32>());
        for r in 0..batch.num_rows() {
            out.insert(
                levels.value(r).to_string(),
                (parents.value(r).to_string(), posterior_at(&batch, 2, r)?),
            );
        }
    }
    Ok(out)
}

/// A prior's weight in pseudo-observations.
fn prior_strength(prior: &AnyPosterior) -> f64 {
    match prior {
        AnyPosterior::Beta(b) => b.prior.a0 + b.prior.b0,
        AnyPosterior::Gamma(g) => g.prior.rate0,
        AnyPosterior::Nig(n) => n.prior.kappa0,
        AnyPosterior::Dirichlet(d) => d.prior.alpha0.iter().sum(),
    }
}

/// What the fits read of the training rows: per key, the rows with the key and a
/// target (and, for counts per exposure, an exposure), the target's value when
/// every such row has the same one, and (as-of) their newest time; read in one
/// pass over the keyed rows.
struct RowsRead {
    per_key: Vec<u64>,
    one_value: Option<String>,
    /// As-of encodings: the newest time among those rows (the column's units).
    newest: Option<f64>,
}

async fn rows_read(ctx: &SessionContext, plan: &EncodePlan) -> Result<RowsRead> {
    let o = &plan.options;
    let y = format!("t.{}", super::quote(&o.target));
    let counts: Vec<String> = (0..plan.keys.len())
        .map(|i| format!("COUNT(t.__k{i})"))
        .collect();
    let mut read = vec![format!("{y} IS NOT NULL")];
    if let Some(x) = &o.exposure {
        read.push(format!("t.{} IS NOT NULL", super::quote(x)));
    }
    // As-of encodings: the newest time the fits read, for the scored rows' check
    // (resolve refused every time column without units).
    let mut newest = "CAST(NULL AS DOUBLE)".to_string();
    if let (super::options::Method::Time, Some(time)) = (plan.method, &o.time_column) {
        newest = plan.time_units.number(&format!("t.{}", super::quote(time)));
    }
    let sql = format!(
        "SELECT MIN({y}), MAX({y}), MAX({newest}), {} FROM __keyed t WHERE {}",
        counts.join(", "),
        read.join(" AND ")
    );
    let batch = one_row(ctx, &sql).await?;
    let text = |c: usize| -> Result<Option<String>> {
        let c = cast(batch.column(c), &DataType::Utf8)?;
        let c = c.as_string::<i32>();
        Ok(c.is_valid(0).then(|| c.value(0).to_string()))
    };
    let (low, high) = (text(0)?, text(1)?);
    let newest = cast(batch.column(2), &DataType::Float64)?;
    let newest = newest.as_primitive::<Float64Type>();
    Ok(RowsRead {
        newest: newest.is_valid(0).then(|| newest.value(0)),
        per_key: (0..plan.keys.len())
            .map(|i| {
                batch
                    .column(i + 3)
                    .as_primitive::<Int64Type>()
                    .value(0)
                    .max(0) as u64
            })
            .collect(),
        one_value: low.filter(|low| Some(low) == high.as_ref()),
    })
}

/// How many scored rows with a time are not later than `newest`, the newest
/// training row's time under as-of encodings, and how many have a time; `None`
/// when none is, or without scored rows or a time column of the same units there.
/// A scored row reads every training row, so such rows see later rows that no
/// training row saw: a backtest built that way scores features its model never
/// trained on.
async fn scored_within_training(
    ctx: &SessionContext,
    plan: &EncodePlan,
    newest: f64,
) -> Result<Option<(i64, i64, f64)>> {
    let (Some(_), Some(time)) = (&plan.options.score, &plan.options.time_column) else {
        return Ok(None);
    };
    let columns = super::checks::columns_of(ctx, SCORE).await?;
    let same_units = columns
        .iter()
        .find(|(name, _)| name == time)
        .and_then(|(_, d)| super::plan::TimeUnits::of(d));
    if same_units != Some(plan.time_units) {
        return Ok(None);
    }
    let t = plan.time_units.number(&format!("t.{}", super::quote(time)));
    let batch = one_row(
        ctx,
        &format!("SELECT COUNT(*) FILTER (WHERE {t} <= {newest:?}), COUNT({t}) FROM {SCORE} t"),
    )
    .await?;
    let count = |c: usize| batch.column(c).as_primitive::<Int64Type>().value(0);
    Ok((count(0) > 0).then(|| (count(0), count(1), newest)))
}

/// The summary as JSON, one object per key (`summary.json`).
pub fn summary_json(summary: &[ColumnSummary]) -> Value {
    Value::Array(
        summary
            .iter()
            .map(|s| {
                json!({
                    "key": s.key, "family": s.family, "prior": s.prior, "strength": s.strength,
                    "at_bound": s.at_bound, "levels": s.levels, "rows": s.rows,
                    "weight": s.weight,
                    "indicators": s.indicators, "merged_levels": s.merged_levels,
                    "treatment": s.treatment.name(), "why": s.why,
                    "half_life": s.half_life, "recency": s.recency,
                    "horizon": s.horizon, "horizon_reason": s.horizon_why,
                    "readers": s.readers, "readers_reason": s.readers_why,
                    "parent": s.parent, "parent_strength": s.parent_strength,
                    "unseen_share": s.unseen_share, "warnings": s.warnings,
                })
            })
            .collect(),
    )
}

/// The summary as a short table, one line per key.
pub fn summary_table(summary: &[ColumnSummary]) -> String {
    let mut out = format!(
        "{:<24} {:<10} {:<10} {:>9} {:>12} {:>10} {:>8} {:>10}  prior\n",
        "key", "as", "family", "levels", "rows", "strength", "unseen", "indicators"
    );
    for s in summary {
        out.push_str(&format!(
            "{:<24} {:<10} {:<10} {:>9} {:>12} {:>10} {:>8} {:>10}  {}{}\n",
            s.key,
            s.treatment.name(),
            s.family,
            s.levels,
            s.rows,
            crate::render::short(s.strength),
            s.unseen_share
                .map(|u| format!("{:.1}%", 100.0 * u))
                .unwrap_or_else(|| "-".into()),
            s.indicators,
            s.prior_text.split(" from ").next().unwrap_or_default(),
            if s.at_bound { " (at bound)" } else { "" }
        ));
    }
    for s in summary {
        if !s.why.is_empty() {
            out.push_str(&format!("{} as {}: {}\n", s.key, s.treatment.name(), s.why));
        }
        if let Some(parent) = &s.parent {
            out.push_str(&format!(
                "{}: each level's prior is centred on its {parent} level's posterior (without its \
                 own rows), {}\n",
                s.key,
                match s.parent_strength {
                    Some(v) => format!(
                        "{} pseudo-observations ({})",
                        crate::render::short(v),
                        if s.parent_strength_kept {
                            "as stored"
                        } else {
                            "fitted"
                        }
                    ),
                    None => "but no level has a parent: the key's own prior".to_string(),
                }
            ));
        }
        if let Some(why) = s.weight_differs() {
            out.push_str(&format!(
                "{}: the encodings hold a weight of {} from its {} rows ({why})\n",
                s.key,
                crate::render::short(s.weight),
                s.rows
            ));
        }
        for reason in [&s.readers_why, &s.horizon_why, &s.recency] {
            if !reason.is_empty() {
                out.push_str(&format!("{}: {reason}\n", s.key));
            }
        }
        if s.merged_levels > 0 {
            out.push_str(&format!(
                "{}: normalising the key text merged {} spellings into other levels\n",
                s.key, s.merged_levels
            ));
        }
        for w in &s.warnings {
            out.push_str(&format!("warning: {w}\n"));
        }
    }
    out
}

/// The scored rows per key as a short table (`EncodeOutput::unseen`, which
/// `unseen_levels.json` holds): rows, rows with the key, and rows and levels the
/// training rows never saw (those rows get the prior).
pub fn unseen_table(summary: &[ColumnSummary], unseen: &Value) -> String {
    let mut out = format!(
        "{:<24} {:>12} {:>12} {:>12} {:>14}\n",
        "key", "rows", "with key", "unseen rows", "unseen levels"
    );
    for s in summary {
        let count = |field: &str| {
            unseen[&s.key][field]
                .as_f64()
                .map(crate::render::short)
                .unwrap_or_else(|| "-".into())
        };
        out.push_str(&format!(
            "{:<24} {:>12} {:>12} {:>12} {:>14}\n",
            s.key,
            count("rows"),
            count("rows_with_key"),
            count("unseen_rows"),
            count("unseen_levels")
        ));
    }
    out
}

/// The files of a previous run in an output directory: the only files `write` replaces.
fn is_previous_run(dir: &Path) -> bool {
    dir.join("bundle.json").is_file()
}

/// Write the outputs into `dir`: `train_encoded.parquet`, `encodings/<key>.parquet`,
/// `bundle.json`, `summary.json`, with a scoring table `scored.parquet` and
/// `unseen_levels.json`, and with a report `report.html`. Everything is written into a new sibling directory first
/// and swapped in at the end, so `dir` holds exactly this run's files or, on
/// failure, what it held before. A `dir` that is neither empty nor a previous
/// run's output is refused unless `replace` is set.
pub async fn write(output: &EncodeOutput, dir: &Path, replace: bool) -> Result<()> {
    let io = |what: &str, path: &Path, e: std::io::Error| {
        EncodeError::Io(format!("cannot {what} {}: {e}", path.display()))
    };
    if dir.exists() {
        if !dir.is_dir() {
            return Err(EncodeError::Usage(format!(
                "--out {} exists and is not a directory",
                dir.display()
            )));
        }
        let empty = std::fs::read_dir(dir)
            .map_err(|e| io("read", dir, e))?
            .next()
            .is_none();
        if !empty && !is_previous_run(dir) && !replace {
            return Err(EncodeError::Usage(format!(
                "--out {} holds files that are not an earlier encode's output; choose an empty \
                 directory",
                dir.display()
            )));
        }
    }
    let parent = match dir.parent() {
        Some(p) if !p.as_os_str().is_empty() => p.to_path_buf(),
        _ => PathBuf::from("."),
    };
    std::fs::create_dir_all(&parent).map_err(|e| io("create", &parent, e))?;
    let name = dir
        .file_name()
        .map(|n| n.to_string_lossy().to_string())
        .unwrap_or_else(|| "out".into());
    let staging = parent.join(format!(".{name}.writing-{}", std::process::id()));
    std::fs::remove_dir_all(&staging).ok();
    let result = write_into(output, &staging).await;
    if let Err(e) = result {
        std::fs::remove_dir_all(&staging).ok();
        return Err(e);
    }
    let old = parent.join(format!(".{name}.old-{}", std::process::id()));
    if dir.exists() {
        std::fs::rename(dir, &old).map_err(|e| io("move aside", dir, e))?;
    }
    if let Err(e) = std::fs::rename(&staging, dir) {
        std::fs::rename(&old, dir).ok();
        return Err(io("move into place", dir, e));
    }
    std::fs::remove_dir_all(&old).ok();
    Ok(())
}

async fn write_parquet(df: &DataFrame, path: &Path) -> Result<()> {
    df.clone()
        .write_parquet(
            &path.display().to_string(),
            DataFrameWriteOptions::new().with_single_file_output(true),
            None,
        )
        .await?;
    Ok(())
}

async fn write_into(output: &EncodeOutput, dir: &Path) -> Result<()> {
    let io = |path: &Path, e: std::io::Error| {
        EncodeError::Io(format!("cannot write {}: {e}", path.display()))
    };
    std::fs::create_dir_all(dir.join("encodings")).map_err(|e| io(dir, e))?;
    for (key, df) in &output.encodings {
        write_parquet(df, &dir.join("encodings").join(format!("{key}.parquet"))).await?;
    }
    if let Some(train) = &output.train_encoded {
        write_parquet(train, &dir.join("train_encoded.parquet")).await?;
    }
    if let Some(scored) = &output.scored {
        write_parquet(scored, &dir.join("scored.parquet")).await?;
    }
    if let Some(unseen) = &output.unseen {
        let path = dir.join("unseen_levels.json");
        std::fs::write(
            &path,
            serde_json::to_string_pretty(unseen).unwrap_or_default(),
        )
        .map_err(|e| io(&path, e))?;
    }
    if let Some(report) = &output.report {
        let path = dir.join("report.html");
        std::fs::write(&path, report).map_err(|e| io(&path, e))?;
    }
    let path = dir.join("bundle.json");
    std::fs::write(&path, output.bundle.to_json()).map_err(|e| io(&path, e))?;
    let path = dir.join("summary.json");
    let summary = summary_json(&output.summary);
    std::fs::write(
        &path,
        serde_json::to_string_pretty(&summary).unwrap_or_default(),
    )
    .map_err(|e| io(&path, e))?;
    Ok(())
}
