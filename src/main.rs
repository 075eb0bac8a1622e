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
    /// Text that marks NULL in CSV files, e.g. NA.
    #[arg(global = true, long, value_name = "TEXT")]
    csv_null: Option<String>,
    /// CSV columns to read as text exactly as written, comma-separated (codes with
    /// leading zeros such as postcodes: 00123 stays 00123, not the number 123).
    #[arg(global = true, long, value_delimiter = ',', value_name = "COLUMNS")]
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
        // Standard output closed by its reader (`| head`): a quiet success.
        Err(f) if f.code == 0 => ExitCode::SUCCESS,
        Err(f) => {
            eprintln!("error: {}", f.message);
            ExitCode::from(f.code as u8)
        }
    }
}

async fn run(args: Args) -> Result<(), Failure> {
    if let Some(Command::Functions { name }) = &args.command {
        return shell::emit(&shell::functions_help(name.as_deref())?);
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
    let format = match (args.format, &args.output) {
        (Some(f), _) => f,
        (None, Some(path)) => Format::from_extension(path).ok_or_else(|| {
            Failure::usage(format!(
                "--output {}: cannot tell the format from the extension; give --format \
                 (table, csv, tsv, json or ndjson)",
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
            .flat_map(|(s, _)| shell::split::statements(s).0)
            .filter(|s| shell::returns_rows(s))
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
    let shell = Shell {
        ctx: shell::session(memory, args.threads)?,
        format,
        interactive,
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
    for (script, source) in &scripts {
        shell.run_script(script, source).await?;
    }
    if scripts.is_empty() {
        shell.run_stdin_or_prompt().await?;
    }
    Ok(())
}
