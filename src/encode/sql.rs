//! The statements of a plan, as data. Every identifier is quoted and every text
//! literal escaped where it is built; nothing from the data passes through a
//! template, so a class, level or column named `{y}`, `a"b` or `naïve café` is
//! only ever data.
//!
//! Readers run once per distinct posterior — per level, per (level, fold), per
//! (level, time) — and are joined to the rows; only leave-one-out and file-order
//! as-of encodings have a posterior per row.

use super::options::{Method, TimeTies, Treatment};
use super::plan::{EncodePlan, KeyPlan, OutputColumn, TimeUnits};
use super::{quote, text};
use crate::layout::Kind;

/// The numbered training rows (`__row` in table order), registered by `run`.
pub(crate) const TRAIN: &str = "__encode_train_rows";
/// The numbered scoring rows.
pub(crate) const SCORE: &str = "__encode_score_rows";

/// The working columns the statements add beside the input's columns (also `__k0`,
/// `__k1`, ...: each key's level); an input column may not have one of these names.
const WORKING_COLUMNS: [&str; 6] = [
    crate::numbered::ROW,
    "__fold",
    "__level",
    "__time",
    "__x",
    "__y",
];

/// The previous run's indicator levels with their ranks (1, 2, ...), as a table.
fn stored_ranks(levels: &[String]) -> String {
    if levels.is_empty() {
        return "SELECT CAST(NULL AS VARCHAR) AS level, CAST(NULL AS BIGINT) AS rank WHERE false"
            .into();
    }
    let rows: Vec<String> = levels
        .iter()
        .enumerate()
        .map(|(r, level)| format!("({}, CAST({} AS BIGINT))", text(level), r + 1))
        .collect();
    format!(
        "SELECT column1 AS level, column2 AS rank FROM (VALUES {})",
        rows.join(", ")
    )
}

/// Whether an input column's name is one of the statements' working columns.
pub(crate) fn is_working_column(name: &str) -> bool {
    WORKING_COLUMNS.contains(&name)
        || name
            .strip_prefix("__k")
            .is_some_and(|n| !n.is_empty() && n.bytes().all(|b| b.is_ascii_digit()))
}

/// Which rows a select list is for: training rows read their key's out-of-fold or
/// as-of posteriors (`x{i}`), scored rows the encoding tables (`e{i}`).
#[derive(Debug, Clone, Copy, PartialEq)]
enum Side {
    Train,
    Score,
}

/// One statement: what it is for, its SQL, and for a result the output it makes.
#[derive(Debug, Clone, PartialEq)]
pub struct Statement {
    pub name: String,
    pub sql: String,
    /// `Some(name)` for a query whose result is an output (`train_encoded`,
    /// `encodings/<key>`, `scored`); `None` for a table the later statements use.
    pub output: Option<String>,
    /// For a table the later statements use: its name and query (`sql` creates it
    /// in memory; with a work directory it is written there as Parquet instead).
    pub table: Option<(String, String)>,
}

fn stage(name: impl Into<String>, table: &str, query: String) -> Statement {
    Statement {
        name: name.into(),
        sql: format!("CREATE OR REPLACE TABLE {table} AS {query}"),
        output: None,
        table: Some((table.to_string(), query)),
    }
}

/// A view: the training or scoring rows with keys and folds, computed as they
/// stream past rather than stored (they are as large as the input).
fn view(name: impl Into<String>, table: &str, query: String) -> Statement {
    Statement {
        name: name.into(),
        sql: format!("CREATE OR REPLACE VIEW {table} AS {query}"),
        output: None,
        table: None,
    }
}

fn output(name: impl Into<String>, query: String) -> Statement {
    let name = name.into();
    Statement {
        name: name.clone(),
        sql: query,
        output: Some(name),
        table: None,
    }
}

/// Recency weights for as-of encodings: a row at time `t_j` seen from time `t`
/// counts 2^(-(t - t_j)/h) = 2^(-(t - t0)/h) * 2^((t_j - t0)/h), t0 the oldest
/// training time, so a running (window) sum of fits weighted by the second factor
/// (growing with time, at most 2^1000: `resolve` checks the period) is aged by the
/// first (at most 1) at each row's time.
#[derive(Debug, Clone, Copy)]
pub(super) struct AsOfDecay {
    /// t0.
    pub oldest: f64,
    pub half_life: f64,
}

impl AsOfDecay {
    /// The growing weight of a row at time `time` (SQL, a number of time units).
    pub fn growing_weight(&self, time: &str) -> String {
        let (oldest, h) = (self.oldest, self.half_life);
        format!("power(2.0, ({time} - {oldest}) / {h})")
    }

    /// Posterior `p`, a sum of growing-weighted fits, as seen from time `at` (SQL, a
    /// number of time units).
    pub fn aged(&self, p: &str, at: &str) -> String {
        let (oldest, h) = (self.oldest, self.half_life);
        format!("posterior_scale({p}, power(2.0, -({at} - {oldest}) / {h}))")
    }
}

/// The as-of pool of posterior `column` over rows of one `level` ordered by
/// `time`: each row reads its level's rows of every earlier time (in the column's
/// own order: numbers, dates, text), or with a horizon every time at least that
/// much older, counted in `units` (a horizon is > 0, so rows never read their own
/// time). Rows of one time read the same pool, whatever else they hold.
pub(super) fn as_of_pool(
    column: &str,
    level: &str,
    (time, units): (&str, TimeUnits),
    horizon: Option<f64>,
) -> String {
    match horizon {
        Some(h) => {
            let time = units.number(time);
            format!(
                "posterior_pool_before({column}, {time}, {h:?}) OVER (PARTITION BY {level} ORDER BY {time})"
            )
        }
        None => format!(
            "posterior_pool_before({column}, {time}) OVER (PARTITION BY {level} ORDER BY {time})"
        ),
    }
}

/// The columns every `encodings/<key>` file may have besides the key's readers.
const ENCODINGS_COLUMNS: [&str; 4] = ["p", "top_rank", "code", "parent"];

/// The name of the level column of key `key`'s encodings file: the key's own name,
/// or `level` where that name is one of the file's other columns.
pub fn encodings_level_column(key: &str) -> &str {
    if ENCODINGS_COLUMNS.contains(&key) {
        "level"
    } else {
        key
    }
}

impl EncodePlan {
    /// The fit of the target over table alias `t` for `key` (its own prior when it
    /// has one, else the base prior; re-priored later when the prior is fitted).
    /// With the key's half-life, each row weighs 2^(-age / half-life), its age counted
    /// from the newest training row (a row with no time weighs nothing).
    pub(super) fn fit(&self, key: &KeyPlan) -> String {
        let weight = match (self.newest_time, key.half_life, &self.options.time_column) {
            (Some(newest), Some(h), Some(time)) => Some(format!(
                "decay_weight({newest} - {}, {h})",
                self.time_number(&format!("t.{}", quote(time)))
            )),
            _ => None,
        };
        self.fit_with_weight(key, weight.as_deref())
    }

    /// As-of encodings with the key's half-life (see `AsOfDecay`): the fit with
    /// the growing weights, and the decay that ages a pooled posterior; `None`
    /// without a half-life.
    pub(super) fn as_of_decay(&self, key: &KeyPlan) -> Option<(String, AsOfDecay)> {
        let decay = AsOfDecay {
            oldest: self.oldest_time?,
            half_life: key.half_life?,
        };
        let time = self.time_number(&format!("t.{}", quote(self.options.time_column.as_ref()?)));
        Some((
            self.fit_with_weight(key, Some(&decay.growing_weight(&time))),
            decay,
        ))
    }

    /// Key `k`'s fit (weighted by its half-life, if any) and the as-of pool of
    /// `column` over the rows' `level, __time` (`as_of_pool`), aged to each row's
    /// time.
    fn as_of_pooled(&self, k: &KeyPlan, column: &str) -> (String, String) {
        let pooled = as_of_pool(column, "level", ("__time", self.time_units), k.horizon);
        match self.as_of_decay(k) {
            Some((fit, decay)) => (fit, decay.aged(&pooled, &self.time_number("__time"))),
            None => (self.fit(k), pooled),
        }
    }

    /// The time expression `expr` (of `--time-column`) as a number of time units.
    pub(super) fn time_number(&self, expr: &str) -> String {
        self.time_units.number(expr)
    }

    /// The fit of the target over table alias `t` for `key`, each row weighted by
    /// the SQL `weight` when given.
    pub(super) fn fit_with_weight(&self, key: &KeyPlan, weight: Option<&str>) -> String {
        let y = format!("t.{}", quote(&self.options.target));
        let prior = key.prior.as_ref().unwrap_or(&self.base_prior);
        let w = weight.map(|w| format!(", {w}")).unwrap_or_default();
        match self.family {
            Kind::Beta => format!("beta_posterior({y}, {prior}{w})"),
            Kind::Nig => format!("nig_posterior({y}, {prior}{w})"),
            Kind::Gamma => {
                let exposure = match &self.options.exposure {
                    Some(x) => format!("t.{}", quote(x)),
                    None => "1.0".into(),
                };
                match weight {
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

    /// `head, reader(p) AS "name", ...`: a select list of `head` and every reader
    /// column of `key` (none for keys given as levels or codes).
    fn with_readers(&self, head: &str, key: &KeyPlan, p: &str) -> String {
        std::iter::once(head.to_string())
            .chain(self.readers(key, p))
            .collect::<Vec<_>>()
            .join(", ")
    }

    /// Whether `key`'s training rows need out-of-fold or as-of posteriors (readers
    /// or draws); keys given as levels or codes do not.
    fn needs_training_posteriors(&self, key: &KeyPlan) -> bool {
        self.output_columns(key)
            .iter()
            .any(|(_, c)| matches!(c, OutputColumn::Reader { .. } | OutputColumn::Draw { .. }))
    }

    /// The joins every output row needs for `key` `i`'s prior readers, indicators
    /// and codes.
    fn level_joins(&self, i: usize, key: &KeyPlan) -> String {
        let mut joins = format!("LEFT JOIN __top{i} top{i} ON top{i}.level = t.__k{i}");
        if self.options.work_dir.is_some() {
            joins = format!("CROSS JOIN __priorread{i} r{i} {joins}");
        }
        if key.treatment == Treatment::Codes {
            joins.push_str(&format!(
                " LEFT JOIN __code{i} code{i} ON code{i}.level = t.__k{i}"
            ));
        }
        joins
    }

    /// Column `column` of key `i`'s one-row prior table `table`: a scalar subquery
    /// in one process (run once; unlike a cross join it keeps the rows' order, so
    /// the output needs no sort); with a work directory, for a cluster, the cross
    /// joined `r{i}` (a cluster turns a scalar subquery beside outer joins into a
    /// join whose unmatched rows each task repeats).
    fn prior_reader(&self, i: usize, column: &str, table: &str) -> String {
        match self.options.work_dir {
            Some(_) => format!("r{i}.{column}"),
            None => format!("(SELECT {column} FROM {table})"),
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

    /// The posterior that scores rows, from the full posterior `p`: its data scaled
    /// to what an out-of-fold training row sees (`ScoreEvidence::Matched`).
    fn scoring_posterior(&self, p: &str) -> String {
        if self.score_scale < 1.0 {
            format!("posterior_scale({p}, {})", self.score_scale)
        } else {
            p.to_string()
        }
    }

    /// Final columns of `key` `i`: each reader from `source` (alias), falling back
    /// to the prior's reader in the one-row table `fallback` (a scalar subquery, run
    /// once: unlike a cross join it keeps the rows' order, so the output needs no
    /// sort); indicators from the level's rank in
    /// `top{i}`; draws from the posterior expression `posterior` (NULL for unseen
    /// levels and NULL keys: the prior).
    fn final_columns(
        &self,
        i: usize,
        key: &KeyPlan,
        (source, fallback): (&str, &str),
        posterior: &str,
        side: Side,
    ) -> Vec<String> {
        self.output_columns(key)
            .into_iter()
            .map(|(name, column)| {
                let value = match column {
                    OutputColumn::Reader { index, class } if key.parent.is_some() => {
                        let reader = key.readers[index].sql(&self.unseen(i, side), class.as_deref());
                        format!("COALESCE({source}.{}, {reader})", quote(&name))
                    }
                    OutputColumn::Reader { .. } => {
                        let q = quote(&name);
                        format!("COALESCE({source}.{q}, {})", self.prior_reader(i, &q, fallback))
                    }
                    OutputColumn::Indicator { rank } => {
                        format!("CAST(COALESCE(top{i}.rank, 0) = {rank} AS INT)")
                    }
                    OutputColumn::Code => format!("COALESCE(code{i}.code, -1)"),
                    OutputColumn::Draw { class } => {
                        let class = class.map(|c| format!(", {}", text(&c))).unwrap_or_default();
                        format!(
                            "posterior_draw(COALESCE({posterior}, {}){class}, fold_of(t.__row, 9223372036854775807, {}))",
                            self.unseen(i, side),
                            self.options.draws.unwrap_or_default()
                        )
                    }
                };
                format!("{value} AS {}", quote(&name))
            })
            .collect()
    }

    /// The posterior a row reads for key `i` when its level is unseen or NULL: the
    /// key's prior, or under `--hierarchy` that prior centred on the row's parent
    /// level (itself read this way), with the layer's fitted strength.
    fn unseen(&self, i: usize, side: Side) -> String {
        let prior = self.prior_reader(i, "prior", &format!("__priorread{i}"));
        match self.keys[i].parent {
            None => prior,
            Some(j) => format!(
                "COALESCE(posterior_under({prior}, {}, NULL, {}), {prior})",
                self.row_posterior(j, side),
                self.prior_reader(i, "strength", &format!("__priorread{i}"))
            ),
        }
    }

    /// The posterior a row reads for key `j`: its level's (out-of-fold for training
    /// rows, scaled as scoring reads it for scored rows), else `unseen`.
    fn row_posterior(&self, j: usize, side: Side) -> String {
        let own = match side {
            Side::Train => format!("x{j}.p"),
            Side::Score => self.scoring_posterior(&format!("e{j}.p")),
        };
        format!("COALESCE({own}, {})", self.unseen(j, side))
    }

    /// Whether key `i` is some key's parent (`--hierarchy`).
    fn has_children(&self, i: usize) -> bool {
        self.keys.iter().any(|k| k.parent == Some(i))
    }

    /// Keys in an order where every parent comes before its children.
    fn parents_first(&self) -> Vec<usize> {
        let depth = |mut i: usize| {
            let mut d = 0;
            while let Some(p) = self.keys[i].parent {
                (i, d) = (p, d + 1);
            }
            d
        };
        let mut order: Vec<usize> = (0..self.keys.len()).collect();
        order.sort_by_key(|&i| depth(i));
        order
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
        view(
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
        let mut encoding_columns = vec![
            format!("e.level AS {}", quote(encodings_level_column(k))),
            "e.p".to_string(),
        ];
        encoding_columns.extend(
            self.reader_columns(key)
                .into_iter()
                .map(|(name, _, _)| format!("e.{}", quote(&name))),
        );
        if key.indicators > 0 {
            encoding_columns.push("ranked.rank AS top_rank".to_string());
        }
        let mut out = vec![stage(
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
        )];
        let repriored = self.repriored("f.p");
        let (level_posterior, prior_readers) = match key.parent {
            None => (
                format!("SELECT f.level, {repriored} AS p FROM {fits} f CROSS JOIN {prior} q"),
                format!(
                    "SELECT {} FROM {prior}",
                    self.with_readers("prior", key, "prior")
                ),
            ),
            Some(j) => {
                out.push(self.strength_stage(i, key, j));
                (
                    format!(
                        "SELECT f.level, COALESCE(posterior_under({repriored}, pe.p, m.p, st.strength), {repriored}) AS p \
                         FROM {fits} f CROSS JOIN {prior} q CROSS JOIN __strength{i} st \
                         LEFT JOIN __pair{i} m ON m.level = f.level LEFT JOIN __enc{j} pe ON pe.level = m.parent"
                    ),
                    format!(
                        "SELECT {} FROM {prior} CROSS JOIN __strength{i} st",
                        self.with_readers("prior, st.strength AS strength", key, "prior")
                    ),
                )
            }
        };
        out.extend([
            stage(
                format!("encodings {k}"),
                &enc,
                format!(
                    "SELECT {} FROM ({level_posterior})",
                    self.with_readers("level, p", key, &self.scoring_posterior("p")),
                ),
            ),
            stage(
                format!("prior readers {k}"),
                &format!("__priorread{i}"),
                prior_readers,
            ),
            stage(
                format!("largest levels {k}"),
                &format!("__top{i}"),
                // The plan counted the levels with enough rows and wrote that many
                // indicator columns; all of them go to the largest levels here. (A
                // second row filter on the data weight, which recency weights, NULL
                // targets and exposures make smaller than the rows, once left some
                // columns all zero and missing from the bundle.)
                match &key.stored_indicators {
                    None => format!(
                        "SELECT level, rank FROM (SELECT level, row_number() OVER (ORDER BY posterior_data_weight(p) DESC, level) AS rank \
                         FROM {enc}) WHERE rank <= {}",
                        key.indicators
                    ),
                    Some(levels) => stored_ranks(levels),
                },
            ),
        ]);
        if key.treatment == Treatment::Codes {
            encoding_columns.push("c.code".to_string());
            out.push(stage(
                format!("codes {k}"),
                &format!("__code{i}"),
                format!("SELECT level, CAST(row_number() OVER (ORDER BY level) - 1 AS BIGINT) AS code FROM {fits}"),
            ));
        }
        let mut code_join = match key.treatment {
            Treatment::Codes => format!(" LEFT JOIN __code{i} c ON c.level = e.level"),
            _ => String::new(),
        };
        if key.parent.is_some() {
            encoding_columns.push("pr.parent AS parent".to_string());
            code_join.push_str(&format!(" LEFT JOIN __pair{i} pr ON pr.level = e.level"));
        }
        out.push(output(
                format!("encodings/{k}"),
                format!(
                    "SELECT {} FROM {enc} e LEFT JOIN __top{i} ranked ON ranked.level = e.level{code_join} ORDER BY e.level",
                    encoding_columns.join(", ")
                ),
        ));
        out
    }

    /// Under `--hierarchy`, the layer's strength of key `i` below its parent `j`
    /// (`__strength{i}`): given, or fitted over all levels.
    fn strength_stage(&self, i: usize, key: &KeyPlan, j: usize) -> Statement {
        stage(
            format!("strength {}", key.name),
            &format!("__strength{i}"),
            match key.strength {
                Some(s) => format!("SELECT CAST({s:?} AS DOUBLE) AS strength"),
                None => format!(
                    "SELECT fit_strength({}, pe.p, m.p) AS strength FROM __fit{i} f CROSS JOIN __prior{i} q \
                     JOIN __pair{i} m ON m.level = f.level JOIN __enc{j} pe ON pe.level = m.parent",
                    self.repriored("f.p")
                ),
            },
        )
    }

    /// Under `--hierarchy`, before any key's stages: each child level's main parent
    /// and its own data there (`__pair{i}`, the parent most of its rows have); for
    /// as-of encodings also, children first, the (level, time) pairs at which each
    /// parent is read beyond its own rows' (`__need{j}`, see `as_of_in_hierarchy`).
    fn hierarchy_pairs(&self) -> Vec<Statement> {
        let mut out = Vec::new();
        for (i, key) in self.keys.iter().enumerate() {
            let Some(j) = key.parent else { continue };
            out.push(stage(
                format!("parents {}", key.name),
                &format!("__pair{i}"),
                self.main_parents(i, key, j),
            ));
        }
        if self.method != Method::Time {
            return out;
        }
        let time = quote(self.options.time_column.as_deref().unwrap_or_default());
        // The (level, time) pairs key `i` is read at: its rows' and its children's.
        let read_at = |i: usize| {
            let own = format!(
                "SELECT __k{i} AS level, t.{time} AS __time FROM __keyed t \
                 WHERE __k{i} IS NOT NULL AND t.{time} IS NOT NULL"
            );
            if self.has_children(i) {
                format!("{own} UNION SELECT level, __time FROM __need{i}")
            } else {
                own
            }
        };
        for j in self.parents_first().into_iter().rev() {
            if !self.has_children(j) {
                continue;
            }
            let children: Vec<String> = (0..self.keys.len())
                .filter(|&i| self.keys[i].parent == Some(j))
                .map(|i| {
                    format!(
                        "SELECT m.parent AS level, g.__time FROM ({}) g JOIN __pair{i} m ON m.level = g.level",
                        read_at(i)
                    )
                })
                .collect();
            out.push(stage(
                format!("times read {}", self.keys[j].name),
                &format!("__need{j}"),
                format!(
                    "SELECT level, __time FROM ({}) EXCEPT SELECT __k{j}, t.{time} FROM __keyed t \
                     WHERE __k{j} IS NOT NULL AND t.{time} IS NOT NULL",
                    children.join(" UNION ")
                ),
            ));
        }
        out
    }

    /// The statements of a refresh: stored posteriors (registered as `__stored{i}`,
    /// already decayed) pooled with fits of the new rows under the stored priors.
    pub(crate) fn update_statements(&self) -> Vec<Statement> {
        let mut out = vec![self.keys_stage()];
        for i in self.parents_first() {
            let key = &self.keys[i];
            // A child's stored posteriors are centred on its parent: pooled as data
            // under the key's prior, then centred anew.
            let stored = match (key.parent, &key.prior) {
                (Some(_), Some(prior)) => format!("posterior_with_prior(p, {prior})"),
                _ => "p".to_string(),
            };
            out.push(stage(
                format!("pool {}", key.name),
                &format!("__fit{i}"),
                format!(
                    "SELECT level, posterior_pool(p) AS p FROM (SELECT level, {stored} AS p FROM __stored{i} \
                     UNION ALL SELECT __k{i} AS level, {} AS p FROM __keyed t WHERE __k{i} IS NOT NULL GROUP BY __k{i}) \
                     GROUP BY level",
                    self.fit(key)
                ),
            ));
            if let Some(j) = key.parent {
                out.extend(self.refreshed_parents(i, key, j, &stored));
            }
            out.extend(self.serving_statements(i, key));
        }
        if self.options.score.is_some() {
            out.extend(self.scoring_statements());
        }
        out
    }

    /// Each level of child key `i` with its main parent in key `j` (the parent most
    /// of its rows have; ties: the first name) and its data there: `level, parent, p`.
    fn main_parents(&self, i: usize, key: &KeyPlan, j: usize) -> String {
        format!(
            "SELECT level, parent, p FROM (SELECT level, parent, p, row_number() OVER \
             (PARTITION BY level ORDER BY posterior_data_weight(p) DESC, parent) AS r FROM \
             (SELECT __k{i} AS level, __k{j} AS parent, {} AS p FROM __keyed t \
             WHERE __k{i} IS NOT NULL AND __k{j} IS NOT NULL GROUP BY __k{i}, __k{j})) WHERE r = 1",
            self.fit(key)
        )
    }

    /// A refresh's `__pair{i}` for child key `i` under `j`: each level keeps its
    /// stored parent (`__storedparent{i}`: level, parent, data outside it), a new
    /// level takes the parent most of its new rows have; its data inside the parent
    /// is its pooled data less what lies outside (stored, plus new rows under another
    /// parent or none).
    fn refreshed_parents(&self, i: usize, key: &KeyPlan, j: usize, stored: &str) -> Vec<Statement> {
        let k = &key.name;
        let fit = self.fit(key);
        vec![
            stage(
                format!("parents of new levels {k}"),
                &format!("__newparent{i}"),
                self.main_parents(i, key, j),
            ),
            stage(
                format!("parents {k}"),
                &format!("__assigned{i}"),
                format!(
                    "SELECT f.level, COALESCE(s.parent, n.parent) AS parent FROM __fit{i} f \
                     LEFT JOIN __storedparent{i} s ON s.level = f.level LEFT JOIN __newparent{i} n ON n.level = f.level \
                     WHERE COALESCE(s.parent, n.parent) IS NOT NULL"
                ),
            ),
            stage(
                format!("data outside parents {k}"),
                &format!("__outside{i}"),
                format!(
                    "SELECT level, posterior_pool(p) AS p FROM (SELECT level, {stored} AS p FROM __storedparent{i} \
                     WHERE p IS NOT NULL UNION ALL SELECT t.__k{i} AS level, {fit} AS p FROM __keyed t \
                     JOIN __assigned{i} a ON a.level = t.__k{i} WHERE t.__k{j} IS NULL OR t.__k{j} <> a.parent \
                     GROUP BY t.__k{i}) GROUP BY level"
                ),
            ),
            stage(
                format!("data inside parents {k}"),
                &format!("__pair{i}"),
                format!(
                    "SELECT a.level, a.parent, COALESCE(posterior_subtract(f.p, o.p), f.p) AS p \
                     FROM __assigned{i} a JOIN __fit{i} f ON f.level = a.level LEFT JOIN __outside{i} o ON o.level = a.level"
                ),
            ),
        ]
    }

    /// Every statement, in order.
    pub fn statements(&self) -> Vec<Statement> {
        let o = &self.options;
        let mut out = vec![self.keys_stage()];
        out.extend(self.hierarchy_pairs());
        // Stages run parents first (`--hierarchy`); the columns keep the keys' order.
        let mut joins = vec![String::new(); self.keys.len()];
        let mut key_selects = vec![Vec::new(); self.keys.len()];
        for i in self.parents_first() {
            let key = &self.keys[i];
            let k = &key.name;
            let fit = self.fit(key);
            out.push(stage(
                format!("fit {k}"),
                &format!("__fit{i}"),
                format!("SELECT __k{i} AS level, {fit} AS p FROM __keyed t WHERE __k{i} IS NOT NULL GROUP BY __k{i}"),
            ));
            let serving = self.serving_statements(i, key);
            let (stages, encodings) = serving.split_at(serving.len() - 1);
            out.extend_from_slice(stages);
            if self.needs_training_posteriors(key) {
                let (stages, on) = self.training_posteriors(i, key, &fit);
                out.extend(stages);
                joins[i] = format!("LEFT JOIN __train{i} x{i} ON {on} ");
            }
            joins[i].push_str(&self.level_joins(i, key));
            key_selects[i] = self.final_columns(
                i,
                key,
                (&format!("x{i}"), &format!("__priorread{i}")),
                &format!("x{i}.p"),
                Side::Train,
            );
            out.extend_from_slice(encodings);
        }
        let selects: Vec<String> = self
            .train_columns
            .iter()
            .map(|c| format!("t.{}", quote(c)))
            .chain(key_selects.into_iter().flatten())
            .collect();
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

    /// The stages giving each training row of key `i` a posterior that never saw
    /// its own target (out-of-fold or as-of), as `__train{i}`, and the join
    /// condition of `__train{i} x{i}` on the rows `t`.
    fn training_posteriors(&self, i: usize, key: &KeyPlan, fit: &str) -> (Vec<Statement>, String) {
        let o = &self.options;
        let k = &key.name;
        let (prior, enc) = (format!("__prior{i}"), format!("__enc{i}"));
        let mut stages = Vec::new();
        // With a horizon rows of one time never read each other: ties do not arise.
        let ties = match key.horizon {
            Some(_) => TimeTies::Strict,
            None => o.time_ties,
        };
        // `resolve` refuses a hierarchy with as-of encodings in file order.
        let in_hierarchy = key.parent.is_some() || self.has_children(i);
        let (name, query, on) = match (self.method, ties, key.parent) {
            (Method::Kfold, _, Some(j)) => {
                self.out_of_fold_under_parent(i, key, j, fit, &mut stages)
            }
            (Method::Time, TimeTies::Strict, _) if in_hierarchy => self.as_of_in_hierarchy(i, key),
            (Method::Kfold, _, None) => {
                stages.push(stage(
                    format!("fold fits {k}"),
                    &format!("__foldfit{i}"),
                    format!("SELECT __k{i} AS level, __fold, {fit} AS p FROM __keyed t WHERE __k{i} IS NOT NULL GROUP BY __k{i}, __fold"),
                ));
                (
                    "out-of-fold",
                    format!(
                        "SELECT level, __fold, {} FROM (SELECT g.level, g.__fold, posterior_subtract(e.p, {}) AS p \
                         FROM __foldfit{i} g JOIN {enc} e ON e.level = g.level CROSS JOIN {prior} q)",
                        self.with_readers("p", key, "p"),
                        self.repriored("g.p")
                    ),
                    format!("x{i}.level = t.__k{i} AND x{i}.__fold = t.__fold"),
                )
            }
            (Method::Time, TimeTies::Strict, _) => {
                let time = quote(o.time_column.as_deref().unwrap_or_default());
                let (fit, pooled) = self.as_of_pooled(key, "p");
                (
                    "as-of",
                    format!(
                        "SELECT level, __time, {} FROM (SELECT level, __time, COALESCE({}, q.prior) AS p FROM \
                         (SELECT level, __time, {pooled} AS p \
                         FROM (SELECT __k{i} AS level, t.{time} AS __time, {fit} AS p FROM __keyed t WHERE __k{i} IS NOT NULL AND t.{time} IS NOT NULL GROUP BY __k{i}, t.{time})) \
                         CROSS JOIN {prior} q)",
                        self.with_readers("p", key, "p"),
                        self.repriored("p")
                    ),
                    format!("x{i}.level = t.__k{i} AND x{i}.__time = t.{time}"),
                )
            }
            (Method::Time, TimeTies::FileOrder, _) => {
                let time = quote(o.time_column.as_deref().unwrap_or_default());
                let over = format!(
                    "OVER (PARTITION BY __k{i} ORDER BY t.{time}, t.__row ROWS BETWEEN UNBOUNDED PRECEDING AND 1 PRECEDING)"
                );
                let window = match self.as_of_decay(key) {
                    Some((fit, decay)) => decay.aged(
                        &format!("{fit} {over}"),
                        &self.time_number(&format!("t.{time}")),
                    ),
                    None => format!("{fit} {over}"),
                };
                (
                    "as-of in file order",
                    format!(
                        "SELECT __row, {} FROM (SELECT t.__row, {} AS p FROM __keyed t CROSS JOIN {prior} q WHERE t.__k{i} IS NOT NULL)",
                        self.with_readers("p", key, "p"),
                        self.repriored(&window)
                    ),
                    format!("x{i}.__row = t.__row"),
                )
            }
        };
        stages.push(stage(format!("{name} {k}"), &format!("__train{i}"), query));
        (stages, on)
    }

    /// K-fold training posteriors of key `i` under its parent `j` (`--hierarchy`):
    /// out of fold all the way up — the level's other folds under a prior centred on
    /// its parent's out-of-fold posterior less the level's own rows there, so no row
    /// of the fold reaches its encoding. Returns the stage name, query and join.
    fn out_of_fold_under_parent(
        &self,
        i: usize,
        key: &KeyPlan,
        j: usize,
        fit: &str,
        stages: &mut Vec<Statement>,
    ) -> (&'static str, String, String) {
        let k = &key.name;
        let prior = format!("__prior{i}");
        stages.push(stage(
                format!("fold fits {k}"),
                &format!("__foldfit{i}"),
                format!("SELECT __k{i} AS level, __fold, {fit} AS p FROM __keyed t WHERE __k{i} IS NOT NULL GROUP BY __k{i}, __fold"),
            ));
        stages.push(stage(
                format!("fold fits within parents {k}"),
                &format!("__pairfold{i}"),
                format!(
                    "SELECT __k{i} AS level, __k{j} AS parent, __fold, {fit} AS p FROM __keyed t \
                     WHERE __k{i} IS NOT NULL AND __k{j} IS NOT NULL GROUP BY __k{i}, __k{j}, __fold"
                ),
            ));
        let data = self.repriored("posterior_subtract(f.p, g.p)");
        (
                "out-of-fold",
                format!(
                    "SELECT level, __fold, {} FROM (SELECT g.level, g.__fold, \
                     COALESCE(posterior_under({data}, COALESCE(tp.p, pe.p), \
                     CASE WHEN mf.p IS NULL THEN m.p ELSE posterior_subtract(m.p, mf.p) END, st.strength), {data}) AS p \
                     FROM __foldfit{i} g JOIN __fit{i} f ON f.level = g.level CROSS JOIN {prior} q CROSS JOIN __strength{i} st \
                     LEFT JOIN __pair{i} m ON m.level = g.level \
                     LEFT JOIN __train{j} tp ON tp.level = m.parent AND tp.__fold = g.__fold \
                     LEFT JOIN __enc{j} pe ON pe.level = m.parent \
                     LEFT JOIN __pairfold{i} mf ON mf.level = g.level AND mf.parent = m.parent AND mf.__fold = g.__fold)",
                    self.with_readers("p", key, "p"),
                ),
                format!("x{i}.level = t.__k{i} AND x{i}.__fold = t.__fold"),
            )
    }

    /// As-of training posteriors of key `i` in a hierarchy, one per (level, time)
    /// of its rows and of the times its children read it at (`__need{i}`): the
    /// level's rows before that time and, under a parent `j`, a prior centred on the
    /// parent's as-of posterior at that time (itself under its parent) less the
    /// level's own rows there, counted with the parent's window and decay, so no
    /// row reaches its own encoding through a parent. A level reads its main parent
    /// (as scored rows do). Returns the stage name, query and join.
    fn as_of_in_hierarchy(&self, i: usize, key: &KeyPlan) -> (&'static str, String, String) {
        let time = quote(self.options.time_column.as_deref().unwrap_or_default());
        let prior = format!("__prior{i}");
        // Probe rows (times a child needs its parent at, with no data of their own)
        // read earlier times only, as the data rows do.
        let windowed = |k: &KeyPlan, column: &str| self.as_of_pooled(k, column);
        let (fit, pooled) = windowed(key, "p");
        let (mut data, mut pooled, mut joins) = (
            vec![format!("{fit} AS p")],
            vec![format!("{pooled} AS d")],
            String::new(),
        );
        let mut probe = "NULL AS p".to_string();
        let base = format!("COALESCE({}, q.prior)", self.repriored("g.d"));
        let mut p = base.clone();
        if let Some(j) = key.parent {
            let (parent_fit, parent_pooled) = windowed(&self.keys[j], "w");
            data.push(format!(
                "{parent_fit} FILTER (WHERE t.__k{j} = m.parent) AS w"
            ));
            pooled.push(format!("{parent_pooled} AS w"));
            probe.push_str(", NULL AS w");
            joins = format!(
                " CROSS JOIN __strength{i} st LEFT JOIN __pair{i} m ON m.level = g.level \
                 LEFT JOIN __train{j} x ON x.level = m.parent AND x.__time = g.__time"
            );
            p = format!("COALESCE(posterior_under({base}, x.p, g.w, st.strength), {base})");
        }
        let main_parent = match key.parent {
            Some(_) => format!(" LEFT JOIN __pair{i} m ON m.level = t.__k{i}"),
            None => String::new(),
        };
        let mut grid = format!(
            "SELECT t.__k{i} AS level, t.{time} AS __time, {} FROM __keyed t{main_parent} \
             WHERE t.__k{i} IS NOT NULL AND t.{time} IS NOT NULL GROUP BY t.__k{i}, t.{time}",
            data.join(", ")
        );
        if self.has_children(i) {
            grid.push_str(&format!(
                " UNION ALL SELECT level, __time, {probe} FROM __need{i}"
            ));
        }
        (
            "as-of",
            format!(
                "SELECT level, __time, {} FROM (SELECT g.level, g.__time, {p} AS p FROM \
                 (SELECT level, __time, {} FROM ({grid})) g CROSS JOIN {prior} q{joins})",
                self.with_readers("p", key, "p"),
                pooled.join(", ")
            ),
            format!("x{i}.level = t.__k{i} AND x{i}.__time = t.{time}"),
        )
    }

    /// Scoring with the encodings' readers (see `scoring_posterior`); unseen levels
    /// and NULL keys get the prior.
    fn scoring_statements(&self) -> Vec<Statement> {
        let mut out = vec![view(
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
                "LEFT JOIN __enc{i} e{i} ON e{i}.level = t.__k{i} {}",
                self.level_joins(i, key)
            ));
            selects.extend(self.final_columns(
                i,
                key,
                (&format!("e{i}"), &format!("__priorread{i}")),
                &self.scoring_posterior(&format!("e{i}.p")),
                Side::Score,
            ));
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
