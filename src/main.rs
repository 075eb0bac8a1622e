//! The `posterity` command line: SQL with the posterity functions over Parquet,
//! CSV and JSON files.

mod shell;

#[global_allocator]
static ALLOCATOR: mimalloc::MiMalloc = mimalloc::MiMalloc;

use std::path::PathBuf;
use std::process::ExitCode;

use clap::{Parser, Subcommand};

use shell::output::Format;
use shell::{CsvOptions, Failure, Shell};

/// Conjugate Bayesian encodings of categorical columns, in SQL, over your files.
#[derive(Parser, Debug)]
#[command(name = "posterity", version, about)]
struct Args {
    /// SQL to run (repeatable; several statements may be separated by ';').
    #[arg(short = 'c', long = "command", value_name = "SQL")]
    commands: Vec<String>,
    /// SQL script to run (repeatable).
    #[arg(short = 'f', long = "file", value_name = "PATH")]
    files: Vec<PathBuf>,
    /// Register a table: NAME=PATH, PATH a Parquet/CSV/TSV/NDJSON file, a directory or a glob.
    #[arg(short = 't', long = "table", value_name = "NAME=PATH")]
    tables: Vec<String>,
    /// Output format.
    #[arg(long, value_enum, default_value = "table")]
    format: Format,
    /// Write results to this file (atomically: a temporary file, then a rename).
    #[arg(short = 'o', long, value_name = "FILE")]
    output: Option<PathBuf>,
    /// No row counts or timings on stderr.
    #[arg(short = 'q', long)]
    quiet: bool,
    /// Memory limit of the engine, e.g. 512M or 4G.
    #[arg(long, value_name = "SIZE")]
    memory_limit: Option<String>,
    /// Threads (and target partitions) of the engine.
    #[arg(long, value_name = "N")]
    threads: Option<usize>,
    /// CSV files have no header row.
    #[arg(long)]
    csv_no_header: bool,
    /// CSV field delimiter (one character).
    #[arg(long, default_value = ",", value_name = "CHAR")]
    csv_delimiter: String,
    /// Text that marks NULL in CSV files, e.g. NA.
    #[arg(long, value_name = "TEXT")]
    csv_null: Option<String>,
    /// CSV columns to read as text exactly as written, comma-separated (codes with
    /// leading zeros such as postcodes: 00123 stays 00123, not the number 123).
    #[arg(long, value_delimiter = ',', value_name = "COLUMNS")]
    csv_text: Vec<String>,
    #[command(subcommand)]
    command: Option<Command>,
}

#[derive(Subcommand, Debug)]
enum Command {
    /// Print the function reference, or one function's documentation.
    Functions { name: Option<String> },
    /// Leak-free training encodings, encoding tables, a serving bundle and a scored file.
    Encode(Box<shell::encode::EncodeArgs>),
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

fn main() -> ExitCode {
    let args = Args::parse();
    let threads = args.threads;
    let mut runtime = tokio::runtime::Builder::new_multi_thread();
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
    match runtime.block_on(run(args)) {
        Ok(()) => ExitCode::SUCCESS,
        Err(f) => {
            eprintln!("error: {}", f.message);
            ExitCode::from(f.code as u8)
        }
    }
}

async fn run(args: Args) -> Result<(), Failure> {
    if let Some(Command::Functions { name }) = &args.command {
        print!("{}", shell::functions_help(name.as_deref())?);
        return Ok(());
    }
    let memory = args
        .memory_limit
        .as_deref()
        .map(shell::parse_size)
        .transpose()
        .map_err(Failure::usage)?;
    let delimiter = match args.csv_delimiter.as_bytes() {
        [b] => *b,
        b"\\t" => b'\t',
        _ => {
            return Err(Failure::usage(format!(
                "--csv-delimiter must be one character, got '{}'",
                args.csv_delimiter
            )))
        }
    };
    let shell = Shell {
        ctx: shell::session(memory, args.threads)?,
        format: args.format,
        output: args.output.clone(),
        quiet: args.quiet,
        csv: CsvOptions {
            header: !args.csv_no_header,
            delimiter,
            null: args.csv_null.clone(),
            text: args.csv_text.iter().map(|c| c.trim().to_string()).collect(),
        },
    };
    for spec in &args.tables {
        shell.register_table(spec).await?;
    }
    if let Some(Command::Encode(encode)) = &args.command {
        return shell::encode::run(&shell, encode).await;
    }
    if let Some(Command::Demo { dir, rows, seed }) = &args.command {
        return shell::demo::run(&shell, dir, *rows, *seed).await;
    }
    for sql in &args.commands {
        shell.run_script(sql, "-c").await?;
    }
    for path in &args.files {
        let script = std::fs::read_to_string(path)
            .map_err(|e| Failure::query(format!("cannot read {}: {e}", path.display())))?;
        shell
            .run_script(&script, &path.display().to_string())
            .await?;
    }
    if args.commands.is_empty() && args.files.is_empty() {
        shell.run_stdin_or_prompt().await?;
    }
    Ok(())
}
