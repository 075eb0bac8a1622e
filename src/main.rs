//! The `posterity` command line: SQL with the posterity functions over Parquet,
//! CSV and JSON files. A thin binary over the library's shell.

#[global_allocator]
static ALLOCATOR: mimalloc::MiMalloc = mimalloc::MiMalloc;

fn main() -> std::process::ExitCode {
    let code = posterity::shell::cli::main(None);
    // Decompressed and converted copies of input files live only as long as the run.
    posterity::files::remove_temporaries();
    code
}
