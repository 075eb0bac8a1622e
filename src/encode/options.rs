//! What a user asks of `encode`, before it meets the data.

use super::{usage, EncodeError, Result};
use crate::layout::AnyPosterior;
use crate::layout::Kind;

/// How training rows are kept from seeing their own target. (Leave-one-out is not
/// offered: within a level its values reveal each row's own target to tree learners;
/// see `benches/modeling/leakage.py`.)
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Method {
    /// K-fold out-of-fold: a row's encoding uses the other folds only.
    Kfold,
    /// Time order: a row's encoding uses earlier rows only.
    Time,
}

/// Why leave-one-out is not offered for training encodings (the measurement).
pub const LOO_REFUSED: &str = "--method loo is not offered for training encodings: within a \
    level, leave-one-out values take one value per outcome, so each row's encoding reveals its \
    own target and tree learners read it back (benches/modeling/leakage.py: a gradient-boosted \
    learner gains 4 times as much on its training rows as from pure noise, and its held-out \
    log-loss is 0.07 worse than the base rate's); use --method kfold (the default) or \
    --method time";

impl Method {
    /// `kfold` or `time`; `loo` is refused with its reason.
    pub fn parse(name: &str) -> Result<Method> {
        match name.trim() {
            "kfold" => Ok(Method::Kfold),
            "time" => Ok(Method::Time),
            "loo" => usage(LOO_REFUSED),
            other => usage(format!("--method '{other}' is not kfold or time")),
        }
    }

    pub fn name(self) -> &'static str {
        match self {
            Method::Kfold => "kfold",
            Method::Time => "time",
        }
    }
}

/// Recency weighting of the fits (`--half-life`).
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum HalfLife {
    /// A row this many time units older than the newest training row (as-of: than
    /// the row being encoded) counts half.
    Units(f64),
    /// Chosen per key from the training rows: the latest fifth of them scored by
    /// fits of the earlier rows under each candidate half-life (`recency.rs`).
    Fitted,
}

/// How far back as-of training rows read (`--horizon`).
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Horizon {
    /// Every strictly earlier time.
    None,
    /// Only rows at least this many time units older than the row encoded.
    Units(f64),
    /// As old as the scored rows' data will be: the scored rows' median time past
    /// the newest training row (needs the scoring table with the time column).
    Matched,
}

/// A `--hierarchy` chain, finest first: `postcode>district>region`.
pub fn parse_hierarchy(text: &str) -> Result<Vec<String>> {
    let chain: Vec<String> = text.split('>').map(|c| c.trim().to_string()).collect();
    if chain.len() < 2 || chain.iter().any(String::is_empty) {
        return usage(format!(
            "--hierarchy '{text}' is not CHILD>PARENT (finest first, e.g. postcode>district>region)"
        ));
    }
    Ok(chain)
}

impl Horizon {
    /// `none`, `matched`, or a number of time units.
    pub fn parse(text: &str) -> Result<Horizon> {
        match text.trim() {
            "none" => Ok(Horizon::None),
            "matched" => Ok(Horizon::Matched),
            t => match t.parse::<f64>() {
                Ok(h) => Ok(Horizon::Units(h)),
                Err(_) => usage(format!(
                    "--horizon '{t}' is not a number of time units, 'matched' or 'none'"
                )),
            },
        }
    }
}

impl HalfLife {
    /// `fitted`, or a number of time units.
    pub fn parse(text: &str) -> Result<HalfLife> {
        match text.trim() {
            "fitted" => Ok(HalfLife::Fitted),
            t => match t.parse::<f64>() {
                Ok(h) => Ok(HalfLife::Units(h)),
                Err(_) => usage(format!(
                    "--half-life '{t}' is not a number of time units or 'fitted'"
                )),
            },
        }
    }
}

/// How as-of encodings treat rows that share a time.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum TimeTies {
    /// Rows see strictly earlier times only; rows at one time share one encoding.
    #[default]
    Strict,
    /// Rows at one time also see the rows before them in table order.
    FileOrder,
}

/// What a key becomes in the training and scored tables.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Treatment {
    /// Posterior readers (`<key>_mean`, ...) plus indicators of its largest levels.
    Posterior,
    /// Indicators of every level (`<key>_top1..N`) and nothing else (on request).
    Levels,
    /// One integer column `<key>_code`: the level's position in the sorted training
    /// levels (0, 1, ...), -1 for unseen levels and NULL keys.
    Codes,
}

impl Treatment {
    pub fn parse(s: &str) -> Result<Treatment> {
        match s.trim() {
            "posterior" => Ok(Treatment::Posterior),
            "levels" => Ok(Treatment::Levels),
            "codes" => Ok(Treatment::Codes),
            other => usage(format!(
                "--treatment: '{other}' is not posterior, levels or codes"
            )),
        }
    }

    pub fn name(self) -> &'static str {
        match self {
            Treatment::Posterior => "posterior",
            Treatment::Levels => "levels",
            Treatment::Codes => "codes",
        }
    }
}

impl TimeTies {
    /// `strict` or `file-order` (`file_order` accepted).
    pub fn parse(name: &str) -> Result<TimeTies> {
        match name.trim() {
            "strict" => Ok(TimeTies::Strict),
            "file-order" | "file_order" => Ok(TimeTies::FileOrder),
            other => usage(format!("--time-ties '{other}' is not strict or file-order")),
        }
    }
}

/// The data weight of the posteriors that score new rows.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum ScoreEvidence {
    /// Scored rows read each level's posterior with its data scaled by (k-1)/k, the
    /// share of a level's rows an out-of-fold training row sees: training and scored
    /// features then come from the same distribution (shrinkage, sd and data weight
    /// included), which is what the learner needs to map them alike.
    #[default]
    Matched,
    /// Scored rows read the posterior of all training rows.
    Full,
}

impl ScoreEvidence {
    /// `matched` or `full`.
    pub fn parse(name: &str) -> Result<ScoreEvidence> {
        match name.trim() {
            "matched" => Ok(ScoreEvidence::Matched),
            "full" => Ok(ScoreEvidence::Full),
            other => usage(format!("--score-evidence '{other}' is not matched or full")),
        }
    }
}

/// The prior of every encoded column.
#[derive(Debug, Clone, PartialEq)]
pub enum PriorChoice {
    /// Empirical Bayes per column (`fit_prior`).
    Fitted,
    /// Jeffreys' prior (Beta(1/2, 1/2), Gamma(1/2, 1), Dirichlet(1/2, ...)); for NIG a
    /// weak prior on the target's own scale.
    Jeffreys,
    /// Beta(1, 1), Dirichlet(1, ...); Gamma and NIG as Jeffreys.
    Uniform,
    /// The family's prior parameters: `a, b` (beta), `shape, rate` (gamma),
    /// `mu0, kappa0, alpha0, beta0` (nig), `c` (dirichlet).
    Numbers(Vec<f64>),
}

impl PriorChoice {
    /// Parse `fitted`, `jeffreys`, `uniform` or comma-separated numbers.
    pub fn parse(s: &str) -> Result<PriorChoice> {
        match s.trim() {
            "fitted" => Ok(PriorChoice::Fitted),
            "jeffreys" => Ok(PriorChoice::Jeffreys),
            "uniform" => Ok(PriorChoice::Uniform),
            other => {
                let numbers: Option<Vec<f64>> =
                    other.split(',').map(|x| x.trim().parse().ok()).collect();
                match numbers {
                    Some(v) if v.iter().all(|x| x.is_finite()) => Ok(PriorChoice::Numbers(v)),
                    _ => usage(format!(
                        "--prior '{other}' is not fitted, jeffreys, uniform or a list of numbers"
                    )),
                }
            }
        }
    }

    pub fn describe(&self) -> String {
        match self {
            PriorChoice::Fitted => "fitted".into(),
            PriorChoice::Jeffreys => "jeffreys".into(),
            PriorChoice::Uniform => "uniform".into(),
            PriorChoice::Numbers(v) => v
                .iter()
                .map(|x| x.to_string())
                .collect::<Vec<_>>()
                .join(","),
        }
    }
}

/// One reader of each encoding: a feature column per key (per class for Dirichlet).
#[derive(Debug, Clone, PartialEq)]
pub enum Reader {
    Mean,
    Sd,
    Var,
    /// The amount of data behind the posterior (`data_weight`; `evidence` is accepted).
    DataWeight,
    /// The quantile at a probability strictly between 0 and 1.
    Quantile(f64),
    /// P(theta > t).
    Above(f64),
}

impl Reader {
    /// Parse `mean`, `sd`, `var`, `evidence`, `qNN` (percent) or `above:T`.
    pub fn parse(spec: &str) -> Result<Reader> {
        let s = spec.trim();
        Ok(match s {
            "mean" => Reader::Mean,
            "sd" => Reader::Sd,
            "var" => Reader::Var,
            "data_weight" | "evidence" => Reader::DataWeight,
            _ if s.starts_with('q') => {
                let Ok(percent) = s[1..].parse::<f64>() else {
                    return usage(format!("--readers: '{s}' is not qNN (e.g. q05, q95)"));
                };
                if !(percent > 0.0 && percent < 100.0) {
                    return usage(format!(
                        "--readers: '{s}' needs a percentage strictly between 0 and 100"
                    ));
                }
                Reader::Quantile(percent / 100.0)
            }
            _ if s.starts_with("above:") => match s[6..].trim().parse::<f64>() {
                Ok(t) if t.is_finite() => Reader::Above(t),
                _ => {
                    return usage(format!(
                        "--readers: '{s}' is not above:T with a finite number T"
                    ))
                }
            },
            _ => {
                return usage(format!(
                "--readers: unknown reader '{s}'; use mean, sd, var, data_weight, qNN or above:T"
            ))
            }
        })
    }

    /// The reader as the user wrote it (stored in the bundle).
    pub fn spec(&self) -> String {
        match self {
            Reader::Mean => "mean".into(),
            Reader::Sd => "sd".into(),
            Reader::Var => "var".into(),
            Reader::DataWeight => "data_weight".into(),
            Reader::Quantile(q) => format!("q{}", format_percent(*q)),
            Reader::Above(t) => format!("above:{t}"),
        }
    }

    /// The suffix of its output columns.
    pub fn suffix(&self) -> String {
        match self {
            Reader::Quantile(q) => super::sanitize(&format!("q{}", format_percent(*q))),
            Reader::Above(t) => format!("above_{}", super::sanitize(&t.to_string())),
            other => other.spec(),
        }
    }

    /// Whether a Dirichlet encoding gets one column per class.
    pub fn per_class(&self) -> bool {
        !matches!(self, Reader::DataWeight)
    }

    /// The SQL of this reader over posterior expression `p` (and a class literal).
    pub(crate) fn sql(&self, p: &str, class: Option<&str>) -> String {
        let class = class
            .map(|c| format!(", {}", super::text(c)))
            .unwrap_or_default();
        match self {
            Reader::Mean => format!("posterior_mean({p}{class})"),
            // Features are always finite: where the variance is infinite (a NIG
            // posterior with alpha_n <= 1), the spread is half the central 68.27 %
            // interval, which is the sd of a normal distribution.
            Reader::Sd => format!(
                "COALESCE(posterior_sd({p}{class}), {})",
                half_width(p, &class)
            ),
            Reader::Var => format!(
                "COALESCE(posterior_var({p}{class}), power({}, 2))",
                half_width(p, &class)
            ),
            Reader::DataWeight => format!("posterior_data_weight({p})"),
            Reader::Quantile(q) => format!("posterior_quantile({p}{class}, {q})"),
            Reader::Above(t) => format!("posterior_prob_above({p}{class}, {t})"),
        }
    }
}

impl Reader {
    /// This reader of posterior `p` (for a Dirichlet class), in Rust: the same
    /// value as [`Reader::sql`] gives in the engine (scoring without it).
    pub fn value(&self, p: &AnyPosterior, class: Option<&str>) -> Result<f64> {
        let marginal = |class| {
            p.marginal(class)
                .map_err(|e| EncodeError::Usage(format!("reader {}: {e}", self.spec())))
        };
        let value = match self {
            Reader::DataWeight => p.evidence(),
            Reader::Mean => marginal(class)?.mean(),
            Reader::Sd | Reader::Var => {
                let m = marginal(class)?;
                let sd = Some(m.sd())
                    .filter(|v| v.is_finite())
                    .unwrap_or_else(|| (m.quantile(ONE_SD_ABOVE) - m.quantile(ONE_SD_BELOW)) / 2.0);
                match self {
                    Reader::Sd => sd,
                    _ => Some(m.var()).filter(|v| v.is_finite()).unwrap_or(sd * sd),
                }
            }
            Reader::Quantile(q) => marginal(class)?.quantile(*q),
            Reader::Above(t) => marginal(class)?.prob_above(*t),
        };
        if value.is_finite() {
            Ok(value)
        } else {
            Err(EncodeError::Query(format!(
                "reader {} of {p:?} is not a finite number",
                self.spec()
            )))
        }
    }
}

/// The normal distribution's probabilities one sd below and above the mean.
const ONE_SD_BELOW: f64 = 0.15865525393145707;
const ONE_SD_ABOVE: f64 = 0.8413447460685429;

/// Half the central 68.27 % interval of `p` (one normal sd either side).
fn half_width(p: &str, class: &str) -> String {
    format!(
        "(posterior_quantile({p}{class}, {ONE_SD_ABOVE:?}) - posterior_quantile({p}{class}, {ONE_SD_BELOW:?})) / 2"
    )
}

/// `5` for 0.05, `97.5` for 0.975: the percent as written, with two digits below 10.
fn format_percent(q: f64) -> String {
    let percent = (q * 100.0 * 1e9).round() / 1e9;
    if percent < 10.0 && percent.fract() == 0.0 {
        format!("{:02}", percent as u64)
    } else {
        percent.to_string()
    }
}

/// Everything `encode` can be asked.
#[derive(Debug, Clone)]
pub struct EncodeOptions {
    /// A table registered on the session: the training rows, numbered in scan order.
    pub train: String,
    pub target: String,
    /// Categorical columns, each encoded on its own.
    pub columns: Vec<String>,
    /// Interaction keys, each two or more columns.
    pub interactions: Vec<Vec<String>>,
    /// `None`: inferred from the target's type and values.
    pub family: Option<Kind>,
    pub prior: PriorChoice,
    /// `None`: `Time` when a time column is given, else `Kfold`.
    pub method: Option<Method>,
    pub folds: u32,
    pub seed: u64,
    pub time_column: Option<String>,
    /// Key text through `normalize_key` (NFKC, case, white space) before encoding.
    pub normalize_keys: bool,
    /// Recency weighting: a row `h` time units older than the newest training row
    /// (for as-of encodings: than the row being encoded) counts 2^(-age/h), in the time
    /// column's units (days for dates and timestamps, `TimeUnits`); `Fitted` chooses `h` per key from the training rows.
    pub half_life: Option<HalfLife>,
    /// How far back as-of training rows read (see `Horizon`); `None`: every
    /// strictly earlier time.
    pub horizon: Option<Horizon>,
    /// The half-life and horizon were given as durations, counted in days (a Python
    /// Timedelta): refused unless the time column holds dates or timestamps, whose
    /// units are days.
    pub durations_in_days: bool,
    pub time_ties: TimeTies,
    /// Exposure column of a Gamma target.
    pub exposure: Option<String>,
    /// The readers of every posterior key; `None`: the mean, and also the `sd` of a
    /// continuous key whose levels' variances differ widely (see `volatile`).
    pub readers: Option<Vec<Reader>>,
    /// Add a seeded posterior draw per row and key.
    pub draws: Option<u64>,
    /// Indicator columns `<key>_top1..` for up to this many of the largest levels
    /// (0: none). A learner does better with a big level's own identity than with
    /// any encoding of it; rare levels get none (their encoding carries them).
    pub indicators: usize,
    /// The rows (evidence) a level needs to get an indicator.
    pub indicator_min_rows: f64,
    /// Keys (a column, or an interaction spelled `a:b`) with a chosen treatment;
    /// the others get `Posterior`, with the reason from their level sizes in the
    /// summary (giving few large levels as `Levels` alone was measured worse).
    pub treatments: Vec<(String, Treatment)>,
    /// Chains of key columns, finest first (`postcode>district>region`): each
    /// level's prior is centred on its parent level's posterior, with a strength
    /// per layer fitted from the data (k-fold and as-of encodings, refreshes).
    pub hierarchy: Vec<Vec<String>>,
    /// A table registered on the session to score with the encodings.
    pub score: Option<String>,
    /// The data weight scored rows read (k-fold only; as-of encodings already grow
    /// with time the way scoring does).
    pub score_evidence: ScoreEvidence,
    /// Draw the HTML report (`EncodeOutput::report`, `report.html`).
    pub report: bool,
    /// Write the intermediate tables (fits, priors, per-level encodings) as Parquet
    /// under this directory instead of holding them in the session's memory
    /// (`--work-dir`; on a cluster every executor would read them there).
    pub work_dir: Option<std::path::PathBuf>,
}

impl EncodeOptions {
    /// The defaults: fitted prior, 5-fold out-of-fold encodings, the mean reader.
    pub fn new(train: &str, target: &str, columns: &[&str]) -> EncodeOptions {
        EncodeOptions {
            train: train.to_string(),
            target: target.to_string(),
            columns: columns.iter().map(|c| c.to_string()).collect(),
            interactions: Vec::new(),
            family: None,
            prior: PriorChoice::Fitted,
            method: None,
            folds: 5,
            seed: 0,
            time_column: None,
            normalize_keys: false,
            half_life: None,
            horizon: None,
            durations_in_days: false,
            time_ties: TimeTies::Strict,
            exposure: None,
            readers: None,
            draws: None,
            indicators: 20,
            indicator_min_rows: 100.0,
            treatments: Vec::new(),
            hierarchy: Vec::new(),
            score: None,
            score_evidence: ScoreEvidence::Matched,
            report: false,
            work_dir: None,
        }
    }

    /// The method after defaults, checked against the other options.
    pub fn method(&self) -> Result<Method> {
        // With a time column the method is as-of unless k-fold is asked for; the
        // recency weights and the horizon then only change what each row reads.
        self.check_horizon()?;
        if let Some(half_life) = self.half_life {
            if let HalfLife::Units(h) = half_life {
                check_time_units("--half-life", h, " or 'fitted'")?;
            }
            if self.time_column.is_none() {
                return usage("--half-life needs --time-column (the age of each row)");
            }
        }
        match (self.method, &self.time_column) {
            (Some(Method::Time), None) => usage("--method time needs --time-column"),
            (Some(m @ Method::Kfold), Some(t)) if self.half_life.is_none() => usage(format!(
                "--time-column '{t}' is only used by --method time or --half-life, not by \
                 --method {} alone",
                m.name()
            )),
            (Some(m), _) => Ok(m),
            (None, Some(_)) => Ok(Method::Time),
            (None, None) => Ok(Method::Kfold),
        }
    }

    /// A horizon, if any, is a span of time and goes with as-of encodings.
    fn check_horizon(&self) -> Result<()> {
        let Some(horizon) = self.horizon else {
            return Ok(());
        };
        if let Horizon::Units(h) = horizon {
            check_time_units("--horizon", h, ", 'matched' or 'none'")?;
        }
        if horizon == Horizon::None {
            return Ok(());
        }
        match (self.method, &self.time_column) {
            (_, None) => usage("--horizon needs --time-column (as-of encodings)"),
            (Some(Method::Kfold), _) => {
                usage("--horizon applies to as-of encodings (--method time), not to --method kfold")
            }
            _ => Ok(()),
        }
    }
}

/// A span of `flag` in the time column's units must be a finite number > 0;
/// `others` ends the message with the words it also takes.
fn check_time_units(flag: &str, h: f64, others: &str) -> Result<()> {
    if h.is_finite() && h > 0.0 {
        return Ok(());
    }
    usage(format!(
        "{flag} {h} is out of range; allowed: a finite number > 0 (in the time column's \
         units){others}"
    ))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn readers_round_trip_and_name_columns() {
        for (spec, suffix) in [
            ("mean", "mean"),
            ("q05", "q05"),
            ("q95", "q95"),
            ("q97.5", "q97_5"),
            ("above:0.15", "above_0_15"),
            ("data_weight", "data_weight"),
        ] {
            let r = Reader::parse(spec).unwrap();
            assert_eq!(r.spec(), spec);
            assert_eq!(r.suffix(), suffix);
        }
        assert!(Reader::parse("q0").is_err());
        assert!(Reader::parse("above:inf").is_err());
    }

    #[test]
    fn priors_parse() {
        assert_eq!(
            PriorChoice::parse(" 2, 18 ").unwrap(),
            PriorChoice::Numbers(vec![2.0, 18.0])
        );
        assert_eq!(PriorChoice::parse("fitted").unwrap(), PriorChoice::Fitted);
        assert!(PriorChoice::parse("2,x").is_err());
    }
}
