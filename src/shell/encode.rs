//! `posterity encode`: argument handling and file output over
//! [`crate::encode`], which plans, runs and writes the workflow.

use std::io::IsTerminal;
use std::path::PathBuf;

use crate::bundle::Bundle;
use crate::columnar_copy::{replace_text_table, ColumnarCopy};
use crate::encode::{
    self, EncodeError, EncodeOptions, Method, PriorChoice, Reader, Treatment, UpdateOptions,
};
use crate::layout::Kind;

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
pub enum MethodChoice {
    /// K-fold out-of-fold: a row's encoding uses the other folds only.
    Kfold,
    /// Leave-one-out: refused with the reason (it leaks each row's target to tree learners).
    Loo,
    /// Time order: a row's encoding uses earlier rows only (needs --time-column).
    Time,
}

/// The data behind each level that scored rows read.
#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum ScoreEvidenceChoice {
    /// (k-1)/k of it, as an out-of-fold training row sees: same feature distribution.
    Matched,
    /// All of it.
    Full,
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
    /// Training file or directory (Parquet, CSV, TSV or NDJSON, also gzip-compressed:
    /// name.csv.gz); with
    /// --update, the new rows.
    #[arg(long)]
    pub train: String,
    /// Target column (with --update, taken from the previous bundle).
    #[arg(long, required_unless_present = "update")]
    pub target: Option<String>,
    /// Categorical columns to encode, comma-separated.
    #[arg(long, value_delimiter = ',', required_unless_present = "update")]
    pub columns: Vec<String>,
    /// Output directory (written as a whole: it ends up holding exactly this run's files).
    #[arg(long)]
    pub out: PathBuf,
    /// Replace an output directory that holds other files.
    #[arg(long)]
    pub replace: bool,
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
    pub method: Option<MethodChoice>,
    /// Number of folds for kfold, 2 to 10 (more approach leave-one-out, which leaks).
    #[arg(long, default_value_t = 5)]
    pub folds: u32,
    /// Column giving the time order for --method time (the default with it) and the ages
    /// for --half-life: numbers, dates, timestamps or ISO date text (2024-01-31).
    #[arg(long)]
    pub time_column: Option<String>,
    /// Recency weighting: a row this many time units older than the row encoded (with
    /// --method kfold: than the newest training row) counts half (a number, dates or
    /// timestamps in days);
    /// `fitted` chooses it per key from the training rows (the latest fifth scored by fits
    /// of the rest).
    #[arg(long, value_name = "UNITS|fitted")]
    pub half_life: Option<String>,
    /// As-of encodings: training rows read only their level's rows at least this many
    /// time units older (days for dates and timestamps), as scored rows that far past the
    /// training period do; `matched`: the --score rows' median time past the
    /// training rows; `none` (the default): every earlier time.
    #[arg(long, value_name = "UNITS|matched|none")]
    pub horizon: Option<String>,
    /// Normalise key text first (Unicode compatibility form, case, white space), so
    /// "Golden Retriever" and " golden  retriever" are one level.
    #[arg(long)]
    pub normalize_keys: bool,
    /// Rows at the same time: strict (default; they never see each other) or file-order.
    #[arg(long, value_enum, default_value = "strict")]
    pub time_ties: TimeTies,
    /// Exposure column for the gamma family (events per unit of exposure).
    #[arg(long)]
    pub exposure: Option<String>,
    /// Readers: mean, sd, var, data_weight (evidence), qNN (quantile at NN percent), above:T (P(theta > T)). Default: mean, and sd for a continuous key whose levels differ widely in spread.
    #[arg(long, value_delimiter = ',')]
    pub readers: Option<Vec<String>>,
    /// Add a seeded posterior draw per row and column (stochastic training encodings).
    #[arg(long, value_name = "SEED")]
    pub draws: Option<u64>,
    /// Indicator columns <key>_top1..N for the N largest levels (0: none).
    #[arg(long, default_value_t = 20, value_name = "N")]
    pub indicators: usize,
    /// Rows a level needs to get an indicator column.
    #[arg(long, default_value_t = 100.0, value_name = "ROWS")]
    pub indicator_min_rows: f64,
    /// Per key, what it becomes: posterior (readers and indicators of its largest
    /// levels), levels (an indicator for every level) or codes (one integer column,
    /// -1 when unseen), e.g. clinic=levels,breed:clinic=codes. Keys not named are
    /// posterior; the summary says how their levels are sized.
    #[arg(long, value_delimiter = ',', value_name = "KEY=AS")]
    pub treatment: Vec<String>,
    /// Key columns nested finest first, e.g. postcode>district>region (repeatable): each
    /// level's prior is centred on its parent's posterior, with a fitted strength per layer.
    #[arg(long, value_name = "CHILD>PARENT")]
    pub hierarchy: Vec<String>,
    /// Seed of the fold assignment.
    #[arg(long, default_value_t = 0)]
    pub seed: u64,
    /// File to score with the encodings, in the formats --train reads (unseen levels and
    /// NULL keys get the prior).
    #[arg(long)]
    pub score: Option<String>,
    /// The data behind each level that scored rows read: matched (default; (k-1)/k of
    /// it, as an out-of-fold training row sees) or full.
    #[arg(long, value_enum, default_value = "matched")]
    pub score_evidence: ScoreEvidenceChoice,
    /// Also write report.html: interval, shrinkage and prior plots of every encoded
    /// column in one self-contained file.
    #[arg(long)]
    pub report: bool,
    /// Refresh a previous output directory with the --train rows: its posteriors are
    /// pooled with the new rows under its stored priors (no refit).
    #[arg(long, value_name = "PREVIOUS_OUT")]
    pub update: Option<PathBuf>,
    /// With --update: multiply the stored evidence by this factor first (0.5 = one half-life).
    #[arg(long, value_name = "FACTOR", requires = "update")]
    pub decay: Option<f64>,
    /// Print every SQL statement run.
    #[arg(long)]
    pub show_sql: bool,
    /// Write the intermediate tables (fits, priors, per-level encodings) as Parquet
    /// under DIR instead of holding them in memory (they grow with levels and folds);
    /// needed with --cluster, where every executor must read and write DIR.
    #[arg(long, value_name = "DIR")]
    pub work_dir: Option<PathBuf>,
}

impl EncodeArgs {
    /// The arguments of `posterity encode WORDS...` (the demo runs the command a
    /// user would type).
    pub fn from_words(words: &[&str]) -> Result<EncodeArgs, Failure> {
        #[derive(clap::Parser)]
        struct Command {
            #[command(flatten)]
            args: EncodeArgs,
        }
        let words = std::iter::once("encode").chain(words.iter().copied());
        <Command as clap::Parser>::try_parse_from(words)
            .map(|c| c.args)
            .map_err(|e| Failure::usage(e.to_string()))
    }
}

impl From<EncodeError> for Failure {
    fn from(e: EncodeError) -> Failure {
        match e {
            EncodeError::Usage(m) => Failure::usage(m),
            EncodeError::Query(m) | EncodeError::Io(m) => Failure::query(m),
        }
    }
}

/// Registered names of the input files (the user never sees them: every message
/// speaks of the training or scoring table).
const TRAIN_TABLE: &str = "__encode_train";
const SCORE_TABLE: &str = "__encode_score";

fn split_trimmed(values: &[String]) -> Vec<String> {
    values.iter().map(|c| c.trim().to_string()).collect()
}

fn options(args: &EncodeArgs) -> Result<EncodeOptions, Failure> {
    let mut o = EncodeOptions::new(TRAIN_TABLE, args.target.as_deref().unwrap_or_default(), &[]);
    o.columns = split_trimmed(&args.columns);
    o.interactions = args
        .interactions
        .iter()
        .map(|spec| spec.split(':').map(|p| p.trim().to_string()).collect())
        .collect();
    o.family = args.family.map(|f| match f {
        FamilyChoice::Beta => Kind::Beta,
        FamilyChoice::Gamma => Kind::Gamma,
        FamilyChoice::Nig => Kind::Nig,
        FamilyChoice::Dirichlet => Kind::Dirichlet,
    });
    o.prior = PriorChoice::parse(&args.prior)?;
    o.method = match args.method {
        None => None,
        Some(MethodChoice::Kfold) => Some(Method::Kfold),
        Some(MethodChoice::Time) => Some(Method::Time),
        Some(MethodChoice::Loo) => return Err(Failure::usage(encode::LOO_REFUSED)),
    };
    o.folds = args.folds;
    o.seed = args.seed;
    o.time_column = args.time_column.as_ref().map(|t| t.trim().to_string());
    o.half_life = args
        .half_life
        .as_deref()
        .map(encode::HalfLife::parse)
        .transpose()?;
    o.horizon = args
        .horizon
        .as_deref()
        .map(encode::Horizon::parse)
        .transpose()?;
    o.normalize_keys = args.normalize_keys;
    o.time_ties = match args.time_ties {
        TimeTies::Strict => encode::TimeTies::Strict,
        TimeTies::FileOrder => encode::TimeTies::FileOrder,
    };
    o.exposure = args.exposure.as_ref().map(|t| t.trim().to_string());
    o.readers = args
        .readers
        .as_ref()
        .map(|readers| readers.iter().map(|r| Reader::parse(r)).collect())
        .transpose()?;
    o.draws = args.draws;
    o.indicators = args.indicators;
    o.indicator_min_rows = args.indicator_min_rows;
    o.treatments = args
        .treatment
        .iter()
        .map(|spec| match spec.split_once('=') {
            Some((key, treatment)) => Ok((key.trim().to_string(), Treatment::parse(treatment)?)),
            None => Err(Failure::usage(format!(
                "--treatment '{spec}' is not KEY=AS (AS: posterior, levels or codes)"
            ))),
        })
        .collect::<Result<_, Failure>>()?;
    o.hierarchy = args
        .hierarchy
        .iter()
        .map(|chain| encode::parse_hierarchy(chain))
        .collect::<Result<_, _>>()?;
    o.score = args.score.as_ref().map(|_| SCORE_TABLE.to_string());
    o.score_evidence = match args.score_evidence {
        ScoreEvidenceChoice::Matched => encode::ScoreEvidence::Matched,
        ScoreEvidenceChoice::Full => encode::ScoreEvidence::Full,
    };
    o.report = args.report;
    o.work_dir = args.work_dir.clone();
    Ok(o)
}

/// Register the input files; key columns of CSV files are read as text as written.
async fn register_inputs(
    shell: &Shell,
    args: &EncodeArgs,
    key_columns: &[String],
) -> Result<(), Failure> {
    for (table, path, option) in inputs(args) {
        shell
            .register_file(table, path, option, key_columns)
            .await?;
    }
    Ok(())
}

/// Each input's table, path and option.
fn inputs(args: &EncodeArgs) -> impl Iterator<Item = (&'static str, &str, &'static str)> {
    let score = args
        .score
        .as_deref()
        .map(|s| (SCORE_TABLE, s.trim(), "--score"));
    std::iter::once((TRAIN_TABLE, args.train.trim(), "--train")).chain(score)
}

/// The inputs read from text files, read once into Parquet copies for encode's
/// repeated scans (kept while the copies are); not on a cluster, whose executors
/// read the paths given.
async fn columnar_copies(shell: &Shell, args: &EncodeArgs) -> Vec<ColumnarCopy> {
    let mut copies = Vec::new();
    if !shell.cluster {
        for (table, path, _) in inputs(args) {
            copies.extend(replace_text_table(&shell.ctx, table, path).await);
        }
    }
    copies
}

/// A one-line progress report at a terminal; nothing otherwise.
fn progress_line(quiet: bool) -> impl FnMut(&str) {
    let show = !quiet && std::io::stderr().is_terminal();
    let start = std::time::Instant::now();
    move |step: &str| {
        if show {
            eprint!("\r\x1b[2K{:>6.1} s  {step}", start.elapsed().as_secs_f64());
        }
    }
}

fn clear_progress(quiet: bool) {
    if !quiet && std::io::stderr().is_terminal() {
        eprint!("\r\x1b[2K");
    }
}

pub async fn run(shell: &Shell, args: &EncodeArgs) -> Result<(), Failure> {
    if let Some(previous) = &args.update {
        return update(shell, args, previous).await;
    }
    let options = options(args)?;
    let key_columns: Vec<String> = options
        .columns
        .iter()
        .chain(options.interactions.iter().flatten())
        .cloned()
        .collect();
    register_inputs(shell, args, &key_columns).await?;
    // A misspelt column is refused before the rows are copied.
    encode::check_columns(&shell.ctx, &options).await?;
    let _copies = columnar_copies(shell, args).await;
    let plan = encode::resolve(&shell.ctx, &options).await?;
    if args.show_sql {
        for s in plan.statements() {
            println!("-- {}\n{};\n", s.name, s.sql);
        }
    }
    let mut progress = progress_line(shell.quiet);
    let output = encode::run_with_progress(&shell.ctx, &plan, &mut progress).await;
    let output = output.inspect_err(|_| clear_progress(shell.quiet))?;
    progress("writing");
    let written = encode::write(&output, &args.out, args.replace).await;
    clear_progress(shell.quiet);
    written?;
    print!(
        "encoded {} key(s) of {} ({} family, {} prior, {} training encodings) into {}\n{}",
        plan.keys.len(),
        args.train,
        plan.family.short_name(),
        options.prior.describe(),
        plan.method.name(),
        args.out.display(),
        encode::summary_table(&output.summary)
    );
    if let (Some(score), Some(unseen)) = (&args.score, &output.unseen) {
        print!(
            "scored {score} into {} (rows at levels the training rows never saw get the \
             prior; also in unseen_levels.json)\n{}",
            args.out.join("scored.parquet").display(),
            encode::unseen_table(&output.summary, unseen)
        );
    }
    Ok(())
}

/// `encode --update PREVIOUS_OUT --train new_rows`.
async fn update(shell: &Shell, args: &EncodeArgs, previous: &PathBuf) -> Result<(), Failure> {
    let ignored = [
        (args.target.is_some(), "--target"),
        (!args.columns.is_empty(), "--columns"),
        (!args.interactions.is_empty(), "--interactions"),
        (args.family.is_some(), "--family"),
        (args.method.is_some(), "--method"),
        (args.time_column.is_some(), "--time-column"),
        (args.draws.is_some(), "--draws"),
        (args.half_life.is_some(), "--half-life (use --decay)"),
        (args.horizon.is_some(), "--horizon"),
        (args.prior != "fitted", "--prior"),
    ];
    if let Some((_, flag)) = ignored.iter().find(|(given, _)| *given) {
        return Err(Failure::usage(format!(
            "{flag} cannot be used with --update: the previous run's bundle fixes the target, \
             keys, family, priors and readers"
        )));
    }
    let path = previous.join("bundle.json");
    let text = std::fs::read_to_string(&path)
        .map_err(|e| Failure::usage(format!("--update: cannot read {}: {e}", path.display())))?;
    let bundle = Bundle::from_json(&text)
        .map_err(|e| Failure::usage(format!("--update {}: {e}", path.display())))?;
    let key_columns = bundle.key_columns();
    register_inputs(shell, args, &key_columns).await?;
    let options = UpdateOptions {
        previous: bundle,
        train: TRAIN_TABLE.into(),
        exposure: args.exposure.clone(),
        decay: args.decay,
        score: args.score.as_ref().map(|_| SCORE_TABLE.to_string()),
    };
    let output = encode::update(&shell.ctx, &options).await?;
    encode::write(&output, &args.out, args.replace || args.out == *previous).await?;
    print!(
        "refreshed {} with {} into {}\n{}",
        previous.display(),
        args.train,
        args.out.display(),
        encode::summary_table(&output.summary)
    );
    Ok(())
}
