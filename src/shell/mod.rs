//! The `posterity` shell: a DataFusion session with every posterity function
//! registered, tables from files, SQL from flags, files, standard input or an
//! interactive prompt. It reads and writes local paths only, runs no shell
//! commands and opens no network connection.

pub mod cli;
pub mod complete;
pub mod demo;
pub mod encode;
pub mod output;
pub mod split;

use std::io::{IsTerminal, Read};
use std::path::Path;
use std::time::Instant;

use datafusion::arrow::array::RecordBatch;
use datafusion::execution::runtime_env::RuntimeEnvBuilder;
use datafusion::prelude::{SessionConfig, SessionContext};

use output::Format;

pub use crate::files::CsvOptions;
use crate::files::FileError;

/// Settings shared by every way of running SQL.
pub struct Shell {
    pub ctx: SessionContext,
    pub format: Format,
    pub output: Option<std::path::PathBuf>,
    pub quiet: bool,
    pub csv: CsvOptions,
    /// At the interactive prompt: Ctrl-C cancels the running query, not the shell.
    pub interactive: bool,
    /// Statements run on a cluster, whose executors read files by their paths.
    pub cluster: bool,
}

/// Write `text` to standard output. A reader that went away (`| head`) ends the
/// shell quietly with success, as it does for other command-line tools.
pub fn emit(text: &str) -> Result<(), Failure> {
    use std::io::Write;
    let mut out = std::io::stdout().lock();
    match out.write_all(text.as_bytes()).and_then(|_| out.flush()) {
        Ok(()) => Ok(()),
        Err(e) if e.kind() == std::io::ErrorKind::BrokenPipe => Err(Failure::closed_pipe()),
        Err(e) => Err(Failure::query(format!(
            "cannot write to standard output: {e}"
        ))),
    }
}

/// Whether a statement returns rows to show (as opposed to creating, copying or setting).
pub fn returns_rows(sql: &str) -> bool {
    let first = sql
        .split(|c: char| c.is_whitespace() || c == '(')
        .find(|w| !w.is_empty())
        .unwrap_or("")
        .to_ascii_lowercase();
    matches!(
        first.as_str(),
        "select" | "with" | "values" | "show" | "describe" | "explain" | "table"
    )
}

/// An error already phrased for the user, with its exit code.
#[derive(Debug)]
pub struct Failure {
    pub message: String,
    pub code: i32,
}

impl Failure {
    pub fn query(message: impl Into<String>) -> Self {
        Failure {
            message: one_line(&message.into()),
            code: 1,
        }
    }
    pub fn usage(message: impl Into<String>) -> Self {
        Failure {
            message: one_line(&message.into()),
            code: 2,
        }
    }
    /// Standard output was closed by its reader: stop, quietly, with success.
    pub fn closed_pipe() -> Self {
        Failure {
            message: String::new(),
            code: 0,
        }
    }
}

/// Errors print on one line.
fn one_line(s: &str) -> String {
    s.split_whitespace().collect::<Vec<_>>().join(" ")
}

/// Parse a size such as 512M, 2G or 1048576.
pub fn parse_size(s: &str) -> Result<usize, String> {
    let t = s.trim().to_ascii_uppercase();
    let (digits, mult) = match t.chars().last() {
        Some('K') => (&t[..t.len() - 1], 1usize << 10),
        Some('M') => (&t[..t.len() - 1], 1 << 20),
        Some('G') => (&t[..t.len() - 1], 1 << 30),
        _ => (t.as_str(), 1),
    };
    digits
        .parse::<f64>()
        .ok()
        .filter(|v| v.is_finite() && *v > 0.0)
        .map(|v| (v * mult as f64) as usize)
        .ok_or_else(|| {
            format!("invalid size '{s}'; use a number with an optional K, M or G suffix, e.g. 2G")
        })
}

/// Transparent huge pages off for this process; the shell, the cluster's
/// processes and the Python extension call it first. All allocate with mimalloc, which hands freed memory
/// back to the system in pieces; where the system backs memory with huge pages
/// (`always`, as on this project's machines), every piece touched again faulted in
/// and zeroed a whole 2 MiB page, and as-of encodings spent most of their time in
/// the kernel (4 keys on 2 M rows: 19.5 s, 18 s of it system time; 6 s without
/// huge pages; BENCHMARKS.md). It is what mimalloc does itself when its
/// `allow_thp` option is off, which it reads before any code of ours runs. Huge
/// pages are a speed hint only: nothing else changes.
pub fn without_huge_pages() {
    #[cfg(target_os = "linux")]
    // SAFETY: prctl with PR_SET_THP_DISABLE only sets a flag of this process; an
    // error (an old kernel) leaves the default, which is still correct.
    unsafe {
        libc::prctl(libc::PR_SET_THP_DISABLE, 1, 0, 0, 0);
    }
}

/// A session with posterity registered, the memory limit and thread count applied.
pub fn session(
    memory_limit: Option<usize>,
    threads: Option<usize>,
) -> Result<SessionContext, Failure> {
    let mut config = SessionConfig::new().with_information_schema(true);
    if let Some(n) = threads {
        config = config.with_target_partitions(n.max(1));
    }
    let mut runtime = RuntimeEnvBuilder::new();
    if let Some(bytes) = memory_limit {
        runtime = runtime.with_memory_limit(bytes, 1.0);
    }
    let runtime = runtime
        .build_arc()
        .map_err(|e| Failure::usage(e.to_string()))?;
    let state = crate::optimizer::with_build_on_aggregate(
        datafusion::execution::session_state::SessionStateBuilder::new()
            .with_config(config)
            .with_runtime_env(runtime)
            .with_default_features(),
    )
    .build();
    // File paths quoted directly in FROM ('appointments.parquet') resolve to tables.
    let ctx = SessionContext::new_with_state(state).enable_url_table();
    crate::register(&ctx);
    Ok(ctx)
}

impl Shell {
    /// Register `NAME=PATH` (a file, a directory of files or a glob).
    pub async fn register_table(&self, spec: &str) -> Result<(), Failure> {
        let Some((name, path)) = spec.split_once('=') else {
            return Err(Failure::usage(format!(
                "--table expects NAME=PATH, got '{spec}'"
            )));
        };
        let (name, path) = (name.trim(), path.trim());
        if name.is_empty() || path.is_empty() {
            return Err(Failure::usage(format!(
                "--table expects NAME=PATH, got '{spec}'"
            )));
        }
        self.register_file(name, path, &format!("--table {name}"), &[])
            .await
    }

    /// Register the file(s) at `path` as table `name`, reading CSV columns `text`
    /// (beyond `--csv-text`) as text exactly as written. Messages name `option`,
    /// the way the user gave the path (`--table NAME`, `--train`).
    pub async fn register_file(
        &self,
        name: &str,
        path: &str,
        option: &str,
        text: &[String],
    ) -> Result<(), Failure> {
        if let Some(kind) = self
            .cluster
            .then(|| crate::files::read_from_copy(path))
            .flatten()
        {
            return Err(Failure::usage(format!(
                "{option}: '{path}' is {kind}, which is read from a copy on this machine, and \
                 the cluster's executors read files by their paths; decompress or convert it \
                 where every executor can read it (Parquet, CSV or NDJSON)"
            )));
        }
        let mut csv = self.csv.clone();
        csv.text.extend_from_slice(text);
        crate::files::register(&self.ctx, name, path, &csv)
            .await
            .map_err(|e| match e {
                FileError::Usage(m) => Failure::usage(format!("{option}: {m}")),
                FileError::Read(m) => Failure::query(format!("{option}: {m}")),
                FileError::Engine { path, message } => {
                    Failure::query(format!("{option} ({path}): {message}"))
                }
            })
    }

    /// Run every statement of `script`; stop at the first error.
    pub async fn run_script(&self, script: &str, source: &str) -> Result<(), Failure> {
        let (statements, _) = split::statements(script);
        for sql in statements {
            self.run(&sql).await.map_err(|e| match e.code {
                0 => e,
                _ => Failure::query(format!("{source}: {}", e.message)),
            })?;
        }
        Ok(())
    }

    /// Run one statement and print (or write) its result.
    pub async fn run(&self, sql: &str) -> Result<(), Failure> {
        let started = Instant::now();
        let batches = self
            .collect(sql)
            .await
            .map_err(|f| with_cluster_hint(f, sql))?;
        let rows: usize = batches.iter().map(RecordBatch::num_rows).sum();
        let feedback = match self.feedback(sql, &batches).await {
            Some(feedback) => feedback,
            None => {
                let width = match &self.output {
                    None => output::terminal_width(),
                    Some(_) => None,
                };
                let text = output::render(&batches, self.format, width).map_err(Failure::query)?;
                match &self.output {
                    Some(path) => output::write_atomically(path, &text).map_err(|e| {
                        Failure::query(format!("cannot write {}: {e}", path.display()))
                    })?,
                    None => emit(&text)?,
                }
                rows_text(rows)
            }
        };
        if !self.quiet && (std::io::stderr().is_terminal() || !returns_rows(sql)) {
            // The status line: what happened, then how long it took.
            eprintln!("= {feedback} ({})", elapsed(started));
        }
        Ok(())
    }

    /// What a statement that returns no rows of its own did, in words: rows written
    /// by COPY (and where), rows stored by CREATE TABLE ... AS. `None` for queries.
    async fn feedback(&self, sql: &str, batches: &[RecordBatch]) -> Option<String> {
        use datafusion::sql::parser::{DFParser, Statement};
        use datafusion::sql::sqlparser::ast;
        let statement = DFParser::parse_sql(sql).ok()?.pop_front()?;
        match statement {
            Statement::CopyTo(copy) => {
                let written = batches
                    .first()
                    .filter(|b| b.num_rows() > 0 && b.num_columns() > 0)
                    .and_then(|b| {
                        datafusion::arrow::compute::cast(
                            b.column(0),
                            &datafusion::arrow::datatypes::DataType::UInt64,
                        )
                        .ok()
                    })
                    .map(|c| {
                        use datafusion::arrow::array::AsArray;
                        c.as_primitive::<datafusion::arrow::datatypes::UInt64Type>()
                            .value(0)
                    })
                    .unwrap_or(0);
                Some(format!(
                    "wrote {} to {}",
                    rows_text(written as usize),
                    copy.target
                ))
            }
            Statement::Statement(s) => match *s {
                ast::Statement::CreateTable(create) if create.query.is_some() => {
                    let name = create.name.to_string();
                    let stored = match self.ctx.table(name.as_str()).await {
                        Ok(df) => df.count().await.ok(),
                        Err(_) => None,
                    };
                    Some(match stored {
                        Some(n) => format!("stored {} in table {name}", rows_text(n)),
                        None => format!("created table {name}"),
                    })
                }
                ast::Statement::CreateTable(create) => {
                    Some(format!("created table {}", create.name))
                }
                _ if !returns_rows(sql) && batches.iter().all(|b| b.num_columns() == 0) => {
                    Some("done".into())
                }
                _ => None,
            },
            Statement::CreateExternalTable(t) => Some(format!("registered table {}", t.name)),
            _ => None,
        }
    }

    pub async fn collect(&self, sql: &str) -> Result<Vec<RecordBatch>, Failure> {
        crate::clauses::check_sql(&self.ctx, sql)
            .map_err(|e| Failure::query(crate::render::engine_error(e)))?;
        let df = self
            .ctx
            .sql(sql)
            .await
            .map_err(|e| Failure::query(crate::render::engine_error(e)))?;
        let progress = !self.quiet && std::io::stderr().is_terminal();
        if !progress && !self.interactive {
            return df
                .collect()
                .await
                .map_err(|e| Failure::query(crate::render::engine_error(e)));
        }
        // At a terminal: a live progress line (elapsed time, rows read by the scans);
        // at the prompt, Ctrl-C cancels the query and keeps the session.
        let task = self.ctx.task_ctx();
        let plan = df
            .create_physical_plan()
            .await
            .map_err(|e| Failure::query(crate::render::engine_error(e)))?;
        let started = Instant::now();
        let mut run = tokio::spawn(datafusion::physical_plan::collect(plan.clone(), task));
        let mut shown = false;
        let interrupt = async {
            if self.interactive {
                tokio::signal::ctrl_c().await.ok();
            } else {
                std::future::pending::<()>().await;
            }
        };
        tokio::pin!(interrupt);
        let result = loop {
            tokio::select! {
                r = &mut run => break Some(r),
                _ = &mut interrupt => {
                    run.abort();
                    break None;
                }
                _ = tokio::time::sleep(std::time::Duration::from_millis(300)), if progress => {
                    eprint!("\r{:.1} s, {} rows read ", started.elapsed().as_secs_f64(), rows_read(plan.as_ref()));
                    shown = true;
                }
            }
        };
        if shown {
            eprint!("\r\x1b[2K");
        }
        match result {
            None => Err(Failure::query(format!(
                "cancelled (Ctrl-C) after {}; tables and settings are kept",
                elapsed(started)
            ))),
            Some(Ok(r)) => r.map_err(|e| Failure::query(crate::render::engine_error(e))),
            Some(Err(e)) => Err(Failure::query(format!("query task failed: {e}"))),
        }
    }

    /// SQL from standard input when it is not a terminal, else the prompt.
    pub async fn run_stdin_or_prompt(&self) -> Result<(), Failure> {
        if std::io::stdin().is_terminal() {
            self.prompt().await
        } else {
            let mut script = String::new();
            std::io::stdin()
                .read_to_string(&mut script)
                .map_err(|e| Failure::query(format!("cannot read standard input: {e}")))?;
            self.run_script(&script, "stdin").await
        }
    }

    /// The interactive prompt: statements end at `;`; errors are reported and the
    /// prompt goes on. Commands start with a colon.
    ///
    /// The prompt is posterity's own: `1 ▸ ` numbers the statement being typed (so a
    /// long session can be followed back), and a continuation line shows `  ┆ ` plus
    /// what is still open — a quote or parentheses — because an unclosed quote is the
    /// usual reason a statement does not end. The status line after each statement
    /// starts with `=`: rows (or what was written or stored) and the time taken.
    async fn prompt(&self) -> Result<(), Failure> {
        let mut editor =
            rustyline::Editor::<complete::Words, rustyline::history::DefaultHistory>::new()
                .map_err(|e| Failure::query(e.to_string()))?;
        let history = std::env::var_os("HOME").map(|h| Path::new(&h).join(".posterity_history"));
        if let Some(h) = &history {
            editor.load_history(h).ok();
        }
        println!(
            "posterity {} — SQL ends with ';'. :help for commands, :q (or exit) to leave.",
            env!("CARGO_PKG_VERSION")
        );
        let mut pending = String::new();
        let mut number = 1;
        let mut interrupted = false;
        loop {
            let prompt = if pending.is_empty() {
                format!("{number} ▸ ")
            } else {
                format!(
                    "{}┆{} ",
                    " ".repeat(number.to_string().len() + 1),
                    split::open_marks(&pending)
                )
            };
            editor.set_helper(Some(complete::Words::of(&self.ctx).await));
            let line = match editor.readline(&prompt) {
                Ok(line) => line,
                Err(rustyline::error::ReadlineError::Interrupted) => {
                    if pending.is_empty() && interrupted {
                        break;
                    }
                    if pending.is_empty() {
                        eprintln!("(Ctrl-C again, :q or exit to leave)");
                    }
                    interrupted = true;
                    pending.clear();
                    continue;
                }
                Err(rustyline::error::ReadlineError::Eof) => {
                    // Ctrl-D: a part-typed statement is run, not dropped.
                    if !pending.trim().is_empty() {
                        self.run_pending(&format!("{pending};"), &mut editor).await;
                    }
                    break;
                }
                Err(_) => break,
            };
            interrupted = false;
            let word = line.trim().trim_end_matches(';').to_ascii_lowercase();
            if pending.is_empty() && matches!(word.as_str(), "exit" | "quit") {
                break;
            }
            if pending.is_empty() && line.trim_start().starts_with(':') {
                editor.add_history_entry(line.as_str()).ok();
                if !self.command(line.trim()).await {
                    break;
                }
                continue;
            }
            pending.push_str(&line);
            pending.push('\n');
            let (_, unfinished) = split::statements(&pending);
            if unfinished {
                continue;
            }
            if self.run_pending(&pending, &mut editor).await {
                number += 1;
            }
            pending.clear();
        }
        if let Some(h) = &history {
            editor.save_history(h).ok();
        }
        Ok(())
    }

    /// Run the statements typed at the prompt; false when there were none.
    async fn run_pending(
        &self,
        text: &str,
        editor: &mut rustyline::Editor<complete::Words, rustyline::history::DefaultHistory>,
    ) -> bool {
        let (statements, _) = split::statements(text);
        editor.add_history_entry(text.trim()).ok();
        for sql in &statements {
            if let Err(e) = self.run(sql).await {
                if e.code == 0 {
                    break;
                }
                eprintln!("error: {}", e.message);
            }
        }
        !statements.is_empty()
    }

    /// Prompt commands; returns false to quit.
    async fn command(&self, line: &str) -> bool {
        let mut words = line.split_whitespace();
        let result = match words.next().unwrap_or("") {
            ":quit" | ":q" | ":exit" => return false,
            ":help" => {
                println!(
                    ":tables            list tables\n:describe NAME     columns of a table\n\
                     :functions [NAME]  posterity function reference\n\
                     :q, :quit, exit    leave (or Ctrl-D; Ctrl-C twice at an empty prompt)\n\
                     Anything else is SQL, ending with ';'. Ctrl-C cancels a running query."
                );
                Ok(())
            }
            ":tables" => self.run("SELECT table_name, table_type FROM information_schema.tables WHERE table_schema = 'public' ORDER BY table_name").await,
            ":describe" => match words.next() {
                Some(name) => self.run(&format!("DESCRIBE \"{}\"", name.replace('"', "\"\""))).await,
                None => Err(Failure::usage(":describe needs a table name")),
            },
            ":functions" => emit(&functions_help(words.next()).unwrap_or_else(|e| e.message)),
            other => Err(Failure::usage(format!("unknown command {other}; type :help"))),
        };
        if let Err(e) = result {
            eprintln!("error: {}", e.message);
        }
        true
    }
}

/// `posterity functions [NAME]`: the reference from the functions' documentation.
pub fn functions_help(name: Option<&str>) -> Result<String, Failure> {
    let functions = crate::docs::FUNCTIONS;
    match name {
        Some(n) => functions
            .iter()
            .find(|f| f.name.eq_ignore_ascii_case(n))
            .map(crate::docs::help_text)
            .ok_or_else(|| {
                Failure::usage(format!(
                    "no posterity function named '{n}'; run 'posterity functions' for the list"
                ))
            }),
        None => Ok(format!(
            "{}\nDetails: posterity functions NAME\n",
            crate::docs::summary_text()
        )),
    }
}

/// "1 row", "2 rows".
fn rows_text(rows: usize) -> String {
    format!("{rows} {}", if rows == 1 { "row" } else { "rows" })
}

/// A duration for people: milliseconds below a second.
fn elapsed(started: Instant) -> String {
    let s = started.elapsed().as_secs_f64();
    if s < 1.0 {
        format!("{:.0} ms", s * 1000.0)
    } else {
        format!("{s:.2} s")
    }
}

/// Rows produced so far by the plan's leaves (the scans), from the engine's metrics.
fn rows_read(plan: &dyn datafusion::physical_plan::ExecutionPlan) -> usize {
    let children = plan.children();
    if children.is_empty() {
        plan.metrics().and_then(|m| m.output_rows()).unwrap_or(0)
    } else {
        children.iter().map(|c| rows_read(c.as_ref())).sum()
    }
}

/// A cluster reports a task an executor could not decode only as "rejected"; for
/// posterity's SQL the usual cause is an executor without posterity's functions, so
/// name the ones the statement uses and the executor that has them.
fn with_cluster_hint(f: Failure, sql: &str) -> Failure {
    if !f.message.contains("rejected by executor") {
        return f;
    }
    let lower = sql.to_lowercase();
    let names = crate::scalar::all()
        .into_iter()
        .map(|f| f.name().to_string())
        .chain(
            crate::aggregates()
                .into_iter()
                .map(|f| f.name().to_string()),
        )
        .chain(
            crate::window_functions()
                .into_iter()
                .map(|f| f.name().to_string()),
        );
    let used: Vec<String> = names.filter(|n| lower.contains(&format!("{n}("))).collect();
    if used.is_empty() {
        return f;
    }
    Failure::query(format!(
        "{}; the statement uses {}: an executor that is not a posterity-executor lacks \
         these functions (start executors with posterity-executor)",
        f.message,
        used.join(", ")
    ))
}
