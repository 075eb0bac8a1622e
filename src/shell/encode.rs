//! `posterity encode`: one command from a training file to leak-free training
//! encodings, serving encoding tables, a JSON serving bundle and (optionally) a
//! scored file. The workflow is SQL over posterity's own functions; `--show-sql`
//! prints every statement.
//!
//! Determinism: rows are numbered in file order (`__row`), folds come from
//! `fold_of(__row, k, seed)`, and every output is sorted, so the same inputs and
//! seed give byte-identical files whatever the thread count.

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use std::sync::Arc;

use datafusion::arrow::array::{Array, ArrayRef, AsArray, Int64Array, RecordBatch};
use datafusion::arrow::datatypes::{DataType, Field, Schema};
use datafusion::datasource::MemTable;
use posterity::bundle::{Bundle, ColumnEncoding};
use posterity::layout::{AnyPosterior, PosteriorColumn};
use serde_json::json;

use super::{Failure, Shell};

/// Which family the target gets.
#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum FamilyChoice {
    Beta,
    Gamma,
    Nig,
    Dirichlet,
}

/// How training rows are kept from seeing their own target.
#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum Method {
    /// K-fold out-of-fold: a row's encoding uses the other folds only.
    Kfold,
    /// Leave-one-out: a row's encoding uses every other row.
    Loo,
    /// Time order: a row's encoding uses earlier rows only (needs --time-column).
    Time,
}

/// How as-of encodings treat rows that share a time.
#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum TimeTies {
    /// A row sees rows of strictly earlier times only; rows at one time get the same encoding.
    Strict,
    /// Rows at one time also see the rows before them in file order (their outcomes
    /// are then known to each other: use only when file order is the true order).
    FileOrder,
}

#[derive(clap::Args, Debug, Clone)]
pub struct EncodeArgs {
    /// Training file (Parquet, CSV, TSV or NDJSON).
    #[arg(long)]
    pub train: String,
    /// Target column.
    #[arg(long)]
    pub target: String,
    /// Categorical columns to encode, comma-separated.
    #[arg(long, value_delimiter = ',', required = true)]
    pub columns: Vec<String>,
    /// Output directory.
    #[arg(long)]
    pub out: PathBuf,
    /// Interaction keys, comma-separated, each two or more columns joined by ':' (e.g. breed:clinic).
    #[arg(long, value_delimiter = ',')]
    pub interactions: Vec<String>,
    /// Family (default: from the target: 0/1 or boolean -> beta, other integers -> gamma,
    /// floats -> nig, text -> dirichlet).
    #[arg(long, value_enum)]
    pub family: Option<FamilyChoice>,
    /// Prior: jeffreys, uniform, fitted (empirical Bayes per column), or numbers
    /// "a,b" (beta), "shape,rate" (gamma), "mu0,kappa0,alpha0,beta0" (nig), "c" (dirichlet).
    #[arg(long, default_value = "fitted")]
    pub prior: String,
    /// Training encodings: kfold (default), loo, or time (default when --time-column is given).
    #[arg(long, value_enum)]
    pub method: Option<Method>,
    /// Number of folds for kfold.
    #[arg(long, default_value_t = 5)]
    pub folds: u32,
    /// Column giving the time order for --method time.
    #[arg(long)]
    pub time_column: Option<String>,
    /// Rows at the same time: strict (default; they never see each other) or file-order.
    #[arg(long, value_enum, default_value = "strict")]
    pub time_ties: TimeTies,
    /// Exposure column for the gamma family (events per unit of exposure).
    #[arg(long)]
    pub exposure: Option<String>,
    /// Readers: mean, sd, var, evidence, qNN (quantile at NN percent), above:T (P(theta > T)).
    #[arg(long, value_delimiter = ',', default_value = "mean,sd")]
    pub readers: Vec<String>,
    /// Add a seeded posterior draw per row and column (stochastic training encodings).
    #[arg(long, value_name = "SEED")]
    pub draws: Option<u64>,
    /// Seed of the fold assignment.
    #[arg(long, default_value_t = 0)]
    pub seed: u64,
    /// File to score with the full-data encodings (unseen levels get the prior).
    #[arg(long)]
    pub score: Option<String>,
    /// Print every SQL statement run.
    #[arg(long)]
    pub show_sql: bool,
}

/// One encoded key: a column or an interaction of columns.
struct Key {
    name: String,
    expr: String,
    /// The input columns it is built from.
    columns: Vec<String>,
}

fn quote(ident: &str) -> String {
    format!("\"{}\"", ident.replace('"', "\"\""))
}

fn sanitize(s: &str) -> String {
    s.chars()
        .map(|c| {
            if c.is_ascii_alphanumeric() || c == '_' {
                c
            } else {
                '_'
            }
        })
        .collect()
}

fn text(s: &str) -> String {
    format!("'{}'", s.replace('\'', "''"))
}

/// A reader as (column suffix, SQL template with `{p}` and `{class}`).
fn reader_sql(spec: &str) -> Result<(String, String), Failure> {
    let s = spec.trim();
    let out = match s {
        "mean" => ("mean".into(), "posterior_mean({p}{class})".into()),
        "sd" => ("sd".into(), "posterior_sd({p}{class})".into()),
        "var" => ("var".into(), "posterior_var({p}{class})".into()),
        "evidence" => ("evidence".into(), "posterior_evidence({p})".into()),
        _ if s.starts_with('q') => {
            let percent: f64 = s[1..].parse().map_err(|_| {
                Failure::usage(format!("--readers: '{s}' is not qNN (e.g. q05, q95)"))
            })?;
            if !(percent > 0.0 && percent < 100.0) {
                return Err(Failure::usage(format!(
                    "--readers: '{s}' needs a percentage strictly between 0 and 100"
                )));
            }
            (
                sanitize(s),
                format!("posterior_quantile({{p}}{{class}}, {})", percent / 100.0),
            )
        }
        _ if s.starts_with("above:") => {
            let t: f64 = s[6..].parse().map_err(|_| {
                Failure::usage(format!("--readers: '{s}' is not above:T with a number T"))
            })?;
            (
                format!("above_{}", sanitize(&s[6..])),
                format!("posterior_prob_above({{p}}{{class}}, {t})"),
            )
        }
        _ => {
            return Err(Failure::usage(format!(
                "--readers: unknown reader '{s}'; use mean, sd, var, evidence, qNN or above:T"
            )))
        }
    };
    Ok(out)
}

/// Everything the SQL needs to know about the fit.
struct Plan {
    family: FamilyChoice,
    classes: Vec<String>,
    fitted: bool,
    prior: String,
    fit: String,
}

pub async fn run(shell: &Shell, args: &EncodeArgs) -> Result<(), Failure> {
    let method = match (args.method, &args.time_column) {
        (Some(Method::Time), None) => {
            return Err(Failure::usage("--method time needs --time-column"))
        }
        (Some(m), _) => m,
        (None, Some(_)) => Method::Time,
        (None, None) => Method::Kfold,
    };
    if args.folds < 2 {
        return Err(Failure::usage("--folds must be at least 2"));
    }
    std::fs::create_dir_all(args.out.join("encodings"))
        .map_err(|e| Failure::query(format!("cannot create {}: {e}", args.out.display())))?;
    let sql = |s: String| async move {
        if args.show_sql {
            println!("{s};\n");
        }
        shell.collect(&s).await
    };

    let keys = keys(args)?;
    refuse_leaky_keys(args, &keys)?;
    let key_columns_read_as_text: Vec<String> =
        keys.iter().flat_map(|k| k.columns.clone()).collect();
    let columns = load_numbered(shell, "train", &args.train, &key_columns_read_as_text).await?;
    for c in keys
        .iter()
        .flat_map(|k| &k.columns)
        .chain(std::iter::once(&args.target))
        .chain(&args.time_column)
        .chain(&args.exposure)
    {
        if !columns.iter().any(|(n, _)| n == c) {
            return Err(Failure::usage(format!(
                "column '{c}' is not in {} (columns: {})",
                args.train,
                columns
                    .iter()
                    .map(|(n, _)| n.as_str())
                    .collect::<Vec<_>>()
                    .join(", ")
            )));
        }
    }
    let plan = plan(shell, args, &columns).await?;
    let readers = args
        .readers
        .iter()
        .map(|r| reader_sql(r))
        .collect::<Result<Vec<_>, _>>()?;
    let target = quote(&args.target);

    // Keys, folds and the row number on one table.
    sql(format!(
        "CREATE TABLE __keyed AS SELECT *, {}, fold_of(__row, {}, {}) AS __fold FROM train",
        key_columns(&keys),
        args.folds,
        args.seed
    ))
    .await?;

    let mut selects = vec![];
    let mut joins = vec![];
    let mut bundle_columns = BTreeMap::new();
    for (i, key) in keys.iter().enumerate() {
        let fit = plan.fit.replace("{y}", &format!("t.{target}"));
        sql(format!("CREATE TABLE __fit{i} AS SELECT __k{i} AS level, {fit} AS p FROM __keyed t WHERE __k{i} IS NOT NULL GROUP BY __k{i}")).await?;
        let prior_expr = if plan.fitted {
            sql(format!(
                "CREATE TABLE __prior{i} AS SELECT fit_prior(p) AS prior FROM __fit{i}"
            ))
            .await?;
            format!("__prior{i}.prior")
        } else {
            plan.prior.clone()
        };
        let reprior = |table: &str, extra: &str| {
            if plan.fitted {
                format!("SELECT level{extra}, posterior_with_prior(p, q.prior) AS p FROM {table} CROSS JOIN __prior{i} q")
            } else {
                format!("SELECT level{extra}, p FROM {table}")
            }
        };
        sql(format!(
            "CREATE TABLE __enc{i} AS {}",
            reprior(&format!("__fit{i}"), "")
        ))
        .await?;
        let train_p = match method {
            Method::Kfold => {
                sql(format!(
                    "CREATE TABLE __foldfit{i} AS SELECT __k{i} AS level, __fold, {fit} AS p FROM __keyed t WHERE __k{i} IS NOT NULL GROUP BY __k{i}, __fold"
                ))
                .await?;
                sql(format!(
                    "CREATE TABLE __fold{i} AS {}",
                    reprior(&format!("__foldfit{i}"), ", __fold")
                ))
                .await?;
                joins.push(format!(
                    "LEFT JOIN __enc{i} e{i} ON e{i}.level = t.__k{i} LEFT JOIN __fold{i} f{i} ON f{i}.level = t.__k{i} AND f{i}.__fold = t.__fold"
                ));
                format!("posterior_subtract(e{i}.p, f{i}.p)")
            }
            Method::Loo => {
                joins.push(format!("LEFT JOIN __enc{i} e{i} ON e{i}.level = t.__k{i}"));
                let removed = match (plan.family, &args.exposure) {
                    (FamilyChoice::Gamma, Some(x)) => {
                        format!("posterior_without(e{i}.p, t.{target}, t.{})", quote(x))
                    }
                    _ => format!("posterior_without(e{i}.p, t.{target})"),
                };
                let usable = match (plan.family, &args.exposure) {
                    (FamilyChoice::Gamma, Some(x)) => {
                        format!("t.{target} IS NULL OR t.{} IS NULL", quote(x))
                    }
                    _ => format!("t.{target} IS NULL"),
                };
                format!("CASE WHEN {usable} THEN e{i}.p ELSE {removed} END")
            }
            Method::Time if args.time_ties == TimeTies::Strict => {
                // Per level and time, then pooled over strictly earlier times: rows at
                // one time share one encoding. A level's first time (and a row with
                // no time) gets the prior through the COALESCE below.
                let time = quote(args.time_column.as_deref().unwrap_or_default());
                sql(format!(
                    "CREATE TABLE __asof{i} AS SELECT level, __time, posterior_pool(p) OVER (PARTITION BY level ORDER BY __time ROWS BETWEEN UNBOUNDED PRECEDING AND 1 PRECEDING) AS p FROM (SELECT __k{i} AS level, t.{time} AS __time, {fit} AS p FROM __keyed t WHERE __k{i} IS NOT NULL AND t.{time} IS NOT NULL GROUP BY __k{i}, t.{time})"
                ))
                .await?;
                joins.push(format!(
                    "LEFT JOIN __asof{i} a{i} ON a{i}.level = t.__k{i} AND a{i}.__time = t.{time}"
                ));
                if plan.fitted {
                    format!("posterior_with_prior(a{i}.p, __prior{i}.prior)")
                } else {
                    format!("a{i}.p")
                }
            }
            Method::Time => {
                let time = quote(args.time_column.as_deref().unwrap_or_default());
                let window = format!(
                    "{fit} OVER (PARTITION BY __k{i} ORDER BY t.{time}, t.__row ROWS BETWEEN UNBOUNDED PRECEDING AND 1 PRECEDING)"
                );
                let window = if plan.fitted {
                    format!("posterior_with_prior({window}, q.prior)")
                } else {
                    window
                };
                let from = if plan.fitted {
                    format!("__keyed t CROSS JOIN __prior{i} q")
                } else {
                    "__keyed t".into()
                };
                sql(format!("CREATE TABLE __asof{i} AS SELECT t.__row, CASE WHEN t.__k{i} IS NULL THEN NULL ELSE {window} END AS p FROM {from}")).await?;
                joins.push(format!("LEFT JOIN __asof{i} a{i} ON a{i}.__row = t.__row"));
                format!("a{i}.p")
            }
        };
        if plan.fitted {
            joins.push(format!("CROSS JOIN __prior{i}"));
        }
        let p = format!("COALESCE({train_p}, {prior_expr})");
        selects.extend(reader_columns(&key.name, &p, &readers, &plan.classes));
        if let Some(seed) = args.draws {
            let draw = |class: &str| {
                format!("posterior_draw({p}{class}, fold_of(t.__row, 9223372036854775807, {seed}))")
            };
            if plan.classes.is_empty() {
                selects.push(format!(
                    "{} AS {}",
                    draw(""),
                    quote(&format!("{}_draw", key.name))
                ));
            } else {
                for c in &plan.classes {
                    selects.push(format!(
                        "{} AS {}",
                        draw(&format!(", {}", text(c))),
                        quote(&format!("{}_{}_draw", key.name, sanitize(c)))
                    ));
                }
            }
        }

        // Serving encoding table and bundle entry (full-data posteriors).
        let enc_readers = reader_columns(&key.name, "p", &readers, &plan.classes);
        let path = args
            .out
            .join("encodings")
            .join(format!("{}.parquet", key.name));
        write_parquet(
            shell,
            args.show_sql,
            &format!(
                "SELECT level AS {}, p, {} FROM __enc{i} ORDER BY level",
                quote(&key.name),
                enc_readers.join(", ")
            ),
            &path,
        )
        .await?;
        bundle_columns.insert(
            key.name.clone(),
            bundle_column(shell, i, key, &prior_expr, plan.fitted).await?,
        );
    }

    write_encoded(
        shell,
        args,
        "__keyed",
        &columns,
        &selects,
        &joins,
        "train_encoded.parquet",
    )
    .await?;

    let bundle = Bundle {
        target: args.target.clone(),
        family: format!("{:?}", plan.family).to_lowercase(),
        readers: args.readers.clone(),
        columns: bundle_columns,
    };
    write_file(&args.out.join("bundle.json"), &bundle.to_json())?;

    let mut summary = format!(
        "encoded {} key(s) of {} ({} family, {} prior, {} training encodings) into {}\n",
        keys.len(),
        args.train,
        format!("{:?}", plan.family).to_lowercase(),
        args.prior,
        format!("{method:?}").to_lowercase(),
        args.out.display()
    );
    if let Some(score) = &args.score {
        summary.push_str(&score_file(shell, args, score, &keys, &readers, &plan).await?);
    }
    print!("{summary}");
    Ok(())
}

/// Reader columns `<key>_<reader>` (per class for Dirichlet) over posterior expression `p`.
fn reader_columns(
    key: &str,
    p: &str,
    readers: &[(String, String)],
    classes: &[String],
) -> Vec<String> {
    let mut out = Vec::new();
    for (suffix, template) in readers {
        if classes.is_empty() || !template.contains("{class}") {
            let e = template.replace("{p}", p).replace("{class}", "");
            out.push(format!("{e} AS {}", quote(&format!("{key}_{suffix}"))));
        } else {
            for c in classes {
                let e = template
                    .replace("{p}", p)
                    .replace("{class}", &format!(", {}", text(c)));
                out.push(format!(
                    "{e} AS {}",
                    quote(&format!("{key}_{}_{suffix}", sanitize(c)))
                ));
            }
        }
    }
    out
}

/// A key built from the target (or time-ordered by it) hands every row its own
/// outcome: refuse it rather than write a perfect leak.
fn refuse_leaky_keys(args: &EncodeArgs, keys: &[Key]) -> Result<(), Failure> {
    for key in keys {
        if key.columns.contains(&args.target) {
            let what = if key.columns.len() == 1 {
                "--columns".to_string()
            } else {
                format!("the interaction '{}'", key.columns.join(":"))
            };
            return Err(Failure::usage(format!(
                "{what} includes the target '{}': its encoding would be the row's own outcome \
                 (a perfect leak); encode other columns",
                args.target
            )));
        }
        if let Some(time) = &args.time_column {
            if key.columns.len() == 1 && key.columns[0] == *time {
                return Err(Failure::usage(format!(
                    "--time-column '{time}' is also encoded as a key: every row of a level shares \
                     its time, so as-of encodings of it would all be the prior"
                )));
            }
        }
    }
    if args.time_column.as_deref() == Some(args.target.as_str()) {
        return Err(Failure::usage(format!(
            "--time-column '{}' is the target: ordering rows by their own outcome leaks it",
            args.target
        )));
    }
    Ok(())
}

fn keys(args: &EncodeArgs) -> Result<Vec<Key>, Failure> {
    let mut keys: Vec<Key> = args
        .columns
        .iter()
        .map(|c| Key {
            name: sanitize(c),
            expr: format!("CAST({} AS VARCHAR)", quote(c)),
            columns: vec![c.clone()],
        })
        .collect();
    for spec in &args.interactions {
        let parts: Vec<&str> = spec.split(':').map(str::trim).collect();
        if parts.len() < 2 || parts.iter().any(|p| p.is_empty()) {
            return Err(Failure::usage(format!(
                "--interactions: '{spec}' must be two or more columns joined by ':'"
            )));
        }
        // Collision-free: each part's text prefixed by its length in characters
        // (posterity::bundle::interaction_key builds the same key outside SQL).
        let prefixed: Vec<String> = parts
            .iter()
            .map(|p| {
                let text = format!("CAST({} AS VARCHAR)", quote(p));
                format!("character_length({text}), ':', {text}")
            })
            .collect();
        let all_present = parts
            .iter()
            .map(|p| format!("{} IS NOT NULL", quote(p)))
            .collect::<Vec<_>>()
            .join(" AND ");
        keys.push(Key {
            name: parts
                .iter()
                .map(|p| sanitize(p))
                .collect::<Vec<_>>()
                .join("_x_"),
            expr: format!(
                "CASE WHEN {all_present} THEN concat({}) END",
                prefixed.join(", '|', ")
            ),
            columns: parts.iter().map(|p| p.to_string()).collect(),
        });
    }
    Ok(keys)
}

/// Family, prior and fit expression (with `{y}` for the target).
async fn plan(
    shell: &Shell,
    args: &EncodeArgs,
    columns: &[(String, DataType)],
) -> Result<Plan, Failure> {
    let target_type = columns
        .iter()
        .find(|(n, _)| *n == args.target)
        .map(|(_, t)| t.clone())
        .unwrap_or(DataType::Null);
    let t = quote(&args.target);
    let binary = || async {
        let b = shell
            .collect(&format!(
                "SELECT COUNT(*) FROM train WHERE {t} IS NOT NULL AND {t} NOT IN (0, 1)"
            ))
            .await?;
        Ok::<bool, Failure>(
            b[0].column(0)
                .as_primitive::<datafusion::arrow::datatypes::Int64Type>()
                .value(0)
                == 0,
        )
    };
    let family = match args.family {
        Some(f) => f,
        None => match &target_type {
            DataType::Boolean => FamilyChoice::Beta,
            d if d.is_integer() => {
                if binary().await? {
                    FamilyChoice::Beta
                } else {
                    FamilyChoice::Gamma
                }
            }
            d if d.is_floating() => {
                if binary().await? {
                    FamilyChoice::Beta
                } else {
                    FamilyChoice::Nig
                }
            }
            DataType::Utf8 | DataType::LargeUtf8 | DataType::Utf8View => FamilyChoice::Dirichlet,
            other => {
                return Err(Failure::usage(format!(
                    "cannot infer a family for target type {other}; pass --family"
                )))
            }
        },
    };
    let classes = if family == FamilyChoice::Dirichlet {
        let b = shell.collect(&format!("SELECT DISTINCT CAST({t} AS VARCHAR) AS c FROM train WHERE {t} IS NOT NULL ORDER BY c")).await?;
        let mut classes = Vec::new();
        for batch in &b {
            let col = datafusion::arrow::compute::cast(batch.column(0), &DataType::Utf8)
                .map_err(|e| Failure::query(e.to_string()))?;
            let col = col.as_string::<i32>();
            classes.extend((0..col.len()).map(|i| col.value(i).to_string()));
        }
        if classes.is_empty() {
            return Err(Failure::query(format!(
                "target '{}' has no non-NULL values",
                args.target
            )));
        }
        classes
    } else {
        vec![]
    };
    let fitted = args.prior == "fitted";
    let numbers: Option<Vec<f64>> = args
        .prior
        .split(',')
        .map(|x| x.trim().parse().ok())
        .collect();
    let prior = match (family, args.prior.as_str(), &numbers) {
        (FamilyChoice::Beta, "jeffreys" | "fitted", _) => "beta_prior(0.5, 0.5)".to_string(),
        (FamilyChoice::Beta, "uniform", _) => "beta_prior(1, 1)".to_string(),
        (FamilyChoice::Beta, _, Some(v)) if v.len() == 2 => format!("beta_prior({}, {})", v[0], v[1]),
        (FamilyChoice::Gamma, "jeffreys" | "uniform" | "fitted", _) => "gamma_prior(0.5, 1)".to_string(),
        (FamilyChoice::Gamma, _, Some(v)) if v.len() == 2 => format!("gamma_prior({}, {})", v[0], v[1]),
        (FamilyChoice::Nig, "jeffreys" | "uniform" | "fitted", _) => {
            // A weak prior on the data's own scale: centred on the overall mean, worth one
            // observation, with the overall variance as the expected within-level variance.
            // posterity's own fit, not AVG/VAR_POP: its sums do not depend on the
            // thread count, so neither does the prior.
            let b = shell.collect(&format!("SELECT posterior_evidence(p), get_field(p, 'mean'), get_field(p, 'm2') / get_field(p, 'n') FROM (SELECT nig_posterior(CAST({t} AS DOUBLE)) AS p FROM train)")).await?;
            let get = |i: usize| {
                let c = b[0].column(i).as_primitive::<datafusion::arrow::datatypes::Float64Type>();
                if c.is_null(0) || !c.value(0).is_finite() { 0.0 } else { c.value(0) }
            };
            let var = if get(0) > 0.0 && get(2) > 0.0 { get(2) } else { 1.0 };
            format!("nig_prior({}, 1, 2, {})", get(1), var)
        }
        (FamilyChoice::Nig, _, Some(v)) if v.len() == 4 => format!("nig_prior({}, {}, {}, {})", v[0], v[1], v[2], v[3]),
        (FamilyChoice::Dirichlet, "jeffreys" | "fitted", _) => format!("dirichlet_prior([{}], 0.5)", classes.iter().map(|c| text(c)).collect::<Vec<_>>().join(", ")),
        (FamilyChoice::Dirichlet, "uniform", _) => format!("dirichlet_prior([{}], 1)", classes.iter().map(|c| text(c)).collect::<Vec<_>>().join(", ")),
        (FamilyChoice::Dirichlet, _, Some(v)) if v.len() == 1 => format!("dirichlet_prior([{}], {})", classes.iter().map(|c| text(c)).collect::<Vec<_>>().join(", "), v[0]),
        _ => return Err(Failure::usage(format!("--prior '{}' does not fit the {family:?} family; use jeffreys, uniform, fitted or its numbers", args.prior))),
    };
    let fit = match family {
        FamilyChoice::Beta => format!("beta_posterior({{y}}, {prior})"),
        FamilyChoice::Nig => format!("nig_posterior({{y}}, {prior})"),
        FamilyChoice::Gamma => match &args.exposure {
            Some(x) => format!("gamma_posterior({{y}}, t.{}, {prior})", quote(x)),
            None => format!("gamma_posterior({{y}}, 1.0, {prior})"),
        },
        FamilyChoice::Dirichlet => format!("dirichlet_posterior(CAST({{y}} AS VARCHAR), {prior})"),
    };
    Ok(Plan {
        family,
        classes,
        fitted,
        prior,
        fit,
    })
}

/// Read a file in file order, number its rows (`__row`) and register it as `name`.
/// Key columns of CSV files are read as text exactly as written (`00123` stays
/// `00123`).
async fn load_numbered(
    shell: &Shell,
    name: &str,
    path: &str,
    key_columns: &[String],
) -> Result<Vec<(String, DataType)>, Failure> {
    let raw = format!("__{name}_file");
    shell
        .register_table_with_text(&format!("{raw}={path}"), key_columns)
        .await?;
    // File order needs each scan partition to read exactly its own byte ranges: the
    // engine's work stealing lets an idle partition take a sibling's ranges, which
    // shuffles the row numbers (and so the folds) from run to run.
    let mut state = shell.ctx.state();
    state
        .config_mut()
        .options_mut()
        .execution
        .enable_file_stream_work_stealing = false;
    let df = datafusion::prelude::SessionContext::new_with_state(state)
        .table(&raw)
        .await
        .map_err(|e| Failure::query(e.to_string()))?;
    let parts = df
        .collect_partitioned()
        .await
        .map_err(|e| Failure::query(format!("{path}: {e}")))?;
    let schema = shell
        .ctx
        .table(&raw)
        .await
        .map_err(|e| Failure::query(e.to_string()))?
        .schema()
        .as_arrow()
        .clone();
    let mut fields: Vec<Field> = schema.fields().iter().map(|f| f.as_ref().clone()).collect();
    fields.push(Field::new("__row", DataType::Int64, false));
    let numbered = Arc::new(Schema::new(fields));
    let mut row = 0i64;
    let mut batches = Vec::new();
    for batch in parts.into_iter().flatten() {
        let n = batch.num_rows() as i64;
        let mut columns: Vec<ArrayRef> = batch.columns().to_vec();
        columns.push(Arc::new(Int64Array::from_iter_values(row..row + n)));
        row += n;
        batches.push(
            RecordBatch::try_new(numbered.clone(), columns)
                .map_err(|e| Failure::query(e.to_string()))?,
        );
    }
    let partitions = shell.ctx.state().config().target_partitions().max(1);
    let chunk = batches.len().div_ceil(partitions).max(1);
    let split: Vec<Vec<RecordBatch>> = batches.chunks(chunk).map(|c| c.to_vec()).collect();
    let split = if split.is_empty() {
        vec![vec![]]
    } else {
        split
    };
    let table = MemTable::try_new(numbered, split).map_err(|e| Failure::query(e.to_string()))?;
    shell.ctx.deregister_table(name).ok();
    shell
        .ctx
        .register_table(name, Arc::new(table))
        .map_err(|e| Failure::query(e.to_string()))?;
    Ok(schema
        .fields()
        .iter()
        .map(|f| (f.name().clone(), f.data_type().clone()))
        .collect())
}

/// All original columns plus the reader columns, in file order, into `file` in the output directory.
async fn write_encoded(
    shell: &Shell,
    args: &EncodeArgs,
    table: &str,
    columns: &[(String, DataType)],
    selects: &[String],
    joins: &[String],
    file: &str,
) -> Result<(), Failure> {
    let original: Vec<String> = columns
        .iter()
        .map(|(n, _)| format!("t.{}", quote(n)))
        .collect();
    let query = format!(
        "SELECT {}, {} FROM {table} t {} ORDER BY t.__row",
        original.join(", "),
        selects.join(", "),
        joins.join(" ")
    );
    write_parquet(shell, args.show_sql, &query, &args.out.join(file)).await
}

/// `key AS __k0, ...` for every key.
fn key_columns(keys: &[Key]) -> String {
    keys.iter()
        .enumerate()
        .map(|(i, k)| format!("{} AS __k{i}", k.expr))
        .collect::<Vec<_>>()
        .join(", ")
}

/// Run `query` into a Parquet file through a temporary file and a rename.
async fn write_parquet(shell: &Shell, show: bool, query: &str, path: &Path) -> Result<(), Failure> {
    let tmp = path.with_file_name(format!(
        ".{}.tmp.parquet",
        path.file_name().unwrap_or_default().to_string_lossy()
    ));
    let copy = format!(
        "COPY ({query}) TO {} STORED AS PARQUET",
        text(&tmp.display().to_string())
    );
    if show {
        println!("{copy};\n");
    }
    if let Err(e) = shell.collect(&copy).await {
        std::fs::remove_file(&tmp).ok();
        return Err(e);
    }
    std::fs::rename(&tmp, path)
        .map_err(|e| Failure::query(format!("cannot write {}: {e}", path.display())))
}

fn write_file(path: &Path, text: &str) -> Result<(), Failure> {
    super::output::write_atomically(path, text)
        .map_err(|e| Failure::query(format!("cannot write {}: {e}", path.display())))
}

async fn bundle_column(
    shell: &Shell,
    i: usize,
    key: &Key,
    prior_expr: &str,
    fitted: bool,
) -> Result<ColumnEncoding, Failure> {
    let from = if fitted {
        format!("__prior{i}")
    } else {
        "(SELECT 1)".to_string()
    };
    let prior_batches = shell
        .collect(&format!("SELECT {prior_expr} FROM {from}"))
        .await?;
    let prior = first_posterior(&prior_batches)?;
    let rows = shell
        .collect(&format!("SELECT level, p FROM __enc{i} ORDER BY level"))
        .await?;
    let mut levels = BTreeMap::new();
    for batch in &rows {
        let names = datafusion::arrow::compute::cast(batch.column(0), &DataType::Utf8)
            .map_err(|e| Failure::query(e.to_string()))?;
        let names = names.as_string::<i32>();
        let column = PosteriorColumn::new("encode", batch.column(1))
            .map_err(|e| Failure::query(e.to_string()))?;
        for r in 0..batch.num_rows() {
            if let Some(p) = column.get(r).map_err(|e| Failure::query(e.to_string()))? {
                levels.insert(names.value(r).to_string(), p);
            }
        }
    }
    Ok(ColumnEncoding {
        key_columns: key.columns.clone(),
        prior,
        levels,
    })
}

fn first_posterior(batches: &[RecordBatch]) -> Result<AnyPosterior, Failure> {
    let batch = batches
        .iter()
        .find(|b| b.num_rows() > 0)
        .ok_or_else(|| Failure::query("no prior"))?;
    let column = PosteriorColumn::new("encode", batch.column(0))
        .map_err(|e| Failure::query(e.to_string()))?;
    column
        .get(0)
        .map_err(|e| Failure::query(e.to_string()))?
        .ok_or_else(|| Failure::query("NULL prior"))
}

/// Score a file with the full-data encodings; returns the unseen-level report text.
async fn score_file(
    shell: &Shell,
    args: &EncodeArgs,
    path: &str,
    keys: &[Key],
    readers: &[(String, String)],
    plan: &Plan,
) -> Result<String, Failure> {
    let text: Vec<String> = keys.iter().flat_map(|k| k.columns.clone()).collect();
    let columns = load_numbered(shell, "score", path, &text).await?;
    let create = format!(
        "CREATE TABLE __score_keyed AS SELECT *, {} FROM score",
        key_columns(keys)
    );
    if args.show_sql {
        println!("{create};\n");
    }
    shell.collect(&create).await?;
    let mut selects = Vec::new();
    let mut joins = Vec::new();
    let mut report = serde_json::Map::new();
    for (i, key) in keys.iter().enumerate() {
        let prior_expr = if plan.fitted {
            format!("__prior{i}.prior")
        } else {
            plan.prior.clone()
        };
        joins.push(format!("LEFT JOIN __enc{i} e{i} ON e{i}.level = t.__k{i}"));
        if plan.fitted {
            joins.push(format!("CROSS JOIN __prior{i}"));
        }
        selects.extend(reader_columns(
            &key.name,
            &format!("COALESCE(e{i}.p, {prior_expr})"),
            readers,
            &plan.classes,
        ));
        let counts = shell
            .collect(&format!(
                "SELECT COUNT(*), COUNT(t.__k{i}), COUNT(t.__k{i}) FILTER (WHERE e.level IS NULL), COUNT(DISTINCT t.__k{i}) FILTER (WHERE e.level IS NULL) FROM __score_keyed t LEFT JOIN __enc{i} e ON e.level = t.__k{i}"
            ))
            .await?;
        let v = |c: usize| {
            counts[0]
                .column(c)
                .as_primitive::<datafusion::arrow::datatypes::Int64Type>()
                .value(0)
        };
        report.insert(
            key.name.clone(),
            json!({"rows": v(0), "rows_with_key": v(1), "unseen_rows": v(2), "unseen_levels": v(3)}),
        );
    }
    write_encoded(
        shell,
        args,
        "__score_keyed",
        &columns,
        &selects,
        &joins,
        "scored.parquet",
    )
    .await?;
    let text = serde_json::to_string_pretty(&serde_json::Value::Object(report)).unwrap_or_default();
    write_file(&args.out.join("unseen_levels.json"), &text)?;
    Ok(format!(
        "scored {path} into {}; unseen levels per key:\n{text}\n",
        args.out.join("scored.parquet").display()
    ))
}
