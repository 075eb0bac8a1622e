//! The command line: arguments, and running them on a local session or a cluster.

use std::path::PathBuf;
use std::process::ExitCode;

use clap::{Parser, Subcommand};

use std::future::Future;
use std::pin::Pin;

use datafusion::prelude::SessionContext;

use super::output::Format;
use super::{CsvOptions, Failure, Shell};

/// Conjugate Bayesian encodings of categorical columns, in SQL, over your files.
#[derive(Parser, Debug)]
#[command(name = "posterity", version, about)]
pub struct Args {
    /// SQL to run (repeatable; several statements may be separated by ';').
    // SQL may start with a `--` comment: the value is taken as given.
    #[arg(
        short = 'c',
        long = "command",
        value_name = "SQL",
        allow_hyphen_values = true
    )]
    commands: Vec<String>,
    /// SQL script to run (repeatable).
    #[arg(short = 'f', long = "file", value_name = "PATH")]
    files: Vec<PathBuf>,
    /// Register a table: NAME=PATH, PATH a Parquet/CSV/TSV/NDJSON file, a directory (also
    /// one partitioned by value: year=2024/part-0.parquet) or a glob (a file or a
    /// directory's files may be gzip-compressed: name.csv.gz).
    #[arg(short = 't', long = "table", value_name = "NAME=PATH")]
    tables: Vec<String>,
    /// Output format (default: from the --output extension, else table).
    #[arg(long, value_enum, global = true)]
    format: Option<Format>,
    /// Write results to this file (atomically: a temporary file, then a rename).
    #[arg(global = true, short = 'o', long, value_name = "FILE")]
    output: Option<PathBuf>,
    /// No row counts or timings on stderr.
    #[arg(global = true, short = 'q', long)]
    quiet: bool,
    /// Memory limit of the engine, e.g. 512M or 4G.
    #[arg(global = true, long, value_name = "SIZE")]
    memory_limit: Option<String>,
    /// Threads (and target partitions) of the engine.
    #[arg(global = true, long, value_name = "N")]
    threads: Option<usize>,
    /// CSV files have no header row.
    #[arg(global = true, long)]
    csv_no_header: bool,
    /// CSV field delimiter (one character).
    #[arg(global = true, long, default_value = ",", value_name = "CHAR")]
    csv_delimiter: String,
    /// Text that marks NULL in CSV files, e.g. NA (empty fields stay NULL too).
    #[arg(global = true, long, value_name = "TEXT")]
    csv_null: Option<String>,
    /// How many rows of a CSV file its columns' types are inferred from: a number, or
    /// all (the whole file is read once more first). Default 1000.
    #[arg(global = true, long, value_name = "N|all", value_parser = CsvOptions::parse_infer_rows)]
    csv_infer_rows: Option<usize>,
    /// CSV columns (and a partitioned directory's path columns) to read as text exactly
    /// as written, comma-separated (codes with leading zeros such as postcodes: 00123
    /// stays 00123, not the number 123).
    #[arg(global = true, long, value_delimiter = ',', value_name = "COLUMNS")]
    csv_text: Vec<String>,
    /// Run SQL on a Ballista cluster: its scheduler's URL, df://HOST:PORT (the
    /// cluster's executors read the files; see README, "When one machine is not enough").
    #[arg(global = true, long, value_name = "URL")]
    cluster: Option<String>,
    #[command(subcommand)]
    command: Option<Command>,
}

#[derive(Subcommand, Debug)]
enum Command {
    /// Print the function reference, or one function's documentation.
    Functions { name: Option<String> },
    /// Leak-free training encodings, encoding tables, a serving bundle and a scored file.
    // A negative number is a value (`--half-life -1` is refused by its range, in words).
    #[command(allow_negative_numbers = true)]
    Encode(Box<super::encode::EncodeArgs>),
    /// Generate the invented veterinary-clinics data and run the whole job on it.
    Demo {
        /// Directory for the generated files.
        #[arg(long, default_value = "demo-out")]
        dir: PathBuf,
        /// Appointments to generate.
        #[arg(long, default_value_t = 200_000)]
        rows: usize,
        /// Seed of the generator.
        #[arg(long, default_value_t = 7)]
        seed: u64,
    },
}

/// A session on a cluster, for binaries built with a cluster client
/// (`posterity-cluster`): given the scheduler's URL.
pub type Connect =
    fn(String) -> Pin<Box<dyn Future<Output = Result<SessionContext, String>> + Send>>;

/// The binary built with the cluster client, next to this one.
const CLUSTER_SHELL: &str = "posterity-cluster";

/// The whole command line: parse, run, report. `connect` makes cluster sessions
/// (`None` in the plain shell, which hands `--cluster` to `posterity-cluster`).
pub fn main(connect: Option<Connect>) -> ExitCode {
    super::without_huge_pages();
    let args = Args::parse();
    if args.cluster.is_some() && connect.is_none() {
        return hand_to_cluster_shell();
    }
    let threads = args.threads;
    let mut runtime = tokio::runtime::Builder::new_multi_thread();
    // Deep plans (encode's training table joins a table per key and per indicator
    // set) recurse further than tokio's 2 MiB worker stacks in a debug build.
    runtime.thread_stack_size(64 << 20);
    if let Some(n) = threads {
        runtime.worker_threads(n.max(1));
    }
    let runtime = match runtime.enable_all().build() {
        Ok(r) => r,
        Err(e) => {
            eprintln!("error: cannot start the runtime: {e}");
            return ExitCode::from(1);
        }
    };
    let result = runtime.block_on(run(args, connect));
    // Decompressed and converted copies of input files live only as long as the run.
    crate::files::remove_temporaries();
    match result {
        Ok(()) => ExitCode::SUCCESS,
        // Standard output closed by its reader (`| head`): a quiet success.
        Err(f) if f.code == 0 => ExitCode::SUCCESS,
        Err(f) => {
            eprintln!("error: {}", f.message);
            ExitCode::from(f.code as u8)
        }
    }
}

/// `--cluster` in the plain shell: run the same command line with the shell that has
/// the cluster client (a workspace member, so the plain shell builds without it).
fn hand_to_cluster_shell() -> ExitCode {
    let sibling = std::env::current_exe()
        .ok()
        .and_then(|me| Some(me.parent()?.join(CLUSTER_SHELL)))
        .filter(|p| p.is_file());
    let Some(sibling) = sibling else {
        eprintln!(
            "error: --cluster needs the {CLUSTER_SHELL} binary next to this one; build it with \
             cargo build --release --workspace"
        );
        return ExitCode::from(2);
    };
    let status = std::process::Command::new(&sibling)
        .args(std::env::args_os().skip(1))
        .status();
    match status {
        Ok(s) => ExitCode::from(s.code().unwrap_or(1).clamp(0, 255) as u8),
        Err(e) => {
            eprintln!("error: cannot run {}: {e}", sibling.display());
            ExitCode::from(1)
        }
    }
}

async fn run(args: Args, connect: Option<Connect>) -> Result<(), Failure> {
    if let Some(Command::Functions { name }) = &args.command {
        return super::emit(&super::functions_help(name.as_deref())?);
    }
    let memory = args
        .memory_limit
        .as_deref()
        .map(super::parse_size)
        .transpose()
        .map_err(Failure::usage)?;
    let delimiter = CsvOptions::parse_delimiter(&args.csv_delimiter)
        .map_err(|e| Failure::usage(format!("--csv-delimiter {e}")))?;
    let format = match (args.format, &args.output) {
        (Some(f), _) => f,
        (None, Some(path)) => Format::from_extension(path).ok_or_else(|| {
            Failure::usage(format!(
                "--output {}: cannot tell the format from the extension; give --format \
                 (table, csv, tsv, json, ndjson or svg)",
                path.display()
            ))
        })?,
        (None, None) => Format::Table,
    };
    let mut scripts = Vec::new();
    for sql in &args.commands {
        scripts.push((sql.clone(), "-c".to_string()));
    }
    for path in &args.files {
        let script = std::fs::read_to_string(path)
            .map_err(|e| Failure::usage(format!("cannot read {}: {e}", path.display())))?;
        scripts.push((script, path.display().to_string()));
    }
    if let Some(path) = &args.output {
        let results = scripts
            .iter()
            .flat_map(|(s, _)| super::split::statements(s).0)
            .filter(|s| super::returns_rows(s))
            .count();
        if results > 1 {
            return Err(Failure::usage(format!(
                "--output {} takes the result of one statement, but {results} statements \
                 return rows; run them one at a time, or write each with COPY (...) TO 'file'",
                path.display()
            )));
        }
    }
    let interactive = args.command.is_none()
        && scripts.is_empty()
        && std::io::IsTerminal::is_terminal(&std::io::stdin());
    let ctx = match (&args.cluster, connect) {
        (Some(url), Some(connect)) => {
            match &args.command {
                Some(Command::Demo { .. }) => {
                    return Err(Failure::usage(
                        "--cluster: the demo runs on one machine; on a cluster, run its encode \
                         command with --work-dir (README, \"When one machine is not enough\")"
                            .to_string(),
                    ))
                }
                Some(Command::Encode(e)) if e.work_dir.is_none() => {
                    return Err(Failure::usage(
                        "--cluster: encode needs --work-dir DIR, a directory every executor can \
                         read and write (its intermediate tables go there)"
                            .to_string(),
                    ))
                }
                _ => {}
            }
            connect(url.clone())
                .await
                .map_err(|e| Failure::query(format!("--cluster {url}: {e}")))?
        }
        _ => super::session(memory, args.threads)?,
    };
    let shell = Shell {
        ctx,
        cluster: args.cluster.is_some(),
        format,
        interactive,
        output: args.output.clone(),
        quiet: args.quiet,
        csv: CsvOptions {
            header: !args.csv_no_header,
            delimiter,
            null: args.csv_null.clone(),
            text: args.csv_text.iter().map(|c| c.trim().to_string()).collect(),
            infer_rows: args.csv_infer_rows,
        },
    };
    for spec in &args.tables {
        shell.register_table(spec).await?;
    }
    if let Some(Command::Encode(encode)) = &args.command {
        return super::encode::run(&shell, encode).await;
    }
    if let Some(Command::Demo { dir, rows, seed }) = &args.command {
        return super::demo::run(&shell, dir, *rows, *seed).await;
    }
    for (script, source) in &scripts {
        shell.run_script(script, source).await?;
    }
    if scripts.is_empty() {
        shell.run_stdin_or_prompt().await?;
    }
    Ok(())
}
