//! What `resolve` settles: each key's plan, the whole plan, time units, and the
//! names of the feature columns.

use datafusion::arrow::datatypes::DataType;

use super::options::{EncodeOptions, Method, Reader, Treatment};
use super::{quote, sanitize};
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
/// or for a date, a timestamp or text of ISO dates and times a day, so `--horizon 30`
/// reads rows at least thirty days older whatever the column's type. Timestamps
/// count from 1970-01-01 UTC.
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub enum TimeUnits {
    #[default]
    Numbers,
    Days,
}

/// Text, plain or dictionary-encoded.
pub(super) fn is_text(d: &DataType) -> bool {
    match d {
        DataType::Dictionary(_, v) => v.is_string(),
        d => d.is_string(),
    }
}

impl TimeUnits {
    /// The units of a column of type `d`; `None` for a type that is no time. Text
    /// counts days as the timestamps it spells (the engine reads ISO text as
    /// timestamps); encode checks before it runs that every value is one and that
    /// their order as written is their order in time.
    pub fn of(d: &DataType) -> Option<TimeUnits> {
        match d {
            d if d.is_numeric() => Some(TimeUnits::Numbers),
            DataType::Null => Some(TimeUnits::Numbers),
            DataType::Date32 | DataType::Date64 | DataType::Timestamp(_, _) => {
                Some(TimeUnits::Days)
            }
            d if is_text(d) => Some(TimeUnits::Days),
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
