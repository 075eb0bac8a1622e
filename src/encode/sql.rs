//! The statements of a plan, as data. Every identifier is quoted and every text
//! literal escaped where it is built; nothing from the data passes through a
//! template, so a class, level or column named `{y}`, `a"b` or `naïve café` is
//! only ever data.
//!
//! Readers run once per distinct posterior — per level, per (level, fold), per
//! (level, time) — and are joined to the rows; only leave-one-out and file-order
//! as-of encodings have a posterior per row.

use super::options::{Method, TimeTies};
use super::resolve::{EncodePlan, KeyPlan, OutputColumn};
use super::{quote, text};
use crate::layout::Kind;

/// The numbered training rows (`__row` in table order), registered by `run`.
pub(crate) const TRAIN: &str = "__encode_train_rows";
/// The numbered scoring rows.
pub(crate) const SCORE: &str = "__encode_score_rows";

/// One statement: what it is for, its SQL, and for a result the output it makes.
#[derive(Debug, Clone, PartialEq)]
pub struct Statement {
    pub name: String,
    pub sql: String,
    /// `Some(name)` for a query whose result is an output (`train_encoded`,
    /// `encodings/<key>`, `scored`); `None` for a table the later statements use.
    pub output: Option<String>,
}

fn stage(name: impl Into<String>, table: &str, query: String) -> Statement {
    Statement {
        name: name.into(),
        sql: format!("CREATE OR REPLACE TABLE {table} AS {query}"),
        output: None,
    }
}

fn output(name: impl Into<String>, query: String) -> Statement {
    let name = name.into();
    Statement {
        name: name.clone(),
        sql: query,
        output: Some(name),
    }
}

impl EncodePlan {
    /// The fit of the target over table alias `t` for `key` (its own prior when it
    /// has one, else the base prior; re-priored later when the prior is fitted).
    fn fit(&self, key: &KeyPlan) -> String {
        let y = format!("t.{}", quote(&self.options.target));
        let prior = key.prior.as_ref().unwrap_or(&self.base_prior);
        // With a half-life, each row weighs 2^(-age / half-life), its age counted from
        // the newest training row (a row with no time weighs nothing).
        let weight = match (
            self.newest_time,
            self.options.half_life,
            &self.options.time_column,
        ) {
            (Some(newest), Some(h), Some(time)) => Some(format!(
                "decay_weight({newest} - CAST(t.{} AS DOUBLE), {h})",
                quote(time)
            )),
            _ => None,
        };
        let w = weight
            .as_ref()
            .map(|w| format!(", {w}"))
            .unwrap_or_default();
        match self.family {
            Kind::Beta => format!("beta_posterior({y}, {prior}{w})"),
            Kind::Nig => format!("nig_posterior({y}, {prior}{w})"),
            Kind::Gamma => {
                let exposure = match &self.options.exposure {
                    Some(x) => format!("t.{}", quote(x)),
                    None => "1.0".into(),
                };
                match &weight {
                    // Weighted Poisson rows: events and exposure both scaled.
                    Some(w) => format!("gamma_posterior({y} * {w}, {exposure} * {w}, {prior})"),
                    None => format!("gamma_posterior({y}, {exposure}, {prior})"),
                }
            }
            Kind::Dirichlet => format!("dirichlet_posterior(CAST({y} AS VARCHAR), {prior}{w})"),
        }
    }

    /// Posterior expression `p` under the column's prior `q.prior`.
    fn repriored(&self, p: &str) -> String {
        if self.fitted {
            format!("posterior_with_prior({p}, q.prior)")
        } else {
            p.to_string()
        }
    }

    /// `reader(p) AS "name", ...` for every reader column of `key` (draws and
    /// indicators excluded).
    fn readers(&self, key: &KeyPlan, p: &str) -> Vec<String> {
        self.reader_columns(key)
            .into_iter()
            .map(|(name, reader, class)| {
                format!("{} AS {}", reader.sql(p, class.as_deref()), quote(&name))
            })
            .collect()
    }

    /// Final columns of `key` `i`: each reader from `source` (alias), falling back
    /// to the prior's reader in `fallback`; indicators from the level's rank in
    /// `top{i}`; draws from the posterior column `p`.
    fn final_columns(&self, i: usize, key: &KeyPlan, source: &str, fallback: &str) -> Vec<String> {
        self.output_columns(key)
            .into_iter()
            .map(|(name, column)| {
                let value = match column {
                    OutputColumn::Reader { .. } => {
                        format!("COALESCE({source}.{q}, {fallback}.{q})", q = quote(&name))
                    }
                    OutputColumn::Indicator { rank } => {
                        format!("CAST(COALESCE(top{i}.rank = {rank}, false) AS INT)")
                    }
                    OutputColumn::Draw { class } => {
                        let class = class.map(|c| format!(", {}", text(&c))).unwrap_or_default();
                        format!(
                            "posterior_draw(COALESCE({source}.p, {fallback}.prior){class}, fold_of(t.__row, 9223372036854775807, {}))",
                            self.options.draws.unwrap_or_default()
                        )
                    }
                };
                format!("{value} AS {}", quote(&name))
            })
            .collect()
    }

    /// `key AS __k0, ...` over table alias `t`.
    fn key_columns(&self) -> String {
        self.keys
            .iter()
            .enumerate()
            .map(|(i, k)| format!("{} AS __k{i}", k.sql(self.options.normalize_keys)))
            .collect::<Vec<_>>()
            .join(", ")
    }

    fn keys_stage(&self) -> Statement {
        stage(
            "keys and folds",
            "__keyed",
            format!(
                "SELECT t.*, {}, fold_of(t.__row, {}, {}) AS __fold FROM {TRAIN} t",
                self.key_columns(),
                self.options.folds,
                self.options.seed
            ),
        )
    }

    /// The prior table, the encoding table with readers, the prior's readers and the
    /// encodings output of key `i`, from its per-level fits in `__fit{i}`.
    fn serving_statements(&self, i: usize, key: &KeyPlan) -> Vec<Statement> {
        let k = &key.name;
        let (fits, prior, enc) = (
            format!("__fit{i}"),
            format!("__prior{i}"),
            format!("__enc{i}"),
        );
        let mut encoding_columns = vec![format!("e.level AS {}", quote(k)), "e.p".to_string()];
        encoding_columns.extend(
            self.reader_columns(key)
                .into_iter()
                .map(|(name, _, _)| format!("e.{}", quote(&name))),
        );
        if self.options.indicators > 0 {
            encoding_columns.push("ranked.rank AS top_rank".to_string());
        }
        vec![
            stage(
                format!("prior {k}"),
                &prior,
                if self.fitted {
                    format!("SELECT fit_prior(p) AS prior, fit_prior_report(p) AS report FROM {fits}")
                } else {
                    format!(
                        "SELECT {} AS prior, CAST(NULL AS VARCHAR) AS report",
                        key.prior.as_ref().unwrap_or(&self.base_prior)
                    )
                },
            ),
            stage(
                format!("encodings {k}"),
                &enc,
                format!(
                    "SELECT level, p, {} FROM (SELECT f.level, {} AS p FROM {fits} f CROSS JOIN {prior} q)",
                    self.readers(key, "p").join(", "),
                    self.repriored("f.p")
                ),
            ),
            stage(
                format!("prior readers {k}"),
                &format!("__priorread{i}"),
                format!(
                    "SELECT {} FROM {prior}",
                    std::iter::once("prior".to_string())
                        .chain(self.readers(key, "prior"))
                        .collect::<Vec<_>>()
                        .join(", ")
                ),
            ),
            stage(
                format!("largest levels {k}"),
                &format!("__top{i}"),
                format!(
                    "SELECT level, rank FROM (SELECT level, row_number() OVER (ORDER BY posterior_data_weight(p) DESC, level) AS rank \
                     FROM {enc} WHERE posterior_data_weight(p) >= {}) WHERE rank <= {}",
                    self.options.indicator_min_rows, self.options.indicators
                ),
            ),
            output(
                format!("encodings/{k}"),
                format!(
                    "SELECT {} FROM {enc} e LEFT JOIN __top{i} ranked ON ranked.level = e.level ORDER BY e.level",
                    encoding_columns.join(", ")
                ),
            ),
        ]
    }

    /// The statements of a refresh: stored posteriors (registered as `__stored{i}`,
    /// already decayed) pooled with fits of the new rows under the stored priors.
    pub(crate) fn update_statements(&self) -> Vec<Statement> {
        let mut out = vec![self.keys_stage()];
        for (i, key) in self.keys.iter().enumerate() {
            out.push(stage(
                format!("pool {}", key.name),
                &format!("__fit{i}"),
                format!(
                    "SELECT level, posterior_pool(p) AS p FROM (SELECT level, p FROM __stored{i} \
                     UNION ALL SELECT __k{i} AS level, {} AS p FROM __keyed t WHERE __k{i} IS NOT NULL GROUP BY __k{i}) \
                     GROUP BY level",
                    self.fit(key)
                ),
            ));
            out.extend(self.serving_statements(i, key));
        }
        if self.options.score.is_some() {
            out.extend(self.scoring_statements());
        }
        out
    }

    /// Every statement, in order.
    pub fn statements(&self) -> Vec<Statement> {
        let o = &self.options;
        let mut out = vec![self.keys_stage()];
        let mut joins = Vec::new();
        let mut selects: Vec<String> = self
            .train_columns
            .iter()
            .map(|c| format!("t.{}", quote(c)))
            .collect();
        for (i, key) in self.keys.iter().enumerate() {
            let k = &key.name;
            let fit = self.fit(key);
            let (prior, enc) = (format!("__prior{i}"), format!("__enc{i}"));
            out.push(stage(
                format!("fit {k}"),
                &format!("__fit{i}"),
                format!("SELECT __k{i} AS level, {fit} AS p FROM __keyed t WHERE __k{i} IS NOT NULL GROUP BY __k{i}"),
            ));
            let serving = self.serving_statements(i, key);
            let (stages, encodings) = serving.split_at(serving.len() - 1);
            out.extend_from_slice(stages);
            let train = format!("__train{i}");
            let (name, query, on) = match (self.method, o.time_ties) {
                (Method::Kfold, _) => {
                    out.push(stage(
                        format!("fold fits {k}"),
                        &format!("__foldfit{i}"),
                        format!("SELECT __k{i} AS level, __fold, {fit} AS p FROM __keyed t WHERE __k{i} IS NOT NULL GROUP BY __k{i}, __fold"),
                    ));
                    (
                        "out-of-fold",
                        format!(
                            "SELECT level, __fold, p, {} FROM (SELECT g.level, g.__fold, posterior_subtract(e.p, {}) AS p \
                             FROM __foldfit{i} g JOIN {enc} e ON e.level = g.level CROSS JOIN {prior} q)",
                            self.readers(key, "p").join(", "),
                            self.repriored("g.p")
                        ),
                        format!("x{i}.level = t.__k{i} AND x{i}.__fold = t.__fold"),
                    )
                }
                (Method::Time, TimeTies::Strict) => {
                    let time = quote(o.time_column.as_deref().unwrap_or_default());
                    (
                        "as-of",
                        format!(
                            "SELECT level, __time, p, {} FROM (SELECT level, __time, COALESCE({}, q.prior) AS p FROM \
                             (SELECT level, __time, posterior_pool(p) OVER (PARTITION BY level ORDER BY __time ROWS BETWEEN UNBOUNDED PRECEDING AND 1 PRECEDING) AS p \
                             FROM (SELECT __k{i} AS level, t.{time} AS __time, {fit} AS p FROM __keyed t WHERE __k{i} IS NOT NULL AND t.{time} IS NOT NULL GROUP BY __k{i}, t.{time})) \
                             CROSS JOIN {prior} q)",
                            self.readers(key, "p").join(", "),
                            self.repriored("p")
                        ),
                        format!("x{i}.level = t.__k{i} AND x{i}.__time = t.{time}"),
                    )
                }
                (Method::Time, TimeTies::FileOrder) => {
                    let time = quote(o.time_column.as_deref().unwrap_or_default());
                    let window = format!(
                        "{fit} OVER (PARTITION BY __k{i} ORDER BY t.{time}, t.__row ROWS BETWEEN UNBOUNDED PRECEDING AND 1 PRECEDING)"
                    );
                    (
                        "as-of in file order",
                        format!(
                            "SELECT __row, p, {} FROM (SELECT t.__row, {} AS p FROM __keyed t CROSS JOIN {prior} q WHERE t.__k{i} IS NOT NULL)",
                            self.readers(key, "p").join(", "),
                            self.repriored(&window)
                        ),
                        format!("x{i}.__row = t.__row"),
                    )
                }
            };
            out.push(stage(format!("{name} {k}"), &train, query));
            joins.push(format!(
                "LEFT JOIN {train} x{i} ON {on} CROSS JOIN __priorread{i} r{i} LEFT JOIN __top{i} top{i} ON top{i}.level = t.__k{i}"
            ));
            selects.extend(self.final_columns(i, key, &format!("x{i}"), &format!("r{i}")));
            out.extend_from_slice(encodings);
        }
        out.push(output(
            "train_encoded",
            format!(
                "SELECT {} FROM __keyed t {} ORDER BY t.__row",
                selects.join(", "),
                joins.join(" ")
            ),
        ));
        if o.score.is_some() {
            out.extend(self.scoring_statements());
        }
        out
    }

    /// Scoring with the full-data encodings; unseen levels and NULL keys get the prior.
    fn scoring_statements(&self) -> Vec<Statement> {
        let mut out = vec![stage(
            "scoring keys",
            "__scorekeyed",
            format!("SELECT t.*, {} FROM {SCORE} t", self.key_columns()),
        )];
        let mut selects: Vec<String> = self
            .score_columns
            .iter()
            .map(|c| format!("t.{}", quote(c)))
            .collect();
        let mut joins = Vec::new();
        for (i, key) in self.keys.iter().enumerate() {
            joins.push(format!(
                "LEFT JOIN __enc{i} e{i} ON e{i}.level = t.__k{i} CROSS JOIN __priorread{i} r{i} LEFT JOIN __top{i} top{i} ON top{i}.level = t.__k{i}"
            ));
            selects.extend(self.final_columns(i, key, &format!("e{i}"), &format!("r{i}")));
            out.push(output(
                format!("unseen/{}", key.name),
                format!(
                    "SELECT COUNT(*) AS rows, COUNT(t.__k{i}) AS rows_with_key, \
                     COUNT(t.__k{i}) FILTER (WHERE e.level IS NULL) AS unseen_rows, \
                     COUNT(DISTINCT t.__k{i}) FILTER (WHERE e.level IS NULL) AS unseen_levels \
                     FROM __scorekeyed t LEFT JOIN __enc{i} e ON e.level = t.__k{i}"
                ),
            ));
        }
        out.push(output(
            "scored",
            format!(
                "SELECT {} FROM __scorekeyed t {} ORDER BY t.__row",
                selects.join(", "),
                joins.join(" ")
            ),
        ));
        out
    }
}
