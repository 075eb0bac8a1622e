//! The `posterity` command line: SQL with the posterity functions over Parquet,
//! CSV and JSON files. A thin binary over the library's shell.

#[global_allocator]
static ALLOCATOR: mimalloc::MiMalloc = mimalloc::MiMalloc;

fn main() -> std::process::ExitCode {
    posterity::shell::cli::main(None)
}
